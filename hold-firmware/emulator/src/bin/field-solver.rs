//! The same tester with the solver linked: it prepares its stage on the chip
//! (window over the corners, timings, prepared stage) from the Kestrel-5
//! stage and its spread instead of loading a blob, then measures as the
//! field tester does. Built to report what the solver adds to the footprint.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use cortex_m_rt::entry;
use hold_emulator::{exit, paint_stack, print, run_field};
use hold_firmware::{Config, Setup, WindowKind};
use rc_model::window::{Spread, Tempco, Tolerance};
use rc_model::{Diode, Model, Prepared, Stage};

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    print(b"field-solver: panic\n");
    exit(false)
}

/// `examples/kestrel-meter.toml`, as the stage file parser gives it.
fn stage() -> (Stage, Spread) {
    let stage = Stage {
        vdd_uv: 3_300_000,
        r_mohm: 2_000_000_000,
        c_ff: 10_000_000_000,
        series_mohm: 0,
        charge_mohm: 220_000,
        driver_mohm: 40_000,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: 250_000 },
        rise_uv: 1_914_000,
        fall_uv: 1_386_000,
        press_ns: 200_000_000,
        temp_mdeg_c: 25_000,
    };
    let spread = Spread {
        r: Tolerance::symmetric(10_000),
        c: Tolerance::symmetric(100_000),
        vdd: Tolerance::symmetric(30_000),
        temp_mdeg_c: Some((-25_000, 60_000)),
        tempco: Tempco { r_ppm_per_c: 100, c_ppm_per_c: -300, ..Tempco::default() },
        ..Spread::default()
    };
    (stage, spread)
}

#[entry]
fn main() -> ! {
    paint_stack();
    let (stage, spread) = stage();
    let clock_hz = 10_000;
    let setup = (|| {
        let model = Model::new(&stage).ok()?;
        let window = spread.window(&stage).ok()?;
        let config = Config::from_model(&model, &window, clock_hz, 20_000, 100_000).ok()?;
        Some(Setup { config, stage: Prepared::prepare(&stage, &spread, clock_hz).ok()?, window: WindowKind::Field })
    })();
    match setup {
        Some(setup) => run_field(&setup),
        None => exit(false),
    }
}
