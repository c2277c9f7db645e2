//! The hold-stage physics of the model (RC discharge, diode drop, input
//! thresholds, capacitor aging) against values from outside the project. Each
//! check names its source; see the README section "What the results are
//! checked against".

use approx::assert_relative_eq;
use rc_model::presets::{self, PRESETS};
use rc_model::window::{Aging, Spread, ThresholdSpread};
use rc_model::{Diode, Model, Span};
use rchold_tests::ideal_stage;

fn hold_over_tau(frac_ppm: u32) -> f64 {
    let s = ideal_stage(frac_ppm);
    let e = Model::new(&s).and_then(|m| m.evaluate()).unwrap_or_else(|e| panic!("{e}"));
    // τ = 1 MΩ · 1 µF = 1 s
    e.hold.ns_q32() as f64 / 4_294_967_296.0 * 1e-9
}

/// RC law, t/τ = ln(V0/Vth) for Vth/V0 = 0.30 … 0.70 (math; the project's
/// check-value list, section 1).
#[test]
#[allow(clippy::approx_constant)] // the table is typed as published, to six places
fn rc_discharge_table() {
    let table = [
        (300_000, 1.203_973),
        (333_333, 1.098_612),
        (350_000, 1.049_822),
        (450_000, 0.798_508),
        (500_000, 0.693_147), // ln 2, as the table gives it
        (550_000, 0.597_837),
        (650_000, 0.430_783),
        (666_667, 0.405_465),
        (700_000, 0.356_675),
    ];
    for (frac, want) in table {
        // Thresholds are whole µV (1 ppm of 5 V = 5 µV): the table's 1/3 and 2/3
        // are rounded to 1 ppm, which moves t/τ by at most 3e-6.
        assert_relative_eq!(hold_over_tau(frac), want, max_relative = 4e-6);
    }
}

/// Rule of thumb of the trade (common practice, no source): hold ≈ 0.8·R·C
/// for an input switching near 0.45 of the start voltage.
#[test]
fn rule_of_thumb_point_eight_rc() {
    assert!((hold_over_tau(450_000) - 0.8).abs() < 0.002);
}

/// Worked example (math; check-value list section 1): Vdd 5 V, drop 0.6 V,
/// threshold 2.5 V → t = τ·ln(4.4/2.5) = 0.565314·τ.
#[test]
fn worked_example_with_diode_drop() {
    let mut s = ideal_stage(500_000);
    s.diode = Diode::Drop { drop_uv: 600_000 };
    let e = Model::new(&s).and_then(|m| m.evaluate()).unwrap_or_else(|e| panic!("{e}"));
    assert_relative_eq!(e.hold.ns_q32() as f64 / 4_294_967_296.0 * 1e-9, 0.565_314, max_relative = 1e-6);
}

/// Plain CMOS switching point Vdd/2 ± 30 % puts one RC delay between 0.43·τ
/// and 1.05·τ (published: Elektor magazine, July/August 1983, "reproducible
/// delay"; arithmetic ln(1/0.65) = 0.4308, ln(1/0.35) = 1.0498).
#[test]
fn published_plain_cmos_band() {
    let mut s = ideal_stage(500_000);
    s.press_ns = 50_000_000;
    let spread = Spread {
        thresholds: Some(ThresholdSpread::Single {
            min_uv: rc_model::fraction_of(s.vdd_uv, 350_000),
            max_uv: rc_model::fraction_of(s.vdd_uv, 650_000),
        }),
        ..Spread::default()
    };
    let w = spread.window(&s).unwrap_or_else(|f| panic!("{f:?}"));
    let secs = |x: Span| x.ns_q32() as f64 / 4_294_967_296.0 * 1e-9;
    assert_relative_eq!(secs(w.min), 0.4308, max_relative = 1e-4);
    assert_relative_eq!(secs(w.max), 1.0498, max_relative = 1e-4);
}

/// JEDEC JESD7A (high-speed CMOS) at Vcc 4.5 V: VIH(min) 3.15 V, VIL(max)
/// 1.35 V, so a hold discharging from Vcc lies in [ln(4.5/3.15), ln(4.5/1.35)]·τ
/// = [0.3567, 1.2040]·τ (published levels, as quoted in secondary sources; math).
#[test]
fn jesd7a_worst_case_band() {
    let mut s = ideal_stage(500_000);
    s.vdd_uv = 4_500_000;
    let p = presets::preset("hc").unwrap_or_else(|| panic!("hc preset"));
    let b = p.bands(s.vdd_uv).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((b.rise.min_uv, b.rise.max_uv), (1_350_000, 3_150_000));
    s.rise_uv = b.rise.typ_uv;
    s.fall_uv = b.fall.typ_uv;
    let spread = Spread {
        thresholds: Some(ThresholdSpread::Single { min_uv: b.rise.min_uv, max_uv: b.rise.max_uv }),
        ..Spread::default()
    };
    let w = spread.window(&s).unwrap_or_else(|f| panic!("{f:?}"));
    let secs = |x: Span| x.ns_q32() as f64 / 4_294_967_296.0 * 1e-9;
    assert_relative_eq!(secs(w.min), 0.3567, max_relative = 2e-4);
    assert_relative_eq!(secs(w.max), 1.2040, max_relative = 2e-4);
}

