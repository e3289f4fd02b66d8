#!/usr/bin/python3
"""The settings file and 'packbook config': what is in force and where it came from.

What each check is measured against:
  - the precedence the man page states (FILES): an option given on the command line, then
    $PACKBOOK_DB (for the database), then the settings file, then the built-in default;
  - the retirement rule as the man page defines it (retire when capacity is at or below the
    level, % of rated): the status fleet --json reports must follow the level in force,
    checked against each pack's own capacity_pct;
  - predict's inputs echo the landing reserve it used (JSON inputs.reserve_pct), exactly.
Logs are simulated by scripts/pbsim.py (seeded), invented packs.

Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_config.py -v
"""
import json
import os
import sqlite3
import subprocess
import sys
import unittest

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402

EXIT_OK, EXIT_USAGE = 0, 2
SCRATCH = pbtest.temp_dir("pbconfig-")
LOG = os.path.join(SCRATCH, "flight.csv")


def setUpModule():
    p = subprocess.run([pbtest.PY, pbtest.PBSIM, "--packbook", pbtest.PACKBOOK, "--seed", "901",
                        "--format", "epoch", "--start-epoch", "1775030400",
                        "--capacity-mah", "4500", "-o", LOG],  # 90 % of the 5000 rated
                       capture_output=True, text=True)
    assert p.returncode == 0, p.stderr


def go(home, *args, env=None):
    """packbook with HOME and XDG folders under home, the settings file at the XDG place."""
    e = {k: v for k, v in os.environ.items()
         if k not in ("PACKBOOK_DB", "PACKBOOK_CONFIG", "XDG_CONFIG_HOME", "XDG_DATA_HOME")}
    e.update({"HOME": home, "XDG_CONFIG_HOME": os.path.join(home, "cfg"),
              "XDG_DATA_HOME": os.path.join(home, "data")})
    e.update(env or {})
    p = subprocess.run([pbtest.PACKBOOK, *map(str, args)], env=e, capture_output=True, text=True)
    return p.returncode, p.stdout, p.stderr


def write_config(home, text):
    d = os.path.join(home, "cfg", "packbook")
    os.makedirs(d, exist_ok=True)
    path = os.path.join(d, "config")
    with open(path, "w") as f:
        f.write(text)
    return path


def shown(out):
    """{key: (value, from)} of 'packbook config --json'."""
    return {s["key"]: (s["value"], s["from"]) for s in json.loads(out)["settings"]}


