//! Picking busts: single picks far off the local surface, found as robust outliers of local
//! quadric-fit residuals and set null.
//!
//! Each cell's 5 x 5 quadric fit (masked where cells are null) gives the centre residual
//! `r = z - f`; under white noise of variance `sigma^2` it has variance `sigma^2 (1 - h)`, `h`
//! the centre's leverage, which is the noise power of the fitted value `f` (hat matrices are
//! symmetric and idempotent, so `sum_j H_cj^2 = H_cc`). The standardised residual
//! `u = r / sqrt(1 - h)` is compared with a robust scale, `1.4826 x` the median absolute
//! deviation of all `u` (Hampel 1974, from memory). A cell is a bust when `|u|` exceeds
//! `t` scales, `t` the two-sided Gaussian quantile of the stated per-cell false-alarm rate, and
//! `|u|` is the largest in its 3 x 3 neighbourhood: a bust of offset `B` leaves `(1 - h) B` in
//! its own residual but also pulls its neighbours' fits (their residuals take a share of `-B`
//! of at most the largest off-centre hat entry), so the neighbour with the largest `|u|` is
//! the bust itself. The busts found are set null and the fits repeated (at most
//! [`MAX_PASSES`] passes) so that busts next to busts are found once their neighbour is gone;
//! each pass takes the scale afresh, so busts found no longer inflate it.

use crate::error::Result;
use crate::grid::GridGeometry;
use crate::stats::{median_and_mad, MAD_TO_SD};
use crate::surface::window::{WindowFit, WindowSpec};
use ndarray::Array2;
use rayon::prelude::*;
use serde::Serialize;
use statrs::distribution::{ContinuousCDF, Normal};

/// Default per-cell false-alarm rate of the bust test under Gaussian noise (our choice: about
/// one false bust in 100 000 cells, so a 1000 x 1000 survey loses about 10 good picks).
pub const BUST_FALSE_ALARM: f64 = 1e-5;

/// Most passes of detection and refit.
pub const MAX_PASSES: usize = 4;

/// Window edge length of the residual fits, in cells.
pub const BUST_WINDOW: usize = 5;

/// Name of the bust test, for reports.
pub const BUST_TEST: &str = "5 x 5 quadric-fit centre residual / sqrt(1 - leverage) beyond the two-sided Gaussian quantile of the false-alarm rate times 1.4826 MAD, largest in its 3 x 3 neighbourhood, with at most 2 other cells of its 5 x 5 window above half its residual (lines of large residuals are faults, hinges or channels), in windows the input's nulls do not cut in two (fault gaps); refitted without the busts found (up to 4 passes)";

/// One bust.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Bust {
    /// Grid row.
    pub row: usize,
    /// Grid column.
    pub col: usize,
    /// Offset of the pick from the surface fitted around it, `r / (1 - h)`, in the depth
    /// unit (CRS units, positive down: the pick lies deeper than its surroundings).
    pub offset: f64,
    /// `|u|` in robust scales (see the module notes).
    pub score: f64,
}

/// The busts of a horizon and the test that found them.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Busts {
    /// The busts, in the order found (pass, then row-major).
    pub cells: Vec<Bust>,
    /// Robust scale of the standardised residuals, in the depth unit (an estimate of the
    /// picking noise's standard deviation).
    pub scale: f64,
    /// Threshold on `|u|`, in scales.
    pub threshold: f64,
    /// Per-cell false-alarm rate the threshold is set for.
    pub false_alarm: f64,
}

