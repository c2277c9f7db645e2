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
//! [`Prepared::inverse`], [`Prepared::inverse_at`],
//! [`Prepared::deviation_ppm_at`]. No `u128`, no division inside a loop: a
//! hold is three quadratics (two 32×32→64-bit products each), one
//! [`ln_ratio`] (table lookups; a 64÷32 division only for a ratio below
//! 1.125) and two [`Norm`] products; an inverse is one [`Norm`] quotient by
//! that hold — at the reference temperature by the hold cached when the
//! stage was prepared or loaded — and a product or two.
//!
//! # Q formats of the stored quadratics
//!
//! Each quadratic is `y(Δ) = y0 + (((σ + ((κ·Δ) >> c))·Δ) >> s)` with `Δ` in
//! m°C, `y0` an `i64` in the quantity's format, and `σ`, `κ` `i32`
//! mantissas whose shifts `s`, `c` (0 … 62) [`Prepared::prepare`] chooses per
//! stage so that `σ`, `κ` and `σ + κ·Δ` stay below 2^30 over the prepared
//! range (it is linear in `Δ`, so its ends decide).
//!
//! | quantity | `y0` format |
//! |---|---|
//! | `S`, `E` (µV) | Q24, below 2^52 (200 V) |
//! | `τd(T)/τd(T_ref)`, `C(T)/C`, `R(T)/R` | Q30 (`y0` = 2^30) |
//!
//! Overflow: `|Δ| < 2^18` m°C (the temperature domain is 205 °C wide and
//! the hot path refuses temperatures outside the prepared range); `κ·Δ` and
//! `(σ + …)·Δ` are 32×32-bit products below 2^49; `y0` plus that stays
//! inside `i64`. The one narrowing, `σ + κ·Δ` to `i32`, is checked (an error,
//! not reached in the prepared range: prepare evaluates both ends). The test
//! `every_prepared_stage_evaluates_at_its_range_ends` (`tests/tests/domain.rs`) prepares the
//! domain's corners and the sweep's stages and evaluates each across its range.
//!
//! # Inverse
//!
//! A measured hold `h` at temperature `T` gives the ratio `h / hold(T)`. For a
//! press that charges the capacitor fully (a stage file's press is commonly
//! many charge time constants long), the hold is proportional to `C`, so the
//! effective capacitance is exactly `C(T)·ratio`; after a partial press the
//! release voltage falls as `C` rises and the ratio is a first-order
//! estimate (use the solver's `Model::inverse_c` there). After five time
//! constants, the least the firmware presses, the release voltage is 0.7 %
//! short and the hold's elasticity in `C` is `1 − 5·e^−5/ln(S/E)`, about
//! 0.95 for a typical `ln(S/E)` of 0.7: a 10 % capacitance change then reads
//! as about 9.5 %. The resistor estimate `R(T)·ratio` is exact
//! only where the discharge ratio does not depend on `R` (no constant
//! leakage current, no charge-path divider); otherwise it is first order.

mod ln32;
mod norm;

pub use ln32::ln_ratio;
pub use norm::Norm;

use norm::mul32s;

use crate::error::{Error, Quantity};
use crate::stage::{check_clock, limits};

#[cfg(feature = "solver")]
mod prepare;
#[cfg(all(test, feature = "solver"))]
mod tests;

/// Fractional bits of the factor quadratics (τ, C, R).
const FACTOR_FRAC: i32 = 30;
/// Largest shift a quadratic may store.
const SHIFT_MAX: u8 = 62;

/// A quadratic in the temperature offset (see the module documentation for
/// its form and the formats of each quantity).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Quadratic {
    /// Value at the reference temperature.
    pub at_ref: i64,
    /// First-order mantissa `σ`, per m°C, 2^`slope_shift` finer than the value.
    pub slope: i32,
    /// Second-order mantissa `κ`, per m°C², 2^`curve_shift` finer than `σ`.
    pub curve: i32,
    /// `s`: bits by which `σ` is finer than the value.
    pub slope_shift: u8,
    /// `c`: bits by which `κ` is finer than `σ`.
    pub curve_shift: u8,
}

impl Quadratic {
    /// A constant.
    #[must_use]
    pub const fn flat(at_ref: i64) -> Quadratic {
        Quadratic { at_ref, slope: 0, curve: 0, slope_shift: 0, curve_shift: 0 }
    }

