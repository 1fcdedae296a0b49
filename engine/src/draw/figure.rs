//! Small vector figures (rose diagrams, well sheets, polar score charts) built once from marks
//! and written both as SVG text and as a PNG through the same marks, so the two never differ.
//!
//! Rose diagrams of axes (Davis 2002, Statistics and Data Analysis in Geology, 3rd ed.): each
//! orientation is counted at theta and theta + 180, and petal radius is proportional to the
//! square root of the weighted count so petal area reads as frequency.

use crate::draw::map::Text;
use crate::draw::ticks::{nice_step, nice_ticks, tick_label};
use crate::stats::circular::axial_angle;
use tiny_skia::{Color, FillRule, LineCap, Paint, PathBuilder, Pixmap, Stroke, Transform};

/// Horizontal placement of a text mark.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Anchor {
    /// `x` is the start of the text.
    Start,
    /// `x` is the middle of the text.
    Middle,
    /// `x` is the end of the text.
    End,
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
    /// Marks that belong together (one rose of a sheet), a `<g class="...">` in SVG.
    Group {
        /// What the marks are (the SVG class).
        class: String,
        /// The marks, in drawing order.
        marks: Vec<Mark>,
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

    /// Adds the marks `draw` makes as one [`Mark::Group`] of `class`.
    pub fn group(&mut self, class: &str, draw: impl FnOnce(&mut Figure)) {
        let mut inner = Figure::new(self.width, self.height);
        draw(&mut inner);
        self.marks.push(Mark::Group {
            class: class.to_string(),
            marks: inner.marks,
        });
    }

    /// The figure as an SVG document.
    pub fn to_svg(&self) -> String {
        let mut s = format!(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\">\n<rect width=\"{w}\" height=\"{h}\" fill=\"#ffffff\"/>\n",
            w = self.width,
            h = self.height
        );
        for m in &self.marks {
            svg_mark(&mut s, m);
        }
        s + "</svg>\n"
    }

    /// The figure rasterised (anti-aliased, the shipped DejaVu Sans for text).
    pub fn to_pixmap(&self) -> Pixmap {
        let mut pixmap = Pixmap::new(self.width.max(1), self.height.max(1)).expect("figure size");
        pixmap.fill(Color::WHITE);
        let text = Text::new();
        for m in &self.marks {
            draw_mark(&mut pixmap, &text, m);
        }
        pixmap
    }
}

/// Appends the SVG element of `m` to `s`.
fn svg_mark(s: &mut String, m: &Mark) {
    let hex = |c: &[u8; 3]| format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2]);
    let pts = |p: &[(f32, f32)]| {
        p.iter()
            .map(|(x, y)| format!("{x:.2},{y:.2}"))
            .collect::<Vec<_>>()
            .join(" ")
    };
    match m {
        Mark::Polygon {
            points,
            fill,
            stroke,
        } => {
            *s += &format!(
                "<polygon points=\"{}\" fill=\"{}\" stroke=\"{}\"/>\n",
                pts(points),
                hex(fill),
                stroke.as_ref().map_or("none".to_string(), hex)
            )
        }
        Mark::Line {
            points,
            colour,
            width,
        } => {
            *s += &format!(
                "<polyline points=\"{}\" fill=\"none\" stroke=\"{}\" stroke-width=\"{width:.2}\" stroke-linecap=\"round\"/>\n",
                pts(points),
                hex(colour)
            )
        }
        Mark::Text {
            x,
            y,
            size,
            text,
            anchor,
        } => {
            let anchor = match anchor {
                Anchor::Start => "start",
                Anchor::Middle => "middle",
                Anchor::End => "end",
            };
            *s += &format!(
                "<text x=\"{x:.2}\" y=\"{y:.2}\" font-family=\"DejaVu Sans, sans-serif\" font-size=\"{size:.1}\" text-anchor=\"{anchor}\">{}</text>\n",
                escape(text)
            )
        }
        Mark::Group { class, marks } => {
            *s += &format!("<g class=\"{}\">\n", escape(class));
            for m in marks {
                svg_mark(s, m);
            }
            *s += "</g>\n";
        }
    }
}

