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

pub mod aged;
mod blocks;
mod board;
mod lanes;
mod order;
pub mod sensitivity;

use rand::SeedableRng;
use rand_xoshiro::Xoshiro256PlusPlus;
use rayon::prelude::*;
use rc_model::window::{Aging, Spread, ThresholdSpread, Window};
use rc_model::{Model, Stage};
use serde::Serialize;

use crate::fmt::secs;
use crate::report::chart::{self, Histogram, Ink, Mark};
use crate::report::stats::{self, Capability};
pub use blocks::BLOCK;
use blocks::{plan, run_block, Columns};
use board::{draw_factors, stage_from};
use order::{order_statistics, Bins, BlockSum, BINS};

/// How each tolerance is read.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Dist {
    /// Uniform over the tolerance.
    Uniform,
    /// Normal with the tolerance at `k_sigma` standard deviations, clipped there
    /// (a draw beyond an end is set to that end).
    Normal {
        /// How many σ the tolerance spans.
        k_sigma: f64,
    },
    /// Normal truncated at `k_sigma` standard deviations: drawn by the inverse
    /// CDF between the ends, so no mass piles up at them (parts screened to
    /// their tolerance).
    Truncated {
        /// How many σ the tolerance spans.
        k_sigma: f64,
    },
}

/// The standard normal CDF, through statrs' erfc (accurate in both tails).
#[must_use]
pub fn normal_cdf(z: f64) -> f64 {
    0.5 * statrs::function::erf::erfc(-z / std::f64::consts::SQRT_2)
}

/// A standard normal truncated to (−k, k), from a uniform `u` in [0, 1):
/// Φ⁻¹(Φ(−k) + u·(Φ(k) − Φ(−k))), Φ⁻¹ through statrs' inverse erfc.
#[must_use]
pub fn truncated_normal(u: f64, k_sigma: f64) -> f64 {
    let lo = normal_cdf(-k_sigma);
    let p = (lo + u * (1.0 - 2.0 * lo)).clamp(f64::MIN_POSITIVE, 1.0 - f64::EPSILON);
    (-std::f64::consts::SQRT_2 * statrs::function::erf::erfc_inv(2.0 * p)).clamp(-k_sigma, k_sigma)
}

/// σ of a standard normal truncated to (−k, k): √(1 − 2kφ(k)/(2Φ(k) − 1)).
#[must_use]
pub fn truncated_sd(k_sigma: f64) -> f64 {
    let phi = (-0.5 * k_sigma * k_sigma).exp() / (2.0 * std::f64::consts::PI).sqrt();
    (1.0 - 2.0 * k_sigma * phi / (2.0 * normal_cdf(k_sigma) - 1.0)).max(0.0).sqrt()
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

/// One random board, from its own generator seeded from (`seed`, `index`).
#[must_use]
pub fn draw(nominal: &Stage, spread: &Spread, dist: Dist, seed: u64, index: u64) -> Stage {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed ^ index.wrapping_mul(0x9E37_79B9_7F4A_7C15));
    stage_from(nominal, spread, &draw_factors(&mut rng, spread, dist, nominal.rise_uv))
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
    /// The closed form in `f64` on the drawn values, four boards at a time
    /// (fixed-drop diode, every corner of the spread inside the model's
    /// domain; a press not certainly full goes to the fixed-point model),
    /// else the `f32` backend board by board: within 1e-4 of the fixed-point
    /// model on every sample, far below Monte Carlo error, and many times faster.
    Fast,
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
    let mean = if total.moments.n == 0 { f64::NAN } else { total.moments.mean };
    let sd = total.moments.sd();
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

/// Root-sum-square spread: the root of the sum of every parameter's
/// first-order variance ([`sensitivity::first_order`]). Returns (nominal
/// hold, σ), s.
///
/// # Errors
/// The model's error at the first corner it cannot evaluate.
pub fn rss(nominal: &Stage, spread: &Spread, dist: Dist) -> Result<(f64, f64), rc_model::Error> {
    let h0 = Model::new(nominal).and_then(|m| m.evaluate()).map(|e| secs(e.hold))?;
    let shares = sensitivity::first_order(nominal, spread, dist)?;
    Ok((h0, shares.iter().map(|s| s.sigma_s * s.sigma_s).sum::<f64>().sqrt()))
}

/// Process capability of the Monte Carlo holds against a spec (NIST/SEMATECH
/// e-Handbook §6.1.6).
#[must_use]
pub fn capability(m: &Monte, lsl_s: f64, usl_s: f64) -> Capability {
    stats::capability(lsl_s, usl_s, m.mean_s, m.sd_s)
}

/// The capability of the simulated holds against a specification, both
/// ways, and which applies: Cp/Cpk from mean and σ (NIST/SEMATECH
/// e-Handbook §6.1.6) for normal holds, the percentile method
/// ([`stats::percentile_capability`]) otherwise, decided by an
/// Anderson–Darling test at the 5 % level. Holds are bounded and skewed by
/// the logarithm in the hold, so they are often not normal.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SpecFit {
    /// Cp, Cpk … from mean and σ.
    pub moments: Capability,
    /// Cp, Cpk … from the 0.135 %, 50 % and 99.865 % points.
    pub percentile: Option<Capability>,
    /// The normality test on the simulated holds.
    pub normality: Option<stats::Normality>,
}

