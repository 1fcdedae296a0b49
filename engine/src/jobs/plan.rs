//! The drilling-azimuth scan (`PlanJob`): candidate laterals from a pad every `step` degrees,
//! each judged by the corridor the stages job uses ([`super::stages`]), scored against the
//! fast azimuth; writes the score table, a polar chart and the best and worst candidates as
//! lines, all staged and committed together.

use super::stages::{
    corridor_table, number, Attributes, Corridor, CorridorRule, DEFAULT_HALF_WIDTH, MIN_BINS,
    WELL_CAUTION,
};
use super::{stage_bytes, stage_figure, AnisotropyRaster};
use crate::draw::axis::GRID;
use crate::draw::figure::{polar, Anchor, Figure, Mark, MEAN_AXIS, WELL_AXIS};
use crate::draw::ticks::{nice_ticks, tick_label};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::vector::{
    stage_both_formats, FieldKind, GeometryKind, Layer, Property, VectorFeature,
};
use crate::io::{commit_all, prepare_output_dir, StagedFile};
use crate::stats::circular::axial_angle;
use crate::wells::corridor::perpendicularity_score;
use std::fmt;
use std::path::{Path, PathBuf};

/// Options of the drilling-azimuth scan.
#[derive(Clone, Debug)]
pub struct PlanJob {
    /// `anisotropy.tif` or its folder.
    pub anisotropy: PathBuf,
    /// Curvature raster, or its folder with `window`.
    pub curvature: Option<PathBuf>,
    /// Window choosing the curvature file in a folder.
    pub window: Option<usize>,
    /// Pad (heel) position, CRS units.
    pub pad: (f64, f64),
    /// Lateral length, CRS units.
    pub lateral: f64,
    /// Azimuth step, degrees (candidates 0 to < 180).
    pub step: f64,
    /// Corridor half width each side of the lateral, metres.
    pub half_width: f64,
    /// Fewest fitted bins in a corridor without a flag.
    pub min_bins: usize,
    /// Output folder.
    pub out_dir: PathBuf,
}

/// Share of the best score that still counts as a good azimuth.
const GOOD_SHARE: f64 = 0.9;

impl PlanJob {
    /// A scan with 5-degree steps and a 150 m half width.
    pub fn new(
        anisotropy: impl Into<PathBuf>,
        pad: (f64, f64),
        lateral: f64,
        out_dir: impl Into<PathBuf>,
    ) -> Self {
        Self {
            anisotropy: anisotropy.into(),
            curvature: None,
            window: None,
            pad,
            lateral,
            step: 5.0,
            half_width: DEFAULT_HALF_WIDTH,
            min_bins: MIN_BINS,
            out_dir: out_dir.into(),
        }
    }

    /// Runs the scan.
    pub fn run(&self) -> Result<PlanReport> {
        let rule = CorridorRule::new(self.half_width, self.min_bins)?;
        if !(self.lateral.is_finite() && self.lateral > 0.0) {
            return Err(FlexureError::Parameter(format!(
                "--lateral {} must be a positive length",
                self.lateral
            )));
        }
        if !(self.step.is_finite() && self.step > 0.0 && self.step <= 90.0) {
            return Err(FlexureError::Parameter(format!(
                "--step {} must be between 0 and 90 degrees",
                self.step
            )));
        }
        let anisotropy = AnisotropyRaster::read(&self.anisotropy)?;
        let rule = rule.on_grid(anisotropy.geometry.metres_per_unit);
        let attributes = self
            .curvature
            .as_deref()
            .map(|p| Attributes::read(p, self.window))
            .transpose()?;
        let n = (180.0 / self.step).round() as usize;
        let candidates: Vec<Candidate> = (0..n)
            .map(|k| {
                let azimuth = k as f64 * self.step;
                let line = self.lateral_line(azimuth);
                let c = Corridor::evaluate(&line, rule, &anisotropy, attributes.as_ref());
                Candidate {
                    azimuth,
                    score: perpendicularity_score(&c.bins, azimuth),
                    line,
                    corridor: c,
                }
            })
            .collect();
        if candidates.iter().all(|c| c.corridor.bins.is_empty()) {
            return Err(FlexureError::input(
                &anisotropy.path,
                "no candidate lateral from the pad crosses a fitted bin: check --pad and --lateral",
            ));
        }
        let scored = |c: &&Candidate| c.score.is_finite();
        let by_score = |a: &&Candidate, b: &&Candidate| a.score.total_cmp(&b.score);
        let (Some(best), Some(worst)) = (
            candidates.iter().filter(scored).max_by(by_score),
            candidates.iter().filter(scored).min_by(by_score),
        ) else {
            return Err(FlexureError::input(
                &anisotropy.path,
                "every bin the candidate laterals cross has zero magnitude (no anisotropy to score against): check the anisotropy grid or move --pad",
            ));
        };
        let good: Vec<f64> = candidates
            .iter()
            .filter(|c| c.score >= GOOD_SHARE * best.score)
            .map(|c| c.azimuth)
            .collect();
        prepare_output_dir(&self.out_dir)?;
        let table = self.out_dir.join("plan.csv");
        let text = plan_table(&candidates).map_err(|e| FlexureError::write(&table, e))?;
        let mut staged = vec![stage_bytes(&table, text.as_bytes())?];
        staged.extend(stage_figure(
            &self.out_dir.join("plan_scores"),
            &polar_chart(&candidates, best),
        )?);
        staged.extend(stage_candidates(
            &self.out_dir,
            &anisotropy.geometry,
            &[("best", best), ("worst", worst)],
        )?);
        commit_all(staged)?;
        Ok(PlanReport {
            best_azimuth: best.azimuth,
            best_score: best.score,
            fast_azimuth: best.corridor.stats.fast_azimuth,
            good_range: axial_range(&good, self.step),
            worst_azimuth: worst.azimuth,
            out_dir: self.out_dir.clone(),
        })
    }

