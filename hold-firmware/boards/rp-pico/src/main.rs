//! The hold-stage tester on a Raspberry Pi Pico: every `MEASURE_EVERY_MS`
//! it presses the stage's trigger (GP2), times the stage's output (GP3)
//! with the RP2040's 1 MHz timer, judges the hold with the prepared stage
//! from the settings blob, tracks the capacitor's drift, sends the record
//! out of UART0 (GP0, 115 200 baud) for `rchold listen`, and shows the last
//! verdict on the LED (GP25): on for within the window, off otherwise; a
//! settings blob that does not load blinks it fast. See README.md for the
//! wiring and the cautions.
#![no_std]
#![no_main]
#![deny(unsafe_code)]

use embedded_hal::delay::DelayNs;
use embedded_hal::digital::OutputPin;
use hold_firmware::drift::{DriftConfig, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::{Setup, Tester, TickSource, Verdict};
use panic_halt as _;
use rp2040_hal as hal;

use hal::fugit::RateExtU32;
use hal::gpio::PinState;
use hal::uart::{DataBits, StopBits, UartConfig, UartPeripheral};
use hal::Clock;

/// The second-stage boot loader for the Pico's W25Q-family flash, placed in
/// the first 256 bytes of flash by `memory.x` (the one item that needs the
/// `unsafe_code` lint relaxed: a chosen link section).
#[allow(unsafe_code)]
#[link_section = ".boot2"]
#[used]
pub static BOOT2_FIRMWARE: [u8; 256] = rp2040_boot2::BOOT_LOADER_W25Q080;

/// Timings and the prepared stage, from `rchold window … --clock 1MHz --emit bin`.
static SETUP: &[u8] = include_bytes!(env!("RCHOLD_SETUP"));

/// The Pico's crystal, Hz.
const XTAL_HZ: u32 = 12_000_000;
/// The RP2040's timer counts microseconds.
const TIMER_HZ: u32 = 1_000_000;
/// This unit's identifier in its records.
const UNIT_ID: u32 = 1;
/// Time between two measurements (a field unit measures once a day; the
/// example measures every ten seconds so that a bench shows it working).
const MEASURE_EVERY_MS: u32 = 10_000;

/// The timer's low 32 bits as the engine's tick source (it wraps every
/// 71.6 minutes; the engine reads it far more often).
struct Ticks(hal::Timer);

impl TickSource for Ticks {
    fn now(&mut self) -> u32 {
        self.0.get_counter_low()
    }
    fn clock_hz(&self) -> u32 {
        TIMER_HZ
    }
}

fn halt() -> ! {
    loop {
        cortex_m::asm::wfi();
    }
}

#[hal::entry]
fn main() -> ! {
    let Some(mut pac) = hal::pac::Peripherals::take() else { halt() };
    let mut watchdog = hal::Watchdog::new(pac.WATCHDOG);
    let Ok(clocks) = hal::clocks::init_clocks_and_plls(
        XTAL_HZ,
        pac.XOSC,
        pac.CLOCKS,
        pac.PLL_SYS,
        pac.PLL_USB,
        &mut pac.RESETS,
        &mut watchdog,
    ) else {
        halt()
    };
    let sio = hal::Sio::new(pac.SIO);
    let pins = hal::gpio::Pins::new(pac.IO_BANK0, pac.PADS_BANK0, sio.gpio_bank0, &mut pac.RESETS);
    let mut timer = hal::Timer::new(pac.TIMER, &mut pac.RESETS, &clocks);
    let uart_pins = (pins.gpio0.into_function(), pins.gpio1.into_function());
    let Ok(uart) = UartPeripheral::new(pac.UART0, uart_pins, &mut pac.RESETS)
        .enable(UartConfig::new(115_200.Hz(), DataBits::Eight, None, StopBits::One), clocks.peripheral_clock.freq())
    else {
        halt()
    };
    let mut led = pins.gpio25.into_push_pull_output();

    let setup = match Setup::from_blob(SETUP) {
        Ok(s) if s.config.clock_hz == TIMER_HZ => s,
        // A corrupt blob, another version, or one made for another clock.
        _ => loop {
            let _ = led.set_high();
            timer.delay_ms(100);
            let _ = led.set_low();
            timer.delay_ms(100);
        },
    };

    // Trigger released (high) before the first press; the output has a pull-up.
    let trigger = pins.gpio2.into_push_pull_output_in_state(PinState::High);
    let output = pins.gpio3.into_pull_up_input();
    let mut tester = Tester::new(trigger, output, timer, Ticks(timer), setup.config, setup.stage);
    let mut tracker: DriftTracker<64> = DriftTracker::new(DriftConfig {
        baseline_count: 8,
        lambda_q16: 13_107, // λ = 0.2
        l_milli: 3_000,     // L = 3
        sigma: None,
        cusum_k: 5_000, // ppm
        cusum_h: 40_000,
        limit: -200_000, // C 20 % below nominal: end of life
    });

    // This board keeps no boot counter in flash: a 32-bit number drawn from the
    // ring oscillator's random bit at start stands in for one (it changes at
    // every reset, which is all a collector needs to tell a restart from a repeat).
    let rosc = hal::rosc::RingOscillator::new(pac.ROSC).initialize();
    let boot = (0..32).fold(0u32, |acc, _| {
        timer.delay_us(1);
        (acc << 1) | u32::from(rosc.get_random_bit())
    });
    let mut seq = 0u32;
    loop {
        if let Ok(m) = tester.measure() {
            // No temperature sensor on this example: holds are judged at the
            // stage's reference temperature (call tester.set_temperature and
            // pass the same temperature below when a sensor is fitted).
            let temp = tester.stage().ref_mdeg_c();
            // On a short or long hold the engine inverted it for its hint too; reusing
            // that value costs the field tester 88 bytes of flash (measured) for a path
            // only failing boards take, so the deviation is computed here for every hold.
            let dev = m.hold_ticks.and_then(|h| tester.stage().deviation_ppm_at(h, temp).ok());
            let drift = match dev {
                Some(d) => tracker.update(d).state,
                None => tracker.state(),
            };
            let rec = Record {
                seq,
                unit_id: UNIT_ID,
                boot,
                press_ticks: m.press_ticks,
                on_ticks: m.on_ticks,
                hold_ticks: m.hold_ticks,
                clock_hz: TIMER_HZ,
                temp_mdeg_c: None,
                verdict: m.verdict,
                hint: m.hint,
                drift,
                c_deviation_ppm: dev,
            };
            let mut frame = [0u8; record::FRAME_MAX];
            if let Ok(len) = record::encode_into(&rec, &mut frame) {
                uart.write_full_blocking(frame.get(..len).unwrap_or(&[]));
            }
            let _ = if m.verdict == Verdict::WithinWindow { led.set_high() } else { led.set_low() };
            seq = seq.wrapping_add(1);
        }
        timer.delay_ms(MEASURE_EVERY_MS);
    }
}
