//! Summaries kept beside the records: what `yield` and `aging` need, in
//! exact integer sums, so that a report reads a few summary rows instead of
//! every record, and summaries of any split of the records merge to the
//! same bits whatever the order (no floating-point sum depends on it).
//!
//! - [`Cell`]: one (station, batch, UTC day, setup, clock) group of records —
//!   counts per verdict, the hold's count, sum and sum of squares in ticks
//!   (`u128`), its histogram against the setup's window, first and last time.
//! - [`UnitSums`]: one field unit's capacitance series as least-squares sums
//!   of time (ms since the epoch) and deviation (ppm), both integers (`i128`),
//!   and its last point.
//!
//! Both are written to the store as little-endian blobs ([`Cell::to_blob`],
//! [`UnitSums::to_blob`]) whose first byte is a format version.
//!
//! Overflow: a hold is at most [`MAX_SUM_TICKS`] ticks (the log parser's and
//! the frame decoder's limit is lower); `u128` sums of squares of such holds
//! hold 2^128 / 2^96 = 2^32 records per cell before saturating, and a
//! saturated sum marks its moments unknown rather than wrong. Times below
//! 2^43 ms (year 2248) and deviations below 2^31 ppm give `i128` sums with
//! room for 2^40 points per unit.

use hold_firmware::drift::DriftState;
use hold_firmware::record::Record;
use hold_firmware::Hint;

use crate::data::codes;
use crate::report::stats::Moments;

/// Bins of a hold histogram (over the window widened by half its width on each side).
pub const BINS: usize = 60;

/// Largest hold, ticks, whose square the sums take (2^48: 78 hours at 1 GHz).
pub const MAX_SUM_TICKS: u64 = 1 << 48;

/// The milliseconds of a UTC day.
pub const DAY_MS: i64 = 86_400_000;

/// The UTC day (days since 1970-01-01) of a time in ms since the epoch.
#[must_use]
pub const fn day_of(ms: i64) -> i64 {
    ms.div_euclid(DAY_MS)
}

/// Count, sum and sum of squares of holds, ticks, exact.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct HoldSums {
    /// Holds.
    pub n: u64,
    /// Sum, ticks.
    pub sum: u128,
    /// Sum of squares, ticks².
    pub sum_sq: u128,
    /// A hold above [`MAX_SUM_TICKS`] or a sum that would overflow was met:
    /// mean and spread are unknown.
    pub saturated: bool,
}

impl HoldSums {
    /// Adds a hold, ticks.
    pub fn add(&mut self, ticks: u64) {
        self.n += 1;
        if ticks > MAX_SUM_TICKS {
            self.saturated = true;
            return;
        }
        let t = u128::from(ticks);
        match (self.sum.checked_add(t), self.sum_sq.checked_add(t * t)) {
            (Some(s), Some(q)) => (self.sum, self.sum_sq) = (s, q),
            _ => self.saturated = true,
        }
    }

    /// Adds another group's sums.
    pub fn merge(&mut self, o: &HoldSums) {
        self.n += o.n;
        self.saturated |= o.saturated;
        match (self.sum.checked_add(o.sum), self.sum_sq.checked_add(o.sum_sq)) {
            (Some(s), Some(q)) => (self.sum, self.sum_sq) = (s, q),
            _ => self.saturated = true,
        }
    }

    /// Mean and sum of squared deviations, ticks and ticks²: `sum/n` and
    /// `sum_sq − sum²/n`, the latter with `sum²/n` split as `sum·q + sum·r/n`
    /// (`sum = q·n + r`) so that no intermediate exceeds `u128`.
    #[must_use]
    pub fn mean_m2(&self) -> Option<(f64, f64)> {
        if self.n == 0 || self.saturated {
            return None;
        }
        let n = u128::from(self.n);
        let (q, r) = (self.sum / n, self.sum % n);
        let whole = self.sum.checked_mul(q)?.checked_add(self.sum.checked_mul(r)? / n)?;
        let frac = (self.sum.checked_mul(r)? % n) as f64 / n as f64;
        let m2 = (self.sum_sq.checked_sub(whole)? as f64 - frac).max(0.0);
        Some((self.sum as f64 / n as f64, m2))
    }

