//! The measurement store: one SQLite file (WAL mode), its schema versioned in
//! `PRAGMA user_version` and migrated forward on open.
//!
//! Tables (schema 7):
//! - `setup` — what a station measured against: the stage file's text and the
//!   firmware window in ticks (`hold_min_ticks`, `hold_max_ticks` at `clock_hz`).
//! - `source` — one row per stream listened to or log file ingested, with its
//!   counts (`records`, `duplicates`, `conflicts` — the retests among the
//!   records —, `refused`, `bad_frames`, `bytes`, and for streams the units'
//!   `seq_missing`, `seq_back`, `gap_units`, `restarts`); a log file's
//!   SHA-256 is unique, which makes re-ingesting it a no-op.
//! - `source_unit` — each stream's units and how their numbers ran ([`UnitSeq`]).
//! - `station`, `batch` — names, referred to by id.
//! - `reading` — one compact row per record, keyed by (station, unit, boot,
//!   seq, retest) — `retest` 0 for the first record of a key, 1, 2, … for
//!   records of the same key with other [`Content`]:
//!   time in ms since the epoch (UTC), batch and setup as ids (setup 0: none),
//!   `clock_hz` only where it is not the setup's (NULL otherwise), temperature
//!   in m°C, and verdict, hint and drift packed as `codes` = verdict +
//!   16·hint + 256·drift (the codes of [`crate::data::codes`], also in tables
//!   `verdict`, `hint`, `drift`). A partial index holds the rejects only.
//!   The view `measurement` shows the rows in the earlier, unpacked layout.
//! - `yield_cell` — the yield summary ([`Cell`]) of each (station, batch, UTC
//!   day, setup, clock), kept at ingest in the same transaction as the rows.
//! - `unit_fit` — each field unit's least-squares sums ([`UnitSums`]) per
//!   setup, for `aging` (kept for records of a field setup or of a station
//!   whose units report drift; when a station begins to drift its sums are
//!   counted from all its rows).
//!
//! The summaries always equal a recount of the rows ([`Store::recount`];
//! property test `summaries_equal_a_recount`).
//!
//! Writers take the write lock up front (`BEGIN IMMEDIATE`) and wait up to
//! `busy_timeout` for it, so two writers at once serialise instead of failing.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::time::Duration;

use hold_firmware::record::Record;
use rusqlite::{params, Connection, OptionalExtension as _, TransactionBehavior};
use sha2::{Digest as _, Sha256};

use std::collections::BTreeMap;

use hold_firmware::drift::DriftState;

use crate::data::codes;
use crate::data::summary::{self, Cell, UnitSums};
use crate::report::aging;
use crate::stage::file::StageFile;

/// The schema version this build writes.
pub const SCHEMA_VERSION: u32 = 7;

/// Migrations: entry `i` moves a database from version `i` to `i + 1`
/// (3 → 4 is followed by the summaries' recount, [`Store::migrate_to`]).
const MIGRATIONS: [&str; 7] = [
    // 0 → 1: the tables.
    "CREATE TABLE setup (
        id INTEGER PRIMARY KEY,
        name TEXT NOT NULL,
        digest TEXT NOT NULL UNIQUE,
        stage_toml TEXT NOT NULL,
        clock_hz INTEGER NOT NULL CHECK (clock_hz > 0),
        guard_ppm INTEGER NOT NULL,
        poll_ns INTEGER NOT NULL,
        hold_min_ticks INTEGER NOT NULL,
        hold_max_ticks INTEGER NOT NULL CHECK (hold_max_ticks >= hold_min_ticks)
     );
     CREATE TABLE source (
        id INTEGER PRIMARY KEY,
        kind TEXT NOT NULL CHECK (kind IN ('stream', 'log')),
        name TEXT NOT NULL,
        digest TEXT UNIQUE,
        started_ms INTEGER NOT NULL,
        records INTEGER NOT NULL DEFAULT 0,
        duplicates INTEGER NOT NULL DEFAULT 0,
        bad_frames INTEGER NOT NULL DEFAULT 0,
        bytes INTEGER NOT NULL DEFAULT 0
     );
     CREATE TABLE station (id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE);
     CREATE TABLE measurement (
        station_id INTEGER NOT NULL REFERENCES station(id),
        unit_id INTEGER NOT NULL,
        seq INTEGER NOT NULL,
        batch TEXT NOT NULL,
        measured_ms INTEGER NOT NULL,
        clock_hz INTEGER NOT NULL,
        press_ticks INTEGER NOT NULL,
        on_ticks INTEGER,
        hold_ticks INTEGER,
        temp_mdeg_c INTEGER,
        verdict INTEGER NOT NULL,
        hint INTEGER NOT NULL,
        drift INTEGER NOT NULL,
        c_dev_ppm INTEGER,
        setup_id INTEGER REFERENCES setup(id),
        source_id INTEGER NOT NULL REFERENCES source(id),
        PRIMARY KEY (station_id, unit_id, seq)
     ) WITHOUT ROWID;
     CREATE TABLE verdict (code INTEGER PRIMARY KEY, name TEXT NOT NULL);
     CREATE TABLE hint (code INTEGER PRIMARY KEY, name TEXT NOT NULL);
     CREATE TABLE drift (code INTEGER PRIMARY KEY, name TEXT NOT NULL);",
    // 1 → 2: date-range queries without a full scan.
    "CREATE INDEX measurement_time ON measurement (measured_ms);",
    // 2 → 3: the turn-on latency verdicts and the hints that tell the charge
    // and discharge paths from the capacitor (codes are only ever appended).
    "INSERT OR IGNORE INTO verdict VALUES (7, 'fast-start'), (8, 'slow-start');
     INSERT OR IGNORE INTO hint VALUES (8, 'charge-path'), (9, 'discharge-path');",
    // 3 → 4: compact rows (batch and setup as keys, the clock only where it is
    // not the setup's, the three codes in one integer, no foreign-key checks
    // per row, no time index: reports by day read the summaries) and the
    // summaries kept at ingest. `measurement` stays as a view for SQL users.
    "CREATE TABLE batch (id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE);
     CREATE TABLE reading (
        station_id INTEGER NOT NULL,
        unit_id INTEGER NOT NULL,
        seq INTEGER NOT NULL,
        measured_ms INTEGER NOT NULL,
        batch_id INTEGER NOT NULL,
        setup_id INTEGER NOT NULL,
        source_id INTEGER NOT NULL,
        clock_hz INTEGER,
        press_ticks INTEGER NOT NULL,
        on_ticks INTEGER,
        hold_ticks INTEGER,
        temp_mdeg_c INTEGER,
        c_dev_ppm INTEGER,
        codes INTEGER NOT NULL,
        PRIMARY KEY (station_id, unit_id, seq)
     ) WITHOUT ROWID;
     CREATE INDEX reading_reject ON reading (station_id, unit_id, seq) WHERE codes % 16 != 0;
     CREATE TABLE yield_cell (
        station_id INTEGER NOT NULL,
        batch_id INTEGER NOT NULL,
        day INTEGER NOT NULL,
        setup_id INTEGER NOT NULL,
        clock_hz INTEGER NOT NULL,
        cell BLOB NOT NULL,
        PRIMARY KEY (station_id, batch_id, day, setup_id, clock_hz)
     ) WITHOUT ROWID;
     CREATE TABLE unit_fit (
        station_id INTEGER NOT NULL,
        unit_id INTEGER NOT NULL,
        setup_id INTEGER NOT NULL,
        sums BLOB NOT NULL,
        PRIMARY KEY (station_id, unit_id, setup_id)
     ) WITHOUT ROWID;
     INSERT INTO batch (name) SELECT DISTINCT batch FROM measurement ORDER BY batch;
     INSERT INTO reading
        SELECT m.station_id, m.unit_id, m.seq, m.measured_ms, b.id, coalesce(m.setup_id, 0), m.source_id,
               CASE WHEN m.clock_hz = s.clock_hz THEN NULL ELSE m.clock_hz END,
               m.press_ticks, m.on_ticks, m.hold_ticks, m.temp_mdeg_c, m.c_dev_ppm,
               m.verdict + 16 * m.hint + 256 * m.drift
        FROM measurement m JOIN batch b ON b.name = m.batch LEFT JOIN setup s ON s.id = m.setup_id;
     DROP TABLE measurement;
     CREATE VIEW measurement AS
        SELECT r.station_id, r.unit_id, r.seq, b.name AS batch, r.measured_ms,
               coalesce(r.clock_hz, s.clock_hz) AS clock_hz, r.press_ticks, r.on_ticks, r.hold_ticks,
               r.temp_mdeg_c, r.codes % 16 AS verdict, (r.codes / 16) % 16 AS hint, r.codes / 256 AS drift,
               r.c_dev_ppm, nullif(r.setup_id, 0) AS setup_id, r.source_id
        FROM reading r JOIN batch b ON b.id = r.batch_id LEFT JOIN setup s ON s.id = r.setup_id;",
    // 4 → 5: frames whose record failed the record check, per source.
    "ALTER TABLE source ADD COLUMN refused INTEGER NOT NULL DEFAULT 0;",
    // 5 → 6: each unit's sequence numbers per stream (gaps, steps back).
    "CREATE TABLE source_unit (
        source_id INTEGER NOT NULL REFERENCES source(id),
        unit_id INTEGER NOT NULL,
        first_seq INTEGER NOT NULL,
        last_seq INTEGER NOT NULL,
        received INTEGER NOT NULL,
        missing INTEGER NOT NULL,
        back INTEGER NOT NULL,
        PRIMARY KEY (source_id, unit_id)
     ) WITHOUT ROWID;
     ALTER TABLE source ADD COLUMN seq_missing INTEGER NOT NULL DEFAULT 0;
     ALTER TABLE source ADD COLUMN seq_back INTEGER NOT NULL DEFAULT 0;
     ALTER TABLE source ADD COLUMN gap_units INTEGER NOT NULL DEFAULT 0;
     ALTER TABLE source ADD COLUMN conflicts INTEGER NOT NULL DEFAULT 0;",
    // 6 → 7: the unit's boot in the key (a restart is not a repeat), and a
    // key repeated with other content kept as a retest (`retest` 1, 2, …)
    // rather than dropped; per stream, each unit's restarts.
    "DROP VIEW measurement;
     DROP INDEX reading_reject;
     ALTER TABLE reading RENAME TO reading_6;
     CREATE TABLE reading (
        station_id INTEGER NOT NULL,
        unit_id INTEGER NOT NULL,
        boot INTEGER NOT NULL,
        seq INTEGER NOT NULL,
        retest INTEGER NOT NULL,
        measured_ms INTEGER NOT NULL,
        batch_id INTEGER NOT NULL,
        setup_id INTEGER NOT NULL,
        source_id INTEGER NOT NULL,
        clock_hz INTEGER,
        press_ticks INTEGER NOT NULL,
        on_ticks INTEGER,
        hold_ticks INTEGER,
        temp_mdeg_c INTEGER,
        c_dev_ppm INTEGER,
        codes INTEGER NOT NULL,
        PRIMARY KEY (station_id, unit_id, boot, seq, retest)
     ) WITHOUT ROWID;
     INSERT INTO reading
        SELECT station_id, unit_id, 0, seq, 0, measured_ms, batch_id, setup_id, source_id, clock_hz,
               press_ticks, on_ticks, hold_ticks, temp_mdeg_c, c_dev_ppm, codes
        FROM reading_6;
     DROP TABLE reading_6;
     CREATE INDEX reading_reject ON reading (station_id, unit_id, boot, seq, retest) WHERE codes % 16 != 0;
     CREATE VIEW measurement AS
        SELECT r.station_id, r.unit_id, r.boot, r.seq, r.retest, b.name AS batch, r.measured_ms,
               coalesce(r.clock_hz, s.clock_hz) AS clock_hz, r.press_ticks, r.on_ticks, r.hold_ticks,
               r.temp_mdeg_c, r.codes % 16 AS verdict, (r.codes / 16) % 16 AS hint, r.codes / 256 AS drift,
               r.c_dev_ppm, nullif(r.setup_id, 0) AS setup_id, r.source_id
        FROM reading r JOIN batch b ON b.id = r.batch_id LEFT JOIN setup s ON s.id = r.setup_id;
     ALTER TABLE source_unit ADD COLUMN boot INTEGER NOT NULL DEFAULT 0;
     ALTER TABLE source_unit ADD COLUMN restarts INTEGER NOT NULL DEFAULT 0;
     ALTER TABLE source ADD COLUMN restarts INTEGER NOT NULL DEFAULT 0;",
];

