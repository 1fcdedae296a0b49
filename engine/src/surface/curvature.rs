//! Curvature attributes of a local quadric (Roberts 2001, "Curvature attributes and their
//! application to 3D interpreted horizons", First Break 19(2):85-99; curvedness and shape
//! index after Koenderink & van Doorn 1992, Image and Vision Computing 10(8):557-564).
//!
//! Sign convention: the quadric is fitted to a positive-down surface (depth, or time converted
//! to depth; elevation grids are negated first), which makes **antiforms positive**: a dome
//! has positive mean curvature and shape index +1, a bowl -1.
//! Units of the outputs: curvatures in 1/km, Gaussian curvature in 1/km^2, dip and azimuths in
//! degrees, curvedness in 1/km, shape index dimensionless.
//! Undefined values are `None` (written as nodata): dip, strike and contour curvature and dip
//! azimuth where the surface is flat, and shape index where it is planar, both judged against
//! the round-off level of the fit ([`FlatTolerance`]).
//!
//! A new attribute is one formula function and one row of [`ATTRIBUTES`].

use crate::bands::{BandInfo, ScaleKind};
use crate::surface::window::{Quadric, QuadricField};
use ndarray::Array2;
use rayon::prelude::*;

/// One attribute: its band id, unit, description, colour-scale kind and formula.
pub struct AttributeDef {
    /// Band description written to the GeoTIFF (stable id).
    pub id: &'static str,
    /// Unit of the written values.
    pub unit: &'static str,
    /// What it is, in a few words.
    pub description: &'static str,
    /// The colour-scale family of its values (cyclic ones are averaged as angles).
    pub scale: ScaleKind,
    /// The fitted derivatives it is mainly made of (the window study compares these between
    /// windows).
    pub order: DerivativeOrder,
    formula: fn(&LocalSurface) -> Option<f64>,
}

/// Which derivatives of the fitted quadric an attribute is mainly made of.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DerivativeOrder {
    /// The gradient (z_x, z_y): dip and dip azimuth.
    First,
    /// The Hessian (z_xx, z_yy, z_xy): every curvature attribute.
    Second,
}

impl DerivativeOrder {
    /// The derivatives of this order of `q` as a vector whose Euclidean norm is rotation
    /// invariant: (z_x, z_y, 0) or (z_xx, z_yy, sqrt(2) z_xy) (the Frobenius norm of the
    /// Hessian), in CRS length units.
    pub fn vector(self, q: &Quadric) -> [f64; 3] {
        match self {
            DerivativeOrder::First => [q.d, q.e, 0.0],
            DerivativeOrder::Second => [2.0 * q.a, 2.0 * q.b, std::f64::consts::SQRT_2 * q.c],
        }
    }

    /// The rows over the quadric's coefficients (a, b, c, d, e, f) of [`Self::vector`] (which
    /// is linear in them), for noise propagation.
    pub fn functionals(self) -> [[f64; 6]; 3] {
        let mut rows = [[0.0; 6]; 3];
        for j in 0..6 {
            let mut c = [0.0; 6];
            c[j] = 1.0;
            let unit = Quadric {
                a: c[0],
                b: c[1],
                c: c[2],
                d: c[3],
                e: c[4],
                f: c[5],
            };
            for (row, v) in rows.iter_mut().zip(self.vector(&unit)) {
                row[j] = v;
            }
        }
        rows
    }
}

