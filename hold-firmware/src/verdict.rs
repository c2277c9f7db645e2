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

    /// The cause suggested by the capacitance a hold implies, as a deviation
    /// from nominal in ppm (−1e6 … ): about a decade off → wrong part (×0.2 or
    /// less, ×5 or more); 20 – 60 % off → aged or wrong tolerance; closer →
    /// near the edge of the window.
    #[must_use]
    pub const fn from_deviation_ppm(dev_ppm: i64) -> Hint {
        let r = 1_000_000 + dev_ppm;
        if r <= 0 {
            return Hint::WrongPart;
        }
        Hint::from_ratio(r as u64, 1_000_000)
    }

    /// [`Hint::from_deviation_ppm`] for the capacitance ratio `num / den`,
    /// compared in tenths by multiplication in `u64` (no division: a
    /// Cortex-M0 has none, and the library routine costs a kilobyte of
    /// flash; `u128` products are long inline sequences there).
    #[must_use]
    pub const fn from_ratio(num: u64, den: u64) -> Hint {
        let (n, d) = narrow(num, den, 31);
        let n = n * 10;
        if n <= 2 * d || n >= 50 * d {
            Hint::WrongPart
        } else if (n >= 4 * d && n <= 8 * d) || (n >= 12 * d && n <= 16 * d) {
            Hint::AgedOrWrongTolerance
        } else if n < 4 * d || n > 16 * d {
            Hint::WrongPart
        } else {
            Hint::NearTheEdge
        }
    }

    /// The cause suggested by a hold *and* a turn-on latency. Both scale with
    /// C, so a wrong capacitor moves them together; a wrong discharge
    /// resistor moves only the hold, a wrong charge path only the latency.
    /// `hold_dev_ppm` is the capacitance the hold implies (deviation from
    /// nominal, ppm) and `on` the measured and the nominal latency, ticks
    /// (`None` when the latency is too coarse to tell). For a failing hold
    /// (`start_failed` false) the capacitor competes with the discharge
    /// path; for a failing latency with the charge path; the explanation
    /// needing the smaller ratio of predicted to measured wins, and a
    /// capacitor gets [`Hint::from_ratio`] of the failing measurement. All
    /// in integer multiplications.
    #[must_use]
    pub const fn from_times(hold_dev_ppm: i64, on: Option<(u64, u64)>, start_failed: bool) -> Hint {
        let hold_num = 1_000_000 + hold_dev_ppm;
        let Some((on_ticks, on_nominal)) = on else {
            return Hint::from_deviation_ppm(hold_dev_ppm);
        };
        if hold_num <= 0 || on_ticks == 0 || on_nominal == 0 {
            return Hint::from_deviation_ppm(hold_dev_ppm);
        }
        let hold = narrow(hold_num as u64, 1_000_000, 16);
        let on = narrow(on_ticks, on_nominal, 16);
        // A capacitor predicts equal ratios; the other path predicts 1 for
        // the measurement that passed.
        let by_capacitor = spread(hold, on);
        if start_failed {
            if less(spread(hold, (1, 1)), by_capacitor) {
                return Hint::ChargePath;
            }
            Hint::from_ratio(on_ticks, on_nominal)
        } else {
            if less(spread(on, (1, 1)), by_capacitor) {
                return Hint::DischargePath;
            }
            Hint::from_deviation_ppm(hold_dev_ppm)
        }
    }
}

/// A ratio `num / den` with both shifted right alike until they fit `bits`
/// bits (the ratio kept to 1 part in 2^(bits − 1) unless one is tiny), neither 0.
const fn narrow(mut num: u64, mut den: u64, bits: u32) -> (u64, u64) {
    while num >= 1 << bits || den >= 1 << bits {
        num >>= 1;
        den >>= 1;
    }
    (if num == 0 { 1 } else { num }, if den == 0 { 1 } else { den })
}

/// The larger of two ratios (each of two 16-bit numbers) over the smaller,
/// as a fraction `p / q ≥ 1` (each below 2^32).
const fn spread(x: (u64, u64), y: (u64, u64)) -> (u64, u64) {
    let (p, q) = (x.0 * y.1, y.0 * x.1);
    if p >= q {
        (p, q)
    } else {
        (q, p)
    }
}

/// `a < b` for fractions of numbers below 2^32 (products below 2^64).
const fn less(a: (u64, u64), b: (u64, u64)) -> bool {
    a.0 * b.1 < b.0 * a.1
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
        assert_eq!(Hint::from_times(-530_000, Some((47, 100)), true), Hint::AgedOrWrongTolerance);
        // C ×0.1 read through a short hold.
        assert_eq!(Hint::from_times(-900_000, Some((10, 100)), false), Hint::WrongPart);
        // R ×0.1: the hold drops, the latency does not.
        assert_eq!(Hint::from_times(-900_000, Some((101, 100)), false), Hint::DischargePath);
        // A slow driver: the latency doubles, the hold does not move.
        assert_eq!(Hint::from_times(20_000, Some((200, 100)), true), Hint::ChargePath);
        // Readings far beyond 31 bits keep their ratio.
        assert_eq!(Hint::from_times(-530_000, Some((47 << 40, 100 << 40)), true), Hint::AgedOrWrongTolerance);
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
