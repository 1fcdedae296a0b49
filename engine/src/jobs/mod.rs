//! Jobs: each strings reading, the computation and writing together for one command, from one
//! options struct. The command line only fills the struct and prints the report.

mod anisotropy;
mod curvature;
mod grid;
mod outcomes;
mod plan;
mod render;
mod run_record;
mod run_report;
mod sector_inputs;
mod sector_times;
mod stages;
mod well_inputs;
mod window_study;

pub use crate::anisotropy::vectors::VectorAxis;
use crate::bands::{vector_band, VectorRole};
pub use anisotropy::{
    AnisotropyJob, AnisotropyReport, AzimuthReference, WeightSource, HTI_CAUTION,
};
pub use curvature::{CurvatureJob, CurvatureReport, WindowReport};
pub use grid::{GridJob, GridReport};
pub use outcomes::{
    analyse, Level, OutcomeAnalysis, OutcomeTable, OutcomeTest, StageMetrics, OUTCOME_CAUTION,
};
pub use plan::{
    Coherence, PlanJob, PlanReport, MAX_COHERENCE_P, MIN_MEDIAN_SNR, RANDOM_SCORE, SCORE_DRAWS,
    SCORE_LEVEL,
};
pub use render::{default_pixels_per_cell, RenderJob, RenderReport};
pub use run_record::{
    file_kind, write_run_files, FileRecord, RunRecord, StepRecord, MANIFEST_FILE,
};
pub use run_report::{report_html, REPORT_FILE};
pub use sector_times::{
    SectorTimesJob, SectorTimesReport, TimeUnit, DEFAULT_HALF_WINDOW_MS, DEFAULT_MAX_SHIFT_MS,
    DEFAULT_TRACE_TOLERANCE,
};
pub use stages::{
    StagesJob, StagesReport, WellReport, DEFAULT_HALF_WIDTH, MIN_BINS, MIN_FITTED_SHARE,
    SAMPLE_STEP_M, WELL_CAUTION,
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

/// The default working memory of a job beyond its input: a quarter of the machine's memory
/// (Linux `/proc/meminfo`; 8 GiB assumed where it cannot be read), at most 1 GiB, at least
/// 256 MiB.
pub fn default_memory_budget() -> u64 {
    const GIB: u64 = 1 << 30;
    let total = machine_memory().unwrap_or(8 * GIB);
    (total / 4).clamp(GIB / 4, GIB)
}

/// The machine's memory in bytes (Linux `/proc/meminfo`), if it can be read.
fn machine_memory() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemTotal:"))?;
    let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// Parses a memory size: bytes, or a number with `K`, `M`, `G` (binary multiples, an optional
/// `B` or `iB`), e.g. `512M`, `1.5G`; at least 64 MiB.
pub fn parse_memory(text: &str) -> std::result::Result<u64, String> {
    let t = text.trim().to_ascii_uppercase();
    let t = t.trim_end_matches("IB").trim_end_matches('B');
    let (number, scale) = match t.chars().last() {
        Some('K') => (&t[..t.len() - 1], 1u64 << 10),
        Some('M') => (&t[..t.len() - 1], 1 << 20),
        Some('G') => (&t[..t.len() - 1], 1 << 30),
        _ => (t, 1),
    };
    let bytes = number
        .trim()
        .parse::<f64>()
        .ok()
        .filter(|v| v.is_finite() && *v >= 0.0)
        .map(|v| (v * scale as f64) as u64)
        .ok_or_else(|| format!("memory size '{text}' is not understood: give e.g. 512M or 2G"))?;
    if bytes < 64 << 20 {
        return Err(format!(
            "memory size '{text}' is below 64M: give at least 64M"
        ));
    }
    match machine_memory() {
        Some(total) if bytes > total => Err(format!(
            "memory size '{text}' is more than this machine's {:.1}G: give less",
            total as f64 / (1u64 << 30) as f64
        )),
        _ => Ok(bytes),
    }
}

/// Rows per batch for a streamed grid of `cols` columns with `bands` float32 output bands
/// when the batches and the fit may hold `bytes`: a multiple of the GeoTIFF block height (so
/// every block is written once), at least one block row. Each worker thread's fit holds
/// `fit_rows` rows of 64 bytes a cell ([`WindowFit::working_rows`]); a batch row holds each
/// band twice (tile results and the joined band).
///
/// [`WindowFit::working_rows`]: crate::surface::window::WindowFit::working_rows
pub(crate) fn batch_rows(bytes: u64, cols: usize, bands: usize, fit_rows: usize) -> usize {
    let block = crate::io::geotiff::BLOCK_ROWS;
    let cols = cols.max(1);
    let fit = (rayon::current_num_threads() * fit_rows * cols * 64) as u64;
    let per_row = (cols * 8 * bands.max(1)) as u64;
    let rows = (bytes.saturating_sub(fit) / per_row) as usize;
    (rows / block).max(1) * block
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
        // The bands the vectors read, found by their role in the anisotropy table.
        let role = |r: VectorRole| vector_band(r).map_or("", |b| b.id);
        let n_sectors = take(role(VectorRole::Sectors)).ok().map(|n| {
            let max = n
                .iter()
                .copied()
                .filter(|v| v.is_finite())
                .fold(0.0, f64::max);
            (n, max)
        });
        Ok(Self {
            n_sectors,
            magnitude: take(role(VectorRole::Length))?,
            azimuth_fast: take(role(VectorRole::Azimuth(VectorAxis::Fast)))?,
            azimuth_slow: take(role(VectorRole::Azimuth(VectorAxis::Slow)))?,
            magnitude_stderr: take(role(VectorRole::LengthStderr))?,
            azimuth_stderr: take(role(VectorRole::AzimuthStderr))?,
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
    pub(crate) fn sample(
        &self,
        row: usize,
        col: usize,
    ) -> Option<crate::anisotropy::vectors::VectorSample> {
        let at = (row, col);
        let s = crate::anisotropy::vectors::VectorSample {
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
    fig: &crate::draw::figure::Figure,
) -> crate::error::Result<Vec<crate::io::StagedFile>> {
    Ok(vec![
        stage_bytes(&base.with_extension("svg"), fig.to_svg().as_bytes())?,
        stage_png(&base.with_extension("png"), &fig.to_pixmap())?,
    ])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn memory_sizes_in_binary_multiples() {
        // K, M, G as powers of 1024 (IEC 80000-13 binary prefixes, the usual reading of
        // memory sizes on the command line; common practice).
        assert_eq!(parse_memory("512M"), Ok(512 << 20));
        assert_eq!(parse_memory("2g"), Ok(2 << 30));
        assert_eq!(parse_memory("1.5GiB"), Ok(3 << 29));
        assert_eq!(parse_memory("100MB"), Ok(100 << 20));
        assert!(parse_memory("10M").unwrap_err().contains("64M"));
        assert!(parse_memory("lots").unwrap_err().contains("not understood"));
        assert!(parse_memory("-1G").is_err());
        assert!(parse_memory("0").unwrap_err().contains("64M"));
        // More than any machine of this project has (2^20 GiB).
        assert!(parse_memory("1048576G").unwrap_err().contains("machine"));
    }

    #[test]
    fn batches_are_whole_block_rows_within_the_budget() {
        // By hand: 13 bands on 8192 columns are 8192 * 8 * 13 bytes a batch row; the fit's rows
        // (64 bytes a cell) on every worker thread come off the budget first; batches are whole
        // 256-row GeoTIFF blocks.
        let per_row = 8192 * 8 * 13;
        assert_eq!(batch_rows(300 * per_row, 8192, 13, 0), 256);
        assert_eq!(batch_rows(600 * per_row, 8192, 13, 0), 512);
        let fit = rayon::current_num_threads() as u64 * 100 * 8192 * 64;
        assert_eq!(batch_rows(fit + 600 * per_row, 8192, 13, 100), 512);
        assert_eq!(batch_rows(fit, 8192, 13, 100), 256);
        // Never below one block row, however small the budget.
        assert_eq!(batch_rows(1, 8192, 13, 0), 256);
    }
}
