//! The inputs of an anisotropy job, opened for reading by runs of rows ([`SectorInputs`]):
//! the sector times (one stack, or the interval between a top and a base horizon's sector
//! times, base minus top), the sector azimuths (given, or declared by the bands'
//! `AZIMUTH_DEG`), the weights (numbers, weight grids, or the correlation quality beside
//! sector-time rasters) and the isotropic two-way time of `anisotropy_percent`. Every grid is
//! a stack of co-registered grids (the bands of one raster, or one band from each of several
//! rasters) on [`RowSource`]s, with the unit handling of sector times (seconds to ms, lengths
//! refused) applied to every run of rows read. The metadata read here is described in
//! [`crate::anisotropy::sector_rasters`].

use super::anisotropy::{AnisotropyJob, AzimuthReference, WeightSource};
use crate::anisotropy::sector_rasters::{
    declares_shifts, interval_weight, quality_weight, AZIMUTH_ITEM, QUALITY_CAP, QUALITY_FILE,
    QUALITY_ITEM, REFERENCE_FILE_ITEM, REFERENCE_KIND_ITEM, SHIFTS_ITEM,
};
use crate::anisotropy::{SectorFit, SectorWeight, MIN_SECTORS_FLOOR};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::{ReadOptions, RowSource};
use crate::surface::horizon::DeclaredUnit;
use ndarray::{Array2, Zip};
use std::ops::Range;
use std::path::{Path, PathBuf};

/// Largest difference in degrees (modulo 360) at which two azimuths name the same sector.
const SAME_AZIMUTH_DEG: f64 = 1e-6;

/// Largest correlation coefficient accepted in a quality raster (1 and float rounding).
const QUALITY_MAX: f64 = 1.0 + 1e-6;

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

/// One grid of a stack: band `band` (0-based) of `sources[source]`, times `factor` (1000 for
/// times declared in seconds, else 1).
struct StackBand {
    source: usize,
    band: usize,
    factor: f64,
}

/// Co-registered grids read from one multi-band raster or from single-band rasters, opened
/// for reading by runs of rows.
struct Stack {
    /// The grid they share.
    geometry: GridGeometry,
    sources: Vec<RowSource>,
    bands: Vec<StackBand>,
    /// One label per grid: the file name, with the band number for a multi-band file.
    labels: Vec<String>,
    /// The file of each grid.
    paths: Vec<PathBuf>,
    /// What the readers noticed (point-list lattices, outliers kept, seconds converted).
    notes: Vec<String>,
}

fn file_name(p: &Path) -> String {
    p.file_name()
        .unwrap_or_default()
        .to_string_lossy()
        .to_string()
}

impl Stack {
    /// Opens `paths` as a stack of `units` grids: the bands of one file, or one band per file,
    /// all on the same grid.
    fn open(paths: &[PathBuf], read: &ReadOptions, units: Units) -> Result<Stack> {
        let what = units.what();
        if let [path] = paths {
            let source = RowSource::open(path, read)?;
            let labels = source
                .info()
                .names
                .iter()
                .enumerate()
                .map(|(b, n)| match n.is_empty() {
                    true => format!("{} band {}", file_name(path), b + 1),
                    false => format!("{} band {} ({n})", file_name(path), b + 1),
                })
                .collect();
            let mut stack = Stack {
                geometry: source.geometry().clone(),
                bands: Vec::new(),
                labels,
                paths: vec![path.clone(); source.band_count()],
                notes: source.notes().to_vec(),
                sources: Vec::new(),
            };
            stack.add_bands(source, units)?;
            return Ok(stack);
        }
        let mut stack: Option<Stack> = None;
        for path in paths {
            if paths.iter().filter(|p| *p == path).count() > 1 {
                return Err(FlexureError::input(
                    path,
                    format!("is given twice as a {what} grid: give each sector once"),
                ));
            }
            let source = RowSource::open(path, read)?;
            if source.band_count() != 1 {
                return Err(FlexureError::input(
                    path,
                    format!(
                        "has {} bands: give one single-band {what} grid per sector, or one raster with a band per sector",
                        source.band_count()
                    ),
                ));
            }
            let s = stack.get_or_insert_with(|| Stack {
                geometry: source.geometry().clone(),
                sources: Vec::new(),
                bands: Vec::new(),
                labels: Vec::new(),
                paths: Vec::new(),
                notes: Vec::new(),
            });
            if let Some(why) = s.geometry.mismatch(source.geometry()) {
                return Err(FlexureError::input(
                    path,
                    format!(
                        "is not on the grid of {} ({why}): give every {what} grid on the same bins",
                        s.labels[0]
                    ),
                ));
            }
            s.labels.push(file_name(path));
            s.paths.push(path.clone());
            s.notes.extend(source.notes().iter().cloned());
            s.add_bands(source, units)?;
        }
        stack.ok_or_else(|| FlexureError::Parameter(format!("no {what} grid given")))
    }

