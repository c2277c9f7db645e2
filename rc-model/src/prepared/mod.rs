//! A stage prepared once, then judged at every measurement with 32- and
//! 64-bit integer arithmetic only.
//!
//! # Split by when it runs
//!
//! *Prepare* ([`Prepared::prepare`], feature `solver`, once per stage and
//! clock, on the host or at configuration): the general solver evaluates the
//! discharge at the reference temperature and at both ends of the temperature
//! range and keeps three quantities, each as a quadratic in the temperature
//! offset `Δ = T − T_ref` through those three points:
//!
//! * the discharge start `S(T) = V_C0 + R_eff·I_lk` (µV),
//! * the discharge end `E(T) = (V_T− + R_eff·I_lk)·(R_eff + Rs)/R_eff` (µV),
//! * the discharge time constant as a factor `τd(T)/τd(T_ref)`,
//!
//! so that `hold(T) = τd(T)·ln(S(T)/E(T))` — the model's hold equation with
//! the `Rs` step folded into `E`. At the reference temperature this is the
//! solver's own hold; elsewhere the quadratic's interpolation error adds
//! (measured by the tests: see `temperature_fit_follows_the_solver`).
//!
//! *Per measurement* (the hot path, always built): [`Prepared::hold_at`],
//! [`Prepared::inverse_at`]. No `u128`, no division inside a loop: two
//! quadratics in `i64`, one [`ln_ratio`] (one 64÷32 division), three
//! 32×32-bit products; the inverse adds one more division.
//!
//! # Q formats of the stored quadratics
//!
//! | quantity | at `T_ref` | slope (per m°C) | curvature (per m°C²) |
//! |---|---|---|---|
//! | `S`, `E` (µV) | Q24, < 2^52 (200 V) | Q36 | Q52 |
//! | `τd(T)/τd(T_ref)` | 1 (implicit) | Q46 | Q62 |
//!
//! Overflow: `|Δ| < 2^18` m°C (the temperature domain is 205 °C wide). The
//! evaluation `y0 + ((s1 + ((s2·Δ) >> 16))·Δ) >> 12` uses checked `i64`
//! arithmetic, and [`Prepared::prepare`] refuses a stage whose quadratics
//! would leave their formats anywhere in its temperature range; the test
//! `domain_corners_never_overflow_on_the_hot_path` evaluates the hot path at
//! the ends of that range over the domain's corners.
//!
//! # Inverse
//!
//! A measured hold `h` at temperature `T` gives the ratio `h / hold(T)`. For a
//! press that charges the capacitor fully (what [`crate`]'s users configure:
//! the firmware presses for at least five charge time constants), the hold
//! is proportional to `C`, so the effective capacitance is exactly
//! `C(T)·ratio`; after a partial press the release voltage falls as `C`
//! rises and the ratio is a first-order estimate (use the solver's
//! `Model::inverse_c` there). The resistor estimate `R(T)·ratio` is exact
//! only where the discharge ratio does not depend on `R` (no constant
//! leakage current, no charge-path divider); otherwise it is first order.

mod ln32;
mod norm;

pub use ln32::ln_ratio;
pub use norm::Norm;

use crate::error::{Error, Quantity};
use crate::stage::{check_clock, limits};

#[cfg(feature = "solver")]
mod prepare;
#[cfg(all(test, feature = "solver"))]
mod tests;

/// Shifts between the stored formats (see the module documentation).
const V_SLOPE_SHIFT: u32 = 12; // Q36 slope → Q24 value per m°C
const V_CURVE_SHIFT: u32 = 16; // Q52 curvature → Q36 slope per m°C
const T_SLOPE_SHIFT: u32 = 16; // Q46 slope → Q30 factor per m°C
const T_CURVE_SHIFT: u32 = 16; // Q62 curvature → Q46 slope per m°C
/// Fractional bits of the time-constant factor.
const T_FRAC: i32 = 30;

/// A quadratic in the temperature offset: `at_ref + Δ·(slope + Δ·curve)`,
/// each in the format the module documentation gives for its quantity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Quadratic {
    /// Value at the reference temperature.
    pub at_ref: i64,
    /// First-order coefficient, per m°C.
    pub slope: i64,
    /// Second-order coefficient, per m°C².
    pub curve: i64,
}

impl Quadratic {
    /// `at_ref + ((slope + ((curve·Δ) >> curve_shift))·Δ) >> slope_shift`, or
    /// `None` if a step leaves `i64`.
    fn eval(&self, delta: i64, slope_shift: u32, curve_shift: u32) -> Option<i64> {
        let inner = self.slope.checked_add(self.curve.checked_mul(delta)? >> curve_shift)?;
        self.at_ref.checked_add(inner.checked_mul(delta)? >> slope_shift)
    }
}

