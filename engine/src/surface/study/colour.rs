//! Spatially correlated picking noise (a smoothed or resampled grid): modelled as white noise
//! smoothed by a Gaussian of `width` cells, `n = sigma (g * e)` with `sum g^2 = 1` (so `sigma`
//! is the noise's standard deviation per cell). Every linear functional of the fit with kernel
//! `D` then sees white noise through the coloured kernel `g * D`: its noise power is
//! `sigma^2 sum (g * D)^2`, and the pooled tests' cumulants are those of white noise through
//! `g * D` (the same Gaussian quadratic forms), so the white-noise machinery applies unchanged.
//!
//! The width is read from the 3 x 3 fit residuals `r = R * n` (R the residual kernel): their
//! lag-one correlation along the grid axes, measured robustly as `(v+ - v-) / (v+ + v-)` with
//! `v+-` the squared normalised median absolute deviations of `r_i +- r_(i+1)` (Gnanadesikan &
//! Kettenring 1972, Biometrics 28:81; from memory), is matched to that of `g * R`, which grows
//! with the width; the standard deviation follows from the residuals' robust scale over
//! `|g * R|`. Noise correlated over more than [`MAX_WIDTH`] cells cannot be told from
//! structure on one horizon and is capped there.

use crate::stats::median_and_mad;
use ndarray::{Array2, ArrayView2};

/// Widest Gaussian (cells) the estimate may return.
pub const MAX_WIDTH: f64 = 2.0;

/// Steps of the width search (cells).
const WIDTH_STEP: f64 = 0.02;

/// Normalised median absolute deviation factor for Gaussian data.
const MAD_TO_SD: f64 = 1.4826;

/// A Gaussian colouring of white noise: `kernel` (odd square, `sum kernel^2 = 1`), separable.
#[derive(Clone, Debug, PartialEq)]
pub struct NoiseColour {
    /// The Gaussian's standard deviation in cells.
    pub width_cells: f64,
    /// The one-dimensional factor `g1` (`g = g1 g1^T`, `sum g1^2 = 1`), centred.
    pub factor: Vec<f64>,
}

impl NoiseColour {
    /// The Gaussian colouring of `width` cells (> 0), cut at three widths (at least one cell).
    pub fn gaussian(width: f64) -> Self {
        let reach = (3.0 * width).ceil().max(1.0) as isize;
        let raw: Vec<f64> = (-reach..=reach)
            .map(|i| (-((i * i) as f64) / (2.0 * width * width)).exp())
            .collect();
        let norm = raw.iter().map(|v| v * v).sum::<f64>().sqrt();
        Self {
            width_cells: width,
            factor: raw.iter().map(|v| v / norm).collect(),
        }
    }

    /// Cells the kernel reaches from its centre.
    pub fn reach(&self) -> usize {
        self.factor.len() / 2
    }

    /// The full two-dimensional convolution `g * d` (larger by the reach on every side).
    pub fn colour(&self, d: &Array2<f64>) -> Array2<f64> {
        let h = self.reach();
        let (rows, cols) = d.dim();
        let mut along = Array2::<f64>::zeros((rows, cols + 2 * h));
        for ((r, c), v) in d.indexed_iter() {
            for (j, g) in self.factor.iter().enumerate() {
                along[(r, c + j)] += g * v;
            }
        }
        let mut out = Array2::zeros((rows + 2 * h, cols + 2 * h));
        for ((r, c), v) in along.indexed_iter() {
            for (i, g) in self.factor.iter().enumerate() {
                out[(r + i, c)] += g * v;
            }
        }
        out
    }
}

/// Lag-one correlation of white noise seen through kernel `k` (`[row, col]`), the mean of the
/// two grid axes: `sum k(u) k(u + e) / sum k^2`.
fn lag_one(k: &Array2<f64>) -> f64 {
    let power: f64 = k.iter().map(|v| v * v).sum();
    let shifted = |dr: usize, dc: usize| -> f64 {
        k.indexed_iter()
            .filter_map(|((r, c), v)| k.get((r + dr, c + dc)).map(|w| v * w))
            .sum()
    };
    (shifted(0, 1) + shifted(1, 0)) / (2.0 * power)
}

/// Most neighbour pairs [`measured_lag_one`] reads (an even subsample of rows beyond).
const MAX_PAIRS: usize = 1 << 21;

