//! The Parquet archive: the store's records (or logs') as a Hive-partitioned
//! Parquet dataset that rchold's reports and general-purpose engines (Spark,
//! DataFusion, DuckDB) read as it is.
//!
//! Layout of a dataset folder:
//! - `readings/station=<name>/day=<YYYY-MM-DD>/part-<n>.parquet` — the records,
//!   columns [`COLUMNS`] (typed, zstd-compressed, dictionary-encoded where it
//!   pays); station and UTC day are in the path only (Hive partitioning; a
//!   station name is percent-encoded outside `A-Z a-z 0-9 . _ -`).
//! - `setups/setups.parquet` — the setups the records refer to by `setup_id`
//!   (0: none): name, stage file, clock and the firmware window in ticks.
//! - `codes/codes.parquet` — the names of the verdict, hint and drift codes,
//!   for SQL users.
//!
//! Writing goes to a temporary folder beside the target, renamed to it on
//! success: a failed or killed export leaves no half-written dataset.
//! Reading checks every file's schema (a missing column or one of another
//! type is named with its file) and that each row's day is its partition's.

use std::collections::HashMap;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::cast::AsArray as _;
use arrow_array::types::{Int32Type, Int64Type};
use arrow_array::{Array, ArrayRef, Int32Array, Int64Array, RecordBatch, StringArray};
use arrow_schema::{DataType, Field, Schema, SchemaRef};
use hold_firmware::drift::DriftState;
use hold_firmware::record::Record;
use hold_firmware::{Hint, Verdict};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::{ArrowWriter, ProjectionMask};
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::properties::WriterProperties;

use crate::data::store::Setup;
use crate::data::summary::{day_of, DAY_MS};
use crate::data::{codes, time};
use crate::Error;

/// The columns of a readings file, in order, with their Arrow types
/// (`true`: may be null). `boot` came later: a file without it reads as boot 0.
pub const COLUMNS: [(&str, DataType, bool); 15] = [
    ("unit_id", DataType::Int64, false),
    ("boot", DataType::Int64, false),
    ("seq", DataType::Int64, false),
    ("measured_ms", DataType::Int64, false),
    ("batch", DataType::Utf8, false),
    ("setup_id", DataType::Int32, false),
    ("clock_hz", DataType::Int64, false),
    ("press_ticks", DataType::Int64, false),
    ("on_ticks", DataType::Int64, true),
    ("hold_ticks", DataType::Int64, true),
    ("temp_mdeg_c", DataType::Int32, true),
    ("c_dev_ppm", DataType::Int32, true),
    ("verdict", DataType::Int32, false),
    ("hint", DataType::Int32, false),
    ("drift", DataType::Int32, false),
];

/// Rows a partition buffers before it is written as a file.
const PART_ROWS: usize = 1 << 20;
/// Rows all partitions of one writer buffer at most (the largest is written
/// first): about 110 bytes a row, 230 MB.
const BUFFERED_ROWS: usize = 2 << 20;

fn readings_schema() -> SchemaRef {
    Arc::new(Schema::new(COLUMNS.iter().map(|(n, t, null)| Field::new(*n, t.clone(), *null)).collect::<Vec<_>>()))
}

fn props() -> WriterProperties {
    // zstd level 1: most of the size gain of higher levels at a fraction of the time.
    let level = ZstdLevel::try_new(1).unwrap_or_default();
    let mut b = WriterProperties::builder()
        .set_compression(Compression::ZSTD(level))
        .set_max_row_group_row_count(Some(PART_ROWS));
    // Counters and times that mostly grow: differences packed in few bits
    // (DELTA_BINARY_PACKED, which Spark, DataFusion and DuckDB read).
    for col in ["unit_id", "seq", "measured_ms"] {
        let c = parquet::schema::types::ColumnPath::from(col);
        b = b
            .set_column_dictionary_enabled(c.clone(), false)
            .set_column_encoding(c, parquet::basic::Encoding::DELTA_BINARY_PACKED);
    }
    b.build()
}

/// A partition's value as a folder name: percent-encoded outside `A-Z a-z 0-9 . _ -`.
#[must_use]
pub fn hive_escape(v: &str) -> String {
    let mut out = String::with_capacity(v.len());
    for b in v.bytes() {
        if b.is_ascii_alphanumeric() || matches!(b, b'.' | b'_' | b'-') {
            out.push(char::from(b));
        } else {
            out.push_str(&format!("%{b:02X}"));
        }
    }
    out
}

/// The value a folder name [`hive_escape`] wrote stands for (`None`: not such a name).
#[must_use]
pub fn hive_unescape(v: &str) -> Option<String> {
    let b = v.as_bytes();
    let mut out = Vec::with_capacity(b.len());
    let mut i = 0;
    while let Some(&c) = b.get(i) {
        if c == b'%' {
            let hex = std::str::from_utf8(b.get(i + 1..i + 3)?).ok()?;
            out.push(u8::from_str_radix(hex, 16).ok()?);
            i += 3;
        } else {
            out.push(c);
            i += 1;
        }
    }
    String::from_utf8(out).ok()
}

/// Column buffers of one partition.
#[derive(Default)]
struct Part {
    unit: Vec<i64>,
    boot: Vec<i64>,
    seq: Vec<i64>,
    ms: Vec<i64>,
    /// Each row's batch as an index into `batches` (no string per row).
    batch: Vec<u32>,
    batches: Vec<String>,
    setup: Vec<i32>,
    clock: Vec<i64>,
    press: Vec<i64>,
    on: Vec<Option<i64>>,
    hold: Vec<Option<i64>>,
    temp: Vec<Option<i32>>,
    cdev: Vec<Option<i32>>,
    verdict: Vec<i32>,
    hint: Vec<i32>,
    drift: Vec<i32>,
}

fn sat(v: u64) -> i64 {
    i64::try_from(v).unwrap_or(i64::MAX)
}

