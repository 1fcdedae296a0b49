//! The sector-times job: measure, bin by bin, the time shift of every azimuth-sector SEG-Y
//! volume along a guide horizon ([`crate::seismic`]), optionally also along a deeper horizon
//! for the interval between them, and write the shifts, their correlation qualities and the
//! reference time as GeoTIFFs with a JSON report, all staged and committed together.
//!
//! Memory: the volumes are read trace by trace, only each bin's window (the horizon time
//! +- the window and the largest shift), in batches of grid rows whose size follows the
//! `--memory` budget; each batch is measured on rayon and written before the next is read.
//! Results do not depend on the batch size or the thread count (each bin's measurement reads
//! only its own samples).

use super::{default_memory_budget, stage_bytes, Progress};
use crate::anisotropy::sector_rasters::{
    interval_quality, AZIMUTH_ITEM, QUALITY_FILE, QUALITY_ITEM, REFERENCE_FILE_ITEM,
    REFERENCE_KIND_ITEM, SHIFTS_ITEM,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::geotiff::{BandSpec, GeoTiffWriter, Layout, BLOCK_ROWS};
use crate::io::segy::{SegyHeaderBytes, SegyVolume, NO_TRACE};
use crate::io::{
    commit_all, prepare_output_dir, read_raster, refuse_overwrite, ReadOptions, StagedFile,
    TiffOptions,
};
use crate::provenance::Provenance;
use crate::seismic::sectors::{sector_shifts, Reference};
use crate::seismic::shift::{Shift, ShiftMeasure};
use crate::stats;
use crate::surface::horizon::DeclaredUnit;
use ndarray::Array2;
use rayon::prelude::*;
use std::fmt;
use std::path::{Path, PathBuf};

/// Default half length of the analysis window around the horizon, ms.
pub const DEFAULT_HALF_WINDOW_MS: f64 = 40.0;

/// Default largest shift searched, ms: sector residual moveout is usually below about 20 ms
/// peak to peak (common practice).
pub const DEFAULT_MAX_SHIFT_MS: f64 = 12.0;

/// Default largest distance of a trace from its lattice node, as a share of the smaller bin:
/// SEG-Y coordinates are often stored to the metre, up to 0.71 m off the node, 0.057 of a
/// 12.5 m bin (common practice), so the point lists' 0.05 is too tight; half-bin errors
/// (0.5) are still refused.
pub const DEFAULT_TRACE_TOLERANCE: f64 = 0.1;

/// File names of the outputs in the output folder.
const TIMES_FILE: &str = "sector_times.tif";
const REFERENCE_FILE: &str = "reference_time.tif";
const REPORT_FILE: &str = "sector_times.json";

/// The options of one sector-times run.
#[derive(Clone, Debug)]
pub struct SectorTimesJob {
    /// One SEG-Y volume per azimuth sector.
    pub volumes: Vec<PathBuf>,
    /// Sector-centre azimuth of each volume, degrees from grid north.
    pub azimuths: Vec<f64>,
    /// Guide horizon (two-way time, ms or s), picked on the full-azimuth data.
    pub horizon: PathBuf,
    /// Deeper horizon: measure there too and write the interval shifts (base minus top).
    pub base: Option<PathBuf>,
    /// Unit of horizons that declare none (a declared unit must agree); `None`: ms.
    pub time_unit: Option<TimeUnit>,
    /// Reference volume (e.g. the full-azimuth stack); `None` = the mean of the sectors.
    pub reference: Option<PathBuf>,
    /// Half length of the tapered window around the horizon, ms.
    pub half_window_ms: f64,
    /// Largest shift searched, ms.
    pub max_shift_ms: f64,
    /// Trace header byte positions of inline, crossline, x, y and the coordinate scalar.
    pub header_bytes: SegyHeaderBytes,
    /// How the horizons are read (CRS, nodata sentinels, point-list columns, lattice
    /// tolerance of point-list horizons).
    pub read: ReadOptions,
    /// Largest distance of a trace from its lattice node, and of the volume's lattice from the
    /// horizon's, as a share of the smaller bin.
    pub trace_tolerance: f64,
    /// Output folder.
    pub out_dir: PathBuf,
    /// Working memory for the trace windows of a batch, bytes (default: the machine's).
    pub memory: Option<u64>,
    /// GeoTIFF compression and layout.
    pub tiff: TiffOptions,
}

/// A horizon in two-way time (ms), NaN nulls.
struct TimeHorizon {
    path: PathBuf,
    geometry: GridGeometry,
    ms: Array2<f64>,
}

/// The open volumes and where their traces lie on the horizon grid.
struct Volumes {
    sectors: Vec<SegyVolume>,
    reference: Option<SegyVolume>,
    /// Trace index of each volume at each horizon cell (sectors, then the reference).
    traces: Vec<Array2<u32>>,
}

/// Why bins went without a measurement, and what was measured.
#[derive(Clone, Debug, Default)]
struct Tally {
    no_time: usize,
    no_trace: usize,
    outside_traces: usize,
    measured_bins: usize,
    /// Per sector: bins measured, and bins where the measurement failed.
    per_sector: Vec<(usize, usize)>,
}

impl SectorTimesJob {
    /// A run with the default window and largest shift, header byte positions and reading.
    pub fn new(
        volumes: Vec<PathBuf>,
        azimuths: Vec<f64>,
        horizon: impl Into<PathBuf>,
        out_dir: impl Into<PathBuf>,
    ) -> Self {
        Self {
            volumes,
            azimuths,
            horizon: horizon.into(),
            base: None,
            time_unit: None,
            reference: None,
            half_window_ms: DEFAULT_HALF_WINDOW_MS,
            max_shift_ms: DEFAULT_MAX_SHIFT_MS,
            header_bytes: SegyHeaderBytes::default(),
            read: ReadOptions::default(),
            trace_tolerance: DEFAULT_TRACE_TOLERANCE,
            out_dir: out_dir.into(),
            memory: None,
            tiff: TiffOptions::default(),
        }
    }

    /// Path of the shift raster.
    pub fn times_path(&self) -> PathBuf {
        self.out_dir.join(TIMES_FILE)
    }

    /// Every input file: volumes, reference, horizons.
    fn inputs(&self) -> Vec<&Path> {
        let mut inputs: Vec<&Path> = self.volumes.iter().map(PathBuf::as_path).collect();
        inputs.extend(self.reference.as_deref());
        inputs.push(&self.horizon);
        inputs.extend(self.base.as_deref());
        inputs
    }

    /// Runs the job and reports what it measured and wrote.
    pub fn run(&self, progress: &dyn Progress) -> Result<SectorTimesReport> {
        self.check_parameters()?;
        let mut notes = Vec::new();
        let top = read_time_horizon(&self.horizon, &self.read, self.time_unit, &mut notes)?;
        let base = self
            .base
            .as_ref()
            .map(|p| read_time_horizon(p, &self.read, self.time_unit, &mut notes))
            .transpose()?;
        if let Some(b) = &base {
            check_base(&top, b)?;
        }
        let mut volumes = self.open_volumes(&top)?;
        let first = &volumes.sectors[0];
        let measure = ShiftMeasure::new(
            first.sample_interval_ms(),
            self.half_window_ms,
            self.max_shift_ms,
        )?;
        let needed = measure.samples_needed(0.0);
        let span = (needed.end - needed.start + 1) as usize;
        if span > first.samples() {
            return Err(FlexureError::Parameter(format!(
                "the window of +-{} ms plus the largest shift of {} ms needs {span} samples, more than the {} samples of the traces in {}: give a shorter --window",
                self.half_window_ms,
                self.max_shift_ms,
                first.samples(),
                first.path().display()
            )));
        }
        let levels: Vec<&TimeHorizon> = std::iter::once(&top).chain(base.as_ref()).collect();
        refuse_unmeasurable(&levels, &volumes, &measure)?;
        prepare_output_dir(&self.out_dir)?;
        for name in [TIMES_FILE, QUALITY_FILE, REFERENCE_FILE, REPORT_FILE] {
            refuse_overwrite(&self.out_dir.join(name), &self.inputs())?;
        }
        let provenance = self.provenance()?;
        let mut outputs = Outputs::create(self, &top.geometry, &provenance, base.is_some())?;
        let geometry = &top.geometry;
        let budget = self.memory.unwrap_or_else(default_memory_budget);
        // Per cell and level: every volume's window (f32) and the measured shifts.
        let per_cell = volumes.traces.len() * span * 4
            + std::mem::size_of::<BinShifts>()
            + self.volumes.len() * std::mem::size_of::<Option<Shift>>();
        let per_row = (geometry.cols * per_cell * levels.len()) as u64;
        let batch = ((budget / per_row.max(1)) as usize / BLOCK_ROWS).max(1) * BLOCK_ROWS;
        let mut tally = Tally {
            per_sector: vec![(0, 0); self.volumes.len()],
            ..Tally::default()
        };
        progress.begin(geometry.rows as u64);
        for first_row in (0..geometry.rows).step_by(batch) {
            let rows = first_row..(first_row + batch).min(geometry.rows);
            let measured: Vec<Vec<BinShifts>> = levels
                .iter()
                .map(|level| measure_rows(&mut volumes, level, &measure, rows.clone()))
                .collect::<Result<_>>()?;
            outputs.write(first_row, &levels, &measured, &mut tally)?;
            progress.advance(rows.len() as u64);
        }
        progress.finish();
        let report = SectorTimesReport {
            outputs: outputs.paths(),
            grid: geometry.describe(),
            interval: base.is_some(),
            azimuths: self.azimuths.clone(),
            sectors: self.volumes.clone(),
            bins: geometry.cols * geometry.rows,
            tally,
            quality_medians: outputs.quality_medians(),
            shift_medians: outputs.shift_medians(),
            notes,
        };
        let mut staged = outputs.finish()?;
        staged.push(stage_bytes(
            &self.out_dir.join(REPORT_FILE),
            (report.json(self, &provenance) + "\n").as_bytes(),
        )?);
        commit_all(staged)?;
        Ok(report)
    }

    /// Refuses azimuth lists that do not match the volumes and out-of-range settings.
    fn check_parameters(&self) -> Result<()> {
        if self.volumes.len() < 3 {
            return Err(FlexureError::Parameter(format!(
                "{} sector volume(s) given: the cos 2phi fit needs at least 3 sectors (usually 6 to 16)",
                self.volumes.len()
            )));
        }
        if self.azimuths.len() != self.volumes.len() {
            return Err(FlexureError::Parameter(format!(
                "{} azimuths given for {} sector volumes: give one --azimuths value per volume, in the same order",
                self.azimuths.len(),
                self.volumes.len()
            )));
        }
        if let Some(a) = self.azimuths.iter().find(|a| !a.is_finite()) {
            return Err(FlexureError::Parameter(format!(
                "azimuth {a} is not a number of degrees: give sector-centre azimuths such as 0,30,60"
            )));
        }
        for (k, a) in self.azimuths.iter().enumerate() {
            if let Some(b) = self.azimuths[..k]
                .iter()
                .find(|b| (*a - **b).rem_euclid(360.0) == 0.0)
            {
                return Err(FlexureError::Parameter(format!(
                    "azimuth {a} is given twice (also as {b}): give each sector's azimuth once"
                )));
            }
        }
        for (k, path) in self.volumes.iter().enumerate() {
            if self.volumes[..k].contains(path) {
                return Err(FlexureError::input(
                    path,
                    "is given twice as a sector volume: give each sector once",
                ));
            }
        }
        let (window, shift) = (self.half_window_ms, self.max_shift_ms);
        if !(window.is_finite() && shift.is_finite() && shift > 0.0 && window > shift) {
            return Err(FlexureError::Parameter(format!(
                "--window {window} ms and --max-shift {shift} ms: give a positive largest shift smaller than the half window (defaults 40 and 12 ms)"
            )));
        }
        let tolerance = self.trace_tolerance;
        if !(tolerance > 0.0 && tolerance < 0.5) {
            return Err(FlexureError::Parameter(format!(
                "--trace-tolerance {tolerance} is outside 0..0.5: give the largest distance of a trace from its bin's node as a share of the smaller bin (default {DEFAULT_TRACE_TOLERANCE})"
            )));
        }
        Ok(())
    }

    /// Opens every volume, places its traces on the horizon's grid (keeping only the trace
    /// index of each cell, not the volume's table of trace locations) and checks the volumes
    /// share one sampling.
    fn open_volumes(&self, top: &TimeHorizon) -> Result<Volumes> {
        let mut traces = Vec::new();
        let mut open = |path: &PathBuf| -> Result<SegyVolume> {
            let mut volume = SegyVolume::open(path, &self.header_bytes)?;
            let placement = volume.lattice(self.trace_tolerance)?;
            traces.push(volume.traces_on(
                &placement,
                &top.path,
                &top.geometry,
                self.trace_tolerance,
            )?);
            volume.forget_locations();
            Ok(volume)
        };
        let sectors = self
            .volumes
            .iter()
            .map(&mut open)
            .collect::<Result<Vec<_>>>()?;
        let reference = self.reference.as_ref().map(&mut open).transpose()?;
        for other in sectors[1..].iter().chain(reference.as_ref()) {
            sectors[0].check_same_sampling(other)?;
        }
        Ok(Volumes {
            sectors,
            reference,
            traces,
        })
    }

    fn provenance(&self) -> Result<Provenance> {
        Ok(Provenance::of_inputs(&self.inputs())?
            .with("sector_azimuths_deg", join_numbers(&self.azimuths))
            .with("half_window_ms", self.half_window_ms.to_string())
            .with("max_shift_ms", self.max_shift_ms.to_string())
            .with(
                "reference_trace",
                self.reference
                    .as_ref()
                    .map_or("mean of the sector traces".to_string(), |p| {
                        p.display().to_string()
                    }),
            )
            .with("trace_header_bytes", self.header_bytes.describe())
            .with("units", "shifts and times ms (positive = later), azimuths degrees from grid north")
            .with("method", "Hann-tapered normalised cross-correlation against the reference trace, sub-sample peak from Lanczos (8 lobes) interpolation of cross products and energies; quality = peak coefficient"))
    }
}

/// Unit of a horizon's two-way times.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TimeUnit {
    /// Milliseconds.
    Milliseconds,
    /// Seconds (converted to ms on reading).
    Seconds,
}

