//! `flexure anisotropy` and `flexure render` end to end: per-sector files and one multi-band raster, weights as
//! numbers and as grids, true-north azimuths with a given or computed grid convergence, vector
//! options, the usual-practice notes, and every kind of bad input named in the anisotropy issue
//! (and the render issue) getting one clear line, a non-zero exit and no output.

mod common;

use common::{fails, flexure, north_up, outputs_in, write_bands};
use flexure_engine::anisotropy::FIT_BANDS;
use flexure_engine::grid::GridGeometry;
use flexure_engine::io::{read_raster, write_float_geotiff, BandOut};
use gdal::vector::LayerAccess;
use gdal::Dataset;
use ndarray::Array2;
use std::path::{Path, PathBuf};

const COLS: usize = 24;
const ROWS: usize = 20;
/// Slow azimuth of the test field, degrees from grid north.
const SLOW: f64 = 40.0;

/// Times of the exact model t = 1000 + b cos 2(phi - SLOW) (REFERENCES.md section 5) with a
/// small deterministic ripple so the residual variance is not zero.
fn sector_times(phi: f64, b: f64, k: usize) -> Array2<f32> {
    sector_times_on(COLS, phi, b, k)
}

fn sector_times_on(cols: usize, phi: f64, b: f64, k: usize) -> Array2<f32> {
    Array2::from_shape_fn((ROWS, cols), |(r, c)| {
        let ripple = 0.01 * (((r * 7 + c * 3 + k * 5) % 11) as f64 - 5.0) / 5.0;
        (1000.0 + b * (2.0 * (phi - SLOW).to_radians()).cos() + ripple) as f32
    })
}

fn azimuths(n: usize) -> Vec<f64> {
    (0..n).map(|k| 15.0 + 180.0 * k as f64 / n as f64).collect()
}

fn list(v: &[f64]) -> String {
    v.iter()
        .map(|a| a.to_string())
        .collect::<Vec<_>>()
        .join(",")
}

/// One single-band file per sector on `g`.
fn sector_files(dir: &Path, g: &GridGeometry, az: &[f64], b: f64) -> Vec<PathBuf> {
    az.iter()
        .enumerate()
        .map(|(k, &phi)| write_bands(dir, &format!("s{k}.tif"), g, vec![sector_times(phi, b, k)]))
        .collect()
}

fn strs(paths: &[PathBuf]) -> Vec<&str> {
    paths.iter().map(|p| p.to_str().unwrap()).collect()
}

