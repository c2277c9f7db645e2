//! The boards the fixture on the emulated chip measures, and the check of
//! what it sent back.
//!
//! `emulator_boards write STAGE.toml CLOCK_HZ OUT.bin` draws 200 healthy
//! boards across the stage file's tolerance spread (`spread::draw`, the
//! demo's draw) and adds the fault matrix (capacitor open, ×10, ×0.1;
//! resistor open; diode open; noise of ±2 V at the comparator, which makes
//! the output chatter as the node falls through the thresholds), and writes
//! each board as the chip's plant needs it: the charge target, the fraction
//! of the way it charges and discharges per tick (`1 − e^(−1/τ)`, Q32) and
//! the thresholds (`hold_emulator::plant::Board`). Next to it, `OUT.bin.expect`
//! lists each unit's expected verdict and hint.
//!
//! `emulator_boards check UART.bin OUT.bin.expect` decodes every frame the
//! chip sent and fails unless each unit came back exactly once with its
//! expected verdict and hint.
//!
//! `emulator_boards render UART.bin` prints the decoded records one per
//! line, the form of the snapshot kept beside the emulator firmware.
//!
//! `emulator_boards defmt-check FIRMWARE.elf LOG.bin UART.bin` decodes the
//! defmt frames the firmware wrote over semihosting (its log-string table
//! read from the ELF by `defmt-decoder`) and fails unless there is one
//! "hold measurement" line per record, naming the same verdict and hint,
//! in the same order, and one "drift state" line per change of the drift
//! state from record to record.
//!
//! `emulator_boards host-run boards|boards-async|days SETUP.bin FILE.bin OUT.bin`
//! runs the same loops as the chips (`hold_sim::run_boards`, `run_boards_async` or `run_days`, the
//! engine behind the same simulated stage) on this host and writes the
//! frames it would send: the chips' bytes must equal them.
//!
//! `emulator_boards aging STAGE.toml CLOCK_HZ OUT.bin` writes one field
//! unit's daily measurements for 700 days: its capacitor loses 1 % a month
//! (12 %/year, so C/C₀ reaches the 0.80 end-of-life limit on day 608.75, the
//! simulated truth), the day's temperature follows the seasons with noise
//! and moves the parts through the stage file's coefficients, and the unit's
//! own sensor reads it within ±1.5 °C (as the demo's fleet). `aging-check
//! UART.bin` fails unless the unit's drift states reach "drifting" before
//! "beyond limit", and both are reached.
//!
//! Fixed-drop stages only: the chip's plant charges toward one target
//! through one time constant.

use std::collections::BTreeMap;
use std::path::Path;
use std::process::ExitCode;

use hold_firmware::drift::DriftState;
use hold_firmware::record;
use host_check::design::spread::{draw, Dist};
use host_check::stage::file::{self as stagefile, Purpose};
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use rc_model::{Diode, Stage};

/// Healthy boards in the file.
const HEALTHY: u32 = 200;
/// Unit number of the first faulty board.
const FAULTY_FROM: u32 = 1_000;

#[derive(Debug, Clone, Copy)]
enum Fault {
    CapacitorTimes(f64),
    OpenCapacitor,
    OpenResistor,
    OpenDiode,
    NoisyOutput(f64),
}

