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
}
