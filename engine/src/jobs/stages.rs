//! The well jobs: `StagesJob` (per-stage corridor statistics, stage table, corridor polygons,
//! computed well paths, rose diagrams and a sheet per well, and the stand-off from a horizon)
//! here, and `PlanJob` (a drilling-azimuth scan from a pad) in [`super::plan`]. Both evaluate
//! corridors the same way ([`Corridor`], shared from here); every input is read and checked before any folder is created, and all
//! outputs are staged and committed together (file-name collisions between wells and stages
//! are refused early by name, and any left by the one check of the commit).

use super::anisotropy::AzimuthReference;
use super::{stage_bytes, stage_figure, AnisotropyRaster, WellInput};
use crate::bands::band_info;
use crate::draw::figure::{rose, Anchor, Figure, Mark};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::table::Table;
use crate::io::vector::{
    stage_both_formats, FieldKind, GeometryKind, Layer, Property, VectorFeature,
};
use crate::io::{commit_all, prepare_output_dir, read_raster, ReadOptions, StagedFile};
use crate::surface::horizon::{Horizon, HorizonSource};
use crate::wells::corridor::{
    bilinear, cells_inside, circular_percentiles, corridor_stats, percentiles, BinSample,
    CorridorStats,
};
use crate::wells::trajectory::{
    check_stages, corridor, file_name_part, path_azimuth, read_stages, read_well, MdUnit, Stage,
    Station, Well, WellSetting, LATERAL,
};
use ndarray::Array2;
use std::fmt;
use std::path::{Path, PathBuf};

/// Cautions printed with every well result (REFERENCES.md section 8).
pub const WELL_CAUTION: &str = "Reading: laterals are commonly drilled near-perpendicular to \
the fast azimuth when it is read as the maximum horizontal stress, so that transverse hydraulic \
fractures form. Anisotropy is a proxy for stress and fractures, not a measurement of them; \
check against image logs, dipole sonic and microseismic. Drilling and completion decisions \
belong to licensed engineers and geoscientists under local regulations.";

/// Default corridor half width each side of the well, metres (common practice).
pub const DEFAULT_HALF_WIDTH: f64 = 150.0;

/// Longest step, metres, between the points that trace a well's arc for corridors, stand-off
/// and the written paths (also at most one bin of the anisotropy grid for corridors).
pub const SAMPLE_STEP_M: f64 = 10.0;

/// Default fewest fitted bins for corridor statistics without a flag (our choice: below about
/// ten bins an axial mean and a Rayleigh test say little; `--min-bins` changes it, e.g. for
/// coarse superbins).
pub const MIN_BINS: usize = 10;

/// How corridors are drawn and judged: half width in CRS units and the fewest fitted bins
/// without a flag.
#[derive(Clone, Copy, Debug)]
pub(super) struct CorridorRule {
    half_width: f64,
    min_bins: usize,
}

impl CorridorRule {
    /// The rule for a half width in metres (checked), in metres.
    pub(super) fn new(half_width_m: f64, min_bins: usize) -> Result<Self> {
        if !(half_width_m.is_finite() && half_width_m > 0.0) {
            return Err(FlexureError::Parameter(format!(
                "--half-width {half_width_m} must be a positive distance in metres"
            )));
        }
        Ok(Self {
            half_width: half_width_m,
            min_bins,
        })
    }

    /// The same rule in the units of a grid of `metres_per_unit`.
    pub(super) fn on_grid(self, metres_per_unit: f64) -> Self {
        Self {
            half_width: self.half_width / metres_per_unit,
            ..self
        }
    }
}

/// Least share of a corridor's cells (inside the grid) that must hold a fit for its
/// statistics to go unflagged.
pub const MIN_FITTED_SHARE: f64 = 0.5;

/// Petals of the rose diagrams over 0..180 degrees (10 degrees each).
const ROSE_PETALS: usize = 18;

/// A curvature raster to summarise in corridors.
pub(super) struct Attributes {
    geometry: GridGeometry,
    names: Vec<String>,
    bands: Vec<Array2<f64>>,
}

