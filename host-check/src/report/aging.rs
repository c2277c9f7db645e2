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
use crate::data::summary::UnitSums;
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

/// Why a record gives no point of its unit's series.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NoPoint {
    /// No deviation of its own and no stage file stored for its setup to
    /// compute one from (its hold is known).
    WithoutStage,
    /// No deviation and no hold, or one the stage cannot explain.
    Other,
}

/// A record's capacitance deviation from nominal, ppm, at its temperature:
/// its own (`c_deviation_ppm`), or computed from its hold, temperature and
/// `stage` the way the unit computes it. The one rule for every path: the
/// store's summaries at ingest, its recount, and reports over rows or logs.
///
/// # Errors
/// [`NoPoint`] says why there is none.
pub fn deviation_ppm(r: &Record, stage: Option<&StageFile>) -> Result<i32, NoPoint> {
    if let Some(d) = r.c_deviation_ppm {
        return Ok(d);
    }
    let Some(hold) = r.hold_ticks else { return Err(NoPoint::Other) };
    let Some(sf) = stage else { return Err(NoPoint::WithoutStage) };
    let span = Span::from_ticks(hold, r.clock_hz).map_err(|_| NoPoint::Other)?;
    let temp = r.temp_mdeg_c.unwrap_or(sf.stage.temp_mdeg_c);
    hold_firmware::drift::deviation_at(&sf.spread, &sf.stage, temp, span).map_err(|_| NoPoint::Other)
}

/// The stage file of a setup, parsed (`None` when it does not parse).
#[must_use]
pub fn setup_stage(s: &Setup) -> Option<StageFile> {
    stagefile::parse(Path::new(&s.name), &s.stage_toml).ok()
}

/// A unit's fit sums and, for its chart, its points `(ms, C/C_nominal)`.
type UnitSeries = (UnitSums, Vec<(i64, f64)>);

/// One-pass collector of the fleet's series: per unit, the exact
/// least-squares sums ([`UnitSums`], the same the store keeps at ingest)
/// and — for the charts — the points themselves.
pub struct FleetTally {
    /// Per (station, unit): the fit sums and the points `(ms, C/C_nominal)`.
    units: BTreeMap<(String, u32), UnitSeries>,
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

    /// Adds one measurement (records without a deviation or a way to compute one are counted as skipped).
    pub fn add(&mut self, station: &str, measured_ms: i64, r: &Record, setup_id: Option<i64>) {
        let setups = &self.setups;
        let stage = setup_id
            .map(|id| self.stages.entry(id).or_insert_with(|| setups.get(&id).and_then(setup_stage)))
            .and_then(|s| s.as_ref());
        match deviation_ppm(r, stage) {
            Ok(d) => {
                self.used += 1;
                let key = (station.to_owned(), r.unit_id);
                let e = match self.units.get_mut(&key) {
                    Some(e) => e,
                    None => self.units.entry(key).or_default(),
                };
                e.0.add(measured_ms, r.seq, d);
                e.1.push((measured_ms, 1.0 + f64::from(d) * 1e-6));
            }
            Err(why) => {
                self.skipped += 1;
                if why == NoPoint::WithoutStage {
                    self.without_stage += 1;
                }
            }
        }
    }

    /// Adds a unit's sums the store kept, with its skipped records (no
    /// points: its chart is drawn from points given with [`FleetTally::add_points`]).
    pub fn add_unit(&mut self, station: &str, unit: u32, sums: &UnitSums) {
        self.used += sums.n;
        self.skipped += sums.skipped;
        self.without_stage += sums.without_stage;
        if sums.n > 0 {
            self.units.entry((station.to_owned(), unit)).or_default().0.merge(sums);
        }
    }

    /// Gives a unit added by [`FleetTally::add_unit`] its points, `(ms, C/C_nominal)`, for the chart.
    pub fn add_points(&mut self, station: &str, unit: u32, pts: Vec<(i64, f64)>) {
        if let Some(e) = self.units.get_mut(&(station.to_owned(), unit)) {
            e.1 = pts;
        }
    }

    /// Fits every unit.
    #[must_use]
    pub fn finish(self, limit_ratio: f64, horizon_months: u32) -> FleetReport {
        let now_ms = self.units.values().filter(|u| u.0.n > 0).map(|u| u.0.last_ms).max().unwrap_or(0);
        self.finish_at(limit_ratio, horizon_months, now_ms)
    }

