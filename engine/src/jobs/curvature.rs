//! The curvature job: read a horizon, convert it to depth, fit every window, evaluate the
//! attributes and write one GeoTIFF per window.

use super::{value_range, Progress};
use crate::curvature::{evaluate_field, AttributeDef, FlatTolerance, ATTRIBUTES};
use crate::error::{FlexureError, Result};
use crate::grid::Grid;
use crate::horizon::{positive_down_depth, Domain, Velocity, ZUnit};
use crate::io::{prepare_output_dir, read_grid, refuse_overwrite, write_float_geotiff, BandOut};
use crate::window::{fit_quadrics, WindowSpec};
use ndarray::Array2;
use std::fmt;
use std::path::{Path, PathBuf};

/// Where the average velocity of a time grid comes from.
#[derive(Clone, Debug, PartialEq)]
pub enum VelocitySource {
    /// None given.
    None,
    /// One value in m/s.
    Constant(f64),
    /// A grid of values in m/s on the horizon's cells.
    Grid(PathBuf),
}

/// Options of the curvature job: one output GeoTIFF per window, one band per attribute.
#[derive(Clone, Debug)]
pub struct CurvatureJob {
    /// Horizon grid to read.
    pub input: PathBuf,
    /// Folder for the outputs (created if missing).
    pub out_dir: PathBuf,
    /// Window edge lengths in cells (odd, 3..=101); sorted and de-duplicated before use.
    pub windows: Vec<usize>,
    /// Attributes to write, in band order.
    pub attributes: Vec<&'static AttributeDef>,
    /// What the values measure.
    pub domain: Domain,
    /// Unit of depth or elevation values.
    pub z_unit: ZUnit,
    /// Velocity for time grids.
    pub velocity: VelocitySource,
    /// Least share of valid cells in a window.
    pub min_valid: f64,
    /// CRS to assume when the input declares none.
    pub crs: Option<String>,
}

impl CurvatureJob {
    /// A job with the defaults: all attributes, depth in metres, min-valid 0.75.
    pub fn new(
        input: impl Into<PathBuf>,
        out_dir: impl Into<PathBuf>,
        windows: Vec<usize>,
    ) -> Self {
        Self {
            input: input.into(),
            out_dir: out_dir.into(),
            windows,
            attributes: ATTRIBUTES.iter().collect(),
            domain: Domain::Depth,
            z_unit: ZUnit::Metre,
            velocity: VelocitySource::None,
            min_valid: 0.75,
            crs: None,
        }
    }

    /// Output path of window `n`: `DIR/<input-stem>_w<NN>.tif`.
    pub fn output_path(&self, n: usize) -> PathBuf {
        let stem = self
            .input
            .file_stem()
            .map(|s| s.to_string_lossy().to_string())
            .unwrap_or_default();
        self.out_dir.join(format!("{stem}_w{n:02}.tif"))
    }

    /// Runs the job and reports what it wrote.
    pub fn run(&self, progress: &dyn Progress) -> Result<CurvatureReport> {
        let Prepared {
            windows,
            grid,
            depth,
            tolerance,
        } = self.prepare()?;
        for &n in &windows {
            refuse_overwrite(&self.output_path(n), &self.inputs())?;
        }
        progress.begin((grid.geometry.rows * windows.len()) as u64);
        let reports = windows
            .iter()
            .map(|&n| self.run_window(&grid, &depth, tolerance, n, progress))
            .collect::<Result<Vec<_>>>();
        progress.finish();
        Ok(CurvatureReport {
            input: self.input.clone(),
            grid: grid.geometry.describe(),
            input_null_share: grid.null_share(),
            windows: reports?,
        })
    }

    /// The input files (horizon and velocity grid).
    pub(crate) fn inputs(&self) -> Vec<&Path> {
        let mut inputs: Vec<&Path> = vec![&self.input];
        if let VelocitySource::Grid(p) = &self.velocity {
            inputs.push(p);
        }
        inputs
    }

    /// Checks the options and reads the horizon as positive-down depth: the sorted, distinct
    /// windows, the grid, the depth and the flat tolerance; prepares the output folder.
    pub(crate) fn prepare(&self) -> Result<Prepared> {
        let windows = self.checked_windows()?;
        let grid = read_grid(&self.input, self.crs.as_deref())?;
        if grid.valid_count() == 0 {
            return Err(FlexureError::input(
                &self.input,
                "every cell is null: nothing to fit",
            ));
        }
        for &n in &windows {
            WindowSpec {
                size: n,
                min_valid: self.min_valid,
            }
            .validate(grid.geometry.cols, grid.geometry.rows)?;
        }
        let velocity = self.read_velocity()?;
        let depth = positive_down_depth(&grid, &self.input, self.domain, self.z_unit, &velocity)?;
        if !depth.iter().any(|v| v.is_finite()) {
            return Err(FlexureError::input(
                &self.input,
                "no cell has both a value and a valid velocity",
            ));
        }
        prepare_output_dir(&self.out_dir)?;
        let (sx, sy) = grid.geometry.spacing();
        let tolerance =
            FlatTolerance::for_grid(excursion(&depth), sx.min(sy), grid.geometry.metres_per_unit);
        Ok(Prepared {
            windows,
            grid,
            depth,
            tolerance,
        })
    }