/// One unit's sequence numbers as one stream delivered them. The rule: a
/// record of another boot than the one before counts in `restarts` (its
/// numbering starts afresh); within a boot, a record whose number is above
/// the one before adds the numbers between to `missing`, and one whose number
/// is not above it counts in `back` (a repeat, a late arrival, or a restart
/// of a unit that sends no boot counter).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct UnitSeq {
    /// Boot of the last record received.
    pub boot: u32,
    /// First sequence number received.
    pub first_seq: u32,
    /// Last sequence number received.
    pub last_seq: u32,
    /// Records received (that passed the record check).
    pub received: u64,
    /// Sequence numbers skipped.
    pub missing: u64,
    /// Records whose number was not above the one before.
    pub back: u64,
    /// Records of another boot than the one before.
    pub restarts: u64,
}

impl UnitSeq {
    /// A unit first seen at `seq` of `boot` (nothing received yet: call [`UnitSeq::see`]).
    #[must_use]
    pub const fn starting_at(boot: u32, seq: u32) -> UnitSeq {
        UnitSeq { boot, first_seq: seq, last_seq: seq, received: 0, missing: 0, back: 0, restarts: 0 }
    }

    /// Counts a record numbered `seq` of `boot`.
    pub fn see(&mut self, boot: u32, seq: u32) {
        if self.received > 0 {
            if boot != self.boot {
                self.restarts += 1;
                self.boot = boot;
            } else if seq > self.last_seq {
                self.missing += u64::from(seq - self.last_seq - 1);
            } else {
                self.back += 1;
            }
        }
        self.received += 1;
        self.last_seq = seq;
    }
}

/// One source of records in the store: a stream `listen` read or a log
/// `ingest` stored.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Source {
    /// Its id in the store.
    pub id: i64,
    /// `stream` or `log`.
    pub kind: String,
    /// The file, port or stream name.
    pub name: String,
    /// Records stored from it.
    pub records: u64,
    /// Records it sent that were already stored.
    pub duplicates: u64,
    /// Frames that failed their check.
    pub bad_frames: u64,
    /// Frames whose record failed the record check (`data::validate`), not stored.
    pub refused: u64,
    /// Bytes read.
    pub bytes: u64,
    /// Sequence numbers its units skipped (streams; see [`UnitSeq`]).
    pub seq_missing: u64,
    /// Records whose number was not above their unit's one before (streams).
    pub seq_back: u64,
    /// Units with skipped numbers (streams).
    pub gap_units: u64,
    /// Records whose key (station, unit, boot, number) was stored already
    /// with other content: stored as retests (in `records`). Stores older
    /// than schema 7 counted them in `duplicates` instead and kept the first.
    pub conflicts: u64,
    /// Records of another boot than their unit's one before (streams).
    pub restarts: u64,
}

/// An error of the store, with the database file it concerns.
#[derive(Debug)]
pub struct StoreError {
    /// The database file.
    pub path: PathBuf,
    /// What went wrong.
    pub message: String,
}

impl std::fmt::Display for StoreError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}: {}", self.path.display(), self.message)
    }
}

impl std::error::Error for StoreError {}

fn se(path: &Path, e: impl std::fmt::Display) -> StoreError {
    StoreError { path: path.to_path_buf(), message: e.to_string() }
}

/// What a station measured against.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Setup {
    /// Stage name (the stage file's name, or its file name).
    pub name: String,
    /// The stage file's text.
    pub stage_toml: String,
    /// Tick clock, Hz.
    pub clock_hz: u32,
    /// Guard added to the window on each side, ppm.
    pub guard_ppm: u32,
    /// Poll period, ns.
    pub poll_ns: u32,
    /// Shortest passing hold, ticks.
    pub hold_min_ticks: u64,
    /// Longest passing hold, ticks.
    pub hold_max_ticks: u64,
}

impl Setup {
    /// Whether this is a field unit's setup: no lower pass limit (it tracks
    /// its capacitor's drift rather than judging a production window).
    #[must_use]
    pub const fn is_field(&self) -> bool {
        self.hold_min_ticks == 0
    }

    /// SHA-256 over every field, hex.
    #[must_use]
    pub fn digest(&self) -> String {
        let mut h = Sha256::new();
        h.update(self.name.as_bytes());
        h.update([0]);
        h.update(self.stage_toml.as_bytes());
        for v in [
            u64::from(self.clock_hz),
            u64::from(self.guard_ppm),
            u64::from(self.poll_ns),
            self.hold_min_ticks,
            self.hold_max_ticks,
        ] {
            h.update(v.to_le_bytes());
        }
        hex(&h.finalize())
    }
}

/// Lower-case hex of bytes.
#[must_use]
pub fn hex(b: &[u8]) -> String {
    use std::fmt::Write as _;
    b.iter().fold(String::with_capacity(b.len() * 2), |mut s, x| {
        let _ = write!(s, "{x:02x}");
        s
    })
}

/// A stored measurement as read back.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Stored {
    /// Station id (see [`Store::stations`]).
    pub station_id: i64,
    /// Batch label.
    pub batch: String,
    /// When it was measured, ms since the epoch (UTC).
    pub measured_ms: i64,
    /// The record.
    pub record: Record,
    /// The setup it was measured against, if known.
    pub setup_id: Option<i64>,
}

/// Which measurements to read.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Filter {
    /// Only this station.
    pub station: Option<String>,
    /// Only this batch.
    pub batch: Option<String>,
    /// Measured at or after, ms since the epoch.
    pub from_ms: Option<i64>,
    /// Measured before, ms since the epoch.
    pub to_ms: Option<i64>,
    /// Only this unit.
    pub unit_id: Option<u32>,
    /// Only rejects (verdict not `within-window`).
    pub rejects_only: bool,
}

impl Filter {
    /// Whether the store's summaries answer this filter: no unit, and any
    /// time bounds on whole UTC days.
    #[must_use]
    pub fn by_days(&self) -> bool {
        let whole = |t: Option<i64>| t.is_none_or(|t| t.rem_euclid(summary::DAY_MS) == 0);
        self.unit_id.is_none() && !self.rejects_only && whole(self.from_ms) && whole(self.to_ms)
    }
}

/// Counts of one source after writing.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Written {
    /// Source id.
    pub source_id: i64,
    /// New measurements stored.
    pub stored: u64,
    /// Records skipped because they were stored already (key and [`Content`]).
    pub duplicates: u64,
    /// Records stored as retests: their key (station, unit, boot, seq) was
    /// stored with other content (counted in `stored` too).
    pub conflicts: u64,
}

/// The store.
#[derive(Debug)]
pub struct Store {
    conn: Connection,
    path: PathBuf,
}

const INSERT: &str = "INSERT OR IGNORE INTO reading (station_id, unit_id, boot, seq, retest, measured_ms, batch_id, \
     setup_id, source_id, clock_hz, press_ticks, on_ticks, hold_ticks, temp_mdeg_c, c_dev_ppm, codes) \
     VALUES (?1, ?2, ?3, ?4, ?16, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15)";

/// What tells two records of one key (station, unit, boot, seq) apart:
/// clock, press, turn-on, hold, temperature, capacitance deviation and the
/// three codes (not the time, batch or setup: the same measurement sent
/// twice is the same). The one rule of repeats, for the store and for
/// `yield --csv`: a record whose key and content are both stored already is
/// a duplicate (not stored again); one whose key is stored with other
/// content only is a retest (stored beside it).
pub type Content = (Option<i64>, i64, Option<i64>, Option<i64>, Option<i32>, Option<i32>, i64);

/// The [`Content`] of a record.
#[must_use]
pub fn content(r: &Record) -> Content {
    (
        Some(i64::from(r.clock_hz)),
        u64_sql(r.press_ticks),
        r.on_ticks.map(u64_sql),
        r.hold_ticks.map(u64_sql),
        r.temp_mdeg_c,
        r.c_deviation_ppm,
        pack_codes(r),
    )
}

/// The three codes of a record in one integer: verdict + 16·hint + 256·drift.
#[must_use]
pub fn pack_codes(r: &Record) -> i64 {
    i64::from(codes::verdict_code(r.verdict))
        + 16 * i64::from(codes::hint_code(r.hint))
        + 256 * i64::from(codes::drift_code(r.drift))
}

/// The page size of a new store, bytes.
const PAGE_SIZE: u32 = 16_384;

/// How long a connection waits for another writer's lock before it gives up.
const BUSY_WAIT: Duration = Duration::from_secs(60);

/// Puts the database into WAL mode.
///
/// WAL is a property of the file, so after the first open this only reads
/// the mode. The switch itself needs the file to itself, and while another
/// connection is creating or switching the same new file SQLite can answer
/// `SQLITE_BUSY` to it at once, without running the busy handler (seen with
/// two processes creating one store at the same moment; a plain reader of
/// the file does get waited for). The switch is therefore retried, with
/// backoff, for up to [`BUSY_WAIT`]; another process finishing it meanwhile
/// counts as done.
fn into_wal(conn: &Connection) -> Result<(), String> {
    let unusable = |e: rusqlite::Error| format!("not a database rchold can use: {e}");
    let is_wal = |mode: &str| mode.eq_ignore_ascii_case("wal");
    let mode: String = conn.query_row("PRAGMA journal_mode", [], |r| r.get(0)).map_err(unusable)?;
    if is_wal(&mode) {
        return Ok(());
    }
    let start = std::time::Instant::now();
    let mut pause = Duration::from_millis(1);
    loop {
        match conn.query_row("PRAGMA journal_mode = WAL", [], |r| r.get::<_, String>(0)) {
            Ok(mode) if is_wal(&mode) => return Ok(()),
            Ok(mode) => return Err(format!("cannot switch to WAL mode (journal mode stays {mode})")),
            Err(e)
                if e.sqlite_error_code() == Some(rusqlite::ErrorCode::DatabaseBusy) && start.elapsed() < BUSY_WAIT =>
            {
                std::thread::sleep(pause);
                pause = (pause * 2).min(Duration::from_millis(50));
            }
            Err(e) => return Err(unusable(e)),
        }
    }
}

/// A file URI for SQLite (RFC 8089 form, the path percent-encoded where it
/// must be), `immutable` to read a file that nothing will change.
fn file_uri(path: &Path, immutable: bool) -> String {
    use std::fmt::Write as _;
    let mut uri = String::from("file:");
    for b in path.to_string_lossy().bytes() {
        if b.is_ascii_alphanumeric() || b"/-._~".contains(&b) {
            uri.push(char::from(b));
        } else {
            let _ = write!(uri, "%{b:02X}");
        }
    }
    if immutable {
        uri.push_str("?immutable=1");
    }
    uri
}

