//! The sector-times job on synthetic azimuth-sector SEG-Y volumes whose events are shifted by
//! the HTI traveltime law `dt(phi) = B cos 2(phi - phi_slow)` (Tsvankin 1997, Geophysics
//! 62(4):1292, from memory) with B and phi_slow varying across a rotated survey of
//! non-square bins: Ricker wavelets (Ricker 1953), white noise at 10% of the peak amplitude,
//! half the volumes IBM floats and half IEEE. The checks are against the invented truth the
//! volumes were made from.

use flexure_engine::anisotropy::fit_sectors;
use flexure_engine::anisotropy::sector_rasters::AZIMUTH_ITEM;
use flexure_engine::grid::GridGeometry;
use flexure_engine::io::segy::{
    write_segy, ByteOrder, SampleFormat, SegyHeaderBytes, SegyTrace, SegyVolume, SegyWriteSpec,
    TextEncoding, TraceLocation,
};
use flexure_engine::io::{read_raster, write_float_geotiff, BandOut, ReadOptions};
use flexure_engine::jobs::{SectorTimesJob, Silent};
use flexure_engine::stats::SeededNoise;
use flexure_engine::synthetic::ricker_samples;
use gdal::Metadata;
use ndarray::Array2;
use std::path::{Path, PathBuf};

const DT_MS: f64 = 2.0;
const SAMPLES: usize = 400;
const DELAY_MS: i16 = 1200;
const PEAK_HZ: f64 = 30.0;

/// One anisotropic layer: B (ms) and slow azimuth (degrees) at map point (x, y).
type Law = fn(f64, f64) -> (f64, f64);

/// A survey of the scenario: rotated lattice, sectors, horizons and laws.
struct Scenario {
    grid: GridGeometry,
    azimuths: Vec<f64>,
}

fn crs() -> String {
    gdal::spatial_ref::SpatialRef::from_epsg(32625)
        .and_then(|s| s.to_wkt())
        .unwrap()
}

fn scenario() -> Scenario {
    Scenario {
        // 30 degrees rotated, 25 m x 12.5 m bins.
        grid: GridGeometry::survey(
            (500_000.0, 3_900_000.0),
            30.0,
            (25.0, 12.5),
            (36, 28),
            crs(),
        ),
        azimuths: (0..8).map(|k| 11.25 + 22.5 * k as f64).collect(),
    }
}

/// Overburden law: B from 1.5 to 4 ms, slow azimuth turning from 20 to 80 degrees across the
/// survey.
fn overburden(x: f64, y: f64) -> (f64, f64) {
    let u = ((x - 500_000.0) / 900.0).clamp(0.0, 1.0);
    let v = ((y - 3_900_000.0) / 600.0).clamp(-1.0, 1.0);
    (1.5 + 2.5 * u, 50.0 + 30.0 * v)
}

/// Interval law (between the horizons): 2.5 ms, slow azimuth 130 degrees.
fn interval(_: f64, _: f64) -> (f64, f64) {
    (2.5, 130.0)
}

fn shift(law: Law, x: f64, y: f64, azimuth: f64) -> f64 {
    let (b, slow) = law(x, y);
    b * (2.0 * (azimuth - slow).to_radians()).cos()
}

/// Top and base horizon times (ms) at (x, y).
fn horizons(x: f64, y: f64) -> (f64, f64) {
    let top = 1500.0 + 20.0 * ((x - 500_000.0) / 400.0).sin() + 0.01 * (y - 3_900_000.0);
    (top, top + 180.0)
}

