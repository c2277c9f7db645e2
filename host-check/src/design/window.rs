//! `rchold window`: the firmware pass window in ticks, as text, a Rust
//! constant, JSON, or the binary blob (timings and the prepared stage) the
//! firmware loads with `hold_firmware::Setup::from_blob`.

use std::fmt::Write as _;

use hold_firmware::{Config, Setup};
use rc_model::{Model, Prepared};
use serde_json::json;

use crate::fmt::si;
use crate::reference::{self, StageF};
use crate::stage::file::{Purpose, StageFile};
use crate::Error;
use rc_model::window::Corner;

/// The shortest and longest hold and turn-on latency over every corner of
/// `spread`, by the `f64` reference, s.
/// (The independent check of the fixed-point window; the re-check, the
/// diagnosis and the fault coverage judge by it.)
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CornerTimes {
    /// Shortest and longest hold, s.
    pub hold: (f64, f64),
    /// Shortest and longest turn-on latency, s.
    pub on: (f64, f64),
}

/// The [`CornerTimes`] of `spread` around the stage file's nominal stage.
///
/// # Errors
/// A message naming the first corner the reference cannot evaluate.
pub fn corner_times(sf: &StageFile, spread: &rc_model::window::Spread) -> Result<CornerTimes, String> {
    corner_times_of(&sf.stage, spread)
}

/// The [`CornerTimes`] of `spread` around `stage`.
///
/// # Errors
/// A message naming the first corner the reference cannot evaluate.
pub fn corner_times_of(stage: &rc_model::Stage, spread: &rc_model::window::Spread) -> Result<CornerTimes, String> {
    let active = spread.active();
    let mut t = CornerTimes { hold: (f64::INFINITY, f64::NEG_INFINITY), on: (f64::INFINITY, f64::NEG_INFINITY) };
    let mut high: u16 = 0;
    loop {
        let s = spread.at_corner(stage, Corner { high, active }).map_err(|e| e.to_string())?;
        let e = reference::evaluate(&StageF::from(&s)).map_err(|e| format!("{e:?}"))?;
        t.hold = (t.hold.0.min(e.hold), t.hold.1.max(e.hold));
        t.on = (t.on.0.min(e.on_latency), t.on.1.max(e.on_latency));
        if high == active {
            break;
        }
        high = high.wrapping_sub(active) & active;
    }
    Ok(t)
}

/// How to write the window.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Emit {
    /// A readable table.
    Text,
    /// A Rust `const` of `hold_firmware::Config`.
    Rust,
    /// JSON.
    Json,
    /// The settings blob (timings, prepared stage, CRC).
    Bin,
}

/// The firmware settings for a stage file: its window for `purpose` (the
/// fixture's: new parts at the fixture's temperature; the field's: every
/// corner in the file, environment and aging included), widened by `guard_ppm`,
/// one tick of quantisation and one poll of latency on each side; and the
/// stage prepared for the firmware's hot path over the file's temperature range.
///
/// # Errors
/// The stage file's error when the stage or a corner cannot be evaluated or
/// the window does not fit the clock.
pub fn settings(sf: &StageFile, purpose: Purpose, clock_hz: u32, guard_ppm: u32, poll_ns: u32) -> Result<Setup, Error> {
    let model = Model::new(&sf.stage).map_err(|e| sf.refusal(e))?;
    let window = sf.window_for(purpose)?;
    let config = Config::from_model(&model, &window, clock_hz, guard_ppm, poll_ns)
        .map_err(|e| Error::Input(format!("{}: {e}", sf.path.display())))?;
    let stage = Prepared::prepare(&sf.stage, &sf.spread_for(purpose), clock_hz)
        .map_err(|e| Error::Input(format!("{}: preparing the stage for the firmware: {e}", sf.path.display())))?;
    let window = match purpose {
        Purpose::Fixture => hold_firmware::WindowKind::Fixture,
        Purpose::Field => hold_firmware::WindowKind::Field,
    };
    Ok(Setup { config, stage, window })
}