impl Attributes {
    /// Reads `given`: a raster, or a folder of curvature outputs with `window` choosing
    /// `*_wNN.tif`.
    pub(super) fn read(given: &Path, window: Option<usize>) -> Result<Self> {
        let path = if given.is_dir() {
            let window = window.ok_or_else(|| {
                FlexureError::Parameter(format!(
                    "{} is a folder: give --window N to choose its curvature file",
                    given.display()
                ))
            })?;
            let suffix = format!("_w{window:02}.tif");
            let mut found: Vec<PathBuf> = std::fs::read_dir(given)
                .map_err(|e| FlexureError::read(given, e))?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| {
                    p.file_name()
                        .is_some_and(|n| n.to_string_lossy().ends_with(&suffix))
                })
                .collect();
            found.sort();
            match found.len() {
                1 => found.remove(0),
                0 => {
                    return Err(FlexureError::input(
                        given,
                        format!("holds no *{suffix}: run flexure curvature with that window or name the raster"),
                    ))
                }
                _ => {
                    return Err(FlexureError::input(
                        given,
                        format!("holds several *{suffix} files: name the raster with --curvature FILE"),
                    ))
                }
            }
        } else {
            given.to_path_buf()
        };
        let raster = read_raster(&path, &ReadOptions::default())?;
        Ok(Self {
            geometry: raster.geometry,
            names: raster.info.names,
            bands: raster.bands,
        })
    }

    /// (attribute, (mean, p10, p50, p90)) inside `ring`; bands holding angles (a cyclic scale
    /// in the band tables, see [`band_info`]) get the circular mean and percentiles of the
    /// deviations from it.
    fn summarise(&self, ring: &[(f64, f64)]) -> Vec<(String, (f64, f64, f64, f64))> {
        let (cells, _) = cells_inside(&self.geometry, ring);
        self.names
            .iter()
            .zip(&self.bands)
            .map(|(name, band)| {
                let values: Vec<f64> = cells
                    .iter()
                    .map(|&at| band[at])
                    .filter(|v| v.is_finite())
                    .collect();
                let summary = match band_info(name).and_then(|b| b.scale.period()) {
                    Some(period) => circular_percentiles(&values, period),
                    None => percentiles(&values),
                };
                (name.clone(), summary)
            })
            .collect()
    }
}

/// One evaluated corridor.
#[derive(Clone)]
pub(super) struct Corridor {
    ring: Vec<(f64, f64)>,
    pub(super) stats: CorridorStats,
    pub(super) bins: Vec<BinSample>,
    curvature: Vec<(String, (f64, f64, f64, f64))>,
    flags: Vec<String>,
}

impl Corridor {
    /// Evaluates the corridor of `rule` around the plan path `points`.
    pub(super) fn evaluate(
        points: &[(f64, f64)],
        rule: CorridorRule,
        anisotropy: &AnisotropyRaster,
        attributes: Option<&Attributes>,
    ) -> Self {
        let ring = corridor(points, rule.half_width);
        let (cells, leaves) = cells_inside(&anisotropy.geometry, &ring);
        let fitted: Vec<(usize, usize)> = cells
            .iter()
            .copied()
            .filter(|&(r, c)| anisotropy.sample(r, c).is_some())
            .collect();
        let bins: Vec<BinSample> = fitted
            .iter()
            .map(|&(r, c)| BinSample {
                magnitude: anisotropy.magnitude[(r, c)],
                azimuth_fast: anisotropy.azimuth_fast[(r, c)],
                azimuth_stderr: anisotropy.azimuth_stderr[(r, c)],
                magnitude_stderr: anisotropy.magnitude_stderr[(r, c)],
            })
            .collect();
        let stats = corridor_stats(&bins, path_azimuth(points));
        let mut flags = Vec::new();
        if bins.is_empty() {
            flags.push("no fitted anisotropy bins in the corridor".to_string());
        } else if bins.len() < rule.min_bins {
            flags.push(format!(
                "only {} fitted bins (fewer than {})",
                bins.len(),
                rule.min_bins
            ));
        }
        if leaves {
            flags.push("corridor partly outside the anisotropy grid".to_string());
        }
        if !bins.is_empty() && (bins.len() as f64) < MIN_FITTED_SHARE * cells.len() as f64 {
            flags.push(format!(
                "only {} of {} corridor cells fitted",
                bins.len(),
                cells.len()
            ));
        }
        if let Some((max, few)) = anisotropy.fewer_sectors(&fitted) {
            flags.push(format!(
                "{few} bins fitted from fewer than the grid's {max} sectors"
            ));
        }
        if !bins.is_empty() && stats.fast_azimuth.is_nan() {
            flags.push("fast azimuths cancel: no mean axis".to_string());
        }
        let curvature = attributes.map_or_else(Vec::new, |a| a.summarise(&ring));
        Self {
            ring,
            stats,
            bins,
            curvature,
            flags,
        }
    }

    /// The flags joined for a table cell.
    fn flag(&self) -> String {
        self.flags.join("; ")
    }

