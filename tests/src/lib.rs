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
