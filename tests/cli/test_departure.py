#!/usr/bin/python3
"""A flight that leaves its pack's trend (issue 15, part 2), through the CLI.

Three checks, each printed as a table row:
  1. Step: 30 ordinary simulated flights of one pack (scripts/pbsim.py, the demo season's
     recipe for a healthy pack: R0 4.0 mOhm/cell rising 0.3 %/week with 2 % flight-to-flight
     scatter), then one flight with R0 35 % above its trend (issue 15's example). Expected:
     no flag on the 30, the step flagged by import on the flight itself (detected within one
     flight), shown by fleet and pack show until `flight ack`, then gone.
  2. Ordinary seasons: scripts/make-season.py's demo season (seed 2026) and a second one
     (seed 2027), about 210 flights with no damage in them (two healthy packs, one fading
     steadily, one with a weak cell, a barely used one, a LiHV one). Expected: no flag.
  3. NASA ageing cells B0006 and B0007 (tests/data/nasa-pcoe-aging, README there: Saha and
     Goebel 2007, US government public release), every cycle imported one a day as
     tests/cli/test_realcells.py does. Their capacity recovers after rests (the cycles whose
     reference capacity is 1 % of rated or more above the cycle before, from the data set's
     B000x_reference.csv). Expected: none of those recoveries, and no capacity at all, flagged.

Seeds are fixed and printed. Run time: about 2 minutes (the seasons' simulation is most of it).
"""
import concurrent.futures
import datetime
import json
import os
import random
import subprocess
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from pbtest import PACKBOOK, PBSIM, PY, ROOT, run, temp_dir  # noqa: E402
import test_realcells as rc  # noqa: E402

ROWS = []


def row(what, measured, target, source, ok):
    ROWS.append((what, measured, target, source, "pass" if ok else "FAIL"))


def sim(path, seed, r0_cell, cap_mah, start):
    args = [PY, PBSIM, "--packbook", PACKBOOK, "-o", path, "--seed", seed, "--cells", 4,
            "--chemistry", "lipo", "--capacity-mah", f"{cap_mah:.1f}", "--r0-mohm-cell",
            f"{r0_cell:.4f}", "--soc0", "97", "--hover-a", 20, "--duration-s", 540,
            "--rate-hz", 1, "--start-epoch", int(start.timestamp()), "--format", "epoch"]
    subprocess.run([str(a) for a in args], check=True, capture_output=True)
    return path


def departures(db, pack):
    rcode, out, err = run("pack", "show", pack, "--json", "--db", db)
    assert rcode == 0, err
    return [(f["id"], f["departure"]) for f in json.loads(out)["flights"] if f["departure"]]


def check_step(tmp):
    seed = 1515
    print(f"step: seed {seed}")
    rng = random.Random(seed)
    db = os.path.join(tmp, "step.db")
    rcode, out, err = run("pack", "add", "ST-01", "--cells", 4, "--chemistry", "lipo",
                          "--capacity", 5000, "--db", db)
    assert rcode == 0, err
    start0 = datetime.datetime(2026, 3, 2, 9, 0, tzinfo=datetime.timezone.utc)
    logs = os.path.join(tmp, "st")
    os.makedirs(logs)
    jobs = []
    for k in range(31):
        start = start0 + datetime.timedelta(days=2 * k)
        weeks = 2 * k / 7.0
        r = 4.0 * (1.0 + 0.003 * weeks) * (1.0 + rng.gauss(0.0, 0.02))
        cap = 5000.0 * (1.0 - 0.001 * weeks) * (1.0 + rng.gauss(0.0, 0.01))
        if k == 30:
            r *= 1.35  # the step: issue 15's "R up 35 %"
        jobs.append((os.path.join(logs if k < 30 else tmp, f"st-{k:02d}.csv"), seed * 100 + k,
                     r, cap, start))
    with concurrent.futures.ThreadPoolExecutor(2) as ex:
        list(ex.map(lambda j: sim(*j), jobs))
    rcode, out, err = run("import", "--pack", "ST-01", "--db", db, "--quiet", logs)
    assert rcode == 0, err
    before = departures(db, "ST-01")
    row("step: 30 ordinary flights before the step", f"{len(before)} flagged", "0 flagged",
        "pbsim, the demo season's healthy recipe", not before)
    rcode, out, err = run("import", "--pack", "ST-01", "--db", db, jobs[30][0])
    assert rcode == 0, err
    line = next((x for x in out.splitlines() if x.startswith("inspect:")), "")
    dep = departures(db, "ST-01")
    ok = len(dep) == 1 and dep[0][1]["quantity"] == "IR" and "IR up" in line
    row("step: R0 +35 % on flight 31, import names it", line[:90] or "no inspect line",
        "flagged on that flight (IR up)", "injected step", ok)
    if not dep:
        return
    fid, d = dep[-1]
    print(f"  step flight {fid}: {d}")
    rcode, out, err = run("fleet", "--json", "--db", db)
    fl = json.loads(out)[0]
    shown = fl["departures_unacknowledged"] == 1 and "inspect: flight" in fl["reason"]
    rcode, out, err = run("flight", "ack", fid, "--note", "inspected, no damage", "--db", db)
    acked = rcode == 0 and "acknowledged" in out
    rcode, out, err = run("fleet", "--json", "--db", db)
    fl2 = json.loads(out)[0]
    gone = fl2["departures_unacknowledged"] == 0 and "inspect" not in fl2["reason"]
    row("step: fleet shows it until flight ack, then not", f"before {shown}, ack {acked}, after {gone}",
        "True, True, True", "issue 15", shown and acked and gone)


