//! The data-side commands of `rchold`: listen, ingest, yield, aging, sources,
//! demo and synth-log.

use std::collections::HashMap;
use std::io::{IsTerminal as _, Read, Write as _};
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};
use std::time::Duration;

use anyhow::Context as _;
use clap::Args;
use host_check::collect::{self, Ingested, Labels, TimeRule};
use host_check::fleet::FleetTally;
use host_check::production::{self, Tally};
use host_check::store::{Filter, Setup, Store};
use host_check::{demo, fleet, log, stagefile, timestamp};

use crate::{emit, BadInput};

/// The stage a station measures against (optional).
#[derive(Args, Debug, Clone)]
pub struct SetupArgs {
    /// Stage file the records were measured against (stored with them; enables the f64 re-check).
    #[arg(long, value_name = "FILE")]
    pub stage: Option<PathBuf>,
    /// The tester's tick clock ("1MHz").
    #[arg(long, default_value = "1MHz")]
    pub clock: String,
    /// Extra margin on each side of the window ("2%").
    #[arg(long, default_value = "2%")]
    pub guard: String,
    /// The tester's poll period ("100us"); default: 1/1000 of the nominal hold.
    #[arg(long)]
    pub poll: Option<String>,
}

impl SetupArgs {
    fn setup(&self) -> anyhow::Result<Option<Setup>> {
        let Some(path) = &self.stage else { return Ok(None) };
        let text = std::fs::read_to_string(path).map_err(|e| BadInput(format!("{}: {e}", path.display())))?;
        let sf = stagefile::parse(path, &text).map_err(|e| BadInput(e.to_string()))?;
        let (setup, guard_ppm, poll_ns) =
            host_check::fixture::settings_from_text(&sf, &self.clock, &self.guard, self.poll.as_deref())
                .map_err(BadInput)?;
        let c = setup.config;
        Ok(Some(Setup {
            name: path.file_name().map_or_else(|| path.display().to_string(), |n| n.to_string_lossy().into_owned()),
            stage_toml: text,
            clock_hz: c.clock_hz,
            guard_ppm,
            poll_ns,
            hold_min_ticks: c.hold_min_ticks,
            hold_max_ticks: c.hold_max_ticks,
        }))
    }
}

fn open(db: &Path) -> anyhow::Result<Store> {
    Ok(Store::open(db).map_err(|e| BadInput(e.to_string()))?)
}

fn open_existing(db: &Path) -> anyhow::Result<Store> {
    Ok(Store::open_existing(db).map_err(|e| BadInput(e.to_string()))?)
}