impl TimeUnit {
    fn declared(self) -> DeclaredUnit {
        match self {
            Self::Milliseconds => DeclaredUnit::Milliseconds,
            Self::Seconds => DeclaredUnit::Seconds,
        }
    }
}

/// Reads a horizon in two-way time: the unit the file declares (ms, or s converted to ms),
/// else `unit`, else ms (said in `notes`); a length unit, or a `unit` the file contradicts,
/// is refused.
fn read_time_horizon(
    path: &Path,
    read: &ReadOptions,
    unit: Option<TimeUnit>,
    notes: &mut Vec<String>,
) -> Result<TimeHorizon> {
    let (mut grid, text) = read_raster(path, read)?.into_single(path)?;
    let declared = DeclaredUnit::parse(&text);
    if let Some(DeclaredUnit::Length(_)) = declared {
        return Err(FlexureError::input(
            path,
            format!("declares its values in '{text}', a length: the guide horizon must be in two-way time (ms) on the volumes' time axis"),
        ));
    }
    let given = unit.map(TimeUnit::declared);
    let effective = match (declared, given) {
        (Some(d), Some(g)) if d != g => {
            return Err(FlexureError::input(
                path,
                format!(
                    "declares its times in '{text}' but --time-unit says {}: drop --time-unit, or correct the file",
                    g.name()
                ),
            ))
        }
        (Some(d), _) => d,
        (None, Some(g)) => g,
        (None, None) => {
            notes.push(format!(
                "{}: no time unit declared, read as ms (give --time-unit s for seconds)",
                path.display()
            ));
            DeclaredUnit::Milliseconds
        }
    };
    if effective == DeclaredUnit::Seconds {
        grid.values.mapv_inplace(|t| t * 1000.0);
    }
    if grid.values.iter().all(|t| t.is_nan()) {
        return Err(FlexureError::input(
            path,
            "holds no time: every bin is null",
        ));
    }
    Ok(TimeHorizon {
        path: path.to_path_buf(),
        geometry: grid.geometry,
        ms: grid.values,
    })
}

