//! Georeferenced grids: the affine geotransform (GDAL's six coefficients), cell-centre
//! coordinates, bin spacings, grid rotation, and a value array whose nulls are NaN.
//!
//! Convention (GDAL data model): a cell (column `i`, row `j`) has its top-left corner at
//! `x = g0 + i g1 + j g2`, `y = g3 + i g4 + j g5`; its centre is at `i + 0.5, j + 0.5`.
//! x is grid east and y grid north of the CRS; azimuths are clockwise from grid north.

use ndarray::Array2;

/// Largest distance between corresponding cell centres, as a share of the smaller bin, for
/// two grids to count as the same lattice.
pub const SAME_NODE_SHARE: f64 = 1e-3;

/// Placement of a grid in its coordinate reference system.
#[derive(Clone, Debug, PartialEq)]
pub struct GridGeometry {
    /// Number of columns (cells along a row).
    pub cols: usize,
    /// Number of rows.
    pub rows: usize,
    /// GDAL geotransform `[x0, dx/dcol, dx/drow, y0, dy/dcol, dy/drow]` in CRS units.
    pub geo_transform: [f64; 6],
    /// The CRS as WKT (empty when the source declared none).
    pub crs_wkt: String,
    /// Metres per CRS linear unit (1 for metres, 0.3048 for international feet).
    pub metres_per_unit: f64,
}

impl GridGeometry {
    /// A survey grid: columns run at `column_azimuth` degrees clockwise from grid north and
    /// rows 90 degrees clockwise from that, with bins `dx` along the column axis and `dy` along
    /// the row axis (CRS units), `cols` x `rows` cells whose top-left corner is `origin` (map
    /// x, y). `column_azimuth` 90 gives a north-up grid. `crs_wkt` is stored as given (empty
    /// for none); the CRS is taken to be in metres (`metres_per_unit` 1, change it after for
    /// another unit).
    ///
    /// Sines and cosines of multiples of 90 degrees are snapped to exact 0 and +-1, so
    /// north-up grids get a geotransform without round-off rotation terms.
    pub fn survey(
        origin: (f64, f64),
        column_azimuth: f64,
        (dx, dy): (f64, f64),
        (cols, rows): (usize, usize),
        crs_wkt: String,
    ) -> GridGeometry {
        let snap = |v: f64| if v.abs() < 1e-12 { 0.0 } else { v };
        let trig = |deg: f64| {
            let (s, c) = deg.to_radians().sin_cos();
            (snap(s), snap(c))
        };
        let (sc, cc) = trig(column_azimuth);
        let (sr, cr) = trig(column_azimuth + 90.0);
        GridGeometry {
            cols,
            rows,
            geo_transform: [origin.0, dx * sc, dy * sr, origin.1, dx * cc, dy * cr],
            crs_wkt,
            metres_per_unit: 1.0,
        }
    }

    /// Map coordinates (CRS units) of the centre of cell (`col`, `row`).
    pub fn cell_centre(&self, col: usize, row: usize) -> (f64, f64) {
        let g = &self.geo_transform;
        let (i, j) = (col as f64 + 0.5, row as f64 + 0.5);
        (g[0] + i * g[1] + j * g[2], g[3] + i * g[4] + j * g[5])
    }

    /// The Jacobian `[[dx/dcol, dx/drow], [dy/dcol, dy/drow]]` of map coordinates with
    /// respect to cell indices, in CRS units per cell.
    pub fn jacobian(&self) -> [[f64; 2]; 2] {
        let g = &self.geo_transform;
        [[g[1], g[2]], [g[4], g[5]]]
    }

    /// Distance between neighbouring cell centres along a row and along a column (CRS units).
    pub fn spacing(&self) -> (f64, f64) {
        let g = &self.geo_transform;
        (g[1].hypot(g[4]), g[2].hypot(g[5]))
    }

    /// Azimuth of the grid's column axis (the direction of increasing column index),
    /// degrees clockwise from grid north; 90 for a north-up grid.
    pub fn column_axis_azimuth(&self) -> f64 {
        let g = &self.geo_transform;
        g[1].atan2(g[4]).to_degrees().rem_euclid(360.0)
    }

