//! `rchold timer-vs-rc STAGE.toml --clock F --clock-tolerance T`: the
//! stage's worst-case spread against a software timer's.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::timer_vs_rc::{charge_per_press, compare, render_comparison, Currents, TimerClock};
use host_check::fmt::secs;
use host_check::reference::StageF;
use host_check::Error;

use crate::args::{bad, emit, fraction, stage, stage_name, value, within};

/// Options of `rchold timer-vs-rc`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// The software timer's tick clock ("32.768k", "1MHz").
    #[arg(long)]
    clock: String,
    /// Its frequency tolerance over temperature and life ("50ppm" for a crystal, "2%" for an internal RC oscillator).
    #[arg(long)]
    clock_tolerance: String,
    /// Quiescent current of the stage's two gates, for the standby estimate ("2u").
    #[arg(long)]
    stage_current: Option<String>,
    /// Current of the MCU asleep with one timer running ("1.5u").
    #[arg(long)]
    sleep_current: Option<String>,
    /// Presses a day, for the stage's average current (its charge per press adds to it).
    #[arg(long, default_value_t = 10.0)]
    presses_per_day: f64,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
}

/// `"50ppm"` or `"2%"` as a fraction, 0 … 50 %.
fn clock_tolerance(text: &str) -> Result<f64, Error> {
    let accepted = "0 ppm to 50 %";
    let t = text.trim();
    match t.strip_suffix("ppm") {
        Some(ppm) => {
            let f = ppm.trim().parse::<f64>().map_err(|e| bad("clock-tolerance", t, e, accepted))? * 1e-6;
            if (0.0..=0.5).contains(&f) {
                Ok(f)
            } else {
                Err(bad("clock-tolerance", t, "out of range", accepted))
            }
        }
        None => fraction("clock-tolerance", t, 0.0, 0.5, accepted),
    }
}

/// Prints the comparison.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let sf = stage(&a.stage)?;
    let hz = value("clock", &a.clock, &["Hz"], 1.0, 1e9, "1 Hz to 1 GHz")?;
    let tolerance = clock_tolerance(&a.clock_tolerance)?;
    let amps =
        |opt: &str, v: &Option<String>| v.as_deref().map(|t| value(opt, t, &["A"], 0.0, 1.0, "0 A to 1 A")).transpose();
    let presses_per_day = within("presses-per-day", a.presses_per_day, 0.0..=1e6, "0 to 1000000")?;
    let currents = match (amps("stage-current", &a.stage_current)?, amps("sleep-current", &a.sleep_current)?) {
        (Some(stage_quiescent_a), Some(timer_sleep_a)) => {
            Some(Currents { stage_quiescent_a, timer_sleep_a, presses_per_day })
        }
        (None, None) => None,
        _ => {
            return Err(
                Error::Input("give both --stage-current and --sleep-current for the standby estimate".into()).into()
            )
        }
    };
    let nominal = sf.nominal()?;
    let window = sf.window()?;
    let clock = TimerClock { hz, tolerance };
    let f = StageF::from(&sf.stage);
    let node_v = nominal.cap_at_release.uv_q32() as f64 / 4_294_967_296.0 * 1e-6;
    let r_eff = 1.0 / (1.0 / f.r + 1.0 / f.r_leak);
    let q = charge_per_press(f.c, node_v, r_eff, f.i_in, f.press);
    let c = compare(secs(nominal.hold), &window, clock, q);
    let vdd_v = f64::from(sf.stage.vdd_uv) * 1e-6;
    emit(&render_comparison(&stage_name(&sf, &a.stage), &c, clock, currents, vdd_v, &window, a.json))?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::clock_tolerance;

    #[test]
    fn ppm_or_percent() {
        assert!(clock_tolerance("50ppm").is_ok_and(|f| (f - 50e-6).abs() < 1e-18));
        assert_eq!(clock_tolerance(" 2% ").ok(), Some(0.02));
        for bad in ["60%", "x ppm", "-5ppm", "600000ppm"] {
            assert!(clock_tolerance(bad).is_err(), "{bad}");
        }
    }
}
