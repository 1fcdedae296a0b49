//! The horizon's noise: the normalised median absolute deviation of the centre residuals of
//! full 3 x 3 quadric fits, corrected for the centre's leverage (see the study's notes), and
//! the periodic footprint in those residuals ([`super::footprint`]). Where footprint is found,
//! the white part of the noise is read from the residuals' spectrum outside its peaks, since
//! the stripes would swell the median absolute deviation. Where the residuals' spectrum is
//! not white, the noise is modelled as correlated ([`super::colour`]): its Gaussian width from
//! the residuals' neighbour correlation, its level from their scale over the coloured residual
//! kernel's gain.

use super::colour::{self, NoiseColour};
use super::footprint::{self, AxisGeometry, Footprint};
use crate::error::Result;
use crate::grid::GridGeometry;
use crate::stats::{median_and_mad, MAD_TO_SD};
use crate::surface::window::{centre_residual_kernel, Sample, WindowFit, WindowSpec};
use ndarray::{Array2, ArrayView2};

/// The horizon's noise estimate.
#[derive(Clone, Debug, PartialEq)]
pub struct NoiseEstimate {
    /// Standard deviation of the white part of the picking noise, in the depth unit (CRS
    /// units).
    pub sigma: f64,
    /// Residuals used.
    pub n: usize,
    /// Periodic footprint found, strongest first (noise too, of known covariance).
    pub footprints: Vec<Footprint>,
    /// The residual spectrum's short-wavelength power as a share of its mid-wavelength power
    /// ([`footprint::SpectrumReading::short_wave_share`]; about 1 for white noise).
    pub short_wave_share: Option<f64>,
    /// The Gaussian colouring of correlated noise ([`colour`]); `None` for white noise.
    pub colour: Option<NoiseColour>,
}

impl NoiseEstimate {
    /// The noise model's name for reports: `white`, `white + footprint` when stripes were
    /// found, or `correlated, modelled as white` when the residual spectrum is not white.
    pub fn model_name(&self) -> String {
        match (&self.colour, self.correlated(), self.footprints.is_empty()) {
            (Some(c), _, _) => format!("correlated (Gaussian, {})", c.describe()),
            (None, true, _) => "correlated, modelled as white".into(),
            (None, false, true) => "white".into(),
            (None, false, false) => "white + footprint".into(),
        }
    }

    /// Whether the noise is correlated: a colouring was found, or the residuals' spectrum falls
    /// off at short wavelengths (see [`footprint::WHITE_SHORT_WAVE_SHARE`]).
    pub fn correlated(&self) -> bool {
        self.colour.is_some() || self.red_spectrum()
    }

    fn red_spectrum(&self) -> bool {
        self.short_wave_share
            .is_some_and(|share| share < footprint::WHITE_SHORT_WAVE_SHARE)
    }

    /// The note a study on this noise carries, if any: how correlated noise is modelled, and
    /// the caution that the recommendation is likely too small where it is modelled as white
    /// or capped at the widest colouring.
    pub fn caution(&self) -> Option<String> {
        let spectrum = self.short_wave_share.filter(|_| self.red_spectrum()).map(|share| format!(
            "the fit residuals' short-wavelength power is {share:.2} of their mid-wavelength power (white noise gives about 1), so footprint is not looked for; "
        )).unwrap_or_default();
        let model = match &self.colour {
            Some(c) if c.width_cells.iter().any(|&w| w >= colour::MAX_WIDTH) => format!(
                "the picking noise is spatially correlated and modelled as white noise smoothed by a Gaussian ({}), the widest the study can tell from structure, so the noise may be underestimated and the recommended window too small",
                c.describe()
            ),
            Some(c) => format!(
                "the picking noise is spatially correlated (neighbouring residuals), modelled as white noise smoothed by a Gaussian ({})",
                c.describe()
            ),
            None if self.red_spectrum() => "the picking noise may be spatially correlated (a smoothed or resampled grid), or the residuals are structure (a nearly noise-free or rough horizon); the two cannot be told apart here, so the noise is modelled as white, and if it is correlated the recommended window is too small".to_string(),
            None => return None,
        };
        Some(format!("{spectrum}{model}"))
    }
}

/// Name of the noise estimator, for reports.
pub const NOISE_ESTIMATOR: &str =
    "1.4826 x median absolute deviation of 3 x 3 quadric-fit centre residuals / their noise gain (sqrt(1 - leverage) for white noise, |g * R| for correlated)";

/// Least short-wave share (see [`footprint::SpectrumReading::short_wave_share`]) below which a
/// colouring is looked for (our choice: white noise reads 0.75 to 1.3, so this alone does not
/// call noise correlated; the level test below decides).
const COLOUR_SHORT_WAVE_SHARE: f64 = 0.9;

/// Largest ratio (either way) between the noise levels a colouring implies through the 3 x 3
/// and the spectrum's 9 x 9 fit residuals for it to be taken (our choice: on correlated noise of 0.4 to
/// 1.5 cells over folds of 200 m and wider the two agree within 8%; on a review's rough
/// horizons (folds of 250 m and more, domes), noise-free or with correlated noise small
/// beside the structure, 1.37 to 6.9, and white noise there gives the better window).
const LEVEL_AGREEMENT: f64 = 1.25;

/// Rows per batch of the residuals' fit.
const RESIDUAL_BATCH_ROWS: usize = 256;

/// Window edge length of the fits whose residuals' spectrum is read for footprint.
const SPECTRUM_WINDOW: usize = 9;

