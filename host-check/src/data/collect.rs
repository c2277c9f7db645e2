//! Getting measurements into the store: `listen` (the firmware's framed
//! record stream, from a serial port, a file or standard input) and `ingest`
//! (measurement logs, see [`crate::data::log`]).
//!
//! `listen` commits every [`COMMIT_RECORDS`] records or [`COMMIT_MS`] ms,
//! whichever comes first (a timer of its own: records that arrive before a
//! quiet spell are committed within [`COMMIT_MS`]), and before it returns for
//! any reason, so a stream that ends, fails or is stopped by a signal keeps
//! every record received; a killed process loses at most the records of the
//! last [`COMMIT_MS`]. `ingest` stores each file
//! in one transaction: all of it or none of it.

use std::fmt;
use std::io::{self, Read};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};

use hold_firmware::record::Record;

use crate::data::frames::{Counts, FrameReader};
use crate::data::log::{self, LogError};
use crate::data::mapping::Mapping;
use crate::data::store::{Station, Store, StoreError, UnitSeq, Written};
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
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Progress {
    /// Frame counts so far.
    pub counts: Counts,
    /// Records stored so far (committed).
    pub stored: u64,
    /// Records that were already stored.
    pub duplicates: u64,
    /// Of the records stored, retests: their key (station, unit, boot, seq)
    /// was stored before with other content.
    pub conflicts: u64,
    /// The last good record.
    pub last: Option<Record>,
    /// Time since the stream started.
    pub elapsed: Duration,
    /// The input is lost and being reopened: why, and the next try's wait.
    pub lost: Option<(String, Duration)>,
    /// Times the input was reopened after it was lost.
    pub reopened: u32,
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
    /// Of the records stored, retests: their key (station, unit, boot, seq)
    /// was stored before with other content (both are kept).
    pub conflicts: u64,
    /// Records refused by the record check ([`crate::data::validate`]), by the field at fault.
    pub refused: std::collections::BTreeMap<&'static str, u64>,
    /// Each unit's sequence numbers as the stream delivered them.
    pub units: std::collections::BTreeMap<u32, UnitSeq>,
    /// Times the input was reopened after it was lost.
    pub reopened: u32,
    /// Whether `stop` ended the stream (a signal), not the input's end.
    pub stopped: bool,
}

/// Whether an I/O error is a read timeout (a quiet serial line), not a failure.
fn quiet(e: &io::Error) -> bool {
    matches!(e.kind(), io::ErrorKind::TimedOut | io::ErrorKind::WouldBlock)
}

/// A byte stream that `listen` reads, on a thread of its own.
pub type Stream = Box<dyn Read + Send>;

/// Opens the input again after it was lost.
pub type Opener = Box<dyn FnMut() -> io::Result<Stream> + Send>;

/// What `listen` reads: the opened stream and, for an input that can vanish
/// and come back (a USB serial port), how to reopen it.
pub struct Input {
    /// The stream, opened.
    pub stream: Stream,
    /// How to reopen it, and the waits between tries.
    pub reopen: Option<(Opener, Backoff)>,
}

impl fmt::Debug for Input {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Input").field("reopen", &self.reopen.as_ref().map(|r| r.1)).finish_non_exhaustive()
    }
}

impl Input {
    /// A stream read once to its end (a file, a pipe, standard input).
    pub fn once(stream: impl Read + Send + 'static) -> Input {
        Input { stream: Box::new(stream), reopen: None }
    }
}

/// Waits between tries to reopen a lost input: `first_ms`, doubling up to `max_ms`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Backoff {
    /// First wait, ms.
    pub first_ms: u64,
    /// Longest wait, ms.
    pub max_ms: u64,
}

/// The waits for a serial port: 0.25 s doubling to 8 s.
pub const PORT_BACKOFF: Backoff = Backoff { first_ms: 250, max_ms: 8_000 };

/// What the reading thread hands to the storing one.
enum Feed {
    /// A whole frame's record, the time it arrived and the counts after it.
    Record(Record, i64, Counts),
    /// The counts after a quiet spell or garbage.
    Counts(Counts),
    /// The input was lost (why, next try in).
    Lost(String, Duration),
    /// The input was reopened.
    Reopened,
    /// The input ended (with the error that ended it, if any).
    End(Counts, Option<io::Error>),
}

