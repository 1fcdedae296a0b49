//! The least-squares window mechanism: for every cell, fit the quadric
//! `z = a x^2 + b y^2 + c x y + d x + e y + f` to the valid cells of the N x N window centred on
//! it (Evans 1979; Wood 1996, PhD thesis, Univ. of Leicester, for windows larger than 3 x 3).
//!
//! - Coordinates are true cell-centre offsets in the CRS: x grid east, y grid north, in CRS
//!   units, so rotated geotransforms and non-square bins are handled exactly. The fit itself is
//!   done in scaled cell-index offsets `s = di/m`, `t = dj/m` (m = (N-1)/2), which keeps the
//!   normal equations well conditioned for every window size, then mapped to map coordinates
//!   through the inverse Jacobian (a quadric stays a quadric under an affine map, so the least
//!   squares solution is the same).
//! - Nulls and grid edges are one case: a cell outside the grid is a null. The fit uses the
//!   valid cells only (exact masked least squares through the 6 x 6 normal equations built from
//!   the mask's moments). No value is padded, reflected or smeared into a gap.
//! - Every moment is a separable correlation (a power of the column offset times a power of the
//!   row offset). The mask's 15 moments `sum u^p v^q M` (integer offsets u, v) are integers and
//!   are kept exactly in `i64` as running sums that slide one cell along each row and one row
//!   down each column (a binomial shift, exact, so nothing builds up along a line): their cost
//!   per cell does not depend on N, and every window that holds nulls gets its exact normal
//!   matrix. The data sums `sum s^p t^q z` are one pass along rows and one along columns, so
//!   their cost per cell grows linearly with N. Full windows use the precomputed inverse of
//!   the constant normal matrix (the classic fixed kernels); only windows holding nulls get
//!   their own solve.
//! - A cell is null when its centre is null, when fewer than `min_valid` of its window's cells
//!   are valid, or when the valid cells do not determine the quadric: the 1-norm condition
//!   number of the scaled normal matrix exceeds [`CONDITION_LIMIT`] or its Cholesky factor fails.
//! - Rows are processed in fixed tiles in parallel (rayon); each cell's sums run in a fixed
//!   order, so results are bit-identical whatever the thread count, and whichever run of rows
//!   a cell is fitted in: jobs stream the grid through [`WindowFit::map_tiles`] batch by
//!   batch and write each batch before fitting the next.

use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use nalgebra::{Matrix6, Vector6};
use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;

/// Largest accepted 1-norm condition number of the normal matrix in scaled window
/// coordinates (a full window has about 10 to 30); above it the valid cells are treated as
/// not determining the quadric.
pub const CONDITION_LIMIT: f64 = 1e6;

/// Smallest and largest window edge length in cells.
pub const WINDOW_RANGE: (usize, usize) = (3, 101);

/// Rows per parallel tile (fixed, so tiling never depends on the thread count).
const TILE_ROWS: usize = 64;

/// Exponents (p, q) of the basis functions s^p t^q, in coefficient order a, b, c, d, e, f.
const BASIS: [(usize, usize); 6] = [(2, 0), (0, 2), (1, 1), (1, 0), (0, 1), (0, 0)];

/// The local quadric of one cell, `z = a x^2 + b y^2 + c x y + d x + e y + f`, with x grid
/// east and y grid north in CRS units measured from the cell centre, z in the same length unit.
/// So `z_xx = 2a`, `z_yy = 2b`, `z_xy = c`, `z_x = d`, `z_y = e`, and `f` is the fitted value.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Quadric {
    pub a: f64,
    pub b: f64,
    pub c: f64,
    pub d: f64,
    pub e: f64,
    pub f: f64,
}

/// How to fit: window edge length in cells (odd, 3..=101) and the least share of valid cells.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WindowSpec {
    /// Window edge length N in cells.
    pub size: usize,
    /// Least share (0..1] of the N x N cells that must be valid for a fit.
    pub min_valid: f64,
}

impl WindowSpec {
    /// Checks the window against the allowed range and the grid size.
    pub fn validate(&self, cols: usize, rows: usize) -> Result<()> {
        let n = self.size;
        let (lo, hi) = WINDOW_RANGE;
        if n.is_multiple_of(2) || n < lo || n > hi {
            return Err(FlexureError::Parameter(format!(
                "window {n} is not allowed: use an odd number of cells from {lo} to {hi}"
            )));
        }
        if n > cols || n > rows {
            return Err(FlexureError::Parameter(format!(
                "window {n} is larger than the grid ({cols} x {rows} cells): use a smaller window"
            )));
        }
        if !(self.min_valid > 0.0 && self.min_valid <= 1.0) {
            return Err(FlexureError::Parameter(format!(
                "min-valid {} is outside (0, 1]: give a share such as 0.75",
                self.min_valid
            )));
        }
        Ok(())
    }

    fn half(&self) -> usize {
        (self.size - 1) / 2
    }

    /// Least number of valid cells for a fit (never below the 6 unknowns).
    fn min_count(&self) -> f64 {
        let cells = (self.size * self.size) as f64;
        (self.min_valid * cells - 1e-9).ceil().max(6.0)
    }
}

/// Quadrics for every cell of a grid; `None` where the cell is null.
pub struct QuadricField {
    /// Columns of the grid.
    pub cols: usize,
    /// Rows of the grid.
    pub rows: usize,
    /// Row-major cells.
    pub cells: Vec<Option<Quadric>>,
}

impl QuadricField {
    /// The quadric of cell (`col`, `row`).
    pub fn get(&self, col: usize, row: usize) -> Option<Quadric> {
        self.cells[row * self.cols + col]
    }
}

