//! The one check of a record, whatever its path into rchold: a frame from
//! `listen`, a log line (every format, mapped ones included, after rchold has
//! judged what it left empty), a Parquet row, and the store's own insert.
//! Every field's range and the fields' consistency, with the same limits the
//! measurement log documents (README, "The measurement log").

use hold_firmware::record::Record;
use hold_firmware::{Hint, Verdict};

/// Tick clocks accepted, Hz.
pub const CLOCK_HZ: (u32, u32) = (1_000, 200_000_000);
/// Largest time in ticks accepted (the store's signed 64-bit integers).
pub const MAX_TICKS: u64 = i64::MAX as u64;
/// Smallest capacitance deviation accepted, ppm (−100 %: no capacitance).
pub const MIN_C_DEV_PPM: i32 = -1_000_000;

/// Why a record is refused: the field and a message with the accepted range.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Refusal {
    /// The field at fault (the log's column name).
    pub field: &'static str,
    /// What is wrong, with what is accepted.
    pub message: String,
}

impl std::fmt::Display for Refusal {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: {}", self.field, self.message)
    }
}

impl std::error::Error for Refusal {}

/// Whether a character may stand in a station or batch name: not a control
/// character, and not one that reorders or hides text on a terminal or in a
/// spreadsheet (the bidirectional embeddings, overrides and isolates
/// U+202A…U+202E and U+2066…U+2069, the marks U+200E, U+200F and U+061C, and
/// the zero-width U+200B…U+200D, U+2060 and U+FEFF).
#[must_use]
pub fn name_char(c: char) -> bool {
    !(c.is_control()
        || matches!(c, '\u{202A}'..='\u{202E}' | '\u{2066}'..='\u{2069}' | '\u{200B}'..='\u{200F}')
        || matches!(c, '\u{061C}' | '\u{2060}' | '\u{FEFF}'))
}

/// Checks a station or batch name: `min` … 64 bytes of text whose every
/// character passes [`name_char`] (the formatting characters are those
/// Unicode's bidirectional algorithm, UAX #9, and its format category list). The one rule for log lines, mapped logs
/// and `listen`'s labels.
///
/// # Errors
/// What is wrong, with what is accepted.
pub fn name(text: &str, min: usize) -> Result<(), String> {
    if text.len() < min || text.len() > 64 {
        return Err(format!("has {} bytes (accepted: {min} … 64 bytes)", text.len()));
    }
    if let Some(c) = text.chars().find(|&c| !name_char(c)) {
        return Err(format!(
            "holds U+{:04X}, a control, direction or invisible character (accepted: text without them)",
            u32::from(c)
        ));
    }
    Ok(())
}

fn refuse(field: &'static str, message: String) -> Result<(), Refusal> {
    Err(Refusal { field, message })
}

