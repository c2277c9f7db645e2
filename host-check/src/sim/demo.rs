//! `rchold demo`: the whole data path on simulated hardware, end to end.
//!
//! 1. A production run of Lumen-3 keypad boards (our own example product):
//!    2,000 boards drawn inside their tolerances, a few with injected faults,
//!    each measured by the firmware's engine on the simulated twin at two
//!    fixture bays. Bay A streams its records as frames (with some line
//!    noise) into `listen`; bay B's PC decodes its frames into measurement
//!    logs that go through `ingest`.
//! 2. A fleet of 200 Kestrel-5 meters (our own example product) whose hold
//!    capacitors age over three years, each re-measuring its stage once a day
//!    at the day's temperature, tracking drift with the firmware's tracker,
//!    and replaying its records as frames into `listen`.
//! 3. The yield and fleet reports from the store, their SVGs and one
//!    self-contained HTML page.
//!
//! Everything is seeded: the same seed gives the same boards, faults and
//! fleet, and the same times: the run ends on [`RUN_END`], a fixed day
//! before the demo is run, so a seed gives the same store and reports on
//! any day.

use std::fmt::Write as _;
use std::io::Cursor;
use std::path::{Path, PathBuf};

use hold_firmware::drift::{deviation_at, DriftConfig, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::{Config, Measurement, Tester};
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use rayon::prelude::*;
use rc_model::{Prepared, Span, Stage};

use crate::data::collect::{self, Ingested, Labels, TimeRule};
use crate::data::store::{Filter, Setup, Store};
use crate::data::{log, time};
use crate::design::spread::{self, Dist};
use crate::report::aging;
use crate::report::aging::FleetReport;
use crate::report::files::store_report;
use crate::report::yields::YieldReport;
use crate::sim::twin::{Fault, Twin};
use crate::stage::file::{self as stagefile, Purpose, StageFile};
use crate::Error;

/// The fixture's stage file (built in).
pub const BOARD_TOML: &str = include_str!("../../../examples/lumen-keypad.toml");
/// The field units' stage file (built in).
pub const METER_TOML: &str = include_str!("../../../examples/kestrel-meter.toml");

/// Tick clock of both testers, Hz.
pub const CLOCK_HZ: u32 = 1_000_000;
/// Guard band of the fixture window, ppm.
pub const GUARD_PPM: u32 = 20_000;
/// The simulated run's last day: the fleet's last measurement.
pub const RUN_END: &str = "2026-11-30T06:00:00Z";

/// Time of the demo's last field measurement, UTC ms: [`RUN_END`], a fixed
/// day (so a seed gives the same store and reports on any day) that lies
/// before the demo is run.
#[must_use]
pub fn run_end_ms() -> i64 {
    time::parse_ms(RUN_END.as_bytes()).unwrap_or(0)
}

/// Time of the fleet's first measurement for `days` days of measuring, UTC
/// ms: the fleet measures daily up to [`run_end_ms`].
#[must_use]
pub fn fleet_start_ms(days: u32) -> i64 {
    run_end_ms() - i64::from(days.saturating_sub(1)) * 86_400_000
}

/// Time between two boards on a fixture bay, ms: bay A starts two days
/// before the run's end, bay B one day before.
const FIXTURE_PERIOD_MS: i64 = 14_000;

/// Sizes of the scenario.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Scenario {
    /// Boards through the fixture.
    pub boards: u32,
    /// Field units.
    pub units: u32,
    /// Days each unit measures.
    pub days: u32,
    /// Seed.
    pub seed: u64,
}

impl Default for Scenario {
    fn default() -> Self {
        Scenario { boards: 2_000, units: 200, days: 1_096, seed: 2_026 }
    }
}

