#!/usr/bin/python3
"""Bad and unusual input through `packbook analyze`: what it refuses, what it
drops and counts, and the dialects it must read.

Every case builds its log on the fly in a temporary file (the big ones are
generated, never stored). The good-path log is synthetic: 200 samples at
10 Hz of a 4S pack, voltage falling slowly from about 16.5 V with the sag of
a current stepping between 5 and 30 A every 2 s. Each test checks the exit
status and the message: for errors the one line `packbook: FILE:LINE[:COL]:
...` on standard error (and nothing on standard output), for repairs the
warning's code, its count and the first place `FILE:LINE:COL`.

Exit statuses (src/core/pb_error.h): 0 ok, 2 usage, 3 unusable input.

Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_bad_input.py -v
With PB_VALGRIND=1 every packbook run goes through
`valgrind -q --error-exitcode=99`, so a memory error fails the test that
caused it (exit 99 and valgrind's report on standard error); the time and
data-size limits of the 10 MB line tests are not applied then.
"""
import json
import os
import random
import re
import resource
import subprocess
import sys
import tempfile
import time
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import analyze_json, run, warning_codes, write_temp  # noqa: E402

VALGRIND = os.environ.get("PB_VALGRIND", "")
# set by meson for a sanitizer build, whose shadow memory needs far more than the data limit
SANITIZED = os.environ.get("PB_SANITIZED", "") == "1"
# PB_VALGRIND=1: memory errors only; any other value: extra valgrind options,
# e.g. PB_VALGRIND="--leak-check=full --errors-for-leak-kinds=definite"
VALGRIND_ARGS = ["-q", "--error-exitcode=99"] + ([] if VALGRIND in ("", "1") else VALGRIND.split())

EXIT_OK, EXIT_USAGE, EXIT_INPUT = 0, 2, 3

# Warnings that come from the reader (dropped, repaired or ignored input).
READER_CODES = {"dropped_bad_number", "dropped_nonfinite", "dropped_empty_field",
                "dropped_short_row", "dropped_duplicate_time", "extra_fields",
                "truncated_last_line", "duplicate_column", "temperature_repaired",
                "dropped_glitch_voltage", "dropped_glitch_current", "dropped_voltage_spike",
                "dropped_stray_time", "clock_restart"}

N = 200          # samples in the synthetic log
HZ = 10.0
STEPS = (5.0, 30.0, 12.0, 25.0, 8.0)  # A, each held for 20 samples


# ---- the synthetic flight ---------------------------------------------------

