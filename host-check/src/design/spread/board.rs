//! One board of a spread: its draw (factors on the nominal values,
//! thresholds inside their bands, a temperature), the stage it rounds to,
//! and whether every board a spread can draw lies inside the model's domain.

use crate::stage::values::{round_u32, round_u64};
use rand::Rng;
use rc_model::window::{Spread, ThresholdSpread, Tolerance};
use rc_model::{Diode, Stage};

use super::Dist;

/// A uniform draw in [0, 1) from the top 53 bits of the generator's output.
#[inline]
fn unit<R: Rng>(rng: &mut R) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / 9_007_199_254_740_992.0)
}

fn draw_factor<R: Rng>(rng: &mut R, t: Tolerance, dist: Dist) -> f64 {
    let (lo, hi) = (-f64::from(t.minus_ppm) * 1e-6, f64::from(t.plus_ppm) * 1e-6);
    if lo == 0.0 && hi == 0.0 {
        return 1.0;
    }
    let x = match dist {
        Dist::Uniform => lo + (hi - lo) * unit(rng),
        Dist::Normal { k_sigma } => {
            // Box–Muller; the half-width of the side drawn sets σ.
            let u1 = 1.0 - unit(rng); // (0, 1]
            let z = crate::report::stats::box_muller(u1, unit(rng));
            let half = if z < 0.0 { -lo } else { hi };
            (z * half / k_sigma).clamp(lo, hi)
        }
        Dist::Truncated { k_sigma } => {
            let z = super::truncated_normal(unit(rng), k_sigma);
            let half = if z < 0.0 { -lo } else { hi };
            (z * half / k_sigma).clamp(lo, hi)
        }
    };
    1.0 + x
}

/// A board as drawn: factors on the nominal values, the thresholds drawn
/// inside their bands (µV, before scaling with the supply) and the
/// temperature (m°C). Neither rounded to the stage's units nor checked.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Factors {
    pub(super) r: f64,
    pub(super) c: f64,
    pub(super) vdd: f64,
    pub(super) driver: f64,
    pub(super) diode: f64,
    /// Rising threshold, µV at nominal supply (`None`: the stage's own).
    pub(super) rise_uv: Option<f64>,
    /// Falling threshold, µV at nominal supply (`None`: the stage's own).
    pub(super) fall_uv: Option<f64>,
    pub(super) temp_mdeg_c: Option<i32>,
}

/// How many σ of a plain input's switching-point population fit between
/// its typical point and the nearer end of its band. A plain CMOS input
/// switches near its typical point (half the supply for the presets); the
/// family's VIL/VIH band is a guarantee over process, supply and
/// temperature, not the spread of parts (from memory: switching points
/// cluster within about a tenth of the supply of half of it). So the Monte
/// Carlo draws a normal around the typical point with σ a quarter of that
/// distance, cut at the band, and the nominal is the population's centre;
/// the band's ends stay in the worst case.
pub const PLAIN_SIGMAS: f64 = 4.0;

/// A plain input's switching point for one board, µV: the typical point
/// `typ_uv` plus a normal draw of σ = (distance to the nearer band end) /
/// [`PLAIN_SIGMAS`], cut there.
pub(super) fn plain_point(typ_uv: u32, band: (u32, u32)) -> (f64, f64) {
    let (lo, hi) = (f64::from(band.0), f64::from(band.1));
    let typ = f64::from(typ_uv).clamp(lo, hi);
    (typ, (typ - lo).min(hi - typ))
}

fn draw_band<R: Rng>(rng: &mut R, band: (u32, u32), dist: Dist) -> f64 {
    let (lo, hi) = (f64::from(band.0), f64::from(band.1));
    let mid = 0.5 * (lo + hi);
    let half = 0.5 * (hi - lo);
    let f = draw_factor(rng, Tolerance::symmetric(1_000_000), dist) - 1.0;
    mid + f * half
}

/// Draws one board, always in the same order: R, C, Vdd, driver, diode,
/// thresholds (rising, then falling; a plain input's one point around its
/// typical `plain_typ_uv`, see [`PLAIN_SIGMAS`]), temperature. A parameter
/// that does not move takes no draw.
pub(super) fn draw_factors<R: Rng>(rng: &mut R, spread: &Spread, dist: Dist, plain_typ_uv: u32) -> Factors {
    let r = draw_factor(rng, spread.r, dist);
    let c = draw_factor(rng, spread.c, dist);
    let vdd = draw_factor(rng, spread.vdd, dist);
    let driver = draw_factor(rng, spread.driver, dist);
    let diode = draw_factor(rng, spread.diode, dist);
    let (rise_uv, fall_uv) = match spread.thresholds {
        None => (None, None),
        Some(ThresholdSpread::Single { min_uv, max_uv }) => {
            let (typ, reach) = plain_point(plain_typ_uv, (min_uv, max_uv));
            let f = draw_factor(rng, Tolerance::symmetric(1_000_000), Dist::Normal { k_sigma: PLAIN_SIGMAS }) - 1.0;
            let v = typ + f * reach;
            (Some(v), Some(v))
        }
        Some(ThresholdSpread::Schmitt { rise_uv, fall_uv }) => {
            let a = draw_band(rng, rise_uv, dist);
            (Some(a), Some(draw_band(rng, fall_uv, dist)))
        }
    };
    let temp_mdeg_c = spread.temp_mdeg_c.map(|(lo, hi)| rng.random_range(lo..=hi));
    Factors { r, c, vdd, driver, diode, rise_uv, fall_uv, temp_mdeg_c }
}

