//! Getting measurements into the store: `listen` (the firmware's framed
//! record stream, from a serial port, a file or standard input) and `ingest`
//! (measurement logs, see [`crate::data::log`]).
//!
//! `listen` commits every [`COMMIT_RECORDS`] records or [`COMMIT_MS`] ms,
//! whichever comes first, and before it returns for any reason, so a stream
//! that ends or fails keeps every record received; a killed process loses at
//! most the uncommitted part of the last interval. `ingest` stores each file
//! in one transaction: all of it or none of it.

use std::fmt;
use std::io::{self, Read};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};

use hold_firmware::record::Record;
use sha2::{Digest as _, Sha256};

use crate::data::frames::{Counts, FrameReader};
use crate::data::log::{self, LogError};
use crate::data::mapping::Mapping;
use crate::data::store::{hex, Station, Store, StoreError, Written};
use crate::data::time;
use crate::report::yields::{HoldJudge, NO_JUDGE};

/// Records per commit while listening.
pub const COMMIT_RECORDS: u64 = 4_096;
/// Longest time between commits while listening, ms.
pub const COMMIT_MS: u64 = 250;

/// Why collecting failed.
#[derive(Debug)]
pub enum CollectError {
    /// The store refused.
    Store(StoreError),
    /// A log line is bad (nothing of that file was stored).
    Log(LogError),
    /// Reading the input failed.
    Io {
        /// What was being read.
        what: String,
        /// The error.
        error: io::Error,
    },
}

impl fmt::Display for CollectError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CollectError::Store(e) => e.fmt(f),
            CollectError::Log(e) => e.fmt(f),
            CollectError::Io { what, error } => write!(f, "{what}: {error}"),
        }
    }
}

impl std::error::Error for CollectError {}

impl From<StoreError> for CollectError {
    fn from(e: StoreError) -> Self {
        CollectError::Store(e)
    }
}

/// How a streamed record gets its time.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimeRule {
    /// The time it arrived (wall clock, UTC).
    Arrival,
    /// `start_ms + seq × period_ms`: for a unit replaying its stored history
    /// that it measured at a fixed period from a known start.
    Sequence {
        /// Time of seq 0, ms since the epoch.
        start_ms: i64,
        /// Period, ms.
        period_ms: i64,
    },
}

/// What a stream's records are filed under.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Labels {
    /// Station name.
    pub station: String,
    /// Batch label.
    pub batch: String,
    /// The setup measured against, if known.
    pub setup_id: Option<i64>,
    /// How records get their time.
    pub time: TimeRule,
}

/// Where a stream stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Progress {
    /// Frame counts so far.
    pub counts: Counts,
    /// Records stored so far (committed or pending).
    pub stored: u64,
    /// Records that were already stored.
    pub duplicates: u64,
    /// The last good record.
    pub last: Option<Record>,
    /// Time since the stream started.
    pub elapsed: Duration,
}

/// A finished stream.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Listened {
    /// Source id in the store.
    pub source_id: i64,
    /// Frame counts.
    pub counts: Counts,
    /// Records stored.
    pub stored: u64,
    /// Records already stored.
    pub duplicates: u64,
    /// Records refused by the record check ([`crate::data::validate`]), by the field at fault.
    pub refused: std::collections::BTreeMap<&'static str, u64>,
}

/// Whether an I/O error is a read timeout (a quiet serial line), not a failure.
fn quiet(e: &io::Error) -> bool {
    matches!(e.kind(), io::ErrorKind::TimedOut | io::ErrorKind::WouldBlock)
}

