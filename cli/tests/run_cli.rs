//! `flexure run`: job files against the library's own demo jobs, the manifest against
//! `sha256sum`, the report in a real browser (headless Chromium), and the run's all-or-nothing
//! outputs.

mod common;

use common::{flexure, tree};
use flexure_cli::demo::{run_demo, DEMO_JOB_FILE};
use flexure_engine::jobs::Silent;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn demo_data() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../demo_horizons")
}

/// The demo job file run once by `flexure run` for the tests of this file.
fn demo_run() -> &'static Path {
    static RUN: OnceLock<tempfile::TempDir> = OnceLock::new();
    RUN.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let job = demo_data().join(DEMO_JOB_FILE);
        let o = flexure(&["run", s(&job), "-o", s(&dir.path().join("out")), "-q"]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        assert!(o.stdout.is_empty(), "-q prints nothing");
        dir
    })
    .path()
}

/// Relative paths of every file under `dir`.
fn files_under(dir: &Path) -> Vec<PathBuf> {
    tree(dir)
        .into_iter()
        .filter(|(_, bytes)| bytes.is_some())
        .map(|(p, _)| p)
        .collect()
}

/// Every band of a raster as f64 bits (exact for the u8, f32 and f64 bands flexure writes),
/// with the geotransform and CRS.
fn raster_content(path: &Path) -> (Vec<Vec<u64>>, [f64; 6], String) {
    let ds = gdal::Dataset::open(path).unwrap();
    let (cols, rows) = ds.raster_size();
    let bands = (1..=ds.raster_count())
        .map(|b| {
            let buf = ds
                .rasterband(b)
                .unwrap()
                .read_as::<f64>((0, 0), (cols, rows), (cols, rows), None)
                .unwrap();
            buf.data().iter().map(|v| v.to_bits()).collect()
        })
        .collect();
    (bands, ds.geo_transform().unwrap(), ds.projection())
}

/// Every feature of every layer of a vector file: its fields and geometry as WKT.
fn vector_content(path: &Path) -> Vec<String> {
    use gdal::vector::LayerAccess;
    let ds = gdal::Dataset::open(path).unwrap();
    let mut out = Vec::new();
    for mut layer in ds.layers() {
        let name = layer.name();
        for feature in layer.features() {
            let fields: Vec<String> = feature
                .fields()
                .map(|(n, v)| format!("{n}={v:?}"))
                .collect();
            let wkt = feature
                .geometry()
                .map(|g| g.wkt().unwrap())
                .unwrap_or_default();
            out.push(format!("{name}: {} {wkt}", fields.join(" ")));
        }
    }
    out
}

/// A JSON output without its provenance (which names the command line and paths).
fn json_without_provenance(path: &Path) -> serde_json::Value {
    let mut v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    strip(&mut v);
    v
}

fn strip(v: &mut serde_json::Value) {
    match v {
        serde_json::Value::Object(map) => {
            map.retain(|k, _| !k.contains("provenance") && !k.starts_with("flexure_"));
            map.values_mut().for_each(strip);
        }
        serde_json::Value::Array(items) => items.iter_mut().for_each(strip),
        _ => {}
    }
}

#[test]
fn the_demo_job_file_reproduces_the_library_demo_bit_for_bit() {
    // Reference: the library's own demo jobs (`run_demo`, built in code, not from the job
    // file). Every output file exists in both; raster values, geotransforms and CRS are
    // bit-identical (GDAL reading both back); tables, pictures and SVG byte-identical; vector
    // features and JSON equal apart from provenance (command line and paths differ by design).
    let dir = tempfile::tempdir().unwrap();
    let library = dir.path().join("library");
    run_demo(&demo_data(), &library, &Silent).unwrap();
    let job = demo_run().join("out");
    let mut from_job = files_under(&job);
    from_job.retain(|p| p != Path::new("manifest.json") && p != Path::new("report.html"));
    assert_eq!(from_job, files_under(&library));
    for rel in &from_job {
        let (a, b) = (job.join(rel), library.join(rel));
        let ext = rel
            .extension()
            .unwrap_or_default()
            .to_string_lossy()
            .to_string();
        match ext.as_str() {
            "tif" => assert!(raster_content(&a) == raster_content(&b), "{rel:?}"),
            "gpkg" | "geojson" => assert_eq!(vector_content(&a), vector_content(&b), "{rel:?}"),
            "json" => assert_eq!(json_without_provenance(&a), json_without_provenance(&b)),
            _ => assert!(
                std::fs::read(&a).unwrap() == std::fs::read(&b).unwrap(),
                "{rel:?}"
            ),
        }
    }
}

