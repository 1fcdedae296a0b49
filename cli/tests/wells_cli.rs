//! `flexure stages` and `flexure plan` end to end on synthetic anisotropy fields (mostly a
//! uniform fast azimuth of 10 degrees, 3 ms) on a 30 m grid: statistics, units, KB and tie-in,
//! name binding, well lists, flags, stand-off, and the bad inputs named in the wells issues:
//! one clear line naming file and line, exit 1, nothing written.

mod common;

use common::{fails, fails_leaving_unchanged, flexure, survey_geometry, tree};
use flexure_engine::anisotropy::FIT_BANDS;
use flexure_engine::io::{write_float_geotiff, BandOut};
use ndarray::Array2;
use std::path::{Path, PathBuf};

const FAST: f32 = 10.0;

/// The 100 x 100 grid of 30 m bins of these tests (origin 500000, 3900000 top-left).
fn grid() -> flexure_engine::grid::GridGeometry {
    survey_geometry((500_000.0, 3_900_000.0), 90.0, (30.0, 30.0), (100, 100))
}

/// DIR/anisotropy.tif on [`grid`] with band values `value(band, row, col)`.
fn anisotropy_field(dir: &Path, value: impl Fn(&str, usize, usize) -> f32) -> PathBuf {
    anisotropy_on(dir, &grid(), value)
}

/// DIR/anisotropy.tif on `g` (100 x 100 cells) with band values `value(band, row, col)`.
fn anisotropy_on(
    dir: &Path,
    g: &flexure_engine::grid::GridGeometry,
    value: impl Fn(&str, usize, usize) -> f32,
) -> PathBuf {
    let bands: Vec<BandOut> = FIT_BANDS
        .iter()
        .map(|b| BandOut {
            description: b.id,
            unit: b.unit,
            values: Array2::from_shape_fn((100, 100), |(r, c)| value(b.id, r, c)),
        })
        .collect();
    let path = dir.join("anisotropy.tif");
    write_float_geotiff(&path, g, &bands, &[]).unwrap();
    path
}

/// Uniform values of every band: fast azimuth 10 degrees, 3 ms, 8 sectors.
fn uniform(band: &str) -> f32 {
    match band {
        "magnitude" | "magnitude_unbiased" => 3.0,
        "azimuth_fast" => FAST,
        "azimuth_slow" => FAST + 90.0,
        "magnitude_stderr" => 0.2,
        "azimuth_stderr" => 2.0,
        "n_sectors" => 8.0,
        _ => 1.0,
    }
}

