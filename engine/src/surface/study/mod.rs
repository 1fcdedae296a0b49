//! Window-size study: how picking noise and structural detail trade off with the window on the
//! user's own horizon, a map that chooses the window cell by cell, and the single window to use.
//! Pure computation on a positive-down depth grid.
//!
//! - Noise of the horizon: the residuals `r = z - f` at the centres of full 3 x 3 quadric fits
//!   have variance `sigma^2 (1 - h)`, `h` the centre's leverage (the centre weight of the `f`
//!   kernel; hat matrices are idempotent). The estimator is the normalised median absolute
//!   deviation of those residuals, `1.4826 MAD / sqrt(1 - h)` (robust to outlier picks; Hampel
//!   1974, from memory). Structure beyond quadratic also enters the residuals, so on rough
//!   horizons this is an upper bound.
//! - Attribute noise per window: the horizon plus seeded white noise of the estimated level is
//!   fitted again and the RMS change of the attribute measured (exact for the linear
//!   coefficients in expectation, and valid for the nonlinear attributes too).
//! - Per-cell window (the adaptive map): a pooled form of Lepski's sequential test (Lepski 1991,
//!   Theory Probab. Appl. 35:454; from memory). From the smallest window up, window k is kept
//!   while the mean, over the `(2 POOL_RADIUS + 1)^2` box around the cell, of the squared change
//!   of the fitted derivatives from window k-1 stays within its step's threshold times its
//!   expectation under noise alone. The derivatives are those the attribute is made of
//!   ([`DerivativeOrder`]: the Hessian for curvatures, the gradient for dip): they are linear in
//!   the data, so noise leaves them unbiased and their noise statistics follow exactly from the
//!   window kernels; comparing a nonlinear attribute itself (k_pos, curvedness) would read its
//!   noise-induced bias, which shrinks with the window, as structure. Pooling is our choice:
//!   tests on single cells (the intersection of confidence intervals, Katkovnik 1999, IEEE
//!   Trans. Signal Process. 47:2567, or Lepski's test per cell) stop at a small window by chance
//!   often enough that those cells, whose noise is hundreds of times the largest window's,
//!   dominate the error on flat ground; structure is coherent over neighbouring cells.
//! - Expected change per cell: for nested least-squares fits the larger window is efficient, so
//!   the variance of the change is the difference of the two windows' variances (Hausman 1978,
//!   Econometrica 46:1251; from memory), taken from each cell's own fit
//!   ([`fit_quadrics_with_noise`](crate::surface::window::fit_quadrics_with_noise)); windows
//!   thinned by nulls near gaps and grid edges are so judged by their own, larger noise.
//! - Step thresholds: under white noise the pooled squared change is a Gaussian quadratic form
//!   whose cumulants follow from the window kernels' cross-correlations; its tail is modelled
//!   by Pearson's three-moment chi-square (Pearson 1959, Biometrika 46:364; as used by Imhof
//!   1961, Biometrika 48:419; both from memory). Each step's false-stop probability comes from
//!   the propagation condition (Polzehl & Spokoiny 2006, Probab. Theory Relat. Fields 135:335;
//!   Spokoiny & Vial 2009, Ann. Statist. 37:2783; both from memory): on structureless ground
//!   the choice may cost at most [`thresholds::PROPAGATION_ALPHA`] more derivative noise power than always
//!   taking the largest window, shared equally between the steps, so a stop at a noisy small
//!   window must be very improbable and a stop at a large one may be less so. The tail shape is
//!   that of full windows.
//! - Recommended window: the single window whose map is closest (RMS) to the adaptive map, the
//!   best estimate of the attribute the study has.
//!
//! The parts: [`noise`] estimates the horizon's noise; [`thresholds`] is the noise model of the
//! derivative changes between windows and the step tests; [`choice`] pools the changes and
//! makes the per-cell choice. This module runs the study ([`plan`], [`StudyPlan::run`]), gives
//! the per-window figures and the recommendation.
//!
//! Memory: the grid streams in batches of rows. Per batch every window is fitted to the clean
//! horizon over the batch and the [`POOL_RADIUS`] rows either side (the pooled test's reach)
//! and to the perturbed horizon over the batch (its rows generated from the seeded stream for
//! the batch and half the largest window either side); the cells choose their window and the
//! batch's per-cell results go to the caller. The figures are running sums in the grid's
//! row-major order (the same bits as sums over whole maps, for any batch size) and, for the
//! quantile-based ones, quantile sketches ([`crate::stats::sketch`]). So besides the input only
//! one batch is held, however many windows; the horizon noise estimate's residuals (one a
//! fitted cell, before the fits) are the only grid-sized array.

pub mod busts;
pub mod choice;
pub mod colour;
pub mod footprint;
pub mod noise;
pub mod thresholds;

#[cfg(test)]
mod acceptance;

use crate::error::Result;
use crate::grid::GridGeometry;
use crate::stats::sketch::Distribution;
use crate::stats::SeededNoise;
use crate::surface::curvature::{evaluate_cells, AttributeDef, DerivativeOrder, FlatTolerance};
use crate::surface::window::{valid_mean, GridRows, Quadric, Sample, WindowFit, WindowSpec};
use choice::{pooled_ratio, Choice, POOL_RADIUS};
use footprint::GridAxis;
use ndarray::{s, Array2, ArrayView2};
use noise::{estimate_noise, NoiseEstimate};
use rayon::prelude::*;
use serde::{Serialize, Serializer};
use std::ops::Range;
use thresholds::{noise_model, NoiseModel, StepTest, FOOTPRINT_MARGIN};

/// Half width of the noise band of `share_within_noise`, in attribute noise standard
/// deviations.
pub const NOISE_BAND: f64 = 2.0;

/// Seed of the injected noise (results are reproducible).
const NOISE_SEED: u64 = 0x5eed;

/// Name of the per-cell rule and the recommendation, for reports.
pub const WINDOW_RULE: &str = "per cell: pooled sequential Lepski test on the fitted derivatives (13 x 13 box), step thresholds from the chi-square model of the pooled noise and the propagation condition; recommended: the single window closest (RMS) to the adaptive map";

