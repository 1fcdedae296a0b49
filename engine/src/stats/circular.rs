//! Circular and axial statistics (Mardia & Jupp 2000, Directional Statistics; Fisher 1993,
//! Statistical Analysis of Circular Data). Axial data (orientations, 0..180 degrees) are
//! handled by doubling the angles, summarising, and halving the mean back.
//!
//! - Weighted mean resultant: `C = sum w cos(k theta) / sum w`, `S` likewise,
//!   `R = sqrt(C^2 + S^2)`, mean direction `atan2(S, C) / k`, with `k = 360 / period`.
//! - Circular standard deviation `sqrt(-2 ln R)`, divided by `k` for axes.
//! - Rayleigh test of uniformity with Zar's approximation as used by CircStat (Berens 2009, J.
//!   Stat. Softw. 31(10)): `p = exp(sqrt(1 + 4n + 4(n^2 - Rn^2)) - (1 + 2n))`, `Rn = n R`.
//!   For weighted or spatially correlated samples `n` is the effective size
//!   `(sum w)^2 / sum w^2`; neighbouring map bins are correlated, so p is optimistic.
//! - A mean resultant length below [`RESULTANT_FLOOR`] means the angles cancel: the mean
//!   direction and standard deviation are undefined (NaN), not numbers from round-off.

/// Mean resultant lengths below this count as zero (angles that cancel). The angles and
/// weights flexure summarises come from float32 rasters (relative precision 6e-8), so each
/// unit vector of a (multiplied) angle is known to about 4e-7 and so is their weighted mean:
/// a resultant below 1e-6 cannot be told from exact cancellation, and its direction would be
/// round-off.
pub const RESULTANT_FLOOR: f64 = 1e-6;

/// Summary of weighted angles on a circle of `period` degrees (360 directions, 180 axes).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CircularSummary {
    /// Number of angles.
    pub n: usize,
    /// Effective sample size `(sum w)^2 / sum w^2`.
    pub n_eff: f64,
    /// Weighted mean direction in `0..period` degrees (NaN when `resultant_length` is below
    /// [`RESULTANT_FLOOR`]).
    pub mean: f64,
    /// Mean resultant length of the (multiplied) angles, 0..1.
    pub resultant_length: f64,
    /// Circular standard deviation in degrees of the original angles (NaN when
    /// `resultant_length` is below [`RESULTANT_FLOOR`]).
    pub circular_std: f64,
    /// Rayleigh p-value of uniformity with `n_eff` samples.
    pub rayleigh_p: f64,
}

/// Summarises `(angle_deg, weight)` pairs on a circle of `period` degrees; `None` without a
/// positive total weight. Non-finite angles or weights and non-positive weights are skipped.
pub fn summarise(samples: &[(f64, f64)], period: f64) -> Option<CircularSummary> {
    let k = 360.0 / period;
    let valid: Vec<(f64, f64)> = samples
        .iter()
        .copied()
        .filter(|&(a, w)| a.is_finite() && w.is_finite() && w > 0.0)
        .collect();
    let w_sum: f64 = valid.iter().map(|s| s.1).sum();
    if valid.is_empty() || w_sum <= 0.0 {
        return None;
    }
    let w2: f64 = valid.iter().map(|s| s.1 * s.1).sum();
    let (c, s) = valid.iter().fold((0.0, 0.0), |(c, s), &(a, w)| {
        let (sn, cs) = (k * a).to_radians().sin_cos();
        (c + w * cs, s + w * sn)
    });
    let (c, s) = (c / w_sum, s / w_sum);
    let r = c.hypot(s).min(1.0);
    let n_eff = w_sum * w_sum / w2;
    let defined = r >= RESULTANT_FLOOR;
    let mean = if defined {
        (s.atan2(c).to_degrees() / k).rem_euclid(period)
    } else {
        f64::NAN
    };
    Some(CircularSummary {
        n: valid.len(),
        n_eff,
        mean,
        resultant_length: r,
        circular_std: if defined {
            (-2.0 * r.ln()).sqrt().to_degrees() / k
        } else {
            f64::NAN
        },
        rayleigh_p: rayleigh_p(n_eff, r),
    })
}

