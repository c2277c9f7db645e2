//! `rchold timer-vs-rc`: the stage's worst-case spread against a software
//! timer of the same nominal hold.

use std::fmt::Write as _;

use rc_model::window::Window;

use serde::Serialize;

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

/// Standby currents the user supplies.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Currents {
    /// The stage's quiescent current (its two CMOS gates), A.
    pub stage_quiescent_a: f64,
    /// The MCU asleep with one timer running, A.
    pub timer_sleep_a: f64,
    /// How often the stage is pressed, per day (its charge per press then
    /// adds to its average current).
    pub presses_per_day: f64,
}

/// How a hardware counter of some width counts the nominal hold.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Counter {
    /// Counter width, bits.
    pub bits: u32,
    /// The smallest power-of-two prescaler (1 … 65 536) whose count fits,
    /// or none: the count must then be extended in software.
    pub prescaler: Option<u32>,
    /// Counts at that prescaler (the tick count when none fits).
    pub counts: u64,
    /// One count, s.
    pub resolution_s: f64,
    /// The counted hold against the nominal one, ppm.
    pub error_ppm: f64,
}

/// The comparison.
#[derive(Debug, Clone, PartialEq, Serialize)]
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
    /// A 16-bit and a 32-bit counter with their prescalers.
    pub counters: Vec<Counter>,
    /// Charge one press draws from the supply: the capacitor's charge at
    /// release and what flows through R and any leakage while pressed, C.
    pub charge_per_press_c: f64,
}

/// A `bits`-wide counter on a `hz` clock counting `nominal_s`.
#[must_use]
pub fn counter(nominal_s: f64, hz: f64, bits: u32) -> Counter {
    let max = (1u64 << bits.min(63)) - 1;
    let fits = (0..=16).map(|k| 1u32 << k).find(|&p| (nominal_s * hz / f64::from(p)).round() as u64 <= max);
    let p = fits.unwrap_or(1);
    let counts = (nominal_s * hz / f64::from(p)).round().max(1.0) as u64;
    let resolution_s = f64::from(p) / hz;
    Counter {
        bits,
        prescaler: fits,
        counts,
        resolution_s,
        error_ppm: (counts as f64 * resolution_s / nominal_s - 1.0) * 1e6,
    }
}

/// Compares the stage's worst-case window with a software timer of the same
/// nominal hold: the timer's spread is its clock tolerance plus one tick.
/// `charge_per_press_c` is the stage's own draw per press (see [`Comparison`]).
#[must_use]
pub fn compare(nominal_s: f64, window: &Window, clock: TimerClock, charge_per_press_c: f64) -> Comparison {
    let ticks = (nominal_s * clock.hz).round().max(1.0) as u64;
    let t = ticks as f64 / clock.hz;
    let tick = 1.0 / clock.hz;
    Comparison {
        nominal_s,
        stage: (secs(window.min), secs(window.max)),
        timer: (t / (1.0 + clock.tolerance) - tick, t / (1.0 - clock.tolerance) + tick),
        ticks,
        needs_extension: ticks > u64::from(u32::MAX),
        counters: vec![counter(nominal_s, clock.hz, 16), counter(nominal_s, clock.hz, 32)],
        charge_per_press_c,
    }
}

/// The charge one press of `press_s` draws from the supply: `C·V` to charge
/// the capacitor to `node_v` at release, plus `node_v/R_eff + I_leak` for
/// the length of the press (an upper bound: the node is taken at its
/// release voltage throughout), C.
#[must_use]
pub fn charge_per_press(c_f: f64, node_v: f64, r_eff_ohm: f64, leak_a: f64, press_s: f64) -> f64 {
    c_f * node_v + (node_v / r_eff_ohm.max(1e-3) + leak_a) * press_s
}

/// The comparison as text, or as JSON.
#[must_use]
pub fn render_comparison(
    name: &str,
    c: &Comparison,
    clock: TimerClock,
    currents: Option<Currents>,
    vdd: f64,
    window: &Window,
    json: bool,
) -> String {
    let stage_avg_a = currents.map(|cur| cur.stage_quiescent_a + c.charge_per_press_c * cur.presses_per_day / 86_400.0);
    if json {
        let v = serde_json::json!({
            "stage": name,
            "comparison": c,
            "clock": {"hz": clock.hz, "tolerance": clock.tolerance},
            "shortest_corner": corner_text(window.min_corner),
            "longest_corner": corner_text(window.max_corner),
            "standby": currents.map(|cur| serde_json::json!({
                "given": cur,
                "stage_average_a": stage_avg_a,
                "timer_a": cur.timer_sleep_a,
                "vdd_v": vdd,
            })),
        });
        return format!("{}\n", serde_json::to_string_pretty(&v).unwrap_or_default());
    }
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
    for k in &c.counters {
        let _ = match k.prescaler {
            Some(p) => writeln!(
                o,
                "    {:>2}-bit counter: prescaler {p}, count {} of {} ({:+.1} ppm from nominal)",
                k.bits,
                k.counts,
                si(k.resolution_s, "s"),
                k.error_ppm
            ),
            None => writeln!(
                o,
                "    {:>2}-bit counter: no prescaler up to 65536 fits: count overflows in software ({} ticks)",
                k.bits, k.counts
            ),
        };
    }
    let _ = writeln!(
        o,
        "  each press draws {} from the supply (charging C, and through R while pressed)",
        si(c.charge_per_press_c, "C")
    );
    if let (Some(cur), Some(avg)) = (currents, stage_avg_a) {
        let _ = writeln!(
            o,
            "  standby: RC stage {} ({}) at {} presses a day, software timer {} ({}) — from the currents you gave",
            si(avg, "A"),
            si(avg * vdd, "W"),
            cur.presses_per_day,
            si(cur.timer_sleep_a, "A"),
            si(cur.timer_sleep_a * vdd, "W")
        );
        let _ = writeln!(o, "  the MCU running the timer draws more while awake to start and end it");
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
        let c = compare(1.0, &window, TimerClock { hz: 32_768.0, tolerance: 50e-6 }, 0.0);
        // 1 s at 32.768 kHz is 32,768 ticks; ±50 ppm and one tick each way (math).
        assert_eq!(c.ticks, 32_768);
        assert!((c.timer.0 - (1.0 / 1.000_05 - 1.0 / 32_768.0)).abs() < 1e-12);
        assert!(!c.needs_extension);
        let clock = TimerClock { hz: 32_768.0, tolerance: 50e-6 };
        assert!(render_comparison("t", &c, clock, None, 5.0, &window, false).contains("50 ppm"));
        // A 16-bit counter holds 32,768 counts unscaled; 3 s at 32.768 kHz needs a prescaler of 2 (math).
        assert_eq!(c.counters.first().map(|k| (k.prescaler, k.counts)), Some((Some(1), 32_768)));
        let k = counter(3.0, 32_768.0, 16);
        assert_eq!((k.prescaler, k.counts), (Some(2), 49_152));
        // A day at 16 MHz overflows 16 bits even at 65,536 (1.38e12 ticks).
        assert_eq!(counter(86_400.0, 16e6, 16).prescaler, None);
        // 1 µF to 4.4 V, and 4.4 µA for 0.1 s through 1 MΩ: 4.84 µC (math).
        assert!((charge_per_press(1e-6, 4.4, 1e6, 0.0, 0.1) - 4.84e-6).abs() < 1e-15);
    }
}
