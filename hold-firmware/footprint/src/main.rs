//! A complete tester on a Cortex-M0: the model, the window, one measurement,
//! the drift tracker with a 64-entry history and a record frame, in a loop.
//! Pins and the tick counter are atomics standing in for registers, so the
//! binary links everything a real fixture or field unit would.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use core::sync::atomic::{AtomicBool, AtomicU32, AtomicU8, Ordering};
use cortex_m_rt::entry;
use embedded_hal::delay::DelayNs;
use embedded_hal::digital::{ErrorType, InputPin, OutputPin};
use hold_firmware::drift::{DriftConfig, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::{Config, Tester, TickSource};
use panic_halt as _;
use rc_model::window::{Spread, Tolerance};
use rc_model::{Diode, Model, Stage};

/// Sizes in bytes, on this target, of the state the tester keeps on its stack:
/// model, tester, drift tracker with a 64-entry history, one record frame.
/// `benches/footprint.sh` reads them from the ELF.
#[used]
pub static FOOTPRINT_SIZES: [u32; 4] = [
    core::mem::size_of::<Model>() as u32,
    core::mem::size_of::<Tester<Trigger, Output, Delay, Clock>>() as u32,
    core::mem::size_of::<DriftTracker<64>>() as u32,
    core::mem::size_of::<hold_firmware::record::Record>() as u32 + record::FRAME_MAX as u32,
];

static TRIGGER_LOW: AtomicBool = AtomicBool::new(false);
static OUTPUT_LOW: AtomicBool = AtomicBool::new(false);
static TICKS: AtomicU32 = AtomicU32::new(0);
static UART: AtomicU8 = AtomicU8::new(0);

struct Trigger;
struct Output;
struct Clock;
struct Delay;

impl ErrorType for Trigger {
    type Error = core::convert::Infallible;
}
impl OutputPin for Trigger {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        TRIGGER_LOW.store(true, Ordering::Relaxed);
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        TRIGGER_LOW.store(false, Ordering::Relaxed);
        Ok(())
    }
}
impl ErrorType for Output {
    type Error = core::convert::Infallible;
}
impl InputPin for Output {
    fn is_high(&mut self) -> Result<bool, Self::Error> {
        Ok(!OUTPUT_LOW.load(Ordering::Relaxed))
    }
    fn is_low(&mut self) -> Result<bool, Self::Error> {
        Ok(OUTPUT_LOW.load(Ordering::Relaxed))
    }
}
impl TickSource for Clock {
    fn now(&mut self) -> u32 {
        let t = TICKS.load(Ordering::Relaxed);
        TICKS.store(t.wrapping_add(1), Ordering::Relaxed);
        t
    }
    fn clock_hz(&self) -> u32 {
        1_000_000
    }
}
impl DelayNs for Delay {
    fn delay_ns(&mut self, ns: u32) {
        cortex_m::asm::delay(ns / 62); // 16 MHz core
    }
}

#[entry]
fn main() -> ! {
    let stage = Stage {
        vdd_uv: 5_000_000,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 100_000,
        driver_mohm: 50_000,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Junction { is_fa: 2_500_000, n_milli: 1_750, rs_mohm: 500 },
        rise_uv: 2_900_000,
        fall_uv: 2_100_000,
        press_ns: 100_000_000,
        temp_mdeg_c: 25_000,
    };
    let spread = Spread { r: Tolerance::symmetric(10_000), c: Tolerance::symmetric(100_000), ..Spread::default() };
    let (Ok(model), Ok(window)) = (Model::new(&stage), spread.window(&stage)) else {
        loop {
            cortex_m::asm::wfi();
        }
    };
    let Ok(config) = Config::from_model(&model, &window, 1_000_000, 20_000, 100_000) else {
        loop {
            cortex_m::asm::wfi();
        }
    };
    let mut tester = Tester::new(Trigger, Output, Delay, Clock, config, model);
    let mut tracker: DriftTracker<64> = DriftTracker::new(DriftConfig {
        baseline_count: 20,
        lambda_q16: 13_107,
        l_milli: 3_000,
        sigma: None,
        cusum_k: 300,
        cusum_h: 3_000,
        limit: -200_000,
    });
    let mut seq = 0u32;
    loop {
        let Ok(m) = tester.measure() else { continue };
        let dev = m
            .hold_ticks
            .and_then(|h| config.span(h).ok())
            .and_then(|s| model.inverse_c(s).ok())
            .map(|c| i32::try_from(c.deviation_ppm()).unwrap_or(i32::MIN));
        let state = tracker.update(dev.unwrap_or(0)).state;
        let rec = Record {
            seq,
            unit_id: 1,
            press_ticks: m.press_ticks,
            on_ticks: m.on_ticks,
            hold_ticks: m.hold_ticks,
            clock_hz: 1_000_000,
            temp_mdeg_c: None,
            verdict: m.verdict,
            hint: m.hint,
            drift: state,
            c_deviation_ppm: dev,
        };
        if let Ok(frame) = record::encode(&rec) {
            for b in frame {
                UART.store(b, Ordering::Relaxed);
            }
        }
        seq = seq.wrapping_add(1);
        let _ = tracker.periods_to_limit();
    }
}
