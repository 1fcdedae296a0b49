//! Point lists written by GDAL's own exporter, `gdal2xyz.py` (installed with Debian's
//! gdal-bin), read back onto the grid of the GeoTIFF they came from.
//!
//! Source of the check: gdal2xyz prints one line per cell at the cell centre
//! (`gt[0] + (x + 0.5) gt[1] + (y + 0.5) gt[2]`, likewise for y; GDAL data model), coordinates
//! with `%.3f` and float values with `%g`, and writes nodata cells as the band's nodata value
//! unless `-skipnodata` (osgeo_utils/gdal2xyz.py, GDAL 3.6). The GeoTIFF values are quarter
//! metres below 10000, which `%g` prints exactly, and the bins and origin are multiples of
//! 0.5 m, which `%.3f` prints exactly; so the export holds the grid without loss and must read
//! back to the GeoTIFF's own geotransform and `read_raster` values, bit for bit.

use flexure_engine::grid::GridGeometry;
use flexure_engine::io::points::{
    is_plain_text, is_point_list, read_points, PointGrid, PointOptions,
};
use flexure_engine::io::{read_raster, write_float_geotiff, BandOut, ReadOptions, NODATA};
use ndarray::Array2;
use std::path::{Path, PathBuf};
use std::process::Command;

/// The exporter, where Debian's gdal-bin installs it (or on PATH).
fn gdal2xyz() -> PathBuf {
    let debian = PathBuf::from("/usr/bin/gdal2xyz.py");
    if debian.is_file() {
        return debian;
    }
    std::env::var_os("PATH")
        .and_then(|paths| {
            std::env::split_paths(&paths)
                .map(|d| d.join("gdal2xyz.py"))
                .find(|p| p.is_file())
        })
        .unwrap_or_else(|| {
            panic!(
                "gdal2xyz.py (GDAL's exporter, package gdal-bin) is not installed: run `make deps`"
            )
        })
}

fn export(tif: &Path, out: &Path, extra: &[&str]) {
    let output = Command::new(gdal2xyz())
        .args(extra)
        .arg(tif)
        .arg(out)
        .output()
        .unwrap_or_else(|e| panic!("cannot run gdal2xyz.py ({e}): run `make deps`"));
    assert!(
        output.status.success() && out.is_file(),
        "gdal2xyz.py failed (run `make deps` if GDAL's Python bindings are missing): {}",
        String::from_utf8_lossy(&output.stderr)
    );
}

fn assert_same_grid(points: &PointGrid, geometry: &GridGeometry, bands: &[Array2<f64>]) {
    assert_eq!((points.cols, points.rows), (geometry.cols, geometry.rows));
    for (got, want) in points.geo_transform.iter().zip(&geometry.geo_transform) {
        assert!(
            (got - want).abs() <= 1e-6,
            "geotransform {:?} vs GeoTIFF {:?}",
            points.geo_transform,
            geometry.geo_transform
        );
    }
    assert_eq!(points.bands.len(), bands.len());
    for (got, want) in points.bands.iter().zip(bands) {
        for ((rc, g), w) in got.indexed_iter().zip(want.iter()) {
            assert!(
                g.to_bits() == w.to_bits() || (g.is_nan() && w.is_nan()),
                "cell {rc:?}: point list {g}, GeoTIFF {w}"
            );
        }
    }
}

