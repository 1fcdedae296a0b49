//! The window-study job: the horizon read as for `curvature`, the study of one attribute over
//! the windows ([`crate::surface::study`]), and its outputs: `window_study.json`,
//! `window_study.csv`, a chart (SVG and PNG) of noise and detail against window size, a panel
//! PNG of the maps at every window on one colour scale and, with `adaptive`, the adaptive map
//! and the chosen-window grid as a GeoTIFF. The study streams the grid in batches of rows sized
//! from the memory budget as `curvature` does, the adaptive rows going straight to the GeoTIFF;
//! the panel keeps only the cells its pictures show. Outputs are staged and committed
//! together.

use super::curvature::{bust_file_names, stage_busts, CurvatureJob, Prepared};
use super::{batch_rows, default_memory_budget, stage_bytes, stage_figure, stage_png};
use crate::draw::axis::{Axis, GRID};
use crate::draw::colour::{short, Clip, ColourScale};
use crate::draw::figure::{Anchor, Figure, Mark};
use crate::draw::map::{
    cells_to_pixmap, colour_cells, panel, picture_scale, wrap_to, PictureCells, Text,
};
use crate::draw::ticks::tick_label;
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::geotiff::{set_block_cache, BandSpec, Layout};
use crate::io::{commit_all, nodata_if_null, refuse_overwrite, GeoTiffWriter, StagedFile};
use crate::provenance::Provenance;
use crate::surface::curvature::{AttributeDef, DerivativeOrder, FlatTolerance};
use crate::surface::horizon::ZUnit;
use crate::surface::study::busts::{Busts, BUST_TEST};
use crate::surface::study::choice::POOL_RADIUS;
use crate::surface::study::footprint::Footprint;
use crate::surface::study::noise::NOISE_ESTIMATOR;
use crate::surface::study::thresholds::{StepTest, PROPAGATION_ALPHA};
use crate::surface::study::{plan, ChosenRows, Study, WindowFigures, NOISE_BAND, WINDOW_RULE};
use crate::surface::window::{narrow_exactly, Sample};
use ndarray::{s, Array2, ArrayView2};
use serde::Serialize;
use std::fmt;
use std::path::{Path, PathBuf};

/// Name of the bust files (`.csv`, `.gpkg`, `.geojson`).
const BUSTS_NAME: &str = "window_study_busts";

/// Largest ratio of bin sides (long over short) read as square.
const SQUARE_BINS: f64 = 1.05;

/// A caution when the bins (`spacing_m`, metres along rows and columns) are not square: the
/// windows are square in cells, so they span different distances along the two axes, and on
/// generated horizons with 2:1 bins the recommendation was about one window step off the
/// least-true-error window (a review's measurement; README, window study).
fn non_square_caution((along_row, along_column): (f64, f64)) -> Option<String> {
    let ratio = along_row.max(along_column) / along_row.min(along_column);
    (ratio > SQUARE_BINS).then(|| {
        format!(
            "bins are {along_row:.2} x {along_column:.2} m, not square: the windows are square in cells and span {ratio:.2} times as much ground along one axis, and the recommended window may be about one step off"
        )
    })
}

/// Long side in pixels of each map of the window-study panel.
const PANEL_MAP_SIZE: f64 = 300.0;

/// Options of the window study: the horizon, windows and memory budget as for `curvature` (its
/// `attributes` are not used), the attribute studied and whether to write the adaptive map.
#[derive(Clone, Debug)]
pub struct WindowStudyJob {
    /// Horizon (domain, units, velocity), reading options, windows, min-valid, memory budget
    /// and output folder, as for `curvature`.
    pub fit: CurvatureJob,
    /// The attribute studied.
    pub attribute: &'static AttributeDef,
    /// Also write the adaptive-window map.
    pub adaptive: bool,
}

