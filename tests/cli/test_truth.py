#!/usr/bin/python3
"""End-to-end: generated flights with known truth through `packbook analyze --json`.

The generator is scripts/pbsim.py (seeded; each case prints its seed). Targets
from the analyze work item: R0 within 10 %, charge within 1 %, start SoC within
5 points. The truth model shares packbook's OCV table (pbsim reads it from
`packbook chemistry --json`), so these tests measure the estimator (sag
correction, fits, counting), not the table.
"""
import json
import os
import subprocess
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402

PBSIM = pbtest.PBSIM


def generate(tmp, name, *args):
    log = os.path.join(tmp, name + ".csv")
    truth = os.path.join(tmp, name + ".json")
    subprocess.run([sys.executable, PBSIM, "--packbook", pbtest.PACKBOOK, "-o", log,
                    "--truth", truth, *map(str, args)], check=True)
    with open(truth) as f:
        return log, json.load(f)


class Truth(unittest.TestCase):
    def setUp(self):
        self.tmp = pbtest.temp_dir("pbtruth-")

    def check_core(self, doc, truth, seed):
        msg = f"seed {seed}"
        print(f"  seed {seed}: R0 {doc['r0_mohm']['value']:.3f} (truth {truth['r0_mohm']:.3f}) mOhm,"
              f" charge {doc['charge_used_mah']:.2f} (truth {truth['charge_used_mah']:.2f}) mAh,"
              f" SoC start {doc['soc_start_pct']:.1f} (truth {truth['soc_start_pct']:.1f})")
        self.assertLess(abs(doc["r0_mohm"]["value"] - truth["r0_mohm"]), 0.10 * truth["r0_mohm"], msg)
        self.assertLess(abs(doc["charge_used_mah"] - truth["charge_used_mah"]),
                        0.01 * truth["charge_used_mah"], msg)
        self.assertLess(abs(doc["soc_start_pct"] - truth["soc_start_pct"]), 5.0, msg)

    def test_flights_many_seeds(self):
        for seed in range(1, 9):
            soc0 = 66 + 4 * seed
            log, truth = generate(self.tmp, f"f{seed}", "--seed", seed, "--soc0", soc0,
                                  "--r0-mohm-cell", 2.5 + seed, "--cells", 3 + seed % 4,
                                  "--hover-a", 12 + 2 * seed, "--duration-s", 400 + 20 * seed)
            doc = pbtest.analyze_json(log, "--chemistry", "lipo", "--cells", truth["cells"],
                                      "--capacity", truth["capacity_mah"])
            self.check_core(doc, truth, seed)
            # energy: the generator integrates the same pieces exactly (1 %)
            self.assertLess(abs(doc["energy_used_wh"] - truth["energy_used_wh"]),
                            0.01 * truth["energy_used_wh"])
            # end SoC and capacity against truth within their own stated 95 % bands
            self.assertLess(abs(doc["soc_end_pct"] - truth["soc_end_pct"]), doc["soc_end_ci95"])
            cap = doc["capacity_est_mah"]
            self.assertLess(abs(cap["value"] - truth["capacity_mah"]), cap["ci95"], f"seed {seed}")

    def test_long_log(self):
        # 300,000 rows of bench/gen_log.py --rc (7 MB; its truth in its header and
        # bench/README.md: R0 12 mOhm, R1 6 mOhm, tau 4 s): the paths a long log takes
        # (issue 14) -- the reader's second thread past the first MiB, the tau grid's
        # thread from 100,000 rows, robust fits reweighted on an even sample from 262,144
        # rows -- must recover the generator's circuit within 10 % (the R0 target above)
        # and count the charge as the trapezoid rule does (numpy, 1e-9 relative)
        import numpy as np
        log = os.path.join(self.tmp, "long.csv")
        subprocess.run([sys.executable, os.path.join(pbtest.ROOT, "bench", "gen_log.py"),
                        "300000", log, "--rc"], check=True)
        self.assertGreater(os.path.getsize(log), 4 << 20)
        doc = pbtest.analyze_json(log, "--chemistry", "lipo", "--cells", "4")
        self.assertEqual((doc["samples"], doc["input"]["dropped"]), (300000, 0))
        for key, want in (("r0_model_mohm", 12.0), ("r1_mohm", 6.0)):
            got = doc[key]["value"]
            print(f"  long log: {key} {got:.4f} (truth {want})")
            self.assertLess(abs(got - want), 0.10 * want, key)
        self.assertLess(abs(doc["tau_s"] - 4.0), 0.4)
        t, i = np.loadtxt(log, delimiter=",", skiprows=1, usecols=(0, 2), unpack=True)
        q_mah = float(np.sum(np.diff(t) * 0.5 * (i[1:] + i[:-1]))) / 3.6
        self.assertLess(abs(doc["charge_used_mah"] - q_mah), 1e-9 * q_mah)

    def test_inferred_cells_and_chemistries(self):
        for seed, chem, cells in ((11, "lihv", 6), (12, "nmc", 4), (13, "lipo", 3)):
            log, truth = generate(self.tmp, f"c{seed}", "--seed", seed, "--chemistry", chem,
                                  "--cells", cells, "--soc0", 95)
            doc = pbtest.analyze_json(log, "--chemistry", chem)
            self.assertEqual(doc["cells"], cells, f"seed {seed}: inferred cell count")
            self.check_core(doc, truth, seed)

    def test_per_cell_weak_cell(self):
        log, truth = generate(self.tmp, "weak", "--seed", 21, "--format", "cells", "--cells", 4,
                              "--weak-cell", 3)
        doc = pbtest.analyze_json(log, "--chemistry", "lipo")
        self.assertEqual(doc["cells"], 4)
        self.assertEqual(doc["weakest_cell"], 3)
        self.assertEqual(len(doc["cells_detail"]), 4)
        r = [c["r0_mohm"]["value"] for c in doc["cells_detail"]]
        # the weak cell was generated with 1.6x the others' resistance (10 %)
        self.assertLess(abs(r[2] / r[0] - 1.6), 0.16)
        self.check_core(doc, truth, 21)

    def test_adc_counts(self):
        a_per_count = 0.0885  # 10-bit, 3.3 V, 14000:1 into 510 ohm (common practice)
        log, truth = generate(self.tmp, "adc", "--seed", 31, "--format", "adc",
                              "--adc-a-per-count", a_per_count)
        doc = pbtest.analyze_json(log, "--chemistry", "lipo", "--cells", 4, "--adc-bits", 10,
                                  "--adc-vref", 3.3, "--sense-ratio", 14000, "--sense-ohm", 510)
        self.assertTrue(doc["input"]["current_from_adc"])
        # counts are quantised at 0.09 A, so charge keeps its 1 % target
        self.check_core(doc, truth, 31)

    def test_absolute_times(self):
        for fmt in ("epoch", "iso"):
            log, truth = generate(self.tmp, fmt, "--seed", 41, "--format", fmt,
                                  "--start-epoch", 1776496930)
            doc = pbtest.analyze_json(log, "--chemistry", "lipo", "--cells", 4)
            self.assertEqual(doc["start_time"], "2026-04-18T07:22:10Z", fmt)
            self.check_core(doc, truth, 41)

    def test_semicolon_ms_mv(self):
        log, truth = generate(self.tmp, "semi", "--seed", 51, "--format", "semicolon")
        doc = pbtest.analyze_json(log, "--chemistry", "lipo", "--cells", 4)
        self.assertEqual(doc["input"]["delimiter"], ";")
        self.assertEqual(doc["input"]["decimal"], ",")
        self.check_core(doc, truth, 51)

    def test_series_output(self):
        log, truth = generate(self.tmp, "series", "--seed", 71, "--cells", 4, "--soc0", 95)
        out = os.path.join(self.tmp, "series-samples.csv")  # generate() wrote series.csv, the log
        doc = pbtest.analyze_json(log, "--chemistry", "lipo", "--cells", 4, "--series", out)
        import csv
        with open(out) as f:
            rows = list(csv.DictReader(f))
        self.assertEqual(len(rows), doc["samples"])
        # counted SoC ends where the generator's SoC ended (5 points, the start target)
        self.assertLess(abs(float(rows[-1]["soc_counted_pct"]) - truth["soc_end_pct"]), 5.0)
        # the sag-corrected OCV under load sits above the loaded voltage by about R0 I
        k = max(range(len(rows)), key=lambda j: float(rows[j]["current_a"]))
        lift = float(rows[k]["ocv_v"]) - float(rows[k]["voltage_v"])
        self.assertGreater(lift, 0.9 * doc["r0_mohm"]["value"] / 1000 * float(rows[k]["current_a"]))

    def test_voltage_only(self):
        log, truth = generate(self.tmp, "vonly", "--seed", 61, "--format", "voltage-only",
                              "--soc0", 90)
        doc = pbtest.analyze_json(log, "--chemistry", "lipo", "--cells", 4)
        self.assertIsNone(doc["charge_used_mah"])
        self.assertIsNone(doc["r0_mohm"]["value"])
        self.assertIn("voltage_only", pbtest.warning_codes(doc))
        # the log starts at rest, so the loaded voltage is the OCV there (5 points)
        self.assertLess(abs(doc["soc_start_pct"] - truth["soc_start_pct"]), 5.0)


if __name__ == "__main__":
    unittest.main(verbosity=2)
