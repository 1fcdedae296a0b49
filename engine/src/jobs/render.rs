//! The render job: one attribute band coloured by its scale, optionally shaded by a horizon and
//! overlaid with horizon contours, anisotropy vectors and wells (paths, stage corridors and
//! numbers), written as an RGBA GeoTIFF covering exactly the attribute's grid at a whole number
//! of pixels per cell and, optionally, as a PNG quicklook with legend, scale bar and north
//! arrow, in survey orientation or warped north-up with map-coordinate ticks. Outputs are
//! staged and committed together.

use super::anisotropy::HTI_CAUTION;
use super::{anisotropy_file, stage_png, AnisotropyRaster};
use crate::anisotropy::vectors::{
    default_vector_scale, segment, vector_bins, VectorAxis, VectorSample,
};
use crate::draw::colour::{short, Clip, ColourScale};
use crate::draw::geo::{contour_lines, north_up_geometry, warp_cells, ContourLine};
use crate::draw::map::{
    cells_to_pixmap, colour_cells, hillshade, picture_geometry, picture_scale, pixmap_bands,
    quicklook, Legend,
};
use crate::draw::overlay::{draw_overlay, ring_centre, MapLabel, MapSegment, Overlay};
use crate::draw::ticks::tick_label;
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::points::is_point_list;
use crate::io::vector::{read_features, GeometryKind};
use crate::io::{
    commit_all, prepare_output_dir, read_info, read_raster, refuse_overwrite, stage_rgba_geotiff,
    Raster, RasterInfo, ReadOptions, StagedFile, TiffOptions,
};
use crate::provenance::Provenance;
use crate::stats::{quantile, Quantile};
use crate::surface::horizon::{
    domain_from_name, DeclaredUnit, Domain, HorizonSource, VelocitySource,
};
use crate::wells::trajectory::LATERAL;
use ndarray::{s, Array2};
use std::fmt;
use std::path::{Path, PathBuf};

