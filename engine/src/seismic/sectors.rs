//! Sector time shifts of one bin: every sector trace measured against a reference trace, by
//! default the mean of the sector traces.
//!
//! Under the HTI traveltime law `t(phi) = t0 + B cos 2(phi - phi_slow)` (Tsvankin 1997, from
//! memory) the shifts of sectors equally spaced in azimuth come in opposite pairs, so the mean
//! trace is centred on `t0` and each sector's shift against it is `B cos 2(phi - phi_slow)`;
//! with uneven sectors the mean is off-centre by a constant, which the cos 2phi fit takes up in
//! its isotropic term.

use super::shift::{Shift, ShiftMeasure};

/// The trace every sector is measured against.
#[derive(Clone, Copy, Debug)]
pub enum Reference<'a> {
    /// The sample-by-sample mean of the sector traces.
    SectorMean,
    /// A given trace (e.g. the full-azimuth stack's), same samples as the sectors.
    Trace(&'a [f32]),
}

/// Shifts of `sectors` (each holding the samples `measure.samples_needed(centre)`) against
/// `reference` for a window centred at fractional sample index `centre`; one entry per
/// sector, `None` where it could not be measured.
pub fn sector_shifts(
    measure: &ShiftMeasure,
    centre: f64,
    sectors: &[&[f32]],
    reference: Reference,
) -> Vec<Option<Shift>> {
    let mean;
    let reference = match reference {
        Reference::Trace(trace) => trace,
        Reference::SectorMean => {
            mean = mean_trace(sectors);
            &mean
        }
    };
    let Some(reference) = measure.against(centre, reference) else {
        return vec![None; sectors.len()];
    };
    sectors
        .iter()
        .map(|trace| reference.measure(trace))
        .collect()
}

/// Sample-by-sample mean of equally long traces (empty when there are none).
fn mean_trace(traces: &[&[f32]]) -> Vec<f32> {
    let Some(first) = traces.first() else {
        return Vec::new();
    };
    let n = traces.len() as f64;
    (0..first.len())
        .map(|i| (traces.iter().map(|t| f64::from(t[i])).sum::<f64>() / n) as f32)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::seismic::shift::tests::trace;

    #[test]
    fn mean_trace_is_the_sample_mean() {
        // Arithmetic by hand.
        let a = [1.0f32, 2.0, -3.0];
        let b = [3.0f32, 0.0, 1.0];
        assert_eq!(mean_trace(&[&a, &b]), vec![2.0, 1.0, -1.0]);
        assert!(mean_trace(&[]).is_empty());
    }

    #[test]
    fn mean_reference_recovers_a_cos_2phi_law() {
        // HTI traveltime form (Tsvankin 1997, from memory): t(phi) = t0 + B cos 2(phi - phi_s).
        // Over sectors equally spaced in 2 phi the shifts come in +- pairs, so the mean trace is
        // centred on t0 and each sector's shift against it is B cos 2(phi - phi_s).
        let (dt, f, b, slow) = (2.0, 30.0, 3.0, 35.0f64);
        let m = ShiftMeasure::new(dt, 40.0, 12.0).unwrap();
        let horizon = 1500.0;
        let centre = horizon / dt;
        let needed = m.samples_needed(centre);
        let azimuths: Vec<f64> = (0..8).map(|k| 11.25 + 22.5 * k as f64).collect();
        let expected: Vec<f64> = azimuths
            .iter()
            .map(|a| b * (2.0 * (a - slow).to_radians()).cos())
            .collect();
        let traces: Vec<Vec<f32>> = expected
            .iter()
            .map(|d| trace(&needed, dt, f, horizon + d))
            .collect();
        let sectors: Vec<&[f32]> = traces.iter().map(Vec::as_slice).collect();
        let shifts = sector_shifts(&m, centre, &sectors, Reference::SectorMean);
        for (s, d) in shifts.iter().zip(&expected) {
            let s = s.unwrap();
            assert!((s.ms - d).abs() < 0.05, "expected {d}, measured {}", s.ms);
        }
    }
}
