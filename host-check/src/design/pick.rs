//! `rchold pick`: choose R and C from IEC 60063 series for a target hold.
//!
//! For every capacitor value of the C series (100 pF … 10 mF) and every
//! dielectric class that offers it, the model gives the ideal R; the
//! nearest value of the R series is taken (or, with `pair`, the largest
//! value below it plus the value nearest the rest, two resistors in
//! series), so the nominal lies within half a series step of the target. A
//! candidate is kept when its worst-case window — over R and C tolerance,
//! supply, diode, the input's threshold band, the temperature range with
//! R's and the dielectric's temperature coefficients and, where the class
//! has one, end-of-life capacitance loss — lies inside the target ± the
//! allowed spread, and when it keeps two hard limits: R at most 10 MΩ
//! (board and input leakage; unless allowed) and the driver not sourcing
//! more than its family's rated current for longer than 1 ms while it
//! charges C. Candidates are ranked by margin, then by capacitor size; the
//! margin is the share of the allowed spread the worst case leaves on its
//! tighter side.

use rc_model::window::{Aging, Spread, Tempco, ThresholdSpread, Tolerance};
use rc_model::{Diode, Model, Stage};
use serde::Serialize;

use crate::fmt::secs;
use crate::stage::eseries::Series;
use crate::Error;

/// A capacitor dielectric family (tolerances and ranges: common practice, no source).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Dielectric {
    /// Class 1 ceramic: ±5 %, stable, up to 100 nF.
    C0g,
    /// Class 2 ceramic: ±10 %, ages 2.5 %/decade-hour (10 years counted), up to 22 µF.
    X7r,
    /// Aluminium electrolytic: ±20 %, −20 % at end of life, 1 µF and up.
    Electrolytic,
}

impl Dielectric {
    /// Name.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Dielectric::C0g => "C0G",
            Dielectric::X7r => "X7R",
            Dielectric::Electrolytic => "electrolytic",
        }
    }

    fn range_f(self) -> (f64, f64) {
        match self {
            Dielectric::C0g => (100e-12, 100e-9),
            Dielectric::X7r => (100e-12, 22e-6),
            Dielectric::Electrolytic => (1e-6, 10e-3),
        }
    }

    fn tolerance(self) -> Tolerance {
        match self {
            Dielectric::C0g => Tolerance::symmetric(50_000),
            Dielectric::X7r => Tolerance::symmetric(100_000),
            Dielectric::Electrolytic => Tolerance::symmetric(200_000),
        }
    }

    /// Temperature coefficient, ppm/°C (common practice, no source: C0G
    /// 0 ± 30; X7R's ±15 % over −55 … 125 °C taken as −800 linear; an
    /// aluminium electrolytic about +1000, losing capacitance in the cold).
    const fn tempco_ppm_per_c(self) -> i32 {
        match self {
            Dielectric::C0g => 0,
            Dielectric::X7r => -800,
            Dielectric::Electrolytic => 1_000,
        }
    }

    fn aging(self) -> Option<Aging> {
        match self {
            Dielectric::C0g => None,
            Dielectric::X7r => Some(Aging::Class2 { k_milli_pct: 2_500, ref_hours: 1_000, hours: 87_660 }),
            Dielectric::Electrolytic => Some(Aging::EndOfLife { loss_ppm: 200_000 }),
        }
    }
}

