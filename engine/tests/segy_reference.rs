//! The SEG-Y reader and writer against segyio 1.9.14 (PyPI; an independent C implementation):
//! `scripts/fixtures/segy_fixtures.py` wrote volumes with segyio and read every volume in
//! `tests/data/segy/` back with it (flexure's own `flexure_*.sgy` files included), recording
//! every header field flexure uses and every sample in `readings.json`. Here our reader must
//! agree with those readings exactly, and segyio's readings of flexure's files must be what
//! our writer was given. Regenerate with `make segy-fixtures` (DEVELOPERS.md).

use flexure_engine::io::segy::{
    f32_to_ibm, ibm_to_f32, write_segy, ByteOrder, SampleFormat, SegyHeaderBytes, SegyTrace,
    SegyVolume, SegyWriteSpec, TextEncoding,
};
use serde_json::Value;
use std::path::{Path, PathBuf};

fn folder() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/segy")
}

fn readings() -> Vec<Value> {
    let text = std::fs::read_to_string(folder().join("readings.json")).unwrap();
    let json: Value = serde_json::from_str(&text).unwrap();
    json["fixtures"].as_array().unwrap().clone()
}

fn int(v: &Value) -> i64 {
    v.as_i64().unwrap_or_else(|| panic!("not an integer: {v}"))
}

fn bytes_of(reading: &Value) -> SegyHeaderBytes {
    let b = &reading["bytes"];
    let at = |k: &str| int(&b[k]) as usize;
    SegyHeaderBytes {
        inline: at("inline"),
        crossline: at("crossline"),
        x: at("x"),
        y: at("y"),
        scalar: at("scalar"),
    }
}

/// A stored coordinate with its SEG-Y coordinate scalar applied as the standard says
/// (../shared/REFERENCES.md "SEG-Y": positive multiplies, negative divides by its absolute
/// value, 0 means none).
fn scaled(stored: i64, scalar: i64) -> f64 {
    match scalar {
        0 => stored as f64,
        s if s > 0 => stored as f64 * s as f64,
        s => stored as f64 / -(s as f64),
    }
}

#[test]
fn every_fixture_reads_as_segyio_reads_it() {
    let all = readings();
    assert!(all.len() >= 10, "{} fixtures", all.len());
    for r in &all {
        let name = r["file"].as_str().unwrap();
        let mut v = SegyVolume::open(&folder().join(name), &bytes_of(r))
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        let info = v.info().clone();
        let bin = &r["binary"];
        let order = match r["endian"].as_str().unwrap() {
            "big" => ByteOrder::Big,
            _ => ByteOrder::Little,
        };
        assert_eq!(info.byte_order, order, "{name}");
        let encoding = match r["text_encoding"].as_str().unwrap() {
            "ebcdic" => TextEncoding::Ebcdic,
            _ => TextEncoding::Ascii,
        };
        assert_eq!(info.text_encoding, encoding, "{name}");
        assert_eq!(info.text, r["text"].as_str().unwrap(), "{name}");
        assert_eq!(
            info.extended_headers as i64,
            int(&r["extended_headers"]),
            "{name}"
        );
        assert_eq!(info.format.code() as i64, int(&bin["format"]), "{name}");
        assert_eq!(
            (info.revision.0 as i64, info.revision.1 as i64),
            (int(&bin["revision"]), int(&bin["revision_minor"])),
            "{name}"
        );
        assert_eq!(info.fixed_length, int(&bin["fixed_length"]) == 1, "{name}");
        let samples = match int(&bin["ext_samples"]) {
            0 => int(&bin["samples"]),
            n => n,
        };
        assert_eq!(v.samples() as i64, samples, "{name}");
        assert_eq!(
            info.sample_interval_us as i64,
            int(&bin["interval_us"]),
            "{name}"
        );
        // segyio's time axis: the first trace's delay, then the binary header's interval.
        let times: Vec<f64> = r["times_ms"]
            .as_array()
            .unwrap()
            .iter()
            .map(|t| t.as_f64().unwrap())
            .collect();
        assert_eq!(times.len(), v.samples(), "{name}");
        for (k, &t) in times.iter().enumerate() {
            assert_eq!(
                v.first_time_ms() + k as f64 * v.sample_interval_ms(),
                t,
                "{name}"
            );
        }
        let traces = r["traces"].as_array().unwrap();
        assert_eq!(v.traces(), traces.len(), "{name}");
        let mut whole = vec![0f32; v.samples()];
        for (k, t) in traces.iter().enumerate() {
            let loc = v.trace(k).unwrap();
            assert_eq!(loc.inline, int(&t["inline"]), "{name} trace {k}");
            assert_eq!(loc.crossline, int(&t["crossline"]), "{name} trace {k}");
            let scalar = int(&t["scalar"]);
            assert_eq!(loc.x, scaled(int(&t["x"]), scalar), "{name} trace {k}");
            assert_eq!(loc.y, scaled(int(&t["y"]), scalar), "{name} trace {k}");
            // Trace headers give the file's sampling or 0 ("not recorded"), and the delay.
            assert!(
                [0, samples].contains(&int(&t["samples"])),
                "{name} trace {k}"
            );
            assert!(
                [0, int(&bin["interval_us"])].contains(&int(&t["interval_us"])),
                "{name} trace {k}"
            );
            assert_eq!(
                int(&t["delay_ms"]) as f64,
                v.first_time_ms(),
                "{name} trace {k}"
            );
            let data: Vec<f32> = t["data"]
                .as_array()
                .unwrap()
                .iter()
                .map(|d| d.as_f64().unwrap() as f32)
                .collect();
            v.read_samples(k, 0, &mut whole).unwrap();
            assert_eq!(whole, data, "{name} trace {k}");
            // A window reads the same samples as the whole trace.
            let (from, n) = (v.samples() / 3, v.samples() / 2);
            let mut window = vec![0f32; n];
            v.read_samples(k, from, &mut window).unwrap();
            assert_eq!(window, data[from..from + n], "{name} trace {k} window");
        }
    }
}