/// A read-only connection to `path` (with `flags` added). A WAL store on a
/// read-only mount cannot get its shared-memory file: it is then read as an
/// unchanging file (SQLite's `immutable`), which it is there.
fn read_only(path: &Path, flags: rusqlite::OpenFlags) -> Result<Connection, StoreError> {
    let flags = flags | rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY | rusqlite::OpenFlags::SQLITE_OPEN_URI;
    let open = |immutable: bool| -> Result<Connection, rusqlite::Error> {
        let conn = Connection::open_with_flags(file_uri(path, immutable), flags)?;
        conn.busy_timeout(BUSY_WAIT)?;
        // The first read is where a missing shared-memory file shows.
        conn.query_row("SELECT count(*) FROM sqlite_master", [], |r| r.get::<_, i64>(0))?;
        Ok(conn)
    };
    match open(false) {
        Ok(c) => Ok(c),
        Err(e)
            if matches!(
                e.sqlite_error_code(),
                Some(rusqlite::ErrorCode::CannotOpen | rusqlite::ErrorCode::ReadOnly)
            ) =>
        {
            open(true).map_err(|e| se(path, format!("cannot open: {e}")))
        }
        Err(e) if e.sqlite_error_code() == Some(rusqlite::ErrorCode::NotADatabase) => {
            Err(se(path, format!("not a database rchold can use: {e}; the file was left unchanged")))
        }
        Err(e) => Err(se(path, format!("cannot open: {e}"))),
    }
}

