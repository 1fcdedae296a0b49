//! The engine's order statistics, in one place: quantiles ([`quantile`], [`quantiles`]) under
//! a stated definition ([`Quantile`]), the [`median`] and the median absolute deviation
//! ([`median_and_mad`]); and the seeded noise source of its Monte Carlo estimates (the window
//! study's injected noise) and of generated test data ([`SeededNoise`]).
//!
//! Quantiles follow the sample positions of Hyndman & Fan (1996, "Sample quantiles in
//! statistical packages", The American Statistician 50:361) definition 7, the default of numpy
//! and R: on the ascending sample `x[0] <= ... <= x[n-1]` the `q` quantile sits at position
//! `h = (n - 1) q`. [`Quantile`] says whether it is interpolated there or taken from the
//! nearest or the lower order statistic. Sorting is by IEEE total order, so a NaN (positive)
//! sorts last: callers pass finite values.
//!
//! Directional and axial statistics are in [`circular`]; streaming quantiles of values too
//! many to hold (the window study's maps) in [`sketch`].

pub mod circular;
pub mod mixture;
pub mod rank;
pub mod sketch;

/// How a quantile is read at the Hyndman & Fan type-7 position `h = (n - 1) q` of the
/// ascending sample `x`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Quantile {
    /// `x[floor h]` and `x[floor h + 1]` interpolated linearly: Hyndman & Fan type 7, numpy's
    /// default (`numpy.quantile(x, q)`, `method="linear"`), R's default; computed as numpy's
    /// `_lerp` does.
    Linear,
    /// `x[round h]`, a half rounded up: the order statistic nearest the type-7 position, so
    /// always a value of the sample. numpy's `method="nearest"` agrees except when `h` is
    /// exactly half-way between two ranks, where numpy takes the even one. The engine's robust
    /// limits use it: colour clipping, corridor percentiles, report figures, the default
    /// vector scale, the hillshade exaggeration and the window study's spread.
    Nearest,
    /// `x[floor h]`: numpy's `method="lower"`. The render report's typical vector magnitude
    /// (its 95th percentile) uses it.
    Lower,
}

impl Quantile {
    /// The `q` quantile (clamped to 0..=1) of the ascending, non-empty `sorted`.
    fn read(self, sorted: &[f64], q: f64) -> f64 {
        let last = sorted.len() - 1;
        let h = last as f64 * q.clamp(0.0, 1.0);
        match self {
            Quantile::Nearest => sorted[(h.round() as usize).min(last)],
            Quantile::Lower => sorted[(h.floor() as usize).min(last)],
            Quantile::Linear => {
                let i = (h.floor() as usize).min(last);
                let (a, b) = (sorted[i], sorted[(i + 1).min(last)]);
                let t = h - i as f64;
                let diff = b - a;
                if t >= 0.5 {
                    b - diff * (1.0 - t)
                } else {
                    a + diff * t
                }
            }
        }
    }
}

/// The quantiles `qs` (each clamped to 0..=1) of `values`, read as `method` says; `None` when
/// `values` is empty. `values` is sorted ascending in place (IEEE total order), once for all
/// the quantiles, and stays sorted for the caller.
pub fn quantiles<const N: usize>(
    values: &mut [f64],
    qs: [f64; N],
    method: Quantile,
) -> Option<[f64; N]> {
    if values.is_empty() {
        return None;
    }
    values.sort_by(f64::total_cmp);
    let sorted = &*values;
    Some(qs.map(|q| method.read(sorted, q)))
}

/// The `q` quantile (clamped to 0..=1) of `values`, read as `method` says; `None` when empty.
/// `values` is sorted ascending in place, as by [`quantiles`].
pub fn quantile(values: &mut [f64], q: f64, method: Quantile) -> Option<f64> {
    quantiles(values, [q], method).map(|[v]| v)
}

/// Median of `values` (reordered in place): the middle value, or the mean of the two middle
/// values for an even count (the usual definition, as `numpy.median`; the [`Quantile::Linear`]
/// quantile at 0.5); `None` when empty. Linear time (selection, not a full sort).
pub fn median(values: &mut [f64]) -> Option<f64> {
    median_by(values, |v| v)
}

/// The [`median`] of `key` over `values` (reordered in place).
fn median_by<T: Copy>(values: &mut [T], key: impl Fn(T) -> f64) -> Option<f64> {
    let n = values.len();
    if n == 0 {
        return None;
    }
    let (lower, upper, _) =
        values.select_nth_unstable_by(n / 2, |a, b| key(*a).total_cmp(&key(*b)));
    let upper = key(*upper);
    if n % 2 == 1 {
        return Some(upper);
    }
    let below = lower
        .iter()
        .map(|v| key(*v))
        .fold(f64::NEG_INFINITY, f64::max);
    Some(0.5 * (below + upper))
}

