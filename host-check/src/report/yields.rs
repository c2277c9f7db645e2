//! `rchold yield`: what a fixture's measurements say about production —
//! counts per verdict, yield per station, batch and day, the capability of
//! the hold against its pass window (Cp/Cpk, NIST/SEMATECH e-Handbook
//! §6.1.6), a histogram, the rejects with their cause hints, and the `f64`
//! re-check: every verdict the firmware gave in fixed point, recomputed from
//! the stage file with the independent `f64` reference.
//!
//! Everything is accumulated in one pass (memory grows with the number of
//! stations, batches and days, not with the number of records; reading logs,
//! [`tally_logs`] also keeps 8 bytes per line to find repeated keys).

use std::collections::HashMap;
use std::fmt::Write as _;
use std::io::Write;
use std::path::Path;
use std::sync::Arc;

use rayon::prelude::*;

use hold_firmware::record::Record;
use hold_firmware::{Hint, Verdict};
use serde::Serialize;

use crate::data::codes::VERDICTS;
use crate::data::store::Setup;
use crate::data::summary::{self, Cell, HoldSums};
use crate::data::{codes, log, time};
use crate::fmt::si;
use crate::reference::{self, StageF};
use crate::report::chart::{self, Histogram, Ink, Mark};
use crate::report::stats::{self, Moments};
use crate::stage::file::{self as stagefile, Purpose, StageFile};
use crate::Error;

pub use crate::data::summary::BINS;

/// The window recomputed with the `f64` reference.
#[derive(Debug, Clone, Serialize)]
pub struct RecheckWindow {
    /// Setup name.
    pub setup: String,
    /// Which window of the stage file the stored one is (the fixture's when
    /// it is neither).
    pub purpose: Purpose,
    /// Shortest corner hold, s (reference).
    pub min_s: f64,
    /// Longest corner hold, s (reference).
    pub max_s: f64,
    /// Passing holds from, ticks (reference, widened as the firmware widens).
    pub hold_min_ticks: u64,
    /// Passing holds to, ticks.
    pub hold_max_ticks: u64,
    /// The firmware window stored with the setup, ticks.
    pub stored_ticks: (u64, u64),
    /// The stored window is not the stage file's (set by hand, as on field
    /// units that accept any hold): verdicts are judged against the stored one.
    pub custom: bool,
    /// Shortest corner turn-on latency, s (reference).
    pub on_min_s: f64,
    /// Longest corner turn-on latency, s (reference).
    pub on_max_s: f64,
    /// Passing turn-on latencies from, ticks (reference, widened).
    pub on_min_ticks: u64,
    /// Passing turn-on latencies to, ticks.
    pub on_max_ticks: u64,
}

struct Checker {
    window: RecheckWindow,
    /// The stage file, for the diagnosis of rejects.
    file: StageFile,
    stage: StageF,
    clock_hz: f64,
    /// Turn-on latency of the nominal stage, s.
    on_nominal_s: f64,
    /// The shortest nominal latency, ticks, that tells parts apart (ten polls and a tick).
    resolution_ticks: u64,
}

impl Checker {
    /// Builds the `f64` windows of a setup: the same corners (the spread's
    /// parameter extremes), each evaluated by the reference; widened by the
    /// guard, one poll and one tick on each side as `Config::from_window` does.
    fn new(setup: &Setup) -> Result<Checker, String> {
        let sf = stagefile::parse(Path::new(&setup.name), &setup.stage_toml).map_err(|e| e.to_string())?;
        let clock = f64::from(setup.clock_hz);
        let poll = hold_firmware::poll_ticks(setup.poll_ns, setup.clock_hz);
        let ticks = |s: f64| (s * clock).round() as u64;
        // The stored window is the fixture's or the field's: recompute both, keep the one it is.
        let mut best = None;
        for purpose in [Purpose::Fixture, Purpose::Field] {
            let t = crate::design::window::corner_times(&sf, &sf.spread_for(purpose))?;
            let (ref_min, ref_max) = hold_firmware::widen(ticks(t.hold.0), ticks(t.hold.1), setup.guard_ppm, poll);
            // Rounding may move an edge by a tick; more than that is another window.
            let matches = ref_min.abs_diff(setup.hold_min_ticks) <= 2 && ref_max.abs_diff(setup.hold_max_ticks) <= 2;
            if matches || best.is_none() {
                best = Some((purpose, t, ref_min, ref_max, !matches));
            }
            if matches {
                break;
            }
        }
        let Some((purpose, t, ref_min, ref_max, custom)) = best else {
            return Err("no window".into());
        };
        let nominal = reference::evaluate(&StageF::from(&sf.stage)).map_err(|e| format!("{e:?}"))?;
        // Until turn-on the firmware polls finer; its latency window is widened by that poll.
        let on_poll_ns = hold_firmware::on_poll_ns((nominal.on_latency * 1e9) as u64, setup.poll_ns, setup.clock_hz);
        let on_poll = hold_firmware::poll_ticks(on_poll_ns, setup.clock_hz);
        let (on_min, on_max) = hold_firmware::widen(ticks(t.on.0), ticks(t.on.1), setup.guard_ppm, on_poll);
        Ok(Checker {
            window: RecheckWindow {
                setup: setup.name.clone(),
                purpose,
                min_s: t.hold.0,
                max_s: t.hold.1,
                hold_min_ticks: ref_min,
                hold_max_ticks: ref_max,
                stored_ticks: (setup.hold_min_ticks, setup.hold_max_ticks),
                custom,
                on_min_s: t.on.0,
                on_max_s: t.on.1,
                on_min_ticks: on_min,
                on_max_ticks: on_max,
            },
            stage: StageF::from(&sf.stage),
            file: sf,
            clock_hz: clock,
            on_nominal_s: nominal.on_latency,
            resolution_ticks: (on_poll + 1) * 10,
        })
    }

    /// The capacitance deviation from nominal the reference infers from a
    /// hold, ppm.
    fn implied_c_ppm(&self, hold_ticks: u64) -> Option<f64> {
        let c = reference::inverse_c(&self.stage, hold_ticks as f64 / self.clock_hz).ok()?;
        Some((c / self.stage.c - 1.0) * 1e6)
    }

    /// Which part the reference blames for a reject's hold and turn-on
    /// (`design::diagnose`), in a few words: "C 432.5 nF (E12 470.0 nF?)",
    /// "R or falling threshold", "no single part". None without a hold.
    fn reads(&self, r: &Record) -> Option<String> {
        let secs = |t: u64| t as f64 / self.clock_hz;
        // Only where the windows decided: chatter or a timeout says nothing about a part's value.
        if !r.verdict.needs_hold() {
            return None;
        }
        let hold = secs(r.hold_ticks.filter(|&h| h > 0)?);
        // One turn-on poll and a tick: the resolution a latency was read with.
        let resolution = secs(self.resolution_ticks / 10);
        let d = crate::design::diagnose::diagnose(&self.file, hold, r.on_ticks.map(secs), resolution).ok()?;
        Some(d.short())
    }

    /// A latency with the nominal one, ticks, when the nominal latency is
    /// at least ten turn-on polls (and a tick) long — the firmware's rule
    /// (`Config::on_reading`).
    fn on_reading(&self, on_ticks: u64) -> Option<(u64, u64)> {
        let nominal = (self.on_nominal_s * self.clock_hz).round() as u64;
        (nominal > 0 && nominal >= self.resolution_ticks).then_some((on_ticks, nominal))
    }