impl Part {
    fn push(&mut self, batch: &str, ms: i64, r: &Record, setup_id: i64) {
        self.unit.push(i64::from(r.unit_id));
        self.boot.push(i64::from(r.boot));
        self.seq.push(i64::from(r.seq));
        self.ms.push(ms);
        // A partition's batch mostly repeats: the last one is looked at first.
        let last = self.batch.last().copied().unwrap_or(0);
        let k = if self.batches.get(last as usize).is_some_and(|b| b == batch) {
            last
        } else if let Some(k) = self.batches.iter().position(|b| b == batch) {
            k as u32
        } else {
            self.batches.push(batch.to_owned());
            (self.batches.len() - 1) as u32
        };
        self.batch.push(k);
        self.setup.push(i32::try_from(setup_id).unwrap_or(0));
        self.clock.push(i64::from(r.clock_hz));
        self.press.push(sat(r.press_ticks));
        self.on.push(r.on_ticks.map(sat));
        self.hold.push(r.hold_ticks.map(sat));
        self.temp.push(r.temp_mdeg_c);
        self.cdev.push(r.c_deviation_ppm);
        self.verdict.push(i32::from(codes::verdict_code(r.verdict)));
        self.hint.push(i32::from(codes::hint_code(r.hint)));
        self.drift.push(i32::from(codes::drift_code(r.drift)));
    }

    fn len(&self) -> usize {
        self.unit.len()
    }

    fn take_batch(&mut self) -> Result<RecordBatch, arrow_schema::ArrowError> {
        let p = std::mem::take(self);
        let cols: Vec<ArrayRef> = vec![
            Arc::new(Int64Array::from(p.unit)),
            Arc::new(Int64Array::from(p.boot)),
            Arc::new(Int64Array::from(p.seq)),
            Arc::new(Int64Array::from(p.ms)),
            Arc::new(StringArray::from_iter_values(
                p.batch.iter().map(|&k| p.batches.get(k as usize).map_or("", String::as_str)),
            )),
            Arc::new(Int32Array::from(p.setup)),
            Arc::new(Int64Array::from(p.clock)),
            Arc::new(Int64Array::from(p.press)),
            Arc::new(Int64Array::from(p.on)),
            Arc::new(Int64Array::from(p.hold)),
            Arc::new(Int32Array::from(p.temp)),
            Arc::new(Int32Array::from(p.cdev)),
            Arc::new(Int32Array::from(p.verdict)),
            Arc::new(Int32Array::from(p.hint)),
            Arc::new(Int32Array::from(p.drift)),
        ];
        RecordBatch::try_new(readings_schema(), cols)
    }
}

/// Writes a dataset: records go to their (station, day) partition's buffer;
/// a full buffer (or the largest when all hold too many rows) is written as
/// the partition's next `part-<n>.parquet`. Memory stays bounded whatever the
/// number of records.
pub struct ArchiveWriter {
    target: PathBuf,
    tmp: PathBuf,
    /// A prefix of this writer's file names (writers in parallel use their own).
    prefix: String,
    /// Buffers by station, then UTC day.
    parts: HashMap<String, HashMap<i64, Part>>,
    files: HashMap<(String, i64), u32>,
    buffered: usize,
    /// Records written.
    pub records: u64,
}

impl ArchiveWriter {
    /// A writer of the dataset `target`, which must not exist yet; files go
    /// to a temporary folder beside it until [`ArchiveWriter::finish`].
    ///
    /// # Errors
    /// [`Error::Input`] when `target` exists; [`Error::Io`] naming the folder.
    pub fn create(target: &Path) -> Result<ArchiveWriter, Error> {
        if target.exists() {
            return Err(Error::Input(format!(
                "{}: exists already (give a new folder: an export never writes into an existing one)",
                target.display()
            )));
        }
        let name = target.file_name().map_or_else(|| "dataset".into(), |n| n.to_string_lossy().into_owned());
        let tmp = target.with_file_name(format!(".{name}.tmp-{}", std::process::id()));
        std::fs::create_dir_all(tmp.join("readings")).map_err(|e| Error::io(&tmp, e))?;
        Ok(ArchiveWriter {
            target: target.to_path_buf(),
            tmp,
            prefix: String::new(),
            parts: HashMap::new(),
            files: HashMap::new(),
            buffered: 0,
            records: 0,
        })
    }

    /// A writer into the same temporary folder for another thread; its files
    /// are named `part-<prefix>-<n>`. Merge it back with [`ArchiveWriter::absorb`].
    #[must_use]
    pub fn sibling(&self, prefix: &str) -> ArchiveWriter {
        ArchiveWriter {
            target: self.target.clone(),
            tmp: self.tmp.clone(),
            prefix: format!("{prefix}-"),
            parts: HashMap::new(),
            files: HashMap::new(),
            buffered: 0,
            records: 0,
        }
    }

    /// Adds one record measured at `station` at `measured_ms` in `batch`
    /// against setup `setup_id` (0: none).
    ///
    /// # Errors
    /// Writing a full partition failed ([`Error::Io`] naming its file).
    pub fn push(
        &mut self,
        station: &str,
        batch: &str,
        measured_ms: i64,
        r: &Record,
        setup_id: i64,
    ) -> Result<(), Error> {
        let day = day_of(measured_ms);
        // No allocation for a station seen before.
        let days = match self.parts.get_mut(station) {
            Some(d) => d,
            None => self.parts.entry(station.to_owned()).or_default(),
        };
        let part = days.entry(day).or_default();
        part.push(batch, measured_ms, r, setup_id);
        self.records += 1;
        self.buffered += 1;
        if part.len() >= PART_ROWS {
            self.flush(&(station.to_owned(), day))?;
        } else if self.buffered >= BUFFERED_ROWS {
            let largest = self
                .parts
                .iter()
                .flat_map(|(s, d)| d.iter().map(move |(day, p)| (p.len(), s, *day)))
                .max()
                .map(|(_, s, day)| (s.clone(), day));
            if let Some(k) = largest {
                self.flush(&k)?;
            }
        }
        Ok(())
    }

