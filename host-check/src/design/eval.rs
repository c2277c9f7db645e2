//! `rchold eval`: one stage's timing, its tolerance window and design warnings.

use std::fmt::Write as _;

use rc_model::window::Window;
use rc_model::{Diode, Error, Evaluation, Model};
use serde_json::json;

use crate::fmt::{corner_text, secs, si, CAUTION, STORED_ENERGY};
use crate::reference::StageF;
use crate::stage::file::{Purpose, StageFile};

/// A design warning: a stable code and a sentence with its numbers.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Warning {
    /// Stable machine-readable code.
    pub code: &'static str,
    /// What was found, with numbers.
    pub message: String,
}

/// Everything `rchold eval` reports.
#[derive(Debug, Clone)]
pub struct EvalReport {
    /// The nominal evaluation, or why the stage does not work.
    pub nominal: Result<Evaluation, Error>,
    /// The field window (every corner of the file), or the corner that fails.
    pub window: Option<Result<Window, rc_model::window::CornerFailure>>,
    /// The fixture window (new parts at the fixture's temperature).
    pub fixture_window: Option<Result<Window, rc_model::window::CornerFailure>>,
    /// Design warnings.
    pub warnings: Vec<Warning>,
}

/// Energy above which a stage gets the stored-energy caution, J (common practice, no source).
pub const STORED_ENERGY_J: f64 = 0.01;

/// Evaluates a stage file: nominal timing, window and warnings.
#[must_use]
pub fn evaluate(sf: &StageFile) -> EvalReport {
    let stage = &sf.stage;
    let nominal = Model::new(stage).and_then(|m| m.evaluate());
    let window = match &nominal {
        Ok(_) if sf.spread.active() != 0 => Some(sf.spread.window(stage)),
        _ => None,
    };
    let fixture = sf.spread_for(Purpose::Fixture);
    let fixture_window = match &nominal {
        Ok(_) if fixture.active() != 0 => Some(fixture.window(stage)),
        _ => None,
    };
    let mut warnings = Vec::new();
    let f = StageF::from(stage);
    let r_eff = 1.0 / (1.0 / f.r + 1.0 / f.r_leak);
    if let Err(Error::NeverActivates { target_uv, rise_uv }) = nominal {
        warnings.push(Warning {
            code: "never-activates",
            message: format!(
                "the node charges to {}, not above the rising threshold {}: the output never turns on",
                si(target_uv as f64 * 1e-6, "V"),
                si(f64::from(rise_uv) * 1e-6, "V")
            ),
        });
    }
    let v_inf = f.charge_target();
    warnings.extend(drive_warning(sf, &f, r_eff, v_inf));
    // Slow edge through a plain input's switching band.
    let i_lk = f.i_in + if let crate::reference::DiodeF::Junction { is, .. } = f.diode { is } else { 0.0 };
    let tau_d = (r_eff + f.rs) * f.c;
    if !sf.schmitt {
        let (lo, hi) = match sf.preset.and_then(|p| p.bands(stage.vdd_uv).ok()) {
            Some(b) => (f64::from(b.fall.min_uv) * 1e-6, f64::from(b.fall.max_uv) * 1e-6),
            None => (f.fall - 0.05 * f.vdd, f.fall + 0.05 * f.vdd),
        };
        let lk = r_eff * i_lk;
        let through = tau_d * ((hi + lk) / (lo.max(1e-3) + lk)).ln();
        if through > 1e-6 {
            warnings.push(Warning {
                code: "slow-edge",
                message: format!(
                    "the node takes {} to fall through the input's switching band ({} to {}); a plain CMOS input may chatter and draw shoot-through current meanwhile (common practice: keep edges under 1 µs): use a Schmitt input",
                    si(through, "s"),
                    si(hi, "V"),
                    si(lo, "V")
                ),
            });
        }
    }
    // Leakage against R.
    if f.r_leak.is_finite() && f.r_leak < 10.0 * f.r {
        warnings.push(Warning {
            code: "leakage",
            message: format!(
                "leakage of {} is within 10× of R = {}: the hold depends on a resistance nobody controls",
                si(f.r_leak, "Ω"),
                si(f.r, "Ω")
            ),
        });
    }
    if i_lk * r_eff > 0.01 * f.fall {
        warnings.push(Warning {
            code: "leakage",
            message: format!(
                "a constant leakage of {} through R drops {}, over 1 % of the falling threshold {}: it shortens the hold noticeably",
                si(i_lk, "A"),
                si(i_lk * r_eff, "V"),
                si(f.fall, "V")
            ),
        });
    }
    // Press against the charge time constant.
    if let Ok(e) = &nominal {
        let tau_c = secs(e.charge_tau);
        if f.press < 5.0 * tau_c {
            warnings.push(Warning {
                code: "short-press",
                message: format!(
                    "a {} press is shorter than 5 charge time constants ({}): the capacitor starts the hold at {} instead of {}, and the hold depends on the press length",
                    si(f.press, "s"),
                    si(5.0 * tau_c, "s"),
                    si(e.cap_at_release.uv_q32() as f64 / 4_294_967_296.0 * 1e-6, "V"),
                    si(v_inf, "V")
                ),
            });
        }
    }
    // Stored energy.
    let energy = 0.5 * f.c * f.vdd * f.vdd;
    if energy >= STORED_ENERGY_J {
        warnings.push(Warning {
            code: "stored-energy",
            message: format!("the capacitor stores {} at {}: {STORED_ENERGY}", si(energy, "J"), si(f.vdd, "V")),
        });
    }
    EvalReport { nominal, window, fixture_window, warnings }
}

