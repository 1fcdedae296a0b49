//! The anisotropy job: read azimuth-sector time grids (one file per sector or one band per
//! sector, or the interval between two horizons' sector-time rasters), convert the sector
//! azimuths to grid north, fit the cos 2phi model in every bin and write `anisotropy.tif` and
//! the map vectors (GeoPackage and RFC 7946 GeoJSON), all staged and committed together. The
//! inputs (azimuths declared by the bands, correlation-quality weights, reference times) are
//! gathered by [`SectorInputs`].
//!
//! The grids stream through the fit in batches of whole rows (read by runs of rows):
//! each batch's sector times and weights are read, every bin fitted, and the batch's bands
//! written to the GeoTIFF before the next batch is read. A bin's fit depends on that bin's
//! values alone, so the results are the same bits whatever the batch size and thread count.
//! Beyond a batch the job keeps only what its outputs need: the fits of the bins that get a map
//! vector, and three float32 values (4 bytes each) per fitted bin for the report's medians and
//! 95th percentiles.

use super::sector_inputs::SectorInputs;
use super::{batch_rows, default_memory_budget};
use crate::anisotropy::vectors::{
    default_vector_scale, segment, vector_bins, VectorAxis, VectorSample,
};
use crate::anisotropy::{
    fit_sector_grids, SectorFit, DEFAULT_MIN_SECTORS, FIT_BANDS, MIN_SECTORS_FLOOR,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::geotiff::{set_block_cache, BandSpec, Layout};
use crate::io::vector::{
    stage_both_formats, FieldKind, GeometryKind, Layer, Property, VectorFeature, VectorFormat,
};
use crate::io::{
    commit_all, nodata_if_null, prepare_output_dir, refuse_overwrite, GeoTiffWriter, ReadOptions,
    TiffOptions, NODATA,
};
use crate::provenance::Provenance;
use crate::stats::{self, Quantile};
use rayon::prelude::*;
use std::fmt;
use std::ops::Range;
use std::path::{Path, PathBuf};

/// Usual largest peak-to-peak time difference between sectors, ms (common practice).
const USUAL_PEAK_TO_PEAK_MS: f64 = 20.0;

/// Usual least number of sectors (common practice: 6 to 8 sectors).
const USUAL_MIN_SECTORS: usize = 6;

/// Interpretation cautions printed with every anisotropy result.
pub const HTI_CAUTION: &str = "Reading: under the common single vertical fracture set (HTI) \
model the slow azimuth is the fracture normal and the fast azimuth the fracture strike, often \
taken as the maximum horizontal stress direction. Dip, overburden, acquisition footprint and \
uneven azimuth-offset coverage also create cos 2phi terms, and fractures can be inherited from \
an older stress field: these are measurements, not stress.";

/// North the sector azimuths are measured from.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum AzimuthReference {
    /// Grid north of the sector grids' CRS.
    Grid,
    /// True north; `convergence` (degrees, true north to grid north, clockwise positive)
    /// converts them, or is computed from the CRS at the grid centre when `None`.
    True {
        /// Grid convergence in degrees, if given.
        convergence: Option<f64>,
    },
}

/// Weights of the sectors in the fit (relative inverse variances, e.g. fold).
#[derive(Clone, Debug, PartialEq)]
pub enum WeightSource {
    /// Every sector counts the same.
    Equal,
    /// One weight per sector.
    PerSector(Vec<f64>),
    /// One weight grid per sector (files, or the bands of one file), on the sectors' grid.
    Grids(Vec<PathBuf>),
    /// The correlation quality beside each sector-time raster
    /// ([`crate::anisotropy::sector_rasters`]: `sector_quality.tif`, bands matched by
    /// `AZIMUTH_DEG`), as the inverse-variance weight `c^2 / (1 - c^2)`, `c` capped at 0.99.
    Quality,
}