    fn flush(&mut self, key: &(String, i64)) -> Result<(), Error> {
        let Some(part) = self.parts.get_mut(&key.0).and_then(|d| d.get_mut(&key.1)) else { return Ok(()) };
        if part.len() == 0 {
            return Ok(());
        }
        self.buffered -= part.len();
        let dir = self
            .tmp
            .join("readings")
            .join(format!("station={}", hive_escape(&key.0)))
            .join(format!("day={}", time::date_of(key.1 * DAY_MS)));
        std::fs::create_dir_all(&dir).map_err(|e| Error::io(&dir, e))?;
        let n = self.files.entry(key.clone()).or_insert(0);
        let path = dir.join(format!("part-{}{n}.parquet", self.prefix));
        *n += 1;
        let batch = part.take_batch().map_err(|e| Error::io(&path, std::io::Error::other(e)))?;
        write_file(&path, &batch)
    }

    /// Every partition buffered, (station, day).
    fn keys(&self) -> Vec<(String, i64)> {
        self.parts.iter().flat_map(|(s, d)| d.keys().map(move |&day| (s.clone(), day))).collect()
    }

    /// Takes over what another writer of the same dataset holds (its
    /// buffers are written as its own files).
    ///
    /// # Errors
    /// Writing failed.
    pub fn absorb(&mut self, mut other: ArchiveWriter) -> Result<(), Error> {
        for k in other.keys() {
            other.flush(&k)?;
        }
        self.records += other.records;
        Ok(())
    }

    /// Writes what is buffered, the setups and the code names, and renames
    /// the temporary folder to the target. Returns the records written.
    ///
    /// # Errors
    /// Writing or renaming failed (the temporary folder is removed).
    pub fn finish(mut self, setups: &HashMap<i64, Setup>) -> Result<u64, Error> {
        let result = (|| {
            for k in self.keys() {
                self.flush(&k)?;
            }
            write_setups(&self.tmp.join("setups"), setups)?;
            write_codes(&self.tmp.join("codes"))?;
            std::fs::rename(&self.tmp, &self.target).map_err(|e| Error::io(&self.target, e))
        })();
        if result.is_err() {
            let _ = std::fs::remove_dir_all(&self.tmp);
        }
        result.map(|()| self.records)
    }

    /// Removes the temporary folder (after a failure elsewhere).
    pub fn abandon(self) {
        let _ = std::fs::remove_dir_all(&self.tmp);
    }
}

/// Writes one readings file.
fn write_file(path: &Path, batch: &RecordBatch) -> Result<(), Error> {
    write_with(path, batch, props())
}

fn write_with(path: &Path, batch: &RecordBatch, props: WriterProperties) -> Result<(), Error> {
    let io = |e: parquet::errors::ParquetError| Error::io(path, std::io::Error::other(e));
    let f = File::create(path).map_err(|e| Error::io(path, e))?;
    let mut w = ArrowWriter::try_new(f, batch.schema(), Some(props)).map_err(io)?;
    w.write(batch).map_err(io)?;
    w.close().map_err(io)?;
    Ok(())
}

fn write_setups(dir: &Path, setups: &HashMap<i64, Setup>) -> Result<(), Error> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let mut ids: Vec<&i64> = setups.keys().collect();
    ids.sort();
    let get = |f: &dyn Fn(&Setup) -> i64| -> Vec<i64> { ids.iter().filter_map(|i| setups.get(i)).map(f).collect() };
    let text =
        |f: &dyn Fn(&Setup) -> String| -> Vec<String> { ids.iter().filter_map(|i| setups.get(i)).map(f).collect() };
    let schema = Arc::new(Schema::new(vec![
        Field::new("setup_id", DataType::Int32, false),
        Field::new("name", DataType::Utf8, false),
        Field::new("stage_toml", DataType::Utf8, false),
        Field::new("clock_hz", DataType::Int64, false),
        Field::new("guard_ppm", DataType::Int64, false),
        Field::new("poll_ns", DataType::Int64, false),
        Field::new("hold_min_ticks", DataType::Int64, false),
        Field::new("hold_max_ticks", DataType::Int64, false),
    ]));
    let cols: Vec<ArrayRef> = vec![
        Arc::new(Int32Array::from(ids.iter().map(|&&i| i32::try_from(i).unwrap_or(0)).collect::<Vec<_>>())),
        Arc::new(StringArray::from(text(&|s| s.name.clone()))),
        Arc::new(StringArray::from(text(&|s| s.stage_toml.clone()))),
        Arc::new(Int64Array::from(get(&|s| i64::from(s.clock_hz)))),
        Arc::new(Int64Array::from(get(&|s| i64::from(s.guard_ppm)))),
        Arc::new(Int64Array::from(get(&|s| i64::from(s.poll_ns)))),
        Arc::new(Int64Array::from(get(&|s| sat(s.hold_min_ticks)))),
        Arc::new(Int64Array::from(get(&|s| sat(s.hold_max_ticks)))),
    ];
    let path = dir.join("setups.parquet");
    let batch = RecordBatch::try_new(schema, cols).map_err(|e| Error::io(&path, std::io::Error::other(e)))?;
    write_with(&path, &batch, WriterProperties::default())
}

