//! Axis and colour-bar ticks at round values: steps of 1, 2 or 5 times a power of ten
//! (the "nice numbers" labelling of Heckbert 1990, *Graphics Gems* I, pp. 61-63, here with the
//! step chosen as the smallest 1-2-5 step giving at most the wanted number of intervals).

/// Round tick values inside `[lo, hi]` (either order), at most about `intervals + 1` of them,
/// spaced by a step of 1, 2 or 5 times a power of ten. Each value is a whole multiple of the
/// step, computed as one rounding of `k * step` (no accumulated drift) and with -0 written as 0. Empty when
/// either bound is not finite; the single value when `lo == hi`.
pub fn nice_ticks(lo: f64, hi: f64, intervals: usize) -> Vec<f64> {
    let (lo, hi) = if lo <= hi { (lo, hi) } else { (hi, lo) };
    if !lo.is_finite() || !hi.is_finite() {
        return Vec::new();
    }
    if lo == hi {
        return vec![lo];
    }
    let step = nice_step((hi - lo) / intervals.max(1) as f64);
    let (first, last) = ((lo / step).ceil() as i64, (hi / step).floor() as i64);
    (first..=last)
        .map(|k| multiple_of_step(k, step))
        .map(|v| if v == 0.0 { 0.0 } else { v })
        .collect()
}

/// `k * step` rounded once: for steps below 1 as the integer `k * step * 10^d` divided by the
/// exact power `10^d`, so 3 x 0.1 is the double nearest 0.3.
fn multiple_of_step(k: i64, step: f64) -> f64 {
    let decimals = (-step.log10().floor()).max(0.0) as i32;
    if decimals == 0 {
        return k as f64 * step;
    }
    let scale = 10f64.powi(decimals);
    (k as f64 * (step * scale).round()) / scale
}

/// The smallest of 1, 2, 5 times a power of ten that is at least `raw` (> 0).
pub fn nice_step(raw: f64) -> f64 {
    let power = 10f64.powi(raw.log10().floor() as i32);
    [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * power)
        .find(|&step| step >= raw * (1.0 - 1e-12))
        .unwrap_or(10.0 * power)
}

/// Tick label: the value with just the decimals its step needs (none for steps of 1 or more).
pub fn tick_label(value: f64, step: f64) -> String {
    let decimals = (-step.log10().floor()).max(0.0) as usize;
    let text = format!("{value:.decimals$}");
    if text
        .trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        format!("{:.decimals$}", 0.0)
    } else {
        text
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-checkable ranges (the expected ticks are worked by hand from the 1-2-5 rule).
    #[test]
    fn ticks_fall_on_round_values_for_hand_checked_ranges() {
        assert_eq!(
            nice_ticks(0.0, 10.0, 5),
            vec![0.0, 2.0, 4.0, 6.0, 8.0, 10.0]
        );
        assert_eq!(nice_ticks(0.1677, 0.6387, 5), vec![0.2, 0.3, 0.4, 0.5, 0.6]);
        assert_eq!(nice_ticks(-3.2, 4.7, 4), vec![-2.0, 0.0, 2.0, 4.0]);
        assert_eq!(nice_ticks(1200.0, 4800.0, 4), vec![2000.0, 3000.0, 4000.0]);
        assert_eq!(
            nice_ticks(-0.004, 0.004, 4),
            vec![-0.004, -0.002, 0.0, 0.002, 0.004]
        );
        assert_eq!(nice_ticks(5.0, 5.0, 4), vec![5.0]);
        assert_eq!(nice_ticks(7.0, 3.0, 4), vec![3.0, 4.0, 5.0, 6.0, 7.0]);
        assert!(nice_ticks(f64::NAN, 1.0, 4).is_empty());
    }

    #[test]
    fn steps_are_one_two_or_five_times_a_power_of_ten() {
        assert_eq!(nice_step(0.0942), 0.1);
        assert_eq!(nice_step(0.15), 0.2);
        assert_eq!(nice_step(3.0), 5.0);
        assert_eq!(nice_step(6.0), 10.0);
        assert_eq!(nice_step(200.0), 200.0);
    }

    #[test]
    fn labels_carry_only_the_decimals_of_the_step() {
        assert_eq!(tick_label(0.30000000000000004, 0.1), "0.3");
        assert_eq!(tick_label(2000.0, 1000.0), "2000");
        assert_eq!(tick_label(-0.002, 0.002), "-0.002");
        assert_eq!(tick_label(-1e-17, 0.002), "0.000");
    }
}