/// Fits the quadric at every cell of `values` (`[row, col]`, NaN = null; z in CRS length
/// units) over `spec`'s window. `progress` is called with the number of rows finished by each
/// tile. Fails only on an invalid window.
pub fn fit_quadrics(
    values: ArrayView2<f64>,
    geometry: &GridGeometry,
    spec: &WindowSpec,
    progress: &(dyn Fn(usize) + Sync),
) -> Result<QuadricField> {
    Ok(fit_quadrics_with_noise(values, geometry, spec, &[], progress)?.0)
}

/// Fits as [`fit_quadrics`] and also gives, per cell, the noise power of linear functionals
/// of the fitted coefficients: for rows `t_c` over (a, b, c, d, e, f) in map units,
/// `sum_c var(t_c . q)` under white noise of unit variance, which is `sum_c t_c^T Cov t_c`
/// with `Cov` the coefficients' covariance `J N^-1 J^T` (N the cell's normal matrix, J the map
/// from window to map coordinates; least-squares theory, e.g. Seber & Lee 2003, Linear
/// Regression Analysis, ch. 3). Masked windows have their own N, so the power grows where nulls
/// thin a window out. NaN where a cell has no fit.
pub fn fit_quadrics_with_noise(
    values: ArrayView2<f64>,
    geometry: &GridGeometry,
    spec: &WindowSpec,
    functionals: &[[f64; 6]],
    progress: &(dyn Fn(usize) + Sync),
) -> Result<(QuadricField, Array2<f64>)> {
    let (rows, cols) = values.dim();
    let fit = WindowFit::new(values, geometry, spec, functionals)?;
    let per_tile = fit.map_tiles(0..rows, |tile| {
        progress(tile.rows());
        tile.cells
    });
    let mut cells = Vec::with_capacity(rows * cols);
    let mut power = Vec::with_capacity(rows * cols);
    for (q, p) in per_tile.into_iter().flatten().map(|c| c.unzip()) {
        cells.push(q);
        power.push(p.unwrap_or(f64::NAN));
    }
    let power = Array2::from_shape_vec((rows, cols), power).expect("rows x cols cells");
    Ok((QuadricField { cols, rows, cells }, power))
}

/// The rows of a grid a [`WindowFit`] reads: `values` holds grid rows
/// `first_row..first_row + values.nrows()` of a grid of `grid_rows` rows (`[row, col]`, NaN =
/// null; z in CRS length units), and `z_mean` is [`valid_mean`] of the whole grid's values, the
/// fit's working origin for z. Fitting a run of rows reads the rows within half a window of
/// it, which must be held here or lie outside the grid; each cell's quadric is then the same
/// bits as in a fit of the whole grid. So a grid that is never held whole (the window study's
/// noise-perturbed horizon) can be fitted a band of rows at a time.
#[derive(Clone, Copy)]
pub struct GridRows<'a, T: Sample = f64> {
    /// The rows held.
    pub values: ArrayView2<'a, T>,
    /// Grid row of the first row held.
    pub first_row: usize,
    /// Rows of the whole grid.
    pub grid_rows: usize,
    /// Mean of the whole grid's valid values ([`valid_mean`]).
    pub z_mean: f64,
}

impl<'a, T: Sample> GridRows<'a, T> {
    /// The whole grid `values`.
    pub fn whole(values: ArrayView2<'a, T>) -> Self {
        Self {
            values,
            first_row: 0,
            grid_rows: values.nrows(),
            z_mean: valid_mean(values.iter().map(|v| v.widen())),
        }
    }

    /// The value at grid row `row` (held) and column `col`.
    fn at(&self, row: usize, col: usize) -> f64 {
        self.values[(row - self.first_row, col)].widen()
    }

    /// Whether the grid rows `rows` are held or outside the grid.
    fn holds(&self, rows: std::ops::Range<isize>) -> bool {
        let held = self.first_row as isize..(self.first_row + self.values.nrows()) as isize;
        let inside = rows.start.max(0)..rows.end.min(self.grid_rows as isize);
        inside.is_empty() || (held.start <= inside.start && inside.end <= held.end)
    }
}

/// A value type of grids the window driver reads: `f64`, or `f32` for grids read from float32
/// and used as they are (half the memory), widened exactly to `f64` as each value is read, so
/// a fit is the same bits either way.
pub trait Sample: Copy + Send + Sync + 'static {
    /// The value as `f64` (exact).
    fn widen(self) -> f64;
}

impl Sample for f64 {
    fn widen(self) -> f64 {
        self
    }
}

impl Sample for f32 {
    fn widen(self) -> f64 {
        f64::from(self)
    }
}

/// `values` as `f32` when every value converts exactly (NaN nulls included), else `None`.
pub fn narrow_exactly(values: &Array2<f64>) -> Option<Array2<f32>> {
    values
        .iter()
        .all(|&v| v.is_nan() || f64::from(v as f32) == v)
        .then(|| values.mapv(|v| v as f32))
}

/// Mean of the finite `values`, summed in the order given (0 when there is none): the origin
/// for z of a [`WindowFit`], subtracted before its sums for precision.
pub fn valid_mean(values: impl IntoIterator<Item = f64>) -> f64 {
    let (sum, count) = values
        .into_iter()
        .filter(|v| v.is_finite())
        .fold((0.0, 0usize), |(s, n), v| (s + v, n + 1));
    if count == 0 {
        0.0
    } else {
        sum / count as f64
    }
}

/// The window fit of one grid, ready to fit any run of its rows: the one window mechanism
/// every job streams through. Rows are fitted in fixed tiles (their height depends only on the
/// window, never on the thread count) on rayon; every cell's sums run in a fixed order, so a
/// cell's quadric is the same bits whichever run of rows it is fitted in.
pub struct WindowFit<'a, T: Sample = f64> {
    fitter: Fitter<'a, T>,
    tile_rows: usize,
}

