//! `rchold spread`: how the hold spreads over the parts' tolerances —
//! worst case over every corner, root-sum-square, and Monte Carlo with
//! percentiles and process capability against a specification window.
//!
//! Monte Carlo draws every toleranced parameter independently: uniformly
//! within its tolerance, or normally with the tolerance at `k_sigma`
//! standard deviations (clipped to the tolerance). Thresholds are drawn
//! inside their bands, temperature uniformly over the file's range. Sample
//! `i` uses its own generator seeded from (seed, i), so a run is
//! reproducible whatever the number of threads. Each sample is evaluated by
//! the fixed-point model.

use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use rayon::prelude::*;
use rc_model::window::{Spread, ThresholdSpread, Tolerance, Window};
use rc_model::{Diode, Model, Stage};
use serde::Serialize;

use crate::eval::secs;
use crate::stats::{self, Capability};

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

fn draw_band<R: Rng>(rng: &mut R, band: (u32, u32), dist: Dist) -> u32 {
    let (lo, hi) = (f64::from(band.0), f64::from(band.1));
    let mid = 0.5 * (lo + hi);
    let half = 0.5 * (hi - lo);
    let f = draw_factor(rng, Tolerance::symmetric(1_000_000), dist) - 1.0;
    round_u32(mid + f * half)
}

/// One random board.
#[must_use]
pub fn draw(nominal: &Stage, spread: &Spread, dist: Dist, seed: u64, index: u64) -> Stage {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed ^ index.wrapping_mul(0x9E37_79B9_7F4A_7C15));
    let mut s = *nominal;
    s.r_mohm = round_u64(s.r_mohm as f64 * draw_factor(&mut rng, spread.r, dist));
    s.c_ff = round_u64(s.c_ff as f64 * draw_factor(&mut rng, spread.c, dist));
    let k = draw_factor(&mut rng, spread.vdd, dist);
    s.vdd_uv = round_u32(f64::from(s.vdd_uv) * k);
    s.driver_mohm = round_u64(s.driver_mohm as f64 * draw_factor(&mut rng, spread.driver, dist));
    let d = draw_factor(&mut rng, spread.diode, dist);
    s.diode = match s.diode {
        Diode::Drop { drop_uv } => Diode::Drop { drop_uv: round_u32(f64::from(drop_uv) * d) },
        Diode::Junction { is_fa, n_milli, rs_mohm } => {
            Diode::Junction { is_fa: ((is_fa as f64) * d).round().max(1.0) as u64, n_milli, rs_mohm }
        }
    };
    // Thresholds are fractions of the supply: bands and the stage's own scale with it.
    let scale = |v: u32| round_u32(f64::from(v) * k);
    match spread.thresholds {
        None => {
            s.rise_uv = scale(s.rise_uv);
            s.fall_uv = scale(s.fall_uv);
        }
        Some(ThresholdSpread::Single { min_uv, max_uv }) => {
            s.rise_uv = scale(draw_band(&mut rng, (min_uv, max_uv), dist));
            s.fall_uv = s.rise_uv;
        }
        Some(ThresholdSpread::Schmitt { rise_uv, fall_uv }) => {
            s.rise_uv = scale(draw_band(&mut rng, rise_uv, dist));
            s.fall_uv = scale(draw_band(&mut rng, fall_uv, dist)).min(s.rise_uv);
        }
    }
    if let Some((lo, hi)) = spread.temp_mdeg_c {
        let t = rng.random_range(lo..=hi);
        if let Ok(at) = spread.at_temperature(&s, t) {
            s = at;
        }
    }
    s
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
    /// The f32 backend's hold-only path: about 20 ppm from the fixed-point
    /// model, far below Monte Carlo error, and several times faster.
    Fast,
}

fn sample_hold(s: &Stage, how: Eval) -> f64 {
    match how {
        Eval::Exact => hold_s(s).unwrap_or(f64::NAN),
        Eval::Fast => rc_model::float::Model::new(s).and_then(|m| m.hold_seconds()).map_or(f64::NAN, f64::from),
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

/// [`monte_carlo`] with the choice of model for the samples.
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
    let chunk = 65_536usize;
    let mut v = vec![f64::NAN; samples];
    v.par_chunks_mut(chunk).enumerate().for_each(|(c, out)| {
        let start = c * chunk;
        for (k, slot) in out.iter_mut().enumerate() {
            *slot = sample_hold(&draw(nominal, spread, dist, seed, (start + k) as u64), how);
        }
        let n = done.fetch_add(out.len(), std::sync::atomic::Ordering::Relaxed) + out.len();
        progress(n, samples);
    });
    let before = v.len();
    v.retain(|h| !h.is_nan());
    let refused = before - v.len();
    let (mean, sd) = stats::mean_sd(&v);
    let (min_s, max_s) = v
        .par_iter()
        .fold(|| (f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)))
        .reduce(|| (f64::INFINITY, f64::NEG_INFINITY), |(a, b), (c, d)| (a.min(c), b.max(d)));
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
    let stat = order_statistics(&v, &ranks, min_s, max_s);
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

/// The `ranks`-th smallest values of `v` (0-based), exactly, without sorting
/// `v`: a parallel histogram pass finds the bin each rank falls in, a second
/// pass collects only those bins' values, which are sorted.
fn order_statistics(v: &[f64], ranks: &[usize], min: f64, max: f64) -> Vec<f64> {
    const BINS: usize = 1 << 16;
    if v.is_empty() || ranks.is_empty() {
        return vec![f64::NAN; ranks.len()];
    }
    let span = max - min;
    let bin =
        |x: f64| if span > 0.0 { (((x - min) / span) * BINS as f64).clamp(0.0, (BINS - 1) as f64) as usize } else { 0 };
    let counts = v
        .par_chunks(1 << 16)
        .fold(
            || vec![0u32; BINS],
            |mut h, chunk| {
                for &x in chunk {
                    if let Some(c) = h.get_mut(bin(x)) {
                        *c += 1;
                    }
                }
                h
            },
        )
        .reduce(
            || vec![0u32; BINS],
            |mut a, b| {
                for (x, y) in a.iter_mut().zip(b) {
                    *x += y;
                }
                a
            },
        );
    // For each rank: its bin and its position among that bin's values.
    let mut starts = Vec::with_capacity(BINS);
    let mut acc = 0usize;
    for &c in &counts {
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
                for &x in chunk {
                    if let Some(&s) = slot.get(bin(x)) {
                        if let Some(list) = m.get_mut(usize::from(s)) {
                            list.push(x);
                        }
                    }
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

/// The report, as text or JSON.
#[must_use]
pub fn render(
    name: &str,
    m: &Monte,
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