fn write_codes(dir: &Path) -> Result<(), Error> {
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let mut rows: Vec<(&str, i32, &str)> = Vec::new();
    rows.extend(codes::VERDICTS.iter().enumerate().map(|(i, v)| ("verdict", i as i32, v.name())));
    rows.extend(codes::HINTS.iter().enumerate().map(|(i, h)| ("hint", i as i32, h.name())));
    rows.extend(codes::DRIFTS.iter().enumerate().map(|(i, &d)| ("drift", i as i32, codes::drift_name(d))));
    let schema = Arc::new(Schema::new(vec![
        Field::new("kind", DataType::Utf8, false),
        Field::new("code", DataType::Int32, false),
        Field::new("name", DataType::Utf8, false),
    ]));
    let cols: Vec<ArrayRef> = vec![
        Arc::new(StringArray::from(rows.iter().map(|r| r.0).collect::<Vec<_>>())),
        Arc::new(Int32Array::from(rows.iter().map(|r| r.1).collect::<Vec<_>>())),
        Arc::new(StringArray::from(rows.iter().map(|r| r.2).collect::<Vec<_>>())),
    ];
    let path = dir.join("codes.parquet");
    let batch = RecordBatch::try_new(schema, cols).map_err(|e| Error::io(&path, std::io::Error::other(e)))?;
    write_with(&path, &batch, WriterProperties::default())
}

/// Exports the store's records matching `filter` (all its setups go with
/// them) to the new dataset `target`. Returns the records written.
///
/// # Errors
/// The store's errors; writing (nothing is left at `target` on failure).
pub fn export_store(
    store: &crate::data::store::Store,
    filter: &crate::data::store::Filter,
    target: &Path,
) -> Result<u64, Error> {
    let setups = store.setups()?;
    let stations = store.stations()?;
    let mut w = ArchiveWriter::create(target)?;
    let mut failed = None;
    let read = store.for_each(filter, |s| {
        if failed.is_none() {
            let st = stations.get(&s.station_id).map_or("?", String::as_str);
            if let Err(e) = w.push(st, &s.batch, s.measured_ms, &s.record, s.setup_id.unwrap_or(0)) {
                failed = Some(e);
            }
        }
    });
    match (read, failed) {
        (Ok(_), None) => w.finish(&setups),
        (Err(e), _) => {
            w.abandon();
            Err(e.into())
        }
        (_, Some(e)) => {
            w.abandon();
            Err(e)
        }
    }
}

/// Exports measurement logs to the new dataset `target`, each file split
/// into one piece per thread (as `yield --csv` reads them). Every record is
/// measured against setup 1 — `setup` — when given; lines that leave the
/// verdict or hint empty are judged against it.
///
/// # Errors
/// The first bad line (file, line, field, accepted range); writing
/// (nothing is left at `target` on failure).
pub fn export_logs(paths: &[PathBuf], setup: Option<&Setup>, target: &Path, threads: usize) -> Result<u64, Error> {
    use crate::data::log;
    use crate::report::yields::{HoldJudge, NO_JUDGE};
    let judge = setup.map(HoldJudge::new).transpose()?;
    let judge = judge.as_ref();
    let setup_id = i64::from(setup.is_some());
    let mut w = ArchiveWriter::create(target)?;
    let mut piece_no = 0usize;
    let result = (|| {
        for path in paths {
            let (layout, pieces) = log::split(path, threads)?;
            let results: Vec<Result<ArchiveWriter, Error>> = std::thread::scope(|scope| {
                let handles: Vec<_> = pieces
                    .iter()
                    .enumerate()
                    .map(|(i, &(a, b))| {
                        let mut mine = w.sibling(&format!("{}", piece_no + i));
                        scope.spawn(move || {
                            let mut write_error = None;
                            let r = log::read_range(path, layout, a, b, |_, l| {
                                let mut l = l.clone();
                                if l.unjudged() {
                                    judge.ok_or_else(|| NO_JUDGE.to_owned())?.settle(&mut l)?;
                                }
                                mine.push(l.station, l.batch, l.measured_ms, &l.record, setup_id).map_err(|e| {
                                    let m = e.to_string();
                                    write_error = Some(e);
                                    m
                                })
                            });
                            if let Some(e) = write_error {
                                return Err(e);
                            }
                            match r {
                                Ok(_) => Ok(mine),
                                Err(log::RangeError::Io(e)) => Err(Error::io(path, e)),
                                Err(log::RangeError::Line(i, field, m)) => {
                                    let first = log::line_at(path, a).map_err(|e| Error::io(path, e))?;
                                    Err(log::LogError { file: path.clone(), line: first + i, field, message: m }.into())
                                }
                            }
                        })
                    })
                    .collect();
                handles
                    .into_iter()
                    .map(|h| h.join().unwrap_or_else(|_| Err(Error::Input("a writing thread failed".into()))))
                    .collect()
            });
            piece_no += pieces.len();
            for r in results {
                w.absorb(r?)?;
            }
        }
        Ok(())
    })();
    match result {
        Ok(()) => {
            let setups = setup.map(|s| HashMap::from([(1, s.clone())])).unwrap_or_default();
            w.finish(&setups)
        }
        Err(e) => {
            w.abandon();
            Err(e)
        }
    }
}

/// One readings file of a dataset, with its partition values.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PartFile {
    /// The file.
    pub path: PathBuf,
    /// Station (from `station=…`).
    pub station: String,
    /// UTC day, days since the epoch (from `day=…`).
    pub day: i64,
}

