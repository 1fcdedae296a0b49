//! Colour scales for maps, chosen by what a band measures (its [`ScaleKind`] in the band tables,
//! looked up by name with [`band_info`]), from published open colour families through the
//! `colorous` crate (Apache-2.0; its colours are those of ColorBrewer, Brewer 2002, Apache-2.0,
//! and of matplotlib's viridis, van der Walt & Smith 2015, CC0):
//! - diverging (signed curvatures): ColorBrewer RdBu, symmetric about zero, antiforms
//!   (positive) red, synforms blue; the 11 published classes interpolated linearly (as
//!   matplotlib's RdBu), so zero is exactly the published centre colour #f7f7f7;
//! - shape index: ColorBrewer Spectral over -1..1 the same way, domes red, bowls purple-blue;
//! - cyclic (azimuths): sinebow, 0 and the period meet (0..180 for the axial anisotropy
//!   azimuths, 0..360 for dip azimuth);
//! - sequential (magnitudes, curvedness, dip, errors, counts): viridis.
//!
//! A band the tables do not know (read from another program's file) is diverging when its
//! values take both signs and sequential otherwise.
//!
//! Values beyond the clip are drawn in the end colours; NaN has no colour (transparent).

use crate::bands::{band_info, ScaleKind};
use crate::stats::sketch::Distribution;
use crate::stats::{quantile, Quantile};
use ndarray::Array2;

/// How to clip the colour range.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Clip {
    /// Robust percentiles: +-98th percentile of |value| for diverging scales, 2nd to 98th
    /// percentile for sequential ones; azimuths and shape index use their full range.
    Auto,
    /// Explicit limits (value units).
    Range(f64, f64),
}

/// A colour scale for one band: kind, limits and a note on how the limits were chosen.
#[derive(Clone, Debug, PartialEq)]
pub struct ColourScale {
    /// How values map onto colours.
    pub kind: ScaleKind,
    /// Value drawn in the first end colour.
    pub lo: f64,
    /// Value drawn in the last end colour.
    pub hi: f64,
    /// How the limits were chosen, for the legend.
    pub clip_note: String,
}

/// The scale kind of a band: its row's in the band tables ([`band_info`]); a band they do not
/// know is diverging if its values take both signs and sequential otherwise.
pub fn scale_kind(id: &str, values: &Array2<f64>) -> ScaleKind {
    if let Some(band) = band_info(id) {
        return band.scale;
    }
    let finite = || values.iter().copied().filter(|v| v.is_finite());
    let signed = finite().any(|v| v < 0.0) && finite().any(|v| v > 0.0);
    if signed {
        ScaleKind::Diverging
    } else {
        ScaleKind::Sequential
    }
}

/// Order statistics of a band's finite values at the [`Quantile::Nearest`] positions, which
/// robust colour limits are read from: exact from the values, or from the quantile sketches of
/// a map too large to hold ([`Distribution`]).
pub trait BandQuantiles {
    /// Whether the band has no finite value.
    fn is_empty(&self) -> bool;
    /// The `q` quantile of the values.
    fn value(&mut self, q: f64) -> f64;
    /// The `q` quantile of their magnitudes.
    fn magnitude(&mut self, q: f64) -> f64;
}

/// The finite values themselves: exact quantiles.
struct Exact(Vec<f64>);

impl BandQuantiles for Exact {
    fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    fn value(&mut self, q: f64) -> f64 {
        quantile(&mut self.0, q, Quantile::Nearest).unwrap_or(f64::NAN)
    }

    fn magnitude(&mut self, q: f64) -> f64 {
        let mut magnitudes: Vec<f64> = self.0.iter().map(|v| v.abs()).collect();
        quantile(&mut magnitudes, q, Quantile::Nearest).unwrap_or(f64::NAN)
    }
}

/// Sketched quantiles, within [`crate::stats::sketch::RELATIVE_ERROR`] of the exact ones.
impl BandQuantiles for Distribution {
    fn is_empty(&self) -> bool {
        self.values.count() == 0
    }

    fn value(&mut self, q: f64) -> f64 {
        self.values.quantile(q).unwrap_or(f64::NAN)
    }

    fn magnitude(&mut self, q: f64) -> f64 {
        self.magnitudes.quantile(q).unwrap_or(f64::NAN)
    }
}

impl ColourScale {
    /// The scale for band `id` with `values` (NaN = null); `None` when every value is null.
    pub fn for_band(id: &str, values: &Array2<f64>, clip: Clip) -> Option<Self> {
        let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
        Self::from_quantiles(scale_kind(id, values), &mut Exact(finite), clip)
    }