    /// The verdict and hint the reference gives a hold and a turn-on
    /// latency (`None`: not judged), for the verdicts the windows decide.
    /// A custom (hand-set) window judges no latency.
    fn judge(&self, on_ticks: Option<u64>, hold_ticks: u64) -> (Verdict, Hint) {
        let w = &self.window;
        let (min, max) = if w.custom { w.stored_ticks } else { (w.hold_min_ticks, w.hold_max_ticks) };
        let on = if w.custom { None } else { on_ticks };
        let v = Verdict::of_times(on, hold_ticks, w.on_min_ticks, w.on_max_ticks, min, max);
        if v.passes() {
            return (v, Hint::None);
        }
        let start_failed = matches!(v, Verdict::FastStart | Verdict::SlowStart);
        if !start_failed && hold_ticks.saturating_mul(20) < min {
            return (v, Hint::OpenCapacitorOrDiode);
        }
        let ratio = on.and_then(|t| self.on_reading(t));
        let hint = match self.implied_c_ppm(hold_ticks) {
            Some(dev) => Hint::from_times(dev.round() as i64, ratio, start_failed),
            None if start_failed => Hint::ChargePath,
            None => Hint::WrongPart,
        };
        (v, hint)
    }
}

/// Judges holds that a log left unjudged, against a stored setup: the
/// verdict by the stored window (the one the station used), the hint as
/// the `f64` re-check gives it.
pub struct HoldJudge {
    checker: Checker,
    window: (u64, u64),
    clock_hz: u32,
}

impl HoldJudge {
    /// The judge of a setup.
    ///
    /// # Errors
    /// [`Error::Input`] when the setup's stage file cannot be evaluated.
    pub fn new(setup: &Setup) -> Result<HoldJudge, Error> {
        let checker = Checker::new(setup).map_err(|e| Error::Input(format!("{}: {e}", setup.name)))?;
        Ok(HoldJudge { checker, window: (setup.hold_min_ticks, setup.hold_max_ticks), clock_hz: setup.clock_hz })
    }

    /// Fills in a line's empty verdict and hint.
    ///
    /// # Errors
    /// A message for a line the setup cannot judge (no hold, another clock).
    pub fn settle(&self, line: &mut log::Line<'_>) -> Result<(), String> {
        if !line.unjudged() {
            return Ok(());
        }
        let r = &mut line.record;
        if r.clock_hz != self.clock_hz {
            return Err(format!(
                "clock_hz {} differs from the stored setup's {} Hz: the hold cannot be judged against it",
                r.clock_hz, self.clock_hz
            ));
        }
        let Some(hold) = r.hold_ticks else {
            return Err("hold_ticks is empty: there is no hold to judge".into());
        };
        if line.verdict_empty {
            let w = &self.checker.window;
            let on = if w.custom { None } else { r.on_ticks };
            r.verdict = Verdict::of_times(on, hold, w.on_min_ticks, w.on_max_ticks, self.window.0, self.window.1);
        }
        if line.hint_empty {
            r.hint = if r.verdict.passes() { Hint::None } else { self.checker.judge(r.on_ticks, hold).1 };
        }
        line.verdict_empty = false;
        line.hint_empty = false;
        crate::data::validate::record(&line.record).map_err(|e| e.to_string())
    }
}

/// The message for an unjudged line when no setup is stored.
pub const NO_JUDGE: &str =
    "verdict or hint is empty and no stage is given to judge the hold against (accepted: a verdict and a hint, or --stage)";

/// What a record's hold is judged against: the pass window and the
/// product's specification, s.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
struct Limits {
    window_s: Option<(f64, f64)>,
    spec_s: Option<(f64, f64)>,
}

/// Figures of one station (or of all).
#[derive(Debug, Clone, Serialize)]
pub struct Group {
    /// Station name, or "all".
    pub name: String,
    /// Measurements.
    pub total: u64,
    /// Count per verdict, in the order of [`codes::VERDICTS`].
    pub verdicts: [u64; codes::VERDICTS.len()],
    /// Hold, s, of the boards without a gross fault (verdict within window,
    /// short or long, hint not wrong part or open capacitor).
    pub hold_s: Moments,
    /// Gross faults left out of the capability.
    pub gross: u64,
    /// Pass window, s (from the setup), when known.
    pub window_s: Option<(f64, f64)>,
    /// Cp, Cpk … of the hold against the window.
    #[serde(skip)]
    pub capability: Option<stats::Capability>,
    /// Cp.
    pub cp: Option<f64>,
    /// Cpk.
    pub cpk: Option<f64>,
    /// The product's specification of the hold, s (the stage file's `[spec]`).
    pub spec_s: Option<(f64, f64)>,
    /// Cp against the specification.
    pub spec_cp: Option<f64>,
    /// Cpk against the specification.
    pub spec_cpk: Option<f64>,
    /// Histogram of the hold over [`Group::hist_range_s`].
    pub bins: Vec<u64>,
    /// Range of the histogram, s.
    pub hist_range_s: (f64, f64),
    /// Holds below and above the histogram's range.
    pub outside_hist: (u64, u64),
}

impl Group {
    fn new(name: &str) -> Group {
        Group {
            name: name.to_owned(),
            total: 0,
            verdicts: [0; codes::VERDICTS.len()],
            hold_s: Moments::default(),
            gross: 0,
            window_s: None,
            capability: None,
            cp: None,
            cpk: None,
            spec_s: None,
            spec_cp: None,
            spec_cpk: None,
            bins: Vec::new(),
            hist_range_s: (0.0, 0.0),
            outside_hist: (0, 0),
        }
    }

    /// Passing measurements.
    #[must_use]
    pub fn passed(&self) -> u64 {
        self.verdicts.first().copied().unwrap_or(0)
    }

    /// The station table's cells: name, measured, passed, yield, hold mean,
    /// hold σ, Cp, Cpk (a dash where there is no value).
    #[must_use]
    pub fn cells(&self) -> [String; 8] {
        [
            self.name.clone(),
            self.total.to_string(),
            self.passed().to_string(),
            pct(self.passed(), self.total),
            if self.hold_s.n > 0 { si(self.hold_s.mean, "s") } else { "–".into() },
            if self.hold_s.n > 1 { si(self.hold_s.sd(), "s") } else { "–".into() },
            opt2(self.cp),
            opt2(self.cpk),
        ]
    }

    /// The group of `cells` (in the canonical order of [`Tally::finish`]):
    /// counts summed, the holds' exact sums merged per clock and turned into
    /// moments in clock order, the histogram of the first window met (cells
    /// against another window are counted but not drawn).
    fn of<'a>(
        name: &str,
        cells: impl Iterator<Item = (&'a CellKey, &'a Cell)>,
        limits: impl Fn(&CellKey) -> Limits,
    ) -> Group {
        let mut g = Group::new(name);
        let mut per_clock: std::collections::BTreeMap<u32, HoldSums> = std::collections::BTreeMap::new();
        for (k, c) in cells {
            for (a, b) in g.verdicts.iter_mut().zip(c.verdicts) {
                *a += b;
            }
            g.gross += c.gross;
            per_clock.entry(k.clock_hz).or_default().merge(&c.holds);
            let l = limits(k);
            if g.spec_s.is_none() {
                g.spec_s = l.spec_s;
            }
            if g.window_s.is_none() && !c.bins.is_empty() {
                if let Some(w) = l.window_s {
                    g.window_s = Some(w);
                    g.hist_range_s = summary::hist_range(w);
                    g.bins = vec![0; c.bins.len()];
                }
            }
            if g.window_s.is_some() && g.window_s == l.window_s && g.bins.len() == c.bins.len() {
                for (a, b) in g.bins.iter_mut().zip(&c.bins) {
                    *a += b;
                }
                g.outside_hist.0 += c.outside.0;
                g.outside_hist.1 += c.outside.1;
            }
        }
        g.total = g.verdicts.iter().sum();
        for (clock, s) in per_clock {
            if let Some(m) = s.moments(clock) {
                g.hold_s.merge(&m);
            }
        }
        g.finish();
        g
    }

    fn finish(&mut self) {
        self.hold_s.settle();
        let sd = self.hold_s.sd();
        if self.hold_s.n < 2 || sd <= 0.0 {
            return;
        }
        if let Some((lo, hi)) = self.window_s {
            let c = stats::capability(lo, hi, self.hold_s.mean, sd);
            self.cp = Some(c.cp);
            self.cpk = Some(c.cpk);
            self.capability = Some(c);
        }
        if let Some((lo, hi)) = self.spec_s {
            let c = stats::capability(lo, hi, self.hold_s.mean, sd);
            self.spec_cp = Some(c.cp);
            self.spec_cpk = Some(c.cpk);
        }
    }
}

