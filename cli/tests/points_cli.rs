//! Point exports on rotated, non-square survey lattices, end to end: `flexure grid` writes the
//! exact grid (read back by GDAL itself), and `curvature`, `anisotropy`, velocity grids and
//! `render --shade` give the same results from a point list as from the equivalent GeoTIFF.

mod common;

use common::{fails, flexure, survey_geometry, write_bands_in};
use flexure_engine::grid::GridGeometry;
use flexure_engine::synthetic::{Shape, Surface};
use ndarray::Array2;
use std::fmt::Write as _;
use std::path::Path;

/// A survey grid rotated 25 degrees from north-up (columns at azimuth 115), 25 m x 12.5 m bins.
fn survey() -> GridGeometry {
    survey_geometry((480_300.0, 3_903_800.0), 115.0, (25.0, 12.5), (48, 60))
}

/// A dome on a dip, float32 as any GeoTIFF would hold it, with a null gap (a fault zone) and
/// one missing corner cell.
fn horizon(g: &GridGeometry) -> Array2<f32> {
    let surface = Surface {
        datum: 2400.0,
        shapes: vec![
            Shape::Quadratic {
                origin: g.centre(),
                coeffs: [0.0, 0.0, 0.0, 0.02, -0.01, 0.0],
            },
            Shape::GaussianDome {
                centre: g.centre(),
                amplitude: 40.0,
                sigma: 220.0,
            },
        ],
    };
    let mut v = surface.sample(g).mapv(|z| z as f32);
    for r in 0..g.rows {
        v[(r, g.cols * 5 / 8 + 2 * r / g.rows)] = f32::NAN;
    }
    v[(0, 0)] = f32::NAN;
    v
}

/// How nulls are written in an export.
#[derive(Clone, Copy)]
enum Nulls {
    /// The line is left out.
    Omitted,
    /// The line carries this sentinel.
    Sentinel(f64),
}

/// Writes every cell of `bands` as one line `[inline xline] x y v1 v2 ...` (fields separated by
/// `delimiter`), in a scrambled
/// order, with coordinates and values at full precision (Rust's shortest round-trip decimal of
/// the f64, so the values read back bit for bit). Inline = 3000 + 2 row, crossline =
/// 700 + col: each row is one inline.
fn export(
    path: &Path,
    g: &GridGeometry,
    bands: &[Array2<f32>],
    header: &str,
    numbered: bool,
    nulls: Nulls,
    delimiter: &str,
) {
    export_rounded(path, g, bands, header, numbered, nulls, delimiter, None);
}

/// [`export`] with the coordinates printed to `decimals` places when given (exports of the
/// trade round them, typically to the centimetre).
#[allow(clippy::too_many_arguments)]
fn export_rounded(
    path: &Path,
    g: &GridGeometry,
    bands: &[Array2<f32>],
    header: &str,
    numbered: bool,
    nulls: Nulls,
    delimiter: &str,
    decimals: Option<usize>,
) {
    let mut text = format!("# an export on a rotated survey\n{header}\n");
    let n = g.rows * g.cols;
    for k in 0..n {
        let i = (k * 7919) % n; // 7919 is prime and does not divide n: a permutation
        let (r, c) = (i / g.cols, i % g.cols);
        let values: Vec<f64> = bands.iter().map(|b| b[(r, c)] as f64).collect();
        let value_text: Vec<String> = match nulls {
            _ if values.iter().all(|v| v.is_finite()) => {
                values.iter().map(|v| v.to_string()).collect()
            }
            Nulls::Omitted => continue,
            Nulls::Sentinel(s) => values
                .iter()
                .map(|v| {
                    if v.is_finite() {
                        v.to_string()
                    } else {
                        s.to_string()
                    }
                })
                .collect(),
        };
        let (x, y) = g.cell_centre(c, r);
        let mut fields = Vec::new();
        if numbered {
            fields.extend([(3000 + 2 * r).to_string(), (700 + c).to_string()]);
        }
        fields.extend([x, y].map(|v| match decimals {
            Some(d) => format!("{v:.d$}"),
            None => v.to_string(),
        }));
        fields.extend(value_text);
        writeln!(text, "{}", fields.join(delimiter)).unwrap();
    }
    std::fs::write(path, text).unwrap();
}

