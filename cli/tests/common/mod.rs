//! Helpers shared by the executable's tests: run `flexure`, write small GeoTIFFs, and check
//! that a failure is clean.

// Each test binary includes this module and uses a subset of it.
#![allow(dead_code)]

use flexure_engine::grid::GridGeometry;
use flexure_engine::io::{write_float_geotiff, BandOut};
use ndarray::Array2;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// Runs the executable with `args`.
pub fn flexure(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_flexure"))
        .args(args)
        .output()
        .unwrap()
}

/// A survey grid ([`GridGeometry::survey`]) in WGS 84 / UTM zone 25N (EPSG:32625).
pub fn survey_geometry(
    origin: (f64, f64),
    column_azimuth: f64,
    bins: (f64, f64),
    size: (usize, usize),
) -> GridGeometry {
    let crs = gdal::spatial_ref::SpatialRef::from_epsg(32625).unwrap();
    GridGeometry::survey(origin, column_azimuth, bins, size, crs.to_wkt().unwrap())
}

/// A north-up EPSG:32625 grid of 25 m bins with the size of `values`.
pub fn north_up(cols: usize, rows: usize) -> GridGeometry {
    survey_geometry((500_000.0, 3_900_000.0), 90.0, (25.0, 25.0), (cols, rows))
}

/// Writes `bands` (all the same size) as a GeoTIFF on `geometry`, declaring no unit.
pub fn write_bands(
    dir: &Path,
    name: &str,
    geometry: &GridGeometry,
    bands: Vec<Array2<f32>>,
) -> PathBuf {
    write_bands_in(dir, name, geometry, bands, "")
}

/// Writes `bands` (all the same size) as a GeoTIFF on `geometry`, each declaring `unit`.
pub fn write_bands_in(
    dir: &Path,
    name: &str,
    geometry: &GridGeometry,
    bands: Vec<Array2<f32>>,
    unit: &str,
) -> PathBuf {
    let path = dir.join(name);
    let bands: Vec<BandOut> = bands
        .into_iter()
        .map(|values| BandOut {
            description: "z",
            unit,
            values,
        })
        .collect();
    write_float_geotiff(&path, geometry, &bands, &[]).unwrap();
    path
}

/// Files a job may have written into `dir` (final or temporary names).
pub fn outputs_in(dir: &Path) -> Vec<String> {
    std::fs::read_dir(dir)
        .map(|d| {
            d.map(|e| e.unwrap().file_name().to_string_lossy().to_string())
                .filter(|n| {
                    [
                        "_w",
                        "anisotropy",
                        "partial",
                        "window_study",
                        "stage",
                        "roses",
                        "wells",
                        "well_paths",
                        "sheet",
                        "plan",
                    ]
                    .iter()
                    .any(|k| n.contains(k))
                })
                .collect()
        })
        .unwrap_or_default()
}

/// Runs a failing command and checks the failure is clean (exit 1, one line, no panic, no
/// output in `out`); returns the message.
pub fn fails(args: &[&str], out: &Path) -> String {
    let stderr = refusal(args);
    assert!(
        outputs_in(out).is_empty(),
        "outputs left: {:?}",
        outputs_in(out)
    );
    stderr
}

/// Runs a failing command into an output folder that already holds files (a previous run)
/// and checks the failure is clean and left the folder exactly as it was: the same files and
/// folders, hidden ones included, with the same bytes; returns the message.
pub fn fails_leaving_unchanged(args: &[&str], out: &Path) -> String {
    let before = tree(out);
    let stderr = refusal(args);
    assert_eq!(tree(out), before, "the folder changed: {stderr}");
    stderr
}

/// Runs a command that must fail cleanly (exit 1 for a run error, 2 for a usage error, one
/// line starting `flexure: error: `, no panic) and returns its message.
fn refusal(args: &[&str]) -> String {
    let o = flexure(args);
    let stderr = String::from_utf8_lossy(&o.stderr).to_string();
    assert!(
        matches!(o.status.code(), Some(1 | 2)),
        "args {args:?}: exit {:?}, stderr {stderr}",
        o.status.code()
    );
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert_eq!(
        stderr.trim_end().lines().count(),
        1,
        "one line expected: {stderr}"
    );
    assert!(stderr.starts_with("flexure: error: "), "{stderr}");
    stderr
}

/// Every file and folder under `dir` (hidden ones included) by relative path, with the bytes
/// of the files (`None` for folders); empty when `dir` does not exist.
pub fn tree(dir: &Path) -> std::collections::BTreeMap<PathBuf, Option<Vec<u8>>> {
    let mut out = std::collections::BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        let Ok(entries) = std::fs::read_dir(&d) else {
            continue;
        };
        for e in entries {
            let p = e.unwrap().path();
            let rel = p.strip_prefix(dir).unwrap().to_path_buf();
            if p.is_dir() {
                out.insert(rel, None);
                stack.push(p);
            } else {
                out.insert(rel, Some(std::fs::read(&p).unwrap()));
            }
        }
    }
    out
}

/// Every band of a raster as the bits of its float32 values, row-major.
pub fn band_bits(path: &Path) -> Vec<Vec<u32>> {
    let ds = gdal::Dataset::open(path).unwrap();
    let (cols, rows) = ds.raster_size();
    (1..=ds.raster_count())
        .map(|b| {
            let buf = ds
                .rasterband(b)
                .unwrap()
                .read_as::<f32>((0, 0), (cols, rows), (cols, rows), None)
                .unwrap();
            buf.data().iter().map(|v| v.to_bits()).collect()
        })
        .collect()
}
