//! `rchold curve STAGE.toml --plot FILE`: the node voltage through press
//! and release as an SVG chart.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::curve::curve_svg;

use crate::args::{stage, stage_name, write};

/// Options of `rchold curve`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// Where to write the SVG.
    #[arg(long, value_name = "FILE")]
    plot: PathBuf,
}

/// Writes the chart.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let sf = stage(&a.stage)?;
    write(&a.plot, curve_svg(&sf, &stage_name(&sf, &a.stage))?)?;
    Ok(ExitCode::SUCCESS)
}
