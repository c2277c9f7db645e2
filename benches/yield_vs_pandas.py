#!/usr/bin/env python3
"""Fixture yield over a large measurement log: `rchold yield --csv` against
the same computation in pandas, end to end (read the CSV, count verdicts per
station, mean / σ / Cp / Cpk of the hold per station), on the same machine.
Prints each side's time, their ratio, peak memory, and checks that both
give the same counts and statistics.

The log is synthetic (`rchold synth-log`, not real data). rchold does more
than pandas here: it validates every field of every line and also builds the
per-batch and per-day tables and the histogram; the f64 re-check is off
(--skip-recheck), since pandas has nothing like it. Each side runs RUNS times
(default 3), alternating, and the fastest run counts.

Usage: python3 benches/yield_vs_pandas.py [RECORDS [RUNS]]   (needs pandas)
"""
import json
import os
import resource
import subprocess
import sys
import tempfile
import time

import pandas as pd

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
STAGE = os.path.join(ROOT, "examples", "lumen-keypad.toml")
N = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000_000
RUNS = int(sys.argv[2]) if len(sys.argv) > 2 else 3
RCHOLD = os.path.join(ROOT, "target", "release", "rchold")


def pandas_yield(path, lsl, usl):
    df = pd.read_csv(path, usecols=["station", "clock_hz", "hold_ticks", "verdict", "hint"],
                     dtype={"station": "category", "verdict": "category", "hint": "category"})
    counts = df.groupby(["station", "verdict"], observed=True).size().unstack(fill_value=0)
    ok = df["verdict"].isin(["within-window", "short", "long"]) & ~df["hint"].isin(["wrong-part", "open-capacitor"])
    ok &= df["hold_ticks"].notna()
    h = df.loc[ok, ["station"]].assign(hold=df.loc[ok, "hold_ticks"] / df.loc[ok, "clock_hz"])
    g = h.groupby("station", observed=True)["hold"].agg(["mean", "std", "count"])
    g["cp"] = (usl - lsl) / (6 * g["std"])
    g["cpk"] = pd.concat([(usl - g["mean"]) / (3 * g["std"]), (g["mean"] - lsl) / (3 * g["std"])], axis=1).min(axis=1)
    return counts, g


def timed(f):
    t = time.perf_counter()
    out = f()
    return time.perf_counter() - t, out


def main():
    subprocess.run(["cargo", "build", "-q", "--release", "-p", "host-check", "--bin", "rchold"], cwd=ROOT, check=True)
    with tempfile.TemporaryDirectory() as tmp:
        log = os.path.join(tmp, "bench.csv")
        subprocess.run([RCHOLD, "synth-log", "--out", log, "--records", str(N)], check=True)
        size = os.path.getsize(log)
        cmd = ["/usr/bin/time", "-f", "%M", RCHOLD, "yield", "--csv", log, "--stage", STAGE, "--clock", "1MHz",
               "--skip-recheck", "--json"]
        # Alternate the two sides so that a change in the machine's speed hits both.
        best_r, best_p, report, rss_r, out = None, None, None, None, None
        for _ in range(RUNS):
            t, p = timed(lambda: subprocess.run(cmd, check=True, capture_output=True, text=True))
            best_r = t if best_r is None or t < best_r else best_r
            report = json.loads(p.stdout)
            rss_r = int(p.stderr.strip().splitlines()[-1])
            lsl, usl = report["all"]["window_s"]
            t, out = timed(lambda: pandas_yield(log, lsl, usl))
            best_p = t if best_p is None or t < best_p else best_p
        rss_p = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        counts, g = out
        # Both sides must agree.
        for st in report["stations"]:
            name = st["name"]
            assert st["total"] == int(counts.loc[name].sum()), name
            assert st["verdicts"][0] == int(counts.loc[name].get("within-window", 0)), name
            assert abs(st["hold_s"]["mean"] - g.loc[name, "mean"]) < 1e-9 * abs(g.loc[name, "mean"]), name
            assert abs(st["cpk"] - g.loc[name, "cpk"]) < 1e-6 * abs(g.loc[name, "cpk"]), name
        print(f"log: {N:,} records, {size / 1e6:,.0f} MB (synthetic)")
        print(f"rchold yield --csv : {best_r:6.2f} s  {N / best_r / 1e6:5.2f} M records/s  peak RSS {rss_r / 1024:,.0f} MiB")
        print(f"pandas {pd.__version__:<11} : {best_p:6.2f} s  {N / best_p / 1e6:5.2f} M records/s  peak RSS {rss_p / 1024:,.0f} MiB")
        print(f"ratio (pandas / rchold): {best_p / best_r:.2f}x   (fastest of {RUNS} runs each; counts, means and Cpk agree)")


if __name__ == "__main__":
    main()
