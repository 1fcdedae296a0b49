//! The curvature job: read a horizon, convert it to depth, fit every window, evaluate the
//! attributes and write one GeoTIFF per window, all committed together, each recording its
//! provenance.

use super::{batch_rows, default_memory_budget, Progress};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::geotiff::{set_block_cache, BandSpec, Layout};
use crate::io::vector::{
    stage_both_formats, FieldKind, GeometryKind, Layer, Property, VectorFeature,
};
use crate::io::{
    commit_all, nodata_if_null, prepare_output_dir, read_info, refuse_overwrite, GeoTiffWriter,
    ReadOptions, StagedFile, TiffOptions,
};
use crate::io::{stage_float_geotiff, BandOut};
use crate::provenance::Provenance;
use crate::surface::curvature::{
    attribute_by_id, evaluate_cells, AttributeDef, FlatTolerance, ATTRIBUTES,
};
use crate::surface::horizon::{Horizon, HorizonSource};
use crate::surface::study::busts::{self, Busts, BUST_FALSE_ALARM, BUST_TEST};
use crate::surface::study::footprint::notch;
use crate::surface::study::noise::estimate_noise;
use crate::surface::window::{narrow_exactly, FittedTile, Sample, WindowFit, WindowSpec};
use ndarray::{Array2, ArrayView2};
use std::fmt;
use std::path::{Path, PathBuf};

/// Options of the curvature job: one output GeoTIFF per window, one band per attribute.
#[derive(Clone, Debug)]
pub struct CurvatureJob {
    /// The horizon: file, domain, z unit and velocity.
    pub horizon: HorizonSource,
    /// How to read the inputs (assumed CRS, null sentinels, point-list columns).
    pub read: ReadOptions,
    /// Folder for the outputs (created if missing).
    pub out_dir: PathBuf,
    /// Window edge lengths in cells (odd, 3..=101); sorted and de-duplicated before use.
    pub windows: Vec<usize>,
    /// Attributes to write, in band order.
    pub attributes: Vec<&'static AttributeDef>,
    /// Least share of valid cells in a window.
    pub min_valid: f64,
    /// Replace existing outputs that hold other bands than this run writes.
    pub overwrite: bool,
    /// Working memory in bytes beyond the input grid (row batches and GDAL's block cache);
    /// [`default_memory_budget`] when `None`.
    pub memory: Option<u64>,
    /// How output GeoTIFFs are compressed and laid out.
    pub tiff: TiffOptions,
    /// Find picking busts ([`crate::surface::study::busts`]) and set them null before fitting,
    /// writing their locations (`<stem>_busts.csv`, `.gpkg`, `.geojson`). Off by default for
    /// `curvature`; the window study always does it.
    pub despike: bool,
    /// Remove periodic footprint found on the horizon (after any despiking) by a notch along
    /// its axis before fitting ([`crate::surface::study::footprint::notch`]); a note says what
    /// was removed. Off by default.
    pub footprint_filter: bool,
    /// The window study only: the smallest structure of interest, metres across (trough to
    /// trough); the adaptive map and the recommendation take no window smaller than the
    /// largest that still resolves it ([`crate::surface::study::StudyPlan::set_min_feature`]).
    pub min_feature_m: Option<f64>,
    /// With `despike`, also write the despiked horizon (`<stem>_despiked.tif`: positive-down
    /// depth in CRS units, busts null).
    pub write_despiked: bool,
}

impl CurvatureJob {
    /// A job with the defaults: all attributes, the horizon's declared domain and unit (else
    /// depth in the CRS unit), min-valid 0.75.
    pub fn new(
        input: impl Into<PathBuf>,
        out_dir: impl Into<PathBuf>,
        windows: Vec<usize>,
    ) -> Self {
        Self {
            horizon: HorizonSource::new(input),
            read: ReadOptions::default(),
            out_dir: out_dir.into(),
            windows,
            attributes: ATTRIBUTES.iter().collect(),
            min_valid: 0.75,
            overwrite: false,
            memory: None,
            tiff: TiffOptions::default(),
            despike: false,
            write_despiked: false,
            min_feature_m: None,
            footprint_filter: false,
        }
    }

