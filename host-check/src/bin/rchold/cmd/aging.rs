//! `rchold aging`: each field unit's capacitance trend, rate per year and
//! forecast end of life.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::store::Store;
use host_check::report::aging::{self, FleetTally, Status, UnitTrend};
use host_check::report::archive::aging_from_parquet;
use host_check::report::files::{aging_from_summaries, each_record, needing_attention, with_points, ReportDir};

use crate::args::{emit, emit_json, end_of_life, Select};

/// Options of `rchold aging`.
#[derive(clap::Args)]
pub struct Args {
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
    /// Read this Parquet dataset (`rchold export --parquet`) instead of the store.
    #[arg(long, value_name = "DIR")]
    parquet: Option<PathBuf>,
    #[command(flatten)]
    select: Select,
    /// Only this unit.
    #[arg(long)]
    unit: Option<u32>,
    /// End of life: this loss of capacitance from nominal ("-20%").
    #[arg(long, default_value = "-20%", allow_hyphen_values = true)]
    limit: String,
    /// Flag units whose forecast falls within this many months after the last measurement.
    #[arg(long, default_value_t = 12)]
    months: u32,
    /// Write aging.txt and the trend SVGs into this folder.
    #[arg(long, value_name = "DIR")]
    out: Option<PathBuf>,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
    /// Rows in the text report.
    #[arg(long, default_value_t = 30)]
    rows: usize,
    /// Exit with 1 (after the report) when any unit is beyond its limit (`beyond`), or
    /// beyond it or at risk within --months (`at-risk`), for cron or CI to raise an alert.
    #[arg(long, value_parser = ["beyond", "at-risk"])]
    alert: Option<String>,
}

/// Prints the report.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let limit_ratio = end_of_life("limit", &a.limit)?;
    let mut filter = a.select.filter()?;
    filter.unit_id = a.unit;
    if let Some(dir) = &a.parquet {
        if a.out.is_some() {
            anyhow::bail!(
                "--out draws each unit's points, which a Parquet dataset's sums do not keep: report from the store"
            );
        }
        let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get);
        let all = a.select.station.is_some();
        let report = aging_from_parquet(dir, &filter, all, limit_ratio, a.months, threads)?;
        return finish(&a, &report);
    }
    let store = Store::open_existing(&a.db)?;
    // Without --station, a fixture's boards (measured once, no drift tracked) are left out.
    let all = a.select.station.is_some();
    let charted = |r: &aging::FleetReport| -> Vec<(String, u32)> {
        let units: Vec<&UnitTrend> = if a.unit.is_some() { r.units.iter().collect() } else { needing_attention(r) };
        units.iter().map(|u| (u.station.clone(), u.unit)).collect()
    };
    let report = if filter.batch.is_none() && filter.from_ms.is_none() && filter.to_ms.is_none() {
        // The per-unit sums kept at ingest: one row per unit.
        let mut r = aging_from_summaries(&store, a.select.station.as_deref(), a.unit, all, limit_ratio, a.months)?;
        if a.out.is_some() {
            let units = charted(&r);
            with_points(&store, &mut r, &units, all)?;
        }
        r
    } else {
        let setups = store.setups()?;
        let mut tally = FleetTally::new(&setups);
        each_record(&store, &filter, |station, s, role| {
            if all || role.aging {
                tally.add(station, s.measured_ms, &s.record, s.setup_id);
            }
        })?;
        tally.finish(limit_ratio, a.months)
    };
    if let Some(out) = &a.out {
        let units: Vec<&UnitTrend> =
            if a.unit.is_some() { report.units.iter().collect() } else { needing_attention(&report) };
        let mut d = ReportDir::create(out)?;
        d.aging(&report, a.rows, &units)?;
        d.commit()?;
    }
    finish(&a, &report)
}

/// Prints the report; exit code 1 when `--alert` finds units.
fn finish(a: &Args, report: &aging::FleetReport) -> anyhow::Result<ExitCode> {
    if a.json {
        emit_json(report)?;
    } else {
        emit(&aging::render_text(report, a.rows))?;
    }
    let flagged = report
        .units
        .iter()
        .filter(|u| match a.alert.as_deref() {
            Some("beyond") => u.status == Status::BeyondLimit,
            Some(_) => matches!(u.status, Status::BeyondLimit | Status::AtRisk),
            None => false,
        })
        .count();
    if flagged > 0 {
        eprintln!(
            "rchold: alert: {flagged} of {} units {}",
            report.units.len(),
            if a.alert.as_deref() == Some("beyond") { "beyond the limit" } else { "beyond the limit or at risk" }
        );
        return Ok(ExitCode::from(1));
    }
    Ok(ExitCode::SUCCESS)
}
