#!/usr/bin/python3
"""pbsim: simulate a multirotor pack through a flight and write its log.

Used for the demo samples (samples/) and for tests with known truth. The
truth model is an equivalent circuit per cell: OCV(SoC) from packbook's own
table for the chemistry (read from `packbook chemistry --json`, so truth and
estimate share one curve and the test measures the estimator, not the
table), series resistance R0 and one RC branch (R1, tau). Current is taken
as linear between samples, the same assumption the trapezoid rule makes,
and the RC branch is integrated with sub-steps.

Everything is seeded; the truth is returned (and printed with --truth).
"""
import argparse
import json
import math
import os
import subprocess
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))


def load_table(chemistry, packbook=None):
    exe = packbook or os.environ.get("PACKBOOK") or os.path.join(HERE, "..", "build", "packbook")
    out = subprocess.run([exe, "chemistry", "--json"], check=True, capture_output=True, text=True)
    for c in json.loads(out.stdout):
        if c["name"] == chemistry:
            return np.array(c["soc_pct"]), np.array(c["ocv_v"])
    raise SystemExit(f"pbsim: no chemistry {chemistry}")


def flight_profile(rng, duration_s, dt, hover_a, rest_start_s, rest_end_s, steps=True):
    """Current (A) at each sample: rest, arm, climb, hover with manoeuvres, land, rest."""
    t = np.arange(0.0, duration_s + 1e-9, dt)
    i = np.zeros_like(t)
    fly0, fly1 = rest_start_s + 3.0, duration_s - rest_end_s
    arm = (t >= rest_start_s) & (t < fly0)
    i[arm] = 0.8
    fly = (t >= fly0) & (t < fly1)
    base = hover_a * (1.0 + 0.08 * np.sin(2 * math.pi * t / 37.0))
    i[fly] = base[fly]
    if steps:
        # manoeuvres: step changes of current lasting a few seconds
        k = fly0 + 5.0
        while k < fly1 - 10.0:
            length = rng.uniform(2.0, 6.0)
            level = rng.choice([0.45, 0.7, 1.5, 1.9])
            sel = (t >= k) & (t < k + length)
            i[sel] = hover_a * level
            k += length + rng.uniform(6.0, 15.0)
    climb = (t >= fly0) & (t < fly0 + 4.0)
    i[climb] = 1.8 * hover_a
    i[fly] += rng.normal(0.0, 0.02 * hover_a, fly.sum())
    return t, i


