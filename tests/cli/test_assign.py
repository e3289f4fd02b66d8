#!/usr/bin/python3
"""The Hungarian method (src/core/assign.c) against Debian's scipy: scipy.optimize.linear_sum_assignment
(python3-scipy, the reference library) on seeded random cost matrices, square and rectangular, up
to 60 x 80, with real costs, small integer costs (many tied optima) and costs of mixed sign.

Expected: the same least total (tolerance 1e-9 relative: both are exact, the difference is
floating-point summation order); the assignment itself may differ where optima tie, so it is
checked to be a valid one whose costs add up to that total.
"""
import os
import subprocess
import sys

import numpy as np
from scipy.optimize import linear_sum_assignment

TOOL = os.environ.get("ASSIGN_TOOL")


def solve(cost):
    n, m = cost.shape
    text = f"{n} {m}\n" + "\n".join(" ".join(repr(float(v)) for v in row) for row in cost) + "\n"
    p = subprocess.run([TOOL], input=text.encode(), capture_output=True, timeout=60, check=True)
    lines = p.stdout.decode().split("\n")
    return float(lines[0]), [int(v) for v in lines[1].split()]


def main():
    if not TOOL:
        print("ASSIGN_TOOL not set (meson sets it)")
        return 1
    seed = 1955
    print("seed", seed)
    rng = np.random.default_rng(seed)
    worst = 0.0
    cases = 0
    for rep in range(120):
        n = int(rng.integers(1, 61))
        m = n + int(rng.integers(0, 21)) if rep % 2 else n
        kind = rep % 3
        if kind == 0:
            cost = rng.uniform(0.0, 10.0, (n, m))
        elif kind == 1:
            cost = rng.integers(0, 5, (n, m)).astype(float)
        else:
            cost = rng.normal(0.0, 100.0, (n, m))
        total, cols = solve(cost)
        rows, ref_cols = linear_sum_assignment(cost)
        ref = float(cost[rows, ref_cols].sum())
        assert len(cols) == n and len(set(cols)) == n and all(0 <= c < m for c in cols), cols
        mine = float(cost[np.arange(n), cols].sum())
        tol = 1e-9 * max(1.0, abs(ref))
        assert abs(mine - total) <= tol, (rep, mine, total)
        assert abs(total - ref) <= tol, (rep, n, m, total, ref)
        worst = max(worst, abs(total - ref))
        cases += 1
    print(f"assign: {cases} matrices agree with scipy.optimize.linear_sum_assignment "
          f"(largest difference {worst:.3g})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