/// Parses "30s", "15min", "6h", "1d" into ms.
fn period_ms(s: &str) -> Option<i64> {
    let s = s.trim();
    let split = s.find(|c: char| !(c.is_ascii_digit() || c == '.'))?;
    let (num, unit) = s.split_at(split);
    let v: f64 = num.parse().ok()?;
    let k = match unit.trim() {
        "ms" => 1.0,
        "s" => 1e3,
        "min" => 60e3,
        "h" => 3_600e3,
        "d" => 86_400e3,
        _ => return None,
    };
    let ms = (v * k).round();
    (1.0..=3.2e10).contains(&ms).then_some(ms as i64)
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

/// `rchold listen`.
#[allow(clippy::too_many_arguments)]
pub fn listen(
    input: Option<PathBuf>,
    port: Option<String>,
    baud: u32,
    station: String,
    batch: String,
    setup: &SetupArgs,
    seq_start: Option<String>,
    seq_period: Option<String>,
    db: &Path,
    quiet: bool,
) -> anyhow::Result<ExitCode> {
    if station.is_empty() || station.len() > 64 || station.chars().any(char::is_control) {
        return Err(BadInput(format!("--station {station:?}: accepted: 1 … 64 bytes, no control characters")).into());
    }
    if batch.len() > 64 || batch.chars().any(char::is_control) {
        return Err(BadInput(format!("--batch {batch:?}: accepted: 0 … 64 bytes, no control characters")).into());
    }
    let time = match (seq_start, seq_period) {
        (None, None) => TimeRule::Arrival,
        (Some(a), Some(p)) => TimeRule::Sequence {
            start_ms: timestamp::parse_date_or_time(&a)
                .ok_or_else(|| BadInput(format!("--seq-start {a:?}: accepted: YYYY-MM-DD or {}", timestamp::FORM)))?,
            period_ms: period_ms(&p).ok_or_else(|| {
                BadInput(format!("--seq-period {p:?}: accepted: a number with ms, s, min, h or d, 1 ms … 1 year"))
            })?,
        },
        _ => return Err(BadInput("--seq-start and --seq-period go together".into()).into()),
    };
    let mut store = open(db)?;
    let setup_id = match setup.setup()? {
        Some(s) => Some(store.setup_id(&s).map_err(|e| BadInput(e.to_string()))?),
        None => None,
    };
    let labels = Labels { station, batch, setup_id, time };
    let name = collect::source_name(input.as_ref(), port.as_deref());
    let reader: Box<dyn Read> = match (&port, &input) {
        (Some(p), _) => Box::new(
            serialport::new(p, baud)
                .timeout(Duration::from_millis(100))
                .open()
                .map_err(|e| BadInput(format!("--port {p}: {e}")))?,
        ),
        (None, Some(path)) if path.as_os_str() != "-" => {
            Box::new(std::fs::File::open(path).map_err(|e| BadInput(format!("{}: {e}", path.display())))?)
        }
        _ => Box::new(std::io::stdin().lock()),
    };
    on_interrupt();
    let tty = !quiet && std::io::stderr().is_terminal();
    let status = |p: &collect::Progress| {
        if tty {
            let rate = p.counts.records as f64 / p.elapsed.as_secs_f64().max(1e-3);
            let last = p.last.map_or_else(String::new, |r| format!(" · last: unit {} {}", r.unit_id, r.verdict.name()));
            eprint!("\r\x1b[2K  {} records · {} bad frames · {rate:.0}/s{last}", p.counts.records, p.counts.bad_frames);
        }
    };
    let result = collect::listen(&mut store, &name, reader, &labels, status, || STOP.load(Ordering::SeqCst));
    if tty {
        eprintln!();
    }
    let l = result.map_err(|e| anyhow::anyhow!("{e}"))?;
    emit(&format!(
        "{name}: {} records stored, {} already stored, {} bad frames, {} bytes (source {} in {})\n",
        l.stored,
        l.duplicates,
        l.counts.bad_frames,
        l.counts.bytes,
        l.source_id,
        db.display()
    ))?;
    Ok(ExitCode::SUCCESS)
}

/// `rchold ingest`.
pub fn ingest(files: &[PathBuf], setup: &SetupArgs, db: &Path) -> anyhow::Result<ExitCode> {
    let mut store = open(db)?;
    let setup_id = match setup.setup()? {
        Some(s) => Some(store.setup_id(&s).map_err(|e| BadInput(e.to_string()))?),
        None => None,
    };
    let mut failed = 0;
    for f in files {
        match collect::ingest(&mut store, f, setup_id) {
            Ok(Ingested::Stored { written, lines }) => emit(&format!(
                "{}: {lines} lines, {} stored, {} already stored (source {})\n",
                f.display(),
                written.stored,
                written.duplicates,
                written.source_id
            ))?,
            Ok(Ingested::AlreadyStored { source_id }) => {
                emit(&format!("{}: already stored as source {source_id}; nothing to do\n", f.display()))?;
            }
            Err(e) => {
                failed += 1;
                eprintln!("rchold: {e} (nothing of this file was stored)");
            }
        }
    }
    Ok(if failed > 0 { ExitCode::from(2) } else { ExitCode::SUCCESS })
}

/// Filters common to the reports.
#[derive(Args, Debug, Clone)]
pub struct Select {
    /// Only this station.
    #[arg(long)]
    pub station: Option<String>,
    /// Only this batch.
    #[arg(long)]
    pub batch: Option<String>,
    /// From this date or time (UTC, inclusive): "2027-03-01" or "2027-03-01T06:00:00Z".
    #[arg(long)]
    pub from: Option<String>,
    /// Up to this date or time (UTC, exclusive).
    #[arg(long)]
    pub to: Option<String>,
}

impl Select {
    fn filter(&self) -> anyhow::Result<Filter> {
        let t = |opt: &str, v: &Option<String>| -> anyhow::Result<Option<i64>> {
            v.as_ref()
                .map(|s| {
                    timestamp::parse_date_or_time(s).ok_or_else(|| {
                        anyhow::Error::from(BadInput(format!(
                            "--{opt} {s:?}: accepted: YYYY-MM-DD or {}",
                            timestamp::FORM
                        )))
                    })
                })
                .transpose()
        };
        Ok(Filter {
            station: self.station.clone(),
            batch: self.batch.clone(),
            from_ms: t("from", &self.from)?,
            to_ms: t("to", &self.to)?,
            unit_id: None,
        })
    }
}

fn write_file(path: &Path, text: &str) -> anyhow::Result<()> {
    std::fs::write(path, text).with_context(|| format!("writing {}", path.display()))
}

/// `rchold yield`.
#[allow(clippy::too_many_arguments)]
pub fn yields(
    db: &Path,
    csv: &[PathBuf],
    select: &Select,
    setup: &SetupArgs,
    out: Option<PathBuf>,
    skip_recheck: bool,
    json: bool,
    rows: usize,
) -> anyhow::Result<ExitCode> {
    let filter = select.filter()?;
    let given = setup.setup()?;
    if let Some(dir) = &out {
        std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    }
    let reject_log: Option<Box<dyn std::io::Write + Send>> = match &out {
        Some(dir) => {
            let p = dir.join("rejects.csv");
            Some(Box::new(std::io::BufWriter::new(
                std::fs::File::create(&p).with_context(|| format!("writing {}", p.display()))?,
            )))
        }
        None => None,
    };
    let report = if csv.is_empty() {
        let store = open_existing(db)?;
        let mut setups = store.setups().map_err(|e| anyhow::anyhow!("{e}"))?;
        // A --stage given here replaces the stored setups (id 0 for all records).
        let override_id = given.map(|s| {
            setups = HashMap::from([(0, s)]);
            0
        });
        let stations = store.stations().map_err(|e| anyhow::anyhow!("{e}"))?;
        let mut tally = Tally::new(&setups, !skip_recheck, reject_log);
        let unknown = String::from("?");
        store
            .for_each(&filter, |s| {
                let name = stations.get(&s.station_id).unwrap_or(&unknown);
                tally.add(name, &s.batch, s.measured_ms, &s.record, override_id.or(s.setup_id));
            })
            .map_err(|e| anyhow::anyhow!("{e}"))?;
        tally.finish()?
    } else {
        let setups: HashMap<i64, Setup> = given.map(|s| HashMap::from([(0, s)])).unwrap_or_default();
        let id = (!setups.is_empty()).then_some(0);
        let keep = |l: &log::Line<'_>| {
            filter.station.as_deref().is_none_or(|s| s == l.station)
                && filter.batch.as_deref().is_none_or(|b| b == l.batch)
                && filter.from_ms.is_none_or(|t| l.measured_ms >= t)
                && filter.to_ms.is_none_or(|t| l.measured_ms < t)
        };
        let threads = std::thread::available_parallelism().map_or(1, std::num::NonZeroUsize::get);
        production::tally_logs(csv, &setups, id, !skip_recheck, reject_log, &keep, threads).map_err(BadInput)?
    };
    if let Some(dir) = &out {
        write_file(&dir.join("yield.txt"), &production::render_text(&report, rows))?;
        for g in &report.stations {
            if let Some(svg) = production::histogram_svg(g) {
                write_file(
                    &dir.join(format!(
                        "hold-{}.svg",
                        g.name.replace(|c: char| !c.is_ascii_alphanumeric() && c != '-', "_")
                    )),
                    &svg,
                )?;
            }
        }
    }
    if json {
        emit(&format!("{}\n", serde_json::to_string_pretty(&report)?))?;
    } else {
        emit(&production::render_text(&report, rows))?;
    }
    let disagree = report.recheck.as_ref().is_some_and(|r| r.disagreements_total > 0);
    Ok(if disagree { ExitCode::from(1) } else { ExitCode::SUCCESS })
}

