#!/usr/bin/python3
"""The history store at fleet scale on either backend: 500 packs x 400 flights (200,000
flights), then the query plans of what fleet, trend, compare and import run (EXPLAIN: each
must reach flights through an index, never a scan of the whole table) and the time of
`fleet` (from the packs' kept assessments, and with --reassess from every flight), `db
migrate` (which assesses and keeps every pack once, as import does for the packs it changes),
`trend`, `compare`, a one-log `import` of a new log (stored, then its pack assessed and kept)
and of a stored one. A report, not a gate: exit status 1 only when a command failed or a plan
scans the flights table.

    store_scale.py --packbook EXE --tmp DIR [--packs 500] [--per-pack 400]
    sh tests/pg/cluster /usr/bin/python3 bench/store_scale.py --packbook EXE --tmp DIR \
        --backend postgresql            # the cluster's PACKBOOK_TEST_PG

The store is made by packbook itself (`pack add`, one real `import`, so the schema and the
report are packbook's own), then filled by copying that flight: SQLite rows through Python's
sqlite3, PostgreSQL rows through psql's COPY. Copies differ in content hash, date and figures.
"""
import argparse
import io
import os
import shlex
import sqlite3
import subprocess
import sys
import time

PYTHON = "/usr/bin/python3"
HERE = os.path.dirname(os.path.abspath(__file__))
REPEATS = int(os.environ.get("PB_BENCH_REPEATS", "3"))
FLIGHT_QUERIES = {
    # what each command asks of flights (store_sql.h, src/store/*.c), with sample values
    "fleet/trend/compare: a pack's flights":
        "SELECT * FROM flights WHERE pack_id = 7 ORDER BY flown_epoch_s, id",
    "fleet/trend/compare: a pack's cells":
        "SELECT c.* FROM flights f JOIN flight_cells c ON c.flight_id = f.id WHERE f.pack_id = 7 "
        "ORDER BY f.flown_epoch_s, f.id, c.cell",
    "fleet: a pack's acknowledgements":
        "SELECT a.* FROM flight_acks a JOIN flights f ON f.id = a.flight_id WHERE f.pack_id = 7 "
        "ORDER BY a.flight_id",
    "import: stored already? (content hash)":
        "SELECT f.id, p.label FROM flights f JOIN packs p ON p.id = f.pack_id "
        "WHERE f.content_hash = 'xxh128:0'",
    "import: the same bytes or samples":
        "SELECT f.id, p.label FROM flights f JOIN packs p ON p.id = f.pack_id "
        "WHERE f.content_hash = 'xxh128:0' OR ('x' != '' AND f.samples_hash = 'x') "
        "ORDER BY f.content_hash = 'xxh128:0' DESC LIMIT 1",
    "import: the same start time":
        "SELECT f.id, p.label FROM flights f JOIN packs p ON p.id = f.pack_id "
        "WHERE f.date_source = 'log' AND f.flown_epoch_s BETWEEN 1.7e9 - 1 AND 1.7e9 + 1 "
        "AND abs(f.duration_s - 600) <= 1 ORDER BY f.id LIMIT 1",
}


class Sqlite:
    def __init__(self, db):
        self.db = db

    def rows(self, sql):
        con = sqlite3.connect(self.db)
        try:
            out = con.execute(sql).fetchall()
            con.commit()
            return out
        finally:
            con.close()

    def plan(self, sql):
        lines = [r[-1] for r in self.rows("EXPLAIN QUERY PLAN " + sql)]
        # a full scan reads "SCAN f" / "SCAN flights" without an index
        full = any(ln.startswith("SCAN") and "INDEX" not in ln and
                   ("flights" in ln or ln.split()[1] in ("f",)) for ln in lines)
        return "; ".join(lines), full

    def fill(self, copies):
        con = sqlite3.connect(self.db)
        con.execute("PRAGMA synchronous=OFF")
        for table, cols, rows in copies():
            con.executemany(f"INSERT INTO {table} ({','.join(cols)}) VALUES "
                            f"({','.join('?' * len(cols))})", rows)
        con.commit()
        con.execute("ANALYZE")
        con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        con.close()

    def proto(self):
        con = sqlite3.connect(self.db)
        con.row_factory = sqlite3.Row
        try:
            f = dict(con.execute("SELECT * FROM flights").fetchone())
            p = dict(con.execute("SELECT * FROM packs").fetchone())
            r = con.execute("SELECT report_json FROM flight_reports").fetchone()[0]
            return f, p, r
        finally:
            con.close()


