//! The anisotropy job: read azimuth-sector time grids (one file per sector or one band per
//! sector), convert the sector azimuths to grid north, fit the cos 2phi model in every bin and
//! write `anisotropy.tif` and the map vectors (GeoPackage and RFC 7946 GeoJSON), all staged and
//! committed together.

use crate::anisotropy::vectors::{
    default_vector_scale, segment, vector_bins, VectorAxis, VectorSample,
};
use crate::anisotropy::{
    fit_sector_grids, SectorFit, SectorWeight, DEFAULT_MIN_SECTORS, FIT_BANDS, MIN_SECTORS_FLOOR,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::vector::{
    stage_both_formats, FieldKind, GeometryKind, Layer, Property, VectorFeature, VectorFormat,
};
use crate::io::Raster;
use crate::io::{
    commit_all, prepare_output_dir, read_raster, refuse_overwrite, stage_float_geotiff, BandOut,
    ReadOptions, TiffOptions,
};
use crate::provenance::Provenance;
use crate::stats::{self, Quantile};
use crate::surface::horizon::DeclaredUnit;
use ndarray::Array2;
use std::fmt;
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
}

/// Options of the anisotropy job.
#[derive(Clone, Debug)]
pub struct AnisotropyJob {
    /// One single-band grid per sector, or one raster with a band per sector.
    pub inputs: Vec<PathBuf>,
    /// Sector-centre azimuths in degrees, one per sector, in input (band) order.
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
    /// How to read the inputs (assumed CRS, null sentinels, point-list columns).
    pub read: ReadOptions,
    /// How output GeoTIFFs are compressed and laid out.
    pub tiff: TiffOptions,
}

