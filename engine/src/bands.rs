//! What the engine knows about each band it writes, read from the two band tables
//! ([`crate::surface::curvature::ATTRIBUTES`] and [`crate::anisotropy::FIT_BANDS`]): unit, description,
//! the kind of colour scale its values take ([`ScaleKind`]) and what the map vectors read it
//! for ([`VectorRole`]). Colours, circular statistics and vectors are derived from these rows;
//! a band read from a file is found by its name with [`band_info`].

use crate::anisotropy::vectors::VectorAxis;
use crate::anisotropy::FIT_BANDS;
use crate::surface::curvature::ATTRIBUTES;

/// What a band's values are, as far as drawing and averaging them goes: the family of colour
/// scale they are drawn on.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ScaleKind {
    /// Signed values with a meaningful zero (curvatures): diverging colours, zero at the
    /// centre colour.
    Diverging,
    /// Magnitudes and other one-sided values, low to high: sequential colours.
    Sequential,
    /// Angles in degrees on a circle of `period` degrees (360 for directions such as dip
    /// azimuth, 180 for axes such as the anisotropy azimuths): cyclic colours, and averaged as
    /// angles.
    Cyclic {
        /// Degrees after which the angle repeats.
        period: f64,
    },
    /// The shape index, -1 (bowl) to +1 (dome), drawn over that full range.
    ShapeIndex,
}

impl ScaleKind {
    /// The period in degrees of a cyclic band; `None` for any other kind.
    pub fn period(self) -> Option<f64> {
        match self {
            ScaleKind::Cyclic { period } => Some(period),
            _ => None,
        }
    }
}

/// What the anisotropy map vectors (and the corridor statistics built on them) read a band
/// for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum VectorRole {
    /// The vector's length: the magnitude B (ms).
    Length,
    /// The standard error of the length; length over it is the vector's SNR.
    LengthStderr,
    /// The azimuth the vector follows along `axis`, degrees from grid north, 0..180.
    Azimuth(VectorAxis),
    /// The standard error of the azimuths (degrees).
    AzimuthStderr,
    /// The number of sectors a bin was fitted from (bins with fewer than the grid's most are
    /// flagged).
    Sectors,
}

/// One band as the tables describe it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BandInfo {
    /// Band id: the band description written to the GeoTIFF.
    pub id: &'static str,
    /// Unit of the written values.
    pub unit: &'static str,
    /// What the value is, in a few words.
    pub description: &'static str,
    /// The colour-scale family of its values.
    pub scale: ScaleKind,
    /// What the map vectors read it for; `None` when they do not.
    pub vector: Option<VectorRole>,
}

/// Every band of the two tables: the curvature attributes, then the anisotropy bands.
pub fn all_bands() -> impl Iterator<Item = BandInfo> {
    ATTRIBUTES
        .iter()
        .map(|a| a.info())
        .chain(FIT_BANDS.iter().map(|b| b.info()))
}

/// The table row of the band named `name` (a band description as written); `None` for a band
/// flexure does not write.
pub fn band_info(name: &str) -> Option<BandInfo> {
    all_bands().find(|b| b.id == name)
}

/// The anisotropy band the map vectors read for `role` (every role has exactly one, checked by
/// a test).
pub fn vector_band(role: VectorRole) -> Option<BandInfo> {
    all_bands().find(|b| b.vector == Some(role))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_ids_are_unique_and_found_by_name() {
        let ids: Vec<&str> = all_bands().map(|b| b.id).collect();
        for id in &ids {
            assert_eq!(ids.iter().filter(|i| *i == id).count(), 1, "{id} twice");
            assert_eq!(band_info(id).map(|b| b.id), Some(*id));
        }
        assert_eq!(band_info("chosen_window"), None);
    }

    #[test]
    fn every_vector_role_has_exactly_one_anisotropy_band() {
        let roles = [
            VectorRole::Length,
            VectorRole::LengthStderr,
            VectorRole::Azimuth(VectorAxis::Fast),
            VectorRole::Azimuth(VectorAxis::Slow),
            VectorRole::AzimuthStderr,
            VectorRole::Sectors,
        ];
        for role in roles {
            let with = |b: &BandInfo| b.vector == Some(role);
            assert_eq!(all_bands().filter(with).count(), 1, "{role:?}");
            assert!(FIT_BANDS.iter().any(|b| with(&b.info())), "{role:?}");
        }
    }

    #[test]
    fn angles_are_cyclic_with_their_period() {
        // Directions repeat after 360 degrees, axes after 180 (elementary geometry).
        let period = |id: &str| band_info(id).and_then(|b| b.scale.period());
        assert_eq!(period("dip_azimuth"), Some(360.0));
        assert_eq!(period("azimuth_fast"), Some(180.0));
        assert_eq!(period("azimuth_slow"), Some(180.0));
        assert_eq!(period("dip"), None);
        assert_eq!(
            band_info("k_gauss").map(|b| b.scale),
            Some(ScaleKind::Diverging)
        );
    }
}
