//! The fixture on the chip: every board of the host's scenario file (healthy
//! boards drawn across the tolerance spread, and the fault matrix) is put
//! behind the pins as a simulated stage, measured by the real engine with
//! the fixture's settings blob, and its record goes out of UART0 as a frame,
//! as a fixture sends it to its station (`hold_sim::run_boards`, the same
//! loop the host runs). With the `defmt` feature the engine's log points go
//! out over semihosting as defmt frames.
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

static SETUP: &[u8] = include_bytes!(env!("RCHOLD_FIXTURE_SETUP"));
static BOARDS: &[u8] = include_bytes!(env!("RCHOLD_BOARDS"));

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    print(b"scenarios: panic\n");
    exit(false)
}

#[entry]
fn main() -> ! {
    let Ok(setup) = Setup::from_blob(SETUP) else {
        print(b"scenarios: the settings blob does not load\n");
        exit(false)
    };
    let mut uart = Uart0::new();
    let Ok(sent) = hold_sim::run_boards(&setup, BOARDS, |frame| uart.write(frame)) else {
        print(b"scenarios: the board file is damaged or the engine failed\n");
        exit(false)
    };
    // With defmt the semihosting output carries its frames: the summary goes there too.
    #[cfg(feature = "defmt")]
    defmt::info!("scenarios: {} boards measured and sent", sent);
    #[cfg(not(feature = "defmt"))]
    print_value("scenarios: boards measured and sent", sent);
    exit(true)
}
