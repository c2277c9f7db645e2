//! IEC 60063 preferred-number series E3 … E192, generated rather than typed.
//!
//! E48, E96 and E192 follow `round(10^(i/N))` to three significant digits,
//! with one published exception (E192: 9.20 where rounding gives 9.19).
//! E3 … E24 are two-digit series whose published values depart from rounding
//! in eight places (E24: 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2); E3, E6 and
//! E12 are every 8th, 4th and 2nd E24 value.

/// A series by its number of values per decade.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Series {
    /// E3 (commonly ±40 %).
    E3,
    /// E6 (commonly ±20 %).
    E6,
    /// E12 (commonly ±10 %).
    E12,
    /// E24 (commonly ±5 %).
    E24,
    /// E48 (commonly ±2 %).
    E48,
    /// E96 (commonly ±1 %).
    E96,
    /// E192 (commonly ±0.5 %).
    E192,
}

/// Every series, coarsest first.
pub const ALL: [Series; 7] = [Series::E3, Series::E6, Series::E12, Series::E24, Series::E48, Series::E96, Series::E192];

/// Published E24 values that differ from `round(10^(i/24), 1 decimal)`, as
/// (index, mantissa × 10).
const E24_EXCEPTIONS: [(usize, u16); 8] =
    [(10, 27), (11, 30), (12, 33), (13, 36), (14, 39), (15, 43), (16, 47), (22, 82)];

impl Series {
    /// Parses "E24", "e96", …
    #[must_use]
    pub fn parse(text: &str) -> Option<Series> {
        ALL.into_iter().find(|s| format!("E{}", s.per_decade()).eq_ignore_ascii_case(text.trim()))
    }

    /// Values per decade.
    #[must_use]
    pub const fn per_decade(self) -> usize {
        match self {
            Series::E3 => 3,
            Series::E6 => 6,
            Series::E12 => 12,
            Series::E24 => 24,
            Series::E48 => 48,
            Series::E96 => 96,
            Series::E192 => 192,
        }
    }

    /// The mantissas of one decade as integers: two digits (10 … 91) for
    /// E3 … E24, three digits (100 … 988) for E48 … E192.
    #[must_use]
    pub fn mantissas(self) -> Vec<u16> {
        let n = self.per_decade();
        if n >= 48 {
            (0..n)
                .map(|i| {
                    let v = (10f64.powf(i as f64 / n as f64) * 100.0).round() as u16;
                    if n == 192 && v == 919 {
                        920
                    } else {
                        v
                    }
                })
                .collect()
        } else {
            let e24: Vec<u16> = (0..24)
                .map(|i| {
                    E24_EXCEPTIONS
                        .iter()
                        .find(|(j, _)| *j == i)
                        .map_or_else(|| (10f64.powf(i as f64 / 24.0) * 10.0).round() as u16, |(_, v)| *v)
                })
                .collect();
            e24.into_iter().step_by(24 / n).collect()
        }
    }

    /// The mantissas as values in [1, 10).
    #[must_use]
    pub fn values(self) -> Vec<f64> {
        let scale = if self.per_decade() >= 48 { 100.0 } else { 10.0 };
        self.mantissas().into_iter().map(|m| f64::from(m) / scale).collect()
    }

    /// The series value nearest to `x` (> 0) on a logarithmic scale — the
    /// preferred-number sense of "nearest": equal ratios count as equal steps.
    #[must_use]
    pub fn nearest(self, x: f64) -> f64 {
        if x.is_nan() || x <= 0.0 {
            return f64::NAN;
        }
        let decade = x.log10().floor();
        let base = 10f64.powf(decade);
        let mut best = f64::NAN;
        let mut best_dist = f64::INFINITY;
        for scale in [base / 10.0, base, base * 10.0] {
            for v in self.values() {
                let cand = v * scale;
                let d = (cand / x).ln().abs();
                if d < best_dist {
                    best_dist = d;
                    best = cand;
                }
            }
        }
        best
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_values_and_nearest() {
        assert_eq!(Series::parse(" e24 "), Some(Series::E24));
        assert_eq!(Series::parse("E7"), None);
        assert_eq!(Series::E12.mantissas().len(), 12);
        // 4.6 kΩ lies between E12's 3.9 k and 4.7 k, nearer 4.7 k on a log scale.
        assert!((Series::E12.nearest(4_600.0) - 4_700.0).abs() < 1e-9);
    }
}
