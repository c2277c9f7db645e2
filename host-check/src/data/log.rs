//! The measurement log: a CSV file of our own schema ("rchold log", version 2;
//! version 1 is still read).
//!
//! The first line is exactly [`HEADER`] (or [`HEADER_V1`]: a log without the
//! `boot` field, read as boot 0); each further line is one measurement, with
//! as many fields as its header. Fields, in order:
//!
//! | field | meaning | accepted |
//! |---|---|---|
//! | `measured_at` | when | `YYYY-MM-DDTHH:MM:SS[.fff]Z`, or with an offset `±HH:MM` (stored as UTC), 1970 … 9999 |
//! | `station` | fixture or fleet name | 1 … 64 bytes of UTF-8, no control characters |
//! | `batch` | production batch or fleet group | 0 … 64 bytes, as `station` |
//! | `unit` | board or unit serial | 0 … 4 294 967 295 |
//! | `boot` | the unit's boot counter (version 2 only) | 0 … 4 294 967 295 |
//! | `seq` | the unit's measurement number | 0 … 4 294 967 295 |
//! | `clock_hz` | tick clock of the tester | 1 000 … 200 000 000 |
//! | `press_ticks` | press length | 0 … 2^63 − 1 |
//! | `on_ticks` | turn-on latency; empty if it never turned on | 0 … 2^63 − 1 or empty |
//! | `hold_ticks` | hold; empty if none was measured | 0 … 2^63 − 1 or empty; required for `within-window`, `short`, `long` |
//! | `temp_c` | temperature at the stage, °C | −55 … 150 or empty |
//! | `verdict` | the tester's verdict | `within-window`, `short`, `long`, `no-response`, `stuck-active`, `not-idle`, `chatter`, or empty: rchold judges the hold against the stored window (`--stage`) |
//! | `hint` | cause hint | `none`, `wrong-part`, `aged-or-wrong-tolerance`, `near-the-edge`, `open-capacitor`, `no-charge-path`, `open-resistor-or-shorted-node`, `noisy-output`, or empty (rchold's own, with `--stage`) |
//! | `drift` | drift state | `settling`, `steady`, `drifting`, `beyond-limit` |
//! | `c_dev_ppm` | capacitance deviation from nominal, ppm | −1 000 000 … 2 147 483 647 or empty |
//!
//! Fields follow RFC 4180 quoting (a station name with a comma is quoted); a
//! name that starts with `=`, `+`, `-`, `@` or `'` is written behind one more
//! `'` (so that a spreadsheet shows it rather than running it), and one leading
//! `'` of a name is dropped on reading;
//! since no field may hold a line break, every line is one record, which lets
//! large logs be read in parallel pieces.

use std::fmt;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

use hold_firmware::record::Record;
use hold_firmware::Verdict;

use crate::data::{codes, time};

/// The header line of a version-2 log (what rchold writes).
pub const HEADER: &str = "measured_at,station,batch,unit,boot,seq,clock_hz,press_ticks,on_ticks,hold_ticks,temp_c,\
verdict,hint,drift,c_dev_ppm";

/// The header line of a version-1 log (no `boot`; still read).
pub const HEADER_V1: &str =
    "measured_at,station,batch,unit,seq,clock_hz,press_ticks,on_ticks,hold_ticks,temp_c,verdict,hint,drift,c_dev_ppm";

/// Field names of a version-2 log, in order.
pub const FIELDS: [&str; 15] = [
    "measured_at",
    "station",
    "batch",
    "unit",
    "boot",
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

/// Which version of the log a file is, from its header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Layout {
    /// [`HEADER_V1`]: 14 fields, no `boot`.
    V1,
    /// [`HEADER`]: 15 fields.
    V2,
}

impl Layout {
    /// Fields per line.
    #[must_use]
    pub const fn fields(self) -> usize {
        match self {
            Layout::V1 => 14,
            Layout::V2 => 15,
        }
    }

    /// From which of the line's fields on the slots of [`FIELDS`] are one
    /// further on: 4 for a version-1 line (it has no `boot`, which reads as
    /// `0`), none for version 2.
    const fn boot_skipped(self) -> usize {
        match self {
            Layout::V1 => 4,
            Layout::V2 => usize::MAX,
        }
    }