/// What to look for.
#[derive(Debug, Clone, Copy)]
pub struct Target {
    /// Wanted hold, s.
    pub hold_s: f64,
    /// Allowed relative spread below and above the target (0.15, 0.15 for
    /// ±15 %; a stage's worst case is lopsided, longer holds further off).
    pub within: (f64, f64),
    /// Series for R.
    pub r_series: Series,
    /// R tolerance, ppm.
    pub r_tol_ppm: u32,
    /// Series for C.
    pub c_series: Series,
    /// The stage apart from R and C (supply, diode, driver, thresholds).
    pub template: Stage,
    /// Supply tolerance, ppm.
    pub vdd_tol_ppm: u32,
    /// Threshold band of the input, if known.
    pub thresholds: Option<ThresholdSpread>,
    /// Diode drop tolerance, ppm.
    pub diode_tol_ppm: u32,
    /// Operating temperature range, m°C (none: 25 °C only).
    pub temp_mdeg_c: Option<(i32, i32)>,
    /// The resistor's temperature coefficient, ppm/°C.
    pub r_tempco_ppm_per_c: i32,
    /// R as two series values in series, to hit the target closely.
    pub pair: bool,
    /// Allow R above 10 MΩ (otherwise a hard limit: leakage).
    pub allow_high_r: bool,
    /// The input family's rated output current, mA (the driver's limit).
    pub output_limit_ma: u32,
}

/// Candidates left out by a hard limit, by limit.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct LeftOut {
    /// R above 10 MΩ.
    pub leakage: u32,
    /// The driver above its rated current for longer than 1 ms.
    pub charge_current: u32,
}

/// One candidate.
#[derive(Debug, Clone, Serialize)]
pub struct Candidate {
    /// R, Ω (both resistors when `r2_ohm` is given).
    pub r_ohm: f64,
    /// The larger resistor of a pair, Ω, and the one added in series.
    pub r_pair: Option<(f64, f64)>,
    /// C, F.
    pub c_f: f64,
    /// Dielectric family.
    pub dielectric: Dielectric,
    /// Nominal hold, s.
    pub hold_s: f64,
    /// Worst-case shortest hold, s.
    pub min_s: f64,
    /// Worst-case longest hold, s.
    pub max_s: f64,
    /// Share of the allowed spread left on the tighter side (0 … 1): the
    /// smaller of (shortest − low limit) / (target − low limit) and
    /// (high limit − longest) / (high limit − target).
    pub margin: f64,
    /// Nominal over target, minus one.
    pub nominal_error: f64,
    /// Peak current the driver sources into the empty capacitor, mA.
    pub charge_peak_ma: f64,
}

fn series_values(s: Series, lo: f64, hi: f64) -> Vec<f64> {
    let mut v = Vec::new();
    for decade in -12..=8 {
        let scale = 10f64.powi(decade);
        for m in s.values() {
            let x = m * scale;
            if x >= lo * (1.0 - 1e-9) && x <= hi * (1.0 + 1e-9) {
                v.push(x);
            }
        }
    }
    v
}

/// The spread a candidate is judged with: the target's tolerances,
/// temperature range and coefficients, the dielectric's own.
#[must_use]
pub fn spread_of(t: &Target, d: Dielectric) -> Spread {
    Spread {
        r: Tolerance::symmetric(t.r_tol_ppm),
        c: d.tolerance(),
        vdd: Tolerance::symmetric(t.vdd_tol_ppm),
        diode: Tolerance::symmetric(t.diode_tol_ppm),
        thresholds: t.thresholds,
        temp_mdeg_c: t.temp_mdeg_c,
        tempco: Tempco { r_ppm_per_c: t.r_tempco_ppm_per_c, c_ppm_per_c: d.tempco_ppm_per_c(), ..Tempco::default() },
        aging: d.aging(),
        ..Spread::default()
    }
}

/// R from the series for an ideal value: the nearest one (log scale), or
/// with `pair` the largest one below plus the one nearest the rest.
fn choose_r(values: &[f64], ideal: f64, pair: bool, series: Series) -> Option<(f64, Option<(f64, f64)>)> {
    let idx = values.partition_point(|&r| r <= ideal);
    let below = idx.checked_sub(1).and_then(|i| values.get(i)).copied();
    let above = values.get(idx).copied();
    if pair {
        let r1 = below?;
        let rest = ideal - r1;
        if rest < 1.0 {
            return Some((r1, None));
        }
        let r2 = series.nearest(rest);
        return Some((r1 + r2, Some((r1, r2))));
    }
    match (below, above) {
        (Some(b), Some(a)) => Some((if (ideal / b).ln() <= (a / ideal).ln() { b } else { a }, None)),
        (Some(b), None) => Some((b, None)),
        (None, Some(a)) => Some((a, None)),
        (None, None) => None,
    }
}