impl WindowStudyJob {
    /// Runs the study.
    pub fn run(&self) -> Result<WindowStudyReport> {
        let budget = self.fit.memory.unwrap_or_else(default_memory_budget);
        set_block_cache(budget / 4);
        let mut notices = Vec::new();
        let mut sorted = self.fit.windows.clone();
        sorted.sort_unstable();
        sorted.dedup();
        if sorted != self.fit.windows {
            notices.push(format!(
                "windows sorted and duplicates removed: {}",
                join(&sorted)
            ));
        }
        if sorted.len() < 2 {
            return Err(FlexureError::Parameter(
                "a window study needs at least two different windows, e.g. --windows 3,5,9,17"
                    .into(),
            ));
        }
        let prepared = self.fit.prepare(true)?;
        let provenance = self.fit.provenance(&prepared)?;
        let Prepared {
            windows,
            mut horizon,
            tolerance,
            busts,
        } = prepared;
        let busts = busts.expect("the study's horizon is despiked");
        notices.extend(horizon.notes.iter().cloned());
        let out = &self.fit.out_dir;
        let names = ["window_study.json", "window_study.csv"]
            .map(String::from)
            .into_iter()
            .chain(bust_file_names(BUSTS_NAME));
        for name in names {
            refuse_overwrite(&out.join(name), &self.fit.horizon.inputs())?;
        }
        let adaptive_path = self.adaptive.then(|| {
            out.join(format!(
                "{}_{}_adaptive.tif",
                stem(&self.fit.horizon.path),
                self.attribute.id
            ))
        });
        if let Some(path) = &adaptive_path {
            refuse_overwrite(path, &self.fit.horizon.inputs())?;
        }
        let g = &horizon.geometry;
        // As in curvature: the depth held as float32 when every value is one (same bits).
        let depth = std::mem::take(&mut horizon.depth);
        let (s, adaptive) = match narrow_exactly(&depth) {
            Some(narrow) => {
                drop(depth);
                self.study(
                    narrow.view(),
                    g,
                    &windows,
                    tolerance,
                    &provenance,
                    &adaptive_path,
                )?
            }
            None => self.study(
                depth.view(),
                g,
                &windows,
                tolerance,
                &provenance,
                &adaptive_path,
            )?,
        };
        notices.extend(s.noise.caution());
        let spacing_m = {
            let (sx, sy) = g.spacing();
            (sx * g.metres_per_unit, sy * g.metres_per_unit)
        };
        notices.extend(non_square_caution(spacing_m));
        let mut staged = vec![
            stage_bytes(
                &out.join("window_study.json"),
                self.json(&s, &busts, spacing_m, &notices, &provenance)
                    .as_bytes(),
            )?,
            stage_bytes(
                &out.join("window_study.csv"),
                &csv(&s, &out.join("window_study.csv"))?,
            )?,
        ];
        let units = ChartUnits {
            min_feature_m: self.fit.min_feature_m,
            bin_m: spacing_m,
            metres_per_unit: g.metres_per_unit,
            z_unit: horizon.z_unit,
        };
        staged.extend(stage_chart(
            &out.join("window_study_chart"),
            &s,
            self.attribute,
            &units,
        )?);
        staged.push(self.stage_panel(
            &out.join("window_study_panel.png"),
            &s,
            g.mirrored_in_pictures(),
        )?);
        staged.extend(adaptive);
        staged.extend(stage_busts(out, BUSTS_NAME, g, &busts)?);
        commit_all(staged)?;
        Ok(WindowStudyReport {
            attribute: self.attribute.id,
            unit: self.attribute.unit,
            noise_sigma: s.noise.sigma * g.metres_per_unit,
            windows: s.windows.clone(),
            recommended: s.recommended,
            busts: busts.cells.len(),
            noise_model: s.noise_model(),
            reason: s.reason(),
            out_dir: out.clone(),
            adaptive: adaptive_path,
            notices,
        })
    }

    /// Creates the adaptive map's GeoTIFF (the attribute and the `chosen_window` band), ready
    /// for rows.
    fn create_adaptive(
        &self,
        path: &Path,
        geometry: &crate::grid::GridGeometry,
        provenance: &Provenance,
        steps: &[StepTest],
    ) -> Result<GeoTiffWriter> {
        let bands = [
            BandSpec {
                description: self.attribute.id,
                unit: self.attribute.unit,
            },
            BandSpec {
                description: "chosen_window",
                unit: "cells",
            },
        ];
        let meta = provenance
            .clone()
            .with("attribute", self.attribute.id)
            .with("method", WINDOW_RULE)
            .with("step_thresholds", step_list(steps))
            .items()
            .to_vec();
        GeoTiffWriter::create::<f32>(path, geometry, &bands, &meta, self.fit.tiff, Layout::Float)
    }

