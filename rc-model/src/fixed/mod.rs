//! Integer arithmetic kernels and the Q formats of the model.
//!
//! # Q formats
//!
//! A value in "Qn" is an integer equal to the quantity × 2^n. The model keeps
//! every physical quantity in one format, chosen so that inputs are exact and
//! every product has headroom:
//!
//! | quantity | type | unit × scale | largest value in the domain |
//! |---|---|---|---|
//! | voltage | `i128` | µV × 2^32 | 18 V → 7.7e16 < 2^57 |
//! | resistance | `u128` | mΩ × 2^32 | leakage ≤ 2^64 mΩ → < 2^96 |
//! | capacitance | `u128` | fF (exact) | 10 mF → 1e13 < 2^44 |
//! | current | `i128` | fA × 2^32 | 18 V / 1 Ω → 1.8e16 fA → < 2^87 |
//! | time | `u128` | ns × 2^32 | τ ≤ 1e8 Ω · 10 mF = 1e15 ns → < 2^82 |
//! | logarithm, dimensionless ratios | `i128` | × 2^62 | ln ≤ 60 → < 2^68 |
//!
//! Every product of two such values is formed by [`mul_div`] through an exact
//! 256-bit intermediate, so no intermediate can overflow; a *quotient* that
//! would not fit in 128 bits is returned as `None` and surfaces as
//! [`crate::Error::Arithmetic`]. The largest quotients the model forms are
//! times (< 2^82 · 2^62 / 2^62) and currents (< 2^87), far below 2^127; the
//! test `domain_corners_never_overflow` evaluates every corner of the supported
//! domain to show that the error is never reached there. The bounds above come
//! from the top of the domain; its bottom (a 0.8 V supply, 1 kΩ, 100 pF) only
//! shrinks values, and ratios of voltages stay inside the thresholds' 5 – 95 %
//! of the supply whatever the supply, so the same formats hold there — the
//! corner test runs at 0.8 V as at 18 V.

mod exp_neg;
mod ln_ratio;
mod mul_div;

pub use exp_neg::exp_neg_q62;
pub use ln_ratio::ln_ratio_q62;
pub use mul_div::{mul_div, mul_div_signed, mul_wide};

/// 1.0 in Q62.
pub const ONE_Q62: i128 = 1 << 62;

/// ln 2 in Q62: round(ln 2 · 2^62), computed with 80-digit decimal arithmetic
/// (Python `decimal`); checked against `f64::consts::LN_2` in the tests.
pub const LN2_Q62: i128 = 3_196_577_161_300_663_915;

/// ln 10 in Q62: round(ln 10 · 2^62), derived as [`LN2_Q62`].
pub const LN10_Q62: i128 = 10_618_799_479_599_967_255;

/// Eight-point Gauss–Legendre rule on `[0, 1]` as `(node, weight)` pairs in
/// Q62: the roots of P8 mapped by `u = (x+1)/2`, weights halved. Computed by
/// Newton iteration on P8 in 80-digit decimal arithmetic; the weights sum to
/// 2^62 − 2 (rounding). Checked against a recomputation in the tests.
pub const GAUSS8_Q62: [(i128, i128); 8] = [
    (91_565_356_790_028_672, 233_417_112_738_098_817),
    (468_855_181_594_583_525, 512_775_753_676_023_141),
    (1_094_047_775_692_901_388, 723_358_276_341_402_282),
    (1_882_871_521_167_486_663, 836_291_866_458_169_711),
    (2_728_814_497_259_901_241, 836_291_866_458_169_711),
    (3_517_638_242_734_486_516, 723_358_276_341_402_282),
    (4_142_830_836_832_804_379, 512_775_753_676_023_141),
    (4_520_120_661_637_359_232, 233_417_112_738_098_817),
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn constants_match_f64() {
        let s = ONE_Q62 as f64;
        assert!((LN2_Q62 as f64 / s - core::f64::consts::LN_2).abs() < 1e-16);
        assert!((LN10_Q62 as f64 / s - core::f64::consts::LN_10).abs() < 1e-15);
    }

    /// Recomputes the Gauss–Legendre nodes in f64 (Newton on the Legendre
    /// recurrence) and checks the table and that the rule integrates x^15 exactly.
    #[test]
    fn gauss_table_matches_recomputation() {
        let s = ONE_Q62 as f64;
        for (i, &(node, weight)) in GAUSS8_Q62.iter().enumerate() {
            let mut x = (core::f64::consts::PI * (8.0 - i as f64 - 0.25) / 8.5).cos();
            let mut dp = 0.0;
            for _ in 0..50 {
                let (mut p0, mut p1) = (1.0, x);
                for k in 2..=8 {
                    let k = k as f64;
                    let p2 = ((2.0 * k - 1.0) * x * p1 - (k - 1.0) * p0) / k;
                    p0 = p1;
                    p1 = p2;
                }
                dp = 8.0 * (x * p1 - p0) / (x * x - 1.0);
                x -= p1 / dp;
            }
            let w = 2.0 / ((1.0 - x * x) * dp * dp);
            assert!(((x + 1.0) / 2.0 - node as f64 / s).abs() < 1e-15, "node {i}");
            assert!((w / 2.0 - weight as f64 / s).abs() < 1e-15, "weight {i}");
        }
        let integral: f64 = GAUSS8_Q62.iter().map(|&(u, w)| (w as f64 / s) * (u as f64 / s).powi(15)).sum();
        assert!((integral - 1.0 / 16.0).abs() < 1e-15);
    }
}