    /// The holds' moments in seconds at `clock_hz`.
    #[must_use]
    pub fn moments(&self, clock_hz: u32) -> Option<Moments> {
        let c = f64::from(clock_hz.max(1));
        self.mean_m2().map(|(m, m2)| Moments::from_mean_m2(self.n, m / c, m2 / (c * c)))
    }
}

/// Whether a hint marks a gross fault (wrong part, open capacitor or diode),
/// which the capability leaves out.
#[must_use]
pub const fn is_gross(h: Hint) -> bool {
    matches!(h, Hint::WrongPart | Hint::OpenCapacitorOrDiode)
}

/// The yield summary of one (station, batch, day, setup, clock) group.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Cell {
    /// Records per verdict, in the order of [`codes::VERDICTS`].
    pub verdicts: [u64; codes::VERDICTS.len()],
    /// Records with a hold-decided verdict whose hint is a gross fault.
    pub gross: u64,
    /// Records whose drift state is past settling (a field unit's).
    pub drifting: u64,
    /// Holds of the records the capability counts (hold-decided, not gross).
    pub holds: HoldSums,
    /// Histogram of those holds over the setup's window widened by half its
    /// width on each side ([`BINS`] bins; empty without a window).
    pub bins: Vec<u64>,
    /// Holds below and above the histogram's range.
    pub outside: (u64, u64),
    /// First and last measurement, ms since the epoch.
    pub first_ms: i64,
    /// Last measurement, ms since the epoch.
    pub last_ms: i64,
}

impl Default for Cell {
    fn default() -> Cell {
        Cell {
            verdicts: [0; codes::VERDICTS.len()],
            gross: 0,
            drifting: 0,
            holds: HoldSums::default(),
            bins: Vec::new(),
            outside: (0, 0),
            first_ms: i64::MAX,
            last_ms: i64::MIN,
        }
    }
}

/// The histogram's range for a window, s.
#[must_use]
pub fn hist_range(window_s: (f64, f64)) -> (f64, f64) {
    let (lo, hi) = window_s;
    let w = hi - lo;
    (lo - 0.5 * w, hi + 0.5 * w)
}

const CELL_BLOB: u8 = 1;
const UNIT_BLOB: u8 = 1;

impl Cell {
    /// Records in the cell.
    #[must_use]
    pub fn total(&self) -> u64 {
        self.verdicts.iter().sum()
    }

    /// Passing records.
    #[must_use]
    pub fn passed(&self) -> u64 {
        self.verdicts.first().copied().unwrap_or(0)
    }

    /// Adds a record measured at `measured_ms`; `window_s` is its setup's
    /// pass window, s; `gross` whether its hint is a gross fault (the
    /// firmware's, or the `f64` re-check's where that runs).
    pub fn add(&mut self, r: &Record, measured_ms: i64, window_s: Option<(f64, f64)>, gross: bool) {
        if let Some(c) = self.verdicts.get_mut(usize::from(codes::verdict_code(r.verdict))) {
            *c += 1;
        }
        self.first_ms = self.first_ms.min(measured_ms);
        self.last_ms = self.last_ms.max(measured_ms);
        if r.drift != DriftState::Settling {
            self.drifting += 1;
        }
        let Some(hold) = r.hold_ticks else { return };
        if !r.verdict.needs_hold() {
            return;
        }
        if gross {
            self.gross += 1;
            return;
        }
        self.holds.add(hold);
        let Some(w) = window_s else { return };
        if self.bins.is_empty() {
            self.bins = vec![0; BINS];
        }
        let (a, b) = hist_range(w);
        let s = hold as f64 / f64::from(r.clock_hz.max(1));
        let k = ((s - a) / (b - a) * BINS as f64).floor();
        if k < 0.0 {
            self.outside.0 += 1;
        } else if k >= BINS as f64 {
            self.outside.1 += 1;
        } else if let Some(c) = self.bins.get_mut(k as usize) {
            *c += 1;
        }
    }