/// A uniform anisotropy field (fast azimuth 10 degrees, 3 ms) as DIR/anisotropy.tif.
fn anisotropy(dir: &Path) -> PathBuf {
    anisotropy_field(dir, |b, _, _| uniform(b))
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
    assert_eq!(
        rows.len(),
        72,
        "every direction from the heel, every 5 degrees"
    );
    for f in [
        "plan_scores.svg",
        "plan_scores.png",
        "plan_candidates.geojson",
        "plan_candidates.gpkg",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
    // The chart's rings are labelled at round scores, at radii in proportion to the score
    // (a linear radial scale), and its spokes every 30 degrees; the centre lies midway between
    // the N and S labels (compass-rose layout, common practice).
    let svg = std::fs::read_to_string(out.join("plan_scores.svg")).unwrap();
    let at = |label: &str| -> (f64, f64) {
        let end = svg
            .find(&format!(">{label}</text>"))
            .unwrap_or_else(|| panic!("no label {label}"));
        let tag = &svg[svg[..end].rfind("<text").unwrap()..end];
        let attr = |name: &str| -> f64 {
            let start = tag.find(&format!("{name}=\"")).unwrap() + name.len() + 2;
            tag[start..start + tag[start..].find('"').unwrap()]
                .parse()
                .unwrap()
        };
        (attr("x"), attr("y"))
    };
    let (n, south) = (at("N"), at("S"));
    let centre = (n.0, (n.1 + south.1) / 2.0);
    let radius = |label: &str| {
        let (x, y) = at(label);
        ((x - centre.0).powi(2) + (y - centre.1).powi(2)).sqrt()
    };
    let unit = radius("0.2") / 0.2;
    for (label, score) in [("0.4", 0.4), ("0.6", 0.6), ("0.8", 0.8), ("1.0", 1.0)] {
        assert!(
            (radius(label) - unit * score).abs() < 0.5,
            "ring {label}: radius {} vs {}",
            radius(label),
            unit * score
        );
    }
    for label in [
        "30°", "60°", "120°", "150°", "210°", "240°", "300°", "330°", "E", "W",
    ] {
        at(label);
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

/// Runs `flexure stages` on `a` with `args` and the output `out`; panics with stderr on failure.
fn stages_ok(a: &Path, out: &Path, args: &[&str]) -> String {
    let mut all = vec!["stages", "--anisotropy", s(a), "--out", s(out)];
    all.extend(args);
    let o = flexure(&all);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stdout).to_string()
}

/// The failure message of `flexure stages` on `a` with `args` (checked clean: exit 1, one
/// line, nothing written) and that the output folder was not even created.
fn stages_fail(a: &Path, out: &Path, args: &[&str]) -> String {
    let mut all = vec!["stages", "--anisotropy", s(a), "--out", s(out)];
    all.extend(args);
    let msg = fails(&all, out);
    assert!(!out.exists(), "nothing may be created on failure: {msg}");
    msg
}

/// Column `name` of `rows` as numbers (NaN for empty fields).
fn column(rows: &[std::collections::HashMap<String, String>], name: &str) -> Vec<f64> {
    rows.iter()
        .map(|r| r[name].parse().unwrap_or(f64::NAN))
        .collect()
}

/// A survey due east: vertical to 1000, a constant build to horizontal over 500 (so a
/// quarter circle of radius 500 / (pi/2)), then 1500 horizontal; `md_header` names the md
/// column (with its unit).
fn survey_east(md_header: &str) -> String {
    format!("{md_header},Inc,Azi\n0,0,90\n1000,0,90\n1500,90,90\n3000,90,90\n")
}

#[test]
fn kb_shifts_tvd_exactly_and_header_units_are_used() {
    // Hand-checkable circle geometry: the survey ends (R + 1500) east of the wellhead and
    // (1000 + R) below KB, R = 500 / (pi/2), in the header's unit: international feet
    // 0.3048 m, US survey feet 1200/3937 m (exact definitions). TVD below datum = TVD below
    // KB - KB (common practice), so --kb 100 lowers every tvdss by exactly 100. The stage
    // table declares no unit and takes its well's.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let stages = write(d, "st.csv", "stage,md_top,md_base\n1,1600,1900\n");
    let r = 500.0 / std::f64::consts::FRAC_PI_2;
    for (header, metres, unit) in [
        ("MD (ft)", 0.3048, "ft"),
        ("Measured Depth [usft]", 1200.0 / 3937.0, "us-ft"),
    ] {
        let well = write(d, "e1.csv", &survey_east(header));
        let run = |kb: &str, out: &str| {
            let out = d.join(out);
            let w = format!("e1={}", s(&well));
            let st = format!("e1={}", s(&stages));
            stages_ok(
                &a,
                &out,
                &[
                    "--well",
                    &w,
                    "--stages",
                    &st,
                    "--wellhead",
                    "e1=500300,3898500",
                    "--kb",
                    kb,
                ],
            );
            csv_rows(&out.join("wells/e1_path.csv"))
        };
        let (base, shifted) = (run("e1=0", "k0"), run("e1=100", "k100"));
        let key = format!("tvdss ({unit})");
        let last = base.last().unwrap();
        let x: f64 = last["x (m)"].parse().unwrap();
        assert!(
            (x - 500_300.0 - (r + 1500.0) * metres).abs() < 1e-5,
            "{header}: x {x}"
        );
        let tvd: f64 = last[&key].parse().unwrap();
        assert!((tvd - (1000.0 + r)).abs() < 1e-5, "{header}: tvd {tvd}");
        for (a0, a1) in column(&base, &key).iter().zip(column(&shifted, &key)) {
            assert!((a0 - 100.0 - a1).abs() < 1e-9, "{a0} {a1}");
        }
        std::fs::remove_dir_all(d.join("k0")).unwrap();
        std::fs::remove_dir_all(d.join("k100")).unwrap();
    }
}

#[test]
fn a_survey_below_md_zero_needs_its_tie_in() {
    // A survey starting at md 900 (as ISCWSA rev 4 well 10): refused without a tie-in, and
    // with --tie-in it starts there (hand-checkable: the tie-in's TVD below KB minus KB).
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let well = write(d, "side.csv", "md,inc,azi\n900,90,90\n2000,90,90\n");
    let stages = write(d, "side_st.csv", "stage,md_top,md_base\n1,1000,1300\n");
    let out = d.join("out");
    let base = [
        "--well",
        s(&well),
        "--stages",
        s(&stages),
        "--wellhead",
        "500300,3898500",
    ];
    let msg = stages_fail(&a, &out, &base);
    assert!(
        msg.contains("side.csv: line 2: the survey starts at md 900, not 0: give a tie-in"),
        "{msg}"
    );
    let mut args = base.to_vec();
    args.extend(["--tie-in", "side=500400,3898500,2500", "--kb", "30"]);
    stages_ok(&a, &out, &args);
    let path = csv_rows(&out.join("wells/side_path.csv"));
    assert_eq!(
        (path[0]["x (m)"].as_str(), path[0]["tvdss (m)"].as_str()),
        ("500400", "2470")
    );
    assert_eq!(path[0]["station"], "1");
}

#[test]
fn a_header_unit_contradicted_by_the_option_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let well = write(d, "e1.csv", &survey_east("MD (ft)"));
    let stages = write(d, "st.csv", "stage,md_top,md_base\n1,1600,1900\n");
    let msg = stages_fail(
        &a,
        &d.join("out"),
        &[
            "--well",
            s(&well),
            "--stages",
            s(&stages),
            "--wellhead",
            "500300,3898500",
            "--md-unit",
            "m",
        ],
    );
    assert!(
        msg.contains("e1.csv: line 1: column 'MD (ft)' declares ft but --md-unit is m"),
        "{msg}"
    );
}

#[test]
fn wellheads_bind_by_name_not_by_position() {
    // A path well listed first must not take the survey well's wellhead.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let path = write(d, "p5.csv", EAST_WEST);
    let survey = write(d, "s3.csv", "md,inc,azi\n0,90,90\n2000,90,90\n");
    let (ps, ss) = (
        write(d, "p5_st.csv", STAGES),
        write(d, "s3_st.csv", "stage,md_top,md_base\n1,100,400\n"),
    );
    let out = d.join("out");
    stages_ok(
        &a,
        &out,
        &[
            "--well",
            s(&path),
            "--well",
            s(&survey),
            "--stages",
            s(&ps),
            "--stages",
            s(&ss),
            "--wellhead",
            "s3=500700,3898200",
        ],
    );
    let rows = csv_rows(&out.join("wells/s3_path.csv"));
    assert_eq!(
        (rows[0]["x (m)"].as_str(), rows[0]["y (m)"].as_str()),
        ("500700", "3898200")
    );
    let msg = stages_fail(
        &a,
        &d.join("out2"),
        &[
            "--well",
            s(&path),
            "--well",
            s(&survey),
            "--stages",
            s(&ps),
            "--stages",
            s(&ss),
            "--wellhead",
            "500700,3898200",
        ],
    );
    assert!(
        msg.contains("--wellhead without a well name is ambiguous with 2 wells (p5, s3)"),
        "{msg}"
    );
    // The written path reads back as a path well (md, x, y, tvdss) with the same corridors.
    let again = d.join("again");
    let back = format!("s3={}", s(&out.join("wells/s3_path.csv")));
    stages_ok(&a, &again, &["--well", &back, "--stages", s(&ss)]);
    let pick = |o: &Path| {
        csv_rows(&o.join("stages.csv"))
            .into_iter()
            .filter(|r| r["well"] == "s3")
            .map(|r| {
                (
                    r["n_bins"].clone(),
                    r["fast_azimuth"].clone(),
                    r["well_azimuth"].clone(),
                )
            })
            .collect::<Vec<_>>()
    };
    assert_eq!(pick(&out), pick(&again));
}

#[test]
fn a_well_list_in_toml_or_csv_gives_the_same_result() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let sub = d.join("list");
    std::fs::create_dir(&sub).unwrap();
    write(&sub, "p5.csv", EAST_WEST);
    write(&sub, "p5_st.csv", STAGES);
    write(&sub, "s3.csv", "md,inc,azi\n0,90,90\n2000,90,90\n");
    write(&sub, "s3_st.csv", "stage,md_top,md_base\n1,100,400\n");
    let toml = write(
        &sub,
        "wells.toml",
        "[[well]]\nname = \"pad5\"\nwell_file = \"p5.csv\"\nstage_file = \"p5_st.csv\"\n\n[[well]]\nwell_file = \"s3.csv\"\nstage_file = \"s3_st.csv\"\nwellhead_x = 500700\nwellhead_y = 3898200\nkb = 12\n",
    );
    let csv = write(
        &sub,
        "wells.csv",
        "name,well_file,stage_file,wellhead_x,wellhead_y,kb\npad5,p5.csv,p5_st.csv,,,\n,s3.csv,s3_st.csv,500700,3898200,12\n",
    );
    let (o1, o2) = (d.join("o1"), d.join("o2"));
    stages_ok(&a, &o1, &["--wells", s(&toml)]);
    stages_ok(&a, &o2, &["--wells", s(&csv)]);
    let read = |o: &Path| std::fs::read_to_string(o.join("stages.csv")).unwrap();
    assert_eq!(read(&o1), read(&o2));
    let rows = csv_rows(&o1.join("stages.csv"));
    assert_eq!(rows.iter().filter(|r| r["well"] == "pad5").count(), 7);
    assert!(o1.join("wells/s3_path.csv").is_file());
    let tvd = column(&csv_rows(&o1.join("wells/s3_path.csv")), "tvdss (m)");
    assert_eq!(tvd[0], -12.0);
    let bad = write(
        &sub,
        "bad.toml",
        "[[well]]\nwell_file = \"p5.csv\"\nstage_file = \"p5_st.csv\"\nwellhead = [1, 2]\n",
    );
    let msg = stages_fail(&a, &d.join("o3"), &["--wells", s(&bad)]);
    assert!(
        msg.contains("bad.toml: line 4: unknown field `wellhead`"),
        "{msg}"
    );
}

