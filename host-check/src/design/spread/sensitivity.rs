//! Which part drives the spread: each parameter's share of the hold's
//! variance and its elasticity.
//!
//! First order, from the model: each parameter is moved alone to both ends
//! of its range (the one-at-a-time corners of `Spread::at_corner`); half the
//! change of the hold, over √3 for a uniform draw or over k for a normal one
//! at k σ, is its standard deviation `σᵢ`, and its share of the variance is
//! `σᵢ² / Σσⱼ²` (the shares sum to 1 by construction; the root of the sum is
//! the root-sum-square). The elasticity is the relative change of the hold
//! over the relative change of the parameter between its two ends (%/%), for
//! the parameters whose tolerance is relative.
//!
//! Check, by the Monte Carlo: the variance lost when one parameter is frozen
//! at nominal, over the full variance, is that parameter's share seen by
//! the simulated boards (interactions and curvature included).

use rc_model::window::{Corner, Param, Spread, ThresholdSpread, Tolerance, PARAMS};
use rc_model::{Model, Stage};
use serde::Serialize;

use super::{monte_carlo_with, Dist, Eval};
use crate::fmt::secs;

/// One parameter's part in the spread.
#[derive(Debug, Clone, Serialize)]
pub struct Share {
    /// The parameter (`r`, `c`, `vdd`, `diode`, `driver`, `rise`, `fall`, `temp`, `age`).
    pub param: &'static str,
    /// Hold with the parameter at its low end, s.
    pub low_s: f64,
    /// Hold with the parameter at its high end, s.
    pub high_s: f64,
    /// Its standard deviation of the hold, s.
    pub sigma_s: f64,
    /// Its first-order share of the variance, 0 … 1.
    pub share: f64,
    /// Relative change of the hold per relative change of the parameter
    /// (%/%), where the parameter's tolerance is relative.
    pub elasticity: Option<f64>,
    /// Its share as the Monte Carlo sees it: the variance lost when it is
    /// frozen, over the full variance (when checked).
    pub frozen_share: Option<f64>,
}

fn hold_at(nominal: &Stage, spread: &Spread, corner: Corner) -> Result<f64, rc_model::Error> {
    let s = spread.at_corner(nominal, corner)?;
    Model::new(&s).and_then(|m| m.evaluate()).map(|e| secs(e.hold))
}

fn tolerance(spread: &Spread, p: Param) -> Option<Tolerance> {
    match p {
        Param::R => Some(spread.r),
        Param::C => Some(spread.c),
        Param::Vdd => Some(spread.vdd),
        Param::Diode => Some(spread.diode),
        Param::Driver => Some(spread.driver),
        _ => None,
    }
}

/// The first-order shares of every moving parameter, largest first.
///
/// # Errors
/// The model's error at the first one-at-a-time corner it cannot evaluate.
pub fn first_order(nominal: &Stage, spread: &Spread, dist: Dist) -> Result<Vec<Share>, rc_model::Error> {
    let h0 = Model::new(nominal).and_then(|m| m.evaluate()).map(|e| secs(e.hold))?;
    let active = spread.active();
    let mut out = Vec::new();
    for (bit, p) in PARAMS.into_iter().enumerate() {
        let mask = 1u16 << bit;
        if active & mask == 0 {
            continue;
        }
        // A plain input's switching point is a population around its typical
        // point (σ a quarter of the way to the nearer band end), whatever `dist`.
        let (sp, plain) = match spread.thresholds {
            Some(ThresholdSpread::Single { min_uv, max_uv }) if p == Param::Rise => {
                let (typ, reach) = super::board::plain_point(nominal.rise_uv, (min_uv, max_uv));
                let band = ((typ - reach).round() as u32, (typ + reach).round() as u32);
                (
                    Spread { thresholds: Some(ThresholdSpread::Single { min_uv: band.0, max_uv: band.1 }), ..*spread },
                    true,
                )
            }
            _ => (*spread, false),
        };
        let low_s = hold_at(nominal, &sp, Corner { high: 0, active: mask })?;
        let high_s = hold_at(nominal, &sp, Corner { high: mask, active: mask })?;
        let half = 0.5 * (high_s - low_s).abs();
        let sigma_s = match dist {
            _ if plain => half / super::board::PLAIN_SIGMAS,
            Dist::Uniform => half / 3f64.sqrt(),
            Dist::Normal { k_sigma } => half / k_sigma,
            Dist::Truncated { k_sigma } => half / k_sigma * super::truncated_sd(k_sigma),
        };
        let elasticity = tolerance(spread, p).and_then(|t| {
            let span = (f64::from(t.minus_ppm) + f64::from(t.plus_ppm)) * 1e-6;
            (span > 0.0 && h0 > 0.0).then(|| (high_s - low_s) / h0 / span)
        });
        out.push(Share { param: p.name(), low_s, high_s, sigma_s, share: 0.0, elasticity, frozen_share: None });
    }
    let total: f64 = out.iter().map(|s| s.sigma_s * s.sigma_s).sum();
    for s in &mut out {
        s.share = if total > 0.0 { s.sigma_s * s.sigma_s / total } else { 0.0 };
    }
    out.sort_by(|a, b| b.share.total_cmp(&a.share));
    Ok(out)
}