    /// True when the cell-to-map mapping is invertible (cells have non-zero area).
    pub fn is_invertible(&self) -> bool {
        let [[a, b], [c, d]] = self.jacobian();
        let det = a * d - b * c;
        det.is_finite() && det.abs() > 0.0
    }

    /// True when `other` has the same size and CRS and every cell centre of the two grids
    /// agrees to [`SAME_NODE_SHARE`] of the smaller bin (see [`GridGeometry::mismatch`]).
    pub fn same_grid(&self, other: &GridGeometry) -> bool {
        self.mismatch(other).is_none()
    }

    /// Why `other` is not the same grid, in words (`None` when it is): another size, another
    /// CRS, or cell centres further apart than [`SAME_NODE_SHARE`] of the smaller bin (the
    /// largest distance is at a corner, the mapping being affine). The tolerance lets grids
    /// whose geotransforms were fitted from rounded coordinates (point lists) match the
    /// raster of the same survey, while a shift of a thousandth of a bin is refused.
    pub fn mismatch(&self, other: &GridGeometry) -> Option<String> {
        if (self.cols, self.rows) != (other.cols, other.rows) {
            return Some(format!(
                "{} x {} cells against {} x {}",
                self.cols, self.rows, other.cols, other.rows
            ));
        }
        if self.crs_wkt != other.crs_wkt {
            return Some("another CRS".into());
        }
        let offset = self.largest_node_offset(other);
        let (sx, sy) = self.spacing();
        let tolerance = SAME_NODE_SHARE * sx.min(sy);
        (offset.is_nan() || offset > tolerance).then(|| {
            format!(
                "cell centres up to {offset:.6} CRS units apart (more than {SAME_NODE_SHARE} of a bin)"
            )
        })
    }

    /// Largest distance between corresponding cell centres of two grids of the same size,
    /// CRS units (at one of the four corner cells: the mapping is affine).
    fn largest_node_offset(&self, other: &GridGeometry) -> f64 {
        let (c, r) = (self.cols.max(1) - 1, self.rows.max(1) - 1);
        [(0, 0), (c, 0), (0, r), (c, r)]
            .iter()
            .map(|&(i, j)| {
                let (a, b) = (self.cell_centre(i, j), other.cell_centre(i, j));
                (a.0 - b.0).hypot(a.1 - b.1)
            })
            .fold(0.0, f64::max)
    }

    /// Fractional (column, row) of map point (x, y), measured from the grid's top-left corner
    /// (cell (i, j) spans i..i+1, j..j+1; its centre is at i + 0.5, j + 0.5).
    pub fn map_to_grid(&self, x: f64, y: f64) -> (f64, f64) {
        let g = &self.geo_transform;
        let [[a, b], [c, d]] = self.jacobian();
        let det = a * d - b * c;
        let (u, v) = (x - g[0], y - g[3]);
        ((d * u - b * v) / det, (-c * u + a * v) / det)
    }

    /// Map coordinates (CRS units) of the centre of the whole grid.
    pub fn centre(&self) -> (f64, f64) {
        let g = &self.geo_transform;
        let (i, j) = (self.cols as f64 / 2.0, self.rows as f64 / 2.0);
        (g[0] + i * g[1] + j * g[2], g[3] + i * g[4] + j * g[5])
    }

