//! Input grids and output rasters.
//!
//! Reading ([`read_raster`], the one reader of input grids): any raster GDAL opens, or a point
//! list ([`points`]) decided by content; one band or every band of a stack, with a projected
//! (or local) CRS in linear units; the declared nodata value, `--nodata` sentinels and every
//! NaN/inf are nulls, and undeclared sentinels are searched for ([`nulls`]). Small text tables
//! (surveys, stage tables, well lists) are read by [`table`].
//! Writing ([`geotiff`]): float32 (or float64) GeoTIFF, one band per attribute, written run of
//! rows by run of rows, band-interleaved, tiled, ZSTD (or DEFLATE) with the floating-point
//! predictor, declared nodata, band descriptions and unit types. Every output is written under
//! a temporary name in the target folder, read back to check it, and renamed when complete
//! ([`StagedFile`]); a job commits all its outputs at the end as one transaction
//! ([`commit_all`]), so a failed or interrupted run never leaves a truncated file under a final
//! name, nor some outputs new and others old. GDAL's own messages are captured and reported as
//! one line instead of printed.
//! Vector layers (map vectors, well paths, stage corridors) are written through OGR by
//! [`vector`]. SEG-Y volumes (azimuth-sector seismic) are read trace by trace, window by
//! window, and written for fixtures and demo data by [`segy`].

mod band_rows;
pub mod geotiff;
pub mod nulls;
pub mod points;
pub mod segy;
mod staged;
pub mod table;
pub mod vector;

pub use band_rows::RowSource;
use geotiff::{BandSpec, Layout};
pub use geotiff::{Compression, GeoTiffWriter, TiffOptions};
pub use staged::{
    commit_all, discard_uncommitted, prepare_output_dir, temporary_path, Discarded, RunTransaction,
    StagedFile,
};

use crate::error::{FlexureError, Result};
use crate::grid::{Grid, GridGeometry};
use gdal::raster::GdalType;
use gdal::spatial_ref::SpatialRef;
use gdal::{Dataset, Metadata};
use ndarray::Array2;
use std::path::Path;
use std::sync::{Mutex, Once};

/// Nodata value declared in float outputs.
pub const NODATA: f32 = -99999.0;

static GDAL_MESSAGES: Mutex<Vec<String>> = Mutex::new(Vec::new());
static INSTALL_HANDLER: Once = Once::new();

/// Routes GDAL's warnings and errors into a buffer (instead of stderr) once per process.
pub(crate) fn capture_gdal_messages() {
    INSTALL_HANDLER.call_once(|| {
        gdal::config::set_error_handler(|kind, _code, msg| {
            if matches!(
                kind,
                gdal::errors::CplErrType::Failure | gdal::errors::CplErrType::Fatal
            ) {
                if let Ok(mut m) = GDAL_MESSAGES.lock() {
                    m.push(msg.trim().to_string());
                }
            }
        });
    });
}

/// Takes the GDAL failure messages collected since the last call.
pub(crate) fn take_gdal_messages() -> Vec<String> {
    GDAL_MESSAGES
        .lock()
        .map(|mut m| std::mem::take(&mut *m))
        .unwrap_or_default()
}

/// How to read an input grid.
#[derive(Clone, Debug, PartialEq)]
pub struct ReadOptions {
    /// CRS to assume when the file declares none (any definition GDAL accepts, e.g.
    /// "EPSG:32625"); never overrides a declared CRS. Point lists declare none, so they need
    /// it.
    pub crs: Option<String>,
    /// Values that mean null in addition to a declared nodata (sentinels such as -999.25).
    pub nodata: Vec<f64>,
    /// Column roles of point lists (`--columns`); from the header when `None`.
    pub columns: Option<Vec<points::ColumnRole>>,
    /// Largest distance of a point-list point from its lattice node, as a share of the smaller
    /// bin (`--lattice-tolerance`).
    pub lattice_tolerance: f64,
    /// Search bands without a declared nodata for undeclared sentinels ([`nulls`]); off for
    /// grids where 0 or 999 are plain values (sector weights such as fold).
    pub find_sentinels: bool,
    /// Read only this band (0-based; `Raster::bands` then holds it alone, while
    /// `Raster::info` still describes every band); every band when `None`.
    pub only_band: Option<usize>,
}

