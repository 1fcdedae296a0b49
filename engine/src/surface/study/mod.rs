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
//!   ([`fit_quadrics_with_noise`]); windows thinned by nulls near gaps and grid edges are so
//!   judged by their own, larger noise.
//! - Step thresholds: under white noise the pooled squared change is a Gaussian quadratic form
//!   whose cumulants follow from the window kernels' cross-correlations; its tail is modelled
//!   by Pearson's three-moment chi-square (Pearson 1959, Biometrika 46:364; as used by Imhof
//!   1961, Biometrika 48:419; both from memory). Each step's false-stop probability comes from
//!   the propagation condition (Polzehl & Spokoiny 2006, Probab. Theory Relat. Fields 135:335;
//!   Spokoiny & Vial 2009, Ann. Statist. 37:2783; both from memory): on structureless ground
//!   the choice may cost at most [`PROPAGATION_ALPHA`] more derivative noise power than always
//!   taking the largest window, shared equally between the steps, so a stop at a noisy small
//!   window must be very improbable and a stop at a large one may be less so. The tail shape is
//!   that of full windows.
//! - Recommended window: the single window whose map is closest (RMS) to the adaptive map, the
//!   best estimate of the attribute the study has.

use crate::error::Result;
use crate::grid::GridGeometry;
use crate::stats::{median_and_mad, quantiles, Quantile, SeededNoise};
use crate::surface::curvature::{evaluate_cells, AttributeDef, DerivativeOrder, FlatTolerance};
use crate::surface::window::{full_window_kernels, Quadric, WindowFit, WindowSpec};
use nalgebra::DMatrix;
use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// Half width in cells of the box over which squared changes are pooled (a 13 x 13 box). Our
/// choice: wide enough that the noise of the smallest windows averages out, narrow enough to
/// keep a fold a few hundred metres wide apart from the flat ground beside it (chosen on
/// generated folds 100 to 1200 m wide on 25 m cells with 0.05 to 2 m of noise).
pub const POOL_RADIUS: usize = 6;

/// Extra derivative noise power the per-cell choice may cost on structureless ground, as a
/// share of the largest window's (the alpha of the propagation condition; our choice).
pub const PROPAGATION_ALPHA: f64 = 0.1;

/// Smallest false-stop probability a step is given (below it the chi-square quantile loses
/// precision; a step this strict is already never taken on noise alone).
const MIN_STEP_PROBABILITY: f64 = 1e-12;

/// Half width of the noise band of `share_within_noise`, in attribute noise standard
/// deviations.
pub const NOISE_BAND: f64 = 2.0;

/// Seed of the injected noise (results are reproducible).
const NOISE_SEED: u64 = 0x5eed;

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

/// Name of the per-cell rule and the recommendation, for reports.
pub const WINDOW_RULE: &str = "per cell: pooled sequential Lepski test on the fitted derivatives (13 x 13 box), step thresholds from the chi-square model of the pooled noise and the propagation condition; recommended: the single window closest (RMS) to the adaptive map";

/// Estimates the noise of `depth` (see the module notes); `None` without full 3 x 3 windows.
pub fn estimate_noise(
    depth: ArrayView2<f64>,
    geometry: &GridGeometry,
) -> Result<Option<NoiseEstimate>> {
    let spec = WindowSpec {
        size: 3,
        min_valid: 1.0,
    };
    let leverage = crate::surface::window::full_window_kernels(geometry, 3)?[5][(1, 1)];
    let fit = WindowFit::new(depth, geometry, &spec, &[])?;
    let mut residuals: Vec<f64> = fit
        .map_tiles(0..depth.nrows(), |tile| {
            let at = |i: usize| (tile.first_row + i / tile.cols, i % tile.cols);
            (tile.cells.iter().enumerate())
                .filter_map(|(i, c)| c.map(|(q, _)| depth[at(i)] - q.f))
                .collect::<Vec<f64>>()
        })
        .into_iter()
        .flatten()
        .collect();
    if residuals.is_empty() {
        return Ok(None);
    }
    let (_, mad) = median_and_mad(&mut residuals).unwrap_or((f64::NAN, f64::NAN));
    Ok(Some(NoiseEstimate {
        sigma: 1.4826 * mad / (1.0 - leverage).sqrt(),
        n: residuals.len(),
    }))
}

