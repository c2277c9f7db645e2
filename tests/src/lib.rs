//! Helpers shared by the cross-crate tests.

use rc_model::{Diode, Stage};

/// A plain stage: ideal driver, no diode drop, threshold at `frac_ppm` of the
/// supply, so that the hold is exactly `τ·ln(1/frac)`.
#[must_use]
pub fn ideal_stage(frac_ppm: u32) -> Stage {
    let vdd_uv = 5_000_000;
    let t = rc_model::fraction_of(vdd_uv, frac_ppm);
    Stage {
        vdd_uv,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 0,
        driver_mohm: 0,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: 0 },
        rise_uv: t,
        fall_uv: t,
        press_ns: 10_000_000,
        temp_mdeg_c: 25_000,
    }
}

/// Our own example stage, the "Lumen-3" keypad backlight (5 V, 1 MΩ, fixed
/// 0.6 V drop, 50 Ω driver, Schmitt thresholds 2.9 V / 2.1 V), with the
/// capacitor and press given.
#[must_use]
pub fn backlight_stage(c_ff: u64, press_ns: u64) -> Stage {
    Stage {
        vdd_uv: 5_000_000,
        r_mohm: 1_000_000_000,
        c_ff,
        series_mohm: 0,
        charge_mohm: 0,
        driver_mohm: 50_000,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: 600_000 },
        rise_uv: 2_900_000,
        fall_uv: 2_100_000,
        press_ns,
        temp_mdeg_c: 25_000,
    }
}

/// Worked examples of the NIST/SEMATECH e-Handbook of Statistical Methods, as
/// quoted in the project's check-value list (section 6). Typed once here for
/// both the f64 statistics and the firmware's fixed-point trackers.
pub mod nist {
    /// §6.3.2.4 EWMA example: the data (λ = 0.3, EWMA0 = 50, s = 2.0539).
    pub const EWMA_DATA: [f64; 20] = [
        52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5, 49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4,
        53.6, 52.1,
    ];
    /// §6.3.2.4 EWMA example: the EWMA series to 2 dp.
    pub const EWMA_SERIES: [f64; 20] = [
        50.60, 49.52, 50.56, 50.18, 50.16, 49.21, 49.75, 49.85, 50.26, 50.33, 50.11, 49.36, 49.52, 50.05, 49.38, 49.92,
        50.73, 51.23, 51.94, 51.99,
    ];
    /// §6.3.2.3 tabular CUSUM example: the data (target 325, k = 0.3175, h = 4.1959).
    pub const CUSUM_DATA: [f64; 20] = [
        324.925, 324.675, 324.725, 324.350, 325.350, 325.225, 324.125, 324.525, 325.225, 324.600, 324.625, 325.150,
        328.325, 327.250, 327.825, 328.500, 326.675, 327.775, 326.875, 328.350,
    ];
    /// §6.3.2.3 tabular CUSUM example: S_hi to 2 dp.
    pub const CUSUM_HI: [f64; 20] = [
        0.0, 0.0, 0.0, 0.0, 0.03, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 3.01, 4.94, 7.45, 10.63, 11.99, 14.44, 16.00,
        19.04,
    ];
}
