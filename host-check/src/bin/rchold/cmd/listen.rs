//! `rchold listen`: the firmware's framed records from a serial port, a
//! file or standard input into the store, committed as they arrive.

use std::io::Read;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};
use std::time::Duration;

use host_check::data::collect::{self, Labels, TimeRule};
use host_check::data::store::Store;
use host_check::Error;

use crate::args::{date_or_time, emit, name, period_ms, spinner, SetupArgs};

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
    /// No live status line.
    #[arg(long)]
    quiet: bool,
}

static STOP: AtomicBool = AtomicBool::new(false);
static INTERRUPTS: AtomicU32 = AtomicU32::new(0);

fn on_interrupt() {
    // First Ctrl-C: commit what has arrived and stop. Second: leave now.
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

fn open_input(a: &Args) -> Result<Box<dyn Read>, Error> {
    Ok(match (&a.port, &a.input) {
        (Some(p), _) => Box::new(
            serialport::new(p, a.baud)
                .timeout(Duration::from_millis(100))
                .open()
                .map_err(|e| Error::Input(format!("--port {p}: {e}")))?,
        ),
        (None, Some(path)) if path.as_os_str() != "-" => {
            Box::new(std::fs::File::open(path).map_err(|e| Error::Input(format!("{}: {e}", path.display())))?)
        }
        _ => Box::new(std::io::stdin().lock()),
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
    let reader = open_input(&a)?;
    on_interrupt();
    let status = spinner(a.quiet);
    let show = |p: &collect::Progress| {
        let rate = p.counts.records as f64 / p.elapsed.as_secs_f64().max(1e-3);
        let last = p.last.map_or_else(String::new, |r| format!(" · last: unit {} {}", r.unit_id, r.verdict.name()));
        status.set_message(format!(
            "{} records · {} bad frames · {rate:.0}/s{last}",
            p.counts.records, p.counts.bad_frames
        ));
    };
    let result = collect::listen(&mut store, &source, reader, &labels, show, || STOP.load(Ordering::SeqCst));
    status.finish_and_clear();
    let l = result?;
    let refused: u64 = l.refused.values().sum();
    let why = if refused == 0 {
        String::new()
    } else {
        let parts: Vec<String> = l.refused.iter().map(|(f, n)| format!("{f} {n}")).collect();
        format!(" (out of range or inconsistent: {})", parts.join(", "))
    };
    emit(&format!(
        "{source}: {} records stored, {} already stored, {refused} refused{why}, {} bad frames, {} bytes (source {} in {})\n",
        l.stored,
        l.duplicates,
        l.counts.bad_frames,
        l.counts.bytes,
        l.source_id,
        a.db.display()
    ))?;
    Ok(ExitCode::SUCCESS)
}