    /// The numeric columns, in [`STAT_COLUMNS`] order, then the curvature columns.
    fn numbers(&self) -> Vec<f64> {
        let s = &self.stats;
        let mut v = vec![
            s.n_bins as f64,
            s.fast_azimuth,
            s.resultant_length,
            s.axial_std,
            s.rayleigh_p,
            s.n_eff,
            s.magnitude_mean,
            s.magnitude_median,
            s.well_azimuth,
            s.angle_to_well,
        ];
        for (_, (mean, p10, p50, p90)) in &self.curvature {
            v.extend([*mean, *p10, *p50, *p90]);
        }
        v
    }

    fn curvature_columns(&self) -> Vec<String> {
        self.curvature
            .iter()
            .flat_map(|(n, _)| ["mean", "p10", "p50", "p90"].map(|q| format!("{n}_{q}")))
            .collect()
    }
}

/// Statistic columns of the stage table and the corridor layers.
const STAT_COLUMNS: [&str; 10] = [
    "n_bins",
    "fast_azimuth",
    "resultant_length",
    "axial_std",
    "rayleigh_p",
    "n_eff",
    "magnitude_mean",
    "magnitude_median",
    "well_azimuth",
    "angle_to_well",
];

/// Options of the stages job.
#[derive(Clone, Debug)]
pub struct StagesJob {
    /// `anisotropy.tif` or its folder.
    pub anisotropy: PathBuf,
    /// Curvature raster, or its folder with `window`.
    pub curvature: Option<PathBuf>,
    /// Window choosing the curvature file in a folder.
    pub window: Option<usize>,
    /// The wells.
    pub wells: Vec<WellInput>,
    /// Corridor half width each side of the well, metres.
    pub half_width: f64,
    /// Fewest fitted bins in a corridor without a flag.
    pub min_bins: usize,
    /// Unit of measured depths in well and stage tables whose headers declare none
    /// (`--md-unit`); a header unit that contradicts it is refused. `None`: the header's
    /// unit, else metres (said in the report).
    pub md_unit: Option<MdUnit>,
    /// North of survey azimuths.
    pub reference: AzimuthReference,
    /// Horizon to measure each stage's stand-off from (any grid in the anisotropy's CRS).
    pub horizon: Option<HorizonSource>,
    /// How the horizon is read.
    pub read: ReadOptions,
    /// Output folder.
    pub out_dir: PathBuf,
}

/// A well read and checked, with its stage table.
struct LoadedWell {
    well: Well,
    stages: Vec<Stage>,
}

/// A stage's stand-off from the horizon, in the well's md unit: (mean, min, max) and whether
/// the horizon is missing under part of it.
type Standoff = ((f64, f64, f64), bool);

impl StagesJob {
    /// A job with the defaults: 150 m half width, md units from the headers (else metres),
    /// grid-north surveys, no horizon.
    pub fn new(
        anisotropy: impl Into<PathBuf>,
        wells: Vec<WellInput>,
        out_dir: impl Into<PathBuf>,
    ) -> Self {
        Self {
            anisotropy: anisotropy.into(),
            curvature: None,
            window: None,
            wells,
            half_width: DEFAULT_HALF_WIDTH,
            min_bins: MIN_BINS,
            md_unit: None,
            reference: AzimuthReference::Grid,
            horizon: None,
            read: ReadOptions::default(),
            out_dir: out_dir.into(),
        }
    }