/// The drawn board as a stage, rounded to the stage's units, before the
/// temperature is applied.
fn stage_at_reference(nominal: &Stage, f: &Factors) -> Stage {
    let mut s = *nominal;
    s.r_mohm = round_u64(s.r_mohm as f64 * f.r);
    s.c_ff = round_u64(s.c_ff as f64 * f.c);
    s.vdd_uv = round_u32(f64::from(s.vdd_uv) * f.vdd);
    s.driver_mohm = round_u64(s.driver_mohm as f64 * f.driver);
    s.diode = match s.diode {
        Diode::Drop { drop_uv } => Diode::Drop { drop_uv: round_u32(f64::from(drop_uv) * f.diode) },
        Diode::Junction { is_fa, n_milli, rs_mohm } => {
            Diode::Junction { is_fa: ((is_fa as f64) * f.diode).round().max(1.0) as u64, n_milli, rs_mohm }
        }
    };
    // Thresholds are fractions of the supply: bands and the stage's own scale with it.
    let scale = |v: u32| round_u32(f64::from(v) * f.vdd);
    match (f.rise_uv, f.fall_uv) {
        (Some(rise), Some(fall)) => {
            s.rise_uv = scale(round_u32(rise));
            s.fall_uv = scale(round_u32(fall)).min(s.rise_uv);
        }
        _ => {
            s.rise_uv = scale(s.rise_uv);
            s.fall_uv = scale(s.fall_uv);
        }
    }
    s
}

/// The drawn board as a stage. A temperature whose coefficients cannot be
/// applied (a value driven through zero) leaves the board at the reference.
pub(super) fn stage_from(nominal: &Stage, spread: &Spread, f: &Factors) -> Stage {
    let s = stage_at_reference(nominal, f);
    match f.temp_mdeg_c {
        Some(t) => spread.at_temperature(&s, t).unwrap_or(s),
        None => s,
    }
}

/// Whether every board the spread can draw lies inside the model's domain.
/// Each domain limit (ranges of R, C, Vdd, drop, temperature; drop below
/// Vdd; thresholds a fraction of Vdd; fall at most rise, which the draw
/// enforces) is linear in each drawn value while the others stay fixed, and
/// rounding to the stage's units keeps the order of values; such a limit is
/// furthest from met at a corner of the box of draws, so every board is
/// inside when every corner is. Uniform and clipped normal draws both stay
/// inside the box.
pub(super) fn every_board_in_domain(nominal: &Stage, spread: &Spread) -> bool {
    let ends = |t: Tolerance| [1.0 - f64::from(t.minus_ppm) * 1e-6, 1.0 + f64::from(t.plus_ppm) * 1e-6];
    let band = |b: (u32, u32)| [f64::from(b.0), f64::from(b.1)];
    let (rises, falls): ([Option<f64>; 2], [Option<f64>; 2]) = match spread.thresholds {
        None => ([None; 2], [None; 2]),
        Some(ThresholdSpread::Single { min_uv, max_uv }) => {
            let [a, b] = band((min_uv, max_uv));
            ([Some(a), Some(b)], [Some(a), Some(b)])
        }
        Some(ThresholdSpread::Schmitt { rise_uv, fall_uv }) => {
            let ([a, b], [c, d]) = (band(rise_uv), band(fall_uv));
            ([Some(a), Some(b)], [Some(c), Some(d)])
        }
    };
    let temps = spread.temp_mdeg_c.map_or([None; 2], |(lo, hi)| [Some(lo), Some(hi)]);
    let single = matches!(spread.thresholds, Some(ThresholdSpread::Single { .. }));
    for corner in 0u32..256 {
        let side = |bit: u32| usize::from(corner & (1 << bit) != 0);
        let pick = |pair: [f64; 2], bit: u32| pair.get(side(bit)).copied().unwrap_or(1.0);
        let rise_uv = rises.get(side(5)).copied().flatten();
        // A single switching point moves rise and fall together.
        let fall_uv = if single { rise_uv } else { falls.get(side(6)).copied().flatten() };
        let f = Factors {
            r: pick(ends(spread.r), 0),
            c: pick(ends(spread.c), 1),
            vdd: pick(ends(spread.vdd), 2),
            driver: pick(ends(spread.driver), 3),
            diode: pick(ends(spread.diode), 4),
            rise_uv,
            fall_uv,
            temp_mdeg_c: temps.get(side(7)).copied().flatten(),
        };
        let s = stage_at_reference(nominal, &f);
        let s = match f.temp_mdeg_c {
            Some(t) => match spread.at_temperature(&s, t) {
                Ok(s) => s,
                Err(_) => return false,
            },
            None => s,
        };
        if s.check().is_err() {
            return false;
        }
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rounding_halves_up() {
        assert_eq!(round_u64(2.5), 3);
        assert_eq!(round_u64(2.499_999), 2);
        assert_eq!(round_u32(0.0), 0);
    }
}
