//! Marks drawn over a map picture, given in map coordinates (CRS units) and placed through the
//! picture's own geotransform: horizon contours, anisotropy vectors, stage corridor outlines,
//! well paths, stage numbers, well names and contour levels. Every line is a near-black core over a thin light
//! halo (anti-aliased, round caps), and every label near-black text over a white halo, so the
//! marks read on every colour map while covering little of it.

use crate::draw::map::Text;
use crate::grid::GridGeometry;
use tiny_skia::{Color, LineCap, LineJoin, Paint, PathBuilder, Pixmap, Rect, Stroke, Transform};

/// A map segment to draw, end points in CRS units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MapSegment {
    /// First end.
    pub a: (f64, f64),
    /// Second end.
    pub b: (f64, f64),
}

/// A text to write at a map point (CRS units).
#[derive(Clone, Debug, PartialEq)]
pub struct MapLabel {
    /// The text.
    pub text: String,
    /// Where it goes: the label is centred on this point (stage numbers) or starts beside it
    /// (well names).
    pub at: (f64, f64),
}

/// Everything drawn over a map's colours, in map coordinates, drawn in this order (later marks
/// on top).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Overlay {
    /// Horizon contour lines (thin, dark, half transparent, no halo).
    pub contours: Vec<Vec<(f64, f64)>>,
    /// Anisotropy vectors.
    pub vectors: Vec<MapSegment>,
    /// Stage corridor outlines, closed rings.
    pub corridors: Vec<Vec<(f64, f64)>>,
    /// Well paths (map traces).
    pub wells: Vec<Vec<(f64, f64)>>,
    /// Stage numbers, centred on their corridors.
    pub stage_labels: Vec<MapLabel>,
    /// Well names, beside the first point of each path.
    pub well_labels: Vec<MapLabel>,
    /// Contour levels, centred on points of their lines.
    pub contour_labels: Vec<MapLabel>,
}

/// Core width of vectors and corridor outlines at weight 1, pixels.
pub const THIN_LINE: f32 = 1.0;
/// Core width of well paths at weight 1, pixels.
pub const WELL_LINE: f32 = 2.0;
/// Halo beyond each side of a core, pixels (at any weight).
pub const HALO: f32 = 0.8;
/// Label height at weight 1, pixels.
pub const LABEL_SIZE: f32 = 11.0;

/// Draws `overlay` on `pixmap`, a picture whose pixel (i, j) is cell (i, j) of `picture`
/// (the picture's geotransform maps its pixels to CRS units). `weight` scales the line widths
/// and label size (1 for map rasters, more for quicklooks). Labels that would overlap one
/// already written (well names first, then stage numbers, then contour levels) or fall outside
/// the picture are left out.
pub fn draw_overlay(pixmap: &mut Pixmap, picture: &GridGeometry, overlay: &Overlay, weight: f32) {
    let to_pixel = |p: (f64, f64)| {
        let (col, row) = picture.map_to_grid(p.0, p.1);
        (col as f32, row as f32)
    };
    let path_of = |lines: &mut dyn Iterator<Item = &[(f64, f64)]>| {
        let mut pb = PathBuilder::new();
        for line in lines {
            for (k, &p) in line.iter().enumerate() {
                let (x, y) = to_pixel(p);
                if k == 0 {
                    pb.move_to(x, y);
                } else {
                    pb.line_to(x, y);
                }
            }
        }
        pb.finish()
    };
    if let Some(path) = path_of(&mut overlay.contours.iter().map(Vec::as_slice)) {
        stroke(
            pixmap,
            &path,
            Color::from_rgba8(25, 25, 25, 150),
            0.8 * weight,
        );
    }
    let segments: Vec<[(f64, f64); 2]> = overlay.vectors.iter().map(|s| [s.a, s.b]).collect();
    if let Some(path) = path_of(&mut segments.iter().map(|s| &s[..])) {
        stroke_with_halo(pixmap, &path, THIN_LINE * weight);
    }
    if let Some(path) = path_of(&mut overlay.corridors.iter().map(Vec::as_slice)) {
        stroke_with_halo(pixmap, &path, THIN_LINE * weight);
    }
    if let Some(path) = path_of(&mut overlay.wells.iter().map(Vec::as_slice)) {
        stroke_with_halo(pixmap, &path, WELL_LINE * weight);
    }
    let text = Text::new();
    let size = LABEL_SIZE * weight;
    let mut placed: Vec<Rect> = Vec::new();
    let mut place = |pixmap: &mut Pixmap, label: &MapLabel, centred: bool| {
        let (x, y) = to_pixel(label.at);
        let w = text.width(&label.text, size);
        let (left, baseline) = if centred {
            (x - w / 2.0, y + 0.36 * size)
        } else {
            (x + 0.5 * size, y - 0.5 * size)
        };
        let Some(rect) = Rect::from_xywh(left - 1.0, baseline - size, w + 2.0, size * 1.25) else {
            return;
        };
        let inside = rect.left() >= 0.0
            && rect.top() >= 0.0
            && rect.right() <= pixmap.width() as f32
            && rect.bottom() <= pixmap.height() as f32;
        if !inside || placed.iter().any(|r| r.intersect(&rect).is_some()) {
            return;
        }
        text.draw_with_halo(pixmap, &label.text, left, baseline, size);
        placed.push(rect);
    };
    for label in &overlay.well_labels {
        place(pixmap, label, false);
    }
    for label in overlay.stage_labels.iter().chain(&overlay.contour_labels) {
        place(pixmap, label, true);
    }
}

/// Strokes `path` as a near-black core `width` pixels wide over a white halo [`HALO`] pixels
/// beyond each side.
pub(crate) fn stroke_with_halo(pixmap: &mut Pixmap, path: &tiny_skia::Path, width: f32) {
    stroke(
        pixmap,
        path,
        Color::from_rgba8(255, 255, 255, 230),
        width + 2.0 * HALO,
    );
    stroke(pixmap, path, Color::from_rgba8(15, 15, 15, 255), width);
}

fn stroke(pixmap: &mut Pixmap, path: &tiny_skia::Path, colour: Color, width: f32) {
    let mut paint = Paint::default();
    paint.set_color(colour);
    paint.anti_alias = true;
    let stroke = Stroke {
        width,
        line_cap: LineCap::Round,
        line_join: LineJoin::Round,
        ..Stroke::default()
    };
    pixmap.stroke_path(path, &paint, &stroke, Transform::identity(), None);
}

/// The point a stage number is written at: the mean of a ring's distinct vertices (the
/// closing repeat of the first vertex left out).
pub fn ring_centre(ring: &[(f64, f64)]) -> Option<(f64, f64)> {
    let distinct = match ring {
        [first, rest @ .., last] if first == last => &ring[..rest.len() + 1],
        _ => ring,
    };
    if distinct.is_empty() {
        return None;
    }
    let n = distinct.len() as f64;
    let (sx, sy) = distinct
        .iter()
        .fold((0.0, 0.0), |(sx, sy), p| (sx + p.0, sy + p.1));
    Some((sx / n, sy / n))
}
