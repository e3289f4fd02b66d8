#!/usr/bin/python3
"""The history views a technician reads: the weakest cell, --csv everywhere, trend over several
packs with empty weeks, one slope unit (per 10 cycles), fleet --sort.

What each check is measured against:
  - the simulator's truth (scripts/pbsim.py --weak-cell 3: that cell has 15 % less capacity
    and 1.6x the resistance, so it is the lowest under load in every flight);
  - ISO 8601 weeks from Python's datetime.date.isocalendar(), stepping 7 days from the first
    flight's week to the last: every week appears once, the empty ones with 0 flights;
  - the JSON slopes (per cycle; checked against numpy.polyfit in test_store.py) times 10 for
    the text and CSV "per 10 cycles", to the printed precision (half a unit in the last digit);
  - sorting: Python's sorted() on the values fleet --json reports.
Logs are simulated (seeded), for invented packs.

Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_views.py -v
"""
import csv
import datetime
import io
import json
import os
import re
import subprocess
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import run  # noqa: E402

EXIT_OK = 0
SCRATCH = pbtest.temp_dir("pbviews-")
DB = os.path.join(SCRATCH, "views.db")
DAY = 86400
EPOCH0 = 1774857600  # 2026-03-30T08:00:00Z, a Monday (2026-W14)
# TV-01: cell logs, cell 3 weak, flights in weeks 14, 14, 16 (15 empty), 18 (17 empty), 18
TV01 = [0, 2, 15, 29, 31]
# TV-02: plain logs with R0 rising, flights a few days apart
TV02 = [1, 5, 9, 13, 20]


def pb(*args):
    args = [str(a) for a in args]
    return run(args[0], "--db", DB, *args[1:])


def sim(path, seed, *args):
    p = subprocess.run([pbtest.PY, pbtest.PBSIM, "--packbook", pbtest.PACKBOOK, "--seed",
                        str(seed), "--duration-s", "300", "--rate-hz", "2", "-o", path,
                        *map(str, args)], capture_output=True, text=True)
    assert p.returncode == 0, p.stderr


def setUpModule():
    for label in ("TV-01", "TV-02"):
        rc, out, err = pb("pack", "add", label, "--cells", 4, "--chemistry", "lipo",
                          "--capacity", 2000)
        assert rc == 0, err
    for k, d in enumerate(TV01):
        path = os.path.join(SCRATCH, f"tv01-{k}.csv")
        sim(path, 300 + k, "--format", "cells", "--cells", 4, "--weak-cell", 3,
            "--capacity-mah", 2000, "--hover-a", 8)
        rc, out, err = pb("import", "--pack", "TV-01", "--date",
                          datetime.datetime.fromtimestamp(EPOCH0 + d * DAY, datetime.timezone.utc)
                          .strftime("%Y-%m-%dT%H:%M:%SZ"), path)
        assert rc == 0, err
    for k, d in enumerate(TV02):
        path = os.path.join(SCRATCH, f"tv02-{k}.csv")
        sim(path, 400 + k, "--format", "epoch", "--start-epoch", EPOCH0 + d * DAY,
            "--r0-mohm-cell", 4.0 + 0.3 * k, "--capacity-mah", 2000, "--hover-a", 8)
        rc, out, err = pb("import", "--pack", "TV-02", path)
        assert rc == 0, err


def csv_rows(text):
    return list(csv.DictReader(io.StringIO(text)))


