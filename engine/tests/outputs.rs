//! What the curvature, anisotropy and render jobs write, checked by GDAL reading it back (`gdalinfo
//! -json` and `ogrinfo` from gdal-bin, and the gdal crate), and bit-identical results for 1 and
//! 2 threads. (The shipped demo data is checked against its generator in `cli/tests/`.)

use flexure_engine::anisotropy::FIT_BANDS;
use flexure_engine::grid::GridGeometry;
use flexure_engine::io::{read_grid, read_raster, write_float_geotiff, BandOut};
use flexure_engine::jobs::{AnisotropyJob, CurvatureJob, Silent};
use flexure_engine::surface::curvature::ATTRIBUTES;
use flexure_engine::synthetic::{Shape, Surface};
use gdal::vector::LayerAccess;
use gdal::Dataset;
use std::path::{Path, PathBuf};
use std::process::Command;

/// A survey grid ([`GridGeometry::survey`]) in WGS 84 / UTM zone 25N (EPSG:32625).
fn survey_geometry(
    origin: (f64, f64),
    column_azimuth: f64,
    bins: (f64, f64),
    size: (usize, usize),
) -> GridGeometry {
    let crs = gdal::spatial_ref::SpatialRef::from_epsg(32625).unwrap();
    GridGeometry::survey(origin, column_azimuth, bins, size, crs.to_wkt().unwrap())
}

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

/// Every band of a raster as `T`, row-major.
fn read_bands_as<T: gdal::raster::GdalType + Copy>(path: &Path) -> Vec<Vec<T>> {
    let ds = Dataset::open(path).unwrap();
    let (cols, rows) = ds.raster_size();
    (1..=ds.raster_count())
        .map(|b| {
            let buf = ds
                .rasterband(b)
                .unwrap()
                .read_as::<T>((0, 0), (cols, rows), (cols, rows), None)
                .unwrap();
            buf.data().to_vec()
        })
        .collect()
}

fn band_bits(path: &Path) -> Vec<Vec<u32>> {
    read_bands_as::<f32>(path)
        .into_iter()
        .map(|b| b.iter().map(|v| v.to_bits()).collect())
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
        // Band-interleaved ZSTD with the floating-point predictor, as GDAL reports it.
        assert_eq!(structure["COMPRESSION"], "ZSTD");
        assert_eq!(structure["INTERLEAVE"], "BAND");
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
    assert!(read_grid(&input, &Default::default()).unwrap().values[(10, 10)].is_nan());
    // Only final names are left in the folder.
    let names: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .collect();
    assert!(names.iter().all(|n| !n.starts_with('.')), "{names:?}");
}

/// Runs `f` on a rayon pool of `threads` threads.
fn with_threads<T: Send>(threads: usize, f: impl FnOnce() -> T + Send) -> T {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap()
        .install(f)
}

