//! What the curvature job writes, checked by GDAL reading it back (`gdalinfo -json` from
//! gdal-bin and the gdal crate), bit-identical results for 1 and 2 threads, and the shipped demo
//! data matching its generator.

use flexure_engine::curvature::ATTRIBUTES;
use flexure_engine::demo::{demo_horizons, survey_geometry, write_demo_data};
use flexure_engine::io::{read_grid, write_float_geotiff, BandOut};
use flexure_engine::jobs::{CurvatureJob, Silent};
use flexure_engine::synthetic::{Shape, Surface};
use gdal::Dataset;
use std::path::{Path, PathBuf};
use std::process::Command;

/// A sphere-dome depth horizon (R = 2000 m) on a rotated survey grid, written as GeoTIFF.
fn write_input(dir: &Path) -> PathBuf {
    let g = survey_geometry((500_000.0, 3_900_000.0), 120.0, (20.0, 10.0), (90, 140));
    let centre = g.cell_centre(45, 70);
    let surface = Surface {
        datum: 0.0,
        shapes: vec![Shape::SphereDome {
            centre,
            radius: 2000.0,
            apex: 1500.0,
        }],
    };
    let mut values = surface.sample(&g).mapv(|v| v as f32);
    values[(10, 10)] = f32::NAN;
    let path = dir.join("dome.tif");
    write_float_geotiff(
        &path,
        &g,
        &[BandOut {
            description: "depth",
            unit: "m",
            values,
        }],
        &[],
    )
    .unwrap();
    path
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

fn band_bits(path: &Path) -> Vec<Vec<u32>> {
    let ds = Dataset::open(path).unwrap();
    let (cols, rows) = ds.raster_size();
    (1..=ds.raster_count())
        .map(|b| {
            let buf = ds
                .rasterband(b)
                .unwrap()
                .read_as::<f32>((0, 0), (cols, rows), (cols, rows), None)
                .unwrap();
            buf.data().iter().map(|v| v.to_bits()).collect()
        })
        .collect()
}

#[test]
fn gdal_reads_back_georeference_bands_and_values() {
    let dir = tempfile::tempdir().unwrap();
    let input = write_input(dir.path());
    let out = dir.path().join("out");
    let report = CurvatureJob::new(&input, &out, vec![5, 3])
        .run(&Silent)
        .unwrap();
    assert_eq!(
        report.windows.iter().map(|w| w.window).collect::<Vec<_>>(),
        vec![3, 5]
    );
    let info_in = gdalinfo(&input);
    for n in [3, 5] {
        let path = out.join(format!("dome_w{n:02}.tif"));
        let info = gdalinfo(&path);
        assert_eq!(info["geoTransform"], info_in["geoTransform"]);
        assert_eq!(
            info["coordinateSystem"]["wkt"],
            info_in["coordinateSystem"]["wkt"]
        );
        assert!(info["coordinateSystem"]["wkt"]
            .as_str()
            .unwrap()
            .contains("32625"));
        let bands = info["bands"].as_array().unwrap();
        assert_eq!(bands.len(), ATTRIBUTES.len());
        for (band, attr) in bands.iter().zip(ATTRIBUTES.iter()) {
            assert_eq!(band["description"], attr.id);
            assert_eq!(band["unit"], attr.unit);
            assert_eq!(band["noDataValue"].as_f64(), Some(-99999.0));
            assert_eq!(band["type"], "Float32");
            assert_eq!(band["block"], serde_json::json!([256, 256]));
        }
        let structure = &info["metadata"]["IMAGE_STRUCTURE"];
        assert_eq!(structure["COMPRESSION"], "DEFLATE");
        assert_eq!(structure["PREDICTOR"], "3");
        assert_eq!(info["metadata"][""]["FLEXURE_WINDOW_CELLS"], n.to_string());
    }
    // Values: the sphere's apex has k_mean = 1/R = 0.5 /km (REFERENCES.md section 4), within
    // the window's discretisation error; the input's null cell is null in the output.
    let k_mean = &band_bits(&out.join("dome_w03.tif"))[0];
    let at = |row: usize, col: usize| f32::from_bits(k_mean[row * 90 + col]);
    assert!((at(70, 45) - 0.5).abs() < 5e-4, "{}", at(70, 45));
    assert_eq!(at(10, 10), -99999.0);
    // The input reads back as the dome it was written as.
    assert!(read_grid(&input, None).unwrap().values[(10, 10)].is_nan());
    // Only final names are left in the folder.
    let names: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .collect();
    assert!(names.iter().all(|n| !n.starts_with('.')), "{names:?}");
}

#[test]
fn results_do_not_depend_on_thread_count() {
    let dir = tempfile::tempdir().unwrap();
    let input = write_input(dir.path());
    let run = |threads: usize| {
        let out = dir.path().join(format!("t{threads}"));
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            CurvatureJob::new(&input, &out, vec![3, 9])
                .run(&Silent)
                .unwrap()
        });
        out
    };
    let (one, two) = (run(1), run(2));
    for name in ["dome_w03.tif", "dome_w09.tif"] {
        assert_eq!(
            band_bits(&one.join(name)),
            band_bits(&two.join(name)),
            "{name}"
        );
    }
}

#[test]
fn shipped_demo_data_matches_its_generator() {
    let dir = tempfile::tempdir().unwrap();
    write_demo_data(dir.path()).unwrap();
    let shipped = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo_horizons");
    for h in demo_horizons() {
        assert_eq!(
            band_bits(&dir.path().join(h.file)),
            band_bits(&shipped.join(h.file)),
            "{}: run `make demo-data`",
            h.file
        );
    }
}