/// Searches the series; returns the candidates that meet the target, best
/// first, and how many the hard limits left out.
#[must_use]
pub fn pick(t: &Target) -> (Vec<Candidate>, LeftOut) {
    let lo_t = t.hold_s * (1.0 - t.within.0);
    let hi_t = t.hold_s * (1.0 + t.within.1);
    let r_values = series_values(t.r_series, 1e3, 1e8);
    let mut out = Vec::new();
    let mut left = LeftOut::default();
    let vdd = f64::from(t.template.vdd_uv) * 1e-6;
    let drop = match t.template.diode {
        Diode::Drop { drop_uv } => f64::from(drop_uv) * 1e-6,
        Diode::Junction { .. } => 0.6,
    };
    let driver = t.template.driver_mohm as f64 * 1e-3;
    for c in series_values(t.c_series, 100e-12, 10e-3) {
        let mut s = t.template;
        s.c_ff = (c * 1e15).round() as u64;
        for d in [Dielectric::C0g, Dielectric::X7r, Dielectric::Electrolytic] {
            let (cl, ch) = d.range_f();
            if c < cl * (1.0 - 1e-9) || c > ch * (1.0 + 1e-9) {
                continue;
            }
            let sp = spread_of(t, d);
            // The hold scales with R (to the driver's 1e-4 share): the ideal R
            // puts the nominal on the target, from the nominal at 1 MΩ.
            s.r_mohm = 1_000_000_000;
            let Some(h_ref) = Model::new(&s).and_then(|m| m.evaluate()).ok().map(|e| secs(e.hold)) else { continue };
            let r_ideal = 1e6 * t.hold_s / h_ref;
            if !(1e3..=1e8).contains(&r_ideal) {
                continue;
            }
            let Some((r, r_pair)) = choose_r(&r_values, r_ideal, t.pair, t.r_series) else { continue };
            let mut st = s;
            st.r_mohm = (r * 1e3).round() as u64;
            let Ok(w) = sp.window(&st) else { continue };
            let Some(h) = Model::new(&st).and_then(|m| m.evaluate()).ok().map(|e| secs(e.hold)) else { continue };
            let (min_s, max_s) = (secs(w.min), secs(w.max));
            if min_s < lo_t || max_s > hi_t {
                continue;
            }
            // Hard limits: leakage through a very large R, and the driver sourcing
            // more than its rating for longer than 1 ms while C charges (the 10 MΩ and 1 ms
            // bounds are common practice, no source; the family's rating is from memory).
            if r > 10e6 && !t.allow_high_r {
                left.leakage += 1;
                continue;
            }
            let charge_peak_ma = if driver > 0.0 { (vdd - drop).max(0.0) / driver * 1e3 } else { f64::INFINITY };
            if charge_peak_ma > f64::from(t.output_limit_ma) && driver * c > 1e-3 {
                left.charge_current += 1;
                continue;
            }
            let margin = ((min_s - lo_t) / (t.hold_s - lo_t)).min((hi_t - max_s) / (hi_t - t.hold_s)).clamp(0.0, 1.0);
            out.push(Candidate {
                r_ohm: r,
                r_pair,
                c_f: c,
                dielectric: d,
                hold_s: h,
                min_s,
                max_s,
                margin,
                nominal_error: h / t.hold_s - 1.0,
                charge_peak_ma,
            });
        }
    }
    out.sort_by(|a, b| b.margin.total_cmp(&a.margin).then(a.c_f.total_cmp(&b.c_f)));
    (out, left)
}