    /// Plans and runs the study over `depth`, writing the adaptive map's rows as batches come
    /// when `adaptive_path` is given; the study and the staged adaptive GeoTIFF.
    fn study<T: Sample>(
        &self,
        depth: ArrayView2<T>,
        g: &GridGeometry,
        windows: &[usize],
        tolerance: FlatTolerance,
        provenance: &Provenance,
        adaptive_path: &Option<PathBuf>,
    ) -> Result<(Study, Option<StagedFile>)> {
        let budget = self.fit.memory.unwrap_or_else(default_memory_budget);
        let mut plan = plan(
            depth,
            g,
            windows,
            self.attribute,
            self.fit.min_valid,
            tolerance,
        )?
        .ok_or_else(|| {
            FlexureError::input(
                &self.fit.horizon.path,
                "no full 3 x 3 window: cannot estimate the noise",
            )
        })?;
        if let Some(metres) = self.fit.min_feature_m {
            plan.set_min_feature(metres)?;
        }
        let mut writer = match adaptive_path {
            Some(path) => Some(self.create_adaptive(path, g, provenance, &plan.steps)?),
            None => None,
        };
        let rows = batch_rows(
            budget / 2,
            g.cols,
            plan.batch_cell_bytes().div_ceil(8),
            plan.working_rows(),
        );
        let shown = PictureCells::new((g.cols, g.rows), picture_scale(g, PANEL_MAP_SIZE));
        let s = plan.run(
            rows,
            &shown.rows,
            &shown.cols,
            &mut |batch| match &mut writer {
                Some(writer) => write_adaptive(writer, batch),
                None => Ok(()),
            },
        )?;
        let staged = writer.map(GeoTiffWriter::finish).transpose()?;
        Ok((s, staged))
    }

    fn json(
        &self,
        s: &Study,
        busts: &Busts,
        spacing_m: (f64, f64),
        notices: &[String],
        provenance: &Provenance,
    ) -> String {
        let doc = StudyJson {
            input: self.fit.horizon.path.display().to_string(),
            attribute: self.attribute.id,
            unit: self.attribute.unit,
            horizon_noise_sd: s.noise.sigma,
            horizon_noise_unit: "CRS length unit (positive-down depth)",
            noise_estimator: NOISE_ESTIMATOR,
            noise_cells: s.noise.n,
            busts: busts.cells.len(),
            bust_test: BUST_TEST,
            bust_false_alarm_rate: busts.false_alarm,
            bust_threshold_scales: busts.threshold,
            bust_scale: busts.scale,
            rule: WINDOW_RULE,
            compared_derivatives: format!("{:?}", self.attribute.order).to_lowercase(),
            derivative_noise_unit: match self.attribute.order {
                DerivativeOrder::First => "m/m (gradient)",
                DerivativeOrder::Second => "1/km (Hessian, z_xx, z_yy, sqrt(2) z_xy)",
            },
            pooling_box_cells: 2 * POOL_RADIUS + 1,
            propagation_alpha: PROPAGATION_ALPHA,
            steps: &s.steps,
            noise_band_sd: NOISE_BAND,
            windows: (s.windows.iter())
                .map(|figures| JsonWindow {
                    figures,
                    window_size_m: [
                        figures.window as f64 * spacing_m.0,
                        figures.window as f64 * spacing_m.1,
                    ],
                })
                .collect(),
            recommended_window: s.recommended,
            noise_model: s.noise_model(),
            residual_short_wave_share: s.noise.short_wave_share,
            noise_correlation_width_cells: s.noise.colour.as_ref().map(|c| c.width_cells),
            footprints: &s.noise.footprints,
            min_feature_m: self.fit.min_feature_m,
            min_window: s.min_window,
            reason: s.reason(),
            notices,
            provenance: provenance.to_json(),
        };
        // Through a JSON value, whose keys are kept sorted: the file lists them alphabetically.
        serde_json::to_value(&doc)
            .and_then(|v| serde_json::to_string_pretty(&v))
            .unwrap_or_default()
            + "\n"
    }

