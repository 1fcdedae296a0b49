//! Small order statistics shared across the engine.

/// Median of `values` (reordered in place): the middle value, or the mean of the two middle
/// values for an even count (the usual definition, as `numpy.median`); `None` when empty.
/// Linear time (selection, not a full sort).
pub fn median(values: &mut [f64]) -> Option<f64> {
    let n = values.len();
    if n == 0 {
        return None;
    }
    let (lower, upper, _) = values.select_nth_unstable_by(n / 2, f64::total_cmp);
    let upper = *upper;
    if n % 2 == 1 {
        return Some(upper);
    }
    let below = lower.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    Some(0.5 * (below + upper))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_of_odd_and_even_counts() {
        // Hand-checkable: 3 is the middle of (5, 1, 3); (4, 1, 3, 2) has middles 2 and 3.
        assert_eq!(median(&mut [5.0, 1.0, 3.0]), Some(3.0));
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median(&mut []), None);
    }
}
