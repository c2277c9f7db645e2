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

/// Leading zeros of a non-zero `u64` (thumbv6m has no CLZ instruction; this
/// is a short binary search the compiler keeps inline).
#[inline]
pub(crate) fn lz64(v: u64) -> u32 {
    v.leading_zeros()
}

/// `a · b` as a full 64-bit product (a single UMULL on Cortex-M3).
#[inline]
pub(crate) fn mul32(a: u32, b: u32) -> u64 {
    u64::from(a) * u64::from(b)
}

/// `(n / d)` for a quotient known to fit in 32 bits (`n < d · 2^32`), rounded down.
/// Returns `u32::MAX` rather than wrapping if that precondition is broken.
#[inline]
pub(crate) fn div64_32(n: u64, d: u32) -> u32 {
    if d == 0 {
        return u32::MAX;
    }
    u32::try_from(n / u64::from(d)).unwrap_or(u32::MAX)
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
        let q = div64_32(num, other.mantissa);
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

    proptest! {
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
