//! `rchold spread`: how the hold spreads over the parts' tolerances —
//! worst case over every corner, root-sum-square, and Monte Carlo with
//! percentiles and process capability against a specification window.
//!
//! Monte Carlo draws every toleranced parameter independently: uniformly
//! within its tolerance, or normally with the tolerance at `k_sigma`
//! standard deviations (clipped to the tolerance). Thresholds are drawn
//! inside their bands, temperature uniformly over the file's range.
//!
//! The boards come in blocks of [`BLOCK`]: block `b` is drawn column by
//! column (all its R factors, then all its C factors, …) by four
//! xoshiro256++ generators seeded from (seed, `b`), so a run is reproducible
//! whatever the number of threads, and both models see the same boards.
//! [`Eval::Exact`] evaluates each board with the fixed-point model.
//! [`Eval::Fast`] evaluates the model's closed form in `f64` four boards at
//! a time in vector registers, when the diode is a fixed drop and every
//! corner of the spread lies inside the model's domain (then every board
//! does); otherwise the `f32` backend board by board. Each block's sums and
//! histogram are taken while it is hot; the percentiles are exact order
//! statistics found from the histogram without sorting the holds.

use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use rayon::prelude::*;
use rc_model::window::{Aging, Spread, ThresholdSpread, Tolerance, Window};
use rc_model::{Diode, Model, Stage};
use serde::Serialize;

use crate::eval::secs;
use crate::lanes::{Lanes, LANES};
use crate::stats::{self, Capability};
use wide::f64x4;

/// How each tolerance is read.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Dist {
    /// Uniform over the tolerance.
    Uniform,
    /// Normal with the tolerance at `k_sigma` standard deviations, clipped there.
    Normal {
        /// How many σ the tolerance spans.
        k_sigma: f64,
    },
}

/// Monte Carlo result.
#[derive(Debug, Clone, Serialize)]
pub struct Monte {
    /// Samples drawn.
    pub samples: usize,
    /// Samples the model refused (the stage does not work there).
    pub refused: usize,
    /// Mean hold, s.
    pub mean_s: f64,
    /// Sample standard deviation, s.
    pub sd_s: f64,
    /// Shortest and longest hold, s.
    pub min_s: f64,
    /// Longest hold, s.
    pub max_s: f64,
    /// (percent, hold in s) for 0.135, 1, 5, 50, 95, 99, 99.865 %.
    pub percentiles: Vec<(f64, f64)>,
    /// The holds in sample order, refused samples left out (kept for plots and tests; not serialised).
    #[serde(skip)]
    pub holds: Vec<f64>,
}

/// A uniform draw in [0, 1) from the top 53 bits of the generator's output.
#[inline]
fn unit<R: Rng>(rng: &mut R) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / 9_007_199_254_740_992.0)
}

/// `x` rounded to the nearest whole number, halves up, for `x ≥ 0` (a cast,
/// where `f64::round` is a library call on the baseline x86-64 target).
#[inline]
fn round_u64(x: f64) -> u64 {
    (x + 0.5) as u64
}

