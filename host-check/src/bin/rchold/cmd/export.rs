//! `rchold export`: the store's records (or logs') as a Parquet dataset that
//! rchold's reports and general-purpose engines (Spark, DataFusion) read.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::archive;
use host_check::data::store::Store;

use crate::args::{Select, SetupArgs};

/// Options of `rchold export`.
#[derive(clap::Args)]
pub struct Args {
    /// Write a Hive-partitioned Parquet dataset into this new folder
    /// (readings/station=…/day=…/part-N.parquet, setups/, codes/).
    #[arg(long, value_name = "DIR")]
    parquet: PathBuf,
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
    /// Export these measurement logs instead of the store.
    #[arg(long, value_name = "FILE", num_args = 1..)]
    csv: Vec<PathBuf>,
    #[command(flatten)]
    select: Select,
    #[command(flatten)]
    setup: SetupArgs,
}

/// Writes the dataset and says how many records went into it.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let started = std::time::Instant::now();
    let n = if a.csv.is_empty() {
        let store = Store::open_existing(&a.db)?;
        archive::export_store(&store, &a.select.filter()?, &a.parquet)?
    } else {
        if a.select.station.is_some() || a.select.batch.is_some() || a.select.from.is_some() || a.select.to.is_some() {
            anyhow::bail!("--station, --batch, --from and --to select from the store; logs are exported whole");
        }
        let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get);
        archive::export_logs(&a.csv, a.setup.setup()?.as_ref(), &a.parquet, threads)?
    };
    crate::args::warn(&format!("{}: {n} records in {:.2} s", a.parquet.display(), started.elapsed().as_secs_f64()));
    Ok(ExitCode::SUCCESS)
}