/// What went in and what came out, for the conservation check.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Ledger {
    /// Records bay A sent as frames.
    pub bay_a_sent: u64,
    /// Frames bay A's noise damaged (each costs one record).
    pub bay_a_damaged: u64,
    /// Records stored from bay A.
    pub bay_a_stored: u64,
    /// Bad frames `listen` reported for bay A.
    pub bay_a_bad: u64,
    /// Log lines bay B wrote.
    pub bay_b_lines: u64,
    /// Records stored from bay B's logs.
    pub bay_b_stored: u64,
    /// Fleet records sent.
    pub fleet_sent: u64,
    /// Fleet frames damaged.
    pub fleet_damaged: u64,
    /// Fleet records stored.
    pub fleet_stored: u64,
    /// Fleet bad frames reported.
    pub fleet_bad: u64,
    /// Injected faults per board serial: (unit, fault description).
    pub faults: Vec<(u32, String)>,
    /// True end-of-life crossing (80 % of the commissioning value) per fleet
    /// unit, ms since the epoch (None: more than 30 years out).
    pub truth_ms: Vec<(u32, Option<i64>)>,
}

/// Everything the demo produced.
#[derive(Debug)]
pub struct Outcome {
    /// The fixture's yield report.
    pub yields: YieldReport,
    /// The fleet report.
    pub fleet: FleetReport,
    /// The conservation ledger.
    pub ledger: Ledger,
    /// Files written.
    pub files: Vec<PathBuf>,
}

/// A simulation failure.
fn sim(e: impl std::fmt::Display) -> Error {
    Error::Sim(e.to_string())
}

fn stage_file(name: &str, text: &str) -> Result<StageFile, Error> {
    Ok(stagefile::parse(Path::new(name), text)?)
}

fn setup_of(
    sf: &StageFile,
    purpose: Purpose,
    name: &str,
    text: &str,
    poll_ns: u32,
) -> Result<(Setup, Config, Prepared), Error> {
    let settings = crate::design::window::settings(sf, purpose, CLOCK_HZ, GUARD_PPM, poll_ns)?;
    let (config, model) = (settings.config, settings.stage);
    Ok((
        Setup {
            name: name.to_owned(),
            stage_toml: text.to_owned(),
            clock_hz: CLOCK_HZ,
            guard_ppm: GUARD_PPM,
            poll_ns,
            hold_min_ticks: config.hold_min_ticks,
            hold_max_ticks: config.hold_max_ticks,
        },
        config,
        model,
    ))
}

fn measure(plant: &Stage, faults: &[Fault], config: Config, model: Prepared, seed: u64) -> Result<Measurement, Error> {
    let twin = Twin::new(plant, faults, CLOCK_HZ, seed);
    let (trig, out, delay, clock) = twin.handles();
    let mut t = Tester::new(trig, out, delay, clock, config, model);
    t.measure().map_err(|e| sim(format!("{e:?}")))
}

/// The faults of the production run: (every n-th board, fault, description).
fn fault_plan() -> Vec<(Fault, &'static str)> {
    vec![
        (Fault::CapacitorTimes(10.0), "10 µF fitted for 1 µF"),
        (Fault::CapacitorTimes(0.1), "100 nF fitted for 1 µF"),
        (Fault::OpenCapacitor, "capacitor not soldered"),
        (Fault::OpenResistor, "resistor missing"),
        (Fault::OpenDiode, "diode open"),
        (Fault::CapacitorTimes(0.6), "capacitor 40 % low"),
        (Fault::LeakyCapacitor(4.7e5), "capacitor leaking (470 kΩ)"),
        (Fault::NoisyOutput(1.2), "noisy output line (±1.2 V)"),
        (Fault::ChargeResistance(2_200.0), "2.2 kΩ fitted in the charge path"),
    ]
}

/// Frames of `records`, with damage: every `every`-th frame gets a bit
/// flipped (never into a 0x00, so one damaged frame stays one bad frame),
/// and before every `noise`-th frame a burst of non-zero garbage bytes (which
/// joins the next frame and costs that record). Returns the stream and the
/// number of damaged frames.
fn framed(records: &[Record], rng: &mut Xoshiro256PlusPlus, every: u64, noise: u64) -> Result<(Vec<u8>, u64), Error> {
    let mut out = Vec::with_capacity(records.len() * 40);
    let mut damaged = 0;
    for (i, r) in records.iter().enumerate() {
        let mut f = record::encode(r).map_err(sim)?;
        let i = i as u64 + 1;
        let mut hit = false;
        if noise > 0 && i.is_multiple_of(noise) {
            for _ in 0..rng.random_range(1..6) {
                out.push(rng.random_range(1..=255u8));
            }
            hit = true;
        }
        if every > 0 && i.is_multiple_of(every) && f.len() > 1 {
            let at = rng.random_range(0..f.len() - 1);
            if let Some(b) = f.get_mut(at) {
                let mut bit = rng.random_range(0..8);
                if *b ^ (1 << bit) == 0 {
                    bit = (bit + 1) % 8;
                }
                *b ^= 1 << bit;
            }
            hit = true;
        }
        damaged += u64::from(hit);
        out.extend_from_slice(&f);
    }
    Ok((out, damaged))
}

