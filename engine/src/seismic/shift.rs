//! Time shift of one trace against another inside a tapered window, by normalised
//! cross-correlation with a sub-sample peak. Pure computation on sample slices.
//!
//! - Window: the samples `j` whose times lie within `half_window` of the centre time (the
//!   guide horizon), weighted by a Hann taper `w = (1 + cos(pi (t_j - t_c) / half_window)) / 2`
//!   (Blackman & Tukey 1958, from memory) so the window's edges do not jump as the lag changes.
//! - Correlation at integer lag `k` (samples): `c(k) = sum w_j r_j s_(j+k) /
//!   sqrt(sum w_j r_j^2 * sum w_j s_(j+k)^2)`, the weighted normalised cross-correlation of the
//!   reference `r` and the shifted trace `s`. A trace `s(t) = r(t - tau)` (later by `tau`) peaks
//!   at `k = tau / dt`: positive shifts are later times.
//! - Sub-sample peak: the cross products and the trace energies are each interpolated between
//!   integer lags by the Lanczos windowed sinc of 8 lobes (Duchon 1979, J. Appl. Meteorol.
//!   18:1016, from memory; the cross products are a linear filter of the band-limited trace,
//!   the energies a Hann-smoothed square), their ratio searched on a grid of 1/8 sample around
//!   the best integer lag and refined by golden-section search to 1e-4 sample. The plain
//!   parabola through three integer lags of `c` is biased towards the nearest sample for
//!   seismic wavelets; a 4-lobe kernel, or interpolating the ratio itself, left errors of a few
//!   hundredths of a sample (the tests compare against exact shifts).
//! - Quality: the interpolated peak coefficient (at most 1).
//!
//! Lags are limited to `max_shift`: a best lag at the limit whose refined peak lies beyond it
//! gives no measurement (the true peak is outside the search).

use crate::error::{FlexureError, Result};
use std::ops::Range;

/// Half length, in lags, of the Lanczos kernel interpolating between lags.
const LANCZOS_LOBES: usize = 8;

/// Steps per lag of the coarse search for the interpolated peak.
const COARSE_STEPS: usize = 8;

/// Width, in lags, to which the golden-section search narrows the peak.
const LAG_TOLERANCE: f64 = 1e-4;

/// A measured time shift.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Shift {
    /// Shift of the trace against the reference, ms, positive = later.
    pub ms: f64,
    /// Peak normalised cross-correlation coefficient, -1..1 (1 = identical shapes).
    pub quality: f64,
}

/// The measurement's settings, fixed for a survey.
#[derive(Clone, Debug, PartialEq)]
pub struct ShiftMeasure {
    /// Sample interval, ms.
    dt_ms: f64,
    /// Half length of the tapered window, ms.
    half_window_ms: f64,
    /// Largest shift searched, in whole samples.
    max_lag: usize,
    /// Largest shift accepted, ms.
    max_shift_ms: f64,
}

impl ShiftMeasure {
    /// Settings for traces sampled every `dt_ms`, a window of +-`half_window_ms` around the
    /// centre time and shifts up to +-`max_shift_ms`. Refuses non-positive values, a window of
    /// fewer than 5 samples and a largest shift under one sample or beyond the half window.
    pub fn new(dt_ms: f64, half_window_ms: f64, max_shift_ms: f64) -> Result<Self> {
        if !(dt_ms.is_finite() && dt_ms > 0.0) {
            return Err(FlexureError::Parameter(format!(
                "sample interval {dt_ms} ms is not positive: check the volumes' binary headers"
            )));
        }
        if !(half_window_ms.is_finite() && half_window_ms >= 2.0 * dt_ms) {
            return Err(FlexureError::Parameter(format!(
                "--window {half_window_ms} ms is shorter than 2 samples of {dt_ms} ms: give a half window of at least {} ms",
                2.0 * dt_ms
            )));
        }
        if !(max_shift_ms.is_finite() && max_shift_ms >= dt_ms && max_shift_ms < half_window_ms) {
            return Err(FlexureError::Parameter(format!(
                "--max-shift {max_shift_ms} ms must be at least one sample ({dt_ms} ms) and less than the half window ({half_window_ms} ms)"
            )));
        }
        Ok(Self {
            dt_ms,
            half_window_ms,
            max_lag: (max_shift_ms / dt_ms).ceil() as usize,
            max_shift_ms,
        })
    }

