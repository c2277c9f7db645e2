//! Typed errors of the model.

use core::fmt;

/// A physical quantity the model checks against its supported domain.
///
/// [`Quantity::range`] gives the accepted range as text, so that every tool
/// built on the model can name it in its error messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Quantity {
    /// Supply voltage `vdd_uv`.
    Vdd,
    /// Discharge resistor `r_mohm`.
    R,
    /// Hold capacitor `c_ff`.
    C,
    /// Resistance in series with the capacitor `series_mohm`.
    SeriesR,
    /// Charge-limiting resistor `charge_mohm`.
    ChargeR,
    /// Driver output resistance `driver_mohm`.
    DriverR,
    /// Leakage resistance across the node `leak_mohm`.
    LeakR,
    /// Constant leakage current out of the node `leak_fa`.
    LeakCurrent,
    /// Fixed diode forward drop `drop_uv`.
    DiodeDrop,
    /// Diode saturation current `is_fa`.
    DiodeIs,
    /// Diode ideality factor `n_milli`.
    DiodeN,
    /// Diode series resistance `rs_mohm`.
    DiodeRs,
    /// Rising input threshold `rise_uv`.
    Rise,
    /// Falling input threshold `fall_uv`.
    Fall,
    /// Press duration `press_ns`.
    Press,
    /// Junction temperature `temp_mdeg_c`.
    Temperature,
    /// Timer clock `clock_hz`.
    Clock,
    /// Hold time (computed or measured).
    Hold,
    /// Node voltage at the start of a press (retrigger) `start_uv`.
    StartVoltage,
    /// A tolerance, temperature coefficient or aging figure.
    Tolerance,
}

impl Quantity {
    /// The accepted range, in the unit of the field, as text for messages.
    #[must_use]
    pub const fn range(self) -> &'static str {
        match self {
            Quantity::Vdd => "0.8 V to 18 V",
            Quantity::R => "1 kΩ to 100 MΩ",
            Quantity::C => "100 pF to 10 mF",
            Quantity::SeriesR | Quantity::ChargeR | Quantity::DriverR => "0 Ω to 1 MΩ",
            Quantity::LeakR => "1 kΩ to 18 EΩ, or none",
            Quantity::LeakCurrent => "0 A to 1 µA",
            Quantity::DiodeDrop => "0 V to 2 V, below the supply",
            Quantity::DiodeIs => "1 fA to 1 µA",
            Quantity::DiodeN => "0.5 to 4",
            Quantity::DiodeRs => "0 Ω to 1 kΩ (with driver and charge resistance above 0 Ω in total)",
            Quantity::Rise => "5 % to 95 % of the supply, at or above the falling threshold",
            Quantity::Fall => "5 % to 95 % of the supply, at or below the rising threshold",
            Quantity::Press => "1 ns to 24 h",
            Quantity::Temperature => "-55 °C to +150 °C",
            Quantity::Clock => "1 kHz to 200 MHz",
            Quantity::Hold => "1 µs to 24 h",
            Quantity::StartVoltage => "0 V up to the charge target",
            Quantity::Tolerance => "0 % to 100 % below and 0 % to 1000 % above nominal",
        }
    }

    /// The field or key name, for messages.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Quantity::Vdd => "vdd",
            Quantity::R => "r",
            Quantity::C => "c",
            Quantity::SeriesR => "series_ohms",
            Quantity::ChargeR => "charge_ohms",
            Quantity::DriverR => "driver_ohms",
            Quantity::LeakR => "leak_ohms",
            Quantity::LeakCurrent => "leak_amps",
            Quantity::DiodeDrop => "diode.drop",
            Quantity::DiodeIs => "diode.is",
            Quantity::DiodeN => "diode.n",
            Quantity::DiodeRs => "diode.rs",
            Quantity::Rise => "rise",
            Quantity::Fall => "fall",
            Quantity::Press => "press.duration",
            Quantity::Temperature => "temperature",
            Quantity::Clock => "clock",
            Quantity::Hold => "hold",
            Quantity::StartVoltage => "start voltage",
            Quantity::Tolerance => "tolerance",
        }
    }
}

/// Why the model could not produce a result. It never panics, wraps or
/// saturates instead.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Error {
    /// An input lies outside the supported domain.
    OutOfDomain(Quantity),
    /// The node's charge target (µV) is at or below the rising threshold: the
    /// output never becomes active.
    NeverActivates {
        /// Charge target in µV.
        target_uv: i64,
        /// Rising threshold in µV.
        rise_uv: u32,
    },
    /// The press ends before the node reaches the rising threshold.
    PressTooShort {
        /// Turn-on latency in ns that the press would need to exceed.
        latency_ns: u64,
    },
    /// At release the node is already at or below the falling threshold: the
    /// hold is zero.
    NoHold,
    /// The computed hold lies outside 1 µs – 24 h.
    HoldOutOfDomain {
        /// The computed hold in ns.
        hold_ns: u64,
    },
    /// The hold rises less than 1/8 as fast as the capacitance (a press far
    /// too short to charge the capacitor): a measured hold does not determine C.
    IllConditioned,
    /// An iterative solve (diode operating point, partial press, inverse) did
    /// not settle within its iteration budget.
    NoConvergence,
    /// An intermediate value would not fit its integer format. Not reachable
    /// inside the supported domain (see the `fixed` module documentation).
    Arithmetic,
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Error::OutOfDomain(q) => write!(f, "{} is outside the supported range ({})", q.name(), q.range()),
            Error::NeverActivates { target_uv, rise_uv } => write!(
                f,
                "the node charges to {target_uv} µV, not above the rising threshold {rise_uv} µV: the output never activates"
            ),
            Error::PressTooShort { latency_ns } => {
                write!(f, "the press ends before the output activates (turn-on latency {latency_ns} ns)")
            }
            Error::NoHold => f.write_str("at release the node is already at or below the falling threshold: no hold"),
            Error::HoldOutOfDomain { hold_ns } => {
                write!(f, "the hold is {hold_ns} ns, outside the supported range (1 µs to 24 h)")
            }
            Error::IllConditioned => f.write_str(
                "the hold barely depends on the capacitance here (press too short to charge it): no unique inverse",
            ),
            Error::NoConvergence => f.write_str("an iterative solve did not settle"),
            Error::Arithmetic => f.write_str("an intermediate value does not fit its integer format"),
        }
    }
}

impl core::error::Error for Error {}