class Postgres:
    def __init__(self, db):
        self.db = db

    def psql(self, sql, stdin=None):
        p = subprocess.run(["psql", "-X", "-q", "-At", "-F", "\t", "-v", "ON_ERROR_STOP=1",
                            "-c", sql, self.db], input=stdin, capture_output=True, text=True)
        if p.returncode != 0:
            raise SystemExit(f"psql: {sql[:80]}: {p.stderr}")
        return [ln.split("\t") for ln in p.stdout.splitlines()]

    def rows(self, sql):
        return self.psql(sql)

    def plan(self, sql):
        lines = [r[0] for r in self.psql("EXPLAIN " + sql)]
        full = any("Seq Scan on flights" in ln or "Seq Scan on flight_cells" in ln
                   for ln in lines)
        return " / ".join(ln.strip() for ln in lines), full

    def fill(self, copies):
        for table, cols, rows in copies():
            buf = io.StringIO()
            for r in rows:
                buf.write("\t".join("\\N" if v is None else str(v).replace("\\", "\\\\")
                                    .replace("\t", "\\t").replace("\n", "\\n") for v in r))
                buf.write("\n")
            self.psql(f"\\copy {table} ({','.join(cols)}) FROM STDIN", stdin=buf.getvalue())
        self.psql("SELECT setval(pg_get_serial_sequence('flights', 'id'), max(id)) FROM flights")
        self.psql("SELECT setval(pg_get_serial_sequence('packs', 'id'), max(id)) FROM packs")
        self.psql("VACUUM ANALYZE")

    def proto(self):
        def one(table):
            cols = [r[0] for r in self.psql(
                f"SELECT column_name FROM information_schema.columns WHERE table_name = "
                f"'{table}' ORDER BY ordinal_position")]
            vals = self.psql(f"SELECT * FROM {table} LIMIT 1")[0]
            return {c: (None if v == "" else v) for c, v in zip(cols, vals)}
        r = self.psql("SELECT report_json FROM flight_reports LIMIT 1")[0][0]
        return one("flights"), one("packs"), r


def num(v):
    return None if v is None else float(v)


