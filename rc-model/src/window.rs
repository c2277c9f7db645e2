//! Worst-case hold window: extreme-value analysis over every tolerance corner,
//! including temperature and capacitor age.

use crate::error::{Error, Quantity};
use crate::fixed::{ln_ratio_q62, mul_div, LN10_Q62};
use crate::model::Model;
use crate::stage::{Diode, Stage};
use crate::units::Span;

/// A relative tolerance, below and above nominal, in ppm.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Tolerance {
    /// How far below nominal, in ppm (0 – 1 000 000).
    pub minus_ppm: u32,
    /// How far above nominal, in ppm (0 – 10 000 000).
    pub plus_ppm: u32,
}

impl Tolerance {
    /// A symmetric tolerance of `ppm` each way.
    #[must_use]
    pub const fn symmetric(ppm: u32) -> Tolerance {
        Tolerance { minus_ppm: ppm, plus_ppm: ppm }
    }

    fn check(self) -> Result<(), Error> {
        if self.minus_ppm > 1_000_000 || self.plus_ppm > 10_000_000 {
            Err(Error::OutOfDomain(Quantity::Tolerance))
        } else {
            Ok(())
        }
    }
}

/// Thresholds as bands in µV (lowest, highest); see [`crate::presets`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ThresholdSpread {
    /// One switching point (plain input): rise and fall move together.
    Single {
        /// Lowest switching point, µV.
        min_uv: u32,
        /// Highest switching point, µV.
        max_uv: u32,
    },
    /// Schmitt input: independent bands.
    Schmitt {
        /// Rising threshold band, µV.
        rise_uv: (u32, u32),
        /// Falling threshold band, µV.
        fall_uv: (u32, u32),
    },
}

/// Temperature coefficients, referred to [`Spread::ref_mdeg_c`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Tempco {
    /// Resistor, ppm/°C.
    pub r_ppm_per_c: i32,
    /// Capacitor (class 1 linear, or a linearised class 2 figure), ppm/°C.
    pub c_ppm_per_c: i32,
    /// Fixed diode drop, µV/°C (about −2 000 for silicon: published, Sedra & Smith).
    pub drop_uv_per_c: i32,
    /// Thresholds, ppm of the supply per °C.
    pub threshold_ppm_per_c: i32,
}

impl Default for Tempco {
    fn default() -> Self {
        Tempco { r_ppm_per_c: 0, c_ppm_per_c: 0, drop_uv_per_c: -2_000, threshold_ppm_per_c: 0 }
    }
}

/// How the capacitor loses capacitance with age.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Aging {
    /// Class 2 ceramic: `C(t) = C(t0)·[1 − (k/100)·log10(t/t0)]` (the law IEC
    /// 60384-22 describes; the formula is from memory), `t0` the hours at which
    /// the tolerance is referred (commonly 1 000 h).
    Class2 {
        /// Loss per decade of hours, in thousandths of a percent (2.5 %/decade → 2 500).
        k_milli_pct: u32,
        /// Reference age t0 in hours.
        ref_hours: u32,
        /// Age at the far end of the window, hours.
        hours: u32,
    },
    /// A fixed end-of-life loss, in ppm (an electrolytic's −20 % criterion → 200 000).
    EndOfLife {
        /// Capacitance loss in ppm.
        loss_ppm: u32,
    },
}

impl Aging {
    /// Remaining capacitance fraction in ppm at the window's age.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Tolerance`] for a loss of 100 % or more.
    pub fn remaining_ppm(self) -> Result<u32, Error> {
        let loss_ppm: u128 = match self {
            Aging::EndOfLife { loss_ppm } => u128::from(loss_ppm),
            Aging::Class2 { k_milli_pct, ref_hours, hours } => {
                if hours <= ref_hours || ref_hours == 0 {
                    0
                } else {
                    // log10(t/t0) = ln(t/t0)/ln 10 (Q62); loss = k[m%]·10 ppm per decade.
                    let ln = ln_ratio_q62(u128::from(hours), u128::from(ref_hours)).ok_or(Error::Arithmetic)?;
                    let per_decade = u128::from(k_milli_pct) * 10;
                    mul_div(per_decade, ln.unsigned_abs(), LN10_Q62.unsigned_abs()).ok_or(Error::Arithmetic)?
                }
            }
        };
        if loss_ppm >= 1_000_000 {
            return Err(Error::OutOfDomain(Quantity::Tolerance));
        }
        u32::try_from(1_000_000 - loss_ppm).map_err(|_| Error::Arithmetic)
    }
}

