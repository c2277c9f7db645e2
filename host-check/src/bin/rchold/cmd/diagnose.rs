//! `rchold diagnose STAGE.toml --hold T [--turn-on T]`: which single part
//! explains a board's measurements.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::diagnose::{diagnose, render};

use crate::args::{emit, emit_json, stage, stage_name, value};

/// Options of `rchold diagnose`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// The measured hold ("392ms", "24.97s").
    #[arg(long)]
    hold: String,
    /// The measured turn-on latency, press to output active ("25us"); without it the hold
    /// alone cannot tell R, C and the thresholds apart.
    #[arg(long)]
    turn_on: Option<String>,
    /// How finely the latency was read ("1us"): one tick plus one poll of the tester.
    #[arg(long, default_value = "1us")]
    resolution: String,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
}

/// Prints the diagnosis.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let sf = stage(&a.stage)?;
    let hold = value("hold", &a.hold, &["s"], 1e-9, 1e6, "1 ns to 1,000,000 s")?;
    let on = a.turn_on.as_deref().map(|t| value("turn-on", t, &["s"], 0.0, 1e4, "0 s to 10,000 s")).transpose()?;
    let res = value("resolution", &a.resolution, &["s"], 1e-12, 1.0, "1 ps to 1 s")?;
    let d = diagnose(&sf, hold, on, res)?;
    if a.json {
        emit_json(&d)?;
    } else {
        emit(&render(&stage_name(&sf, &a.stage), &d))?;
    }
    Ok(ExitCode::SUCCESS)
}