    /// Adds another cell of the same key.
    pub fn merge(&mut self, o: &Cell) {
        for (a, b) in self.verdicts.iter_mut().zip(o.verdicts) {
            *a += b;
        }
        self.gross += o.gross;
        self.drifting += o.drifting;
        self.holds.merge(&o.holds);
        if self.bins.is_empty() {
            self.bins = vec![0; o.bins.len()];
        }
        if self.bins.len() == o.bins.len() {
            for (a, b) in self.bins.iter_mut().zip(&o.bins) {
                *a += b;
            }
        }
        self.outside.0 += o.outside.0;
        self.outside.1 += o.outside.1;
        self.first_ms = self.first_ms.min(o.first_ms);
        self.last_ms = self.last_ms.max(o.last_ms);
    }

    /// The cell as a blob: version byte, then little-endian fields.
    #[must_use]
    pub fn to_blob(&self) -> Vec<u8> {
        let mut b = Vec::with_capacity(128 + 8 * self.bins.len());
        b.push(CELL_BLOB);
        b.push(u8::try_from(self.verdicts.len()).unwrap_or(u8::MAX));
        for v in self.verdicts {
            b.extend_from_slice(&v.to_le_bytes());
        }
        for v in [self.gross, self.drifting, self.holds.n] {
            b.extend_from_slice(&v.to_le_bytes());
        }
        b.extend_from_slice(&self.holds.sum.to_le_bytes());
        b.extend_from_slice(&self.holds.sum_sq.to_le_bytes());
        b.push(u8::from(self.holds.saturated));
        for v in [self.outside.0, self.outside.1] {
            b.extend_from_slice(&v.to_le_bytes());
        }
        for v in [self.first_ms, self.last_ms] {
            b.extend_from_slice(&v.to_le_bytes());
        }
        b.push(u8::try_from(self.bins.len()).unwrap_or(0));
        for v in &self.bins {
            b.extend_from_slice(&v.to_le_bytes());
        }
        b
    }

    /// Reads a blob [`Cell::to_blob`] wrote; `None` if it is not one.
    #[must_use]
    pub fn from_blob(b: &[u8]) -> Option<Cell> {
        let mut r = Reader(b);
        if r.u8()? != CELL_BLOB {
            return None;
        }
        let nv = usize::from(r.u8()?);
        let mut c = Cell::default();
        for i in 0..nv {
            let v = r.u64()?;
            // Verdict codes are only ever appended: a blob never has more than we know.
            *c.verdicts.get_mut(i)? = v;
        }
        c.gross = r.u64()?;
        c.drifting = r.u64()?;
        c.holds.n = r.u64()?;
        c.holds.sum = r.u128()?;
        c.holds.sum_sq = r.u128()?;
        c.holds.saturated = r.u8()? != 0;
        c.outside = (r.u64()?, r.u64()?);
        c.first_ms = r.i64()?;
        c.last_ms = r.i64()?;
        let nb = usize::from(r.u8()?);
        c.bins = (0..nb).map(|_| r.u64()).collect::<Option<_>>()?;
        r.0.is_empty().then_some(c)
    }
}

/// One unit's capacitance series as exact least-squares sums: `t` in ms since
/// the epoch, `d` the deviation from nominal in ppm (the ratio is `1 + d·10⁻⁶`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct UnitSums {
    /// Points.
    pub n: u64,
    /// First time, ms.
    pub first_ms: i64,
    /// Last time, ms (ties: the higher sequence number is the last, then —
    /// a retest at the same time — the higher deviation: whatever the order
    /// the points come in).
    pub last_ms: i64,
    /// The last point's sequence number.
    pub last_seq: u32,
    /// The last point's deviation, ppm.
    pub last_ppm: i32,
    /// Σt, ms.
    pub st: i128,
    /// Σt², ms².
    pub stt: i128,
    /// Σd, ppm.
    pub sd: i128,
    /// Σd², ppm².
    pub sdd: i128,
    /// Σt·d, ms·ppm.
    pub std: i128,
    /// The unit's records that gave no point (no deviation and no way to compute one).
    pub skipped: u64,
    /// Of those, the ones with a hold but no stage file to compute a deviation from.
    pub without_stage: u64,
}