#[test]
fn overlaps_and_name_collisions_are_refused_before_anything_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let well = write(d, "w.csv", EAST_WEST);
    let good = write(d, "good.csv", STAGES);
    let out = d.join("out");
    let cases = [
        (
            "stage,md_top,md_base\n1,3000,3300\n2,3200,3500\n",
            "overlap.csv: line 3: stage 2 (3200 .. 3500 m) overlaps stage 1 on line 2 (3000 .. 3300 m)",
        ),
        (
            "stage,md_top,md_base\nA 1,3000,3300\nA/1,3300,3600\n",
            "line 3: stage 'A/1' and stage 'A 1' on line 2 give the same file name 'a_1'",
        ),
        (
            "stage,md_top,md_base\nLATERAL,3000,3300\n",
            "line 2: stage 'LATERAL' would take the file name of the whole-lateral summary",
        ),
    ];
    for (k, (text, expect)) in cases.iter().enumerate() {
        let name = if k == 0 {
            "overlap.csv".to_string()
        } else {
            format!("c{k}.csv")
        };
        let st = write(d, &name, text);
        let msg = stages_fail(&a, &out, &["--well", s(&well), "--stages", s(&st)]);
        assert!(msg.contains(expect), "expected '{expect}' in {msg}");
    }
    let (w1, w2) = (format!("Pad 1={}", s(&well)), format!("pad_1={}", s(&well)));
    let msg = stages_fail(
        &a,
        &out,
        &[
            "--well",
            &w1,
            "--well",
            &w2,
            "--stages",
            s(&good),
            "--stages",
            s(&good),
        ],
    );
    assert!(
        msg.contains("wells 'Pad 1'")
            && msg.contains("'pad_1'")
            && msg.contains("same output file names 'pad_1'"),
        "{msg}"
    );
}