#[test]
fn fixture_lattices_are_their_generating_lattices() {
    // Reference: the lattice definition the script generated each segyio fixture from
    // (origin node, column azimuth, bins); each trace's node must lie within the rounding of
    // its stored coordinates (half a stored unit per axis) of where that definition puts it.
    let mut checked = 0;
    for r in readings().iter().filter(|r| !r["lattice"].is_null()) {
        let name = r["file"].as_str().unwrap();
        let g = &r["lattice"];
        let f = |v: &Value| v.as_f64().unwrap();
        let (cols, rows) = (int(&g["cols"]) as usize, int(&g["rows"]) as usize);
        let az = f(&g["column_azimuth"]).to_radians();
        let (bc, br) = (f(&g["bins"][0]), f(&g["bins"][1]));
        let col = (bc * az.sin(), bc * az.cos());
        let row = (
            br * (az + std::f64::consts::FRAC_PI_2).sin(),
            br * (az + std::f64::consts::FRAC_PI_2).cos(),
        );
        let origin = (f(&g["origin"][0]), f(&g["origin"][1]));
        let v = SegyVolume::open(&folder().join(name), &bytes_of(r)).unwrap();
        let placement = v.lattice(0.05).unwrap();
        assert_eq!((placement.cols, placement.rows), (cols, rows), "{name}");
        let scalar = int(&r["traces"][0]["scalar"]);
        let quantum = scaled(1, scalar);
        let gt = placement.geo_transform;
        for k in 0..v.traces() {
            // Traces were written inline by inline, crossline increasing.
            let (c, rr) = ((k % cols) as f64, (k / cols) as f64);
            let want = (
                origin.0 + c * col.0 + rr * row.0,
                origin.1 + c * col.1 + rr * row.1,
            );
            let (i, j) = placement.index[k];
            assert_eq!((i, j), (k % cols, k / cols), "{name} trace {k}");
            let (ci, cj) = (i as f64 + 0.5, j as f64 + 0.5);
            let got = (
                gt[0] + ci * gt[1] + cj * gt[2],
                gt[3] + ci * gt[4] + cj * gt[5],
            );
            let miss = (got.0 - want.0).hypot(got.1 - want.1);
            assert!(
                miss <= quantum / std::f64::consts::SQRT_2 + 1e-6,
                "{name} trace {k}: {miss}"
            );
        }
        checked += 1;
    }
    assert_eq!(checked, 5);
}

