//! Moments and order statistics of the holds: sums of each block merged
//! in block order, a histogram, and exact percentiles without a sort.

use rayon::prelude::*;
use wide::f64x4;

use super::lanes::LANES;
use crate::report::stats::Moments;

/// Accepted holds of one block: their moments and extremes; refused
/// samples counted apart.
#[derive(Debug, Clone, Copy)]
pub(super) struct BlockSum {
    pub(super) moments: Moments,
    pub(super) min: f64,
    pub(super) max: f64,
    pub(super) refused: usize,
}

impl BlockSum {
    /// The sums of `out` (NaN left out), and its values counted into
    /// `counts` by `bins`: one pass four values at a time, then one for the
    /// squared deviations.
    pub(super) fn tally(out: &[f64], bins: &Bins, counts: &mut [u32]) -> BlockSum {
        let s = f64x4::splat;
        let (mut n, mut sum, mut min, mut max) = (0u32, f64x4::ZERO, s(f64::INFINITY), s(f64::NEG_INFINITY));
        let chunks = out.chunks_exact(LANES);
        let tail = chunks.remainder();
        for chunk in chunks {
            let x = f64x4::from(chunk);
            let valid = x.simd_eq(x);
            let bits = valid.to_bitmask();
            n += bits.count_ones();
            sum += valid.select(x, f64x4::ZERO);
            // `min`/`max` keep the other operand where one is NaN.
            min = min.min(x);
            max = max.max(x);
            for (l, b) in bins.of4(x).into_iter().enumerate() {
                if bits & (1 << l) != 0 {
                    if let Some(c) = counts.get_mut(b) {
                        *c += 1;
                    }
                }
            }
        }
        let (mut n, mut sum) = (n as usize, sum.reduce_add());
        let mut min = min.to_array().iter().fold(f64::INFINITY, |a, &b| a.min(b));
        let mut max = max.to_array().iter().fold(f64::NEG_INFINITY, |a, &b| a.max(b));
        for &x in tail.iter().filter(|x| !x.is_nan()) {
            n += 1;
            sum += x;
            min = min.min(x);
            max = max.max(x);
            if let Some(c) = counts.get_mut(bins.of(x)) {
                *c += 1;
            }
        }
        let mean = if n == 0 { 0.0 } else { sum / n as f64 };
        let mut m2 = f64x4::ZERO;
        for chunk in out.chunks_exact(LANES) {
            let x = f64x4::from(chunk);
            let d = x.simd_eq(x).select(x - s(mean), f64x4::ZERO);
            m2 += d * d;
        }
        let m2 = m2.reduce_add() + tail.iter().filter(|x| !x.is_nan()).map(|&x| (x - mean) * (x - mean)).sum::<f64>();
        BlockSum { moments: Moments::from_mean_m2(n as u64, mean, m2), min, max, refused: out.len() - n }
    }

    /// Both blocks' holds together (the moments by Chan et al.'s pairwise update).
    pub(super) fn merge(mut self, o: BlockSum) -> BlockSum {
        self.moments.merge(&o.moments);
        BlockSum {
            moments: self.moments,
            min: self.min.min(o.min),
            max: self.max.max(o.max),
            refused: self.refused + o.refused,
        }
    }
}

/// Histogram bins for the order statistics.
pub(super) const BINS: usize = 1 << 16;

/// Equal bins over a range, the values below and above it counted in the end bins.
#[derive(Debug, Clone, Copy)]
pub(super) struct Bins {
    lo: f64,
    per_unit: f64,
}

impl Bins {
    /// Bins over [`min`, `max`] widened by half its span each way (one bin
    /// for everything when the range is empty or not finite).
    pub(super) fn around(min: f64, max: f64) -> Bins {
        let span = max - min;
        if span > 0.0 && span.is_finite() {
            Bins { lo: min - 0.5 * span, per_unit: BINS as f64 / (2.0 * span) }
        } else {
            Bins { lo: 0.0, per_unit: 0.0 }
        }
    }

    /// The bin of `x` (not NaN); a monotone function of `x`.
    fn of(&self, x: f64) -> usize {
        ((x - self.lo) * self.per_unit).clamp(0.0, (BINS - 1) as f64) as usize
    }