/// Figures of one window, in the attribute's unit where they have one.
#[derive(Clone, Debug, PartialEq)]
pub struct WindowFigures {
    /// Window edge length in cells.
    pub window: usize,
    /// Standard deviation of the attribute caused by the horizon's noise.
    pub noise_sd: f64,
    /// Exact noise standard deviation of the fitted derivative vector of a full window, sigma
    /// times the root-sum-square of its kernel weights: the Hessian `(z_xx, z_yy, sqrt(2)
    /// z_xy)` in 1/km for curvatures, the gradient in m/m for dip.
    pub derivative_noise_sd: f64,
    /// RMS of the attribute.
    pub rms: f64,
    /// Robust spread: interquartile range / 1.349.
    pub robust_spread: f64,
    /// RMS change from the previous (smaller) window (NaN for the first).
    pub change_from_previous: f64,
    /// Share of cells whose value lies within +-`NOISE_BAND` noise_sd of zero.
    pub share_within_noise: f64,
    /// Share of cells with a value.
    pub valid_share: f64,
    /// RMS difference from the adaptive map (the recommendation is its least).
    pub rms_from_adaptive: f64,
    /// Share of the adaptive map's cells that chose this window.
    pub adaptive_share: f64,
}

/// The test of one step from a window to the next larger one.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StepTest {
    /// Window edge lengths compared (smaller, larger).
    pub windows: (usize, usize),
    /// Expected squared change of the derivative vector under the estimated noise alone for
    /// full windows, in CRS length units to the power -2 (Hessian) or 0 (gradient).
    pub expected: f64,
    /// Degrees of freedom of the chi-square fitted to the pooled noise's first three cumulants.
    pub dof: f64,
    /// Probability that noise alone stops the choice at this step.
    pub false_stop: f64,
    /// Largest accepted ratio of the pooled squared change to `expected`.
    pub threshold: f64,
}

/// The whole study.
#[derive(Clone, Debug)]
pub struct Study {
    /// The horizon's noise estimate.
    pub noise: NoiseEstimate,
    /// Per window, ascending.
    pub windows: Vec<WindowFigures>,
    /// The attribute at each window, `[row, col]`, NaN = null.
    pub maps: Vec<Array2<f64>>,
    /// The tests between consecutive windows.
    pub steps: Vec<StepTest>,
    /// Per-cell chosen window (edge length, 0 where no window fits).
    pub chosen: Array2<usize>,
    /// The attribute at the chosen window of each cell.
    pub adaptive: Array2<f64>,
    /// The recommended single window.
    pub recommended: usize,
}

/// Runs the study of `attribute` on `depth` (positive down, CRS units) over `windows`
/// (ascending, distinct, at least two).
pub fn study(
    depth: ArrayView2<f64>,
    geometry: &GridGeometry,
    windows: &[usize],
    attribute: &AttributeDef,
    min_valid: f64,
    tolerance: FlatTolerance,
) -> Result<Option<Study>> {
    let Some(noise) = estimate_noise(depth, geometry)? else {
        return Ok(None);
    };
    let NoiseModel {
        steps,
        derivative_noise_sd,
    } = noise_model(geometry, windows, attribute.order, noise.sigma)?;
    let mut rng = SeededNoise::new(NOISE_SEED);
    let noisy = Array2::from_shape_fn(depth.dim(), |at| depth[at] + noise.sigma * rng.gaussian());
    let functionals = attribute.order.functionals();
    let (mut maps, mut noise_sds) = (Vec::new(), Vec::new());
    let mut choice = Choice::new(depth.dim());
    let mut previous: Option<(Vectors, Array2<f64>)> = None;
    for (k, &n) in windows.iter().enumerate() {
        let spec = WindowSpec { size: n, min_valid };
        let fits = WindowFitPair {
            clean: WindowFit::new(depth, geometry, &spec, &functionals)?,
            perturbed: WindowFit::new(noisy.view(), geometry, &spec, &[])?,
        };
        let fitted = fits.evaluate(attribute, geometry.metres_per_unit, tolerance);
        noise_sds.push(rms_difference(&fitted.map, &fitted.perturbed));
        let ratio = previous.as_ref().map(|(prev, prev_power)| {
            let expected = (prev_power - &fitted.power) * noise.sigma.powi(2);
            pooled_ratio(prev, &fitted.vectors, &expected)
        });
        let step = k.checked_sub(1).map(|j| &steps[j]);
        choice.step(k, &fitted.vectors[0], ratio.as_ref(), step);
        previous = Some((fitted.vectors, fitted.power));
        maps.push(fitted.map);
    }
    drop(previous);
    let chosen_index = choice.chosen;
    let adaptive = Array2::from_shape_fn(depth.dim(), |at| {
        chosen_index[at].map_or(f64::NAN, |k| maps[k][at])
    });
    let per_km = match attribute.order {
        DerivativeOrder::First => 1.0,
        DerivativeOrder::Second => 1000.0 / geometry.metres_per_unit,
    };
    let derivative_noise_sd: Vec<f64> = derivative_noise_sd.iter().map(|sd| sd * per_km).collect();
    let figures = window_figures(
        windows,
        &maps,
        &noise_sds,
        &derivative_noise_sd,
        &adaptive,
        &chosen_index,
    );
    let recommended = figures
        .iter()
        .min_by(|a, b| a.rms_from_adaptive.total_cmp(&b.rms_from_adaptive))
        .map_or(windows[0], |f| f.window);
    Ok(Some(Study {
        noise,
        windows: figures,
        maps,
        steps,
        chosen: chosen_index.mapv(|k| k.map_or(0, |k| windows[k])),
        adaptive,
        recommended,
    }))
}

