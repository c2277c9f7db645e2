//! `rchold synth-log`: a synthetic measurement log or fleet (not real data),
//! as CSV or as a Parquet dataset.

use std::collections::HashMap;
use std::io::Write as _;
use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::archive::ArchiveWriter;
use host_check::data::log;
use host_check::sim::synth;
use host_check::Error;

use crate::args::within;

/// Options of `rchold synth-log`.
#[derive(clap::Args)]
#[command(group(clap::ArgGroup::new("to").required(true).args(["out", "parquet"])))]
pub struct Args {
    /// Write a measurement log (CSV) here.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Write a Parquet dataset (as `rchold export --parquet`) into this new folder;
    /// its records are measured against the example's fixture setup.
    #[arg(long, value_name = "DIR")]
    parquet: Option<PathBuf>,
    /// Fixture measurements (without --fleet).
    #[arg(long, default_value_t = 1_000_000)]
    records: u64,
    /// Stations (without --fleet).
    #[arg(long, default_value_t = 4)]
    stations: u32,
    /// A fleet of this many field units, one record per unit and day, instead of fixture boards.
    #[arg(long, value_name = "UNITS")]
    fleet: Option<u32>,
    /// Days the fleet reports (with --fleet).
    #[arg(long, default_value_t = 100)]
    days: u32,
    /// Seed.
    #[arg(long, default_value_t = 1)]
    seed: u64,
}

/// Writes the log or dataset.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let (what, n) = match (a.fleet, &a.out, &a.parquet) {
        (None, Some(out), _) => {
            let stations = within("stations", a.stations, 1..=1000, "1 … 1000")?;
            synth::write_log(out, a.records, stations, a.seed)?;
            (out.clone(), a.records)
        }
        (Some(units), Some(out), _) => {
            let units = within("fleet", units, 1..=100_000_000, "1 … 100000000")?;
            let days = within("days", a.days, 1..=36_600, "1 … 36600")?;
            let io = |e| Error::io(out, e);
            let mut w = std::io::BufWriter::with_capacity(1 << 20, std::fs::File::create(out).map_err(io)?);
            log::write_header(&mut w).map_err(io)?;
            synth::fleet(units, days, 0, units, a.seed, |st, b, ms, r| {
                log::write_line(&mut w, ms, st, b, r).map_err(io)
            })?;
            w.flush().map_err(io)?;
            (out.clone(), u64::from(units) * u64::from(days))
        }
        (fleet, None, Some(dir)) => {
            let setup = synth::example_setup()?;
            let mut w = ArchiveWriter::create(dir)?;
            match fleet {
                None => {
                    // A fixture log straight into the dataset: written as CSV first would double the disk.
                    let tmp = dir.with_extension("synth.csv");
                    let stations = within("stations", a.stations, 1..=1000, "1 … 1000")?;
                    synth::write_log(&tmp, a.records, stations, a.seed)?;
                    w.abandon();
                    let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get);
                    let r =
                        host_check::data::archive::export_logs(std::slice::from_ref(&tmp), Some(&setup), dir, threads);
                    let _ = std::fs::remove_file(&tmp);
                    (dir.clone(), r?)
                }
                Some(units) => {
                    let units = within("fleet", units, 1..=100_000_000, "1 … 100000000")?;
                    let days = within("days", a.days, 1..=36_600, "1 … 36600")?;
                    let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get) as u32;
                    let share = units.div_ceil(threads);
                    let parts: Vec<Result<ArchiveWriter, Error>> = std::thread::scope(|s| {
                        let hs: Vec<_> = (0..threads)
                            .map(|k| {
                                let mut mine = w.sibling(&k.to_string());
                                s.spawn(move || {
                                    synth::fleet(units, days, k * share, share, a.seed, |st, b, ms, r| {
                                        mine.push(st, b, ms, r, 1)
                                    })
                                    .map(|()| mine)
                                })
                            })
                            .collect();
                        hs.into_iter()
                            .map(|h| h.join().unwrap_or_else(|_| Err(Error::Input("a writing thread failed".into()))))
                            .collect()
                    });
                    for p in parts {
                        match p {
                            Ok(p) => w.absorb(p)?,
                            Err(e) => {
                                w.abandon();
                                return Err(e.into());
                            }
                        }
                    }
                    let n = w.finish(&HashMap::from([(1, setup)]))?;
                    (dir.clone(), n)
                }
            }
        }
        (_, None, None) => anyhow::bail!("give --out FILE or --parquet DIR"),
    };
    crate::args::warn(&format!("{}: {n} synthetic measurements (not real data)", what.display()));
    Ok(ExitCode::SUCCESS)
}
