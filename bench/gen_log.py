#!/usr/bin/python3
"""Write the benchmark log: a 4S LiPo at 10 Hz, deterministic for a given row count.

Current: a flight-like profile of steps (a new level every 2-8 s, 3-38 A) with
sensor noise, kept within 2-40 A. Voltage: OCV(q) - 0.012 ohm * I + noise, where
q is the charge drawn so far as a fraction of the whole file's, so the OCV falls
smoothly from 16.8 V to 14.5 V whatever the length. The OCV is a cubic in q on
purpose: the least-squares model both packbook and pandas_ref.py fit can then
recover R0 = 12 mOhm, a quick sanity check of either side's output.

    gen_log.py ROWS OUT.csv [--rc]

--rc adds a polarisation branch (R1 = 6 mOhm, tau = 4 s: the current through it a
first-order lag of I, zero-order hold between samples), so packbook's fit of the RC
branch (its tau search) is measured too.
"""
import sys

import numpy as np

SEED = 20231201  # fixed: the same rows give the same file, run after run
DT_S = 0.1
R0_OHM = 0.012
R1_OHM, TAU_S = 0.006, 4.0  # --rc only


def main():
    rows, path = int(sys.argv[1]), sys.argv[2]
    rc = "--rc" in sys.argv[3:]
    if rows < 2:
        sys.exit("gen_log.py: need at least 2 rows")
    rng = np.random.default_rng(SEED)

    # step profile; at least 20 samples per step, so this many steps always suffice
    nsteps = rows // 20 + 1
    levels = rng.uniform(3.0, 38.0, nsteps)
    lengths = rng.integers(20, 81, nsteps)  # 2.0-8.0 s
    current = np.repeat(levels, lengths)[:rows] + rng.normal(0.0, 0.4, rows)
    # round before use, so the voltage is computed from exactly the logged current
    current = np.round(np.clip(current, 2.0, 40.0), 3)
    t = np.round(np.arange(rows) * DT_S, 3)

    drawn = np.concatenate(([0.0], np.cumsum(0.5 * (current[1:] + current[:-1]) * DT_S)))
    q = drawn / drawn[-1]
    ocv = 16.8 - 1.2 * q + 0.5 * q**2 - 1.6 * q**3  # monotone, 16.8 -> 14.5 V
    voltage = ocv - R0_OHM * current + rng.normal(0.0, 0.004, rows)
    if rc:
        a = np.exp(-DT_S / TAU_S)
        i1 = np.empty(rows)
        i1[0] = current[0]
        for k in range(1, rows):  # a loop: a few seconds for 1M rows
            i1[k] = a * i1[k - 1] + (1.0 - a) * current[k - 1]
        voltage -= R1_OHM * i1

    np.savetxt(path, np.column_stack((t, voltage, current)), fmt="%.3f", delimiter=",",
               header="time_s,voltage_v,current_a", comments="")


if __name__ == "__main__":
    main()