    /// Adds every band of `source`, converting sector times declared in seconds to ms and
    /// refusing sector grids declared in a length unit.
    fn add_bands(&mut self, source: RowSource, units: Units) -> Result<()> {
        if units == Units::Time && declares_shifts(source.info().item(QUALITY_ITEM)) {
            return Err(FlexureError::input(
                source.path(),
                format!("holds correlation qualities ({QUALITY_ITEM}=yes), not sector times: give the sector_times.tif beside it, and use the qualities with --weights quality"),
            ));
        }
        for (band, unit) in source.info().units.iter().enumerate() {
            let factor = match (units, DeclaredUnit::parse(unit)) {
                (Units::Weight, _) => 1.0,
                (Units::Time, Some(DeclaredUnit::Seconds)) => {
                    self.notes.push(format!(
                        "{}: a band declared in seconds converted to ms",
                        source.path().display()
                    ));
                    1000.0
                }
                (Units::Time, Some(DeclaredUnit::Length(_))) => {
                    return Err(FlexureError::input(
                        source.path(),
                        format!("declares its values in '{unit}', a length: sector grids hold two-way times or time shifts in ms"),
                    ))
                }
                (Units::Time, _) => 1.0,
            };
            self.bands.push(StackBand {
                source: self.sources.len(),
                band,
                factor,
            });
        }
        self.sources.push(source);
        Ok(())
    }

    /// Number of grids.
    fn len(&self) -> usize {
        self.bands.len()
    }

    /// Rows `rows` of grid `k`, every column, NaN nulls, times in ms.
    fn read_rows(&self, k: usize, rows: Range<usize>) -> Result<Array2<f64>> {
        let b = &self.bands[k];
        let mut values = self.sources[b.source].read_rows(b.band, rows)?;
        if b.factor != 1.0 {
            values.mapv_inplace(|t| t * b.factor);
        }
        Ok(values)
    }

    /// The file of the stack (the first, for one file per grid).
    fn path(&self) -> &Path {
        self.sources[0].path()
    }

    /// The folder of the stack's (first) file.
    fn folder(&self) -> PathBuf {
        self.path()
            .parent()
            .map(Path::to_path_buf)
            .unwrap_or_default()
    }

    /// Every file of the stack.
    fn files(&self) -> impl Iterator<Item = PathBuf> + '_ {
        self.sources.iter().map(|s| s.path().to_path_buf())
    }

    /// The azimuth each grid's band declares ([`AZIMUTH_ITEM`], degrees), `None` where it
    /// declares none; a value that is not a finite number is refused.
    fn declared_azimuths(&self) -> Result<Vec<Option<f64>>> {
        self.bands
            .iter()
            .map(|b| {
                let source = &self.sources[b.source];
                let Some(text) = source.band_item(b.band, AZIMUTH_ITEM) else {
                    return Ok(None);
                };
                let azimuth = text.trim().parse::<f64>().ok().filter(|a| a.is_finite());
                azimuth.map(Some).ok_or_else(|| {
                    FlexureError::input(
                        source.path(),
                        format!(
                            "band {}: {AZIMUTH_ITEM}={text} is not a number of degrees: correct the band metadata, or give --azimuths",
                            b.band + 1
                        ),
                    )
                })
            })
            .collect()
    }

    /// Dataset metadata item `key` of the stack's files, which must all agree.
    fn item(&self, key: &str) -> Result<Option<String>> {
        let first = self.sources[0].info().item(key);
        for other in &self.sources[1..] {
            let value = other.info().item(key);
            if value != first {
                let shown =
                    |v: Option<&str>| v.map_or("nothing".to_string(), |v| format!("{key}={v}"));
                return Err(FlexureError::input(
                    other.path(),
                    format!(
                        "declares {} but {} declares {}: give sector grids of one kind",
                        shown(value),
                        self.path().display(),
                        shown(first)
                    ),
                ));
            }
        }
        Ok(first.map(str::to_string))
    }

    /// Refuses `other` (a stack read with this one) on another grid, naming both files and
    /// what `other` is.
    fn refuse_other_grid(&self, other: &Stack, what: &str) -> Result<()> {
        match self.geometry.mismatch(&other.geometry) {
            Some(why) => Err(FlexureError::input(
                other.path(),
                format!(
                    "{what} is not on the grid of {} ({why}): give grids on the same bins",
                    self.path().display()
                ),
            )),
            None => Ok(()),
        }
    }
}