/// The GeoTIFF written by `flexure grid`, read by GDAL directly (not by flexure's reader).
fn gdal_read(path: &Path) -> ([f64; 6], Vec<Array2<f64>>) {
    let ds = gdal::Dataset::open(path).unwrap();
    let size = ds.raster_size();
    let bands = (1..=ds.raster_count())
        .map(|i| {
            let band = ds.rasterband(i).unwrap();
            let nodata = band.no_data_value();
            band.read_as::<f64>((0, 0), size, size, None)
                .unwrap()
                .to_array()
                .unwrap()
                .mapv(|v| if Some(v) == nodata { f64::NAN } else { v })
        })
        .collect();
    (ds.geo_transform().unwrap(), bands)
}

fn assert_identical(
    g: &GridGeometry,
    bands: &[Array2<f32>],
    got: &([f64; 6], Vec<Array2<f64>>),
    what: &str,
) {
    for (a, b) in got.0.iter().zip(&g.geo_transform) {
        assert!(
            (a - b).abs() <= 1e-6,
            "{what}: geotransform {:?} vs {:?}",
            got.0,
            g.geo_transform
        );
    }
    assert_eq!(got.1.len(), bands.len(), "{what}");
    for (read, want) in got.1.iter().zip(bands) {
        assert_eq!(read.dim(), want.dim(), "{what}");
        for ((rc, a), b) in read.indexed_iter().zip(want.iter()) {
            let b = *b as f64;
            assert!(
                a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()),
                "{what}: cell {rc:?} {a} vs {b}"
            );
        }
    }
}