impl SpecFit {
    /// Of the Monte Carlo `m` against `lsl_s … usl_s`.
    #[must_use]
    pub fn of(m: &Monte, lsl_s: f64, usl_s: f64) -> SpecFit {
        let at = |p: f64| m.percentiles.iter().find(|(q, _)| (q - p).abs() < 1e-9).map(|&(_, v)| v);
        let percentile = match (at(0.135), at(50.0), at(99.865)) {
            (Some(a), Some(b), Some(c)) if a < b && b < c => Some(stats::percentile_capability(lsl_s, usl_s, a, b, c)),
            _ => None,
        };
        SpecFit { moments: capability(m, lsl_s, usl_s), percentile, normality: stats::anderson_darling(&m.holds) }
    }

    /// The one that applies: the moments' for normal holds, else the percentiles'.
    #[must_use]
    pub fn applies(&self) -> (&'static str, Capability) {
        match (self.normality, self.percentile) {
            (Some(n), Some(p)) if !n.normal => ("percentile", p),
            _ => ("moments", self.moments),
        }
    }
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
    let mark = |at: f64, what: &str, ink: Ink| Mark { at, label: format!("{what} {}", crate::fmt::si(at, "s")), ink };
    let mut marks = Vec::new();
    if let Some(win) = window {
        marks.push(mark(secs(win.min), "worst-case min", Ink::Corner));
        marks.push(mark(secs(win.max), "worst-case max", Ink::Corner));
    }
    if let Some((a, b)) = spec {
        marks.push(mark(a, "spec low", Ink::Limit));
        marks.push(mark(b, "spec high", Ink::Limit));
    }
    chart::histogram(&Histogram { title, quantity: "hold", unit: "s", lo, hi, bins: &counts, marks: &marks })
}

/// The shares of the variance as a bar chart (SVG).
#[must_use]
pub fn shares_svg(shares: &[sensitivity::Share], title: &str) -> String {
    let bars: Vec<(String, f64, Option<f64>)> =
        shares.iter().map(|s| (s.param.to_owned(), 100.0 * s.share, s.frozen_share.map(|f| 100.0 * f))).collect();
    chart::bars(&chart::Bars { title, quantity: "share of the hold's variance (%)", bars: &bars })
}

