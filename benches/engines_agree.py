"""Checks that rchold and the engines agree on the shipped SQL's figures:
counts exactly, yields, means, Cp, Cpk, rates and forecast dates to 1e-9
relative (rates also to 1e-12 %/year absolute, for units with no loss),
statuses exactly. Prints one line per engine and exits 1 on any difference.

Usage: python3 benches/engines_agree.py YIELD.json AGING.json ENGINE.json…
(YIELD.json from `rchold yield --parquet DIR --skip-recheck --json`,
AGING.json from `rchold aging --parquet DIR --json`, ENGINE.json from
benches/engines.py.)
"""

import json
import sys

REL = 1e-9


def close(a, b, abs_tol=0.0):
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= REL * max(abs(a), abs(b)) + abs_tol


def check(y, ag, eng):
    bad = []
    rows = eng["yield"]["rows"]
    st = {r["station"]: r for r in rows if r["level"] == "station"}
    days = {(r["station"], r["day"]): r for r in rows if r["level"] == "day"}
    if sorted(st) != sorted(g["name"] for g in y["stations"]):
        bad.append(f"stations differ: {sorted(st)}")
    for g in y["stations"]:
        r = st.get(g["name"])
        if r is None:
            continue
        passed = g["verdicts"][0]
        if (r["total"], r["passed"], r["holds"]) != (g["total"], passed, g["hold_s"]["n"]):
            bad.append(f"{g['name']}: counts {r['total']}/{r['passed']}/{r['holds']} vs {g['total']}/{passed}/{g['hold_s']['n']}")
        for k, mine, theirs in [
            ("yield", passed / g["total"], r["yield"]),
            ("mean", g["hold_s"]["mean"], r["hold_mean_s"]),
            ("cp", g["cp"], r["cp"]),
            ("cpk", g["cpk"], r["cpk"]),
        ]:
            if not close(mine, theirs):
                bad.append(f"{g['name']}: {k} {mine!r} vs {theirs!r}")
    mine_days = {(d["station"], d["day_ms"] // 86400000): d for d in y["days"]}
    if set(mine_days) != set(days):
        bad.append(f"days differ: {len(mine_days)} vs {len(days)}")
    for k, d in mine_days.items():
        r = days.get(k)
        if r and (r["total"], r["passed"]) != (d["total"], d["passed"]):
            bad.append(f"{k}: day counts {r['total']}/{r['passed']} vs {d['total']}/{d['passed']}")
    units = {(u["station"], u["unit"]): u for u in ag["units"] if u["rate_pct_per_year"] is not None}
    theirs = {(r["station"], r["unit_id"]): r for r in eng["aging"]["rows"]}
    if set(units) != set(theirs):
        bad.append(f"units with a line differ: {len(units)} vs {len(theirs)}")
    statuses = 0
    for k, u in units.items():
        r = theirs.get(k)
        if r is None:
            continue
        if not close(u["rate_pct_per_year"], r["rate_pct_per_year"], 1e-12):
            bad.append(f"{k}: rate {u['rate_pct_per_year']!r} vs {r['rate_pct_per_year']!r}")
        if u["forecast_ms"] is not None and not close(float(u["forecast_ms"]), r["forecast_ms"], 1.0):
            bad.append(f"{k}: forecast {u['forecast_ms']} vs {r['forecast_ms']}")
        if u["status"] != r["status"]:
            statuses += 1
            bad.append(f"{k}: status {u['status']} vs {r['status']}")
    return bad, len(st), len(days), len(units)


def main():
    if len(sys.argv) < 4:
        sys.exit(__doc__)
    y = json.load(open(sys.argv[1]))
    ag = json.load(open(sys.argv[2]))
    failed = False
    for path in sys.argv[3:]:
        eng = json.load(open(path))
        bad, n_st, n_days, n_units = check(y, ag, eng)
        verdict = "agree" if not bad else f"DIFFER in {len(bad)} places"
        print(
            f"  {eng['engine']:<18} {verdict}: {n_st} stations, {n_days} station-days, {n_units} unit lines "
            f"(counts exactly; yield, mean, Cp, Cpk, rates, forecasts to 1e-9 relative; statuses exactly)"
        )
        for b in bad[:10]:
            print(f"    {b}")
        failed |= bool(bad)
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    main()
