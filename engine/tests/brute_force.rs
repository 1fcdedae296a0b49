//! The fast window fit against a plain per-window least-squares solve (LAPACK's SVD-based
//! `gelsd` through ndarray-linalg, an independent general-purpose reference): random surfaces,
//! random nulls, non-square and rotated grids, several windows. Agreement to 1e-9 relative.

use flexure_engine::grid::GridGeometry;
use flexure_engine::stats::SeededNoise;
use flexure_engine::surface::curvature::DerivativeOrder;
use flexure_engine::surface::window::{fit_quadrics, fit_quadrics_with_noise, Quadric, WindowSpec};
use ndarray::{Array1, Array2};
use ndarray_linalg::{Inverse, LeastSquaresSvd};

fn geometry(cols: usize, rows: usize, rotation_deg: f64, dx: f64, dy: f64) -> GridGeometry {
    let (s, c) = rotation_deg.to_radians().sin_cos();
    GridGeometry {
        cols,
        rows,
        geo_transform: [1000.0, dx * c, dy * s, 9000.0, -dx * s, -dy * c],
        crs_wkt: String::new(),
        metres_per_unit: 1.0,
    }
}

/// A rough random surface (random quadratic plus random waves) with ~`null_share` nulls, all
/// of it times `scale`.
fn random_values(g: &GridGeometry, seed: u64, null_share: f64, scale: f64) -> Array2<f64> {
    let mut rng = SeededNoise::new(seed);
    let waves: Vec<[f64; 4]> = (0..5)
        .map(|_| {
            [
                rng.gaussian() * 20.0,
                rng.uniform() * 0.02,
                rng.uniform() * 0.02,
                rng.uniform() * 6.0,
            ]
        })
        .collect();
    let quad: Vec<f64> = (0..5).map(|_| rng.gaussian()).collect();
    Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
        let (x, y) = g.cell_centre(c, r);
        let (u, v) = (x - 1000.0, y - 9000.0);
        let z = 2000.0
            + 1e-4 * (quad[0] * u * u + quad[1] * v * v + quad[2] * u * v)
            + 0.05 * (quad[3] * u + quad[4] * v)
            + waves
                .iter()
                .map(|w| w[0] * (w[1] * u + w[2] * v + w[3]).sin())
                .sum::<f64>()
            + rng.gaussian();
        if rng.uniform() < null_share {
            f64::NAN
        } else {
            scale * z
        }
    })
}

/// The design matrix (x^2, y^2, xy, x, y, 1 in map coordinates relative to the centre cell) and
/// the values relative to the centre over the valid cells of one window; `None` if the centre
/// is null or fewer than `min_count` cells are valid.
fn window_design(
    values: &Array2<f64>,
    g: &GridGeometry,
    col: usize,
    row: usize,
    n: usize,
    min_count: usize,
) -> Option<(Array2<f64>, Array1<f64>)> {
    if !values[(row, col)].is_finite() {
        return None;
    }
    let m = (n / 2) as isize;
    let (xc, yc) = g.cell_centre(col, row);
    let mut design = Vec::new();
    let mut rhs = Vec::new();
    for dr in -m..=m {
        for dc in -m..=m {
            let (r, c) = (row as isize + dr, col as isize + dc);
            if r < 0 || c < 0 || r >= g.rows as isize || c >= g.cols as isize {
                continue;
            }
            let z = values[(r as usize, c as usize)];
            if !z.is_finite() {
                continue;
            }
            let (x, y) = g.cell_centre(c as usize, r as usize);
            let (x, y) = (x - xc, y - yc);
            design.extend_from_slice(&[x * x, y * y, x * y, x, y, 1.0]);
            // Values relative to the centre: the same a..e, better conditioned for the solver.
            rhs.push(z - values[(row, col)]);
        }
    }
    if rhs.len() < min_count {
        return None;
    }
    Some((
        Array2::from_shape_vec((rhs.len(), 6), design).unwrap(),
        Array1::from(rhs),
    ))
}

/// Least squares of the quadric over one window's design (see [`window_design`]): a..e.
fn reference_fit((a, b): (Array2<f64>, Array1<f64>)) -> [f64; 5] {
    let sol = a.least_squares(&b).unwrap().solution;
    [sol[0], sol[1], sol[2], sol[3], sol[4]]
}

fn coefficients(q: &Quadric) -> [f64; 5] {
    [q.a, q.b, q.c, q.d, q.e]
}

fn compare(rotation: f64, dx: f64, dy: f64, n: usize, null_share: f64, seed: u64) {
    compare_scaled(rotation, dx, dy, n, null_share, seed, 1.0);
}