/// Refuses a base horizon on another grid than the top, or above it at most bins.
fn check_base(top: &TimeHorizon, base: &TimeHorizon) -> Result<()> {
    if let Some(why) = top.geometry.mismatch(&base.geometry) {
        return Err(FlexureError::input(
            &base.path,
            format!(
                "is not on the grid of the guide horizon {} ({why}): give both horizons on the same bins",
                top.path.display()
            ),
        ));
    }
    let mut thickness: Vec<f64> = top
        .ms
        .iter()
        .zip(&base.ms)
        .map(|(t, b)| b - t)
        .filter(|d| d.is_finite())
        .collect();
    let median = stats::median(&mut thickness);
    match median {
        Some(m) if m > 0.0 => Ok(()),
        Some(m) => Err(FlexureError::input(
            &base.path,
            format!(
                "lies above the guide horizon {} (median base minus top {m:.1} ms): give the deeper horizon as --base",
                top.path.display()
            ),
        )),
        None => Err(FlexureError::input(
            &base.path,
            format!(
                "has no time where the guide horizon {} has one: give horizons over the same area",
                top.path.display()
            ),
        )),
    }
}

/// Refuses a horizon with no bin that can be measured: one with a time, a trace in every
/// volume and a window inside the traces. Names what is missing where the traces are.
fn refuse_unmeasurable(
    levels: &[&TimeHorizon],
    volumes: &Volumes,
    measure: &ShiftMeasure,
) -> Result<()> {
    let volume = &volumes.sectors[0];
    let (t0, dt) = (volume.first_time_ms(), volume.sample_interval_ms());
    let last = t0 + (volume.samples() as f64 - 1.0) * dt;
    for level in levels {
        let traced: Vec<f64> = level
            .ms
            .indexed_iter()
            .filter(|(at, t)| t.is_finite() && volumes.traces.iter().all(|tr| tr[*at] != NO_TRACE))
            .map(|(_, &t)| t)
            .collect();
        if traced
            .iter()
            .any(|&t| window_inside(measure, (t - t0) / dt, volume.samples()))
        {
            continue;
        }
        let reason = match traced.iter().copied().reduce(f64::min) {
            None => format!(
                "has no time at any bin where every volume has a trace (first volume {}): give the horizon over the volumes' area",
                volume.path().display()
            ),
            Some(lo) => {
                let hi = traced.iter().copied().fold(lo, f64::max);
                format!(
                    "lies at {lo:.1} to {hi:.1} ms where the volumes have traces, outside the traces of {} ({t0} to {last} ms) once the window and largest shift are added: check the horizon's unit (--time-unit) and the volumes' delay, or shorten --window",
                    volume.path().display()
                )
            }
        };
        return Err(FlexureError::input(&level.path, reason));
    }
    Ok(())
}