/// Every readings file of the dataset `dir`, in path order.
///
/// # Errors
/// [`Error::Input`] naming a folder that is not a partition of ours;
/// [`Error::Io`] when the folder cannot be read.
pub fn part_files(dir: &Path) -> Result<Vec<PartFile>, Error> {
    let root = dir.join("readings");
    if !root.is_dir() {
        return Err(Error::Input(format!(
            "{}: not an rchold Parquet dataset (no readings/ folder; write one with `rchold export --parquet`)",
            dir.display()
        )));
    }
    let list = |d: &Path| -> Result<Vec<PathBuf>, Error> {
        let mut v: Vec<PathBuf> = std::fs::read_dir(d)
            .map_err(|e| Error::io(d, e))?
            .filter_map(Result::ok)
            .map(|e| e.path())
            .filter(|p| p.file_name().is_some_and(|n| !n.to_string_lossy().starts_with('.')))
            .collect();
        v.sort();
        Ok(v)
    };
    let value = |p: &Path, key: &str| -> Result<String, Error> {
        let name = p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        name.strip_prefix(&format!("{key}="))
            .and_then(hive_unescape)
            .ok_or_else(|| Error::Input(format!("{}: not a partition folder (accepted: {key}=<value>)", p.display())))
    };
    let mut out = Vec::new();
    for s in list(&root)? {
        let station = value(&s, "station")?;
        crate::data::validate::name(&station, 1).map_err(|m| Error::Input(format!("{}: station {m}", s.display())))?;
        for d in list(&s)? {
            let date = value(&d, "day")?;
            let day = time::parse_date_or_time(&date)
                .map(day_of)
                .ok_or_else(|| Error::Input(format!("{}: day is not a date (accepted: YYYY-MM-DD)", d.display())))?;
            for f in list(&d)? {
                if f.extension().is_some_and(|e| e == "parquet") {
                    out.push(PartFile { path: f, station: station.clone(), day });
                }
            }
        }
    }
    Ok(out)
}

/// Opens a Parquet file and checks its footer before anything reads by it:
/// every column chunk lies inside the file (the `parquet` crate asserts
/// this, and a damaged footer would end the process instead of naming the
/// file; found by the `parquet` fuzz target).
///
/// # Errors
/// [`Error::Io`] when the file cannot be opened; [`Error::Input`] naming the
/// file when its footer is unreadable or points outside it.
fn open_parquet(path: &Path) -> Result<ParquetRecordBatchReaderBuilder<File>, Error> {
    let unreadable =
        |m: &dyn std::fmt::Display| Error::Input(format!("{}: not a readable Parquet file: {m}", path.display()));
    let f = File::open(path).map_err(|e| Error::io(path, e))?;
    let len = f.metadata().map_err(|e| Error::io(path, e))?.len();
    let builder = crate::guard::third_party(|| ParquetRecordBatchReaderBuilder::try_new(f))
        .map_err(|m| unreadable(&m))?
        .map_err(|e| unreadable(&e))?;
    for (g, rg) in builder.metadata().row_groups().iter().enumerate() {
        for c in rg.columns() {
            let start = c.dictionary_page_offset().unwrap_or_else(|| c.data_page_offset());
            let size = c.compressed_size();
            let inside = u64::try_from(start)
                .ok()
                .zip(u64::try_from(size).ok())
                .and_then(|(a, b)| a.checked_add(b))
                .is_some_and(|end| end <= len);
            if !inside {
                return Err(unreadable(&format!(
                    "row group {g}, column {}: a chunk at byte {start} of {size} bytes lies outside the file ({len} bytes)",
                    c.column_path()
                )));
            }
        }
    }
    Ok(builder)
}

/// The setups of the dataset `dir` (none when it has no setups file).
///
/// # Errors
/// A setups file that cannot be read or has the wrong columns (named).
pub fn read_setups(dir: &Path) -> Result<HashMap<i64, Setup>, Error> {
    let path = dir.join("setups").join("setups.parquet");
    if !path.is_file() {
        return Ok(HashMap::new());
    }
    let bad = |col: &str, m: &str| Error::Input(format!("{}: column {col}: {m}", path.display()));
    let reader = open_parquet(&path)?
        .build()
        .map_err(|e| Error::Input(format!("{}: not a readable Parquet file: {e}", path.display())))?;
    let mut out = HashMap::new();
    let mut reader = reader;
    // The decoder behind the guard (crate::guard): a damaged page must not end the process.
    while let Some(b) = crate::guard::third_party(|| reader.next())
        .map_err(|m| Error::Input(format!("{}: not a readable Parquet file: {m}", path.display())))?
    {
        let b = b.map_err(|e| Error::Input(format!("{}: {e}", path.display())))?;
        let int = |c: &str| -> Result<Vec<i64>, Error> {
            let col = b.column_by_name(c).ok_or_else(|| bad(c, "missing"))?;
            if let Some(a) = col.as_primitive_opt::<Int64Type>() {
                return Ok(a.iter().map(|v| v.unwrap_or(0)).collect());
            }
            let a = col.as_primitive_opt::<Int32Type>().ok_or_else(|| bad(c, "not an integer"))?;
            Ok(a.iter().map(|v| i64::from(v.unwrap_or(0))).collect())
        };
        let text = |c: &str| -> Result<Vec<String>, Error> {
            let col = b.column_by_name(c).ok_or_else(|| bad(c, "missing"))?;
            let a = col.as_string_opt::<i32>().ok_or_else(|| bad(c, "not text"))?;
            Ok(a.iter().map(|v| v.unwrap_or("").to_owned()).collect())
        };
        let (ids, names, tomls) = (int("setup_id")?, text("name")?, text("stage_toml")?);
        let (clock, guard, poll) = (int("clock_hz")?, int("guard_ppm")?, int("poll_ns")?);
        let (lo, hi) = (int("hold_min_ticks")?, int("hold_max_ticks")?);
        for i in 0..ids.len() {
            let g = |v: &Vec<i64>| v.get(i).copied().unwrap_or(0);
            let u32_of =
                |v: &Vec<i64>, c: &str| u32::try_from(g(v)).map_err(|_| bad(c, "out of range (0 … 4294967295)"));
            out.insert(
                g(&ids),
                Setup {
                    name: names.get(i).cloned().unwrap_or_default(),
                    stage_toml: tomls.get(i).cloned().unwrap_or_default(),
                    clock_hz: u32_of(&clock, "clock_hz")?,
                    guard_ppm: u32_of(&guard, "guard_ppm")?,
                    poll_ns: u32_of(&poll, "poll_ns")?,
                    hold_min_ticks: g(&lo).max(0) as u64,
                    hold_max_ticks: g(&hi).max(0) as u64,
                },
            );
        }
    }
    Ok(out)
}