def simulate(t, i_a, cells, capacity_ah, soc0_pct, r0_ohm, r1_ohm, tau_s, table, cell_cap=None,
             cell_r=None, substeps=10):
    """Per-cell terminal voltages (cells x n) and true SoC (cells x n)."""
    soc_tab, ocv_tab = table
    n = len(t)
    cap = np.full(cells, capacity_ah) if cell_cap is None else np.asarray(cell_cap)
    rs = np.ones(cells) if cell_r is None else np.asarray(cell_r)
    soc = np.zeros((cells, n))
    v = np.zeros((cells, n))
    s = np.full(cells, soc0_pct, dtype=float)
    v1 = r1_ohm * rs * i_a[0]  # RC branch at steady state for the first current
    for k in range(n):
        if k > 0:
            dt = t[k] - t[k - 1]
            h = dt / substeps
            for j in range(substeps):
                # current linear over the interval, evaluated mid-substep
                f = (j + 0.5) / substeps
                i_mid = i_a[k - 1] + f * (i_a[k] - i_a[k - 1])
                s = s - 100.0 * i_mid * h / 3600.0 / cap
                a = math.exp(-h / tau_s)
                v1 = a * v1 + (1 - a) * r1_ohm * rs * i_mid
        soc[:, k] = s
        ocv = np.interp(s, soc_tab, ocv_tab)
        v[:, k] = ocv - r0_ohm * rs * i_a[k] - v1
    return v, soc


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--chemistry", default="lipo")
    ap.add_argument("--cells", type=int, default=4)
    ap.add_argument("--capacity-mah", type=float, default=5000.0)
    ap.add_argument("--soc0", type=float, default=98.0)
    ap.add_argument("--r0-mohm-cell", type=float, default=4.0)
    ap.add_argument("--r1-mohm-cell", type=float, default=2.0)
    ap.add_argument("--tau-s", type=float, default=8.0)
    ap.add_argument("--hover-a", type=float, default=22.0)
    ap.add_argument("--duration-s", type=float, default=600.0)
    ap.add_argument("--rate-hz", type=float, default=10.0)
    ap.add_argument("--rest-start-s", type=float, default=8.0)
    ap.add_argument("--rest-end-s", type=float, default=90.0)
    ap.add_argument("--no-steps", action="store_true")
    ap.add_argument("--weak-cell", type=int, default=0, help="1-based cell with 15 %% less capacity and 1.6x R")
    ap.add_argument("--noise-mv", type=float, default=3.0)
    ap.add_argument("--noise-ma", type=float, default=50.0)
    ap.add_argument("--format", default="plain",
                    choices=["plain", "cells", "adc", "voltage-only", "epoch", "iso", "semicolon"])
    ap.add_argument("--adc-a-per-count", type=float, default=0.0)
    ap.add_argument("--start-epoch", type=float, default=1776496930.0)
    ap.add_argument("--temp-c", type=float, default=float("nan"))
    ap.add_argument("--comment", action="append", default=[], help="a '# ' line at the top")
    ap.add_argument("--packbook", default=None)
    ap.add_argument("--truth", default=None, help="write the truth as JSON here")
    ap.add_argument("-o", "--output", default="-")
    a = ap.parse_args()

    rng = np.random.default_rng(a.seed)
    table = load_table(a.chemistry, a.packbook)
    dt = 1.0 / a.rate_hz
    t, i_a = flight_profile(rng, a.duration_s, dt, a.hover_a, a.rest_start_s, a.rest_end_s,
                            steps=not a.no_steps)
    cap_ah = a.capacity_mah / 1000.0
    cell_cap = np.full(a.cells, cap_ah)
    cell_r = np.ones(a.cells)
    if a.weak_cell:
        cell_cap[a.weak_cell - 1] *= 0.85
        cell_r[a.weak_cell - 1] *= 1.6
    v_cells, soc = simulate(t, i_a, a.cells, cap_ah, a.soc0, a.r0_mohm_cell / 1000.0,
                            a.r1_mohm_cell / 1000.0, a.tau_s, table, cell_cap, cell_r)
    v_pack = v_cells.sum(axis=0)
    charge_mah = float(np.sum(np.diff(t) * 0.5 * (i_a[1:] + i_a[:-1])) / 3.6)
    energy_wh = float(np.sum(np.diff(t) * (
        v_pack[:-1] * i_a[:-1] + 0.5 * (v_pack[:-1] * np.diff(i_a) + np.diff(v_pack) * i_a[:-1])
        + np.diff(v_pack) * np.diff(i_a) / 3.0)) / 3600.0)
    truth = {
        "seed": a.seed, "cells": a.cells, "chemistry": a.chemistry,
        "capacity_mah": a.capacity_mah, "soc_start_pct": float(soc[:, 0].min()),
        "soc_end_pct": float(soc[:, -1].min()),
        "r0_mohm": a.r0_mohm_cell * float(cell_r.sum()), "r1_mohm": a.r1_mohm_cell * float(cell_r.sum()),
        "tau_s": a.tau_s, "charge_used_mah": charge_mah, "energy_used_wh": energy_wh,
        "samples": len(t), "duration_s": float(t[-1]),
        # first time the weakest cell's SoC is at or below 30 %, from the log's start
        "t_soc30_s": (float(t[np.argmax(soc.min(axis=0) <= 30.0)])
                      if (soc.min(axis=0) <= 30.0).any() else None),
    }
    # what the logger sees: noise and quantisation
    v_meas = np.round(v_pack + rng.normal(0, a.noise_mv / 1000.0, len(t)), 3)
    vc_meas = np.round(v_cells + rng.normal(0, a.noise_mv / 1000.0 / 2, v_cells.shape), 3)
    i_meas = np.round(i_a + rng.normal(0, a.noise_ma / 1000.0, len(t)), 2)

    out = sys.stdout if a.output == "-" else open(a.output, "w", newline="")
    f = a.format
    for line in a.comment:
        out.write(f"# {line}\n")
    if f == "semicolon":
        out.write("# time in ms, decimal comma\n")
        out.write("t_ms;vbat_mV;ibat_mA\n")
        for k in range(len(t)):
            out.write(f"{int(round(t[k] * 1000))};{int(round(v_meas[k] * 1000))};"
                      f"{i_meas[k] * 1000:.1f}\n".replace(".", ","))
    else:
        head = {"plain": "time_s,voltage_v,current_a", "cells": "time_s,voltage_v,current_a",
                "adc": "time_s,voltage_v,current_adc", "voltage-only": "time_s,voltage_v",
                "epoch": "time_unix,voltage_v,current_a", "iso": "timestamp,voltage_v,current_a"}[f]
        if f == "cells":
            head += "," + ",".join(f"cell{c + 1}_v" for c in range(a.cells))
        if not math.isnan(a.temp_c):
            head += ",temp_c"
        out.write(head + "\n")
        for k in range(len(t)):
            if f == "epoch":
                row = [f"{a.start_epoch + t[k]:.3f}"]
            elif f == "iso":
                ms = int(round((a.start_epoch + t[k]) * 1000))
                import datetime
                d = datetime.datetime.fromtimestamp(ms / 1000, datetime.timezone.utc)
                row = [d.strftime("%Y-%m-%dT%H:%M:%S.") + f"{ms % 1000:03d}Z"]
            else:
                row = [f"{t[k]:.3f}"]
            row.append(f"{v_meas[k]:.3f}")
            if f == "adc":
                row.append(str(int(round(i_meas[k] / a.adc_a_per_count))))
            elif f != "voltage-only":
                row.append(f"{i_meas[k]:.2f}")
            if f == "cells":
                row += [f"{vc_meas[c, k]:.3f}" for c in range(a.cells)]
            if not math.isnan(a.temp_c):
                row.append(f"{a.temp_c + 8.0 * k / len(t):.1f}")
            out.write(",".join(row) + "\n")
    if out is not sys.stdout:
        out.close()
    if a.truth:
        with open(a.truth, "w") as fp:
            json.dump(truth, fp, indent=2)


if __name__ == "__main__":
    main()