/// Figures of one window, in the attribute's unit where they have one. Serialised with these
/// names (the window-study report's JSON and CSV); values that are not finite as null (an
/// empty CSV field).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct WindowFigures {
    /// Window edge length in cells.
    pub window: usize,
    /// Standard deviation of the attribute caused by the horizon's noise.
    #[serde(serialize_with = "null_unless_finite")]
    pub noise_sd: f64,
    /// Exact noise standard deviation of the fitted derivative vector of a full window, sigma
    /// times the root-sum-square of its kernel weights: the Hessian `(z_xx, z_yy, sqrt(2)
    /// z_xy)` in 1/km for curvatures, the gradient in m/m for dip.
    #[serde(serialize_with = "null_unless_finite")]
    pub derivative_noise_sd: f64,
    /// RMS of the attribute.
    #[serde(serialize_with = "null_unless_finite")]
    pub rms: f64,
    /// Robust spread: interquartile range / 1.349, the quartiles read from a quantile sketch
    /// (within [`crate::stats::sketch::RELATIVE_ERROR`] of each quartile's magnitude).
    #[serde(serialize_with = "null_unless_finite")]
    pub robust_spread: f64,
    /// RMS change from the previous (smaller) window (NaN for the first).
    #[serde(serialize_with = "null_unless_finite")]
    pub change_from_previous: f64,
    /// Share of cells whose value lies within +-`NOISE_BAND` noise_sd of zero, read from a
    /// quantile sketch of the magnitudes (off by at most the share of cells within
    /// [`crate::stats::sketch::RELATIVE_ERROR`] of the band's edge).
    #[serde(serialize_with = "null_unless_finite")]
    pub share_within_noise: f64,
    /// Share of cells with a value.
    #[serde(serialize_with = "null_unless_finite")]
    pub valid_share: f64,
    /// RMS difference from the adaptive map where the per-cell test chose the window (cells
    /// whose next window had no fit, near gaps and edges, left out); the recommendation is
    /// its least.
    #[serde(serialize_with = "null_unless_finite")]
    pub rms_from_adaptive: f64,
    /// Share of the adaptive map's cells that chose this window.
    #[serde(serialize_with = "null_unless_finite")]
    pub adaptive_share: f64,
}

/// `v`, or none (JSON null, an empty CSV field) when it is not finite.
fn null_unless_finite<S: Serializer>(v: &f64, s: S) -> std::result::Result<S::Ok, S::Error> {
    if v.is_finite() {
        s.serialize_some(v)
    } else {
        s.serialize_none()
    }
}

/// The whole study: its figures and what the panel of maps needs. The per-cell results
/// (adaptive map, chosen window) go to the caller batch by batch ([`StudyPlan::run`]).
#[derive(Clone)]
pub struct Study {
    /// The horizon's noise estimate.
    pub noise: NoiseEstimate,
    /// Per window, ascending.
    pub windows: Vec<WindowFigures>,
    /// The tests between consecutive windows.
    pub steps: Vec<StepTest>,
    /// The recommended single window.
    pub recommended: usize,
    /// The smallest window the adaptive map and the recommendation may take (the first
    /// window, or the one `--min-feature` allows).
    pub min_window: usize,
    /// The attribute at each window and (last) the adaptive map, at the sampled cells
    /// (`[sample row, sample column]`, NaN = null).
    pub samples: Vec<Array2<f64>>,
    /// The distribution of the attribute's values at each window (sketched).
    pub distributions: Vec<Distribution>,
}

impl Study {
    /// The noise model in words: `white`, or the footprint counted with it (axis, period and
    /// amplitude of each).
    pub fn noise_model(&self) -> String {
        let stripes: Vec<String> = (self.noise.footprints.iter())
            .map(|f| {
                format!(
                    "stripes along {:?} (azimuth {:.0} deg), period {:.2} cells ({:.0} m), amplitude {:.3}",
                    f.axis, f.azimuth_deg, f.period_cells, f.period_m, f.amplitude
                )
                .to_lowercase()
            })
            .collect();
        match stripes.is_empty() {
            true => self.noise.model_name(),
            false => format!("{}: {}", self.noise.model_name(), stripes.join("; ")),
        }
    }

    /// Why the recommended window was chosen, in one sentence.
    pub fn reason(&self) -> String {
        let closest = (self.windows.iter())
            .find(|w| w.window == self.recommended)
            .map_or(f64::NAN, |w| w.rms_from_adaptive);
        let floor = match self.min_window == self.windows.first().map_or(0, |w| w.window) {
            true => String::new(),
            false => format!(
                "; windows below {} excluded by the smallest feature of interest",
                self.min_window
            ),
        };
        format!(
            "window {} is the single window closest to the adaptive map (RMS difference {:.4}); the adaptive map kept larger windows wherever the derivatives' change stayed within the noise model ({}){floor}",
            self.recommended,
            closest,
            self.noise.model_name()
        )
    }
}

/// The per-cell results of one batch of rows, row-major from grid row `first_row`.
pub struct ChosenRows {
    /// First grid row of the batch.
    pub first_row: usize,
    /// The attribute at each cell's chosen window (NaN where no window fits), in the
    /// attribute's unit.
    pub adaptive: Vec<f32>,
    /// Each cell's chosen window edge length in cells (0 where no window fits).
    pub chosen: Vec<usize>,
}

/// A study ready to run: the noise estimate, the step tests (both known before any window is
/// fitted) and the fits of the clean horizon.
pub struct StudyPlan<'a, T: Sample = f64> {
    depth: ArrayView2<'a, T>,
    geometry: &'a GridGeometry,
    windows: Vec<usize>,
    attribute: &'a AttributeDef,
    min_valid: f64,
    tolerance: FlatTolerance,
    /// The horizon's noise estimate.
    pub noise: NoiseEstimate,
    /// The tests between consecutive windows.
    pub steps: Vec<StepTest>,
    /// Exact derivative noise per window, in output units (see [`WindowFigures`]).
    derivative_noise_sd: Vec<f64>,
    /// The fits of the clean horizon, one per window.
    clean: Vec<WindowFit<'a, T>>,
    /// [`valid_mean`] of the noise-perturbed horizon (the origin of its fits).
    noisy_mean: f64,
    /// Index of the smallest window the choice may take.
    floor: usize,
}

/// Prepares the study of `attribute` on `depth` (positive down, CRS units) over `windows`
/// (ascending, distinct, at least two): the horizon's noise estimate and the step tests;
/// `None` when the noise cannot be estimated (no full 3 x 3 window).
pub fn plan<'a, T: Sample>(
    depth: ArrayView2<'a, T>,
    geometry: &'a GridGeometry,
    windows: &[usize],
    attribute: &'a AttributeDef,
    min_valid: f64,
    tolerance: FlatTolerance,
) -> Result<Option<StudyPlan<'a, T>>> {
    let Some(noise) = estimate_noise(depth, geometry)? else {
        return Ok(None);
    };
    let NoiseModel {
        steps,
        derivative_noise_sd,
    } = noise_model(
        geometry,
        windows,
        attribute.order,
        noise.sigma,
        &noise.footprints,
        noise.colour.as_ref(),
    )?;
    let per_km = match attribute.order {
        DerivativeOrder::First => 1.0,
        DerivativeOrder::Second => 1000.0 / geometry.metres_per_unit,
    };
    let functionals = attribute.order.functionals();
    let clean = windows
        .iter()
        .map(|&size| {
            WindowFit::new(
                depth,
                geometry,
                &WindowSpec { size, min_valid },
                &functionals,
            )
        })
        .collect::<Result<Vec<_>>>()?;
    let mut plan = StudyPlan {
        depth,
        geometry,
        windows: windows.to_vec(),
        attribute,
        min_valid,
        tolerance,
        noise,
        steps,
        derivative_noise_sd: derivative_noise_sd.iter().map(|sd| sd * per_km).collect(),
        clean,
        noisy_mean: 0.0,
        floor: 0,
    };
    // Summed over the whole perturbed horizon in row-major order, as a fit of it held whole
    // would, a chunk of rows at a time.
    let rows = depth.nrows();
    plan.noisy_mean = valid_mean(
        (0..rows)
            .step_by(NOISY_MEAN_ROWS)
            .flat_map(|r| plan.noisy_rows(r..(r + NOISY_MEAN_ROWS).min(rows))),
    );
    Ok(Some(plan))
}

