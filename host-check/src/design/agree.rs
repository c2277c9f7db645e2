//! Domain sweep: the fixed-point and `f32` models against the `f64` reference.
//!
//! Points: a log-spaced grid over every parameter including the domain edges,
//! then seeded random points. Each point is drawn from its own generator
//! (seed, index), so results do not depend on the thread count.

use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use rayon::prelude::*;
use rc_model::{float, limits, Diode, Model, Span, Stage};
use serde::Serialize;

use crate::fmt::secs;
use crate::reference::{self, StageF};

/// One error statistic over the sweep.
#[derive(Debug, Clone, Serialize)]
pub struct Stat {
    /// Largest relative error, ppm.
    pub max_rel_ppm: f64,
    /// 99.9th percentile of the relative error, ppm.
    pub p999_rel_ppm: f64,
    /// Largest error in units of the output's last place (2^-32 ns for times,
    /// 2^-32 fF for capacitance).
    pub max_lsb: f64,
    /// Points compared.
    pub points: usize,
    /// The stage where the largest error occurs (debug form).
    pub worst_case: String,
}

/// Errors of one backend against the reference.
#[derive(Debug, Clone, Serialize)]
pub struct Backend {
    /// Hold.
    pub hold: Stat,
    /// Turn-on latency (points with a non-zero latency).
    pub on_latency: Stat,
    /// Inverse capacitance from the reference hold.
    pub inverse_c: Stat,
    /// Points where the backend refused (typed error) but the reference did not, or the reverse.
    pub verdict_mismatches: usize,
    /// Points where the inverse was refused as ill-conditioned (press far too
    /// short to charge the capacitor: the hold does not determine C).
    pub inverse_ill_conditioned: usize,
}

/// The hot path (a stage prepared once, judged per measurement in 32/64-bit
/// arithmetic) against the reference, at the prepared temperature.
#[derive(Debug, Clone, Serialize)]
pub struct HotPath {
    /// Hold from the prepared stage.
    pub hold: Stat,
    /// Effective C from a measured hold in whole ticks (points whose press
    /// charges the capacitor fully, where the hold is proportional to C).
    pub inverse_c: Stat,
    /// Stages the solver evaluates but prepare refuses.
    pub refused: usize,
}

/// The whole report.
#[derive(Debug, Clone, Serialize)]
pub struct Report {
    /// Fixed-point model.
    pub fixed: Backend,
    /// The fixed-point hot path.
    pub hot: HotPath,
    /// `f32` model.
    pub f32: Backend,
    /// Points generated (grid + random).
    pub cases: usize,
    /// Points every backend evaluated.
    pub evaluated: usize,
    /// Points every backend refused with a typed error (outside what the stage can do).
    pub refused: usize,
    /// Seed of the random part.
    pub seed: u64,
}

fn log_uniform<R: Rng>(rng: &mut R, lo: f64, hi: f64) -> f64 {
    (lo.ln() + rng.random::<f64>() * (hi.ln() - lo.ln())).exp()
}

/// A random stage somewhere in the domain (it may be one the model refuses).
pub fn random_stage(seed: u64, index: u64) -> Stage {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed ^ index.wrapping_mul(0x9E37_79B9_7F4A_7C15));
    let vdd_uv = rng.random_range(limits::VDD_UV.0..=limits::VDD_UV.1);
    let r_mohm = log_uniform(&mut rng, 1e6, 1e11) as u64;
    let c_ff = log_uniform(&mut rng, 1e5, 1e13) as u64;
    let rise_ppm = rng.random_range(50_000u32..=950_000);
    let fall_ppm = if rng.random_bool(0.4) { rise_ppm } else { rng.random_range(50_000..=rise_ppm) };
    let diode = if rng.random_bool(0.5) {
        Diode::Drop { drop_uv: rng.random_range(0..=900_000u32).min(vdd_uv / 2) }
    } else {
        Diode::Junction {
            is_fa: log_uniform(&mut rng, 1.0, 1e7) as u64,
            n_milli: rng.random_range(1_000..=2_000),
            rs_mohm: rng.random_range(0..=10_000),
        }
    };
    let driver_mohm = log_uniform(&mut rng, 1e3, 1e6) as u64;
    let charge_mohm = if rng.random_bool(0.3) { log_uniform(&mut rng, 1e3, 1e7) as u64 } else { 0 };
    let series_mohm = if rng.random_bool(0.3) { (log_uniform(&mut rng, 1e1, 1e6) as u64).min(r_mohm / 10) } else { 0 };
    let leak_mohm =
        if rng.random_bool(0.3) { Some((r_mohm as f64 * log_uniform(&mut rng, 3.0, 1e5)) as u64) } else { None };
    let leak_fa = if rng.random_bool(0.3) { log_uniform(&mut rng, 1.0, 1e6) as u64 } else { 0 };
    // Press: a multiple of the charge time constant, mostly full presses.
    let tau_c_ns = (c_ff as f64 * 1e-15) * ((driver_mohm + charge_mohm + series_mohm) as f64 * 1e-3 + 1.0) * 1e9;
    let press_ns = (tau_c_ns * log_uniform(&mut rng, 0.5, 200.0)).clamp(1.0, limits::DAY_NS as f64) as u64;
    Stage {
        vdd_uv,
        r_mohm,
        c_ff,
        series_mohm,
        charge_mohm,
        driver_mohm,
        leak_mohm,
        leak_fa,
        diode,
        rise_uv: rc_model::fraction_of(vdd_uv, rise_ppm),
        fall_uv: rc_model::fraction_of(vdd_uv, fall_ppm),
        press_ns,
        temp_mdeg_c: rng.random_range(limits::TEMP_MDEG_C.0..=limits::TEMP_MDEG_C.1),
    }
}

