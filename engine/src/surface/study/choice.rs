//! The per-cell window choice: the pooled squared change of the fitted derivatives between
//! consecutive windows as a ratio to its expectation under noise alone, and the sequential
//! choice that keeps a larger window while that ratio stays within the step's threshold.
//!
//! Everything works on a band of rows: the ratio of a cell reads the rows within
//! [`POOL_RADIUS`] of it, so a band that holds those rows (or reaches the grid's edge) gives
//! the cell the same bits as the whole grid would; the study streams the grid through it.

use super::thresholds::StepTest;
use super::Vectors;
use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use std::ops::Range;

/// Half width in cells of the box over which squared changes are pooled (a 13 x 13 box). Our
/// choice: wide enough that the noise of the smallest windows averages out, narrow enough to
/// keep a fold a few hundred metres wide apart from the flat ground beside it (chosen on
/// generated folds 100 to 1200 m wide on 25 m cells with 0.05 to 2 m of noise).
pub const POOL_RADIUS: usize = 6;

/// The pooled squared change between two windows' derivative vectors, less `known` (the
/// footprint's share, taken as known), as a ratio to its pooled expectation under white noise
/// alone, `expected` per cell (NaN where either window has no fit),
/// for the band rows `rows` (all arrays hold the same band of the grid, cut at the grid's
/// edges; `rows` must lie [`POOL_RADIUS`] inside the band's cuts that are not grid edges).
/// For nested least-squares fits the larger window is efficient, so the variance of the change
/// is the difference of the two variances (Hausman 1978, Econometrica 46:1251; from memory):
/// `expected = sigma^2 (P_smaller - P_larger)` with the cells' own (masked) noise powers.
pub(super) fn pooled_ratio(
    smaller: &Vectors,
    larger: &Vectors,
    expected: &Array2<f64>,
    known: f64,
    rows: Range<usize>,
) -> Array2<f64> {
    let squares = (0..3).fold(Array2::zeros(smaller[0].dim()), |acc, k| {
        let d = &larger[k] - &smaller[k];
        acc + &d * &d
    });
    let pooled = box_mean(&squares, POOL_RADIUS, rows.clone());
    let mean = box_mean(expected, POOL_RADIUS, rows);
    ndarray::Zip::from(&pooled)
        .and(&mean)
        .map_collect(|&v, &e| {
            let v = (v - known).max(0.0);
            if e > 0.0 {
                v / e
            } else if v > 0.0 {
                f64::INFINITY
            } else if v.is_finite() {
                0.0
            } else {
                f64::NAN
            }
        })
}

/// The per-cell window choice, made one window at a time: from the smallest window with a fit,
/// each next window is kept while it has a fit and its pooled ratio to the previous one is
/// within the step's threshold; once a cell stops, it keeps its window.
pub(super) struct Choice {
    /// Index of the window chosen so far (`None` before the first window with a fit).
    pub(super) chosen: Array2<Option<usize>>,
    /// Whether the cell may still take a larger window.
    open: Array2<bool>,
    /// Whether the cell stopped because the next window had no fit (a gap or edge within
    /// its reach, or too few valid cells), not by the test.
    pub(super) held_by_data: Array2<bool>,
}

impl Choice {
    pub(super) fn new(dim: (usize, usize)) -> Self {
        Self {
            chosen: Array2::from_elem(dim, None),
            open: Array2::from_elem(dim, true),
            held_by_data: Array2::from_elem(dim, false),
        }
    }

    /// Window `k`: `first` is any of its derivative maps (NaN where it has no fit), `ratio` the
    /// pooled ratio from window k - 1 and `step` that step's test (both `None` for k = 0).
    pub(super) fn step(
        &mut self,
        k: usize,
        first: ArrayView2<f64>,
        ratio: Option<&Array2<f64>>,
        step: Option<&StepTest>,
    ) {
        ndarray::Zip::indexed(&mut self.chosen)
            .and(&mut self.open)
            .and(&mut self.held_by_data)
            .for_each(|at, chosen, open, held| {
                let fitted = first[at].is_finite();
                match chosen {
                    None if fitted => *chosen = Some(k),
                    Some(_) if *open => {
                        let within = match (ratio, step) {
                            (Some(r), Some(s)) => r[at] <= s.threshold,
                            _ => false,
                        };
                        if fitted && within {
                            *chosen = Some(k);
                        } else {
                            *open = false;
                            *held = !fitted;
                        }
                    }
                    _ => {}
                }
            });
    }
}

/// Mean of the finite values of `values` in the `(2 radius + 1)^2` box around each cell of the
/// rows `out` (cut at the array's edges), NaN where the cell itself is not finite. Separable:
/// sums along rows, then down columns, each in a fixed order (the same bits for any thread
/// count, and for any band that holds the rows within `radius` of `out`).
fn box_mean(values: &Array2<f64>, radius: usize, out: Range<usize>) -> Array2<f64> {
    let (rows, cols) = values.dim();
    let span = |i: usize, n: usize| i.saturating_sub(radius)..(i + radius + 1).min(n);
    let read = out.start.saturating_sub(radius)..(out.end + radius).min(rows);
    let along_rows: Vec<Vec<(f64, f64)>> = read
        .clone()
        .into_par_iter()
        .map(|r| {
            (0..cols)
                .map(|c| {
                    span(c, cols)
                        .map(|cc| values[(r, cc)])
                        .filter(|v| v.is_finite())
                        .fold((0.0, 0.0), |(s, n), v| (s + v, n + 1.0))
                })
                .collect()
        })
        .collect();
    let means: Vec<Vec<f64>> = out
        .clone()
        .into_par_iter()
        .map(|r| {
            (0..cols)
                .map(|c| {
                    if !values[(r, c)].is_finite() {
                        return f64::NAN;
                    }
                    let (s, n) = span(r, rows).fold((0.0, 0.0), |(s, n), rr| {
                        let (rs, rn) = along_rows[rr - read.start][c];
                        (s + rs, n + rn)
                    });
                    s / n
                })
                .collect()
        })
        .collect();
    Array2::from_shape_vec((out.len(), cols), means.concat()).expect("rows x cols values")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::SeededNoise;

    #[test]
    fn box_mean_matches_direct_sums() {
        // Reference: the mean of the finite neighbours summed cell by cell (definition).
        let mut rng = SeededNoise::new(9);
        let v = Array2::from_shape_fn((23, 17), |_| {
            let x = rng.gaussian();
            if rng.uniform() < 0.2 {
                f64::NAN
            } else {
                x
            }
        });
        let got = box_mean(&v, 3, 0..23);
        // A band holding the rows within the radius gives its rows the same bits.
        let band = box_mean(&v.slice(ndarray::s![6..18, ..]).to_owned(), 3, 3..9);
        assert_eq!(
            format!("{band:?}"),
            format!("{:?}", got.slice(ndarray::s![9..15, ..]))
        );
        for ((r, c), g) in got.indexed_iter() {
            if !v[(r, c)].is_finite() {
                assert!(g.is_nan());
                continue;
            }
            let mut vals = Vec::new();
            for rr in r.saturating_sub(3)..=(r + 3).min(22) {
                for cc in c.saturating_sub(3)..=(c + 3).min(16) {
                    if v[(rr, cc)].is_finite() {
                        vals.push(v[(rr, cc)]);
                    }
                }
            }
            let want = vals.iter().sum::<f64>() / vals.len() as f64;
            assert!((g - want).abs() < 1e-12, "({r}, {c}): {g} vs {want}");
        }
    }
}