fn run_ok(args: &[&str]) -> String {
    let o = flexure(args);
    assert!(
        o.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    String::from_utf8_lossy(&o.stdout).to_string()
}

/// Band `band` (1-based) of `DIR/anisotropy.tif` at the centre bin.
fn centre_value(out: &Path, band: usize) -> f64 {
    let bands = read_raster(&out.join("anisotropy.tif"), &Default::default())
        .unwrap()
        .bands;
    bands[band - 1][(ROWS / 2, COLS / 2)]
}

fn axial(a: f64, b: f64) -> f64 {
    (a - b + 90.0).rem_euclid(180.0) - 90.0
}

/// Runs `flexure anisotropy` on `n` equally spaced sector files of magnitude `b`; returns the
/// folder (kept alive), the output folder and stdout.
fn run_sectors(n: usize, b: f64) -> (tempfile::TempDir, PathBuf, String) {
    let dir = tempfile::tempdir().unwrap();
    let az = azimuths(n);
    let files = sector_files(dir.path(), &north_up(COLS, ROWS), &az, b);
    let out = dir.path().join("out");
    let list = list(&az);
    let mut args = vec!["anisotropy"];
    args.extend(strs(&files));
    args.extend(["--azimuths", &list, "--out", out.to_str().unwrap()]);
    let stdout = run_ok(&args);
    (dir, out, stdout)
}

#[test]
fn sector_files_give_the_azimuths_and_the_cautions() {
    let (_dir, out, stdout) = run_sectors(6, 4.0);
    assert!(stdout.contains("bins fitted: 100.0%"), "{stdout}");
    assert!(
        stdout.contains("HTI") && stdout.contains("not stress"),
        "{stdout}"
    );
    assert!(stdout.contains("licensed professionals"), "{stdout}");
    // Bands 3 and 4 are azimuth_slow and azimuth_fast; band 1 the magnitude.
    assert!(axial(centre_value(&out, 3), SLOW).abs() < 0.1);
    assert!(axial(centre_value(&out, 4), SLOW + 90.0).abs() < 0.1);
    assert!((centre_value(&out, 1) - 4.0).abs() < 0.05);
    let mut names = outputs_in(&out);
    names.sort();
    assert_eq!(
        names,
        [
            "anisotropy.tif",
            "anisotropy_vectors.geojson",
            "anisotropy_vectors.gpkg"
        ]
    );
}

#[test]
fn true_north_azimuths_are_converted_by_the_grid_convergence() {
    // Azimuths from true north = grid azimuth + convergence (convergence measured from true
    // north to grid north, clockwise). Given explicitly, the result equals the grid-north run;
    // computed from the CRS, it matches the transverse Mercator formula
    // tan(gamma) = tan(lon - lon0) sin(lat) (Snyder 1987, USGS PP 1395, from memory) at the
    // grid centre (UTM 25N, lon0 = -33).
    let dir = tempfile::tempdir().unwrap();
    let g = north_up(COLS, ROWS);
    let az = azimuths(8);
    let files = sector_files(dir.path(), &g, &az, 3.0);
    let run = |name: &str, given: &[f64], extra: &[&str]| {
        let out = dir.path().join(name);
        let list = list(given);
        let mut args = vec!["anisotropy"];
        args.extend(strs(&files));
        args.extend(["--azimuths", &list, "--out", out.to_str().unwrap()]);
        args.extend(extra);
        (run_ok(&args), out)
    };
    let (_, grid_out) = run("grid", &az, &[]);
    let gamma = 1.75;
    let true_az: Vec<f64> = az.iter().map(|a| a + gamma).collect();
    let (_, given_out) = run(
        "given",
        &true_az,
        &["--azimuth-reference", "true", "--convergence", "1.75"],
    );
    assert!(axial(centre_value(&grid_out, 3), centre_value(&given_out, 3)).abs() < 1e-4);

    let (lon, lat) = centre_lon_lat(&g);
    let snyder = ((lon + 33.0).to_radians().tan() * lat.to_radians().sin())
        .atan()
        .to_degrees();
    let (stdout, auto_out) = run("auto", &az, &["--azimuth-reference", "true"]);
    assert!(stdout.contains("grid convergence"), "{stdout}");
    // Given true azimuths az, the grid azimuths are az - gamma: the slow azimuth moves by -gamma.
    let moved = axial(centre_value(&auto_out, 3), centre_value(&grid_out, 3));
    assert!(
        (moved + snyder).abs() < 1e-3,
        "moved {moved}, convergence {snyder}"
    );
}

fn centre_lon_lat(g: &GridGeometry) -> (f64, f64) {
    use gdal::spatial_ref::{AxisMappingStrategy, CoordTransform, SpatialRef};
    let mut utm = SpatialRef::from_wkt(&g.crs_wkt).unwrap();
    utm.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    let mut geo = SpatialRef::from_epsg(4326).unwrap();
    geo.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    let (x, y) = g.centre();
    let (mut xs, mut ys, mut zs) = ([x], [y], [0.0]);
    CoordTransform::new(&utm, &geo)
        .unwrap()
        .transform_coords(&mut xs, &mut ys, &mut zs)
        .unwrap();
    (xs[0], ys[0])
}

#[test]
fn multiband_input_weights_and_vector_options() {
    let dir = tempfile::tempdir().unwrap();
    let g = north_up(COLS, ROWS);
    let az = azimuths(6);
    let bands: Vec<Array2<f32>> = az
        .iter()
        .enumerate()
        .map(|(k, &p)| sector_times(p, 4.0, k))
        .collect();
    let stack = write_bands(dir.path(), "stack.tif", &g, bands);
    let folds: Vec<Array2<f32>> = (0..6)
        .map(|k| Array2::from_elem((ROWS, COLS), 10.0 + k as f32))
        .collect();
    let fold = write_bands(dir.path(), "fold.tif", &g, folds);
    let list = list(&az);
    for (name, weights) in [
        ("numbers", "1,2,1,2,1,2"),
        ("grids", fold.to_str().unwrap()),
    ] {
        let out = dir.path().join(name);
        run_ok(&[
            "anisotropy",
            stack.to_str().unwrap(),
            "--azimuths",
            &list,
            "--weights",
            weights,
            "--out",
            out.to_str().unwrap(),
            "--vector",
            "slow",
            "--every",
            "4",
            "--min-snr",
            "0",
            "--quiet",
        ]);
        assert!(axial(centre_value(&out, 3), SLOW).abs() < 0.1, "{name}");
        // Every 4th bin of 24 x 20: 6 x 5 vectors, drawn along the slow azimuth.
        let ds = Dataset::open(out.join("anisotropy_vectors.gpkg")).unwrap();
        let mut layer = ds.layer(0).unwrap();
        assert_eq!(layer.feature_count(), 30, "{name}");
        let slow_index = layer.defn().field_index("azimuth_slow").unwrap();
        for f in layer.features() {
            let line = f.geometry().unwrap();
            let (a, b) = (line.get_point(0), line.get_point(1));
            let drawn = (b.0 - a.0).atan2(b.1 - a.1).to_degrees();
            let slow = f.field_as_double(slow_index).unwrap().unwrap();
            assert!(axial(drawn, slow).abs() < 1e-6);
        }
    }
}

#[test]
fn unusual_input_gets_a_note() {
    // Common practice (no published source): 6 to 8 sectors are usual and sector time
    // differences stay below about 20 ms. Four sectors and a 15 ms magnitude (30 ms peak to
    // peak) both draw a note.
    let (_dir, _out, stdout) = run_sectors(4, 15.0);
    assert!(stdout.contains("note: only 4 sectors"), "{stdout}");
    assert!(stdout.contains("above the usual 20 ms"), "{stdout}");
}

#[test]
fn bad_anisotropy_inputs_fail_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = north_up(COLS, ROWS);
    let az = azimuths(6);
    let files = sector_files(d, &g, &az, 4.0);
    let other = write_bands(
        d,
        "other.tif",
        &north_up(COLS + 1, ROWS),
        vec![sector_times_on(COLS + 1, 15.0, 4.0, 0)],
    );
    let fold_other = write_bands(
        d,
        "fold_other.tif",
        &north_up(COLS + 1, ROWS),
        vec![Array2::ones((ROWS, COLS + 1)); 6],
    );
    let twin = d.join("twin.tif");
    std::fs::copy(&files[0], &twin).unwrap();
    let stack = write_bands(d, "stack.tif", &g, vec![sector_times(15.0, 4.0, 0); 2]);
    let out = d.join("out");
    let o = out.to_str().unwrap();
    let f = strs(&files);
    let six = list(&az);
    let with = |sectors: &[&str], azimuths: &str, extra: &[&str]| {
        let mut a = vec!["anisotropy".to_string()];
        a.extend(sectors.iter().map(|s| s.to_string()));
        a.extend(["--azimuths", azimuths, "--out", o].map(String::from));
        a.extend(extra.iter().map(|s| s.to_string()));
        a
    };
    let mut replaced = f.clone();
    replaced[3] = other.to_str().unwrap();
    let mut doubled = f.clone();
    doubled[5] = twin.to_str().unwrap();
    let mut same_file = f.clone();
    same_file[5] = f[0];
    let cases: Vec<(Vec<String>, &str)> = vec![
        (with(&replaced, &six, &[]), "not on the grid"),
        (with(&f, "15,45,75,105,135", &[]), "5 azimuths given for 6"),
        (with(&f[..2], "15,45", &[]), "at least 3 sectors"),
        (
            with(&f, "15,45,75,105,135,15", &[]),
            "same azimuth is given twice",
        ),
        (
            with(&doubled, "15,45,75,105,135,195", &[]),
            "identical times",
        ),
        (with(&same_file, &six, &[]), "given twice"),
        (with(&f, "15,45,75,nan,135,165", &[]), "not a finite"),
        (
            with(&f, &six, &["--weights", "1,2,3"]),
            "3 weights given for 6",
        ),
        (with(&f, &six, &["--weights", "1,2,3,4,5,-1"]), "positive"),
        (
            with(&f, &six, &["--weights", fold_other.to_str().unwrap()]),
            "weight grids are not on",
        ),
        (with(&f, &six, &["--min-sectors", "2"]), "at least three"),
        (with(&f, &six, &["--min-sectors", "7"]), "exceeds"),
        (
            with(&f, &six, &["--convergence", "1.5"]),
            "--azimuth-reference true",
        ),
        (with(&f, &six, &["--every", "0"]), "--every"),
        (
            with(&[f[0], stack.to_str().unwrap(), f[2]], "15,45,75", &[]),
            "has 2 bands",
        ),
        (
            with(&[f[0], "missing.tif", f[2]], "15,45,75", &[]),
            "missing.tif",
        ),
    ];
    for (args, expect) in cases {
        let args: Vec<&str> = args.iter().map(String::as_str).collect();
        let msg = fails(&args, &out);
        assert!(
            msg.contains(expect),
            "{args:?}: expected '{expect}' in {msg}"
        );
    }
    // Inputs are untouched.
    assert!(files.iter().all(|p| p.is_file()) && twin.is_file());
}

