//! `rchold agree`: the fixed-point and `f32` models against the `f64`
//! reference over the whole supported domain.

use std::process::ExitCode;

use host_check::design::agree;

use crate::args::{bar, emit, emit_json};

/// Options of `rchold agree`.
#[derive(clap::Args)]
pub struct Args {
    /// Random points on top of the log-spaced grid.
    #[arg(long, default_value_t = 1_000_000)]
    points: usize,
    /// Seed of the random points.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
    /// Exit with 1 when the fixed-point hold or inverse-C error exceeds this many ppm.
    #[arg(long, value_name = "PPM")]
    fail_above: Option<f64>,
}

/// Prints the agreement; exit code 1 above `--fail-above` or on a verdict mismatch.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let progress = bar(0, "points");
    let report = agree::run(a.points, a.seed, &|done, total| {
        progress.set_length(total as u64);
        progress.set_position(done as u64);
    });
    progress.finish_and_clear();
    if a.json {
        emit_json(&report)?;
    } else {
        emit(&agree::render_text(&report))?;
    }
    let worst = report.fixed.hold.max_rel_ppm.max(report.fixed.inverse_c.max_rel_ppm);
    Ok(match a.fail_above {
        Some(limit) if worst > limit || report.fixed.verdict_mismatches > 0 => ExitCode::from(1),
        _ => ExitCode::SUCCESS,
    })
}
