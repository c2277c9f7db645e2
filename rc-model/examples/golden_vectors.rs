//! Writes the golden vectors the emulated chips recompute bit for bit:
//! prepared stages across the domain (edges first, then seeded random
//! stages), each with measured holds and temperatures, and the hot path's
//! results for each as computed on this host.
//!
//! Usage: `cargo run -p rc-model --example golden_vectors -- OUT.bin [STAGES]`
//!
//! File layout (little-endian): "RCGV", version u32 (1), stage count u32,
//! case count u32; then per stage its `Prepared::to_bytes`, a case count
//! u32 and per case the temperature (i32 m°C), the measured hold (u64
//! ticks) and the expected `Prepared::outcome_bytes`.

use rc_model::window::{Spread, Tempco};
use rc_model::{limits, Diode, Prepared, Stage, OUTCOME_LEN};

/// splitmix64: a small, well-known generator (Steele, Lea & Flood 2014), enough
/// to spread test points; the seed fixes the file.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: u64) -> u64 {
        self.next() % n.max(1)
    }
    fn range(&mut self, lo: u64, hi: u64) -> u64 {
        lo + self.below(hi - lo + 1)
    }
    /// Log-uniform in [lo, hi].
    fn log(&mut self, lo: f64, hi: f64) -> f64 {
        let u = (self.next() >> 11) as f64 / (1u64 << 53) as f64;
        (lo.ln() + u * (hi.ln() - lo.ln())).exp()
    }
}

/// A stage and a spread somewhere in the domain; `edge` picks domain ends.
fn draw(rng: &mut Rng, edge: Option<usize>) -> (Stage, Spread, u32) {
    let pick = |rng: &mut Rng, lo: u64, hi: u64, e: Option<bool>| match e {
        Some(false) => lo,
        Some(true) => hi,
        None => rng.range(lo, hi),
    };
    // Each edge case pushes one quantity to one end of its range.
    let at = |k: usize| edge.map(|e| e / 2 == k).unwrap_or(false).then(|| edge.unwrap_or(0) % 2 == 1);
    let vdd_uv = pick(rng, u64::from(limits::VDD_UV.0), u64::from(limits::VDD_UV.1), at(0)) as u32;
    let r_mohm = match at(1) {
        Some(false) => limits::R_MOHM.0,
        Some(true) => limits::R_MOHM.1,
        None => rng.log(1e6, 1e11) as u64,
    };
    let c_ff = match at(2) {
        Some(false) => limits::C_FF.0,
        Some(true) => limits::C_FF.1,
        None => rng.log(1e5, 1e13) as u64,
    };
    let fall_ppm = pick(rng, 60_000, 900_000, at(3)) as u32;
    let rise_ppm = rng.range(u64::from(fall_ppm), 940_000) as u32;
    let diode = if rng.below(2) == 0 {
        Diode::Drop { drop_uv: (rng.range(0, 900_000) as u32).min(vdd_uv / 3) }
    } else {
        Diode::Junction {
            is_fa: rng.log(1.0, 1e7) as u64,
            n_milli: rng.range(1_000, 2_000) as u32,
            rs_mohm: rng.range(0, 10_000),
        }
    };
    let stage = Stage {
        vdd_uv,
        r_mohm,
        c_ff,
        series_mohm: if rng.below(3) == 0 { rng.range(0, 100_000) } else { 0 },
        charge_mohm: rng.range(0, 1_000_000),
        driver_mohm: rng.range(1_000, 100_000),
        leak_mohm: if rng.below(3) == 0 { Some(rng.log(1e12, 1e16) as u64) } else { None },
        leak_fa: if rng.below(3) == 0 { rng.range(0, 1_000_000) } else { 0 },
        diode,
        rise_uv: (u64::from(vdd_uv) * u64::from(rise_ppm) / 1_000_000) as u32,
        fall_uv: (u64::from(vdd_uv) * u64::from(fall_ppm) / 1_000_000) as u32,
        press_ns: limits::DAY_NS,
        temp_mdeg_c: 25_000,
    };
    let lo = -(rng.range(0, 55_000) as i32);
    let hi = rng.range(25_000, 125_000) as i32;
    let spread = Spread {
        temp_mdeg_c: if rng.below(5) == 0 { None } else { Some((lo, hi)) },
        tempco: Tempco {
            r_ppm_per_c: rng.range(0, 400) as i32 - 200,
            c_ppm_per_c: rng.range(0, 2_000) as i32 - 1_500,
            drop_uv_per_c: -(rng.range(1_500, 2_500) as i32),
            threshold_ppm_per_c: rng.range(0, 600) as i32 - 300,
        },
        ..Spread::default()
    };
    let clock_hz = match at(4) {
        Some(false) => limits::CLOCK_HZ.0,
        Some(true) => limits::CLOCK_HZ.1,
        None => [1_000, 32_768, 1_000_000, 12_000_000, 16_000_000, 48_000_000, 200_000_000][rng.below(7) as usize],
    };
    (stage, spread, clock_hz)
}