/// Least share of a fold's crest curvature a window allowed by `--min-feature` must keep (our
/// choice: about the half-power point, 1/sqrt(2)).
pub const MIN_FEATURE_RESPONSE: f64 = 0.7;

/// The share of the true crest curvature that the full-window fit of `size` cells keeps for
/// a sinusoidal fold `across_m` metres across (its wavelength, trough to trough) running along
/// a grid axis: the window's kernel of the second derivative across the fold, `2 a u_x^2 + 2 c
/// u_x u_y + 2 b u_y^2` for the unit vector u across it, applied to `cos(2 pi s / across)` (s
/// the distance across, in metres) and divided by the true `-(2 pi / across)^2`; the smaller
/// of the two axes.
/// 1 for windows much smaller than the fold, falling as the window approaches it.
pub fn crest_curvature_response(
    geometry: &GridGeometry,
    size: usize,
    across_m: f64,
) -> Result<f64> {
    let kernels = crate::surface::window::full_window_kernels(geometry, size)?;
    let g = &geometry.geo_transform;
    let wavenumber = std::f64::consts::TAU / (across_m / geometry.metres_per_unit);
    let m = (size / 2) as f64;
    let response = |(ux, uy): (f64, f64)| {
        let norm = ux.hypot(uy);
        let (ux, uy) = (ux / norm, uy / norm);
        let fitted: f64 = (kernels[0].indexed_iter())
            .map(|((r, c), a)| {
                let (dc, dr) = (c as f64 - m, r as f64 - m);
                let (dx, dy) = (dc * g[1] + dr * g[2], dc * g[4] + dr * g[5]);
                let (b, cross) = (kernels[1][(r, c)], kernels[2][(r, c)]);
                let weight = 2.0 * a * ux * ux + 2.0 * cross * ux * uy + 2.0 * b * uy * uy;
                weight * (wavenumber * (dx * ux + dy * uy)).cos()
            })
            .sum();
        fitted / -(wavenumber * wavenumber)
    };
    Ok(response((g[1], g[4])).min(response((g[2], g[5]))))
}

/// Rows generated at a time for the perturbed horizon's mean.
const NOISY_MEAN_ROWS: usize = 64;

/// Bytes a batch holds per cell of its rows beyond one per window (the window's map, 4 bytes
/// a cell): the derivative vectors and noise power of two windows over the batch and its
/// pooling halo, with their transient copies, the pooled means, the perturbed horizon's rows,
/// the per-cell choice and the rows handed out.
const BATCH_CELL_BYTES: usize = 240;