/// Whether the samples a window centred at `centre` needs lie inside a trace of `samples`.
fn window_inside(measure: &ShiftMeasure, centre: f64, samples: usize) -> bool {
    let needed = measure.samples_needed(centre);
    needed.start >= 0 && needed.end <= samples as isize
}

/// The outcome at one bin of one horizon.
#[derive(Clone, Debug, PartialEq)]
enum BinShifts {
    NoTime,
    NoTrace,
    OutsideTraces,
    Measured(Vec<Option<Shift>>),
}

/// Measures every bin of `rows` on `level`: reads each volume's windows in trace order, then
/// measures the bins on rayon.
fn measure_rows(
    volumes: &mut Volumes,
    level: &TimeHorizon,
    measure: &ShiftMeasure,
    rows: std::ops::Range<usize>,
) -> Result<Vec<BinShifts>> {
    let cols = level.geometry.cols;
    let first = &volumes.sectors[0];
    let (t0, dt, samples) = (
        first.first_time_ms(),
        first.sample_interval_ms(),
        first.samples(),
    );
    let cells: Vec<(usize, usize)> = rows.flat_map(|r| (0..cols).map(move |c| (r, c))).collect();
    let mut outcome: Vec<BinShifts> = Vec::with_capacity(cells.len());
    // Bins to measure: (index in `cells`, centre, first sample, length).
    let mut bins: Vec<(usize, f64, usize, usize)> = Vec::new();
    for (k, &(r, c)) in cells.iter().enumerate() {
        let t = level.ms[(r, c)];
        let state = if !t.is_finite() {
            BinShifts::NoTime
        } else if volumes.traces.iter().any(|tr| tr[(r, c)] == NO_TRACE) {
            BinShifts::NoTrace
        } else if !window_inside(measure, (t - t0) / dt, samples) {
            BinShifts::OutsideTraces
        } else {
            let centre = (t - t0) / dt;
            let needed = measure.samples_needed(centre);
            let len = (needed.end - needed.start) as usize;
            bins.push((k, centre, needed.start as usize, len));
            BinShifts::Measured(Vec::new())
        };
        outcome.push(state);
    }
    let stride = bins.iter().map(|b| b.3).max().unwrap_or(0);
    let count = volumes.traces.len();
    let mut windows = vec![0f32; bins.len() * count * stride];
    let all = volumes.sectors.iter_mut().chain(volumes.reference.as_mut());
    for (v, (volume, traces)) in all.zip(&volumes.traces).enumerate() {
        let mut order: Vec<usize> = (0..bins.len()).collect();
        let trace_of = |b: usize| {
            let (r, c) = cells[bins[b].0];
            traces[(r, c)] as usize
        };
        order.sort_by_key(|&b| trace_of(b));
        for b in order {
            let (_, _, start, len) = bins[b];
            let at = (b * count + v) * stride;
            volume.read_samples(trace_of(b), start, &mut windows[at..at + len])?;
        }
    }
    let sectors = volumes.sectors.len();
    let has_reference = volumes.reference.is_some();
    let measured: Vec<Vec<Option<Shift>>> = bins
        .par_iter()
        .enumerate()
        .map(|(b, &(_, centre, _, len))| {
            let slot = |v: usize| {
                let at = (b * count + v) * stride;
                &windows[at..at + len]
            };
            let traces: Vec<&[f32]> = (0..sectors).map(slot).collect();
            let reference = if has_reference {
                Reference::Trace(slot(sectors))
            } else {
                Reference::SectorMean
            };
            sector_shifts(measure, centre, &traces, reference)
        })
        .collect();
    for ((k, ..), shifts) in bins.iter().zip(measured) {
        outcome[*k] = BinShifts::Measured(shifts);
    }
    Ok(outcome)
}