    /// Runs the job and reports per well. Every input is read and checked before any folder
    /// or file is created.
    pub fn run(&self) -> Result<StagesReport> {
        let rule = CorridorRule::new(self.half_width, self.min_bins)?;
        if self.wells.is_empty() {
            return Err(FlexureError::Parameter(
                "no well given: use --well FILE --stages FILE or --wells LIST".into(),
            ));
        }
        check_well_names(&self.wells)?;
        let anisotropy = AnisotropyRaster::read(&self.anisotropy)?;
        let rule = rule.on_grid(anisotropy.geometry.metres_per_unit);
        let attributes = self
            .curvature
            .as_deref()
            .map(|p| Attributes::read(p, self.window))
            .transpose()?;
        let horizon = self
            .horizon
            .as_ref()
            .map(|h| load_horizon(h, &self.read, &anisotropy.geometry))
            .transpose()?;
        let offset = self.azimuth_offset(&anisotropy.geometry)?;
        let g = &anisotropy.geometry;
        let mut notes: Vec<String> = horizon.iter().flat_map(|h| h.notes.clone()).collect();
        let loaded = self
            .wells
            .iter()
            .map(|input| self.load(input, offset, g.metres_per_unit, &mut notes))
            .collect::<Result<Vec<_>>>()?;
        let step = (SAMPLE_STEP_M / g.metres_per_unit).min(g.spacing().0.min(g.spacing().1));
        let mut rows = Vec::new();
        let mut reports = Vec::new();
        let mut sheets = Vec::new();
        for LoadedWell { well, stages } in &loaded {
            if horizon.is_some() && well.stations.iter().any(|s| s.tvd.is_nan()) {
                notes.push(format!(
                    "{}: the path gives no TVD: no stand-off",
                    well.name
                ));
            }
            let first = rows.len();
            let (top, base) = (
                stages
                    .iter()
                    .map(|s| s.md_top)
                    .fold(f64::INFINITY, f64::min),
                stages
                    .iter()
                    .map(|s| s.md_base)
                    .fold(f64::NEG_INFINITY, f64::max),
            );
            let intervals = stages
                .iter()
                .map(|s| (s.name.as_str(), s.md_top, s.md_base))
                .chain([(LATERAL, top, base)]);
            for (name, md_top, md_base) in intervals {
                let points = well.sample(md_top, md_base, step).ok_or_else(|| {
                    outside_path(
                        &well.name,
                        md_top / well.crs_per_md,
                        md_base / well.crs_per_md,
                    )
                })?;
                let plan: Vec<(f64, f64)> = points.iter().map(|p| (p.x, p.y)).collect();
                let mut c = Corridor::evaluate(&plan, rule, &anisotropy, attributes.as_ref());
                let standoff = horizon
                    .as_ref()
                    .map(|h| standoff(&points, h, well.crs_per_md));
                if let Some((_, true)) = standoff {
                    c.flags
                        .push("horizon missing under part of the stage".into());
                }
                rows.push(StageRow {
                    well: well.name.clone(),
                    stage: name.to_string(),
                    md_top: md_top / well.crs_per_md,
                    md_base: md_base / well.crs_per_md,
                    md_unit: well.md_unit,
                    standoff: standoff.map_or((f64::NAN, f64::NAN, f64::NAN), |s| s.0),
                    corridor: c,
                });
            }
            let well_rows = &rows[first..];
            let (stage_rows, lateral) = well_rows.split_at(well_rows.len() - 1);
            sheets.push((well.name.clone(), sheet(&well.name, stage_rows)));
            reports.push(WellReport {
                well: well.name.clone(),
                stages: stage_rows.len(),
                flagged: stage_rows
                    .iter()
                    .filter(|r| !r.corridor.flags.is_empty())
                    .map(|r| format!("{}: {}", r.stage, r.corridor.flag()))
                    .collect(),
                lateral: lateral[0].corridor.stats,
            });
        }
        // Everything is read and computed: only now are folders created and files staged.
        for dir in ["roses", "wells"] {
            prepare_output_dir(&self.out_dir.join(dir))?;
        }
        let mut staged = Vec::new();
        for r in &rows {
            let fig = stage_rose_figure(&format!("{} {}", r.well, r.stage), &r.corridor);
            let base = format!("{}_{}", file_name_part(&r.well), file_name_part(&r.stage));
            let source = format!("the rose of well '{}' stage '{}'", r.well, r.stage);
            staged.extend(
                stage_figure(&self.out_dir.join("roses").join(base), &fig)?
                    .into_iter()
                    .map(|f| f.with_source(source.clone())),
            );
        }
        for (name, fig) in &sheets {
            let base = self.out_dir.join(format!("{}_sheet", file_name_part(name)));
            let source = format!("the sheet of well '{name}'");
            staged.extend(
                stage_figure(&base, fig)?
                    .into_iter()
                    .map(|f| f.with_source(source.clone())),
            );
        }
        let wells: Vec<&Well> = loaded.iter().map(|l| &l.well).collect();
        staged.extend(stage_paths(&self.out_dir, g, &wells)?);
        let table = self.out_dir.join("stages.csv");
        let text = stage_table(&rows).map_err(|e| FlexureError::write(&table, e))?;
        staged.push(stage_bytes(&table, text.as_bytes())?);
        staged.extend(stage_corridors(&self.out_dir, "stage_corridors", g, &rows)?);
        commit_all(staged)?;
        Ok(StagesReport {
            out_dir: self.out_dir.clone(),
            wells: reports,
            notes,
        })
    }