impl<T: Sample> StudyPlan<'_, T> {
    /// Keeps the adaptive map and the recommendation from windows smaller than needed for the
    /// smallest structure of interest, `metres` across: the smallest window allowed is the
    /// largest that still resolves such a structure, keeping at least
    /// [`MIN_FEATURE_RESPONSE`] of the curvature at the crest of a fold `metres` across (from
    /// trough to trough: one wavelength of a sinusoid, across either grid axis;
    /// [`crest_curvature_response`]); the first window when none does. Returns that window,
    /// about two thirds of the feature's size.
    pub fn set_min_feature(&mut self, metres: f64) -> Result<usize> {
        let mut floor = 0;
        for (k, &w) in self.windows.iter().enumerate() {
            if crest_curvature_response(self.geometry, w, metres)? < MIN_FEATURE_RESPONSE {
                break;
            }
            floor = k;
        }
        self.floor = floor;
        Ok(self.windows[floor])
    }

    /// Bytes the study holds per cell of a batch of rows (see [`StudyPlan::run`]).
    pub fn batch_cell_bytes(&self) -> usize {
        BATCH_CELL_BYTES + 4 * self.windows.len()
    }

    /// Grid rows each worker thread's fit holds ([`WindowFit::working_rows`] of the largest
    /// window).
    pub fn working_rows(&self) -> usize {
        self.clean
            .iter()
            .map(WindowFit::working_rows)
            .max()
            .unwrap_or(0)
    }

    /// Runs the study in batches of `batch_rows` rows: for each batch every window is fitted to
    /// the clean and the noise-perturbed horizon over the batch (the clean one also over the
    /// [`POOL_RADIUS`] rows either side that the pooled test reads, so every cell sees the
    /// neighbours it would in a whole grid), the per-cell choice is made and handed to `each`,
    /// and the per-window sums, sketches and the sampled cells (`sample_rows` x `sample_cols`,
    /// grid rows and columns) are gathered. Only the input and one batch are held; every
    /// figure and cell is the same bits whatever the batch size and thread count.
    pub fn run(
        &self,
        batch_rows: usize,
        sample_rows: &[usize],
        sample_cols: &[usize],
        each: &mut dyn FnMut(ChosenRows) -> Result<()>,
    ) -> Result<Study> {
        let (rows, cols) = self.depth.dim();
        let n = self.windows.len();
        let mut sums: Vec<WindowSums> = (0..n).map(|_| WindowSums::default()).collect();
        let mut samples =
            vec![Array2::from_elem((sample_rows.len(), sample_cols.len()), f64::NAN); n + 1];
        for first_row in (0..rows).step_by(batch_rows.max(1)) {
            let batch = first_row..(first_row + batch_rows.max(1)).min(rows);
            let (maps, chosen, held_by_data) = self.batch(batch.clone(), &mut sums)?;
            let adaptive: Vec<f32> = (chosen.iter().enumerate())
                .map(|(i, k)| k.map_or(f32::NAN, |k| maps[k][i]))
                .collect();
            // The recommendation compares single windows with the adaptive map where the test
            // chose, not where gaps and edges left no larger window (there a small window is
            // forced, and would pull the recommendation down).
            let compared: Vec<f32> = (adaptive.iter().zip(&held_by_data))
                .map(|(&v, &held)| if held { f32::NAN } else { v })
                .collect();
            for k in chosen.iter().flatten() {
                sums[*k].chosen += 1;
            }
            sums.par_iter_mut().enumerate().for_each(|(k, s)| {
                let previous = k.checked_sub(1).map(|j| maps[j].as_slice());
                s.add_batch(&maps[k], previous, &compared);
            });
            for (y, &r) in sample_rows.iter().enumerate() {
                if !batch.contains(&r) {
                    continue;
                }
                let row = (r - batch.start) * cols;
                for (map, sample) in maps.iter().chain([&adaptive]).zip(&mut samples) {
                    for (x, &c) in sample_cols.iter().enumerate() {
                        sample[(y, x)] = f64::from(map[row + c]);
                    }
                }
            }
            let chosen = chosen
                .iter()
                .map(|k| k.map_or(0, |k| self.windows[k]))
                .collect();
            each(ChosenRows {
                first_row,
                adaptive,
                chosen,
            })?;
        }
        let figures = self.figures(&sums, rows * cols);
        let recommended = figures[self.floor..]
            .iter()
            .min_by(|a, b| a.rms_from_adaptive.total_cmp(&b.rms_from_adaptive))
            .map_or(self.windows[0], |f| f.window);
        Ok(Study {
            noise: self.noise.clone(),
            windows: figures,
            steps: self.steps.clone(),
            recommended,
            min_window: self.windows[self.floor],
            samples,
            distributions: sums.into_iter().map(|s| s.distribution).collect(),
        })
    }

    /// One batch: every window's map over the batch rows (row-major), each cell's chosen
    /// window index and whether its choice was held by the data (the next window had no fit);
    /// the noise sums and sketches go into `sums`.
    fn batch(
        &self,
        rows: Range<usize>,
        sums: &mut [WindowSums],
    ) -> Result<(WindowMaps, Array2<Option<usize>>, Array2<bool>)> {
        let (grid_rows, cols) = self.depth.dim();
        let halo = rows.start.saturating_sub(POOL_RADIUS)..(rows.end + POOL_RADIUS).min(grid_rows);
        let inner = rows.start - halo.start..rows.end - halo.start;
        let reach = self.windows.last().map_or(0, |n| n / 2);
        let held = rows.start.saturating_sub(reach)..(rows.end + reach).min(grid_rows);
        let noisy = Array2::from_shape_vec((held.len(), cols), self.noisy_rows(held.clone()))
            .expect("rows x cols values");
        let band = GridRows {
            values: noisy.view(),
            first_row: held.start,
            grid_rows,
            z_mean: self.noisy_mean,
        };
        let mut choice = Choice::new((rows.len(), cols));
        let mut previous: Option<(Vectors, Array2<f64>)> = None;
        let mut maps = Vec::with_capacity(self.windows.len());
        for (k, &size) in self.windows.iter().enumerate() {
            let clean = self.fit_clean(k, halo.clone(), rows.clone());
            let spec = WindowSpec {
                size,
                min_valid: self.min_valid,
            };
            let perturbed = WindowFit::of_rows(band, self.geometry, &spec, &[])?
                .map_tiles(rows.clone(), |tile| self.values(&tile.cells))
                .concat();
            for (clean, perturbed) in clean.map.iter().zip(&perturbed) {
                sums[k].noise.add(f64::from(*perturbed) - f64::from(*clean));
            }
            sums[k].distribution.merge(&clean.distribution);
            let ratio = previous.as_ref().map(|(prev, prev_power)| {
                let step = &self.steps[k - 1];
                let known = (1.0 + FOOTPRINT_MARGIN) * step.footprint_change;
                let expected =
                    (prev_power - &clean.power) * (self.noise.sigma.powi(2) * step.colour_factor);
                pooled_ratio(prev, &clean.vectors, &expected, known, inner.clone())
            });
            let first = clean.vectors[0].slice(s![inner.clone(), ..]);
            // Windows below the floor are not offered; the floor is the first one.
            if k >= self.floor {
                let tested = k > self.floor;
                choice.step(
                    k,
                    first,
                    ratio.as_ref().filter(|_| tested),
                    k.checked_sub(1).map(|j| &self.steps[j]).filter(|_| tested),
                );
            }
            previous = Some((clean.vectors, clean.power));
            maps.push(clean.map);
        }
        Ok((maps, choice.chosen, choice.held_by_data))
    }

    /// Window `k`'s clean fit over the rows `halo`: its map over the batch rows `rows` with
    /// their sketched distribution, and its derivative vectors and noise power over `halo`.
    fn fit_clean(&self, k: usize, halo: Range<usize>, rows: Range<usize>) -> CleanFit {
        let order = self.attribute.order;
        let tiles = self.clean[k].map_tiles(halo.clone(), |tile| {
            let cols = tile.cols;
            let tile_rows = tile.first_row..tile.first_row + tile.rows();
            let inside = tile_rows.start.max(rows.start)..tile_rows.end.min(rows.end);
            let map = if inside.is_empty() {
                Vec::new()
            } else {
                let at = |r: usize| (r - tile.first_row) * cols;
                self.values(&tile.cells[at(inside.start)..at(inside.end)])
            };
            let mut distribution = Distribution::default();
            map.iter().for_each(|&v| distribution.add(f64::from(v)));
            let vectors: [Vec<f64>; 3] = std::array::from_fn(|j| {
                (tile.cells.iter())
                    .map(|c| c.as_ref().map_or(f64::NAN, |(q, _)| order.vector(q)[j]))
                    .collect()
            });
            let power: Vec<f64> = (tile.cells.iter())
                .map(|c| c.map_or(f64::NAN, |(_, p)| p))
                .collect();
            CleanTile {
                map,
                distribution,
                vectors,
                power,
            }
        });
        let cols = self.depth.ncols();
        let whole = |part: &dyn Fn(&CleanTile) -> &[f64]| {
            let values: Vec<f64> = tiles.iter().flat_map(|t| part(t).iter().copied()).collect();
            Array2::from_shape_vec((halo.len(), cols), values).expect("rows x cols values")
        };
        let vectors: Vectors = std::array::from_fn(|j| whole(&|t| &t.vectors[j]));
        let power = whole(&|t| &t.power);
        let mut distribution = Distribution::default();
        tiles
            .iter()
            .for_each(|t| distribution.merge(&t.distribution));
        CleanFit {
            map: tiles.into_iter().flat_map(|t| t.map).collect(),
            distribution,
            vectors,
            power,
        }
    }

    /// The attribute of a run of fitted cells (NaN where there is no fit or no value).
    fn values(&self, cells: &[Option<(Quadric, f64)>]) -> Vec<f32> {
        let mut band = vec![Vec::with_capacity(cells.len())];
        let quadrics = cells.iter().map(|c| c.as_ref().map(|(q, _)| q));
        evaluate_cells(
            quadrics,
            &[self.attribute],
            self.geometry.metres_per_unit,
            self.tolerance,
            &mut band,
        );
        band.remove(0)
    }

    /// The grid rows `rows` of the horizon plus seeded noise of the estimated level and model
    /// and the footprint found (stripes of its period and amplitude, phase 0 at index 0)
    /// (row-major): white noise at cell `i` (row-major over the grid) takes the stream's `i`-th
    /// deviate; correlated noise smooths the deviates of a grid larger by the colouring's reach
    /// on every side (row-major over it) by its kernel. So any band of rows is the same as in
    /// the whole perturbed horizon.
    fn noisy_rows(&self, rows: Range<usize>) -> Vec<f64> {
        let cols = self.depth.ncols();
        let per_row: Vec<Vec<f64>> = rows
            .into_par_iter()
            .map(|r| {
                let mut rng = SeededNoise::new(NOISE_SEED);
                // Two draws a deviate.
                let deviates: Vec<f64> = match &self.noise.colour {
                    None => {
                        rng.skip(2 * (r * cols) as u64);
                        (0..cols).map(|_| rng.gaussian()).collect()
                    }
                    Some(c) => {
                        let [hc, _] = c.reach();
                        let wide = cols + 2 * hc;
                        rng.skip(2 * (r * wide) as u64);
                        let mut down = vec![0.0; wide];
                        for g in &c.factors[1] {
                            down.iter_mut().for_each(|v| *v += g * rng.gaussian());
                        }
                        (0..cols)
                            .map(|col| {
                                c.factors[0]
                                    .iter()
                                    .zip(&down[col..])
                                    .map(|(g, v)| g * v)
                                    .sum()
                            })
                            .collect()
                    }
                };
                (deviates.into_iter().enumerate())
                    .map(|(c, deviate)| {
                        let stripes: f64 = (self.noise.footprints.iter())
                            .map(|f| {
                                let i = match f.axis {
                                    GridAxis::Columns => c,
                                    GridAxis::Rows => r,
                                };
                                let w = std::f64::consts::TAU / f.period_cells;
                                f.amplitude * (w * i as f64).cos()
                            })
                            .sum();
                        self.depth[(r, c)].widen() + self.noise.sigma * deviate + stripes
                    })
                    .collect()
            })
            .collect();
        per_row.concat()
    }

    /// The per-window figures from the sums over all `cells` of the grid.
    fn figures(&self, sums: &[WindowSums], cells: usize) -> Vec<WindowFigures> {
        let chosen_cells = sums.iter().map(|s| s.chosen).sum::<usize>().max(1) as f64;
        (sums.iter().enumerate())
            .map(|(k, s)| {
                let noise_sd = s.noise.rms();
                let quartiles = (s.distribution.values.quantile(0.25))
                    .zip(s.distribution.values.quantile(0.75));
                WindowFigures {
                    window: self.windows[k],
                    noise_sd,
                    derivative_noise_sd: self.derivative_noise_sd[k],
                    rms: s.values.rms(),
                    robust_spread: quartiles.map_or(f64::NAN, |(q1, q3)| (q3 - q1) / 1.349),
                    change_from_previous: if k == 0 { f64::NAN } else { s.change.rms() },
                    share_within_noise: s
                        .distribution
                        .magnitudes
                        .share_at_most(NOISE_BAND * noise_sd),
                    valid_share: s.values.n as f64 / cells.max(1) as f64,
                    rms_from_adaptive: s.from_adaptive.rms(),
                    adaptive_share: s.chosen as f64 / chosen_cells,
                }
            })
            .collect()
    }
}

