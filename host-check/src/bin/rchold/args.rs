//! The one option checker of `rchold` (every refused option reads
//! `--opt "value": why (accepted: range)`), the argument groups several
//! commands share, progress bars, output and exit codes.

use std::collections::HashMap;
use std::io::Write as _;
use std::path::{Path, PathBuf};

use anyhow::Context as _;
use clap::Args;
use host_check::data::store::{Filter, Setup, Store};
use host_check::data::time;
use host_check::design::window;
use host_check::stage::file::{self as stagefile, Purpose};
use host_check::stage::values::{parse_tolerance, parse_value, Tol};
use host_check::Error;
use indicatif::{ProgressBar, ProgressStyle};

/// The refusal of an option value, in the one form every command uses.
pub fn bad(opt: &str, value: &str, why: impl std::fmt::Display, accepted: &str) -> Error {
    Error::Input(format!("--{opt} {value:?}: {why} (accepted: {accepted})"))
}

/// A value with an SI prefix and one of `units` (`"4.7k"`, `"100ms"`),
/// inside `lo ..= hi`.
pub fn value(opt: &str, text: &str, units: &[&str], lo: f64, hi: f64, accepted: &str) -> Result<f64, Error> {
    let x = parse_value(text, units).map_err(|e| bad(opt, text, e, accepted))?;
    if x.is_nan() || x < lo || x > hi {
        return Err(bad(opt, text, "out of range", accepted));
    }
    Ok(x)
}

/// A percentage (`"2%"`) as a fraction in `lo ..= hi`.
pub fn fraction(opt: &str, text: &str, lo: f64, hi: f64, accepted: &str) -> Result<f64, Error> {
    match parse_tolerance(text, &[]) {
        Ok(Tol::Relative(f)) if f >= lo && f <= hi => Ok(f),
        Ok(_) => Err(bad(opt, text, "give a percentage in range", accepted)),
        Err(e) => Err(bad(opt, text, e, accepted)),
    }
}

/// An end-of-life loss of capacitance (`"-20%"` or `"20%"`) as the
/// remaining ratio C/C₀ (0.8), above 0 % and below 100 % lost.
pub fn end_of_life(opt: &str, text: &str) -> Result<f64, Error> {
    let accepted = "a loss of 0 % … 100 % (\"-20%\")";
    fraction(opt, text.trim_start_matches('-'), f64::MIN_POSITIVE, 1.0 - f64::EPSILON, accepted)
        .map(|loss| 1.0 - loss)
        .map_err(|_| bad(opt, text, "not a loss of capacitance", accepted))
}

/// A count or number inside `range`.
pub fn within<T: PartialOrd + std::fmt::Display>(
    opt: &str,
    v: T,
    range: std::ops::RangeInclusive<T>,
    accepted: &str,
) -> Result<T, Error> {
    if range.contains(&v) {
        Ok(v)
    } else {
        Err(Error::Input(format!("--{opt} {v}: out of range (accepted: {accepted})")))
    }
}

/// A date `YYYY-MM-DD` (midnight UTC) or a UTC time, as ms since the epoch.
pub fn date_or_time(opt: &str, text: &str) -> Result<i64, Error> {
    time::parse_date_or_time(text)
        .ok_or_else(|| bad(opt, text, "not a date or UTC time", &format!("YYYY-MM-DD or {}", time::FORM)))
}

/// A period ("30s", "15min", "6h", "1d") in ms, 1 ms … 1 year.
pub fn period_ms(opt: &str, text: &str) -> Result<i64, Error> {
    let accepted = "a number with ms, s, min, h or d, 1 ms … 1 year";
    let s = text.trim();
    let split =
        s.find(|c: char| !(c.is_ascii_digit() || c == '.')).ok_or_else(|| bad(opt, text, "no unit", accepted))?;
    let (num, unit) = s.split_at(split);
    let v: f64 = num.parse().map_err(|_| bad(opt, text, "no number", accepted))?;
    let k = match unit.trim() {
        "ms" => 1.0,
        "s" => 1e3,
        "min" => 60e3,
        "h" => 3_600e3,
        "d" => 86_400e3,
        _ => return Err(bad(opt, text, "unknown unit", accepted)),
    };
    let ms = (v * k).round();
    if (1.0..=3.2e10).contains(&ms) {
        Ok(ms as i64)
    } else {
        Err(bad(opt, text, "out of range", accepted))
    }
}

