//! The measurement log: a CSV file of our own schema ("rchold log, version 1").
//!
//! The first line is exactly [`HEADER`]; each further line is one
//! measurement. Fields, in order:
//!
//! | field | meaning | accepted |
//! |---|---|---|
//! | `measured_at` | when, UTC | `YYYY-MM-DDTHH:MM:SS[.fff]Z`, 1970 … 9999 |
//! | `station` | fixture or fleet name | 1 … 64 bytes of UTF-8 |
//! | `batch` | production batch or fleet group | 0 … 64 bytes |
//! | `unit` | board or unit serial | 0 … 4 294 967 295 |
//! | `seq` | the unit's measurement number | 0 … 4 294 967 295 |
//! | `clock_hz` | tick clock of the tester | 1 000 … 200 000 000 |
//! | `press_ticks` | press length | 0 … 2^63 − 1 |
//! | `on_ticks` | turn-on latency; empty if it never turned on | 0 … 2^63 − 1 or empty |
//! | `hold_ticks` | hold; empty if none was measured | 0 … 2^63 − 1 or empty; required for `within-window`, `short`, `long` |
//! | `temp_c` | temperature at the stage, °C | −55 … 150 or empty |
//! | `verdict` | the tester's verdict | `within-window`, `short`, `long`, `no-response`, `stuck-active`, `not-idle`, `chatter` |
//! | `hint` | cause hint | `none`, `wrong-part`, `aged-or-wrong-tolerance`, `near-the-edge`, `open-capacitor`, `no-charge-path`, `open-resistor-or-shorted-node`, `noisy-output` |
//! | `drift` | drift state | `settling`, `steady`, `drifting`, `beyond-limit` |
//! | `c_dev_ppm` | capacitance deviation from nominal, ppm | −1 000 000 … 2 147 483 647 or empty |
//!
//! Fields follow RFC 4180 quoting (a station name with a comma is quoted).

use std::fmt;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

use hold_firmware::record::Record;
use hold_firmware::Verdict;

use crate::{codes, timestamp};

/// The header line of a version-1 log.
pub const HEADER: &str =
    "measured_at,station,batch,unit,seq,clock_hz,press_ticks,on_ticks,hold_ticks,temp_c,verdict,hint,drift,c_dev_ppm";

/// Field names in order.
pub const FIELDS: [&str; 14] = [
    "measured_at",
    "station",
    "batch",
    "unit",
    "seq",
    "clock_hz",
    "press_ticks",
    "on_ticks",
    "hold_ticks",
    "temp_c",
    "verdict",
    "hint",
    "drift",
    "c_dev_ppm",
];

/// A problem in a log file, with where it is.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LogError {
    /// The file.
    pub file: PathBuf,
    /// 1-based line.
    pub line: u64,
    /// The field, when one is at fault.
    pub field: Option<&'static str>,
    /// What is wrong and what is accepted.
    pub message: String,
}

impl fmt::Display for LogError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:{}: ", self.file.display(), self.line)?;
        if let Some(field) = self.field {
            write!(f, "{field}: ")?;
        }
        f.write_str(&self.message)
    }
}

impl std::error::Error for LogError {}

/// One parsed line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Line<'a> {
    /// When, ms since the epoch (UTC).
    pub measured_ms: i64,
    /// Station name.
    pub station: &'a str,
    /// Batch label.
    pub batch: &'a str,
    /// The measurement.
    pub record: Record,
}

fn text(b: &[u8]) -> String {
    let s = String::from_utf8_lossy(b);
    if s.len() > 40 {
        format!("{:?}…", s.chars().take(40).collect::<String>())
    } else {
        format!("{s:?}")
    }
}

/// Parses an unsigned whole number of at most 19 digits (no sign, no spaces).
fn whole(b: &[u8]) -> Option<u64> {
    if b.is_empty() || b.len() > 19 {
        return None;
    }
    b.iter().try_fold(0u64, |acc, &c| c.is_ascii_digit().then(|| acc * 10 + u64::from(c - b'0')))
}