    /// Reads and checks one well and its stage table; notes on assumed units go to `notes`.
    fn load(
        &self,
        input: &WellInput,
        azimuth_offset: f64,
        metres_per_unit: f64,
        notes: &mut Vec<String>,
    ) -> Result<LoadedWell> {
        let setting = WellSetting {
            wellhead: input.wellhead,
            kb: input.kb.unwrap_or(0.0),
            tie_in: input.tie_in,
            md_unit: self.md_unit,
            azimuth_offset,
            metres_per_unit,
        };
        let well = read_well(&input.name, &Table::read(&input.well)?, &setting)?;
        let stage_table = Table::read(&input.stages)?;
        let (stages, note) = read_stages(&stage_table, self.md_unit, &well, metres_per_unit)?;
        check_stages(&stages, &well, &stage_table)?;
        notes.extend(well.notes.iter().cloned().chain(note));
        if input.kb.is_none() {
            notes.push(format!(
                "well {}: no KB given: TVD below KB is taken as TVD below the horizons' datum (kb 0); give --kb {}=ELEVATION when they differ",
                input.name, input.name
            ));
        }
        Ok(LoadedWell { well, stages })
    }

    fn azimuth_offset(&self, g: &GridGeometry) -> Result<f64> {
        match self.reference {
            AzimuthReference::Grid => Ok(0.0),
            AzimuthReference::True {
                convergence: Some(c),
            } => Ok(c),
            AzimuthReference::True { convergence: None } => g.convergence().map_err(|e| {
                FlexureError::Parameter(format!(
                    "cannot compute the grid convergence ({e}): give --convergence DEG"
                ))
            }),
        }
    }
}

/// Refuses two wells whose names give the same output file names (case ignored).
fn check_well_names(wells: &[WellInput]) -> Result<()> {
    for (k, w) in wells.iter().enumerate() {
        let key = file_name_part(&w.name).to_lowercase();
        if let Some(other) = wells[..k]
            .iter()
            .find(|o| file_name_part(&o.name).to_lowercase() == key)
        {
            return Err(FlexureError::Parameter(format!(
                "wells '{}' ({}) and '{}' ({}) give the same output file names '{key}': name them apart (--well NAME=FILE or name in the well list)",
                other.name,
                other.well.display(),
                w.name,
                w.well.display()
            )));
        }
    }
    Ok(())
}

/// Loads the stand-off horizon, refusing one in another CRS than the anisotropy grid.
fn load_horizon(source: &HorizonSource, read: &ReadOptions, g: &GridGeometry) -> Result<Horizon> {
    let horizon = source.load(read)?;
    let srs = |wkt: &str| gdal::spatial_ref::SpatialRef::from_wkt(wkt).ok();
    let same = match (srs(&horizon.geometry.crs_wkt), srs(&g.crs_wkt)) {
        (Some(a), Some(b)) => a == b,
        _ => false,
    };
    if !same {
        return Err(FlexureError::input(
            &source.path,
            "is not in the anisotropy grid's CRS: reproject the horizon (its grid may differ, its CRS may not)",
        ));
    }
    Ok(horizon)
}

/// Stand-off of `points` from `horizon`: TVD below datum minus the horizon depth under each
/// point (bilinear), positive below the horizon, converted to the well's md unit
/// (`crs_per_md`); (mean, min, max) over the points with both, and whether some point has a
/// TVD but no horizon depth.
fn standoff(points: &[Station], horizon: &Horizon, crs_per_md: f64) -> Standoff {
    let g = &horizon.geometry;
    let with_tvd: Vec<&Station> = points.iter().filter(|p| p.tvd.is_finite()).collect();
    let values: Vec<f64> = with_tvd
        .iter()
        .map(|p| (p.tvd - bilinear(g, &horizon.depth, p.x, p.y)) / crs_per_md)
        .filter(|v| v.is_finite())
        .collect();
    let (mean, _, _, _) = percentiles(&values);
    let (min, max) = values
        .iter()
        .fold((f64::NAN, f64::NAN), |(lo, hi), &v| (v.min(lo), v.max(hi)));
    ((mean, min, max), values.len() < with_tvd.len())
}

/// Short name of a CRS linear unit for column headers.
fn crs_unit_name(metres_per_unit: f64) -> &'static str {
    MdUnit::from_metres(metres_per_unit).map_or("crs units", MdUnit::name)
}

/// The error for an interval the path does not cover (stage depths are checked against the
/// path before, so this names a defect rather than an input).
fn outside_path(well: &str, top: f64, base: f64) -> FlexureError {
    FlexureError::Parameter(format!(
        "well {well}: the interval {top} .. {base} is not on the computed path; please report this with the well's files"
    ))
}

