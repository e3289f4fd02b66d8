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



def run_bytes(*args, stdin=None):
    """packbook with arguments given as bytes where they are not text (a Latin-1 name)."""
    argv = [a if isinstance(a, bytes) else str(a).encode() for a in args]
    p = subprocess.run([pbtest.PACKBOOK.encode(), *argv], input=stdin, capture_output=True,
                       timeout=120)
    strict = b"--json" in argv  # JSON must be UTF-8; text output is checked elsewhere
    return (p.returncode, p.stdout.decode("utf-8", "strict" if strict else "replace"),
            p.stderr.decode("utf-8", "replace"))


class TextThatIsNotUtf8(unittest.TestCase):
    """Item 2: JSON dropped records whose stored text was not valid UTF-8 (`pack list --json`
    printed [] and exit 0). RFC 8259 section 8.1: JSON text exchanged between systems is UTF-8;
    the replacement character is U+FFFD. Python's json and bytes.decode('utf-8') (strict) are
    the references here: every document must parse and every string decode strictly."""

    def test_latin1_file_name_is_kept_as_a_flight(self):
        db = temp_db()
        add_pack(db)
        d = pbtest.temp_dir("pbtest-latin1-")
        log = os.path.join(d.encode(), b"vol_\xe9t\xe9.csv")  # "vol_ete" in Latin-1
        with open(log, "wb") as f:
            f.write(plain_log().encode())
        rc, out, err = run_bytes("import", "--pack", "P1", "--date", "2026-05-01", "--db", db, log)
        self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = run_bytes("pack", "show", "P1", "--json", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        doc = json.loads(out)
        self.assertEqual(len(doc["flights"]), 1)
        self.assertEqual(doc["health"]["flights"], 1)
        self.assertTrue(doc["flights"][0]["source"].endswith("vol_\ufffdt\ufffd.csv"))
        rc, out, err = run_bytes("analyze", log, "--json")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertTrue(json.loads(out)["file"].endswith("vol_\ufffdt\ufffd.csv"))

    def test_input_text_refused_not_cut(self):
        db = temp_db()
        base = ("pack", "add", "P2", "--cells", 4, "--chemistry", "lipo", "--capacity", 5000,
                "--db", db)
        for extra, why in (((b"--note", b"caf\xe9"), "--note: not valid UTF-8"),
                           ((b"--note", ("\u00e9" * 128).encode()), "--note: 256 bytes, at most 255"),
                           ((), None)):
            rc, out, err = run_bytes(*base, *extra)
            if why:
                self.assertEqual(rc, EXIT_USAGE, err)
                self.assertIn(why, err)
            else:
                self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = run_bytes("pack", "add", b"P\xe9", "--cells", 4, "--chemistry", "lipo",
                                 "--capacity", 5000, "--db", db)
        self.assertEqual(rc, EXIT_USAGE, err)
        self.assertIn("the ID: not valid UTF-8", err)
        rc, out, err = run("pack", "retire", "P2", "--reason", "x" * 120000, "--db", db)
        self.assertEqual(rc, EXIT_USAGE, err)
        self.assertIn("--reason: 120000 bytes, at most 255", err)
        # 255 bytes of 2-byte characters and one ASCII byte fit exactly
        note = "\u00e9" * 127 + "x"
        rc, out, err = run("pack", "add", "P3", "--cells", 4, "--chemistry", "lipo",
                           "--capacity", 5000, "--note", note, "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = run("pack", "show", "P3", "--json", "--db", db)
        self.assertEqual(json.loads(out)["note"], note, "kept whole")

    def test_text_written_by_an_older_packbook(self):
        # what an older packbook stored: a note cut mid-character at 255 bytes, a 120,000-byte
        # reason, a Latin-1 pack label
        db = temp_db()
        add_pack(db, "P1")
        add_pack(db, "P2")
        log = write_temp(plain_log())
        rc, out, err = run("import", "--pack", "P1", "--date", "2026-05-01", "--db", db, log)
        self.assertEqual(rc, EXIT_OK, err)
        con = sqlite3.connect(db)
        cut = ("\u00e9" * 128).encode()[:255]
        con.execute("UPDATE packs SET note = CAST(? AS TEXT) WHERE label = 'P1'", (cut,))
        con.execute("UPDATE packs SET retired_at = '2026-06-01T00:00:00Z', "
                    "retire_reason = ? WHERE label = 'P2'", ("r" * 120000,))
        con.execute("UPDATE packs SET label = CAST(? AS TEXT) WHERE label = 'P2'",
                    (b"P\xe92",))
        con.commit()
        con.close()
        rc, out, err = run_bytes("pack", "list", "--json", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        packs = json.loads(out)
        self.assertEqual(len(packs), 2, "no pack dropped")
        # the stray byte becomes U+FFFD (3 bytes), which no longer fits: cut, and marked
        self.assertEqual(packs[0]["note"], "\u00e9" * 126 + "\u2026")
        self.assertEqual(packs[1]["id"], "P\ufffd2")
        reason = packs[1]["retire_reason"]
        self.assertTrue(reason.endswith("\u2026"), "a cut text says so")
        self.assertLessEqual(len(reason.encode()), 255)
        rc, out, err = run_bytes("pack", "show", "P1", "--json", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        doc = json.loads(out)
        self.assertEqual((len(doc["flights"]), doc["health"]["flights"]), (1, 1))
        rc, out, err = run_bytes("fleet", "--all", "--json", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        fleet = json.loads(out)
        self.assertEqual(len(fleet), 2)
        for p in fleet:
            self.assertIn("status", p)
            self.assertIn("reason", p)
        self.assertEqual([p["status"] for p in fleet if p["id"] == "P\ufffd2"], ["retired"])



class Outputs(unittest.TestCase):
    """Item 4: `analyze --series` used a plain fopen("w"): it followed a symlink onto another
    file and `--series LOG` replaced the input; two outputs with one name lost one; temporary
    files were left behind by SIGINT/SIGTERM."""

    def setUp(self):
        self.d = pbtest.temp_dir("pbtest-out-")
        self.log = os.path.join(self.d, "log.csv")
        with open(self.log, "w") as f:
            f.write(plain_log())
        with open(self.log, "rb") as f:
            self.log_bytes = f.read()

    def assert_refused(self, args, *contains):
        rc, out, err = run(*args)
        self.assertEqual(rc, EXIT_USAGE, err)
        for c in contains:
            self.assertIn(c, err)
        with open(self.log, "rb") as f:
            self.assertEqual(f.read(), self.log_bytes, "the input is unchanged")
        self.assertEqual([n for n in os.listdir(self.d) if n != "log.csv"], [],
                         "nothing written")

    def test_series_onto_the_input(self):
        self.assert_refused(("analyze", self.log, "--series", self.log), "is the input")
        # the same file by another spelling and through a link
        spelled = os.path.join(self.d, ".", "log.csv")
        self.assert_refused(("analyze", self.log, "--series", spelled), "is the input")
        link = os.path.join(pbtest.temp_dir("pbtest-link-"), "l.csv")
        os.symlink(self.log, link)
        self.assert_refused(("analyze", self.log, "--series", link), "is the input")

    def test_two_outputs_with_one_name(self):
        a = os.path.join(self.d, "a.png")
        self.assert_refused(("analyze", self.log, "--series", a, "--plot", a), "same file")
        self.assert_refused(("plot", self.log, "-o", a, "--axes-json", a), "same file")
        self.assert_refused(("plot", self.log, "-o", self.log.replace(".csv", ".png"),
                             "--axes-json", self.log), "is the input")

    def test_a_symlink_at_the_output_is_replaced_not_followed(self):
        victim = os.path.join(pbtest.temp_dir("pbtest-victim-"), "precious.txt")
        with open(victim, "w") as f:
            f.write("keep me\n")
        link = os.path.join(self.d, "series.csv")
        os.symlink(victim, link)
        rc, out, err = run("analyze", self.log, "--series", link)
        self.assertEqual(rc, EXIT_OK, err)
        with open(victim) as f:
            self.assertEqual(f.read(), "keep me\n")
        self.assertFalse(os.path.islink(link))
        with open(link) as f:
            self.assertTrue(f.readline().startswith("time_s,voltage_v"))

    def test_temporary_files_removed_on_a_signal(self):
        import signal
        import time
        big = os.path.join(self.d, "big.csv")
        steps = (5.0, 30.0, 12.0, 25.0, 8.0)
        with open(big, "w") as f:
            f.write("time_s,voltage_v,current_a\n")
            for k in range(400000):
                i = steps[(k // 20) % 5]
                f.write(f"{k / 10:.1f},{16.6 - 0.00001 * k - 0.012 * i:.4f},{i:.2f}\n")
        caught = 0
        for sig, cmd in ((signal.SIGINT, "analyze"), (signal.SIGTERM, "analyze"),
                         (signal.SIGINT, "plot"), (signal.SIGTERM, "plot")):
            with self.subTest(sig=sig, cmd=cmd):
                if cmd == "analyze":
                    out = os.path.join(self.d, f"series-{int(sig)}.csv")
                    args = ["analyze", big, "--series", out]
                else:
                    out = os.path.join(self.d, f"figure-{int(sig)}.png")
                    args = ["plot", big, "-o", out]
                p = subprocess.Popen([pbtest.PACKBOOK, *args],
                                     stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
                seen, deadline = False, time.time() + 60
                while p.poll() is None and time.time() < deadline:
                    if any(".tmp-" in n for n in os.listdir(self.d)):
                        seen = True
                        p.send_signal(sig)
                        break
                    time.sleep(0.0005)
                p.communicate(timeout=60)
                if not seen:
                    continue  # the run ended before its temporary file was seen
                caught += 1
                self.assertEqual(p.returncode, -sig, "ended by the signal")
                self.assertEqual([n for n in os.listdir(self.d) if ".tmp-" in n], [],
                                 "no temporary file left")
                self.assertFalse(os.path.exists(out), "no half output")
        self.assertGreater(caught, 0, "no run was caught while writing: nothing was checked")



class LockWaits(unittest.TestCase):
    """Item 5: with another process holding a write lock, import waited 424 s in silence
    (8 retries of ~53 s) and then blamed "another packbook". Now: one bounded wait (--wait S,
    default 60 s, man packbook), a line on a terminal after a few seconds, and a message that
    does not guess who holds the lock. The lock is held by Python's sqlite3 module."""

    def locked_db(self):
        db = temp_db()
        add_pack(db)
        con = sqlite3.connect(db, isolation_level=None, check_same_thread=False)
        con.execute("BEGIN IMMEDIATE")  # the write lock, as any SQLite writer takes it
        self.addCleanup(con.close)
        return db, con

    def test_bounded_wait_and_its_message(self):
        import time
        db, con = self.locked_db()
        log = write_temp(plain_log())
        t0 = time.monotonic()
        rc, out, err = run("import", "--pack", "P1", "--wait", 2, "--date", "2026-05-01",
                           "--db", db, log)
        took = time.monotonic() - t0
        self.assertEqual(rc, EXIT_STORE, err)
        self.assertIn("locked", err)
        self.assertIn("2 s", err)
        self.assertIn("--wait", err)
        self.assertNotIn("another packbook", err, "who holds the lock is not known")
        # 2 s of waiting plus start-up; far from 8 x 53 s (tolerance: 15 s for slow builds)
        self.assertGreaterEqual(took, 2.0)
        self.assertLess(took, 15.0)
        for args in (("pack", "add", "P2", "--cells", 4, "--chemistry", "lipo", "--capacity",
                      5000, "--wait", 1),
                     ("pack", "retire", "P1", "--reason", "x", "--wait", 1)):
            with self.subTest(args=args):
                rc, out, err = run(args[0], "--db", db, *args[1:])
                self.assertEqual(rc, EXIT_STORE, err)
                self.assertIn("locked", err)
        con.execute("ROLLBACK")
        rc, out, err = run("import", "--pack", "P1", "--wait", 2, "--date", "2026-05-01",
                           "--db", db, log)
        self.assertEqual(rc, EXIT_OK, err)

    def test_wait_is_said_on_a_terminal_and_then_the_import_goes_on(self):
        import pty
        import threading
        import time
        db, con = self.locked_db()
        log = write_temp(plain_log())
        threading.Timer(5.0, lambda: con.execute("ROLLBACK")).start()
        master, slave = pty.openpty()
        t0 = time.monotonic()
        p = subprocess.Popen([pbtest.PACKBOOK, "import", "--pack", "P1", "--date", "2026-05-01",
                              "--db", db, log], stdout=subprocess.PIPE, stderr=slave)
        os.close(slave)
        out, _ = p.communicate(timeout=60)
        took = time.monotonic() - t0
        said = b""
        while True:
            try:
                chunk = os.read(master, 4096)
            except OSError:
                break
            if not chunk:
                break
            said += chunk
        os.close(master)
        self.assertEqual(p.returncode, EXIT_OK, said)
        self.assertIn(b"1 imported", out)
        self.assertIn("waiting for the database lock".encode(), said)
        self.assertGreaterEqual(took, 4.5)

    def test_no_line_when_not_a_terminal(self):
        db, con = self.locked_db()
        rc, out, err = run("pack", "add", "P3", "--cells", 4, "--chemistry", "lipo",
                           "--capacity", 5000, "--wait", 4, "--db", db)
        self.assertEqual(rc, EXIT_STORE, err)
        self.assertNotIn("waiting for", err)
        self.assertEqual(err.count("\n"), 1, "one message")

    def test_wait_value_checked(self):
        db = temp_db()
        for bad in ("-1", "1e9", "0x10", "soon"):
            rc, out, err = run("pack", "add", "P1", "--cells", 4, "--chemistry", "lipo",
                               "--capacity", 5000, "--wait", bad, "--db", db)
            self.assertEqual(rc, EXIT_USAGE, f"--wait {bad}: {err}")



class TerminalInjection(unittest.TestCase):
    """Item 6: control characters in IDs, notes and file names reached the terminal raw (an
    OSC sequence ESC ] 0 ; title BEL retitles the window; ECMA-48 for the C0/C1 ranges) and
    newlines broke tables. Text output escapes them (\\e, \\n, \\xHH); JSON keeps the text as
    given (its own escaping is safe)."""

    OSC = "\x1b]0;pwned\x07"

    @staticmethod
    def raw_controls(text):
        return [c for c in text if (ord(c) < 0x20 and c not in "\n") or 0x7f <= ord(c) < 0xa0]

    def test_ids_notes_reasons_in_every_text_view(self):
        db = temp_db()
        label = "TM" + self.OSC
        rc, out, err = run("pack", "add", label, "--cells", 4, "--chemistry", "lipo",
                           "--capacity", 5000, "--note", "line1\nline2\x1b[2J", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("TM\\e]0;pwned\\x07", out)
        log = write_temp(plain_log())
        rc, out, err = run("import", "--pack", label, "--date", "2026-05-01", "--db", db, log)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(self.raw_controls(out + err), [], out)
        views = [("pack", "list"), ("pack", "show", label), ("fleet",), ("trend", label),
                 ("compare", label, label), ("predict", label)]
        for args in views:
            with self.subTest(args=args):
                rc, out, err = run(args[0], *args[1:], "--db", db)
                self.assertEqual(rc, EXIT_OK, err)
                self.assertEqual(self.raw_controls(out + err), [], out)
                self.assertIn("TM\\e]0;pwned\\x07", out)
        rc, out, err = run("pack", "show", label, "--db", db)
        self.assertIn("note: line1\\nline2\\e[2J\n", out, "the note stays on its line")
        rc, out, err = run("pack", "list", "--db", db)
        self.assertEqual(len(out.strip().split("\n")), 2, "header and one row")
        rc, out, err = run("pack", "retire", label, "--reason", "swollen\x1b[31m", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertIn("swollen\\e[31m", out)
        rc, out, err = run("pack", "show", label, "--json", "--db", db)
        doc = json.loads(out)
        self.assertEqual((doc["id"], doc["retire_reason"]), (label, "swollen\x1b[31m"))

    def test_file_names_and_messages(self):
        d = pbtest.temp_dir("pbtest-esc-")
        path = os.path.join(d, "log\x1b]0;x\x07.csv")
        with open(path, "w") as f:
            f.write(plain_log())
        rc, out, err = run("analyze", path)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(self.raw_controls(out + err), [])
        self.assertIn("log\\e]0;x\\x07.csv", out)
        rc, out, err = run("analyze", path + "\x9b")  # a C1 CSI in a missing file's name
        self.assertEqual(rc, EXIT_INPUT, err)
        self.assertEqual(self.raw_controls(err), [], err)
        self.assertIn("\\u009b", err)

    def test_csv_neutraliser_sees_past_what_a_spreadsheet_skips(self):
        db = temp_db()
        # OWASP CSV injection guidance (common practice): a cell starting = + - @ (or tab, CR)
        # is a formula; spreadsheets also skip leading spaces, line breaks and zero-width
        # characters before the sign
        labels = [" =1+1", "\n=cmd", "\u200b=HYPERLINK(1)", "\ufeff@x", "\u00a0+1", "\t-1",
                  "plain"]
        for lab in labels:
            add_pack(db, lab)
        rc, out, err = run("fleet", "--csv", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        import csv
        import io
        got = {r[0] for r in list(csv.reader(io.StringIO(out)))[1:]}
        want = {"'" + lab if lab != "plain" else lab for lab in labels}
        self.assertEqual(got, want)



class SmallOnes(unittest.TestCase):
    """Item 8: the smaller holes."""

    LOG = os.path.join(pbtest.ROOT, "samples", "tm07-plain.csv")
    PACK = ("--cells", 4, "--chemistry", "lipo", "--capacity", 5000)

    def test_no_load_is_refused(self):
        # --power 0 printed "SAFE TIME 360 min ... SoC 0 %, 0.00 V"
        for opt, v in (("--power", "0"), ("--power", "-5"), ("--current", "0"), ("--power", "-0")):
            with self.subTest(opt=opt, v=v):
                rc, out, err = run("predict", "--log", self.LOG, *self.PACK, opt, v)
                self.assertEqual(rc, EXIT_USAGE, err)
                self.assertEqual(out, "")
        db = temp_db()
        add_pack(db)
        rc, out, err = run("fleet", "--predict", "--power", 0, "--db", db)
        self.assertEqual(rc, EXIT_USAGE, err)

    def test_given_load_has_no_spread(self):
        # the load's spread was read from an uninitialised field ("sd": 6.9e-310); a load given
        # as an option is exact: its sd is 0, and the Monte Carlo spread comes from capacity
        # and R0 only, the same on every run (seeded)
        docs = []
        for _ in range(2):
            rc, out, err = run("predict", "--log", self.LOG, *self.PACK, "--power", 300,
                               "--json")
            self.assertEqual(rc, EXIT_OK, err)
            docs.append(json.loads(out))
        self.assertEqual(docs[0]["inputs"]["load"]["sd"], 0.0)
        self.assertEqual(docs[0]["safe_time_s"], docs[1]["safe_time_s"])

    def test_runs_and_for_have_upper_bounds(self):
        # a run with --runs 100000 took 205 s
        for args in (("--runs", 100000), ("--runs", 5001), ("--for", "1e6"), ("--for", 21601)):
            with self.subTest(args=args):
                rc, out, err = run("predict", "--log", self.LOG, *self.PACK, "--power", 300,
                                   *args)
                self.assertEqual(rc, EXIT_USAGE, err)
                self.assertIn(str(args[0]), err)

    def test_utf16_log_is_named_as_such(self):
        # UTF-16 (RFC 2781): with a byte-order mark, and little-endian without one
        text = plain_log(40)
        for enc, data in (("utf-16", text.encode("utf-16")),
                          ("utf-16-le", text.encode("utf-16-le")),
                          ("utf-16-be", text.encode("utf-16-be"))):
            with self.subTest(enc=enc):
                path = write_temp(data, mode="wb")
                rc, out, err = run("analyze", path)
                self.assertEqual(rc, EXIT_INPUT, err)
                self.assertIn("UTF-16", err)
                self.assertIn("convert it to UTF-8", err)
                self.assertNotIn("NUL byte", err)

    def test_folder_and_named_pipe_as_a_log(self):
        d = pbtest.temp_dir("pbtest-notlog-")
        rc, out, err = run("analyze", d)
        self.assertEqual(rc, EXIT_INPUT, err)
        self.assertIn("is a folder, not a log", err)
        self.assertNotIn("read error", err)
        fifo = os.path.join(d, "pipe.csv")
        os.mkfifo(fifo)
        # no writer: it used to block for ever in open(); now it reads as empty at once
        rc, out, err = run("analyze", fifo, timeout=20)
        self.assertEqual(rc, EXIT_INPUT, err)
        self.assertIn("empty", err)
        # a pipe with a writer (what `<(command)` gives) is read as before
        r, w = os.pipe()
        p = subprocess.Popen([pbtest.PACKBOOK, "analyze", f"/dev/fd/{r}", "--json"],
                             pass_fds=(r,), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        os.close(r)
        with os.fdopen(w, "w") as f:
            f.write(plain_log())
        out, err = p.communicate(timeout=60)
        self.assertEqual(p.returncode, EXIT_OK, err)
        self.assertEqual(json.loads(out)["samples"], 200)

    def test_no_room_to_write_is_said(self):
        # a full disk reached the user as "disk I/O error" with no hint. A file-size limit
        # (RLIMIT_FSIZE, SIGXFSZ ignored: writes fail with EFBIG) stands in for a full disk.
        import resource
        import signal

        def limited(nbytes):
            def f():
                signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
                resource.setrlimit(resource.RLIMIT_FSIZE, (nbytes, nbytes))
            return f
        db = temp_db()
        add_pack(db)
        p = subprocess.run([pbtest.PACKBOOK, "import", "--pack", "P1", "--date", "2026-01-01",
                            "--db", db, self.LOG], preexec_fn=limited(8192),
                           capture_output=True, text=True)
        self.assertEqual(p.returncode, EXIT_STORE, p.stderr)
        self.assertIn("disk full, or a file-size limit reached", p.stderr)
        rc, out, err = run("pack", "show", "P1", "--json", "--db", db)
        self.assertEqual(json.loads(out)["flights"], [], "nothing half-stored")
        d = pbtest.temp_dir("pbtest-full-")
        series = os.path.join(d, "s.csv")
        p = subprocess.run([pbtest.PACKBOOK, "analyze", self.LOG, "--series", series],
                           preexec_fn=limited(20000), capture_output=True, text=True)
        self.assertEqual(p.returncode, 5, p.stderr)
        self.assertIn("disk full, or a file-size limit reached", p.stderr)
        self.assertEqual(os.listdir(d), [], "no half file, no temporary file")

    def test_hex_is_not_a_number(self):
        for v in ("0x10", "0X1p3", "inf", "nan"):
            with self.subTest(v=v):
                rc, out, err = run("predict", "--log", self.LOG, *self.PACK, "--power", v)
                self.assertEqual(rc, EXIT_USAGE, err)
                rc, out, err = run("analyze", self.LOG, "--capacity", v)
                self.assertEqual(rc, EXIT_USAGE, err)


if __name__ == "__main__":
    unittest.main(verbosity=2)
