//! `rchold aging`: each field unit's capacitance trend, rate per year and
//! forecast end of life.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::store::Store;
use host_check::report::aging::{self, FleetTally, UnitTrend};
use host_check::report::files::{needing_attention, ReportDir};

use crate::args::{bad, emit, emit_json, fraction, Select};

/// Options of `rchold aging`.
#[derive(clap::Args)]
pub struct Args {
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
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
}

/// Prints the report.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let accepted = "a loss of 0 % … 100 % (\"-20%\")";
    let loss = fraction("limit", a.limit.trim_start_matches('-'), f64::MIN_POSITIVE, 1.0 - f64::EPSILON, accepted)
        .map_err(|_| bad("limit", &a.limit, "not a loss of capacitance", accepted))?;
    let mut filter = a.select.filter()?;
    filter.unit_id = a.unit;
    let store = Store::open_existing(&a.db)?;
    let setups = store.setups()?;
    let stations = store.stations()?;
    let mut tally = FleetTally::new(&setups);
    let unknown = String::from("?");
    store.for_each(&filter, |s| {
        tally.add(stations.get(&s.station_id).unwrap_or(&unknown), s.measured_ms, &s.record, s.setup_id);
    })?;
    let report = tally.finish(1.0 - loss, a.months);
    if let Some(out) = &a.out {
        let units: Vec<&UnitTrend> =
            if a.unit.is_some() { report.units.iter().collect() } else { needing_attention(&report) };
        ReportDir::create(out)?.aging(&report, a.rows, &units)?;
    }
    if a.json {
        emit_json(&report)?;
    } else {
        emit(&aging::render_text(&report, a.rows))?;
    }
    Ok(ExitCode::SUCCESS)
}
