//! The firmware engine on the simulated twin: a healthy production run, the
//! fault matrix, a capacitor aging in the field, the NIST chart examples in
//! fixed point, and the software timer against the stage.

use hold_firmware::drift::{deviation_at, DriftConfig, DriftState, DriftTracker};
use hold_firmware::{Config, Hint, SoftHold, Step, Tester, Verdict};
use host_check::sim::twin::{Fault, Twin};
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use rc_model::presets;
use rc_model::window::{Spread, Tempco, ThresholdSpread, Tolerance};
use rc_model::{Diode, Model, Prepared, Span, Stage};

const CLOCK_HZ: u32 = 1_000_000;
const POLL_NS: u32 = 50_000;

/// Our own example: the "Lumen-3" keypad backlight scaled to a 74 ms hold
/// (100 nF) to keep the simulation short.
fn stage() -> Stage {
    rchold_tests::backlight_stage(100_000_000, 5_000_000)
}

fn spread() -> Spread {
    let b = presets::preset("hc-schmitt").and_then(|p| p.bands(5_000_000).ok()).unwrap_or_else(|| panic!("preset"));
    Spread {
        r: Tolerance::symmetric(10_000),
        c: Tolerance::symmetric(100_000),
        vdd: Tolerance::symmetric(50_000),
        diode: Tolerance::symmetric(83_333), // ±50 mV on 0.6 V
        thresholds: Some(ThresholdSpread::Schmitt {
            rise_uv: (b.rise.min_uv, b.rise.max_uv),
            fall_uv: (b.fall.min_uv, b.fall.max_uv),
        }),
        ..Spread::default()
    }
}

fn config_for(s: &Stage, sp: &Spread) -> (Config, Prepared) {
    let w = sp.window(s).unwrap_or_else(|f| panic!("{f:?}"));
    let m = Model::new(s).unwrap_or_else(|e| panic!("{e}"));
    let c = Config::from_model(&m, &w, CLOCK_HZ, 20_000, POLL_NS).unwrap_or_else(|e| panic!("{e}"));
    (c, Prepared::prepare(s, sp, CLOCK_HZ).unwrap_or_else(|e| panic!("{e}")))
}

fn measure(plant: &Stage, faults: &[Fault], config: Config, model: Prepared, seed: u64) -> hold_firmware::Measurement {
    let twin = Twin::new(plant, faults, CLOCK_HZ, seed);
    let (trig, out, delay, clock) = twin.handles();
    let mut t = Tester::new(trig, out, delay, clock, config, model);
    t.measure().unwrap_or_else(|e| panic!("{e}"))
}

/// A board drawn uniformly inside every tolerance and threshold band.
fn healthy(rng: &mut Xoshiro256PlusPlus, nominal: &Stage, sp: &Spread) -> Stage {
    let mut s = *nominal;
    let f = |rng: &mut Xoshiro256PlusPlus, t: Tolerance| {
        1.0 + rng.random_range(-f64::from(t.minus_ppm)..=f64::from(t.plus_ppm)) * 1e-6
    };
    s.r_mohm = (s.r_mohm as f64 * f(rng, sp.r)) as u64;
    s.c_ff = (s.c_ff as f64 * f(rng, sp.c)) as u64;
    let k = f(rng, sp.vdd);
    s.vdd_uv = (f64::from(s.vdd_uv) * k) as u32;
    if let Diode::Drop { drop_uv } = s.diode {
        s.diode = Diode::Drop { drop_uv: (f64::from(drop_uv) * f(rng, sp.diode)) as u32 };
    }
    if let Some(ThresholdSpread::Schmitt { rise_uv, fall_uv }) = sp.thresholds {
        // Threshold bands scale with the supply (fractions of Vdd).
        s.rise_uv = (f64::from(rng.random_range(rise_uv.0..=rise_uv.1)) * k) as u32;
        s.fall_uv = (f64::from(rng.random_range(fall_uv.0..=fall_uv.1)) * k) as u32;
    }
    s
}