/// The three rasters being written, and the per-sector values kept for the report's medians.
struct Outputs {
    times: GeoTiffWriter,
    quality: GeoTiffWriter,
    reference: GeoTiffWriter,
    paths: Vec<PathBuf>,
    /// Per sector: every measured shift and quality (f32), for the report's medians.
    shifts: Vec<Vec<f32>>,
    qualities: Vec<Vec<f32>>,
}

impl Outputs {
    fn create(
        job: &SectorTimesJob,
        geometry: &GridGeometry,
        provenance: &Provenance,
        interval: bool,
    ) -> Result<Self> {
        let names: Vec<String> = job.azimuths.iter().map(|a| format!("sector_{a}")).collect();
        let bands = |unit: &'static str| -> Vec<BandSpec> {
            names
                .iter()
                .map(|n| BandSpec {
                    description: n,
                    unit,
                })
                .collect()
        };
        let kind = if interval { "interval" } else { "horizon" };
        let with = |items: &[(&str, &str)]| {
            let mut metadata = provenance.items().to_vec();
            metadata.extend(items.iter().map(|(k, v)| (k.to_string(), v.to_string())));
            metadata
        };
        let create = |file: &str, bands: &[BandSpec], metadata: Vec<(String, String)>| {
            GeoTiffWriter::create::<f32>(
                &job.out_dir.join(file),
                geometry,
                bands,
                &metadata,
                job.tiff,
                Layout::Float,
            )
        };
        let times_items = [(SHIFTS_ITEM, "yes"), (REFERENCE_FILE_ITEM, REFERENCE_FILE)];
        let mut times = create(TIMES_FILE, &bands("ms"), with(&times_items))?;
        let mut quality = create(QUALITY_FILE, &bands(""), with(&[(QUALITY_ITEM, "yes")]))?;
        for (b, a) in job.azimuths.iter().enumerate() {
            times.set_band_metadata(b, AZIMUTH_ITEM, &a.to_string())?;
            quality.set_band_metadata(b, AZIMUTH_ITEM, &a.to_string())?;
        }
        let description = if interval {
            "interval_time"
        } else {
            "horizon_time"
        };
        let reference = create(
            REFERENCE_FILE,
            &[BandSpec {
                description,
                unit: "ms",
            }],
            with(&[(REFERENCE_KIND_ITEM, kind)]),
        )?;
        Ok(Self {
            times,
            quality,
            reference,
            paths: [TIMES_FILE, QUALITY_FILE, REFERENCE_FILE, REPORT_FILE]
                .iter()
                .map(|f| job.out_dir.join(f))
                .collect(),
            shifts: vec![Vec::new(); job.azimuths.len()],
            qualities: vec![Vec::new(); job.azimuths.len()],
        })
    }

    /// Writes one batch of rows starting at `first_row`: the shift at the top horizon, or the
    /// base's minus the top's with a base (quality: [`interval_quality`] of the two).
    fn write(
        &mut self,
        first_row: usize,
        levels: &[&TimeHorizon],
        measured: &[Vec<BinShifts>],
        tally: &mut Tally,
    ) -> Result<()> {
        let sectors = self.shifts.len();
        let cells = measured[0].len();
        let cols = levels[0].geometry.cols;
        let mut times = vec![vec![f32::NAN; cells]; sectors];
        let mut quality = vec![vec![f32::NAN; cells]; sectors];
        let mut reference = vec![f32::NAN; cells];
        for k in 0..cells {
            let (r, c) = (first_row + k / cols, k % cols);
            let at: Vec<&BinShifts> = measured.iter().map(|m| &m[k]).collect();
            let lists: Vec<&Vec<Option<Shift>>> = at
                .iter()
                .filter_map(|b| match b {
                    BinShifts::Measured(s) => Some(s),
                    _ => None,
                })
                .collect();
            if lists.len() < at.len() {
                if at.contains(&&BinShifts::NoTime) {
                    tally.no_time += 1;
                } else if at.contains(&&BinShifts::NoTrace) {
                    tally.no_trace += 1;
                } else {
                    tally.outside_traces += 1;
                }
                continue;
            }
            tally.measured_bins += 1;
            let t: Vec<f64> = levels.iter().map(|l| l.ms[(r, c)]).collect();
            reference[k] = match t.as_slice() {
                [top, base] => (base - top) as f32,
                [top] => *top as f32,
                _ => f32::NAN,
            };
            for s in 0..sectors {
                let pair: Option<(f64, f64)> = match lists.as_slice() {
                    [top] => top[s].map(|a| (a.ms, a.quality)),
                    [top, base] => top[s]
                        .zip(base[s])
                        .map(|(a, b)| (b.ms - a.ms, interval_quality(a.quality, b.quality))),
                    _ => None,
                };
                match pair {
                    Some((ms, q)) => {
                        tally.per_sector[s].0 += 1;
                        times[s][k] = ms as f32;
                        quality[s][k] = q as f32;
                        self.shifts[s].push(ms as f32);
                        self.qualities[s].push(q as f32);
                    }
                    None => tally.per_sector[s].1 += 1,
                }
            }
        }
        let nodata =
            |v: Vec<f32>| -> Vec<f32> { v.into_iter().map(crate::io::nodata_if_null).collect() };
        for (s, (t, q)) in times.into_iter().zip(quality).enumerate() {
            self.times.write_rows(s, first_row, nodata(t))?;
            self.quality.write_rows(s, first_row, nodata(q))?;
        }
        self.reference.write_rows(0, first_row, nodata(reference))
    }

    fn paths(&self) -> Vec<PathBuf> {
        self.paths.clone()
    }

    fn quality_medians(&self) -> Vec<Option<f64>> {
        medians(&self.qualities, |v| v)
    }

    fn shift_medians(&self) -> Vec<Option<f64>> {
        medians(&self.shifts, f64::abs)
    }

    fn finish(self) -> Result<Vec<StagedFile>> {
        Ok(vec![
            self.times.finish()?,
            self.quality.finish()?,
            self.reference.finish()?,
        ])
    }
}