/// A template stage: supply, fixed diode drop, driver resistance, and the
/// thresholds of an input preset (typical point) or of fractions of the supply.
///
/// # Errors
/// A message when the preset does not cover the supply.
pub fn template(
    vdd_v: f64,
    drop_v: f64,
    driver_ohm: f64,
    preset: &str,
) -> Result<(Stage, Option<ThresholdSpread>), Error> {
    let vdd_uv = (vdd_v * 1e6).round() as u32;
    let p = rc_model::presets::preset(preset).ok_or_else(|| {
        let names: Vec<&str> = rc_model::presets::PRESETS.iter().map(|p| p.name).collect();
        Error::Input(format!("--input {preset:?}: unknown family (one of: {})", names.join(", ")))
    })?;
    let b = p.bands(vdd_uv).map_err(|_| {
        Error::Input(format!(
            "--input {preset}: defined for supplies of {} V to {} V, not {vdd_v} V",
            f64::from(p.vdd_mv.0) / 1e3,
            f64::from(p.vdd_mv.1) / 1e3
        ))
    })?;
    let stage = Stage {
        vdd_uv,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 0,
        driver_mohm: (driver_ohm * 1e3).round() as u64,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: (drop_v * 1e6).round() as u32 },
        rise_uv: b.rise.typ_uv,
        fall_uv: b.fall.typ_uv,
        press_ns: 86_400_000_000_000,
        temp_mdeg_c: 25_000,
    };
    let spread = if b.schmitt {
        ThresholdSpread::Schmitt { rise_uv: (b.rise.min_uv, b.rise.max_uv), fall_uv: (b.fall.min_uv, b.fall.max_uv) }
    } else {
        ThresholdSpread::Single { min_uv: b.rise.min_uv, max_uv: b.rise.max_uv }
    };
    Ok((stage, Some(spread)))
}

/// A stage file for a candidate: the template's supply, diode drop, driver
/// and input family, the candidate's R and C with their tolerances (and the
/// dielectric's aging), and a press long enough to charge C fully (1 s, or
/// 20 charge time constants through the driver when longer).
#[must_use]
pub fn stage_toml(t: &Target, c: &Candidate, input: &str, name: &str) -> String {
    let s = &t.template;
    let drop_v = match s.diode {
        Diode::Drop { drop_uv } => f64::from(drop_uv) * 1e-6,
        Diode::Junction { .. } => 0.6,
    };
    let driver_ohm = s.driver_mohm as f64 * 1e-3;
    let press_s = (20.0 * driver_ohm.max(1.0) * c.c_f).max(1.0);
    let pct = |ppm: u32| format!("{}%", f64::from(ppm) / 1e4);
    let aging = match c.dielectric.aging() {
        Some(Aging::Class2 { k_milli_pct, ref_hours, hours }) => format!(
            "\n[aging]\nkind = \"class2\"\nloss_per_decade = \"{}%\"\nref_hours = \"{ref_hours}\"\nhours = \"{hours}\"\n",
            f64::from(k_milli_pct) / 1e3
        ),
        Some(Aging::EndOfLife { loss_ppm }) => {
            format!("\n[aging]\nkind = \"end-of-life\"\nloss = \"{}\"\n", pct(loss_ppm))
        }
        None => String::new(),
    };
    let environment = t.temp_mdeg_c.map_or_else(String::new, |(lo, hi)| {
        format!(
            "\n[environment]\ntemp_min = \"{}\"\ntemp_max = \"{}\"\nr_tempco = \"{}\"\nc_tempco = \"{}\"\n",
            f64::from(lo) / 1e3,
            f64::from(hi) / 1e3,
            t.r_tempco_ppm_per_c,
            c.dielectric.tempco_ppm_per_c()
        )
    });
    let pair = c.r_pair.map_or_else(String::new, |(a, b)| {
        format!("# R is two resistors in series: {} + {}.\n", crate::fmt::si(a, "Ω"), crate::fmt::si(b, "Ω"))
    });
    format!(
        "# Written by `rchold pick`: R and C for a {hold} hold within {within} ({dielectric} capacitor).\n{pair}\
         name = {name:?}\n\n[stage]\nr = \"{r}\"\nc = \"{c_f}\"\nvdd = \"{vdd}\"\ndriver_ohms = \"{driver_ohm}\"\n\
         charge_ohms = \"0\"\nseries_ohms = \"0\"\nleak_ohms = \"inf\"\ndiode = {{ drop = \"{drop_v}\" }}\n\n\
         [input]\nfamily = {input:?}\n\n[press]\nduration = \"{press_s}\"\n\n\
         [tolerance]\nr = \"{r_tol}\"\nc = \"{c_tol}\"\nvdd = \"{vdd_tol}\"\ndiode = \"{diode_tol}\"\n{environment}{aging}",
        hold = crate::fmt::si(t.hold_s, "s"),
        within = within_text(t.within),
        dielectric = c.dielectric.name(),
        // Whole ohms and the series' own value, exactly: a rounded display value would move the nominal.
        r = (c.r_ohm * 1e3).round() / 1e3,
        c_f = crate::fmt::si(c.c_f, "F"),
        diode_tol = pct(t.diode_tol_ppm),
        vdd = f64::from(s.vdd_uv) * 1e-6,
        r_tol = pct(t.r_tol_ppm),
        c_tol = pct(c.dielectric.tolerance().plus_ppm),
        vdd_tol = pct(t.vdd_tol_ppm),
    )
}