/// `|a - b|` as angles modulo 360, degrees (0 to 180).
fn azimuth_gap(a: f64, b: f64) -> f64 {
    let d = (a - b).rem_euclid(360.0);
    d.min(360.0 - d)
}

/// For each azimuth of `wanted`, the index of the same azimuth in `found`; `None` when the
/// two lists do not hold the same azimuths one for one.
fn match_azimuths(wanted: &[f64], found: &[f64]) -> Option<Vec<usize>> {
    if wanted.len() != found.len() {
        return None;
    }
    let mut used = vec![false; found.len()];
    wanted
        .iter()
        .map(|&a| {
            let j = (0..found.len())
                .find(|&j| !used[j] && azimuth_gap(a, found[j]) < SAME_AZIMUTH_DEG)?;
            used[j] = true;
            Some(j)
        })
        .collect()
}

fn list(azimuths: &[f64]) -> String {
    azimuths
        .iter()
        .map(|a| format!("{a}"))
        .collect::<Vec<_>>()
        .join(",")
}

/// Where the sector times come from: one stack (`main`), or the interval between two
/// horizons, base (`main`) minus top, with the top grid of each base sector (the one with its
/// azimuth).
struct Times {
    main: Stack,
    top: Option<(Stack, Vec<usize>)>,
}

impl Times {
    /// The stacks whose sectors are fitted: the one stack, or the top and the base.
    fn stacks(&self) -> Vec<&Stack> {
        match &self.top {
            None => vec![&self.main],
            Some((top, _)) => vec![top, &self.main],
        }
    }
}

/// The sector weights, read batch by batch.
enum Weights {
    /// One weight per sector for every bin.
    Constant(Vec<f64>),
    /// One weight grid per sector.
    Grids(Stack),
    /// The correlation quality beside the sector-time raster (`main`), and beside the top's
    /// for an interval.
    Quality {
        main: Box<Quality>,
        top: Option<Box<Quality>>,
    },
}

/// A correlation-quality raster with the band of each sector.
struct Quality {
    stack: Stack,
    bands: Vec<usize>,
}

impl Quality {
    /// Opens [`QUALITY_FILE`] beside `sectors` and finds the band of each of the sectors at
    /// `grid_azimuths` by its [`AZIMUTH_ITEM`].
    fn open(sectors: &Stack, read: &ReadOptions, grid_azimuths: &[f64]) -> Result<Quality> {
        let path = sectors.folder().join(QUALITY_FILE);
        if !path.is_file() {
            return Err(FlexureError::input(
                &path,
                format!(
                    "--weights quality reads {QUALITY_FILE} beside the sector times {}, and there is none: put the quality raster there, or weight the sectors otherwise",
                    sectors.path().display()
                ),
            ));
        }
        let stack = Stack::open(std::slice::from_ref(&path), read, Units::Weight)?;
        sectors.refuse_other_grid(&stack, "the quality raster")?;
        let found = stack
            .declared_azimuths()?
            .iter()
            .enumerate()
            .map(|(b, a)| {
                a.ok_or_else(|| {
                    FlexureError::input(
                        &path,
                        format!("band {} declares no {AZIMUTH_ITEM}: quality bands are matched to the sectors by it", b + 1),
                    )
                })
            })
            .collect::<Result<Vec<f64>>>()?;
        let bands = grid_azimuths
            .iter()
            .map(|&a| {
                (0..found.len())
                    .find(|&b| azimuth_gap(a, found[b]) < SAME_AZIMUTH_DEG)
                    .ok_or_else(|| {
                        FlexureError::input(
                            &path,
                            format!(
                                "has no band for the sector at {a} deg from grid north of {} (its {AZIMUTH_ITEM}: {}): give the quality raster of these sector times",
                                sectors.path().display(),
                                list(&found)
                            ),
                        )
                    })
            })
            .collect::<Result<Vec<usize>>>()?;
        Ok(Quality { stack, bands })
    }

