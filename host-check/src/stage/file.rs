//! Stage files: a TOML description of one hold stage, its input, its press and
//! the spread of its parts. Every problem is reported on one line naming the
//! file, the line, the key and the accepted range.
//!
//! ```toml
//! [stage]
//! r = "1M"                 # SI prefixes or IEC 60062 codes ("4K7", "4n7")
//! c = "1u"
//! vdd = "5"
//! driver_ohms = "50"
//! charge_ohms = "0"
//! series_ohms = "0"
//! leak_ohms = "inf"        # or a resistance
//! diode = { drop = "0.6" } # or { is = "2.5n", n = 1.75, rs = "0.5" }
//!
//! [input]
//! family = "hc-schmitt"    # or rise = 0.6 and fall = 0.4 (fractions of vdd)
//!
//! [press]
//! duration = "100m"
//!
//! [tolerance]              # "5%" or an absolute value in the quantity's unit
//! r = "1%"
//! c = "10%"
//! ```

use std::fmt;
use std::path::{Path, PathBuf};

use rc_model::presets::{self, InputPreset};
use rc_model::window::{Aging, Corner, CornerFailure, Spread, Tempco, ThresholdSpread, Tolerance, Window};
use rc_model::{Diode, Model, Quantity, Stage};
use serde::Deserialize;
use toml::{Spanned, Value};

use crate::fmt::corner_text;
use crate::stage::values::{parse_tolerance, parse_value, round_u64, Tol};

/// A problem in a stage file, with where it is.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StageFileError {
    /// The file.
    pub file: PathBuf,
    /// 1-based line, when known.
    pub line: Option<usize>,
    /// The key (dotted path), when known.
    pub key: Option<String>,
    /// What is wrong, including the accepted range where there is one.
    pub message: String,
}

impl fmt::Display for StageFileError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(l) = self.line {
            write!(f, ":{l}")?;
        }
        if let Some(k) = &self.key {
            write!(f, ": {k}")?;
        }
        write!(f, ": {}", self.message)
    }
}

impl std::error::Error for StageFileError {}

