//! The well jobs: `StagesJob` (per-stage corridor statistics, stage table, corridor polygons,
//! rose diagrams and a sheet per well) and `PlanJob` (a drilling-azimuth scan from a pad).
//! Both evaluate corridors the same way ([`Corridor`]); all outputs are staged and committed
//! together.

use super::anisotropy::AzimuthReference;
use super::{stage_bytes, stage_figure, AnisotropyRaster};
use crate::circular::axial_angle;
use crate::error::{FlexureError, Result};
use crate::figure::{polar, rose, Anchor, Figure, Mark};
use crate::grid::GridGeometry;
use crate::io::{commit_all, prepare_output_dir, read_raster, ReadOptions, StagedFile};
use crate::stages::{
    cells_inside, corridor_stats, percentiles, perpendicularity_score, BinSample, CorridorStats,
};
use crate::vectors::{stage_both_formats, FieldKind, GeometryKind, Layer, Property, VectorFeature};
use crate::wells::{corridor, parse_stages, parse_well, path_azimuth, Well};
use ndarray::Array2;
use std::fmt;
use std::path::{Path, PathBuf};

/// Cautions printed with every well result (REFERENCES.md section 8).
pub const WELL_CAUTION: &str = "Reading: laterals are commonly drilled near-perpendicular to \
the fast azimuth when it is read as the maximum horizontal stress, so that transverse hydraulic \
fractures form. Anisotropy is a proxy for stress and fractures, not a measurement of them; \
check against image logs, dipole sonic and microseismic. Drilling and completion decisions \
belong to licensed engineers and geoscientists under local regulations.";

/// Default corridor half width each side of the well, CRS units (150 m, common practice).
pub const DEFAULT_HALF_WIDTH: f64 = 150.0;

/// Petals of the rose diagrams over 0..180 degrees (10 degrees each).
const ROSE_PETALS: usize = 18;

/// A curvature raster to summarise in corridors.
struct Attributes {
    geometry: GridGeometry,
    names: Vec<String>,
    bands: Vec<Array2<f64>>,
}

impl Attributes {
    /// Reads `given`: a raster, or a folder of curvature outputs with `window` choosing
    /// `*_wNN.tif`.
    fn read(given: &Path, window: Option<usize>) -> Result<Self> {
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

    /// (attribute, (mean, p10, p50, p90)) inside `ring`.
    fn summarise(&self, ring: &[(f64, f64)]) -> Vec<(String, (f64, f64, f64, f64))> {
        let (cells, _) = cells_inside(&self.geometry, ring);
        self.names
            .iter()
            .zip(&self.bands)
            .map(|(name, band)| {
                let values: Vec<f64> = cells.iter().map(|&at| band[at]).collect();
                (name.clone(), percentiles(&values))
            })
            .collect()
    }
}

/// One evaluated corridor.
struct Corridor {
    ring: Vec<(f64, f64)>,
    stats: CorridorStats,
    bins: Vec<BinSample>,
    curvature: Vec<(String, (f64, f64, f64, f64))>,
    flag: String,
}

impl Corridor {
    /// Evaluates the corridor of half width `half_width` around the plan path `points`.
    fn evaluate(
        points: &[(f64, f64)],
        half_width: f64,
        anisotropy: &AnisotropyRaster,
        attributes: Option<&Attributes>,
    ) -> Self {
        let ring = corridor(points, half_width);
        let (cells, leaves) = cells_inside(&anisotropy.geometry, &ring);
        let bins: Vec<BinSample> = cells
            .iter()
            .filter_map(|&(r, c)| {
                anisotropy.sample(r, c).map(|s| BinSample {
                    magnitude: s.magnitude,
                    azimuth_fast: s.azimuth_fast,
                    azimuth_stderr: anisotropy.azimuth_stderr[(r, c)],
                })
            })
            .collect();
        let stats = corridor_stats(&bins, path_azimuth(points));
        let flag = match (leaves, bins.is_empty()) {
            (_, true) => "no fitted anisotropy bins in the corridor".to_string(),
            (true, false) => "corridor partly outside the anisotropy grid".to_string(),
            _ => String::new(),
        };
        let curvature = attributes.map_or_else(Vec::new, |a| a.summarise(&ring));
        Self {
            ring,
            stats,
            bins,
            curvature,
            flag,
        }
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

/// One well's inputs.
#[derive(Clone, Debug)]
pub struct WellInput {
    /// Path (`md,x,y[,tvd]`) or deviation survey (`md,inc,azi`) CSV.
    pub well: PathBuf,
    /// Stage table CSV (`stage,md_top,md_base`).
    pub stages: PathBuf,
    /// Wellhead (x, y) for a survey.
    pub wellhead: Option<(f64, f64)>,
    /// TVD of the first survey station (kelly bushing or datum offset).
    pub kb: f64,
}

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
    /// Corridor half width in CRS units.
    pub half_width: f64,
    /// Metres per measured-depth unit of the well files (1 for metres, 0.3048 for feet).
    pub md_unit_m: f64,
    /// North of survey azimuths.
    pub reference: AzimuthReference,
    /// Output folder.
    pub out_dir: PathBuf,
}

impl StagesJob {
    /// A job with the defaults: 150 m half width, metres, grid-north surveys.
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
            md_unit_m: 1.0,
            reference: AzimuthReference::Grid,
            out_dir: out_dir.into(),
        }
    }

