#!/usr/bin/python3
"""make-season: ten weeks of simulated flight logs for a small invented fleet.

The scenario is invented: the Tallowmere Survey Co-operative flies mapping
sorties over Brindle Fen from Monday 2026-03-02 for ten weeks with six packs:

  TM-01, TM-02  4S 5000 mAh LiPo, healthy (small flight-to-flight noise)
  TM-03         4S 5000 mAh LiPo, fading fast: capacity -1.8 % of rated per
                week, R0 +8 % of its first value per week (both linear)
  TM-04         4S 5000 mAh LiPo with a weak cell 3 (cell-voltage logs)
  TM-05         4S 5000 mAh LiPo, barely used (3 flights)
  TM-06         6S 4200 mAh LiHV, healthy

Every log comes from scripts/pbsim.py with a fixed seed (--seed, default 2026;
each flight's seed is printed in truth.csv), so the same seed gives the same
files byte for byte. Logs carry absolute time (a time_unix column): the
epoch-format logs from pbsim directly, the cell-voltage logs of TM-04 by
adding the flight's start to pbsim's relative time column. The file's
modification time is set to the flight's start as well.

Layout of the output folder:
  DIR/TM-01/*.csv ...   one folder of logs per pack (only logs: import takes
                        every file of the folder)
  DIR/truth.csv         per flight: pack, file, seed, start, simulated R0 per
                        cell and capacity (what packbook should estimate)

usage: make-season.py [--seed N] [--import] [--packbook PATH] [DIR]

Without DIR a new temporary folder is made (printed at the end). With
--import the packs are registered (pack add) and each pack's folder is
imported with one 'packbook import' per pack, into the database named by
PACKBOOK_DB (required, so that nothing lands in a default location).
"""
import argparse
import concurrent.futures
import csv
import datetime
import os
import random
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.normpath(os.path.join(HERE, ".."))
PBSIM = os.path.join(HERE, "pbsim.py")
PYTHON = "/usr/bin/python3"  # Debian's, with numpy

SEASON_START = datetime.datetime(2026, 3, 2, tzinfo=datetime.timezone.utc)  # a Monday
SEASON_DAYS = 70  # ten weeks

# label, cells, chemistry, rated mAh, flights, kind, base R0 per cell (mOhm),
# hover current (A), flight length (s), note
FLEET = [
    ("TM-01", 4, "lipo", 5000, 22, "healthy", 4.0, 20.0, 540, "north transect quad"),
    ("TM-02", 4, "lipo", 5000, 20, "healthy", 4.4, 20.0, 540, "north transect quad"),
    ("TM-03", 4, "lipo", 5000, 24, "fading", 4.0, 19.0, 540, "reed-bed quad, bought used"),
    ("TM-04", 4, "lipo", 5000, 20, "weak-cell", 4.2, 22.0, 600, "reed-bed quad, cell logger"),
    ("TM-05", 4, "lipo", 5000, 3, "healthy", 4.1, 20.0, 540, "spare"),
    ("TM-06", 6, "lihv", 4200, 16, "healthy", 5.0, 18.0, 540, "heavy-lift hexa"),
]


def flight_plan(seed):
    """Every flight of the season: a list of dicts (pack, start, pbsim arguments, truth)."""
    plan = []
    for pi, (label, cells, chem, rated, n, kind, r0, hover, dur, _note) in enumerate(FLEET):
        rng = random.Random(seed * 100 + pi)
        days = sorted(rng.sample(range(SEASON_DAYS), n))
        for k, day in enumerate(days):
            start = SEASON_START + datetime.timedelta(days=day, hours=rng.uniform(7.0, 16.0))
            start = start.replace(microsecond=0)
            weeks = (start - SEASON_START).total_seconds() / (7 * 86400.0)
            if kind == "fading":
                cap = rated * (1.0 - 0.018 * weeks) * (1.0 + rng.gauss(0.0, 0.005))
                r = r0 * (1.0 + 0.08 * weeks) * (1.0 + rng.gauss(0.0, 0.01))
            else:
                # healthy packs: a slow fade (0.1 %/week, R0 +0.3 %/week) and a little noise
                cap = rated * (1.0 - 0.001 * weeks) * (1.0 + rng.gauss(0.0, 0.01))
                r = r0 * (1.0 + 0.003 * weeks) * (1.0 + rng.gauss(0.0, 0.02))
            fseed = seed * 10000 + pi * 100 + k
            name = f"{label.lower()}-{start:%Y%m%dT%H%M}.csv"
            args = ["--seed", fseed, "--cells", cells, "--chemistry", chem,
                    "--capacity-mah", f"{cap:.1f}", "--r0-mohm-cell", f"{r:.4f}",
                    "--soc0", f"{rng.uniform(96.0, 99.0):.2f}", "--hover-a", hover,
                    "--duration-s", dur, "--rate-hz", 1,
                    "--start-epoch", int(start.timestamp())]
            if kind == "weak-cell":
                args += ["--format", "cells", "--weak-cell", 3]
            else:
                args += ["--format", "epoch"]
            plan.append({"pack": label, "file": os.path.join(label, name), "seed": fseed,
                         "start": start, "epoch": int(start.timestamp()), "args": args,
                         "r0_mohm_cell": r, "capacity_mah": cap, "cells_log": kind == "weak-cell"})
    return plan


