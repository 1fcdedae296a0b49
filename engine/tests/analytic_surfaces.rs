//! Curvature of analytic surfaces with exact answers, through the whole fit-and-attribute
//! chain. Sources: differential geometry of surfaces (do Carmo 1976, Differential Geometry of
//! Curves and Surfaces, ch. 3; Florinsky 2016, Digital Terrain Analysis in Soil Science and
//! Geology, 2nd ed.) and the check values of REFERENCES.md section 4 (derived there, [D]).

use approx::assert_relative_eq;
use flexure_engine::grid::{Grid, GridGeometry};
use flexure_engine::stats::SeededNoise;
use flexure_engine::surface::curvature::{FlatTolerance, LocalSurface};
use flexure_engine::surface::horizon::{positive_down_depth, Domain, Velocity, ZUnit};
use flexure_engine::surface::window::{fit_quadrics, Quadric, WindowSpec};
use flexure_engine::synthetic::{Shape, Surface};
use ndarray::Array2;
use std::path::Path;

fn grid(cols: usize, rows: usize, h: (f64, f64), rotation_deg: f64) -> GridGeometry {
    let (s, c) = rotation_deg.to_radians().sin_cos();
    GridGeometry {
        cols,
        rows,
        geo_transform: [
            -(cols as f64) * h.0 / 2.0,
            h.0 * c,
            h.1 * s,
            (rows as f64) * h.1 / 2.0,
            -h.0 * s,
            -h.1 * c,
        ],
        crs_wkt: String::new(),
        metres_per_unit: 1.0,
    }
}

fn fit_at(values: &Array2<f64>, g: &GridGeometry, n: usize, col: usize, row: usize) -> Quadric {
    let spec = WindowSpec {
        size: n,
        min_valid: 0.5,
    };
    fit_quadrics(values.view(), g, &spec, &|_| {})
        .unwrap()
        .get(col, row)
        .expect("cell fitted")
}

fn local(q: &Quadric) -> LocalSurface {
    LocalSurface::new(q, 1.0, FlatTolerance::EXACT)
}

#[test]
fn any_global_quadratic_is_recovered_exactly_at_every_window() {
    // Least squares reproduces any function in the model space exactly (Gauss-Markov; the fit
    // is a projection), with or without nulls.
    let g = grid(71, 67, (25.0, 12.5), 23.0);
    let mut rng = SeededNoise::new(3);
    let coeffs = [
        1e-4 * rng.gaussian(),
        1e-4 * rng.gaussian(),
        1e-4 * rng.gaussian(),
        0.1 * rng.gaussian(),
        0.1 * rng.gaussian(),
        2500.0,
    ];
    let surface = Surface {
        datum: 0.0,
        shapes: vec![Shape::Quadratic {
            origin: (100.0, -50.0),
            coeffs,
        }],
    };
    let mut values = surface.sample(&g);
    values.iter_mut().for_each(|v| {
        if rng.uniform() < 0.08 {
            *v = f64::NAN
        }
    });
    values[(33, 35)] = surface.sample(&g)[(33, 35)];
    for n in [3, 5, 9, 17, 33] {
        let q = fit_at(&values, &g, n, 35, 33);
        let (x, y) = g.cell_centre(35, 33);
        let d = surface.eval(x, y);
        let got = [q.a, q.b, q.c, q.d, q.e];
        let want = [d.zxx / 2.0, d.zyy / 2.0, d.zxy, d.zx, d.zy];
        for (gv, wv) in got.iter().zip(want) {
            assert_relative_eq!(*gv, wv, max_relative = 1e-8, epsilon = 1e-15);
        }
    }
}