/// Finds the busts of `depth` (positive down, CRS units; NaN = null) at the per-cell
/// `false_alarm` rate (in (0, 1)) and sets them null in place (see the module notes). No busts
/// where no cell has a 5 x 5 fit.
pub fn despike(
    depth: &mut Array2<f64>,
    geometry: &GridGeometry,
    false_alarm: f64,
) -> Result<Busts> {
    let threshold = Normal::new(0.0, 1.0)
        .map(|n| n.inverse_cdf(1.0 - false_alarm / 2.0))
        .unwrap_or(f64::INFINITY);
    let mut found = Busts {
        cells: Vec::new(),
        scale: f64::NAN,
        threshold,
        false_alarm,
    };
    if depth.nrows() < BUST_WINDOW || depth.ncols() < BUST_WINDOW {
        return Ok(found);
    }
    // Cells whose window the input's nulls cut in two (a fault gap) are not tested: a quadric
    // fitted across a gap models neither fault block, and its residuals there are misfit, not
    // busts. Windows with scattered nulls or a hole's edge are tested on their valid cells.
    let testable = not_cut_by_nulls(depth);
    // Busts found by the previous pass (none before the first).
    let mut last_pass = usize::MAX;
    for _ in 0..MAX_PASSES {
        let (u, offsets) = standardised_residuals(depth, geometry)?;
        let mut finite: Vec<f64> = u.iter().copied().filter(|v| v.is_finite()).collect();
        found.scale = median_and_mad(&mut finite).map_or(f64::NAN, |(_, mad)| MAD_TO_SD * mad);
        let limit = threshold * found.scale;
        if limit.is_nan() || limit <= 0.0 {
            break;
        }
        let mut new = local_peaks(&u, limit);
        new.retain(|&cell| testable[cell]);
        if let Some(previous) = found.cells.len().checked_sub(last_pass) {
            let near = |&(r, c): &(usize, usize)| {
                (found.cells[previous..].iter()).any(|b| {
                    b.row.abs_diff(r) <= BUST_WINDOW / 2 && b.col.abs_diff(c) <= BUST_WINDOW / 2
                })
            };
            new.retain(near);
        }
        last_pass = new.len();
        if new.is_empty() {
            break;
        }
        for &(row, col) in &new {
            depth[(row, col)] = f64::NAN;
            found.cells.push(Bust {
                row,
                col,
                offset: offsets[(row, col)],
                score: u[(row, col)].abs() / found.scale,
            });
        }
    }
    Ok(found)
}

/// The standardised centre residual `u = (z - f) / sqrt(1 - h)` of every cell's 5 x 5 fit and
/// the offset `(z - f) / (1 - h)` (NaN where the cell is null or has no fit); the fits need
/// half the window valid.
fn standardised_residuals(
    depth: &Array2<f64>,
    geometry: &GridGeometry,
) -> Result<(Array2<f64>, Array2<f64>)> {
    let spec = WindowSpec {
        size: BUST_WINDOW,
        min_valid: 0.5,
    };
    let value = [[0.0, 0.0, 0.0, 0.0, 0.0, 1.0]];
    let fit = WindowFit::new(depth.view(), geometry, &spec, &value)?;
    let tiles = fit.map_tiles(0..depth.nrows(), |tile| {
        let at = |i: usize| (tile.first_row + i / tile.cols, i % tile.cols);
        (tile.cells.iter().enumerate())
            .map(|(i, c)| match c {
                Some((q, h)) if *h < 1.0 => {
                    let r = depth[at(i)] - q.f;
                    (r / (1.0 - h).sqrt(), r / (1.0 - h))
                }
                _ => (f64::NAN, f64::NAN),
            })
            .collect::<Vec<(f64, f64)>>()
    });
    let (u, offsets): (Vec<f64>, Vec<f64>) = tiles.into_iter().flatten().unzip();
    let grid = |v| Array2::from_shape_vec(depth.dim(), v).expect("rows x cols residuals");
    Ok((grid(u), grid(offsets)))
}

/// Whether each valid cell's `BUST_WINDOW` window is not cut by nulls: every valid cell of
/// the window is reached from the centre through valid cells of the window (4-neighbours).
/// A window cut in two reaches across a gap (a fault gap), whose far side the quadric cannot
/// share; scattered nulls or the edge of a hole leave it whole, and the masked fit holds.
/// Windows holding no null inside the grid are whole (the grid's edge clips them to a
/// rectangle) and are not searched.
fn not_cut_by_nulls(depth: &Array2<f64>) -> Array2<bool> {
    let (rows, cols) = depth.dim();
    let half = BUST_WINDOW / 2;
    // Per row, the number of invalid cells before each column.
    let before: Vec<Vec<u32>> = depth
        .rows()
        .into_iter()
        .map(|row| {
            let counts = row.iter().scan(0, |n, v| {
                *n += u32::from(!v.is_finite());
                Some(*n)
            });
            std::iter::once(0).chain(counts).collect()
        })
        .collect();
    let holds_nulls = |r: usize, c: usize| {
        let span = c.saturating_sub(half)..(c + half + 1).min(cols);
        (r.saturating_sub(half)..(r + half + 1).min(rows))
            .any(|rr| before[rr][span.end] > before[rr][span.start])
    };
    let whole: Vec<bool> = (0..rows)
        .into_par_iter()
        .flat_map_iter(|r| {
            (0..cols).map(move |c| {
                !depth[(r, c)].is_nan() && (!holds_nulls(r, c) || reached_whole(depth, r, c))
            })
        })
        .collect();
    Array2::from_shape_vec((rows, cols), whole).expect("rows x cols flags")
}

