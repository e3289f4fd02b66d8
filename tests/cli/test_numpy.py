#!/usr/bin/python3
"""Least-squares results against numpy.linalg.lstsq (python3-numpy, Debian).

packbook fits by normal equations solved through an eigendecomposition, with
each window's OCV line projected out first (Frisch-Waugh-Lovell); numpy solves
the full design, window columns and all, by SVD. With --fit ols both are plain
least squares on the same rows, so the resistances must agree to rounding
(relative 1e-6) and the 95 % half-widths to 0.1 % once packbook's documented
allowance for correlated residuals, (1 + rho) / (1 - rho) on the variance with
the rho it reports, is applied; that rho must be numpy's residuals' lag-1
autocorrelation within windows to 1e-6 (packbook sums it from moments made
on its pass, not from the residuals) (at over 5000 degrees of freedom t(0.975) =
1.9604, used here too). Designs are the documented ones (man packbook, MODEL):
in each window of at most fit.window_s seconds (cut at gaps, at least 3
samples, used when its current varies above 5 noise deviations), OCV is
a + b (q - mean q), q the trapezoid charge in Ah; minus R I, and for the RC
model minus R1 i_rc with i_rc[k] = a i_rc[k-1] + (1 - a) I[k-1],
a = exp(-dt / tau), i_rc[0] = I[0]. The OCV trend over the log is a cubic in
u = 2 q / q_end - 1 fitted to V + R0 I (+ R1 i_rc) with R fixed.

tau (the RC model) is where the residual sum of squares, profiled over the
other coefficients, is least in ln tau; its 95 % half-width comes from that
profile's curvature, var(ln tau) = 2 sigma^2 / (d2 RSS / d(ln tau)^2) with
the same allowance for correlated residuals (the profile likelihood's
quadratic approximation: Bates and Watts, Nonlinear Regression Analysis and
Its Applications, 1988, ch. 6; from memory). numpy's own profile, three
lstsq fits at ln tau and 0.01 either side, must put its minimum within a
twentieth of a standard error of packbook's tau (one Newton step from it),
and give the same half-width within 2 % (the two curvatures are taken over
different spans, 0.01 and packbook's 0.005 in ln tau).
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


def charge(t, i):
    dq = np.diff(t) * 0.5 * (i[1:] + i[:-1]) / 3600.0
    return np.concatenate(([0.0], np.cumsum(dq)))


def rc_current(t, i, tau):
    rc = np.empty_like(i)
    rc[0] = i[0]
    for k in range(1, len(i)):
        a = math.exp(-(t[k] - t[k - 1]) / tau)
        rc[k] = a * rc[k - 1] + (1 - a) * i[k - 1]
    return rc


def noise(y, i, step_a):
    """One sample's noise from second differences where the current holds (man page)."""
    d2, steps = [], []
    for k in range(1, len(y) - 1):
        if abs(i[k + 1] - i[k]) > 0.05 * step_a or abs(i[k] - i[k - 1]) > 0.05 * step_a:
            continue
        d2.append(abs(y[k + 1] - 2 * y[k] + y[k - 1]))
        if y[k] != y[k - 1]:
            steps.append(abs(y[k] - y[k - 1]))
    sigma = 1.4826 * float(np.median(d2)) / math.sqrt(6)
    return max(sigma, min(steps) / math.sqrt(12)) if steps else sigma


def windows(t, i, q, window_s, gap_s, step_a):
    """The windows that inform R, as (k0, k1) pairs."""
    out, k0 = [], 0
    sigma_i = noise(i, i, step_a)
    for k in range(1, len(t) + 1):
        if k < len(t) and t[k] - t[k - 1] <= gap_s and t[k] - t[k0] <= window_s:
            continue
        if k - k0 >= 3:
            qq, ii = q[k0:k], i[k0:k]
            x = np.column_stack([np.ones(k - k0), qq - qq.mean()])
            res = ii - x @ np.linalg.lstsq(x, ii, rcond=None)[0]
            if (res * res).sum() > 25 * sigma_i ** 2 * (k - k0):
                out.append((k0, k))
        k0 = k
    return out


def design(t, i, q, wins, tau=None):
    """Rows of the used windows: each window's own OCV line, then -I (and -i_rc)."""
    rows = np.concatenate([np.arange(k0, k1) for k0, k1 in wins])
    cols = []
    for k0, k1 in wins:
        ind = np.zeros(len(t))
        ind[k0:k1] = 1.0
        cols.append(ind)
        qc = np.where(ind > 0, q - q[k0:k1].mean(), 0.0)
        if np.ptp(q[k0:k1]) > 0:
            cols.append(qc)
    cols.append(-i)
    if tau is not None:
        cols.append(-rc_current(t, i, tau))
    return np.column_stack(cols)[rows], rows