/// A failing measurement.
#[derive(Debug, Clone, Serialize)]
pub struct Reject {
    /// Station.
    pub station: String,
    /// Batch.
    pub batch: String,
    /// When, ms since the epoch.
    pub measured_ms: i64,
    /// The record.
    #[serde(skip)]
    pub record: Record,
    /// Unit.
    pub unit: u32,
    /// Verdict name.
    pub verdict: &'static str,
    /// Hint name.
    pub hint: &'static str,
    /// Hold, s.
    pub hold_s: Option<f64>,
    /// Implied capacitance deviation, %.
    pub c_dev_pct: Option<f64>,
    /// Which part the `f64` diagnosis blames, in a few words (with a stored stage).
    pub reads: Option<String>,
    /// The setup it was judged against (for the diagnosis, made when the report is finished).
    #[serde(skip)]
    setup_id: Option<i64>,
}

/// A verdict the reference does not confirm.
#[derive(Debug, Clone, Serialize)]
pub struct Disagreement {
    /// Station.
    pub station: String,
    /// Unit.
    pub unit: u32,
    /// Seq.
    pub seq: u32,
    /// Hold, ticks.
    pub hold_ticks: u64,
    /// Turn-on latency, ticks, when measured.
    pub on_ticks: Option<u64>,
    /// Firmware verdict and hint.
    pub firmware: (&'static str, &'static str),
    /// Reference verdict and hint.
    pub reference: (&'static str, &'static str),
    /// Only the hint differs (the verdicts agree): reported, not an error.
    pub hint_only: bool,
}

/// The re-check's summary.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Recheck {
    /// Windows the reference computed, per setup.
    pub windows: Vec<RecheckWindow>,
    /// Setups that could not be re-checked, and why.
    pub setup_errors: Vec<String>,
    /// Verdicts re-checked.
    pub checked: u64,
    /// Verdicts and hints the reference confirms.
    pub agreed: u64,
    /// Records without a setup or a hold-decided verdict (not re-checked).
    pub not_checkable: u64,
    /// Disagreements (the first [`Tally::keep`]), verdicts and hints.
    pub disagreements: Vec<Disagreement>,
    /// Verdicts the reference disagrees with, in all (an error: exit 1).
    pub disagreements_total: u64,
    /// Records whose verdict the reference confirms but whose hint it
    /// would give otherwise (reported with the reference's hint; not an error).
    pub hints_differ: u64,
}

/// Yield per batch or per day.
#[derive(Debug, Clone, Serialize)]
pub struct Part {
    /// Station.
    pub station: String,
    /// Batch or date.
    pub key: String,
    /// Measurements.
    pub total: u64,
    /// Passing.
    pub passed: u64,
    /// The day's start, UTC ms (days only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub day_ms: Option<i64>,
    /// The day's mean hold over the holds the capability counts, s (days only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hold_mean_s: Option<f64>,
}

/// The report.
#[derive(Debug, Clone, Serialize)]
pub struct YieldReport {
    /// Per station.
    pub stations: Vec<Group>,
    /// All stations.
    pub all: Group,
    /// Per station and batch.
    pub batches: Vec<Part>,
    /// Per station and day (UTC).
    pub days: Vec<Part>,
    /// The first rejects.
    pub rejects: Vec<Reject>,
    /// Rejects in all.
    pub rejects_total: u64,
    /// The `f64` re-check (`None` when switched off).
    pub recheck: Option<Recheck>,
    /// First and last measurement, ms.
    pub span_ms: Option<(i64, i64)>,
}

/// Where rejects go as log lines.
enum RejectLog {
    None,
    Writer(Box<dyn Write + Send>),
    Buffer(Vec<u8>),
}

/// What a [`Cell`] of a tally groups: station and batch (indices into the
/// tally's names), UTC day, setup and clock.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct CellKey {
    station: usize,
    batch: usize,
    day: i64,
    setup_id: Option<i64>,
    clock_hz: u32,
}

/// One-pass accumulator of the yield report: every record lands in one
/// [`Cell`] per (station, batch, day, setup, clock) — the same summaries the
/// store keeps at ingest, so a report from the store's summaries and one
/// from its rows or logs are the same computation.
pub struct Tally {
    stations: Vec<String>,
    index: HashMap<String, usize>,
    last_station: usize,
    batches: Vec<String>,
    batch_index: HashMap<String, usize>,
    /// Per station: the cell it used last.
    station_cell: Vec<usize>,
    cells: Vec<(CellKey, Cell)>,
    cell_index: HashMap<CellKey, usize>,
    windows: Arc<HashMap<i64, Limits>>,
    last_window: (Option<i64>, Limits),
    /// The re-check's judges, shared by the tallies [`Tally::fork`] makes.
    checkers: Arc<HashMap<i64, Checker>>,
    recheck: Option<Recheck>,
    rejects: Vec<Reject>,
    reject_log: RejectLog,
    reject_error: Option<std::io::Error>,
    /// How many rejects and disagreements to keep for the report.
    pub keep: usize,
}

impl Tally {
    /// A tally over records measured against `setups` (by id); `recheck`
    /// switches on the `f64` re-check; `reject_log` receives every reject
    /// as a measurement log line.
    #[must_use]
    pub fn new(setups: &HashMap<i64, Setup>, recheck: bool, reject_log: Option<Box<dyn Write + Send>>) -> Tally {
        let windows = setups
            .iter()
            .map(|(&id, s)| {
                let c = f64::from(s.clock_hz);
                let spec_s = stagefile::parse(Path::new(&s.name), &s.stage_toml).ok().and_then(|sf| sf.spec_s);
                (id, Limits { window_s: Some((s.hold_min_ticks as f64 / c, s.hold_max_ticks as f64 / c)), spec_s })
            })
            .collect();
        let mut checkers = HashMap::new();
        let mut rc = Recheck::default();
        if recheck {
            let mut ids: Vec<&i64> = setups.keys().collect();
            ids.sort();
            for id in ids {
                let Some(s) = setups.get(id) else { continue };
                match Checker::new(s) {
                    Ok(c) => {
                        rc.windows.push(c.window.clone());
                        checkers.insert(*id, c);
                    }
                    Err(e) => rc.setup_errors.push(format!("setup {} ({}): {e}", id, s.name)),
                }
            }
        }
        let mut reject_log = reject_log.map_or(RejectLog::None, RejectLog::Writer);
        let reject_error = match &mut reject_log {
            RejectLog::Writer(w) => log::write_header(w).err(),
            _ => None,
        };
        let mut t = Tally::empty(Arc::new(windows), Arc::new(checkers), recheck.then_some(rc), reject_log);
        t.reject_error = reject_error;
        t
    }

