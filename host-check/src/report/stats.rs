//! Statistics for yield and drift reports, in `f64`: process capability,
//! EWMA and tabular CUSUM charts, the individuals chart and a least-squares
//! line. Formulas as in the NIST/SEMATECH e-Handbook of Statistical Methods
//! (§6.1.6, §6.3.2.4, §6.3.2.3, §6.3.2.2).

use serde::Serialize;

/// Process capability of a characteristic against its specification limits.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Capability {
    /// (USL − LSL) / 6σ.
    pub cp: f64,
    /// (USL − mean) / 3σ.
    pub cpu: f64,
    /// (mean − LSL) / 3σ.
    pub cpl: f64,
    /// min(Cpu, Cpl).
    pub cpk: f64,
    /// |mid − mean| / ((USL − LSL)/2): how far the mean sits off centre.
    pub k: f64,
}

/// Capability by the percentile method for data that are not normal (ISO
/// 22514-2's approach, formulas from memory): the 0.135 %, 50 % and
/// 99.865 % points stand in for mean − 3σ, the mean and mean + 3σ, so
/// `Cp = (USL − LSL) / (X99.865 − X0.135)`, `Cpu = (USL − X50) / (X99.865 − X50)`,
/// `Cpl = (X50 − LSL) / (X50 − X0.135)`, `Cpk = min(Cpu, Cpl)`. For normal
/// data it gives Cp/Cpk of [`capability`].
#[must_use]
pub fn percentile_capability(lsl: f64, usl: f64, p00135: f64, p50: f64, p99865: f64) -> Capability {
    let cpu = (usl - p50) / (p99865 - p50);
    let cpl = (p50 - lsl) / (p50 - p00135);
    Capability {
        cp: (usl - lsl) / (p99865 - p00135),
        cpu,
        cpl,
        cpk: cpu.min(cpl),
        k: ((usl + lsl) / 2.0 - p50).abs() / ((usl - lsl) / 2.0),
    }
}

/// The Anderson–Darling test of normality with mean and σ estimated from
/// the sample.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Normality {
    /// A² = −n − (1/n)·Σ (2i − 1)·[ln Φ(zᵢ) + ln(1 − Φ(z₍ₙ₊₁₋ᵢ₎))], zᵢ the sorted
    /// standardised sample.
    pub a2: f64,
    /// A² adjusted for the sample size, A²·(1 + 0.75/n + 2.25/n²)
    /// (D'Agostino and Stephens, Goodness-of-Fit Techniques, 1986; from memory).
    pub a2_star: f64,
    /// The p-value of A*² by the same source's four-piece formula (from memory).
    pub p: f64,
    /// Normal at the 5 % level (p ≥ 0.05).
    pub normal: bool,
}

/// Anderson–Darling on `sample` (any order); `None` below 8 values or for
/// a sample without spread.
#[must_use]
pub fn anderson_darling(sample: &[f64]) -> Option<Normality> {
    let n = sample.len();
    if n < 8 {
        return None;
    }
    let mut x: Vec<f64> = sample.to_vec();
    x.sort_by(f64::total_cmp);
    let nf = n as f64;
    let mean = x.iter().sum::<f64>() / nf;
    let sd = (x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (nf - 1.0)).sqrt();
    if sd.is_nan() || sd <= 0.0 {
        return None;
    }
    // ln Φ(z) and ln(1 − Φ(z)) through erfc, accurate in both tails.
    let ln_cdf =
        |z: f64| (0.5 * statrs::function::erf::erfc(-z / std::f64::consts::SQRT_2)).max(f64::MIN_POSITIVE).ln();
    let ln_sf = |z: f64| (0.5 * statrs::function::erf::erfc(z / std::f64::consts::SQRT_2)).max(f64::MIN_POSITIVE).ln();
    let mut sum = 0.0;
    for (i, (lo, hi)) in x.iter().zip(x.iter().rev()).enumerate() {
        let k = 2.0 * (i as f64) + 1.0;
        sum += k * (ln_cdf((lo - mean) / sd) + ln_sf((hi - mean) / sd));
    }
    let a2 = -nf - sum / nf;
    let a2_star = a2 * (1.0 + 0.75 / nf + 2.25 / (nf * nf));
    let p = if a2_star >= 0.6 {
        (1.2937 - 5.709 * a2_star + 0.0186 * a2_star * a2_star).exp()
    } else if a2_star >= 0.34 {
        (0.9177 - 4.279 * a2_star - 1.38 * a2_star * a2_star).exp()
    } else if a2_star >= 0.2 {
        1.0 - (-8.318 + 42.796 * a2_star - 59.938 * a2_star * a2_star).exp()
    } else {
        1.0 - (-13.436 + 101.14 * a2_star - 223.73 * a2_star * a2_star).exp()
    };
    let p = p.clamp(0.0, 1.0);
    Some(Normality { a2, a2_star, p, normal: p >= 0.05 })
}