/// `rchold aging`.
#[allow(clippy::too_many_arguments)]
pub fn aging(
    db: &Path,
    select: &Select,
    unit: Option<u32>,
    limit: &str,
    months: u32,
    out: Option<PathBuf>,
    json: bool,
    rows: usize,
) -> anyhow::Result<ExitCode> {
    let limit_ratio = match host_check::values::parse_tolerance(limit.trim_start_matches('-'), &[]) {
        Ok(host_check::values::Tol::Relative(f)) if f > 0.0 && f < 1.0 => 1.0 - f,
        _ => return Err(BadInput(format!("--limit {limit:?}: accepted: a loss of 0 % … 100 % (\"-20%\")")).into()),
    };
    let mut filter = select.filter()?;
    filter.unit_id = unit;
    let store = open_existing(db)?;
    let setups = store.setups().map_err(|e| anyhow::anyhow!("{e}"))?;
    let stations = store.stations().map_err(|e| anyhow::anyhow!("{e}"))?;
    let mut tally = FleetTally::new(&setups);
    let unknown = String::from("?");
    store
        .for_each(&filter, |s| {
            tally.add(stations.get(&s.station_id).unwrap_or(&unknown), s.measured_ms, &s.record, s.setup_id);
        })
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let report = tally.finish(limit_ratio, months);
    if let Some(dir) = &out {
        std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
        write_file(&dir.join("aging.txt"), &fleet::render_text(&report, rows))?;
        write_file(&dir.join("fleet.svg"), &fleet::fleet_svg(&report))?;
        if let Some(svg) = fleet::rates_svg(&report) {
            write_file(&dir.join("fleet-rates.svg"), &svg)?;
        }
        for u in report
            .units
            .iter()
            .filter(|u| unit.is_some() || matches!(u.status, fleet::Status::AtRisk | fleet::Status::BeyondLimit))
        {
            write_file(&dir.join(format!("unit-{}.svg", u.unit)), &fleet::unit_svg(u, report.limit_ratio))?;
        }
    }
    if json {
        emit(&format!("{}\n", serde_json::to_string_pretty(&report)?))?;
    } else {
        emit(&fleet::render_text(&report, rows))?;
    }
    Ok(ExitCode::SUCCESS)
}