#[test]
fn results_do_not_depend_on_thread_count() {
    let dir = tempfile::tempdir().unwrap();
    let input = write_input(dir.path());
    let run = |threads: usize| {
        let out = dir.path().join(format!("t{threads}"));
        with_threads(threads, || {
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

/// Symmetry-axis azimuth (slow direction) of the synthetic HTI field at map point (x, y).
fn hti_beta(x: f64, y: f64) -> f64 {
    (20.0 + 0.02 * (x - 500_000.0) + 0.01 * (y - 3_900_000.0)).rem_euclid(180.0)
}

/// Eight sector grids (one file each) of P-wave NMO times over a weakly anisotropic HTI
/// medium on a rotated grid: Vnmo^2(phi) = V^2 (1 + 2 delta cos^2(phi - beta)), delta < 0
/// (Tsvankin 1997, Geophysics 62:614; Grechka & Tsvankin 1998, Geophysics 63:1079),
/// t = sqrt(t0^2 + x^2 / Vnmo^2) in ms for offset 3000 m, t0 1500 ms, V 3000 m/s.
fn write_hti_sectors(dir: &Path) -> (Vec<PathBuf>, Vec<f64>) {
    let g = survey_geometry((500_000.0, 3_900_000.0), 60.0, (50.0, 25.0), (40, 30));
    let (t0, offset, v, delta) = (1.5f64, 3000.0f64, 3000.0f64, -0.05f64);
    let azimuths: Vec<f64> = (0..8).map(|k| 22.5 * k as f64).collect();
    let paths = azimuths
        .iter()
        .map(|&phi| {
            let values = ndarray::Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
                let (x, y) = g.cell_centre(c, r);
                let alpha = (phi - hti_beta(x, y)).to_radians();
                let vn2 = v * v * (1.0 + 2.0 * delta * alpha.cos().powi(2));
                (1000.0 * (t0 * t0 + offset * offset / vn2).sqrt()) as f32
            });
            let path = dir.join(format!("sector_{phi:05.1}.tif"));
            let band = BandOut {
                description: "twt",
                unit: "ms",
                values,
            };
            write_float_geotiff(&path, &g, &[band], &[]).unwrap();
            path
        })
        .collect();
    (paths, azimuths)
}

/// "Feature Count: N" from `ogrinfo -so -al`.
fn ogr_feature_count(path: &Path) -> u64 {
    let out = Command::new("ogrinfo")
        .args(["-so", "-al"])
        .arg(path)
        .output()
        .expect("ogrinfo from gdal-bin");
    assert!(out.status.success(), "ogrinfo failed on {}", path.display());
    let text = String::from_utf8_lossy(&out.stdout);
    text.lines()
        .find_map(|l| l.strip_prefix("Feature Count: "))
        .and_then(|n| n.trim().parse().ok())
        .unwrap_or_else(|| panic!("no feature count in ogrinfo output: {text}"))
}

#[test]
fn anisotropy_outputs_read_back_with_gdal_and_ogr() {
    let dir = tempfile::tempdir().unwrap();
    let (sectors, azimuths) = write_hti_sectors(dir.path());
    let out = dir.path().join("out");
    let mut job = AnisotropyJob::new(sectors, azimuths, &out);
    job.every = 2;
    let report = job.run().unwrap();
    let info = gdalinfo(&job.raster_path());
    let descriptions: Vec<&str> = info["bands"]
        .as_array()
        .unwrap()
        .iter()
        .map(|b| b["description"].as_str().unwrap())
        .collect();
    let ids: Vec<&str> = FIT_BANDS.iter().map(|b| b.id).collect();
    assert_eq!(descriptions, ids);
    // The slow azimuth follows beta (float32 storage: 1e-3 degrees).
    let flexure_engine::io::Raster {
        geometry: g, bands, ..
    } = read_raster(&job.raster_path(), &Default::default()).unwrap();
    let slow = &bands[2];
    for r in 0..g.rows {
        for c in 0..g.cols {
            let (x, y) = g.cell_centre(c, r);
            let off = (slow[(r, c)] - hti_beta(x, y) + 90.0).rem_euclid(180.0) - 90.0;
            assert!(
                off.abs() < 1e-3,
                "bin ({c},{r}): slow {} vs beta",
                slow[(r, c)]
            );
        }
    }
    // Both vector files are read by ogrinfo and hold one vector per kept bin: every second bin
    // of 40 x 30 (exact times: SNR is very high).
    for p in &report.vector_files {
        assert_eq!(ogr_feature_count(p), 20 * 15, "{}", p.display());
    }
    assert_eq!(report.vectors, 300);
    // GeoPackage vectors lie along the fast azimuth, in the grid CRS.
    let ds = Dataset::open(&report.vector_files[0]).unwrap();
    let mut layer = ds.layer(0).unwrap();
    let fast_index = layer.defn().field_index("azimuth_fast").unwrap();
    for feature in layer.features() {
        let line = feature.geometry().unwrap();
        let (a, b) = (line.get_point(0), line.get_point(1));
        let drawn = (b.0 - a.0).atan2(b.1 - a.1).to_degrees().rem_euclid(180.0);
        let fast = feature.field_as_double(fast_index).unwrap().unwrap();
        let off = (drawn - fast + 90.0).rem_euclid(180.0) - 90.0;
        assert!(off.abs() < 1e-6, "drawn {drawn} vs fast {fast}");
    }
}

#[test]
fn anisotropy_does_not_depend_on_thread_count() {
    let dir = tempfile::tempdir().unwrap();
    let (sectors, azimuths) = write_hti_sectors(dir.path());
    let run = |threads: usize| {
        let out = dir.path().join(format!("t{threads}"));
        let job = AnisotropyJob::new(sectors.clone(), azimuths.clone(), &out);
        with_threads(threads, || job.run().unwrap());
        job.raster_path()
    };
    assert_eq!(band_bits(&run(1)), band_bits(&run(2)));
}

/// A north-up EPSG:32625 grid of `cell` m bins.
fn north_up(cols: usize, rows: usize, cell: f64) -> GridGeometry {
    survey_geometry((500_000.0, 3_900_000.0), 90.0, (cell, cell), (cols, rows))
}

fn write_f32(
    path: &Path,
    g: &flexure_engine::grid::GridGeometry,
    bands: Vec<(&str, ndarray::Array2<f32>)>,
) {
    let bands: Vec<BandOut> = bands
        .into_iter()
        .map(|(description, values)| BandOut {
            description,
            unit: "1/km",
            values,
        })
        .collect();
    write_float_geotiff(path, g, &bands, &[]).unwrap();
}

#[test]
fn rendered_map_covers_the_attribute_grid_at_whole_pixels_per_cell_with_published_colours() {
    // ColorBrewer RdBu (colorbrewer2.org, 11 classes; from memory): zero is the centre colour
    // #f7f7f7, values beyond the positive clip the red end #67001f, beyond the negative clip
    // the blue end #053061. The map raster covers the rotated attribute grid exactly: read
    // back by GDAL, its origin is the grid's and its four pixel terms the grid's divided by K
    // (the geotransform of a grid subdivided K times; elementary geometry).
    let dir = tempfile::tempdir().unwrap();
    let g = survey_geometry((500_000.0, 3_900_000.0), 115.0, (25.0, 12.5), (30, 20));
    let mut values = ndarray::Array2::from_shape_fn((20, 30), |(r, c)| {
        (c as f32 - 15.0) * 0.01 + r as f32 * 0.0
    });
    values[(3, 4)] = f32::NAN;
    // Far beyond the robust clip at the 98th percentile of |value|.
    values[(0, 0)] = 10.0;
    values[(0, 1)] = -10.0;
    let attribute = dir.path().join("attr.tif");
    write_f32(
        &attribute,
        &g,
        vec![("k_mean", values.clone()), ("k_pos", values)],
    );
    for given in [None, Some(3)] {
        let out = dir.path().join("map.tif");
        let mut job = flexure_engine::jobs::RenderJob::new(&attribute, &out);
        job.band = Some("k_pos".into());
        job.png = Some(dir.path().join("map.png"));
        job.pixels_per_cell = given;
        let report = job.run().unwrap();
        // Default: round(2000 / 30) = 67, clamped to 8 pixels per cell.
        let k = given.unwrap_or(8);
        assert_eq!(report.pixels_per_cell, k);
        let info = gdalinfo(&out);
        let gt: Vec<f64> = info["geoTransform"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let a = g.geo_transform;
        let kf = k as f64;
        let expected = [a[0], a[1] / kf, a[2] / kf, a[3], a[4] / kf, a[5] / kf];
        for (got, want) in gt.iter().zip(expected) {
            assert!(
                (got - want).abs() <= 1e-9 * want.abs().max(1.0),
                "{gt:?} vs {expected:?}"
            );
        }
        assert_eq!(info["size"], serde_json::json!([30 * k, 20 * k]));
        assert!(info["coordinateSystem"]["wkt"]
            .as_str()
            .unwrap()
            .contains("UTM zone 25N"));
        let interp: Vec<&str> = info["bands"]
            .as_array()
            .unwrap()
            .iter()
            .map(|b| b["colorInterpretation"].as_str().unwrap())
            .collect();
        assert_eq!(interp, ["Red", "Green", "Blue", "Alpha"]);
        assert_eq!(
            info["metadata"][""]["FLEXURE_PIXELS_PER_CELL"],
            serde_json::json!(k.to_string())
        );
        let rgba = read_bands_as::<u8>(&out);
        // Every pixel of a cell has the cell's colour.
        let at = |r: usize, c: usize| {
            let pixels: Vec<[u8; 4]> = (0..k * k)
                .map(|i| {
                    let p = (r * k + i / k) * 30 * k + c * k + i % k;
                    [rgba[0][p], rgba[1][p], rgba[2][p], rgba[3][p]]
                })
                .collect();
            assert!(pixels.iter().all(|p| *p == pixels[0]), "cell ({r}, {c})");
            pixels[0]
        };
        assert_eq!(at(3, 4)[3], 0, "null cell is transparent");
        assert_eq!(
            at(5, 15),
            [0xf7, 0xf7, 0xf7, 255],
            "zero is the centre colour"
        );
        assert_eq!(
            at(0, 0),
            [0x67, 0x00, 0x1f, 255],
            "beyond +clip is the red end"
        );
        assert_eq!(
            at(0, 1),
            [0x05, 0x30, 0x61, 255],
            "beyond -clip is the blue end"
        );
        // The PNG decodes (GDAL's PNG driver reads it).
        let png = Dataset::open(dir.path().join("map.png")).unwrap();
        assert_eq!(png.raster_count(), 4);
    }
}

#[test]
fn vectors_change_a_few_pixels_along_the_given_azimuth() {
    // A uniform synthetic anisotropy field (fast azimuth 30 degrees) over a uniform attribute:
    // the pixels the vectors change must be few and spread along 30 degrees from north
    // (principal axis of their offsets from the vector centres; elementary geometry).
    let dir = tempfile::tempdir().unwrap();
    let (cols, rows) = (200, 160);
    let g = north_up(cols, rows, 10.0);
    let attribute = dir.path().join("flat.tif");
    write_f32(
        &attribute,
        &g,
        vec![("k_pos", ndarray::Array2::zeros((rows, cols)))],
    );
    let fill = |v: f32| ndarray::Array2::from_elem((rows, cols), v);
    let aniso = dir.path().join("anisotropy.tif");
    let bands: Vec<(&str, ndarray::Array2<f32>)> = FIT_BANDS
        .iter()
        .map(|b| {
            let v = match b.id {
                "magnitude" | "magnitude_unbiased" => 3.0,
                "azimuth_fast" => 30.0,
                "azimuth_slow" => 120.0,
                "magnitude_stderr" => 0.1,
                _ => 1.0,
            };
            (b.id, fill(v))
        })
        .collect();
    write_f32(&aniso, &g, bands);
    let plain = dir.path().join("plain.tif");
    flexure_engine::jobs::RenderJob::new(&attribute, &plain)
        .run()
        .unwrap();
    let drawn = dir.path().join("drawn.tif");
    let mut job = flexure_engine::jobs::RenderJob::new(&attribute, &drawn);
    job.anisotropy = Some(aniso);
    job.every = Some(20);
    let report = job.run().unwrap();
    assert_eq!(report.vectors.unwrap().0, 10 * 8);
    // Default pixels per cell: round(2000 / 200) = 10, clamped to 8.
    let k = report.pixels_per_cell;
    assert_eq!(k, 8);
    let (width, height) = (cols * k, rows * k);
    let (a, b) = (read_bands_as::<u8>(&plain), read_bands_as::<u8>(&drawn));
    let changed: Vec<(usize, usize)> = (0..width * height)
        .filter(|&i| (0..3).any(|band| a[band][i] != b[band][i]))
        .map(|i| (i / width, i % width))
        .collect();
    // Thin lines with a thin halo: the colours stay readable between them.
    let share = changed.len() as f64 / (width * height) as f64;
    assert!(share > 0.002 && share < 0.35, "changed share {share}");
    // Offsets from the nearest vector centre (cell centres 10 + 20 n + 0.5, times K pixels).
    let spacing = 20.0 * k as f64;
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for &(r, c) in &changed {
        let centre =
            |v: usize| spacing * ((v as f64 - 10.5 * k as f64) / spacing).round() + 10.5 * k as f64;
        let (dx, dy) = (c as f64 + 0.5 - centre(c), -(r as f64 + 0.5 - centre(r)));
        sxx += dx * dx;
        syy += dy * dy;
        sxy += dx * dy;
    }
    // Principal axis angle from north (y), clockwise.
    let axis = 0.5 * (2.0 * sxy).atan2(syy - sxx);
    let azimuth = axis.to_degrees().rem_euclid(180.0);
    assert!((azimuth - 30.0).abs() < 3.0, "principal azimuth {azimuth}");
}

#[test]
fn a_drawn_straight_well_changes_pixels_only_along_its_path() {
    // A straight well path, stored as RFC 7946 GeoJSON (WGS84, so it is reprojected back onto
    // the rotated UTM grid by GDAL/PROJ), drawn on a uniform map: every pixel it changes lies
    // within the drawn line's half width (core and halo, plus a pixel of anti-aliasing) of the
    // analytic segment, in the pixel frame GDAL reads back (point-to-segment distance;
    // elementary geometry), and the pixels on the segment itself are changed.
    use flexure_engine::io::vector::{
        stage_features, FieldKind, GeometryKind, Layer, Property, VectorFeature, VectorFormat,
    };
    let dir = tempfile::tempdir().unwrap();
    let g = survey_geometry((500_000.0, 3_900_000.0), 70.0, (20.0, 10.0), (120, 90));
    let attribute = dir.path().join("flat.tif");
    write_f32(
        &attribute,
        &g,
        vec![("k_pos", ndarray::Array2::zeros((90, 120)))],
    );
    let (p, q) = (g.cell_centre(15, 20), g.cell_centre(100, 70));
    let well = dir.path().join("well.geojson");
    let staged = stage_features(
        &well,
        VectorFormat::GeoJson,
        &g.crs_wkt,
        &Layer {
            name: "well_paths",
            kind: GeometryKind::Line,
            fields: &[("md_end", FieldKind::Real)],
            features: &[VectorFeature {
                points: vec![p, q],
                values: vec![Property::Number(1000.0)],
            }],
        },
    )
    .unwrap();
    flexure_engine::io::commit_all(vec![staged]).unwrap();
    let plain = dir.path().join("plain.tif");
    let mut job = flexure_engine::jobs::RenderJob::new(&attribute, &plain);
    job.pixels_per_cell = Some(4);
    job.run().unwrap();
    let drawn = dir.path().join("drawn.tif");
    job.out = drawn.clone();
    job.wells = vec![well];
    assert_eq!(job.run().unwrap().wells, (1, 0));
    let gt = Dataset::open(&drawn).unwrap().geo_transform().unwrap();
    let pixel_of = |(x, y): (f64, f64)| {
        // Inverse of the 2 x 2 part of the geotransform read back.
        let (dx, dy) = (x - gt[0], y - gt[3]);
        let det = gt[1] * gt[5] - gt[2] * gt[4];
        (
            (gt[5] * dx - gt[2] * dy) / det,
            (-gt[4] * dx + gt[1] * dy) / det,
        )
    };
    let (a, b) = (pixel_of(p), pixel_of(q));
    let distance = |(x, y): (f64, f64)| {
        let (vx, vy) = (b.0 - a.0, b.1 - a.1);
        let t = (((x - a.0) * vx + (y - a.1) * vy) / (vx * vx + vy * vy)).clamp(0.0, 1.0);
        (x - a.0 - t * vx).hypot(y - a.1 - t * vy)
    };
    let (width, height) = (120 * 4, 90 * 4);
    let (before, after) = (read_bands_as::<u8>(&plain), read_bands_as::<u8>(&drawn));
    let changed = |i: usize| (0..3).any(|k| before[k][i] != after[k][i]);
    let half_width = (flexure_engine::draw::overlay::WELL_LINE
        + 2.0 * flexure_engine::draw::overlay::HALO) as f64
        / 2.0;
    let mut count = 0;
    for i in (0..width * height).filter(|&i| changed(i)) {
        let centre = ((i % width) as f64 + 0.5, (i / width) as f64 + 0.5);
        assert!(
            distance(centre) <= half_width + 1.0,
            "pixel {centre:?} changed {} px from the path",
            distance(centre)
        );
        count += 1;
    }
    let length = (b.0 - a.0).hypot(b.1 - a.1);
    assert!(
        count as f64 > 2.0 * length,
        "{count} pixels changed along {length} px"
    );
    for k in 0..=100 {
        let t = k as f64 / 100.0;
        let (x, y) = (a.0 + t * (b.0 - a.0), a.1 + t * (b.1 - a.1));
        assert!(
            changed(y as usize * width + x as usize),
            "pixel under the path at t = {t}"
        );
    }
}

#[test]
fn exaggerated_shading_of_a_feet_horizon_is_the_shading_of_its_depth_in_metres() {
    // A plane dipping east at 0.1 m/m, stored as depth in international feet (0.3048 m, exact
    // by definition), shaded with vertical exaggeration 3: Horn's gradient is exact on a plane,
    // so every interior cell's shade is the Lambert cosine between the plane's normal (0.3, 0,
    // 1) (elevation falls east at 0.3 after exaggeration) and the light from azimuth 315,
    // altitude 45 (Horn 1981), and the zero-valued attribute's RdBu centre colour #f7f7f7 is
    // multiplied by 0.55 + 0.5 shade (the map's documented rule). A time horizon without a
    // velocity is refused.
    let dir = tempfile::tempdir().unwrap();
    let g = north_up(40, 30, 10.0);
    let attribute = dir.path().join("flat.tif");
    write_f32(
        &attribute,
        &g,
        vec![("k_pos", ndarray::Array2::zeros((30, 40)))],
    );
    let plane = ndarray::Array2::from_shape_fn((30, 40), |(_, c)| {
        (0.1 * (c as f64 * 10.0) / 0.3048 + 5000.0) as f32
    });
    let horizon = dir.path().join("depth_ft.tif");
    write_float_geotiff(
        &horizon,
        &g,
        &[BandOut {
            description: "depth",
            unit: "ft",
            values: plane.clone(),
        }],
        &[],
    )
    .unwrap();
    let out = dir.path().join("shaded.tif");
    let mut job = flexure_engine::jobs::RenderJob::new(&attribute, &out);
    job.shade = Some(horizon);
    job.exaggeration = Some(3.0);
    job.pixels_per_cell = Some(1);
    job.run().unwrap();
    let (az, alt) = (315f64.to_radians(), 45f64.to_radians());
    let light = [az.sin() * alt.cos(), az.cos() * alt.cos(), alt.sin()];
    let normal: [f64; 3] = [0.3, 0.0, 1.0];
    let norm = (normal[0] * normal[0] + normal[2] * normal[2]).sqrt();
    let shade = (normal[0] * light[0] + normal[2] * light[2]) / norm;
    let expected = (247.0 * (0.55 + 0.5 * shade)).round() as u8;
    let red = read_bands_as::<u8>(&out).remove(0);
    for r in 1..29 {
        for c in 1..39 {
            assert_eq!(red[r * 40 + c], expected, "cell ({r}, {c})");
        }
    }
    // The same plane as two-way time at 2000 m/s (depth = t v / 2000 with t in ms: 0.1 ms
    // per m east) shades the same; without a velocity it cannot be exaggerated.
    let twt = dir.path().join("twt.tif");
    let times = plane.mapv(|ft| (f64::from(ft) * 0.3048) as f32);
    write_float_geotiff(
        &twt,
        &g,
        &[BandOut {
            description: "twt",
            unit: "ms",
            values: times,
        }],
        &[],
    )
    .unwrap();
    job.shade = Some(twt);
    let err = job.run().unwrap_err().to_string();
    assert!(err.contains("--shade-velocity"), "{err}");
    job.shade_velocity = Some(2000.0);
    job.run().unwrap();
    let red = read_bands_as::<u8>(&out).remove(0);
    for r in 1..29 {
        for c in 1..39 {
            assert_eq!(red[r * 40 + c], expected, "time horizon, cell ({r}, {c})");
        }
    }
}

#[test]
fn hillshade_matches_gdaldem() {
    // gdaldem hillshade (GDAL's reference implementation of Horn 1981, azimuth 315, altitude
    // 45, z factor 1) stores 1 + 254 * cos(angle to the light) (GDAL documentation and source,
    // from memory); our shade of the same elevation grid must agree to one grey level.
    let dir = tempfile::tempdir().unwrap();
    let (cols, rows) = (60, 50);
    let g = north_up(cols, rows, 10.0);
    let z = ndarray::Array2::from_shape_fn((rows, cols), |(r, c)| {
        let (x, y) = (c as f64 * 10.0, r as f64 * 10.0);
        (30.0 * (x / 97.0).sin() * (y / 131.0).cos() + 0.1 * x) as f32
    });
    let input = dir.path().join("elev.tif");
    write_f32(&input, &g, vec![("z", z.clone())]);
    let shaded = dir.path().join("shade.tif");
    let status = Command::new("gdaldem")
        .args(["hillshade", "-q", "-z", "1", "-az", "315", "-alt", "45"])
        .arg(&input)
        .arg(&shaded)
        .status()
        .expect("gdaldem from gdal-bin");
    assert!(status.success());
    let reference = read_bands_as::<u8>(&shaded).remove(0);
    let ours = flexure_engine::draw::map::hillshade(&z.mapv(f64::from), &g, false, Some(1.0));
    let mut compared = 0;
    for r in 1..rows - 1 {
        for c in 1..cols - 1 {
            let expected = reference[r * cols + c] as f64;
            let got = 1.0 + 254.0 * ours[(r, c)];
            assert!(
                (got - expected).abs() <= 1.0,
                "({c},{r}): {got} vs gdaldem {expected}"
            );
            compared += 1;
        }
    }
    assert!(compared > 2000);
}
