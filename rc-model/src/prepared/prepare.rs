//! Preparing a stage for the hot path with the general solver (feature `solver`).

use super::{Norm, Prepared, Quadratic, T_FRAC};
use crate::error::{Error, Quantity};
use crate::fixed::mul_div;
use crate::model::Model;
use crate::stage::{check_clock, limits, Stage};
use crate::window::Spread;

/// Fractional bits of a stored voltage at the reference temperature.
const V_FRAC: u32 = 24;

/// The discharge at one temperature: start and end (µV·2^24) and τd (ticks·2^32).
struct Point {
    start: i128,
    end: i128,
    tau: u128,
}

/// `v` (a `u128` with `frac` fractional bits) as a [`Norm`].
fn norm_of(v: u128, frac: i32) -> Norm {
    let excess = (128 - v.leading_zeros()).saturating_sub(64);
    Norm::new((v >> excess) as u64, excess as i32 - frac)
}

/// Fits `y0 + Δ·(slope + Δ·curve)` through `(0, y0)`, `(x1, y1)`, `(x2, y2)`
/// (`x` in m°C, distinct and non-zero) with the slope `slope_shift` and the
/// curvature `slope_shift + curve_shift` bits finer than `y`. Rounds toward
/// zero; `None` if a coefficient leaves `i64`.
fn fit(y: [i128; 3], x1: i128, x2: i128, slope_shift: u32, curve_shift: u32) -> Option<Quadratic> {
    let [y0, y1, y2] = y;
    let (d1, d2) = (y1 - y0, y2 - y0);
    // curve = (d1/x1 − d2/x2)/(x1 − x2) = (d1·x2 − d2·x1)/(x1·x2·(x1 − x2)).
    let den = x1.checked_mul(x2)?.checked_mul(x1 - x2)?;
    let curve = d1
        .checked_mul(x2)?
        .checked_sub(d2.checked_mul(x1)?)?
        .checked_shl(slope_shift + curve_shift)?
        .checked_div(den)?;
    // slope = d1/x1 − curve·x1.
    let slope = (d1.checked_shl(slope_shift)? / x1).checked_sub(curve.checked_mul(x1)? >> curve_shift)?;
    Some(Quadratic {
        at_ref: i64::try_from(y0).ok()?,
        slope: i64::try_from(slope).ok()?,
        curve: i64::try_from(curve).ok()?,
    })
}

impl Prepared {
    /// Prepares `stage` for the hot path with ticks of `clock_hz`, for
    /// temperatures over `spread`'s operating range (widened to include its
    /// reference; without a range, the reference temperature only), moving the parts
    /// with `spread`'s temperature coefficients as
    /// [`Spread::at_temperature`] does.
    ///
    /// # Errors
    /// The model's errors at any of the three temperatures (for example
    /// [`Error::NeverActivates`] at a cold corner), [`Error::OutOfDomain`] for
    /// the clock, and with [`Quantity::Temperature`] when a quadratic would
    /// leave its format in the range.
    pub fn prepare(stage: &Stage, spread: &Spread, clock_hz: u32) -> Result<Prepared, Error> {
        check_clock(clock_hz)?;
        let t_ref = spread.ref_mdeg_c;
        let (dom_lo, dom_hi) = limits::TEMP_MDEG_C;
        if !(dom_lo..=dom_hi).contains(&t_ref) {
            return Err(Error::OutOfDomain(Quantity::Temperature));
        }
        let (lo, hi) = spread.temp_mdeg_c.unwrap_or((t_ref, t_ref));
        let (lo, hi) = (lo.min(t_ref).max(dom_lo), hi.max(t_ref).min(dom_hi));
        let point = |t: i32| -> Result<Point, Error> {
            let s = spread.at_temperature(stage, t)?;
            let (start, end, tau_ns) = Model::new(&s)?.discharge_terms()?;
            let tau = mul_div(tau_ns, u128::from(clock_hz), 1_000_000_000).ok_or(Error::Arithmetic)?;
            let q24 = |v: u128| i128::try_from(v >> (32 - V_FRAC)).map_err(|_| Error::Arithmetic);
            Ok(Point { start: q24(start)?, end: q24(end)?, tau })
        };
        let p0 = point(t_ref)?;
        // Three distinct temperatures with the reference among them.
        let (x1, x2) = match (lo < t_ref, hi > t_ref) {
            (true, true) => (lo - t_ref, hi - t_ref),
            (true, false) => (lo - t_ref, (lo - t_ref) / 2),
            (false, true) => ((hi - t_ref) / 2, hi - t_ref),
            (false, false) => (0, 0),
        };
        let flat = |v: i128| Quadratic { at_ref: i64::try_from(v).unwrap_or(i64::MAX), slope: 0, curve: 0 };
        let unit = 1i128 << T_FRAC;
        let (start, end, tau_factor) = if x1 == 0 || x2 == 0 || x1 == x2 {
            (flat(p0.start), flat(p0.end), flat(unit))
        } else {
            let (p1, p2) = (point(t_ref + x1)?, point(t_ref + x2)?);
            let ratio = |p: &Point| -> Result<i128, Error> {
                let r = mul_div(p.tau, unit.unsigned_abs(), p0.tau).ok_or(Error::Arithmetic)?;
                i128::try_from(r).map_err(|_| Error::Arithmetic)
            };
            let bad = Error::OutOfDomain(Quantity::Temperature);
            let (x1, x2) = (i128::from(x1), i128::from(x2));
            (
                fit([p0.start, p1.start, p2.start], x1, x2, super::V_SLOPE_SHIFT, super::V_CURVE_SHIFT).ok_or(bad)?,
                fit([p0.end, p1.end, p2.end], x1, x2, super::V_SLOPE_SHIFT, super::V_CURVE_SHIFT).ok_or(bad)?,
                fit([unit, ratio(&p1)?, ratio(&p2)?], x1, x2, super::T_SLOPE_SHIFT, super::T_CURVE_SHIFT).ok_or(bad)?,
            )
        };
        let tempco = spread.tempco;
        let p = Prepared {
            clock_hz,
            ref_mdeg_c: t_ref,
            temp_lo_mdeg_c: lo,
            temp_hi_mdeg_c: hi,
            tau_ticks: norm_of(p0.tau, 32),
            tau_factor,
            start,
            end,
            c_ff: stage.c_ff,
            c_ppm_per_c: tempco.c_ppm_per_c,
            r_mohm: stage.r_mohm,
            r_ppm_per_c: tempco.r_ppm_per_c,
        };
        p.check().map_err(|_| Error::OutOfDomain(Quantity::Temperature))?;
        Ok(p)
    }
}
