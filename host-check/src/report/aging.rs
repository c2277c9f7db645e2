//! `rchold aging`: how the hold stages of a fleet of field units age.
//!
//! Per unit: the temperature-compensated capacitance `C/C_nominal` over time
//! (from each record's deviation, which the unit computes at the measured
//! temperature, or — for records without one — from the hold, the
//! temperature and the stage file, the same way), a least-squares line
//! `a + b·t` (`stats::fit_line`, checked against NIST StRD Norris), and from
//! it the ratio to the unit's own commissioning value `C/C₀ = 1 + (b/a)·t`
//! (which takes out the unit's fixed offsets: its other parts' tolerances
//! read as a constant factor on the apparent C), the rate `100·b/a` in % per
//! year, and the date the line crosses the end-of-life ratio `L`, with an
//! approximate 95 % interval by the delta method:
//!
//! `t₀ = (L − 1)·a/b`, `var t₀ ≈ (∂t₀/∂a)²·var a + (∂t₀/∂b)²·var b + 2·(∂t₀/∂a)(∂t₀/∂b)·cov(a, b)`,
//! `cov(a, b) = −t̄·var b`, interval `t₀ ± 1.96·sd t₀`.
//!
//! Fleet: the distribution of rates and the units whose forecast falls within
//! a horizon after the last measurement. Memory: 16 bytes per measurement.

use std::collections::{BTreeMap, HashMap};
use std::fmt::Write as _;
use std::path::Path;

use hold_firmware::record::Record;
use rc_model::Span;
use serde::Serialize;

use crate::data::store::Setup;
use crate::data::time;
use crate::report::chart::{self, Band, Histogram, Ink, Mark, Series, Trend};
use crate::report::stats;
use crate::stage::file::{self as stagefile, StageFile};

/// Milliseconds per (Julian) year.
pub const YEAR_MS: f64 = 365.25 * 86_400_000.0;

/// Fewest measurements for a trend.
pub const MIN_POINTS: usize = 10;

/// Where a unit stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Status {
    /// Too few measurements, or too short a span, for a trend.
    TooFewMeasurements,
    /// No significant loss (slope not below zero by two standard errors).
    NoSignificantLoss,
    /// Losing capacitance; the forecast lies beyond the horizon.
    Aging,
    /// The forecast lies within the horizon.
    AtRisk,
    /// The fitted ratio at the last measurement is at or below the limit.
    BeyondLimit,
}

impl Status {
    /// Short name.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Status::TooFewMeasurements => "too-few-measurements",
            Status::NoSignificantLoss => "no-significant-loss",
            Status::Aging => "aging",
            Status::AtRisk => "at-risk",
            Status::BeyondLimit => "beyond-limit",
        }
    }
}

/// One unit's trend.
#[derive(Debug, Clone, Serialize)]
pub struct UnitTrend {
    /// Station (fleet) name.
    pub station: String,
    /// Unit id.
    pub unit: u32,
    /// Measurements used.
    pub points: usize,
    /// First and last measurement, ms since the epoch.
    pub span_ms: (i64, i64),
    /// Ratio C/C₀ (to the commissioning value) of the last measurement.
    pub last_ratio: f64,
    /// Change per year, % of the commissioning value (negative: losing).
    pub rate_pct_per_year: Option<f64>,
    /// Standard error of the rate, % per year.
    pub rate_sd: Option<f64>,
    /// Residual scatter about the line, % of the commissioning value.
    pub scatter_pct: Option<f64>,
    /// Forecast crossing of the limit, ms since the epoch.
    pub forecast_ms: Option<i64>,
    /// Approximate 95 % interval of the crossing, ms.
    pub forecast_interval_ms: Option<(i64, i64)>,
    /// Status.
    pub status: Status,
    #[serde(skip)]
    series: Vec<(f64, f64)>,
    #[serde(skip)]
    line: Option<stats::Line>,
    #[serde(skip)]
    t0_ms: i64,
}

