//! `flexure sector-times` from the command line: a run on small synthetic sector volumes, and
//! the bad inputs the sector-times issue lists, each refused in one line naming the file, with
//! the output folder left as it was.

mod common;

use common::{fails_leaving_unchanged, flexure, survey_geometry, write_bands_in};
use flexure_engine::grid::GridGeometry;
use flexure_engine::io::segy::{
    write_segy, ByteOrder, SampleFormat, SegyHeaderBytes, SegyTrace, SegyWriteSpec, TextEncoding,
};
use flexure_engine::synthetic::ricker_samples;
use ndarray::Array2;
use std::path::{Path, PathBuf};

const AZIMUTHS: &str = "0,30,60,90,120,150";

fn geometry() -> GridGeometry {
    survey_geometry((500_000.0, 3_900_000.0), 70.0, (20.0, 10.0), (9, 7))
}

/// Guide horizon time at cell (col, row), ms.
fn horizon_ms(col: usize, row: usize) -> f64 {
    1000.0 + 2.0 * col as f64 + row as f64
}

/// A sector volume on `g` of `samples` samples every `dt_us` from 800 ms, with a Ricker event
/// at the horizon shifted by `shift` ms.
fn volume(
    dir: &Path,
    name: &str,
    g: &GridGeometry,
    dt_us: u16,
    samples: usize,
    shift: f64,
) -> PathBuf {
    let path = dir.join(name);
    let dt = f64::from(dt_us) / 1000.0;
    let spec = SegyWriteSpec {
        revision: 2,
        byte_order: ByteOrder::Little,
        format: SampleFormat::Ieee,
        text_encoding: TextEncoding::Ascii,
        text: vec!["C 1 synthetic sector".into()],
        sample_interval_us: dt_us,
        samples,
        delay_ms: 800,
        header_bytes: SegyHeaderBytes::default(),
        coordinate_scalar: -10,
    };
    let traces: Vec<(i32, i32, f64, f64, Vec<f32>)> = (0..g.rows)
        .flat_map(|r| (0..g.cols).map(move |c| (r, c)))
        .map(|(r, c)| {
            let (x, y) = g.cell_centre(c, r);
            let first = (800.0 / dt) as isize;
            let event = [(horizon_ms(c, r) + shift, 1.0)];
            (
                10 + r as i32,
                20 + c as i32,
                x,
                y,
                ricker_samples(first, samples, dt, 30.0, &event),
            )
        })
        .collect();
    write_segy(
        &path,
        &spec,
        traces.iter().map(|(il, xl, x, y, s)| SegyTrace {
            inline: *il,
            crossline: *xl,
            x: *x,
            y: *y,
            samples: s,
        }),
    )
    .unwrap();
    path
}

/// Six sector volumes with shifts 2 cos 2(phi - 40) ms and the guide horizon.
fn inputs(dir: &Path) -> (Vec<String>, PathBuf) {
    let g = geometry();
    let volumes = (0..6)
        .map(|k| {
            let phi = 30.0 * k as f64;
            let shift = 2.0 * (2.0 * (phi - 40.0f64).to_radians()).cos();
            volume(dir, &format!("s{k}.sgy"), &g, 2000, 300, shift)
                .display()
                .to_string()
        })
        .collect();
    let times = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| horizon_ms(c, r) as f32);
    let horizon = write_bands_in(dir, "guide.tif", &g, vec![times], "ms");
    (volumes, horizon)
}

fn args<'a>(volumes: &'a [String], horizon: &'a str, out: &'a str) -> Vec<&'a str> {
    let mut a = vec!["sector-times"];
    a.extend(volumes.iter().map(String::as_str));
    a.extend([
        "--azimuths",
        AZIMUTHS,
        "--horizon",
        horizon,
        "--out",
        out,
        "--quiet",
    ]);
    a
}

