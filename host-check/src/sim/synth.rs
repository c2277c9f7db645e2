//! Synthetic measurement logs for trying the tools and for benchmarks (not
//! real data): boards of the Lumen-3 example stage measured at 1 MHz, judged
//! against the window the example's stage file gives the firmware.

use std::io::Write;
use std::path::Path;

use hold_firmware::drift::DriftState;
use hold_firmware::record::Record;
use hold_firmware::{Hint, Verdict};
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;

use crate::data::{log, time};
use crate::design::window;
use crate::fmt::secs;
use crate::report::stats::box_muller;
use crate::sim::demo::{BOARD_TOML, CLOCK_HZ, GUARD_PPM};
use crate::stage::file::{self as stagefile, Purpose};
use crate::Error;

/// Boards per batch.
const PER_BATCH: u64 = 5_000;
/// First measurement, and 250 ms between measurements.
const START: &[u8] = b"2027-01-04T06:00:00Z";

/// Writes `records` measurements from `stations` stations to `out`: holds
/// around the example's nominal with σ 4 %, one board in 100 grossly off,
/// each judged against the example's windows at 1 MHz with the hint the
/// firmware would give (hold and turn-on latency are proportional to C).
///
/// # Errors
/// [`Error::Io`] when `out` cannot be written.
pub fn write_log(out: &Path, records: u64, stations: u32, seed: u64) -> Result<(), Error> {
    let sf = stagefile::parse(Path::new("lumen-keypad.toml"), BOARD_TOML)?;
    let nominal = sf.nominal()?;
    let nominal_ticks = secs(nominal.hold) * f64::from(CLOCK_HZ);
    let config = window::settings(&sf, Purpose::Fixture, CLOCK_HZ, GUARD_PPM, window::default_poll_ns(&sf)?)?.config;
    let io = |e| Error::io(out, e);
    let f = std::fs::File::create(out).map_err(io)?;
    let mut w = std::io::BufWriter::with_capacity(1 << 20, f);
    log::write_header(&mut w).map_err(io)?;
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    let start = time::parse_ms(START).unwrap_or(0);
    let names: Vec<String> = (0..stations.max(1)).map(|s| format!("line-{}", s + 1)).collect();
    for i in 0..records {
        let gross = rng.random_bool(0.01);
        let hold = if gross {
            rng.random_range(nominal_ticks as u64 / 12..nominal_ticks as u64 * 3)
        } else {
            let z = box_muller(rng.random_range(f64::EPSILON..1.0), rng.random_range(0.0..1.0));
            (nominal_ticks.round() * (1.0 + 0.04 * z)) as u64
        };
        // The turn-on latency scales with C as the hold does.
        let on = (config.on_nominal_ticks as f64 * hold as f64 / nominal_ticks).round() as u64;
        let c = &config;
        let verdict =
            Verdict::of_times(Some(on), hold, c.on_min_ticks, c.on_max_ticks, c.hold_min_ticks, c.hold_max_ticks);
        let dev_ppm = ((hold as f64 / nominal_ticks - 1.0) * 1e6).round() as i64;
        let start_failed = matches!(verdict, Verdict::FastStart | Verdict::SlowStart);
        let r = Record {
            seq: 0,
            unit_id: (i & 0xFFFF_FFFF) as u32,
            boot: 1,
            press_ticks: 100_000,
            on_ticks: Some(on),
            hold_ticks: Some(hold),
            clock_hz: CLOCK_HZ,
            temp_mdeg_c: Some(23_000 + rng.random_range(-2_000..2_000)),
            verdict,
            hint: if verdict.passes() {
                Hint::None
            } else {
                Hint::from_times(dev_ppm, config.on_reading(on), start_failed)
            },
            drift: DriftState::Settling,
            c_deviation_ppm: (!verdict.passes())
                .then(|| dev_ppm.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32),
        };
        let name = names.get((i % names.len() as u64) as usize).map_or("line-1", String::as_str);
        log::write_line(&mut w, start + (i as i64) * 250, name, &format!("B{}", i / PER_BATCH), &r).map_err(io)?;
    }
    w.flush().map_err(io)
}

/// The fleet's first day, midnight UTC.
const FLEET_START: &[u8] = b"2027-03-01T00:00:00Z";

/// The setup synthetic fixture logs and fleets are measured against: the
/// Lumen-3 example's fixture window at 1 MHz.
///
/// # Errors
/// Only if the example stage file stopped evaluating.
pub fn example_setup() -> Result<crate::data::store::Setup, Error> {
    let sf = stagefile::parse(Path::new("lumen-keypad.toml"), BOARD_TOML)?;
    let s = window::settings(&sf, Purpose::Fixture, CLOCK_HZ, GUARD_PPM, window::default_poll_ns(&sf)?)?;
    Ok(crate::data::store::Setup {
        name: "lumen-keypad.toml".into(),
        stage_toml: BOARD_TOML.into(),
        clock_hz: CLOCK_HZ,
        guard_ppm: GUARD_PPM,
        poll_ns: s.config.poll_ns,
        hold_min_ticks: s.config.hold_min_ticks,
        hold_max_ticks: s.config.hold_max_ticks,
    })
}

