#!/usr/bin/python3
"""Matched pairs (issue 15, part 3) through the CLI: pack pair proposes, registers and unpairs;
fleet keeps a registered pair together and warns when it is beyond the limits.

Four 4S LiPo packs simulated with scripts/pbsim.py (fixed seeds), three flights each, with true
capacities 5000, 4950, 4200 and 4150 mAh and R0 4.0 mOhm per cell, plus one 6S LiHV pack.
Expected (from the simulator's truth and pairs.h's limits: capacity within 5 %, R0 within 15 %):
the proposals pair the 5000 with the 4950 and the 4200 with the 4150 (about 1 % apart, d well
under 1) and never the LiHV pack; the 5000 registered with the 4200 (17 % apart) is beyond the
limits, so fleet names the drift for both and shows them one after the other.

The default method is optimal: its total d is checked against every possible pairing of the packs,
enumerated here from pairs.h's formula and fleet --json's capacity and R0 per cell (tolerance
1e-7 relative: JSON carries 10 significant digits); --method greedy is never better, and the text output names the
method and the total.
"""
import concurrent.futures
import datetime
import itertools
import json
import math
import os
import subprocess
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from pbtest import PACKBOOK, PBSIM, PY, run, temp_dir  # noqa: E402

EXIT_USAGE = 2  # man packbook, EXIT STATUS

PACKS = [("PA-1", 5000.0), ("PA-2", 4950.0), ("PB-1", 4200.0), ("PB-2", 4150.0)]


def sim(path, seed, cells, chem, cap, start):
    args = [PY, PBSIM, "--packbook", PACKBOOK, "-o", path, "--seed", seed, "--cells", cells,
            "--chemistry", chem, "--capacity-mah", cap, "--r0-mohm-cell", "4.0", "--soc0", "97",
            "--hover-a", 20, "--duration-s", 540, "--rate-hz", 1, "--start-epoch",
            int(start.timestamp()), "--format", "epoch"]
    subprocess.run([str(a) for a in args], check=True, capture_output=True)


def distance(x, y):
    """pairs.h: d of two packs (rated 5000 mAh each here) from fleet --json's values."""
    ca, cb = x["capacity_pct"] * 50.0, y["capacity_pct"] * 50.0
    dc = 100.0 * abs(ca - cb) / (0.5 * (ca + cb))
    ra, rb = x["r0_mohm_per_cell"], y["r0_mohm_per_cell"]
    dr = 100.0 * abs(ra - rb) / (0.5 * (ra + rb)) if ra and rb else 0.0
    return math.hypot(dc / 5.0, dr / 15.0)


def best_total(packs):
    """The least total d over every pairing of an even list of packs (enumerated)."""
    if not packs:
        return 0.0
    first, rest = packs[0], packs[1:]
    return min(distance(first, rest[j]) + best_total(rest[:j] + rest[j + 1:])
               for j in range(len(rest)))


