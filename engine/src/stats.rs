//! Small order statistics shared across the engine, and the seeded noise source of its Monte
//! Carlo estimates (the window study's injected noise) and of generated test data.

/// Median of `values` (reordered in place): the middle value, or the mean of the two middle
/// values for an even count (the usual definition, as `numpy.median`); `None` when empty.
/// Linear time (selection, not a full sort).
pub fn median(values: &mut [f64]) -> Option<f64> {
    let n = values.len();
    if n == 0 {
        return None;
    }
    let (lower, upper, _) = values.select_nth_unstable_by(n / 2, f64::total_cmp);
    let upper = *upper;
    if n % 2 == 1 {
        return Some(upper);
    }
    let below = lower.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    Some(0.5 * (below + upper))
}

/// Seeded pseudo-random numbers (SplitMix64, Steele, Lea & Flood 2014, OOPSLA), so the window
/// study's injected noise, the demo data and the tests are reproducible on every platform
/// without depending on a crate's stream.
#[derive(Clone, Debug)]
pub struct SeededNoise {
    state: u64,
}

impl SeededNoise {
    /// A generator started from `seed`.
    pub fn new(seed: u64) -> Self {
        Self { state: seed }
    }

    /// Next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Standard normal deviate (Box & Muller 1958).
    pub fn gaussian(&mut self) -> f64 {
        let u1 = 1.0 - self.uniform();
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_of_odd_and_even_counts() {
        // Hand-checkable: 3 is the middle of (5, 1, 3); (4, 1, 3, 2) has middles 2 and 3.
        assert_eq!(median(&mut [5.0, 1.0, 3.0]), Some(3.0));
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median(&mut []), None);
    }

    #[test]
    fn noise_is_standard_normal() {
        // Sample mean and variance of 200 000 deviates: standard errors 0.0022 and 0.0032.
        let mut n = SeededNoise::new(7);
        let xs: Vec<f64> = (0..200_000).map(|_| n.gaussian()).collect();
        let mean = xs.iter().sum::<f64>() / xs.len() as f64;
        let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / xs.len() as f64;
        assert!(
            mean.abs() < 0.01 && (var - 1.0).abs() < 0.015,
            "{mean} {var}"
        );
    }
}