/// Whether every valid cell of the `BUST_WINDOW` window centred on (r, c) is reached from the
/// centre through valid cells of the window (4-neighbours; cells outside the grid are nulls).
fn reached_whole(depth: &Array2<f64>, r: usize, c: usize) -> bool {
    let (rows, cols) = depth.dim();
    let half = (BUST_WINDOW / 2) as isize;
    let edge = BUST_WINDOW;
    let valid = |dr: isize, dc: isize| {
        let (rr, cc) = (r as isize + dr, c as isize + dc);
        (0..rows as isize).contains(&rr)
            && (0..cols as isize).contains(&cc)
            && depth[(rr as usize, cc as usize)].is_finite()
    };
    let index = |dr: isize, dc: isize| ((dr + half) as usize) * edge + (dc + half) as usize;
    let mut reached = [false; BUST_WINDOW * BUST_WINDOW];
    let mut stack = vec![(0isize, 0isize)];
    reached[index(0, 0)] = true;
    while let Some((dr, dc)) = stack.pop() {
        for (nr, nc) in [(dr - 1, dc), (dr + 1, dc), (dr, dc - 1), (dr, dc + 1)] {
            let inside = nr.abs() <= half && nc.abs() <= half;
            if inside && !reached[index(nr, nc)] && valid(nr, nc) {
                reached[index(nr, nc)] = true;
                stack.push((nr, nc));
            }
        }
    }
    (-half..=half)
        .flat_map(|dr| (-half..=half).map(move |dc| (dr, dc)))
        .all(|(dr, dc)| !valid(dr, dc) || reached[index(dr, dc)])
}

/// Cells (row, column) whose `|u|` exceeds `limit`, is the largest in their 3 x 3
/// neighbourhood (ties go to the first in row-major order) and is not part of a line of large
/// residuals (see [`MAX_COMPANY`]).
fn local_peaks(u: &Array2<f64>, limit: f64) -> Vec<(usize, usize)> {
    let (rows, cols) = u.dim();
    let mut out = Vec::new();
    for ((r, c), &v) in u.indexed_iter() {
        if v.is_nan() || v.abs() <= limit {
            continue;
        }
        let beaten = (r.saturating_sub(1)..(r + 2).min(rows))
            .flat_map(|rr| (c.saturating_sub(1)..(c + 2).min(cols)).map(move |cc| (rr, cc)))
            .filter(|&at| at != (r, c))
            .any(|(rr, cc)| {
                let w = u[(rr, cc)].abs();
                w > v.abs() || (w == v.abs() && (rr, cc) < (r, c))
            });
        let half = BUST_WINDOW / 2;
        let company = (r.saturating_sub(half)..(r + half + 1).min(rows))
            .flat_map(|rr| {
                (c.saturating_sub(half)..(c + half + 1).min(cols)).map(move |cc| (rr, cc))
            })
            .filter(|&at| at != (r, c) && u[at].abs() > LINE_SHARE * v.abs())
            .count();
        if !beaten && company <= MAX_COMPANY {
            out.push((r, c));
        }
    }
    out
}