fn fixture_records(sc: &Scenario, ledger: &mut Ledger) -> Result<(Vec<Record>, Setup), Error> {
    let sf = stage_file("lumen-keypad.toml", BOARD_TOML)?;
    let poll_ns = crate::design::window::default_poll_ns(&sf)?;
    let (setup, config, model) = setup_of(&sf, Purpose::Fixture, "lumen-keypad.toml", BOARD_TOML, poll_ns)?;
    let plan = fault_plan();
    // About one board in 80 has a fault, spread through the run.
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(sc.seed ^ 0xF1);
    let mut faults: Vec<Option<usize>> = vec![None; sc.boards as usize];
    let n_faults = (sc.boards / 80).max(plan.len() as u32);
    for k in 0..n_faults.min(sc.boards) {
        let board = rng.random_range(0..sc.boards) as usize;
        if let Some(slot) = faults.get_mut(board) {
            *slot = Some(k as usize % plan.len());
        }
    }
    let results: Vec<Result<Record, Error>> = (0..sc.boards)
        .into_par_iter()
        .map(|i| {
            let board = spread::draw(&sf.stage, &sf.spread, Dist::Normal { k_sigma: 3.0 }, sc.seed, u64::from(i));
            let fault = faults.get(i as usize).copied().flatten().and_then(|k| plan.get(k));
            let injected: Vec<Fault> = fault.map(|f| vec![f.0]).unwrap_or_default();
            let m = measure(&board, &injected, config, model, sc.seed ^ u64::from(i))?;
            Ok(Record {
                seq: i,
                unit_id: 3_100_001 + i,
                boot: 1,
                press_ticks: m.press_ticks,
                on_ticks: m.on_ticks,
                hold_ticks: m.hold_ticks,
                clock_hz: CLOCK_HZ,
                temp_mdeg_c: Some(23_000 + (i % 7) as i32 * 250),
                verdict: m.verdict,
                hint: m.hint,
                drift: hold_firmware::drift::DriftState::Settling,
                c_deviation_ppm: m.c_deviation_ppm.and_then(|d| i32::try_from(d).ok()),
            })
        })
        .collect();
    let records = results.into_iter().collect::<Result<Vec<_>, _>>()?;
    for (i, f) in faults.iter().enumerate() {
        if let Some(desc) = f.and_then(|k| plan.get(k)).map(|p| p.1) {
            ledger.faults.push((3_100_001 + i as u32, desc.to_owned()));
        }
    }
    Ok((records, setup))
}

/// One unit's aging: its rate (fraction of nominal per year) and hot offset.
fn unit_profile(seed: u64, unit: u32) -> (f64, f64) {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed ^ 0xA6E ^ u64::from(unit).wrapping_mul(0x9E37_79B9));
    // Most units lose 0.5 – 3 % a year; one in eight sits in a hot cabinet and loses 4 – 11 %.
    let hot = rng.random_bool(0.125);
    let rate = if hot { rng.random_range(0.04..0.11) } else { rng.random_range(0.005..0.03) };
    let offset = if hot { rng.random_range(8.0..14.0) } else { rng.random_range(-4.0..4.0) };
    (rate, offset)
}

