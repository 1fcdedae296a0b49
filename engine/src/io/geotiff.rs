//! Streaming GeoTIFF output: a file is created with its georeferencing, band descriptions,
//! units, nodata and metadata, then written run of rows by run of rows, band by band, and
//! finished (flushed, optionally turned into a Cloud Optimized GeoTIFF, read back and checked)
//! into a [`StagedFile`] the job commits with its other outputs.
//!
//! Layout: tiled 256 x 256, band-interleaved (each band's blocks are written once, however many
//! bands; pixel interleaving rewrites compressed blocks once per band when the block cache is
//! smaller than a row of blocks of all bands), BigTIFF when needed. Compression ([`Compression`]):
//! ZSTD level 1 by default (GDAL >= 2.3 and the mapping packages built on it read it), DEFLATE
//! for older readers, or none; floating-point samples with the floating-point predictor
//! (PREDICTOR=3), bytes with horizontal differencing (PREDICTOR=2); GDAL compresses blocks on
//! all cores (NUM_THREADS). Compression is lossless: values read back bit for bit.
//!
//! Cloud Optimized GeoTIFF ([`TiffOptions::cog`]): the finished file is copied by GDAL's COG
//! driver (CreateCopy, as GDAL 3.6 requires) with overviews resampled by nearest neighbour, so
//! no overview averages an azimuth as a linear value.

use super::staged::{track_temporary, untrack_temporary};
use super::{
    capture_gdal_messages, gdal_failure, gdal_outcome, take_gdal_messages, StagedFile, NODATA,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use gdal::raster::{Buffer, GdalType, RasterCreationOptions};
use gdal::spatial_ref::SpatialRef;
use gdal::{Dataset, DriverManager, Metadata};
use std::path::Path;

/// Block edge length of output GeoTIFFs in cells; runs of rows written at multiples of it
/// fill whole blocks.
pub const BLOCK_ROWS: usize = 256;

/// Lossless compression of output GeoTIFFs.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Compression {
    /// ZSTD level 1: fast, read by GDAL >= 2.3.
    #[default]
    Zstd,
    /// DEFLATE: read by every GeoTIFF reader.
    Deflate,
    /// No compression.
    None,
}

impl Compression {
    /// Parses `zstd`, `deflate` or `none`.
    pub fn parse(text: &str) -> std::result::Result<Self, String> {
        match text.trim().to_ascii_lowercase().as_str() {
            "zstd" => Ok(Self::Zstd),
            "deflate" => Ok(Self::Deflate),
            "none" => Ok(Self::None),
            other => Err(format!(
                "unknown compression '{other}': use zstd (default), deflate (for readers older than GDAL 2.3) or none"
            )),
        }
    }

    /// The name [`Compression::parse`] reads.
    pub fn name(self) -> &'static str {
        match self {
            Self::Zstd => "zstd",
            Self::Deflate => "deflate",
            Self::None => "none",
        }
    }

    /// GeoTIFF creation options of this compression; `predictor` is 3 for floating-point
    /// samples and 2 for integer ones.
    fn options(self, predictor: u8) -> Vec<String> {
        let method = match self {
            Self::Zstd => vec!["COMPRESS=ZSTD".to_string(), "ZSTD_LEVEL=1".into()],
            Self::Deflate => vec!["COMPRESS=DEFLATE".to_string()],
            Self::None => return vec![],
        };
        [
            method,
            vec![
                format!("PREDICTOR={predictor}"),
                "NUM_THREADS=ALL_CPUS".into(),
            ],
        ]
        .concat()
    }
}

/// How output GeoTIFFs are written.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct TiffOptions {
    /// Lossless compression.
    pub compression: Compression,
    /// Write a Cloud Optimized GeoTIFF (with nearest-neighbour overviews).
    pub cog: bool,
}

/// What a band holds: floating-point values with the nodata value [`NODATA`], or picture
/// bytes (no nodata; the alpha band marks holes).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Layout {
    /// Float32/float64 bands, band-interleaved.
    Float,
    /// 8-bit red, green, blue and (unassociated) alpha, band-interleaved too (written a whole
    /// band at a time, pixel-interleaved blocks would be rewritten when GDAL's cache cannot
    /// hold the picture).
    Rgba,
}

/// Description and unit of one output band.
pub struct BandSpec<'a> {
    /// Band description (attribute id).
    pub description: &'a str,
    /// Unit type of the values (empty for none).
    pub unit: &'a str,
}

/// A GeoTIFF being written under its temporary name (see the module notes). Dropped without
/// [`GeoTiffWriter::finish`], the temporary file is removed.
pub struct GeoTiffWriter {
    staged: StagedFile,
    dataset: Option<Dataset>,
    geometry: GridGeometry,
    bands: usize,
    options: TiffOptions,
}