/// The robust lag-one correlation of `residuals` (`[row, col]`, NaN where none) along both
/// grid axes pooled (see the module notes); `None` with fewer than 100 pairs.
pub fn measured_lag_one(residuals: ArrayView2<f64>) -> Option<f64> {
    let (mut sums, mut differences) = (Vec::new(), Vec::new());
    let step = (2 * residuals.len()).div_ceil(MAX_PAIRS).max(1);
    let rows = (0..residuals.nrows()).step_by(step);
    let cells = rows.flat_map(|r| (0..residuals.ncols()).map(move |c| (r, c)));
    for ((r, c), v) in cells.map(|at| (at, residuals[at])) {
        for next in [residuals.get((r, c + 1)), residuals.get((r + 1, c))] {
            if let Some(&w) = next.filter(|w| w.is_finite() && v.is_finite()) {
                sums.push(v + w);
                differences.push(v - w);
            }
        }
    }
    if sums.len() < 100 {
        return None;
    }
    let (_, plus) = median_and_mad(&mut sums)?;
    let (_, minus) = median_and_mad(&mut differences)?;
    let (plus, minus) = ((MAD_TO_SD * plus).powi(2), (MAD_TO_SD * minus).powi(2));
    (plus + minus > 0.0).then(|| (plus - minus) / (plus + minus))
}

/// The Gaussian colouring whose residuals' lag-one correlation (through `residual_kernel`)
/// matches `measured`: the smallest width on a [`WIDTH_STEP`] grid up to [`MAX_WIDTH`] that
/// reaches it (the widest when none does); `None` when white noise already reaches it.
pub fn matching_colour(residual_kernel: &Array2<f64>, measured: f64) -> Option<NoiseColour> {
    if lag_one(residual_kernel) >= measured {
        return None;
    }
    let steps = (MAX_WIDTH / WIDTH_STEP).round() as usize;
    let width = (1..=steps)
        .map(|k| k as f64 * WIDTH_STEP)
        .find(|&w| lag_one(&NoiseColour::gaussian(w).colour(residual_kernel)) >= measured)
        .unwrap_or(MAX_WIDTH);
    Some(NoiseColour::gaussian(width))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn colouring_is_a_normalised_separable_gaussian() {
        // sum g^2 = 1 (unit variance of the coloured noise), and the full convolution of a
        // single impulse is the kernel itself: g(a, b) = g1(a) g1(b), g1 ~ exp(-a^2 / 2 w^2)
        // (the definition).
        let c = NoiseColour::gaussian(0.8);
        let mut impulse = Array2::zeros((1, 1));
        impulse[(0, 0)] = 1.0;
        let g = c.colour(&impulse);
        assert!((g.iter().map(|v| v * v).sum::<f64>() - 1.0).abs() < 1e-12);
        let h = c.reach();
        let ratio = g[(h, h + 1)] / g[(h, h)];
        assert!((ratio - (-1.0 / (2.0 * 0.64f64)).exp()).abs() < 1e-12);
        assert!((g[(h + 1, h + 1)] / g[(h, h)] - ratio * ratio).abs() < 1e-12);
    }

    #[test]
    fn lag_one_grows_with_the_width() {
        // Smoothing more correlates neighbours more (monotone, which the search relies on),
        // for the residual kernel of a 3 x 3 quadric fit (identity minus the Evans kernel
        // of f, REFERENCES.md section 3).
        let g = crate::grid::GridGeometry::survey(
            (0.0, 0.0),
            90.0,
            (25.0, 25.0),
            (9, 9),
            String::new(),
        );
        let mut r = -crate::surface::window::full_window_kernels(&g, 3).unwrap()[5].clone();
        r[(1, 1)] += 1.0;
        // (Below about 0.2 cells the Gaussian is an impulse: equal, not greater.)
        let white = lag_one(&r);
        let mut last = white;
        for k in 1..=100 {
            let width = k as f64 * WIDTH_STEP;
            let now = lag_one(&NoiseColour::gaussian(width).colour(&r));
            assert!(now >= last, "width {width}: {now} after {last}");
            assert!(
                width < 0.2 || now > last,
                "width {width}: {now} after {last}"
            );
            last = now;
        }
        assert!(last > white + 0.5, "{white} to {last}");
    }
}