#[test]
fn dip_azimuth_is_averaged_as_an_angle() {
    // Hand-checkable: a plane dipping north with dip azimuths 355 and 5 in a checkerboard:
    // the circular mean is 0 (the arithmetic mean would be 180), p10 355 and p90 5 (the
    // deviations -5 and +5 added back mod 360).
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let curv = d.join("curv_w09.tif");
    let bands = vec![
        BandOut {
            description: "dip_azimuth",
            unit: "degree",
            values: Array2::from_shape_fn(
                (100, 100),
                |(r, c)| if (r + c) % 2 == 0 { 355.0 } else { 5.0 },
            ),
        },
        BandOut {
            description: "dip",
            unit: "degree",
            values: Array2::from_elem((100, 100), 2.0),
        },
    ];
    write_float_geotiff(&curv, &grid(), &bands, &[]).unwrap();
    let (well, st) = (write(d, "w.csv", EAST_WEST), write(d, "st.csv", STAGES));
    let out = d.join("out");
    stages_ok(
        &a,
        &out,
        &[
            "--well",
            s(&well),
            "--stages",
            s(&st),
            "--curvature",
            s(&curv),
        ],
    );
    let rows = csv_rows(&out.join("stages.csv"));
    for r in &rows {
        let mean: f64 = r["dip_azimuth_mean"].parse().unwrap();
        assert!(mean.min(360.0 - mean) < 1e-6, "{r:?}");
        assert_eq!(
            (r["dip_azimuth_p10"].as_str(), r["dip_azimuth_p90"].as_str()),
            ("355", "5")
        );
        assert_eq!(r["dip_mean"], "2");
    }
}

#[test]
fn thin_mixed_and_cancelling_corridors_are_flagged() {
    // Stages of 300 m along an east-west well on 30 m bins whose edges fall on the stage ends
    // and the corridor sides, so each corridor holds exactly 10 x 10 bins (hand-checkable):
    // stage 1 alternates fast axes 0 and 90 by column (50 each: the doubled angles cancel, so
    // no mean axis, axial std or angle to well), stage 2 has bins fitted from 6 of the grid's
    // 8 sectors, stage 3 has 5 fitted bins of 100, stage 4 is clean.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy_field(d, |b, r, c| match (b, c) {
        ("azimuth_fast", 20..=29) => 90.0 * (c % 2) as f32,
        ("n_sectors", 30..=39) => 6.0,
        ("magnitude", 40..=49) if !(r == 50 && c < 45) => f32::NAN,
        _ => uniform(b),
    });
    let (well, st) = (write(d, "w.csv", EAST_WEST), write(d, "st.csv", STAGES));
    let out = d.join("out");
    stages_ok(&a, &out, &["--well", s(&well), "--stages", s(&st)]);
    let rows = csv_rows(&out.join("stages.csv"));
    assert_eq!(column(&rows, "n_bins")[..4], [100.0, 100.0, 5.0, 100.0]);
    let r = &rows[0];
    assert_eq!(
        (
            r["fast_azimuth"].as_str(),
            r["axial_std"].as_str(),
            r["angle_to_well"].as_str()
        ),
        ("", "", "")
    );
    assert!(r["resultant_length"].parse::<f64>().unwrap() < 1e-6);
    assert!(r["flag"].contains("fast azimuths cancel"), "{r:?}");
    assert!(
        rows[1]["flag"].contains("100 bins fitted from fewer than the grid's 8 sectors"),
        "{:?}",
        rows[1]
    );
    let f3 = &rows[2]["flag"];
    assert!(
        f3.contains("only 5 fitted bins (fewer than 10)")
            && f3.contains("only 5 of 100 corridor cells fitted"),
        "{f3}"
    );
    assert_eq!(rows[3]["flag"], "");
}

/// Runs `flexure plan` from the grid centre over `a` and returns its stdout and plan.csv rows.
fn scan(
    a: &Path,
    out: &Path,
    extra: &[&str],
) -> (String, Vec<std::collections::HashMap<String, String>>) {
    let mut args = vec![
        "plan",
        "--anisotropy",
        s(a),
        "--pad",
        "501500,3898500",
        "--lateral",
        "1200",
        "--out",
        s(out),
    ];
    args.extend(extra);
    let o = flexure(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    (
        String::from_utf8_lossy(&o.stdout).to_string(),
        csv_rows(&out.join("plan.csv")),
    )
}

/// A deterministic pseudo-random number in [0, 1) for cell (r, c) and salt `k` (a hash; the
/// tests need no particular generator).
fn hashed(r: usize, c: usize, k: u64) -> f64 {
    let mut x = (r as u64) << 32 ^ (c as u64) << 8 ^ k;
    x = x.wrapping_mul(0x9E37_79B9_7F4A_7C15);
    x ^= x >> 29;
    x = x.wrapping_mul(0xBF58_476D_1CE4_E5B9);
    x ^= x >> 32;
    (x >> 11) as f64 / (1u64 << 53) as f64
}

/// Noise-only bins: magnitudes about their own standard error, random fast azimuths with
/// wide standard errors (what a fit of pure noise gives).
fn noise(band: &str, r: usize, c: usize) -> f32 {
    match band {
        "magnitude" | "magnitude_unbiased" => (0.2 + 0.3 * hashed(r, c, 1)) as f32,
        "azimuth_fast" => (180.0 * hashed(r, c, 2)) as f32,
        "azimuth_slow" => ((180.0 * hashed(r, c, 2) + 90.0) % 180.0) as f32,
        "magnitude_stderr" => 0.3,
        "azimuth_stderr" => 35.0,
        _ => uniform(band),
    }
}

#[test]
fn a_scan_picks_the_strong_side_of_the_pad_not_its_opposite() {
    // Strong, well-measured anisotropy (fast 0, 3 ms, stderr 0.2 ms) east of the pad only
    // (columns from 50 on; the pad is at column 50), noise-only bins west of it: the best
    // lateral must run east (into the strong side, perpendicular to the fast azimuth), not
    // west, though east and west are the same axis.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy_field(d, |b, r, c| {
        if c >= 50 {
            match b {
                "azimuth_fast" => 0.0,
                "azimuth_slow" => 90.0,
                _ => uniform(b),
            }
        } else {
            noise(b, r, c)
        }
    });
    let (stdout, rows) = scan(&a, &d.join("plan"), &[]);
    assert!(stdout.contains("best lateral azimuth 90.0"), "{stdout}");
    let score = |az: &str| -> f64 {
        rows.iter().find(|r| r["azimuth"] == az).unwrap()["score"]
            .parse()
            .unwrap()
    };
    assert!(
        score("90") > score("270") + 0.2,
        "east {} west {}",
        score("90"),
        score("270")
    );
}