/// Every preset's thresholds lie inside its family's guaranteed VIL(max) …
/// VIH(min) limits (published: JEDEC JESD7A, JESD13-B, JESD8C, JESD8-5,
/// JESD8-7, as quoted in the check-value list, section 4).
#[test]
fn presets_lie_inside_their_family_limits() {
    // (preset, supply mV, VIL(max) mV, VIH(min) mV)
    let limits: [(&str, u32, u32, u32); 14] = [
        ("hc", 2_000, 500, 1_500),
        ("hc", 4_500, 1_350, 3_150),
        ("hc", 6_000, 1_800, 4_200),
        ("hc-schmitt", 2_000, 500, 1_500),
        ("hc-schmitt", 4_500, 1_350, 3_150),
        ("hc-schmitt", 6_000, 1_800, 4_200),
        ("4000b", 5_000, 1_500, 3_500),
        ("4000b", 10_000, 3_000, 7_000),
        ("4000b", 15_000, 4_000, 11_000),
        ("4000b-schmitt", 5_000, 1_500, 3_500),
        ("4000b-schmitt", 10_000, 3_000, 7_000),
        ("4000b-schmitt", 15_000, 4_000, 11_000),
        ("lvcmos33", 3_300, 800, 2_000),
        ("lvcmos25", 2_500, 700, 1_700),
    ];
    for (name, vdd_mv, vil, vih) in limits {
        let p = presets::preset(name).unwrap_or_else(|| panic!("{name}"));
        let b = p.bands(vdd_mv * 1000).unwrap_or_else(|e| panic!("{name}: {e}"));
        for band in [b.rise, b.fall] {
            assert!(band.min_uv >= vil * 1000 && band.max_uv <= vih * 1000, "{name} at {vdd_mv} mV: {band:?}");
            assert!(band.min_uv <= band.typ_uv && band.typ_uv <= band.max_uv, "{name}: {band:?}");
        }
        if b.schmitt {
            assert!(b.fall.max_uv < b.rise.min_uv, "{name}: bands overlap");
        }
    }
    // LVCMOS 1.8 V: 0.35·Vdd / 0.65·Vdd (JESD8-7).
    let p = presets::preset("lvcmos18").unwrap_or_else(|| panic!("lvcmos18"));
    let b = p.bands(1_800_000).unwrap_or_else(|e| panic!("{e}"));
    assert!(b.rise.min_uv.abs_diff(630_000) <= 1_000 && b.rise.max_uv.abs_diff(1_170_000) <= 1_000, "{b:?}");
    // Every published preset names its standard; every Schmitt preset says it is from memory.
    for p in PRESETS {
        let schmitt = p.bands((p.vdd_mv.0 + p.vdd_mv.1) / 2 * 1000).map(|b| b.schmitt).unwrap_or(false);
        assert_eq!(schmitt, p.provenance == presets::Provenance::FromMemory, "{}", p.name);
    }
}

/// Class 2 ceramic aging C(t) = C(t0)·[1 − (k/100)·log10(t/t0)] (law described
/// by IEC 60384-22; formula from memory), worked for k = 2.5: 97.5 % at 10 h,
/// 95.0 % at 100 h, 92.5 % at 1,000 h, 90.0 % at 10,000 h (math).
#[test]
fn class2_aging_worked_table() {
    for (hours, want_ppm) in [(10, 975_000), (100, 950_000), (1_000, 925_000), (10_000, 900_000)] {
        let a = Aging::Class2 { k_milli_pct: 2_500, ref_hours: 1, hours };
        let got = a.remaining_ppm().unwrap_or_else(|e| panic!("{e}"));
        assert!(got.abs_diff(want_ppm) <= 1, "{hours} h: {got}");
    }
}

/// Silicon junction forward drop: about −2 mV/°C at constant current
/// (published: Sedra & Smith, Microelectronic Circuits, diode chapter) — the
/// window's default coefficient moves a fixed drop by −20 mV over +10 °C.
#[test]
fn diode_drop_tempco_default() {
    let mut s = ideal_stage(500_000);
    s.diode = Diode::Drop { drop_uv: 600_000 };
    let spread = Spread { temp_mdeg_c: Some((25_000, 35_000)), ..Spread::default() };
    let hot = rc_model::window::Corner { high: 1 << 7, active: 1 << 7 };
    let at = spread.at_corner(&s, hot).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(at.diode, Diode::Drop { drop_uv: 580_000 });
    assert_eq!(at.temp_mdeg_c, 35_000);
}

/// Electrolytic life doubles for each 10 °C cooler, L = L0·2^((T0 − T)/10)
/// (common practice, Arrhenius-based; check-value list §5): 2,000 h at 105 °C
/// → 4,000 h at 95 °C, 8,000 h at 85 °C, 32,000 h at 65 °C.
#[test]
fn electrolytic_ten_degree_rule() {
    use rc_model::window::electrolytic_life_h;
    for (t, want) in [(105_000, 2_000), (95_000, 4_000), (85_000, 8_000), (65_000, 32_000), (110_000, 1_414)] {
        assert_eq!(electrolytic_life_h(2_000, 105_000, t), Ok(want), "{t}");
    }
    assert!(electrolytic_life_h(2_000, 105_000, 151_000).is_err());
}
