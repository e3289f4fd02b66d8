#!/usr/bin/python3
"""A missing cell column drops that cell, not the log.
What each check is measured against:
  - the log itself, read here with Python's csv module: the lowest voltage of every cell kept
    (exact, as printed with 3 decimals in JSON's full precision: absolute 1e-9), and the pack
    voltage a log without a pack column stands for (6 x the mean of the cells read: relative
    1e-9, the rule man packbook states for pack_voltage_estimated);
  - the same log with no cell columns at all: charge, energy and IR come from the pack
    voltage and current, so dropping a cell column must not move them (exact: same numbers);
  - the database (SQLite, read with Python's sqlite3): the flight_cells rows of an imported
    flight are the cells read, numbered as in the log; a 6S pack's log with cell 6 empty is
    the pack's (its cell 6 dropped), not another pack's.
The log tests/data/cells/tm12-cell3-empty.csv is every 4th row of samples/tm12-cells.csv
(the invented demo fleet, scripts/make-samples.sh) with cell 3 left empty; the other cases
are made from it here.
Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_cells.py -v
"""
import csv
import json
import os
import sqlite3
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import run  # noqa: E402

EXIT_OK, EXIT_INPUT = 0, 3
LOG = os.path.join(pbtest.DATA, "cells", "tm12-cell3-empty.csv")
PACK = ["--chemistry", "lihv", "--capacity", "4200"]


def rows_of(path):
    with open(path, newline="") as f:
        rows = [r for r in csv.reader(f) if r and not r[0].startswith("#")]
    return rows[0], rows[1:]


def write(header, rows):
    text = ",".join(header) + "\n" + "".join(",".join(r) + "\n" for r in rows)
    return pbtest.write_temp(text)


def variant(drop=(), rename=None, fill=None):
    """The test log with columns dropped, renamed or refilled (fill: name -> function of row)."""
    header, rows = rows_of(LOG)
    keep = [k for k, h in enumerate(header) if h not in drop]
    out = []
    for r in rows:
        r = list(r)
        for name, fn in (fill or {}).items():
            r[header.index(name)] = fn(r)
        out.append([r[k] for k in keep])
    hdr = [rename.get(header[k], header[k]) if rename else header[k] for k in keep]
    return write(hdr, out)


def analyze(path, *args):
    rc, out, err = run("analyze", path, "--json", *args)
    return rc, (json.loads(out) if rc == 0 else None), err


def codes(doc):
    return [w["code"] for w in doc["warnings"]]


def lowest(path, name):
    header, rows = rows_of(path)
    return min(float(r[header.index(name)]) for r in rows)