impl AnisotropyJob {
    /// A job with the defaults: grid-north azimuths, equal weights, at least 4 sectors per bin,
    /// a vector on every bin with SNR >= 2 along the fast azimuth, automatic length.
    pub fn new(inputs: Vec<PathBuf>, azimuths: Vec<f64>, out_dir: impl Into<PathBuf>) -> Self {
        Self {
            inputs,
            azimuths,
            reference: AzimuthReference::Grid,
            weights: WeightSource::Equal,
            min_sectors: DEFAULT_MIN_SECTORS,
            out_dir: out_dir.into(),
            every: 1,
            min_snr: 2.0,
            axis: VectorAxis::Fast,
            vector_scale: None,
            read: ReadOptions::default(),
            tiff: TiffOptions::default(),
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

    /// Runs the job and reports what it wrote.
    pub fn run(&self) -> Result<AnisotropyReport> {
        self.check_parameters()?;
        let sectors = read_stack(&self.inputs, &self.read, Units::Time)?;
        let n = sectors.grids.len();
        if n < MIN_SECTORS_FLOOR {
            return Err(FlexureError::Parameter(format!(
                "{n} sector grid(s) given: the cos 2phi fit needs at least {MIN_SECTORS_FLOOR} sectors"
            )));
        }
        if self.azimuths.len() != n {
            return Err(FlexureError::Parameter(format!(
                "{} azimuths given for {n} sector grids: give one --azimuths value per sector",
                self.azimuths.len()
            )));
        }
        if self.min_sectors > n {
            return Err(FlexureError::Parameter(format!(
                "--min-sectors {} exceeds the {n} sectors given",
                self.min_sectors
            )));
        }
        refuse_duplicate_sectors(&self.azimuths, &sectors)?;
        let weights = self.read_weights(&sectors)?;
        let convergence = self.convergence_to_apply(&sectors)?;
        let grid_azimuths: Vec<f64> = self
            .azimuths
            .iter()
            .map(|a| (a - convergence.unwrap_or(0.0)).rem_euclid(360.0))
            .collect();
        prepare_output_dir(&self.out_dir)?;
        let mut inputs: Vec<&Path> = self.inputs.iter().map(PathBuf::as_path).collect();
        if let WeightSource::Grids(paths) = &self.weights {
            inputs.extend(paths.iter().map(PathBuf::as_path));
        }
        let outputs = [
            self.raster_path(),
            self.vector_path(VectorFormat::GeoPackage),
            self.vector_path(VectorFormat::GeoJson),
        ];
        for out in &outputs {
            refuse_overwrite(out, &inputs)?;
        }
        let fits = fit_sector_grids(&sectors.grids, &grid_azimuths, &weights, self.min_sectors);
        self.write(&sectors, &grid_azimuths, convergence, &fits)
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
        Ok(())
    }

    fn read_weights(&self, sectors: &Stack) -> Result<Vec<SectorWeight>> {
        let n = sectors.grids.len();
        match &self.weights {
            WeightSource::Equal => Ok(vec![SectorWeight::Constant(1.0); n]),
            WeightSource::PerSector(w) if w.len() == n => {
                Ok(w.iter().map(|&v| SectorWeight::Constant(v)).collect())
            }
            WeightSource::PerSector(w) => Err(FlexureError::Parameter(format!(
                "{} weights given for {n} sectors: give one weight per sector",
                w.len()
            ))),
            WeightSource::Grids(paths) => {
                let weights = ReadOptions {
                    find_sentinels: false,
                    ..self.read.clone()
                };
                let stack = read_stack(paths, &weights, Units::Weight)?;
                if stack.grids.len() != n {
                    return Err(FlexureError::Parameter(format!(
                        "{} weight grids given for {n} sectors: give one weight grid per sector",
                        stack.grids.len()
                    )));
                }
                if let Some(why) = stack.geometry.mismatch(&sectors.geometry) {
                    return Err(FlexureError::input(
                        &paths[0],
                        format!("weight grids are not on the sector grids' grid ({why}): give weights on the sector bins"),
                    ));
                }
                Ok(stack.grids.into_iter().map(SectorWeight::Grid).collect())
            }
        }
    }

    /// The convergence subtracted from the given azimuths (`None` for grid-north azimuths).
    fn convergence_to_apply(&self, sectors: &Stack) -> Result<Option<f64>> {
        match self.reference {
            AzimuthReference::Grid => Ok(None),
            AzimuthReference::True {
                convergence: Some(g),
            } => Ok(Some(g)),
            AzimuthReference::True { convergence: None } => {
                sectors.geometry.convergence().map(Some).map_err(|e| {
                    FlexureError::input(
                        &self.inputs[0],
                        format!("cannot compute the grid convergence from its CRS ({e}): give --convergence DEG"),
                    )
                })
            }
        }
    }

    fn write(
        &self,
        sectors: &Stack,
        grid_azimuths: &[f64],
        convergence: Option<f64>,
        fits: &[Option<SectorFit>],
    ) -> Result<AnisotropyReport> {
        let geometry = &sectors.geometry;
        let bands: Vec<BandOut> = FIT_BANDS
            .iter()
            .map(|b| BandOut {
                description: b.id,
                unit: b.unit,
                values: Array2::from_shape_fn((geometry.rows, geometry.cols), |(r, c)| {
                    fits[r * geometry.cols + c].map_or(f32::NAN, |f| (b.value)(&f) as f32)
                }),
            })
            .collect();
        let kept = vector_bins(
            fits,
            geometry.cols,
            (self.every, self.every),
            self.min_snr,
            SectorFit::snr,
        );
        let (sx, sy) = geometry.spacing();
        let spacing_m = sx.min(sy) * geometry.metres_per_unit;
        let scale = self.vector_scale.unwrap_or_else(|| {
            default_vector_scale(
                kept.iter().map(|k| k.2.magnitude),
                self.every as f64 * spacing_m,
            )
        });
        let features: Vec<VectorFeature> = kept
            .iter()
            .map(|&(r, c, f)| line_feature(geometry, r, c, &f, self.axis, scale))
            .collect();
        let metadata = self.metadata(sectors, grid_azimuths, convergence, scale)?;
        let raster =
            stage_float_geotiff(&self.raster_path(), geometry, &bands, &metadata, self.tiff)?;
        let mut staged = vec![raster];
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
        Ok(self.report(
            sectors,
            grid_azimuths,
            convergence,
            fits,
            features.len(),
            scale,
        ))
    }

    fn metadata(
        &self,
        sectors: &Stack,
        grid_azimuths: &[f64],
        convergence: Option<f64>,
        scale: f64,
    ) -> Result<Vec<(String, String)>> {
        let item = |k: &str, v: String| (k.to_string(), v);
        let centre_convergence = sectors
            .geometry
            .convergence()
            .map_or("unknown".to_string(), |g| format!("{g:.6}"));
        let mut inputs: Vec<&Path> = self.inputs.iter().map(PathBuf::as_path).collect();
        if let WeightSource::Grids(paths) = &self.weights {
            inputs.extend(paths.iter().map(PathBuf::as_path));
        }
        let mut items = Provenance::of_inputs(&inputs)?.items().to_vec();
        items.extend([
            item("FLEXURE_NODATA_SENTINELS", format!("{:?}", self.read.nodata)),
            item("FLEXURE_SECTORS", sectors.labels.join(", ")),
            item("FLEXURE_SECTOR_AZIMUTHS_GRID_DEG", join_numbers(grid_azimuths)),
            item(
                "FLEXURE_CONVERGENCE_APPLIED_DEG",
                convergence.map_or("none (azimuths given from grid north)".into(), |g| g.to_string()),
            ),
            item("FLEXURE_GRID_CONVERGENCE_AT_CENTRE_DEG", centre_convergence),
            item("FLEXURE_WEIGHTS", format!("{:?}", self.weights)),
            item("FLEXURE_MIN_SECTORS", self.min_sectors.to_string()),
            item("FLEXURE_VECTOR_SCALE_M_PER_MS", format!("{scale:.6}")),
            item("FLEXURE_UNITS", "times ms, azimuths degrees clockwise from grid north".into()),
            item("FLEXURE_METHOD", "weighted least squares t = A + a1 cos 2phi + a2 sin 2phi per bin; covariance standard errors; Rice bias after Wardle & Kronberg 1974".into()),
            item("FLEXURE_CAUTION", HTI_CAUTION.into()),
        ]);
        Ok(items)
    }

    fn report(
        &self,
        sectors: &Stack,
        grid_azimuths: &[f64],
        convergence: Option<f64>,
        fits: &[Option<SectorFit>],
        vectors: usize,
        scale: f64,
    ) -> AnisotropyReport {
        let fitted: Vec<SectorFit> = fits.iter().flatten().copied().collect();
        let magnitude = quantiles(fitted.iter().map(|f| f.magnitude));
        let mut notes = sectors.notes.clone();
        if sectors.grids.len() < USUAL_MIN_SECTORS {
            notes.push(format!(
                "only {} sectors: {USUAL_MIN_SECTORS} to 8 are usual; azimuths and errors are weakly constrained",
                sectors.grids.len()
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
        AnisotropyReport {
            sectors: sectors
                .labels
                .iter()
                .cloned()
                .zip(grid_azimuths.iter().copied())
                .collect(),
            grid: sectors.geometry.describe(),
            convergence,
            fitted_share: fitted.len() as f64 / fits.len().max(1) as f64,
            magnitude,
            magnitude_stderr: quantiles(fitted.iter().map(|f| f.magnitude_stderr)),
            azimuth_stderr: quantiles(fitted.iter().map(|f| f.azimuth_stderr)),
            raster: self.raster_path(),
            vector_files: vec![
                self.vector_path(VectorFormat::GeoPackage),
                self.vector_path(VectorFormat::GeoJson),
            ],
            vectors,
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

/// Co-registered grids read from one multi-band raster or from single-band rasters.
struct Stack {
    geometry: GridGeometry,
    grids: Vec<Array2<f64>>,
    /// One label per grid: the file name, with the band number for a multi-band file.
    labels: Vec<String>,
    /// The file of each grid.
    paths: Vec<PathBuf>,
    /// What the readers noticed (point-list lattices, outliers kept, seconds converted).
    notes: Vec<String>,
}

/// What the values of a stack are: sector times (ms; declared seconds are converted, declared
/// lengths refused) or weights (any unit).
#[derive(Clone, Copy, PartialEq)]
enum Units {
    Time,
    Weight,
}

impl Units {
    fn what(self) -> &'static str {
        match self {
            Units::Time => "sector",
            Units::Weight => "weight",
        }
    }
}

/// Reads one file of a stack, converting sector times declared in seconds to ms and refusing
/// sector grids declared in a length unit.
fn read_stack_file(path: &Path, read: &ReadOptions, units: Units) -> Result<Raster> {
    let mut raster = read_raster(path, read)?;
    if units == Units::Weight {
        return Ok(raster);
    }
    for (band, unit) in raster.bands.iter_mut().zip(&raster.info.units) {
        match DeclaredUnit::parse(unit) {
            Some(DeclaredUnit::Seconds) => {
                band.mapv_inplace(|t| t * 1000.0);
                raster.notes.push(format!(
                    "{}: a band declared in seconds converted to ms",
                    path.display()
                ));
            }
            Some(DeclaredUnit::Length(_)) => {
                return Err(FlexureError::input(
                    path,
                    format!("declares its values in '{unit}', a length: sector grids hold two-way times or time shifts in ms"),
                ))
            }
            _ => {}
        }
    }
    Ok(raster)
}

/// Reads `paths` as a stack of `what` grids: the bands of one file, or one band per file, all
/// on the same grid.
fn read_stack(paths: &[PathBuf], read: &ReadOptions, units: Units) -> Result<Stack> {
    let what = units.what();
    let name = |p: &Path| {
        p.file_name()
            .unwrap_or_default()
            .to_string_lossy()
            .to_string()
    };
    if let [path] = paths {
        let Raster {
            geometry,
            bands: grids,
            info,
            notes,
        } = read_stack_file(path, read, units)?;
        let labels = info
            .names
            .iter()
            .enumerate()
            .map(|(b, n)| match n.is_empty() {
                true => format!("{} band {}", name(path), b + 1),
                false => format!("{} band {} ({n})", name(path), b + 1),
            })
            .collect();
        let paths = vec![path.clone(); grids.len()];
        return Ok(Stack {
            geometry,
            grids,
            labels,
            paths,
            notes,
        });
    }
    let mut stack: Option<Stack> = None;
    for path in paths {
        if paths.iter().filter(|p| *p == path).count() > 1 {
            return Err(FlexureError::input(
                path,
                format!("is given twice as a {what} grid: give each sector once"),
            ));
        }
        let Raster {
            geometry,
            bands: mut grids,
            notes,
            ..
        } = read_stack_file(path, read, units)?;
        if grids.len() != 1 {
            return Err(FlexureError::input(
                path,
                format!(
                    "has {} bands: give one single-band {what} grid per sector, or one raster with a band per sector",
                    grids.len()
                ),
            ));
        }
        match &mut stack {
            None => {
                stack = Some(Stack {
                    geometry,
                    grids,
                    labels: vec![name(path)],
                    paths: vec![path.clone()],
                    notes,
                })
            }
            Some(s) => {
                if let Some(why) = s.geometry.mismatch(&geometry) {
                    return Err(FlexureError::input(
                        path,
                        format!(
                            "is not on the grid of {} ({why}): give every {what} grid on the same bins",
                            s.labels[0]
                        ),
                    ));
                }
                s.grids.append(&mut grids);
                s.labels.push(name(path));
                s.paths.push(path.clone());
                s.notes.extend(notes);
            }
        }
    }
    stack.ok_or_else(|| FlexureError::Parameter(format!("no {what} grid given")))
}

/// Refuses an azimuth given twice (equal modulo 360) and two sectors whose azimuths coincide
/// modulo 180 but hold identical times (the same data given twice).
fn refuse_duplicate_sectors(azimuths: &[f64], sectors: &Stack) -> Result<()> {
    for i in 0..azimuths.len() {
        for j in i + 1..azimuths.len() {
            let d180 = (azimuths[i] - azimuths[j]).rem_euclid(180.0);
            if d180 != 0.0 {
                continue;
            }
            let same_angle = (azimuths[i] - azimuths[j]).rem_euclid(360.0) == 0.0;
            let same_data = sectors.grids[i]
                .iter()
                .zip(sectors.grids[j].iter())
                .all(|(a, b)| a.to_bits() == b.to_bits());
            if same_angle || same_data {
                let why = if same_angle {
                    "the same azimuth is given twice"
                } else {
                    "they hold identical times (the same data given twice)"
                };
                return Err(FlexureError::input(
                    &sectors.paths[j],
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
fn quantiles(values: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let mut v: Vec<f64> = values.filter(|x| x.is_finite()).collect();
    stats::quantiles(&mut v, [0.5, 0.95], Quantile::Nearest).map(|[p50, p95]| (p50, p95))
}

/// What an anisotropy job wrote.
#[derive(Clone, Debug)]
pub struct AnisotropyReport {
    /// (label, azimuth from grid north) per sector.
    pub sectors: Vec<(String, f64)>,
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
        for (label, az) in &self.sectors {
            writeln!(f, "  {label}: {az:.3} deg from grid north")?;
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