/// Rayleigh p-value for `n` samples with mean resultant length `r` (Zar's approximation).
pub fn rayleigh_p(n: f64, r: f64) -> f64 {
    let rn = n * r;
    let p = ((1.0 + 4.0 * n + 4.0 * (n * n - rn * rn)).sqrt() - (1.0 + 2.0 * n)).exp();
    p.clamp(0.0, 1.0)
}

/// Acute angle in 0..90 degrees between two axes (REFERENCES.md section 7).
pub fn axial_angle(a: f64, b: f64) -> f64 {
    (((a - b + 90.0).rem_euclid(180.0)) - 90.0).abs()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn equal(v: &[f64]) -> Vec<(f64, f64)> {
        v.iter().map(|&a| (a, 1.0)).collect()
    }

    #[test]
    fn directional_and_axial_means_match_astropy_examples() {
        // REFERENCES.md section 6 [S, astropy docs; reproduced D]: (51, 67, 40, 109, 31, 358)
        // -> circmean 48.62718, circvar 0.1635635 (= 1 - R); axial mean from the second
        // moment 45.4963.
        let data = [51.0, 67.0, 40.0, 109.0, 31.0, 358.0];
        let d = summarise(&equal(&data), 360.0).unwrap();
        assert!((d.mean - 48.62718).abs() < 1e-5, "{}", d.mean);
        assert!((1.0 - d.resultant_length - 0.1635635).abs() < 1e-7);
        let a = summarise(&equal(&data), 180.0).unwrap();
        assert!((a.mean - 45.4963).abs() < 1e-4, "{}", a.mean);
        // Second moment length 0.4800428 (same source).
        assert!((a.resultant_length - 0.4800428).abs() < 1e-7);
    }

    #[test]
    fn rayleigh_matches_the_zar_formula_value() {
        // REFERENCES.md section 6: (130, 90, 0, 145) degrees, Zar's formula 0.254678 (astropy's
        // own approximation gives 0.2563488).
        let d = summarise(&equal(&[130.0, 90.0, 0.0, 145.0]), 360.0).unwrap();
        assert!((d.rayleigh_p - 0.254678).abs() < 1e-6, "{}", d.rayleigh_p);
        assert_eq!(d.n_eff, 4.0);
    }

    #[test]
    fn axial_std_and_angles() {
        // Identical axes: R = 1, std 0; 10 and 190 are the same axis; 0 and 179 are 1 apart.
        let same = summarise(&equal(&[10.0, 190.0, 10.0]), 180.0).unwrap();
        assert!((same.mean - 10.0).abs() < 1e-9 && same.circular_std < 1e-6);
        assert!((axial_angle(0.0, 179.0) - 1.0).abs() < 1e-12);
        assert!((axial_angle(10.0, 90.0) - 80.0).abs() < 1e-12);
        assert!(summarise(&[(1.0, 0.0)], 180.0).is_none());
    }

    #[test]
    fn cancelling_axes_have_no_mean() {
        // Hand-checkable: axes 0, 45, 90 and 135 double to 0, 90, 180 and 270, whose unit
        // vectors sum to zero; only round-off (about 1e-16) is left of the resultant.
        let s = summarise(&equal(&[0.0, 45.0, 90.0, 135.0]), 180.0).unwrap();
        assert!(
            s.resultant_length < RESULTANT_FLOOR,
            "{}",
            s.resultant_length
        );
        assert!(s.mean.is_nan() && s.circular_std.is_nan());
        // Just above the floor the mean is defined (axes 0 and 90, weights 1 and 1 - 4e-6).
        let s = summarise(&[(0.0, 1.0), (90.0, 1.0 - 4e-6)], 180.0).unwrap();
        assert!(s.resultant_length > RESULTANT_FLOOR && s.mean.abs() < 1e-9);
    }
}