    /// Sample interval, ms.
    pub fn dt_ms(&self) -> f64 {
        self.dt_ms
    }

    /// Lags beyond the search computed for the interpolation at its ends.
    fn lag_reach(&self) -> isize {
        (self.max_lag + LANCZOS_LOBES) as isize
    }

    /// The window's sample indices for a centre at fractional sample index `centre`
    /// (saturating at the ends of `isize` for centres far outside any trace).
    fn window(&self, centre: f64) -> Range<isize> {
        let half = self.half_window_ms / self.dt_ms;
        let start = (centre - half).ceil() as isize;
        start..((centre + half).floor() as isize).saturating_add(1)
    }

    /// Sample indices a trace must provide for a centre at fractional sample index `centre`
    /// (the window widened by the largest lag and the interpolation's reach; saturating, so a
    /// centre far outside any trace gives a range outside it rather than an overflow).
    pub fn samples_needed(&self, centre: f64) -> Range<isize> {
        let window = self.window(centre);
        window.start.saturating_sub(self.lag_reach())..window.end.saturating_add(self.lag_reach())
    }

    /// Shift of `trace` against `reference` for a window centred at fractional sample index
    /// `centre`; both slices hold the samples [`samples_needed`](Self::samples_needed)`(centre)`
    /// in order. `None` when either trace has no energy in the window or the peak lies beyond
    /// the largest shift. To measure several traces against one reference, prepare it once
    /// with [`ShiftMeasure::against`].
    pub fn measure(&self, centre: f64, reference: &[f32], trace: &[f32]) -> Option<Shift> {
        self.against(centre, reference)?.measure(trace)
    }

    /// The tapered window of `reference` centred at fractional sample index `centre`, ready to
    /// measure traces against (`reference` holds the samples
    /// [`samples_needed`](Self::samples_needed)`(centre)`); `None` when the reference has no
    /// energy in the window or the wrong length.
    pub fn against(&self, centre: f64, reference: &[f32]) -> Option<TaperedReference<'_>> {
        let needed = self.samples_needed(centre);
        let len = needed.end.checked_sub(needed.start)? as usize;
        if reference.len() != len {
            return None;
        }
        let half = self.half_window_ms / self.dt_ms;
        // Window samples as offsets into the slices with the taper weight times the reference
        // sample, and the taper weights.
        let (taps, weights): (Vec<(usize, f64)>, Vec<f64>) = self
            .window(centre)
            .map(|j| {
                let x = std::f64::consts::PI * (j as f64 - centre) / half;
                let (i, w) = ((j - needed.start) as usize, 0.5 * (1.0 + x.cos()));
                ((i, w * f64::from(reference[i])), w)
            })
            .unzip();
        let energy: f64 = taps
            .iter()
            .zip(&weights)
            .map(|(&(i, _), w)| w * f64::from(reference[i]).powi(2))
            .sum();
        (energy > 0.0).then_some(TaperedReference {
            measure: self,
            len,
            taps,
            weights,
            energy,
        })
    }
}

/// A reference trace's tapered window ([`ShiftMeasure::against`]), measured against once per
/// trace.
pub struct TaperedReference<'a> {
    measure: &'a ShiftMeasure,
    /// Samples every trace must hold.
    len: usize,
    /// Window samples as offsets into the slices, with taper weight times reference sample.
    taps: Vec<(usize, f64)>,
    /// The taper weight of each window sample.
    weights: Vec<f64>,
    /// Tapered energy of the reference.
    energy: f64,
}

impl TaperedReference<'_> {
    /// Shift of `trace` against the reference (see [`ShiftMeasure::measure`]).
    pub fn measure(&self, trace: &[f32]) -> Option<Shift> {
        if trace.len() != self.len {
            return None;
        }
        let m = self.measure;
        let reach = m.lag_reach();
        // Cross products and trace energies at each integer lag; both are interpolated
        // between lags (the cross products are a linear filter of the band-limited trace, the
        // energies a Hann-smoothed square), and their ratio is the correlation.
        let (cross, energy): (Vec<f64>, Vec<f64>) = (-reach..=reach)
            .map(|k| {
                self.taps
                    .iter()
                    .zip(&self.weights)
                    .fold((0.0, 0.0), |(x, e), (&(i, wr), w)| {
                        let s = f64::from(trace[(i as isize + k) as usize]);
                        (x + wr * s, e + w * s * s)
                    })
            })
            .unzip();
        let correlation = |lag: f64| {
            let e = interpolate(&energy, reach, lag);
            if e > 0.0 {
                interpolate(&cross, reach, lag) / (self.energy * e).sqrt()
            } else {
                0.0
            }
        };
        let max_lag = m.max_lag as isize;
        let best = (-max_lag..=max_lag)
            .max_by(|&a, &b| correlation(a as f64).total_cmp(&correlation(b as f64)))?;
        if correlation(best as f64).is_nan() || correlation(best as f64) <= 0.0 {
            return None;
        }
        let (lag, peak) = fine_peak(correlation, best);
        let ms = lag * m.dt_ms;
        (ms.abs() <= m.max_shift_ms).then_some(Shift {
            ms,
            quality: peak.min(1.0),
        })
    }
}