fn main() {
    let mut args = std::env::args().skip(1);
    let Some(out) = args.next() else {
        eprintln!("usage: golden_vectors OUT.bin [STAGES]");
        std::process::exit(2);
    };
    let want: usize = args.next().and_then(|s| s.parse().ok()).unwrap_or(600);
    let mut rng = Rng(0x2545_F491_4F6C_DD1D);
    let mut body = Vec::new();
    let (mut stages, mut cases, mut tries) = (0u32, 0u32, 0usize);
    let (mut hold_ok, mut inverse_ok) = (0u32, 0u32);
    while (stages as usize) < want && tries < want * 200 {
        // The first 10 tries walk the domain's edges (5 quantities × 2 ends), with retries.
        let edge = (tries < 200).then_some(tries % 10);
        tries += 1;
        let (stage, spread, clock_hz) = draw(&mut rng, edge);
        let Ok(p) = Prepared::prepare(&stage, &spread, clock_hz) else { continue };
        let (lo, hi) = p.temp_range_mdeg_c();
        let expected = p.hold_ticks_at(p.ref_mdeg_c()).unwrap_or(1).max(1);
        let mut temps = vec![p.ref_mdeg_c(), lo, hi];
        for _ in 0..5 {
            temps.push(lo + rng.below(u64::from((hi - lo).unsigned_abs()) + 1) as i32);
        }
        // Outside the range: refused the same way on both builds.
        temps.push(lo - 1);
        let mut holds = vec![expected, expected / 2 + 1, expected.saturating_mul(2), 1, 0, 1 << 44, u64::MAX];
        for _ in 0..10 {
            holds.push((expected as f64 * (0.05 + 2.0 * (rng.below(1 << 20) as f64 / (1u64 << 20) as f64))) as u64);
        }
        body.extend_from_slice(&p.to_bytes());
        let n = temps.len() * 2;
        body.extend_from_slice(&(n as u32).to_le_bytes());
        for (i, &t) in temps.iter().chain(temps.iter()).enumerate() {
            let h = holds[(i + rng.below(holds.len() as u64) as usize) % holds.len()];
            body.extend_from_slice(&t.to_le_bytes());
            body.extend_from_slice(&h.to_le_bytes());
            let o: [u8; OUTCOME_LEN] = p.outcome_bytes(t, h);
            hold_ok += u32::from(o[0] == 0);
            inverse_ok += u32::from(o[9] == 0);
            body.extend_from_slice(&o);
        }
        stages += 1;
        cases += n as u32;
    }
    let mut file = Vec::with_capacity(body.len() + 16);
    file.extend_from_slice(b"RCGV");
    file.extend_from_slice(&1u32.to_le_bytes());
    file.extend_from_slice(&stages.to_le_bytes());
    file.extend_from_slice(&cases.to_le_bytes());
    file.extend_from_slice(&body);
    if let Err(e) = std::fs::write(&out, &file) {
        eprintln!("{out}: {e}");
        std::process::exit(1);
    }
    println!(
        "{out}: {stages} prepared stages, {cases} cases ({hold_ok} holds and {inverse_ok} inverses computed, the rest refused; {} bytes; {tries} stages drawn)",
        file.len()
    );
}