/// Calls `each(station, batch, measured_ms, record)` for a synthetic fleet
/// (not real data): `units` field units of the Lumen-3 example (station
/// `fleet-<k>`, 100,000 units each) reporting once a day for `days` days,
/// units `first .. first + count` of them only (for parallel writers). Each
/// unit's capacitance starts within ±3 % of nominal and loses 1 %/year
/// (σ 0.5 %/year); one unit in 50 loses 15 %/year; each reading scatters by
/// 300 ppm and the hold follows C. Verdicts by the example's fixture window
/// (an aged unit reads short); drift state settling for 5 days, then steady,
/// or drifting when it ages fast, beyond limit below −20 %.
///
/// # Errors
/// Whatever `each` returns.
pub fn fleet(
    units: u32,
    days: u32,
    first: u32,
    count: u32,
    seed: u64,
    mut each: impl FnMut(&str, &str, i64, &Record) -> Result<(), Error>,
) -> Result<(), Error> {
    let sf = stagefile::parse(Path::new("lumen-keypad.toml"), BOARD_TOML)?;
    let nominal_ticks = secs(sf.nominal()?.hold) * f64::from(CLOCK_HZ);
    let config = window::settings(&sf, Purpose::Fixture, CLOCK_HZ, GUARD_PPM, window::default_poll_ns(&sf)?)?.config;
    let start = time::parse_ms(FLEET_START).unwrap_or(0);
    let end = first.saturating_add(count).min(units);
    // Each unit's own constants, from its own seed (the same whatever the split).
    let unit_consts = |u: u32| {
        let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed ^ (u64::from(u) << 20) ^ 0x5EED_F1EE7);
        let offset = rng.random_range(-0.03..0.03);
        let fast = rng.random_bool(0.02);
        let z = box_muller(rng.random_range(f64::EPSILON..1.0), rng.random_range(0.0..1.0));
        let rate = if fast { -0.15 } else { -0.01 + 0.005 * z };
        let at_ms = rng.random_range(0..86_400_000i64);
        (offset, rate, fast, at_ms, rng)
    };
    let mut consts: Vec<_> = (first..end).map(unit_consts).collect();
    let stations: Vec<String> = (0..units.div_ceil(100_000).max(1)).map(|k| format!("fleet-{}", k + 1)).collect();
    for day in 0..days {
        for (u, (offset, rate, fast, at_ms, rng)) in (first..end).zip(consts.iter_mut()) {
            let t_years = f64::from(day) / 365.25;
            let noise = box_muller(rng.random_range(f64::EPSILON..1.0), rng.random_range(0.0..1.0)) * 300e-6;
            let dev = *offset + *rate * t_years + noise;
            let hold = (nominal_ticks * (1.0 + dev)).round().max(1.0) as u64;
            let on = (config.on_nominal_ticks as f64 * (1.0 + dev)).round() as u64;
            let c = &config;
            let verdict =
                Verdict::of_times(Some(on), hold, c.on_min_ticks, c.on_max_ticks, c.hold_min_ticks, c.hold_max_ticks);
            let dev_ppm = (dev * 1e6).round() as i32;
            let drift = if day < 5 {
                DriftState::Settling
            } else if dev < -0.2 {
                DriftState::BeyondLimit
            } else if *fast && day > 20 {
                DriftState::Drifting
            } else {
                DriftState::Steady
            };
            let r = Record {
                seq: day,
                unit_id: u,
                boot: 1,
                press_ticks: 100_000,
                on_ticks: Some(on),
                hold_ticks: Some(hold),
                clock_hz: CLOCK_HZ,
                temp_mdeg_c: Some(25_000 + rng.random_range(-5_000..5_000)),
                verdict,
                hint: if verdict.passes() {
                    Hint::None
                } else {
                    Hint::from_times(i64::from(dev_ppm), config.on_reading(on), false)
                },
                drift,
                c_deviation_ppm: Some(dev_ppm),
            };
            let station = stations.get((u / 100_000) as usize).map_or("fleet-1", String::as_str);
            let ms = start + i64::from(day) * 86_400_000 + *at_ms;
            each(station, "field", ms, &r)?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_synthetic_log_reads_back_with_its_window() -> Result<(), Error> {
        let dir = tempfile::tempdir().map_err(|e| Error::io("tempdir", e))?;
        let path = dir.path().join("s.csv");
        write_log(&path, 500, 3, 9)?;
        let file = std::fs::File::open(&path).map_err(|e| Error::io(&path, e))?;
        let n = log::read(&path, file, |_, l: &log::Line<'_>| {
            let hold = l.record.hold_ticks.unwrap_or(0);
            let on = l.record.on_ticks.unwrap_or(0);
            let passes = l.record.verdict.passes();
            if passes != ((506_000..1_254_000).contains(&hold) && (30..100).contains(&on)) {
                return Err(format!("hold {hold} judged {:?}", l.record.verdict));
            }
            Ok(())
        })?;
        assert_eq!(n, 500);
        Ok(())
    }
}
