//! Well trajectories against outside references, read through the tolerant table reader:
//! station positions of the ISCWSA standard well set (rev 4, 2017; published to 0.01 m, so a
//! correct minimum-curvature code agrees to about 0.007 m), and positions between stations
//! against an independent well-path library (wellpathpy 0.5.2 arc resampling,
//! `tests/data/iscwsa/midpoints.csv`, made by `scripts/reference/well_midpoints.py`).

use flexure_engine::io::table::Table;
use flexure_engine::wells::trajectory::{read_well, TieIn, Well, WellSetting};
use std::path::{Path, PathBuf};

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/iscwsa")
        .join(name)
}

/// The published (md, north, east, tvd) of every station of an ISCWSA file.
fn published(name: &str) -> Vec<[f64; 4]> {
    let t = Table::read(&data(name)).unwrap();
    let col = |n: &str| t.columns.iter().position(|c| c.key == n).unwrap();
    let (md, north, east, tvd) = (col("md"), col("north"), col("east"), col("tvd"));
    (0..t.rows.len())
        .map(|r| [md, north, east, tvd].map(|c| t.number(r, c).unwrap()))
        .collect()
}

fn setting(wellhead: Option<(f64, f64)>, tie_in: Option<TieIn>) -> WellSetting {
    WellSetting {
        wellhead,
        kb: 0.0,
        tie_in,
        md_unit: None,
        azimuth_offset: 0.0,
        metres_per_unit: 1.0,
    }
}

fn well(name: &str, s: &WellSetting) -> Well {
    read_well(name, &Table::read(&data(name)).unwrap(), s).unwrap()
}

/// Largest difference between computed stations and the published positions.
fn worst_station_error(w: &Well, table: &[[f64; 4]]) -> f64 {
    w.stations
        .iter()
        .zip(table)
        .map(|(s, &[md, n, e, v])| {
            assert_eq!(s.md, md);
            (s.x - e).abs().max((s.y - n).abs()).max((s.tvd - v).abs())
        })
        .fold(0.0, f64::max)
}

#[test]
fn stations_match_the_published_iscwsa_positions() {
    // ISCWSA rev 4 tables: the Reference well (horizontal lateral), 03 and 04 (build and
    // turn, 04 turning while horizontal) start at md 0 at their first row's north/east.
    for name in ["Reference_well.csv", "03_well.csv", "04_well.csv"] {
        let table = published(name);
        let head = (table[0][2], table[0][1]);
        let w = well(name, &setting(Some(head), None));
        assert_eq!(w.stations.len(), table.len());
        let err = worst_station_error(&w, &table);
        assert!(err < 0.007, "{name}: worst station error {err} m");
        // The published tvd column is not used but compared: within the same 0.007 m.
        let note = w
            .notes
            .iter()
            .find(|n| n.contains("tvd column is not used"))
            .unwrap();
        let by: f64 = note
            .split("by up to ")
            .nth(1)
            .unwrap()
            .split(' ')
            .next()
            .unwrap()
            .parse()
            .unwrap();
        assert!(by < 0.007, "{note}");
    }
}

#[test]
fn a_sidetrack_is_placed_at_its_tie_in() {
    // ISCWSA rev 4 well 10 is tied on at MD 900 (its first row): refused without a tie-in,
    // and with it every station matches the published positions.
    let name = "10_well.csv";
    let table = published(name);
    let t = Table::read(&data(name)).unwrap();
    let e = read_well(name, &t, &setting(Some((0.0, 0.0)), None))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("line 2: the survey starts at md 900, not 0"),
        "{e}"
    );
    let [md, north, east, tvd] = table[0];
    let tie = TieIn {
        md: Some(md),
        x: east,
        y: north,
        tvd,
    };
    let w = well(name, &setting(None, Some(tie)));
    let err = worst_station_error(&w, &table);
    assert!(err < 0.007, "worst station error {err} m");
}

/// wellpathpy's reference points: (well file, md, north, east, tvd).
fn midpoints() -> Vec<(String, [f64; 4])> {
    let t = Table::read(&data("midpoints.csv")).unwrap();
    (0..t.rows.len())
        .map(|r| {
            (
                t.text(r, 0).to_string() + ".csv",
                [1, 2, 3, 4].map(|c| t.number(r, c).unwrap()),
            )
        })
        .collect()
}

#[test]
fn positions_between_stations_follow_the_arc() {
    // wellpathpy 0.5.2 arc resampling (an independent construction: spherical interpolation
    // of positions about the arc's centre) at quarter, half and three-quarter points of every
    // curved course of ISCWSA wells 03 and 04: agreement to 1e-6 m. Straight chords between
    // the stations miss the arc by up to about course length x dogleg / 8 and fail the check.
    let reference = midpoints();
    assert!(reference.len() > 100);
    let mut worst_arc: f64 = 0.0;
    let mut worst_chord: f64 = 0.0;
    for name in ["03_well.csv", "04_well.csv"] {
        let w = well(name, &setting(Some((0.0, 0.0)), None));
        for (_, [md, n, e, v]) in reference.iter().filter(|(w, _)| w == name) {
            let p = w.at(*md).unwrap();
            worst_arc = worst_arc.max((p.x - e).abs().max((p.y - n).abs()).max((p.tvd - v).abs()));
            let k = w.stations.partition_point(|s| s.md <= *md);
            let (a, b) = (w.stations[k - 1], w.stations[k]);
            let f = (md - a.md) / (b.md - a.md);
            let chord = [
                a.x + f * (b.x - a.x),
                a.y + f * (b.y - a.y),
                a.tvd + f * (b.tvd - a.tvd),
            ];
            worst_chord = worst_chord.max(
                (chord[0] - e)
                    .abs()
                    .max((chord[1] - n).abs())
                    .max((chord[2] - v).abs()),
            );
        }
    }
    assert!(worst_arc < 1e-6, "arc: worst error {worst_arc} m");
    assert!(
        worst_chord > 1e-2,
        "chords should miss the arc: {worst_chord} m"
    );
}
