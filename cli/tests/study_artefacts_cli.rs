//! The window study's handling of real-horizon artefacts end to end: `flexure curvature
//! --despike --write-despiked` and `flexure window-study` on a noisy dome with planted picking
//! busts (the bust files read back through GDAL/OGR), footprint stripes reported in the JSON,
//! and `--min-feature`.

mod common;

use common::{flexure, north_up, write_bands};
use flexure_engine::stats::SeededNoise;
use ndarray::Array2;

/// A gentle dome with 0.3 m of seeded white noise on 25 m bins, and the cells (row, col) of
/// the planted busts: 0.5% of the picks moved 6 m up or down.
fn dome_with_busts() -> (Array2<f32>, Vec<(usize, usize)>) {
    let mut rng = SeededNoise::new(43);
    let mut planted = Vec::new();
    let z = Array2::from_shape_fn((80, 90), |(r, c)| {
        let (x, y) = (c as f64 - 45.0, r as f64 - 40.0);
        let mut z = 2000.0 + 0.01 * (x * x + y * y) + 0.3 * rng.gaussian();
        if rng.uniform() < 0.005 {
            z += if rng.uniform() < 0.5 { 6.0 } else { -6.0 };
            planted.push((r, c));
        }
        z as f32
    });
    (z, planted)
}

/// (row, col) of the busts listed in a CSV the jobs write (plain numbers, comma-separated).
fn listed(path: &std::path::Path) -> Vec<(usize, usize)> {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    assert_eq!(lines.next(), Some("row,col,x,y,offset,score"));
    lines
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (f[0].parse().unwrap(), f[1].parse().unwrap())
        })
        .collect()
}

/// Number of point features of the one layer of a vector file, read by OGR.
fn points_in(path: &std::path::Path) -> usize {
    use gdal::vector::LayerAccess;
    let ds = gdal::Dataset::open(path).unwrap();
    let mut layer = ds.layer(0).unwrap();
    layer
        .features()
        .filter(|f| {
            f.geometry()
                .is_some_and(|g| g.geometry_name().eq_ignore_ascii_case("point"))
        })
        .count()
}

#[test]
fn curvature_despike_nulls_the_planted_busts_and_lists_them() {
    let dir = tempfile::tempdir().unwrap();
    let (z, planted) = dome_with_busts();
    assert!(planted.len() > 20);
    let input = write_bands(dir.path(), "dome.tif", &north_up(90, 80), vec![z.clone()]);
    let out = dir.path().join("curv");
    let o = flexure(&[
        "curvature",
        input.to_str().unwrap(),
        "--windows",
        "5",
        "--attributes",
        "k_mean",
        "--despike",
        "--write-despiked",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("picking busts set null"), "{stdout}");
    // Every planted bust listed (6 m against 0.3 m of noise is 20 noise sd), at most two
    // others (the stated rate of 1e-5 a cell over 7200 cells expects under 0.1).
    let found = listed(&out.join("dome_busts.csv"));
    for at in &planted {
        assert!(found.contains(at), "planted bust {at:?} not found");
    }
    assert!(found.len() <= planted.len() + 2, "{found:?}");
    for ext in ["gpkg", "geojson"] {
        assert_eq!(
            points_in(&out.join(format!("dome_busts.{ext}"))),
            found.len()
        );
    }
    // The despiked horizon, read by GDAL: null at the busts, the input elsewhere.
    let ds = gdal::Dataset::open(out.join("dome_despiked.tif")).unwrap();
    let b = ds.rasterband(1).unwrap();
    let nodata = b.no_data_value();
    let despiked = b
        .read_as::<f64>((0, 0), b.size(), b.size(), None)
        .unwrap()
        .to_array()
        .unwrap();
    for ((r, c), v) in despiked.indexed_iter() {
        if found.contains(&(r, c)) {
            assert!(Some(*v) == nodata || v.is_nan(), "({r}, {c}) kept");
        } else {
            assert_eq!(*v, f64::from(z[(r, c)]), "({r}, {c})");
        }
    }
}

#[test]
fn window_study_reports_the_busts_it_left_out() {
    let dir = tempfile::tempdir().unwrap();
    let (z, planted) = dome_with_busts();
    let input = write_bands(dir.path(), "dome.tif", &north_up(90, 80), vec![z]);
    let out = dir.path().join("study");
    let o = flexure(&[
        "window-study",
        input.to_str().unwrap(),
        "--windows",
        "3,5,9",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("window_study.json")).unwrap())
            .unwrap();
    let found = listed(&out.join("window_study_busts.csv"));
    assert_eq!(json["busts"].as_u64().unwrap() as usize, found.len());
    assert!(planted.iter().all(|at| found.contains(at)));
    // With the busts left out the noise estimate recovers the 0.3 m added (within 10%).
    let sigma = json["horizon_noise_sd"].as_f64().unwrap();
    assert!((sigma / 0.3 - 1.0).abs() < 0.1, "{sigma}");
    assert_eq!(
        points_in(&out.join("window_study_busts.geojson")),
        found.len()
    );
}

/// A dome with 0.3 m of white noise and stripes of 0.5 m every 4 columns (planted: the
/// reference), written as `dome.tif` in `dir`.
fn striped_dome(dir: &std::path::Path) -> std::path::PathBuf {
    let mut rng = SeededNoise::new(44);
    let z = Array2::from_shape_fn((80, 90), |(r, c)| {
        let (x, y) = (c as f64 - 45.0, r as f64 - 40.0);
        let stripes = 0.5 * (std::f64::consts::TAU * c as f64 / 4.0 + 0.4).cos();
        (2000.0 + 0.01 * (x * x + y * y) + 0.3 * rng.gaussian() + stripes) as f32
    });
    write_bands(dir, "dome.tif", &north_up(90, 80), vec![z])
}

#[test]
fn footprint_filter_removes_the_stripes_and_says_so() {
    // With --footprint-filter the stripes are notched out before the study: a note names
    // them, the noise model is white again and the noise sd the 0.3 m planted (within 10%).
    let dir = tempfile::tempdir().unwrap();
    let input = striped_dome(dir.path());
    let out = dir.path().join("study");
    let o = flexure(&[
        "window-study",
        input.to_str().unwrap(),
        "--windows",
        "3,5,9",
        "--footprint-filter",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        stdout.contains("footprint filter applied: notch removed along columns, period 4.0"),
        "{stdout}"
    );
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("window_study.json")).unwrap())
            .unwrap();
    assert_eq!(json["noise_model"], "white");
    let sigma = json["horizon_noise_sd"].as_f64().unwrap();
    assert!((sigma / 0.3 - 1.0).abs() < 0.1, "{sigma}");
}