/// A board's plant parameters: (charge target µV, charge Q32, discharge Q32,
/// rise µV, fall µV, noise µV).
fn plant(s: &Stage, fault: Option<Fault>, clock_hz: u32) -> Result<[u32; 6], String> {
    let Diode::Drop { drop_uv } = s.diode else {
        return Err("the chip's plant models a fixed-drop diode only".into());
    };
    let mut c = s.c_ff as f64 * 1e-15;
    let mut r = s.r_mohm as f64 * 1e-3;
    let (mut charges, mut noise) = (true, 0.0);
    match fault {
        Some(Fault::CapacitorTimes(k)) => c *= k,
        // What remains: stray capacitance and board leakage, as the host twin assumes.
        Some(Fault::OpenCapacitor) => c = 1e-12,
        Some(Fault::OpenResistor) => r = 1e12,
        Some(Fault::OpenDiode) => charges = false,
        Some(Fault::NoisyOutput(volts)) => noise = volts,
        None => {}
    }
    let r_eff = match s.leak_mohm {
        Some(l) => 1.0 / (1.0 / r + 1.0 / (l as f64 * 1e-3)),
        None => r,
    };
    let r_ser = (s.driver_mohm + s.charge_mohm) as f64 * 1e-3;
    let v_inf = if charges { (s.vdd_uv as f64 - f64::from(drop_uv)) * r_eff / (r_eff + r_ser) } else { 0.0 };
    let tau_c = c * (s.series_mohm as f64 * 1e-3 + r_ser * r_eff / (r_ser + r_eff));
    let tau_d = c * (r_eff + s.series_mohm as f64 * 1e-3);
    let per_tick = |tau: f64| -> u32 {
        let fraction = -(-1.0 / (tau * f64::from(clock_hz))).exp_m1();
        (fraction * 4_294_967_296.0).round().min(f64::from(u32::MAX)) as u32
    };
    Ok([v_inf.round() as u32, per_tick(tau_c), per_tick(tau_d), s.rise_uv, s.fall_uv, (noise * 1e6) as u32])
}

fn write(stage: &Path, clock_hz: u32, out: &Path) -> Result<(), String> {
    let sf = stagefile::load(stage).map_err(|e| e.to_string())?;
    let mut boards: Vec<(u32, Stage, Option<Fault>, &str, &str)> = Vec::new();
    for i in 0..HEALTHY {
        boards.push((
            i,
            // New boards as the fixture sees them: its spread (no aging, the fixture's temperature).
            draw(&sf.stage, &sf.spread_for(Purpose::Fixture), Dist::Uniform, 0x1CE_B0A7D, u64::from(i)),
            None,
            "within-window",
            "none",
        ));
    }
    let faults = [
        (Fault::CapacitorTimes(10.0), "long", "wrong-part"),
        (Fault::CapacitorTimes(0.1), "short", "wrong-part"),
        (Fault::OpenCapacitor, "short", "open-capacitor"),
        (Fault::OpenResistor, "stuck-active", "open-resistor-or-shorted-node"),
        (Fault::OpenDiode, "no-response", "no-charge-path"),
        // ±2 V: the chip draws one noise value per poll, and at the host twin's
        // ±1.2 V the glitch filter accepts an early drop before the eighth
        // glitch (the board then reads short); from ±1.6 V it chatters.
        (Fault::NoisyOutput(2.0), "chatter", "noisy-output"),
    ];
    for (k, (fault, verdict, hint)) in faults.into_iter().enumerate() {
        boards.push((FAULTY_FROM + k as u32, sf.stage, Some(fault), verdict, hint));
    }
    let mut bytes = b"RCSB".to_vec();
    bytes.extend_from_slice(&1u32.to_le_bytes());
    bytes.extend_from_slice(&(boards.len() as u32).to_le_bytes());
    let mut expect = String::from("# unit verdict hint\n");
    for (unit, s, fault, verdict, hint) in &boards {
        let p = plant(s, *fault, clock_hz)?;
        for v in [*unit, p[0], p[1], p[2], p[3], p[4], p[5], unit.wrapping_mul(0x9E37_79B9) | 1] {
            bytes.extend_from_slice(&v.to_le_bytes());
        }
        bytes.extend_from_slice(&sf.spread.ref_mdeg_c.to_le_bytes());
        expect.push_str(&format!("{unit} {verdict} {hint}\n"));
    }
    std::fs::write(out, bytes).map_err(|e| format!("{}: {e}", out.display()))?;
    let exp = out.with_extension("bin.expect");
    std::fs::write(&exp, expect).map_err(|e| format!("{}: {e}", exp.display()))?;
    println!("{}: {} boards ({HEALTHY} healthy, {} faulty)", out.display(), boards.len(), faults.len());
    Ok(())
}