/// A standard normal draw from two uniform draws by the Box–Muller
/// transform (Box and Muller, Ann. Math. Statist. 29, 1958): `u1` in (0, 1],
/// `u2` in [0, 1).
#[must_use]
pub fn box_muller(u1: f64, u2: f64) -> f64 {
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// Cp, Cpk and friends (e-Handbook §6.1.6).
#[must_use]
pub fn capability(lsl: f64, usl: f64, mean: f64, sigma: f64) -> Capability {
    let cpu = (usl - mean) / (3.0 * sigma);
    let cpl = (mean - lsl) / (3.0 * sigma);
    Capability {
        cp: (usl - lsl) / (6.0 * sigma),
        cpu,
        cpl,
        cpk: cpu.min(cpl),
        k: ((usl + lsl) / 2.0 - mean).abs() / ((usl - lsl) / 2.0),
    }
}

/// An EWMA chart: `z_t = λ·x_t + (1 − λ)·z_(t−1)`, limits
/// `target ± L·s·sqrt(λ/(2 − λ))` (the asymptotic form of e-Handbook §6.3.2.4).
#[derive(Debug, Clone, PartialEq)]
pub struct Ewma {
    /// The EWMA series.
    pub z: Vec<f64>,
    /// Lower control limit.
    pub lcl: f64,
    /// Upper control limit.
    pub ucl: f64,
    /// Indices (0-based) of points outside the limits.
    pub out: Vec<usize>,
}

/// Runs an EWMA chart over `x`.
#[must_use]
pub fn ewma(x: &[f64], lambda: f64, start: f64, sigma: f64, l: f64) -> Ewma {
    let half = l * sigma * (lambda / (2.0 - lambda)).sqrt();
    let (lcl, ucl) = (start - half, start + half);
    let mut z = Vec::with_capacity(x.len());
    let mut prev = start;
    for &v in x {
        prev = lambda * v + (1.0 - lambda) * prev;
        z.push(prev);
    }
    let out = z.iter().enumerate().filter(|(_, v)| **v < lcl || **v > ucl).map(|(i, _)| i).collect();
    Ewma { z, lcl, ucl, out }
}

/// A two-sided tabular CUSUM (e-Handbook §6.3.2.3).
#[derive(Debug, Clone, PartialEq)]
pub struct Cusum {
    /// Upper sums `S_hi(t) = max(0, S_hi(t−1) + x_t − target − k)`.
    pub hi: Vec<f64>,
    /// Lower sums `S_lo(t) = max(0, S_lo(t−1) + target − k − x_t)`.
    pub lo: Vec<f64>,
    /// Indices (0-based) where either sum exceeds `h`.
    pub signals: Vec<usize>,
}

/// Runs a tabular CUSUM over `x`.
#[must_use]
pub fn cusum(x: &[f64], target: f64, k: f64, h: f64) -> Cusum {
    let (mut shi, mut slo) = (0.0f64, 0.0f64);
    let mut c = Cusum { hi: Vec::new(), lo: Vec::new(), signals: Vec::new() };
    for (i, &v) in x.iter().enumerate() {
        shi = (shi + v - target - k).max(0.0);
        slo = (slo + target - k - v).max(0.0);
        c.hi.push(shi);
        c.lo.push(slo);
        if shi > h || slo > h {
            c.signals.push(i);
        }
    }
    c
}

/// An individuals chart from the moving range (e-Handbook §6.3.2.2; d2 = 1.128
/// for ranges of two).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Individuals {
    /// Centre line.
    pub mean: f64,
    /// Mean moving range.
    pub mr_bar: f64,
    /// Upper control limit `mean + 3·MR̄/d2`.
    pub ucl: f64,
    /// Lower control limit `mean − 3·MR̄/d2`.
    pub lcl: f64,
}

/// Builds an individuals chart from `x` (at least two points).
#[must_use]
pub fn individuals(x: &[f64]) -> Individuals {
    const D2: f64 = 1.128;
    let mean = x.iter().sum::<f64>() / x.len() as f64;
    let mr: Vec<f64> = x
        .windows(2)
        .map(|w| match w {
            [a, b] => (b - a).abs(),
            _ => 0.0,
        })
        .collect();
    let mr_bar = mr.iter().sum::<f64>() / mr.len().max(1) as f64;
    Individuals { mean, mr_bar, ucl: mean + 3.0 * mr_bar / D2, lcl: mean - 3.0 * mr_bar / D2 }
}

/// A least-squares line `y = intercept + slope·x` with its standard errors.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Line {
    /// Intercept.
    pub intercept: f64,
    /// Slope.
    pub slope: f64,
    /// Standard error of the intercept.
    pub intercept_sd: f64,
    /// Standard error of the slope.
    pub slope_sd: f64,
    /// Residual standard deviation (n − 2 degrees of freedom).
    pub residual_sd: f64,
    /// Coefficient of determination.
    pub r_squared: f64,
}

