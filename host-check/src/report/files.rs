//! The one writer of report files: `yield.txt` and the hold histograms,
//! `aging.txt` and the fleet and unit charts, and the HTML page. The
//! `yield`, `aging` and `demo` commands all write through it, so a report
//! folder looks the same whoever wrote it.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use crate::data::store::{Filter, Setup, Store, Stored};
use crate::fmt::file_safe;
use crate::report::aging::FleetTally;
use crate::report::aging::{self, FleetReport, UnitTrend};
use crate::report::yields::{self, Tally, YieldReport};
use crate::Error;

/// A folder of report files, and what was written into it. Files are
/// written under temporary names and take their names together at
/// [`ReportDir::commit`]: a report that fails half-way leaves the folder's
/// earlier files as they were (a dropped, uncommitted folder removes its
/// temporary files).
#[derive(Debug)]
pub struct ReportDir {
    dir: PathBuf,
    /// Files written (under their final names once committed), in order.
    pub files: Vec<PathBuf>,
    /// (temporary, final) names not yet committed.
    staged: Vec<(PathBuf, PathBuf)>,
}

/// The charts of a yield report: one hold histogram per station, and per
/// station with three days or more its daily yield and EWMA chart.
#[derive(Debug, Default)]
pub struct YieldCharts {
    /// SVG per station with a window.
    pub holds: Vec<String>,
    /// SVGs of the stations over time.
    pub over_time: Vec<String>,
}

/// The charts of an aging report.
#[derive(Debug, Default)]
pub struct AgingCharts {
    /// Every unit's trend.
    pub fleet: String,
    /// The histogram of rates (none without a rate).
    pub rates: Option<String>,
    /// The chosen units' trends.
    pub units: Vec<String>,
}

impl ReportDir {
    /// Creates `dir` (and its parents) if needed.
    ///
    /// # Errors
    /// [`Error::Io`] when it cannot be created.
    pub fn create(dir: &Path) -> Result<ReportDir, Error> {
        std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
        Ok(ReportDir { dir: dir.to_path_buf(), files: Vec::new(), staged: Vec::new() })
    }

    /// The path `name` will have in the folder.
    #[must_use]
    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.join(name)
    }

    /// Stages `name`: its temporary path, renamed to `name` on commit.
    fn stage(&mut self, name: &str) -> PathBuf {
        let tmp = self.dir.join(format!(".{name}.{}.partial", std::process::id()));
        // Staged again (written afresh): one entry still.
        if !self.staged.iter().any(|(t, _)| *t == tmp) {
            self.staged.push((tmp.clone(), self.dir.join(name)));
            self.files.push(self.dir.join(name));
        }
        tmp
    }

    /// Writes one file (under a temporary name until [`ReportDir::commit`]).
    ///
    /// # Errors
    /// [`Error::Io`] naming the file.
    pub fn put(&mut self, name: &str, text: &str) -> Result<(), Error> {
        let tmp = self.stage(name);
        std::fs::write(&tmp, text).map_err(|e| Error::io(self.dir.join(name), e))
    }

    /// A file to stream `name` into (under a temporary name until [`ReportDir::commit`]).
    ///
    /// # Errors
    /// [`Error::Io`] naming the file.
    pub fn create_file(&mut self, name: &str) -> Result<std::fs::File, Error> {
        let tmp = self.stage(name);
        std::fs::File::create(&tmp).map_err(|e| Error::io(self.dir.join(name), e))
    }

    /// Gives every staged file its name. Returns the files.
    ///
    /// # Errors
    /// [`Error::Io`] naming a file that could not be renamed.
    pub fn commit(mut self) -> Result<Vec<PathBuf>, Error> {
        for (tmp, name) in std::mem::take(&mut self.staged) {
            std::fs::rename(&tmp, &name).map_err(|e| Error::io(&name, e))?;
        }
        Ok(std::mem::take(&mut self.files))
    }

    /// `yield.txt` (`rows` per table), `hold-STATION.svg` per station, and
    /// `yield-STATION.svg` and `ewma-STATION.svg` for stations with three days or more.
    ///
    /// # Errors
    /// [`Error::Io`] naming the file.
    pub fn yields(&mut self, y: &YieldReport, rows: usize) -> Result<YieldCharts, Error> {
        self.put("yield.txt", &yields::render_text(y, rows))?;
        let mut charts = YieldCharts::default();
        for g in &y.stations {
            if let Some(svg) = yields::histogram_svg(g) {
                self.put(&format!("hold-{}.svg", file_safe(&g.name)), &svg)?;
                charts.holds.push(svg);
            }
            if let Some((daily, ewma)) = yields::station_svgs(y, &g.name) {
                self.put(&format!("yield-{}.svg", file_safe(&g.name)), &daily)?;
                self.put(&format!("ewma-{}.svg", file_safe(&g.name)), &ewma)?;
                charts.over_time.extend([daily, ewma]);
            }
        }
        Ok(charts)
    }

    /// `aging.txt` (`rows` in the table), `fleet.svg`, `fleet-rates.svg` and
    /// `unit-N.svg` for each of `units`.
    ///
    /// # Errors
    /// [`Error::Io`] naming the file.
    pub fn aging(&mut self, f: &FleetReport, rows: usize, units: &[&UnitTrend]) -> Result<AgingCharts, Error> {
        self.put("aging.txt", &aging::render_text(f, rows))?;
        let fleet = aging::fleet_svg(f);
        self.put("fleet.svg", &fleet)?;
        let rates = aging::rates_svg(f);
        if let Some(r) = &rates {
            self.put("fleet-rates.svg", r)?;
        }
        let mut charts = AgingCharts { fleet, rates, units: Vec::new() };
        for u in units {
            let svg = aging::unit_svg(u, f.limit_ratio);
            self.put(&format!("unit-{}.svg", u.unit), &svg)?;
            charts.units.push(svg);
        }
        Ok(charts)
    }
}