/// The fitted cells of one tile: rows `first_row..first_row + cells.len() / cols`, row-major,
/// each with its quadric and the noise power of the fit's functionals (see
/// [`fit_quadrics_with_noise`]); `None` where the cell has no fit.
pub struct FittedTile {
    /// First grid row of the tile.
    pub first_row: usize,
    /// Columns of the grid.
    pub cols: usize,
    /// Row-major fitted cells.
    pub cells: Vec<Option<(Quadric, f64)>>,
}

impl FittedTile {
    /// Number of rows in the tile.
    pub fn rows(&self) -> usize {
        self.cells.len() / self.cols.max(1)
    }
}

impl<'a, T: Sample> WindowFit<'a, T> {
    /// Prepares the fit of `values` (`[row, col]`, NaN = null; z in CRS length units) over
    /// `spec`'s window, with the noise power of `functionals` (rows over (a, b, c, d, e, f) in
    /// map units; empty for none). Fails on a window the grid cannot take or a degenerate
    /// geotransform.
    pub fn new(
        values: ArrayView2<'a, T>,
        geometry: &GridGeometry,
        spec: &WindowSpec,
        functionals: &[[f64; 6]],
    ) -> Result<Self> {
        Self::of_rows(GridRows::whole(values), geometry, spec, functionals)
    }

    /// Prepares the fit of the grid of which `rows` holds a band (see [`GridRows`]), as
    /// [`WindowFit::new`] does for a whole grid; [`WindowFit::map_tiles`] then fits runs of
    /// rows whose windows lie in the band.
    pub fn of_rows(
        rows: GridRows<'a, T>,
        geometry: &GridGeometry,
        spec: &WindowSpec,
        functionals: &[[f64; 6]],
    ) -> Result<Self> {
        spec.validate(rows.values.ncols(), rows.grid_rows)?;
        let fitter = Fitter::new(rows, geometry, spec, functionals)?;
        Ok(Self {
            fitter,
            tile_rows: tile_rows(spec.half()),
        })
    }

    /// Grid rows one worker thread holds while it fits a tile: the row sums of the tile and
    /// its halo and the tile's fitted cells, each about 64 bytes a cell.
    pub fn working_rows(&self) -> usize {
        2 * self.tile_rows + 2 * self.fitter.half
    }

    /// (rows, columns) of the grid.
    pub fn dim(&self) -> (usize, usize) {
        (self.fitter.rows.grid_rows, self.fitter.cols())
    }

    /// Height of the fixed tiles; runs of rows given to [`WindowFit::map_tiles`] that start at
    /// a multiple of it keep the tiling of a whole-grid fit.
    pub fn tile_rows(&self) -> usize {
        self.tile_rows
    }

    /// Fits the grid rows `rows` tile by tile in parallel and maps each tile's fitted cells
    /// with `each`; the results come back in row order. The rows within half a window of
    /// `rows` must be held (see [`GridRows`]).
    pub fn map_tiles<R: Send>(
        &self,
        rows: std::ops::Range<usize>,
        each: impl Fn(FittedTile) -> R + Sync,
    ) -> Vec<R> {
        let end = rows.end.min(self.fitter.rows.grid_rows);
        let half = self.fitter.half as isize;
        assert!(
            self.fitter
                .rows
                .holds(rows.start as isize - half..end as isize + half),
            "internal: rows {rows:?} fitted beyond the rows held"
        );
        let starts: Vec<usize> = (rows.start..end).step_by(self.tile_rows).collect();
        starts
            .par_iter()
            .map(|&r0| {
                let r1 = (r0 + self.tile_rows).min(end);
                each(FittedTile {
                    first_row: r0,
                    cols: self.fitter.cols(),
                    cells: self.fitter.fit_tile(r0, r1),
                })
            })
            .collect()
    }
}

/// Tile height for a window of half width `half`: the smallest power of two that is at least
/// [`TILE_ROWS`] and four halves, so the 2 x half halo rows of each tile's row pass add at most
/// half the work for large windows, and runs of rows that start and end at multiples of 256
/// (the GeoTIFF block height) split into whole tiles for every window up to 101.
fn tile_rows(half: usize) -> usize {
    TILE_ROWS.max(4 * half).next_power_of_two()
}

/// Fixed-window least-squares weights: entry `[k][(row, col)]` of the result is the weight of
/// the cell at window position (row, col) (row 0 = first grid row of the window) in coefficient
/// k of (a, b, c, d, e, f), for a full window on `geometry`'s cells. Coefficients are in CRS
/// units as in [`Quadric`]; these are the kernels of Evans (1979) for N = 3 and their least
/// squares generalisation for larger N.
pub fn full_window_kernels(geometry: &GridGeometry, size: usize) -> Result<[Array2<f64>; 6]> {
    let spec = WindowSpec {
        size,
        min_valid: 1.0,
    };
    spec.validate(usize::MAX, usize::MAX)?;
    let map = CoefficientMap::new(geometry, spec.half())?;
    let inv = full_window_inverse(spec.half());
    let m = spec.half() as isize;
    let mut kernels: [Array2<f64>; 6] = std::array::from_fn(|_| Array2::zeros((size, size)));
    for (wr, dv) in (-m..=m).enumerate() {
        for (wc, du) in (-m..=m).enumerate() {
            let (s, t) = (du as f64 / m as f64, dv as f64 / m as f64);
            let phi = Vector6::from_fn(|k, _| basis_value(k, s, t));
            let q = map.to_map(&(inv * phi), 0.0);
            for (k, v) in [q.a, q.b, q.c, q.d, q.e, q.f].into_iter().enumerate() {
                kernels[k][(wr, wc)] = v;
            }
        }
    }
    Ok(kernels)
}

