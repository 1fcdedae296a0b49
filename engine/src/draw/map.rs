//! Map pictures: attribute colours (see [`crate::draw::colour`]) optionally multiplied by a hillshade
//! of the horizon, anisotropy vectors drawn anti-aliased on top (dark core, light halo, so they
//! read on every colour), and for quicklooks a frame with title, colour bar, vector scale,
//! north arrow and extent. Pure pixel work on `tiny-skia` pixmaps; files are written by the
//! render job.
//!
//! Pixel geometry: a picture of a grid has `px.0` pixels per column and `px.1` per row (any
//! positive scale: below one, each pixel shows the cell under its centre, so a large grid is
//! drawn at a picture's size rather than one pixel per cell), so the image is the grid's own
//! layout (rows down, columns across); map points go to pixels through the inverse
//! geotransform. With pixel scales proportional to the bin sizes the image keeps the map's
//! shape (rotated with the grid; the north arrow shows where north is).

use crate::draw::colour::{short, ColourScale};
use crate::draw::overlay::stroke_with_halo;
use crate::draw::ticks::{nice_step, nice_ticks, tick_label};
use crate::grid::GridGeometry;
use crate::stats::{quantile, Quantile};
use ab_glyph::{Font, FontRef, PxScale, ScaleFont};
use ndarray::Array2;
use tiny_skia::{Color, Paint, PathBuilder, Pixmap, PremultipliedColorU8, Rect, Stroke, Transform};

/// DejaVu Sans (Bitstream Vera licence, shipped in `engine/assets/fonts`).
const FONT: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// Sun azimuth of the hillshade, degrees from grid north (common practice: north-west light).
pub const SUN_AZIMUTH: f64 = 315.0;
/// Sun altitude of the hillshade, degrees (common practice).
pub const SUN_ALTITUDE: f64 = 45.0;

/// Relief shading of a horizon by Horn's (1981, Proc. IEEE 69:14) 3 x 3 gradient, lit from
/// [`SUN_AZIMUTH`] at [`SUN_ALTITUDE`]: the cosine of the angle between the surface normal and
/// the light, 0..1; NaN where a neighbour is null or at the edge. `positive_down` values (depth
/// or time) are negated so antiforms are the lit highs. `exaggeration` multiplies the values
/// (per metre of map distance); `None` scales so that the 95th-percentile slope is 30 degrees.
pub fn hillshade(
    z: &Array2<f64>,
    geometry: &GridGeometry,
    positive_down: bool,
    exaggeration: Option<f64>,
) -> Array2<f64> {
    let sign = if positive_down { -1.0 } else { 1.0 };
    let gradients = map_gradients(z, geometry);
    let factor = exaggeration.unwrap_or_else(|| {
        let mut slopes: Vec<f64> = gradients
            .iter()
            .filter_map(|g| g.map(|(gx, gy)| gx.hypot(gy)))
            .filter(|s| *s > 0.0)
            .collect();
        quantile(&mut slopes, 0.95, Quantile::Nearest)
            .map_or(1.0, |p95| 30f64.to_radians().tan() / p95)
    }) * sign;
    let (az, alt) = (SUN_AZIMUTH.to_radians(), SUN_ALTITUDE.to_radians());
    let light = [az.sin() * alt.cos(), az.cos() * alt.cos(), alt.sin()];
    gradients.mapv(|g| match g {
        Some((gx, gy)) => {
            let (ex, ey) = (factor * gx, factor * gy);
            let norm = (ex * ex + ey * ey + 1.0).sqrt();
            ((-ex * light[0] - ey * light[1] + light[2]) / norm).max(0.0)
        }
        None => f64::NAN,
    })
}

/// Horn gradients `(dz/dx, dz/dy)` per metre of map distance (x grid east, y grid north).
fn map_gradients(z: &Array2<f64>, geometry: &GridGeometry) -> Array2<Option<(f64, f64)>> {
    let (rows, cols) = z.dim();
    let [[a, b], [c, d]] = geometry.jacobian();
    let m = geometry.metres_per_unit;
    let det = (a * d - b * c) * m * m;
    Array2::from_shape_fn((rows, cols), |(r, col)| {
        if r == 0 || col == 0 || r + 1 == rows || col + 1 == cols {
            return None;
        }
        let at =
            |dr: isize, dc: isize| z[((r as isize + dr) as usize, (col as isize + dc) as usize)];
        let dcol = ((at(-1, 1) + 2.0 * at(0, 1) + at(1, 1))
            - (at(-1, -1) + 2.0 * at(0, -1) + at(1, -1)))
            / 8.0;
        let drow = ((at(1, -1) + 2.0 * at(1, 0) + at(1, 1))
            - (at(-1, -1) + 2.0 * at(-1, 0) + at(-1, 1)))
            / 8.0;
        if !(dcol.is_finite() && drow.is_finite()) {
            return None;
        }
        // [dz/dcol, dz/drow] = J^T [dz/dx, dz/dy]; solve with the inverse transpose.
        let gx = (d * m * dcol - c * m * drow) / det;
        let gy = (-b * m * dcol + a * m * drow) / det;
        Some((gx, gy))
    })
}