/// The spread with one parameter held at nominal.
#[must_use]
pub fn frozen(nominal: &Stage, spread: &Spread, p: Param) -> Spread {
    let mut s = *spread;
    let none = Tolerance::symmetric(0);
    match p {
        Param::R => s.r = none,
        Param::C => s.c = none,
        Param::Vdd => s.vdd = none,
        Param::Diode => s.diode = none,
        Param::Driver => s.driver = none,
        Param::Rise | Param::Fall => {
            let (rise, fall) = (nominal.rise_uv, nominal.fall_uv);
            s.thresholds = s.thresholds.map(|t| match (t, p) {
                (ThresholdSpread::Single { .. }, _) => ThresholdSpread::Single { min_uv: rise, max_uv: rise },
                (ThresholdSpread::Schmitt { fall_uv, .. }, Param::Rise) => {
                    ThresholdSpread::Schmitt { rise_uv: (rise, rise), fall_uv }
                }
                (ThresholdSpread::Schmitt { rise_uv, .. }, _) => {
                    ThresholdSpread::Schmitt { rise_uv, fall_uv: (fall, fall) }
                }
            });
        }
        Param::Temp => s.temp_mdeg_c = None,
        Param::Age => s.aging = None,
    }
    s
}

/// The Monte Carlo error of a frozen share, as a fraction of the variance:
/// two standard errors of the difference of two variances estimated from
/// `samples` boards each (√(2/n) each, for a near-normal hold).
#[must_use]
pub fn freezing_error(samples: usize) -> f64 {
    2.0 * (4.0 / samples.max(1) as f64).sqrt()
}

/// Checks the shares by the Monte Carlo: `samples` boards with everything
/// moving, then with each parameter frozen in turn (the same seed), filling
/// [`Share::frozen_share`]; each is good to about [`freezing_error`].
pub fn check_by_freezing(
    nominal: &Stage,
    spread: &Spread,
    dist: Dist,
    samples: usize,
    seed: u64,
    shares: &mut [Share],
) {
    let var = |s: &Spread| {
        let m = monte_carlo_with(nominal, s, dist, samples, seed, Eval::Fast, &|_, _| {});
        m.sd_s * m.sd_s
    };
    let all = var(spread);
    for sh in shares.iter_mut() {
        if let Some(p) = PARAMS.into_iter().find(|p| p.name() == sh.param) {
            let without = var(&frozen(nominal, spread, p));
            sh.frozen_share = (all > 0.0).then(|| (all - without) / all);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shares_sum_to_one_and_the_hold_is_proportional_to_c() {
        let sf = crate::testing::example();
        let shares = first_order(&sf.stage, &sf.spread, Dist::Uniform).unwrap_or_default();
        let sum: f64 = shares.iter().map(|s| s.share).sum();
        assert!((sum - 1.0).abs() < 1e-12, "{sum}");
        assert!(shares.windows(2).all(|w| w.first().map(|a| a.share) >= w.get(1).map(|b| b.share)));
        // The hold is proportional to C (t = RC·ln(V0/Vth)): elasticity 1 (math).
        let e = shares.iter().find(|s| s.param == "c").and_then(|s| s.elasticity).unwrap_or(0.0);
        assert!((e - 1.0).abs() < 1e-3, "{e}");
        let frozen = frozen(&sf.stage, &sf.spread, Param::C);
        assert_eq!(frozen.active() & 0b10, 0);
    }

    #[test]
    fn the_monte_carlo_sees_the_same_shares() {
        let sf = crate::testing::example();
        let mut shares = first_order(&sf.stage, &sf.spread, Dist::Uniform).unwrap_or_default();
        let n = 400_000;
        check_by_freezing(&sf.stage, &sf.spread, Dist::Uniform, n, 11, &mut shares);
        let err = freezing_error(n);
        let sum: f64 = shares.iter().filter_map(|s| s.frozen_share).sum();
        assert!((sum - 1.0).abs() < err * (shares.len() as f64).sqrt() + 0.02, "frozen shares sum to {sum}");
        for s in &shares {
            let f = s.frozen_share.unwrap_or(f64::NAN);
            assert!((f - s.share).abs() < err + 0.02, "{}: first order {} against {f}", s.param, s.share);
        }
    }
}