#[test]
fn sphere_has_equal_principal_curvatures_and_dome_shape() {
    // Sphere of radius R (a dome in positive-down depth): k_mean = k_max = k_min = 1/R,
    // k_gauss = 1/R^2, shape index +1 at the apex; off the apex k_pos = R^2/s^3 and
    // dip = asin(rho/R), s = sqrt(R^2 - rho^2) (REFERENCES.md section 4).
    // Discretisation error of k_mean at the apex at h/R = 0.01: +5.8e-5 (N = 3), +2.1e-4 (N = 5)
    // relative (REFERENCES.md section 4, derived).
    let r = 1000.0;
    let g = grid(101, 101, (10.0, 10.0), 0.0);
    let surface = Surface {
        datum: 0.0,
        shapes: vec![Shape::SphereDome {
            centre: g.cell_centre(50, 50),
            radius: r,
            apex: 2000.0,
        }],
    };
    let z = surface.sample(&g);
    for (n, rel) in [(3, 5.8e-5), (5, 2.1e-4)] {
        let s = local(&fit_at(&z, &g, n, 50, 50));
        assert_relative_eq!(s.k_mean * r - 1.0, rel, max_relative = 0.05);
        assert_relative_eq!(s.k_max, 1.0 / r, max_relative = 1e-3);
        assert_relative_eq!(s.k_min, 1.0 / r, max_relative = 1e-3);
        assert_relative_eq!(s.k_gauss, 1.0 / (r * r), max_relative = 1e-3);
        assert!(s.shape_index().unwrap() > 0.999);
        assert_relative_eq!(s.curvedness(), 1.0 / r, max_relative = 1e-3);
    }
    // Off the apex: 30 cells east, rho = 300 m.
    let s = local(&fit_at(&z, &g, 3, 80, 50));
    let rho: f64 = 300.0;
    let sr = (r * r - rho * rho).sqrt();
    assert_relative_eq!(s.k_pos(), r * r / sr.powi(3), max_relative = 1e-3);
    assert_relative_eq!(s.k_neg(), 1.0 / sr, max_relative = 1e-3);
    assert_relative_eq!(
        s.dip_degrees(),
        (rho / r).asin().to_degrees(),
        max_relative = 1e-4
    );
    assert_relative_eq!(s.k_mean, 1.0 / r, max_relative = 1e-3);
    assert_relative_eq!(s.dip_azimuth().unwrap(), 90.0, epsilon = 1e-6);
}

#[test]
fn saddle_cylinder_and_plane() {
    // Saddle (x^2 - y^2)/(2R): k_gauss -1/R^2, k_mean 0, shape index 0; parabolic cylinder
    // x^2/(2R): shape index 0.5; plane: curvatures 0, shape index undefined, dip atan(|grad|)
    // (REFERENCES.md section 4). Quadrics, so every window is exact.
    let r = 800.0;
    let g = grid(41, 41, (25.0, 25.0), 0.0);
    let quad = |coeffs: [f64; 6]| {
        Surface {
            datum: 0.0,
            shapes: vec![Shape::Quadratic {
                origin: g.cell_centre(20, 20),
                coeffs,
            }],
        }
        .sample(&g)
    };
    let saddle = local(&fit_at(
        &quad([0.5 / r, -0.5 / r, 0.0, 0.0, 0.0, 1500.0]),
        &g,
        5,
        20,
        20,
    ));
    assert_relative_eq!(saddle.k_gauss, -1.0 / (r * r), max_relative = 1e-9);
    assert!(saddle.k_mean.abs() < 1e-12);
    assert!(saddle.shape_index().unwrap().abs() < 1e-9);
    let cyl = local(&fit_at(
        &quad([0.5 / r, 0.0, 0.0, 0.0, 0.0, 1500.0]),
        &g,
        9,
        20,
        20,
    ));
    assert_relative_eq!(cyl.shape_index().unwrap(), 0.5, epsilon = 1e-9);
    let plane_z = quad([0.0, 0.0, 0.0, 0.03, -0.04, 1500.0]);
    let q = fit_at(&plane_z, &g, 5, 20, 20);
    let tol = FlatTolerance::for_grid(40.0, 25.0, 1.0);
    let plane = LocalSurface::new(&q, 1.0, tol);
    assert!(plane.k_mean.abs() < 1e-12 && plane.k_gauss.abs() < 1e-20);
    assert_eq!(plane.shape_index(), None);
    assert_relative_eq!(
        plane.dip_degrees(),
        0.05f64.atan().to_degrees(),
        max_relative = 1e-9
    );
}

#[test]
fn gaussian_hill_follows_surface_of_revolution_formulas() {
    // Surface of revolution z = F(rho): k_dip = F''/(1+F'^2)^(3/2),
    // k_strike = F'/(rho sqrt(1+F'^2)), k_mean = (k_dip + k_strike)/2, k_gauss = k_dip k_strike
    // (do Carmo 1976, section 3-3; REFERENCES.md section 4). F = -A exp(-rho^2/(2 s^2)).
    let (amp, sigma) = (80.0, 400.0);
    let g = grid(121, 121, (5.0, 5.0), 0.0);
    let centre = g.cell_centre(60, 60);
    let z = Surface {
        datum: 2000.0,
        shapes: vec![Shape::GaussianDome {
            centre,
            amplitude: amp,
            sigma,
        }],
    }
    .sample(&g);
    let (col, row) = (60 + 40, 60 - 30); // rho = 250 m, to the north-east
    let (x, y) = g.cell_centre(col, row);
    let rho = (x - centre.0).hypot(y - centre.1);
    let e = amp * (-rho * rho / (2.0 * sigma * sigma)).exp();
    let f1 = e * rho / (sigma * sigma);
    let f2 = e * (1.0 / (sigma * sigma) - rho * rho / sigma.powi(4));
    let k_dip = f2 / (1.0 + f1 * f1).powf(1.5);
    let k_strike = f1 / (rho * (1.0 + f1 * f1).sqrt());
    let s = local(&fit_at(&z, &g, 3, col, row));
    assert_relative_eq!(s.k_dip().unwrap(), k_dip, max_relative = 2e-3);
    assert_relative_eq!(s.k_strike().unwrap(), k_strike, max_relative = 2e-3);
    assert_relative_eq!(s.k_mean, (k_dip + k_strike) / 2.0, max_relative = 2e-3);
    assert_relative_eq!(s.k_gauss, k_dip * k_strike, max_relative = 4e-3);
}