fn run_grid(input: &Path, out: &Path, extra: &[&str]) {
    let mut args = vec![
        "grid",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ];
    args.extend_from_slice(extra);
    let o = flexure(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn rotated_exports_read_back_to_the_identical_grid() {
    // GDAL data model (cell centre at i + 0.5, j + 0.5) and common::survey_geometry's rotated
    // lattice; GDAL's own reader checks the written GeoTIFF.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = survey();
    let z = horizon(&g);
    let cases: Vec<(&str, &str, bool, Nulls, Vec<&str>)> = vec![
        (
            "ilxl.txt",
            "inline xline x y z",
            true,
            Nulls::Omitted,
            vec![],
        ),
        (
            "xyz.csv",
            "x y depth",
            false,
            Nulls::Sentinel(-999.25),
            vec!["--nodata", "-999.25"],
        ),
        (
            "bare.dat",
            "",
            false,
            Nulls::Sentinel(1e30),
            vec!["--nodata", "1e30"],
        ),
    ];
    for (name, header, numbered, nulls, extra) in cases {
        let input = d.join(name);
        export(
            &input,
            &g,
            std::slice::from_ref(&z),
            header,
            numbered,
            nulls,
            " ",
        );
        let out = d.join(format!("{name}.tif"));
        let mut args = vec!["--crs", "EPSG:32625"];
        args.extend(extra);
        run_grid(&input, &out, &args);
        assert_identical(&g, std::slice::from_ref(&z), &gdal_read(&out), name);
    }
}

#[test]
fn feet_exports_keep_their_units() {
    // A CRS in international feet (PROJ +units=ft) and depths in feet declared in the header:
    // the lattice comes back in CRS feet and the band declares ft.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let mut g = survey_geometry((1_575_000.0, 12_807_000.0), 115.0, (82.5, 41.25), (30, 40));
    g.crs_wkt = String::new();
    let z = horizon(&g).mapv(|v| v * 3.0);
    let input = d.join("feet.txt");
    export(
        &input,
        &g,
        std::slice::from_ref(&z),
        "Inline,Crossline,X,Y,Depth (ft)",
        true,
        Nulls::Omitted,
        ",",
    );
    let out = d.join("feet.tif");
    let crs = "+proj=tmerc +lat_0=0 +lon_0=-33 +k=0.9996 +x_0=500000 +y_0=0 +ellps=WGS84 +units=ft +no_defs";
    run_grid(&input, &out, &["--crs", crs]);
    assert_identical(&g, std::slice::from_ref(&z), &gdal_read(&out), "feet");
    let info = flexure_engine::io::read_info(&out).unwrap();
    assert_eq!(info.units, vec!["ft"]);
    assert_eq!(info.names, vec!["Depth"]);
}

/// Runs a command and returns its stdout.
fn ok(args: &[&str]) -> String {
    let o = flexure(args);
    assert!(
        o.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    String::from_utf8_lossy(&o.stdout).to_string()
}

fn bands_of(path: &Path) -> Vec<Array2<f64>> {
    gdal_read(path).1
}

fn assert_same_values(a: &[Array2<f64>], b: &[Array2<f64>], what: &str) {
    assert_eq!(a.len(), b.len(), "{what}");
    for (x, y) in a.iter().zip(b) {
        let scale = y
            .iter()
            .filter(|v| v.is_finite())
            .fold(0.0f64, |m, v| m.max(v.abs()));
        for ((rc, p), q) in x.indexed_iter().zip(y.iter()) {
            assert!(
                (p.is_nan() && q.is_nan()) || (p - q).abs() <= 1e-6 * scale,
                "{what}: cell {rc:?} {p} vs {q}"
            );
        }
    }
}

#[test]
fn curvature_and_velocity_grids_from_points_match_the_geotiff() {
    // The same lattice and values reach the fit either way, so the attributes agree to float32
    // round-off (the geotransforms differ only in the last bits of the least-squares fit).
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = survey();
    let t = horizon(&g).mapv(|z| z * 2000.0 / 3200.0);
    let v = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| 3100.0 + (r + c) as f32);
    let tif = write_bands_in(d, "twt.tif", &g, vec![t.clone()], "ms");
    let vtif = write_bands_in(d, "vel.tif", &g, vec![v.clone()], "m/s");
    let pts = d.join("twt.txt");
    export(
        &pts,
        &g,
        std::slice::from_ref(&t),
        "il\txl\tcdp_x\tcdp_y\ttwt",
        true,
        Nulls::Omitted,
        "\t",
    );
    let vpts = d.join("vel.txt");
    export(
        &vpts,
        &g,
        std::slice::from_ref(&v),
        "x;y;velocity",
        false,
        Nulls::Omitted,
        ";",
    );
    let run = |input: &Path, velocity: &Path, out: &str| {
        let out = d.join(out);
        let stdout = ok(&[
            "curvature",
            input.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--windows",
            "5",
            "--velocity-grid",
            velocity.to_str().unwrap(),
            "--crs",
            "EPSG:32625",
        ]);
        let stem = input.file_stem().unwrap().to_string_lossy().to_string();
        (stdout, bands_of(&out.join(format!("{stem}_w05.tif"))))
    };
    let (_, reference) = run(&tif, &vtif, "a");
    let (stdout, from_points) = run(&pts, &vpts, "b");
    assert!(stdout.contains("domain time from the file"), "{stdout}");
    assert_same_values(&from_points, &reference, "curvature from points");
}

#[test]
fn sector_point_lists_and_shade_points_work_like_rasters() {
    // t = 1000 + 3 cos 2(phi - 40) (REFERENCES.md section 5) on six sectors, one value column
    // per sector in one point list, against the same six bands in one GeoTIFF.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = survey();
    let az: Vec<f64> = (0..6).map(|k| 15.0 + 30.0 * k as f64).collect();
    let sectors: Vec<Array2<f32>> = az
        .iter()
        .enumerate()
        .map(|(k, phi)| {
            Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
                let ripple = 0.02 * (((r * 7 + c * 3 + k * 5) % 11) as f64 - 5.0) / 5.0;
                (1000.0 + 3.0 * (2.0 * (phi - 40.0f64).to_radians()).cos() + ripple) as f32
            })
        })
        .collect();
    let tif = write_bands_in(d, "sectors.tif", &g, sectors.clone(), "ms");
    let pts = d.join("sectors.txt");
    export(
        &pts,
        &g,
        &sectors,
        "inline,xline,x,y,az15,az45,az75,az105,az135,az165",
        true,
        Nulls::Omitted,
        ",",
    );
    let azimuths = az
        .iter()
        .map(|a| a.to_string())
        .collect::<Vec<_>>()
        .join(",");
    let mut reports = Vec::new();
    for (input, out) in [(&tif, "a"), (&pts, "b")] {
        reports.push(ok(&[
            "anisotropy",
            input.to_str().unwrap(),
            "--azimuths",
            &azimuths,
            "--out",
            d.join(out).to_str().unwrap(),
            "--crs",
            "EPSG:32625",
        ]));
    }
    // The report names each sector's column and describes the lattice it was read onto.
    assert!(
        reports[1].contains("band 1 (az15)") && reports[1].contains("read onto its lattice"),
        "{}",
        reports[1]
    );
    assert_same_values(
        &bands_of(&d.join("b/anisotropy.tif")),
        &bands_of(&d.join("a/anisotropy.tif")),
        "anisotropy from a sector point list",
    );
    // Fold as weights, one column per sector, 0 in the first columns (no traces) and 40
    // elsewhere: zeros are weights, not null sentinels. Equal weights leave the fit unchanged
    // where the fold is 40 (weighted least squares is scale invariant).
    let fold: Vec<Array2<f32>> = (0..6)
        .map(|_| Array2::from_shape_fn((g.rows, g.cols), |(_, c)| if c < 5 { 0.0 } else { 40.0 }))
        .collect();
    let fold_pts = d.join("fold.txt");
    export(
        &fold_pts,
        &g,
        &fold,
        "x y f1 f2 f3 f4 f5 f6",
        false,
        Nulls::Omitted,
        " ",
    );
    ok(&[
        "anisotropy",
        pts.to_str().unwrap(),
        "--azimuths",
        &azimuths,
        "--weights",
        fold_pts.to_str().unwrap(),
        "--out",
        d.join("c").to_str().unwrap(),
        "--crs",
        "EPSG:32625",
        "--quiet",
    ]);
    let weighted = bands_of(&d.join("c/anisotropy.tif"));
    let plain = bands_of(&d.join("b/anisotropy.tif"));
    let right = |b: &Array2<f64>| b.slice(ndarray::s![.., 5..]).to_owned();
    assert_same_values(
        &weighted.iter().map(right).collect::<Vec<_>>(),
        &plain.iter().map(right).collect::<Vec<_>>(),
        "equal fold weights",
    );
    // The anisotropy map shaded by the horizon given as a point list, and as a GeoTIFF: the
    // same picture.
    let z = horizon(&g);
    let ztif = write_bands_in(d, "z.tif", &g, vec![z.clone()], "m");
    let zpts = d.join("z.txt");
    export(&zpts, &g, &[z], "x y z", false, Nulls::Omitted, " ");
    let attribute = d.join("a/anisotropy.tif");
    for (shade, out) in [(&ztif, "shade_a.tif"), (&zpts, "shade_b.tif")] {
        ok(&[
            "render",
            "--attribute",
            attribute.to_str().unwrap(),
            "--band",
            "magnitude",
            "--shade",
            shade.to_str().unwrap(),
            "--crs",
            "EPSG:32625",
            "--out",
            d.join(out).to_str().unwrap(),
            "--quiet",
        ]);
    }
    assert_eq!(
        bands_of(&d.join("shade_a.tif")),
        bands_of(&d.join("shade_b.tif"))
    );
}

