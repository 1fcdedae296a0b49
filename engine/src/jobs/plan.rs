//! The drilling-azimuth scan (`PlanJob`): candidate laterals in every direction (0 to < 360
//! degrees every `step`) from the landing point (heel, by default the pad), since the two
//! directions from a pad reach different rock; each judged by the corridor the stages job
//! uses ([`super::stages`]) and scored against the fast azimuth with an interval from a
//! bootstrap over stretches of its corridor and its bins' measurement noise
//! ([`score_interval`]). When the best candidate's interval does not clear the worst's, or
//! does not clear the score of randomly oriented fast azimuths ([`RANDOM_SCORE`]), or its bins'
//! median signal to noise ratio is below [`MIN_MEDIAN_SNR`] (magnitudes indistinguishable from
//! noise), or the fast azimuths within reach share no orientation tile by tile (a Rayleigh test
//! at [`MAX_COHERENCE_P`]: the best of many candidates over a patchy field always looks good),
//! the scan says "no preferred azimuth" rather than naming a best. Writes the score table, a polar chart and the best and worst
//! candidates as lines, all staged and committed together.

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
use crate::stats::circular::{axial_angle, rayleigh_p};
use crate::wells::corridor::{median_snr, score_interval, snr_weight, ScoreInterval};
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
    /// Pad (surface location), CRS units.
    pub pad: (f64, f64),
    /// Landing point (heel) the laterals start from, CRS units; the pad when `None`.
    pub heel: Option<(f64, f64)>,
    /// Bootstrap draws per candidate for its score interval.
    pub draws: usize,
    /// Lateral length, CRS units.
    pub lateral: f64,
    /// Azimuth step, degrees (candidates 0 to < 360).
    pub step: f64,
    /// Corridor half width each side of the lateral, metres.
    pub half_width: f64,
    /// Fewest fitted bins in a corridor without a flag.
    pub min_bins: usize,
    /// Output folder.
    pub out_dir: PathBuf,
}

/// Level of the candidates' score intervals.
pub const SCORE_LEVEL: f64 = 0.9;
/// The score of a lateral across randomly oriented fast azimuths (the mean of sin^2): a
/// preferred azimuth must score clearly above it.
pub const RANDOM_SCORE: f64 = 0.5;
/// Largest Rayleigh p-value of the regional coherence test for a preferred azimuth.
pub const MAX_COHERENCE_P: f64 = 0.01;

/// Whether the fast azimuths within reach of the heel share an orientation, tile by tile.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Coherence {
    /// Mean resultant length (0..1) of the tiles' mean doubled fast-azimuth vectors.
    pub resultant: f64,
    /// Tiles with fitted bins.
    pub tiles: usize,
    /// Rayleigh p-value of uniformity over the tiles (Zar's approximation).
    pub p: f64,
}

/// The regional coherence of the fast azimuths within `radius` of `heel`: bins (weighted by
/// squared signal to noise ratio, capped as in the drilling score) are pooled into square
/// tiles `tile` wide, each tile gives one mean doubled-angle vector (neighbouring bins are
/// alike, so a tile, not a bin, is a unit), and the Rayleigh test (Mardia & Jupp 2000, 6.3.1)
/// asks whether the tiles share an orientation. A field whose fast azimuth changes at random
/// from patch to patch has no preferred drilling azimuth, however well each bin is measured.
fn regional_coherence(
    anisotropy: &AnisotropyRaster,
    heel: (f64, f64),
    radius: f64,
    tile: f64,
) -> Coherence {
    let g = &anisotropy.geometry;
    let mut tiles: std::collections::BTreeMap<(i64, i64), (f64, f64, f64)> =
        std::collections::BTreeMap::new();
    for r in 0..g.rows {
        for c in 0..g.cols {
            let (x, y) = g.cell_centre(c, r);
            let (m, az, se) = (
                anisotropy.magnitude[(r, c)],
                anisotropy.azimuth_fast[(r, c)],
                anisotropy.magnitude_stderr[(r, c)],
            );
            if (x - heel.0).hypot(y - heel.1) > radius || !(m.is_finite() && az.is_finite()) {
                continue;
            }
            let w = snr_weight(m, se);
            let (s2, c2) = (2.0 * az).to_radians().sin_cos();
            let key = (
                ((x - heel.0) / tile).floor() as i64,
                ((y - heel.1) / tile).floor() as i64,
            );
            let t = tiles.entry(key).or_insert((0.0, 0.0, 0.0));
            *t = (t.0 + w * s2, t.1 + w * c2, t.2 + w);
        }
    }
    let vectors: Vec<(f64, f64)> = tiles
        .values()
        .filter(|t| t.2 > 0.0)
        .map(|t| (t.0 / t.2, t.1 / t.2))
        .collect();
    let n = vectors.len();
    if n == 0 {
        return Coherence {
            resultant: f64::NAN,
            tiles: 0,
            p: 1.0,
        };
    }
    let (s, c) = vectors
        .iter()
        .fold((0.0, 0.0), |(s, c), v| (s + v.0, c + v.1));
    let resultant = s.hypot(c) / n as f64;
    Coherence {
        resultant,
        tiles: n,
        p: rayleigh_p(n as f64, resultant),
    }
}