#[test]
fn a_run_writes_shifts_that_follow_the_sectors() {
    let dir = tempfile::tempdir().unwrap();
    let (volumes, horizon) = inputs(dir.path());
    let out = dir.path().join("out");
    let o = flexure(&args(
        &volumes,
        horizon.to_str().unwrap(),
        out.to_str().unwrap(),
    ));
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let ds = gdal::Dataset::open(out.join("sector_times.tif")).unwrap();
    assert_eq!(ds.raster_count(), 6);
    // Shifts against the mean trace: 2 cos 2(phi - 40) ms exactly (the shifts of the six
    // sectors sum to zero, so the mean trace is centred on the horizon); tolerance from the
    // sub-sample accuracy of the measurement on noise-free Ricker wavelets.
    for k in 0..6 {
        let band = ds.rasterband(k + 1).unwrap();
        let v = band.read_band_as::<f32>().unwrap();
        let expected = 2.0 * (2.0 * (30.0 * k as f64 - 40.0f64).to_radians()).cos();
        for x in v.data() {
            assert!(
                (f64::from(*x) - expected).abs() < 0.05,
                "sector {k}: {x} vs {expected}"
            );
        }
    }
    for f in [
        "sector_quality.tif",
        "reference_time.tif",
        "sector_times.json",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
}

#[test]
fn undeclared_seconds_are_read_with_the_time_unit_given() {
    let dir = tempfile::tempdir().unwrap();
    let (volumes, _) = inputs(dir.path());
    let g = geometry();
    let seconds = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
        (horizon_ms(c, r) / 1000.0) as f32
    });
    let seconds = write_bands_in(dir.path(), "seconds.tif", &g, vec![seconds], "");
    let out = dir.path().join("out");
    let mut a = args(&volumes, seconds.to_str().unwrap(), out.to_str().unwrap());
    a.extend(["--time-unit", "s"]);
    let o = flexure(&a);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let ds = gdal::Dataset::open(out.join("reference_time.tif")).unwrap();
    let t = ds.rasterband(1).unwrap().read_band_as::<f32>().unwrap();
    // The guide time of cell (0, 0) in ms (the definition of the fixture).
    assert!((f64::from(t.data()[0]) - horizon_ms(0, 0)).abs() < 1e-3);
}