/// The kernel of a full window's centre residual `z_c - f` (`[row, col]`): the identity at
/// the centre minus the fitted value's kernel (coefficient f of [`full_window_kernels`]).
/// Its centre entry is `1 - h`, h the centre's leverage.
pub fn centre_residual_kernel(geometry: &GridGeometry, size: usize) -> Result<Array2<f64>> {
    let mut kernel = -full_window_kernels(geometry, size)?[5].clone();
    kernel[(size / 2, size / 2)] += 1.0;
    Ok(kernel)
}

/// Value of basis function k at scaled offset (s, t).
fn basis_value(k: usize, s: f64, t: f64) -> f64 {
    let (p, q) = BASIS[k];
    s.powi(p as i32) * t.powi(q as i32)
}

/// Index of the mask moment sum(M s^p t^q), p + q <= 4, in a flat array of 15.
fn moment_index(p: usize, q: usize) -> usize {
    let deg = p + q;
    deg * (deg + 1) / 2 + q
}

/// Binomial coefficients `BINOMIAL[p][k]` = C(p, k) for p, k <= 4.
const BINOMIAL: [[i64; 5]; 5] = [
    [1, 0, 0, 0, 0],
    [1, 1, 0, 0, 0],
    [1, 2, 1, 0, 0],
    [1, 3, 3, 1, 0],
    [1, 4, 6, 4, 1],
];

/// Exact moment sums of an integer sequence over a window of half width m:
/// `sums[k] = sum over v = -m..=m of v^k x(c + v)`, k < `sums.len()` <= 5. Moves them from
/// centre c to c + 1, given `leaving` = x(c - m) and `entering` = x(c + m + 1): the sums over
/// the new cells in the old offsets, then the binomial shift `(v - 1)^k`. Integer arithmetic,
/// so a sum slid along a whole line is the same as one summed afresh (no error builds up);
/// every term stays below 101^2 50^4 for windows up to 101 cells, far inside `i64`.
fn slide_moments(sums: &mut [i64], leaving: i64, entering: i64, m: i64) {
    let mut raw = [0i64; 5];
    let (mut low, mut high) = (1i64, 1i64);
    for (r, s) in raw.iter_mut().zip(sums.iter()) {
        *r = s - low * leaving + high * entering;
        low *= -m;
        high *= m + 1;
    }
    for (p, s) in sums.iter_mut().enumerate() {
        *s = (0..=p)
            .map(|k| {
                let sign = if (p - k) % 2 == 0 { 1 } else { -1 };
                sign * BINOMIAL[p][k] * raw[k]
            })
            .sum();
    }
}

/// The 15 mask moments `sum u^p v^q M` (integer offsets; `[p][q]`, p + q <= 4) scaled to the
/// fit's coordinates s = u/m, t = v/m: each an exact integer divided by m^(p+q), one rounding.
fn scaled_moments(exact: &[[i64; 5]; 5], m: usize) -> [f64; 15] {
    let mut moments = [0.0; 15];
    for p in 0..=4 {
        for q in 0..=(4 - p) {
            moments[moment_index(p, q)] = exact[p][q] as f64 / (m as f64).powi((p + q) as i32);
        }
    }
    moments
}

/// The normal matrix of a full window in scaled coordinates.
fn full_normal_matrix(m: usize) -> Matrix6<f64> {
    let mut exact = [[0i64; 5]; 5];
    let mi = m as i64;
    for v in -mi..=mi {
        for u in -mi..=mi {
            for (p, line) in exact.iter_mut().enumerate() {
                for (q, sum) in line.iter_mut().enumerate().take(5 - p) {
                    *sum += u.pow(p as u32) * v.pow(q as u32);
                }
            }
        }
    }
    normal_matrix(&scaled_moments(&exact, m))
}

/// Inverse of the full-window normal matrix (the fixed kernels' core).
fn full_window_inverse(m: usize) -> Matrix6<f64> {
    full_normal_matrix(m)
        .try_inverse()
        .expect("the full-window normal matrix is positive definite")
}

/// Assembles the 6 x 6 normal matrix from the 15 mask moments.
fn normal_matrix(moments: &[f64; 15]) -> Matrix6<f64> {
    Matrix6::from_fn(|k, l| {
        let (pk, qk) = BASIS[k];
        let (pl, ql) = BASIS[l];
        moments[moment_index(pk + pl, qk + ql)]
    })
}

/// 1-norm of a 6 x 6 matrix (largest absolute column sum).
fn norm1(m: &Matrix6<f64>) -> f64 {
    m.column_iter()
        .map(|c| c.iter().map(|v| v.abs()).sum::<f64>())
        .fold(0.0, f64::max)
}

/// Maps scaled-window coefficients (A..F in s, t) to map-coordinate coefficients.
struct CoefficientMap {
    /// Inverse Jacobian: (di, dj) = K (dx, dy).
    k: [[f64; 2]; 2],
    m: f64,
}

impl CoefficientMap {
    fn new(geometry: &GridGeometry, half: usize) -> Result<Self> {
        if !geometry.is_invertible() {
            return Err(FlexureError::Parameter(
                "the grid's geotransform is degenerate (cells of zero area)".into(),
            ));
        }
        let [[a, b], [c, d]] = geometry.jacobian();
        let det = a * d - b * c;
        Ok(Self {
            k: [[d / det, -b / det], [-c / det, a / det]],
            m: half as f64,
        })
    }

    /// Chain rule: gradient K^T g, Hessian K^T H K, with g, H in cell-index offsets.
    fn to_map(&self, scaled: &Vector6<f64>, z_shift: f64) -> Quadric {
        let m = self.m;
        let (m2, k) = (m * m, &self.k);
        let g = [scaled[3] / m, scaled[4] / m];
        let h = [
            [2.0 * scaled[0] / m2, scaled[2] / m2],
            [scaled[2] / m2, 2.0 * scaled[1] / m2],
        ];
        let grad = |x: usize| k[0][x] * g[0] + k[1][x] * g[1];
        let hess = |x: usize, y: usize| {
            let mut sum = 0.0;
            for (r, hr) in h.iter().enumerate() {
                for (c, hrc) in hr.iter().enumerate() {
                    sum += k[r][x] * hrc * k[c][y];
                }
            }
            sum
        };
        Quadric {
            a: hess(0, 0) / 2.0,
            b: hess(1, 1) / 2.0,
            c: hess(0, 1),
            d: grad(0),
            e: grad(1),
            f: scaled[5] + z_shift,
        }
    }
}

