//! What a measurement means: a verdict and, when the hold is wrong, a likely cause.

use serde::{Deserialize, Serialize};

/// The verdict on one measurement.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Verdict {
    /// The hold lies inside the pass window.
    WithinWindow,
    /// The hold is shorter than the window.
    Short,
    /// The hold is longer than the window.
    Long,
    /// The output never turned on during the press.
    NoResponse,
    /// The output did not turn off before the hold timeout.
    StuckActive,
    /// The output was active before the press (the stage was not idle).
    NotIdle,
    /// The output changed level more often than the chatter limit allows.
    Chatter,
    /// The hold passes but the output turned on sooner than the turn-on
    /// latency window allows.
    FastStart,
    /// The hold passes but the output turned on later than the turn-on
    /// latency window allows.
    SlowStart,
}

impl Verdict {
    /// The verdict a hold of `hold_ticks` gets from the pass window
    /// `min_ticks ..= max_ticks` alone (the one rule: below is short, above is
    /// long). The engine and the host's re-check both judge by it.
    #[must_use]
    pub const fn of_hold(hold_ticks: u64, min_ticks: u64, max_ticks: u64) -> Verdict {
        if hold_ticks < min_ticks {
            Verdict::Short
        } else if hold_ticks > max_ticks {
            Verdict::Long
        } else {
            Verdict::WithinWindow
        }
    }

    /// The verdict of a completed measurement from its two windows (the one
    /// rule; the engine and the host's re-check both judge by it): the hold
    /// decides first ([`Verdict::of_hold`]); a passing hold then needs a
    /// turn-on latency `on_ticks` inside `on_min_ticks ..= on_max_ticks`
    /// (below: fast start, above: slow start). `on_ticks` `None` leaves the
    /// latency unjudged (a retriggered hold, a log without it).
    #[must_use]
    pub const fn of_times(
        on_ticks: Option<u64>,
        hold_ticks: u64,
        on_min_ticks: u64,
        on_max_ticks: u64,
        min_ticks: u64,
        max_ticks: u64,
    ) -> Verdict {
        let v = Verdict::of_hold(hold_ticks, min_ticks, max_ticks);
        match (v, on_ticks) {
            (Verdict::WithinWindow, Some(on)) if on < on_min_ticks => Verdict::FastStart,
            (Verdict::WithinWindow, Some(on)) if on > on_max_ticks => Verdict::SlowStart,
            _ => v,
        }
    }

    /// Whether the verdict was decided by the windows, from a measured hold
    /// (within window, short, long, fast start, slow start): a record with
    /// one of these has a hold, the others have none to judge.
    #[must_use]
    pub const fn needs_hold(self) -> bool {
        matches!(self, Verdict::WithinWindow | Verdict::Short | Verdict::Long | Verdict::FastStart | Verdict::SlowStart)
    }

    /// Whether the board passes.
    #[must_use]
    pub const fn passes(self) -> bool {
        matches!(self, Verdict::WithinWindow)
    }

    /// A short lower-case name.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Verdict::WithinWindow => "within-window",
            Verdict::Short => "short",
            Verdict::Long => "long",
            Verdict::NoResponse => "no-response",
            Verdict::StuckActive => "stuck-active",
            Verdict::NotIdle => "not-idle",
            Verdict::Chatter => "chatter",
            Verdict::FastStart => "fast-start",
            Verdict::SlowStart => "slow-start",
        }
    }
}

/// The likely cause of a failing measurement.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Hint {
    /// No hint (the board passes, or nothing points anywhere in particular).
    None,
    /// The implied capacitance is about a decade off: a wrong part.
    WrongPart,
    /// 20 – 60 % off: an aged capacitor or a part of the wrong tolerance.
    AgedOrWrongTolerance,
    /// Just outside the window: tolerance stack-up, temperature or supply.
    NearTheEdge,
    /// Zero hold: an open capacitor (or an open path to it).
    OpenCapacitorOrDiode,
    /// Never turns on: an open diode or charge path, or a node shorted to ground.
    NoChargePath,
    /// Never ends: an open discharge resistor or a node shorted to the supply.
    OpenResistorOrShortedNode,
    /// The output is noisy near the threshold (slow edge on a plain input, or interference).
    NoisyOutput,
    /// The turn-on latency is off while the hold is not: the charge path
    /// (driver, diode, a resistor in series with the capacitor).
    ChargePath,
    /// The hold is off while the turn-on latency is not: the discharge path
    /// (the resistor, or the input's falling threshold), not the capacitor.
    DischargePath,
}