    /// The value at `Δ` m°C from the reference (`|Δ| < 2^18`).
    ///
    /// # Errors
    /// [`Error::Arithmetic`] when `σ + κ·Δ` leaves `i32` (not reached inside
    /// the range the quadratic was prepared for).
    // ARMv6-M: one copy instead of five inlined ones is 340 bytes less of a
    // field tester's flash for about 90 instructions per hold (the M0 has
    // that room under its target; the M3 build keeps it inline).
    #[cfg_attr(all(target_arch = "arm", not(target_has_atomic = "32")), inline(never))]
    #[cfg_attr(not(all(target_arch = "arm", not(target_has_atomic = "32"))), inline)]
    pub fn eval(&self, delta: i32) -> Result<i64, Error> {
        if delta == 0 || (self.slope == 0 && self.curve == 0) {
            return Ok(self.at_ref);
        }
        let curved = if self.curve == 0 { 0 } else { mul32s(self.curve, delta) >> (self.curve_shift & 63) };
        let inner = i64::from(self.slope) + curved;
        let inner = i32::try_from(inner).map_err(|_| Error::Arithmetic)?;
        Ok(self.at_ref + (mul32s(inner, delta) >> (self.slope_shift & 63)))
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
    c_factor: Quadratic,
    r_factor: Quadratic,
    c_ff: u64,
    r_mohm: u64,
    /// The hold at the reference temperature (derived when prepared or
    /// loaded, not stored in the bytes): the inverse's divisor there.
    hold_ref: Norm,
}

/// What a measured hold implies.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Estimate {
    /// Measured hold over the hold expected at the measured temperature.
    pub ratio: Norm,
    /// Effective capacitance, fF: `C(T)·ratio`. (The effective resistor, if R
    /// alone moved, is [`Prepared::r_at`]`·ratio`.)
    pub c_ff: Norm,
    /// `ratio − 1` in ppm, rounded, saturated to the `i32` range: the
    /// capacitance's deviation from what the part should have at `T`.
    pub deviation_ppm: i32,
}

/// Length of [`Prepared::to_bytes`], bytes.
pub const PREPARED_LEN: usize = 130;

/// Length of [`Prepared::outcome_bytes`], bytes.
pub const OUTCOME_LEN: usize = 30;