impl Drop for ReportDir {
    fn drop(&mut self) {
        for (tmp, _) in &self.staged {
            let _ = std::fs::remove_file(tmp);
        }
    }
}

/// The units that need attention (at risk or beyond the limit), soonest
/// forecast first.
#[must_use]
pub fn needing_attention(f: &FleetReport) -> Vec<&UnitTrend> {
    let mut v: Vec<&UnitTrend> =
        f.units.iter().filter(|u| matches!(u.status, aging::Status::AtRisk | aging::Status::BeyondLimit)).collect();
    v.sort_by_key(|u| u.forecast_ms.unwrap_or(i64::MAX));
    v
}

/// Which reports a stored record belongs in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Role {
    /// Fixture yield: every record except those measured against a field
    /// setup ([`Setup::is_field`]: a window that passes any hold judges nothing).
    pub yields: bool,
    /// Fleet aging: records measured against a field setup, or from a
    /// station whose units report drift states past settling (a fixture
    /// measures a board once and tracks no drift); a field unit's first,
    /// settling records count too.
    pub aging: bool,
}

/// The reports a record belongs in: measured against `setup`, at a station
/// whose units do (`drift_station`) or do not track drift.
#[must_use]
pub fn role(setup: Option<&Setup>, drift_station: bool) -> Role {
    let field_setup = setup.is_some_and(Setup::is_field);
    Role { yields: !field_setup, aging: field_setup || drift_station }
}

/// One pass over the store's records that `filter` selects, each with its
/// station's name and its [`role`].
///
/// # Errors
/// The store's errors.
pub fn each_record(store: &Store, filter: &Filter, mut each: impl FnMut(&str, &Stored, Role)) -> Result<u64, Error> {
    let setups = store.setups()?;
    let stations = store.stations()?;
    let drifting = store.drift_stations()?;
    let unknown = String::from("?");
    Ok(store.for_each(filter, |s| {
        let role = role(s.setup_id.and_then(|id| setups.get(&id)), drifting.contains(&s.station_id));
        each(stations.get(&s.station_id).unwrap_or(&unknown), &s, role);
    })?)
}