/// Straight (not premultiplied) RGBA of every cell: the scale's colour, multiplied by the
/// shade (`0.55 + 0.5 shade`, at most 1, so flat ground is slightly darkened, lit slopes keep
/// their colour and slopes facing away stay readable); null cells transparent.
pub fn colour_cells(
    values: &Array2<f64>,
    scale: &ColourScale,
    shade: Option<&Array2<f64>>,
) -> Array2<[u8; 4]> {
    Array2::from_shape_fn(values.dim(), |(r, c)| match scale.colour(values[(r, c)]) {
        None => [0, 0, 0, 0],
        Some(rgb) => {
            let f = shade
                .map(|s| s[(r, c)])
                .filter(|s| s.is_finite())
                .map_or(1.0, |s| (0.55 + 0.5 * s).min(1.0));
            [
                (rgb[0] as f64 * f).round() as u8,
                (rgb[1] as f64 * f).round() as u8,
                (rgb[2] as f64 * f).round() as u8,
                255,
            ]
        }
    })
}

/// A pixmap of `cells` with `px` = (pixels per column, pixels per row), each pixel the colour
/// of the cell under its centre (nearest neighbour: colours are never mixed).
pub fn cells_to_pixmap(cells: &Array2<[u8; 4]>, px: (f64, f64)) -> Pixmap {
    let (rows, cols) = cells.dim();
    let shown = PictureCells::new((cols, rows), px);
    let mut pixmap =
        Pixmap::new(shown.cols.len() as u32, shown.rows.len() as u32).expect("non-empty picture");
    let width = shown.cols.len();
    let pixels = pixmap.pixels_mut();
    for (y, &r) in shown.rows.iter().enumerate() {
        for (x, &c) in shown.cols.iter().enumerate() {
            pixels[y * width + x] = premultiplied(cells[(r, c)]);
        }
    }
    pixmap
}

/// The cells a picture of a grid shows: pixel `(x, y)` takes the cell under its centre, in
/// grid row `rows[y]` and column `cols[x]` (nearest neighbour), so a map's picture can be kept
/// as those cells alone while the map streams by.
#[derive(Clone, Debug, PartialEq)]
pub struct PictureCells {
    /// Grid row of each pixel row.
    pub rows: Vec<usize>,
    /// Grid column of each pixel column.
    pub cols: Vec<usize>,
}

impl PictureCells {
    /// The cells of a picture of a `(cols, rows)` grid at `px` pixels per column and row (its
    /// size is [`picture_size`]).
    pub fn new((cols, rows): (usize, usize), px: (f64, f64)) -> Self {
        let (w, h) = picture_size((cols, rows), px);
        let source = |pixel: u32, scale: f64, n: usize| {
            (((pixel as f64 + 0.5) / scale) as usize).min(n.max(1) - 1)
        };
        Self {
            rows: (0..h).map(|y| source(y, px.1, rows)).collect(),
            cols: (0..w).map(|x| source(x, px.0, cols)).collect(),
        }
    }
}

/// Pixels per (column, row) that draw `geometry`'s grid about `long_side` pixels along its
/// longer side, each scale proportional to its bin size so the picture keeps the map's shape:
/// below one pixel per cell on large grids, above it on small ones.
pub fn picture_scale(geometry: &GridGeometry, long_side: f64) -> (f64, f64) {
    let (sx, sy) = geometry.spacing();
    let units_per_px = (geometry.cols as f64 * sx).max(geometry.rows as f64 * sy) / long_side;
    (sx / units_per_px, sy / units_per_px)
}

/// Width and height in pixels of a picture of a `(cols, rows)` grid at `px` pixels per
/// column and row (at least one each).
pub fn picture_size((cols, rows): (usize, usize), px: (f64, f64)) -> (u32, u32) {
    let size = |n: usize, scale: f64| ((n as f64 * scale).round() as u32).max(1);
    (size(cols, px.0), size(rows, px.1))
}

