//! The shipped demo data (`demo_horizons/`) matches its generator bit for bit: every band of
//! every raster, every text file byte for byte (common practice for generated fixtures; the
//! generator is `flexure_cli::demo`, run by `make demo-data`).

mod common;

use common::band_bits;
use flexure_cli::demo::write_demo_data;
use std::path::Path;

#[test]
fn shipped_demo_data_matches_its_generator() {
    let dir = tempfile::tempdir().unwrap();
    let shipped = Path::new(env!("CARGO_MANIFEST_DIR")).join("../demo_horizons");
    for fresh in write_demo_data(dir.path()).unwrap() {
        let name = fresh.file_name().unwrap();
        let old = shipped.join(name);
        if fresh.extension().is_some_and(|e| e == "tif") {
            assert_eq!(
                band_bits(&fresh),
                band_bits(&old),
                "{name:?}: run `make demo-data`"
            );
        } else {
            let same = std::fs::read(&fresh).ok() == std::fs::read(&old).ok();
            assert!(same, "{name:?}: run `make demo-data`");
        }
    }
}
