//! Null values of input grids: declared nodata values and user-given sentinels become NaN, and
//! a grid that declares no nodata is searched for an undeclared sentinel.
//!
//! Exports in the trade often mark missing picks with a sentinel number instead of a declared
//! nodata value (-999.25, -9999, 1e30 and the like; common practice). Read as data, one such
//! value puts a spike of hundreds of metres into the fit and false curvature all around it.
//! - A value shaped like a sentinel (see [`looks_like_sentinel`]) is taken for one
//!   ([`undeclared_sentinel`]) when it lies outside the range of the other values by more than
//!   half their range and a tenth of their median's size (so 0 beside fold counts of 1 to 40,
//!   or 999 beside picks at 1000 ms, stay data), or has a magnitude of 1e10 or more.
//! - Other values far from the rest are reported, not refused ([`outliers`]): more than
//!   [`OUTLIER_MADS`] median absolute deviations from the median (Hampel's identifier, Hampel
//!   1974, JASA 69:383, with a deliberately wide threshold), e.g. picking busts.

use crate::stats::FiniteSample;
use ndarray::Array2;

/// Distance from the median, in median absolute deviations, beyond which a value is an
/// outlier.
pub const OUTLIER_MADS: f64 = 50.0;

/// NaN when `v` is non-finite, equal to the declared `nodata` or to one of `sentinels`;
/// otherwise `v`.
pub fn null_to_nan(v: f64, nodata: Option<f64>, sentinels: &[f64]) -> f64 {
    let declared = nodata.is_some_and(|nd| v == nd);
    if declared || !v.is_finite() || sentinels.contains(&v) {
        f64::NAN
    } else {
        v
    }
}

/// Whether `v` has the form of a null sentinel: zero, a magnitude of at least 1e10 (1e30,
/// float maxima), or an integer part made of three or more nines with a fraction of 0, .25 or
/// .5 (-999, -999.25, -9999, 99999; common practice).
pub fn looks_like_sentinel(v: f64) -> bool {
    let a = v.abs();
    if v == 0.0 || a >= 1e10 {
        return true;
    }
    let whole = a.trunc();
    if ![0.0, 0.25, 0.5].contains(&(a - whole)) {
        return false;
    }
    // 999, 9999, ...: one less than a power of ten from 1e3 (exact in f64 below 1e10).
    std::iter::successors(Some(1e3), |p| Some(p * 10.0))
        .take_while(|&p| p <= 1e10)
        .any(|p| whole == p - 1.0)
}

/// Values far outside the rest of a grid.
#[derive(Clone, Debug, PartialEq)]
pub struct Outliers {
    /// Median of the finite values.
    pub median: f64,
    /// Median absolute deviation of the finite values.
    pub mad: f64,
    /// Distinct outlying values with the number of cells holding each, most frequent first.
    pub values: Vec<(f64, usize)>,
}

/// The most frequent sentinel-shaped value that stands apart from the other values (see the
/// module notes), with the number of cells holding it; `None` when there is none.
pub fn undeclared_sentinel(values: &Array2<f64>) -> Option<(f64, usize)> {
    let shaped: Vec<f64> = values
        .iter()
        .copied()
        .filter(|&v| v.is_finite() && looks_like_sentinel(v))
        .collect();
    if shaped.is_empty() {
        return None;
    }
    let others = || {
        values
            .iter()
            .copied()
            .filter(|&v| v.is_finite() && !looks_like_sentinel(v))
    };
    let lo = others().fold(f64::INFINITY, f64::min);
    let hi = others().fold(f64::NEG_INFINITY, f64::max);
    let median = FiniteSample::of(others).median()?;
    let margin = (0.5 * (hi - lo)).max(0.1 * median.abs());
    let apart = |v: f64| v.abs() >= 1e10 || v < lo - margin || v > hi + margin;
    count_distinct(shaped.into_iter().filter(|&v| apart(v)).collect())
        .into_iter()
        .next()
}

/// Distinct values with their counts, most frequent first (ties: smaller value first).
fn count_distinct(mut values: Vec<f64>) -> Vec<(f64, usize)> {
    values.sort_by(f64::total_cmp);
    let mut counted: Vec<(f64, usize)> = Vec::new();
    for v in values {
        match counted.last_mut() {
            Some((last, n)) if *last == v => *n += 1,
            _ => counted.push((v, 1)),
        }
    }
    counted.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.total_cmp(&b.0)));
    counted
}