/// Checks that `conn` is an rchold store this build can use, or a new empty
/// database, before anything is written: returns its schema version.
///
/// # Errors
/// Not an SQLite database, a database with tables that are not rchold's, or
/// a schema newer than this build's; each says the file was left unchanged.
fn check_ours(conn: &Connection, path: &Path) -> Result<u32, StoreError> {
    let unchanged = "the file was left unchanged";
    // One statement: one snapshot, whatever another connection creating the store commits meanwhile.
    let (version, tables, ours): (u32, i64, i64) = conn
        .query_row(
            "SELECT (SELECT user_version FROM pragma_user_version), count(*), \
             count(*) FILTER (WHERE name IN ('setup', 'source', 'station')) FROM sqlite_master \
             WHERE type = 'table' AND name NOT LIKE 'sqlite_%'",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .map_err(|e| se(path, format!("not a database rchold can use: {e}; {unchanged}")))?;
    if version > SCHEMA_VERSION {
        return Err(se(
            path,
            format!(
                "schema version {version} was written by a newer rchold (this one knows 0 … {SCHEMA_VERSION}); {unchanged}"
            ),
        ));
    }
    let empty = version == 0 && tables == 0;
    if !empty && (version == 0 || ours < 3) {
        return Err(se(path, format!("not an rchold store (its tables are not rchold's); {unchanged}")));
    }
    Ok(version)
}

fn u64_sql(v: u64) -> i64 {
    // Ticks beyond 2^63 cannot come from a u32 clock in any plausible run;
    // they are stored saturated rather than wrapped.
    i64::try_from(v).unwrap_or(i64::MAX)
}

impl Store {
    /// Opens (creating if needed) the database at `path`, switches it to WAL
    /// mode and migrates it to [`SCHEMA_VERSION`].
    ///
    /// # Errors
    /// The file cannot be opened, is not an SQLite database, or was written
    /// by a newer rchold (schema version above ours).
    pub fn open(path: &Path) -> Result<Store, StoreError> {
        let err = |m: String| StoreError { path: path.to_path_buf(), message: m };
        let conn = Connection::open(path).map_err(|e| err(format!("cannot open: {e}")))?;
        conn.busy_timeout(BUSY_WAIT).map_err(|e| err(e.to_string()))?;
        // Ours and not newer, before anything is written (a foreign or newer
        // file stays byte for byte as it was).
        check_ours(&conn, path)?;
        // Larger pages for a new file (ignored once the file has tables): fewer
        // B-tree levels and splits per row, less space per row.
        let page = PAGE_SIZE;
        conn.pragma_update(None, "page_size", page).map_err(|e| err(e.to_string()))?;
        into_wal(&conn).map_err(err)?;
        // A 64 MiB page cache: an ingest of millions of rows stays in memory
        // between the B-tree's pages (bounded, whatever the store's size).
        conn.execute_batch("PRAGMA synchronous = NORMAL; PRAGMA foreign_keys = ON; PRAGMA cache_size = -65536;")
            .map_err(|e| err(e.to_string()))?;
        let mut store = Store { conn, path: path.to_path_buf() };
        store.migrate()?;
        Ok(store)
    }

    /// Opens an existing store for the reports: read-only (it works on a
    /// read-only mount and writes nothing: a mistyped path leaves no empty
    /// database behind, a foreign or newer file is refused unchanged). A
    /// store of an older schema is migrated first, the one write a report
    /// makes, to a file that is ours.
    ///
    /// # Errors
    /// The file does not exist, is not an rchold store, or is newer.
    pub fn open_existing(path: &Path) -> Result<Store, StoreError> {
        if !path.is_file() {
            return Err(StoreError {
                path: path.to_path_buf(),
                message: "no such store (make one with `rchold listen` or `rchold ingest`, or give --db)".into(),
            });
        }
        let conn = read_only(path, rusqlite::OpenFlags::empty())?;
        let version = check_ours(&conn, path)?;
        if version < SCHEMA_VERSION {
            drop(conn);
            return Store::open(path);
        }
        conn.execute_batch("PRAGMA cache_size = -65536;").map_err(|e| se(path, e))?;
        Ok(Store { conn, path: path.to_path_buf() })
    }

    fn err(&self, e: impl std::fmt::Display) -> StoreError {
        StoreError { path: self.path.clone(), message: e.to_string() }
    }

    /// The database file.
    #[must_use]
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The schema version on disk.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn schema_version(&self) -> Result<u32, StoreError> {
        self.conn.query_row("PRAGMA user_version", [], |r| r.get(0)).map_err(|e| self.err(e))
    }

    /// Applies the migrations from the version on disk up to `target`, in one
    /// transaction (a store of schema 3 or older goes on to the latest: its
    /// summaries are counted from its rows in the latest layout).
    /// [`Store::open`] migrates to the latest.
    ///
    /// # Errors
    /// A database newer than this build, or SQLite errors.
    pub fn migrate_to(&mut self, target: u32) -> Result<u32, StoreError> {
        let path = self.path.clone();
        let tx = self.conn.transaction_with_behavior(TransactionBehavior::Immediate).map_err(|e| se(&path, e))?;
        let on_disk: u32 = tx.query_row("PRAGMA user_version", [], |r| r.get(0)).map_err(|e| se(&path, e))?;
        if on_disk > SCHEMA_VERSION {
            return Err(se(
                &path,
                format!("schema version {on_disk} was written by a newer rchold (this one knows 0 … {SCHEMA_VERSION})"),
            ));
        }
        // Past schema 3 the summaries are counted from the rows, read in the
        // latest layout: such a migration goes on to the latest.
        let target = if on_disk <= 3 && target > 3 { SCHEMA_VERSION } else { target.min(SCHEMA_VERSION) };
        for v in on_disk..target {
            let sql = MIGRATIONS.get(v as usize).ok_or_else(|| se(&path, "missing migration"))?;
            tx.execute_batch(sql).map_err(|e| se(&path, format!("migration {v} → {}: {e}", v + 1)))?;
            if v == 0 {
                for (i, n) in codes::VERDICTS.iter().map(|v| v.name()).enumerate() {
                    tx.execute("INSERT INTO verdict VALUES (?1, ?2)", params![i as i64, n])
                        .map_err(|e| se(&path, e))?;
                }
                for (i, n) in codes::HINTS.iter().map(|h| h.name()).enumerate() {
                    tx.execute("INSERT INTO hint VALUES (?1, ?2)", params![i as i64, n]).map_err(|e| se(&path, e))?;
                }
                for (i, n) in codes::DRIFTS.iter().map(|&d| codes::drift_name(d)).enumerate() {
                    tx.execute("INSERT INTO drift VALUES (?1, ?2)", params![i as i64, n]).map_err(|e| se(&path, e))?;
                }
            }
            tx.pragma_update(None, "user_version", v + 1).map_err(|e| se(&path, e))?;
        }
        if (on_disk..target).contains(&3) {
            // The summaries of the rows carried over from before schema 4,
            // counted once the rows have their latest layout.
            let sums = recount(&tx, &path)?;
            write_summaries(&tx, &path, &sums, true)?;
        }
        tx.commit().map_err(|e| se(&path, e))?;
        self.schema_version()
    }

    fn migrate(&mut self) -> Result<(), StoreError> {
        self.migrate_to(SCHEMA_VERSION).map(|_| ())
    }

    /// The id of a setup, stored if new.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn setup_id(&mut self, s: &Setup) -> Result<i64, StoreError> {
        let path = self.path.clone();
        let digest = s.digest();
        let tx = self.conn.transaction_with_behavior(TransactionBehavior::Immediate).map_err(|e| se(&path, e))?;
        tx.execute(
            "INSERT OR IGNORE INTO setup (name, digest, stage_toml, clock_hz, guard_ppm, poll_ns, hold_min_ticks, \
             hold_max_ticks) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
            params![
                s.name,
                digest,
                s.stage_toml,
                s.clock_hz,
                s.guard_ppm,
                s.poll_ns,
                u64_sql(s.hold_min_ticks),
                u64_sql(s.hold_max_ticks)
            ],
        )
        .map_err(|e| se(&path, e))?;
        let id = tx
            .query_row("SELECT id FROM setup WHERE digest = ?1", [&digest], |r| r.get(0))
            .map_err(|e| se(&path, e))?;
        tx.commit().map_err(|e| se(&path, e))?;
        Ok(id)
    }

    /// Every setup, by id.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn setups(&self) -> Result<HashMap<i64, Setup>, StoreError> {
        let mut st = self
            .conn
            .prepare(
                "SELECT id, name, stage_toml, clock_hz, guard_ppm, poll_ns, hold_min_ticks, hold_max_ticks FROM setup",
            )
            .map_err(|e| self.err(e))?;
        let rows = st
            .query_map([], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    Setup {
                        name: r.get(1)?,
                        stage_toml: r.get(2)?,
                        clock_hz: r.get(3)?,
                        guard_ppm: r.get(4)?,
                        poll_ns: r.get(5)?,
                        hold_min_ticks: r.get::<_, i64>(6)?.max(0) as u64,
                        hold_max_ticks: r.get::<_, i64>(7)?.max(0) as u64,
                    },
                ))
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// Station names by id.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn stations(&self) -> Result<HashMap<i64, String>, StoreError> {
        let mut st = self.conn.prepare("SELECT id, name FROM station").map_err(|e| self.err(e))?;
        let rows = st.query_map([], |r| Ok((r.get(0)?, r.get(1)?))).map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// Whether a log file with this SHA-256 was ingested already; its source id.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn log_source(&self, digest: &str) -> Result<Option<i64>, StoreError> {
        self.conn
            .query_row("SELECT id FROM source WHERE digest = ?1", [digest], |r| r.get(0))
            .optional()
            .map_err(|e| self.err(e))
    }

    /// Whether a stored log file has `bytes` bytes (a file of another length
    /// cannot have a stored log's contents).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn log_of_length(&self, bytes: u64) -> Result<bool, StoreError> {
        self.conn
            .query_row(
                "SELECT EXISTS (SELECT 1 FROM source WHERE kind = 'log' AND bytes = ?1)",
                [u64_sql(bytes)],
                |r| r.get(0),
            )
            .map_err(|e| self.err(e))
    }

    /// Starts a stream source (committed at once, so its counts can grow
    /// batch by batch).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn begin_stream(&mut self, name: &str, started_ms: i64) -> Result<i64, StoreError> {
        self.conn
            .execute("INSERT INTO source (kind, name, started_ms) VALUES ('stream', ?1, ?2)", params![name, started_ms])
            .map_err(|e| self.err(e))?;
        Ok(self.conn.last_insert_rowid())
    }

    /// Opens a write transaction (takes the write lock now, waiting for
    /// another writer to finish).
    ///
    /// # Errors
    /// SQLite errors (including a lock held longer than the busy timeout).
    pub fn batch(&mut self) -> Result<Batch<'_>, StoreError> {
        let path = self.path.clone();
        let tx = self
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(|e| StoreError { path: path.clone(), message: e.to_string() })?;
        let setups = SetupInfo::load(&tx, &path)?;
        let drifting = drifting_stations(&tx, &path)?;
        Ok(Batch {
            tx,
            path,
            stations: HashMap::new(),
            batches: HashMap::new(),
            setups,
            drifting: drifting.into_iter().collect(),
            newly_drifting: std::collections::BTreeSet::new(),
            pending: Summaries::default(),
            stored: 0,
            duplicates: 0,
            conflicts: 0,
            refused: 0,
        })
    }

    /// Reads measurements matching `filter` in (station, unit, boot, seq, retest) order,
    /// one at a time (memory stays bounded whatever the table's size).
    ///
    /// # Errors
    /// SQLite errors, or a stored code this build does not know.
    pub fn for_each(&self, filter: &Filter, mut each: impl FnMut(Stored)) -> Result<u64, StoreError> {
        let batches = self.batches()?;
        let mut n = 0;
        Store::scan(&self.conn, &self.path, filter, None, |x| {
            each(x.stored(&batches));
            n += 1;
            true
        })?;
        Ok(n)
    }

    /// Key ranges, in key order, that split the rows into about `parts`
    /// pieces per station (by unit id, evenly over each station's range of
    /// ids: two index lookups per station, no scan).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn key_ranges(&self, parts: u32) -> Result<Vec<KeyRange>, StoreError> {
        let e = |e: rusqlite::Error| self.err(e);
        let mut ids: Vec<i64> = self.stations()?.into_keys().collect();
        ids.sort_unstable();
        let mut out = Vec::new();
        for id in ids {
            let (lo, hi): (Option<i64>, Option<i64>) = self
                .conn
                .query_row(
                    "SELECT (SELECT min(unit_id) FROM reading WHERE station_id = ?1), \
                     (SELECT max(unit_id) FROM reading WHERE station_id = ?1)",
                    [id],
                    |r| Ok((r.get(0)?, r.get(1)?)),
                )
                .map_err(e)?;
            let (Some(lo), Some(hi)) = (lo, hi) else { continue };
            let (lo, hi) = (u32::try_from(lo).unwrap_or(0), u32::try_from(hi).unwrap_or(u32::MAX));
            let step = (u64::from(hi - lo) + 1).div_ceil(u64::from(parts.max(1)));
            let mut a = u64::from(lo);
            while a <= u64::from(hi) {
                let b = (a + step - 1).min(u64::from(hi));
                out.push(KeyRange {
                    station_id: id,
                    units: (u32::try_from(a).unwrap_or(u32::MAX), u32::try_from(b).unwrap_or(u32::MAX)),
                });
                a = b + 1;
            }
        }
        Ok(out)
    }

    /// Reads the measurements of `range` that `filter` selects, as
    /// [`Store::for_each`] does, on this connection (one per thread: a store
    /// opened with [`Store::open_reader`]).
    ///
    /// # Errors
    /// SQLite errors, or a stored code this build does not know.
    pub fn for_each_in(
        &self,
        filter: &Filter,
        range: KeyRange,
        batches: &HashMap<i64, String>,
        mut each: impl FnMut(Stored),
    ) -> Result<(), StoreError> {
        Store::scan_keys(&self.conn, &self.path, filter, Some(range), |x| {
            each(x.stored(batches));
            true
        })
    }

    /// Opens an existing store for reading only, without migrating (one more
    /// reader beside a connection that opened it with [`Store::open`]).
    ///
    /// # Errors
    /// The file cannot be opened.
    pub fn open_reader(path: &Path) -> Result<Store, StoreError> {
        // One connection per thread: no locking inside SQLite.
        let conn = read_only(path, rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX)?;
        Ok(Store { conn, path: path.to_path_buf() })
    }

    /// The rows matching `filter` (and `station`, by id), in (station, unit,
    /// boot, seq, retest) order; `each` returns `false` to stop.
    fn scan(
        conn: &Connection,
        path: &Path,
        filter: &Filter,
        station: Option<i64>,
        each: impl FnMut(Row) -> bool,
    ) -> Result<(), StoreError> {
        Store::scan_keys(conn, path, filter, station.map(|s| KeyRange { station_id: s, units: (0, u32::MAX) }), each)
    }

    /// As [`Store::scan`], within one key range.
    fn scan_keys(
        conn: &Connection,
        path: &Path,
        filter: &Filter,
        keys: Option<KeyRange>,
        mut each: impl FnMut(Row) -> bool,
    ) -> Result<(), StoreError> {
        let err = |e: rusqlite::Error| se(path, e);
        let mut sql = String::from(
            "SELECT m.station_id, m.batch_id, m.measured_ms, m.unit_id, m.seq, coalesce(m.clock_hz, u.clock_hz), \
             m.press_ticks, m.on_ticks, m.hold_ticks, m.temp_mdeg_c, m.codes, m.c_dev_ppm, m.setup_id, m.boot \
             FROM reading m LEFT JOIN setup u ON u.id = m.setup_id WHERE 1",
        );
        let mut args: Vec<rusqlite::types::Value> = Vec::new();
        if let Some(s) = &filter.station {
            sql.push_str(" AND m.station_id = (SELECT id FROM station WHERE name = ?)");
            args.push(s.clone().into());
        }
        if let Some(k) = keys {
            sql.push_str(" AND m.station_id = ? AND m.unit_id BETWEEN ? AND ?");
            args.extend([k.station_id.into(), i64::from(k.units.0).into(), i64::from(k.units.1).into()]);
        }
        if let Some(b) = &filter.batch {
            sql.push_str(" AND m.batch_id = (SELECT id FROM batch WHERE name = ?)");
            args.push(b.clone().into());
        }
        if let Some(t) = filter.from_ms {
            sql.push_str(" AND m.measured_ms >= ?");
            args.push(t.into());
        }
        if let Some(t) = filter.to_ms {
            sql.push_str(" AND m.measured_ms < ?");
            args.push(t.into());
        }
        if let Some(u) = filter.unit_id {
            sql.push_str(" AND m.unit_id = ?");
            args.push(i64::from(u).into());
        }
        if filter.rejects_only {
            // The partial index `reading_reject` holds exactly these rows.
            sql.push_str(" AND m.codes % 16 != 0");
        }
        sql.push_str(" ORDER BY m.station_id, m.unit_id, m.boot, m.seq, m.retest");
        let mut st = conn.prepare(&sql).map_err(err)?;
        let mut rows = st.query(rusqlite::params_from_iter(args)).map_err(err)?;
        let bad = |what: &str, code: i64| se(path, format!("stored {what} code {code} is unknown to this rchold"));
        while let Some(r) = rows.next().map_err(err)? {
            let get = |i: usize| r.get::<_, i64>(i).map_err(err);
            let opt = |i: usize| r.get::<_, Option<i64>>(i).map_err(err);
            let packed = get(10)?;
            let (vc, hc, dc) = (packed % 16, (packed / 16) % 16, packed / 256);
            let record = Record {
                unit_id: u32::try_from(get(3)?).unwrap_or(u32::MAX),
                seq: u32::try_from(get(4)?).unwrap_or(u32::MAX),
                boot: u32::try_from(get(13)?).unwrap_or(u32::MAX),
                clock_hz: u32::try_from(opt(5)?.unwrap_or(0)).unwrap_or(0),
                press_ticks: get(6)?.max(0) as u64,
                on_ticks: opt(7)?.map(|v| v.max(0) as u64),
                hold_ticks: opt(8)?.map(|v| v.max(0) as u64),
                temp_mdeg_c: opt(9)?.and_then(|v| i32::try_from(v).ok()),
                verdict: codes::verdict_of(vc).ok_or_else(|| bad("verdict", vc))?,
                hint: codes::hint_of(hc).ok_or_else(|| bad("hint", hc))?,
                drift: codes::drift_of(dc).ok_or_else(|| bad("drift", dc))?,
                c_deviation_ppm: opt(11)?.and_then(|v| i32::try_from(v).ok()),
            };
            let row = Row { station_id: get(0)?, batch_id: get(1)?, measured_ms: get(2)?, record, setup: get(12)? };
            if !each(row) {
                break;
            }
        }
        Ok(())
    }

    /// The units of stream `source_id` with their sequence counts, the most
    /// skipped numbers first.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn source_units(&self, source_id: i64) -> Result<Vec<(u32, UnitSeq)>, StoreError> {
        let mut st = self
            .conn
            .prepare(
                "SELECT unit_id, first_seq, last_seq, received, missing, back, boot, restarts FROM source_unit \
                 WHERE source_id = ?1 ORDER BY missing DESC, back DESC, restarts DESC, unit_id",
            )
            .map_err(|e| self.err(e))?;
        let rows = st
            .query_map([source_id], |r| {
                let u = |i: usize| r.get::<_, i64>(i).map(|v| v.max(0) as u64);
                let seq = |i: usize| r.get::<_, i64>(i).map(|v| u32::try_from(v).unwrap_or(0));
                Ok((
                    seq(0)?,
                    UnitSeq {
                        boot: seq(6)?,
                        first_seq: seq(1)?,
                        last_seq: seq(2)?,
                        received: u(3)?,
                        missing: u(4)?,
                        back: u(5)?,
                        restarts: u(7)?,
                    },
                ))
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// Every source (stream or log) with its counts, in the order stored.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn sources(&self) -> Result<Vec<Source>, StoreError> {
        let mut st = self
            .conn
            .prepare(
                "SELECT id, kind, name, records, duplicates, bad_frames, bytes, refused, seq_missing, seq_back, \
                 gap_units, conflicts, restarts FROM source ORDER BY id",
            )
            .map_err(|e| self.err(e))?;
        let rows = st
            .query_map([], |r| {
                let u = |i: usize| r.get::<_, i64>(i).map(|v| v.max(0) as u64);
                Ok(Source {
                    id: r.get(0)?,
                    kind: r.get(1)?,
                    name: r.get(2)?,
                    records: u(3)?,
                    duplicates: u(4)?,
                    bad_frames: u(5)?,
                    bytes: u(6)?,
                    refused: u(7)?,
                    seq_missing: u(8)?,
                    seq_back: u(9)?,
                    gap_units: u(10)?,
                    conflicts: u(11)?,
                    restarts: u(12)?,
                })
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// Stations with a record that reports a drift state past settling:
    /// stations of field units (a fixture measures a board once). Read from
    /// the summaries.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn drift_stations(&self) -> Result<std::collections::HashSet<i64>, StoreError> {
        drifting_stations(&self.conn, &self.path)
    }

    /// Measurements stored in all.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn count(&self) -> Result<u64, StoreError> {
        self.conn
            .query_row("SELECT count(*) FROM reading", [], |r| r.get::<_, i64>(0))
            .map(|v| v.max(0) as u64)
            .map_err(|e| self.err(e))
    }

    /// Batch names by id.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn batches(&self) -> Result<HashMap<i64, String>, StoreError> {
        let mut st = self.conn.prepare("SELECT id, name FROM batch").map_err(|e| self.err(e))?;
        let rows = st.query_map([], |r| Ok((r.get(0)?, r.get(1)?))).map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// The summaries as stored.
    ///
    /// # Errors
    /// SQLite errors, or a summary this build cannot read.
    pub fn summaries(&self) -> Result<Summaries, StoreError> {
        read_summaries(&self.conn, &self.path)
    }

    /// The yield cells matching `filter` (station, batch, and `from_ms`/`to_ms`
    /// as whole UTC days; see [`Filter::by_days`]).
    ///
    /// # Errors
    /// SQLite errors, or a summary this build cannot read.
    pub fn cells(&self, filter: &Filter) -> Result<Vec<(CellAt, Cell)>, StoreError> {
        query_cells(&self.conn, &self.path, filter)
    }

    /// The aging fit sums per (station, unit, setup (0: none)) of `station`
    /// and `unit` (all when `None`).
    ///
    /// # Errors
    /// SQLite errors, or a summary this build cannot read.
    pub fn unit_fits(&self, station: Option<&str>, unit: Option<u32>) -> Result<Vec<(UnitKey, UnitSums)>, StoreError> {
        query_units(&self.conn, &self.path, station, unit)
    }

    /// The summaries recomputed from every row (what the stored ones must equal).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn recount(&self) -> Result<Summaries, StoreError> {
        recount(&self.conn, &self.path)
    }

    /// The stored rejects (verdict not `within-window`) matching `filter`, in
    /// (station, unit, boot, seq, retest) order, through the partial index that holds only
    /// them; `each` returns `false` to stop.
    ///
    /// # Errors
    /// SQLite errors, or a stored code this build does not know.
    pub fn rejects(&self, filter: &Filter, mut each: impl FnMut(Stored) -> bool) -> Result<(), StoreError> {
        let batches = self.batches()?;
        let reject = Filter { rejects_only: true, ..filter.clone() };
        Store::scan(&self.conn, &self.path, &reject, None, |x| each(x.stored(&batches)))
    }

    /// SQLite's own consistency check (`PRAGMA integrity_check`): `ok` or the problems.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn integrity(&self) -> Result<String, StoreError> {
        self.conn.query_row("PRAGMA integrity_check", [], |r| r.get(0)).map_err(|e| self.err(e))
    }
}

