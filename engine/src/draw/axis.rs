//! Linear axes for figures: data values to pixels, round tick values from [`nice_ticks`]
//! (1-2-5 steps, Heckbert 1990) labelled with just the decimals their step needs, and the
//! marks of a horizontal or vertical axis with its title and unit.

use crate::draw::figure::{Anchor, Figure};
use crate::draw::ticks::{nice_step, nice_ticks, tick_label};

/// Colour of an axis line, its ticks and labels' leaders.
pub const AXIS: [u8; 3] = [0x30, 0x30, 0x30];
/// Colour of grid lines across a plot at the ticks.
pub const GRID: [u8; 3] = [0xe2, 0xe2, 0xe2];
/// Colour of the zero line of a signed quantity.
pub const ZERO: [u8; 3] = [0x70, 0x70, 0x70];

/// A linear axis: the data interval `lo..hi` drawn from pixel `from` to pixel `to` (either
/// direction, so a y axis can grow upwards or downwards), with round ticks inside it.
#[derive(Clone, Debug, PartialEq)]
pub struct Axis {
    lo: f64,
    hi: f64,
    from: f32,
    to: f32,
    step: f64,
    ticks: Vec<f64>,
}

impl Axis {
    /// The interval `lo..hi` (data units, `lo < hi`, both finite) over pixels `from..to`, with
    /// ticks every 1-2-5 step giving at most about `intervals` intervals.
    pub fn new(lo: f64, hi: f64, from: f32, to: f32, intervals: usize) -> Self {
        let step = nice_step((hi - lo) / intervals.max(1) as f64);
        Self {
            lo,
            hi,
            from,
            to,
            step,
            ticks: nice_ticks(lo, hi, intervals),
        }
    }

    /// An axis whose interval is `lo..hi` widened outwards to whole ticks, so the data's ends
    /// sit on or inside labelled values (a span of zero is widened by one unit each side).
    pub fn rounded(lo: f64, hi: f64, from: f32, to: f32, intervals: usize) -> Self {
        let (lo, hi) = if hi > lo {
            (lo, hi)
        } else {
            (lo - 1.0, hi + 1.0)
        };
        let step = nice_step((hi - lo) / intervals.max(1) as f64);
        let (lo, hi) = ((lo / step).floor() * step, (hi / step).ceil() * step);
        Self::new(lo, hi, from, to, intervals)
    }

    /// Pixel position of the data value `v` (linear; values outside the interval land outside
    /// the pixel range).
    pub fn at(&self, v: f64) -> f32 {
        self.from + (self.to - self.from) * ((v - self.lo) / (self.hi - self.lo)) as f32
    }

    /// `v` limited to the axis interval.
    pub fn clamp(&self, v: f64) -> f64 {
        v.clamp(self.lo, self.hi)
    }

    /// The data interval (lo, hi).
    pub fn interval(&self) -> (f64, f64) {
        (self.lo, self.hi)
    }

    /// Round tick values inside the interval.
    pub fn ticks(&self) -> &[f64] {
        &self.ticks
    }

    /// The tick label of `v` (the decimals of the tick step).
    pub fn label(&self, v: f64) -> String {
        tick_label(v, self.step)
    }

    /// Whether zero lies strictly inside the interval (a zero line is worth drawing).
    pub fn spans_zero(&self) -> bool {
        self.lo < 0.0 && self.hi > 0.0
    }

    /// Draws this as a horizontal axis at pixel row `y`: the line, ticks below it, their labels
    /// and the `title` (with its unit) centred under them.
    pub fn draw_horizontal(&self, fig: &mut Figure, y: f32, title: &str) {
        fig.line(vec![(self.from, y), (self.to, y)], AXIS, 1.0);
        for &t in &self.ticks {
            let x = self.at(t);
            fig.line(vec![(x, y), (x, y + 5.0)], AXIS, 1.0);
            fig.text(x, y + 18.0, 11.0, self.label(t), Anchor::Middle);
        }
        fig.text(
            (self.from + self.to) / 2.0,
            y + 36.0,
            12.0,
            title,
            Anchor::Middle,
        );
    }

    /// Draws this as a vertical axis at pixel column `x`: the line, ticks left of it with their
    /// labels (right-aligned to the tick), grid lines across to `x_right`, and a darker zero
    /// line when zero is inside the interval.
    pub fn draw_vertical(&self, fig: &mut Figure, x: f32, x_right: f32) {
        for &t in &self.ticks {
            let y = self.at(t);
            let colour = if t == 0.0 && self.spans_zero() {
                ZERO
            } else {
                GRID
            };
            fig.line(vec![(x, y), (x_right, y)], colour, 1.0);
            fig.line(vec![(x - 5.0, y), (x, y)], AXIS, 1.0);
            fig.text(x - 7.0, y + 4.0, 11.0, self.label(t), Anchor::End);
        }
        fig.line(vec![(x, self.from), (x, self.to)], AXIS, 1.0);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::draw::figure::Mark;

    #[test]
    fn values_map_linearly_and_land_on_their_ticks() {
        // An upward y axis: 0 at pixel 200, 90 at pixel 20 (linear map worked by hand:
        // 40 deg is 40/90 of the way up, 200 - 180 * 40/90 = 120).
        let a = Axis::new(0.0, 90.0, 200.0, 20.0, 5);
        assert_eq!(a.ticks(), &[0.0, 20.0, 40.0, 60.0, 80.0]);
        assert_eq!(a.at(40.0), 120.0);
        let mut fig = Figure::new(300, 220);
        a.draw_vertical(&mut fig, 50.0, 280.0);
        // The tick mark labelled "40" is at the row a value of 40 maps to.
        let label_y = fig.marks.iter().find_map(|m| match m {
            Mark::Text { text, y, .. } if text == "40" => Some(*y - 4.0),
            _ => None,
        });
        assert_eq!(label_y, Some(a.at(40.0)));
        let tick = fig.marks.iter().any(|m| {
            matches!(m, Mark::Line { points, .. }
                if points == &vec![(45.0, 120.0), (50.0, 120.0)])
        });
        assert!(tick, "a tick mark at 40");
    }

    #[test]
    fn rounded_axes_end_on_whole_steps() {
        // 0.13 .. 3.49 ms with about 4 intervals: step 1 (1-2-5 rule by hand), so 0 .. 4.
        let a = Axis::rounded(0.13, 3.49, 0.0, 100.0, 4);
        assert_eq!(a.interval(), (0.0, 4.0));
        assert_eq!(a.ticks(), &[0.0, 1.0, 2.0, 3.0, 4.0]);
        // Stand-off -1.15 .. 1.27 m: step 1, so -2 .. 2 with a zero line.
        let s = Axis::rounded(-1.15, 1.27, 0.0, 100.0, 4);
        assert_eq!(s.interval(), (-2.0, 2.0));
        assert!(s.spans_zero());
        // A constant value still gets an interval around it.
        assert_eq!(Axis::rounded(5.0, 5.0, 0.0, 1.0, 4).interval(), (4.0, 6.0));
    }
}