/// Samples of trace `k` of a writer fixture: values the format holds exactly, and for IBM
/// floats also values it must round (0.1, 1/3) and the published examples.
fn writer_samples(format: SampleFormat, k: usize, n: usize) -> Vec<f32> {
    (0..n)
        .map(|i| {
            let s = (k * n + i) as f32;
            match format {
                SampleFormat::Ibm | SampleFormat::Ieee => match (k, i) {
                    (0, 0) => 1.0,
                    (0, 1) => 100.0,
                    (0, 2) => -118.625,
                    (0, 3) => 0.1,
                    (0, 4) => 1.0 / 3.0,
                    (0, 5) => 3.0e38,
                    (0, 6) => -1.0e-30,
                    _ => (s * 0.37 - 7.0) * 10f32.powi(k as i32 % 5 - 2),
                },
                SampleFormat::Int32 => s * 104_729.0 - 1.0e7,
                SampleFormat::Int16 => (s * 523.0) % 60_000.0 - 30_000.0,
                SampleFormat::Int8 => (s * 7.0) % 256.0 - 128.0,
            }
        })
        .collect()
}

/// Inline, crossline, x and y of each trace.
type Nodes = Vec<(i32, i32, f64, f64)>;

/// The files our writer contributes to the fixtures, with what they hold.
fn writer_fixtures() -> Vec<(&'static str, SegyWriteSpec, Nodes)> {
    let custom = SegyHeaderBytes {
        inline: 17,
        crossline: 13,
        x: 73,
        y: 77,
        scalar: 71,
    };
    let spec =
        |revision, byte_order, format, text_encoding, header_bytes, scalar, delay| SegyWriteSpec {
            revision,
            byte_order,
            format,
            text_encoding,
            text: vec![
                "C 1 WRITTEN BY FLEXURE'S SEG-Y WRITER FOR ITS TESTS".to_string(),
                format!("C 2 REV {revision}, {byte_order:?}, {format:?}, {text_encoding:?}"),
            ],
            sample_interval_us: 2000,
            samples: 12,
            delay_ms: delay,
            header_bytes,
            coordinate_scalar: scalar,
        };
    // A rotated lattice (columns at 60 deg) with 15 x 20 m bins, 4 crosslines x 3 inlines.
    let nodes = |scalar: i16| -> Nodes {
        // Coordinates the scalar stores exactly: the stored integer scaled as the standard
        // says.
        let exact = |v: f64| match scalar {
            s if s < 0 => (v * -(s as f64)).round() / -(s as f64),
            s => {
                let q = s.max(1) as f64;
                (v / q).round() * q
            }
        };
        let a = 60f64.to_radians();
        (0..3)
            .flat_map(|r| (0..4).map(move |c| (r, c)))
            .map(|(r, c)| {
                let x = 421_000.0 + c as f64 * 15.0 * a.sin() - r as f64 * 20.0 * a.cos();
                let y = 5_012_000.0 + c as f64 * 15.0 * a.cos() + r as f64 * 20.0 * a.sin();
                (r * 2 + 11, c + 101, exact(x), exact(y))
            })
            .collect()
    };
    use ByteOrder::*;
    use SampleFormat::*;
    use TextEncoding::*;
    let standard = SegyHeaderBytes::default();
    vec![
        (
            "flexure_ibm_le_rev1_ascii.sgy",
            spec(1, Little, Ibm, Ascii, standard, -100, 0),
        ),
        (
            "flexure_ieee_be_rev2_ascii.sgy",
            spec(2, Big, Ieee, Ascii, standard, -10, 0),
        ),
        (
            "flexure_int16_be_rev2_ebcdic_custom.sgy",
            spec(2, Big, Int16, Ebcdic, custom, 10, 20),
        ),
        (
            "flexure_int32_le_rev2_ebcdic.sgy",
            spec(2, Little, Int32, Ebcdic, standard, 0, 0),
        ),
        (
            "flexure_int8_be_rev1_ascii.sgy",
            spec(1, Big, Int8, Ascii, standard, 1, 0),
        ),
    ]
    .into_iter()
    .map(|(name, spec)| {
        let n = nodes(spec.coordinate_scalar);
        (name, spec, n)
    })
    .collect()
}

fn write_writer_fixture(path: &Path, spec: &SegyWriteSpec, nodes: &[(i32, i32, f64, f64)]) {
    let samples: Vec<Vec<f32>> = (0..nodes.len())
        .map(|k| writer_samples(spec.format, k, spec.samples))
        .collect();
    let traces = nodes
        .iter()
        .zip(&samples)
        .map(|(&(il, xl, x, y), s)| SegyTrace {
            inline: il,
            crossline: xl,
            x,
            y,
            samples: s,
        });
    write_segy(path, spec, traces).unwrap();
}

