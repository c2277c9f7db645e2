//! Preparing a stage for the hot path with the general solver (feature `solver`).

use super::{Norm, Prepared, Quadratic, FACTOR_FRAC, SHIFT_MAX};
use crate::error::{Error, Quantity};
use crate::fixed::mul_div;
use crate::model::Model;
use crate::stage::{check_clock, limits, Stage};
use crate::window::Spread;

/// Fractional bits of a stored voltage at the reference temperature.
const V_FRAC: u32 = 24;
/// Bits by which the exact slope and curvature are finer than the value
/// while the shifts are chosen (see [`quadratic`]).
const SIGMA_F: u32 = 53;
const KAPPA_F: u32 = 71;

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

/// `n/d · 2^f`, truncated; `None` when it leaves `i128`.
fn ratio_scaled(n: i128, d: i128, f: u32) -> Option<i128> {
    let (n, d) = if d < 0 { (n.checked_neg()?, d.checked_neg()?) } else { (n, d) };
    let unit = 1i128.checked_shl(f)?;
    let (q, r) = (n.checked_div(d)?, n.checked_rem(d)?);
    q.checked_mul(unit)?.checked_add(r.checked_mul(unit)? / d)
}

/// `v · 2^-by` (a left shift for negative `by`), truncated; `None` on overflow.
fn shift(v: i128, by: i32) -> Option<i128> {
    if by >= 0 {
        Some(v >> by.min(127))
    } else {
        v.checked_mul(1i128.checked_shl(by.unsigned_abs())?)
    }
}

fn bit_len(v: i128) -> i32 {
    128 - v.unsigned_abs().leading_zeros() as i32
}

/// The quadratic `y0 + Δ·(σ + κ·Δ)` over `Δ ∈ [lo, hi]`, from the exact
/// `σ·2^53` and `κ·2^71` (in the value's units per m°C and m°C²): shifts
/// chosen so that `σ`, `κ` and `σ + κ·Δ` stay below 2^30 there.
fn quadratic(y0: i128, sigma: i128, kappa: i128, lo: i128, hi: i128) -> Option<Quadratic> {
    // σ + κ·Δ in the σ format, at the range's ends and the reference.
    let inner =
        |d: i128| -> Option<i128> { sigma.checked_add(shift(kappa.checked_mul(d)?, (KAPPA_F - SIGMA_F) as i32)?) };
    let most = [inner(lo)?, sigma, inner(hi)?].iter().map(|v| bit_len(*v)).max().unwrap_or(0);
    let s = (30 + SIGMA_F as i32 - most).clamp(0, i32::from(SHIFT_MAX));
    let c = if kappa == 0 { 0 } else { (30 + KAPPA_F as i32 - bit_len(kappa) - s).clamp(0, i32::from(SHIFT_MAX)) };
    Some(Quadratic {
        at_ref: i64::try_from(y0).ok()?,
        slope: i32::try_from(shift(sigma, SIGMA_F as i32 - s)?).ok()?,
        curve: i32::try_from(shift(kappa, KAPPA_F as i32 - s - c)?).ok()?,
        slope_shift: u8::try_from(s).ok()?,
        curve_shift: u8::try_from(c).ok()?,
    })
}

/// Lagrange through `(0, y0)`, `(x1, y1)`, `(x2, y2)` (`x` in m°C, distinct,
/// non-zero): `κ = (d1·x2 − d2·x1)/(x1·x2·(x1 − x2))`, `σ = d1/x1 − κ·x1`.
fn fit(y: [i128; 3], x1: i128, x2: i128, lo: i128, hi: i128) -> Option<Quadratic> {
    let [y0, y1, y2] = y;
    let (d1, d2) = (y1 - y0, y2 - y0);
    let a = d1.checked_mul(x2)?.checked_sub(d2.checked_mul(x1)?)?;
    let den = x1.checked_mul(x2)?.checked_mul(x1 - x2)?;
    let kappa = ratio_scaled(a, den, KAPPA_F)?;
    let sigma =
        ratio_scaled(d1, x1, SIGMA_F)?.checked_sub(shift(kappa.checked_mul(x1)?, (KAPPA_F - SIGMA_F) as i32)?)?;
    quadratic(y0, sigma, kappa, lo, hi)
}

/// The factor `1 + ppm·Δ/10^6/1000` in Q30, as [`Spread::at_temperature`] moves a part.
fn tempco_factor(ppm_per_c: i32, lo: i128, hi: i128) -> Option<Quadratic> {
    let unit = 1i128 << FACTOR_FRAC;
    let sigma = ratio_scaled(i128::from(ppm_per_c) * unit, 1_000_000_000, SIGMA_F)?;
    quadratic(unit, sigma, 0, lo, hi)
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
        let bad = Error::OutOfDomain(Quantity::Temperature);
        let (dlo, dhi) = (i128::from(lo - t_ref), i128::from(hi - t_ref));
        let unit = 1i128 << FACTOR_FRAC;
        let (start, end, tau_factor) = if x1 == 0 || x2 == 0 || x1 == x2 {
            let flat = |v: i128| i64::try_from(v).map(Quadratic::flat).map_err(|_| Error::Arithmetic);
            (flat(p0.start)?, flat(p0.end)?, Quadratic::flat(1 << FACTOR_FRAC))
        } else {
            let (p1, p2) = (point(t_ref + x1)?, point(t_ref + x2)?);
            let ratio = |p: &Point| -> Result<i128, Error> {
                let r = mul_div(p.tau, unit.unsigned_abs(), p0.tau).ok_or(Error::Arithmetic)?;
                i128::try_from(r).map_err(|_| Error::Arithmetic)
            };
            let (x1, x2) = (i128::from(x1), i128::from(x2));
            (
                fit([p0.start, p1.start, p2.start], x1, x2, dlo, dhi).ok_or(bad)?,
                fit([p0.end, p1.end, p2.end], x1, x2, dlo, dhi).ok_or(bad)?,
                fit([unit, ratio(&p1)?, ratio(&p2)?], x1, x2, dlo, dhi).ok_or(bad)?,
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
            c_factor: tempco_factor(tempco.c_ppm_per_c, dlo, dhi).ok_or(bad)?,
            r_factor: tempco_factor(tempco.r_ppm_per_c, dlo, dhi).ok_or(bad)?,
            c_ff: stage.c_ff,
            r_mohm: stage.r_mohm,
            hold_ref: Norm::ZERO,
        };
        p.finish().map_err(|_| bad)
    }
}