/// Each window's map over a batch's rows (row-major, NaN where no value).
type WindowMaps = Vec<Vec<f32>>;

/// Three per-cell maps of derivative vectors ([`DerivativeOrder::vector`]), NaN where the
/// window has no fit.
type Vectors = [Array2<f64>; 3];

/// What the study keeps of one window's clean fit in a batch: its map over the batch rows and
/// the map's sketched distribution; its derivative vectors and noise power over the batch and
/// its pooling halo.
struct CleanFit {
    map: Vec<f32>,
    distribution: Distribution,
    vectors: Vectors,
    power: Array2<f64>,
}

/// One tile of a window's clean fit: its map over the batch rows it holds, sketched, and its
/// derivative vectors and noise power (row-major).
struct CleanTile {
    map: Vec<f32>,
    distribution: Distribution,
    vectors: [Vec<f64>; 3],
    power: Vec<f64>,
}

/// Sum of squares of the finite values added, and their count, in the order added.
#[derive(Clone, Copy, Default)]
struct SquareSum {
    sum: f64,
    n: usize,
}

impl SquareSum {
    fn add(&mut self, x: f64) {
        if x.is_finite() {
            self.sum += x * x;
            self.n += 1;
        }
    }

    /// Root mean square (NaN when nothing was added).
    fn rms(&self) -> f64 {
        if self.n == 0 {
            f64::NAN
        } else {
            (self.sum / self.n as f64).sqrt()
        }
    }
}

/// One window's running figures over the batches, each sum in row-major order of the grid.
#[derive(Default)]
struct WindowSums {
    /// Perturbed minus clean attribute.
    noise: SquareSum,
    /// The attribute (its count is the valid cells).
    values: SquareSum,
    /// The attribute minus the previous window's.
    change: SquareSum,
    /// The adaptive map minus the attribute.
    from_adaptive: SquareSum,
    /// Cells that chose this window.
    chosen: usize,
    /// The attribute's values, sketched.
    distribution: Distribution,
}

impl WindowSums {
    /// Adds a batch: this window's map, the previous window's and the adaptive map.
    fn add_batch(&mut self, map: &[f32], previous: Option<&[f32]>, adaptive: &[f32]) {
        for (i, &v) in map.iter().enumerate() {
            let v = f64::from(v);
            self.values.add(v);
            if let Some(previous) = previous {
                self.change.add(v - f64::from(previous[i]));
            }
            self.from_adaptive.add(f64::from(adaptive[i]) - v);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::{quantiles, Quantile};
    use crate::surface::curvature::{attribute_by_id, evaluate_field, LocalSurface};
    use crate::surface::window::fit_quadrics;
    use crate::synthetic::{Shape, Surface};

    pub(super) fn grid(n: usize) -> GridGeometry {
        GridGeometry::survey((0.0, 10_000.0), 90.0, (25.0, 25.0), (n, n), String::new())
    }

    /// A fold of Gaussian section `width` m across its axis at `azimuth` degrees through `origin`
    /// (amplitude 20 m, an anticline when `up`).
    pub(super) fn fold(origin: (f64, f64), azimuth: f64, width: f64, up: bool) -> Shape {
        Shape::Fold {
            origin,
            axis_azimuth: azimuth,
            amplitude: if up { 20.0 } else { -15.0 },
            sigma: width,
        }
    }

    /// `shapes` on a 2000 m datum sampled at the cell centres, plus seeded white noise.
    pub(super) fn horizon(
        g: &GridGeometry,
        shapes: Vec<Shape>,
        sigma: f64,
        seed: u64,
    ) -> (Array2<f64>, Surface) {
        let surface = Surface {
            datum: 2000.0,
            shapes,
        };
        let mut rng = SeededNoise::new(seed);
        let z = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
            let (x, y) = g.cell_centre(c, r);
            surface.eval(x, y).z + sigma * rng.gaussian()
        });
        (z, surface)
    }

    /// A study's figures with its per-cell results gathered from the batches, and each
    /// window's whole map computed on its own (`fit_quadrics` and `evaluate_field`, the same
    /// fit as the study's) for checks.
    pub(super) struct Run {
        study: Study,
        adaptive: Array2<f64>,
        chosen: Array2<usize>,
        maps: Vec<Array2<f64>>,
        sampled: (Vec<usize>, Vec<usize>),
    }

    impl std::ops::Deref for Run {
        type Target = Study;
        fn deref(&self) -> &Study {
            &self.study
        }
    }

