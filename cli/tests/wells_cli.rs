//! `flexure stages` and `flexure plan` end to end on a synthetic uniform anisotropy field
//! (fast azimuth 10 degrees, 3 ms) on a 30 m grid, and the bad well and stage inputs named in
//! the wells issue: one clear line naming file and line, non-zero exit, no output.

mod common;

use common::{fails, flexure};
use flexure_engine::anisotropy::FIT_BANDS;
use flexure_engine::demo::survey_geometry;
use flexure_engine::io::{write_float_geotiff, BandOut};
use ndarray::Array2;
use std::path::{Path, PathBuf};

const FAST: f32 = 10.0;

/// A 100 x 100 grid of 30 m bins (origin 500000, 3900000 top-left) with a uniform anisotropy
/// field, written as DIR/anisotropy.tif.
fn anisotropy(dir: &Path) -> PathBuf {
    let g = survey_geometry((500_000.0, 3_900_000.0), 90.0, (30.0, 30.0), (100, 100));
    let bands: Vec<BandOut> = FIT_BANDS
        .iter()
        .map(|b| {
            let v = match b.id {
                "magnitude" | "magnitude_unbiased" => 3.0,
                "azimuth_fast" => FAST,
                "azimuth_slow" => FAST + 90.0,
                "magnitude_stderr" => 0.2,
                "azimuth_stderr" => 2.0,
                _ => 1.0,
            };
            BandOut {
                description: b.id,
                unit: b.unit,
                values: Array2::from_elem((100, 100), v),
            }
        })
        .collect();
    let path = dir.join("anisotropy.tif");
    write_float_geotiff(&path, &g, &bands, &[]).unwrap();
    path
}

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

/// An east-west plan path from x 500600 to 502400 along y 3898500, md 3000 .. 4800.
const EAST_WEST: &str = "md,x,y\n3000,500600,3898500\n3900,501500,3898500\n4800,502400,3898500\n";
/// Six 300 m stages along it.
const STAGES: &str = "stage,md_top,md_base\n1,3000,3300\n2,3300,3600\n3,3600,3900\n4,3900,4200\n5,4200,4500\n6,4500,4800\n";

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Rows of a CSV as maps from column to field.
fn csv_rows(path: &Path) -> Vec<std::collections::HashMap<String, String>> {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header: Vec<String> = lines.next().unwrap().split(',').map(String::from).collect();
    lines
        .map(|l| {
            header
                .iter()
                .cloned()
                .zip(l.split(',').map(String::from))
                .collect()
        })
        .collect()
}

