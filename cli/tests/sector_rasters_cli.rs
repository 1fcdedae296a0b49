//! `flexure anisotropy` on sector-time rasters as `flexure sector-times` writes them (issue 13:
//! band metadata `AZIMUTH_DEG`, `SECTOR_SHIFTS`, `REFERENCE_TIME_FILE`, `sector_quality.tif`),
//! with fixtures written through GDAL: azimuths read from the bands, the interval between two
//! horizons (`--top`/`--base`), `anisotropy_percent`, correlation-quality weights, and bad input.

mod common;

use common::{fails_leaving_unchanged, flexure, north_up};
use flexure_engine::anisotropy::FIT_BANDS;
use flexure_engine::grid::GridGeometry;
use flexure_engine::io::{read_raster, write_float_geotiff, BandOut};
use gdal::{Dataset, Metadata};
use ndarray::Array2;
use std::path::{Path, PathBuf};
use std::process::Command;

const COLS: usize = 12;
const ROWS: usize = 10;

/// Eight sectors 22.5 degrees apart, from grid north.
fn azimuths() -> Vec<f64> {
    (0..8).map(|k| 10.0 + 22.5 * k as f64).collect()
}

/// `A + B cos 2(phi - slow)`, the cos 2phi form of weak-anisotropy HTI traveltimes (Tsvankin
/// 1997, Geophysics 62:614).
fn cos2(a: f64, b: f64, slow: f64, phi: f64) -> f64 {
    a + b * (2.0 * (phi - slow).to_radians()).cos()
}

/// Writes `bands` (float32, unit ms) through GDAL with band descriptions `sector_<az>`, then
/// reopens the file in GDAL and sets each band's `AZIMUTH_DEG` (when `azimuths` are given) and
/// the dataset metadata `items`.
fn sector_raster(
    path: &Path,
    g: &GridGeometry,
    bands: Vec<Array2<f32>>,
    azimuths: Option<&[f64]>,
    items: &[(&str, &str)],
) -> PathBuf {
    let names: Vec<String> = (0..bands.len())
        .map(|k| match azimuths {
            Some(a) => format!("sector_{}", a[k]),
            None => format!("sector_{k}"),
        })
        .collect();
    let out: Vec<BandOut> = bands
        .into_iter()
        .zip(&names)
        .map(|(values, name)| BandOut {
            description: name,
            unit: "ms",
            values,
        })
        .collect();
    write_float_geotiff(path, g, &out, &[]).unwrap();
    let mut ds = Dataset::open_ex(
        path,
        gdal::DatasetOptions {
            open_flags: gdal::GdalOpenFlags::GDAL_OF_UPDATE,
            ..Default::default()
        },
    )
    .unwrap();
    for (k, a) in azimuths.unwrap_or_default().iter().enumerate() {
        let mut band = ds.rasterband(k + 1).unwrap();
        band.set_metadata_item("AZIMUTH_DEG", &a.to_string(), "")
            .unwrap();
    }
    for (key, value) in items {
        ds.set_metadata_item(key, value, "").unwrap();
    }
    path.to_path_buf()
}

