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
//! makes the per-cell choice. This module runs the study (streamed fits of the clean and
//! noise-perturbed horizon per window), gives the per-window figures and the recommendation.

pub mod choice;
pub mod noise;
pub mod thresholds;

use crate::error::Result;
use crate::grid::GridGeometry;
use crate::stats::{quantiles, Quantile, SeededNoise};
use crate::surface::curvature::{evaluate_cells, AttributeDef, DerivativeOrder, FlatTolerance};
use crate::surface::window::{Quadric, WindowFit, WindowSpec};
use choice::{pooled_ratio, Choice};
use ndarray::{Array2, ArrayView2};
use noise::{estimate_noise, NoiseEstimate};
use thresholds::{noise_model, NoiseModel, StepTest};

/// Half width of the noise band of `share_within_noise`, in attribute noise standard
/// deviations.
pub const NOISE_BAND: f64 = 2.0;

/// Seed of the injected noise (results are reproducible).
const NOISE_SEED: u64 = 0x5eed;

/// Name of the per-cell rule and the recommendation, for reports.
pub const WINDOW_RULE: &str = "per cell: pooled sequential Lepski test on the fitted derivatives (13 x 13 box), step thresholds from the chi-square model of the pooled noise and the propagation condition; recommended: the single window closest (RMS) to the adaptive map";

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
    use crate::surface::curvature::{attribute_by_id, LocalSurface};
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
