//! Drift tracking in integers: a commissioning baseline, an EWMA chart and a
//! two-sided tabular CUSUM (NIST/SEMATECH e-Handbook §6.3.2.4 and §6.3.2.3
//! formulas), an absolute end-of-life limit, a least-squares trend over the
//! history and a forecast of the periods left before the limit.
//!
//! Samples are integers in any unit (the engine feeds the capacitance
//! deviation in ppm); every figure below is in the same unit. The EWMA is
//! kept in Q16 of that unit.
//!
//! # Overflow, in 64-bit arithmetic only
//!
//! Samples are clamped to ±2^23 ([`SAMPLE_LIMIT`]: −100 % … +839 % as ppm),
//! the baseline to at most 256 samples and the history to at most 256
//! entries (a compile-time check). Then: baseline sums < 2^31 and sums of
//! squares < 2^54 (n·Σx² < 2^62, (Σx)² < 2^62); the EWMA step
//! λ·(x·2^16) + (1 − λ)·z < 2^56; the trend's centred sums
//! Σ(n·k − Σk)² < 2^40 and Σ(n·k − Σk)(n·v − Σv) < 2^57. σ is clamped to
//! 2^23 and L to 65.535, so the limit half-width L·σ·√(λ/(2−λ)) < 2^55.
//! Every update costs a fixed number of 64-bit operations: the square root
//! of the limits is taken once, when the baseline completes.

use rc_model::Norm;
use serde::{Deserialize, Serialize};

/// Settings of the tracker.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DriftConfig {
    /// Good measurements that form the baseline (at least 2).
    pub baseline_count: u16,
    /// EWMA weight λ in Q16 (0.3 → 19 661).
    pub lambda_q16: u32,
    /// EWMA limit width L × 1000 (3.0 → 3 000).
    pub l_milli: u32,
    /// Process σ in sample units; `None` estimates it from the baseline.
    pub sigma: Option<i32>,
    /// CUSUM reference value k, sample units.
    pub cusum_k: i32,
    /// CUSUM decision interval h, sample units.
    pub cusum_h: i32,
    /// End-of-life limit: a sample at or below it is beyond the limit
    /// (for capacitance loss, e.g. −200 000 ppm).
    pub limit: i32,
}

impl DriftConfig {
    /// Settings for a field unit that measures its stage once a day and
    /// tracks the capacitance deviation in ppm: a 20-day baseline, EWMA with
    /// λ = 0.2 and L = 3, CUSUM with k = 0.5 % and h = 5 %, end of life at
    /// −20 % (the demo's fleet and the emulated field unit use it).
    pub const FIELD_UNIT: DriftConfig = DriftConfig {
        baseline_count: 20,
        lambda_q16: 13_107,
        l_milli: 3_000,
        sigma: None,
        cusum_k: 5_000,
        cusum_h: 50_000,
        limit: -200_000,
    };
}

/// Where the stage stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DriftState {
    /// The baseline is still being collected.
    Settling,
    /// Nothing has moved.
    Steady,
    /// The EWMA left its limits or the CUSUM signalled.
    Drifting,
    /// The latest sample is at or beyond the end-of-life limit.
    BeyondLimit,
}

/// One tracked sample.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Entry {
    /// Measurement period number (0, 1, 2 …).
    pub period: u32,
    /// The sample.
    pub value: i32,
}

/// Largest sample magnitude the tracker keeps; larger ones are clamped.
pub const SAMPLE_LIMIT: i32 = (1 << 23) - 1;
/// Most baseline samples and history entries.
pub const MAX_COUNT: usize = 256;

/// The capacitance deviation from nominal, in ppm, that a hold measured at
/// junction temperature `temp_mdeg_c` implies, referred to the reference
/// temperature: the stage is moved to that temperature through the spread's
/// coefficients, the hold is inverted there, and the deviation is taken
/// against the capacitance the part should have at that temperature.
///
/// This runs the general solver (feature `solver`); the per-measurement path
/// is [`rc_model::Prepared::inverse_at`], which gives the same deviation for
/// a full press without it.
///
/// # Errors
/// The model's errors (out-of-domain values, ill-conditioned inverse).
#[cfg(feature = "solver")]
pub fn deviation_at(
    spread: &rc_model::window::Spread,
    nominal: &rc_model::Stage,
    temp_mdeg_c: i32,
    hold: rc_model::Span,
) -> Result<i32, rc_model::Error> {
    let at = spread.at_temperature(nominal, temp_mdeg_c)?;
    let inverse = rc_model::Model::new(&at)?.inverse_c(hold)?;
    i32::try_from(inverse.deviation_ppm()).map_err(|_| rc_model::Error::OutOfDomain(rc_model::Quantity::C))
}