/// One band per azimuth of `value(phi, row, col)`.
fn per_sector(az: &[f64], value: impl Fn(f64, usize, usize) -> f64) -> Vec<Array2<f32>> {
    az.iter()
        .map(|&phi| Array2::from_shape_fn((ROWS, COLS), |(r, c)| value(phi, r, c) as f32))
        .collect()
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

/// Band `id` of `DIR/anisotropy.tif`.
fn band(out: &Path, id: &str) -> Array2<f64> {
    let b = FIT_BANDS.iter().position(|b| b.id == id).unwrap();
    read_raster(&out.join("anisotropy.tif"), &Default::default())
        .unwrap()
        .bands
        .swap_remove(b)
}

fn gdalinfo(path: &Path) -> serde_json::Value {
    let out = Command::new("gdalinfo")
        .arg("-json")
        .arg(path)
        .output()
        .expect("gdalinfo from gdal-bin");
    assert!(
        out.status.success(),
        "gdalinfo failed on {}",
        path.display()
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

fn axial(a: f64, b: f64) -> f64 {
    (a - b + 90.0).rem_euclid(180.0) - 90.0
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn azimuths_declared_by_the_bands_round_trip_through_gdal() {
    let dir = tempfile::tempdir().unwrap();
    let g = north_up(COLS, ROWS);
    let az = azimuths();
    let times = per_sector(&az, |phi, r, c| {
        cos2(1200.0, 3.0 + 0.1 * c as f64, 35.0 + r as f64, phi)
    });
    let path = sector_raster(
        &dir.path().join("sector_times.tif"),
        &g,
        times.clone(),
        Some(&az),
        &[],
    );
    // gdalinfo (gdal-bin, independent of the gdal crate's reading) shows each band's item.
    let info = gdalinfo(&path);
    for (k, a) in az.iter().enumerate() {
        let item = &info["bands"][k]["metadata"][""]["AZIMUTH_DEG"];
        assert_eq!(item.as_str(), Some(a.to_string().as_str()));
    }
    // Without --azimuths the fit uses them: the recorded grid azimuths are those written, and
    // the slow azimuth is the one the times were made with (the cos 2phi form above).
    let out = dir.path().join("declared");
    let stdout = run_ok(&["anisotropy", s(&path), "--out", s(&out)]);
    assert!(stdout.contains("declared by the bands"), "{stdout}");
    let written = gdalinfo(&out.join("anisotropy.tif"));
    let recorded = written["metadata"][""]["FLEXURE_SECTOR_AZIMUTHS_GRID_DEG"]
        .as_str()
        .unwrap()
        .to_string();
    let expected: Vec<String> = az.iter().map(|a| format!("{a:.4}")).collect();
    assert_eq!(recorded, expected.join(", "));
    let slow = band(&out, "azimuth_slow");
    for r in 0..ROWS {
        assert!(axial(slow[(r, 3)], 35.0 + r as f64).abs() < 0.01);
    }
    // The same azimuths given agree with the declared ones: the same bands, bit for bit.
    let given = dir.path().join("given");
    let list: Vec<String> = az.iter().map(|a| a.to_string()).collect();
    run_ok(&[
        "anisotropy",
        s(&path),
        "--azimuths",
        &list.join(","),
        "--out",
        s(&given),
        "--quiet",
    ]);
    assert_eq!(
        common::band_bits(&given.join("anisotropy.tif")),
        common::band_bits(&out.join("anisotropy.tif"))
    );
}

#[test]
fn the_interval_between_two_horizons_is_the_base_layer() {
    // Top: t1 = T1 + B1 cos 2(phi - phi1); base: t1 + T2 + B2 cos 2(phi - phi2), the cos 2phi
    // (weak HTI, Tsvankin 1997) traveltime of a second anisotropic layer added below. The
    // interval (base minus top) holds exactly the second layer's law, so its fit gives B2, phi2
    // and T2; the base alone gives the vector sum of the two doubled-angle vectors (elementary
    // trigonometry: a1 = B1 cos 2phi1 + B2 cos 2phi2, a2 = B1 sin 2phi1 + B2 sin 2phi2).
    // Tolerances: float32 times near 2000 ms round by up to 6.1e-5 ms, so each coefficient is
    // off by at most 2 x (2 x 6.1e-5) = 2.4e-4 ms; we allow 1e-3 ms and 0.01 degree.
    let dir = tempfile::tempdir().unwrap();
    let g = north_up(COLS, ROWS);
    let az = azimuths();
    let law1 = |r: usize, c: usize| (1500.0, 3.0 + 0.1 * c as f64, 20.0 + 5.0 * r as f64);
    let law2 = |r: usize, c: usize| {
        (
            200.0 + r as f64,
            2.0 + 0.05 * r as f64,
            110.0 + 3.0 * c as f64,
        )
    };
    let top_t = |phi: f64, r, c| {
        let (a, b, slow) = law1(r, c);
        cos2(a, b, slow, phi)
    };
    let base_t = |phi: f64, r, c| {
        let (a, b, slow) = law2(r, c);
        top_t(phi, r, c) + cos2(a, b, slow, phi)
    };
    // The top's bands in another order: sectors are matched by their declared azimuths.
    let mut top_az = az.clone();
    top_az.rotate_left(3);
    let top = sector_raster(
        &dir.path().join("top.tif"),
        &g,
        per_sector(&top_az, top_t),
        Some(&top_az),
        &[],
    );
    let base = sector_raster(
        &dir.path().join("base.tif"),
        &g,
        per_sector(&az, base_t),
        Some(&az),
        &[],
    );
    let interval = dir.path().join("interval");
    let stdout = run_ok(&[
        "anisotropy",
        "--top",
        s(&top),
        "--base",
        s(&base),
        "--out",
        s(&interval),
        "--memory",
        "64M",
    ]);
    assert!(stdout.contains("interval:"), "{stdout}");
    let (m, slow, iso, pct) = (
        band(&interval, "magnitude"),
        band(&interval, "azimuth_slow"),
        band(&interval, "isotropic"),
        band(&interval, "anisotropy_percent"),
    );
    for r in 0..ROWS {
        for c in 0..COLS {
            let (t2, b2, phi2) = law2(r, c);
            assert!(
                (m[(r, c)] - b2).abs() < 1e-3,
                "B2 at {r},{c}: {}",
                m[(r, c)]
            );
            assert!(axial(slow[(r, c)], phi2).abs() < 0.01, "phi2 at {r},{c}");
            assert!((iso[(r, c)] - t2).abs() < 1e-3);
            // Absolute times: T is the fitted isotropic term (the interval time).
            let expected = 100.0 * 2.0 * b2 / t2;
            assert!(
                (pct[(r, c)] - expected).abs() < 1e-3 * expected,
                "percent at {r},{c}"
            );
        }
    }
    let alone = dir.path().join("base_alone");
    run_ok(&["anisotropy", s(&base), "--out", s(&alone), "--quiet"]);
    let (m, slow) = (band(&alone, "magnitude"), band(&alone, "azimuth_slow"));
    for r in 0..ROWS {
        for c in 0..COLS {
            let ((_, b1, p1), (_, b2, p2)) = (law1(r, c), law2(r, c));
            let (d1, d2) = ((2.0 * p1).to_radians(), (2.0 * p2).to_radians());
            let (a1, a2) = (b1 * d1.cos() + b2 * d2.cos(), b1 * d1.sin() + b2 * d2.sin());
            assert!((m[(r, c)] - a1.hypot(a2)).abs() < 1e-3);
            let sum_slow = 0.5 * a2.atan2(a1).to_degrees();
            assert!(axial(slow[(r, c)], sum_slow).abs() < 0.01);
        }
    }
}

/// Writes a one-band reference-time raster of `value(row, col)` ms with `REFERENCE_TIME_KIND`.
fn reference_raster(
    path: &Path,
    g: &GridGeometry,
    kind: &str,
    value: impl Fn(usize, usize) -> f64,
) {
    let values = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| value(r, c) as f32);
    sector_raster(
        path,
        g,
        vec![values],
        None,
        &[("REFERENCE_TIME_KIND", kind)],
    );
}

#[test]
fn anisotropy_percent_of_time_shifts_uses_the_reference_time() {
    // Shifts s = 0.4 + B cos 2(phi - 60) ms against a horizon at T(r, c) ms: the band is
    // 100 x 2B / T (the definition), null where T <= 0; without a reference time it is
    // null everywhere and the report says why.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = north_up(COLS, ROWS);
    let az = azimuths();
    let b = |r: usize, c: usize| 1.0 + 0.2 * r as f64 + 0.1 * c as f64;
    let t = |r: usize, c: usize| {
        if (r, c) == (0, 0) {
            0.0
        } else {
            900.0 + 10.0 * r as f64 + c as f64
        }
    };
    let shifts = |k: usize| {
        per_sector(&az, move |phi, r, c| {
            cos2(0.4 * k as f64, b(r, c), 60.0, phi)
        })
    };
    reference_raster(&d.join("reference_time.tif"), &g, "horizon", t);
    let shifted = [
        ("SECTOR_SHIFTS", "yes"),
        ("REFERENCE_TIME_FILE", "reference_time.tif"),
    ];
    let named = sector_raster(
        &d.join("sector_times.tif"),
        &g,
        shifts(1),
        Some(&az),
        &shifted,
    );
    let out = d.join("named");
    let stdout = run_ok(&["anisotropy", s(&named), "--out", s(&out)]);
    assert!(stdout.contains("reference_time.tif"), "{stdout}");
    let pct = band(&out, "anisotropy_percent");
    for r in 0..ROWS {
        for c in 0..COLS {
            if (r, c) == (0, 0) {
                assert!(pct[(r, c)].is_nan(), "T = 0 gives nodata");
                continue;
            }
            let expected = 100.0 * 2.0 * b(r, c) / t(r, c);
            assert!((pct[(r, c)] - expected).abs() < 1e-4 * expected, "{r},{c}");
        }
    }
    // Shifts that name no reference time: the band is nodata, the report says why; given with
    // --reference-time, the same values as when the metadata names it.
    let bare_dir = d.join("bare");
    std::fs::create_dir(&bare_dir).unwrap();
    let bare = sector_raster(
        &bare_dir.join("sector_times.tif"),
        &g,
        shifts(1),
        Some(&az),
        &[("SECTOR_SHIFTS", "yes")],
    );
    let none = d.join("none");
    let stdout = run_ok(&["anisotropy", s(&bare), "--out", s(&none)]);
    assert!(
        stdout.contains("anisotropy_percent is nodata everywhere"),
        "{stdout}"
    );
    assert!(stdout.contains("--reference-time"), "{stdout}");
    assert!(band(&none, "anisotropy_percent").iter().all(|v| v.is_nan()));
    let given = d.join("given");
    let reference = d.join("reference_time.tif");
    run_ok(&[
        "anisotropy",
        s(&bare),
        "--reference-time",
        s(&reference),
        "--out",
        s(&given),
        "--quiet",
    ]);
    let same = band(&given, "anisotropy_percent")
        .iter()
        .zip(pct.iter())
        .all(|(a, b)| a.to_bits() == b.to_bits());
    assert!(same);

    // An interval of shift rasters: T = base reference minus top reference (the interval's
    // isotropic time thickness), so the band is 100 x 2 B_interval / (T_base - T_top).
    let top_dir = d.join("top");
    let base_dir = d.join("base");
    for dir in [&top_dir, &base_dir] {
        std::fs::create_dir(dir).unwrap();
    }
    let t_top = |r: usize, c: usize| 700.0 + r as f64 + c as f64;
    let t_base = |r: usize, c: usize| 950.0 + 3.0 * r as f64 + c as f64;
    reference_raster(&top_dir.join("reference_time.tif"), &g, "horizon", t_top);
    reference_raster(&base_dir.join("reference_time.tif"), &g, "horizon", t_base);
    let top = sector_raster(
        &top_dir.join("sector_times.tif"),
        &g,
        per_sector(&az, |phi, _, _| cos2(0.0, 1.5, 20.0, phi)),
        Some(&az),
        &shifted,
    );
    let base = sector_raster(
        &base_dir.join("sector_times.tif"),
        &g,
        per_sector(&az, |phi, r, c| {
            cos2(0.0, 1.5, 20.0, phi) + cos2(0.2, b(r, c), 60.0, phi)
        }),
        Some(&az),
        &shifted,
    );
    let interval = d.join("interval");
    run_ok(&[
        "anisotropy",
        "--top",
        s(&top),
        "--base",
        s(&base),
        "--out",
        s(&interval),
        "--quiet",
    ]);
    let pct = band(&interval, "anisotropy_percent");
    for r in 0..ROWS {
        for c in 0..COLS {
            let expected = 100.0 * 2.0 * b(r, c) / (t_base(r, c) - t_top(r, c));
            assert!((pct[(r, c)] - expected).abs() < 1e-3 * expected, "{r},{c}");
        }
    }
}

#[test]
fn low_quality_sectors_are_down_weighted() {
    // Truth t = 1000 + 4 cos 2(phi - 30) ms; one sector (j) picked 6 ms late with correlation
    // quality 0.2, the others exact with quality 0.9. Weighted least squares with weight w_b on
    // sector j and w_g elsewhere, equally spaced sectors: by the Sherman-Morrison formula the
    // fitted (A, a1, a2) are the truth plus
    //   delta w_b / (w_g (1 - 3/N) + 3 w_b / N) x (1/N, 2 cos 2phi_j / N, 2 sin 2phi_j / N)
    // (G^T G = diag(N, N/2, N/2), g_j^T (G^T G)^-1 g_j = 3/N; standard linear algebra), with
    // w = c^2 / (1 - c^2) (Knapp & Carter 1976, from memory). Equal weights (w_b = w_g) are the
    // unweighted fit. The weighted fit lies nearer the truth.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = north_up(COLS, ROWS);
    let az = azimuths();
    let (j, delta) = (3, 6.0);
    let times = per_sector(&az, |phi, _, _| {
        cos2(1000.0, 4.0, 30.0, phi) + if phi == az[j] { delta } else { 0.0 }
    });
    let path = sector_raster(&d.join("sector_times.tif"), &g, times, Some(&az), &[]);
    let quality: Vec<f64> = (0..8).map(|k| if k == j { 0.2 } else { 0.9 }).collect();
    let qualities = quality
        .iter()
        .map(|&q| Array2::from_elem((ROWS, COLS), q as f32))
        .collect();
    sector_raster(&d.join("sector_quality.tif"), &g, qualities, Some(&az), &[]);
    let expected = |w_b: f64, w_g: f64| {
        let n = az.len() as f64;
        let f = delta * w_b / (w_g * (1.0 - 3.0 / n) + 3.0 * w_b / n);
        let d2 = (2.0 * az[j]).to_radians();
        let truth = (2.0 * 30.0f64).to_radians();
        let a1 = 4.0 * truth.cos() + f * 2.0 * d2.cos() / n;
        let a2 = 4.0 * truth.sin() + f * 2.0 * d2.sin() / n;
        (a1.hypot(a2), 0.5 * a2.atan2(a1).to_degrees())
    };
    let w = |c: f64| c * c / (1.0 - c * c);
    let plain = d.join("plain");
    let weighted = d.join("weighted");
    run_ok(&["anisotropy", s(&path), "--out", s(&plain), "--quiet"]);
    run_ok(&[
        "anisotropy",
        s(&path),
        "--weights",
        "quality",
        "--out",
        s(&weighted),
        "--quiet",
    ]);
    let got = |out: &Path| {
        (
            band(out, "magnitude")[(4, 4)],
            band(out, "azimuth_slow")[(4, 4)],
        )
    };
    let ((pm, ps), (wm, ws)) = (got(&plain), got(&weighted));
    let ((em, es), (fm, fs)) = (expected(1.0, 1.0), expected(w(0.2), w(0.9)));
    assert!(
        (pm - em).abs() < 1e-4 && axial(ps, es).abs() < 1e-3,
        "{pm} {ps} vs {em} {es}"
    );
    assert!(
        (wm - fm).abs() < 1e-4 && axial(ws, fs).abs() < 1e-3,
        "{wm} {ws} vs {fm} {fs}"
    );
    assert!((wm - 4.0).abs() < 0.5 * (pm - 4.0).abs());
    assert!(axial(ws, 30.0).abs() < 0.5 * axial(ps, 30.0).abs());

    // The same law as an interval: the top (quality 0.9 everywhere) holds another cos 2phi law,
    // the base the top's plus the law above with its bad sector (qualities as above). Variances
    // of a difference add, so sector j weighs 1 / (1/w(0.9) + 1/w(0.2)) against
    // 1 / (2/w(0.9)) elsewhere in the same closed form. Float32 times near 2000 ms: 1e-3 ms.
    let (top_dir, base_dir) = (d.join("top"), d.join("base"));
    let top_t = |phi: f64| cos2(900.0, 2.0, 100.0, phi);
    for (folder, value, quality) in [
        (&top_dir, &top_t as &dyn Fn(f64) -> f64, vec![0.9; 8]),
        (
            &base_dir,
            &|phi: f64| {
                top_t(phi) + cos2(1000.0, 4.0, 30.0, phi) + if phi == az[j] { delta } else { 0.0 }
            },
            quality.clone(),
        ),
    ] {
        std::fs::create_dir(folder).unwrap();
        let times = per_sector(&az, |phi, _, _| value(phi));
        sector_raster(&folder.join("sector_times.tif"), &g, times, Some(&az), &[]);
        let q = quality
            .iter()
            .map(|&q| Array2::from_elem((ROWS, COLS), q as f32))
            .collect();
        sector_raster(&folder.join("sector_quality.tif"), &g, q, Some(&az), &[]);
    }
    let interval = d.join("interval");
    run_ok(&[
        "anisotropy",
        "--top",
        s(&top_dir.join("sector_times.tif")),
        "--base",
        s(&base_dir.join("sector_times.tif")),
        "--weights",
        "quality",
        "--out",
        s(&interval),
        "--quiet",
    ]);
    let difference = |a: f64, b: f64| 1.0 / (1.0 / a + 1.0 / b);
    let (im, is) = got(&interval);
    let (xm, xs) = expected(difference(w(0.9), w(0.2)), difference(w(0.9), w(0.9)));
    assert!(
        (im - xm).abs() < 1e-3 && axial(is, xs).abs() < 1e-2,
        "{im} {is} vs {xm} {xs}"
    );
}

#[test]
fn bad_sector_rasters_fail_cleanly_and_leave_the_folder() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let g = north_up(COLS, ROWS);
    let az = azimuths();
    let times = |a: &[f64]| {
        per_sector(a, |phi, r, c| {
            cos2(1000.0 + r as f64 + c as f64, 3.0, 40.0, phi)
        })
    };
    let top = sector_raster(&d.join("top.tif"), &g, times(&az), Some(&az), &[]);
    let base = sector_raster(&d.join("base.tif"), &g, times(&az), Some(&az), &[]);
    let other_grid = north_up(COLS + 2, ROWS);
    let wide_times = az
        .iter()
        .map(|_| Array2::from_elem((ROWS, COLS + 2), 1000.0f32))
        .collect();
    let wide = sector_raster(&d.join("wide.tif"), &other_grid, wide_times, Some(&az), &[]);
    let mut turned = az.clone();
    turned[2] += 5.0;
    let other_az = sector_raster(
        &d.join("other_az.tif"),
        &g,
        times(&turned),
        Some(&turned),
        &[],
    );
    let plain = sector_raster(&d.join("plain.tif"), &g, times(&az), None, &[]);
    let lonely_dir = d.join("lonely");
    std::fs::create_dir(&lonely_dir).unwrap();
    let lonely = sector_raster(
        &lonely_dir.join("sector_times.tif"),
        &g,
        times(&az),
        Some(&az),
        &[],
    );
    let mixed_dir = d.join("mixed");
    std::fs::create_dir(&mixed_dir).unwrap();
    let mixed = sector_raster(
        &mixed_dir.join("sector_times.tif"),
        &g,
        times(&az),
        Some(&az),
        &[("SECTOR_SHIFTS", "yes")],
    );
    let quality = (0..8)
        .map(|_| Array2::from_elem((ROWS, COLS), 0.9f32))
        .collect();
    sector_raster(
        &mixed_dir.join("sector_quality.tif"),
        &g,
        quality,
        Some(&turned),
        &[],
    );
    // Correlation coefficients above 1 (found while streaming, after the outputs were begun).
    let over_dir = d.join("over");
    std::fs::create_dir(&over_dir).unwrap();
    let over = sector_raster(
        &over_dir.join("sector_times.tif"),
        &g,
        times(&az),
        Some(&az),
        &[],
    );
    let mut too_high = vec![Array2::from_elem((ROWS, COLS), 0.9f32); 8];
    too_high[5][(7, 2)] = 1.5;
    sector_raster(
        &over_dir.join("sector_quality.tif"),
        &g,
        too_high,
        Some(&az),
        &[],
    );
    let wide_time = d.join("wide_time.tif");
    reference_raster(&wide_time, &other_grid, "horizon", |_, _| 900.0);
    let out = d.join("out");
    // A previous run's outputs in the folder, which every refusal must leave as they were.
    run_ok(&["anisotropy", s(&base), "--out", s(&out), "--quiet"]);
    let eight: Vec<String> = az.iter().map(|a| (a + 1.0).to_string()).collect();
    let eight = eight.join(",");
    let cases: Vec<(Vec<&str>, Vec<&str>)> = vec![
        (
            vec!["--top", s(&wide), "--base", s(&base)],
            vec!["wide.tif", "base.tif", "not on the grid"],
        ),
        (
            vec!["--top", s(&other_az), "--base", s(&base)],
            vec!["other_az.tif", "base.tif", "not those of"],
        ),
        (
            vec![s(&lonely), "--weights", "quality"],
            vec!["sector_quality.tif", "--weights quality"],
        ),
        (
            vec![s(&base), "--azimuths", &eight],
            vec!["base.tif", "AZIMUTH_DEG=10", "--azimuths"],
        ),
        (vec![s(&plain)], vec!["plain.tif", "give --azimuths"]),
        (
            vec!["--top", s(&base), "--base", s(&base)],
            vec!["same file"],
        ),
        (
            vec![s(&base), "--azimuth-reference", "true"],
            vec!["--azimuth-reference true applies to --azimuths"],
        ),
        (
            vec![s(&top), "--reference-time", s(&wide_time)],
            vec!["wide_time.tif", "top.tif", "not on the grid"],
        ),
        (
            vec![s(&mixed), "--weights", "quality"],
            vec![
                "sector_quality.tif",
                "has no band for the sector at 55",
                "mixed",
            ],
        ),
        (
            vec![s(&over), "--weights", "quality"],
            vec![
                "sector_quality.tif",
                "band 6 holds 1.5 at row 8, column 3",
                "0 to 1",
            ],
        ),
        (
            vec!["--top", s(&mixed), "--base", s(&base)],
            vec!["mixed", "base.tif", "same kind"],
        ),
    ];
    for (args, expect) in cases {
        let mut a = vec!["anisotropy"];
        a.extend(args);
        a.extend(["--out", s(&out)]);
        let msg = fails_leaving_unchanged(&a, &out);
        for e in expect {
            assert!(msg.contains(e), "{a:?}: expected '{e}' in {msg}");
        }
    }
}