/// The warning about the current the driver must give at the start of a
/// press from empty, when it is above the family's output rating or unlimited.
fn drive_warning(sf: &StageFile, f: &StageF, r_eff: f64, v_inf: f64) -> Option<Warning> {
    let i_inf = v_inf / r_eff + f.i_in;
    let peak = match f.diode {
        crate::reference::DiodeF::Drop(vf) => {
            let path = f.ro + f.rch + f.rs;
            if path > 0.0 {
                (f.vdd - vf) / path
            } else {
                f64::INFINITY
            }
        }
        crate::reference::DiodeF::Junction { .. } => f.current_at_cap(0.0, i_inf),
    };
    if let Some(p) = sf.preset {
        let limit = f64::from(p.output_limit_ma) * 1e-3;
        (peak > limit).then(|| Warning {
                code: "drive-current",
                message: format!(
                    "the press starts by pulling {} from the driver, above the {} a {} output is commonly rated for (from memory; check the part): add charge resistance",
                    si(peak, "A"),
                    si(limit, "A"),
                    p.name
                ),
            })
    } else {
        peak.is_infinite().then(|| Warning {
            code: "drive-current",
            message: "no resistance limits the charge current (driver, charge and series resistance are all 0 Ω)"
                .into(),
        })
    }
}

fn diode_text(d: Diode) -> String {
    match d {
        Diode::Drop { drop_uv } => format!("fixed {} diode", si(f64::from(drop_uv) * 1e-6, "V")),
        Diode::Junction { is_fa, n_milli, rs_mohm } => format!(
            "junction diode (Is {}, n {:.2}, rs {})",
            si(is_fa as f64 * 1e-15, "A"),
            f64::from(n_milli) / 1e3,
            si(rs_mohm as f64 * 1e-3, "Ω")
        ),
    }
}

fn line(out: &mut String, label: &str, value: &str) {
    let dots = 30usize.saturating_sub(label.chars().count());
    let _ = writeln!(out, "  {label} {} {value}", ".".repeat(dots));
}