type FieldResult<T> = Result<T, (&'static str, String)>;

fn number(field: &'static str, b: &[u8], max: u64, range: &str) -> FieldResult<u64> {
    match whole(b) {
        Some(v) if v <= max => Ok(v),
        Some(_) => Err((field, format!("{} is out of range (accepted: {range})", text(b)))),
        None => Err((field, format!("{} is not a whole number (accepted: {range})", text(b)))),
    }
}

const TICKS: &str = "0 … 9223372036854775807";
const U32: &str = "0 … 4294967295";

fn ticks(field: &'static str, b: &[u8]) -> FieldResult<u64> {
    number(field, b, i64::MAX as u64, TICKS)
}

fn optional<T>(b: &[u8], f: impl FnOnce(&[u8]) -> FieldResult<T>) -> FieldResult<Option<T>> {
    if b.is_empty() {
        Ok(None)
    } else {
        f(b).map(Some)
    }
}

fn label<'a>(field: &'static str, b: &'a [u8], min: usize) -> FieldResult<&'a str> {
    let s = std::str::from_utf8(b).map_err(|_| (field, format!("{} is not UTF-8 text", text(b))))?;
    if s.len() < min || s.len() > 64 {
        return Err((field, format!("{} has {} bytes (accepted: {min} … 64 bytes)", text(b), s.len())));
    }
    Ok(s)
}

/// Parses one data line's fields (exactly 14).
///
/// # Errors
/// The field at fault and a message with the accepted range.
pub fn parse_fields<'a>(f: &[&'a [u8]; 14]) -> Result<Line<'a>, (&'static str, String)> {
    let [at, station, batch, unit, seq, clock, press, on, hold, temp, verdict, hint, drift, dev] = *f;
    let measured_ms = timestamp::parse_ms(at)
        .ok_or_else(|| ("measured_at", format!("{} is not a UTC time (accepted: {})", text(at), timestamp::FORM)))?;
    let station = label("station", station, 1)?;
    let batch = label("batch", batch, 0)?;
    let unit_id = number("unit", unit, u64::from(u32::MAX), U32)? as u32;
    let seq = number("seq", seq, u64::from(u32::MAX), U32)? as u32;
    let clock_hz = number("clock_hz", clock, 200_000_000, "1000 … 200000000")?;
    if clock_hz < 1_000 {
        return Err(("clock_hz", format!("{} is out of range (accepted: 1000 … 200000000)", text(clock))));
    }
    let press_ticks = ticks("press_ticks", press)?;
    let on_ticks = optional(on, |b| ticks("on_ticks", b))?;
    let hold_ticks = optional(hold, |b| ticks("hold_ticks", b))?;
    let (tlo, thi) = rc_model::limits::TEMP_MDEG_C;
    let temp_mdeg_c = optional(temp, |b| {
        let range = "-55 … 150 °C, or empty";
        let v: f64 = std::str::from_utf8(b)
            .ok()
            .and_then(|s| s.parse().ok())
            .filter(|v: &f64| v.is_finite())
            .ok_or_else(|| ("temp_c", format!("{} is not a number (accepted: {range})", text(b))))?;
        let m = (v * 1000.0).round();
        if m < f64::from(tlo) || m > f64::from(thi) {
            return Err(("temp_c", format!("{} is out of range (accepted: {range})", text(b))));
        }
        Ok(m as i32)
    })?;
    let verdict = codes::verdict_named(verdict).ok_or_else(|| {
        ("verdict", format!("{} is not a verdict (accepted: {})", text(verdict), codes::verdict_names()))
    })?;
    let hint = codes::hint_named(hint)
        .ok_or_else(|| ("hint", format!("{} is not a hint (accepted: {})", text(hint), codes::hint_names())))?;
    let drift = codes::drift_named(drift).ok_or_else(|| {
        ("drift", format!("{} is not a drift state (accepted: {})", text(drift), codes::drift_names()))
    })?;
    let c_deviation_ppm = optional(dev, |b| {
        let range = "-1000000 … 2147483647, or empty";
        std::str::from_utf8(b)
            .ok()
            .and_then(|s| s.parse::<i32>().ok())
            .filter(|&v| v >= -1_000_000)
            .ok_or_else(|| ("c_dev_ppm", format!("{} is not a whole number in range (accepted: {range})", text(b))))
    })?;
    if hold_ticks.is_none() && matches!(verdict, Verdict::WithinWindow | Verdict::Short | Verdict::Long) {
        return Err((
            "hold_ticks",
            format!("is empty but verdict is {} (accepted: a hold for within-window, short and long)", verdict.name()),
        ));
    }
    Ok(Line {
        measured_ms,
        station,
        batch,
        record: Record {
            seq,
            unit_id,
            press_ticks,
            on_ticks,
            hold_ticks,
            clock_hz: clock_hz as u32,
            temp_mdeg_c,
            verdict,
            hint,
            drift,
            c_deviation_ppm,
        },
    })
}