/// Everything a tile needs: the data, window geometry and precomputed full-window solution.
struct Fitter<'a, T: Sample> {
    rows: GridRows<'a, T>,
    half: usize,
    /// s = u/m for u = -m..=m.
    offsets: Vec<f64>,
    /// Powers 0..=2 of t = v/m for v = -m..=m.
    row_powers: Vec<[f64; 3]>,
    full_count: f64,
    min_count: f64,
    full_inverse: Matrix6<f64>,
    map: CoefficientMap,
    /// Mean of the grid's valid values, subtracted before the sums for precision.
    z_shift: f64,
    /// The noise functionals in window coordinates, `J^T t_c`.
    functionals: Vec<Vector6<f64>>,
    /// Their noise power for a full window.
    full_power: f64,
}

/// Row sums of one grid row: `mask[col][p]` = sum over u of u^p M (integer offsets, exact),
/// `data[p][col]` = sum of s^p M z.
struct RowSums {
    mask: Vec<[i64; 5]>,
    data: [Vec<f64>; 3],
}

/// The mask moments of the windows centred on one grid row, per column: `[p][q]` = sum over the
/// window of u^p v^q M (integer offsets), slid down the tile one row at a time.
struct WindowMoments {
    columns: Vec<[[i64; 5]; 5]>,
}

impl WindowMoments {
    /// Summed afresh over `rows` (the 2m + 1 row sums of the first window row).
    fn new(rows: &[RowSums], m: usize) -> Self {
        let cols = rows[0].mask.len();
        let mut columns = vec![[[0i64; 5]; 5]; cols];
        for (line, v) in rows.iter().zip(-(m as i64)..) {
            for (column, row_moments) in columns.iter_mut().zip(&line.mask) {
                for (p, (line, moment)) in column.iter_mut().zip(row_moments).enumerate() {
                    for (q, sum) in line.iter_mut().enumerate().take(5 - p) {
                        *sum += moment * v.pow(q as u32);
                    }
                }
            }
        }
        Self { columns }
    }

    /// Moves every column's moments one row down: `leaving` is the row sums of the window's
    /// old top row, `entering` those of its new bottom row.
    fn slide(&mut self, leaving: &RowSums, entering: &RowSums, m: usize) {
        for ((column, out), into) in self
            .columns
            .iter_mut()
            .zip(&leaving.mask)
            .zip(&entering.mask)
        {
            for (p, line) in column.iter_mut().enumerate() {
                slide_moments(&mut line[..5 - p], out[p], into[p], m as i64);
            }
        }
    }
}

impl<'a, T: Sample> Fitter<'a, T> {
    fn new(
        rows: GridRows<'a, T>,
        geometry: &GridGeometry,
        spec: &WindowSpec,
        functionals: &[[f64; 6]],
    ) -> Result<Self> {
        let half = spec.half();
        let map = CoefficientMap::new(geometry, half)?;
        let functionals: Vec<Vector6<f64>> = functionals
            .iter()
            .map(|t| {
                Vector6::from_fn(|j, _| {
                    let q = map.to_map(&Vector6::from_fn(|k, _| f64::from(k == j)), 0.0);
                    let coefficients = [q.a, q.b, q.c, q.d, q.e, q.f];
                    t.iter().zip(coefficients).map(|(t, c)| t * c).sum()
                })
            })
            .collect();
        let full_inverse = full_window_inverse(half);
        let full_power = noise_power(&functionals, &full_inverse);
        let offsets: Vec<f64> = (-(half as isize)..=half as isize)
            .map(|u| u as f64 / half as f64)
            .collect();
        Ok(Self {
            rows,
            half,
            offsets: offsets.clone(),
            row_powers: offsets.iter().map(|&t| [1.0, t, t * t]).collect(),
            full_count: (spec.size * spec.size) as f64,
            min_count: spec.min_count(),
            full_inverse,
            map,
            z_shift: rows.z_mean,
            functionals,
            full_power,
        })
    }

    fn cols(&self) -> usize {
        self.rows.values.ncols()
    }

    /// Value at (row, col) as (mask, shifted z); cells outside the grid are nulls.
    fn cell(&self, row: isize, col: usize) -> (i64, f64) {
        if row < 0 || row >= self.rows.grid_rows as isize {
            return (0, 0.0);
        }
        let v = self.rows.at(row as usize, col);
        if v.is_finite() {
            (1, v - self.z_shift)
        } else {
            (0, 0.0)
        }
    }

    /// Pass along each grid row `row`: the sums over u of u^p M (slid, exact) and s^p M z.
    fn row_sums(&self, row: isize) -> RowSums {
        let cols = self.cols();
        let (mut mask_row, mut data_row) = (vec![0i64; cols], vec![0.0; cols]);
        for col in 0..cols {
            (mask_row[col], data_row[col]) = self.cell(row, col);
        }
        let mut sums = RowSums {
            mask: Vec::with_capacity(cols),
            data: std::array::from_fn(|_| vec![0.0; cols]),
        };
        let m = self.half as isize;
        let mask_at = |col: isize| {
            usize::try_from(col)
                .ok()
                .and_then(|c| mask_row.get(c))
                .copied()
                .unwrap_or(0)
        };
        let mut moments = [0i64; 5];
        for (p, sum) in moments.iter_mut().enumerate() {
            *sum = (-m..=m)
                .map(|u| (u as i64).pow(p as u32) * mask_at(u))
                .sum();
        }
        for col in 0..cols as isize {
            sums.mask.push(moments);
            slide_moments(
                &mut moments,
                mask_at(col - m),
                mask_at(col + m + 1),
                m as i64,
            );
        }
        for (iu, u) in (-m..=m).enumerate() {
            let s = self.offsets[iu];
            let powers = [1.0, s, s * s];
            let lo = (-u).max(0) as usize;
            let hi = (cols as isize - u.max(0)).max(0) as usize;
            for col in lo..hi {
                let zv = data_row[(col as isize + u) as usize];
                for (line, w) in sums.data.iter_mut().zip(&powers) {
                    line[col] += w * zv;
                }
            }
        }
        sums
    }