/// The poll period a tester uses when none is given: 1/1000 of the nominal
/// hold, within 1 µs … 1 s, in ns. (While it waits for the output to turn
/// on, the engine polls faster: `hold_firmware::on_poll_ns`.)
///
/// # Errors
/// The stage file's error when the nominal stage cannot be evaluated.
pub fn default_poll_ns(sf: &StageFile) -> Result<u32, Error> {
    let nominal = sf.nominal()?;
    Ok((nominal.hold.ns() / 1000).clamp(1_000, 1_000_000_000) as u32)
}

/// The settings written as `emit` (text, Rust or JSON; the blob is `Config::to_blob`).
#[must_use]
pub fn render(setup: &Setup, purpose: Purpose, emit: Emit, name: &str) -> String {
    let c = &setup.config;
    let secs = |t: u64| t as f64 / f64::from(c.clock_hz);
    let stage = &setup.stage;
    let hold_ref = stage.hold_ticks_at(stage.ref_mdeg_c()).unwrap_or(0);
    let (lo, hi) = stage.temp_range_mdeg_c();
    let deg = |m: i32| f64::from(m) / 1000.0;
    match emit {
        Emit::Text => {
            let mut o = String::new();
            let _ = writeln!(
                o,
                "firmware {} window for {name} at {} ({})",
                purpose.name(),
                si(f64::from(c.clock_hz), "Hz"),
                purpose.covers()
            );
            let row = |o: &mut String, label: &str, t: u64| {
                let _ = writeln!(o, "  {label:<22} {t:>14} ticks  ({})", si(secs(t), "s"));
            };
            row(&mut o, "pass from", c.hold_min_ticks);
            row(&mut o, "pass to", c.hold_max_ticks);
            row(&mut o, "turn-on from", c.on_min_ticks);
            row(&mut o, "turn-on to", c.on_max_ticks);
            row(&mut o, "turn-on (nominal)", c.on_nominal_ticks);
            row(&mut o, "press", c.press_ticks);
            row(&mut o, "turn-on timeout", c.on_timeout_ticks);
            row(&mut o, "hold timeout", c.hold_timeout_ticks);
            row(&mut o, "idle check", c.settle_ticks);
            row(&mut o, "glitch filter", c.glitch_ticks);
            let _ = writeln!(o, "  {:<22} {:>14} ns", "poll every", c.poll_ns);
            let _ = writeln!(o, "  {:<22} {:>14} ns", "until turn-on every", c.on_poll_ns);
            let _ = writeln!(o, "  {:<22} {:>14} level changes", "chatter above", c.chatter_limit);
            let _ = writeln!(
                o,
                "  prepared stage: {hold_ref} ticks of hold at {} °C; holds judged from {} °C to {} °C",
                deg(stage.ref_mdeg_c()),
                deg(lo),
                deg(hi)
            );
            o
        }
        Emit::Rust => format!(
            "/// Hold-stage {} window for {name} ({}), made by `rchold window`.\n\
             pub const HOLD_WINDOW: hold_firmware::Config = hold_firmware::Config {{\n    \
             clock_hz: {},\n    settle_ticks: {},\n    press_ticks: {},\n    glitch_ticks: {},\n    poll_ns: {},\n    \
             on_timeout_ticks: {},\n    hold_min_ticks: {},\n    hold_max_ticks: {},\n    hold_timeout_ticks: {},\n    \
             chatter_limit: {},\n    on_min_ticks: {},\n    on_max_ticks: {},\n    on_nominal_ticks: {},\n    on_poll_ns: {},\n}};\n\n\
             /// The same timings and the stage prepared for the hot path, as the settings blob:\n\
             /// `hold_firmware::Setup::from_blob(&HOLD_SETUP)` (CRC-checked, versioned).\n\
             pub const HOLD_SETUP: [u8; hold_firmware::BLOB_LEN] = [{}];\n",
            purpose.name(),
            purpose.covers(),
            c.clock_hz,
            c.settle_ticks,
            c.press_ticks,
            c.glitch_ticks,
            c.poll_ns,
            c.on_timeout_ticks,
            c.hold_min_ticks,
            c.hold_max_ticks,
            c.hold_timeout_ticks,
            c.chatter_limit,
            c.on_min_ticks,
            c.on_max_ticks,
            c.on_nominal_ticks,
            c.on_poll_ns,
            setup.to_blob().iter().map(|b| format!("{b:#04x}")).collect::<Vec<_>>().join(", ")
        ),
        Emit::Json | Emit::Bin => {
            let v = json!({
                "stage": name,
                "window": purpose,
                "covers": purpose.covers(),
                "clock_hz": c.clock_hz,
                "settle_ticks": c.settle_ticks,
                "press_ticks": c.press_ticks,
                "glitch_ticks": c.glitch_ticks,
                "poll_ns": c.poll_ns,
                "on_timeout_ticks": c.on_timeout_ticks,
                "hold_min_ticks": c.hold_min_ticks,
                "hold_max_ticks": c.hold_max_ticks,
                "hold_timeout_ticks": c.hold_timeout_ticks,
                "chatter_limit": c.chatter_limit,
                "on_min_ticks": c.on_min_ticks,
                "on_max_ticks": c.on_max_ticks,
                "on_nominal_ticks": c.on_nominal_ticks,
                "on_poll_ns": c.on_poll_ns,
                "hold_min_s": secs(c.hold_min_ticks),
                "hold_max_s": secs(c.hold_max_ticks),
                "on_min_s": secs(c.on_min_ticks),
                "on_max_s": secs(c.on_max_ticks),
                "prepared_stage": {
                    "hold_at_reference_ticks": hold_ref,
                    "reference_mdeg_c": stage.ref_mdeg_c(),
                    "temp_range_mdeg_c": [lo, hi],
                    "bytes_hex": stage.to_bytes().iter().map(|b| format!("{b:02x}")).collect::<String>(),
                },
            });
            format!("{}\n", serde_json::to_string_pretty(&v).unwrap_or_default())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_window_holds_the_nominal_and_widens_with_the_guard() -> Result<(), Error> {
        let sf = crate::testing::example();
        let poll = default_poll_ns(&sf)?;
        let tight = settings(&sf, Purpose::Fixture, 1_000_000, 0, poll)?.config;
        let wide = settings(&sf, Purpose::Fixture, 1_000_000, 20_000, poll)?.config;
        // The example's nominal hold is 739.6 ms: 739,617 ticks at 1 MHz.
        assert!(tight.hold_min_ticks < 739_617 && 739_617 < tight.hold_max_ticks);
        assert!(wide.hold_min_ticks < tight.hold_min_ticks && wide.hold_max_ticks > tight.hold_max_ticks);
        assert!(render(&settings(&sf, Purpose::Fixture, 1_000_000, 20_000, poll)?, Purpose::Fixture, Emit::Text, "t")
            .contains("pass from"));
        // The turn-on latency window holds the nominal latency and widens too.
        assert!(tight.on_min_ticks <= tight.on_nominal_ticks && tight.on_nominal_ticks <= tight.on_max_ticks);
        assert!(wide.on_min_ticks <= tight.on_min_ticks && wide.on_max_ticks > tight.on_max_ticks);
        Ok(())
    }

    /// The Rust constant `window --emit rust` writes names every field of
    /// `Config` (a missing one would not compile in the user's firmware).
    #[test]
    fn the_rust_constant_names_every_field() -> Result<(), Error> {
        let sf = crate::testing::example();
        let setup = settings(&sf, Purpose::Fixture, 1_000_000, 20_000, default_poll_ns(&sf)?)?;
        let text = render(&setup, Purpose::Fixture, Emit::Rust, "t");
        let c = setup.config;
        for (field, v) in [
            ("hold_min_ticks", c.hold_min_ticks),
            ("on_min_ticks", c.on_min_ticks),
            ("on_max_ticks", c.on_max_ticks),
            ("on_nominal_ticks", c.on_nominal_ticks),
            ("on_poll_ns", u64::from(c.on_poll_ns)),
            ("chatter_limit", u64::from(c.chatter_limit)),
        ] {
            assert!(text.contains(&format!("    {field}: {v},\n")), "{field} missing:\n{text}");
        }
        Ok(())
    }
}