fn premultiplied([r, g, b, a]: [u8; 4]) -> PremultipliedColorU8 {
    let scale = |v: u8| ((v as u16 * a as u16 + 127) / 255) as u8;
    PremultipliedColorU8::from_rgba(scale(r), scale(g), scale(b), a)
        .unwrap_or(PremultipliedColorU8::TRANSPARENT)
}

/// Straight RGBA bands `[r, g, b, a]` of a pixmap, each `[row, col]`.
pub fn pixmap_bands(pixmap: &Pixmap) -> [Array2<u8>; 4] {
    let (w, h) = (pixmap.width() as usize, pixmap.height() as usize);
    let straight: Vec<[u8; 4]> = pixmap
        .pixels()
        .iter()
        .map(|p| {
            let c = p.demultiply();
            [c.red(), c.green(), c.blue(), c.alpha()]
        })
        .collect();
    std::array::from_fn(|k| Array2::from_shape_fn((h, w), |(r, c)| straight[r * w + c][k]))
}

/// The geometry of a picture of `geometry`'s grid at `px` pixels per (column, row): one cell
/// per pixel, the same origin and axes, its size [`picture_size`]; overlays are placed through
/// it ([`crate::draw::overlay::draw_overlay`]). With whole `px` it is the grid subdivided
/// exactly (the map raster's geotransform).
pub fn picture_geometry(geometry: &GridGeometry, px: (f64, f64)) -> GridGeometry {
    let g = geometry.geo_transform;
    let (cols, rows) = picture_size((geometry.cols, geometry.rows), px);
    GridGeometry {
        cols: cols as usize,
        rows: rows as usize,
        geo_transform: [
            g[0],
            g[1] / px.0,
            g[2] / px.1,
            g[3],
            g[4] / px.0,
            g[5] / px.1,
        ],
        ..geometry.clone()
    }
}

/// A scale bar's length in map units: a round 1-2-5 value ([`nice_step`]) between 40% and
/// 100% of `longest` (map units).
pub fn scale_bar_length(longest: f64) -> f64 {
    nice_step(0.4 * longest)
}

/// The label of a scale bar `length` map units long: in km from 1000 m up, else in the unit.
pub fn distance_label(length: f64, unit: &str) -> String {
    if unit == "m" && length >= 1000.0 {
        format!("{} km", short(length / 1000.0))
    } else {
        format!("{} {unit}", short(length))
    }
}

/// What the quicklook frame says.
#[derive(Clone, Debug)]
pub struct Legend {
    /// Title (horizon, attribute and window); wrapped to the page width.
    pub title: String,
    /// Band identifier and unit, for the colour bar.
    pub band: String,
    /// The colour scale of the map.
    pub scale: ColourScale,
    /// Vector legend: (text, bar length in pixels) when vectors are drawn.
    pub vectors: Option<(String, f32)>,
    /// Other overlay notes for the panel (wells, contours, shading), one paragraph each.
    pub notes: Vec<String>,
    /// Map units per picture pixel and the unit's name ("m", "ft"), for the scale bar.
    pub scale_bar: (f64, String),
    /// Direction of grid north in the picture, degrees clockwise from picture up.
    pub north_in_picture: f64,
    /// Geotransform of a north-up picture, for map-coordinate ticks on its frame; `None` for
    /// a picture in survey orientation (no ticks).
    pub map_ticks: Option<[f64; 6]>,
    /// Lines describing the extent and grid; wrapped to the page width.
    pub extent: Vec<String>,
}

const MARGIN: u32 = 24;
/// Height of the title band of a panel of maps.
const TITLE_HEIGHT: u32 = 56;
const TITLE_SIZE: f32 = 20.0;
const TITLE_LINE: u32 = 26;
const PANEL_WIDTH: u32 = 300;
const FOOTER_LINE: u32 = 20;
/// Least page width, so titles and notes of tall narrow maps are not cramped.
const MIN_PAGE_WIDTH: u32 = 900;
/// Room for the y tick labels left of, and the x tick labels under, a north-up map.
const TICK_ROOM: (u32, u32) = (78, 26);

