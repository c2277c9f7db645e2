//! `rchold compare A.toml B.toml`: two stages side by side, differences marked.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::compare::{render, side};

use crate::args::{emit, stage, stage_name};

/// Options of `rchold compare`.
#[derive(clap::Args)]
pub struct Args {
    /// The first stage file (A).
    a: PathBuf,
    /// The second stage file (B).
    b: PathBuf,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
}

/// Prints the comparison.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let (sa, sb) = (stage(&a.a)?, stage(&a.b)?);
    let (x, y) = (side(&sa, &stage_name(&sa, &a.a))?, side(&sb, &stage_name(&sb, &a.b))?);
    emit(&render(&x, &y, a.json))?;
    Ok(ExitCode::SUCCESS)
}
