//! A hold stage simulated in integers, and the loops that measure simulated
//! boards with the firmware's engine — the same code on an emulated chip
//! (`hold-firmware/emulator`) and on the host (`host-check`'s
//! `emulator_boards host-run`), so both must send the same bytes.
//!
//! The board files come from `host-check/examples/emulator_boards.rs`: "RCSB",
//! version 1 (u32), the board count (u32), then [`plant::BOARD_LEN`] bytes per
//! board ([`plant::Board`]).
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used, clippy::indexing_slicing, clippy::panic))]

pub mod plant;

use hold_firmware::drift::{DriftConfig, DriftState, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::{Setup, Tester};
use plant::{Board, Clock, Delay, Output, Trigger, BOARD_LEN};

/// Why a run stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum SimError {
    /// The board file is damaged or of another version.
    File,
    /// The engine failed (not reachable with the simulated pins).
    Engine,
}

/// The boards of a file, checked and split.
fn boards(file: &[u8]) -> Result<impl Iterator<Item = Option<Board>> + '_, SimError> {
    let count = match (file.get(..4), file.get(4..8), file.get(8..12)) {
        (Some(b"RCSB"), Some(&[1, 0, 0, 0]), Some(n)) => n.try_into().map_or(0, u32::from_le_bytes),
        _ => return Err(SimError::File),
    };
    let body = file.get(12..).unwrap_or(&[]);
    if body.len() != count as usize * BOARD_LEN {
        return Err(SimError::File);
    }
    Ok(body.chunks_exact(BOARD_LEN).map(Board::from_bytes))
}

/// Sends `rec` as one frame.
fn send_record(rec: &Record, send: &mut impl FnMut(&[u8])) -> bool {
    let mut frame = [0u8; record::FRAME_MAX];
    match record::encode_into(rec, &mut frame) {
        Ok(len) => {
            send(frame.get(..len).unwrap_or(&[]));
            true
        }
        Err(_) => false,
    }
}

/// The simulated tester's boot counter: a run is one start.
pub const BOOT: u32 = 1;

/// A fixture's record of one board: sequence = board index, no temperature,
/// no drift tracking.
fn fixture_record(seq: usize, board: &Board, m: &hold_firmware::Measurement, clock_hz: u32) -> Record {
    Record {
        seq: seq as u32,
        unit_id: board.unit_id,
        boot: BOOT,
        press_ticks: m.press_ticks,
        on_ticks: m.on_ticks,
        hold_ticks: m.hold_ticks,
        clock_hz,
        temp_mdeg_c: None,
        verdict: m.verdict,
        hint: m.hint,
        drift: DriftState::Settling,
        c_deviation_ppm: m.c_deviation_ppm.and_then(|d| i32::try_from(d).ok()),
    }
}

/// The fixture: each board of `file` behind the pins, measured once with
/// `setup`; each record (sequence = board index, no temperature, no drift)
/// goes to `send` as a frame. Returns the records sent.
///
/// # Errors
/// [`SimError`] for a damaged file or a failing engine.
pub fn run_boards(setup: &Setup, file: &[u8], mut send: impl FnMut(&[u8])) -> Result<u32, SimError> {
    let clock_hz = setup.config.clock_hz;
    let mut tester = Tester::new(Trigger, Output, Delay, Clock, setup.config, setup.stage);
    let mut sent = 0u32;
    for (seq, board) in boards(file)?.enumerate() {
        let board = board.ok_or(SimError::File)?;
        plant::fit(&board, clock_hz);
        let m = tester.measure().map_err(|_| SimError::Engine)?;
        sent += u32::from(send_record(&fixture_record(seq, &board, &m, clock_hz), &mut send));
    }
    Ok(sent)
}

/// [`run_boards`] with the async engine (`hold_firmware::AsyncTester`): the
/// same boards behind the same stage, each wait raced against a delay. The
/// records name the same verdicts and hints; its holds are timed at the
/// edge, the blocking engine's at its polls, so the ticks differ by less
/// than a poll.
///
/// # Errors
/// As [`run_boards`].
#[cfg(feature = "async")]
pub async fn run_boards_async(setup: &Setup, file: &[u8], mut send: impl FnMut(&[u8])) -> Result<u32, SimError> {
    let clock_hz = setup.config.clock_hz;
    let mut tester = hold_firmware::AsyncTester::new(Trigger, Output, Delay, Clock, setup.config, setup.stage);
    let mut sent = 0u32;
    for (seq, board) in boards(file)?.enumerate() {
        let board = board.ok_or(SimError::File)?;
        plant::fit(&board, clock_hz);
        let m = tester.measure().await.map_err(|_| SimError::Engine)?;
        sent += u32::from(send_record(&fixture_record(seq, &board, &m, clock_hz), &mut send));
    }
    Ok(sent)
}

/// A field unit: each board of `file` is one day of the same unit, measured
/// at the day's temperature reading; the hold's deviation at that
/// temperature (the hot path) feeds the drift tracker ([`DriftConfig::FIELD_UNIT`]); each
/// record (sequence = day) goes to `send` as a frame. The unit tracks drift,
/// not a production window: it accepts any hold up to its timeout. Returns
/// the records sent.
///
/// # Errors
/// [`SimError`] for a damaged file or a failing engine.
pub fn run_days(setup: &Setup, file: &[u8], mut send: impl FnMut(&[u8])) -> Result<u32, SimError> {
    let mut config = setup.config;
    config.hold_min_ticks = 0;
    config.hold_max_ticks = config.hold_timeout_ticks.saturating_sub(1);
    let clock_hz = config.clock_hz;
    let mut tester = Tester::new(Trigger, Output, Delay, Clock, config, setup.stage);
    let mut tracker: DriftTracker<64> = DriftTracker::new(DriftConfig::FIELD_UNIT);
    let mut sent = 0u32;
    for (day, board) in boards(file)?.enumerate() {
        let board = board.ok_or(SimError::File)?;
        plant::fit(&board, clock_hz);
        let temp = board.temp_mdeg_c;
        tester.set_temperature(temp);
        let m = tester.measure().map_err(|_| SimError::Engine)?;
        let dev = m.hold_ticks.and_then(|h| tester.stage().deviation_ppm_at(h, temp).ok());
        let drift = match dev {
            Some(d) => tracker.update(d).state,
            None => tracker.state(),
        };
        let rec = Record {
            seq: day as u32,
            unit_id: board.unit_id,
            boot: BOOT,
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
        sent += u32::from(send_record(&rec, &mut send));
    }
    Ok(sent)
}