fn check(uart: &Path, expect: &Path) -> Result<(), String> {
    let bytes = std::fs::read(uart).map_err(|e| format!("{}: {e}", uart.display()))?;
    let mut got: BTreeMap<u32, Vec<(String, String)>> = BTreeMap::new();
    for frame in bytes.split(|&b| b == 0).filter(|f| !f.is_empty()) {
        let r = record::decode(frame).map_err(|e| format!("{}: a frame that does not decode: {e}", uart.display()))?;
        got.entry(r.unit_id).or_default().push((r.verdict.name().to_owned(), r.hint.name().to_owned()));
    }
    let text = std::fs::read_to_string(expect).map_err(|e| format!("{}: {e}", expect.display()))?;
    let mut wrong = Vec::new();
    let mut units = 0usize;
    for line in text.lines().filter(|l| !l.starts_with('#') && !l.is_empty()) {
        let f: Vec<&str> = line.split_whitespace().collect();
        let (Some(unit), Some(verdict), Some(hint)) =
            (f.first().and_then(|u| u.parse::<u32>().ok()), f.get(1), f.get(2))
        else {
            return Err(format!("{}: a line that is not 'unit verdict hint': {line}", expect.display()));
        };
        units += 1;
        match got.remove(&unit).as_deref() {
            Some([(v, h)]) if v == verdict && h == hint => {}
            other => wrong.push(format!("unit {unit}: expected {verdict}/{hint}, got {other:?}")),
        }
    }
    wrong.extend(got.keys().map(|u| format!("unit {u}: sent but not expected")));
    if wrong.is_empty() {
        println!("{}: all {units} units came back once, each with its expected verdict and hint", uart.display());
        Ok(())
    } else {
        Err(format!("{} of {units} units wrong:\n  {}", wrong.len(), wrong.join("\n  ")))
    }
}

/// Capacitance lost per year by the aging unit (1 % a month).
const AGING_RATE: f64 = 0.12;
/// Days the aging unit reports.
const AGING_DAYS: u32 = 700;

fn aging(stage: &Path, clock_hz: u32, out: &Path) -> Result<(), String> {
    let sf = stagefile::load(stage).map_err(|e| e.to_string())?;
    let (lo, hi) = sf.spread.temp_mdeg_c.unwrap_or((sf.spread.ref_mdeg_c, sf.spread.ref_mdeg_c));
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(0xA6E_D0A7);
    let mut bytes = b"RCSB".to_vec();
    bytes.extend_from_slice(&1u32.to_le_bytes());
    bytes.extend_from_slice(&AGING_DAYS.to_le_bytes());
    for day in 0..AGING_DAYS {
        let years = f64::from(day) / 365.25;
        let season = (2.0 * std::f64::consts::PI * (years - 0.3)).sin();
        let temp_c = 18.0 + 12.0 * season + rng.random_range(-3.0..3.0);
        let temp = ((temp_c * 1000.0).round() as i32).clamp(lo, hi);
        let mut aged = sf.stage;
        aged.c_ff = (sf.stage.c_ff as f64 * (1.0 - AGING_RATE * years)).round() as u64;
        let at = sf.spread.at_temperature(&aged, temp).map_err(|e| e.to_string())?;
        let p = plant(&at, None, clock_hz)?;
        let sensor = (temp + rng.random_range(-1_500..=1_500)).clamp(lo, hi);
        for v in [7_000, p[0], p[1], p[2], p[3], p[4], p[5], day | 1] {
            bytes.extend_from_slice(&v.to_le_bytes());
        }
        bytes.extend_from_slice(&sensor.to_le_bytes());
    }
    std::fs::write(out, bytes).map_err(|e| format!("{}: {e}", out.display()))?;
    println!(
        "{}: unit 7000, {AGING_DAYS} days, C falling {:.0} %/year: end of life (C/C0 = 0.80) on day {:.2}",
        out.display(),
        AGING_RATE * 100.0,
        0.2 / AGING_RATE * 365.25
    );
    Ok(())
}