/// A cell is a bust only if at most this many other cells of its window also stand out
/// (residual above [`LINE_SHARE`] of its own): a pick off by itself is a point (it pulls its
/// neighbours' residuals only to a fraction of its own), while a fault step, a fold hinge or a
/// channel leaves a line of comparable residuals that is structure.
const MAX_COMPANY: usize = 2;
/// Share of the cell's residual above which another cell of its window counts as standing out.
const LINE_SHARE: f64 = 0.5;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::SeededNoise;
    use crate::surface::study::tests::{fold, grid, horizon};

    /// A fold family 300 to 700 m wide (the horizons) with white noise `sigma`.
    fn folds(n: usize, sigma: f64, seed: u64) -> (GridGeometry, Array2<f64>) {
        let g = grid(n);
        let shapes = vec![
            fold((1200.0, 8800.0), 25.0, 300.0, true),
            fold((2600.0, 7600.0), 120.0, 700.0, false),
        ];
        let (z, _) = horizon(&g, shapes, sigma, seed);
        (g, z)
    }

    /// How many of the `planted` cells were found; asserts at least 90% (the rate).
    fn found_at_least_90_percent(planted: &[(usize, usize)], busts: &Busts, case: &str) -> usize {
        let found = (planted.iter())
            .filter(|at| busts.cells.iter().any(|b| (b.row, b.col) == **at))
            .count();
        assert!(
            found as f64 >= 0.9 * planted.len() as f64,
            "{case}: {found} of {} found",
            planted.len()
        );
        found
    }

    #[test]
    fn planted_busts_are_found() {
        // The check: at least 90% of planted busts found, at rates of 0.2% and 1% of
        // the picks and offsets of 3 to 8 m (10 to 27 noise sd at 0.3 m; 8 sd at 1 m). The
        // offsets are planted values (the reference), signs random.
        for (k, (rate, size, sigma)) in [
            (0.002, 8.0, 0.3),
            (0.01, 8.0, 0.3),
            (0.002, 3.0, 0.3),
            (0.01, 5.0, 0.3),
            (0.005, 8.0, 1.0),
        ]
        .into_iter()
        .enumerate()
        {
            let (g, mut z) = folds(160, sigma, 70 + k as u64);
            let mut rng = SeededNoise::new(170 + k as u64);
            let mut planted = Vec::new();
            for ((r, c), v) in z.indexed_iter_mut() {
                if rng.uniform() < rate {
                    *v += if rng.uniform() < 0.5 { size } else { -size };
                    planted.push((r, c));
                }
            }
            let busts = despike(&mut z, &g, BUST_FALSE_ALARM).unwrap();
            let found = found_at_least_90_percent(&planted, &busts, &format!("case {k}"));
            // Every bust found was planted or is within the stated false-alarm rate.
            let false_busts = busts.cells.len() - found;
            assert!(
                (false_busts as f64) <= (1e-3 * z.len() as f64).max(2.0),
                "case {k}: {false_busts} false busts"
            );
            // Found offsets of busts with no other within the 5 x 5 window are the planted ones
            // within 4 noise sd.
            let alone = |b: &&Bust| {
                planted.contains(&(b.row, b.col))
                    && (planted.iter())
                        .filter(|(r, c)| r.abs_diff(b.row) <= 2 && c.abs_diff(b.col) <= 2)
                        .count()
                        == 1
            };
            for b in busts.cells.iter().filter(alone) {
                assert!((b.offset.abs() - size).abs() < 4.0 * sigma, "{b:?}");
            }
            // The noise scale is recovered within 10% (Hampel's MAD is robust to the busts).
            assert!(
                (busts.scale / sigma - 1.0).abs() < 0.1,
                "scale {}",
                busts.scale
            );
        }
    }

    #[test]
    fn windows_without_nulls_skip_the_search_and_nothing_else_changes() {
        // The definition (the 4-neighbour search of every window) against the shortcut that
        // skips windows holding no null, on a grid with scattered nulls, a hole, a diagonal
        // fault gap one cell wide and the grid's edges.
        let (rows, cols) = (40, 37);
        let mut rng = SeededNoise::new(41);
        let z = Array2::from_shape_fn((rows, cols), |(r, c)| {
            let gap = c == r / 2 + 5;
            let hole = (20..26).contains(&r) && (25..31).contains(&c);
            if gap || hole || rng.uniform() < 0.03 {
                f64::NAN
            } else if (r, c) == (3, 30) {
                f64::INFINITY
            } else {
                1.0
            }
        });
        let flags = not_cut_by_nulls(&z);
        // Windows the shortcut skips (no invalid cell inside the grid) exist.
        let skipped = (2..rows - 2)
            .flat_map(|r| (2..cols - 2).map(move |c| (r, c)))
            .filter(|&(r, c)| {
                z.slice(ndarray::s![r - 2..r + 3, c - 2..c + 3])
                    .iter()
                    .all(|v| v.is_finite())
            })
            .count();
        assert!(skipped > 100, "{skipped} windows without nulls");
        let definition = Array2::from_shape_fn((rows, cols), |(r, c)| {
            !z[(r, c)].is_nan() && reached_whole(&z, r, c)
        });
        assert_eq!(flags, definition);
        // The gap cuts windows in two, so both answers occur.
        assert!(
            flags.iter().any(|&f| f) && flags.iter().zip(&z).any(|(&f, v)| !f && v.is_finite())
        );
    }

    #[test]
    fn busts_beside_nulls_are_found_and_fault_gaps_stay_clear() {
        // Busts of 8 m (27 noise sd) planted right beside a hole of nulls (a 30 x 20 block)
        // and beside scattered missing picks (the planted cells are the reference): at least
        // 90% found. A fault gap (a 2-cell line of nulls with a 10 m throw across it) stays
        // free of busts within 2 cells (its windows are cut in two and not tested).
        let (g, mut z) = folds(160, 0.3, 95);
        for r in 40..70 {
            for c in 50..70 {
                z[(r, c)] = f64::NAN;
            }
        }
        let mut rng = SeededNoise::new(96);
        for r in (0..160).step_by(9) {
            for c in (100..150).step_by(7) {
                z[(r, c)] = f64::NAN;
            }
        }
        for ((r, c), v) in z.indexed_iter_mut() {
            if (2 * r + c).abs_diff(300) <= 1 {
                *v = f64::NAN;
            } else if 2 * r + c > 300 {
                *v += 10.0;
            }
        }
        let mut planted = Vec::new();
        for r in (42..68).step_by(5) {
            planted.push((r, 49));
            planted.push((r, 70));
        }
        for r in (0..150).step_by(18) {
            planted.push((r + 1, 114));
        }
        for &at in &planted {
            z[at] += if rng.uniform() < 0.5 { 8.0 } else { -8.0 };
        }
        let busts = despike(&mut z, &g, BUST_FALSE_ALARM).unwrap();
        found_at_least_90_percent(&planted, &busts, "beside nulls");
        let on_gap = (busts.cells.iter())
            .filter(|b| (2 * b.row + b.col).abs_diff(300) <= 2 * 3)
            .count();
        assert_eq!(on_gap, 0, "{:?}", busts.cells);
    }

    #[test]
    fn false_alarms_stay_below_the_stated_rate() {
        // The check: on bust-free horizons (folds plus Gaussian noise, eight seeds,
        // 320 000 cells) the share of cells called busts is below the stated per-cell rate.
        // The rate is set to 1e-3 so the count (expected below 320) is large enough to read;
        // the Gaussian tail (Normal quantile, statrs) is the reference.
        // At the shipped rate (1e-5) the expected count is at most 3.2: more than 9 has a
        // Poisson probability under 0.002 (Poisson tail, from memory).
        let (mut cells, mut busts, mut shipped) = (0usize, 0usize, 0usize);
        for seed in 0..8 {
            let (g, z) = folds(200, [0.1, 0.3, 1.0, 2.0][seed % 4], 900 + seed as u64);
            cells += z.len();
            busts += despike(&mut z.clone(), &g, 1e-3).unwrap().cells.len();
            shipped += despike(&mut z.clone(), &g, BUST_FALSE_ALARM)
                .unwrap()
                .cells
                .len();
        }
        assert!(
            (busts as f64) < 1e-3 * cells as f64,
            "{busts} false busts in {cells} cells"
        );
        assert!(shipped <= 9, "{shipped} false busts at the shipped rate");
    }

    #[test]
    fn faults_hinges_and_channels_are_structure_not_busts() {
        // A fault step of 15 m with no null gap, a chevron hinge (dip changing by 0.4 m per
        // cell across one column) and a channel 2 cells wide and 3 m deep, each on the fold
        // horizon with 0.3 m noise: a line of large residuals is structure, so at most 2 cells
        // along each feature may be called busts (the review of this test found 80 to 293).
        let n = 160;
        type Feature = (&'static str, fn(usize) -> f64);
        let features: [Feature; 3] = [
            ("fault", |c| if c >= 80 { 15.0 } else { 0.0 }),
            ("hinge", |c| 0.4 * (c as f64 - 80.0).abs()),
            ("channel", |c| if (80..82).contains(&c) { 3.0 } else { 0.0 }),
        ];
        for (k, (name, feature)) in features.into_iter().enumerate() {
            let (g, mut z) = folds(n, 0.3, 300 + k as u64);
            for ((_, c), v) in z.indexed_iter_mut() {
                *v += feature(c);
            }
            let busts = despike(&mut z, &g, BUST_FALSE_ALARM).unwrap();
            let on_feature = busts
                .cells
                .iter()
                .filter(|b| b.col.abs_diff(80) <= 3)
                .count();
            assert!(on_feature <= 2, "{name}: {on_feature} busts on the feature");
        }
    }
}