/// Median of `f` of each list (None when empty).
fn medians(lists: &[Vec<f32>], f: fn(f64) -> f64) -> Vec<Option<f64>> {
    lists
        .iter()
        .map(|l| stats::median(&mut l.iter().map(|&x| f(f64::from(x))).collect::<Vec<_>>()))
        .collect()
}

fn join_numbers(v: &[f64]) -> String {
    v.iter().map(f64::to_string).collect::<Vec<_>>().join(",")
}

/// What a sector-times run measured and wrote.
#[derive(Clone, Debug)]
pub struct SectorTimesReport {
    /// Files written (shifts, quality, reference time, JSON report).
    pub outputs: Vec<PathBuf>,
    /// The horizon grid, in words.
    pub grid: String,
    /// Interval shifts (base minus top) rather than shifts at the guide horizon.
    pub interval: bool,
    /// Sector azimuths, degrees from grid north.
    pub azimuths: Vec<f64>,
    /// Sector volumes.
    pub sectors: Vec<PathBuf>,
    /// Bins of the horizon grid.
    pub bins: usize,
    tally: Tally,
    /// Per sector: median correlation quality of the measured bins.
    pub quality_medians: Vec<Option<f64>>,
    /// Per sector: median absolute shift of the measured bins, ms.
    pub shift_medians: Vec<Option<f64>>,
    /// How units were decided, and anything else worth saying about the inputs.
    pub notes: Vec<String>,
}

