//! Inputs as practitioners hold them, end to end: declared units and nulls honoured, flags that
//! contradict a file refused, undeclared sentinels caught, velocity units checked, and the
//! provenance every output raster records.

mod common;

use common::{fails, flexure, north_up, write_bands_in};
use flexure_engine::io::{read_raster, ReadOptions};
use ndarray::Array2;
use std::path::{Path, PathBuf};
use std::process::Command;

/// A bowl z = 2000 + 0.25 r^2 (r in cells from cell (18, 20)) on a 40 x 36 north-up grid of
/// 25 m bins; every value is a multiple of 0.25, exact in float32.
fn bowl() -> Array2<f32> {
    Array2::from_shape_fn((36, 40), |(r, c)| {
        2000.0 + ((r as f32 - 18.0).powi(2) + (c as f32 - 20.0).powi(2)) * 0.25
    })
}

/// k_mean (1/km) at the bowl's centre when its values are lengths of `metres` each: a global
/// quadratic z = a (x^2 + y^2) with a = 0.25 metres / 625 m^-1 is fitted exactly by any
/// window (REFERENCES.md section 4), and with zero slope k_mean = a + b = 2a (Roberts 2001).
fn centre_k_mean(metres: f64) -> f64 {
    2.0 * 0.25 * metres / 625.0 * 1000.0
}

/// The k_mean band's value at the bowl's centre.
fn at_centre(bands: &[Array2<f64>]) -> f64 {
    bands[0][(18, 20)]
}

