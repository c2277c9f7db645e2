//! `rchold ingest LOG…`: measurement logs into the store, each file all or
//! nothing and each file once.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::collect::{self, Ingested};
use host_check::data::mapping::Mapping;
use host_check::data::store::Store;

use crate::args::{bar, emit, SetupArgs};

/// Options of `rchold ingest`.
#[derive(clap::Args)]
pub struct Args {
    /// Log files.
    #[arg(required = true)]
    files: Vec<PathBuf>,
    #[command(flatten)]
    setup: SetupArgs,
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
    /// Read another tester's CSV logs through this mapping file (TOML: columns, units,
    /// verdict words, time format and zone; see the README).
    #[arg(long, value_name = "FILE")]
    map: Option<PathBuf>,
}

/// Stores each file and prints what it did; exit code 2 when any file was refused.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let mapping = a.map.as_deref().map(Mapping::load).transpose()?;
    let mut store = Store::open(&a.db)?;
    let setup_id = a.setup.id_in(&mut store)?;
    let progress = bar(a.files.len() as u64, "files");
    let mut failed = 0;
    for f in &a.files {
        progress.set_message(host_check::fmt::terminal(&f.display().to_string()).into_owned());
        let result = match &mapping {
            Some(m) => collect::ingest_mapped(&mut store, f, setup_id, m),
            None => collect::ingest(&mut store, f, setup_id),
        };
        let line = match result {
            Ok(Ingested::Stored { written, lines }) => format!(
                "{}: {lines} lines, {} stored{}, {} already stored (source {})\n",
                f.display(),
                written.stored,
                crate::cmd::listen::retests(written.conflicts),
                written.duplicates,
                written.source_id
            ),
            Ok(Ingested::AlreadyStored { source_id }) => {
                format!("{}: already stored as source {source_id}; nothing to do\n", f.display())
            }
            Err(e) => {
                failed += 1;
                progress.suspend(|| crate::args::warn(&format!("rchold: {e} (nothing of this file was stored)")));
                String::new()
            }
        };
        progress.suspend(|| emit(&line))?;
        progress.inc(1);
    }
    progress.finish_and_clear();
    Ok(if failed > 0 { ExitCode::from(2) } else { ExitCode::SUCCESS })
}