/// The quicklook: `map` on a white page with the title above, the legend panel (colour bar
/// with round ticks, palette and clip, vector scale, notes, scale bar, north arrow) to the
/// right and the extent below; a north-up map gets a frame with map-coordinate ticks at
/// round values.
pub fn quicklook(map: &Pixmap, legend: &Legend) -> Pixmap {
    let text = Text::new();
    let (left, under) = if legend.map_ticks.is_some() {
        (MARGIN + TICK_ROOM.0, TICK_ROOM.1)
    } else {
        (MARGIN, 0)
    };
    let width = (left + map.width() + MARGIN + PANEL_WIDTH).max(MIN_PAGE_WIDTH);
    let line_room = (width - 2 * MARGIN) as f32;
    let title = wrap_to(&text, &legend.title, TITLE_SIZE, line_room);
    let footer: Vec<String> = legend
        .extent
        .iter()
        .flat_map(|l| wrap_to(&text, l, 12.0, line_room))
        .collect();
    let top = 16 + TITLE_LINE * title.len() as u32 + 14;
    let (panel, panel_height) = legend_panel(&text, legend);
    let body = (map.height() + under).max(panel_height);
    let height = top + body + MARGIN + FOOTER_LINE * footer.len() as u32;
    let mut page = Pixmap::new(width, height).expect("non-empty page");
    page.fill(Color::WHITE);
    for (picture, x) in [(map, left), (&panel, left + map.width() + MARGIN)] {
        page.draw_pixmap(
            x as i32,
            top as i32,
            picture.as_ref(),
            &tiny_skia::PixmapPaint::default(),
            Transform::identity(),
            None,
        );
    }
    for (k, line) in title.iter().enumerate() {
        let y = 16.0 + TITLE_SIZE + (TITLE_LINE * k as u32) as f32;
        text.draw(&mut page, line, MARGIN as f32, y, TITLE_SIZE);
    }
    if let Some(gt) = &legend.map_ticks {
        map_frame(&mut page, &text, gt, (left, top), map);
    }
    let mut fy = (top + body + MARGIN) as f32;
    for line in &footer {
        text.draw(&mut page, line, MARGIN as f32, fy, 12.0);
        fy += FOOTER_LINE as f32;
    }
    page
}

/// The legend panel on a transparent pixmap [`PANEL_WIDTH`] wide, and the height its
/// contents take (so the page is made tall enough for them whatever the map's height).
fn legend_panel(text: &Text, legend: &Legend) -> (Pixmap, u32) {
    const ROOM: u32 = 4000;
    let mut panel = Pixmap::new(PANEL_WIDTH, ROOM).expect("non-empty panel");
    let x0 = 4.0;
    let mut y = 14.0;
    text.draw(&mut panel, &legend.band, x0, y, 15.0);
    y += 10.0;
    y = colour_bar(&mut panel, text, &legend.scale, x0, y);
    text.draw(&mut panel, legend.scale.palette_name(), x0, y, 11.0);
    y += 16.0;
    let paragraph = |panel: &mut Pixmap, y: &mut f32, s: &str| {
        for line in wrap_to(text, s, 11.0, (PANEL_WIDTH - MARGIN) as f32) {
            text.draw(panel, &line, x0, *y, 11.0);
            *y += 15.0;
        }
    };
    paragraph(&mut panel, &mut y, &legend.scale.clip_note);
    if let Some((note, bar)) = &legend.vectors {
        y += 14.0;
        segment_bar(&mut panel, x0, y, *bar);
        y += 22.0;
        paragraph(&mut panel, &mut y, note);
    }
    for note in &legend.notes {
        y += 6.0;
        paragraph(&mut panel, &mut y, note);
    }
    y += 16.0;
    y = scale_bar(&mut panel, text, &legend.scale_bar, x0, y);
    north_arrow(
        &mut panel,
        text,
        x0 + 40.0,
        y + 60.0,
        legend.north_in_picture,
    );
    (panel, ((y + 130.0) as u32).min(ROOM))
}