#[test]
fn ten_thousand_healthy_boards_pass() {
    let nominal = stage();
    let sp = spread();
    let (config, model) = config_for(&nominal, &sp);
    let failures = std::sync::Mutex::new(Vec::new());
    let holds = std::sync::Mutex::new(Vec::new());
    std::thread::scope(|scope| {
        for part in 0..2u64 {
            let (failures, holds) = (&failures, &holds);
            scope.spawn(move || {
                let mut rng = Xoshiro256PlusPlus::seed_from_u64(100 + part);
                for i in 0..5_000 {
                    let board = healthy(&mut rng, &nominal, &sp);
                    let m = measure(&board, &[], config, model, i);
                    holds.lock().unwrap_or_else(|e| e.into_inner()).push(m.hold_ticks.unwrap_or(0));
                    if m.verdict != Verdict::WithinWindow {
                        failures.lock().unwrap_or_else(|e| e.into_inner()).push(format!("{board:?}: {m:?}"));
                    }
                }
            });
        }
    });
    let failures = failures.into_inner().unwrap_or_else(|e| e.into_inner());
    assert!(failures.is_empty(), "{} false rejects, first: {:?}", failures.len(), failures.first());
    // The boards really differ: 10,000 measured holds spread over much of the window.
    let holds = holds.into_inner().unwrap_or_else(|e| e.into_inner());
    let (lo, hi) = (holds.iter().min().copied().unwrap_or(0), holds.iter().max().copied().unwrap_or(0));
    assert_eq!(holds.len(), 10_000);
    assert!(lo >= config.hold_min_ticks && hi <= config.hold_max_ticks, "{lo} … {hi} vs {config:?}");
    assert!((hi - lo) * 3 > config.hold_max_ticks - config.hold_min_ticks, "spread {lo} … {hi} too narrow");
}

#[test]
fn each_fault_gets_its_verdict_and_hint() {
    let nominal = stage();
    let sp = spread();
    let (config, model) = config_for(&nominal, &sp);
    let cases: [(&str, Fault, Verdict, Option<Hint>); 9] = [
        ("open capacitor", Fault::OpenCapacitor, Verdict::Short, Some(Hint::OpenCapacitorOrDiode)),
        ("capacitor ×10", Fault::CapacitorTimes(10.0), Verdict::Long, Some(Hint::WrongPart)),
        ("capacitor ×0.1", Fault::CapacitorTimes(0.1), Verdict::Short, Some(Hint::WrongPart)),
        ("shorted capacitor", Fault::ShortedCapacitor, Verdict::NoResponse, Some(Hint::NoChargePath)),
        ("leaky capacitor (2 MΩ)", Fault::LeakyCapacitor(2e6), Verdict::Short, Some(Hint::AgedOrWrongTolerance)),
        ("open resistor", Fault::OpenResistor, Verdict::StuckActive, Some(Hint::OpenResistorOrShortedNode)),
        ("open diode", Fault::OpenDiode, Verdict::NoResponse, Some(Hint::NoChargePath)),
        (
            "bouncing trigger",
            Fault::BouncingTrigger { seconds: 2e-3, period: 2e-4 },
            Verdict::WithinWindow,
            Some(Hint::None),
        ),
        ("supply droop to 75 %", Fault::SupplyDroop(0.75), Verdict::Short, None),
    ];
    let mut wrong = Vec::new();
    for (name, fault, verdict, hint) in cases {
        let m = measure(&nominal, &[fault], config, model, 7);
        if m.verdict != verdict || hint.is_some_and(|h| h != m.hint) {
            wrong.push(format!(
                "{name}: got {:?}/{:?} (hold {:?}, Δc {:?})",
                m.verdict, m.hint, m.hold_ticks, m.c_deviation_ppm
            ));
        }
    }
    // Noise near the threshold of a plain input (no hysteresis) makes the output chatter.
    let mut plain = nominal;
    plain.rise_uv = 2_500_000;
    plain.fall_uv = 2_500_000;
    let plain_spread = Spread { thresholds: None, ..sp };
    let (pc, pm) = config_for(&plain, &plain_spread);
    let m = measure(&plain, &[Fault::NoisyOutput(0.2)], pc, pm, 9);
    if (m.verdict, m.hint) != (Verdict::Chatter, Hint::NoisyOutput) {
        wrong.push(format!("noisy output: got {m:?}"));
    }
    // The same noise inside a Schmitt input's hysteresis is harmless.
    let m = measure(&nominal, &[Fault::NoisyOutput(0.2)], config, model, 9);
    if m.verdict != Verdict::WithinWindow {
        wrong.push(format!("noise inside the hysteresis: got {m:?}"));
    }
    assert!(wrong.is_empty(), "{}", wrong.join("\n"));
}