/// Fits a line by least squares, centring the data first (two passes) so
/// that large offsets do not cancel. `None` with fewer than 3 points or no
/// spread in `x`.
#[must_use]
pub fn fit_line(x: &[f64], y: &[f64]) -> Option<Line> {
    let n = x.len();
    if n < 3 || y.len() != n {
        return None;
    }
    let nf = n as f64;
    let mx = x.iter().sum::<f64>() / nf;
    let my = y.iter().sum::<f64>() / nf;
    let (mut sxx, mut sxy, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        let (dx, dy) = (a - mx, b - my);
        sxx += dx * dx;
        sxy += dx * dy;
        syy += dy * dy;
    }
    if sxx <= 0.0 {
        return None;
    }
    let slope = sxy / sxx;
    let intercept = my - slope * mx;
    let sse: f64 = x.iter().zip(y).map(|(a, b)| (b - intercept - slope * a).powi(2)).sum();
    let s2 = sse / (nf - 2.0);
    Some(Line {
        intercept,
        slope,
        intercept_sd: (s2 * (1.0 / nf + mx * mx / sxx)).sqrt(),
        slope_sd: (s2 / sxx).sqrt(),
        residual_sd: s2.sqrt(),
        r_squared: 1.0 - sse / syy,
    })
}

/// Running mean and variance: sums of the samples' differences from the
/// first sample (no division per sample; the shift keeps the sums small, so
/// nothing cancels), turned into mean and M2 by [`Moments::settle`];
/// partial results merge by Chan et al.'s pairwise update.
#[derive(Debug, Clone, Copy, Default, Serialize)]
pub struct Moments {
    /// Samples.
    pub n: u64,
    /// Mean (valid after [`Moments::settle`]).
    pub mean: f64,
    #[serde(skip)]
    m2: f64,
    #[serde(skip)]
    shift: f64,
    #[serde(skip)]
    s1: f64,
    #[serde(skip)]
    s2: f64,
}

impl Moments {
    /// Settled moments of `n` samples with this mean and sum of squared
    /// deviations from it (`m2`), ready to add to or merge.
    #[must_use]
    pub fn from_mean_m2(n: u64, mean: f64, m2: f64) -> Moments {
        Moments { n, mean, m2, shift: mean, s1: 0.0, s2: m2 }
    }

    /// Adds a sample.
    #[inline]
    pub fn add(&mut self, x: f64) {
        if self.n == 0 {
            self.shift = x;
        }
        let d = x - self.shift;
        self.n += 1;
        self.s1 += d;
        self.s2 += d * d;
    }

    /// Computes the mean and M2 from the sums.
    pub fn settle(&mut self) {
        if self.n > 0 {
            let n = self.n as f64;
            self.mean = self.shift + self.s1 / n;
            self.m2 = (self.s2 - self.s1 * self.s1 / n).max(0.0);
            // Re-base the sums on the mean so that adding more stays consistent.
            self.shift = self.mean;
            self.s1 = 0.0;
            self.s2 = self.m2;
        }
    }

    /// Adds another set of samples (Chan et al.'s pairwise update).
    pub fn merge(&mut self, o: &Moments) {
        let mut o = *o;
        o.settle();
        self.settle();
        if o.n == 0 {
            return;
        }
        if self.n == 0 {
            *self = o;
            return;
        }
        let n = self.n + o.n;
        let d = o.mean - self.mean;
        self.mean += d * o.n as f64 / n as f64;
        self.m2 += o.m2 + d * d * self.n as f64 * o.n as f64 / n as f64;
        self.n = n;
        self.shift = self.mean;
        self.s1 = 0.0;
        self.s2 = self.m2;
    }

    /// Sample standard deviation (n − 1), after [`Moments::settle`].
    #[must_use]
    pub fn sd(&self) -> f64 {
        if self.n > 1 {
            (self.m2 / (self.n - 1) as f64).sqrt()
        } else {
            f64::NAN
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn box_muller_and_capability_by_hand() {
        // u1 = e^(-1/2) gives a radius of 1; u2 = 0 the cosine's 1 (math).
        assert!((box_muller((-0.5f64).exp(), 0.0) - 1.0).abs() < 1e-12);
        assert!((box_muller((-0.5f64).exp(), 0.5) + 1.0).abs() < 1e-12);
        // Centred in a ±3σ window: Cp = Cpk = 1 (NIST/SEMATECH §6.1.6 definitions).
        let c = capability(-3.0, 3.0, 0.0, 1.0);
        assert!((c.cp - 1.0).abs() < 1e-12 && (c.cpk - 1.0).abs() < 1e-12);
    }
}
