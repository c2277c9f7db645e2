//! `rchold pick --hold T`: R and C from preferred-number series for a
//! target hold and worst-case spread.

use std::process::ExitCode;

use host_check::design::pick::{pick, render, stage_toml, template, Target};
use host_check::stage::eseries::Series;
use host_check::Error;

use crate::args::{bad, emit, fraction, value, write};

/// Options of `rchold pick`.
#[derive(clap::Args)]
pub struct Args {
    /// Wanted hold ("30s", "850m").
    #[arg(long)]
    hold: String,
    /// Allowed spread each way, worst case ("15%").
    #[arg(long, default_value = "15%")]
    within: String,
    /// Series for R (E3 … E192).
    #[arg(long, default_value = "E24")]
    r_series: String,
    /// Resistor tolerance ("1%").
    #[arg(long, default_value = "1%")]
    r_tol: String,
    /// Series for C (E3 … E192).
    #[arg(long, default_value = "E12")]
    c_series: String,
    /// Input family of the second inverter.
    #[arg(long, default_value = "hc-schmitt")]
    input: String,
    /// Supply, V.
    #[arg(long, default_value = "3.3")]
    vdd: String,
    /// Supply tolerance ("5%").
    #[arg(long, default_value = "5%")]
    vdd_tol: String,
    /// Diode forward drop, V.
    #[arg(long, default_value = "0.6")]
    diode: String,
    /// Driver output resistance, Ω.
    #[arg(long, default_value = "50")]
    driver: String,
    /// How many candidates to show.
    #[arg(long, default_value_t = 5)]
    top: usize,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
    /// Write the first candidate as a stage file (R, C, their tolerances and the
    /// dielectric's aging, the supply, diode, driver and input) to check with eval or spread.
    #[arg(long, value_name = "FILE")]
    write: Option<std::path::PathBuf>,
}

fn series(opt: &str, text: &str) -> Result<Series, Error> {
    Series::parse(text).ok_or_else(|| bad(opt, text, "unknown series", "E3, E6, E12, E24, E48, E96, E192"))
}

/// A tolerance above 0 up to `hi`, in ppm.
fn ppm(opt: &str, text: &str, hi: f64) -> Result<u32, Error> {
    let f = fraction(opt, text, f64::MIN_POSITIVE, hi, &format!("above 0 % up to {} %", hi * 100.0))?;
    Ok((f * 1e6).round() as u32)
}

/// Prints the candidates; exit code 1 when none fits.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let hold_s = value("hold", &a.hold, &["s"], 1e-6, 86_400.0, "1 µs to 24 h")?;
    let vdd_v = value("vdd", &a.vdd, &["V"], 1.6, 18.0, "1.6 V to 18 V")?;
    let drop_v = value("diode", &a.diode, &["V"], 0.0, 2.0, "0 V to 2 V")?;
    let driver_ohm = value("driver", &a.driver, &["Ω", "ohm"], 0.0, 1e6, "0 Ω to 1 MΩ")?;
    let (template, thresholds) = template(vdd_v, drop_v, driver_ohm, &a.input)?;
    let target = Target {
        hold_s,
        within: fraction("within", &a.within, f64::MIN_POSITIVE, 0.9, "above 0 % up to 90 %")?,
        r_series: series("r-series", &a.r_series)?,
        r_tol_ppm: ppm("r-tol", &a.r_tol, 0.5)?,
        c_series: series("c-series", &a.c_series)?,
        template,
        vdd_tol_ppm: ppm("vdd-tol", &a.vdd_tol, 0.5)?,
        thresholds,
    };
    let found = pick(&target);
    emit(&render(&target, &found, a.top, &a.input, a.json))?;
    if let (Some(path), Some(first)) = (&a.write, found.first()) {
        let name = format!("picked for a {} hold", a.hold);
        write(path, stage_toml(&target, first, &a.input, &name))?;
    }
    Ok(if found.is_empty() { ExitCode::from(1) } else { ExitCode::SUCCESS })
}
