//! A non-negative number as a 32-bit mantissa and a binary exponent: the
//! hot path's way of keeping 31 bits of *relative* precision across the
//! domain's 30 decades without 128-bit arithmetic.

/// `mantissa · 2^exponent`, with the mantissa normalised to `[2^31, 2^32)`
/// (or zero, for the value zero).
///
/// Every operation truncates: each product or quotient loses less than one
/// unit of the mantissa's last place, i.e. below 2^-31 ≈ 4.7e-10 relative.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Norm {
    mantissa: u32,
    exponent: i32,
}

/// Leading zeros of a `u64` from two 32-bit counts (a 32-bit target counts
/// 64 bits no faster, and ARMv6-M counts in software).
#[inline]
pub(crate) fn lz64(v: u64) -> u32 {
    let hi = (v >> 32) as u32;
    if hi != 0 {
        hi.leading_zeros()
    } else {
        32 + (v as u32).leading_zeros()
    }
}

/// `a · b` as a full 64-bit product: one UMULL where the core has it.
#[cfg(not(all(target_arch = "arm", not(target_has_atomic = "32"))))]
#[inline]
pub(crate) fn mul32(a: u32, b: u32) -> u64 {
    u64::from(a) * u64::from(b)
}

/// `a · b` on ARMv6-M (the Arm profile without `target_has_atomic = "32"`),
/// which multiplies only 32×32→32: see [`mul32_pieces`].
#[cfg(all(target_arch = "arm", not(target_has_atomic = "32")))]
#[inline]
pub(crate) fn mul32(a: u32, b: u32) -> u64 {
    mul32_pieces(a, b)
}

/// `a · b` as a full 64-bit product from four 16×16-bit products, for cores
/// without a 32×32→64 multiply (the compiler's 64×64 library call costs
/// several times this).
#[cfg(any(test, all(target_arch = "arm", not(target_has_atomic = "32"))))]
#[inline]
pub(crate) fn mul32_pieces(a: u32, b: u32) -> u64 {
    let (a1, a0) = (a >> 16, a & 0xFFFF);
    let (b1, b0) = (b >> 16, b & 0xFFFF);
    let lo = a0 * b0;
    let hi = a1 * b1;
    // The two cross products: each < 2^32, their sum may carry into bit 32.
    let (mid, carry) = (a1 * b0).overflowing_add(a0 * b1);
    let lo64 = u64::from(lo) + (u64::from(mid) << 16);
    lo64 + (u64::from(hi) << 32) + (u64::from(carry) << 48)
}

/// `a · b` for signed operands, as a full 64-bit product.
#[inline]
pub(crate) fn mul32s(a: i32, b: i32) -> i64 {
    let p = mul32(a.unsigned_abs(), b.unsigned_abs()) as i64;
    // |a·b| ≤ 2^62, so the magnitude fits an i64 and its negation too.
    if (a < 0) != (b < 0) {
        -p
    } else {
        p
    }
}

/// `(hi·2^32 + lo) / d` for `hi < d` and `d ≥ 2^31` (a normalised divisor),
/// so the quotient fits 32 bits; rounded down. Returns `u32::MAX` if the
/// preconditions are broken. Two 32÷16-bit digit steps where the core
/// divides ([`div64_32_digits`]); on ARMv6-M, which does not, 32 steps of
/// shift and subtract ([`div64_32_bits`]) — no library division routine
/// (400 bytes of a field tester's flash) and fewer instructions than it.
#[inline]
pub(crate) fn div64_32(hi: u32, lo: u32, d: u32) -> u32 {
    if d < (1 << 31) || hi >= d {
        return u32::MAX;
    }
    #[cfg(all(target_arch = "arm", not(target_has_atomic = "32")))]
    {
        div64_32_bits(hi, lo, d)
    }
    #[cfg(not(all(target_arch = "arm", not(target_has_atomic = "32"))))]
    {
        div64_32_digits(hi, lo, d)
    }
}

/// [`div64_32`] bit by bit: the remainder stays below `d`, so after each
/// left shift it is below 2^33, and one compare decides the quotient bit.
#[cfg(any(test, all(target_arch = "arm", not(target_has_atomic = "32"))))]
#[inline]
pub(crate) fn div64_32_bits(hi: u32, lo: u32, d: u32) -> u32 {
    let (mut r, mut l, mut q) = (hi, lo, 0u32);
    for _ in 0..32 {
        let carry = r >> 31;
        r = (r << 1) | (l >> 31);
        l <<= 1;
        q <<= 1;
        // With the carry the true remainder is r + 2^32 ≥ d: subtract (wrapping gives it).
        if carry != 0 || r >= d {
            r = r.wrapping_sub(d);
            q |= 1;
        }
    }
    q
}

