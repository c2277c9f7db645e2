//! `rchold eval STAGE.toml`: hold, latency, active time, window and warnings.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context as _;
use host_check::design::eval;
use host_check::stage::netlist;

use crate::args::{emit, emit_json, stage, stage_name};

/// Options of `rchold eval`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
    /// Also write the stage as a SPICE netlist (ngspice batch mode: `ngspice -b FILE`).
    #[arg(long, value_name = "FILE")]
    netlist: Option<PathBuf>,
}

/// Prints the report; exit code 1 when the stage does not work as a hold stage.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let sf = stage(&a.stage)?;
    if let Some(out) = &a.netlist {
        let text = netlist::single_press(&sf.stage, &stage_name(&sf, &a.stage)).text;
        std::fs::write(out, text).with_context(|| format!("writing the netlist to {}", out.display()))?;
    }
    let report = eval::evaluate(&sf);
    if let Err(e @ rc_model::Error::OutOfDomain(_)) = &report.nominal {
        return Err(host_check::Error::from(sf.model_error(*e)).into());
    }
    if a.json {
        emit_json(&eval::render_json(&sf, &report))?;
    } else {
        emit(&eval::render_text(&sf, &report))?;
    }
    if let Some(Err(f)) = &report.window {
        // The same refusal, and exit code, as every other command gives this corner.
        return Err(sf.corner_refusal(f).into());
    }
    Ok(if report.nominal.is_ok() { ExitCode::SUCCESS } else { ExitCode::from(1) })
}