    /// The panel of maps; `mirrored`: the grid's rows run north ([`GridGeometry::mirrored_in_pictures`]),
    /// so its maps are drawn last row first.
    fn stage_panel(&self, path: &Path, s: &Study, mirrored: bool) -> Result<StagedFile> {
        let reference = s
            .windows
            .iter()
            .position(|w| w.window == s.recommended)
            .unwrap_or(0);
        let mut distribution = s.distributions[reference].clone();
        let scale =
            ColourScale::from_quantiles(self.attribute.scale, &mut distribution, Clip::Auto)
                .ok_or_else(|| {
                    FlexureError::input(
                        &self.fit.horizon.path,
                        "the attribute is null everywhere at the recommended window",
                    )
                })?;
        // The samples are the cells the pictures show, one a pixel.
        let tile = |m: &Array2<f64>| {
            let rows = match mirrored {
                true => m.slice(s![..;-1, ..]),
                false => m.view(),
            };
            cells_to_pixmap(&colour_cells(&rows.to_owned(), &scale, None), (1.0, 1.0))
        };
        let mut maps: Vec<(String, tiny_skia::Pixmap)> = s
            .windows
            .iter()
            .zip(&s.samples)
            .map(|(w, m)| {
                let mark = if w.window == s.recommended {
                    " (recommended)"
                } else {
                    ""
                };
                (format!("window {}{mark}", w.window), tile(m))
            })
            .collect();
        if let Some(adaptive) = s.samples.last() {
            maps.push(("adaptive (window per cell)".to_string(), tile(adaptive)));
        }
        let title = format!(
            "{} of {} at each window and adaptive (one colour scale)",
            self.attribute.id,
            stem(&self.fit.horizon.path)
        );
        let page = panel(
            &maps,
            &scale,
            &title,
            &format!("{} ({})", self.attribute.id, self.attribute.unit),
        );
        stage_png(path, &page)
    }
}

/// The JSON report (`window_study.json`); every field named once, here.
#[derive(Serialize)]
struct StudyJson<'a> {
    input: String,
    attribute: &'a str,
    unit: &'a str,
    horizon_noise_sd: f64,
    horizon_noise_unit: &'a str,
    noise_estimator: &'a str,
    noise_cells: usize,
    /// Picking busts found and set null before the fits.
    busts: usize,
    bust_test: &'a str,
    bust_false_alarm_rate: f64,
    bust_threshold_scales: f64,
    /// Robust scale of the bust test's residuals (CRS length unit).
    bust_scale: f64,
    rule: &'a str,
    compared_derivatives: String,
    derivative_noise_unit: &'a str,
    pooling_box_cells: usize,
    propagation_alpha: f64,
    steps: &'a [StepTest],
    noise_band_sd: f64,
    windows: Vec<JsonWindow<'a>>,
    recommended_window: usize,
    /// The noise model the tests used, in words.
    noise_model: String,
    /// The fit residuals' short-wavelength power over their mid-wavelength power (about 1 for
    /// white noise).
    residual_short_wave_share: Option<f64>,
    /// Widths (cells, along rows and along columns) of the Gaussian that colours correlated
    /// noise; `None` for white noise.
    noise_correlation_width_cells: Option<[f64; 2]>,
    footprints: &'a [Footprint],
    min_feature_m: Option<f64>,
    /// The smallest window the adaptive map and the recommendation could take.
    min_window: usize,
    /// Why the recommended window was chosen.
    reason: String,
    notices: &'a [String],
    provenance: serde_json::Value,
}

/// One window in the JSON report: its figures and the window's size in metres.
#[derive(Serialize)]
struct JsonWindow<'a> {
    #[serde(flatten)]
    figures: &'a WindowFigures,
    window_size_m: [f64; 2],
}

/// Writes one batch of the adaptive map and chosen windows (nulls as the nodata value).
fn write_adaptive(writer: &mut GeoTiffWriter, batch: ChosenRows) -> Result<()> {
    let adaptive = batch.adaptive.into_iter().map(nodata_if_null).collect();
    let chosen = (batch.chosen.iter())
        .map(|&w| nodata_if_null(if w == 0 { f32::NAN } else { w as f32 }))
        .collect();
    writer.write_rows(0, batch.first_row, adaptive)?;
    writer.write_rows(1, batch.first_row, chosen)
}

/// `3-5:2.110,5-7:2.060,...`: each step's threshold, for the GeoTIFF metadata.
fn step_list(steps: &[StepTest]) -> String {
    steps
        .iter()
        .map(|t| format!("{}-{}:{:.3}", t.from_window, t.to_window, t.threshold))
        .collect::<Vec<_>>()
        .join(",")
}

