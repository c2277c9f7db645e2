//! Any tester's CSV log, read through a mapping file of our own design
//! (TOML): which column holds what, in which unit, the tester's words for
//! its verdicts, and its time format and zone.
//!
//! ```toml
//! [columns]                 # header names of the tester's log
//! measured_at = "Timestamp"
//! station = "Tester"
//! unit = "Serial"
//! hold = "Hold [ms]"
//! batch = "Lot"             # optional (default: empty)
//! seq = "Run"               # optional (default: the line number)
//! boot = "Power-ups"        # optional: the unit's boot counter (default: 0)
//! press = "Press [ms]"      # optional (default: 0)
//! on = "Latency [ms]"       # optional
//! temp_c = "Temp"           # optional
//! verdict = "Result"        # optional: without it rchold judges each hold
//!
//! [units]
//! clock = "1MHz"            # the tick clock the times are stored in
//! hold = "ms"               # ticks, s, ms or us
//! press = "ms"
//! on = "ms"
//!
//! [verdicts]                # the tester's words (any other word is refused)
//! PASS = "within-window"
//! LOW = "short"
//! HIGH = "long"
//!
//! [time]
//! format = "[year]-[month]-[day] [hour]:[minute]:[second]"   # `time` crate format description
//! zone = "+01:00"           # the offset of the tester's local time (default "+00:00")
//! ```

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use hold_firmware::drift::DriftState;
use hold_firmware::record::Record;
use hold_firmware::{Hint, Verdict};
use serde::Deserialize;

