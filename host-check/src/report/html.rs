//! One self-contained HTML page of the yield and fleet reports: inline CSS
//! and SVG, no scripts, no external files.

use std::fmt::Write as _;

use crate::data::codes::VERDICTS;
use crate::data::store::Source;
use crate::data::time;
use crate::fmt::xml;
use crate::fmt::{si, CAUTION, STORED_ENERGY};
use crate::report::aging::{FleetReport, Status};
use crate::report::files::{needing_attention, AgingCharts, YieldCharts};
use crate::report::yields::{pct, Recheck, YieldReport};

/// A table cell: its text and whether it is left-aligned (words) or
/// right-aligned (numbers).
type Cell = (String, bool);

/// A left-aligned cell.
fn l(v: impl std::fmt::Display) -> Cell {
    (v.to_string(), true)
}

/// A right-aligned cell.
fn r(v: impl std::fmt::Display) -> Cell {
    (v.to_string(), false)
}

/// One table row, every cell escaped.
fn row(o: &mut String, cells: &[Cell]) {
    o.push_str("<tr>");
    for (text, left) in cells {
        let _ = write!(o, "<td{}>{}</td>", if *left { " class=l" } else { "" }, xml(text));
    }
    o.push_str("</tr>");
}

const STYLE: &str = "body{font-family:sans-serif;margin:2em auto;max-width:1000px;color:#222}\
h1{font-size:1.5em}h2{font-size:1.2em;margin-top:2em;border-bottom:1px solid #ccc}\
table{border-collapse:collapse;margin:0.5em 0}td,th{padding:2px 10px;border-bottom:1px solid #eee;text-align:right}\
th{background:#f2f4f7}td.l,th.l{text-align:left}.note{background:#fff6e0;border-left:4px solid #d08020;padding:0.5em 1em}\
pre{background:#f6f6f6;padding:0.6em}svg{max-width:100%;height:auto}";

/// The page: the store's sources, the yield section with its charts and
/// the fleet section with its charts.
#[must_use]
pub fn page(y: &YieldReport, f: &FleetReport, sources: &[Source], yc: &YieldCharts, ac: &AgingCharts) -> String {
    let mut o = String::new();
    let _ = write!(
        o,
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>rchold report</title>\
         <style>{STYLE}</style></head><body><h1>Hold-stage report</h1>"
    );
    if let Some((a, b)) = y.span_ms {
        let _ = write!(
            o,
            "<p>Fixture measurements {} … {}; fleet measurements up to {}.</p>",
            time::format_ms(a),
            time::format_ms(b),
            time::date_of(f.now_ms)
        );
    }
    if !sources.is_empty() {
        o.push_str(
            "<h2>Sources</h2><table><tr><th>id</th><th class=l>kind</th><th>stored</th><th>repeated</th>\
             <th>retests</th><th>refused</th><th>bad frames</th><th>seq skipped</th><th>seq back</th><th>restarts</th>\
             <th>bytes</th>\
             <th class=l>name</th></tr>",
        );
        for x in sources {
            let cells = [
                r(x.id),
                l(&x.kind),
                r(x.records),
                r(x.duplicates),
                r(x.conflicts),
                r(x.refused),
                r(x.bad_frames),
                r(x.seq_missing),
                r(x.seq_back),
                r(x.restarts),
                r(x.bytes),
                l(&x.name),
            ];
            row(&mut o, &cells);
        }
        o.push_str("</table>");
    }
    yield_section(&mut o, y, yc);
    fleet_section(&mut o, f, ac);
    let _ = writeln!(o, "<p class=note>Note: {} Also, {}.</p></body></html>", xml(CAUTION), xml(STORED_ENERGY));
    o
}

fn yield_section(o: &mut String, y: &YieldReport, yc: &YieldCharts) {
    o.push_str(
        "<h2>Fixture yield</h2><table><tr><th class=l>station</th><th>measured</th><th>passed</th><th>yield</th>\
                <th>hold mean</th><th>hold σ</th><th>Cp</th><th>Cpk</th></tr>",
    );
    for g in y.stations.iter().chain(std::iter::once(&y.all)) {
        let [name, total, passed, yld, mean, sd, cp, cpk] = g.cells();
        row(o, &[l(name), r(total), r(passed), r(yld), r(mean), r(sd), r(cp), r(cpk)]);
    }
    o.push_str("</table><p>Cp and Cpk of the hold against the pass window (NIST/SEMATECH e-Handbook §6.1.6), \
                gross faults (wrong part, open capacitor) left out.</p><table><tr><th class=l>verdict</th><th>count</th><th>share</th></tr>");
    for (v, n) in VERDICTS.iter().zip(y.all.verdicts) {
        row(o, &[l(v.name()), r(n), r(pct(n, y.all.total))]);
    }
    o.push_str("</table>");
    for svg in &yc.holds {
        o.push_str(svg);
    }
    if !yc.over_time.is_empty() {
        o.push_str("<h3>Over time</h3><p>Daily yield, and an EWMA chart of the daily mean hold per station (NIST/SEMATECH e-Handbook §6.3.2.4).</p>");
        for svg in &yc.over_time {
            o.push_str(svg);
        }
    }
    o.push_str("<h3>Per batch</h3><table><tr><th class=l>station</th><th class=l>batch</th><th>measured</th><th>yield</th></tr>");
    for b in &y.batches {
        row(o, &[l(&b.station), l(&b.key), r(b.total), r(pct(b.passed, b.total))]);
    }
    let _ = write!(
        o,
        "</table><h3>Rejects ({})</h3><table><tr><th class=l>station</th><th class=l>batch</th><th>unit</th>\
         <th class=l>verdict</th><th class=l>likely cause</th><th>hold</th><th>C deviation</th></tr>",
        y.rejects_total
    );
    for x in &y.rejects {
        let hold = x.hold_s.map_or_else(|| "–".into(), |h| si(h, "s"));
        let dev = x.c_dev_pct.map_or_else(|| "–".into(), |d| format!("{d:+.1} %"));
        row(o, &[l(&x.station), l(&x.batch), r(x.unit), l(x.verdict), l(x.hint), r(hold), r(dev)]);
    }
    o.push_str("</table>");
    if let Some(rc) = &y.recheck {
        recheck_section(o, rc);
    }
}

