"""The history store's backends for the CLI tests: one class per backend with the same few
operations (a fresh database, a query, whether it is whole), so a test written once runs
against an SQLite file and a PostgreSQL database alike.

PostgreSQL comes from PACKBOOK_TEST_PG, a libpq connection string for a superuser of a
throwaway cluster (tests/pg/cluster sets it); without it the PostgreSQL cases are skipped and
say why. Queries go through Debian's psql, so the tests need no Python driver.
"""
import os
import re
import shlex
import sqlite3
import subprocess
import tempfile
import time

PG_ADMIN = os.environ.get("PACKBOOK_TEST_PG", "")
PG_SKIP = ("no PostgreSQL cluster (PACKBOOK_TEST_PG unset: run the tests through "
           "tests/pg/cluster, as 'sh scripts/bootstrap test' does)")


class Sqlite:
    name = "sqlite"

    def __init__(self, scratch):
        self.scratch = scratch

    def fresh(self, label):
        """A database argument for a new, empty history."""
        d = tempfile.mkdtemp(prefix=f"{label}-", dir=self.scratch)
        return os.path.join(d, "h.db")

    def query(self, db, sql):
        con = sqlite3.connect(db, timeout=30)
        try:
            rows = [tuple(r) for r in con.execute(sql).fetchall()]
            con.commit()  # a change made here is kept, as psql's is
            return rows
        finally:
            con.close()

    def integrity(self, db):
        """Problems the database itself reports (empty when whole)."""
        bad = [r for r in self.query(db, "PRAGMA integrity_check") if r != ("ok",)]
        return bad + self.query(db, "PRAGMA foreign_key_check")


def pg_conninfo(base, **over):
    """base (key=value form) with keywords replaced or added."""
    parts = dict(kv.split("=", 1) for kv in shlex.split(base))
    parts.update({k: str(v) for k, v in over.items()})
    return " ".join(f"{k}={v}" for k, v in parts.items())


class Postgres:
    name = "postgresql"
    _n = 0

    def __init__(self, scratch):
        self.scratch = scratch

    @staticmethod
    def admin(sql, db=None):
        """Runs sql as the cluster's superuser (psql); returns rows of strings."""
        conn = pg_conninfo(PG_ADMIN, dbname=db) if db else PG_ADMIN
        p = subprocess.run(["psql", "-X", "-q", "-At", "-F", "\t", "-v", "ON_ERROR_STOP=1",
                            "-c", sql, conn], capture_output=True, text=True, timeout=120)
        if p.returncode != 0:
            raise AssertionError(f"psql failed: {sql}\n{p.stderr}")
        return [tuple(line.split("\t")) for line in p.stdout.splitlines() if line != ""]

    def fresh(self, label):
        Postgres._n += 1
        name = re.sub(r"[^a-z0-9_]", "_", f"pb_{label}_{os.getpid()}_{Postgres._n}".lower())
        self.admin(f"CREATE DATABASE {name}")
        return pg_conninfo(PG_ADMIN, dbname=name)

    @staticmethod
    def dbname(db):
        return dict(kv.split("=", 1) for kv in shlex.split(db))["dbname"]

    def query(self, db, sql):
        rows = self.admin(sql, self.dbname(db))
        return [tuple(_num(v) for v in r) for r in rows]

    def integrity(self, db):
        # the foreign keys are enforced by the server; rows no key protects are checked here
        return self.query(db, "SELECT 'flight without report', f.id FROM flights f LEFT JOIN "
                              "flight_reports r ON r.flight_id = f.id WHERE r.flight_id IS NULL")


def _num(v):
    try:
        return int(v)
    except ValueError:
        try:
            return float(v)
        except ValueError:
            return v


def backends(scratch):
    """The backends to test here: SQLite always, PostgreSQL when a cluster was given."""
    out = [Sqlite(scratch)]
    if PG_ADMIN:
        out.append(Postgres(scratch))
    return out


def pg_ctl(*args):
    """The throwaway cluster's pg_ctl (stop / start), as tests/pg/cluster exported it."""
    cmd = shlex.split(os.environ["PB_PG_CTL"])
    if args and args[0] == "start":
        cmd += [os.environ["PB_PG_OPTS"], "start"]
    else:
        cmd = [c for c in cmd[:-1]] + list(args)  # "-o" is only for start
    p = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    if p.returncode != 0:
        raise AssertionError(f"pg_ctl {args}: {p.stdout}{p.stderr}")
    time.sleep(0.2)
