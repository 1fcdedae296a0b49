//! Streaming quantiles of more values than are worth holding (every cell of a map): DDSketch
//! (Masson, Rim & Lee 2019, "DDSketch: a fast and fully-mergeable quantile sketch with
//! relative-error guarantees", PVLDB 12(12):2195), through the `sketches-ddsketch` crate.
//!
//! Values are counted in logarithmic bins of their magnitude, one set of bins per sign: bin k
//! holds magnitudes in `[gamma^k, gamma^(k+1))` with `gamma = (1 + a) / (1 - a)` and is read as
//! `2 gamma^(k+1) / (1 + gamma)`, within `a` = [`RELATIVE_ERROR`] of every magnitude in it.
//! Counts are exact integers, so a sketch does not depend on the order values are added or
//! sketches merged (results are the same bits for any thread count).
//!
//! Error bound of [`QuantileSketch::quantile`]: the value read differs from the exact
//! [`Quantile::Nearest`](super::Quantile::Nearest) quantile `x` by at most `RELATIVE_ERROR |x|`
//! (and is exact at the minimum and maximum). This holds while the values of `x`'s sign span
//! at most [`BINS`] bins, a ratio of about 1e28 between their largest and smallest magnitude;
//! beyond it the smallest magnitudes are merged into the lowest bin kept.
//! [`QuantileSketch::share_at_most`] is off by at most the share of values `v` within
//! `RELATIVE_ERROR |v|` of the threshold (only those can be read on the wrong side of it).

use sketches_ddsketch::{Config, DDSketch};

/// Largest relative error of a quantile read from a [`QuantileSketch`] (0.1%).
pub const RELATIVE_ERROR: f64 = 1e-3;

/// Bins per sign: 32768 bins of ratio `gamma` (ln gamma = 0.002) span a ratio of e^65.5,
/// about 1e28, between the largest and smallest magnitude kept apart; at most 256 KiB each.
pub const BINS: u32 = 1 << 15;

/// A quantile sketch of finite values (see the module notes for its error bound).
#[derive(Clone)]
pub struct QuantileSketch {
    sketch: DDSketch,
}

impl Default for QuantileSketch {
    fn default() -> Self {
        // Only magnitudes below the smallest normal f64 count as zero.
        Self {
            sketch: DDSketch::new(Config::new(RELATIVE_ERROR, BINS, f64::MIN_POSITIVE)),
        }
    }
}

impl QuantileSketch {
    /// An empty sketch.
    pub fn new() -> Self {
        Self::default()
    }

    /// Counts `v`; values that are not finite are left out.
    pub fn add(&mut self, v: f64) {
        if v.is_finite() {
            self.sketch.add(v);
        }
    }

    /// Counts every value of `other` too.
    pub fn merge(&mut self, other: &Self) {
        self.sketch
            .merge(&other.sketch)
            .expect("every QuantileSketch has the same configuration");
    }

    /// Number of values counted.
    pub fn count(&self) -> u64 {
        self.sketch.count() as u64
    }

    /// The `q` quantile (clamped to 0..=1) at the [`Quantile::Nearest`](super::Quantile::Nearest)
    /// position, rank `round((n - 1) q)`, within [`RELATIVE_ERROR`] of its magnitude; `None`
    /// when empty.
    pub fn quantile(&self, q: f64) -> Option<f64> {
        let n = self.count();
        let last = n.checked_sub(1)?;
        Some(self.at_rank((last as f64 * q.clamp(0.0, 1.0)).round() as u64))
    }

    /// The share of the values that are at most `t` (0 when empty), within the share of values
    /// `v` that lie within [`RELATIVE_ERROR`] `|v|` of `t`.
    pub fn share_at_most(&self, t: f64) -> f64 {
        let n = self.count();
        if n == 0 {
            return 0.0;
        }
        // The sketch's values by rank do not decrease: find the first rank read above t.
        let (mut lo, mut hi) = (0u64, n);
        while lo < hi {
            let mid = lo + (hi - lo) / 2;
            if self.at_rank(mid) <= t {
                lo = mid + 1;
            } else {
                hi = mid;
            }
        }
        lo as f64 / n as f64
    }

    /// The value of 0-based rank `rank` (< count): the minimum and maximum exactly, else its
    /// bin's value kept within them. The crate reads rank `floor((n - 1) q)`; asking half a
    /// rank above lands on `rank` whatever the rounding.
    fn at_rank(&self, rank: u64) -> f64 {
        let last = self.count() - 1;
        let (min, max) = (
            self.sketch.min().unwrap_or(f64::NAN),
            self.sketch.max().unwrap_or(f64::NAN),
        );
        if rank == 0 {
            return min;
        }
        if rank >= last {
            return max;
        }
        let q = ((rank as f64 + 0.5) / last as f64).min(1.0);
        self.sketch
            .quantile(q)
            .ok()
            .flatten()
            .map_or(f64::NAN, |v| v.clamp(min, max))
    }
}

/// The sketched distribution of a map's values and of their magnitudes (for robust spreads,
/// colour limits and shares near zero).
#[derive(Clone, Default)]
pub struct Distribution {
    /// The values.
    pub values: QuantileSketch,
    /// Their magnitudes `|v|`.
    pub magnitudes: QuantileSketch,
}

