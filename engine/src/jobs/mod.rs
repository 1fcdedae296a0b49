//! Jobs: each strings reading, the computation and writing together for one command, from one
//! options struct. The command line only fills the struct and prints the report.

mod anisotropy;
mod curvature;
mod grid;
mod render;
mod stages;
mod well_inputs;
mod window_study;

pub use crate::anisotropy::VectorAxis;
pub use anisotropy::{
    AnisotropyJob, AnisotropyReport, AzimuthReference, WeightSource, HTI_CAUTION,
};
pub use curvature::{CurvatureJob, CurvatureReport, WindowReport};
pub use grid::{GridJob, GridReport};
pub use render::{RenderJob, RenderReport};
pub use stages::{
    PlanJob, PlanReport, StagesJob, StagesReport, WellReport, DEFAULT_HALF_WIDTH, MIN_BINS,
    MIN_FITTED_SHARE, SAMPLE_STEP_M, WELL_CAUTION,
};
pub use well_inputs::{
    parse_numbers, parse_well_list, read_well_list, Named, WellBindings, WellInput,
};
pub use window_study::{WindowStudyJob, WindowStudyReport};

/// Progress of a long job, in units of grid rows fitted.
pub trait Progress: Sync {
    /// A job of `total` units starts.
    fn begin(&self, total: u64);
    /// `done` more units are finished.
    fn advance(&self, done: u64);
    /// The job is over.
    fn finish(&self);
}

/// Progress that reports nothing.
pub struct Silent;

impl Progress for Silent {
    fn begin(&self, _total: u64) {}
    fn advance(&self, _done: u64) {}
    fn finish(&self) {}
}

/// (min, max) of the finite values, if any.
pub(crate) fn value_range(v: &ndarray::Array2<f32>) -> Option<(f32, f32)> {
    v.iter()
        .filter(|x| x.is_finite())
        .fold(None, |acc, &x| match acc {
            None => Some((x, x)),
            Some((lo, hi)) => Some((lo.min(x), hi.max(x))),
        })
}

/// `given`, or `given/anisotropy.tif` when `given` is a folder.
pub(crate) fn anisotropy_file(given: &std::path::Path) -> std::path::PathBuf {
    if given.is_dir() {
        given.join("anisotropy.tif")
    } else {
        given.to_path_buf()
    }
}

/// The bands of an `anisotropy.tif` the other jobs use, on its grid.
pub(crate) struct AnisotropyRaster {
    pub(crate) path: std::path::PathBuf,
    pub(crate) geometry: crate::grid::GridGeometry,
    pub(crate) magnitude: ndarray::Array2<f64>,
    pub(crate) azimuth_fast: ndarray::Array2<f64>,
    pub(crate) azimuth_slow: ndarray::Array2<f64>,
    pub(crate) magnitude_stderr: ndarray::Array2<f64>,
    pub(crate) azimuth_stderr: ndarray::Array2<f64>,
    /// Sectors used per bin and the grid's most, when the raster has the `n_sectors` band.
    pub(crate) n_sectors: Option<(ndarray::Array2<f64>, f64)>,
}

impl AnisotropyRaster {
    /// Reads `given` (the raster, or the folder holding `anisotropy.tif`).
    pub(crate) fn read(given: &std::path::Path) -> crate::error::Result<Self> {
        let path = anisotropy_file(given);
        let mut raster = crate::io::read_raster(&path, &crate::io::ReadOptions::default())?;
        let names = raster.info.names.clone();
        let mut take = |name: &str| {
            names
                .iter()
                .position(|n| n == name)
                .map(|i| std::mem::take(&mut raster.bands[i]))
                .ok_or_else(|| {
                    crate::error::FlexureError::input(
                        &path,
                        format!(
                            "has no band '{name}': give an anisotropy.tif written by flexure anisotropy (bands: {})",
                            names.join(", ")
                        ),
                    )
                })
        };
        let n_sectors = take("n_sectors").ok().map(|n| {
            let max = n
                .iter()
                .copied()
                .filter(|v| v.is_finite())
                .fold(0.0, f64::max);
            (n, max)
        });
        Ok(Self {
            n_sectors,
            magnitude: take("magnitude")?,
            azimuth_fast: take("azimuth_fast")?,
            azimuth_slow: take("azimuth_slow")?,
            magnitude_stderr: take("magnitude_stderr")?,
            azimuth_stderr: take("azimuth_stderr")?,
            geometry: raster.geometry,
            path,
        })
    }

    /// The grid's largest `n_sectors` and how many of the bins `cells` (row, col) were fitted
    /// from fewer sectors, when there are such bins.
    pub(crate) fn fewer_sectors(&self, cells: &[(usize, usize)]) -> Option<(usize, usize)> {
        let (n, max) = self.n_sectors.as_ref()?;
        let max = *max;
        let few = cells.iter().filter(|&&at| n[at] < max).count();
        (few > 0).then_some((max as usize, few))
    }

    /// The vector sample of bin (`row`, `col`), if fitted.
    pub(crate) fn sample(&self, row: usize, col: usize) -> Option<crate::anisotropy::VectorSample> {
        let at = (row, col);
        let s = crate::anisotropy::VectorSample {
            magnitude: self.magnitude[at],
            azimuth_fast: self.azimuth_fast[at],
            azimuth_slow: self.azimuth_slow[at],
            snr: self.magnitude[at] / self.magnitude_stderr[at],
        };
        (s.magnitude.is_finite() && s.azimuth_fast.is_finite()).then_some(s)
    }
}

/// Writes `bytes` to `path`'s temporary name (see [`crate::io::StagedFile`]).
pub(crate) fn stage_bytes(
    path: &std::path::Path,
    bytes: &[u8],
) -> crate::error::Result<crate::io::StagedFile> {
    let staged = crate::io::StagedFile::new(path);
    std::fs::write(staged.temp(), bytes).map_err(|e| crate::error::FlexureError::write(path, e))?;
    Ok(staged)
}

/// Encodes `pixmap` as PNG at `path`'s temporary name.
pub(crate) fn stage_png(
    path: &std::path::Path,
    pixmap: &tiny_skia::Pixmap,
) -> crate::error::Result<crate::io::StagedFile> {
    let bytes = pixmap
        .encode_png()
        .map_err(|e| crate::error::FlexureError::write(path, e))?;
    stage_bytes(path, &bytes)
}

/// `BASE.svg` and `BASE.png` of a figure.
pub(crate) fn stage_figure(
    base: &std::path::Path,
    fig: &crate::figure::Figure,
) -> crate::error::Result<Vec<crate::io::StagedFile>> {
    Ok(vec![
        stage_bytes(&base.with_extension("svg"), fig.to_svg().as_bytes())?,
        stage_png(&base.with_extension("png"), &fig.to_pixmap())?,
    ])
}