/// Reads framed records from `input` until it ends (or `stop` returns true,
/// checked after each commit and whenever the input times out) and stores them under `labels`; `status` is called
/// after every commit.
///
/// # Errors
/// Store errors; a read error other than a timeout (the records before it
/// are committed first).
pub fn listen<R: Read>(
    store: &mut Store,
    name: &str,
    input: R,
    labels: &Labels,
    mut status: impl FnMut(&Progress),
    stop: impl Fn() -> bool,
) -> Result<Listened, CollectError> {
    let started = Instant::now();
    let source_id = store.begin_stream(name, time::now_ms())?;
    let mut reader = FrameReader::new(input);
    let mut committed = Counts::default();
    let (mut stored, mut duplicates) = (0u64, 0u64);
    let mut refused = std::collections::BTreeMap::new();
    let mut last = None;
    let mut failure = None;
    let mut ended = false;
    while !ended && failure.is_none() {
        let mut batch = store.batch()?;
        let station = batch.station(&labels.station)?;
        let since = Instant::now();
        let mut n = 0u64;
        loop {
            match reader.next_record() {
                Ok(Some(r)) => {
                    n += 1;
                    // A frame can be whole and its record still impossible: refused, counted, not stored.
                    if let Err(e) = crate::data::validate::record(&r) {
                        *refused.entry(e.field).or_insert(0u64) += 1;
                        batch.refuse();
                    } else {
                        let at = match labels.time {
                            TimeRule::Arrival => time::now_ms(),
                            TimeRule::Sequence { start_ms, period_ms } => {
                                start_ms.saturating_add(i64::from(r.seq).saturating_mul(period_ms))
                            }
                        };
                        if batch.insert(station, &labels.batch, at, &r, labels.setup_id, source_id)? {
                            stored += 1;
                        } else {
                            duplicates += 1;
                        }
                        last = Some(r);
                    }
                }
                Ok(None) => {
                    ended = true;
                    break;
                }
                Err(e) if quiet(&e) => {
                    if stop() {
                        ended = true;
                    }
                    break;
                }
                Err(e) => {
                    failure = Some(CollectError::Io { what: name.to_owned(), error: e });
                    break;
                }
            }
            if n >= COMMIT_RECORDS || since.elapsed() >= Duration::from_millis(COMMIT_MS) {
                break;
            }
        }
        let c = reader.counts();
        batch.commit(source_id, c.bad_frames - committed.bad_frames, c.bytes - committed.bytes)?;
        committed = c;
        status(&Progress { counts: c, stored, duplicates, last, elapsed: started.elapsed() });
        if stop() {
            ended = true;
        }
    }
    if let Some(f) = failure {
        return Err(f);
    }
    Ok(Listened { source_id, counts: reader.counts(), stored, duplicates, refused })
}

/// The outcome of ingesting one log file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Ingested {
    /// The file was stored.
    Stored {
        /// Counts.
        written: Written,
        /// Data lines read.
        lines: u64,
    },
    /// A file with the same contents was stored before, as this source.
    AlreadyStored {
        /// The earlier source's id.
        source_id: i64,
    },
}

fn io_err(path: &Path) -> impl Fn(io::Error) -> CollectError + '_ {
    move |error| CollectError::Io { what: path.display().to_string(), error }
}

/// SHA-256 of a file, hex, and its length.
///
/// # Errors
/// Read errors.
pub fn file_digest(path: &Path) -> Result<(String, u64), CollectError> {
    let mut f = std::fs::File::open(path).map_err(io_err(path))?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut len = 0u64;
    loop {
        let n = f.read(&mut buf).map_err(io_err(path))?;
        if n == 0 {
            break;
        }
        len += n as u64;
        h.update(buf.get(..n).unwrap_or(&[]));
    }
    Ok((hex(&h.finalize()), len))
}

/// Stores a log file in one transaction. A file stored before (same
/// SHA-256) is skipped. On any error nothing of the file is stored.
///
/// # Errors
/// The first bad line ([`CollectError::Log`]), read or store errors.
pub fn ingest(store: &mut Store, path: &Path, setup_id: Option<i64>) -> Result<Ingested, CollectError> {
    ingest_with(store, path, setup_id, None)
}

/// As [`ingest`], for another tester's log read through `mapping` (its
/// lines leave the hint, and may leave the verdict, to be judged against
/// the stored setup).
///
/// # Errors
/// As [`ingest`].
pub fn ingest_mapped(
    store: &mut Store,
    path: &Path,
    setup_id: Option<i64>,
    mapping: &Mapping,
) -> Result<Ingested, CollectError> {
    ingest_with(store, path, setup_id, Some(mapping))
}