    /// Rows `rows` of sector `k`'s quality as weights ([`quality_weight`]); a coefficient above
    /// 1 is refused.
    fn read_weights(&self, k: usize, rows: Range<usize>) -> Result<Array2<f64>> {
        let (band, first_row) = (self.bands[k], rows.start);
        let c = self.stack.read_rows(band, rows)?;
        if let Some(((r, col), v)) = c.indexed_iter().find(|(_, v)| **v > QUALITY_MAX) {
            return Err(FlexureError::input(
                self.stack.path(),
                format!(
                    "band {} holds {v} at row {}, column {}: quality bands hold correlation coefficients from 0 to 1",
                    band + 1,
                    first_row + r + 1,
                    col + 1
                ),
            ));
        }
        Ok(c.mapv(quality_weight))
    }
}

/// Where the isotropic two-way time T of `anisotropy_percent` comes from.
enum Reference {
    /// The fitted isotropic term A (absolute sector times).
    Fitted,
    /// A reference-time raster (ms); for an interval, the base's reference time minus the
    /// top's.
    Files {
        base: Box<Stack>,
        top: Option<Box<Stack>>,
    },
    /// None: why.
    Unknown(String),
}

/// The inputs of an anisotropy job (see the module notes), checked against each other and
/// ready to be read batch by batch.
pub(super) struct SectorInputs {
    /// The grid every input is on.
    pub(super) geometry: GridGeometry,
    times: Times,
    /// One label per sector (for an interval, "base minus top").
    pub(super) labels: Vec<String>,
    /// Sector azimuths as given (`--azimuths`) or declared (`AZIMUTH_DEG`), degrees.
    pub(super) azimuths: Vec<f64>,
    /// Sector azimuths from grid north, degrees, 0..360.
    pub(super) grid_azimuths: Vec<f64>,
    /// Convergence subtracted from the given azimuths (`None` for grid-north azimuths).
    pub(super) convergence: Option<f64>,
    /// Whether the azimuths were read from the bands' `AZIMUTH_DEG`.
    pub(super) declared: bool,
    weights: Weights,
    reference: Reference,
    /// What the readers noticed.
    pub(super) notes: Vec<String>,
}

impl SectorInputs {
    /// Opens and checks the inputs of `job`.
    pub(super) fn open(job: &AnisotropyJob) -> Result<Self> {
        let main = Stack::open(&job.inputs, &job.read, Units::Time)?;
        let n = main.len();
        if n < MIN_SECTORS_FLOOR {
            return Err(FlexureError::Parameter(format!(
                "{n} sector grid(s) given: the cos 2phi fit needs at least {MIN_SECTORS_FLOOR} sectors"
            )));
        }
        let convergence = convergence_to_apply(job, &main)?;
        let (azimuths, grid_azimuths, declared) = sector_azimuths(&main, job, convergence)?;
        let times = match &job.top {
            None => Times { main, top: None },
            Some(top) => {
                let top = Stack::open(std::slice::from_ref(top), &job.read, Units::Time)?;
                main.refuse_other_grid(&top, "the --top raster")?;
                let (_, top_grid, _) = sector_azimuths(&top, job, convergence)?;
                let top_of = match_azimuths(&grid_azimuths, &top_grid).ok_or_else(|| {
                    FlexureError::input(
                        top.path(),
                        format!(
                            "the --top raster's sectors ({} deg from grid north) are not those of the --base raster {} ({} deg): give the sector times of the same sectors",
                            list(&top_grid),
                            main.path().display(),
                            list(&grid_azimuths)
                        ),
                    )
                })?;
                Times {
                    main,
                    top: Some((top, top_of)),
                }
            }
        };
        let labels = match &times.top {
            None => times.main.labels.clone(),
            Some((top, top_of)) => (0..n)
                .map(|k| format!("{} minus {}", times.main.labels[k], top.labels[top_of[k]]))
                .collect(),
        };
        let notes = times
            .stacks()
            .iter()
            .flat_map(|s| s.notes.clone())
            .collect();
        let weights = open_weights(job, &times, &grid_azimuths)?;
        let reference = open_reference(job, &times)?;
        Ok(Self {
            geometry: times.main.geometry.clone(),
            times,
            labels,
            azimuths,
            grid_azimuths,
            convergence,
            declared,
            weights,
            reference,
            notes,
        })
    }