/// Integer square root (floor) of a `u64`, digit by digit in base 4 (no
/// division, so no 64-bit division routine on the chip).
#[must_use]
pub fn isqrt(n: u64) -> u64 {
    let (mut rem, mut root) = (n, 0u64);
    let mut bit = 1u64 << 62;
    while bit > rem {
        bit >>= 2;
    }
    while bit != 0 {
        if rem >= root + bit {
            rem -= root + bit;
            root = (root >> 1) + bit;
        } else {
            root >>= 1;
        }
        bit >>= 2;
    }
    root
}

/// The last `N` samples of consecutive periods, oldest overwritten first;
/// the periods are not stored, they follow from the latest one. Written for
/// the chip: every access is checked (`get`), so no panic path reaches the
/// firmware (heapless' `HistoryBuf` indexes, and its bounds checks survive
/// on thumbv6m).
#[derive(Debug, Clone)]
struct Ring<const N: usize> {
    values: [i32; N],
    /// Index the next sample goes to.
    next: usize,
    len: usize,
    /// Period of the latest sample.
    last_period: u32,
}

impl<const N: usize> Ring<N> {
    const fn new() -> Self {
        Ring { values: [0; N], next: 0, len: 0, last_period: 0 }
    }

    fn write(&mut self, e: Entry) {
        if let Some(slot) = self.values.get_mut(self.next) {
            *slot = e.value;
        }
        self.next = if self.next + 1 >= N { 0 } else { self.next + 1 };
        self.len = (self.len + 1).min(N);
        self.last_period = e.period;
    }

    /// Oldest first.
    fn iter(&self) -> impl Iterator<Item = Entry> + '_ {
        let start = if self.len < N { 0 } else { self.next };
        let first = self.last_period.wrapping_sub(self.len.saturating_sub(1) as u32);
        (0..self.len).filter_map(move |i| {
            let at = if start + i >= N { start + i - N } else { start + i };
            self.values.get(at).map(|&value| Entry { period: first.wrapping_add(i as u32), value })
        })
    }

    fn recent(&self) -> Option<Entry> {
        (self.len > 0).then_some(())?;
        let at = if self.next == 0 { N.checked_sub(1)? } else { self.next - 1 };
        self.values.get(at).map(|&value| Entry { period: self.last_period, value })
    }
}

/// `n / d` rounded to nearest, from 32-bit mantissas (relative error below
/// 2^-30): the tracker's wide divisions without the 64-bit division routine,
/// which would cost the field tester a kilobyte of flash. `None` for `d = 0`
/// or a quotient beyond `i64`.
fn ratio(n: i64, d: i64) -> Option<i64> {
    let q = Norm::new(n.unsigned_abs(), 0).checked_div(Norm::new(d.unsigned_abs(), 0))?;
    let v = i64::try_from(q.round()?).ok()?;
    Some(if (n < 0) != (d < 0) { -v } else { v })
}

/// The tracker, with a history of `N` samples.
#[derive(Debug, Clone)]
pub struct DriftTracker<const N: usize> {
    config: DriftConfig,
    history: Ring<N>,
    periods: u32,
    base_n: u16,
    base_sum: i64,
    base_sq: i64,
    center: i64,
    sigma: i64,
    half_width: i64,
    ewma_q16: i64,
    s_hi: i64,
    s_lo: i64,
    state: DriftState,
}

/// What one update reports.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Update {
    /// State after the sample.
    pub state: DriftState,
    /// EWMA in Q16 of the sample unit.
    pub ewma_q16: i64,
    /// Upper and lower CUSUM sums.
    pub cusum: (i64, i64),
    /// Whether the state changed with this sample.
    pub changed: bool,
}