    /// Grid convergence at the grid centre: the angle from true north to grid north, degrees,
    /// positive clockwise (grid north east of true north). A true azimuth converts to a grid
    /// azimuth by subtracting it. Found numerically with PROJ through GDAL: the grid direction
    /// of a short step due north from the centre.
    pub fn convergence(&self) -> std::result::Result<f64, String> {
        use gdal::spatial_ref::{AxisMappingStrategy, CoordTransform, SpatialRef};
        let mut grid = SpatialRef::from_wkt(&self.crs_wkt).map_err(|e| e.to_string())?;
        grid.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
        let mut geographic = grid.geog_cs().map_err(|e| e.to_string())?;
        geographic.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
        let to_geo = CoordTransform::new(&grid, &geographic).map_err(|e| e.to_string())?;
        let to_grid = CoordTransform::new(&geographic, &grid).map_err(|e| e.to_string())?;
        let (x0, y0) = self.centre();
        let (mut x, mut y, mut z) = ([x0], [y0], [0.0]);
        to_geo
            .transform_coords(&mut x, &mut y, &mut z)
            .map_err(|e| e.to_string())?;
        y[0] += 1e-4;
        to_grid
            .transform_coords(&mut x, &mut y, &mut z)
            .map_err(|e| e.to_string())?;
        let true_north_in_grid = (x[0] - x0).atan2(y[0] - y0).to_degrees();
        Ok(-true_north_in_grid)
    }

    /// When every cell of `self` is a block of whole cells of `fine` (same CRS and axis
    /// directions, bins integer multiples, corners on the fine lattice, all to
    /// [`SAME_NODE_SHARE`] of a fine bin at every cell), the block size (columns, rows);
    /// `Some((1, 1))` for the same lattice. No resampling is implied: a superbin's centre is
    /// an exact map point of the fine grid's picture.
    pub fn superbin_of(&self, fine: &GridGeometry) -> Option<(usize, usize)> {
        if self.crs_wkt != fine.crs_wkt {
            return None;
        }
        let (g, f) = (&self.geo_transform, &fine.geo_transform);
        let multiple = |a: f64, b: f64, c: f64, d: f64| (a.hypot(b) / c.hypot(d)).round();
        let kc = multiple(g[1], g[4], f[1], f[4]);
        let kr = multiple(g[2], g[5], f[2], f[5]);
        if !(kc >= 1.0 && kr >= 1.0) {
            return None;
        }
        let (c0, r0) = fine.map_to_grid(g[0], g[3]);
        let (x0, y0) = {
            let (c, r) = (c0.round(), r0.round());
            (f[0] + c * f[1] + r * f[2], f[3] + c * f[4] + r * f[5])
        };
        let implied = GridGeometry {
            geo_transform: [x0, kc * f[1], kr * f[2], y0, kc * f[4], kr * f[5]],
            ..self.clone()
        };
        let (sx, sy) = fine.spacing();
        (self.largest_node_offset(&implied) <= SAME_NODE_SHARE * sx.min(sy))
            .then_some((kc as usize, kr as usize))
    }