/// Reads a log line by line, calling `each` with every parsed line; stops at
/// the first bad line. Returns the number of data lines.
///
/// # Errors
/// A [`LogError`] naming the file, the line and the field.
pub fn read<R: Read>(
    file: &Path,
    input: R,
    mut each: impl FnMut(u64, &Line<'_>) -> Result<(), String>,
) -> Result<u64, LogError> {
    let at = |line: u64, field: Option<&'static str>, message: String| LogError {
        file: file.to_path_buf(),
        line,
        field,
        message,
    };
    let mut rdr =
        csv::ReaderBuilder::new().has_headers(false).flexible(true).buffer_capacity(1 << 20).from_reader(input);
    let mut rec = csv::ByteRecord::new();
    let mut n = 0u64;
    let mut first = true;
    loop {
        match rdr.read_byte_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => {
                let line = e.position().map_or(n + 1, csv::Position::line);
                return Err(at(line, None, format!("unreadable CSV: {e}")));
            }
        }
        let line = rec.position().map_or(n + 1, csv::Position::line);
        if first {
            first = false;
            let got: Vec<&[u8]> = rec.iter().collect();
            let want: Vec<&[u8]> = FIELDS.iter().map(|f| f.as_bytes()).collect();
            if got != want {
                return Err(at(line, None, format!("not an rchold log: the first line must be exactly {HEADER:?}")));
            }
            continue;
        }
        if rec.len() != FIELDS.len() {
            return Err(at(line, None, format!("{} fields (accepted: exactly {}: {HEADER})", rec.len(), FIELDS.len())));
        }
        let mut f: [&[u8]; 14] = [&[]; 14];
        for (slot, v) in f.iter_mut().zip(rec.iter()) {
            *slot = v;
        }
        let parsed = parse_fields(&f).map_err(|(field, m)| at(line, Some(field), m))?;
        n += 1;
        each(line, &parsed).map_err(|m| at(line, None, m))?;
    }
    if first {
        return Err(at(1, None, format!("empty file: an rchold log starts with {HEADER:?}")));
    }
    Ok(n)
}

/// Writes the header line.
///
/// # Errors
/// Write errors.
pub fn write_header(out: &mut impl Write) -> std::io::Result<()> {
    writeln!(out, "{HEADER}")
}

fn quoted(s: &str) -> std::borrow::Cow<'_, str> {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\"")).into()
    } else {
        s.into()
    }
}

