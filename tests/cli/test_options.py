#!/usr/bin/python3
"""Options: keywords in any case; every verb's option table documented.
What each check is measured against: the same command with the keyword in lower case (the
spelling the man page gives) must give the same output, byte for byte; a word that is none
of the keywords is a usage error (exit 2, man packbook EXIT STATUS) naming the option, the
value and the words expected. Every option a verb's table holds (VERB --list-options, which
prints the table the parser uses) must be named in man/packbook.1 and in VERB --help, so the
documentation cannot drift from the code. Logs: samples/ (the invented demo fleet).
Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_options.py -v
"""
import os
import re
import subprocess
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import run  # noqa: E402

EXIT_OK, EXIT_USAGE = 0, 2
SAMPLES = os.path.join(pbtest.ROOT, "samples")
CELLS = os.path.join(SAMPLES, "tm12-cells.csv")
PLAIN = os.path.join(SAMPLES, "tm07-plain.csv")
SCRATCH = pbtest.temp_dir("pboptions-")
DB = os.path.join(SCRATCH, "h.db")


def setUpModule():
    rc, _, err = run("pack", "add", "TM-07", "--cells", "4", "--chemistry", "LiPo",
                     "--capacity", "5000", "--db", DB)
    assert rc == EXIT_OK, err
    rc, _, err = run("import", "--pack", "TM-07", PLAIN, "--date", "2026-03-02", "--db", DB)
    assert rc == EXIT_OK, err


class KeywordCase(unittest.TestCase):
    def same(self, lower, mixed):
        a, b = run(*lower), run(*mixed)
        self.assertEqual(a[0], EXIT_OK, a[2])
        self.assertEqual(b[0], EXIT_OK, f"{mixed}: {b[2]}")
        self.assertEqual(a[1], b[1], mixed)

    def test_reading_keywords(self):
        for opt, lower, mixed in (("--delimiter", "comma", "Comma"),
                                  ("--decimal", "point", "POINT"),
                                  ("--current-sign", "discharge-positive", "Discharge-Positive"),
                                  ("--fit", "ols", "OLS"),
                                  ("--chemistry", "lihv", "LiHV")):
            self.same(["analyze", CELLS, "--json", opt, lower],
                      ["analyze", CELLS, "--json", opt, mixed])

    def test_history_keywords(self):
        self.same(["fleet", "--sort", "r0-ratio", "--db", DB],
                  ["fleet", "--sort", "R0-Ratio", "--db", DB])
        self.same(["fleet", "--status", "ok", "--all", "--db", DB],
                  ["fleet", "--status", "OK", "--all", "--db", DB])
        self.same(["trend", "TM-07", "--by", "month", "--fit", "ols", "--db", DB],
                  ["trend", "TM-07", "--by", "Month", "--fit", "Ols", "--db", DB])

    def test_plot_axis(self):
        out = os.path.join(SCRATCH, "t.svg")
        rc, _, err = run("plot", "trend", "TM-07", "--x", "Date", "--by", "WEEK", "-o", out,
                         "--db", DB)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertTrue(os.path.getsize(out) > 0)

    def test_settings_file_keyword(self):
        home = pbtest.temp_dir("pboptions-home-")
        cfg = os.path.join(home, "config")
        with open(cfg, "w") as f:
            f.write("current-sign = Discharge-Positive\n")
        env = dict(os.environ, PACKBOOK_CONFIG=cfg)
        p = subprocess.run([pbtest.PACKBOOK, "analyze", CELLS, "--json"], env=env,
                           capture_output=True, text=True)
        self.assertEqual(p.returncode, EXIT_OK, p.stderr)
        self.assertEqual(p.stdout, run("analyze", CELLS, "--json", "--current-sign",
                                       "discharge-positive")[1])

    def test_not_a_keyword(self):
        for args, want in ((["analyze", CELLS, "--fit", "Robustly"],
                            "--fit: expected robust or ols, got 'Robustly'"),
                           (["fleet", "--sort", "age", "--db", DB],
                            "--sort: expected status, pack, cycles, r0, r0-ratio, capacity, "
                            "imbalance or last, got 'age'"),
                           (["trend", "TM-07", "--by", "fortnight", "--db", DB],
                            "--by: expected week, month or cycle, got 'fortnight'")):
            rc, _, err = run(*args)
            self.assertEqual(rc, EXIT_USAGE, args)
            self.assertIn(want, err)


