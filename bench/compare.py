#!/usr/bin/python3
"""bench/compare.py REF_PACKBOOK NEW_PACKBOOK [LOG ...] -- speed may not buy error.

Runs `analyze LOG --json` (and with --cells 4 --chemistry lipo --capacity 5000) with a
reference build (e.g. main before a speed change) and with the build under test, on every
log in tests/data and samples/ plus the logs given, and compares the two reports:

- every estimate (an object with "value" and "ci95") must agree within a quarter of the
  reference's 95 % half-width (issue 14: "results identical within 1/4 of each reported
  interval"); an estimate without a finite interval must agree to 1e-9 (relative);
- every other number must agree to 1e-9 (relative), except the work counters
  (fit.rows_visited, fit.iterations), which are what a speed change changes;
- strings, warnings and exit statuses must be the same.

Prints one line per difference and a summary; exits 1 when anything differs.
"""
import glob
import json
import math
import os
import subprocess
import sys

WORK_KEYS = {"rows_visited", "iterations"}
REL = 1e-9


def close(a, b, tol):
    return a == b or abs(a - b) <= tol


def walk(ref, new, path, out):
    if isinstance(ref, dict) and isinstance(new, dict):
        if set(ref) != set(new):
            out.append(f"{path}: keys differ: {sorted(set(ref) ^ set(new))}")
            return
        if "value" in ref and "ci95" in ref and isinstance(ref["value"], (int, float)):
            rv, nv, ci = ref["value"], new["value"], ref["ci95"]
            if isinstance(nv, (int, float)):
                if isinstance(ci, (int, float)) and math.isfinite(ci) and ci > 0:
                    if not close(rv, nv, 0.25 * ci):
                        out.append(f"{path}: {nv!r} vs {rv!r}: moved {abs(nv - rv) / ci:.3f} "
                                   f"of the half-width {ci!r} (limit 0.25)")
                    nci = new["ci95"]
                    if isinstance(nci, (int, float)) and not close(ci, nci, 0.25 * ci):
                        out.append(f"{path}.ci95: {nci!r} vs {ci!r}")
                    return
        for k in ref:
            if k in WORK_KEYS:
                continue
            walk(ref[k], new[k], f"{path}.{k}", out)
    elif isinstance(ref, list) and isinstance(new, list):
        if len(ref) != len(new):
            out.append(f"{path}: {len(new)} items vs {len(ref)}")
            return
        for k, (a, b) in enumerate(zip(ref, new)):
            walk(a, b, f"{path}[{k}]", out)
    elif isinstance(ref, bool) or isinstance(new, bool) or not (
            isinstance(ref, (int, float)) and isinstance(new, (int, float))):
        if ref != new:
            out.append(f"{path}: {new!r} vs {ref!r}")
    elif not close(ref, new, REL * max(abs(ref), abs(new), 1e-300)):
        out.append(f"{path}: {new!r} vs {ref!r}")


def run(binary, args):
    p = subprocess.run([binary, "analyze", *args, "--json"], capture_output=True, text=True)
    doc = None
    if p.returncode == 0:
        doc = json.loads(p.stdout)
    return p.returncode, doc, p.stderr


def main():
    if len(sys.argv) < 3:
        print(__doc__.strip().splitlines()[0], file=sys.stderr)
        return 2
    ref_bin, new_bin, extra = sys.argv[1], sys.argv[2], sys.argv[3:]
    root = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
    logs = sorted(glob.glob(os.path.join(root, "tests", "data", "**", "*.csv"), recursive=True))
    logs += sorted(glob.glob(os.path.join(root, "samples", "*.csv")))
    logs += extra
    checked = bad = 0
    for log in logs:
        for opts in ([], ["--cells", "4", "--chemistry", "lipo", "--capacity", "5000"]):
            rrc, rdoc, rerr = run(ref_bin, [log, *opts])
            nrc, ndoc, nerr = run(new_bin, [log, *opts])
            diffs = []
            if rrc != nrc:
                diffs.append(f"exit status {nrc} vs {rrc}")
            elif rdoc is None:
                if rerr != nerr:
                    diffs.append(f"message {nerr.strip()!r} vs {rerr.strip()!r}")
            else:
                walk(rdoc, ndoc, "", diffs)
            checked += 1
            name = os.path.relpath(log, root) + (" " + " ".join(opts) if opts else "")
            for d in diffs:
                print(f"DIFF {name}: {d}")
            bad += bool(diffs)
    print(f"compare: {checked} runs ({len(logs)} logs, 2 option sets), {bad} with differences "
          f"beyond a quarter of the reported intervals")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
