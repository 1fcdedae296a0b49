//! The noise model of the window choice: each window's exact derivative noise from its kernels,
//! and per step between consecutive windows the pooled noise's cumulants, Pearson's
//! three-moment chi-square fit and the threshold from the propagation condition (see the
//! study's notes).

use super::choice::POOL_RADIUS;
use super::colour::NoiseColour;
use super::footprint::{Footprint, GridAxis};
use super::Vectors;
use crate::error::Result;
use crate::grid::GridGeometry;
use crate::surface::curvature::DerivativeOrder;
use crate::surface::window::full_window_kernels;
use nalgebra::DMatrix;
use ndarray::Array2;
use serde::Serialize;
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// Extra derivative noise power the per-cell choice may cost on structureless ground, as a
/// share of the largest window's (the alpha of the propagation condition; our choice).
pub const PROPAGATION_ALPHA: f64 = 0.1;

/// Share by which the footprint's expected pooled change is raised before it is taken off the
/// pooled change: the box average of the stripes' square wanders by up to about 15% of its
/// mean for periods of 2 to 6 cells in a 13-cell box, and the amplitude estimate's error adds
/// to it (our choice, on the tuning set of the acceptance test).
pub const FOOTPRINT_MARGIN: f64 = 0.25;

/// Smallest false-stop probability a step is given (below it the chi-square quantile loses
/// precision; a step this strict is already never taken on noise alone).
const MIN_STEP_PROBABILITY: f64 = 1e-12;

/// The test of one step from a window to the next larger one (serialised with the names of
/// the window-study report; values that are not finite as null).
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct StepTest {
    /// Window edge length of the smaller window, in cells.
    pub from_window: usize,
    /// Window edge length of the larger window, in cells.
    pub to_window: usize,
    /// Expected squared change of the derivative vector under the estimated noise alone for
    /// full windows, in CRS length units to the power -2 (Hessian) or 0 (gradient): the white
    /// part and `footprint_change`.
    #[serde(rename = "expected_squared_change")]
    pub expected: f64,
    /// The share of `expected` that the footprint makes (the same units; 0 without footprint),
    /// added to every cell's expectation.
    #[serde(rename = "footprint_squared_change")]
    pub footprint_change: f64,
    /// The correlated noise's power on this step over white noise's of the same variance (1
    /// for white noise): `sum (g * D)^2 / sum D^2` for the full windows' difference kernel `D`
    /// ([`super::colour`]); each cell's own white expectation is scaled by it.
    #[serde(rename = "correlated_noise_factor")]
    pub colour_factor: f64,
    /// Degrees of freedom of the chi-square fitted to the pooled noise's first three cumulants.
    #[serde(rename = "degrees_of_freedom")]
    pub dof: f64,
    /// Probability that noise alone stops the choice at this step.
    #[serde(rename = "false_stop_probability")]
    pub false_stop: f64,
    /// Largest accepted ratio of the pooled squared change to `expected`.
    pub threshold: f64,
}

/// The noise model of a study: the tests between consecutive windows and each window's exact
/// derivative noise.
pub struct NoiseModel {
    /// The step tests, one per pair of consecutive windows.
    pub steps: Vec<StepTest>,
    /// Per window, the noise standard deviation of the full-window derivative vector, in CRS
    /// length units to the power -1 (Hessian) or 0 (gradient), footprint included.
    pub derivative_noise_sd: Vec<f64>,
}

/// The noise power of kernels `d` (per component, summed) under the footprints as stationary
/// noise of random phase: a footprint of variance `v` and angular frequency `w` along its axis
/// has covariance `C(tau) = v cos(w tau_axis)`, so `sum_(u, u') D(u) D(u') C(u - u') = v
/// |D^(w)|^2` with `D^` the kernel's Fourier transform along the axis; the white part
/// `sigma^2 sum D^2` is the same identity for `C = sigma^2 delta`.
pub fn footprint_power(d: &Vectors, footprints: &[Footprint]) -> f64 {
    footprints
        .iter()
        .map(|f| {
            let w = std::f64::consts::TAU / f.period_cells;
            let transfer = |m: &Array2<f64>| {
                let (re, im) = m.indexed_iter().fold((0.0, 0.0), |(re, im), ((r, c), v)| {
                    let i = match f.axis {
                        GridAxis::Columns => c,
                        GridAxis::Rows => r,
                    };
                    let phase = w * i as f64;
                    (re + v * phase.cos(), im - v * phase.sin())
                });
                re * re + im * im
            };
            f.variance * d.iter().map(transfer).sum::<f64>()
        })
        .sum()
}