/// Per-window figures once the adaptive map is known (`derivative_noise_sd` in output units).
fn window_figures(
    windows: &[usize],
    maps: &[Array2<f64>],
    noise_sds: &[f64],
    derivative_noise_sd: &[f64],
    adaptive: &Array2<f64>,
    chosen: &Array2<Option<usize>>,
) -> Vec<WindowFigures> {
    let mut chosen_counts = vec![0usize; windows.len()];
    for k in chosen.iter().flatten() {
        chosen_counts[*k] += 1;
    }
    let chosen_cells = chosen_counts.iter().sum::<usize>().max(1) as f64;
    (0..windows.len())
        .map(|k| {
            let values: Vec<f64> = maps[k].iter().copied().filter(|v| v.is_finite()).collect();
            let noise_sd = noise_sds[k];
            WindowFigures {
                window: windows[k],
                noise_sd,
                derivative_noise_sd: derivative_noise_sd[k],
                rms: rms_of(values.iter().copied()),
                robust_spread: robust_spread(&values),
                change_from_previous: k
                    .checked_sub(1)
                    .map_or(f64::NAN, |j| rms_difference(&maps[j], &maps[k])),
                share_within_noise: values
                    .iter()
                    .filter(|v| v.abs() <= NOISE_BAND * noise_sd)
                    .count() as f64
                    / values.len().max(1) as f64,
                valid_share: values.len() as f64 / maps[k].len().max(1) as f64,
                rms_from_adaptive: rms_difference(&maps[k], adaptive),
                adaptive_share: chosen_counts[k] as f64 / chosen_cells,
            }
        })
        .collect()
}

/// Three per-cell maps of derivative vectors ([`DerivativeOrder::vector`]), NaN where the
/// window has no fit.
type Vectors = [Array2<f64>; 3];

/// The pooled squared change between two windows' derivative vectors as a ratio to its pooled
/// expectation under noise alone, `expected` per cell (NaN where either window has no fit).
/// For nested least-squares fits the larger window is efficient, so the variance of the change
/// is the difference of the two variances (Hausman 1978, Econometrica 46:1251; from memory):
/// `expected = sigma^2 (P_smaller - P_larger)` with the cells' own (masked) noise powers.
fn pooled_ratio(smaller: &Vectors, larger: &Vectors, expected: &Array2<f64>) -> Array2<f64> {
    let squares = (0..3).fold(Array2::zeros(smaller[0].dim()), |acc, k| {
        let d = &larger[k] - &smaller[k];
        acc + &d * &d
    });
    let pooled = box_mean(&squares, POOL_RADIUS);
    let mean = box_mean(expected, POOL_RADIUS);
    ndarray::Zip::from(&pooled)
        .and(&mean)
        .map_collect(|&v, &e| {
            if e > 0.0 {
                v / e
            } else if v > 0.0 {
                f64::INFINITY
            } else if v.is_finite() {
                0.0
            } else {
                f64::NAN
            }
        })
}

/// The per-cell window choice, made one window at a time: from the smallest window with a fit,
/// each next window is kept while it has a fit and its pooled ratio to the previous one is
/// within the step's threshold; once a cell stops, it keeps its window.
struct Choice {
    /// Index of the window chosen so far (`None` before the first window with a fit).
    chosen: Array2<Option<usize>>,
    /// Whether the cell may still take a larger window.
    open: Array2<bool>,
}

impl Choice {
    fn new(dim: (usize, usize)) -> Self {
        Self {
            chosen: Array2::from_elem(dim, None),
            open: Array2::from_elem(dim, true),
        }
    }

    /// Window `k`: `first` is any of its derivative maps (NaN where it has no fit), `ratio` the
    /// pooled ratio from window k - 1 and `step` that step's test (both `None` for k = 0).
    fn step(
        &mut self,
        k: usize,
        first: &Array2<f64>,
        ratio: Option<&Array2<f64>>,
        step: Option<&StepTest>,
    ) {
        ndarray::Zip::indexed(&mut self.chosen)
            .and(&mut self.open)
            .for_each(|at, chosen, open| {
                let fitted = first[at].is_finite();
                match chosen {
                    None if fitted => *chosen = Some(k),
                    Some(_) if *open => {
                        let within = match (ratio, step) {
                            (Some(r), Some(s)) => r[at] <= s.threshold,
                            _ => false,
                        };
                        if fitted && within {
                            *chosen = Some(k);
                        } else {
                            *open = false;
                        }
                    }
                    _ => {}
                }
            });
    }
}