#[test]
fn render_bad_inputs_fail_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = north_up(COLS, ROWS);
    let attr = write_bands(d, "attr.tif", &g, vec![sector_times(15.0, 4.0, 0)]);
    let nulls = write_bands(
        d,
        "nulls.tif",
        &g,
        vec![Array2::from_elem((ROWS, COLS), f32::NAN)],
    );
    // Half a bin off the attribute's lattice: drawing it would need resampling.
    let mut shifted = north_up(COLS, ROWS);
    shifted.geo_transform[0] += 12.5;
    // A complete anisotropy raster (every band flexure writes) on that shifted grid.
    let other = d.join("anisotropy.tif");
    let bands: Vec<BandOut> = FIT_BANDS
        .iter()
        .map(|b| BandOut {
            description: b.id,
            unit: b.unit,
            values: Array2::from_elem((ROWS, COLS), 1.0),
        })
        .collect();
    write_float_geotiff(&other, &shifted, &bands, &[]).unwrap();
    let blocker = d.join("a_file");
    std::fs::write(&blocker, b"").unwrap();
    let out = d.join("out");
    let map = out.join("map.tif");
    let (a, m) = (attr.to_str().unwrap(), map.to_str().unwrap());
    let blocked = blocker.join("map.tif");
    let cases: Vec<(Vec<&str>, &str)> = vec![
        (
            vec!["render", "--attribute", a, "--band", "k_wobble", "--out", m],
            "its bands are: z",
        ),
        (
            vec![
                "render",
                "--attribute",
                a,
                "--anisotropy",
                other.to_str().unwrap(),
                "--out",
                m,
            ],
            "24 x 20 cells",
        ),
        (
            vec!["render", "--attribute", nulls.to_str().unwrap(), "--out", m],
            "null everywhere",
        ),
        (
            vec![
                "render",
                "--attribute",
                a,
                "--out",
                blocked.to_str().unwrap(),
            ],
            "writable",
        ),
        (vec!["render", "--attribute", a, "--out", a], "overwrite"),
        (
            vec!["render", "--attribute", a, "--clip", "1,-1", "--out", m],
            "--clip",
        ),
        // Our rule (one owner per file name in a commit): the quicklook named like the map.
        (
            vec!["render", "--attribute", a, "--out", m, "--png", m],
            "two outputs of this run have this file name: the map (--out) and the quicklook (--png)",
        ),
        (
            vec!["render", "--attribute", a, "--pixels-per-cell", "0", "--out", m],
            "--pixels-per-cell must be at least 1",
        ),
        // A folder without the stages command's layers.
        (
            vec!["render", "--attribute", a, "--wells", d.to_str().unwrap(), "--out", m],
            "holds neither well_paths nor stage_corridors",
        ),
        // A file that is no vector layer.
        (
            vec!["render", "--attribute", a, "--wells", blocker.to_str().unwrap(), "--out", m],
            "cannot be opened as a vector file",
        ),
        (
            vec!["render", "--attribute", a, "--contour-interval", "5", "--out", m],
            "give --shade too",
        ),
        (
            vec![
                "render", "--attribute", a, "--shade", a, "--shade-velocity", "2500", "--out", m,
            ],
            "give --exaggeration too",
        ),
    ];
    for (args, expect) in cases {
        let msg = fails(&args, &out);
        assert!(
            msg.contains(expect),
            "{args:?}: expected '{expect}' in {msg}"
        );
        assert!(!out.exists(), "{args:?}: the output folder was left");
    }
    assert!(attr.is_file());
}