/// Everything that moves the hold: tolerances, thresholds, temperature, age.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Spread {
    /// Resistor tolerance.
    pub r: Tolerance,
    /// Capacitor tolerance.
    pub c: Tolerance,
    /// Supply tolerance.
    pub vdd: Tolerance,
    /// Diode: on the drop (fixed drop) or on the saturation current (junction).
    pub diode: Tolerance,
    /// Driver output resistance.
    pub driver: Tolerance,
    /// Input thresholds; `None` keeps the stage's own.
    pub thresholds: Option<ThresholdSpread>,
    /// Reference temperature of the nominal values, m°C (commonly 25 °C).
    pub ref_mdeg_c: i32,
    /// Operating temperature range (m°C); `None` for the reference only.
    pub temp_mdeg_c: Option<(i32, i32)>,
    /// Temperature coefficients.
    pub tempco: Tempco,
    /// Capacitor aging at the far end of the window; `None` for new parts.
    pub aging: Option<Aging>,
}

impl Default for Spread {
    fn default() -> Self {
        Spread {
            r: Tolerance::default(),
            c: Tolerance::default(),
            vdd: Tolerance::default(),
            diode: Tolerance::default(),
            driver: Tolerance::default(),
            thresholds: None,
            ref_mdeg_c: 25_000,
            temp_mdeg_c: None,
            tempco: Tempco::default(),
            aging: None,
        }
    }
}

/// The parameters a corner moves, in bit order of [`Corner`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Param {
    /// Resistor.
    R,
    /// Capacitor.
    C,
    /// Supply.
    Vdd,
    /// Diode drop or saturation current.
    Diode,
    /// Driver output resistance.
    Driver,
    /// Rising threshold (or the single switching point).
    Rise,
    /// Falling threshold (Schmitt only).
    Fall,
    /// Temperature.
    Temp,
    /// Capacitor age.
    Age,
}

/// Every parameter, in bit order.
pub const PARAMS: [Param; 9] =
    [Param::R, Param::C, Param::Vdd, Param::Diode, Param::Driver, Param::Rise, Param::Fall, Param::Temp, Param::Age];

impl Param {
    /// Short lower-case name.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Param::R => "r",
            Param::C => "c",
            Param::Vdd => "vdd",
            Param::Diode => "diode",
            Param::Driver => "driver",
            Param::Rise => "rise",
            Param::Fall => "fall",
            Param::Temp => "temp",
            Param::Age => "age",
        }
    }
}

/// A tolerance corner: bit `i` set means [`PARAMS`]`[i]` at its high end
/// (for age: aged; for temperature: hottest), clear means low end.
/// `active` marks the parameters that actually move.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Corner {
    /// High-end bits.
    pub high: u16,
    /// Bits of the parameters that move.
    pub active: u16,
}

impl Corner {
    /// `(parameter, at_high_end)` for every moving parameter.
    pub fn sides(self) -> impl Iterator<Item = (Param, bool)> {
        PARAMS
            .into_iter()
            .enumerate()
            .filter(move |(i, _)| self.active & (1 << i) != 0)
            .map(move |(i, p)| (p, self.high & (1 << i) != 0))
    }
}

/// Minimum and maximum hold over all corners, and the corners that give
/// them; and the turn-on latency (press to output active) at the nominal
/// point and its extremes over the same corners.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Window {
    /// Hold at nominal values (reference temperature, new parts).
    pub nominal: Span,
    /// Shortest hold over the corners.
    pub min: Span,
    /// Corner of the shortest hold (no moving bits: the nominal point).
    pub min_corner: Corner,
    /// Longest hold over the corners.
    pub max: Span,
    /// Corner of the longest hold.
    pub max_corner: Corner,
    /// Number of corners evaluated.
    pub corners: u32,
    /// Turn-on latency at nominal values.
    pub on_nominal: Span,
    /// Shortest turn-on latency over the corners.
    pub on_min: Span,
    /// Longest turn-on latency over the corners.
    pub on_max: Span,
}