    /// Output path of window `n`: `DIR/<input-stem>_w<NN>.tif`.
    pub fn output_path(&self, n: usize) -> PathBuf {
        let stem = self
            .horizon
            .path
            .file_stem()
            .map(|s| s.to_string_lossy().to_string())
            .unwrap_or_default();
        self.out_dir.join(format!("{stem}_w{n:02}.tif"))
    }

    /// Runs the job and reports what it wrote. The grid is streamed through every window's
    /// fit in batches of rows ([`WindowFit::map_tiles`]); each batch's attributes are written
    /// before the next is fitted, so only the input and one batch are held. Every window's file
    /// is staged and the files are committed together once all are written.
    pub fn run(&self, progress: &dyn Progress) -> Result<CurvatureReport> {
        let budget = self.memory.unwrap_or_else(default_memory_budget);
        set_block_cache(budget / 4);
        let mut prepared = self.prepare(self.despike)?;
        let input_null_share = prepared.horizon.input_null_share;
        for &n in &prepared.windows {
            let path = self.output_path(n);
            refuse_overwrite(&path, &self.horizon.inputs())?;
            self.refuse_replacing_other_bands(&path)?;
        }
        let stem = stem(&self.horizon.path);
        let mut extra = Vec::new();
        if let Some(busts) = &prepared.busts {
            for name in bust_file_names(&format!("{stem}_busts")) {
                refuse_overwrite(&self.out_dir.join(name), &self.horizon.inputs())?;
            }
            let note = format!(
                "despiked: {} picking busts set null ({})",
                busts.cells.len(),
                BUST_TEST
            );
            prepared.horizon.notes.push(note);
            extra.extend(stage_busts(
                &self.out_dir,
                &format!("{stem}_busts"),
                &prepared.horizon.geometry,
                busts,
            )?);
        }
        let provenance = self.provenance(&prepared)?;
        if prepared.busts.is_some() && self.write_despiked {
            let path = self.out_dir.join(format!("{stem}_despiked.tif"));
            refuse_overwrite(&path, &self.horizon.inputs())?;
            let band = BandOut {
                description: "depth_despiked",
                unit: "CRS length unit, positive down",
                values: prepared.horizon.depth.clone(),
            };
            let meta = provenance.clone().with("despike", BUST_TEST);
            extra.push(stage_float_geotiff(
                &path,
                &prepared.horizon.geometry,
                &[band],
                meta.items(),
                self.tiff,
            )?);
        }
        if prepared.windows != self.windows {
            let windows = join_windows(&prepared.windows);
            let note = format!("windows sorted and duplicates removed: {windows}");
            prepared.horizon.notes.push(note);
        }
        // The depth is held as float32 when every value is one (a float32 grid used as it
        // is): half the memory, and the same fit, since each value widens exactly.
        let depth = std::mem::take(&mut prepared.horizon.depth);
        let geometry = &prepared.horizon.geometry;
        let (reports, staged) = match narrow_exactly(&depth) {
            Some(narrow) => {
                drop(depth);
                self.fit_and_write(
                    narrow.view(),
                    geometry,
                    &prepared,
                    &provenance,
                    budget,
                    progress,
                )?
            }
            None => self.fit_and_write(
                depth.view(),
                geometry,
                &prepared,
                &provenance,
                budget,
                progress,
            )?,
        };
        commit_all(staged.into_iter().chain(extra).collect())?;
        Ok(CurvatureReport {
            input: self.horizon.path.clone(),
            grid: prepared.horizon.geometry.describe(),
            input_null_share,
            notes: prepared.horizon.notes.clone(),
            windows: reports,
        })
    }