fn fleet_records(sc: &Scenario, ledger: &mut Ledger) -> Result<(Vec<Vec<Record>>, Setup), Error> {
    let sf = stage_file("kestrel-meter.toml", METER_TOML)?;
    let poll_ns = crate::design::window::default_poll_ns(&sf)?;
    let (mut setup, mut config, model) = setup_of(&sf, Purpose::Field, "kestrel-meter.toml", METER_TOML, poll_ns)?;
    // A field unit tracks drift, not a production window: it accepts any
    // hold up to its timeout and reports the deviation; its setup says so.
    config.hold_min_ticks = 0;
    config.hold_max_ticks = config.hold_timeout_ticks.saturating_sub(1);
    config.on_min_ticks = 0;
    config.on_max_ticks = config.on_timeout_ticks;
    setup.hold_min_ticks = config.hold_min_ticks;
    setup.hold_max_ticks = config.hold_max_ticks;
    let (tlo, thi) = sf.spread.temp_mdeg_c.unwrap_or(rc_model::limits::TEMP_MDEG_C);
    let start = fleet_start_ms(sc.days);
    type UnitRun = Result<(Vec<Record>, Option<i64>), Error>;
    let units: Vec<UnitRun> = (0..sc.units)
        .into_par_iter()
        .map(|u| {
            let id = 5_000 + u;
            let (rate, offset) = unit_profile(sc.seed, id);
            let board =
                spread::draw(&sf.stage, &sf.spread, Dist::Normal { k_sigma: 3.0 }, sc.seed ^ 0xF1EE7, u64::from(u));
            let mut rng = Xoshiro256PlusPlus::seed_from_u64(sc.seed ^ 0x7E ^ u64::from(id));
            let mut tracker: DriftTracker<64> = DriftTracker::new(DriftConfig::FIELD_UNIT);
            let mut out = Vec::with_capacity(sc.days as usize);
            for day in 0..sc.days {
                let years = f64::from(day) / 365.25;
                let season = (2.0 * std::f64::consts::PI * (years - 0.3)).sin();
                let temp_c = (18.0 + 12.0 * season + offset + rng.random_range(-3.0..3.0)).clamp(-25.0, 60.0);
                let temp = (temp_c * 1000.0).round() as i32;
                let temp = temp.clamp(tlo, thi);
                let mut aged = board;
                aged.c_ff = (board.c_ff as f64 * (1.0 - rate * years)).round() as u64;
                // The day's battery voltage (±1.5 %; the input thresholds follow it).
                let k = 1.0 + rng.random_range(-0.015..0.015);
                aged.vdd_uv = (f64::from(aged.vdd_uv) * k).round() as u32;
                aged.rise_uv = (f64::from(aged.rise_uv) * k).round() as u32;
                aged.fall_uv = (f64::from(aged.fall_uv) * k).round() as u32;
                let plant = sf.spread.at_temperature(&aged, temp).map_err(sim)?;
                // The unit's own temperature sensor reads within ±1.5 °C.
                let temp = (temp + rng.random_range(-1_500..=1_500)).clamp(tlo, thi);
                let m = measure(&plant, &[], config, model, u64::from(id) << 20 | u64::from(day))?;
                let dev = m
                    .hold_ticks
                    .and_then(|h| Span::from_ticks(h, CLOCK_HZ).ok())
                    .and_then(|s| deviation_at(&sf.spread, &sf.stage, temp, s).ok());
                let state = dev.map_or(hold_firmware::drift::DriftState::Settling, |d| tracker.update(d).state);
                out.push(Record {
                    seq: day,
                    unit_id: id,
                    boot: 1,
                    press_ticks: m.press_ticks,
                    on_ticks: m.on_ticks,
                    hold_ticks: m.hold_ticks,
                    clock_hz: CLOCK_HZ,
                    temp_mdeg_c: Some(temp),
                    verdict: m.verdict,
                    hint: m.hint,
                    drift: state,
                    c_deviation_ppm: dev,
                });
            }
            // Truth: when the unit's capacitance reaches 80 % of its commissioning value.
            let t_years = 0.2 / rate;
            let truth = (t_years > 0.0 && t_years < 30.0).then(|| start + (t_years * aging::YEAR_MS) as i64);
            Ok((out, truth))
        })
        .collect();
    let mut all = Vec::with_capacity(units.len());
    for (u, r) in units.into_iter().enumerate() {
        let (recs, truth) = r?;
        ledger.truth_ms.push((5_000 + u as u32, truth));
        all.push(recs);
    }
    Ok((all, setup))
}

/// Frames `records` with `damage` (see [`framed`]) and listens to them:
/// (sent, damaged, stored, bad frames).
fn send(
    store: &mut Store,
    name: &str,
    records: &[Record],
    labels: &Labels,
    rng: &mut Xoshiro256PlusPlus,
    damage: (u64, u64),
) -> Result<(u64, u64, u64, u64), Error> {
    let (bytes, damaged) = framed(records, rng, damage.0, damage.1)?;
    let l = collect::listen(store, name, collect::Input::once(Cursor::new(bytes)), labels, |_| {}, || false)?;
    Ok((records.len() as u64, damaged, l.stored, l.counts.bad_frames))
}

