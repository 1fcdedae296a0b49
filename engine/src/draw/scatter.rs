//! Scatter panels: points of two quantities on round-ticked axes ([`super::axis`]) with an
//! ordinary least-squares line (the usual straight-line fit, e.g. Davis 2002, *Statistics and
//! Data Analysis in Geology*, ch. 4) and a note under the title, for the outcome plots.

use super::axis::Axis;
use super::figure::{Anchor, Figure, Mark};

/// Colour of the points of group `k` (ColorBrewer Dark2, cycled).
pub fn group_colour(k: usize) -> [u8; 3] {
    const DARK2: [[u8; 3]; 8] = [
        [0x1b, 0x9e, 0x77],
        [0xd9, 0x5f, 0x02],
        [0x75, 0x70, 0xb3],
        [0xe7, 0x29, 0x8a],
        [0x66, 0xa6, 0x1e],
        [0xe6, 0xab, 0x02],
        [0xa6, 0x76, 0x1d],
        [0x66, 0x66, 0x66],
    ];
    DARK2[k % DARK2.len()]
}

/// What one panel shows.
pub struct Panel<'a> {
    /// Title above the plot.
    pub title: &'a str,
    /// Note under the title (e.g. the rank correlation).
    pub note: &'a str,
    /// Axis titles with units.
    pub x_title: &'a str,
    /// Vertical axis title.
    pub y_title: &'a str,
    /// Points (x, y, group); non-finite ones are left out.
    pub points: &'a [(f64, f64, usize)],
}

/// Least-squares line y = a + b x through the finite points; `None` with fewer than two
/// distinct x.
pub fn least_squares_line(points: &[(f64, f64, usize)]) -> Option<(f64, f64)> {
    let pts: Vec<(f64, f64)> = points
        .iter()
        .filter(|p| p.0.is_finite() && p.1.is_finite())
        .map(|p| (p.0, p.1))
        .collect();
    let n = pts.len() as f64;
    if pts.len() < 2 {
        return None;
    }
    let (mx, my) = (
        pts.iter().map(|p| p.0).sum::<f64>() / n,
        pts.iter().map(|p| p.1).sum::<f64>() / n,
    );
    let sxx: f64 = pts.iter().map(|p| (p.0 - mx).powi(2)).sum();
    let sxy: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
    (sxx > 0.0).then(|| {
        let b = sxy / sxx;
        (my - b * mx, b)
    })
}

/// Draws `panel` with its plot's top-left corner at (`x0`, `y0`) and plot size `w` x `h`
/// pixels: title, note and y-axis title in the 50 pixels above, axes below and left (labels
/// within 40 pixels), points coloured by group, the least-squares line in grey.
pub fn draw_panel(fig: &mut Figure, panel: &Panel, (x0, y0): (f32, f32), (w, h): (f32, f32)) {
    let finite: Vec<&(f64, f64, usize)> = panel
        .points
        .iter()
        .filter(|p| p.0.is_finite() && p.1.is_finite())
        .collect();
    let range = |pick: fn(&(f64, f64, usize)) -> f64| {
        finite
            .iter()
            .map(|p| pick(p))
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
                (lo.min(v), hi.max(v))
            })
    };
    let (xl, xh) = range(|p| p.0);
    let (yl, yh) = range(|p| p.1);
    let (xl, xh) = if xl.is_finite() { (xl, xh) } else { (0.0, 1.0) };
    let (yl, yh) = if yl.is_finite() { (yl, yh) } else { (0.0, 1.0) };
    let x = Axis::rounded(xl, xh, x0, x0 + w, 4);
    let y = Axis::rounded(yl, yh, y0 + h, y0, 4);
    fig.text(x0 - 40.0, y0 - 44.0, 13.0, panel.title, Anchor::Start);
    fig.text(x0 - 40.0, y0 - 28.0, 11.0, panel.note, Anchor::Start);
    fig.text(x0 - 40.0, y0 - 8.0, 11.0, panel.y_title, Anchor::Start);
    y.draw_vertical(fig, x0, x0 + w);
    fig.line(
        vec![
            (x0, y0),
            (x0 + w, y0),
            (x0 + w, y0 + h),
            (x0, y0 + h),
            (x0, y0),
        ],
        super::axis::AXIS,
        1.0,
    );
    x.draw_horizontal(fig, y0 + h, panel.x_title);
    for p in &finite {
        let (px, py) = (x.at(p.0), y.at(p.1));
        let d = 3.5;
        fig.marks.push(Mark::Polygon {
            points: vec![(px - d, py), (px, py - d), (px + d, py), (px, py + d)],
            fill: group_colour(p.2),
            stroke: None,
        });
    }
    if let Some((a, b)) = least_squares_line(panel.points) {
        let (lo, hi) = x.interval();
        let (ya, yb) = (y.clamp(a + b * lo), y.clamp(a + b * hi));
        fig.line(
            vec![(x.at(lo), y.at(ya)), (x.at(hi), y.at(yb))],
            [0x40, 0x40, 0x40],
            1.5,
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn least_squares_recovers_an_exact_line() {
        // Points on y = 2 + 3x (elementary): the fit returns the line.
        let pts: Vec<(f64, f64, usize)> = (0..5)
            .map(|k| (k as f64, 2.0 + 3.0 * k as f64, 0))
            .collect();
        let (a, b) = least_squares_line(&pts).unwrap();
        assert!((a - 2.0).abs() < 1e-12 && (b - 3.0).abs() < 1e-12);
        assert!(least_squares_line(&[(1.0, 1.0, 0), (1.0, 2.0, 0)]).is_none());
    }
}
