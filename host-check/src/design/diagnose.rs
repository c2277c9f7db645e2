//! Which single part explains a board's measured hold and turn-on latency.
//!
//! Hold and latency both scale with C; the discharge resistor and the falling
//! threshold move only the hold, the charge path (driver, charge resistor)
//! only the latency; the supply, the diode and a plain input's threshold move
//! both, each in its own proportion. So for each part in turn the `f64`
//! reference finds the one value that best reproduces the two measurements
//! together (a scan over the part's plausible range, then a golden-section
//! refinement), and the parts are ranked by how far their best fit still
//! misses — in units of the scatter a healthy board shows (the fixture
//! corners' spread, and the latency's timing resolution). The firmware
//! carries the cheap half of this as its hint (`Hint::from_times`); this is
//! the full one, for the host tools.
//!
//! The resistor's and the capacitor's implied values are given beside the
//! nearest IEC 60063 value of the part's series (the series its tolerance
//! belongs to, or the next coarser one that holds the nominal value).

use serde::Serialize;

use crate::design::window::corner_times;
use crate::fmt::si;
use crate::reference::{self, DiodeF, StageF};
use crate::stage::eseries::{Series, ALL};
use crate::stage::file::{Purpose, StageFile};
use crate::Error;

/// A part (or a property of the circuit) a diagnosis can blame.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Part {
    /// The discharge resistor R, Ω.
    Resistor,
    /// The capacitor C, F.
    Capacitor,
    /// The charge path: driver output and charge resistor together, Ω.
    ChargePath,
    /// The diode: its drop (V) or its saturation current (A).
    Diode,
    /// The supply, V (the input's thresholds follow it).
    Supply,
    /// A plain input's switching point, V.
    Threshold,
    /// A Schmitt input's rising threshold, V.
    RiseThreshold,
    /// A Schmitt input's falling threshold, V.
    FallThreshold,
}

impl Part {
    /// Its name in reports.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Part::Resistor => "R",
            Part::Capacitor => "C",
            Part::ChargePath => "charge path",
            Part::Diode => "diode",
            Part::Supply => "supply",
            Part::Threshold => "input threshold",
            Part::RiseThreshold => "rising threshold",
            Part::FallThreshold => "falling threshold",
        }
    }
}

/// A preferred value: the series and the value in SI units.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Preferred {
    /// The IEC 60063 series ("E6", "E24" …).
    pub series: String,
    /// The value, SI units.
    pub value: f64,
}

/// One part's best explanation of the measurements.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Suspect {
    /// The part.
    pub part: Part,
    /// The value it would need, SI units (`unit`).
    pub value: f64,
    /// Its nominal value, SI units.
    pub nominal: f64,
    /// The unit of `value` and `nominal`.
    pub unit: &'static str,
    /// The hold with that value, s.
    pub hold_s: f64,
    /// The turn-on latency with that value, s.
    pub on_s: f64,
    /// How far the fit still misses: the sum of the squared misses of hold
    /// and latency, each in units of a healthy board's scatter (0: exact).
    pub misfit: f64,
    /// For R and C: the nearest value of the part's series.
    pub nearest: Option<Preferred>,
    /// The best value lies at an end of the part's range (a thousandth or a
    /// thousand times nominal for R and C): the part is open or shorted
    /// rather than of another value.
    pub at_range_end: bool,
}

/// What the measurements point at.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(rename_all = "kebab-case", tag = "kind", content = "parts")]
pub enum Finding {
    /// The board measures like a healthy one: no part needs to be off.
    Healthy,
    /// One part explains both measurements clearly better than any other.
    Named(Part),
    /// Several parts explain them about equally well (within 2 scatter units).
    Ambiguous(Vec<Part>),
    /// No single part explains both (the best still misses by more than 5
    /// scatter units): two faults, or one this model does not know.
    Unexplained,
}

/// The diagnosis of one board.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Diagnosis {
    /// Measured hold, s.
    pub hold_s: f64,
    /// Measured turn-on latency, s (none: the hold alone).
    pub on_s: Option<f64>,
    /// The scatter of a healthy board: σ of ln(hold) and of ln(latency).
    pub scatter: (f64, f64),
    /// What the measurements point at.
    pub finding: Finding,
    /// Every part's best fit, best first.
    pub suspects: Vec<Suspect>,
}

