#!/usr/bin/python3
"""The history views at scale: a store of FLIGHTS flights (default 1,000,000) over packs of
1,000 flights each, then `fleet`, `plot fleet`, `compare` (two packs) and `predict ID`
timed with their peak RSS. A report, not a gate: exit status 1 only when a command failed.

    fleet_bench.py --packbook EXE --peakrss EXE --tmp DIR [--flights N]

`fleet` and `plot fleet` read each pack's kept assessment (schema 10); the store's rows are
copied in by plain SQL, so `db migrate` first assesses and keeps every pack (timed once, as is
one `fleet --reassess`, which assesses every pack from its flights).

The store is made by packbook itself (the schema, `pack add`, one real `import` so the
report JSON is packbook's own), then filled by copying that flight's row with SQLite: every
pack flies 1,000 flights a day apart with a capacity falling 0.02 % a flight and R0 rising,
each flight with its 4 cells' rows and the imported flight's report JSON (about 2.5 KB: in
flights.report_json up to schema 5, in flight_reports from schema 6).
Copies differ in their content hash, date and figures, which is all the views read.
"""
import argparse
import os
import sqlite3
import subprocess
import sys
import time

PYTHON = "/usr/bin/python3"
HERE = os.path.dirname(os.path.abspath(__file__))
PER_PACK = 1000
REPEATS = 2

TARGETS = [
    ("fleet time", "<= 2 s", 2.0, "s"),
    ("fleet peak RSS", "<= 100 MB", 100.0, "MB"),
]


def run(cmd, env, peakrss, tmp):
    rss_path = os.path.join(tmp, "rss")
    t0 = time.perf_counter()
    r = subprocess.run([peakrss, rss_path, *cmd], stdout=subprocess.DEVNULL,
                       stderr=subprocess.PIPE, env=env)
    dt = time.perf_counter() - t0
    if r.returncode != 0:
        print(f"FAILED (exit {r.returncode}): {' '.join(cmd)}\n{r.stderr.decode()[:2000]}",
              file=sys.stderr)
        return None
    with open(rss_path) as f:
        return dt, int(f.read().split()[0])  # KiB