    /// Where the cells of `self` lie on `other` when both are one lattice: same CRS, the
    /// same bins up to the order and direction of the axes (so a grid whose rows run south
    /// matches one whose rows run north), and every cell centre of `self` within
    /// `tolerance` (a share of the smaller bin of `other`; [`SAME_NODE_SHARE`] for grids from
    /// files, the lattice tolerance for a lattice fitted to rounded coordinates) of a bin of a
    /// cell centre of `other`'s lattice (checked at the four
    /// corner cells: the mapping is affine). The grids may cover different areas, overlapping
    /// or not. Otherwise why not, in words (another CRS, other bins, or nodes off the lattice
    /// by how much).
    pub fn cell_map(
        &self,
        other: &GridGeometry,
        tolerance: f64,
    ) -> std::result::Result<CellMap, String> {
        if self.crs_wkt != other.crs_wkt {
            return Err("another CRS".into());
        }
        let [[a, b], [c, d]] = other.jacobian();
        let det = a * d - b * c;
        let [[p, q], [r, s]] = self.jacobian();
        // Other's cells per cell of self: inverse(other's Jacobian) x self's Jacobian.
        let j = [
            [(d * p - b * r) / det, (d * q - b * s) / det],
            [(a * r - c * p) / det, (a * s - c * q) / det],
        ];
        let m = j.map(|row| row.map(|v| v.round()));
        let unit = |v: f64| v == 0.0 || v.abs() == 1.0;
        let close = (0..4).all(|k| (j[k / 2][k % 2] - m[k / 2][k % 2]).abs() <= tolerance);
        let permutation = close
            && m.iter().flatten().all(|&v| unit(v))
            && (m[0][0] * m[1][1] - m[0][1] * m[1][0]).abs() == 1.0
            && m.iter().flatten().filter(|&&v| v != 0.0).count() == 2;
        let (sx, sy) = self.spacing();
        let (ox, oy) = other.spacing();
        if !(det.is_finite() && det != 0.0 && permutation) {
            return Err(format!(
                "other bins: {sx:.4} x {sy:.4} CRS units with the column axis at {:.3} deg against {ox:.4} x {oy:.4} at {:.3} deg",
                self.column_axis_azimuth(),
                other.column_axis_azimuth()
            ));
        }
        let (fc, fr) = {
            let (x, y) = self.cell_centre(0, 0);
            let (fc, fr) = other.map_to_grid(x, y);
            (fc - 0.5, fr - 0.5)
        };
        if !(fc.abs() < 1e15 && fr.abs() < 1e15) {
            return Err("nodes too far apart to compare".into());
        }
        let axes = m.map(|row| row.map(|v| v as i64));
        let offset = (fc.round() as i64, fr.round() as i64);
        let map = CellMap {
            axes,
            offset,
            size: (other.cols, other.rows),
        };
        let g = &other.geo_transform;
        let (last_c, last_r) = (self.cols.max(1) - 1, self.rows.max(1) - 1);
        let worst = [(0, 0), (last_c, 0), (0, last_r), (last_c, last_r)]
            .iter()
            .map(|&(col, row)| {
                let (i, j) = map.index(col, row);
                let (i, j) = (i as f64 + 0.5, j as f64 + 0.5);
                let there = (g[0] + i * g[1] + j * g[2], g[3] + i * g[4] + j * g[5]);
                let here = self.cell_centre(col, row);
                (here.0 - there.0).hypot(here.1 - there.1)
            })
            .fold(0.0, f64::max);
        let bin = ox.min(oy);
        if worst.is_nan() || worst > tolerance * bin {
            return Err(format!(
                "cell centres up to {worst:.6} CRS units ({:.4} of a bin) off the other grid's nodes (more than {tolerance} of a bin)",
                worst / bin
            ));
        }
        Ok(map)
    }

    /// Whether the grid drawn as a picture (columns to the right, rows downward) shows the map
    /// mirrored: its pixel frame is right-handed in map coordinates, as when rows run north
    /// while columns run east (point-list exports read in numbering order).
    pub fn mirrored_in_pictures(&self) -> bool {
        let g = &self.geo_transform;
        g[1] * g[5] - g[2] * g[4] > 0.0
    }

    /// The same cells with the rows in reverse order (the last row first): cell (col, row)
    /// of the result is cell (col, rows - 1 - row) of `self`.
    pub fn rows_reversed(&self) -> GridGeometry {
        let g = self.geo_transform;
        let n = self.rows as f64;
        GridGeometry {
            geo_transform: [g[0] + n * g[2], g[1], -g[2], g[3] + n * g[5], g[4], -g[5]],
            ..self.clone()
        }
    }

    /// One-line description: size, spacing and rotation.
    pub fn describe(&self) -> String {
        let (sx, sy) = self.spacing();
        format!(
            "{} x {} cells, bins {:.4} x {:.4} CRS units, column axis at {:.3} deg from grid north",
            self.cols,
            self.rows,
            sx,
            sy,
            self.column_axis_azimuth()
        )
    }
}

/// Where the cells of one grid lie on another grid of the same lattice
/// ([`GridGeometry::cell_map`]): cell (col, row) is the other grid's cell
/// `axes (col, row) + offset`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CellMap {
    /// A signed permutation matrix `[[di/dcol, di/drow], [dj/dcol, dj/drow]]`: the other
    /// grid's (column i, row j) per cell of this grid.
    pub axes: [[i64; 2]; 2],
    /// The other grid's (column, row) of this grid's cell (0, 0); may lie outside it.
    pub offset: (i64, i64),
    /// The other grid's (columns, rows).
    pub size: (usize, usize),
}

