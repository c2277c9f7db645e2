//! `rchold curve`: the node voltage through press and release, sampled from
//! the simulated twin, with the thresholds and the extreme corners.

use rc_model::window::ThresholdSpread;
use rc_model::{Model, Stage};

use crate::fmt::{corner_text, secs, si};
use crate::report::chart::{self, Curve, Ink, Mark, Series};
use crate::sim::twin::Twin;
use crate::stage::file::StageFile;
use crate::Error;

/// Node voltage over time for a press of the stage's length, sampled from
/// the twin (its differential equation, not the closed form): `points`
/// samples over `span_s`.
#[must_use]
pub fn trace(stage: &Stage, span_s: f64, points: usize) -> Vec<(f64, f64)> {
    use embedded_hal::digital::OutputPin;
    let twin = Twin::new(stage, &[], 1_000_000, 0);
    let (mut trigger, _, _, _) = twin.handles();
    let press = stage.press_ns as f64 * 1e-9;
    let dt = span_s / points.max(2) as f64;
    let mut out = Vec::with_capacity(points + 2);
    let _ = trigger.set_low();
    let mut t = 0.0;
    out.push((0.0, twin.node_v()));
    while t < span_s {
        let next = if t < press && t + dt > press { press } else { t + dt };
        twin.wait(next - t);
        t = next;
        if (t - press).abs() < 1e-15 {
            let _ = trigger.set_high();
        }
        out.push((t, twin.node_v()));
    }
    out
}

/// The node-voltage plot of a stage file as SVG: the nominal trace and the
/// shortest- and longest-hold corners, the thresholds with their bands, the
/// release and the nominal hold's end. `name` titles the plot.
///
/// # Errors
/// The stage file's error when the nominal stage cannot be evaluated.
pub fn curve_svg(sf: &StageFile, name: &str) -> Result<String, Error> {
    let nominal = &sf.stage;
    let e = sf.nominal()?;
    let mut corners = Vec::new();
    let w = sf.window()?;
    if sf.spread.active() != 0 {
        for (label, corner) in [("shortest", w.min_corner), ("longest", w.max_corner)] {
            if let Ok(s) = sf.spread.at_corner(nominal, corner) {
                corners.push((format!("{label} ({})", corner_text(corner)), s));
            }
        }
    }
    let press = nominal.press_ns as f64 * 1e-9;
    let longest = corners
        .iter()
        .filter_map(|(_, s)| Model::new(s).and_then(|m| m.evaluate()).ok().map(|e| secs(e.hold)))
        .fold(secs(e.hold), f64::max);
    let span = press + 1.3 * longest.max(1e-9);
    let volts = |uv: u32| f64::from(uv) * 1e-6;
    let line = |st: &Stage, label: &str, ink: Ink| Series {
        points: trace(st, span, 600),
        ink,
        dots: false,
        label: Some(label.to_owned()),
    };
    let mut traces: Vec<Series<f64>> = corners.iter().map(|(label, st)| line(st, label, Ink::Muted)).collect();
    traces.push(line(nominal, "nominal", Ink::Centre));
    let levels = if nominal.rise_uv == nominal.fall_uv {
        vec![Mark { at: volts(nominal.rise_uv), label: "switching point".into(), ink: Ink::Fall }]
    } else {
        vec![
            Mark { at: volts(nominal.rise_uv), label: "rising threshold".into(), ink: Ink::Rise },
            Mark { at: volts(nominal.fall_uv), label: "falling threshold".into(), ink: Ink::Fall },
        ]
    };
    let bands = match sf.spread.thresholds {
        Some(ThresholdSpread::Schmitt { rise_uv, fall_uv }) => vec![
            (volts(rise_uv.0), volts(rise_uv.1), "rising threshold (band, typical)".to_owned(), Ink::Rise),
            (volts(fall_uv.0), volts(fall_uv.1), "falling threshold (band, typical)".to_owned(), Ink::Fall),
        ],
        Some(ThresholdSpread::Single { min_uv, max_uv }) => {
            vec![(volts(min_uv), volts(max_uv), "switching point (band, typical)".to_owned(), Ink::Fall)]
        }
        None => Vec::new(),
    };
    let moments = [
        Mark { at: press, label: "release".into(), ink: Ink::Muted },
        Mark { at: press + secs(e.hold), label: format!("hold ends ({})", si(secs(e.hold), "s")), ink: Ink::Centre },
    ];
    Ok(chart::curve(&Curve {
        title: &format!("node voltage · {name}"),
        traces: &traces,
        levels: &levels,
        bands: &bands,
        moments: &moments,
        press_s: press,
        span_s: span,
        v_max: volts(nominal.vdd_uv) * 1.05,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_trace_charges_then_falls_through_the_threshold_near_the_model_hold() {
        let sf = crate::testing::example();
        let t = trace(&sf.stage, 1.0, 2_000);
        let at_release = t.iter().filter(|p| p.0 <= 0.1).map(|p| p.1).fold(0.0, f64::max);
        assert!((at_release - 4.4).abs() < 0.01, "charged to {at_release} V");
        // The falling threshold 2.1 V is crossed 739.6 ms after the release (the model's hold).
        let cross = t.iter().find(|p| p.0 > 0.1 && p.1 < 2.1).map_or(0.0, |p| p.0 - 0.1);
        assert!((cross - 0.7396).abs() < 0.002, "{cross}");
        assert!(curve_svg(&sf, "t").map(|s| s.contains("node voltage (V)")).unwrap_or(false));
    }
}
