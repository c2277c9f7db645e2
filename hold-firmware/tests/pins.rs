//! The engine's exact pin sequences against embedded-hal-mock: idle check,
//! press, release, timeouts, the glitch filter and pin errors. The tick
//! source advances one tick per read of it, so every sequence is exact.

use embedded_hal_mock::eh1::delay::NoopDelay;
use embedded_hal_mock::eh1::digital::{Mock as Pin, State, Transaction as T};
use embedded_hal_mock::eh1::MockError;
use hold_firmware::{Config, Error, Hint, Tester, TickSource, Verdict};
use rc_model::window::Spread;
use rc_model::{Diode, Model, Prepared, Stage};
use std::io::ErrorKind;

/// One tick per read, 1 kHz.
struct Ticks(u32);

impl TickSource for Ticks {
    fn now(&mut self) -> u32 {
        let t = self.0;
        self.0 = self.0.wrapping_add(1);
        t
    }
    fn clock_hz(&self) -> u32 {
        1_000
    }
}

fn stage() -> Stage {
    Stage {
        vdd_uv: 5_000_000,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 0,
        driver_mohm: 50_000,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: 600_000 },
        rise_uv: 2_900_000,
        fall_uv: 2_100_000,
        press_ns: 5_000_000,
        temp_mdeg_c: 25_000,
    }
}

fn prepared() -> Prepared {
    Prepared::prepare(&stage(), &Spread::default(), 1_000).unwrap_or_else(|e| panic!("{e}"))
}

fn config() -> Config {
    Config {
        clock_hz: 1_000,
        settle_ticks: 3,
        press_ticks: 5,
        glitch_ticks: 1,
        poll_ns: 1_000_000,
        on_timeout_ticks: 4,
        hold_min_ticks: 3,
        hold_max_ticks: 8,
        hold_timeout_ticks: 20,
        chatter_limit: 2,
        on_min_ticks: 0,
        on_max_ticks: 4,
        on_nominal_ticks: 0,
        on_poll_ns: 1_000_000,
    }
}

const HI: State = State::High; // output inactive / trigger released
const LO: State = State::Low; // output active / trigger pressed

fn reads(states: &[State]) -> Vec<T> {
    states.iter().map(|&s| T::get(s)).collect()
}

fn run(
    trigger: &[T],
    output: &[T],
    start_tick: u32,
) -> (Result<hold_firmware::Measurement, Error<MockError>>, Pin, Pin) {
    let trig = Pin::new(trigger);
    let out = Pin::new(output);
    let mut t = Tester::new(trig, out, NoopDelay::new(), Ticks(start_tick), config(), prepared());
    let m = t.measure();
    let (trig, out, _, _) = t.release();
    (m, trig, out)
}

fn concat(parts: &[&[State]]) -> Vec<State> {
    parts.iter().flat_map(|p| p.iter().copied()).collect()
}

#[test]
fn a_good_stage_gives_press_latency_hold_and_within_window() {
    let trigger = [T::set(HI), T::set(LO), T::set(HI)];
    // idle: 2 reads; press: 5 reads (active from the 1st); hold: active 3 reads, then inactive.
    let output = reads(&concat(&[&[HI, HI], &[LO; 5], &[LO, LO, LO, HI, HI]]));
    let (m, mut trig, mut out) = run(&trigger, &output, 0);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(m.verdict, Verdict::WithinWindow);
    assert_eq!((m.press_ticks, m.on_ticks, m.hold_ticks, m.glitches), (5, Some(1), Some(4), 0));
    assert_eq!(m.hint, Hint::None);
    trig.done();
    out.done();
}

#[test]
fn the_counter_may_wrap_during_a_measurement() {
    let trigger = [T::set(HI), T::set(LO), T::set(HI)];
    let output = reads(&concat(&[&[HI, HI], &[LO; 5], &[LO, LO, LO, HI, HI]]));
    let (m, mut trig, mut out) = run(&trigger, &output, u32::MAX - 6);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((m.press_ticks, m.hold_ticks, m.verdict), (5, Some(4), Verdict::WithinWindow));
    trig.done();
    out.done();
}

#[test]
fn an_active_output_before_the_press_is_not_idle() {
    let (m, mut trig, mut out) = run(&[T::set(HI)], &reads(&[LO, LO]), 0);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(m.verdict, Verdict::NotIdle);
    trig.done();
    out.done();
}