    /// Fits every window over `depth` batch of rows by batch, writing each batch's attributes
    /// before the next is fitted; the reports and staged files of the windows.
    fn fit_and_write<T: Sample>(
        &self,
        depth: ArrayView2<T>,
        geometry: &GridGeometry,
        prepared: &Prepared,
        provenance: &Provenance,
        budget: u64,
        progress: &dyn Progress,
    ) -> Result<(Vec<WindowReport>, Vec<StagedFile>)> {
        let fits = prepared
            .windows
            .iter()
            .map(|&n| WindowFit::new(depth, geometry, &self.spec(n), &[]))
            .collect::<Result<Vec<_>>>()?;
        let fit_rows = fits.iter().map(WindowFit::working_rows).max().unwrap_or(0);
        let batch_rows = batch_rows(budget / 2, geometry.cols, self.attributes.len(), fit_rows);
        let mut outputs = prepared
            .windows
            .iter()
            .map(|&n| self.create_output(geometry, provenance, n))
            .collect::<Result<Vec<_>>>()?;
        progress.begin((geometry.rows * fits.len()) as u64);
        for first_row in (0..geometry.rows).step_by(batch_rows) {
            let rows = first_row..(first_row + batch_rows).min(geometry.rows);
            for (fit, output) in fits.iter().zip(&mut outputs) {
                let tiles = fit.map_tiles(rows.clone(), |tile| {
                    self.evaluate_tile(&tile, geometry.metres_per_unit, prepared.tolerance)
                });
                output.write(tiles)?;
                progress.advance(rows.len() as u64);
            }
        }
        progress.finish();
        let finished = outputs
            .into_iter()
            .map(|o| o.finish(geometry.cols * geometry.rows))
            .collect::<Result<Vec<_>>>()?;
        Ok(finished.into_iter().unzip())
    }

    fn spec(&self, n: usize) -> WindowSpec {
        WindowSpec {
            size: n,
            min_valid: self.min_valid,
        }
    }

    /// The attributes of one fitted tile, band by band and ready to write (nulls as the
    /// nodata value), with each band's range and the tile's number of fitted cells: one pass
    /// over the tile's values.
    fn evaluate_tile(
        &self,
        tile: &FittedTile,
        metres_per_unit: f64,
        tolerance: FlatTolerance,
    ) -> TileValues {
        let mut bands = vec![Vec::with_capacity(tile.cells.len()); self.attributes.len()];
        let cells = tile.cells.iter().map(|c| c.as_ref().map(|(q, _)| q));
        evaluate_cells(
            cells,
            &self.attributes,
            metres_per_unit,
            tolerance,
            &mut bands,
        );
        let ranges = bands
            .iter_mut()
            .map(|band| nodata_and_range(band))
            .collect();
        TileValues {
            first_row: tile.first_row,
            bands,
            ranges,
            fitted: tile.cells.iter().filter(|c| c.is_some()).count(),
        }
    }

    /// Creates window `n`'s GeoTIFF, ready for rows.
    fn create_output(
        &self,
        geometry: &GridGeometry,
        provenance: &Provenance,
        n: usize,
    ) -> Result<WindowOutput> {
        let specs: Vec<BandSpec> = self
            .attributes
            .iter()
            .map(|a| BandSpec {
                description: a.id,
                unit: a.unit,
            })
            .collect();
        let path = self.output_path(n);
        let writer = GeoTiffWriter::create::<f32>(
            &path,
            geometry,
            &specs,
            &self.metadata(geometry, provenance, n),
            self.tiff,
            Layout::Float,
        )?;
        Ok(WindowOutput {
            window: n,
            path,
            writer,
            ids: self.attributes.iter().map(|a| a.id).collect(),
            ranges: vec![None; self.attributes.len()],
            fitted: 0,
        })
    }