/// A frame round a north-up map at `origin` on the page, with ticks and labels at round map
/// coordinates: eastings under it, northings left of it (picture geotransform `gt`, axes east
/// and north).
fn map_frame(page: &mut Pixmap, text: &Text, gt: &[f64; 6], origin: (u32, u32), map: &Pixmap) {
    let (ox, oy) = (origin.0 as f32, origin.1 as f32);
    let (w, h) = (map.width() as f32, map.height() as f32);
    let mut pb = PathBuilder::new();
    if let Some(rect) = Rect::from_xywh(ox, oy, w, h) {
        pb.push_rect(rect);
    }
    let (x0, x1) = (gt[0], gt[0] + map.width() as f64 * gt[1]);
    let (y0, y1) = (gt[3] + map.height() as f64 * gt[5], gt[3]);
    let xs = nice_ticks(x0, x1, ((w / 160.0).round() as usize).max(2));
    let ys = nice_ticks(y0, y1, ((h / 120.0).round() as usize).max(2));
    let step = |t: &[f64]| if t.len() > 1 { t[1] - t[0] } else { 1.0 };
    let (sx, sy) = (step(&xs), step(&ys));
    for &x in &xs {
        let px = ox + ((x - gt[0]) / gt[1]) as f32;
        pb.move_to(px, oy + h);
        pb.line_to(px, oy + h + 6.0);
        let label = tick_label(x, sx);
        let lw = text.width(&label, 11.0);
        text.draw(page, &label, px - lw / 2.0, oy + h + 19.0, 11.0);
    }
    for &y in &ys {
        let py = oy + ((y - gt[3]) / gt[5]) as f32;
        pb.move_to(ox, py);
        pb.line_to(ox - 6.0, py);
        let label = tick_label(y, sy);
        let lw = text.width(&label, 11.0);
        text.draw(page, &label, ox - 9.0 - lw, py + 4.0, 11.0);
    }
    if let Some(path) = pb.finish() {
        let mut paint = Paint::default();
        paint.set_color(Color::from_rgba8(40, 40, 40, 255));
        let stroke = Stroke {
            width: 1.0,
            ..Stroke::default()
        };
        page.stroke_path(&path, &paint, &stroke, Transform::identity(), None);
    }
}

/// A scale bar of round length (at most 200 pixels) with its label; returns the y below it.
fn scale_bar(
    page: &mut Pixmap,
    text: &Text,
    (per_px, unit): &(f64, String),
    x: f32,
    y: f32,
) -> f32 {
    let length = scale_bar_length(200.0 * per_px);
    let bar = (length / per_px) as f32;
    for (k, shade) in [(0, [30, 30, 30]), (1, [255, 255, 255])] {
        if let Some(r) = Rect::from_xywh(x + k as f32 * bar / 2.0, y, bar / 2.0, 6.0) {
            fill_rect(page, r, shade);
        }
    }
    let mut pb = PathBuilder::new();
    if let Some(r) = Rect::from_xywh(x, y, bar, 6.0) {
        pb.push_rect(r);
    }
    if let Some(path) = pb.finish() {
        let mut paint = Paint::default();
        paint.set_color(Color::from_rgba8(30, 30, 30, 255));
        let stroke = Stroke {
            width: 1.0,
            ..Stroke::default()
        };
        page.stroke_path(&path, &paint, &stroke, Transform::identity(), None);
    }
    text.draw(page, "0", x - 3.0, y + 20.0, 11.0);
    let label = distance_label(length, unit);
    text.draw(
        page,
        &label,
        x + bar - text.width(&label, 11.0) / 2.0,
        y + 20.0,
        11.0,
    );
    y + 30.0
}

/// Maps side by side (four per row) under a title, each labelled, with one colour bar for the
/// common `scale`.
pub fn panel(maps: &[(String, Pixmap)], scale: &ColourScale, title: &str, band: &str) -> Pixmap {
    let per_row = 4usize;
    let (w, h) = maps.iter().fold((1u32, 1u32), |(w, h), (_, m)| {
        (w.max(m.width()), h.max(m.height()))
    });
    let rows = maps.len().div_ceil(per_row).max(1) as u32;
    let cols = maps.len().clamp(1, per_row) as u32;
    let width = MARGIN + cols * (w + MARGIN) + PANEL_WIDTH;
    let height = (TITLE_HEIGHT + rows * (h + 30 + MARGIN) + MARGIN).max(TITLE_HEIGHT + 360);
    let mut page = Pixmap::new(width, height).expect("non-empty panel");
    page.fill(Color::WHITE);
    let text = Text::new();
    text.draw(&mut page, title, MARGIN as f32, 34.0, 20.0);
    for (k, (label, map)) in maps.iter().enumerate() {
        let (c, r) = ((k % per_row) as u32, (k / per_row) as u32);
        let (x, y) = (
            MARGIN + c * (w + MARGIN),
            TITLE_HEIGHT + r * (h + 30 + MARGIN),
        );
        text.draw(&mut page, label, x as f32, y as f32 + 16.0, 14.0);
        page.draw_pixmap(
            x as i32,
            (y + 26) as i32,
            map.as_ref(),
            &tiny_skia::PixmapPaint::default(),
            Transform::identity(),
            None,
        );
    }
    let x0 = (MARGIN + cols * (w + MARGIN)) as f32;
    let y0 = TITLE_HEIGHT as f32 + 14.0;
    text.draw(&mut page, band, x0, y0, 15.0);
    let y = colour_bar(&mut page, &text, scale, x0, y0 + 10.0);
    text.draw(&mut page, scale.palette_name(), x0, y, 11.0);
    page
}