#[test]
fn a_retrigger_restarts_the_hold() {
    let nominal = stage();
    let (config, model) = config_for(&nominal, &spread());
    let twin = Twin::new(&nominal, &[], CLOCK_HZ, 1);
    let (trig, out, delay, clock) = twin.handles();
    let mut t = Tester::new(trig, out, delay, clock, config, model);
    // 30 ms into a 74 ms hold.
    let r = t.check_retrigger(30_000).unwrap_or_else(|e| panic!("{e}"));
    assert!(r.restarted(), "{r:?}");
    // A "retrigger" after the hold has ended is caught.
    let r = t.check_retrigger(150_000).unwrap_or_else(|e| panic!("{e}"));
    assert!(!r.stayed_active && !r.restarted(), "{r:?}");
}

/// A field unit whose capacitor loses 1 % of its value per month, measured 4
/// times a day at 25 °C ± 2 °C (uniform), with the measurement compensated
/// through the model's temperature coefficients. The tracker must raise
/// "drifting" before "beyond limit", and forecast the −20 % crossing within
/// ±20 % of the truth.
#[test]
fn an_aging_capacitor_is_caught_and_forecast() {
    let nominal = stage();
    let sp = Spread {
        tempco: Tempco { r_ppm_per_c: 100, c_ppm_per_c: -750, drop_uv_per_c: -2_000, threshold_ppm_per_c: 0 },
        ..spread()
    };
    // The fixture window for a new part; field units track deviation, not pass/fail.
    let (config, model) = config_for(&nominal, &sp);
    let drift = DriftConfig {
        baseline_count: 20,
        lambda_q16: 13_107, // 0.2
        l_milli: 3_000,
        sigma: None,
        cusum_k: 300,
        cusum_h: 3_000,
        limit: -200_000,
    };
    let mut tracker: DriftTracker<64> = DriftTracker::new(drift);
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(42);
    let per_day = 4u32;
    let true_crossing = 20 * 30 * per_day; // 20 months at 1 %/month
    let mut first_drifting = None;
    let mut first_beyond = None;
    let mut forecasts = Vec::new();
    for period in 0..(true_crossing + 40) {
        let months = f64::from(period) / f64::from(30 * per_day);
        let temp = 25_000 + rng.random_range(-2_000..=2_000);
        let mut aged = nominal;
        aged.c_ff = (nominal.c_ff as f64 * (1.0 - 0.01 * months)) as u64;
        let plant = sp.at_temperature(&aged, temp).unwrap_or_else(|e| panic!("{e}"));
        let m = measure(&plant, &[], config, model, u64::from(period));
        let hold = m.hold_ticks.unwrap_or_else(|| panic!("period {period}: {m:?}"));
        let span = Span::from_ticks(hold, CLOCK_HZ).unwrap_or_else(|e| panic!("{e}"));
        let dev = deviation_at(&sp, &nominal, temp, span).unwrap_or_else(|e| panic!("{e}"));
        let u = tracker.update(dev);
        if u.state == DriftState::Drifting && first_drifting.is_none() {
            first_drifting = Some(period);
        }
        if u.state == DriftState::BeyondLimit && first_beyond.is_none() {
            first_beyond = Some(period);
        }
        if [360, 720, 1_440, 2_000].contains(&period) {
            forecasts.push((period, tracker.periods_to_limit()));
        }
    }
    let drifting = first_drifting.unwrap_or_else(|| panic!("drifting never raised"));
    let beyond = first_beyond.unwrap_or_else(|| panic!("beyond-limit never raised"));
    assert!(drifting < beyond, "drifting at {drifting}, beyond at {beyond}");
    assert!(drifting < 30 * per_day, "drifting raised only after {drifting} periods");
    assert!(beyond.abs_diff(true_crossing) <= 8, "beyond limit at {beyond}, truth {true_crossing}");
    for (at, f) in forecasts {
        let f = f.unwrap_or_else(|| panic!("no forecast at {at}"));
        let truth = true_crossing - at;
        let err = (f64::from(f) - f64::from(truth)).abs() / f64::from(truth);
        assert!(err <= 0.2, "at period {at}: forecast {f} periods, truth {truth} ({:.1} %)", err * 100.0);
    }
}