/// Options of the anisotropy job.
#[derive(Clone, Debug)]
pub struct AnisotropyJob {
    /// One single-band grid per sector, or one raster with a band per sector; with `top`, the
    /// base horizon's sector-time raster alone.
    pub inputs: Vec<PathBuf>,
    /// The top horizon's sector-time raster: the sectors fitted are then the interval times
    /// base (`inputs`) minus top, matched by azimuth (layer stripping).
    pub top: Option<PathBuf>,
    /// Sector-centre azimuths in degrees, one per sector, in input (band) order; empty to use
    /// the azimuths the bands declare (`AZIMUTH_DEG`, from grid north).
    pub azimuths: Vec<f64>,
    /// North of `azimuths`.
    pub reference: AzimuthReference,
    /// Sector weights.
    pub weights: WeightSource,
    /// Least number of valid sectors in a bin (at least 3).
    pub min_sectors: usize,
    /// Output folder (created if missing).
    pub out_dir: PathBuf,
    /// Vectors on every `every`-th bin in both directions.
    pub every: usize,
    /// Least B / magnitude_stderr for a vector (0 keeps all fitted bins).
    pub min_snr: f64,
    /// Azimuth the vectors follow.
    pub axis: VectorAxis,
    /// Vector length in metres per ms of magnitude; automatic when `None`.
    pub vector_scale: Option<f64>,
    /// The isotropic two-way time (ms) of `anisotropy_percent` for inputs whose metadata names
    /// none (`REFERENCE_TIME_FILE`); a single sector input only.
    pub reference_time: Option<PathBuf>,
    /// How to read the inputs (assumed CRS, null sentinels, point-list columns).
    pub read: ReadOptions,
    /// How output GeoTIFFs are compressed and laid out.
    pub tiff: TiffOptions,
    /// Working memory in bytes for the row batches and GDAL's block cache;
    /// [`default_memory_budget`] when `None`.
    pub memory: Option<u64>,
}

impl AnisotropyJob {
    /// A job with the defaults: grid-north azimuths, equal weights, at least 4 sectors per bin,
    /// a vector on every bin with SNR >= 2 along the fast azimuth, automatic length.
    pub fn new(inputs: Vec<PathBuf>, azimuths: Vec<f64>, out_dir: impl Into<PathBuf>) -> Self {
        Self {
            inputs,
            top: None,
            azimuths,
            reference: AzimuthReference::Grid,
            weights: WeightSource::Equal,
            min_sectors: DEFAULT_MIN_SECTORS,
            out_dir: out_dir.into(),
            every: 1,
            min_snr: 2.0,
            axis: VectorAxis::Fast,
            vector_scale: None,
            reference_time: None,
            read: ReadOptions::default(),
            tiff: TiffOptions::default(),
            memory: None,
        }
    }

    /// `DIR/anisotropy.tif`.
    pub fn raster_path(&self) -> PathBuf {
        self.out_dir.join("anisotropy.tif")
    }

    /// `DIR/anisotropy_vectors.<ext>` for a vector format.
    pub fn vector_path(&self, format: VectorFormat) -> PathBuf {
        let ext = match format {
            VectorFormat::GeoPackage => "gpkg",
            VectorFormat::GeoJson => "geojson",
        };
        self.out_dir.join(format!("anisotropy_vectors.{ext}"))
    }

