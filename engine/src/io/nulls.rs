//! Null values of input grids: declared nodata values and user-given sentinels become NaN, and
//! a grid that declares no nodata is searched for an undeclared sentinel.
//!
//! Exports in the trade often mark missing picks with a sentinel number instead of a declared
//! nodata value (-999.25, -9999, 1e30 and the like; common practice). Read as data, one such
//! value puts a spike of hundreds of metres into the fit and false curvature all around it. The
//! search is robust: a value is an outlier when it lies more than [`OUTLIER_MADS`] median
//! absolute deviations from the median (Hampel's identifier, Hampel 1974, JASA 69:383, with a
//! deliberately wide threshold); an outlier that also looks like a sentinel (see
//! [`looks_like_sentinel`]) is refused, any other outlier is reported.

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
    let fraction = a - whole;
    let nines = format!("{whole:.0}");
    nines.len() >= 3 && nines.bytes().all(|b| b == b'9') && [0.0, 0.25, 0.5].contains(&fraction)
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

impl Outliers {
    /// The most frequent outlying value that looks like a sentinel, with its count.
    pub fn sentinel(&self) -> Option<(f64, usize)> {
        self.values
            .iter()
            .copied()
            .find(|&(v, _)| looks_like_sentinel(v))
    }
}

/// Finite values further than [`OUTLIER_MADS`] median absolute deviations from the median;
/// `None` when there are none. When more than half the values are equal (MAD 0), any other
/// value is an outlier only if it looks like a sentinel.
pub fn outliers(values: &Array2<f64>) -> Option<Outliers> {
    let mut finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if finite.len() < 3 {
        return None;
    }
    let median = median_in_place(&mut finite);
    let mut deviations: Vec<f64> = finite.iter().map(|v| (v - median).abs()).collect();
    let mad = median_in_place(&mut deviations);
    let far = |v: f64| {
        let d = (v - median).abs();
        if mad > 0.0 {
            d > OUTLIER_MADS * mad
        } else {
            d > 0.0 && looks_like_sentinel(v)
        }
    };
    let mut found: Vec<f64> = finite.into_iter().filter(|&v| far(v)).collect();
    if found.is_empty() {
        return None;
    }
    found.sort_by(f64::total_cmp);
    let mut counted: Vec<(f64, usize)> = Vec::new();
    for v in found {
        match counted.last_mut() {
            Some((last, n)) if *last == v => *n += 1,
            _ => counted.push((v, 1)),
        }
    }
    counted.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.total_cmp(&b.0)));
    Some(Outliers {
        median,
        mad,
        values: counted,
    })
}

/// Median of `v` (reorders it); the lower middle value for an even count.
fn median_in_place(v: &mut [f64]) -> f64 {
    let mid = (v.len() - 1) / 2;
    *v.select_nth_unstable_by(mid, f64::total_cmp).1
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
        ] {
            assert!(looks_like_sentinel(v), "{v}");
        }
        for v in [2450.0, -998.0, 9999.1, 1234.5, 99.0, 3e9] {
            assert!(!looks_like_sentinel(v), "{v}");
        }
    }

    #[test]
    fn an_undeclared_sentinel_is_found_and_a_bust_is_only_an_outlier() {
        // A 10 x 10 ramp from 2400 to 2499 m with two cells of -999.25 and one picking bust at
        // 4000 m (by hand: lower median 2448, MAD 25): 4000 is 62 MADs out (an outlier), but
        // only -999.25 has a sentinel's form.
        let mut v = Array2::from_shape_fn((10, 10), |(r, c)| 2400.0 + (10 * r + c) as f64);
        v[(0, 0)] = -999.25;
        v[(5, 5)] = -999.25;
        v[(9, 9)] = 4000.0;
        let o = outliers(&v).unwrap();
        assert_eq!(o.values, vec![(-999.25, 2), (4000.0, 1)]);
        assert_eq!(o.sentinel(), Some((-999.25, 2)));
        let mut clean = v.clone();
        clean.mapv_inplace(|x| null_to_nan(x, None, &[-999.25]));
        assert_eq!(clean.iter().filter(|x| x.is_nan()).count(), 2);
        assert_eq!(outliers(&clean).unwrap().sentinel(), None);
    }

    #[test]
    fn a_flat_grid_with_a_sentinel_is_caught() {
        // MAD 0 (all picks equal): only sentinel-like values count as outliers.
        let mut v = Array2::from_elem((4, 4), 1500.0);
        v[(1, 1)] = -9999.0;
        assert_eq!(outliers(&v).unwrap().sentinel(), Some((-9999.0, 1)));
        v[(1, 1)] = 1501.0;
        assert!(outliers(&v).is_none());
    }
}