class Documented(unittest.TestCase):
    def verbs(self):
        rc, out, err = run("--help")
        self.assertEqual(rc, EXIT_OK, err)
        names = re.findall(r"^  ([a-z]+) ", out.split("commands:")[1], re.M)
        self.assertIn("analyze", names)
        return [[v] for v in names] + [["pack", "pair"], ["pack", "unpair"]]

    def test_every_option_in_man_and_help(self):
        with open(os.path.join(pbtest.ROOT, "man", "packbook.1")) as f:
            man = f.read()
        seen = 0
        for verb in self.verbs():
            rc, out, err = run(*verb, "--list-options")
            self.assertEqual(rc, EXIT_OK, f"{verb}: {err}")
            names = out.split()
            self.assertIn("--help", names, verb)
            rc, helptext, err = run(*verb, "--help")
            self.assertEqual(rc, EXIT_OK, f"{verb}: {err}")
            for name in names:
                self.assertTrue(name.startswith("--"), name)
                # the man page writes a dash as \-; a name must not be a prefix of a longer one
                escaped = re.escape(name.replace("-", "\\-"))
                self.assertRegex(man, escaped + r"(?![a-z0-9]|\\-[a-z])",
                                 f"{' '.join(verb)} {name}: not in man/packbook.1")
                self.assertRegex(helptext, re.escape(name) + r"(?![a-z0-9-])",
                                 f"{' '.join(verb)} {name}: not in its --help")
                seen += 1
        self.assertGreater(seen, 100)  # the tables are there, not an empty list

    def test_defaults_in_help(self):
        # the defaults --help prints come from the tables (man packbook gives the same values)
        for verb, want in ((["trend"], "(default 1000)"), (["predict"], "(default 30)"),
                           (["fleet"], "(default 80)"), (["import"], "(default 60")):
            rc, out, _ = run(*verb, "--help")
            self.assertEqual(rc, EXIT_OK)
            self.assertIn(want, out, verb)

    def test_bad_values_name_option_and_range(self):
        for args, want in ((["trend", "X", "--horizon", "0"],
                            "--horizon: expected a number from 1 to 1e+06, got '0'"),
                           (["predict", "X", "--runs", "5"],
                            "--runs: expected a whole number from 10 to 5000, got '5'"),
                           (["analyze", "x.csv", "--cells", "many"],
                            "--cells: expected a whole number from 1 to 24, got 'many'"),
                           (["fleet", "--no-such-option"], "unknown option '--no-such-option'")):
            rc, _, err = run(*args)
            self.assertEqual(rc, EXIT_USAGE, args)
            self.assertIn(want, err, args)


class StageMarks(unittest.TestCase):
    """PACKBOOK_STAGES (man packbook FILES; bench/stages.py reads it): a mark on stderr as each
    stage of the analysis begins, in the pipeline's order, times from the start of reading
    and never falling, and the report itself byte for byte the same as without it."""

    def marks(self, path):
        plain = subprocess.run([pbtest.PACKBOOK, "analyze", path, "--json"], capture_output=True)
        env = dict(os.environ, PACKBOOK_STAGES="1")
        told = subprocess.run([pbtest.PACKBOOK, "analyze", path, "--json"], capture_output=True,
                              env=env)
        self.assertEqual(plain.returncode, EXIT_OK)
        self.assertEqual(told.returncode, EXIT_OK)
        self.assertEqual(plain.stdout, told.stdout, path)
        self.assertNotIn(b"stage ", plain.stderr)
        marks = []
        for line in told.stderr.decode().splitlines():
            m = re.fullmatch(r"stage ([A-Za-z ]+) (\d+\.\d{3})", line)
            self.assertIsNotNone(m, line)
            marks.append((m.group(1), float(m.group(2))))
        times = [t for _, t in marks]
        self.assertEqual(times[0], 0.0)
        self.assertEqual(times, sorted(times))
        return [label for label, _ in marks]

    def test_model_log(self):
        # tm07 has current steps: the static fit, the tau search and the RC fit all run
        self.assertEqual(self.marks(PLAIN),
                         ["read", "levels", "walks", "static fit", "tau search", "RC fit",
                          "OCV trend", "SoC and capacity", "cells", "checks", "report", "end"])

    def test_voltage_only_log(self):
        # no current: no walks and no fits, the stages the analysis has still told
        self.assertEqual(self.marks(os.path.join(SAMPLES, "tm09-voltage-only.csv")),
                         ["read", "levels", "cells", "checks", "report", "end"])


if __name__ == "__main__":
    unittest.main()
