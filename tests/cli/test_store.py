#!/usr/bin/python3
"""The history store through the CLI: schema migrations, duplicate detection,
concurrent and interrupted imports, trend maths, ISO weeks and bad input.

What each check is measured against (the source and the tolerance are also
named beside each assertion):
  - schema: the migrations[] steps in src/store/store_sqlite.c (the step-0
    SQL is copied here verbatim and checked against the source, since a
    released step must never change); SQLite's own PRAGMA integrity_check
    and foreign_key_check for consistency.
  - line fits: numpy.polyfit (Debian python3-numpy) on the per-flight values
    the database holds, relative 1e-6 on slopes and intercepts; 95 %
    half-widths from numpy's unscaled covariance times the residual variance
    and Student's t from tables (t(0.975, 10) = 2.228138852), relative 1e-6.
  - the generated truth (scripts/pbsim.py, seeded): the robust fit must
    recover the simulated R0 rise and capacity fade per cycle within 8 %.
  - ISO 8601 weeks: Python's datetime.date.isocalendar() and the literal
    values 2020-W53 (2021-01-03, a Sunday) and 2021-W01 (2021-01-04, a Monday).
  - CSV neutralisation: the OWASP "CSV injection" rule the help text states
    (cells starting with = + - @ are prefixed with ').
Exit statuses (man packbook, EXIT STATUS): 0 ok, 1 some inputs of a batch
failed, 2 usage, 3 unusable input, 4 store error, 5 internal.

Randomness is seeded (PB_SEED, default 20260302; printed at the start).
Every database lives in a temporary folder; PACKBOOK_DB and XDG_DATA_HOME are
pointed at temporary paths too, so nothing touches ~/.local/share.

Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_store.py -v
"""
import atexit
import concurrent.futures
import csv
import datetime
import io
import json
import os
import random
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
import unittest

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import ROOT, analyze_json, run, write_temp  # noqa: E402

PACKBOOK, PY, PBSIM = pbtest.PACKBOOK, pbtest.PY, pbtest.PBSIM
STORE_C = os.path.join(ROOT, "src", "store", "store_sqlite.c")
SEED = int(os.environ.get("PB_SEED", "20260302"))
JOBS = max(2, os.cpu_count() or 2)

EXIT_OK, EXIT_SOME_FAILED, EXIT_USAGE, EXIT_INPUT, EXIT_STORE, EXIT_INTERNAL = range(6)

# Short logs keep histories cheap: 240 s at 2 Hz, about 0.19 cycles of 5000 mAh.
SHORT = ["--duration-s", 240, "--rate-hz", 2]

SCRATCH = tempfile.mkdtemp(prefix="pbstore-")
if not os.environ.get("PB_KEEP"):
    atexit.register(shutil.rmtree, SCRATCH, True)
# Belt and braces: a command that forgot --db lands here, never in $HOME.
os.environ["PACKBOOK_DB"] = os.path.join(SCRATCH, "stray", "packbook.db")
os.environ["XDG_DATA_HOME"] = os.path.join(SCRATCH, "xdg")
print(f"test_store: seed {SEED} (PB_SEED), scratch {SCRATCH}, packbook {PACKBOOK}",
      file=sys.stderr)

# migrations[0] of src/store/store_sqlite.c, copied verbatim (0 -> 1: packs and flights).
STEP0_SQL = (
    "CREATE TABLE packs ("
    "  id INTEGER PRIMARY KEY,"
    "  label TEXT NOT NULL UNIQUE,"
    "  cells INTEGER NOT NULL CHECK (cells BETWEEN 1 AND 24),"
    "  parallel INTEGER NOT NULL DEFAULT 1 CHECK (parallel >= 1),"
    "  chemistry TEXT NOT NULL,"
    "  capacity_mah REAL NOT NULL CHECK (capacity_mah > 0),"
    "  since TEXT,"
    "  note TEXT,"
    "  created_at TEXT NOT NULL,"
    "  retired_at TEXT,"
    "  retire_reason TEXT);"
    "CREATE TABLE flights ("
    "  id INTEGER PRIMARY KEY,"
    "  pack_id INTEGER NOT NULL REFERENCES packs(id),"
    "  content_hash TEXT NOT NULL UNIQUE,"
    "  source TEXT NOT NULL,"
    "  flown_at TEXT NOT NULL,"
    "  flown_epoch_s REAL NOT NULL,"
    "  date_source TEXT NOT NULL,"
    "  imported_at TEXT NOT NULL,"
    "  duration_s REAL, charge_used_mah REAL, energy_used_wh REAL,"
    "  current_max_a REAL, current_mean_a REAL, power_mean_w REAL,"
    "  voltage_min_v REAL, cell_voltage_min_v REAL, time_below_floor_s REAL,"
    "  r0_mohm REAL, r0_ci95_mohm REAL, r1_mohm REAL, tau_s REAL,"
    "  soc_start_pct REAL, soc_end_pct REAL,"
    "  capacity_mah REAL, capacity_ci95_mah REAL,"
    "  cell_spread_rest_mv REAL, cell_spread_load_mv REAL, weakest_cell INTEGER,"
    "  temperature_max_c REAL, warnings INTEGER NOT NULL DEFAULT 0,"
    "  report_json TEXT NOT NULL);"
)


def source_migrations():
    """The SQL of each step of migrations[] in store_sqlite.c (C literals joined)."""
    return pbtest.c_string_array(STORE_C, "migrations")


def pb(db, *args, stdin=None):
    """packbook VERB --db DB ARGS... (the option right after the verb, before any '--')."""
    args = [str(a) for a in args]
    return run(args[0], "--db", db, *args[1:], stdin=stdin)


def sim(out, seed, *args, truth=None):
    """One pbsim log (seeded); returns the truth dict when truth is a path."""
    cmd = [PY, PBSIM, "--packbook", PACKBOOK, "--seed", str(seed), "-o", out, *map(str, args)]
    if truth:
        cmd += ["--truth", truth]
    p = subprocess.run(cmd, capture_output=True, text=True)
    if p.returncode != 0:
        raise AssertionError(f"pbsim failed ({p.returncode}): {' '.join(cmd)}\n{p.stderr}")
    if truth:
        with open(truth) as f:
            return json.load(f)
    return None


def sim_many(specs):
    """specs: [(out, seed, [args], truth_path_or_None)], run in parallel; returns truths."""
    with concurrent.futures.ThreadPoolExecutor(max_workers=JOBS) as ex:
        return list(ex.map(lambda s: sim(s[0], s[1], *s[2], truth=s[3]), specs))


def query(db, sql, *params):
    con = sqlite3.connect(db)
    try:
        return con.execute(sql, params).fetchall()
    finally:
        con.close()


def scalar(db, sql, *params):
    return query(db, sql, *params)[0][0]


