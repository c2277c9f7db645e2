//! The whole input space, not only the domain: every public function of the
//! model and the firmware engine, given any `u32`, `u64` and `i32` its
//! arguments can hold, returns a value or a typed error — never a panic or an
//! overflow. Run with overflow checks on: in the test profile, and in CI again
//! under `--profile release-checked` (optimised code, checks kept), where the
//! optimiser's view of the arithmetic is the firmware's.

use hold_firmware::drift::{DriftConfig, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::Stopwatch;
use proptest::prelude::*;
use rc_model::prepared::Prepared;
use rc_model::window::{Spread, Tempco, Tolerance};
use rc_model::{Diode, Model, Span, Stage};

fn any_diode() -> impl Strategy<Value = Diode> {
    prop_oneof![
        mostly(0u32, 2_000_000).prop_map(|drop_uv| Diode::Drop { drop_uv }),
        (mostly(1u64, 1_000_000_000), mostly(500u32, 4_000), mostly(0u64, 1_000_000))
            .prop_map(|(is_fa, n_milli, rs_mohm)| Diode::Junction { is_fa, n_milli, rs_mohm }),
    ]
}

/// Any value one time in twenty, else one inside `lo..=hi`: a stage has
/// thirteen fields, and the domain's inside must be reached as well as
/// every way out of it.
fn mostly<T>(lo: T, hi: T) -> impl Strategy<Value = T>
where
    T: Arbitrary + Copy + std::fmt::Debug + 'static,
    std::ops::RangeInclusive<T>: Strategy<Value = T>,
{
    prop_oneof![1 => any::<T>(), 19 => lo..=hi]
}

prop_compose! {
    fn any_stage()(
        vdd_uv in mostly(800_000u32, 18_000_000), r_mohm in mostly(1_000_000u64, 100_000_000_000),
        c_ff in mostly(100_000u64, 10_000_000_000_000), series_mohm in mostly(0u64, 1_000_000_000),
        charge_mohm in mostly(0u64, 1_000_000_000), driver_mohm in mostly(0u64, 1_000_000_000),
        leak_mohm in prop::option::of(mostly(1_000_000u64, u64::MAX)), leak_fa in mostly(0u64, 1_000_000_000),
        diode in any_diode(), rise_ppm in mostly(50_000u32, 950_000), fall_ppm in mostly(50_000u32, 950_000),
        press_ns in mostly(1u64, 86_400_000_000_000), temp_mdeg_c in mostly(-55_000i32, 150_000),
    ) -> Stage {
        let of_vdd = |ppm: u32| u32::try_from(u64::from(vdd_uv) * u64::from(ppm) / 1_000_000).unwrap_or(ppm);
        Stage { vdd_uv, r_mohm, c_ff, series_mohm, charge_mohm, driver_mohm, leak_mohm, leak_fa, diode,
                rise_uv: of_vdd(rise_ppm), fall_uv: of_vdd(fall_ppm).min(of_vdd(rise_ppm)), press_ns, temp_mdeg_c }
    }
}

/// A stage in the middle of the domain (1 MΩ, 1 µF, 5 V), for the spreads.
fn middle() -> Stage {
    Stage {
        vdd_uv: 5_000_000,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 100_000,
        driver_mohm: 50_000,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: 600_000 },
        rise_uv: 2_900_000,
        fall_uv: 1_800_000,
        press_ns: 100_000_000,
        temp_mdeg_c: 25_000,
    }
}

