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

mod data_cmds;

#[derive(Parser)]
#[command(name = "rchold", version, about = "Design, check and monitor RC hold stages", max_term_width = 100)]
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
    /// The firmware's pass window and timings in ticks of a clock, from the stage file's tolerances.
    Window {
        /// The stage file (TOML).
        stage: PathBuf,
        /// The firmware's tick clock ("1MHz", "32.768k", "16e6").
        #[arg(long)]
        clock: String,
        /// Extra margin on each side of the window ("2%").
        #[arg(long, default_value = "2%")]
        guard: String,
        /// Time between two reads of the output ("100us"); default: 1/1000 of the shortest hold.
        #[arg(long)]
        poll: Option<String>,
        /// What to write: text, rust (a const), json, or bin (the blob the firmware loads; needs --out).
        #[arg(long, default_value = "text", value_parser = ["text", "rust", "json", "bin"])]
        emit: String,
        /// Write to this file instead of standard output.
        #[arg(long)]
        out: Option<PathBuf>,
    },
    /// Choose R and C from preferred-number series for a target hold and tolerance.
    Pick {
        /// Wanted hold ("30s", "850m").
        #[arg(long)]
        hold: String,
        /// Allowed spread each way, worst case ("15%").
        #[arg(long, default_value = "15%")]
        within: String,
        /// Series for R (E3 … E192).
        #[arg(long, default_value = "E24")]
        r_series: String,
        /// Resistor tolerance ("1%").
        #[arg(long, default_value = "1%")]
        r_tol: String,
        /// Series for C (E3 … E192).
        #[arg(long, default_value = "E12")]
        c_series: String,
        /// Input family of the second inverter.
        #[arg(long, default_value = "hc-schmitt")]
        input: String,
        /// Supply, V.
        #[arg(long, default_value = "3.3")]
        vdd: String,
        /// Supply tolerance ("5%").
        #[arg(long, default_value = "5%")]
        vdd_tol: String,
        /// Diode forward drop, V.
        #[arg(long, default_value = "0.6")]
        diode: String,
        /// Driver output resistance, Ω.
        #[arg(long, default_value = "50")]
        driver: String,
        /// How many candidates to show.
        #[arg(long, default_value_t = 5)]
        top: usize,
        /// Print JSON instead of the text report.
        #[arg(long)]
        json: bool,
    },
    /// Compare the stage's spread with a software timer on a crystal or an internal RC oscillator.
    TimerVsRc {
        /// The stage file (TOML).
        stage: PathBuf,
        /// The software timer's tick clock ("32.768k", "1MHz").
        #[arg(long)]
        clock: String,
        /// Its frequency tolerance over temperature and life ("50ppm" for a crystal, "2%" for an internal RC oscillator).
        #[arg(long)]
        clock_tolerance: String,
        /// Quiescent current of the stage's two gates, for the standby estimate ("2u").
        #[arg(long)]
        stage_current: Option<String>,
        /// Current of the MCU asleep with one timer running ("1.5u").
        #[arg(long)]
        sleep_current: Option<String>,
    },
    /// Plot the node voltage through press and release, with thresholds and the extreme corners (SVG).
    Curve {
        /// The stage file (TOML).
        stage: PathBuf,
        /// Where to write the SVG.
        #[arg(long, value_name = "FILE")]
        plot: PathBuf,
    },
    /// How the hold spreads over the tolerances: worst case, root-sum-square and Monte Carlo.
    Spread {
        /// The stage file (TOML).
        stage: PathBuf,
        /// Monte Carlo samples.
        #[arg(long, default_value_t = 100_000)]
        samples: usize,
        /// Seed of the draws (results do not depend on the thread count).
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// How a tolerance is read: uniform, or normal with the tolerance at --k-sigma.
        #[arg(long, default_value = "uniform", value_parser = ["uniform", "normal"])]
        dist: String,
        /// Standard deviations a tolerance spans when --dist normal.
        #[arg(long, default_value_t = 3.0)]
        k_sigma: f64,
        /// Specification window for Cp/Cpk, as LOW..HIGH ("500m..1.2").
        #[arg(long)]
        spec: Option<String>,
        /// Age the capacitor this many years first, by the stage file's `[aging]` law: class 2
        /// (log of hours), or an electrolytic's end-of-life loss reached at its rated life,
        /// scaled to --at-temp by the 10 °C rule.
        #[arg(long)]
        years: Option<f64>,
        /// Operating temperature for an electrolytic's aging, °C (needs `rated_hours` and `rated_temp` in `[aging]`).
        #[arg(long)]
        at_temp: Option<f64>,
        /// Write a histogram with the window and spec marked (SVG).
        #[arg(long, value_name = "FILE")]
        plot: Option<PathBuf>,
        /// Evaluate every sample with the fixed-point model instead of the fast vector closed form (slower, same statistics).
        #[arg(long)]
        exact: bool,
        /// Print JSON instead of the text report.
        #[arg(long)]
        json: bool,
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
    /// Store the firmware's framed records from a serial port, a file or standard input.
    Listen {
        /// File of frames, or "-" for standard input (the default); ignored with --port.
        input: Option<PathBuf>,
        /// Serial port to read ("/dev/ttyUSB0", "COM3").
        #[arg(long)]
        port: Option<String>,
        /// Serial baud rate.
        #[arg(long, default_value_t = 115_200)]
        baud: u32,
        /// Station the records come from (1 … 64 bytes).
        #[arg(long)]
        station: String,
        /// Batch label (0 … 64 bytes).
        #[arg(long, default_value = "")]
        batch: String,
        #[command(flatten)]
        setup: data_cmds::SetupArgs,
        /// Time of seq 0, for a unit replaying its stored history ("2027-01-01T06:00:00Z"); with --seq-period.
        #[arg(long)]
        seq_start: Option<String>,
        /// Period between two seq numbers ("1d", "6h"); with --seq-start. Default: time of arrival.
        #[arg(long)]
        seq_period: Option<String>,
        /// The measurement store (SQLite).
        #[arg(long, default_value = "rchold.db")]
        db: PathBuf,
        /// No live status line.
        #[arg(long)]
        quiet: bool,
    },
    /// Store measurement logs (CSV, schema in the README); each file all or nothing, each file once.
    Ingest {
        /// Log files.
        #[arg(required = true)]
        files: Vec<PathBuf>,
        #[command(flatten)]
        setup: data_cmds::SetupArgs,
        /// The measurement store (SQLite).
        #[arg(long, default_value = "rchold.db")]
        db: PathBuf,
    },
    /// Fixture yield: verdicts, yield per station, batch and day, Cp/Cpk, rejects and the f64 re-check.
    Yield {
        /// The measurement store (SQLite).
        #[arg(long, default_value = "rchold.db")]
        db: PathBuf,
        /// Read these measurement logs directly instead of the store.
        #[arg(long, value_name = "FILE", num_args = 1..)]
        csv: Vec<PathBuf>,
        #[command(flatten)]
        select: data_cmds::Select,
        #[command(flatten)]
        setup: data_cmds::SetupArgs,
        /// Write yield.txt, the hold histograms and rejects.csv into this folder.
        #[arg(long, value_name = "DIR")]
        out: Option<PathBuf>,
        /// Skip the f64 re-check of every verdict.
        #[arg(long)]
        skip_recheck: bool,
        /// Print JSON instead of the text report.
        #[arg(long)]
        json: bool,
        /// Rows per table in the text report.
        #[arg(long, default_value_t = 20)]
        rows: usize,
    },
    /// Fleet aging: each unit's capacitance trend, rate per year and forecast end of life.
    Aging {
        /// The measurement store (SQLite).
        #[arg(long, default_value = "rchold.db")]
        db: PathBuf,
        #[command(flatten)]
        select: data_cmds::Select,
        /// Only this unit.
        #[arg(long)]
        unit: Option<u32>,
        /// End of life: this loss of capacitance from nominal ("-20%").
        #[arg(long, default_value = "-20%", allow_hyphen_values = true)]
        limit: String,
        /// Flag units whose forecast falls within this many months after the last measurement.
        #[arg(long, default_value_t = 12)]
        months: u32,
        /// Write aging.txt and the trend SVGs into this folder.
        #[arg(long, value_name = "DIR")]
        out: Option<PathBuf>,
        /// Print JSON instead of the text report.
        #[arg(long)]
        json: bool,
        /// Rows in the text report.
        #[arg(long, default_value_t = 30)]
        rows: usize,
    },
    /// What the store holds: each stream and log with its counts.
    Sources {
        /// The measurement store (SQLite).
        #[arg(long, default_value = "rchold.db")]
        db: PathBuf,
    },
    /// The whole data path on simulated boards and field units, end to end, with an HTML report.
    Demo {
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
    },
    /// Write a synthetic measurement log (for trying the tools and for benchmarks; not real data).
    SynthLog {
        /// Where to write it.
        #[arg(long)]
        out: PathBuf,
        /// Measurements.
        #[arg(long, default_value_t = 1_000_000)]
        records: u64,
        /// Stations.
        #[arg(long, default_value_t = 4)]
        stations: u32,
        /// Seed.
        #[arg(long, default_value_t = 1)]
        seed: u64,
    },
}