impl<const N: usize> DriftTracker<N> {
    /// A tracker with no samples. `N` is at most [`MAX_COUNT`] (checked when
    /// compiled); a baseline count above it counts as [`MAX_COUNT`].
    #[must_use]
    pub fn new(config: DriftConfig) -> Self {
        const { assert!(N <= MAX_COUNT, "a drift history holds at most MAX_COUNT entries") };
        let sigma = i64::from(config.sigma.unwrap_or(0).clamp(0, SAMPLE_LIMIT));
        let mut t = DriftTracker {
            config,
            history: Ring::new(),
            periods: 0,
            base_n: 0,
            base_sum: 0,
            base_sq: 0,
            center: 0,
            sigma,
            half_width: 0,
            ewma_q16: 0,
            s_hi: 0,
            s_lo: 0,
            state: DriftState::Settling,
        };
        t.half_width = t.ewma_half_width();
        t
    }

    /// Baseline samples needed: the configured count within 2 … [`MAX_COUNT`].
    fn baseline_needed(&self) -> u16 {
        self.config.baseline_count.clamp(2, MAX_COUNT as u16)
    }

    /// A tracker whose baseline is given (centre and σ), skipping commissioning.
    #[must_use]
    pub fn with_baseline(config: DriftConfig, center: i32, sigma: i32) -> Self {
        let mut t = Self::new(config);
        t.center = i64::from(center.clamp(-SAMPLE_LIMIT, SAMPLE_LIMIT));
        t.sigma = i64::from(sigma.clamp(0, SAMPLE_LIMIT));
        t.half_width = t.ewma_half_width();
        t.ewma_q16 = t.center << 16;
        t.base_n = t.baseline_needed();
        t.state = DriftState::Steady;
        t
    }

    /// The state.
    #[must_use]
    pub const fn state(&self) -> DriftState {
        self.state
    }

    /// Baseline centre and σ (sample units).
    #[must_use]
    pub const fn baseline(&self) -> (i64, i64) {
        (self.center, self.sigma)
    }

    /// Half-width of the EWMA limits: `L·σ·sqrt(λ/(2 − λ))`, sample units
    /// (L clamped to 65.535, σ to [`SAMPLE_LIMIT`]).
    #[must_use]
    pub fn ewma_half_width(&self) -> i64 {
        let l = i64::from(self.config.lambda_q16.min(65_536));
        // λ/(2 − λ) in Q32 (< 2^33), its square root in Q16 (< 2^17).
        let ratio_q32 = ratio(l << 32, (2 << 16) - l).unwrap_or(0);
        let root_q16 = isqrt(ratio_q32.unsigned_abs());
        let l_milli = u64::from(self.config.l_milli.min(65_535));
        // < 2^16 · 2^23 · 2^17 = 2^56.
        let w = l_milli * self.sigma.unsigned_abs() * root_q16;
        ratio(i64::try_from(w).unwrap_or(i64::MAX), 1000 * 65_536).unwrap_or(i64::MAX)
    }

