//! Property tests: the fixed-point model against the independent f64
//! reference, and inverse(forward(x)) = x.

use host_check::reference::{self, StageF};
use proptest::prelude::*;
use rc_model::{Diode, Model, Span, Stage};

fn stage_strategy() -> impl Strategy<Value = Stage> {
    (
        800_000u32..=18_000_000,
        6.0f64..11.0, // log10 R in mΩ
        5.0f64..13.0, // log10 C in fF
        50_000u32..=950_000,
        0.0f64..=1.0, // fall as a fraction of rise
        prop_oneof![
            (0u32..=900_000).prop_map(|d| Diode::Drop { drop_uv: d }),
            (0.0f64..7.0, 1_000u32..=2_000, 0u64..=10_000).prop_map(|(is, n, rs)| Diode::Junction {
                is_fa: 10f64.powf(is) as u64,
                n_milli: n,
                rs_mohm: rs
            }),
        ],
        3.0f64..6.0,                   // log10 driver mΩ
        prop::option::of(0.5f64..5.0), // log10 leak/R
        0.0f64..3.0,                   // press in log10 charge time constants
    )
        .prop_map(|(vdd_uv, lr, lc, rise_ppm, fall_frac, diode, ld, leak, lp)| {
            let r_mohm = 10f64.powf(lr) as u64;
            let c_ff = 10f64.powf(lc) as u64;
            let driver_mohm = 10f64.powf(ld) as u64;
            let diode = match diode {
                Diode::Drop { drop_uv } => Diode::Drop { drop_uv: drop_uv.min(vdd_uv / 2) },
                j => j,
            };
            let tau_c_ns = c_ff as f64 * 1e-15 * (driver_mohm as f64 * 1e-3 + 10.0) * 1e9;
            Stage {
                vdd_uv,
                r_mohm,
                c_ff,
                series_mohm: 0,
                charge_mohm: 0,
                driver_mohm,
                leak_mohm: leak.map(|l| (r_mohm as f64 * 10f64.powf(l)) as u64),
                leak_fa: 0,
                diode,
                rise_uv: rc_model::fraction_of(vdd_uv, rise_ppm),
                fall_uv: rc_model::fraction_of(
                    vdd_uv,
                    (f64::from(rise_ppm) * (0.05 + 0.95 * fall_frac)).max(50_000.0) as u32,
                ),
                press_ns: (tau_c_ns * 10f64.powf(lp)).clamp(1.0, 8.64e13) as u64,
                temp_mdeg_c: 25_000,
            }
        })
}

fn secs(s: Span) -> f64 {
    s.ns_q32() as f64 / 4_294_967_296.0 * 1e-9
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, .. ProptestConfig::default() })]

    /// Invariant: where both evaluate, the fixed-point hold and latency are
    /// within 0.1 ppm of the reference; where the reference refuses, the
    /// fixed-point model refuses with a typed error too (up to stages whose
    /// hold sits at the 1 µs / 24 h edge).
    #[test]
    fn fixed_hold_within_0_1_ppm_of_f64(stage in stage_strategy()) {
        let r = reference::evaluate(&StageF::from(&stage));
        let f = Model::new(&stage).and_then(|m| m.evaluate());
        match (r, f) {
            (Ok(r), Ok(f)) => {
                let rel = (secs(f.hold) - r.hold).abs() / r.hold;
                prop_assert!(rel < 1e-7, "hold {} vs {} ({rel:e})", secs(f.hold), r.hold);
                if r.on_latency > 1e-9 {
                    let rel = (secs(f.on_latency) - r.on_latency).abs() / r.on_latency;
                    prop_assert!(rel < 1e-7, "latency {} vs {}", secs(f.on_latency), r.on_latency);
                }
            }
            (Err(_), Ok(f)) => {
                let h = secs(f.hold);
                prop_assert!(!(2e-6..86_000.0).contains(&h), "reference refused but fixed gave {h} s");
            }
            (Ok(r), Err(e)) => {
                prop_assert!(!(2e-6..86_000.0).contains(&r.hold), "fixed refused ({e}) but reference gave {} s", r.hold);
            }
            (Err(_), Err(_)) => {}
        }
    }

    /// Invariant: inverse_c(forward(C)) = C to 0.1 ppm (or a typed refusal
    /// for presses too short to determine C).
    #[test]
    fn inverse_of_forward_returns_c(stage in stage_strategy()) {
        if let Ok(m) = Model::new(&stage) {
            if let Ok(e) = m.evaluate() {
                match m.inverse_c(e.hold) {
                    Ok(ic) => {
                        let c = ic.c_ff_q32 as f64 / 4_294_967_296.0;
                        let rel = (c - stage.c_ff as f64).abs() / stage.c_ff as f64;
                        prop_assert!(rel < 1e-7, "C {c} vs {}", stage.c_ff);
                        prop_assert!(ic.deviation_ppm().abs() <= 1);
                    }
                    Err(rc_model::Error::IllConditioned) => {}
                    Err(other) => prop_assert!(false, "inverse failed: {other}"),
                }
            }
        }
    }

    /// Invariant: a hold 20 % short inverts to C 20 % low on a fully charged stage.
    #[test]
    fn inverse_c_scales_with_a_full_press_hold(lr in 6.0f64..9.0, lc in 6.0f64..11.0) {
        let mut s = rchold_tests::ideal_stage(400_000);
        s.r_mohm = 10f64.powf(lr) as u64;
        s.c_ff = 10f64.powf(lc) as u64;
        s.driver_mohm = 10_000;
        s.press_ns = 86_400_000_000_000 / 2;
        let m = Model::new(&s).unwrap_or_else(|e| panic!("{e}"));
        if let Ok(e) = m.evaluate() {
            let short = Span::from_ns_q32(e.hold.ns_q32() / 5 * 4).unwrap_or(Span::ZERO);
            if short.ns() >= 1_000 {
                let ic = m.inverse_c(short).unwrap_or_else(|e| panic!("{e}"));
                prop_assert!((ic.deviation_ppm() + 200_000).abs() <= 1, "{}", ic.deviation_ppm());
            }
        }
    }

    /// Invariant: the inverse for R recovers R to 1 mΩ-bisection precision.
    #[test]
    fn inverse_of_forward_returns_r(lr in 6.0f64..11.0) {
        let mut s = rchold_tests::ideal_stage(500_000);
        s.r_mohm = 10f64.powf(lr) as u64;
        s.c_ff = 100_000_000;
        s.press_ns = 1_000_000;
        let m = Model::new(&s).unwrap_or_else(|e| panic!("{e}"));
        let e = m.evaluate().unwrap_or_else(|e| panic!("{e}"));
        let ir = m.inverse_r(e.hold).unwrap_or_else(|e| panic!("{e}"));
        prop_assert!(ir.r_mohm.abs_diff(s.r_mohm) <= 1, "{} vs {}", ir.r_mohm, s.r_mohm);
    }
}