/// Misfit within which two parts explain the board equally well (2 σ²).
const TIE: f64 = 4.0;
/// Misfit above which no part explains the board (5 σ²).
const UNEXPLAINED: f64 = 25.0;
/// Scan points per part.
const SCAN: usize = 121;

/// How one part is varied: its nominal value, range, and how a value is set.
struct Knob {
    part: Part,
    unit: &'static str,
    nominal: f64,
    lo: f64,
    hi: f64,
    log: bool,
    set: fn(&mut StageF, f64, &StageF),
}

fn knobs(s: &StageF, schmitt: bool) -> Vec<Knob> {
    let mut k = vec![
        Knob {
            part: Part::Resistor,
            unit: "Ω",
            nominal: s.r,
            lo: s.r * 1e-3,
            hi: s.r * 1e3,
            log: true,
            set: |s, v, _| s.r = v,
        },
        Knob {
            part: Part::Capacitor,
            unit: "F",
            nominal: s.c,
            lo: s.c * 1e-3,
            hi: s.c * 1e3,
            log: true,
            set: |s, v, _| s.c = v,
        },
    ];
    let path = s.ro + s.rch;
    k.push(Knob {
        part: Part::ChargePath,
        unit: "Ω",
        nominal: path,
        lo: (path * 1e-3).max(0.01),
        hi: path.max(1.0) * 1e4,
        log: true,
        set: |s, v, n| {
            let total = n.ro + n.rch;
            if total > 0.0 {
                s.ro = v * n.ro / total;
                s.rch = v * n.rch / total;
            } else {
                s.ro = v;
            }
        },
    });
    k.push(match s.diode {
        DiodeF::Drop(d) => Knob {
            part: Part::Diode,
            unit: "V",
            nominal: d,
            lo: 0.0,
            hi: 2.0,
            log: false,
            set: |s, v, _| s.diode = DiodeF::Drop(v),
        },
        DiodeF::Junction { is, .. } => Knob {
            part: Part::Diode,
            unit: "A",
            nominal: is,
            lo: is * 1e-4,
            hi: is * 1e4,
            log: true,
            set: |s, v, _| {
                if let DiodeF::Junction { is, .. } = &mut s.diode {
                    *is = v;
                }
            },
        },
    });
    k.push(Knob {
        part: Part::Supply,
        unit: "V",
        nominal: s.vdd,
        lo: s.vdd * 0.3,
        hi: s.vdd * 2.0,
        log: true,
        set: |s, v, n| {
            s.vdd = v;
            s.rise = n.rise * v / n.vdd;
            s.fall = n.fall * v / n.vdd;
        },
    });
    let (lo, hi) = (s.vdd * 0.02, s.vdd * 0.98);
    if schmitt {
        // A Schmitt input keeps its hysteresis: the rising threshold above the falling one.
        k.push(Knob {
            part: Part::RiseThreshold,
            unit: "V",
            nominal: s.rise,
            lo: s.fall * 1.001,
            hi,
            log: false,
            set: |s, v, _| s.rise = v,
        });
        k.push(Knob {
            part: Part::FallThreshold,
            unit: "V",
            nominal: s.fall,
            lo,
            hi: s.rise * 0.999,
            log: false,
            set: |s, v, _| s.fall = v,
        });
    } else {
        k.push(Knob {
            part: Part::Threshold,
            unit: "V",
            nominal: s.rise,
            lo,
            hi,
            log: false,
            set: |s, v, n| {
                // A plain input's one switching point moves both thresholds alike.
                s.rise = v + (n.rise - n.fall) / 2.0;
                s.fall = v - (n.rise - n.fall) / 2.0;
            },
        });
    }
    k
}

/// The two measurements and their scatter, with the cost of a prediction.
struct Target {
    hold_s: f64,
    on_s: Option<f64>,
    sigma_hold: f64,
    sigma_on: f64,
    resolution_s: f64,
}

impl Target {
    fn misfit(&self, s: &StageF) -> Option<(f64, f64, f64)> {
        let e = reference::evaluate(s).ok()?;
        if !(e.hold.is_finite() && e.hold > 0.0) {
            return None;
        }
        let mut m = ((e.hold / self.hold_s).ln() / self.sigma_hold).powi(2);
        if let Some(on) = self.on_s {
            // Below the resolution a latency reads as half of it.
            let floor = self.resolution_s / 2.0;
            let (meas, pred) = (on.max(floor), e.on_latency.max(floor));
            let sigma = self.sigma_on.hypot(self.resolution_s / meas);
            m += ((pred / meas).ln() / sigma).powi(2);
        }
        Some((m, e.hold, e.on_latency))
    }
}

