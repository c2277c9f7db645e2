//! `a · b / d` for unsigned 128-bit integers through an exact 256-bit product.

/// Computes `⌊a · b / d⌋` exactly, with a 256-bit intermediate product.
///
/// Rounding: toward zero (floor), so the result is within 1 LSB below the exact
/// quotient. Returns `None` when `d == 0` or when the quotient does not fit in
/// 128 bits; it never wraps.
///
/// Cost: when `a · b` fits in 128 bits this is one native 128-bit multiply and
/// divide; otherwise a 128-step restoring division on the high half (only
/// taken by products above 2^128, i.e. the widest time × logarithm products).
#[must_use]
pub fn mul_div(a: u128, b: u128, d: u128) -> Option<u128> {
    if d == 0 {
        return None;
    }
    let (hi, lo) = mul_wide(a, b);
    if hi == 0 {
        return Some(lo / d);
    }
    if hi >= d {
        // Quotient would need more than 128 bits.
        return None;
    }
    // Restoring division of the 256-bit (hi, lo) by d, hi < d so the quotient fits.
    let mut rem = hi;
    let mut q: u128 = 0;
    let mut bit = 128;
    while bit > 0 {
        bit -= 1;
        let carry = rem >> 127;
        rem = (rem << 1) | ((lo >> bit) & 1);
        q <<= 1;
        if carry == 1 || rem >= d {
            rem = rem.wrapping_sub(d);
            q |= 1;
        }
    }
    Some(q)
}

/// Full 256-bit product of two `u128`, as `(high, low)` halves.
#[must_use]
pub fn mul_wide(a: u128, b: u128) -> (u128, u128) {
    const M: u128 = u64::MAX as u128;
    let (a1, a0) = (a >> 64, a & M);
    let (b1, b0) = (b >> 64, b & M);
    // Each partial product of two 64-bit halves fits in 128 bits.
    let p00 = a0 * b0;
    let p01 = a0 * b1;
    let p10 = a1 * b0;
    let p11 = a1 * b1;
    // Middle column: three terms below 2^64 each → no overflow in u128.
    let mid = (p00 >> 64) + (p01 & M) + (p10 & M);
    let lo = (p00 & M) | (mid << 64);
    let hi = p11 + (p01 >> 64) + (p10 >> 64) + (mid >> 64);
    (hi, lo)
}

/// Signed form of [`mul_div`]: `⌊|a|·|b|/|d|⌋` with the sign of `a·b/d`
/// (rounds toward zero). `None` on `d == 0` or when the magnitude exceeds
/// `i128::MAX`.
#[must_use]
pub fn mul_div_signed(a: i128, b: i128, d: i128) -> Option<i128> {
    let negative = (a < 0) ^ (b < 0) ^ (d < 0);
    let m = mul_div(a.unsigned_abs(), b.unsigned_abs(), d.unsigned_abs())?;
    let m = i128::try_from(m).ok()?;
    Some(if negative { -m } else { m })
}

#[cfg(test)]
mod tests {
    use super::*;
    use num_bigint::BigUint;
    use proptest::prelude::*;

    fn reference(a: u128, b: u128, d: u128) -> Option<u128> {
        let q = BigUint::from(a) * BigUint::from(b) / BigUint::from(d);
        u128::try_from(q).ok()
    }

    #[test]
    fn edge_values_match_bigint() {
        let edges = [0u128, 1, 2, 3, u64::MAX as u128, 1 << 64, (1 << 64) + 1, u128::MAX / 3, u128::MAX - 1, u128::MAX];
        for &a in &edges {
            for &b in &edges {
                for &d in &edges[1..] {
                    assert_eq!(mul_div(a, b, d), reference(a, b, d), "{a} {b} {d}");
                }
            }
        }
        assert_eq!(mul_div(5, 7, 0), None);
    }

    proptest! {
        #[test]
        fn mul_div_equals_bigint_floor(a: u128, b: u128, d in 1u128..) {
            prop_assert_eq!(mul_div(a, b, d), reference(a, b, d));
        }

        #[test]
        fn mul_div_equals_bigint_when_quotient_fits(a: u128, b in 1u128..(1 << 70), d in 1u128..(1 << 70)) {
            prop_assert_eq!(mul_div(a, b, d), reference(a, b, d));
        }

        #[test]
        fn signed_form_keeps_sign_and_magnitude(a in -(1i128 << 100)..(1i128 << 100), b in -(1i128 << 60)..(1i128 << 60), d in 1i128..(1 << 90)) {
            let want = (BigUint::from(a.unsigned_abs()) * BigUint::from(b.unsigned_abs())) / BigUint::from(d.unsigned_abs());
            let got = mul_div_signed(a, b, d).map(|v| (v < 0, v.unsigned_abs()));
            let neg = (a < 0) ^ (b < 0) && want != BigUint::from(0u8);
            prop_assert_eq!(got, u128::try_from(want).ok().map(|m| (neg, m)));
        }
    }
}
