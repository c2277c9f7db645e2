//! `rchold coverage STAGE.toml`: which assembly faults the fixture windows
//! catch, escapes first.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::coverage::{coverage, render};
use host_check::stage::file::Purpose;

use crate::args::{emit, emit_json, stage, stage_name, tester};

/// Options of `rchold coverage`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// The fixture's tick clock ("1MHz", "32.768k").
    #[arg(long, default_value = "1MHz")]
    clock: String,
    /// Extra margin on each side of the windows ("2%").
    #[arg(long, default_value = "2%")]
    guard: String,
    /// The fixture's poll period ("100us"); default: 1/1000 of the nominal hold.
    #[arg(long)]
    poll: Option<String>,
    /// List every caught fault too (by default only the ten closest to a window).
    #[arg(long)]
    all: bool,
    /// Exit 1 when any fault escapes (for CI on a design change).
    #[arg(long)]
    fail_on_escape: bool,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
}

/// Prints the coverage.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let sf = stage(&a.stage)?;
    let (setup, _, _) = tester(&sf, Purpose::Fixture, &a.clock, &a.guard, a.poll.as_deref())?;
    let c = coverage(&sf, &setup, &sf.spread_for(Purpose::Fixture));
    if a.json {
        emit_json(&c)?;
    } else {
        emit(&render(&stage_name(&sf, &a.stage), &c, a.all))?;
    }
    let (_, _, escapes) = c.counts();
    if a.fail_on_escape && escapes > 0 {
        eprintln!("rchold: alert: {escapes} of {} faults escape the fixture windows", c.outcomes.len());
        return Ok(ExitCode::from(1));
    }
    Ok(ExitCode::SUCCESS)
}
