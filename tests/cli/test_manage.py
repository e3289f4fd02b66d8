#!/usr/bin/python3
"""Managing the history: flight list, flight remove, flight move, pack edit, pack unretire.

What each check is measured against:
  - the database itself (SQLite, read with Python's sqlite3): the ids, dates, files and
    charges that flight list prints are the rows of the flights table, exactly (CSV keeps
    0.1 mAh: absolute 0.05 mAh);
  - the definitions in man packbook (COMMANDS, fleet): equivalent full cycles = total charge
    drawn / rated capacity, and the R0 baseline = the median of the pack's first 3 flights'
    R0 per cell; recomputed here with Python's statistics.median from the rows that remain
    after each change, compared at the printed precision (cycles 0.05, mOhm 0.005) and in
    pack show --json (relative 1e-9);
  - SQLite's PRAGMA foreign_key_check: no flight_cells row outlives its flight.
Logs are simulated by scripts/pbsim.py (seeded, invented fleet), 4S LiPo, 5000 mAh.

Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_manage.py -v
"""
import csv
import io
import json
import os
import shutil
import sqlite3
import statistics
import subprocess
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import run  # noqa: E402

EXIT_OK, EXIT_SOME_FAILED, EXIT_USAGE = 0, 1, 2
SCRATCH = pbtest.temp_dir("pbmanage-")
os.environ["PACKBOOK_DB"] = os.path.join(SCRATCH, "stray", "packbook.db")
os.environ["XDG_DATA_HOME"] = os.path.join(SCRATCH, "xdg")
os.environ["XDG_CONFIG_HOME"] = os.path.join(SCRATCH, "xdg-config")
EPOCH0 = 1775030400  # 2026-04-01T08:00:00Z
LOGS = []


def setUpModule():
    # five flights a day apart with R0 rising, so the baseline moves when one goes
    for k in range(5):
        path = os.path.join(SCRATCH, f"tm21-{k}.csv")
        cmd = [pbtest.PY, pbtest.PBSIM, "--packbook", pbtest.PACKBOOK, "--seed", str(700 + k),
               "--format", "epoch", "--start-epoch", str(EPOCH0 + 86400 * k), "--cells", "4",
               "--r0-mohm-cell", str(4.0 + 0.6 * k), "--duration-s", "240", "--rate-hz", "2",
               "-o", path]
        p = subprocess.run(cmd, capture_output=True, text=True)
        assert p.returncode == 0, p.stderr
        LOGS.append(path)


def pb(db, *args):
    args = [str(a) for a in args]
    return run(args[0], "--db", db, *args[1:])


def query(db, sql, *params):
    con = sqlite3.connect(db)
    try:
        return con.execute(sql, params).fetchall()
    finally:
        con.close()


def history(tc, name, packs=(("TR-21", 4), ("TR-22", 4), ("TR-26", 6))):
    """A database with the packs and the five flights imported into the first."""
    db = os.path.join(pbtest.temp_dir(f"pbmanage-{name}-"), "h.db")
    for label, cells in packs:
        rc, out, err = pb(db, "pack", "add", label, "--cells", cells, "--chemistry", "lipo",
                          "--capacity", 5000)
        tc.assertEqual(rc, EXIT_OK, err)
    rc, out, err = pb(db, "import", "--pack", packs[0][0], *LOGS)
    tc.assertEqual(rc, EXIT_OK, err)
    tc.assertIn("5 imported", out)
    return db


def expected_state(db, label):
    """(flights, cycles, baseline R0 per cell) from the rows, by the man page's definitions."""
    rows = query(db, "SELECT f.charge_used_mah, f.r0_mohm, p.capacity_mah, p.cells FROM flights f "
                     "JOIN packs p ON p.id = f.pack_id WHERE p.label = ? "
                     "ORDER BY f.flown_epoch_s, f.id", label)
    if not rows:
        return 0, 0.0, None
    cap, cells = rows[0][2], rows[0][3]
    cycles = sum(r[0] for r in rows) / cap
    r0 = [r[1] / cells for r in rows if r[1] is not None][:3]
    return len(rows), cycles, statistics.median(r0) if r0 else None