/// `rchold sources`.
pub fn sources(db: &Path) -> anyhow::Result<ExitCode> {
    let store = open_existing(db)?;
    let mut o = format!(
        "{} (schema {}), {} measurements\n  {:>4} {:<7} {:>9} {:>9} {:>9} {:>11}  name\n",
        db.display(),
        store.schema_version().map_err(|e| anyhow::anyhow!("{e}"))?,
        store.count().map_err(|e| anyhow::anyhow!("{e}"))?,
        "id",
        "kind",
        "stored",
        "repeated",
        "bad",
        "bytes"
    );
    for (id, kind, name, rec, dup, bad, bytes) in store.sources().map_err(|e| anyhow::anyhow!("{e}"))? {
        o.push_str(&format!("  {id:>4} {kind:<7} {rec:>9} {dup:>9} {bad:>9} {bytes:>11}  {name}\n"));
    }
    emit(&o)?;
    Ok(ExitCode::SUCCESS)
}

/// `rchold demo`.
pub fn run_demo(out: &Path, sc: demo::Scenario) -> anyhow::Result<ExitCode> {
    let started = std::time::Instant::now();
    let db = out.join("rchold-demo.db");
    let outcome = demo::run(&sc, &db, out, |m| eprintln!("  {m}")).map_err(|e| anyhow::anyhow!("{e}"))?;
    let mut text = demo::ledger_text(&outcome.ledger);
    text.push('\n');
    text.push_str(&production::render_text(&outcome.yields, 12));
    text.push('\n');
    text.push_str(&fleet::render_text(&outcome.fleet, 12));
    text.push_str(&format!(
        "\nStore: {}\nReport: {} (and {} more files in {})\nFinished in {:.1} s.\n\
         note: timing only — no isolation, creepage or mains safety is checked; a hold stage must not be the only guard \
         of a safety function; defer to local codes and licensed practice.\n",
        db.display(),
        out.join("report.html").display(),
        outcome.files.len().saturating_sub(1),
        out.display(),
        started.elapsed().as_secs_f64()
    ));
    emit(&text)?;
    let l = &outcome.ledger;
    let balanced = l.bay_a_sent == l.bay_a_stored + l.bay_a_bad
        && l.bay_b_lines == l.bay_b_stored
        && l.fleet_sent == l.fleet_stored + l.fleet_bad;
    Ok(if balanced { ExitCode::SUCCESS } else { ExitCode::from(1) })
}

