//! The per-bin sector fit against an independent weighted least-squares solve: LAPACK's
//! SVD-based `gelsd` (ndarray-linalg) on the sqrt(w)-scaled design, the covariance
//! s^2 (G^T W G)^-1 from LAPACK's inverse, and standard errors of B and phi0 by a numerical
//! (central-difference) Jacobian instead of the closed-form derivatives. Unequal weights,
//! unevenly spaced and missing sectors (the general case of REFERENCES.md section 5 [D]).

use flexure_engine::anisotropy::{fit_sectors, DEFAULT_MIN_SECTORS};
use flexure_engine::stats::SeededNoise;
use ndarray::{Array1, Array2};
use ndarray_linalg::{Inverse, LeastSquaresSvd};

struct Reference {
    x: [f64; 3],
    s2: f64,
    stderr_b: f64,
    stderr_phi_deg: f64,
}

fn reference(samples: &[(f64, f64, f64)]) -> Reference {
    let n = samples.len();
    let mut gw = Array2::zeros((n, 3));
    let mut tw = Array1::zeros(n);
    for (k, &(phi, t, w)) in samples.iter().enumerate() {
        let row = [
            1.0,
            (2.0 * phi.to_radians()).cos(),
            (2.0 * phi.to_radians()).sin(),
        ];
        for (j, v) in row.iter().enumerate() {
            gw[(k, j)] = v * w.sqrt();
        }
        tw[k] = t * w.sqrt();
    }
    let x = gw.least_squares(&tw).unwrap().solution;
    let residual = &tw - &gw.dot(&x);
    let s2 = residual.dot(&residual) / (n - 3) as f64;
    let cov = gw.t().dot(&gw).inv().unwrap() * s2;
    let b = |a1: f64, a2: f64| a1.hypot(a2);
    let phi = |a1: f64, a2: f64| 0.5 * a2.atan2(a1);
    let h = 1e-6;
    let jac = |f: &dyn Fn(f64, f64) -> f64| {
        [
            (f(x[1] + h, x[2]) - f(x[1] - h, x[2])) / (2.0 * h),
            (f(x[1], x[2] + h) - f(x[1], x[2] - h)) / (2.0 * h),
        ]
    };
    let propagate = |j: [f64; 2]| {
        (j[0] * j[0] * cov[(1, 1)] + 2.0 * j[0] * j[1] * cov[(1, 2)] + j[1] * j[1] * cov[(2, 2)])
            .sqrt()
    };
    Reference {
        x: [x[0], x[1], x[2]],
        s2,
        stderr_b: propagate(jac(&b)),
        stderr_phi_deg: propagate(jac(&phi)).to_degrees(),
    }
}

#[test]
fn weighted_uneven_sector_fit_matches_reference() {
    let mut rng = SeededNoise::new(31);
    for case in 0..50 {
        let n = 5 + case % 8;
        let samples: Vec<(f64, f64, f64)> = (0..n)
            .map(|k| {
                let phi = 180.0 * k as f64 / n as f64 + 10.0 * rng.uniform();
                let t =
                    1500.0 + 3.0 * (2.0 * (phi - 70.0).to_radians()).cos() + 0.8 * rng.gaussian();
                (phi, t, 0.2 + 2.0 * rng.uniform())
            })
            .collect();
        let f = fit_sectors(&samples, DEFAULT_MIN_SECTORS).unwrap();
        let r = reference(&samples);
        let close = |a: f64, b: f64, tol: f64| (a - b).abs() <= tol * b.abs().max(1.0);
        assert!(close(f.isotropic, r.x[0], 1e-11), "case {case}: A");
        assert!(
            close(f.a1, r.x[1], 1e-9),
            "case {case}: a1 {} vs {}",
            f.a1,
            r.x[1]
        );
        assert!(close(f.a2, r.x[2], 1e-9), "case {case}: a2");
        assert!(close(f.residual_variance, r.s2, 1e-8), "case {case}: s2");
        assert!(
            close(f.magnitude_stderr, r.stderr_b, 1e-6),
            "case {case}: sigma_B {} vs {}",
            f.magnitude_stderr,
            r.stderr_b
        );
        assert!(
            close(f.azimuth_stderr, r.stderr_phi_deg, 1e-6),
            "case {case}: sigma_phi {} vs {}",
            f.azimuth_stderr,
            r.stderr_phi_deg
        );
    }
}