    /// [`Bins::of`] of four values at once (NaN lanes land in bin 0).
    fn of4(&self, x: f64x4) -> [usize; LANES] {
        let at = ((x - f64x4::splat(self.lo)) * f64x4::splat(self.per_unit)).max(f64x4::ZERO);
        at.min(f64x4::splat((BINS - 1) as f64)).to_array().map(|b| b as usize)
    }
}

/// The `ranks`-th smallest values of `v` (0-based), exactly, without sorting
/// `v`: `counts` (of `v` in `bins`) tell the bin each rank falls in; one
/// parallel pass collects only those bins' values, which are sorted.
pub(super) fn order_statistics(v: &[f64], ranks: &[usize], bins_of: &Bins, counts: &[u32]) -> Vec<f64> {
    if v.is_empty() || ranks.is_empty() {
        return vec![f64::NAN; ranks.len()];
    }
    let bin = |x: f64| bins_of.of(x);
    // For each rank: its bin and its position among that bin's values.
    let mut starts = Vec::with_capacity(BINS);
    let mut acc = 0usize;
    for &c in counts {
        starts.push(acc);
        acc += c as usize;
    }
    let wanted: Vec<(usize, usize)> = ranks
        .iter()
        .map(|&r| {
            let b = starts.partition_point(|&s| s <= r).saturating_sub(1);
            (b, r - starts.get(b).copied().unwrap_or(0))
        })
        .collect();
    let mut bins: Vec<usize> = wanted.iter().map(|w| w.0).collect();
    bins.sort_unstable();
    bins.dedup();
    // One pass collects the values of every wanted bin.
    let mut slot = vec![u8::MAX; BINS];
    for (i, &b) in bins.iter().enumerate() {
        if let Some(s) = slot.get_mut(b) {
            *s = u8::try_from(i).unwrap_or(u8::MAX);
        }
    }
    let mut members: Vec<Vec<f64>> = v
        .par_chunks(1 << 16)
        .fold(
            || vec![Vec::new(); bins.len()],
            |mut m, chunk| {
                let mut keep = |x: f64, b: usize| {
                    if let Some(&s) = slot.get(b) {
                        if let Some(list) = m.get_mut(usize::from(s)) {
                            list.push(x);
                        }
                    }
                };
                // Four bins at a time (`v` holds no NaN here), then the rest.
                let quads = chunk.chunks_exact(LANES);
                let tail = quads.remainder();
                for quad in quads {
                    let x = f64x4::from(quad);
                    for (&x, b) in quad.iter().zip(bins_of.of4(x)) {
                        keep(x, b);
                    }
                }
                for &x in tail {
                    keep(x, bin(x));
                }
                m
            },
        )
        .reduce(
            || vec![Vec::new(); bins.len()],
            |mut a, b| {
                for (x, y) in a.iter_mut().zip(b) {
                    x.extend(y);
                }
                a
            },
        );
    for m in &mut members {
        m.sort_unstable_by(f64::total_cmp);
    }
    wanted
        .iter()
        .map(|&(b, k)| {
            bins.iter()
                .position(|&x| x == b)
                .and_then(|i| members.get(i))
                .and_then(|m| m.get(k))
                .copied()
                .unwrap_or(f64::NAN)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn order_statistics_equal_a_sort() {
        let v: Vec<f64> = (0..5_000u32).map(|i| f64::from((i * 7_919) % 5_003) * 1e-3).collect();
        let bins = Bins::around(0.0, 5.003);
        let mut counts = vec![0u32; BINS];
        for &x in &v {
            if let Some(c) = counts.get_mut(bins.of(x)) {
                *c += 1;
            }
        }
        let ranks = [0, 1, 2_500, 4_999];
        let mut sorted = v.clone();
        sorted.sort_by(f64::total_cmp);
        let want: Vec<f64> = ranks.iter().filter_map(|&r| sorted.get(r).copied()).collect();
        assert_eq!(order_statistics(&v, &ranks, &bins, &counts), want);
        assert!(order_statistics(&[], &[0], &bins, &counts).iter().all(|x| x.is_nan()));
    }
}