    /// Runs the job and reports what it wrote. The grids stream through the fit in batches of
    /// rows (see the module notes); the outputs are staged and committed together at the end.
    pub fn run(&self) -> Result<AnisotropyReport> {
        self.check_parameters()?;
        let budget = self.memory.unwrap_or_else(default_memory_budget);
        set_block_cache(budget / 4);
        let sectors = SectorInputs::open(self)?;
        let n = sectors.len();
        if self.min_sectors > n {
            return Err(FlexureError::Parameter(format!(
                "--min-sectors {} exceeds the {n} sectors given",
                self.min_sectors
            )));
        }
        let geometry = &sectors.geometry;
        // batch_rows counts 8 bytes per band and bin.
        let batch = batch_rows(
            budget / 2,
            geometry.cols,
            bin_bytes(sectors.values_per_bin()).div_ceil(8),
            0,
        );
        let batches: Vec<Range<usize>> = (0..geometry.rows)
            .step_by(batch)
            .map(|r| r..(r + batch).min(geometry.rows))
            .collect();
        refuse_duplicate_sectors(&sectors, &batches)?;
        prepare_output_dir(&self.out_dir)?;
        let inputs = sectors.files();
        let inputs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
        let outputs = [
            self.raster_path(),
            self.vector_path(VectorFormat::GeoPackage),
            self.vector_path(VectorFormat::GeoJson),
        ];
        for out in &outputs {
            refuse_overwrite(out, &inputs)?;
        }
        let metadata = self.metadata(&sectors, &inputs)?;
        let specs: Vec<BandSpec> = FIT_BANDS
            .iter()
            .map(|b| BandSpec {
                description: b.id,
                unit: b.unit,
            })
            .collect();
        let mut writer = GeoTiffWriter::create::<f32>(
            &self.raster_path(),
            geometry,
            &specs,
            &metadata,
            self.tiff,
            Layout::Float,
        )?;
        let mut kept = Kept::default();
        for rows in batches {
            let times = (0..n)
                .map(|k| sectors.read_times(k, rows.clone()))
                .collect::<Result<Vec<_>>>()?;
            let weights = sectors.read_weights(rows.clone())?;
            let fits = fit_sector_grids(&times, &sectors.grid_azimuths, &weights, self.min_sectors);
            drop((times, weights));
            let isotropic = sectors.isotropic_times(rows.clone(), &fits)?;
            for (b, band) in FIT_BANDS.iter().enumerate() {
                let values: Vec<f32> = fits
                    .par_iter()
                    .zip(&isotropic)
                    .map(|(f, &t)| f.map_or(NODATA, |f| nodata_if_null((band.value)(&f, t) as f32)))
                    .collect();
                writer.write_rows(b, rows.start, values)?;
            }
            kept.add(&fits, rows.start, geometry.cols, self.every, self.min_snr);
        }
        let (sx, sy) = geometry.spacing();
        let spacing_m = sx.min(sy) * geometry.metres_per_unit;
        let scale = self.vector_scale.unwrap_or_else(|| {
            default_vector_scale(
                kept.vectors.iter().map(|k| k.2.magnitude),
                self.every as f64 * spacing_m,
            )
        });
        writer.set_metadata_item("FLEXURE_VECTOR_SCALE_M_PER_MS", &format!("{scale:.6}"))?;
        let mut staged = vec![writer.finish()?];
        let features: Vec<VectorFeature> = kept
            .vectors
            .iter()
            .map(|&(r, c, f)| line_feature(geometry, r, c, &f, self.axis, scale))
            .collect();
        let layer = Layer {
            name: "anisotropy_vectors",
            kind: GeometryKind::Line,
            fields: &VECTOR_FIELDS,
            features: &features,
        };
        staged.extend(stage_both_formats(
            &self.out_dir,
            &geometry.crs_wkt,
            &layer,
        )?);
        commit_all(staged)?;
        Ok(self.report(&sectors, kept, scale))
    }

    fn check_parameters(&self) -> Result<()> {
        let bad = |m: String| Err(FlexureError::Parameter(m));
        if let Some(a) = self.azimuths.iter().find(|a| !a.is_finite()) {
            return bad(format!("azimuth {a} is not a finite number of degrees"));
        }
        if self.min_sectors < MIN_SECTORS_FLOOR {
            return bad(format!(
                "--min-sectors {} is below {MIN_SECTORS_FLOOR}: three unknowns need at least three sectors",
                self.min_sectors
            ));
        }
        if self.every == 0 {
            return bad("--every must be at least 1".into());
        }
        if !(self.min_snr.is_finite() && self.min_snr >= 0.0) {
            return bad(format!("--min-snr {} must be a number >= 0", self.min_snr));
        }
        if let Some(s) = self.vector_scale {
            if !(s.is_finite() && s > 0.0) {
                return bad(format!(
                    "--vector-scale {s} must be a positive number of metres per ms"
                ));
            }
        }
        if let AzimuthReference::True {
            convergence: Some(g),
        } = self.reference
        {
            if !(g.is_finite() && g.abs() < 90.0) {
                return bad(format!(
                    "--convergence {g} must be a finite angle between -90 and 90 degrees"
                ));
            }
        }
        if let WeightSource::PerSector(w) = &self.weights {
            if let Some(v) = w.iter().find(|v| !(v.is_finite() && **v > 0.0)) {
                return bad(format!("weight {v} must be a positive number"));
            }
        }
        if let Some(top) = &self.top {
            match self.inputs.as_slice() {
                [base] if base == top => {
                    return bad(format!(
                        "--top and --base are the same file {}: give the top and the base horizon's sector times",
                        top.display()
                    ))
                }
                [_] => {}
                _ => {
                    return bad(
                        "with --top, give the base horizon's sector times as one raster (--base)"
                            .into(),
                    )
                }
            }
        }
        Ok(())
    }