/// The Roberts (2001) attribute set, in the band order written.
pub const ATTRIBUTES: [AttributeDef; 13] = [
    AttributeDef {
        id: "k_mean",
        unit: "1/km",
        description: "mean curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| Some(s.k_mean * KM),
    },
    AttributeDef {
        id: "k_gauss",
        unit: "1/km^2",
        description: "Gaussian curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| Some(s.k_gauss * KM * KM),
    },
    AttributeDef {
        id: "k_max",
        unit: "1/km",
        description: "maximum principal curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| Some(s.k_max * KM),
    },
    AttributeDef {
        id: "k_min",
        unit: "1/km",
        description: "minimum principal curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| Some(s.k_min * KM),
    },
    AttributeDef {
        id: "k_pos",
        unit: "1/km",
        description: "most-positive curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| Some(s.k_pos() * KM),
    },
    AttributeDef {
        id: "k_neg",
        unit: "1/km",
        description: "most-negative curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| Some(s.k_neg() * KM),
    },
    AttributeDef {
        id: "k_dip",
        unit: "1/km",
        description: "dip curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| s.k_dip().map(|k| k * KM),
    },
    AttributeDef {
        id: "k_strike",
        unit: "1/km",
        description: "strike curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| s.k_strike().map(|k| k * KM),
    },
    AttributeDef {
        id: "k_contour",
        unit: "1/km",
        description: "contour curvature",
        scale: ScaleKind::Diverging,
        order: DerivativeOrder::Second,
        formula: |s| s.k_contour().map(|k| k * KM),
    },
    AttributeDef {
        id: "curvedness",
        unit: "1/km",
        description: "curvedness",
        scale: ScaleKind::Sequential,
        order: DerivativeOrder::Second,
        formula: |s| Some(s.curvedness() * KM),
    },
    AttributeDef {
        id: "shape_index",
        unit: "1",
        description: "shape index (dome +1, bowl -1)",
        scale: ScaleKind::ShapeIndex,
        order: DerivativeOrder::Second,
        formula: LocalSurface::shape_index,
    },
    AttributeDef {
        id: "dip",
        unit: "degree",
        description: "dip angle",
        scale: ScaleKind::Sequential,
        order: DerivativeOrder::First,
        formula: |s| Some(s.dip_degrees()),
    },
    AttributeDef {
        id: "dip_azimuth",
        unit: "degree",
        description: "down-dip azimuth from grid north",
        scale: ScaleKind::Cyclic { period: 360.0 },
        order: DerivativeOrder::First,
        formula: LocalSurface::dip_azimuth,
    },
];

/// Metres per kilometre.
const KM: f64 = 1000.0;

/// Looks up an attribute by id; the error lists the known ids.
pub fn attribute_by_id(id: &str) -> Result<&'static AttributeDef, String> {
    ATTRIBUTES.iter().find(|a| a.id == id).ok_or_else(|| {
        let known: Vec<&str> = ATTRIBUTES.iter().map(|a| a.id).collect();
        format!("unknown attribute '{id}': choose from {}", known.join(", "))
    })
}

impl std::fmt::Debug for AttributeDef {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.id)
    }
}

impl AttributeDef {
    /// The attribute's row as a [`BandInfo`] (no vector role).
    pub fn info(&self) -> BandInfo {
        BandInfo {
            id: self.id,
            unit: self.unit,
            description: self.description,
            scale: self.scale,
            vector: None,
        }
    }

    /// Evaluates the attribute at a cell, in its output unit.
    pub fn evaluate(&self, surface: &LocalSurface) -> Option<f64> {
        (self.formula)(surface).filter(|v| v.is_finite())
    }
}

/// Thresholds below which a fitted gradient or curvature is indistinguishable from round-off:
/// 1000 machine epsilons of the grid's largest value excursion over the cell size (gradient)
/// or its square (curvature).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FlatTolerance {
    /// Smallest |grad z| (dimensionless) taken as non-flat.
    pub gradient: f64,
    /// Smallest curvedness (1/m) taken as non-planar.
    pub curvature_per_m: f64,
}

impl FlatTolerance {
    /// Tolerances for a grid whose values (in CRS units, after domain conversion) vary by at most
    /// `z_excursion` from their mean, with smallest bin size `min_spacing` CRS units.
    pub fn for_grid(z_excursion: f64, min_spacing: f64, metres_per_unit: f64) -> Self {
        let level = 1000.0 * f64::EPSILON * z_excursion.max(f64::MIN_POSITIVE);
        Self {
            gradient: level / min_spacing,
            curvature_per_m: level / (min_spacing * min_spacing) / metres_per_unit,
        }
    }

    /// No tolerance: only exact zeros count as flat.
    pub const EXACT: FlatTolerance = FlatTolerance {
        gradient: 0.0,
        curvature_per_m: 0.0,
    };
}

