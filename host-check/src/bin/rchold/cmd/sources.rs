//! `rchold sources`: each stream and log in the store, with its counts.

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::ExitCode;

use host_check::data::store::Store;

use crate::args::emit;

/// Options of `rchold sources`.
#[derive(clap::Args)]
pub struct Args {
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
}

/// Prints the table.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let store = Store::open_existing(&a.db)?;
    let mut o = format!(
        "{} (schema {}), {} measurements\n  {:>4} {:<7} {:>9} {:>9} {:>9} {:>9} {:>11}  name\n",
        a.db.display(),
        store.schema_version()?,
        store.count()?,
        "id",
        "kind",
        "stored",
        "repeated",
        "refused",
        "bad",
        "bytes"
    );
    for s in store.sources()? {
        let _ = writeln!(
            o,
            "  {:>4} {:<7} {:>9} {:>9} {:>9} {:>9} {:>11}  {}",
            s.id, s.kind, s.records, s.duplicates, s.refused, s.bad_frames, s.bytes, s.name
        );
    }
    emit(&o)?;
    Ok(ExitCode::SUCCESS)
}
