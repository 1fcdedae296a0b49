//! Reading an input run of rows by run of rows: the streaming counterpart of
//! [`read_raster`](super::read_raster) for jobs that work bin by bin (the anisotropy job).
//!
//! - A raster is opened once; each band is read by windows of whole rows (GDAL `RasterIO`
//!   through `RasterBand::read_as`), its nulls handled exactly as `read_raster` handles them
//!   (the declared nodata, the `--nodata` sentinels and every non-finite value become NaN):
//!   both read through [`read_band_rows`].
//! - A point list is necessarily read whole (its points must be placed on their lattice) and
//!   held; its rows are copied out of it.
//! - The search for an undeclared sentinel ([`super::nulls`]) needs a band's median and
//!   median absolute deviation over the whole file, so [`RowSource::open`] runs it on every
//!   band that declares no nodata, one band at a time: the band is read whole, checked with the
//!   same function `read_raster` uses and let go. Only that band is held, only while it is
//!   checked; a band with a declared nodata (every flexure output, most exports) is never held
//!   whole.

use super::{
    capture_gdal_messages, check_undeclared_nulls, nulls, points, raster_info, read_geometry,
    read_point_list, take_gdal_messages, RasterInfo, ReadOptions,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use gdal::raster::RasterBand;
use gdal::{Dataset, Metadata};
use ndarray::{s, Array2};
use std::ops::Range;
use std::path::{Path, PathBuf};

/// An input as opened: a point list read onto its lattice, or a raster GDAL opened.
pub(super) enum Opened {
    /// A point list, read whole (see [`read_point_list`]).
    Points(super::Raster),
    /// A raster file.
    Dataset(Dataset),
}

/// Opens an input the way every reader does: a point list by content, else a raster through
/// GDAL; a text file GDAL cannot open goes to the point-list reader, which names the line.
pub(super) fn open_input(path: &Path, options: &ReadOptions) -> Result<Opened> {
    capture_gdal_messages();
    if !path.is_file() {
        return Err(FlexureError::read(path, "no such file"));
    }
    if points::is_point_list(path) {
        return read_point_list(path, options).map(Opened::Points);
    }
    match Dataset::open(path) {
        Ok(ds) => Ok(Opened::Dataset(ds)),
        // A text file GDAL cannot read is most likely a point list with something unusual in
        // it: the point reader names the line.
        Err(_) if points::is_plain_text(path) => read_point_list(path, options).map(Opened::Points),
        Err(e) => Err(FlexureError::read(path, e)),
    }
}

/// Rows `rows` of `band` (all `cols` columns) as f64, `[row - rows.start, col]`, with the
/// declared `nodata`, the `sentinels` and every non-finite value as NaN
/// ([`nulls::null_to_nan`]).
pub(super) fn read_band_rows(
    band: &RasterBand,
    rows: Range<usize>,
    cols: usize,
    nodata: Option<f64>,
    sentinels: &[f64],
) -> gdal::errors::Result<Array2<f64>> {
    let size = (cols, rows.len());
    let mut values = band
        .read_as::<f64>((0, rows.start as isize), size, size, None)?
        .to_array()?;
    values.mapv_inplace(|v| nulls::null_to_nan(v, nodata, sentinels));
    Ok(values)
}

/// An input grid opened for reading by runs of rows (see the module notes): its placement,
/// band names, units and dataset metadata, what the opening checks noticed, and its bands.
pub struct RowSource {
    path: PathBuf,
    geometry: GridGeometry,
    info: RasterInfo,
    notes: Vec<String>,
    data: Data,
}

enum Data {
    /// A raster file, with each band's declared nodata and the `--nodata` sentinels.
    File {
        dataset: Dataset,
        nodata: Vec<Option<f64>>,
        sentinels: Vec<f64>,
    },
    /// The bands of a point list, read whole.
    Held(Vec<Array2<f64>>),
}

impl RowSource {
    /// Opens `path` (a raster or a point list, decided as [`read_raster`](super::read_raster)
    /// decides) with `options` (`only_band` is not used: every band can be read). Bands that
    /// declare no nodata are searched for an undeclared sentinel when
    /// `options.find_sentinels` (refused, or noted, as `read_raster` does).
    pub fn open(path: &Path, options: &ReadOptions) -> Result<Self> {
        let options = &ReadOptions {
            only_band: None,
            ..options.clone()
        };
        let dataset = match open_input(path, options)? {
            Opened::Points(raster) => {
                return Ok(Self {
                    path: path.to_path_buf(),
                    geometry: raster.geometry,
                    info: raster.info,
                    notes: raster.notes,
                    data: Data::Held(raster.bands),
                })
            }
            Opened::Dataset(ds) => ds,
        };
        let geometry = read_geometry(&dataset, path, options.crs.as_deref())?;
        let info = raster_info(&dataset, path)?;
        let nodata = (1..=dataset.raster_count())
            .map(|i| {
                let band = dataset.rasterband(i);
                band.map(|b| b.no_data_value())
                    .map_err(|e| FlexureError::read(path, e))
            })
            .collect::<Result<Vec<_>>>()?;
        take_gdal_messages();
        let mut source = Self {
            path: path.to_path_buf(),
            geometry,
            info,
            notes: Vec::new(),
            data: Data::File {
                dataset,
                nodata: nodata.clone(),
                sentinels: options.nodata.clone(),
            },
        };
        if options.find_sentinels {
            for (b, _) in nodata.iter().enumerate().filter(|(_, nd)| nd.is_none()) {
                let whole = source.read_rows(b, 0..source.geometry.rows)?;
                let label = format!("band {}", b + 1);
                source
                    .notes
                    .extend(check_undeclared_nulls(&whole, path, &label)?);
            }
        }
        Ok(source)
    }

    /// The file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Where the grid lies.
    pub fn geometry(&self) -> &GridGeometry {
        &self.geometry
    }

    /// Band names, units and dataset metadata.
    pub fn info(&self) -> &RasterInfo {
        &self.info
    }

    /// What opening it noticed (a point list's lattice, far outliers kept as data).
    pub fn notes(&self) -> &[String] {
        &self.notes
    }

    /// Number of bands.
    pub fn band_count(&self) -> usize {
        self.info.names.len()
    }

    /// The value of band metadata item `key` (default domain) of band `band` (0-based);
    /// `None` when absent, and always for a point list (which has no band metadata).
    pub fn band_item(&self, band: usize, key: &str) -> Option<String> {
        match &self.data {
            Data::File { dataset, .. } => dataset.rasterband(band + 1).ok()?.metadata_item(key, ""),
            Data::Held(_) => None,
        }
    }

    /// Rows `rows` of band `band` (0-based), every column, NaN nulls: `[row - rows.start, col]`.
    pub fn read_rows(&self, band: usize, rows: Range<usize>) -> Result<Array2<f64>> {
        let read = |e: String| FlexureError::read(&self.path, e);
        if band >= self.band_count() || rows.end > self.geometry.rows {
            return Err(read(format!(
                "internal: rows {rows:?} of band {} asked of {} band(s) of {} rows",
                band + 1,
                self.band_count(),
                self.geometry.rows
            )));
        }
        match &self.data {
            Data::File {
                dataset,
                nodata,
                sentinels,
            } => {
                let values = dataset.rasterband(band + 1).and_then(|b| {
                    read_band_rows(&b, rows, self.geometry.cols, nodata[band], sentinels)
                });
                take_gdal_messages();
                values.map_err(|e| read(e.to_string()))
            }
            Data::Held(bands) => Ok(bands[band].slice(s![rows, ..]).to_owned()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::io::{read_raster, write_float_geotiff, BandOut};
    use gdal::spatial_ref::SpatialRef;

    fn geometry(cols: usize, rows: usize) -> GridGeometry {
        GridGeometry {
            cols,
            rows,
            geo_transform: [500000.0, 25.0, 0.0, 3900000.0, 0.0, -25.0],
            crs_wkt: SpatialRef::from_epsg(32625).unwrap().to_wkt().unwrap(),
            metres_per_unit: 1.0,
        }
    }

    /// Writes a two-band float32 GeoTIFF with a NaN null and a sentinel, optionally declaring
    /// no nodata (by writing it through GDAL with the nodata removed).
    fn two_bands(dir: &Path, declared: bool) -> PathBuf {
        let path = dir.join(if declared { "d.tif" } else { "u.tif" });
        let bands: Vec<BandOut> = (0..2)
            .map(|k| {
                let mut values =
                    Array2::from_shape_fn((300, 7), |(r, c)| (1000 + k * 50 + r + 3 * c) as f32);
                values[(17, 3)] = f32::NAN;
                values[(260, 1)] = -999.25;
                BandOut {
                    description: ["a", "b"][k],
                    unit: "ms",
                    values,
                }
            })
            .collect();
        write_float_geotiff(&path, &geometry(7, 300), &bands, &[]).unwrap();
        if !declared {
            let ds = Dataset::open_ex(
                &path,
                gdal::DatasetOptions {
                    open_flags: gdal::GdalOpenFlags::GDAL_OF_UPDATE,
                    ..Default::default()
                },
            )
            .unwrap();
            for b in 1..=2 {
                ds.rasterband(b).unwrap().set_no_data_value(None).unwrap();
            }
        }
        path
    }

    #[test]
    fn row_windows_equal_the_whole_read() {
        // Reference: `read_raster`, the whole-file reader (its nodata, sentinel and NaN
        // handling); windows that straddle GDAL's 256-row blocks give the same bits.
        let dir = tempfile::tempdir().unwrap();
        let path = two_bands(dir.path(), true);
        let options = ReadOptions {
            nodata: vec![-999.25],
            ..ReadOptions::default()
        };
        let whole = read_raster(&path, &options).unwrap();
        let source = RowSource::open(&path, &options).unwrap();
        assert_eq!(source.info(), &whole.info);
        for band in 0..2 {
            for rows in [0..1, 0..256, 250..300, 17..18, 0..300] {
                let part = source.read_rows(band, rows.clone()).unwrap();
                let expected = whole.bands[band].slice(s![rows.clone(), ..]);
                let same = part
                    .iter()
                    .zip(expected.iter())
                    .all(|(a, b)| a.to_bits() == b.to_bits());
                assert!(same, "band {band} rows {rows:?}");
            }
        }
        assert!(source.read_rows(0, 250..301).is_err());
        assert!(source.read_rows(2, 0..1).is_err());
    }

    #[test]
    fn undeclared_sentinels_are_refused_as_the_whole_read_refuses_them() {
        // Reference: `read_raster` on the same file: the same one-line refusal (the check of
        // `nulls` on the same values), and with the sentinel declared the same values.
        let dir = tempfile::tempdir().unwrap();
        let path = two_bands(dir.path(), false);
        let whole = read_raster(&path, &ReadOptions::default())
            .unwrap_err()
            .to_string();
        let opened = RowSource::open(&path, &ReadOptions::default())
            .err()
            .unwrap()
            .to_string();
        assert_eq!(opened, whole);
        // The NaN cell was written as flexure's nodata -99999, now undeclared: the most
        // frequent apart value (ties: the smaller) is named.
        assert!(opened.contains("--nodata -99999"), "{opened}");
        let options = ReadOptions {
            nodata: vec![-99999.0, -999.25],
            ..ReadOptions::default()
        };
        let source = RowSource::open(&path, &options).unwrap();
        let back = read_raster(&path, &options).unwrap();
        assert_eq!(source.notes(), back.notes.as_slice());
        let bits = |a: &Array2<f64>| a.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        assert_eq!(
            bits(&source.read_rows(1, 0..300).unwrap()),
            bits(&back.bands[1])
        );
        assert_eq!(source.band_item(0, "AZIMUTH_DEG"), None);
    }
}