/// Checks one record.
///
/// # Errors
/// The first field out of its range, or inconsistent with the others:
/// - `clock_hz` within [`CLOCK_HZ`]; `press_ticks`, `on_ticks`, `hold_ticks` at
///   most [`MAX_TICKS`];
/// - `temp_c` within the model's temperature domain (−55 … 150 °C);
/// - `c_dev_ppm` at least [`MIN_C_DEV_PPM`];
/// - a verdict the hold decides (within-window, short, long, fast-start,
///   slow-start) has a hold; one the firmware gives before any hold
///   (no-response, stuck-active, not-idle) has none, and no-response and
///   not-idle have no turn-on either;
/// - a passing record has no cause hint.
pub fn record(r: &Record) -> Result<(), Refusal> {
    let (clo, chi) = CLOCK_HZ;
    if !(clo..=chi).contains(&r.clock_hz) {
        return refuse("clock_hz", format!("{} is out of range (accepted: {clo} … {chi})", r.clock_hz));
    }
    for (field, v) in [("press_ticks", Some(r.press_ticks)), ("on_ticks", r.on_ticks), ("hold_ticks", r.hold_ticks)] {
        if let Some(v) = v.filter(|&v| v > MAX_TICKS) {
            return refuse(field, format!("{v} is out of range (accepted: 0 … {MAX_TICKS})"));
        }
    }
    let (tlo, thi) = rc_model::limits::TEMP_MDEG_C;
    if let Some(t) = r.temp_mdeg_c.filter(|t| !(tlo..=thi).contains(t)) {
        return refuse(
            "temp_c",
            format!(
                "{} °C is out of range (accepted: {} … {} °C, or none)",
                f64::from(t) / 1e3,
                tlo / 1000,
                thi / 1000
            ),
        );
    }
    if let Some(d) = r.c_deviation_ppm.filter(|&d| d < MIN_C_DEV_PPM) {
        return refuse("c_dev_ppm", format!("{d} is out of range (accepted: {MIN_C_DEV_PPM} … {}, or none)", i32::MAX));
    }
    let v = r.verdict;
    if v.needs_hold() && r.hold_ticks.is_none() {
        return refuse(
            "hold_ticks",
            format!("is empty but verdict is {} (accepted: a hold for within-window, short, long, fast-start and slow-start)", v.name()),
        );
    }
    let before_hold = matches!(v, Verdict::NoResponse | Verdict::StuckActive | Verdict::NotIdle);
    if before_hold && r.hold_ticks.is_some() {
        return refuse(
            "hold_ticks",
            format!("is given but verdict is {} (accepted: none for no-response, stuck-active and not-idle)", v.name()),
        );
    }
    if matches!(v, Verdict::NoResponse | Verdict::NotIdle) && r.on_ticks.is_some() {
        return refuse(
            "on_ticks",
            format!("is given but verdict is {} (accepted: none for no-response and not-idle)", v.name()),
        );
    }
    if v.passes() && r.hint != Hint::None {
        return refuse(
            "hint",
            format!("is {} but verdict is within-window (accepted: none for a passing record)", r.hint.name()),
        );
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_without_hidden_or_reordering_characters() {
        assert_eq!(name("bay-A 2", 1), Ok(()));
        assert_eq!(name("Ünïcode ok", 1), Ok(()));
        for bad in ["a\u{202E}b", "a\u{200B}b", "\u{FEFF}a", "a\u{2066}b", "a\x1b[31mb", "a\u{200F}"] {
            assert!(name(bad, 1).is_err_and(|m| m.contains("direction or invisible")), "{bad:?}");
        }
        assert!(name("", 1).is_err() && name("", 0).is_ok() && name(&"x".repeat(65), 0).is_err());
    }
    use crate::data::store::tests::record as good;
    use hold_firmware::drift::DriftState;

    /// Each record `listen` once stored and `ingest` refused is refused here, by the field at fault.
    #[test]
    fn every_out_of_range_field_is_named() {
        assert_eq!(record(&good(1, 1)), Ok(()));
        let field = |f: &dyn Fn(&mut Record)| {
            let mut r = good(1, 1);
            f(&mut r);
            record(&r).err().map(|e| e.field)
        };
        for clock in [0, 1, 999, 200_000_001, u32::MAX] {
            assert_eq!(field(&|r| r.clock_hz = clock), Some("clock_hz"), "{clock}");
        }
        for t in [-2_147_483_000, -273_150, -55_001, 150_001, i32::MAX] {
            assert_eq!(field(&|r| r.temp_mdeg_c = Some(t)), Some("temp_c"), "{t}");
        }
        assert_eq!(field(&|r| r.c_deviation_ppm = Some(-2_000_000)), Some("c_dev_ppm"));
        assert_eq!(field(&|r| r.hold_ticks = Some(u64::MAX)), Some("hold_ticks"));
        assert_eq!(field(&|r| r.on_ticks = Some(u64::MAX)), Some("on_ticks"));
        assert_eq!(field(&|r| r.press_ticks = u64::MAX), Some("press_ticks"));
        assert_eq!(field(&|r| r.hold_ticks = None), Some("hold_ticks"), "within-window without a hold");
        assert_eq!(
            field(&|r| {
                r.verdict = Verdict::Short;
                r.hold_ticks = None;
            }),
            Some("hold_ticks")
        );
        assert_eq!(field(&|r| r.verdict = Verdict::StuckActive), Some("hold_ticks"), "stuck-active with a hold");
        assert_eq!(
            field(&|r| {
                r.verdict = Verdict::NoResponse;
                r.hold_ticks = None;
            }),
            Some("on_ticks")
        );
        assert_eq!(field(&|r| r.hint = Hint::WrongPart), Some("hint"), "a pass with a cause");
        // The edges themselves are accepted.
        for f in [
            &(|r: &mut Record| r.clock_hz = 1_000) as &dyn Fn(&mut Record),
            &|r| r.clock_hz = 200_000_000,
            &|r| r.temp_mdeg_c = Some(-55_000),
            &|r| r.temp_mdeg_c = Some(150_000),
            &|r| r.c_deviation_ppm = Some(-1_000_000),
            &|r| r.hold_ticks = Some(MAX_TICKS),
            &|r| {
                r.verdict = Verdict::NotIdle;
                r.on_ticks = None;
                r.hold_ticks = None;
                r.drift = DriftState::Steady;
            },
        ] {
            assert_eq!(field(f), None);
        }
    }
}