class DroppedCell(unittest.TestCase):
    def test_empty_column_is_dropped_and_named(self):
        rc, doc, err = analyze(LOG, "--cells", "6", *PACK)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(doc["cells"], 6)
        self.assertEqual([c["index"] for c in doc["cells_detail"]], [1, 2, 4, 5, 6])
        for c in doc["cells_detail"]:
            self.assertAlmostEqual(c["voltage_min_v"], lowest(LOG, f"cell{c['index']}_v"),
                                   delta=1e-9)
        _, rows = rows_of(LOG)
        self.assertEqual(doc["input"]["cells_dropped"],
                         [{"cell": 3, "column": 6, "unreadable": len(rows), "read": 0,
                           "unused": False}])
        self.assertIn("cell_dropped", codes(doc))
        self.assertNotIn("cells_sum_mismatch", codes(doc))
        self.assertEqual(doc["input"]["dropped"], 0)  # no sample went with the cell
        # the pack's own columns give the same charge, energy and IR as without any cells
        rc, bare, err = analyze(variant(drop=[f"cell{c}_v" for c in range(1, 7)]), "--cells",
                                "6", *PACK)
        self.assertEqual(rc, EXIT_OK, err)
        for key in ("charge_used_mah", "energy_used_wh", "samples"):
            self.assertEqual(doc[key], bare[key], key)
        self.assertEqual(doc["r0_mohm"], bare["r0_mohm"])

    def test_text_names_the_cell(self):
        rc, out, err = run("analyze", LOG, *PACK)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("cells dropped (no voltage in their column): 1: cell 3", out)
        self.assertIn("[cell_dropped] cell 3 dropped", out)
        self.assertIn("6S", out)  # cell 3 still counts: cells from the columns

    def test_text_values_and_absent_column(self):
        for path, column in ((variant(fill={"cell3_v": lambda r: "n/a"}), 6),
                             (variant(drop=["cell3_v"]), None)):
            rc, doc, err = analyze(path, *PACK)
            self.assertEqual(rc, EXIT_OK, err)
            self.assertEqual(doc["cells"], 6)
            self.assertEqual([d["cell"] for d in doc["input"]["cells_dropped"]], [3])
            self.assertEqual(doc["input"]["cells_dropped"][0]["column"], column)

    def test_map_to_a_missing_column(self):
        names = {f"cell{c}_v": f"B{c}" for c in range(1, 7)}
        path = variant(drop=["cell3_v"], rename=names)
        m = ",".join(f"cell{c}_v=B{c}" for c in range(1, 7))
        rc, doc, err = analyze(path, "--map", m, *PACK)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual([c["index"] for c in doc["cells_detail"]], [1, 2, 4, 5, 6])
        self.assertEqual(doc["input"]["cells_dropped"][0]["column"], None)
        # another role's missing column is still a usage error
        rc, _, err = analyze(path, "--map", "current_a=nowhere", *PACK)
        self.assertEqual(rc, 2)
        self.assertIn("no column 'nowhere'", err)

    def test_voltage_from_the_cells_read(self):
        path = variant(drop=["voltage_v"])
        rc, doc, err = analyze(path, *PACK)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertTrue(doc["input"]["voltage_from_cells"])
        self.assertIn("pack_voltage_estimated", codes(doc))
        header, rows = rows_of(path)
        kept = [header.index(f"cell{c}_v") for c in (1, 2, 4, 5, 6)]
        first = 6 * sum(float(rows[0][k]) for k in kept) / 5
        self.assertAlmostEqual(doc["voltage_start_v"], first, delta=1e-9 * first)

    def test_unused_columns_of_a_smaller_pack(self):
        # a logger with six cell columns on a 4S pack: cells 5 and 6 empty
        path = variant(drop=["voltage_v", "cell3_v"],
                       fill={"cell5_v": lambda r: "", "cell6_v": lambda r: ""},
                       rename={"cell4_v": "cell3_v"})
        header, _ = rows_of(path)
        self.assertNotIn("cell4_v", header)
        rc, doc, err = analyze(path, *PACK)
        self.assertEqual(rc, EXIT_OK, err)
        # cells 1..3 read, 4 has no column: the pack is 3S as far as the log shows
        self.assertEqual(doc["cells"], 3)
        self.assertEqual(codes(doc).count("cell_unused"), 3)  # 4 (no column), 5, 6
        self.assertNotIn("pack_voltage_estimated", codes(doc))

    def test_no_voltage_at_all_fails(self):
        path = variant(drop=["voltage_v"],
                       fill={f"cell{c}_v": (lambda r: "") for c in range(1, 7)})
        rc, _, err = analyze(path, *PACK)
        self.assertEqual(rc, EXIT_INPUT)
        self.assertIn("no voltage", err)

    def test_import_stores_the_cells_read(self):
        db = os.path.join(pbtest.temp_dir("pbcells-"), "h.db")
        rc, _, err = run("pack", "add", "TM-12", "--cells", "6", *PACK, "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = run("import", "--pack", "TM-12", LOG, "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        con = sqlite3.connect(db)
        try:
            cells = [r[0] for r in con.execute("SELECT cell FROM flight_cells ORDER BY cell")]
        finally:
            con.close()
        self.assertEqual(cells, [1, 2, 4, 5, 6])

    def test_import_last_cell_empty(self):
        # a 6S pack's log with cell 6 empty: the pack says cell 6 is there, so it is a dropped
        # cell of the pack (not a column the pack lacks) and the log fits the pack
        db = os.path.join(pbtest.temp_dir("pbcells-"), "h.db")
        rc, _, err = run("pack", "add", "TM-12", "--cells", "6", *PACK, "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        path = variant(fill={"cell3_v": lambda r: "4.000", "cell6_v": lambda r: ""})
        rc, out, err = run("import", "--pack", "TM-12", path, "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        con = sqlite3.connect(db)
        try:
            cells = [r[0] for r in con.execute("SELECT cell FROM flight_cells ORDER BY cell")]
            report = json.loads(con.execute("SELECT report_json FROM flight_reports")
                                .fetchone()[0])
        finally:
            con.close()
        self.assertEqual(cells, [1, 2, 3, 4, 5])
        self.assertIn("cell_dropped", codes(report))
        self.assertNotIn("cell_unused", codes(report))


if __name__ == "__main__":
    unittest.main()
