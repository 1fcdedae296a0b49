//! What a sector-time raster declares, as `flexure sector-times` writes it and
//! `flexure anisotropy` reads it, and the weight a measured shift's correlation quality gives
//! it in the fit.
//!
//! - Band metadata [`AZIMUTH_ITEM`] (`AZIMUTH_DEG`): the band's sector-centre azimuth in
//!   degrees from grid north.
//! - Dataset metadata [`SHIFTS_ITEM`]` = yes` (`SECTOR_SHIFTS`): the bands hold time shifts in
//!   ms (positive = later) against a reference time, not absolute two-way times.
//! - Dataset metadata [`REFERENCE_FILE_ITEM`] (`REFERENCE_TIME_FILE`): the raster holding that
//!   reference time in ms, named relative to the sector raster's folder; its own dataset
//!   metadata [`REFERENCE_KIND_ITEM`] (`REFERENCE_TIME_KIND`) is `horizon` (the guide
//!   horizon's two-way time) or `interval` (the isotropic interval time, base minus top).
//! - Beside it [`QUALITY_FILE`] (`sector_quality.tif`, dataset metadata [`QUALITY_ITEM`]` =
//!   yes`): per sector, the peak normalised cross-correlation coefficient of the measured
//!   shift (0..1), bands matched to sectors by `AZIMUTH_DEG`.
//!
//! Weight of a quality ([`quality_weight`]): for a time delay estimated by cross-correlation,
//! the variance is proportional to `(1 - c^2) / c^2` with `c^2` the coherence of the two
//! signals (Knapp & Carter 1976, IEEE Trans. ASSP 24(4):320, from memory; the flat-coherence
//! case of their bound). The peak correlation coefficient `c` is read as that coherence, so
//! the inverse-variance weight is `c^2 / (1 - c^2)`, with `c` capped at [`QUALITY_CAP`]:
//! near 1 the weight grows without bound, while a coefficient that high says more about the
//! similarity of the wavelets and the rounding of the pick than about the noise; the cap keeps
//! one such sector from outweighing a `c = 0.7` sector by more than about 50 to 1. A shift
//! difference (an interval, base minus top) has the sum of the two variances
//! ([`interval_weight`]).

/// Band metadata item holding a band's sector-centre azimuth, degrees from grid north.
pub const AZIMUTH_ITEM: &str = "AZIMUTH_DEG";
/// Dataset metadata item saying (`yes`) that the bands hold time shifts, not absolute times.
pub const SHIFTS_ITEM: &str = "SECTOR_SHIFTS";
/// Dataset metadata item naming the reference-time raster, relative to the raster's folder.
pub const REFERENCE_FILE_ITEM: &str = "REFERENCE_TIME_FILE";
/// Dataset metadata item of a reference-time raster: `horizon` or `interval`.
pub const REFERENCE_KIND_ITEM: &str = "REFERENCE_TIME_KIND";
/// Dataset metadata item saying (`yes`) that the bands hold correlation qualities (the
/// quality raster), not times.
pub const QUALITY_ITEM: &str = "SECTOR_QUALITY";
/// File name of the correlation-quality raster beside a sector-time raster.
pub const QUALITY_FILE: &str = "sector_quality.tif";
/// Largest correlation coefficient a weight is computed from (see the module notes).
pub const QUALITY_CAP: f64 = 0.99;

/// Whether the value of [`SHIFTS_ITEM`] says the bands hold time shifts (`yes`, any case).
pub fn declares_shifts(value: Option<&str>) -> bool {
    value.is_some_and(|v| v.trim().eq_ignore_ascii_case("yes"))
}

/// Inverse-variance weight of a shift measured with peak correlation coefficient `c`:
/// `c^2 / (1 - c^2)` with `c` capped at [`QUALITY_CAP`] (see the module notes); 0 for `c <= 0`
/// (no correlation: the sector is left out of the bin), NaN for NaN (no measurement).
pub fn quality_weight(c: f64) -> f64 {
    if c.is_nan() {
        return f64::NAN;
    }
    let c = c.clamp(0.0, QUALITY_CAP);
    c * c / (1.0 - c * c)
}

/// Inverse-variance weight of a difference of two independent measurements of weights
/// `top` and `base`: `1 / (1/top + 1/base)`; 0 when either is 0 (or less), NaN when either is
/// NaN.
pub fn interval_weight(top: f64, base: f64) -> f64 {
    if top.is_nan() || base.is_nan() {
        f64::NAN
    } else if top <= 0.0 || base <= 0.0 {
        0.0
    } else {
        top * base / (top + base)
    }
}

/// Correlation coefficient standing for the difference of two measured shifts of peak
/// coefficients `top` and `base`: the `c` whose [`quality_weight`] is the
/// [`interval_weight`] of the two, `sqrt(w / (1 + w))`, so a quality raster of interval shifts
/// weights the fit as the two measurements do; NaN when either is NaN.
pub fn interval_quality(top: f64, base: f64) -> f64 {
    let w = interval_weight(quality_weight(top), quality_weight(base));
    (w / (1.0 + w)).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn quality_weights_are_inverse_variances() {
        // Knapp & Carter 1976 (from memory): variance proportional to (1 - c^2) / c^2, so the
        // weight is its inverse; by hand c = 0.5 -> 0.25 / 0.75 = 1/3, c = 0.8 -> 0.64 / 0.36.
        assert_relative_eq!(quality_weight(0.5), 1.0 / 3.0, max_relative = 1e-15);
        assert_relative_eq!(quality_weight(0.8), 0.64 / 0.36, max_relative = 1e-15);
        // Capped at 0.99: 0.9801 / 0.0199.
        let cap = 0.9801 / 0.0199;
        assert_relative_eq!(quality_weight(0.995), cap, max_relative = 1e-12);
        assert_relative_eq!(quality_weight(1.0), cap, max_relative = 1e-12);
        assert_eq!(quality_weight(0.0), 0.0);
        assert_eq!(quality_weight(-0.3), 0.0);
        assert!(quality_weight(f64::NAN).is_nan());
        // Variances add for a difference: weights 1/3 and 1 -> 1 / (3 + 1).
        assert_relative_eq!(interval_weight(1.0 / 3.0, 1.0), 0.25, max_relative = 1e-15);
        assert_eq!(interval_weight(0.0, 2.0), 0.0);
        assert!(interval_weight(f64::NAN, 2.0).is_nan());
        assert!(declares_shifts(Some(" YES")) && !declares_shifts(Some("no")));
        assert!(!declares_shifts(None));
        // The interval's coefficient carries the combined weight: c = 0.5 and c = 0.8 give
        // 1 / (3 + 0.5625) = 0.2807..., whose coefficient sqrt(w / (1 + w)) = 0.4685... (by
        // hand); its weight is that combination again.
        let c = interval_quality(0.5, 0.8);
        let w: f64 = 1.0 / (3.0 + 0.36 / 0.64);
        assert_relative_eq!(c, (w / (1.0 + w)).sqrt(), max_relative = 1e-14);
        assert_relative_eq!(quality_weight(c), w, max_relative = 1e-12);
        assert!(interval_quality(f64::NAN, 0.9).is_nan());
    }
}