/// As [`round_u64`].
#[inline]
fn round_u32(x: f64) -> u32 {
    (x + 0.5) as u32
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
            let u2 = unit(rng);
            let z = (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos();
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
struct Factors {
    r: f64,
    c: f64,
    vdd: f64,
    driver: f64,
    diode: f64,
    /// Rising threshold, µV at nominal supply (`None`: the stage's own).
    rise_uv: Option<f64>,
    /// Falling threshold, µV at nominal supply (`None`: the stage's own).
    fall_uv: Option<f64>,
    temp_mdeg_c: Option<i32>,
}

fn draw_band<R: Rng>(rng: &mut R, band: (u32, u32), dist: Dist) -> f64 {
    let (lo, hi) = (f64::from(band.0), f64::from(band.1));
    let mid = 0.5 * (lo + hi);
    let half = 0.5 * (hi - lo);
    let f = draw_factor(rng, Tolerance::symmetric(1_000_000), dist) - 1.0;
    mid + f * half
}

/// Draws one board, always in the same order: R, C, Vdd, driver, diode,
/// thresholds (rising, then falling), temperature. A parameter that does
/// not move takes no draw.
fn draw_factors<R: Rng>(rng: &mut R, spread: &Spread, dist: Dist) -> Factors {
    let r = draw_factor(rng, spread.r, dist);
    let c = draw_factor(rng, spread.c, dist);
    let vdd = draw_factor(rng, spread.vdd, dist);
    let driver = draw_factor(rng, spread.driver, dist);
    let diode = draw_factor(rng, spread.diode, dist);
    let (rise_uv, fall_uv) = match spread.thresholds {
        None => (None, None),
        Some(ThresholdSpread::Single { min_uv, max_uv }) => {
            let v = draw_band(rng, (min_uv, max_uv), dist);
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
fn stage_from(nominal: &Stage, spread: &Spread, f: &Factors) -> Stage {
    let s = stage_at_reference(nominal, f);
    match f.temp_mdeg_c {
        Some(t) => spread.at_temperature(&s, t).unwrap_or(s),
        None => s,
    }
}

/// One random board, from its own generator seeded from (`seed`, `index`).
#[must_use]
pub fn draw(nominal: &Stage, spread: &Spread, dist: Dist, seed: u64, index: u64) -> Stage {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed ^ index.wrapping_mul(0x9E37_79B9_7F4A_7C15));
    stage_from(nominal, spread, &draw_factors(&mut rng, spread, dist))
}

/// Hold of one board by the fixed-point model, s (`None` where it refuses).
#[must_use]
pub fn hold_s(s: &Stage) -> Option<f64> {
    Model::new(s).and_then(|m| m.evaluate()).ok().map(|e| secs(e.hold))
}

/// Which model evaluates the Monte Carlo samples.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Eval {
    /// The fixed-point model, every path (as the firmware computes it).
    Exact,
    /// The closed form in `f64` on the drawn values (fixed-drop diode, every
    /// corner of the spread inside the model's domain), else the `f32`
    /// backend board by board: within 1e-4 of the fixed-point model on every
    /// sample, far below Monte Carlo error, and many times faster.
    Fast,
}

/// The nominal stage and the spread's coefficients in SI units (Ω, F, V, A,
/// s) for [`plain_hold`].
#[derive(Debug, Clone, Copy)]
struct Plain {
    r: f64,
    c: f64,
    vdd: f64,
    driver: f64,
    charge: f64,
    series: f64,
    leak_r: Option<f64>,
    leak_i: f64,
    drop: f64,
    rise: f64,
    fall: f64,
    press: f64,
    ref_mdeg_c: i32,
    /// R and C coefficients, per m°C.
    tc_r: f64,
    tc_c: f64,
    /// Drop coefficient, V per m°C.
    tc_drop: f64,
    /// Threshold coefficient, fraction of the supply per m°C.
    tc_threshold: f64,
}

impl Plain {
    fn new(s: &Stage, spread: &Spread) -> Option<Plain> {
        let Diode::Drop { drop_uv } = s.diode else { return None };
        let tc = spread.tempco;
        Some(Plain {
            r: s.r_mohm as f64 * 1e-3,
            c: s.c_ff as f64 * 1e-15,
            vdd: f64::from(s.vdd_uv) * 1e-6,
            driver: s.driver_mohm as f64 * 1e-3,
            charge: s.charge_mohm as f64 * 1e-3,
            series: s.series_mohm as f64 * 1e-3,
            leak_r: s.leak_mohm.map(|l| l as f64 * 1e-3),
            leak_i: s.leak_fa as f64 * 1e-15,
            drop: f64::from(drop_uv) * 1e-6,
            rise: f64::from(s.rise_uv) * 1e-6,
            fall: f64::from(s.fall_uv) * 1e-6,
            press: s.press_ns as f64 * 1e-9,
            ref_mdeg_c: spread.ref_mdeg_c,
            tc_r: f64::from(tc.r_ppm_per_c) * 1e-9,
            tc_c: f64::from(tc.c_ppm_per_c) * 1e-9,
            tc_drop: f64::from(tc.drop_uv_per_c) * 1e-9,
            tc_threshold: f64::from(tc.threshold_ppm_per_c) * 1e-9,
        })
    }
}

/// The hold of a drawn board with a fixed-drop diode, s, or NaN where the
/// model refuses it (never activates, press shorter than the turn-on
/// latency, no hold, hold outside 1 µs to 24 h). The same closed form as the
/// model's (charge to V∞ through the Thévenin resistance, discharge through
/// R‖R_leak plus the series resistor against the leakage current), on the
/// drawn values in `f64` without rounding them to the stage's units.
fn plain_hold(p: &Plain, f: &Factors) -> f64 {
    let k = f.vdd;
    let vdd = p.vdd * k;
    let (mut rise, mut fall) = match (f.rise_uv, f.fall_uv) {
        (Some(a), Some(b)) => (a * 1e-6 * k, b * 1e-6 * k),
        _ => (p.rise * k, p.fall * k),
    };
    fall = fall.min(rise);
    let (mut r, mut c, mut drop) = (p.r * f.r, p.c * f.c, p.drop * f.diode);
    if let Some(t) = f.temp_mdeg_c {
        let d = f64::from(t) - f64::from(p.ref_mdeg_c);
        r *= 1.0 + p.tc_r * d;
        c *= 1.0 + p.tc_c * d;
        drop += p.tc_drop * d;
        let shift = p.tc_threshold * d * vdd;
        rise += shift;
        fall += shift;
    }
    let r_eff = match p.leak_r {
        None => r,
        Some(l) => r * l / (r + l),
    };
    let r_ser = p.driver * f.driver + p.charge;
    let v_inf = ((vdd - drop - p.leak_i * r_ser) * r_eff / (r_eff + r_ser)).max(0.0);
    if v_inf <= rise {
        return f64::NAN;
    }
    // Charge: τc = C·(Rs + R_ser‖R_eff). A press longer than 40 τc is full
    // (then the turn-on latency is certainly shorter than the press);
    // compared without dividing: press·(R_ser + R_eff) > 40·C·(Rs·(R_ser + R_eff) + R_ser·R_eff).
    let sum = r_ser + r_eff;
    let vc0 = if p.press * sum > 40.0 * c * (p.series * sum + r_ser * r_eff) {
        v_inf
    } else {
        let r_th = if r_ser == 0.0 { 0.0 } else { r_ser * r_eff / sum };
        let tau = c * (p.series + r_th);
        if tau == 0.0 {
            v_inf
        } else {
            let latency = if r_th == 0.0 {
                0.0
            } else {
                let vc1 = v_inf - (v_inf - rise) * (p.series + r_th) / r_th;
                if vc1 <= 0.0 {
                    0.0
                } else {
                    tau * (v_inf / (v_inf - vc1)).ln()
                }
            };
            if latency > p.press {
                return f64::NAN;
            }
            -v_inf * (-p.press / tau).exp_m1()
        }
    };
    // Discharge from vc0 towards −R_eff·I_leak; the output turns off when the
    // node, R_eff/(R_eff + Rs) of the capacitor voltage, reaches the falling threshold.
    let lk = r_eff * p.leak_i;
    let r_d = r_eff + p.series;
    let (start, end) = ((vc0 + lk) * r_eff, (fall + lk) * r_d);
    if start <= end {
        return f64::NAN;
    }
    let hold = r_d * c * (start / end).ln();
    if (1e-6..=86_400.0).contains(&hold) {
        hold
    } else {
        f64::NAN
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
fn every_board_in_domain(nominal: &Stage, spread: &Spread) -> bool {
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

/// How one Monte Carlo run evaluates its boards.
#[derive(Debug, Clone, Copy)]
enum Plan {
    Exact,
    Float,
    Plain(Plain),
}

fn plan(nominal: &Stage, spread: &Spread, how: Eval) -> Plan {
    match how {
        Eval::Exact => Plan::Exact,
        Eval::Fast => match Plain::new(nominal, spread) {
            Some(p) if every_board_in_domain(nominal, spread) => Plan::Plain(p),
            _ => Plan::Float,
        },
    }
}

/// Samples per block. Block `b` draws its boards from four generators
/// seeded from (seed, `b`, lane), so a run is reproducible whatever the
/// number of threads.
pub const BLOCK: usize = 2_048;

/// One block of boards, drawn column by column in the order R, C, Vdd,
/// driver, diode, rising threshold, falling threshold, temperature (a
/// parameter that does not move takes no draws), four boards to a vector:
/// factors on R, C, Vdd, the driver and the diode; thresholds in µV at
/// nominal supply (the stage's own when the spread has no bands);
/// temperature in m°C (the reference when the spread has no range).
#[derive(Debug, Default)]
struct Columns {
    r: Vec<f64x4>,
    c: Vec<f64x4>,
    vdd: Vec<f64x4>,
    driver: Vec<f64x4>,
    diode: Vec<f64x4>,
    rise_uv: Vec<f64x4>,
    fall_uv: Vec<f64x4>,
    temp_mdeg_c: Vec<f64x4>,
}

/// Fills `col` with draws in [`lo`, `hi`]: uniform, or normal (Box–Muller)
/// with the half-width of the side drawn at `k_sigma` σ, clipped (as
/// [`draw_factor`] draws one).
fn fill(lanes: &mut Lanes, dist: Dist, lo: f64, hi: f64, col: &mut [f64x4]) {
    let (lo4, hi4) = (f64x4::splat(lo), f64x4::splat(hi));
    match dist {
        Dist::Uniform => {
            let width = f64x4::splat(hi - lo);
            for x in col {
                *x = lo4 + width * lanes.next_unit();
            }
        }
        Dist::Normal { k_sigma } => {
            let (below, above) = (f64x4::splat(-lo / k_sigma), f64x4::splat(hi / k_sigma));
            // Both normals of each Box–Muller pair: the cosine one, then the sine one.
            for pair in col.chunks_mut(2) {
                let (u1, u2) = (lanes.next_unit(), lanes.next_unit());
                let radius = (f64x4::splat(-2.0) * (f64x4::ONE - u1).ln()).sqrt();
                let (sin, cos) = (f64x4::splat(std::f64::consts::TAU) * u2).sin_cos();
                for (x, z) in pair.iter_mut().zip([radius * cos, radius * sin]) {
                    *x = (z * z.simd_lt(f64x4::ZERO).select(below, above)).max(lo4).min(hi4);
                }
            }
        }
    }
}

impl Columns {
    fn draw(&mut self, nominal: &Stage, spread: &Spread, dist: Dist, seed: u64, block: usize, n: usize) {
        let mut seeds = [0u64; LANES];
        for (l, s) in seeds.iter_mut().enumerate() {
            *s = seed.rotate_left(29)
                ^ 0x6A09_E667_F3BC_C909
                ^ ((block * LANES + l) as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
        }
        let mut lanes = Lanes::from_seeds(seeds);
        let vectors = n.div_ceil(LANES);
        for col in [
            &mut self.r,
            &mut self.c,
            &mut self.vdd,
            &mut self.driver,
            &mut self.diode,
            &mut self.rise_uv,
            &mut self.fall_uv,
            &mut self.temp_mdeg_c,
        ] {
            col.resize(vectors, f64x4::ZERO);
        }
        let factor = |lanes: &mut Lanes, t: Tolerance, col: &mut [f64x4]| {
            if t.minus_ppm == 0 && t.plus_ppm == 0 {
                col.fill(f64x4::ONE);
            } else {
                fill(lanes, dist, -f64::from(t.minus_ppm) * 1e-6, f64::from(t.plus_ppm) * 1e-6, col);
                col.iter_mut().for_each(|x| *x += f64x4::ONE);
            }
        };
        factor(&mut lanes, spread.r, &mut self.r);
        factor(&mut lanes, spread.c, &mut self.c);
        factor(&mut lanes, spread.vdd, &mut self.vdd);
        factor(&mut lanes, spread.driver, &mut self.driver);
        factor(&mut lanes, spread.diode, &mut self.diode);
        let band = |lanes: &mut Lanes, (lo, hi): (u32, u32), col: &mut [f64x4]| {
            let mid = f64x4::splat(0.5 * (f64::from(lo) + f64::from(hi)));
            let half = f64x4::splat(0.5 * (f64::from(hi) - f64::from(lo)));
            fill(lanes, dist, -1.0, 1.0, col);
            col.iter_mut().for_each(|x| *x = mid + *x * half);
        };
        match spread.thresholds {
            None => {
                self.rise_uv.fill(f64x4::splat(f64::from(nominal.rise_uv)));
                self.fall_uv.fill(f64x4::splat(f64::from(nominal.fall_uv)));
            }
            Some(ThresholdSpread::Single { min_uv, max_uv }) => {
                band(&mut lanes, (min_uv, max_uv), &mut self.rise_uv);
                self.fall_uv.copy_from_slice(&self.rise_uv);
            }
            Some(ThresholdSpread::Schmitt { rise_uv, fall_uv }) => {
                band(&mut lanes, rise_uv, &mut self.rise_uv);
                band(&mut lanes, fall_uv, &mut self.fall_uv);
            }
        }
        match spread.temp_mdeg_c {
            None => self.temp_mdeg_c.fill(f64x4::splat(f64::from(spread.ref_mdeg_c))),
            Some((lo, hi)) => {
                // Whole m°C, uniform over lo..=hi.
                let span = f64x4::splat((i64::from(hi) - i64::from(lo) + 1) as f64);
                let (lo, hi) = (f64x4::splat(f64::from(lo)), f64x4::splat(f64::from(hi)));
                fill(&mut lanes, Dist::Uniform, 0.0, 1.0, &mut self.temp_mdeg_c);
                self.temp_mdeg_c.iter_mut().for_each(|x| *x = (lo + (*x * span).trunc()).min(hi));
            }
        }
    }

    /// Board `i` of the block.
    fn factors(&self, spread: &Spread, i: usize) -> Factors {
        let at = |col: &Vec<f64x4>| {
            col.get(i / LANES).and_then(|v| v.as_array().get(i % LANES)).copied().unwrap_or(f64::NAN)
        };
        let bands = spread.thresholds.is_some();
        Factors {
            r: at(&self.r),
            c: at(&self.c),
            vdd: at(&self.vdd),
            driver: at(&self.driver),
            diode: at(&self.diode),
            rise_uv: bands.then(|| at(&self.rise_uv)),
            fall_uv: bands.then(|| at(&self.fall_uv)),
            temp_mdeg_c: spread.temp_mdeg_c.map(|_| at(&self.temp_mdeg_c) as i32),
        }
    }

    /// The holds of the block by the closed form of [`plain_hold`], four
    /// boards at a time in vector registers, s, NaN where refused. A board
    /// whose press is not certainly full goes through [`plain_hold`] itself.
    fn plain_holds(&self, p: &Plain, spread: &Spread, out: &mut [f64]) {
        let s = f64x4::splat;
        let one = f64x4::ONE;
        let (g_leak, ref_mdeg) = (s(p.leak_r.map_or(0.0, |l| 1.0 / l)), s(f64::from(p.ref_mdeg_c)));
        // R‖R_leak as R/(1 + R·G_leak).
        let leaky = p.leak_r.is_some();
        let rows = self
            .r
            .iter()
            .zip(&self.c)
            .zip(&self.vdd)
            .zip(&self.driver)
            .zip(&self.diode)
            .zip(&self.rise_uv)
            .zip(&self.fall_uv)
            .zip(&self.temp_mdeg_c)
            .zip(out.chunks_mut(LANES))
            .enumerate();
        for (j, ((((((((&fr, &fc), &k), &fdrv), &fd), &rise_uv), &fall_uv), &t), chunk)) in rows {
            let vdd = s(p.vdd) * k;
            let rise0 = rise_uv * s(1e-6) * k;
            let fall0 = (fall_uv * s(1e-6) * k).min(rise0);
            let d = t - ref_mdeg;
            let r = s(p.r) * fr * (one + s(p.tc_r) * d);
            let c = s(p.c) * fc * (one + s(p.tc_c) * d);
            let drop = s(p.drop) * fd + s(p.tc_drop) * d;
            let shift = s(p.tc_threshold) * d * vdd;
            let (rise, fall) = (rise0 + shift, fall0 + shift);
            let r_eff = if leaky { r / (one + r * g_leak) } else { r };
            let r_ser = s(p.driver) * fdrv + s(p.charge);
            let sum = r_eff + r_ser;
            // V∞ = e·R_eff/sum with e the drive less the drop; the output
            // activates where V∞ > rise, compared without dividing.
            let e = (vdd - drop - s(p.leak_i) * r_ser).max(f64x4::ZERO);
            let activates = (e * r_eff).simd_gt(rise * sum);
            let full = (s(p.press) * sum).simd_gt(s(40.0) * c * (s(p.series) * sum + r_ser * r_eff));
            let lk = r_eff * s(p.leak_i);
            let r_d = r_eff + s(p.series);
            // (V∞ + lk)·R_eff / ((fall + lk)·(R_eff + Rs)), with one division.
            let ratio = (e * r_eff + lk * sum) * r_eff / ((fall + lk) * r_d * sum);
            let hold = r_d * c * ratio.ln();
            let ok = activates & hold.simd_ge(s(1e-6)) & hold.simd_le(s(86_400.0));
            let hold = ok.select(hold, s(f64::NAN)).to_array();
            let full = full.to_bitmask();
            for (l, (o, h)) in chunk.iter_mut().zip(hold).enumerate() {
                *o = if full & (1 << l) != 0 { h } else { plain_hold(p, &self.factors(spread, j * LANES + l)) };
            }
        }
    }
}

/// Accepted holds of one block: count, mean, sum of squared deviations,
/// extremes; refused samples counted apart.
#[derive(Debug, Clone, Copy)]
struct BlockSum {
    n: usize,
    mean: f64,
    m2: f64,
    min: f64,
    max: f64,
    refused: usize,
}

impl BlockSum {
    /// The sums of `out` (NaN left out), and its values counted into
    /// `counts` by `bins`: one pass four values at a time, then one for the
    /// squared deviations.
    fn tally(out: &[f64], bins: &Bins, counts: &mut [u32]) -> BlockSum {
        let s = f64x4::splat;
        let (mut n, mut sum, mut min, mut max) = (0u32, f64x4::ZERO, s(f64::INFINITY), s(f64::NEG_INFINITY));
        let chunks = out.chunks_exact(LANES);
        let tail = chunks.remainder();
        for chunk in chunks {
            let x = f64x4::from(chunk);
            let valid = x.simd_eq(x);
            let bits = valid.to_bitmask();
            n += bits.count_ones();
            sum += valid.select(x, f64x4::ZERO);
            // `min`/`max` keep the other operand where one is NaN.
            min = min.min(x);
            max = max.max(x);
            for (l, b) in bins.of4(x).into_iter().enumerate() {
                if bits & (1 << l) != 0 {
                    if let Some(c) = counts.get_mut(b) {
                        *c += 1;
                    }
                }
            }
        }
        let (mut n, mut sum) = (n as usize, sum.reduce_add());
        let mut min = min.to_array().iter().fold(f64::INFINITY, |a, &b| a.min(b));
        let mut max = max.to_array().iter().fold(f64::NEG_INFINITY, |a, &b| a.max(b));
        for &x in tail.iter().filter(|x| !x.is_nan()) {
            n += 1;
            sum += x;
            min = min.min(x);
            max = max.max(x);
            if let Some(c) = counts.get_mut(bins.of(x)) {
                *c += 1;
            }
        }
        let mean = if n == 0 { 0.0 } else { sum / n as f64 };
        let mut m2 = f64x4::ZERO;
        for chunk in out.chunks_exact(LANES) {
            let x = f64x4::from(chunk);
            let d = x.simd_eq(x).select(x - s(mean), f64x4::ZERO);
            m2 += d * d;
        }
        let m2 = m2.reduce_add() + tail.iter().filter(|x| !x.is_nan()).map(|&x| (x - mean) * (x - mean)).sum::<f64>();
        BlockSum { n, mean, m2, min, max, refused: out.len() - n }
    }

    /// Chan, Golub and LeVeque's pairwise update of the mean and squared deviations.
    fn merge(self, o: BlockSum) -> BlockSum {
        let n = self.n + o.n;
        if n == 0 {
            return BlockSum { refused: self.refused + o.refused, ..self };
        }
        let d = o.mean - self.mean;
        let (na, nb) = (self.n as f64, o.n as f64);
        BlockSum {
            n,
            mean: self.mean + d * nb / n as f64,
            m2: self.m2 + o.m2 + d * d * na * nb / n as f64,
            min: self.min.min(o.min),
            max: self.max.max(o.max),
            refused: self.refused + o.refused,
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn run_block(
    nominal: &Stage,
    spread: &Spread,
    dist: Dist,
    seed: u64,
    block: usize,
    plan: &Plan,
    cols: &mut Columns,
    out: &mut [f64],
) {
    cols.draw(nominal, spread, dist, seed, block, out.len());
    match plan {
        Plan::Exact => {
            for (i, slot) in out.iter_mut().enumerate() {
                *slot = hold_s(&stage_from(nominal, spread, &cols.factors(spread, i))).unwrap_or(f64::NAN);
            }
        }
        Plan::Float => {
            for (i, slot) in out.iter_mut().enumerate() {
                let s = stage_from(nominal, spread, &cols.factors(spread, i));
                *slot = rc_model::float::Model::new(&s).and_then(|m| m.hold_seconds()).map_or(f64::NAN, f64::from);
            }
        }
        Plan::Plain(p) => cols.plain_holds(p, spread, out),
    }
}

/// Runs the Monte Carlo. `progress` is called with (done, total) now and then.
#[must_use]
pub fn monte_carlo(
    nominal: &Stage,
    spread: &Spread,
    dist: Dist,
    samples: usize,
    seed: u64,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Monte {
    monte_carlo_with(nominal, spread, dist, samples, seed, Eval::Exact, progress)
}

/// [`monte_carlo`] with the choice of model for the samples. Both choices
/// draw the same boards for a given seed.
#[must_use]
pub fn monte_carlo_with(
    nominal: &Stage,
    spread: &Spread,
    dist: Dist,
    samples: usize,
    seed: u64,
    how: Eval,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Monte {
    let done = std::sync::atomic::AtomicUsize::new(0);
    let plan = plan(nominal, spread, how);
    // Zeroed memory comes from the allocator untouched; each thread faults in its own pages.
    let mut v = vec![0.0f64; samples];
    // Block 0 first: its spread sets the histogram's bins, so the other
    // blocks are counted while they are hot. Values outside the bins count
    // in the end bins; the order statistics stay exact whatever the bins.
    let (first, rest) = v.split_at_mut(BLOCK.min(samples));
    let mut cols = Columns::default();
    run_block(nominal, spread, dist, seed, 0, &plan, &mut cols, first);
    let (min0, max0) = first
        .iter()
        .filter(|x| !x.is_nan())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)));
    let bins = Bins::around(min0, max0);
    let mut counts = vec![0u32; BINS];
    let first_sum = BlockSum::tally(first, &bins, &mut counts);
    done.fetch_add(first.len(), std::sync::atomic::Ordering::Relaxed);
    progress(first.len(), samples);
    let (mut sums, rest_counts) = rest
        .par_chunks_mut(BLOCK)
        .enumerate()
        // Each piece of work carries a histogram: a few dozen pieces, not thousands.
        .with_min_len(32)
        .fold(
            || (Vec::new(), vec![0u32; BINS], Columns::default()),
            |(mut sums, mut counts, mut cols), (b, out)| {
                run_block(nominal, spread, dist, seed, b + 1, &plan, &mut cols, out);
                sums.push((b + 1, BlockSum::tally(out, &bins, &mut counts)));
                let n = done.fetch_add(out.len(), std::sync::atomic::Ordering::Relaxed) + out.len();
                if b % 16 == 15 || n == samples {
                    progress(n, samples);
                }
                (sums, counts, cols)
            },
        )
        .map(|(sums, counts, _)| (sums, counts))
        .reduce(
            || (Vec::new(), vec![0u32; BINS]),
            |(mut a, mut ca), (b, cb)| {
                a.extend(b);
                ca.iter_mut().zip(cb).for_each(|(x, y)| *x += y);
                (a, ca)
            },
        );
    counts.iter_mut().zip(rest_counts).for_each(|(x, y)| *x += y);
    // Merged in block order: the same sums whatever the threads did.
    sums.sort_unstable_by_key(|&(b, _)| b);
    let total = sums.into_iter().map(|(_, s)| s).fold(first_sum, BlockSum::merge);
    if total.refused > 0 {
        v.retain(|h| !h.is_nan());
    }
    let refused = total.refused;
    let mean = if total.n == 0 { f64::NAN } else { total.mean };
    let sd = if total.n > 1 { (total.m2 / (total.n - 1) as f64).sqrt() } else { f64::NAN };
    let (min_s, max_s) = (total.min, total.max);
    let levels = [0.135, 1.0, 5.0, 50.0, 95.0, 99.0, 99.865];
    // Linear interpolation between order statistics (the common "type 7" rule).
    let mut ranks = Vec::new();
    for p in levels {
        if let Some(last) = v.len().checked_sub(1) {
            let h = last as f64 * p / 100.0;
            ranks.push(h.floor() as usize);
            ranks.push((h.floor() as usize + 1).min(last));
        }
    }
    let stat = order_statistics(&v, &ranks, &bins, &counts);
    let at = |r: usize| ranks.iter().position(|&x| x == r).and_then(|i| stat.get(i)).copied().unwrap_or(f64::NAN);
    let percentiles = levels
        .iter()
        .map(|&p| {
            let h = (v.len().saturating_sub(1)) as f64 * p / 100.0;
            let i = h.floor() as usize;
            let (a, b) = (at(i), at((i + 1).min(v.len().saturating_sub(1))));
            (p, a + (h - h.floor()) * (b - a))
        })
        .collect();
    Monte { samples, refused, mean_s: mean, sd_s: sd, min_s, max_s, percentiles, holds: v }
}

/// Histogram bins for the order statistics.
const BINS: usize = 1 << 16;

/// Equal bins over a range, the values below and above it counted in the end bins.
#[derive(Debug, Clone, Copy)]
struct Bins {
    lo: f64,
    per_unit: f64,
}

impl Bins {
    /// Bins over [`min`, `max`] widened by half its span each way (one bin
    /// for everything when the range is empty or not finite).
    fn around(min: f64, max: f64) -> Bins {
        let span = max - min;
        if span > 0.0 && span.is_finite() {
            Bins { lo: min - 0.5 * span, per_unit: BINS as f64 / (2.0 * span) }
        } else {
            Bins { lo: 0.0, per_unit: 0.0 }
        }
    }

    /// The bin of `x` (not NaN); a monotone function of `x`.
    fn of(&self, x: f64) -> usize {
        ((x - self.lo) * self.per_unit).clamp(0.0, (BINS - 1) as f64) as usize
    }

    /// [`Bins::of`] of four values at once (NaN lanes land in bin 0).
    fn of4(&self, x: f64x4) -> [usize; LANES] {
        let at = ((x - f64x4::splat(self.lo)) * f64x4::splat(self.per_unit)).max(f64x4::ZERO);
        at.min(f64x4::splat((BINS - 1) as f64)).to_array().map(|b| b as usize)
    }
}

/// The `ranks`-th smallest values of `v` (0-based), exactly, without sorting
/// `v`: `counts` (of `v` in `bins`) tell the bin each rank falls in; one
/// parallel pass collects only those bins' values, which are sorted.
fn order_statistics(v: &[f64], ranks: &[usize], bins_of: &Bins, counts: &[u32]) -> Vec<f64> {
    if v.is_empty() || ranks.is_empty() {
        return vec![f64::NAN; ranks.len()];
    }
    let bin = |x: f64| bins_of.of(x);
    // For each rank: its bin and its position among that bin's values.
    let mut starts = Vec::with_capacity(BINS);
    let mut acc = 0usize;
    for &c in counts {
        starts.push(acc);
        acc += c as usize;
    }
    let wanted: Vec<(usize, usize)> = ranks
        .iter()
        .map(|&r| {
            let b = starts.partition_point(|&s| s <= r).saturating_sub(1);
            (b, r - starts.get(b).copied().unwrap_or(0))
        })
        .collect();
    let mut bins: Vec<usize> = wanted.iter().map(|w| w.0).collect();
    bins.sort_unstable();
    bins.dedup();
    // One pass collects the values of every wanted bin.
    let mut slot = vec![u8::MAX; BINS];
    for (i, &b) in bins.iter().enumerate() {
        if let Some(s) = slot.get_mut(b) {
            *s = u8::try_from(i).unwrap_or(u8::MAX);
        }
    }
    let mut members: Vec<Vec<f64>> = v
        .par_chunks(1 << 16)
        .fold(
            || vec![Vec::new(); bins.len()],
            |mut m, chunk| {
                let mut keep = |x: f64, b: usize| {
                    if let Some(&s) = slot.get(b) {
                        if let Some(list) = m.get_mut(usize::from(s)) {
                            list.push(x);
                        }
                    }
                };
                // Four bins at a time (`v` holds no NaN here), then the rest.
                let quads = chunk.chunks_exact(LANES);
                let tail = quads.remainder();
                for quad in quads {
                    let x = f64x4::from(quad);
                    for (&x, b) in quad.iter().zip(bins_of.of4(x)) {
                        keep(x, b);
                    }
                }
                for &x in tail {
                    keep(x, bin(x));
                }
                m
            },
        )
        .reduce(
            || vec![Vec::new(); bins.len()],
            |mut a, b| {
                for (x, y) in a.iter_mut().zip(b) {
                    x.extend(y);
                }
                a
            },
        );
    for m in &mut members {
        m.sort_unstable_by(f64::total_cmp);
    }
    wanted
        .iter()
        .map(|&(b, k)| {
            bins.iter()
                .position(|&x| x == b)
                .and_then(|i| members.get(i))
                .and_then(|m| m.get(k))
                .copied()
                .unwrap_or(f64::NAN)
        })
        .collect()
}

/// Root-sum-square spread: each parameter moved alone to both ends of its
/// tolerance (one-at-a-time corners of [`Spread::at_corner`]); its standard
/// deviation is the half-range over √3 (uniform) or over k (normal at k σ).
/// Returns (nominal hold, σ), s.
///
/// # Errors
/// The model's error at the first corner it cannot evaluate.
pub fn rss(nominal: &Stage, spread: &Spread, dist: Dist) -> Result<(f64, f64), rc_model::Error> {
    let h0 = Model::new(nominal).and_then(|m| m.evaluate()).map(|e| secs(e.hold))?;
    let active = spread.active();
    let mut var = 0.0;
    for bit in 0..16u16 {
        if active & (1 << bit) == 0 {
            continue;
        }
        let at = |high: bool| -> Result<f64, rc_model::Error> {
            let corner = rc_model::window::Corner { high: if high { 1 << bit } else { 0 }, active: 1 << bit };
            let s = spread.at_corner(nominal, corner)?;
            Model::new(&s).and_then(|m| m.evaluate()).map(|e| secs(e.hold))
        };
        let half = 0.5 * (at(true)? - at(false)?).abs();
        let sigma = match dist {
            Dist::Uniform => half / 3f64.sqrt(),
            Dist::Normal { k_sigma } => half / k_sigma,
        };
        var += sigma * sigma;
    }
    Ok((h0, var.sqrt()))
}

/// Process capability of the Monte Carlo holds against a spec (NIST/SEMATECH
/// e-Handbook §6.1.6).
#[must_use]
pub fn capability(m: &Monte, lsl_s: f64, usl_s: f64) -> Capability {
    stats::capability(lsl_s, usl_s, m.mean_s, m.sd_s)
}

/// A histogram of the holds as a self-contained SVG, with the worst-case
/// window (dashed) and the spec limits (solid) marked.
#[must_use]
pub fn histogram_svg(m: &Monte, window: Option<&Window>, spec: Option<(f64, f64)>, title: &str) -> String {
    let mut lo = m.min_s;
    let mut hi = m.max_s;
    if let Some(win) = window {
        lo = lo.min(secs(win.min));
        hi = hi.max(secs(win.max));
    }
    if let Some((a, b)) = spec {
        lo = lo.min(a);
        hi = hi.max(b);
    }
    let span = (hi - lo).max(1e-30);
    let (lo, hi) = (lo - 0.03 * span, hi + 0.03 * span);
    let bins = 60usize;
    let mut counts = vec![0u64; bins];
    for &v in &m.holds {
        let i = (((v - lo) / (hi - lo)) * bins as f64).floor().clamp(0.0, (bins - 1) as f64) as usize;
        if let Some(c) = counts.get_mut(i) {
            *c += 1;
        }
    }
    let mut marks = Vec::new();
    if let Some(win) = window {
        marks.push((secs(win.min), "worst-case min".to_owned(), "#b35c00"));
        marks.push((secs(win.max), "worst-case max".to_owned(), "#b35c00"));
    }
    if let Some((a, b)) = spec {
        marks.push((a, "spec low".to_owned(), "#a01010"));
        marks.push((b, "spec high".to_owned(), "#a01010"));
    }
    crate::chart::histogram(&counts, lo, hi, &marks, title, "hold", &|v| crate::eval::si(v, "s"))
}

/// How old the Monte Carlo's capacitors are.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Parts {
    /// New parts, and no aging in the spread.
    New,
    /// New parts, while the worst case and the root-sum-square also take
    /// the spread's aging (the `[aging]` table) as a corner.
    NewBesideAging(Aging),
    /// Every capacitor aged this many years first (`--years`).
    Aged {
        /// Years.
        years: f64,
    },
}

impl Parts {
    fn text(self) -> Option<String> {
        match self {
            Parts::New => None,
            Parts::NewBesideAging(a) => Some(format!(
                "new parts; the worst case and root-sum-square include the capacitor {}; --years Y ages every board",
                match a {
                    Aging::Class2 { hours, .. } => format!("aged {hours} h"),
                    Aging::EndOfLife { loss_ppm } => format!("at end of life ({} % lost)", f64::from(loss_ppm) / 1e4),
                }
            )),
            Parts::Aged { years } => Some(format!("every capacitor aged {years} years first")),
        }
    }
}

/// The report, as text or JSON. `(nominal_s, rss_sd_s)`: the nominal hold
/// and the root-sum-square σ, s.
#[must_use]
#[allow(clippy::too_many_arguments)]
pub fn render(
    name: &str,
    m: &Monte,
    parts: Parts,
    (nominal_s, rss_sd_s): (f64, f64),
    window: Option<&Window>,
    spec: Option<(f64, f64)>,
    cap: Option<&Capability>,
    json: bool,
) -> String {
    use crate::eval::{corner_text, si};
    use std::fmt::Write as _;
    if json {
        let v = serde_json::json!({
            "stage": name,
            "nominal_s": nominal_s,
            "worst_case": window.map(|w| serde_json::json!({
                "min_s": secs(w.min), "max_s": secs(w.max),
                "min_corner": corner_text(w.min_corner), "max_corner": corner_text(w.max_corner), "corners": w.corners,
            })),
            "rss_sd_s": rss_sd_s,
            "monte_carlo": m,
            "monte_carlo_age_years": match parts { Parts::Aged { years } => years, _ => 0.0 },
            "monte_carlo_parts": parts.text().unwrap_or_else(|| "new parts".to_owned()),
            "spec": spec.map(|(a, b)| serde_json::json!({"low_s": a, "high_s": b})),
            "capability": cap.map(|c| serde_json::json!({"cp": c.cp, "cpk": c.cpk, "cpu": c.cpu, "cpl": c.cpl, "k": c.k})),
        });
        return format!("{}\n", serde_json::to_string_pretty(&v).unwrap_or_default());
    }
    let mut o = String::new();
    let _ = writeln!(o, "hold spread \u{b7} {name}");
    let line = |o: &mut String, label: &str, value: String| {
        let dots = 32usize.saturating_sub(label.chars().count());
        let _ = writeln!(o, "  {label} {} {value}", ".".repeat(dots));
    };
    line(&mut o, "nominal", si(nominal_s, "s"));
    if let Some(w) = window {
        line(
            &mut o,
            &format!("worst case over {} corners", w.corners),
            format!("{} to {}", si(secs(w.min), "s"), si(secs(w.max), "s")),
        );
        let _ = writeln!(o, "    shortest at {}", corner_text(w.min_corner));
        let _ = writeln!(o, "    longest at  {}", corner_text(w.max_corner));
    }
    line(
        &mut o,
        "root-sum-square",
        format!("σ {} ({:.2} % of nominal)", si(rss_sd_s, "s"), 100.0 * rss_sd_s / nominal_s),
    );
    line(
        &mut o,
        &format!("Monte Carlo, {} boards", m.samples),
        format!("mean {} \u{b7} σ {} \u{b7} {} refused", si(m.mean_s, "s"), si(m.sd_s, "s"), m.refused),
    );
    if let Some(t) = parts.text() {
        let _ = writeln!(o, "    {t}");
    }
    for (p, v) in &m.percentiles {
        let _ = writeln!(o, "    {:>7} % of boards hold less than {}", format!("{p}"), si(*v, "s"));
    }
    if let (Some((a, b)), Some(c)) = (spec, cap) {
        line(
            &mut o,
            &format!("against {} to {}", si(a, "s"), si(b, "s")),
            format!("Cp {:.3} \u{b7} Cpk {:.3} (NIST/SEMATECH e-Handbook §6.1.6)", c.cp, c.cpk),
        );
        let outside = m.holds.iter().filter(|&&v| v < a || v > b).count();
        let _ = writeln!(o, "    {outside} of {} simulated boards fall outside", m.holds.len());
    }
    let _ = writeln!(o, "\n  note: {}", crate::eval::CAUTION);
    o
}

#[cfg(test)]
mod tests {
    use super::*;
    use rc_model::window::Tempco;

    /// The bench stage: 1 MΩ, 1 µF, 5 V, 50 Ω driver, 0.6 V drop, thresholds at 60 % and 40 %.
    fn stage() -> Stage {
        let text = include_str!("../../examples/bench-spread.toml");
        crate::stagefile::parse(std::path::Path::new("bench-spread.toml"), text).unwrap_or_else(|e| panic!("{e}")).stage
    }

    fn wide_spread() -> Spread {
        Spread {
            r: Tolerance::symmetric(10_000),
            c: Tolerance { minus_ppm: 200_000, plus_ppm: 800_000 },
            vdd: Tolerance::symmetric(50_000),
            diode: Tolerance::symmetric(80_000),
            driver: Tolerance::symmetric(300_000),
            thresholds: Some(ThresholdSpread::Schmitt {
                rise_uv: (2_600_000, 3_500_000),
                fall_uv: (1_500_000, 2_400_000),
            }),
            temp_mdeg_c: Some((-20_000, 70_000)),
            tempco: Tempco { r_ppm_per_c: 100, c_ppm_per_c: -750, drop_uv_per_c: -2_000, threshold_ppm_per_c: 300 },
            ..Spread::default()
        }
    }

    /// The vector path is taken for a fixed drop inside the domain, and not
    /// for a junction diode or a spread whose corners leave the domain.
    #[test]
    fn closed_form_only_where_it_applies() {
        assert!(matches!(plan(&stage(), &wide_spread(), Eval::Fast), Plan::Plain(_)));
        assert!(matches!(plan(&stage(), &wide_spread(), Eval::Exact), Plan::Exact));
        let mut junction = stage();
        junction.diode = Diode::Junction { is_fa: 4_000_000, n_milli: 1_900, rs_mohm: 600_000 };
        assert!(matches!(plan(&junction, &wide_spread(), Eval::Fast), Plan::Float));
        // 1.7 V −10 % reaches below the 1.6 V the model accepts.
        let mut low = stage();
        low.vdd_uv = 1_700_000;
        low.diode = Diode::Drop { drop_uv: 200_000 };
        low.rise_uv = 900_000;
        low.fall_uv = 700_000;
        let sp = Spread { vdd: Tolerance::symmetric(100_000), ..Spread::default() };
        assert!(!every_board_in_domain(&low, &sp));
        assert!(matches!(plan(&low, &sp, Eval::Fast), Plan::Float));
        // A threshold band reaching above 95 % of the supply.
        let sp = Spread {
            thresholds: Some(ThresholdSpread::Single { min_uv: 2_000_000, max_uv: 4_900_000 }),
            ..Spread::default()
        };
        assert!(!every_board_in_domain(&stage(), &sp));
    }

    /// Board by board, the vector closed form gives the fixed-point model's
    /// hold and refuses exactly the boards the model refuses, over leakage,
    /// series and charge resistors, temperature, both threshold kinds,
    /// partial and too short presses, and both distributions. The model sees
    /// the board rounded to the stage's units (whole µV, mΩ, fF; temperature
    /// shifts truncated to µV): within 1e-5 after a full press, 1e-4 after a
    /// partial one, where the 50 Ω driver in whole mΩ moves the charge time
    /// constant by up to 2e-5. The vector lanes equal the scalar closed form.
    #[test]
    fn closed_form_matches_the_fixed_point_model_board_by_board() {
        let mut cases: Vec<(Stage, Spread, f64)> = Vec::new();
        cases.push((stage(), wide_spread(), 1e-5));
        let mut leaky = stage();
        leaky.leak_mohm = Some(22_000_000_000);
        leaky.leak_fa = 40_000_000;
        leaky.series_mohm = 4_700_000;
        leaky.charge_mohm = 1_000_000;
        cases.push((leaky, wide_spread(), 1e-5));
        let single = Spread {
            thresholds: Some(ThresholdSpread::Single { min_uv: 2_000_000, max_uv: 3_000_000 }),
            ..wide_spread()
        };
        cases.push((stage(), single, 1e-5));
        let plain = Spread { r: Tolerance::symmetric(50_000), c: Tolerance::symmetric(100_000), ..Spread::default() };
        cases.push((stage(), plain, 1e-5));
        let mut partial = stage();
        partial.press_ns = 120_000; // 2.4 charge time constants
        cases.push((partial, wide_spread(), 1e-4));
        let mut too_short = stage();
        too_short.press_ns = 60_000; // shorter than the turn-on latency on part of the boards
        cases.push((too_short, wide_spread(), 1e-4));
        let (mut checked, mut refused) = (0, 0);
        for (i, (s, sp, within)) in cases.iter().enumerate() {
            let Plan::Plain(p) = plan(s, sp, Eval::Fast) else { panic!("case {i}: not the closed form") };
            for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }] {
                let mut cols = Columns::default();
                let (mut fast, mut exact) = (vec![0.0; BLOCK - 3], vec![0.0; BLOCK - 3]);
                run_block(s, sp, dist, 77, 5, &Plan::Plain(p), &mut cols, &mut fast);
                run_block(s, sp, dist, 77, 5, &Plan::Exact, &mut cols, &mut exact);
                for (k, (a, b)) in fast.iter().zip(&exact).enumerate() {
                    assert_eq!(a.is_nan(), b.is_nan(), "case {i} {dist:?} board {k}: {a} vs {b}");
                    let scalar = plain_hold(&p, &cols.factors(sp, k));
                    assert!(a.to_bits() == scalar.to_bits() || (a - scalar).abs() <= 1e-14 * scalar, "{a} vs {scalar}");
                    if a.is_nan() {
                        refused += 1;
                    } else {
                        assert!((a - b).abs() <= within * b, "case {i} {dist:?} board {k}: {a} vs {b}");
                        checked += 1;
                    }
                }
            }
        }
        assert!(checked > 20_000 && refused > 1_000, "{checked} checked, {refused} refused");
    }

    /// `wide`'s vector logarithm against the platform's `ln` (the C library's
    /// `log`): within 2 ulp over the ratios a hold takes.
    #[test]
    fn vector_ln_matches_the_library_ln() {
        let mut worst = 0.0f64;
        let mut x = 1.0 + 1e-12;
        while x < 1e6 {
            let xs = [x, x * 1.000_000_1, x * 1.37, x * 2.9];
            for (got, &want_x) in f64x4::new(xs).ln().to_array().iter().zip(&xs) {
                let want = want_x.ln();
                worst = worst.max((got - want).abs() / (want.abs() * f64::EPSILON));
            }
            x *= 1.001 + x.fract() * 1e-3;
        }
        assert!(worst <= 2.0, "worst error {worst} ulp");
    }

    /// Every drawn value lies inside its tolerance, and both distributions
    /// fill it as they should: uniform to its ends, normal at 3 σ clipped.
    #[test]
    fn columns_stay_inside_the_tolerances() {
        let sp = wide_spread();
        for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }] {
            let mut cols = Columns::default();
            let mut r = Vec::new();
            for b in 0..20 {
                cols.draw(&stage(), &sp, dist, 3, b, BLOCK);
                for i in 0..BLOCK {
                    let f = cols.factors(&sp, i);
                    assert!((0.99..=1.01).contains(&f.r) && (0.8..=1.8).contains(&f.c), "{f:?}");
                    assert!((0.95..=1.05).contains(&f.vdd) && (0.7..=1.3).contains(&f.driver), "{f:?}");
                    let (rise, fall) = (f.rise_uv.unwrap_or_default(), f.fall_uv.unwrap_or_default());
                    assert!((2.6e6..=3.5e6).contains(&rise) && (1.5e6..=2.4e6).contains(&fall), "{f:?}");
                    let t = f.temp_mdeg_c.unwrap_or(i32::MIN);
                    assert!((-20_000..=70_000).contains(&t), "{f:?}");
                    r.push(f.r);
                }
            }
            let n = r.len() as f64;
            let mean = r.iter().sum::<f64>() / n;
            let sd = (r.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1.0)).sqrt();
            // Uniform over ±1 %: σ = 1 %/√3; normal with 1 % at 3 σ.
            let want = match dist {
                Dist::Uniform => 0.01 / 3f64.sqrt(),
                Dist::Normal { .. } => 0.01 / 3.0,
            };
            assert!((mean - 1.0).abs() < 1e-4 && (sd - want).abs() < 0.03 * want, "{dist:?}: {mean} {sd}");
        }
    }
}