def make_store(a, db, env):
    log = os.path.join(a.tmp, "fleet-one.csv")
    subprocess.run([PYTHON, os.path.join(HERE, "gen_log.py"), "9000", log], check=True,
                   stdout=subprocess.DEVNULL)
    npacks = max(2, a.flights // PER_PACK)
    # packs through packbook (its checks), in one go through SQLite after the first
    subprocess.run([a.packbook, "pack", "add", "P0000", "--cells", "4", "--chemistry", "lipo",
                    "--capacity", "5000"], check=True, env=env, stdout=subprocess.DEVNULL)
    subprocess.run([a.packbook, "import", "--pack", "P0000", "--date", "2026-01-01", "--quiet",
                    log], check=True, env=env, stdout=subprocess.DEVNULL)
    con = sqlite3.connect(db)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=OFF")
    cols = [r[1] for r in con.execute("PRAGMA table_info(flights)")]
    proto = dict(zip(cols, con.execute("SELECT * FROM flights").fetchone()))
    cell_cols = [r[1] for r in con.execute("PRAGMA table_info(flight_cells)")]
    pack_row = con.execute("SELECT * FROM packs").fetchone()
    pcols = [r[1] for r in con.execute("PRAGMA table_info(packs)")]
    # schema 6 keeps the report JSON in flight_reports; before, in flights.report_json
    has_reports = con.execute("SELECT count(*) FROM sqlite_master WHERE name = "
                              "'flight_reports'").fetchone()[0] > 0
    report = (con.execute("SELECT report_json FROM flight_reports").fetchone()[0]
              if has_reports else None)
    con.execute("DELETE FROM flight_cells")
    if has_reports:
        con.execute("DELETE FROM flight_reports")
    con.execute("DELETE FROM flights")
    base = dict(zip(pcols, pack_row))
    for k in range(1, npacks):
        row = dict(base, id=None, label=f"P{k:04d}")
        con.execute(f"INSERT INTO packs ({','.join(row)}) VALUES ({','.join('?' * len(row))})",
                    list(row.values()))
    pack_ids = [r[0] for r in con.execute("SELECT id FROM packs ORDER BY id")]
    fid = 0
    names = [c for c in cols if c != "id"]
    sql = f"INSERT INTO flights (id,{','.join(names)}) VALUES (?{',?' * len(names)})"
    csql = f"INSERT INTO flight_cells ({','.join(cell_cols)}) VALUES ({','.join('?' * len(cell_cols))})"
    rsql = "INSERT INTO flight_reports (flight_id, report_json) VALUES (?, ?)"
    for pid in pack_ids:
        rows, cells, reports = [], [], []
        for j in range(PER_PACK):
            fid += 1
            if fid > a.flights:
                break
            r = dict(proto)
            r["pack_id"] = pid
            r["content_hash"] = f"xxh128:{fid:032x}"
            r["flown_epoch_s"] = proto["flown_epoch_s"] + 86400.0 * j
            for key, f in (("capacity_mah", 1 - 2e-4 * j), ("r0_mohm", 1 + 5e-4 * j),
                           ("charge_used_mah", 1 - 1e-4 * j)):
                if r.get(key) is not None:
                    r[key] = r[key] * f
            rows.append([fid] + [r[c] for c in names])
            if has_reports:
                reports.append((fid, report))
            for c in range(1, 5):
                cells.append([fid, c, 3.0 + 0.001 * j, 3.6, 3.9][:len(cell_cols)])
        con.executemany(sql, rows)
        con.executemany(csql, cells)
        con.executemany(rsql, reports)
    con.commit()
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")  # the copies out of the WAL: half the disk
    con.close()
    return npacks


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--packbook", required=True)
    ap.add_argument("--peakrss", required=True)
    ap.add_argument("--tmp", required=True)
    ap.add_argument("--flights", type=int, default=1000000)
    a = ap.parse_args()
    db = os.path.join(a.tmp, f"fleet-{a.flights}.db")
    env = dict(os.environ, PACKBOOK_DB=db)
    res = {}
    if not os.path.exists(db):
        t0 = time.perf_counter()
        npacks = make_store(a, db, env)
        print(f"store: {a.flights} flights over {npacks} packs, "
              f"{os.path.getsize(db) / 1e6:.0f} MB, made in {time.perf_counter() - t0:.0f} s")
    # rows copied by plain SQL, as by another program, have no kept assessment: db migrate
    # assesses and keeps each pack that lacks a current one (import does it for the packs
    # it changes); on a store made here that is every pack
    for what, args in (("db migrate (packs without a current assessment)", ["db", "migrate"]),
                       ("fleet --reassess (every pack from its flights, once)",
                        ["fleet", "--reassess"])):
        got = run([a.packbook, *args], env, a.peakrss, a.tmp)
        if got is None:
            return 1
        res[what] = got
    cmds = [
        ("fleet", ["fleet"]),
        ("plot fleet", ["plot", "fleet", "-o", os.path.join(a.tmp, "fleet.png")]),
        ("compare (2 packs)", ["compare", "P0000", "P0001"]),
        ("predict (a pack)", ["predict", "P0001", "--power", "400"]),
    ]
    for what, args in cmds:
        best, peak = float("inf"), 0
        for _ in range(REPEATS):
            got = run([a.packbook, *args], env, a.peakrss, a.tmp)
            if got is None:
                return 1
            best, peak = min(best, got[0]), max(peak, got[1])
        res[what] = (best, peak)
    print(f"\n| {a.flights} stored flights | best of {REPEATS} (s) | peak RSS (MiB) |")
    print("| --- | ---: | ---: |")
    for what, (t, rss) in res.items():
        print(f"| {what} | {t:.3f} | {rss / 1024:.1f} |")
    t, rss = res["fleet"]
    print("\n| target | wanted | measured | |\n| --- | --- | ---: | --- |")
    for (what, wanted, limit, unit), got in zip(TARGETS, (t, rss / 1024)):
        shown = f"{got:.2f} s" if unit == "s" else f"{got:.0f} MiB"
        print(f"| {what} | {wanted} | {shown} | {'PASS' if got <= limit else 'MISS'} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
