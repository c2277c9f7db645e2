//! `rchold compare A.toml B.toml`: two stages side by side — nominal timing,
//! the worst-case window, the warnings and what drives the spread — with
//! every difference marked.

use std::fmt::Write as _;

use serde::Serialize;

use crate::design::eval::evaluate;
use crate::design::spread::sensitivity::first_order;
use crate::design::spread::Dist;
use crate::fmt::{secs, si};
use crate::stage::file::StageFile;
use crate::Error;

/// One stage's figures.
#[derive(Debug, Clone, Serialize)]
pub struct Side {
    /// The stage's name.
    pub name: String,
    /// Nominal hold after release, s.
    pub hold_s: f64,
    /// Turn-on latency, s.
    pub on_latency_s: f64,
    /// Active time for the file's press, s.
    pub active_s: f64,
    /// Worst-case window (shortest, longest hold), s.
    pub window_s: (f64, f64),
    /// Codes of the design warnings.
    pub warnings: Vec<&'static str>,
    /// Each moving parameter's share of the hold's variance, largest first.
    pub shares: Vec<(&'static str, f64)>,
}

/// The figures of a stage file.
///
/// # Errors
/// The refusals every design command gives ([`StageFile::refusal`],
/// [`StageFile::corner_refusal`]).
pub fn side(sf: &StageFile, name: &str) -> Result<Side, Error> {
    let e = sf.nominal()?;
    let w = sf.window()?;
    let shares = first_order(&sf.stage, &sf.spread, Dist::Uniform).map_err(|e| sf.refusal(e))?;
    Ok(Side {
        name: name.to_owned(),
        hold_s: secs(e.hold),
        on_latency_s: secs(e.on_latency),
        active_s: secs(e.active),
        window_s: (secs(w.min), secs(w.max)),
        warnings: evaluate(sf).warnings.iter().map(|w| w.code).collect(),
        shares: shares.iter().map(|s| (s.param, s.share)).collect(),
    })
}

/// A row of the comparison: the two values and how far B is from A, %.
fn row(o: &mut String, label: &str, a: f64, b: f64, unit: &str) {
    let change = if a != 0.0 { 100.0 * (b / a - 1.0) } else { f64::NAN };
    let mark = if (b - a).abs() > 1e-12 * a.abs().max(b.abs()) { "≠" } else { " " };
    let _ = writeln!(o, "  {mark} {label:<22} {:>12}  {:>12}  {change:+8.2} %", si(a, unit), si(b, unit));
}

/// The two stages side by side, as text or JSON.
#[must_use]
pub fn render(a: &Side, b: &Side, json: bool) -> String {
    if json {
        let v = serde_json::json!({ "a": a, "b": b });
        return format!("{}\n", serde_json::to_string_pretty(&v).unwrap_or_default());
    }
    let mut o = String::new();
    let _ = writeln!(o, "A: {}\nB: {}", a.name, b.name);
    let _ = writeln!(o, "    {:<22} {:>12}  {:>12}  {:>10}", "", "A", "B", "B from A");
    row(&mut o, "hold", a.hold_s, b.hold_s, "s");
    row(&mut o, "turn-on latency", a.on_latency_s, b.on_latency_s, "s");
    row(&mut o, "active for the press", a.active_s, b.active_s, "s");
    row(&mut o, "worst case, shortest", a.window_s.0, b.window_s.0, "s");
    row(&mut o, "worst case, longest", a.window_s.1, b.window_s.1, "s");
    let spread = |s: &Side| 100.0 * (s.window_s.1 - s.window_s.0) / s.hold_s;
    let _ = writeln!(o, "    {:<22} {:>11.1} %  {:>11.1} %", "window width", spread(a), spread(b));
    let warn = |s: &Side| if s.warnings.is_empty() { "none".to_owned() } else { s.warnings.join(", ") };
    let mark = if a.warnings == b.warnings { " " } else { "≠" };
    let _ = writeln!(o, "  {mark} warnings: A {} · B {}", warn(a), warn(b));
    let top = |s: &Side| {
        s.shares.iter().take(3).map(|(p, f)| format!("{p} {:.0} %", 100.0 * f)).collect::<Vec<_>>().join(", ")
    };
    let mark = if a.shares.first().map(|x| x.0) == b.shares.first().map(|x| x.0) { " " } else { "≠" };
    let _ = writeln!(o, "  {mark} what drives the spread: A {} · B {}", top(a), top(b));
    let _ = writeln!(o, "  (≠ marks a difference)\n\n  note: {}", crate::fmt::CAUTION);
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn twice_the_capacitor_doubles_the_hold_and_is_marked() -> Result<(), Error> {
        let a = crate::testing::example();
        let text = crate::sim::demo::BOARD_TOML.replace("c = \"1u\"", "c = \"2u\"");
        let b = crate::stage::file::parse(std::path::Path::new("b.toml"), &text)?;
        let (sa, sb) = (side(&a, "a")?, side(&b, "b")?);
        // t = RC·ln(V0/Vth): the hold is proportional to C (math).
        assert!((sb.hold_s / sa.hold_s - 2.0).abs() < 1e-6);
        let t = render(&sa, &sb, false);
        assert!(t.contains("≠ hold") && t.contains("+100.00 %"), "{t}");
        assert!(render(&sa, &sa, false).contains("    hold"));
        Ok(())
    }
}