/// NIST/SEMATECH e-Handbook §6.3.2.4 EWMA example reproduced by the
/// fixed-point tracker: λ = 0.3, EWMA0 = 50, s = 2.0539, L = 3 → limits
/// 47.4115 … 52.5884 and the EWMA series to 2 dp (data scaled by 10^4 to integers).
#[test]
fn nist_ewma_in_fixed_point() {
    let x = rchold_tests::nist::EWMA_DATA;
    let want = rchold_tests::nist::EWMA_SERIES;
    let scaled: Vec<i32> = x.iter().map(|v| (v * 1e4_f64).round() as i32).collect();
    let cfg = DriftConfig {
        baseline_count: 2,
        lambda_q16: 19_661, // round(0.3·2^16)
        l_milli: 3_000,
        sigma: Some(20_539),
        cusum_k: 0,
        cusum_h: i32::MAX,
        limit: i32::MIN,
    };
    let t: DriftTracker<4> = DriftTracker::with_baseline(cfg, 500_000, 20_539);
    let half = t.ewma_half_width();
    assert!((500_000 + half - 525_884).abs() <= 1, "UCL {}", 500_000 + half);
    assert!((500_000 - half - 474_115).abs() <= 1, "LCL {}", 500_000 - half);
    let mut got = Vec::new();
    DriftTracker::<4>::chart(cfg, 500_000, 20_539, &scaled, |z, _, _| got.push(z as f64 / 65_536.0 / 1e4));
    for (g, w) in got.iter().zip(want) {
        assert!((g - w).abs() < 0.005 + 1e-4, "{g} vs {w}");
    }
}

/// NIST/SEMATECH e-Handbook §6.3.2.3 tabular CUSUM example in fixed point:
/// target 325, k = 0.3175, h = 4.1959; S_hi to 2 dp; signals at points 14–20.
#[test]
fn nist_cusum_in_fixed_point() {
    let x = rchold_tests::nist::CUSUM_DATA;
    let want = rchold_tests::nist::CUSUM_HI;
    let scaled: Vec<i32> = x.iter().map(|v| (v * 1e4_f64).round() as i32).collect();
    let cfg = DriftConfig {
        baseline_count: 2,
        lambda_q16: 0,
        l_milli: 0,
        sigma: Some(1),
        cusum_k: 3_175,
        cusum_h: 41_959,
        limit: i32::MIN,
    };
    let mut hi = Vec::new();
    DriftTracker::<4>::chart(cfg, 3_250_000, 1, &scaled, |_, s_hi, _| hi.push(s_hi));
    for (g, w) in hi.iter().zip(want) {
        // The exact sums are 4-decimal; the handbook prints them to 2 (14.445 as 14.44).
        assert!((*g as f64 / 1e4 - w).abs() <= 0.0051, "{g} vs {w}");
    }
    let signals: Vec<usize> = hi.iter().enumerate().filter(|(_, s)| **s > 41_959).map(|(i, _)| i + 1).collect();
    assert_eq!(signals, (14..=20).collect::<Vec<_>>());
}

/// The software timer, configured from the model, behaves like the stage
/// under a press / retrigger / release sequence.
#[test]
fn software_timer_matches_the_stage() {
    let nominal = stage();
    let (config, model) = config_for(&nominal, &spread());
    let twin = Twin::new(&nominal, &[], CLOCK_HZ, 3);
    let (trig, out, delay, clock) = twin.handles();
    let mut t = Tester::new(trig, out, delay, clock, config, model);
    let mut soft = SoftHold::from_prepared(&model).unwrap_or_else(|e| panic!("{e}"));
    let steps = [
        Step { press_ticks: 5_000, gap_ticks: 30_000 }, // retrigger 30 ms into the hold
        Step { press_ticks: 20_000, gap_ticks: 150_000 }, // long press, hold runs out
        Step { press_ticks: 5_000, gap_ticks: 150_000 },
    ];
    let c = t.compare_soft(&mut soft, &steps).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((c.stage_intervals, c.timer_intervals), (2, 2), "{c:?}");
    // They differ only by the stage's turn-on latency and the poll quantum.
    assert!(c.disagree_ticks * 100 < c.stage_active_ticks, "{c:?}");
    assert!(c.stage_active_ticks.abs_diff(c.timer_active_ticks) * 100 < c.stage_active_ticks, "{c:?}");
}