    /// Checks the options and reads the horizon as positive-down depth: the sorted, distinct
    /// windows, the horizon and the flat tolerance; prepares the output folder.
    pub(crate) fn prepare(&self, despike: bool) -> Result<Prepared> {
        let windows = self.checked_windows()?;
        let mut horizon = self.horizon.load(&self.read)?;
        let geometry = &horizon.geometry;
        if horizon.input_null_share >= 1.0 {
            return Err(FlexureError::input(
                &self.horizon.path,
                "every cell is null: nothing to fit",
            ));
        }
        for &n in &windows {
            self.spec(n).validate(geometry.cols, geometry.rows)?;
        }
        if !horizon.depth.iter().any(|v| v.is_finite()) {
            return Err(FlexureError::input(
                &self.horizon.path,
                "no cell has both a value and a valid velocity",
            ));
        }
        prepare_output_dir(&self.out_dir)?;
        let busts = match despike {
            true => Some(busts::despike(
                &mut horizon.depth,
                &horizon.geometry,
                BUST_FALSE_ALARM,
            )?),
            false => None,
        };
        if self.footprint_filter {
            let found = estimate_noise(horizon.depth.view(), &horizon.geometry)?
                .map(|n| n.footprints)
                .unwrap_or_default();
            notch(&mut horizon.depth, &found);
            let removed: Vec<String> = (found.iter())
                .map(|f| {
                    format!(
                        "along {:?}, period {:.2} cells, amplitude {:.3}",
                        f.axis, f.period_cells, f.amplitude
                    )
                    .to_lowercase()
                })
                .collect();
            horizon.notes.push(match removed.is_empty() {
                true => "footprint filter applied: no periodic footprint found".to_string(),
                false => format!(
                    "footprint filter applied: notch removed {}",
                    removed.join("; ")
                ),
            });
        }
        let geometry = &horizon.geometry;
        let (sx, sy) = geometry.spacing();
        let tolerance = FlatTolerance::for_grid(
            excursion(&horizon.depth),
            sx.min(sy),
            geometry.metres_per_unit,
        );
        Ok(Prepared {
            windows,
            horizon,
            tolerance,
            busts,
        })
    }

    /// Provenance of the outputs: inputs with checksums, domain, units, velocity, reading
    /// options and the fit parameters (the window is added per file).
    pub(crate) fn provenance(&self, prepared: &Prepared) -> Result<Provenance> {
        let h = &prepared.horizon;
        Ok(Provenance::of_inputs(&self.horizon.inputs())?
            .with("domain", h.domain.name())
            .with("z_unit", h.z_unit.map_or("ms (two-way time)", |u| u.name()))
            .with("velocity", h.velocity.clone())
            .with("nodata_sentinels", format!("{:?}", self.read.nodata))
            .with("windows_cells", join_windows(&prepared.windows))
            .with("min_valid", self.min_valid.to_string()))
    }

    fn checked_windows(&self) -> Result<Vec<usize>> {
        if self.windows.is_empty() {
            return Err(FlexureError::Parameter(
                "no window given: use e.g. --windows 3,5,9".into(),
            ));
        }
        if self.attributes.is_empty() {
            return Err(FlexureError::Parameter("no attribute chosen".into()));
        }
        let mut w = self.windows.clone();
        w.sort_unstable();
        w.dedup();
        for &n in &w {
            self.spec(n).validate(usize::MAX, usize::MAX)?;
        }
        Ok(w)
    }

    /// Refuses to replace an existing output that holds other bands than this run writes
    /// (e.g. a run with fewer `--attributes` into the same folder), unless `overwrite`.
    fn refuse_replacing_other_bands(&self, path: &Path) -> Result<()> {
        if path.is_dir() {
            return Err(FlexureError::input(
                path,
                "is a folder where this output goes: move it away or choose another --out folder",
            ));
        }
        if self.overwrite || !path.exists() {
            return Ok(());
        }
        let existing = read_info(path)?.names;
        let ours: Vec<&str> = self.attributes.iter().map(|a| a.id).collect();
        if existing.iter().map(String::as_str).eq(ours.iter().copied()) {
            return Ok(());
        }
        Err(FlexureError::input(
            path,
            format!(
                "exists with bands {} but this run writes {}: give --overwrite to replace it, or another --out folder",
                existing.join(","),
                ours.join(",")
            ),
        ))
    }

