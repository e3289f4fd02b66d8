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
    ("import, one process", ">= 250 flights/s", 250.0),
    ("re-import of stored logs", ">= 2,000 logs/s", 2000.0),
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
    best_new = best_again = float("inf")
    for rep in range(REPEATS):
        db = os.path.join(a.tmp, f"import-{rep}.db")
        if os.path.exists(db):
            os.remove(db)
        env["PACKBOOK_DB"] = db
        if not run([a.packbook, "pack", "add", "B1", "--cells", "4", "--chemistry", "lipo",
                    "--capacity", "5000"], env):
            return 1
        t0 = time.perf_counter()
        ok = run([a.packbook, "import", "--pack", "B1", "--quiet", "--date", "2026-05-01",
                  logdir], env)
        best_new = min(best_new, time.perf_counter() - t0)
        t0 = time.perf_counter()
        ok = ok and run([a.packbook, "import", "--pack", "B1", "--quiet", "--date",
                         "2026-05-01", logdir], env)
        best_again = min(best_again, time.perf_counter() - t0)
        if not ok:
            return 1
    rates = [a.logs / best_new, a.logs / best_again]
    print(f"\n| {a.logs} logs of {ROWS_PER_LOG} rows | best of {REPEATS} (s) | logs/s |")
    print("| --- | ---: | ---: |")
    print(f"| import into a new store | {best_new:.3f} | {rates[0]:.0f} |")
    print(f"| the same logs again (all stored) | {best_again:.3f} | {rates[1]:.0f} |")
    print("\n| target | wanted | measured | |\n| --- | --- | ---: | --- |")
    for (what, wanted, limit), got in zip(TARGETS, rates):
        print(f"| {what} | {wanted} | {got:.0f}/s | {'PASS' if got >= limit else 'MISS'} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