    /// Number of sectors.
    pub(super) fn len(&self) -> usize {
        self.labels.len()
    }

    /// The file holding sector `k` (the base's, for an interval).
    pub(super) fn path_of(&self, k: usize) -> &Path {
        &self.times.main.paths[k]
    }

    /// Every file read, each once: sector times, weights, quality and reference times.
    pub(super) fn files(&self) -> Vec<PathBuf> {
        let mut stacks = self.times.stacks();
        match &self.weights {
            Weights::Constant(_) => {}
            Weights::Grids(s) => stacks.push(s),
            Weights::Quality { main, top } => {
                stacks.push(&main.stack);
                stacks.extend(top.as_ref().map(|t| &t.stack));
            }
        }
        if let Reference::Files { base, top } = &self.reference {
            stacks.push(base);
            stacks.extend(top.as_deref());
        }
        let mut files: Vec<PathBuf> = Vec::new();
        for file in stacks.iter().flat_map(|s| s.files()) {
            if !files.contains(&file) {
                files.push(file);
            }
        }
        files
    }

    /// Grids read per bin of a batch: sector times, weight grids and reference times, and the
    /// isotropic time of each bin.
    pub(super) fn values_per_bin(&self) -> usize {
        let times = self.times.stacks().iter().map(|s| s.len()).sum::<usize>();
        let weights = match &self.weights {
            Weights::Constant(_) => 0,
            Weights::Grids(s) => s.len(),
            Weights::Quality { top, .. } => self.len() * (1 + usize::from(top.is_some())),
        };
        let reference = match &self.reference {
            Reference::Files { top, .. } => 1 + usize::from(top.is_some()),
            Reference::Fitted | Reference::Unknown(_) => 0,
        };
        times + weights + reference + 1
    }

    /// Rows `rows` of sector `k`'s times (ms; for an interval, base minus top).
    pub(super) fn read_times(&self, k: usize, rows: Range<usize>) -> Result<Array2<f64>> {
        let main = self.times.main.read_rows(k, rows.clone())?;
        match &self.times.top {
            None => Ok(main),
            Some((top, top_of)) => Ok(main - top.read_rows(top_of[k], rows)?),
        }
    }

    /// The weights of every sector over rows `rows`.
    pub(super) fn read_weights(&self, rows: Range<usize>) -> Result<Vec<SectorWeight>> {
        let n = self.len();
        match &self.weights {
            Weights::Constant(w) => Ok(w.iter().map(|&v| SectorWeight::Constant(v)).collect()),
            Weights::Grids(stack) => (0..n)
                .map(|k| stack.read_rows(k, rows.clone()).map(SectorWeight::Grid))
                .collect(),
            Weights::Quality { main, top } => (0..n)
                .map(|k| {
                    let base = main.read_weights(k, rows.clone())?;
                    Ok(SectorWeight::Grid(match top {
                        None => base,
                        Some(top) => Zip::from(&top.read_weights(k, rows.clone())?)
                            .and(&base)
                            .map_collect(|&t, &b| interval_weight(t, b)),
                    }))
                })
                .collect(),
        }
    }