#[test]
fn bad_inputs_are_refused_in_one_line_leaving_the_folder_as_it_was() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (volumes, horizon) = inputs(d);
    let out = d.join("out");
    let (h, o) = (horizon.to_str().unwrap(), out.to_str().unwrap());
    assert!(flexure(&args(&volumes, h, o)).status.success());
    let g = geometry();

    // Azimuth count not matching the volumes.
    let mut a = args(&volumes, h, o);
    a[8] = "0,30,60";
    let e = fails_leaving_unchanged(&a, &out);
    assert!(e.contains("3 azimuths given for 6 sector volumes"), "{e}");

    // Not SEG-Y.
    let text = d.join("notes.sgy");
    std::fs::write(&text, "inline xline x y twt\n".repeat(400)).unwrap();
    let mut bad = volumes.clone();
    bad[2] = text.display().to_string();
    let e = fails_leaving_unchanged(&args(&bad, h, o), &out);
    assert!(e.contains("notes.sgy"), "{e}");

    // Truncated: the last trace cut short; the message names a byte.
    let cut = d.join("cut.sgy");
    let bytes = std::fs::read(&volumes[1]).unwrap();
    std::fs::write(&cut, &bytes[..bytes.len() - 100]).unwrap();
    let mut bad = volumes.clone();
    bad[1] = cut.display().to_string();
    let e = fails_leaving_unchanged(&args(&bad, h, o), &out);
    assert!(e.contains("cut.sgy") && e.contains("byte"), "{e}");

    // Another sample interval.
    let coarse = volume(d, "coarse.sgy", &g, 4000, 150, 0.0);
    let mut bad = volumes.clone();
    bad[3] = coarse.display().to_string();
    let e = fails_leaving_unchanged(&args(&bad, h, o), &out);
    assert!(e.contains("coarse.sgy") && e.contains("sampling"), "{e}");

    // Another lattice: bins of 20 x 12 m.
    let other = survey_geometry((500_000.0, 3_900_000.0), 70.0, (20.0, 12.0), (9, 7));
    let elsewhere = volume(d, "elsewhere.sgy", &other, 2000, 300, 0.0);
    let mut bad = volumes.clone();
    bad[4] = elsewhere.display().to_string();
    let e = fails_leaving_unchanged(&args(&bad, h, o), &out);
    assert!(e.contains("elsewhere.sgy") && e.contains("lattice"), "{e}");

    // A horizon outside the traces' time range (800 to 1398 ms).
    let deep = Array2::from_elem((g.rows, g.cols), 3000.0f32);
    let deep = write_bands_in(d, "deep.tif", &g, vec![deep], "ms");
    let e = fails_leaving_unchanged(&args(&volumes, deep.to_str().unwrap(), o), &out);
    assert!(
        e.contains("deep.tif") && e.contains("outside the traces"),
        "{e}"
    );

    // A horizon declared in metres.
    let metres = Array2::from_elem((g.rows, g.cols), 1000.0f32);
    let metres = write_bands_in(d, "metres.tif", &g, vec![metres], "metre");
    let e = fails_leaving_unchanged(&args(&volumes, metres.to_str().unwrap(), o), &out);
    assert!(e.contains("metres.tif") && e.contains("length"), "{e}");

    // A horizon with times only where the volumes have no traces (a larger grid of the same
    // lattice, null over the volumes' area): nothing could be measured.
    let larger = survey_geometry((500_000.0, 3_900_000.0), 70.0, (20.0, 10.0), (12, 10));
    let beside = Array2::from_shape_fn((10, 12), |(r, c)| {
        if r < g.rows && c < g.cols {
            f32::NAN
        } else {
            horizon_ms(c, r) as f32
        }
    });
    let beside = write_bands_in(d, "beside.tif", &larger, vec![beside], "ms");
    let e = fails_leaving_unchanged(&args(&volumes, beside.to_str().unwrap(), o), &out);
    assert!(
        e.contains("beside.tif") && e.contains("no time at any bin"),
        "{e}"
    );

    // A trace tolerance outside 0..0.5.
    let mut a = args(&volumes, h, o);
    a.extend(["--trace-tolerance", "0.6"]);
    let e = fails_leaving_unchanged(&a, &out);
    assert!(e.contains("--trace-tolerance 0.6"), "{e}");

    // The quality raster given to anisotropy as sector times.
    let quality = out.join("sector_quality.tif");
    let fit = d.join("fit");
    let e = fails_leaving_unchanged(
        &[
            "anisotropy",
            quality.to_str().unwrap(),
            "--out",
            fit.to_str().unwrap(),
        ],
        &fit,
    );
    assert!(e.contains("correlation qualities"), "{e}");

    // Times in seconds that the file does not declare: read as ms they lie outside the
    // traces, and the message points to --time-unit; a declared unit it contradicts is refused.
    let seconds = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
        (horizon_ms(c, r) / 1000.0) as f32
    });
    let seconds = write_bands_in(d, "seconds.tif", &g, vec![seconds], "");
    let e = fails_leaving_unchanged(&args(&volumes, seconds.to_str().unwrap(), o), &out);
    assert!(
        e.contains("seconds.tif") && e.contains("--time-unit"),
        "{e}"
    );
    let mut a = args(&volumes, h, o);
    a.extend(["--time-unit", "s"]);
    let e = fails_leaving_unchanged(&a, &out);
    assert!(
        e.contains("guide.tif") && e.contains("declares its times in 'ms'"),
        "{e}"
    );

    // One trace's x mistyped by 0.3 of a bin: refused naming the trace and --trace-tolerance.
    let typo = d.join("typo.sgy");
    let mut bytes = std::fs::read(&volumes[0]).unwrap();
    let at = 3600 + 5 * (240 + 300 * 4) + 180;
    let x = i32::from_le_bytes(bytes[at..at + 4].try_into().unwrap()) + 30;
    bytes[at..at + 4].copy_from_slice(&x.to_le_bytes());
    std::fs::write(&typo, &bytes).unwrap();
    let mut bad = volumes.clone();
    bad[0] = typo.display().to_string();
    let e = fails_leaving_unchanged(&args(&bad, h, o), &out);
    assert!(
        e.contains("typo.sgy") && e.contains("trace 6") && e.contains("--trace-tolerance"),
        "{e}"
    );

    // A window longer than the traces.
    let mut a = args(&volumes, h, o);
    a.extend(["--window", "700", "--max-shift", "12"]);
    let e = fails_leaving_unchanged(&a, &out);
    assert!(e.contains("--window"), "{e}");
}