/// Least share of valid cells in the spectrum's fits: scattered nulls (busts set null) would
/// leave few full 9 x 9 windows, and a window with a few nulls filters nearly as a full one.
const SPECTRUM_MIN_VALID: f64 = 0.9;

/// The centre residual `z - f` of every cell's `size` x `size` fit with at least `min_valid`
/// of the window valid, row-major (NaN where none), gathered batch by batch: a grid-sized
/// array.
fn centre_residuals<T: Sample>(
    depth: ArrayView2<T>,
    geometry: &GridGeometry,
    size: usize,
    min_valid: f64,
) -> Result<Vec<f64>> {
    let spec = WindowSpec { size, min_valid };
    let fit = WindowFit::new(depth, geometry, &spec, &[])?;
    let mut grid: Vec<f64> = Vec::with_capacity(depth.len());
    let batch = RESIDUAL_BATCH_ROWS.max(fit.tile_rows());
    for first_row in (0..depth.nrows()).step_by(batch) {
        let tiles = fit.map_tiles(first_row..first_row + batch, |tile| {
            let at = |i: usize| (tile.first_row + i / tile.cols, i % tile.cols);
            (tile.cells.iter().enumerate())
                .map(|(i, c)| c.map_or(f64::NAN, |(q, _)| depth[at(i)].widen() - q.f))
                .collect::<Vec<f64>>()
        });
        grid.extend(tiles.into_iter().flatten());
    }
    Ok(grid)
}

/// Estimates the noise of `depth` (see the module notes); `None` without full 3 x 3 windows.
pub fn estimate_noise<T: Sample>(
    depth: ArrayView2<T>,
    geometry: &GridGeometry,
) -> Result<Option<NoiseEstimate>> {
    let residual_3 = centre_residual_kernel(geometry, 3)?;
    let residuals = Array2::from_shape_vec(depth.dim(), centre_residuals(depth, geometry, 3, 1.0)?)
        .expect("rows x cols residuals");
    let mut finite: Vec<f64> = residuals
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .collect();
    if finite.is_empty() {
        return Ok(None);
    }
    let (_, mad) = median_and_mad(&mut finite).unwrap_or((f64::NAN, f64::NAN));
    let n = finite.len();
    drop(finite);
    // Stripes constant along one axis are fitted exactly by a 3 x 3 quadric (three values
    // along the other axis, three coefficients), so the spectrum reads 9 x 9 residuals (whose gain for stripes of 2 to 6 cells is 0.7 to 1.3).
    let size = SPECTRUM_WINDOW.min(depth.nrows()).min(depth.ncols());
    let grid = Array2::from_shape_vec(
        depth.dim(),
        centre_residuals(depth, geometry, size, SPECTRUM_MIN_VALID)?,
    )
    .expect("rows x cols residuals");
    let residual_kernel = centre_residual_kernel(geometry, size)?;
    let g = &geometry.geo_transform;
    let (sx, sy) = geometry.spacing();
    let axes = AxisGeometry {
        residual_kernel,
        axes: [
            (
                geometry.column_axis_azimuth(),
                sx * geometry.metres_per_unit,
            ),
            (
                g[2].atan2(g[5]).to_degrees().rem_euclid(360.0),
                sy * geometry.metres_per_unit,
            ),
        ],
    };
    let reading = footprint::detect(&grid, &axes);
    // The residuals' robust scale over the residual kernel's gain for the noise model:
    // `|R| = sqrt(1 - leverage)` for white noise, `|g * R|` for coloured.
    // Footprint (on a white spectrum) and correlation are not modelled together: stripes of
    // long period correlate neighbours too.
    let gain = |k: &Array2<f64>| k.iter().map(|v| v * v).sum::<f64>().sqrt();
    let colour = match reading.footprints.is_empty()
        && reading
            .short_wave_share
            .is_some_and(|share| share < COLOUR_SHORT_WAVE_SHARE)
    {
        true => colour::matching_colour(&residual_3, colour::measured_lag_one(residuals.view())),
        false => None,
    };
    drop(residuals);
    let level =
        |c: &NoiseColour, mad: f64, kernel: &Array2<f64>| MAD_TO_SD * mad / gain(&c.colour(kernel));
    // The colouring must explain the spectrum's larger-window residuals too: noise gives the
    // same level through both windows' kernels, structure (whose misfit grows with the window,
    // and which correlates neighbouring residuals as smoothed noise does) a larger one; then
    // the noise cannot be told from structure and is modelled as white.
    let colour = colour.filter(|c| {
        let mut larger: Vec<f64> = grid.iter().copied().filter(|v| v.is_finite()).collect();
        median_and_mad(&mut larger).is_some_and(|(_, mad_9)| {
            let ratio = level(c, mad_9, &axes.residual_kernel) / level(c, mad, &residual_3);
            ratio.ln().abs() <= LEVEL_AGREEMENT.ln()
        })
    });
    drop(grid);
    let sigma = match (
        &colour,
        reading.footprints.is_empty(),
        reading.white_variance,
    ) {
        (Some(c), _, _) => level(c, mad, &residual_3),
        (None, false, Some(v)) => v.sqrt(),
        // The centre entry of R is 1 - leverage.
        _ => MAD_TO_SD * mad / residual_3[(1, 1)].sqrt(),
    };
    Ok(Some(NoiseEstimate {
        sigma,
        n,
        short_wave_share: reading.short_wave_share,
        footprints: reading.footprints,
        colour,
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