/// Lanczos kernel `sinc(x) sinc(x / a)` for `|x| < a`, else 0.
fn lanczos(x: f64) -> f64 {
    let a = LANCZOS_LOBES as f64;
    if x == 0.0 {
        1.0
    } else if x.abs() >= a {
        0.0
    } else {
        let px = std::f64::consts::PI * x;
        a * px.sin() * (px / a).sin() / (px * px)
    }
}

/// The values at integer lags `-reach..=reach` interpolated at fractional lag `lag`.
fn interpolate(values: &[f64], reach: isize, lag: f64) -> f64 {
    let base = lag.floor() as isize;
    let lobes = LANCZOS_LOBES as isize;
    (base - lobes + 1..=base + lobes)
        .filter(|k| k.abs() <= reach)
        .map(|k| values[(k + reach) as usize] * lanczos(lag - k as f64))
        .sum()
}

/// The peak of `correlation` within one lag of the best integer lag `best`: (lag,
/// coefficient). A grid of [`COARSE_STEPS`] a lag finds the peak's neighbourhood; a
/// golden-section search (Kiefer 1953, from memory) refines it to [`LAG_TOLERANCE`].
fn fine_peak(correlation: impl Fn(f64) -> f64, best: isize) -> (f64, f64) {
    let step = 1.0 / COARSE_STEPS as f64;
    let at = |i: isize| best as f64 + i as f64 * step;
    let span = COARSE_STEPS as isize;
    let top = (-span..=span)
        .max_by(|&a, &b| correlation(at(a)).total_cmp(&correlation(at(b))))
        .unwrap_or(0);
    let ratio = (5f64.sqrt() - 1.0) / 2.0;
    let (mut lo, mut hi) = (at(top) - step, at(top) + step);
    let (mut x1, mut x2) = (hi - ratio * (hi - lo), lo + ratio * (hi - lo));
    let (mut f1, mut f2) = (correlation(x1), correlation(x2));
    while hi - lo > LAG_TOLERANCE {
        if f1 < f2 {
            lo = x1;
            (x1, f1) = (x2, f2);
            x2 = lo + ratio * (hi - lo);
            f2 = correlation(x2);
        } else {
            hi = x2;
            (x2, f2) = (x1, f1);
            x1 = hi - ratio * (hi - lo);
            f1 = correlation(x1);
        }
    }
    let lag = 0.5 * (lo + hi);
    (lag, correlation(lag))
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    use crate::synthetic::ricker_samples;

    /// Samples `needed` of a 1-amplitude Ricker event at `event_ms`, sampled every `dt` ms.
    pub(crate) fn trace(needed: &Range<isize>, dt: f64, f: f64, event_ms: f64) -> Vec<f32> {
        let count = (needed.end - needed.start) as usize;
        ricker_samples(needed.start, count, dt, f, &[(event_ms, 1.0)])
    }

    #[test]
    fn shifted_ricker_wavelets_are_measured_to_a_hundredth_of_a_sample() {
        // Exact check: a copy of the reference delayed by tau must measure tau (the definition
        // of the shift); quality 1 for identical shapes (Cauchy-Schwarz).
        for (dt, f) in [(2.0, 25.0), (4.0, 20.0), (1.0, 40.0)] {
            let m = ShiftMeasure::new(dt, 40.0, 12.0).unwrap();
            let horizon = 1003.3;
            let centre = horizon / dt;
            let needed = m.samples_needed(centre);
            let reference = trace(&needed, dt, f, horizon);
            for tau in [-11.0, -7.3, -2.5, -0.9, 0.0, 0.37, 1.5, 3.21, 6.77, 11.2] {
                let shifted = trace(&needed, dt, f, horizon + tau);
                let s = m.measure(centre, &reference, &shifted).unwrap();
                assert!(
                    (s.ms - tau).abs() < 0.01 * dt,
                    "dt {dt} tau {tau}: measured {}",
                    s.ms
                );
                assert!(s.quality > 0.995 && s.quality <= 1.0, "{}", s.quality);
            }
        }
    }

    #[test]
    fn sinc_interpolation_beats_the_plain_parabola() {
        // The parabola through the three best integer lags (REFERENCES.md section 8) is biased
        // towards the nearest sample for a Ricker correlation peak; the measured shift is
        // compared with the exact one for both.
        let (dt, f) = (4.0, 25.0);
        let m = ShiftMeasure::new(dt, 40.0, 12.0).unwrap();
        let (horizon, tau) = (800.0, 1.3);
        let centre = horizon / dt;
        let needed = m.samples_needed(centre);
        let reference = trace(&needed, dt, f, horizon);
        let shifted = trace(&needed, dt, f, horizon + tau);
        let s = m.measure(centre, &reference, &shifted).unwrap();
        let reach = m.lag_reach();
        let c = |k: isize| {
            let window = m.window(centre);
            let (mut x, mut e1, mut e2) = (0.0, 0.0, 0.0);
            for j in window {
                let w =
                    0.5 * (1.0 + (std::f64::consts::PI * (j as f64 - centre) * dt / 40.0).cos());
                let r = f64::from(reference[(j - needed.start) as usize]);
                let t = f64::from(shifted[(j - needed.start + k) as usize]);
                x += w * r * t;
                e1 += w * r * r;
                e2 += w * t * t;
            }
            x / (e1 * e2).sqrt()
        };
        assert!(reach >= 1);
        let (l, c0, r) = (c(-1), c(0), c(1));
        let parabola = 0.5 * (l - r) / (l - 2.0 * c0 + r) * dt;
        assert!((s.ms - tau).abs() < 0.02, "sinc: {}", s.ms);
        assert!(
            (parabola - tau).abs() > 5.0 * (s.ms - tau).abs(),
            "parabola {parabola} vs sinc {}",
            s.ms
        );
    }

    #[test]
    fn shifts_beyond_the_limit_and_dead_traces_give_no_measurement() {
        let (dt, f) = (2.0, 25.0);
        let m = ShiftMeasure::new(dt, 40.0, 12.0).unwrap();
        let centre = 500.0;
        let needed = m.samples_needed(centre);
        let reference = trace(&needed, dt, f, 1000.0);
        // A 17 ms delay is past the 12 ms limit: the best lag sits at the limit and its refined
        // peak beyond it.
        let late = trace(&needed, dt, f, 1017.0);
        assert_eq!(m.measure(centre, &reference, &late), None);
        let dead = vec![0.0f32; reference.len()];
        assert_eq!(m.measure(centre, &reference, &dead), None);
        assert_eq!(m.measure(centre, &dead, &reference), None);
        assert_eq!(m.measure(centre, &reference, &reference[1..]), None);
    }

    #[test]
    fn centres_far_outside_any_trace_neither_overflow_nor_measure() {
        // A horizon value of 1e30 ms (an undeclared null) must not wrap the sample arithmetic.
        let m = ShiftMeasure::new(2.0, 40.0, 12.0).unwrap();
        for centre in [1e30, -1e30, 4.6e18, -4.6e18] {
            let needed = m.samples_needed(centre);
            assert!(
                needed.start < 0 || needed.end > 1_000_000,
                "{centre}: {needed:?}"
            );
            assert_eq!(m.measure(centre, &[1.0; 8], &[1.0; 8]), None);
        }
    }

    #[test]
    fn settings_outside_their_ranges_are_refused() {
        assert!(ShiftMeasure::new(0.0, 40.0, 12.0).is_err());
        assert!(ShiftMeasure::new(2.0, 3.0, 1.0).is_err());
        assert!(ShiftMeasure::new(2.0, 40.0, 1.0).is_err());
        assert!(ShiftMeasure::new(2.0, 40.0, 40.0).is_err());
        assert!(ShiftMeasure::new(2.0, 40.0, f64::NAN).is_err());
    }
}
