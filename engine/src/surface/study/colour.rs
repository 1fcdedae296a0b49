//! Spatially correlated picking noise (a smoothed or resampled grid): modelled as white noise
//! smoothed by a Gaussian of its own width along each grid axis (cells), `n = sigma (g * e)`
//! with `g = g_rows g_cols^T` and `sum g^2 = 1` (so `sigma` is the noise's standard deviation
//! per cell). Every linear functional of the fit with kernel `D` then sees white noise through
//! the coloured kernel `g * D`: its noise power is `sigma^2 sum (g * D)^2`, and the pooled
//! tests' cumulants are those of white noise through `g * D` (the same Gaussian quadratic
//! forms), so the white-noise machinery applies unchanged.
//!
//! The widths are read from the 3 x 3 fit residuals `r = R * n` (R the residual kernel): their
//! lag-one correlation along each grid axis, measured robustly as `(v+ - v-) / (v+ + v-)` with
//! `v+-` the squared normalised median absolute deviations of `r_i +- r_(i+1)` (Gnanadesikan &
//! Kettenring 1972, Biometrics 28:81; from memory), is matched to that of `g * R`, which grows
//! with the width along that axis (the two matched in turn); the standard deviation follows
//! from the residuals' robust scale over `|g * R|`. Noise correlated over more than
//! [`MAX_WIDTH`] cells cannot be told from structure on one horizon and is capped there; below
//! [`MIN_WIDTH`] on both axes the noise is white.

use crate::stats::{median_and_mad, MAD_TO_SD};
use ndarray::{Array2, ArrayView2};

/// Widest Gaussian (cells) the estimate may return.
pub const MAX_WIDTH: f64 = 2.0;

/// Narrowest Gaussian (cells) taken for correlation (our choice): structure raises the
/// residuals' lag-one correlation a little, and white noise on folded, faulted or channelled
/// horizons reads as 0.30 to 0.36 cells on the project's and a review's test horizons; at 0.4
/// cells a neighbour's weight is 4% of the centre's.
pub const MIN_WIDTH: f64 = 0.4;

/// Steps of the width search (cells).
const WIDTH_STEP: f64 = 0.02;

/// Rounds of the alternating search over the two axes.
const ROUNDS: usize = 3;

/// Most neighbour pairs [`measured_lag_one`] reads per axis (an even subsample of rows beyond).
const MAX_PAIRS: usize = 1 << 20;

/// A Gaussian colouring of white noise, separable along the grid axes.
#[derive(Clone, Debug, PartialEq)]
pub struct NoiseColour {
    /// The Gaussian's standard deviation in cells along a row (as the column index grows) and
    /// along a column (as the row index grows); 0 for none.
    pub width_cells: [f64; 2],
    /// The one-dimensional factors along a row and along a column (each `sum f^2 = 1`,
    /// centred, cut at three widths).
    pub factors: [Vec<f64>; 2],
}

/// A centred Gaussian factor of `width` cells (`sum f^2 = 1`); the impulse for width 0.
fn factor(width: f64) -> Vec<f64> {
    if width <= 0.0 {
        return vec![1.0];
    }
    let reach = (3.0 * width).ceil().max(1.0) as isize;
    let raw: Vec<f64> = (-reach..=reach)
        .map(|i| (-((i * i) as f64) / (2.0 * width * width)).exp())
        .collect();
    let norm = raw.iter().map(|v| v * v).sum::<f64>().sqrt();
    raw.iter().map(|v| v / norm).collect()
}

impl NoiseColour {
    /// The colouring by Gaussians of `along_rows` and `along_columns` cells (0 for none).
    pub fn gaussian(along_rows: f64, along_columns: f64) -> Self {
        Self {
            width_cells: [along_rows, along_columns],
            factors: [factor(along_rows), factor(along_columns)],
        }
    }

    /// The widths in words: `0.80 cells`, or `0.80 cells along rows, 0.00 along columns`.
    pub fn describe(&self) -> String {
        let [rows, columns] = self.width_cells;
        match (rows - columns).abs() < 0.05 {
            true => format!("{:.2} cells", (rows + columns) / 2.0),
            false => format!("{rows:.2} cells along rows, {columns:.2} along columns"),
        }
    }

    /// Cells the kernel reaches from its centre along a row and along a column.
    pub fn reach(&self) -> [usize; 2] {
        self.factors.clone().map(|f| f.len() / 2)
    }