/// As [`each_record`], on `threads` threads over key ranges of the store
/// (each with its own read connection): `fresh` makes an accumulator per
/// range, `merge` receives them in key order, so the result is the one
/// [`each_record`] gives.
///
/// # Errors
/// The store's errors.
pub fn each_record_split<T: Send>(
    store: &Store,
    filter: &Filter,
    threads: usize,
    fresh: impl Fn() -> T + Sync,
    each: impl Fn(&mut T, &str, &Stored, Role) + Sync,
    merge: impl FnMut(T),
) -> Result<(), Error> {
    let setups = store.setups()?;
    let stations = store.stations()?;
    let batches = store.batches()?;
    let drifting = store.drift_stations()?;
    let unknown = String::from("?");
    let ranges = store.key_ranges(u32::try_from(threads * 4).unwrap_or(u32::MAX))?;
    let path = store.path().to_path_buf();
    crate::par::run_ordered(
        &ranges,
        threads,
        || Store::open_reader(&path).map_err(Error::from),
        fresh,
        |reader, acc, range| {
            reader
                .for_each_in(filter, *range, &batches, |s| {
                    let role = role(s.setup_id.and_then(|id| setups.get(&id)), drifting.contains(&s.station_id));
                    each(acc, stations.get(&s.station_id).unwrap_or(&unknown), &s, role);
                })
                .map_err(Error::from)
        },
        merge,
    )
}

/// The yield report of a store from its summaries ([`Store::cells`]) and,
/// for the reject list and log, the rows of its rejects only (a partial
/// index holds them): what `yield` reads when it does not re-check every
/// verdict and `filter` is on whole days ([`Filter::by_days`]). The figures
/// equal a [`Tally`] over the same rows (the store's test `summaries_equal_a_recount`).
/// `all` counts records of every role (a station was named).
///
/// # Errors
/// The store's errors; writing the reject log.
pub fn yield_from_summaries(
    store: &Store,
    filter: &Filter,
    all: bool,
    reject_log: Option<Box<dyn std::io::Write + Send>>,
) -> Result<YieldReport, Error> {
    let setups = store.setups()?;
    let stations = store.stations()?;
    let batches = store.batches()?;
    let drifting = store.drift_stations()?;
    let unknown = String::from("?");
    let mut tally = Tally::new(&setups, false, reject_log);
    let setup = |id: i64| Some(id).filter(|&i| i != 0);
    let takes = |station_id: i64, setup_id: Option<i64>| {
        all || role(setup_id.and_then(|i| setups.get(&i)), drifting.contains(&station_id)).yields
    };
    for (at, c) in store.cells(filter)? {
        if takes(at.station_id, setup(at.setup_id)) {
            let st = stations.get(&at.station_id).unwrap_or(&unknown);
            let b = batches.get(&at.batch_id).unwrap_or(&unknown);
            tally.add_cell(st, b, at.day, setup(at.setup_id), at.clock_hz, &c);
        }
    }
    store.rejects(filter, |s| {
        if takes(s.station_id, s.setup_id) {
            let st = stations.get(&s.station_id).unwrap_or(&unknown);
            tally.add_reject(st, &s.batch, s.measured_ms, &s.record, s.setup_id);
        }
        !tally.rejects_full()
    })?;
    tally.finish().map_err(|e| Error::io("rejects.csv", e))
}

/// The fleet's aging from the store's per-unit sums ([`Store::unit_fits`]):
/// one row per unit instead of every record. `station` and `unit` select;
/// `all` takes units of every role (a station was named). Units in `charted`
/// (station, unit) get their points read from the rows, for their charts.
///
/// # Errors
/// The store's errors.
pub fn aging_from_summaries(
    store: &Store,
    station: Option<&str>,
    unit: Option<u32>,
    all: bool,
    limit_ratio: f64,
    horizon_months: u32,
) -> Result<FleetReport, Error> {
    let setups = store.setups()?;
    let stations = store.stations()?;
    let drifting = store.drift_stations()?;
    let unknown = String::from("?");
    let mut tally = FleetTally::new(&setups);
    for ((station_id, unit_id, setup_id), sums) in store.unit_fits(station, unit)? {
        let setup = Some(setup_id).filter(|&i| i != 0).and_then(|i| setups.get(&i));
        if all || role(setup, drifting.contains(&station_id)).aging {
            tally.add_unit(stations.get(&station_id).unwrap_or(&unknown), unit_id, &sums);
        }
    }
    Ok(tally.finish(limit_ratio, horizon_months))
}