class WeakestCell(unittest.TestCase):
    def test_everywhere(self):
        rc, out, err = pb("fleet", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        packs = {p["id"]: p for p in json.loads(out)}
        # truth: pbsim's --weak-cell 3 in every TV-01 flight; TV-02 logs have no cell columns
        self.assertEqual(packs["TV-01"]["weakest_cell"], {"cell": 3, "flights": 5, "of": 5})
        self.assertIsNone(packs["TV-02"]["weakest_cell"])
        rc, out, err = pb("fleet", "--csv")
        rows = {r["pack"]: r for r in csv_rows(out)}
        self.assertEqual((rows["TV-01"]["weakest_cell"], rows["TV-01"]["weakest_cell_flights"]),
                         ("3", "5"))
        self.assertEqual(rows["TV-02"]["weakest_cell"], "")
        rc, out, err = pb("fleet")
        self.assertRegex(out, r"TV-01 .* 3 \(5/5\) ")
        rc, out, err = pb("pack", "show", "TV-01")
        self.assertIn("weakest cell: 3, the lowest under load in 5 of the last 5 flights", out)
        rc, out, err = pb("pack", "show", "TV-01", "--csv")
        self.assertEqual({r["weakest_cell"] for r in csv_rows(out)}, {"3"})
        rc, out, err = pb("compare", "TV-01", "TV-02")
        self.assertRegex(out, r"weakest cell \(of last\)\s+3 \(5/5\)\s+-")
        rc, out, err = pb("compare", "TV-01", "TV-02", "--csv")
        self.assertEqual([r["weakest_cell"] for r in csv_rows(out)], ["3", ""])


class TrendViews(unittest.TestCase):
    def test_several_packs_and_empty_weeks(self):
        rc, out, err = pb("trend", "TV-01", "TV-02", "--csv")
        self.assertEqual(rc, EXIT_OK, err)
        rows = csv_rows(out)
        for label, days in (("TV-01", TV01), ("TV-02", TV02)):
            mine = [r for r in rows if r["pack"] == label]
            first = datetime.datetime.fromtimestamp(EPOCH0 + days[0] * DAY,
                                                    datetime.timezone.utc).date()
            last = datetime.datetime.fromtimestamp(EPOCH0 + days[-1] * DAY,
                                                   datetime.timezone.utc).date()
            want, d = [], first - datetime.timedelta(days=first.isoweekday() - 1)  # its Monday
            while d <= last:
                y, w, _ = d.isocalendar()
                want.append(f"{y:04d}-W{w:02d}")
                d += datetime.timedelta(days=7)
            self.assertEqual([r["week"] for r in mine], want, f"{label}: every ISO week once")
            self.assertEqual(sum(int(r["flights"]) for r in mine), len(days))
            for r in mine:
                if r["flights"] == "0":
                    self.assertEqual((r["charge_mah"], r["r0_mohm_per_cell"]), ("", ""))
        self.assertEqual([r["week"] for r in rows if r["pack"] == "TV-01" and r["flights"] == "0"],
                         ["2026-W15", "2026-W17"])
        rc, out, err = pb("trend", "TV-01", "TV-02")
        self.assertEqual(out.count("trend of pack "), 2)
        self.assertRegex(out, r"2026-W15\s+0 -\s+-\s+-\s+-")
        rc, out, err = pb("trend", "TV-01", "TV-02", "--json")
        self.assertEqual([d["id"] for d in json.loads(out)], ["TV-01", "TV-02"])
        rc, out, err = pb("trend", "TV-01", "--json")
        self.assertEqual(json.loads(out)["id"], "TV-01", "one pack: one object, as before")

    def test_slopes_per_10_cycles(self):
        rc, out, err = pb("trend", "TV-02", "--json")
        doc = json.loads(out)
        slope = doc["r0_mohm_per_cell"]["vs_cycles"]["slope"]
        ci = doc["r0_mohm_per_cell"]["vs_cycles"]["slope_ci95"]
        rc, text, err = pb("trend", "TV-02")
        m = re.search(r"IR \(R0\)\s+([+-][0-9.]+) \+/- ([0-9.]+) mOhm/cell per 10 cycles", text)
        self.assertIsNotNone(m, text)
        self.assertAlmostEqual(float(m.group(1)), 10 * slope, delta=0.0005 + 1e-12)
        self.assertAlmostEqual(float(m.group(2)), 10 * ci, delta=0.0005 + 1e-12)
        self.assertNotIn("per cycle", text)
        # every number of a projection carries its unit
        self.assertRegex(text, r"retirement level [0-9.]+ mOhm/cell")
        rc, out, err = pb("compare", "TV-01", "TV-02", "--csv")
        tv02 = [r for r in csv_rows(out) if r["pack"] == "TV-02"][0]
        self.assertAlmostEqual(float(tv02["r0_mohm_per_cell_per_10_cycles"]), 10 * slope,
                               delta=0.0005 + 1e-12)
        rc, out, err = pb("compare", "TV-01", "TV-02")
        self.assertIn("IR mOhm/cell per 10 cyc", out)


def on_terminal(*args, locale="C.UTF-8"):
    """packbook with its standard output on a pseudo-terminal (Python's pty); returns the text."""
    import pty
    master, slave = pty.openpty()
    env = {k: v for k, v in os.environ.items() if not k.startswith("LC_") and k != "LANG"}
    env["LC_ALL"] = locale
    p = subprocess.Popen([pbtest.PACKBOOK, *map(str, args)], stdout=slave, stderr=subprocess.PIPE,
                         env=env)
    os.close(slave)
    chunks = []
    while True:
        try:
            b = os.read(master, 65536)
        except OSError:  # EIO: the other side closed
            break
        if not b:
            break
        chunks.append(b)
    os.close(master)
    p.wait(timeout=60)
    return b"".join(chunks).decode("utf-8").replace("\r\n", "\n")


class OhmSymbol(unittest.TestCase):
    """mΩ where standard output is a UTF-8 terminal, mOhm otherwise (pipes, files, C locale);
    columns stay aligned in display columns (a header's right edge over its values')."""

    def test_terminal_and_pipe(self):
        utf = on_terminal("fleet", "--db", DB)
        self.assertIn("IR m\u03a9", utf)
        self.assertNotIn("mOhm", utf)
        lines = utf.splitlines()
        head = lines[0]
        end = head.index("IR m\u03a9") + len("IR m\u03a9")
        row = [l for l in lines if l.startswith("TV-02")][0]
        # the per-cell IR value ends where its header ends (both right-aligned, 9 columns)
        rc, js, err = pb("fleet", "--json")
        ir = [p for p in json.loads(js) if p["id"] == "TV-02"][0]["r0_mohm_per_cell"]
        val = f"{ir:.2f}"
        self.assertEqual(row.index(" " + val + " ") + 1 + len(val), end, utf)
        plain = on_terminal("fleet", "--db", DB, locale="C")
        self.assertIn("IR mOhm", plain)
        rc, out, err = pb("fleet")
        self.assertIn("IR mOhm", out, "a pipe gets mOhm")
        self.assertIn("m\u03a9/cell per 10 cycles", on_terminal("trend", "TV-02", "--db", DB))


class FleetSort(unittest.TestCase):
    def test_r0_and_ratio_keys(self):
        rc, out, err = pb("fleet", "--json")
        packs = json.loads(out)
        for key, field in (("r0", "r0_mohm_per_cell"), ("r0-ratio", "r0_ratio"),
                           ("imbalance", "cell_spread_mv")):
            rc, out, err = pb("fleet", "--json", "--sort", key)
            self.assertEqual(rc, EXIT_OK, err)
            got = [p["id"] for p in json.loads(out)]
            known = sorted((p for p in packs if p[field] is not None),
                           key=lambda p: (-p[field], p["id"]))
            unknown = sorted(p["id"] for p in packs if p[field] is None)
            self.assertEqual(got, [p["id"] for p in known] + unknown, key)


if __name__ == "__main__":
    unittest.main()