impl Default for ReadOptions {
    fn default() -> Self {
        let points = points::PointOptions::default();
        Self {
            crs: None,
            nodata: Vec::new(),
            columns: points.columns,
            lattice_tolerance: points.lattice_tolerance,
            find_sentinels: true,
            only_band: None,
        }
    }
}

impl ReadOptions {
    fn point_options(&self) -> points::PointOptions {
        points::PointOptions {
            columns: self.columns.clone(),
            nodata: self.nodata.clone(),
            lattice_tolerance: self.lattice_tolerance,
        }
    }
}

/// A raster as read: placement, every band (NaN nulls), band names, units and metadata, and
/// what the reader noticed.
#[derive(Clone, Debug)]
pub struct Raster {
    /// Where the grid lies.
    pub geometry: GridGeometry,
    /// Values of each band `[row, col]`, nodata, sentinels and non-finite values as NaN.
    pub bands: Vec<Array2<f64>>,
    /// Band descriptions, units and dataset metadata.
    pub info: RasterInfo,
    /// Notes for the report (e.g. values far outside the rest that were kept).
    pub notes: Vec<String>,
}

impl Raster {
    /// The single band of a one-band raster as a [`Grid`] with its declared unit (empty when
    /// none); refuses a multi-band raster.
    pub fn into_single(mut self, path: &Path) -> Result<(Grid, String)> {
        if self.bands.len() != 1 {
            return Err(FlexureError::input(
                path,
                format!("has {} bands; give a single-band grid", self.bands.len()),
            ));
        }
        let grid = Grid {
            geometry: self.geometry,
            values: self.bands.remove(0),
        };
        Ok((grid, self.info.units.remove(0)))
    }
}

/// Reads band 1 of a single-band raster (see [`read_raster`]).
pub fn read_grid(path: &Path, options: &ReadOptions) -> Result<Grid> {
    Ok(read_raster(path, options)?.into_single(path)?.0)
}

/// Reads every band of a raster, or of a point list ([`points`]), with its placement, names,
/// units and metadata. The declared nodata value, `options.nodata` and every non-finite value
/// are nulls (NaN). A band with no declared nodata holding a sentinel-like value far outside
/// the rest is refused, naming the value and `--nodata` (see [`nulls`]); other far outliers
/// are kept and noted.
pub fn read_raster(path: &Path, options: &ReadOptions) -> Result<Raster> {
    let ds = match band_rows::open_input(path, options)? {
        band_rows::Opened::Points(raster) => return Ok(raster),
        band_rows::Opened::Dataset(ds) => ds,
    };
    let geometry = read_geometry(&ds, path, options.crs.as_deref())?;
    let count = ds.raster_count();
    check_only_band(path, options, count)?;
    let wanted = |i: usize| options.only_band.is_none_or(|b| b + 1 == i);
    let mut read = Vec::new();
    for i in (1..=count).filter(|&i| wanted(i)) {
        let band = ds.rasterband(i).map_err(|e| FlexureError::read(path, e))?;
        let nodata = band.no_data_value();
        let values = band_rows::read_band_rows(
            &band,
            0..geometry.rows,
            geometry.cols,
            nodata,
            &options.nodata,
        )
        .map_err(|e| FlexureError::read(path, e))?;
        read.push((i, nodata, values));
    }
    let info = raster_info(&ds, path)?;
    // Closing the file frees its blocks from GDAL's cache before the null search copies values.
    drop(ds);
    take_gdal_messages();
    let mut notes = Vec::new();
    let mut bands = Vec::new();
    for (i, nodata, values) in read {
        if nodata.is_none() && options.find_sentinels {
            notes.extend(check_undeclared_nulls(&values, path, &format!("band {i}"))?);
        }
        bands.push(values);
    }
    Ok(Raster {
        geometry,
        bands,
        info,
        notes,
    })
}