/// The clean and noise-perturbed fits of one window.
struct WindowFitPair<'a> {
    clean: WindowFit<'a>,
    perturbed: WindowFit<'a>,
}

/// What the study keeps of one window: the attribute of the clean and perturbed horizons, the
/// derivative vectors ([`DerivativeOrder::vector`]) and the noise power of the clean fit.
struct FittedWindow {
    map: Array2<f64>,
    perturbed: Array2<f64>,
    vectors: Vectors,
    power: Array2<f64>,
}

impl WindowFitPair<'_> {
    /// Streams both fits in batches of rows, keeping only the per-cell values the study
    /// needs.
    fn evaluate(
        &self,
        attribute: &AttributeDef,
        metres_per_unit: f64,
        tolerance: FlatTolerance,
    ) -> FittedWindow {
        let dim = self.clean.dim();
        let nan = || Array2::from_elem(dim, f64::NAN);
        let mut out = FittedWindow {
            map: nan(),
            perturbed: nan(),
            vectors: [nan(), nan(), nan()],
            power: nan(),
        };
        let value = |cells: &[Option<(Quadric, f64)>]| {
            let mut band = vec![Vec::with_capacity(cells.len())];
            let quadrics = cells.iter().map(|c| c.as_ref().map(|(q, _)| q));
            evaluate_cells(
                quadrics,
                &[attribute],
                metres_per_unit,
                tolerance,
                &mut band,
            );
            band.remove(0)
        };
        let batch = STUDY_BATCH_ROWS.max(self.clean.tile_rows());
        for first_row in (0..dim.0).step_by(batch) {
            let rows = first_row..(first_row + batch).min(dim.0);
            let cells = |r: &std::ops::Range<usize>| r.start * dim.1..r.end * dim.1;
            let clean = self.clean.map_tiles(rows.clone(), |tile| {
                let rows = tile.first_row..tile.first_row + tile.rows();
                (rows, value(&tile.cells), tile.cells)
            });
            for (rows, values, fitted) in clean {
                let range = cells(&rows);
                fill(
                    &mut out.map,
                    range.clone(),
                    values.iter().map(|&v| f64::from(v)),
                );
                let power = fitted.iter().map(|c| c.map_or(f64::NAN, |(_, p)| p));
                fill(&mut out.power, range.clone(), power);
                for (j, vector) in out.vectors.iter_mut().enumerate() {
                    let v = fitted.iter().map(|c| {
                        c.as_ref()
                            .map_or(f64::NAN, |(q, _)| attribute.order.vector(q)[j])
                    });
                    fill(vector, range.clone(), v);
                }
            }
            let perturbed = self.perturbed.map_tiles(rows.clone(), |tile| {
                let rows = tile.first_row..tile.first_row + tile.rows();
                (rows, value(&tile.cells))
            });
            for (rows, values) in perturbed {
                fill(
                    &mut out.perturbed,
                    cells(&rows),
                    values.iter().map(|&v| f64::from(v)),
                );
            }
        }
        out
    }
}

/// Rows per batch of the study's streamed fits.
const STUDY_BATCH_ROWS: usize = 256;

/// Writes `values` into the row-major cells `range` of `target`.
fn fill(
    target: &mut Array2<f64>,
    range: std::ops::Range<usize>,
    values: impl Iterator<Item = f64>,
) {
    let slice = target.as_slice_mut().expect("standard-layout array");
    for (cell, v) in slice[range].iter_mut().zip(values) {
        *cell = v;
    }
}

/// The noise model of a study: the tests between consecutive windows and each window's exact
/// derivative noise.
pub struct NoiseModel {
    /// The step tests, one per pair of consecutive windows.
    pub steps: Vec<StepTest>,
    /// Per window, the noise standard deviation of the full-window derivative vector, in CRS
    /// length units to the power -1 (Hessian) or 0 (gradient).
    pub derivative_noise_sd: Vec<f64>,
}