    fn metadata(&self, sectors: &SectorInputs, inputs: &[&Path]) -> Result<Vec<(String, String)>> {
        let item = |k: &str, v: String| (k.to_string(), v);
        let centre_convergence = sectors
            .geometry
            .convergence()
            .map_or("unknown".to_string(), |g| format!("{g:.6}"));
        let mut items = Provenance::of_inputs(inputs)?.items().to_vec();
        let azimuths_from = match sectors.declared {
            true => "the bands' AZIMUTH_DEG metadata (grid north)",
            false => "--azimuths",
        };
        items.extend([
            item("FLEXURE_NODATA_SENTINELS", format!("{:?}", self.read.nodata)),
            item("FLEXURE_SECTORS", sectors.labels.join(", ")),
            item("FLEXURE_SECTOR_AZIMUTHS_FROM", azimuths_from.into()),
            item("FLEXURE_SECTOR_AZIMUTHS_GRID_DEG", join_numbers(&sectors.grid_azimuths)),
            item(
                "FLEXURE_CONVERGENCE_APPLIED_DEG",
                sectors.convergence.map_or("none (azimuths from grid north)".into(), |g| g.to_string()),
            ),
            item("FLEXURE_GRID_CONVERGENCE_AT_CENTRE_DEG", centre_convergence),
            item("FLEXURE_WEIGHTS", sectors.weights()),
            item("FLEXURE_MIN_SECTORS", self.min_sectors.to_string()),
            item("FLEXURE_UNITS", "times ms, azimuths degrees clockwise from grid north".into()),
            item("FLEXURE_METHOD", "weighted least squares t = A + a1 cos 2phi + a2 sin 2phi per bin; covariance standard errors; Rice bias after Wardle & Kronberg 1974".into()),
            item("FLEXURE_ANISOTROPY_PERCENT", format!("100 x 2B / T, T = {}", sectors.reference_time())),
            item("FLEXURE_CAUTION", HTI_CAUTION.into()),
        ]);
        if let Some((top, base)) = sectors.interval() {
            items.push(item(
                "FLEXURE_INTERVAL",
                format!(
                    "sector times of {} minus those of {}, sector by sector (layer stripping)",
                    base.display(),
                    top.display()
                ),
            ));
        }
        Ok(items)
    }

    fn report(&self, sectors: &SectorInputs, kept: Kept, scale: f64) -> AnisotropyReport {
        let magnitude = quantiles(kept.magnitude);
        let mut notes = sectors.notes.clone();
        if sectors.len() < USUAL_MIN_SECTORS {
            notes.push(format!(
                "only {} sectors: {USUAL_MIN_SECTORS} to 8 are usual; azimuths and errors are weakly constrained",
                sectors.len()
            ));
        }
        if let Some((_, p95)) = magnitude {
            if 2.0 * p95 > USUAL_PEAK_TO_PEAK_MS {
                notes.push(format!(
                    "peak-to-peak sector differences reach {:.1} ms, above the usual {USUAL_PEAK_TO_PEAK_MS} ms: check that every sector picks the same event and that times are in ms",
                    2.0 * p95
                ));
            }
        }
        if let Some(why) = sectors.no_reference_time() {
            notes.push(format!("anisotropy_percent is nodata everywhere: {why}"));
        }
        AnisotropyReport {
            sectors: sectors
                .labels
                .iter()
                .cloned()
                .zip(sectors.grid_azimuths.iter().copied())
                .collect(),
            azimuths_declared: sectors.declared,
            interval: sectors
                .interval()
                .map(|(t, b)| (t.to_path_buf(), b.to_path_buf())),
            grid: sectors.geometry.describe(),
            convergence: sectors.convergence,
            fitted_share: kept.fitted as f64 / kept.bins.max(1) as f64,
            magnitude,
            magnitude_stderr: quantiles(kept.magnitude_stderr),
            azimuth_stderr: quantiles(kept.azimuth_stderr),
            reference_time: sectors.reference_time(),
            raster: self.raster_path(),
            vector_files: vec![
                self.vector_path(VectorFormat::GeoPackage),
                self.vector_path(VectorFormat::GeoJson),
            ],
            vectors: kept.vectors.len(),
            scale,
            notes,
        }
    }
}