impl SectorTimesReport {
    /// Per sector: bins measured.
    pub fn measured(&self) -> Vec<usize> {
        self.tally.per_sector.iter().map(|s| s.0).collect()
    }

    /// Bins whose windows reach outside the traces.
    pub fn outside_traces(&self) -> usize {
        self.tally.outside_traces
    }

    fn json(&self, job: &SectorTimesJob, provenance: &Provenance) -> String {
        let sectors: Vec<serde_json::Value> = (0..self.azimuths.len())
            .map(|s| {
                serde_json::json!({
                    "volume": self.sectors[s].display().to_string(),
                    "azimuth_deg": self.azimuths[s],
                    "bins_measured": self.tally.per_sector[s].0,
                    "bins_failed": self.tally.per_sector[s].1,
                    "median_quality": self.quality_medians[s],
                    "median_abs_shift_ms": self.shift_medians[s],
                })
            })
            .collect();
        let doc = serde_json::json!({
            "grid": self.grid,
            "measurement": if self.interval { "interval (base minus top)" } else { "at the guide horizon" },
            "half_window_ms": job.half_window_ms,
            "max_shift_ms": job.max_shift_ms,
            "bins": self.bins,
            "bins_measured": self.tally.measured_bins,
            "bins_without_time": self.tally.no_time,
            "bins_without_trace": self.tally.no_trace,
            "bins_outside_traces": self.tally.outside_traces,
            "sectors": sectors,
            "notes": self.notes,
            "provenance": provenance.to_json(),
        });
        serde_json::to_string_pretty(&doc).unwrap_or_default()
    }
}

