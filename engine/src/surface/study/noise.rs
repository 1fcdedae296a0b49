//! The horizon's noise: the normalised median absolute deviation of the centre residuals of
//! full 3 x 3 quadric fits, corrected for the centre's leverage (see the study's notes).

use crate::error::Result;
use crate::grid::GridGeometry;
use crate::stats::median_and_mad;
use crate::surface::window::{Sample, WindowFit, WindowSpec};
use ndarray::ArrayView2;

/// The horizon's noise estimate.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NoiseEstimate {
    /// Standard deviation of the picking noise, in the depth unit (CRS units).
    pub sigma: f64,
    /// Residuals used.
    pub n: usize,
}

/// Name of the noise estimator, for reports.
pub const NOISE_ESTIMATOR: &str =
    "1.4826 x median absolute deviation of 3 x 3 quadric-fit centre residuals / sqrt(1 - leverage)";

/// Rows per batch of the residuals' fit.
const RESIDUAL_BATCH_ROWS: usize = 256;

/// Estimates the noise of `depth` (see the module notes); `None` without full 3 x 3 windows.
pub fn estimate_noise<T: Sample>(
    depth: ArrayView2<T>,
    geometry: &GridGeometry,
) -> Result<Option<NoiseEstimate>> {
    let spec = WindowSpec {
        size: 3,
        min_valid: 1.0,
    };
    let leverage = crate::surface::window::full_window_kernels(geometry, 3)?[5][(1, 1)];
    let fit = WindowFit::new(depth, geometry, &spec, &[])?;
    // One residual a fitted cell, gathered batch by batch: the one grid-sized array held.
    let fitted = depth.iter().filter(|v| v.widen().is_finite()).count();
    let mut residuals: Vec<f64> = Vec::with_capacity(fitted);
    let batch = RESIDUAL_BATCH_ROWS.max(fit.tile_rows());
    for first_row in (0..depth.nrows()).step_by(batch) {
        let tiles = fit.map_tiles(first_row..first_row + batch, |tile| {
            let at = |i: usize| (tile.first_row + i / tile.cols, i % tile.cols);
            (tile.cells.iter().enumerate())
                .filter_map(|(i, c)| c.map(|(q, _)| depth[at(i)].widen() - q.f))
                .collect::<Vec<f64>>()
        });
        residuals.extend(tiles.into_iter().flatten());
    }
    if residuals.is_empty() {
        return Ok(None);
    }
    let (_, mad) = median_and_mad(&mut residuals).unwrap_or((f64::NAN, f64::NAN));
    Ok(Some(NoiseEstimate {
        sigma: 1.4826 * mad / (1.0 - leverage).sqrt(),
        n: residuals.len(),
    }))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::surface::study::tests::{fold, grid, horizon};

    #[test]
    fn noise_estimate_recovers_a_known_level() {
        // The check: within 10% of the white noise added to a smooth surface.
        let g = grid(120);
        for sigma in [0.2, 1.0, 3.0] {
            let shapes = vec![
                fold((1000.0, 9000.0), 20.0, 600.0, true),
                fold((1700.0, 8500.0), 70.0, 900.0, false),
            ];
            let (z, _) = horizon(&g, shapes, sigma, 7);
            let est = estimate_noise(z.view(), &g).unwrap().unwrap();
            assert!(
                (est.sigma / sigma - 1.0).abs() < 0.1,
                "sigma {sigma}: estimated {}",
                est.sigma
            );
        }
    }
}
