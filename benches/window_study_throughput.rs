//! Throughput (cells per second) of the window study: noise estimate, two fits per window
//! (horizon and injected noise), the step tests and the per-cell choice, for k_pos on a noisy
//! 1024 x 1024 dome at windows 3, 5, 9 and 17.

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use flexure_engine::curvature::{attribute_by_id, FlatTolerance};
use flexure_engine::grid::GridGeometry;
use flexure_engine::synthetic::{SeededNoise, Shape, Surface};
use flexure_engine::window_study::study;
use std::hint::black_box;

const SIDE: usize = 1024;

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
            centre: (12_800.0, -12_800.0),
            amplitude: 100.0,
            sigma: 3000.0,
        }],
    };
    let mut rng = SeededNoise::new(5);
    let depth = surface.sample(&g).mapv(|v| v + 0.3 * rng.gaussian());
    let attribute = attribute_by_id("k_pos").expect("k_pos is an attribute");
    let mut group = c.benchmark_group("window_study_1024");
    group.sample_size(10);
    group.throughput(Throughput::Elements((SIDE * SIDE) as u64));
    group.bench_function("k_pos_3_5_9_17", |b| {
        b.iter(|| {
            black_box(study(
                depth.view(),
                &g,
                &[3, 5, 9, 17],
                attribute,
                0.75,
                FlatTolerance::EXACT,
            ))
        })
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
