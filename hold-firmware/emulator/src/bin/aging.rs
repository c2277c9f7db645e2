//! A field unit on the chip: one Kestrel-5 stage measured once a day for
//! 700 days while its capacitor ages 1 % a month (the days come from the
//! host, `emulator_boards aging`). Each day the unit sets its temperature
//! reading, measures the simulated stage, turns the hold into the
//! capacitance deviation at that temperature (the hot path), updates the
//! drift tracker and sends the record over UART0, as a unit in the field does
//! (`hold_sim::run_days`, the same loop the host runs). With the `defmt`
//! feature its log points (verdicts, drift state changes) go out over
//! semihosting as defmt frames.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use cortex_m_rt::entry;
#[cfg(feature = "defmt")]
use defmt_semihosting as _;
#[cfg(not(feature = "defmt"))]
use hold_emulator::print_value;
use hold_emulator::{exit, print, Uart0};
use hold_firmware::Setup;

static SETUP: &[u8] = include_bytes!(env!("RCHOLD_SETUP"));
static DAYS: &[u8] = include_bytes!(env!("RCHOLD_AGING_DAYS"));

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    print(b"aging: panic\n");
    exit(false)
}

#[entry]
fn main() -> ! {
    let Ok(setup) = Setup::from_blob(SETUP) else {
        print(b"aging: the settings blob does not load\n");
        exit(false)
    };
    let mut uart = Uart0::new();
    let Ok(sent) = hold_sim::run_days(&setup, DAYS, |frame| uart.write(frame)) else {
        print(b"aging: the day file is damaged or the engine failed\n");
        exit(false)
    };
    #[cfg(feature = "defmt")]
    defmt::info!("aging: {} days measured and sent", sent);
    #[cfg(not(feature = "defmt"))]
    print_value("aging: days measured and sent", sent);
    exit(true)
}