def add_pack(tc, db, label, cells=4, chem="lipo", cap=5000, *extra):
    rc, out, err = pb(db, "pack", "add", "--cells", cells, "--chemistry", chem, "--capacity", cap,
                      *extra, "--", label)
    tc.assertEqual(rc, EXIT_OK, f"pack add {label}: {err}")
    tc.assertIn(f"added pack '{label}'", out)


def newdir(tc, name):
    """A fresh folder for one test (under SCRATCH, removed at exit)."""
    return tempfile.mkdtemp(prefix=f"{name}-", dir=SCRATCH)


_cache = {}


def cell_logs(n=40):
    """n distinct 4S cell-voltage logs (no absolute time), made cheaply: 8 simulated
    flights (seeds SEED+1000..), each in n/8 variants told apart by a comment line and
    the last sample's time moved by a millisecond per variant, which changes the bytes and
    the samples (so both hashes) but not the analysis to its printed precision."""
    key = ("cells", n)
    if key in _cache:
        return _cache[key]
    d = os.path.join(SCRATCH, f"cell-logs-{n}")
    os.makedirs(d)
    base = os.path.join(SCRATCH, f"cell-base-{n}")
    os.makedirs(base)
    nbase = 8
    sim_many([(os.path.join(base, f"b{k}.csv"), SEED + 1000 + k,
               ["--format", "cells", "--cells", 4, "--duration-s", 150, "--rate-hz", 4,
                "--rest-end-s", 40], None) for k in range(nbase)])
    for j in range(n):
        with open(os.path.join(base, f"b{j % nbase}.csv")) as f:
            lines = f.read().splitlines()
        last = lines[-1].split(",")
        last[0] = f"{float(last[0]) + 0.001 * (j // nbase):.3f}"
        lines[-1] = ",".join(last)
        with open(os.path.join(d, f"sortie-{j:03d}.csv"), "w") as f:
            f.write(f"# Tallowmere Survey Co-op, Brindle Fen, sortie {j}\n" + "\n".join(lines)
                    + "\n")
    _cache[key] = d
    return d


def epoch_of(s):
    return datetime.datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


