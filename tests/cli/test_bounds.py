#!/usr/bin/python3
"""Resource bounds, by counting work, never by timing.

Doubling a log must double the reading (lines read) and keep the fits' work
per sample bounded: the fits report the rows their passes visited
(fit.rows_visited in the JSON). Each fit makes a bounded number of passes
(at most 16 reweighting passes; for the time constant one walk for its
grid and at most 16 Newton steps), so rows visited per sample stays under a constant: 150 is
stated here, and across sizes 1x, 2x, 4x it may vary with the data (passes
to converge) but not grow with the size: the largest per-sample work is at
most 2.5x the smallest. Quadratic work would grow 4x per doubling.
Logs come from scripts/pbsim.py with fixed seeds.
"""
import json
import os
import subprocess
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402

PBSIM = pbtest.PBSIM


def make(tmp, duration, *extra):
    path = os.path.join(tmp, f"d{duration}.csv")
    args = ["--seed", 9, "--duration-s", duration, "--rate-hz", 20, "--hover-a", 4, *extra]
    subprocess.run([sys.executable, PBSIM, "--packbook", pbtest.PACKBOOK, "-o", path,
                    *map(str, args)], check=True)
    return path


class Bounds(unittest.TestCase):
    def test_work_doubles_with_the_input(self):
        tmp = pbtest.temp_dir("pbbounds-")
        for fit in ("robust", "ols"):
            work, lines = [], []
            for d in (1500, 3000, 6000):
                doc = pbtest.analyze_json(make(tmp, d), "--cells", 4, "--chemistry", "lipo",
                                          "--fit", fit)
                work.append(doc["fit"]["rows_visited"])
                lines.append(doc["input"]["lines"])
            print(f"  {fit}: lines {lines}, rows visited by the fits {work}")
            per_row = [w / n for w, n in zip(work, lines)]
            self.assertEqual([round(lines[k] / lines[0], 2) for k in (1, 2)], [2.0, 4.0])
            for k, r in enumerate(per_row):
                self.assertLess(r, 150.0, f"{fit}: {r:.1f} rows visited per sample at size {k}")
            self.assertLess(max(per_row) / min(per_row), 2.5, f"{fit}: per-sample work {per_row}")

    def test_field_and_column_limits_are_stated(self):
        # 1024 fields per line and 65536 bytes per field (man page, LOG FORMAT)
        many = ",".join(["time_s", "voltage_v"] + [f"x{k}" for k in range(1030)]) + "\n"
        path = pbtest.write_temp(many + "0,16\n1,16\n")
        rc, out, err = pbtest.run("analyze", path)
        self.assertEqual(rc, 3)
        self.assertIn(f"{path}:1:1025: more than 1024 fields", err)


if __name__ == "__main__":
    unittest.main(verbosity=2)
