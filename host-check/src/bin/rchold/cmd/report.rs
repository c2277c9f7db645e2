//! `rchold report --db F --out DIR`: the whole report of any store — the
//! yield of its fixture records, the aging of its field units, their files
//! and charts, and the self-contained HTML page the demo writes.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::store::Store;
use host_check::report::files::store_report;

use crate::args::{emit, end_of_life, Select};

/// Options of `rchold report`.
#[derive(clap::Args)]
pub struct Args {
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
    /// Folder for report.html, yield.txt, aging.txt, rejects.csv and the charts.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    #[command(flatten)]
    select: Select,
    /// End of life: this loss of capacitance from nominal ("-20%").
    #[arg(long, default_value = "-20%", allow_hyphen_values = true)]
    limit: String,
    /// Flag units whose forecast falls within this many months after the last measurement.
    #[arg(long, default_value_t = 12)]
    months: u32,
}

/// Writes the report folder and says what is in it.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let limit_ratio = end_of_life("limit", &a.limit)?;
    let store = Store::open_existing(&a.db)?;
    let (y, f, files) = store_report(&store, &a.select.filter()?, &a.out, limit_ratio, a.months)?;
    emit(&format!(
        "{}: {} fixture measurements ({} passed), {} field units; {} files in {}\n",
        a.db.display(),
        y.all.total,
        y.all.passed(),
        f.units.len(),
        files.len(),
        a.out.display()
    ))?;
    Ok(ExitCode::SUCCESS)
}