impl Default for UnitSums {
    fn default() -> UnitSums {
        UnitSums {
            n: 0,
            first_ms: i64::MAX,
            last_ms: i64::MIN,
            last_seq: 0,
            last_ppm: 0,
            st: 0,
            stt: 0,
            sd: 0,
            sdd: 0,
            std: 0,
            skipped: 0,
            without_stage: 0,
        }
    }
}

impl UnitSums {
    /// Adds a point: measured at `ms`, sequence number `seq`, deviation `ppm`.
    pub fn add(&mut self, ms: i64, seq: u32, ppm: i32) {
        let (t, d) = (i128::from(ms), i128::from(ppm));
        self.n += 1;
        self.st = self.st.saturating_add(t);
        self.stt = self.stt.saturating_add(t * t);
        self.sd = self.sd.saturating_add(d);
        self.sdd = self.sdd.saturating_add(d * d);
        self.std = self.std.saturating_add(t * d);
        self.first_ms = self.first_ms.min(ms);
        if (ms, seq, ppm) >= (self.last_ms, self.last_seq, self.last_ppm) {
            (self.last_ms, self.last_seq, self.last_ppm) = (ms, seq, ppm);
        }
    }

    /// Adds another part of the same unit's series.
    pub fn merge(&mut self, o: &UnitSums) {
        self.skipped += o.skipped;
        self.without_stage += o.without_stage;
        if o.n == 0 {
            return;
        }
        self.n += o.n;
        self.st = self.st.saturating_add(o.st);
        self.stt = self.stt.saturating_add(o.stt);
        self.sd = self.sd.saturating_add(o.sd);
        self.sdd = self.sdd.saturating_add(o.sdd);
        self.std = self.std.saturating_add(o.std);
        self.first_ms = self.first_ms.min(o.first_ms);
        if (o.last_ms, o.last_seq, o.last_ppm) >= (self.last_ms, self.last_seq, self.last_ppm) {
            (self.last_ms, self.last_seq, self.last_ppm) = (o.last_ms, o.last_seq, o.last_ppm);
        }
    }

    /// Centred sums `n·Σt² − (Σt)²`, `n·Σtd − Σt·Σd`, `n·Σd² − (Σd)²`
    /// (each `n` times the centred sum), exact; `None` on overflow.
    #[must_use]
    pub fn centred(&self) -> Option<(i128, i128, i128)> {
        let n = i128::from(self.n);
        let sxx = n.checked_mul(self.stt)?.checked_sub(self.st.checked_mul(self.st)?)?;
        let sxy = n.checked_mul(self.std)?.checked_sub(self.st.checked_mul(self.sd)?)?;
        let syy = n.checked_mul(self.sdd)?.checked_sub(self.sd.checked_mul(self.sd)?)?;
        Some((sxx, sxy, syy))
    }

    /// The sums as a blob: version byte, then little-endian fields.
    #[must_use]
    pub fn to_blob(&self) -> Vec<u8> {
        let mut b = Vec::with_capacity(112);
        b.push(UNIT_BLOB);
        b.extend_from_slice(&self.n.to_le_bytes());
        b.extend_from_slice(&self.first_ms.to_le_bytes());
        b.extend_from_slice(&self.last_ms.to_le_bytes());
        b.extend_from_slice(&self.last_seq.to_le_bytes());
        b.extend_from_slice(&self.last_ppm.to_le_bytes());
        for v in [self.st, self.stt, self.sd, self.sdd, self.std] {
            b.extend_from_slice(&v.to_le_bytes());
        }
        b.extend_from_slice(&self.skipped.to_le_bytes());
        b.extend_from_slice(&self.without_stage.to_le_bytes());
        b
    }