#[test]
fn no_turn_on_before_the_timeout_is_no_response() {
    let trigger = [T::set(HI), T::set(LO), T::set(HI)];
    let output = reads(&concat(&[&[HI, HI], &[HI; 4]]));
    let (m, mut trig, mut out) = run(&trigger, &output, 0);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((m.verdict, m.hint, m.on_ticks), (Verdict::NoResponse, Hint::NoChargePath, None));
    trig.done();
    out.done();
}

#[test]
fn an_output_that_never_turns_off_is_stuck_active() {
    let trigger = [T::set(HI), T::set(LO), T::set(HI)];
    let output = reads(&concat(&[&[HI, HI], &[LO; 5], &[LO; 20]]));
    let (m, mut trig, mut out) = run(&trigger, &output, 0);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((m.verdict, m.hint, m.hold_ticks), (Verdict::StuckActive, Hint::OpenResistorOrShortedNode, None));
    trig.done();
    out.done();
}

#[test]
fn single_sample_glitches_are_filtered_and_counted() {
    let trigger = [T::set(HI), T::set(LO), T::set(HI)];
    // A one-sample low in the idle check, a one-sample high during the hold.
    let output = reads(&concat(&[&[LO, HI], &[LO; 5], &[LO, HI, LO, LO, HI, HI]]));
    let (m, mut trig, mut out) = run(&trigger, &output, 0);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((m.verdict, m.glitches, m.hold_ticks), (Verdict::WithinWindow, 2, Some(5)));
    trig.done();
    out.done();
}

#[test]
fn too_many_glitches_is_chatter() {
    let trigger = [T::set(HI), T::set(LO), T::set(HI)];
    let output = reads(&concat(&[&[HI, HI], &[LO; 5], &[HI, LO, HI, LO, HI, LO, HI, HI]]));
    let (m, mut trig, mut out) = run(&trigger, &output, 0);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((m.verdict, m.glitches, m.hint), (Verdict::Chatter, 3, Hint::NoisyOutput));
    trig.done();
    out.done();
}

#[test]
fn a_short_hold_is_inverted_into_a_capacitance_and_a_hint() {
    let trigger = [T::set(HI), T::set(LO), T::set(HI)];
    // Hold of 2 ticks (2 ms) against a 740 ms nominal: a wrong part (×0.003).
    let output = reads(&concat(&[&[HI, HI], &[LO; 5], &[LO, HI, HI]]));
    let (m, mut trig, mut out) = run(&trigger, &output, 0);
    let m = m.unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((m.verdict, m.hold_ticks), (Verdict::Short, Some(2)));
    assert_eq!(m.hint, Hint::WrongPart);
    let dev = m.c_deviation_ppm.unwrap_or(0);
    assert!((-998_000..-996_000).contains(&dev), "{dev}");
    trig.done();
    out.done();
}

#[test]
fn pin_errors_are_propagated() {
    let err = MockError::Io(ErrorKind::NotConnected);
    let trigger = [T::set(HI)];
    let output = [T::get(HI), T::get(HI).with_error(err.clone())];
    let (m, mut trig, mut out) = run(&trigger, &output, 0);
    assert_eq!(m, Err(Error::Pin(err.clone())));
    trig.done();
    out.done();
    let (m, mut trig, mut out) = run(&[T::set(HI).with_error(err.clone())], &[], 0);
    assert_eq!(m, Err(Error::Pin(err)));
    trig.done();
    out.done();
}

#[test]
fn the_press_is_long_enough_to_charge_the_capacitor() {
    let mut s = stage();
    s.charge_mohm = 10_000_000; // 10 kΩ: τc = 10 ms
    s.press_ns = 20_000_000; // a 20 ms press asked for: turns on, but 5 τc need 61 ms
    let m = Model::new(&s).unwrap_or_else(|e| panic!("{e}"));
    let w = Spread::default().window(&s).unwrap_or_else(|f| panic!("{f:?}"));
    let c = Config::from_model(&m, &w, 1_000_000, 20_000, 1_000).unwrap_or_else(|e| panic!("{e}"));
    let e = m.evaluate().unwrap_or_else(|e| panic!("{e}"));
    let want = e.charge_tau.ticks(1_000_000).unwrap_or(0) * 5 + e.on_latency.ticks(1_000_000).unwrap_or(0);
    assert_eq!(c.press_ticks, want);
    assert!(c.press_ticks > 50_000, "{}", c.press_ticks);
}