class Config(unittest.TestCase):
    def test_no_file_shows_the_defaults(self):
        home = pbtest.temp_dir("pbconfig-none-")
        rc, out, err = go(home, "config", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        s = shown(out)
        # defaults: man packbook (Retirement rules) and predict --help (30 %, common practice)
        self.assertEqual(s["retire-capacity"], ("80", "default"))
        self.assertEqual(s["retire-r0-ratio"], ("2", "default"))
        self.assertEqual(s["retire-imbalance"], ("60", "default"))
        self.assertEqual(s["retire-overdischarge"], ("3", "default"))
        self.assertEqual(s["reserve"], ("30", "default"))
        self.assertEqual(s["db"], (os.path.join(home, "data", "packbook", "packbook.db"),
                                   "default"))

    def test_database_precedence(self):
        home = pbtest.temp_dir("pbconfig-db-")
        file_db, env_db, opt_db = (os.path.join(home, n) for n in ("file.db", "env.db", "opt.db"))
        path = write_config(home, f"# where the history lives\n\ndb = {file_db}\n")
        rc, out, err = go(home, "pack", "add", "TC-01", "--cells", 4, "--chemistry", "lipo",
                          "--capacity", 5000)
        self.assertEqual(rc, EXIT_OK, err)
        con = sqlite3.connect(file_db)
        self.assertEqual(con.execute("SELECT label FROM packs").fetchall(), [("TC-01",)])
        con.close()
        rc, out, err = go(home, "config", "--json")
        self.assertEqual(shown(out)["db"], (file_db, f"{path}:3"))
        rc, out, err = go(home, "config", "--json", env={"PACKBOOK_DB": env_db})
        self.assertEqual(shown(out)["db"], (env_db, "environment PACKBOOK_DB"))
        # the environment's database is the one read (a reading command names it and does
        # not create it: "no history yet", exit 4)
        rc, out, err = go(home, "pack", "list", env={"PACKBOOK_DB": env_db})
        self.assertEqual(rc, 4, err)
        self.assertIn(env_db, err)
        self.assertFalse(os.path.exists(env_db))
        rc, out, err = go(home, "config", "--json", "--db", opt_db, env={"PACKBOOK_DB": env_db})
        self.assertEqual(shown(out)["db"], (opt_db, "option"))
        # text form names the file and each source
        rc, out, err = go(home, "config")
        self.assertIn(f"settings file: {path}", out)
        self.assertRegex(out, r"db\s+" + file_db + r"\s+" + path + ":3")

    def test_retirement_level_from_the_file_and_overridden(self):
        home = pbtest.temp_dir("pbconfig-rules-")
        db = os.path.join(home, "h.db")
        rc, out, err = go(home, "pack", "add", "TC-02", "--cells", 4, "--chemistry", "lipo",
                          "--capacity", 5000, "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = go(home, "import", "--pack", "TC-02", "--db", db, LOG)
        self.assertEqual(rc, EXIT_OK, err)
        rc, out, err = go(home, "fleet", "--json", "--db", db)
        cap = json.loads(out)[0]["capacity_pct"]
        self.assertIsNotNone(cap)
        # a level just above the pack's capacity makes it retire; one just below does not
        above, below = cap + 0.5, cap - 3.0
        write_config(home, f"retire-capacity = {above:.1f}\n")
        rc, out, err = go(home, "fleet", "--json", "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(json.loads(out)[0]["status"], "retire")
        rc, out, err = go(home, "fleet", "--json", "--db", db, "--retire-capacity",
                          f"{below:.1f}")
        self.assertNotEqual(json.loads(out)[0]["status"], "retire", "the option wins")
        rc, out, err = go(home, "pack", "show", "TC-02", "--json", "--db", db)
        self.assertEqual(json.loads(out)["health"]["status"], "retire", "pack show too")

    def test_reserve(self):
        home = pbtest.temp_dir("pbconfig-reserve-")
        db = os.path.join(home, "h.db")
        go(home, "pack", "add", "TC-03", "--cells", 4, "--chemistry", "lipo", "--capacity", 5000,
           "--db", db)
        rc, out, err = go(home, "import", "--pack", "TC-03", "--db", db, LOG)
        self.assertEqual(rc, EXIT_OK, err)
        write_config(home, "reserve = 40\n")
        rc, out, err = go(home, "predict", "TC-03", "--json", "--runs", 20, "--db", db)
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(json.loads(out)["inputs"]["reserve_pct"], 40)
        rc, out, err = go(home, "predict", "TC-03", "--json", "--runs", 20, "--db", db,
                          "--reserve", 30)
        self.assertEqual(json.loads(out)["inputs"]["reserve_pct"], 30)

    def test_old_names_are_aliases(self):
        # the trade's word is cell imbalance; the old key and option still work
        home = pbtest.temp_dir("pbconfig-alias-")
        path = write_config(home, "retire-spread = 45\n")
        rc, out, err = go(home, "config", "--json")
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(shown(out)["retire-imbalance"], ("45", f"{path}:1"))
        for opt in ("--retire-spread", "--retire-imbalance"):
            rc, out, err = go(home, "config", "--json", opt, 50)
            self.assertEqual(shown(out)["retire-imbalance"], ("50", "option"), opt)

    def test_reading_defaults(self):
        # precedence (man packbook, FILES): option > the pack's remembered settings > the file >
        # the chemistry's default (LiPo 3.30 V, man packbook ANALYZE OPTIONS)
        home = pbtest.temp_dir("pbconfig-reading-")
        db = os.path.join(home, "h.db")
        path = write_config(home, "cut-off = 3.5\n# the ground station's export\n"
                                  "current-sign = discharge-positive\n")
        rc, out, err = go(home, "config", "--json")
        s = shown(out)
        self.assertEqual(s["cut-off"], ("3.5", f"{path}:1"))
        self.assertEqual(s["current-sign"], ("discharge-positive", f"{path}:3"))

        def floor(*args):
            rc, out, err = go(home, "analyze", LOG, "--json", *args)
            self.assertEqual(rc, EXIT_OK, err)
            return json.loads(out)["floor_v_per_cell"]

        self.assertEqual(floor("--cells", 4), 3.5, "the file's")
        self.assertEqual(floor("--cells", 4, "--cut-off", 3.2), 3.2, "the option's")
        go(home, "pack", "add", "TC-04", "--cells", 4, "--chemistry", "lipo", "--capacity", 5000,
           "--cut-off", 3.3, "--db", db)
        self.assertEqual(floor("--pack", "TC-04", "--db", db), 3.3, "the pack's")
        self.assertEqual(floor("--pack", "TC-04", "--db", db, "--floor", 3.1), 3.1)
        go(home, "pack", "edit", "TC-04", "--clear-settings", "--db", db)
        self.assertEqual(floor("--pack", "TC-04", "--db", db), 3.5, "the file's again")
        write_config(home, "")
        self.assertEqual(floor("--cells", 4), 3.3, "LiPo's own")
        # defaults that do not go together are refused where they are written
        path = write_config(home, "sense-ohm = 510\n")
        rc, out, err = go(home, "fleet")
        self.assertEqual(rc, EXIT_USAGE)
        self.assertIn(f"{path}: reading defaults: the sense chain needs all of", err)

    def test_malformed_file(self):
        home = pbtest.temp_dir("pbconfig-bad-")
        for text, line, phrase in (("reserve = 40\nbogus = 1\n", 2, "unknown key 'bogus'"),
                                   ("retire-capacity = lots\n", 1, "--retire-capacity"),
                                   ("just words\n", 1, "expected 'key = value'")):
            path = write_config(home, text)
            rc, out, err = go(home, "fleet")
            self.assertEqual(rc, EXIT_USAGE, err)
            self.assertIn(f"{path}:{line}: ", err)
            self.assertIn(phrase, err)
            self.assertEqual(out, "")
        # $PACKBOOK_CONFIG names another file
        other = os.path.join(home, "other.conf")
        with open(other, "w") as f:
            f.write("reserve = 35\n")
        rc, out, err = go(home, "config", "--json", env={"PACKBOOK_CONFIG": other})
        self.assertEqual(rc, EXIT_OK, err)
        self.assertEqual(shown(out)["reserve"], ("35", f"{other}:1"))


if __name__ == "__main__":
    unittest.main()
