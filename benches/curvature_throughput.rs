//! Throughput (cells per second) of the full attribute set: quadric fit plus all 13
//! attributes, on a 2048 x 2048 grid at windows 3, 9 and 33, with and without 10% random nulls.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use flexure_engine::curvature::{evaluate_field, FlatTolerance, ATTRIBUTES};
use flexure_engine::grid::GridGeometry;
use flexure_engine::synthetic::{SeededNoise, Shape, Surface};
use flexure_engine::window::{fit_quadrics, WindowSpec};
use std::hint::black_box;

const SIDE: usize = 2048;

fn bench(c: &mut Criterion) {
    let g = GridGeometry {
        cols: SIDE,
        rows: SIDE,
        geo_transform: [0.0, 25.0, 0.0, 0.0, 0.0, -25.0],
        crs_wkt: String::new(),
        metres_per_unit: 1.0,
    };
    let surface = Surface {
        datum: 2000.0,
        shapes: vec![Shape::GaussianDome {
            centre: (25_600.0, -25_600.0),
            amplitude: 200.0,
            sigma: 8000.0,
        }],
    };
    let full = surface.sample(&g);
    let mut rng = SeededNoise::new(5);
    let holed = full.mapv(|v| if rng.uniform() < 0.1 { f64::NAN } else { v });
    let attributes: Vec<_> = ATTRIBUTES.iter().collect();
    let tolerance = FlatTolerance::for_grid(200.0, 25.0, 1.0);
    let mut group = c.benchmark_group("curvature_2048");
    group.sample_size(10);
    group.throughput(Throughput::Elements((SIDE * SIDE) as u64));
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

criterion_group!(benches, bench);
criterion_main!(benches);
