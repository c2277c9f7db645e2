//! SPICE netlists of a hold stage, for ngspice's batch mode or any simulator
//! that reads SPICE.
//!
//! The driving inverter is a voltage source switching 0 → Vdd → 0 (1 ns edges)
//! behind its output resistance. A junction diode is a SPICE diode with the
//! stage's saturation current, ideality and series resistance (no junction
//! capacitance); a fixed drop is an ideal rectifier with that drop (a
//! behavioural current source conducting only above it). The node carries R,
//! the leakage resistance, a constant leakage current, and C behind its series
//! resistance. `.meas` lines report the turn-on time, the capacitor and node
//! voltages at the last release, and the time the node falls through the
//! falling threshold after it.

use std::fmt::Write as _;

use rc_model::{Diode, Model, Stage};

use crate::reference::{self, StageF};

/// When the trigger is pressed: start and duration, in seconds.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Press {
    /// Start, s.
    pub start_s: f64,
    /// Duration, s.
    pub duration_s: f64,
}

/// A netlist and what it measures.
#[derive(Debug, Clone)]
pub struct Netlist {
    /// The netlist text.
    pub text: String,
    /// Time of the last release, s (the hold is `t_fall − this`).
    pub last_release_s: f64,
}

/// Names of the `.meas` results the netlist prints.
pub mod meas {
    /// Time the node first crosses the rising threshold, s.
    pub const TURN_ON: &str = "t_turn_on";
    /// Capacitor voltage at the last release, V.
    pub const CAP_AT_RELEASE: &str = "v_cap_release";
    /// Node voltage just after the last release (1 ns later), V.
    pub const NODE_AT_RELEASE: &str = "v_node_release";
    /// Time the node falls through the falling threshold after the last release, s.
    pub const FALL: &str = "t_fall";
}

fn num(x: f64) -> String {
    format!("{x:.9e}")
}

/// Writes the netlist for the stage's own press from an empty capacitor.
#[must_use]
pub fn single_press(stage: &Stage, title: &str) -> Netlist {
    let press = stage.press_ns as f64 * 1e-9;
    build(stage, title, &[Press { start_s: 0.0, duration_s: press }])
}