/// The noise model for `windows` under white noise of standard deviation `sigma` (see the
/// module notes). Noise power of window k: `c_k = sum |K_k|^2` over its derivative kernels (per
/// unit noise variance); step k's false-stop probability `p_k` solves
/// `p_k t_k (c_(k-1) - c_K) = alpha c_K / (K - 1)`, a false stop costing about the threshold
/// `t_k` times the smaller window's excess noise power, so the expected extra noise power of
/// the choice on structureless ground is at most `alpha c_K` (a union bound over the steps).
pub fn noise_model(
    geometry: &GridGeometry,
    windows: &[usize],
    order: DerivativeOrder,
    sigma: f64,
) -> Result<NoiseModel> {
    let kernels = windows
        .iter()
        .map(|&n| derivative_kernels(geometry, n, order))
        .collect::<Result<Vec<_>>>()?;
    let power: Vec<f64> = kernels.iter().map(sum_of_squares).collect();
    let largest = *power.last().unwrap_or(&0.0);
    let budget = PROPAGATION_ALPHA * largest / windows.len().saturating_sub(1).max(1) as f64;
    let steps = kernels
        .windows(2)
        .zip(windows.windows(2))
        .zip(&power)
        .map(|((pair, w), &smaller_power)| {
            let noise = PooledNoise::of(&kernel_difference(&pair[1], &pair[0]), POOL_RADIUS);
            let (false_stop, threshold) = noise.step_threshold(budget, smaller_power - largest);
            StepTest {
                windows: (w[0], w[1]),
                expected: sigma * sigma * noise.mean(),
                dof: noise.dof(),
                false_stop,
                threshold,
            }
        })
        .collect();
    Ok(NoiseModel {
        steps,
        derivative_noise_sd: power.iter().map(|p| sigma * p.sqrt()).collect(),
    })
}

/// The full-window kernels of the derivative vector of `order` (the rows of
/// [`DerivativeOrder::functionals`] applied to the coefficient kernels).
fn derivative_kernels(
    geometry: &GridGeometry,
    size: usize,
    order: DerivativeOrder,
) -> Result<Vectors> {
    let k = full_window_kernels(geometry, size)?;
    let rows = order.functionals();
    Ok(std::array::from_fn(|c| {
        k.iter()
            .zip(rows[c])
            .fold(Array2::zeros((size, size)), |acc, (kernel, t)| {
                acc + kernel * t
            })
    }))
}

fn sum_of_squares(v: &Vectors) -> f64 {
    v.iter().flat_map(|m| m.iter()).map(|x| x * x).sum()
}

/// `larger - smaller` with the smaller kernels centred in the larger window.
fn kernel_difference(larger: &Vectors, smaller: &Vectors) -> Vectors {
    let offset = (larger[0].nrows() - smaller[0].nrows()) / 2;
    std::array::from_fn(|k| {
        let mut d = larger[k].clone();
        for ((r, c), v) in smaller[k].indexed_iter() {
            d[(r + offset, c + offset)] -= v;
        }
        d
    })
}

/// The first three cumulants, per unit noise variance, of `Q = mean over a (2 radius + 1)^2
/// box of |D * n|^2` for white Gaussian noise n: Q is a Gaussian quadratic form whose
/// covariance `S` (over the box cells and vector components, scaled by the box area) has
/// entries `C_ij(y - y') = sum_u D_i(u) D_j(u + y - y')`, and its cumulants are
/// `2^(r-1) (r-1)! tr(S^r)`.
struct PooledNoise {
    /// tr S, tr S^2, tr S^3.
    traces: [f64; 3],
}

impl PooledNoise {
    fn of(d: &Vectors, radius: usize) -> Self {
        let edge = 2 * radius + 1;
        let reach = 2 * radius as isize;
        let offsets = (2 * reach + 1) as usize;
        let mut correlations = vec![[[0.0; 3]; 3]; offsets * offsets];
        for si in -reach..=reach {
            for sj in -reach..=reach {
                let cell =
                    &mut correlations[(si + reach) as usize * offsets + (sj + reach) as usize];
                for (i, row) in cell.iter_mut().enumerate() {
                    for (j, c) in row.iter_mut().enumerate() {
                        *c = cross_correlation(&d[i], &d[j], si, sj);
                    }
                }
            }
        }
        let cells = edge * edge;
        let s = DMatrix::from_fn(3 * cells, 3 * cells, |a, b| {
            let (y, i, y2, j) = (a / 3, a % 3, b / 3, b % 3);
            let si = (y / edge) as isize - (y2 / edge) as isize;
            let sj = (y % edge) as isize - (y2 % edge) as isize;
            correlations[(si + reach) as usize * offsets + (sj + reach) as usize][i][j]
                / cells as f64
        });
        let s2 = &s * &s;
        let traces = [s.trace(), s2.trace(), s2.component_mul(&s).sum()];
        Self { traces }
    }

    /// Mean of Q per unit noise variance.
    fn mean(&self) -> f64 {
        self.traces[0]
    }

