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
        (|s| s.vdd_uv = 1_599_999, rc_model::Quantity::Vdd),
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