use crate::data::codes;
use crate::data::log::{Line, LogError};
use crate::stage::values::parse_value;
use crate::Error;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawColumns {
    measured_at: String,
    station: String,
    unit: String,
    hold: String,
    batch: Option<String>,
    seq: Option<String>,
    boot: Option<String>,
    press: Option<String>,
    on: Option<String>,
    temp_c: Option<String>,
    verdict: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawUnits {
    clock: String,
    hold: String,
    press: Option<String>,
    on: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTime {
    format: String,
    zone: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMapping {
    columns: RawColumns,
    units: RawUnits,
    verdicts: Option<HashMap<String, String>>,
    time: RawTime,
}

/// A unit a mapped time is written in.
#[derive(Debug, Clone, Copy, PartialEq)]
enum TimeUnit {
    /// Ticks of the mapping's clock.
    Ticks,
    /// Seconds times this factor.
    Seconds(f64),
}

/// A mapping file, read and checked.
#[derive(Debug)]
pub struct Mapping {
    path: PathBuf,
    columns: RawColumns,
    clock_hz: u32,
    hold: TimeUnit,
    press: TimeUnit,
    on: TimeUnit,
    verdicts: HashMap<String, Verdict>,
    format: Vec<time::format_description::OwnedFormatItem>,
    zone_s: i32,
}

fn unit_of(text: &str) -> Option<TimeUnit> {
    Some(match text.trim() {
        "ticks" => TimeUnit::Ticks,
        "s" => TimeUnit::Seconds(1.0),
        "ms" => TimeUnit::Seconds(1e-3),
        "us" | "µs" => TimeUnit::Seconds(1e-6),
        _ => return None,
    })
}

impl Mapping {
    /// Reads a mapping file.
    ///
    /// # Errors
    /// [`Error::Input`] naming the file, the key and what is accepted.
    pub fn load(path: &Path) -> Result<Mapping, Error> {
        let bad = |key: &str, why: String| Error::Input(format!("{}: {key}: {why}", path.display()));
        let text = crate::input::read_text(path, crate::input::MAX_TEXT_BYTES)
            .map_err(|e| Error::Input(format!("{}: {e}", path.display())))?;
        let raw: RawMapping = toml::from_str(&text).map_err(|e| {
            Error::Input(format!("{}: {}", path.display(), e.message().lines().next().unwrap_or("invalid TOML")))
        })?;
        let clock_hz = parse_value(&raw.units.clock, &["Hz"])
            .ok()
            .filter(|hz| (1e3..=200e6).contains(hz))
            .ok_or_else(|| bad("units.clock", format!("{:?} (accepted: 1 kHz to 200 MHz)", raw.units.clock)))?;
        let unit = |key: &str, v: Option<&String>| {
            v.map_or(Ok(TimeUnit::Ticks), |t| {
                unit_of(t).ok_or_else(|| bad(key, format!("{t:?} (accepted: ticks, s, ms, us)")))
            })
        };
        let mut verdicts = HashMap::new();
        for (word, ours) in raw.verdicts.unwrap_or_default() {
            let v = codes::verdict_named(ours.as_bytes()).ok_or_else(|| {
                bad(&format!("verdicts.{word}"), format!("{ours:?} (accepted: {})", codes::verdict_names()))
            })?;
            verdicts.insert(word, v);
        }
        // Through the guard: a malformed description ("[hour[:[minute]") trips a
        // debug assertion inside `time` 0.3.55 (found by the `mapping` fuzz target).
        let format = crate::guard::third_party(|| time::format_description::parse_owned::<2>(&raw.time.format))
            .map_err(|_| "not a format description the time crate can read".to_owned())
            .and_then(|r| r.map_err(|e| e.to_string()))
            .map(|f| vec![f])
            .map_err(|e| bad("time.format", format!("{e} (accepted: a `time` crate format description)")))?;
        let zone = raw.time.zone.unwrap_or_else(|| "+00:00".into());
        let zone_s = time::UtcOffset::parse(&zone, time::macros::format_description!("[offset_hour]:[offset_minute]"))
            .map(time::UtcOffset::whole_seconds)
            .map_err(|_| bad("time.zone", format!("{zone:?} (accepted: ±HH:MM)")))?;
        Ok(Mapping {
            path: path.to_path_buf(),
            hold: unit("units.hold", Some(&raw.units.hold))?,
            press: unit("units.press", raw.units.press.as_ref())?,
            on: unit("units.on", raw.units.on.as_ref())?,
            clock_hz: clock_hz.round() as u32,
            verdicts,
            format,
            zone_s,
            columns: raw.columns,
        })
    }

    fn ticks(&self, text: &str, unit: TimeUnit) -> Option<u64> {
        let v: f64 = text.trim().parse().ok().filter(|v: &f64| v.is_finite() && *v >= 0.0)?;
        let t = match unit {
            TimeUnit::Ticks => v,
            TimeUnit::Seconds(k) => v * k * f64::from(self.clock_hz),
        };
        (t < 9.2e18).then(|| t.round() as u64)
    }

    fn time_ms(&self, text: &str) -> Option<i64> {
        let f = self.format.first()?;
        let t = time::PrimitiveDateTime::parse(text.trim(), f).ok()?;
        let utc = t.assume_offset(time::UtcOffset::from_whole_seconds(self.zone_s).ok()?);
        let ms = i64::try_from(utc.unix_timestamp_nanos() / 1_000_000).ok()?;
        (0..=253_402_300_799_999).contains(&ms).then_some(ms)
    }

    /// Reads the tester's log `file` from `input`, calling `each` with every line as
    /// an rchold log line (verdict and hint empty where the mapping gives
    /// none: to be judged). Stops at the first bad line.
    ///
    /// # Errors
    /// A [`LogError`] naming the file, the line and the column, with what is
    /// accepted; or `each`'s error.
    pub fn read(
        &self,
        file: &Path,
        input: impl std::io::Read,
        mut each: impl FnMut(u64, &Line<'_>) -> Result<(), String>,
    ) -> Result<u64, LogError> {
        let err = |line: u64, field: Option<&'static str>, message: String| LogError::at(file, line, field, message);
        let mut rdr = csv::ReaderBuilder::new().flexible(false).from_reader(input);
        let headers = rdr.headers().map_err(|e| err(1, None, format!("no header: {e}")))?.clone();
        let col = |name: &str| headers.iter().position(|h| h.trim() == name);
        let need = |key: &'static str, name: &str| {
            col(name)
                .ok_or_else(|| err(1, None, format!("no column {name:?} for {key} (mapping {})", self.path.display())))
        };
        let c = &self.columns;
        let at = need("measured_at", &c.measured_at)?;
        let station = need("station", &c.station)?;
        let unit = need("unit", &c.unit)?;
        let hold = need("hold", &c.hold)?;
        let opt = |name: &Option<String>, key: &'static str| name.as_ref().map(|n| need(key, n)).transpose();
        let (batch, seq, press, on) =
            (opt(&c.batch, "batch")?, opt(&c.seq, "seq")?, opt(&c.press, "press")?, opt(&c.on, "on")?);
        let (temp, verdict, boot) = (opt(&c.temp_c, "temp_c")?, opt(&c.verdict, "verdict")?, opt(&c.boot, "boot")?);
        let mut n = 0u64;
        for (i, row) in rdr.records().enumerate() {
            let line_no = i as u64 + 2;
            let row = row.map_err(|e| err(line_no, None, e.to_string()))?;
            let cell = |k: Option<usize>| k.and_then(|k| row.get(k)).unwrap_or("");
            let bad = |field: &'static str, v: &str, accepted: &str| {
                err(line_no, Some(field), format!("{v:?} (accepted: {accepted})"))
            };
            let measured_ms = self
                .time_ms(cell(Some(at)))
                .ok_or_else(|| bad("measured_at", cell(Some(at)), "the mapping's time format, years 1970 … 9999"))?;
            let name = cell(Some(station));
            let names = "64 bytes, no control, direction or invisible characters";
            if crate::data::validate::name(name, 1).is_err() {
                return Err(bad("station", name, &format!("1 … {names}")));
            }
            let lot = cell(batch);
            if crate::data::validate::name(lot, 0).is_err() {
                return Err(bad("batch", lot, &format!("0 … {names}")));
            }
            let unit_id: u32 =
                cell(Some(unit)).trim().parse().map_err(|_| bad("unit", cell(Some(unit)), "0 … 4294967295"))?;
            let seq_no: u32 = match seq {
                Some(_) => cell(seq).trim().parse().map_err(|_| bad("seq", cell(seq), "0 … 4294967295"))?,
                None => u32::try_from(line_no).unwrap_or(u32::MAX),
            };
            let boot_no: u32 = match boot {
                Some(_) => cell(boot).trim().parse().map_err(|_| bad("boot", cell(boot), "0 … 4294967295"))?,
                None => 0,
            };
            let t =
                |field: &'static str, k: Option<usize>, u: TimeUnit, empty_ok: bool| -> Result<Option<u64>, LogError> {
                    let v = cell(k);
                    if v.trim().is_empty() && empty_ok {
                        return Ok(None);
                    }
                    self.ticks(v, u).map(Some).ok_or_else(|| bad(field, v, "a number ≥ 0 in the mapping's unit"))
                };
            let hold_ticks = t("hold_ticks", Some(hold), self.hold, true)?;
            let press_ticks =
                if press.is_some() { t("press_ticks", press, self.press, false)?.unwrap_or(0) } else { 0 };
            let on_ticks = if on.is_some() { t("on_ticks", on, self.on, true)? } else { None };
            let temp_mdeg_c = match cell(temp).trim() {
                "" => None,
                v => Some(
                    v.parse::<f64>()
                        .ok()
                        .filter(|c| (-55.0..=150.0).contains(c))
                        .map(|c| (c * 1e3).round() as i32)
                        .ok_or_else(|| bad("temp_c", v, "-55 … 150 °C, or empty"))?,
                ),
            };
            let word = cell(verdict).trim();
            let judged = if word.is_empty() {
                None
            } else {
                Some(self.verdicts.get(word).copied().ok_or_else(|| {
                    let words: Vec<&str> = self.verdicts.keys().map(String::as_str).collect();
                    bad("verdict", word, &format!("{}, or empty", words.join(", ")))
                })?)
            };
            if hold_ticks.is_none() && judged.is_none_or(Verdict::needs_hold) {
                return Err(bad("hold_ticks", "", "a hold for this verdict"));
            }
            let line = Line {
                measured_ms,
                station: name,
                batch: lot,
                record: Record {
                    seq: seq_no,
                    unit_id,
                    boot: boot_no,
                    press_ticks,
                    on_ticks,
                    hold_ticks,
                    clock_hz: self.clock_hz,
                    temp_mdeg_c,
                    verdict: judged.unwrap_or(Verdict::WithinWindow),
                    hint: Hint::None,
                    drift: DriftState::Settling,
                    c_deviation_ppm: None,
                },
                verdict_empty: judged.is_none(),
                hint_empty: true,
            };
            each(line_no, &line).map_err(|m| err(line_no, None, m))?;
            n += 1;
        }
        Ok(n)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Found by the `mapping` fuzz target: a format description with a
    /// bracket inside a component ("[hour[:[minute]") tripped a debug
    /// assertion inside the `time` crate; now it is refused in one line.
    #[test]
    fn a_malformed_time_format_is_refused_not_a_crash() {
        let found: &[u8] = include_bytes!("../../fuzz/found/mapping/nested-format-bracket");
        let map = found.split(|&b| b == 0xFF).next().unwrap_or_default();
        let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
        let path = dir.path().join("m.toml");
        std::fs::write(&path, map).unwrap_or_else(|e| panic!("{e}"));
        let e = Mapping::load(&path).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.contains("time.format") && !e.contains('\n'), "{e}");
    }
}