/// The fleet report.
#[derive(Debug, Clone, Serialize)]
pub struct FleetReport {
    /// End-of-life limit, ratio (0.8 = −20 %).
    pub limit_ratio: f64,
    /// Horizon after the last measurement, months.
    pub horizon_months: u32,
    /// The last measurement in the fleet, ms (the report's "now").
    pub now_ms: i64,
    /// Units, by station and id.
    pub units: Vec<UnitTrend>,
    /// Records used / skipped (no deviation and no way to compute one).
    pub records_used: u64,
    /// Records skipped.
    pub records_skipped: u64,
    /// Of those, records with no deviation of their own and no stage file
    /// stored for their setup to compute one from.
    pub skipped_without_stage: u64,
    /// 10th, 50th and 90th percentile of the rates, % per year.
    pub rate_percentiles: Option<(f64, f64, f64)>,
}

/// One-pass collector of the fleet's series.
pub struct FleetTally {
    units: BTreeMap<(String, u32), Vec<(i64, f64)>>,
    stages: HashMap<i64, Option<StageFile>>,
    setups: HashMap<i64, Setup>,
    used: u64,
    skipped: u64,
    without_stage: u64,
}

impl FleetTally {
    /// A collector; `setups` let records without a deviation be converted.
    #[must_use]
    pub fn new(setups: &HashMap<i64, Setup>) -> FleetTally {
        FleetTally {
            units: BTreeMap::new(),
            stages: HashMap::new(),
            setups: setups.clone(),
            used: 0,
            skipped: 0,
            without_stage: 0,
        }
    }

    fn ratio(&mut self, r: &Record, setup_id: Option<i64>) -> Option<f64> {
        if let Some(d) = r.c_deviation_ppm {
            return Some(1.0 + f64::from(d) * 1e-6);
        }
        let id = setup_id?;
        let hold = r.hold_ticks?;
        let setups = &self.setups;
        let sf = self
            .stages
            .entry(id)
            .or_insert_with(|| setups.get(&id).and_then(|s| stagefile::parse(Path::new(&s.name), &s.stage_toml).ok()))
            .as_ref()?;
        let span = Span::from_ticks(hold, r.clock_hz).ok()?;
        let temp = r.temp_mdeg_c.unwrap_or(sf.stage.temp_mdeg_c);
        let d = hold_firmware::drift::deviation_at(&sf.spread, &sf.stage, temp, span).ok()?;
        Some(1.0 + f64::from(d) * 1e-6)
    }

    /// Adds one measurement (records without a hold are skipped).
    pub fn add(&mut self, station: &str, measured_ms: i64, r: &Record, setup_id: Option<i64>) {
        match self.ratio(r, setup_id) {
            Some(y) if y.is_finite() => {
                self.used += 1;
                let key = (station.to_owned(), r.unit_id);
                match self.units.get_mut(&key) {
                    Some(v) => v.push((measured_ms, y)),
                    None => {
                        self.units.insert(key, vec![(measured_ms, y)]);
                    }
                }
            }
            _ => {
                self.skipped += 1;
                let stage_known = setup_id.and_then(|id| self.stages.get(&id)).is_some_and(Option::is_some);
                if r.c_deviation_ppm.is_none() && r.hold_ticks.is_some() && !stage_known {
                    self.without_stage += 1;
                }
            }
        }
    }

    /// Fits every unit.
    #[must_use]
    pub fn finish(self, limit_ratio: f64, horizon_months: u32) -> FleetReport {
        let now_ms = self.units.values().flat_map(|v| v.iter().map(|p| p.0)).max().unwrap_or(0);
        let horizon_ms = now_ms + (f64::from(horizon_months) / 12.0 * YEAR_MS) as i64;
        let mut units = Vec::with_capacity(self.units.len());
        for ((station, unit), mut pts) in self.units {
            pts.sort_by_key(|p| p.0);
            units.push(trend(station, unit, &pts, limit_ratio, horizon_ms));
        }
        let mut rates: Vec<f64> = units.iter().filter_map(|u| u.rate_pct_per_year).collect();
        rates.sort_by(f64::total_cmp);
        let q = |p: f64| rates.get(((rates.len() - 1) as f64 * p).round() as usize).copied().unwrap_or(f64::NAN);
        let rate_percentiles = (!rates.is_empty()).then(|| (q(0.1), q(0.5), q(0.9)));
        FleetReport {
            limit_ratio,
            horizon_months,
            now_ms,
            units,
            records_used: self.used,
            records_skipped: self.skipped,
            skipped_without_stage: self.without_stage,
            rate_percentiles,
        }
    }
}

