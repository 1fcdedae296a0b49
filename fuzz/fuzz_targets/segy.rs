//! SEG-Y volumes: opening any bytes as a SEG-Y file, placing its traces on their lattice and
//! reading a window of its first trace must each return Ok or a one-line Err, never panic.
//! The first byte picks the trace header byte positions (standard, or the 9/21/73/77 of the
//! `int16_custom_bytes` fixture) and the window; the rest is the file.
#![no_main]

use flexure_engine::error::FlexureError;
use flexure_engine::io::segy::{SegyHeaderBytes, SegyVolume};
use libfuzzer_sys::fuzz_target;

fn one_line(e: FlexureError) {
    assert_eq!(e.to_string().lines().count(), 1, "{e}");
}

fuzz_target!(|data: &[u8]| {
    let Some((&pick, rest)) = data.split_first() else {
        return;
    };
    // The reader reads files: one per fuzzing process, rewritten for each input.
    let path = std::env::temp_dir().join(format!("flexure-fuzz-segy-{}.sgy", std::process::id()));
    std::fs::write(&path, rest).unwrap();
    let bytes = match pick % 2 {
        0 => SegyHeaderBytes::default(),
        _ => SegyHeaderBytes {
            inline: 9,
            crossline: 21,
            x: 73,
            y: 77,
            scalar: 71,
        },
    };
    match SegyVolume::open(&path, &bytes) {
        Ok(mut v) => {
            if let Err(e) = v.lattice(0.05) {
                one_line(e);
            }
            let first = pick as usize % v.samples();
            let mut window = vec![0f32; 1 + pick as usize / 2];
            if let Err(e) = v.read_samples(0, first, &mut window) {
                one_line(e);
            }
        }
        Err(e) => one_line(e),
    }
});