/// A station or batch name: `min ..= 64` bytes, no control characters.
pub fn name<'a>(opt: &str, text: &'a str, min: usize) -> Result<&'a str, Error> {
    if host_check::data::validate::name(text, min).is_err() {
        let accepted = format!("{min} … 64 bytes, no control, direction or invisible characters");
        return Err(bad(opt, text, "not a name", &accepted));
    }
    Ok(text)
}

/// Reads a stage file (its own errors name file, line and key).
pub fn stage(path: &Path) -> Result<stagefile::StageFile, Error> {
    Ok(stagefile::load(path)?)
}

/// The name a report gives a stage: its `name`, or the file.
pub fn stage_name(sf: &stagefile::StageFile, path: &Path) -> String {
    sf.name.clone().unwrap_or_else(|| path.display().to_string())
}

/// The tester's clock, guard and poll options as firmware settings for
/// `purpose`: `(setup, guard ppm, poll ns)`; the poll defaults to 1/1000 of
/// the hold.
pub fn tester(
    sf: &stagefile::StageFile,
    purpose: Purpose,
    clock: &str,
    guard: &str,
    poll: Option<&str>,
) -> Result<(hold_firmware::Setup, u32, u32), Error> {
    let clock_hz = value("clock", clock, &["Hz"], 1e3, 200e6, "1 kHz to 200 MHz")?;
    let guard_ppm = (fraction("guard", guard, 0.0, 0.5, "0% to 50%")? * 1e6).round() as u32;
    let poll_ns = match poll {
        Some(p) => (value("poll", p, &["s"], 1e-6, 1.0, "1 µs to 1 s")? * 1e9).round() as u32,
        None => window::default_poll_ns(sf)?,
    };
    Ok((window::settings(sf, purpose, clock_hz.round() as u32, guard_ppm, poll_ns)?, guard_ppm, poll_ns))
}

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
    /// The stations are field units: judge with the field window (environment and aging)
    /// instead of the fixture's (new parts at the fixture's temperature).
    #[arg(long)]
    pub field: bool,
}