fn tol() -> impl Strategy<Value = Tolerance> {
    (mostly(0u32, 300_000), mostly(0u32, 300_000)).prop_map(|(minus_ppm, plus_ppm)| Tolerance { minus_ppm, plus_ppm })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 1_000, ..ProptestConfig::default() })]

    /// The model on any stage: an evaluation inside the domain, a typed refusal outside it.
    #[test]
    fn the_model_takes_any_stage(s in any_stage(), hold_ns in any::<u64>()) {
        // Inside the domain the Q formats leave no room for the errors that say
        // the arithmetic ran out (the domain corners test says the same at its edges).
        let inside = s.check().is_ok();
        let typed = |e: rc_model::Error| !(inside && matches!(e, rc_model::Error::Arithmetic | rc_model::Error::NoConvergence));
        match Model::new(&s) {
            Ok(m) => {
                match m.evaluate() {
                    Ok(e) => prop_assert!(e.hold > Span::ZERO),
                    Err(e) => prop_assert!(typed(e), "{e:?}"),
                }
                let _ = m.inverse_c(Span::from_ns(hold_ns));
            }
            Err(e) => prop_assert!(typed(e), "{e:?}"),
        }
    }

    /// Any tolerances, temperatures and coefficients around a good stage.
    #[test]
    fn the_window_takes_any_spread(
        r in tol(), c in tol(), vdd in tol(), diode in tol(), driver in tol(),
        ref_mdeg_c in mostly(-55_000i32, 150_000), temps in prop::option::of((mostly(-55_000i32, 25_000), mostly(25_000i32, 150_000))),
        tc in (mostly(-5_000i32, 5_000), mostly(-5_000i32, 5_000), mostly(-3_000i32, 3_000), mostly(-2_000i32, 2_000)),
        corner_temp in mostly(-55_000i32, 150_000), clock_hz in mostly(1_000u32, 200_000_000),
    ) {
        let spread = Spread {
            r, c, vdd, diode, driver, ref_mdeg_c, temp_mdeg_c: temps,
            tempco: Tempco { r_ppm_per_c: tc.0, c_ppm_per_c: tc.1, drop_uv_per_c: tc.2, threshold_ppm_per_c: tc.3 },
            ..Spread::default()
        };
        if let Ok(w) = spread.window(&middle()) {
            prop_assert!(w.min <= w.nominal && w.nominal <= w.max);
        }
        let _ = spread.at_temperature(&middle(), corner_temp);
        let _ = hold_firmware::drift::deviation_at(&spread, &middle(), corner_temp, Span::from_ns(739_000_000));
        let _ = Prepared::prepare(&middle(), &spread, clock_hz);
    }

    /// A prepared stage as the firmware loads it: any bytes, then any query.
    #[test]
    fn prepared_stages_take_any_bytes_and_any_query(
        bytes in proptest::collection::vec(any::<u8>(), 0..160),
        temp in any::<i32>(), hold_ticks in any::<u64>(),
    ) {
        // Bytes of a real prepared stage, with some changed, as well as noise.
        let real = Prepared::prepare(&middle(), &Spread::default(), 1_000_000).map(|p| p.to_bytes().to_vec());
        for b in [bytes.clone(), real.map(|mut r| { for (i, x) in bytes.iter().enumerate() { if let Some(y) = r.get_mut(i * 7 % 130) { *y ^= x; } } r }).unwrap_or_default()] {
            if let Ok(p) = Prepared::from_bytes(&b) {
                let _ = p.hold_ticks_at(temp);
                let _ = p.hold_at(temp);
                let _ = p.c_at(temp);
                let _ = p.r_at(temp);
                let _ = p.deviation_ppm_at(hold_ticks, temp);
                let _ = p.inverse_at(hold_ticks, temp);
                let _ = p.inverse(hold_ticks);
                let _ = p.outcome_bytes(temp, hold_ticks);
                prop_assert_eq!(Prepared::from_bytes(&p.to_bytes()).map(|q| q.to_bytes()), Ok(p.to_bytes()));
            }
        }
    }

    /// The drift tracker on any configuration and any samples.
    #[test]
    fn the_drift_tracker_takes_any_samples(
        baseline_count in any::<u16>(), lambda_q16 in any::<u32>(), l_milli in any::<u32>(),
        sigma in any::<Option<i32>>(), cusum_k in any::<i32>(), cusum_h in any::<i32>(), limit in any::<i32>(),
        center in any::<i32>(), spread in any::<i32>(),
        xs in proptest::collection::vec(any::<i32>(), 0..64),
    ) {
        let config = DriftConfig { baseline_count, lambda_q16, l_milli, sigma, cusum_k, cusum_h, limit };
        let mut fresh = DriftTracker::<32>::new(config);
        let mut known = DriftTracker::<32>::with_baseline(config, center, spread);
        for &x in &xs {
            let _ = fresh.update(x);
            let _ = known.update(x);
        }
        let _ = (fresh.ewma_half_width(), fresh.trend_q16(), fresh.periods_to_limit(), fresh.history().count());
        let _ = (known.ewma_half_width(), known.trend_q16(), known.periods_to_limit());
        DriftTracker::<32>::chart(config, center, spread, &xs, |_, _, _| {});
        let _ = hold_firmware::drift::isqrt(u64::from(lambda_q16) * u64::from(l_milli));
    }

    /// The tick stopwatch across any counter values (wrapping).
    #[test]
    fn the_stopwatch_takes_any_counter(start in any::<u32>(), nows in proptest::collection::vec(any::<u32>(), 0..32)) {
        let mut w = Stopwatch::start(start);
        let mut last = 0u64;
        for n in nows {
            let t = w.update(n);
            prop_assert!(t >= last);
            last = t;
        }
    }

    /// Frames of any record, and any bytes as a frame.
    #[test]
    fn frames_take_any_record_and_any_bytes(
        seq in any::<u32>(), unit_id in any::<u32>(), press_ticks in any::<u64>(), on in any::<Option<u64>>(),
        hold in any::<Option<u64>>(), clock_hz in any::<u32>(), temp in any::<Option<i32>>(), dev in any::<Option<i32>>(),
        boot in any::<u32>(), junk in proptest::collection::vec(any::<u8>(), 0..80),
    ) {
        let r = Record { seq, unit_id, boot, press_ticks, on_ticks: on, hold_ticks: hold, clock_hz, temp_mdeg_c: temp,
            c_deviation_ppm: dev, verdict: hold_firmware::Verdict::Long, hint: hold_firmware::Hint::WrongPart,
            drift: hold_firmware::drift::DriftState::Drifting };
        let f = record::encode(&r).map_err(|e| TestCaseError::fail(format!("{e:?}")))?;
        prop_assert!(f.len() <= record::FRAME_MAX);
        prop_assert_eq!(record::decode(&f), Ok(r));
        let _ = record::decode(&junk);
    }
}
