//! `rchold listen`: the firmware's framed records from a serial port, a
//! file or standard input into the store, committed as they arrive.

use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};
use std::time::Duration;

use host_check::data::collect::{self, Labels, TimeRule};
use host_check::data::store::Store;
use host_check::Error;

use crate::args::{date_or_time, emit, name, period_ms, spinner, SetupArgs};
use host_check::fmt::terminal;

/// Options of `rchold listen`.
#[derive(clap::Args)]
pub struct Args {
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
    setup: SetupArgs,
    /// Time of seq 0, for a unit replaying its stored history ("2027-01-01T06:00:00Z"); with --seq-period.
    #[arg(long)]
    seq_start: Option<String>,
    /// Period between two seq numbers ("1d", "6h"); with --seq-start. Default: time of arrival.
    #[arg(long)]
    seq_period: Option<String>,
    /// The measurement store (SQLite).
    #[arg(long, default_value = "rchold.db")]
    db: PathBuf,
    /// Do not reopen a serial port that vanished (by default it is reopened
    /// with waits of 0.25 s doubling to 8 s, until it is back or a signal ends listen).
    #[arg(long)]
    no_reconnect: bool,
    /// No live status line.
    #[arg(long)]
    quiet: bool,
}

static STOP: AtomicBool = AtomicBool::new(false);
static INTERRUPTS: AtomicU32 = AtomicU32::new(0);

fn on_signals() {
    // First SIGINT, SIGTERM or SIGHUP: commit what has arrived, print the
    // summary and stop (listen looks every 25 ms). A second one: leave now.
    let _ = ctrlc::set_handler(|| {
        STOP.store(true, Ordering::SeqCst);
        if INTERRUPTS.fetch_add(1, Ordering::SeqCst) >= 1 {
            std::process::exit(130);
        }
    });
}

fn time_rule(start: Option<&str>, period: Option<&str>) -> Result<TimeRule, Error> {
    match (start, period) {
        (None, None) => Ok(TimeRule::Arrival),
        (Some(a), Some(p)) => {
            Ok(TimeRule::Sequence { start_ms: date_or_time("seq-start", a)?, period_ms: period_ms("seq-period", p)? })
        }
        _ => Err(Error::Input("--seq-start and --seq-period go together".into())),
    }
}

fn open_port(port: &str, baud: u32) -> std::io::Result<collect::Stream> {
    serialport::new(port, baud)
        .timeout(Duration::from_millis(100))
        .open()
        .map(|p| Box::new(p) as collect::Stream)
        .map_err(std::io::Error::other)
}

fn open_input(a: &Args) -> Result<collect::Input, Error> {
    Ok(match (&a.port, &a.input) {
        (Some(p), _) => {
            let stream = open_port(p, a.baud).map_err(|e| Error::Input(format!("--port {p}: {e}")))?;
            let (port, baud) = (p.clone(), a.baud);
            let opener: collect::Opener = Box::new(move || open_port(&port, baud));
            collect::Input { stream, reopen: (!a.no_reconnect).then_some((opener, collect::PORT_BACKOFF)) }
        }
        (None, Some(path)) if path.as_os_str() != "-" => collect::Input::once(
            std::fs::File::open(path).map_err(|e| Error::Input(format!("{}: {e}", path.display())))?,
        ),
        _ => collect::Input::once(std::io::stdin()),
    })
}

/// Stores the stream and prints its counts.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    name("station", &a.station, 1)?;
    name("batch", &a.batch, 0)?;
    let time = time_rule(a.seq_start.as_deref(), a.seq_period.as_deref())?;
    let mut store = Store::open(&a.db)?;
    let setup_id = a.setup.id_in(&mut store)?;
    let labels = Labels { station: a.station.clone(), batch: a.batch.clone(), setup_id, time };
    let source = collect::source_name(a.input.as_ref(), a.port.as_deref());
    let input = open_input(&a)?;
    on_signals();
    let status = spinner(a.quiet);
    let show = |p: &collect::Progress| {
        let rate = p.counts.records as f64 / p.elapsed.as_secs_f64().max(1e-3);
        let last = p.last.map_or_else(String::new, |r| format!(" · last: unit {} {}", r.unit_id, r.verdict.name()));
        let link = match &p.lost {
            Some((why, next)) => format!(" · input lost ({}), reopening in {:.2} s", terminal(why), next.as_secs_f64()),
            None if p.reopened > 0 => format!(" · reopened {}×", p.reopened),
            None => String::new(),
        };
        status.set_message(format!(
            "{} records · {} bad frames · {rate:.0}/s{last}{link}",
            p.counts.records, p.counts.bad_frames
        ));
    };
    let result = collect::listen(&mut store, &source, input, &labels, show, || STOP.load(Ordering::SeqCst));
    status.finish_and_clear();
    let l = result?;
    emit(&summary(&source, &l, &a.db))?;
    Ok(ExitCode::SUCCESS)
}

/// How many of the records stored are retests, if any.
pub fn retests(n: u64) -> String {
    match n {
        0 => String::new(),
        1 => " (1 of them a retest: its station, unit, boot and number were stored with other content)".to_owned(),
        n => format!(" ({n} of them retests: their station, unit, boot and number were stored with other content)"),
    }
}

/// The line `listen` ends with: what was stored, refused and dropped, and
/// how the units' sequence numbers ran.
fn summary(source: &str, l: &collect::Listened, db: &std::path::Path) -> String {
    let refused: u64 = l.refused.values().sum();
    let why = if refused == 0 {
        String::new()
    } else {
        let parts: Vec<String> = l.refused.iter().map(|(f, n)| format!("{f} {n}")).collect();
        format!(" (out of range or inconsistent: {})", parts.join(", "))
    };
    let missing: u64 = l.units.values().map(|u| u.missing).sum();
    let back: u64 = l.units.values().map(|u| u.back).sum();
    let restarts: u64 = l.units.values().map(|u| u.restarts).sum();
    let restarted = match restarts {
        0 => String::new(),
        n => format!(", {n} restart{} (a unit's next boot)", if n == 1 { "" } else { "s" }),
    };
    let mut gaps: Vec<(&u32, &host_check::data::store::UnitSeq)> =
        l.units.iter().filter(|(_, u)| u.missing > 0).collect();
    gaps.sort_by_key(|(unit, u)| (std::cmp::Reverse(u.missing), **unit));
    let worst: Vec<String> = gaps.iter().take(3).map(|(unit, u)| format!("unit {unit} {}", u.missing)).collect();
    let more = if gaps.len() > 3 { ", …" } else { "" };
    let seq = match (missing, back, restarts) {
        (0, 0, 0) => String::new(),
        _ if gaps.is_empty() => format!("; sequence: {back} not above the one before{restarted}"),
        _ => format!(
            "; sequence: {missing} numbers skipped in {} unit{} ({}{more}), {back} not above the one before{restarted}",
            gaps.len(),
            if gaps.len() == 1 { "" } else { "s" },
            worst.join(", ")
        ),
    };
    let end = match (l.stopped, l.reopened) {
        (true, 0) => " · stopped by signal".to_owned(),
        (true, n) => format!(" · input reopened {n}× · stopped by signal"),
        (false, 0) => String::new(),
        (false, n) => format!(" · input reopened {n}×"),
    };
    format!(
        "{}: {} records stored{}, {} already stored, {refused} refused{why}, {} bad frames, {} bytes{seq} (source {} in {}){end}\n",
        source,
        l.stored,
        retests(l.conflicts),
        l.duplicates,
        l.counts.bad_frames,
        l.counts.bytes,
        l.source_id,
        db.display()
    )
}
