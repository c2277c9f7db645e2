//! One file per subcommand, named as the command (`timer-vs-rc` →
//! `timer_vs_rc.rs`, `yield` → `yield.rs`); each has an `Args` struct and a
//! `run` that returns the exit code or an error.

use std::process::ExitCode;

use clap::Subcommand;

mod aging;
mod agree;
mod compare;
mod coverage;
mod curve;
mod demo;
mod diagnose;
mod eval;
mod export;
mod ingest;
mod listen;
mod pick;
mod press;
mod report;
mod sources;
mod spread;
mod synth_log;
mod timer_vs_rc;
mod window;
#[path = "yield.rs"]
mod yields;

/// The subcommands, in the order `rchold --help` lists them.
#[derive(Subcommand)]
pub enum Command {
    /// Hold, turn-on latency, active time, tolerance window and design warnings of one stage file.
    Eval(eval::Args),
    /// The firmware's pass window and timings in ticks of a clock, from the stage file's tolerances.
    Window(window::Args),
    /// Choose R and C from preferred-number series for a target hold and tolerance.
    Pick(pick::Args),
    /// Hold against press length, and a second press during the hold (retrigger).
    Press(press::Args),
    /// Compare the stage's spread with a software timer on a crystal or an internal RC oscillator.
    TimerVsRc(timer_vs_rc::Args),
    /// Two stage files side by side: timing, window, warnings and what drives the spread.
    Compare(compare::Args),
    /// Which single part (R, C, charge path, diode, supply, threshold) explains a board's hold and turn-on.
    Diagnose(diagnose::Args),
    /// Which assembly faults (wrong values, opens, shorts, wrong diode or logic family) the fixture windows catch.
    Coverage(coverage::Args),
    /// Plot the node voltage through press and release, with thresholds and the extreme corners (SVG).
    Curve(curve::Args),
    /// How the hold spreads over the tolerances: worst case, root-sum-square and Monte Carlo.
    Spread(spread::Args),
    /// Sweep the whole supported domain and report how far the fixed-point and f32 models stray from the f64 reference.
    Agree(agree::Args),
    /// Store the firmware's framed records from a serial port, a file or standard input.
    Listen(listen::Args),
    /// Store measurement logs (CSV, schema in the README); each file all or nothing, each file once.
    Ingest(ingest::Args),
    /// Fixture yield: verdicts, yield per station, batch and day, Cp/Cpk, rejects and the f64 re-check.
    Yield(yields::Args),
    /// Fleet aging: each unit's capacitance trend, rate per year and forecast end of life.
    Aging(aging::Args),
    /// The store's records (or logs') as a Hive-partitioned Parquet dataset for Spark, DataFusion and rchold.
    Export(export::Args),
    /// The whole report of a store into a folder: yield, aging, charts and the HTML page.
    Report(report::Args),
    /// What the store holds: each stream and log with its counts.
    Sources(sources::Args),
    /// The whole data path on simulated boards and field units, end to end, with an HTML report.
    Demo(demo::Args),
    /// Write a synthetic measurement log (for trying the tools and for benchmarks; not real data).
    SynthLog(synth_log::Args),
}

/// Runs one subcommand.
pub fn run(command: Command) -> anyhow::Result<ExitCode> {
    match command {
        Command::Eval(a) => eval::run(a),
        Command::Window(a) => window::run(a),
        Command::Pick(a) => pick::run(a),
        Command::Press(a) => press::run(a),
        Command::TimerVsRc(a) => timer_vs_rc::run(a),
        Command::Compare(a) => compare::run(a),
        Command::Diagnose(a) => diagnose::run(a),
        Command::Coverage(a) => coverage::run(a),
        Command::Curve(a) => curve::run(a),
        Command::Spread(a) => spread::run(a),
        Command::Agree(a) => agree::run(a),
        Command::Listen(a) => listen::run(a),
        Command::Ingest(a) => ingest::run(a),
        Command::Yield(a) => yields::run(a),
        Command::Aging(a) => aging::run(a),
        Command::Export(a) => export::run(a),
        Command::Report(a) => report::run(a),
        Command::Sources(a) => sources::run(a),
        Command::Demo(a) => demo::run(a),
        Command::SynthLog(a) => synth_log::run(a),
    }
}