/// The best value of one part: a scan, then a golden-section search
/// around the best scan point.
fn fit(knob: &Knob, nominal: &StageF, target: &Target) -> Option<Suspect> {
    let at = |x: f64| if knob.log { x.exp() } else { x };
    let (a, b) = if knob.log { (knob.lo.ln(), knob.hi.ln()) } else { (knob.lo, knob.hi) };
    let cost = |x: f64| {
        let mut s = *nominal;
        (knob.set)(&mut s, at(x), nominal);
        target.misfit(&s)
    };
    let step = (b - a) / (SCAN - 1) as f64;
    let mut best: Option<(f64, f64)> = None;
    for i in 0..SCAN {
        let x = a + step * i as f64;
        if let Some((m, ..)) = cost(x) {
            if best.is_none_or(|(_, bm)| m < bm) {
                best = Some((x, m));
            }
        }
    }
    let (x0, _) = best?;
    let (mut lo, mut hi) = ((x0 - step).max(a), (x0 + step).min(b));
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let value = |x: f64| cost(x).map_or(f64::INFINITY, |c| c.0);
    for _ in 0..60 {
        let (c, d) = (hi - g * (hi - lo), lo + g * (hi - lo));
        if value(c) < value(d) {
            hi = d;
        } else {
            lo = c;
        }
    }
    let x = (lo + hi) / 2.0;
    let at_range_end = (x - a).abs() < step || (b - x).abs() < step;
    let (x, (misfit, hold_s, on_s)) = match (cost(x), cost(x0)) {
        (Some(c), Some(c0)) if c.0 <= c0.0 => (x, c),
        (_, Some(c0)) => (x0, c0),
        (Some(c), None) => (x, c),
        (None, None) => return None,
    };
    Some(Suspect {
        part: knob.part,
        value: at(x),
        nominal: knob.nominal,
        unit: knob.unit,
        hold_s,
        on_s,
        misfit,
        nearest: None,
        at_range_end,
    })
}

/// The series a part's value is judged in: the one its tolerance belongs to
/// (±1 % E96, ±2 % E48, ±5 % E24, ±10 % E12, ±20 % E6, wider E3; common
/// practice, no source), or the next coarser one that holds the nominal.
#[must_use]
pub fn series_of(nominal: f64, tolerance_ppm: u32) -> Series {
    let by_tolerance = match tolerance_ppm {
        0..=10_000 => Series::E96,
        10_001..=20_000 => Series::E48,
        20_001..=50_000 => Series::E24,
        50_001..=100_000 => Series::E12,
        100_001..=200_000 => Series::E6,
        _ => Series::E3,
    };
    let holds = |s: Series| (s.nearest(nominal) / nominal - 1.0).abs() < 1e-9;
    ALL.iter().rev().skip_while(|&&s| s != by_tolerance).find(|&&s| holds(s)).copied().unwrap_or(by_tolerance)
}

/// The scatter of a healthy board, as σ of ln(hold) and ln(latency): a third
/// of the larger log distance from nominal to a fixture corner (the corners
/// are the tolerance extremes, about 3 σ for parts spread normally), at
/// least 0.5 %.
///
/// # Errors
/// The stage file's error when the nominal stage or a corner cannot be evaluated.
pub fn scatter(sf: &StageFile) -> Result<(f64, f64), Error> {
    let nominal = reference::evaluate(&StageF::from(&sf.stage))
        .map_err(|e| Error::Input(format!("{}: the reference cannot evaluate the stage: {e:?}", sf.path.display())))?;
    let t = corner_times(sf, &sf.spread_for(Purpose::Fixture))
        .map_err(|e| Error::Input(format!("{}: {e}", sf.path.display())))?;
    let spread = |(lo, hi): (f64, f64), n: f64| ((n / lo).ln().max((hi / n).ln()) / 3.0).max(0.005);
    Ok((spread(t.hold, nominal.hold), spread(t.on, nominal.on_latency.max(1e-12))))
}