/// Writes one volume per sector (IBM floats for even sectors, IEEE for odd ones) and the two
/// horizon grids, coordinates stored with the coordinate scalar `scalar`; events at the top (shifted by the overburden) and at the base (shifted by
/// overburden and interval); returns (volumes, top, base).
fn write_inputs(s: &Scenario, dir: &Path, scalar: i16) -> (Vec<PathBuf>, PathBuf, PathBuf) {
    let g = &s.grid;
    let mut noise = SeededNoise::new(7);
    let volumes = s
        .azimuths
        .iter()
        .enumerate()
        .map(|(k, &azimuth)| {
            let path = dir.join(format!("sector_{k}.sgy"));
            let spec = SegyWriteSpec {
                revision: 1,
                byte_order: ByteOrder::Big,
                format: if k % 2 == 0 {
                    SampleFormat::Ibm
                } else {
                    SampleFormat::Ieee
                },
                text_encoding: TextEncoding::Ebcdic,
                text: vec![format!("C 1 synthetic sector {azimuth} deg")],
                sample_interval_us: (DT_MS * 1000.0) as u16,
                samples: SAMPLES,
                delay_ms: DELAY_MS,
                header_bytes: SegyHeaderBytes::default(),
                coordinate_scalar: scalar,
            };
            let traces: Vec<(i32, i32, f64, f64, Vec<f32>)> = (0..g.rows)
                .flat_map(|r| (0..g.cols).map(move |c| (r, c)))
                .map(|(r, c)| {
                    let (x, y) = g.cell_centre(c, r);
                    let (top, base) = horizons(x, y);
                    let above = shift(overburden, x, y, azimuth);
                    let within = shift(interval, x, y, azimuth);
                    let first = (f64::from(DELAY_MS) / DT_MS) as isize;
                    let events = [(top + above, 1.0), (base + above + within, -0.8)];
                    let mut samples = ricker_samples(first, SAMPLES, DT_MS, PEAK_HZ, &events);
                    for v in &mut samples {
                        *v += (0.1 * noise.gaussian()) as f32;
                    }
                    (100 + r as i32, 200 + c as i32, x, y, samples)
                })
                .collect();
            write_segy(
                &path,
                &spec,
                traces.iter().map(|(il, xl, x, y, samples)| SegyTrace {
                    inline: *il,
                    crossline: *xl,
                    x: *x,
                    y: *y,
                    samples,
                }),
            )
            .unwrap();
            path
        })
        .collect();
    let write_horizon = |name: &str, pick: fn((f64, f64)) -> f64| {
        let path = dir.join(name);
        let values = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
            let (x, y) = g.cell_centre(c, r);
            pick(horizons(x, y)) as f32
        });
        let band = BandOut {
            description: "twt",
            unit: "ms",
            values,
        };
        write_float_geotiff(&path, g, &[band], &[]).unwrap();
        path
    };
    let top = write_horizon("top.tif", |(t, _)| t);
    let base = write_horizon("base.tif", |(_, b)| b);
    (volumes, top, base)
}

/// Fits every bin of the measured shift raster; per bin (B error share, azimuth error in
/// degrees) against `law`.
fn errors(s: &Scenario, raster: &Path, law: Law) -> Vec<(f64, f64)> {
    let r = read_raster(raster, &ReadOptions::default()).unwrap();
    let g = &s.grid;
    (0..g.rows)
        .flat_map(|row| (0..g.cols).map(move |col| (row, col)))
        .filter_map(|(row, col)| {
            let samples: Vec<(f64, f64, f64)> = s
                .azimuths
                .iter()
                .zip(&r.bands)
                .map(|(&a, band)| (a, band[(row, col)], 1.0))
                .collect();
            let fit = fit_sectors(&samples, 6)?;
            let (x, y) = g.cell_centre(col, row);
            let (b, slow) = law(x, y);
            let azimuth_error = ((fit.azimuth_slow - slow + 90.0).rem_euclid(180.0) - 90.0).abs();
            Some(((fit.magnitude - b).abs() / b, azimuth_error))
        })
        .collect()
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

#[test]
fn sector_volumes_give_the_anisotropy_they_were_made_with() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario();
    let (volumes, top, base) = write_inputs(&s, dir.path(), -100);
    let out = dir.path().join("shifts");
    let job = SectorTimesJob::new(volumes.clone(), s.azimuths.clone(), &top, &out);
    let report = job.run(&Silent).unwrap();
    let cells = s.grid.cols * s.grid.rows;
    assert!(report.measured().iter().all(|&m| m == cells), "{report}");

    // The acceptance figures of the sector-times issue: fast (and so slow) azimuth median
    // error < 3 degrees, magnitude median error < 10 %.
    let e = errors(&s, &job.times_path(), overburden);
    assert_eq!(e.len(), cells);
    let magnitude = median(e.iter().map(|e| e.0).collect());
    let azimuth = median(e.iter().map(|e| e.1).collect());
    assert!(magnitude < 0.10, "median magnitude error {magnitude}");
    assert!(azimuth < 3.0, "median azimuth error {azimuth}");

    // Band metadata as GDAL reads it: each band's azimuth and unit.
    let ds = gdal::Dataset::open(job.times_path()).unwrap();
    for (k, a) in s.azimuths.iter().enumerate() {
        let band = ds.rasterband(k + 1).unwrap();
        let item = band.metadata_item(AZIMUTH_ITEM, "").unwrap();
        assert_eq!(item.parse::<f64>().unwrap(), *a);
        assert_eq!(band.unit(), "ms");
    }

    // Interval mode: base minus top removes the overburden and recovers the interval's own
    // law (2.5 ms, slow azimuth 130 degrees), which the base alone does not show.
    let out = dir.path().join("interval");
    let mut job = SectorTimesJob::new(volumes, s.azimuths.clone(), &top, &out);
    job.base = Some(base);
    job.run(&Silent).unwrap();
    let e = errors(&s, &job.times_path(), interval);
    let magnitude = median(e.iter().map(|e| e.0).collect());
    let azimuth = median(e.iter().map(|e| e.1).collect());
    assert!(
        magnitude < 0.10,
        "interval: median magnitude error {magnitude}"
    );
    assert!(azimuth < 3.0, "interval: median azimuth error {azimuth}");
    let reference = read_raster(&out.join("reference_time.tif"), &ReadOptions::default()).unwrap();
    let (x, y) = s.grid.cell_centre(3, 4);
    let (t, b) = horizons(x, y);
    assert!((reference.bands[0][(4, 3)] - (b - t)).abs() < 1e-3);
}

