//! Well lists (TOML, or CSV: the first byte picks) and the command-line values bound to
//! wells (`NAME=X,Y`, column lists): must not panic.
#![no_main]

use flexure_engine::io::points::ColumnRole;
use flexure_engine::jobs::{parse_numbers, parse_well_list, Named};
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let Some((&pick, rest)) = data.split_first() else {
        return;
    };
    let text = String::from_utf8_lossy(rest);
    let name = if pick & 1 == 0 {
        "wells.toml"
    } else {
        "wells.csv"
    };
    let _ = parse_well_list(&text, Path::new(name));
    let _ = Named::parse(&text, |v| parse_numbers(v, 2));
    let _ = ColumnRole::parse_list(&text);
});
