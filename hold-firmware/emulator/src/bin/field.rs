//! The tester a field unit flashes: the settings blob (timings and prepared
//! stage, written by `rchold window --emit bin`), the measuring engine, the
//! hot path, the drift tracker with a 64-entry history and the record
//! encoder — no solver. On the emulated board a simulated stage stands
//! behind the pins (`hold_emulator::run_field`).
//!
//! Panic-never: the panic handler calls a function that exists nowhere, so
//! the release link fails if any panic path is reachable.
#![no_std]
#![no_main]
#![deny(unsafe_code)]

use cortex_m_rt::entry;
use hold_emulator::{exit, paint_stack, run_field};
use hold_firmware::Setup;

static SETUP: &[u8] = include_bytes!(env!("RCHOLD_SETUP"));

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    extern "C" {
        /// Defined nowhere: linking it means a panic path survived optimisation.
        fn rchold_field_tester_must_not_panic() -> !;
    }
    // SAFETY: never runs; the link fails first if this handler is reachable.
    #[allow(unsafe_code)]
    unsafe {
        rchold_field_tester_must_not_panic()
    }
}

/// The settings from flash. Out of line, so that the loader's temporaries
/// are gone from the stack before the measuring starts.
#[inline(never)]
fn load() -> Option<Setup> {
    Setup::from_blob(SETUP).ok()
}

#[entry]
fn main() -> ! {
    paint_stack();
    match load() {
        Some(setup) => run_field(&setup),
        None => exit(false),
    }
}
