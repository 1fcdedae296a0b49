//! Wells and frac stages: deviation surveys to plan-view paths by the minimum curvature method
//! (Sawaryn & Thorogood 2005, SPE Drill. & Compl. 20(1):24, SPE-84246), positions along
//! measured depth, stage corridors (the path between two measured depths buffered by a half
//! width on each side, flat ends), point-in-polygon membership, and the small CSV tables wells
//! and stages come in. Pure computation; lengths in CRS units, azimuths clockwise from grid
//! north, x grid east, y grid north, TVD positive down.

use std::path::Path;

use crate::error::{FlexureError, Result};

/// One point of a well path.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Station {
    /// Measured depth along the hole.
    pub md: f64,
    /// Grid east.
    pub x: f64,
    /// Grid north.
    pub y: f64,
    /// True vertical depth (NaN when not known).
    pub tvd: f64,
}

/// One deviation-survey row: measured depth, inclination from vertical and azimuth from grid
/// north, degrees.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SurveyRow {
    /// Measured depth.
    pub md: f64,
    /// Inclination, degrees from vertical (0..180).
    pub inc: f64,
    /// Azimuth, degrees clockwise from grid north (0..360).
    pub azi: f64,
}

/// Displacement `(dN, dE, dTVD)` between two survey stations and the dogleg (degrees) by the
/// minimum curvature method (REFERENCES.md section 7).
pub fn minimum_curvature_step(a: &SurveyRow, b: &SurveyRow) -> (f64, f64, f64, f64) {
    let (i1, i2) = (a.inc.to_radians(), b.inc.to_radians());
    let (a1, a2) = (a.azi.to_radians(), b.azi.to_radians());
    let half =
        ((i2 - i1) / 2.0).sin().powi(2) + i1.sin() * i2.sin() * ((a2 - a1) / 2.0).sin().powi(2);
    let dogleg = 2.0 * half.sqrt().min(1.0).asin();
    let rf = if dogleg < 1e-7 {
        1.0 + dogleg * dogleg / 12.0
    } else {
        2.0 / dogleg * (dogleg / 2.0).tan()
    };
    let f = 0.5 * (b.md - a.md) * rf;
    (
        f * (i1.sin() * a1.cos() + i2.sin() * a2.cos()),
        f * (i1.sin() * a1.sin() + i2.sin() * a2.sin()),
        f * (i1.cos() + i2.cos()),
        dogleg.to_degrees(),
    )
}

/// The stations of a survey starting at `wellhead` (x, y) with the first row at TVD `tvd0`.
pub fn survey_path(rows: &[SurveyRow], wellhead: (f64, f64), tvd0: f64) -> Vec<Station> {
    let mut stations = Vec::with_capacity(rows.len());
    let (mut x, mut y, mut tvd) = (wellhead.0, wellhead.1, tvd0);
    for (k, row) in rows.iter().enumerate() {
        if k > 0 {
            let (dn, de, dv, _) = minimum_curvature_step(&rows[k - 1], row);
            x += de;
            y += dn;
            tvd += dv;
        }
        stations.push(Station {
            md: row.md,
            x,
            y,
            tvd,
        });
    }
    stations
}

/// A well: its name and its path ordered by increasing measured depth.
#[derive(Clone, Debug, PartialEq)]
pub struct Well {
    /// Name (from the file name or the well list).
    pub name: String,
    /// Stations, md strictly increasing.
    pub stations: Vec<Station>,
}

impl Well {
    /// Measured-depth range of the path.
    pub fn md_range(&self) -> (f64, f64) {
        (
            self.stations.first().map_or(f64::NAN, |s| s.md),
            self.stations.last().map_or(f64::NAN, |s| s.md),
        )
    }

    /// Plan position at measured depth `md` (linear between stations); `None` outside the path.
    pub fn position(&self, md: f64) -> Option<(f64, f64)> {
        let k = self
            .stations
            .windows(2)
            .position(|w| md >= w[0].md && md <= w[1].md)?;
        let (a, b) = (&self.stations[k], &self.stations[k + 1]);
        let t = (md - a.md) / (b.md - a.md);
        Some((a.x + t * (b.x - a.x), a.y + t * (b.y - a.y)))
    }