    fn empty(
        windows: Arc<HashMap<i64, Limits>>,
        checkers: Arc<HashMap<i64, Checker>>,
        recheck: Option<Recheck>,
        reject_log: RejectLog,
    ) -> Tally {
        Tally {
            stations: Vec::new(),
            index: HashMap::new(),
            last_station: usize::MAX,
            batches: Vec::new(),
            batch_index: HashMap::new(),
            station_cell: Vec::new(),
            cells: Vec::new(),
            cell_index: HashMap::new(),
            last_window: (None, Limits::default()),
            windows,
            checkers,
            recheck,
            rejects: Vec::new(),
            reject_log,
            reject_error: None,
            keep: 50,
        }
    }

    /// An empty tally over the same setups, sharing this one's windows and
    /// re-check judges (which take time to build): for one piece of work
    /// among several, merged back with [`Tally::merge`]. Its rejects are kept
    /// in memory when this one writes a reject log.
    #[must_use]
    pub fn fork(&self) -> Tally {
        let log =
            if matches!(self.reject_log, RejectLog::None) { RejectLog::None } else { RejectLog::Buffer(Vec::new()) };
        let recheck = self.recheck.as_ref().map(|_| Recheck::default());
        let mut t = Tally::empty(Arc::clone(&self.windows), Arc::clone(&self.checkers), recheck, log);
        t.keep = self.keep;
        t
    }

    fn station(&mut self, name: &str) -> usize {
        if let Some(g) = self.stations.get(self.last_station) {
            if g == name {
                return self.last_station;
            }
        }
        // A handful of stations is the rule: look through them before hashing.
        let found = if self.stations.len() <= 16 {
            self.stations.iter().position(|g| g == name)
        } else {
            self.index.get(name).copied()
        };
        let i = found.unwrap_or_else(|| {
            self.stations.push(name.to_owned());
            self.index.insert(name.to_owned(), self.stations.len() - 1);
            self.station_cell.push(usize::MAX);
            self.stations.len() - 1
        });
        self.last_station = i;
        i
    }

    fn batch(&mut self, name: &str) -> usize {
        if let Some(&i) = self.batch_index.get(name) {
            return i;
        }
        self.batches.push(name.to_owned());
        self.batch_index.insert(name.to_owned(), self.batches.len() - 1);
        self.batches.len() - 1
    }

    /// The cell of a record: the station's last one when the key matches
    /// (consecutive records of a log mostly share it), else by hash.
    fn cell(&mut self, si: usize, batch: &str, day: i64, setup_id: Option<i64>, clock_hz: u32) -> usize {
        let last = self.station_cell.get(si).copied().unwrap_or(usize::MAX);
        if let Some((k, _)) = self.cells.get(last) {
            if k.day == day
                && k.setup_id == setup_id
                && k.clock_hz == clock_hz
                && self.batches.get(k.batch).is_some_and(|b| b == batch)
            {
                return last;
            }
        }
        let key = CellKey { station: si, batch: self.batch(batch), day, setup_id, clock_hz };
        let i = *self.cell_index.entry(key).or_insert_with(|| {
            self.cells.push((key, Cell::default()));
            self.cells.len() - 1
        });
        if let Some(x) = self.station_cell.get_mut(si) {
            *x = i;
        }
        i
    }

    fn limits(&mut self, setup_id: Option<i64>) -> Limits {
        match self.last_window {
            (id, w) if id == setup_id => w,
            _ => {
                let w = setup_id.and_then(|id| self.windows.get(&id)).copied().unwrap_or_default();
                self.last_window = (setup_id, w);
                w
            }
        }
    }

    /// Adds one measurement.
    pub fn add(&mut self, station: &str, batch: &str, measured_ms: i64, r: &Record, setup_id: Option<i64>) {
        let si = self.station(station);
        let window = self.limits(setup_id);
        // The re-check's own judgement, where there is a stage: its hint decides what is a
        // gross fault.
        let decided = r.verdict.needs_hold();
        let judged = match (setup_id.and_then(|id| self.checkers.get(&id)), r.hold_ticks) {
            (Some(c), Some(h)) if decided => Some(c.judge(r.on_ticks, h)),
            _ => None,
        };
        let gross = summary::is_gross(judged.map_or(r.hint, |(_, h)| h));
        let ci = self.cell(si, batch, summary::day_of(measured_ms), setup_id, r.clock_hz);
        if let Some((_, c)) = self.cells.get_mut(ci) {
            c.add(r, measured_ms, window.window_s, gross);
        }
        if !r.verdict.passes() {
            self.add_reject(station, batch, measured_ms, r, setup_id);
        }
        if let Some(rc) = self.recheck.as_mut() {
            match (judged, r.hold_ticks) {
                (Some((v, hint)), Some(h)) => {
                    rc.checked += 1;
                    let verdict_agrees = v == r.verdict;
                    if verdict_agrees {
                        rc.agreed += 1;
                    } else {
                        rc.disagreements_total += 1;
                    }
                    if verdict_agrees && hint != r.hint {
                        rc.hints_differ += 1;
                    }
                    if (!verdict_agrees || hint != r.hint) && rc.disagreements.len() < self.keep {
                        rc.disagreements.push(Disagreement {
                            station: station.to_owned(),
                            unit: r.unit_id,
                            seq: r.seq,
                            hold_ticks: h,
                            on_ticks: r.on_ticks,
                            firmware: (r.verdict.name(), r.hint.name()),
                            reference: (v.name(), hint.name()),
                            hint_only: verdict_agrees,
                        });
                    }
                }
                _ => rc.not_checkable += 1,
            }
        }
    }

    /// Adds a summary the store kept: `cell` of (station, batch, UTC day,
    /// setup, clock). Its rejects come separately ([`Tally::add_reject`]).
    pub fn add_cell(
        &mut self,
        station: &str,
        batch: &str,
        day: i64,
        setup_id: Option<i64>,
        clock_hz: u32,
        cell: &Cell,
    ) {
        let si = self.station(station);
        let ci = self.cell(si, batch, day, setup_id, clock_hz);
        if let Some((_, c)) = self.cells.get_mut(ci) {
            c.merge(cell);
        }
    }

    /// Lists a failing measurement (the first [`Tally::keep`] in the report,
    /// every one in the reject log) without counting it: [`Tally::add`]
    /// counts and lists; a report from summaries counts with
    /// [`Tally::add_cell`] and lists the stored rejects with this.
    pub fn add_reject(&mut self, station: &str, batch: &str, measured_ms: i64, r: &Record, setup_id: Option<i64>) {
        if self.rejects.len() < self.keep {
            self.rejects.push(Reject {
                station: station.to_owned(),
                batch: batch.to_owned(),
                measured_ms,
                record: *r,
                unit: r.unit_id,
                verdict: r.verdict.name(),
                hint: r.hint.name(),
                hold_s: r.hold_ticks.map(|h| h as f64 / f64::from(r.clock_hz.max(1))),
                c_dev_pct: r.c_deviation_ppm.map(|d| f64::from(d) / 1e4),
                reads: None,
                setup_id,
            });
        }
        if self.reject_error.is_none() {
            self.reject_error = match &mut self.reject_log {
                RejectLog::None => None,
                RejectLog::Writer(w) => log::write_line(w, measured_ms, station, batch, r).err(),
                RejectLog::Buffer(v) => log::write_line(v, measured_ms, station, batch, r).err(),
            };
        }
    }

