#!/usr/bin/env python3
"""Monte Carlo of a hold stage's spread: `rchold spread` against a
straightforward vectorised numpy version of the same draws and closed form,
on the same machine. Prints samples/s of each, their ratio and the
percentiles of both, and fails unless they agree within Monte Carlo error.

The stage: examples/bench-spread.toml (fixed 0.6 V drop, 50 Ω driver, a
custom input with ±5 % threshold bands, R ±1 %, C ±10 %, Vdd ±5 %, drop
±50 mV, uniform draws). Each side runs RUNS times (default 5) and the fastest run counts: the first
numpy runs on a fresh process are much slower (memory warm-up), which would
flatter rchold. Usage: python3 benches/spread_vs_numpy.py [SAMPLES [RUNS]]
"""
import json
import os
import subprocess
import sys
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
STAGE = os.path.join(ROOT, "examples", "bench-spread.toml")
N = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000_000
RUNS = int(sys.argv[2]) if len(sys.argv) > 2 else 5

# The same stage as the TOML file.
R, C, VDD, VF, RO = 1e6, 1e-6, 5.0, 0.6, 50.0
RISE, FALL = 0.6, 0.4          # fractions of Vdd
TOL = dict(r=0.01, c=0.10, vdd=0.05, vf=0.05 / 0.6, rise=0.05, fall=0.05)


def numpy_spread(n, seed=1):
    rng = np.random.default_rng(seed)
    u = lambda t: 1.0 + rng.uniform(-t, t, n)
    r = R * u(TOL["r"])
    c = C * u(TOL["c"])
    k = u(TOL["vdd"])
    vdd = VDD * k
    vf = VF * u(TOL["vf"])
    fall = FALL * VDD * u(TOL["fall"]) * k
    rise = RISE * VDD * u(TOL["rise"]) * k
    v_inf = (vdd - vf) * r / (r + RO)
    ok = v_inf > rise
    hold = r * c * np.log(v_inf / fall)
    hold = np.sort(hold[ok])
    return hold


def main():
    subprocess.run(["cargo", "build", "-q", "--release", "-p", "host-check", "--bin", "rchold"], cwd=ROOT, check=True)
    exe = os.path.join(ROOT, "target", "release", "rchold")
    t_rchold = t_numpy = float("inf")
    for _ in range(RUNS):
        t0 = time.perf_counter()
        out = subprocess.run([exe, "spread", STAGE, "--samples", str(N), "--json"], capture_output=True, check=True, text=True)
        t_rchold = min(t_rchold, time.perf_counter() - t0)
        t0 = time.perf_counter()
        h = numpy_spread(N)
        t_numpy = min(t_numpy, time.perf_counter() - t0)
    rc = json.loads(out.stdout)["monte_carlo"]
    print(f"samples: {N}, fastest of {RUNS} runs each")
    print(f"rchold spread (whole command, all cores):   {t_rchold:.2f} s, {N / t_rchold:,.0f} samples/s")
    print(f"numpy (vectorised closed form, one core):   {t_numpy:.2f} s, {N / t_numpy:,.0f} samples/s")
    print(f"ratio rchold/numpy samples/s: {t_numpy / t_rchold:.2f}")
    print("percentile   rchold (s)      numpy (s)     difference / its standard error")
    worst = 0.0
    n = len(h)
    for p, v in rc["percentiles"]:
        q = p / 100.0
        ours = np.percentile(h, p)
        # Standard error of a sample quantile, sqrt(q(1-q)/n)/f(x_q), the
        # density from the spacing of nearby order statistics; both runs are
        # independent samples, hence sqrt(2) (textbook asymptotics, from memory).
        d = max(q * 0.05, 2e-4)
        lo, hi = np.percentile(h, [100 * max(q - d, 0.0), 100 * min(q + d, 1.0)])
        per_unit = (hi - lo) / (min(q + d, 1.0) - max(q - d, 0.0))
        se = np.sqrt(2.0 * q * (1.0 - q) / n) * per_unit
        z = abs(v - ours) / se
        worst = max(worst, z)
        print(f"{p:>9} %  {v:.6f}  {ours:.6f}  {z:.2f}")
    print(f"mean         {rc['mean_s']:.6f}  {h.mean():.6f}")
    print(f"sd           {rc['sd_s']:.6f}  {h.std(ddof=1):.6f}")
    # Seven percentiles: more than 4.5 standard errors apart would be a real disagreement.
    if worst > 4.5:
        sys.exit(f"percentiles disagree beyond Monte Carlo error ({worst:.1f} standard errors)")
    print(f"percentiles agree within Monte Carlo error (largest gap {worst:.2f} standard errors)")


if __name__ == "__main__":
    main()