/// Rows of one station with unit ids in `units` (inclusive): a piece of the
/// table for one thread ([`Store::key_ranges`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct KeyRange {
    /// Station id.
    pub station_id: i64,
    /// First and last unit id.
    pub units: (u32, u32),
}

/// A row as [`Store::scan`] reads it.
struct Row {
    station_id: i64,
    batch_id: i64,
    measured_ms: i64,
    record: Record,
    setup: i64,
}

impl Row {
    /// The row as the reports see it, with its batch's name.
    fn stored(self, batches: &HashMap<i64, String>) -> Stored {
        Stored {
            station_id: self.station_id,
            batch: batches.get(&self.batch_id).cloned().unwrap_or_default(),
            measured_ms: self.measured_ms,
            record: self.record,
            setup_id: Some(self.setup).filter(|&id| id != 0),
        }
    }
}

/// Where a [`Cell`] of the store's summaries belongs: station, batch, UTC
/// day (days since 1970-01-01), setup (0: none) and tick clock.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct CellAt {
    /// Station id.
    pub station_id: i64,
    /// Batch id.
    pub batch_id: i64,
    /// UTC day, days since the epoch.
    pub day: i64,
    /// Setup id, 0 for none.
    pub setup_id: i64,
    /// Tick clock, Hz.
    pub clock_hz: u32,
}

/// Where a unit's fit sums belong: (station id, unit id, setup id (0: none)).
pub type UnitKey = (i64, u32, i64);

/// The summaries kept beside the rows: yield cells and each field unit's
/// fit sums (with its records that gave no aging point).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Summaries {
    /// Yield cells.
    pub cells: BTreeMap<CellAt, Cell>,
    /// Fit sums per (station, unit, setup (0: none)).
    pub units: BTreeMap<UnitKey, UnitSums>,
}

/// What the summaries need of a setup.
struct SetupInfo {
    window_s: (f64, f64),
    clock_hz: u32,
    field: bool,
    stage: Option<StageFile>,
}

impl SetupInfo {
    fn load(conn: &Connection, path: &Path) -> Result<HashMap<i64, SetupInfo>, StoreError> {
        let mut st = conn
            .prepare("SELECT id, name, stage_toml, clock_hz, hold_min_ticks, hold_max_ticks FROM setup")
            .map_err(|e| se(path, e))?;
        let rows = st
            .query_map([], |r| {
                let (name, toml): (String, String) = (r.get(1)?, r.get(2)?);
                let clock: u32 = r.get(3)?;
                let (lo, hi) = (r.get::<_, i64>(4)?, r.get::<_, i64>(5)?);
                let c = f64::from(clock.max(1));
                Ok((
                    r.get::<_, i64>(0)?,
                    SetupInfo {
                        window_s: (lo as f64 / c, hi as f64 / c),
                        clock_hz: clock,
                        field: lo == 0,
                        stage: crate::stage::file::parse(Path::new(&name), &toml).ok(),
                    },
                ))
            })
            .map_err(|e| se(path, e))?;
        rows.collect::<Result<_, _>>().map_err(|e| se(path, e))
    }
}

impl Summaries {
    /// Adds a stored record: to its yield cell always; to its unit's fit (or
    /// the skip counts) when it belongs in aging — a field setup, or a
    /// station in `drifting`. The one rule for ingest, listen and recount.
    #[allow(clippy::too_many_arguments)]
    fn add(
        &mut self,
        station_id: i64,
        batch_id: i64,
        measured_ms: i64,
        r: &Record,
        setup_id: i64,
        setups: &HashMap<i64, SetupInfo>,
        drifting: &std::collections::BTreeSet<i64>,
    ) {
        let info = setups.get(&setup_id);
        let at = CellAt { station_id, batch_id, day: summary::day_of(measured_ms), setup_id, clock_hz: r.clock_hz };
        self.cells.entry(at).or_default().add(r, measured_ms, info.map(|i| i.window_s), summary::is_gross(r.hint));
        if info.is_some_and(|i| i.field) || drifting.contains(&station_id) {
            self.add_aging(station_id, measured_ms, r, setup_id, info.and_then(|i| i.stage.as_ref()));
        }
    }

    fn add_aging(&mut self, station_id: i64, measured_ms: i64, r: &Record, setup_id: i64, stage: Option<&StageFile>) {
        let u = self.units.entry((station_id, r.unit_id, setup_id)).or_default();
        match aging::deviation_ppm(r, stage) {
            Ok(d) => u.add(measured_ms, r.seq, d),
            Err(why) => {
                u.skipped += 1;
                u.without_stage += u64::from(why == aging::NoPoint::WithoutStage);
            }
        }
    }
}

fn drifting_stations(conn: &Connection, path: &Path) -> Result<std::collections::HashSet<i64>, StoreError> {
    let mut st = conn.prepare("SELECT station_id, cell FROM yield_cell").map_err(|e| se(path, e))?;
    let mut rows = st.query([]).map_err(|e| se(path, e))?;
    let mut out = std::collections::HashSet::new();
    while let Some(r) = rows.next().map_err(|e| se(path, e))? {
        let id: i64 = r.get(0).map_err(|e| se(path, e))?;
        let blob: Vec<u8> = r.get(1).map_err(|e| se(path, e))?;
        let c = Cell::from_blob(&blob).ok_or_else(|| se(path, "a yield summary this rchold cannot read"))?;
        if c.drifting > 0 {
            out.insert(id);
        }
    }
    Ok(out)
}

fn read_summaries(conn: &Connection, path: &Path) -> Result<Summaries, StoreError> {
    Ok(Summaries {
        cells: query_cells(conn, path, &Filter::default())?.into_iter().collect(),
        units: query_units(conn, path, None, None)?.into_iter().collect(),
    })
}

/// The yield cells matching `filter` (see [`Store::cells`]).
fn query_cells(conn: &Connection, path: &Path, filter: &Filter) -> Result<Vec<(CellAt, Cell)>, StoreError> {
    let e = |e: rusqlite::Error| se(path, e);
    let mut sql = String::from("SELECT station_id, batch_id, day, setup_id, clock_hz, cell FROM yield_cell WHERE 1");
    let mut args: Vec<rusqlite::types::Value> = Vec::new();
    if let Some(s) = &filter.station {
        sql.push_str(" AND station_id = (SELECT id FROM station WHERE name = ?)");
        args.push(s.clone().into());
    }
    if let Some(b) = &filter.batch {
        sql.push_str(" AND batch_id = (SELECT id FROM batch WHERE name = ?)");
        args.push(b.clone().into());
    }
    if let Some(t) = filter.from_ms {
        sql.push_str(" AND day >= ?");
        args.push(summary::day_of(t).into());
    }
    if let Some(t) = filter.to_ms {
        sql.push_str(" AND day < ?");
        args.push(summary::day_of(t).into());
    }
    let mut st = conn.prepare(&sql).map_err(e)?;
    let mut rows = st.query(rusqlite::params_from_iter(args)).map_err(e)?;
    let mut out = Vec::new();
    while let Some(r) = rows.next().map_err(e)? {
        let at = CellAt {
            station_id: r.get(0).map_err(e)?,
            batch_id: r.get(1).map_err(e)?,
            day: r.get(2).map_err(e)?,
            setup_id: r.get(3).map_err(e)?,
            clock_hz: r.get(4).map_err(e)?,
        };
        let blob: Vec<u8> = r.get(5).map_err(e)?;
        out.push((at, Cell::from_blob(&blob).ok_or_else(|| se(path, "a yield summary this rchold cannot read"))?));
    }
    Ok(out)
}

/// The unit sums of `station` and `unit` (see [`Store::unit_fits`]).
fn query_units(
    conn: &Connection,
    path: &Path,
    station: Option<&str>,
    unit: Option<u32>,
) -> Result<Vec<(UnitKey, UnitSums)>, StoreError> {
    let e = |e: rusqlite::Error| se(path, e);
    let mut sql = String::from("SELECT station_id, unit_id, setup_id, sums FROM unit_fit WHERE 1");
    let mut args: Vec<rusqlite::types::Value> = Vec::new();
    if let Some(s) = station {
        sql.push_str(" AND station_id = (SELECT id FROM station WHERE name = ?)");
        args.push(s.to_owned().into());
    }
    if let Some(u) = unit {
        sql.push_str(" AND unit_id = ?");
        args.push(i64::from(u).into());
    }
    let mut st = conn.prepare(&sql).map_err(e)?;
    let mut rows = st.query(rusqlite::params_from_iter(args)).map_err(e)?;
    let mut units = Vec::new();
    while let Some(r) = rows.next().map_err(e)? {
        let key = (r.get(0).map_err(e)?, r.get(1).map_err(e)?, r.get(2).map_err(e)?);
        let blob: Vec<u8> = r.get(3).map_err(e)?;
        units
            .push((key, UnitSums::from_blob(&blob).ok_or_else(|| se(path, "a unit summary this rchold cannot read"))?));
    }
    Ok(units)
}

/// Every row's summaries, from scratch (optionally of one station).
fn recount_where(conn: &Connection, path: &Path, station: Option<i64>) -> Result<Summaries, StoreError> {
    let setups = SetupInfo::load(conn, path)?;
    // Which stations drift is known only after every row: two passes.
    let mut cells_only = Summaries::default();
    let none = std::collections::BTreeSet::new();
    Store::scan(conn, path, &Filter::default(), station, |x| {
        cells_only.add(x.station_id, x.batch_id, x.measured_ms, &x.record, x.setup, &setups, &none);
        true
    })?;
    let drifting: std::collections::BTreeSet<i64> =
        cells_only.cells.iter().filter(|(_, c)| c.drifting > 0).map(|(k, _)| k.station_id).collect();
    let mut out = Summaries { cells: cells_only.cells, ..Summaries::default() };
    Store::scan(conn, path, &Filter::default(), station, |x| {
        let info = setups.get(&x.setup);
        if info.is_some_and(|i| i.field) || drifting.contains(&x.station_id) {
            out.add_aging(x.station_id, x.measured_ms, &x.record, x.setup, info.and_then(|i| i.stage.as_ref()));
        }
        true
    })?;
    Ok(out)
}

