//! Natural logarithm of a ratio of two unsigned integers, in Q62.

use super::mul_div::mul_div;
use super::{LN2_Q62, ONE_Q62};

/// Computes `ln(num / den)` as a signed Q62 number (value × 2^62).
///
/// Method: align the two integers to the same bit length (`num/den = 2^k · a/b`
/// with `a/b ∈ (1/2, 2)`), then `ln(a/b) = 2·atanh(d)` with `d = (a−b)/(a+b)`,
/// `|d| < 1/3`, summed as the odd power series until the next term is zero in
/// Q62 (at most 21 terms). The difference `a − b` is formed exactly before any
/// rounding, so the result keeps its *relative* accuracy as the ratio tends to 1.
///
/// Maximum error: 2^-57 absolute plus 2^-60 relative to the result (each of at most
/// 23 truncating Q62 steps loses under one LSB), i.e. below 7e-18 + 1e-18·|ln|.
/// Both operands are used exactly up to 2^125; larger ones are first shifted,
/// which adds at most 2^-124 relative to the ratio.
///
/// Returns `None` when either argument is zero.
#[must_use]
pub fn ln_ratio_q62(num: u128, den: u128) -> Option<i128> {
    if num == 0 || den == 0 {
        return None;
    }
    // Keep both below 2^125 so that alignment shifts and a + b cannot overflow.
    let (mut a, mut b) = (num, den);
    let top = a.max(b);
    let excess = (128 - top.leading_zeros()).saturating_sub(125);
    a >>= excess;
    b >>= excess;
    // Both are still ≥ 1: the smaller was ≥ 1 and at most `excess` bits shorter... guard anyway.
    if a == 0 || b == 0 {
        // One operand is more than 2^125 times the other: ln is out of every
        // range this crate uses; report it as not computable.
        return None;
    }
    let k = i128::from(b.leading_zeros()) - i128::from(a.leading_zeros());
    // Align the most significant bits: a/b now lies in (1/2, 2).
    if k > 0 {
        b <<= k as u32;
    } else if k < 0 {
        a <<= (-k) as u32;
    }
    let (diff, negative) = if a >= b { (a - b, false) } else { (b - a, true) };
    let sum = a + b;
    // d = diff / sum in Q62, |d| < 1/3 → below 2^61.
    let d_mag = mul_div(diff, ONE_Q62 as u128, sum)? as i128;
    let d = if negative { -d_mag } else { d_mag };
    let atanh = atanh_small_q62(d);
    Some(k * LN2_Q62 + 2 * atanh)
}

/// `atanh(d)` for `|d| < 1/3` in Q62, by its odd power series.
fn atanh_small_q62(d: i128) -> i128 {
    let d2 = (d * d) >> 62; // < 2^60, non-negative
    let mut term = d; // d^(2i+1) in Q62
    let mut sum = d;
    let mut odd: i128 = 1;
    // |term| shrinks by at least 9× per step: 21 steps reach zero from 2^61.
    // Division (not a shift) truncates toward zero for negative terms too.
    let mut steps = 0;
    while term != 0 && steps < 32 {
        steps += 1;
        term = (term * d2) / ONE_Q62;
        odd += 2;
        sum += term / odd;
    }
    sum
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn to_f64(q: i128) -> f64 {
        q as f64 / ONE_Q62 as f64
    }

    /// Published-free math identities: ln 1 = 0, ln 2 (constant), ln of exact powers of two.
    #[test]
    fn exact_points() {
        assert_eq!(ln_ratio_q62(7, 7), Some(0));
        assert_eq!(ln_ratio_q62(2, 1), Some(LN2_Q62));
        assert_eq!(ln_ratio_q62(1 << 40, 1), Some(40 * LN2_Q62));
        assert_eq!(ln_ratio_q62(1, 1 << 40), Some(-40 * LN2_Q62));
        assert_eq!(ln_ratio_q62(0, 1), None);
        assert_eq!(ln_ratio_q62(1, 0), None);
    }

    /// Test vectors: e^(−n), n = 1..5, from the project's check-value list
    /// (math; values to 17 significant digits) — ln of them must be −n.
    #[test]
    fn ln_of_exp_minus_n_table() {
        const EXP_MINUS_N: [(f64, f64); 5] = [
            (0.367_879_441_171_442_33, -1.0),
            (0.135_335_283_236_612_7, -2.0),
            (0.049_787_068_367_863_944, -3.0),
            (0.018_315_638_888_734_18, -4.0),
            (0.006_737_946_999_085_467, -5.0),
        ];
        for (x, want) in EXP_MINUS_N {
            let num = (x * (1u128 << 100) as f64) as u128;
            let got = to_f64(ln_ratio_q62(num, 1 << 100).unwrap_or(0));
            assert!((got - want).abs() < 1e-15, "{x}: {got}");
        }
    }

    proptest! {
        /// Invariant: agrees with the platform libm `ln` to f64 precision.
        #[test]
        fn ln_ratio_matches_f64_ln(num in 1u128..(1 << 100), den in 1u128..(1 << 100)) {
            let got = to_f64(ln_ratio_q62(num, den).unwrap_or(i128::MIN));
            let want = (num as f64 / den as f64).ln();
            prop_assert!((got - want).abs() <= 1e-15 * want.abs().max(1.0), "{} vs {}", got, want);
        }

        /// Invariant: relative accuracy is kept as the ratio tends to one.
        #[test]
        fn ln_ratio_near_one_keeps_relative_accuracy(base in (1u128 << 40)..(1 << 90), delta in 1u128..1_000_000) {
            let got = to_f64(ln_ratio_q62(base + delta, base).unwrap_or(0));
            let x = delta as f64 / base as f64;
            let want = x - x * x / 2.0 + x * x * x / 3.0; // ln(1+x), x < 2^-20
            prop_assert!(((got - want) / want).abs() < 1e-9 || (got - want).abs() < 1e-17, "{} vs {}", got, want);
        }

        /// Invariant: ln(a/b) = −ln(b/a) exactly.
        #[test]
        fn ln_ratio_is_antisymmetric(a in 1u128..(1 << 120), b in 1u128..(1 << 120)) {
            prop_assert_eq!(ln_ratio_q62(a, b), ln_ratio_q62(b, a).map(|v| -v));
        }
    }
}
