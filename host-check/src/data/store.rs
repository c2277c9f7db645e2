//! The measurement store: one SQLite file (WAL mode), its schema versioned in
//! `PRAGMA user_version` and migrated forward on open.
//!
//! Tables (schema 2):
//! - `setup` — what a station measured against: the stage file's text and the
//!   firmware window in ticks (`hold_min_ticks`, `hold_max_ticks` at `clock_hz`).
//! - `source` — one row per stream listened to or log file ingested, with its
//!   counts (`records`, `duplicates`, `bad_frames`, `bytes`); a log file's
//!   SHA-256 is unique, which makes re-ingesting it a no-op.
//! - `station` — station names.
//! - `measurement` — one row per record, keyed by (station, unit, seq);
//!   times in ms since the epoch (UTC), temperatures in m°C, verdict, hint
//!   and drift as the codes of [`crate::data::codes`] (also in tables `verdict`,
//!   `hint`, `drift` for SQL users).
//!
//! Writers take the write lock up front (`BEGIN IMMEDIATE`) and wait up to
//! `busy_timeout` for it, so two writers at once serialise instead of failing.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::time::Duration;

use hold_firmware::record::Record;
use rusqlite::{params, Connection, OptionalExtension as _, TransactionBehavior};
use sha2::{Digest as _, Sha256};

use crate::data::codes;

/// The schema version this build writes.
pub const SCHEMA_VERSION: u32 = 3;

/// Migrations: entry `i` moves a database from version `i` to `i + 1`.
const MIGRATIONS: [&str; 3] = [
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
];

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
    /// Bytes read.
    pub bytes: u64,
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
}

/// Counts of one source after writing.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Written {
    /// Source id.
    pub source_id: i64,
    /// New measurements stored.
    pub stored: u64,
    /// Records skipped because (station, unit, seq) was already stored.
    pub duplicates: u64,
}

/// The store.
#[derive(Debug)]
pub struct Store {
    conn: Connection,
    path: PathBuf,
}

