//! Point lists: `parse_points` must return Ok or a one-line Err for any text, never panic.
//! The first byte picks the options (defaults, a sentinel, a coarse tolerance, or columns).
#![no_main]

use flexure_engine::io::points::{parse_points, ColumnRole, PointOptions};
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let Some((&pick, rest)) = data.split_first() else {
        return;
    };
    let text = String::from_utf8_lossy(rest);
    let mut options = PointOptions::default();
    match pick % 4 {
        1 => options.nodata = vec![-999.25, 0.0],
        2 => options.lattice_tolerance = 0.45,
        3 => {
            options.columns = Some(vec![
                ColumnRole::Inline,
                ColumnRole::Crossline,
                ColumnRole::X,
                ColumnRole::Y,
                ColumnRole::Value("z".into()),
            ])
        }
        _ => {}
    }
    if let Err(e) = parse_points(&text, Path::new("fuzz.txt"), &options) {
        assert_eq!(e.to_string().lines().count(), 1, "{e}");
    }
});