#[test]
fn a_noise_only_field_gives_no_preferred_azimuth() {
    // Noise-only bins everywhere: the scan must not name a confident best.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy_field(d, noise);
    let (stdout, _) = scan(&a, &d.join("plan"), &[]);
    assert!(stdout.contains("no preferred azimuth"), "{stdout}");
    assert!(!stdout.contains("best lateral azimuth"), "{stdout}");
}

#[test]
fn a_patchy_field_without_a_regional_trend_gives_no_preferred_azimuth() {
    // Well-measured anisotropy (3 ms, stderr 0.2 ms and 2 deg) whose fast azimuth is random
    // from one 150 m patch (5 x 5 bins) to the next, with no regional trend: neighbouring bins
    // agree, so treating bins as independent would make any direction look certain (the
    // review's Monte Carlo: a best was named in 20 of 20 such fields). The scan resamples
    // stretches of corridor and must not name a best.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy_field(d, |b, r, c| {
        let fast = (180.0 * hashed(r / 5, c / 5, 7)) as f32;
        match b {
            "azimuth_fast" => fast,
            "azimuth_slow" => (fast + 90.0) % 180.0,
            _ => uniform(b),
        }
    });
    let (stdout, _) = scan(&a, &d.join("plan"), &[]);
    assert!(stdout.contains("no preferred azimuth"), "{stdout}");
}

#[test]
fn the_heel_can_be_offset_from_the_pad() {
    // --heel-offset 600,90 puts the heel 600 m east of the pad (elementary geometry): the
    // candidate laterals start there.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let (stdout, _) = scan(&a, &d.join("plan"), &["--heel-offset", "600,90"]);
    assert!(stdout.contains("heel at (502100.0, 3898500.0)"), "{stdout}");
}

#[test]
fn a_scan_over_zero_magnitudes_fails_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy_field(d, |b, _, _| {
        if b.starts_with("magnitude") && !b.ends_with("stderr") {
            0.0
        } else {
            uniform(b)
        }
    });
    let out = d.join("plan");
    let msg = fails(
        &[
            "plan",
            "--anisotropy",
            s(&a),
            "--pad",
            "501500,3898500",
            "--lateral",
            "1200",
            "--out",
            s(&out),
        ],
        &out,
    );
    assert!(
        msg.contains("anisotropy.tif: every bin the candidate laterals cross has zero magnitude"),
        "{msg}"
    );
}

#[test]
fn standoff_from_a_dipping_plane_is_known_by_hand() {
    // A planar horizon z = 3000 + 0.02 (x - 500000) m (depth, dipping east) on its own 25 m
    // grid, and a horizontal lateral at 3045 m below KB with KB 25 m, so 3020 m below the
    // datum: stand-off = 3020 - z = 8 - 0.02 (x - 500600). Stage 1 runs x 500600 .. 500900:
    // 8 to 2 m, mean 5 (bilinear interpolation is exact on a plane; hand-checkable). Positive
    // means below the horizon.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let g = survey_geometry((499_500.0, 3_900_500.0), 90.0, (25.0, 25.0), (160, 160));
    let depth = Array2::from_shape_fn((160, 160), |(r, c)| {
        let (x, _) = g.cell_centre(c, r);
        (3000.0 + 0.02 * (x - 500_000.0)) as f32
    });
    let horizon = d.join("plane.tif");
    write_float_geotiff(
        &horizon,
        &g,
        &[BandOut {
            description: "depth",
            unit: "m",
            values: depth,
        }],
        &[],
    )
    .unwrap();
    let well = write(
        d,
        "flat.csv",
        "md,x,y,tvd\n3000,500600,3898500,3045\n4800,502400,3898500,3045\n",
    );
    let st = write(d, "st.csv", STAGES);
    let out = d.join("out");
    stages_ok(
        &a,
        &out,
        &[
            "--well",
            s(&well),
            "--stages",
            s(&st),
            "--kb",
            "25",
            "--horizon",
            s(&horizon),
        ],
    );
    let rows = csv_rows(&out.join("stages.csv"));
    let near = |v: &str, want: f64| (v.parse::<f64>().unwrap() - want).abs() < 1e-4;
    let r = &rows[0];
    assert!(
        near(&r["standoff_mean"], 5.0)
            && near(&r["standoff_min"], 2.0)
            && near(&r["standoff_max"], 8.0),
        "{r:?}"
    );
    let lateral = &rows[6];
    assert!(
        near(&lateral["standoff_mean"], -10.0) && near(&lateral["standoff_min"], -28.0),
        "{lateral:?}"
    );
}