/// The noise model for `windows` under white noise of standard deviation `sigma`, or white
/// noise coloured by `colour` ([`super::colour`]: every kernel replaced by `g * D`), (see the
/// module notes). Noise power of window k: `c_k = sum |K_k|^2` over its derivative kernels (per
/// unit noise variance); step k's false-stop probability `p_k` solves
/// `p_k t_k (c_(k-1) - c_K) = alpha c_K / (K - 1)`, a false stop costing about the threshold
/// `t_k` times the smaller window's excess noise power, so the expected extra noise power of
/// the choice on structureless ground is at most `alpha c_K` (a union bound over the steps).
///
/// Footprint ([`footprint_power`]) adds to each window's noise and to each step's expected
/// change. A footprint that repeats within the pooling box adds nearly its mean to the pooled
/// change, so the step test takes that share as known: the pooled change less
/// `(1 + FOOTPRINT_MARGIN)` times it is held to the white part's threshold.
pub fn noise_model(
    geometry: &GridGeometry,
    windows: &[usize],
    order: DerivativeOrder,
    sigma: f64,
    footprints: &[Footprint],
    colour: Option<&NoiseColour>,
) -> Result<NoiseModel> {
    let white = windows
        .iter()
        .map(|&n| derivative_kernels(geometry, n, order))
        .collect::<Result<Vec<_>>>()?;
    let kernels: Vec<Vectors> = match colour {
        None => white.clone(),
        Some(c) => (white.iter())
            .map(|d| std::array::from_fn(|j| c.colour(&d[j])))
            .collect(),
    };
    let power: Vec<f64> = kernels.iter().map(sum_of_squares).collect();
    let largest = *power.last().unwrap_or(&0.0);
    let budget = PROPAGATION_ALPHA * largest / windows.len().saturating_sub(1).max(1) as f64;
    let steps = kernels
        .windows(2)
        .zip(windows.windows(2))
        .zip(white.windows(2))
        .zip(&power)
        .map(|(((pair, w), white_pair), &smaller_power)| {
            let difference = kernel_difference(&pair[1], &pair[0]);
            let white_difference = kernel_difference(&white_pair[1], &white_pair[0]);
            let colour_factor = sum_of_squares(&difference) / sum_of_squares(&white_difference);
            let noise = PooledNoise::of(&difference, POOL_RADIUS);
            let (false_stop, threshold) = noise.step_threshold(budget, smaller_power - largest);
            let footprint_change = footprint_power(&difference, footprints);
            StepTest {
                from_window: w[0],
                to_window: w[1],
                expected: sigma * sigma * noise.mean() + footprint_change,
                footprint_change,
                colour_factor,
                dof: noise.dof(),
                false_stop,
                threshold,
            }
        })
        .collect();
    Ok(NoiseModel {
        steps,
        derivative_noise_sd: (power.iter().zip(&kernels))
            .map(|(p, k)| (sigma * sigma * p + footprint_power(k, footprints)).sqrt())
            .collect(),
    })
}