/// Refuses `options.only_band` beyond a raster's `count` bands.
fn check_only_band(path: &Path, options: &ReadOptions, count: usize) -> Result<()> {
    match options.only_band {
        Some(b) if b >= count => Err(FlexureError::input(
            path,
            format!("has {count} band(s), no band {}", b + 1),
        )),
        _ => Ok(()),
    }
}

/// A point list on its exact lattice as a raster: bands named after the value columns, units
/// from their header suffixes, the lattice described in the notes.
fn read_point_list(path: &Path, options: &ReadOptions) -> Result<Raster> {
    let Some(definition) = options.crs.as_deref() else {
        return Err(FlexureError::input(
            path,
            "is a point list, which declares no CRS: give its projected CRS with --crs (e.g. --crs EPSG:32625)",
        ));
    };
    let (_, srs) = assigned_crs(definition)?;
    let (crs_wkt, metres_per_unit) = linear_crs(&srs, path)?;
    let grid = points::read_points(path, &options.point_options())?;
    let geometry = grid.geometry(crs_wkt, metres_per_unit);
    let mut notes = vec![format!(
        "{}: point list read onto its lattice: {}",
        path.display(),
        grid.lattice.describe()
    )];
    for (band, column) in grid.bands.iter().zip(&grid.value_columns) {
        let label = format!("column '{}'", column.name);
        if options.find_sentinels {
            notes.extend(check_undeclared_nulls(band, path, &label)?);
        }
    }
    let info = RasterInfo {
        names: grid.value_columns.iter().map(|c| c.name.clone()).collect(),
        units: grid
            .value_columns
            .iter()
            .map(|c| c.unit.clone().unwrap_or_default())
            .collect(),
        metadata: Vec::new(),
    };
    check_only_band(path, options, grid.bands.len())?;
    let mut bands = grid.bands;
    if let Some(b) = options.only_band {
        bands = vec![bands.swap_remove(b)];
    }
    Ok(Raster {
        geometry,
        bands,
        info,
        notes,
    })
}

/// Refuses a band holding an undeclared sentinel; a note about other far outliers.
fn check_undeclared_nulls(
    values: &Array2<f64>,
    path: &Path,
    label: &str,
) -> Result<Option<String>> {
    if let Some((v, n)) = nulls::undeclared_sentinel(values) {
        let v = nulls::typed(v);
        return Err(FlexureError::input(
            path,
            format!(
                "{label}: {n} cell(s) hold {v}, shaped like a null sentinel and apart from the other values, but the file declares no nodata: declare it with --nodata {v} (or fix the values)"
            ),
        ));
    }
    Ok(nulls::outliers(values).map(|found| {
        let (v, n) = found.values[0];
        format!(
            "{} {label}: {} distinct value(s) lie over {} median absolute deviations from the median {:.6} (e.g. {} in {n} cell(s)); kept as data: check for picking busts",
            path.display(),
            found.values.len(),
            nulls::OUTLIER_MADS,
            found.median,
            nulls::typed(v)
        )
    }))
}

/// Band descriptions and unit types, and the dataset's default-domain metadata, of a raster.
#[derive(Clone, Debug, PartialEq)]
pub struct RasterInfo {
    /// Description of each band (empty when none), in band order.
    pub names: Vec<String>,
    /// Unit type of each band (empty when none).
    pub units: Vec<String>,
    /// `(key, value)` metadata items.
    pub metadata: Vec<(String, String)>,
}

impl RasterInfo {
    /// The value of metadata item `key`, if present.
    pub fn item(&self, key: &str) -> Option<&str> {
        self.metadata
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }
}

/// Reads the band descriptions, units and metadata of a raster without its values.
pub fn read_info(path: &Path) -> Result<RasterInfo> {
    capture_gdal_messages();
    if !path.is_file() {
        return Err(FlexureError::read(path, "no such file"));
    }
    let ds = Dataset::open(path).map_err(|e| FlexureError::read(path, e))?;
    let info = raster_info(&ds, path);
    take_gdal_messages();
    info
}