/// A corner the model could not evaluate, and why.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CornerFailure {
    /// The corner.
    pub corner: Corner,
    /// The model's error there.
    pub error: Error,
}

fn scale_u64(v: u64, ppm_factor: u64) -> Result<u64, Error> {
    let r = mul_div(u128::from(v), u128::from(ppm_factor), 1_000_000).ok_or(Error::Arithmetic)?;
    u64::try_from(r).map_err(|_| Error::Arithmetic)
}

fn scale_u32(v: u32, ppm_factor: u64) -> Result<u32, Error> {
    u32::try_from(scale_u64(u64::from(v), ppm_factor)?).map_err(|_| Error::Arithmetic)
}

fn side(t: Tolerance, high: bool) -> u64 {
    if high {
        1_000_000 + u64::from(t.plus_ppm)
    } else {
        1_000_000 - u64::from(t.minus_ppm)
    }
}

/// `v · (1 + coeff_ppm·Δ°C)` with Δ in m°C.
fn tempco_scale(v: u64, coeff_ppm_per_c: i32, delta_mdeg: i64) -> Result<u64, Error> {
    let factor = 1_000_000_000i128 + i128::from(coeff_ppm_per_c) * i128::from(delta_mdeg);
    if factor <= 0 {
        return Err(Error::OutOfDomain(Quantity::Tolerance));
    }
    let r = mul_div(u128::from(v), factor.unsigned_abs(), 1_000_000_000).ok_or(Error::Arithmetic)?;
    u64::try_from(r).map_err(|_| Error::Arithmetic)
}

fn offset_u32(v: u32, delta: i64) -> Result<u32, Error> {
    i64::from(v).checked_add(delta).and_then(|x| u32::try_from(x).ok()).ok_or(Error::OutOfDomain(Quantity::Tolerance))
}

impl Spread {
    /// Bits of the parameters that move under this spread.
    #[must_use]
    pub fn active(&self) -> u16 {
        let mut a = 0u16;
        let moves = |t: Tolerance| t.minus_ppm != 0 || t.plus_ppm != 0;
        for (i, p) in PARAMS.into_iter().enumerate() {
            let on = match p {
                Param::R => moves(self.r),
                Param::C => moves(self.c),
                Param::Vdd => moves(self.vdd),
                Param::Diode => moves(self.diode),
                Param::Driver => moves(self.driver),
                Param::Rise => match self.thresholds {
                    Some(ThresholdSpread::Single { min_uv, max_uv }) => min_uv != max_uv,
                    Some(ThresholdSpread::Schmitt { rise_uv, .. }) => rise_uv.0 != rise_uv.1,
                    None => false,
                },
                Param::Fall => {
                    matches!(self.thresholds, Some(ThresholdSpread::Schmitt { fall_uv, .. }) if fall_uv.0 != fall_uv.1)
                }
                Param::Temp => self.temp_mdeg_c.is_some(),
                Param::Age => self.aging.is_some(),
            };
            if on {
                a |= 1 << i;
            }
        }
        a
    }