/// Draws a vertical colour bar with five labelled ticks; returns the y below it.
fn colour_bar(page: &mut Pixmap, text: &Text, scale: &ColourScale, x: f32, y: f32) -> f32 {
    let (bar_w, bar_h) = (28.0, 240.0);
    let steps = 120;
    for i in 0..steps {
        // Top is the high end.
        let t = 1.0 - (i as f64 + 0.5) / steps as f64;
        let v = value_at(scale, t);
        if let (Some(rgb), Some(rect)) = (
            scale.colour(v),
            Rect::from_xywh(
                x,
                y + bar_h * i as f32 / steps as f32,
                bar_w,
                bar_h / steps as f32 + 0.5,
            ),
        ) {
            fill_rect(page, rect, rgb);
        }
    }
    let ticks = nice_ticks(scale.lo, scale.hi, 5);
    let step = if ticks.len() > 1 {
        ticks[1] - ticks[0]
    } else {
        (scale.hi - scale.lo).abs()
    };
    for v in ticks {
        let ty = y + bar_h * (1.0 - tick_position(scale, v)) as f32;
        if let Some(rect) = Rect::from_xywh(x + bar_w, ty - 0.5, 6.0, 1.0) {
            fill_rect(page, rect, [0, 0, 0]);
        }
        text.draw(page, &tick_label(v, step), x + bar_w + 10.0, ty + 5.0, 12.0);
    }
    y + bar_h + 22.0
}

/// The value at ramp position `t` (inverse of [`ColourScale::position`] on the clipped range).
fn value_at(scale: &ColourScale, t: f64) -> f64 {
    if scale.kind == crate::bands::ScaleKind::Diverging && scale.lo < 0.0 && scale.hi > 0.0 {
        if t < 0.5 {
            -scale.lo * (2.0 * t - 1.0)
        } else {
            scale.hi * (2.0 * t - 1.0)
        }
    } else {
        scale.lo + t * (scale.hi - scale.lo)
    }
}

/// Where value `v` (within the clip) sits on the colour bar, 0 (low end) .. 1 (high end): the
/// ramp position, except that a cyclic scale's period is its top end rather than wrapped to 0.
fn tick_position(scale: &ColourScale, v: f64) -> f64 {
    match scale.kind {
        crate::bands::ScaleKind::Cyclic { .. } => (v - scale.lo) / (scale.hi - scale.lo),
        _ => scale.position(v),
    }
}

fn fill_rect(page: &mut Pixmap, rect: Rect, rgb: [u8; 3]) {
    let mut paint = Paint::default();
    paint.set_color(Color::from_rgba8(rgb[0], rgb[1], rgb[2], 255));
    page.fill_rect(rect, &paint, Transform::identity(), None);
}

/// A horizontal sample vector `length` pixels long, drawn as the map vectors are.
fn segment_bar(page: &mut Pixmap, x: f32, y: f32, length: f32) {
    let mut pb = PathBuilder::new();
    pb.move_to(x, y);
    pb.line_to(x + length, y);
    if let Some(path) = pb.finish() {
        stroke_with_halo(page, &path, 2.0);
    }
}

/// An arrow pointing `north_deg` clockwise from picture up, with an "N".
fn north_arrow(page: &mut Pixmap, text: &Text, cx: f32, cy: f32, north_deg: f64) {
    let (s, c) = north_deg.to_radians().sin_cos();
    let (s, c) = (s as f32, c as f32);
    let at = |along: f32, across: f32| (cx + along * s + across * c, cy - along * c + across * s);
    let mut pb = PathBuilder::new();
    let tip = at(40.0, 0.0);
    pb.move_to(tip.0, tip.1);
    let left = at(-30.0, -12.0);
    pb.line_to(left.0, left.1);
    let notch = at(-18.0, 0.0);
    pb.line_to(notch.0, notch.1);
    let right = at(-30.0, 12.0);
    pb.line_to(right.0, right.1);
    pb.close();
    if let Some(path) = pb.finish() {
        let mut paint = Paint::default();
        paint.set_color(Color::from_rgba8(30, 30, 30, 255));
        paint.anti_alias = true;
        page.fill_path(
            &path,
            &paint,
            tiny_skia::FillRule::Winding,
            Transform::identity(),
            None,
        );
    }
    let label = at(56.0, 0.0);
    text.draw(page, "N", label.0 - 6.0, label.1 + 7.0, 16.0);
    text.draw(page, "grid north", cx + 52.0, cy + 5.0, 11.0);
}