#[test]
fn the_manifest_lists_every_output_with_the_checksum_sha256sum_computes() {
    // Reference: GNU coreutils `sha256sum` (FIPS 180-4) on every file the manifest lists; the
    // manifest lists exactly the files in the output folder (itself excepted).
    let out = demo_run().join("out");
    let manifest: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("manifest.json")).unwrap()).unwrap();
    let listed: BTreeMap<String, String> = manifest["outputs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| {
            (
                f["path"].as_str().unwrap().to_string(),
                f["sha256"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    let mut on_disk: Vec<String> = files_under(&out)
        .iter()
        .map(|p| p.to_string_lossy().to_string())
        .collect();
    on_disk.retain(|p| p != "manifest.json");
    assert_eq!(listed.keys().cloned().collect::<Vec<_>>(), on_disk);
    let paths: Vec<&str> = listed.keys().map(String::as_str).collect();
    let o = std::process::Command::new("sha256sum")
        .args(&paths)
        .current_dir(&out)
        .output()
        .unwrap();
    assert!(o.status.success());
    for line in String::from_utf8_lossy(&o.stdout).lines() {
        let (sum, path) = line.split_once("  ").unwrap();
        assert_eq!(listed[path], sum, "{path}");
    }
    let inputs = manifest["inputs"].as_array().unwrap();
    assert!(inputs.len() >= 16, "the demo's horizons, volumes and wells");
    for input in inputs {
        let path = input["path"].as_str().unwrap();
        let o = std::process::Command::new("sha256sum")
            .arg(path)
            .output()
            .unwrap();
        let sum = String::from_utf8_lossy(&o.stdout);
        assert_eq!(
            sum.split_whitespace().next(),
            input["sha256"].as_str(),
            "{path}"
        );
    }
    // The job as resolved: defaults filled (the anisotropy's default least sectors is 4).
    let steps = manifest["steps"].as_array().unwrap();
    let anisotropy = steps.iter().find(|s| s["step"] == "anisotropy").unwrap();
    assert_eq!(anisotropy["options"]["min_sectors"], 4);
    assert!(
        anisotropy["options"]["out"]
            .as_str()
            .unwrap()
            .starts_with('/'),
        "absolute paths"
    );
    assert_eq!(steps.len(), 18);
}

#[test]
fn the_report_loads_in_a_real_browser_with_every_image() {
    // Reference: Chromium (Debian's `chromium`, installed by scripts/install-system-deps.sh
    // --test) loads report.html from disk in a frame of a check page; every <img> must have
    // loaded (complete, natural width > 0) and no console message may come from the report.
    // A screenshot is kept in the target folder for a look.
    let out = demo_run().join("out");
    let report = out.join("report.html");
    let check_dir = tempfile::tempdir().unwrap();
    let check = check_dir.path().join("check.html");
    let url = format!(
        "file://{}",
        std::fs::canonicalize(&report).unwrap().display()
    );
    std::fs::write(
        &check,
        format!(
            r#"<!DOCTYPE html><html><body><pre id="result">pending</pre>
<iframe id="r" src="{url}" style="width:1280px;height:900px"></iframe>
<script>
document.getElementById('r').addEventListener('load', function () {{
  var d = this.contentDocument;
  var images = Array.prototype.slice.call(d.images);
  var broken = images.filter(function (i) {{ return !(i.complete && i.naturalWidth > 0); }})
    .map(function (i) {{ return i.getAttribute('src'); }});
  document.getElementById('result').textContent =
    JSON.stringify({{images: images.length, broken: broken, title: d.title}});
}});
</script></body></html>"#
        ),
    )
    .unwrap();
    let o = chromium(&[
        "--allow-file-access-from-files",
        "--virtual-time-budget=20000",
        "--enable-logging=stderr",
        "--v=0",
        "--dump-dom",
        &format!("file://{}", check.display()),
    ]);
    let dom = String::from_utf8_lossy(&o.stdout);
    let start = dom.find("<pre id=\"result\">").expect("check page dumped") + 17;
    let end = start + dom[start..].find("</pre>").unwrap();
    let result: serde_json::Value = serde_json::from_str(&dom[start..end])
        .unwrap_or_else(|_| panic!("check page result: {}", &dom[start..end]));
    assert!(result["images"].as_u64().unwrap() >= 12, "{result}");
    assert_eq!(result["broken"], serde_json::json!([]), "{result}");
    assert!(result["title"].as_str().unwrap().contains("Tessary"));
    let stderr = String::from_utf8_lossy(&o.stderr);
    let console: Vec<&str> = stderr
        .lines()
        .filter(|l| l.contains("CONSOLE") && l.contains("report.html"))
        .collect();
    assert!(console.is_empty(), "{console:?}");
    let shot = Path::new(env!("CARGO_TARGET_TMPDIR")).join("report_screenshot.png");
    let _ = std::fs::remove_file(&shot);
    chromium(&[
        "--hide-scrollbars",
        "--window-size=1280,2400",
        &format!("--screenshot={}", shot.display()),
        &url,
    ]);
    let png = std::fs::read(&shot).expect("screenshot written");
    assert_eq!(&png[1..4], b"PNG");
}

/// Runs headless Chromium with `args`; fails the test with the set-up hint when it is missing.
fn chromium(args: &[&str]) -> std::process::Output {
    let o = std::process::Command::new("chromium")
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-first-run",
        ])
        .args(args)
        .output()
        .unwrap_or_else(|e| {
            panic!("chromium not found ({e}): run `bash scripts/install-system-deps.sh --test`")
        });
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    o
}