fn recheck_section(o: &mut String, rc: &Recheck) {
    let _ = write!(
        o,
        "<h3>f64 re-check</h3><p>{} of {} verdicts confirmed by the independent f64 reference; {} disagree; \
         {} not re-checkable.</p>",
        rc.agreed, rc.checked, rc.disagreements_total, rc.not_checkable
    );
    if !rc.disagreements.is_empty() {
        o.push_str("<table><tr><th class=l>station</th><th>unit</th><th>hold ticks</th><th class=l>firmware</th><th class=l>reference</th></tr>");
        for d in &rc.disagreements {
            let (fw, re) =
                (format!("{} / {}", d.firmware.0, d.firmware.1), format!("{} / {}", d.reference.0, d.reference.1));
            row(o, &[l(&d.station), r(d.unit), r(d.hold_ticks), l(fw), l(re)]);
        }
        o.push_str("</table>");
    }
}

fn fleet_section(o: &mut String, f: &FleetReport, ac: &AgingCharts) {
    let count = |s: Status| f.units.iter().filter(|u| u.status == s).count();
    let _ = write!(
        o,
        "<h2>Fleet aging</h2><p>{} units, {} measurements; end-of-life limit C/C₀ = {:.2}. Beyond the limit: {}; \
         at risk within {} months: {}; aging: {}; no significant loss: {}.</p>",
        f.units.len(),
        f.records_used,
        f.limit_ratio,
        count(Status::BeyondLimit),
        f.horizon_months,
        count(Status::AtRisk),
        count(Status::Aging),
        count(Status::NoSignificantLoss)
    );
    if let Some((a, b, c)) = f.rate_percentiles {
        let _ = write!(o, "<p>Capacitance change per year: p10 {a:+.2} %, median {b:+.2} %, p90 {c:+.2} %.</p>");
    }
    o.push_str(&ac.fleet);
    if let Some(r) = &ac.rates {
        o.push_str(r);
    }
    o.push_str(
        "<table><tr><th class=l>unit</th><th>C/C₀ now</th><th>rate %/yr</th><th class=l>forecast</th>\
                <th class=l>95 % interval</th><th class=l>status</th></tr>",
    );
    for u in needing_attention(f) {
        let rate = u.rate_pct_per_year.map_or_else(|| "–".into(), |x| format!("{x:+.2}"));
        let forecast = u.forecast_ms.map_or_else(|| "–".into(), time::date_of);
        let interval = u
            .forecast_interval_ms
            .map_or_else(|| "–".into(), |(a, b)| format!("{} … {}", time::date_of(a), time::date_of(b)));
        row(o, &[l(u.unit), r(format!("{:.4}", u.last_ratio)), r(rate), l(forecast), l(interval), l(u.status.name())]);
    }
    o.push_str("</table>");
    for svg in &ac.units {
        o.push_str(svg);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::aging::FleetTally;
    use crate::report::yields::tests::{example_setup, judged};
    use crate::report::yields::Tally;
    use std::collections::HashMap;

    #[test]
    fn names_are_escaped_and_the_caution_closes_the_page() -> std::io::Result<()> {
        let s = example_setup();
        let setups = HashMap::from([(1, s.clone())]);
        let mut t = Tally::new(&setups, false, None);
        t.add("<script>", "B&1", 0, &judged(&s, 1, 100_000), Some(1));
        let y = t.finish()?;
        let f = FleetTally::new(&setups).finish(0.8, 12);
        let src = Source {
            id: 1,
            kind: "log".into(),
            name: "ledger <ok>".into(),
            records: 1,
            duplicates: 0,
            bad_frames: 0,
            refused: 0,
            bytes: 9,
            seq_missing: 0,
            seq_back: 0,
            gap_units: 0,
            conflicts: 0,
            restarts: 0,
        };
        let p = page(&y, &f, &[src], &YieldCharts::default(), &AgingCharts::default());
        assert!(!p.contains("<script>") && p.contains("&lt;script&gt;") && p.contains("B&amp;1"));
        assert!(p.contains("ledger &lt;ok&gt;"));
        assert!(p.trim_end().ends_with("</html>") && p.contains("licensed practice"));
        Ok(())
    }
}
