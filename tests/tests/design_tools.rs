//! The design tools: worst case, root-sum-square and Monte Carlo against each
//! other and against reference distributions (the `statrs` crate).

use host_check::design::spread::{self, Dist};
use rc_model::window::{Spread, Tempco, ThresholdSpread, Tolerance};
use rc_model::{Model, Stage};
use statrs::distribution::{ContinuousCDF, Normal, Uniform};

fn stage() -> Stage {
    rchold_tests::backlight_stage(1_000_000_000, 100_000_000)
}

fn nominal_hold() -> f64 {
    spread::hold_s(&stage()).unwrap_or(f64::NAN)
}

/// Invariant: the worst case over every corner contains every Monte Carlo board.
#[test]
fn worst_case_contains_every_monte_carlo_sample() {
    let sp = Spread {
        r: Tolerance::symmetric(10_000),
        c: Tolerance { minus_ppm: 200_000, plus_ppm: 800_000 },
        vdd: Tolerance::symmetric(50_000),
        diode: Tolerance::symmetric(80_000),
        driver: Tolerance::symmetric(300_000),
        thresholds: Some(ThresholdSpread::Schmitt { rise_uv: (2_600_000, 3_500_000), fall_uv: (1_500_000, 2_400_000) }),
        temp_mdeg_c: Some((-20_000, 70_000)),
        tempco: Tempco { r_ppm_per_c: 100, c_ppm_per_c: -750, ..Tempco::default() },
        ..Spread::default()
    };
    let w = sp.window(&stage()).unwrap_or_else(|f| panic!("{f:?}"));
    let (lo, hi) = (host_check::fmt::secs(w.min), host_check::fmt::secs(w.max));
    for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }] {
        let m = spread::monte_carlo(&stage(), &sp, dist, 50_000, 9, &|_, _| {});
        assert_eq!(m.refused, 0);
        assert!(
            m.min_s >= lo * (1.0 - 1e-9) && m.max_s <= hi * (1.0 + 1e-9),
            "{dist:?}: {} … {} outside {lo} … {hi}",
            m.min_s,
            m.max_s
        );
        // …and reaches well into it.
        assert!(m.max_s - m.min_s > 0.5 * (hi - lo), "{dist:?}: {} … {}", m.min_s, m.max_s);
    }
}

/// Invariant: for small tolerances the root-sum-square σ equals the Monte Carlo σ.
#[test]
fn rss_sigma_matches_monte_carlo_for_small_tolerances() {
    let sp = Spread {
        r: Tolerance::symmetric(10_000),
        c: Tolerance::symmetric(20_000),
        vdd: Tolerance::symmetric(10_000),
        diode: Tolerance::symmetric(20_000),
        ..Spread::default()
    };
    for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }] {
        let (h0, sd) = spread::rss(&stage(), &sp, dist).unwrap_or_else(|e| panic!("{e}"));
        let m = spread::monte_carlo(&stage(), &sp, dist, 200_000, 3, &|_, _| {});
        assert!((h0 - nominal_hold()).abs() < 1e-12);
        assert!((sd - m.sd_s).abs() < 0.02 * sd, "{dist:?}: RSS {sd} vs MC {}", m.sd_s);
        assert!((m.mean_s - h0).abs() < 0.002 * h0, "{dist:?}: mean {} vs {h0}", m.mean_s);
    }
}

/// Percentiles of a known distribution: with only R toleranced, the hold is
/// R·C·ln(…) and so inherits R's distribution (the R-dependence of the ln
/// term through the 50 Ω driver is 50 ppm). Compared with `statrs` quantiles
/// of the uniform and normal distributions.
#[test]
fn percentiles_match_reference_quantiles() {
    let h0 = nominal_hold();
    let n = 400_000;
    let sp = Spread { r: Tolerance::symmetric(100_000), ..Spread::default() };
    let m = spread::monte_carlo(&stage(), &sp, Dist::Uniform, n, 21, &|_, _| {});
    let u = Uniform::new(0.9 * h0, 1.1 * h0).unwrap_or_else(|e| panic!("{e}"));
    for (p, v) in &m.percentiles {
        let want = u.inverse_cdf(p / 100.0);
        assert!((v - want).abs() < 0.002 * h0, "uniform {p} %: {v} vs {want}");
    }
    let m = spread::monte_carlo(&stage(), &sp, Dist::Normal { k_sigma: 3.0 }, n, 22, &|_, _| {});
    let g = Normal::new(h0, 0.1 * h0 / 3.0).unwrap_or_else(|e| panic!("{e}"));
    for (p, v) in m.percentiles.iter().filter(|(p, _)| (1.0..=99.0).contains(p)) {
        let want = g.inverse_cdf(p / 100.0);
        assert!((v - want).abs() < 0.002 * h0, "normal {p} %: {v} vs {want}");
    }
}