/// Properties of each vector feature, in order (see [`line_feature`]).
const VECTOR_FIELDS: [(&str, FieldKind); 12] = [
    ("magnitude", FieldKind::Real),
    ("magnitude_unbiased", FieldKind::Real),
    ("azimuth_fast", FieldKind::Real),
    ("azimuth_slow", FieldKind::Real),
    ("magnitude_stderr", FieldKind::Real),
    ("azimuth_stderr", FieldKind::Real),
    ("r2", FieldKind::Real),
    ("snr", FieldKind::Real),
    ("n_sectors", FieldKind::Integer),
    ("length_m", FieldKind::Real),
    ("row", FieldKind::Integer),
    ("col", FieldKind::Integer),
];

/// The vector of bin (`row`, `col`): centred on the bin, along `axis`, `scale` metres per ms.
fn line_feature(
    geometry: &GridGeometry,
    row: usize,
    col: usize,
    f: &SectorFit,
    axis: VectorAxis,
    scale: f64,
) -> VectorFeature {
    let length_m = f.magnitude * scale;
    let (start, end) = segment(
        geometry.cell_centre(col, row),
        VectorSample::from(f).azimuth(axis),
        length_m,
        geometry.metres_per_unit,
    );
    VectorFeature {
        points: vec![start, end],
        values: [
            f.magnitude,
            f.magnitude_unbiased,
            f.azimuth_fast,
            f.azimuth_slow,
            f.magnitude_stderr,
            f.azimuth_stderr,
            f.r2,
            f.snr(),
            f.n_sectors as f64,
            length_m,
            row as f64,
            col as f64,
        ]
        .map(Property::Number)
        .to_vec(),
    }
}

/// Bytes a bin takes in a batch: `values` f64 values read for it (sector times, weight grids,
/// reference times, its isotropic time), its fit, and one output band's float32 value (the
/// bands are written one at a time).
fn bin_bytes(values: usize) -> usize {
    8 * values + std::mem::size_of::<Option<SectorFit>>() + 4
}

/// What a run keeps of the fits beyond their batch: bin counts, the reported quantities of
/// every fitted bin as float32 (for the report's quantiles) and the fits of the vector bins.
#[derive(Default)]
struct Kept {
    bins: usize,
    fitted: usize,
    magnitude: Vec<f32>,
    magnitude_stderr: Vec<f32>,
    azimuth_stderr: Vec<f32>,
    /// `(row, col, fit)` of the bins that get a vector ([`vector_bins`]), row-major.
    vectors: Vec<(usize, usize, SectorFit)>,
}

impl Kept {
    /// Takes what is kept of one batch's fits (whole rows from grid row `first_row`).
    fn add(
        &mut self,
        fits: &[Option<SectorFit>],
        first_row: usize,
        cols: usize,
        every: usize,
        min_snr: f64,
    ) {
        self.bins += fits.len();
        for f in fits.iter().flatten() {
            self.fitted += 1;
            self.magnitude.push(f.magnitude as f32);
            self.magnitude_stderr.push(f.magnitude_stderr as f32);
            self.azimuth_stderr.push(f.azimuth_stderr as f32);
        }
        self.vectors.extend(vector_bins(
            fits,
            first_row,
            cols,
            (every, every),
            min_snr,
            SectorFit::snr,
        ));
    }
}

