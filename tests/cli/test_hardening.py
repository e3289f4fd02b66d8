#!/usr/bin/python3
"""Hardening (issue 11): what an attacker or a careless user can throw at packbook.

Each class is one item of the issue: a memory error in the column mapping, foreign SQLite
files, text that is not UTF-8, outputs that clobber, lock waits, terminal injection, calendar
dates and the smaller ones. Exit statuses are the documented ones (man packbook, EXIT
STATUS): 0 ok, 2 usage, 3 unusable input, 4 store error.
"""
import json
import os
import sqlite3
import subprocess
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import run, write_temp  # noqa: E402

EXIT_OK, EXIT_USAGE, EXIT_INPUT, EXIT_STORE = 0, 2, 3, 4


class ColumnMapping(unittest.TestCase):
    """Item 1: a --columns list longer than the header plus a --map by name read past the
    header's fields (heap overflow, exit 139)."""

    LOG = "x,y\n0,16.0\n1,15.9\n2,15.8\n3,15.7\n"

    def test_long_columns_with_map_by_name(self):
        path = write_temp(self.LOG)
        rc, out, err = run("analyze", path, "--columns", "time_s,voltage_v,a,b,c,d,e,f",
                           "--map", "voltage_v=zz")
        self.assertEqual(rc, EXIT_USAGE, err)
        self.assertIn("--map: no column 'zz'", err)

    def test_map_by_name_finds_a_columns_entry_past_the_header(self):
        path = write_temp(self.LOG)
        # 'volts' is the 4th --columns entry, past the 2 header fields: found, then short rows
        rc, out, err = run("analyze", path, "--columns", "time_s,q,r,volts",
                           "--map", "voltage_v=volts", "--json")
        self.assertEqual(rc, EXIT_INPUT, err)
        self.assertIn("usable samples", err)

    def test_map_by_index_past_the_header(self):
        path = write_temp(self.LOG)
        rc, out, err = run("analyze", path, "--columns", "time_s,voltage_v,q,r,s",
                           "--map", "voltage_v=5")
        self.assertEqual(rc, EXIT_INPUT, err)



def temp_db():
    return os.path.join(pbtest.temp_dir("pbtest-db-"), "p.db")


def add_pack(db, label="P1", *extra):
    rc, out, err = run("pack", "add", label, "--cells", 4, "--chemistry", "lipo", "--capacity",
                       5000, "--db", db, *extra)
    assert rc == 0, err
    return label