/// Results do not depend on how the work is split across threads.
#[test]
fn monte_carlo_is_deterministic_for_a_seed() {
    let sp = Spread { r: Tolerance::symmetric(10_000), c: Tolerance::symmetric(100_000), ..Spread::default() };
    let a = spread::monte_carlo(&stage(), &sp, Dist::Uniform, 100_000, 5, &|_, _| {});
    let pool = rayon::ThreadPoolBuilder::new().num_threads(1).build().unwrap_or_else(|e| panic!("{e}"));
    let b = pool.install(|| spread::monte_carlo(&stage(), &sp, Dist::Uniform, 100_000, 5, &|_, _| {}));
    assert_eq!(a.holds, b.holds);
    // The fast path too, and its moments and percentiles to the bit.
    for dist in [Dist::Uniform, Dist::Normal { k_sigma: 3.0 }] {
        let run = || spread::monte_carlo_with(&stage(), &sp, dist, 300_001, 5, spread::Eval::Fast, &|_, _| {});
        let (f, g) = (run(), pool.install(run));
        assert_eq!(f.holds, g.holds);
        assert_eq!((f.mean_s.to_bits(), f.sd_s.to_bits()), (g.mean_s.to_bits(), g.sd_s.to_bits()));
        assert_eq!(f.percentiles, g.percentiles);
    }
    let c = spread::monte_carlo(&stage(), &sp, Dist::Uniform, 100_000, 6, &|_, _| {});
    assert_ne!(a.holds, c.holds);
}

/// The histogram is a well-formed SVG with the window and spec marked.
#[test]
fn histogram_marks_window_and_spec() {
    let sp = Spread { r: Tolerance::symmetric(10_000), c: Tolerance::symmetric(100_000), ..Spread::default() };
    let m = spread::monte_carlo(&stage(), &sp, Dist::Uniform, 10_000, 5, &|_, _| {});
    let w = sp.window(&stage()).ok();
    let svg = spread::histogram_svg(&m, w.as_ref(), Some((0.6, 0.9)), "test <stage>");
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    assert_eq!(svg.matches("worst-case").count(), 2);
    assert_eq!(svg.matches("spec ").count(), 2);
    assert!(svg.contains("test &lt;stage&gt;"));
    assert!(Model::new(&stage()).is_ok());
}

