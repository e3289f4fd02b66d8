#!/usr/bin/python3
"""bench/compare.py REF_PACKBOOK NEW_PACKBOOK [--bench [ROWS]] [LOG ...] -- speed may not buy error.

Runs `analyze LOG --json` (and with --cells 4 --chemistry lipo --capacity 5000) with a
reference build (e.g. main before a speed change) and with the build under test, on every
log in tests/data and samples/ plus the logs given, and compares the two reports.
--bench adds bench/run's two logs (bench/gen_log.py ROWS, default 1,000,000, plain and
--rc), made in a temporary directory and removed afterwards.

- every estimate (an object with "value" and "ci95") must agree within a quarter of the
  reference's 95 % half-width (issue 14: "results identical within 1/4 of each reported
  interval"); an estimate without a finite interval must agree to 1e-9 (relative);
- so must the SoC at each end and its range (soc_start_pct, soc_start_range_pct against
  soc_start_ci95; the same at the end), and tau (tau_s against tau_ci95_s, the reference's
  or, from a build before tau had an interval, the new one's), and each such ci95 within a
  quarter of itself; a report may add tau_ci95_s (ADDED_KEYS) to one without it;
- the robust fits' descriptive numbers, which reweighting on a subsample of a long log
  moves slightly (fit.c), within stated bounds: the OCV at the ends and the OCV trend's
  coefficients within 1 mV (every OCV packbook reports carries at least 50 mV per cell,
  SOCEST_LOADED_V in socest.h, so 1 mV is far inside a quarter of it), fit.sigma_mv
  within 0.1 %, fit.residual_lag1_corr within 0.001, fit.downweighted within 1 %;
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
import tempfile

WORK_KEYS = {"rows_visited", "iterations"}
REL = 1e-9
# descriptive numbers of the robust fits: path -> (absolute, relative) tolerance
FIT_TOL = {
    ".ocv_start_v": (1e-3, 0.0),
    ".ocv_end_v": (1e-3, 0.0),
    ".fit.ocv_coef_v": (1e-3, 0.0),
    ".fit.sigma_mv": (0.0, 1e-3),
    ".fit.residual_lag1_corr": (1e-3, 0.0),
    ".fit.downweighted": (0.0, 1e-2),
}
# a number and the report's 95 % half-width it is judged by
SOC_CI = {
    ".soc_start_pct": "soc_start_ci95",
    ".soc_start_range_pct": "soc_start_ci95",
    ".soc_end_pct": "soc_end_ci95",
    ".soc_end_range_pct": "soc_end_ci95",
    ".tau_s": "tau_ci95_s",
}
# keys a newer report may have where the reference has none
ADDED_KEYS = {"tau_ci95_s"}


def close(a, b, tol):
    return a == b or abs(a - b) <= tol


def tolerance(path, roots):
    """The tolerance of the number at path (None: the default 1e-9 relative)."""
    base = path.split("[")[0]
    if base in FIT_TOL:
        return FIT_TOL[base]
    if base in SOC_CI:
        for root in roots:
            ci = root.get(SOC_CI[base])
            if isinstance(ci, (int, float)) and math.isfinite(ci) and ci > 0:
                return (0.25 * ci, 0.0)
    if base in (".soc_start_ci95", ".soc_end_ci95", ".tau_ci95_s"):
        return (0.0, 0.25)
    return None


def walk(ref, new, path, out, roots=None):
    roots = (ref, new) if roots is None else roots
    if isinstance(ref, dict) and isinstance(new, dict):
        added = set(new) - set(ref)
        if set(ref) - set(new) or (added - ADDED_KEYS if path == "" else added):
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
            walk(ref[k], new[k], f"{path}.{k}", out, roots)
    elif isinstance(ref, list) and isinstance(new, list):
        if len(ref) != len(new):
            out.append(f"{path}: {len(new)} items vs {len(ref)}")
            return
        for k, (a, b) in enumerate(zip(ref, new)):
            walk(a, b, f"{path}[{k}]", out, roots)
    elif isinstance(ref, bool) or isinstance(new, bool) or not (
            isinstance(ref, (int, float)) and isinstance(new, (int, float))):
        if ref != new:
            out.append(f"{path}: {new!r} vs {ref!r}")
    else:
        tol = tolerance(path, roots)
        if tol is None:
            tol = (0.0, REL)
        bound = max(tol[0], tol[1] * max(abs(ref), abs(new)), REL * max(abs(ref), abs(new), 1e-300))
        if not close(ref, new, bound):
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
    tmp = None
    if extra and extra[0] == "--bench":
        rows = "1000000"
        if len(extra) > 1 and extra[1].isdigit():
            rows, extra = extra[1], extra[2:]
        else:
            extra = extra[1:]
        tmp = tempfile.TemporaryDirectory(prefix="packbook-compare.")
        gen = os.path.join(root, "bench", "gen_log.py")
        for name, flags in (("bench", []), ("bench-rc", ["--rc"])):
            log = os.path.join(tmp.name, f"{name}-{rows}.csv")
            subprocess.run([sys.executable, gen, rows, log, *flags], check=True,
                           stdout=subprocess.DEVNULL)
            extra.append(log)
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