    /// The header line.
    #[must_use]
    pub const fn header(self) -> &'static str {
        match self {
            Layout::V1 => HEADER_V1,
            Layout::V2 => HEADER,
        }
    }
}

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

impl LogError {
    /// A problem at `line` of `file`, in `field` when one is at fault.
    #[must_use]
    pub fn at(file: &Path, line: u64, field: Option<&'static str>, message: String) -> LogError {
        LogError { file: file.to_path_buf(), line, field, message }
    }
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
    /// The measurement. Where the line left the verdict or the hint empty,
    /// they stand as within-window and none until [`Line::unjudged`] is
    /// settled by judging the hold against a stored window.
    pub record: Record,
    /// The line left the verdict empty: rchold is to judge the hold.
    pub verdict_empty: bool,
    /// The line left the hint empty.
    pub hint_empty: bool,
}

impl Line<'_> {
    /// Whether the line leaves its verdict or hint to rchold.
    #[must_use]
    pub const fn unjudged(&self) -> bool {
        self.verdict_empty || self.hint_empty
    }
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
#[inline(always)]
fn whole(b: &[u8]) -> Option<u64> {
    if b.is_empty() || b.len() > 19 {
        return None;
    }
    let mut v = 0u64;
    for &c in b {
        let d = c.wrapping_sub(b'0');
        if d > 9 {
            return None;
        }
        v = v * 10 + u64::from(d);
    }
    Some(v)
}

type FieldResult<T> = Result<T, (&'static str, String)>;

#[inline(always)]
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

/// `[-]digits[.d[d[d]]]` as thousandths, exactly; `None` for anything else
/// (which then goes through the general number parser).
fn milli(b: &[u8]) -> Option<i64> {
    let (neg, b) = match b.split_first() {
        Some((b'-', rest)) => (true, rest),
        _ => (false, b),
    };
    let (int, frac) = match memchr::memchr(b'.', b) {
        Some(i) => (b.get(..i)?, b.get(i + 1..)?),
        None => (b, &b""[..]),
    };
    if int.is_empty() || int.len() > 6 || frac.len() > 3 || (frac.is_empty() && b.last() == Some(&b'.')) {
        return None;
    }
    let mut v = i64::try_from(whole(int)?).ok()?;
    for i in 0..3 {
        let d = match frac.get(i) {
            Some(c) if c.is_ascii_digit() => i64::from(c - b'0'),
            Some(_) => return None,
            None => 0,
        };
        v = v * 10 + d;
    }
    Some(if neg { -v } else { v })
}

#[inline(always)]
fn optional<T>(b: &[u8], f: impl FnOnce(&[u8]) -> FieldResult<T>) -> FieldResult<Option<T>> {
    if b.is_empty() {
        Ok(None)
    } else {
        f(b).map(Some)
    }
}

#[inline]
fn label<'a>(field: &'static str, b: &'a [u8], min: usize) -> FieldResult<&'a str> {
    // The spreadsheet guard (see [`guarded`]): one leading apostrophe is not part of the name.
    let b = b.strip_prefix(b"'").unwrap_or(b);
    if b.len() >= min && b.len() <= 64 && b.iter().fold(true, |ok, &c| ok & (0x20..0x7f).contains(&c)) {
        // Printable ASCII: valid UTF-8 without control characters.
        if let Ok(s) = std::str::from_utf8(b) {
            return Ok(s);
        }
    }
    let s = std::str::from_utf8(b).map_err(|_| (field, format!("{} is not UTF-8 text", text(b))))?;
    crate::data::validate::name(s, min).map_err(|m| (field, format!("{} {m}", text(b))))?;
    Ok(s)
}

/// Parses one data line's fields, in the order of [`FIELDS`] (a version-1
/// line with `boot` given as `0`).
///
/// # Errors
/// The field at fault and a message with the accepted range.
pub fn parse_fields<'a>(f: &[&'a [u8]; 15]) -> Result<Line<'a>, (&'static str, String)> {
    parse_fields_cached(f, &mut time::DayCache::default())
}

