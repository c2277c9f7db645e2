//! A field unit on the chip: one Kestrel-5 stage measured once a day for
//! 700 days while its capacitor ages 1 % a month (the days come from the
//! host, `emulator_boards aging`). Each day the unit sets its temperature
//! reading, measures the simulated stage, turns the hold into the
//! capacitance deviation at that temperature (the hot path), updates the
//! drift tracker and sends the record over UART0, as a unit in the field does.
//! With the `defmt` feature its log points (verdicts, drift state changes) go
//! out over semihosting as defmt frames.
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
use hold_firmware::drift::{DriftConfig, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::{Setup, Tester};

static SETUP: &[u8] = include_bytes!(env!("RCHOLD_SETUP"));
static DAYS: &[u8] = include_bytes!(env!("RCHOLD_AGING_DAYS"));

/// The tracker settings of the demo's fleet (`host_check::demo::FLEET_DRIFT`).
const DRIFT: DriftConfig = DriftConfig {
    baseline_count: 20,
    lambda_q16: 13_107,
    l_milli: 3_000,
    sigma: None,
    cusum_k: 5_000,
    cusum_h: 50_000,
    limit: -200_000,
};

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
    let count = match (DAYS.get(..4), DAYS.get(4..8), DAYS.get(8..12)) {
        (Some(b"RCSB"), Some(&[1, 0, 0, 0]), Some(n)) => n.try_into().map_or(0, u32::from_le_bytes),
        _ => {
            print(b"aging: the day file is damaged or of another version\n");
            exit(false)
        }
    };
    // A field unit tracks drift, not a production window: it accepts any
    // hold up to its timeout (as the demo's fleet does).
    let mut config = setup.config;
    config.hold_min_ticks = 0;
    config.hold_max_ticks = config.hold_timeout_ticks.saturating_sub(1);
    let clock_hz = config.clock_hz;
    let mut uart = Uart0::new();
    let mut tester = Tester::new(Trigger, Output, Delay, Clock, config, setup.stage);
    let mut tracker: DriftTracker<64> = DriftTracker::new(DRIFT);
    let mut sent = 0u32;
    for (day, bytes) in DAYS.get(12..).unwrap_or(&[]).chunks_exact(BOARD_LEN).take(count as usize).enumerate() {
        let Some(board) = Board::from_bytes(bytes) else { exit(false) };
        plant::fit(&board, clock_hz);
        let temp = board.temp_mdeg_c;
        tester.set_temperature(temp);
        let Ok(m) = tester.measure() else { exit(false) };
        let dev = m.hold_ticks.and_then(|h| tester.stage().deviation_ppm_at(h, temp).ok());
        let drift = match dev {
            Some(d) => tracker.update(d).state,
            None => tracker.state(),
        };
        let rec = Record {
            seq: day as u32,
            unit_id: board.unit_id,
            press_ticks: m.press_ticks,
            on_ticks: m.on_ticks,
            hold_ticks: m.hold_ticks,
            clock_hz,
            temp_mdeg_c: Some(temp),
            verdict: m.verdict,
            hint: m.hint,
            drift,
            c_deviation_ppm: dev,
        };
        let mut frame = [0u8; record::FRAME_MAX];
        if let Ok(len) = record::encode_into(&rec, &mut frame) {
            uart.write(frame.get(..len).unwrap_or(&[]));
            sent += 1;
        }
    }
    // With defmt the semihosting output carries its frames: the summary goes there too.
    #[cfg(feature = "defmt")]
    defmt::info!("aging: {} days measured and sent", sent);
    #[cfg(not(feature = "defmt"))]
    print_value("aging: days measured and sent", sent);
    exit(sent == count)
}
