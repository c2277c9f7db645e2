//! `rchold press STAGE.toml`: hold against press length, and a retrigger.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::press::{render, retrigger, table};

use crate::args::{emit, stage, stage_name, value};

/// Options of `rchold press`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// Press a second time this long after releasing the first ("300m").
    #[arg(long)]
    again_after: Option<String>,
    /// Length of the first press ("50m"); default: the stage file's press.
    #[arg(long)]
    first: Option<String>,
    /// Length of the second press; default: the first's.
    #[arg(long)]
    second: Option<String>,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
}

/// Prints the table and the retrigger.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let sf = stage(&a.stage)?;
    let len = |opt: &str, v: &Option<String>, default: f64| {
        v.as_deref().map_or(Ok(default), |t| value(opt, t, &["s"], 1e-9, 86_400.0, "1 ns to 24 h"))
    };
    let first = len("first", &a.first, sf.stage.press_ns as f64 * 1e-9)?;
    let second = len("second", &a.second, first)?;
    let again = match &a.again_after {
        Some(t) => Some(retrigger(&sf, first, value("again-after", t, &["s"], 0.0, 86_400.0, "0 s to 24 h")?, second)?),
        None => None,
    };
    let rows = table(&sf, first)?;
    emit(&render(&stage_name(&sf, &a.stage), &rows, again.as_ref(), a.json))?;
    Ok(ExitCode::SUCCESS)
}