class Migrations(unittest.TestCase):
    """Schema versions: the steps in store_sqlite.c against PRAGMA user_version."""

    @classmethod
    def setUpClass(cls):
        cls.steps = source_migrations()
        cls.current = len(cls.steps)
        print(f"  schema: {cls.current} steps in {os.path.relpath(STORE_C, ROOT)}",
              file=sys.stderr)

    def test_step0_copy_matches_source(self):
        # source: src/store/store_sqlite.c migrations[0]; a released step never changes
        self.assertGreaterEqual(self.current, 2)
        self.assertEqual(self.steps[0], STEP0_SQL)

    def test_empty_db_gets_current_schema(self):
        db = os.path.join(newdir(self, "mig-empty"), "new.db")
        rc, out, err = pb(db, "pack", "list")  # reading never creates (issue 11)
        self.assertEqual(rc, EXIT_STORE, err)
        self.assertIn("no history yet", err)
        self.assertFalse(os.path.exists(db))
        rc, out, err = pb(db, "pack", "add", "TM-01", "--cells", 4, "--chemistry", "lipo",
                          "--capacity", 5000)
        self.assertEqual(rc, EXIT_OK, err)
        # the mark of a packbook file: application_id "PKBK" (src/store/store.h)
        self.assertEqual(scalar(db, "PRAGMA application_id"), 0x504B424B)
        self.assertEqual(scalar(db, "PRAGMA user_version"), self.current,
                         "user_version = number of steps in migrations[]")
        names = {r[0] for r in query(db, "SELECT name FROM sqlite_master")}
        for t in ("packs", "flights", "flight_cells", "flights_by_pack_time", "flight_reports"):
            self.assertIn(t, names)
        self.assertEqual(query(db, "PRAGMA integrity_check"), [("ok",)])
        self.assertEqual(scalar(db, "PRAGMA journal_mode"), "wal")

    def test_empty_file_is_a_new_db(self):
        # a zero-length file is a valid, empty SQLite database (sqlite.org/fileformat)
        db = os.path.join(newdir(self, "mig-zero"), "zero.db")
        open(db, "w").close()
        rc, out, err = pb(db, "pack", "list")
        self.assertEqual(rc, EXIT_STORE, err)
        self.assertIn("no history yet", err)
        self.assertEqual(os.path.getsize(db), 0, "a reading command leaves the file alone")
        rc, out, err = pb(db, "pack", "add", "TM-01", "--cells", 4, "--chemistry", "lipo",
                          "--capacity", 5000)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(scalar(db, "PRAGMA user_version"), self.current)

    def _old_db(self, version, path):
        con = sqlite3.connect(path)
        if version == 1:
            con.executescript(STEP0_SQL)  # the exact step-0 SQL
        else:
            for sql in self.steps[:version]:
                con.executescript(sql)
        con.execute(f"PRAGMA user_version = {version}")
        con.execute("INSERT INTO packs (label, cells, parallel, chemistry, capacity_mah, since, "
                    "note, created_at) VALUES ('TM-07', 4, 1, 'lipo', 5000, '2025-09-01', "
                    "'old airframe', '2025-09-01T10:00:00Z')")
        report = json.dumps({"file": "old.csv", "r0_mohm": {"value": 17.5, "ci95": 0.3}})
        # from schema 8 the report is in flight_reports
        in_flights = version < 8
        con.execute("INSERT INTO flights (pack_id, content_hash, source, flown_at, flown_epoch_s, "
                    "date_source, imported_at, duration_s, charge_used_mah, r0_mohm, "
                    "capacity_mah, warnings" + (", report_json" if in_flights else "") +
                    ") VALUES (1, 'xxh128:0000000000000000000000000000beef', 'old.csv', "
                    "'2025-09-02T08:00:00Z', 1756800000, 'log', '2025-09-02T09:00:00Z', 600, "
                    "2500, 17.5, 4900, 0" + (", ?)" if in_flights else ")"),
                    (report,) if in_flights else ())
        if not in_flights:
            con.execute("INSERT INTO flight_reports (flight_id, report_json) VALUES (1, ?)",
                        (report,))
        con.commit()
        packs = con.execute("SELECT * FROM packs").fetchall()
        # the flight's columns by name: schema 6 moves report_json to flight_reports
        cur = con.execute("SELECT * FROM flights")
        names = [d[0] for d in cur.description]
        flights = [dict(zip(names, r)) for r in cur.fetchall()]
        con.close()
        return packs, flights

    def _check_migrated(self, db, packs, flights):
        self.assertEqual(scalar(db, "PRAGMA user_version"), self.current)
        self.assertEqual(query(db, "PRAGMA integrity_check"), [("ok",)])
        # the old rows, column by column, are still there (new columns come after)
        self.assertEqual([r[:len(packs[0])] for r in query(db, "SELECT * FROM packs")][
            :len(packs)], packs)
        con = sqlite3.connect(db)
        try:
            cur = con.execute("SELECT f.*, r.report_json FROM flights f JOIN flight_reports r "
                              "ON r.flight_id = f.id ORDER BY f.id")
            names = [d[0] for d in cur.description]
            now = [dict(zip(names, r)) for r in cur.fetchall()]
        finally:
            con.close()
        self.assertEqual([{k: r[k] for k in flights[0]} for r in now], flights)
        rc, out, err = pb(db, "pack", "show", "TM-07", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        doc = json.loads(out)
        self.assertEqual(doc["note"], "old airframe")
        self.assertEqual(len(doc["flights"]), 1)
        self.assertEqual(doc["flights"][0]["r0_mohm"], 17.5)
        self.assertEqual(doc["flights"][0]["capacity_mah"], 4900)
        self.assertEqual(doc["flights"][0]["flown_at"], "2025-09-02T08:00:00Z")

    def test_from_version_1(self):
        d = newdir(self, "mig-v1")
        db = os.path.join(d, "v1.db")
        packs, flights = self._old_db(1, db)
        self.assertEqual(scalar(db, "PRAGMA user_version"), 1)
        with open(db, "rb") as f:
            before = f.read()
        rc, out, err = pb(db, "fleet")  # reads an upgraded copy in memory
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("TM-07", out)
        with open(db, "rb") as f:
            self.assertEqual(f.read(), before, "a reading command leaves the file alone")
        rc, out, err = pb(db, "pack", "add", "TM-08", "--cells", 4, "--chemistry", "lipo",
                          "--capacity", 5000)  # a writing command migrates the file
        self.assertEqual(rc, EXIT_OK, err)
        self._check_migrated(db, packs, flights)
        self.assertEqual(scalar(db, "SELECT count(*) FROM flight_cells"), 0)
        # the migrated store takes new flights with their cells
        log = os.path.join(d, "cells.csv")
        sim(log, SEED + 1, "--format", "cells", "--cells", 4, *SHORT)
        rc, out, err = pb(db, "import", "--pack", "TM-07", "--date", "2025-10-01", log)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported", out)
        self.assertEqual(scalar(db, "SELECT count(*) FROM flights"), 2)
        self.assertEqual(scalar(db, "SELECT count(*) FROM flight_cells"), 4)

    def test_from_every_intermediate_version(self):
        # versions 2 .. current-1 built from the source's own steps
        for v in range(2, self.current):
            with self.subTest(version=v):
                db = os.path.join(newdir(self, f"mig-v{v}"), "old.db")
                packs, flights = self._old_db(v, db)
                rc, out, err = pb(db, "pack", "show", "TM-07", "--json")
                self.assertEqual(rc, EXIT_OK, err)
                self.assertEqual(len(json.loads(out)["flights"]), 1)
                self.assertEqual(scalar(db, "PRAGMA user_version"), v, "read: not migrated")
                rc, out, err = pb(db, "pack", "retire", "TM-99", "--reason", "x")
                self.assertEqual(rc, EXIT_USAGE, err)  # unknown pack, after the migration
                self._check_migrated(db, packs, flights)

    def test_newer_schema_is_refused(self):
        db = os.path.join(newdir(self, "mig-newer"), "future.db")
        con = sqlite3.connect(db)
        for sql in self.steps:
            con.executescript(sql)
        con.execute(f"PRAGMA user_version = {self.current + 1}")
        con.commit()
        con.close()
        rc, out, err = pb(db, "pack", "list")
        self.assertEqual(rc, EXIT_STORE, err)
        self.assertIn("newer", err)
        self.assertEqual(out, "")
        self.assertEqual(scalar(db, "PRAGMA user_version"), self.current + 1, "left alone")

    def test_db_path_selection(self):
        # --db PATH, else $PACKBOOK_DB, else $XDG_DATA_HOME/packbook/packbook.db (--help)
        d = newdir(self, "dbpath")
        env_db, opt_db, xdg = (os.path.join(d, "env.db"), os.path.join(d, "opt.db"),
                               os.path.join(d, "xdg"))

        def go(env, *args):
            e = dict(os.environ)
            e.pop("PACKBOOK_DB", None)
            e.update(env)
            return subprocess.run([PACKBOOK, *args], env=e, capture_output=True).returncode

        add = ("pack", "add", "TM-01", "--cells", "4", "--chemistry", "lipo", "--capacity",
               "5000")
        self.assertEqual(go({"PACKBOOK_DB": env_db, "XDG_DATA_HOME": xdg}, *add), 0)
        self.assertTrue(os.path.exists(env_db))
        self.assertEqual(go({"PACKBOOK_DB": env_db, "XDG_DATA_HOME": xdg}, *add,
                            "--db", opt_db), 0)
        self.assertTrue(os.path.exists(opt_db))
        self.assertEqual(go({"XDG_DATA_HOME": xdg}, *add), 0)
        self.assertTrue(os.path.exists(os.path.join(xdg, "packbook", "packbook.db")))


class Reimport(unittest.TestCase):
    """A log already imported (same content) is recognised and skipped (import --help)."""

    def test_same_log_twice_and_under_another_name(self):
        d = newdir(self, "reimport")
        db = os.path.join(d, "r.db")
        logs = os.path.join(d, "logs")
        os.makedirs(logs)
        a = os.path.join(logs, "tm01-a.csv")
        sim(a, SEED + 11, "--format", "epoch", "--start-epoch", 1772442000, *SHORT)
        add_pack(self, db, "TM-01")
        add_pack(self, db, "TM-02")
        rc, out, err = pb(db, "import", "--pack", "TM-01", a)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported, 0 already there, 0 failed", out)
        before = query(db, "SELECT * FROM flights")
        self.assertEqual(len(before), 1)
        # what is stored is what analyze says with the pack's cells, chemistry and capacity
        doc = analyze_json(a, "--cells", 4, "--chemistry", "lipo", "--capacity", 5000)
        r0, cap, charge, js = query(db, "SELECT r0_mohm, capacity_mah, charge_used_mah, "
                                        "report_json FROM flights f JOIN flight_reports r "
                                        "ON r.flight_id = f.id")[0]
        stored = json.loads(js)
        for key in ("r0_mohm", "capacity_est_mah", "charge_used_mah", "soc_start_pct"):
            self.assertEqual(stored[key], doc[key], key)
        # JSON carries 10 significant digits: relative 1e-9
        self.assertLessEqual(abs(r0 - doc["r0_mohm"]["value"]), 1e-9 * r0)
        self.assertLessEqual(abs(cap - doc["capacity_est_mah"]["value"]), 1e-9 * cap)
        self.assertLessEqual(abs(charge - doc["charge_used_mah"]), 1e-9 * charge)

        rc, out, err = pb(db, "import", "--pack", "TM-01", a)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("already imported", out)
        self.assertIn("0 imported, 1 already there, 0 failed", out)
        self.assertEqual(query(db, "SELECT * FROM flights"), before, "no-op: rows unchanged")

        # same bytes, another name (and another folder), and on standard input
        other = os.path.join(d, "renamed-copy.log")
        shutil.copyfile(a, other)
        rc, out, err = pb(db, "import", "--pack", "TM-01", other)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("already imported as flight 1 for pack TM-01 (same bytes): " + other, out)
        with open(a, "rb") as f:
            rc, out, err = pb(db, "import", "--pack", "TM-01", "-", stdin=f.read())
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("0 imported, 1 already there", out)
        # claimed for another pack: still the same flight, not stored twice
        rc, out, err = pb(db, "import", "--pack", "TM-02", other)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("already imported as flight 1 for pack TM-01", out)
        self.assertEqual(query(db, "SELECT * FROM flights"), before)

        # one byte more (an empty line) is other bytes but the same samples: the same flight
        with open(other, "a") as f:
            f.write("\n")
        rc, out, err = pb(db, "import", "--pack", "TM-01", logs, other)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("(same samples): " + other, out)
        self.assertIn("0 imported, 2 already there, 0 failed", out)
        # one sample's voltage changed by 1 mV is another log
        with open(a) as f:
            lines = f.read().splitlines()
        row = lines[-1].split(",")
        row[1] = f"{float(row[1]) + 0.001:.3f}"
        lines[-1] = ",".join(row)
        with open(other, "w") as f:
            f.write("\n".join(lines) + "\n")
        rc, out, err = pb(db, "import", "--pack", "TM-01", logs, other)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("1 imported, 1 already there, 0 failed", out)
        self.assertEqual(scalar(db, "SELECT count(*) FROM flights"), 2)
        # it starts at the same logged time and lasts as long: stored, with a warning
        self.assertIn("starts at the same time and lasts as long as flight", err)


class Concurrency(unittest.TestCase):
    """Two imports into one database at once lose nothing (BEGIN IMMEDIATE + busy wait)."""

    @classmethod
    def setUpClass(cls):
        cls.dir = os.path.join(SCRATCH, "concurrent")
        cls.sets = {}
        specs = []
        for name in ("A", "B"):
            d = os.path.join(cls.dir, name)
            os.makedirs(d)
            cls.sets[name] = d
            for k in range(12):
                specs.append((os.path.join(d, f"{name}{k:02d}.csv"),
                              SEED + (200 if name == "A" else 300) + k,
                              ["--format", "epoch", "--start-epoch", 1772442000 + 86400 * k
                               + (3600 if name == "B" else 0), "--duration-s", 120,
                               "--rate-hz", 4, "--rest-end-s", 40], None))
        sim_many(specs)

    def _check(self, db, n):
        self.assertEqual(query(db, "PRAGMA integrity_check"), [("ok",)])
        self.assertEqual(scalar(db, "SELECT count(*) FROM flights"), n)
        self.assertEqual(scalar(db, "SELECT count(DISTINCT content_hash) FROM flights"), n)

    @staticmethod
    def _start(db, pack, *paths):
        return subprocess.Popen([PACKBOOK, "import", "--db", db, "--pack", pack, *paths],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)

    def test_two_imports_different_logs(self):
        self.interleaved = 0
        for rnd in range(3):
            with self.subTest(round=rnd):
                db = os.path.join(newdir(self, "conc"), "c.db")
                add_pack(self, db, "TM-08")
                add_pack(self, db, "TM-09")
                same = rnd == 2  # last round: both into the same pack
                # hold the write lock while both start, so that they surely
                # contend for it (busy timeout and retries) instead of one
                # finishing before the other begins on a loaded machine
                gate = sqlite3.connect(db, timeout=30)
                gate.execute("BEGIN IMMEDIATE")
                ps = [self._start(db, "TM-08", self.sets["A"]),
                      self._start(db, "TM-08" if same else "TM-09", self.sets["B"])]
                time.sleep(1.5)
                gate.rollback()
                gate.close()
                res = [(*p.communicate(timeout=120), p.returncode) for p in ps]
                res = [(rc, out, err) for out, err, rc in res]
                for rc, out, err in res:
                    self.assertEqual(rc, EXIT_OK, err)
                    self.assertIn("12 imported, 0 already there, 0 failed", out)
                    self.assertEqual(err, "")
                self._check(db, 24)
                order = [p for (p,) in query(db, "SELECT substr(source, -7, 1) FROM flights "
                                                 "ORDER BY id")]
                switches = sum(a != b for a, b in zip(order, order[1:]))
                print(f"  round {rnd}: storing order {''.join(order)} ({switches} switches)",
                      file=sys.stderr)
                self.interleaved += switches > 1
                if not same:
                    self.assertEqual(query(db, "SELECT p.label, count(*) FROM flights f JOIN "
                                           "packs p ON p.id = f.pack_id GROUP BY p.label"),
                                     [("TM-08", 12), ("TM-09", 12)])
        # not vacuous: the two processes must have stored in turns at least once
        self.assertGreaterEqual(self.interleaved, 1, "the imports never overlapped")

    def test_two_imports_same_logs(self):
        # both import all 24 logs: each is stored once, the other process sees it
        db = os.path.join(newdir(self, "conc-same"), "c.db")
        add_pack(self, db, "TM-10")
        ps = [self._start(db, "TM-10", self.sets["A"], self.sets["B"]) for _ in range(2)]
        res = [(p.wait(timeout=120), *p.communicate()) for p in ps]
        imported = already = 0
        for rc, out, err in res:
            self.assertEqual(rc, EXIT_OK, err)
            m = re.search(r"(\d+) imported, (\d+) already there, 0 failed", out)
            self.assertTrue(m, out)
            imported += int(m.group(1))
            already += int(m.group(2))
        self.assertEqual((imported, already), (24, 24))
        self._check(db, 24)

    def test_workers_store_what_one_thread_stores(self):
        # import -j N analyses in N threads while one writes: the same flights (every column,
        # the report included), the same lines in the same order, as -j 1
        rows, outs = [], []
        for jobs in (1, 2, 3):
            db = os.path.join(newdir(self, f"jobs{jobs}"), "j.db")
            add_pack(self, db, "TM-J")
            rc, out, err = pb(db, "import", "-j", jobs, "--pack", "TM-J", self.sets["A"],
                              self.sets["B"])
            self.assertEqual(rc, EXIT_OK, err)
            self.assertIn("24 imported, 0 already there, 0 failed", out)
            self._check(db, 24)
            outs.append(out)
            rows.append(query(db, "SELECT pack_id, content_hash, source, flown_epoch_s, "
                                  "r0_mohm, charge_used_mah, report_json FROM flights f JOIN "
                                  "flight_reports r ON r.flight_id = f.id ORDER BY f.id"))
        self.assertEqual(outs[1], outs[0])
        self.assertEqual(outs[2], outs[0])
        self.assertEqual(rows[1], rows[0])
        self.assertEqual(rows[2], rows[0])
        rc, out, err = pb(db, "import", "--jobs", 0, "--pack", "TM-J", self.sets["A"])
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn("--jobs: expected a count from 1 to 64, got '0'", err)

    def test_two_pack_adds_on_a_new_db(self):
        # both processes find no schema: one migrates, the other must wait and see it
        for rnd in range(5):
            with self.subTest(round=rnd):
                db = os.path.join(newdir(self, "conc-new"), "n.db")
                ps = [subprocess.Popen([PACKBOOK, "pack", "add", f"TM-{k + 1:02d}", "--db", db,
                                        "--cells", "4", "--chemistry", "lipo", "--capacity",
                                        "5000"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                       text=True) for k in range(3)]
                for p in ps:
                    out, err = p.communicate(timeout=60)
                    self.assertEqual(p.returncode, EXIT_OK, err)
                self.assertEqual(scalar(db, "SELECT count(*) FROM packs"), 3)
                self.assertEqual(scalar(db, "PRAGMA user_version"), len(source_migrations()))


class KillDuringImport(unittest.TestCase):
    """kill -9 in the middle of a large import: one transaction per flight means a
    flight is stored whole or not at all, and a re-run completes the set."""

    N = 40
    ITERATIONS = 20
    CELLS = 4

    @classmethod
    def setUpClass(cls):
        cls.logs = cell_logs(cls.N)
        cls.ref_db = os.path.join(SCRATCH, "kill-ref.db")
        rc, out, err = pb(cls.ref_db, "pack", "add", "TM-11", "--cells", cls.CELLS,
                          "--chemistry", "lipo", "--capacity", 5000)
        assert rc == 0, err
        t0 = time.monotonic()
        rc, out, err = pb(cls.ref_db, "import", "--pack", "TM-11", "--date", "2026-04-01",
                          "--quiet", cls.logs)
        cls.full_s = time.monotonic() - t0
        assert rc == 0 and f"{cls.N} imported" in out, (rc, out, err)
        cls.ref = {h: (src, r0, cap) for h, src, r0, cap in query(
            cls.ref_db, "SELECT content_hash, source, r0_mohm, capacity_mah FROM flights")}
        assert len(cls.ref) == cls.N

    def check_whole(self, db, label):
        """Consistency after a kill; returns the number of flights stored."""
        con = sqlite3.connect(db)
        try:
            self.assertEqual(con.execute("PRAGMA integrity_check").fetchall(), [("ok",)], label)
            self.assertEqual(con.execute("PRAGMA foreign_key_check").fetchall(), [], label)
            n, nh = con.execute("SELECT count(*), count(DISTINCT content_hash) FROM flights"
                                ).fetchone()
            self.assertEqual(n, nh, f"{label}: flights = distinct content hashes")
            for fid, h, src, r0, cap, js in con.execute(
                    "SELECT id, content_hash, source, r0_mohm, capacity_mah, report_json "
                    "FROM flights f LEFT JOIN flight_reports r ON r.flight_id = f.id"):
                self.assertIn(h, self.ref, f"{label}: a flight no import produced")
                self.assertEqual((src, r0, cap), self.ref[h], f"{label}: flight {fid} differs")
                self.assertTrue(js, f"{label}: flight {fid} has no report_json")
                doc = json.loads(js)
                self.assertEqual(len(doc["cells_detail"]), self.CELLS)
                cells = [c for (c,) in con.execute(
                    "SELECT cell FROM flight_cells WHERE flight_id = ? ORDER BY cell", (fid,))]
                self.assertEqual(cells, list(range(1, self.CELLS + 1)),
                                 f"{label}: flight {fid} without all its flight_cells rows")
            orphans = con.execute("SELECT count(*) FROM flight_cells WHERE flight_id NOT IN "
                                  "(SELECT id FROM flights)").fetchone()[0]
            self.assertEqual(orphans, 0, f"{label}: flight_cells rows of no flight")
            return n
        finally:
            con.close()

    def test_kill9_mid_import(self):
        rng = random.Random(SEED + 9)
        print(f"\n  kill -9: {self.ITERATIONS} iterations x 2 kills, {self.N} logs, full import "
              f"{self.full_s * 1000:.0f} ms, seed {SEED + 9}", file=sys.stderr)
        mid = 0  # kills that hit a running import and left it partial
        partial_counts = set()
        for it in range(self.ITERATIONS):
            db = os.path.join(newdir(self, f"kill{it:02d}"), "k.db")
            rc, out, err = pb(db, "pack", "add", "TM-11", "--cells", self.CELLS, "--chemistry",
                              "lipo", "--capacity", 5000)
            self.assertEqual(rc, EXIT_OK, err)
            n = 0
            for kill in range(2):
                delay = rng.uniform(0.0, self.full_s)
                p = subprocess.Popen([PACKBOOK, "import", "--db", db, "--pack", "TM-11",
                                      "--date", "2026-04-01", "--quiet", self.logs],
                                     stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
                time.sleep(delay)
                running = p.poll() is None
                p.send_signal(signal.SIGKILL)
                p.wait()
                label = f"iteration {it}, kill {kill} after {delay * 1000:.0f} ms"
                n2 = self.check_whole(db, label)
                self.assertGreaterEqual(n2, n, label)
                if running and n2 < self.N:
                    mid += 1
                    partial_counts.add(n2)
                n = n2
            rc, out, err = pb(db, "import", "--pack", "TM-11", "--date", "2026-04-01", "--quiet",
                              self.logs)
            self.assertEqual(rc, EXIT_OK, err)
            self.assertIn(f"{self.N - n} imported, {n} already there, 0 failed", out)
            self.assertEqual(self.check_whole(db, f"iteration {it}, completed"), self.N)
            self.assertEqual({h for (h,) in query(db, "SELECT content_hash FROM flights")},
                             set(self.ref), "the set is complete and exact")
        print(f"  kill -9: {mid} kills landed mid-import; partial counts seen: "
              f"{sorted(partial_counts)}", file=sys.stderr)
        # not vacuous: enough kills must have interrupted an import part-way
        self.assertGreaterEqual(mid, self.ITERATIONS // 2, "kills came too late to test anything")
        self.assertGreaterEqual(len(partial_counts), 4)


class TrendAgainstNumpy(unittest.TestCase):
    """trend's fits: OLS against numpy.polyfit on the stored values, the robust fit
    against the generated truth, crossings against intercept and slope."""

    N = 12
    RATED = 5000.0
    R0_CELL_0 = 4.0     # mOhm per cell at 0 cycles (truth)
    R0_PER_CYCLE = 0.5  # mOhm per cell per cycle (truth)
    FADE = 0.03         # capacity: -3 % of rated per cycle (truth)
    T975_DOF10 = 2.228138852  # Student t(0.975, 10), tables

    @classmethod
    def setUpClass(cls):
        d = os.path.join(SCRATCH, "trend")
        os.makedirs(d)
        cls.logs = os.path.join(d, "logs")
        os.makedirs(cls.logs)
        common = [*SHORT, "--hover-a", 22, "--format", "epoch"]
        seeds = [SEED + 500 + k for k in range(cls.N)]
        # pass 1: the charge of each flight (pbsim's current profile depends only on the seed)
        t1 = sim_many([(os.devnull, s, common, os.path.join(d, f"q{k}.json"))
                       for k, s in enumerate(seeds)])
        q, cls.truth, specs = 0.0, [], []
        e0 = 1772442000  # 2026-03-02T09:00:00Z
        for k, (s, t) in enumerate(zip(seeds, t1)):
            q += t["charge_used_mah"]
            c = q / cls.RATED  # equivalent cycles up to and including this flight
            r0 = cls.R0_CELL_0 + cls.R0_PER_CYCLE * c
            cap = cls.RATED * (1.0 - cls.FADE * c)
            start = e0 + k * 3 * 86400 + k * k * 3600  # irregular spacing
            cls.truth.append((c, r0, 100.0 * cap / cls.RATED, start))
            specs.append((os.path.join(cls.logs, f"tm04-{k:02d}.csv"), s,
                          [*common, "--r0-mohm-cell", f"{r0:.6f}", "--capacity-mah",
                           f"{cap:.3f}", "--start-epoch", start], None))
        sim_many(specs)
        cls.db = os.path.join(d, "t.db")
        rc, out, err = pb(cls.db, "pack", "add", "TM-04", "--cells", 4, "--chemistry", "lipo",
                          "--capacity", int(cls.RATED))
        assert rc == 0, err
        rc, out, err = pb(cls.db, "import", "--pack", "TM-04", "--quiet", cls.logs)
        assert rc == 0 and f"{cls.N} imported" in out, (rc, out, err)
        rows = query(cls.db, "SELECT r0_mohm, capacity_mah, charge_used_mah, flown_epoch_s "
                             "FROM flights ORDER BY flown_epoch_s, id")
        a = np.array([[np.nan if v is None else v for v in r] for r in rows], dtype=float)
        cls.r0_cell = a[:, 0] / 4.0
        cls.cap_pct = 100.0 * a[:, 1] / cls.RATED
        charge = np.where(np.isfinite(a[:, 2]) & (a[:, 2] > 0), a[:, 2], 0.0)
        cls.cycles = np.cumsum(charge) / cls.RATED  # up to and including each flight
        cls.epochs = a[:, 3]
        cls.days = (a[:, 3] - a[0, 3]) / 86400.0

    def trend(self, *args):
        rc, out, err = pb(self.db, "trend", "TM-04", "--json", *args)
        self.assertEqual(rc, EXIT_OK, err)
        return json.loads(out)

    def assertRel(self, got, want, rel, what):
        self.assertLessEqual(abs(got - want), rel * abs(want), f"{what}: {got!r} vs {want!r}")

    def test_stored_values_are_usable(self):
        self.assertEqual(len(self.r0_cell), self.N)
        self.assertTrue(np.all(np.isfinite(self.r0_cell)), "every flight has R0")
        self.assertTrue(np.all(np.isfinite(self.cap_pct)), "every flight has a capacity")

    def test_ols_against_numpy_polyfit(self):
        doc = self.trend("--fit", "ols")
        self.assertRel(doc["equivalent_cycles"], self.cycles[-1], 1e-9, "cycles = sum charge/rated")
        for key, y in (("r0_mohm_per_cell", self.r0_cell), ("capacity_pct", self.cap_pct)):
            for fit, x in (("vs_cycles", self.cycles), ("per_day", self.days)):
                line = doc[key][fit]
                self.assertIsNotNone(line, f"{key} {fit}")
                self.assertEqual(line["points"], self.N)
                (b, a), cov = np.polyfit(x, y, 1, cov="unscaled")  # numpy.polyfit
                rss = float(np.sum((y - (a + b * x)) ** 2))
                ci = self.T975_DOF10 * np.sqrt(cov[0, 0] * rss / (self.N - 2))
                print(f"  {key} {fit}: packbook {line['slope']:.9g}, numpy {b:.9g}",
                      file=sys.stderr)
                # source: numpy.polyfit, relative 1e-6
                self.assertRel(line["slope"], b, 1e-6, f"{key} {fit} slope")
                self.assertRel(line["intercept"], a, 1e-6, f"{key} {fit} intercept")
                # source: numpy covariance x t table, relative 1e-6
                self.assertRel(line["slope_ci95"], ci, 1e-6, f"{key} {fit} slope_ci95")

    def test_robust_fit_recovers_the_generated_trend(self):
        doc = self.trend()
        r0 = doc["r0_mohm_per_cell"]["vs_cycles"]
        cap = doc["capacity_pct"]["vs_cycles"]
        print(f"  robust: R0 {r0['slope']:.4f} mOhm/cell/cycle (truth {self.R0_PER_CYCLE}), "
              f"capacity {cap['slope']:.4f} %/cycle (truth {-100 * self.FADE})", file=sys.stderr)
        # source: generated truth (pbsim), tolerance 8 % of the slope
        self.assertRel(r0["slope"], self.R0_PER_CYCLE, 0.08, "R0 slope vs truth")
        self.assertRel(cap["slope"], -100.0 * self.FADE, 0.08, "capacity slope vs truth")
        # the intercepts: within 5 % of the truth at 0 cycles (estimator bias of a few %)
        self.assertRel(r0["intercept"], self.R0_CELL_0, 0.05, "R0 at 0 cycles vs truth")
        self.assertRel(cap["intercept"], 100.0, 0.05, "capacity at 0 cycles vs truth")

    def test_crossings_follow_intercept_and_slope(self):
        for args in ((), ("--fit", "ols")):
            doc = self.trend(*args)
            base = float(np.median(self.r0_cell[:3]))  # baseline: median of the first 3
            for key, level in (("r0_mohm_per_cell", 2.0 * base), ("capacity_pct", 80.0)):
                t = doc[key]
                self.assertRel(t["retire_level"], level, 1e-9, f"{key} retire level")
                self.assertFalse(t["crossed"])
                self.assertFalse(t["beyond_horizon"])
                c, d = t["vs_cycles"], t["per_day"]
                want = (level - c["intercept"]) / c["slope"]
                self.assertRel(t["crossing_cycles"], want, 1e-6, f"{key} crossing cycle")
                self.assertGreater(want, self.cycles[-1], "ahead, not behind")
                when = self.epochs[0] + (level - d["intercept"]) / d["slope"] * 86400.0
                self.assertLess(abs(epoch_of(t["crossing_date"]) - when), 0.002 + 1e-9 * when,
                                f"{key} crossing date (ms resolution)")
        # a horizon shorter than the way to the crossing: reported as beyond it
        doc = self.trend("--horizon", 1)
        for key in ("r0_mohm_per_cell", "capacity_pct"):
            self.assertTrue(doc[key]["beyond_horizon"], key)
            self.assertIsNone(doc[key]["crossing_cycles"], key)
            self.assertIsNone(doc[key]["crossing_date"], key)

    def test_week_buckets_against_isocalendar(self):
        doc = self.trend()
        want = {}
        for e, r in zip(self.epochs, self.r0_cell):
            y, w, _ = datetime.datetime.fromtimestamp(e, datetime.timezone.utc).isocalendar()
            want.setdefault(f"{y:04d}-W{w:02d}", []).append(r)
        got = {b["bucket"]: b for b in doc["buckets"]}
        self.assertEqual(list(got), list(want), "ISO 8601 weeks (datetime.isocalendar)")
        for k, rs in want.items():
            self.assertEqual(got[k]["flights"], len(rs))
            self.assertRel(got[k]["r0_mohm_per_cell"], float(np.mean(rs)), 1e-9, k)


class IsoWeeks(unittest.TestCase):
    """Flights on 2021-01-03 (Sunday) and 2021-01-04 (Monday) are in 2020-W53 and 2021-W01
    (ISO 8601; checked against datetime.date.isocalendar() too)."""

    def test_year_boundary(self):
        d = newdir(self, "isoweek")
        db = os.path.join(d, "w.db")
        add_pack(self, db, "TM-05")
        plain = [os.path.join(d, f"p{k}.csv") for k in range(3)]
        epoch = [os.path.join(d, f"e{k}.csv") for k in range(2)]
        e_late_sun = epoch_of("2021-01-03T23:50:00Z")  # starts Sunday, lands Monday
        e_sun_w01 = epoch_of("2021-01-10T12:00:00Z")
        sim_many([(plain[0], SEED + 31, SHORT, None), (plain[1], SEED + 32, SHORT, None),
                  (plain[2], SEED + 33, SHORT, None),
                  (epoch[0], SEED + 34, [*SHORT, "--format", "epoch", "--start-epoch",
                                         e_late_sun], None),
                  (epoch[1], SEED + 35, [*SHORT, "--format", "epoch", "--start-epoch",
                                         e_sun_w01], None)])
        for log, date in ((plain[0], "2021-01-03"), (plain[1], "2021-01-04"),
                          (plain[2], "2020-12-28")):
            rc, out, err = pb(db, "import", "--pack", "TM-05", "--date", date, log)
            self.assertEqual(rc, EXIT_OK, err)
            self.assertIn("(date from option)", out)
        rc, out, err = pb(db, "import", "--pack", "TM-05", "--date", "1999-01-01", *epoch)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(out.count("(date from log)"), 2, "the log's own time wins over --date")
        self.assertEqual(query(db, "SELECT source, flown_at, date_source FROM flights ORDER BY "
                                   "flown_epoch_s"),
                         [(plain[2], "2020-12-28T00:00:00Z", "option"),
                          (plain[0], "2021-01-03T00:00:00Z", "option"),
                          (epoch[0], "2021-01-03T23:50:00Z", "log"),
                          (plain[1], "2021-01-04T00:00:00Z", "option"),
                          (epoch[1], "2021-01-10T12:00:00Z", "log")])
        rc, out, err = pb(db, "trend", "TM-05", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        got = [(b["bucket"], b["flights"]) for b in json.loads(out)["buckets"]]
        # literal ISO 8601 values
        self.assertEqual(got, [("2020-W53", 3), ("2021-W01", 2)])
        # and the same from Python's calendar
        for day, key in (("2021-01-03", "2020-W53"), ("2021-01-04", "2021-W01"),
                         ("2020-12-28", "2020-W53"), ("2021-01-10", "2021-W01")):
            y, w, _ = datetime.date.fromisoformat(day).isocalendar()
            self.assertEqual(f"{y}-W{w:02d}", key)
        rc, out, err = pb(db, "trend", "TM-05", "--json", "--by", "month")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual([(b["bucket"], b["flights"]) for b in json.loads(out)["buckets"]],
                         [("2020-12", 1), ("2021-01", 4)])
        rc, out, err = pb(db, "trend", "TM-05")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertRegex(out, r"2020-W53\s+3 2020-12-28")
        self.assertRegex(out, r"2021-W01\s+2 2021-01-04")


class BadInput(unittest.TestCase):
    """Refusals: exit status and the one-line message on standard error."""

    @classmethod
    def setUpClass(cls):
        cls.dir = os.path.join(SCRATCH, "bad")
        os.makedirs(cls.dir)
        cls.log = os.path.join(cls.dir, "good.csv")
        cls.log2 = os.path.join(cls.dir, "good2.csv")
        sim_many([(cls.log, SEED + 41, ["--format", "epoch", *SHORT], None),
                  (cls.log2, SEED + 42, ["--format", "epoch", "--start-epoch", 1772528400,
                                         *SHORT], None)])

    def fresh(self, name):
        db = os.path.join(newdir(self, name), "b.db")
        add_pack(self, db, "TM-01")
        return db

    def refused(self, res, status, *phrases):
        rc, out, err = res
        self.assertEqual(rc, status, f"exit status; stderr: {err!r}")
        self.assertTrue(err.startswith("packbook: "), err)
        for ph in phrases:
            self.assertIn(ph, err)
        return out, err

    def test_unknown_pack(self):
        db = self.fresh("unknown")
        for args in (("import", "--pack", "TM-99", self.log), ("trend", "TM-99"),
                     ("pack", "show", "TM-99"), ("compare", "TM-01", "TM-99")):
            with self.subTest(args=args):
                out, err = self.refused(pb(db, *args), EXIT_USAGE, "unknown pack 'TM-99'")
                self.assertEqual(out, "")
        self.assertEqual(scalar(db, "SELECT count(*) FROM flights"), 0)

    def test_duplicate_pack(self):
        db = self.fresh("dup")
        self.refused(pb(db, "pack", "add", "TM-01", "--cells", 6, "--chemistry", "lihv",
                        "--capacity", 4200), EXIT_USAGE, "pack 'TM-01' exists already")
        self.assertEqual(query(db, "SELECT label, cells, chemistry FROM packs"),
                         [("TM-01", 4, "lipo")], "the first registration is kept")

    def test_malformed_dates(self):
        db = self.fresh("dates")
        for bad in ("2026-13-45", "2026-02-30", "junk", "2026-04-18T25:00"):
            with self.subTest(date=bad):
                self.refused(pb(db, "import", "--pack", "TM-01", "--date", bad, self.log),
                             EXIT_USAGE, "--date", f"'{bad}'")
        self.refused(pb(db, "pack", "add", "TM-02", "--cells", 4, "--chemistry", "lipo",
                        "--capacity", 5000, "--since", "junk"), EXIT_USAGE, "--since", "'junk'")
        self.assertEqual(scalar(db, "SELECT count(*) FROM flights"), 0)
        self.assertEqual(scalar(db, "SELECT count(*) FROM packs"), 1)

    def test_not_an_sqlite_file(self):
        d = newdir(self, "junk")
        db = os.path.join(d, "junk.db")
        junk = b"pack,flights\nTM-01,3\n" + bytes(range(256)) * 8
        with open(db, "wb") as f:
            f.write(junk)
        for args in (("pack", "list"), ("fleet",), ("import", "--pack", "TM-01", self.log),
                     ("pack", "add", "TM-01", "--cells", 4, "--chemistry", "lipo",
                      "--capacity", 5000)):
            with self.subTest(args=args):
                out, err = self.refused(pb(db, *args), EXIT_STORE, db,
                                        "not a packbook database")
                self.assertEqual(out, "")
        with open(db, "rb") as f:
            self.assertEqual(f.read(), junk, "the file is left as it was")

    def test_read_only_db(self):
        db = self.fresh("readonly")
        rc, out, err = pb(db, "import", "--pack", "TM-01", self.log)
        self.assertEqual(rc, EXIT_OK, err)
        before = query(db, "SELECT * FROM flights")
        # root ignores permission bits; the immutable attribute stops root too
        p = subprocess.run(["chattr", "+i", db], capture_output=True, text=True)
        if p.returncode != 0:
            self.skipTest(f"cannot make the database read-only (chattr +i: "
                          f"{p.stderr.strip() or p.returncode}); chmod does not stop root")
        self.addCleanup(subprocess.run, ["chattr", "-i", db], capture_output=True)
        probe = subprocess.run(["sh", "-c", f"echo >> '{db}'"], capture_output=True)
        if probe.returncode == 0:
            self.skipTest("chattr +i did not stop writes on this filesystem")
        out, err = self.refused(pb(db, "pack", "add", "TM-02", "--cells", 4, "--chemistry",
                                   "lipo", "--capacity", 5000), EXIT_STORE, "read-only")
        out, err = self.refused(pb(db, "import", "--pack", "TM-01", self.log2), EXIT_STORE,
                                "cannot store the flight")
        # the reason must be said, not lost: SQLite's message and packbook's hint
        self.assertIn("read-only", err)
        self.assertNotIn("not an error", err)
        self.refused(pb(db, "pack", "retire", "TM-01", "--reason", "test"), EXIT_STORE,
                     "read-only")
        # reading still works
        rc, out, err = pb(db, "fleet")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("TM-01", out)
        subprocess.run(["chattr", "-i", db], check=True)
        self.assertEqual(query(db, "SELECT * FROM flights"), before)
        self.assertEqual(scalar(db, "SELECT count(*) FROM packs"), 1)

    def test_retired_pack_refuses_import(self):
        db = self.fresh("retired")
        rc, out, err = pb(db, "pack", "retire", "TM-01", "--reason", "puffed after a cold sortie")
        self.assertEqual(rc, EXIT_OK, err)
        self.refused(pb(db, "import", "--pack", "TM-01", self.log), EXIT_USAGE,
                     "pack 'TM-01' was retired", "not importing")
        self.assertEqual(scalar(db, "SELECT count(*) FROM flights"), 0)
        self.refused(pb(db, "pack", "retire", "TM-01", "--reason", "again"), EXIT_USAGE,
                     "retired already")
        self.assertEqual(scalar(db, "SELECT retire_reason FROM packs"),
                         "puffed after a cold sortie")
        rc, out, err = pb(db, "fleet")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertNotIn("TM-01", out, "retired packs are left out without --all")
        rc, out, err = pb(db, "fleet", "--all", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual([(p["id"], p["status"]) for p in json.loads(out)], [("TM-01", "retired")])

    def test_some_inputs_failed(self):
        db = self.fresh("batch")
        bad = write_temp("not,a,flight\nlog,at,all\n")
        self.addCleanup(os.remove, bad)
        rc, out, err = pb(db, "import", "--pack", "TM-01", self.log, bad, self.log2)
        self.assertEqual(rc, EXIT_SOME_FAILED, err)
        self.assertIn("2 imported, 0 already there, 1 failed", out)
        self.assertIn("not imported", err)
        self.assertIn(bad, err)
        self.assertEqual(scalar(db, "SELECT count(*) FROM flights"), 2)

    def test_fleet_csv_neutralises_formulas(self):
        db = self.fresh("csv")
        labels = ["=HYPERLINK(1)", "+SUM(A1)", "-2+3", "@cmd", 'Brindle "north", 2']
        for lab in labels:
            add_pack(self, db, lab)
        rc, out, err = pb(db, "fleet", "--csv", "--sort", "pack")
        self.assertEqual(rc, EXIT_OK, err)
        rows = list(csv.reader(io.StringIO(out)))
        self.assertEqual(rows[0][0], "pack")
        got = {r[0] for r in rows[1:]}
        # OWASP CSV injection: a cell starting = + - @ gets a leading '
        want = {"'" + lab if lab[0] in "=+-@" else lab for lab in labels} | {"TM-01"}
        self.assertEqual(got, want)
        self.assertIn('"\'=HYPERLINK(1)"', out)
        for r in rows[1:]:
            self.assertEqual(len(r), len(rows[0]), r)
            for cell in r:
                self.assertFalse(cell[:1] in ("=", "+", "@") or
                                 (cell[:1] == "-" and not re.fullmatch(r"-[0-9.]+", cell)),
                                 f"live formula in {r}")
        # JSON and the text table keep the label as given
        rc, out, err = pb(db, "fleet", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual({p["id"] for p in json.loads(out)}, set(labels) | {"TM-01"})


def tearDownModule():
    # every command here was given --db while PACKBOOK_DB pointed at this path:
    # --db must win (--help: --db PATH, else $PACKBOOK_DB)
    stray = os.environ["PACKBOOK_DB"]
    if os.path.exists(stray):
        raise AssertionError(f"a command ignored --db and wrote {stray}")


if __name__ == "__main__":
    t0 = time.monotonic()
    prog = unittest.main(verbosity=2, exit=False)
    print(f"test_store: {time.monotonic() - t0:.1f} s, seed {SEED}", file=sys.stderr)
    sys.exit(not prog.result.wasSuccessful())