    /// Reads a blob [`UnitSums::to_blob`] wrote; `None` if it is not one.
    #[must_use]
    pub fn from_blob(b: &[u8]) -> Option<UnitSums> {
        let mut r = Reader(b);
        if r.u8()? != UNIT_BLOB {
            return None;
        }
        let u = UnitSums {
            n: r.u64()?,
            first_ms: r.i64()?,
            last_ms: r.i64()?,
            last_seq: u32::from_le_bytes(r.take()?),
            last_ppm: i32::from_le_bytes(r.take()?),
            st: r.i128()?,
            stt: r.i128()?,
            sd: r.i128()?,
            sdd: r.i128()?,
            std: r.i128()?,
            skipped: r.u64()?,
            without_stage: r.u64()?,
        };
        r.0.is_empty().then_some(u)
    }
}

/// Reads little-endian fields off a byte slice.
struct Reader<'a>(&'a [u8]);

impl Reader<'_> {
    fn take<const N: usize>(&mut self) -> Option<[u8; N]> {
        let (a, rest) = self.0.split_first_chunk::<N>()?;
        self.0 = rest;
        Some(*a)
    }
    fn u8(&mut self) -> Option<u8> {
        self.take::<1>().map(|[b]| b)
    }
    fn u64(&mut self) -> Option<u64> {
        self.take().map(u64::from_le_bytes)
    }
    fn i64(&mut self) -> Option<i64> {
        self.take().map(i64::from_le_bytes)
    }
    fn u128(&mut self) -> Option<u128> {
        self.take().map(u128::from_le_bytes)
    }
    fn i128(&mut self) -> Option<i128> {
        self.take().map(i128::from_le_bytes)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Sums of any split merge to the sums of the whole, and the exact
        /// moments match a two-pass f64 computation.
        #[test]
        fn hold_sums_merge_exactly(xs in prop::collection::vec(0u64..(1 << 40), 2..200), cut in 0usize..200) {
            let cut = cut.min(xs.len());
            let (mut a, mut b, mut all) = (HoldSums::default(), HoldSums::default(), HoldSums::default());
            for (i, &x) in xs.iter().enumerate() {
                all.add(x);
                if i < cut { a.add(x) } else { b.add(x) }
            }
            b.merge(&a);
            prop_assert_eq!(b, all);
            let n = xs.len() as f64;
            let mean = xs.iter().map(|&x| x as f64).sum::<f64>() / n;
            let m2: f64 = xs.iter().map(|&x| (x as f64 - mean).powi(2)).sum();
            let (m, q) = all.mean_m2().unwrap_or((f64::NAN, f64::NAN));
            prop_assert!((m - mean).abs() <= 1e-12 * mean.max(1.0));
            prop_assert!((q - m2).abs() <= 1e-9 * m2.max(1.0) + 1e-6 * mean * mean * 1e-12, "{} {}", q, m2);
        }

        #[test]
        fn unit_sums_merge_in_any_order(pts in prop::collection::vec((0i64..(1 << 42), any::<u32>(), -500_000i32..500_000), 1..100), cut in 0usize..100) {
            let cut = cut.min(pts.len());
            let (mut a, mut b, mut all) = (UnitSums::default(), UnitSums::default(), UnitSums::default());
            for (i, &(t, s, d)) in pts.iter().enumerate() {
                all.add(t, s, d);
                if i < cut { a.add(t, s, d) } else { b.add(t, s, d) }
            }
            b.merge(&a);
            prop_assert_eq!(b, all);
            prop_assert_eq!(UnitSums::from_blob(&all.to_blob()), Some(all));
        }
    }

    #[test]
    fn cells_round_trip_through_their_blob() {
        let mut c = Cell::default();
        let mut r = crate::data::store::tests::record(1, 1);
        c.add(&r, 5, Some((0.06, 0.08)), false);
        r.hold_ticks = Some(1 << 50);
        c.add(&r, 7, None, false);
        assert_eq!(Cell::from_blob(&c.to_blob()), Some(c.clone()));
        assert!(c.holds.saturated && c.holds.mean_m2().is_none());
        assert_eq!(Cell::from_blob(&[2]), None);
        let mut b = c.to_blob();
        b.push(0);
        assert_eq!(Cell::from_blob(&b), None, "trailing bytes");
    }
}
