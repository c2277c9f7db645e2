//! `rchold synth-log --out FILE`: a synthetic measurement log (not real data).

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::sim::synth;

use crate::args::within;

/// Options of `rchold synth-log`.
#[derive(clap::Args)]
pub struct Args {
    /// Where to write it.
    #[arg(long)]
    out: PathBuf,
    /// Measurements.
    #[arg(long, default_value_t = 1_000_000)]
    records: u64,
    /// Stations.
    #[arg(long, default_value_t = 4)]
    stations: u32,
    /// Seed.
    #[arg(long, default_value_t = 1)]
    seed: u64,
}

/// Writes the log.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let stations = within("stations", a.stations, 1..=1000, "1 … 1000")?;
    synth::write_log(&a.out, a.records, stations, a.seed)?;
    eprintln!("{}: {} synthetic measurements (not real data)", a.out.display(), a.records);
    Ok(ExitCode::SUCCESS)
}
