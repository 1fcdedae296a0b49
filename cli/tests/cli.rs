//! The `flexure` executable end to end: the curvature command on good input, and every kind of
//! bad input named in the curvature issue getting one clear line on stderr, a non-zero exit, no
//! panic and no output file.

mod common;

use common::{band_bits, fails, flexure, north_up, outputs_in, write_bands};
use gdal::spatial_ref::SpatialRef;
use ndarray::Array2;
use std::path::{Path, PathBuf};

fn write(dir: &Path, name: &str, values: Array2<f32>, epsg: u32) -> PathBuf {
    let mut g = north_up(values.ncols(), values.nrows());
    if epsg != 32625 {
        g.crs_wkt = SpatialRef::from_epsg(epsg).unwrap().to_wkt().unwrap();
        g.geo_transform = [10.0, 0.001, 0.0, 50.0, 0.0, -0.001];
    }
    write_bands(dir, name, &g, vec![values])
}

fn bowl(cols: usize, rows: usize) -> Array2<f32> {
    Array2::from_shape_fn((rows, cols), |(r, c)| {
        2000.0 + ((r as f32 - 10.0).powi(2) + (c as f32 - 12.0).powi(2)) * 0.5
    })
}

#[test]
fn curvature_writes_one_file_per_window_and_a_summary() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "h.tif", bowl(30, 25), 32625);
    let out = dir.path().join("out");
    let o = flexure(&[
        "curvature",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--windows",
        "3,5",
        "--attributes",
        "k_mean,dip",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        stdout.contains("window   3") && stdout.contains("k_mean") && stdout.contains("Caution"),
        "{stdout}"
    );
    let mut files = outputs_in(&out);
    files.sort();
    assert_eq!(files, vec!["h_w03.tif", "h_w05.tif"]);
    // The same bands again: a plain re-run replaces the file.
    let quiet = flexure(&[
        "curvature",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--windows",
        "3",
        "--attributes",
        "k_mean,dip",
        "--quiet",
    ]);
    assert!(quiet.status.success() && quiet.stdout.is_empty());
    // Other bands into the same folder would silently replace a file: refused, nothing
    // changes, until --overwrite is given.
    let before = std::fs::read(out.join("h_w03.tif")).unwrap();
    let args = [
        "curvature",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--windows",
        "3",
        "--attributes",
        "k_pos",
    ];
    let o = flexure(&args);
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(
        err.contains("k_mean,dip") && err.contains("k_pos") && err.contains("--overwrite"),
        "{err}"
    );
    assert_eq!(std::fs::read(out.join("h_w03.tif")).unwrap(), before);
    let o = flexure(&[&args[..], &["--overwrite", "--quiet"]].concat());
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let bands = flexure_engine::io::read_info(&out.join("h_w03.tif"))
        .unwrap()
        .names;
    assert_eq!(bands, vec!["k_pos"]);
}

