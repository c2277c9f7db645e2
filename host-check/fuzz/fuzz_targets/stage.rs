//! The stage file: any text as a stage file, then everything a command does
//! with an accepted one (nominal evaluation, spreads, the test window).
//!
//! Asserts: no panic, and an accepted stage's windows hold their nominal point.
#![no_main]

use host_check::stage::file::{self, Purpose};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    let Ok(stage) = file::parse(std::path::Path::new("fuzz.toml"), text) else { return };
    let _ = stage.nominal();
    for purpose in [Purpose::Fixture, Purpose::Field] {
        if let Ok(w) = stage.window_for(purpose) {
            // The nominal point is one of the corners.
            assert!(w.min <= w.nominal && w.nominal <= w.max, "{purpose:?}: {w:?}");
            assert!(w.on_min <= w.on_nominal && w.on_nominal <= w.on_max, "{purpose:?}: {w:?}");
        }
    }
    let _ = stage.window();
});