/// The factor that turns a median absolute deviation into a standard deviation for normal
/// data (`1 / Phi^-1(3/4)`; Hampel 1974, J. Amer. Statist. Assoc. 69:383).
pub const MAD_TO_SD: f64 = 1.4826;

/// The [`median`] of `values` and their median absolute deviation from it (MAD,
/// `median |x - median|`, unscaled: 1.4826 MAD estimates the standard deviation of normal data,
/// Hampel 1974, J. Amer. Statist. Assoc. 69:383); `None` when empty. `values` is reordered in
/// place, so a grid-sized sample needs no second copy.
pub fn median_and_mad(values: &mut [f64]) -> Option<(f64, f64)> {
    median_and_mad_by(values, |v| v)
}

fn median_and_mad_by<T: Copy>(values: &mut [T], key: impl Fn(T) -> f64) -> Option<(f64, f64)> {
    let centre = median_by(values, &key)?;
    let mad = median_by(values, |v| (key(v) - centre).abs())?;
    Some((centre, mad))
}

/// A grid-sized sample of finite values for order statistics, held as `f32` when every value
/// is exactly a float32 (a grid read from float32: half the memory), else as `f64`; the
/// statistics are the same either way (each value widens exactly).
pub enum FiniteSample {
    /// Every value is a float32.
    Narrow(Vec<f32>),
    /// Some value is not.
    Wide(Vec<f64>),
}

impl FiniteSample {
    /// The finite values of `values` (read twice: once to choose the storage).
    pub fn of<I: Iterator<Item = f64>>(values: impl Fn() -> I) -> Self {
        let finite = || values().filter(|v| v.is_finite());
        if finite().all(|v| f64::from(v as f32) == v) {
            Self::Narrow(finite().map(|v| v as f32).collect())
        } else {
            Self::Wide(finite().collect())
        }
    }

    /// Number of values.
    pub fn len(&self) -> usize {
        match self {
            Self::Narrow(v) => v.len(),
            Self::Wide(v) => v.len(),
        }
    }

    /// Whether there is no value.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The [`median`] (the values are reordered).
    pub fn median(&mut self) -> Option<f64> {
        match self {
            Self::Narrow(v) => median_by(v, f64::from),
            Self::Wide(v) => median(v),
        }
    }

    /// The [`median_and_mad`] (the values are reordered).
    pub fn median_and_mad(&mut self) -> Option<(f64, f64)> {
        match self {
            Self::Narrow(v) => median_and_mad_by(v, f64::from),
            Self::Wide(v) => median_and_mad(v),
        }
    }
}

