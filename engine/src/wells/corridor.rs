//! Statistics of map bins inside a stage corridor: which bins fall inside, the axial
//! statistics of their fast azimuths weighted by magnitude (see [`crate::stats::circular`]), the angle
//! between the well and the mean fast azimuth (REFERENCES.md section 7), percentiles of other
//! attributes (angles as angles: circular mean and percentiles of the deviations from it),
//! horizon depths under the well (bilinear on cell centres) and the drilling-azimuth score.
//! Pure computation.
//!
//! Reading (REFERENCES.md section 8): hydraulic fractures open against the least principal
//! stress (Hubbert & Willis 1957), so laterals are commonly drilled near-perpendicular to the
//! fast azimuth when it is read as the maximum horizontal stress. That reading is a proxy.

use crate::grid::GridGeometry;
use crate::stats::circular::{axial_angle, summarise};
use crate::stats::{quantile, quantiles, Quantile};
use crate::wells::trajectory::inside;
use ndarray::Array2;

/// One anisotropy bin inside a corridor.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BinSample {
    /// Magnitude B (ms).
    pub magnitude: f64,
    /// Fast azimuth, degrees from grid north.
    pub azimuth_fast: f64,
    /// Standard error of the azimuth, degrees (NaN when unknown).
    pub azimuth_stderr: f64,
    /// Standard error of the magnitude, ms (NaN when unknown).
    pub magnitude_stderr: f64,
    /// Distance of the bin's centre along the path from its start (projected on the line from
    /// its first to its last point), CRS units; NaN when unknown.
    pub along: f64,
}

/// Cells of `geometry` whose centres lie inside the ring `corridor`, row-major `(row, col)`, and
/// whether any of the ring lies outside the grid.
pub fn cells_inside(
    geometry: &GridGeometry,
    corridor: &[(f64, f64)],
) -> (Vec<(usize, usize)>, bool) {
    let grid_coords: Vec<(f64, f64)> = corridor
        .iter()
        .map(|&(x, y)| geometry.map_to_grid(x, y))
        .collect();
    let leaves = grid_coords
        .iter()
        .any(|&(c, r)| c < 0.0 || r < 0.0 || c > geometry.cols as f64 || r > geometry.rows as f64);
    let bound = |f: fn(&(f64, f64)) -> f64, max: usize| {
        let lo = grid_coords
            .iter()
            .map(f)
            .fold(f64::INFINITY, f64::min)
            .floor()
            .max(0.0) as usize;
        let hi = (grid_coords
            .iter()
            .map(f)
            .fold(f64::NEG_INFINITY, f64::max)
            .ceil()
            .max(0.0) as usize)
            .min(max);
        (lo, hi)
    };
    let (c0, c1) = bound(|p| p.0, geometry.cols);
    let (r0, r1) = bound(|p| p.1, geometry.rows);
    let cells = (r0..r1)
        .flat_map(|r| (c0..c1).map(move |c| (r, c)))
        .filter(|&(r, c)| inside(geometry.cell_centre(c, r), corridor))
        .collect();
    (cells, leaves)
}

/// Anisotropy statistics of a corridor.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CorridorStats {
    /// Bins with a fit.
    pub n_bins: usize,
    /// Magnitude-weighted axial mean fast azimuth, 0..180.
    pub fast_azimuth: f64,
    /// Mean resultant length of the doubled azimuths, 0..1.
    pub resultant_length: f64,
    /// Axial circular standard deviation, degrees.
    pub axial_std: f64,
    /// Rayleigh p-value on doubled angles with the effective sample size (optimistic:
    /// neighbouring bins are correlated).
    pub rayleigh_p: f64,
    /// Effective sample size `(sum w)^2 / sum w^2`.
    pub n_eff: f64,
    /// Mean magnitude (ms).
    pub magnitude_mean: f64,
    /// Median magnitude (ms).
    pub magnitude_median: f64,
    /// Axial azimuth of the well in the corridor, 0..180.
    pub well_azimuth: f64,
    /// Angle between the well and the mean fast azimuth, 0..90.
    pub angle_to_well: f64,
}