#[test]
fn bad_inputs_fail_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let good = write(d, "good.tif", bowl(30, 25), 32625);
    let tiny = write(d, "tiny.tif", bowl(4, 4), 32625);
    let nulls = write(d, "nulls.tif", Array2::from_elem((20, 20), f32::NAN), 32625);
    let geographic = write(d, "geo.tif", bowl(30, 25), 4326);
    let other_grid = write(d, "vel.tif", Array2::from_elem((10, 10), 3000.0), 32625);
    let clash = write(
        d,
        "good_w03.tif",
        Array2::from_elem((25, 30), 3000.0),
        32625,
    );
    let corrupt = d.join("corrupt.tif");
    std::fs::write(&corrupt, b"II*\0 this is not a tiff").unwrap();
    let blocker = d.join("a_file");
    std::fs::write(&blocker, b"").unwrap();
    let out = d.join("out");
    let (g, o) = (good.to_str().unwrap(), out.to_str().unwrap());
    let blocked = blocker.join("sub");
    let cases: Vec<(Vec<&str>, &str)> = vec![
        (vec!["curvature", "missing.tif", "--out", o], "missing.tif"),
        (
            vec!["curvature", corrupt.to_str().unwrap(), "--out", o],
            "corrupt.tif",
        ),
        (
            vec!["curvature", nulls.to_str().unwrap(), "--out", o],
            "every cell is null",
        ),
        (
            vec![
                "curvature",
                tiny.to_str().unwrap(),
                "--out",
                o,
                "--windows",
                "5",
            ],
            "larger than the grid",
        ),
        (vec!["curvature", g, "--out", o, "--windows", "4"], "odd"),
        (vec!["curvature", g, "--out", o, "--windows", "103"], "odd"),
        (
            vec!["curvature", geographic.to_str().unwrap(), "--out", o],
            "geographic",
        ),
        (
            vec!["curvature", g, "--out", o, "--domain", "time"],
            "--velocity",
        ),
        (
            vec![
                "curvature",
                g,
                "--out",
                o,
                "--domain",
                "time",
                "--velocity-grid",
                other_grid.to_str().unwrap(),
            ],
            "velocity grid",
        ),
        (
            vec![
                "curvature",
                g,
                "--out",
                o,
                "--attributes",
                "k_mean,k_wobble",
            ],
            "k_wobble",
        ),
        (
            vec!["curvature", g, "--out", blocked.to_str().unwrap()],
            "writable",
        ),
        (
            vec![
                "curvature",
                g,
                "--out",
                d.to_str().unwrap(),
                "--windows",
                "3",
                "--domain",
                "time",
                "--velocity-grid",
                clash.to_str().unwrap(),
            ],
            "overwrite",
        ),
        (
            vec!["curvature", g, "--out", o, "--min-valid", "1.5"],
            "min-valid",
        ),
    ];
    for (args, expect) in cases {
        let target = if args.contains(&d.to_str().unwrap()) {
            d.join("none")
        } else {
            out.clone()
        };
        let msg = fails(&args, &target);
        assert!(
            msg.contains(expect),
            "{args:?}: expected '{expect}' in {msg}"
        );
        assert!(!target.exists(), "{args:?}: the output folder was left");
    }
    // The clashing velocity grid is untouched.
    assert!(clash.is_file());
}

#[test]
fn xyz_text_grid_is_read_with_an_assigned_crs() {
    // GDAL's XYZ driver (gdal.org, "XYZ -- ASCII Gridded XYZ"): one "x y z" line per cell,
    // rows in order, equal spacing. It carries no CRS, so --crs supplies it.
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("pick.xyz");
    let mut text = String::new();
    for r in 0..20 {
        for c in 0..24 {
            let (x, y) = (500_012.5 + 25.0 * c as f64, 3_900_487.5 - 25.0 * r as f64);
            let z = 2000.0 + 0.001 * ((x - 500_300.0).powi(2) + (y - 3_900_250.0).powi(2));
            text += &format!("{x} {y} {z}\n");
        }
    }
    std::fs::write(&path, text).unwrap();
    let out = dir.path().join("out");
    let (p, o) = (path.to_str().unwrap(), out.to_str().unwrap());
    let msg = fails(&["curvature", p, "--out", o, "--windows", "3"], &out);
    assert!(msg.contains("--crs"), "{msg}");
    let ok = flexure(&[
        "curvature",
        p,
        "--out",
        o,
        "--windows",
        "3",
        "--crs",
        "EPSG:32625",
        "--quiet",
    ]);
    assert!(
        ok.status.success(),
        "{}",
        String::from_utf8_lossy(&ok.stderr)
    );
    assert_eq!(outputs_in(&out), vec!["pick_w03.tif"]);
}

