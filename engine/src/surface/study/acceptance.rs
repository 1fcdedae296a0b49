//! The window study's acceptance test on generated horizons with the artefacts of real ones:
//! fold families of several widths with white picking noise, acquisition footprint (several
//! periods and amplitudes, both axes), picking busts (several rates and offsets) and their
//! combinations. The reference is the analytic attribute of the generated surface
//! (`synthetic`): each single window's true RMS error.
//!
//! Cases are drawn from a seeded stream: set 0 is the tuning set (the constants of the bust
//! test, the footprint test and the noise model were chosen looking at it only); set 1, with
//! other draws, is the acceptance set, not used for tuning.

use super::busts::{despike, BUST_FALSE_ALARM};
use super::footprint::tests::{add_stripes, correlated_noise};
use super::footprint::GridAxis;
use super::tests::{fold, grid, horizon, run, true_errors};
use crate::stats::SeededNoise;

/// Windows of the study (the issue's).
const WINDOWS: [usize; 8] = [3, 5, 7, 9, 11, 15, 21, 31];

/// One generated case.
#[derive(Debug)]
pub(super) struct Case {
    widths: [f64; 2],
    sigma: f64,
    stripes: Option<(GridAxis, f64, f64)>,
    busts: Option<(f64, f64)>,
    /// Width (cells) of the Gaussian smoothing that makes the noise correlated (white when
    /// `None`).
    correlation: Option<f64>,
    /// Structure a curvature map must not smear: a fault or a channel.
    structure: Option<Structure>,
    attribute: &'static str,
    seed: u64,
}

/// A fault added to a case's folds (the truth away from it stays the folds' curvature; the
/// cells within 4 of it are left out of the true error, where a curvature map of a step has no
/// true value to compare with).
#[derive(Clone, Copy, Debug)]
pub(super) enum Structure {
    /// An oblique fault step of this throw (m), no gap.
    Fault(f64),
    /// The same fault with a 2-cell gap of nulls along it.
    FaultGap(f64),
}

impl Structure {
    /// The depth added at (row, col) (NaN in a gap), and whether the cell lies within 4 cells
    /// of the structure.
    fn at(self, r: usize, c: usize) -> (f64, bool) {
        let (r, c) = (r as f64, c as f64);
        // Oblique line 2r + c = 200 (distance in cells: |2r + c - 200| / sqrt 5).
        let fault = (2.0 * r + c - 200.0) / 5f64.sqrt();
        match self {
            Structure::Fault(throw) => (throw * f64::from(fault >= 0.0), fault.abs() <= 4.0),
            Structure::FaultGap(throw) => match fault.abs() < 1.0 {
                true => (f64::NAN, true),
                false => (throw * f64::from(fault >= 0.0), fault.abs() <= 4.0),
            },
        }
    }
}

/// `n` cases of set `set`: white noise, footprint, busts and both, in turn.
pub(super) fn cases(set: u64, n: usize) -> Vec<Case> {
    let mut rng = SeededNoise::new(0xacce_0000 + set);
    let mut pick = |options: &[f64]| options[(rng.uniform() * options.len() as f64) as usize];
    (0..n)
        .map(|i| {
            let widths = [pick(&[200.0, 300.0, 450.0]), pick(&[600.0, 700.0, 1000.0])];
            let sigma = pick(&[0.1, 0.3, 0.6]);
            let axis = if pick(&[0.0, 1.0]) == 0.0 {
                GridAxis::Columns
            } else {
                GridAxis::Rows
            };
            let stripes = (i % 4 == 1 || i % 4 == 3)
                .then(|| (axis, pick(&[2.0, 3.0, 4.0, 6.0]), pick(&[0.2, 0.4, 0.6])));
            let busts = (i % 4 >= 2).then(|| (pick(&[0.002, 0.005, 0.01]), pick(&[3.0, 8.0])));
            let attribute = if pick(&[0.0, 1.0, 2.0]) < 2.0 {
                "k_mean"
            } else {
                "k_pos"
            };
            Case {
                widths,
                sigma,
                stripes,
                busts,
                correlation: None,
                structure: None,
                attribute,
                seed: 1000 * (set + 1) + i as u64,
            }
        })
        .collect()
}

/// Runs a case: the steps between the recommended window and the one of least true error,
/// and both windows.
pub(super) fn steps_off(case: &Case) -> (usize, usize, usize) {
    let g = grid(140);
    let shapes = vec![
        fold((1300.0, 8700.0), 35.0, case.widths[0], true),
        fold((2500.0, 7800.0), 115.0, case.widths[1], false),
    ];
    let white = if case.correlation.is_some() {
        0.0
    } else {
        case.sigma
    };
    let (mut z, surface) = horizon(&g, shapes, white, case.seed);
    if let Some(width) = case.correlation {
        z += &correlated_noise(z.nrows(), width, case.sigma, case.seed);
    }
    let mut near_structure = ndarray::Array2::from_elem(z.dim(), false);
    if let Some(structure) = case.structure {
        for ((r, c), v) in z.indexed_iter_mut() {
            let (added, near) = structure.at(r, c);
            *v += added;
            near_structure[(r, c)] = near;
        }
    }
    if let Some((axis, period, amplitude)) = case.stripes {
        add_stripes(&mut z, axis, period, amplitude, 0.9);
    }
    if let Some((rate, size)) = case.busts {
        let mut rng = SeededNoise::new(case.seed + 77);
        for v in z.iter_mut() {
            if rng.uniform() < rate {
                *v += if rng.uniform() < 0.5 { size } else { -size };
            }
        }
    }
    // As the job does: busts set null before the study.
    despike(&mut z, &g, BUST_FALSE_ALARM).unwrap();
    let s = run(&z, &g, &WINDOWS, case.attribute);
    let errors = true_errors(&s, &g, &surface, case.attribute, Some(&near_structure));
    let best = (0..WINDOWS.len())
        .min_by(|a, b| errors[*a].total_cmp(&errors[*b]))
        .unwrap();
    let rec = WINDOWS.iter().position(|w| *w == s.recommended).unwrap();
    (rec.abs_diff(best), WINDOWS[rec], WINDOWS[best])
}

