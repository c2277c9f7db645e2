//! `rchold coverage`: which plausible assembly faults the fixture's windows
//! catch. For every fault — each E-series neighbour of R and C within two
//! decades, an open or shorted R, C or diode, a wrong diode, an input of
//! another logic family — the faulty board's hold and turn-on latency are
//! computed by the `f64` reference at every fixture corner (the other parts
//! anywhere in their tolerances) and judged against the firmware's windows
//! in ticks: *caught* when every corner fails, *sometimes* when the nominal
//! board fails but some corners pass, *escape* when the nominal board
//! passes. The margin is how far outside its window the faulty board lands:
//! at its worst corner for a caught fault, with the other parts nominal
//! otherwise (negative: how far inside).

use serde::Serialize;

use hold_firmware::{Setup, Verdict};
use rc_model::presets::PRESETS;
use rc_model::window::{Corner, Spread};
use rc_model::{Diode, Stage};

use crate::design::diagnose::series_of;
use crate::fmt::si;
use crate::reference::{self, StageF};
use crate::stage::file::{threshold_spread, StageFile};

/// What kind of fault.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Kind {
    /// A resistor of another value of the series.
    ResistorValue,
    /// A capacitor of another value of the series.
    CapacitorValue,
    /// A part missing or not soldered.
    Open,
    /// A part shorted (solder bridge).
    Short,
    /// Another diode type.
    WrongDiode,
    /// An input of another logic family.
    WrongFamily,
}

/// How a fault is injected.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Change {
    /// R is this many Ω.
    R(f64),
    /// C is this many F.
    C(f64),
    /// The discharge resistor is open.
    OpenR,
    /// The discharge resistor is shorted.
    ShortR,
    /// The capacitor is open (1 pF of stray capacitance remains).
    OpenC,
    /// The capacitor is shorted.
    ShortC,
    /// The diode is open.
    OpenDiode,
    /// The diode is shorted.
    ShortDiode,
    /// The diode drops this many V.
    DiodeDrop(f64),
    /// The input is of the preset family at this index of `PRESETS`.
    Family(usize),
}

/// Whether the windows catch a fault.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Catch {
    /// Every corner fails: always caught.
    Caught,
    /// The nominal board fails, some corners pass.
    Sometimes,
    /// The nominal board passes.
    Escape,
}

impl Catch {
    /// Its name in reports.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Catch::Caught => "caught",
            Catch::Sometimes => "sometimes",
            Catch::Escape => "escape",
        }
    }
}

/// One fault and what the windows make of it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Outcome {
    /// The fault, in words ("C 4.7 µF for 10 µF").
    pub fault: String,
    /// Its kind.
    pub kind: Kind,
    /// How it is injected.
    pub change: Change,
    /// Caught, sometimes or escape.
    pub catch: Catch,
    /// The verdict of the faulty board with every other part nominal.
    pub verdict: &'static str,
    /// How far outside its window the faulty board lands, %: for a caught
    /// fault at its worst corner, otherwise with the other parts nominal
    /// (negative: inside). None for a board that never turns on or never
    /// ends, which always fails.
    pub margin_pct: Option<f64>,
    /// Shortest and longest hold over the corners, s (none: no hold).
    pub hold_s: Option<(f64, f64)>,
    /// Shortest and longest turn-on latency over the corners, s.
    pub on_s: Option<(f64, f64)>,
    /// Corners that pass, of all corners.
    pub passing_corners: (u32, u32),
}

/// The coverage of one stage.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Coverage {
    /// Hold window, s.
    pub hold_window_s: (f64, f64),
    /// Turn-on latency window, s.
    pub on_window_s: (f64, f64),
    /// The series R's neighbours are taken from.
    pub r_series: String,
    /// The series C's neighbours are taken from.
    pub c_series: String,
    /// Every fault, escapes first, then sometimes, then caught (each by margin).
    pub outcomes: Vec<Outcome>,
}

impl Coverage {
    /// How many faults of each catch: (caught, sometimes, escape).
    #[must_use]
    pub fn counts(&self) -> (usize, usize, usize) {
        let n = |c| self.outcomes.iter().filter(|o| o.catch == c).count();
        (n(Catch::Caught), n(Catch::Sometimes), n(Catch::Escape))
    }
}

/// The windows in seconds and the firmware's timeouts.
#[derive(Debug, Clone, Copy)]
struct Judge {
    hold: (f64, f64),
    on: (f64, f64),
    on_timeout: f64,
    hold_timeout: f64,
}

/// One corner of a faulty board: its hold and latency (none where it
/// never turns on), judged.
#[derive(Debug, Clone, Copy)]
struct Point {
    times: Option<(f64, f64)>,
    verdict: Verdict,
    margin: Option<f64>,
}