#[test]
fn corridor_half_widths_are_metres_on_a_grid_in_feet() {
    // A CRS in international feet with 100 ft bins (30.48 m): 300 ft stages (91.44 m) with
    // the default 150 m half width cover 91.44 x 300 m, about 29.5 bins of 929 m^2
    // (elementary area; 1 ft = 0.3048 m). Read as 150 ft, they would cover about 9.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let mut g = survey_geometry((500_000.0, 3_900_000.0), 90.0, (100.0, 100.0), (100, 100));
    g.crs_wkt = gdal::spatial_ref::SpatialRef::from_proj4(
        "+proj=tmerc +lat_0=0 +lon_0=-33 +k=0.9996 +x_0=500000 +y_0=0 +ellps=WGS84 +units=ft +no_defs",
    )
    .unwrap()
    .to_wkt()
    .unwrap();
    let a = anisotropy_on(d, &g, |b, _, _| uniform(b));
    let well = write(d, "ft_1h.csv", &EAST_WEST.replace("md,x,y", "md (ft),x,y"));
    let stages = write(d, "ft_1h_stages.csv", STAGES);
    let run = |out: &str, extra: &[&str]| {
        let out = d.join(out);
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
        args.extend_from_slice(extra);
        let o = flexure(&args);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        (
            String::from_utf8_lossy(&o.stdout).to_string(),
            csv_rows(&out.join("stages.csv")),
        )
    };
    let (stdout, rows) = run("a", &[]);
    for r in &rows[1..5] {
        let n: f64 = r["n_bins"].parse().unwrap();
        assert!((n - 29.5).abs() <= 6.0, "{r:?}");
        assert!(r["flag"].is_empty(), "{r:?}");
    }
    // No KB was given: the report says how TVD was taken.
    assert!(stdout.contains("no KB given"), "{stdout}");
    // --min-bins sets the flag's threshold.
    let (_, rows) = run("b", &["--min-bins", "40"]);
    assert!(
        rows[1..5]
            .iter()
            .all(|r| r["flag"].contains("fewer than 40")),
        "{rows:?}"
    );
}

#[test]
fn two_outputs_with_one_file_name_are_refused_and_nothing_is_written() {
    // Our rule, checked by the one commit of every job: well 'A_1' stage '2' and well 'A'
    // stage '1_2' both make the rose file name A_1_2, which neither the well-name nor the
    // stage-name check sees. Refused naming the file and both; a fresh folder is not created
    // and a previous run's folder is left byte for byte.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let well = write(d, "ew.csv", EAST_WEST);
    let st1 = write(d, "st1.csv", "stage,md_top,md_base\n2,3000,3300\n");
    let st2 = write(d, "st2.csv", "stage,md_top,md_base\n1_2,3300,3600\n");
    let (w1, w2) = (format!("A_1={}", s(&well)), format!("A={}", s(&well)));
    let (s1, s2) = (format!("A_1={}", s(&st1)), format!("A={}", s(&st2)));
    let args = [
        "--well", &w1, "--well", &w2, "--stages", &s1, "--stages", &s2,
    ];
    let msg = stages_fail(&a, &d.join("fresh"), &args);
    assert!(
        msg.contains("A_1_2.svg: two outputs of this run have this file name: the rose of well 'A_1' stage '2' and the rose of well 'A' stage '1_2'; rename one"),
        "{msg}"
    );
    let out = d.join("out");
    stages_ok(&a, &out, &["--well", &w1, "--stages", &s1]);
    let mut all = vec!["stages", "--anisotropy", s(&a), "--out", s(&out)];
    all.extend(args);
    let msg = fails_leaving_unchanged(&all, &out);
    assert!(
        msg.contains("two outputs of this run have this file name"),
        "{msg}"
    );
}

