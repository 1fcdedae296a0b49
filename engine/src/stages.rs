//! Statistics of map bins inside a stage corridor: which bins fall inside, the axial
//! statistics of their fast azimuths weighted by magnitude (see [`crate::circular`]), the angle
//! between the well and the mean fast azimuth (REFERENCES.md section 7), percentiles of other
//! attributes, and the drilling-azimuth score. Pure computation.
//!
//! Reading (REFERENCES.md section 8): hydraulic fractures open against the least principal
//! stress (Hubbert & Willis 1957), so laterals are commonly drilled near-perpendicular to the
//! fast azimuth when it is read as the maximum horizontal stress. That reading is a proxy.

use crate::circular::{axial_angle, summarise};
use crate::grid::GridGeometry;
use crate::wells::inside;

/// One anisotropy bin inside a corridor.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BinSample {
    /// Magnitude B (ms).
    pub magnitude: f64,
    /// Fast azimuth, degrees from grid north.
    pub azimuth_fast: f64,
    /// Standard error of the azimuth, degrees (NaN when unknown).
    pub azimuth_stderr: f64,
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

/// (mean, p10, p50, p90) of the finite `values` (nearest rank); NaN when there are none.
pub fn percentiles(values: &[f64]) -> (f64, f64, f64, f64) {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return (f64::NAN, f64::NAN, f64::NAN, f64::NAN);
    }
    v.sort_by(f64::total_cmp);
    let at = |q: f64| v[((v.len() - 1) as f64 * q).round() as usize];
    (
        v.iter().sum::<f64>() / v.len() as f64,
        at(0.1),
        at(0.5),
        at(0.9),
    )
}

/// Drilling score of a lateral at `azimuth` over `bins`, 0..1: the mean of
/// `sin^2(azimuth - fast)` (1 when the lateral is perpendicular to the fast azimuth), each bin
/// weighted by its magnitude over its azimuth variance (`B / (stderr^2 + 1)`, degrees^2, so
/// strong, well-determined bins count most and an unknown error counts as 1 degree).
pub fn perpendicularity_score(bins: &[BinSample], azimuth: f64) -> f64 {
    let (num, den) = bins.iter().fold((0.0, 0.0), |(n, d), b| {
        let var = if b.azimuth_stderr.is_finite() {
            b.azimuth_stderr.powi(2)
        } else {
            0.0
        };
        let w = b.magnitude / (var + 1.0);
        if !(w.is_finite() && w > 0.0 && b.azimuth_fast.is_finite()) {
            return (n, d);
        }
        let s = (azimuth - b.azimuth_fast).to_radians().sin();
        (n + w * s * s, d + w)
    });
    if den > 0.0 {
        num / den
    } else {
        f64::NAN
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::demo::survey_geometry;
    use crate::wells::corridor;

    fn uniform(n: usize, fast: f64) -> Vec<BinSample> {
        vec![
            BinSample {
                magnitude: 3.0,
                azimuth_fast: fast,
                azimuth_stderr: 2.0
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
        let g = survey_geometry((500_000.0, 3_900_000.0), 90.0, (30.0, 30.0), (100, 100));
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
}
