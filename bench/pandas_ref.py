#!/usr/bin/python3
"""The reference a user could write in a few lines: pandas + numpy on the whole log.

Same core computation as packbook's (not its robust reweighting or RC branch):
trapezoid charge, trapezoid energy, and an ordinary least-squares fit of
V = c0 + c1 q + c2 q^2 + c3 q^3 - R0 I, q the charge drawn normalised to [0, 1].

    pandas_ref.py LOG.csv
"""
import sys

import numpy as np
import pandas as pd

trapz = getattr(np, "trapezoid", None) or np.trapz  # renamed in numpy 2.0


def main():
    log = pd.read_csv(sys.argv[1])
    t = log["time_s"].to_numpy()
    v = log["voltage_v"].to_numpy()
    i = log["current_a"].to_numpy()

    charge_mah = trapz(i, t) / 3.6  # A s -> mAh
    energy_wh = trapz(v * i, t) / 3600.0

    drawn = np.concatenate(([0.0], np.cumsum(0.5 * (i[1:] + i[:-1]) * np.diff(t))))
    q = drawn / drawn[-1]
    design = np.column_stack((np.ones_like(q), q, q**2, q**3, -i))
    coef, _, _, _ = np.linalg.lstsq(design, v, rcond=None)
    rms_mv = 1000.0 * np.sqrt(np.mean((design @ coef - v) ** 2))

    print(f"rows {len(log)}")
    print(f"charge_mah {charge_mah:.3f}")
    print(f"energy_wh {energy_wh:.4f}")
    print("ocv_coef_v " + " ".join(f"{c:.5f}" for c in coef[:4]))
    print(f"r0_mohm {1000.0 * coef[4]:.4f}")
    print(f"residual_rms_mv {rms_mv:.3f}")


if __name__ == "__main__":
    main()