/// Runs `gdalinfo -json` (GDAL's own reader) on `path`.
fn gdalinfo(path: &Path) -> serde_json::Value {
    let o = std::process::Command::new("gdalinfo")
        .args(["-json", path.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).unwrap()
}

#[test]
fn compression_and_cloud_optimized_layout_keep_every_value() {
    // gdalinfo reports the compression, interleaving and COG layout GDAL finds in the file
    // (IMAGE_STRUCTURE metadata); the values must read back bit for bit whatever the layout
    // (lossless compression).
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "h.tif", bowl(600, 300), 32625);
    let run = |name: &str, extra: &[&str]| {
        let out = dir.path().join(name);
        let mut args = vec![
            "curvature",
            input.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--windows",
            "5",
            "--quiet",
        ];
        args.extend(extra);
        let o = flexure(&args);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        out.join("h_w05.tif")
    };
    let zstd = run("zstd", &[]);
    let deflate = run("deflate", &["--compress", "deflate"]);
    let plain = run("none", &["--compress", "none", "--memory", "64M"]);
    let cog = run("cog", &["--cog"]);
    let structure = |p: &Path| gdalinfo(p)["metadata"]["IMAGE_STRUCTURE"].clone();
    assert_eq!(structure(&zstd)["COMPRESSION"], "ZSTD");
    assert_eq!(structure(&zstd)["INTERLEAVE"], "BAND");
    assert_eq!(structure(&deflate)["COMPRESSION"], "DEFLATE");
    assert!(structure(&plain).get("COMPRESSION").is_none());
    assert_eq!(structure(&cog)["LAYOUT"], "COG");
    assert_eq!(structure(&cog)["COMPRESSION"], "ZSTD");
    let info = gdalinfo(&cog);
    assert!(
        info["bands"][0]["overviews"]
            .as_array()
            .is_some_and(|o| !o.is_empty()),
        "a 600 x 300 COG has overviews"
    );
    assert_eq!(info["metadata"][""]["FLEXURE_WINDOW_CELLS"], "5");
    let reference = band_bits(&zstd);
    for other in [&deflate, &plain, &cog] {
        assert!(band_bits(other) == reference, "{}", other.display());
    }
    // An unknown compression is refused naming the choices, before anything is written.
    let out = dir.path().join("bad");
    let o = flexure(&[
        "curvature",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--compress",
        "lzw",
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(
        !o.status.success() && stderr.contains("deflate"),
        "{stderr}"
    );
    assert!(!out.exists());
}

#[test]
fn an_interrupted_job_leaves_no_temporary_file() {
    // SIGINT sent with kill(1) (POSIX) once the job has begun writing its outputs: the run ends
    // with 130 (128 + SIGINT, the shell's convention; common practice) and takes its hidden
    // temporary files and the output folder it created with it.
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "h.tif", bowl(1500, 1500), 32625);
    let out = dir.path().join("out");
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_flexure"))
        .args(["curvature", input.to_str().unwrap(), "--out"])
        .arg(&out)
        .args(["--windows", "3,5,9,17,33", "--quiet"])
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let started = std::time::Instant::now();
    while !outputs_in(&out).iter().any(|f| f.contains(".partial-")) {
        assert!(
            child.try_wait().unwrap().is_none(),
            "the job ended before it could be interrupted: make the grid larger"
        );
        assert!(
            started.elapsed().as_secs() < 120,
            "no temporary file appeared"
        );
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    let kill = std::process::Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(kill.success());
    let output = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert_eq!(output.status.code(), Some(130), "{stderr}");
    assert!(stderr.contains("interrupted"), "{stderr}");
    assert!(!out.exists(), "left: {:?}", outputs_in(&out));
}

#[test]
fn a_folder_in_an_outputs_place_is_named() {
    // A folder with an output's file name is refused in one line that says so, and the output
    // folder keeps only what it held (rename(2) cannot replace a non-empty folder with a file,
    // POSIX; naming the cause is common practice).
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "h.tif", bowl(30, 25), 32625);
    let out = dir.path().join("out");
    std::fs::create_dir_all(out.join("h_w03.tif")).unwrap();
    let o = flexure(&[
        "curvature",
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--windows",
        "3,5",
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{stderr}");
    assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
    assert!(
        stderr.contains("is a folder where this output goes"),
        "{stderr}"
    );
    assert_eq!(outputs_in(&out), vec!["h_w03.tif"]);
}