/// As [`parse_fields`], reusing the previous line's date when it is the same.
///
/// # Errors
/// The field at fault and a message with the accepted range.
pub fn parse_fields_cached<'a>(
    f: &[&'a [u8]; 15],
    days: &mut time::DayCache,
) -> Result<Line<'a>, (&'static str, String)> {
    let [at, station, batch, unit, boot, seq, clock, press, on, hold, temp, verdict, hint, drift, dev] = *f;
    let measured_ms = time::parse_ms_cached(at, days)
        .ok_or_else(|| ("measured_at", format!("{} is not a UTC time (accepted: {})", text(at), time::FORM)))?;
    let station = label("station", station, 1)?;
    let batch = label("batch", batch, 0)?;
    let unit_id = number("unit", unit, u64::from(u32::MAX), U32)? as u32;
    let boot = number("boot", boot, u64::from(u32::MAX), U32)? as u32;
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
        if let Some(m) = milli(b) {
            if m < i64::from(tlo) || m > i64::from(thi) {
                return Err(("temp_c", format!("{} is out of range (accepted: {range})", text(b))));
            }
            return Ok(m as i32);
        }
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
    let (verdict_empty, hint_empty) = (verdict.is_empty(), hint.is_empty());
    if verdict_empty && hold_ticks.is_none() {
        return Err(("hold_ticks", "is empty, and so is verdict (accepted: a hold for rchold to judge)".into()));
    }
    let verdict = if verdict_empty {
        Verdict::WithinWindow
    } else {
        codes::verdict_named(verdict).ok_or_else(|| {
            ("verdict", format!("{} is not a verdict (accepted: {}, or empty)", text(verdict), codes::verdict_names()))
        })?
    };
    let hint = if hint_empty {
        hold_firmware::Hint::None
    } else {
        codes::hint_named(hint).ok_or_else(|| {
            ("hint", format!("{} is not a hint (accepted: {}, or empty)", text(hint), codes::hint_names()))
        })?
    };
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
    let line = Line {
        measured_ms,
        station,
        batch,
        record: Record {
            seq,
            unit_id,
            boot,
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
        verdict_empty,
        hint_empty,
    };
    // A line that leaves its verdict or hint to rchold is checked once they are judged.
    if !line.unjudged() {
        crate::data::validate::record(&line.record).map_err(|e| (e.field, e.message))?;
    }
    Ok(line)
}

/// Splits a line without quotes at its commas, eight bytes at a time: a byte
/// of `x ^ ",,,,,,,,"` is zero where a comma is, and of `x ^ "\"\"…"` where a
/// quote is (the exact zero-byte test of S. E. Anderson's "Bit Twiddling
/// Hacks"). `Ok(None)` when the line holds a quote; `Err(count)` for a field
/// count other than the layout's. The fields come in the order of [`FIELDS`]
/// (a version-1 line gets `boot` `0`).
#[inline]
fn split_plain(line: &[u8], layout: Layout) -> Result<Option<[&[u8]; 15]>, usize> {
    const LOW7: u64 = 0x7F7F_7F7F_7F7F_7F7F;
    let zero_bytes = |x: u64| !(((x & LOW7) + LOW7) | x | LOW7);
    let mut cuts = [0usize; 16];
    let mut n = 0usize;
    let words = line.chunks_exact(8);
    let tail = words.remainder();
    for (w, word) in words.enumerate() {
        let x = u64::from_le_bytes(word.try_into().unwrap_or([0; 8]));
        if zero_bytes(x ^ 0x2222_2222_2222_2222) != 0 {
            return Ok(None);
        }
        let mut hits = zero_bytes(x ^ 0x2C2C_2C2C_2C2C_2C2C);
        while hits != 0 {
            let slot = cuts.get_mut(n).ok_or_else(|| memchr::memchr_iter(b',', line).count() + 1)?;
            *slot = w * 8 + (hits.trailing_zeros() / 8) as usize;
            n += 1;
            hits &= hits - 1;
        }
    }
    let base = line.len() - tail.len();
    for (i, &c) in tail.iter().enumerate() {
        if c == b'"' {
            return Ok(None);
        }
        if c == b',' {
            let slot = cuts.get_mut(n).ok_or_else(|| memchr::memchr_iter(b',', line).count() + 1)?;
            *slot = base + i;
            n += 1;
        }
    }
    if n + 1 != layout.fields() {
        return Err(n + 1);
    }
    if let Some(last) = cuts.get_mut(n) {
        *last = line.len();
    }
    let mut f: [&[u8]; 15] = [b"0"; 15];
    let mut start = 0;
    let skip = layout.boot_skipped();
    for (k, &end) in cuts.iter().take(n + 1).enumerate() {
        if let Some(slot) = f.get_mut(k + usize::from(k >= skip)) {
            *slot = line.get(start..end).unwrap_or(&[]);
        }
        start = end + 1;
    }
    Ok(Some(f))
}

/// Splits one line (without its line break) into its fields, in the order
/// of [`FIELDS`]; lines with quotes go through the csv crate. `Err` with a
/// message for a wrong count.
fn fields<'a>(line: &'a [u8], layout: Layout, quoted: &'a mut csv::ByteRecord) -> Result<[&'a [u8]; 15], String> {
    let mut f: [&[u8]; 15] = [b"0"; 15];
    let wrong = |n: usize| format!("{n} fields (accepted: exactly {}: {})", layout.fields(), layout.header());
    if let Some(f) = split_plain(line, layout).map_err(&wrong)? {
        return Ok(f);
    }
    let mut rdr = csv::ReaderBuilder::new().has_headers(false).flexible(true).from_reader(line);
    match rdr.read_byte_record(quoted) {
        Ok(true) => {}
        Ok(false) => return Err(wrong(0)),
        Err(e) => return Err(format!("unreadable CSV: {e}")),
    }
    if quoted.len() != layout.fields() {
        return Err(wrong(quoted.len()));
    }
    let skip = layout.boot_skipped();
    for (k, v) in quoted.iter().enumerate() {
        if let Some(slot) = f.get_mut(k + usize::from(k >= skip)) {
            *slot = v;
        }
    }
    Ok(f)
}

