//! flexure side by side with its peer, in one run (criterion): the full attribute set of
//! `flexure curvature` (the job as the command runs it: read, fit, attributes, compressed
//! GeoTIFF written and checked) and `peer_numpy.py` (a vectorised numpy/scipy least-squares fit
//! writing 12 float32 bands uncompressed) on the same 2048 x 2048 depth GeoTIFF, at windows 3,
//! 9 and 33; flexure both ZSTD-compressed and uncompressed. The peer needs Debian's python3-numpy,
//! python3-scipy and python3-gdal (`scripts/install-system-deps.sh --bench`); without them it
//! is skipped with a message.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion};
use flexure_engine::grid::GridGeometry;
use flexure_engine::io::{write_float_geotiff, BandOut, Compression, TiffOptions};
use flexure_engine::jobs::{CurvatureJob, Silent};
use flexure_engine::stats::SeededNoise;
use flexure_engine::synthetic::{Shape, Surface};
use std::path::{Path, PathBuf};
use std::process::Command;

const SIDE: usize = 2048;

/// A 2048 x 2048 depth GeoTIFF (EPSG:32625, 25 m bins): Gaussian folds and 0.2 m of seeded
/// noise, float32.
fn input(dir: &Path) -> PathBuf {
    let crs = gdal::spatial_ref::SpatialRef::from_epsg(32625)
        .and_then(|s| s.to_wkt())
        .expect("EPSG:32625 is known to PROJ");
    let g = GridGeometry::survey(
        (500_000.0, 3_900_000.0),
        90.0,
        (25.0, 25.0),
        (SIDE, SIDE),
        crs,
    );
    // Anticlines and synclines 600 m wide every 4 km across the 51 km square.
    let shapes = (0..13)
        .map(|k| Shape::Fold {
            origin: (
                500_000.0 + 4000.0 * k as f64,
                3_900_000.0 - 4000.0 * k as f64,
            ),
            axis_azimuth: 30.0 + 7.0 * k as f64,
            amplitude: if k % 2 == 0 { 40.0 } else { -25.0 },
            sigma: 600.0,
        })
        .collect();
    let surface = Surface {
        datum: 2500.0,
        shapes,
    };
    let mut rng = SeededNoise::new(11);
    let values = surface
        .sample(&g)
        .mapv(|z| (z + 0.2 * rng.gaussian()) as f32);
    let path = dir.join("depth_2048.tif");
    let band = BandOut {
        description: "depth",
        unit: "metre",
        values,
    };
    write_float_geotiff(&path, &g, &[band], &[]).expect("bench input written");
    path
}

/// The system Python that has GDAL, numpy and scipy, if any.
fn peer_python() -> Option<&'static str> {
    ["/usr/bin/python3", "python3"].into_iter().find(|p| {
        Command::new(p)
            .args(["-c", "import numpy, scipy; from osgeo import gdal"])
            .output()
            .is_ok_and(|o| o.status.success())
    })
}

fn side_by_side(c: &mut Criterion) {
    let dir = tempfile::tempdir().expect("temporary folder");
    let input = input(dir.path());
    let peer = Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/peer_numpy.py");
    let python = peer_python();
    if python.is_none() {
        eprintln!("peer skipped: no python3 with numpy, scipy and GDAL (scripts/install-system-deps.sh --bench)");
    }
    let mut group = c.benchmark_group("side_by_side_2048");
    group.sample_size(10);
    for n in [3usize, 9, 33] {
        let run = |compression: Compression| {
            let mut job = CurvatureJob::new(&input, dir.path().join("flexure"), vec![n]);
            job.tiff = TiffOptions {
                compression,
                cog: false,
            };
            move || job.run(&Silent).expect("flexure curvature")
        };
        group.bench_function(BenchmarkId::new("flexure", n), |b| {
            b.iter(run(Compression::Zstd))
        });
        // Like for like with the peer, which writes its bands uncompressed.
        group.bench_function(BenchmarkId::new("flexure_uncompressed", n), |b| {
            b.iter(run(Compression::None))
        });
        if let Some(python) = python {
            let out = dir.path().join("peer.tif");
            group.bench_function(BenchmarkId::new("peer_numpy", n), |b| {
                b.iter(|| {
                    let status = Command::new(python)
                        .arg(&peer)
                        .arg(&input)
                        .arg(&out)
                        .arg(n.to_string())
                        .status()
                        .expect("peer runs");
                    assert!(status.success(), "peer failed");
                })
            });
        }
    }
    group.finish();
}

criterion_group!(benches, side_by_side);
criterion_main!(benches);
