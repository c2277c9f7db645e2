//! The supported domain: every corner either evaluates or returns a typed
//! error — never a panic, an overflow (tests run with overflow checks on) or
//! the `Arithmetic` / `NoConvergence` errors that the Q-format analysis says
//! cannot happen inside the domain.

use rc_model::{limits, Diode, Error, Model, Span, Stage};

fn corners() -> Vec<Stage> {
    let mut v = Vec::new();
    let diodes = [
        Diode::Drop { drop_uv: 0 },
        Diode::Drop { drop_uv: limits::DROP_UV_MAX },
        Diode::Junction { is_fa: limits::IS_FA.0, n_milli: limits::N_MILLI.0, rs_mohm: 0 },
        Diode::Junction { is_fa: limits::IS_FA.0, n_milli: limits::N_MILLI.1, rs_mohm: limits::DIODE_RS_MOHM_MAX },
        Diode::Junction { is_fa: limits::IS_FA.1, n_milli: limits::N_MILLI.0, rs_mohm: limits::DIODE_RS_MOHM_MAX },
        Diode::Junction { is_fa: limits::IS_FA.1, n_milli: limits::N_MILLI.1, rs_mohm: 0 },
    ];
    for vdd_uv in [limits::VDD_UV.0, limits::VDD_UV.1] {
        for r_mohm in [limits::R_MOHM.0, limits::R_MOHM.1] {
            for c_ff in [limits::C_FF.0, limits::C_FF.1] {
                for path in [0, limits::PATH_MOHM_MAX] {
                    for series_mohm in [0, limits::PATH_MOHM_MAX] {
                        for leak_mohm in [None, Some(limits::LEAK_MOHM_MIN), Some(u64::MAX)] {
                            for leak_fa in [0, limits::LEAK_FA_MAX] {
                                for diode in diodes {
                                    for (rise_ppm, fall_ppm) in
                                        [(50_000, 50_000), (950_000, 950_000), (950_000, 50_000)]
                                    {
                                        for press_ns in [1, limits::DAY_NS] {
                                            for temp_mdeg_c in [limits::TEMP_MDEG_C.0, limits::TEMP_MDEG_C.1] {
                                                v.push(Stage {
                                                    vdd_uv,
                                                    r_mohm,
                                                    c_ff,
                                                    series_mohm,
                                                    charge_mohm: path,
                                                    driver_mohm: path,
                                                    leak_mohm,
                                                    leak_fa,
                                                    diode,
                                                    rise_uv: rc_model::fraction_of(vdd_uv, rise_ppm),
                                                    fall_uv: rc_model::fraction_of(vdd_uv, fall_ppm),
                                                    press_ns,
                                                    temp_mdeg_c,
                                                });
                                            }
                                        }
                                    }
                                }
                            }
                        }
                    }
                }
            }
        }
    }
    v
}

fn is_typed_refusal(e: Error) -> bool {
    !matches!(e, Error::Arithmetic | Error::NoConvergence)
}

#[test]
fn domain_corners_never_overflow() {
    let all = corners();
    let (mut ok, mut refused) = (0usize, 0usize);
    for s in &all {
        match Model::new(s).and_then(|m| m.evaluate().map(|e| (m, e))) {
            Ok((m, e)) => {
                ok += 1;
                // The inverse of a forward result also stays inside its formats.
                match m.inverse_c(e.hold) {
                    Ok(_) | Err(Error::IllConditioned | Error::OutOfDomain(_)) => {}
                    Err(other) => panic!("inverse_c at {s:?}: {other:?}"),
                }
            }
            Err(e) => {
                assert!(is_typed_refusal(e), "{s:?}: {e:?}");
                refused += 1;
            }
        }
    }
    // The corners must exercise both outcomes, or the test proves little.
    assert!(ok > 500 && refused > 1_000, "ok {ok}, refused {refused} of {}", all.len());
}

