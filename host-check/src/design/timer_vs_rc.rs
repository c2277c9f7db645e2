//! `rchold timer-vs-rc`: the stage's worst-case spread against a software
//! timer of the same nominal hold.

use std::fmt::Write as _;

use rc_model::window::Window;

use crate::fmt::{corner_text, secs, si};

/// The software timer's clock.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TimerClock {
    /// Tick frequency, Hz.
    pub hz: f64,
    /// Frequency tolerance over temperature and life, as a fraction (crystal
    /// 50 ppm → 5e-5; internal RC oscillator 2 % → 0.02).
    pub tolerance: f64,
}

/// Standby currents the user supplies, A.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Currents {
    /// The stage's quiescent current (its two CMOS gates), A.
    pub stage_quiescent_a: f64,
    /// The MCU asleep with one timer running, A.
    pub timer_sleep_a: f64,
}

/// The comparison.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Comparison {
    /// Nominal hold, s.
    pub nominal_s: f64,
    /// Stage worst case, s.
    pub stage: (f64, f64),
    /// Software timer worst case, s.
    pub timer: (f64, f64),
    /// Timer ticks that reproduce the nominal hold.
    pub ticks: u64,
    /// Whether the tick count overflows a 32-bit counter.
    pub needs_extension: bool,
}

/// Compares the stage's worst-case window with a software timer of the same
/// nominal hold: the timer's spread is its clock tolerance plus one tick.
#[must_use]
pub fn compare(nominal_s: f64, window: &Window, clock: TimerClock) -> Comparison {
    let ticks = (nominal_s * clock.hz).round().max(1.0) as u64;
    let t = ticks as f64 / clock.hz;
    let tick = 1.0 / clock.hz;
    Comparison {
        nominal_s,
        stage: (secs(window.min), secs(window.max)),
        timer: (t / (1.0 + clock.tolerance) - tick, t / (1.0 - clock.tolerance) + tick),
        ticks,
        needs_extension: ticks > u64::from(u32::MAX),
    }
}

/// The comparison as text.
#[must_use]
pub fn render_comparison(
    name: &str,
    c: &Comparison,
    clock: TimerClock,
    currents: Option<Currents>,
    vdd: f64,
    window: &Window,
) -> String {
    let mut o = String::new();
    let pct = |(lo, hi): (f64, f64)| {
        format!("{:+.2} % / {:+.2} %", 100.0 * (lo / c.nominal_s - 1.0), 100.0 * (hi / c.nominal_s - 1.0))
    };
    let _ = writeln!(o, "RC stage against a software timer \u{b7} {name}");
    let _ = writeln!(o, "  nominal hold {}", si(c.nominal_s, "s"));
    let _ = writeln!(o, "  {:<18} {} to {}  ({})", "RC stage", si(c.stage.0, "s"), si(c.stage.1, "s"), pct(c.stage));
    let _ = writeln!(
        o,
        "    shortest at {}, longest at {}",
        corner_text(window.min_corner),
        corner_text(window.max_corner)
    );
    let _ = writeln!(
        o,
        "  {:<18} {} to {}  ({}; clock {} ± {})",
        "software timer",
        si(c.timer.0, "s"),
        si(c.timer.1, "s"),
        pct(c.timer),
        si(clock.hz, "Hz"),
        if clock.tolerance < 1e-3 {
            format!("{:.0} ppm", clock.tolerance * 1e6)
        } else {
            format!("{:.2} %", clock.tolerance * 100.0)
        }
    );
    let ratio = (c.stage.1 - c.stage.0) / (c.timer.1 - c.timer.0);
    let _ = writeln!(o, "  the RC stage spreads {ratio:.1}× as wide as the software timer");
    let _ = writeln!(
        o,
        "  timer settings: count {} ticks at {}{}",
        c.ticks,
        si(clock.hz, "Hz"),
        if c.needs_extension {
            " (more than a 32-bit counter holds: extend it in software, as hold_firmware::Stopwatch does)"
        } else {
            ""
        }
    );
    if let Some(cur) = currents {
        let _ = writeln!(
            o,
            "  standby: RC stage {} ({}), software timer {} ({}) — from the currents you gave",
            si(cur.stage_quiescent_a, "A"),
            si(cur.stage_quiescent_a * vdd, "W"),
            si(cur.timer_sleep_a, "A"),
            si(cur.timer_sleep_a * vdd, "W")
        );
        let _ = writeln!(
            o,
            "  a hold stage also draws its pull-up current while the trigger is pressed, and the MCU running the timer draws more while awake"
        );
    }
    let _ = writeln!(o, "\n  note: {}", crate::fmt::CAUTION);
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_crystal_timer_by_hand() {
        let sf = crate::testing::example();
        let window = sf.spread.window(&sf.stage).unwrap_or_else(|e| panic!("{e:?}"));
        let c = compare(1.0, &window, TimerClock { hz: 32_768.0, tolerance: 50e-6 });
        // 1 s at 32.768 kHz is 32,768 ticks; ±50 ppm and one tick each way (math).
        assert_eq!(c.ticks, 32_768);
        assert!((c.timer.0 - (1.0 / 1.000_05 - 1.0 / 32_768.0)).abs() < 1e-12);
        assert!(!c.needs_extension);
        assert!(render_comparison("t", &c, TimerClock { hz: 32_768.0, tolerance: 50e-6 }, None, 5.0, &window)
            .contains("50 ppm"));
    }
}