/// A one-byte code per model error, for byte-exact comparisons (0 is "no error").
fn error_code(e: Error) -> u8 {
    match e {
        Error::OutOfDomain(_) => 1,
        Error::NeverActivates { .. } => 2,
        Error::PressTooShort { .. } => 3,
        Error::NoHold => 4,
        Error::HoldOutOfDomain { .. } => 5,
        Error::IllConditioned => 6,
        Error::NoConvergence => 7,
        Error::Arithmetic => 8,
    }
}

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

    /// The stored quadratics: the τ factor (Q30, slope Q46, curvature Q62),
    /// the discharge start and end (µV in Q24, slope Q36, curvature Q52).
    #[must_use]
    pub const fn quadratics(&self) -> (Quadratic, Quadratic, Quadratic) {
        (self.tau_factor, self.start, self.end)
    }

    fn delta(&self, temp_mdeg_c: i32) -> Result<i32, Error> {
        if temp_mdeg_c < self.temp_lo_mdeg_c || temp_mdeg_c > self.temp_hi_mdeg_c {
            return Err(Error::OutOfDomain(Quantity::Temperature));
        }
        // Both inside −55 … +150 °C (checked when prepared or loaded): |Δ| < 2^18.
        Ok(temp_mdeg_c - self.ref_mdeg_c)
    }

    /// A factor quadratic at `delta` as a [`Norm`] (positive).
    fn factor(q: &Quadratic, delta: i32) -> Result<Norm, Error> {
        match u64::try_from(q.eval(delta)?) {
            Ok(v) if v > 0 => Ok(Norm::new(v, -FACTOR_FRAC)),
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
        self.hold_at_delta(self.delta(temp_mdeg_c)?)
    }

    fn hold_at_delta(&self, delta: i32) -> Result<Norm, Error> {
        let s = self.start.eval(delta)?;
        let e = self.end.eval(delta)?;
        if s <= e {
            return Err(Error::NoHold);
        }
        let ln = ln_ratio(s.unsigned_abs(), u64::try_from(e).map_err(|_| Error::NoHold)?).ok_or(Error::Arithmetic)?;
        Ok(self.tau_ticks * Self::factor(&self.tau_factor, delta)? * ln)
    }

    /// [`Prepared::hold_at`] rounded to whole ticks.
    ///
    /// # Errors
    /// As [`Prepared::hold_at`].
    pub fn hold_ticks_at(&self, temp_mdeg_c: i32) -> Result<u64, Error> {
        self.hold_at(temp_mdeg_c)?.round().ok_or(Error::Arithmetic)
    }

    /// The capacitance the part should have at `temp_mdeg_c`, fF.
    ///
    /// # Errors
    /// As [`Prepared::hold_at`]'s temperature check.
    pub fn c_at(&self, temp_mdeg_c: i32) -> Result<Norm, Error> {
        self.c_at_delta(self.delta(temp_mdeg_c)?)
    }

    fn c_at_delta(&self, delta: i32) -> Result<Norm, Error> {
        Ok(Norm::new(self.c_ff, 0) * Self::factor(&self.c_factor, delta)?)
    }

    /// The discharge resistor the part should have at `temp_mdeg_c`, mΩ.
    ///
    /// # Errors
    /// As [`Prepared::hold_at`]'s temperature check.
    pub fn r_at(&self, temp_mdeg_c: i32) -> Result<Norm, Error> {
        Ok(Norm::new(self.r_mohm, 0) * Self::factor(&self.r_factor, self.delta(temp_mdeg_c)?)?)
    }

    /// `hold_ticks` over the hold expected at `delta`: at the reference the
    /// cached hold, elsewhere [`Prepared::hold_at`]'s computation.
    fn ratio(&self, hold_ticks: u64, delta: i32) -> Result<Norm, Error> {
        if hold_ticks == 0 {
            return Err(Error::OutOfDomain(Quantity::Hold));
        }
        let expected = if delta == 0 { self.hold_ref } else { self.hold_at_delta(delta)? };
        Norm::new(hold_ticks, 0).checked_div(expected).ok_or(Error::Arithmetic)
    }

    /// `ratio − 1` in ppm, rounded, saturated to `i32`.
    fn deviation(ratio: Norm) -> i32 {
        let ppm = (ratio * Norm::new(1_000_000, 0)).round().map_or(i64::MAX, |v| i64::try_from(v).unwrap_or(i64::MAX));
        i32::try_from(ppm.saturating_sub(1_000_000)).unwrap_or(i32::MAX)
    }

    /// The capacitance's deviation in ppm that a hold of `hold_ticks`
    /// measured at `temp_mdeg_c` implies: the ratio to the hold expected at
    /// that temperature, minus one (the drift tracker's sample).
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Hold`] for a zero hold; as
    /// [`Prepared::hold_at`] otherwise.
    pub fn deviation_ppm_at(&self, hold_ticks: u64, temp_mdeg_c: i32) -> Result<i32, Error> {
        Ok(Self::deviation(self.ratio(hold_ticks, self.delta(temp_mdeg_c)?)?))
    }

    /// What a hold of `hold_ticks` measured at `temp_mdeg_c` implies: its
    /// ratio to the expected hold, the effective capacitance, and the
    /// capacitance's deviation in ppm (see the module documentation for when
    /// these are exact).
    ///
    /// # Errors
    /// As [`Prepared::deviation_ppm_at`].
    pub fn inverse_at(&self, hold_ticks: u64, temp_mdeg_c: i32) -> Result<Estimate, Error> {
        let delta = self.delta(temp_mdeg_c)?;
        let ratio = self.ratio(hold_ticks, delta)?;
        Ok(Estimate { ratio, c_ff: self.c_at_delta(delta)? * ratio, deviation_ppm: Self::deviation(ratio) })
    }

    /// [`Prepared::inverse_at`] at the reference temperature (no compensation:
    /// one division by the cached hold).
    ///
    /// # Errors
    /// As [`Prepared::deviation_ppm_at`].
    pub fn inverse(&self, hold_ticks: u64) -> Result<Estimate, Error> {
        self.inverse_at(hold_ticks, self.ref_mdeg_c)
    }

    /// The hot path's results for one measurement as bytes, so that two
    /// builds (host and chip) can be compared bit for bit: the error code of
    /// [`Prepared::hold_at`] at `temp_mdeg_c` (0 for none), its mantissa (u32)
    /// and exponent (i32); the error code of [`Prepared::inverse_at`] for
    /// `hold_ticks`, then the ratio's and the capacitance's mantissa and
    /// exponent and the deviation (i32). Little-endian; fields
    /// of a failed call are zero.
    #[must_use]
    pub fn outcome_bytes(&self, temp_mdeg_c: i32, hold_ticks: u64) -> [u8; OUTCOME_LEN] {
        let mut b = [0u8; OUTCOME_LEN];
        let mut w = Writer { buf: &mut b, at: 0 };
        let norm = |w: &mut Writer<'_>, n: Norm| {
            w.put(&n.mantissa().to_le_bytes());
            w.put(&n.exponent().to_le_bytes());
        };
        match self.hold_at(temp_mdeg_c) {
            Ok(h) => {
                w.put(&[0]);
                norm(&mut w, h);
            }
            Err(e) => w.put(&[error_code(e), 0, 0, 0, 0, 0, 0, 0, 0]),
        }
        match self.inverse_at(hold_ticks, temp_mdeg_c) {
            Ok(est) => {
                w.put(&[0]);
                for n in [est.ratio, est.c_ff] {
                    norm(&mut w, n);
                }
                w.put(&est.deviation_ppm.to_le_bytes());
            }
            Err(e) => w.put(&[error_code(e)]),
        }
        b
    }

    /// The prepared stage as bytes, little-endian, in this order: clock (u32),
    /// reference, lowest and highest temperature (i32 m°C), τd mantissa (u32)
    /// and exponent (i32), then the quadratics of the τ factor, the start, the
    /// end, the C factor and the R factor (each: value i64, σ i32, κ i32, s u8,
    /// c u8), C (u64 fF), R (u64 mΩ).
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
        for q in [self.tau_factor, self.start, self.end, self.c_factor, self.r_factor] {
            w.put(&q.at_ref.to_le_bytes());
            w.put(&q.slope.to_le_bytes());
            w.put(&q.curve.to_le_bytes());
            w.put(&[q.slope_shift, q.curve_shift]);
        }
        w.put(&self.c_ff.to_le_bytes());
        w.put(&self.r_mohm.to_le_bytes());
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
            let (at_ref, slope, curve) =
                (i64::from_le_bytes(r.take()?), i32::from_le_bytes(r.take()?), i32::from_le_bytes(r.take()?));
            let [slope_shift, curve_shift] = r.take::<2>()?;
            Ok(Quadratic { at_ref, slope, curve, slope_shift, curve_shift })
        };
        let (tau_factor, start, end, c_factor, r_factor) = (quad()?, quad()?, quad()?, quad()?, quad()?);
        let p = Prepared {
            clock_hz,
            ref_mdeg_c,
            temp_lo_mdeg_c,
            temp_hi_mdeg_c,
            tau_ticks: Norm::from_parts(tau_m, tau_e),
            tau_factor,
            start,
            end,
            c_factor,
            r_factor,
            c_ff: u64::from_le_bytes(r.take()?),
            r_mohm: u64::from_le_bytes(r.take()?),
            hold_ref: Norm::ZERO,
        };
        p.finish()
    }

    /// Checks a stage as [`Prepared::from_bytes`] does and derives its
    /// reference hold.
    fn finish(mut self) -> Result<Prepared, Error> {
        self.check()?;
        self.hold_ref = self.hold_at_delta(0).map_err(|_| Error::OutOfDomain(Quantity::Hold))?;
        Ok(self)
    }

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
        let unit_factor = 1i64 << FACTOR_FRAC;
        let quads = [self.tau_factor, self.start, self.end, self.c_factor, self.r_factor];
        if self.tau_ticks.is_zero()
            || quads.iter().any(|q| q.slope_shift > SHIFT_MAX || q.curve_shift > SHIFT_MAX)
            || [self.tau_factor, self.c_factor, self.r_factor].iter().any(|q| q.at_ref != unit_factor)
            || self.start.at_ref <= self.end.at_ref
            || self.end.at_ref <= 0
            || self.start.at_ref >= 1 << 52
        {
            return Err(Error::OutOfDomain(Quantity::Hold));
        }
        // Both ends of the range must evaluate (no overflow, a hold at each end);
        // every quadratic's inner term is linear in Δ, so its ends bound it.
        for t in [self.temp_lo_mdeg_c, self.temp_hi_mdeg_c] {
            self.hold_at(t).map_err(|_| Error::OutOfDomain(Quantity::Hold))?;
            let d = self.delta(t)?;
            Self::factor(&self.c_factor, d).map_err(|_| Error::OutOfDomain(Quantity::Tolerance))?;
            Self::factor(&self.r_factor, d).map_err(|_| Error::OutOfDomain(Quantity::Tolerance))?;
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