    /// The stage at one corner. Temperature moves R, C, the drop and the
    /// thresholds by their coefficients and sets the junction temperature;
    /// age scales C by the remaining fraction.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Tolerance`] for tolerances out
    /// of range; the moved stage is checked by the model, not here.
    pub fn at_corner(&self, nominal: &Stage, corner: Corner) -> Result<Stage, Error> {
        for t in [self.r, self.c, self.vdd, self.diode, self.driver] {
            t.check()?;
        }
        let bit = |p: Param| {
            let i = PARAMS.iter().position(|&q| q == p).unwrap_or(0);
            (corner.active & (1 << i) != 0, corner.high & (1 << i) != 0)
        };
        let pick = |p: Param, t: Tolerance| {
            let (on, high) = bit(p);
            if on {
                side(t, high)
            } else {
                1_000_000
            }
        };
        let mut s = *nominal;
        s.r_mohm = scale_u64(s.r_mohm, pick(Param::R, self.r))?;
        s.c_ff = scale_u64(s.c_ff, pick(Param::C, self.c))?;
        let vdd_factor = pick(Param::Vdd, self.vdd);
        s.vdd_uv = scale_u32(s.vdd_uv, vdd_factor)?;
        s.driver_mohm = scale_u64(s.driver_mohm, pick(Param::Driver, self.driver))?;
        s.diode = match s.diode {
            Diode::Drop { drop_uv } => Diode::Drop { drop_uv: scale_u32(drop_uv, pick(Param::Diode, self.diode))? },
            Diode::Junction { is_fa, n_milli, rs_mohm } => {
                Diode::Junction { is_fa: scale_u64(is_fa, pick(Param::Diode, self.diode))?, n_milli, rs_mohm }
            }
        };
        // Thresholds: the band ends, or the stage's own scaled with the supply
        // when they are given as fractions (the stage keeps them absolute, so
        // scale them with Vdd to keep the fraction).
        let (rise_on, rise_high) = bit(Param::Rise);
        let (fall_on, fall_high) = bit(Param::Fall);
        let end = |band: (u32, u32), on: bool, high: bool, own: u32| {
            if !on {
                own
            } else if high {
                band.1
            } else {
                band.0
            }
        };
        match self.thresholds {
            None => {
                s.rise_uv = scale_u32(s.rise_uv, vdd_factor)?;
                s.fall_uv = scale_u32(s.fall_uv, vdd_factor)?;
            }
            Some(ThresholdSpread::Single { min_uv, max_uv }) => {
                let v = end((min_uv, max_uv), rise_on, rise_high, nominal.rise_uv);
                s.rise_uv = scale_u32(v, vdd_factor)?;
                s.fall_uv = s.rise_uv;
            }
            Some(ThresholdSpread::Schmitt { rise_uv, fall_uv }) => {
                s.rise_uv = scale_u32(end(rise_uv, rise_on, rise_high, nominal.rise_uv), vdd_factor)?;
                s.fall_uv = scale_u32(end(fall_uv, fall_on, fall_high, nominal.fall_uv), vdd_factor)?.min(s.rise_uv);
            }
        }
        // Temperature.
        let (temp_on, temp_high) = bit(Param::Temp);
        if let (true, Some((lo, hi))) = (temp_on, self.temp_mdeg_c) {
            s = self.at_temperature(&s, if temp_high { hi } else { lo })?;
        }
        // Age.
        let (age_on, aged) = bit(Param::Age);
        if let (true, true, Some(a)) = (age_on, aged, self.aging) {
            s.c_ff = scale_u64(s.c_ff, u64::from(a.remaining_ppm()?))?;
        }
        Ok(s)
    }