    fn metadata(
        &self,
        geometry: &GridGeometry,
        provenance: &Provenance,
        n: usize,
    ) -> Vec<(String, String)> {
        let (sx, sy) = geometry.spacing();
        let m = geometry.metres_per_unit;
        provenance
            .clone()
            .with("window_cells", n.to_string())
            .with("window_size_m", format!("{:.3} x {:.3}", n as f64 * sx * m, n as f64 * sy * m))
            .with("sign", "antiform positive; shape index dome +1, bowl -1")
            .with("units", "curvature 1/km, Gaussian 1/km^2, angles degrees from grid north")
            .with("method", "local quadric least squares (Evans 1979; Wood 1996); attributes after Roberts 2001")
            .items()
            .to_vec()
    }
}

fn join_windows(windows: &[usize]) -> String {
    windows
        .iter()
        .map(|w| w.to_string())
        .collect::<Vec<_>>()
        .join(",")
}

/// A checked horizon ready to fit.
pub(crate) struct Prepared {
    /// Windows, ascending and distinct.
    pub(crate) windows: Vec<usize>,
    /// The horizon as read and converted to positive-down depth in CRS units.
    pub(crate) horizon: Horizon,
    /// Round-off tolerance of the attributes.
    pub(crate) tolerance: FlatTolerance,
    /// The picking busts found and set null in the depth, when asked for.
    pub(crate) busts: Option<Busts>,
}

/// The files [`stage_busts`] writes for `name`.
pub(crate) fn bust_file_names(name: &str) -> [String; 3] {
    ["csv", "gpkg", "geojson"].map(|ext| format!("{name}.{ext}"))
}

/// Stages the busts' locations in `dir`: `name.csv` (row, col, x, y in CRS units, offset in
/// the depth unit, score in robust scales) and a point layer `name` as GeoPackage and GeoJSON
/// with the same fields.
pub(crate) fn stage_busts(
    dir: &Path,
    name: &str,
    geometry: &GridGeometry,
    busts: &Busts,
) -> Result<Vec<StagedFile>> {
    #[derive(serde::Serialize)]
    struct Row {
        row: usize,
        col: usize,
        x: f64,
        y: f64,
        offset: f64,
        score: f64,
    }
    let csv_path = dir.join(format!("{name}.csv"));
    // The header written even when there is no bust.
    let mut writer = csv::WriterBuilder::new()
        .has_headers(false)
        .from_writer(Vec::new());
    writer
        .write_record(["row", "col", "x", "y", "offset", "score"])
        .map_err(|e| FlexureError::write(&csv_path, e))?;
    let mut features = Vec::with_capacity(busts.cells.len());
    for b in &busts.cells {
        let (x, y) = geometry.cell_centre(b.col, b.row);
        let row = Row {
            row: b.row,
            col: b.col,
            x,
            y,
            offset: b.offset,
            score: b.score,
        };
        writer
            .serialize(&row)
            .map_err(|e| FlexureError::write(&csv_path, e))?;
        features.push(VectorFeature {
            points: vec![(x, y)],
            values: [b.row as f64, b.col as f64, b.offset, b.score]
                .map(Property::Number)
                .to_vec(),
        });
    }
    let bytes = writer
        .into_inner()
        .map_err(|e| FlexureError::write(&csv_path, e.to_string()))?;
    let layer = Layer {
        name,
        kind: GeometryKind::Point,
        fields: &[
            ("row", FieldKind::Integer),
            ("col", FieldKind::Integer),
            ("offset", FieldKind::Real),
            ("score", FieldKind::Real),
        ],
        features: &features,
    };
    let mut staged = vec![super::stage_bytes(&csv_path, &bytes)?];
    staged.extend(stage_both_formats(dir, &geometry.crs_wkt, &layer)?);
    Ok(staged)
}

/// The file stem of `path`.
fn stem(path: &Path) -> String {
    path.file_stem()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_default()
}

/// One tile's attribute values, band by band (nulls as the nodata value), each band's range of
/// values, and its number of fitted cells.
struct TileValues {
    first_row: usize,
    bands: Vec<Vec<f32>>,
    ranges: Vec<Option<(f32, f32)>>,
    fitted: usize,
}