/// `wells/<name>_path.csv` of every well (the path every `SAMPLE_STEP_M` and at every
/// station, md and TVD below datum in the well's md unit, x and y in CRS units, angles in
/// degrees from grid north, the 1-based station number where a point is a station) and
/// `well_paths.gpkg/.geojson` lines.
fn stage_paths(dir: &Path, g: &GridGeometry, wells: &[&Well]) -> Result<Vec<StagedFile>> {
    let mut staged = Vec::new();
    let mut features = Vec::new();
    let xy = crs_unit_name(g.metres_per_unit);
    for well in wells {
        let (lo, hi) = well.md_range();
        let points = well
            .sample(lo, hi, SAMPLE_STEP_M / g.metres_per_unit)
            .ok_or_else(|| outside_path(&well.name, lo / well.crs_per_md, hi / well.crs_per_md))?;
        let md = well.md_unit.name();
        let mut text =
            format!("md ({md}),x ({xy}),y ({xy}),tvdss ({md}),inc (deg),azi (deg),station\n");
        for p in &points {
            let station = well
                .stations
                .iter()
                .position(|s| s.md == p.md)
                .map_or(String::new(), |k| (k + 1).to_string());
            let cells = [
                number(p.md / well.crs_per_md),
                number(p.x),
                number(p.y),
                number(p.tvd / well.crs_per_md),
                number(p.inc),
                number(p.azi),
                station,
            ];
            text += &(cells.join(",") + "\n");
        }
        let path = dir
            .join("wells")
            .join(format!("{}_path.csv", file_name_part(&well.name)));
        staged.push(
            stage_bytes(&path, text.as_bytes())?
                .with_source(format!("the path of well '{}'", well.name)),
        );
        features.push(VectorFeature {
            points: points.iter().map(|p| (p.x, p.y)).collect(),
            values: vec![
                Property::Text(well.name.clone()),
                Property::Text(md.to_string()),
                Property::Number(lo / well.crs_per_md),
                Property::Number(hi / well.crs_per_md),
            ],
        });
    }
    let fields = [
        ("well", FieldKind::Text),
        ("md_unit", FieldKind::Text),
        ("md_start", FieldKind::Real),
        ("md_end", FieldKind::Real),
    ];
    let layer = Layer {
        name: "well_paths",
        kind: GeometryKind::Line,
        fields: &fields,
        features: &features,
    };
    staged.extend(stage_both_formats(dir, &g.crs_wkt, &layer)?);
    Ok(staged)
}

/// One row of the stage table (md and stand-off in the well's md unit).
struct StageRow {
    well: String,
    stage: String,
    md_top: f64,
    md_base: f64,
    md_unit: MdUnit,
    standoff: (f64, f64, f64),
    corridor: Corridor,
}

/// Lead columns of the stage table and corridor layers.
const STAGE_LEAD: [&str; 8] = [
    "well",
    "stage",
    "md_top",
    "md_base",
    "md_unit",
    "standoff_mean",
    "standoff_min",
    "standoff_max",
];

impl StageRow {
    /// The lead values, in [`STAGE_LEAD`] order.
    fn lead(&self) -> Vec<Property> {
        let (mean, min, max) = self.standoff;
        vec![
            Property::Text(self.well.clone()),
            Property::Text(self.stage.clone()),
            Property::Number(self.md_top),
            Property::Number(self.md_base),
            Property::Text(self.md_unit.name().to_string()),
            Property::Number(mean),
            Property::Number(min),
            Property::Number(max),
        ]
    }
}

fn stage_table(rows: &[StageRow]) -> std::result::Result<String, String> {
    corridor_table(
        &STAGE_LEAD,
        rows.iter().map(|r| {
            let lead = r
                .lead()
                .iter()
                .map(|p| match p {
                    Property::Text(t) => t.clone(),
                    Property::Number(v) => number(*v),
                })
                .collect();
            (lead, &r.corridor)
        }),
    )
}

/// A CSV of corridors: the `lead` columns, the statistics, the flag and the curvature columns
/// (named after the first corridor); fields quoted where they need it by the csv crate. Errors
/// (a row of another length than the header) in words.
pub(super) fn corridor_table<'a>(
    lead: &[&str],
    rows: impl Iterator<Item = (Vec<String>, &'a Corridor)>,
) -> std::result::Result<String, String> {
    let mut records = Vec::new();
    let mut curvature_cols = None;
    for (mut fields, c) in rows {
        curvature_cols.get_or_insert_with(|| c.curvature_columns());
        let numbers = c.numbers();
        let (stats, curvature) = numbers.split_at(STAT_COLUMNS.len());
        fields.extend(stats.iter().map(|v| number(*v)));
        fields.push(c.flag());
        fields.extend(curvature.iter().map(|v| number(*v)));
        records.push(fields);
    }
    let mut header: Vec<String> = lead.iter().map(|s| s.to_string()).collect();
    header.extend(STAT_COLUMNS.iter().map(|s| s.to_string()));
    header.push("flag".into());
    header.extend(curvature_cols.unwrap_or_default());
    let mut out = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new());
    for record in std::iter::once(&header).chain(&records) {
        out.write_record(record).map_err(|e| e.to_string())?;
    }
    let bytes = out.into_inner().map_err(|e| e.to_string())?;
    String::from_utf8(bytes).map_err(|e| e.to_string())
}