#[test]
fn east_west_well_over_a_ten_degree_fast_azimuth_reads_eighty_degrees() {
    // The checks: angle_to_well 80 for an east-west well over a uniform fast azimuth
    // of 10; with 30 m bins a 300 m stage in a 300 m wide corridor holds about 100 bins
    // (common practice; area 300 x 300 / 900), within one row of bins (10).
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let well = write(d, "ew_1h.csv", EAST_WEST);
    let stages = write(d, "ew_1h_stages.csv", STAGES);
    let out = d.join("out");
    let o = flexure(&[
        "stages",
        "--anisotropy",
        s(&a),
        "--well",
        s(&well),
        "--stages",
        s(&stages),
        "--out",
        s(&out),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("licensed engineers"), "{stdout}");
    let rows = csv_rows(&out.join("stages.csv"));
    assert_eq!(rows.len(), 7, "six stages and the lateral");
    for r in &rows {
        let angle: f64 = r["angle_to_well"].parse().unwrap();
        assert!((angle - 80.0).abs() < 1e-6, "{r:?}");
        let fast: f64 = r["fast_azimuth"].parse().unwrap();
        assert!((fast - 10.0).abs() < 1e-6);
    }
    for r in &rows[..6] {
        let n: i64 = r["n_bins"].parse().unwrap();
        assert!((n - 100).abs() <= 10, "stage {}: {n} bins", r["stage"]);
    }
    assert_eq!(rows[6]["stage"], "lateral");
    for name in ["stage_corridors.gpkg", "stage_corridors.geojson"] {
        let info = std::process::Command::new("ogrinfo")
            .args(["-so", "-al"])
            .arg(out.join(name))
            .output()
            .unwrap();
        let text = String::from_utf8_lossy(&info.stdout);
        assert!(
            text.contains("Feature Count: 7") && text.contains("Polygon"),
            "{name}: {text}"
        );
    }
    for f in [
        "roses/ew_1h_1.svg",
        "roses/ew_1h_lateral.png",
        "ew_1h_sheet.svg",
        "ew_1h_sheet.png",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
}

#[test]
fn survey_wells_and_a_path_leaving_the_grid_are_handled() {
    // A survey due east (azimuth 90, horizontal) from a wellhead: the same geometry as a plan
    // path. Its last stage runs off the grid (east edge at x 503000): flagged, others kept.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let survey = write(
        d,
        "east_2h.csv",
        "md,inc,azi\n0,90,90\n1000,90,90\n2000,90,90\n3000,90,90\n",
    );
    let stages = write(
        d,
        "east_2h_stages.csv",
        "stage,md_top,md_base\n1,0,300\n2,2600,2900\n",
    );
    let out = d.join("out");
    let o = flexure(&[
        "stages",
        "--anisotropy",
        s(&a),
        "--well",
        s(&survey),
        "--stages",
        s(&stages),
        "--wellhead",
        "500300,3898500",
        "--out",
        s(&out),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let rows = csv_rows(&out.join("stages.csv"));
    assert_eq!(rows[0]["flag"], "");
    assert!(rows[1]["flag"].contains("outside"), "{:?}", rows[1]);
    assert!(String::from_utf8_lossy(&o.stdout).contains("flagged 2"));
}

#[test]
fn azimuth_scan_recommends_the_perpendicular_to_the_fast_azimuth() {
    // Uniform fast azimuth 10: the best lateral runs at 100 (perpendicular).
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let out = d.join("plan");
    let o = flexure(&[
        "plan",
        "--anisotropy",
        s(&a),
        "--pad",
        "501500,3898500",
        "--lateral",
        "1200",
        "--out",
        s(&out),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("best lateral azimuth 100.0"), "{stdout}");
    assert!(stdout.contains("proxy for stress"), "{stdout}");
    let rows = csv_rows(&out.join("plan.csv"));
    assert_eq!(rows.len(), 36);
    for f in [
        "plan_scores.svg",
        "plan_scores.png",
        "plan_candidates.geojson",
        "plan_candidates.gpkg",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
}

#[test]
fn bad_well_and_stage_inputs_fail_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let good_well = write(d, "w.csv", EAST_WEST);
    let good_stages = write(d, "w_stages.csv", STAGES);
    let cases: Vec<(PathBuf, PathBuf, &str)> = vec![
        (
            write(
                d,
                "a.csv",
                "md,x,y\n3000,500600,3898500\n2900,501500,3898500\n",
            ),
            good_stages.clone(),
            "a.csv: line 3: md 2900 does not increase",
        ),
        (
            good_well.clone(),
            write(d, "b.csv", "stage,md_top,md_base\n1,3300,3000\n"),
            "b.csv: line 2: md_top",
        ),
        (
            good_well.clone(),
            write(
                d,
                "c.csv",
                "stage,md_top,md_base\n1,3000,3300\n2,4700,4900\n",
            ),
            "c.csv: line 3: stage 2",
        ),
        (
            write(d, "e.csv", "md,inc,azi\n0,0,0\n100,190,0\n"),
            good_stages.clone(),
            "e.csv: line 3: inclination",
        ),
        (
            write(d, "f.csv", "md,inc,azi\n0,0,0\n100,10,361\n"),
            good_stages.clone(),
            "f.csv: line 3: azimuth",
        ),
        (
            write(d, "g.csv", "md,east,north\n0,1,2\n"),
            good_stages.clone(),
            "g.csv: line 1",
        ),
        (
            write(d, "h.csv", ""),
            good_stages.clone(),
            "h.csv: is empty",
        ),
        (
            good_well.clone(),
            write(d, "i.csv", "stage,md_top\n1,3000\n"),
            "i.csv: line 1: no column 'md_base'",
        ),
        (
            write(d, "j.csv", "md,inc,azi\n0,0,0\n100,10,10\n"),
            good_stages.clone(),
            "--wellhead",
        ),
    ];
    let out = d.join("out");
    for (well, stages, expect) in cases {
        // Survey cases get a wellhead unless the case is about its absence.
        let head: &[&str] = if expect == "--wellhead" {
            &[]
        } else {
            &["--wellhead", "500300,3898500"]
        };
        let mut args = vec![
            "stages",
            "--anisotropy",
            s(&a),
            "--well",
            s(&well),
            "--stages",
            s(&stages),
            "--out",
            s(&out),
        ];
        args.extend(head);
        let msg = fails(&args, &out);
        assert!(msg.contains(expect), "expected '{expect}' in {msg}");
        assert!(!out.join("stages.csv").exists());
    }
    let msg = fails(
        &[
            "stages",
            "--anisotropy",
            s(&a),
            "--well",
            s(&good_well),
            "--stages",
            s(&good_stages),
            "--stages",
            s(&good_stages),
            "--out",
            s(&out),
        ],
        &out,
    );
    assert!(msg.contains("one stage table per well"), "{msg}");
}

#[test]
fn demo_runs_end_to_end_with_wells_and_a_scan() {
    // The whole demo on the shipped data: every stage of the three invented laterals and the
    // lateral rows are in the table, and the scan, maps and anisotropy outputs exist.
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("demo");
    let data = Path::new(env!("CARGO_MANIFEST_DIR")).join("../demo_horizons");
    let o = flexure(&["demo", "--out", s(&out), "--data", s(&data), "--quiet"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let rows = csv_rows(&out.join("stages/stages.csv"));
    let wells: std::collections::BTreeSet<&str> = rows.iter().map(|r| r["well"].as_str()).collect();
    assert_eq!(wells.len(), 3);
    assert_eq!(rows.iter().filter(|r| r["stage"] == "lateral").count(), 3);
    for f in [
        "plan/plan.csv",
        "maps/kelvane_marl_twt_k_pos_w09.png",
        "anisotropy/anisotropy.tif",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
}