/// Draws `m` into `pixmap`.
fn draw_mark(pixmap: &mut Pixmap, text: &Text, m: &Mark) {
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
                    stroke_path(pixmap, &path, *c, 1.0);
                }
            }
        }
        Mark::Line {
            points,
            colour,
            width,
        } => {
            if let Some(path) = path_of(points, false) {
                stroke_path(pixmap, &path, *colour, *width);
            }
        }
        Mark::Text {
            x,
            y,
            size,
            text: s,
            anchor,
        } => {
            let shift = match anchor {
                Anchor::Start => 0.0,
                Anchor::Middle => text.width(s, *size) / 2.0,
                Anchor::End => text.width(s, *size),
            };
            text.draw(pixmap, s, x - shift, *y, *size);
        }
        Mark::Group { marks, .. } => {
            for m in marks {
                draw_mark(pixmap, text, m);
            }
        }
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

/// The radial scale of rose diagrams: petal radius proportional to the square root of the
/// petal's share of the total weight, in percent (petal area reads as share, Davis 2002), with
/// rings at round shares (1-2-5 steps) and the outer ring at the first round share at or above
/// the largest petal. One scale can serve several roses so their petals compare.
#[derive(Clone, Debug, PartialEq)]
pub struct RoseScale {
    /// Share at the outer ring, percent.
    top: f64,
    /// Shares of the rings, percent, increasing (the last is `top`).
    rings: Vec<f64>,
    /// Step between rings, percent (for labels).
    step: f64,
}

impl RoseScale {
    /// The scale for roses whose largest petal holds `largest` percent of its rose's weight
    /// (an empty rose, 0 or NaN, gets a 0..10% scale).
    pub fn for_largest(largest: f64) -> Self {
        let largest = if largest > 0.0 {
            largest.min(100.0)
        } else {
            10.0
        };
        let step = nice_step(largest / 2.0);
        let top = (largest / step).ceil() * step;
        let rings = nice_ticks(0.0, top, 2)
            .into_iter()
            .filter(|&v| v > 0.0)
            .collect();
        Self { top, rings, step }
    }

    /// Radius of a petal of `share` percent in a rose of outer radius `radius`.
    pub fn radius(&self, share: f64, radius: f32) -> f32 {
        radius * (share.max(0.0) / self.top).sqrt() as f32
    }

    /// Shares of the rings, percent.
    pub fn rings(&self) -> &[f64] {
        &self.rings
    }

    /// The label of the ring at `share` (`20%`).
    pub fn label(&self, share: f64) -> String {
        format!("{}%", tick_label(share, self.step))
    }
}

/// Petal shares of axial data: [`axial_counts`] as percent of the total weight (all zero
/// when there is none).
pub fn axial_shares(samples: &[(f64, f64)], bins: usize) -> Vec<f64> {
    let counts = axial_counts(samples, bins);
    let total: f64 = counts.iter().sum();
    counts
        .iter()
        .map(|c| if total > 0.0 { 100.0 * c / total } else { 0.0 })
        .collect()
}

/// Colours of rose marks.
const PETAL: [u8; 3] = [0x41, 0x86, 0xc8];
const RING: [u8; 3] = [0xbb, 0xbb, 0xbb];
/// Colour of the mean fast-azimuth axis on roses and charts.
pub const MEAN_AXIS: [u8; 3] = [0xd9, 0x5f, 0x02];
/// Colour of the well axis on roses.
pub const WELL_AXIS: [u8; 3] = [0x20, 0x20, 0x20];
/// Colour of the two trend axes of a corridor holding two azimuth populations (ColorBrewer
/// Dark2 purple).
pub const TREND_AXES: [u8; 3] = [0x75, 0x70, 0xb3];