/// The full-window kernels of the derivative vector of `order` (the rows of
/// [`DerivativeOrder::functionals`] applied to the coefficient kernels).
pub(super) fn derivative_kernels(
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
    let rows = (larger[0].nrows() - smaller[0].nrows()) / 2;
    let cols = (larger[0].ncols() - smaller[0].ncols()) / 2;
    std::array::from_fn(|k| {
        let mut d = larger[k].clone();
        for ((r, c), v) in smaller[k].indexed_iter() {
            d[(r + rows, c + cols)] -= v;
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

/// `sum_u a(u) b(u + s)` over the cells where both are defined (zero beyond the kernels; both
/// of one shape).
fn cross_correlation(a: &Array2<f64>, b: &Array2<f64>, si: isize, sj: isize) -> f64 {
    let (rows, cols) = (a.nrows() as isize, a.ncols() as isize);
    let mut sum = 0.0;
    for r in 0.max(-si)..rows.min(rows - si) {
        for c in 0.max(-sj)..cols.min(cols - sj) {
            sum += a[(r as usize, c as usize)] * b[((r + si) as usize, (c + sj) as usize)];
        }
    }
    sum
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::SeededNoise;
    use crate::surface::study::choice::pooled_ratio;
    use crate::surface::study::tests::grid;
    use crate::surface::window::{fit_quadrics_with_noise, QuadricField, WindowSpec};

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

    #[test]
    fn derivative_noise_matches_the_closed_form_gains() {
        // REFERENCES.md section 3 noise gains (derived; consistent with Florinsky 1998): the
        // Hessian vector (z_xx, z_yy, sqrt(2) z_xy) has var h^4 / sigma^2 = 2 + 2 + 2 x 1/4 =
        // 4.5 at N = 3, 2 x 2/35 + 2 / 100 at N = 5; the gradient 2 x 1/6 and 2 x 1/50.
        let (h, sigma) = (25.0, 0.4);
        let g = grid(40);
        let hessian = noise_model(&g, &[3, 5], DerivativeOrder::Second, sigma, &[], None).unwrap();
        let gradient = noise_model(&g, &[3, 5], DerivativeOrder::First, sigma, &[], None).unwrap();
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
                let ratio = pooled_ratio(&fits[k].0, &fits[k + 1].0, &expected, 0.0, 0..200);
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

    /// Adds to `sums[k]` the squared change of the fitted Hessian from window k to k + 1 over
    /// the interior of the 200 x 200 noise `z` (20 cells in from each edge); returns the cells.
    fn add_step_changes(
        z: &Array2<f64>,
        g: &GridGeometry,
        windows: &[usize; 4],
        sums: &mut [f64; 3],
    ) -> usize {
        let fits: Vec<Vectors> = windows
            .iter()
            .map(|&n| {
                let spec = WindowSpec {
                    size: n,
                    min_valid: 1.0,
                };
                let field =
                    crate::surface::window::fit_quadrics(z.view(), g, &spec, &|_| {}).unwrap();
                derivative_vectors(&field, DerivativeOrder::Second)
            })
            .collect();
        for (k, sum) in sums.iter_mut().enumerate() {
            for r in 20..180 {
                for c in 20..180 {
                    *sum += (0..3)
                        .map(|i| (fits[k + 1][i][(r, c)] - fits[k][i][(r, c)]).powi(2))
                        .sum::<f64>();
                }
            }
        }
        160 * 160
    }

    #[test]
    fn correlated_noise_power_matches_monte_carlo() {
        // The noise-power identity for correlated noise, C = sigma^2 g * g (white noise
        // smoothed by a Gaussian of 0.7 and 1.3 cells; the test's own generator, a direct
        // convolution cut at four widths and scaled to sd 1), against fits of seeded noise:
        // the mean squared change of the Hessian between consecutive windows over the
        // interior matches the steps' expectation sum (g * D)^2 within 5%.
        let g = grid(200);
        let windows = [3, 5, 9, 15];
        for width in [0.7, 1.3] {
            let colour = crate::surface::study::colour::NoiseColour::gaussian(width, width);
            let model = noise_model(
                &g,
                &windows,
                DerivativeOrder::Second,
                1.0,
                &[],
                Some(&colour),
            )
            .unwrap();
            let (mut sums, mut cells) = ([0.0; 3], 0usize);
            for seed in 0..4 {
                let z = crate::surface::study::footprint::tests::correlated_noise(
                    200,
                    width,
                    1.0,
                    900 + seed,
                );
                cells += add_step_changes(&z, &g, &windows, &mut sums);
            }
            for (k, (sum, step)) in sums.iter().zip(&model.steps).enumerate() {
                let mean = sum / cells as f64;
                let expected = step.expected;
                assert!(
                    (mean / expected - 1.0).abs() < 0.05,
                    "width {width} step {k}: Monte Carlo {mean} vs model {expected}"
                );
            }
        }
    }

    #[test]
    fn footprint_noise_power_matches_monte_carlo() {
        // The noise-power identity for a stationary covariance (white noise plus stripes of
        // random phase, C(tau) = sigma^2 delta + v cos(w tau)) against fits of seeded noise:
        // the mean squared change of the Hessian between consecutive windows over the interior
        // matches sigma^2 sum D^2 + v |D^(w)|^2 within 3%, stripes along either axis.
        let g = grid(200);
        let windows = [3, 5, 9, 15];
        let kernels: Vec<Vectors> = windows
            .iter()
            .map(|&n| derivative_kernels(&g, n, DerivativeOrder::Second).unwrap())
            .collect();
        for (axis, period, amplitude) in [(GridAxis::Columns, 4.0, 2.0), (GridAxis::Rows, 3.0, 1.5)]
        {
            let footprint = Footprint {
                axis,
                azimuth_deg: 0.0,
                period_cells: period,
                period_m: 25.0 * period,
                amplitude,
                variance: amplitude * amplitude / 2.0,
                peak_ratio: f64::NAN,
            };
            let (mut sums, mut cells) = ([0.0; 3], 0usize);
            for seed in 0..4 {
                let mut rng = SeededNoise::new(700 + seed);
                let phase = std::f64::consts::TAU * rng.uniform();
                let mut z = Array2::from_shape_fn((200, 200), |_| rng.gaussian());
                crate::surface::study::footprint::tests::add_stripes(
                    &mut z, axis, period, amplitude, phase,
                );
                cells += add_step_changes(&z, &g, &windows, &mut sums);
            }
            for k in 0..3 {
                let d = kernel_difference(&kernels[k + 1], &kernels[k]);
                let model = sum_of_squares(&d) + footprint_power(&d, &[footprint]);
                let mean = sums[k] / cells as f64;
                assert!(
                    (mean / model - 1.0).abs() < 0.03,
                    "{axis:?} step {k}: Monte Carlo {mean} vs model {model}"
                );
                // The stripes matter at the first step: without them the model would be off
                // by far more than the tolerance.
                if k == 0 {
                    assert!(footprint_power(&d, &[footprint]) > 0.3 * sum_of_squares(&d));
                }
            }
        }
    }
}