/// Runs the scenario into a fresh database at `db` and writes the reports
/// into `out_dir`. `say` receives progress lines.
///
/// # Errors
/// A one-line message (file system, store, or a simulation that failed).
pub fn run(sc: &Scenario, db: &Path, out_dir: &Path, mut say: impl FnMut(&str)) -> Result<Outcome, Error> {
    std::fs::create_dir_all(out_dir).map_err(|e| Error::io(out_dir, e))?;
    for suffix in ["", "-wal", "-shm"] {
        let mut p = db.as_os_str().to_owned();
        p.push(suffix);
        let p = PathBuf::from(p);
        if p.exists() {
            std::fs::remove_file(&p).map_err(|e| Error::io(&p, e))?;
        }
    }
    // Per-unit charts of an earlier run would mix with this run's.
    if let Ok(entries) = std::fs::read_dir(out_dir) {
        for e in entries.flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            if name.starts_with("unit-") && name.ends_with(".svg") {
                std::fs::remove_file(e.path()).map_err(|err| Error::io(e.path(), err))?;
            }
        }
    }
    let mut store = Store::open(db)?;
    let mut ledger = Ledger::default();
    let mut files = Vec::new();

    say(&format!("simulating {} Lumen-3 boards on the fixture (firmware engine on the twin) …", sc.boards));
    let (boards, board_setup) = fixture_records(sc, &mut ledger)?;
    let board_setup_id = store.setup_id(&board_setup)?;
    let half = boards.len() / 2;
    let (bay_a, bay_b) = boards.split_at(half);

    // Bay A: frames over a noisy serial line into listen, one stream per batch.
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(sc.seed ^ 0x5E1A1);
    for (k, chunk) in bay_a.chunks(bay_a.len().div_ceil(2).max(1)).enumerate() {
        let labels = Labels {
            station: "bay-A".into(),
            batch: format!("L3-{}", 2_648 + k),
            setup_id: Some(board_setup_id),
            // The station numbers its tests: seq is the board's place in the run.
            time: TimeRule::Sequence { start_ms: run_end_ms() - 2 * 86_400_000, period_ms: FIXTURE_PERIOD_MS },
        };
        let name = format!("bay-A serial, batch {}", labels.batch);
        let s = send(&mut store, &name, chunk, &labels, &mut rng, (97, 151))?;
        ledger.bay_a_sent += s.0;
        ledger.bay_a_damaged += s.1;
        ledger.bay_a_stored += s.2;
        ledger.bay_a_bad += s.3;
    }
    // Bay B: its PC decodes the frames and writes one measurement log per batch.
    files.extend(bay_b_logs(&mut store, bay_b, board_setup_id, out_dir, &mut rng, &mut ledger)?);

    say(&format!(
        "simulating {} Kestrel-5 meters measuring themselves daily for {} days ({} measurements) …",
        sc.units,
        sc.days,
        u64::from(sc.units) * u64::from(sc.days)
    ));
    let (fleet_recs, meter_setup) = fleet_records(sc, &mut ledger)?;
    let meter_setup_id = store.setup_id(&meter_setup)?;
    let start = fleet_start_ms(sc.days);
    for recs in &fleet_recs {
        let Some(first) = recs.first() else { continue };
        let labels = Labels {
            station: "kestrel-fleet".into(),
            batch: "K5-2023Q4".into(),
            setup_id: Some(meter_setup_id),
            time: TimeRule::Sequence { start_ms: start, period_ms: 86_400_000 },
        };
        let s = send(&mut store, &format!("meter {} history", first.unit_id), recs, &labels, &mut rng, (997, 0))?;
        ledger.fleet_sent += s.0;
        ledger.fleet_damaged += s.1;
        ledger.fleet_stored += s.2;
        ledger.fleet_bad += s.3;
    }

    say("reporting …");
    // The same report any store gets (`rchold report`); the demo's own ledger is printed.
    let (yields, fleet, written) = store_report(&store, &Filter::default(), out_dir, 0.8, 12)?;
    files.extend(written);
    Ok(Outcome { yields, fleet, ledger, files })
}