def plain_log(n=200, t0=None):
    """A 4S flight: 200 samples at 10 Hz, the bad-input suite's synthetic log (voltage falling
    from 16.6 V with a 12 mOhm sag of a current stepping 5-30 A)."""
    steps = (5.0, 30.0, 12.0, 25.0, 8.0)
    rows = ["time_s,voltage_v,current_a"]
    for k in range(n):
        i = steps[(k // 20) % len(steps)]
        rows.append(f"{k / 10:.1f},{16.6 - 0.004 * k - 0.012 * i:.4f},{i:.2f}")
    return "\n".join(rows) + "\n"


class Dates(unittest.TestCase):
    """Item 7: dates were rolled over (2026-02-31T24:00 stored as 2026-03-04), stored literally
    (--since 2026-02-31T24:00) or accepted outside any sensible range (0000, 9999)."""

    def test_since_and_date_refused_with_the_reason(self):
        db = temp_db()
        cases = [("2026-02-31T24:00", "February 2026 has 28 days"),
                 ("2026-02-28T24:00", "hour 24 is not 00-23"),
                 ("2026-02-28T12:34:60", "second 60 is not 00-59"),
                 ("0000-01-01", "year 0000 is outside 1970-2100"),
                 ("9999-12-31T23:59:59Z", "year 9999 is outside 1970-2100")]
        for text, why in cases:
            with self.subTest(text=text):
                rc, out, err = run("pack", "add", "D", "--cells", 4, "--chemistry", "lipo",
                                   "--capacity", 5000, "--since", text, "--db", db)
                self.assertEqual(rc, EXIT_USAGE, err)
                self.assertIn(why, err)
        add_pack(db)
        log = write_temp(plain_log())
        for text, why in cases:
            with self.subTest(text=text):
                rc, out, err = run("import", "--pack", "P1", "--date", text, "--db", db, log)
                self.assertEqual(rc, EXIT_USAGE, err)
                self.assertIn(why, err)
        rc, out, err = run("pack", "list", "--json", "--db", db)
        self.assertEqual([p["id"] for p in json.loads(out)], ["P1"])

    def test_unix_time_column_outside_the_range_is_not_stored(self):
        db = temp_db()
        add_pack(db)
        rows = ["time_unix,voltage_v,current_a"] + [
            f"{-5e10 + k / 10:.1f},{16.5 - 0.004 * k:.3f},10" for k in range(50)]
        log = write_temp("\n".join(rows) + "\n")
        rc, out, err = run("import", "--pack", "P1", "--db", db, log)
        self.assertEqual(rc, 1, err)
        self.assertIn("outside 1970-2100", err + out)



def file_state(path):
    """The bytes of a database and of its -wal/-shm companions (absent: None)."""
    out = []
    for p in (path, path + "-wal", path + "-shm"):
        out.append(open(p, "rb").read() if os.path.exists(p) else None)
    return out


class ForeignDatabases(unittest.TestCase):
    """Item 3: `pack list` / `fleet` on another program's SQLite file left packbook's tables,
    user_version 3 and WAL mode behind. sqlite3 here is Python's module (the reference library
    that made the file)."""

    def foreign(self, app_id=0):
        db = temp_db()
        con = sqlite3.connect(db)
        con.execute("CREATE TABLE customers (id INTEGER PRIMARY KEY, name TEXT)")
        con.execute("INSERT INTO customers (name) VALUES ('Ada')")
        if app_id:
            con.execute(f"PRAGMA application_id = {app_id}")
        con.commit()
        con.close()
        return db

    def test_every_verb_refuses_and_leaves_it_alone(self):
        db = self.foreign()
        before = file_state(db)
        log = write_temp(plain_log())
        for args in (("pack", "list"), ("pack", "show", "P1"), ("fleet",), ("trend", "P1"),
                     ("compare", "P1", "P2"), ("predict", "P1"),
                     ("pack", "add", "P1", "--cells", 4, "--chemistry", "lipo", "--capacity",
                      5000),
                     ("pack", "retire", "P1", "--reason", "x"), ("import", "--pack", "P1", log),
                     ("plot", "fleet", "-o", os.path.join(os.path.dirname(db), "f.png"))):
            with self.subTest(args=args):
                rc, out, err = run(args[0], "--db", db, *args[1:])
                self.assertEqual(rc, EXIT_STORE, err)
                self.assertIn("not a packbook database", err)
                self.assertIn("'customers'", err)
                self.assertEqual(file_state(db), before, "the file is left as it was")
        con = sqlite3.connect(db)
        self.assertEqual(con.execute("PRAGMA journal_mode").fetchone()[0], "delete")
        self.assertEqual(con.execute("PRAGMA user_version").fetchone()[0], 0)
        con.close()

    def test_another_programs_application_id(self):
        db = self.foreign(app_id=0x12345678)
        rc, out, err = run("fleet", "--db", db)
        self.assertEqual(rc, EXIT_STORE, err)
        self.assertIn("application id 0x12345678", err)

    def test_reading_verbs_never_create(self):
        d = pbtest.temp_dir("pbtest-nodb-")
        db = os.path.join(d, "sub", "none.db")
        for args in (("fleet",), ("pack", "list", "--json"), ("trend", "P1"),
                     ("predict", "P1"), ("import", "--pack", "P1", "-")):
            with self.subTest(args=args):
                rc, out, err = run(args[0], "--db", db, *args[1:], stdin=b"")
                self.assertEqual(rc, EXIT_STORE, err)
                self.assertIn("no history yet", err)
                self.assertFalse(os.path.exists(os.path.dirname(db)), "nothing created")

    def test_our_database_is_marked_and_read_only_verbs_do_not_write(self):
        db = temp_db()
        add_pack(db)
        con = sqlite3.connect(db)
        self.assertEqual(con.execute("PRAGMA application_id").fetchone()[0], 0x504B424B)
        con.close()
        os.chmod(db, 0o444)  # root ignores this; the read-only open below does not need it
        try:
            for args in (("pack", "list"), ("fleet",), ("pack", "show", "P1", "--json")):
                rc, out, err = run(args[0], "--db", db, *args[1:])
                self.assertEqual(rc, EXIT_OK, err)
        finally:
            os.chmod(db, 0o644)


if __name__ == "__main__":
    unittest.main(verbosity=2)