/// How often the storing thread looks at `stop` while nothing arrives.
const STOP_POLL: Duration = Duration::from_millis(25);

/// The reading thread: frames from `input` until it ends, is lost for good,
/// or `quit` is set.
fn read_frames(input: Input, tx: &std::sync::mpsc::SyncSender<Feed>, quit: &std::sync::atomic::AtomicBool) {
    use std::sync::atomic::Ordering;
    let Input { stream, mut reopen } = input;
    let mut reader = FrameReader::new(stream);
    loop {
        if quit.load(Ordering::Relaxed) {
            return;
        }
        let feed = match reader.next_record() {
            Ok(Some(r)) => Feed::Record(r, time::now_ms(), reader.counts()),
            Ok(None) => Feed::End(reader.counts(), None),
            Err(e) if quiet(&e) => Feed::Counts(reader.counts()),
            Err(e) => match reopen.as_mut() {
                None => Feed::End(reader.counts(), Some(e)),
                Some((open, backoff)) => {
                    // The partial frame is lost with the port: counted as a bad frame.
                    reader.lose_frame();
                    let mut wait = Duration::from_millis(backoff.first_ms);
                    let mut why = e.to_string();
                    loop {
                        if tx.send(Feed::Lost(why.clone(), wait)).is_err() {
                            return;
                        }
                        let until = Instant::now() + wait;
                        while Instant::now() < until {
                            if quit.load(Ordering::Relaxed) {
                                return;
                            }
                            std::thread::sleep(STOP_POLL.min(until.saturating_duration_since(Instant::now())));
                        }
                        match open() {
                            Ok(s) => {
                                reader.replace_input(s);
                                break;
                            }
                            Err(e) => why = e.to_string(),
                        }
                        wait = (wait * 2).min(Duration::from_millis(backoff.max_ms));
                    }
                    Feed::Reopened
                }
            },
        };
        let end = matches!(feed, Feed::End(..));
        if tx.send(feed).is_err() || end {
            return;
        }
    }
}