/// Writes `text` as a job file in a folder that also holds (links to) the demo data.
fn job_beside_demo_data(dir: &Path, text: &str) -> PathBuf {
    for entry in std::fs::read_dir(demo_data()).unwrap() {
        let entry = entry.unwrap();
        std::os::unix::fs::symlink(entry.path(), dir.join(entry.file_name())).unwrap();
    }
    let job = dir.join("job.toml");
    std::fs::write(&job, text).unwrap();
    job
}

#[test]
fn every_job_example_in_the_readme_passes_the_check() {
    // Reference: the README itself; each ```toml block starting `# flexure job` is a complete
    // job over the demo data.
    let readme =
        std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("../README.md"))
            .unwrap();
    let blocks: Vec<&str> = readme
        .split("```toml\n")
        .skip(1)
        .map(|b| b.split("```").next().unwrap())
        .filter(|b| b.starts_with("# flexure job"))
        .collect();
    assert!(blocks.len() >= 2, "the README shows job files");
    for block in blocks {
        let dir = tempfile::tempdir().unwrap();
        let job = job_beside_demo_data(dir.path(), block);
        let o = flexure(&["run", s(&job), "--check", "-o", s(&dir.path().join("out"))]);
        assert!(
            o.status.success(),
            "{block}\n{}",
            String::from_utf8_lossy(&o.stderr)
        );
        assert!(!dir.path().join("out").exists(), "--check computes nothing");
    }
}

/// Runs `flexure run` on `text` beside the demo data and returns (exit code, stderr).
fn run_text(dir: &Path, text: &str, extra: &[&str]) -> (Option<i32>, String) {
    let job = job_beside_demo_data(dir, text);
    let mut args = vec!["run", s(&job)];
    args.extend(extra);
    let o = flexure(&args);
    (
        o.status.code(),
        String::from_utf8_lossy(&o.stderr).to_string(),
    )
}

