//! Natural logarithm of a ratio of two integers, sized for the hot path:
//! 64-bit inputs, 32×32→64-bit products, one 64÷32-bit division.

use super::norm::{lz64, mul32, Norm};

/// ln 2 in Q57: round(ln 2 · 2^57), computed with 60-digit decimal arithmetic
/// (Python `decimal`); checked against [`crate::fixed::LN2_Q62`] in the tests.
const LN2_Q57: u64 = 99_893_036_290_645_747;

/// `round(2^31 / (2i + 1))` for i = 1 … 5: the atanh series' coefficients in
/// Q31, computed with 60-digit decimal arithmetic and rechecked in the tests.
const ATANH_Q31: [u32; 5] = [715_827_883, 429_496_730, 306_783_378, 238_609_294, 195_225_786];

/// Largest input: both operands below 2^62, so that `2·den + num` fits a `u64`.
const INPUT_LIMIT: u64 = 1 << 62;

/// Computes `ln(num / den)` for `num > den > 0`, as a [`Norm`].
///
/// Method: `num/den = 2^k · x` with `x ∈ [0.707, 1.414]` (shifts and one
/// comparison), then `ln x = 2·atanh(d)`, `d = (num − 2^k·den)/(num + 2^k·den)`,
/// `|d| < 0.175`. The difference is formed exactly before anything is
/// rounded, so a ratio close to one keeps its *relative* accuracy. `d` is one
/// normalised 64÷32-bit division; `atanh(d)/d = Σ d^(2i)/(2i+1)` to i = 5 by
/// Horner's rule in Q32 (the first omitted term is below 7e-11 of the sum);
/// `k·ln 2` is added in Q57.
///
/// Maximum error: 3e-9 relative to the result (each of about six truncating
/// 32-bit steps loses under 2^-31; the series' remainder adds 7e-11). A
/// proptest checks this bound against the platform `ln` over the whole input
/// range and near one.
///
/// Returns `None` unless `den < num < 2^62`.
#[must_use]
pub fn ln_ratio(num: u64, den: u64) -> Option<Norm> {
    if den == 0 || num <= den || num >= INPUT_LIMIT {
        return None;
    }
    // Align den's top bit with num's: num/den' ∈ [1, 2), den' = den·2^k exactly.
    let mut k = lz64(den) - lz64(num);
    let mut d = den << k;
    if d > num {
        // Only when k ≥ 1 (with k = 0, d = den < num), so the shift is exact.
        k -= 1;
        d >>= 1;
    }
    // Above x ≈ √2 (1.4140625, a cut-off that needs only shifts) use x/2.
    let cut = d + (d >> 2) + (d >> 3) + (d >> 5) + (d >> 7);
    let (diff, sum, below) = if num > cut {
        k += 1;
        ((d << 1) - num, (d << 1) + num, true)
    } else {
        (num - d, num + d, false)
    };
    let two_atanh = if diff == 0 {
        Norm::ZERO
    } else {
        // d = diff/sum from the top 32 bits of each (their relative error < 2^-31).
        let (ld, ls) = (lz64(diff), lz64(sum));
        let d32 = ((diff << ld) >> 32) as u32;
        let s32 = ((sum << ls) >> 32) as u32;
        let q = Norm::from_parts(d32, -(ld as i32)).checked_div(Norm::from_parts(s32, -(ls as i32)))?;
        // z = d² < 0.031 in Q32 (below 2^28).
        let z = (q * q).to_fixed(32).and_then(|v| u32::try_from(v).ok())?;
        // atanh(d)/d = 1 + z/3 + z²/5 + … in Q31, Horner from the top (each acc < 2^31).
        let mut acc: u32 = 0;
        for &c in ATANH_Q31.iter().rev() {
            acc = c + (mul32(acc, z) >> 32) as u32;
        }
        let series = (1u32 << 31) + (mul32(acc, z) >> 32) as u32;
        let atanh = q * Norm::from_parts(series, -31);
        Norm::from_parts(atanh.mantissa(), atanh.exponent().saturating_add(1))
    };
    if k == 0 {
        return Some(two_atanh);
    }
    // k ≥ 1: the result is at least ln 2 − 0.353, so absolute Q57 steps suffice.
    // k ≤ 62 and 2·atanh < 0.36, so neither term nor their sum leaves a u64.
    let whole = u64::from(k) * LN2_Q57;
    let frac = two_atanh.to_fixed(57)?;
    let total = if below { whole - frac } else { whole + frac };
    Some(Norm::new(total, -57))
}

#[cfg(test)]
mod tests {
    use super::super::norm::to_f64;
    use super::*;
    use proptest::prelude::*;

    fn rel(num: u64, den: u64) -> f64 {
        let got = ln_ratio(num, den).map_or(f64::NAN, to_f64);
        // ln(num/den) as ln(1 + (num−den)/den) keeps f64's accuracy near one.
        let want = ((num - den) as f64 / den as f64).ln_1p();
        (got - want).abs() / want
    }

    #[test]
    fn constants_match_their_definitions() {
        assert_eq!(u128::from(LN2_Q57), (crate::fixed::LN2_Q62 as u128 + 16) >> 5);
        for (i, &c) in ATANH_Q31.iter().enumerate() {
            let odd = 2 * i as u64 + 3;
            assert_eq!(u64::from(c), ((1u64 << 32) / odd).div_ceil(2), "1/{odd}");
        }
    }

    #[test]
    fn exact_points_and_refusals() {
        assert_eq!(ln_ratio(2, 1).map(|n| n.mantissa()), Some((LN2_Q57 >> 25) as u32));
        assert!(rel(1 << 61, 1) < 3e-9);
        assert!(rel(3, 2) < 3e-9);
        assert_eq!(ln_ratio(5, 5), None);
        assert_eq!(ln_ratio(4, 5), None);
        assert_eq!(ln_ratio(1, 0), None);
        assert_eq!(ln_ratio(INPUT_LIMIT, 1), None);
    }

    /// Test vectors: e^(−n), n = 1 … 5, from the project's check-value list
    /// (math, 17 digits): ln(1 / e^(−n)) must be n.
    #[test]
    fn ln_of_one_over_e_to_the_minus_n() {
        const EXP_MINUS_N: [f64; 5] = [
            0.367_879_441_171_442_33,
            0.135_335_283_236_612_7,
            0.049_787_068_367_863_944,
            0.018_315_638_888_734_18,
            0.006_737_946_999_085_467,
        ];
        for (i, x) in EXP_MINUS_N.iter().enumerate() {
            let num = 1u64 << 60;
            let den = (x * num as f64) as u64;
            let n = (i + 1) as f64;
            let got = ln_ratio(num, den).map_or(f64::NAN, to_f64);
            assert!((got - n).abs() < 3e-9 * n, "e^-{n}: {got}");
        }
    }

    proptest! {
        /// Invariant: within 3e-9 relative of the platform ln over the whole input range.
        #[test]
        fn ln_ratio_matches_platform_ln(den in 1u64..(1 << 61), num_hi in 1u64..(1 << 61)) {
            let (num, den) = if num_hi > den { (num_hi, den) } else if num_hi < den { (den, num_hi) } else { (den + 1, den) };
            prop_assert!(rel(num, den) < 3e-9, "ln({}/{}) off by {}", num, den, rel(num, den));
        }

        /// Invariant: a ratio a few LSB above one keeps its relative accuracy.
        #[test]
        fn ln_ratio_near_one_keeps_relative_accuracy(den in (1u64 << 20)..(1 << 61), step in 1u64..1_000_000) {
            prop_assert!(rel(den + step, den) < 3e-9);
        }
    }
}
