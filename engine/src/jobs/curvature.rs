//! The curvature job: read a horizon, convert it to depth, fit every window, evaluate the
//! attributes and write one GeoTIFF per window, all committed together, each recording its
//! provenance.

use super::{value_range, Progress};
use crate::curvature::{evaluate_field, AttributeDef, FlatTolerance, ATTRIBUTES};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::horizon::{Horizon, HorizonSource};
use crate::io::{
    commit_all, prepare_output_dir, read_info, refuse_overwrite, stage_float_geotiff, BandOut,
    ReadOptions, StagedFile,
};
use crate::provenance::Provenance;
use crate::window::{fit_quadrics, WindowSpec};
use ndarray::Array2;
use std::fmt;
use std::path::{Path, PathBuf};

/// Options of the curvature job: one output GeoTIFF per window, one band per attribute.
#[derive(Clone, Debug)]
pub struct CurvatureJob {
    /// The horizon: file, domain, z unit and velocity.
    pub horizon: HorizonSource,
    /// How to read the inputs (assumed CRS, null sentinels, point-list columns).
    pub read: ReadOptions,
    /// Folder for the outputs (created if missing).
    pub out_dir: PathBuf,
    /// Window edge lengths in cells (odd, 3..=101); sorted and de-duplicated before use.
    pub windows: Vec<usize>,
    /// Attributes to write, in band order.
    pub attributes: Vec<&'static AttributeDef>,
    /// Least share of valid cells in a window.
    pub min_valid: f64,
    /// Replace existing outputs that hold other bands than this run writes.
    pub overwrite: bool,
}

impl CurvatureJob {
    /// A job with the defaults: all attributes, the horizon's declared domain and unit (else
    /// depth in the CRS unit), min-valid 0.75.
    pub fn new(
        input: impl Into<PathBuf>,
        out_dir: impl Into<PathBuf>,
        windows: Vec<usize>,
    ) -> Self {
        Self {
            horizon: HorizonSource::new(input),
            read: ReadOptions::default(),
            out_dir: out_dir.into(),
            windows,
            attributes: ATTRIBUTES.iter().collect(),
            min_valid: 0.75,
            overwrite: false,
        }
    }

    /// Output path of window `n`: `DIR/<input-stem>_w<NN>.tif`.
    pub fn output_path(&self, n: usize) -> PathBuf {
        let stem = self
            .horizon
            .path
            .file_stem()
            .map(|s| s.to_string_lossy().to_string())
            .unwrap_or_default();
        self.out_dir.join(format!("{stem}_w{n:02}.tif"))
    }

    /// Runs the job and reports what it wrote. Every window's file is staged and the files are
    /// committed together once all are written.
    pub fn run(&self, progress: &dyn Progress) -> Result<CurvatureReport> {
        let prepared = self.prepare()?;
        for &n in &prepared.windows {
            let path = self.output_path(n);
            refuse_overwrite(&path, &self.horizon.inputs())?;
            self.refuse_replacing_other_bands(&path)?;
        }
        let provenance = self.provenance(&prepared)?;
        let grid = &prepared.horizon.grid;
        progress.begin((grid.geometry.rows * prepared.windows.len()) as u64);
        let outcomes = prepared
            .windows
            .iter()
            .map(|&n| self.run_window(&prepared, &provenance, n, progress))
            .collect::<Result<Vec<_>>>();
        progress.finish();
        let (reports, staged): (Vec<WindowReport>, Vec<StagedFile>) = outcomes?.into_iter().unzip();
        commit_all(staged)?;
        Ok(CurvatureReport {
            input: self.horizon.path.clone(),
            grid: grid.geometry.describe(),
            input_null_share: grid.null_share(),
            notes: prepared.horizon.notes.clone(),
            windows: reports,
        })
    }