    /// The scale of `kind` for a band whose robust limits are read from `quantiles`; `None`
    /// when the band has no finite value.
    pub fn from_quantiles(
        kind: ScaleKind,
        quantiles: &mut impl BandQuantiles,
        clip: Clip,
    ) -> Option<Self> {
        if quantiles.is_empty() {
            return None;
        }
        if let Clip::Range(lo, hi) = clip {
            let clip_note = format!("colours clipped to {lo} .. {hi} (--clip)");
            return Some(Self {
                kind,
                lo,
                hi,
                clip_note,
            });
        }
        let (lo, hi, clip_note) = match kind {
            ScaleKind::Cyclic { period } => (0.0, period, format!("cyclic, 0 .. {period} degrees")),
            ScaleKind::ShapeIndex => (-1.0, 1.0, "full range -1 (bowl) .. +1 (dome)".into()),
            ScaleKind::Diverging => {
                let c = positive_or_one(quantiles.magnitude(0.98));
                (
                    -c,
                    c,
                    format!("clipped at +-{} (98th percentile of |value|)", short(c)),
                )
            }
            ScaleKind::Sequential => {
                let (lo, mut hi) = (quantiles.value(0.02), quantiles.value(0.98));
                if hi <= lo {
                    hi = lo + positive_or_one(lo.abs() * 1e-3);
                }
                (
                    lo,
                    hi,
                    format!(
                        "clipped to {} .. {} (2nd to 98th percentile)",
                        short(lo),
                        short(hi)
                    ),
                )
            }
        };
        Some(Self {
            kind,
            lo,
            hi,
            clip_note,
        })
    }

    /// Position of `v` on the colour ramp, 0..1 (clamped; wrapped for cyclic scales). For a
    /// diverging scale with `lo < 0 < hi`, zero is at 0.5 and each sign is scaled on its own.
    pub fn position(&self, v: f64) -> f64 {
        let span = self.hi - self.lo;
        match self.kind {
            ScaleKind::Cyclic { .. } => ((v - self.lo) / span).rem_euclid(1.0),
            ScaleKind::Diverging if self.lo < 0.0 && self.hi > 0.0 => {
                let t = if v < 0.0 {
                    0.5 - 0.5 * v / self.lo
                } else {
                    0.5 + 0.5 * v / self.hi
                };
                t.clamp(0.0, 1.0)
            }
            _ => ((v - self.lo) / span).clamp(0.0, 1.0),
        }
    }

    /// The colour of `v`; `None` for NaN.
    pub fn colour(&self, v: f64) -> Option<[u8; 3]> {
        if !v.is_finite() {
            return None;
        }
        let t = self.position(v);
        Some(match self.kind {
            // High values red: the ColorBrewer ramps run red to blue, so read them backwards.
            ScaleKind::Diverging => brewer_linear(colorous::RED_BLUE, 1.0 - t),
            ScaleKind::ShapeIndex => brewer_linear(colorous::SPECTRAL, 1.0 - t),
            ScaleKind::Sequential => rgb(colorous::VIRIDIS.eval_continuous(t)),
            ScaleKind::Cyclic { .. } => rgb(colorous::SINEBOW.eval_continuous(t)),
        })
    }

    /// Name and source of the colour map, for legends.
    pub fn palette_name(&self) -> &'static str {
        match self.kind {
            ScaleKind::Diverging => "ColorBrewer RdBu (diverging; positive red)",
            ScaleKind::ShapeIndex => "ColorBrewer Spectral (dome red, bowl blue)",
            ScaleKind::Sequential => "viridis (sequential)",
            ScaleKind::Cyclic { .. } => "sinebow (cyclic)",
        }
    }
}

/// Number of published classes the diverging ramps are built from.
const BREWER_CLASSES: usize = 11;

/// Linear interpolation between the 11 published classes of a ColorBrewer scheme at `t`.
fn brewer_linear(gradient: colorous::Gradient, t: f64) -> [u8; 3] {
    let x = t.clamp(0.0, 1.0) * (BREWER_CLASSES - 1) as f64;
    let i = (x.floor() as usize).min(BREWER_CLASSES - 2);
    let f = x - i as f64;
    let (a, b) = (
        rgb(gradient.eval_rational(i, BREWER_CLASSES)),
        rgb(gradient.eval_rational(i + 1, BREWER_CLASSES)),
    );
    std::array::from_fn(|k| (a[k] as f64 + f * (b[k] as f64 - a[k] as f64)).round() as u8)
}

fn rgb(c: colorous::Color) -> [u8; 3] {
    [c.r, c.g, c.b]
}