impl Judge {
    fn of(setup: &Setup) -> Judge {
        let c = &setup.config;
        let s = |t: u64| t as f64 / f64::from(c.clock_hz);
        Judge {
            hold: (s(c.hold_min_ticks), s(c.hold_max_ticks)),
            on: (s(c.on_min_ticks), s(c.on_max_ticks)),
            on_timeout: s(c.on_timeout_ticks),
            hold_timeout: s(c.hold_timeout_ticks),
        }
    }

    /// The verdict of a board with these times, and its log margin outside
    /// the windows (positive: fails by that much).
    fn point(&self, times: Option<(f64, f64)>) -> Point {
        let Some((hold, on)) = times else {
            return Point { times, verdict: Verdict::NoResponse, margin: None };
        };
        if on > self.on_timeout {
            return Point { times, verdict: Verdict::NoResponse, margin: None };
        }
        if hold > self.hold_timeout {
            return Point { times, verdict: Verdict::StuckActive, margin: None };
        }
        let out = |x: f64, (lo, hi): (f64, f64)| {
            let x = x.max(1e-15);
            if x < lo {
                (lo / x).ln()
            } else if x > hi {
                (x / hi).ln()
            } else {
                -(x / lo.max(1e-15)).ln().min((hi / x).ln())
            }
        };
        let (mh, ml) = (out(hold, self.hold), out(on, self.on));
        let verdict = if hold < self.hold.0 {
            Verdict::Short
        } else if hold > self.hold.1 {
            Verdict::Long
        } else if on < self.on.0 {
            Verdict::FastStart
        } else if on > self.on.1 {
            Verdict::SlowStart
        } else {
            Verdict::WithinWindow
        };
        Point { times, verdict, margin: Some(mh.max(ml)) }
    }
}

/// Hold and latency of a stage by the reference (none: it never turns on).
fn times(s: &StageF) -> Option<(f64, f64)> {
    reference::evaluate(s).ok().map(|e| (e.hold, e.on_latency))
}

impl Change {
    /// The board with this change, for a value change (R, C, diode drop,
    /// family); none for an open or a short, which no value represents.
    #[must_use]
    pub fn apply(self, stage: &Stage) -> Option<Stage> {
        changed(stage, &Spread::default(), self).map(|x| x.0)
    }
}

/// The stage with a value change applied (R, C, diode drop, family).
fn changed(stage: &Stage, spread: &Spread, change: Change) -> Option<(Stage, Spread)> {
    let (mut s, mut sp) = (*stage, *spread);
    match change {
        Change::R(ohms) => s.r_mohm = (ohms * 1e3).round() as u64,
        Change::C(farads) => s.c_ff = (farads * 1e15).round() as u64,
        Change::DiodeDrop(v) => s.diode = Diode::Drop { drop_uv: (v * 1e6).round() as u32 },
        Change::Family(i) => {
            let b = PRESETS.get(i)?.bands(s.vdd_uv).ok()?;
            s.rise_uv = b.rise.typ_uv;
            s.fall_uv = b.fall.typ_uv;
            sp.thresholds = Some(threshold_spread(&b));
        }
        _ => return None,
    }
    Some((s, sp))
}

/// Every corner of a faulty board, judged.
fn corners(stage: &Stage, spread: &Spread, judge: &Judge) -> Vec<Point> {
    let active = spread.active();
    let mut out = Vec::new();
    let mut high: u16 = 0;
    loop {
        let t = spread.at_corner(stage, Corner { high, active }).ok().and_then(|s| times(&StageF::from(&s)));
        out.push(judge.point(t));
        if high == active {
            break;
        }
        high = high.wrapping_sub(active) & active;
    }
    out
}