fn join(v: &[usize]) -> String {
    v.iter()
        .map(|w| w.to_string())
        .collect::<Vec<_>>()
        .join(",")
}

fn stem(p: &Path) -> String {
    p.file_stem()
        .unwrap_or_default()
        .to_string_lossy()
        .to_string()
}

/// The CSV report (`window_study.csv`, written for `path`): one row per window, the figures'
/// columns (named by [`WindowFigures`]) and `recommended` (1 for the recommended window).
fn csv(s: &Study, path: &Path) -> Result<Vec<u8>> {
    #[derive(Serialize)]
    struct Recommended {
        recommended: u8,
    }
    let mut writer = csv::Writer::from_writer(Vec::new());
    for figures in &s.windows {
        let recommended = u8::from(figures.window == s.recommended);
        writer
            .serialize((figures, Recommended { recommended }))
            .map_err(|e| FlexureError::write(path, e))?;
    }
    writer
        .into_inner()
        .map_err(|e| FlexureError::write(path, e.to_string()))
}

/// How the chart states lengths: the grid's bin sizes in metres and the horizon's z unit
/// (`None` for a time horizon, whose depth is in CRS units after conversion).
struct ChartUnits {
    /// The smallest feature of interest, metres, when given.
    min_feature_m: Option<f64>,
    /// Bin sizes along x and y, metres.
    bin_m: (f64, f64),
    /// Metres per CRS unit.
    metres_per_unit: f64,
    /// The horizon's z unit.
    z_unit: Option<ZUnit>,
}

impl ChartUnits {
    /// The horizon noise `sigma` (CRS units) as text in the horizon's z unit.
    fn noise(&self, sigma: f64) -> String {
        let metres = sigma * self.metres_per_unit;
        match self.z_unit {
            Some(u) => format!(
                "horizon noise sd {} {}",
                short(metres / u.metres()),
                u.name()
            ),
            None => format!(
                "horizon noise sd {} m (time horizon, as depth)",
                short(metres)
            ),
        }
    }
}

