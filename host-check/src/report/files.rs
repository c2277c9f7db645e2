//! The one writer of report files: `yield.txt` and the hold histograms,
//! `aging.txt` and the fleet and unit charts, and the HTML page. The
//! `yield`, `aging` and `demo` commands all write through it, so a report
//! folder looks the same whoever wrote it.

use std::path::{Path, PathBuf};

use crate::fmt::file_safe;
use crate::report::aging::{self, FleetReport, UnitTrend};
use crate::report::yields::{self, YieldReport};
use crate::Error;

/// A folder of report files, and what was written into it.
#[derive(Debug)]
pub struct ReportDir {
    dir: PathBuf,
    /// Files written, in order.
    pub files: Vec<PathBuf>,
}

/// The charts of a yield report: one hold histogram per station.
#[derive(Debug, Default)]
pub struct YieldCharts {
    /// SVG per station with a window.
    pub holds: Vec<String>,
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
        Ok(ReportDir { dir: dir.to_path_buf(), files: Vec::new() })
    }

    /// The path of `name` in the folder.
    #[must_use]
    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.join(name)
    }

    /// Writes one file.
    ///
    /// # Errors
    /// [`Error::Io`] naming the file.
    pub fn put(&mut self, name: &str, text: &str) -> Result<(), Error> {
        let p = self.dir.join(name);
        std::fs::write(&p, text).map_err(|e| Error::io(&p, e))?;
        self.files.push(p);
        Ok(())
    }

    /// `yield.txt` (`rows` per table) and `hold-STATION.svg` per station.
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

/// The units that need attention (at risk or beyond the limit), soonest
/// forecast first.
#[must_use]
pub fn needing_attention(f: &FleetReport) -> Vec<&UnitTrend> {
    let mut v: Vec<&UnitTrend> =
        f.units.iter().filter(|u| matches!(u.status, aging::Status::AtRisk | aging::Status::BeyondLimit)).collect();
    v.sort_by_key(|u| u.forecast_ms.unwrap_or(i64::MAX));
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn files_land_in_the_folder_and_a_bad_folder_is_named() -> Result<(), Error> {
        let dir = tempfile::tempdir().map_err(|e| Error::io("tempdir", e))?;
        let mut out = ReportDir::create(&dir.path().join("r"))?;
        out.put("a.txt", "x")?;
        assert_eq!(out.files, vec![dir.path().join("r").join("a.txt")]);
        std::fs::write(dir.path().join("file"), "").map_err(|e| Error::io("file", e))?;
        let e = ReportDir::create(&dir.path().join("file").join("sub")).err().map(|e| e.kind());
        assert_eq!(e, Some(crate::Kind::Environment));
        Ok(())
    }
}