/// The trend of one unit's series `(ms, ratio)`, sorted by time.
#[must_use]
pub fn trend(station: String, unit: u32, pts: &[(i64, f64)], limit_ratio: f64, horizon_ms: i64) -> UnitTrend {
    let t0 = pts.first().map_or(0, |p| p.0);
    let t1 = pts.last().map_or(0, |p| p.0);
    let x: Vec<f64> = pts.iter().map(|p| (p.0 - t0) as f64 / YEAR_MS).collect();
    let y: Vec<f64> = pts.iter().map(|p| p.1).collect();
    let mut u = UnitTrend {
        station,
        unit,
        points: pts.len(),
        span_ms: (t0, t1),
        last_ratio: y.last().copied().unwrap_or(f64::NAN),
        rate_pct_per_year: None,
        rate_sd: None,
        scatter_pct: None,
        forecast_ms: None,
        forecast_interval_ms: None,
        status: Status::TooFewMeasurements,
        series: x.iter().copied().zip(y.iter().copied()).collect(),
        line: None,
        t0_ms: t0,
    };
    if pts.len() < MIN_POINTS || (t1 - t0) < 30 * 86_400_000 {
        return u;
    }
    let Some(l) = stats::fit_line(&x, &y) else { return u };
    let a = l.intercept;
    if a <= 0.0 {
        return u;
    }
    // Relative to the unit's own commissioning value a: y/a = 1 + (b/a)·x.
    u.line = Some(l);
    u.series = x.iter().zip(&y).map(|(&x, &y)| (x, y / a)).collect();
    u.last_ratio = y.last().map_or(f64::NAN, |v| v / a);
    u.rate_pct_per_year = Some(l.slope / a * 100.0);
    u.rate_sd = Some(l.slope_sd / a * 100.0);
    u.scatter_pct = Some(l.residual_sd / a * 100.0);
    let x_last = (t1 - t0) as f64 / YEAR_MS;
    if 1.0 + l.slope / a * x_last <= limit_ratio {
        u.status = Status::BeyondLimit;
    } else if l.slope >= -2.0 * l.slope_sd {
        u.status = Status::NoSignificantLoss;
        return u;
    } else {
        u.status = Status::Aging;
    }
    // x₀ = (L − 1)·a/b; delta method with cov(a, b) = −x̄·var b.
    let (b, g) = (l.slope, limit_ratio - 1.0);
    let x0 = g * a / b;
    let xbar = x.iter().sum::<f64>() / x.len() as f64;
    let (var_a, var_b) = (l.intercept_sd * l.intercept_sd, l.slope_sd * l.slope_sd);
    let (da, db) = (g / b, -g * a / (b * b));
    let var_x0 = da * da * var_a + db * db * var_b + 2.0 * da * db * (-xbar * var_b);
    let half = 1.96 * var_x0.max(0.0).sqrt();
    let at = |x: f64| t0 + (x * YEAR_MS) as i64;
    u.forecast_ms = Some(at(x0));
    u.forecast_interval_ms = Some((at(x0 - half), at(x0 + half)));
    if u.status == Status::Aging && at(x0) <= horizon_ms {
        u.status = Status::AtRisk;
    }
    u
}

fn opt(v: Option<f64>, f: impl Fn(f64) -> String) -> String {
    v.map_or_else(|| "–".to_owned(), f)
}

