//! The render job: one attribute band coloured by its scale, optionally shaded by a horizon and
//! overlaid with anisotropy vectors, written as an RGBA GeoTIFF on exactly the attribute's grid
//! and, optionally, as a PNG quicklook with legend. Outputs are staged and committed together.

use super::anisotropy::HTI_CAUTION;
use super::{anisotropy_file, stage_png, AnisotropyRaster};
use crate::anisotropy::vectors::{
    default_vector_scale, segment, vector_bins, VectorAxis, VectorSample,
};
use crate::draw::colour::{short, Clip, ColourScale};
use crate::draw::map::{
    cells_to_pixmap, colour_cells, draw_segments, hillshade, picture_scale, pixmap_bands,
    quicklook, Legend, MapSegment,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::points::is_point_list;
use crate::io::{
    commit_all, prepare_output_dir, read_info, read_raster, refuse_overwrite, stage_rgba_geotiff,
    Raster, RasterInfo, ReadOptions, StagedFile, TiffOptions,
};
use crate::provenance::Provenance;
use crate::stats::{quantile, Quantile};
use ndarray::{s, Array2};
use std::fmt;
use std::path::{Path, PathBuf};

/// Vectors across the map's width aimed at by the default decimation.
const VECTORS_ACROSS: f64 = 45.0;
/// Longest side of the quicklook map, pixels (approximately).
const QUICKLOOK_SIZE: f64 = 1000.0;

/// Options of the render job.
#[derive(Clone, Debug)]
pub struct RenderJob {
    /// Attribute raster (e.g. a curvature or anisotropy output).
    pub attribute: PathBuf,
    /// Band to draw, by description; the first band when `None`.
    pub band: Option<String>,
    /// Anisotropy raster (`anisotropy.tif`) or the folder holding it, for vectors.
    pub anisotropy: Option<PathBuf>,
    /// Horizon to shade with, on the attribute's grid.
    pub shade: Option<PathBuf>,
    /// The shade horizon's values increase upwards (elevation) rather than downwards.
    pub shade_positive_up: bool,
    /// How to read the attribute and shade grids (assumed CRS, null sentinels, point-list
    /// columns).
    pub read: ReadOptions,
    /// Colour clipping.
    pub clip: Clip,
    /// Vector decimation in anisotropy bins; about 50 across the map when `None`.
    pub every: Option<usize>,
    /// Azimuth the vectors follow.
    pub axis: VectorAxis,
    /// Least magnitude / magnitude_stderr for a drawn vector.
    pub min_snr: f64,
    /// Vector length in metres per ms; automatic when `None`.
    pub vector_scale: Option<f64>,
    /// RGBA GeoTIFF to write.
    pub out: PathBuf,
    /// PNG quicklook to write, if any.
    pub png: Option<PathBuf>,
    /// How output GeoTIFFs are compressed and laid out.
    pub tiff: TiffOptions,
}

impl RenderJob {
    /// A job with the defaults: first band, no vectors or shade, automatic clip.
    pub fn new(attribute: impl Into<PathBuf>, out: impl Into<PathBuf>) -> Self {
        Self {
            attribute: attribute.into(),
            band: None,
            anisotropy: None,
            shade: None,
            shade_positive_up: false,
            read: ReadOptions::default(),
            clip: Clip::Auto,
            every: None,
            axis: VectorAxis::Fast,
            min_snr: 2.0,
            vector_scale: None,
            out: out.into(),
            png: None,
            tiff: TiffOptions::default(),
        }
    }

    /// Runs the job and reports what it drew.
    pub fn run(&self) -> Result<RenderReport> {
        self.check_parameters()?;
        // Only the band drawn is read (a raster's band list comes from its header; a point
        // list is read whole).
        let only_band = if is_point_list(&self.attribute) {
            None
        } else {
            Some(self.band_index(&read_info(&self.attribute)?)?)
        };
        let options = ReadOptions {
            only_band,
            ..self.read.clone()
        };
        let raster = read_raster(&self.attribute, &options)?;
        let (geometry, bands, info) = (raster.geometry, raster.bands, raster.info);
        let index = self.band_index(&info)?;
        let values = &bands[if only_band.is_some() { 0 } else { index }];
        let id = band_id(&info, index);
        let scale = ColourScale::for_band(&id, values, self.clip).ok_or_else(|| {
            FlexureError::input(
                &self.attribute,
                format!("band {id} is null everywhere: nothing to draw"),
            )
        })?;
        let (shade, notes) = self.read_shade(&geometry)?;
        let vectors = self.read_vectors(&geometry)?;
        let mut inputs: Vec<&Path> = vec![&self.attribute];
        inputs.extend(self.shade.as_deref());
        inputs.extend(self.anisotropy.as_deref());
        let outputs: Vec<&Path> = std::iter::once(self.out.as_path())
            .chain(self.png.as_deref())
            .collect();
        for out in &outputs {
            prepare_output_dir(
                out.parent()
                    .filter(|p| !p.as_os_str().is_empty())
                    .unwrap_or(Path::new(".")),
            )?;
            refuse_overwrite(out, &inputs)?;
        }
        let cells = colour_cells(values, &scale, shade.as_ref());
        let segments = vectors.as_ref().map_or(&[][..], |v| &v.segments[..]);
        let mut map = cells_to_pixmap(&cells, (1.0, 1.0));
        draw_segments(&mut map, &geometry, (1.0, 1.0), segments, 1.0);
        let sources: Vec<PathBuf> = std::iter::once(self.attribute.clone())
            .chain(self.shade.clone())
            .chain(self.anisotropy.as_deref().map(anisotropy_file))
            .collect();
        let sources: Vec<&Path> = sources.iter().map(PathBuf::as_path).collect();
        let metadata = self.metadata(&id, &scale, vectors.as_ref(), &sources)?;
        let map_file = stage_rgba_geotiff(
            &self.out,
            &geometry,
            &pixmap_bands(&map),
            &metadata,
            self.tiff,
        )?;
        let mut staged = vec![map_file.with_source("the map (--out)")];
        if let Some(png) = &self.png {
            let legend_parts = LegendParts {
                info: &info,
                index,
                id: &id,
                scale: &scale,
                vectors: vectors.as_ref(),
            };
            staged.push(
                self.stage_png(png, &geometry, &cells, segments, &legend_parts)?
                    .with_source("the quicklook (--png)"),
            );
        }
        commit_all(staged)?;
        Ok(RenderReport {
            band: id,
            map: self.out.clone(),
            png: self.png.clone(),
            palette: scale.palette_name().to_string(),
            clip: scale.clip_note.clone(),
            vectors: vectors.map(|v| (v.segments.len(), v.every, v.scale)),
            notes,
        })
    }

    fn check_parameters(&self) -> Result<()> {
        if let Clip::Range(lo, hi) = self.clip {
            if !(lo.is_finite() && hi.is_finite() && lo < hi) {
                return Err(FlexureError::Parameter(format!(
                    "--clip {lo},{hi}: give two finite numbers, low then high"
                )));
            }
        }
        if self.every == Some(0) {
            return Err(FlexureError::Parameter("--every must be at least 1".into()));
        }
        if !(self.min_snr.is_finite() && self.min_snr >= 0.0) {
            return Err(FlexureError::Parameter(format!(
                "--min-snr {} must be a number >= 0",
                self.min_snr
            )));
        }
        if let Some(s) = self.vector_scale {
            if !(s.is_finite() && s > 0.0) {
                return Err(FlexureError::Parameter(format!(
                    "--vector-scale {s} must be a positive number of metres per ms"
                )));
            }
        }
        Ok(())
    }

    fn band_index(&self, info: &RasterInfo) -> Result<usize> {
        let Some(name) = &self.band else { return Ok(0) };
        info.names.iter().position(|n| n == name).ok_or_else(|| {
            FlexureError::input(
                &self.attribute,
                format!("has no band '{name}'; its bands are: {}", band_list(info)),
            )
        })
    }

    /// The hillshade of the shade horizon, if any, and what its reader noticed.
    fn read_shade(&self, geometry: &GridGeometry) -> Result<(Option<Array2<f64>>, Vec<String>)> {
        let Some(path) = &self.shade else {
            return Ok((None, Vec::new()));
        };
        let Raster {
            geometry: g,
            mut bands,
            notes,
            ..
        } = read_raster(path, &self.read)?;
        if bands.len() != 1 {
            return Err(FlexureError::input(
                path,
                format!(
                    "has {} bands: give a single-band horizon to shade with",
                    bands.len()
                ),
            ));
        }
        if !g.same_grid(geometry) {
            return Err(other_grid(
                path,
                &g,
                &self.attribute,
                geometry,
                "shade horizon",
            ));
        }
        let shade = hillshade(&bands.swap_remove(0), &g, !self.shade_positive_up, None);
        Ok((Some(shade), notes))
    }

    fn read_vectors(&self, geometry: &GridGeometry) -> Result<Option<Vectors>> {
        let Some(given) = &self.anisotropy else {
            return Ok(None);
        };
        let raster = AnisotropyRaster::read(given)?;
        let g = &raster.geometry;
        if g.superbin_of(geometry).is_none() {
            return Err(other_grid(
                &raster.path,
                g,
                &self.attribute,
                geometry,
                "anisotropy",
            ));
        }
        let samples: Vec<Option<VectorSample>> = (0..g.rows * g.cols)
            .map(|i| raster.sample(i / g.cols, i % g.cols))
            .collect();
        let (sx, sy) = g.spacing();
        let every = match self.every {
            Some(n) => (n, n),
            None => {
                // Square spacing: about VECTORS_ACROSS vectors across the attribute map's width.
                let spacing = geometry.cols as f64 * geometry.spacing().0 / VECTORS_ACROSS;
                let n = |s: f64| ((spacing / s).round() as usize).max(1);
                (n(sx), n(sy))
            }
        };
        let kept = vector_bins(&samples, 0, g.cols, every, self.min_snr, |s| s.snr);
        let spacing_m = (every.0 as f64 * sx).min(every.1 as f64 * sy) * g.metres_per_unit;
        let scale = self
            .vector_scale
            .unwrap_or_else(|| default_vector_scale(kept.iter().map(|k| k.2.magnitude), spacing_m));
        let segments = kept
            .iter()
            .map(|&(r, c, s)| {
                let (a, b) = segment(
                    g.cell_centre(c, r),
                    s.azimuth(self.axis),
                    s.magnitude * scale,
                    g.metres_per_unit,
                );
                MapSegment { a, b }
            })
            .collect();
        let mut m: Vec<f64> = kept.iter().map(|k| k.2.magnitude).collect();
        Ok(Some(Vectors {
            segments,
            every,
            scale,
            typical_ms: quantile(&mut m, 0.95, Quantile::Lower).unwrap_or(0.0),
        }))
    }

    fn metadata(
        &self,
        id: &str,
        scale: &ColourScale,
        vectors: Option<&Vectors>,
        inputs: &[&Path],
    ) -> Result<Vec<(String, String)>> {
        let item = |k: &str, v: String| (k.to_string(), v);
        let mut m = Provenance::of_inputs(inputs)?.items().to_vec();
        m.extend([
            item("FLEXURE_BAND", id.to_string()),
            item("FLEXURE_COLOUR_MAP", scale.palette_name().to_string()),
            item(
                "FLEXURE_COLOUR_RANGE",
                format!("{} .. {}; {}", scale.lo, scale.hi, scale.clip_note),
            ),
        ]);
        if let Some(v) = vectors {
            m.push(item(
                "FLEXURE_VECTORS",
                format!(
                    "{} {} azimuth, every {} x {} bins, min SNR {}, {} m per ms",
                    v.segments.len(),
                    axis_name(self.axis),
                    v.every.0,
                    v.every.1,
                    self.min_snr,
                    v.scale
                ),
            ));
            m.push(item("FLEXURE_CAUTION", HTI_CAUTION.to_string()));
        }
        Ok(m)
    }

    fn stage_png(
        &self,
        path: &Path,
        geometry: &GridGeometry,
        cells: &Array2<[u8; 4]>,
        segments: &[MapSegment],
        parts: &LegendParts,
    ) -> Result<StagedFile> {
        // A grid whose rows run north would be drawn mirrored: its rows are drawn last first.
        let flipped;
        let (geometry, cells) = if geometry.mirrored_in_pictures() {
            flipped = cells.slice(s![..;-1, ..]).to_owned();
            (&geometry.rows_reversed(), &flipped)
        } else {
            (geometry, cells)
        };
        let px = quicklook_pixels(geometry);
        let mut map = cells_to_pixmap(cells, px);
        draw_segments(&mut map, geometry, px, segments, 2.0);
        let legend = self.legend(geometry, px, parts);
        stage_png(path, &quicklook(&map, &legend))
    }

    fn legend(&self, geometry: &GridGeometry, px: (f64, f64), parts: &LegendParts) -> Legend {
        let unit = parts
            .info
            .units
            .get(parts.index)
            .cloned()
            .unwrap_or_default();
        let window = match (
            parts.info.item("FLEXURE_WINDOW_CELLS"),
            parts.info.item("FLEXURE_WINDOW_SIZE_M"),
        ) {
            (Some(n), Some(m)) => format!(", window {n} cells ({m} m)"),
            _ => String::new(),
        };
        let title = format!(
            "{} of {}{window}",
            parts.id,
            source_name(parts.info, &self.attribute)
        );
        let vectors = parts.vectors.map(|v| {
            let bar_ms = one_digit(v.typical_ms.max(1e-6));
            let metres_per_px = geometry.spacing().0 * geometry.metres_per_unit / px.0;
            let bar_px = (bar_ms * v.scale / metres_per_px) as f32;
            let note = format!(
                "bar = {} ms; {} azimuth vectors on every {} x {} anisotropy bins with SNR >= {}; {} m per ms. HTI reading: fast = fracture strike; not a stress measurement.",
                short(bar_ms), axis_name(self.axis), v.every.0, v.every.1, self.min_snr, short(v.scale)
            );
            (note, bar_px)
        });
        let (x, y) = geometry.centre();
        let (c0, r0) = geometry.map_to_grid(x, y);
        let (c1, r1) = geometry.map_to_grid(x, y + 1.0);
        let (dx, dy) = ((c1 - c0) * px.0, (r1 - r0) * px.1);
        let corner = |c: usize, r: usize| {
            let g = &geometry.geo_transform;
            let (i, j) = (c as f64, r as f64);
            format!(
                "({:.1}, {:.1})",
                g[0] + i * g[1] + j * g[2],
                g[3] + i * g[4] + j * g[5]
            )
        };
        let (cols, rows) = (geometry.cols, geometry.rows);
        Legend {
            title,
            band: if unit.is_empty() { parts.id.to_string() } else { format!("{} ({unit})", parts.id) },
            scale: parts.scale.clone(),
            vectors,
            north_in_picture: dx.atan2(-dy).to_degrees(),
            extent: vec![
                format!("corners, CRS units: top-left {}  top-right {}  bottom-left {}  bottom-right {}", corner(0, 0), corner(cols, 0), corner(0, rows), corner(cols, rows)),
                format!("{}; {}", crs_name(geometry), geometry.describe()),
                "flexure informs interpretation; it does not replace geomechanical studies, licensed professionals or local regulations.".into(),
            ],
        }
    }
}

/// Vectors ready to draw.
struct Vectors {
    segments: Vec<MapSegment>,
    every: (usize, usize),
    scale: f64,
    /// 95th-percentile magnitude of the drawn vectors (ms), for the legend's sample vector.
    typical_ms: f64,
}

/// The pieces of the attribute the legend needs.
struct LegendParts<'a> {
    info: &'a RasterInfo,
    index: usize,
    id: &'a str,
    scale: &'a ColourScale,
    vectors: Option<&'a Vectors>,
}

