//! Throughput (cells per second), criterion:
//! - `curvature_2048`: quadric fit plus all 13 attributes on a 2048 x 2048 grid at windows 3,
//!   9 and 33, with and without 10% random nulls;
//! - `window_study_1024`: the window study of k_pos (noise estimate, two fits per window, step
//!   tests, per-cell choice, figures) on a noisy 1024 x 1024 dome at windows 3, 5, 9 and 17,
//!   in one batch.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use flexure_engine::grid::GridGeometry;
use flexure_engine::stats::SeededNoise;
use flexure_engine::surface::curvature::{
    attribute_by_id, evaluate_field, FlatTolerance, ATTRIBUTES,
};
use flexure_engine::surface::study::plan;
use flexure_engine::surface::window::{fit_quadrics, WindowSpec};
use flexure_engine::synthetic::{Shape, Surface};
use ndarray::Array2;
use std::hint::black_box;

/// A north-up `side` x `side` grid of 25 m bins holding a Gaussian dome of `amplitude` m and
/// width `sigma` m centred on it.
fn dome(side: usize, amplitude: f64, sigma: f64) -> (GridGeometry, Array2<f64>) {
    let g = GridGeometry {
        cols: side,
        rows: side,
        geo_transform: [0.0, 25.0, 0.0, 0.0, 0.0, -25.0],
        crs_wkt: String::new(),
        metres_per_unit: 1.0,
    };
    let half = side as f64 * 12.5;
    let surface = Surface {
        datum: 2000.0,
        shapes: vec![Shape::GaussianDome {
            centre: (half, -half),
            amplitude,
            sigma,
        }],
    };
    let values = surface.sample(&g);
    (g, values)
}

fn curvature(c: &mut Criterion) {
    let side = 2048;
    let (g, full) = dome(side, 200.0, 8000.0);
    let mut rng = SeededNoise::new(5);
    let holed = full.mapv(|v| if rng.uniform() < 0.1 { f64::NAN } else { v });
    let attributes: Vec<_> = ATTRIBUTES.iter().collect();
    let tolerance = FlatTolerance::for_grid(200.0, 25.0, 1.0);
    let mut group = c.benchmark_group("curvature_2048");
    group.sample_size(10);
    group.throughput(Throughput::Elements((side * side) as u64));
    for n in [3usize, 9, 33] {
        for (label, values) in [("full", &full), ("nulls10", &holed)] {
            let spec = WindowSpec {
                size: n,
                min_valid: 0.75,
            };
            group.bench_with_input(BenchmarkId::new(label, n), &n, |b, _| {
                b.iter(|| {
                    let field = fit_quadrics(values.view(), &g, &spec, &|_| {}).unwrap();
                    black_box(evaluate_field(&field, &attributes, 1.0, tolerance))
                })
            });
        }
    }
    group.finish();
}

fn window_study(c: &mut Criterion) {
    let side = 1024;
    let (g, smooth) = dome(side, 100.0, 3000.0);
    let mut rng = SeededNoise::new(5);
    let depth = smooth.mapv(|v| v + 0.3 * rng.gaussian());
    let attribute = attribute_by_id("k_pos").expect("k_pos is an attribute");
    let mut group = c.benchmark_group("window_study_1024");
    group.sample_size(10);
    group.throughput(Throughput::Elements((side * side) as u64));
    group.bench_function("k_pos_3_5_9_17", |b| {
        b.iter(|| {
            let plan = plan(
                depth.view(),
                &g,
                &[3, 5, 9, 17],
                attribute,
                0.75,
                FlatTolerance::EXACT,
            )
            .expect("a valid study")
            .expect("a noise estimate");
            // The whole grid in one batch, the per-cell results dropped.
            black_box(plan.run(side, &[], &[], &mut |rows| {
                black_box(rows);
                Ok(())
            }))
        })
    });
    group.finish();
}

criterion_group!(benches, curvature, window_study);
criterion_main!(benches);