    /// Whether the reject list is full and no reject log is written: a
    /// report from summaries stops reading rejects here.
    #[must_use]
    pub fn rejects_full(&self) -> bool {
        self.rejects.len() >= self.keep && matches!(self.reject_log, RejectLog::None)
    }

    /// Adds everything another tally (over later records) holds.
    pub fn merge(&mut self, o: Tally) {
        for (k, c) in &o.cells {
            let (Some(station), Some(batch)) = (o.stations.get(k.station), o.batches.get(k.batch)) else { continue };
            self.add_cell(station, batch, k.day, k.setup_id, k.clock_hz, c);
        }
        let room = self.keep.saturating_sub(self.rejects.len());
        self.rejects.extend(o.rejects.into_iter().take(room));
        if let (Some(a), Some(b)) = (self.recheck.as_mut(), o.recheck) {
            a.checked += b.checked;
            a.agreed += b.agreed;
            a.not_checkable += b.not_checkable;
            a.disagreements_total += b.disagreements_total;
            a.hints_differ += b.hints_differ;
            let room = self.keep.saturating_sub(a.disagreements.len());
            a.disagreements.extend(b.disagreements.into_iter().take(room));
        }
        if self.reject_error.is_none() {
            self.reject_error = o.reject_error;
        }
        if let RejectLog::Buffer(v) = o.reject_log {
            if self.reject_error.is_none() {
                self.reject_error = match &mut self.reject_log {
                    RejectLog::None => None,
                    RejectLog::Writer(w) => w.write_all(&v).err(),
                    RejectLog::Buffer(mine) => {
                        mine.extend_from_slice(&v);
                        None
                    }
                };
            }
        }
    }

    /// The report. Cells are taken in one canonical order — station, setup,
    /// clock, batch, day — so the figures do not depend on the order the
    /// records came in.
    ///
    /// # Errors
    /// Writing the reject log failed.
    pub fn finish(mut self) -> std::io::Result<YieldReport> {
        if let Some(e) = self.reject_error.take() {
            return Err(e);
        }
        if let RejectLog::Writer(w) = &mut self.reject_log {
            w.flush()?;
        }
        let (stations, batch_names, windows) = (&self.stations, &self.batches, &self.windows);
        let sname = |i: usize| stations.get(i).map_or("", String::as_str);
        let bname = |i: usize| batch_names.get(i).map_or("", String::as_str);
        let mut cells: Vec<&(CellKey, Cell)> = self.cells.iter().filter(|(_, c)| c.total() > 0).collect();
        cells.sort_by(|(a, _), (b, _)| {
            (sname(a.station), a.setup_id, a.clock_hz, bname(a.batch), a.day).cmp(&(
                sname(b.station),
                b.setup_id,
                b.clock_hz,
                bname(b.batch),
                b.day,
            ))
        });
        let limits = |k: &CellKey| k.setup_id.and_then(|id| windows.get(&id)).copied().unwrap_or_default();
        // Stations in the order they came.
        let mut out_stations = Vec::new();
        for (i, name) in stations.iter().enumerate() {
            let mine = cells.iter().filter(|(k, _)| k.station == i).map(|(k, c)| (k, c));
            let g = Group::of(name, mine, limits);
            if g.total > 0 {
                out_stations.push(g);
            }
        }
        let all = Group::of("all", cells.iter().map(|(k, c)| (k, c)), limits);
        let mut batches: std::collections::BTreeMap<(&str, &str), (u64, u64)> = std::collections::BTreeMap::new();
        let mut days: std::collections::BTreeMap<(&str, i64), (u64, u64, f64, u64)> = std::collections::BTreeMap::new();
        let mut span: Option<(i64, i64)> = None;
        for (k, c) in &cells {
            let b = batches.entry((sname(k.station), bname(k.batch))).or_default();
            b.0 += c.total();
            b.1 += c.passed();
            let d = days.entry((sname(k.station), k.day)).or_default();
            d.0 += c.total();
            d.1 += c.passed();
            // The day's mean hold, over the holds the capability counts (no gross faults).
            if !c.holds.saturated {
                d.2 += c.holds.sum as f64 / f64::from(k.clock_hz.max(1));
                d.3 += c.holds.n;
            }
            span = Some(span.map_or((c.first_ms, c.last_ms), |(a, b)| (a.min(c.first_ms), b.max(c.last_ms))));
        }
        let batches = batches
            .into_iter()
            .map(|((s, b), (total, passed))| Part {
                station: s.to_owned(),
                key: b.to_owned(),
                total,
                passed,
                day_ms: None,
                hold_mean_s: None,
            })
            .collect();
        let days = days
            .into_iter()
            .map(|((s, d), (total, passed, sum, n))| Part {
                station: s.to_owned(),
                key: time::date_of(d * summary::DAY_MS),
                total,
                passed,
                day_ms: Some(d * summary::DAY_MS),
                hold_mean_s: (n > 0).then(|| sum / n as f64),
            })
            .collect();
        let rejects_total = all.total - all.passed();
        // Only for the rejects the report keeps (each piece of parallel work kept its
        // own first ones): the inverse and a diagnosis are a few thousand evaluations.
        let checkers = &self.checkers;
        self.rejects.par_iter_mut().for_each(|j| {
            if let Some(c) = j.setup_id.and_then(|id| checkers.get(&id)) {
                if j.c_dev_pct.is_none() {
                    j.c_dev_pct = j.record.hold_ticks.and_then(|h| c.implied_c_ppm(h)).map(|ppm| ppm / 1e4);
                }
                j.reads = c.reads(&j.record);
            }
        });
        Ok(YieldReport {
            stations: out_stations,
            all,
            batches,
            days,
            rejects: self.rejects,
            rejects_total,
            recheck: self.recheck,
            span_ms: span,
        })
    }
}

/// Where a reject log goes: called once per pass over the logs, each call
/// starting the file afresh (`None`: no reject log).
pub type RejectSink<'a> = dyn FnMut() -> Result<Option<Box<dyn Write + Send>>, Error> + 'a;

/// Lines left out as repeats: (file, piece, line within the piece).
type Skip = std::collections::HashSet<(usize, usize, u64)>;