/// Runs `curvature INPUT --out <a fresh folder> EXTRA...`, which must fail cleanly with
/// nothing written (`common::fails`); returns the message.
fn refused(input: &Path, extra: &[&str]) -> String {
    let out = input.with_file_name("refused_out");
    let mut args = vec![
        "curvature",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    fails(&args, &out)
}

/// Relative round-off of the float32 outputs.
const F32: f64 = 1e-6;

fn assert_rel(got: f64, expected: f64, tol: f64, what: &str) {
    assert!(
        (got - expected).abs() <= tol * expected.abs(),
        "{what}: {got} vs {expected}"
    );
}

/// Writes one band declaring `unit` (and no nodata when `nodata` is false: the values are
/// written as they are).
fn write_unit(dir: &Path, name: &str, values: Array2<f32>, unit: &str) -> PathBuf {
    let g = north_up(values.ncols(), values.nrows());
    write_bands_in(dir, name, &g, vec![values], unit)
}

/// Writes a GeoTIFF with no declared nodata (GDAL directly), so sentinels stay plain values.
fn write_undeclared(path: &Path, values: &Array2<f32>) {
    let g = north_up(values.ncols(), values.nrows());
    let driver = gdal::DriverManager::get_driver_by_name("GTiff").unwrap();
    let mut ds = driver
        .create_with_band_type::<f32, _>(path, g.cols, g.rows, 1)
        .unwrap();
    ds.set_geo_transform(&g.geo_transform).unwrap();
    ds.set_spatial_ref(&gdal::spatial_ref::SpatialRef::from_wkt(&g.crs_wkt).unwrap())
        .unwrap();
    let mut band = ds.rasterband(1).unwrap();
    let mut buffer = gdal::raster::Buffer::new((g.cols, g.rows), values.iter().copied().collect());
    band.write((0, 0), (g.cols, g.rows), &mut buffer).unwrap();
}

/// Runs `curvature` (window 5, k_mean and dip) and returns its two bands.
fn curvature(input: &Path, out: &Path, extra: &[&str]) -> Vec<Array2<f64>> {
    let mut args = vec![
        "curvature",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--windows",
        "5",
        "--attributes",
        "k_mean,dip",
        "--overwrite",
    ];
    args.extend_from_slice(extra);
    let o = flexure(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stem = input.file_stem().unwrap().to_string_lossy();
    read_raster(
        &out.join(format!("{stem}_w05.tif")),
        &ReadOptions::default(),
    )
    .unwrap()
    .bands
}

#[test]
fn declared_feet_are_converted_and_a_contradicting_flag_is_refused() {
    // 1 ft = 0.3048 m and 1 US survey ft = 1200/3937 m (NIST SP 811, from memory); the bowl's
    // values are exact in float32, so the conversion is checked to round-off.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let ft = write_unit(d, "ft.tif", bowl(), "ft");
    let m = write_unit(d, "m.tif", bowl(), "metre");
    let plain = write_unit(d, "plain.tif", bowl(), "");
    let out = d.join("out");
    let expect_ft = centre_k_mean(0.3048);
    assert_rel(
        at_centre(&curvature(&ft, &out, &[])),
        expect_ft,
        F32,
        "declared ft",
    );
    assert_rel(
        at_centre(&curvature(&m, &out, &[])),
        centre_k_mean(1.0),
        F32,
        "declared m",
    );
    assert_rel(
        at_centre(&curvature(&plain, &out, &["--z-unit", "us-ft"])),
        centre_k_mean(1200.0 / 3937.0),
        F32,
        "--z-unit us-ft",
    );
    let msg = refused(&ft, &["--z-unit", "m", "--windows", "3"]);
    assert!(msg.contains("--z-unit m") && msg.contains("ft"), "{msg}");
    let msg = refused(&m, &["--domain", "time", "--velocity", "3000"]);
    assert!(
        msg.contains("--domain time") && msg.contains("metre"),
        "{msg}"
    );
}

#[test]
fn an_undeclared_z_unit_follows_a_crs_in_feet() {
    // A CRS whose linear unit is the international foot (PROJ +units=ft): with no band unit,
    // depths are read in feet too, so the bowl in feet over 25 ft bins has k_mean
    // 2 * 0.25 / 625 per ft = 2.6247 /km (calculus; 1 ft = 0.3048 m).
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let path = d.join("feet_crs.tif");
    let mut g = north_up(40, 36);
    g.crs_wkt = gdal::spatial_ref::SpatialRef::from_proj4(
        "+proj=tmerc +lat_0=0 +lon_0=-33 +k=0.9996 +x_0=500000 +y_0=0 +ellps=WGS84 +units=ft +no_defs",
    )
    .unwrap()
    .to_wkt()
    .unwrap();
    write_bands_in(d, "feet_crs.tif", &g, vec![bowl()], "");
    let out = d.join("out");
    let o = flexure(&[
        "curvature",
        path.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--windows",
        "5",
        "--attributes",
        "k_mean",
    ]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(
        stdout.contains("ft assumed") && stdout.contains("CRS"),
        "{stdout}"
    );
    let bands = read_raster(&out.join("feet_crs_w05.tif"), &ReadOptions::default())
        .unwrap()
        .bands;
    assert_rel(
        at_centre(&bands),
        2.0 * 0.25 / 625.0 / 0.3048 * 1000.0,
        F32,
        "ft CRS",
    );
}

#[test]
fn declared_times_set_the_domain_seconds_become_ms_and_twt_is_an_alias() {
    // depth = V t / 2000 (common practice): t = 2000 z / V ms at V = 3000 m/s gives back the
    // bowl in metres. The times are stored in float32, so agreement is to about 1e-4.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let ms = bowl().mapv(|z| (z as f64 * 2000.0 / 3000.0) as f32);
    let s = ms.mapv(|t| (t as f64 / 1000.0) as f32);
    let ms_path = write_unit(d, "ms.tif", ms.clone(), "ms");
    let s_path = write_unit(d, "s.tif", s, "s");
    let plain = write_unit(d, "plain.tif", ms, "");
    let out = d.join("out");
    let expect = centre_k_mean(1.0);
    // Declared ms: time without --domain.
    let got = at_centre(&curvature(&ms_path, &out, &["--velocity", "3000"]));
    assert_rel(got, expect, 2e-3, "declared ms");
    // Declared seconds: converted to ms.
    let got = at_centre(&curvature(&s_path, &out, &["--velocity", "3000"]));
    assert_rel(got, expect, 2e-3, "declared s");
    // Undeclared: --domain twt, the trade's name for two-way time.
    let got = at_centre(&curvature(
        &plain,
        &out,
        &["--domain", "twt", "--velocity", "3000"],
    ));
    assert_rel(got, expect, 2e-3, "twt alias");
    let msg = refused(&ms_path, &["--domain", "depth"]);
    assert!(
        msg.contains("--domain depth") && msg.contains("ms"),
        "{msg}"
    );
}

#[test]
fn velocities_are_checked_for_their_unit() {
    // 10000 ft/s = 3048 m/s (1 ft = 0.3048 m); 10000 read as m/s is outside the common-practice
    // range of average velocities (1400-7000 m/s) and names ft/s.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let t = bowl();
    let input = write_unit(d, "t.tif", t.clone(), "ms");
    let out = d.join("out");
    let msg = refused(&input, &["--velocity", "10000"]);
    assert!(msg.contains("ft/s") && msg.contains("1400"), "{msg}");
    let msg = refused(&input, &["--velocity", "3.1"]);
    assert!(msg.contains("km/s"), "{msg}");
    // t ms at V m/s is V t / 2000 m: the bowl scaled by V / 2000.
    let expect = centre_k_mean(3048.0 / 2000.0);
    let got = at_centre(&curvature(
        &input,
        &out,
        &["--velocity", "10000", "--velocity-unit", "ft/s"],
    ));
    assert_rel(got, expect, F32, "ft/s");
    // A velocity grid declaring ft/s contradicts --velocity-unit m/s, and is honoured alone.
    let vgrid = write_unit(d, "v.tif", Array2::from_elem(t.dim(), 10000.0), "ft/s");
    let msg = refused(
        &input,
        &[
            "--velocity-grid",
            vgrid.to_str().unwrap(),
            "--velocity-unit",
            "m/s",
        ],
    );
    assert!(
        msg.contains("--velocity-unit m/s") && msg.contains("ft/s"),
        "{msg}"
    );
    let got = at_centre(&curvature(
        &input,
        &out,
        &["--velocity-grid", vgrid.to_str().unwrap()],
    ));
    assert_rel(got, expect, F32, "declared ft/s grid");
}

#[test]
fn undeclared_sentinels_are_refused_until_declared() {
    // -999.25 is a common null sentinel of the trade (common practice); undeclared, it would be
    // a 3000 m spike.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let mut values = bowl();
    values[(10, 10)] = -999.25;
    values[(11, 30)] = -999.25;
    let input = d.join("sentinel.tif");
    write_undeclared(&input, &values);
    let out = d.join("out");
    let msg = refused(&input, &[]);
    assert!(
        msg.contains("-999.25") && msg.contains("--nodata -999.25"),
        "{msg}"
    );
    let bands = curvature(&input, &out, &["--nodata", "-999.25"]);
    // With the sentinels as nulls every fit sees the bowl only: k_mean is at most its value at
    // the centre (the bowl's curvature falls with slope; Roberts 2001). Read as data, the
    // 3000 m spikes would give curvatures thousands of times larger.
    let largest = bands[0]
        .iter()
        .filter(|v| v.is_finite())
        .fold(0.0f64, |m, v| m.max(v.abs()));
    assert!(largest <= centre_k_mean(1.0) * (1.0 + F32), "{largest}");
    assert!(
        bands[0][(10, 12)].is_finite(),
        "cells beside a null are still fitted"
    );
}

#[test]
fn outputs_record_their_provenance_for_gdalinfo() {
    // gdalinfo (GDAL's own reader) shows the metadata; sha256sum (GNU coreutils) checks the
    // recorded checksum of the input independently.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let input = write_unit(d, "h.tif", bowl(), "m");
    let out = d.join("out");
    curvature(&input, &out, &[]);
    let info = Command::new("gdalinfo")
        .arg(out.join("h_w05.tif"))
        .output()
        .unwrap();
    let info = String::from_utf8_lossy(&info.stdout).to_string();
    let sum = Command::new("sha256sum").arg(&input).output().unwrap();
    let sum = String::from_utf8_lossy(&sum.stdout)
        .split_whitespace()
        .next()
        .unwrap()
        .to_string();
    let absolute = input.canonicalize().unwrap();
    for expect in [
        format!("FLEXURE_INPUT_1={} sha256:{sum}", absolute.display()),
        format!(
            "FLEXURE_COMMAND={} curvature {} --out {} --windows 5 --attributes k_mean,dip --overwrite",
            env!("CARGO_BIN_EXE_flexure"),
            input.display(),
            out.display()
        ),
        format!("FLEXURE_VERSION=flexure {}", env!("CARGO_PKG_VERSION")),
        "FLEXURE_DOMAIN=depth".to_string(),
        "FLEXURE_Z_UNIT=m".to_string(),
        "FLEXURE_WINDOW_CELLS=5".to_string(),
        "FLEXURE_VELOCITY=none".to_string(),
    ] {
        assert!(info.contains(&expect), "missing {expect} in\n{info}");
    }
}

#[test]
fn negative_depths_and_times_need_their_direction() {
    // Some packages export depth and two-way time as negative numbers (increasing upward).
    // Read as positive down, every curvature would flip sign (z -> -z flips k_mean;
    // REFERENCES.md section 4), so the direction must be said.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let negative = write_unit(d, "neg.tif", bowl().mapv(|z| -z), "m");
    let msg = refused(&negative, &[]);
    assert!(
        msg.contains("mostly negative") && msg.contains("--z-positive up"),
        "{msg}"
    );
    let out = d.join("out");
    // The bowl (shallowest at its centre: a dome in depth, k_mean +) negated and read as
    // increasing upward is the bowl again; as elevation it is the same surface.
    for flags in [&["--z-positive", "up"][..], &["--domain", "elevation"][..]] {
        let got = at_centre(&curvature(&negative, &out, flags));
        assert_rel(got, centre_k_mean(1.0), F32, &format!("{flags:?}"));
    }
    let msg = refused(
        &negative,
        &["--domain", "elevation", "--z-positive", "down"],
    );
    assert!(msg.contains("--z-positive down"), "{msg}");
    // Negative two-way times: t ms at 3000 m/s is 1.5 t m.
    let times = write_unit(d, "negt.tif", bowl().mapv(|z| -z), "ms");
    assert!(refused(&times, &["--velocity", "3000"]).contains("--z-positive up"));
    let got = at_centre(&curvature(
        &times,
        &out,
        &["--velocity", "3000", "--z-positive", "up"],
    ));
    assert_rel(got, centre_k_mean(1.5), F32, "negative ms");
}

#[test]
fn seconds_without_a_declaration_are_caught_and_declared_with_z_unit() {
    // Two-way times of 1.3-1.4 s read as ms would be 1.5 m deep: refused as time, noted as
    // depth; --z-unit s declares them (t s = 1000 t ms; depth = V t / 2000).
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let seconds = bowl().mapv(|z| z / 1500.0);
    let plain = write_unit(d, "sec.tif", seconds.clone(), "");
    let msg = refused(&plain, &["--domain", "time", "--velocity", "3000"]);
    assert!(msg.contains("--z-unit s"), "{msg}");
    let out = d.join("out");
    let o = flexure(&[
        "curvature",
        plain.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--windows",
        "5",
    ]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        o.status.success() && stdout.contains("--z-unit s"),
        "{stdout}"
    );
    // 1000 z / 1500 ms at 3000 m/s is z m: the bowl in metres (float32 seconds: ~1e-4).
    let got = at_centre(&curvature(
        &plain,
        &out,
        &["--z-unit", "s", "--velocity", "3000"],
    ));
    assert_rel(got, centre_k_mean(1.0), 2e-3, "--z-unit s");
    let ms = write_unit(d, "ms.tif", seconds.mapv(|t| t * 1000.0), "ms");
    let msg = refused(&ms, &["--z-unit", "s", "--velocity", "3000"]);
    assert!(msg.contains("--z-unit s") && msg.contains("ms"), "{msg}");
}

#[test]
fn a_crs_option_contradicting_the_file_is_refused() {
    // --crs only fills in a missing CRS; EPSG:32626 (UTM 26N) is not the file's EPSG:32625.
    let dir = tempfile::tempdir().unwrap();
    let input = write_unit(dir.path(), "h.tif", bowl(), "m");
    let msg = refused(&input, &["--crs", "EPSG:32626"]);
    assert!(
        msg.contains("--crs 'EPSG:32626'") && msg.contains("UTM zone 25N"),
        "{msg}"
    );
    let out = dir.path().join("out");
    assert!(at_centre(&curvature(&input, &out, &["--crs", "EPSG:32625"])).is_finite());
}