/// Replaces the nulls of `band` by the nodata value and gives the range of its finite values
/// (one branch-free pass).
fn nodata_and_range(band: &mut [f32]) -> Option<(f32, f32)> {
    let (mut lo, mut hi) = (f32::INFINITY, f32::NEG_INFINITY);
    for v in band.iter_mut() {
        let x = *v;
        let finite = x.is_finite();
        lo = if finite { lo.min(x) } else { lo };
        hi = if finite { hi.max(x) } else { hi };
        *v = nodata_if_null(x);
    }
    (lo <= hi).then_some((lo, hi))
}

/// `range` widened to hold `x` when `x` is finite.
fn widen(range: Option<(f32, f32)>, x: f32) -> Option<(f32, f32)> {
    if !x.is_finite() {
        return range;
    }
    Some(range.map_or((x, x), |(lo, hi)| (lo.min(x), hi.max(x))))
}

/// One window's output while rows stream in: its writer, running value ranges and fit count.
struct WindowOutput {
    window: usize,
    path: PathBuf,
    writer: GeoTiffWriter,
    ids: Vec<&'static str>,
    ranges: Vec<Option<(f32, f32)>>,
    fitted: usize,
}

impl WindowOutput {
    /// Writes the tiles of one batch (in row order) band by band, updating the ranges and the
    /// count of fitted cells.
    fn write(&mut self, tiles: Vec<TileValues>) -> Result<()> {
        let Some(first_row) = tiles.first().map(|t| t.first_row) else {
            return Ok(());
        };
        let cells = tiles
            .iter()
            .map(|t| t.bands.first().map_or(0, Vec::len))
            .sum();
        let mut bands: Vec<Vec<f32>> = vec![Vec::with_capacity(cells); self.ids.len()];
        for tile in tiles {
            self.fitted += tile.fitted;
            for (band, (values, range)) in tile.bands.into_iter().zip(tile.ranges).enumerate() {
                self.ranges[band] = range.map_or(self.ranges[band], |(lo, hi)| {
                    widen(widen(self.ranges[band], lo), hi)
                });
                bands[band].extend(values);
            }
        }
        // One write per band of whole rows of blocks (batches start at multiples of the block
        // height), so no block is ever written part-filled and rewritten later.
        for (band, values) in bands.into_iter().enumerate() {
            self.writer.write_rows(band, first_row, values)?;
        }
        Ok(())
    }

    /// Finishes the file; its report and staged file. `cells` is the grid's cell count.
    fn finish(self, cells: usize) -> Result<(WindowReport, StagedFile)> {
        let staged = self.writer.finish()?;
        let report = WindowReport {
            window: self.window,
            path: self.path,
            null_share: 1.0 - self.fitted as f64 / cells as f64,
            ranges: self.ids.into_iter().zip(self.ranges).collect(),
        };
        Ok((report, staged))
    }
}

/// Largest |z - mean| over the valid cells.
fn excursion(z: &Array2<f64>) -> f64 {
    let valid = || z.iter().copied().filter(|v| v.is_finite());
    let mean = valid().sum::<f64>() / valid().count().max(1) as f64;
    valid().map(|v| (v - mean).abs()).fold(0.0, f64::max)
}

/// What a curvature job wrote.
#[derive(Clone, Debug)]
pub struct CurvatureReport {
    /// The input grid.
    pub input: PathBuf,
    /// One-line description of the grid.
    pub grid: String,
    /// Share of null cells in the input.
    pub input_null_share: f64,
    /// How the domain and units were decided, and what the readers noticed.
    pub notes: Vec<String>,
    /// One entry per window, smallest first.
    pub windows: Vec<WindowReport>,
}

