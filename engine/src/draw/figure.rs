//! Small vector figures (rose diagrams, well sheets, polar score charts) built once from marks
//! and written both as SVG text and as a PNG through the same marks, so the two never differ.
//!
//! Rose diagrams of axes (Davis 2002, Statistics and Data Analysis in Geology, 3rd ed.): each
//! orientation is counted at theta and theta + 180, and petal radius is proportional to the
//! square root of the weighted count so petal area reads as frequency.

use crate::draw::map::Text;
use tiny_skia::{Color, FillRule, LineCap, Paint, PathBuilder, Pixmap, Stroke, Transform};

/// Horizontal placement of a text mark.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Anchor {
    /// `x` is the start of the text.
    Start,
    /// `x` is the middle of the text.
    Middle,
}

/// One drawing element, in pixels from the top-left corner.
#[derive(Clone, Debug, PartialEq)]
pub enum Mark {
    /// A filled (and optionally outlined) closed polygon.
    Polygon {
        /// Vertices.
        points: Vec<(f32, f32)>,
        /// Fill colour.
        fill: [u8; 3],
        /// Outline colour, if any.
        stroke: Option<[u8; 3]>,
    },
    /// A polyline.
    Line {
        /// Vertices.
        points: Vec<(f32, f32)>,
        /// Colour.
        colour: [u8; 3],
        /// Width in pixels.
        width: f32,
    },
    /// One line of text, baseline at `y`.
    Text {
        /// Anchor point x.
        x: f32,
        /// Baseline y.
        y: f32,
        /// Height in pixels.
        size: f32,
        /// The text.
        text: String,
        /// Placement.
        anchor: Anchor,
    },
}

/// A figure: size in pixels and marks drawn in order on white.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Figure {
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    /// Marks in drawing order.
    pub marks: Vec<Mark>,
}

impl Figure {
    /// An empty figure.
    pub fn new(width: u32, height: u32) -> Self {
        Self {
            width,
            height,
            marks: Vec::new(),
        }
    }

    /// Adds a text mark.
    pub fn text(&mut self, x: f32, y: f32, size: f32, text: impl Into<String>, anchor: Anchor) {
        self.marks.push(Mark::Text {
            x,
            y,
            size,
            text: text.into(),
            anchor,
        });
    }

    /// Adds a line.
    pub fn line(&mut self, points: Vec<(f32, f32)>, colour: [u8; 3], width: f32) {
        self.marks.push(Mark::Line {
            points,
            colour,
            width,
        });
    }

    /// Copies `other`'s marks shifted by (`dx`, `dy`) and scaled by `scale`.
    pub fn place(&mut self, other: &Figure, dx: f32, dy: f32, scale: f32) {
        let map = |p: &(f32, f32)| (dx + scale * p.0, dy + scale * p.1);
        for m in &other.marks {
            self.marks.push(match m {
                Mark::Polygon {
                    points,
                    fill,
                    stroke,
                } => Mark::Polygon {
                    points: points.iter().map(map).collect(),
                    fill: *fill,
                    stroke: *stroke,
                },
                Mark::Line {
                    points,
                    colour,
                    width,
                } => Mark::Line {
                    points: points.iter().map(map).collect(),
                    colour: *colour,
                    width: width * scale,
                },
                Mark::Text {
                    x,
                    y,
                    size,
                    text,
                    anchor,
                } => Mark::Text {
                    x: dx + scale * x,
                    y: dy + scale * y,
                    size: size * scale,
                    text: text.clone(),
                    anchor: *anchor,
                },
            });
        }
    }