def timed(cmd, env):
    best = float("inf")
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        r = subprocess.run(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        if r.returncode != 0:
            raise SystemExit(f"FAILED (exit {r.returncode}): {' '.join(cmd)}\n{r.stderr.decode()}")
        best = min(best, time.perf_counter() - t0)
    return best


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--packbook", required=True)
    ap.add_argument("--tmp", required=True)
    ap.add_argument("--backend", choices=("sqlite", "postgresql"), default="sqlite")
    ap.add_argument("--packs", type=int, default=500)
    ap.add_argument("--per-pack", type=int, default=400)
    a = ap.parse_args()
    if a.backend == "sqlite":
        db = os.path.join(a.tmp, f"scale-{a.packs}x{a.per_pack}.db")
        if os.path.exists(db):
            os.unlink(db)
        B = Sqlite(db)
    else:
        admin = os.environ.get("PACKBOOK_TEST_PG")
        if not admin:
            raise SystemExit("store_scale: --backend postgresql needs PACKBOOK_TEST_PG "
                             "(run it through tests/pg/cluster)")
        name = f"scale_{os.getpid()}"
        Postgres(admin).psql(f"CREATE DATABASE {name}")
        parts = dict(kv.split("=", 1) for kv in shlex.split(admin))
        parts["dbname"] = name
        db = " ".join(f"{k}={v}" for k, v in parts.items())
        B = Postgres(db)
    env = dict(os.environ, PACKBOOK_DB=db)
    t0 = time.perf_counter()
    log = os.path.join(a.tmp, "scale-one.csv")
    subprocess.run([PYTHON, os.path.join(HERE, "gen_log.py"), "9000", log], check=True,
                   stdout=subprocess.DEVNULL)
    subprocess.run([a.packbook, "pack", "add", "P0000", "--cells", "4", "--chemistry", "lipo",
                    "--capacity", "5000"], check=True, env=env, stdout=subprocess.DEVNULL)
    subprocess.run([a.packbook, "import", "--pack", "P0000", "--date", "2026-01-01", "--quiet",
                    log], check=True, env=env, stdout=subprocess.DEVNULL)
    fproto, pproto, report = B.proto()
    B.rows("DELETE FROM flight_cells")
    B.rows("DELETE FROM flight_reports")
    B.rows("DELETE FROM flights")
    pcols = [c for c in pproto if c != "id"]
    fcols = [c for c in fproto]

    def copies():
        yield "packs", ["id"] + pcols, [[k + 1] + [pproto[c] if c != "label" else f"P{k:04d}"
                                                   for c in pcols] for k in range(1, a.packs)]
        rows, cells, reps = [], [], []
        fid = 0
        for pid in range(1, a.packs + 1):
            for j in range(a.per_pack):
                fid += 1
                r = dict(fproto, id=fid, pack_id=pid, content_hash=f"xxh128:{fid:032x}",
                         samples_hash=f"xxh128:{fid:032x}")
                r["flown_epoch_s"] = num(fproto["flown_epoch_s"]) + 86400.0 * j + pid
                for key, f in (("capacity_mah", 1 - 2e-4 * j), ("r0_mohm", 1 + 5e-4 * j),
                               ("charge_used_mah", 1 - 1e-4 * j)):
                    if r.get(key) is not None:
                        r[key] = num(r[key]) * f
                rows.append([r[c] for c in fcols])
                reps.append([fid, report])
                for c in range(1, 5):
                    cells.append([fid, c, 3.0 + 0.001 * j, 3.6, 3.9])
        yield "flights", fcols, rows
        yield "flight_reports", ["flight_id", "report_json"], reps
        yield "flight_cells", ["flight_id", "cell", "r0_mohm", "voltage_min_v",
                               "voltage_rest_v"], cells

    B.fill(copies)
    n = int(B.rows("SELECT count(*) FROM flights")[0][0])
    print(f"{a.backend} store: {n} flights over {a.packs} packs, made in "
          f"{time.perf_counter() - t0:.0f} s\n")
    print("| query | plan | full scan of flights |\n| --- | --- | --- |")
    scans = 0
    for what, sql in FLIGHT_QUERIES.items():
        plan, full = B.plan(sql)
        scans += full
        print(f"| {what} | {plan.replace('|', '/')} | {'YES' if full else 'no'} |")
    # the packs' kept assessments, as import keeps them pack by pack: once for the whole store
    t1 = time.perf_counter()
    subprocess.run([a.packbook, "db", "migrate"], check=True, env=env, stdout=subprocess.DEVNULL)
    migrate_s = time.perf_counter() - t1
    # a new flight into a pack of per_pack flights: stored, then the pack assessed and kept
    news = []
    with open(log) as f:
        lines = f.read().splitlines()
    for k in range(REPEATS):
        last = lines[-1].split(",")
        last[0] = f"{float(last[0]) + 0.001 * (k + 1):.3f}"
        news.append(os.path.join(a.tmp, f"scale-new-{k}.csv"))
        with open(news[-1], "w") as f:
            f.write("\n".join(lines[:-1] + [",".join(last)]) + "\n")
    new_s = []
    for path in news:
        t1 = time.perf_counter()
        subprocess.run([a.packbook, "import", "--pack", "P0007", "--date", "2026-01-01",
                        "--quiet", path], check=True, env=env, stdout=subprocess.DEVNULL)
        new_s.append(time.perf_counter() - t1)
    # flight list reads every flight through the store and only prints: the store's share
    res = [("fleet", timed([a.packbook, "fleet"], env)),
           ("fleet --reassess (every pack from its flights)",
            timed([a.packbook, "fleet", "--reassess"], env)),
           ("db migrate (every pack assessed and kept, once)", migrate_s),
           ("import (a new log: stored, its pack assessed and kept)", min(new_s)),
           ("flight list (every flight: the store's reads)",
            timed([a.packbook, "flight", "list", "--csv"], env)),
           ("trend (a pack)", timed([a.packbook, "trend", "P0007"], env)),
           ("compare (2 packs)", timed([a.packbook, "compare", "P0007", "P0008"], env)),
           ("import (a stored log again)", timed([a.packbook, "import", "--pack", "P0000",
                                                  "--date", "2026-01-01", "--quiet", log], env))]
    print(f"\n| {n} flights, {a.backend} | best of {REPEATS} (s) |\n| --- | ---: |")
    for what, t in res:
        print(f"| {what} | {t:.3f} |")
    t = res[0][1]
    print("\n| target | wanted | measured | |\n| --- | --- | ---: | --- |")
    print(f"| fleet time, {a.backend} | < 1 s | {t:.2f} s | {'PASS' if t < 1.0 else 'MISS'} |")
    print(f"| plans scanning flights | 0 | {scans} | {'PASS' if scans == 0 else 'MISS'} |")
    return 1 if scans else 0


if __name__ == "__main__":
    sys.exit(main())
