//! Property tests (proptest) of the whole fit-plus-attributes chain, from differential
//! geometry (do Carmo 1976, ch. 3; REFERENCES.md section 4): z -> -z flips the signed
//! curvatures, swaps k_max with -k_min and k_pos with -k_neg, keeps Gaussian curvature and
//! curvedness and turns the dip azimuth by 180; turning the grid 90 degrees clockwise keeps
//! every curvature and turns azimuths by 90; scaling all axes by L scales curvature by 1/L.

use flexure_engine::grid::GridGeometry;
use flexure_engine::surface::curvature::{FlatTolerance, LocalSurface};
use flexure_engine::surface::window::{fit_quadrics, WindowSpec};
use flexure_engine::synthetic::{Shape, Surface};
use ndarray::Array2;
use proptest::prelude::*;

const SIZE: usize = 15;

fn north_up(h: f64) -> GridGeometry {
    GridGeometry {
        cols: SIZE,
        rows: SIZE,
        geo_transform: [0.0, h, 0.0, 0.0, 0.0, -h],
        crs_wkt: String::new(),
        metres_per_unit: 1.0,
    }
}

/// The same array laid on a grid turned 90 degrees clockwise (columns run south).
fn turned(g: &GridGeometry) -> GridGeometry {
    let t = g.geo_transform;
    GridGeometry {
        geo_transform: [t[0], 0.0, t[5], t[3], -t[1], 0.0],
        ..g.clone()
    }
}

fn centre_surface(values: &Array2<f64>, g: &GridGeometry, n: usize) -> LocalSurface {
    let spec = WindowSpec {
        size: n,
        min_valid: 1.0,
    };
    let field = fit_quadrics(values.view(), g, &spec, &|_| {}).unwrap();
    LocalSurface::new(
        &field.get(SIZE / 2, SIZE / 2).unwrap(),
        1.0,
        FlatTolerance::EXACT,
    )
}

fn close(a: f64, b: f64, scale: f64) -> bool {
    (a - b).abs() <= 1e-7 * scale
}

fn axial_diff(a: f64, b: f64) -> f64 {
    ((a - b + 180.0).rem_euclid(360.0) - 180.0).abs()
}

prop_compose! {
    fn surfaces()(amp in -60.0..60.0f64, sigma in 80.0..400.0f64, cx in -100.0..100.0f64, cy in -100.0..100.0f64,
                  dx in -0.2..0.2f64, dy in -0.2..0.2f64, n in prop::sample::select(vec![3usize, 5, 9])) -> (Surface, usize) {
        let shapes = vec![
            Shape::GaussianDome { centre: (175.0 + cx, -175.0 + cy), amplitude: amp, sigma },
            Shape::Quadratic { origin: (0.0, 0.0), coeffs: [0.0, 0.0, 0.0, dx, dy, 0.0] },
        ];
        (Surface { datum: 1000.0, shapes }, n)
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(32))]

    #[test]
    fn negating_z_flips_signs((surface, n) in surfaces()) {
        let g = north_up(25.0);
        let z = surface.sample(&g);
        let p = centre_surface(&z, &g, n);
        let m = centre_surface(&z.mapv(|v| -v), &g, n);
        let scale = p.curvedness().max(1e-6);
        prop_assert!(close(p.k_mean, -m.k_mean, scale));
        prop_assert!(close(p.k_gauss, m.k_gauss, scale * scale));
        prop_assert!(close(p.k_max, -m.k_min, scale));
        prop_assert!(close(p.k_pos(), -m.k_neg(), scale));
        prop_assert!(close(p.curvedness(), m.curvedness(), scale));
        if let (Some(a), Some(b)) = (p.shape_index(), m.shape_index()) {
            prop_assert!((a + b).abs() < 1e-6);
        }
        if let (Some(a), Some(b)) = (p.dip_azimuth(), m.dip_azimuth()) {
            prop_assert!(axial_diff(a + 180.0, b) < 1e-6);
        }
    }

    #[test]
    fn turning_the_grid_keeps_curvature_and_turns_azimuth((surface, n) in surfaces()) {
        let g = north_up(25.0);
        let z = surface.sample(&g);
        let p = centre_surface(&z, &g, n);
        let t = centre_surface(&z, &turned(&g), n);
        let scale = p.curvedness().max(1e-6);
        prop_assert!(close(p.k_mean, t.k_mean, scale));
        prop_assert!(close(p.k_gauss, t.k_gauss, scale * scale));
        prop_assert!(close(p.k_pos(), t.k_pos(), scale));
        prop_assert!(close(p.k_neg(), t.k_neg(), scale));
        if let (Some(a), Some(b)) = (p.k_dip(), t.k_dip()) {
            prop_assert!(close(a, b, scale));
        }
        if let (Some(a), Some(b)) = (p.dip_azimuth(), t.dip_azimuth()) {
            prop_assert!(axial_diff(a + 90.0, b) < 1e-6);
        }
    }

    #[test]
    fn scaling_all_axes_scales_curvature((surface, n) in surfaces(), l in 0.1..10.0f64) {
        let g = north_up(25.0);
        let z = surface.sample(&g);
        let mut gs = g.clone();
        gs.geo_transform.iter_mut().for_each(|v| *v *= l);
        let p = centre_surface(&z, &g, n);
        let s = centre_surface(&z.mapv(|v| v * l), &gs, n);
        let scale = p.curvedness().max(1e-6);
        prop_assert!(close(p.k_mean / l, s.k_mean, scale / l));
        prop_assert!(close(p.k_gauss / (l * l), s.k_gauss, scale * scale / (l * l)));
        prop_assert!((p.dip_degrees() - s.dip_degrees()).abs() < 1e-6);
        if let (Some(a), Some(b)) = (p.shape_index(), s.shape_index()) {
            prop_assert!((a - b).abs() < 1e-6);
        }
    }
}