#[test]
fn point_lists_are_refused_without_a_crs_a_lattice_or_their_nulls() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = survey();
    let z = horizon(&g);
    let sentinel = d.join("sentinel.txt");
    export(
        &sentinel,
        &g,
        std::slice::from_ref(&z),
        "x y z",
        false,
        Nulls::Sentinel(-999.25),
        " ",
    );
    let out = d.join("out");
    let o = out.to_str().unwrap();
    let msg = fails(&["curvature", sentinel.to_str().unwrap(), "--out", o], &out);
    assert!(msg.contains("--crs"), "{msg}");
    let msg = fails(
        &[
            "curvature",
            sentinel.to_str().unwrap(),
            "--out",
            o,
            "--crs",
            "EPSG:32625",
        ],
        &out,
    );
    assert!(msg.contains("--nodata -999.25"), "{msg}");
    // Scattered points (a pseudo-random cloud) are not a grid: gridding is the user's choice.
    let mut text = String::from("x y z\n");
    let mut state = 12345u64;
    for _ in 0..400 {
        let mut next = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        let (x, y) = (480_000.0 + 1000.0 * next(), 3_900_000.0 + 1000.0 * next());
        writeln!(text, "{x:.2} {y:.2} 2500").unwrap();
    }
    let cloud = d.join("cloud.txt");
    std::fs::write(&cloud, text).unwrap();
    let msg = fails(
        &[
            "curvature",
            cloud.to_str().unwrap(),
            "--out",
            o,
            "--crs",
            "EPSG:32625",
        ],
        &out,
    );
    assert!(msg.contains("grid them first"), "{msg}");
    let msg = fails(
        &[
            "grid",
            cloud.to_str().unwrap(),
            "--out",
            d.join("c.tif").to_str().unwrap(),
            "--crs",
            "EPSG:32625",
        ],
        &out,
    );
    assert!(msg.contains("grid them first"), "{msg}");
    assert!(!d.join("c.tif").exists());
}