#[test]
fn a_commit_that_fails_part_way_leaves_the_previous_run_and_a_rerun_replaces_it() {
    // Common practice for all-or-nothing outputs (POSIX rename(2) cannot put a file over a
    // directory): a folder in the place of the last output the stages job commits
    // (stage_corridors.geojson) fails its commit after every other output was renamed in;
    // they are taken back, so the previous run's files are byte-identical and no new file,
    // folder or hidden temporary or backup remains. Once the folder is gone, the same run
    // replaces the previous files and leaves no hidden file.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let well = write(d, "ew.csv", EAST_WEST);
    let stages = write(d, "ew_st.csv", STAGES);
    let second = write(
        d,
        "n2.csv",
        "md,x,y\n0,501000,3898000\n1200,501000,3896800\n",
    );
    let second_stages = write(
        d,
        "n2_st.csv",
        "stage,md_top,md_base\n1,100,400\n2,400,700\n",
    );
    let out = d.join("out");
    stages_ok(&a, &out, &["--well", s(&well), "--stages", s(&stages)]);
    let previous = tree(&out);
    let blocker = out.join("stage_corridors.geojson");
    std::fs::remove_file(&blocker).unwrap();
    std::fs::create_dir(&blocker).unwrap();
    std::fs::write(blocker.join("keep.txt"), "not ours").unwrap();
    let rerun = [
        "stages",
        "--anisotropy",
        s(&a),
        "--out",
        s(&out),
        "--well",
        s(&well),
        "--well",
        s(&second),
        "--stages",
        s(&stages),
        "--stages",
        s(&second_stages),
        "--half-width",
        "100",
    ];
    let msg = fails_leaving_unchanged(&rerun, &out);
    assert!(
        msg.contains("stage_corridors.geojson: Is a directory")
            && msg.contains("a folder has this output's name")
            && msg.contains("no output was written and the folder is as it was"),
        "{msg}"
    );
    let left = tree(&out);
    for (path, bytes) in &previous {
        if !path.starts_with("stage_corridors.geojson") {
            assert_eq!(left.get(path), Some(bytes), "{}", path.display());
        }
    }
    // The re-run, with the folder moved away, replaces the files.
    std::fs::remove_dir_all(&blocker).unwrap();
    let o = flexure(&rerun);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let now = tree(&out);
    let hidden: Vec<_> = now
        .keys()
        .filter(|p| p.iter().any(|c| c.to_string_lossy().starts_with('.')))
        .collect();
    assert!(hidden.is_empty(), "{hidden:?}");
    assert_ne!(
        now[Path::new("stages.csv")],
        previous[Path::new("stages.csv")]
    );
    assert!(now.contains_key(Path::new("wells/n2_path.csv")));
    assert!(now.contains_key(Path::new("stage_corridors.geojson")));
    // What the re-run wrote is what the same run writes into an empty folder.
    let fresh = d.join("fresh");
    let mut args = rerun.to_vec();
    args[4] = s(&fresh);
    let o = flexure(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let fresh = tree(&fresh);
    for name in [
        "stages.csv",
        "wells/ew_path.csv",
        "roses/ew_1.svg",
        "n2_sheet.svg",
    ] {
        assert_eq!(now[Path::new(name)], fresh[Path::new(name)], "{name}");
    }
}

/// (centre, radius) of every rose of a sheet SVG, in drawing order, from the white disc that
/// opens each `<g class="rose">` (72 points on a circle and the first again).
fn sheet_roses(svg: &str) -> Vec<((f64, f64), f64)> {
    svg.split("<g class=\"rose\">")
        .skip(1)
        .map(|group| {
            let start = group.find("points=\"").unwrap() + 8;
            let end = start + group[start..].find('"').unwrap();
            let points: Vec<(f64, f64)> = group[start..end]
                .split(' ')
                .map(|p| {
                    let (x, y) = p.split_once(',').unwrap();
                    (x.parse().unwrap(), y.parse().unwrap())
                })
                .collect();
            let n = 72.0;
            let cx = points[..72].iter().map(|p| p.0).sum::<f64>() / n;
            let cy = points[..72].iter().map(|p| p.1).sum::<f64>() / n;
            ((cx, cy), (points[0].1 - cy).abs())
        })
        .collect()
}

#[test]
fn sheet_roses_sit_along_measured_depth_heel_to_toe() {
    // 45 stages of uneven length (20 to 60 m) along the east-west well: each rose's centre on
    // the sheet is linear in the stage's mid md as read from the stage table (a linear axis,
    // common practice for well logs), increasing heel to toe, and no two roses overlap.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy(d);
    let well = write(d, "long.csv", EAST_WEST);
    let mut table = String::from("stage,md_top,md_base\n");
    let mut md = 3000.0;
    let mut mids = Vec::new();
    for k in 0..45 {
        let length = [20.0, 60.0, 35.0, 45.0][k % 4];
        table += &format!("{},{md},{}\n", k + 1, md + length);
        mids.push(md + length / 2.0);
        md += length;
    }
    let stages = write(d, "long_stages.csv", &table);
    let out = d.join("out");
    stages_ok(
        &a,
        &out,
        &[
            "--well",
            s(&well),
            "--stages",
            s(&stages),
            "--min-bins",
            "1",
        ],
    );
    let svg = std::fs::read_to_string(out.join("long_sheet.svg")).unwrap();
    let roses = sheet_roses(&svg);
    assert_eq!(roses.len(), 45);
    let (first, last) = (roses[0].0 .0, roses[44].0 .0);
    for (k, ((x, _), _)) in roses.iter().enumerate() {
        let expected = first + (last - first) * (mids[k] - mids[0]) / (mids[44] - mids[0]);
        assert!(
            (x - expected).abs() < 0.05,
            "stage {}: x {x} vs {expected}",
            k + 1
        );
        if k > 0 {
            assert!(
                *x > roses[k - 1].0 .0,
                "stage {} left of its heel side",
                k + 1
            );
        }
    }
    for (i, (a, ra)) in roses.iter().enumerate() {
        for (b, rb) in &roses[i + 1..] {
            let dist = ((a.0 - b.0).powi(2) + (a.1 - b.1).powi(2)).sqrt();
            assert!(dist >= ra + rb, "roses overlap: {a:?} {b:?}");
        }
    }
    // The tracks and the md axis are there, with units.
    for text in [
        "class=\"track angle_to_well\"",
        "class=\"track magnitude\"",
        "measured depth (m), heel to toe",
    ] {
        assert!(svg.contains(text), "{text}");
    }
}

/// Twelve 150 m stages along [`EAST_WEST`].
fn twelve_stages() -> String {
    let mut text = String::from("stage,md_top,md_base\n");
    for k in 0..12 {
        text += &format!("{},{},{}\n", k + 1, 3000 + 150 * k, 3150 + 150 * k);
    }
    text
}

#[test]
fn completion_outcomes_are_joined_and_tested_against_the_stage_metrics() {
    // The fast azimuth turns from 0 to 90 deg west to east (1.5 deg per 30 m column), so along
    // the east-west well the angle to well falls from 90 to 0 deg; a completion outcome made
    // to rise with that angle (plus a small wobble) must come out with rho near 1 against
    // angle_to_well. One well of 12 stages: the order-keeping test has only 12 circular
    // shifts, so p cannot fall below 1/12 (its floor, by construction of the test). A stage
    // missing from the table and a row of an unknown stage are reported; the production table
    // of one well is too few for a test, and the output says so.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy_field(d, |b, _, c| {
        let fast = (1.5 * (c as f32 - 20.0)).clamp(0.0, 90.0);
        match b {
            "azimuth_fast" => fast,
            "azimuth_slow" => fast + 90.0,
            _ => uniform(b),
        }
    });
    let well = write(d, "ew.csv", EAST_WEST);
    let stages = write(d, "ew_stages.csv", &twelve_stages());
    let mut completions = String::from("Well;Stage No;Max rate (m3/min);Comment\n");
    for k in 1..=11 {
        // Stage k's mid-point is at x = 500600 + 150 (k - 0.5): angle = 90 - 1.5 (col - 20).
        let col = (600.0 + 150.0 * (k as f64 - 0.5)) / 30.0;
        let angle = (90.0 - 1.5 * (col - 20.0)).clamp(0.0, 90.0);
        let wobble = if k % 2 == 0 { 0.05 } else { -0.05 };
        completions += &format!("ew;{k:02};{:.3};ok\n", 5.0 + 0.05 * angle + wobble);
    }
    completions += "ew;99;7.0;typo\n";
    let completions = write(d, "completions.csv", &completions);
    let production = write(d, "production.csv", "well,cum oil 180 d (m3)\new,12000\n");
    let out = d.join("st");
    let stdout = stages_ok(
        &a,
        &out,
        &[
            "--well",
            &format!("ew={}", s(&well)),
            "--stages",
            &format!("ew={}", s(&stages)),
            "--completions",
            s(&completions),
            "--production",
            s(&production),
            "--per-length",
        ],
    );
    let text = std::fs::read_to_string(out.join("outcomes.csv")).unwrap();
    assert!(
        text.starts_with("outcome,metric,level,n,rho,ci_low,ci_high,p_value,q_value\n"),
        "{text}"
    );
    let rows = csv_rows(&out.join("outcomes.csv"));
    // q is the Benjamini-Hochberg adjusted p over every row (Benjamini & Hochberg 1995):
    // min over the p-values at least as large, p' of rank j among m, of min(1, m p' / j).
    let p_values: Vec<f64> = rows.iter().map(|r| r["p_value"].parse().unwrap()).collect();
    let mut sorted = p_values.clone();
    sorted.sort_by(f64::total_cmp);
    let m = sorted.len() as f64;
    for (row, p) in rows.iter().zip(&p_values) {
        let first = sorted.iter().position(|v| v == p).unwrap();
        let expected = (first..sorted.len())
            .map(|j| (m * sorted[j] / (j + 1) as f64).min(1.0))
            .fold(f64::INFINITY, f64::min);
        let q: f64 = row["q_value"].parse().unwrap();
        assert!((q - expected).abs() < 1e-12, "{row:?}: q {q} vs {expected}");
    }
    let angle = rows
        .iter()
        .find(|r| r["metric"] == "angle_to_well" && r["level"] == "stage")
        .unwrap();
    assert_eq!(angle["outcome"], "Max rate (m3/min)");
    assert_eq!(angle["n"], "11");
    let rho: f64 = angle["rho"].parse().unwrap();
    let p: f64 = angle["p_value"].parse().unwrap();
    assert!(rho > 0.9, "{angle:?}");
    assert!((1.0 / 12.0 - 1e-9..=0.1).contains(&p), "{angle:?}");
    assert!(
        rows.iter().all(|r| r["level"] == "stage"),
        "no well-level test on one well"
    );
    assert!(
        stdout.contains("no completion row for 1 stage(s): ew 12"),
        "{stdout}"
    );
    assert!(stdout.contains("(ew 99)"), "{stdout}");
    assert!(stdout.contains("'Comment' is not numeric"), "{stdout}");
    assert!(stdout.contains("only 1 well(s)"), "{stdout}");
    assert!(stdout.contains("not a forecast"), "{stdout}");
    for f in [
        "outcomes.json",
        "outcome_stage_1.png",
        "outcome_stage_1.svg",
        "outcome_well_2.png",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
    let sheet = std::fs::read_to_string(out.join("ew_sheet.svg")).unwrap();
    assert!(
        sheet.contains("Max rate (m3/min) (completion table)"),
        "outcome track on the sheet"
    );
}