    /// The history, oldest first.
    pub fn history(&self) -> impl Iterator<Item = Entry> + '_ {
        self.history.iter()
    }

    /// Adds one sample (one measurement period), clamped to ±[`SAMPLE_LIMIT`].
    pub fn update(&mut self, value: i32) -> Update {
        let value = value.clamp(-SAMPLE_LIMIT, SAMPLE_LIMIT);
        let period = self.periods;
        self.periods = self.periods.saturating_add(1);
        self.history.write(Entry { period, value });
        let before = self.state;
        let x = i64::from(value);
        let needed = self.baseline_needed();
        if self.base_n < needed {
            self.base_n += 1;
            self.base_sum += x;
            self.base_sq += x * x;
            if self.base_n == needed {
                // n ≥ 2 (baseline_needed); the checked forms keep that off the chip's panic paths.
                // Truncated toward zero, as an integer division would (the
                // Norm quotient is exact to far below one sample unit here:
                // |Σx| < 2^31, so 2^-30 of the mean is below 1/256).
                let n = i64::from(self.base_n);
                self.center = {
                    let q = ratio(self.base_sum, n).unwrap_or(0);
                    if q * n > self.base_sum && q > 0 {
                        q - 1
                    } else if q * n < self.base_sum && q < 0 {
                        q + 1
                    } else {
                        q
                    }
                };
                if self.config.sigma.is_none() {
                    let var = ratio(self.base_sq * n - self.base_sum * self.base_sum, n * (n - 1)).unwrap_or(0);
                    let sd = i64::try_from(isqrt(var.unsigned_abs())).unwrap_or(i64::MAX);
                    self.sigma = sd.min(i64::from(SAMPLE_LIMIT));
                }
                self.half_width = self.ewma_half_width();
                self.ewma_q16 = self.center << 16;
                self.state = DriftState::Steady;
                // The baseline's completion is a state change like any other.
                #[cfg(feature = "defmt")]
                defmt::info!("drift state {} → {}", before, self.state);
            }
            return Update { state: self.state, ewma_q16: self.ewma_q16, cusum: (0, 0), changed: self.state != before };
        }
        self.feed(x);
        let half = self.half_width;
        let z = self.ewma_q16 >> 16;
        let drifting = z > self.center + half
            || z < self.center - half
            || self.s_hi > i64::from(self.config.cusum_h)
            || self.s_lo > i64::from(self.config.cusum_h);
        self.state = if x <= i64::from(self.config.limit) {
            DriftState::BeyondLimit
        } else if drifting || self.state == DriftState::Drifting {
            DriftState::Drifting
        } else {
            DriftState::Steady
        };
        let changed = self.state != before;
        #[cfg(feature = "defmt")]
        if changed {
            defmt::info!("drift state {} → {}", before, self.state);
        }
        Update { state: self.state, ewma_q16: self.ewma_q16, cusum: (self.s_hi, self.s_lo), changed }
    }

    /// The chart arithmetic of one sample (EWMA with rounding, CUSUM exact).
    fn feed(&mut self, x: i64) {
        let l = i64::from(self.config.lambda_q16.min(65_536));
        // z = λ·x + (1 − λ)·z in Q16, rounded to nearest; < 2^56 (module docs).
        let acc = l * (x << 16) + (65_536 - l) * self.ewma_q16;
        self.ewma_q16 = (acc + (1 << 15)) >> 16;
        let k = i64::from(self.config.cusum_k);
        self.s_hi = self.s_hi.saturating_add(x - self.center - k).max(0);
        self.s_lo = self.s_lo.saturating_add(self.center - k - x).max(0);
    }

    /// Runs the EWMA and CUSUM of a chart with a given centre over `x`
    /// (no baseline, no state): for reproducing worked examples.
    pub fn chart(config: DriftConfig, center: i32, sigma: i32, x: &[i32], mut each: impl FnMut(i64, i64, i64)) {
        let mut t = Self::with_baseline(config, center, sigma);
        for &v in x {
            t.feed(i64::from(v.clamp(-SAMPLE_LIMIT, SAMPLE_LIMIT)));
            each(t.ewma_q16, t.s_hi, t.s_lo);
        }
    }

    /// The history's centred sums for least squares: `(n, Σk, Σv, Σ(n·k − Σk)²,
    /// Σ(n·k − Σk)(n·v − Σv))` with `k` the period counted from the oldest
    /// entry (consecutive periods, so `k < N`). Bounds in the module docs.
    fn sums(&self) -> Option<(i64, i64, i64, i64, i64)> {
        let n = i64::try_from(self.history.len).ok()?;
        let first = self.history.iter().next()?.period;
        let rel = |e: &Entry| i64::from(e.period.wrapping_sub(first));
        let (mut sk, mut sv) = (0i64, 0i64);
        for e in self.history.iter() {
            sk += rel(&e);
            sv += i64::from(e.value);
        }
        let (mut skk, mut skv) = (0i64, 0i64);
        for e in self.history.iter() {
            let dk = rel(&e) * n - sk; // n·(k − k̄)
            let dv = i64::from(e.value) * n - sv; // n·(v − v̄)
            skk += dk * dk;
            skv += dk * dv;
        }
        Some((n, sk, sv, skk, skv))
    }

    /// Least-squares slope of the history, in Q16 sample units per period
    /// (`None` with fewer than 3 samples).
    #[must_use]
    pub fn trend_q16(&self) -> Option<i64> {
        let (n, _, _, skk, skv) = self.sums()?;
        if n < 3 {
            return None;
        }
        // (skv·2^16)/skk without a 2^73 intermediate: the Norm quotient carries the 2^16.
        let q = Norm::new(skv.unsigned_abs(), 16).checked_div(Norm::new(skk.unsigned_abs(), 0))?;
        let v = i64::try_from(q.round()?).ok()?;
        Some(if (skv < 0) != (skk < 0) { -v } else { v })
    }

    /// Periods from the latest sample until the fitted trend reaches the
    /// limit (`None` without a trend towards it).
    #[must_use]
    pub fn periods_to_limit(&self) -> Option<u32> {
        let slope = self.trend_q16()?;
        if slope >= 0 {
            return None;
        }
        let (n, sk, sv, _, _) = self.sums()?;
        let first = self.history.iter().next()?.period;
        let last = i64::from(self.history.recent()?.period.wrapping_sub(first));
        // Fitted value at the latest period, Q16: v̄ + slope·(k_last − k̄).
        let fit_q16 = ratio(sv << 16, n)? + ratio(slope.checked_mul(last * n - sk)?, n)?;
        let gap_q16 = fit_q16 - (i64::from(self.config.limit.clamp(-SAMPLE_LIMIT, SAMPLE_LIMIT)) << 16);
        if gap_q16 <= 0 {
            return Some(0);
        }
        // Whole periods, rounded down like the division it replaces.
        let periods = ratio(gap_q16, slope.checked_neg()?)?;
        let periods = if periods.checked_mul(-slope)? > gap_q16 { periods - 1 } else { periods };
        u32::try_from(periods).ok()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_ring_keeps_the_last_n_oldest_first() {
        let mut r: Ring<3> = Ring::new();
        assert!(r.recent().is_none() && r.iter().next().is_none());
        r.write(Entry { period: 7, value: 70 });
        assert_eq!(r.recent(), Some(Entry { period: 7, value: 70 }));
        for v in 8..12 {
            r.write(Entry { period: v as u32, value: v * 10 });
        }
        let kept: heapless::Vec<Entry, 3> = r.iter().collect();
        let want = [Entry { period: 9, value: 90 }, Entry { period: 10, value: 100 }, Entry { period: 11, value: 110 }];
        assert_eq!(kept.as_slice(), &want);
        assert_eq!(r.recent(), Some(Entry { period: 11, value: 110 }));
    }

    #[test]
    fn isqrt_is_the_floor_square_root() {
        for n in [0u64, 1, 2, 3, 4, 15, 16, 17, 1 << 40, (1 << 62) - 1, u64::MAX] {
            let r = isqrt(n);
            assert!(r * r <= n && (r + 1).checked_mul(r + 1).is_none_or(|s| s > n), "{n}: {r}");
        }
    }

    proptest::proptest! {
        /// Invariant: the square root is the floor of the real one.
        #[test]
        fn isqrt_is_the_floor_for_any_input(n in proptest::prelude::any::<u64>()) {
            let r = isqrt(n);
            proptest::prop_assert!(r * r <= n && (r + 1).checked_mul(r + 1).is_none_or(|s| s > n));
        }

        /// Invariant: the wide division rounds to the nearest integer (within
        /// its 2^-30 relative precision).
        #[test]
        fn ratio_rounds_the_quotient(n in -(1i64 << 62)..(1i64 << 62), d in 1i64..(1i64 << 40)) {
            let exact = n as f64 / d as f64;
            let got = ratio(n, d).unwrap_or(i64::MIN) as f64;
            proptest::prop_assert!((got - exact).abs() <= 0.5 + exact.abs() * 2f64.powi(-30), "{} / {}: {}", n, d, got);
        }
    }

    fn config() -> DriftConfig {
        DriftConfig {
            baseline_count: 256,
            lambda_q16: 65_536,
            l_milli: u32::MAX,
            sigma: None,
            cusum_k: 0,
            cusum_h: i32::MAX,
            limit: i32::MIN,
        }
    }

    /// Overflow bounds of the module docs, at their edges: the largest
    /// samples, alternating, through a full baseline and a full history, in
    /// a build with overflow checks (tests run with them on).
    #[test]
    fn extreme_samples_never_overflow() {
        let mut t: DriftTracker<256> = DriftTracker::new(config());
        for i in 0..2_000 {
            let v = if i % 2 == 0 { i32::MAX } else { i32::MIN };
            let u = t.update(v);
            assert!(u.ewma_q16.abs() <= i64::from(SAMPLE_LIMIT) << 16);
        }
        assert!(t.ewma_half_width() > 0);
        let _ = t.trend_q16();
        let _ = t.periods_to_limit();
        let mut falling: DriftTracker<256> = DriftTracker::new(DriftConfig { limit: -SAMPLE_LIMIT, ..config() });
        for i in 0..600 {
            falling.update(SAMPLE_LIMIT - i * 30_000);
        }
        assert!(falling.trend_q16().is_some_and(|s| s < 0));
        assert!(falling.periods_to_limit().is_some());
    }
}