    fn lateral_line(&self, azimuth: f64) -> Vec<(f64, f64)> {
        let (s, c) = azimuth.to_radians().sin_cos();
        vec![
            self.pad,
            (self.pad.0 + self.lateral * s, self.pad.1 + self.lateral * c),
        ]
    }
}

struct Candidate {
    azimuth: f64,
    score: f64,
    line: Vec<(f64, f64)>,
    corridor: Corridor,
}

fn plan_table(candidates: &[Candidate]) -> std::result::Result<String, String> {
    corridor_table(
        &["azimuth", "score"],
        candidates
            .iter()
            .map(|c| (vec![number(c.azimuth), number(c.score)], &c.corridor)),
    )
}

/// Best and worst candidate laterals as lines, GeoPackage and GeoJSON.
fn stage_candidates(
    dir: &Path,
    g: &GridGeometry,
    picks: &[(&str, &Candidate)],
) -> Result<Vec<StagedFile>> {
    let fields = [
        ("pick", FieldKind::Text),
        ("azimuth", FieldKind::Real),
        ("score", FieldKind::Real),
        ("fast_azimuth", FieldKind::Real),
        ("angle_to_well", FieldKind::Real),
        ("n_bins", FieldKind::Integer),
    ];
    let features: Vec<VectorFeature> = picks
        .iter()
        .map(|(pick, c)| VectorFeature {
            points: c.line.clone(),
            values: vec![
                Property::Text(pick.to_string()),
                Property::Number(c.azimuth),
                Property::Number(c.score),
                Property::Number(c.corridor.stats.fast_azimuth),
                Property::Number(c.corridor.stats.angle_to_well),
                Property::Number(c.corridor.stats.n_bins as f64),
            ],
        })
        .collect();
    let layer = Layer {
        name: "plan_candidates",
        kind: GeometryKind::Line,
        fields: &fields,
        features: &features,
    };
    stage_both_formats(dir, &g.crs_wkt, &layer)
}

/// Azimuth step of the labelled spokes of the polar chart, degrees (the usual compass-rose
/// division, common practice).
const SPOKE_STEP: f64 = 30.0;