fn raster_info(ds: &Dataset, path: &Path) -> Result<RasterInfo> {
    let (mut names, mut units) = (Vec::new(), Vec::new());
    for i in 1..=ds.raster_count() {
        let band = ds.rasterband(i).map_err(|e| FlexureError::read(path, e))?;
        names.push(band.description().unwrap_or_default());
        units.push(band.unit());
    }
    let metadata = ds
        .metadata_domain("")
        .unwrap_or_default()
        .iter()
        .filter_map(|kv| kv.split_once('='))
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    Ok(RasterInfo {
        names,
        units,
        metadata,
    })
}

fn read_geometry(ds: &Dataset, path: &Path, assign_crs: Option<&str>) -> Result<GridGeometry> {
    let (cols, rows) = ds.raster_size();
    let geo_transform = ds
        .geo_transform()
        .map_err(|_| FlexureError::input(path, "has no geotransform: give a georeferenced grid"))?;
    let assigned = assign_crs.map(assigned_crs).transpose()?;
    let srs = match (ds.spatial_ref(), assigned) {
        (Ok(srs), Some((def, given))) if !srs.to_wkt().unwrap_or_default().is_empty() => {
            if srs != given {
                return Err(FlexureError::input(
                    path,
                    format!(
                        "declares the CRS '{}' but --crs '{def}' was given: --crs only fills in a missing CRS; drop it, or reproject the file",
                        srs.name().unwrap_or_default()
                    ),
                ));
            }
            srs
        }
        (Ok(srs), None) if !srs.to_wkt().unwrap_or_default().is_empty() => srs,
        (_, Some((_, given))) => given,
        _ => {
            return Err(FlexureError::input(
                path,
                "declares no CRS: give its projected CRS with --crs (e.g. --crs EPSG:32625)",
            ))
        }
    };
    let (crs_wkt, metres_per_unit) = linear_crs(&srs, path)?;
    let geometry = GridGeometry {
        cols,
        rows,
        geo_transform,
        crs_wkt,
        metres_per_unit,
    };
    if !geometry.is_invertible() {
        return Err(FlexureError::input(
            path,
            "has a degenerate geotransform (cells of zero area)",
        ));
    }
    Ok(geometry)
}

/// The CRS `--crs` names, with its definition.
fn assigned_crs(definition: &str) -> Result<(&str, SpatialRef)> {
    SpatialRef::from_definition(definition)
        .map(|srs| (definition, srs))
        .map_err(|_| {
            FlexureError::Parameter(format!(
                "--crs '{definition}' is not a CRS GDAL knows: give e.g. EPSG:32625"
            ))
        })
}

/// The WKT and metres per linear unit of a projected (or local) CRS; refuses a geographic CRS
/// or one without a linear unit.
fn linear_crs(srs: &SpatialRef, path: &Path) -> Result<(String, f64)> {
    if srs.is_geographic() {
        return Err(FlexureError::input(
            path,
            "has a geographic CRS (degrees); flexure needs distances: reproject it to a projected CRS in metres or feet",
        ));
    }
    let metres_per_unit = srs.linear_units();
    if !(metres_per_unit.is_finite() && metres_per_unit > 0.0) {
        return Err(FlexureError::input(
            path,
            "its CRS has no linear unit: give a projected CRS in metres or feet",
        ));
    }
    let wkt = srs.to_wkt().map_err(|e| FlexureError::read(path, e))?;
    Ok((wkt, metres_per_unit))
}

/// One band to write: its values (NaN = null), description and unit.
pub struct BandOut<'a, T = f32> {
    /// Band description (attribute id).
    pub description: &'a str,
    /// Unit type of the values.
    pub unit: &'a str,
    /// Values `[row, col]`; non-finite values are written as [`NODATA`].
    pub values: Array2<T>,
}

/// A floating-point sample type GeoTIFF bands are written in: float32 for attributes, float64
/// where input values must survive exactly (`flexure grid`).
pub trait FloatSample: GdalType + Copy {
    /// [`NODATA`] in this type.
    fn nodata() -> Self;
    /// Whether the value is finite.
    fn finite(self) -> bool;
}

impl FloatSample for f32 {
    fn nodata() -> Self {
        NODATA
    }
    fn finite(self) -> bool {
        self.is_finite()
    }
}

impl FloatSample for f64 {
    fn nodata() -> Self {
        NODATA as f64
    }
    fn finite(self) -> bool {
        self.is_finite()
    }
}