/// Splits `s` at spaces into lines at most `room` pixels wide at `size` (a word longer than
/// the room gets a line of its own).
pub(crate) fn wrap_to(text: &Text, s: &str, size: f32, room: f32) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    for word in s.split_whitespace() {
        match lines.last_mut() {
            Some(line) if text.width(&format!("{line} {word}"), size) <= room => {
                line.push(' ');
                line.push_str(word);
            }
            _ => lines.push(word.to_string()),
        }
    }
    lines
}

/// Text drawn with the embedded font, black, anti-aliased.
pub(crate) struct Text {
    font: FontRef<'static>,
}

impl Text {
    pub(crate) fn new() -> Self {
        Self {
            font: FontRef::try_from_slice(FONT).expect("embedded DejaVu Sans parses"),
        }
    }

    /// Advance width of `s` at `size` pixels.
    pub(crate) fn width(&self, s: &str, size: f32) -> f32 {
        let scaled = self.font.as_scaled(PxScale::from(size));
        s.chars()
            .map(|c| scaled.h_advance(scaled.glyph_id(c)))
            .sum()
    }

    /// Draws `s` in black with its baseline at (`x`, `y`), `size` pixels high.
    pub(crate) fn draw(&self, page: &mut Pixmap, s: &str, x: f32, y: f32, size: f32) {
        self.draw_in(page, s, (x, y), size, [0, 0, 0]);
    }

    /// Draws `s` in near-black over a white halo (the text drawn white one pixel around), so it
    /// reads on any colour; baseline at (`x`, `y`).
    pub(crate) fn draw_with_halo(&self, page: &mut Pixmap, s: &str, x: f32, y: f32, size: f32) {
        for dx in [-1.0, 0.0, 1.0] {
            for dy in [-1.0, 0.0, 1.0] {
                self.draw_in(page, s, (x + dx, y + dy), size, [255, 255, 255]);
            }
        }
        self.draw_in(page, s, (x, y), size, [15, 15, 15]);
    }