/// A line's key — station, unit, boot, sequence number — hashed: the
/// station's bytes by FNV-1a, then the numbers, each round finished by
/// SplitMix64's mixer (a bijection of 64 bits: two keys of one station that
/// differ only in `seq` never share a hash). Equal hashes are only
/// candidates: [`Pass::exact_repeats`] compares the keys themselves.
fn key_hash(station: &str, r: &Record) -> u64 {
    fn mix(mut z: u64) -> u64 {
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    let mut h: u64 = 0xCBF2_9CE4_8422_2325;
    for &b in station.as_bytes() {
        h = (h ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01B3);
    }
    h = mix(h ^ (u64::from(r.unit_id) | u64::from(r.boot) << 32));
    mix(h ^ u64::from(r.seq))
}

/// Key hashes by their top byte: one list per value, so that the lists of
/// one value from every piece can be sorted on their own (small, in cache,
/// on every core).
type Buckets = Vec<Vec<u64>>;

/// The hashes that occur more than once in all of `pieces`.
fn repeated(pieces: &[Buckets]) -> std::collections::HashSet<u64> {
    (0..256usize)
        .into_par_iter()
        .flat_map_iter(|b| {
            let mut all: Vec<u64> = pieces.iter().filter_map(|p| p.get(b)).flatten().copied().collect();
            all.sort_unstable();
            let dups: Vec<u64> = all.windows(2).filter_map(|w| (w[0] == w[1]).then_some(w[0])).collect();
            dups
        })
        .collect()
}

/// Reads measurement logs in parallel pieces — each file split at line
/// breaks into one piece per thread, each piece tallied on its own, the
/// tallies merged in file order — and returns the report. Every record is
/// judged against setup `setup_id` of `setups` (when given); `keep` says
/// which records count. Rejects go to the reject log in file order.
///
/// Repeats count as the store counts them (the rule of
/// [`crate::data::store::Content`]): a line whose key (station, unit, boot,
/// seq) and content an earlier line had is left out, before `keep` looks
/// at it; one whose key came with other content counts as a retest. The
/// first pass keeps an 8-byte hash of every line's key (grouped by its top
/// byte, each group sorted on its own, on every core); only if two lines
/// share one are the logs read again: once for the lines of those keys,
/// compared exactly, and once more to tally without the repeats (the
/// reject log written afresh).
///
/// # Errors
/// The first bad line of the first file that has one (file, line, field,
/// accepted range), or a read or write error, as one line.
pub fn tally_logs(
    paths: &[std::path::PathBuf],
    setups: &HashMap<i64, Setup>,
    setup_id: Option<i64>,
    recheck: bool,
    reject_log: &mut RejectSink<'_>,
    keep: &(dyn Fn(&log::Line<'_>) -> bool + Sync),
    threads: usize,
) -> Result<YieldReport, Error> {
    // Lines that leave verdict or hint empty are judged against the given stage's window.
    let judge = setup_id.and_then(|id| setups.get(&id)).map(HoldJudge::new).transpose()?;
    let judge = judge.as_ref();
    let pass = Pass { paths, judge, threads };
    let mut keys = Vec::new();
    let total =
        pass.tally(Tally::new(setups, recheck, reject_log()?), setup_id, keep, &Skip::new(), Some(&mut keys))?;
    let suspects = repeated(&keys);
    drop(keys);
    if suspects.is_empty() {
        return total.finish().map_err(|e| Error::io("rejects.csv", e));
    }
    drop(total);
    let skip = pass.exact_repeats(&suspects)?;
    let total = pass.tally(Tally::new(setups, recheck, reject_log()?), setup_id, keep, &skip, None)?;
    total.finish().map_err(|e| Error::io("rejects.csv", e))
}

/// The logs of one `tally_logs`, read in the same pieces on every pass.
struct Pass<'a> {
    paths: &'a [std::path::PathBuf],
    judge: Option<&'a HoldJudge>,
    threads: usize,
}

impl Pass<'_> {
    /// Calls `each(piece's tally-or-state, line index, line)` for every line of
    /// every piece of every file, the pieces of a file in parallel; returns
    /// each file's pieces' results in order, or the first bad line.
    fn pieces<T: Send>(
        &self,
        start: impl Fn(usize, usize) -> T + Sync,
        each: impl Fn(&mut T, usize, u64, &log::Line<'_>) -> Result<(), String> + Sync,
        mut done: impl FnMut(T),
    ) -> Result<(), Error> {
        for (fi, path) in self.paths.iter().enumerate() {
            let (layout, pieces) = log::split(path, self.threads)?;
            let (start, each) = (&start, &each);
            let results: Vec<Result<T, (u64, log::RangeError)>> = std::thread::scope(|scope| {
                let handles: Vec<_> = pieces
                    .iter()
                    .enumerate()
                    .map(|(pi, &(a, b))| {
                        scope.spawn(move || {
                            let mut t = start(fi, pi);
                            log::read_range(path, layout, a, b, |i, l| each(&mut t, pi, i, l))
                                .map(|_| t)
                                .map_err(|e| (a, e))
                        })
                    })
                    .collect();
                handles
                    .into_iter()
                    .map(|h| {
                        h.join().unwrap_or_else(|_| {
                            Err((0, log::RangeError::Line(0, None, "a reader thread failed".into())))
                        })
                    })
                    .collect()
            });
            for r in results {
                match r {
                    Ok(t) => done(t),
                    Err((_, log::RangeError::Io(e))) => return Err(Error::io(path, e)),
                    Err((start, log::RangeError::Line(i, field, m))) => {
                        let first = log::line_at(path, start).map_err(|e| Error::io(path, e))?;
                        return Err(log::LogError { file: path.clone(), line: first + i, field, message: m }.into());
                    }
                }
            }
        }
        Ok(())
    }

    /// The line as judged (a verdict or hint left empty settled against the stage).
    fn settled<'l>(&self, l: &log::Line<'l>) -> Result<log::Line<'l>, String> {
        let mut l = l.clone();
        if l.unjudged() {
            self.judge.ok_or_else(|| NO_JUDGE.to_owned())?.settle(&mut l)?;
        }
        Ok(l)
    }

    /// One tally over the logs without the lines in `skip`; with `keys`, the
    /// key hashes of every line read (kept or not), by top byte, per piece.
    fn tally(
        &self,
        mut total: Tally,
        setup_id: Option<i64>,
        keep: &(dyn Fn(&log::Line<'_>) -> bool + Sync),
        skip: &Skip,
        mut keys: Option<&mut Vec<Buckets>>,
    ) -> Result<Tally, Error> {
        let hashing = keys.is_some();
        // A fork buffers its rejects when `total` writes a reject log; a Mutex only to share it.
        let proto = std::sync::Mutex::new(total.fork());
        self.pieces(
            |fi, _| {
                let t = proto.lock().unwrap_or_else(std::sync::PoisonError::into_inner).fork();
                (t, fi, if hashing { vec![Vec::new(); 256] } else { Vec::new() })
            },
            |(t, fi, hashes), pi, i, l| {
                if skip.contains(&(*fi, pi, i)) {
                    return Ok(());
                }
                if hashing {
                    let h = key_hash(l.station, &l.record);
                    if let Some(b) = hashes.get_mut((h >> 56) as usize) {
                        b.push(h);
                    }
                }
                if keep(l) {
                    let l = self.settled(l)?;
                    t.add(l.station, l.batch, l.measured_ms, &l.record, setup_id);
                }
                Ok(())
            },
            |(t, _, hashes)| {
                total.merge(t);
                if let Some(k) = keys.as_deref_mut() {
                    k.push(hashes);
                }
            },
        )?;
        Ok(total)
    }

    /// The lines that repeat an earlier line's key and content, among those
    /// whose key hash is in `suspects`, compared exactly in file order.
    fn exact_repeats(&self, suspects: &std::collections::HashSet<u64>) -> Result<Skip, Error> {
        type Candidate = (u64, (String, u32, u32, u32), crate::data::store::Content);
        let mut seen: HashMap<(String, u32, u32, u32), Vec<crate::data::store::Content>> = HashMap::new();
        let mut skip = Skip::new();
        self.pieces(
            |fi, pi| (fi, pi, Vec::<Candidate>::new()),
            |(_, _, found), _, i, l| {
                if suspects.contains(&key_hash(l.station, &l.record)) {
                    let l = self.settled(l)?;
                    let r = &l.record;
                    found.push((i, (l.station.to_owned(), r.unit_id, r.boot, r.seq), crate::data::store::content(r)));
                }
                Ok(())
            },
            |(fi, pi, found)| {
                for (i, key, content) in found {
                    let versions = seen.entry(key).or_default();
                    if versions.contains(&content) {
                        skip.insert((fi, pi, i));
                    } else {
                        versions.push(content);
                    }
                }
            },
        )?;
        Ok(skip)
    }
}

/// `part` as a percentage of `total` to 2 decimals, or a dash.
pub(crate) fn pct(part: u64, total: u64) -> String {
    if total == 0 {
        "–".to_owned()
    } else {
        format!("{:.2} %", 100.0 * part as f64 / total as f64)
    }
}

/// A value to 2 decimals, or a dash.
fn opt2(v: Option<f64>) -> String {
    v.map_or_else(|| "–".to_owned(), |x| format!("{x:.2}"))
}

/// The report as text.
#[must_use]
pub fn render_text(r: &YieldReport, max_rows: usize) -> String {
    let mut o = String::new();
    let _ = writeln!(o, "Fixture yield");
    if let Some((a, b)) = r.span_ms {
        let _ = writeln!(o, "  measured {} … {}", time::format_ms(a), time::format_ms(b));
    }
    let _ = writeln!(o);
    let _ = writeln!(
        o,
        "  {:<16} {:>9} {:>9} {:>9}  {:>10} {:>10} {:>6} {:>6}",
        "station", "measured", "passed", "yield", "hold mean", "hold σ", "Cp", "Cpk"
    );
    for g in r.stations.iter().chain(std::iter::once(&r.all)) {
        let [name, total, passed, yld, mean, sd, cp, cpk] = g.cells();
        let _ = writeln!(o, "  {name:<16} {total:>9} {passed:>9} {yld:>9}  {mean:>10} {sd:>10} {cp:>6} {cpk:>6}");
    }
    let _ = writeln!(o, "\n  verdicts (all stations)");
    for (v, n) in VERDICTS.iter().zip(r.all.verdicts) {
        if n > 0 {
            let _ = writeln!(o, "    {:<14} {:>9}  {:>8}", v.name(), n, pct(n, r.all.total));
        }
    }
    if let Some((lo, hi)) = r.all.window_s {
        let _ = writeln!(
            o,
            "\n  capability against the pass window {} … {} (NIST/SEMATECH e-Handbook §6.1.6);\n  \
             {} gross faults (wrong part, open capacitor) left out",
            si(lo, "s"),
            si(hi, "s"),
            r.all.gross
        );
    }
    if let (Some((lo, hi)), Some(cp), Some(cpk)) = (r.all.spec_s, r.all.spec_cp, r.all.spec_cpk) {
        let _ = writeln!(
            o,
            "  against the product's specification {} … {}: Cp {cp:.2} · Cpk {cpk:.2}",
            si(lo, "s"),
            si(hi, "s")
        );
    }
    let _ = writeln!(o, "\n  per batch");
    for b in r.batches.iter().take(max_rows) {
        let _ = writeln!(o, "    {:<16} {:<14} {:>9} {:>9}", b.station, b.key, b.total, pct(b.passed, b.total));
    }
    if r.batches.len() > max_rows {
        let _ = writeln!(o, "    … {} more", r.batches.len() - max_rows);
    }
    if r.days.len() > 1 {
        let _ = writeln!(o, "\n  per day (UTC)");
        for d in r.days.iter().take(max_rows) {
            let _ = writeln!(o, "    {:<16} {:<14} {:>9} {:>9}", d.station, d.key, d.total, pct(d.passed, d.total));
        }
        if r.days.len() > max_rows {
            let _ = writeln!(o, "    … {} more", r.days.len() - max_rows);
        }
    }
    let _ = writeln!(o, "\n  rejects: {}", r.rejects_total);
    for x in r.rejects.iter().take(max_rows) {
        let line = format!(
            "    {:<12} {:<10} unit {:>8}  {:<13} {:<30} hold {:>10}  C {:>8}  {}",
            x.station,
            x.batch,
            x.unit,
            x.verdict,
            x.hint,
            x.hold_s.map_or_else(|| "–".into(), |h| si(h, "s")),
            x.c_dev_pct.map_or_else(|| "–".into(), |d| format!("{d:+.1} %")),
            x.reads.as_deref().unwrap_or(""),
        );
        let _ = writeln!(o, "{}", line.trim_end());
    }
    if r.rejects_total as usize > r.rejects.len().min(max_rows) {
        let _ = writeln!(o, "    … {} more", r.rejects_total as usize - r.rejects.len().min(max_rows));
    }
    match &r.recheck {
        None => {
            let _ = writeln!(o, "\n  f64 re-check: switched off");
        }
        Some(rc) => {
            let _ = writeln!(
                o,
                "\n  f64 re-check: {} of {} verdicts confirmed by the independent f64 reference; {} disagree; \
                 {} not re-checkable (no setup, or a verdict a hold does not decide)",
                rc.agreed, rc.checked, rc.disagreements_total, rc.not_checkable
            );
            for w in &rc.windows {
                let _ = writeln!(
                    o,
                    "    {}: reference {} window {} … {} ticks (turn-on {} … {} ticks), firmware window {} … {} ticks{}",
                    w.setup,
                    w.purpose.name(),
                    w.hold_min_ticks,
                    w.hold_max_ticks,
                    w.on_min_ticks,
                    w.on_max_ticks,
                    w.stored_ticks.0,
                    w.stored_ticks.1,
                    if w.custom { " (set by hand: verdicts judged against it)" } else { "" }
                );
            }
            for e in &rc.setup_errors {
                let _ = writeln!(o, "    not re-checked: {e}");
            }
            if rc.hints_differ > 0 {
                let _ = writeln!(
                    o,
                    "    {} confirmed verdicts carry another hint than the reference gives (shown below; not an error)",
                    rc.hints_differ
                );
            }
            for d in rc.disagreements.iter().take(max_rows) {
                let _ = writeln!(
                    o,
                    "    {} unit {} seq {} hold {} ticks{}: firmware {}/{}, reference {}/{}{}",
                    d.station,
                    d.unit,
                    d.seq,
                    d.hold_ticks,
                    d.on_ticks.map_or_else(String::new, |t| format!(", turn-on {t}")),
                    d.firmware.0,
                    d.firmware.1,
                    d.reference.0,
                    d.reference.1,
                    if d.hint_only { " (hint only)" } else { "" }
                );
            }
        }
    }
    o
}

/// A station over time: its daily yield and an EWMA chart of its daily
/// mean hold (NIST/SEMATECH e-Handbook §6.3.2.4: λ = 0.2, limits at
/// L = 3 times the asymptotic σ of the EWMA, σ the spread of the daily
/// means, centred on their mean). `None` below three days.
#[must_use]
pub fn station_svgs(r: &YieldReport, station: &str) -> Option<(String, String)> {
    let days: Vec<&Part> = r.days.iter().filter(|d| d.station == station && d.day_ms.is_some()).collect();
    if days.len() < 3 {
        return None;
    }
    let at = |d: &Part| d.day_ms.unwrap_or(0) + 43_200_000;
    let yields = chart::Series {
        points: days.iter().map(|d| (at(d), 100.0 * d.passed as f64 / d.total.max(1) as f64)).collect(),
        ink: Ink::Data,
        dots: false,
        label: Some("daily yield".into()),
    };
    let yield_svg = chart::trend(&chart::Trend {
        title: &format!("{station}: yield per day"),
        y_desc: "yield (%)",
        series: &[yields],
        levels: &[],
        bands: &[],
    });
    let means: Vec<(i64, f64)> = days.iter().filter_map(|d| d.hold_mean_s.map(|m| (at(d), m))).collect();
    let x: Vec<f64> = means.iter().map(|p| p.1).collect();
    let centre = x.iter().sum::<f64>() / x.len().max(1) as f64;
    let sigma = (x.iter().map(|v| (v - centre).powi(2)).sum::<f64>() / (x.len().max(2) - 1) as f64).sqrt();
    let e = stats::ewma(&x, 0.2, centre, sigma, 3.0);
    let series = [
        chart::Series { points: means.clone(), ink: Ink::Muted, dots: true, label: Some("daily mean hold".into()) },
        chart::Series {
            points: means.iter().map(|p| p.0).zip(e.z.iter().copied()).collect(),
            ink: Ink::Centre,
            dots: false,
            label: Some("EWMA, λ 0.2".into()),
        },
    ];
    let levels = [
        Mark { at: e.ucl, label: format!("upper limit {}", si(e.ucl, "s")), ink: Ink::Limit },
        Mark { at: e.lcl, label: format!("lower limit {}", si(e.lcl, "s")), ink: Ink::Limit },
    ];
    let hold_svg = chart::trend(&chart::Trend {
        title: &format!("{station}: daily mean hold, EWMA chart (NIST/SEMATECH §6.3.2.4)"),
        y_desc: "hold (s)",
        series: &series,
        levels: &levels,
        bands: &[],
    });
    Some((yield_svg, hold_svg))
}

/// The hold histogram of a group, with its window.
#[must_use]
pub fn histogram_svg(g: &Group) -> Option<String> {
    let (lo, hi) = g.window_s?;
    let (a, b) = g.hist_range_s;
    let marks = [
        Mark { at: lo, label: format!("pass from {}", si(lo, "s")), ink: Ink::Limit },
        Mark { at: hi, label: format!("pass to {}", si(hi, "s")), ink: Ink::Limit },
        Mark { at: g.hold_s.mean, label: format!("mean {}", si(g.hold_s.mean, "s")), ink: Ink::Centre },
    ];
    let title = format!(
        "{}: hold of {} boards, Cpk {}{}",
        g.name,
        g.hold_s.n,
        opt2(g.cpk),
        if g.outside_hist.0 + g.outside_hist.1 > 0 {
            format!(" ({} outside the plot)", g.outside_hist.0 + g.outside_hist.1)
        } else {
            String::new()
        }
    );
    Some(chart::histogram(&Histogram {
        title: &title,
        quantity: "hold",
        unit: "s",
        lo: a,
        hi: b,
        bins: &g.bins,
        marks: &marks,
    }))
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// The example stage's setup at 1 MHz with a 2 % guard, as a station stores it.
    pub(crate) fn example_setup() -> Setup {
        let sf = crate::testing::example();
        let poll_ns = crate::design::window::default_poll_ns(&sf).unwrap_or(1_000);
        let c = crate::design::window::settings(&sf, crate::stage::file::Purpose::Fixture, 1_000_000, 20_000, poll_ns)
            .unwrap_or_else(|e| panic!("{e}"))
            .config;
        Setup {
            name: "lumen-keypad.toml".into(),
            stage_toml: crate::sim::demo::BOARD_TOML.into(),
            clock_hz: 1_000_000,
            guard_ppm: 20_000,
            poll_ns,
            hold_min_ticks: c.hold_min_ticks,
            hold_max_ticks: c.hold_max_ticks,
        }
    }

    /// A record of unit `unit` with `hold` ticks judged against `s`, as the firmware would.
    pub(crate) fn judged(s: &Setup, unit: u32, hold: u64) -> Record {
        use hold_firmware::drift::DriftState;
        let verdict = Verdict::of_hold(hold, s.hold_min_ticks, s.hold_max_ticks);
        let dev = ((hold as f64 / 739_617.0 - 1.0) * 1e6).round() as i64;
        Record {
            seq: 0,
            unit_id: unit,
            boot: 0,
            press_ticks: 100_000,
            on_ticks: Some(54),
            hold_ticks: Some(hold),
            clock_hz: s.clock_hz,
            temp_mdeg_c: Some(25_000),
            verdict,
            hint: if verdict.passes() { Hint::None } else { Hint::from_deviation_ppm(dev) },
            drift: DriftState::Settling,
            c_deviation_ppm: (!verdict.passes()).then_some(dev as i32),
        }
    }

    #[test]
    fn a_station_over_days_gets_its_daily_yield_and_ewma() -> std::io::Result<()> {
        let s = example_setup();
        let setups = HashMap::from([(1, s.clone())]);
        let mut t = Tally::new(&setups, false, None);
        let day = 86_400_000;
        for d in 0..5i64 {
            for k in 0..10u32 {
                let hold = 739_617 + u64::from(k) * 1_000 + d as u64 * 2_000;
                t.add("bay", "B1", 1_798_761_600_000 + d * day, &judged(&s, k, hold), Some(1));
            }
        }
        let y = t.finish()?;
        assert_eq!(y.days.len(), 5);
        let mean0 = y.days.first().and_then(|d| d.hold_mean_s).unwrap_or(0.0);
        // Day 0: holds 739 617 … 748 617 ticks at 1 MHz, mean 744.117 ms (math).
        assert!((mean0 - 0.744_117).abs() < 1e-9, "{mean0}");
        let (daily, ewma) = station_svgs(&y, "bay").unwrap_or_default();
        assert!(daily.contains("yield (%)") && ewma.contains("EWMA") && ewma.contains("upper limit"));
        assert!(station_svgs(&y, "nowhere").is_none());
        Ok(())
    }

    #[test]
    fn cpk_against_the_products_specification() -> std::io::Result<()> {
        let mut s = example_setup();
        s.stage_toml.push_str("\n[spec]\nhold_min = \"600m\"\nhold_max = \"900m\"\n");
        let setups = HashMap::from([(1, s.clone())]);
        let mut t = Tally::new(&setups, false, None);
        for k in 0..40u32 {
            t.add("bay", "B1", 0, &judged(&s, k, 700_000 + u64::from(k) * 2_000), Some(1));
        }
        let y = t.finish()?;
        assert_eq!(y.all.spec_s, Some((0.6, 0.9)));
        // Mean 739 ms, σ 23.4 ms: Cpk = (739 − 600) / (3σ) ≈ 1.98 against the spec (NIST/SEMATECH §6.1.6 formula).
        let (m, sd) = (y.all.hold_s.mean, y.all.hold_s.sd());
        let want = ((m - 0.6).min(0.9 - m)) / (3.0 * sd);
        assert!(y.all.spec_cpk.is_some_and(|c| (c - want).abs() < 1e-12), "{:?} vs {want}", y.all.spec_cpk);
        assert!(render_text(&y, 5).contains("against the product's specification 600.0 ms … 900.0 ms"));
        Ok(())
    }

    #[test]
    fn counts_yield_rejects_and_the_recheck() -> std::io::Result<()> {
        let s = example_setup();
        let setups = HashMap::from([(1, s.clone())]);
        let mut t = Tally::new(&setups, true, None);
        for (unit, hold) in [(1, 739_617), (2, 740_500), (3, 100_000), (4, 5_000_000)] {
            t.add("bay <1>", "B1", 1_798_761_600_000, &judged(&s, unit, hold), Some(1));
        }
        let y = t.finish()?;
        assert_eq!((y.all.total, y.all.passed(), y.rejects_total), (4, 2, 2));
        assert_eq!(pct(2, 4), "50.00 %");
        let rc = y.recheck.as_ref().map(|r| (r.checked, r.disagreements_total));
        assert_eq!(rc, Some((4, 0)), "the f64 re-check confirms every verdict");
        assert!(render_text(&y, 10).contains("bay <1>"));
        Ok(())
    }
}