/// Pixels per (column, row) for a quicklook about [`QUICKLOOK_SIZE`] pixels on its long side,
/// proportional to the bin sizes so the picture keeps the map's shape.
fn quicklook_pixels(geometry: &GridGeometry) -> (f64, f64) {
    picture_scale(geometry, QUICKLOOK_SIZE)
}

/// `v` rounded to one significant digit.
fn one_digit(v: f64) -> f64 {
    let p = 10f64.powf(v.log10().floor());
    (v / p).round() * p
}

fn band_id(info: &RasterInfo, index: usize) -> String {
    match info.names.get(index) {
        Some(n) if !n.is_empty() => n.clone(),
        _ => format!("band {}", index + 1),
    }
}

fn band_list(info: &RasterInfo) -> String {
    (0..info.names.len())
        .map(|i| band_id(info, i))
        .collect::<Vec<_>>()
        .join(", ")
}

fn file_name(p: &Path) -> String {
    p.file_name()
        .unwrap_or_default()
        .to_string_lossy()
        .to_string()
}

fn source_name(info: &RasterInfo, path: &Path) -> String {
    info.item("FLEXURE_SOURCE")
        .map_or_else(|| file_name(path), str::to_string)
}

fn crs_name(geometry: &GridGeometry) -> String {
    gdal::spatial_ref::SpatialRef::from_wkt(&geometry.crs_wkt)
        .ok()
        .and_then(|s| s.name())
        .unwrap_or_else(|| "CRS unknown".into())
}