/// Reads framed records from `input` and stores them under `labels`, until
/// the input ends or `stop` returns true (a signal).
///
/// Reading runs on a thread of its own; this one stores. Records are kept in
/// memory and committed every [`COMMIT_RECORDS`] records or [`COMMIT_MS`] ms,
/// whichever comes first, whether or not more arrive — so a quiet line loses
/// nothing to a kill — and the write lock is taken only for the commit, so
/// other writers (`ingest`) go on meanwhile. `stop` is looked at every
/// 25 ms: then what has arrived is committed and the stream ends (the reading
/// thread may stay blocked in a read; it ends with the process). A lost input
/// with a way to reopen it is retried with backoff, reported through
/// `status`, which is called after every commit.
///
/// # Errors
/// Store errors; a read error of an input that cannot be reopened (the
/// records before it are committed first).
pub fn listen(
    store: &mut Store,
    name: &str,
    input: Input,
    labels: &Labels,
    mut status: impl FnMut(&Progress),
    stop: impl Fn() -> bool,
) -> Result<Listened, CollectError> {
    use std::sync::atomic::{AtomicBool, Ordering};
    let started = Instant::now();
    let source_id = store.begin_stream(name, time::now_ms())?;
    let (tx, rx) = std::sync::mpsc::sync_channel::<Feed>(2 * COMMIT_RECORDS as usize);
    let quit = Arc::new(AtomicBool::new(false));
    let reader_quit = quit.clone();
    std::thread::Builder::new()
        .name("listen-read".into())
        .spawn(move || read_frames(input, &tx, &reader_quit))
        .map_err(|e| CollectError::Io { what: name.to_owned(), error: e })?;
    let mut pending: Vec<(i64, Record)> = Vec::with_capacity(COMMIT_RECORDS as usize);
    let mut pending_refused = 0u64;
    let mut counts = Counts::default();
    let mut committed = Counts::default();
    let mut progress = Progress {
        counts,
        stored: 0,
        duplicates: 0,
        conflicts: 0,
        last: None,
        elapsed: Duration::ZERO,
        lost: None,
        reopened: 0,
    };
    let mut refused = std::collections::BTreeMap::new();
    let mut units: std::collections::BTreeMap<u32, UnitSeq> = std::collections::BTreeMap::new();
    let mut changed_units = std::collections::BTreeSet::new();
    let mut failure = None;
    let mut stopped = false;
    let mut ended = false;
    let mut last_commit = Instant::now();
    let commit_every = Duration::from_millis(COMMIT_MS);
    while !ended {
        let wait = commit_every.saturating_sub(last_commit.elapsed()).min(STOP_POLL);
        let mut feeds: Vec<Feed> = match rx.recv_timeout(wait) {
            Ok(f) => vec![f],
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => Vec::new(),
            Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => {
                ended = true;
                Vec::new()
            }
        };
        if stop() {
            stopped = true;
            ended = true;
            // What the reading thread has already read is stored too.
            feeds.extend(rx.try_iter());
        }
        for feed in feeds {
            match feed {
                Feed::Record(r, arrived_ms, c) => {
                    counts = c;
                    // A frame can be whole and its record still impossible: refused, counted, not stored.
                    if let Err(e) = crate::data::validate::record(&r) {
                        *refused.entry(e.field).or_insert(0u64) += 1;
                        pending_refused += 1;
                    } else {
                        let at = match labels.time {
                            TimeRule::Arrival => arrived_ms,
                            TimeRule::Sequence { start_ms, period_ms } => {
                                start_ms.saturating_add(i64::from(r.seq).saturating_mul(period_ms))
                            }
                        };
                        units
                            .entry(r.unit_id)
                            .or_insert_with(|| UnitSeq::starting_at(r.boot, r.seq))
                            .see(r.boot, r.seq);
                        changed_units.insert(r.unit_id);
                        pending.push((at, r));
                        progress.last = Some(r);
                    }
                }
                Feed::Counts(c) => counts = c,
                Feed::Lost(why, next) => {
                    // Shown at once: a loss may be shorter than a commit interval.
                    progress.lost = Some((why, next));
                    progress.elapsed = started.elapsed();
                    status(&progress);
                }
                Feed::Reopened => {
                    progress.lost = None;
                    progress.reopened += 1;
                }
                Feed::End(c, e) => {
                    counts = c;
                    failure = e.map(|error| CollectError::Io { what: name.to_owned(), error });
                    ended = true;
                }
            }
        }
        let due = last_commit.elapsed() >= commit_every || pending.len() as u64 >= COMMIT_RECORDS;
        if !(due || ended) {
            continue;
        }
        if !pending.is_empty() || pending_refused > 0 || counts != committed || !changed_units.is_empty() {
            let mut batch = store.batch()?;
            let station = batch.station(&labels.station)?;
            for (at, r) in pending.drain(..) {
                batch.insert(station, &labels.batch, at, &r, labels.setup_id, source_id)?;
            }
            for _ in 0..pending_refused {
                batch.refuse();
            }
            pending_refused = 0;
            batch.note_units(source_id, changed_units.iter().filter_map(|u| units.get_key_value(u)))?;
            changed_units.clear();
            let w =
                batch.commit(source_id, counts.bad_frames - committed.bad_frames, counts.bytes - committed.bytes)?;
            progress.stored += w.stored;
            progress.duplicates += w.duplicates;
            progress.conflicts += w.conflicts;
            committed = counts;
        }
        last_commit = Instant::now();
        progress.counts = counts;
        progress.elapsed = started.elapsed();
        status(&progress);
    }
    quit.store(true, Ordering::Relaxed);
    if let Some(f) = failure {
        return Err(f);
    }
    Ok(Listened {
        source_id,
        counts,
        stored: progress.stored,
        duplicates: progress.duplicates,
        conflicts: progress.conflicts,
        refused,
        units,
        reopened: progress.reopened,
        stopped,
    })
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

/// Stores a log file (`-`: standard input) in one transaction, reading it
/// once. A file stored before (same SHA-256, taken while it is read) leaves
/// the store as it was. On any error nothing of the file is stored.
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
    // Lines that leave verdict or hint empty are judged against the stored setup's window.
    let setup = match setup_id {
        Some(id) => store.setups()?.remove(&id),
        None => None,
    };
    let judge = setup.as_ref().map(HoldJudge::new).transpose().map_err(|e| CollectError::Io {
        what: path.display().to_string(),
        error: std::io::Error::other(e.to_string()),
    })?;
    // Contents stored before are recognised without parsing them: a regular
    // file as long as a stored log is hashed first (a file of a length no
    // stored log has cannot be one of them, and is not hashed twice). For the
    // benchmark's 1.09 GB log: 0.70 s, where parsing it and rolling back took
    // 157 s (`benches/store_scale.sh`). The digest that decides is still the
    // one taken while parsing (below), so a file changed in between is judged
    // by what was read.
    let len = std::fs::metadata(path).ok().filter(|m| path.as_os_str() != "-" && m.is_file()).map(|m| m.len());
    if len.map(|n| store.log_of_length(n)).transpose()? == Some(true) {
        let mut d = crate::input::Digesting::new(std::fs::File::open(path).map_err(io_err(path))?);
        std::io::copy(&mut d, &mut std::io::sink()).map_err(io_err(path))?;
        if let Some(earlier) = store.log_source(&d.finish().0)? {
            return Ok(Ingested::AlreadyStored { source_id: earlier });
        }
    }
    // Read once: "-" is standard input; pipes and FIFOs work as files do.
    let (input, name): (Box<dyn Read + Send>, String) = if path.as_os_str() == "-" {
        (Box::new(io::stdin()), "standard input".to_owned())
    } else {
        (Box::new(std::fs::File::open(path).map_err(io_err(path))?), path.display().to_string())
    };
    let mut batch = store.batch()?;
    let source_id = batch.begin_log(&name, time::now_ms())?;
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
            let mut digesting = crate::input::Digesting::new(input);
            let lines = match mapping {
                Some(m) => m.read(path, crate::input::LineBound::new(&mut digesting, log::MAX_LINE_BYTES), &mut each),
                None => log::read(path, &mut digesting, &mut each),
            }?;
            // What a parser left unread (after a last line without its break) is in the digest too.
            std::io::copy(&mut digesting, &mut std::io::sink())
                .map_err(|e| log::LogError::at(path, lines, None, format!("cannot read: {e}")))?;
            if !chunk.is_empty() {
                tx.send(chunk).map_err(|_| log::LogError::at(path, lines, None, STORE_STOPPED.to_owned()))?;
            }
            Ok::<(u64, (String, u64)), log::LogError>((lines, digesting.finish()))
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
    let (lines, (digest, bytes)) = lines.map_err(CollectError::Log)?;
    if let Some(earlier) = batch.end_log(source_id, &digest, bytes)? {
        // The same contents were stored before: nothing of this reading is kept.
        drop(batch);
        return Ok(Ingested::AlreadyStored { source_id: earlier });
    }
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
    use crate::data::store::Filter;
    use hold_firmware::drift::DriftState;
    use hold_firmware::{Hint, Verdict};

    fn labels() -> Labels {
        Labels { station: "bench".into(), batch: String::new(), setup_id: None, time: TimeRule::Arrival }
    }

    fn good(seq: u32) -> Record {
        Record {
            seq,
            unit_id: 1,
            boot: 0,
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
        // A unit that restarted its numbers and now fails: the same key, other content.
        let retest = hold_firmware::record::encode(&Record {
            hold_ticks: Some(40),
            verdict: Verdict::Short,
            hint: Hint::WrongPart,
            ..good(0)
        })
        .map(|f| f.to_vec())
        .unwrap_or_default();
        // The same unit after a reset, numbering from 0 again under its next boot.
        let rebooted =
            hold_firmware::record::encode(&Record { boot: 1, ..good(0) }).map(|f| f.to_vec()).unwrap_or_default();
        let bytes: Vec<u8> = [frame(0), frame(1), frame(1), retest.clone(), retest, rebooted].concat();
        let l = listen(&mut store, "t", Input::once(io::Cursor::new(bytes)), &labels(), |_| {}, || false)?;
        // Once the conflicting record vanished among the repeats, then it was
        // counted apart; now it is kept as a retest (once: its own repeat is a
        // duplicate), and the restart is a key of its own.
        assert_eq!((l.stored, l.duplicates, l.conflicts, l.counts.bad_frames), (4, 2, 1, 0));
        let src = store.sources()?.first().cloned();
        assert_eq!(src.as_ref().map(|s| (s.records, s.duplicates, s.conflicts)), Some((4, 2, 1)));
        assert_eq!(src.as_ref().map(|s| (s.seq_back, s.restarts)), Some((3, 1)));
        assert_eq!(store.count()?, 4);
        let mut kept = Vec::new();
        store.for_each(&Filter::default(), |x| kept.push((x.record.boot, x.record.seq, x.record.verdict)))?;
        assert_eq!(
            kept,
            [
                (0, 0, Verdict::WithinWindow),
                (0, 0, Verdict::Short),
                (0, 1, Verdict::WithinWindow),
                (1, 0, Verdict::WithinWindow)
            ]
        );
        assert_eq!(source_name(None, Some("/dev/ttyUSB0")), "serial /dev/ttyUSB0");
        Ok(())
    }

    /// A reader that hands out what the test sends it and blocks meanwhile,
    /// as a quiet serial line or pipe does; then fails as a vanished port does.
    struct Line(std::sync::mpsc::Receiver<io::Result<Vec<u8>>>, Vec<u8>);

    impl Read for Line {
        fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
            if self.1.is_empty() {
                match self.0.recv() {
                    Ok(Ok(b)) => self.1 = b,
                    Ok(Err(e)) => return Err(e),
                    Err(_) => return Ok(0),
                }
            }
            let n = buf.len().min(self.1.len());
            buf[..n].copy_from_slice(&self.1[..n]);
            self.1.drain(..n);
            Ok(n)
        }
    }

    fn temp_store() -> Result<(tempfile::TempDir, std::path::PathBuf), CollectError> {
        let dir = tempfile::tempdir().map_err(|e| CollectError::Io { what: "tempdir".into(), error: e })?;
        let path = dir.path().join("s.db");
        Store::open(&path)?;
        Ok((dir, path))
    }

    /// Five frames, then silence: they were once committed only when the next
    /// byte came (never, on a quiet night), and the write lock was held all
    /// the while. Now they are in the store within the commit interval, another
    /// writer gets the lock at once, and a stop ends listen promptly.
    #[test]
    fn a_quiet_line_commits_on_time_holds_no_lock_and_stops_promptly() -> Result<(), CollectError> {
        let (_dir, path) = temp_store()?;
        let (tx, rx) = std::sync::mpsc::channel();
        let stop = Arc::new(std::sync::atomic::AtomicBool::new(false));
        let stop_l = stop.clone();
        let p = path.clone();
        let listener = std::thread::spawn(move || -> Result<(Listened, Duration), CollectError> {
            let mut store = Store::open(&p)?;
            let l = listen(
                &mut store,
                "t",
                Input::once(Line(rx, Vec::new())),
                &labels(),
                |_| {},
                || stop_l.load(std::sync::atomic::Ordering::SeqCst),
            )?;
            Ok((l, Duration::ZERO))
        });
        tx.send(Ok((0..5).flat_map(frame).collect()))
            .map_err(|_| CollectError::Io { what: "line".into(), error: io::Error::other("closed") })?;
        std::thread::sleep(Duration::from_millis(COMMIT_MS * 3));
        let mut other = Store::open(&path)?;
        assert_eq!(other.count()?, 5, "committed without another byte");
        // The lock is free while listen waits for bytes.
        let took = Instant::now();
        other.batch()?.commit(0, 0, 0)?;
        assert!(took.elapsed() < Duration::from_secs(2), "lock held by listen: {:?}", took.elapsed());
        let asked = Instant::now();
        stop.store(true, std::sync::atomic::Ordering::SeqCst);
        let (l, _) = listener
            .join()
            .map_err(|_| CollectError::Io { what: "listener".into(), error: io::Error::other("panicked") })??;
        let took = asked.elapsed();
        assert!(took < Duration::from_millis(250), "stop took {took:?}");
        assert!(l.stopped);
        assert_eq!((l.stored, l.units.get(&1).map(|u| (u.received, u.missing, u.back))), (5, Some((5, 0, 0))));
        drop(tx);
        Ok(())
    }

    /// A port that vanishes mid-stream is reopened with backoff (two failed
    /// tries here), the records on both sides of the loss are stored, the
    /// frame cut by the loss counts as one bad frame, and the loss is reported.
    #[test]
    fn a_vanished_port_is_reopened_and_nothing_after_it_lost() -> Result<(), CollectError> {
        let (_dir, path) = temp_store()?;
        let mut store = Store::open(&path)?;
        let (tx1, rx1) = std::sync::mpsc::channel();
        let half = frame(2);
        let first: Vec<u8> = [frame(0), frame(1), half[..half.len() / 2].to_vec()].concat();
        let _ = tx1.send(Ok(first));
        let _ = tx1.send(Err(io::Error::new(io::ErrorKind::BrokenPipe, "device gone")));
        let mut tries = 0;
        let opener: Opener = Box::new(move || {
            tries += 1;
            if tries < 3 {
                return Err(io::Error::new(io::ErrorKind::NotFound, "no such device"));
            }
            let (tx, rx) = std::sync::mpsc::channel();
            let _ = tx.send(Ok([frame(3), frame(4)].concat()));
            Ok(Box::new(Line(rx, Vec::new())) as Stream)
        });
        let input = Input {
            stream: Box::new(Line(rx1, Vec::new())),
            reopen: Some((opener, Backoff { first_ms: 5, max_ms: 20 })),
        };
        let mut losses = Vec::new();
        let l = listen(&mut store, "port", input, &labels(), |p| losses.extend(p.lost.clone()), || false)?;
        assert_eq!((l.stored, l.reopened, l.counts.bad_frames), (4, 1, 1));
        assert_eq!(l.units.get(&1).map(|u| (u.missing, u.back)), Some((1, 0)), "seq 2 was cut");
        assert!(losses.iter().any(|(why, _)| why.contains("device gone")), "{losses:?}");
        drop(tx1);
        Ok(())
    }

    /// Gaps and steps back in a unit's numbers are counted per unit and kept
    /// with the source.
    #[test]
    fn sequence_gaps_and_steps_back_per_unit() -> Result<(), CollectError> {
        let (_dir, path) = temp_store()?;
        let mut store = Store::open(&path)?;
        let other = |seq: u32| {
            hold_firmware::record::encode(&Record { unit_id: 2, ..good(seq) }).map(|f| f.to_vec()).unwrap_or_default()
        };
        // Unit 1 restarts (its next boot numbers from 0 again): neither skipped nor back.
        let rebooted = |seq: u32| {
            hold_firmware::record::encode(&Record { boot: 1, ..good(seq) }).map(|f| f.to_vec()).unwrap_or_default()
        };
        let bytes: Vec<u8> = [
            frame(0),
            frame(1),
            frame(5),
            other(10),
            frame(6),
            frame(3),
            other(11),
            other(20),
            rebooted(0),
            rebooted(1),
        ]
        .concat();
        let l = listen(&mut store, "t", Input::once(io::Cursor::new(bytes)), &labels(), |_| {}, || false)?;
        let seq = |u: u32| {
            l.units.get(&u).map(|x| (x.first_seq, x.last_seq, x.received, x.missing, x.back, x.boot, x.restarts))
        };
        assert_eq!(seq(1), Some((0, 1, 7, 3, 1, 1, 1)));
        assert_eq!(seq(2), Some((10, 20, 3, 8, 0, 0, 0)));
        let src = store.sources()?;
        let s = src.first().map(|s| (s.seq_missing, s.seq_back, s.gap_units, s.restarts));
        assert_eq!(s, Some((11, 1, 2, 1)));
        let units = store.source_units(l.source_id)?;
        assert_eq!(units.first().map(|(u, x)| (*u, x.missing)), Some((2, 8)), "most skipped first");
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
        let l = listen(&mut store, "t", Input::once(io::Cursor::new(bytes)), &labels(), |_| {}, || false)?;
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