def sample(k):
    """(time s, pack voltage V, current A) of sample k."""
    t = k / HZ
    i = STEPS[(k // 20) % len(STEPS)]
    v = 16.6 - 0.004 * k - 0.012 * i
    return t, v, i


def col_t(k, t, v, i):
    return f"{t:.1f}"


def col_v(k, t, v, i):
    return f"{v:.4f}"


def col_i(k, t, v, i):
    return f"{i:.2f}"


STD = [("time_s", col_t), ("voltage_v", col_v), ("current_a", col_i)]


def make_log(cols=STD, n=N, delim=",", eol="\n", header=True, final_eol=True):
    """Text of a log: cols is a list of (header name, fn(k, t, v, i) -> field)."""
    lines = [delim.join(name for name, _ in cols)] if header else []
    for k in range(n):
        t, v, i = sample(k)
        lines.append(delim.join(fn(k, t, v, i) for _, fn in cols))
    return eol.join(lines) + (eol if final_eol else "")


def lines_of(text):
    return text.splitlines(keepends=True)


def trapezoid_mean(ts, xs):
    area = sum((ts[k] - ts[k - 1]) * 0.5 * (xs[k] + xs[k - 1]) for k in range(1, len(ts)))
    return area / (ts[-1] - ts[0])


# ---- running packbook -------------------------------------------------------

def pb(*args, stdin=None, timeout=120):
    """Runs packbook (under valgrind with PB_VALGRIND=1); returns (status, stdout, stderr)."""
    if not VALGRIND:
        return run(*args, stdin=stdin, timeout=timeout)
    p = subprocess.run(["valgrind", *VALGRIND_ARGS, pbtest.PACKBOOK,
                        *map(str, args)], input=stdin, capture_output=True,
                       timeout=timeout * 20)
    return p.returncode, p.stdout.decode("utf-8", "replace"), p.stderr.decode("utf-8", "replace")


def analyze_ok(path, *args):
    if not VALGRIND:
        return analyze_json(path, *args)
    # under valgrind the text report is run too, so both writers are checked
    for extra in ((), ("--json",)):
        rc, out, err = pb("analyze", path, *extra, *args)
        if rc != 0:
            raise AssertionError(f"packbook analyze {path} {' '.join(extra)} exited {rc}: {err}")
    return json.loads(out)


class BadInput(unittest.TestCase):
    maxDiff = None

    @classmethod
    def setUpClass(cls):
        path = write_temp(make_log())
        try:
            cls.base = analyze_ok(path)
        finally:
            os.unlink(path)

    # -- helpers --

    def temp(self, content, suffix=".csv"):
        mode = "wb" if isinstance(content, bytes) else "w"
        if mode == "w":
            # newline="" is not available through write_temp: write bytes so
            # that "\r\n" and "\r" reach the file as given
            content, mode = content.encode("utf-8"), "wb"
        path = write_temp(content, suffix=suffix, mode=mode)
        self.addCleanup(os.unlink, path)
        return path

    def assert_error(self, status, args, prefix, *contains, stdin=None, timeout=120):
        """packbook fails with status, printing one line that starts with
        `packbook: PREFIX: ` (just `packbook: ` when prefix is None) and
        contains each of contains (any case)."""
        rc, out, err = pb(*args, stdin=stdin, timeout=timeout)
        self.assertEqual(rc, status, f"exit status; stderr: {err!r}")
        self.assertEqual(out, "", "nothing on standard output when it fails")
        lines = err.splitlines()
        self.assertEqual(len(lines), 1, f"one message, printed once: {err!r}")
        want = "packbook: " if prefix is None else f"packbook: {prefix}: "
        self.assertTrue(lines[0].startswith(want), f"expected '{want}...', got {lines[0]!r}")
        for c in contains:
            self.assertIn(c.lower(), lines[0].lower(), lines[0])
        return lines[0]

    def warning(self, doc, code):
        ws = [w for w in doc["warnings"] if w["code"] == code]
        self.assertEqual(len(ws), 1, f"one '{code}' warning in {warning_codes(doc)}")
        return ws[0]["message"]

    def assert_counted(self, doc, code, count, path, line, column):
        """A reader warning with its count and first place FILE:LINE:COLUMN."""
        msg = self.warning(doc, code)
        self.assertTrue(msg.startswith(f"{count} "), f"count {count}: {msg!r}")
        self.assertIn(f"(first at {path}:{line}:{column})", msg)
        return msg

    def reader_warnings(self, doc):
        return sorted(c for c in warning_codes(doc) if c in READER_CODES)

    def assert_input(self, doc, records, kept, dropped, repaired=0):
        inp = doc["input"]
        self.assertEqual((inp["records"], inp["kept"], inp["dropped"], inp["repaired"]),
                         (records, kept, dropped, repaired), inp)

    def assert_same_flight(self, doc, samples=N):
        """The analysis of a log that holds the base flight in another dialect."""
        self.assertEqual(doc["samples"], samples)
        self.assertAlmostEqual(doc["duration_s"], self.base["duration_s"], delta=1e-6)
        self.assertAlmostEqual(doc["voltage_max_v"], self.base["voltage_max_v"], delta=1e-9)
        self.assertAlmostEqual(doc["voltage_min_v"], self.base["voltage_min_v"], delta=1e-9)
        self.assertAlmostEqual(doc["current_max_a"], self.base["current_max_a"], delta=1e-9)
        self.assertAlmostEqual(doc["charge_used_mah"], self.base["charge_used_mah"],
                               delta=1e-6 * self.base["charge_used_mah"])

    def set_field(self, text, lineno, column, value, delim=","):
        """text with field `column` of 1-based line `lineno` set to value."""
        ls = text.split("\n")
        fields = ls[lineno - 1].split(delim)
        self.assertLess(column - 1, len(fields), "test set-up: the field to replace")
        fields[column - 1] = value
        ls[lineno - 1] = delim.join(fields)
        return "\n".join(ls)

    # -- the base log itself --

    def test_base_log_is_clean(self):
        path = self.temp(make_log())
        doc = analyze_ok(path)
        self.assertEqual(self.reader_warnings(doc), [])
        self.assert_input(doc, N, N, 0)
        self.assertEqual(doc["samples"], N)
        self.assertAlmostEqual(doc["duration_s"], (N - 1) / HZ, delta=1e-9)
        self.assertAlmostEqual(doc["current_max_a"], 30.0, delta=1e-9)

    # -- nothing to read --

    def test_empty_file(self):
        path = self.temp(b"")
        self.assert_error(EXIT_INPUT, ["analyze", path], path, "empty")

    def test_header_only(self):
        path = self.temp("time_s,voltage_v,current_a\n")
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:1", "header only")

    def test_header_only_without_newline(self):
        path = self.temp("# logger\ntime_s,voltage_v,current_a")
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:2", "header only")

    def test_comments_only(self):
        path = self.temp("# flight 12\n# pack B\n\n#\n")
        self.assert_error(EXIT_INPUT, ["analyze", path], path, "only comments")

    def _junk(self):
        rnd = random.Random(20240501)
        data = bytes(rnd.randrange(256) for _ in range(65536))
        self.assertIn(b"\0", data)
        return data

    def test_binary_junk_fails_cleanly(self):
        path = self.temp(self._junk())
        t0 = time.monotonic()
        rc, out, err = pb("analyze", path, timeout=30)
        self.assertLess(time.monotonic() - t0, 30 if VALGRIND else 5)
        self.assertEqual(rc, EXIT_INPUT, err)
        self.assertEqual(out, "")
        lines = err.splitlines()
        self.assertEqual(len(lines), 1, err)
        self.assertTrue(lines[0].startswith(f"packbook: {path}:{self._first_nul(self._junk())}: "),
                        lines[0])

    @staticmethod
    def _first_nul(data):
        """LINE:COLUMN of the first NUL byte, 1-based, columns counted in bytes."""
        at = data.index(b"\0")
        line = data.count(b"\n", 0, at) + 1
        col = at - (data.rfind(b"\n", 0, at) + 1) + 1
        return f"{line}:{col}"

    def test_binary_junk_message_says_it_is_not_text(self):
        # random bytes with NULs are no CSV: the message should say so and
        # where the first NUL is, not send the user looking for a time column
        path = self.temp(self._junk())
        msg = self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:{self._first_nul(self._junk())}")
        self.assertTrue(any(w in msg.lower() for w in ("binary", "not text", "not a text", "nul")),
                        f"message should say the file is not text: {msg!r}")

    def test_binary_junk_after_a_header(self):
        path = self.temp(b"time_s,voltage_v,current_a\n" + self._junk())
        # whatever the junk makes of the dialect: a clean refusal naming the file
        msg = self.assert_error(EXIT_INPUT, ["analyze", path], None)
        self.assertRegex(msg, "^packbook: " + re.escape(path) + r"[:]")

    # -- a 10 MB line --

    # Two bounds for one long line. Read from a pipe, packbook must stop
    # reading soon after the field limit: when it exits, less than 3 MiB of
    # the line has gone into the pipe (its 1 MiB read block, the pipe buffer
    # and slack), so it cannot have held the 10 MiB line. And it runs under
    # RLIMIT_DATA (brk and private writable mappings, Linux >= 4.7) of 8 MiB,
    # which the 200-line base log must also run under.
    DATA_LIMIT = 8 * 1024 * 1024
    CONSUMED_MAX = 3 * 1024 * 1024

    def _limit(self):
        if not VALGRIND and not SANITIZED:  # valgrind and ASan themselves need far more
            resource.setrlimit(resource.RLIMIT_DATA, (self.DATA_LIMIT, self.DATA_LIMIT))

    def _piped_run(self, data):
        """analyze - under the limit, fed data in 64 KiB pieces until it stops
        reading; returns (status, stderr, bytes written)."""
        cmd = [pbtest.PACKBOOK, "analyze", "-"]
        if VALGRIND:
            cmd = ["valgrind", *VALGRIND_ARGS] + cmd
        p = subprocess.Popen(cmd, stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                             stderr=subprocess.PIPE, preexec_fn=self._limit)
        written = 0
        pieces = (data[at:at + 65536] for at in range(0, len(data), 65536)) \
            if isinstance(data, bytes) else data
        try:
            for piece in pieces:
                p.stdin.write(piece)
                p.stdin.flush()
                written += len(piece)
        except BrokenPipeError:
            pass  # it stopped reading: what we want
        try:
            p.stdin.close()
        except BrokenPipeError:
            pass
        err = p.stderr.read().decode("utf-8", "replace")
        p.stderr.close()
        rc = p.wait(timeout=600 if VALGRIND else 30)
        return rc, err, written

    def assert_big_line_fails(self, data, line, column, *contains):
        path = self.temp(data)
        t0 = time.monotonic()
        msg = self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:{line}:{column}",
                                *contains, timeout=30)
        if not VALGRIND:
            self.assertLess(time.monotonic() - t0, 5.0, "quickly")

        rc, err, _ = self._piped_run(make_log().encode())
        self.assertEqual(rc, EXIT_OK, f"the base log under the memory bound: {err!r}")
        rc, err, written = self._piped_run(data)
        self.assertEqual(rc, EXIT_INPUT, err)
        self.assertEqual(err.splitlines(), [msg.replace(path, "(stdin)", 1)])
        self.assertLess(written, self.CONSUMED_MAX,
                        f"it read {written} bytes of the long line before giving up")

    def test_1gb_line_from_a_generator(self):
        # 1 GiB of one line, made on the fly and never stored: packbook must
        # refuse it after reading a few MiB, under the same memory bound
        def gigabyte():
            yield b"time_s,voltage_v,current_a\n0,"
            chunk = b"7" * 65536
            for _ in range(16384):
                yield chunk
        rc, err, written = self._piped_run(gigabyte())
        self.assertEqual(rc, EXIT_INPUT, err)
        self.assertIn("(stdin):2:2: field longer than 65536 bytes", err)
        self.assertLess(written, self.CONSUMED_MAX, f"read {written} bytes of a 1 GiB line")

    def test_10mb_single_line(self):
        self.assert_big_line_fails(b"7" * (10 * 1024 * 1024) + b"\n", 1, 1,
                                   "field longer than 65536 bytes")

    def test_10mb_line_inside_a_log(self):
        text = make_log() + "1" * (10 * 1024 * 1024) + ",16.0,5.0\n" + make_log(header=False)
        self.assert_big_line_fails(text.encode(), N + 2, 1, "field longer than 65536 bytes")

    def test_10mb_line_of_delimiters(self):
        self.assert_big_line_fails(b"," * (10 * 1024 * 1024) + b"\n", 1, 1025,
                                   "more than 1024 fields")

    # -- values that are not numbers --

    def test_nan_inf_overflow_dropped(self):
        text = make_log()
        # data line L holds sample L - 2
        text = self.set_field(text, 5, 2, "nan")
        text = self.set_field(text, 8, 3, "inf")
        text = self.set_field(text, 40, 2, "1e400")
        text = self.set_field(text, 41, 3, "-Infinity")
        text = self.set_field(text, 60, 2, "NaN")
        path = self.temp(text)
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_nonfinite", 5, path, 5, 2)
        self.assert_input(doc, N, N - 5, 5)
        self.assertEqual(doc["samples"], N - 5)
        self.assertEqual(self.reader_warnings(doc), ["dropped_nonfinite"])

    def test_nonfinite_everywhere_too_few_samples(self):
        cols = [("time_s", col_t), ("voltage_v", lambda *a: "nan"), ("current_a", col_i)]
        path = self.temp(make_log(cols))
        self.assert_error(EXIT_INPUT, ["analyze", path], path,
                          f"0 usable samples of {N} records", "first problem at line 2)")

    def test_non_numeric_word(self):
        path = self.temp(self.set_field(make_log(), 11, 2, "abc"))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_bad_number", 1, path, 11, 2)
        self.assert_input(doc, N, N - 1, 1)

    def test_hex_float_is_a_bad_number(self):
        path = self.temp(self.set_field(make_log(), 11, 3, "0x1p3"))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_bad_number", 1, path, 11, 3)
        self.assert_input(doc, N, N - 1, 1)

    def test_empty_required_field(self):
        ls = lines_of(make_log())
        t, v, i = sample(28)  # line 30
        ls[29] = f"{t:.1f},,{i:.2f}\n"
        path = self.temp("".join(ls))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_empty_field", 1, path, 30, 2)
        self.assert_input(doc, N, N - 1, 1)

    def test_first_problem_line_is_the_earliest(self):
        # too few samples: the message's "first problem" must be the first bad
        # line (2, infinity), not the first of some kind (4, a word)
        text = "time_s,voltage_v,current_a\n0.0,inf,5\n0.1,16.5,5\n0.2,abc,5\n"
        path = self.temp(text)
        self.assert_error(EXIT_INPUT, ["analyze", path], path, "1 usable sample of 3 records",
                          "first problem at line 2)")

    def test_noise_free_log(self):
        # voltage falling in exact step with a rising current: every residual
        # of the fit is zero. That is a perfect fit (--fit ols analyses it),
        # not an internal error without a file name
        cols = [STD[0], ("voltage_v", lambda k, *a: f"{16.5 - 0.01 * k:.2f}"),
                ("current_a", lambda k, *a: f"{5 + k}")]
        path = self.temp(make_log(cols, n=50))
        doc = analyze_ok(path, "--fit", "ols")
        self.assertEqual(doc["samples"], 50)
        rc, out, err = pb("analyze", path, "--json")
        self.assertEqual(rc, EXIT_OK, f"robust fit on a noise-free log: {err!r}")
        self.assertEqual(json.loads(out)["samples"], 50)

    # -- time --

    def test_lone_row_out_of_order_dropped(self):
        # time in the second column so that the column number means something
        cols = [("voltage_v", col_v), ("time_s", col_t), ("current_a", col_i)]
        ls = lines_of(make_log(cols))
        ls[60] = ls[20]  # line 61 repeats line 21: 1.9 s between 5.8 and 6.0 s
        path = self.temp("".join(ls))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_stray_time", 1, path, 61, 2)
        self.assert_input(doc, N, N - 1, 1)
        self.assertNotIn("clock_restart", warning_codes(doc))
        self.assertAlmostEqual(doc["duration_s"], self.base["duration_s"], delta=1e-9)

    def test_rows_written_late_now_and_then(self):
        # a buffered logger writes every 50th row one row late (lines 51/52, 101/102, ...):
        # each late row is a lone row behind, dropped and counted; the log is kept
        ls = lines_of(make_log())
        for ln in (51, 101, 151):
            ls[ln - 1], ls[ln] = ls[ln], ls[ln - 1]
        path = self.temp("".join(ls))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_stray_time", 3, path, 52, 1)
        self.assert_input(doc, N, N - 3, 3)

    def test_time_column_that_is_not_a_clock(self):
        # every other row goes back: refused (exit 3) at the first place (the first row,
        # ahead of those after it), naming the fixes
        cols = [("time_s", lambda k, t, v, i: f"{t if k % 2 else 100 - t:.1f}"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:2:1", "goes back at",
                          "--map time_s=COLUMN", "sort the rows")

    def test_lone_row_ahead_dropped(self):
        # line 31 jumps to 99 s and line 32 goes on from line 30: the row ahead is the stray
        ls = lines_of(make_log())
        ls[30] = "99.0," + ls[30].split(",", 1)[1]
        path = self.temp("".join(ls))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_stray_time", 1, path, 31, 1)
        self.assertAlmostEqual(doc["duration_s"], self.base["duration_s"], delta=1e-9)

    def test_clock_restart_is_segments(self):
        # the logger's clock restarts at 0 after sample 99 (line 101): two segments
        # analysed together; the charge is the sum of each part's own trapezoid and
        # nothing is counted for the unknown time between them (issue 10 item 5)
        cols = [("time_s", lambda k, t, v, i: f"{(k % 100) / HZ:.1f}"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["samples"], N, "no sample lost")
        msg = self.warning(doc, "clock_restart")
        self.assertIn(f"(first at {path}:102:1)", msg)
        self.assertIn("2 segments", msg)
        ts = [k / HZ for k in range(100)]
        part = [[sample(k)[2] for k in range(j, j + 100)] for j in (0, 100)]
        want = sum(trapezoid_mean(ts, xs) * (ts[-1] - ts[0]) for xs in part) / 3.6
        # tolerance: the placeholder step at the joint is a thousandth of the 0.1 s step
        # before it (man page), so at most 30 A x 0.1 ms = 0.83 uAh is bridged there
        print(f"  two segments: charge {doc['charge_used_mah']:.6f} mAh, sum of parts {want:.6f}")
        self.assertAlmostEqual(doc["charge_used_mah"], want, delta=30 * 1e-4 / 3.6)
        self.assertAlmostEqual(doc["duration_s"], 2 * 9.9, delta=1e-3)

    def test_current_sentinel_in_first_row_dropped(self):
        # a logger's "no reading" 3.4e38 in the first row (issue 10): dropped and placed,
        # the charge is the rest's
        ls = lines_of(make_log())
        ls[1] = self.set_field(ls[1], 1, 3, "3.4e38")
        path = self.temp("".join(ls))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_glitch_current", 1, path, 2, 3)
        self.assert_input(doc, N, N - 1, 1)
        self.assertLess(doc["charge_used_mah"], self.base["charge_used_mah"])

    def test_current_beyond_200c_dropped_when_rated(self):
        # 1200 A on a 5000 mAh pack is 240 C: no pack delivers it (issue 10: > 200 C)
        ls = lines_of(make_log())
        ls[50] = self.set_field(ls[50], 1, 3, "1200")
        path = self.temp("".join(ls))
        doc = analyze_ok(path, "--capacity", "5000")
        self.assert_counted(doc, "dropped_glitch_current", 1, path, 51, 3)
        doc = analyze_ok(path)
        self.assertNotIn("dropped_glitch_current", warning_codes(doc), "no rating: kept")

    def test_zero_volt_sample_is_not_a_floor_crossing(self):
        # one 0 V reading (issue 10: it made a below_floor event and later a retire verdict)
        ls = lines_of(make_log())
        ls[80] = self.set_field(ls[80], 1, 2, "0")
        path = self.temp("".join(ls))
        doc = analyze_ok(path, "--cells", "4")
        self.assert_counted(doc, "dropped_glitch_voltage", 1, path, 81, 2)
        self.assertNotIn("below_floor", warning_codes(doc))
        self.assertEqual(doc["time_below_floor_s"], 0.0)

    def test_one_sample_voltage_dip_is_not_a_floor_crossing(self):
        # 9 V (2.25 V/cell) for one sample inside a steady 8 A step (samples 80-99): a
        # glitch, not a crossing
        ls = lines_of(make_log())
        ls[85] = self.set_field(ls[85], 1, 2, "9.0000")
        path = self.temp("".join(ls))
        doc = analyze_ok(path, "--cells", "4")
        self.assert_counted(doc, "dropped_voltage_spike", 1, path, 86, 2)
        self.assertNotIn("below_floor", warning_codes(doc))

    def test_voltage_at_a_current_step_is_kept(self):
        # the same 9 V on the first sample of the 8 A step (line 82, after 25 A): the
        # current moved, so the reader cannot call it a glitch and keeps it
        ls = lines_of(make_log())
        ls[81] = self.set_field(ls[81], 1, 2, "9.0000")
        path = self.temp("".join(ls))
        doc = analyze_ok(path, "--cells", "4")
        self.assertNotIn("dropped_voltage_spike", warning_codes(doc))
        self.assertEqual(doc["samples"], N)

    def test_random_time_faults_are_counted(self):
        # seeded random logs with strays behind and ahead, restarts, duplicates and glitch
        # values: packbook reads each (exit 0) or refuses it with one message (exit 3),
        # never drops a record without counting it (records = kept + dropped, samples =
        # kept) and writes its series in time order (--series prints 6 digits: a joint's
        # placeholder step may not show, so equal neighbours are allowed there)
        seed = 20261202
        rnd = random.Random(seed)
        print(f"  seed {seed}")
        for trial in range(60):
            t, rows = 0.0, []
            for k in range(rnd.randint(3, 120)):
                r = rnd.random()
                if r < 0.05:
                    tt = t - rnd.uniform(0, 5)
                elif r < 0.08:
                    tt = t + rnd.uniform(50, 500)
                elif r < 0.11:
                    t = rnd.uniform(0, t)
                    tt = t
                elif r < 0.13:
                    tt = t
                else:
                    t += rnd.choice([0.1, 0.1, 0.2, 1.0])
                    tt = t
                v = rnd.choice([16.0 - 0.001 * k] * 20 + [0, 3.0, 1e38, -5])
                i = rnd.choice([10.0] * 20 + [3.4e38, 500, -10])
                rows.append(f"{tt:.3f},{v},{i}")
            path = self.temp("time_s,voltage_v,current_a\n" + "\n".join(rows) + "\n")
            with self.subTest(seed=seed, trial=trial):
                rc, out, err = pb("analyze", path, "--json", "--cells", 4, "--capacity", 5000)
                self.assertIn(rc, (EXIT_OK, EXIT_INPUT), err)
                if rc != EXIT_OK:
                    self.assertEqual(err.count("\n"), 1, err)
                    continue
                doc = json.loads(out)
                inp = doc["input"]
                self.assertEqual(inp["records"], inp["kept"] + inp["dropped"], inp)
                self.assertEqual(doc["samples"], inp["kept"])
                rc, out, err = pb("analyze", path, "--cells", 4, "--capacity", 5000,
                                  "--series", "-")
                ts = [float(x.split(",")[0]) for x in out.splitlines()[1:]]
                self.assertEqual(ts[0], 0.0)
                self.assertTrue(all(b >= a for a, b in zip(ts, ts[1:])), ts)

    def test_duplicate_timestamps_dropped(self):
        ls = lines_of(make_log())
        # lines 51, 52 and 120 repeat the time of the line before, other values differ
        for ln in (51, 52, 120):
            t_prev = ls[ln - 2].split(",")[0]
            ls[ln - 1] = t_prev + "," + ls[ln - 1].split(",", 1)[1]
        path = self.temp("".join(ls))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_duplicate_time", 3, path, 51, 1)
        self.assert_input(doc, N, N - 3, 3)

    def test_all_timestamps_equal(self):
        cols = [("time_s", lambda *a: "5.0"), ("voltage_v", col_v), ("current_a", col_i)]
        path = self.temp(make_log(cols))
        msg = self.assert_error(EXIT_INPUT, ["analyze", path], path,
                                f"1 usable sample of {N} records")
        self.assertNotIn("line 0", msg, "there is no line 0")
        self.assertIn("first problem at line 3)", msg, "the first repeated time is on line 3")

    def test_single_sample(self):
        path = self.temp("time_s,voltage_v,current_a\n0.0,16.5,5\n")
        msg = self.assert_error(EXIT_INPUT, ["analyze", path], path,
                                "1 usable sample of 1 records", "at least 2")
        self.assertNotIn("line 0", msg, "there is no line 0")

    # -- whole-log plausibility (issue 10 item 4) --

    def ms_log(self, n):
        """The base flight's current steps with its time column in ms but no unit in the
        name, and a voltage that falls slowly enough to stay a 4S pack's for n samples."""
        cols = [("t", lambda k, t, v, i: f"{100 * k}"),
                ("voltage_v", lambda k, t, v, i: f"{16.6 - 0.0002 * k - 0.012 * i:.4f}"), STD[2]]
        return self.temp(make_log(cols, n=n))

    def test_ms_time_without_unit_days_and_charge(self):
        # 6600 samples 100 "s" apart: 183 h and, at 5-30 A, far beyond a 5000 mAh pack.
        # analyze warns with the likely fix; the same log with --map time_ms=1 is 11 min
        path = self.ms_log(6600)
        doc = analyze_ok(path, "--capacity", "5000")
        days = self.warning(doc, "log_of_days")
        self.assertIn("183.3 h", days)
        self.assertIn("--map time_ms=1", days)
        self.assertIn("--map time_ms=1", self.warning(doc, "charge_beyond_rated"))
        fixed = analyze_ok(path, "--capacity", "5000", "--map", "time_ms=1")
        self.assertAlmostEqual(fixed["duration_s"], 659.9, delta=1e-6)
        for code in ("log_of_days", "charge_beyond_rated", "time_maybe_ms"):
            self.assertNotIn(code, warning_codes(fixed))

    def test_ms_time_without_unit_short_log(self):
        # 400 samples: 11.1 h read as seconds, under a day, no rating given: a warning only
        doc = analyze_ok(self.ms_log(400))
        msg = self.warning(doc, "time_maybe_ms")
        self.assertIn("--map time_ms=1", msg)
        self.assertNotIn("log_of_days", warning_codes(doc))

    def test_base_log_is_plausible(self):
        doc = analyze_ok(self.temp(make_log()), "--capacity", "5000")
        for code in ("log_of_days", "charge_beyond_rated", "time_maybe_ms"):
            self.assertNotIn(code, warning_codes(doc))

    def test_import_refuses_an_impossible_log_unless_forced(self):
        # nothing impossible reaches the store: refused with the reason (exit 1, the batch's
        # failure status), stored with --force, its warnings kept
        path = self.ms_log(6600)
        db = os.path.join(pbtest.temp_dir("pb-plaus-"), "p.db")
        rc, out, err = pb("pack", "add", "P1", "--cells", "4", "--chemistry", "lipo",
                          "--capacity", "5000", "--db", db)
        self.assertEqual(rc, 0, err)
        rc, out, err = pb("import", "--pack", "P1", "--db", db, "--date", "2026-01-01", path)
        self.assertEqual(rc, 1, err)
        self.assertIn("0 imported", out)
        self.assertIn(f"not imported: {path} spans 183.3 h", err)
        self.assertIn("--force", err)
        rc, out, err = pb("import", "--pack", "P1", "--db", db, "--date", "2026-01-01", "--force",
                          path)
        self.assertEqual(rc, 0, err)
        self.assertIn("1 imported", out)
        import sqlite3  # the schema is documented (man packbook, DATABASE SCHEMA)
        con = sqlite3.connect(db)
        try:
            (report,) = con.execute("SELECT report_json FROM flight_reports").fetchone()
        finally:
            con.close()
        self.assertIn("log_of_days", warning_codes(json.loads(report)),
                      "the stored report keeps the warning")

    def test_iso8601_timestamps(self):
        cols = [("timestamp", lambda k, t, v, i: f"2024-05-01T10:00:{t:06.3f}Z"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["start_time"], "2024-05-01T10:00:00Z")
        self.assertEqual(doc["input"]["time_format"], "iso8601")
        self.assert_same_flight(doc)

    def test_iso8601_with_offset(self):
        cols = [("time", lambda k, t, v, i: f"2024-05-01T12:00:{t:06.3f}+02:00"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["start_time"], "2024-05-01T10:00:00Z")
        self.assert_same_flight(doc)

    def test_iso8601_bad_timestamp_dropped(self):
        cols = [("timestamp", lambda k, t, v, i: "yesterday" if k == 30 else
                 f"2024-05-01T10:00:{t:06.3f}Z"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_bad_number", 1, path, 32, 1)
        self.assert_input(doc, N, N - 1, 1)

    def test_unix_epoch_seconds(self):
        cols = [("time", lambda k, t, v, i: f"{1714557600 + t:.1f}"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["start_time"], "2024-05-01T10:00:00Z")
        self.assertEqual(doc["input"]["time_format"], "unix")
        self.assert_same_flight(doc)

    def test_unix_epoch_milliseconds(self):
        cols = [("time", lambda k, t, v, i: f"{1714557600000 + 100 * k}"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["start_time"], "2024-05-01T10:00:00Z")
        self.assertEqual(doc["input"]["time_format"], "unix")
        self.assert_same_flight(doc)

    def test_time_in_ms(self):
        cols = [("t_ms", lambda k, t, v, i: f"{100 * k}"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["start_time"], None)
        self.assertEqual(doc["input"]["time_format"], "relative")
        self.assert_same_flight(doc)

    def test_time_in_us(self):
        cols = [("t_us", lambda k, t, v, i: f"{100000 * k}"), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["input"]["time_format"], "relative")
        self.assert_same_flight(doc)

    def test_gaps_warning_names_the_place(self):
        # a 5 s hole after sample 99 (line 101): data line 102 ends the gap
        cols = [("time_s", lambda k, t, v, i: f"{t + (5.0 if k >= 100 else 0.0):.1f}"),
                STD[1], STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["gaps"]["count"], 1)
        self.assertAlmostEqual(doc["gaps"]["longest_s"], 5.1, delta=1e-9)
        msg = self.warning(doc, "gaps")
        self.assertTrue(msg.startswith("1 gap"), msg)
        self.assertIn(f"{path}:102", msg, "the first gap's place as FILE:LINE")

    # -- columns --

    def test_missing_voltage_column(self):
        cols = [STD[0], ("rpm", col_v), STD[2]]
        path = self.temp(make_log(cols))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:1", "no voltage column",
                          "--map voltage_v=")

    def test_missing_time_column(self):
        cols = [("rpm", col_t), STD[1], STD[2]]
        path = self.temp(make_log(cols))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:1", "no time column",
                          "--map time_s=")

    def test_unknown_columns_only(self):
        cols = [("alpha", col_t), ("beta", col_v), ("gamma", col_i)]
        path = self.temp(make_log(cols))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:1", "column", "--map")

    def test_extra_fields(self):
        ls = lines_of(make_log())
        for ln in (11, 12, 150):
            ls[ln - 1] = ls[ln - 1].rstrip("\n") + ",7,8\n"
        path = self.temp("".join(ls))
        doc = analyze_ok(path)
        self.assert_counted(doc, "extra_fields", 3, path, 11, 4)
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    def test_truncated_last_line(self):
        path = self.temp(make_log() + "20.0,15.7")
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_short_row", 1, path, N + 2, 3)
        msg = self.warning(doc, "truncated_last_line")
        self.assertIn(path, msg)
        self.assert_input(doc, N + 1, N, 1)
        self.assert_same_flight(doc)

    def test_complete_last_line_without_newline_is_kept(self):
        path = self.temp(make_log(final_eol=False))
        doc = analyze_ok(path)
        self.assertEqual(self.reader_warnings(doc), [])
        self.assert_input(doc, N, N, 0)

    def test_headerless_without_columns(self):
        path = self.temp(make_log(header=False))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:1", "no header",
                          "--columns")

    def test_headerless_with_columns(self):
        path = self.temp(make_log(header=False))
        doc = analyze_ok(path, "--columns", "time_s,voltage_v,current_a")
        self.assertFalse(doc["input"]["header"])
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    def test_headerless_columns_skip(self):
        cols = [STD[0], ("x", lambda *a: "99"), STD[1], STD[2]]
        path = self.temp(make_log(cols, header=False))
        doc = analyze_ok(path, "--columns", "time_s,-,voltage_v,current_a")
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    def test_repeated_unknown_column_names(self):
        cols = [STD[0], ("Loop", lambda *a: "1"), STD[1], ("Loop", lambda *a: "2"), STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(self.reader_warnings(doc), [])
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    def test_two_voltage_columns(self):
        cols = [STD[0], STD[1], ("vbat", lambda *a: "9.99"), STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assert_counted(doc, "duplicate_column", 1, path, 1, 3)
        self.assert_same_flight(doc)  # the first voltage column was used

    def test_two_columns_with_the_same_voltage_name(self):
        cols = [STD[0], STD[1], STD[2], ("voltage_v", lambda *a: "9.99")]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assert_counted(doc, "duplicate_column", 1, path, 1, 4)
        self.assert_same_flight(doc)

    def test_trailing_empty_column(self):
        path = self.temp("".join(l.rstrip("\n") + ",\n" for l in lines_of(make_log())))
        doc = analyze_ok(path)
        self.assertEqual(self.reader_warnings(doc), [])
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    # -- dialects --

    def test_decimal_comma_semicolon(self):
        text = make_log(delim=";").replace(".", ",")
        path = self.temp(self.set_field(text, 11, 2, "16,5x", delim=";"))
        doc = analyze_ok(path)
        self.assertEqual((doc["input"]["delimiter"], doc["input"]["decimal"]), (";", ","))
        self.assert_counted(doc, "dropped_bad_number", 1, path, 11, 2)
        self.assertAlmostEqual(doc["voltage_max_v"], self.base["voltage_max_v"], delta=1e-9)

    def test_tab_delimiter(self):
        path = self.temp(make_log(delim="\t"))
        doc = analyze_ok(path)
        self.assertEqual(doc["input"]["delimiter"], "tab")
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    def test_crlf_line_ends(self):
        text = self.set_field(make_log(), 11, 2, "abc").replace("\n", "\r\n")
        path = self.temp(text)
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_bad_number", 1, path, 11, 2)
        self.assertEqual(doc["input"]["lines"], N + 1)
        self.assertAlmostEqual(doc["voltage_max_v"], self.base["voltage_max_v"], delta=1e-9)

    def test_cr_only_line_ends_positions(self):
        # old-style "\r" line ends are read; the places reported must still
        # be the physical lines
        text = self.set_field(make_log(), 11, 2, "abc").replace("\n", "\r")
        path = self.temp(text)
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_bad_number", 1, path, 11, 2)
        self.assert_input(doc, N, N - 1, 1)

    def test_cr_only_line_count(self):
        path = self.temp(make_log().replace("\n", "\r"))
        doc = analyze_ok(path)
        self.assertEqual(doc["input"]["lines"], N + 1, "header and 200 data lines")

    def test_line_count_lf_and_crlf(self):
        for eol in ("\n", "\r\n"):
            with self.subTest(eol=repr(eol)):
                path = self.temp(make_log().replace("\n", eol))
                doc = analyze_ok(path)
                self.assertEqual(doc["input"]["lines"], N + 1)

    def test_utf8_bom(self):
        text = "\ufeff" + self.set_field(make_log(), 11, 2, "abc")
        path = self.temp(text)
        doc = analyze_ok(path)
        self.assertTrue(doc["input"]["header"])
        self.assert_counted(doc, "dropped_bad_number", 1, path, 11, 2)
        self.assertAlmostEqual(doc["voltage_max_v"], self.base["voltage_max_v"], delta=1e-9)

    def test_utf8_bom_headerless_message(self):
        path = self.temp("\ufeff" + make_log(header=False))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:1", "--columns")

    def test_quoted_fields(self):
        cols = [('"time_s"', lambda *a: '"' + col_t(*a) + '"'),
                ('"note"', lambda k, *a: '"a,b ""quoted"" text"'),
                ('"voltage [V]"', lambda *a: '"' + col_v(*a) + '"'),
                ('"current_a"', lambda *a: '"' + col_i(*a) + '"')]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(self.reader_warnings(doc), [])
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    def test_unterminated_quote(self):
        # a quote opened on line 11 and never closed swallows the rest of the
        # file: that must be an error at line 11, not one short row at the end
        path = self.temp(self.set_field(make_log(), 11, 1, '"0.9'))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:11:1", "quote")

    def test_quoted_newline_keeps_physical_line_numbers(self):
        # a quoted note on line 5 spans physical lines 5 and 6; the bad
        # voltage after it is on physical line 12 (record 11)
        cols = [STD[0], ("note", lambda k, *a: '"two\nlines"' if k == 3 else "x"), STD[1], STD[2]]
        text = self.set_field(make_log(cols), 12, 3, "abc")  # physical line 12
        self.assertTrue(text.split("\n")[11].startswith("0.9,x,abc,"), "test set-up")
        path = self.temp(text)
        doc = analyze_ok(path)
        self.assert_counted(doc, "dropped_bad_number", 1, path, 12, 3)
        self.assertEqual(doc["input"]["lines"], N + 2)

    # -- header spellings --

    def test_header_time_s_voltage_brackets_current_parens(self):
        cols = [("Time(s)", col_t), ("voltage [V]", col_v), ("Current(A)", col_i)]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(self.reader_warnings(doc), [])
        self.assert_same_flight(doc)

    def test_header_vbat_mv_ibat_ma_temp_c(self):
        cols = [("time_s", col_t), ("vbat_mV", lambda k, t, v, i: f"{v * 1000:.1f}"),
                ("ibat_mA", lambda k, t, v, i: f"{i * 1000:.0f}"),
                ("temp_C", lambda k, t, v, i: f"{30 + k / 20:.2f}")]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(self.reader_warnings(doc), [])
        self.assert_same_flight(doc)
        self.assertAlmostEqual(doc["temperature_min_c"], 30.0, delta=1e-9)
        self.assertAlmostEqual(doc["temperature_max_c"], 30 + (N - 1) / 20, delta=1e-9)

    def test_header_cell3_v(self):
        def cell(c):
            return lambda k, t, v, i: f"{v / 4 - (0.05 if c == 3 else 0.0):.4f}"
        cols = [STD[0], STD[2]] + [(f"cell{c}_v", cell(c)) for c in (1, 2, 3, 4)]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path)
        self.assertEqual(doc["cells"], 4)
        self.assertTrue(doc["input"]["voltage_from_cells"])
        self.assertEqual(doc["weakest_cell"], 3)
        lowest = min(round(sample(k)[1] / 4 - 0.05, 4) for k in range(N))
        self.assertAlmostEqual(doc["cells_detail"][2]["voltage_min_v"], lowest, delta=1e-9)

    def test_cell_columns_must_start_at_1(self):
        cols = [STD[0], STD[2], ("cell3_v", col_v)]
        path = self.temp(make_log(cols))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"{path}:1", "no voltage")

    # -- raw ADC current --

    def _adc_log(self, a_per_count, offset=0):
        counts = [round(sample(k)[2] / a_per_count) + offset for k in range(N)]
        cols = [STD[0], STD[1], ("current_adc", lambda k, *a: str(counts[k]))]
        return self.temp(make_log(cols)), counts

    def test_adc_without_calibration(self):
        path, _ = self._adc_log(0.05)
        self.assert_error(EXIT_USAGE, ["analyze", path], f"{path}:1:3", "ADC counts",
                          "--adc-scale")

    def test_adc_scale(self):
        path, _ = self._adc_log(0.05)
        doc = analyze_ok(path, "--adc-scale", "0.05")
        self.assertTrue(doc["input"]["current_from_adc"])
        self.assert_same_flight(doc)

    def test_adc_scale_and_offset(self):
        path, _ = self._adc_log(0.05, offset=512)
        doc = analyze_ok(path, "--adc-scale", "0.05", "--adc-offset", "512")
        self.assert_same_flight(doc)

    def test_adc_sense_chain(self):
        # 10-bit ADC, 3.3 V reference: 3.3/1024 V per count; the sense output
        # is I/14000 into 510 ohm, i.e. 510/14000 V per A -> 0.0885 A per count
        a_per_count = (3.3 / 1024) / (510 / 14000)
        self.assertAlmostEqual(a_per_count, 0.089, delta=0.001)
        counts = [round(sample(k)[2] / 0.0885) for k in range(N)]
        cols = [STD[0], STD[1], ("current_adc", lambda k, *a: str(counts[k]))]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path, "--adc-bits", "10", "--adc-vref", "3.3", "--sense-ratio",
                         "14000", "--sense-ohm", "510")
        self.assertTrue(doc["input"]["current_from_adc"])
        amps = [c * a_per_count for c in counts]
        ts = [sample(k)[0] for k in range(N)]
        self.assertLess(abs(doc["current_max_a"] - max(amps)), 0.01 * max(amps))
        mean = trapezoid_mean(ts, amps)
        self.assertLess(abs(doc["current_mean_a"] - mean), 0.01 * mean)

    def test_adc_sense_chain_incomplete(self):
        path, _ = self._adc_log(0.05)
        msg = self.assert_error(EXIT_USAGE, ["analyze", path, "--adc-bits", "10",
                                             "--adc-vref", "3.3"], None,
                                "the sense chain needs all of")
        self.assertIn("--sense-ohm", msg)

    # -- --map --

    def test_map_names_and_index(self):
        cols = [("Zeit", col_t), ("Spannung", col_v), ("Strom", col_i)]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path, "--map", "time_s=Zeit,voltage_v=Spannung,current_a=3")
        self.assert_input(doc, N, N, 0)
        self.assert_same_flight(doc)

    def test_map_overrides_detection(self):
        cols = [STD[0], ("voltage_v", lambda *a: "1.0000"), ("VBAT2", col_v), STD[2]]
        path = self.temp(make_log(cols))
        doc = analyze_ok(path, "--map", "voltage_v=VBAT2")
        self.assert_same_flight(doc)

    def test_map_unknown_column(self):
        path = self.temp(make_log())
        self.assert_error(EXIT_USAGE, ["analyze", path, "--map", "voltage_v=NOPE"],
                          "--map", "no column 'NOPE'", path)

    # -- command line --

    def test_unknown_option(self):
        path = self.temp(make_log())
        self.assert_error(EXIT_USAGE, ["analyze", path, "--bogus"], "analyze",
                          "unknown option '--bogus'")

    def test_nonexistent_file(self):
        path = os.path.join(tempfile.mkdtemp(prefix="pbtest-"), "no-such-file.csv")
        self.addCleanup(os.rmdir, os.path.dirname(path))
        self.assertFalse(os.path.exists(path))
        self.assert_error(EXIT_INPUT, ["analyze", path], f"cannot open '{path}'",
                          "no such file")

    def test_options_before_and_after_the_file(self):
        path = self.temp(make_log())
        rc1, out1, err1 = pb("analyze", "--json", "--cells", "5", "--chemistry", "lipo", path)
        rc2, out2, err2 = pb("analyze", path, "--cells", "5", "--json", "--chemistry", "lipo")
        self.assertEqual((rc1, rc2), (0, 0), err1 + err2)
        d1, d2 = json.loads(out1), json.loads(out2)
        self.assertEqual(d1["cells"], 5)
        self.assertEqual(d1["cells_source"], d2["cells_source"])
        self.assertFalse(d1["chemistry_assumed"])
        self.assertEqual(d1, d2)

    def test_stdin(self):
        text = self.set_field(make_log(), 11, 2, "abc").encode()
        rc, out, err = pb("analyze", "-", "--json", stdin=text)
        self.assertEqual(rc, 0, err)
        doc = json.loads(out)
        self.assertEqual(doc["file"], "(stdin)")
        self.assert_counted(doc, "dropped_bad_number", 1, "(stdin)", 11, 2)
        self.assert_input(doc, N, N - 1, 1)

    def test_stdin_empty(self):
        self.assert_error(EXIT_INPUT, ["analyze", "-"], "(stdin)", "empty", stdin=b"")


if __name__ == "__main__":
    unittest.main()