impl Hint {
    /// A short lower-case name.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Hint::None => "none",
            Hint::WrongPart => "wrong-part",
            Hint::AgedOrWrongTolerance => "aged-or-wrong-tolerance",
            Hint::NearTheEdge => "near-the-edge",
            Hint::OpenCapacitorOrDiode => "open-capacitor",
            Hint::NoChargePath => "no-charge-path",
            Hint::OpenResistorOrShortedNode => "open-resistor-or-shorted-node",
            Hint::NoisyOutput => "noisy-output",
            Hint::ChargePath => "charge-path",
            Hint::DischargePath => "discharge-path",
        }
    }

    /// The cause suggested by a hold *and* a turn-on latency. Both scale with
    /// C, so a wrong capacitor moves them together; a wrong discharge
    /// resistor moves only the hold, a wrong charge path only the latency.
    /// `hold_dev_ppm` is the capacitance the hold implies (deviation from
    /// nominal, ppm) and `on_ratio_ppm` the measured over the nominal
    /// latency (ppm of 1, `None` when the latency is too coarse to tell).
    /// For a failing hold (`start_failed` false) the capacitor competes with
    /// the discharge path; for a failing latency with the charge path; the
    /// explanation needing the smaller ratio of predicted to measured wins,
    /// and a capacitor gets [`Hint::from_deviation_ppm`] of the failing
    /// measurement.
    #[must_use]
    pub const fn from_times(hold_dev_ppm: i64, on_ratio_ppm: Option<u64>, start_failed: bool) -> Hint {
        let hold_ppm = 1_000_000 + hold_dev_ppm;
        let Some(on_ppm) = on_ratio_ppm else {
            return Hint::from_deviation_ppm(hold_dev_ppm);
        };
        if hold_ppm <= 0 || on_ppm == 0 {
            return Hint::from_deviation_ppm(hold_dev_ppm);
        }
        let hold_ppm = hold_ppm as u64;
        // A capacitor predicts equal ratios; the other path predicts 1 for
        // the measurement that passed.
        let by_capacitor = spread_ppm(hold_ppm, on_ppm);
        if start_failed {
            if spread_ppm(hold_ppm, 1_000_000) < by_capacitor {
                return Hint::ChargePath;
            }
            Hint::from_deviation_ppm(on_ppm as i64 - 1_000_000)
        } else {
            if spread_ppm(on_ppm, 1_000_000) < by_capacitor {
                return Hint::DischargePath;
            }
            Hint::from_deviation_ppm(hold_dev_ppm)
        }
    }

    /// The cause suggested by the capacitance a hold implies, as a deviation
    /// from nominal in ppm (−1e6 … ): about a decade off → wrong part (×0.2 or
    /// less, ×5 or more); 20 – 60 % off → aged or wrong tolerance; closer →
    /// near the edge of the window.
    #[must_use]
    pub const fn from_deviation_ppm(dev_ppm: i64) -> Hint {
        // ratio·1e6 = 1e6 + dev
        let r = 1_000_000 + dev_ppm;
        if r <= 200_000 || r >= 5_000_000 {
            Hint::WrongPart
        } else if (r >= 400_000 && r <= 800_000) || (r >= 1_200_000 && r <= 1_600_000) {
            Hint::AgedOrWrongTolerance
        } else if r < 400_000 || r > 1_600_000 {
            Hint::WrongPart
        } else {
            Hint::NearTheEdge
        }
    }
}

/// The larger of two positive ratios over the smaller, ppm (≥ 1 000 000;
/// saturating above 1.8e13, far beyond any two readings that differ). In
/// `u64`: a `u128` division would link a routine of several KB on a
/// Cortex-M0.
const fn spread_ppm(a: u64, b: u64) -> u64 {
    let (hi, lo) = if a > b { (a, b) } else { (b, a) };
    hi.saturating_mul(1_000_000) / if lo == 0 { 1 } else { lo }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn deviation_bands_map_to_hints() {
        assert_eq!(Hint::from_deviation_ppm(-900_000), Hint::WrongPart); // ×0.1
        assert_eq!(Hint::from_deviation_ppm(9_000_000), Hint::WrongPart); // ×10
        assert_eq!(Hint::from_deviation_ppm(-300_000), Hint::AgedOrWrongTolerance);
        assert_eq!(Hint::from_deviation_ppm(400_000), Hint::AgedOrWrongTolerance);
        assert_eq!(Hint::from_deviation_ppm(-120_000), Hint::NearTheEdge);
        assert_eq!(Hint::from_deviation_ppm(2_000_000), Hint::WrongPart); // ×3
    }

    #[test]
    fn hold_and_latency_tell_the_parts_apart() {
        // C ×0.47: both drop together.
        assert_eq!(Hint::from_times(-530_000, Some(470_000), true), Hint::AgedOrWrongTolerance);
        // C ×0.1 read through a short hold.
        assert_eq!(Hint::from_times(-900_000, Some(100_000), false), Hint::WrongPart);
        // R ×0.1: the hold drops, the latency does not.
        assert_eq!(Hint::from_times(-900_000, Some(1_010_000), false), Hint::DischargePath);
        // A slow driver: the latency doubles, the hold does not move.
        assert_eq!(Hint::from_times(20_000, Some(2_000_000), true), Hint::ChargePath);
        // No usable latency: the capacitance alone.
        assert_eq!(Hint::from_times(-900_000, None, false), Hint::WrongPart);
    }

    #[test]
    fn the_hold_decides_before_the_latency() {
        assert_eq!(Verdict::of_times(Some(5), 100, 10, 20, 50, 150), Verdict::FastStart);
        assert_eq!(Verdict::of_times(Some(25), 100, 10, 20, 50, 150), Verdict::SlowStart);
        assert_eq!(Verdict::of_times(Some(15), 100, 10, 20, 50, 150), Verdict::WithinWindow);
        assert_eq!(Verdict::of_times(Some(5), 40, 10, 20, 50, 150), Verdict::Short);
        assert_eq!(Verdict::of_times(None, 100, 10, 20, 50, 150), Verdict::WithinWindow);
    }
}