fn aging_check(uart: &Path) -> Result<(), String> {
    let bytes = std::fs::read(uart).map_err(|e| format!("{}: {e}", uart.display()))?;
    let (mut drifting, mut beyond) = (None, None);
    let mut n = 0u32;
    for frame in bytes.split(|&b| b == 0).filter(|f| !f.is_empty()) {
        let r = record::decode(frame).map_err(|e| format!("{}: a frame that does not decode: {e}", uart.display()))?;
        n += 1;
        match r.drift {
            DriftState::Drifting => drifting = drifting.or(Some(r.seq)),
            DriftState::BeyondLimit => beyond = beyond.or(Some(r.seq)),
            _ => {}
        }
    }
    match (drifting, beyond) {
        (Some(d), Some(b)) if d < b && n == AGING_DAYS => {
            println!("{}: {n} days; drifting from day {d}, beyond the limit from day {b}", uart.display());
            Ok(())
        }
        other => Err(format!("{n} records; (first drifting day, first beyond-limit day) = {other:?}")),
    }
}

fn defmt_check(elf: &Path, log: &Path, uart: &Path) -> Result<(), String> {
    let elf_bytes = std::fs::read(elf).map_err(|e| format!("{}: {e}", elf.display()))?;
    let table = defmt_decoder::Table::parse(&elf_bytes)
        .map_err(|e| format!("{}: {e}", elf.display()))?
        .ok_or_else(|| format!("{}: no defmt table (built without the defmt feature?)", elf.display()))?;
    let bytes = std::fs::read(log).map_err(|e| format!("{}: {e}", log.display()))?;
    let mut decoder = table.new_stream_decoder();
    decoder.received(&bytes);
    let mut lines = Vec::new();
    loop {
        match decoder.decode() {
            Ok(frame) => lines.push(frame.display_message().to_string()),
            Err(defmt_decoder::DecodeError::UnexpectedEof) => break,
            Err(e) => return Err(format!("{}: frame {} does not decode: {e}", log.display(), lines.len())),
        }
    }
    let logged: Vec<&String> = lines.iter().filter(|l| l.starts_with("hold measurement: ")).collect();
    let changes: Vec<&String> = lines.iter().filter(|l| l.starts_with("drift state ")).collect();
    let uart_bytes = std::fs::read(uart).map_err(|e| format!("{}: {e}", uart.display()))?;
    let (mut sent, mut sent_changes) = (Vec::new(), Vec::new());
    let mut state = DriftState::Settling;
    for frame in uart_bytes.split(|&b| b == 0).filter(|f| !f.is_empty()) {
        let r = record::decode(frame).map_err(|e| format!("{}: a frame that does not decode: {e}", uart.display()))?;
        sent.push(format!("hold measurement: {} (hint {})", r.verdict.name(), r.hint.name()));
        if r.drift != state {
            sent_changes.push(format!("drift state {state:?} → {:?}", r.drift));
            state = r.drift;
        }
    }
    if logged.len() != sent.len() {
        return Err(format!("{} measurements logged, {} records sent", logged.len(), sent.len()));
    }
    if let Some((i, (l, s))) = logged.iter().zip(&sent).enumerate().find(|(_, (l, s))| l.as_str() != s.as_str()) {
        return Err(format!("record {i}: logged {l:?}, sent {s:?}"));
    }
    let changes: Vec<&str> = changes.iter().map(|c| c.as_str()).collect();
    if changes != sent_changes.iter().map(String::as_str).collect::<Vec<_>>() {
        return Err(format!("drift state changes logged {changes:?}, in the records {sent_changes:?}"));
    }
    println!(
        "{}: {} defmt lines decoded; the {} measurements and {} drift state changes they log match the records, in order",
        log.display(),
        lines.len(),
        logged.len(),
        changes.len()
    );
    Ok(())
}