impl CellMap {
    /// The other grid's (column, row) of cell (`col`, `row`), possibly outside it.
    fn index(&self, col: usize, row: usize) -> (i64, i64) {
        let (c, r) = (col as i64, row as i64);
        let [[a, b], [d, e]] = self.axes;
        (a * c + b * r + self.offset.0, d * c + e * r + self.offset.1)
    }

    /// The other grid's (column, row) of cell (`col`, `row`); `None` outside it.
    pub fn cell(&self, col: usize, row: usize) -> Option<(usize, usize)> {
        let (i, j) = self.index(col, row);
        let inside = |v: i64, n: usize| usize::try_from(v).ok().filter(|&v| v < n);
        Some((inside(i, self.size.0)?, inside(j, self.size.1)?))
    }
}

/// A single-band grid of values with nulls stored as NaN.
#[derive(Clone, Debug)]
pub struct Grid {
    /// Where the grid lies.
    pub geometry: GridGeometry,
    /// Values indexed `[row, col]`; NaN marks a null cell.
    pub values: Array2<f64>,
}

impl Grid {
    /// Number of non-null cells.
    pub fn valid_count(&self) -> usize {
        self.values.iter().filter(|v| v.is_finite()).count()
    }

    /// Share of null cells, 0..1.
    pub fn null_share(&self) -> f64 {
        1.0 - self.valid_count() as f64 / self.values.len().max(1) as f64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rotated(deg: f64) -> GridGeometry {
        let (s, c) = deg.to_radians().sin_cos();
        // Column axis turned `deg` clockwise from east; rows run 90 deg clockwise further.
        GridGeometry {
            cols: 4,
            rows: 3,
            geo_transform: [1000.0, 25.0 * c, 12.5 * s, 5000.0, -25.0 * s, -12.5 * c],
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        }
    }

    #[test]
    fn north_up_centre_and_spacing() {
        // GDAL data model (gdal.org, "Raster data model"): centre of cell (0,0) is half a cell
        // in from the top-left corner.
        let g = rotated(0.0);
        assert_eq!(g.cell_centre(0, 0), (1012.5, 5000.0 - 6.25));
        assert_eq!(g.spacing(), (25.0, 12.5));
        assert!((g.column_axis_azimuth() - 90.0).abs() < 1e-12);
    }

    #[test]
    fn rotated_grid_keeps_spacing_and_reports_rotation() {
        // Rotation keeps lengths (elementary geometry).
        let g = rotated(30.0);
        let (sx, sy) = g.spacing();
        assert!((sx - 25.0).abs() < 1e-12 && (sy - 12.5).abs() < 1e-12);
        assert!((g.column_axis_azimuth() - 120.0).abs() < 1e-12);
        assert!(g.is_invertible());
    }

    #[test]
    fn convergence_matches_the_transverse_mercator_formula() {
        // Transverse Mercator on the sphere: tan(gamma) = tan(lon - lon0) sin(lat) (Snyder 1987,
        // Map Projections - A Working Manual, USGS PP 1395, from memory); the ellipsoidal terms
        // are below 1e-5 degrees this close to the central meridian. UTM 25N, lon0 = -33.
        use gdal::spatial_ref::{AxisMappingStrategy, CoordTransform, SpatialRef};
        let mut geo = SpatialRef::from_epsg(4326).unwrap();
        geo.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
        let mut utm = SpatialRef::from_epsg(32625).unwrap();
        utm.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
        let t = CoordTransform::new(&geo, &utm).unwrap();
        for (lon, lat) in [(-30.0f64, 40.0f64), (-35.5, 12.0), (-33.0, 55.0)] {
            let (mut x, mut y, mut z) = ([lon], [lat], [0.0]);
            t.transform_coords(&mut x, &mut y, &mut z).unwrap();
            // A 2 x 2 grid of 10 m cells centred on the point.
            let g = GridGeometry {
                cols: 2,
                rows: 2,
                geo_transform: [x[0] - 10.0, 10.0, 0.0, y[0] + 10.0, 0.0, -10.0],
                crs_wkt: utm.to_wkt().unwrap(),
                metres_per_unit: 1.0,
            };
            let expected = ((lon + 33.0).to_radians().tan() * lat.to_radians().sin())
                .atan()
                .to_degrees();
            let got = g.convergence().unwrap();
            assert!(
                (got - expected).abs() < 1e-4,
                "({lon},{lat}): {got} vs {expected}"
            );
        }
    }

    #[test]
    fn survey_grids_have_their_azimuth_bins_and_exact_north_up_terms() {
        // Elementary geometry: a column axis at azimuth a steps (dx sin a, dx cos a); rows
        // step 90 degrees clockwise further.
        let g = GridGeometry::survey((1000.0, 5000.0), 90.0, (25.0, 12.5), (4, 3), String::new());
        assert_eq!(g.geo_transform, [1000.0, 25.0, 0.0, 5000.0, 0.0, -12.5]);
        let g = GridGeometry::survey((0.0, 0.0), 115.0, (25.0, 12.5), (4, 3), String::new());
        let (sx, sy) = g.spacing();
        assert!((sx - 25.0).abs() < 1e-12 && (sy - 12.5).abs() < 1e-12);
        assert!((g.column_axis_azimuth() - 115.0).abs() < 1e-12);
        assert_eq!((g.cols, g.rows, g.metres_per_unit), (4, 3, 1.0));
    }

    #[test]
    fn map_to_grid_inverts_cell_centres() {
        let g = rotated(37.0);
        let (x, y) = g.cell_centre(3, 2);
        let (c, r) = g.map_to_grid(x, y);
        assert!((c - 3.5).abs() < 1e-9 && (r - 2.5).abs() < 1e-9);
    }

    #[test]
    fn superbins_nest_only_on_the_lattice() {
        let fine = rotated(20.0);
        let g = fine.geo_transform;
        // Column vector (g1, g4) doubled, row vector (g2, g5) tripled, same corner.
        let coarse = GridGeometry {
            geo_transform: [g[0], 2.0 * g[1], 3.0 * g[2], g[3], 2.0 * g[4], 3.0 * g[5]],
            ..fine.clone()
        };
        assert_eq!(coarse.superbin_of(&fine), Some((2, 3)));
        assert_eq!(fine.superbin_of(&fine), Some((1, 1)));
        let mut shifted = coarse.clone();
        shifted.geo_transform[0] += 3.0;
        assert_eq!(shifted.superbin_of(&fine), None);
        let mut skewed = fine.clone();
        skewed.geo_transform[1] *= 1.5;
        assert_eq!(skewed.superbin_of(&fine), None);
    }

    #[test]
    fn same_grid_detects_shift_and_tolerates_round_off() {
        // Bins of 25 x 12.5: a shift of 1 CRS unit (0.08 bin) is another grid; a geotransform
        // fitted from centimetre-rounded coordinates (a few micrometres off at the corners)
        // is the same lattice.
        let a = rotated(10.0);
        let mut b = a.clone();
        assert!(a.same_grid(&b));
        b.geo_transform[0] += 1.0;
        assert!(!a.same_grid(&b));
        assert!(a.mismatch(&b).unwrap().contains("apart"));
        let mut c = a.clone();
        c.geo_transform[0] += 4e-6;
        c.geo_transform[1] *= 1.0 + 1e-9;
        assert!(a.same_grid(&c), "{:?}", a.mismatch(&c));
        let mut d = a.clone();
        d.geo_transform[0] += 0.02;
        assert!(!a.same_grid(&d), "0.02 is 1.6e-3 of the 12.5 bin");
        let mut coarse = a.clone();
        coarse.geo_transform = {
            let g = a.geo_transform;
            [
                g[0] + 3e-6,
                3.0 * g[1] * (1.0 + 2e-9),
                3.0 * g[2],
                g[3],
                3.0 * g[4],
                3.0 * g[5],
            ]
        };
        assert_eq!(coarse.superbin_of(&a), Some((3, 3)));
    }

    #[test]
    fn cell_maps_follow_the_lattice_over_other_areas_and_axis_orders() {
        // Hand-checkable: `big` is a rotated 4 x 3 lattice (25 x 12.5 bins, 30 deg); every
        // smaller grid below is cut from the same lattice, so each of its cells must map to
        // the cell of `big` whose centre it shares.
        let big = GridGeometry {
            cols: 40,
            rows: 30,
            ..rotated(30.0)
        };
        let g = big.geo_transform;
        let node = |i: f64, j: f64| (g[0] + i * g[1] + j * g[2], g[3] + i * g[4] + j * g[5]);
        // A window 5 columns and 7 rows in.
        let (x0, y0) = node(5.0, 7.0);
        let window = GridGeometry {
            cols: 6,
            rows: 4,
            geo_transform: [x0, g[1], g[2], y0, g[4], g[5]],
            ..big.clone()
        };
        // The same window with rows running the other way (corner at the far row edge).
        let (x1, y1) = node(5.0, 11.0);
        let flipped = GridGeometry {
            geo_transform: [x1, g[1], -g[2], y1, g[4], -g[5]],
            ..window.clone()
        };
        // Columns and rows swapped (a transposed export of the window).
        let swapped = GridGeometry {
            cols: 4,
            rows: 6,
            geo_transform: [x0, g[2], g[1], y0, g[5], g[4]],
            ..window.clone()
        };
        for small in [&window, &flipped, &swapped] {
            let map = small.cell_map(&big, SAME_NODE_SHARE).unwrap();
            for r in 0..small.rows {
                for c in 0..small.cols {
                    let (i, j) = map.cell(c, r).unwrap();
                    let (a, b) = (small.cell_centre(c, r), big.cell_centre(i, j));
                    assert!((a.0 - b.0).hypot(a.1 - b.1) < 1e-6, "{c} {r}");
                }
            }
        }
        assert_eq!(
            window.cell_map(&big, SAME_NODE_SHARE).unwrap().offset,
            (5, 7)
        );
        assert_eq!(
            flipped.cell_map(&big, SAME_NODE_SHARE).unwrap().axes,
            [[1, 0], [0, -1]]
        );
        assert_eq!(
            swapped.cell_map(&big, SAME_NODE_SHARE).unwrap().axes,
            [[0, 1], [1, 0]]
        );
        // The window mapped from the big grid: most cells fall outside it.
        let back = big.cell_map(&window, SAME_NODE_SHARE).unwrap();
        assert_eq!(back.cell(5, 7), Some((0, 0)));
        assert_eq!(back.cell(4, 7), None);
        // Refused: a shift of 0.01 bin, bins twice as long, a turn of 0.1 deg, another CRS.
        let shifted = GridGeometry {
            geo_transform: [x0 + 0.25, g[1], g[2], y0, g[4], g[5]],
            ..window.clone()
        };
        assert!(shifted
            .cell_map(&big, SAME_NODE_SHARE)
            .unwrap_err()
            .contains("off the other grid's nodes"));
        let coarse = GridGeometry {
            geo_transform: [x0, 2.0 * g[1], g[2], y0, 2.0 * g[4], g[5]],
            ..window.clone()
        };
        assert!(coarse
            .cell_map(&big, SAME_NODE_SHARE)
            .unwrap_err()
            .contains("other bins"));
        let t = rotated(30.1).geo_transform;
        let turned = GridGeometry {
            geo_transform: [x0, t[1], t[2], y0, t[4], t[5]],
            ..window.clone()
        };
        assert!(turned.cell_map(&big, SAME_NODE_SHARE).is_err());
        let other_crs = GridGeometry {
            crs_wkt: "LOCAL_CS[\"x\"]".into(),
            ..window.clone()
        };
        assert_eq!(
            other_crs.cell_map(&big, SAME_NODE_SHARE).unwrap_err(),
            "another CRS"
        );
    }
}
