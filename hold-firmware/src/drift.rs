//! Drift tracking in integers: a commissioning baseline, an EWMA chart and a
//! two-sided tabular CUSUM (NIST/SEMATECH e-Handbook §6.3.2.4 and §6.3.2.3
//! formulas), an absolute end-of-life limit, a least-squares trend over the
//! history and a forecast of the periods left before the limit.
//!
//! Samples are integers in any unit (the engine feeds the capacitance
//! deviation in ppm); every figure below is in the same unit. The EWMA is
//! kept in Q16 of that unit. Overflow: samples are `i32`; sums of up to 2^16
//! samples and their squares are formed in `i128`.

use heapless::HistoryBuf;
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

/// The capacitance deviation from nominal, in ppm, that a hold measured at
/// junction temperature `temp_mdeg_c` implies, referred to the reference
/// temperature: the stage is moved to that temperature through the spread's
/// coefficients, the hold is inverted there, and the deviation is taken
/// against the capacitance the part should have at that temperature.
///
/// # Errors
/// The model's errors (out-of-domain values, ill-conditioned inverse).
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

/// Integer square root (floor) of a `u128`, by Newton's method.
#[must_use]
pub fn isqrt(n: u128) -> u128 {
    if n < 2 {
        return n;
    }
    let mut x = 1u128 << ((128 - n.leading_zeros()).div_ceil(2));
    loop {
        let y = (x + n / x) / 2;
        if y >= x {
            return x;
        }
        x = y;
    }
}

/// The tracker, with a history of `N` samples.
#[derive(Debug, Clone)]
pub struct DriftTracker<const N: usize> {
    config: DriftConfig,
    history: HistoryBuf<Entry, N>,
    periods: u32,
    base_n: u16,
    base_sum: i128,
    base_sq: i128,
    center: i64,
    sigma: i64,
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
    /// A tracker with no samples.
    #[must_use]
    pub fn new(config: DriftConfig) -> Self {
        DriftTracker {
            config,
            history: HistoryBuf::new(),
            periods: 0,
            base_n: 0,
            base_sum: 0,
            base_sq: 0,
            center: 0,
            sigma: i64::from(config.sigma.unwrap_or(0)),
            ewma_q16: 0,
            s_hi: 0,
            s_lo: 0,
            state: DriftState::Settling,
        }
    }

