//! Four xoshiro256++ generators side by side in vector registers, for
//! drawing Monte Carlo columns: one step of all four is a handful of vector
//! instructions (`wide`'s portable SIMD types, SSE2 on any x86-64).
//!
//! The algorithm is Blackman and Vigna's xoshiro256++ ("Scrambled linear
//! pseudorandom number generators", ACM TOMS 47(4), 2021); each lane is
//! seeded from a 64-bit value by SplitMix64, as `rand_xoshiro` does. The
//! tests check every lane against `rand_xoshiro::Xoshiro256PlusPlus`.

use wide::{f64x4, u64x4};

/// Generators side by side.
pub const LANES: usize = 4;

/// Four independent xoshiro256++ generators.
#[derive(Debug, Clone)]
pub struct Lanes {
    s: [u64x4; 4],
}

/// SplitMix64 (Vigna's reference): the next output, advancing `x`.
fn splitmix64(x: &mut u64) -> u64 {
    *x = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *x;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

fn rotl(x: u64x4, k: u32) -> u64x4 {
    (x << k) | (x >> (64 - k))
}

impl Lanes {
    /// Lane `l` seeded from `seeds[l]` (SplitMix64 expansion to 256 bits).
    #[must_use]
    pub fn from_seeds(seeds: [u64; LANES]) -> Lanes {
        let mut words = [[0u64; LANES]; 4];
        for (l, &seed) in seeds.iter().enumerate() {
            let mut x = seed;
            for word in &mut words {
                if let Some(w) = word.get_mut(l) {
                    *w = splitmix64(&mut x);
                }
            }
        }
        Lanes { s: words.map(u64x4::new) }
    }

    /// The next output of every lane.
    #[inline(always)]
    pub fn next_u64(&mut self) -> u64x4 {
        let [s0, s1, s2, s3] = &mut self.s;
        let out = rotl(*s0 + *s3, 23) + *s0;
        let t = *s1 << 17;
        *s2 ^= *s0;
        *s3 ^= *s1;
        *s1 ^= *s2;
        *s0 ^= *s3;
        *s2 ^= t;
        *s3 = rotl(*s3, 45);
        out
    }

    /// Four uniform draws in [0, 1) on a grid of 2⁻⁵²: the top 52 bits as
    /// the mantissa of a number in [1, 2), less one.
    #[inline(always)]
    pub fn next_unit(&mut self) -> f64x4 {
        f64x4::from_bits((self.next_u64() >> 12) | u64x4::splat(0x3FF0_0000_0000_0000)) - f64x4::ONE
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngCore, SeedableRng};
    use rand_xoshiro::Xoshiro256PlusPlus;

    /// Every lane reproduces `rand_xoshiro`'s generator seeded the same way.
    #[test]
    fn each_lane_is_the_reference_generator() {
        for seeds in [[0, 1, 2, 42], [u64::MAX, 0x9E37_79B9_7F4A_7C15, 12_345_678_901, 7]] {
            let mut lanes = Lanes::from_seeds(seeds);
            let mut refs: Vec<Xoshiro256PlusPlus> =
                seeds.iter().map(|&s| Xoshiro256PlusPlus::seed_from_u64(s)).collect();
            for _ in 0..1_000 {
                let got = lanes.next_u64().to_array();
                for (g, r) in got.iter().zip(&mut refs) {
                    assert_eq!(*g, r.next_u64());
                }
            }
        }
    }

    /// Uniform draws stay in [0, 1) and fill it evenly (ten bins within 5 σ).
    #[test]
    fn units_are_uniform_in_the_unit_interval() {
        let mut lanes = Lanes::from_seeds([3, 4, 5, 6]);
        let mut bins = [0u32; 10];
        let n = 100_000;
        for _ in 0..n / LANES {
            for u in lanes.next_unit().to_array() {
                assert!((0.0..1.0).contains(&u));
                bins[(u * 10.0) as usize] += 1;
            }
        }
        let expect = n as f64 / 10.0;
        let sd = (expect * 0.9).sqrt();
        for b in bins {
            assert!((f64::from(b) - expect).abs() < 5.0 * sd, "{bins:?}");
        }
    }
}