    /// Degrees of freedom h of Pearson's three-moment chi-square fit, `tr(S^2)^3 / tr(S^3)^2`.
    fn dof(&self) -> f64 {
        let [_, t2, t3] = self.traces;
        if t3 > 0.0 {
            t2.powi(3) / (t3 * t3)
        } else {
            f64::INFINITY
        }
    }

    /// The false-stop probability `p` and threshold `t(p)` (the upper `p` quantile as a ratio)
    /// of a step whose false stops cost about `t(p) excess` each: a stop happens where the
    /// pooled change is `t` times its mean, and the smaller window's noise, which makes most of
    /// the change, is as large there. Solves `p t(p) excess = budget` by fixed-point iteration
    /// (t falls as p grows, so it converges from below in a few steps).
    fn step_threshold(&self, budget: f64, excess: f64) -> (f64, f64) {
        if excess <= 0.0 {
            return (0.5, self.ratio_quantile(0.5));
        }
        let mut t = 1.0;
        let mut p = 0.5;
        for _ in 0..8 {
            p = (budget / (t * excess)).clamp(MIN_STEP_PROBABILITY, 0.5);
            t = self.ratio_quantile(p).max(1.0);
        }
        (p, t)
    }

    /// Upper `p` quantile of Q as a ratio to its mean, from Pearson's three-moment fit
    /// `Q = tr S + sqrt(tr(S^2) / h) (chi2_h - h)` (Pearson 1959, Biometrika 46:364; as used
    /// by Imhof 1961, Biometrika 48:419; both from memory), which matches the mean, variance
    /// and skewness of Q.
    fn ratio_quantile(&self, p: f64) -> f64 {
        let [t1, t2, _] = self.traces;
        let h = self.dof();
        if t1 <= 0.0 || !h.is_finite() {
            return f64::INFINITY;
        }
        ChiSquared::new(h).map_or(f64::INFINITY, |c| {
            (t1 + (t2 / h).sqrt() * (c.inverse_cdf(1.0 - p) - h)) / t1
        })
    }
}

/// `sum_u a(u) b(u + s)` over the cells where both are defined (zero beyond the kernels).
fn cross_correlation(a: &Array2<f64>, b: &Array2<f64>, si: isize, sj: isize) -> f64 {
    let n = a.nrows() as isize;
    let mut sum = 0.0;
    for r in 0.max(-si)..n.min(n - si) {
        for c in 0.max(-sj)..n.min(n - sj) {
            sum += a[(r as usize, c as usize)] * b[((r + si) as usize, (c + sj) as usize)];
        }
    }
    sum
}

/// Mean of the finite values of `values` in the `(2 radius + 1)^2` box around each cell (cut
/// at the grid's edges), NaN where the cell itself is not finite. Separable: sums along rows,
/// then down columns, each in a fixed order (the same bits for any thread count).
fn box_mean(values: &Array2<f64>, radius: usize) -> Array2<f64> {
    let (rows, cols) = values.dim();
    let span = |i: usize, n: usize| i.saturating_sub(radius)..(i + radius + 1).min(n);
    let along_rows: Vec<Vec<(f64, f64)>> = (0..rows)
        .into_par_iter()
        .map(|r| {
            (0..cols)
                .map(|c| {
                    span(c, cols)
                        .map(|cc| values[(r, cc)])
                        .filter(|v| v.is_finite())
                        .fold((0.0, 0.0), |(s, n), v| (s + v, n + 1.0))
                })
                .collect()
        })
        .collect();
    let out: Vec<Vec<f64>> = (0..rows)
        .into_par_iter()
        .map(|r| {
            (0..cols)
                .map(|c| {
                    if !values[(r, c)].is_finite() {
                        return f64::NAN;
                    }
                    let (s, n) = span(r, rows).fold((0.0, 0.0), |(s, n), rr| {
                        (s + along_rows[rr][c].0, n + along_rows[rr][c].1)
                    });
                    s / n
                })
                .collect()
        })
        .collect();
    Array2::from_shape_vec((rows, cols), out.concat()).expect("rows x cols values")
}

/// RMS of `b - a` over the cells where both are finite.
fn rms_difference(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    rms_of(a.iter().zip(b.iter()).map(|(a, b)| b - a))
}

fn rms_of(v: impl Iterator<Item = f64>) -> f64 {
    let (s, n) = v
        .filter(|x| x.is_finite())
        .fold((0.0, 0usize), |(s, n), x| (s + x * x, n + 1));
    if n == 0 {
        f64::NAN
    } else {
        (s / n as f64).sqrt()
    }
}