fn host_run(kind: &str, setup: &Path, file: &Path, out: &Path) -> Result<(), String> {
    let blob = std::fs::read(setup).map_err(|e| format!("{}: {e}", setup.display()))?;
    let setup = hold_firmware::Setup::from_blob(&blob).map_err(|e| format!("{}: {e}", setup.display()))?;
    let bytes = std::fs::read(file).map_err(|e| format!("{}: {e}", file.display()))?;
    let mut frames = Vec::new();
    let sink = |frame: &[u8]| frames.extend_from_slice(frame);
    let sent = match kind {
        "boards" => hold_sim::run_boards(&setup, &bytes, sink),
        "boards-async" => host_check::sim::twin::block_on(hold_sim::run_boards_async(&setup, &bytes, sink)),
        "days" => hold_sim::run_days(&setup, &bytes, sink),
        other => return Err(format!("{other:?}: boards, boards-async or days")),
    }
    .map_err(|e| format!("{}: {e:?}", file.display()))?;
    std::fs::write(out, &frames).map_err(|e| format!("{}: {e}", out.display()))?;
    println!("{}: {sent} records from the host's run of the same loop", out.display());
    Ok(())
}

fn render(uart: &Path) -> Result<(), String> {
    let bytes = std::fs::read(uart).map_err(|e| format!("{}: {e}", uart.display()))?;
    println!("# seq unit verdict hint press_ticks on_ticks hold_ticks c_deviation_ppm");
    for frame in bytes.split(|&b| b == 0).filter(|f| !f.is_empty()) {
        let r = record::decode(frame).map_err(|e| format!("{}: a frame that does not decode: {e}", uart.display()))?;
        let opt = |v: Option<String>| v.unwrap_or_else(|| "-".into());
        println!(
            "{} {} {} {} {} {} {} {}",
            r.seq,
            r.unit_id,
            r.verdict.name(),
            r.hint.name(),
            r.press_ticks,
            opt(r.on_ticks.map(|v| v.to_string())),
            opt(r.hold_ticks.map(|v| v.to_string())),
            opt(r.c_deviation_ppm.map(|v| v.to_string())),
        );
    }
    Ok(())
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let result = match args.iter().map(String::as_str).collect::<Vec<_>>().as_slice() {
        ["write", stage, clock, out] => match clock.parse() {
            Ok(hz) => write(Path::new(stage), hz, Path::new(out)),
            Err(_) => Err(format!("clock {clock:?}: a whole number of Hz")),
        },
        ["check", uart, expect] => check(Path::new(uart), Path::new(expect)),
        ["render", uart] => render(Path::new(uart)),
        ["aging", stage, clock, out] => match clock.parse() {
            Ok(hz) => aging(Path::new(stage), hz, Path::new(out)),
            Err(_) => Err(format!("clock {clock:?}: a whole number of Hz")),
        },
        ["aging-check", uart] => aging_check(Path::new(uart)),
        ["defmt-check", elf, log, uart] => defmt_check(Path::new(elf), Path::new(log), Path::new(uart)),
        ["host-run", kind, setup, file, out] => host_run(kind, Path::new(setup), Path::new(file), Path::new(out)),
        _ => Err(
            "usage: emulator_boards write|aging STAGE.toml CLOCK_HZ OUT.bin | check UART.bin OUT.bin.expect | render UART.bin | aging-check UART.bin | defmt-check ELF LOG.bin UART.bin | host-run boards|boards-async|days SETUP.bin FILE.bin OUT.bin"
                .into(),
        ),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("emulator_boards: {e}");
            ExitCode::FAILURE
        }
    }
}