/// The text report.
#[must_use]
pub fn render_text(sf: &StageFile, r: &EvalReport) -> String {
    let s = &sf.stage;
    let f = StageF::from(s);
    let mut out = String::new();
    let title = sf.name.as_deref().map(|n| format!(" \u{b7} {n}")).unwrap_or_default();
    let _ = writeln!(out, "hold stage {}{}", sf.path.display(), title);
    let input = match sf.preset {
        Some(p) => format!(
            "input {}{}",
            p.name,
            if p.provenance == rc_model::presets::Provenance::FromMemory { " (bands from memory)" } else { "" }
        ),
        None => "custom input".into(),
    };
    let _ = writeln!(
        out,
        "  {} supply \u{b7} R {} \u{b7} C {} \u{b7} {} \u{b7} {} \u{b7} thresholds {} / {}",
        si(f.vdd, "V"),
        si(f.r, "Ω"),
        si(f.c, "F"),
        diode_text(s.diode),
        input,
        si(f.rise, "V"),
        si(f.fall, "V")
    );
    let _ = writeln!(out);
    match &r.nominal {
        Ok(e) => {
            line(&mut out, "hold after release", &si(secs(e.hold), "s"));
            line(&mut out, "turn-on latency", &si(secs(e.on_latency), "s"));
            line(&mut out, &format!("active for a {} press", si(f.press, "s")), &si(secs(e.active), "s"));
            line(
                &mut out,
                "node at release",
                &format!(
                    "{} (charge target {})",
                    si(e.node_at_release.uv_q32() as f64 / 4_294_967_296.0 * 1e-6, "V"),
                    si(e.charge_target.uv_q32() as f64 / 4_294_967_296.0 * 1e-6, "V")
                ),
            );
            line(
                &mut out,
                "time constants",
                &format!("charge {} \u{b7} discharge {}", si(secs(e.charge_tau), "s"), si(secs(e.discharge_tau), "s")),
            );
        }
        Err(e) => {
            let _ = writeln!(out, "  the stage does not work as a hold stage: {e}");
        }
    }
    match &r.window {
        Some(Ok(w)) => {
            let _ = writeln!(out);
            line(
                &mut out,
                &format!("field window, {} corners", w.corners),
                &format!("{} to {}", si(secs(w.min), "s"), si(secs(w.max), "s")),
            );
            let _ = writeln!(out, "    shortest at {}", corner_text(w.min_corner));
            let _ = writeln!(out, "    longest at  {}", corner_text(w.max_corner));
        }
        Some(Err(cf)) => {
            let _ = writeln!(out);
            let _ = writeln!(out, "  window: the corner {} fails: {}", corner_text(cf.corner), cf.error);
        }
        None => {}
    }
    if let Some(Ok(w)) = &r.fixture_window {
        line(
            &mut out,
            &format!("fixture window, {} corners", w.corners),
            &format!("{} to {} (new parts)", si(secs(w.min), "s"), si(secs(w.max), "s")),
        );
    }
    if !r.warnings.is_empty() {
        let _ = writeln!(out);
        let _ = writeln!(out, "  findings");
        for w in &r.warnings {
            let _ = writeln!(out, "    {} \u{2014} {}", w.code, w.message);
        }
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "  note: {CAUTION}");
    out
}

/// The JSON report.
#[must_use]
pub fn render_json(sf: &StageFile, r: &EvalReport) -> serde_json::Value {
    let warnings: Vec<_> = r.warnings.iter().map(|w| json!({"code": w.code, "message": w.message})).collect();
    let mut v = json!({
        "file": sf.path.display().to_string(),
        "name": sf.name,
        "warnings": warnings,
        "caution": CAUTION,
    });
    match &r.nominal {
        Ok(e) => {
            v["hold_s"] = json!(secs(e.hold));
            v["on_latency_s"] = json!(secs(e.on_latency));
            v["active_s"] = json!(secs(e.active));
            v["node_at_release_v"] = json!(e.node_at_release.uv_q32() as f64 / 4_294_967_296.0 * 1e-6);
            v["charge_target_v"] = json!(e.charge_target.uv_q32() as f64 / 4_294_967_296.0 * 1e-6);
            v["charge_tau_s"] = json!(secs(e.charge_tau));
            v["discharge_tau_s"] = json!(secs(e.discharge_tau));
        }
        Err(e) => v["error"] = json!(e.to_string()),
    }
    match &r.window {
        Some(Ok(w)) => {
            v["window"] = json!({
                "min_s": secs(w.min),
                "max_s": secs(w.max),
                "nominal_s": secs(w.nominal),
                "min_corner": corner_text(w.min_corner),
                "max_corner": corner_text(w.max_corner),
                "corners": w.corners,
            });
        }
        Some(Err(cf)) => v["window"] = json!({"error": cf.error.to_string(), "corner": corner_text(cf.corner)}),
        None => {}
    }
    if let Some(Ok(w)) = &r.fixture_window {
        v["fixture_window"] = json!({"min_s": secs(w.min), "max_s": secs(w.max), "corners": w.corners});
    }
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    fn stage(text: &str) -> StageFile {
        crate::stage::file::parse(std::path::Path::new("t.toml"), text).unwrap_or_else(|e| panic!("{e}"))
    }

    #[test]
    fn warnings_by_code() {
        let ok = evaluate(&stage(crate::sim::demo::BOARD_TOML));
        assert!(ok.nominal.is_ok());
        let big = crate::sim::demo::BOARD_TOML.replace("c = \"1u\"", "c = \"4.7m\"");
        let r = evaluate(&stage(&big));
        assert!(r.warnings.iter().any(|w| w.code == "stored-energy"), "{:?}", r.warnings);
        let weak = crate::sim::demo::BOARD_TOML.replace("vdd = \"5\"", "vdd = \"3.3\"");
        let r = evaluate(&stage(&weak));
        assert!(r.warnings.iter().all(|w| w.code != "stored-energy"));
    }
}