/// [`div64_32`] in two 16-bit quotient digits (Knuth's algorithm D as in
/// Warren, *Hacker's Delight*, `divlu`), each a 32-bit division (one UDIV on
/// Cortex-M3) and at most two corrections.
#[cfg(any(test, not(all(target_arch = "arm", not(target_has_atomic = "32")))))]
#[inline]
pub(crate) fn div64_32_digits(hi: u32, lo: u32, d: u32) -> u32 {
    if d < (1 << 31) || hi >= d {
        return u32::MAX;
    }
    let (d1, d0) = (d >> 16, d & 0xFFFF);
    let (n1, n0) = (lo >> 16, lo & 0xFFFF);
    // One 16-bit quotient digit of (top·2^16 + next)/d, top < d: an estimate
    // from the divisor's high half, corrected (at most twice) downwards.
    let digit = |top: u32, next: u32| -> (u32, u32) {
        let mut q = top / d1;
        let mut r = top - q * d1;
        while q > 0xFFFF || (r <= 0xFFFF && q * d0 > (r << 16) + next) {
            q -= 1;
            r += d1;
            if r > 0xFFFF && q <= 0xFFFF {
                break;
            }
        }
        // top·2^16 + next − q·d, computed modulo 2^32: the true value is < d.
        let rem = (top << 16).wrapping_add(next).wrapping_sub(q.wrapping_mul(d));
        (q, rem)
    };
    let (q1, r1) = digit(hi, n1);
    let (q0, _) = digit(r1, n0);
    (q1 << 16) | q0
}

impl Norm {
    /// Zero.
    pub const ZERO: Norm = Norm { mantissa: 0, exponent: 0 };

    /// From a raw mantissa and exponent (normalised here).
    #[must_use]
    pub fn new(mantissa: u64, exponent: i32) -> Norm {
        if mantissa == 0 {
            return Norm::ZERO;
        }
        // Shift the top set bit to bit 31: right by (32 − lz) when above, left otherwise.
        let lz = lz64(mantissa) as i32;
        let shift = 32 - lz; // > 0: shift right; ≤ 0: shift left
        if shift > 0 {
            Norm { mantissa: (mantissa >> shift) as u32, exponent: exponent.saturating_add(shift) }
        } else {
            Norm { mantissa: (mantissa << (-shift)) as u32, exponent: exponent.saturating_add(shift) }
        }
    }

    /// From a raw 32-bit mantissa and an exponent, exactly as given (for
    /// values read back from storage; [`Norm::new`] normalises them first).
    #[must_use]
    pub fn from_parts(mantissa: u32, exponent: i32) -> Norm {
        Norm::new(u64::from(mantissa), exponent)
    }

    /// The mantissa, in `[2^31, 2^32)` or zero.
    #[must_use]
    pub const fn mantissa(self) -> u32 {
        self.mantissa
    }

    /// The binary exponent.
    #[must_use]
    pub const fn exponent(self) -> i32 {
        self.exponent
    }

    /// Whether the value is zero.
    #[must_use]
    pub const fn is_zero(self) -> bool {
        self.mantissa == 0
    }

    /// The quotient `self / other` (relative error below 2^-31); zero divided
    /// by anything is zero, and a division by zero gives `None`.
    #[must_use]
    pub fn checked_div(self, other: Norm) -> Option<Norm> {
        if other.mantissa == 0 {
            return None;
        }
        if self.mantissa == 0 {
            return Some(Norm::ZERO);
        }
        // Both mantissas in [2^31, 2^32): (a·2^32)/b lies in (2^31, 2^33); take
        // a·2^31 instead when a ≥ b so the quotient fits 32 bits with its top bit set.
        let (num, shift) = if self.mantissa >= other.mantissa {
            (u64::from(self.mantissa) << 31, 31)
        } else {
            (u64::from(self.mantissa) << 32, 32)
        };
        let q = div64_32((num >> 32) as u32, num as u32, other.mantissa);
        Some(Norm::new(u64::from(q), self.exponent.saturating_sub(other.exponent).saturating_sub(shift)))
    }

    /// The value as an integer, rounded to nearest; `None` above `u64::MAX`.
    #[must_use]
    pub fn round(self) -> Option<u64> {
        if self.mantissa == 0 {
            return Some(0);
        }
        let m = u64::from(self.mantissa);
        match self.exponent {
            e if e >= 0 => {
                if e > 32 {
                    None
                } else {
                    Some(m << e)
                }
            }
            e if e < -32 => Some(0),
            e => {
                let s = (-e) as u32;
                Some((m + (1 << (s - 1))) >> s)
            }
        }
    }

    /// The value scaled by 2^`frac_bits` and truncated, as a `u64`; `None`
    /// when it does not fit.
    #[must_use]
    pub fn to_fixed(self, frac_bits: u32) -> Option<u64> {
        if self.mantissa == 0 {
            return Some(0);
        }
        let e = i64::from(self.exponent) + i64::from(frac_bits);
        let m = u64::from(self.mantissa);
        if e >= 0 {
            if e > 32 {
                None
            } else {
                Some(m << e)
            }
        } else if e <= -64 {
            Some(0)
        } else {
            Some(m >> (-e))
        }
    }
}

