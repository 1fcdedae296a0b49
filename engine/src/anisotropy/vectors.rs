//! Map vectors of the anisotropy fit: the axis they follow, what a vector needs from one bin,
//! which bins get a vector, their default length and the end points of a segment.

use super::SectorFit;
use crate::stats::{quantile, Quantile};

/// Which azimuth the map vectors follow.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum VectorAxis {
    /// The fast azimuth (fracture strike under the HTI reading).
    Fast,
    /// The slow azimuth (fracture normal under the HTI reading).
    Slow,
}

/// What a map vector needs from one bin: magnitude (ms), both azimuths (degrees from grid
/// north) and the magnitude's signal-to-noise ratio.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct VectorSample {
    /// Magnitude B (ms).
    pub magnitude: f64,
    /// Fast azimuth, degrees from grid north.
    pub azimuth_fast: f64,
    /// Slow azimuth, degrees from grid north.
    pub azimuth_slow: f64,
    /// B / magnitude_stderr (NaN when unknown).
    pub snr: f64,
}

impl VectorSample {
    /// The azimuth along `axis`.
    pub fn azimuth(&self, axis: VectorAxis) -> f64 {
        match axis {
            VectorAxis::Fast => self.azimuth_fast,
            VectorAxis::Slow => self.azimuth_slow,
        }
    }
}

impl From<&SectorFit> for VectorSample {
    fn from(f: &SectorFit) -> Self {
        Self {
            magnitude: f.magnitude,
            azimuth_fast: f.azimuth_fast,
            azimuth_slow: f.azimuth_slow,
            snr: f.snr(),
        }
    }
}

/// Bins kept for map vectors, row-major `(row, col, sample)`: every `every.0`-th column and
/// `every.1`-th row of the grid (the middle bin of each block) whose SNR is at least `min_snr`
/// (`min_snr = 0` keeps every bin with a sample, including 3-sector bins of unknown SNR).
/// `samples` are whole rows of `cols` bins starting at grid row `first_row` (0 for a whole
/// grid; a job streaming the grid in batches passes each batch's first row, so the same bins
/// are kept whatever the batches); rows returned are grid rows.
pub fn vector_bins<T: Copy>(
    samples: &[Option<T>],
    first_row: usize,
    cols: usize,
    every: (usize, usize),
    min_snr: f64,
    snr: impl Fn(&T) -> f64,
) -> Vec<(usize, usize, T)> {
    let (ec, er) = (every.0.max(1), every.1.max(1));
    samples
        .iter()
        .enumerate()
        .filter_map(|(i, s)| s.map(|s| (first_row + i / cols, i % cols, s)))
        .filter(|&(r, c, _)| r % er == er / 2 && c % ec == ec / 2)
        .filter(|(_, _, s)| min_snr <= 0.0 || snr(s) >= min_snr)
        .collect()
}

/// Default vector scale in metres per ms: the 95th percentile ([`Quantile::Nearest`]) of
/// `magnitudes` draws 0.9 of
/// the distance between neighbouring vectors (`spacing_m`), so they rarely overlap. 0 when no
/// magnitude is positive.
pub fn default_vector_scale(magnitudes: impl Iterator<Item = f64>, spacing_m: f64) -> f64 {
    let mut m: Vec<f64> = magnitudes.filter(|v| v.is_finite() && *v > 0.0).collect();
    quantile(&mut m, 0.95, Quantile::Nearest).map_or(0.0, |p95| 0.9 * spacing_m / p95)
}

/// End points (CRS units) of a segment of `length_m` metres centred on `centre` along
/// `azimuth_deg` (clockwise from grid north).
pub fn segment(
    centre: (f64, f64),
    azimuth_deg: f64,
    length_m: f64,
    metres_per_unit: f64,
) -> ((f64, f64), (f64, f64)) {
    let (s, c) = azimuth_deg.to_radians().sin_cos();
    let half = 0.5 * length_m / metres_per_unit;
    (
        (centre.0 - half * s, centre.1 - half * c),
        (centre.0 + half * s, centre.1 + half * c),
    )
}