    /// Draws `s` in colour `rgb` with its baseline at `(x, y)`, `size` pixels high.
    fn draw_in(&self, page: &mut Pixmap, s: &str, (x, y): (f32, f32), size: f32, rgb: [u8; 3]) {
        let scaled = self.font.as_scaled(PxScale::from(size));
        let (w, h) = (page.width() as i64, page.height() as i64);
        let width = page.width() as usize;
        let pixels = page.pixels_mut();
        let mut caret = x;
        let mut previous = None;
        for ch in s.chars() {
            let id = scaled.glyph_id(ch);
            if let Some(p) = previous {
                caret += scaled.kern(p, id);
            }
            let glyph = id.with_scale_and_position(size, ab_glyph::point(caret, y));
            caret += scaled.h_advance(id);
            previous = Some(id);
            let Some(outline) = self.font.outline_glyph(glyph) else {
                continue;
            };
            let bounds = outline.px_bounds();
            outline.draw(|gx, gy, coverage| {
                let (px, py) = (
                    bounds.min.x as i64 + gx as i64,
                    bounds.min.y as i64 + gy as i64,
                );
                if px < 0 || py < 0 || px >= w || py >= h {
                    return;
                }
                let i = py as usize * width + px as usize;
                let old = pixels[i].demultiply();
                let a = coverage.clamp(0.0, 1.0);
                let mix = |v: u8, to: u8| (v as f32 * (1.0 - a) + to as f32 * a).round() as u8;
                pixels[i] = premultiplied([
                    mix(old.red(), rgb[0]),
                    mix(old.green(), rgb[1]),
                    mix(old.blue(), rgb[2]),
                    old.alpha().max((a * 255.0) as u8),
                ]);
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_and_frame_are_drawn() {
        let scale = ColourScale::for_band(
            "k_pos",
            &Array2::from_shape_fn((4, 4), |(r, c)| r as f64 - c as f64),
            crate::draw::colour::Clip::Auto,
        )
        .unwrap();
        let map = Pixmap::new(200, 150).unwrap();
        let legend = Legend {
            title: "Title".into(),
            band: "k_pos (1/km)".into(),
            scale,
            vectors: Some(("vectors".into(), 40.0)),
            notes: vec!["wells".into()],
            scale_bar: (5.0, "m".into()),
            north_in_picture: 25.0,
            map_ticks: None,
            extent: vec!["extent".into()],
        };
        let page = quicklook(&map, &legend);
        // Some pixels of the title row are dark (the glyphs were rasterised).
        let dark = (10..40)
            .flat_map(|y| (MARGIN..MARGIN + 60).map(move |x| (x, y)))
            .filter(|&(x, y)| page.pixel(x, y).unwrap().red() < 100)
            .count();
        assert!(dark > 20, "{dark} dark title pixels");
    }

    #[test]
    fn scale_bars_are_round_and_fit() {
        // The 1-2-5 rule (Heckbert 1990): the length is 1, 2 or 5 times a power of ten and
        // between 40% and 100% of the room.
        for room in [37.0, 200.0, 999.0, 1234.5, 0.8, 86_000.0] {
            let length = scale_bar_length(room);
            assert!(
                length >= 0.4 * room && length <= room,
                "{length} for {room}"
            );
            let mantissa = length / 10f64.powf(length.log10().floor());
            assert!(
                [1.0, 2.0, 5.0].iter().any(|m| (mantissa - m).abs() < 1e-9),
                "{length}"
            );
        }
        assert_eq!(distance_label(2000.0, "m"), "2 km");
        assert_eq!(distance_label(500.0, "m"), "500 m");
        assert_eq!(distance_label(2000.0, "ft"), "2000 ft");
    }

    #[test]
    fn picture_geometry_subdivides_the_grid() {
        // A grid subdivided K times has the grid's origin and each pixel term divided by K
        // (elementary geometry): pixel (K i, K j) is cell (i, j)'s corner.
        let g = GridGeometry::survey(
            (1000.0, 5000.0),
            115.0,
            (25.0, 12.5),
            (30, 20),
            String::new(),
        );
        let p = picture_geometry(&g, (4.0, 4.0));
        assert_eq!((p.cols, p.rows), (120, 80));
        for (i, j) in [(0, 0), (3, 7), (30, 20)] {
            let cell = g.geo_transform;
            let (x, y) = (
                cell[0] + i as f64 * cell[1] + j as f64 * cell[2],
                cell[3] + i as f64 * cell[4] + j as f64 * cell[5],
            );
            let (c, r) = p.map_to_grid(x, y);
            assert!((c - 4.0 * i as f64).abs() < 1e-9 && (r - 4.0 * j as f64).abs() < 1e-9);
        }
    }

    #[test]
    fn large_grids_are_drawn_at_picture_size_in_map_shape() {
        // A 3000 x 1000 grid of 25 m x 12.5 m bins is 75 km by 12.5 km: at 300 px on the long
        // side the picture is 300 x 50 px (the map's 6:1 shape, from the bin sizes), not one
        // pixel per cell, and each pixel shows the cell under its centre.
        let g = GridGeometry {
            cols: 3000,
            rows: 1000,
            geo_transform: [0.0, 25.0, 0.0, 0.0, 0.0, -12.5],
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        };
        let px = picture_scale(&g, 300.0);
        assert_eq!(picture_size((g.cols, g.rows), px), (300, 50));
        let cells = Array2::from_shape_fn((1000, 3000), |(r, c)| {
            [(c / 10 % 256) as u8, (r / 20 % 256) as u8, 0, 255]
        });
        let picture = cells_to_pixmap(&cells, px);
        assert_eq!((picture.width(), picture.height()), (300, 50));
        for (x, y) in [(0, 0), (7, 3), (299, 49), (150, 25)] {
            // Pixel centre (x + 0.5) / 0.1 cells across, (y + 0.5) / 0.05 down.
            let (c, r) = ((x as f64 + 0.5) / 0.1, (y as f64 + 0.5) / 0.05);
            let p = picture.pixel(x, y).unwrap();
            assert_eq!(
                (p.red(), p.green()),
                ((c as usize / 10 % 256) as u8, (r as usize / 20 % 256) as u8)
            );
        }
        // Small grids are drawn larger than one pixel per cell, still in shape.
        let small = GridGeometry {
            cols: 30,
            rows: 20,
            ..g
        };
        assert_eq!(
            picture_size((30, 20), picture_scale(&small, 300.0)),
            (300, 100)
        );
    }
}