    /// Plan path from `md_top` to `md_base`: both ends and the stations between; `None` when
    /// the interval is not inside the path.
    pub fn interval(&self, md_top: f64, md_base: f64) -> Option<Vec<(f64, f64)>> {
        let mut points = vec![self.position(md_top)?];
        points.extend(
            self.stations
                .iter()
                .filter(|s| s.md > md_top && s.md < md_base)
                .map(|s| (s.x, s.y)),
        );
        points.push(self.position(md_base)?);
        Some(points)
    }
}

/// Axial azimuth (0..180, degrees from grid north) of a plan path from its first to its last
/// point; NaN for a path with no horizontal extent.
pub fn path_azimuth(points: &[(f64, f64)]) -> f64 {
    match (points.first(), points.last()) {
        (Some(a), Some(b)) if (b.0 - a.0).hypot(b.1 - a.1) > 0.0 => {
            (b.0 - a.0).atan2(b.1 - a.1).to_degrees().rem_euclid(180.0)
        }
        _ => f64::NAN,
    }
}

/// Corridor polygon around a plan path: each side offset by `half_width` along the local
/// normal (mitred at interior points), flat ends; closed ring, counter-clockwise or clockwise.
pub fn corridor(points: &[(f64, f64)], half_width: f64) -> Vec<(f64, f64)> {
    let pts: Vec<(f64, f64)> =
        points
            .iter()
            .copied()
            .fold(Vec::new(), |mut v: Vec<(f64, f64)>, p| {
                if v.last().is_none_or(|q| (q.0 - p.0).hypot(q.1 - p.1) > 1e-9) {
                    v.push(p);
                }
                v
            });
    if pts.len() < 2 {
        return Vec::new();
    }
    let unit = |a: (f64, f64), b: (f64, f64)| {
        let (dx, dy) = (b.0 - a.0, b.1 - a.1);
        let l = dx.hypot(dy);
        (dx / l, dy / l)
    };
    let normal_at = |k: usize| {
        let d = if k == 0 {
            unit(pts[0], pts[1])
        } else if k == pts.len() - 1 {
            unit(pts[k - 1], pts[k])
        } else {
            let (a, b) = (unit(pts[k - 1], pts[k]), unit(pts[k], pts[k + 1]));
            let (sx, sy) = (a.0 + b.0, a.1 + b.1);
            let l = sx.hypot(sy).max(1e-12);
            let m = (sx / l, sy / l);
            // Mitre: keep the offset distance from both segments.
            let cos = (m.0 * a.0 + m.1 * a.1).max(0.2);
            (m.0 / cos, m.1 / cos)
        };
        (-d.1, d.0)
    };
    let left: Vec<(f64, f64)> = (0..pts.len())
        .map(|k| {
            let n = normal_at(k);
            (pts[k].0 + half_width * n.0, pts[k].1 + half_width * n.1)
        })
        .collect();
    let mut ring = left;
    for k in (0..pts.len()).rev() {
        let n = normal_at(k);
        ring.push((pts[k].0 - half_width * n.0, pts[k].1 - half_width * n.1));
    }
    ring.push(ring[0]);
    ring
}

/// Whether `p` lies inside the ring `poly` (even-odd rule).
pub fn inside(p: (f64, f64), poly: &[(f64, f64)]) -> bool {
    let mut inside = false;
    for w in poly.windows(2) {
        let ((x1, y1), (x2, y2)) = (w[0], w[1]);
        if (y1 > p.1) != (y2 > p.1) && p.0 < x1 + (p.1 - y1) * (x2 - x1) / (y2 - y1) {
            inside = !inside;
        }
    }
    inside
}