/// Writes flexure's fixtures into `tests/data/segy/` (run by `make segy-fixtures` before the
/// segyio script reads them).
#[test]
#[ignore]
fn write_writer_fixtures() {
    for (name, spec, nodes) in writer_fixtures() {
        write_writer_fixture(&folder().join(name), &spec, &nodes);
    }
}

#[test]
fn committed_writer_fixtures_are_what_the_writer_writes_now() {
    // The segyio readings of flexure's files apply to today's writer only if it still writes
    // the same bytes.
    let dir = tempfile::tempdir().unwrap();
    for (name, spec, nodes) in writer_fixtures() {
        let path = dir.path().join(name);
        write_writer_fixture(&path, &spec, &nodes);
        let committed = std::fs::read(folder().join(name)).unwrap();
        assert!(
            std::fs::read(&path).unwrap() == committed,
            "{name} differs: make segy-fixtures"
        );
    }
}

#[test]
fn segyio_reads_our_files_as_written() {
    let all = readings();
    for (name, spec, nodes) in writer_fixtures() {
        let r = all
            .iter()
            .find(|r| r["file"] == name)
            .unwrap_or_else(|| panic!("{name} has no segyio reading"));
        let bin = &r["binary"];
        assert_eq!(int(&bin["format"]), spec.format.code() as i64, "{name}");
        assert_eq!(int(&bin["samples"]), spec.samples as i64, "{name}");
        assert_eq!(
            int(&bin["interval_us"]),
            spec.sample_interval_us as i64,
            "{name}"
        );
        assert_eq!(int(&bin["revision"]), spec.revision as i64, "{name}");
        assert_eq!(int(&bin["fixed_length"]), 1, "{name}");
        assert_eq!(int(&bin["ext_samples"]), 0, "{name}");
        let order = if spec.byte_order == ByteOrder::Big {
            "big"
        } else {
            "little"
        };
        assert_eq!(r["endian"], order, "{name}");
        // segyio decodes EBCDIC itself; an ASCII header is recorded as its bytes.
        let text: String = spec.text.iter().map(|l| format!("{l:80}")).collect();
        assert_eq!(
            r["text"].as_str().unwrap(),
            format!("{text:3200}"),
            "{name}"
        );
        let times = r["times_ms"].as_array().unwrap();
        assert_eq!(times[0].as_f64().unwrap(), spec.delay_ms as f64, "{name}");
        for (k, (t, &(il, xl, x, y))) in r["traces"]
            .as_array()
            .unwrap()
            .iter()
            .zip(&nodes)
            .enumerate()
        {
            assert_eq!(int(&t["inline"]), il as i64, "{name} trace {k}");
            assert_eq!(int(&t["crossline"]), xl as i64, "{name} trace {k}");
            assert_eq!(
                int(&t["scalar"]),
                spec.coordinate_scalar as i64,
                "{name} trace {k}"
            );
            assert_eq!(
                scaled(int(&t["x"]), int(&t["scalar"])),
                x,
                "{name} trace {k}"
            );
            assert_eq!(
                scaled(int(&t["y"]), int(&t["scalar"])),
                y,
                "{name} trace {k}"
            );
            assert_eq!(int(&t["samples"]), spec.samples as i64, "{name} trace {k}");
            assert_eq!(
                int(&t["interval_us"]),
                spec.sample_interval_us as i64,
                "{name}"
            );
            assert_eq!(
                int(&t["delay_ms"]),
                spec.delay_ms as i64,
                "{name} trace {k}"
            );
            let given = writer_samples(spec.format, k, spec.samples);
            for (i, (d, &g)) in t["data"].as_array().unwrap().iter().zip(&given).enumerate() {
                let read = d.as_f64().unwrap() as f32;
                let want = match spec.format {
                    // IBM floats hold 21 to 24 significant bits: segyio must read the value
                    // our conversion rounded to, within 2^-21 of the one given.
                    SampleFormat::Ibm => {
                        assert!((read - g).abs() <= g.abs() * 2f32.powi(-21), "{name}");
                        ibm_to_f32(f32_to_ibm(g).unwrap())
                    }
                    _ => g,
                };
                assert_eq!(read, want, "{name} trace {k} sample {i}");
            }
        }
    }
}