    fn run_in_batches(
        z: &Array2<f64>,
        g: &GridGeometry,
        windows: &[usize],
        attr: &str,
        batch_rows: usize,
    ) -> Run {
        let attr = attribute_by_id(attr).unwrap();
        let plan = plan(z.view(), g, windows, attr, 0.75, FlatTolerance::EXACT)
            .unwrap()
            .unwrap();
        let (rows, cols) = z.dim();
        let mut adaptive = Array2::from_elem((rows, cols), f64::NAN);
        let mut chosen = Array2::zeros((rows, cols));
        let sampled = (
            (0..rows).step_by(7).collect::<Vec<_>>(),
            (0..cols).step_by(5).collect::<Vec<_>>(),
        );
        let study = plan
            .run(batch_rows, &sampled.0, &sampled.1, &mut |b| {
                for (i, (&v, &w)) in b.adaptive.iter().zip(&b.chosen).enumerate() {
                    let at = (b.first_row + i / cols, i % cols);
                    adaptive[at] = f64::from(v);
                    chosen[at] = w;
                }
                Ok(())
            })
            .unwrap();
        let maps = windows
            .iter()
            .map(|&size| {
                let spec = WindowSpec {
                    size,
                    min_valid: 0.75,
                };
                let field = fit_quadrics(z.view(), g, &spec, &|_| {}).unwrap();
                evaluate_field(&field, &[attr], g.metres_per_unit, FlatTolerance::EXACT)
                    .remove(0)
                    .mapv(f64::from)
            })
            .collect();
        Run {
            study,
            adaptive,
            chosen,
            maps,
            sampled,
        }
    }

    pub(super) fn run(z: &Array2<f64>, g: &GridGeometry, windows: &[usize], attr: &str) -> Run {
        run_in_batches(z, g, windows, attr, z.nrows())
    }