/// A frac stage or port interval.
#[derive(Clone, Debug, PartialEq)]
pub struct Stage {
    /// Stage label.
    pub name: String,
    /// Shallower measured depth.
    pub md_top: f64,
    /// Deeper measured depth.
    pub md_base: f64,
    /// Line of the stage table it came from.
    pub line: usize,
}

/// A small CSV table: header names and rows of fields, each with its 1-based line number.
#[derive(Clone, Debug, PartialEq)]
pub struct Table {
    /// Column names, lower case, trimmed.
    pub header: Vec<String>,
    /// (line number, fields) per data row.
    pub rows: Vec<(usize, Vec<String>)>,
}

impl Table {
    /// Parses comma-separated `text` from `path` (for messages); blank lines and lines
    /// starting with `#` are skipped.
    pub fn parse(text: &str, path: &Path) -> Result<Self> {
        let mut lines = text
            .lines()
            .enumerate()
            .map(|(i, l)| (i + 1, l.trim()))
            .filter(|(_, l)| !l.is_empty() && !l.starts_with('#'));
        let Some((_, header)) = lines.next() else {
            return Err(FlexureError::input(
                path,
                "is empty: give a header line and rows",
            ));
        };
        let header: Vec<String> = header.split(',').map(|h| h.trim().to_lowercase()).collect();
        let rows: Vec<(usize, Vec<String>)> = lines
            .map(|(n, l)| (n, l.split(',').map(|f| f.trim().to_string()).collect()))
            .collect();
        if rows.is_empty() {
            return Err(FlexureError::input(path, "has a header but no rows"));
        }
        Ok(Self { header, rows })
    }

    /// Whether every column in `names` is present.
    pub fn has(&self, names: &[&str]) -> bool {
        names.iter().all(|n| self.header.iter().any(|h| h == n))
    }

    /// The numeric column `name` as `(line, value)`; errors name the file and line.
    pub fn numbers(&self, name: &str, path: &Path) -> Result<Vec<(usize, f64)>> {
        let col = self.column(name, path)?;
        self.rows
            .iter()
            .map(|(line, fields)| {
                let text = fields.get(col).map(String::as_str).unwrap_or("");
                text.parse::<f64>()
                    .ok()
                    .filter(|v| v.is_finite())
                    .map(|v| (*line, v))
                    .ok_or_else(|| {
                        FlexureError::input(
                            path,
                            format!("line {line}: {name} '{text}' is not a number"),
                        )
                    })
            })
            .collect()
    }

    /// The text column `name`.
    pub fn texts(&self, name: &str, path: &Path) -> Result<Vec<String>> {
        let col = self.column(name, path)?;
        Ok(self
            .rows
            .iter()
            .map(|(_, f)| f.get(col).cloned().unwrap_or_default())
            .collect())
    }

    fn column(&self, name: &str, path: &Path) -> Result<usize> {
        self.header.iter().position(|h| h == name).ok_or_else(|| {
            FlexureError::input(
                path,
                format!(
                    "line 1: no column '{name}' (columns: {})",
                    self.header.join(", ")
                ),
            )
        })
    }
}

/// Reads a stage table (`stage,md_top,md_base`), checking md_top < md_base.
pub fn parse_stages(text: &str, path: &Path, md_scale: f64) -> Result<Vec<Stage>> {
    let t = Table::parse(text, path)?;
    let names = t.texts("stage", path)?;
    let tops = t.numbers("md_top", path)?;
    let bases = t.numbers("md_base", path)?;
    names
        .into_iter()
        .zip(tops.into_iter().zip(bases))
        .map(|(name, ((line, top), (_, base)))| {
            if top >= base {
                return Err(FlexureError::input(
                    path,
                    format!("line {line}: md_top {top} is not above md_base {base}"),
                ));
            }
            Ok(Stage {
                name,
                md_top: top * md_scale,
                md_base: base * md_scale,
                line,
            })
        })
        .collect()
}