/// A CSV number: integers (to 1e-9 relative) as such, tiny magnitudes (p-values) in
/// exponent form, others with six decimals; empty for NaN.
pub(super) fn number(v: f64) -> String {
    if !v.is_finite() {
        String::new()
    } else if (v - v.round()).abs() <= 1e-9 * v.abs().max(1.0) && v.abs() < 1e15 {
        // Whole numbers, also those a unit round trip (ft -> CRS -> ft) left a few ulps off.
        format!("{v:.0}")
    } else if v.abs() < 1e-3 {
        format!("{v:.3e}")
    } else {
        format!("{v:.6}")
    }
}

/// Corridor polygons of every row, GeoPackage and GeoJSON.
fn stage_corridors(
    dir: &Path,
    name: &str,
    g: &GridGeometry,
    rows: &[StageRow],
) -> Result<Vec<StagedFile>> {
    let curvature_cols = rows
        .first()
        .map_or_else(Vec::new, |r| r.corridor.curvature_columns());
    let mut fields: Vec<(&str, FieldKind)> = STAGE_LEAD
        .iter()
        .map(|c| {
            let kind = if matches!(*c, "well" | "stage" | "md_unit") {
                FieldKind::Text
            } else {
                FieldKind::Real
            };
            (*c, kind)
        })
        .collect();
    fields.extend(STAT_COLUMNS.iter().map(|c| {
        (
            *c,
            if *c == "n_bins" {
                FieldKind::Integer
            } else {
                FieldKind::Real
            },
        )
    }));
    fields.push(("flag", FieldKind::Text));
    fields.extend(curvature_cols.iter().map(|c| (c.as_str(), FieldKind::Real)));
    let features: Vec<VectorFeature> = rows
        .iter()
        .filter(|r| !r.corridor.ring.is_empty())
        .map(|r| {
            let numbers = r.corridor.numbers();
            let (stats, curvature) = numbers.split_at(STAT_COLUMNS.len());
            let mut values = r.lead();
            values.extend(stats.iter().map(|v| Property::Number(*v)));
            values.push(Property::Text(r.corridor.flag()));
            values.extend(curvature.iter().map(|v| Property::Number(*v)));
            VectorFeature {
                points: r.corridor.ring.clone(),
                values,
            }
        })
        .collect();
    let layer = Layer {
        name,
        kind: GeometryKind::Polygon,
        fields: &fields,
        features: &features,
    };
    stage_both_formats(dir, &g.crs_wkt, &layer)
}

fn stage_rose_figure(title: &str, c: &Corridor) -> Figure {
    let s = &c.stats;
    let samples: Vec<(f64, f64)> = c
        .bins
        .iter()
        .map(|b| (b.azimuth_fast, b.magnitude))
        .collect();
    let mut notes = vec![
        format!("bins {}  (effective n {:.1})", s.n_bins, s.n_eff),
        format!(
            "fast {:.1} deg  R {:.2}  std {:.1} deg",
            s.fast_azimuth, s.resultant_length, s.axial_std
        ),
        format!(
            "well {:.1} deg  angle to well {:.1} deg",
            s.well_azimuth, s.angle_to_well
        ),
        format!(
            "Rayleigh p {:.2e} (optimistic: bins correlated)",
            s.rayleigh_p
        ),
        "petals: magnitude-weighted fast azimuths, area ~ count".to_string(),
    ];
    if !c.flags.is_empty() {
        notes.push(format!("flag: {}", c.flag()));
    }
    rose(
        title,
        &samples,
        ROSE_PETALS,
        Some(s.fast_azimuth),
        Some(s.well_azimuth),
        &notes,
    )
}