/// The log-spaced grid, including the domain's edges.
pub fn grid() -> Vec<Stage> {
    let mut out = Vec::new();
    let rs = [1_000_000u64, 100_000_000, 10_000_000_000, 100_000_000_000];
    let cs = [100_000u64, 10_000_000, 1_000_000_000, 100_000_000_000, 10_000_000_000_000];
    let vdds = [800_000u32, 1_600_000, 5_000_000, 18_000_000];
    let fracs = [
        (50_000u32, 50_000u32),
        (300_000, 300_000),
        (500_000, 500_000),
        (700_000, 300_000),
        (950_000, 950_000),
        (950_000, 50_000),
    ];
    let diodes = [
        Diode::Drop { drop_uv: 0 },
        Diode::Drop { drop_uv: 600_000 },
        Diode::Junction { is_fa: 2_500_000, n_milli: 1_750, rs_mohm: 500 },
    ];
    for &r_mohm in &rs {
        for &c_ff in &cs {
            for &vdd_uv in &vdds {
                for &(rise, fall) in &fracs {
                    for &diode in &diodes {
                        out.push(Stage {
                            vdd_uv,
                            r_mohm,
                            c_ff,
                            series_mohm: 0,
                            charge_mohm: 0,
                            driver_mohm: 50_000,
                            leak_mohm: None,
                            leak_fa: 0,
                            diode,
                            rise_uv: rc_model::fraction_of(vdd_uv, rise),
                            fall_uv: rc_model::fraction_of(vdd_uv, fall),
                            press_ns: (c_ff / 1_000).clamp(1_000, limits::DAY_NS),
                            temp_mdeg_c: 25_000,
                        });
                    }
                }
            }
        }
    }
    out
}

#[derive(Default, Clone)]
struct Sample {
    hold: Option<f64>,
    latency: Option<f64>,
    inv_c: Option<f64>,
    hold_lsb: f64,
    inv_lsb: f64,
    mismatch: bool,
    ill: bool,
}

struct PointResult {
    fixed: Sample,
    f32: Sample,
    hot: Sample,
    evaluated: bool,
    refused: bool,
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs() * 1e6
}

fn compare_point(stage: &Stage) -> PointResult {
    let sf = StageF::from(stage);
    let reference = reference::evaluate(&sf);
    let fixed = Model::new(stage).and_then(|m| m.evaluate().map(|e| (m, e)));
    let single = float::Model::new(stage).and_then(|m| m.evaluate().map(|e| (m, e)));
    let mut out = PointResult {
        fixed: Sample::default(),
        f32: Sample::default(),
        hot: Sample::default(),
        evaluated: false,
        refused: false,
    };
    let Ok(r) = reference else {
        out.fixed.mismatch = fixed.is_ok() && !near_edge(stage);
        out.f32.mismatch = single.is_ok() && !near_edge(stage);
        out.refused = fixed.is_err();
        return out;
    };
    // Points whose hold sits at the 1 µs / 24 h edge may be refused by one side only.
    let in_domain = r.hold >= 1.0e-6 * (1.0 + 1e-6) && r.hold <= 86_400.0 * (1.0 - 1e-6);
    let measured = Span::from_ns_q32((r.hold * 1e9 * 4_294_967_296.0) as u128);
    match fixed {
        Ok((m, e)) => {
            let h = secs(e.hold);
            out.fixed.hold = Some(rel(h, r.hold));
            out.fixed.hold_lsb = ((h - r.hold) * 1e9 * 4_294_967_296.0).abs();
            if r.on_latency > 1e-12 {
                out.fixed.latency = Some(rel(secs(e.on_latency), r.on_latency));
            }
            match measured.map(|h| m.inverse_c(h)) {
                Some(Ok(ic)) => {
                    let c = ic.c_ff_q32 as f64 / 4_294_967_296.0;
                    out.fixed.inv_c = Some(rel(c, stage.c_ff as f64));
                    out.fixed.inv_lsb = ((c - stage.c_ff as f64) * 4_294_967_296.0).abs();
                }
                Some(Err(rc_model::Error::IllConditioned)) => out.fixed.ill = true,
                _ => {}
            }
            out.evaluated = true;
            out.hot = hot_path(stage, &r);
        }
        Err(_) => out.fixed.mismatch = in_domain,
    }
    match single {
        Ok((m, e)) => {
            out.f32.hold = Some(rel(secs(e.hold), r.hold));
            if r.on_latency > 1e-12 {
                out.f32.latency = Some(rel(secs(e.on_latency), r.on_latency));
            }
            match measured.map(|h| m.inverse_c(h)) {
                Some(Ok(ic)) => out.f32.inv_c = Some(rel(ic.c_ff_q32 as f64 / 4_294_967_296.0, stage.c_ff as f64)),
                Some(Err(rc_model::Error::IllConditioned)) => out.f32.ill = true,
                _ => {}
            }
        }
        Err(_) => out.f32.mismatch = in_domain,
    }
    out
}