/// The statistics of `bins` for a well running at `well_azimuth`.
pub fn corridor_stats(bins: &[BinSample], well_azimuth: f64) -> CorridorStats {
    let weighted: Vec<(f64, f64)> = bins.iter().map(|b| (b.azimuth_fast, b.magnitude)).collect();
    let summary = summarise(&weighted, 180.0);
    let magnitudes: Vec<f64> = bins
        .iter()
        .map(|b| b.magnitude)
        .filter(|m| m.is_finite())
        .collect();
    let (mean, _, median, _) = percentiles(&magnitudes);
    let fast = summary.map_or(f64::NAN, |s| s.mean);
    CorridorStats {
        n_bins: bins.len(),
        fast_azimuth: fast,
        resultant_length: summary.map_or(f64::NAN, |s| s.resultant_length),
        axial_std: summary.map_or(f64::NAN, |s| s.circular_std),
        rayleigh_p: summary.map_or(f64::NAN, |s| s.rayleigh_p),
        n_eff: summary.map_or(0.0, |s| s.n_eff),
        magnitude_mean: mean,
        magnitude_median: median,
        well_azimuth,
        angle_to_well: axial_angle(well_azimuth, fast),
    }
}

/// (mean, p10, p50, p90) of the finite `values` (percentiles [`Quantile::Nearest`], values
/// of the sample); NaN when there are none.
pub fn percentiles(values: &[f64]) -> (f64, f64, f64, f64) {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    let Some([p10, p50, p90]) = quantiles(&mut v, [0.1, 0.5, 0.9], Quantile::Nearest) else {
        return (f64::NAN, f64::NAN, f64::NAN, f64::NAN);
    };
    // Summed in ascending order (`quantiles` sorted `v`).
    let mean = v.iter().sum::<f64>() / v.len() as f64;
    (mean, p10, p50, p90)
}

/// (circular mean, p10, p50, p90) of the finite `angles` (degrees) on a circle of `period`
/// degrees (360 for directions such as dip azimuth, 180 for axes): the mean direction of
/// [`summarise`] (equal weights), and the [`percentiles`] of the signed deviations from
/// it (in `-period/2 .. period/2`) added back modulo `period`. All NaN when there is no angle
/// or the angles cancel (no mean direction).
pub fn circular_percentiles(angles: &[f64], period: f64) -> (f64, f64, f64, f64) {
    let none = (f64::NAN, f64::NAN, f64::NAN, f64::NAN);
    let samples: Vec<(f64, f64)> = angles.iter().map(|&a| (a, 1.0)).collect();
    let Some(mean) = summarise(&samples, period)
        .map(|s| s.mean)
        .filter(|m| m.is_finite())
    else {
        return none;
    };
    let half = period / 2.0;
    let deviations: Vec<f64> = angles
        .iter()
        .map(|a| (a - mean + half).rem_euclid(period) - half)
        .collect();
    let (_, p10, p50, p90) = percentiles(&deviations);
    let back = |d: f64| (mean + d).rem_euclid(period);
    (mean, back(p10), back(p50), back(p90))
}

/// Value of `values` (on `geometry`'s cells, NaN nulls) at map point (`x`, `y`) by bilinear
/// interpolation between the four surrounding cell centres; NaN outside the centres' hull or
/// when any of the four is null.
pub fn bilinear(geometry: &GridGeometry, values: &Array2<f64>, x: f64, y: f64) -> f64 {
    let (c, r) = geometry.map_to_grid(x, y);
    let (u, v) = (c - 0.5, r - 0.5);
    let (c0, r0) = (u.floor(), v.floor());
    if !(c0 >= 0.0
        && r0 >= 0.0
        && c0 + 1.0 < geometry.cols as f64
        && r0 + 1.0 < geometry.rows as f64)
    {
        return f64::NAN;
    }
    let (c0, r0) = (c0 as usize, r0 as usize);
    let (fu, fv) = (u - c0 as f64, v - r0 as f64);
    let at = |dr: usize, dc: usize| values[(r0 + dr, c0 + dc)];
    (1.0 - fv) * ((1.0 - fu) * at(0, 0) + fu * at(0, 1))
        + fv * ((1.0 - fu) * at(1, 0) + fu * at(1, 1))
}