#[test]
fn inputs_outside_the_domain_are_refused_by_name() {
    let base = rchold_tests::ideal_stage(500_000);
    type Case = (fn(&mut Stage), rc_model::Quantity);
    let cases: [Case; 8] = [
        (|s| s.vdd_uv = 799_999, rc_model::Quantity::Vdd),
        (|s| s.r_mohm = 999_999, rc_model::Quantity::R),
        (|s| s.c_ff = 10_000_000_000_001, rc_model::Quantity::C),
        (|s| s.driver_mohm = 1_000_000_001, rc_model::Quantity::DriverR),
        (|s| s.rise_uv = 4_800_000, rc_model::Quantity::Rise),
        (|s| s.fall_uv = 2_600_000, rc_model::Quantity::Fall),
        (|s| s.press_ns = 0, rc_model::Quantity::Press),
        (|s| s.temp_mdeg_c = 150_001, rc_model::Quantity::Temperature),
    ];
    for (change, q) in cases {
        let mut s = base;
        change(&mut s);
        assert_eq!(Model::new(&s).err(), Some(Error::OutOfDomain(q)));
    }
    // A measured hold outside 1 µs – 24 h is refused too.
    let m = Model::new(&base).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(m.inverse_c(Span::from_ns(999)).err(), Some(Error::OutOfDomain(rc_model::Quantity::Hold)));
    assert_eq!(Span::from_ticks(10, 999).err(), Some(Error::OutOfDomain(rc_model::Quantity::Clock)));
}

/// Prepares `s` at both clock extremes; evaluates the hot path at both ends of
/// its range, the reference and between, for holds from 1 tick to `u64::MAX`.
/// Returns whether it was prepared (a typed refusal is fine; `Arithmetic`,
/// `NoConvergence` or a panic is not).
fn prepare_and_evaluate(s: &Stage, spread: &rc_model::window::Spread) -> bool {
    let mut any = false;
    for clock_hz in [limits::CLOCK_HZ.0, limits::CLOCK_HZ.1] {
        let p = match rc_model::Prepared::prepare(s, spread, clock_hz) {
            Ok(p) => p,
            Err(e) => {
                assert!(is_typed_refusal(e), "prepare at {s:?}: {e:?}");
                continue;
            }
        };
        any = true;
        let (lo, hi) = p.temp_range_mdeg_c();
        for temp in [lo, (lo + p.ref_mdeg_c()) / 2, p.ref_mdeg_c(), (p.ref_mdeg_c() + hi) / 2, hi] {
            let hold = match p.hold_at(temp) {
                Ok(h) => h.round().unwrap_or(u64::MAX),
                Err(e) => {
                    assert!(is_typed_refusal(e), "hold at {temp} m°C, {s:?}: {e:?}");
                    continue;
                }
            };
            for ticks in [1, hold / 2 + 1, hold.max(1), hold.saturating_mul(3), u64::MAX] {
                for r in [p.inverse_at(ticks, temp).map(|e| e.deviation_ppm), p.deviation_ppm_at(ticks, temp)] {
                    if let Err(e) = r {
                        assert!(is_typed_refusal(e), "inverse at {temp} m°C, {ticks} ticks, {s:?}: {e:?}");
                    }
                }
            }
        }
    }
    any
}

/// The hot path's overflow claim (`rc_model::prepared` module docs): a
/// stage is either refused by `Prepared::prepare` with a typed error or,
/// once prepared, evaluates at both ends of its range, at the reference and
/// between — hold, inverse and deviation, at the slowest and the fastest
/// clock — without the `Arithmetic` error or an overflow (tests run with
/// overflow checks on). The domain's value corners over the whole
/// temperature range with no coefficients (any coefficient moves a corner
/// out of the domain, a correct refusal), and the sweep's grid and random
/// stages with strong coefficients over the whole range.
#[test]
fn every_prepared_stage_evaluates_at_its_range_ends() {
    use rc_model::window::{Spread, Tempco};
    let flat = Spread {
        temp_mdeg_c: Some(limits::TEMP_MDEG_C),
        tempco: Tempco { r_ppm_per_c: 0, c_ppm_per_c: 0, drop_uv_per_c: 0, threshold_ppm_per_c: 0 },
        ..Spread::default()
    };
    let strong = Spread {
        tempco: Tempco { r_ppm_per_c: 250, c_ppm_per_c: -1_500, drop_uv_per_c: -2_500, threshold_ppm_per_c: 400 },
        ..flat
    };
    let corners: Vec<Stage> =
        corners().into_iter().filter(|s| Model::new(s).and_then(|m| m.evaluate()).is_ok()).collect();
    let at_corners = corners.iter().filter(|s| prepare_and_evaluate(s, &flat)).count();
    let mut inner = host_check::design::agree::grid();
    inner.extend((0..1_500).map(|i| host_check::design::agree::random_stage(5, i)));
    let at_inner = inner.iter().filter(|s| prepare_and_evaluate(s, &strong)).count();
    // Both parts must prepare a good share, or the test proves little.
    assert!(at_corners > corners.len() / 3, "corners prepared: {at_corners} of {}", corners.len());
    assert!(at_inner > 500, "grid and random stages prepared: {at_inner} of {}", inner.len());
}
