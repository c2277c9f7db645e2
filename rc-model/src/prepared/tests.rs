//! The hot path against the solver it was prepared by.

use super::norm::to_f64;
use super::*;
use crate::window::{Spread, Tempco};
use crate::{Diode, Model, Stage};
use proptest::prelude::*;

fn drop_stage() -> Stage {
    Stage {
        vdd_uv: 5_000_000,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 0,
        driver_mohm: 0,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: 600_000 },
        rise_uv: 2_500_000,
        fall_uv: 2_500_000,
        press_ns: 100_000_000,
        temp_mdeg_c: 25_000,
    }
}

fn junction_stage() -> Stage {
    Stage {
        series_mohm: 2_000,
        charge_mohm: 100_000,
        driver_mohm: 50_000,
        leak_mohm: Some(50_000_000_000_000),
        leak_fa: 1_000_000,
        diode: Diode::Junction { is_fa: 2_500_000, n_milli: 1_750, rs_mohm: 500 },
        rise_uv: 2_900_000,
        fall_uv: 2_100_000,
        ..drop_stage()
    }
}

fn warm_spread() -> Spread {
    Spread {
        temp_mdeg_c: Some((-20_000, 70_000)),
        tempco: Tempco { r_ppm_per_c: 100, c_ppm_per_c: -750, drop_uv_per_c: -2_000, threshold_ppm_per_c: 300 },
        ..Spread::default()
    }
}

/// The solver's hold at `temp`, in ticks of `clock_hz`, as f64.
fn solver_ticks(stage: &Stage, spread: &Spread, temp: i32, clock_hz: u32) -> f64 {
    let s = spread.at_temperature(stage, temp).unwrap_or_else(|e| panic!("{e}"));
    let hold = Model::new(&s).and_then(|m| m.evaluate()).unwrap_or_else(|e| panic!("{e}")).hold;
    hold.ns_q32() as f64 / 4_294_967_296.0 * f64::from(clock_hz) / 1e9
}

/// Worked example from the crate README: 1 MΩ, 1 µF, 4.4 V start, 2.5 V
/// threshold: τ·ln(4.4/2.5) = 0.565 314 … s (math).
#[test]
fn worked_example_at_the_reference_temperature() {
    let p = Prepared::prepare(&drop_stage(), &Spread::default(), 1_000_000).unwrap_or_else(|e| panic!("{e}"));
    let want = 1e6 * (4.4f64 / 2.5).ln();
    let got = to_f64(p.hold_at(25_000).unwrap_or_else(|e| panic!("{e}")));
    assert!((got / want - 1.0).abs() < 3e-9, "{got} vs {want}");
    assert_eq!(p.hold_ticks_at(25_000), Ok(565_314));
}

#[test]
fn temperature_fit_follows_the_solver() {
    for stage in [drop_stage(), junction_stage()] {
        let spread = warm_spread();
        let p = Prepared::prepare(&stage, &spread, 32_768).unwrap_or_else(|e| panic!("{e}"));
        let mut worst: f64 = 0.0;
        for temp in (-20_000..=70_000).step_by(2_500) {
            let want = solver_ticks(&stage, &spread, temp, 32_768);
            let got = to_f64(p.hold_at(temp).unwrap_or_else(|e| panic!("{temp}: {e}")));
            worst = worst.max((got / want - 1.0).abs());
        }
        // Exact at the three fitted points; a quadratic in between. The
        // stages here move by ~4 % over the range; the fit stays within 1 ppm.
        assert!(worst < 1e-6, "{:?}: worst {worst:e}", stage.diode);
        assert_eq!(p.hold_at(-20_001), Err(Error::OutOfDomain(Quantity::Temperature)));
        assert_eq!(p.hold_at(70_001), Err(Error::OutOfDomain(Quantity::Temperature)));
    }
}

#[test]
fn inverse_matches_the_solver_for_a_full_press() {
    for stage in [drop_stage(), junction_stage()] {
        let spread = warm_spread();
        let p = Prepared::prepare(&stage, &spread, 1_000_000).unwrap_or_else(|e| panic!("{e}"));
        for (scale_ppm, temp) in [(1_000_000u64, 25_000), (800_000, 60_000), (1_300_000, -10_000)] {
            let mut s = spread.at_temperature(&stage, temp).unwrap_or_else(|e| panic!("{e}"));
            let c_t = s.c_ff;
            s.c_ff = s.c_ff * scale_ppm / 1_000_000;
            let hold = Model::new(&s).and_then(|m| m.evaluate()).unwrap_or_else(|e| panic!("{e}")).hold;
            let ticks = hold.ticks(1_000_000).unwrap_or(0);
            let est = p.inverse_at(ticks, temp).unwrap_or_else(|e| panic!("{e}"));
            let want_dev = scale_ppm as f64 - 1e6;
            // One tick of 1 µs in a ~0.5 s hold is 2 ppm of rounding.
            assert!((f64::from(est.deviation_ppm) - want_dev).abs() <= 4.0, "{} vs {want_dev}", est.deviation_ppm);
            assert!((to_f64(est.c_ff) / (c_t as f64 * scale_ppm as f64 / 1e6) - 1.0).abs() < 4e-6);
        }
        assert_eq!(p.inverse_at(0, 25_000).err(), Some(Error::OutOfDomain(Quantity::Hold)));
    }
}

