//! The hold stage's parameters in integer engineering units.

use crate::error::{Error, Quantity};

/// The diode that charges the hold capacitor.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Diode {
    /// A fixed forward drop, independent of current.
    Drop {
        /// Forward drop in µV (0 – 2 V).
        drop_uv: u32,
    },
    /// A junction described by the Shockley equation
    /// `I = Is·(e^(V/(n·V_T)) − 1)` plus a series resistance. In reverse, during
    /// the hold, it leaks its saturation current out of the node.
    Junction {
        /// Saturation current in fA (1 fA – 1 µA).
        is_fa: u64,
        /// Ideality factor × 1000 (500 – 4000).
        n_milli: u32,
        /// Series resistance in mΩ (0 – 1 kΩ).
        rs_mohm: u64,
    },
}

/// A hold stage: inverter, diode, capacitor ∥ resistor, inverter.
///
/// All fields carry their unit. Build one with struct syntax; [`Stage::check`]
/// (called by every model entry point) verifies the supported domain.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Stage {
    /// Supply voltage in µV (0.8 V – 18 V).
    pub vdd_uv: u32,
    /// Discharge resistor in mΩ (1 kΩ – 100 MΩ).
    pub r_mohm: u64,
    /// Hold capacitor in fF (100 pF – 10 mF).
    pub c_ff: u64,
    /// Resistance in series with the capacitor (its ESR or an added limiter) in mΩ.
    pub series_mohm: u64,
    /// Charge-limiting resistor between the diode and the node in mΩ.
    pub charge_mohm: u64,
    /// Output resistance of the driving inverter in mΩ.
    pub driver_mohm: u64,
    /// Leakage resistance in parallel with R (capacitor insulation, board) in mΩ;
    /// `None` for none.
    pub leak_mohm: Option<u64>,
    /// Constant leakage current out of the node (input leakage) in fA.
    pub leak_fa: u64,
    /// The charging diode.
    pub diode: Diode,
    /// Rising input threshold of the second inverter, V_T+, in µV.
    pub rise_uv: u32,
    /// Falling input threshold of the second inverter, V_T−, in µV.
    pub fall_uv: u32,
    /// How long the trigger is held, in ns.
    pub press_ns: u64,
    /// Junction temperature in m°C (sets the diode's thermal voltage).
    pub temp_mdeg_c: i32,
}

/// Domain limits, in the unit of the corresponding field.
pub mod limits {
    /// Supply: 0.8 V – 18 V, in µV (low-voltage logic works from 0.8 V).
    pub const VDD_UV: (u32, u32) = (800_000, 18_000_000);
    /// R: 1 kΩ – 100 MΩ, in mΩ.
    pub const R_MOHM: (u64, u64) = (1_000_000, 100_000_000_000);
    /// C: 100 pF – 10 mF, in fF.
    pub const C_FF: (u64, u64) = (100_000, 10_000_000_000_000);
    /// Series, charge and driver resistance: at most 1 MΩ, in mΩ.
    pub const PATH_MOHM_MAX: u64 = 1_000_000_000;
    /// Leakage resistance: at least 1 kΩ, in mΩ.
    pub const LEAK_MOHM_MIN: u64 = 1_000_000;
    /// Leakage current: at most 1 µA, in fA.
    pub const LEAK_FA_MAX: u64 = 1_000_000_000;
    /// Diode drop: at most 2 V, in µV.
    pub const DROP_UV_MAX: u32 = 2_000_000;
    /// Saturation current: 1 fA – 1 µA, in fA.
    pub const IS_FA: (u64, u64) = (1, 1_000_000_000);
    /// Ideality × 1000: 0.5 – 4.
    pub const N_MILLI: (u32, u32) = (500, 4_000);
    /// Diode series resistance: at most 1 kΩ, in mΩ.
    pub const DIODE_RS_MOHM_MAX: u64 = 1_000_000;
    /// Thresholds: 5 % – 95 % of the supply, in ppm of Vdd.
    pub const THRESHOLD_PPM: (u32, u32) = (50_000, 950_000);
    /// Press and hold: at most 24 h, in ns.
    pub const DAY_NS: u64 = 86_400_000_000_000;
    /// Hold: at least 1 µs, in ns.
    pub const HOLD_NS_MIN: u64 = 1_000;
    /// Temperature: −55 °C – +150 °C, in m°C.
    pub const TEMP_MDEG_C: (i32, i32) = (-55_000, 150_000);
    /// Timer clock: 1 kHz – 200 MHz.
    pub const CLOCK_HZ: (u32, u32) = (1_000, 200_000_000);
}