/// The sweep behind `rchold agree`, small enough for every test run: the
/// fixed-point model within 0.1 ppm of the reference for hold and inverse C.
#[test]
fn agree_sweep_meets_the_bound() {
    let r = host_check::design::agree::run(3_000, 11, &|_, _| {});
    assert!(r.fixed.hold.points > 2_000, "too few points evaluated: {}", r.fixed.hold.points);
    assert!(r.fixed.hold.max_rel_ppm < 0.1, "{:?}", r.fixed.hold);
    assert!(r.fixed.inverse_c.max_rel_ppm < 0.1, "{:?}", r.fixed.inverse_c);
    assert!(r.fixed.on_latency.max_rel_ppm < 0.1, "{:?}", r.fixed.on_latency);
    assert_eq!(r.fixed.verdict_mismatches, 0);
    // The hot path: within 1 ppm of the same reference (aim 0.1 ppm) for the
    // hold and the inverse, and prepared wherever the solver evaluates.
    assert!(r.hot.hold.points > 2_000 && r.hot.inverse_c.points > 500, "{:?}", r.hot);
    assert!(r.hot.hold.max_rel_ppm < 0.1, "{:?}", r.hot.hold);
    assert!(r.hot.inverse_c.max_rel_ppm < 0.1, "{:?}", r.hot.inverse_c);
    assert_eq!(r.hot.refused, 0);
}

/// Regression: a 9.35 mF junction stage whose 80 s press ends in the slow
/// charging tail; the partial-press solve used to give up (no convergence)
/// because its time integral's truncation noise hid the last bisection steps.
#[test]
fn slow_tail_partial_press_settles() {
    let stage = Stage {
        vdd_uv: 3_370_099,
        r_mohm: 861_899_395,
        c_ff: 9_348_786_938_431,
        series_mohm: 0,
        charge_mohm: 0,
        driver_mohm: 451_350,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Junction { is_fa: 1_595, n_milli: 1_430, rs_mohm: 455 },
        rise_uv: 168_505,
        fall_uv: 168_505,
        press_ns: 79_610_708_626,
        temp_mdeg_c: 25_000,
    };
    let f = Model::new(&stage).and_then(|m| m.evaluate()).unwrap_or_else(|e| panic!("{e}"));
    let r = reference::evaluate(&StageF::from(&stage)).unwrap_or_else(|e| panic!("{e:?}"));
    let rel = (secs(f.hold) - r.hold).abs() / r.hold;
    assert!(rel < 1e-7, "{} vs {} ({rel:e})", secs(f.hold), r.hold);
}