/// `v` with about four significant digits, for legends.
pub fn short(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let decimals = (3 - v.abs().log10().floor() as i32).clamp(0, 8) as usize;
    let text = format!("{v:.decimals$}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

fn positive_or_one(v: f64) -> f64 {
    if v > 0.0 && v.is_finite() {
        v
    } else {
        1.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn values(v: &[f64]) -> Array2<f64> {
        Array2::from_shape_vec((1, v.len()), v.to_vec()).unwrap()
    }

    #[test]
    fn diverging_zero_is_the_published_centre_colour() {
        // ColorBrewer RdBu, 11 classes (Brewer, colorbrewer2.org; from memory): centre #f7f7f7,
        // ends #67001f (red) and #053061 (blue).
        let s = ColourScale::for_band("k_pos", &values(&[-2.0, 1.0, 3.0]), Clip::Auto).unwrap();
        assert_eq!(s.colour(0.0), Some([0xf7, 0xf7, 0xf7]));
        assert_eq!(s.colour(s.hi), Some([0x67, 0x00, 0x1f]));
        assert_eq!(s.colour(-1e9), Some([0x05, 0x30, 0x61]));
        assert_eq!(s.colour(f64::NAN), None);
        assert_eq!(s.lo, -s.hi);
    }

    #[test]
    fn sequential_ends_are_viridis() {
        // matplotlib's viridis table (van der Walt & Smith 2015): first entry
        // (0.267004, 0.004874, 0.329415) = #440154, last (0.993248, 0.906157, 0.143936) = #fde725.
        let v: Vec<f64> = (0..101).map(f64::from).collect();
        let s = ColourScale::for_band("magnitude", &values(&v), Clip::Auto).unwrap();
        assert_eq!((s.lo, s.hi), (2.0, 98.0));
        assert_eq!(s.colour(0.0), Some([0x44, 0x01, 0x54]));
        assert_eq!(s.colour(100.0), Some([0xfd, 0xe7, 0x25]));
    }

    #[test]
    fn azimuths_are_cyclic_and_shape_index_spans_its_range() {
        let s = ColourScale::for_band("azimuth_fast", &values(&[10.0, 20.0]), Clip::Auto).unwrap();
        assert_eq!(s.colour(0.0), s.colour(180.0));
        assert_eq!(s.colour(5.0), s.colour(185.0));
        let d = ColourScale::for_band("dip_azimuth", &values(&[10.0]), Clip::Auto).unwrap();
        assert_eq!((d.lo, d.hi), (0.0, 360.0));
        let si = ColourScale::for_band("shape_index", &values(&[0.1]), Clip::Auto).unwrap();
        // ColorBrewer Spectral 11 classes (from memory): #9e0142 at the red end, #5e4fa2 at the
        // other; domes (+1) red.
        assert_eq!(si.colour(1.0), Some([0x9e, 0x01, 0x42]));
        assert_eq!(si.colour(-1.0), Some([0x5e, 0x4f, 0xa2]));
    }

    #[test]
    fn kinds_come_from_the_band_tables_and_unknown_bands_from_their_signs() {
        let one_sided = values(&[0.5, 2.0]);
        assert_eq!(scale_kind("k_gauss", &one_sided), ScaleKind::Diverging);
        assert_eq!(
            scale_kind("n_sectors", &values(&[-1.0, 1.0])),
            ScaleKind::Sequential
        );
        assert_eq!(
            scale_kind("azimuth_slow", &one_sided),
            ScaleKind::Cyclic { period: 180.0 }
        );
        assert_eq!(
            scale_kind("chosen_window", &one_sided),
            ScaleKind::Sequential
        );
        assert_eq!(
            scale_kind("Depth", &values(&[-3.0, 2.0])),
            ScaleKind::Diverging
        );
    }

    #[test]
    fn sketched_limits_are_within_the_sketch_error_of_exact_ones() {
        // Reference: the exact limits of for_band on the same values (the sketch's bound,
        // stats::sketch: RELATIVE_ERROR of each quantile's magnitude).
        let mut rng = crate::stats::SeededNoise::new(8);
        let v: Vec<f64> = (0..20_000).map(|_| 0.5 + rng.gaussian()).collect();
        let mut sketched = Distribution::default();
        v.iter().for_each(|&x| sketched.add(x));
        let tol = crate::stats::sketch::RELATIVE_ERROR * (1.0 + 1e-9);
        for kind in [ScaleKind::Diverging, ScaleKind::Sequential] {
            let exact =
                ColourScale::from_quantiles(kind, &mut Exact(v.clone()), Clip::Auto).unwrap();
            let got = ColourScale::from_quantiles(kind, &mut sketched, Clip::Auto).unwrap();
            for (g, e) in [(got.lo, exact.lo), (got.hi, exact.hi)] {
                assert!((g - e).abs() <= tol * e.abs(), "{kind:?}: {g} vs {e}");
            }
        }
        assert!(ColourScale::from_quantiles(
            ScaleKind::Diverging,
            &mut Distribution::default(),
            Clip::Auto
        )
        .is_none());
    }

    #[test]
    fn all_null_band_has_no_scale_and_explicit_clip_is_kept() {
        assert!(ColourScale::for_band("k_pos", &values(&[f64::NAN]), Clip::Auto).is_none());
        let s = ColourScale::for_band("k_mean", &values(&[1.0]), Clip::Range(-0.5, 0.5)).unwrap();
        assert_eq!((s.lo, s.hi), (-0.5, 0.5));
        assert!(s.clip_note.contains("--clip"));
    }
}