/// Least median signal to noise ratio of the best candidate's bins for a preferred azimuth
/// (the anisotropy job's default for drawing a vector).
pub const MIN_MEDIAN_SNR: f64 = 2.0;
/// Seed of every candidate's draws (common random numbers: candidates are compared on the
/// same draws).
const SCORE_SEED: u64 = 0x5CA9;
/// Default bootstrap draws per candidate.
pub const SCORE_DRAWS: usize = 400;

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
            heel: None,
            draws: SCORE_DRAWS,
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
        let n = (360.0 / self.step).round() as usize;
        let candidates: Vec<Candidate> = (0..n)
            .map(|k| {
                let azimuth = k as f64 * self.step;
                let line = self.lateral_line(azimuth);
                let c = Corridor::evaluate(&line, rule, &anisotropy, attributes.as_ref());
                // Stretches one corridor width long are the bootstrap's units.
                let score = score_interval(
                    &c.bins,
                    azimuth,
                    SCORE_LEVEL,
                    self.draws,
                    SCORE_SEED,
                    rule.width(),
                )
                .unwrap_or(ScoreInterval {
                    score: f64::NAN,
                    low: f64::NAN,
                    high: f64::NAN,
                });
                Candidate {
                    azimuth,
                    snr: median_snr(&c.bins),
                    score: score.score,
                    interval: (score.low, score.high),
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
        // Ties go to the smallest azimuth (the first in scan order).
        let scored = || candidates.iter().filter(|c| c.score.is_finite());
        let best = scored().reduce(|a, b| if b.score > a.score { b } else { a });
        let worst = scored().reduce(|a, b| if b.score < a.score { b } else { a });
        let (Some(best), Some(worst)) = (best, worst) else {
            return Err(FlexureError::input(
                &anisotropy.path,
                "every bin the candidate laterals cross has zero magnitude (no anisotropy to score against): check the anisotropy grid or move --pad",
            ));
        };
        let heel = self.heel.unwrap_or(self.pad);
        let coherence = regional_coherence(
            &anisotropy,
            heel,
            self.lateral + rule.width() / 2.0,
            rule.width(),
        );
        let preferred = best.interval.0 > worst.interval.1
            && best.interval.0 > RANDOM_SCORE
            && best.snr >= MIN_MEDIAN_SNR
            && coherence.p < MAX_COHERENCE_P;
        let good: Vec<f64> = candidates
            .iter()
            .filter(|c| c.interval.1 >= best.interval.0)
            .map(|c| c.azimuth)
            .collect();
        prepare_output_dir(&self.out_dir)?;
        let table = self.out_dir.join("plan.csv");
        let text = plan_table(&candidates).map_err(|e| FlexureError::write(&table, e))?;
        let mut staged = vec![stage_bytes(&table, text.as_bytes())?];
        staged.extend(stage_figure(
            &self.out_dir.join("plan_scores"),
            &polar_chart(&candidates, best, preferred),
        )?);
        staged.extend(stage_candidates(
            &self.out_dir,
            &anisotropy.geometry,
            &[("best", best), ("worst", worst)],
        )?);
        commit_all(staged)?;
        Ok(PlanReport {
            preferred,
            best_azimuth: best.azimuth,
            best_score: best.score,
            best_interval: best.interval,
            best_snr: best.snr,
            fast_azimuth: best.corridor.stats.fast_azimuth,
            good_ranges: circular_ranges(&good, self.step),
            worst_azimuth: worst.azimuth,
            worst_interval: worst.interval,
            heel,
            coherence,
            out_dir: self.out_dir.clone(),
        })
    }

    /// The lateral from the heel along `azimuth`.
    fn lateral_line(&self, azimuth: f64) -> Vec<(f64, f64)> {
        let heel = self.heel.unwrap_or(self.pad);
        let (s, c) = azimuth.to_radians().sin_cos();
        vec![heel, (heel.0 + self.lateral * s, heel.1 + self.lateral * c)]
    }
}

struct Candidate {
    azimuth: f64,
    score: f64,
    /// (low, high) of the score interval.
    interval: (f64, f64),
    /// Median signal to noise ratio of the corridor's bins.
    snr: f64,
    line: Vec<(f64, f64)>,
    corridor: Corridor,
}

fn plan_table(candidates: &[Candidate]) -> std::result::Result<String, String> {
    corridor_table(
        &["azimuth", "score", "score_low", "score_high", "median_snr"],
        candidates.iter().map(|c| {
            (
                vec![
                    number(c.azimuth),
                    number(c.score),
                    number(c.interval.0),
                    number(c.interval.1),
                    number(c.snr),
                ],
                &c.corridor,
            )
        }),
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
        ("score_low", FieldKind::Real),
        ("score_high", FieldKind::Real),
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
                Property::Number(c.interval.0),
                Property::Number(c.interval.1),
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

/// Scores on a polar chart: radius linear in the score (0..1) at each azimuth drilled from the
/// heel (the line) with its interval (the shaded band between its low and high ends),
/// rings at round scores (1-2-5 steps) labelled beside the fast axis (where scores are least),
/// spokes every 30 degrees labelled in degrees from grid north, the best candidate (black, when
/// there is a preferred azimuth) and the mean fast azimuth along it (orange).
fn polar_chart(candidates: &[Candidate], best: &Candidate, preferred: bool) -> Figure {
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
    let outline = |value: &dyn Fn(&Candidate) -> f64| -> Vec<(f32, f32)> {
        candidates
            .iter()
            .map(|c| {
                let v = value(c);
                let v = if v.is_finite() { v } else { 0.0 };
                polar(cx, cy, r * v as f32, c.azimuth)
            })
            .collect()
    };
    // The interval as a band between the low and high outlines (outer ring forward, inner
    // ring back: one polygon whose non-zero fill is the band).
    let mut band = outline(&|c| c.interval.1);
    band.extend(band.first().copied());
    let mut inner = outline(&|c| c.interval.0);
    inner.extend(inner.first().copied());
    inner.reverse();
    band.extend(inner);
    fig.marks.push(Mark::Polygon {
        points: band,
        fill: [0x9e, 0xca, 0xe1],
        stroke: None,
    });
    let mut score = outline(&|c| c.score);
    score.extend(score.first().copied());
    fig.line(score, [0x21, 0x71, 0xb5], 1.5);
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
    if preferred {
        fig.line(
            vec![(cx, cy), polar(cx, cy, r, best.azimuth)],
            WELL_AXIS,
            2.5,
        );
    }
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
            if preferred {
                format!(
                    "best {:.0} deg from the heel (score {:.2}, black); mean fast azimuth {:.1} deg (orange)",
                    best.azimuth, best.score, fast
                )
            } else {
                format!("no preferred azimuth: the intervals overlap; mean fast azimuth {fast:.1} deg (orange)")
            },
            12.0,
        ),
        (
            format!(
                "line: score (0 to 1) of the lateral drilled that way from the heel; shaded band: its {:.0}% interval",
                100.0 * SCORE_LEVEL
            ),
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

/// The runs of neighbouring azimuths in `good` (sampled every `step` over 0..360), each as
/// (from, to) clockwise; a run through north wraps (e.g. (350, 10)); the whole circle is
/// (0, 360).
fn circular_ranges(good: &[f64], step: f64) -> Vec<(f64, f64)> {
    let mut sorted = good.to_vec();
    sorted.sort_by(f64::total_cmp);
    if sorted.is_empty() {
        return Vec::new();
    }
    let n_all = (360.0 / step).round() as usize;
    if sorted.len() >= n_all {
        return vec![(0.0, 360.0)];
    }
    let adjacent = |a: f64, b: f64| (b - a - step).abs() < step * 0.5;
    let mut runs: Vec<(f64, f64)> = Vec::new();
    for &az in &sorted {
        match runs.last_mut() {
            Some(run) if adjacent(run.1, az) => run.1 = az,
            _ => runs.push((az, az)),
        }
    }
    if runs.len() > 1 {
        let (first, last) = (runs[0], runs[runs.len() - 1]);
        if adjacent(last.1, first.0 + 360.0) {
            runs[0] = (last.0, first.1);
            runs.pop();
        }
    }
    runs.sort_by(|a, b| a.0.total_cmp(&b.0));
    runs
}

/// What the drilling-azimuth scan found.
#[derive(Clone, Debug)]
pub struct PlanReport {
    /// Whether the best candidate's score interval clears the worst's and [`RANDOM_SCORE`],
    /// its bins' median signal to noise ratio reaches [`MIN_MEDIAN_SNR`] and the region is
    /// coherent ([`MAX_COHERENCE_P`]); otherwise there is no preferred azimuth (isotropic,
    /// noisy, too varied or too little data).
    pub preferred: bool,
    /// Best candidate azimuth from the heel, degrees from grid north.
    pub best_azimuth: f64,
    /// Its score, 0..1.
    pub best_score: f64,
    /// Its score interval.
    pub best_interval: (f64, f64),
    /// Median signal to noise ratio of its bins.
    pub best_snr: f64,
    /// Mean fast azimuth along the best candidate.
    pub fast_azimuth: f64,
    /// Azimuths whose interval reaches the best's low end, as clockwise (from, to) runs.
    pub good_ranges: Vec<(f64, f64)>,
    /// Worst candidate azimuth.
    pub worst_azimuth: f64,
    /// Its score interval.
    pub worst_interval: (f64, f64),
    /// The landing point the laterals start from.
    pub heel: (f64, f64),
    /// Whether the fast azimuths within reach share an orientation.
    pub coherence: Coherence,
    /// Output folder.
    pub out_dir: PathBuf,
}

impl fmt::Display for PlanReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let level = 100.0 * SCORE_LEVEL;
        writeln!(
            f,
            "laterals from the heel at ({:.1}, {:.1}) in every direction",
            self.heel.0, self.heel.1
        )?;
        let c = &self.coherence;
        writeln!(
            f,
            "regional coherence of the fast azimuths within reach: resultant {:.2} over {} tiles, Rayleigh p {:.1e}{}",
            c.resultant,
            c.tiles,
            c.p,
            if c.p < MAX_COHERENCE_P { "" } else { " (no shared orientation)" }
        )?;
        if self.preferred {
            writeln!(f, "best lateral azimuth {:.1} deg from grid north (score {:.3}, {level:.0}% interval {:.3} .. {:.3}; mean fast azimuth {:.1}, angle {:.1} deg)", self.best_azimuth, self.best_score, self.best_interval.0, self.best_interval.1, self.fast_azimuth, axial_angle(self.best_azimuth, self.fast_azimuth))?;
            let ranges: Vec<String> = self
                .good_ranges
                .iter()
                .map(|(a, b)| format!("{a:.0} .. {b:.0}"))
                .collect();
            writeln!(
                f,
                "azimuths as good within the intervals: {} deg; worst {:.0} deg (score interval {:.3} .. {:.3})",
                ranges.join(", "),
                self.worst_azimuth,
                self.worst_interval.0,
                self.worst_interval.1
            )?;
        } else {
            if self.best_snr.is_nan() {
                writeln!(f, "no preferred azimuth: the anisotropy raster gives no magnitude standard errors, so the signal to noise ratio of its bins is unknown; rerun the anisotropy fit (it writes magnitude_stderr)")?;
            }
            writeln!(f, "no preferred azimuth: the best candidate ({:.0} deg, score interval {:.3} .. {:.3}, median signal to noise {:.1}) does not clear the worst ({:.0} deg, {:.3} .. {:.3}) and {RANDOM_SCORE} (random orientation) with a median signal to noise of at least {MIN_MEDIAN_SNR}; the anisotropy here is too weak, too noisy or too varied to choose a direction", self.best_azimuth, self.best_interval.0, self.best_interval.1, self.best_snr, self.worst_azimuth, self.worst_interval.0, self.worst_interval.1)?;
        }
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
    use super::circular_ranges;

    #[test]
    fn ranges_of_good_azimuths_wrap_through_north() {
        assert_eq!(
            circular_ranges(&[350.0, 355.0, 0.0, 5.0, 170.0, 175.0], 5.0),
            vec![(170.0, 175.0), (350.0, 5.0)]
        );
        assert_eq!(
            circular_ranges(&[90.0, 95.0, 100.0], 5.0),
            vec![(90.0, 100.0)]
        );
        assert_eq!(circular_ranges(&[90.0], 5.0), vec![(90.0, 90.0)]);
    }
}