#[test]
fn window_study_reports_footprint_and_keeps_to_the_min_feature() {
    // The striped dome; --min-feature 400 m on 25 m bins allows no window below 9: of a
    // sinusoidal fold 400 m from trough to trough, window 9 keeps 0.81 of the crest curvature
    // and window 15 0.52 (the closed-form N x N kernel of REFERENCES.md section 3 [D],
    // evaluated with numpy), against the 0.7 required.
    let dir = tempfile::tempdir().unwrap();
    let input = striped_dome(dir.path());
    let out = dir.path().join("study");
    let o = flexure(&[
        "window-study",
        input.to_str().unwrap(),
        "--windows",
        "3,5,9,15",
        "--adaptive",
        "--min-feature",
        "400",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        stdout.contains("noise model: white + footprint"),
        "{stdout}"
    );
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("window_study.json")).unwrap())
            .unwrap();
    let f = &json["footprints"][0];
    assert_eq!(f["axis"], "columns");
    assert!(
        (f["period_cells"].as_f64().unwrap() / 4.0 - 1.0).abs() < 0.03,
        "{f}"
    );
    assert!(
        (f["amplitude"].as_f64().unwrap() / 0.5 - 1.0).abs() < 0.2,
        "{f}"
    );
    assert_eq!(json["min_window"], 9);
    assert_eq!(json["min_feature_m"], 400.0);
    assert!(json["recommended_window"].as_u64().unwrap() >= 9);
    assert!(json["noise_model"]
        .as_str()
        .unwrap()
        .starts_with("white + footprint"));
    assert!(json["reason"].as_str().unwrap().contains("below 9"));
    // The chosen-window band, read by GDAL, holds no window below 9.
    let ds = gdal::Dataset::open(out.join("dome_k_pos_adaptive.tif")).unwrap();
    let b = ds.rasterband(2).unwrap();
    let nodata = b.no_data_value();
    let chosen = b.read_as::<f64>((0, 0), b.size(), b.size(), None).unwrap();
    assert!(chosen
        .data()
        .iter()
        .filter(|v| Some(**v) != nodata && v.is_finite())
        .all(|&w| w == 9.0 || w == 15.0));
}
