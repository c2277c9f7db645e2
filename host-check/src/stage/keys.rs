//! Every key of a stage file, with whether it is required, its unit and
//! what is accepted: the one table that missing-key errors quote and that
//! the README's stage-file section lists (a test keeps the two in step).

use rc_model::Quantity;

/// One key of a stage file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Key {
    /// Dotted path (`stage.r`).
    pub key: &'static str,
    /// Whether the file must give it (within its table, when the table is given).
    pub required: bool,
    /// Unit, or what the value is.
    pub unit: &'static str,
    /// What is accepted.
    pub accepted: &'static str,
}

const fn req(key: &'static str, unit: &'static str, accepted: &'static str) -> Key {
    Key { key, required: true, unit, accepted }
}

const fn opt(key: &'static str, unit: &'static str, accepted: &'static str) -> Key {
    Key { key, required: false, unit, accepted }
}

/// Every key, in the order of the README's table.
pub const KEYS: &[Key] = &[
    opt("name", "text", "any text (the stage's name in reports)"),
    req("stage.r", "Ω", Quantity::R.range()),
    req("stage.c", "F", Quantity::C.range()),
    req("stage.vdd", "V", Quantity::Vdd.range()),
    req("stage.driver_ohms", "Ω", Quantity::DriverR.range()),
    req("stage.charge_ohms", "Ω", Quantity::ChargeR.range()),
    req("stage.series_ohms", "Ω", Quantity::SeriesR.range()),
    req("stage.leak_ohms", "Ω", "1 kΩ to 18 PΩ, or \"inf\""),
    opt("stage.leak_amps", "A", Quantity::LeakCurrent.range()),
    req("stage.diode", "table", "{ drop = … } or { is = …, n = …, rs = … }"),
    opt("stage.diode.drop", "V", Quantity::DiodeDrop.range()),
    opt("stage.diode.is", "A", Quantity::DiodeIs.range()),
    opt("stage.diode.n", "number", Quantity::DiodeN.range()),
    opt("stage.diode.rs", "Ω", Quantity::DiodeRs.range()),
    opt("stage.temperature", "°C", Quantity::Temperature.range()),
    opt(
        "input.family",
        "preset",
        "hc, 4000b, lvcmos33, lvcmos25, lvcmos18, lvcmos15, lvcmos12, hc-schmitt, 4000b-schmitt",
    ),
    opt("input.rise", "fraction of vdd", "0.05 to 0.95 (instead of family)"),
    opt("input.fall", "fraction of vdd", "0.05 up to input.rise"),
    req("press.duration", "s", Quantity::Press.range()),
    opt("tolerance.r", "% or Ω", "0 % to 100 % (or an absolute value)"),
    opt("tolerance.c", "% or F", "0 % to 100 % (or an absolute value)"),
    opt("tolerance.vdd", "% or V", "0 % to 100 % (or an absolute value)"),
    opt("tolerance.diode", "% or V (A for a junction's Is)", "0 % to 100 % (or an absolute value)"),
    opt("tolerance.driver_ohms", "% or Ω", "0 % to 100 % (or an absolute value)"),
    opt("tolerance.rise", "% or V", "0 % to 100 %; custom thresholds only"),
    opt("tolerance.fall", "% or V", "0 % to 100 %; custom thresholds only"),
    req("environment.temp_min", "°C", Quantity::Temperature.range()),
    req("environment.temp_max", "°C", "temp_min to +150 °C"),
    opt("environment.r_tempco", "ppm/°C", "-100000 to 100000"),
    opt("environment.c_tempco", "ppm/°C", "-100000 to 100000"),
    opt("environment.drop_tempco", "V/°C", "-10 mV/°C to 10 mV/°C (default −2 mV/°C)"),
    opt("environment.threshold_tempco", "ppm/°C", "-100000 to 100000"),
    req("fixture.temp_min", "°C", Quantity::Temperature.range()),
    req("fixture.temp_max", "°C", "temp_min to +150 °C"),
    req("spec.hold_min", "s", "1 µs to 24 h"),
    req("spec.hold_max", "s", "above spec.hold_min, up to 24 h"),
    req("aging.kind", "law", "class2 or end-of-life"),
    opt("aging.loss_per_decade", "%", "class2: 0 % to 100 % per decade of hours"),
    opt("aging.ref_hours", "h", "class2: 1 h to 1 000 000 h (default 1000)"),
    opt("aging.hours", "h", "class2 (required there): 1 h to 1 000 000 h"),
    opt("aging.loss", "%", "end-of-life (required there): 0 % to 100 %"),
    opt("aging.rated_hours", "h", "end-of-life: 1 h to 1 000 000 h"),
    opt("aging.rated_temp", "°C", Quantity::Temperature.range()),
];

/// The key a missing-field error of the TOML reader means: `field` in the
/// table that starts on the error's line (`table` when known).
#[must_use]
pub fn missing(field: &str, table: Option<&str>) -> Option<&'static Key> {
    let full = |k: &Key| k.key.rsplit('.').next() == Some(field);
    KEYS.iter().filter(|k| k.required && full(k)).find(|k| table.is_none_or(|t| k.key.starts_with(t)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_key_is_in_the_readme_with_its_range() {
        let readme = include_str!("../../../README.md");
        for k in KEYS {
            let row = format!(
                "| `{}` | {} | {} | {} |",
                k.key,
                if k.required { "required" } else { "optional" },
                k.unit,
                k.accepted
            );
            assert!(readme.contains(&row), "the README's stage-file table lacks:\n{row}");
        }
    }

    #[test]
    fn missing_fields_map_to_their_key() {
        assert_eq!(missing("r", None).map(|k| k.key), Some("stage.r"));
        assert_eq!(missing("duration", None).map(|k| k.key), Some("press.duration"));
        assert_eq!(missing("kind", Some("aging")).map(|k| k.accepted), Some("class2 or end-of-life"));
        assert_eq!(missing("nope", None), None);
    }
}