impl fmt::Display for SectorTimesReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let what = if self.interval {
            "interval shifts (base minus top)"
        } else {
            "shifts at the guide horizon"
        };
        writeln!(f, "sector times: {what} on {}", self.grid)?;
        writeln!(
            f,
            "  bins measured {} of {} (no time {}, no trace {}, window outside the traces {})",
            self.tally.measured_bins,
            self.bins,
            self.tally.no_time,
            self.tally.no_trace,
            self.tally.outside_traces
        )?;
        for (s, a) in self.azimuths.iter().enumerate() {
            let show = |v: Option<f64>| v.map_or("-".to_string(), |v| format!("{v:.3}"));
            writeln!(
                f,
                "  sector {:>7} deg: measured {:>8}, failed {:>6}, median quality {}, median |shift| {} ms",
                a,
                self.tally.per_sector[s].0,
                self.tally.per_sector[s].1,
                show(self.quality_medians[s]),
                show(self.shift_medians[s])
            )?;
        }
        for n in &self.notes {
            writeln!(f, "  note: {n}")?;
        }
        if self.tally.outside_traces > 0 {
            writeln!(
                f,
                "  note: {} bins not measured: their window reaches beyond the traces",
                self.tally.outside_traces
            )?;
        }
        for p in &self.outputs {
            writeln!(f, "  wrote {}", p.display())?;
        }
        Ok(())
    }
}