const INSERT: &str = "INSERT OR IGNORE INTO measurement (station_id, unit_id, seq, batch, measured_ms, clock_hz, \
     press_ticks, on_ticks, hold_ticks, temp_mdeg_c, verdict, hint, drift, c_dev_ppm, setup_id, source_id) \
     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16)";

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
        into_wal(&conn).map_err(err)?;
        conn.execute_batch("PRAGMA synchronous = NORMAL; PRAGMA foreign_keys = ON;").map_err(|e| err(e.to_string()))?;
        let mut store = Store { conn, path: path.to_path_buf() };
        store.migrate()?;
        Ok(store)
    }

    /// Opens an existing store (for the reports, which should not leave an
    /// empty database behind when the path is mistyped).
    ///
    /// # Errors
    /// The file does not exist, and as [`Store::open`].
    pub fn open_existing(path: &Path) -> Result<Store, StoreError> {
        if !path.is_file() {
            return Err(StoreError {
                path: path.to_path_buf(),
                message: "no such store (make one with `rchold listen` or `rchold ingest`, or give --db)".into(),
            });
        }
        Store::open(path)
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

    /// Applies the migrations from the version on disk up to `target`
    /// (each in its own transaction). [`Store::open`] migrates to the latest.
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
        for v in on_disk..target.min(SCHEMA_VERSION) {
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
        Ok(Batch { tx, path, stations: HashMap::new(), stored: 0, duplicates: 0 })
    }

    /// Reads measurements matching `filter` in (station, unit, seq) order,
    /// one at a time (memory stays bounded whatever the table's size).
    ///
    /// # Errors
    /// SQLite errors, or a stored code this build does not know.
    pub fn for_each(&self, filter: &Filter, mut each: impl FnMut(Stored)) -> Result<u64, StoreError> {
        let mut sql = String::from(
            "SELECT m.station_id, m.batch, m.measured_ms, m.unit_id, m.seq, m.clock_hz, m.press_ticks, m.on_ticks, \
             m.hold_ticks, m.temp_mdeg_c, m.verdict, m.hint, m.drift, m.c_dev_ppm, m.setup_id \
             FROM measurement m JOIN station s ON s.id = m.station_id WHERE 1",
        );
        let mut args: Vec<rusqlite::types::Value> = Vec::new();
        if let Some(s) = &filter.station {
            sql.push_str(" AND s.name = ?");
            args.push(s.clone().into());
        }
        if let Some(b) = &filter.batch {
            sql.push_str(" AND m.batch = ?");
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
        sql.push_str(" ORDER BY m.station_id, m.unit_id, m.seq");
        let mut st = self.conn.prepare(&sql).map_err(|e| self.err(e))?;
        let mut rows = st.query(rusqlite::params_from_iter(args)).map_err(|e| self.err(e))?;
        let mut n = 0;
        let bad = |what: &str, code: i64| format!("stored {what} code {code} is unknown to this rchold");
        while let Some(r) = rows.next().map_err(|e| self.err(e))? {
            let get = |i: usize| r.get::<_, i64>(i).map_err(|e| self.err(e));
            let opt = |i: usize| r.get::<_, Option<i64>>(i).map_err(|e| self.err(e));
            let (vc, hc, dc) = (get(10)?, get(11)?, get(12)?);
            let record = Record {
                unit_id: u32::try_from(get(3)?).unwrap_or(u32::MAX),
                seq: u32::try_from(get(4)?).unwrap_or(u32::MAX),
                clock_hz: u32::try_from(get(5)?).unwrap_or(0),
                press_ticks: get(6)?.max(0) as u64,
                on_ticks: opt(7)?.map(|v| v.max(0) as u64),
                hold_ticks: opt(8)?.map(|v| v.max(0) as u64),
                temp_mdeg_c: opt(9)?.and_then(|v| i32::try_from(v).ok()),
                verdict: codes::verdict_of(vc).ok_or_else(|| self.err(bad("verdict", vc)))?,
                hint: codes::hint_of(hc).ok_or_else(|| self.err(bad("hint", hc)))?,
                drift: codes::drift_of(dc).ok_or_else(|| self.err(bad("drift", dc)))?,
                c_deviation_ppm: opt(13)?.and_then(|v| i32::try_from(v).ok()),
            };
            each(Stored {
                station_id: get(0)?,
                batch: r.get(1).map_err(|e| self.err(e))?,
                measured_ms: get(2)?,
                record,
                setup_id: opt(14)?,
            });
            n += 1;
        }
        Ok(n)
    }

    /// Every source (stream or log) with its counts, in the order stored.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn sources(&self) -> Result<Vec<Source>, StoreError> {
        let mut st = self
            .conn
            .prepare("SELECT id, kind, name, records, duplicates, bad_frames, bytes FROM source ORDER BY id")
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
                })
            })
            .map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// Stations with a record that reports a drift state past settling:
    /// stations of field units (a fixture measures a board once).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn drift_stations(&self) -> Result<std::collections::HashSet<i64>, StoreError> {
        let settling = i64::from(codes::drift_code(hold_firmware::drift::DriftState::Settling));
        let mut st = self
            .conn
            .prepare("SELECT DISTINCT station_id FROM measurement WHERE drift != ?1")
            .map_err(|e| self.err(e))?;
        let rows = st.query_map([settling], |r| r.get::<_, i64>(0)).map_err(|e| self.err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.err(e))
    }

    /// Measurements stored in all.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn count(&self) -> Result<u64, StoreError> {
        self.conn
            .query_row("SELECT count(*) FROM measurement", [], |r| r.get::<_, i64>(0))
            .map(|v| v.max(0) as u64)
            .map_err(|e| self.err(e))
    }

    /// SQLite's own consistency check (`PRAGMA integrity_check`): `ok` or the problems.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn integrity(&self) -> Result<String, StoreError> {
        self.conn.query_row("PRAGMA integrity_check", [], |r| r.get(0)).map_err(|e| self.err(e))
    }
}