#[test]
fn centimetre_exports_share_the_grid_of_their_geotiff() {
    // Coordinates rounded to 0.01 m shift the fitted geotransform by micrometres (a
    // least-squares fit over thousands of points); the lattice is the GeoTIFF's all the same
    // (GridGeometry::same_grid: cell centres within 1e-3 of a bin), so a velocity grid and a
    // shade horizon exported that way are used with the GeoTIFF horizon, not refused.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = survey();
    let t = horizon(&g).mapv(|z| z * 2000.0 / 3200.0);
    let v = Array2::from_elem((g.rows, g.cols), 3200.0f32);
    let tif = write_bands_in(d, "twt.tif", &g, vec![t.clone()], "ms");
    let vpts = d.join("vel.txt");
    export_rounded(
        &vpts,
        &g,
        std::slice::from_ref(&v),
        "x y v",
        false,
        Nulls::Omitted,
        " ",
        Some(2),
    );
    let vtif = write_bands_in(d, "vel.tif", &g, vec![v], "m/s");
    let run = |velocity: &Path, out: &str| {
        let out = d.join(out);
        ok(&[
            "curvature",
            tif.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--windows",
            "5",
            "--velocity-grid",
            velocity.to_str().unwrap(),
            "--crs",
            "EPSG:32625",
            "--quiet",
        ]);
        bands_of(&out.join("twt_w05.tif"))
    };
    assert_same_values(
        &run(&vpts, "a"),
        &run(&vtif, "b"),
        "velocity from a rounded export",
    );
    let zpts = d.join("z.txt");
    export_rounded(
        &zpts,
        &g,
        &[t],
        "il xl x y twt",
        true,
        Nulls::Omitted,
        " ",
        Some(2),
    );
    let attribute = d.join("a/twt_w05.tif");
    ok(&[
        "render",
        "--attribute",
        attribute.to_str().unwrap(),
        "--band",
        "k_pos",
        "--shade",
        zpts.to_str().unwrap(),
        "--crs",
        "EPSG:32625",
        "--out",
        d.join("shade.tif").to_str().unwrap(),
        "--quiet",
    ]);
}

#[test]
fn render_draws_a_named_column_of_a_point_list() {
    // A point list with two value columns, depth and twt: `render --band twt` draws the twt
    // column on the list's own lattice (30 x 20 nodes), read with the shared --crs; GDAL's
    // reading of the RGBA map gives the size (gdal crate) at the given 2 pixels per cell.
    let dir = tempfile::tempdir().unwrap();
    let mut text = String::from("x,y,depth,twt\n");
    for r in 0..20 {
        for c in 0..30 {
            let (x, y) = (500_000 + 25 * c, 3_900_000 - 25 * r);
            let depth = 2000.0 + 0.5 * ((r - 10) * (r - 10) + (c - 12) * (c - 12)) as f64;
            writeln!(text, "{x},{y},{depth},{}", 1500.0 + 0.3 * r as f64).unwrap();
        }
    }
    let input = dir.path().join("pl.csv");
    std::fs::write(&input, text).unwrap();
    let map = dir.path().join("map.tif");
    let o = flexure(&[
        "render",
        "--attribute",
        input.to_str().unwrap(),
        "--band",
        "twt",
        "--crs",
        "EPSG:32625",
        "--pixels-per-cell",
        "2",
        "--out",
        map.to_str().unwrap(),
    ]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(
        stdout.contains("twt") && stdout.contains("1500"),
        "{stdout}"
    );
    let ds = gdal::Dataset::open(&map).unwrap();
    assert_eq!((ds.raster_size(), ds.raster_count()), ((60, 40), 4));
}