def check_seasons(tmp):
    total, flagged = 0, []
    for seed in (2026, 2027):
        db = os.path.join(tmp, f"season{seed}.db")
        env = dict(os.environ, PACKBOOK_DB=db)
        p = subprocess.run([PY, os.path.join(ROOT, "scripts", "make-season.py"), "--seed",
                            str(seed), "--import", "--packbook", PACKBOOK,
                            os.path.join(tmp, f"season{seed}")], env=env, capture_output=True,
                           text=True)
        assert p.returncode == 0, p.stderr[-2000:]
        rcode, out, err = run("fleet", "--json", "--db", db)
        assert rcode == 0, err
        for pk in json.loads(out):
            total += pk["flights"]
            for fid, d in departures(db, pk["id"]):
                flagged.append(f"{seed}/{pk['id']}/{fid}: {d['quantity']} {d['sigmas']:.1f}σ")
        print(f"season seed {seed}: done")
    row(f"ordinary seasons (seeds 2026, 2027): {total} flights", f"{len(flagged)} flagged "
        + "; ".join(flagged[:3]), "0 flagged", "scripts/make-season.py", not flagged and total >= 200)


def check_nasa(tmp):
    for cell in ("B0006", "B0007"):
        header, cycles, cols, ref = rc.nasa_load(cell)
        db = os.path.join(tmp, cell + ".db")
        rcode, out, err = run("pack", "add", cell, *rc.NASA_PACK, "--db", db)
        assert rcode == 0, err
        day0 = datetime.date(2026, 1, 1)
        for n in sorted(cycles):
            path = os.path.join(tmp, f"{cell}-{n:03d}.csv")
            with open(path, "w", newline="") as f:
                f.write(header + "".join(cycles[n]))
            date = (day0 + datetime.timedelta(days=n - 1)).isoformat()
            rcode, out, err = run("import", "--pack", cell, "--db", db, "--date", date, "--quiet",
                                  *rc.NASA_READ, "--floor", str(rc.NASA_CUTOFF_V[cell]), path)
            assert rcode == 0, err
            os.remove(path)
        rcode, out, err = run("pack", "show", cell, "--json", "--db", db)
        flights = json.loads(out)["flights"]
        # cycle n is the n-th flight (one a day)
        recov = [n for n in sorted(ref) if n > 1 and ref[n] - ref[n - 1] >= 0.01 * 2.0]
        dep = {k + 1: f["departure"] for k, f in enumerate(flights) if f["departure"]}
        cap_flags = [n for n, d in dep.items() if d["quantity"] == "capacity"]
        on_recov = [n for n in recov if n in dep]
        print(f"  {cell}: recoveries after rest at cycles {recov}; flags {dep}")
        row(f"{cell}: recoveries after rest ({len(recov)} cycles) not flagged",
            f"{len(on_recov)} flagged; capacity flags anywhere: {len(cap_flags)}; "
            f"any flag: {len(dep)}", "0 and 0", rc.NASA_SRC,
            not on_recov and not cap_flags and len(recov) >= 3)


def main():
    tmp = temp_dir("pb-departure-")
    for name, fn in (("step", check_step), ("seasons", check_seasons), ("NASA", check_nasa)):
        print(f"{name}:")
        try:
            fn(tmp)
        except Exception as e:  # the table still prints
            ROWS.append((f"{name}: harness", f"error: {type(e).__name__}: {e}", "runs", "-", "FAIL"))
    head = ("what", "measured", "target", "source", "result")
    print("| " + " | ".join(head) + " |")
    print("|" + "|".join("---" for _ in head) + "|")
    for r in ROWS:
        print("| " + " | ".join(str(x).replace("|", "/") for x in r) + " |")
    bad = sum(r[4] != "pass" for r in ROWS)
    print(f"{len(ROWS) - bad} of {len(ROWS)} met")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