class AgainstNumpy(unittest.TestCase):
    def check(self, path, t, v, i, doc, rc):
        fit = doc["fit"]
        q = charge(t, i)
        wins = windows(t, i, q, fit["window_s"], doc["gaps"]["threshold_s"], doc["step_a"])
        self.assertEqual(len(wins), fit["windows"], "windows that inform R")
        x, rows = design(t, i, q, wins, doc["tau_s"] if rc else None)
        y = v[rows]
        beta, rss, rank, _ = np.linalg.lstsq(x, y, rcond=None)
        n, p = x.shape
        self.assertEqual(rank, p)
        cov = float(rss[0]) / (n - p) * np.linalg.inv(x.T @ x)
        rho = fit["residual_lag1_corr"]
        # rho itself: numpy's residuals, consecutive rows paired within a window
        res, at, s01 = y - x @ beta, 0, 0.0
        for k0, k1 in wins:
            r = res[at:at + k1 - k0]
            s01 += float(r[1:] @ r[:-1])
            at += k1 - k0
        rho_np = s01 / float(res @ res)
        print(f"  rho numpy {rho_np:.9f}, packbook {rho:.9f}")
        self.assertLess(abs(rho - rho_np), 1e-6, "residual lag-1 correlation")
        infl = (1 + rho) / (1 - rho) if rho > 0 else 1.0
        jr = p - 2 if rc else p - 1
        r0, ci = 1000 * beta[jr], 1000 * T975 * math.sqrt(cov[jr, jr] * infl)
        model = doc["r0_model_mohm"]
        print(f"  R0 numpy {r0:.6f} +/- {ci:.6f}, packbook {model['value']:.6f} +/- {model['ci95']:.6f}"
              f" mOhm ({len(wins)} windows, rho {rho:.3f})")
        self.assertLess(abs(model["value"] - r0), 1e-6 * abs(r0))
        self.assertLess(abs(model["ci95"] - ci), 1e-3 * ci)
        if rc:
            r1 = 1000 * beta[p - 1]
            self.assertLess(abs(doc["r1_mohm"]["value"] - r1), 1e-6 * abs(r1))
        # the OCV trend: cubic in u fitted to V + R0 I (+ R1 i_rc), R fixed at packbook's
        u = 2.0 * q / q[-1] - 1.0
        yo = v + model["value"] / 1000 * i
        if rc:
            yo = yo + doc["r1_mohm"]["value"] / 1000 * rc_current(t, i, doc["tau_s"])
        c = np.linalg.lstsq(np.column_stack([u ** 0, u, u * u, u ** 3]), yo, rcond=None)[0]
        for j, cj in enumerate(fit["ocv_coef_v"]):
            self.assertLess(abs(cj - c[j]), 1e-9 + 1e-9 * abs(c[j]), f"OCV coefficient {j}")
        if rc:
            self.check_tau(t, v, i, q, wins, doc, infl)

    def check_tau(self, t, v, i, q, wins, doc, infl):
        tau, h = doc["tau_s"], 0.01
        rss = []
        for u in (math.log(tau) - h, math.log(tau), math.log(tau) + h):
            x, rows = design(t, i, q, wins, math.exp(u))
            rss.append(float(np.linalg.lstsq(x, v[rows], rcond=None)[1][0]))
        n, p = x.shape
        d1 = (rss[2] - rss[0]) / (2 * h)
        d2 = (rss[2] - 2 * rss[1] + rss[0]) / (h * h)
        self.assertGreater(d2, 0.0, "the profile curves up at packbook's tau")
        se_u = math.sqrt(2 * rss[1] / (n - p - 1) * infl / d2)
        step, ci = -d1 / d2, tau * T975 * se_u
        print(f"  tau packbook {tau:.6f} +/- {doc['tau_ci95_s']:.6f} s, numpy's profile: "
              f"minimum {step / se_u:+.4f} standard errors away, +/- {ci:.6f} s")
        self.assertLess(abs(step), 0.05 * se_u, "packbook's tau is the profile's minimum")
        self.assertLess(abs(doc["tau_ci95_s"] - ci), 0.02 * ci, "tau's half-width")

    def test_static_model(self):
        tmp = tempfile.mkdtemp()
        path, t, v, i = make_log(tmp, "--seed", 5, "--r1-mohm-cell", 0, "--cells", 4)
        doc = pbtest.analyze_json(path, "--fit", "ols", "--cells", 4, "--chemistry", "lipo")
        self.assertIsNone(doc["tau_s"], "no RC branch in the data")
        self.assertIsNone(doc["tau_ci95_s"], "nor its interval")
        self.check(path, t, v, i, doc, False)

    def test_rc_model_at_packbooks_tau(self):
        tmp = tempfile.mkdtemp()
        path, t, v, i = make_log(tmp, "--seed", 6, "--r1-mohm-cell", 3, "--tau-s", 6)
        doc = pbtest.analyze_json(path, "--fit", "ols", "--cells", 4, "--chemistry", "lipo")
        self.assertIsNotNone(doc["tau_s"], "the RC branch is fitted")
        self.check(path, t, v, i, doc, True)


if __name__ == "__main__":
    unittest.main(verbosity=2)
