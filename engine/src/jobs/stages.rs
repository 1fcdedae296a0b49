//! The well jobs: `StagesJob` (per-stage corridor statistics, stage table, corridor polygons,
//! computed well paths, rose diagrams and a sheet per well, and the stand-off from a horizon)
//! here, and `PlanJob` (a drilling-azimuth scan from a pad) in [`super::plan`]. Both evaluate
//! corridors the same way ([`Corridor`], shared from here); every input is read and checked before any folder is created, and all
//! outputs are staged and committed together (file-name collisions between wells and stages
//! are refused early by name, and any left by the one check of the commit).

use super::anisotropy::AzimuthReference;
use super::outcomes::{
    analyse, Level, OutcomeAnalysis, OutcomeTable, OutcomeTest, StageMetrics,
    LEVEL as OUTCOME_LEVEL, OUTCOME_CAUTION,
};
use super::{stage_bytes, stage_figure, AnisotropyRaster, WellInput};
use crate::bands::band_info;
use crate::draw::axis::{Axis, GRID};
use crate::draw::figure::{
    axial_shares, draw_rose, rose, Anchor, Figure, Mark, RoseParts, RoseScale, MEAN_AXIS, WELL_AXIS,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::table::Table;
use crate::io::vector::{
    stage_both_formats, FieldKind, GeometryKind, Layer, Property, VectorFeature,
};
use crate::io::{commit_all, prepare_output_dir, read_raster, ReadOptions, StagedFile};
use crate::provenance::Provenance;
use crate::stats::mixture::{two_trends, TwoTrends};
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
    /// Width of the corridor (both sides), in the rule's unit.
    pub(super) fn width(&self) -> f64 {
        2.0 * self.half_width
    }

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
    /// Two azimuth populations, when the bins hold them ([`two_trends`]).
    trends: Option<TwoTrends>,
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
        let (start, end) = match (points.first(), points.last()) {
            (Some(&a), Some(&b)) => (a, b),
            _ => ((f64::NAN, f64::NAN), (f64::NAN, f64::NAN)),
        };
        let length = (end.0 - start.0).hypot(end.1 - start.1);
        let along = |r: usize, c: usize| {
            let (x, y) = anisotropy.geometry.cell_centre(c, r);
            if length > 0.0 {
                ((x - start.0) * (end.0 - start.0) + (y - start.1) * (end.1 - start.1)) / length
            } else {
                f64::NAN
            }
        };
        let bins: Vec<BinSample> = fitted
            .iter()
            .map(|&(r, c)| BinSample {
                along: along(r, c),
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
        let samples: Vec<(f64, f64)> = bins.iter().map(|b| (b.azimuth_fast, b.magnitude)).collect();
        let trends = two_trends(&samples, &grid_neighbours(&fitted));
        if let Some(t) = &trends {
            flags.push(format!(
                "mixed_trends: {:.0} deg ({:.0}%) and {:.0} deg ({:.0}%)",
                t.azimuths[0],
                100.0 * t.shares[0],
                t.azimuths[1],
                100.0 * t.shares[1]
            ));
        }
        let curvature = attributes.map_or_else(Vec::new, |a| a.summarise(&ring));
        Self {
            ring,
            stats,
            bins,
            trends,
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
        let t = self.trends.as_ref();
        v.extend([
            t.map_or(f64::NAN, |t| t.azimuths[0]),
            t.map_or(f64::NAN, |t| t.shares[0]),
            t.map_or(f64::NAN, |t| t.azimuths[1]),
            t.map_or(f64::NAN, |t| t.shares[1]),
        ]);
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

/// Pairs of indices into `cells` (row, column) that are grid neighbours (right or below).
fn grid_neighbours(cells: &[(usize, usize)]) -> Vec<(usize, usize)> {
    let index: std::collections::HashMap<(usize, usize), usize> = cells
        .iter()
        .enumerate()
        .map(|(k, &cell)| (cell, k))
        .collect();
    cells
        .iter()
        .enumerate()
        .flat_map(|(k, &(r, c))| {
            [(r, c + 1), (r + 1, c)]
                .into_iter()
                .filter_map(|n| index.get(&n).map(|&j| (k, j)))
                .collect::<Vec<_>>()
        })
        .collect()
}

/// Statistic columns of the stage table and the corridor layers (the two trends are empty
/// unless the stage is flagged `mixed_trends`).
const STAT_COLUMNS: [&str; 14] = [
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
    "trend1_azimuth",
    "trend1_share",
    "trend2_azimuth",
    "trend2_share",
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
    /// Completion table: one row per stage (well, stage, numeric outcome columns).
    pub completions: Option<PathBuf>,
    /// Production table: one row per well (well, numeric outcome columns).
    pub production: Option<PathBuf>,
    /// Divide production values by each well's completed length (sum of its stage lengths).
    pub per_length: bool,
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
            completions: None,
            production: None,
            per_length: false,
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
        if self.per_length && self.production.is_none() {
            return Err(FlexureError::Parameter(
                "--per-length divides production values: give --production FILE".into(),
            ));
        }
        let completions = self
            .completions
            .as_deref()
            .map(|p| OutcomeTable::read(p, Level::Stage))
            .transpose()?;
        let production = self
            .production
            .as_deref()
            .map(|p| OutcomeTable::read(p, Level::Well))
            .transpose()?;
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
            let outcome_tracks: Vec<(String, Vec<f64>)> = completions
                .iter()
                .flat_map(|table| {
                    table.names.iter().enumerate().map(move |(o, name)| {
                        let values = stage_rows
                            .iter()
                            .map(|r| {
                                table
                                    .stage_values(&r.well, &r.stage)
                                    .map_or(f64::NAN, |v| v[o])
                            })
                            .collect();
                        (name.clone(), values)
                    })
                })
                .collect();
            sheets.push((
                well.name.clone(),
                sheet(
                    &well.name,
                    well.md_unit,
                    stage_rows,
                    &lateral[0],
                    horizon.is_some(),
                    &outcome_tracks,
                ),
            ));
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
        let outcomes = (completions.is_some() || production.is_some()).then(|| {
            let (names, metrics) = stage_metrics(&rows, horizon.is_some());
            analyse(
                &names,
                &metrics,
                completions.as_ref(),
                production.as_ref(),
                self.per_length,
            )
        });
        let mixed = rows
            .iter()
            .filter(|r| r.stage != LATERAL && r.corridor.trends.is_some())
            .count();
        let outcomes = outcomes.map(|mut a| {
            if mixed > 0 {
                a.notes.push(format!(
                    "{mixed} stage(s) hold two fast-azimuth populations (mixed_trends): their mean fast azimuth and angle to well summarise them weakly"
                ));
            }
            a
        });
        if let Some(analysis) = &outcomes {
            staged.extend(self.stage_outcomes(analysis)?);
        }
        commit_all(staged)?;
        Ok(StagesReport {
            out_dir: self.out_dir.clone(),
            wells: reports,
            notes,
            outcomes,
        })
    }

    /// `outcomes.csv`, `outcomes.json` (with the inputs' provenance) and the scatter figures.
    fn stage_outcomes(&self, analysis: &OutcomeAnalysis) -> Result<Vec<StagedFile>> {
        let csv = self.out_dir.join("outcomes.csv");
        let mut staged = vec![stage_bytes(&csv, analysis.csv()?.as_bytes())?];
        let inputs: Vec<&Path> = [self.completions.as_deref(), self.production.as_deref()]
            .into_iter()
            .flatten()
            .collect();
        let json = serde_json::json!({
            "tests": analysis.tests,
            "notes": analysis.notes,
            "stages_joined": analysis.stages_joined,
            "wells_joined": analysis.wells_joined,
            "confidence_level": OUTCOME_LEVEL,
            "caution": OUTCOME_CAUTION,
            "provenance": Provenance::of_inputs(&inputs)?.to_json(),
        });
        let path = self.out_dir.join("outcomes.json");
        let text =
            serde_json::to_string_pretty(&json).map_err(|e| FlexureError::write(&path, e))?;
        staged.push(stage_bytes(&path, text.as_bytes())?);
        for (name, fig) in analysis.figures() {
            staged.extend(stage_figure(&self.out_dir.join(name), &fig)?);
        }
        Ok(staged)
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
    /// `value` (and `range`) over this stage's md interval, for a sheet track.
    fn value(&self, value: f64, range: Option<(f64, f64)>) -> TrackValue {
        TrackValue {
            md: (self.md_top, self.md_base),
            value,
            range,
        }
    }

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

/// The stage metrics tested against outcomes, by name, and each stage's values (lateral rows
/// left out): angle to well, magnitude, resultant length, stand-off (with a horizon) and the
/// corridor mean of each curvature band except directions (dip azimuth: a rank correlation
/// with a direction on a circle has no meaning, and its well mean would average angles as
/// numbers).
fn stage_metrics(rows: &[StageRow], horizon_given: bool) -> (Vec<String>, Vec<StageMetrics>) {
    let mut names: Vec<String> = ["angle_to_well", "magnitude_mean", "resultant_length"]
        .map(String::from)
        .to_vec();
    if horizon_given {
        names.push("standoff_mean".into());
    }
    let is_direction = |band: &str| band_info(band).is_some_and(|b| b.scale.period().is_some());
    let bands: Vec<usize> = rows
        .first()
        .map(|r| {
            (0..r.corridor.curvature.len())
                .filter(|&k| !is_direction(&r.corridor.curvature[k].0))
                .collect()
        })
        .unwrap_or_default();
    if let Some(r) = rows.first() {
        names.extend(
            bands
                .iter()
                .map(|&k| format!("{}_mean", r.corridor.curvature[k].0)),
        );
    }
    let metrics = rows
        .iter()
        .filter(|r| r.stage != LATERAL)
        .map(|r| {
            let s = &r.corridor.stats;
            let mut values = vec![s.angle_to_well, s.magnitude_mean, s.resultant_length];
            if horizon_given {
                values.push(r.standoff.0);
            }
            values.extend(bands.iter().map(|&k| r.corridor.curvature[k].1 .0));
            StageMetrics {
                well: r.well.clone(),
                stage: r.stage.clone(),
                md_mid: 0.5 * (r.md_top + r.md_base),
                length: r.md_base - r.md_top,
                values,
            }
        })
        .collect();
    (names, metrics)
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
        RoseParts {
            mean_axis: Some(s.fast_azimuth),
            well_axis: Some(s.well_azimuth),
            trends: c.trends.as_ref().map(|t| t.azimuths),
            labels: None,
            compass: true,
        },
        &notes,
    )
}

/// Width of a well sheet and the left and right ends of its measured-depth axis, pixels.
const SHEET_WIDTH: f32 = 1500.0;
const MD_LEFT: f32 = 110.0;
const MD_RIGHT: f32 = SHEET_WIDTH - 50.0;
/// Largest and smallest rose radius on a sheet, pixels: roses shrink to the room between
/// stages, and below the smallest are staggered over up to `MAX_LANES` rows instead.
const ROSE_MAX: f32 = 56.0;
const ROSE_MIN: f32 = 20.0;
const MAX_LANES: usize = 4;
/// Least gap between two roses of a row, pixels.
const ROSE_GAP: f32 = 4.0;
/// Height of a track's plot and the room above it for its title, pixels.
const TRACK_HEIGHT: f32 = 110.0;
const TRACK_TITLE: f32 = 30.0;

/// How the roses of a sheet are placed: each centred at its stage's mid measured depth on the
/// sheet's md axis, stage `k` in row `k % lanes`, all of radius `radius`, so that no two roses
/// of a row overlap (rows are apart by a rose's height).
#[derive(Clone, Copy, Debug, PartialEq)]
struct RoseLayout {
    lanes: usize,
    radius: f32,
}

impl RoseLayout {
    /// The layout for rose centres at `xs` (increasing, pixels) on a sheet `width` wide: one row
    /// when the roses fit at `ROSE_MIN` or more, else the fewest rows (up to `MAX_LANES`) that
    /// let them, else the rows giving the largest radius.
    fn for_centres(xs: &[f32], width: f32) -> Self {
        let radius = |lanes: usize| {
            let edges = match (xs.first(), xs.last()) {
                (Some(first), Some(last)) => first.min(width - last) - ROSE_GAP,
                _ => ROSE_MAX,
            };
            xs.iter()
                .zip(xs.iter().skip(lanes))
                .map(|(a, b)| (b - a - ROSE_GAP) / 2.0)
                .fold(ROSE_MAX.min(edges), f32::min)
                .max(1.0)
        };
        let layouts = (1..=MAX_LANES).map(|lanes| Self {
            lanes,
            radius: radius(lanes),
        });
        layouts
            .clone()
            .find(|l| l.radius >= ROSE_MIN)
            .unwrap_or_else(|| {
                layouts
                    .reduce(|a, b| if b.radius > a.radius { b } else { a })
                    .expect("at least one row")
            })
    }
}

/// One track of a sheet: a value per stage drawn over the stage's md interval, with an optional
/// range (shaded), on its own y axis.
struct Track {
    /// Title with unit.
    title: String,
    /// Class of the track's group in the figure (`track NAME`).
    name: &'static str,
    /// Fixed y interval, or `None` for the data's rounded range (zero included).
    fixed: Option<(f64, f64)>,
    /// Positive values drawn downwards (stand-off below the horizon).
    down: bool,
    /// One value per stage.
    values: Vec<TrackValue>,
    /// Line colour (the range is drawn in a light tint of it).
    colour: [u8; 3],
}

/// A stage's value on a track: over its md interval (md top, md base), with an optional range
/// (low, high) drawn shaded.
struct TrackValue {
    md: (f64, f64),
    value: f64,
    range: Option<(f64, f64)>,
}

impl Track {
    /// The track's y axis between pixel rows `top` and `bottom`.
    fn axis(&self, top: f32, bottom: f32) -> Axis {
        let (from, to) = if self.down {
            (top, bottom)
        } else {
            (bottom, top)
        };
        match self.fixed {
            Some((lo, hi)) => Axis::new(lo, hi, from, to, 5),
            None => {
                let (lo, hi) = self
                    .values
                    .iter()
                    .flat_map(|t| {
                        let range = t.range.into_iter().flat_map(|(a, b)| [a, b]);
                        [t.value].into_iter().chain(range)
                    })
                    .filter(|v| v.is_finite())
                    .fold((0.0f64, 0.0f64), |(lo, hi), v| (lo.min(v), hi.max(v)));
                Axis::rounded(lo, hi, from, to, 4)
            }
        }
    }

    /// Draws the track with its top at `top` under the md axis `md`.
    fn draw(&self, fig: &mut Figure, md: &Axis, top: f32) {
        let (plot_top, bottom) = (top + TRACK_TITLE, top + TRACK_TITLE + TRACK_HEIGHT);
        let y = self.axis(plot_top, bottom);
        let (left, right) = (MD_LEFT, MD_RIGHT);
        fig.group(&format!("track {}", self.name), |fig| {
            fig.text(left, top + 18.0, 13.0, self.title.clone(), Anchor::Start);
            for &t in md.ticks() {
                let x = md.at(t);
                fig.line(vec![(x, plot_top), (x, bottom)], GRID, 1.0);
            }
            y.draw_vertical(fig, left, right);
            fig.line(
                vec![
                    (left, plot_top),
                    (right, plot_top),
                    (right, bottom),
                    (left, bottom),
                ],
                AXIS_LINE,
                1.0,
            );
            let tint = self.colour.map(|c| ((u16::from(c) + 3 * 255) / 4) as u8);
            for &TrackValue {
                md: (top, base),
                value,
                range,
            } in &self.values
            {
                let (x0, x1) = (md.at(top), md.at(base));
                if let Some((a, b)) = range.filter(|(a, b)| a.is_finite() && b.is_finite()) {
                    let (ya, yb) = (y.at(y.clamp(a)), y.at(y.clamp(b)));
                    fig.marks.push(Mark::Polygon {
                        points: vec![(x0, ya), (x1, ya), (x1, yb), (x0, yb)],
                        fill: tint,
                        stroke: None,
                    });
                }
                if value.is_finite() {
                    let yv = y.at(y.clamp(value));
                    fig.line(vec![(x0, yv), (x1, yv)], self.colour, 2.5);
                }
            }
        });
    }
}

/// Colour of plot frames.
const AXIS_LINE: [u8; 3] = crate::draw::axis::AXIS;

/// One sheet per well: the stage roses placed along measured depth (heel left, toe right; x
/// linear in each stage's mid md, staggered over rows when stages are close) on one radial
/// scale, the stage intervals, and tracks sharing the md axis: angle to well, anisotropy
/// magnitude, the first curvature band (mean, p10-p90) when curvature was given, the
/// stand-off (mean, min-max; positive below, drawn down) when a horizon was given, and each
/// completion outcome column when a completion table was given.
fn sheet(
    well: &str,
    md_unit: MdUnit,
    stages: &[StageRow],
    lateral: &StageRow,
    horizon_given: bool,
    outcomes: &[(String, Vec<f64>)],
) -> Figure {
    let unit = md_unit.name();
    let md_lo = stages
        .iter()
        .map(|s| s.md_top)
        .fold(f64::INFINITY, f64::min);
    let md_hi = stages
        .iter()
        .map(|s| s.md_base)
        .fold(f64::NEG_INFINITY, f64::max);
    let md = Axis::new(md_lo, md_hi, MD_LEFT, MD_RIGHT, 10);
    let mid = |s: &StageRow| md.at(0.5 * (s.md_top + s.md_base));
    let xs: Vec<f32> = stages.iter().map(mid).collect();
    let layout = RoseLayout::for_centres(&xs, SHEET_WIDTH);
    let r = layout.radius;
    let label_size = (0.45 * r).clamp(9.0, 12.0);
    let lane_height = 2.0 * r + label_size + 8.0;
    let samples = |c: &Corridor| -> Vec<(f64, f64)> {
        c.bins
            .iter()
            .map(|b| (b.azimuth_fast, b.magnitude))
            .collect()
    };
    let shares: Vec<Vec<f64>> = stages
        .iter()
        .map(|s| axial_shares(&samples(&s.corridor), ROSE_PETALS))
        .collect();
    let scale = RoseScale::for_largest(shares.iter().flatten().copied().fold(0.0, f64::max));
    let mut tracks = vec![
        Track {
            title: "angle to well (deg; 90 = perpendicular to the mean fast azimuth)".into(),
            name: "angle_to_well",
            fixed: Some((0.0, 90.0)),
            down: false,
            values: stages
                .iter()
                .map(|s| s.value(s.corridor.stats.angle_to_well, None))
                .collect(),
            colour: [0x20, 0x20, 0x20],
        },
        Track {
            title: "anisotropy magnitude (ms; corridor mean)".into(),
            name: "magnitude",
            fixed: None,
            down: false,
            values: stages
                .iter()
                .map(|s| s.value(s.corridor.stats.magnitude_mean, None))
                .collect(),
            colour: PETAL_BLUE,
        },
    ];
    if let Some((band, _)) = stages.first().and_then(|s| s.corridor.curvature.first()) {
        let band_unit = band_info(band).map_or("", |b| b.unit);
        tracks.push(Track {
            title: format!("{band} ({band_unit}; corridor mean, p10 to p90 shaded)"),
            name: "curvature",
            fixed: None,
            down: false,
            values: stages
                .iter()
                .map(|s| {
                    let (mean, p10, _, p90) = s.corridor.curvature[0].1;
                    s.value(mean, Some((p10, p90)))
                })
                .collect(),
            colour: [0x1b, 0x9e, 0x77],
        });
    }
    if horizon_given {
        tracks.push(Track {
            title: format!(
                "stand-off from the horizon ({unit}; positive below, drawn down; mean, min to max shaded)"
            ),
            name: "standoff",
            fixed: None,
            down: true,
            values: stages
                .iter()
                .map(|s| {
                    let (mean, min, max) = s.standoff;
                    s.value(mean, Some((min, max)))
                })
                .collect(),
            colour: [0x75, 0x70, 0xb3],
        });
    }
    for (name, values) in outcomes {
        tracks.push(Track {
            title: format!("{name} (completion table)"),
            name: "outcome",
            fixed: None,
            down: false,
            values: stages
                .iter()
                .zip(values)
                .map(|(s, v)| s.value(*v, None))
                .collect(),
            colour: [0xa6, 0x76, 0x1d],
        });
    }
    let roses_top = 135.0;
    let strip_top = roses_top + layout.lanes as f32 * lane_height + 12.0;
    let tracks_top = strip_top + 22.0;
    let md_axis_y = tracks_top + tracks.len() as f32 * (TRACK_TITLE + TRACK_HEIGHT) + 10.0;
    let flagged: Vec<&str> = stages
        .iter()
        .filter(|s| !s.corridor.flags.is_empty())
        .map(|s| s.stage.as_str())
        .collect();
    let flag_lines = if flagged.is_empty() {
        Vec::new()
    } else {
        wrap(
            &format!(
                "flagged (!): {}; the reasons are in stages.csv (flag)",
                flagged.join(", ")
            ),
            200,
        )
    };
    let height = md_axis_y + 100.0 + 18.0 * flag_lines.len() as f32;
    let mut fig = Figure::new(SHEET_WIDTH as u32, height as u32);
    fig.text(
        20.0,
        30.0,
        18.0,
        format!("{well}: stages along measured depth, heel (left) to toe (right)"),
        Anchor::Start,
    );
    let l = &lateral.corridor.stats;
    fig.text(
        20.0,
        52.0,
        12.0,
        format!(
            "lateral: fast azimuth {:.1} deg, well {:.1} deg, angle to well {:.1} deg, magnitude {:.2} ms, {} bins",
            l.fast_azimuth, l.well_azimuth, l.angle_to_well, l.magnitude_mean, l.n_bins
        ),
        Anchor::Start,
    );
    sheet_legend(&mut fig, &scale);
    // Leaders from each rose to its stage, under the roses' white discs.
    for (k, &x) in xs.iter().enumerate() {
        let cy = roses_top + (k % layout.lanes) as f32 * lane_height + label_size + 4.0 + r;
        fig.line(vec![(x, cy), (x, strip_top)], [0xcc, 0xcc, 0xcc], 1.0);
    }
    for (k, (s, x)) in stages.iter().zip(&xs).enumerate() {
        let cy = roses_top + (k % layout.lanes) as f32 * lane_height + label_size + 4.0 + r;
        let stats = &s.corridor.stats;
        let flagged = if s.corridor.flags.is_empty() {
            ""
        } else {
            " !"
        };
        fig.group("rose", |fig| {
            draw_rose(
                fig,
                (*x, cy),
                r,
                &shares[k],
                &scale,
                RoseParts {
                    mean_axis: Some(stats.fast_azimuth),
                    well_axis: Some(stats.well_azimuth),
                    trends: s.corridor.trends.as_ref().map(|t| t.azimuths),
                    labels: None,
                    compass: false,
                },
            );
            fig.text(
                *x,
                cy - r - 3.0,
                label_size,
                format!("{}{flagged}", s.stage),
                Anchor::Middle,
            );
        });
    }
    for (k, s) in stages.iter().enumerate() {
        let fill = if k % 2 == 0 {
            [0xd0, 0xd0, 0xd0]
        } else {
            [0xa8, 0xa8, 0xa8]
        };
        let (x0, x1) = (md.at(s.md_top), md.at(s.md_base));
        fig.marks.push(Mark::Polygon {
            points: vec![
                (x0, strip_top),
                (x1, strip_top),
                (x1, strip_top + 10.0),
                (x0, strip_top + 10.0),
            ],
            fill,
            stroke: None,
        });
    }
    fig.text(MD_LEFT - 8.0, strip_top + 9.0, 11.0, "stages", Anchor::End);
    for (k, track) in tracks.iter().enumerate() {
        track.draw(
            &mut fig,
            &md,
            tracks_top + k as f32 * (TRACK_TITLE + TRACK_HEIGHT),
        );
    }
    md.draw_horizontal(
        &mut fig,
        md_axis_y,
        &format!("measured depth ({unit}), heel to toe"),
    );
    let mut y = md_axis_y + 66.0;
    for line in flag_lines {
        fig.text(20.0, y, 12.0, line, Anchor::Start);
        y += 18.0;
    }
    fig.text(20.0, y, 11.0, "Anisotropy is a proxy for stress and fractures, not a measurement of them. Informs interpretation only; decisions belong to licensed professionals under local regulations.", Anchor::Start);
    fig
}

/// `text` in lines of at most `width` characters, broken at spaces (a longer word gets a line
/// of its own).
pub(super) fn wrap(text: &str, width: usize) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    for word in text.split(' ') {
        match lines.last_mut() {
            Some(line) if line.len() + 1 + word.len() <= width => {
                line.push(' ');
                line.push_str(word);
            }
            _ => lines.push(word.to_string()),
        }
    }
    lines
}

/// Colour of petals and of the magnitude track.
const PETAL_BLUE: [u8; 3] = [0x41, 0x86, 0xc8];

/// The sheet's key, top right: a rose frame with the shared scale's labelled rings and what the
/// petals and axes mean.
fn sheet_legend(fig: &mut Figure, scale: &RoseScale) {
    let (cx, cy, r) = (SHEET_WIDTH - 80.0, 72.0, 48.0);
    let parts = RoseParts {
        mean_axis: None,
        well_axis: None,
        trends: None,
        labels: None,
        compass: false,
    };
    draw_rose(fig, (cx, cy), r, &[], scale, parts);
    for &ring in scale.rings() {
        let y = cy - scale.radius(ring, r) - 2.0;
        fig.text(cx, y, 10.0, scale.label(ring), Anchor::Middle);
    }
    fig.text(
        cx - r - 8.0,
        cy + 4.0,
        11.0,
        "rings (north up):",
        Anchor::End,
    );
    let x = cx - r - 620.0;
    let lines: [(&str, Option<[u8; 3]>); 3] = [
        (
            "petals: share of the stage's magnitude-weighted fast azimuths (area ~ share)",
            None,
        ),
        ("mean fast azimuth", Some(MEAN_AXIS)),
        ("well azimuth (stage name ! = flagged)", Some(WELL_AXIS)),
    ];
    for (k, (text, colour)) in lines.iter().enumerate() {
        let y = 40.0 + 18.0 * k as f32;
        match colour {
            Some(c) => fig.line(vec![(x, y - 4.0), (x + 22.0, y - 4.0)], *c, 2.5),
            None => fig.marks.push(Mark::Polygon {
                points: vec![(x, y - 9.0), (x + 22.0, y - 9.0), (x + 22.0, y), (x, y)],
                fill: PETAL_BLUE,
                stroke: None,
            }),
        }
        fig.text(x + 28.0, y, 11.0, *text, Anchor::Start);
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
    /// Outcome relations, when completion or production tables were given.
    pub outcomes: Option<OutcomeAnalysis>,
}

/// Strongest outcome relations listed in the summary.
const OUTCOMES_SHOWN: usize = 5;

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
        if let Some(a) = &self.outcomes {
            writeln!(
                f,
                "outcomes: {} tests ({} stages and {} wells joined); strongest by p-value:",
                a.tests.len(),
                a.stages_joined,
                a.wells_joined
            )?;
            let mut ranked: Vec<&OutcomeTest> = a.tests.iter().collect();
            ranked.sort_by(|x, y| x.p_value.total_cmp(&y.p_value));
            for t in ranked.iter().take(OUTCOMES_SHOWN) {
                writeln!(
                    f,
                    "  {} vs {} ({:?}): rho {:.2} [{:.2}, {:.2}], p {:.3}, q {:.3}, n {}",
                    t.outcome,
                    t.metric,
                    t.level,
                    t.rho,
                    t.ci_low,
                    t.ci_high,
                    t.p_value,
                    t.q_value,
                    t.n
                )?;
            }
            for note in &a.notes {
                writeln!(f, "  note: {note}")?;
            }
            writeln!(
                f,
                "  wrote outcomes.csv, outcomes.json and outcome_*.svg/png"
            )?;
            writeln!(f, "{OUTCOME_CAUTION}")?;
        }
        writeln!(f, "{WELL_CAUTION}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::wells::corridor::corridor_stats;

    /// A stage row over `md_top..md_base` whose 20 bins all have fast azimuth `fast` and
    /// `magnitude` ms, along a well at `well_azimuth`, with a stand-off of `standoff`.
    fn row(name: &str, md: (f64, f64), fast: f64, magnitude: f64, standoff: f64) -> StageRow {
        let bins = vec![
            BinSample {
                magnitude,
                azimuth_fast: fast,
                azimuth_stderr: 1.0,
                magnitude_stderr: 0.2,
                along: f64::NAN,
            };
            20
        ];
        StageRow {
            well: "w".into(),
            stage: name.into(),
            md_top: md.0,
            md_base: md.1,
            md_unit: MdUnit::Metre,
            standoff: (standoff, standoff - 1.0, standoff + 1.0),
            corridor: Corridor {
                ring: Vec::new(),
                stats: corridor_stats(&bins, 90.0),
                bins,
                trends: None,
                curvature: Vec::new(),
                flags: Vec::new(),
            },
        }
    }

    /// The marks of the group of `class`.
    fn group<'a>(fig: &'a Figure, class: &str) -> &'a [Mark] {
        fig.marks
            .iter()
            .find_map(|m| match m {
                Mark::Group { class: c, marks } if c == class => Some(marks.as_slice()),
                _ => None,
            })
            .unwrap_or_else(|| panic!("no group {class}"))
    }

    /// (value, row) of the tick labels of a track (right-aligned numbers left of its axis).
    fn tick_labels(marks: &[Mark]) -> Vec<(f64, f32)> {
        marks
            .iter()
            .filter_map(|m| match m {
                Mark::Text {
                    text,
                    y,
                    anchor: Anchor::End,
                    ..
                } => Some((text.parse().unwrap(), y - 4.0)),
                _ => None,
            })
            .collect()
    }

    /// Rows of the horizontal value lines of `colour` in a track.
    fn value_rows(marks: &[Mark], colour: [u8; 3]) -> Vec<f32> {
        marks
            .iter()
            .filter_map(|m| match m {
                Mark::Line {
                    points, colour: c, ..
                } if *c == colour && points.len() == 2 && points[0].1 == points[1].1 => {
                    Some(points[0].1)
                }
                _ => None,
            })
            .collect()
    }

    #[test]
    fn track_values_land_on_their_ticks_and_ticks_are_round() {
        // Fast 50 deg along a well at 90: angle to well 40 deg (axial difference, by hand);
        // magnitudes 3 and 2 ms; stand-offs 10 and -5 m.
        let stages = [
            row("1", (1000.0, 1100.0), 50.0, 3.0, 10.0),
            row("2", (1100.0, 1250.0), 50.0, 2.0, -5.0),
        ];
        let lateral = row("lateral", (1000.0, 1250.0), 50.0, 2.5, 2.5);
        let fig = sheet("w", MdUnit::Metre, &stages, &lateral, true, &[]);
        for (track, colour, value) in [
            ("track angle_to_well", [0x20, 0x20, 0x20], 40.0),
            ("track magnitude", PETAL_BLUE, 3.0),
            ("track standoff", [0x75, 0x70, 0xb3], 10.0),
        ] {
            let marks = group(&fig, track);
            let ticks = tick_labels(marks);
            let at = ticks.iter().find(|(v, _)| *v == value);
            let (_, tick_row) = at.unwrap_or_else(|| panic!("{track}: no tick at {value}"));
            // The first stage's value line is at the row of the tick labelled with its value.
            assert_eq!(value_rows(marks, colour)[0], *tick_row, "{track}");
            // Round ticks: evenly spaced by 1, 2 or 5 times a power of ten (Heckbert 1990).
            let step = ticks[1].0 - ticks[0].0;
            let mantissa = step / 10f64.powf(step.log10().floor());
            assert!(
                [1.0, 2.0, 5.0].iter().any(|m| (mantissa - m).abs() < 1e-9),
                "{track}: step {step}"
            );
            for pair in ticks.windows(2) {
                assert!(((pair[1].0 - pair[0].0) - step).abs() < 1e-9, "{track}");
                assert!((pair[0].0 / step - (pair[0].0 / step).round()).abs() < 1e-9);
            }
        }
        // Stand-off is drawn positive down: 10 m below the horizon is below the zero line.
        let standoff = tick_labels(group(&fig, "track standoff"));
        let row_of = |v: f64| standoff.iter().find(|t| t.0 == v).unwrap().1;
        assert!(row_of(10.0) > row_of(0.0));
        // No curvature was given: no curvature track.
        assert!(!fig
            .marks
            .iter()
            .any(|m| matches!(m, Mark::Group { class, .. } if class == "track curvature")));
    }

    /// (centre, radius) of every rose of a sheet, from its white disc (72 points on a circle).
    fn rose_discs(fig: &Figure) -> Vec<((f32, f32), f32)> {
        fig.marks
            .iter()
            .filter_map(|m| match m {
                Mark::Group { class, marks } if class == "rose" => match &marks[0] {
                    Mark::Polygon { points, .. } => {
                        let n = 72.0;
                        let cx = points[..72].iter().map(|p| p.0).sum::<f32>() / n;
                        let cy = points[..72].iter().map(|p| p.1).sum::<f32>() / n;
                        Some(((cx, cy), (points[0].1 - cy).abs()))
                    }
                    _ => None,
                },
                _ => None,
            })
            .collect()
    }

    #[test]
    fn roses_sit_at_their_mid_md_and_never_overlap_for_ten_to_sixty_stages() {
        for n in [1usize, 10, 25, 45, 60] {
            // Uneven stage lengths (20, 35, 50 m in turn) from md 3000.
            let mut md = 3000.0;
            let stages: Vec<StageRow> = (0..n)
                .map(|k| {
                    let length = [20.0, 35.0, 50.0][k % 3];
                    md += length;
                    row(&format!("{}", k + 1), (md - length, md), 50.0, 3.0, 0.0)
                })
                .collect();
            let lateral = row("lateral", (3000.0, md), 50.0, 3.0, 0.0);
            let fig = sheet("w", MdUnit::Metre, &stages, &lateral, false, &[]);
            let discs = rose_discs(&fig);
            assert_eq!(discs.len(), n);
            // Centre x linear in mid md: the sheet's md axis runs from the first top (MD_LEFT)
            // to the last base (MD_RIGHT).
            for (s, ((x, _), _)) in stages.iter().zip(&discs) {
                let mid = 0.5 * (s.md_top + s.md_base);
                let expected =
                    MD_LEFT + (MD_RIGHT - MD_LEFT) * ((mid - 3000.0) / (md - 3000.0)) as f32;
                assert!((x - expected).abs() < 0.01, "{n} stages: {x} vs {expected}");
            }
            for (i, (a, ra)) in discs.iter().enumerate() {
                assert!(*ra >= ROSE_MIN || n > 40, "{n} stages: radius {ra}");
                for (b, rb) in &discs[i + 1..] {
                    let d = ((a.0 - b.0).powi(2) + (a.1 - b.1).powi(2)).sqrt();
                    assert!(
                        d >= ra + rb,
                        "{n} stages: roses overlap ({d} < {ra} + {rb})"
                    );
                }
            }
        }
    }
}