    /// Fits every unit, with "now" (the horizon's start) given: the last
    /// measurement of a larger fleet these units belong to, ms.
    #[must_use]
    pub fn finish_at(self, limit_ratio: f64, horizon_months: u32, now_ms: i64) -> FleetReport {
        let horizon_ms = now_ms + (f64::from(horizon_months) / 12.0 * YEAR_MS) as i64;
        let mut units = Vec::with_capacity(self.units.len());
        for ((station, unit), (sums, mut pts)) in self.units {
            pts.sort_by_key(|p| p.0);
            units.push(trend(station, unit, &sums, &pts, limit_ratio, horizon_ms));
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

/// The least-squares line `C/C_nominal = a + b·x` (`x` in years after
/// `first_ms`) of a unit's exact sums: the centred sums are exact integers
/// ([`UnitSums::centred`]), only their quotients are floating point, so the
/// fit does not depend on the order or split of the records. `None` with
/// fewer than 3 points, no spread in time, or sums out of range.
#[must_use]
pub fn fit(s: &UnitSums) -> Option<stats::Line> {
    if s.n < 3 {
        return None;
    }
    let (sxx_n, sxy_n, syy_n) = s.centred()?;
    if sxx_n <= 0 {
        return None;
    }
    let nf = s.n as f64;
    // Centred sums in years and ratio units.
    let sxx = sxx_n as f64 / nf / (YEAR_MS * YEAR_MS);
    let sxy = sxy_n as f64 / nf / YEAR_MS * 1e-6;
    let syy = syy_n as f64 / nf * 1e-12;
    let slope = sxy / sxx;
    let t_mean = s.st as f64 / nf;
    let x_mean = (t_mean - s.first_ms as f64) / YEAR_MS;
    let y_mean = 1.0 + s.sd as f64 / nf * 1e-6;
    let intercept = y_mean - slope * x_mean;
    let sse = (syy - sxy * sxy / sxx).max(0.0);
    let s2 = if s.n > 2 { sse / (nf - 2.0) } else { 0.0 };
    Some(stats::Line {
        intercept,
        slope,
        intercept_sd: (s2 * (1.0 / nf + x_mean * x_mean / sxx)).sqrt(),
        slope_sd: (s2 / sxx).sqrt(),
        residual_sd: s2.sqrt(),
        r_squared: if syy > 0.0 { 1.0 - sse / syy } else { 1.0 },
    })
}

/// The trend of one unit from its sums; `pts` (`(ms, C/C_nominal)`,
/// sorted by time; may be empty) only draw its chart.
#[must_use]
pub fn trend(
    station: String,
    unit: u32,
    sums: &UnitSums,
    pts: &[(i64, f64)],
    limit_ratio: f64,
    horizon_ms: i64,
) -> UnitTrend {
    let (t0, t1) = if sums.n > 0 { (sums.first_ms, sums.last_ms) } else { (0, 0) };
    let x = |t: i64| (t - t0) as f64 / YEAR_MS;
    let last_raw = 1.0 + f64::from(sums.last_ppm) * 1e-6;
    let mut u = UnitTrend {
        station,
        unit,
        points: usize::try_from(sums.n).unwrap_or(usize::MAX),
        span_ms: (t0, t1),
        last_ratio: if sums.n > 0 { last_raw } else { f64::NAN },
        rate_pct_per_year: None,
        rate_sd: None,
        scatter_pct: None,
        forecast_ms: None,
        forecast_interval_ms: None,
        status: Status::TooFewMeasurements,
        series: pts.iter().map(|p| (x(p.0), p.1)).collect(),
        line: None,
        t0_ms: t0,
    };
    if u.points < MIN_POINTS || (t1 - t0) < 30 * 86_400_000 {
        return u;
    }
    let Some(l) = fit(sums) else { return u };
    let a = l.intercept;
    if a <= 0.0 {
        return u;
    }
    // Relative to the unit's own commissioning value a: y/a = 1 + (b/a)·x.
    u.line = Some(l);
    u.series = pts.iter().map(|p| (x(p.0), p.1 / a)).collect();
    u.last_ratio = last_raw / a;
    u.rate_pct_per_year = Some(l.slope / a * 100.0);
    u.rate_sd = Some(l.slope_sd / a * 100.0);
    u.scatter_pct = Some(l.residual_sd / a * 100.0);
    let x_last = x(t1);
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
    let xbar = (sums.st as f64 / sums.n as f64 - t0 as f64) / YEAR_MS;
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
                                       // C/C0 falls 10 % per year, measured daily for two years (a line, rounded to whole ppm).
        let mut sums = UnitSums::default();
        let mut pts = Vec::new();
        for d in 0..730u32 {
            let t = start + i64::from(d) * day;
            let ppm = (-0.1 * (t - start) as f64 / YEAR_MS * 1e6).round() as i32;
            sums.add(t, d, ppm);
            pts.push((t, 1.0 + f64::from(ppm) * 1e-6));
        }
        let u = trend("fleet".into(), 5, &sums, &pts, 0.8, start + 800 * day);
        let rate = u.rate_pct_per_year.unwrap_or(0.0);
        // Rounding to whole ppm moves the slope by a few 1e-8 per year at most.
        assert!((rate + 10.0).abs() < 1e-4, "{rate}");
        // 20 % loss at 10 %/yr: two years after the first measurement.
        let crossing = u.forecast_ms.map_or(0, |f| f - start);
        assert!((crossing as f64 - 2.0 * YEAR_MS).abs() < day as f64, "{crossing}");
        assert!(matches!(u.status, Status::AtRisk | Status::BeyondLimit), "{:?}", u.status);
        assert!(unit_svg(&u, 0.8).contains("end of life 0.80"));
    }

    /// The fit from exact sums equals the two-pass fit (`stats::fit_line`,
    /// checked against NIST StRD Norris) on the same points.
    #[test]
    fn the_fit_from_sums_matches_the_two_pass_fit() {
        let start = 1_750_000_000_000i64;
        let mut sums = UnitSums::default();
        let (mut x, mut y) = (Vec::new(), Vec::new());
        for i in 0..400u32 {
            // A decline with a wobble; times 6 h to 3 days apart.
            let t = start + i64::from(i) * 21_600_000 * i64::from(1 + i % 12);
            let ppm = -(i64::from(i) * 37) as i32 + ((i * 7919) % 2001) as i32 - 1000;
            sums.add(t, i, ppm);
            x.push((t - start) as f64 / YEAR_MS);
            y.push(1.0 + f64::from(ppm) * 1e-6);
        }
        let (a, b) = (fit(&sums), stats::fit_line(&x, &y));
        let (Some(a), Some(b)) = (a, b) else { panic!("no fit") };
        for (p, q) in [
            (a.intercept, b.intercept),
            (a.slope, b.slope),
            (a.slope_sd, b.slope_sd),
            (a.intercept_sd, b.intercept_sd),
            (a.residual_sd, b.residual_sd),
        ] {
            assert!((p - q).abs() <= 1e-9 * q.abs().max(1e-12), "{p} vs {q}");
        }
    }
}