    /// Fits output rows r0..r1 (quadric and noise power per cell).
    fn fit_tile(&self, r0: usize, r1: usize) -> Vec<Option<(Quadric, f64)>> {
        let m = self.half;
        let first = r0 as isize - m as isize;
        let sums: Vec<RowSums> = (first..(r1 + m) as isize)
            .map(|r| self.row_sums(r))
            .collect();
        let cols = self.cols();
        let mut out = Vec::with_capacity((r1 - r0) * cols);
        let mut moments = WindowMoments::new(&sums[..2 * m + 1], m);
        for row in r0..r1 {
            let i = row - r0;
            if i > 0 {
                moments.slide(&sums[i - 1], &sums[i + 2 * m], m);
            }
            let window = &sums[i..i + 2 * m + 1];
            out.extend((0..cols).map(|col| self.fit_cell(window, &moments.columns[col], row, col)));
        }
        out
    }

    /// Fits one cell from the data row sums of the 2m+1 rows of its window (one pass over the
    /// rows for the right-hand side) and its exact mask moments (used only if the window holds
    /// nulls).
    fn fit_cell(
        &self,
        window: &[RowSums],
        mask_moments: &[[i64; 5]; 5],
        row: usize,
        col: usize,
    ) -> Option<(Quadric, f64)> {
        if !self.rows.at(row, col).is_finite() {
            return None;
        }
        let count = mask_moments[0][0] as f64;
        if count < self.min_count {
            return None;
        }
        let mut rhs = Vector6::zeros();
        for (line, t) in window.iter().zip(&self.row_powers) {
            for (k, &(p, q)) in BASIS.iter().enumerate() {
                rhs[k] += t[q] * line.data[p][col];
            }
        }
        let (scaled, power) = if count == self.full_count {
            (self.full_inverse * rhs, self.full_power)
        } else {
            let moments = scaled_moments(mask_moments, self.half);
            let (solution, inverse) = solve_masked(&normal_matrix(&moments), &rhs)?;
            (solution, noise_power(&self.functionals, &inverse))
        };
        Some((self.map.to_map(&scaled, self.z_shift), power))
    }
}

/// `sum_c u_c^T inverse u_c`: the noise power of the functionals `u_c` (window coordinates)
/// for a normal matrix with this inverse.
fn noise_power(functionals: &[Vector6<f64>], inverse: &Matrix6<f64>) -> f64 {
    functionals.iter().map(|u| u.dot(&(inverse * u))).sum()
}

