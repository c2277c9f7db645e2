//! `rchold pick --hold T`: R and C from preferred-number series for a
//! target hold and worst-case spread.

use std::process::ExitCode;

use host_check::design::pick::{pick, render, stage_toml, template, Target};
use host_check::stage::eseries::Series;
use host_check::Error;

use crate::args::{bad, emit, fraction, value, within, write};

/// Options of `rchold pick`.
#[derive(clap::Args)]
pub struct Args {
    /// Wanted hold ("30s", "850m").
    #[arg(long)]
    hold: String,
    /// Allowed spread of the worst case around the target: each way ("15%"), or below and
    /// above apart ("-30%..+70%": a stage's worst case is lopsided, longer holds further off).
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
    /// Diode drop tolerance ("10%": a small-signal silicon drop varies about ±0.06 V
    /// part to part, common practice).
    #[arg(long, default_value = "10%")]
    diode_tol: String,
    /// Operating temperature range, °C ("0..70"; the dielectric's and R's tempcos apply).
    #[arg(long, default_value = "0..70")]
    temp: String,
    /// The resistor's temperature coefficient, ppm/°C (thick film: 100).
    #[arg(long, default_value_t = 100)]
    r_tempco: i32,
    /// Make R of two series values in series (the nearest below plus the one nearest
    /// the rest), so the nominal lands on the target.
    #[arg(long)]
    pair: bool,
    /// Keep candidates with R above 10 MΩ (otherwise left out: board and input leakage).
    #[arg(long)]
    allow_high_r: bool,
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

/// The allowed spread: "A%" each way (above 0 up to 90 %), or "-A%..+B%"
/// (below: above 0 up to 90 %; above: above 0 up to 1000 %).
fn spread_arg(text: &str) -> Result<(f64, f64), Error> {
    let accepted = "\"15%\" each way (above 0 % up to 90 %), or \"-30%..+70%\" (below up to 90 %, above up to 1000 %)";
    match text.split_once("..") {
        None => {
            let f = fraction("within", text, f64::MIN_POSITIVE, 0.9, accepted)?;
            Ok((f, f))
        }
        Some((lo, hi)) => {
            let lo = fraction("within", lo.trim_start_matches('-'), f64::MIN_POSITIVE, 0.9, accepted)?;
            let hi = fraction("within", hi.trim_start_matches('+'), f64::MIN_POSITIVE, 10.0, accepted)?;
            Ok((lo, hi))
        }
    }
}

/// A temperature range "LO..HI" in °C, as m°C, within −55 … 150 °C.
fn temp_range(text: &str) -> Result<(i32, i32), Error> {
    let accepted = "LO..HI in °C, -55 to 150, LO at most HI (\"0..70\")";
    let (lo, hi) = text.split_once("..").ok_or_else(|| bad("temp", text, "not a range", accepted))?;
    let deg = |t: &str| value("temp", t, &["°C", "C"], -55.0, 150.0, accepted);
    let (lo, hi) = (deg(lo)?, deg(hi)?);
    if lo > hi {
        return Err(bad("temp", text, "the low end is above the high end", accepted));
    }
    Ok(((lo * 1e3).round() as i32, (hi * 1e3).round() as i32))
}

/// A tolerance above 0 up to `hi`, in ppm.
fn ppm(opt: &str, text: &str, hi: f64) -> Result<u32, Error> {
    let f = fraction(opt, text, f64::MIN_POSITIVE, hi, &format!("above 0 % up to {} %", hi * 100.0))?;
    Ok((f * 1e6).round() as u32)
}

/// Prints the candidates; exit code 1 when none fits.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let hold_s = value("hold", &a.hold, &["s"], 1e-6, 86_400.0, "1 µs to 24 h")?;
    let vdd_v = value("vdd", &a.vdd, &["V"], 0.8, 18.0, "0.8 V to 18 V")?;
    let drop_v = value("diode", &a.diode, &["V"], 0.0, 2.0, "0 V to 2 V")?;
    let driver_ohm = value("driver", &a.driver, &["Ω", "ohm"], 0.0, 1e6, "0 Ω to 1 MΩ")?;
    let (template, thresholds) = template(vdd_v, drop_v, driver_ohm, &a.input)?;
    let temp_mdeg_c = temp_range(&a.temp)?;
    let r_tempco = within("r-tempco", a.r_tempco, -10_000..=10_000, "-10000 to 10000 ppm/°C")?;
    let output_limit_ma = rc_model::presets::preset(&a.input).map_or(25, |p| p.output_limit_ma);
    let target = Target {
        hold_s,
        within: spread_arg(&a.within)?,
        r_series: series("r-series", &a.r_series)?,
        r_tol_ppm: ppm("r-tol", &a.r_tol, 0.5)?,
        c_series: series("c-series", &a.c_series)?,
        template,
        vdd_tol_ppm: ppm("vdd-tol", &a.vdd_tol, 0.5)?,
        thresholds,
        diode_tol_ppm: ppm("diode-tol", &a.diode_tol, 0.9)?,
        temp_mdeg_c: Some(temp_mdeg_c),
        r_tempco_ppm_per_c: r_tempco,
        pair: a.pair,
        allow_high_r: a.allow_high_r,
        output_limit_ma,
    };
    let (found, left) = pick(&target);
    emit(&render(&target, &found, left, a.top, &a.input, a.json))?;
    if let (Some(path), Some(first)) = (&a.write, found.first()) {
        let name = format!("picked for a {} hold", a.hold);
        write(path, stage_toml(&target, first, &a.input, &name))?;
    }
    Ok(if found.is_empty() { ExitCode::from(1) } else { ExitCode::SUCCESS })
}
