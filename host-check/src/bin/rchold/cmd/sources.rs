//! `rchold sources`: each stream and log in the store, with its counts;
//! `--units ID`: a stream's units and how their sequence numbers ran.

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
    /// List the units of stream ID: sequence numbers received, skipped, not above the one before, and restarts.
    #[arg(long, value_name = "ID")]
    units: Option<i64>,
}

/// Prints the table.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let store = Store::open_existing(&a.db)?;
    if let Some(id) = a.units {
        return units(&store, &a.db, id);
    }
    let mut o = format!(
        "{} (schema {}), {} measurements\n  {:>4} {:<7} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9} {:>11}  name\n",
        a.db.display(),
        store.schema_version()?,
        store.count()?,
        "id",
        "kind",
        "stored",
        "repeated",
        "retests",
        "refused",
        "bad",
        "skipped",
        "back",
        "restarts",
        "bytes"
    );
    for s in store.sources()? {
        let _ = writeln!(
            o,
            "  {:>4} {:<7} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9} {:>9} {:>11}  {}",
            s.id,
            s.kind,
            s.records,
            s.duplicates,
            s.conflicts,
            s.refused,
            s.bad_frames,
            s.seq_missing,
            s.seq_back,
            s.restarts,
            s.bytes,
            s.name
        );
    }
    emit(&o)?;
    Ok(ExitCode::SUCCESS)
}

/// The units of one stream, the most skipped numbers first.
fn units(store: &Store, db: &std::path::Path, id: i64) -> anyhow::Result<ExitCode> {
    let Some(source) = store.sources()?.into_iter().find(|s| s.id == id) else {
        return Err(host_check::Error::Input(format!(
            "--units {id}: no such source in {} (see rchold sources)",
            db.display()
        ))
        .into());
    };
    let units = store.source_units(id)?;
    let n = |k: usize, what: &str| format!("{k} {what}{}", if k == 1 { "" } else { "s" });
    let mut o = format!(
        "source {id} ({} {}): {}; {} numbers skipped in {}, {} not above the one before, {} restarts\n  {:>10} {:>10} {:>10} {:>9} {:>9} {:>9} {:>10} {:>9}\n",
        source.kind,
        source.name,
        n(units.len(), "unit"),
        source.seq_missing,
        n(usize::try_from(source.gap_units).unwrap_or(usize::MAX), "unit"),
        source.seq_back,
        source.restarts,
        "unit",
        "first seq",
        "last seq",
        "received",
        "skipped",
        "back",
        "last boot",
        "restarts"
    );
    for (unit, u) in units {
        let _ = writeln!(
            o,
            "  {unit:>10} {:>10} {:>10} {:>9} {:>9} {:>9} {:>10} {:>9}",
            u.first_seq, u.last_seq, u.received, u.missing, u.back, u.boot, u.restarts
        );
    }
    emit(&o)?;
    Ok(ExitCode::SUCCESS)
}