/// Clock of the hot-path comparison, Hz: the finest the domain allows, so a
/// measured hold in whole ticks is as fine as a chip could give it.
const HOT_CLOCK_HZ: u32 = 200_000_000;

/// The hot path at the stage's own temperature against the reference: the
/// hold, and the effective C from the reference hold rounded to whole ticks
/// (for a full press the reference's own C for that hold is `C·ticks/(hold·f)`).
fn hot_path(stage: &Stage, r: &reference::EvalF) -> Sample {
    let mut out = Sample::default();
    let spread = rc_model::window::Spread { ref_mdeg_c: stage.temp_mdeg_c, ..Default::default() };
    let Ok(p) = rc_model::Prepared::prepare(stage, &spread, HOT_CLOCK_HZ) else {
        out.mismatch = true;
        return out;
    };
    let clock = f64::from(HOT_CLOCK_HZ);
    if let Ok(h) = p.hold_at(stage.temp_mdeg_c) {
        out.hold = Some(rel(norm_f64(h) / clock, r.hold));
    }
    let full = (r.charge_target - r.cap_at_release).abs() <= 1e-12 * r.charge_target;
    let ticks = (r.hold * clock).round();
    if full && ticks >= 1.0 && ticks < 2f64.powi(62) {
        if let Ok(e) = p.inverse_at(ticks as u64, stage.temp_mdeg_c) {
            let want = stage.c_ff as f64 * ticks / (r.hold * clock);
            out.inv_c = Some(rel(norm_f64(e.c_ff), want));
        }
    }
    out
}

/// A [`rc_model::Norm`] as `f64` (exact: 32 mantissa bits).
#[must_use]
pub fn norm_f64(n: rc_model::Norm) -> f64 {
    f64::from(n.mantissa()) * 2f64.powi(n.exponent())
}

/// Whether a refused stage sits where rounding can decide refusal (hold near
/// the domain edge, or charge target within 1 ppm of the rising threshold).
fn near_edge(stage: &Stage) -> bool {
    let sf = StageF::from(stage);
    let v = sf.charge_target();
    ((v - sf.rise) / sf.rise).abs() < 1e-6 || {
        let mut wide = sf;
        wide.press *= 1.0 + 1e-6;
        reference::evaluate(&wide).is_ok()
    }
}

fn stat(values: Vec<(f64, f64, usize)>, stages: &[Stage]) -> Stat {
    let mut v = values;
    let points = v.len();
    let worst = v.iter().copied().fold((0.0f64, 0.0f64, usize::MAX), |a, b| if b.0 > a.0 { b } else { a });
    let max_lsb = v.iter().map(|x| x.1).fold(0.0, f64::max);
    v.sort_by(|a, b| a.0.total_cmp(&b.0));
    let p999 = if points == 0 { 0.0 } else { v.get(((points as f64) * 0.999) as usize).map_or(worst.0, |x| x.0) };
    Stat {
        max_rel_ppm: worst.0,
        p999_rel_ppm: p999,
        max_lsb,
        points,
        worst_case: stages.get(worst.2).map_or_else(String::new, |s| format!("{s:?}")),
    }
}