fn within<T: PartialOrd>(v: T, lo: T, hi: T, q: Quantity) -> Result<(), Error> {
    if v < lo || v > hi {
        Err(Error::OutOfDomain(q))
    } else {
        Ok(())
    }
}

/// `part` as ppm of `whole`, rounded down (both in the same unit).
#[must_use]
pub fn ppm_of(part: u32, whole: u32) -> u64 {
    if whole == 0 {
        return 0;
    }
    u64::from(part) * 1_000_000 / u64::from(whole)
}

/// `ppm` of `whole`, rounded to the nearest unit.
#[must_use]
pub fn fraction_of(whole: u32, ppm: u32) -> u32 {
    // ≤ 18e6 · 1e6 < 2^64; result ≤ whole for ppm ≤ 1e6.
    let v = (u64::from(whole) * u64::from(ppm) + 500_000) / 1_000_000;
    u32::try_from(v).unwrap_or(u32::MAX)
}

impl Stage {
    /// Checks every field against the supported domain.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] naming the first quantity outside its range.
    pub fn check(&self) -> Result<(), Error> {
        use limits::*;
        within(self.vdd_uv, VDD_UV.0, VDD_UV.1, Quantity::Vdd)?;
        within(self.r_mohm, R_MOHM.0, R_MOHM.1, Quantity::R)?;
        within(self.c_ff, C_FF.0, C_FF.1, Quantity::C)?;
        within(self.series_mohm, 0, PATH_MOHM_MAX, Quantity::SeriesR)?;
        within(self.charge_mohm, 0, PATH_MOHM_MAX, Quantity::ChargeR)?;
        within(self.driver_mohm, 0, PATH_MOHM_MAX, Quantity::DriverR)?;
        if let Some(l) = self.leak_mohm {
            within(l, LEAK_MOHM_MIN, u64::MAX, Quantity::LeakR)?;
        }
        within(self.leak_fa, 0, LEAK_FA_MAX, Quantity::LeakCurrent)?;
        match self.diode {
            Diode::Drop { drop_uv } => {
                within(drop_uv, 0, DROP_UV_MAX, Quantity::DiodeDrop)?;
                if drop_uv >= self.vdd_uv {
                    return Err(Error::OutOfDomain(Quantity::DiodeDrop));
                }
            }
            Diode::Junction { is_fa, n_milli, rs_mohm } => {
                within(is_fa, IS_FA.0, IS_FA.1, Quantity::DiodeIs)?;
                within(n_milli, N_MILLI.0, N_MILLI.1, Quantity::DiodeN)?;
                within(rs_mohm, 0, DIODE_RS_MOHM_MAX, Quantity::DiodeRs)?;
                if rs_mohm + self.driver_mohm + self.charge_mohm == 0 {
                    return Err(Error::OutOfDomain(Quantity::DiodeRs));
                }
            }
        }
        let lo = fraction_of(self.vdd_uv, THRESHOLD_PPM.0);
        let hi = fraction_of(self.vdd_uv, THRESHOLD_PPM.1);
        within(self.rise_uv, lo, hi, Quantity::Rise)?;
        within(self.fall_uv, lo, hi, Quantity::Fall)?;
        if self.fall_uv > self.rise_uv {
            return Err(Error::OutOfDomain(Quantity::Fall));
        }
        within(self.press_ns, 1, DAY_NS, Quantity::Press)?;
        within(self.temp_mdeg_c, TEMP_MDEG_C.0, TEMP_MDEG_C.1, Quantity::Temperature)?;
        Ok(())
    }

    /// The constant current drawn out of the node during the hold, in fA: the
    /// input leakage plus, for a junction diode, its reverse saturation current.
    #[must_use]
    pub fn hold_leak_fa(&self) -> u64 {
        match self.diode {
            Diode::Drop { .. } => self.leak_fa,
            Diode::Junction { is_fa, .. } => self.leak_fa + is_fa,
        }
    }
}

/// Checks a timer clock against the supported range.
///
/// # Errors
/// [`Error::OutOfDomain`] with [`Quantity::Clock`].
pub fn check_clock(clock_hz: u32) -> Result<(), Error> {
    within(clock_hz, limits::CLOCK_HZ.0, limits::CLOCK_HZ.1, Quantity::Clock)
}
