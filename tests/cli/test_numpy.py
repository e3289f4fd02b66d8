#!/usr/bin/python3
"""Least-squares results against numpy.linalg.lstsq (python3-numpy, Debian).

packbook fits by normal equations solved through an eigendecomposition; numpy
solves the same design by SVD. With --fit ols both are plain least squares on
the same rows, so coefficients must agree to rounding (relative 1e-6 on R,
1e-9 V on OCV coefficients) and the 95 % half-widths to 0.1 % (packbook uses
Student's t; at over 5000 degrees of freedom t(0.975) = 1.9604, and this test
uses the same value, so only rounding remains). Designs are the documented
ones (man packbook, MODEL): OCV(u) = c0 + c1 u + c2 u^2 + c3 u^3 with
u = 2 q / q_end - 1 and q the trapezoid charge in Ah, minus R I, and for the
RC model minus R1 i_rc with i_rc[k] = a i_rc[k-1] + (1 - a) I[k-1],
a = exp(-dt / tau), i_rc[0] = I[0].
"""
import math
import os
import subprocess
import sys
import tempfile
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402

PBSIM = pbtest.PBSIM
T975 = 1.9604  # Student t, 0.975 quantile, dof > 5000 (tables; differs from 1.95996 z by 0.02 %)


def make_log(tmp, *args):
    path = os.path.join(tmp, "f.csv")
    subprocess.run([sys.executable, PBSIM, "--packbook", pbtest.PACKBOOK, "-o", path,
                    *map(str, args)], check=True)
    d = np.genfromtxt(path, delimiter=",", names=True)
    return path, d["time_s"], d["voltage_v"], d["current_a"]


def design(t, v, i, tau=None):
    dq = np.diff(t) * 0.5 * (i[1:] + i[:-1]) / 3600.0
    q = np.concatenate(([0.0], np.cumsum(dq)))
    u = 2.0 * q / q[-1] - 1.0
    cols = [np.ones_like(u), u, u * u, u * u * u, -i]
    if tau is not None:
        rc = np.empty_like(i)
        rc[0] = i[0]
        for k in range(1, len(i)):
            a = math.exp(-(t[k] - t[k - 1]) / tau)
            rc[k] = a * rc[k - 1] + (1 - a) * i[k - 1]
        cols.append(-rc)
    return np.column_stack(cols)


def lstsq_with_ci(x, y):
    beta, rss, rank, _ = np.linalg.lstsq(x, y, rcond=None)
    n, p = x.shape
    s2 = float(rss[0]) / (n - p)
    cov = s2 * np.linalg.inv(x.T @ x)
    return beta, T975 * np.sqrt(np.diag(cov)), rank


class AgainstNumpy(unittest.TestCase):
    def test_static_model(self):
        tmp = tempfile.mkdtemp()
        path, t, v, i = make_log(tmp, "--seed", 5, "--r1-mohm-cell", 0, "--cells", 4)
        doc = pbtest.analyze_json(path, "--fit", "ols", "--cells", 4, "--chemistry", "lipo")
        self.assertEqual(doc["r0_method"], "static")
        beta, ci, rank = lstsq_with_ci(design(t, v, i), v)
        self.assertEqual(rank, 5)
        print(f"  R numpy {beta[4] * 1000:.6f} mOhm, packbook {doc['r0_mohm']['value']:.6f}")
        self.assertLess(abs(doc["r0_mohm"]["value"] - 1000 * beta[4]), 1e-6 * 1000 * abs(beta[4]))
        self.assertLess(abs(doc["r0_mohm"]["ci95"] - 1000 * ci[4]), 1e-3 * 1000 * ci[4])
        for j, c in enumerate(doc["fit"]["ocv_coef_v"]):
            self.assertLess(abs(c - beta[j]), 1e-9 + 1e-9 * abs(beta[j]), f"OCV coefficient {j}")

    def test_rc_model_at_packbooks_tau(self):
        tmp = tempfile.mkdtemp()
        path, t, v, i = make_log(tmp, "--seed", 6, "--r1-mohm-cell", 3, "--tau-s", 6)
        doc = pbtest.analyze_json(path, "--fit", "ols", "--cells", 4, "--chemistry", "lipo")
        self.assertEqual(doc["r0_method"], "rc")
        beta, ci, rank = lstsq_with_ci(design(t, v, i, doc["tau_s"]), v)
        print(f"  R0 numpy {beta[4] * 1000:.6f}, packbook {doc['r0_mohm']['value']:.6f}; "
              f"R1 numpy {beta[5] * 1000:.6f}, packbook {doc['r1_mohm']['value']:.6f}")
        self.assertLess(abs(doc["r0_mohm"]["value"] - 1000 * beta[4]), 1e-6 * 1000 * abs(beta[4]))
        self.assertLess(abs(doc["r1_mohm"]["value"] - 1000 * beta[5]), 1e-6 * 1000 * abs(beta[5]))
        self.assertLess(abs(doc["r0_mohm"]["ci95"] - 1000 * ci[4]), 1e-3 * 1000 * ci[4])


if __name__ == "__main__":
    unittest.main(verbosity=2)
