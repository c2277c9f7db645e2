//! `rchold`: design, check and monitor RC hold stages.
//!
//! Exit codes: 0 success; 1 the stage does not work as a hold stage, a
//! re-check disagrees, or a sweep exceeded `--fail-above`; 2 bad input
//! (file, value or usage) or a file that could not be written.
//!
//! Each subcommand lives in `cmd/<name>.rs` (an `Args` struct and a `run`);
//! `args.rs` holds the one option checker and the output helpers.

use std::process::ExitCode;

use clap::Parser;

mod args;
mod cmd;

#[derive(Parser)]
#[command(name = "rchold", version, about = "Design, check and monitor RC hold stages", max_term_width = 100)]
struct Cli {
    #[command(subcommand)]
    command: cmd::Command,
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match cmd::run(cli.command) {
        Ok(code) => code,
        Err(e) if args::is_broken_pipe(&e) => ExitCode::SUCCESS,
        Err(e) => {
            args::warn(&format!("rchold: {e:#}"));
            ExitCode::from(args::exit_code(&e))
        }
    }
}