/// A stage prepared for the hot path: the discharge as three quadratics in
/// temperature, the time constant in ticks of one clock, and the nominal
/// parts for the inverse.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Prepared {
    clock_hz: u32,
    ref_mdeg_c: i32,
    temp_lo_mdeg_c: i32,
    temp_hi_mdeg_c: i32,
    tau_ticks: Norm,
    tau_factor: Quadratic,
    start: Quadratic,
    end: Quadratic,
    c_ff: u64,
    c_ppm_per_c: i32,
    r_mohm: u64,
    r_ppm_per_c: i32,
}

/// What a measured hold implies.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Estimate {
    /// Measured hold over the hold expected at the measured temperature.
    pub ratio: Norm,
    /// Effective capacitance, fF: `C(T)·ratio`.
    pub c_ff: Norm,
    /// Effective discharge resistor, mΩ, if R alone moved: `R(T)·ratio`.
    pub r_mohm: Norm,
    /// `ratio − 1` in ppm, rounded, saturated to the `i32` range: the
    /// capacitance's deviation from what the part should have at `T`.
    pub deviation_ppm: i32,
}

/// Length of [`Prepared::to_bytes`], bytes.
pub const PREPARED_LEN: usize = 120;

impl Prepared {
    /// The tick clock the hold is expressed in, Hz.
    #[must_use]
    pub const fn clock_hz(&self) -> u32 {
        self.clock_hz
    }

    /// Reference temperature (the nominal values'), m°C.
    #[must_use]
    pub const fn ref_mdeg_c(&self) -> i32 {
        self.ref_mdeg_c
    }

    /// The temperature range the hot path accepts, m°C (lowest, highest).
    #[must_use]
    pub const fn temp_range_mdeg_c(&self) -> (i32, i32) {
        (self.temp_lo_mdeg_c, self.temp_hi_mdeg_c)
    }

    /// Nominal capacitance, fF.
    #[must_use]
    pub const fn c_ff(&self) -> u64 {
        self.c_ff
    }

    /// Nominal discharge resistor, mΩ.
    #[must_use]
    pub const fn r_mohm(&self) -> u64 {
        self.r_mohm
    }

    /// The discharge time constant at the reference temperature, ticks.
    #[must_use]
    pub const fn tau_ticks(&self) -> Norm {
        self.tau_ticks
    }

    fn delta(&self, temp_mdeg_c: i32) -> Result<i64, Error> {
        if temp_mdeg_c < self.temp_lo_mdeg_c || temp_mdeg_c > self.temp_hi_mdeg_c {
            return Err(Error::OutOfDomain(Quantity::Temperature));
        }
        Ok(i64::from(temp_mdeg_c) - i64::from(self.ref_mdeg_c))
    }

    /// `S(T)` and `E(T)` in µV·2^24.
    fn ends(&self, delta: i64) -> Result<(u64, u64), Error> {
        let v = |q: &Quadratic| {
            q.eval(delta, V_SLOPE_SHIFT, V_CURVE_SHIFT).and_then(|x| u64::try_from(x).ok()).ok_or(Error::Arithmetic)
        };
        Ok((v(&self.start)?, v(&self.end)?))
    }

    /// `τd(T)/τd(T_ref)` in Q30 (positive).
    fn tau_factor_q30(&self, delta: i64) -> Result<u32, Error> {
        let f = self.tau_factor.eval(delta, T_SLOPE_SHIFT, T_CURVE_SHIFT).ok_or(Error::Arithmetic)?;
        match u32::try_from(f) {
            Ok(v) if v > 0 => Ok(v),
            _ => Err(Error::Arithmetic),
        }
    }

    /// The hold expected at junction temperature `temp_mdeg_c`, in ticks of
    /// [`Prepared::clock_hz`], after a full press from empty.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Temperature`] outside the
    /// prepared range; [`Error::NoHold`] when the node would start at or below
    /// the falling threshold at that temperature; [`Error::Arithmetic`] (not
    /// reached inside the prepared range).
    pub fn hold_at(&self, temp_mdeg_c: i32) -> Result<Norm, Error> {
        let delta = self.delta(temp_mdeg_c)?;
        let (s, e) = self.ends(delta)?;
        if s <= e {
            return Err(Error::NoHold);
        }
        let ln = ln_ratio(s, e).ok_or(Error::Arithmetic)?;
        let factor = Norm::new(u64::from(self.tau_factor_q30(delta)?), -T_FRAC);
        Ok(self.tau_ticks * factor * ln)
    }

