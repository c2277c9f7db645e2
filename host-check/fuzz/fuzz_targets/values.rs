//! Component values and tolerances as stage files and options give them
//! ("4K7", "100 nF", "5%", "1meg").
//!
//! Asserts: an accepted value is finite; an accepted tolerance is finite and
//! not negative; the SI and IEC 60062 spellings of an accepted plain number
//! read back to the same value.
#![no_main]

use host_check::stage::values::{parse_tolerance, parse_value, Tol};
use libfuzzer_sys::fuzz_target;

const UNITS: [&[&str]; 5] = [&[], &["F"], &["Ω", "ohm"], &["V"], &["s"]];

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    for unit in UNITS {
        if let Ok(v) = parse_value(text, unit) {
            assert!(v.is_finite(), "{text:?} read as {v}");
            // The value written back in full precision reads the same.
            let again = parse_value(&format!("{v:e}"), unit);
            assert_eq!(again.ok(), Some(v), "{text:?} → {v:e}");
        }
        if let Ok(t) = parse_tolerance(text, unit) {
            let (Tol::Relative(x) | Tol::Absolute(x)) = t;
            assert!(x.is_finite() && x >= 0.0, "{text:?} read as {t:?}");
        }
    }
});