    /// The isotropic two-way time T (ms) of each bin of rows `rows` with fits `fits`
    /// (row-major): the reference time, or the fitted A for absolute times; NaN when unknown.
    pub(super) fn isotropic_times(
        &self,
        rows: Range<usize>,
        fits: &[Option<SectorFit>],
    ) -> Result<Vec<f64>> {
        let read = |s: &Stack| s.read_rows(0, rows.clone());
        let times = match &self.reference {
            Reference::Fitted => {
                return Ok(fits
                    .iter()
                    .map(|f| f.map_or(f64::NAN, |f| f.isotropic))
                    .collect())
            }
            Reference::Unknown(_) => return Ok(vec![f64::NAN; fits.len()]),
            Reference::Files { base, top: None } => read(base)?,
            Reference::Files {
                base,
                top: Some(top),
            } => read(base)? - read(top)?,
        };
        Ok(times.into_iter().collect())
    }

    /// What T is, in words (for the report and metadata); for an unknown T, why.
    pub(super) fn reference_time(&self) -> String {
        let name = |s: &Stack| s.path().display().to_string();
        match &self.reference {
            Reference::Fitted => "the fitted isotropic term A (absolute sector times)".into(),
            Reference::Files { base, top: None } => {
                format!("the reference time in {}", name(base))
            }
            Reference::Files {
                base,
                top: Some(top),
            } => format!(
                "the interval time: the reference time in {} minus that in {}",
                name(base),
                name(top)
            ),
            Reference::Unknown(why) => format!("unknown: {why}"),
        }
    }

    /// Why `anisotropy_percent` is all nodata, if it is.
    pub(super) fn no_reference_time(&self) -> Option<&str> {
        match &self.reference {
            Reference::Unknown(why) => Some(why),
            _ => None,
        }
    }

    /// The interval's two rasters (top, base), if the sector times are an interval.
    pub(super) fn interval(&self) -> Option<(&Path, &Path)> {
        let (top, _) = self.times.top.as_ref()?;
        Some((top.path(), self.times.main.path()))
    }

    /// How the sectors are weighted, in words.
    pub(super) fn weights(&self) -> String {
        match &self.weights {
            Weights::Constant(w) if w.iter().all(|&v| v == w[0]) => "equal".into(),
            Weights::Constant(w) => format!("per sector {w:?}"),
            Weights::Grids(s) => format!("grids {:?}", s.files().collect::<Vec<_>>()),
            Weights::Quality { main, top } => {
                let rule =
                    format!("w = c^2 / (1 - c^2), c capped at {QUALITY_CAP} (Knapp & Carter 1976)");
                match top {
                    None => format!("correlation quality c of {}: {rule}", main.stack.path().display()),
                    Some(top) => format!(
                        "correlation quality c of {} and {}: {rule}; interval w = 1 / (1/w_top + 1/w_base)",
                        top.stack.path().display(),
                        main.stack.path().display()
                    ),
                }
            }
        }
    }
}

/// The convergence subtracted from the given azimuths (`None` for grid-north azimuths).
fn convergence_to_apply(job: &AnisotropyJob, sectors: &Stack) -> Result<Option<f64>> {
    match job.reference {
        AzimuthReference::Grid => Ok(None),
        AzimuthReference::True { .. } if job.azimuths.is_empty() => Err(FlexureError::Parameter(
            format!("--azimuth-reference true applies to --azimuths, and none are given: the bands' {AZIMUTH_ITEM} are from grid north; drop --azimuth-reference, or give --azimuths"),
        )),
        AzimuthReference::True {
            convergence: Some(g),
        } => Ok(Some(g)),
        AzimuthReference::True { convergence: None } => {
            sectors.geometry.convergence().map(Some).map_err(|e| {
                FlexureError::input(
                    sectors.path(),
                    format!("cannot compute the grid convergence from its CRS ({e}): give --convergence DEG"),
                )
            })
        }
    }
}