fn compare_scaled(
    rotation: f64,
    dx: f64,
    dy: f64,
    n: usize,
    null_share: f64,
    seed: u64,
    scale: f64,
) {
    let g = geometry(41, 37, rotation, dx, dy);
    let values = random_values(&g, seed, null_share, scale);
    let spec = WindowSpec {
        size: n,
        min_valid: 0.75,
    };
    let min_count = ((0.75 * (n * n) as f64).ceil() as usize).max(6);
    let field = fit_quadrics(values.view(), &g, &spec, &|_| {}).unwrap();
    let mut pairs = Vec::new();
    for row in 0..g.rows {
        for col in 0..g.cols {
            let fast = field.get(col, row);
            let reference = window_design(&values, &g, col, row, n, min_count).map(reference_fit);
            assert_eq!(
                fast.is_some(),
                reference.is_some(),
                "cell ({col},{row}) window {n}: null mismatch"
            );
            if let (Some(f), Some(r)) = (fast, reference) {
                pairs.push((coefficients(&f), r));
            }
        }
    }
    assert!(
        pairs.len() > g.cols * g.rows / 3,
        "too few fitted cells to compare"
    );
    for k in 0..5 {
        let rms = (pairs.iter().map(|(_, r)| r[k] * r[k]).sum::<f64>() / pairs.len() as f64).sqrt();
        for (f, r) in &pairs {
            let tol = 1e-9 * r[k].abs().max(1e-3 * rms);
            assert!(
                (f[k] - r[k]).abs() <= tol,
                "coefficient {k}, window {n}: fast {} vs reference {}",
                f[k],
                r[k]
            );
        }
    }
}

#[test]
fn north_up_square_grid_matches_reference() {
    for n in [3, 5, 9] {
        compare(0.0, 25.0, 25.0, n, 0.1, 1 + n as u64);
    }
}

#[test]
fn rotated_non_square_grid_matches_reference() {
    for (n, rot) in [(3, 30.0), (5, -17.0), (7, 123.0), (11, 65.0)] {
        compare(rot, 25.0, 12.5, n, 0.12, 100 + n as u64);
    }
}

#[test]
fn surfaces_of_any_magnitude_match_reference() {
    // The fit's sums run in floating point about the grid's mean: surfaces scaled down to
    // kilometres (2 +- 0.1) and up by 50 (1e5 +- 5000) must agree with the reference as
    // closely as the unscaled one (relative tolerance), nulls included.
    for (n, scale) in [(3, 50.0), (5, 1e-3), (9, 50.0), (11, 1e-3)] {
        compare_scaled(20.0, 25.0, 25.0, n, 0.1, 200 + n as u64, scale);
    }
}

#[test]
fn grid_without_nulls_matches_reference_at_edges() {
    // Edges are nulls outside the grid: the masked path near the border, kernels inside.
    compare(10.0, 20.0, 30.0, 9, 0.0, 7);
}

#[test]
fn masked_noise_power_matches_the_reference_covariance() {
    // The per-cell noise power of the fitted derivatives against least-squares theory with an
    // independent solver: the coefficients' covariance is (X^T X)^-1 for unit noise (Seber &
    // Lee 2003, ch. 3), inverted here by LAPACK; sum_c t_c^T (X^T X)^-1 t_c for the rows t_c
    // of the Hessian and gradient vectors, on a rotated non-square grid with random nulls.
    let g = geometry(33, 29, 40.0, 25.0, 12.5);
    let values = random_values(&g, 11, 0.15, 1.0);
    let n = 7;
    let spec = WindowSpec {
        size: n,
        min_valid: 0.75,
    };
    let min_count = (0.75 * (n * n) as f64).ceil() as usize;
    for order in [DerivativeOrder::First, DerivativeOrder::Second] {
        let rows = order.functionals();
        let (_, power) = fit_quadrics_with_noise(values.view(), &g, &spec, &rows, &|_| {}).unwrap();
        let mut compared = 0;
        for row in 0..g.rows {
            for col in 0..g.cols {
                let Some((x, _)) = window_design(&values, &g, col, row, n, min_count) else {
                    continue;
                };
                let cov = x.t().dot(&x).inv().unwrap();
                let reference: f64 = rows
                    .iter()
                    .map(|t| {
                        let t = Array1::from(t.to_vec());
                        t.dot(&cov.dot(&t))
                    })
                    .sum();
                let fast = power[(row, col)];
                assert!(
                    (fast / reference - 1.0).abs() < 1e-6,
                    "{order:?} cell ({col},{row}): {fast} vs {reference}"
                );
                compared += 1;
            }
        }
        assert!(compared > g.cols * g.rows / 3, "{compared}");
    }
}