impl GeoTiffWriter {
    /// Creates the GeoTIFF of `path` (under its temporary name) on `geometry` with one band per
    /// entry of `bands`, samples of type `T`, and dataset metadata items `metadata` (default
    /// domain).
    pub(crate) fn create<T: GdalType>(
        path: &Path,
        geometry: &GridGeometry,
        bands: &[BandSpec],
        metadata: &[(String, String)],
        options: TiffOptions,
        layout: Layout,
    ) -> Result<Self> {
        capture_gdal_messages();
        take_gdal_messages();
        let staged = StagedFile::new(path);
        let dataset =
            create_dataset::<T>(staged.temp(), geometry, bands, metadata, options, layout)
                .map_err(|reason| FlexureError::write(path, reason))?;
        Ok(Self {
            staged,
            dataset: Some(dataset),
            geometry: geometry.clone(),
            bands: bands.len(),
            options,
        })
    }

    /// Writes the row-major `values` of whole grid rows, from `first_row` on, into band
    /// `band` (0-based). Values are written as given: map nulls to the nodata value first.
    pub fn write_rows<T: GdalType + Copy>(
        &mut self,
        band: usize,
        first_row: usize,
        values: Vec<T>,
    ) -> Result<()> {
        let cols = self.geometry.cols;
        let rows = values.len() / cols.max(1);
        if band >= self.bands
            || values.len() != rows * cols
            || first_row + rows > self.geometry.rows
        {
            return Err(FlexureError::write(
                self.staged.target(),
                format!(
                    "internal: {} values for band {} at row {first_row} do not fit the {} x {} grid of {} bands",
                    values.len(),
                    band + 1,
                    cols,
                    self.geometry.rows,
                    self.bands
                ),
            ));
        }
        let mut rb = self.band(band)?;
        let mut buffer = Buffer::new((cols, rows), values);
        rb.write((0, first_row as isize), (cols, rows), &mut buffer)
            .map_err(|e| FlexureError::write(self.staged.target(), gdal_failure("write", e)))
    }

    /// Band `band` (0-based) of the open file.
    fn band(&self, band: usize) -> Result<gdal::raster::RasterBand<'_>> {
        let target = self.staged.target();
        let dataset = self
            .dataset
            .as_ref()
            .ok_or_else(|| FlexureError::write(target, "internal: written after finishing"))?;
        dataset
            .rasterband(band + 1)
            .map_err(|e| FlexureError::write(target, gdal_failure("band", e)))
    }

    /// Sets metadata item `key` = `value` (default domain) on band `band` (0-based), e.g. the
    /// azimuth of a sector band; kept through the COG copy.
    pub fn set_band_metadata(&mut self, band: usize, key: &str, value: &str) -> Result<()> {
        self.band(band)?
            .set_metadata_item(key, value, "")
            .map_err(|e| {
                FlexureError::write(self.staged.target(), gdal_failure("band metadata", e))
            })
    }

    /// Sets dataset metadata item `key` (default domain) after rows were written: for a value
    /// known only once the whole grid has streamed through (e.g. a scale taken from every
    /// bin). GDAL writes it with the file's directory when the file is finished.
    pub fn set_metadata_item(&mut self, key: &str, value: &str) -> Result<()> {
        let target = self.staged.target().to_path_buf();
        let dataset = self
            .dataset
            .as_mut()
            .ok_or_else(|| FlexureError::write(&target, "internal: written after finishing"))?;
        dataset
            .set_metadata_item(key, value, "")
            .map_err(|e| FlexureError::write(&target, gdal_failure("metadata", e)))
    }

    /// Flushes and closes the file, converts it to a Cloud Optimized GeoTIFF when asked, reads
    /// it back to check its size and band count, and hands it over for the job's commit.
    pub fn finish(mut self) -> Result<StagedFile> {
        let target = self.staged.target().to_path_buf();
        let outcome = self
            .close()
            .and_then(|_| self.to_cog())
            .and_then(|_| verify(self.staged.temp(), &self.geometry, self.bands));
        outcome.map_err(|reason| FlexureError::write(&target, reason))?;
        Ok(self.staged)
    }

    fn close(&mut self) -> std::result::Result<(), String> {
        if let Some(mut ds) = self.dataset.take() {
            ds.flush_cache().map_err(|e| gdal_failure("flush", e))?;
        }
        gdal_outcome()
    }

    /// Copies the closed GeoTIFF through GDAL's COG driver and puts the copy in its place.
    fn to_cog(&self) -> std::result::Result<(), String> {
        if !self.options.cog {
            return Ok(());
        }
        let temp = self.staged.temp();
        let plain = temp.with_extension("plain.tif");
        track_temporary(&plain);
        std::fs::rename(temp, &plain).map_err(|e| e.to_string())?;
        let copied = write_cog(&plain, temp, self.options.compression);
        let _ = std::fs::remove_file(&plain);
        untrack_temporary(&plain);
        copied
    }
}