/// Largest weight of one bin in the drilling score: a signal to noise ratio of 10.
const MAX_SNR: f64 = 10.0;

/// Weight of an anisotropy bin of magnitude `magnitude` and standard error `stderr` (ms): its
/// squared signal to noise ratio `(B / stderr_B)^2`, capped at 100, so bins whose magnitude is
/// indistinguishable from noise count little; 1 when the magnitude's error is unknown.
pub fn snr_weight(magnitude: f64, stderr: f64) -> f64 {
    if stderr.is_finite() && stderr > 0.0 {
        (magnitude / stderr).min(MAX_SNR).powi(2)
    } else {
        1.0
    }
}

/// Weight of a bin in the drilling score ([`snr_weight`]); 0 without a magnitude or azimuth.
fn bin_weight(b: &BinSample) -> f64 {
    if !(b.magnitude.is_finite() && b.azimuth_fast.is_finite()) {
        return 0.0;
    }
    snr_weight(b.magnitude, b.magnitude_stderr)
}

/// Drilling score of a lateral at `azimuth` over `bins`, 0..1: the weighted mean of
/// `sin^2(azimuth - fast)` (1 when the lateral is perpendicular to the fast azimuth), each bin
/// weighted by its squared signal to noise ratio ([`bin_weight`]); NaN without a weighted bin.
pub fn perpendicularity_score(bins: &[BinSample], azimuth: f64) -> f64 {
    weighted_score(bins.iter().map(|b| (b, b.azimuth_fast)), azimuth)
}

fn weighted_score<'a>(bins: impl Iterator<Item = (&'a BinSample, f64)>, azimuth: f64) -> f64 {
    let (num, den) = bins.fold((0.0, 0.0), |(n, d), (b, fast)| {
        let w = bin_weight(b);
        if w <= 0.0 {
            return (n, d);
        }
        let s = (azimuth - fast).to_radians().sin();
        (n + w * s * s, d + w)
    });
    if den > 0.0 {
        num / den
    } else {
        f64::NAN
    }
}

/// The bins grouped into consecutive stretches of `block` along the path (indices, in order of
/// position); bins without a position, or a block that is not positive, make one group each.
fn blocks_along(bins: &[BinSample], block: f64) -> Vec<Vec<usize>> {
    let mut groups: std::collections::BTreeMap<i64, Vec<usize>> = std::collections::BTreeMap::new();
    let mut alone = Vec::new();
    for (k, b) in bins.iter().enumerate() {
        if b.along.is_finite() && block > 0.0 {
            groups
                .entry((b.along / block).floor() as i64)
                .or_default()
                .push(k);
        } else {
            alone.push(vec![k]);
        }
    }
    groups.into_values().chain(alone).collect()
}

/// Median signal to noise ratio `B / stderr_B` of the bins whose magnitude error is known
/// (NaN when none is).
pub fn median_snr(bins: &[BinSample]) -> f64 {
    let mut snr: Vec<f64> = bins
        .iter()
        .filter(|b| b.magnitude_stderr.is_finite() && b.magnitude_stderr > 0.0)
        .map(|b| b.magnitude / b.magnitude_stderr)
        .filter(|v| v.is_finite())
        .collect();
    crate::stats::median(&mut snr).unwrap_or(f64::NAN)
}

/// A drilling score with its interval.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScoreInterval {
    /// The median score of the draws.
    pub score: f64,
    /// Lower end of the interval.
    pub low: f64,
    /// Upper end.
    pub high: f64,
}