/// Vectors across the map's width aimed at by the default decimation.
const VECTORS_ACROSS: f64 = 45.0;
/// Longest side of the quicklook map, pixels (approximately).
const QUICKLOOK_SIZE: f64 = 1000.0;
/// Longest side of the map raster aimed at by the default pixels per cell, pixels.
const MAP_RASTER_SIZE: f64 = 2000.0;
/// Most pixels per cell of the default (small grids).
const MAX_DEFAULT_PIXELS_PER_CELL: usize = 8;
/// Most pixels along either side of the map raster.
const MAX_MAP_RASTER_SIDE: usize = 40_000;
/// Least length of a contour line that gets a level label, as a share of the map's longer
/// side.
const LABELLED_CONTOUR_SHARE: f64 = 0.1;
/// Most contour levels a `--contour-interval` may give over the shade horizon's range.
const MAX_CONTOUR_LEVELS: f64 = 400.0;
/// Line weight of overlays on the quicklook (map rasters: 1).
const QUICKLOOK_WEIGHT: f32 = 1.4;
/// Files of the stages command's output folder drawn by `--wells` (GeoPackage preferred).
const STAGES_LAYERS: [&str; 2] = ["well_paths", "stage_corridors"];

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
    /// Pixels per cell (along rows and columns) of the RGBA GeoTIFF; when `None`,
    /// [`default_pixels_per_cell`] (about 2000 pixels on the longer side, 1 to 8).
    pub pixels_per_cell: Option<usize>,
    /// Wells to draw: the `stages` output folder (its `well_paths` and `stage_corridors`
    /// layers) or vector files (GeoPackage, GeoJSON, ...) of line (well path) and polygon
    /// (corridor) features; a `well` field names a path, a `stage` field numbers a corridor.
    pub wells: Vec<PathBuf>,
    /// Draw the quicklook north-up (the picture warped by GDAL, map-coordinate ticks on the
    /// frame) instead of in survey orientation; the GeoTIFF stays on the survey grid.
    pub north_up: bool,
    /// Contour interval of the shade horizon, in its stored unit (e.g. ms or m); none when
    /// `None`.
    pub contour_interval: Option<f64>,
    /// Vertical exaggeration of the hillshade, of the shade horizon converted to depth in
    /// metres (feet converted; a time horizon needs `shade_velocity`); when `None`, automatic
    /// (the steepest 5% of slopes shaded as 30 degrees).
    pub exaggeration: Option<f64>,
    /// Average velocity (m/s) that turns a time (ms) shade horizon into depth for
    /// `exaggeration`.
    pub shade_velocity: Option<f64>,
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
            pixels_per_cell: None,
            wells: Vec::new(),
            north_up: false,
            contour_interval: None,
            exaggeration: None,
            shade_velocity: None,
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
        let shade = self.read_shade(&geometry)?;
        let vectors = self.read_vectors(&geometry)?;
        let well_files = self.well_files()?;
        let wells = read_wells(&well_files, &geometry)?;
        let mut inputs: Vec<&Path> = vec![&self.attribute];
        inputs.extend(self.shade.as_deref());
        inputs.extend(self.anisotropy.as_deref());
        inputs.extend(well_files.iter().map(PathBuf::as_path));
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
        let cells = colour_cells(values, &scale, shade.light.as_ref());
        let overlay = Overlay {
            contours: shade.contours.clone(),
            contour_labels: shade.contour_labels.clone(),
            vectors: vectors
                .as_ref()
                .map_or_else(Vec::new, |v| v.segments.clone()),
            ..wells.clone()
        };
        let k = self
            .pixels_per_cell
            .unwrap_or_else(|| default_pixels_per_cell(&geometry));
        check_raster_size(&geometry, k)?;
        let raster_geometry = picture_geometry(&geometry, (k as f64, k as f64));
        let mut map = cells_to_pixmap(&cells, (k as f64, k as f64));
        draw_overlay(&mut map, &raster_geometry, &overlay, 1.0);
        let sources: Vec<PathBuf> = std::iter::once(self.attribute.clone())
            .chain(self.shade.clone())
            .chain(self.anisotropy.as_deref().map(anisotropy_file))
            .chain(well_files.iter().cloned())
            .collect();
        let sources: Vec<&Path> = sources.iter().map(PathBuf::as_path).collect();
        let metadata = self.metadata(&id, &scale, vectors.as_ref(), &shade, k, &sources)?;
        let map_file = stage_rgba_geotiff(
            &self.out,
            &raster_geometry,
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
                shade: &shade,
                wells: &wells,
            };
            staged.push(
                self.stage_png(png, &geometry, &cells, &overlay, &legend_parts)?
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
            pixels_per_cell: k,
            wells: (wells.wells.len(), wells.corridors.len()),
            contours: shade.contours.len(),
            notes: shade.notes,
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
        if let Some(k) = self.pixels_per_cell {
            if k == 0 {
                return Err(FlexureError::Parameter(
                    "--pixels-per-cell must be at least 1".into(),
                ));
            }
        }
        for (name, value) in [
            ("--contour-interval", self.contour_interval),
            ("--exaggeration", self.exaggeration),
            ("--shade-velocity", self.shade_velocity),
        ] {
            if let Some(v) = value {
                if !(v.is_finite() && v > 0.0) {
                    return Err(FlexureError::Parameter(format!(
                        "{name} {v} must be a positive number"
                    )));
                }
                if self.shade.is_none() {
                    return Err(FlexureError::Parameter(format!(
                        "{name} applies to the shade horizon: give --shade too"
                    )));
                }
            }
        }
        if self.shade_velocity.is_some() && self.exaggeration.is_none() {
            return Err(FlexureError::Parameter(
                "--shade-velocity is used only to convert a time horizon for --exaggeration: give --exaggeration too, or leave it out".into(),
            ));
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

    /// The shade horizon's hillshade and contours, if any, and what its readers noticed.
    fn read_shade(&self, geometry: &GridGeometry) -> Result<Shade> {
        let Some(path) = &self.shade else {
            return Ok(Shade::default());
        };
        let Raster {
            geometry: g,
            mut bands,
            notes,
            info,
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
        let stored = bands.swap_remove(0);
        let unit = info.units.first().cloned().unwrap_or_default();
        let mut shade = Shade {
            notes,
            ..Shade::default()
        };
        if let Some(interval) = self.contour_interval {
            check_contour_levels(path, &stored, interval, &unit)?;
            let lines = contour_lines(&stored, &g, interval)?;
            shade.contour_labels = contour_labels(&lines, &g, interval);
            shade.contours = lines.into_iter().map(|line| line.points).collect();
            shade.contour_note = Some(format!(
                "contours every {} {} of {}",
                short(interval),
                if unit.is_empty() {
                    "(stored unit)"
                } else {
                    unit.as_str()
                },
                file_name(path)
            ));
        }
        let (light, how) = match self.exaggeration {
            None => (
                hillshade(&stored, &g, !self.shade_positive_up, None),
                "automatic relief (steepest 5% of slopes lit as 30 degrees)".to_string(),
            ),
            Some(e) => {
                let declared_time = matches!(
                    DeclaredUnit::parse(&unit),
                    Some(DeclaredUnit::Milliseconds | DeclaredUnit::Seconds)
                ) || info.names.first().and_then(|n| domain_from_name(n))
                    == Some(Domain::Time);
                if declared_time && self.shade_velocity.is_none() {
                    return Err(FlexureError::input(
                        path,
                        "is a time horizon: --exaggeration needs --shade-velocity (m/s) to turn ms into metres; or leave --exaggeration out for automatic shading",
                    ));
                }
                let source = HorizonSource {
                    positive_up: self.shade_positive_up.then_some(true),
                    velocity: self
                        .shade_velocity
                        .map_or(VelocitySource::None, VelocitySource::Constant),
                    ..HorizonSource::new(path)
                };
                let horizon = source.load(&self.read)?;
                shade.notes.extend(horizon.notes);
                let via = if horizon.domain == Domain::Time {
                    format!(", time converted at {}", horizon.velocity)
                } else {
                    String::new()
                };
                (
                    hillshade(&horizon.depth, &g, true, Some(e * g.metres_per_unit)),
                    format!("vertical exaggeration {} (depth in metres{via})", short(e)),
                )
            }
        };
        shade.light = Some(light);
        shade.how = Some(format!("shaded by {}: {how}", file_name(path)));
        Ok(shade)
    }

    /// The vector files `--wells` names: each file as given, each folder's stages layers.
    fn well_files(&self) -> Result<Vec<PathBuf>> {
        let mut files = Vec::new();
        for given in &self.wells {
            if !given.is_dir() {
                files.push(given.clone());
                continue;
            }
            let found: Vec<PathBuf> = STAGES_LAYERS
                .iter()
                .filter_map(|layer| {
                    ["gpkg", "geojson"]
                        .iter()
                        .map(|ext| given.join(format!("{layer}.{ext}")))
                        .find(|f| f.is_file())
                })
                .collect();
            if found.is_empty() {
                return Err(FlexureError::input(
                    given,
                    "holds neither well_paths nor stage_corridors (.gpkg or .geojson): give the stages command's output folder or the vector files themselves",
                ));
            }
            files.extend(found);
        }
        Ok(files)
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
        shade: &Shade,
        pixels_per_cell: usize,
        inputs: &[&Path],
    ) -> Result<Vec<(String, String)>> {
        let item = |k: &str, v: String| (k.to_string(), v);
        let mut m = Provenance::of_inputs(inputs)?
            .with("pixels_per_cell", pixels_per_cell.to_string())
            .with(
                "quicklook_orientation",
                if self.north_up { "north-up" } else { "survey" },
            )
            .items()
            .to_vec();
        m.extend([
            item("FLEXURE_BAND", id.to_string()),
            item("FLEXURE_COLOUR_MAP", scale.palette_name().to_string()),
            item(
                "FLEXURE_COLOUR_RANGE",
                format!("{} .. {}; {}", scale.lo, scale.hi, scale.clip_note),
            ),
        ]);
        if let Some(how) = &shade.how {
            m.push(item("FLEXURE_SHADE", how.clone()));
        }
        if let Some(note) = &shade.contour_note {
            m.push(item("FLEXURE_CONTOURS", note.clone()));
        }
        if !self.wells.is_empty() {
            let given: Vec<String> = self.wells.iter().map(|w| w.display().to_string()).collect();
            m.push(item("FLEXURE_WELLS", given.join(", ")));
        }
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
        overlay: &Overlay,
        parts: &LegendParts,
    ) -> Result<StagedFile> {
        let (mut map, picture) = if self.north_up {
            let picture = north_up_geometry(geometry, QUICKLOOK_SIZE);
            let warped = warp_cells(cells, geometry, &picture)?;
            (cells_to_pixmap(&warped, (1.0, 1.0)), picture)
        } else if geometry.mirrored_in_pictures() {
            // A grid whose rows run north would be drawn mirrored: its rows are drawn last
            // first.
            let flipped = cells.slice(s![..;-1, ..]).to_owned();
            let reversed = geometry.rows_reversed();
            let px = picture_scale(&reversed, QUICKLOOK_SIZE);
            (
                cells_to_pixmap(&flipped, px),
                picture_geometry(&reversed, px),
            )
        } else {
            let px = picture_scale(geometry, QUICKLOOK_SIZE);
            (cells_to_pixmap(cells, px), picture_geometry(geometry, px))
        };
        draw_overlay(&mut map, &picture, overlay, QUICKLOOK_WEIGHT);
        // Corners as a survey-orientation picture shows them (rows last first when mirrored).
        let shown = if geometry.mirrored_in_pictures() {
            geometry.rows_reversed()
        } else {
            geometry.clone()
        };
        let legend = self.legend(&shown, &picture, parts);
        stage_png(path, &quicklook(&map, &legend))
    }

    /// The quicklook's texts for a map of `geometry` (as a survey-orientation picture shows
    /// it) drawn as `picture` (one pixel per cell).
    fn legend(
        &self,
        geometry: &GridGeometry,
        picture: &GridGeometry,
        parts: &LegendParts,
    ) -> Legend {
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
        let metres_per_px = picture.spacing().0 * picture.metres_per_unit;
        let vectors = parts.vectors.map(|v| {
            let bar_ms = one_digit(v.typical_ms.max(1e-6));
            let bar_px = (bar_ms * v.scale / metres_per_px) as f32;
            let note = format!(
                "bar = {} ms; {} azimuth vectors on every {} x {} anisotropy bins with SNR >= {}; {} m per ms. HTI reading: fast = fracture strike; not a stress measurement.",
                short(bar_ms), axis_name(self.axis), v.every.0, v.every.1, self.min_snr, short(v.scale)
            );
            (note, bar_px)
        });
        let mut notes: Vec<String> = parts.shade.how.iter().cloned().collect();
        notes.extend(parts.shade.contour_note.clone());
        if !parts.wells.wells.is_empty() || !parts.wells.corridors.is_empty() {
            notes.push(format!(
                "wells: {} paths (thick), {} stage corridors (outlines, numbered)",
                parts.wells.wells.len(),
                parts.wells.corridors.len()
            ));
        }
        // Grid north (the CRS's y axis) in the picture: the picture direction of a step north.
        let (x, y) = picture.centre();
        let (c0, r0) = picture.map_to_grid(x, y);
        let (c1, r1) = picture.map_to_grid(x, y + 1.0);
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
        let corners = if self.north_up {
            "survey grid corners as drawn without --north-up, CRS units"
        } else {
            "corners, CRS units"
        };
        let orientation = if self.north_up {
            "drawn north-up (warped for display by GDAL; the map raster stays on the survey grid)"
        } else {
            "drawn in survey orientation"
        };
        Legend {
            title,
            band: if unit.is_empty() { parts.id.to_string() } else { format!("{} ({unit})", parts.id) },
            scale: parts.scale.clone(),
            vectors,
            notes,
            scale_bar: (picture.spacing().0, length_unit(geometry)),
            north_in_picture: (c1 - c0).atan2(-(r1 - r0)).to_degrees(),
            map_ticks: self.north_up.then_some(picture.geo_transform),
            extent: vec![
                format!("{corners}: top-left {}  top-right {}  bottom-left {}  bottom-right {}", corner(0, 0), corner(cols, 0), corner(0, rows), corner(cols, rows)),
                format!("{}; {}; {orientation}", crs_name(geometry), geometry.describe()),
                "flexure informs interpretation; it does not replace geomechanical studies, licensed professionals or local regulations.".into(),
            ],
        }
    }
}

/// What the shade horizon adds: the hillshade, contour lines, and their descriptions.
#[derive(Clone, Debug, Default)]
struct Shade {
    light: Option<Array2<f64>>,
    contours: Vec<Vec<(f64, f64)>>,
    contour_labels: Vec<MapLabel>,
    how: Option<String>,
    contour_note: Option<String>,
    notes: Vec<String>,
}

/// Pixels per cell of the map raster when none is given: about 2000 pixels on the grid's
/// longer side, `clamp(round(2000 / longer side), 1, 8)` (so vectors and wells are drawn
/// legibly on small grids and large grids stay one pixel per cell).
pub fn default_pixels_per_cell(geometry: &GridGeometry) -> usize {
    let longest = geometry.cols.max(geometry.rows).max(1) as f64;
    ((MAP_RASTER_SIZE / longest).round() as usize).clamp(1, MAX_DEFAULT_PIXELS_PER_CELL)
}

fn check_raster_size(geometry: &GridGeometry, k: usize) -> Result<()> {
    let (w, h) = (geometry.cols * k, geometry.rows * k);
    if k > 1 && (w.max(h) > MAX_MAP_RASTER_SIDE || w * h > 1 << 28) {
        return Err(FlexureError::Parameter(format!(
            "--pixels-per-cell {k} makes the map raster {w} x {h} pixels (at most {MAX_MAP_RASTER_SIDE} on a side and 268 million in all): give a smaller value"
        )));
    }
    Ok(())
}

/// Level labels of the contour lines at least [`LABELLED_CONTOUR_SHARE`] of the map's longer
/// side long, each at the vertex half way along its line; written with the decimals of the
/// interval.
fn contour_labels(lines: &[ContourLine], geometry: &GridGeometry, interval: f64) -> Vec<MapLabel> {
    let (sx, sy) = geometry.spacing();
    let longest = (geometry.cols as f64 * sx).max(geometry.rows as f64 * sy);
    lines
        .iter()
        .filter_map(|line| {
            let steps: Vec<f64> = line
                .points
                .windows(2)
                .map(|w| (w[1].0 - w[0].0).hypot(w[1].1 - w[0].1))
                .collect();
            let length: f64 = steps.iter().sum();
            if length < LABELLED_CONTOUR_SHARE * longest {
                return None;
            }
            let mut run = 0.0;
            let half = steps.iter().position(|s| {
                run += s;
                run >= length / 2.0
            })?;
            Some(MapLabel {
                text: tick_label(line.level, interval),
                at: line.points[half + 1],
            })
        })
        .collect()
}

/// Refuses a contour interval that would draw more than [`MAX_CONTOUR_LEVELS`] levels.
fn check_contour_levels(path: &Path, z: &Array2<f64>, interval: f64, unit: &str) -> Result<()> {
    let finite = || z.iter().copied().filter(|v| v.is_finite());
    let (lo, hi) = (
        finite().fold(f64::INFINITY, f64::min),
        finite().fold(f64::NEG_INFINITY, f64::max),
    );
    let levels = (hi - lo) / interval;
    if levels > MAX_CONTOUR_LEVELS {
        return Err(FlexureError::input(
            path,
            format!(
                "--contour-interval {interval} gives {levels:.0} contour levels over {} .. {} {unit} (at most {MAX_CONTOUR_LEVELS}): give a larger interval",
                short(lo),
                short(hi)
            ),
        ));
    }
    Ok(())
}

/// Well paths, corridor outlines and their labels from the given vector files, in the grid's
/// CRS (the stages command's whole-lateral corridor is left out: the stage corridors show it).
fn read_wells(files: &[PathBuf], geometry: &GridGeometry) -> Result<Overlay> {
    let mut overlay = Overlay::default();
    for file in files {
        for feature in read_features(file, &geometry.crs_wkt)? {
            let Some(first) = feature.lines.first() else {
                continue;
            };
            match feature.kind {
                GeometryKind::Line => {
                    if let (Some(name), Some(&at)) = (feature.field("well"), first.first()) {
                        overlay.well_labels.push(MapLabel {
                            text: name.to_string(),
                            at,
                        });
                    }
                    overlay.wells.extend(feature.lines.iter().cloned());
                }
                // The whole-lateral summary's corridor only encloses the stage corridors.
                GeometryKind::Polygon if feature.field("stage") == Some(LATERAL) => {}
                GeometryKind::Point => {}
                GeometryKind::Polygon => {
                    if let (Some(stage), Some(at)) = (feature.field("stage"), ring_centre(first)) {
                        overlay.stage_labels.push(MapLabel {
                            text: stage.to_string(),
                            at,
                        });
                    }
                    overlay.corridors.extend(feature.lines.iter().cloned());
                }
            }
        }
    }
    Ok(overlay)
}

/// The name of the CRS's length unit for scale bars: "m", "ft", "US ft", else the CRS's name
/// for it.
fn length_unit(geometry: &GridGeometry) -> String {
    let m = geometry.metres_per_unit;
    if (m - 1.0).abs() < 1e-12 {
        "m".into()
    } else if (m - 0.3048).abs() < 1e-9 {
        "ft".into()
    } else if (m - 1200.0 / 3937.0).abs() < 1e-9 {
        "US ft".into()
    } else {
        gdal::spatial_ref::SpatialRef::from_wkt(&geometry.crs_wkt)
            .ok()
            .and_then(|s| s.linear_units_name())
            .unwrap_or_else(|| "CRS units".into())
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
    shade: &'a Shade,
    wells: &'a Overlay,
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

/// What the map shows: the horizon a horizon-derived raster records as its first input (its
/// file stem, for rasters that declare the horizon's domain, as curvature outputs do), else
/// the raster's file stem.
fn source_name(info: &RasterInfo, path: &Path) -> String {
    let stem = |p: &Path| {
        p.file_stem()
            .unwrap_or_default()
            .to_string_lossy()
            .to_string()
    };
    let horizon = info
        .item("FLEXURE_DOMAIN")
        .and(info.item("FLEXURE_INPUT_1"))
        .and_then(|v| v.rsplit_once(" sha256:"))
        .map(|(p, _)| stem(Path::new(p)));
    match horizon {
        Some(h) => format!("horizon {h}"),
        None => stem(path),
    }
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
    /// Pixels per cell of the map raster.
    pub pixels_per_cell: usize,
    /// (well paths, stage corridors) drawn.
    pub wells: (usize, usize),
    /// Contour lines drawn.
    pub contours: usize,
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
        if self.wells != (0, 0) {
            writeln!(
                f,
                "  {} well paths, {} stage corridors",
                self.wells.0, self.wells.1
            )?;
        }
        if self.contours > 0 {
            writeln!(f, "  {} contour lines", self.contours)?;
        }
        writeln!(
            f,
            "  map raster at {} x {} pixels per cell",
            self.pixels_per_cell, self.pixels_per_cell
        )?;
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn titles_name_the_horizon_a_curvature_output_records() {
        // The curvature job's provenance (Provenance::of_inputs with the horizon first, plus
        // its domain) names the horizon; a raster without it is named by its file stem.
        let dir = tempfile::tempdir().unwrap();
        let horizon = dir.path().join("top_marl.tif");
        std::fs::write(&horizon, b"any bytes").unwrap();
        let provenance = Provenance::of_inputs(&[horizon.as_path()])
            .unwrap()
            .with("domain", "depth");
        let curvature = RasterInfo {
            names: vec!["k_pos".into()],
            units: vec!["1/km".into()],
            metadata: provenance.items().to_vec(),
        };
        let attribute = Path::new("out/top_marl_w09.tif");
        assert_eq!(source_name(&curvature, attribute), "horizon top_marl");
        let other = RasterInfo {
            metadata: Vec::new(),
            ..curvature
        };
        assert_eq!(source_name(&other, attribute), "top_marl_w09");
    }

    #[test]
    fn long_contours_are_labelled_with_their_level_on_the_line() {
        // z = x / 10 (m) over a 40 x 30 grid of 25 m bins: contours every 5 m are straight
        // north-south lines 750 m long (analytic), longer than a tenth of the 1000 m map, so
        // each is labelled once, at the middle of its line (y near the map's centre), with its
        // level in the interval's decimals.
        let g = GridGeometry {
            cols: 40,
            rows: 30,
            geo_transform: [0.0, 25.0, 0.0, 750.0, 0.0, -25.0],
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        };
        let z = Array2::from_shape_fn((30, 40), |(r, c)| g.cell_centre(c, r).0 / 10.0);
        let lines = contour_lines(&z, &g, 5.0).unwrap();
        let labels = contour_labels(&lines, &g, 5.0);
        assert_eq!(labels.len(), lines.len());
        for (label, line) in labels.iter().zip(&lines) {
            assert_eq!(label.text, format!("{}", line.level));
            // On the level line x = 10 L, to GDAL's interpolation round-off (0.1 mm).
            assert!((label.at.0 - 10.0 * line.level).abs() < 1e-4, "{label:?}");
            assert!((label.at.1 - 375.0).abs() <= 25.0, "{label:?}");
        }
    }

    #[test]
    fn default_pixels_per_cell_aims_at_2000_pixels() {
        // K = clamp(round(2000 / longer side), 1, 8).
        let g = |cols, rows| GridGeometry {
            cols,
            rows,
            geo_transform: [0.0, 25.0, 0.0, 0.0, 0.0, -25.0],
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        };
        assert_eq!(default_pixels_per_cell(&g(30, 20)), 8);
        assert_eq!(default_pixels_per_cell(&g(180, 300)), 7);
        assert_eq!(default_pixels_per_cell(&g(400, 100)), 5);
        assert_eq!(default_pixels_per_cell(&g(1500, 900)), 1);
        assert_eq!(default_pixels_per_cell(&g(8192, 8192)), 1);
    }
}