    /// The figure as an SVG document.
    pub fn to_svg(&self) -> String {
        let hex = |c: &[u8; 3]| format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2]);
        let pts = |p: &[(f32, f32)]| {
            p.iter()
                .map(|(x, y)| format!("{x:.2},{y:.2}"))
                .collect::<Vec<_>>()
                .join(" ")
        };
        let mut s = format!(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\">\n<rect width=\"{w}\" height=\"{h}\" fill=\"#ffffff\"/>\n",
            w = self.width,
            h = self.height
        );
        for m in &self.marks {
            s += &match m {
                Mark::Polygon {
                    points,
                    fill,
                    stroke,
                } => format!(
                    "<polygon points=\"{}\" fill=\"{}\" stroke=\"{}\"/>\n",
                    pts(points),
                    hex(fill),
                    stroke.as_ref().map_or("none".to_string(), hex)
                ),
                Mark::Line {
                    points,
                    colour,
                    width,
                } => format!(
                    "<polyline points=\"{}\" fill=\"none\" stroke=\"{}\" stroke-width=\"{width:.2}\" stroke-linecap=\"round\"/>\n",
                    pts(points),
                    hex(colour)
                ),
                Mark::Text {
                    x,
                    y,
                    size,
                    text,
                    anchor,
                } => format!(
                    "<text x=\"{x:.2}\" y=\"{y:.2}\" font-family=\"DejaVu Sans, sans-serif\" font-size=\"{size:.1}\" text-anchor=\"{}\">{}</text>\n",
                    if *anchor == Anchor::Middle { "middle" } else { "start" },
                    escape(text)
                ),
            };
        }
        s + "</svg>\n"
    }

    /// The figure rasterised (anti-aliased, the shipped DejaVu Sans for text).
    pub fn to_pixmap(&self) -> Pixmap {
        let mut pixmap = Pixmap::new(self.width.max(1), self.height.max(1)).expect("figure size");
        pixmap.fill(Color::WHITE);
        let text = Text::new();
        for m in &self.marks {
            match m {
                Mark::Polygon {
                    points,
                    fill,
                    stroke,
                } => {
                    if let Some(path) = path_of(points, true) {
                        pixmap.fill_path(
                            &path,
                            &paint(*fill),
                            FillRule::Winding,
                            Transform::identity(),
                            None,
                        );
                        if let Some(c) = stroke {
                            stroke_path(&mut pixmap, &path, *c, 1.0);
                        }
                    }
                }
                Mark::Line {
                    points,
                    colour,
                    width,
                } => {
                    if let Some(path) = path_of(points, false) {
                        stroke_path(&mut pixmap, &path, *colour, *width);
                    }
                }
                Mark::Text {
                    x,
                    y,
                    size,
                    text: s,
                    anchor,
                } => {
                    let shift = if *anchor == Anchor::Middle {
                        text.width(s, *size) / 2.0
                    } else {
                        0.0
                    };
                    text.draw(&mut pixmap, s, x - shift, *y, *size);
                }
            }
        }
        pixmap
    }
}

fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

fn paint(c: [u8; 3]) -> Paint<'static> {
    let mut p = Paint::default();
    p.set_color(Color::from_rgba8(c[0], c[1], c[2], 255));
    p.anti_alias = true;
    p
}

fn path_of(points: &[(f32, f32)], close: bool) -> Option<tiny_skia::Path> {
    let mut pb = PathBuilder::new();
    let (first, rest) = points.split_first()?;
    pb.move_to(first.0, first.1);
    for p in rest {
        pb.line_to(p.0, p.1);
    }
    if close {
        pb.close();
    }
    pb.finish()
}

fn stroke_path(pixmap: &mut Pixmap, path: &tiny_skia::Path, c: [u8; 3], width: f32) {
    let stroke = Stroke {
        width,
        line_cap: LineCap::Round,
        ..Stroke::default()
    };
    pixmap.stroke_path(path, &paint(c), &stroke, Transform::identity(), None);
}

/// Picture coordinates of azimuth `az` (degrees clockwise from north, up) at radius `r`
/// around (`cx`, `cy`).
pub fn polar(cx: f32, cy: f32, r: f32, az: f64) -> (f32, f32) {
    let (s, c) = az.to_radians().sin_cos();
    (cx + r * s as f32, cy - r * c as f32)
}

/// Petal counts of axial data: `bins` sectors over 0..180, each the weighted count of the
/// orientations in it (the same counts are drawn again at +180).
pub fn axial_counts(samples: &[(f64, f64)], bins: usize) -> Vec<f64> {
    let width = 180.0 / bins as f64;
    let mut counts = vec![0.0; bins];
    for &(a, w) in samples
        .iter()
        .filter(|(a, w)| a.is_finite() && w.is_finite() && *w > 0.0)
    {
        let k = ((a.rem_euclid(180.0) / width) as usize).min(bins - 1);
        counts[k] += w;
    }
    counts
}

/// Colours of rose marks.
const PETAL: [u8; 3] = [0x41, 0x86, 0xc8];
const GRID: [u8; 3] = [0xbb, 0xbb, 0xbb];
const MEAN_AXIS: [u8; 3] = [0xd9, 0x5f, 0x02];
const WELL_AXIS: [u8; 3] = [0x20, 0x20, 0x20];