/// The drilling score of a lateral at `azimuth` given the measurement noise, with a
/// percentile interval at `level` from `draws` draws: each draw resamples stretches of the
/// corridor `block` long (CRS units; neighbouring bins are alike, so whole stretches are the
/// units: a moving-block bootstrap in space, after Künsch 1989 and Efron & Tibshirani 1993)
/// with replacement and moves each drawn bin's fast azimuth by a normal deviate of its
/// standard error, so both the sampling of the corridor and each bin's
/// measurement noise widen the interval. The score is the median of the draws (not the
/// noise-free [`perpendicularity_score`]: azimuth errors pull sin^2 away from 0 and 1, and the
/// score must lie inside its own interval). Seeded: the same bits for the same inputs; give
/// every candidate of a scan the same seed, so they are compared on the same draws.
/// `None` without a weighted bin.
pub fn score_interval(
    bins: &[BinSample],
    azimuth: f64,
    level: f64,
    draws: usize,
    seed: u64,
    block: f64,
) -> Option<ScoreInterval> {
    let score = perpendicularity_score(bins, azimuth);
    if !score.is_finite() {
        return None;
    }
    let blocks = blocks_along(bins, block);
    let mut rng = crate::stats::SeededNoise::new(seed);
    let n = blocks.len();
    let mut scores: Vec<f64> = (0..draws)
        .map(|_| {
            let mut drawn: Vec<(&BinSample, f64)> = Vec::with_capacity(bins.len());
            for _ in 0..n {
                let members = &blocks[((rng.uniform() * n as f64) as usize).min(n - 1)];
                for &k in members {
                    let b = &bins[k];
                    let error = if b.azimuth_stderr.is_finite() {
                        b.azimuth_stderr * rng.gaussian()
                    } else {
                        0.0
                    };
                    drawn.push((b, b.azimuth_fast + error));
                }
            }
            weighted_score(drawn.into_iter(), azimuth)
        })
        .filter(|s| s.is_finite())
        .collect();
    let tail = (1.0 - level) / 2.0;
    Some(ScoreInterval {
        score: quantile(&mut scores, 0.5, Quantile::Linear).unwrap_or(score),
        low: quantile(&mut scores, tail, Quantile::Linear).unwrap_or(score),
        high: quantile(&mut scores, 1.0 - tail, Quantile::Linear).unwrap_or(score),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::wells::trajectory::corridor;

    fn uniform(n: usize, fast: f64) -> Vec<BinSample> {
        vec![
            BinSample {
                magnitude: 3.0,
                azimuth_fast: fast,
                azimuth_stderr: 2.0,
                magnitude_stderr: 0.5,
                along: f64::NAN,
            };
            n
        ]
    }

    #[test]
    fn east_west_well_over_a_ten_degree_fast_azimuth_is_at_eighty() {
        // The check: uniform fast azimuth 10, an east-west well (90) -> 80 degrees.
        let s = corridor_stats(&uniform(50, 10.0), 90.0);
        assert!((s.angle_to_well - 80.0).abs() < 1e-9);
        assert!((s.fast_azimuth - 10.0).abs() < 1e-9 && (s.resultant_length - 1.0).abs() < 1e-12);
        assert_eq!(s.n_eff, 50.0);
    }

    #[test]
    fn corridor_bin_count_matches_the_analytic_area() {
        // 30 m bins, a 300 m stage with 150 m half-width: 300 x 300 m / 900 m^2 = 100 bins,
        // within one row of bins (10) (the common-practice check; elementary area).
        let g = GridGeometry::survey(
            (500_000.0, 3_900_000.0),
            90.0,
            (30.0, 30.0),
            (100, 100),
            String::new(),
        );
        for (az, start) in [
            (90.0f64, (501_000.0, 3_898_500.0)),
            (37.0, (501_100.0, 3_898_400.0)),
        ] {
            let (s, c) = az.to_radians().sin_cos();
            let end = (start.0 + 300.0 * s, start.1 + 300.0 * c);
            let (cells, leaves) = cells_inside(&g, &corridor(&[start, end], 150.0));
            assert!(!leaves);
            assert!(
                (cells.len() as i64 - 100).abs() <= 10,
                "azimuth {az}: {} bins",
                cells.len()
            );
        }
        let (_, leaves) = cells_inside(
            &g,
            &corridor(&[(499_990.0, 3_898_500.0), (500_200.0, 3_898_500.0)], 150.0),
        );
        assert!(leaves);
    }

    #[test]
    fn directions_are_averaged_as_angles() {
        // Hand-checkable: a plane dipping north has dip azimuths scattered about 0, e.g. 350,
        // 355, 0, 5, 10: the circular mean is 0 (an arithmetic mean would give 144) and the
        // deviations -10, -5, 0, 5, 10 give p10 350, p50 0, p90 10.
        let (mean, p10, p50, p90) = circular_percentiles(&[350.0, 355.0, 0.0, 5.0, 10.0], 360.0);
        assert!(mean.min(360.0 - mean) < 1e-9, "{mean}");
        assert!(
            (p10 - 350.0).abs() < 1e-9 && p50.min(360.0 - p50) < 1e-9 && (p90 - 10.0).abs() < 1e-9
        );
        // REFERENCES.md section 6 [S, astropy docs]: circmean of (51, 67, 40, 109, 31, 358) is
        // 48.62718; the deviations from it sorted are -50.6, -17.6, -8.6, 2.4, 18.4, 60.4, and
        // nearest ranks round(5 q) (as `percentiles`) pick 2nd, 4th and 6th: -17.6 -> 31,
        // 2.4 -> 51, 60.4 -> 109 (hand-checkable from the published mean).
        let (mean, p10, p50, p90) =
            circular_percentiles(&[51.0, 67.0, 40.0, 109.0, 31.0, 358.0], 360.0);
        assert!((mean - 48.62718).abs() < 1e-5, "{mean}");
        assert!(
            (p10 - 31.0).abs() < 1e-9 && (p50 - 51.0).abs() < 1e-9 && (p90 - 109.0).abs() < 1e-9
        );
        // Axes on a 180 circle: 170 and 10 average to 0, not 90.
        let (mean, ..) = circular_percentiles(&[170.0, 10.0], 180.0);
        assert!(mean.min(180.0 - mean) < 1e-9, "{mean}");
        assert!(circular_percentiles(&[0.0, 180.0], 360.0).0.is_nan());
    }

    #[test]
    fn bilinear_reproduces_a_plane() {
        // A plane z = 1000 + 0.1 x - 0.05 y sampled at cell centres is reproduced exactly
        // between them (bilinear interpolation is exact on planes; elementary).
        let g = GridGeometry::survey(
            (500_000.0, 3_900_000.0),
            90.0,
            (25.0, 25.0),
            (10, 8),
            String::new(),
        );
        let plane = |x: f64, y: f64| 1000.0 + 0.1 * (x - 500_000.0) - 0.05 * (y - 3_900_000.0);
        let v = Array2::from_shape_fn((8, 10), |(r, c)| {
            let (x, y) = g.cell_centre(c, r);
            plane(x, y)
        });
        let (x, y) = (500_061.3, 3_899_890.7);
        assert!((bilinear(&g, &v, x, y) - plane(x, y)).abs() < 1e-9);
        assert!(
            bilinear(&g, &v, 500_005.0, 3_899_900.0).is_nan(),
            "outside the centres"
        );
        let mut holed = v.clone();
        holed[(4, 2)] = f64::NAN;
        assert!(bilinear(&g, &holed, x, y).is_nan());
    }

    #[test]
    fn score_is_best_perpendicular_to_the_fast_azimuth() {
        let bins = uniform(20, 10.0);
        let best = (0..36).map(|k| 5.0 * k as f64).max_by(|a, b| {
            perpendicularity_score(&bins, *a).total_cmp(&perpendicularity_score(&bins, *b))
        });
        assert_eq!(best, Some(100.0));
        assert!(perpendicularity_score(&bins, 10.0).abs() < 1e-12);
        assert_eq!(
            percentiles(&[1.0, 2.0, 3.0, 4.0, 5.0]),
            (3.0, 1.0, 3.0, 5.0)
        );
    }

    #[test]
    fn a_score_lies_inside_its_interval_even_at_the_ends_of_its_range() {
        // Azimuth errors pull sin^2 away from 1 when the lateral is perpendicular to the fast
        // azimuth: the reported score (median of the draws) must still lie in its interval.
        for azimuth in [100.0, 10.0, 55.0] {
            let s = score_interval(&uniform(40, 10.0), azimuth, 0.9, 400, 1, 0.0).unwrap();
            assert!(s.low <= s.score && s.score <= s.high, "{azimuth}: {s:?}");
        }
    }
}