class FlightList(unittest.TestCase):
    def test_list_is_the_table(self):
        db = history(self, "list")
        rows = query(db, "SELECT id, flown_at, date_source, source, charge_used_mah FROM flights "
                         "ORDER BY flown_epoch_s, id")
        rc, out, err = pb(db, "flight", "list", "TR-21", "--csv")
        self.assertEqual(rc, EXIT_OK, err)
        got = list(csv.DictReader(io.StringIO(out)))
        self.assertEqual([int(r["id"]) for r in got], [r[0] for r in rows], "ids, oldest first")
        for r, (fid, flown, src_kind, source, charge) in zip(got, rows):
            self.assertEqual(r["pack"], "TR-21")
            self.assertEqual(r["flown_at"], flown)
            self.assertEqual(r["date_source"], src_kind)
            self.assertEqual(r["source"], source)
            self.assertAlmostEqual(float(r["charge_used_mah"]), charge, delta=0.05)
        rc, out, err = pb(db, "flight", "list", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        doc = json.loads(out)
        self.assertEqual([d["id"] for d in doc], [r[0] for r in rows])
        rc, out, err = pb(db, "flight", "list")
        self.assertEqual(rc, EXIT_OK, err)
        for r in rows:
            self.assertIn(os.path.basename(r[3]), out)
        rc, out, err = pb(db, "flight", "list", "TR-22")
        self.assertEqual((rc, out.strip().splitlines()[-1]), (EXIT_OK, "(no flights)"))
        rc, out, err = pb(db, "flight", "list", "NOPE")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("unknown pack 'NOPE'", err)


class RemoveAndMove(unittest.TestCase):
    def check_pack(self, db, label, out=None):
        n, cycles, base = expected_state(db, label)
        rc, js, err = pb(db, "pack", "show", label, "--json")
        self.assertEqual(rc, EXIT_OK, err)
        h = json.loads(js)["health"]
        self.assertEqual(h["flights"], n)
        self.assertAlmostEqual(h["equivalent_cycles"], cycles, delta=1e-9 * max(cycles, 1))
        if base is None:
            self.assertIsNone(h["r0_baseline_mohm_per_cell"])
        else:
            self.assertAlmostEqual(h["r0_baseline_mohm_per_cell"], base, delta=1e-9 * base)
        if out is not None:
            self.assertIn(f"-> {n} flight", out)
            self.assertIn(f"-> {cycles:.1f} equivalent cycles", out)
        return n, cycles, base

    def test_remove_recomputes_cycles_and_baseline(self):
        db = history(self, "remove")
        n0, c0, b0 = self.check_pack(db, "TR-21")
        first = query(db, "SELECT id, source FROM flights ORDER BY flown_epoch_s LIMIT 1")[0]
        rc, out, err = pb(db, "flight", "remove", first[0])
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn(f"removed flight {first[0]} of TR-21", out)
        self.assertIn(first[1], out)
        self.assertIn(f"TR-21: {n0} -> {n0 - 1} flights, {c0:.1f} ->", out)
        n1, c1, b1 = self.check_pack(db, "TR-21", out)
        self.assertEqual(n1, n0 - 1)
        self.assertGreater(b1, b0, "the lowest-R0 flight went: the baseline rises")
        self.assertIn(f"baseline IR (R0) {b0:.2f} -> {b1:.2f} mOhm/cell", out)
        self.assertEqual(query(db, "SELECT count(*) FROM flight_cells WHERE flight_id = ?",
                               first[0]), [(0,)])
        self.assertEqual(query(db, "PRAGMA foreign_key_check"), [])
        # the same id again is gone, and a non-number is a usage error
        rc, out, err = pb(db, "flight", "remove", first[0])
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn(f"no flight {first[0]}", err)
        rc, out, err = pb(db, "flight", "remove", "first")
        self.assertEqual(rc, EXIT_USAGE)
        # the log can be imported again once its flight is removed
        rc, out, err = pb(db, "import", "--pack", "TR-21", first[1])
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported", out)
        self.assertEqual(self.check_pack(db, "TR-21")[0], n0)

    def test_move_between_packs(self):
        db = history(self, "move")
        last = query(db, "SELECT id FROM flights ORDER BY flown_epoch_s DESC LIMIT 1")[0][0]
        before = query(db, "SELECT * FROM flights")
        # another cell count: refused, nothing changed
        rc, out, err = pb(db, "flight", "move", last, "--to", "TR-26")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("analysed as 4S lipo and pack 'TR-26' is 6S lipo", err)
        self.assertEqual(query(db, "SELECT * FROM flights"), before)
        rc, out, err = pb(db, "flight", "move", last)
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("--to PACK", err)
        rc, out, err = pb(db, "flight", "move", last, "--to", "TR-22")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn(f"moved flight {last} of TR-21", out)
        self.assertIn("to TR-22", out)
        self.check_pack(db, "TR-21")
        self.check_pack(db, "TR-22")
        self.assertIn("TR-22: 0 -> 1 flight,", out)
        self.assertEqual(query(db, "SELECT p.label FROM flights f JOIN packs p ON p.id = f.pack_id "
                                   "WHERE f.id = ?", last), [("TR-22",)])
        rc, out, err = pb(db, "flight", "move", last, "--to", "TR-22")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("belongs to pack 'TR-22' already", err)


class PackEdit(unittest.TestCase):
    def test_rename_and_capacity(self):
        db = history(self, "edit")
        n, c_old, _ = expected_state(db, "TR-21")
        rc, out, err = pb(db, "pack", "edit", "TR-21", "--name", "TR-21b", "--capacity", 4000,
                          "--note", "relabelled")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("id: TR-21 -> TR-21b", out)
        self.assertIn("rated capacity: 5000 mAh -> 4000 mAh", out)
        self.assertIn("note: (none) -> relabelled", out)
        n2, c_new, _ = expected_state(db, "TR-21b")
        self.assertEqual(n2, n, "the flights follow the pack")
        # cycles = charge / rated: a smaller rating, more cycles (man packbook, fleet)
        self.assertAlmostEqual(c_new, c_old * 5000 / 4000, delta=1e-9)
        self.assertIn(f"{c_old:.1f} -> {c_new:.1f} equivalent cycles", out)
        rc, out, err = pb(db, "pack", "show", "TR-21")
        self.assertEqual(rc, EXIT_USAGE)
        rc, out, err = pb(db, "pack", "edit", "TR-21b", "--name", "TR-22")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("pack 'TR-22' exists already", err)
        rc, out, err = pb(db, "pack", "edit", "TR-21b", "--since", "")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("nothing changed", out)

    def test_cells_and_chemistry_only_without_contradicting_flights(self):
        db = history(self, "cells")
        rows = query(db, "SELECT * FROM packs")
        for opt, val in (("--cells", 6), ("--chemistry", "lihv")):
            rc, out, err = pb(db, "pack", "edit", "TR-21", opt, val)
            self.assertEqual(rc, EXIT_USAGE, opt)
            self.assertIn("5 flights of 'TR-21' were analysed as 4S lipo", err)
        self.assertEqual(query(db, "SELECT * FROM packs"), rows, "nothing changed")
        # a pack without flights takes any change
        rc, out, err = pb(db, "pack", "edit", "TR-22", "--cells", 6, "--chemistry", "lihv")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("series cells: 4 -> 6", out)
        self.assertIn("chemistry: lipo -> lihv", out)
        self.assertEqual(query(db, "SELECT cells, chemistry FROM packs WHERE label = 'TR-22'"),
                         [(6, "lihv")])


def sim(path, seed, *args):
    cmd = [pbtest.PY, pbtest.PBSIM, "--packbook", pbtest.PACKBOOK, "--seed", str(seed),
           "--duration-s", "240", "--rate-hz", "2", "-o", path, *map(str, args)]
    p = subprocess.run(cmd, capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    return path


class ImportChecks(unittest.TestCase):
    """A log that clearly is another pack's is refused (import --help); duplicates are
    recognised by their samples as well as their bytes."""

    def fresh(self, name, cells=4, cap=5000):
        db = os.path.join(pbtest.temp_dir(f"pbmanage-{name}-"), "h.db")
        rc, out, err = pb(db, "pack", "add", "TR-31", "--cells", cells, "--chemistry", "lipo",
                          "--capacity", cap)
        self.assertEqual(rc, EXIT_OK, err)
        return db

    def refused(self, db, log, *phrases):
        rc, out, err = pb(db, "import", "--pack", "TR-31", "--date", "2026-04-02", log)
        self.assertEqual(rc, EXIT_SOME_FAILED, err)
        self.assertIn("0 imported, 0 already there, 1 failed", out)
        self.assertIn("does not fit pack 'TR-31'", err)
        self.assertIn("--force", err)
        for p in phrases:
            self.assertIn(p, err)
        self.assertEqual(query(db, "SELECT count(*) FROM flights"), [(0,)])
        rc, out, err = pb(db, "import", "--pack", "TR-31", "--date", "2026-04-02", "--force", log)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported", out)
        self.assertIn("stored with --force", err)

    def test_other_cell_columns(self):
        # samples/tm12-cells.csv: 6 cell columns (a 6S LiHV pack) filed under a 4S pack
        log = os.path.join(pbtest.ROOT, "samples", "tm12-cells.csv")
        self.refused(self.fresh("cols"), log, "6 cell columns and the pack is 4S")

    def test_voltage_of_another_cell_count(self):
        # a 6S LiPo log without cell columns: 6 x ~4.2 V = ~25 V, over 6 V per cell as 4S
        log = sim(os.path.join(SCRATCH, "six.csv"), 801, "--cells", 6)
        self.refused(self.fresh("volts"), log, "per cell for 4S")
        # the right pack takes it silently
        db = self.fresh("volts-ok", cells=6)
        rc, out, err = pb(db, "import", "--pack", "TR-31", "--date", "2026-04-02", log)
        self.assertEqual((rc, err.count("does not fit")), (EXIT_OK, 0), err)

    def test_more_charge_than_the_pack_holds(self):
        # pbsim's 240 s flight of a 5000 mAh pack draws about 0.9 Ah (its truth), over
        # 125 % of a 600 mAh rating
        log = sim(os.path.join(SCRATCH, "big.csv"), 802)
        self.refused(self.fresh("charge", cap=600), log, "rated 600 mAh", "drew")

    def test_same_samples_other_writing(self):
        db = self.fresh("samples")
        comma = sim(os.path.join(SCRATCH, "epoch.csv"), 803, "--format", "epoch",
                    "--start-epoch", EPOCH0)
        with open(comma) as f:
            text = f.read()
        semi = os.path.join(SCRATCH, "epoch-semicolon.csv")
        with open(semi, "w") as f:
            f.write("# re-exported by the ground station\n" + text.replace(",", ";"))
        rc, out, err = pb(db, "import", "--pack", "TR-31", comma, semi)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported, 1 already there", out)
        self.assertIn("(same samples): " + semi, out)
        rc, out, err = pb(db, "import", "--pack", "TR-31", comma)
        self.assertIn("(same bytes): " + comma, out)
        self.assertEqual(query(db, "SELECT count(*) FROM flights"), [(1,)])
        self.assertEqual(query(db, "SELECT count(DISTINCT samples_hash) FROM flights"), [(1,)])

    def test_date_from_file_time_warns(self):
        db = self.fresh("mtime")
        log = sim(os.path.join(SCRATCH, "plain.csv"), 804)
        rc, out, err = pb(db, "import", "--pack", "TR-31", log)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("(date from mtime)", out)
        self.assertIn("modification time", err)
        self.assertIn("--date", err)

    def test_folders(self):
        # a folder as the ground station leaves it: logs, a sub-folder, a figure, notes and a
        # binary file named like a log
        db = self.fresh("folder")
        top = pbtest.temp_dir("pbmanage-folder-")
        sub = os.path.join(top, "day2")
        os.makedirs(sub)
        shutil.copy(LOGS[0], os.path.join(top, "a.csv"))
        shutil.copy(LOGS[1], os.path.join(sub, "b.CSV"))
        with open(os.path.join(top, "photo.png"), "wb") as f:
            f.write(b"\x89PNG\r\n\x1a\n\0\0")
        with open(os.path.join(top, "notes.md"), "w") as f:
            f.write("windy\n")
        with open(os.path.join(top, "dump.csv"), "wb") as f:
            f.write(b"time_s,voltage_v\n\0\0\0")
        rc, out, err = pb(db, "import", "--pack", "TR-31", top)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported, 0 already there, 0 failed, 4 skipped as not logs", out)
        self.assertIn("skipped " + os.path.join(top, "photo.png") + ": not a log", err)
        self.assertIn("skipped " + os.path.join(top, "dump.csv") + ": not a log (it holds binary",
                      err)
        self.assertIn("give -r", err)
        rc, out, err = pb(db, "import", "--pack", "TR-31", "-r", top)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported, 1 already there, 0 failed, 3 skipped as not logs", out)
        self.assertIn("b.CSV", out)
        self.assertEqual(query(db, "SELECT count(*) FROM flights"), [(2,)])
        # a file named on the command line is always read: a binary one fails as a log
        rc, out, err = pb(db, "import", "--pack", "TR-31", os.path.join(top, "notes.md"))
        self.assertEqual(rc, EXIT_SOME_FAILED)
        self.assertIn("1 failed", out)

    def test_status_change_is_printed(self):
        # a flight under the cut-off: watch at 1 over-discharge (man packbook, Retirement
        # rules); samples/tm15-deep.csv spends minutes below 3.3 V per cell
        db = self.fresh("status")
        log = os.path.join(pbtest.ROOT, "samples", "tm15-deep.csv")
        rc, out, err = pb(db, "import", "--pack", "TR-31", log)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("pack TR-31: status ok -> watch", out)
        rc, out, err = pb(db, "import", "--pack", "TR-31", LOGS[0])
        self.assertEqual(rc, EXIT_OK, err)
        self.assertNotIn("status", out, "unchanged: not repeated")


class ChemistryNames(unittest.TestCase):
    def test_any_case(self):
        db = os.path.join(pbtest.temp_dir("pbmanage-case-"), "h.db")
        rc, out, err = pb(db, "pack", "add", "TR-41", "--cells", 4, "--chemistry", "LiPo",
                          "--capacity", 5000)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("4S1P lipo", out)
        self.assertEqual(query(db, "SELECT chemistry FROM packs"), [("lipo",)],
                         "stored in the one spelling the man page lists")
        rc, out, err = pb(db, "pack", "edit", "TR-41", "--chemistry", "LIHV")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("chemistry: lipo -> lihv", out)
        log = os.path.join(pbtest.ROOT, "samples", "tm07-plain.csv")
        a = pbtest.analyze_json(log, "--cells", 4, "--chemistry", "LiPo", "--capacity", 5000)
        b = pbtest.analyze_json(log, "--cells", 4, "--chemistry", "lipo", "--capacity", 5000)
        self.assertEqual(a["chemistry"], "lipo")
        self.assertEqual(a["soc_start_pct"], b["soc_start_pct"])
        rc, out, err = run("analyze", log, "--chemistry", "LiPoo")
        self.assertEqual(rc, EXIT_USAGE)


ADC_CHAIN = ["--adc-bits", "10", "--adc-vref", "3.3", "--sense-ratio", "14000", "--sense-ohm",
             "510"]  # samples/tm03-adc.csv, as README lists it
ADC_LOG = os.path.join(pbtest.ROOT, "samples", "tm03-adc.csv")
PACK4 = ["--cells", "4", "--chemistry", "lipo", "--capacity", "5000"]


class RememberedSettings(unittest.TestCase):
    """A pack remembers its reading options (pack add/edit) and every verb given --pack uses
    them under the options given there. The reference is the same command with the options
    written out: the results must be identical (same code path, exact)."""

    def fresh(self, name):
        db = os.path.join(pbtest.temp_dir(f"pbmanage-{name}-"), "h.db")
        rc, out, err = pb(db, "pack", "add", "TM-03", *PACK4, *ADC_CHAIN, "--floor", "3.4")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("reading settings: --adc-bits 10", out)
        return db

    def test_stored_and_shown(self):
        db = self.fresh("shown")
        self.assertEqual(query(db, "SELECT read_settings FROM packs"),
                         [("adc-bits=10\nadc-vref=3.3\nsense-ratio=14000\nsense-ohm=510\n"
                           "cut-off=3.4\n",)], "--floor is remembered under its new name")
        rc, out, err = pb(db, "pack", "show", "TM-03", "--json")
        self.assertEqual(json.loads(out)["reading_settings"],
                         {"adc-bits": "10", "adc-vref": "3.3", "sense-ratio": "14000",
                          "sense-ohm": "510", "cut-off": "3.4"})
        rc, out, err = pb(db, "pack", "edit", "TM-03", "--cut-off", "3.3", "--gap", "2")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("--cut-off 3.4 -> --adc-bits 10", out)
        self.assertIn("--cut-off 3.3 --gap 2", out)
        # an incomplete chain is refused when remembered, not when first used
        rc, out, err = pb(db, "pack", "edit", "TM-03", "--clear-settings", "--sense-ohm", "510")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("the sense chain needs all of", err)
        rc, out, err = pb(db, "pack", "edit", "TM-03", "--clear-settings")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("-> (none)", out)
        self.assertEqual(query(db, "SELECT read_settings FROM packs"), [(None,)])
        rc, out, err = pb(db, "pack", "show", "TM-03", "--floor", "3")
        self.assertEqual(rc, EXIT_USAGE)

    def test_analyze_import_plot_use_them(self):
        db = self.fresh("use")
        want = pbtest.analyze_json(ADC_LOG, *PACK4, *ADC_CHAIN, "--floor", "3.4")
        got = pbtest.analyze_json(ADC_LOG, "--pack", "TM-03", "--db", db)
        for key in ("charge_used_mah", "r0_mohm", "floor_v_per_cell", "cells", "chemistry",
                    "rated_capacity_mah"):
            self.assertEqual(got[key], want[key], key)
        self.assertEqual(got["floor_v_per_cell"], 3.4)
        # an option given overrides the remembered one
        over = pbtest.analyze_json(ADC_LOG, "--pack", "TM-03", "--db", db, "--cut-off", "3.5")
        self.assertEqual(over["floor_v_per_cell"], 3.5)
        self.assertEqual(over["charge_used_mah"], want["charge_used_mah"])
        # --adc-scale replaces the whole remembered chain. The chain's amps per count, from
        # the sense-amplifier arithmetic (Vref / 2^bits volts per count over R / ratio volts
        # per amp), gives the same charge (relative 1e-9); half of it, half the charge
        # (coulomb counting is linear in current; the log's zero offset is 0)
        a_per_count = 3.3 / 2 ** 10 / (510 / 14000)
        for scale in (1.0, 0.5):
            got = pbtest.analyze_json(ADC_LOG, "--pack", "TM-03", "--db", db, "--adc-scale",
                                      repr(a_per_count * scale))
            self.assertAlmostEqual(got["charge_discharged_mah"],
                                   scale * want["charge_discharged_mah"],
                                   delta=1e-9 * want["charge_discharged_mah"])
        rc, out, err = pb(db, "analyze", ADC_LOG, "--pack", "TM-03", "--cells", "4")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("--cells with --pack", err)
        rc, out, err = pb(db, "import", "--pack", "TM-03", "--date", "2026-04-01", ADC_LOG)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertAlmostEqual(query(db, "SELECT charge_used_mah FROM flights")[0][0],
                               want["charge_used_mah"], delta=1e-6 * want["charge_used_mah"])
        png = os.path.join(pbtest.temp_dir("pbmanage-plot-"), "f.png")
        rc, out, err = pb(db, "plot", ADC_LOG, "--pack", "TM-03", "-o", png)
        self.assertEqual(rc, EXIT_OK, err)
        # without them the log cannot be read: its current is in ADC counts
        rc, out, err = pb(db, "pack", "edit", "TM-03", "--clear-settings")
        rc, out, err = pb(db, "analyze", ADC_LOG, "--pack", "TM-03")
        self.assertEqual(rc, EXIT_USAGE, err)  # a missing option (man packbook, EXIT STATUS)
        self.assertIn("ADC counts", err)

    def test_predict_uses_the_cut_off_and_says_retired_first(self):
        db = self.fresh("predict")
        rc, out, err = pb(db, "import", "--pack", "TM-03", "--date", "2026-04-01", ADC_LOG)
        self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = pb(db, "predict", "TM-03", "--json", "--runs", "20")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(json.loads(out)["inputs"]["floor_v_per_cell"], 3.4)
        rc, out, err = pb(db, "predict", "TM-03", "--json", "--runs", "20", "--floor", "3.2")
        self.assertEqual(json.loads(out)["inputs"]["floor_v_per_cell"], 3.2)
        rc, out, err = pb(db, "pack", "retire", "TM-03", "--reason", "puffed")
        rc, out, err = pb(db, "predict", "TM-03", "--runs", "20")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertTrue(out.startswith("pack TM-03 is RETIRED (puffed"), out[:200])


class Unretire(unittest.TestCase):
    def test_retire_then_unretire(self):
        db = history(self, "unretire")
        rc, out, err = pb(db, "pack", "retire", "TR-22", "--reason", "swollen?")
        self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = pb(db, "import", "--pack", "TR-22", LOGS[0])
        self.assertEqual(rc, EXIT_USAGE)
        rc, out, err = pb(db, "pack", "unretire", "TR-22")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("pack 'TR-22' is in service again", out)
        self.assertIn("swollen?", out)
        self.assertEqual(query(db, "SELECT retired_at, retire_reason FROM packs "
                                   "WHERE label = 'TR-22'"), [(None, None)])
        rc, out, err = pb(db, "pack", "unretire", "TR-22")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("in service already", err)
        rc, out, err = pb(db, "flight", "move", "1", "--to", "TR-22")
        self.assertEqual(rc, EXIT_OK, err)


if __name__ == "__main__":
    unittest.main()