/// The local surface of a cell in SI form: quadric coefficients per metre (z positive down,
/// x grid east, y grid north) with the quantities shared by the attribute formulas.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LocalSurface {
    a: f64,
    b: f64,
    c: f64,
    d: f64,
    e: f64,
    /// 1 + d^2 + e^2.
    q: f64,
    /// d^2 + e^2.
    g2: f64,
    /// Mean curvature (1/m).
    pub k_mean: f64,
    /// Gaussian curvature (1/m^2).
    pub k_gauss: f64,
    /// Larger principal curvature (1/m).
    pub k_max: f64,
    /// Smaller principal curvature (1/m).
    pub k_min: f64,
    tolerance: FlatTolerance,
}

impl LocalSurface {
    /// Builds the SI surface from a quadric in CRS units (`metres_per_unit` metres each).
    pub fn new(q: &Quadric, metres_per_unit: f64, tolerance: FlatTolerance) -> Self {
        let s = 1.0 / metres_per_unit;
        let (a, b, c, d, e) = (q.a * s, q.b * s, q.c * s, q.d, q.e);
        let g2 = d * d + e * e;
        let qq = 1.0 + g2;
        let k_mean = (a * (1.0 + e * e) - c * d * e + b * (1.0 + d * d)) / (qq * qq.sqrt());
        let k_gauss = (4.0 * a * b - c * c) / (qq * qq);
        let root = (k_mean * k_mean - k_gauss).max(0.0).sqrt();
        Self {
            a,
            b,
            c,
            d,
            e,
            q: qq,
            g2,
            k_mean,
            k_gauss,
            k_max: k_mean + root,
            k_min: k_mean - root,
            tolerance,
        }
    }

    /// Most-positive curvature (1/m): larger eigenvalue of the Hessian, slope ignored.
    pub fn k_pos(&self) -> f64 {
        (self.a + self.b) + ((self.a - self.b).powi(2) + self.c * self.c).sqrt()
    }

    /// Most-negative curvature (1/m): smaller eigenvalue of the Hessian, slope ignored.
    pub fn k_neg(&self) -> f64 {
        (self.a + self.b) - ((self.a - self.b).powi(2) + self.c * self.c).sqrt()
    }

    fn sloping(&self) -> bool {
        self.g2.sqrt() > self.tolerance.gradient
    }

    /// Curvature of the surface along the dip direction (1/m); undefined where flat.
    pub fn k_dip(&self) -> Option<f64> {
        let (a, b, c, d, e) = (self.a, self.b, self.c, self.d, self.e);
        self.sloping()
            .then(|| 2.0 * (a * d * d + b * e * e + c * d * e) / (self.g2 * self.q * self.q.sqrt()))
    }

    /// Normal curvature along strike (1/m); undefined where flat.
    pub fn k_strike(&self) -> Option<f64> {
        self.sloping()
            .then(|| self.strike_numerator() / (self.g2 * self.q.sqrt()))
    }

    /// Curvature of the contour line through the cell (1/m); undefined where flat.
    pub fn k_contour(&self) -> Option<f64> {
        self.sloping()
            .then(|| self.strike_numerator() / (self.g2 * self.g2.sqrt()))
    }

    fn strike_numerator(&self) -> f64 {
        let (a, b, c, d, e) = (self.a, self.b, self.c, self.d, self.e);
        2.0 * (a * e * e + b * d * d - c * d * e)
    }

    /// Curvedness sqrt((k_max^2 + k_min^2)/2) (1/m).
    pub fn curvedness(&self) -> f64 {
        ((self.k_max * self.k_max + self.k_min * self.k_min) / 2.0).sqrt()
    }

    /// Shape index (2/pi) atan2(k_max + k_min, k_max - k_min): dome +1, ridge +0.5, saddle 0,
    /// valley -0.5, bowl -1; undefined on a plane.
    pub fn shape_index(&self) -> Option<f64> {
        (self.curvedness() > self.tolerance.curvature_per_m).then(|| {
            std::f64::consts::FRAC_2_PI * (self.k_max + self.k_min).atan2(self.k_max - self.k_min)
        })
    }

    /// Dip angle atan(|grad z|) in degrees.
    pub fn dip_degrees(&self) -> f64 {
        self.g2.sqrt().atan().to_degrees()
    }

    /// Down-dip azimuth atan2(z_x, z_y), degrees clockwise from grid north in 0..360;
    /// undefined where flat.
    pub fn dip_azimuth(&self) -> Option<f64> {
        self.sloping()
            .then(|| self.d.atan2(self.e).to_degrees().rem_euclid(360.0))
    }
}

