//! Well and stage tables: a well table, then (after a line `%%`) a stage table, read and
//! checked as the stages job does; must not panic. The first byte picks the setting.
#![no_main]

use flexure_engine::io::table::Table;
use flexure_engine::wells::trajectory::{check_stages, read_stages, read_well, MdUnit, TieIn, WellSetting};
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let Some((&pick, rest)) = data.split_first() else {
        return;
    };
    let text = String::from_utf8_lossy(rest);
    let (well_text, stage_text) = text.split_once("\n%%\n").unwrap_or((&text, ""));
    let setting = WellSetting {
        wellhead: (pick & 1 != 0).then_some((500_000.0, 3_900_000.0)),
        kb: if pick & 2 != 0 { 25.0 } else { 0.0 },
        tie_in: (pick & 4 != 0).then_some(TieIn {
            md: None,
            x: 500_000.0,
            y: 3_900_000.0,
            tvd: 1000.0,
        }),
        md_unit: (pick & 8 != 0).then_some(MdUnit::Foot),
        azimuth_offset: if pick & 16 != 0 { 1.5 } else { 0.0 },
        metres_per_unit: if pick & 32 != 0 { 0.3048 } else { 1.0 },
    };
    let Ok(table) = Table::parse(well_text, Path::new("well.csv")) else {
        return;
    };
    let Ok(well) = read_well("w", &table, &setting) else {
        return;
    };
    let (lo, hi) = well.md_range();
    let _ = well.at(0.5 * (lo + hi));
    let _ = well.sample(lo, hi, (hi - lo) / 50.0 + 1.0);
    let Ok(stages) = Table::parse(stage_text, Path::new("stages.csv")) else {
        return;
    };
    if let Ok((list, _)) = read_stages(&stages, None, &well, setting.metres_per_unit) {
        let _ = check_stages(&list, &well, &stages);
    }
});
