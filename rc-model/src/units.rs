//! High-resolution result types: a duration and a voltage with 32 fractional bits.

use crate::error::{Error, Quantity};
use crate::fixed::mul_div;
use crate::stage::check_clock;

/// A duration in ns with 32 fractional bits (Q32), non-negative.
///
/// Produced by the model; at most 2^64 ns, so [`Span::ns`] is exact.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Span {
    ns_q32: u128,
}

const NS_PER_S: u128 = 1_000_000_000;

impl Span {
    /// Zero duration.
    pub const ZERO: Span = Span { ns_q32: 0 };

    /// From a Q32 ns value. `None` above 2^64 ns.
    #[must_use]
    pub const fn from_ns_q32(ns_q32: u128) -> Option<Span> {
        if ns_q32 >> 96 != 0 {
            None
        } else {
            Some(Span { ns_q32 })
        }
    }

    /// From whole nanoseconds (exact).
    #[must_use]
    pub const fn from_ns(ns: u64) -> Span {
        Span { ns_q32: (ns as u128) << 32 }
    }

    /// From timer ticks at `clock_hz` (exact to 2^-32 ns, rounded down).
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] for a clock outside 1 kHz – 200 MHz.
    pub fn from_ticks(ticks: u64, clock_hz: u32) -> Result<Span, Error> {
        check_clock(clock_hz)?;
        // ticks < 2^64, × 1e9·2^32 < 2^62 → product < 2^126, no overflow.
        let q = mul_div(u128::from(ticks), NS_PER_S << 32, u128::from(clock_hz)).ok_or(Error::Arithmetic)?;
        Span::from_ns_q32(q).ok_or(Error::OutOfDomain(Quantity::Hold))
    }

    /// The value in ns × 2^32.
    #[must_use]
    pub const fn ns_q32(self) -> u128 {
        self.ns_q32
    }

    /// Whole nanoseconds, rounded to nearest.
    #[must_use]
    pub const fn ns(self) -> u64 {
        // ns_q32 < 2^96 → (ns_q32 + 2^31) >> 32 < 2^64 + 1; the +2^31 can only
        // carry past 2^64 when ns_q32 ≥ 2^96 − 2^31, excluded by construction.
        let v = (self.ns_q32 + (1 << 31)) >> 32;
        if v > u64::MAX as u128 {
            u64::MAX
        } else {
            v as u64
        }
    }

    /// Timer ticks at `clock_hz`, rounded to nearest.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] for a clock outside 1 kHz – 200 MHz.
    pub fn ticks(self, clock_hz: u32) -> Result<u64, Error> {
        check_clock(clock_hz)?;
        let half = NS_PER_S << 31;
        // ns_q32 < 2^96, clock < 2^28: product < 2^124.
        let t = (self.ns_q32 * u128::from(clock_hz) + half) / (NS_PER_S << 32);
        u64::try_from(t).map_err(|_| Error::Arithmetic)
    }

    /// Sum of two spans. `None` if above 2^64 ns.
    #[must_use]
    pub const fn checked_add(self, other: Span) -> Option<Span> {
        Span::from_ns_q32(self.ns_q32 + other.ns_q32)
    }

    /// Difference of two spans, `None` if negative.
    #[must_use]
    pub const fn checked_sub(self, other: Span) -> Option<Span> {
        if other.ns_q32 > self.ns_q32 {
            None
        } else {
            Some(Span { ns_q32: self.ns_q32 - other.ns_q32 })
        }
    }
}

/// A voltage in µV with 32 fractional bits (Q32).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Voltage {
    uv_q32: i128,
}

impl Voltage {
    /// From a Q32 µV value.
    #[must_use]
    pub const fn from_uv_q32(uv_q32: i128) -> Voltage {
        Voltage { uv_q32 }
    }

    /// From whole µV (exact).
    #[must_use]
    pub const fn from_uv(uv: i64) -> Voltage {
        Voltage { uv_q32: (uv as i128) << 32 }
    }

    /// The value in µV × 2^32.
    #[must_use]
    pub const fn uv_q32(self) -> i128 {
        self.uv_q32
    }

    /// Whole µV, rounded to nearest (ties toward +∞).
    #[must_use]
    pub const fn uv(self) -> i64 {
        // |uv_q32| < 2^57 in the domain; the shift keeps it far inside i64.
        ((self.uv_q32 + (1 << 31)) >> 32) as i64
    }
}