/// Checks the header line and says which version the log is.
///
/// # Errors
/// A message when it is neither [`HEADER`] nor [`HEADER_V1`].
pub fn check_header(line: &[u8]) -> Result<Layout, String> {
    let line = line.strip_suffix(b"\r").unwrap_or(line);
    if line == HEADER.as_bytes() {
        Ok(Layout::V2)
    } else if line == HEADER_V1.as_bytes() {
        Ok(Layout::V1)
    } else {
        Err(format!("not an rchold log: the first line must be exactly {HEADER:?} (or, version 1, {HEADER_V1:?})"))
    }
}

/// Parses the data lines of `chunk` (whole lines; the last may lack its line
/// break), calling `each` with the line's index within the chunk (0-based)
/// and the parsed line. Stops at the first bad line: `Err((index, field, message))`.
///
/// # Errors
/// The first bad line's offset, field and message, or `each`'s error.
pub fn parse_chunk(
    chunk: &[u8],
    layout: Layout,
    mut each: impl FnMut(u64, &Line<'_>) -> Result<(), String>,
) -> Result<u64, (u64, Option<&'static str>, String)> {
    let mut quoted = csv::ByteRecord::new();
    let mut days = time::DayCache::default();
    let mut at = 0usize;
    let mut n = 0u64;
    while at < chunk.len() {
        let end = memchr::memchr(b'\n', chunk.get(at..).unwrap_or(&[])).map_or(chunk.len(), |i| at + i);
        let raw = chunk.get(at..end).unwrap_or(&[]);
        let line = raw.strip_suffix(b"\r").unwrap_or(raw);
        let f = fields(line, layout, &mut quoted).map_err(|m| (n, None, m))?;
        let parsed = parse_fields_cached(&f, &mut days).map_err(|(field, m)| (n, Some(field), m))?;
        each(n, &parsed).map_err(|m| (n, None, m))?;
        n += 1;
        at = end + 1;
    }
    Ok(n)
}

/// Block size of the streaming reader, bytes.
const BLOCK: usize = 4 << 20;

/// Reads a log from `input` in blocks (memory stays at a few MiB whatever
/// the file's size), calling `each` with every parsed line and its 1-based
/// line number; stops at the first bad line. Returns the number of data lines.
///
/// # Errors
/// A [`LogError`] naming the file, the line and the field.
pub fn read<R: Read>(
    file: &Path,
    mut input: R,
    mut each: impl FnMut(u64, &Line<'_>) -> Result<(), String>,
) -> Result<u64, LogError> {
    let at = |line: u64, field: Option<&'static str>, message: String| LogError::at(file, line, field, message);
    let mut buf: Vec<u8> = Vec::with_capacity(BLOCK);
    let mut line_no = 0u64; // lines before the buffer's start
    let mut layout: Option<Layout> = None;
    let mut n = 0u64;
    let mut eof = false;
    while !eof {
        let old = buf.len();
        buf.resize(old + BLOCK, 0);
        let got = loop {
            match input.read(buf.get_mut(old..).unwrap_or(&mut [])) {
                Ok(g) => break g,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(at(line_no + 1, None, format!("cannot read: {e}"))),
            }
        };
        buf.truncate(old + got);
        eof = got == 0;
        // Whole lines only, unless at the end.
        let usable = if eof { buf.len() } else { memchr::memrchr(b'\n', &buf).map_or(0, |i| i + 1) };
        let mut start = 0;
        if layout.is_none() && (usable > 0 || eof) {
            let end = memchr::memchr(b'\n', buf.get(..usable).unwrap_or(&[])).unwrap_or(usable);
            if buf.is_empty() {
                return Err(at(1, None, format!("empty file: an rchold log starts with {HEADER:?}")));
            }
            layout = Some(check_header(buf.get(..end).unwrap_or(&[])).map_err(|m| at(1, None, m))?);
            line_no = 1;
            start = (end + 1).min(usable);
        }
        let chunk = buf.get(start..usable).unwrap_or(&[]);
        match parse_chunk(chunk, layout.unwrap_or(Layout::V2), |i, l| each(line_no + i + 1, l)) {
            Ok(c) => {
                n += c;
                line_no += c;
            }
            Err((i, field, m)) => return Err(at(line_no + i + 1, field, m)),
        }
        buf.drain(..usable);
        // What is left is the start of one line: bounded, so a file without line
        // breaks cannot fill memory.
        if !eof && buf.len() > MAX_LINE_BYTES {
            return Err(at(
                line_no + 1,
                None,
                format!("is longer than {MAX_LINE_BYTES} bytes (accepted: lines of at most 64 KiB)"),
            ));
        }
    }
    if layout.is_none() {
        return Err(at(1, None, format!("empty file: an rchold log starts with {HEADER:?}")));
    }
    Ok(n)
}

/// The longest line a log may have, bytes.
pub const MAX_LINE_BYTES: usize = 64 << 10;

/// A problem reading part of a log.
#[derive(Debug)]
pub enum RangeError {
    /// Reading failed.
    Io(std::io::Error),
    /// A bad line: its index within the range, the field and the message.
    Line(u64, Option<&'static str>, String),
}

/// Reads the data lines in bytes `start .. end` of the log at `path` (both
/// at line starts, lines of `layout`, as [`split`] found), in blocks,
/// calling `each` with the line's index within the range. Memory: one block.
///
/// # Errors
/// Read errors and the first bad line.
pub fn read_range(
    path: &Path,
    layout: Layout,
    start: u64,
    end: u64,
    mut each: impl FnMut(u64, &Line<'_>) -> Result<(), String>,
) -> Result<u64, RangeError> {
    use std::io::{Seek, SeekFrom};
    let mut f = std::fs::File::open(path).map_err(RangeError::Io)?;
    f.seek(SeekFrom::Start(start)).map_err(RangeError::Io)?;
    let mut input = f.take(end.saturating_sub(start));
    let mut buf = vec![0u8; BLOCK];
    let mut filled = 0usize;
    let mut n = 0u64;
    loop {
        let got = loop {
            match input.read(buf.get_mut(filled..).unwrap_or(&mut [])) {
                Ok(g) => break g,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(RangeError::Io(e)),
            }
        };
        filled += got;
        let eof = got == 0;
        let data = buf.get(..filled).unwrap_or(&[]);
        let usable = if eof { filled } else { memchr::memrchr(b'\n', data).map_or(0, |i| i + 1) };
        match parse_chunk(data.get(..usable).unwrap_or(&[]), layout, |i, l| each(n + i, l)) {
            Ok(c) => n += c,
            Err((i, field, m)) => return Err(RangeError::Line(n + i, field, m)),
        }
        buf.copy_within(usable..filled, 0);
        filled -= usable;
        if eof {
            return Ok(n);
        }
        if filled > MAX_LINE_BYTES {
            let m = format!("is longer than {MAX_LINE_BYTES} bytes (accepted: lines of at most 64 KiB)");
            return Err(RangeError::Line(n, None, m));
        }
    }
}

/// Checks a log's header and splits its data into up to `parts` byte ranges
/// that start and end at line starts; returns the log's layout with them.
///
/// # Errors
/// A [`LogError`] for a missing or wrong header, or a read error.
pub fn split(path: &Path, parts: usize) -> Result<(Layout, Vec<(u64, u64)>), LogError> {
    use std::io::{Seek, SeekFrom};
    let at = |line: u64, message: String| LogError { file: path.to_path_buf(), line, field: None, message };
    let mut f = std::fs::File::open(path).map_err(|e| at(1, format!("cannot read: {e}")))?;
    let size = f.metadata().map_err(|e| at(1, format!("cannot read: {e}")))?.len();
    let mut head = vec![0u8; 4096];
    let n = f.read(&mut head).map_err(|e| at(1, format!("cannot read: {e}")))?;
    head.truncate(n);
    if head.is_empty() {
        return Err(at(1, format!("empty file: an rchold log starts with {HEADER:?}")));
    }
    let header_end = memchr::memchr(b'\n', &head).map_or(head.len(), |i| i + 1);
    let layout = check_header(head.get(..header_end).map_or(&[][..], |h| h.strip_suffix(b"\n").unwrap_or(h)))
        .map_err(|m| at(1, m))?;
    let data = size.saturating_sub(header_end as u64);
    let parts = parts.clamp(1, 64) as u64;
    let mut cuts = vec![header_end as u64];
    let mut probe = vec![0u8; 1024];
    for k in 1..parts {
        let mut p = header_end as u64 + data * k / parts;
        // Move to the next line start at or after p.
        loop {
            f.seek(SeekFrom::Start(p.saturating_sub(1))).map_err(|e| at(1, format!("cannot read: {e}")))?;
            let got = f.read(&mut probe).map_err(|e| at(1, format!("cannot read: {e}")))?;
            if got == 0 {
                p = size;
                break;
            }
            match memchr::memchr(b'\n', probe.get(..got).unwrap_or(&[])) {
                Some(i) => {
                    p = p.saturating_sub(1) + i as u64 + 1;
                    break;
                }
                None => p = p.saturating_sub(1) + got as u64 + 1,
            }
        }
        let last = cuts.last().copied().unwrap_or(0);
        cuts.push(p.clamp(last, size));
    }
    cuts.push(size);
    let pieces = cuts
        .windows(2)
        .filter_map(|w| match w {
            [a, b] if b > a => Some((*a, *b)),
            _ => None,
        })
        .collect();
    Ok((layout, pieces))
}

/// Lines (1-based number of the first line) that start at byte `offset`.
///
/// # Errors
/// Read errors.
pub fn line_at(path: &Path, offset: u64) -> std::io::Result<u64> {
    let mut f = std::fs::File::open(path)?.take(offset);
    let mut buf = vec![0u8; 1 << 20];
    let mut lines = 1u64;
    loop {
        let n = f.read(&mut buf)?;
        if n == 0 {
            return Ok(lines);
        }
        lines += memchr::memchr_iter(b'\n', buf.get(..n).unwrap_or(&[])).count() as u64;
    }
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

/// A name as a log cell: one that a spreadsheet would run as a formula
/// (starting `=`, `+`, `-` or `@`) or that starts with an apostrophe gets a
/// leading apostrophe — the usual CSV-injection guard (OWASP, "CSV
/// Injection"). Reading drops one leading apostrophe, so a written log reads
/// back to the same names and `rejects.csv` can be ingested again.
fn guarded(s: &str) -> std::borrow::Cow<'_, str> {
    if s.starts_with(['=', '+', '-', '@', '\'']) {
        quoted(&format!("'{s}")).into_owned().into()
    } else {
        quoted(s)
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
        "{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}",
        time::format_ms(measured_ms),
        guarded(station),
        guarded(batch),
        r.unit_id,
        r.boot,
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
            boot: 9,
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

    /// Names a spreadsheet would run as formulas are written behind an
    /// apostrophe and read back as they were (a name that starts with an
    /// apostrophe too).
    #[test]
    fn formula_names_are_guarded_and_read_back() -> Result<(), LogError> {
        let names = ["=HYPERLINK(\"http://x\",\"y\")", "+1", "-east", "@SUM(A1)", "'quoted", "plain"];
        let mut out = Vec::new();
        let _ = write_header(&mut out);
        for n in names {
            let _ = write_line(&mut out, 0, n, n, &rec());
        }
        let text = String::from_utf8_lossy(&out).into_owned();
        for line in text.lines().skip(1).take(5) {
            let cells: Vec<&str> = line.split(',').collect();
            let station = cells.get(1).copied().unwrap_or_default().trim_start_matches('"');
            assert!(station.starts_with('\''), "{line}");
        }
        let got: Vec<String> = parse_all(&text)?.into_iter().map(|g| g.1).collect();
        assert_eq!(got, names.map(String::from));
        Ok(())
    }

    /// A version-1 log (no `boot`) reads as boot 0, lines of 14 fields only.
    #[test]
    fn version_1_logs_still_read() -> Result<(), LogError> {
        let line =
            "2027-03-01T08:00:00Z,bay-1,B7,1204,3,1000000,50000,12,74000,-5.25,short,near-the-edge,settling,-151000";
        let want = Record { boot: 0, ..rec() };
        let got = parse_all(&format!("{HEADER_V1}\n{line}\n"))?;
        assert_eq!(got.first().map(|g| g.3), Some(want));
        // Quoted: the csv crate's path reads it alike.
        let quoted = line.replace("bay-1", "\"bay-1\"");
        assert_eq!(parse_all(&format!("{HEADER_V1}\n{quoted}\n"))?.first().map(|g| g.3), Some(want));
        let e =
            parse_all(&format!("{HEADER_V1}\n{}\n", line.replace(",1204,", ",1204,9,"))).err().map(|e| e.to_string());
        assert!(e.is_some_and(|e| e.starts_with("t.csv:2: 15 fields (accepted: exactly 14: measured_at,")));
        let dir = tempfile::tempdir().map_err(|e| LogError::at(Path::new("t.csv"), 0, None, e.to_string()))?;
        let path = dir.path().join("v1.csv");
        let _ = std::fs::write(&path, format!("{HEADER_V1}\n{line}\n{quoted}\n"));
        let (layout, pieces) = split(&path, 2)?;
        assert_eq!(layout, Layout::V1);
        let mut n = 0;
        for (a, b) in pieces {
            read_range(&path, layout, a, b, |_, l| {
                assert_eq!(l.record, want);
                n += 1;
                Ok(())
            })
            .map_err(|_| LogError::at(&path, 0, None, "read".into()))?;
        }
        assert_eq!(n, 2);
        Ok(())
    }

    #[test]
    fn bad_fields_name_line_field_and_range() {
        let good = "2027-03-01T08:00:00Z,bay-1,B7,1204,2,3,1000000,50000,12,74000,23.5,within-window,none,settling,";
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
            (good.replace(",1204,2,", ",1204,4294967296,"), "t.csv:3: boot: \"4294967296\" is out of range"),
            (good.replace(",none,", ",none,x,"), "t.csv:3: 16 fields (accepted: exactly 15"),
            (good.replace(",1204,2,", ",1204,"), "t.csv:3: 14 fields (accepted: exactly 15"),
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