/// Scores on a polar chart: radius linear in the score (0..1) at each azimuth and its opposite,
/// rings at round scores (1-2-5 steps) labelled beside the fast axis (where scores are least),
/// spokes every 30 degrees labelled in degrees from grid north, the best candidate (black) and
/// the mean fast azimuth along it (orange).
fn polar_chart(candidates: &[Candidate], best: &Candidate) -> Figure {
    let mut fig = Figure::new(540, 640);
    let (cx, cy, r) = (270.0f32, 290.0f32, 190.0f32);
    fig.text(
        cx,
        28.0,
        16.0,
        "Drilling-azimuth score (1 = perpendicular to fast)",
        Anchor::Middle,
    );
    for az in (0..12).map(|k| k as f64 * SPOKE_STEP) {
        fig.line(vec![(cx, cy), polar(cx, cy, r, az)], GRID, 1.0);
        let (x, y) = polar(cx, cy, r + 20.0, az);
        let label = match az as u32 {
            0 => "N".to_string(),
            90 => "E".to_string(),
            180 => "S".to_string(),
            270 => "W".to_string(),
            _ => format!("{}°", tick_label(az, SPOKE_STEP)),
        };
        fig.text(x, y + 4.0, 12.0, label, Anchor::Middle);
    }
    let rings = nice_ticks(0.0, 1.0, 5);
    let mut points: Vec<(f32, f32)> = Vec::new();
    for offset in [0.0, 180.0] {
        for c in candidates {
            let s = if c.score.is_finite() { c.score } else { 0.0 };
            points.push(polar(cx, cy, r * s as f32, c.azimuth + offset));
        }
    }
    fig.marks.push(Mark::Polygon {
        points,
        fill: [0xc6, 0xdb, 0xef],
        stroke: Some([0x21, 0x71, 0xb5]),
    });
    for &ring in rings.iter().filter(|&&v| v > 0.0) {
        fig.line(
            (0..=72)
                .map(|k| polar(cx, cy, r * ring as f32, 5.0 * k as f64))
                .collect(),
            [0xbb, 0xbb, 0xbb],
            1.0,
        );
    }
    let fast = best.corridor.stats.fast_azimuth;
    fig.line(
        vec![
            polar(cx, cy, r, best.azimuth),
            polar(cx, cy, r, best.azimuth + 180.0),
        ],
        WELL_AXIS,
        2.5,
    );
    if fast.is_finite() {
        fig.line(
            vec![polar(cx, cy, r, fast), polar(cx, cy, r, fast + 180.0)],
            MEAN_AXIS,
            2.0,
        );
    }
    // Ring labels just clockwise of the fast axis, where the scores are smallest.
    let quiet = if fast.is_finite() {
        fast + 12.0
    } else {
        best.azimuth + 90.0
    };
    let step = rings.get(1).map_or(0.2, |v| v - rings[0]);
    for &ring in rings.iter().filter(|&&v| v > 0.0) {
        let (x, y) = polar(cx, cy, r * ring as f32, quiet);
        fig.text(x, y + 4.0, 11.0, tick_label(ring, step), Anchor::Middle);
    }
    let mut y = 530.0;
    for (text, size) in [
        (
            format!(
                "best {:.0} deg (score {:.2}, black); mean fast azimuth {:.1} deg (orange)",
                best.azimuth, best.score, fast
            ),
            12.0,
        ),
        (
            "rings: score (dimensionless, 0 to 1); azimuths in degrees from grid north".to_string(),
            12.0,
        ),
        (
            "Anisotropy is a proxy for stress and fractures, not a measurement of them."
                .to_string(),
            11.0,
        ),
        (
            "Decisions belong to licensed engineers and geoscientists under local regulations."
                .to_string(),
            11.0,
        ),
    ] {
        fig.text(20.0, y, size, text, Anchor::Start);
        y += 22.0;
    }
    fig
}

/// Smallest axial interval (from, to) holding every azimuth of `good` (sampled every `step`).
fn axial_range(good: &[f64], step: f64) -> (f64, f64) {
    let mut sorted = good.to_vec();
    sorted.sort_by(f64::total_cmp);
    let Some(&first) = sorted.first() else {
        return (f64::NAN, f64::NAN);
    };
    // The largest gap between neighbours (cyclically) is outside the range.
    let mut best_gap = (
        sorted[0] + 180.0 - sorted[sorted.len() - 1],
        sorted.len() - 1,
    );
    for k in 1..sorted.len() {
        let gap = sorted[k] - sorted[k - 1];
        if gap > best_gap.0 {
            best_gap = (gap, k - 1);
        }
    }
    if best_gap.0 <= step * 1.5 && sorted.len() > 1 {
        return (0.0, 180.0);
    }
    let end = sorted[best_gap.1];
    let start = sorted[(best_gap.1 + 1) % sorted.len()];
    if sorted.len() == 1 {
        (first, first)
    } else {
        (start, end)
    }
}

/// What the drilling-azimuth scan found.
#[derive(Clone, Debug)]
pub struct PlanReport {
    /// Best candidate azimuth, degrees from grid north.
    pub best_azimuth: f64,
    /// Its score, 0..1.
    pub best_score: f64,
    /// Mean fast azimuth along the best candidate.
    pub fast_azimuth: f64,
    /// Azimuths within 10% of the best score, (from, to) clockwise (may wrap through 0).
    pub good_range: (f64, f64),
    /// Worst candidate azimuth.
    pub worst_azimuth: f64,
    /// Output folder.
    pub out_dir: PathBuf,
}

impl fmt::Display for PlanReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "best lateral azimuth {:.1} deg from grid north (score {:.3}; mean fast azimuth {:.1}, angle {:.1} deg)", self.best_azimuth, self.best_score, self.fast_azimuth, axial_angle(self.best_azimuth, self.fast_azimuth))?;
        writeln!(
            f,
            "azimuths within 10% of the best score: {:.0} .. {:.0} deg; worst {:.0} deg",
            self.good_range.0, self.good_range.1, self.worst_azimuth
        )?;
        writeln!(
            f,
            "wrote plan.csv, plan_scores.svg/png and plan_candidates.gpkg/geojson in {}",
            self.out_dir.display()
        )?;
        writeln!(f, "{WELL_CAUTION}")
    }
}

#[cfg(test)]
mod tests {
    use super::axial_range;

    #[test]
    fn axial_range_wraps_through_north() {
        assert_eq!(axial_range(&[170.0, 175.0, 0.0, 5.0], 5.0), (170.0, 5.0));
        assert_eq!(axial_range(&[90.0, 95.0, 100.0], 5.0), (90.0, 100.0));
        assert_eq!(axial_range(&[90.0], 5.0), (90.0, 90.0));
    }
}