impl Distribution {
    /// Counts `v` (left out when not finite).
    pub fn add(&mut self, v: f64) {
        self.values.add(v);
        self.magnitudes.add(v.abs());
    }

    /// Counts every value of `other` too.
    pub fn merge(&mut self, other: &Self) {
        self.values.merge(&other.values);
        self.magnitudes.merge(&other.magnitudes);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::{quantiles, Quantile, SeededNoise};

    /// Samples of several shapes: normal, both signs with heavy tails (normal cubed), positive
    /// lognormal over eight decades, a few repeated values with zeros, and one value.
    fn samples() -> Vec<Vec<f64>> {
        let mut rng = SeededNoise::new(4);
        let normal: Vec<f64> = (0..50_000).map(|_| 3.0 + 0.2 * rng.gaussian()).collect();
        let cubed: Vec<f64> = (0..50_000).map(|_| rng.gaussian().powi(3) * 1e-3).collect();
        let lognormal: Vec<f64> = (0..50_000).map(|_| (4.0 * rng.gaussian()).exp()).collect();
        let repeated: Vec<f64> = (0..20_000)
            .map(|i| [0.0, -2.5, 0.0, 7.0, 1e-6][i % 5])
            .collect();
        vec![normal, cubed, lognormal, repeated, vec![-0.75]]
    }

    #[test]
    fn quantiles_are_within_the_stated_relative_error_of_exact_ones() {
        // Reference: the exact order statistics at the same (Nearest) positions, from
        // stats::quantiles (checked against numpy 1.24 in stats::tests).
        let qs = [0.0, 0.02, 0.25, 0.5, 0.75, 0.98, 1.0];
        for (s, values) in samples().into_iter().enumerate() {
            let mut sketch = QuantileSketch::new();
            values.iter().for_each(|&v| sketch.add(v));
            sketch.add(f64::NAN);
            assert_eq!(sketch.count(), values.len() as u64, "NaN is left out");
            let exact = quantiles(&mut values.clone(), qs, Quantile::Nearest).unwrap();
            for (q, x) in qs.into_iter().zip(exact) {
                let got = sketch.quantile(q).unwrap();
                // The bound, with a few units of round-off in the bin's logarithm.
                let bound = RELATIVE_ERROR * x.abs() * (1.0 + 1e-9);
                assert!(
                    (got - x).abs() <= bound,
                    "sample {s}, q {q}: {got} vs exact {x}"
                );
            }
            assert_eq!(sketch.quantile(0.0), Some(exact[0]), "the minimum is exact");
            assert_eq!(sketch.quantile(1.0), Some(exact[6]), "the maximum is exact");
        }
        assert_eq!(QuantileSketch::new().quantile(0.5), None);
    }

    #[test]
    fn shares_below_a_threshold_are_within_the_stated_bound() {
        // Reference: the exact count of values at most t (definition); the bound is the share
        // of values v with |v - t| <= RELATIVE_ERROR |v|.
        for values in samples() {
            let mut sketch = QuantileSketch::new();
            values.iter().for_each(|&v| sketch.add(v));
            let mut sorted = values.clone();
            let [q10, q50, q90] =
                quantiles(&mut sorted, [0.1, 0.5, 0.9], Quantile::Linear).unwrap();
            let n = values.len() as f64;
            for t in [q10, q50, q90, 1.0, -1.0, 0.0, 1e9] {
                let exact = values.iter().filter(|&&v| v <= t).count() as f64 / n;
                let near = values
                    .iter()
                    .filter(|&&v| (v - t).abs() <= RELATIVE_ERROR * v.abs())
                    .count() as f64
                    / n;
                let got = sketch.share_at_most(t);
                assert!(
                    (got - exact).abs() <= near + 1e-12,
                    "t {t}: {got} vs {exact}"
                );
            }
        }
        assert_eq!(QuantileSketch::new().share_at_most(1.0), 0.0);
    }

    #[test]
    fn merged_sketches_read_as_one_sketch_of_all_values() {
        // Bin counts are integers: merging in any order gives the same sketch (the determinism
        // the window study relies on), so every quantile is the same bits.
        let values = &samples()[1];
        let (mut whole, mut parts) = (QuantileSketch::new(), Vec::new());
        for chunk in values.chunks(7_000) {
            let mut part = QuantileSketch::new();
            chunk.iter().for_each(|&v| {
                part.add(v);
                whole.add(v);
            });
            parts.push(part);
        }
        let merge = |order: &mut dyn Iterator<Item = &QuantileSketch>| {
            let mut m = QuantileSketch::new();
            order.for_each(|p| m.merge(p));
            m
        };
        let (forward, backward) = (merge(&mut parts.iter()), merge(&mut parts.iter().rev()));
        for q in [0.01, 0.3, 0.5, 0.77, 0.99] {
            let bits = |s: &QuantileSketch| s.quantile(q).unwrap().to_bits();
            assert_eq!(bits(&forward), bits(&whole), "q {q}");
            assert_eq!(bits(&backward), bits(&whole), "q {q}");
        }
    }
}