/// What one window's output holds.
#[derive(Clone, Debug)]
pub struct WindowReport {
    /// Window edge length in cells.
    pub window: usize,
    /// File written.
    pub path: PathBuf,
    /// Share of cells with no fit.
    pub null_share: f64,
    /// (attribute id, value range in the attribute's unit) per band.
    pub ranges: Vec<(&'static str, Option<(f32, f32)>)>,
}

impl fmt::Display for CurvatureReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "{}: {}, {:.1}% null",
            self.input.display(),
            self.grid,
            100.0 * self.input_null_share
        )?;
        for n in &self.notes {
            writeln!(f, "  note: {n}")?;
        }
        for w in &self.windows {
            writeln!(
                f,
                "  window {:>3}: {} ({:.1}% null)",
                w.window,
                w.path.display(),
                100.0 * w.null_share
            )?;
            for (id, range) in &w.ranges {
                let unit = attribute_by_id(id).map_or("", |a| a.unit);
                match range {
                    Some((lo, hi)) => writeln!(f, "    {id:<12} {lo:>12.5} .. {hi:<12.5} {unit}")?,
                    None => writeln!(f, "    {id:<12} all null")?,
                }
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::jobs::Silent;
    use crate::surface::curvature::evaluate_field;
    use crate::surface::window::fit_quadrics;

    fn utm25() -> String {
        gdal::spatial_ref::SpatialRef::from_epsg(32625)
            .unwrap()
            .to_wkt()
            .unwrap()
    }

    /// A 700-row grid streamed in 256-row batches (a 1 MB budget) with nulls and a gap across
    /// two batch boundaries gives, bit for bit, the attributes of one whole-grid fit and
    /// evaluation (the reference: `fit_quadrics` and `evaluate_field` on the whole grid, as the
    /// job computed them before it streamed). Nulls are written as the declared nodata.
    #[test]
    fn streamed_batches_equal_the_whole_grid_fit() {
        let dir = tempfile::tempdir().unwrap();
        let geometry = GridGeometry::survey(
            (500_000.0, 3_900_000.0),
            30.0,
            (25.0, 12.5),
            (40, 700),
            utm25(),
        );
        let mut values = Array2::from_shape_fn((700, 40), |(r, c)| {
            (2000.0 + 30.0 * (r as f64 / 57.0).sin() * (c as f64 / 9.0).cos()) as f32
        });
        for r in 250..262 {
            values[(r, 17)] = f32::NAN;
        }
        values[(511, 3)] = f32::NAN;
        let input = dir.path().join("h.tif");
        let band = crate::io::BandOut {
            description: "depth",
            unit: "metre",
            values: values.clone(),
        };
        crate::io::write_float_geotiff(&input, &geometry, &[band], &[]).unwrap();
        let mut job = CurvatureJob::new(&input, dir.path().join("out"), vec![3, 9]);
        job.memory = Some(1 << 20);
        job.run(&Silent).unwrap();
        // Every block is written once: the file is the size of one written in a single batch
        // with a cache holding everything (a block rewritten after a partial write would leave
        // its first copy as dead space in the file; TIFF 6.0 appends rewritten strips/tiles).
        let mut roomy = CurvatureJob::new(&input, dir.path().join("roomy"), vec![3, 9]);
        roomy.memory = Some(1 << 30);
        roomy.run(&Silent).unwrap();
        for n in [3, 9] {
            let size = |j: &CurvatureJob| std::fs::metadata(j.output_path(n)).unwrap().len();
            assert_eq!(size(&job), size(&roomy), "window {n}");
        }
        let depth = values.mapv(f64::from);
        for n in [3, 9] {
            let spec = WindowSpec {
                size: n,
                min_valid: job.min_valid,
            };
            let field = fit_quadrics(depth.view(), &geometry, &spec, &|_| {}).unwrap();
            let tolerance =
                FlatTolerance::for_grid(excursion(&depth), 12.5, geometry.metres_per_unit);
            let expected = evaluate_field(&field, &job.attributes, 1.0, tolerance);
            let written = crate::io::read_raster(&job.output_path(n), &ReadOptions::default())
                .unwrap()
                .bands;
            for (e, w) in expected.iter().zip(&written) {
                let same = e.iter().zip(w).all(|(&e, &w)| {
                    (e.is_nan() && w.is_nan()) || e.to_bits() == (w as f32).to_bits()
                });
                assert!(same, "window {n}");
            }
        }
    }
}