/// Diagnoses a board from its hold (s) and, when measured, its turn-on
/// latency (s, read to `resolution_s`).
///
/// # Errors
/// [`Error::Input`] for a hold that is not positive and finite, or a stage
/// the reference cannot evaluate.
pub fn diagnose(sf: &StageFile, hold_s: f64, on_s: Option<f64>, resolution_s: f64) -> Result<Diagnosis, Error> {
    if !(hold_s.is_finite() && hold_s > 0.0) {
        return Err(Error::Input(format!("hold {hold_s} s: a diagnosis needs a hold above 0 s")));
    }
    let (sigma_hold, sigma_on) = scatter(sf)?;
    let target = Target { hold_s, on_s, sigma_hold, sigma_on, resolution_s: resolution_s.max(0.0) };
    let nominal = StageF::from(&sf.stage);
    let healthy = target.misfit(&nominal).is_some_and(|(m, ..)| m <= TIE);
    let fixture = sf.spread_for(Purpose::Fixture);
    let mut suspects: Vec<Suspect> = knobs(&nominal, sf.schmitt)
        .iter()
        .filter_map(|k| fit(k, &nominal, &target))
        .map(|mut s| {
            let tol = match s.part {
                Part::Resistor => Some(fixture.r.minus_ppm.max(fixture.r.plus_ppm)),
                Part::Capacitor => Some(fixture.c.minus_ppm.max(fixture.c.plus_ppm)),
                _ => None,
            };
            s.nearest = tol.map(|t| {
                let series = series_of(s.nominal, t);
                Preferred { series: format!("{series:?}"), value: series.nearest(s.value) }
            });
            s
        })
        .collect();
    suspects.sort_by(|a, b| a.misfit.total_cmp(&b.misfit));
    let best = suspects.first().map_or(f64::INFINITY, |s| s.misfit);
    let tied: Vec<Part> = suspects.iter().filter(|s| s.misfit <= best + TIE).map(|s| s.part).collect();
    let finding = if healthy {
        Finding::Healthy
    } else if best > UNEXPLAINED {
        Finding::Unexplained
    } else if let [one] = tied.as_slice() {
        Finding::Named(*one)
    } else {
        Finding::Ambiguous(tied)
    };
    Ok(Diagnosis { hold_s, on_s, scatter: (sigma_hold, sigma_on), finding, suspects })
}

impl Suspect {
    /// "C reads 4.69 µF (nominal 10.00 µF, −53.1 %); nearest E6 value 4.70 µF:
    /// a 4.70 µF fitted for 10.00 µF?" — the question only where the
    /// reading is nearer another value of the series than the nominal.
    #[must_use]
    pub fn sentence(&self) -> String {
        let mut s = format!(
            "{} reads {} (nominal {}, {:+.1} %)",
            self.part.name(),
            si(self.value, self.unit),
            si(self.nominal, self.unit),
            (self.value / self.nominal - 1.0) * 100.0
        );
        if let Some(p) = &self.nearest {
            s.push_str(&format!("; nearest {} value {}", p.series, si(p.value, self.unit)));
            // The reading is nearer another value of the series than the nominal one.
            if (p.value / self.nominal - 1.0).abs() > 1e-6 {
                s.push_str(&format!(": a {} fitted for {}?", si(p.value, self.unit), si(self.nominal, self.unit)));
            }
        }
        s
    }
}

impl Diagnosis {
    /// The finding in a few words, for a table: "C 432.5 nF (E12 470.0 nF?)",
    /// "R or falling threshold", "healthy", "no single part".
    #[must_use]
    pub fn short(&self) -> String {
        match (&self.finding, self.suspects.first()) {
            (Finding::Healthy, _) => "healthy".into(),
            (Finding::Named(_), Some(s)) if s.at_range_end => {
                let way = if s.value < s.nominal { "below" } else { "above" };
                format!("{} {way} {}: open or shorted?", s.part.name(), si(s.value, s.unit))
            }
            (Finding::Named(_), Some(s)) => {
                let mut t = format!("{} {}", s.part.name(), si(s.value, s.unit));
                if let Some(p) = s.nearest.as_ref().filter(|p| (p.value / s.nominal - 1.0).abs() > 1e-6) {
                    t.push_str(&format!(" ({} {}?)", p.series, si(p.value, s.unit)));
                }
                t
            }
            (Finding::Ambiguous(parts), _) => parts.iter().map(|p| p.name()).collect::<Vec<_>>().join(" or "),
            _ => "no single part".into(),
        }
    }
}

