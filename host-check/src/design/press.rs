//! `rchold press`: what the stage does for a press of a given length, and
//! for a second press some time into the hold (a retrigger), by the model:
//! a short press leaves the capacitor partly charged and the hold shorter;
//! a retrigger starts from the voltage the capacitor has fallen to.

use std::fmt::Write as _;

use rc_model::{Evaluation, Model, Span, Stage};
use serde::Serialize;

use crate::fmt::{secs, si};
use crate::stage::file::StageFile;
use crate::Error;

/// One press.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Press {
    /// Press length, s.
    pub press_s: f64,
    /// Capacitor voltage at release, V.
    pub cap_at_release_v: f64,
    /// Hold after release, s.
    pub hold_s: f64,
    /// Active time from the press to the end of the hold, s.
    pub active_s: f64,
}

/// A second press `after_s` after the first one's release.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Retrigger {
    /// The first press.
    pub first: Press,
    /// Time from the first release to the second press, s.
    pub after_s: f64,
    /// Capacitor voltage when the second press starts, V.
    pub cap_at_second_v: f64,
    /// The second press, from that voltage.
    pub second: Press,
    /// Whether the output went off between the two presses.
    pub dropped: bool,
    /// From the start of the first press to the output's final turn-off, s.
    pub total_s: f64,
}

fn volts(v: rc_model::Voltage) -> f64 {
    v.uv_q32() as f64 / 4_294_967_296.0 * 1e-6
}

fn press_of(e: &Evaluation, press_s: f64) -> Press {
    Press { press_s, cap_at_release_v: volts(e.cap_at_release), hold_s: secs(e.hold), active_s: secs(e.active) }
}

fn with_press(sf: &StageFile, press_s: f64) -> Result<Stage, Error> {
    if !(1e-9..=86_400.0).contains(&press_s) {
        return Err(Error::Input(format!("a press of {press_s} s is outside 1 ns … 24 h")));
    }
    Ok(Stage { press_ns: (press_s * 1e9).round() as u64, ..sf.stage })
}

/// The stage after a press of `press_s`.
///
/// # Errors
/// The stage file's refusal (a press too short to turn the output on is
/// [`Error::StageFails`]).
pub fn single(sf: &StageFile, press_s: f64) -> Result<Press, Error> {
    let s = with_press(sf, press_s)?;
    let e = Model::new(&s).and_then(|m| m.evaluate()).map_err(|e| sf.refusal(e))?;
    Ok(press_of(&e, press_s))
}

/// Holds for presses from just past the turn-on latency to five charge
/// time constants, the file's own press and `asked_s`.
///
/// # Errors
/// As [`single`] for the file's own press and for `asked_s`.
pub fn table(sf: &StageFile, asked_s: f64) -> Result<Vec<Press>, Error> {
    single(sf, asked_s)?;
    let e = sf.nominal()?;
    let (lat, tau) = (secs(e.on_latency), secs(e.charge_tau));
    let mut lengths: Vec<f64> =
        [lat * 1.5, lat + 0.25 * tau, lat + 0.5 * tau, lat + tau, lat + 2.0 * tau, lat + 3.0 * tau, lat + 5.0 * tau]
            .into_iter()
            .chain([sf.stage.press_ns as f64 * 1e-9, asked_s])
            .collect();
    lengths.sort_by(f64::total_cmp);
    lengths.dedup_by(|a, b| (*a - *b).abs() < 1e-12 * b.abs());
    Ok(lengths.into_iter().filter_map(|p| single(sf, p).ok()).collect())
}

/// A first press of `first_s`, release, and a second press of `second_s`
/// starting `after_s` after the release.
///
/// # Errors
/// The stage file's refusal for either press.
pub fn retrigger(sf: &StageFile, first_s: f64, after_s: f64, second_s: f64) -> Result<Retrigger, Error> {
    let s1 = with_press(sf, first_s)?;
    let m1 = Model::new(&s1).map_err(|e| sf.refusal(e))?;
    let e1 = m1.evaluate().map_err(|e| sf.refusal(e))?;
    let gap = Span::from_ns((after_s.max(0.0) * 1e9).round() as u64);
    let v = m1.cap_after(e1.cap_at_release, gap).map_err(|e| sf.refusal(e))?;
    let v = rc_model::Voltage::from_uv_q32(v.uv_q32().max(0));
    let s2 = with_press(sf, second_s)?;
    let e2 = Model::new(&s2).and_then(|m| m.evaluate_from(v)).map_err(|e| sf.refusal(e))?;
    let first = press_of(&e1, first_s);
    let dropped = after_s >= first.hold_s;
    Ok(Retrigger {
        first,
        after_s,
        cap_at_second_v: volts(v),
        second: press_of(&e2, second_s),
        dropped,
        total_s: first_s + after_s + second_s + secs(e2.hold),
    })
}

/// The table and the retrigger (when asked), as text or JSON.
#[must_use]
pub fn render(name: &str, table: &[Press], again: Option<&Retrigger>, json: bool) -> String {
    if json {
        let v = serde_json::json!({ "stage": name, "presses": table, "retrigger": again });
        return format!("{}\n", serde_json::to_string_pretty(&v).unwrap_or_default());
    }
    let mut o = String::new();
    let _ = writeln!(o, "press length against hold \u{b7} {name}");
    let _ = writeln!(o, "  {:>12}  {:>12}  {:>12}  {:>12}", "press", "C at release", "hold", "active");
    for p in table {
        let _ = writeln!(
            o,
            "  {:>12}  {:>12}  {:>12}  {:>12}",
            si(p.press_s, "s"),
            si(p.cap_at_release_v, "V"),
            si(p.hold_s, "s"),
            si(p.active_s, "s")
        );
    }
    if let Some(r) = again {
        let _ = writeln!(
            o,
            "\n  a second {} press {} after releasing the first ({} press, hold {}):",
            si(r.second.press_s, "s"),
            si(r.after_s, "s"),
            si(r.first.press_s, "s"),
            si(r.first.hold_s, "s")
        );
        let _ = writeln!(
            o,
            "    the capacitor has fallen to {}; the output {}",
            si(r.cap_at_second_v, "V"),
            if r.dropped { "went off in between and turns on again" } else { "stays on throughout" }
        );
        let _ = writeln!(
            o,
            "    hold after the second release {}; off {} after the first press began",
            si(r.second.hold_s, "s"),
            si(r.total_s, "s")
        );
    }
    let _ = writeln!(o, "\n  note: {}", crate::fmt::CAUTION);
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_longer_press_never_shortens_the_hold_and_a_retrigger_extends_it() -> Result<(), Error> {
        let sf = crate::testing::example();
        let t = table(&sf, 0.05)?;
        assert!(matches!(table(&sf, 1e-9), Err(Error::StageFails(_))));
        assert!(t.len() >= 5);
        assert!(t.windows(2).all(|w| w.first().map(|a| a.hold_s) <= w.get(1).map(|b| b.hold_s)));
        let r = retrigger(&sf, 0.1, 0.3, 0.1)?;
        assert!(!r.dropped && r.cap_at_second_v < r.first.cap_at_release_v);
        // A full second press charges to the same target: the same hold after it (model).
        assert!((r.second.hold_s - r.first.hold_s).abs() < 1e-3 * r.first.hold_s);
        assert!((r.total_s - (0.1 + 0.3 + 0.1 + r.second.hold_s)).abs() < 1e-12);
        let late = retrigger(&sf, 0.1, 2.0, 0.1)?;
        assert!(late.dropped);
        Ok(())
    }
}