    /// [`Prepared::hold_at`] rounded to whole ticks.
    ///
    /// # Errors
    /// As [`Prepared::hold_at`].
    pub fn hold_ticks_at(&self, temp_mdeg_c: i32) -> Result<u64, Error> {
        self.hold_at(temp_mdeg_c)?.round().ok_or(Error::Arithmetic)
    }

    /// A part's value at temperature offset `delta` (m°C): `v·(1 + ppm/°C·Δ)`.
    fn at_temp(value: u64, ppm_per_c: i32, delta: i64) -> Result<Norm, Error> {
        // 1e9 + ppm·Δ[m°C]: |ppm·Δ| < 2^31·2^18, far inside i64.
        let factor = 1_000_000_000i64 + i64::from(ppm_per_c) * delta;
        let factor = u64::try_from(factor).map_err(|_| Error::OutOfDomain(Quantity::Tolerance))?;
        // 1e9 = 2^9 · 1 953 125: divide by the odd part as a Norm, shift the rest.
        let scaled = (Norm::new(value, 0) * Norm::new(factor, -9)).checked_div(Norm::new(1_953_125, 0));
        scaled.ok_or(Error::Arithmetic)
    }

    /// The capacitance the part should have at `temp_mdeg_c`, fF.
    ///
    /// # Errors
    /// As [`Prepared::hold_at`]'s temperature check; [`Error::OutOfDomain`]
    /// with [`Quantity::Tolerance`] when the tempco drives it through zero.
    pub fn c_at(&self, temp_mdeg_c: i32) -> Result<Norm, Error> {
        Self::at_temp(self.c_ff, self.c_ppm_per_c, self.delta(temp_mdeg_c)?)
    }

