//! The hot path's cost, counted exactly: each call runs between the
//! `bench_start`/`bench_end` markers the instruction-count plugin watches
//! (`benches/on-chip-cost.sh`). Spans, in order: an empty span (the markers'
//! own overhead); the hold at a measured temperature; the inverse (effective
//! C and deviation) at the reference temperature; the drift update with
//! temperature compensation (the deviation at a measured temperature, then
//! EWMA, CUSUM and history); the record frame (encode, CRC-32, COBS);
//! prepare with a fixed drop; prepare with a junction diode; the hold in
//! soft-float `f32` (libm), the same formula on the same prepared numbers;
//! then the hold's parts: ln of a ratio, one quadratic, a `Norm` product and
//! a `Norm` quotient.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use core::hint::black_box;

use cortex_m_rt::entry;
use hold_emulator::{bench_end, bench_start, exit, print};
use hold_firmware::drift::{DriftConfig, DriftState, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::{Hint, Verdict};
use rc_model::prepared::{ln_ratio, Quadratic};
use rc_model::window::{Spread, Tempco};
use rc_model::{Diode, Norm, Prepared, Stage};

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    print(b"cost: panic\n");
    exit(false)
}

/// The README's stage: 1 MΩ, 1 µF, 5 V, 0.6 V drop, hc-schmitt thresholds.
fn stage() -> Stage {
    Stage {
        vdd_uv: 5_000_000,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 100_000,
        driver_mohm: 50_000,
        leak_mohm: None,
        leak_fa: 0,
        diode: Diode::Drop { drop_uv: 600_000 },
        rise_uv: 2_900_000,
        fall_uv: 2_100_000,
        press_ns: 100_000_000,
        temp_mdeg_c: 25_000,
    }
}

fn spread() -> Spread {
    Spread {
        temp_mdeg_c: Some((-20_000, 70_000)),
        tempco: Tempco { r_ppm_per_c: 100, c_ppm_per_c: -750, drop_uv_per_c: -2_000, threshold_ppm_per_c: 0 },
        ..Spread::default()
    }
}

/// The same discharge in `f32`: τ (ticks) and the quadratics as floats.
struct SoftStage {
    tau: f32,
    ref_c: f32,
    t: [f32; 2],
    s: [f32; 3],
    e: [f32; 3],
}

/// A quadratic's value, slope and curvature as floats, for a value with
/// `frac` fractional bits.
fn coefficients(q: Quadratic, frac: i32) -> [f32; 3] {
    let scale = |v: f32, bits: i32| v * libm::exp2f(-(bits as f32));
    let (s, c) = (i32::from(q.slope_shift), i32::from(q.curve_shift));
    [scale(q.at_ref as f32, frac), scale(q.slope as f32, frac + s), scale(q.curve as f32, frac + s + c)]
}

fn soft_stage(p: &Prepared) -> SoftStage {
    let (tf, s, e) = p.quadratics();
    let tau = p.tau_ticks();
    let t = coefficients(tf, 30);
    SoftStage {
        tau: tau.mantissa() as f32 * libm::exp2f(tau.exponent() as f32),
        ref_c: p.ref_mdeg_c() as f32,
        t: [t[1], t[2]],
        s: coefficients(s, 24),
        e: coefficients(e, 24),
    }
}

/// The hot path's hold, ticks, in soft-float `f32`.
#[inline(never)]
fn soft_hold(p: &SoftStage, temp_mdeg_c: i32) -> f32 {
    let d = temp_mdeg_c as f32 - p.ref_c;
    let s = p.s[0] + d * (p.s[1] + d * p.s[2]);
    let e = p.e[0] + d * (p.e[1] + d * p.e[2]);
    let f = 1.0 + d * (p.t[0] + d * p.t[1]);
    p.tau * f * libm::logf(s / e)
}

#[entry]
fn main() -> ! {
    let Ok(p) = Prepared::prepare(&stage(), &spread(), 1_000_000) else { exit(false) };
    let junction = Stage { diode: Diode::Junction { is_fa: 2_500_000, n_milli: 1_750, rs_mohm: 500 }, ..stage() };
    let mut tracker: DriftTracker<64> = DriftTracker::new(DriftConfig {
        baseline_count: 20,
        lambda_q16: 13_107,
        l_milli: 3_000,
        sigma: None,
        cusum_k: 300,
        cusum_h: 3_000,
        limit: -200_000,
    });
    for i in 0..24 {
        tracker.update((i % 5) * 100 - 200);
    }
    let soft = soft_stage(&p);
    let temp = black_box(40_000);
    let ticks = black_box(712_345u64);
    let record = Record {
        seq: 1_234,
        unit_id: 0x00C0_FFEE,
        boot: 17,
        press_ticks: 100_000,
        on_ticks: Some(161),
        hold_ticks: Some(712_345),
        clock_hz: 1_000_000,
        temp_mdeg_c: Some(40_000),
        verdict: Verdict::WithinWindow,
        hint: Hint::None,
        drift: DriftState::Steady,
        c_deviation_ppm: Some(-12_345),
    };

    bench_start(0);
    bench_end(0);

    bench_start(1);
    let hold = black_box(&p).hold_at(temp);
    bench_end(1);
    black_box(hold).ok();

    bench_start(2);
    let inverse = black_box(&p).inverse(ticks);
    bench_end(2);
    black_box(inverse).ok();

    bench_start(3);
    let dev = black_box(&p).deviation_ppm_at(ticks, temp).unwrap_or(0);
    let update = tracker.update(dev);
    bench_end(3);
    black_box(update);

    let mut frame = [0u8; record::FRAME_MAX];
    bench_start(4);
    let len = record::encode_into(black_box(&record), &mut frame);
    bench_end(4);
    black_box((len, frame)).0.ok();

    bench_start(5);
    let prepared_drop = Prepared::prepare(black_box(&stage()), &spread(), 1_000_000);
    bench_end(5);
    black_box(prepared_drop).ok();

    bench_start(6);
    let prepared_junction = Prepared::prepare(black_box(&junction), &spread(), 1_000_000);
    bench_end(6);
    black_box(prepared_junction).ok();

    bench_start(7);
    let soft_ticks = soft_hold(black_box(&soft), temp);
    bench_end(7);
    black_box(soft_ticks);

    // The hold's parts: ln of a ratio, one quadratic, a Norm product and quotient.
    let (_, start_q, _) = p.quadratics();
    let (a, b) = (black_box(Norm::new(0x1234_5678_9ABC, -20)), black_box(Norm::new(0xFEDC_BA98_7654, -30)));
    bench_start(8);
    let ln = ln_ratio(black_box(75_000_000_000_000), black_box(35_000_000_000_000));
    bench_end(8);
    black_box(ln);
    bench_start(9);
    let y = black_box(&start_q).eval(black_box(15_000));
    bench_end(9);
    black_box(y).ok();
    bench_start(10);
    let prod = a * b;
    bench_end(10);
    black_box(prod);
    bench_start(11);
    let quot = a.checked_div(b);
    bench_end(11);
    black_box(quot);

    // The twin must compute the same hold (to f32's precision), or the comparison means nothing.
    let fixed = hold.map_or(0, |h| h.round().unwrap_or(0));
    let gap = (soft_ticks - fixed as f32) / fixed as f32;
    let ok = fixed > 0 && prepared_drop.is_ok() && prepared_junction.is_ok() && gap.abs() < 1e-5;
    print(if ok { b"cost: done\n" } else { b"cost: FAILED a consistency check\n" });
    exit(ok)
}