/// How old the Monte Carlo's capacitors are.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Parts {
    /// New parts, and no aging in the spread.
    New,
    /// New parts everywhere, although the stage file has an `[aging]` table
    /// (which `window` uses).
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
                "new parts in the worst case, root-sum-square and Monte Carlo alike; the file's [aging] ({}) is left out here (window uses it; --years Y ages every board)",
                match a {
                    Aging::Class2 { hours, .. } => format!("class 2, {hours} h"),
                    Aging::EndOfLife { loss_ppm } => format!("end of life, {} % lost", f64::from(loss_ppm) / 1e4),
                }
            )),
            Parts::Aged { years } => Some(format!(
                "every capacitor aged {years} years first, in the worst case, root-sum-square and Monte Carlo alike"
            )),
        }
    }
}

/// Everything `rchold spread` reports.
#[derive(Debug, Clone)]
pub struct Report<'a> {
    /// The stage's name.
    pub name: &'a str,
    /// The Monte Carlo.
    pub m: &'a Monte,
    /// How old the parts are.
    pub parts: Parts,
    /// Nominal hold, s.
    pub nominal_s: f64,
    /// Root-sum-square σ, s.
    pub rss_sd_s: f64,
    /// The worst case over every corner.
    pub window: Option<&'a Window>,
    /// The specification window, s.
    pub spec: Option<(f64, f64)>,
    /// Cp/Cpk against the specification, both ways.
    pub cap: Option<&'a SpecFit>,
    /// Each parameter's part in the spread, largest first.
    pub shares: &'a [sensitivity::Share],
    /// How the input's thresholds are drawn (from [`threshold_model`]).
    pub thresholds: Option<&'static str>,
    /// How the tolerances are drawn.
    pub dist: Dist,
}

/// How a distribution draws a tolerance, in words.
#[must_use]
pub fn dist_text(dist: Dist) -> String {
    match dist {
        Dist::Uniform => "each tolerance drawn uniformly between its ends".into(),
        Dist::Truncated { k_sigma } => format!(
            "each tolerance drawn normal truncated at its ends, ±{k_sigma}σ (redrawn inside by the inverse CDF: \
             no mass at the ends, no board has a part outside its tolerance)"
        ),
        Dist::Normal { k_sigma } => {
            // Two-sided normal tail beyond ±kσ.
            let beyond = statrs::function::erf::erfc(k_sigma / std::f64::consts::SQRT_2) * 100.0;
            format!(
                "each tolerance drawn normal with its ends at ±{k_sigma}σ and cut there: the {beyond:.2} % of draws beyond \
                 an end are set to that end (no board has a part outside its tolerance)"
            )
        }
    }
}

/// What the Monte Carlo assumes about the input's thresholds, in words, or
/// none when they do not move.
#[must_use]
pub fn threshold_model(spread: &Spread) -> Option<&'static str> {
    match spread.thresholds {
        Some(ThresholdSpread::Single { .. }) => Some(
            "plain input: each board's switching point drawn around the typical point, σ a quarter of the way to the \
             nearer end of the family's band and cut there (from memory: parts cluster near the typical point; the band \
             is a guarantee); the band's ends stay in the worst case",
        ),
        Some(ThresholdSpread::Schmitt { .. }) => {
            Some("Schmitt input: each threshold drawn across its band as the tolerances are (bands from memory)")
        }
        None => None,
    }
}