/// A failure that maps to exit code 2 (bad input), printed on one line.
#[derive(Debug)]
pub(crate) struct BadInput(pub(crate) String);

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

pub(crate) fn emit(text: &str) -> anyhow::Result<()> {
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
        Command::Window { stage, clock, guard, poll, emit: what, out } => {
            let sf = stagefile::load(&stage).map_err(|e| BadInput(e.to_string()))?;
            let (setup, _, _) =
                host_check::fixture::settings_from_text(&sf, &clock, &guard, poll.as_deref()).map_err(BadInput)?;
            let name = sf.name.clone().unwrap_or_else(|| stage.display().to_string());
            match what.as_str() {
                "bin" => {
                    let Some(out) = out else {
                        return Err(BadInput("--emit bin writes a binary blob: give --out FILE".into()).into());
                    };
                    std::fs::write(&out, setup.to_blob()).with_context(|| format!("writing {}", out.display()))?;
                }
                kind => {
                    let e = match kind {
                        "rust" => host_check::fixture::Emit::Rust,
                        "json" => host_check::fixture::Emit::Json,
                        _ => host_check::fixture::Emit::Text,
                    };
                    let text = host_check::fixture::render(&setup, e, &name);
                    match out {
                        Some(path) => {
                            std::fs::write(&path, text).with_context(|| format!("writing {}", path.display()))?
                        }
                        None => emit(&text)?,
                    }
                }
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::TimerVsRc { stage, clock, clock_tolerance, stage_current, sleep_current } => {
            use host_check::values::parse_value;
            let sf = stagefile::load(&stage).map_err(|e| BadInput(e.to_string()))?;
            let bad = |opt: &str, v: &str, range: &str, why: String| {
                BadInput(format!("--{opt} {v:?}: {why} (accepted: {range})"))
            };
            let hz = parse_value(&clock, &["Hz"]).map_err(|e| bad("clock", &clock, "1 Hz to 1 GHz", e.to_string()))?;
            if !(1.0..=1e9).contains(&hz) {
                return Err(bad("clock", &clock, "1 Hz to 1 GHz", "out of range".into()).into());
            }
            let tol_text = clock_tolerance.trim();
            let tolerance = if let Some(ppm) = tol_text.strip_suffix("ppm") {
                ppm.trim()
                    .parse::<f64>()
                    .map(|p| p * 1e-6)
                    .map_err(|e| bad("clock-tolerance", tol_text, "0 ppm to 50 %", e.to_string()))?
            } else {
                match host_check::values::parse_tolerance(tol_text, &[]) {
                    Ok(host_check::values::Tol::Relative(f)) => f,
                    _ => return Err(bad("clock-tolerance", tol_text, "0 ppm to 50 %", "give ppm or %".into()).into()),
                }
            };
            if !(0.0..=0.5).contains(&tolerance) {
                return Err(bad("clock-tolerance", tol_text, "0 ppm to 50 %", "out of range".into()).into());
            }
            let amps = |opt: &str, v: &Option<String>| -> Result<Option<f64>, BadInput> {
                v.as_ref()
                    .map(|t| {
                        let a = parse_value(t, &["A"]).map_err(|e| bad(opt, t, "0 A to 1 A", e.to_string()))?;
                        if (0.0..=1.0).contains(&a) {
                            Ok(a)
                        } else {
                            Err(bad(opt, t, "0 A to 1 A", "out of range".into()))
                        }
                    })
                    .transpose()
            };
            let currents = match (amps("stage-current", &stage_current)?, amps("sleep-current", &sleep_current)?) {
                (Some(stage_quiescent_a), Some(timer_sleep_a)) => {
                    Some(host_check::compare::Currents { stage_quiescent_a, timer_sleep_a })
                }
                (None, None) => None,
                _ => {
                    return Err(BadInput(
                        "give both --stage-current and --sleep-current for the standby estimate".into(),
                    )
                    .into())
                }
            };
            let nominal = rc_model::Model::new(&sf.stage)
                .and_then(|m| m.evaluate())
                .map_err(|e| BadInput(sf.model_error(e).to_string()))?;
            let window = sf.spread.window(&sf.stage).map_err(|f| {
                BadInput(format!(
                    "{}: the corner {} fails: {}",
                    stage.display(),
                    host_check::eval::corner_text(f.corner),
                    f.error
                ))
            })?;
            let clock = host_check::compare::TimerClock { hz, tolerance };
            let c = host_check::compare::compare(host_check::eval::secs(nominal.hold), &window, clock);
            let name = sf.name.clone().unwrap_or_else(|| stage.display().to_string());
            emit(&host_check::compare::render_comparison(
                &name,
                &c,
                clock,
                currents,
                f64::from(sf.stage.vdd_uv) * 1e-6,
                &window,
            ))?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Curve { stage, plot } => {
            let sf = stagefile::load(&stage).map_err(|e| BadInput(e.to_string()))?;
            rc_model::Model::new(&sf.stage)
                .and_then(|m| m.evaluate())
                .map_err(|e| BadInput(sf.model_error(e).to_string()))?;
            let mut corners = Vec::new();
            if let Ok(w) = sf.spread.window(&sf.stage) {
                for (label, corner) in [("shortest", w.min_corner), ("longest", w.max_corner)] {
                    if let Ok(s) = sf.spread.at_corner(&sf.stage, corner) {
                        corners.push((format!("{label} ({})", host_check::eval::corner_text(corner)), s));
                    }
                }
            }
            let band = match sf.spread.thresholds {
                Some(rc_model::window::ThresholdSpread::Schmitt { rise_uv, fall_uv }) => Some((
                    (f64::from(rise_uv.0) * 1e-6, f64::from(rise_uv.1) * 1e-6),
                    (f64::from(fall_uv.0) * 1e-6, f64::from(fall_uv.1) * 1e-6),
                )),
                Some(rc_model::window::ThresholdSpread::Single { min_uv, max_uv }) => {
                    let b = (f64::from(min_uv) * 1e-6, f64::from(max_uv) * 1e-6);
                    Some((b, b))
                }
                None => None,
            };
            let name = sf.name.clone().unwrap_or_else(|| stage.display().to_string());
            let svg = host_check::compare::curve_svg(&name, &sf.stage, &corners, band);
            std::fs::write(&plot, svg).with_context(|| format!("writing {}", plot.display()))?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Pick { hold, within, r_series, r_tol, c_series, input, vdd, vdd_tol, diode, driver, top, json } => {
            use host_check::values::{parse_tolerance, parse_value, Tol};
            let bad = |opt: &str, v: &str, range: &str, why: String| {
                BadInput(format!("--{opt} {v:?}: {why} (accepted: {range})"))
            };
            let value = |opt: &str, v: &str, unit: &[&str], lo: f64, hi: f64, range: &str| -> Result<f64, BadInput> {
                let x = parse_value(v, unit).map_err(|e| bad(opt, v, range, e.to_string()))?;
                if x.is_nan() || x < lo || x > hi {
                    return Err(bad(opt, v, range, "out of range".into()));
                }
                Ok(x)
            };
            let pct = |opt: &str, v: &str, hi: f64| -> Result<f64, BadInput> {
                match parse_tolerance(v, &[]) {
                    Ok(Tol::Relative(f)) if f > 0.0 && f <= hi => Ok(f),
                    Ok(_) => Err(bad(
                        opt,
                        v,
                        &format!("above 0 % up to {} %", hi * 100.0),
                        "give a percentage in range".into(),
                    )),
                    Err(e) => Err(bad(opt, v, &format!("above 0 % up to {} %", hi * 100.0), e.to_string())),
                }
            };
            let series = |opt: &str, v: &str| {
                host_check::eseries::Series::parse(v)
                    .ok_or_else(|| bad(opt, v, "E3, E6, E12, E24, E48, E96, E192", "unknown series".into()))
            };
            let hold_s = value("hold", &hold, &["s"], 1e-6, 86_400.0, "1 µs to 24 h")?;
            let vdd_v = value("vdd", &vdd, &["V"], 1.6, 18.0, "1.6 V to 18 V")?;
            let drop_v = value("diode", &diode, &["V"], 0.0, 2.0, "0 V to 2 V")?;
            let driver_ohm = value("driver", &driver, &["Ω", "ohm"], 0.0, 1e6, "0 Ω to 1 MΩ")?;
            let (template, thresholds) =
                host_check::pick::template(vdd_v, drop_v, driver_ohm, &input).map_err(BadInput)?;
            let target = host_check::pick::Target {
                hold_s,
                within: pct("within", &within, 0.9)?,
                r_series: series("r-series", &r_series)?,
                r_tol_ppm: (pct("r-tol", &r_tol, 0.5)? * 1e6).round() as u32,
                c_series: series("c-series", &c_series)?,
                template,
                vdd_tol_ppm: (pct("vdd-tol", &vdd_tol, 0.5)? * 1e6).round() as u32,
                thresholds,
            };
            let found = host_check::pick::pick(&target);
            emit(&host_check::pick::render(&target, &found, top, &input, json))?;
            Ok(if found.is_empty() { ExitCode::from(1) } else { ExitCode::SUCCESS })
        }
        Command::Spread { stage, samples, seed, dist, k_sigma, spec, years, at_temp, plot, exact, json } => {
            let mut sf = stagefile::load(&stage).map_err(|e| BadInput(e.to_string()))?;
            if !(1..=100_000_000).contains(&samples) {
                return Err(BadInput(format!("--samples {samples}: out of range (accepted: 1 to 100000000)")).into());
            }
            let dist = if dist == "normal" {
                if !(k_sigma > 0.0 && k_sigma <= 10.0) {
                    return Err(
                        BadInput(format!("--k-sigma {k_sigma}: out of range (accepted: above 0 up to 10)")).into()
                    );
                }
                host_check::spread::Dist::Normal { k_sigma }
            } else {
                host_check::spread::Dist::Uniform
            };
            let spec = match &spec {
                None => None,
                Some(text) => {
                    let bad = |why: String| {
                        BadInput(format!("--spec {text:?}: {why} (accepted: LOW..HIGH in seconds, LOW < HIGH)"))
                    };
                    let (a, b) = text.split_once("..").ok_or_else(|| bad("no \"..\"".into()))?;
                    let a = host_check::values::parse_value(a, &["s"]).map_err(|e| bad(e.to_string()))?;
                    let b = host_check::values::parse_value(b, &["s"]).map_err(|e| bad(e.to_string()))?;
                    if !(a >= 0.0 && a < b) {
                        return Err(bad("LOW must be below HIGH".into()).into());
                    }
                    Some((a, b))
                }
            };
            let parts = match (years, sf.spread.aging) {
                (Some(y), _) => host_check::spread::Parts::Aged { years: y },
                (None, Some(a)) => host_check::spread::Parts::NewBesideAging(a),
                (None, None) => host_check::spread::Parts::New,
            };
            if let Some(y) = years {
                if !(0.0..=50.0).contains(&y) {
                    return Err(BadInput(format!("--years {y}: out of range (accepted: 0 to 50)")).into());
                }
                match sf.spread.aging {
                    Some(rc_model::window::Aging::Class2 { k_milli_pct, ref_hours, .. }) => {
                        let hours = (y * 8_766.0).round() as u32;
                        let left = rc_model::window::Aging::Class2 { k_milli_pct, ref_hours, hours }
                            .remaining_ppm()
                            .map_err(|e| BadInput(format!("--years {y}: {e}")))?;
                        sf.stage.c_ff = sf.stage.c_ff * u64::from(left) / 1_000_000;
                        sf.spread.aging = None;
                    }
                    Some(rc_model::window::Aging::EndOfLife { loss_ppm }) => {
                        let (Some(t), Some((rated_h, rated_mdeg))) = (at_temp, sf.rated_life) else {
                            return Err(BadInput(format!(
                                "--years with an end-of-life [aging] needs --at-temp and rated_hours, rated_temp in {}",
                                stage.display()
                            ))
                            .into());
                        };
                        if !(-55.0..=150.0).contains(&t) {
                            return Err(BadInput(format!("--at-temp {t}: out of range (accepted: -55 °C to +150 °C)")).into());
                        }
                        let life_h = rc_model::window::electrolytic_life_h(rated_h, rated_mdeg, (t * 1e3).round() as i32)
                            .map_err(|e| BadInput(format!("--at-temp {t}: {e}")))?;
                        // Wear taken as linear in the share of rated life used (common practice, no source).
                        let used = (y * 8_766.0 / life_h.max(1) as f64).min(1.0);
                        let loss = (f64::from(loss_ppm) * used).round() as u64;
                        sf.stage.c_ff = sf.stage.c_ff * (1_000_000 - loss.min(999_999)) / 1_000_000;
                        sf.spread.aging = None;
                    }
                    _ => {
                        return Err(BadInput(format!(
                            "--years needs an [aging] table in {} (kind = \"class2\", or \"end-of-life\" with rated_hours and rated_temp)",
                            stage.display()
                        ))
                        .into())
                    }
                }
            }
            let window = sf.spread.window(&sf.stage).ok();
            let rss = host_check::spread::rss(&sf.stage, &sf.spread, dist)
                .map_err(|e| BadInput(sf.model_error(e).to_string()))?;
            let tty = std::io::IsTerminal::is_terminal(&std::io::stderr());
            let progress = move |done: usize, total: usize| {
                if tty {
                    let width = 30;
                    let filled = done * width / total.max(1);
                    eprint!("\r  [{}{}] {done}/{total}", "#".repeat(filled), ".".repeat(width - filled));
                }
            };
            let how = if exact { host_check::spread::Eval::Exact } else { host_check::spread::Eval::Fast };
            let mc = host_check::spread::monte_carlo_with(&sf.stage, &sf.spread, dist, samples, seed, how, &progress);
            if tty {
                eprintln!();
            }
            let cap = spec.map(|(a, b)| host_check::spread::capability(&mc, a, b));
            let name = sf.name.clone().unwrap_or_else(|| stage.display().to_string());
            if let Some(path) = &plot {
                let svg = host_check::spread::histogram_svg(
                    &mc,
                    window.as_ref(),
                    spec,
                    &format!("hold of {name}, {samples} boards"),
                );
                std::fs::write(path, svg).with_context(|| format!("writing {}", path.display()))?;
            }
            let text = host_check::spread::render(&name, &mc, parts, rss, window.as_ref(), spec, cap.as_ref(), json);
            emit(&text)?;
            Ok(ExitCode::SUCCESS)
        }
        Command::Listen { input, port, baud, station, batch, setup, seq_start, seq_period, db, quiet } => {
            data_cmds::listen(input, port, baud, station, batch, &setup, seq_start, seq_period, &db, quiet)
        }
        Command::Ingest { files, setup, db } => data_cmds::ingest(&files, &setup, &db),
        Command::Yield { db, csv, select, setup, out, skip_recheck, json, rows } => {
            data_cmds::yields(&db, &csv, &select, &setup, out, skip_recheck, json, rows)
        }
        Command::Aging { db, select, unit, limit, months, out, json, rows } => {
            data_cmds::aging(&db, &select, unit, &limit, months, out, json, rows)
        }
        Command::Sources { db } => data_cmds::sources(&db),
        Command::Demo { out, boards, units, days, seed } => {
            data_cmds::run_demo(&out, host_check::demo::Scenario { boards, units, days, seed })
        }
        Command::SynthLog { out, records, stations, seed } => data_cmds::synth_log(&out, records, stations, seed),
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
