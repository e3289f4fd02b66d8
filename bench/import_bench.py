#!/usr/bin/python3
"""Import speed: 500 fifteen-minute 10 Hz logs into a fresh store, then the same 500
again (all already stored). A report, not a gate: exit status 1 only when a command
failed.

    import_bench.py --packbook EXE --tmp DIR [--logs N]

The logs are cut from one generated log (bench/gen_log.py, seed fixed) into pieces of
9,000 rows, each with the header, so every log has its own content (and hash). Each
import runs REPEATS times into a new store; the best wall time counts.
"""
import argparse
import os
import subprocess
import sys
import time

REPEATS = 2
ROWS_PER_LOG = 9000  # 15 min at 10 Hz
PYTHON = "/usr/bin/python3"
HERE = os.path.dirname(os.path.abspath(__file__))

TARGETS = [
    ("import, one process (default -j)", ">= 250 flights/s", 250.0),
    ("re-import of stored logs", ">= 2,000 logs/s", 2000.0),
    ("import -j 2 vs -j 1", ">= 1.7x", 1.7),
]


def run(cmd, env):
    r = subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    if r.returncode != 0:
        print(f"FAILED (exit {r.returncode}): {' '.join(cmd)}\n{r.stderr.decode()[:2000]}",
              file=sys.stderr)
        return False
    return True


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--packbook", required=True)
    ap.add_argument("--tmp", required=True)
    ap.add_argument("--logs", type=int, default=500)
    a = ap.parse_args()
    src = os.path.join(a.tmp, "import-src.csv")
    subprocess.run([PYTHON, os.path.join(HERE, "gen_log.py"), str(a.logs * ROWS_PER_LOG), src],
                   check=True, stdout=subprocess.DEVNULL)
    logdir = os.path.join(a.tmp, "logs")
    os.makedirs(logdir, exist_ok=True)
    with open(src) as f:
        header = f.readline()
        for k in range(a.logs):
            with open(os.path.join(logdir, f"f{k:04d}.csv"), "w") as out:
                out.write(header)
                for _ in range(ROWS_PER_LOG):
                    out.write(f.readline())
    os.remove(src)
    env = dict(os.environ)
    best = {}
    for rep in range(REPEATS):
        for jobs in ("1", "2", None):
            db = os.path.join(a.tmp, f"import-{rep}-{jobs}.db")
            if os.path.exists(db):
                os.remove(db)
            env["PACKBOOK_DB"] = db
            if not run([a.packbook, "pack", "add", "B1", "--cells", "4", "--chemistry", "lipo",
                        "--capacity", "5000"], env):
                return 1
            cmd = [a.packbook, "import", "--pack", "B1", "--quiet", "--date", "2026-05-01"]
            if jobs:
                cmd += ["-j", jobs]
            t0 = time.perf_counter()
            if not run(cmd + [logdir], env):
                return 1
            key = f"-j {jobs}" if jobs else "default"
            best[key] = min(best.get(key, float("inf")), time.perf_counter() - t0)
            if jobs is None:
                t0 = time.perf_counter()
                if not run(cmd + [logdir], env):
                    return 1
                best["again"] = min(best.get("again", float("inf")), time.perf_counter() - t0)
    cores = os.cpu_count()
    print(f"\n| {a.logs} logs of {ROWS_PER_LOG} rows | best of {REPEATS} (s) | logs/s |")
    print("| --- | ---: | ---: |")
    rows = [("-j 1", "import, one thread"), ("-j 2", "import -j 2"),
            ("default", f"import, default -j ({cores} cores)"),
            ("again", "the same logs again (all stored)")]
    for key, what in rows:
        print(f"| {what} | {best[key]:.3f} | {a.logs / best[key]:.0f} |")
    got = [a.logs / best["default"], a.logs / best["again"], best["-j 1"] / best["-j 2"]]
    print("\n| target | wanted | measured | |\n| --- | --- | ---: | --- |")
    units = ["/s", "/s", "x"]
    for (what, wanted, limit), g, u in zip(TARGETS, got, units):
        shown = f"{g:.2f}{u}" if u == "x" else f"{g:.0f}{u}"
        print(f"| {what} | {wanted} | {shown} | {'PASS' if g >= limit else 'MISS'} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