/// The report, as text or JSON.
/// "±45.0 %", or "−30.0 % … +70.0 %" for a lopsided spread.
fn within_text((below, above): (f64, f64)) -> String {
    if (below - above).abs() < 1e-12 {
        format!("±{:.1} %", below * 100.0)
    } else {
        format!("−{:.1} % … +{:.1} %", below * 100.0, above * 100.0)
    }
}

/// The candidates as text or JSON: the first `top`, the margin's
/// definition, what the hard limits left out.
#[must_use]
pub fn render(t: &Target, found: &[Candidate], left: LeftOut, top: usize, input: &str, json: bool) -> String {
    use crate::fmt::si;
    use std::fmt::Write as _;
    let shown: Vec<&Candidate> = found.iter().take(top).collect();
    if json {
        let v = serde_json::json!({
            "hold_s": t.hold_s,
            "within_below": t.within.0,
            "within_above": t.within.1,
            "found": found.len(),
            "left_out": left,
            "candidates": shown,
        });
        return format!("{}\n", serde_json::to_string_pretty(&v).unwrap_or_default());
    }
    let mut o = String::new();
    let temp = t
        .temp_mdeg_c
        .map_or_else(|| "25 °C".to_owned(), |(lo, hi)| format!("{} … {} °C", f64::from(lo) / 1e3, f64::from(hi) / 1e3));
    let _ = writeln!(
        o,
        "parts for a {} hold within {} \u{b7} {} ±{:.1} % supply \u{b7} input {input} \u{b7} diode ±{:.1} % \u{b7} {temp}, R {} ppm/°C \u{b7} R from E{} at ±{:.1} %{} \u{b7} C from E{}",
        si(t.hold_s, "s"),
        within_text(t.within),
        si(f64::from(t.template.vdd_uv) * 1e-6, "V"),
        f64::from(t.vdd_tol_ppm) / 1e4,
        f64::from(t.diode_tol_ppm) / 1e4,
        t.r_tempco_ppm_per_c,
        t.r_series.per_decade(),
        f64::from(t.r_tol_ppm) / 1e4,
        if t.pair { " (two in series)" } else { "" },
        t.c_series.per_decade()
    );
    let left_text = |o: &mut String| {
        if left.leakage + left.charge_current > 0 {
            let _ = writeln!(
                o,
                "  left out by hard limits: {} with R above 10 MΩ (leakage; --allow-high-r keeps them), {} whose driver would source more than the family's {} mA for over 1 ms (add a charge resistor)",
                left.leakage, left.charge_current, t.output_limit_ma
            );
        }
    };
    if found.is_empty() {
        let schmitt = matches!(t.thresholds, Some(ThresholdSpread::Schmitt { .. }));
        let _ = writeln!(
            o,
            "  no pair of preferred values keeps the worst case inside the target; widen --within, use tighter parts{}",
            if schmitt { ", or a part with a narrower threshold band" } else { ", or a Schmitt input" }
        );
        left_text(&mut o);
        return o;
    }
    let _ = writeln!(
        o,
        "  {:>22} {:>10} {:<13} {:>11} {:>8} {:>11} {:>11} {:>8}",
        "R", "C", "dielectric", "nominal", "off by", "shortest", "longest", "margin"
    );
    for c in shown {
        let r = c.r_pair.map_or_else(|| si(c.r_ohm, "Ω"), |(a, b)| format!("{} + {}", si(a, "Ω"), si(b, "Ω")));
        let _ = writeln!(
            o,
            "  {:>22} {:>10} {:<13} {:>11} {:>7.2}% {:>11} {:>11} {:>7.0}%",
            r,
            si(c.c_f, "F"),
            c.dielectric.name(),
            si(c.hold_s, "s"),
            c.nominal_error * 100.0,
            si(c.min_s, "s"),
            si(c.max_s, "s"),
            c.margin * 100.0,
        );
    }
    let _ = writeln!(
        o,
        "  {} candidates in all; worst case over every corner of the tolerances, the threshold band, {temp} and the dielectric's aging",
        found.len()
    );
    let _ = writeln!(
        o,
        "  margin: the share of the allowed {} the worst case leaves on its tighter side; dielectric tolerances, tempcos and aging are common practice, check the part's data",
        within_text(t.within)
    );
    left_text(&mut o);
    if found.iter().take(top).any(|c| c.c_f >= 1e-3) {
        let _ = writeln!(o, "  caution: {}", crate::fmt::STORED_ENERGY);
    }
    o
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A 5 s hold within ±60 % on 5 V, a Schmitt input, E24 resistors at 1 %, E12 capacitors.
    fn five_seconds() -> Result<Target, Error> {
        let (template, thresholds) = template(5.0, 0.6, 50.0, "hc-schmitt")?;
        Ok(Target {
            hold_s: 5.0,
            within: (0.6, 0.6),
            r_series: Series::E24,
            r_tol_ppm: 10_000,
            c_series: Series::E12,
            template,
            vdd_tol_ppm: 50_000,
            thresholds,
            diode_tol_ppm: 100_000,
            temp_mdeg_c: Some((0, 70_000)),
            r_tempco_ppm_per_c: 100,
            pair: false,
            allow_high_r: false,
            output_limit_ma: 25,
        })
    }

    #[test]
    fn the_written_stage_file_reads_back_with_the_candidates_hold() -> Result<(), Error> {
        let t = five_seconds()?;
        let (found, _) = pick(&t);
        let first = found.first().ok_or_else(|| Error::Input("no candidate".into()))?;
        let text = stage_toml(&t, first, "hc-schmitt", "picked");
        let sf = crate::stage::file::parse(std::path::Path::new("picked.toml"), &text)?;
        let hold = secs(sf.nominal()?.hold);
        assert!((hold / first.hold_s - 1.0).abs() < 1e-6, "{hold} vs {}\n{text}", first.hold_s);
        Ok(())
    }

    #[test]
    fn candidates_lie_within_the_asked_spread() -> Result<(), Error> {
        let t = five_seconds()?;
        let (found, _) = pick(&t);
        assert!(!found.is_empty());
        for c in &found {
            assert!(c.min_s >= 2.0 - 1e-9 && c.max_s <= 8.0 + 1e-9 && c.min_s <= c.hold_s, "{c:?}");
        }
        assert!(matches!(super::template(5.0, 0.6, 50.0, "nope"), Err(Error::Input(_))));
        Ok(())
    }
}
