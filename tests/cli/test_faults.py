#!/usr/bin/python3
"""History store under a full disk: a tiny tmpfs (mounted for the test, as
root; skipped with the reason when mounting is not allowed) fills up during an
import. packbook must stop with exit status 4 and a message saying the disk is
full, and the database must pass PRAGMA integrity_check holding only whole
flights (each with its report), none half-written.
"""
import os
import shutil
import sqlite3
import subprocess
import sys
import tempfile
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402


class DiskFull(unittest.TestCase):
    def setUp(self):
        self.mnt = tempfile.mkdtemp(prefix="pbfull-")
        # 192k: the new file with its schema steps (9 from schema 9) and WAL fits, and
        # three flights or so before the disk is full
        p = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=192k", "tmpfs", self.mnt],
                           capture_output=True, text=True)
        if p.returncode != 0:
            os.rmdir(self.mnt)
            self.skipTest(f"cannot mount a small tmpfs here: {p.stderr.strip()}")

    def tearDown(self):
        # lazy as a last resort, so a failed assertion cannot leave the mount behind
        if subprocess.run(["umount", self.mnt], capture_output=True).returncode != 0:
            subprocess.run(["umount", "-l", self.mnt], check=False)
        shutil.rmtree(self.mnt, ignore_errors=True)

    def test_disk_full_import(self):
        db = os.path.join(self.mnt, "history.db")
        rc, out, err = pbtest.run("pack", "add", "TM-09", "--cells", 4, "--chemistry", "lipo",
                                  "--capacity", 5000, "--db", db)
        self.assertEqual(rc, 0, err)
        src = os.path.join(pbtest.ROOT, "samples", "tm07-plain.csv")
        logs = []
        tmp = tempfile.mkdtemp(prefix="pbfull-logs-")
        for k in range(12):  # distinct samples: the last one's time moved k ms
            path = os.path.join(tmp, f"f{k:02d}.csv")
            with open(src) as f, open(path, "w") as g:
                lines = f.read().splitlines()
                last = lines[-1].split(",")
                last[0] = f"{float(last[0]) + 0.001 * k:.3f}"
                g.write("\n".join(lines[:-1] + [",".join(last)]) + f"\n# copy {k}\n")
            logs.append(path)
        rc, out, err = pbtest.run("import", "--pack", "TM-09", "--db", db, "--date", "2026-04-01",
                                  *logs)
        print(f"  exit {rc}; {out.strip().splitlines()[-1]}; {err.strip()}")
        self.assertEqual(rc, 4, "the store error status")
        self.assertIn("disk full", err)
        self.assertEqual(err.count("\n"), 1, "one message")
        c = sqlite3.connect(db)
        self.assertEqual(c.execute("PRAGMA integrity_check").fetchone()[0], "ok")
        n, whole = c.execute("SELECT count(*), sum(length(report_json) > 100) FROM flights f "
                             "LEFT JOIN flight_reports r ON r.flight_id = f.id").fetchone()
        stored = int(out.split(" imported")[0].split()[-1])
        self.assertGreater(n, 0, "some flights fitted before the disk filled")
        self.assertEqual(n, stored, "the summary counts what is in the database")
        self.assertEqual(whole, n, "every stored flight is whole")
        c.close()  # an open file would keep the tmpfs busy at umount
        shutil.rmtree(tmp)


class HandEdited(unittest.TestCase):
    def test_unknown_chemistry_in_the_database(self):
        # a pack row edited outside packbook: a clear store error, no crash
        db = os.path.join(pbtest.temp_dir("pbedit-"), "h.db")
        rc, out, err = pbtest.run("pack", "add", "TM-10", "--cells", 4, "--chemistry", "lipo",
                                  "--capacity", 5000, "--db", db)
        self.assertEqual(rc, 0, err)
        c = sqlite3.connect(db)
        c.execute("UPDATE packs SET chemistry = 'nicd'")
        c.commit()
        c.close()
        log = os.path.join(pbtest.ROOT, "samples", "tm07-plain.csv")
        rc, out, err = pbtest.run("import", "--pack", "TM-10", "--db", db, log)
        self.assertEqual(rc, 4, err)
        self.assertIn("unknown chemistry 'nicd'", err)
        rc, out, err = pbtest.run("predict", "TM-10", "--db", db)
        self.assertIn(rc, (2, 4), err)


if __name__ == "__main__":
    unittest.main(verbosity=2)