/// Evaluates `attributes` on every cell of a quadric field: one `[row, col]` array per
/// attribute, NaN where the cell has no fit or the attribute is undefined there.
pub fn evaluate_field(
    field: &QuadricField,
    attributes: &[&AttributeDef],
    metres_per_unit: f64,
    tolerance: FlatTolerance,
) -> Vec<Array2<f32>> {
    let cols = field.cols;
    let rows: Vec<Vec<Vec<f32>>> = field
        .cells
        .par_chunks(cols.max(1))
        .map(|row| {
            let mut bands = vec![Vec::with_capacity(cols); attributes.len()];
            evaluate_cells(
                row.iter().map(Option::as_ref),
                attributes,
                metres_per_unit,
                tolerance,
                &mut bands,
            );
            bands
        })
        .collect();
    (0..attributes.len())
        .map(|k| {
            let band: Vec<f32> = rows.iter().flat_map(|r| r[k].iter().copied()).collect();
            Array2::from_shape_vec((field.rows, cols), band).expect("rows x cols values")
        })
        .collect()
}

/// Evaluates `attributes` on a run of fitted cells (`None` = no fit), appending one value per
/// cell to each attribute's vector in `bands` (in `attributes` order; NaN where the cell has
/// no fit or the attribute is undefined there). Units as in [`ATTRIBUTES`].
pub fn evaluate_cells<'q>(
    cells: impl Iterator<Item = Option<&'q Quadric>>,
    attributes: &[&AttributeDef],
    metres_per_unit: f64,
    tolerance: FlatTolerance,
    bands: &mut [Vec<f32>],
) {
    for cell in cells {
        match cell {
            Some(q) => {
                let surface = LocalSurface::new(q, metres_per_unit, tolerance);
                for (a, band) in attributes.iter().zip(bands.iter_mut()) {
                    band.push(a.evaluate(&surface).map_or(f32::NAN, |v| v as f32));
                }
            }
            None => bands.iter_mut().for_each(|b| b.push(f32::NAN)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn surface(a: f64, b: f64, c: f64, d: f64, e: f64) -> LocalSurface {
        let q = Quadric {
            a,
            b,
            c,
            d,
            e,
            f: 0.0,
        };
        LocalSurface::new(&q, 1.0, FlatTolerance::EXACT)
    }

    fn value(s: &LocalSurface, id: &str) -> Option<f64> {
        attribute_by_id(id).unwrap().evaluate(s)
    }

    #[test]
    fn paraboloid_check_values() {
        // REFERENCES.md section 4 [D]: z = rho^2/(2R), R = 1000, at (300, -400):
        // k_mean 8.049844719e-4, k_gauss 6.4e-7, k_dip 7.155417528e-4, k_strike 8.944271910e-4,
        // k_contour 2e-3 (per metre), shape index 0.929553.
        let r = 1000.0;
        let (x, y) = (300.0, -400.0);
        let s = surface(1.0 / (2.0 * r), 1.0 / (2.0 * r), 0.0, x / r, y / r);
        assert_relative_eq!(s.k_mean, 8.049844719e-4, max_relative = 1e-9);
        assert_relative_eq!(s.k_gauss, 6.4e-7, max_relative = 1e-9);
        assert_relative_eq!(s.k_dip().unwrap(), 7.155417528e-4, max_relative = 1e-9);
        assert_relative_eq!(s.k_strike().unwrap(), 8.944271910e-4, max_relative = 1e-9);
        assert_relative_eq!(s.k_contour().unwrap(), 2e-3, max_relative = 1e-9);
        assert_relative_eq!(s.shape_index().unwrap(), 0.929553, epsilon = 1e-6);
        // Mean curvature is the average of dip and strike curvature on a surface of
        // revolution (REFERENCES.md section 4).
        assert_relative_eq!(
            s.k_mean,
            (s.k_dip().unwrap() + s.k_strike().unwrap()) / 2.0,
            max_relative = 1e-12
        );
    }

    #[test]
    fn saddle_and_cylinder_shape_index() {
        // Saddle (x^2 - y^2)/(2R) at the origin: k_mean 0, k_gauss -1/R^2, k_max = k_pos = 1/R,
        // k_min = k_neg = -1/R, shape index 0; parabolic cylinder x^2/(2R): k_max 1/R, k_min 0,
        // shape index 0.5 (Koenderink & van Doorn 1992; REFERENCES.md section 4).
        let r = 500.0;
        let s = surface(0.5 / r, -0.5 / r, 0.0, 0.0, 0.0);
        assert_relative_eq!(s.k_mean, 0.0, epsilon = 1e-15);
        assert_relative_eq!(s.k_gauss, -1.0 / (r * r), max_relative = 1e-12);
        assert_relative_eq!(s.k_max, 1.0 / r, max_relative = 1e-12);
        assert_relative_eq!(s.k_neg(), -1.0 / r, max_relative = 1e-12);
        assert_relative_eq!(s.shape_index().unwrap(), 0.0, epsilon = 1e-12);
        let cyl = surface(0.5 / r, 0.0, 0.0, 0.0, 0.0);
        assert_relative_eq!(cyl.k_max, 1.0 / r, max_relative = 1e-12);
        assert_relative_eq!(cyl.k_min, 0.0, epsilon = 1e-15);
        assert_relative_eq!(cyl.shape_index().unwrap(), 0.5, epsilon = 1e-12);
        // A valley (negative cylinder) and a bowl: -0.5 and -1.
        assert_relative_eq!(
            surface(-0.5 / r, 0.0, 0.0, 0.0, 0.0).shape_index().unwrap(),
            -0.5,
            epsilon = 1e-12
        );
        assert_relative_eq!(
            surface(-0.5 / r, -0.5 / r, 0.0, 0.0, 0.0)
                .shape_index()
                .unwrap(),
            -1.0,
            epsilon = 1e-12
        );
    }

    #[test]
    fn plane_has_zero_curvature_and_no_shape_index() {
        // Plane z = 0.03 x - 0.04 y (positive down): dip atan(0.05), down-dip azimuth
        // atan2(0.03, -0.04) = 143.13 deg (elementary geometry).
        let s = surface(0.0, 0.0, 0.0, 0.03, -0.04);
        for id in [
            "k_mean",
            "k_gauss",
            "k_pos",
            "k_neg",
            "k_dip",
            "k_strike",
            "k_contour",
            "curvedness",
        ] {
            assert_eq!(value(&s, id), Some(0.0), "{id}");
        }
        assert_eq!(value(&s, "shape_index"), None);
        assert_relative_eq!(
            value(&s, "dip").unwrap(),
            0.05f64.atan().to_degrees(),
            max_relative = 1e-12
        );
        assert_relative_eq!(
            value(&s, "dip_azimuth").unwrap(),
            0.03f64.atan2(-0.04).to_degrees(),
            max_relative = 1e-12
        );
        // Flat cell: dip-dependent curvatures and azimuth undefined.
        let flat = surface(0.001, 0.001, 0.0, 0.0, 0.0);
        for id in ["k_dip", "k_strike", "k_contour", "dip_azimuth"] {
            assert_eq!(value(&flat, id), None, "{id}");
        }
        assert_eq!(value(&flat, "dip"), Some(0.0));
    }

    #[test]
    fn units_are_per_km() {
        // Unit conversion (common practice): 1/m * 1000 = 1/km; 1/m^2 * 1e6 = 1/km^2.
        let r = 2000.0;
        let s = surface(0.5 / r, 0.5 / r, 0.0, 0.0, 0.0);
        assert_relative_eq!(value(&s, "k_mean").unwrap(), 0.5, max_relative = 1e-12);
        assert_relative_eq!(value(&s, "k_gauss").unwrap(), 0.25, max_relative = 1e-12);
        // The same bend on a grid in feet (radius 2000 m = 6561.7 ft) still reads 0.5 /km.
        let q = Quadric {
            a: 0.5 / (r / 0.3048),
            b: 0.5 / (r / 0.3048),
            c: 0.0,
            d: 0.0,
            e: 0.0,
            f: 0.0,
        };
        let feet = LocalSurface::new(&q, 0.3048, FlatTolerance::EXACT);
        assert_relative_eq!(feet.k_mean * KM, 0.5, max_relative = 1e-12);
    }

    #[test]
    fn unknown_attribute_lists_choices() {
        let err = attribute_by_id("k_nope").err().unwrap();
        assert!(err.contains("k_mean") && err.contains("dip_azimuth"));
    }
}