/// Solves the masked normal equations, refusing singular or ill-conditioned systems; also
/// gives the inverse normal matrix.
fn solve_masked(normal: &Matrix6<f64>, rhs: &Vector6<f64>) -> Option<(Vector6<f64>, Matrix6<f64>)> {
    let chol = normal.cholesky()?;
    let inverse = chol.inverse();
    let condition = norm1(normal) * norm1(&inverse);
    (condition.is_finite() && condition <= CONDITION_LIMIT).then(|| (chol.solve(rhs), inverse))
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn square(h: f64) -> GridGeometry {
        GridGeometry {
            cols: 64,
            rows: 64,
            geo_transform: [0.0, h, 0.0, 0.0, 0.0, -h],
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        }
    }

    #[test]
    fn moment_index_is_a_bijection_onto_15() {
        let mut seen = [false; 15];
        for p in 0..=4 {
            for q in 0..=(4 - p) {
                seen[moment_index(p, q)] = true;
            }
        }
        assert!(seen.iter().all(|&s| s));
    }

    #[test]
    fn slid_mask_moments_equal_moments_summed_afresh() {
        // The definition sum_v v^k x(c + v) summed directly at every centre of an irregular
        // 0/1 line (zeros beyond its ends), against the slid sums, for every window half width.
        let line: Vec<i64> = (0..97)
            .map(|i| i64::from((i * 7 + i / 5) % 3 != 0))
            .collect();
        let at = |i: i64| usize::try_from(i).ok().and_then(|i| line.get(i)).copied();
        let direct = |c: i64, m: i64, k: u32| -> i64 {
            (-m..=m).map(|v| v.pow(k) * at(c + v).unwrap_or(0)).sum()
        };
        for m in [1i64, 2, 7, 50] {
            let mut sums: [i64; 5] = std::array::from_fn(|k| direct(0, m, k as u32));
            for c in 0..line.len() as i64 {
                let expected: [i64; 5] = std::array::from_fn(|k| direct(c, m, k as u32));
                assert_eq!(sums, expected, "m {m}, centre {c}");
                let (out, into) = (at(c - m).unwrap_or(0), at(c + m + 1).unwrap_or(0));
                slide_moments(&mut sums, out, into, m);
            }
        }
    }

    #[test]
    fn three_by_three_kernels_match_evans() {
        // Evans (1979) 3x3 least-squares coefficients as given in REFERENCES.md section 3
        // (Wood 1996): rows z1 z2 z3 = north row; a = [(z1+z3+z4+z6+z7+z9)/6 - (z2+z5+z8)/3]/h^2,
        // c = (z3+z7-z1-z9)/(4h^2), d = (z3+z6+z9-z1-z4-z7)/(6h), e = (z1+z2+z3-z7-z8-z9)/(6h).
        let h = 10.0;
        let k = full_window_kernels(&square(h), 3).unwrap();
        let z = |i: usize| ((i - 1) / 3, (i - 1) % 3); // z1..z9 -> (row, col), row 0 north
        let expect_a = [1.0 / 6.0, -1.0 / 3.0, 1.0 / 6.0];
        for i in 1..=9 {
            let (r, c) = z(i);
            assert_relative_eq!(k[0][(r, c)] * h * h, expect_a[c], epsilon = 1e-12);
            assert_relative_eq!(k[1][(r, c)] * h * h, expect_a[r], epsilon = 1e-12);
        }
        let (c1, c3, c7, c9) = (k[2][(0, 0)], k[2][(0, 2)], k[2][(2, 0)], k[2][(2, 2)]);
        for (v, s) in [(c1, -1.0), (c3, 1.0), (c7, 1.0), (c9, -1.0)] {
            assert_relative_eq!(v * 4.0 * h * h, s, epsilon = 1e-12);
        }
        assert_relative_eq!(k[3][(1, 2)] * 6.0 * h, 1.0, epsilon = 1e-12);
        assert_relative_eq!(k[3][(0, 0)] * 6.0 * h, -1.0, epsilon = 1e-12);
        assert_relative_eq!(k[4][(0, 1)] * 6.0 * h, 1.0, epsilon = 1e-12);
        assert_relative_eq!(k[4][(2, 2)] * 6.0 * h, -1.0, epsilon = 1e-12);
    }

    #[test]
    fn n_by_n_kernels_match_closed_forms() {
        // REFERENCES.md section 3 [D]: S2 = m(m+1)(2m+1)/3, S4 = m(m+1)(2m+1)(3m^2+3m-1)/15;
        // d = sum z i / (N S2 h); c = sum z i j / (S2^2 h^2);
        // a = sum z (i^2 - S2/N) / (N (S4 - S2^2/N) h^2), j counted northward.
        let h = 25.0;
        for n in [5usize, 7, 9, 21] {
            let m = (n - 1) / 2;
            let (mf, nf) = (m as f64, n as f64);
            let s2 = mf * (mf + 1.0) * (2.0 * mf + 1.0) / 3.0;
            let s4 = s2 * (3.0 * mf * mf + 3.0 * mf - 1.0) / 5.0;
            let k = full_window_kernels(&square(h), n).unwrap();
            for r in 0..n {
                for c in 0..n {
                    let i = c as f64 - mf;
                    let j = mf - r as f64;
                    let a = (i * i - s2 / nf) / (nf * (s4 - s2 * s2 / nf) * h * h);
                    assert_relative_eq!(k[0][(r, c)], a, epsilon = 1e-14, max_relative = 1e-9);
                    assert_relative_eq!(
                        k[2][(r, c)],
                        i * j / (s2 * s2 * h * h),
                        epsilon = 1e-14,
                        max_relative = 1e-9
                    );
                    assert_relative_eq!(
                        k[3][(r, c)],
                        i / (nf * s2 * h),
                        epsilon = 1e-14,
                        max_relative = 1e-9
                    );
                    assert_relative_eq!(
                        k[4][(r, c)],
                        j / (nf * s2 * h),
                        epsilon = 1e-14,
                        max_relative = 1e-9
                    );
                }
            }
        }
    }

    #[test]
    fn full_window_noise_gains_match_table() {
        // REFERENCES.md section 3 noise gains (consistent with Florinsky 1998, IJGIS 12(1):47-61):
        // var(z_x) h^2/s^2 = 1/6, 1/50, 1/196, 1/540; var(z_xx) h^4/s^2 = 2, 2/35, 1/147, 1/693;
        // var(z_xy) h^4/s^2 = 1/4, 1/100, 1/784, 1/3600 for N = 3, 5, 7, 9.
        let h = 1.0;
        let table = [
            (3, 1.0 / 6.0, 2.0, 0.25),
            (5, 1.0 / 50.0, 2.0 / 35.0, 0.01),
            (7, 1.0 / 196.0, 1.0 / 147.0, 1.0 / 784.0),
            (9, 1.0 / 540.0, 1.0 / 693.0, 1.0 / 3600.0),
        ];
        for (n, zx, zxx, zxy) in table {
            let k = full_window_kernels(&square(h), n).unwrap();
            let ss =
                |w: &Array2<f64>, scale: f64| w.iter().map(|v| (v * scale).powi(2)).sum::<f64>();
            assert_relative_eq!(ss(&k[3], 1.0), zx, max_relative = 1e-12);
            assert_relative_eq!(ss(&k[0], 2.0), zxx, max_relative = 1e-12);
            assert_relative_eq!(ss(&k[2], 1.0), zxy, max_relative = 1e-12);
        }
    }

    #[test]
    fn noise_gains_match_monte_carlo() {
        // The check: the closed-form gains (REFERENCES.md section 3, derived;
        // consistent with Florinsky 1998 on Evans' method) against the fits of seeded white
        // noise, var(z_xx) h^4 / sigma^2 = 2, 2/35, 1/147 and var(z_x) h^2 / sigma^2 = 1/6,
        // 1/50, 1/196 for N = 3, 5, 7, within 3% (about 640 000 cells).
        let (n, h, sigma) = (800usize, 12.5, 0.7);
        let g = GridGeometry {
            cols: n,
            rows: n,
            ..square(h)
        };
        let mut rng = crate::stats::SeededNoise::new(17);
        let z = Array2::from_shape_fn((n, n), |_| sigma * rng.gaussian());
        for (size, zxx, zx) in [
            (3, 2.0, 1.0 / 6.0),
            (5, 2.0 / 35.0, 1.0 / 50.0),
            (7, 1.0 / 147.0, 1.0 / 196.0),
        ] {
            let spec = WindowSpec {
                size,
                min_valid: 1.0,
            };
            let field = fit_quadrics(z.view(), &g, &spec, &|_| {}).unwrap();
            let fits: Vec<Quadric> = field.cells.iter().flatten().copied().collect();
            let var = |f: &dyn Fn(&Quadric) -> f64| {
                fits.iter().map(|q| f(q).powi(2)).sum::<f64>() / fits.len() as f64
            };
            let measured_zxx = var(&|q| 2.0 * q.a) * h.powi(4) / (sigma * sigma);
            let measured_zx = var(&|q| q.d) * h * h / (sigma * sigma);
            assert_relative_eq!(measured_zxx, zxx, max_relative = 0.03);
            assert_relative_eq!(measured_zx, zx, max_relative = 0.03);
        }
    }

    #[test]
    fn even_and_oversized_windows_are_refused() {
        for n in [2usize, 4, 1, 103] {
            let spec = WindowSpec {
                size: n,
                min_valid: 0.75,
            };
            assert!(spec.validate(200, 200).is_err(), "window {n}");
        }
        let spec = WindowSpec {
            size: 9,
            min_valid: 0.75,
        };
        assert!(spec.validate(8, 200).is_err());
        assert!(spec.validate(9, 9).is_ok());
    }

    #[test]
    fn a_band_of_rows_fits_as_the_whole_grid_does() {
        // The streaming contract (module notes): rows fitted from a held band with the whole
        // grid's mean as origin are the same bits as in a whole-grid fit (reference: the
        // whole-grid fit itself), at the grid's top and bottom edges and inside, with nulls.
        let g = GridGeometry {
            cols: 30,
            rows: 90,
            ..square(12.5)
        };
        let mut rng = crate::stats::SeededNoise::new(23);
        let z = Array2::from_shape_fn((90, 30), |(r, c)| {
            if (r * 7 + c * 3) % 19 == 0 {
                f64::NAN
            } else {
                500.0 + 0.02 * (r * c) as f64 + rng.gaussian()
            }
        });
        let spec = WindowSpec {
            size: 7,
            min_valid: 0.5,
        };
        let whole = WindowFit::new(z.view(), &g, &spec, &[[2.0, 2.0, 0.0, 0.0, 0.0, 0.0]])
            .unwrap()
            .map_tiles(0..90, |t| t.cells)
            .concat();
        for (first, last) in [(0usize, 20usize), (37, 61), (70, 90)] {
            let held = first.saturating_sub(3)..(last + 3).min(90);
            let band = GridRows {
                values: z.slice(ndarray::s![held.clone(), ..]),
                first_row: held.start,
                grid_rows: 90,
                z_mean: valid_mean(z.iter().copied()),
            };
            let fit =
                WindowFit::of_rows(band, &g, &spec, &[[2.0, 2.0, 0.0, 0.0, 0.0, 0.0]]).unwrap();
            let cells = fit.map_tiles(first..last, |t| t.cells).concat();
            assert_eq!(
                format!("{cells:?}"),
                format!("{:?}", &whole[first * 30..last * 30]),
                "rows {first}..{last}"
            );
        }
    }

    #[test]
    fn float32_grids_fit_to_the_same_bits_as_their_float64_widening() {
        // f32 -> f64 is exact (IEEE 754), so the driver reading f32 values must give the
        // quadrics of the same grid held as f64, nulls and partial windows included.
        let (rows, cols) = (37, 29);
        let mut rng = crate::stats::SeededNoise::new(3);
        let narrow = Array2::from_shape_fn((rows, cols), |(r, c)| {
            let z = 1500.0 + 0.3 * r as f64 - 0.2 * c as f64 + rng.gaussian();
            if (r * cols + c) % 11 == 0 {
                f32::NAN
            } else {
                z as f32
            }
        });
        let wide = narrow.mapv(f64::from);
        let narrowed = narrow_exactly(&wide).map(|a| a.mapv(f32::to_bits));
        assert_eq!(narrowed, Some(narrow.mapv(f32::to_bits)));
        let g = square(25.0);
        let g = GridGeometry { cols, rows, ..g };
        let spec = WindowSpec {
            size: 5,
            min_valid: 0.5,
        };
        let field = fit_quadrics(wide.view(), &g, &spec, &|_| {}).unwrap();
        let fit = WindowFit::new(narrow.view(), &g, &spec, &[]).unwrap();
        let cells: Vec<Option<Quadric>> = fit
            .map_tiles(0..rows, |t| t.cells)
            .into_iter()
            .flatten()
            .map(|c| c.map(|(q, _)| q))
            .collect();
        assert_eq!(cells.len(), field.cells.len());
        let bits =
            |q: &Option<Quadric>| q.map(|q| [q.a, q.b, q.c, q.d, q.e, q.f].map(f64::to_bits));
        assert!(cells
            .iter()
            .zip(&field.cells)
            .all(|(a, b)| bits(a) == bits(b)));
        assert!(cells.iter().any(Option::is_some));
        // A value that is not a float32 keeps the grid in float64.
        let mut finer = wide.clone();
        finer[(3, 4)] += 1e-9;
        assert!(narrow_exactly(&finer).is_none());
    }

    #[test]
    fn collinear_valid_cells_are_refused() {
        // Only one row valid: a quadric in two variables is not determined (linear algebra).
        let g = square(10.0);
        let mut v = Array2::from_elem((9, 9), f64::NAN);
        v.row_mut(4).fill(3.0);
        let spec = WindowSpec {
            size: 3,
            min_valid: 0.1,
        };
        let field = fit_quadrics(v.view(), &g, &spec, &|_| {}).unwrap();
        assert!(field.cells.iter().all(|c| c.is_none()));
    }
}