fn recount(conn: &Connection, path: &Path) -> Result<Summaries, StoreError> {
    recount_where(conn, path, None)
}

/// Adds `sums` to the stored summaries (read, merge, write back), or with
/// `replace` writes them over whatever is stored under the same keys.
fn write_summaries(conn: &Connection, path: &Path, sums: &Summaries, replace: bool) -> Result<(), StoreError> {
    let e = |e: rusqlite::Error| se(path, e);
    let bad = |what: &str| se(path, format!("a {what} summary this rchold cannot read"));
    {
        let mut get = conn
            .prepare_cached(
                "SELECT cell FROM yield_cell WHERE station_id = ?1 AND batch_id = ?2 AND day = ?3 AND setup_id = ?4 \
                 AND clock_hz = ?5",
            )
            .map_err(e)?;
        let mut put =
            conn.prepare_cached("INSERT OR REPLACE INTO yield_cell VALUES (?1, ?2, ?3, ?4, ?5, ?6)").map_err(e)?;
        for (k, c) in &sums.cells {
            let key = params![k.station_id, k.batch_id, k.day, k.setup_id, k.clock_hz];
            let mut c = c.clone();
            if !replace {
                let old: Option<Vec<u8>> = get.query_row(key, |r| r.get(0)).optional().map_err(e)?;
                if let Some(old) = old {
                    let mut o = Cell::from_blob(&old).ok_or_else(|| bad("yield"))?;
                    o.merge(&c);
                    c = o;
                }
            }
            put.execute(params![k.station_id, k.batch_id, k.day, k.setup_id, k.clock_hz, c.to_blob()]).map_err(e)?;
        }
    }
    let mut get = conn
        .prepare_cached("SELECT sums FROM unit_fit WHERE station_id = ?1 AND unit_id = ?2 AND setup_id = ?3")
        .map_err(e)?;
    let mut put = conn.prepare_cached("INSERT OR REPLACE INTO unit_fit VALUES (?1, ?2, ?3, ?4)").map_err(e)?;
    for (&(station, unit, setup), u) in &sums.units {
        let mut u = *u;
        if !replace {
            let old: Option<Vec<u8>> =
                get.query_row(params![station, unit, setup], |r| r.get(0)).optional().map_err(e)?;
            if let Some(old) = old {
                let mut o = UnitSums::from_blob(&old).ok_or_else(|| bad("unit"))?;
                o.merge(&u);
                u = o;
            }
        }
        put.execute(params![station, unit, setup, u.to_blob()]).map_err(e)?;
    }
    Ok(())
}

/// A station, by name or by its id in the store.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Station<'a> {
    /// By id ([`Batch::station`]).
    Id(i64),
    /// By name, stored if new.
    Name(&'a str),
}

/// The id of a name in table `table` (`station` or `batch`), stored if new;
/// `cache` holds the ones looked up before.
fn name_id(
    conn: &Connection,
    path: &Path,
    cache: &mut HashMap<String, i64>,
    table: &str,
    name: &str,
) -> Result<i64, StoreError> {
    if let Some(&id) = cache.get(name) {
        return Ok(id);
    }
    let e = |e: rusqlite::Error| se(path, e);
    conn.execute(&format!("INSERT OR IGNORE INTO {table} (name) VALUES (?1)"), [name]).map_err(e)?;
    let id = conn.query_row(&format!("SELECT id FROM {table} WHERE name = ?1"), [name], |r| r.get(0)).map_err(e)?;
    cache.insert(name.to_owned(), id);
    Ok(id)
}

/// One write transaction. Dropped without [`Batch::commit`], it rolls back;
/// the summaries of its records are kept in memory and written with it.
pub struct Batch<'c> {
    tx: rusqlite::Transaction<'c>,
    path: PathBuf,
    stations: HashMap<String, i64>,
    batches: HashMap<String, i64>,
    setups: HashMap<i64, SetupInfo>,
    drifting: std::collections::BTreeSet<i64>,
    /// Stations that drift since this batch: their aging sums are recounted on commit.
    newly_drifting: std::collections::BTreeSet<i64>,
    pending: Summaries,
    stored: u64,
    duplicates: u64,
    conflicts: u64,
    refused: u64,
}

impl std::fmt::Debug for Batch<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Batch").field("path", &self.path).field("stored", &self.stored).finish_non_exhaustive()
    }
}