/// Writes one line.
///
/// # Errors
/// Write errors.
pub fn write_line(
    out: &mut impl Write,
    measured_ms: i64,
    station: &str,
    batch: &str,
    r: &Record,
) -> std::io::Result<()> {
    struct Opt<T>(Option<T>);
    impl<T: fmt::Display> fmt::Display for Opt<T> {
        fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
            match &self.0 {
                Some(v) => v.fmt(f),
                None => Ok(()),
            }
        }
    }
    let temp = r.temp_mdeg_c.map(|t| {
        let sign = if t < 0 { "-" } else { "" };
        let a = t.unsigned_abs();
        format!("{sign}{}.{:03}", a / 1000, a % 1000)
    });
    writeln!(
        out,
        "{},{},{},{},{},{},{},{},{},{},{},{},{},{}",
        timestamp::format_ms(measured_ms),
        quoted(station),
        quoted(batch),
        r.unit_id,
        r.seq,
        r.clock_hz,
        r.press_ticks,
        Opt(r.on_ticks),
        Opt(r.hold_ticks),
        Opt(temp),
        r.verdict.name(),
        r.hint.name(),
        codes::drift_name(r.drift),
        Opt(r.c_deviation_ppm),
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use hold_firmware::drift::DriftState;
    use hold_firmware::Hint;

    fn rec() -> Record {
        Record {
            seq: 3,
            unit_id: 1_204,
            press_ticks: 50_000,
            on_ticks: Some(12),
            hold_ticks: Some(74_000),
            clock_hz: 1_000_000,
            temp_mdeg_c: Some(-5_250),
            verdict: Verdict::Short,
            hint: Hint::NearTheEdge,
            drift: DriftState::Settling,
            c_deviation_ppm: Some(-151_000),
        }
    }

    fn parse_all(text: &str) -> Result<Vec<(i64, String, String, Record)>, LogError> {
        let mut v = Vec::new();
        read(Path::new("t.csv"), text.as_bytes(), |_, l| {
            v.push((l.measured_ms, l.station.to_owned(), l.batch.to_owned(), l.record));
            Ok(())
        })?;
        Ok(v)
    }

    #[test]
    fn written_lines_read_back() -> Result<(), LogError> {
        let mut out = Vec::new();
        let _ = write_header(&mut out);
        let _ = write_line(&mut out, 1_800_000_000_250, "bay, 2", "B\"7", &rec());
        let mut r2 = rec();
        r2.on_ticks = None;
        r2.hold_ticks = None;
        r2.temp_mdeg_c = None;
        r2.c_deviation_ppm = None;
        r2.verdict = Verdict::NoResponse;
        r2.hint = Hint::NoChargePath;
        let _ = write_line(&mut out, 0, "s", "", &r2);
        let text = String::from_utf8_lossy(&out).into_owned();
        let got = parse_all(&text)?;
        assert_eq!(
            got,
            vec![(1_800_000_000_250, "bay, 2".into(), "B\"7".into(), rec()), (0, "s".into(), String::new(), r2)]
        );
        Ok(())
    }

    #[test]
    fn bad_fields_name_line_field_and_range() {
        let good = "2027-03-01T08:00:00Z,bay-1,B7,1204,3,1000000,50000,12,74000,23.5,within-window,none,settling,";
        let cases = [
            (
                good.replace("1000000,", "999,"),
                "t.csv:3: clock_hz: \"999\" is out of range (accepted: 1000 … 200000000)",
            ),
            (
                good.replace("23.5", "151"),
                "t.csv:3: temp_c: \"151\" is out of range (accepted: -55 … 150 °C, or empty)",
            ),
            (good.replace("within-window", "pass"), "t.csv:3: verdict: \"pass\" is not a verdict"),
            (good.replace(",74000,", ",,"), "t.csv:3: hold_ticks: is empty but verdict is within-window"),
            (good.replace("08:00:00Z", "08:00:00"), "t.csv:3: measured_at: \"2027-03-01T08:00:00\" is not a UTC time"),
            (good.replace(",1204,", ",-4,"), "t.csv:3: unit: \"-4\" is not a whole number (accepted: 0 … 4294967295)"),
            (good.replace(",none,", ",none,x,"), "t.csv:3: 15 fields (accepted: exactly 14"),
        ];
        for (line, want) in cases {
            let text = format!("{HEADER}\n{good}\n{line}\n{good}\n");
            let e = parse_all(&text).err().map(|e| e.to_string()).unwrap_or_default();
            assert!(e.starts_with(want), "{e}\nwanted {want}");
            assert!(!e.contains('\n'));
        }
        let e = parse_all("a,b\n").err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.starts_with("t.csv:1: not an rchold log"), "{e}");
        let e = parse_all("").err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.starts_with("t.csv:1: empty file"), "{e}");
    }
}