    /// Checks the options and reads the horizon as positive-down depth: the sorted, distinct
    /// windows, the horizon and the flat tolerance; prepares the output folder.
    pub(crate) fn prepare(&self) -> Result<Prepared> {
        let windows = self.checked_windows()?;
        let horizon = self.horizon.load(&self.read)?;
        let grid = &horizon.grid;
        if grid.valid_count() == 0 {
            return Err(FlexureError::input(
                &self.horizon.path,
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
        if !horizon.depth.iter().any(|v| v.is_finite()) {
            return Err(FlexureError::input(
                &self.horizon.path,
                "no cell has both a value and a valid velocity",
            ));
        }
        prepare_output_dir(&self.out_dir)?;
        let (sx, sy) = grid.geometry.spacing();
        let tolerance = FlatTolerance::for_grid(
            excursion(&horizon.depth),
            sx.min(sy),
            grid.geometry.metres_per_unit,
        );
        Ok(Prepared {
            windows,
            horizon,
            tolerance,
        })
    }

    /// Provenance of the outputs: inputs with checksums, domain, units, velocity, reading
    /// options and the fit parameters (the window is added per file).
    pub(crate) fn provenance(&self, prepared: &Prepared) -> Result<Provenance> {
        let h = &prepared.horizon;
        Ok(Provenance::of_inputs(&self.horizon.inputs())?
            .with("domain", h.domain.name())
            .with("z_unit", h.z_unit.map_or("ms (two-way time)", |u| u.name()))
            .with("velocity", h.velocity.clone())
            .with("nodata_sentinels", format!("{:?}", self.read.nodata))
            .with("windows_cells", join_windows(&prepared.windows))
            .with("min_valid", self.min_valid.to_string()))
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

    /// Refuses to replace an existing output that holds other bands than this run writes
    /// (e.g. a run with fewer `--attributes` into the same folder), unless `overwrite`.
    fn refuse_replacing_other_bands(&self, path: &Path) -> Result<()> {
        if self.overwrite || !path.exists() {
            return Ok(());
        }
        let existing = read_info(path)?.names;
        let ours: Vec<&str> = self.attributes.iter().map(|a| a.id).collect();
        if existing.iter().map(String::as_str).eq(ours.iter().copied()) {
            return Ok(());
        }
        Err(FlexureError::input(
            path,
            format!(
                "exists with bands {} but this run writes {}: give --overwrite to replace it, or another --out folder",
                existing.join(","),
                ours.join(",")
            ),
        ))
    }

    fn run_window(
        &self,
        prepared: &Prepared,
        provenance: &Provenance,
        n: usize,
        progress: &dyn Progress,
    ) -> Result<(WindowReport, StagedFile)> {
        let geometry = &prepared.horizon.grid.geometry;
        let spec = WindowSpec {
            size: n,
            min_valid: self.min_valid,
        };
        let field = fit_quadrics(prepared.horizon.depth.view(), geometry, &spec, &|rows| {
            progress.advance(rows as u64)
        })?;
        let values = evaluate_field(
            &field,
            &self.attributes,
            geometry.metres_per_unit,
            prepared.tolerance,
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
        let staged = stage_float_geotiff(
            &path,
            geometry,
            &bands,
            &self.metadata(geometry, provenance, n),
        )?;
        let fitted = field.cells.iter().filter(|c| c.is_some()).count();
        let report = WindowReport {
            window: n,
            path,
            null_share: 1.0 - fitted as f64 / field.cells.len() as f64,
            ranges,
        };
        Ok((report, staged))
    }

    fn metadata(
        &self,
        geometry: &GridGeometry,
        provenance: &Provenance,
        n: usize,
    ) -> Vec<(String, String)> {
        let (sx, sy) = geometry.spacing();
        let m = geometry.metres_per_unit;
        provenance
            .clone()
            .with("window_cells", n.to_string())
            .with("window_size_m", format!("{:.3} x {:.3}", n as f64 * sx * m, n as f64 * sy * m))
            .with("sign", "antiform positive; shape index dome +1, bowl -1")
            .with("units", "curvature 1/km, Gaussian 1/km^2, angles degrees from grid north")
            .with("method", "local quadric least squares (Evans 1979; Wood 1996); attributes after Roberts 2001")
            .items()
            .to_vec()
    }
}

fn join_windows(windows: &[usize]) -> String {
    windows
        .iter()
        .map(|w| w.to_string())
        .collect::<Vec<_>>()
        .join(",")
}

/// A checked horizon ready to fit.
pub(crate) struct Prepared {
    /// Windows, ascending and distinct.
    pub(crate) windows: Vec<usize>,
    /// The horizon as read and converted to positive-down depth in CRS units.
    pub(crate) horizon: Horizon,
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
    /// How the domain and units were decided, and what the readers noticed.
    pub notes: Vec<String>,
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
        for n in &self.notes {
            writeln!(f, "  note: {n}")?;
        }
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
