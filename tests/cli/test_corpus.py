#!/usr/bin/python3
"""The stored bad-input corpus (tests/data/bad/, expected outcomes in
expected.tsv) and the fuzzer's regression inputs (tests/data/fuzz/).

Each corpus file either fails with its documented exit status and a message
that starts with the file's name and says what was wrong, or is read with the
named warning (every repair counted). Fuzz inputs must end with an exit
status of 0, 2 or 3 (never a signal, never an internal error); under the
sanitizer build any memory error aborts and fails the test.
"""
import json
import os
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402

BAD = os.path.join(pbtest.DATA, "bad")
FUZZ = os.path.join(pbtest.DATA, "fuzz")


def cases():
    with open(os.path.join(BAD, "expected.tsv")) as f:
        for line in f:
            if line.startswith("#") or not line.strip():
                continue
            name, args, status, expect = line.rstrip("\n").split("\t")
            yield name, args.split(), int(status), expect


def fuzz_args(path):
    """The analyze arguments for one fuzz input. A file named options-* is in the form of
    tests/fuzz/fuzz_options.c: the --columns list, the --map list and a line with the
    delimiter and decimal mark, then the log (written to a temporary file)."""
    if not os.path.basename(path).startswith("options-"):
        return [path, "--json"]
    with open(path, "rb") as f:
        data = f.read()
    parts = data.split(b"\n", 3) + [b""] * 3
    columns, mapping, dd, log = parts[:4]
    args = [write_temp_bytes(log), "--json"]
    text = lambda b: b.split(b"\0")[0].decode("utf-8", "surrogateescape")  # argv stops at NUL
    if text(columns):
        args += ["--columns", text(columns)]
    if text(mapping):
        args += ["--map", text(mapping)]
    dd = text(dd)
    if dd and dd[0] not in "0\"":
        args += ["--delimiter", dd[0]]
    if len(dd) > 1 and dd[1] in ".,":
        args += ["--decimal", dd[1]]
    return args


def write_temp_bytes(data):
    return pbtest.write_temp(data, mode="wb")


class Corpus(unittest.TestCase):
    def test_corpus_has_its_outcomes(self):
        listed = {c[0] for c in cases()}
        files = {f for f in os.listdir(BAD) if f != "expected.tsv"}
        self.assertEqual(files, listed, "every corpus file has an expected outcome")
        self.assertGreaterEqual(len(listed), 30)

    def test_each_case(self):
        for name, args, status, expect in cases():
            path = os.path.join(BAD, name)
            with self.subTest(name=name):
                rc, out, err = pbtest.run("analyze", path, "--json", "--cells", 4, *args)
                self.assertEqual(rc, status, f"{name}: {err}")
                if status == 0:
                    codes = [w["code"] for w in json.loads(out)["warnings"]]
                    if expect:
                        self.assertIn(expect, codes, name)
                else:
                    self.assertTrue(err.startswith(f"packbook: {path}"), err)
                    self.assertEqual(err.count("\n"), 1, f"{name}: one message: {err!r}")
                    self.assertIn(expect, err, name)
                    self.assertEqual(out, "", f"{name}: nothing on stdout")

    def test_fuzz_regressions(self):
        for name in sorted(os.listdir(FUZZ)):
            if name.startswith("README"):
                continue
            with self.subTest(name=name):
                rc, out, err = pbtest.run("analyze", *fuzz_args(os.path.join(FUZZ, name)))
                self.assertIn(rc, (0, 2, 3), f"{name}: exit {rc}: {err[-500:]}")


if __name__ == "__main__":
    unittest.main(verbosity=2)