    /// What a hold of `hold_ticks` measured at `temp_mdeg_c` implies: its
    /// ratio to the expected hold, the effective capacitance and resistor, and
    /// the capacitance's deviation in ppm (see the module documentation for
    /// when these are exact).
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Hold`] for a zero hold; as
    /// [`Prepared::hold_at`] otherwise.
    pub fn inverse_at(&self, hold_ticks: u64, temp_mdeg_c: i32) -> Result<Estimate, Error> {
        if hold_ticks == 0 {
            return Err(Error::OutOfDomain(Quantity::Hold));
        }
        let delta = self.delta(temp_mdeg_c)?;
        let expected = self.hold_at(temp_mdeg_c)?;
        let ratio = Norm::new(hold_ticks, 0).checked_div(expected).ok_or(Error::Arithmetic)?;
        let ppm = (ratio * Norm::new(1_000_000, 0)).round().map_or(i64::MAX, |v| i64::try_from(v).unwrap_or(i64::MAX));
        let deviation_ppm = i32::try_from(ppm.saturating_sub(1_000_000)).unwrap_or(i32::MAX);
        Ok(Estimate {
            ratio,
            c_ff: Self::at_temp(self.c_ff, self.c_ppm_per_c, delta)? * ratio,
            r_mohm: Self::at_temp(self.r_mohm, self.r_ppm_per_c, delta)? * ratio,
            deviation_ppm,
        })
    }

    /// The prepared stage as bytes, little-endian, in this order: clock (u32),
    /// reference, lowest and highest temperature (i32 m°C), τd mantissa (u32)
    /// and exponent (i32), then the τ factor's, the start's and the end's
    /// quadratics (three i64 each: value, slope, curvature), C (u64 fF), its
    /// tempco (i32 ppm/°C), R (u64 mΩ), its tempco (i32 ppm/°C).
    #[must_use]
    pub fn to_bytes(&self) -> [u8; PREPARED_LEN] {
        let mut b = [0u8; PREPARED_LEN];
        let mut w = Writer { buf: &mut b, at: 0 };
        w.put(&self.clock_hz.to_le_bytes());
        for t in [self.ref_mdeg_c, self.temp_lo_mdeg_c, self.temp_hi_mdeg_c] {
            w.put(&t.to_le_bytes());
        }
        w.put(&self.tau_ticks.mantissa().to_le_bytes());
        w.put(&self.tau_ticks.exponent().to_le_bytes());
        for q in [self.tau_factor, self.start, self.end] {
            for v in [q.at_ref, q.slope, q.curve] {
                w.put(&v.to_le_bytes());
            }
        }
        w.put(&self.c_ff.to_le_bytes());
        w.put(&self.c_ppm_per_c.to_le_bytes());
        w.put(&self.r_mohm.to_le_bytes());
        w.put(&self.r_ppm_per_c.to_le_bytes());
        b
    }

    /// Reads bytes written by [`Prepared::to_bytes`], checking every field.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] naming the first field outside its range (the
    /// clock, a temperature, C or R), or with [`Quantity::Hold`] when the
    /// stored discharge does not describe a hold (start not above end, a
    /// non-positive time constant or τ factor); [`Error::Arithmetic`] for a
    /// slice of the wrong length.
    pub fn from_bytes(bytes: &[u8]) -> Result<Prepared, Error> {
        if bytes.len() != PREPARED_LEN {
            return Err(Error::Arithmetic);
        }
        let mut r = Reader { buf: bytes, at: 0 };
        let clock_hz = u32::from_le_bytes(r.take()?);
        let ref_mdeg_c = i32::from_le_bytes(r.take()?);
        let temp_lo_mdeg_c = i32::from_le_bytes(r.take()?);
        let temp_hi_mdeg_c = i32::from_le_bytes(r.take()?);
        let tau_m = u32::from_le_bytes(r.take()?);
        let tau_e = i32::from_le_bytes(r.take()?);
        let mut quad = || -> Result<Quadratic, Error> {
            Ok(Quadratic {
                at_ref: i64::from_le_bytes(r.take()?),
                slope: i64::from_le_bytes(r.take()?),
                curve: i64::from_le_bytes(r.take()?),
            })
        };
        let (tau_factor, start, end) = (quad()?, quad()?, quad()?);
        let p = Prepared {
            clock_hz,
            ref_mdeg_c,
            temp_lo_mdeg_c,
            temp_hi_mdeg_c,
            tau_ticks: Norm::from_parts(tau_m, tau_e),
            tau_factor,
            start,
            end,
            c_ff: u64::from_le_bytes(r.take()?),
            c_ppm_per_c: i32::from_le_bytes(r.take()?),
            r_mohm: u64::from_le_bytes(r.take()?),
            r_ppm_per_c: i32::from_le_bytes(r.take()?),
        };
        p.check()?;
        Ok(p)
    }

    /// The checks [`Prepared::from_bytes`] applies.
    fn check(&self) -> Result<(), Error> {
        check_clock(self.clock_hz)?;
        let (lo, hi) = limits::TEMP_MDEG_C;
        let t_ok = |t: i32| (lo..=hi).contains(&t);
        if !(t_ok(self.temp_lo_mdeg_c)
            && t_ok(self.temp_hi_mdeg_c)
            && self.temp_lo_mdeg_c <= self.ref_mdeg_c
            && self.ref_mdeg_c <= self.temp_hi_mdeg_c)
        {
            return Err(Error::OutOfDomain(Quantity::Temperature));
        }
        if !(limits::C_FF.0..=limits::C_FF.1).contains(&self.c_ff) {
            return Err(Error::OutOfDomain(Quantity::C));
        }
        if !(limits::R_MOHM.0..=limits::R_MOHM.1).contains(&self.r_mohm) {
            return Err(Error::OutOfDomain(Quantity::R));
        }
        let unit_factor = 1i64 << T_FRAC;
        if self.tau_ticks.is_zero()
            || self.tau_factor.at_ref != unit_factor
            || self.start.at_ref <= self.end.at_ref
            || self.end.at_ref <= 0
            || self.start.at_ref >= 1 << 52
        {
            return Err(Error::OutOfDomain(Quantity::Hold));
        }
        // Both ends of the range must evaluate (no overflow, a hold at each end).
        for t in [self.temp_lo_mdeg_c, self.temp_hi_mdeg_c] {
            self.hold_at(t).map_err(|_| Error::OutOfDomain(Quantity::Hold))?;
        }
        Ok(())
    }
}

struct Writer<'a> {
    buf: &'a mut [u8],
    at: usize,
}

impl Writer<'_> {
    fn put(&mut self, bytes: &[u8]) {
        if let Some(dst) = self.buf.get_mut(self.at..self.at + bytes.len()) {
            dst.copy_from_slice(bytes);
        }
        self.at += bytes.len();
    }
}

struct Reader<'a> {
    buf: &'a [u8],
    at: usize,
}

impl Reader<'_> {
    fn take<const N: usize>(&mut self) -> Result<[u8; N], Error> {
        let s = self.buf.get(self.at..self.at + N).ok_or(Error::Arithmetic)?;
        self.at += N;
        <[u8; N]>::try_from(s).map_err(|_| Error::Arithmetic)
    }
}