/// The faults to try, with their words and kinds.
fn faults(sf: &StageFile) -> (Vec<(String, Kind, Change)>, String, String) {
    let s = StageF::from(&sf.stage);
    let sp = &sf.spread;
    let r_series = series_of(s.r, sp.r.minus_ppm.max(sp.r.plus_ppm));
    let c_series = series_of(s.c, sp.c.minus_ppm.max(sp.c.plus_ppm));
    let mut f = Vec::new();
    let neighbours = |series: crate::stage::eseries::Series, nominal: f64| -> Vec<f64> {
        let d0 = nominal.log10().floor() as i32;
        let mut v: Vec<f64> = (d0 - 2..=d0 + 2)
            // Divide for negative decades: 1.0 / 1e7 is exactly 1e-7, 1.0 * 1e-7 is not.
            .flat_map(|d| {
                series.values().into_iter().map(move |m| if d >= 0 { m * 10f64.powi(d) } else { m / 10f64.powi(-d) })
            })
            .filter(|&x| x >= nominal / 100.0 * (1.0 - 1e-9) && x <= nominal * 100.0 * (1.0 + 1e-9))
            .filter(|&x| (x / nominal - 1.0).abs() > 1e-6)
            .collect();
        v.sort_by(f64::total_cmp);
        v
    };
    for v in neighbours(r_series, s.r) {
        f.push((format!("R {} for {}", si(v, "Ω"), si(s.r, "Ω")), Kind::ResistorValue, Change::R(v)));
    }
    for v in neighbours(c_series, s.c) {
        f.push((format!("C {} for {}", si(v, "F"), si(s.c, "F")), Kind::CapacitorValue, Change::C(v)));
    }
    f.push(("R open".into(), Kind::Open, Change::OpenR));
    f.push(("R shorted".into(), Kind::Short, Change::ShortR));
    f.push(("C open".into(), Kind::Open, Change::OpenC));
    f.push(("C shorted".into(), Kind::Short, Change::ShortC));
    f.push(("diode open".into(), Kind::Open, Change::OpenDiode));
    f.push(("diode shorted".into(), Kind::Short, Change::ShortDiode));
    // Small-signal silicon drops about 0.65 V, a Schottky about 0.3 V at
    // these currents (common practice, no source).
    let silicon = match sf.stage.diode {
        Diode::Drop { drop_uv } => drop_uv >= 450_000,
        Diode::Junction { .. } => true,
    };
    let (word, drop) = if silicon { ("a Schottky (0.3 V)", 0.3) } else { ("a silicon diode (0.65 V)", 0.65) };
    f.push((format!("diode: {word} fitted"), Kind::WrongDiode, Change::DiodeDrop(drop)));
    for (i, p) in PRESETS.iter().enumerate() {
        if sf.preset.is_some_and(|own| own.name == p.name) || p.bands(sf.stage.vdd_uv).is_err() {
            continue;
        }
        f.push((format!("input of the {} family", p.name), Kind::WrongFamily, Change::Family(i)));
    }
    (f, format!("{r_series:?}"), format!("{c_series:?}"))
}

/// The outcome of a fault the reference cannot represent by a value: the
/// verdict the circuit gives, always caught.
fn gross(s: &StageF, change: Change, judge: &Judge) -> Option<Point> {
    let mut x = *s;
    let t = match change {
        // No discharge path but 1 TΩ of board leakage (as the twin has) and the
        // stage's own leakage: the hold ends late, or never.
        Change::OpenR => {
            x.r = 1e12;
            times(&x)
        }
        // The node cannot rise: the output never turns on.
        Change::ShortR | Change::ShortC | Change::OpenDiode => None,
        // Only stray capacitance remains: the hold is about zero.
        Change::OpenC => {
            x.c = 1e-12;
            times(&x)
        }
        // On release the driver pulls the capacitor down through itself.
        Change::ShortDiode => {
            let path = (s.ro + s.rch).max(1.0);
            let tau = path * s.r / (path + s.r) * s.c;
            times(s).map(|(_, l)| (tau * (s.vdd / s.fall.max(1e-3)).ln().max(0.0), l))
        }
        _ => return None,
    };
    Some(judge.point(t))
}

/// The coverage of a stage file's fixture windows (`setup`, made for the
/// fixture).
#[must_use]
pub fn coverage(sf: &StageFile, setup: &Setup, spread: &Spread) -> Coverage {
    let judge = Judge::of(setup);
    let nominal = StageF::from(&sf.stage);
    let (list, r_series, c_series) = faults(sf);
    let mut outcomes: Vec<Outcome> = list
        .into_iter()
        .map(|(fault, kind, change)| {
            let (points, at_nominal) = match changed(&sf.stage, spread, change) {
                Some((s, sp)) => (corners(&s, &sp, &judge), judge.point(times(&StageF::from(&s)))),
                None => {
                    // An open or a short fails by construction: no margin to speak of.
                    let p = gross(&nominal, change, &judge).map_or(
                        Point { times: None, verdict: Verdict::NoResponse, margin: None },
                        |p| Point { margin: None, ..p },
                    );
                    (vec![p], p)
                }
            };
            let passing = points.iter().filter(|p| p.verdict.passes()).count() as u32;
            let catch = if at_nominal.verdict.passes() {
                Catch::Escape
            } else if passing == 0 {
                Catch::Caught
            } else {
                Catch::Sometimes
            };
            // Caught: the worst corner's margin (corners that never turn on or never end
            // fail whatever it is); otherwise the nominal faulty board's.
            let margin = if catch == Catch::Caught {
                points.iter().filter_map(|p| p.margin).min_by(f64::total_cmp)
            } else {
                at_nominal.margin
            };
            let range = |f: fn((f64, f64)) -> f64| {
                let v: Vec<f64> = points.iter().filter_map(|p| p.times.map(f)).collect();
                (!v.is_empty()).then(|| {
                    (
                        v.iter().copied().fold(f64::INFINITY, f64::min),
                        v.iter().copied().fold(f64::NEG_INFINITY, f64::max),
                    )
                })
            };
            Outcome {
                fault,
                kind,
                change,
                catch,
                verdict: at_nominal.verdict.name(),
                margin_pct: margin.map(|m| m.exp_m1() * 100.0),
                hold_s: range(|t| t.0),
                on_s: range(|t| t.1),
                passing_corners: (passing, points.len() as u32),
            }
        })
        .collect();
    let rank = |c: Catch| match c {
        Catch::Escape => 0,
        Catch::Sometimes => 1,
        Catch::Caught => 2,
    };
    outcomes.sort_by(|a, b| {
        rank(a.catch)
            .cmp(&rank(b.catch))
            .then(a.margin_pct.unwrap_or(f64::INFINITY).total_cmp(&b.margin_pct.unwrap_or(f64::INFINITY)))
    });
    Coverage { hold_window_s: judge.hold, on_window_s: judge.on, r_series, c_series, outcomes }
}