/// The report as text (at most `max_rows` unit rows).
#[must_use]
pub fn render_text(r: &FleetReport, max_rows: usize) -> String {
    let mut o = String::new();
    let count = |s: Status| r.units.iter().filter(|u| u.status == s).count();
    let _ = writeln!(
        o,
        "Fleet aging — {} units, {} measurements (last {}), end-of-life limit C/C₀ = {:.2}",
        r.units.len(),
        r.records_used,
        time::date_of(r.now_ms),
        r.limit_ratio
    );
    if r.skipped_without_stage > 0 {
        let _ = writeln!(
            o,
            "  {} records carry no capacitance deviation and no stage file is stored for them to compute one: \
             store their setup with --stage when listening or ingesting",
            r.skipped_without_stage
        );
    }
    if r.records_skipped > r.skipped_without_stage {
        let _ = writeln!(
            o,
            "  {} records without a hold or deviation were skipped",
            r.records_skipped - r.skipped_without_stage
        );
    }
    if let Some((a, b, c)) = r.rate_percentiles {
        let _ = writeln!(o, "  capacitance change per year: p10 {a:+.2} %, median {b:+.2} %, p90 {c:+.2} %");
    }
    let _ = writeln!(
        o,
        "  beyond limit {}, at risk within {} months {}, aging {}, no significant loss {}, too few measurements {}",
        count(Status::BeyondLimit),
        r.horizon_months,
        count(Status::AtRisk),
        count(Status::Aging),
        count(Status::NoSignificantLoss),
        count(Status::TooFewMeasurements)
    );
    let _ = writeln!(
        o,
        "\n  {:<12} {:>8} {:>6} {:>9} {:>16} {:>9}  {:<11} {:<25}  status",
        "fleet", "unit", "points", "C/C₀ now", "rate %/yr ±2σ", "scatter", "forecast", "95 % interval"
    );
    let mut shown: Vec<&UnitTrend> = r.units.iter().collect();
    shown.sort_by_key(|u| (status_rank(u.status), u.forecast_ms.unwrap_or(i64::MAX)));
    for u in shown.iter().take(max_rows) {
        let _ = writeln!(
            o,
            "  {:<12} {:>8} {:>6} {:>9.4} {:>16} {:>9}  {:<11} {:<25}  {}",
            u.station,
            u.unit,
            u.points,
            u.last_ratio,
            match (u.rate_pct_per_year, u.rate_sd) {
                (Some(a), Some(s)) => format!("{a:+.2} ± {:.2}", 2.0 * s),
                _ => "–".into(),
            },
            opt(u.scatter_pct, |s| format!("{s:.2} %")),
            u.forecast_ms.map_or_else(|| "–".into(), time::date_of),
            u.forecast_interval_ms
                .map_or_else(|| "–".into(), |(a, b)| format!("{} … {}", time::date_of(a), time::date_of(b))),
            u.status.name()
        );
    }
    if shown.len() > max_rows {
        let _ = writeln!(o, "  … {} more units", shown.len() - max_rows);
    }
    o
}

const fn status_rank(s: Status) -> u8 {
    match s {
        Status::BeyondLimit => 0,
        Status::AtRisk => 1,
        Status::Aging => 2,
        Status::NoSignificantLoss => 3,
        Status::TooFewMeasurements => 4,
    }
}

/// All units' ratios over time, at-risk and beyond-limit units in colour.
#[must_use]
pub fn fleet_svg(r: &FleetReport) -> String {
    let mut sorted: Vec<&UnitTrend> = r.units.iter().collect();
    sorted.sort_by_key(|u| std::cmp::Reverse(status_rank(u.status)));
    let mut labelled = [false; 3];
    let series: Vec<Series> = sorted
        .into_iter()
        .map(|u| {
            let (ink, k, what) = match u.status {
                Status::BeyondLimit => (Ink::Limit, 0, "beyond the limit"),
                Status::AtRisk => (Ink::Warn, 1, "at risk"),
                _ => (Ink::Muted, 2, "other units"),
            };
            let first = !std::mem::replace(&mut labelled[k], true);
            let step = (u.series.len() / 200).max(1);
            Series {
                points: u.series.iter().step_by(step).map(|&(x, y)| (u.at(x), y)).collect(),
                ink,
                dots: false,
                label: first.then(|| what.to_owned()),
            }
        })
        .collect();
    let levels =
        [Mark { at: r.limit_ratio, label: format!("end of life C/C₀ = {:.2}", r.limit_ratio), ink: Ink::Limit }];
    chart::trend(&Trend {
        title: "Fleet: capacitance ratio C/C₀ over time",
        y_desc: "C/C₀, temperature-compensated",
        series: &series,
        levels: &levels,
        bands: &[],
    })
}