/// Writes a float32 (or float64) multi-band GeoTIFF on `geometry` atomically (temporary name,
/// read-back check, rename) with the default [`TiffOptions`]. `metadata` is written as
/// dataset-level items of the default domain.
pub fn write_float_geotiff<T: FloatSample>(
    path: &Path,
    geometry: &GridGeometry,
    bands: &[BandOut<T>],
    metadata: &[(String, String)],
) -> Result<()> {
    stage_float_geotiff(path, geometry, bands, metadata, TiffOptions::default())?.commit()
}

/// Writes and checks the GeoTIFF of [`write_float_geotiff`] under a temporary name, laid out
/// and compressed as `options` say ([`geotiff`]); the caller renames it into place with
/// [`StagedFile::commit`] (with the other outputs of the same job). Non-finite values are
/// written as [`NODATA`].
pub fn stage_float_geotiff<T: FloatSample>(
    path: &Path,
    geometry: &GridGeometry,
    bands: &[BandOut<T>],
    metadata: &[(String, String)],
    options: TiffOptions,
) -> Result<StagedFile> {
    check_band_sizes(
        path,
        geometry,
        bands.iter().map(|b| (b.description, b.values.dim())),
    )?;
    let specs: Vec<BandSpec> = bands
        .iter()
        .map(|b| BandSpec {
            description: b.description,
            unit: b.unit,
        })
        .collect();
    let mut writer =
        GeoTiffWriter::create::<T>(path, geometry, &specs, metadata, options, Layout::Float)?;
    for (i, band) in bands.iter().enumerate() {
        let values = band.values.iter().map(|&v| nodata_if_null(v)).collect();
        writer.write_rows(i, 0, values)?;
    }
    writer.finish()
}

/// `v`, or [`NODATA`] when `v` is not finite.
pub fn nodata_if_null<T: FloatSample>(v: T) -> T {
    if v.finite() {
        v
    } else {
        T::nodata()
    }
}

/// Writes an 8-bit RGBA picture (`[red, green, blue, alpha]`, straight alpha, each
/// `[row, col]`) as a GeoTIFF on `geometry`, staged like [`stage_float_geotiff`]. The alpha
/// band is marked as such (unassociated), so GIS software shows transparent cells as holes.
pub fn stage_rgba_geotiff(
    path: &Path,
    geometry: &GridGeometry,
    rgba: &[Array2<u8>; 4],
    metadata: &[(String, String)],
    options: TiffOptions,
) -> Result<StagedFile> {
    let names = ["red", "green", "blue", "alpha"];
    check_band_sizes(
        path,
        geometry,
        names.iter().zip(rgba).map(|(n, b)| (*n, b.dim())),
    )?;
    let specs: Vec<BandSpec> = names
        .iter()
        .map(|name| BandSpec {
            description: name,
            unit: "",
        })
        .collect();
    let mut writer =
        GeoTiffWriter::create::<u8>(path, geometry, &specs, metadata, options, Layout::Rgba)?;
    for (i, band) in rgba.iter().enumerate() {
        writer.write_rows(i, 0, band.iter().copied().collect())?;
    }
    writer.finish()
}

fn check_band_sizes<'a>(
    path: &Path,
    geometry: &GridGeometry,
    mut dims: impl Iterator<Item = (&'a str, (usize, usize))>,
) -> Result<()> {
    match dims.find(|(_, d)| *d != (geometry.rows, geometry.cols)) {
        Some((name, d)) => Err(FlexureError::write(
            path,
            format!(
                "band {name} is {d:?} (rows, cols) but the grid is {} x {}",
                geometry.rows, geometry.cols
            ),
        )),
        None => Ok(()),
    }
}

pub(crate) fn gdal_failure(context: &str, e: impl std::fmt::Display) -> String {
    let mut messages = take_gdal_messages();
    messages.push(e.to_string());
    format!("{context}: {}", messages.join("; "))
}

/// `Ok` when GDAL reported no failure since the last take, else its messages on one line.
pub(crate) fn gdal_outcome() -> std::result::Result<(), String> {
    let messages = take_gdal_messages();
    if messages.is_empty() {
        Ok(())
    } else {
        Err(messages.join("; "))
    }
}

