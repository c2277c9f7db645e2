//! `rchold yield`: fixture yield from the store or straight from logs —
//! verdicts, yield per station, batch and day, Cp/Cpk, rejects and the
//! `f64` re-check.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::log;
use host_check::data::store::{Filter, Store};
use host_check::report::archive::yield_from_parquet;
use host_check::report::files::{each_record_split, yield_from_summaries, ReportDir};
use host_check::report::yields::{self, Tally, YieldReport};
use host_check::Error;

use crate::args::{emit, emit_json, fraction, Select, SetupArgs};

/// Options of `rchold yield`.
#[derive(clap::Args)]
pub struct Args {
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
    /// Read these measurement logs directly instead of the store.
    #[arg(long, value_name = "FILE", num_args = 1.., conflicts_with = "parquet")]
    csv: Vec<PathBuf>,
    /// Read this Parquet dataset (`rchold export --parquet`) instead of the store.
    #[arg(long, value_name = "DIR")]
    parquet: Option<PathBuf>,
    #[command(flatten)]
    select: Select,
    #[command(flatten)]
    setup: SetupArgs,
    /// Write yield.txt, the hold histograms and rejects.csv into this folder.
    #[arg(long, value_name = "DIR")]
    out: Option<PathBuf>,
    /// Skip the f64 re-check of every verdict.
    #[arg(long)]
    skip_recheck: bool,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
    /// Rows per table in the text report.
    #[arg(long, default_value_t = 20)]
    rows: usize,
    /// Exit with 1 (after the report) when the yield of all stations is below this ("98%"),
    /// for cron or CI to raise an alert.
    #[arg(long, value_name = "PERCENT")]
    alert_below: Option<String>,
}

type RejectLog = Option<Box<dyn Write + Send>>;

fn from_store(a: &Args, filter: &Filter, reject_log: RejectLog) -> Result<YieldReport, Error> {
    let store = Store::open_existing(&a.db)?;
    let (given, override_id) = a.setup.replacing()?;
    // Without a re-check or a replacing stage, on whole days: the summaries kept at ingest.
    if a.skip_recheck && override_id.is_none() && filter.by_days() {
        return yield_from_summaries(&store, filter, a.select.station.is_some(), reject_log);
    }
    // A --stage given here replaces the stored setups (id 0 for all records).
    let setups = if override_id.is_some() { given } else { store.setups()? };
    let mut tally = Tally::new(&setups, !a.skip_recheck, reject_log);
    // A Mutex only to share it: forking takes no time.
    let proto = std::sync::Mutex::new(tally.fork());
    // Without --station, records measured against a field setup are aging's only.
    let all = a.select.station.is_some();
    let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get);
    each_record_split(
        &store,
        filter,
        threads,
        || proto.lock().unwrap_or_else(std::sync::PoisonError::into_inner).fork(),
        |t, station, s, role| {
            if all || role.yields {
                t.add(station, &s.batch, s.measured_ms, &s.record, override_id.or(s.setup_id));
            }
        },
        |t| tally.merge(t),
    )?;
    tally.finish().map_err(|e| Error::io("rejects.csv", e))
}

fn from_logs(a: &Args, filter: &Filter, reject_log: &mut yields::RejectSink<'_>) -> Result<YieldReport, Error> {
    let (setups, id) = a.setup.replacing()?;
    let keep = |l: &log::Line<'_>| {
        filter.station.as_deref().is_none_or(|s| s == l.station)
            && filter.batch.as_deref().is_none_or(|b| b == l.batch)
            && filter.from_ms.is_none_or(|t| l.measured_ms >= t)
            && filter.to_ms.is_none_or(|t| l.measured_ms < t)
    };
    let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get);
    yields::tally_logs(&a.csv, &setups, id, !a.skip_recheck, reject_log, &keep, threads)
}

/// Prints the report; exit code 1 when the `f64` re-check disagrees with a verdict.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let filter = a.select.filter()?;
    let floor = a.alert_below.as_deref().map(|t| fraction("alert-below", t, 0.0, 1.0, "0 % to 100 %")).transpose()?;
    a.setup.setup()?;
    let mut dir = a.out.as_deref().map(ReportDir::create).transpose()?;
    // Started afresh on each call (a read of logs that finds repeats makes a second pass).
    let mut reject_log = || -> Result<RejectLog, Error> {
        Ok(match &mut dir {
            Some(d) => Some(Box::new(std::io::BufWriter::new(d.create_file("rejects.csv")?))),
            None => None,
        })
    };
    let report = if let Some(dir) = &a.parquet {
        let reject_log = reject_log()?;
        let (given, id) = a.setup.replacing()?;
        let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get);
        let given = id.map(|id| (given, id));
        let all = a.select.station.is_some();
        yield_from_parquet(dir, &filter, given, all, !a.skip_recheck, reject_log, threads)?
    } else if a.csv.is_empty() {
        from_store(&a, &filter, reject_log()?)?
    } else {
        from_logs(&a, &filter, &mut reject_log)?
    };
    if let Some(mut d) = dir {
        d.yields(&report, a.rows)?;
        d.commit()?;
    }
    if a.json {
        emit_json(&report)?;
    } else {
        emit(&yields::render_text(&report, a.rows))?;
    }
    let disagree = report.recheck.as_ref().is_some_and(|r| r.disagreements_total > 0);
    let low = floor.filter(|&f| report.all.total > 0 && (report.all.passed() as f64) < f * report.all.total as f64);
    if let Some(f) = low {
        eprintln!(
            "rchold: alert: yield {:.2} % is below {:.2} % ({} of {} passed)",
            100.0 * report.all.passed() as f64 / report.all.total as f64,
            100.0 * f,
            report.all.passed(),
            report.all.total
        );
    }
    Ok(if disagree || low.is_some() { ExitCode::from(1) } else { ExitCode::SUCCESS })
}
