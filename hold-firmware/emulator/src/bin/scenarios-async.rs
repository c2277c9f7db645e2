//! The fixture with the async engine, under embassy's executor on the M3:
//! the same boards behind the same simulated stage as `scenarios`, each
//! output edge awaited and raced against a delay (`hold_sim::run_boards_async`,
//! the same future the host runs). Its records name the same verdicts and
//! hints as the blocking engine's; its holds are timed at the edge.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use embassy_executor::Spawner;
use hold_emulator::{exit, print, print_value, Uart0};
use hold_firmware::Setup;

static SETUP: &[u8] = include_bytes!(env!("RCHOLD_FIXTURE_SETUP"));
static BOARDS: &[u8] = include_bytes!(env!("RCHOLD_BOARDS"));

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    print(b"scenarios-async: panic\n");
    exit(false)
}

#[embassy_executor::main]
async fn main(_spawner: Spawner) {
    let Ok(setup) = Setup::from_blob(SETUP) else {
        print(b"scenarios-async: the settings blob does not load\n");
        exit(false)
    };
    let mut uart = Uart0::new();
    match hold_sim::run_boards_async(&setup, BOARDS, |frame| uart.write(frame)).await {
        Ok(sent) => {
            print_value("scenarios-async: boards measured and sent", sent);
            exit(true)
        }
        Err(_) => {
            print(b"scenarios-async: the board file is damaged or the engine failed\n");
            exit(false)
        }
    }
}