fn backend(results: &[PointResult], stages: &[Stage], pick: impl Fn(&PointResult) -> &Sample) -> Backend {
    let col = |f: &dyn Fn(&Sample) -> Option<(f64, f64)>| {
        results.iter().enumerate().filter_map(|(i, r)| f(pick(r)).map(|(a, b)| (a, b, i))).collect::<Vec<_>>()
    };
    Backend {
        hold: stat(col(&|s| s.hold.map(|h| (h, s.hold_lsb))), stages),
        on_latency: stat(col(&|s| s.latency.map(|l| (l, 0.0))), stages),
        inverse_c: stat(col(&|s| s.inv_c.map(|c| (c, s.inv_lsb))), stages),
        verdict_mismatches: results.iter().filter(|r| pick(r).mismatch).count(),
        inverse_ill_conditioned: results.iter().filter(|r| pick(r).ill).count(),
    }
}

/// Runs the sweep: the grid plus `random_points` random stages from `seed`.
/// `progress` is called now and then with (done, total).
pub fn run(random_points: usize, seed: u64, progress: &(dyn Fn(usize, usize) + Sync)) -> Report {
    let mut stages = grid();
    stages.extend((0..random_points as u64).map(|i| random_stage(seed, i)));
    let total = stages.len();
    let done = std::sync::atomic::AtomicUsize::new(0);
    let results: Vec<PointResult> = stages
        .par_iter()
        .map(|s| {
            let r = compare_point(s);
            let n = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
            if n.is_multiple_of(10_000) {
                progress(n, total);
            }
            r
        })
        .collect();
    let hot_col = |f: &dyn Fn(&Sample) -> Option<f64>| {
        results.iter().enumerate().filter_map(|(i, r)| f(&r.hot).map(|a| (a, 0.0, i))).collect::<Vec<_>>()
    };
    Report {
        fixed: backend(&results, &stages, |r| &r.fixed),
        hot: HotPath {
            hold: stat(hot_col(&|s| s.hold), &stages),
            inverse_c: stat(hot_col(&|s| s.inv_c), &stages),
            refused: results.iter().filter(|r| r.hot.mismatch).count(),
        },
        f32: backend(&results, &stages, |r| &r.f32),
        cases: total,
        evaluated: results.iter().filter(|r| r.evaluated).count(),
        refused: results.iter().filter(|r| r.refused).count(),
        seed,
    }
}

/// The text report of a sweep.
#[must_use]
pub fn render_text(r: &Report) -> String {
    use std::fmt::Write as _;
    let mut out = String::new();
    let _ = writeln!(
        out,
        "model agreement over {} stages (seed {}): {} evaluated, {} refused by every model",
        r.cases, r.seed, r.evaluated, r.refused
    );
    for (name, b) in [("fixed point", &r.fixed), ("f32", &r.f32)] {
        let _ = writeln!(out, "\n  {name} against the f64 reference");
        let _ = writeln!(out, "    {:<16} {:>14} {:>14} {:>10}", "", "max (ppm)", "99.9 % (ppm)", "points");
        for (label, s) in [("hold", &b.hold), ("turn-on latency", &b.on_latency), ("inverse C", &b.inverse_c)] {
            let _ =
                writeln!(out, "    {:<16} {:>14.6} {:>14.6} {:>10}", label, s.max_rel_ppm, s.p999_rel_ppm, s.points);
        }
        let _ = writeln!(
            out,
            "    refusals that differ from the reference: {}; inverses refused as ill-conditioned: {}",
            b.verdict_mismatches, b.inverse_ill_conditioned
        );
    }
    let _ = writeln!(out, "\n  fixed-point hot path (prepared stage, 32/64-bit) against the f64 reference");
    let _ = writeln!(out, "    {:<16} {:>14} {:>14} {:>10}", "", "max (ppm)", "99.9 % (ppm)", "points");
    for (label, s) in [("hold", &r.hot.hold), ("inverse C", &r.hot.inverse_c)] {
        let _ = writeln!(out, "    {:<16} {:>14.6} {:>14.6} {:>10}", label, s.max_rel_ppm, s.p999_rel_ppm, s.points);
    }
    let _ = writeln!(
        out,
        "    inverse C over full presses only, from holds in whole ticks of {} MHz; stages prepare refused: {}",
        HOT_CLOCK_HZ / 1_000_000,
        r.hot.refused
    );
    let _ = writeln!(out, "\n  worst fixed-point hold at: {}", r.fixed.hold.worst_case);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_small_sweep_agrees_within_the_published_bounds() {
        let r = run(200, 7, &|_, _| {});
        assert_eq!(r.fixed.verdict_mismatches, 0);
        assert!(r.fixed.hold.max_rel_ppm < 1.0, "{}", r.fixed.hold.max_rel_ppm);
        assert!(render_text(&r).contains("ppm"));
        // The same seed gives the same points.
        assert_eq!(random_stage(7, 3), random_stage(7, 3));
    }
}
