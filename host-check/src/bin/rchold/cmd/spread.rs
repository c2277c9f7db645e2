//! `rchold spread STAGE.toml`: worst case, root-sum-square and Monte Carlo
//! spread of the hold over the stage file's tolerances.

use std::path::PathBuf;
use std::process::ExitCode;

use host_check::design::spread::{self, aged, sensitivity, Dist, Eval, Parts};
use host_check::fmt::secs;
use host_check::stage::values::parse_value;
use host_check::Error;

use crate::args::{bar, emit, stage, stage_name, within, write};

/// Options of `rchold spread`.
#[derive(clap::Args)]
pub struct Args {
    /// The stage file (TOML).
    stage: PathBuf,
    /// Monte Carlo samples.
    #[arg(long, default_value_t = 100_000)]
    samples: usize,
    /// Seed of the draws (results do not depend on the thread count).
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// How a tolerance is read: uniform; normal with the tolerance at --k-sigma and draws
    /// beyond it set to its ends; or truncated, normal redrawn inside the ends (no mass at them).
    #[arg(long, default_value = "uniform", value_parser = ["uniform", "normal", "truncated"])]
    dist: String,
    /// Standard deviations a tolerance spans when --dist normal or truncated.
    #[arg(long, default_value_t = 3.0)]
    k_sigma: f64,
    /// Specification window for Cp/Cpk, as LOW..HIGH ("500m..1.2"); default: the stage file's [spec].
    #[arg(long)]
    spec: Option<String>,
    /// Age the capacitor this many years first, by the stage file's `[aging]` law: class 2
    /// (log of hours), or an electrolytic's end-of-life loss reached at its rated life,
    /// scaled to --at-temp by the 10 °C rule.
    #[arg(long)]
    years: Option<f64>,
    /// Operating temperature for an electrolytic's aging, °C (needs `rated_hours` and `rated_temp` in `[aging]`).
    #[arg(long)]
    at_temp: Option<f64>,
    /// Write a histogram with the window and spec marked (SVG), and beside it
    /// FILE-shares.svg, the bar chart of each parameter's share of the variance.
    #[arg(long, value_name = "FILE")]
    plot: Option<PathBuf>,
    /// Check each parameter's share by the Monte Carlo: the variance lost with it frozen
    /// at nominal (one more run per parameter).
    #[arg(long)]
    check_shares: bool,
    /// Evaluate every sample with the fixed-point model instead of the fast vector closed form (slower, same statistics).
    #[arg(long)]
    exact: bool,
    /// Print JSON instead of the text report.
    #[arg(long)]
    json: bool,
}

/// `LOW..HIGH` in seconds.
fn spec(text: &str) -> Result<(f64, f64), Error> {
    let bad =
        |why: String| Error::Input(format!("--spec {text:?}: {why} (accepted: LOW..HIGH in seconds, LOW < HIGH)"));
    let (a, b) = text.split_once("..").ok_or_else(|| bad("no \"..\"".into()))?;
    let a = parse_value(a, &["s"]).map_err(|e| bad(e.to_string()))?;
    let b = parse_value(b, &["s"]).map_err(|e| bad(e.to_string()))?;
    if a >= 0.0 && a < b {
        Ok((a, b))
    } else {
        Err(bad("LOW must be below HIGH".into()))
    }
}

/// Prints the spread.
pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let mut sf = stage(&a.stage)?;
    let samples = within("samples", a.samples, 1..=100_000_000, "1 to 100000000")?;
    let k_sigma = || within("k-sigma", a.k_sigma, f64::MIN_POSITIVE..=10.0, "above 0 up to 10");
    let dist = match a.dist.as_str() {
        "normal" => Dist::Normal { k_sigma: k_sigma()? },
        "truncated" => Dist::Truncated { k_sigma: k_sigma()? },
        _ => Dist::Uniform,
    };
    // The stage file's [spec] unless --spec gives another.
    let spec = a.spec.as_deref().map(spec).transpose()?.or(sf.spec_s);
    // The worst case, the root-sum-square and the Monte Carlo describe the same parts.
    let parts = match (a.years, sf.spread.aging) {
        (Some(years), _) => {
            aged::age_parts(&mut sf, years, a.at_temp)?;
            Parts::Aged { years }
        }
        (None, Some(law)) => {
            sf.spread.aging = None;
            Parts::NewBesideAging(law)
        }
        (None, None) => Parts::New,
    };
    let window = sf.window()?;
    let mut shares = sensitivity::first_order(&sf.stage, &sf.spread, dist).map_err(|e| sf.refusal(e))?;
    let rss_sd_s = shares.iter().map(|s| s.sigma_s * s.sigma_s).sum::<f64>().sqrt();
    let progress = bar(samples as u64, "boards");
    let how = if a.exact { Eval::Exact } else { Eval::Fast };
    let mc = spread::monte_carlo_with(&sf.stage, &sf.spread, dist, samples, a.seed, how, &|done, _| {
        progress.set_position(done as u64);
    });
    progress.finish_and_clear();
    if a.check_shares {
        sensitivity::check_by_freezing(&sf.stage, &sf.spread, dist, samples, a.seed, &mut shares);
    }
    let cap = spec.map(|(lo, hi)| spread::SpecFit::of(&mc, lo, hi));
    let name = stage_name(&sf, &a.stage);
    if let Some(path) = &a.plot {
        let title = format!("hold of {name}, {samples} boards");
        write(path, spread::histogram_svg(&mc, Some(&window), spec, &title))?;
        let shares_path = path.with_file_name(format!(
            "{}-shares.svg",
            path.file_stem().map_or_else(|| "spread".into(), |s| s.to_string_lossy())
        ));
        write(&shares_path, spread::shares_svg(&shares, &format!("what drives the hold of {name}")))?;
    }
    let report = spread::Report {
        name: &name,
        m: &mc,
        parts,
        nominal_s: secs(sf.nominal()?.hold),
        rss_sd_s,
        window: Some(&window),
        spec,
        cap: cap.as_ref(),
        shares: &shares,
        thresholds: spread::threshold_model(&sf.spread),
        dist,
    };
    emit(&spread::render(&report, a.json))?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::spec;

    #[test]
    fn spec_windows() {
        assert_eq!(spec("500m..1.2").ok(), Some((0.5, 1.2)));
        for bad in ["1.2..0.5", "1", "a..b", "-1..1"] {
            assert!(spec(bad).is_err(), "{bad}");
        }
    }
}