/// Writes the netlist for a sequence of presses (retriggers), the stage's own
/// press length ignored.
#[must_use]
pub fn build(stage: &Stage, title: &str, presses: &[Press]) -> Netlist {
    let f = StageF::from(stage);
    let mut t = String::new();
    let _ = writeln!(t, "* rchold hold stage: {}", title.replace('\n', " "));
    let temp = f.temp_c;
    // tnom = temp keeps the diode's Is as given (no temperature scaling), and a
    // small gmin keeps the simulator's own conductance across each junction
    // (1e-12 S by default) from adding leakage the stage does not have.
    let _ = writeln!(t, ".options temp={temp} tnom={temp} reltol=1e-6 abstol=1e-15 vntol=1e-9 gmin=1e-15 method=gear");
    // Driver: PWL 0 → Vdd for each press.
    let edge = 1e-9;
    let mut pwl = vec![(0.0, 0.0)];
    for p in presses {
        let s = p.start_s.max(pwl.last().map_or(0.0, |x| x.0) + edge);
        pwl.push((s, 0.0));
        pwl.push((s + edge, f.vdd));
        pwl.push((s + p.duration_s, f.vdd));
        pwl.push((s + p.duration_s + edge, 0.0));
    }
    let points: Vec<String> = pwl.iter().map(|(ts, v)| format!("{} {}", num(*ts), num(*v))).collect();
    let _ = writeln!(t, "VDRV drv 0 PWL({})", points.join(" "));
    // Zero-ohm elements are left out and their two nodes joined: a tiny
    // stand-in resistor would make the simulator's matrix ill-conditioned
    // (1e6 S beside 1e-8 S costs it 0.5 % on a 100 MΩ hold).
    let drv_out = if f.ro > 0.0 { "d1" } else { "drv" };
    if f.ro > 0.0 {
        let _ = writeln!(t, "RO drv d1 {}", num(f.ro));
    }
    let cathode = if f.rch > 0.0 { "d2" } else { "a" };
    match stage.diode {
        Diode::Junction { .. } => {
            if let reference::DiodeF::Junction { is, n, rs } = f.diode {
                let _ = writeln!(t, "D1 {drv_out} {cathode} DHOLD");
                let _ = writeln!(t, ".model DHOLD D(IS={} N={} RS={})", num(is), num(n), num(rs));
            }
        }
        Diode::Drop { .. } => {
            if let reference::DiodeF::Drop(vf) = f.diode {
                // Ideal rectifier: conducts with a 1 mΩ slope above the drop, nothing below.
                let _ = writeln!(t, "B1 {drv_out} {cathode} I = max(V({drv_out},{cathode}) - {}, 0) / 1e-3", num(vf));
            }
        }
    }
    if f.rch > 0.0 {
        let _ = writeln!(t, "RCH d2 a {}", num(f.rch));
    }
    let _ = writeln!(t, "R1 a 0 {}", num(f.r));
    if f.r_leak.is_finite() {
        let _ = writeln!(t, "RLEAK a 0 {}", num(f.r_leak));
    }
    if f.i_in > 0.0 {
        let _ = writeln!(t, "ILEAK a 0 DC {}", num(f.i_in));
    }
    let cap = if f.rs > 0.0 { "c" } else { "a" };
    if f.rs > 0.0 {
        let _ = writeln!(t, "RS a c {}", num(f.rs));
    }
    let _ = writeln!(t, "C1 {cap} 0 {} IC=0", num(f.c));
    // Time step: fine while charging, coarse enough for hour-long holds.
    let last = presses.last().copied().unwrap_or(Press { start_s: 0.0, duration_s: f.press });
    let last_release = last.start_s + last.duration_s + edge;
    let model = Model::new(stage).ok();
    let eval = model.and_then(|m| m.evaluate().ok());
    let tau_c = eval.map_or(f.c * (f.ro + f.rch + f.rs + 1.0), |e| crate::fmt::secs(e.charge_tau));
    let tau_d = (1.0 / (1.0 / f.r + 1.0 / f.r_leak) + f.rs) * f.c;
    let hold = eval.map_or(5.0 * tau_d, |e| crate::fmt::secs(e.hold));
    let stop = last_release + 1.5 * hold.max(tau_d * 0.01);
    let shortest_press = presses.iter().map(|p| p.duration_s).fold(f64::INFINITY, f64::min);
    let tmax = (tau_c / 20.0).min(shortest_press / 50.0).min(hold / 2000.0).max(stop / 5e6);
    let _ = writeln!(t, ".tran {} {} 0 {} uic", num(tmax), num(stop), num(tmax));
    let _ = writeln!(t, ".meas tran {} WHEN v(a)={} RISE=1", meas::TURN_ON, num(f.rise));
    let _ = writeln!(t, ".meas tran {} FIND v({cap}) AT={}", meas::CAP_AT_RELEASE, num(last_release));
    let _ = writeln!(t, ".meas tran {} FIND v(a) AT={}", meas::NODE_AT_RELEASE, num(last_release + edge));
    let _ = writeln!(t, ".meas tran {} WHEN v(a)={} FALL=LAST", meas::FALL, num(f.fall));
    let _ = writeln!(t, ".end");
    Netlist { text: t, last_release_s: last_release }
}

/// Reads `name = value` results from ngspice's batch output. Failed
/// measurements are absent.
#[must_use]
pub fn parse_measurements(output: &str) -> Vec<(String, f64)> {
    output
        .lines()
        .filter_map(|line| {
            let (name, rest) = line.split_once('=')?;
            let name = name.trim();
            if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
                return None;
            }
            let value = rest.split_whitespace().next()?.parse::<f64>().ok()?;
            Some((name.to_ascii_lowercase(), value))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_example_becomes_a_transient_with_a_measurement() {
        let sf = crate::testing::example();
        let net = single_press(&sf.stage, "t").text;
        for want in ["R1 a 0 1.000000000e6", "C1 a 0 1.000000000e-6 IC=0", ".tran", ".meas tran t_fall"] {
            assert!(net.contains(want), "{want} missing in {net}");
        }
    }
}