/// Refuses an azimuth given twice (equal modulo 360) and two sectors whose azimuths coincide
/// modulo 180 but hold identical times (the same data given twice; compared batch by batch).
fn refuse_duplicate_sectors(sectors: &SectorInputs, batches: &[Range<usize>]) -> Result<()> {
    let azimuths = &sectors.azimuths;
    for i in 0..azimuths.len() {
        for j in i + 1..azimuths.len() {
            let d180 = (azimuths[i] - azimuths[j]).rem_euclid(180.0);
            if d180 != 0.0 {
                continue;
            }
            let same_angle = (azimuths[i] - azimuths[j]).rem_euclid(360.0) == 0.0;
            let same_data = || -> Result<bool> {
                for rows in batches {
                    let (a, b) = (
                        sectors.read_times(i, rows.clone())?,
                        sectors.read_times(j, rows.clone())?,
                    );
                    if !a
                        .iter()
                        .zip(b.iter())
                        .all(|(a, b)| a.to_bits() == b.to_bits())
                    {
                        return Ok(false);
                    }
                }
                Ok(true)
            };
            if same_angle || same_data()? {
                let why = if same_angle {
                    "the same azimuth is given twice"
                } else {
                    "they hold identical times (the same data given twice)"
                };
                return Err(FlexureError::input(
                    sectors.path_of(j),
                    format!(
                        "sectors {} ({} deg) and {} ({} deg) cannot both be used: {why}",
                        sectors.labels[i], azimuths[i], sectors.labels[j], azimuths[j]
                    ),
                ));
            }
        }
    }
    Ok(())
}