/// A value as it would be typed: plain decimals, or exponent form for magnitudes of 1e7 and
/// more (`1e30`, not thirty zeros).
pub fn typed(v: f64) -> String {
    if v.abs() >= 1e7 {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// Finite values further than [`OUTLIER_MADS`] median absolute deviations from the median;
/// `None` when there are none or when more than half the values are equal (MAD 0).
pub fn outliers(values: &Array2<f64>) -> Option<Outliers> {
    let mut finite = FiniteSample::of(|| values.iter().copied());
    if finite.len() < 3 {
        return None;
    }
    let (median, mad) = finite.median_and_mad()?;
    drop(finite);
    if mad <= 0.0 {
        return None;
    }
    let found: Vec<f64> = values
        .iter()
        .copied()
        .filter(|&v| v.is_finite() && (v - median).abs() > OUTLIER_MADS * mad)
        .collect();
    (!found.is_empty()).then(|| Outliers {
        median,
        mad,
        values: count_distinct(found),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sentinel_forms_of_the_trade() {
        // Common practice: -999.25 (LAS null), -999, -9999, -99999, 1e30, float32 maximum.
        for v in [
            -999.25,
            -999.0,
            -9999.0,
            99999.0,
            -99999.0,
            1e30,
            f32::MAX as f64,
            0.0,
            999.5,
            -9_999_999.0,
        ] {
            assert!(looks_like_sentinel(v), "{v}");
        }
        for v in [
            2450.0, -998.0, 9999.1, 1234.5, 99.0, 3e9, 999.75, 9990.0, 1000.0,
        ] {
            assert!(!looks_like_sentinel(v), "{v}");
        }
    }

    #[test]
    fn an_undeclared_sentinel_is_found_and_a_bust_is_only_an_outlier() {
        // A 10 x 10 ramp from 2400 to 2499 m with two cells of -999.25 and one picking bust at
        // 4000 m (by hand: median 2448.5, MAD 25): 4000 is 62 MADs out (an outlier), but
        // only -999.25 has a sentinel's form and stands apart from the rest.
        let mut v = Array2::from_shape_fn((10, 10), |(r, c)| 2400.0 + (10 * r + c) as f64);
        v[(0, 0)] = -999.25;
        v[(5, 5)] = -999.25;
        v[(9, 9)] = 4000.0;
        assert_eq!(undeclared_sentinel(&v), Some((-999.25, 2)));
        assert_eq!(
            outliers(&v).unwrap().values,
            vec![(-999.25, 2), (4000.0, 1)]
        );
        let mut clean = v.clone();
        clean.mapv_inplace(|x| null_to_nan(x, None, &[-999.25]));
        assert_eq!(clean.iter().filter(|x| x.is_nan()).count(), 2);
        assert_eq!(undeclared_sentinel(&clean), None);
    }

    #[test]
    fn sentinels_are_found_in_grids_of_large_relief() {
        // Depths 2000 to 3950 m (a 50 MAD rule would miss -999.25 here) and times 1500 to
        // 2475 ms, each with 80 cells of -999.25; 1e30 anywhere; 0 beside depths of 2000+.
        let depth = |k: usize| 2000.0 + 1950.0 * (k % 40) as f64 / 39.0;
        for (values, sentinel) in [
            (
                Array2::from_shape_fn((30, 40), |(r, c)| depth(r * 40 + c)),
                -999.25,
            ),
            (
                Array2::from_shape_fn((30, 40), |(r, c)| depth(r * 40 + c) / 2.0 + 500.0),
                -999.25,
            ),
            (
                Array2::from_shape_fn((30, 40), |(r, c)| depth(r * 40 + c)),
                1e30,
            ),
            (
                Array2::from_shape_fn((30, 40), |(r, c)| depth(r * 40 + c)),
                0.0,
            ),
        ] {
            let mut v = values;
            for k in 0..80 {
                v[(k / 40, k % 40)] = sentinel;
            }
            assert_eq!(undeclared_sentinel(&v), Some((sentinel, 80)), "{sentinel}");
        }
        // A flat grid (MAD 0) with one -9999.
        let mut flat = Array2::from_elem((4, 4), 1500.0);
        flat[(1, 1)] = -9999.0;
        assert_eq!(undeclared_sentinel(&flat), Some((-9999.0, 1)));
        assert_eq!(typed(1e30), "1e30");
        assert_eq!(typed(-999.25), "-999.25");
    }

    #[test]
    fn sentinel_shaped_values_among_the_data_stay_data() {
        // Fold counts 0 to 40 with many zeros at the edges; picks at 1000 ms with some at
        // 999 ms; elevations from -500 to 500 m through 0: every value is data.
        let fold =
            Array2::from_shape_fn((20, 20), |(r, c)| if c < 9 { 0.0 } else { (r + c) as f64 });
        assert_eq!(undeclared_sentinel(&fold), None);
        let picks = Array2::from_shape_fn((20, 20), |(r, _)| if r < 3 { 999.0 } else { 1000.0 });
        assert_eq!(undeclared_sentinel(&picks), None);
        let heights = Array2::from_shape_fn((21, 21), |(r, _)| -500.0 + 50.0 * r as f64);
        assert_eq!(undeclared_sentinel(&heights), None);
    }
}