/// The value as `f64` (exact: 32 mantissa bits fit in 53). Tests only: on
/// the chip this would link soft float.
/// The product (relative error below 2^-31).
impl core::ops::Mul for Norm {
    type Output = Norm;

    fn mul(self, other: Norm) -> Norm {
        // Exponents are bounded by the domain (|e| < 200), so the sum cannot saturate there.
        Norm::new(mul32(self.mantissa, other.mantissa), self.exponent.saturating_add(other.exponent))
    }
}

#[cfg(test)]
pub(crate) fn to_f64(n: Norm) -> f64 {
    f64::from(n.mantissa()) * 2f64.powi(n.exponent())
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn normalises_and_rounds() {
        assert_eq!(Norm::new(1, 0).mantissa(), 1 << 31);
        assert_eq!(Norm::new(1, 0).exponent(), -31);
        assert_eq!(Norm::new(1, 0).round(), Some(1));
        assert_eq!(Norm::new(3, -1).round(), Some(2)); // 1.5 rounds up
        assert_eq!(Norm::new(u64::MAX, 0).exponent(), 32);
        assert_eq!(Norm::new(u64::MAX, 40).round(), None);
        assert_eq!(Norm::ZERO.checked_div(Norm::new(5, 0)), Some(Norm::ZERO));
        assert_eq!(Norm::new(5, 0).checked_div(Norm::ZERO), None);
        assert_eq!(Norm::new(7, 3).to_fixed(2), Some(7 << 5));
    }

    #[test]
    fn division_and_products_at_their_edges() {
        for d in [1u32 << 31, (1 << 31) + 1, 0xFFFF_0000, 0xFFFF_FFFF, 0x8000_FFFF] {
            for hi in [0, 1, d >> 1, d - 1] {
                for lo in [0, 1, 0xFFFF, 0xFFFF_0000, u32::MAX] {
                    let n = (u64::from(hi) << 32) | u64::from(lo);
                    assert_eq!(u64::from(div64_32(hi, lo, d)), n / u64::from(d), "{n:#x}/{d:#x}");
                    assert_eq!(u64::from(div64_32_bits(hi, lo, d)), n / u64::from(d), "bits {n:#x}/{d:#x}");
                }
            }
        }
        assert_eq!(div64_32(5, 0, 5), u32::MAX);
        assert_eq!(div64_32(0, 5, 3), u32::MAX);
        for (a, b) in [(u32::MAX, u32::MAX), (0xFFFF, 0x1_0000), (0x8000_8000, 0xFFFF_FFFF), (0, u32::MAX)] {
            assert_eq!(mul32_pieces(a, b), u64::from(a) * u64::from(b));
        }
        assert_eq!(mul32s(i32::MIN, i32::MIN), 1 << 62);
        assert_eq!(mul32s(i32::MIN, i32::MAX), i64::from(i32::MIN) * i64::from(i32::MAX));
    }

    proptest! {
        /// Invariant: the 64÷32 division equals the compiler's 64-bit one.
        #[test]
        fn div64_32_is_exact(d in (1u32 << 31).., hi_frac in 0u32.., lo in 0u32..) {
            let hi = ((u64::from(hi_frac) * u64::from(d)) >> 32) as u32; // < d
            let n = (u64::from(hi) << 32) | u64::from(lo);
            prop_assert_eq!(u64::from(div64_32(hi, lo, d)), n / u64::from(d));
            prop_assert_eq!(u64::from(div64_32_bits(hi, lo, d)), n / u64::from(d));
            prop_assert_eq!(u64::from(div64_32_digits(hi, lo, d)), n / u64::from(d));
        }

        /// Invariant: both products equal the compiler's.
        #[test]
        fn products_are_exact(a in 0u32.., b in 0u32.., sa in any::<i32>(), sb in any::<i32>()) {
            prop_assert_eq!(mul32(a, b), u64::from(a) * u64::from(b));
            prop_assert_eq!(mul32_pieces(a, b), u64::from(a) * u64::from(b));
            prop_assert_eq!(mul32s(sa, sb), i64::from(sa) * i64::from(sb));
        }

        /// Invariant: products and quotients keep 2^-31 relative precision.
        #[test]
        fn products_and_quotients_keep_relative_precision(a in 1u64.., b in 1u64.., ea in -80i32..80, eb in -80i32..80) {
            let (x, y) = (Norm::new(a, ea), Norm::new(b, eb));
            let (xf, yf) = (a as f64 * 2f64.powi(ea), b as f64 * 2f64.powi(eb));
            // Normalising a 64-bit value truncates (2^-31); each operation adds at most one more.
            let tol = 3.0 * 2f64.powi(-31);
            prop_assert!((to_f64(x * y) / (xf * yf) - 1.0).abs() < tol);
            let q = x.checked_div(y).map_or(0.0, to_f64);
            prop_assert!((q / (xf / yf) - 1.0).abs() < tol);
        }
    }
}