/// The sector azimuths of `stack`: (as given or declared, from grid north, whether declared).
/// Given azimuths (`--azimuths`, one per grid) are converted to grid north and must agree with
/// any the bands declare ([`AZIMUTH_ITEM`], grid north); without them every band must declare
/// one.
fn sector_azimuths(
    stack: &Stack,
    job: &AnisotropyJob,
    convergence: Option<f64>,
) -> Result<(Vec<f64>, Vec<f64>, bool)> {
    let n = stack.len();
    let declared = stack.declared_azimuths()?;
    if job.azimuths.is_empty() {
        let azimuths = declared
            .iter()
            .enumerate()
            .map(|(k, a)| {
                a.ok_or_else(|| {
                    FlexureError::input(
                        &stack.paths[k],
                        format!(
                            "{} declares no sector azimuth ({AZIMUTH_ITEM} band metadata): give --azimuths, one per sector in band order",
                            stack.labels[k]
                        ),
                    )
                })
            })
            .collect::<Result<Vec<f64>>>()?;
        let grid = azimuths.iter().map(|a| a.rem_euclid(360.0)).collect();
        return Ok((azimuths, grid, true));
    }
    if job.azimuths.len() != n {
        return Err(FlexureError::Parameter(format!(
            "{} azimuths given for {n} sector grids: give one --azimuths value per sector",
            job.azimuths.len()
        )));
    }
    let grid: Vec<f64> = job
        .azimuths
        .iter()
        .map(|a| (a - convergence.unwrap_or(0.0)).rem_euclid(360.0))
        .collect();
    for (k, d) in declared.iter().enumerate() {
        if let Some(d) = *d {
            if azimuth_gap(d, grid[k]) >= SAME_AZIMUTH_DEG {
                return Err(FlexureError::input(
                    &stack.paths[k],
                    format!(
                        "{} declares {AZIMUTH_ITEM}={d} (grid north) but --azimuths gives {} ({} from grid north): drop --azimuths to use the declared azimuths, or correct them",
                        stack.labels[k], job.azimuths[k], grid[k]
                    ),
                ));
            }
        }
    }
    Ok((job.azimuths.clone(), grid, false))
}

/// Opens the weights of `job` for the sectors of `times` (azimuths `grid_azimuths`).
fn open_weights(job: &AnisotropyJob, times: &Times, grid_azimuths: &[f64]) -> Result<Weights> {
    let n = grid_azimuths.len();
    let main = &times.main;
    let read = ReadOptions {
        find_sentinels: false,
        ..job.read.clone()
    };
    match &job.weights {
        WeightSource::Equal => Ok(Weights::Constant(vec![1.0; n])),
        WeightSource::PerSector(w) if w.len() == n => Ok(Weights::Constant(w.clone())),
        WeightSource::PerSector(w) => Err(FlexureError::Parameter(format!(
            "{} weights given for {n} sectors: give one weight per sector",
            w.len()
        ))),
        WeightSource::Grids(paths) => {
            let stack = Stack::open(paths, &read, Units::Weight)?;
            if stack.len() != n {
                return Err(FlexureError::Parameter(format!(
                    "{} weight grids given for {n} sectors: give one weight grid per sector",
                    stack.len()
                )));
            }
            if let Some(why) = stack.geometry.mismatch(&main.geometry) {
                return Err(FlexureError::input(
                    &paths[0],
                    format!("weight grids are not on the sector grids' grid ({why}): give weights on the sector bins"),
                ));
            }
            Ok(Weights::Grids(stack))
        }
        WeightSource::Quality => Ok(Weights::Quality {
            main: Box::new(Quality::open(main, &read, grid_azimuths)?),
            top: match &times.top {
                Some((top, _)) => Some(Box::new(Quality::open(top, &read, grid_azimuths)?)),
                None => None,
            },
        }),
    }
}