#[test]
fn bytes_round_trip_and_refuse_damage() {
    let p = Prepared::prepare(&junction_stage(), &warm_spread(), 16_000_000).unwrap_or_else(|e| panic!("{e}"));
    let b = p.to_bytes();
    assert_eq!(Prepared::from_bytes(&b), Ok(p));
    assert!(Prepared::from_bytes(&b[..PREPARED_LEN - 1]).is_err());
    let mut clock0 = b;
    clock0[..4].copy_from_slice(&0u32.to_le_bytes());
    assert_eq!(Prepared::from_bytes(&clock0), Err(Error::OutOfDomain(Quantity::Clock)));
    let mut swapped = b;
    // Start below end: no hold.
    swapped[42..50].copy_from_slice(&1i64.to_le_bytes());
    assert_eq!(Prepared::from_bytes(&swapped), Err(Error::OutOfDomain(Quantity::Hold)));
}

proptest! {
    /// Invariant: at the reference temperature the hot path's hold is the
    /// solver's, to the ln kernel's 3e-9 plus the Norm products' rounding.
    #[test]
    fn hot_hold_equals_the_solver_at_the_reference(
        r in 1_000_000u64..100_000_000_000, c in 100_000u64..10_000_000_000_000,
        fall_ppm in 100_000u32..800_000, clock in 1_000u32..200_000_000,
    ) {
        let mut s = drop_stage();
        s.r_mohm = r;
        s.c_ff = c;
        s.fall_uv = (u64::from(s.vdd_uv) * u64::from(fall_ppm) / 1_000_000) as u32;
        s.rise_uv = s.fall_uv.max(s.rise_uv);
        s.press_ns = crate::stage::limits::DAY_NS;
        let spread = Spread::default();
        if Model::new(&s).and_then(|m| m.evaluate()).is_err() {
            return Ok(());
        }
        let p = Prepared::prepare(&s, &spread, clock).unwrap_or_else(|e| panic!("{e}"));
        let want = solver_ticks(&s, &spread, 25_000, clock);
        let got = to_f64(p.hold_at(25_000).unwrap_or_else(|e| panic!("{e}")));
        prop_assert!((got / want - 1.0).abs() < 6e-9, "{} vs {}", got, want);
    }
}

proptest! {
    /// Invariant: any bytes at all are refused or accepted, never a panic.
    #[test]
    fn any_bytes_are_refused_or_accepted_without_panic(bytes in proptest::collection::vec(any::<u8>(), PREPARED_LEN)) {
        let _ = Prepared::from_bytes(&bytes);
    }

    /// Invariant: a prepared stage with damaged coefficients is either refused
    /// when loaded or evaluates at every temperature of its range and any
    /// measured hold without a panic or an overflow (tests run with overflow
    /// checks on).
    #[test]
    fn a_damaged_stage_is_refused_or_evaluates_everywhere(
        flips in proptest::collection::vec((0usize..PREPARED_LEN, 0u8..8), 1..6),
        temps in proptest::collection::vec(any::<u32>(), 8),
        holds in proptest::collection::vec(any::<u64>(), 8),
    ) {
        let p = Prepared::prepare(&junction_stage(), &warm_spread(), 1_000_000).unwrap_or_else(|e| panic!("{e}"));
        let mut b = p.to_bytes();
        for (at, bit) in flips {
            b[at] ^= 1 << bit;
        }
        if let Ok(q) = Prepared::from_bytes(&b) {
            let (lo, hi) = q.temp_range_mdeg_c();
            let span = u64::from((hi - lo).unsigned_abs()) + 1;
            for (t, h) in temps.iter().zip(&holds) {
                let temp = lo + (u64::from(*t) % span) as i32;
                let _ = q.hold_at(temp);
                let _ = q.inverse_at(*h, temp);
                let _ = q.deviation_ppm_at(*h, temp);
                let _ = q.outcome_bytes(temp, *h);
            }
        }
    }
}