#[test]
fn recommendation_on_real_horizon_artefacts_is_near_the_true_best() {
    // The issue's acceptance check on 36 cases of set 1 (not used for tuning): the recommended
    // window is within one step of the least-true-error window in at least 90% of the cases
    // and never more than two steps off.
    let cases = cases(1, 36);
    let results: Vec<(usize, usize, usize)> = cases.iter().map(steps_off).collect();
    let within_one = results.iter().filter(|r| r.0 <= 1).count();
    let report: Vec<String> = (cases.iter().zip(&results))
        .filter(|(_, r)| r.0 > 1)
        .map(|(c, r)| format!("{c:?}: recommended {} best {}", r.1, r.2))
        .collect();
    assert!(
        within_one as f64 >= 0.9 * cases.len() as f64,
        "{within_one} of {} within one step; off: {report:#?}",
        cases.len()
    );
    assert!(results.iter().all(|r| r.0 <= 2), "{report:#?}");
}

#[test]
fn the_issues_three_horizons() {
    // The horizons the issue reported (folds 300 to 700 m, 0.3 m of picking noise, plus 0.6 m
    // stripes every 4 bins along one axis, or 0.2% of the picks off by 8 m), on which the
    // study used to recommend windows 5 and 3 against a best of 21: now within one step of the
    // least-true-error window (analytic reference, as above). Checked to fail without the new
    // parts: without the bust test the bust case recommends 3 against a best of 15, without
    // the footprint model the first stripes case 5 against 15.
    for (k, (stripes, busts)) in [
        (None, None),
        (Some((GridAxis::Columns, 4.0, 0.6)), None),
        (Some((GridAxis::Rows, 4.0, 0.6)), None),
        (None, Some((0.002, 8.0))),
    ]
    .into_iter()
    .enumerate()
    {
        let case = Case {
            widths: [300.0, 700.0],
            sigma: 0.3,
            stripes,
            busts,
            correlation: None,
            structure: None,
            attribute: "k_mean",
            seed: 77 + k as u64,
        };
        let (off, recommended, best) = steps_off(&case);
        assert!(off <= 1, "{case:?}: recommended {recommended}, best {best}");
    }
}

#[test]
fn recommendation_on_correlated_noise_is_near_the_true_best() {
    // Correlated picking noise (white noise smoothed by Gaussians of 0.5 to 1.5 cells, the
    // test's own generator; nothing was tuned on these cases): the recommended window is
    // within one step of the least-true-error window (analytic reference) in at least 90% of
    // 12 cases and never more than two steps off. Modelled as white, the study recommended 3
    // to 5 on such horizons where 21 to 31 were best.
    let mut rng = SeededNoise::new(0xc0de);
    let mut pick = |options: &[f64]| options[(rng.uniform() * options.len() as f64) as usize];
    let cases: Vec<Case> = (0..12)
        .map(|i| Case {
            widths: [pick(&[200.0, 300.0, 450.0]), pick(&[600.0, 700.0, 1000.0])],
            sigma: pick(&[0.1, 0.3, 0.6]),
            stripes: None,
            busts: None,
            correlation: Some([0.5, 0.8, 1.2, 1.5][i % 4]),
            structure: None,
            attribute: if i % 3 == 2 { "k_pos" } else { "k_mean" },
            seed: 5000 + i as u64,
        })
        .collect();
    let results: Vec<(usize, usize, usize)> = cases.iter().map(steps_off).collect();
    let within_one = results.iter().filter(|r| r.0 <= 1).count();
    let report: Vec<String> = (cases.iter().zip(&results))
        .map(|(c, r)| format!("{c:?}: recommended {} best {}", r.1, r.2))
        .collect();
    assert!(
        within_one >= 11,
        "{within_one} of 12 within one step: {report:#?}"
    );
    assert!(results.iter().all(|r| r.0 <= 2), "{report:#?}");
}

#[test]
fn recommendation_on_gapped_and_noise_free_horizons() {
    // A fault with a 2-cell gap of nulls along it (as interpreted horizons carry faults) at
    // three noise levels, and noise-free folds with and without a fault step: the recommended
    // window is within one step of the least-true-error window (analytic reference; cells
    // within 4 of the fault left out). Before the recommendation left out the cells whose
    // next window had no fit, the gapped cases recommended 7 against a best of 31.
    for (k, (structure, sigma)) in [
        (Some(Structure::FaultGap(10.0)), 0.1),
        (Some(Structure::FaultGap(10.0)), 0.3),
        (Some(Structure::FaultGap(10.0)), 0.6),
        (None, 0.0),
        (Some(Structure::Fault(10.0)), 0.0),
    ]
    .into_iter()
    .enumerate()
    {
        let case = Case {
            widths: [300.0, 700.0],
            sigma,
            stripes: None,
            busts: None,
            correlation: None,
            structure,
            attribute: "k_mean",
            seed: 900 + k as u64,
        };
        let (off, recommended, best) = steps_off(&case);
        assert!(off <= 1, "{case:?}: recommended {recommended}, best {best}");
    }
}

#[test]
#[ignore = "the tuning set: run by hand (cargo test -- --ignored tuning_set) to print it"]
fn tuning_set() {
    for c in cases(0, 36) {
        let r = steps_off(&c);
        println!("{c:?}: off {} (recommended {} best {})", r.0, r.1, r.2);
    }
}
