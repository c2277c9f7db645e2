//! `rchold window STAGE.toml --clock F`: the firmware's pass window and
//! timings in ticks, as text, a Rust constant, JSON or the settings blob;
//! the fixture's window unless `--field`.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::window::{render, Emit};
use host_check::stage::file::Purpose;
use host_check::Error;

use crate::args::{emit, stage, stage_name, tester, write};

/// Options of `rchold window`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// The firmware's tick clock ("1MHz", "32.768k", "16e6").
    #[arg(long)]
    clock: String,
    /// Extra margin on each side of the window ("2%").
    #[arg(long, default_value = "2%")]
    guard: String,
    /// Time between two reads of the output ("100us"); default: 1/1000 of the nominal hold (until the output turns on, the engine polls at 1/50 of the nominal turn-on latency).
    #[arg(long)]
    poll: Option<String>,
    /// What to write: text, rust (a const), json, or bin (the blob the firmware loads; needs --out).
    #[arg(long, default_value = "text", value_parser = ["text", "rust", "json", "bin"])]
    emit: String,
    /// Write to this file instead of standard output.
    #[arg(long)]
    out: Option<PathBuf>,
    /// The field window (the environment's temperatures and the aging horizon) instead of the
    /// fixture's (new parts at the fixture's temperature, `[fixture]` or the reference).
    #[arg(long)]
    field: bool,
}

/// Writes the window.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let sf = stage(&a.stage)?;
    let purpose = if a.field { Purpose::Field } else { Purpose::Fixture };
    let (setup, _, _) = tester(&sf, purpose, &a.clock, &a.guard, a.poll.as_deref())?;
    let how = match a.emit.as_str() {
        "rust" => Emit::Rust,
        "json" => Emit::Json,
        "bin" => Emit::Bin,
        _ => Emit::Text,
    };
    match (how, &a.out) {
        (Emit::Bin, Some(out)) => write(out, setup.to_blob())?,
        (Emit::Bin, None) => return Err(Error::Input("--emit bin writes a binary blob: give --out FILE".into()).into()),
        (_, Some(out)) => write(out, render(&setup, purpose, how, &stage_name(&sf, &a.stage)))?,
        (_, None) => emit(&render(&setup, purpose, how, &stage_name(&sf, &a.stage)))?,
    }
    Ok(ExitCode::SUCCESS)
}