def main():
    tmp = temp_dir("pb-pairs-")
    db = os.path.join(tmp, "pairs.db")
    start0 = datetime.datetime(2026, 4, 6, 9, 0, tzinfo=datetime.timezone.utc)
    jobs = []
    for i, (label, cap) in enumerate(PACKS + [("PC-1", 4200.0)]):
        cells, chem = (6, "lihv") if label == "PC-1" else (4, "lipo")
        rc, out, err = run("pack", "add", label, "--cells", cells, "--chemistry", chem,
                           "--capacity", 5000, "--db", db)
        assert rc == 0, err
        os.makedirs(os.path.join(tmp, label))
        for k in range(3):
            jobs.append((os.path.join(tmp, label, f"f{k}.csv"), 700 + 10 * i + k, cells, chem, cap,
                         start0 + datetime.timedelta(days=k, hours=i)))
    print("seeds 700-741")
    with concurrent.futures.ThreadPoolExecutor(2) as ex:
        list(ex.map(lambda j: sim(*j), jobs))
    for label, _ in PACKS + [("PC-1", 0)]:
        rc, out, err = run("import", "--pack", label, "--db", db, "--quiet", os.path.join(tmp, label))
        assert rc == 0, err

    rc, out, err = run("pack", "pair", "--json", "--db", db)
    assert rc == 0, err
    doc = json.loads(out)
    got = sorted(tuple(sorted((p["a"], p["b"]))) for p in doc["proposed"])
    print("proposed:", [(p["a"], p["b"], round(p["distance"], 2)) for p in doc["proposed"]])
    assert got == [("PA-1", "PA-2"), ("PB-1", "PB-2")], got
    assert all(p["within_limits"] for p in doc["proposed"]), doc
    assert doc["registered"] == []
    assert doc["method"] == "optimal" and doc["optimal"], doc
    assert abs(doc["total_distance"] - sum(p["distance"] for p in doc["proposed"])) < 1e-7, doc
    rc, out, err = run("fleet", "--json", "--db", db)
    assert rc == 0, err
    lipo = [p for p in json.loads(out) if p["id"] != "PC-1"]
    opt = best_total(lipo)
    print(f"optimal total d {doc['total_distance']:.6f}, by enumeration {opt:.6f}")
    assert abs(doc["total_distance"] - opt) <= 1e-7 * max(1.0, opt), (doc, opt)
    rc, out, err = run("pack", "pair", "--json", "--method", "greedy", "--db", db)
    assert rc == 0, err
    greedy = json.loads(out)
    assert greedy["method"] == "greedy" and greedy["total_distance"] >= opt - 1e-7, greedy
    rc, out, err = run("pack", "pair", "--db", db)
    assert rc == 0 and "optimal: the least total d), total d " in out, out
    rc, out, err = run("pack", "pair", "--method", "closest", "--db", db)
    assert rc == EXIT_USAGE and "expected optimal or greedy" in err, (rc, err)

    # usage errors: another chemistry, itself, a pack paired already
    rc, out, err = run("pack", "pair", "PA-1", "PC-1", "--db", db)
    assert rc == EXIT_USAGE and "differ" in err, (rc, err)
    rc, out, err = run("pack", "pair", "PA-1", "PA-1", "--db", db)
    assert rc == EXIT_USAGE, (rc, err)
    rc, out, err = run("pack", "pair", "PA-1", "PA-2", "--method", "greedy", "--db", db)
    assert rc == EXIT_USAGE and "nothing to choose" in err, (rc, err)

    # a badly matched pair: beyond the limits, named by fleet for both, shown together
    rc, out, err = run("pack", "pair", "PA-1", "PB-1", "--db", db)
    assert rc == 0, err
    rc, out, err = run("pack", "pair", "PB-1", "PB-2", "--db", db)
    assert rc == EXIT_USAGE and "paired already" in err, (rc, err)
    rc, out, err = run("fleet", "--json", "--sort", "pack", "--db", db)
    assert rc == 0, err
    fl = json.loads(out)
    order = [p["id"] for p in fl]
    print("fleet order (--sort pack):", order)
    i = order.index("PA-1")
    assert order[i + 1] == "PB-1", order  # kept together (PA-2 would come between by label)
    for p in fl:
        drifted = "drifted apart" in p["reason"]
        assert drifted == (p["id"] in ("PA-1", "PB-1")), p
        if drifted:
            assert p["status"] != "ok" and p["pair_distance"] > 1.0, p
    rc, out, err = run("pack", "pair", "--json", "--db", db)
    doc = json.loads(out)
    assert [(r["a"], r["b"]) for r in doc["registered"]] == [("PA-1", "PB-1")], doc
    assert not doc["registered"][0]["within_limits"]
    # proposals among the rest only
    assert sorted(tuple(sorted((p["a"], p["b"]))) for p in doc["proposed"]) == [("PA-2", "PB-2")]

    rc, out, err = run("pack", "unpair", "PB-1", "--db", db)
    assert rc == 0 and "unpaired" in out, (rc, out, err)
    rc, out, err = run("fleet", "--json", "--db", db)
    assert all("drifted" not in p["reason"] and p["paired_with"] is None for p in json.loads(out))
    print("pairs: all checks passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