    /// True RMS error of each window's map and (last) of the adaptive map against the analytic
    /// attribute of the surface, away from the grid's edges (16 cells).
    pub(super) fn true_errors(
        s: &Run,
        g: &GridGeometry,
        surface: &Surface,
        attr: &str,
        left_out: Option<&Array2<bool>>,
    ) -> Vec<f64> {
        let attr = attribute_by_id(attr).unwrap();
        let truth = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
            let (x, y) = g.cell_centre(c, r);
            let q = surface.eval(x, y).quadric();
            attr.evaluate(&LocalSurface::new(&q, 1.0, FlatTolerance::EXACT))
                .unwrap_or(f64::NAN)
        });
        let inner = |m: &Array2<f64>| {
            let margin = 16;
            let mut sq = (0.0, 0usize);
            for r in margin..g.rows - margin {
                for c in margin..g.cols - margin {
                    let d = m[(r, c)] - truth[(r, c)];
                    if d.is_finite() && !left_out.is_some_and(|l| l[(r, c)]) {
                        sq = (sq.0 + d * d, sq.1 + 1);
                    }
                }
            }
            (sq.0 / sq.1 as f64).sqrt()
        };
        s.maps
            .iter()
            .map(inner)
            .chain(std::iter::once(inner(&s.adaptive)))
            .collect()
    }

    #[test]
    fn the_smallest_feature_keeps_the_windows_that_resolve_it() {
        // The crest response against the closed-form N x N kernel of a (REFERENCES.md section
        // 3 [D]: a = sum z (i^2 - S2/N) / (N (S4 - S2^2/N) h^2)) applied to a fold constant
        // along y, z = cos(2 pi x / F): response = 2 sum_i (i^2 - S2/N) cos(2 pi i h / F) /
        // ((S4 - S2^2/N) h^2) / -(2 pi/F)^2 (the sum over j cancels N).
        let g = grid(200);
        let h = 25.0;
        let closed = |n: usize, across: f64| {
            let m = (n / 2) as i64;
            let nf = n as f64;
            let s2: f64 = (-m..=m).map(|i| (i * i) as f64).sum();
            let s4: f64 = (-m..=m).map(|i| (i * i * i * i) as f64).sum();
            let k = std::f64::consts::TAU / across;
            let sum: f64 = (-m..=m)
                .map(|i| ((i * i) as f64 - s2 / nf) * (k * i as f64 * h).cos())
                .sum();
            2.0 * sum / ((s4 - s2 * s2 / nf) * h * h) / -(k * k)
        };
        for (n, across) in [(3, 400.0), (9, 1000.0), (21, 1000.0), (31, 4000.0)] {
            let r = crest_curvature_response(&g, n, across).unwrap();
            assert!((r - closed(n, across)).abs() < 1e-9, "{n} {across}: {r}");
        }
        // The floor is the largest window keeping 70%, the next one keeps less.
        let mut rng = SeededNoise::new(4);
        let z = Array2::from_shape_fn((200, 200), |_| 1000.0 + 0.3 * rng.gaussian());
        let windows = [3, 5, 7, 9, 11, 15, 21, 31];
        let attribute = attribute_by_id("k_pos").unwrap();
        let tolerance = FlatTolerance::for_grid(0.0, 25.0, 1.0);
        let mut plan = plan(z.view(), &g, &windows, attribute, 0.75, tolerance)
            .unwrap()
            .unwrap();
        for across in [300.0, 800.0, 1600.0] {
            let floor = plan.set_min_feature(across).unwrap();
            let k = windows.iter().position(|&w| w == floor).unwrap();
            assert!(closed(floor, across) >= MIN_FEATURE_RESPONSE || k == 0);
            if let Some(&next) = windows.get(k + 1) {
                assert!(
                    closed(next, across) < MIN_FEATURE_RESPONSE,
                    "{across}: {next}"
                );
            }
        }
    }

    #[test]
    fn injected_noise_matches_the_kernel_gain_for_a_linear_coefficient() {
        // On a level plane k_mean = -(a + b) (z positive down, antiforms positive; Roberts 2001
        // via REFERENCES.md section 2 with zero slope), linear in the data, so its noise sd is
        // sigma times the root-sum-square of the kernel weights of a + b (REFERENCES.md
        // section 3); the seeded injection must match it within a few percent.
        let g = grid(150);
        let mut rng = SeededNoise::new(3);
        let z = Array2::from_shape_fn((150, 150), |_| 1000.0 + 0.5 * rng.gaussian());
        let s = run(&z, &g, &[3, 5], "k_mean");
        for (f, n) in s.windows.iter().zip([3, 5]) {
            let k = crate::surface::window::full_window_kernels(&g, n).unwrap();
            let gain: f64 = k[0]
                .iter()
                .zip(k[1].iter())
                .map(|(a, b)| (a + b).powi(2))
                .sum::<f64>()
                .sqrt();
            // k_mean is in 1/km: 1000 x per metre.
            let expected = 1000.0 * s.noise.sigma * gain;
            assert!(
                (f.noise_sd / expected - 1.0).abs() < 0.08,
                "window {n}: {} vs {expected}",
                f.noise_sd
            );
        }
    }

    #[test]
    fn recommendation_tracks_the_true_best_window_and_grows_with_noise() {
        // The check on generated cases (sums of folds of several widths, three noise
        // levels): within one step of the window with the least true RMS error, and not
        // smaller as the noise grows. Curvature (k_mean) and slope (dip) attributes.
        let g = grid(140);
        let windows = [3, 5, 7, 9, 11, 15, 21, 31];
        let families: [&[(f64, f64)]; 3] = [
            &[(250.0, 35.0), (800.0, 100.0)],
            &[(450.0, 160.0), (1100.0, 60.0)],
            &[(170.0, 125.0)],
        ];
        for attr in ["k_mean", "dip"] {
            for family in families {
                let mut previous = 0;
                for sigma in [0.05, 0.5, 2.0] {
                    let shapes = family
                        .iter()
                        .enumerate()
                        .map(|(k, &(w, az))| {
                            let origin = (1200.0 + 900.0 * k as f64, 8800.0 - 700.0 * k as f64);
                            fold(origin, az, w, k % 2 == 0)
                        })
                        .collect();
                    let (z, surface) = horizon(&g, shapes, sigma, 21);
                    let s = run(&z, &g, &windows, attr);
                    let errors = true_errors(&s, &g, &surface, attr, None);
                    let best = (0..windows.len())
                        .min_by(|a, b| errors[*a].total_cmp(&errors[*b]))
                        .unwrap();
                    let rec = windows.iter().position(|w| *w == s.recommended).unwrap();
                    assert!(
                        rec.abs_diff(best) <= 1,
                        "{attr} {family:?} sigma {sigma}: recommended {} but best {} \
                         (errors {errors:?})",
                        s.recommended,
                        windows[best]
                    );
                    assert!(
                        s.recommended >= previous,
                        "{attr} {family:?}: shrank at {sigma}"
                    );
                    previous = s.recommended;
                }
            }
        }
    }

    #[test]
    fn adaptive_map_beats_the_best_single_window_beside_a_sharp_structure() {
        // The check: on flat noisy ground beside a sharp fold or dome, the adaptive map
        // has a lower true RMS error than every single window. Generated cases: structures
        // 90-180 m wide (4-7 cells), noise 0.1-1 m, four attributes. The margins are 20-40%,
        // except for the widest folds under the most noise (cases 1 and 3), where the best
        // single window is already good and the adaptive map gains under 1%.
        let g = grid(140);
        let windows = [3, 5, 7, 9, 11, 15, 21];
        let cases = [
            (fold((1500.0, 8200.0), 15.0, 110.0, true), 0.3, "k_mean"),
            (fold((2200.0, 8000.0), 140.0, 160.0, false), 0.8, "k_mean"),
            (fold((1800.0, 8400.0), 75.0, 90.0, true), 0.1, "k_pos"),
            (fold((1300.0, 7900.0), 105.0, 180.0, true), 1.0, "k_neg"),
            (
                Shape::GaussianDome {
                    centre: (1750.0, 8250.0),
                    amplitude: 25.0,
                    sigma: 150.0,
                },
                0.5,
                "k_pos",
            ),
            (fold((1600.0, 8100.0), 50.0, 130.0, false), 0.4, "dip"),
        ];
        for (k, (shape, sigma, attr)) in cases.into_iter().enumerate() {
            let (z, surface) = horizon(&g, vec![shape], sigma, 31 + k as u64);
            let s = run(&z, &g, &windows, attr);
            let errors = true_errors(&s, &g, &surface, attr, None);
            let adaptive = errors[windows.len()];
            let best = errors[..windows.len()]
                .iter()
                .copied()
                .fold(f64::INFINITY, f64::min);
            assert!(
                adaptive < best,
                "case {k} ({attr}, noise {sigma}): adaptive {adaptive} vs best single {best} \
                 (errors {errors:?})"
            );
        }
    }

    #[test]
    fn adaptive_choice_on_pure_noise_costs_little_more_than_the_largest_window() {
        // The propagation condition (Polzehl & Spokoiny 2006; Spokoiny & Vial 2009): on a
        // structureless horizon (a dipping plane plus white noise) the expected squared error of
        // the adaptive map exceeds the largest window's by about PROPAGATION_ALPHA (10%).
        // False stops come in clusters, so single horizons vary: the mean over ten noise
        // realisations must stay within 25%.
        let g = grid(140);
        let plane = Shape::Quadratic {
            origin: (1750.0, 8250.0),
            coeffs: [0.0, 0.0, 0.0, 0.02, -0.01, 0.0],
        };
        for (sigma, attr) in [(0.3, "k_mean"), (1.0, "k_pos"), (0.5, "dip")] {
            let ratios: Vec<f64> = (0..10)
                .map(|seed| {
                    let (z, surface) = horizon(&g, vec![plane.clone()], sigma, 100 + seed);
                    let s = run(&z, &g, &[3, 5, 9, 15, 21], attr);
                    let errors = true_errors(&s, &g, &surface, attr, None);
                    (errors[5] / errors[4]).powi(2)
                })
                .collect();
            let mean = ratios.iter().sum::<f64>() / ratios.len() as f64;
            assert!(mean < 1.25, "{attr}: power ratios {ratios:?}");
        }
    }

    #[test]
    fn cells_beside_a_fault_gap_keep_smaller_windows() {
        // A fault step is not a quadric, so windows that reach across it are biased (least
        // squares on a step, derived): the adaptive choice near the trace must be smaller than
        // on the unfaulted ground far from it.
        let g = grid(120);
        let step = Shape::Step {
            origin: (1500.0, 8500.0),
            azimuth: 10.0,
            throw: 12.0,
        };
        let (mut z, surface) = horizon(&g, vec![step], 0.3, 51);
        let distance = |r: usize, c: usize| {
            let (x, y) = g.cell_centre(c, r);
            surface.fault_distance(x, y)
        };
        for ((r, c), v) in z.indexed_iter_mut() {
            if distance(r, c) < 20.0 {
                *v = f64::NAN;
            }
        }
        let s = run(&z, &g, &[3, 5, 9, 15, 21], "k_mean");
        let mean_window = |near: bool| {
            let cells: Vec<f64> = s
                .chosen
                .indexed_iter()
                .filter(|((r, c), w)| {
                    **w > 0
                        && (16..104).contains(r)
                        && (16..104).contains(c)
                        && (distance(*r, *c) < 100.0) == near
                })
                .map(|(_, w)| *w as f64)
                .collect();
            cells.iter().sum::<f64>() / cells.len() as f64
        };
        let (near, far) = (mean_window(true), mean_window(false));
        assert!(near + 4.0 < far, "near the fault {near}, far {far}");
    }

    #[test]
    fn the_study_is_the_same_with_one_or_two_threads() {
        // Determinism (DEVELOPERS.md): every sum runs in a fixed order.
        let g = grid(100);
        let (z, _) = horizon(&g, vec![fold((1200.0, 8700.0), 30.0, 140.0, true)], 0.4, 61);
        let in_pool = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| run(&z, &g, &[3, 5, 9, 15], "k_pos"))
        };
        let (one, two) = (in_pool(1), in_pool(2));
        same_results(&one, &two);
    }

    #[test]
    fn busts_and_footprint_give_the_same_bits_with_one_or_two_threads() {
        // Determinism (DEVELOPERS.md) through the bust test, the footprint's spectrum and the
        // footprint-aware steps: planted stripes and busts, one and two threads.
        let g = grid(100);
        let (mut z, _) = horizon(&g, vec![fold((1200.0, 8700.0), 30.0, 300.0, true)], 0.3, 64);
        footprint::tests::add_stripes(&mut z, GridAxis::Rows, 3.0, 0.5, 0.2);
        for r in (5..95).step_by(17) {
            z[(r, (3 * r) % 100)] += 6.0;
        }
        let in_pool = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| {
                    let mut z = z.clone();
                    let b = busts::despike(&mut z, &g, busts::BUST_FALSE_ALARM).unwrap();
                    (b, run(&z, &g, &[3, 5, 9, 15], "k_mean"))
                })
        };
        let ((b1, one), (b2, two)) = (in_pool(1), in_pool(2));
        assert_eq!(format!("{b1:?}"), format!("{b2:?}"));
        assert!(!one.noise.footprints.is_empty() && b1.cells.len() >= 6);
        assert_eq!(format!("{:?}", one.noise), format!("{:?}", two.noise));
        same_results(&one, &two);
    }

    /// Two runs gave the same bits: per-cell results, figures, steps and samples.
    fn same_results(one: &Run, two: &Run) {
        assert_eq!(one.chosen, two.chosen);
        let bits = |m: &Array2<f64>| m.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&one.adaptive), bits(&two.adaptive));
        assert_eq!(format!("{:?}", one.windows), format!("{:?}", two.windows));
        assert_eq!(format!("{:?}", one.steps), format!("{:?}", two.steps));
        for (a, b) in one.samples.iter().zip(&two.samples) {
            assert_eq!(bits(a), bits(b));
        }
    }

    #[test]
    fn batches_of_rows_give_the_bits_of_one_batch() {
        // The streaming contract: the pooled test at a batch's edge sees the neighbours it
        // would in the whole grid, and every sum runs in the grid's row-major order, so batches
        // of 16 or 40 rows (edges inside the pooling box, the perturbed fit's band and the
        // gaps) give the one-batch results bit for bit. Nulls across batch edges.
        let g = grid(100);
        let shapes = vec![fold((1200.0, 8700.0), 30.0, 140.0, true)];
        let (mut z, _) = horizon(&g, shapes, 0.4, 62);
        for r in 30..36 {
            for c in 40..47 {
                z[(r, c)] = f64::NAN;
            }
        }
        z[(47, 3)] = f64::NAN;
        let whole = run(&z, &g, &[3, 5, 9, 15], "k_mean");
        for batch in [16, 40] {
            same_results(
                &whole,
                &run_in_batches(&z, &g, &[3, 5, 9, 15], "k_mean", batch),
            );
        }
    }

    #[test]
    fn streamed_figures_match_whole_maps() {
        // Reference: the figures computed from whole maps as the study did before it streamed
        // (each window's map from fit_quadrics and evaluate_field, the perturbed horizon made
        // whole with one sequential noise stream, RMS sums in row-major order): the same bits
        // for the RMS figures, the noise sd and the valid share; the sketched figures within
        // their stated bounds (stats::sketch) of the exact ones (stats::quantiles, exact
        // counts). The panel's samples are the maps' cells.
        let g = grid(90);
        let shapes = vec![fold((1100.0, 8800.0), 60.0, 120.0, false)];
        let (mut z, _) = horizon(&g, shapes, 0.3, 63);
        z[(20, 20)] = f64::NAN;
        let windows = [3, 7, 11];
        let s = run_in_batches(&z, &g, &windows, "k_pos", 32);
        let rms = |v: &mut dyn Iterator<Item = f64>| {
            let (sum, n) = v
                .filter(|x| x.is_finite())
                .fold((0.0, 0usize), |(s, n), x| (s + x * x, n + 1));
            (sum / n as f64).sqrt()
        };
        let mut rng = SeededNoise::new(NOISE_SEED);
        let noisy = z.mapv(|v| v + s.noise.sigma * rng.gaussian());
        let attr = attribute_by_id("k_pos").unwrap();
        let tol = crate::stats::sketch::RELATIVE_ERROR * (1.0 + 1e-9);
        for (k, f) in s.windows.iter().enumerate() {
            let map = &s.maps[k];
            let spec = WindowSpec {
                size: windows[k],
                min_valid: 0.75,
            };
            let field = fit_quadrics(noisy.view(), &g, &spec, &|_| {}).unwrap();
            let perturbed = evaluate_field(&field, &[attr], 1.0, FlatTolerance::EXACT)
                .remove(0)
                .mapv(f64::from);
            let diff =
                |a: &Array2<f64>, b: &Array2<f64>| rms(&mut a.iter().zip(b).map(|(a, b)| b - a));
            assert_eq!(f.noise_sd.to_bits(), diff(map, &perturbed).to_bits());
            assert_eq!(f.rms.to_bits(), rms(&mut map.iter().copied()).to_bits());
            // Compared where the test chose: not where the next window had no fit.
            let compared = Array2::from_shape_fn(s.adaptive.dim(), |at| {
                let next = windows
                    .iter()
                    .position(|&w| w == s.chosen[at])
                    .map(|i| i + 1);
                let held = next.is_some_and(|i| i < windows.len() && s.maps[i][at].is_nan());
                if held {
                    f64::NAN
                } else {
                    s.adaptive[at]
                }
            });
            assert_eq!(
                f.rms_from_adaptive.to_bits(),
                diff(map, &compared).to_bits()
            );
            if k > 0 {
                let change = diff(&s.maps[k - 1], map);
                assert_eq!(f.change_from_previous.to_bits(), change.to_bits());
            }
            let mut values: Vec<f64> = map.iter().copied().filter(|v| v.is_finite()).collect();
            assert_eq!(f.valid_share, values.len() as f64 / map.len() as f64);
            let band = NOISE_BAND * f.noise_sd;
            let within = values.iter().filter(|v| v.abs() <= band).count() as f64;
            let near = (values.iter())
                .filter(|v| (v.abs() - band).abs() <= tol * v.abs())
                .count() as f64;
            let n = values.len() as f64;
            assert!((f.share_within_noise - within / n).abs() <= near / n + 1e-12);
            let [q1, q3] = quantiles(&mut values, [0.25, 0.75], Quantile::Nearest).unwrap();
            let spread_bound = tol * (q1.abs() + q3.abs()) / 1.349;
            assert!((f.robust_spread - (q3 - q1) / 1.349).abs() <= spread_bound);
            let chosen = s.chosen.iter().filter(|&&w| w == windows[k]).count() as f64;
            let fitted = s.chosen.iter().filter(|&&w| w > 0).count() as f64;
            assert_eq!(f.adaptive_share, chosen / fitted);
            for (y, &r) in s.sampled.0.iter().enumerate() {
                for (x, &c) in s.sampled.1.iter().enumerate() {
                    assert_eq!(s.samples[k][(y, x)].to_bits(), map[(r, c)].to_bits());
                }
            }
        }
    }
}
