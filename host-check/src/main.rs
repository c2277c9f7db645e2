//! `rchold`: design and check RC hold stages.
//!
//! Exit codes: 0 success; 1 the stage does not work as a hold stage, or a
//! sweep exceeded `--fail-above`; 2 bad input (file, value or usage).

use std::io::Write as _;
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context as _;
use clap::{Parser, Subcommand};
use host_check::{agree, eval, stagefile};

#[derive(Parser)]
#[command(name = "rchold", version, about = "Design and check RC hold stages", max_term_width = 100)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Hold, turn-on latency, active time, tolerance window and design warnings of one stage file.
    Eval {
        /// The stage file (TOML).
        stage: PathBuf,
        /// Print JSON instead of the text report.
        #[arg(long)]
        json: bool,
        /// Also write the stage as a SPICE netlist (ngspice batch mode: `ngspice -b FILE`).
        #[arg(long, value_name = "FILE")]
        netlist: Option<PathBuf>,
    },
    /// Sweep the whole supported domain and report how far the fixed-point and f32 models stray from the f64 reference.
    Agree {
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
    },
}

/// A failure that maps to exit code 2 (bad input), printed on one line.
#[derive(Debug)]
struct BadInput(String);

impl std::fmt::Display for BadInput {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for BadInput {}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            if is_broken_pipe(&e) {
                return ExitCode::SUCCESS;
            }
            eprintln!("rchold: {e:#}");
            ExitCode::from(2)
        }
    }
}

fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| c.downcast_ref::<std::io::Error>().is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe))
}

fn emit(text: &str) -> anyhow::Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes()).context("writing the report")?;
    out.flush().context("writing the report")?;
    Ok(())
}

fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Eval { stage, json, netlist } => {
            let sf = stagefile::load(&stage).map_err(|e| BadInput(e.to_string()))?;
            if let Some(out) = &netlist {
                let title = sf.name.clone().unwrap_or_else(|| stage.display().to_string());
                let text = host_check::netlist::single_press(&sf.stage, &title).text;
                std::fs::write(out, text).with_context(|| format!("writing the netlist to {}", out.display()))?;
            }
            let report = eval::evaluate(&sf);
            if let Err(rc_model::Error::OutOfDomain(_)) = report.nominal {
                if let Err(e) = report.nominal {
                    return Err(BadInput(sf.model_error(e).to_string()).into());
                }
            }
            if json {
                emit(&format!("{}\n", serde_json::to_string_pretty(&eval::render_json(&sf, &report))?))?;
            } else {
                emit(&eval::render_text(&sf, &report))?;
            }
            Ok(if report.nominal.is_ok() { ExitCode::SUCCESS } else { ExitCode::from(1) })
        }
        Command::Agree { points, seed, json, fail_above } => {
            let tty = std::io::IsTerminal::is_terminal(&std::io::stderr());
            let progress = move |done: usize, total: usize| {
                if tty {
                    eprint!("\r  {done} of {total} points");
                }
            };
            let report = agree::run(points, seed, &progress);
            if tty {
                eprintln!();
            }
            if json {
                emit(&format!("{}\n", serde_json::to_string_pretty(&report)?))?;
            } else {
                emit(&agree::render_text(&report))?;
            }
            let worst = report.fixed.hold.max_rel_ppm.max(report.fixed.inverse_c.max_rel_ppm);
            Ok(match fail_above {
                Some(limit) if worst > limit || report.fixed.verdict_mismatches > 0 => ExitCode::from(1),
                _ => ExitCode::SUCCESS,
            })
        }
    }
}
