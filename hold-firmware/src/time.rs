//! Time: a free-running 32-bit tick counter and a stopwatch that survives its wrap.

/// A free-running tick counter (embedded-hal 1.0 has no time source).
///
/// The counter may wrap at 2^32; the engine reads it at least once per
/// [`crate::Config::poll_ns`], far more often than it wraps, and extends it
/// to 64 bits in a [`Stopwatch`].
pub trait TickSource {
    /// The counter now, in ticks.
    fn now(&mut self) -> u32;
    /// Ticks per second.
    fn clock_hz(&self) -> u32;
}

/// Elapsed ticks since a start, extended to 64 bits across counter wraps.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Stopwatch {
    last: u32,
    total: u64,
}

impl Stopwatch {
    /// Starts at counter value `now`.
    #[must_use]
    pub const fn start(now: u32) -> Stopwatch {
        Stopwatch { last: now, total: 0 }
    }

    /// Advances to counter value `now` and returns the ticks since the start.
    /// Correct as long as calls are less than 2^32 ticks apart.
    pub fn update(&mut self, now: u32) -> u64 {
        self.total = self.total.saturating_add(u64::from(now.wrapping_sub(self.last)));
        self.last = now;
        self.total
    }

    /// Ticks since the start at the last update.
    #[must_use]
    pub const fn elapsed(&self) -> u64 {
        self.total
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stopwatch_survives_the_counter_wrap() {
        let mut s = Stopwatch::start(u32::MAX - 10);
        assert_eq!(s.update(u32::MAX), 10);
        assert_eq!(s.update(5), 16);
        assert_eq!(s.update(3_000_000_000), 3_000_000_011);
        assert_eq!(s.update(100), 4_294_967_407); // a second wrap: 2^32 − 3e9 + 100 more
    }
}