fn robust_spread(values: &[f64]) -> f64 {
    quantiles(&mut values.to_vec(), [0.25, 0.75], Quantile::Nearest)
        .map_or(f64::NAN, |[q1, q3]| (q3 - q1) / 1.349)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::surface::window::{fit_quadrics_with_noise, QuadricField};

    /// The derivative vectors of a whole quadric field (NaN where the window has no fit).
    fn derivative_vectors(field: &QuadricField, order: DerivativeOrder) -> Vectors {
        let mut out: Vectors =
            std::array::from_fn(|_| Array2::from_elem((field.rows, field.cols), f64::NAN));
        for (i, q) in field.cells.iter().enumerate() {
            if let Some(q) = q {
                let at = (i / field.cols, i % field.cols);
                for (map, v) in out.iter_mut().zip(order.vector(q)) {
                    map[at] = v;
                }
            }
        }
        out
    }
    use crate::surface::curvature::{attribute_by_id, LocalSurface};
    use crate::synthetic::{Shape, Surface};

    fn grid(n: usize) -> GridGeometry {
        GridGeometry::survey((0.0, 10_000.0), 90.0, (25.0, 25.0), (n, n), String::new())
    }

    /// A fold of Gaussian section `width` m across its axis at `azimuth` degrees through `origin`
    /// (amplitude 20 m, an anticline when `up`).
    fn fold(origin: (f64, f64), azimuth: f64, width: f64, up: bool) -> Shape {
        Shape::Fold {
            origin,
            axis_azimuth: azimuth,
            amplitude: if up { 20.0 } else { -15.0 },
            sigma: width,
        }
    }

    /// `shapes` on a 2000 m datum sampled at the cell centres, plus seeded white noise.
    fn horizon(
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

    fn run(z: &Array2<f64>, g: &GridGeometry, windows: &[usize], attr: &str) -> Study {
        let attr = attribute_by_id(attr).unwrap();
        study(z.view(), g, windows, attr, 0.75, FlatTolerance::EXACT)
            .unwrap()
            .unwrap()
    }

    /// True RMS error of each window's map and (last) of the adaptive map against the analytic
    /// attribute of the surface, away from the grid's edges (16 cells).
    fn true_errors(s: &Study, g: &GridGeometry, surface: &Surface, attr: &str) -> Vec<f64> {
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
                    if d.is_finite() {
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
    fn box_mean_matches_direct_sums() {
        // Reference: the mean of the finite neighbours summed cell by cell (definition).
        let mut rng = SeededNoise::new(9);
        let v = Array2::from_shape_fn((23, 17), |_| {
            let x = rng.gaussian();
            if rng.uniform() < 0.2 {
                f64::NAN
            } else {
                x
            }
        });
        let got = box_mean(&v, 3);
        for ((r, c), g) in got.indexed_iter() {
            if !v[(r, c)].is_finite() {
                assert!(g.is_nan());
                continue;
            }
            let mut vals = Vec::new();
            for rr in r.saturating_sub(3)..=(r + 3).min(22) {
                for cc in c.saturating_sub(3)..=(c + 3).min(16) {
                    if v[(rr, cc)].is_finite() {
                        vals.push(v[(rr, cc)]);
                    }
                }
            }
            let want = vals.iter().sum::<f64>() / vals.len() as f64;
            assert!((g - want).abs() < 1e-12, "({r}, {c}): {g} vs {want}");
        }
    }

    #[test]
    fn derivative_noise_matches_the_closed_form_gains() {
        // REFERENCES.md section 3 noise gains (derived; consistent with Florinsky 1998): the
        // Hessian vector (z_xx, z_yy, sqrt(2) z_xy) has var h^4 / sigma^2 = 2 + 2 + 2 x 1/4 =
        // 4.5 at N = 3, 2 x 2/35 + 2 / 100 at N = 5; the gradient 2 x 1/6 and 2 x 1/50.
        let (h, sigma) = (25.0, 0.4);
        let g = grid(40);
        let hessian = noise_model(&g, &[3, 5], DerivativeOrder::Second, sigma).unwrap();
        let gradient = noise_model(&g, &[3, 5], DerivativeOrder::First, sigma).unwrap();
        let expected = [
            (hessian.derivative_noise_sd[0], 4.5f64.sqrt() / (h * h)),
            (
                hessian.derivative_noise_sd[1],
                (4.0 / 35.0 + 0.02f64).sqrt() / (h * h),
            ),
            (gradient.derivative_noise_sd[0], (2.0f64 / 6.0).sqrt() / h),
            (gradient.derivative_noise_sd[1], (2.0f64 / 50.0).sqrt() / h),
        ];
        for (got, gain) in expected {
            assert!(
                (got / (sigma * gain) - 1.0).abs() < 1e-12,
                "{got} vs {}",
                sigma * gain
            );
        }
    }

    #[test]
    fn change_between_nested_windows_has_the_difference_of_their_noise_powers() {
        // Hausman (1978): for nested least-squares fits the larger is efficient, so
        // var(smaller - larger) = var(smaller) - var(larger). For full windows on a rotated,
        // non-square grid: the kernels' squared difference against the fits' noise powers, and
        // those powers against the kernels' own squares.
        let g = GridGeometry::survey((0.0, 0.0), 25.0, (25.0, 12.5), (40, 40), String::new());
        for order in [DerivativeOrder::First, DerivativeOrder::Second] {
            let power = |n: usize| {
                let spec = WindowSpec {
                    size: n,
                    min_valid: 1.0,
                };
                let z = Array2::zeros((40, 40));
                let (_, p) =
                    fit_quadrics_with_noise(z.view(), &g, &spec, &order.functionals(), &|_| {})
                        .unwrap();
                p[(20, 20)]
            };
            for (small, large) in [(3, 5), (5, 9), (9, 15)] {
                let (ks, kl) = (
                    derivative_kernels(&g, small, order).unwrap(),
                    derivative_kernels(&g, large, order).unwrap(),
                );
                let change = sum_of_squares(&kernel_difference(&kl, &ks));
                let (ps, pl) = (power(small), power(large));
                assert!(
                    ((ps - pl) / change - 1.0).abs() < 1e-9,
                    "{order:?} {small}-{large}"
                );
                assert!((ps / sum_of_squares(&ks) - 1.0).abs() < 1e-9);
            }
        }
    }

    #[test]
    fn pooled_noise_statistics_match_monte_carlo() {
        // The step tests' noise model (kernel cross-correlations, Gaussian quadratic-form
        // cumulants, Pearson's three-moment chi-square) against fits of seeded white noise:
        // the pooled ratio's mean is 1 within 3%, and the share of interior cells above 1.5
        // times it is within a factor 1.5 of the model's tail probability.
        let g = grid(200);
        let windows = [3, 5, 9, 15];
        let kernels: Vec<Vectors> = windows
            .iter()
            .map(|&n| derivative_kernels(&g, n, DerivativeOrder::Second).unwrap())
            .collect();
        let (mut sums, mut above, mut cells) = ([0.0; 3], [0usize; 3], 0usize);
        for seed in 0..6 {
            let mut rng = SeededNoise::new(300 + seed);
            let z = Array2::from_shape_fn((200, 200), |_| rng.gaussian());
            let fits: Vec<(Vectors, Array2<f64>)> = windows
                .iter()
                .map(|&n| {
                    let spec = WindowSpec {
                        size: n,
                        min_valid: 1.0,
                    };
                    let functionals = DerivativeOrder::Second.functionals();
                    let (field, power) =
                        fit_quadrics_with_noise(z.view(), &g, &spec, &functionals, &|_| {})
                            .unwrap();
                    (derivative_vectors(&field, DerivativeOrder::Second), power)
                })
                .collect();
            for k in 0..3 {
                let expected = &fits[k].1 - &fits[k + 1].1;
                let ratio = pooled_ratio(&fits[k].0, &fits[k + 1].0, &expected);
                for r in 20..180 {
                    for c in 20..180 {
                        sums[k] += ratio[(r, c)];
                        above[k] += usize::from(ratio[(r, c)] > 1.5);
                    }
                }
            }
            cells += 160 * 160;
        }
        for k in 0..3 {
            let noise = PooledNoise::of(
                &kernel_difference(&kernels[k + 1], &kernels[k]),
                POOL_RADIUS,
            );
            let [t1, t2, _] = noise.traces;
            let h = noise.dof();
            let model = ChiSquared::new(h)
                .unwrap()
                .sf(h + 0.5 * t1 * (h / t2).sqrt());
            let (mean, share) = (sums[k] / cells as f64, above[k] as f64 / cells as f64);
            assert!((mean - 1.0).abs() < 0.03, "step {k}: mean {mean}");
            assert!(
                share < 1.5 * model && share > model / 1.5,
                "step {k}: {share} of cells above 1.5, model {model}"
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
                    let errors = true_errors(&s, &g, &surface, attr);
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
            let errors = true_errors(&s, &g, &surface, attr);
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
                    let errors = true_errors(&s, &g, &surface, attr);
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
        assert_eq!(one.chosen, two.chosen);
        assert!(one
            .adaptive
            .iter()
            .zip(two.adaptive.iter())
            .all(|(a, b)| a.to_bits() == b.to_bits()));
        assert_eq!(format!("{:?}", one.windows), format!("{:?}", two.windows));
        assert_eq!(format!("{:?}", one.steps), format!("{:?}", two.steps));
    }
}