/// The report, as text or JSON.
#[must_use]
pub fn render(r: &Report<'_>, json: bool) -> String {
    use crate::fmt::{corner_text, si};
    use std::fmt::Write as _;
    let Report { name, m, parts, nominal_s, rss_sd_s, window, spec, cap, shares, thresholds, dist } = *r;
    if json {
        let v = serde_json::json!({
            "stage": name,
            "nominal_s": nominal_s,
            "worst_case": window.map(|w| serde_json::json!({
                "min_s": secs(w.min), "max_s": secs(w.max),
                "min_corner": corner_text(w.min_corner), "max_corner": corner_text(w.max_corner), "corners": w.corners,
            })),
            "rss_sd_s": rss_sd_s,
            "sensitivity": shares,
            "monte_carlo": m,
            "monte_carlo_age_years": match parts { Parts::Aged { years } => years, _ => 0.0 },
            "parts": parts.text().unwrap_or_else(|| "new parts".to_owned()),
            "thresholds": thresholds,
            "draws": dist_text(dist),
            "spec": spec.map(|(a, b)| serde_json::json!({"low_s": a, "high_s": b})),
            "capability": cap.map(|f| {
                let c = f.moments;
                serde_json::json!({
                    "cp": c.cp, "cpk": c.cpk, "cpu": c.cpu, "cpl": c.cpl, "k": c.k,
                    "percentile": f.percentile, "normality": f.normality, "applies": f.applies().0,
                })
            }),
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
    if !shares.is_empty() {
        let checked = shares.iter().any(|s| s.frozen_share.is_some());
        let _ = writeln!(
            o,
            "    share of the variance (first order){}",
            if checked {
                format!(" · Monte Carlo with it frozen (± {:.1} %)", 100.0 * sensitivity::freezing_error(m.samples))
            } else {
                String::new()
            }
        );
        for sh in shares {
            let _ = writeln!(
                o,
                "    {:<7} {:>6.1} %{}  elasticity {}",
                sh.param,
                100.0 * sh.share,
                sh.frozen_share.map_or_else(String::new, |f| format!(" · {:>6.1} %", 100.0 * f)),
                sh.elasticity.map_or_else(|| "–".to_owned(), |e| format!("{e:+.3} %/%"))
            );
        }
    }
    line(
        &mut o,
        &format!("Monte Carlo, {} boards", m.samples),
        format!("mean {} \u{b7} σ {} \u{b7} {} refused", si(m.mean_s, "s"), si(m.sd_s, "s"), m.refused),
    );
    if let Some(t) = parts.text() {
        let _ = writeln!(o, "    {t}");
    }
    let _ = writeln!(o, "    {}", dist_text(dist));
    if let Some(t) = thresholds {
        let _ = writeln!(o, "    {t}");
    }
    for (p, v) in &m.percentiles {
        let _ = writeln!(o, "    {:>7} % of boards hold less than {}", format!("{p}"), si(*v, "s"));
    }
    if let (Some((a, b)), Some(c)) = (spec, cap) {
        line(
            &mut o,
            &format!("against {} to {}", si(a, "s"), si(b, "s")),
            format!("Cp {:.3} \u{b7} Cpk {:.3} (NIST/SEMATECH e-Handbook §6.1.6)", c.moments.cp, c.moments.cpk),
        );
        if let Some(p) = c.percentile {
            let _ = writeln!(
                o,
                "    percentile method (0.135 / 50 / 99.865 % points, ISO 22514-2): Cp {:.3} \u{b7} Cpk {:.3}",
                p.cp, p.cpk
            );
        }
        if let Some(n) = c.normality {
            let _ = writeln!(
                o,
                "    Anderson–Darling A*² {:.3}, p {:.4}: the holds are {}; the {} figures apply",
                n.a2_star,
                n.p,
                if n.normal { "normal at the 5 % level" } else { "not normal" },
                if c.applies().0 == "percentile" { "percentile method's" } else { "mean-and-σ" }
            );
        }
        let outside = m.holds.iter().filter(|&&v| v < a || v > b).count();
        let _ = writeln!(o, "    {outside} of {} simulated boards fall outside", m.holds.len());
    }
    let _ = writeln!(o, "\n  note: {}", crate::fmt::CAUTION);
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_monte_carlo_lies_inside_the_worst_case_and_is_seeded() {
        let sf = crate::testing::example();
        let w = sf.spread.window(&sf.stage).unwrap_or_else(|e| panic!("{e:?}"));
        let m = monte_carlo_with(&sf.stage, &sf.spread, Dist::Uniform, 4_000, 3, Eval::Fast, &|_, _| {});
        assert_eq!(m.samples, 4_000);
        assert!(m.min_s >= secs(w.min) - 1e-9 && m.max_s <= secs(w.max) + 1e-9);
        let again = monte_carlo_with(&sf.stage, &sf.spread, Dist::Uniform, 4_000, 3, Eval::Fast, &|_, _| {});
        assert_eq!(m.mean_s.to_bits(), again.mean_s.to_bits());
        let (rss_mean, rss_sd) = rss(&sf.stage, &sf.spread, Dist::Uniform).unwrap_or((0.0, 0.0));
        assert!((rss_mean - m.mean_s).abs() < 3.0 * rss_sd);
    }

    /// The truncated normal: its ends at ±k, its middle at 0, and its σ
    /// the closed form's (against a direct estimate from 200,000 draws).
    #[test]
    fn the_truncated_normal_stays_inside_with_the_closed_form_sigma() {
        assert!(truncated_normal(0.5, 3.0).abs() < 1e-12);
        assert!((truncated_normal(0.0, 3.0) + 3.0).abs() < 1e-6 && truncated_normal(1.0 - 1e-16, 3.0) <= 3.0);
        let n = 200_000;
        let z: Vec<f64> = (0..n).map(|i| truncated_normal((f64::from(i) + 0.5) / f64::from(n), 2.0)).collect();
        let sd = (z.iter().map(|x| x * x).sum::<f64>() / f64::from(n)).sqrt();
        assert!((sd / truncated_sd(2.0) - 1.0).abs() < 1e-3, "{sd} against {}", truncated_sd(2.0));
        // Far out it is the plain normal.
        assert!((truncated_sd(10.0) - 1.0).abs() < 1e-12);
    }

    /// Holds spread over uniform tolerances are bounded, not normal: the
    /// normality test says so and the percentile method's figures apply; for
    /// the nearly normal ones of normal parts the moments' may.
    #[test]
    fn bounded_holds_get_the_percentile_capability() {
        let sf = crate::testing::example();
        let m = monte_carlo_with(&sf.stage, &sf.spread, Dist::Uniform, 20_000, 5, Eval::Fast, &|_, _| {});
        let f = SpecFit::of(&m, 0.5, 1.1);
        assert!(f.normality.is_some_and(|n| !n.normal && n.p < 0.05), "{:?}", f.normality);
        assert_eq!(f.applies().0, "percentile");
        let p = f.percentile.unwrap_or(f.moments);
        assert!((p.cp - f.moments.cp).abs() > 0.01, "percentile {p:?}, moments {:?}", f.moments);
    }

    /// A plain (non-Schmitt) input: the Monte Carlo is a population of boards
    /// around the nominal, not a uniform draw over the family's whole band
    /// (which put the mean 36 % above nominal for this stage), and the
    /// root-sum-square σ describes the same population.
    #[test]
    fn a_plain_input_population_is_centred_on_the_nominal() {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/tidewatch-powerhold.toml");
        let sf = crate::stage::file::load(&path).unwrap_or_else(|e| panic!("{e}"));
        assert!(threshold_model(&sf.spread).is_some_and(|t| t.starts_with("plain input")));
        let nominal = secs(sf.nominal().unwrap_or_else(|e| panic!("{e}")).hold);
        for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }] {
            let m = monte_carlo_with(&sf.stage, &sf.spread, dist, 20_000, 11, Eval::Fast, &|_, _| {});
            assert!((m.mean_s / nominal - 1.0).abs() < 0.01, "{dist:?}: mean {} against nominal {nominal}", m.mean_s);
            let (_, rss_sd) = rss(&sf.stage, &sf.spread, dist).unwrap_or((0.0, 0.0));
            assert!((rss_sd / m.sd_s - 1.0).abs() < 0.1, "{dist:?}: RSS σ {rss_sd}, Monte Carlo σ {}", m.sd_s);
        }
    }
}
