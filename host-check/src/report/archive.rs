//! `yield` and `aging` over a Parquet dataset ([`crate::data::archive`]):
//! row groups read in parallel, only the columns a report needs, into the
//! same accumulators as the store and the logs ([`Tally`], [`UnitSums`]), so
//! the figures are the same whichever the records came from.

use std::collections::{HashMap, HashSet};
use std::io::Write;
use std::path::Path;

use hold_firmware::drift::DriftState;

use crate::data::archive::{self, PartFile};
use crate::data::store::{Filter, Setup};
use crate::data::summary::{day_of, UnitSums};
use crate::report::aging::{self, FleetReport, FleetTally};
use crate::report::files::role;
use crate::report::yields::{Tally, YieldReport};
use crate::stage::file::StageFile;
use crate::Error;

/// The columns every report reads: which record, when, in which batch,
/// against which setup, on which clock.
const KEY_COLUMNS: [&str; 7] = ["unit_id", "boot", "seq", "measured_ms", "batch", "setup_id", "clock_hz"];

/// The dataset's files that `filter`'s station and days can hold.
fn selected(dir: &Path, filter: &Filter) -> Result<Vec<PartFile>, Error> {
    let mut parts = archive::part_files(dir)?;
    parts.retain(|p| {
        filter.station.as_deref().is_none_or(|s| s == p.station)
            && filter.from_ms.is_none_or(|t| p.day >= day_of(t))
            && filter.to_ms.is_none_or(|t| p.day <= day_of(t - 1))
    });
    Ok(parts)
}

fn keeps(filter: &Filter, batch: &str, ms: i64, unit: u32) -> bool {
    filter.batch.as_deref().is_none_or(|b| b == batch)
        && filter.from_ms.is_none_or(|t| ms >= t)
        && filter.to_ms.is_none_or(|t| ms < t)
        && filter.unit_id.is_none_or(|u| u == unit)
}

/// The yield report of the dataset `dir`: its setups (`setups/`) judge the
/// records unless `given` replaces them (`Some((setups, id))`: every record
/// measured against setup `id`). `all` counts records of every role (a
/// station was named); `recheck` runs the `f64` re-check.
///
/// # Errors
/// The dataset's errors, one line naming file and column.
#[allow(clippy::too_many_arguments)]
pub fn yield_from_parquet(
    dir: &Path,
    filter: &Filter,
    given: Option<(HashMap<i64, Setup>, i64)>,
    all: bool,
    recheck: bool,
    reject_log: Option<Box<dyn Write + Send>>,
    threads: usize,
) -> Result<YieldReport, Error> {
    let (setups, force) = match given {
        Some((s, id)) => (s, Some(id)),
        None => (archive::read_setups(dir)?, None),
    };
    let parts = selected(dir, filter)?;
    let jobs = archive::jobs(&parts)?;
    let mut wanted = KEY_COLUMNS.to_vec();
    wanted.extend(["on_ticks", "hold_ticks", "c_dev_ppm", "verdict", "hint"]);
    if reject_log.is_some() {
        // The reject log repeats whole records.
        wanted.extend(["press_ticks", "temp_mdeg_c", "drift"]);
    }
    let mut total = Tally::new(&setups, recheck, reject_log);
    // A Mutex only to share it: forking takes no time.
    let proto = std::sync::Mutex::new(total.fork());
    let setups = &setups;
    let yields = |id: Option<i64>| all || role(id.and_then(|i| setups.get(&i)), false).yields;
    crate::par::run_ordered(
        &jobs,
        threads,
        || Ok(()),
        || proto.lock().unwrap_or_else(std::sync::PoisonError::into_inner).fork(),
        |(), t, &(part, rg)| {
            archive::read_part(part, Some(rg), &wanted, |x| {
                let setup = force.or(x.setup_id);
                if keeps(filter, x.batch, x.measured_ms, x.record.unit_id) && yields(setup) {
                    t.add(&part.station, x.batch, x.measured_ms, &x.record, setup);
                }
            })
            .map(|_| ())
        },
        |t| total.merge(t),
    )?;
    total.finish().map_err(|e| Error::io("rejects.csv", e))
}