fn ingest_with(
    store: &mut Store,
    path: &Path,
    setup_id: Option<i64>,
    mapping: Option<&Mapping>,
) -> Result<Ingested, CollectError> {
    let (digest, bytes) = file_digest(path)?;
    if let Some(source_id) = store.log_source(&digest)? {
        return Ok(Ingested::AlreadyStored { source_id });
    }
    // Lines that leave verdict or hint empty are judged against the stored setup's window.
    let setup = match setup_id {
        Some(id) => store.setups()?.remove(&id),
        None => None,
    };
    let judge = setup.as_ref().map(HoldJudge::new).transpose().map_err(|e| CollectError::Io {
        what: path.display().to_string(),
        error: std::io::Error::other(e.to_string()),
    })?;
    let mut batch = store.batch()?;
    let name = path.display().to_string();
    let Some(source_id) = batch.begin_log(&name, &digest, time::now_ms(), bytes)? else {
        // Another writer stored the same file meanwhile.
        drop(batch);
        let source_id = store.log_source(&digest)?.unwrap_or(0);
        return Ok(Ingested::AlreadyStored { source_id });
    };
    let file = std::fs::File::open(path).map_err(io_err(path))?;
    // Two threads: one reads and checks the lines, the other stores them, a
    // chunk at a time (a bounded channel: memory stays flat in the file's size).
    let judge = judge.as_ref();
    let (lines, store_error) = std::thread::scope(|scope| {
        let (tx, rx) = std::sync::mpsc::sync_channel::<Vec<Parsed>>(4);
        let reader = scope.spawn(move || {
            let mut chunk = Vec::with_capacity(CHUNK);
            let (mut station, mut batch): (Arc<str>, Arc<str>) = (Arc::from(""), Arc::from(""));
            let mut each = |_: u64, l: &log::Line<'_>| -> Result<(), String> {
                let mut judged;
                let l = if l.unjudged() {
                    judged = l.clone();
                    judge.ok_or_else(|| NO_JUDGE.to_owned())?.settle(&mut judged)?;
                    &judged
                } else {
                    l
                };
                if *station != *l.station {
                    station = Arc::from(l.station);
                }
                if *batch != *l.batch {
                    batch = Arc::from(l.batch);
                }
                chunk.push(Parsed {
                    station: station.clone(),
                    batch: batch.clone(),
                    measured_ms: l.measured_ms,
                    record: l.record,
                });
                if chunk.len() >= CHUNK {
                    let full = std::mem::replace(&mut chunk, Vec::with_capacity(CHUNK));
                    tx.send(full).map_err(|_| STORE_STOPPED.to_owned())?;
                }
                Ok(())
            };
            let lines = match mapping {
                Some(m) => m.read(path, &mut each),
                None => log::read(path, file, &mut each),
            }?;
            if !chunk.is_empty() {
                tx.send(chunk).map_err(|_| log::LogError::at(path, lines, None, STORE_STOPPED.to_owned()))?;
            }
            Ok::<u64, log::LogError>(lines)
        });
        let mut store_error = None;
        for chunk in rx {
            let rows = chunk.iter().map(|p| (Station::Name(&p.station), &*p.batch, p.measured_ms, &p.record));
            if let Err(e) = batch.insert_all(rows, setup_id, source_id) {
                // Dropping the receiver stops the reader at its next chunk.
                store_error = Some(e);
                break;
            }
        }
        let lines = reader
            .join()
            .unwrap_or_else(|_| Err(log::LogError::at(path, 0, None, "the reading thread failed".to_owned())));
        (lines, store_error)
    });
    if let Some(e) = store_error {
        return Err(CollectError::Store(e));
    }
    let lines = lines.map_err(CollectError::Log)?;
    let written = batch.commit(source_id, 0, 0)?;
    Ok(Ingested::Stored { written, lines })
}

/// Lines per chunk handed from the reading thread to the storing one.
const CHUNK: usize = 8_192;

/// Why the reading thread stopped when the storing one failed (never shown:
/// the store's error is).
const STORE_STOPPED: &str = "the store stopped taking records";

/// A checked line, owned, on its way to the store.
struct Parsed {
    station: Arc<str>,
    batch: Arc<str>,
    measured_ms: i64,
    record: Record,
}