/// `rchold synth-log`: a large synthetic log for trying the tools and for benchmarks.
pub fn synth_log(out: &Path, records: u64, stations: u32, seed: u64) -> anyhow::Result<ExitCode> {
    use rand::{Rng, SeedableRng};
    if stations == 0 || stations > 1000 {
        return Err(BadInput(format!("--stations {stations}: accepted: 1 … 1000")).into());
    }
    let f = std::fs::File::create(out).with_context(|| format!("writing {}", out.display()))?;
    let mut w = std::io::BufWriter::with_capacity(1 << 20, f);
    log::write_header(&mut w)?;
    let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(seed);
    let start = timestamp::parse_ms(b"2027-01-04T06:00:00Z").unwrap_or(0);
    let names: Vec<String> = (0..stations).map(|s| format!("line-{}", s + 1)).collect();
    let per_batch = 5_000u64;
    for i in 0..records {
        let s = (i % u64::from(stations)) as usize;
        // Holds around 740 ms at 1 MHz with σ ≈ 4 %, judged against the Lumen-3
        // example's firmware window at 1 MHz (506 572 … 1 253 142 ticks); one
        // board in 100 is grossly off.
        let gross = rng.random_bool(0.01);
        let hold = if gross {
            rng.random_range(60_000..2_400_000u64)
        } else {
            (740_000.0 * (1.0 + 0.04 * normal(&mut rng))) as u64
        };
        let verdict = if hold < 506_572 {
            hold_firmware::Verdict::Short
        } else if hold > 1_253_142 {
            hold_firmware::Verdict::Long
        } else {
            hold_firmware::Verdict::WithinWindow
        };
        let r = hold_firmware::record::Record {
            seq: 0,
            unit_id: (i & 0xFFFF_FFFF) as u32,
            press_ticks: 100_000,
            on_ticks: Some(54),
            hold_ticks: Some(hold),
            clock_hz: 1_000_000,
            temp_mdeg_c: Some(23_000 + rng.random_range(-2_000..2_000)),
            verdict,
            // The hint the firmware would give: the stage's hold is proportional to C,
            // so the implied deviation is the hold's from the nominal 739.617 ms.
            hint: if verdict.passes() {
                hold_firmware::Hint::None
            } else {
                hold_firmware::Hint::from_deviation_ppm(((hold as f64 / 739_617.2 - 1.0) * 1e6).round() as i64)
            },
            drift: hold_firmware::drift::DriftState::Settling,
            c_deviation_ppm: (!verdict.passes()).then(|| ((hold as f64 / 739_617.2 - 1.0) * 1e6).round() as i32),
        };
        let name = names.get(s).map_or("line-1", String::as_str);
        log::write_line(&mut w, start + (i as i64) * 250, name, &format!("B{}", i / per_batch), &r)?;
    }
    w.flush()?;
    eprintln!("{}: {records} synthetic measurements (not real data)", out.display());
    Ok(ExitCode::SUCCESS)
}

/// A standard normal draw (Box–Muller).
fn normal(rng: &mut impl rand::Rng) -> f64 {
    let u: f64 = rng.random_range(f64::EPSILON..1.0);
    let v: f64 = rng.random_range(0.0..1.0);
    (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
}

#[cfg(test)]
mod tests {
    use super::period_ms;

    #[test]
    fn periods() {
        assert_eq!(period_ms("1d"), Some(86_400_000));
        assert_eq!(period_ms("6h"), Some(21_600_000));
        assert_eq!(period_ms("1.5 min"), Some(90_000));
        assert_eq!(period_ms("250ms"), Some(250));
        assert_eq!(period_ms("3 weeks"), None);
        assert_eq!(period_ms("0s"), None);
        assert_eq!(period_ms("d"), None);
    }
}
