//! `rchold demo`: the whole data path on simulated boards and field units,
//! end to end, with the reports and an HTML page.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::fmt::CAUTION;
use host_check::report::{aging, yields};
use host_check::sim::demo::{self, Scenario};

use crate::args::{emit, spinner};

/// Options of `rchold demo`.
#[derive(clap::Args)]
pub struct Args {
    /// Folder for the database, the logs and the reports.
    #[arg(long, default_value = "rchold-demo")]
    out: PathBuf,
    /// Boards through the fixture.
    #[arg(long, default_value_t = 2_000, value_parser = clap::value_parser!(u32).range(10..=1_000_000))]
    boards: u32,
    /// Field units.
    #[arg(long, default_value_t = 200, value_parser = clap::value_parser!(u32).range(1..=100_000))]
    units: u32,
    /// Days each field unit measures.
    #[arg(long, default_value_t = 1_096, value_parser = clap::value_parser!(u32).range(10..=36_500))]
    days: u32,
    /// Seed.
    #[arg(long, default_value_t = 2_026)]
    seed: u64,
}

/// Runs the demo and prints its summary; exit code 1 when the record
/// accounting does not balance.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let started = std::time::Instant::now();
    let db = a.out.join("rchold-demo.db");
    let sc = Scenario { boards: a.boards, units: a.units, days: a.days, seed: a.seed };
    let status = spinner(false);
    let outcome = demo::run(&sc, &db, &a.out, |m| status.set_message(m.to_owned()))?;
    status.finish_and_clear();
    let mut text = demo::ledger_text(&outcome.ledger);
    text.push('\n');
    text.push_str(&yields::render_text(&outcome.yields, 12));
    text.push('\n');
    text.push_str(&aging::render_text(&outcome.fleet, 12));
    text.push_str(&format!(
        "\nStore: {}\nReport: {} (and {} more files in {})\nFinished in {:.1} s.\nnote: {CAUTION}\n",
        db.display(),
        a.out.join("report.html").display(),
        outcome.files.len().saturating_sub(1),
        a.out.display(),
        started.elapsed().as_secs_f64()
    ));
    emit(&text)?;
    let l = &outcome.ledger;
    let balanced = l.bay_a_sent == l.bay_a_stored + l.bay_a_bad
        && l.bay_b_lines == l.bay_b_stored
        && l.fleet_sent == l.fleet_stored + l.fleet_bad;
    Ok(if balanced { ExitCode::SUCCESS } else { ExitCode::from(1) })
}