type Sv = Spanned<Value>;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Raw {
    name: Option<Spanned<String>>,
    stage: RawStage,
    input: RawInput,
    press: RawPress,
    tolerance: Option<RawTolerance>,
    environment: Option<RawEnvironment>,
    aging: Option<RawAging>,
    fixture: Option<RawFixture>,
    spec: Option<RawSpec>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSpec {
    hold_min: Sv,
    hold_max: Sv,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawFixture {
    temp_min: Sv,
    temp_max: Sv,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStage {
    r: Sv,
    c: Sv,
    vdd: Sv,
    driver_ohms: Sv,
    charge_ohms: Sv,
    series_ohms: Sv,
    leak_ohms: Sv,
    leak_amps: Option<Sv>,
    diode: Spanned<RawDiode>,
    temperature: Option<Sv>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawDiode {
    drop: Option<Sv>,
    is: Option<Sv>,
    n: Option<Sv>,
    rs: Option<Sv>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawInput {
    family: Option<Spanned<String>>,
    rise: Option<Sv>,
    fall: Option<Sv>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawPress {
    duration: Sv,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTolerance {
    r: Option<Sv>,
    c: Option<Sv>,
    vdd: Option<Sv>,
    diode: Option<Sv>,
    driver_ohms: Option<Sv>,
    rise: Option<Sv>,
    fall: Option<Sv>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawEnvironment {
    temp_min: Sv,
    temp_max: Sv,
    r_tempco: Option<Sv>,
    c_tempco: Option<Sv>,
    drop_tempco: Option<Sv>,
    threshold_tempco: Option<Sv>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawAging {
    kind: Spanned<String>,
    loss_per_decade: Option<Sv>,
    ref_hours: Option<Sv>,
    hours: Option<Sv>,
    loss: Option<Sv>,
    rated_hours: Option<Sv>,
    rated_temp: Option<Sv>,
}

/// Where each model quantity came from, for error messages.
#[derive(Debug, Clone, Default)]
pub struct Origins {
    entries: Vec<(Quantity, usize, String)>,
    /// Every key read, with its line.
    keys: Vec<(String, usize)>,
}

impl Origins {
    /// Line and key of a quantity, if the file set it.
    #[must_use]
    pub fn of(&self, q: Quantity) -> Option<(usize, &str)> {
        self.entries.iter().find(|e| e.0 == q).map(|e| (e.1, e.2.as_str()))
    }

    /// Line of a key (dotted path), if the file set it.
    #[must_use]
    pub fn line_of(&self, key: &str) -> Option<usize> {
        self.keys.iter().find(|k| k.0 == key).map(|k| k.1)
    }
}

/// A loaded stage file.
#[derive(Debug, Clone)]
pub struct StageFile {
    /// The file it came from.
    pub path: PathBuf,
    /// Optional product or stage name.
    pub name: Option<String>,
    /// The nominal stage.
    pub stage: Stage,
    /// The input family preset, if one was named.
    pub preset: Option<&'static InputPreset>,
    /// Whether the input has separate rising and falling thresholds.
    pub schmitt: bool,
    /// Tolerances, temperature and aging.
    pub spread: Spread,
    /// Where each quantity was set.
    pub origins: Origins,
    /// An electrolytic's rated life: hours at a temperature in m°C (`[aging]`
    /// `rated_hours`, `rated_temp`), for aging horizons by the 10 °C rule.
    pub rated_life: Option<(u32, i32)>,
    /// The fixture's own temperature range, m°C (`[fixture]`); none: the
    /// stage's reference temperature.
    pub fixture_temp_mdeg_c: Option<(i32, i32)>,
    /// The product's specification of the hold, s (`[spec]`): what Cp/Cpk
    /// are reported against beside the pass window.
    pub spec_s: Option<(f64, f64)>,
}

/// What a window is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Purpose {
    /// Judging a new board on the fixture: new parts (no aging) at the
    /// fixture's temperature (`[fixture]`, else the reference temperature).
    Fixture,
    /// Judging a unit in the field: the product's environment
    /// (`[environment]`) and the aging horizon (`[aging]`).
    Field,
}

impl Purpose {
    /// Its name in reports.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Purpose::Fixture => "fixture",
            Purpose::Field => "field",
        }
    }

    /// What it covers, in words.
    #[must_use]
    pub const fn covers(self) -> &'static str {
        match self {
            Purpose::Fixture => "new parts at the fixture's temperature",
            Purpose::Field => "the environment's temperatures and the aging horizon",
        }
    }
}

struct Ctx<'a> {
    path: &'a Path,
    text: &'a str,
    origins: Origins,
}

/// The SI unit symbols a value of each kind may carry.
const OHM: &[&str] = &["Ω", "ohm", "ohms"];
const FARAD: &[&str] = &["F"];
const VOLT: &[&str] = &["V"];
const AMP: &[&str] = &["A"];
const SECOND: &[&str] = &["s"];

impl Ctx<'_> {
    fn line_of(&self, offset: usize) -> usize {
        self.text.get(..offset).map_or(1, |t| t.bytes().filter(|&b| b == b'\n').count() + 1)
    }

    fn err(&self, offset: Option<usize>, key: &str, message: impl Into<String>) -> StageFileError {
        StageFileError {
            file: self.path.to_path_buf(),
            line: offset.map(|o| self.line_of(o)),
            key: Some(key.to_string()),
            message: message.into(),
        }
    }

    /// A value in SI units, checked against `[lo, hi]` (given in text as `range`).
    fn si(&mut self, v: &Sv, key: &str, unit: &[&str], lo: f64, hi: f64, range: &str) -> Result<f64, StageFileError> {
        self.mark(v, key);
        let x = match v.get_ref() {
            Value::String(s) => parse_value(s, unit).map_err(|e| self.err(Some(v.span().start), key, e.to_string()))?,
            Value::Integer(i) => *i as f64,
            Value::Float(f) => *f,
            _ => {
                return Err(self.err(Some(v.span().start), key, "expected a number or a value string such as \"4.7k\""))
            }
        };
        if x.is_nan() || x < lo || x > hi {
            return Err(self.err(Some(v.span().start), key, format!("{x} is outside the accepted range ({range})")));
        }
        Ok(x)
    }

    fn note(&mut self, q: Quantity, v: &Sv, key: &str) {
        let line = self.line_of(v.span().start);
        self.origins.entries.push((q, line, key.to_string()));
    }

    /// Records the line of `key`.
    fn mark(&mut self, v: &Sv, key: &str) {
        let line = self.line_of(v.span().start);
        self.origins.keys.push((key.to_string(), line));
    }

    fn tol(&mut self, v: &Sv, key: &str, unit: &[&str], nominal: f64) -> Result<Tolerance, StageFileError> {
        self.mark(v, key);
        let s = match v.get_ref() {
            Value::String(s) => s.clone(),
            Value::Integer(i) => i.to_string(),
            Value::Float(f) => f.to_string(),
            _ => return Err(self.err(Some(v.span().start), key, "expected \"5%\" or an absolute value")),
        };
        let t = parse_tolerance(&s, unit).map_err(|e| self.err(Some(v.span().start), key, e.to_string()))?;
        let frac = match t {
            Tol::Relative(f) => f,
            Tol::Absolute(a) if nominal > 0.0 => a / nominal,
            Tol::Absolute(_) => 0.0,
        };
        if !(0.0..=1.0).contains(&frac) {
            return Err(self.err(
                Some(v.span().start),
                key,
                format!("{s} is outside the accepted range (0 % to 100 % of nominal)"),
            ));
        }
        Ok(Tolerance::symmetric((frac * 1e6).round() as u32))
    }
}

/// The value of quantity `q` in `s`, with its unit, for messages.
fn quantity_text(q: Quantity, s: &Stage) -> Option<String> {
    use crate::fmt::si;
    Some(match q {
        Quantity::R => si(s.r_mohm as f64 * 1e-3, "Ω"),
        Quantity::C => si(s.c_ff as f64 * 1e-15, "F"),
        Quantity::Vdd => si(f64::from(s.vdd_uv) * 1e-6, "V"),
        Quantity::DriverR => si(s.driver_mohm as f64 * 1e-3, "Ω"),
        Quantity::Rise => si(f64::from(s.rise_uv) * 1e-6, "V"),
        Quantity::Fall => si(f64::from(s.fall_uv) * 1e-6, "V"),
        Quantity::DiodeDrop => match s.diode {
            Diode::Drop { drop_uv } => si(f64::from(drop_uv) * 1e-6, "V"),
            Diode::Junction { .. } => return None,
        },
        Quantity::Temperature => format!("{:.1} °C", f64::from(s.temp_mdeg_c) / 1e3),
        _ => return None,
    })
}

/// Reads a stage file.
///
/// # Errors
/// [`StageFileError`] for unreadable files, TOML syntax, unknown or missing
/// keys, unreadable values and values outside the model's domain.
pub fn load(path: &Path) -> Result<StageFile, StageFileError> {
    let text = crate::input::read_text(path, crate::input::MAX_TEXT_BYTES).map_err(|message| StageFileError {
        file: path.to_path_buf(),
        line: None,
        key: None,
        message,
    })?;
    parse(path, &text)
}

/// Parses stage-file text; `path` is used in messages only.
///
/// # Errors
/// As [`load`].
pub fn parse(path: &Path, text: &str) -> Result<StageFile, StageFileError> {
    let mut cx = Ctx { path, text, origins: Origins::default() };
    let raw: Raw = toml::from_str(text).map_err(|e| {
        let offset = e.span().map(|s| s.start);
        let msg = e.message().lines().next().unwrap_or("invalid TOML").trim().to_string();
        let line = offset.map(|o| cx.line_of(o));
        // "missing field `r`": name the key, say it is required and what is accepted.
        let field = msg.strip_prefix("missing field `").and_then(|m| m.strip_suffix('`'));
        // The error points at the table that lacks the key: "[fixture]" names it.
        let table = offset
            .and_then(|o| text.get(o..))
            .and_then(|t| t.strip_prefix('['))
            .and_then(|t| t.split(']').next())
            .map(str::trim);
        match field.and_then(|f| crate::stage::keys::missing(f, table)) {
            Some(k) => StageFileError {
                file: path.to_path_buf(),
                line,
                key: Some(k.key.to_owned()),
                message: format!("missing (required; {}: {})", k.unit, k.accepted),
            },
            None => StageFileError { file: path.to_path_buf(), line, key: None, message: msg },
        }
    })?;
    let st = &raw.stage;
    let vdd = cx.si(&st.vdd, "stage.vdd", VOLT, 0.8, 18.0, Quantity::Vdd.range())?;
    cx.note(Quantity::Vdd, &st.vdd, "stage.vdd");
    let r = cx.si(&st.r, "stage.r", OHM, 1e3, 1e8, Quantity::R.range())?;
    cx.note(Quantity::R, &st.r, "stage.r");
    let c = cx.si(&st.c, "stage.c", FARAD, 100e-12, 10e-3, Quantity::C.range())?;
    cx.note(Quantity::C, &st.c, "stage.c");
    let ro = cx.si(&st.driver_ohms, "stage.driver_ohms", OHM, 0.0, 1e6, Quantity::DriverR.range())?;
    cx.note(Quantity::DriverR, &st.driver_ohms, "stage.driver_ohms");
    let rch = cx.si(&st.charge_ohms, "stage.charge_ohms", OHM, 0.0, 1e6, Quantity::ChargeR.range())?;
    cx.note(Quantity::ChargeR, &st.charge_ohms, "stage.charge_ohms");
    let rs = cx.si(&st.series_ohms, "stage.series_ohms", OHM, 0.0, 1e6, Quantity::SeriesR.range())?;
    cx.note(Quantity::SeriesR, &st.series_ohms, "stage.series_ohms");
    let leak = match st.leak_ohms.get_ref() {
        Value::String(s) if s.trim().eq_ignore_ascii_case("inf") || s.trim().eq_ignore_ascii_case("none") => None,
        _ => Some(cx.si(&st.leak_ohms, "stage.leak_ohms", OHM, 1e3, 1.8e16, "1 kΩ to 18 PΩ, or \"inf\"")?),
    };
    cx.note(Quantity::LeakR, &st.leak_ohms, "stage.leak_ohms");
    let leak_a = match &st.leak_amps {
        Some(v) => {
            cx.note(Quantity::LeakCurrent, v, "stage.leak_amps");
            cx.si(v, "stage.leak_amps", AMP, 0.0, 1e-6, Quantity::LeakCurrent.range())?
        }
        None => 0.0,
    };
    let temp = match &st.temperature {
        Some(v) => {
            cx.note(Quantity::Temperature, v, "stage.temperature");
            cx.si(v, "stage.temperature", &["°C", "C"], -55.0, 150.0, Quantity::Temperature.range())?
        }
        None => 25.0,
    };
    let diode = parse_diode(&mut cx, &st.diode)?;
    let vdd_uv = (vdd * 1e6).round() as u32;
    let (preset, rise_uv, fall_uv, schmitt, band) = parse_input(&mut cx, &raw.input, vdd)?;
    let press = cx.si(&raw.press.duration, "press.duration", SECOND, 1e-9, 86_400.0, Quantity::Press.range())?;
    cx.note(Quantity::Press, &raw.press.duration, "press.duration");
    let stage = Stage {
        vdd_uv,
        r_mohm: round_u64(r * 1e3),
        c_ff: round_u64(c * 1e15),
        series_mohm: round_u64(rs * 1e3),
        charge_mohm: round_u64(rch * 1e3),
        driver_mohm: round_u64(ro * 1e3),
        leak_mohm: leak.map(|l| round_u64(l * 1e3)),
        leak_fa: round_u64(leak_a * 1e15),
        diode,
        rise_uv,
        fall_uv,
        press_ns: round_u64(press * 1e9).max(1),
        temp_mdeg_c: (temp * 1e3).round() as i32,
    };
    // Spread.
    let mut spread = Spread { thresholds: band, ref_mdeg_c: stage.temp_mdeg_c, ..Spread::default() };
    if let Some(t) = &raw.tolerance {
        let nominal = Nominal { r, c, vdd, driver: ro, diode, rise_uv, fall_uv, schmitt, preset: preset.is_some() };
        parse_tolerance_table(&mut cx, t, &nominal, &mut spread)?;
    }
    if let Some(env) = &raw.environment {
        parse_environment(&mut cx, env, &mut spread)?;
    }
    let fixture_temp_mdeg_c = match &raw.fixture {
        Some(f) => {
            let lo =
                cx.si(&f.temp_min, "fixture.temp_min", &["°C", "C"], -55.0, 150.0, Quantity::Temperature.range())?;
            let hi = cx.si(&f.temp_max, "fixture.temp_max", &["°C", "C"], lo, 150.0, "temp_min to +150 °C")?;
            Some(((lo * 1e3).round() as i32, (hi * 1e3).round() as i32))
        }
        None => None,
    };
    let spec_s = match &raw.spec {
        Some(sp) => {
            let lo = cx.si(&sp.hold_min, "spec.hold_min", SECOND, 1e-6, 86_400.0, "1 µs to 24 h")?;
            let hi = cx.si(&sp.hold_max, "spec.hold_max", SECOND, lo, 86_400.0, "above spec.hold_min, up to 24 h")?;
            if hi <= lo {
                return Err(cx.err(Some(sp.hold_max.span().start), "spec.hold_max", "must be above spec.hold_min"));
            }
            Some((lo, hi))
        }
        None => None,
    };
    let (aging, rated_life) = match &raw.aging {
        Some(a) => parse_aging(&mut cx, a)?,
        None => (None, None),
    };
    spread.aging = aging;
    let sf = StageFile {
        path: path.to_path_buf(),
        name: raw.name.map(Spanned::into_inner),
        stage,
        preset,
        schmitt,
        spread,
        origins: cx.origins,
        rated_life,
        fixture_temp_mdeg_c,
        spec_s,
    };
    sf.check_corners()?;
    Ok(sf)
}

/// A family's threshold bands as the spread's threshold corners: separate
/// bands for a Schmitt input, one switching point's band for a plain one.
#[must_use]
pub fn threshold_spread(b: &rc_model::presets::InputBands) -> ThresholdSpread {
    if b.schmitt {
        ThresholdSpread::Schmitt { rise_uv: (b.rise.min_uv, b.rise.max_uv), fall_uv: (b.fall.min_uv, b.fall.max_uv) }
    } else {
        ThresholdSpread::Single { min_uv: b.rise.min_uv, max_uv: b.rise.max_uv }
    }
}

/// The `[stage.diode]` table: a fixed drop, or a junction (Shockley).
fn parse_diode(cx: &mut Ctx<'_>, diode: &Spanned<RawDiode>) -> Result<Diode, StageFileError> {
    let d = diode.get_ref();
    let dspan = Some(diode.span().start);
    Ok(match (&d.drop, &d.is, &d.n) {
        (Some(v), None, None) if d.rs.is_none() => {
            cx.note(Quantity::DiodeDrop, v, "stage.diode.drop");
            let drop = cx.si(v, "stage.diode.drop", VOLT, 0.0, 2.0, Quantity::DiodeDrop.range())?;
            Diode::Drop { drop_uv: (drop * 1e6).round() as u32 }
        }
        (None, Some(is), Some(n)) => {
            cx.note(Quantity::DiodeIs, is, "stage.diode.is");
            cx.note(Quantity::DiodeN, n, "stage.diode.n");
            let is_a = cx.si(is, "stage.diode.is", AMP, 1e-15, 1e-6, Quantity::DiodeIs.range())?;
            let n_v = cx.si(n, "stage.diode.n", &[], 0.5, 4.0, Quantity::DiodeN.range())?;
            let rs_d = match &d.rs {
                Some(v) => {
                    cx.note(Quantity::DiodeRs, v, "stage.diode.rs");
                    cx.si(v, "stage.diode.rs", OHM, 0.0, 1e3, Quantity::DiodeRs.range())?
                }
                None => 0.0,
            };
            Diode::Junction {
                is_fa: round_u64(is_a * 1e15),
                n_milli: (n_v * 1e3).round() as u32,
                rs_mohm: round_u64(rs_d * 1e3),
            }
        }
        _ => {
            return Err(cx.err(
                dspan,
                "stage.diode",
                "give either { drop = \"0.6\" } or { is = \"2.5n\", n = 1.75, rs = \"0.5\" }",
            ))
        }
    })
}

/// What the `[input]` table gives: the preset, the typical rising and falling
/// thresholds (µV), whether the input is a Schmitt input, and its band.
type Input = (Option<&'static InputPreset>, u32, u32, bool, Option<ThresholdSpread>);

/// The `[input]` table: a family preset, or custom thresholds as fractions of vdd.
fn parse_input(cx: &mut Ctx<'_>, inp: &RawInput, vdd: f64) -> Result<Input, StageFileError> {
    let vdd_uv = (vdd * 1e6).round() as u32;
    Ok(match (&inp.family, &inp.rise, &inp.fall) {
        (Some(fam), None, None) => {
            let p = presets::preset(fam.get_ref()).ok_or_else(|| {
                let names: Vec<&str> = presets::PRESETS.iter().map(|p| p.name).collect();
                cx.err(Some(fam.span().start), "input.family", format!("unknown family (one of: {})", names.join(", ")))
            })?;
            let b = p.bands(vdd_uv).map_err(|_| {
                cx.err(
                    Some(fam.span().start),
                    "input.family",
                    format!(
                        "{} is defined for supplies of {} V to {} V, not {} V",
                        p.name,
                        f64::from(p.vdd_mv.0) / 1e3,
                        f64::from(p.vdd_mv.1) / 1e3,
                        vdd
                    ),
                )
            })?;
            cx.origins.entries.push((Quantity::Rise, cx.line_of(fam.span().start), "input.family".into()));
            cx.origins.entries.push((Quantity::Fall, cx.line_of(fam.span().start), "input.family".into()));
            (Some(p), b.rise.typ_uv, b.fall.typ_uv, b.schmitt, Some(threshold_spread(&b)))
        }
        (None, Some(r), f) => {
            cx.note(Quantity::Rise, r, "input.rise");
            let rf = cx.si(r, "input.rise", &[], 0.05, 0.95, "0.05 to 0.95 of vdd")?;
            let ff = match f {
                Some(f) => {
                    cx.note(Quantity::Fall, f, "input.fall");
                    cx.si(f, "input.fall", &[], 0.05, rf, "0.05 of vdd up to input.rise")?
                }
                None => rf,
            };
            let to_uv = |x: f64| (x * vdd * 1e6).round() as u32;
            (None, to_uv(rf), to_uv(ff), f.is_some() && ff < rf, None)
        }
        _ => {
            return Err(StageFileError {
                file: cx.path.to_path_buf(),
                line: None,
                key: Some("input".into()),
                message: "give either family = \"<preset>\" or rise (and fall) as fractions of vdd".into(),
            })
        }
    })
}

/// The nominal values the `[tolerance]` table's entries are relative to.
struct Nominal {
    r: f64,
    c: f64,
    vdd: f64,
    driver: f64,
    diode: Diode,
    rise_uv: u32,
    fall_uv: u32,
    schmitt: bool,
    preset: bool,
}

/// The `[tolerance]` table into `spread`.
fn parse_tolerance_table(
    cx: &mut Ctx<'_>,
    t: &RawTolerance,
    n: &Nominal,
    spread: &mut Spread,
) -> Result<(), StageFileError> {
    if let Some(v) = &t.r {
        spread.r = cx.tol(v, "tolerance.r", OHM, n.r)?;
    }
    if let Some(v) = &t.c {
        spread.c = cx.tol(v, "tolerance.c", FARAD, n.c)?;
    }
    if let Some(v) = &t.vdd {
        spread.vdd = cx.tol(v, "tolerance.vdd", VOLT, n.vdd)?;
    }
    if let Some(v) = &t.driver_ohms {
        spread.driver = cx.tol(v, "tolerance.driver_ohms", OHM, n.driver)?;
    }
    if let Some(v) = &t.diode {
        let nominal = match n.diode {
            Diode::Drop { drop_uv } => f64::from(drop_uv) * 1e-6,
            Diode::Junction { is_fa, .. } => is_fa as f64 * 1e-15,
        };
        let unit = if matches!(n.diode, Diode::Drop { .. }) { VOLT } else { AMP };
        spread.diode = cx.tol(v, "tolerance.diode", unit, nominal)?;
    }
    // Threshold tolerances for custom inputs: a band around the nominal.
    let band_of = |cx: &mut Ctx, v: &Sv, key: &str, nominal_uv: u32| -> Result<(u32, u32), StageFileError> {
        let t = cx.tol(v, key, VOLT, f64::from(nominal_uv) * 1e-6)?;
        let d = u64::from(nominal_uv) * u64::from(t.plus_ppm) / 1_000_000;
        let d = u32::try_from(d).unwrap_or(u32::MAX);
        Ok((nominal_uv.saturating_sub(d), nominal_uv.saturating_add(d)))
    };
    match (&t.rise, &t.fall) {
        (None, None) => {}
        (r_t, f_t) => {
            if n.preset {
                let off = r_t.as_ref().or(f_t.as_ref()).map(|v| v.span().start);
                return Err(cx.err(
                    off,
                    "tolerance.rise",
                    "a family preset brings its own threshold band; remove tolerance.rise/fall or use custom rise/fall",
                ));
            }
            let rb = match r_t {
                Some(v) => band_of(cx, v, "tolerance.rise", n.rise_uv)?,
                None => (n.rise_uv, n.rise_uv),
            };
            let fb = match f_t {
                Some(v) => band_of(cx, v, "tolerance.fall", n.fall_uv)?,
                None => (n.fall_uv, n.fall_uv),
            };
            spread.thresholds = Some(if n.schmitt {
                ThresholdSpread::Schmitt { rise_uv: rb, fall_uv: fb }
            } else {
                ThresholdSpread::Single { min_uv: rb.0, max_uv: rb.1 }
            });
        }
    }
    Ok(())
}

/// The `[environment]` table (temperature range and tempcos) into `spread`.
fn parse_environment(cx: &mut Ctx<'_>, env: &RawEnvironment, spread: &mut Spread) -> Result<(), StageFileError> {
    let lo = cx.si(&env.temp_min, "environment.temp_min", &["°C", "C"], -55.0, 150.0, Quantity::Temperature.range())?;
    let hi = cx.si(&env.temp_max, "environment.temp_max", &["°C", "C"], lo, 150.0, "temp_min to +150 °C")?;
    spread.temp_mdeg_c = Some(((lo * 1e3).round() as i32, (hi * 1e3).round() as i32));
    let ppm = |cx: &mut Ctx, v: &Option<Sv>, key: &str| -> Result<Option<i32>, StageFileError> {
        match v {
            None => Ok(None),
            Some(v) => {
                let x =
                    cx.si(v, key, &["ppm/°C", "ppm/C", "ppm"], -100_000.0, 100_000.0, "-100000 to 100000 ppm/°C")?;
                Ok(Some(x.round() as i32))
            }
        }
    };
    let mut tc = Tempco::default();
    if let Some(x) = ppm(cx, &env.r_tempco, "environment.r_tempco")? {
        tc.r_ppm_per_c = x;
    }
    if let Some(x) = ppm(cx, &env.c_tempco, "environment.c_tempco")? {
        tc.c_ppm_per_c = x;
    }
    if let Some(x) = ppm(cx, &env.threshold_tempco, "environment.threshold_tempco")? {
        tc.threshold_ppm_per_c = x;
    }
    if let Some(v) = &env.drop_tempco {
        let x = cx.si(v, "environment.drop_tempco", &["V/°C", "V/C", "V"], -0.01, 0.01, "-10 mV/°C to 10 mV/°C")?;
        tc.drop_uv_per_c = (x * 1e6).round() as i32;
    }
    spread.tempco = tc;
    Ok(())
}

/// An electrolytic's rated life: hours at a temperature in m°C.
type RatedLife = (u32, i32);

/// The `[aging]` table: the law, and the electrolytic's rated life when given.
fn parse_aging(cx: &mut Ctx<'_>, a: &RawAging) -> Result<(Option<Aging>, Option<RatedLife>), StageFileError> {
    let mut rated_life = None;
    if let (Some(h), Some(t)) = (&a.rated_hours, &a.rated_temp) {
        let h = cx.si(h, "aging.rated_hours", &["h"], 1.0, 1e6, "1 h to 1 000 000 h")?;
        let t = cx.si(t, "aging.rated_temp", &["°C", "C"], -55.0, 150.0, Quantity::Temperature.range())?;
        rated_life = Some((h.round() as u32, (t * 1e3).round() as i32));
    }
    let pct = |cx: &mut Ctx, v: &Option<Sv>, key: &str| -> Result<f64, StageFileError> {
        let v = v.as_ref().ok_or_else(|| cx.err(Some(a.kind.span().start), key, "missing"))?;
        let t = cx.tol(v, key, &[], 1.0)?;
        Ok(f64::from(t.plus_ppm) / 1e6)
    };
    let law = match a.kind.get_ref().as_str() {
        "class2" => {
            let k = pct(cx, &a.loss_per_decade, "aging.loss_per_decade")?;
            let hours = match &a.hours {
                Some(v) => cx.si(v, "aging.hours", &["h"], 1.0, 1e6, "1 h to 1 000 000 h")?,
                None => {
                    return Err(cx.err(
                        Some(a.kind.span().start),
                        "aging.hours",
                        "missing (age at the far end of the window)",
                    ))
                }
            };
            let ref_hours = match &a.ref_hours {
                Some(v) => cx.si(v, "aging.ref_hours", &["h"], 1.0, 1e6, "1 h to 1 000 000 h")?,
                None => 1000.0,
            };
            Aging::Class2 {
                k_milli_pct: (k * 1e5).round() as u32,
                ref_hours: ref_hours.round() as u32,
                hours: hours.round() as u32,
            }
        }
        "end-of-life" => Aging::EndOfLife { loss_ppm: (pct(cx, &a.loss, "aging.loss")? * 1e6).round() as u32 },
        _ => return Err(cx.err(Some(a.kind.span().start), "aging.kind", "one of: class2, end-of-life")),
    };
    Ok((Some(law), rated_life))
}

impl StageFile {
    /// The nominal stage's timing.
    ///
    /// # Errors
    /// As [`StageFile::refusal`].
    pub fn nominal(&self) -> Result<rc_model::Evaluation, crate::Error> {
        Model::new(&self.stage).and_then(|m| m.evaluate()).map_err(|e| self.refusal(e))
    }

    /// The spread a window for `purpose` covers: the fixture's has no aging
    /// and the fixture's temperature range (none given: the reference
    /// temperature only); the field's is the file's whole spread.
    #[must_use]
    pub fn spread_for(&self, purpose: Purpose) -> Spread {
        match purpose {
            Purpose::Field => self.spread,
            Purpose::Fixture => Spread { aging: None, temp_mdeg_c: self.fixture_temp_mdeg_c, ..self.spread },
        }
    }

    /// The window for `purpose` over its corners.
    ///
    /// # Errors
    /// As [`StageFile::window`].
    pub fn window_for(&self, purpose: Purpose) -> Result<Window, crate::Error> {
        let spread = self.spread_for(purpose);
        spread.window(&self.stage).map_err(|f| {
            if f.corner.active == 0 {
                self.refusal(f.error)
            } else {
                self.corner_refusal(&f)
            }
        })
    }

    /// The field window: over every corner of the file (tolerances,
    /// environment, aging).
    ///
    /// # Errors
    /// As [`StageFile::refusal`] at the nominal stage, else
    /// [`StageFile::corner_refusal`].
    pub fn window(&self) -> Result<Window, crate::Error> {
        self.spread.window(&self.stage).map_err(|f| {
            if f.corner.active == 0 {
                self.refusal(f.error)
            } else {
                self.corner_refusal(&f)
            }
        })
    }

    /// How every command refuses a model error of the nominal stage: a
    /// stage that does not work as a hold stage (it never activates, the
    /// press ends first, no hold) is [`crate::Error::StageFails`] (exit 1);
    /// anything else is a value outside the model's domain, named by its key
    /// (exit 2).
    #[must_use]
    pub fn refusal(&self, e: rc_model::Error) -> crate::Error {
        match e {
            rc_model::Error::NeverActivates { .. }
            | rc_model::Error::PressTooShort { .. }
            | rc_model::Error::NoHold => crate::Error::StageFails(format!("{}: {e}", self.path.display())),
            _ => crate::Error::StageFile(self.model_error(e)),
        }
    }

    /// Every corner of the file's widest spread (the field's: tolerances,
    /// environment, aging) lies in the model's domain, checked when the file
    /// is read: a tolerance, tempco or aging that pushes a corner out is
    /// refused by every command alike (exit 2), not only by those whose
    /// window reaches that corner. (Whether the stage *works* at a corner is
    /// each window's question: exit 1 there.)
    fn check_corners(&self) -> Result<(), StageFileError> {
        let spread = self.spread_for(Purpose::Field);
        let active = spread.active();
        let mut high: u16 = 0;
        loop {
            let corner = Corner { high, active };
            if let Err(error @ rc_model::Error::OutOfDomain(_)) =
                spread.at_corner(&self.stage, corner).and_then(|s| s.check())
            {
                return Err(self.corner_error(&CornerFailure { corner, error }));
            }
            if high == active {
                return Ok(());
            }
            high = high.wrapping_sub(active) & active;
        }
    }

    /// How every command refuses a corner that fails: the message names the
    /// tolerance, tempco or aging keys that move the failing quantity to
    /// that corner, the corner and the quantity's value there. The exit code
    /// is that of [`StageFile::refusal`] for the same error.
    #[must_use]
    pub fn corner_refusal(&self, f: &CornerFailure) -> crate::Error {
        let err = self.corner_error(f);
        match self.refusal(f.error) {
            crate::Error::StageFails(_) => crate::Error::StageFails(err.to_string()),
            _ => crate::Error::StageFile(err),
        }
    }

    /// The one-line error of a failing corner (see [`StageFile::corner_refusal`]).
    fn corner_error(&self, f: &CornerFailure) -> StageFileError {
        let (keys, value) = match (f.error, self.pushed_through_zero(f.corner)) {
            (rc_model::Error::OutOfDomain(Quantity::Tolerance), Some((key, value))) => {
                (vec![key.to_owned()], Some(value))
            }
            _ => {
                let value = match f.error {
                    rc_model::Error::OutOfDomain(q) => {
                        self.spread.at_corner(&self.stage, f.corner).ok().and_then(|s| quantity_text(q, &s))
                    }
                    _ => None,
                };
                (self.corner_keys(f.corner, f.error), value)
            }
        };
        let message = format!(
            "at the corner {}{}: {}",
            corner_text(f.corner),
            value.map_or_else(String::new, |v| format!(" ({v})")),
            f.error
        );
        let line = keys.first().and_then(|k| self.origins.line_of(k));
        StageFileError { file: self.path.clone(), line, key: Some(keys.join(", ")), message }
    }

    /// The coefficient that drives a value through zero at `corner` (the
    /// model says only "tolerance"): found by taking each tempco, and the
    /// aging, out in turn until the corner is back in the domain. Its key and
    /// what it amounts to there.
    fn pushed_through_zero(&self, corner: Corner) -> Option<(&'static str, String)> {
        use rc_model::window::Param;
        let spread = self.spread_for(Purpose::Field);
        let fine = |s: &Spread| s.at_corner(&self.stage, corner).and_then(|st| st.check()).is_ok();
        let temp = corner.sides().find(|(p, _)| *p == Param::Temp).and_then(|(_, high)| {
            let (lo, hi) = spread.temp_mdeg_c?;
            Some(if high { hi } else { lo })
        });
        let tc = spread.tempco;
        let at = |t: i32| format!("at {:.1} °C", f64::from(t) / 1e3);
        // A relative coefficient (R, C) and the change it makes at the corner's temperature.
        let scaled = |ppm: i32| {
            temp.map_or_else(String::new, |t| {
                let change = f64::from(ppm) * f64::from(t - spread.ref_mdeg_c) / 1e7;
                format!("{ppm} ppm/°C {}: {change:+.1} % (accepted: above −100 %)", at(t))
            })
        };
        let candidates: [(&'static str, Spread, String); 5] = [
            (
                "aging",
                Spread { aging: None, ..spread },
                "the capacitance lost by the end of the aging horizon".to_owned(),
            ),
            (
                "environment.c_tempco",
                Spread { tempco: rc_model::window::Tempco { c_ppm_per_c: 0, ..tc }, ..spread },
                scaled(tc.c_ppm_per_c),
            ),
            (
                "environment.r_tempco",
                Spread { tempco: rc_model::window::Tempco { r_ppm_per_c: 0, ..tc }, ..spread },
                scaled(tc.r_ppm_per_c),
            ),
            (
                "environment.drop_tempco",
                Spread { tempco: rc_model::window::Tempco { drop_uv_per_c: 0, ..tc }, ..spread },
                temp.map_or_else(String::new, |t| format!("{} mV/°C {}", f64::from(tc.drop_uv_per_c) / 1e3, at(t))),
            ),
            (
                "environment.threshold_tempco",
                Spread { tempco: rc_model::window::Tempco { threshold_ppm_per_c: 0, ..tc }, ..spread },
                temp.map_or_else(String::new, |t| format!("{} ppm/°C {}", tc.threshold_ppm_per_c, at(t))),
            ),
        ];
        let (key, _, value) = candidates.into_iter().find(|(_, s, _)| fine(s))?;
        // Aging: the key the file gave that sets the loss.
        let key = if key == "aging" {
            ["aging.loss_per_decade", "aging.loss", "aging.hours"]
                .into_iter()
                .find(|k| self.origins.line_of(k).is_some())
                .unwrap_or(key)
        } else {
            key
        };
        let value = match (key, spread.aging.map(|a| a.remaining_ppm())) {
            (k, Some(Err(_))) if k.starts_with("aging") => {
                "the capacitance lost by the end of the aging horizon: 100 % or more (accepted: below 100 %)".to_owned()
            }
            _ => value,
        };
        Some((key, value))
    }

    /// The keys of the file that move the quantity of `error` at `corner`
    /// (all the corner's keys when the error names no quantity).
    fn corner_keys(&self, corner: Corner, error: rc_model::Error) -> Vec<String> {
        use rc_model::window::Param;
        let moves: &[Param] = match error {
            rc_model::Error::OutOfDomain(q) => match q {
                Quantity::R => &[Param::R, Param::Temp],
                Quantity::C => &[Param::C, Param::Temp, Param::Age],
                Quantity::Vdd => &[Param::Vdd],
                Quantity::DiodeDrop | Quantity::DiodeIs => &[Param::Diode, Param::Temp],
                Quantity::DriverR => &[Param::Driver],
                Quantity::Rise | Quantity::Fall => &[Param::Rise, Param::Fall, Param::Vdd, Param::Temp],
                _ => &[],
            },
            _ => &[],
        };
        let custom = self.preset.is_none();
        let key = |p: Param| match p {
            Param::R => "tolerance.r",
            Param::C => "tolerance.c",
            Param::Vdd => "tolerance.vdd",
            Param::Diode => "tolerance.diode",
            Param::Driver => "tolerance.driver_ohms",
            Param::Rise if custom => "tolerance.rise",
            Param::Fall if custom => "tolerance.fall",
            Param::Rise | Param::Fall => "input.family",
            Param::Temp => "environment.temp_min",
            Param::Age => "aging",
        };
        let moving: Vec<Param> = corner.sides().map(|(p, _)| p).collect();
        // The quantity's own key first, then what else moves it at this corner.
        let order: Vec<Param> = if moves.is_empty() { moving.clone() } else { moves.to_vec() };
        let mut keys: Vec<String> = Vec::new();
        for k in order.into_iter().filter(|p| moving.contains(p)).map(key) {
            if !keys.iter().any(|x| x == k)
                && (self.origins.line_of(k).is_some() || k == "input.family" || k == "aging")
            {
                keys.push(k.to_owned());
            }
        }
        keys
    }

    /// A model error turned into a one-line file error pointing at the key
    /// that set the quantity.
    #[must_use]
    pub fn model_error(&self, e: rc_model::Error) -> StageFileError {
        let (line, key) = match e {
            rc_model::Error::OutOfDomain(q) => {
                self.origins.of(q).map_or((None, Some(q.name().to_string())), |(l, k)| (Some(l), Some(k.to_string())))
            }
            _ => (None, None),
        };
        StageFileError { file: self.path.clone(), line, key, message: e.to_string() }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_example_reads_and_errors_name_line_and_key() {
        let sf = parse(Path::new("lumen-keypad.toml"), crate::sim::demo::BOARD_TOML).map_err(|e| e.to_string());
        let sf = sf.unwrap_or_else(|e| panic!("{e}"));
        assert_eq!((sf.stage.vdd_uv, sf.stage.r_mohm, sf.stage.c_ff), (5_000_000, 1_000_000_000, 1_000_000_000));
        assert!(sf.schmitt && sf.preset.is_some());
        let bad = crate::sim::demo::BOARD_TOML.replace("r = \"1M\"", "r = \"1G\"");
        let e = parse(Path::new("x.toml"), &bad).err().map(|e| (e.line.is_some(), e.key));
        assert_eq!(e, Some((true, Some("stage.r".to_owned()))));
    }
}