/// One write transaction. Dropped without [`Batch::commit`], it rolls back.
#[derive(Debug)]
pub struct Batch<'c> {
    tx: rusqlite::Transaction<'c>,
    path: PathBuf,
    stations: HashMap<String, i64>,
    stored: u64,
    duplicates: u64,
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
        if let Some(&id) = self.stations.get(name) {
            return Ok(id);
        }
        self.tx.execute("INSERT OR IGNORE INTO station (name) VALUES (?1)", [name]).map_err(|e| self.err(e))?;
        let id = self
            .tx
            .query_row("SELECT id FROM station WHERE name = ?1", [name], |r| r.get(0))
            .map_err(|e| self.err(e))?;
        self.stations.insert(name.to_owned(), id);
        Ok(id)
    }

    /// Starts a log-file source inside this transaction: it exists only if
    /// the transaction commits. `None` if a file with this digest is stored
    /// already (checked under the write lock, so two writers cannot both add it).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn begin_log(
        &mut self,
        name: &str,
        digest: &str,
        started_ms: i64,
        bytes: u64,
    ) -> Result<Option<i64>, StoreError> {
        let known: Option<i64> = self
            .tx
            .query_row("SELECT id FROM source WHERE digest = ?1", [digest], |r| r.get(0))
            .optional()
            .map_err(|e| self.err(e))?;
        if known.is_some() {
            return Ok(None);
        }
        self.tx
            .execute(
                "INSERT INTO source (kind, name, digest, started_ms, bytes) VALUES ('log', ?1, ?2, ?3, ?4)",
                params![name, digest, started_ms, u64_sql(bytes)],
            )
            .map_err(|e| self.err(e))?;
        Ok(Some(self.tx.last_insert_rowid()))
    }

    /// Stores one measurement; `false` if (station, unit, seq) was stored already.
    ///
    /// # Errors
    /// SQLite errors.
    #[allow(clippy::too_many_arguments)]
    pub fn insert(
        &mut self,
        station_id: i64,
        batch: &str,
        measured_ms: i64,
        r: &Record,
        setup_id: Option<i64>,
        source_id: i64,
    ) -> Result<bool, StoreError> {
        let mut st = self
            .tx
            .prepare_cached(INSERT)
            .map_err(|e| StoreError { path: self.path.clone(), message: e.to_string() })?;
        let n = st
            .execute(params![
                station_id,
                r.unit_id,
                r.seq,
                batch,
                measured_ms,
                r.clock_hz,
                u64_sql(r.press_ticks),
                r.on_ticks.map(u64_sql),
                r.hold_ticks.map(u64_sql),
                r.temp_mdeg_c,
                codes::verdict_code(r.verdict),
                codes::hint_code(r.hint),
                codes::drift_code(r.drift),
                r.c_deviation_ppm,
                setup_id,
                source_id
            ])
            .map_err(|e| StoreError { path: self.path.clone(), message: e.to_string() })?;
        if n == 1 {
            self.stored += 1;
        } else {
            self.duplicates += 1;
        }
        Ok(n == 1)
    }

    /// Adds this batch's counts (and `bad_frames`, `bytes`) to the source
    /// and commits.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn commit(self, source_id: i64, bad_frames: u64, bytes: u64) -> Result<Written, StoreError> {
        let path = self.path.clone();
        let e = |e: rusqlite::Error| StoreError { path: path.clone(), message: e.to_string() };
        self.tx
            .execute(
                "UPDATE source SET records = records + ?1, duplicates = duplicates + ?2, \
                 bad_frames = bad_frames + ?3, bytes = bytes + ?4 WHERE id = ?5",
                params![u64_sql(self.stored), u64_sql(self.duplicates), u64_sql(bad_frames), u64_sql(bytes), source_id],
            )
            .map_err(e)?;
        let w = Written { source_id, stored: self.stored, duplicates: self.duplicates };
        self.tx.commit().map_err(e)?;
        Ok(w)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use hold_firmware::drift::DriftState;
    use hold_firmware::{Hint, Verdict};

    pub(crate) fn record(unit_id: u32, seq: u32) -> Record {
        Record {
            seq,
            unit_id,
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
        {
            // A version-1 database, as the first release wrote it.
            let conn =
                Connection::open(&path).map_err(|e| StoreError { path: path.clone(), message: e.to_string() })?;
            let mut s = Store { conn, path: path.clone() };
            assert_eq!(s.migrate_to(1)?, 1);
            // The first release knew seven verdicts and eight hints.
            s.conn
                .execute_batch("DELETE FROM verdict WHERE code >= 7; DELETE FROM hint WHERE code >= 8;")
                .map_err(|e| s.err(e))?;
            let src = s.begin_stream("old", 0)?;
            let mut b = s.batch()?;
            let st = b.station("s")?;
            b.insert(st, "b", 5, &record(1, 1), None, src)?;
            b.commit(src, 0, 0)?;
        }
        let s = Store::open(&path)?;
        assert_eq!(s.schema_version()?, SCHEMA_VERSION);
        assert_eq!(s.count()?, 1);
        // Every code has its name again, in code order.
        for (table, names) in [
            ("verdict", codes::VERDICTS.iter().map(|v| v.name()).collect::<Vec<_>>()),
            ("hint", codes::HINTS.iter().map(|h| h.name()).collect()),
        ] {
            let mut q = s.conn.prepare(&format!("SELECT name FROM {table} ORDER BY code")).map_err(|e| s.err(e))?;
            let got: Vec<String> = q.query_map([], |r| r.get(0)).and_then(Iterator::collect).map_err(|e| s.err(e))?;
            assert_eq!(got, names, "{table}");
        }
        let idx: i64 = s
            .conn
            .query_row("SELECT count(*) FROM sqlite_master WHERE name = 'measurement_time'", [], |r| r.get(0))
            .map_err(|e| s.err(e))?;
        assert_eq!(idx, 1);
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
        let e = Store::open(&path).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.contains("newer rchold") && e.contains("new.db"), "{e}");
        Ok(())
    }
}