    /// The full two-dimensional convolution `g * d` (larger by the reach on every side).
    pub fn colour(&self, d: &Array2<f64>) -> Array2<f64> {
        let [hc, hr] = self.reach();
        let (rows, cols) = d.dim();
        let mut along = Array2::<f64>::zeros((rows, cols + 2 * hc));
        for ((r, c), v) in d.indexed_iter() {
            for (j, g) in self.factors[0].iter().enumerate() {
                along[(r, c + j)] += g * v;
            }
        }
        let mut out = Array2::zeros((rows + 2 * hr, cols + 2 * hc));
        for ((r, c), v) in along.indexed_iter() {
            for (i, g) in self.factors[1].iter().enumerate() {
                out[(r + i, c)] += g * v;
            }
        }
        out
    }
}

/// Lag-one correlation of white noise seen through kernel `k` (`[row, col]`) along a row
/// (`axis` 0) or a column (1): `sum k(u) k(u + e) / sum k^2`.
fn lag_one(k: &Array2<f64>, axis: usize) -> f64 {
    let power: f64 = k.iter().map(|v| v * v).sum();
    let (dr, dc) = if axis == 0 { (0, 1) } else { (1, 0) };
    let shifted: f64 = k
        .indexed_iter()
        .filter_map(|((r, c), v)| k.get((r + dr, c + dc)).map(|w| v * w))
        .sum();
    shifted / power
}

/// The robust lag-one correlation of `residuals` (`[row, col]`, NaN where none) along a row and
/// along a column (see the module notes); `None` for an axis with fewer than 100 pairs.
pub fn measured_lag_one(residuals: ArrayView2<f64>) -> [Option<f64>; 2] {
    let step = residuals.len().div_ceil(MAX_PAIRS).max(1);
    [(0usize, 1usize), (1, 0)].map(|(dr, dc)| {
        let (mut sums, mut differences) = (Vec::new(), Vec::new());
        for r in (0..residuals.nrows()).step_by(step) {
            for c in 0..residuals.ncols() {
                let (v, next) = (residuals[(r, c)], residuals.get((r + dr, c + dc)));
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
    })
}

/// The Gaussian colouring whose residuals' lag-one correlations (through `residual_kernel`)
/// match `measured` along each axis: each width in turn the smallest on a [`WIDTH_STEP`] grid
/// up to [`MAX_WIDTH`] that reaches its axis's value given the other's ([`ROUNDS`] rounds);
/// `None` when both stay below [`MIN_WIDTH`] (white noise).
pub fn matching_colour(
    residual_kernel: &Array2<f64>,
    measured: [Option<f64>; 2],
) -> Option<NoiseColour> {
    let steps = (MAX_WIDTH / WIDTH_STEP).round() as usize;
    let mut widths = [0.0; 2];
    for _ in 0..ROUNDS {
        for axis in 0..2 {
            let Some(target) = measured[axis] else {
                continue;
            };
            let with = |w: f64| {
                let mut trial = widths;
                trial[axis] = w;
                NoiseColour::gaussian(trial[0], trial[1])
            };
            widths[axis] = (0..=steps)
                .map(|k| k as f64 * WIDTH_STEP)
                .find(|&w| lag_one(&with(w).colour(residual_kernel), axis) >= target)
                .unwrap_or(MAX_WIDTH);
        }
    }
    let widths = widths.map(|w| if w < MIN_WIDTH { 0.0 } else { w });
    (widths != [0.0; 2]).then(|| NoiseColour::gaussian(widths[0], widths[1]))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn colouring_is_a_normalised_separable_gaussian() {
        // sum g^2 = 1 (unit variance of the coloured noise), and the full convolution of a
        // single impulse is the kernel itself: g(a, b) = g1(a) g1(b), g1 ~ exp(-a^2 / 2 w^2)
        // (the definition).
        let c = NoiseColour::gaussian(0.8, 0.8);
        let mut impulse = Array2::zeros((1, 1));
        impulse[(0, 0)] = 1.0;
        let g = c.colour(&impulse);
        assert!((g.iter().map(|v| v * v).sum::<f64>() - 1.0).abs() < 1e-12);
        let [h, _] = c.reach();
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
        let r = crate::surface::window::centre_residual_kernel(&g, 3).unwrap();
        // (Below about 0.2 cells the Gaussian is an impulse: equal, not greater.)
        let white = lag_one(&r, 0);
        let mut last = white;
        for k in 1..=100 {
            let width = k as f64 * WIDTH_STEP;
            let now = lag_one(&NoiseColour::gaussian(width, 0.0).colour(&r), 0);
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