impl SetupArgs {
    /// The setup to store, when `--stage` was given.
    pub fn setup(&self) -> Result<Option<Setup>, Error> {
        let Some(path) = &self.stage else { return Ok(None) };
        let text = host_check::input::read_text(path, host_check::input::MAX_TEXT_BYTES)
            .map_err(|e| Error::Input(format!("{}: {e}", path.display())))?;
        let sf = stagefile::parse(path, &text)?;
        let purpose = if self.field { Purpose::Field } else { Purpose::Fixture };
        let (setup, guard_ppm, poll_ns) = tester(&sf, purpose, &self.clock, &self.guard, self.poll.as_deref())?;
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

    /// The setup stored under id `0` when given, for reports that replace
    /// the stored setups: `(setups, id)`.
    pub fn replacing(&self) -> Result<(HashMap<i64, Setup>, Option<i64>), Error> {
        Ok(match self.setup()? {
            Some(s) => (HashMap::from([(0, s)]), Some(0)),
            None => (HashMap::new(), None),
        })
    }

    /// Its id in `store` (stored on first use), when `--stage` was given.
    pub fn id_in(&self, store: &mut Store) -> Result<Option<i64>, Error> {
        self.setup()?.map(|s| store.setup_id(&s)).transpose().map_err(Error::from)
    }
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
    /// The store filter.
    pub fn filter(&self) -> Result<Filter, Error> {
        Ok(Filter {
            station: self.station.clone(),
            batch: self.batch.clone(),
            from_ms: self.from.as_deref().map(|s| date_or_time("from", s)).transpose()?,
            to_ms: self.to.as_deref().map(|s| date_or_time("to", s)).transpose()?,
            unit_id: None,
            rejects_only: false,
        })
    }
}

/// A progress bar on standard error for `total` steps of `what`; hidden
/// when standard error is not a terminal.
pub fn bar(total: u64, what: &str) -> ProgressBar {
    let b = ProgressBar::new(total);
    if let Ok(style) = ProgressStyle::with_template("  {msg} [{bar:30}] {pos}/{len} ({eta} left)") {
        b.set_style(style.progress_chars("=> "));
    }
    b.set_message(host_check::fmt::terminal(what).into_owned());
    b
}

/// A spinner with a changing message on standard error; hidden when
/// standard error is not a terminal or `quiet`.
pub fn spinner(quiet: bool) -> ProgressBar {
    let s = if quiet { ProgressBar::hidden() } else { ProgressBar::new_spinner() };
    s.enable_steady_tick(std::time::Duration::from_millis(200));
    s
}

/// Writes a report to standard output.
pub fn emit(text: &str) -> anyhow::Result<()> {
    let mut out = std::io::stdout().lock();
    // Names and texts from files and stores reach the terminal escaped.
    out.write_all(host_check::fmt::terminal(text).as_bytes()).context("writing the report")?;
    out.flush().context("writing the report")?;
    Ok(())
}

/// Writes a line to standard error, escaped as [`emit`] escapes.
pub fn warn(text: &str) {
    eprintln!("{}", host_check::fmt::terminal(text));
}

/// Writes a value as pretty JSON to standard output.
pub fn emit_json(v: &impl serde::Serialize) -> anyhow::Result<()> {
    emit(&format!("{}\n", serde_json::to_string_pretty(v)?))
}

/// Writes `text` to `path`.
pub fn write(path: &Path, text: impl AsRef<[u8]>) -> Result<(), Error> {
    std::fs::write(path, text).map_err(|e| Error::io(path, e))
}

/// Whether the error is a closed standard output (`rchold … | head`).
pub fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| c.downcast_ref::<std::io::Error>().is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe))
}

/// The exit code of a failed command: the kind of the library error in the
/// chain (bad input 2, a stage that does not work 1), else 2.
pub fn exit_code(e: &anyhow::Error) -> u8 {
    e.chain().find_map(|c| c.downcast_ref::<Error>()).map_or(2, |e| e.kind().exit_code())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn periods() {
        assert_eq!(period_ms("p", "1d").ok(), Some(86_400_000));
        assert_eq!(period_ms("p", "6h").ok(), Some(21_600_000));
        assert_eq!(period_ms("p", "1.5 min").ok(), Some(90_000));
        assert_eq!(period_ms("p", "250ms").ok(), Some(250));
        for bad in ["3 weeks", "0s", "d", "12"] {
            assert!(period_ms("p", bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn refusals_name_option_value_and_range() {
        let e = value("clock", "3GHz", &["Hz"], 1e3, 200e6, "1 kHz to 200 MHz").err().map(|e| e.to_string());
        assert_eq!(e.as_deref(), Some("--clock \"3GHz\": out of range (accepted: 1 kHz to 200 MHz)"));
        assert_eq!(fraction("guard", "60%", 0.0, 0.5, "0% to 50%").ok(), None);
        assert_eq!(fraction("guard", "2%", 0.0, 0.5, "0% to 50%").ok(), Some(0.02));
        assert!(name("station", "", 1).is_err() && name("batch", "", 0).is_ok());
        assert!(name("station", "a\u{1b}[31m", 1).is_err());
        let e = anyhow::Error::from(Error::StageFails("x".into()));
        assert_eq!(exit_code(&e), 1);
        assert_eq!(exit_code(&anyhow::anyhow!("other")), 2);
    }
}