/// The diagnosis as text: the finding, then every part's best fit.
#[must_use]
pub fn render(name: &str, d: &Diagnosis) -> String {
    use std::fmt::Write as _;
    let mut o = String::new();
    let on = d.on_s.map_or_else(|| "not measured".to_owned(), |t| si(t, "s"));
    let _ = writeln!(o, "diagnosis for {name}: hold {}, turn-on {on}", si(d.hold_s, "s"));
    let best = d.suspects.first();
    let _ = match (&d.finding, best) {
        (Finding::Healthy, _) => {
            writeln!(o, "  healthy: hold and turn-on are what a board with parts in tolerance gives")
        }
        (Finding::Named(_), Some(s)) => writeln!(o, "  {}", s.sentence()),
        (Finding::Ambiguous(parts), _) => {
            let names: Vec<&str> = parts.iter().map(|p| p.name()).collect();
            let why =
                if d.on_s.is_none() { " (the hold alone cannot tell them apart: measure the turn-on too)" } else { "" };
            writeln!(o, "  ambiguous: {} explain it about equally well{why}", names.join(", "))
        }
        (Finding::Unexplained, Some(s)) => writeln!(
            o,
            "  no single part explains both (the nearest, {}, still misses by {:.1} σ): two faults, or another cause",
            s.part.name(),
            s.misfit.sqrt()
        ),
        _ => writeln!(o, "  no part could be fitted"),
    };
    let _ = writeln!(o, "\n  {:<18} {:>12} {:>12} {:>12} {:>8}", "part", "reads", "hold", "turn-on", "misfit");
    for s in &d.suspects {
        let _ = writeln!(
            o,
            "  {:<18} {:>12} {:>12} {:>12} {:>8.2}",
            s.part.name(),
            si(s.value, s.unit),
            si(s.hold_s, "s"),
            si(s.on_s, "s"),
            s.misfit
        );
    }
    for s in d.suspects.iter().filter(|s| matches!(d.finding, Finding::Ambiguous(ref p) if p.contains(&s.part))) {
        let _ = writeln!(o, "  {}", s.sentence());
    }
    let _ = writeln!(
        o,
        "\n  misfit: squared misses of hold and turn-on in units of a healthy board's scatter (σ {:.1} % and {:.1} %)",
        d.scatter.0 * 100.0,
        d.scatter.1 * 100.0
    );
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    fn measured(sf: &StageFile, f: impl Fn(&mut StageF)) -> (f64, f64) {
        let mut s = StageF::from(&sf.stage);
        f(&mut s);
        let e = reference::evaluate(&s).unwrap_or_else(|e| panic!("{e:?}"));
        (e.hold, e.on_latency)
    }

    #[test]
    fn the_part_that_moved_is_named_with_its_preferred_value() -> Result<(), Error> {
        let sf = crate::testing::example();
        let nominal = StageF::from(&sf.stage);
        // C at 0.47 of nominal: both times drop together.
        let (h, l) = measured(&sf, |s| s.c *= 0.47);
        let d = diagnose(&sf, h, Some(l), 1e-6)?;
        assert_eq!(d.finding, Finding::Named(Part::Capacitor), "{}", render("t", &d));
        let c = d.suspects.first().map_or(0.0, |s| s.value);
        assert!((c / (nominal.c * 0.47) - 1.0).abs() < 0.01, "C {c}");
        // R at 0.1: the hold drops, the latency stays.
        let (h, l) = measured(&sf, |s| s.r *= 0.1);
        let d = diagnose(&sf, h, Some(l), 1e-6)?;
        assert!(matches!(d.finding, Finding::Named(Part::Resistor)), "{}", render("t", &d));
        // The nominal board is healthy.
        let (h, l) = measured(&sf, |_| ());
        assert_eq!(diagnose(&sf, h, Some(l), 1e-6)?.finding, Finding::Healthy);
        // The hold alone cannot tell R from C.
        let (h, _) = measured(&sf, |s| s.c *= 0.47);
        assert!(matches!(diagnose(&sf, h, None, 1e-6)?.finding, Finding::Ambiguous(ref p) if p.len() > 1));
        Ok(())
    }

    #[test]
    fn the_series_follows_the_tolerance_and_holds_the_nominal() {
        assert_eq!(series_of(10e-6, 200_000), Series::E6);
        assert_eq!(series_of(4.7e6, 10_000), Series::E24, "4.7 is not an E96 or E48 value");
        assert_eq!(series_of(1.02e3, 10_000), Series::E96);
    }
}