/// Per thread: each station's units by id — those measured against a field
/// setup (they always belong in aging) and the others (they do when their
/// station turns out to drift).
#[derive(Default)]
struct AgingAcc {
    field: HashMap<String, HashMap<u32, UnitSums>>,
    other: HashMap<String, HashMap<u32, UnitSums>>,
    drifting: HashSet<String>,
}

/// The fleet's aging over the dataset `dir` (units of a field setup, or of a
/// station whose units report drift; every unit of a named station when
/// `all`).
///
/// # Errors
/// The dataset's errors, one line naming file and column.
pub fn aging_from_parquet(
    dir: &Path,
    filter: &Filter,
    all: bool,
    limit_ratio: f64,
    horizon_months: u32,
    threads: usize,
) -> Result<FleetReport, Error> {
    let setups = archive::read_setups(dir)?;
    let stages: HashMap<i64, Option<StageFile>> = setups.iter().map(|(&id, s)| (id, aging::setup_stage(s))).collect();
    let parts = selected(dir, filter)?;
    let jobs = archive::jobs(&parts)?;
    let mut wanted = KEY_COLUMNS.to_vec();
    wanted.extend(["hold_ticks", "temp_mdeg_c", "c_dev_ppm", "drift"]);
    let accs = archive::run_per_thread(&jobs, threads, AgingAcc::default, |acc, part, rg| {
        let field_of = |id: Option<i64>| id.and_then(|i| setups.get(&i)).is_some_and(Setup::is_field);
        let (mut field, mut other) =
            (acc.field.remove(&part.station).unwrap_or_default(), acc.other.remove(&part.station).unwrap_or_default());
        let mut drifts = false;
        let r = archive::read_part(part, Some(rg), &wanted, |x| {
            if !keeps(filter, x.batch, x.measured_ms, x.record.unit_id) {
                return;
            }
            drifts |= x.record.drift != DriftState::Settling;
            let stage = x.setup_id.and_then(|i| stages.get(&i)).and_then(Option::as_ref);
            let units = if field_of(x.setup_id) { &mut field } else { &mut other };
            let u = units.entry(x.record.unit_id).or_default();
            match aging::deviation_ppm(&x.record, stage) {
                Ok(d) => u.add(x.measured_ms, x.record.seq, d),
                Err(why) => {
                    u.skipped += 1;
                    u.without_stage += u64::from(why == aging::NoPoint::WithoutStage);
                }
            }
        });
        acc.field.insert(part.station.clone(), field);
        acc.other.insert(part.station.clone(), other);
        if drifts {
            acc.drifting.insert(part.station.clone());
        }
        r.map(|_| ())
    })?;
    let mut field: HashMap<String, HashMap<u32, UnitSums>> = HashMap::new();
    let mut other: HashMap<String, HashMap<u32, UnitSums>> = HashMap::new();
    let mut drifting = HashSet::new();
    for a in accs {
        for (into, from) in [(&mut field, a.field), (&mut other, a.other)] {
            for (station, units) in from {
                let mine = into.entry(station).or_default();
                for (unit, s) in units {
                    mine.entry(unit).or_default().merge(&s);
                }
            }
        }
        drifting.extend(a.drifting);
    }
    let mut tally = FleetTally::new(&setups);
    for (station, units) in &field {
        for (unit, s) in units {
            tally.add_unit(station, *unit, s);
        }
    }
    for (station, units) in &other {
        if all || drifting.contains(station) {
            for (unit, s) in units {
                tally.add_unit(station, *unit, s);
            }
        }
    }
    Ok(tally.finish(limit_ratio, horizon_months))
}