#[test]
fn quicklooks_of_grids_whose_rows_run_north_are_not_mirrored() {
    // The same map stored north-up and with rows running north (as point-list exports are
    // read): a picture shows the map, so the two quicklooks must be the same pixels. The
    // values rise to the north-east so a mirror image would differ.
    let dir = tempfile::tempdir().unwrap();
    let down = north_up(COLS, ROWS);
    let values = Array2::from_shape_fn((ROWS, COLS), |(r, c)| {
        ((ROWS - r) as f32) * 3.0 + c as f32 + if r < 4 && c > 18 { 50.0 } else { 0.0 }
    });
    let up = down.rows_reversed();
    assert!(up.mirrored_in_pictures() && !down.mirrored_in_pictures());
    let flipped = values.slice(ndarray::s![..;-1, ..]).to_owned();
    // Both orientations: survey (the stored rows drawn last first) and north-up (warped).
    for orientation in [None, Some("--north-up")] {
        let pictures: Vec<Vec<u8>> = [
            ("down", &down, values.clone()),
            ("up", &up, flipped.clone()),
        ]
        .into_iter()
        .map(|(name, g, v)| {
            let folder = dir
                .path()
                .join(format!("{name}{}", orientation.unwrap_or("")));
            std::fs::create_dir_all(&folder).unwrap();
            let input = write_bands(&folder, "k.tif", g, vec![v]);
            let (map, png) = (folder.join("map.tif"), folder.join("map.png"));
            let mut args = vec![
                "render",
                "--attribute",
                input.to_str().unwrap(),
                "--out",
                map.to_str().unwrap(),
                "--png",
                png.to_str().unwrap(),
            ];
            args.extend(orientation);
            let o = flexure(&args);
            assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
            std::fs::read(&png).unwrap()
        })
        .collect();
        assert!(
            pictures[0] == pictures[1],
            "the {orientation:?} quicklooks differ"
        );
    }
}