/// A record read back, with what the dataset says about it.
#[derive(Debug, Clone, Copy)]
pub struct ReadRecord<'a> {
    /// Batch.
    pub batch: &'a str,
    /// When, ms since the epoch.
    pub measured_ms: i64,
    /// The record (fields not read stand as zero, none or settling).
    pub record: Record,
    /// Setup id (`None` for 0).
    pub setup_id: Option<i64>,
}

/// Reads row group `row_group` of `part`, only the columns in `wanted` (all
/// required ones are checked wherever they are wanted), and hands each record
/// to `each`. Returns the rows read.
///
/// # Errors
/// [`Error::Input`] naming the file and the column: a missing column, one of
/// another type, a value out of range, a row whose day is not the
/// partition's, an unreadable file or footer.
pub fn read_part(
    part: &PartFile,
    row_group: Option<usize>,
    wanted: &[&str],
    mut each: impl FnMut(&ReadRecord<'_>),
) -> Result<u64, Error> {
    let path = &part.path;
    let bad = |col: &str, m: String| Error::Input(format!("{}: column {col}: {m}", path.display()));
    let unreadable =
        |e: &dyn std::fmt::Display| Error::Input(format!("{}: not a readable Parquet file: {e}", path.display()));
    let builder = open_parquet(path)?;
    let schema = builder.schema().clone();
    let mut indices = Vec::new();
    for (name, ty, _) in COLUMNS.iter().filter(|c| wanted.contains(&c.0)) {
        let Some((i, field)) = schema.column_with_name(name) else {
            if *name == "boot" {
                continue; // written before the column: boot 0
            }
            return Err(bad(name, "missing".into()));
        };
        if field.data_type() != ty {
            return Err(bad(name, format!("is {}, not {ty}", field.data_type())));
        }
        indices.push(i);
    }
    let mask = ProjectionMask::roots(builder.parquet_schema(), indices);
    let mut builder = builder.with_projection(mask).with_batch_size(65_536);
    if let Some(rg) = row_group {
        builder = builder.with_row_groups(vec![rg]);
    }
    let mut reader = builder.build().map_err(|e| unreadable(&e))?;
    let mut n = 0u64;
    let i64s = |b: &RecordBatch, c: &str| b.column_by_name(c).and_then(|a| a.as_primitive_opt::<Int64Type>().cloned());
    let i32s = |b: &RecordBatch, c: &str| b.column_by_name(c).and_then(|a| a.as_primitive_opt::<Int32Type>().cloned());
    // The decoder behind the guard (crate::guard): a damaged page once made the
    // parquet crate overflow a shift (found by the `parquet` fuzz target).
    while let Some(b) = crate::guard::third_party(|| reader.next()).map_err(|m| unreadable(&m))? {
        let b = b.map_err(|e| unreadable(&e))?;
        let (unit, seq, ms) = (i64s(&b, "unit_id"), i64s(&b, "seq"), i64s(&b, "measured_ms"));
        let boot = i64s(&b, "boot");
        let batch = b.column_by_name("batch").and_then(|a| a.as_string_opt::<i32>().cloned());
        let (setup, clock, press) = (i32s(&b, "setup_id"), i64s(&b, "clock_hz"), i64s(&b, "press_ticks"));
        let (on, hold) = (i64s(&b, "on_ticks"), i64s(&b, "hold_ticks"));
        let (temp, cdev) = (i32s(&b, "temp_mdeg_c"), i32s(&b, "c_dev_ppm"));
        let (verdict, hint, drift) = (i32s(&b, "verdict"), i32s(&b, "hint"), i32s(&b, "drift"));
        let int = |a: &Option<Int64Array>, i: usize| a.as_ref().and_then(|a| a.is_valid(i).then(|| a.value(i)));
        let small = |a: &Option<Int32Array>, i: usize| a.as_ref().and_then(|a| a.is_valid(i).then(|| a.value(i)));
        for i in 0..b.num_rows() {
            let u32_of = |a: &Option<Int64Array>, c: &str| -> Result<u32, Error> {
                match int(a, i) {
                    None => Ok(0),
                    Some(v) => u32::try_from(v).map_err(|_| bad(c, format!("{v} is out of range (0 … 4294967295)"))),
                }
            };
            let ticks = |a: &Option<Int64Array>, c: &str| -> Result<Option<u64>, Error> {
                int(a, i).map(|v| u64::try_from(v).map_err(|_| bad(c, format!("{v} is negative")))).transpose()
            };
            let code = |a: &Option<Int32Array>, c: &str, n: usize| -> Result<i64, Error> {
                let v = small(a, i).unwrap_or(0);
                if usize::try_from(v).is_ok_and(|v| v < n) {
                    Ok(i64::from(v))
                } else {
                    Err(bad(c, format!("code {v} is unknown (accepted: 0 … {})", n - 1)))
                }
            };
            let measured_ms = int(&ms, i).unwrap_or(part.day * DAY_MS);
            if day_of(measured_ms) != part.day {
                return Err(bad(
                    "measured_ms",
                    format!(
                        "{} lies outside its partition day={}",
                        time::format_ms(measured_ms),
                        time::date_of(part.day * DAY_MS)
                    ),
                ));
            }
            let record = Record {
                unit_id: u32_of(&unit, "unit_id")?,
                boot: u32_of(&boot, "boot")?,
                seq: u32_of(&seq, "seq")?,
                clock_hz: u32_of(&clock, "clock_hz")?,
                press_ticks: ticks(&press, "press_ticks")?.unwrap_or(0),
                on_ticks: ticks(&on, "on_ticks")?,
                hold_ticks: ticks(&hold, "hold_ticks")?,
                temp_mdeg_c: small(&temp, i),
                verdict: codes::verdict_of(code(&verdict, "verdict", codes::VERDICTS.len())?)
                    .unwrap_or(Verdict::WithinWindow),
                hint: codes::hint_of(code(&hint, "hint", codes::HINTS.len())?).unwrap_or(Hint::None),
                drift: codes::drift_of(code(&drift, "drift", codes::DRIFTS.len())?).unwrap_or(DriftState::Settling),
                c_deviation_ppm: small(&cdev, i),
            };
            crate::data::validate::record(&record).map_err(|e| {
                // The log's temperature column is in °C; the dataset's in m°C.
                bad(if e.field == "temp_c" { "temp_mdeg_c" } else { e.field }, e.message)
            })?;
            let setup_id = small(&setup, i).map(i64::from).filter(|&s| s != 0);
            let batch = batch.as_ref().map_or("", |a| if a.is_valid(i) { a.value(i) } else { "" });
            each(&ReadRecord { batch, measured_ms, record, setup_id });
            n += 1;
        }
    }
    Ok(n)
}

/// The row groups of a readings file.
///
/// # Errors
/// [`Error::Input`]: the file's footer cannot be read.
pub fn row_groups(part: &PartFile) -> Result<usize, Error> {
    Ok(open_parquet(&part.path)?.metadata().num_row_groups())
}

/// Every (file, row group) of a dataset, in order: the units of parallel work.
///
/// # Errors
/// A footer that cannot be read.
pub fn jobs(parts: &[PartFile]) -> Result<Vec<(&PartFile, usize)>, Error> {
    let mut out = Vec::new();
    for p in parts {
        for rg in 0..row_groups(p)? {
            out.push((p, rg));
        }
    }
    Ok(out)
}

/// Runs `work` over `jobs` on `threads` threads, one accumulator per thread
/// (for sums whose merge does not depend on order); returns them.
///
/// # Errors
/// The first error any thread met.
pub fn run_per_thread<T: Send>(
    jobs: &[(&PartFile, usize)],
    threads: usize,
    fresh: impl Fn() -> T + Sync,
    work: impl Fn(&mut T, &PartFile, usize) -> Result<(), Error> + Sync,
) -> Result<Vec<T>, Error> {
    let next = std::sync::atomic::AtomicUsize::new(0);
    std::thread::scope(|s| {
        let handles: Vec<_> = (0..threads.max(1))
            .map(|_| {
                s.spawn(|| {
                    let mut acc = fresh();
                    loop {
                        let i = next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                        let Some(&(p, rg)) = jobs.get(i) else { break };
                        if let Err(e) = work(&mut acc, p, rg) {
                            next.store(usize::MAX / 2, std::sync::atomic::Ordering::Relaxed);
                            return Err(e);
                        }
                    }
                    Ok(acc)
                })
            })
            .collect();
        handles
            .into_iter()
            .map(|h| h.join().unwrap_or_else(|_| Err(Error::Input("a reading thread failed".into()))))
            .collect()
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn partition_names_round_trip() {
        for s in ["line-1", "a/b", "a b", "a=b%", "Ünïcode", ""] {
            let e = hive_escape(s);
            assert!(e.bytes().all(|b| b.is_ascii_alphanumeric() || b"._-%".contains(&b)), "{e}");
            assert_eq!(hive_unescape(&e).as_deref(), Some(s));
        }
        assert_eq!(hive_unescape("%G1"), None);
    }

    use crate::data::store::{tests::record, Filter, Store};

    fn err(e: impl std::fmt::Display) -> Error {
        Error::Input(e.to_string())
    }

    /// A store with two stations, two setups and none, a record on another
    /// clock, empty optional fields and a reject.
    fn store_with_records(dir: &Path) -> Result<Store, Error> {
        let mut s = Store::open(&dir.join("s.db"))?;
        let fixture = crate::report::yields::tests::example_setup();
        let field = Setup { name: "field".into(), hold_min_ticks: 0, ..fixture.clone() };
        let ids = [None, Some(s.setup_id(&fixture)?), Some(s.setup_id(&field)?)];
        let src = s.begin_stream("t", 0)?;
        let mut b = s.batch()?;
        for i in 0..500u32 {
            let st = b.station(if i % 3 == 0 { "bench a/1" } else { "line-2" })?;
            let mut r = record(i % 37, i);
            r.clock_hz = if i % 50 == 0 { 4_000_000 } else { 1_000_000 };
            r.on_ticks = (i % 7 != 0).then_some(u64::from(i) + 3);
            r.hold_ticks = (i % 11 != 0).then_some(60_000 + u64::from(i) * 97);
            r.temp_mdeg_c = (i % 5 != 0).then_some(-40_000 + i as i32 * 100);
            r.c_deviation_ppm = (i % 3 != 0).then_some(-(i as i32) * 17);
            if i % 13 == 0 {
                r.verdict = Verdict::Short;
                r.hint = Hint::WrongPart;
                r.drift = DriftState::Drifting;
            }
            if r.hold_ticks.is_none() {
                // A record without a hold is one the firmware gave before any hold.
                r.verdict = Verdict::StuckActive;
                r.hint = Hint::OpenResistorOrShortedNode;
            }
            let ms = 1_790_000_000_000 + i64::from(i) * 3_600_000;
            b.insert(st, &format!("B{}", i / 100), ms, &r, ids.get(i as usize % 3).copied().flatten(), src)?;
        }
        b.commit(src, 0, 0)?;
        Ok(s)
    }

    /// (station, batch, measured_ms, record, setup).
    type Row = (String, String, i64, Record, Option<i64>);

    fn read_all(dir: &Path) -> Result<Vec<Row>, Error> {
        let mut got = Vec::new();
        for p in part_files(dir)? {
            read_part(&p, None, &COLUMNS.map(|c| c.0), |x| {
                got.push((p.station.clone(), x.batch.to_owned(), x.measured_ms, x.record, x.setup_id));
            })?;
        }
        Ok(got)
    }

    /// Export then read back: every field of every record, the setups, exactly.
    #[test]
    fn the_store_round_trips_through_parquet_exactly() -> Result<(), Error> {
        let dir = tempfile::tempdir().map_err(err)?;
        let s = store_with_records(dir.path())?;
        let ds = dir.path().join("ds");
        assert_eq!(export_store(&s, &Filter::default(), &ds)?, 500);
        let stations = s.stations()?;
        let mut want = Vec::new();
        s.for_each(&Filter::default(), |x| {
            let st = stations.get(&x.station_id).cloned().unwrap_or_default();
            want.push((st, x.batch, x.measured_ms, x.record, x.setup_id));
        })?;
        let mut got = read_all(&ds)?;
        let key = |w: &Row| (w.0.clone(), w.3.unit_id, w.3.seq);
        want.sort_by_key(key);
        got.sort_by_key(key);
        assert_eq!(got, want);
        assert_eq!(read_setups(&ds)?, s.setups()?);
        // The station name with a slash and a space is one partition folder.
        assert!(ds.join("readings").join("station=bench%20a%2F1").is_dir());
        // No temporary folder is left beside it; a second export into it is refused.
        let left: Vec<_> =
            std::fs::read_dir(dir.path()).map_err(err)?.filter_map(Result::ok).map(|e| e.file_name()).collect();
        assert!(left.iter().all(|n| !n.to_string_lossy().contains(".tmp-")), "{left:?}");
        let again = export_store(&s, &Filter::default(), &ds).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(again.contains("exists already"), "{again}");
        Ok(())
    }

    /// A wrong type, a missing column, a corrupt footer and a row in the
    /// wrong day partition: one line naming the file and the column.
    #[test]
    fn a_footer_pointing_outside_the_file_is_named_not_a_crash() -> Result<(), Error> {
        // Found by the `parquet` fuzz target: a footer with a negative chunk
        // offset made the parquet crate assert (the process ended).
        let dir = tempfile::tempdir().map_err(err)?;
        let path = dir.path().join("part-0.parquet");
        let found = include_bytes!("../../fuzz/found/parquet/negative-chunk-offset");
        std::fs::write(&path, found).map_err(err)?;
        let part = PartFile { path: path.clone(), station: "bay-1".into(), day: 20_089 };
        let e = read_part(&part, None, &COLUMNS.map(|c| c.0), |_| {}).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.contains(&path.display().to_string()) && e.contains("lies outside the file"), "{e}");
        assert!(row_groups(&part).is_err());
        // Found by the same target: a damaged page made the decoder overflow a
        // shift (with overflow checks on, as in tests): one error, not a crash.
        std::fs::write(&path, include_bytes!("../../fuzz/found/parquet/shift-overflow-in-page")).map_err(err)?;
        let e = read_part(&part, None, &COLUMNS.map(|c| c.0), |_| {}).err().map(|e| e.to_string()).unwrap_or_default();
        assert!(e.contains(&path.display().to_string()) && !e.contains('\n'), "{e}");
        Ok(())
    }

    #[test]
    fn bad_files_are_named_with_their_column() -> Result<(), Error> {
        let dir = tempfile::tempdir().map_err(err)?;
        let s = store_with_records(dir.path())?;
        let ds = dir.path().join("ds");
        export_store(&s, &Filter::default(), &ds)?;
        let parts = part_files(&ds)?;
        let victim = parts.first().map(|p| p.path.clone()).ok_or_else(|| err("no part"))?;
        let msg = |ds: &Path| -> String {
            let r: Result<Vec<_>, Error> = read_all(ds);
            r.err().map(|e| e.to_string()).unwrap_or_default()
        };
        // A column of another type.
        let schema = Arc::new(Schema::new(vec![Field::new("unit_id", DataType::Utf8, false)]));
        let b = RecordBatch::try_new(schema, vec![Arc::new(StringArray::from(vec!["x"])) as ArrayRef]).map_err(err)?;
        write_with(&victim, &b, WriterProperties::default())?;
        let m = msg(&ds);
        assert!(
            m.contains(&victim.display().to_string()) && m.contains("column unit_id") && m.contains("not Int64"),
            "{m}"
        );
        // A missing column.
        let schema = Arc::new(Schema::new(vec![Field::new("unit_id", DataType::Int64, false)]));
        let b = RecordBatch::try_new(schema, vec![Arc::new(Int64Array::from(vec![1])) as ArrayRef]).map_err(err)?;
        write_with(&victim, &b, WriterProperties::default())?;
        let m = msg(&ds);
        assert!(m.contains("column seq: missing"), "{m}");
        // A corrupt footer.
        let mut bytes = std::fs::read(&victim).map_err(err)?;
        let n = bytes.len();
        if let Some(b) = bytes.get_mut(n - 6) {
            *b ^= 0xFF;
        }
        std::fs::write(&victim, &bytes).map_err(err)?;
        let m = msg(&ds);
        assert!(m.contains(&victim.display().to_string()) && m.contains("not a readable Parquet file"), "{m}");
        assert!(!m.contains('\n'), "one line: {m}");
        // Rows of another day under this day's folder.
        std::fs::remove_file(&victim).map_err(err)?;
        let other = parts.get(1).ok_or_else(|| err("no second part"))?;
        let wrong_day =
            parts.iter().find(|p| p.day != other.day && p.station == other.station).ok_or_else(|| err("one day"))?;
        std::fs::copy(&other.path, wrong_day.path.with_file_name("part-x.parquet")).map_err(err)?;
        let m = msg(&ds);
        assert!(m.contains("column measured_ms") && m.contains("outside its partition day="), "{m}");
        Ok(())
    }
}