/// Where a listened stream comes from, for messages.
#[must_use]
pub fn source_name(path: Option<&PathBuf>, port: Option<&str>) -> String {
    match (port, path) {
        (Some(p), _) => format!("serial {p}"),
        (None, Some(p)) if p.as_os_str() == "-" => "standard input".to_owned(),
        (None, Some(p)) => p.display().to_string(),
        (None, None) => "standard input".to_owned(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use hold_firmware::drift::DriftState;
    use hold_firmware::{Hint, Verdict};

    fn labels() -> Labels {
        Labels { station: "bench".into(), batch: String::new(), setup_id: None, time: TimeRule::Arrival }
    }

    fn good(seq: u32) -> Record {
        Record {
            seq,
            unit_id: 1,
            press_ticks: 10,
            on_ticks: Some(1),
            hold_ticks: Some(100),
            clock_hz: 1_000_000,
            temp_mdeg_c: None,
            verdict: Verdict::WithinWindow,
            hint: Hint::None,
            drift: DriftState::Settling,
            c_deviation_ppm: None,
        }
    }

    fn frame(seq: u32) -> Vec<u8> {
        hold_firmware::record::encode(&good(seq)).map(|f| f.to_vec()).unwrap_or_default()
    }

    #[test]
    fn a_stream_is_stored_once_and_its_repeats_counted() -> Result<(), CollectError> {
        let dir = tempfile::tempdir().map_err(|e| CollectError::Io { what: "tempdir".into(), error: e })?;
        let mut store = Store::open(&dir.path().join("s.db"))?;
        let bytes: Vec<u8> = [frame(0), frame(1), frame(1)].concat();
        let l = listen(&mut store, "t", io::Cursor::new(bytes), &labels(), |_| {}, || false)?;
        assert_eq!((l.stored, l.duplicates, l.counts.bad_frames), (2, 1, 0));
        assert_eq!(store.count()?, 2);
        assert_eq!(source_name(None, Some("/dev/ttyUSB0")), "serial /dev/ttyUSB0");
        Ok(())
    }

    /// Frames whose CRC is good but whose record is impossible (a clock of 0,
    /// 1 or 4294967295 Hz, −273.15 °C, −2,000,000 ppm, a within-window or short
    /// verdict without a hold, ticks of u64::MAX) were once stored and made the
    /// yield report a mean hold of 493 ks and Cpk −0.38: they are refused,
    /// counted by field, and nothing of them is stored.
    #[test]
    fn impossible_records_in_whole_frames_are_refused_and_counted() -> Result<(), CollectError> {
        let dir = tempfile::tempdir().map_err(|e| CollectError::Io { what: "tempdir".into(), error: e })?;
        let mut store = Store::open(&dir.path().join("s.db"))?;
        let base = good(0);
        let bad: Vec<Record> = vec![
            Record { clock_hz: 0, ..base },
            Record { clock_hz: 1, ..base },
            Record { clock_hz: u32::MAX, ..base },
            Record { temp_mdeg_c: Some(-2_147_483_000), ..base },
            Record { temp_mdeg_c: Some(-273_150), ..base },
            Record { c_deviation_ppm: Some(-2_000_000), ..base },
            Record { hold_ticks: None, ..base },
            Record { verdict: Verdict::Short, hint: Hint::WrongPart, hold_ticks: None, ..base },
            Record { hold_ticks: Some(u64::MAX), ..base },
            Record { press_ticks: u64::MAX, ..base },
        ];
        let mut bytes = Vec::new();
        for (i, r) in bad.iter().enumerate() {
            let r = Record { seq: 100 + i as u32, ..*r };
            bytes.extend(hold_firmware::record::encode(&r).map(|f| f.to_vec()).unwrap_or_default());
        }
        bytes.extend(frame(7));
        let l = listen(&mut store, "t", io::Cursor::new(bytes), &labels(), |_| {}, || false)?;
        assert_eq!((l.stored, l.counts.bad_frames), (1, 0), "only the good frame is stored");
        let by_field: Vec<(&str, u64)> = l.refused.iter().map(|(f, n)| (*f, *n)).collect();
        assert_eq!(
            by_field,
            vec![("c_dev_ppm", 1), ("clock_hz", 3), ("hold_ticks", 3), ("press_ticks", 1), ("temp_c", 2)]
        );
        assert_eq!(store.count()?, 1);
        assert_eq!(store.sources()?.first().map(|s| s.refused), Some(10));
        Ok(())
    }
}