    /// Runs the job and reports per well.
    pub fn run(&self) -> Result<StagesReport> {
        check_half_width(self.half_width)?;
        if self.wells.is_empty() {
            return Err(FlexureError::Parameter(
                "no well given: use --well FILE --stages FILE".into(),
            ));
        }
        let anisotropy = AnisotropyRaster::read(&self.anisotropy)?;
        let attributes = self
            .curvature
            .as_deref()
            .map(|p| Attributes::read(p, self.window))
            .transpose()?;
        let offset = self.azimuth_offset(&anisotropy.geometry)?;
        let md_scale = self.md_unit_m / anisotropy.geometry.metres_per_unit;
        let mut rows = Vec::new();
        let mut staged = Vec::new();
        let mut reports = Vec::new();
        prepare_output_dir(&self.out_dir.join("roses"))?;
        for input in &self.wells {
            let (well, stages) = read_well(input, md_scale, offset)?;
            let mut evaluated = Vec::new();
            for st in &stages {
                let points = well
                    .interval(st.md_top, st.md_base)
                    .expect("checked inside the path");
                evaluated.push((
                    st.name.clone(),
                    st.md_top,
                    st.md_base,
                    Corridor::evaluate(&points, self.half_width, &anisotropy, attributes.as_ref()),
                ));
            }
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
            let lateral_points = well.interval(top, base).expect("checked inside the path");
            let lateral = Corridor::evaluate(
                &lateral_points,
                self.half_width,
                &anisotropy,
                attributes.as_ref(),
            );
            for (name, t, b, c) in evaluated.iter().chain(std::iter::once(&(
                "lateral".to_string(),
                top,
                base,
                lateral,
            ))) {
                staged.extend(self.stage_rose(&well.name, name, c)?);
                rows.push(StageRow {
                    well: well.name.clone(),
                    stage: name.clone(),
                    md_top: *t / md_scale,
                    md_base: *b / md_scale,
                    corridor: clone_corridor(c),
                });
            }
            staged.extend(self.stage_sheet(&well.name, &evaluated)?);
            let lateral = &rows.last().expect("lateral row").corridor;
            reports.push(WellReport {
                well: well.name.clone(),
                stages: evaluated.len(),
                flagged: evaluated
                    .iter()
                    .filter(|e| !e.3.flag.is_empty())
                    .map(|e| format!("{}: {}", e.0, e.3.flag))
                    .collect(),
                lateral: lateral.stats,
            });
        }
        staged.push(stage_bytes(
            &self.out_dir.join("stages.csv"),
            stage_table(&rows).as_bytes(),
        )?);
        staged.extend(stage_corridors(
            &self.out_dir,
            "stage_corridors",
            &anisotropy.geometry,
            &rows,
        )?);
        commit_all(staged)?;
        Ok(StagesReport {
            out_dir: self.out_dir.clone(),
            wells: reports,
        })
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

    fn stage_rose(&self, well: &str, stage: &str, c: &Corridor) -> Result<Vec<StagedFile>> {
        let fig = stage_rose_figure(&format!("{well} {stage}"), c);
        stage_figure(
            &self
                .out_dir
                .join("roses")
                .join(format!("{}_{}", safe(well), safe(stage))),
            &fig,
        )
    }

    fn stage_sheet(
        &self,
        well: &str,
        stages: &[(String, f64, f64, Corridor)],
    ) -> Result<Vec<StagedFile>> {
        let fig = sheet(well, stages);
        stage_figure(&self.out_dir.join(format!("{}_sheet", safe(well))), &fig)
    }
}

fn clone_corridor(c: &Corridor) -> Corridor {
    Corridor {
        ring: c.ring.clone(),
        stats: c.stats,
        bins: Vec::new(),
        curvature: c.curvature.clone(),
        flag: c.flag.clone(),
    }
}

fn check_half_width(h: f64) -> Result<()> {
    if h.is_finite() && h > 0.0 {
        Ok(())
    } else {
        Err(FlexureError::Parameter(format!(
            "--half-width {h} must be a positive distance"
        )))
    }
}

/// Reads a well and its stages, refusing stages outside the path's md range.
fn read_well(
    input: &WellInput,
    md_scale: f64,
    azimuth_offset: f64,
) -> Result<(Well, Vec<crate::wells::Stage>)> {
    let text = |p: &Path| std::fs::read_to_string(p).map_err(|e| FlexureError::read(p, e));
    let stations = parse_well(
        &text(&input.well)?,
        &input.well,
        input.wellhead,
        input.kb,
        md_scale,
        azimuth_offset,
    )?;
    let name = input
        .well
        .file_stem()
        .unwrap_or_default()
        .to_string_lossy()
        .to_string();
    let well = Well { name, stations };
    let stages = parse_stages(&text(&input.stages)?, &input.stages, md_scale)?;
    let (lo, hi) = well.md_range();
    if let Some(s) = stages.iter().find(|s| s.md_top < lo || s.md_base > hi) {
        return Err(FlexureError::input(
            &input.stages,
            format!(
                "line {}: stage {} ({} .. {}) is outside the md range of {} ({} .. {})",
                s.line,
                s.name,
                s.md_top / md_scale,
                s.md_base / md_scale,
                input.well.display(),
                lo / md_scale,
                hi / md_scale
            ),
        ));
    }
    Ok((well, stages))
}

/// One row of the stage table.
struct StageRow {
    well: String,
    stage: String,
    md_top: f64,
    md_base: f64,
    corridor: Corridor,
}

fn stage_table(rows: &[StageRow]) -> String {
    corridor_table(
        &["well", "stage", "md_top", "md_base"],
        rows.iter().map(|r| {
            let lead = vec![
                csv_text(&r.well),
                csv_text(&r.stage),
                number(r.md_top),
                number(r.md_base),
            ];
            (lead, &r.corridor)
        }),
    )
}

/// A CSV of corridors: the `lead` columns, the statistics, the flag and the curvature columns
/// (named after the first corridor).
fn corridor_table<'a>(
    lead: &[&str],
    rows: impl Iterator<Item = (Vec<String>, &'a Corridor)>,
) -> String {
    let mut body = String::new();
    let mut curvature_cols = None;
    for (mut fields, c) in rows {
        curvature_cols.get_or_insert_with(|| c.curvature_columns());
        let numbers = c.numbers();
        let (stats, curvature) = numbers.split_at(STAT_COLUMNS.len());
        fields.extend(stats.iter().map(|v| number(*v)));
        fields.push(csv_text(&c.flag));
        fields.extend(curvature.iter().map(|v| number(*v)));
        body += &(fields.join(",") + "\n");
    }
    let mut header: Vec<String> = lead.iter().map(|s| s.to_string()).collect();
    header.extend(STAT_COLUMNS.iter().map(|s| s.to_string()));
    header.push("flag".into());
    header.extend(curvature_cols.unwrap_or_default());
    header.join(",") + "\n" + &body
}

/// A CSV number: integers as such, tiny magnitudes (p-values) in exponent form, others with
/// six decimals; empty for NaN.
fn number(v: f64) -> String {
    if !v.is_finite() {
        String::new()
    } else if v.fract() == 0.0 && v.abs() < 1e15 {
        format!("{v:.0}")
    } else if v.abs() < 1e-3 {
        format!("{v:.3e}")
    } else {
        format!("{v:.6}")
    }
}

fn csv_text(s: &str) -> String {
    if s.contains([',', '"']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// File-name-safe form of a label.
fn safe(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
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
    let mut fields: Vec<(&str, FieldKind)> = vec![
        ("well", FieldKind::Text),
        ("stage", FieldKind::Text),
        ("md_top", FieldKind::Real),
        ("md_base", FieldKind::Real),
    ];
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
            let mut values = vec![
                Property::Text(r.well.clone()),
                Property::Text(r.stage.clone()),
                Property::Number(r.md_top),
                Property::Number(r.md_base),
            ];
            values.extend(stats.iter().map(|v| Property::Number(*v)));
            values.push(Property::Text(r.corridor.flag.clone()));
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
    if !c.flag.is_empty() {
        notes.push(format!("flag: {}", c.flag));
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
fn sheet(well: &str, stages: &[(String, f64, f64, Corridor)]) -> Figure {
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
    for (k, (name, _, _, c)) in stages.iter().enumerate() {
        let rose = stage_rose_figure(name, c);
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
        stages.iter().map(|s| s.3.stats.angle_to_well),
    );
    bar_strip(
        &mut fig,
        strip_top + 170.0,
        "magnitude_mean (ms)",
        f64::NAN,
        stages.iter().map(|s| s.3.stats.magnitude_mean),
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
        crate::colour::short(max),
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
        writeln!(f, "wrote stages.csv, stage_corridors.gpkg, stage_corridors.geojson, roses/ and one sheet per well in {}", self.out_dir.display())?;
        writeln!(f, "{WELL_CAUTION}")
    }
}

/// Options of the drilling-azimuth scan.
#[derive(Clone, Debug)]
pub struct PlanJob {
    /// `anisotropy.tif` or its folder.
    pub anisotropy: PathBuf,
    /// Curvature raster, or its folder with `window`.
    pub curvature: Option<PathBuf>,
    /// Window choosing the curvature file in a folder.
    pub window: Option<usize>,
    /// Pad (heel) position, CRS units.
    pub pad: (f64, f64),
    /// Lateral length, CRS units.
    pub lateral: f64,
    /// Azimuth step, degrees (candidates 0 to < 180).
    pub step: f64,
    /// Corridor half width, CRS units.
    pub half_width: f64,
    /// Output folder.
    pub out_dir: PathBuf,
}

/// Share of the best score that still counts as a good azimuth.
const GOOD_SHARE: f64 = 0.9;

impl PlanJob {
    /// A scan with 5-degree steps and a 150 m half width.
    pub fn new(
        anisotropy: impl Into<PathBuf>,
        pad: (f64, f64),
        lateral: f64,
        out_dir: impl Into<PathBuf>,
    ) -> Self {
        Self {
            anisotropy: anisotropy.into(),
            curvature: None,
            window: None,
            pad,
            lateral,
            step: 5.0,
            half_width: DEFAULT_HALF_WIDTH,
            out_dir: out_dir.into(),
        }
    }

    /// Runs the scan.
    pub fn run(&self) -> Result<PlanReport> {
        check_half_width(self.half_width)?;
        if !(self.lateral.is_finite() && self.lateral > 0.0) {
            return Err(FlexureError::Parameter(format!(
                "--lateral {} must be a positive length",
                self.lateral
            )));
        }
        if !(self.step.is_finite() && self.step > 0.0 && self.step <= 90.0) {
            return Err(FlexureError::Parameter(format!(
                "--step {} must be between 0 and 90 degrees",
                self.step
            )));
        }
        let anisotropy = AnisotropyRaster::read(&self.anisotropy)?;
        let attributes = self
            .curvature
            .as_deref()
            .map(|p| Attributes::read(p, self.window))
            .transpose()?;
        let n = (180.0 / self.step).round() as usize;
        let candidates: Vec<Candidate> = (0..n)
            .map(|k| {
                let azimuth = k as f64 * self.step;
                let line = self.lateral_line(azimuth);
                let c =
                    Corridor::evaluate(&line, self.half_width, &anisotropy, attributes.as_ref());
                Candidate {
                    azimuth,
                    score: perpendicularity_score(&c.bins, azimuth),
                    line,
                    corridor: c,
                }
            })
            .collect();
        if candidates.iter().all(|c| c.corridor.bins.is_empty()) {
            return Err(FlexureError::input(
                &anisotropy.path,
                "no candidate lateral from the pad crosses a fitted bin: check --pad and --lateral",
            ));
        }
        let scored = |c: &&Candidate| c.score.is_finite();
        let best = candidates
            .iter()
            .filter(scored)
            .max_by(|a, b| a.score.total_cmp(&b.score))
            .expect("some candidate scored");
        let worst = candidates
            .iter()
            .filter(scored)
            .min_by(|a, b| a.score.total_cmp(&b.score))
            .expect("some candidate scored");
        let good: Vec<f64> = candidates
            .iter()
            .filter(|c| c.score >= GOOD_SHARE * best.score)
            .map(|c| c.azimuth)
            .collect();
        prepare_output_dir(&self.out_dir)?;
        let mut staged = vec![stage_bytes(
            &self.out_dir.join("plan.csv"),
            plan_table(&candidates).as_bytes(),
        )?];
        staged.extend(stage_figure(
            &self.out_dir.join("plan_scores"),
            &polar_chart(&candidates, best),
        )?);
        staged.extend(stage_candidates(
            &self.out_dir,
            &anisotropy.geometry,
            &[("best", best), ("worst", worst)],
        )?);
        commit_all(staged)?;
        Ok(PlanReport {
            best_azimuth: best.azimuth,
            best_score: best.score,
            fast_azimuth: best.corridor.stats.fast_azimuth,
            good_range: axial_range(&good, self.step),
            worst_azimuth: worst.azimuth,
            out_dir: self.out_dir.clone(),
        })
    }

    fn lateral_line(&self, azimuth: f64) -> Vec<(f64, f64)> {
        let (s, c) = azimuth.to_radians().sin_cos();
        vec![
            self.pad,
            (self.pad.0 + self.lateral * s, self.pad.1 + self.lateral * c),
        ]
    }
}

struct Candidate {
    azimuth: f64,
    score: f64,
    line: Vec<(f64, f64)>,
    corridor: Corridor,
}

fn plan_table(candidates: &[Candidate]) -> String {
    corridor_table(
        &["azimuth", "score"],
        candidates
            .iter()
            .map(|c| (vec![number(c.azimuth), number(c.score)], &c.corridor)),
    )
}

/// Best and worst candidate laterals as lines, GeoPackage and GeoJSON.
fn stage_candidates(
    dir: &Path,
    g: &GridGeometry,
    picks: &[(&str, &Candidate)],
) -> Result<Vec<StagedFile>> {
    let fields = [
        ("pick", FieldKind::Text),
        ("azimuth", FieldKind::Real),
        ("score", FieldKind::Real),
        ("fast_azimuth", FieldKind::Real),
        ("angle_to_well", FieldKind::Real),
        ("n_bins", FieldKind::Integer),
    ];
    let features: Vec<VectorFeature> = picks
        .iter()
        .map(|(pick, c)| VectorFeature {
            points: c.line.clone(),
            values: vec![
                Property::Text(pick.to_string()),
                Property::Number(c.azimuth),
                Property::Number(c.score),
                Property::Number(c.corridor.stats.fast_azimuth),
                Property::Number(c.corridor.stats.angle_to_well),
                Property::Number(c.corridor.stats.n_bins as f64),
            ],
        })
        .collect();
    let layer = Layer {
        name: "plan_candidates",
        kind: GeometryKind::Line,
        fields: &fields,
        features: &features,
    };
    stage_both_formats(dir, &g.crs_wkt, &layer)
}

/// Scores on a polar chart: radius = score (0..1) at each azimuth and its opposite.
fn polar_chart(candidates: &[Candidate], best: &Candidate) -> Figure {
    let mut fig = Figure::new(480, 560);
    let (cx, cy, r) = (240.0f32, 250.0f32, 180.0f32);
    fig.text(
        cx,
        28.0,
        16.0,
        "Drilling-azimuth score (1 = perpendicular to fast)",
        Anchor::Middle,
    );
    for ring in [0.5f32, 1.0] {
        fig.line(
            (0..=72)
                .map(|k| polar(cx, cy, r * ring, 5.0 * k as f64))
                .collect(),
            [0xbb, 0xbb, 0xbb],
            1.0,
        );
    }
    for (az, label) in [(0.0, "N"), (90.0, "E"), (180.0, "S"), (270.0, "W")] {
        let (x, y) = polar(cx, cy, r + 16.0, az);
        fig.text(x, y + 5.0, 12.0, label, Anchor::Middle);
    }
    let mut points: Vec<(f32, f32)> = Vec::new();
    for offset in [0.0, 180.0] {
        for c in candidates {
            let s = if c.score.is_finite() { c.score } else { 0.0 };
            points.push(polar(cx, cy, r * s as f32, c.azimuth + offset));
        }
    }
    fig.marks.push(Mark::Polygon {
        points,
        fill: [0xc6, 0xdb, 0xef],
        stroke: Some([0x21, 0x71, 0xb5]),
    });
    let fast = best.corridor.stats.fast_azimuth;
    fig.line(
        vec![
            polar(cx, cy, r, best.azimuth),
            polar(cx, cy, r, best.azimuth + 180.0),
        ],
        [0x20, 0x20, 0x20],
        2.5,
    );
    if fast.is_finite() {
        fig.line(
            vec![polar(cx, cy, r, fast), polar(cx, cy, r, fast + 180.0)],
            [0xd9, 0x5f, 0x02],
            2.0,
        );
    }
    fig.text(
        20.0,
        470.0,
        12.0,
        format!(
            "best {:.0} deg (score {:.2}); mean fast azimuth {:.1} deg (orange)",
            best.azimuth, best.score, fast
        ),
        Anchor::Start,
    );
    fig.text(
        20.0,
        492.0,
        11.0,
        "Anisotropy is a proxy for stress and fractures, not a measurement of them.",
        Anchor::Start,
    );
    fig.text(
        20.0,
        510.0,
        11.0,
        "Decisions belong to licensed engineers and geoscientists under local regulations.",
        Anchor::Start,
    );
    fig
}

/// Smallest axial interval (from, to) holding every azimuth of `good` (sampled every `step`).
fn axial_range(good: &[f64], step: f64) -> (f64, f64) {
    let mut sorted = good.to_vec();
    sorted.sort_by(f64::total_cmp);
    let Some(&first) = sorted.first() else {
        return (f64::NAN, f64::NAN);
    };
    // The largest gap between neighbours (cyclically) is outside the range.
    let mut best_gap = (
        sorted[0] + 180.0 - sorted[sorted.len() - 1],
        sorted.len() - 1,
    );
    for k in 1..sorted.len() {
        let gap = sorted[k] - sorted[k - 1];
        if gap > best_gap.0 {
            best_gap = (gap, k - 1);
        }
    }
    if best_gap.0 <= step * 1.5 && sorted.len() > 1 {
        return (0.0, 180.0);
    }
    let end = sorted[best_gap.1];
    let start = sorted[(best_gap.1 + 1) % sorted.len()];
    if sorted.len() == 1 {
        (first, first)
    } else {
        (start, end)
    }
}

/// What the drilling-azimuth scan found.
#[derive(Clone, Debug)]
pub struct PlanReport {
    /// Best candidate azimuth, degrees from grid north.
    pub best_azimuth: f64,
    /// Its score, 0..1.
    pub best_score: f64,
    /// Mean fast azimuth along the best candidate.
    pub fast_azimuth: f64,
    /// Azimuths within 10% of the best score, (from, to) clockwise (may wrap through 0).
    pub good_range: (f64, f64),
    /// Worst candidate azimuth.
    pub worst_azimuth: f64,
    /// Output folder.
    pub out_dir: PathBuf,
}

impl fmt::Display for PlanReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "best lateral azimuth {:.1} deg from grid north (score {:.3}; mean fast azimuth {:.1}, angle {:.1} deg)", self.best_azimuth, self.best_score, self.fast_azimuth, axial_angle(self.best_azimuth, self.fast_azimuth))?;
        writeln!(
            f,
            "azimuths within 10% of the best score: {:.0} .. {:.0} deg; worst {:.0} deg",
            self.good_range.0, self.good_range.1, self.worst_azimuth
        )?;
        writeln!(
            f,
            "wrote plan.csv, plan_scores.svg/png and plan_candidates.gpkg/geojson in {}",
            self.out_dir.display()
        )?;
        writeln!(f, "{WELL_CAUTION}")
    }
}

#[cfg(test)]
mod tests {
    use super::axial_range;

    #[test]
    fn axial_range_wraps_through_north() {
        assert_eq!(axial_range(&[170.0, 175.0, 0.0, 5.0], 5.0), (170.0, 5.0));
        assert_eq!(axial_range(&[90.0, 95.0, 100.0], 5.0), (90.0, 100.0));
        assert_eq!(axial_range(&[90.0], 5.0), (90.0, 90.0));
    }
}