/// What a rose drawn by [`draw_rose`] shows besides its petals.
#[derive(Clone, Copy, Debug)]
pub struct RoseParts {
    /// Mean axis (degrees), drawn orange across the rose.
    pub mean_axis: Option<f64>,
    /// Well axis (degrees), drawn black across the rose.
    pub well_axis: Option<f64>,
    /// Two trend axes (degrees) when the samples hold two azimuth populations, drawn purple
    /// instead of the mean axis.
    pub trends: Option<[f64; 2]>,
    /// Text height of the ring labels, pixels; no labels when `None`.
    pub labels: Option<f32>,
    /// Whether N, E, S and W are written around the rose (at the ring label size).
    pub compass: bool,
}

/// Draws a rose of axial `shares` (percent per sector over 0..180, drawn again at +180) centred
/// at (`cx`, `cy`) with outer radius `radius` on `scale`: a white disc, the rings, the petals,
/// the mean and well axes, with `parts.labels` each ring's share (in the direction of the
/// smallest petal between 30 and 150 degrees farthest from the axes, where it hides the least)
/// and with
/// `parts.compass` N/E/S/W.
pub fn draw_rose(
    fig: &mut Figure,
    (cx, cy): (f32, f32),
    radius: f32,
    shares: &[f64],
    scale: &RoseScale,
    parts: RoseParts,
) {
    let circle = |r: f32| -> Vec<(f32, f32)> {
        (0..=72).map(|k| polar(cx, cy, r, 5.0 * k as f64)).collect()
    };
    fig.marks.push(Mark::Polygon {
        points: circle(radius),
        fill: [0xff, 0xff, 0xff],
        stroke: None,
    });
    for &ring in scale.rings() {
        fig.line(circle(scale.radius(ring, radius)), RING, 1.0);
    }
    let width = 180.0 / shares.len().max(1) as f64;
    for (k, &share) in shares.iter().enumerate() {
        if share <= 0.0 {
            continue;
        }
        let r = scale.radius(share, radius);
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
    let mean_axis = parts.mean_axis.filter(|_| parts.trends.is_none());
    let [trend_a, trend_b] = parts.trends.map_or([None, None], |t| t.map(Some));
    for (axis, colour, w) in [
        (mean_axis, MEAN_AXIS, 2.5),
        (trend_a, TREND_AXES, 2.5),
        (trend_b, TREND_AXES, 2.5),
        (parts.well_axis, WELL_AXIS, 1.5),
    ] {
        if let Some(a) = axis.filter(|a| a.is_finite()) {
            fig.line(
                vec![polar(cx, cy, radius, a), polar(cx, cy, radius, a + 180.0)],
                colour,
                w,
            );
        }
    }
    if let Some(size) = parts.labels {
        // Between 30 and 150 degrees (clear of a title above the rose): the smallest petal,
        // and of equal petals the one farthest from the mean and well axes.
        let clearance = |az: f64| {
            [parts.mean_axis, parts.well_axis]
                .into_iter()
                .flatten()
                .filter(|a| a.is_finite())
                .map(|a| axial_angle(az, a))
                .fold(90.0, f64::min)
        };
        let quiet = shares
            .iter()
            .enumerate()
            .map(|(k, &share)| ((k as f64 + 0.5) * width, share))
            .filter(|(az, _)| (30.0..=150.0).contains(az))
            .min_by(|a, b| {
                a.1.total_cmp(&b.1)
                    .then(clearance(b.0).total_cmp(&clearance(a.0)))
            })
            .map_or(90.0, |(az, _)| az);
        for &ring in scale.rings() {
            let (x, y) = polar(cx, cy, scale.radius(ring, radius), quiet);
            fig.text(x, y + size / 3.0, size, scale.label(ring), Anchor::Middle);
        }
        if parts.compass {
            for (az, label) in [(0.0, "N"), (90.0, "E"), (180.0, "S"), (270.0, "W")] {
                let (x, y) = polar(cx, cy, radius + size, az);
                fig.text(x, y + size / 3.0, size, label, Anchor::Middle);
            }
        }
    }
}

/// A rose of axial `samples` (orientation, weight) with `bins` petals over 0..180 on its own
/// [`RoseScale`] (labelled rings, percent of the weight, N/E/S/W around it), the axes of
/// `parts` (its labels and compass are set here), title above and `notes` below.
pub fn rose(
    title: &str,
    samples: &[(f64, f64)],
    bins: usize,
    parts: RoseParts,
    notes: &[String],
) -> Figure {
    let (size, radius) = (360u32, ROSE_RADIUS);
    let mut fig = Figure::new(size, size + 20 * notes.len() as u32 + 20);
    let centre = (size as f32 / 2.0, ROSE_CENTRE_Y);
    fig.text(centre.0, 24.0, 16.0, title, Anchor::Middle);
    let shares = axial_shares(samples, bins);
    let scale = RoseScale::for_largest(shares.iter().copied().fold(0.0, f64::max));
    let parts = RoseParts {
        labels: Some(12.0),
        compass: true,
        ..parts
    };
    draw_rose(&mut fig, centre, radius, &shares, &scale, parts);
    let mut y = centre.1 + radius + 40.0;
    for n in notes {
        fig.text(20.0, y, 12.0, n.clone(), Anchor::Start);
        y += 20.0;
    }
    fig
}

/// Outer radius and centre row of a single rose figure, pixels.
const ROSE_RADIUS: f32 = 130.0;
const ROSE_CENTRE_Y: f32 = 40.0 + ROSE_RADIUS + 10.0;

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
            RoseParts {
                mean_axis: Some(120.0),
                well_axis: Some(90.0),
                trends: None,
                labels: None,
                compass: false,
            },
            &["n 2".into()],
        );
        let svg = fig.to_svg();
        // The white disc, then two non-empty sectors, each drawn at theta and theta + 180.
        assert_eq!(svg.matches("<polygon").count(), 5);
        assert!(svg.starts_with("<svg") && svg.contains("stage 1"));
        // Shares 20% and 80%: rings every 50% (1-2-5 step for half the largest share, by
        // hand), labelled.
        assert!(svg.contains(">50%<") && svg.contains(">100%<"), "{svg}");
        let png = fig.to_pixmap();
        assert_eq!((png.width(), png.height()), (fig.width, fig.height));
        // Petal radius goes with sqrt(share) (Davis 2002): the 35-degree petal (80%) reaches
        // sqrt(0.8) = 0.89 of the 100% ring, the 30-degree one (20%) 0.45, so a point at 0.75
        // of the radius along 37.5 degrees is blue and along 32.5 degrees white.
        let (x, y) = polar(180.0, 180.0, 0.75 * 130.0, 37.5);
        let p = png.pixel(x as u32, y as u32).unwrap();
        assert_eq!(
            (p.red(), p.green(), p.blue()),
            (PETAL[0], PETAL[1], PETAL[2])
        );
        let (x, y) = polar(180.0, 180.0, 0.75 * 130.0, 32.5);
        assert_eq!(png.pixel(x as u32, y as u32).unwrap().red(), 255);
    }

    #[test]
    fn rose_scales_put_rings_at_round_shares_and_area_in_proportion() {
        // 1-2-5 steps for half the largest share, worked by hand: 37% -> rings 20, 40;
        // 12% -> 10, 20; 100% -> 50, 100.
        assert_eq!(RoseScale::for_largest(37.0).rings(), &[20.0, 40.0]);
        assert_eq!(RoseScale::for_largest(12.0).rings(), &[10.0, 20.0]);
        assert_eq!(RoseScale::for_largest(100.0).rings(), &[50.0, 100.0]);
        let scale = RoseScale::for_largest(37.0);
        assert_eq!(scale.label(20.0), "20%");
        // Area in proportion to share (Davis 2002): a quarter of the share, half the radius.
        assert_eq!(scale.radius(40.0, 100.0), 100.0);
        assert_eq!(scale.radius(10.0, 100.0), 50.0);
        // Shares are percent of the total weight.
        let shares = axial_shares(&[(10.0, 1.0), (190.0, 2.0), (95.0, 1.0)], 18);
        assert_eq!((shares[1], shares[9]), (75.0, 25.0));
    }
}