def to_absolute_time(path, epoch):
    """pbsim's cell-voltage format has relative time: make it time_unix."""
    with open(path, newline="") as f:
        rows = list(csv.reader(f))
    assert rows[0][0] == "time_s", rows[0]
    rows[0][0] = "time_unix"
    for row in rows[1:]:
        row[0] = f"{epoch + float(row[0]):.3f}"
    with open(path, "w", newline="") as f:
        csv.writer(f, lineterminator="\n").writerows(rows)


def make_one(outdir, f, packbook):
    path = os.path.join(outdir, f["file"])
    cmd = [PYTHON, PBSIM, "--packbook", packbook, "-o", path, *map(str, f["args"])]
    subprocess.run(cmd, check=True)
    if f["cells_log"]:
        to_absolute_time(path, f["epoch"])
    os.utime(path, (f["epoch"], f["epoch"]))
    return path


def packbook_run(packbook, *args):
    p = subprocess.run([packbook, *map(str, args)], capture_output=True, text=True)
    return p.returncode, p.stdout, p.stderr


def do_import(outdir, packbook):
    if not os.environ.get("PACKBOOK_DB"):
        sys.exit("make-season: --import needs PACKBOOK_DB (the database to fill)")
    for label, cells, chem, rated, _n, _kind, _r0, _h, _d, note in FLEET:
        rc, out, err = packbook_run(packbook, "pack", "add", label, "--cells", cells,
                                    "--chemistry", chem, "--capacity", rated,
                                    "--since", SEASON_START.strftime("%Y-%m-%d"),
                                    "--note", f"Tallowmere Survey Co-op, Brindle Fen: {note}")
        if rc == 2 and "exists already" in err:
            print(f"pack {label} is registered already")
        elif rc != 0:
            sys.exit(f"make-season: pack add {label} failed ({rc}): {err.strip()}")
        else:
            print(out.strip())
        rc, out, err = packbook_run(packbook, "import", "--pack", label, "--quiet",
                                    os.path.join(outdir, label))
        print(out.strip())
        if rc != 0:
            sys.exit(f"make-season: import of {label} failed ({rc}): {err.strip()}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("dir", nargs="?", help="output folder (default: a new temporary one)")
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--import", dest="do_import", action="store_true",
                    help="register the packs and import the logs into $PACKBOOK_DB")
    ap.add_argument("--packbook", default=os.environ.get("PACKBOOK")
                    or os.path.join(ROOT, "build", "packbook"))
    ap.add_argument("-j", "--jobs", type=int, default=min(4, os.cpu_count() or 1))
    a = ap.parse_args()
    packbook = os.path.abspath(a.packbook)
    if a.do_import and not os.environ.get("PACKBOOK_DB"):
        sys.exit("make-season: --import needs PACKBOOK_DB (the database to fill)")
    outdir = os.path.abspath(a.dir or tempfile.mkdtemp(prefix="tallowmere-season-"))
    t0 = time.monotonic()
    plan = flight_plan(a.seed)
    for label, *_ in FLEET:
        os.makedirs(os.path.join(outdir, label), exist_ok=True)
    with concurrent.futures.ThreadPoolExecutor(max_workers=max(1, a.jobs)) as ex:
        list(ex.map(lambda f: make_one(outdir, f, packbook), plan))
    with open(os.path.join(outdir, "truth.csv"), "w", newline="") as fp:
        w = csv.writer(fp, lineterminator="\n")
        w.writerow(["pack", "file", "seed", "start_utc", "epoch_s", "r0_mohm_per_cell",
                    "capacity_mah"])
        for f in plan:
            w.writerow([f["pack"], f["file"], f["seed"], f["start"].strftime("%Y-%m-%dT%H:%M:%SZ"),
                        f["epoch"], f"{f['r0_mohm_cell']:.4f}", f"{f['capacity_mah']:.1f}"])
    print(f"make-season: seed {a.seed}, {len(plan)} logs for {len(FLEET)} packs in "
          f"{time.monotonic() - t0:.1f} s")
    if a.do_import:
        do_import(outdir, packbook)
    pb = os.path.relpath(packbook) if packbook.startswith(os.getcwd() + os.sep) else packbook
    db = os.environ.get("PACKBOOK_DB") or "/tmp/tallowmere.db"
    print(f"\nseason in {outdir}\n")
    if not a.do_import:
        print("to import it (into a database of your choice):")
        print(f"  PACKBOOK_DB={db} {sys.argv[0]} --import --seed {a.seed} {outdir}\n")
    print(f"then try (with PACKBOOK_DB={db}):")
    print(f"  {pb} fleet")
    print(f"  {pb} trend TM-03")
    print(f"  {pb} trend TM-03 --by cycle --fit ols")
    print(f"  {pb} pack show TM-04")
    print(f"  {pb} compare TM-01 TM-03 TM-04")


if __name__ == "__main__":
    main()