/// A rose of axial `samples` (orientation, weight) with `bins` petals over 0..180, the mean
/// axis (orange) and the well axis (black) if given, title above and `notes` below.
pub fn rose(
    title: &str,
    samples: &[(f64, f64)],
    bins: usize,
    mean_axis: Option<f64>,
    well_axis: Option<f64>,
    notes: &[String],
) -> Figure {
    let (size, radius) = (360u32, 130.0f32);
    let mut fig = Figure::new(size, size + 20 * notes.len() as u32 + 20);
    let (cx, cy) = (size as f32 / 2.0, 40.0 + radius + 10.0);
    fig.text(cx, 24.0, 16.0, title, Anchor::Middle);
    for ring in [0.5f32, 1.0] {
        let points = (0..=72)
            .map(|k| polar(cx, cy, radius * ring, 5.0 * k as f64))
            .collect();
        fig.line(points, GRID, 1.0);
    }
    for (az, label) in [(0.0, "N"), (90.0, "E"), (180.0, "S"), (270.0, "W")] {
        let (x, y) = polar(cx, cy, radius + 14.0, az);
        fig.text(x, y + 5.0, 12.0, label, Anchor::Middle);
    }
    let counts = axial_counts(samples, bins);
    let max = counts.iter().copied().fold(0.0, f64::max);
    let width = 180.0 / bins as f64;
    for (k, &c) in counts.iter().enumerate() {
        if c <= 0.0 {
            continue;
        }
        let r = radius * (c / max).sqrt() as f32;
        for offset in [0.0, 180.0] {
            let a0 = offset + k as f64 * width;
            let mut points = vec![(cx, cy)];
            points.extend((0..=6).map(|j| polar(cx, cy, r, a0 + width * j as f64 / 6.0)));
            fig.marks.push(Mark::Polygon {
                points,
                fill: PETAL,
                stroke: Some([0xff, 0xff, 0xff]),
            });
        }
    }
    for (axis, colour, w) in [(mean_axis, MEAN_AXIS, 3.0), (well_axis, WELL_AXIS, 2.0)] {
        if let Some(a) = axis.filter(|a| a.is_finite()) {
            fig.line(
                vec![polar(cx, cy, radius, a), polar(cx, cy, radius, a + 180.0)],
                colour,
                w,
            );
        }
    }
    let mut y = cy + radius + 40.0;
    for n in notes {
        fig.text(20.0, y, 12.0, n.clone(), Anchor::Start);
        y += 20.0;
    }
    fig
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn axial_counts_fold_opposite_directions() {
        // Axial data (Davis 2002): 10 and 190 degrees are the same orientation.
        let c = axial_counts(&[(10.0, 1.0), (190.0, 2.0), (95.0, 1.0)], 18);
        assert_eq!(c[1], 3.0);
        assert_eq!(c[9], 1.0);
        assert_eq!(c.iter().sum::<f64>(), 4.0);
    }

    #[test]
    fn rose_svg_and_png_carry_the_same_petals() {
        let fig = rose(
            "stage 1",
            &[(30.0, 1.0), (35.0, 4.0)],
            36,
            Some(120.0),
            Some(90.0),
            &["n 2".into()],
        );
        let svg = fig.to_svg();
        // Two non-empty sectors, each drawn at theta and theta + 180.
        assert_eq!(svg.matches("<polygon").count(), 4);
        assert!(svg.starts_with("<svg") && svg.contains("stage 1"));
        let png = fig.to_pixmap();
        assert_eq!((png.width(), png.height()), (fig.width, fig.height));
        // Petal radius goes with sqrt(count): the 35-degree petal (4) reaches twice as far as
        // the 30-degree one (1), so a point at 0.75 of the radius along 37.5 degrees is blue.
        let (x, y) = polar(180.0, 180.0, 0.75 * 130.0, 37.5);
        let p = png.pixel(x as u32, y as u32).unwrap();
        assert_eq!(
            (p.red(), p.green(), p.blue()),
            (PETAL[0], PETAL[1], PETAL[2])
        );
        let (x, y) = polar(180.0, 180.0, 0.75 * 130.0, 32.5);
        assert_eq!(png.pixel(x as u32, y as u32).unwrap().red(), 255);
    }
}