/// The coverage as text: the windows, the counts, then the faults, escapes
/// first; of the caught ones only the ten closest to a window unless `all`.
#[must_use]
pub fn render(name: &str, c: &Coverage, all: bool) -> String {
    use std::fmt::Write as _;
    let mut o = String::new();
    let (caught, sometimes, escape) = c.counts();
    let _ = writeln!(o, "fault coverage of the fixture windows for {name}");
    let _ = writeln!(
        o,
        "  hold {} … {}, turn-on {} … {}; R neighbours from {}, C neighbours from {} (two decades each way)",
        si(c.hold_window_s.0, "s"),
        si(c.hold_window_s.1, "s"),
        si(c.on_window_s.0, "s"),
        si(c.on_window_s.1, "s"),
        c.r_series,
        c.c_series
    );
    let _ = writeln!(
        o,
        "  {} faults: {caught} caught at every corner, {sometimes} only sometimes, {escape} escape\n",
        c.outcomes.len()
    );
    let _ = writeln!(
        o,
        "  {:<34} {:<10} {:<14} {:>9} {:>22} {:>22}",
        "fault", "catch", "verdict", "margin", "hold", "turn-on"
    );
    let range =
        |r: Option<(f64, f64)>| r.map_or_else(|| "–".to_owned(), |(a, b)| format!("{} … {}", si(a, "s"), si(b, "s")));
    let shown = if all { usize::MAX } else { escape + sometimes + 10 };
    for x in c.outcomes.iter().take(shown) {
        let _ = writeln!(
            o,
            "  {:<34} {:<10} {:<14} {:>9} {:>22} {:>22}",
            x.fault,
            x.catch.name(),
            x.verdict,
            x.margin_pct.map_or_else(|| "–".to_owned(), |m| format!("{m:+.1} %")),
            range(x.hold_s),
            range(x.on_s)
        );
    }
    if c.outcomes.len() > shown {
        let _ = writeln!(o, "  … {} more caught with larger margins (--all lists them)", c.outcomes.len() - shown);
    }
    let _ = writeln!(
        o,
        "\n  margin: how far outside its window the faulty board lands — at its worst corner when caught,\n  \
         with the other parts nominal otherwise (negative: inside)"
    );
    o
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::file::Purpose;

    #[test]
    fn gross_faults_are_caught_and_near_neighbours_escape_a_wide_window() -> Result<(), crate::Error> {
        let sf = crate::testing::example();
        let setup = crate::design::window::settings(&sf, Purpose::Fixture, 1_000_000, 20_000, 739_000)?;
        let c = coverage(&sf, &setup, &sf.spread_for(Purpose::Fixture));
        let find = |f: &str| c.outcomes.iter().find(|o| o.fault == f).map(|o| (o.catch, o.verdict));
        assert_eq!(find("C open"), Some((Catch::Caught, "short")));
        assert_eq!(find("R open"), Some((Catch::Caught, "stuck-active")));
        assert_eq!(find("diode open"), Some((Catch::Caught, "no-response")));
        let tenth = c.outcomes.iter().find(|o| o.change == Change::C(1e-7)).map(|o| (o.catch, o.verdict));
        assert_eq!(tenth, Some((Catch::Caught, "short")));
        assert_eq!(find("C 1.200 µF for 1.000 µF").map(|x| x.0), Some(Catch::Escape));
        // Escapes come first, and the counts add up.
        assert_eq!(c.outcomes.first().map(|o| o.catch), Some(Catch::Escape));
        let (a, b, e) = c.counts();
        assert_eq!(a + b + e, c.outcomes.len());
        Ok(())
    }
}