/// Refuses an output path that is one of the inputs.
pub fn refuse_overwrite(output: &Path, inputs: &[&Path]) -> Result<()> {
    let out = output
        .parent()
        .and_then(|p| p.canonicalize().ok())
        .map(|p| p.join(output.file_name().unwrap_or_default()));
    for input in inputs {
        if let (Some(o), Ok(i)) = (&out, input.canonicalize()) {
            if *o == i {
                return Err(FlexureError::input(
                    output,
                    "output would overwrite an input: choose another output path",
                ));
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn geometry() -> GridGeometry {
        GridGeometry {
            cols: 5,
            rows: 4,
            geo_transform: [500000.0, 25.0, 0.0, 3900000.0, 0.0, -25.0],
            crs_wkt: SpatialRef::from_epsg(32625).unwrap().to_wkt().unwrap(),
            metres_per_unit: 1.0,
        }
    }

    #[test]
    fn round_trip_keeps_values_nulls_and_georeference() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("a.tif");
        let g = geometry();
        let mut values = Array2::from_shape_fn((4, 5), |(r, c)| (r * 10 + c) as f32);
        values[(1, 2)] = f32::NAN;
        write_float_geotiff(
            &path,
            &g,
            &[BandOut {
                description: "k_mean",
                unit: "1/km",
                values,
            }],
            &[],
        )
        .unwrap();
        let back = read_grid(&path, &ReadOptions::default()).unwrap();
        assert_eq!(back.geometry.geo_transform, g.geo_transform);
        assert!(back.values[(1, 2)].is_nan());
        assert_eq!(back.values[(3, 4)], 34.0);
        // No temporary file is left behind.
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn unwritable_target_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        // A file where the target's folder should be: the folder cannot be made.
        let blocker = dir.path().join("a_file");
        std::fs::write(&blocker, b"").unwrap();
        let path = blocker.join("a.tif");
        let values = Array2::<f32>::zeros((4, 5));
        let err = write_float_geotiff(
            &path,
            &geometry(),
            &[BandOut {
                description: "x",
                unit: "1",
                values,
            }],
            &[],
        )
        .unwrap_err();
        assert!(err.to_string().starts_with("cannot write"), "{err}");
        assert!(!path.exists());
    }

    #[test]
    fn geographic_crs_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("geo.tif");
        let mut g = geometry();
        g.crs_wkt = SpatialRef::from_epsg(4326).unwrap().to_wkt().unwrap();
        g.geo_transform = [10.0, 0.001, 0.0, 50.0, 0.0, -0.001];
        write_float_geotiff(
            &path,
            &g,
            &[BandOut {
                description: "z",
                unit: "m",
                values: Array2::<f32>::zeros((4, 5)),
            }],
            &[],
        )
        .unwrap();
        let err = read_grid(&path, &ReadOptions::default())
            .unwrap_err()
            .to_string();
        assert!(err.contains("geographic"), "{err}");
    }

    #[test]
    fn one_band_of_a_stack_reads_as_in_the_whole_read() {
        // Reference: the same band in a read of every band; GDAL's band numbering is 1-based
        // (GDAL raster data model), ours 0-based.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("stack.tif");
        let bands: Vec<BandOut> = (0..3)
            .map(|k| BandOut {
                description: ["a", "b", "c"][k],
                unit: "",
                values: Array2::from_shape_fn((4, 5), |(r, c)| (100 * k + 10 * r + c) as f32),
            })
            .collect();
        write_float_geotiff(&path, &geometry(), &bands, &[]).unwrap();
        let whole = read_raster(&path, &ReadOptions::default()).unwrap();
        let only = |b| ReadOptions {
            only_band: Some(b),
            ..ReadOptions::default()
        };
        let one = read_raster(&path, &only(1)).unwrap();
        assert_eq!(one.bands, vec![whole.bands[1].clone()]);
        assert_eq!(one.info.names, vec!["a", "b", "c"]);
        let err = read_raster(&path, &only(3)).unwrap_err().to_string();
        assert!(err.contains("has 3 band(s), no band 4"), "{err}");
    }
}
