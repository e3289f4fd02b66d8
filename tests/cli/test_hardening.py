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


if __name__ == "__main__":
    unittest.main(verbosity=2)