#[test]
fn unknown_keys_and_bad_values_are_refused_naming_the_line() {
    let cases = [
        (
            "output = \"o\"\n[[curvature]]\ninput = \"orrimund_shale_top_depth.tif\"\nout = \"c\"\nwindow = [3]\n",
            "line 5: [[curvature]]: unknown key `window`",
        ),
        ("output = \"o\"\n\n[[curvatur]]\ninput = \"x\"\n", "line 3: unknown key `curvatur`"),
        (
            "output = \"o\"\n[[curvature]]\ninput = \"orrimund_shale_top_depth.tif\"\nout = \"c\"\nwindows = \"x\"\n",
            "[[curvature]]",
        ),
        ("output = \"o\"\n[[render]]\nband = \"k_pos\"\n", "required"),
        ("output = \"o\"\n[[curvature]\n", "line 2: not valid TOML"),
        (
            "output = \"o\"\n[[curvature]]\ninput = \"missing.tif\"\nout = \"c\"\n",
            "missing.tif",
        ),
        (
            "output = \"o\"\n[[curvature]]\ninput = \"orrimund_shale_top_depth.tif\"\nout = \"c\\\\w\"\n",
            "holds a backslash",
        ),
        (
            "output = \"o\"\n[[curvature]]\ninput = \"orrimund_shale_top_depth.tif\"\nout = \"../escape\"\n",
            "leaves the run's output folder",
        ),
        (
            "output = \"o\"\n[[render]]\nattribute = \"{output}/nostep/x.tif\"\nout = \"m.tif\"\n",
            "no earlier step writes this",
        ),
        (
            "output = \"o\"\n[[render]]\nattribute = \"orrimund_shale_top_depth.tif\"\nout = \"m.tif\"\n[[render]]\nattribute = \"orrimund_shale_top_depth.tif\"\nout = \"m.tif\"\n",
            "step render (line 2) writes this file too",
        ),
        (
            "output = \"o\"\n[[curvature]]\ninput = \"orrimund_shale_top_depth.tif\"\n",
            "not provided: `out`",
        ),
    ];
    for (text, expected) in cases {
        let dir = tempfile::tempdir().unwrap();
        let (code, stderr) = run_text(dir.path(), text, &["--check"]);
        assert_eq!(code, Some(1), "{text}: {stderr}");
        assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
        assert!(stderr.starts_with("flexure: error: "), "{stderr}");
        assert!(stderr.contains(expected), "{text}\n{stderr}");
        assert!(stderr.contains("job.toml"), "names the job file: {stderr}");
    }
    // A bare coordinate pair for a one-well option is one value, as on the command line.
    let dir = tempfile::tempdir().unwrap();
    let text = "output = \"o\"\n[[stages]]\nanisotropy = \"kelvane_marl_sectors.tif\"\nwell = [\"tessary_3h.csv\"]\nstages = [\"tessary_3h_stages.csv\"]\nwellhead = [480900, 3902600]\nout = \"s\"\n";
    let (code, stderr) = run_text(dir.path(), text, &["--check"]);
    assert_eq!(code, Some(0), "{stderr}");
}

#[test]
fn a_run_failing_at_its_last_step_leaves_the_output_folder_as_it_was() {
    // All-or-nothing runs: the curvature step succeeds and commits, the render step fails
    // (no such band); the folder, holding a previous run's file, must be byte-identical after.
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let curvature = "output = \"out\"\n[[curvature]]\ninput = \"orrimund_shale_top_depth.tif\"\nwindows = [3]\nout = \"curvature\"\n";
    let (code, stderr) = run_text(dir.path(), &format!("{curvature}min_valid = 0.9\n"), &[]);
    assert_eq!(code, Some(0), "{stderr}");
    let before = tree(&out);
    let text = format!("{curvature}\n[[render]]\nattribute = \"{{output}}/curvature/orrimund_shale_top_depth_w03.tif\"\nband = \"no_such_band\"\nout = \"maps/x.tif\"\n");
    std::fs::remove_file(dir.path().join("job.toml")).unwrap();
    for entry in std::fs::read_dir(dir.path()).unwrap() {
        let p = entry.unwrap().path();
        if p.is_symlink() {
            std::fs::remove_file(p).unwrap();
        }
    }
    let (code, stderr) = run_text(dir.path(), &text, &[]);
    assert_eq!(code, Some(1), "{stderr}");
    assert!(stderr.contains("step render (line 7)"), "{stderr}");
    assert_eq!(tree(&out), before);
}

#[test]
fn usage_errors_exit_2_and_run_errors_exit_1_on_one_line() {
    // Common practice for command-line tools (and clap's default): usage errors exit 2.
    for (args, code) in [
        (vec!["curvature"], 2),
        (vec!["curvature", "x.tif", "-o", "o", "--windows", "3,x"], 2),
        (vec!["no-such-command"], 2),
        (
            vec!["curvature", "/no/such/file.tif", "-o", "/tmp/flexure-none"],
            1,
        ),
    ] {
        let o = flexure(&args);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(code), "{args:?}: {stderr}");
        assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
        assert!(stderr.starts_with("flexure: error: "), "{stderr}");
    }
}

#[test]
fn lists_accept_spaces_after_commas_and_short_flags() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let horizon = demo_data().join("orrimund_shale_top_depth.tif");
    let o = flexure(&["curvature", s(&horizon), "-o", s(&out), "-w", "3, 5", "-q"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.stdout.is_empty());
    for w in ["03", "05"] {
        assert!(out
            .join(format!("orrimund_shale_top_depth_w{w}.tif"))
            .is_file());
    }
}