/// Gives the units of `report` named in `charted` (station, unit) their
/// points, read from the store's rows (for their charts): the trend of those
/// rows is the same as the sums' (the store's test `summaries_equal_a_recount`).
///
/// # Errors
/// The store's errors.
pub fn with_points(store: &Store, report: &mut FleetReport, charted: &[(String, u32)], all: bool) -> Result<(), Error> {
    if charted.is_empty() {
        return Ok(());
    }
    let setups = store.setups()?;
    let mut tally = FleetTally::new(&setups);
    for (station, unit) in charted {
        let f = Filter { station: Some(station.clone()), unit_id: Some(*unit), ..Filter::default() };
        each_record(store, &f, |st, s, role| {
            if all || role.aging {
                tally.add(st, s.measured_ms, &s.record, s.setup_id);
            }
        })?;
    }
    // The same horizon: the report's "now" is the whole fleet's last measurement.
    let mut fresh = tally.finish_at(report.limit_ratio, report.horizon_months, report.now_ms);
    for u in &mut report.units {
        if let Some(i) = fresh.units.iter().position(|f| f.station == u.station && f.unit == u.unit) {
            *u = fresh.units.swap_remove(i);
        }
    }
    Ok(())
}

/// The whole report of a store into `dir`: the yield of the records that
/// belong in it (with the `f64` re-check and `rejects.csv`), the aging of its
/// field records, their text files and charts (the twelve units that need
/// attention soonest), and `report.html` with the store's sources. The
/// demo writes its report folder through this too.
///
/// # Errors
/// The store's errors, or [`Error::Io`] naming a file.
pub fn store_report(
    store: &Store,
    filter: &Filter,
    dir: &Path,
    limit_ratio: f64,
    horizon_months: u32,
) -> Result<(YieldReport, crate::report::aging::FleetReport, Vec<PathBuf>), Error> {
    let mut out = ReportDir::create(dir)?;
    let setups: HashMap<i64, Setup> = store.setups()?;
    let rejects_path = out.path("rejects.csv");
    let rej = out.create_file("rejects.csv")?;
    let mut tally = Tally::new(&setups, true, Some(Box::new(std::io::BufWriter::new(rej))));
    let mut fleet = FleetTally::new(&setups);
    each_record(store, filter, |station, s, role| {
        if role.aging {
            fleet.add(station, s.measured_ms, &s.record, s.setup_id);
        }
        if role.yields {
            tally.add(station, &s.batch, s.measured_ms, &s.record, s.setup_id);
        }
    })?;
    let y = tally.finish().map_err(|e| Error::io(&rejects_path, e))?;
    let f = fleet.finish(limit_ratio, horizon_months);
    let yc = out.yields(&y, 40)?;
    let units: Vec<&UnitTrend> = needing_attention(&f).into_iter().take(12).collect();
    let ac = out.aging(&f, 40, &units)?;
    let html = crate::report::html::page(&y, &f, &store.sources()?, &yc, &ac);
    out.put("report.html", &html)?;
    Ok((y, f, out.commit()?))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn roles_follow_the_setup_and_the_station() {
        let s = crate::report::yields::tests::example_setup();
        assert_eq!(role(Some(&s), false), Role { yields: true, aging: false });
        assert_eq!(role(Some(&s), true), Role { yields: true, aging: true });
        let field = Setup { hold_min_ticks: 0, ..s };
        assert_eq!(role(Some(&field), false), Role { yields: false, aging: true });
        assert_eq!(role(None, false), Role { yields: true, aging: false });
    }

    #[test]
    fn files_land_in_the_folder_and_a_bad_folder_is_named() -> Result<(), Error> {
        let dir = tempfile::tempdir().map_err(|e| Error::io("tempdir", e))?;
        let mut out = ReportDir::create(&dir.path().join("r"))?;
        out.put("a.txt", "x")?;
        assert!(!dir.path().join("r").join("a.txt").exists(), "named only on commit");
        assert_eq!(out.commit()?, vec![dir.path().join("r").join("a.txt")]);
        assert_eq!(std::fs::read_to_string(dir.path().join("r").join("a.txt")).ok().as_deref(), Some("x"));
        // A report that fails half-way: the earlier file stays, no temporary file is left.
        let mut out = ReportDir::create(&dir.path().join("r"))?;
        out.put("a.txt", "y")?;
        drop(out);
        assert_eq!(std::fs::read_to_string(dir.path().join("r").join("a.txt")).ok().as_deref(), Some("x"));
        let left = std::fs::read_dir(dir.path().join("r")).map(|d| d.count()).unwrap_or(0);
        assert_eq!(left, 1);
        std::fs::write(dir.path().join("file"), "").map_err(|e| Error::io("file", e))?;
        let e = ReportDir::create(&dir.path().join("file").join("sub")).err().map(|e| e.kind());
        assert_eq!(e, Some(crate::Kind::Environment));
        Ok(())
    }
}