    /// A tracker whose baseline is given (centre and σ), skipping commissioning.
    #[must_use]
    pub fn with_baseline(config: DriftConfig, center: i32, sigma: i32) -> Self {
        let mut t = Self::new(config);
        t.center = i64::from(center);
        t.sigma = i64::from(sigma);
        t.ewma_q16 = i64::from(center) << 16;
        t.base_n = config.baseline_count;
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

    /// Half-width of the EWMA limits: `L·σ·sqrt(λ/(2 − λ))`, sample units.
    #[must_use]
    pub fn ewma_half_width(&self) -> i64 {
        let l = u128::from(self.config.lambda_q16.min(65_536));
        // λ/(2 − λ) in Q32, its square root in Q16.
        let ratio_q32 = (l << 32) / ((2u128 << 16) - l);
        let root_q16 = isqrt(ratio_q32);
        let w = u128::from(self.config.l_milli) * self.sigma.unsigned_abs() as u128 * root_q16;
        i64::try_from((w + 500 * 65_536) / (1000 * 65_536)).unwrap_or(i64::MAX)
    }

    /// The history, oldest first.
    pub fn history(&self) -> impl Iterator<Item = &Entry> {
        self.history.oldest_ordered()
    }

    /// Adds one sample (one measurement period).
    pub fn update(&mut self, value: i32) -> Update {
        let period = self.periods;
        self.periods = self.periods.saturating_add(1);
        self.history.write(Entry { period, value });
        let before = self.state;
        let x = i64::from(value);
        if self.base_n < self.config.baseline_count.max(2) {
            self.base_n += 1;
            self.base_sum += i128::from(x);
            self.base_sq += i128::from(x) * i128::from(x);
            if self.base_n == self.config.baseline_count.max(2) {
                let n = i128::from(self.base_n);
                self.center = i64::try_from(self.base_sum / n).unwrap_or(0);
                if self.config.sigma.is_none() {
                    let var = (self.base_sq * n - self.base_sum * self.base_sum) / (n * (n - 1));
                    self.sigma = i64::try_from(isqrt(var.unsigned_abs())).unwrap_or(i64::MAX);
                }
                self.ewma_q16 = self.center << 16;
                self.state = DriftState::Steady;
            }
            return Update { state: self.state, ewma_q16: self.ewma_q16, cusum: (0, 0), changed: self.state != before };
        }
        self.feed(x);
        let half = self.ewma_half_width();
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
        // z = λ·x + (1 − λ)·z in Q16, rounded to nearest.
        let acc = i128::from(l) * (i128::from(x) << 16) + i128::from(65_536 - l) * i128::from(self.ewma_q16);
        self.ewma_q16 = i64::try_from((acc + (1 << 15)) >> 16).unwrap_or(self.ewma_q16);
        let k = i64::from(self.config.cusum_k);
        self.s_hi = (self.s_hi + x - self.center - k).max(0);
        self.s_lo = (self.s_lo + self.center - k - x).max(0);
    }

    /// Runs the EWMA and CUSUM of a chart with a given centre over `x`
    /// (no baseline, no state): for reproducing worked examples.
    pub fn chart(config: DriftConfig, center: i32, sigma: i32, x: &[i32], mut each: impl FnMut(i64, i64, i64)) {
        let mut t = Self::with_baseline(config, center, sigma);
        for &v in x {
            t.feed(i64::from(v));
            each(t.ewma_q16, t.s_hi, t.s_lo);
        }
    }

    /// Least-squares slope of the history, in Q16 sample units per period
    /// (`None` with fewer than 3 samples).
    #[must_use]
    pub fn trend_q16(&self) -> Option<i64> {
        let n = i128::try_from(self.history.len()).ok()?;
        if n < 3 {
            return None;
        }
        let (mut sk, mut sv) = (0i128, 0i128);
        for e in self.history.oldest_ordered() {
            sk += i128::from(e.period);
            sv += i128::from(e.value);
        }
        let (mut skk, mut skv) = (0i128, 0i128);
        for e in self.history.oldest_ordered() {
            let dk = i128::from(e.period) * n - sk; // n·(k − k̄)
            let dv = i128::from(e.value) * n - sv; // n·(v − v̄)
            skk += dk * dk;
            skv += dk * dv;
        }
        if skk == 0 {
            return None;
        }
        i64::try_from((skv << 16) / skk).ok()
    }

    /// Periods from the latest sample until the fitted trend reaches the
    /// limit (`None` without a trend towards it).
    #[must_use]
    pub fn periods_to_limit(&self) -> Option<u32> {
        let slope = self.trend_q16()?;
        if slope >= 0 {
            return None;
        }
        let n = i128::try_from(self.history.len()).ok()?;
        let (mut sk, mut sv) = (0i128, 0i128);
        for e in self.history.oldest_ordered() {
            sk += i128::from(e.period);
            sv += i128::from(e.value);
        }
        let last = self.history.recent().map(|e| i128::from(e.period))?;
        // Fitted value at the latest period, Q16: v̄ + slope·(k_last − k̄).
        let fit_q16 = (sv << 16) / n + i128::from(slope) * (last * n - sk) / n;
        let gap_q16 = fit_q16 - (i128::from(self.config.limit) << 16);
        if gap_q16 <= 0 {
            return Some(0);
        }
        u32::try_from(gap_q16 / -i128::from(slope)).ok()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn isqrt_is_the_floor_square_root() {
        for n in [0u128, 1, 2, 3, 4, 15, 16, 17, 1 << 40, (1 << 64) - 1, u128::from(u64::MAX) * u128::from(u64::MAX)] {
            let r = isqrt(n);
            assert!(r * r <= n && (r + 1).checked_mul(r + 1).is_none_or(|s| s > n), "{n}: {r}");
        }
    }
}