#[test]
fn gdal2xyz_exports_read_back_to_the_geotiff() {
    let dir = tempfile::tempdir().unwrap();
    let (cols, rows) = (23, 17);
    let geometry = GridGeometry {
        cols,
        rows,
        geo_transform: [431_250.0, 25.0, 0.0, 7_215_500.0, 0.0, -12.5],
        crs_wkt: gdal::spatial_ref::SpatialRef::from_epsg(32633)
            .and_then(|s| s.to_wkt())
            .unwrap(),
        metres_per_unit: 1.0,
    };
    // Quarter-metre depths below 10000 m (exact in float32 and in %g); nulls inside the grid,
    // including a corner, but every edge row and column keeps some values so the -skipnodata
    // export still spans the whole grid.
    let values = Array2::from_shape_fn((rows, cols), |(r, c)| {
        let null = (c * 5 + r * 3) % 13 == 0 || (r, c) == (rows - 1, 0);
        if null {
            f32::NAN
        } else {
            2000.0 + 0.25 * ((c * 37 + r * 91) % 4000) as f32
        }
    });
    let tif = dir.path().join("horizon.tif");
    let band = BandOut {
        description: "depth",
        unit: "m",
        values,
    };
    write_float_geotiff(&tif, &geometry, &[band], &[]).unwrap();
    let raster = read_raster(&tif, &ReadOptions::default()).unwrap();
    let (geometry, bands) = (raster.geometry, raster.bands);
    assert!(
        bands[0].iter().any(|v| v.is_nan()),
        "the test grid has nulls"
    );

    let all = dir.path().join("all.xyz");
    export(&tif, &all, &[]);
    let with_nodata = PointOptions {
        nodata: vec![NODATA as f64],
        ..PointOptions::default()
    };
    // The exports are point lists; the GeoTIFF is not (binary).
    assert!(is_point_list(&all) && !is_point_list(&tif));
    let grid = read_points(&all, &with_nodata).unwrap();
    assert_eq!(grid.lattice.points, cols * rows);
    assert_same_grid(&grid, &geometry, &bands);

    let skipped = dir.path().join("skipped.xyz");
    export(&tif, &skipped, &["-skipnodata"]);
    let grid = read_points(&skipped, &PointOptions::default()).unwrap();
    let nulls = bands[0].iter().filter(|v| v.is_nan()).count();
    assert_eq!(grid.lattice.empty_nodes, nulls);
    assert_same_grid(&grid, &geometry, &bands);

    let csv = dir.path().join("comma.csv");
    export(&tif, &csv, &["-csv", "-skipnodata"]);
    assert_same_grid(
        &read_points(&csv, &PointOptions::default()).unwrap(),
        &geometry,
        &bands,
    );
}

#[test]
fn text_gdal_cannot_open_goes_to_the_point_list_reader() {
    // GDAL opens no raster from these texts (its XYZ driver wants x y z lines from the
    // start). They are plain text, so the point-list reader gives the reason by line, or
    // reads the file when only its first 8 KB (free text) hid that it is a point list.
    let dir = tempfile::tempdir().unwrap();
    let notes = dir.path().join("notes.txt");
    std::fs::write(&notes, "Horizon: Vessa Shale top\n1 2\n3 4\n").unwrap();
    let long = dir.path().join("long_preamble.txt");
    let mut text = "Survey note: picks reviewed by the interpreter\n".repeat(200);
    text.push_str("Inline Crossline X Y Z\n");
    for r in 0..4 {
        for c in 0..4 {
            let (x, y) = (500_000.0 + 25.0 * c as f64, 4_000_000.0 - 25.0 * r as f64);
            text.push_str(&format!(
                "{} {} {x:.2} {y:.2} {}\n",
                10 + r,
                20 + c,
                1500 + r * 4 + c
            ));
        }
    }
    std::fs::write(&long, text).unwrap();
    for path in [&notes, &long] {
        assert!(gdal::Dataset::open(path).is_err(), "{path:?}");
        assert!(!is_point_list(path) && is_plain_text(path), "{path:?}");
    }
    let err = read_points(&notes, &PointOptions::default())
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("notes.txt: has no data line") && err.contains("is line 1"),
        "{err}"
    );
    let grid = read_points(&long, &PointOptions::default()).unwrap();
    assert_eq!((grid.cols, grid.rows), (4, 4));
    assert_eq!(grid.lattice.preamble, Some((1, 200)));
    assert_eq!(grid.bands[0][[3, 2]], 1514.0);
}