/// Noise (blue), detail lost (orange), RMS (grey) and difference from the adaptive map (purple)
/// against window, log scale labelled at round decades in the attribute's unit; windows on a
/// linear axis in cells, with a second axis of window width in metres at round values; the
/// recommendation marked and the horizon noise in the horizon's z unit; as SVG and PNG.
fn stage_chart(
    base: &Path,
    s: &Study,
    attribute: &AttributeDef,
    units: &ChartUnits,
) -> Result<Vec<StagedFile>> {
    let (w, h) = (760u32, 640u32);
    let (left, right, top, bottom) = (90.0f32, 720.0f32, 70.0f32, 380.0f32);
    let mut fig = Figure::new(w, h);
    fig.text(
        20.0,
        30.0,
        16.0,
        format!(
            "{}: noise and detail against window ({})",
            attribute.id, attribute.unit
        ),
        Anchor::Start,
    );
    fig.text(
        20.0,
        top - 16.0,
        12.0,
        format!("{} ({}), log scale", attribute.id, attribute.unit),
        Anchor::Start,
    );
    let series: [(&str, [u8; 3], Vec<f64>); 4] = [
        (
            "noise sd",
            [0x21, 0x71, 0xb5],
            s.windows.iter().map(|w| w.noise_sd).collect(),
        ),
        (
            "change from previous window (detail lost)",
            [0xd9, 0x5f, 0x02],
            s.windows.iter().map(|w| w.change_from_previous).collect(),
        ),
        (
            "RMS of the attribute",
            [0x88, 0x88, 0x88],
            s.windows.iter().map(|w| w.rms).collect(),
        ),
        (
            "RMS difference from the adaptive map (least = recommended)",
            [0x75, 0x70, 0xb3],
            s.windows.iter().map(|w| w.rms_from_adaptive).collect(),
        ),
    ];
    let logs: Vec<f64> = series
        .iter()
        .flat_map(|(_, _, v)| v.iter().copied())
        .filter(|v| *v > 0.0 && v.is_finite())
        .map(f64::log10)
        .collect();
    let (lo, hi) = logs
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let (lo, hi) = (lo.floor(), hi.ceil().max(lo.floor() + 1.0));
    let y = |v: f64| bottom - (bottom - top) * ((v.log10() - lo) / (hi - lo)) as f32;
    let (first, last) = (
        s.windows.first().map_or(1, |w| w.window) as f64,
        s.windows.last().map_or(1, |w| w.window) as f64,
    );
    let cells = Axis::new(first, last.max(first + 1.0), left, right, 8);
    let x = |window: usize| cells.at(window as f64);
    for e in (lo as i32)..=(hi as i32) {
        let decade = 10f64.powi(e);
        let yy = y(decade);
        fig.line(vec![(left - 4.0, yy), (right, yy)], GRID, 1.0);
        fig.text(
            left - 8.0,
            yy + 4.0,
            11.0,
            tick_label(decade, decade),
            Anchor::End,
        );
    }
    fig.line(
        vec![(left, top), (left, bottom), (right, bottom)],
        [0, 0, 0],
        1.0,
    );
    // Labels on the marker lines end at the line at the right edge and start at it at the
    // left edge, so they stay inside the picture.
    let (first_window, last_window) = (
        s.windows.first().map_or(0, |w| w.window),
        s.windows.last().map_or(0, |w| w.window),
    );
    let marker_anchor = |window: usize| match window {
        w if w == last_window => Anchor::End,
        w if w == first_window => Anchor::Start,
        _ => Anchor::Middle,
    };
    for wf in &s.windows {
        let xx = x(wf.window);
        fig.line(vec![(xx, bottom), (xx, bottom + 5.0)], [0, 0, 0], 1.0);
        fig.text(
            xx,
            bottom + 18.0,
            11.0,
            wf.window.to_string(),
            Anchor::Middle,
        );
        if wf.window == s.min_window && Some(wf.window) != s.windows.first().map(|w| w.window) {
            fig.line(vec![(xx, top), (xx, bottom)], [0xbb, 0x44, 0x44], 1.0);
            fig.text(
                xx,
                top + 12.0,
                11.0,
                format!("smallest allowed {}", wf.window),
                marker_anchor(wf.window),
            );
        }
        if wf.window == s.recommended {
            fig.line(vec![(xx, top), (xx, bottom)], [0x20, 0x20, 0x20], 2.0);
            fig.text(
                xx,
                top - 6.0,
                12.0,
                format!("recommended {}", wf.window),
                marker_anchor(wf.window),
            );
        }
    }
    fig.text(
        (left + right) / 2.0,
        bottom + 34.0,
        12.0,
        "window (cells; the windows studied)",
        Anchor::Middle,
    );
    let (bx, by) = units.bin_m;
    let metres = Axis::new(first * bx, last.max(first + 1.0) * bx, left, right, 8);
    let title = if (bx - by).abs() <= 1e-6 * bx {
        format!("window width (m; bins {} m)", short(bx))
    } else {
        format!(
            "window width along x (m; bins {} x {} m)",
            short(bx),
            short(by)
        )
    };
    metres.draw_horizontal(&mut fig, bottom + 50.0, &title);
    for (i, (label, colour, values)) in series.iter().enumerate() {
        let points: Vec<(f32, f32)> = values
            .iter()
            .zip(&s.windows)
            .filter(|(v, _)| **v > 0.0 && v.is_finite())
            .map(|(v, wf)| (x(wf.window), y(*v)))
            .collect();
        if points.len() > 1 {
            fig.line(points, *colour, 2.0);
        }
        let ly = bottom + 116.0 + 16.0 * i as f32;
        fig.marks.push(Mark::Line {
            points: vec![(left, ly - 4.0), (left + 24.0, ly - 4.0)],
            colour: *colour,
            width: 3.0,
        });
        fig.text(left + 32.0, ly, 11.0, *label, Anchor::Start);
    }
    fig.text(
        right,
        bottom + 116.0,
        11.0,
        units.noise(s.noise.sigma),
        Anchor::End,
    );
    let mut notes = vec![format!("noise model: {}", s.noise_model())];
    if let Some(m) = units.min_feature_m {
        notes.push(format!(
            "smallest feature of interest {} m: no window below {}",
            short(m),
            s.min_window
        ));
    }
    notes.push(s.reason());
    let font = Text::new();
    let wrapped: Vec<String> = (notes.iter())
        .flat_map(|n| wrap_to(&font, n, 10.0, w as f32 - 40.0))
        .collect();
    for (i, line) in wrapped.iter().take(6).enumerate() {
        fig.text(
            20.0,
            bottom + 190.0 + 14.0 * i as f32,
            10.0,
            line.clone(),
            Anchor::Start,
        );
    }
    stage_figure(base, &fig)
}