fn create_dataset<T: GdalType>(
    temp: &Path,
    geometry: &GridGeometry,
    bands: &[BandSpec],
    metadata: &[(String, String)],
    options: TiffOptions,
    layout: Layout,
) -> std::result::Result<Dataset, String> {
    let driver =
        DriverManager::get_driver_by_name("GTiff").map_err(|e| gdal_failure("GTiff driver", e))?;
    let creation = RasterCreationOptions::from_iter(creation_options(options, layout));
    let mut ds = driver
        .create_with_band_type_with_options::<T, _>(
            temp,
            geometry.cols,
            geometry.rows,
            bands.len(),
            &creation,
        )
        .map_err(|e| gdal_failure("create", e))?;
    ds.set_geo_transform(&geometry.geo_transform)
        .map_err(|e| gdal_failure("geotransform", e))?;
    let srs = SpatialRef::from_wkt(&geometry.crs_wkt).map_err(|e| gdal_failure("CRS", e))?;
    ds.set_spatial_ref(&srs)
        .map_err(|e| gdal_failure("CRS", e))?;
    for (key, value) in metadata {
        ds.set_metadata_item(key, value, "")
            .map_err(|e| gdal_failure("metadata", e))?;
    }
    for (i, spec) in bands.iter().enumerate() {
        let mut rb = ds.rasterband(i + 1).map_err(|e| gdal_failure("band", e))?;
        rb.set_description(spec.description)
            .map_err(|e| gdal_failure("band description", e))?;
        if layout == Layout::Float {
            rb.set_no_data_value(Some(NODATA as f64))
                .map_err(|e| gdal_failure("nodata", e))?;
        }
        if !spec.unit.is_empty() {
            set_unit(&rb, spec.unit);
        }
    }
    Ok(ds)
}

/// GTiff creation options for `options` and `layout` (see the module notes).
fn creation_options(options: TiffOptions, layout: Layout) -> Vec<String> {
    let block = format!("{BLOCK_ROWS}");
    let mut list = vec![
        "TILED=YES".to_string(),
        format!("BLOCKXSIZE={block}"),
        format!("BLOCKYSIZE={block}"),
        "BIGTIFF=IF_SAFER".into(),
    ];
    match layout {
        Layout::Float => {
            list.push("INTERLEAVE=BAND".into());
            list.extend(options.compression.options(3));
        }
        Layout::Rgba => {
            list.extend([
                "PHOTOMETRIC=RGB".to_string(),
                "ALPHA=YES".into(),
                "INTERLEAVE=BAND".into(),
            ]);
            list.extend(options.compression.options(2));
        }
    }
    list
}

/// Copies `plain` to `cog` through the COG driver.
fn write_cog(
    plain: &Path,
    cog: &Path,
    compression: Compression,
) -> std::result::Result<(), String> {
    let source = Dataset::open(plain).map_err(|e| gdal_failure("COG source", e))?;
    let driver =
        DriverManager::get_driver_by_name("COG").map_err(|e| gdal_failure("COG driver", e))?;
    let mut options = vec![
        format!("BLOCKSIZE={BLOCK_ROWS}"),
        "BIGTIFF=IF_SAFER".to_string(),
        "RESAMPLING=NEAREST".into(),
        "OVERVIEWS=AUTO".into(),
        "NUM_THREADS=ALL_CPUS".into(),
    ];
    match compression {
        Compression::Zstd => options.extend(["COMPRESS=ZSTD".into(), "LEVEL=1".into()]),
        Compression::Deflate => options.push("COMPRESS=DEFLATE".into()),
        Compression::None => options.push("COMPRESS=NONE".into()),
    }
    if compression != Compression::None {
        options.push("PREDICTOR=YES".into());
    }
    let options = RasterCreationOptions::from_iter(options);
    source
        .create_copy(&driver, cog, &options)
        .map_err(|e| gdal_failure("COG copy", e))?;
    gdal_outcome()
}

/// Sets a band's unit type (GDALSetRasterUnitType; the gdal crate has no safe wrapper).
fn set_unit(band: &gdal::raster::RasterBand, unit: &str) {
    if let Ok(c_unit) = std::ffi::CString::new(unit) {
        // SAFETY: the band handle is valid for the lifetime of `band`; GDAL copies the string.
        unsafe {
            gdal_sys::GDALSetRasterUnitType(band.c_rasterband(), c_unit.as_ptr());
        }
    }
}

/// Reopens a written file and checks its size and band count (GDAL < 3.7 reports no error on
/// close, so a failed write shows only here).
fn verify(temp: &Path, geometry: &GridGeometry, bands: usize) -> std::result::Result<(), String> {
    let ds = Dataset::open(temp).map_err(|e| gdal_failure("read-back", e))?;
    if ds.raster_size() != (geometry.cols, geometry.rows) || ds.raster_count() != bands {
        return Err("read-back found a different size or band count than written".into());
    }
    Ok(())
}

/// Sets GDAL's block cache to `bytes` (GDALSetCacheMax64), e.g. a share of a job's memory
/// budget.
pub fn set_block_cache(bytes: u64) {
    // SAFETY: plain setter of a process-wide integer.
    unsafe { gdal_sys::GDALSetCacheMax64(bytes as i64) }
}
