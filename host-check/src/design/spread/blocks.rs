//! The Monte Carlo's blocks: boards drawn column by column, four to a
//! vector, and the model's closed form evaluated four boards at a time.

use rc_model::window::{Spread, ThresholdSpread, Tolerance};
use rc_model::{Diode, Stage};
use wide::f64x4;

use super::board::{every_board_in_domain, stage_from, Factors};
use super::lanes::{Lanes, LANES};
use super::{hold_s, Dist, Eval};

/// The nominal stage and the spread's coefficients in SI units (Ω, F, V, A,
/// s) for [`Columns::plain_holds`].
#[derive(Debug, Clone, Copy)]
pub(super) struct Plain {
    r: f64,
    c: f64,
    vdd: f64,
    driver: f64,
    charge: f64,
    series: f64,
    leak_r: Option<f64>,
    leak_i: f64,
    drop: f64,
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
            press: s.press_ns as f64 * 1e-9,
            ref_mdeg_c: spread.ref_mdeg_c,
            tc_r: f64::from(tc.r_ppm_per_c) * 1e-9,
            tc_c: f64::from(tc.c_ppm_per_c) * 1e-9,
            tc_drop: f64::from(tc.drop_uv_per_c) * 1e-9,
            tc_threshold: f64::from(tc.threshold_ppm_per_c) * 1e-9,
        })
    }
}

/// The hold of a drawn board by the fixed-point model, s (NaN where it refuses).
fn exact_hold(nominal: &Stage, spread: &Spread, f: &Factors) -> f64 {
    hold_s(&stage_from(nominal, spread, f)).unwrap_or(f64::NAN)
}

/// How one Monte Carlo run evaluates its boards.
#[derive(Debug, Clone, Copy)]
pub(super) enum Plan {
    Exact,
    Float,
    Plain(Plain),
}

/// The plan for `how`: the vector closed form where it applies (fixed drop,
/// every board inside the domain), else the `f32` backend; or the fixed-point model.
pub(super) fn plan(nominal: &Stage, spread: &Spread, how: Eval) -> Plan {
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
pub(super) struct Columns {
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
/// with the half-width of the side drawn at `k_sigma` σ, clipped: the
/// distributions of a single board's draw.
fn fill(lanes: &mut Lanes, dist: Dist, lo: f64, hi: f64, col: &mut [f64x4]) {
    let (lo4, hi4) = (f64x4::splat(lo), f64x4::splat(hi));
    match dist {
        Dist::Uniform => {
            let width = f64x4::splat(hi - lo);
            for x in col {
                *x = lo4 + width * lanes.next_unit();
            }
        }
        Dist::Truncated { k_sigma } => {
            // The inverse CDF lane by lane (no vector erfc⁻¹), one uniform each.
            for x in col {
                let u = lanes.next_unit().to_array();
                *x = f64x4::from(u.map(|u| {
                    let z = super::truncated_normal(u, k_sigma);
                    (z * if z < 0.0 { -lo } else { hi } / k_sigma).clamp(lo, hi)
                }));
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
    /// Draws block `block` of the run with `seed`: `n` boards, rounded up to
    /// whole vectors (the extra lanes are never read).
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
                // The population around the typical point, as board::draw_factors draws it.
                let (typ, reach) = super::board::plain_point(nominal.rise_uv, (min_uv, max_uv));
                fill(&mut lanes, Dist::Normal { k_sigma: super::board::PLAIN_SIGMAS }, -1.0, 1.0, &mut self.rise_uv);
                let (typ, reach) = (f64x4::splat(typ), f64x4::splat(reach));
                self.rise_uv.iter_mut().for_each(|x| *x = typ + *x * reach);
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

    /// The holds of the block, s, NaN where the model refuses the board
    /// (never activates, no hold, hold outside 1 µs to 24 h), four boards at
    /// a time in vector registers. The model's closed form (charge to V∞
    /// through the Thévenin resistance, discharge through R‖R_leak plus the
    /// series resistor against the leakage current) on the drawn values in
    /// `f64`, without rounding them to the stage's units. A board whose press
    /// is not certainly full (40 charge time constants) goes through the
    /// fixed-point model, which also decides whether it turns on in time.
    fn plain_holds(&self, p: &Plain, nominal: &Stage, spread: &Spread, out: &mut [f64]) {
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
                *o = if full & (1 << l) != 0 {
                    h
                } else {
                    exact_hold(nominal, spread, &self.factors(spread, j * LANES + l))
                };
            }
        }
    }
}

/// Draws block `block` of the run into `cols` and evaluates its boards by
/// `plan` into `out` (holds in s, NaN where refused; `out.len()` boards).
#[allow(clippy::too_many_arguments)]
pub(super) fn run_block(
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
                *slot = exact_hold(nominal, spread, &cols.factors(spread, i));
            }
        }
        Plan::Float => {
            for (i, slot) in out.iter_mut().enumerate() {
                let s = stage_from(nominal, spread, &cols.factors(spread, i));
                *slot = rc_model::float::Model::new(&s).and_then(|m| m.hold_seconds()).map_or(f64::NAN, f64::from);
            }
        }
        Plan::Plain(p) => cols.plain_holds(p, nominal, spread, out),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rc_model::window::Tempco;

    /// The bench stage: 1 MΩ, 1 µF, 5 V, 50 Ω driver, 0.6 V drop, thresholds at 60 % and 40 %.
    fn stage() -> Stage {
        let text = include_str!("../../../../examples/bench-spread.toml");
        crate::stage::file::parse(std::path::Path::new("bench-spread.toml"), text)
            .unwrap_or_else(|e| panic!("{e}"))
            .stage
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
        // 0.85 V −10 % reaches below the 0.8 V the model accepts.
        let mut low = stage();
        low.vdd_uv = 850_000;
        low.diode = Diode::Drop { drop_uv: 100_000 };
        low.rise_uv = 450_000;
        low.fall_uv = 350_000;
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
    /// shifts truncated to µV): within 1e-5 after a full press. A press that
    /// is not certainly full goes through the model itself (bound 1e-4 kept
    /// for those cases).
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
            for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }, Dist::Truncated { k_sigma: 3.0 }] {
                let mut cols = Columns::default();
                let (mut fast, mut exact) = (vec![0.0; BLOCK - 3], vec![0.0; BLOCK - 3]);
                run_block(s, sp, dist, 77, 5, &Plan::Plain(p), &mut cols, &mut fast);
                run_block(s, sp, dist, 77, 5, &Plan::Exact, &mut cols, &mut exact);
                for (k, (a, b)) in fast.iter().zip(&exact).enumerate() {
                    assert_eq!(a.is_nan(), b.is_nan(), "case {i} {dist:?} board {k}: {a} vs {b}");
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
        for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }, Dist::Truncated { k_sigma: 3.0 }] {
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
                Dist::Truncated { k_sigma } => 0.01 / k_sigma * super::super::truncated_sd(k_sigma),
            };
            assert!((mean - 1.0).abs() < 1e-4 && (sd - want).abs() < 0.03 * want, "{dist:?}: {mean} {sd}");
        }
    }
}