/// One sheet per well: the stage roses in order along the lateral above a strip of
/// angle_to_well and mean magnitude per stage.
fn sheet(well: &str, stages: &[StageRow]) -> Figure {
    let per_row = 6usize;
    let cell = 200.0f32;
    let rows = stages.len().div_ceil(per_row).max(1);
    let strip_top = 60.0 + rows as f32 * (cell + 40.0);
    let width = (per_row as f32 * cell + 80.0) as u32;
    let mut fig = Figure::new(width, (strip_top + 360.0) as u32);
    fig.text(
        20.0,
        32.0,
        18.0,
        format!("{well}: stage roses (fast azimuth; orange mean, black well)"),
        Anchor::Start,
    );
    for (k, r) in stages.iter().enumerate() {
        let rose = stage_rose_figure(&r.stage, &r.corridor);
        let (col, row) = (k % per_row, k / per_row);
        fig.place(
            &rose,
            40.0 + col as f32 * cell,
            50.0 + row as f32 * (cell + 40.0),
            cell / rose.width as f32,
        );
    }
    bar_strip(
        &mut fig,
        strip_top,
        "angle_to_well (deg, 90 = perpendicular)",
        90.0,
        stages.iter().map(|s| s.corridor.stats.angle_to_well),
    );
    bar_strip(
        &mut fig,
        strip_top + 170.0,
        "magnitude_mean (ms)",
        f64::NAN,
        stages.iter().map(|s| s.corridor.stats.magnitude_mean),
    );
    fig.text(20.0, strip_top + 350.0, 11.0, "Informs interpretation only; decisions belong to licensed professionals under local regulations.", Anchor::Start);
    fig
}

/// A labelled bar chart of `values` (one bar per stage) with its top at `max` (or the largest
/// value when NaN).
fn bar_strip(fig: &mut Figure, top: f32, label: &str, max: f64, values: impl Iterator<Item = f64>) {
    let values: Vec<f64> = values.collect();
    let max = if max.is_finite() {
        max
    } else {
        values
            .iter()
            .copied()
            .filter(|v| v.is_finite())
            .fold(0.0, f64::max)
            .max(1e-9)
    };
    let (left, height, width) = (60.0f32, 110.0f32, fig.width as f32 - 100.0);
    fig.text(left, top + 14.0, 13.0, label, Anchor::Start);
    let base = top + 24.0 + height;
    fig.line(vec![(left, base), (left + width, base)], [0, 0, 0], 1.0);
    fig.text(
        left - 8.0,
        top + 34.0,
        10.0,
        crate::draw::colour::short(max),
        Anchor::Middle,
    );
    let step = width / values.len().max(1) as f32;
    for (k, v) in values.iter().enumerate() {
        let x = left + step * (k as f32 + 0.2);
        if v.is_finite() {
            let h = height * (v / max).clamp(0.0, 1.0) as f32;
            fig.marks.push(Mark::Polygon {
                points: vec![
                    (x, base),
                    (x + 0.6 * step, base),
                    (x + 0.6 * step, base - h),
                    (x, base - h),
                ],
                fill: [0x41, 0x86, 0xc8],
                stroke: None,
            });
        }
        fig.text(
            x + 0.3 * step,
            base + 14.0,
            10.0,
            format!("{}", k + 1),
            Anchor::Middle,
        );
    }
}

/// What the stages job found for one well.
#[derive(Clone, Debug)]
pub struct WellReport {
    /// Well name.
    pub well: String,
    /// Stages evaluated.
    pub stages: usize,
    /// Stages with a flag and why.
    pub flagged: Vec<String>,
    /// Statistics of the whole lateral.
    pub lateral: CorridorStats,
}

/// What the stages job wrote.
#[derive(Clone, Debug)]
pub struct StagesReport {
    /// Output folder.
    pub out_dir: PathBuf,
    /// One entry per well.
    pub wells: Vec<WellReport>,
    /// Units assumed and inputs not used (e.g. measured depths read as metres).
    pub notes: Vec<String>,
}

impl fmt::Display for StagesReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for w in &self.wells {
            let l = &w.lateral;
            writeln!(f, "{}: {} stages; lateral: {} bins, fast {:.1} deg (R {:.2}), well {:.1} deg, angle to well {:.1} deg, magnitude {:.2} ms", w.well, w.stages, l.n_bins, l.fast_azimuth, l.resultant_length, l.well_azimuth, l.angle_to_well, l.magnitude_mean)?;
            for flag in &w.flagged {
                writeln!(f, "  flagged {flag}")?;
            }
        }
        for note in &self.notes {
            writeln!(f, "note: {note}")?;
        }
        writeln!(f, "wrote stages.csv, stage_corridors.gpkg/.geojson, wells/<well>_path.csv, well_paths.gpkg/.geojson, roses/ and one sheet per well in {}", self.out_dir.display())?;
        writeln!(f, "{WELL_CAUTION}")
    }
}