#[test]
fn coordinates_stored_to_the_metre_still_place_every_trace() {
    // Coordinate scalar 1: x and y rounded to whole metres, up to 0.71 m (0.057 of the
    // 12.5 m bin) off their nodes, as SEG-Y files often store them (common practice).
    let dir = tempfile::tempdir().unwrap();
    let s = scenario();
    let (volumes, top, _) = write_inputs(&s, dir.path(), 1);
    let job = SectorTimesJob::new(volumes, s.azimuths.clone(), &top, dir.path().join("out"));
    let report = job.run(&Silent).unwrap();
    let cells = s.grid.cols * s.grid.rows;
    assert!(report.measured().iter().all(|&m| m == cells), "{report}");
}

#[test]
fn trace_order_and_wild_horizon_values_change_nothing_else() {
    // The volumes written in reverse crossline-major order are the same data: the shifts
    // must be the same bits (each bin reads only its own trace windows). A horizon value of
    // 1e30 ms (an undeclared null) at one bin leaves that bin outside the traces, the others
    // as they were.
    let dir = tempfile::tempdir().unwrap();
    let s = scenario();
    let (volumes, top, _) = write_inputs(&s, dir.path(), -100);
    let reordered: Vec<PathBuf> = volumes
        .iter()
        .map(|path| {
            let v = SegyVolume::open(path, &SegyHeaderBytes::default()).unwrap();
            rewrite_reordered(v, &dir.path().join("reordered"))
        })
        .collect();
    let run = |volumes: Vec<PathBuf>, top: &Path, out: &str| {
        let job = SectorTimesJob::new(volumes, s.azimuths.clone(), top, dir.path().join(out));
        let report = job.run(&Silent).unwrap();
        (
            read_raster(&job.times_path(), &ReadOptions::default()).unwrap(),
            report,
        )
    };
    let (a, _) = run(volumes.clone(), &top, "a");
    let (b, _) = run(reordered, &top, "b");
    for (x, y) in a.bands.iter().zip(&b.bands) {
        assert!(x.iter().zip(y).all(|(p, q)| p.to_bits() == q.to_bits()));
    }
    let wild = dir.path().join("wild.tif");
    let mut times = read_raster(&top, &ReadOptions::default())
        .unwrap()
        .bands
        .remove(0);
    times[(5, 7)] = 1e30;
    let band = BandOut {
        description: "twt",
        unit: "ms",
        values: times.mapv(|t| t as f32),
    };
    write_float_geotiff(&wild, &s.grid, &[band], &[]).unwrap();
    let (c, report) = run(volumes, &wild, "c");
    assert_eq!(report.outside_traces(), 1, "{report}");
    for (x, y) in a.bands.iter().zip(&c.bands) {
        for ((at, p), q) in x.indexed_iter().zip(y) {
            match at {
                (5, 7) => assert!(q.is_nan()),
                _ => assert_eq!(p.to_bits(), q.to_bits()),
            }
        }
    }
}

/// Writes the traces of `v` again into `dir`, crossline by crossline, last first.
fn rewrite_reordered(mut v: SegyVolume, dir: &Path) -> PathBuf {
    std::fs::create_dir_all(dir).unwrap();
    let info = v.info().clone();
    let mut order: Vec<usize> = (0..v.traces()).collect();
    order.sort_by_key(|&k| {
        let t = v.trace(k).unwrap();
        (std::cmp::Reverse(t.crossline), std::cmp::Reverse(t.inline))
    });
    let traces: Vec<(TraceLocation, Vec<f32>)> = order
        .iter()
        .map(|&k| {
            let mut samples = vec![0f32; info.samples];
            v.read_samples(k, 0, &mut samples).unwrap();
            (v.trace(k).unwrap(), samples)
        })
        .collect();
    let path = dir.join(v.path().file_name().unwrap());
    let spec = SegyWriteSpec {
        revision: 2,
        byte_order: ByteOrder::Little,
        format: SampleFormat::Ieee,
        text_encoding: TextEncoding::Ascii,
        text: vec!["C 1 reordered".into()],
        sample_interval_us: info.sample_interval_us as u16,
        samples: info.samples,
        delay_ms: info.delay_ms as i16,
        header_bytes: SegyHeaderBytes::default(),
        coordinate_scalar: -100,
    };
    write_segy(
        &path,
        &spec,
        traces.iter().map(|(t, samples)| SegyTrace {
            inline: t.inline as i32,
            crossline: t.crossline as i32,
            x: t.x,
            y: t.y,
            samples,
        }),
    )
    .unwrap();
    path
}