#[test]
fn a_corridor_with_two_fast_azimuth_populations_is_flagged_mixed() {
    // Checkerboard of fast azimuths 20 and 100 deg (two equal populations 80 deg apart): every
    // stage is flagged mixed_trends with both axes in the table, within 5 deg of the truth.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = anisotropy_field(d, |b, r, c| {
        let fast = if (r + c) % 2 == 0 { 20.0 } else { 100.0 };
        match b {
            "azimuth_fast" => fast,
            "azimuth_slow" => (fast + 90.0) % 180.0,
            _ => uniform(b),
        }
    });
    let well = write(d, "ew.csv", EAST_WEST);
    let stages = write(d, "ew_stages.csv", STAGES);
    let out = d.join("st");
    stages_ok(
        &a,
        &out,
        &[
            "--well",
            &format!("ew={}", s(&well)),
            "--stages",
            &format!("ew={}", s(&stages)),
        ],
    );
    let rows = csv_rows(&out.join("stages.csv"));
    for r in rows.iter().filter(|r| r["stage"] != "lateral") {
        assert!(r["flag"].contains("mixed_trends"), "{r:?}");
        let mut axes: Vec<f64> = [&r["trend1_azimuth"], &r["trend2_azimuth"]]
            .iter()
            .map(|v| v.parse().unwrap())
            .collect();
        axes.sort_by(f64::total_cmp);
        assert!(
            (axes[0] - 20.0).abs() < 5.0 && (axes[1] - 100.0).abs() < 5.0,
            "{axes:?}"
        );
    }
}