/// What a window study found.
#[derive(Clone, Debug)]
pub struct WindowStudyReport {
    /// Attribute studied.
    pub attribute: &'static str,
    /// Its unit.
    pub unit: &'static str,
    /// Estimated horizon noise, metres.
    pub noise_sigma: f64,
    /// Figures per window.
    pub windows: Vec<WindowFigures>,
    /// Recommended window.
    pub recommended: usize,
    /// Picking busts found and set null before the fits (listed in `window_study_busts.*`).
    pub busts: usize,
    /// The noise model used, in words ([`Study::noise_model`]).
    pub noise_model: String,
    /// Why the recommended window was chosen ([`Study::reason`]).
    pub reason: String,
    /// Output folder.
    pub out_dir: PathBuf,
    /// Adaptive map written, if any.
    pub adaptive: Option<PathBuf>,
    /// Notices (e.g. windows sorted).
    pub notices: Vec<String>,
}

impl fmt::Display for WindowStudyReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for n in &self.notices {
            writeln!(f, "note: {n}")?;
        }
        writeln!(
            f,
            "horizon noise sd {:.3} m ({NOISE_ESTIMATOR})",
            self.noise_sigma
        )?;
        writeln!(
            f,
            "picking busts set null before the fits: {} (window_study_busts.csv/.gpkg/.geojson)",
            self.busts
        )?;
        writeln!(f, "noise model: {}", self.noise_model)?;
        writeln!(
            f,
            "{:>8} {:>16} {:>22} {:>18} {:>15}",
            "window",
            format!("noise sd ({})", self.unit),
            "change from previous",
            "from adaptive map",
            "adaptive share"
        )?;
        for w in &self.windows {
            writeln!(
                f,
                "{:>8} {:>16} {:>22} {:>18} {:>14.1}%",
                w.window,
                short(w.noise_sd),
                if w.change_from_previous.is_finite() {
                    short(w.change_from_previous)
                } else {
                    "-".to_string()
                },
                short(w.rms_from_adaptive),
                100.0 * w.adaptive_share
            )?;
        }
        writeln!(
            f,
            "recommended window for {}: {} cells",
            self.attribute, self.recommended
        )?;
        writeln!(f, "why: {}", self.reason)?;
        writeln!(f, "wrote window_study.json, window_study.csv, window_study_chart.svg/png, window_study_panel.png in {}", self.out_dir.display())?;
        if let Some(p) = &self.adaptive {
            writeln!(f, "wrote {}", p.display())?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bins_not_square_get_a_caution() {
        // By hand: 25 x 12.5 m bins are 2:1; 25 x 24.5 m (2% apart) read as square.
        assert_eq!(non_square_caution((25.0, 25.0)), None);
        assert_eq!(non_square_caution((25.0, 24.5)), None);
        let caution = non_square_caution((25.0, 12.5)).expect("2:1 bins");
        assert!(caution.contains("2.00 times"), "{caution}");
        assert!(non_square_caution((12.5, 25.0)).is_some());
    }

    #[test]
    fn horizon_noise_is_stated_in_the_horizons_z_unit() {
        // The international foot is 0.3048 m exactly (its definition).
        let units = |metres_per_unit, z_unit| ChartUnits {
            min_feature_m: None,
            bin_m: (25.0, 25.0),
            metres_per_unit,
            z_unit,
        };
        // A metre CRS with depths in feet: 0.6096 m of noise is 2 ft.
        assert_eq!(
            units(1.0, Some(ZUnit::Foot)).noise(0.6096),
            "horizon noise sd 2 ft"
        );
        // A foot CRS with depths in feet: the value as it is.
        assert_eq!(
            units(0.3048, Some(ZUnit::Foot)).noise(1.5),
            "horizon noise sd 1.5 ft"
        );
        // A time horizon is converted to depth in CRS units: stated in metres.
        assert!(units(0.3048, None)
            .noise(10.0)
            .starts_with("horizon noise sd 3.048 m"));
    }
}
