//! The fixture on the chip: every board of the host's scenario file (healthy
//! boards drawn across the tolerance spread, and the fault matrix) is put
//! behind the pins as a simulated stage (`hold_emulator::plant`), measured
//! by the real engine with the fixture's settings blob, and its record goes
//! out of UART0 as a frame, as a fixture sends it to its station. With the
//! `defmt` feature the engine's log points go out over semihosting as defmt
//! frames.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use cortex_m_rt::entry;
#[cfg(feature = "defmt")]
use defmt_semihosting as _;
use hold_emulator::plant::{self, Board, Clock, Delay, Output, Trigger, BOARD_LEN};
#[cfg(not(feature = "defmt"))]
use hold_emulator::print_value;
use hold_emulator::{exit, print, Uart0};
use hold_firmware::drift::DriftState;
use hold_firmware::record::{self, Record};
use hold_firmware::{Setup, Tester};

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
    let clock_hz = setup.config.clock_hz;
    // The file: "RCSB", version 1, board count, then BOARD_LEN bytes per board.
    let count = match (BOARDS.get(..4), BOARDS.get(4..8), BOARDS.get(8..12)) {
        (Some(b"RCSB"), Some(&[1, 0, 0, 0]), Some(n)) => n.try_into().map_or(0, u32::from_le_bytes),
        _ => {
            print(b"scenarios: the board file is damaged or of another version\n");
            exit(false)
        }
    };
    let mut uart = Uart0::new();
    let mut tester = Tester::new(Trigger, Output, Delay, Clock, setup.config, setup.stage);
    let mut sent = 0u32;
    for (seq, bytes) in BOARDS.get(12..).unwrap_or(&[]).chunks_exact(BOARD_LEN).take(count as usize).enumerate() {
        let Some(board) = Board::from_bytes(bytes) else { exit(false) };
        plant::fit(&board, clock_hz);
        let Ok(m) = tester.measure() else { exit(false) };
        let rec = Record {
            seq: seq as u32,
            unit_id: board.unit_id,
            press_ticks: m.press_ticks,
            on_ticks: m.on_ticks,
            hold_ticks: m.hold_ticks,
            clock_hz,
            temp_mdeg_c: None,
            verdict: m.verdict,
            hint: m.hint,
            drift: DriftState::Settling,
            c_deviation_ppm: m.c_deviation_ppm.and_then(|d| i32::try_from(d).ok()),
        };
        let mut frame = [0u8; record::FRAME_MAX];
        if let Ok(len) = record::encode_into(&rec, &mut frame) {
            uart.write(frame.get(..len).unwrap_or(&[]));
            sent += 1;
        }
    }
    // With defmt the semihosting output carries its frames: the summary goes there too.
    #[cfg(feature = "defmt")]
    defmt::info!("scenarios: {} boards measured and sent", sent);
    #[cfg(not(feature = "defmt"))]
    print_value("scenarios: boards measured and sent", sent);
    exit(sent == count)
}