impl Batch<'_> {
    fn err(&self, e: impl std::fmt::Display) -> StoreError {
        StoreError { path: self.path.clone(), message: e.to_string() }
    }

    /// The id of a station, stored if new.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn station(&mut self, name: &str) -> Result<i64, StoreError> {
        name_id(&self.tx, &self.path, &mut self.stations, "station", name)
    }

    /// Starts a log-file source inside this transaction: it exists only if
    /// the transaction commits. Its digest is given when the file has been
    /// read ([`Batch::end_log`]).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn begin_log(&mut self, name: &str, started_ms: i64) -> Result<i64, StoreError> {
        self.tx
            .execute("INSERT INTO source (kind, name, started_ms) VALUES ('log', ?1, ?2)", params![name, started_ms])
            .map_err(|e| self.err(e))?;
        Ok(self.tx.last_insert_rowid())
    }

    /// Gives log source `source_id` the file's SHA-256 (hex) and length.
    /// `Some(id)` when a file with this digest is stored already as source
    /// `id` (checked under the write lock, so two writers cannot both add it):
    /// then drop this batch, and nothing of the file is stored.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn end_log(&mut self, source_id: i64, digest: &str, bytes: u64) -> Result<Option<i64>, StoreError> {
        let known: Option<i64> = self
            .tx
            .query_row("SELECT id FROM source WHERE digest = ?1 AND id != ?2", params![digest, source_id], |r| r.get(0))
            .optional()
            .map_err(|e| self.err(e))?;
        if known.is_some() {
            return Ok(known);
        }
        self.tx
            .execute(
                "UPDATE source SET digest = ?1, bytes = ?2 WHERE id = ?3",
                params![digest, u64_sql(bytes), source_id],
            )
            .map_err(|e| self.err(e))?;
        Ok(None)
    }

    /// Stores one measurement; `false` if it was stored already (its key and
    /// [`Content`]); a stored key with other content stores it as a retest.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn insert(
        &mut self,
        station_id: i64,
        batch: &str,
        measured_ms: i64,
        r: &Record,
        setup_id: Option<i64>,
        source_id: i64,
    ) -> Result<bool, StoreError> {
        let before = self.stored;
        self.insert_all(std::iter::once((Station::Id(station_id), batch, measured_ms, r)), setup_id, source_id)?;
        Ok(self.stored > before)
    }

    /// Stores measurements `(station, batch, measured_ms, record)` measured
    /// against `setup_id`, through one prepared statement (an ingest's fast
    /// path); a record stored already (key and [`Content`]) counts as a
    /// duplicate, one whose key is stored with other content is stored as a
    /// retest (and counted in `conflicts`).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn insert_all<'r>(
        &mut self,
        rows: impl IntoIterator<Item = (Station<'r>, &'r str, i64, &'r Record)>,
        setup_id: Option<i64>,
        source_id: i64,
    ) -> Result<(), StoreError> {
        let Batch {
            tx,
            path,
            stations,
            batches,
            setups,
            drifting,
            newly_drifting,
            pending,
            stored,
            duplicates,
            conflicts,
            ..
        } = self;
        let err = |e: rusqlite::Error| StoreError { path: path.clone(), message: e.to_string() };
        let mut st = tx.prepare_cached(INSERT).map_err(err)?;
        let setup = setup_id.unwrap_or(0);
        let setup_clock = setups.get(&setup).map(|i| i.clock_hz);
        let mut last_batch: Option<(&str, i64)> = None;
        let mut last_station: Option<(&str, i64)> = None;
        for (station, batch, measured_ms, r) in rows {
            let station_id = match (station, last_station) {
                (Station::Id(id), _) => id,
                (Station::Name(n), Some((m, id))) if n == m => id,
                (Station::Name(n), _) => {
                    let id = name_id(tx, path, stations, "station", n)?;
                    last_station = Some((n, id));
                    id
                }
            };
            let batch_id = match last_batch {
                Some((b, id)) if b == batch => id,
                _ => {
                    let id = name_id(tx, path, batches, "batch", batch)?;
                    last_batch = Some((batch, id));
                    id
                }
            };
            // Every path checks its records before this; nothing unchecked is stored.
            crate::data::validate::record(r).map_err(|e| se(path, format!("unit {} seq {}: {e}", r.unit_id, r.seq)))?;
            // The clock is stored only where it is not the setup's.
            let clock = if setup_clock == Some(r.clock_hz) { None } else { Some(r.clock_hz) };
            let (press, on, hold, codes) =
                (u64_sql(r.press_ticks), r.on_ticks.map(u64_sql), r.hold_ticks.map(u64_sql), pack_codes(r));
            let mut put = |retest: i64| {
                st.execute(params![
                    station_id,
                    r.unit_id,
                    r.boot,
                    r.seq,
                    measured_ms,
                    batch_id,
                    setup,
                    source_id,
                    clock,
                    press,
                    on,
                    hold,
                    r.temp_mdeg_c,
                    r.c_deviation_ppm,
                    codes,
                    retest,
                ])
                .map(|n| n == 1)
                .map_err(err)
            };
            let mut fresh = put(0)?;
            if !fresh {
                // The key is stored: the same measurement again, or another one (a retest)?
                let this = content(r);
                let mut versions = tx
                    .prepare_cached(
                        "SELECT coalesce(r.clock_hz, u.clock_hz), r.press_ticks, r.on_ticks, r.hold_ticks, \
                         r.temp_mdeg_c, r.c_dev_ppm, r.codes, r.retest FROM reading r \
                         LEFT JOIN setup u ON u.id = r.setup_id \
                         WHERE r.station_id = ?1 AND r.unit_id = ?2 AND r.boot = ?3 AND r.seq = ?4",
                    )
                    .map_err(err)?;
                let mut rows = versions.query(params![station_id, r.unit_id, r.boot, r.seq]).map_err(err)?;
                let (mut same, mut last) = (false, 0i64);
                while let Some(x) = rows.next().map_err(err)? {
                    let stored_as: Content = (
                        x.get(0).map_err(err)?,
                        x.get(1).map_err(err)?,
                        x.get(2).map_err(err)?,
                        x.get(3).map_err(err)?,
                        x.get(4).map_err(err)?,
                        x.get(5).map_err(err)?,
                        x.get(6).map_err(err)?,
                    );
                    same |= stored_as == this;
                    last = last.max(x.get(7).map_err(err)?);
                }
                if same {
                    *duplicates += 1;
                } else {
                    *conflicts += 1;
                    fresh = put(last + 1)?;
                }
            }
            if fresh {
                *stored += 1;
                if r.drift != DriftState::Settling && !drifting.contains(&station_id) {
                    // From now on every record of the station belongs in aging.
                    drifting.insert(station_id);
                    newly_drifting.insert(station_id);
                }
                pending.add(station_id, batch_id, measured_ms, r, setup, setups, drifting);
            }
        }
        Ok(())
    }

    /// Writes the sequence counts of `units` (totals so far) for stream
    /// `source_id`, and the source's totals over all its units.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn note_units<'u>(
        &mut self,
        source_id: i64,
        units: impl Iterator<Item = (&'u u32, &'u UnitSeq)>,
    ) -> Result<(), StoreError> {
        let path = self.path.clone();
        let e = |e: rusqlite::Error| StoreError { path: path.clone(), message: e.to_string() };
        let mut any = false;
        {
            let mut st = self
                .tx
                .prepare_cached(
                    "INSERT INTO source_unit (source_id, unit_id, first_seq, last_seq, received, missing, back, boot, \
                     restarts) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9) ON CONFLICT (source_id, unit_id) \
                     DO UPDATE SET last_seq = excluded.last_seq, received = excluded.received, \
                     missing = excluded.missing, back = excluded.back, boot = excluded.boot, \
                     restarts = excluded.restarts",
                )
                .map_err(e)?;
            for (unit, u) in units {
                any = true;
                st.execute(params![
                    source_id,
                    i64::from(*unit),
                    i64::from(u.first_seq),
                    i64::from(u.last_seq),
                    u64_sql(u.received),
                    u64_sql(u.missing),
                    u64_sql(u.back),
                    i64::from(u.boot),
                    u64_sql(u.restarts)
                ])
                .map_err(e)?;
            }
        }
        if any {
            self.tx
                .execute(
                    "UPDATE source SET (seq_missing, seq_back, gap_units, restarts) = (SELECT \
                     coalesce(sum(missing), 0), coalesce(sum(back), 0), count(*) FILTER (WHERE missing > 0), \
                     coalesce(sum(restarts), 0) FROM source_unit WHERE source_id = ?1) WHERE id = ?1",
                    [source_id],
                )
                .map_err(e)?;
        }
        Ok(())
    }

    /// Counts a record refused by the record check (written to the source on commit).
    pub fn refuse(&mut self) {
        self.refused += 1;
    }

    /// Writes the summaries, adds this batch's counts (and `bad_frames`,
    /// `bytes`) to the source and commits.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn commit(mut self, source_id: i64, bad_frames: u64, bytes: u64) -> Result<Written, StoreError> {
        let path = self.path.clone();
        let e = |e: rusqlite::Error| StoreError { path: path.clone(), message: e.to_string() };
        // A station that began to drift in this batch: its aging sums from all its rows, afresh.
        for &station in &self.newly_drifting {
            self.pending.units.retain(|k, _| k.0 != station);
            self.tx.execute("DELETE FROM unit_fit WHERE station_id = ?1", [station]).map_err(e)?;
            let fresh = recount_where(&self.tx, &path, Some(station))?;
            let aging_only = Summaries { cells: BTreeMap::new(), units: fresh.units };
            write_summaries(&self.tx, &path, &aging_only, true)?;
        }
        write_summaries(&self.tx, &path, &self.pending, false)?;
        self.tx
            .execute(
                "UPDATE source SET records = records + ?1, duplicates = duplicates + ?2, \
                 bad_frames = bad_frames + ?3, bytes = bytes + ?4, refused = refused + ?6, \
                 conflicts = conflicts + ?7 WHERE id = ?5",
                params![
                    u64_sql(self.stored),
                    u64_sql(self.duplicates),
                    u64_sql(bad_frames),
                    u64_sql(bytes),
                    source_id,
                    u64_sql(self.refused),
                    u64_sql(self.conflicts)
                ],
            )
            .map_err(e)?;
        let w = Written { source_id, stored: self.stored, duplicates: self.duplicates, conflicts: self.conflicts };
        self.tx.commit().map_err(e)?;
        Ok(w)
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use hold_firmware::drift::DriftState;
    use hold_firmware::{Hint, Verdict};

    pub(crate) fn record(unit_id: u32, seq: u32) -> Record {
        Record {
            seq,
            unit_id,
            boot: 0,
            press_ticks: 5_000,
            on_ticks: Some(3),
            hold_ticks: Some(70_000),
            clock_hz: 1_000_000,
            temp_mdeg_c: Some(23_500),
            verdict: Verdict::WithinWindow,
            hint: Hint::None,
            drift: DriftState::Steady,
            c_deviation_ppm: Some(-1_200),
        }
    }

    #[test]
    fn records_round_trip_and_duplicates_are_counted() -> Result<(), StoreError> {
        let dir = tempfile::tempdir().map_err(|e| StoreError { path: PathBuf::new(), message: e.to_string() })?;
        let mut s = Store::open(&dir.path().join("a.db"))?;
        assert_eq!(s.schema_version()?, SCHEMA_VERSION);
        let src = s.begin_stream("test", 0)?;
        let mut b = s.batch()?;
        let st = b.station("bench-1")?;
        assert!(b.insert(st, "b1", 1_000, &record(7, 1), None, src)?);
        assert!(b.insert(st, "b1", 2_000, &record(7, 2), None, src)?);
        assert!(!b.insert(st, "b1", 3_000, &record(7, 2), None, src)?);
        let w = b.commit(src, 1, 100)?;
        assert_eq!((w.stored, w.duplicates), (2, 1));
        let mut got = Vec::new();
        s.for_each(&Filter::default(), |r| got.push(r))?;
        assert_eq!(got.len(), 2);
        assert_eq!(got.first().map(|r| r.record), Some(record(7, 1)));
        assert_eq!(
            s.sources()?.first().map(|x| (x.records, x.duplicates, x.bad_frames, x.bytes)),
            Some((2, 1, 1, 100))
        );
        Ok(())
    }

    #[test]
    fn an_old_database_is_migrated_and_keeps_its_rows() -> Result<(), StoreError> {
        let dir = tempfile::tempdir().map_err(|e| StoreError { path: PathBuf::new(), message: e.to_string() })?;
        let path = dir.path().join("old.db");
        let fixture = crate::report::yields::tests::example_setup();
        let field = Setup { name: "field".into(), hold_min_ticks: 0, ..fixture.clone() };
        // Records as the earlier schemas stored them: two setups and none, two batches,
        // a field unit that drifts, a reject, a record on another clock.
        let mut written = Vec::new();
        for i in 0..60u32 {
            let mut r = record(i % 7, i);
            r.hold_ticks = Some(60_000 + u64::from(i) * 400);
            r.c_deviation_ppm = if i % 5 == 0 { None } else { Some(-(i as i32) * 100) };
            if i % 11 == 0 {
                r.verdict = hold_firmware::Verdict::Long;
                r.hint = Hint::WrongPart;
            }
            if i % 13 == 0 {
                r.clock_hz = 2_000_000;
            }
            let setup = match i % 3 {
                0 => None,
                1 => Some(1i64),
                _ => Some(2),
            };
            if setup == Some(2) {
                r.drift = if i > 30 { DriftState::Drifting } else { DriftState::Settling };
            } else {
                r.drift = DriftState::Settling;
            }
            written.push((
                if setup == Some(2) { 2i64 } else { 1 },
                format!("b{}", i % 2),
                1_000 * i64::from(i),
                r,
                setup,
            ));
        }
        {
            // A version-3 database (the first release wrote version 1; 2 and 3 only added an index and codes).
            let conn =
                Connection::open(&path).map_err(|e| StoreError { path: path.clone(), message: e.to_string() })?;
            let mut s = Store { conn, path: path.clone() };
            assert_eq!(s.migrate_to(3)?, 3);
            let e = |e: rusqlite::Error| StoreError { path: path.clone(), message: e.to_string() };
            for (i, su) in [&fixture, &field].into_iter().enumerate() {
                s.conn
                    .execute(
                        "INSERT INTO setup (id, name, digest, stage_toml, clock_hz, guard_ppm, poll_ns, hold_min_ticks, \
                         hold_max_ticks) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                        params![
                            i as i64 + 1,
                            su.name,
                            su.digest(),
                            su.stage_toml,
                            su.clock_hz,
                            su.guard_ppm,
                            su.poll_ns,
                            u64_sql(su.hold_min_ticks),
                            u64_sql(su.hold_max_ticks)
                        ],
                    )
                    .map_err(e)?;
            }
            s.conn
                .execute_batch(
                    "INSERT INTO station VALUES (1, 'bench'), (2, 'fleet');
                     INSERT INTO source (id, kind, name, started_ms) VALUES (1, 'stream', 'old', 0);",
                )
                .map_err(e)?;
            for (st, b, ms, r, setup) in &written {
                s.conn
                    .execute(
                        "INSERT INTO measurement (station_id, unit_id, seq, batch, measured_ms, clock_hz, press_ticks, \
                         on_ticks, hold_ticks, temp_mdeg_c, verdict, hint, drift, c_dev_ppm, setup_id, source_id) \
                         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, 1)",
                        params![
                            st,
                            r.unit_id,
                            r.seq,
                            b,
                            ms,
                            r.clock_hz,
                            u64_sql(r.press_ticks),
                            r.on_ticks.map(u64_sql),
                            r.hold_ticks.map(u64_sql),
                            r.temp_mdeg_c,
                            codes::verdict_code(r.verdict),
                            codes::hint_code(r.hint),
                            codes::drift_code(r.drift),
                            r.c_deviation_ppm,
                            setup
                        ],
                    )
                    .map_err(e)?;
            }
        }
        let s = Store::open(&path)?;
        assert_eq!(s.schema_version()?, SCHEMA_VERSION);
        assert_eq!(s.count()?, written.len() as u64);
        // Every record reads back as it was written.
        let mut got = Vec::new();
        s.for_each(&Filter::default(), |x| got.push((x.station_id, x.batch, x.measured_ms, x.record, x.setup_id)))?;
        let mut want = written.clone();
        want.sort_by_key(|w| (w.0, w.3.unit_id, w.3.seq));
        assert_eq!(got, want);
        // The view keeps the earlier layout for SQL users.
        let view: i64 = s
            .conn
            .query_row(
                "SELECT count(*) FROM measurement WHERE verdict = ?1 AND hint = ?2 AND clock_hz > 0 AND batch LIKE 'b%'",
                params![codes::verdict_code(hold_firmware::Verdict::Long), codes::hint_code(Hint::WrongPart)],
                |r| r.get(0),
            )
            .map_err(|e| s.err(e))?;
        assert_eq!(view, written.iter().filter(|w| w.3.verdict == hold_firmware::Verdict::Long).count() as i64);
        // The summaries were counted from the carried rows.
        let sums = s.summaries()?;
        assert_eq!(sums, s.recount()?);
        assert_eq!(sums.cells.values().map(Cell::total).sum::<u64>(), written.len() as u64);
        assert!(!sums.units.is_empty());
        // Every code has its name, in code order.
        for (table, names) in [
            ("verdict", codes::VERDICTS.iter().map(|v| v.name()).collect::<Vec<_>>()),
            ("hint", codes::HINTS.iter().map(|h| h.name()).collect()),
        ] {
            let mut q = s.conn.prepare(&format!("SELECT name FROM {table} ORDER BY code")).map_err(|e| s.err(e))?;
            let got: Vec<String> = q.query_map([], |r| r.get(0)).and_then(Iterator::collect).map_err(|e| s.err(e))?;
            assert_eq!(got, names, "{table}");
        }
        Ok(())
    }

    /// Several connections creating one new store at the same moment all
    /// get it. SQLite can refuse the switch to WAL at once, without running
    /// the busy handler, to a connection that loses that race; without the retry
    /// in [`into_wal`] this test failed within its first rounds with
    /// "database is locked".
    #[test]
    fn connections_creating_one_store_at_once_all_open_it() -> Result<(), StoreError> {
        let dir = tempfile::tempdir().map_err(|e| StoreError { path: PathBuf::new(), message: e.to_string() })?;
        for round in 0..20 {
            let path = dir.path().join(format!("race-{round}.db"));
            let gate = std::sync::Barrier::new(6);
            let versions: Vec<Result<u32, StoreError>> = std::thread::scope(|s| {
                let openers: Vec<_> = (0..6)
                    .map(|_| {
                        s.spawn(|| {
                            gate.wait();
                            Store::open(&path).and_then(|st| st.schema_version())
                        })
                    })
                    .collect();
                openers
                    .into_iter()
                    .map(|h| {
                        h.join().unwrap_or_else(|_| Err(StoreError { path: path.clone(), message: "panicked".into() }))
                    })
                    .collect()
            });
            for v in versions {
                assert_eq!(v?, SCHEMA_VERSION, "round {round}");
            }
        }
        Ok(())
    }

    #[test]
    fn a_newer_database_is_refused() -> Result<(), StoreError> {
        let dir = tempfile::tempdir().map_err(|e| StoreError { path: PathBuf::new(), message: e.to_string() })?;
        let path = dir.path().join("new.db");
        {
            let conn =
                Connection::open(&path).map_err(|e| StoreError { path: path.clone(), message: e.to_string() })?;
            conn.pragma_update(None, "user_version", 99)
                .map_err(|e| StoreError { path: path.clone(), message: e.to_string() })?;
        }
        let before = std::fs::read(&path).map_err(|e| se(&path, e))?;
        let e = Store::open(&path).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.contains("newer rchold") && e.contains("new.db") && e.contains("left unchanged"), "{e}");
        let e = Store::open_existing(&path).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.contains("newer rchold"), "{e}");
        // Not switched to WAL, not written at all.
        assert_eq!(std::fs::read(&path).map_err(|e| se(&path, e))?, before);
        assert!(!dir.path().join("new.db-wal").exists());
        Ok(())
    }

    /// Another program's SQLite file: once `sources` added seven tables to it
    /// and switched it to WAL. Now every way in refuses it and leaves it
    /// byte for byte as it was; an rchold store is read by the reports
    /// without a byte of it changing.
    #[test]
    fn foreign_files_are_refused_unchanged_and_reports_write_nothing() -> Result<(), StoreError> {
        let dir = tempfile::tempdir().map_err(|e| se(Path::new("tempdir"), e))?;
        let path = dir.path().join("inventory.db");
        {
            let conn = Connection::open(&path).map_err(|e| se(&path, e))?;
            conn.execute_batch(
                "CREATE TABLE part (id INTEGER PRIMARY KEY, name TEXT); INSERT INTO part VALUES (1, 'R7');",
            )
            .map_err(|e| se(&path, e))?;
        }
        let before = std::fs::read(&path).map_err(|e| se(&path, e))?;
        for e in [Store::open(&path).err(), Store::open_existing(&path).err()] {
            let m = e.map(|e| e.to_string()).unwrap_or_default();
            assert!(m.contains("not an rchold store") && m.contains("left unchanged"), "{m}");
        }
        assert_eq!(std::fs::read(&path).map_err(|e| se(&path, e))?, before);
        assert!(!dir.path().join("inventory.db-wal").exists());
        // Not a database at all.
        let text = dir.path().join("notes.db");
        std::fs::write(&text, "not a database, just notes\n".repeat(200)).map_err(|e| se(&text, e))?;
        let m = Store::open_existing(&text).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(m.contains("not a database rchold can use"), "{m}");
        // A store of ours, read by a report: unchanged.
        let ours = dir.path().join("ours.db");
        {
            let mut s = Store::open(&ours)?;
            let mut b = s.batch()?;
            let src = b.begin_log("x", 0)?;
            let st = b.station("bay-1")?;
            b.insert(st, "", 0, &record(1, 1), None, src)?;
            b.commit(src, 0, 0)?;
        }
        let before = std::fs::read(&ours).map_err(|e| se(&ours, e))?;
        {
            let s = Store::open_existing(&ours)?;
            assert_eq!((s.count()?, s.sources()?.len()), (1, 1));
        }
        assert_eq!(std::fs::read(&ours).map_err(|e| se(&ours, e))?, before);
        assert!(file_uri(Path::new("/a b/c?d#e%.db"), true).starts_with("file:/a%20b/c%3Fd%23e%25.db?immutable=1"));
        Ok(())
    }

    /// One step of a store's life in [`summaries_equal_a_recount`].
    #[derive(Debug, Clone)]
    enum Step {
        /// A log ingested in one transaction.
        Ingest(Vec<(u8, u8, Record, u8, i64)>),
        /// A stream of frames through `listen`.
        Listen(Vec<(u8, u8, Record, u8, i64)>),
        /// An ingest killed before its commit (the transaction rolls back).
        Killed(Vec<(u8, u8, Record, u8, i64)>),
    }

    fn any_record() -> impl Strategy<Value = (u8, u8, Record, u8, i64)> {
        use hold_firmware::Verdict;
        (
            (0u8..3, 0u8..3, 0u32..12, 0u32..6, 0usize..codes::VERDICTS.len(), 0usize..codes::HINTS.len()),
            (0usize..codes::DRIFTS.len(), prop::option::of(1u64..200_000), prop::option::of(-300_000i32..300_000)),
            (0u8..3, 0i64..(40 * 86_400_000), prop::bool::ANY),
        )
            .prop_map(|((st, b, unit, seq, v, h), (d, hold, dev), (setup, ms, fast))| {
                let mut r = record(unit, seq);
                r.verdict = codes::VERDICTS.get(v).copied().unwrap_or(Verdict::WithinWindow);
                r.hint = codes::HINTS.get(h).copied().unwrap_or(Hint::None);
                r.drift = codes::DRIFTS.get(d).copied().unwrap_or(DriftState::Settling);
                r.hold_ticks = hold;
                r.c_deviation_ppm = dev;
                if fast {
                    r.clock_hz = 4_000_000;
                }
                // Only records the record check accepts (the store refuses the others).
                if r.verdict.needs_hold() && r.hold_ticks.is_none() {
                    r.hold_ticks = Some(1_000);
                }
                if matches!(r.verdict, Verdict::NoResponse | Verdict::StuckActive | Verdict::NotIdle) {
                    r.hold_ticks = None;
                }
                if matches!(r.verdict, Verdict::NoResponse | Verdict::NotIdle) {
                    r.on_ticks = None;
                }
                if r.verdict.passes() {
                    r.hint = Hint::None;
                }
                (st, b, r, setup, 1_750_000_000_000 + ms)
            })
    }

    fn any_step() -> impl Strategy<Value = Step> {
        let recs = || prop::collection::vec(any_record(), 0..40);
        prop_oneof![recs().prop_map(Step::Ingest), recs().prop_map(Step::Listen), recs().prop_map(Step::Killed)]
    }

    fn put(
        b: &mut Batch<'_>,
        recs: &[(u8, u8, Record, u8, i64)],
        setups: &[Option<i64>; 3],
        src: i64,
    ) -> Result<(), StoreError> {
        for (st, batch, r, setup, ms) in recs {
            let station = b.station(&format!("st-{st}"))?;
            let setup = setups.get(usize::from(*setup)).copied().flatten();
            b.insert(station, &format!("b{batch}"), *ms, r, setup, src)?;
        }
        Ok(())
    }

    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig { cases: 48, ..ProptestConfig::default() })]
        /// The summaries kept at ingest equal a full recount of the rows after
        /// any mix of ingests, listens and killed ingests (duplicates, stations
        /// that begin to drift, field and fixture setups, two clocks), and the
        /// reports from the summaries equal the reports from the rows.
        #[test]
        fn summaries_equal_a_recount(steps in prop::collection::vec(any_step(), 1..8)) {
            let dir = tempfile::tempdir().map_err(|e| TestCaseError::fail(e.to_string()))?;
            let path = dir.path().join("p.db");
            let run = || -> Result<(Summaries, Summaries, String, String, String, String), StoreError> {
                let mut s = Store::open(&path)?;
                let fixture = crate::report::yields::tests::example_setup();
                let field = Setup { name: "field".into(), hold_min_ticks: 0, ..fixture.clone() };
                let setups = [None, Some(s.setup_id(&fixture)?), Some(s.setup_id(&field)?)];
                for (i, step) in steps.iter().enumerate() {
                    match step {
                        Step::Ingest(recs) => {
                            let mut b = s.batch()?;
                            let src = b.begin_log(&format!("log-{i}"), 0)?;
                            put(&mut b, recs, &setups, src)?;
                            b.end_log(src, &format!("digest-{i}"), 0)?;
                            b.commit(src, 0, 0)?;
                        }
                        Step::Listen(recs) => {
                            // Framed as the firmware sends them, through `listen` itself.
                            use crate::data::collect::{listen, Labels, TimeRule};
                            let (st, setup) = recs.first().map_or((0, 0), |r| (r.0, r.3));
                            let bytes: Vec<u8> = recs
                                .iter()
                                .flat_map(|r| hold_firmware::record::encode(&r.2).map(|f| f.to_vec()).unwrap_or_default())
                                .collect();
                            let labels = Labels {
                                station: format!("st-{st}"),
                                batch: format!("b{i}"),
                                setup_id: setups.get(usize::from(setup)).copied().flatten(),
                                time: TimeRule::Sequence { start_ms: 1_750_000_000_000, period_ms: 28_800_000 },
                            };
                            listen(&mut s, "stream", crate::data::collect::Input::once(std::io::Cursor::new(bytes.clone())), &labels, |_| {}, || false)
                                .map_err(|e| StoreError { path: path.clone(), message: e.to_string() })?;
                        }
                        Step::Killed(recs) => {
                            let mut b = s.batch()?;
                            put(&mut b, recs, &setups, 0)?;
                            drop(b);
                        }
                    }
                }
                let (kept, recounted) = (s.summaries()?, s.recount()?);
                let json = |v: &dyn erased::Json| v.json();
                let from_rows = {
                    let mut t = crate::report::yields::Tally::new(&s.setups()?, false, None);
                    crate::report::files::each_record(&s, &Filter::default(), |st, x, role| {
                        if role.yields {
                            t.add(st, &x.batch, x.measured_ms, &x.record, x.setup_id);
                        }
                    })
                    .map_err(|e| s.err(e))?;
                    json(&t.finish().map_err(|e| s.err(e))?)
                };
                let from_sums = json(
                    &crate::report::files::yield_from_summaries(&s, &Filter::default(), false, None).map_err(|e| s.err(e))?,
                );
                let aging_rows = {
                    let mut t = crate::report::aging::FleetTally::new(&s.setups()?);
                    crate::report::files::each_record(&s, &Filter::default(), |st, x, role| {
                        if role.aging {
                            t.add(st, x.measured_ms, &x.record, x.setup_id);
                        }
                    })
                    .map_err(|e| s.err(e))?;
                    json(&t.finish(0.8, 12))
                };
                let aging_sums = json(
                    &crate::report::files::aging_from_summaries(&s, None, None, false, 0.8, 12).map_err(|e| s.err(e))?,
                );
                Ok((kept, recounted, from_rows, from_sums, aging_rows, aging_sums))
            };
            let (kept, recounted, from_rows, from_sums, aging_rows, aging_sums) =
                run().map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert_eq!(kept, recounted);
            prop_assert_eq!(from_rows, from_sums);
            prop_assert_eq!(aging_rows, aging_sums);
        }
    }

    mod erased {
        /// Serialises any report to JSON for comparing two of them.
        pub trait Json {
            fn json(&self) -> String;
        }
        impl<T: serde::Serialize> Json for T {
            fn json(&self) -> String {
                serde_json::to_string(self).unwrap_or_default()
            }
        }
    }
}