/// Histogram of the fleet's rates.
#[must_use]
pub fn rates_svg(r: &FleetReport) -> Option<String> {
    let rates: Vec<f64> = r.units.iter().filter_map(|u| u.rate_pct_per_year).collect();
    let lo = rates.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = rates.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !lo.is_finite() {
        return None;
    }
    let (lo, hi) = if hi > lo { (lo, hi) } else { (lo - 1.0, hi + 1.0) };
    let mut bins = vec![0u64; 40];
    for v in &rates {
        let k = (((v - lo) / (hi - lo)) * 40.0).floor().clamp(0.0, 39.0) as usize;
        if let Some(b) = bins.get_mut(k) {
            *b += 1;
        }
    }
    let marks: Vec<Mark> = r
        .rate_percentiles
        .map(|(_, m, _)| vec![Mark { at: m, label: format!("median {m:+.2} %/yr"), ink: Ink::Centre }])
        .unwrap_or_default();
    Some(chart::histogram(&Histogram {
        title: "Fleet: capacitance change per year",
        quantity: "change of C from commissioning",
        unit: "%/yr",
        lo,
        hi,
        bins: &bins,
        marks: &marks,
    }))
}

/// One unit's series, its line and its forecast with the 95 % interval.
#[must_use]
pub fn unit_svg(u: &UnitTrend, limit_ratio: f64) -> String {
    let mut series = vec![Series {
        points: u.series.iter().map(|&(x, y)| (u.at(x), y)).collect(),
        ink: Ink::Data,
        dots: true,
        label: Some("measured".into()),
    }];
    if let Some(l) = u.line {
        let x_end = u.forecast_ms.map_or_else(
            || u.series.last().map_or(0.0, |p| p.0),
            |f| ((f - u.t0_ms) as f64 / YEAR_MS).max(u.series.last().map_or(0.0, |p| p.0)),
        );
        series.push(Series {
            points: vec![(u.at(0.0), 1.0), (u.at(x_end), 1.0 + l.slope / l.intercept * x_end)],
            ink: Ink::Warn,
            dots: false,
            label: Some("least-squares line".into()),
        });
    }
    let bands: Vec<Band> = u
        .forecast_interval_ms
        .map(|(a, b)| vec![Band { from_ms: a, to_ms: b, label: "forecast, 95 % interval".into() }])
        .unwrap_or_default();
    let title = format!(
        "{} unit {}: {} — forecast {}",
        u.station,
        u.unit,
        opt(u.rate_pct_per_year, |r| format!("{r:+.2} %/yr")),
        u.forecast_ms.map_or_else(|| "none".into(), time::date_of)
    );
    let levels = [Mark { at: limit_ratio, label: format!("end of life {limit_ratio:.2}"), ink: Ink::Limit }];
    chart::trend(&Trend { title: &title, y_desc: "C/C₀", series: &series, levels: &levels, bands: &bands })
}

impl UnitTrend {
    /// The time `x` years after the unit's first measurement, UTC ms.
    fn at(&self, x_years: f64) -> i64 {
        self.t0_ms + (x_years * YEAR_MS).round() as i64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_straight_decline_gives_its_rate_and_crossing() {
        let day = 86_400_000i64;
        let start = 1_704_089_600_000; // 2024-01-01T06:00:00Z
                                       // C/C0 falls 10 % per year, measured daily for two years (exact line).
        let pts: Vec<(i64, f64)> =
            (0..730).map(|d| (start + d * day, 1.0 - 0.1 * (d * day) as f64 / YEAR_MS)).collect();
        let u = trend("fleet".into(), 5, &pts, 0.8, start + 800 * day);
        let rate = u.rate_pct_per_year.unwrap_or(0.0);
        assert!((rate + 10.0).abs() < 1e-6, "{rate}");
        // 20 % loss at 10 %/yr: two years after the first measurement.
        let crossing = u.forecast_ms.map_or(0, |f| f - start);
        assert!((crossing as f64 - 2.0 * YEAR_MS).abs() < day as f64, "{crossing}");
        assert!(matches!(u.status, Status::AtRisk | Status::BeyondLimit), "{:?}", u.status);
        assert!(unit_svg(&u, 0.8).contains("end of life 0.80"));
    }
}