/// Where the isotropic two-way time of `anisotropy_percent` comes from (see [`Reference`]):
/// a reference-time raster (named by the sector raster's [`REFERENCE_FILE_ITEM`] or
/// `--reference-time`) when there is one; else the fitted A for absolute times; else (time
/// shifts without a reference time) unknown. An interval's is the base's minus the top's.
fn open_reference(job: &AnisotropyJob, times: &Times) -> Result<Reference> {
    let Some((top, _)) = &times.top else {
        return stack_reference(job, &times.main);
    };
    let base = &times.main;
    if let Some(given) = &job.reference_time {
        return Err(FlexureError::input(
            given,
            format!("is given as --reference-time, but with --top/--base each raster's reference time comes from its {REFERENCE_FILE_ITEM}: drop --reference-time"),
        ));
    }
    let (top_shifts, base_shifts) = (holds_shifts(top)?, holds_shifts(base)?);
    if top_shifts != base_shifts {
        let what = |shifts: bool| match shifts {
            true => format!("time shifts ({SHIFTS_ITEM}=yes)"),
            false => "absolute times".to_string(),
        };
        return Err(FlexureError::input(
            top.path(),
            format!(
                "the --top raster holds {} but the --base raster {} holds {}: give two rasters of the same kind",
                what(top_shifts),
                base.path().display(),
                what(base_shifts)
            ),
        ));
    }
    if !base_shifts {
        return Ok(Reference::Fitted);
    }
    let (Some(t), Some(b)) = (declared_reference(top)?, declared_reference(base)?) else {
        return Ok(Reference::Unknown(format!(
            "the --top and --base rasters hold time shifts ({SHIFTS_ITEM}=yes) and not both name a {REFERENCE_FILE_ITEM}"
        )));
    };
    let (top_time, base_time) = (
        read_reference(job, &t, top)?,
        read_reference(job, &b, base)?,
    );
    for (time, of) in [(&top_time, top), (&base_time, base)] {
        let kind = time.item(REFERENCE_KIND_ITEM)?;
        if kind.is_some_and(|k| k.trim().eq_ignore_ascii_case("interval")) {
            return Err(FlexureError::input(
                of.path(),
                format!(
                    "its reference time {} is already an interval time ({REFERENCE_KIND_ITEM}=interval): --top/--base take the sector times of two horizons; give this raster alone",
                    time.path().display()
                ),
            ));
        }
    }
    Ok(Reference::Files {
        base: Box::new(base_time),
        top: Some(Box::new(top_time)),
    })
}

/// The reference of one stack of sector times (see [`open_reference`]).
fn stack_reference(job: &AnisotropyJob, s: &Stack) -> Result<Reference> {
    let file = match (declared_reference(s)?, &job.reference_time) {
        (Some(d), Some(given)) if !same_file(&d, given) => {
            return Err(FlexureError::input(
                given,
                format!(
                    "is given as --reference-time but {} names {} ({REFERENCE_FILE_ITEM}): drop --reference-time, or give that file",
                    s.path().display(),
                    d.display()
                ),
            ))
        }
        (d, given) => d.or_else(|| given.clone()),
    };
    match file {
        Some(f) => Ok(Reference::Files {
            base: Box::new(read_reference(job, &f, s)?),
            top: None,
        }),
        None if !holds_shifts(s)? => Ok(Reference::Fitted),
        None => Ok(Reference::Unknown(format!(
            "{} holds time shifts ({SHIFTS_ITEM}=yes) and names no {REFERENCE_FILE_ITEM}: give --reference-time FILE for anisotropy_percent",
            s.path().display()
        ))),
    }
}

/// Whether a stack declares time shifts ([`SHIFTS_ITEM`]).
fn holds_shifts(s: &Stack) -> Result<bool> {
    Ok(declares_shifts(s.item(SHIFTS_ITEM)?.as_deref()))
}

/// The reference-time raster a stack names ([`REFERENCE_FILE_ITEM`], relative to its folder).
fn declared_reference(s: &Stack) -> Result<Option<PathBuf>> {
    Ok(s.item(REFERENCE_FILE_ITEM)?
        .map(|f| s.folder().join(f.trim())))
}

/// Opens the reference-time raster `path` of the sector times `of`: one band, on their grid.
fn read_reference(job: &AnisotropyJob, path: &Path, of: &Stack) -> Result<Stack> {
    if !path.is_file() {
        return Err(FlexureError::input(
            path,
            format!(
                "is named as the reference time of {} but does not exist: put it there, or give --reference-time FILE",
                of.path().display()
            ),
        ));
    }
    let stack = Stack::open(&[path.to_path_buf()], &job.read, Units::Time)?;
    if stack.len() != 1 {
        return Err(FlexureError::input(
            path,
            format!(
                "has {} bands: a reference time is one band of two-way times in ms",
                stack.len()
            ),
        ));
    }
    of.refuse_other_grid(&stack, "the reference time")?;
    Ok(stack)
}

/// Whether two paths name the same existing file.
fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        _ => a == b,
    }
}
