//! Small text tables: `Table::parse` and every lookup on what it returns must not panic.
#![no_main]

use flexure_engine::io::table::Table;
use flexure_engine::wells::trajectory::{AZI, INC, MD, MD_BASE, MD_TOP, STAGE, TVD, TVDSS, X, Y};
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let Ok(table) = Table::parse(&text, Path::new("fuzz.csv")) else {
        return;
    };
    for spec in [AZI, INC, MD, MD_BASE, MD_TOP, STAGE, TVD, TVDSS, X, Y] {
        let _ = table.find(&spec);
        let _ = table.require(&spec);
    }
    for col in 0..table.columns.len() {
        let _ = table.unit(col);
        let _ = table.numbers(col);
        for row in 0..table.rows.len() {
            let _ = table.text(row, col);
            let _ = table.line(row);
        }
    }
});