    /// The stage at junction temperature `temp_mdeg_c`: R, C, the fixed drop
    /// and the thresholds moved by their coefficients from [`Spread::ref_mdeg_c`],
    /// and the junction temperature set (a junction diode's thermal voltage).
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Tolerance`] when a coefficient
    /// would drive a value through zero; the moved stage is checked by the model.
    pub fn at_temperature(&self, stage: &Stage, temp_mdeg_c: i32) -> Result<Stage, Error> {
        let mut s = *stage;
        let delta = i64::from(temp_mdeg_c) - i64::from(self.ref_mdeg_c);
        s.temp_mdeg_c = temp_mdeg_c;
        s.r_mohm = tempco_scale(s.r_mohm, self.tempco.r_ppm_per_c, delta)?;
        s.c_ff = tempco_scale(s.c_ff, self.tempco.c_ppm_per_c, delta)?;
        // In i128: any i32 coefficient times any Δ (|Δ| < 2^33 m°C) is below
        // 2^64, times any supply below 2^96; a shift that leaves i64 is refused.
        // (In the domain — |Δ| ≤ 205 °C, the coefficients the stage file
        // accepts — every product fits i64 and the result is the same.)
        let wide = |v: i128| i64::try_from(v).map_err(|_| Error::OutOfDomain(Quantity::Tolerance));
        if let Diode::Drop { drop_uv } = s.diode {
            let d = wide(i128::from(self.tempco.drop_uv_per_c) * i128::from(delta) / 1000)?;
            s.diode = Diode::Drop { drop_uv: offset_u32(drop_uv, d)? };
        }
        let shift = wide(
            i128::from(self.tempco.threshold_ppm_per_c) * i128::from(delta) / 1000 * i128::from(s.vdd_uv) / 1_000_000,
        )?;
        s.rise_uv = offset_u32(s.rise_uv, shift)?;
        s.fall_uv = offset_u32(s.fall_uv, shift)?;
        Ok(s)
    }

    /// Evaluates the hold at every corner (2^k for k moving parameters, at most
    /// 512) and returns the extremes with their corners.
    ///
    /// # Errors
    /// The first corner the model cannot evaluate, with its error (for example
    /// a low-supply corner where the output never activates).
    pub fn window(&self, nominal: &Stage) -> Result<Window, CornerFailure> {
        let active = self.active();
        let fail = |corner, error| CornerFailure { corner, error };
        let at_nominal = Model::new(nominal).and_then(|m| m.evaluate()).map_err(|e| fail(Corner::default(), e))?;
        let mut w = Window {
            nominal: at_nominal.hold,
            min: at_nominal.hold,
            min_corner: Corner::default(),
            max: at_nominal.hold,
            max_corner: Corner::default(),
            corners: 0,
            on_nominal: at_nominal.on_latency,
            on_min: at_nominal.on_latency,
            on_max: at_nominal.on_latency,
        };
        // Enumerate the subsets of `active` (Gosper-free: walk high = (high − active) & active).
        let mut high: u16 = 0;
        loop {
            let corner = Corner { high, active };
            let e = self
                .at_corner(nominal, corner)
                .and_then(|s| Model::new(&s))
                .and_then(|m| m.evaluate())
                .map_err(|e| fail(corner, e))?;
            let hold = e.hold;
            w.corners += 1;
            w.on_min = w.on_min.min(e.on_latency);
            w.on_max = w.on_max.max(e.on_latency);
            if hold < w.min {
                w.min = hold;
                w.min_corner = corner;
            }
            if hold > w.max {
                w.max = hold;
                w.max_corner = corner;
            }
            if high == active {
                break;
            }
            high = high.wrapping_sub(active) & active;
        }
        Ok(w)
    }
}

/// Expected life of an aluminium electrolytic capacitor at `at_mdeg_c`, in
/// hours, from its rated life `rated_h` at `rated_mdeg_c`, by the rule that
/// life doubles for every 10 °C cooler: `L = L0·2^((T0 − T)/10)` (common
/// practice, Arrhenius-based; no source). Rounded down to whole hours.
///
/// Computed as `2^k · 2^f` with `k` whole and `0 ≤ f < 1`, `2^f = 2·e^(−(1−f)·ln 2)`
/// (error below 1e-17 relative before rounding).
///
/// # Errors
/// [`Error::OutOfDomain`] with [`Quantity::Temperature`] outside −55 … +150 °C,
/// or with [`Quantity::Tolerance`] when the life exceeds 2^64 hours.
pub fn electrolytic_life_h(rated_h: u32, rated_mdeg_c: i32, at_mdeg_c: i32) -> Result<u64, Error> {
    use crate::fixed::{exp_neg_q62, LN2_Q62, ONE_Q62};
    let (lo, hi) = crate::stage::limits::TEMP_MDEG_C;
    if !(lo..=hi).contains(&rated_mdeg_c) || !(lo..=hi).contains(&at_mdeg_c) {
        return Err(Error::OutOfDomain(Quantity::Temperature));
    }
    // Exponent in Q62: (T0 − T)/10 °C, |·| ≤ 20.5.
    let delta = i128::from(rated_mdeg_c) - i128::from(at_mdeg_c);
    let x = delta * ONE_Q62 / 10_000;
    let k = x.div_euclid(ONE_Q62);
    let f = x.rem_euclid(ONE_Q62);
    // 2^f = 2·e^(−(1 − f)·ln 2), in Q62 (≤ 2^63).
    let arg = mul_div((ONE_Q62 - f).unsigned_abs(), LN2_Q62.unsigned_abs(), ONE_Q62.unsigned_abs())
        .ok_or(Error::Arithmetic)?;
    let two_f = 2 * exp_neg_q62(arg);
    let base = u128::from(rated_h) * two_f; // h·Q62 < 2^32·2^63
    let life = if k >= 0 {
        base.checked_shl(k.unsigned_abs() as u32).ok_or(Error::Arithmetic)?
    } else {
        base >> k.unsigned_abs()
    };
    u64::try_from(life >> 62).map_err(|_| Error::OutOfDomain(Quantity::Tolerance))
}
