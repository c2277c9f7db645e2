"""DuckDB on the same files as benches/store_scale.sh, as the peer of each
rchold step: load the log into a table (untyped CSV sniffing, as a user
would), yield per station straight from the CSV and from the Parquet
dataset. Prints `label seconds [bytes]` lines.

Usage: python3 benches/duckdb_peer.py LOG.csv DATASET WORKDIR
"""

import os
import sys
import time

import duckdb

log, dataset, work = sys.argv[1], sys.argv[2], sys.argv[3]
YIELD = """
SELECT station, count(*) AS n, sum(CASE WHEN verdict = {ok} THEN 1 ELSE 0 END) AS passed,
       avg(hold_ticks / clock_hz) AS mean_s, stddev_samp(hold_ticks / clock_hz) AS sd_s
FROM {src} GROUP BY station ORDER BY station
"""


def timed(label, f):
    best = None
    for _ in range(3):
        t0 = time.perf_counter()
        f()
        t = time.perf_counter() - t0
        best = t if best is None else min(best, t)
    return best


db = os.path.join(work, "duck.db")
for p in (db, db + ".wal"):
    if os.path.exists(p):
        os.remove(p)


def load():
    con = duckdb.connect(db)
    con.execute("DROP TABLE IF EXISTS m")
    con.execute(f"CREATE TABLE m AS SELECT * FROM read_csv('{log}')")
    con.close()


print(f"duckdb-load {timed('load', load):.3f} {os.path.getsize(db)}")
con = duckdb.connect()
csv = f"read_csv('{log}')"
print(f"duckdb-yield-csv {timed('csv', lambda: con.execute(YIELD.format(ok=repr('within-window'), src=csv)).fetchall()):.3f}")
pq = f"read_parquet('{dataset}/readings/*/*/*.parquet', hive_partitioning = true)"
print(f"duckdb-yield-parquet {timed('pq', lambda: con.execute(YIELD.format(ok=0, src=pq)).fetchall()):.3f}")
print(f"duckdb-version {duckdb.__version__}")