    fn checked_windows(&self) -> Result<Vec<usize>> {
        if self.windows.is_empty() {
            return Err(FlexureError::Parameter(
                "no window given: use e.g. --windows 3,5,9".into(),
            ));
        }
        if self.attributes.is_empty() {
            return Err(FlexureError::Parameter("no attribute chosen".into()));
        }
        let mut w = self.windows.clone();
        w.sort_unstable();
        w.dedup();
        for &n in &w {
            WindowSpec {
                size: n,
                min_valid: self.min_valid,
            }
            .validate(usize::MAX, usize::MAX)?;
        }
        Ok(w)
    }

    fn read_velocity(&self) -> Result<Velocity> {
        Ok(match &self.velocity {
            VelocitySource::None => Velocity::None,
            VelocitySource::Constant(v) => Velocity::Constant(*v),
            VelocitySource::Grid(p) => {
                Velocity::Grid(read_grid(p, self.crs.as_deref())?, p.clone())
            }
        })
    }

    fn run_window(
        &self,
        grid: &Grid,
        depth: &Array2<f64>,
        tolerance: FlatTolerance,
        n: usize,
        progress: &dyn Progress,
    ) -> Result<WindowReport> {
        let geometry = &grid.geometry;
        let spec = WindowSpec {
            size: n,
            min_valid: self.min_valid,
        };
        let field = fit_quadrics(depth.view(), geometry, &spec, &|rows| {
            progress.advance(rows as u64)
        })?;
        let values = evaluate_field(
            &field,
            &self.attributes,
            geometry.metres_per_unit,
            tolerance,
        );
        let ranges = self
            .attributes
            .iter()
            .zip(&values)
            .map(|(a, v)| (a.id, value_range(v)))
            .collect();
        let bands: Vec<BandOut> = self
            .attributes
            .iter()
            .zip(values)
            .map(|(a, values)| BandOut {
                description: a.id,
                unit: a.unit,
                values,
            })
            .collect();
        let path = self.output_path(n);
        write_float_geotiff(&path, geometry, &bands, &self.metadata(grid, n))?;
        let fitted = field.cells.iter().filter(|c| c.is_some()).count();
        Ok(WindowReport {
            window: n,
            path,
            null_share: 1.0 - fitted as f64 / field.cells.len() as f64,
            ranges,
        })
    }

    fn metadata(&self, grid: &Grid, n: usize) -> Vec<(String, String)> {
        let (sx, sy) = grid.geometry.spacing();
        let m = grid.geometry.metres_per_unit;
        let item = |k: &str, v: String| (k.to_string(), v);
        vec![
            item("FLEXURE_SOURCE", self.input.file_name().unwrap_or_default().to_string_lossy().to_string()),
            item("FLEXURE_WINDOW_CELLS", n.to_string()),
            item("FLEXURE_WINDOW_SIZE_M", format!("{:.3} x {:.3}", n as f64 * sx * m, n as f64 * sy * m)),
            item("FLEXURE_DOMAIN", format!("{:?}", self.domain).to_lowercase()),
            item("FLEXURE_MIN_VALID", self.min_valid.to_string()),
            item("FLEXURE_SIGN", "antiform positive; shape index dome +1, bowl -1".into()),
            item("FLEXURE_UNITS", "curvature 1/km, Gaussian 1/km^2, angles degrees from grid north".into()),
            item("FLEXURE_METHOD", "local quadric least squares (Evans 1979; Wood 1996); attributes after Roberts 2001".into()),
        ]
    }
}

/// A checked horizon ready to fit.
pub(crate) struct Prepared {
    /// Windows, ascending and distinct.
    pub(crate) windows: Vec<usize>,
    /// The horizon as read.
    pub(crate) grid: Grid,
    /// Positive-down depth in CRS units.
    pub(crate) depth: Array2<f64>,
    /// Round-off tolerance of the attributes.
    pub(crate) tolerance: FlatTolerance,
}

/// Largest |z - mean| over the valid cells.
fn excursion(z: &Array2<f64>) -> f64 {
    let valid: Vec<f64> = z.iter().copied().filter(|v| v.is_finite()).collect();
    let mean = valid.iter().sum::<f64>() / valid.len().max(1) as f64;
    valid.iter().map(|v| (v - mean).abs()).fold(0.0, f64::max)
}

/// What a curvature job wrote.
#[derive(Clone, Debug)]
pub struct CurvatureReport {
    /// The input grid.
    pub input: PathBuf,
    /// One-line description of the grid.
    pub grid: String,
    /// Share of null cells in the input.
    pub input_null_share: f64,
    /// One entry per window, smallest first.
    pub windows: Vec<WindowReport>,
}

/// What one window's output holds.
#[derive(Clone, Debug)]
pub struct WindowReport {
    /// Window edge length in cells.
    pub window: usize,
    /// File written.
    pub path: PathBuf,
    /// Share of cells with no fit.
    pub null_share: f64,
    /// (attribute id, value range) per band.
    pub ranges: Vec<(&'static str, Option<(f32, f32)>)>,
}

impl fmt::Display for CurvatureReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "{}: {}, {:.1}% null",
            self.input.display(),
            self.grid,
            100.0 * self.input_null_share
        )?;
        for w in &self.windows {
            writeln!(
                f,
                "  window {:>3}: {} ({:.1}% null)",
                w.window,
                w.path.display(),
                100.0 * w.null_share
            )?;
            for (id, range) in &w.ranges {
                match range {
                    Some((lo, hi)) => writeln!(f, "    {id:<12} {lo:>12.5} .. {hi:<12.5}")?,
                    None => writeln!(f, "    {id:<12} all null")?,
                }
            }
        }
        Ok(())
    }
}
