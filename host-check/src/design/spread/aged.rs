//! Parts aged before the spread is drawn (`rchold spread --years`): the
//! capacitor's value after some years by the stage file's `[aging]` law.

use rc_model::window::{electrolytic_life_h, Aging};

use crate::stage::file::StageFile;
use crate::Error;

/// Hours in a year (365.25 days).
const HOURS_PER_YEAR: f64 = 8_766.0;

/// Replaces the stage's capacitance by its value after `years` of the
/// `[aging]` law and drops the aging corner (the parts are now that old):
/// a class 2 ceramic loses its per-decade share over the log of hours; an
/// electrolytic reaches its end-of-life loss at its rated life, scaled to
/// `at_temp_c` by the 10 °C rule.
///
/// # Errors
/// [`Error::Input`] naming `--years` or `--at-temp` when they are out of
/// range, or when the stage file has no `[aging]` law that covers them.
pub fn age_parts(sf: &mut StageFile, years: f64, at_temp_c: Option<f64>) -> Result<(), Error> {
    if !(0.0..=50.0).contains(&years) {
        return Err(Error::Input(format!("--years {years}: out of range (accepted: 0 to 50)")));
    }
    let left_ppm: u64 = match sf.spread.aging {
        Some(Aging::Class2 { k_milli_pct, ref_hours, .. }) => {
            let hours = (years * HOURS_PER_YEAR).round() as u32;
            let left = Aging::Class2 { k_milli_pct, ref_hours, hours }
                .remaining_ppm()
                .map_err(|e| Error::Input(format!("--years {years}: {e}")))?;
            u64::from(left)
        }
        Some(Aging::EndOfLife { loss_ppm }) => {
            let (Some(t), Some((rated_h, rated_mdeg))) = (at_temp_c, sf.rated_life) else {
                return Err(Error::Input(format!(
                    "--years with an end-of-life [aging] needs --at-temp and rated_hours, rated_temp in {}",
                    sf.path.display()
                )));
            };
            if !(-55.0..=150.0).contains(&t) {
                return Err(Error::Input(format!("--at-temp {t}: out of range (accepted: -55 °C to +150 °C)")));
            }
            let life_h = electrolytic_life_h(rated_h, rated_mdeg, (t * 1e3).round() as i32)
                .map_err(|e| Error::Input(format!("--at-temp {t}: {e}")))?;
            // Wear taken as linear in the share of rated life used (common practice, no source).
            let used = (years * HOURS_PER_YEAR / life_h.max(1) as f64).min(1.0);
            let loss = (f64::from(loss_ppm) * used).round() as u64;
            1_000_000 - loss.min(999_999)
        }
        _ => {
            return Err(Error::Input(format!(
                "--years needs an [aging] table in {} (kind = \"class2\", or \"end-of-life\" with rated_hours and rated_temp)",
                sf.path.display()
            )))
        }
    };
    sf.stage.c_ff = sf.stage.c_ff * left_ppm / 1_000_000;
    sf.spread.aging = None;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::Path;

    fn stage(aging: &str) -> StageFile {
        let text = format!("{}\n{aging}", crate::sim::demo::BOARD_TOML);
        crate::stage::file::parse(Path::new("a.toml"), &text).unwrap_or_else(|e| panic!("{e}"))
    }

    #[test]
    fn class2_loses_its_share_per_decade_and_refusals_name_the_option() {
        let mut sf = stage("[aging]\nkind = \"class2\"\nloss_per_decade = \"2.5%\"\nhours = \"10000\"\n");
        let c0 = sf.stage.c_ff;
        assert!(age_parts(&mut sf, 10.0, None).is_ok());
        // 10 years = 87,660 h: 1.94 decades past 1,000 h, 2.5 % each (IEC 60384-22 law) → about −4.9 %.
        let loss = 1.0 - sf.stage.c_ff as f64 / c0 as f64;
        assert!((0.045..0.052).contains(&loss), "{loss}");
        assert!(sf.spread.aging.is_none());
        let mut plain = stage("");
        assert!(matches!(age_parts(&mut plain, 1.0, None), Err(Error::Input(m)) if m.starts_with("--years needs")));
        assert!(matches!(age_parts(&mut plain, 99.0, None), Err(Error::Input(m)) if m.starts_with("--years 99")));
    }
}