/// The async engine (edges awaited, timeouts raced) gives the blocking
/// engine's verdicts and hints on the same boards and faults.
#[test]
fn async_engine_gives_the_same_verdicts() {
    use hold_firmware::AsyncTester;
    let nominal = stage();
    let (config, model) = config_for(&nominal, &spread());
    let cases: [&[Fault]; 6] = [
        &[],
        &[Fault::OpenCapacitor],
        &[Fault::CapacitorTimes(0.1)],
        &[Fault::CapacitorTimes(10.0)],
        &[Fault::OpenDiode],
        &[Fault::OpenResistor],
    ];
    for faults in cases {
        let blocking = measure(&nominal, faults, config, model, 5);
        let twin = Twin::new(&nominal, faults, CLOCK_HZ, 5);
        let (trig, out, delay, clock) = twin.handles();
        let mut t = AsyncTester::new(trig, out, delay, clock, config, model);
        let m = host_check::sim::twin::block_on(t.measure()).unwrap_or_else(|e| panic!("{e}"));
        assert_eq!((m.verdict, m.hint), (blocking.verdict, blocking.hint), "{faults:?}: {m:?} vs {blocking:?}");
        if let (Some(a), Some(b)) = (m.hold_ticks, blocking.hold_ticks) {
            // Edge timestamps and polls differ by at most a few poll quanta.
            assert!(a.abs_diff(b) <= 3 * u64::from(POLL_NS / 1_000) + 50, "{faults:?}: hold {a} vs {b}");
        }
    }
}

/// A new board whose capacitor is 36 % low: the field window (which allows for
/// the end-of-life loss of 20 %) would pass it; the fixture window (new parts)
/// fails it, and the measurement names the capacitor (about −36 %).
#[test]
fn a_new_board_with_c_36_percent_low_fails_the_fixture_window() {
    use host_check::design::window::{default_poll_ns, settings};
    use host_check::stage::file::{parse, Purpose};
    // Our own example: a 12 V power-hold stage, 4.7 MΩ and 10 µF, on a 32.768 kHz tester.
    let text = r#"
[stage]
r = "4.7M"
c = "10u"
vdd = "12"
driver_ohms = "50"
charge_ohms = "1k"
series_ohms = "0"
leak_ohms = "inf"
diode = { drop = "0.6" }
[input]
family = "4000b-schmitt"
[press]
duration = "2"
[tolerance]
r = "1%"
c = "10%"
vdd = "5%"
[environment]
temp_min = "-20"
temp_max = "70"
[aging]
kind = "end-of-life"
loss = "20%"
"#;
    let sf = parse(std::path::Path::new("powerhold.toml"), text).unwrap_or_else(|e| panic!("{e}"));
    let poll = default_poll_ns(&sf).unwrap_or_else(|e| panic!("{e}"));
    let mut low = sf.stage;
    low.c_ff = low.c_ff * 64 / 100;
    let judge = |purpose| {
        let s = settings(&sf, purpose, 32_768, 20_000, poll).unwrap_or_else(|e| panic!("{e}"));
        let twin = Twin::new(&low, &[], 32_768, 7);
        let (trig, out, delay, clock) = twin.handles();
        Tester::new(trig, out, delay, clock, s.config, s.stage).measure().unwrap_or_else(|e| panic!("{e}"))
    };
    let field = judge(Purpose::Field);
    assert_eq!(field.verdict, Verdict::WithinWindow, "the field window allows for the aged capacitor");
    let fixture = judge(Purpose::Fixture);
    assert_eq!(fixture.verdict, Verdict::Short, "{fixture:?}");
    let dev = fixture.c_deviation_ppm.unwrap_or(0);
    assert!((-400_000..=-320_000).contains(&dev), "the capacitor named at {dev} ppm: {fixture:?}");
    assert_ne!(fixture.hint, Hint::None);
}