/// Every candidate `pick` reports, recomputed by the independent f64
/// reference, holds within the asked tolerance, and its worst case does too.
#[test]
fn picked_parts_meet_the_target_by_the_reference() {
    use host_check::design::pick::{pick, template, Target};
    use host_check::reference::{evaluate, StageF};
    use host_check::stage::eseries::Series;
    let targets = [
        (2e-3, (0.4, 0.8), 5.0, "hc-schmitt"),
        (30.0, (0.4, 0.8), 3.3, "hc-schmitt"),
        (0.1, (0.5, 0.9), 12.0, "4000b-schmitt"),
        (5.0, (0.4, 0.8), 5.0, "hc-schmitt"),
    ];
    let mut checked = 0;
    for (hold, within, vdd, input) in targets {
        let (tpl, thresholds) = template(vdd, 0.6, 50.0, input).unwrap_or_else(|e| panic!("{e}"));
        let t = Target {
            hold_s: hold,
            within,
            r_series: Series::E24,
            r_tol_ppm: 10_000,
            c_series: Series::E12,
            template: tpl,
            vdd_tol_ppm: 50_000,
            thresholds,
            diode_tol_ppm: 100_000,
            temp_mdeg_c: Some((0, 70_000)),
            r_tempco_ppm_per_c: 100,
            pair: false,
            allow_high_r: false,
            output_limit_ma: 25,
        };
        let (found, _) = pick(&t);
        assert!(!found.is_empty(), "no parts for {hold} s within {within:?}");
        let (lo, hi) = (hold * (1.0 - within.0), hold * (1.0 + within.1));
        for c in found.iter().take(20) {
            let mut s = tpl;
            s.r_mohm = (c.r_ohm * 1e3).round() as u64;
            s.c_ff = (c.c_f * 1e15).round() as u64;
            let r = evaluate(&StageF::from(&s)).unwrap_or_else(|e| panic!("{e:?}"));
            assert!((lo..=hi).contains(&r.hold), "{c:?}: reference hold {}", r.hold);
            assert!((r.hold - c.hold_s).abs() < 1e-6 * r.hold, "{c:?}: {}", r.hold);
            assert!(c.min_s >= lo && c.max_s <= hi && c.min_s <= r.hold && r.hold <= c.max_s, "{c:?}");
            // Every value is a preferred number.
            let m = c.r_ohm / 10f64.powf(c.r_ohm.log10().floor());
            assert!(Series::E24.values().iter().any(|v| (v - m).abs() < 1e-9), "{c:?}");
            checked += 1;
        }
        // Best first.
        assert!(found.windows(2).all(|w| w.first().map(|a| a.margin) >= w.get(1).map(|b| b.margin)));
    }
    assert!(checked >= 20, "{checked}");
}

/// The fast path (vector closed form, else the f32 backend) gives the fixed-point model's statistics: every
/// sample within 1e-4 relative, so percentiles agree far inside Monte Carlo error.
#[test]
fn fast_and_exact_monte_carlo_agree() {
    use host_check::design::spread::{monte_carlo_with, Eval};
    let sp = Spread {
        r: Tolerance::symmetric(10_000),
        c: Tolerance::symmetric(100_000),
        vdd: Tolerance::symmetric(50_000),
        diode: Tolerance::symmetric(80_000),
        thresholds: Some(ThresholdSpread::Schmitt { rise_uv: (2_600_000, 3_500_000), fall_uv: (1_500_000, 2_400_000) }),
        ..Spread::default()
    };
    let mut short_press = stage();
    short_press.press_ns = 120_000; // 2.4 charge time constants: the partial-press path too
    let mut too_short = stage();
    too_short.press_ns = 60_000; // shorter than the turn-on latency on part of the boards
    for s in [stage(), short_press, too_short] {
        let exact = monte_carlo_with(&s, &sp, Dist::Uniform, 20_000, 4, Eval::Exact, &|_, _| {});
        let fast = monte_carlo_with(&s, &sp, Dist::Uniform, 20_000, 4, Eval::Fast, &|_, _| {});
        assert_eq!(exact.refused, fast.refused);
        if s.press_ns == 60_000 {
            assert!(exact.refused > 1_000 && exact.refused < 19_000, "{}", exact.refused);
        }
        assert_eq!(exact.holds.len(), fast.holds.len());
        for (a, b) in exact.holds.iter().zip(&fast.holds) {
            assert!((a - b).abs() <= 1e-4 * a, "{a} vs {b}");
        }
    }
}

/// The percentiles come from exact order statistics without a full sort:
/// they equal those of the sorted holds, to the bit.
#[test]
fn percentiles_are_exact_order_statistics() {
    let sp = Spread { r: Tolerance::symmetric(10_000), c: Tolerance::symmetric(100_000), ..Spread::default() };
    let m = spread::monte_carlo(&stage(), &sp, Dist::Uniform, 123_457, 8, &|_, _| {});
    let mut sorted = m.holds.clone();
    sorted.sort_by(f64::total_cmp);
    for (p, v) in &m.percentiles {
        let h = (sorted.len() - 1) as f64 * p / 100.0;
        let i = h.floor() as usize;
        let want = sorted[i] + (h - h.floor()) * (sorted[(i + 1).min(sorted.len() - 1)] - sorted[i]);
        assert_eq!(v.to_bits(), want.to_bits(), "{p} %");
    }
    assert_eq!((m.min_s, m.max_s), (sorted[0], sorted[sorted.len() - 1]));
}