/// The path of a well file: a plan path (`md,x,y[,tvd]`) or a deviation survey
/// (`md,inc,azi`, needing `wellhead`); `azimuth_offset` is subtracted from survey azimuths
/// (grid convergence for true-north surveys) and `md_scale` converts measured depths to CRS
/// units. Checks md strictly increases and survey angles are in range.
pub fn parse_well(
    text: &str,
    path: &Path,
    wellhead: Option<(f64, f64)>,
    kb: f64,
    md_scale: f64,
    azimuth_offset: f64,
) -> Result<Vec<Station>> {
    let t = Table::parse(text, path)?;
    let md = t.numbers("md", path)?;
    for w in md.windows(2) {
        if w[1].1 <= w[0].1 {
            return Err(FlexureError::input(
                path,
                format!(
                    "line {}: md {} does not increase (previous {})",
                    w[1].0, w[1].1, w[0].1
                ),
            ));
        }
    }
    let scaled = |v: f64| v * md_scale;
    if t.has(&["x", "y"]) {
        let (x, y) = (t.numbers("x", path)?, t.numbers("y", path)?);
        let tvd = if t.has(&["tvd"]) {
            Some(t.numbers("tvd", path)?)
        } else {
            None
        };
        return Ok((0..md.len())
            .map(|k| Station {
                md: scaled(md[k].1),
                x: x[k].1,
                y: y[k].1,
                tvd: tvd.as_ref().map_or(f64::NAN, |t| t[k].1),
            })
            .collect());
    }
    if !t.has(&["inc", "azi"]) {
        return Err(FlexureError::input(
            path,
            format!(
                "line 1: give columns md,x,y[,tvd] (a path) or md,inc,azi (a survey); found {}",
                t.header.join(", ")
            ),
        ));
    }
    let head = wellhead
        .ok_or_else(|| FlexureError::input(path, "is a deviation survey: give --wellhead X,Y"))?;
    let (inc, azi) = (t.numbers("inc", path)?, t.numbers("azi", path)?);
    let mut rows = Vec::with_capacity(md.len());
    for k in 0..md.len() {
        let line = md[k].0;
        if !(0.0..=180.0).contains(&inc[k].1) {
            return Err(FlexureError::input(
                path,
                format!("line {line}: inclination {} is outside 0..180", inc[k].1),
            ));
        }
        if !(0.0..=360.0).contains(&azi[k].1) {
            return Err(FlexureError::input(
                path,
                format!("line {line}: azimuth {} is outside 0..360", azi[k].1),
            ));
        }
        rows.push(SurveyRow {
            md: scaled(md[k].1),
            inc: inc[k].1,
            azi: azi[k].1 - azimuth_offset,
        });
    }
    Ok(survey_path(&rows, head, kb))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn minimum_curvature_worked_example() {
        // REFERENCES.md section 7 (common drilling-reference example, recomputed [D]): 3500 ft
        // (I 15, A 20) to 3600 ft (I 25, A 45): dogleg 12.9517 deg, dN 27.218, dE 19.451,
        // dTVD 94.012 ft.
        let a = SurveyRow {
            md: 3500.0,
            inc: 15.0,
            azi: 20.0,
        };
        let b = SurveyRow {
            md: 3600.0,
            inc: 25.0,
            azi: 45.0,
        };
        let (dn, de, dv, dogleg) = minimum_curvature_step(&a, &b);
        assert!((dogleg - 12.9517).abs() < 1e-4, "{dogleg}");
        assert!(
            (dn - 27.218).abs() < 1e-3 && (de - 19.451).abs() < 1e-3,
            "{dn} {de}"
        );
        assert!((dv - 94.012).abs() < 1e-3, "{dv}");
    }

    #[test]
    fn constant_build_is_a_circular_arc_and_a_straight_hole_is_straight() {
        // A build from vertical to horizontal at constant rate along azimuth 90 is a quarter
        // circle of radius R = L / (pi/2) (circle geometry): ends at dE = R, dTVD = R.
        let length = 1000.0;
        let n = 10;
        let rows: Vec<SurveyRow> = (0..=n)
            .map(|k| SurveyRow {
                md: length * k as f64 / n as f64,
                inc: 90.0 * k as f64 / n as f64,
                azi: 90.0,
            })
            .collect();
        let path = survey_path(&rows, (100.0, 200.0), 0.0);
        let r = length / std::f64::consts::FRAC_PI_2;
        let end = path.last().unwrap();
        assert!((end.x - 100.0 - r).abs() < 1e-9 && (end.tvd - r).abs() < 1e-9);
        assert!((end.y - 200.0).abs() < 1e-9);
        let straight = survey_path(
            &[
                SurveyRow {
                    md: 0.0,
                    inc: 60.0,
                    azi: 30.0,
                },
                SurveyRow {
                    md: 100.0,
                    inc: 60.0,
                    azi: 30.0,
                },
            ],
            (0.0, 0.0),
            0.0,
        );
        let h = 100.0 * 60f64.to_radians().sin();
        assert!((straight[1].x - h * 30f64.to_radians().sin()).abs() < 1e-9);
        assert!((straight[1].tvd - 50.0).abs() < 1e-9);
    }

    #[test]
    fn corridor_area_matches_its_rectangle() {
        // A straight 300 m stage with 150 m half-width is a 300 x 300 m rectangle: on a 25 m
        // lattice of points, the count is 144 within one row (12) of points (elementary).
        let ring = corridor(&[(1000.0, 500.0), (1300.0, 500.0)], 150.0);
        let mut count = 0;
        for i in 0..100 {
            for j in 0..100 {
                let p = (12.5 + 25.0 * i as f64 + 3.0, 12.5 + 25.0 * j as f64 + 7.0);
                count += usize::from(inside(p, &ring));
            }
        }
        assert!((count as i64 - 144).abs() <= 12, "{count}");
        assert!((path_azimuth(&[(0.0, 0.0), (-10.0, 0.0)]) - 90.0).abs() < 1e-12);
    }

    #[test]
    fn feet_and_true_north_surveys_are_converted() {
        // 1000 ft = 304.8 m (international foot, exact); a true azimuth of 92 with a grid
        // convergence of 2 is grid azimuth 90 (true minus convergence).
        let text = "md,inc,azi\n0,90,92\n1000,90,92\n";
        let s = parse_well(text, Path::new("w.csv"), Some((0.0, 0.0)), 0.0, 0.3048, 2.0).unwrap();
        assert!(
            (s[1].x - 304.8).abs() < 1e-9 && s[1].y.abs() < 1e-9,
            "{:?}",
            s[1]
        );
        assert!((s[1].md - 304.8).abs() < 1e-9);
    }

    #[test]
    fn tables_report_file_and_line() {
        let p = Path::new("stages.csv");
        let err = parse_stages("stage,md_top,md_base\n1,100,200\n2,300,250\n", p, 1.0).unwrap_err();
        assert!(err.to_string().contains("line 3"), "{err}");
        let err = parse_stages("stage,md_top\n1,100\n", p, 1.0).unwrap_err();
        assert!(err.to_string().contains("md_base"), "{err}");
        assert!(parse_stages("", p, 1.0).is_err());
        let w = Path::new("well.csv");
        let err = parse_well("md,x,y\n0,1,2\n0,3,4\n", w, None, 0.0, 1.0, 0.0).unwrap_err();
        assert!(err.to_string().contains("line 3"), "{err}");
        let err = parse_well(
            "md,inc,azi\n0,0,0\n10,200,0\n",
            w,
            Some((0.0, 0.0)),
            0.0,
            1.0,
            0.0,
        )
        .unwrap_err();
        assert!(err.to_string().contains("inclination"), "{err}");
        let err = parse_well(
            "md,inc,azi\n0,0,0\n10,5,400\n",
            w,
            Some((0.0, 0.0)),
            0.0,
            1.0,
            0.0,
        )
        .unwrap_err();
        assert!(err.to_string().contains("azimuth"), "{err}");
    }
}