/// Bay B: its PC decodes the frames and writes one measurement log per
/// batch, which `ingest` stores. Returns the logs written.
fn bay_b_logs(
    store: &mut Store,
    bay_b: &[Record],
    board_setup_id: i64,
    out_dir: &Path,
    rng: &mut Xoshiro256PlusPlus,
    ledger: &mut Ledger,
) -> Result<Vec<PathBuf>, Error> {
    let mut files = Vec::new();
    let base = run_end_ms() - 86_400_000;
    for (k, chunk) in bay_b.chunks(bay_b.len().div_ceil(2).max(1)).enumerate() {
        let (bytes, _) = framed(chunk, rng, 0, 0)?;
        let path = out_dir.join(format!("bay-B-L3-{}.csv", 2_648 + k));
        let mut w = std::io::BufWriter::new(std::fs::File::create(&path).map_err(|e| Error::io(&path, e))?);
        log::write_header(&mut w).map_err(|e| Error::io(&path, e))?;
        let mut reader = crate::data::frames::FrameReader::new(Cursor::new(bytes));
        let mut i = 0i64;
        while let Some(r) = reader.next_record().map_err(sim)? {
            log::write_line(&mut w, base + i * FIXTURE_PERIOD_MS, "bay-B", &format!("L3-{}", 2_648 + k), &r)
                .map_err(|e| Error::io(&path, e))?;
            i += 1;
            ledger.bay_b_lines += 1;
        }
        std::io::Write::flush(&mut w).map_err(|e| Error::io(&path, e))?;
        drop(w);
        match collect::ingest(store, &path, Some(board_setup_id))? {
            Ingested::Stored { written, .. } => ledger.bay_b_stored += written.stored,
            Ingested::AlreadyStored { .. } => {
                return Err(sim(format!("{}: unexpectedly stored before", path.display())))
            }
        }
        files.push(path);
    }
    Ok(files)
}

/// The conservation lines of the ledger.
#[must_use]
pub fn ledger_text(l: &Ledger) -> String {
    let mut o = String::new();
    let ok = |b: bool| if b { "balanced" } else { "MISMATCH" };
    let _ = writeln!(
        o,
        "Record accounting\n  bay A  (listen, noisy line): sent {}, stored {}, bad frames {} ({} frames damaged on the line) — {}",
        l.bay_a_sent,
        l.bay_a_stored,
        l.bay_a_bad,
        l.bay_a_damaged,
        ok(l.bay_a_sent == l.bay_a_stored + l.bay_a_bad && l.bay_a_bad == l.bay_a_damaged)
    );
    let _ = writeln!(
        o,
        "  bay B  (ingest, logs):      lines {}, stored {} — {}",
        l.bay_b_lines,
        l.bay_b_stored,
        ok(l.bay_b_lines == l.bay_b_stored)
    );
    let _ = writeln!(
        o,
        "  fleet  (listen, replay):    sent {}, stored {}, bad frames {} ({} damaged) — {}",
        l.fleet_sent,
        l.fleet_stored,
        l.fleet_bad,
        l.fleet_damaged,
        ok(l.fleet_sent == l.fleet_stored + l.fleet_bad && l.fleet_bad == l.fleet_damaged)
    );
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_ledger_says_when_it_does_not_balance() {
        let mut l = Ledger { bay_a_sent: 10, bay_a_stored: 9, bay_a_bad: 1, bay_a_damaged: 1, ..Ledger::default() };
        assert!(!ledger_text(&l).contains("MISMATCH"));
        l.bay_a_stored = 8;
        assert!(ledger_text(&l).contains("MISMATCH"));
    }

    #[test]
    fn a_small_demo_runs_end_to_end() -> Result<(), Error> {
        let dir = tempfile::tempdir().map_err(|e| Error::io("tempdir", e))?;
        let sc = Scenario { boards: 20, units: 2, days: 20, seed: 5 };
        let out = run(&sc, &dir.path().join("d.db"), dir.path(), |_| {})?;
        assert_eq!(out.yields.all.total, 20);
        assert_eq!(out.ledger.fleet_sent, 40);
        assert!(dir.path().join("report.html").exists());
        Ok(())
    }
}