#[test]
fn time_and_depth_versions_agree() {
    // depth = V t / 2000 (common practice): the same surface picked in two-way time and
    // converted must give the depth surface's curvature.
    let g = grid(61, 61, (25.0, 25.0), 12.0);
    let surface = Surface {
        datum: 2400.0,
        shapes: vec![Shape::GaussianDome {
            centre: (0.0, 0.0),
            amplitude: 50.0,
            sigma: 300.0,
        }],
    };
    let depth = surface.sample(&g);
    let v = 3200.0;
    let time = Grid {
        geometry: g.clone(),
        values: depth.mapv(|z| 2000.0 * z / v),
    };
    let converted = positive_down_depth(
        time,
        Path::new("t"),
        Domain::Time,
        ZUnit::Metre,
        &Velocity::Constant(v),
    )
    .unwrap();
    let a = local(&fit_at(&depth, &g, 5, 35, 28));
    let b = local(&fit_at(&converted, &g, 5, 35, 28));
    assert_relative_eq!(a.k_mean, b.k_mean, max_relative = 1e-9);
    assert_relative_eq!(a.k_dip().unwrap(), b.k_dip().unwrap(), max_relative = 1e-9);
    assert_relative_eq!(a.dip_degrees(), b.dip_degrees(), max_relative = 1e-9);
}

/// A surface placed at a given point.
type SurfaceAt = dyn Fn((f64, f64)) -> Surface;

#[test]
fn rotated_non_square_grid_agrees_with_north_up_square() {
    // Curvature is a property of the surface, not of the grid (do Carmo 1976): a quadric gives
    // identical attributes on both grids at the same point; a smooth dome agrees within the
    // discretisation error of small windows.
    let square = grid(81, 81, (10.0, 10.0), 0.0);
    let survey = grid(81, 161, (10.0, 5.0), 37.0);
    // Each surface is placed on the compared cell's centre, so both grids sample it around the
    // same point of the surface.
    let coeffs = [2e-4, -1e-4, 3e-4, 0.05, -0.02, 1800.0];
    let quadric = move |c: (f64, f64)| Surface {
        datum: 0.0,
        shapes: vec![Shape::Quadratic { origin: c, coeffs }],
    };
    let dome = |c: (f64, f64)| Surface {
        datum: 1800.0,
        shapes: vec![Shape::GaussianDome {
            centre: (c.0 + 30.0, c.1 - 20.0),
            amplitude: 30.0,
            sigma: 400.0,
        }],
    };
    let makers: [(&SurfaceAt, f64); 2] = [(&quadric, 1e-9), (&dome, 5e-3)];
    for (make, tol) in makers {
        let (sc, tc) = ((40, 40), (40, 80));
        let a_surface = make(square.cell_centre(sc.0, sc.1));
        let b_surface = make(survey.cell_centre(tc.0, tc.1));
        let a = local(&fit_at(&a_surface.sample(&square), &square, 3, sc.0, sc.1));
        let b = local(&fit_at(&b_surface.sample(&survey), &survey, 3, tc.0, tc.1));
        // The exact local surface from the closed-form derivatives.
        let (x, y) = square.cell_centre(sc.0, sc.1);
        let d = a_surface.eval(x, y);
        let truth = local(&d.quadric());
        assert_relative_eq!(a.k_mean, truth.k_mean, max_relative = tol);
        assert_relative_eq!(a.k_mean, b.k_mean, max_relative = tol);
        assert_relative_eq!(a.k_gauss, b.k_gauss, max_relative = 2.0 * tol);
        assert_relative_eq!(a.k_pos(), b.k_pos(), max_relative = tol);
        assert_relative_eq!(
            a.dip_degrees(),
            b.dip_degrees(),
            max_relative = tol,
            epsilon = 1e-9
        );
        assert_relative_eq!(
            a.dip_azimuth().unwrap(),
            b.dip_azimuth().unwrap(),
            max_relative = tol
        );
    }
}