fn join_numbers(v: &[f64]) -> String {
    v.iter()
        .map(|a| format!("{a:.4}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// (median, 95th percentile) of the finite values ([`Quantile::Nearest`]), if any.
fn quantiles(values: Vec<f32>) -> Option<(f64, f64)> {
    let finite = values.into_iter().filter(|x| x.is_finite());
    let mut v: Vec<f64> = finite.map(f64::from).collect();
    stats::quantiles(&mut v, [0.5, 0.95], Quantile::Nearest).map(|[p50, p95]| (p50, p95))
}
/// What an anisotropy job wrote.
#[derive(Clone, Debug)]
pub struct AnisotropyReport {
    /// (label, azimuth from grid north) per sector.
    pub sectors: Vec<(String, f64)>,
    /// Whether the azimuths were read from the bands' `AZIMUTH_DEG` (else given).
    pub azimuths_declared: bool,
    /// The (top, base) rasters when the sectors are an interval's (base minus top).
    pub interval: Option<(PathBuf, PathBuf)>,
    /// One-line description of the grid.
    pub grid: String,
    /// Convergence subtracted from true-north azimuths, if any (degrees).
    pub convergence: Option<f64>,
    /// Share of bins with a fit.
    pub fitted_share: f64,
    /// (median, 95th percentile) of the magnitude, ms.
    pub magnitude: Option<(f64, f64)>,
    /// (median, 95th percentile) of the magnitude standard error, ms.
    pub magnitude_stderr: Option<(f64, f64)>,
    /// (median, 95th percentile) of the azimuth standard error, degrees.
    pub azimuth_stderr: Option<(f64, f64)>,
    /// What the isotropic two-way time T of `anisotropy_percent` is (or why it is unknown).
    pub reference_time: String,
    /// The raster written.
    pub raster: PathBuf,
    /// The vector files written.
    pub vector_files: Vec<PathBuf>,
    /// Number of vectors in each vector file.
    pub vectors: usize,
    /// Vector length per ms of magnitude, metres.
    pub scale: f64,
    /// Warnings about unusual input.
    pub notes: Vec<String>,
}

impl fmt::Display for AnisotropyReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "sectors: {}, on {}", self.sectors.len(), self.grid)?;
        if let Some((top, base)) = &self.interval {
            writeln!(
                f,
                "  interval: {} minus {}, sector by sector",
                base.display(),
                top.display()
            )?;
        }
        let declared = match self.azimuths_declared {
            true => " (declared by the bands)",
            false => "",
        };
        for (label, az) in &self.sectors {
            writeln!(f, "  {label}: {az:.3} deg from grid north{declared}")?;
        }
        if let Some(g) = self.convergence {
            writeln!(
                f,
                "  (true-north azimuths converted with a grid convergence of {g:.4} deg)"
            )?;
        }
        writeln!(f, "bins fitted: {:.1}%", 100.0 * self.fitted_share)?;
        let line =
            |f: &mut fmt::Formatter<'_>, name: &str, q: Option<(f64, f64)>, unit: &str| match q {
                Some((m, p)) => writeln!(
                    f,
                    "  {name:<17} median {m:>9.4} {unit}, 95th percentile {p:>9.4} {unit}"
                ),
                None => writeln!(f, "  {name:<17} none"),
            };
        line(f, "magnitude", self.magnitude, "ms")?;
        line(f, "magnitude_stderr", self.magnitude_stderr, "ms")?;
        line(f, "azimuth_stderr", self.azimuth_stderr, "deg")?;
        writeln!(
            f,
            "anisotropy_percent: 100 x 2B / T, T = {}",
            self.reference_time
        )?;
        writeln!(
            f,
            "wrote {} ({} bands)",
            self.raster.display(),
            FIT_BANDS.len()
        )?;
        for p in &self.vector_files {
            writeln!(
                f,
                "wrote {} ({} vectors, {:.2} m per ms)",
                p.display(),
                self.vectors,
                self.scale
            )?;
        }
        for n in &self.notes {
            writeln!(f, "note: {n}")?;
        }
        writeln!(f, "{HTI_CAUTION}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::anisotropy::SectorWeight;
    use crate::io::{read_raster, write_float_geotiff, BandOut};
    use crate::stats::SeededNoise;
    use gdal::vector::LayerAccess;
    use ndarray::Array2;

    /// Eight sectors of `t = 1000 + 3 cos 2(phi - slow(r, c)) + noise` ms on a 700 x 40 grid,
    /// with null runs across the 256-row batch boundaries and a patch of unfitted bins, as one
    /// multi-band raster; and fold
    /// grids with zero-fold bins (sectors left out there).
    fn inputs(dir: &Path) -> (PathBuf, PathBuf, Vec<f64>) {
        let wkt = gdal::spatial_ref::SpatialRef::from_epsg(32625)
            .unwrap()
            .to_wkt()
            .unwrap();
        let geometry =
            GridGeometry::survey((500_000.0, 3_900_000.0), 30.0, (25.0, 25.0), (40, 700), wkt);
        let azimuths: Vec<f64> = (0..8).map(|k| 11.25 + 22.5 * k as f64).collect();
        let mut rng = SeededNoise::new(12);
        let times: Vec<Array2<f32>> = azimuths
            .iter()
            .enumerate()
            .map(|(k, &phi)| {
                let mut t = Array2::from_shape_fn((700, 40), |(r, c)| {
                    let slow = 20.0 + 0.2 * r as f64 + c as f64;
                    let t = 1000.0 + 3.0 * (2.0 * (phi - slow).to_radians()).cos();
                    (t + 0.3 * rng.gaussian()) as f32
                });
                for r in 250 + k..262 + k {
                    t[(r, 5 + k)] = f32::NAN;
                }
                // Five sectors of eight null: too few for a fit there.
                if k < 5 {
                    t.slice_mut(ndarray::s![510..516, 30..34]).fill(f32::NAN);
                }
                t
            })
            .collect();
        let fold: Vec<Array2<f32>> = (0..8)
            .map(|k| Array2::from_shape_fn((700, 40), |(r, c)| ((r + 3 * c + k) % 17) as f32))
            .collect();
        let write = |name: &str, bands: Vec<Array2<f32>>| {
            let path = dir.join(name);
            let bands: Vec<BandOut> = bands
                .into_iter()
                .map(|values| BandOut {
                    description: "t",
                    unit: "",
                    values,
                })
                .collect();
            write_float_geotiff(&path, &geometry, &bands, &[]).unwrap();
            path
        };
        (
            write("sectors.tif", times),
            write("fold.tif", fold),
            azimuths,
        )
    }

    /// Every feature of the vector layer of `path`: geometry as WKT and every field as text.
    fn features(path: &Path) -> Vec<(String, Vec<String>)> {
        let ds = gdal::Dataset::open(path).unwrap();
        let mut layer = ds.layer(0).unwrap();
        layer
            .features()
            .map(|f| {
                let values = f
                    .fields()
                    .map(|(name, v)| format!("{name}={v:?}"))
                    .collect();
                (f.geometry().unwrap().wkt().unwrap(), values)
            })
            .collect()
    }

    /// A 700-row grid streamed in 256-row batches (a 1 MB budget) gives, bit for bit, the
    /// bands, vectors and report of a run in one batch (1 GB), and both equal the fit of the
    /// whole grids at once (the reference: `fit_sector_grids` on every bin, as the job computed
    /// it before it streamed; `anisotropy_percent` of absolute times against the fitted A), read
    /// back through GDAL.
    #[test]
    fn streamed_batches_equal_one_batch_and_the_whole_grid_fit() {
        let dir = tempfile::tempdir().unwrap();
        let (sectors, fold, azimuths) = inputs(dir.path());
        let run = |name: &str, memory: u64| {
            let mut job = AnisotropyJob::new(
                vec![sectors.clone()],
                azimuths.clone(),
                dir.path().join(name),
            );
            job.weights = WeightSource::Grids(vec![fold.clone()]);
            job.every = 3;
            job.min_snr = 1.0;
            job.memory = Some(memory);
            let report = job.run().unwrap();
            (job, report)
        };
        let (small, small_report) = run("small", 1 << 20);
        let (large, large_report) = run("large", 1 << 30);
        // The small budget takes several batches, the large one a single batch.
        let batch = |memory: u64| batch_rows(memory / 2, 40, bin_bytes(8 + 8 + 1).div_ceil(8), 0);
        assert_eq!(batch(1 << 20), 256);
        assert!(batch(1 << 30) >= 700);
        let read = |job: &AnisotropyJob| {
            read_raster(&job.raster_path(), &ReadOptions::default())
                .unwrap()
                .bands
        };
        let bits = |bands: Vec<Array2<f64>>| -> Vec<Vec<u64>> {
            bands
                .iter()
                .map(|b| b.iter().map(|v| v.to_bits()).collect())
                .collect()
        };
        assert!(
            bits(read(&small)) == bits(read(&large)),
            "the rasters differ"
        );
        let json =
            |job: &AnisotropyJob| std::fs::read(job.vector_path(VectorFormat::GeoJson)).unwrap();
        assert!(json(&small) == json(&large), "the GeoJSON files differ");
        let gpkg = |job: &AnisotropyJob| features(&job.vector_path(VectorFormat::GeoPackage));
        assert!(gpkg(&small) == gpkg(&large), "the GeoPackages differ");
        assert!(small_report.vectors > 100);
        assert_eq!(small_report.vectors, large_report.vectors);
        assert_eq!(small_report.magnitude, large_report.magnitude);
        assert_eq!(small_report.azimuth_stderr, large_report.azimuth_stderr);
        assert_eq!(small_report.scale, large_report.scale);

        let whole = |p: &Path| read_raster(p, &ReadOptions::default()).unwrap().bands;
        let weights: Vec<SectorWeight> = whole(&fold).into_iter().map(SectorWeight::Grid).collect();
        let fits = fit_sector_grids(&whole(&sectors), &azimuths, &weights, DEFAULT_MIN_SECTORS);
        assert!(fits.iter().any(Option::is_none) && fits.iter().any(Option::is_some));
        for (band, written) in FIT_BANDS.iter().zip(read(&small)) {
            let same = fits.iter().zip(written.iter()).all(|(f, &w)| {
                match f.map(|f| (band.value)(&f, f.isotropic) as f32) {
                    Some(e) if e.is_finite() => e.to_bits() == (w as f32).to_bits(),
                    _ => w.is_nan(),
                }
            });
            assert!(same, "{}", band.id);
        }
    }
}