fn axis_name(axis: VectorAxis) -> &'static str {
    match axis {
        VectorAxis::Fast => "fast",
        VectorAxis::Slow => "slow",
    }
}

fn other_grid(
    path: &Path,
    g: &GridGeometry,
    attribute: &Path,
    a: &GridGeometry,
    what: &str,
) -> FlexureError {
    FlexureError::input(
        path,
        format!(
            "the {what} grid ({}) is not the grid of {} ({}{}); flexure does not resample: give both on one survey lattice",
            g.describe(),
            file_name(attribute),
            a.describe(),
            g.mismatch(a).map_or(String::new(), |why| format!("; {why}"))
        ),
    )
}

/// What a render job drew.
#[derive(Clone, Debug)]
pub struct RenderReport {
    /// Band drawn.
    pub band: String,
    /// RGBA GeoTIFF written.
    pub map: PathBuf,
    /// PNG written, if any.
    pub png: Option<PathBuf>,
    /// Colour map used.
    pub palette: String,
    /// How the colours were clipped.
    pub clip: String,
    /// (count, decimation (columns, rows), metres per ms) of the vectors drawn.
    pub vectors: Option<(usize, (usize, usize), f64)>,
    /// What the readers noticed (e.g. the shade horizon's point-list lattice).
    pub notes: Vec<String>,
}

impl fmt::Display for RenderReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "{}: {}, {}", self.band, self.palette, self.clip)?;
        if let Some((n, every, scale)) = self.vectors {
            writeln!(
                f,
                "  {n} vectors, every {} x {} bins, {} m per ms",
                every.0,
                every.1,
                short(scale)
            )?;
        }
        for n in &self.notes {
            writeln!(f, "  note: {n}")?;
        }
        writeln!(f, "wrote {}", self.map.display())?;
        if let Some(p) = &self.png {
            writeln!(f, "wrote {}", p.display())?;
        }
        Ok(())
    }
}