/// SplitMix64's increment of the state per draw (the odd integer nearest 2^64 / golden ratio).
const GOLDEN_GAMMA: u64 = 0x9E37_79B9_7F4A_7C15;

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

    /// Moves on by `draws` draws of [`Self::next_u64`] at once (SplitMix64's state advances by
    /// a fixed increment per draw), so any part of a stream can be generated on its own:
    /// [`Self::gaussian`] takes two draws.
    pub fn skip(&mut self, draws: u64) {
        self.state = self.state.wrapping_add(draws.wrapping_mul(GOLDEN_GAMMA));
    }

    /// Next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(GOLDEN_GAMMA);
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

    /// The sample of the numpy checks below (sorted: -4, -1.5, 0, 1, 2.25, 3.2, 5.125, 6, 7.75,
    /// 8.5, 10.5; type-7 positions h = 10 q).
    const X: [f64; 11] = [3.2, -1.5, 7.75, 0.0, 2.25, 10.5, -4.0, 5.125, 1.0, 8.5, 6.0];

    #[test]
    fn linear_quantiles_are_numpys_default() {
        // numpy 1.24: np.quantile(X, [0.02, 0.25, 0.75, 0.95, 0.98]) (method="linear")
        // -> [-3.5, 0.5, 6.875, 9.5, 10.100000000000001].
        let got = quantiles(
            &mut X.to_vec(),
            [0.02, 0.25, 0.75, 0.95, 0.98],
            Quantile::Linear,
        );
        assert_eq!(got, Some([-3.5, 0.5, 6.875, 9.5, 10.100000000000001]));
        assert_eq!(quantile(&mut X.to_vec(), 0.5, Quantile::Linear), Some(3.2));
        assert_eq!(quantile(&mut X.to_vec(), 1.0, Quantile::Linear), Some(10.5));
    }

    #[test]
    fn nearest_quantiles_are_numpys_nearest_off_the_halves() {
        // numpy 1.24: np.quantile(X, [0.02, 0.1, 0.5, 0.9, 0.98], method="nearest")
        // -> [-4.0, -1.5, 3.2, 8.5, 10.5] (positions 0.2, 1, 5, 9, 9.8: no half-way tie).
        let got = quantiles(
            &mut X.to_vec(),
            [0.02, 0.1, 0.5, 0.9, 0.98],
            Quantile::Nearest,
        );
        assert_eq!(got, Some([-4.0, -1.5, 3.2, 8.5, 10.5]));
        // Half-way (by hand): q = 0.25 sits at h = 2.5, rounded up to rank 3 (1.0), where
        // numpy's "nearest" takes the even rank 2 (0.0).
        assert_eq!(
            quantile(&mut X.to_vec(), 0.25, Quantile::Nearest),
            Some(1.0)
        );
    }

    #[test]
    fn lower_quantiles_are_numpys_lower() {
        // numpy 1.24: np.quantile(X, [0.02, 0.25, 0.75, 0.95, 0.98], method="lower")
        // -> [-4.0, 0.0, 6.0, 8.5, 8.5].
        let got = quantiles(
            &mut X.to_vec(),
            [0.02, 0.25, 0.75, 0.95, 0.98],
            Quantile::Lower,
        );
        assert_eq!(got, Some([-4.0, 0.0, 6.0, 8.5, 8.5]));
    }

    #[test]
    fn quantiles_sort_in_place_and_refuse_empty_samples() {
        let mut v = X.to_vec();
        quantile(&mut v, 0.5, Quantile::Nearest);
        assert!(v.windows(2).all(|w| w[0] <= w[1]));
        assert_eq!(quantile(&mut [], 0.5, Quantile::Linear), None);
        // A single value is every quantile.
        assert_eq!(
            quantiles(&mut [7.0], [0.0, 0.5, 1.0], Quantile::Linear),
            Some([7.0; 3])
        );
    }

    #[test]
    fn median_of_odd_and_even_counts() {
        // Hand-checkable: 3 is the middle of (5, 1, 3); (4, 1, 3, 2) has middles 2 and 3.
        assert_eq!(median(&mut [5.0, 1.0, 3.0]), Some(3.0));
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median(&mut []), None);
    }

    #[test]
    fn median_and_mad_match_numpy() {
        // numpy 1.24: m = np.median(X) -> 3.2, np.median(np.abs(X - m)) -> 3.2;
        // y = [4, 1, 9, 2.5, 7, 3]: np.median(y) -> 3.5, np.median(np.abs(y - 3.5)) -> 1.75.
        assert_eq!(median_and_mad(&mut X.to_vec()), Some((3.2, 3.2)));
        assert_eq!(
            median_and_mad(&mut [4.0, 1.0, 9.0, 2.5, 7.0, 3.0]),
            Some((3.5, 1.75))
        );
        assert_eq!(median_and_mad(&mut []), None);
    }

    #[test]
    fn finite_samples_give_the_same_statistics_in_either_storage() {
        // The numpy figures above, through a sample: y holds float32 values (held narrow),
        // y + 1e-9 does not (held wide); NaN and infinities are left out.
        let y = [4.0, 1.0, f64::NAN, 9.0, 2.5, f64::INFINITY, 7.0, 3.0];
        let mut narrow = FiniteSample::of(|| y.iter().copied());
        assert!(matches!(narrow, FiniteSample::Narrow(_)));
        assert_eq!(narrow.len(), 6);
        assert_eq!(narrow.median_and_mad(), Some((3.5, 1.75)));
        assert_eq!(narrow.median(), Some(3.5));
        let shifted: Vec<f64> = y.iter().map(|v| v + 1e-9).collect();
        let mut wide = FiniteSample::of(|| shifted.iter().copied());
        assert!(matches!(wide, FiniteSample::Wide(_)));
        let (m, mad) = wide.median_and_mad().unwrap();
        assert!((m - (3.5 + 1e-9)).abs() < 1e-12 && (mad - 1.75).abs() < 1e-12);
        // Random float32 data: both storages give the same bits as the f64 functions.
        let mut rng = SeededNoise::new(5);
        let data: Vec<f64> = (0..1001)
            .map(|_| f64::from((100.0 * rng.gaussian()) as f32))
            .collect();
        let expected = median_and_mad(&mut data.clone());
        assert_eq!(
            FiniteSample::of(|| data.iter().copied()).median_and_mad(),
            expected
        );
        assert_eq!(FiniteSample::Wide(data.clone()).median_and_mad(), expected);
        assert!(FiniteSample::of(std::iter::empty).is_empty());
    }

    #[test]
    fn skipping_draws_continues_the_same_stream() {
        // SplitMix64 (Steele, Lea & Flood 2014): the state after k draws is seed + k gamma, so
        // a skip of k must give the draws that k calls of next_u64 would have led to.
        let mut walked = SeededNoise::new(99);
        for _ in 0..1001 {
            walked.next_u64();
        }
        let mut skipped = SeededNoise::new(99);
        skipped.skip(1001);
        let (a, b): (Vec<u64>, Vec<u64>) = (0..5)
            .map(|_| (walked.next_u64(), skipped.next_u64()))
            .unzip();
        assert_eq!(a, b);
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
