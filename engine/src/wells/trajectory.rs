//! Wells and frac stages: deviation surveys to well paths by the minimum curvature method
//! (Sawaryn & Thorogood 2005, SPE Drill. & Compl. 20(1):24, SPE-84246), positions anywhere
//! along measured depth on the same circular arcs (spherical interpolation of the tangent,
//! REFERENCES.md second section 7), stage corridors (the plan path between two measured depths
//! buffered by a half width on each side, flat ends), point-in-polygon membership, and the
//! well and stage tables (read with [`crate::io::table`]).
//!
//! Conventions: x grid east, y grid north, azimuths clockwise from grid north, inclination from
//! vertical. Inside the engine measured depth, x, y and TVD are all in CRS length units; the
//! tables' measured depths (and TVDs and KB) are in the well's measured-depth unit
//! ([`MdUnit`]) and are converted on reading and back on writing. TVD is positive down below
//! the depth datum of the horizons: TVD below datum = TVD below KB - `kb`, with `kb` the
//! elevation of the measured-depth reference (kelly bushing) above the datum (common
//! practice).

use crate::error::Result;
use crate::io::table::{ColumnSpec, Table};

/// Unit of measured depths, TVDs and KB: metre, international foot (0.3048 m) or US survey
/// foot (1200/3937 m). The same three lengths as horizon z units.
pub type MdUnit = crate::surface::horizon::ZUnit;

/// Measured depth: `MD`, `Measured Depth`, `meas depth`, `depth md`.
pub const MD: ColumnSpec = ColumnSpec {
    name: "md",
    variants: &[
        "md",
        "measured depth",
        "meas depth",
        "measureddepth",
        "depth md",
        "dmea",
    ],
};
/// Inclination, degrees from vertical: `Inc`, `Incl`, `Inclination`.
pub const INC: ColumnSpec = ColumnSpec {
    name: "inc",
    variants: &[
        "inc",
        "incl",
        "inclination",
        "incl angle",
        "dev",
        "deviation",
    ],
};
/// Azimuth, degrees clockwise from north: `Azi`, `Azim`, `Azimuth`, `Az`.
pub const AZI: ColumnSpec = ColumnSpec {
    name: "azi",
    variants: &[
        "azi",
        "azim",
        "azimuth",
        "az",
        "hole azimuth",
        "azimuth grid",
    ],
};
/// TVD below the measured-depth reference (KB).
pub const TVD: ColumnSpec = ColumnSpec {
    name: "tvd",
    variants: &["tvd", "true vertical depth", "tvd kb", "tvd rkb"],
};
/// TVD below the depth datum (subsea), not below KB.
pub const TVDSS: ColumnSpec = ColumnSpec {
    name: "tvdss",
    variants: &[
        "tvdss",
        "tvd ss",
        "subsea tvd",
        "tvd subsea",
        "tvd below datum",
    ],
};
/// Grid east in CRS units (`north`/`east` are not accepted: in survey listings they are
/// local offsets from the wellhead).
pub const X: ColumnSpec = ColumnSpec {
    name: "x",
    variants: &["x", "easting", "map x", "grid x", "x easting"],
};
/// Grid north in CRS units.
pub const Y: ColumnSpec = ColumnSpec {
    name: "y",
    variants: &["y", "northing", "map y", "grid y", "y northing"],
};
/// Stage label.
pub const STAGE: ColumnSpec = ColumnSpec {
    name: "stage",
    variants: &[
        "stage",
        "stage name",
        "stage no",
        "stage number",
        "stage #",
        "stage id",
        "stg",
    ],
};
/// Shallower measured depth of a stage.
pub const MD_TOP: ColumnSpec = ColumnSpec {
    name: "md_top",
    variants: &[
        "md_top",
        "top md",
        "top perf md",
        "md top",
        "top perf",
        "top perforation md",
        "top",
    ],
};
/// Deeper measured depth of a stage.
pub const MD_BASE: ColumnSpec = ColumnSpec {
    name: "md_base",
    variants: &[
        "md_base",
        "base md",
        "bottom perf md",
        "bottom md",
        "btm perf md",
        "md bottom",
        "md base",
        "btm md",
        "bottom perf",
        "base",
        "bottom",
    ],
};

/// One point of a well path. Lengths in CRS units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Station {
    /// Measured depth along the hole (CRS length units).
    pub md: f64,
    /// Grid east.
    pub x: f64,
    /// Grid north.
    pub y: f64,
    /// True vertical depth below the depth datum, positive down (NaN when not known).
    pub tvd: f64,
    /// Inclination, degrees from vertical (NaN when not known).
    pub inc: f64,
    /// Azimuth, degrees clockwise from grid north, 0..360.
    pub azi: f64,
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

/// Unit tangent `[north, east, down]` of a hole at inclination `inc` and azimuth `azi`
/// (degrees).
fn tangent(inc: f64, azi: f64) -> [f64; 3] {
    let (si, ci) = inc.to_radians().sin_cos();
    let (sa, ca) = azi.to_radians().sin_cos();
    [si * ca, si * sa, ci]
}

/// Ratio factor `RF(b) = (2 / b) tan(b / 2)` of the minimum curvature method (1 + b^2/12 for
/// tiny `b`, radians).
fn ratio_factor(b: f64) -> f64 {
    if b < 1e-6 {
        1.0 + b * b / 12.0
    } else {
        2.0 / b * (b / 2.0).tan()
    }
}

/// A point a fraction `s` (0..1) along the circular arc of a course of length `length` from
/// tangent `t1` to tangent `t2` (REFERENCES.md second section 7): the tangent there,
/// `t(s) = [sin((1-s)b) t1 + sin(sb) t2] / sin b` (spherical interpolation), and the offset
/// from the course start, `s length / 2 (t1 + t(s)) RF(s b)`, with `b` the dogleg. At `s = 1`
/// this is the minimum-curvature step. Returns (offset `[north, east, down]`, tangent,
/// dogleg in radians).
fn arc_point(t1: [f64; 3], t2: [f64; 3], length: f64, s: f64) -> ([f64; 3], [f64; 3], f64) {
    let chord = (0..3).map(|i| (t2[i] - t1[i]).powi(2)).sum::<f64>().sqrt();
    let b = 2.0 * (chord / 2.0).min(1.0).asin();
    let t: [f64; 3] = if b < 1e-9 {
        std::array::from_fn(|i| (1.0 - s) * t1[i] + s * t2[i])
    } else {
        let (w1, w2) = (((1.0 - s) * b).sin() / b.sin(), (s * b).sin() / b.sin());
        std::array::from_fn(|i| w1 * t1[i] + w2 * t2[i])
    };
    let f = s * length / 2.0 * ratio_factor(s * b);
    (std::array::from_fn(|i| f * (t1[i] + t[i])), t, b)
}

/// Displacement `(dN, dE, dTVD)` between two survey stations and the dogleg (degrees) by the
/// minimum curvature method (REFERENCES.md section 7).
pub fn minimum_curvature_step(a: &SurveyRow, b: &SurveyRow) -> (f64, f64, f64, f64) {
    let (d, _, dogleg) = arc_point(
        tangent(a.inc, a.azi),
        tangent(b.inc, b.azi),
        b.md - a.md,
        1.0,
    );
    (d[0], d[1], d[2], dogleg.to_degrees())
}

/// The stations of a survey whose first row is at `start` (x, y, TVD below datum), all in
/// CRS units.
pub fn survey_path(rows: &[SurveyRow], start: (f64, f64, f64)) -> Vec<Station> {
    let mut stations = Vec::with_capacity(rows.len());
    let (mut x, mut y, mut tvd) = start;
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
            inc: row.inc,
            azi: row.azi.rem_euclid(360.0),
        });
    }
    stations
}

/// How positions between stations are found.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Trajectory {
    /// A deviation survey: circular arcs of the minimum curvature method between stations.
    Survey,
    /// A path of points (`md,x,y[,tvd]`): straight lines between them; inclination and
    /// azimuth are those of the segment.
    Polyline,
}

/// A well: its name, stations ordered by strictly increasing measured depth, how to
/// interpolate between them and its measured-depth unit.
#[derive(Clone, Debug, PartialEq)]
pub struct Well {
    /// Name (from `--well NAME=FILE`, the well list or the file stem).
    pub name: String,
    /// Stations (CRS length units).
    pub stations: Vec<Station>,
    /// Arcs or straight lines between stations.
    pub trajectory: Trajectory,
    /// Unit of the well's measured depths, TVDs and KB in tables.
    pub md_unit: MdUnit,
    /// CRS length units per measured-depth unit.
    pub crs_per_md: f64,
    /// How the unit was decided and what was not used, for the report.
    pub notes: Vec<String>,
}

impl Well {
    /// Measured-depth range of the path (CRS units).
    pub fn md_range(&self) -> (f64, f64) {
        (
            self.stations.first().map_or(f64::NAN, |s| s.md),
            self.stations.last().map_or(f64::NAN, |s| s.md),
        )
    }

    /// Position, TVD, inclination and azimuth at measured depth `md` (CRS units): on the
    /// minimum-curvature arc of a survey, on the straight segment of a path; exactly the
    /// station's values at a station. `None` outside the path.
    pub fn at(&self, md: f64) -> Option<Station> {
        let (lo, hi) = self.md_range();
        if !(md >= lo && md <= hi) {
            return None;
        }
        let k = self.stations.partition_point(|s| s.md <= md);
        if k > 0 && self.stations[k - 1].md == md {
            return Some(self.stations[k - 1]);
        }
        let (a, b) = (&self.stations[k - 1], &self.stations[k]);
        let s = (md - a.md) / (b.md - a.md);
        Some(match self.trajectory {
            Trajectory::Survey => {
                let (d, t, _) =
                    arc_point(tangent(a.inc, a.azi), tangent(b.inc, b.azi), b.md - a.md, s);
                let horizontal = t[0].hypot(t[1]);
                Station {
                    md,
                    x: a.x + d[1],
                    y: a.y + d[0],
                    tvd: a.tvd + d[2],
                    inc: t[2].clamp(-1.0, 1.0).acos().to_degrees(),
                    azi: if horizontal > 1e-12 {
                        t[1].atan2(t[0]).to_degrees().rem_euclid(360.0)
                    } else {
                        a.azi
                    },
                }
            }
            Trajectory::Polyline => Station {
                md,
                x: a.x + s * (b.x - a.x),
                y: a.y + s * (b.y - a.y),
                tvd: a.tvd + s * (b.tvd - a.tvd),
                inc: a.inc,
                azi: a.azi,
            },
        })
    }

    /// Points from `md_top` to `md_base` (CRS units) at most `step` apart along the hole, with
    /// every station between; both ends exactly; `None` when the interval is not inside the
    /// path.
    pub fn sample(&self, md_top: f64, md_base: f64, step: f64) -> Option<Vec<Station>> {
        let n = ((md_base - md_top) / step).ceil().max(1.0) as usize;
        let mut mds: Vec<f64> = (0..=n)
            .map(|k| {
                if k == n {
                    md_base
                } else {
                    (md_top + (md_base - md_top) * k as f64 / n as f64).min(md_base)
                }
            })
            .chain(
                self.stations
                    .iter()
                    .map(|s| s.md)
                    .filter(|&m| m > md_top && m < md_base),
            )
            .collect();
        mds.sort_by(f64::total_cmp);
        mds.dedup();
        mds.into_iter().map(|m| self.at(m)).collect()
    }
}

/// Inclination (NaN without TVD) and azimuth of the straight segment from `a` to `b`.
fn segment_direction(a: &Station, b: &Station) -> (f64, f64) {
    let (dx, dy, dv) = (b.x - a.x, b.y - a.y, b.tvd - a.tvd);
    (
        dx.hypot(dy).atan2(dv).to_degrees(),
        dx.atan2(dy).to_degrees().rem_euclid(360.0),
    )
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

/// Longest measured depth read, metres: 100 km, several times the longest wells drilled
/// (about 15 km). Wells are traced in steps of metres, so a typo of a few orders of magnitude
/// would otherwise ask for memory the machine does not have.
pub const MAX_MD_M: f64 = 100_000.0;

/// A tie-in point: where the first station of a survey that does not start at measured depth
/// 0 lies. Lengths in the well's measured-depth unit except x and y (CRS units).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TieIn {
    /// Measured depth of the tie-in; when given it must be the first station's.
    pub md: Option<f64>,
    /// Grid east, CRS units.
    pub x: f64,
    /// Grid north, CRS units.
    pub y: f64,
    /// TVD below KB (the measured-depth reference), positive down.
    pub tvd: f64,
}

/// How to place and convert one well file.
#[derive(Clone, Debug, PartialEq)]
pub struct WellSetting {
    /// Wellhead (x, y) in CRS units, where a survey starting at md 0 starts.
    pub wellhead: Option<(f64, f64)>,
    /// Elevation of the measured-depth reference (KB) above the depth datum, in the well's
    /// measured-depth unit; TVD below datum = TVD below KB - kb.
    pub kb: f64,
    /// Tie-in of a survey starting below md 0.
    pub tie_in: Option<TieIn>,
    /// The job's measured-depth unit (`--md-unit`), if given.
    pub md_unit: Option<MdUnit>,
    /// Degrees subtracted from survey azimuths (grid convergence for true-north surveys).
    pub azimuth_offset: f64,
    /// Metres per CRS length unit.
    pub metres_per_unit: f64,
}

/// The measured-depth unit of `table` from the units declared on its length columns `cols`
/// and the job's `flag`: a declared unit is used (columns that disagree, an unknown unit or a
/// flag that contradicts it are refused naming both); with none declared the flag, else
/// `default` (`(unit, why)`, e.g. metres, or the unit of a stage table's well). Returns the
/// unit and, when it was assumed, a note saying so.
pub fn md_unit_of(
    table: &Table,
    cols: &[usize],
    flag: Option<MdUnit>,
    default: (MdUnit, &str),
) -> Result<(MdUnit, Option<String>)> {
    let mut declared: Option<(MdUnit, &str)> = None;
    for &col in cols {
        let Some(text) = table.unit(col) else {
            continue;
        };
        let header = table.columns[col].header.as_str();
        let unit = MdUnit::parse(text).ok_or_else(|| {
            table.error(
                table.header_line,
                format!("column '{header}' declares unit '{text}': give m, ft or usft"),
            )
        })?;
        match declared {
            Some((u, other)) if u != unit => {
                return Err(table.error(
                    table.header_line,
                    format!(
                        "columns '{other}' and '{header}' declare different units: use one unit"
                    ),
                ))
            }
            _ => declared = Some((unit, header)),
        }
    }
    match (declared, flag) {
        (Some((u, header)), Some(f)) if u != f => Err(table.error(
            table.header_line,
            format!(
                "column '{header}' declares {} but --md-unit is {}: drop --md-unit or fix the header",
                u.name(),
                f.name()
            ),
        )),
        (Some((u, _)), _) => Ok((u, None)),
        (None, Some(f)) => Ok((f, None)),
        (None, None) => Ok((
            default.0,
            Some(format!(
                "{}: no unit in the header and no --md-unit: measured depths read in {} ({})",
                table.path.display(),
                default.0.name(),
                default.1
            )),
        )),
    }
}

/// Refuses an angle column declaring a unit other than degrees.
fn check_degrees(table: &Table, col: usize) -> Result<()> {
    match table.unit(col).map(|u| u.trim().to_lowercase()) {
        None => Ok(()),
        Some(u) if matches!(u.as_str(), "deg" | "degs" | "degree" | "degrees" | "°") => Ok(()),
        Some(u) => Err(table.error(
            table.header_line,
            format!(
                "column '{}' declares unit '{u}': give angles in degrees",
                table.columns[col].header
            ),
        )),
    }
}

/// Reads the well `name` from `table`: a path of points when it has x and y columns (and
/// `tvd` below KB or `tvdss` below the datum; positions given are used as they are, so a
/// path written by flexure reads back), else a deviation survey with inclination and azimuth
/// columns (minimum curvature from the wellhead at md 0, or from a tie-in). Refuses, naming the
/// file and line: md not strictly increasing, angles out of range, a survey without the
/// wellhead or tie-in it needs, both `tvd` and `tvdss`, missing columns.
pub fn read_well(name: &str, table: &Table, setting: &WellSetting) -> Result<Well> {
    let md_col = table.require(&MD)?;
    let (inc_col, azi_col) = (table.find(&INC)?, table.find(&AZI)?);
    let (x_col, y_col) = (table.find(&X)?, table.find(&Y)?);
    let (tvd_col, tvdss_col) = (table.find(&TVD)?, table.find(&TVDSS)?);
    let length_cols: Vec<usize> = [Some(md_col), tvd_col, tvdss_col]
        .into_iter()
        .flatten()
        .collect();
    let (md_unit, note) = md_unit_of(
        table,
        &length_cols,
        setting.md_unit,
        (MdUnit::Metre, "the default"),
    )?;
    let crs_per_md = md_unit.metres() / setting.metres_per_unit;
    let md = table.numbers(md_col)?;
    let limit = MAX_MD_M / md_unit.metres();
    if let Some(k) = (0..md.len()).find(|&k| md[k].abs() > limit) {
        return Err(table.error(
            table.line(k),
            format!(
                "md {} {} is beyond {} km along the hole: check the md column and its unit",
                md[k],
                md_unit.name(),
                MAX_MD_M / 1000.0
            ),
        ));
    }
    for k in 1..md.len() {
        if md[k] <= md[k - 1] {
            return Err(table.error(
                table.line(k),
                format!("md {} does not increase (previous {})", md[k], md[k - 1]),
            ));
        }
    }
    let mut well = Well {
        name: name.to_string(),
        stations: Vec::new(),
        trajectory: Trajectory::Survey,
        md_unit,
        crs_per_md,
        notes: note.into_iter().collect(),
    };
    match (x_col, y_col, inc_col, azi_col) {
        (Some(x), Some(y), _, _) => {
            well.trajectory = Trajectory::Polyline;
            well.stations = path_stations(
                table,
                &md,
                (x, y),
                (tvd_col, tvdss_col),
                setting.kb,
                crs_per_md,
            )?;
            if setting.wellhead.is_some() || setting.tie_in.is_some() {
                well.notes.push(format!(
                    "{}: a path with x and y; its wellhead and tie-in are not used",
                    table.path.display()
                ));
            }
        }
        (_, _, Some(inc), Some(azi)) => {
            well.stations = survey_stations(table, &md, inc, azi, setting, crs_per_md)?;
            well.notes.extend(listed_tvd_note(
                table,
                &well,
                (tvd_col, tvdss_col),
                setting.kb,
            )?);
        }
        _ => {
            return Err(table.error(
                table.header_line,
                format!(
                    "give columns md,x,y[,tvd|tvdss] (a path) or md,inc,azi (a survey); found {}",
                    table.headers()
                ),
            ))
        }
    }
    Ok(well)
}

/// A survey's own TVD column is not used (positions come from md, inc and azi by minimum
/// curvature); the note says so and how far it is from the computed TVD, so a survey whose
/// listed TVD disagrees (another KB, another datum, an error) shows.
fn listed_tvd_note(
    table: &Table,
    well: &Well,
    (tvd_col, tvdss_col): (Option<usize>, Option<usize>),
    kb: f64,
) -> Result<Option<String>> {
    let (col, shift, what) = match (tvd_col, tvdss_col) {
        (Some(c), _) => (c, kb, "tvd"),
        (None, Some(c)) => (c, 0.0, "tvdss"),
        (None, None) => return Ok(None),
    };
    let listed = table.numbers(col)?;
    let (worst, k) = listed
        .iter()
        .zip(&well.stations)
        .map(|(t, s)| ((t - shift) - s.tvd / well.crs_per_md).abs())
        .enumerate()
        .fold(
            (0.0f64, 0),
            |(w, wk), (k, d)| if d > w { (d, k) } else { (w, wk) },
        );
    Ok(Some(format!(
        "{}: the survey's {what} column is not used (TVD is computed by minimum curvature); it differs from the computed TVD by up to {worst:.3} {} (line {})",
        table.path.display(),
        well.md_unit.name(),
        table.line(k)
    )))
}

/// Stations of a survey table (see [`read_well`]).
fn survey_stations(
    table: &Table,
    md: &[f64],
    inc_col: usize,
    azi_col: usize,
    setting: &WellSetting,
    crs_per_md: f64,
) -> Result<Vec<Station>> {
    check_degrees(table, inc_col)?;
    check_degrees(table, azi_col)?;
    let (inc, azi) = (table.numbers(inc_col)?, table.numbers(azi_col)?);
    let mut rows = Vec::with_capacity(md.len());
    for k in 0..md.len() {
        if !(0.0..=180.0).contains(&inc[k]) {
            return Err(table.error(
                table.line(k),
                format!("inclination {} is outside 0..180", inc[k]),
            ));
        }
        if !(0.0..=360.0).contains(&azi[k]) {
            return Err(table.error(
                table.line(k),
                format!("azimuth {} is outside 0..360", azi[k]),
            ));
        }
        rows.push(SurveyRow {
            md: md[k] * crs_per_md,
            inc: inc[k],
            azi: azi[k] - setting.azimuth_offset,
        });
    }
    let (first, line) = (md[0], table.line(0));
    let (x, y, tvd_below_kb) = match (setting.tie_in, first) {
        (_, m) if m < 0.0 => {
            return Err(table.error(line, format!("md {m} is negative: measured depths start at the KB (0)")))
        }
        (Some(t), _) => {
            if let Some(m) = t.md.filter(|m| (m - first).abs() > 1e-6 * first.abs().max(1.0)) {
                return Err(table.error(
                    line,
                    format!("the tie-in is at md {m} but the survey starts at md {first}: tie in at the first station"),
                ));
            }
            (t.x, t.y, t.tvd)
        }
        (None, 0.0) => {
            let (x, y) = setting.wellhead.ok_or_else(|| {
                table.error(
                    line,
                    "a survey starting at md 0 starts at the wellhead: give it with --wellhead NAME=X,Y (or wellhead_x, wellhead_y in the well list)",
                )
            })?;
            (x, y, 0.0)
        }
        (None, m) => {
            return Err(table.error(
                line,
                format!("the survey starts at md {m}, not 0: give a tie-in point (x, y and TVD below KB at md {m}) with --tie-in NAME=X,Y,TVD (or tie_in_x, tie_in_y, tie_in_tvd in the well list)"),
            ))
        }
    };
    Ok(survey_path(
        &rows,
        (x, y, (tvd_below_kb - setting.kb) * crs_per_md),
    ))
}

/// Stations of a path table (see [`read_well`]): `tvd` is below KB (so `kb` is subtracted),
/// `tvdss` below the datum.
fn path_stations(
    table: &Table,
    md: &[f64],
    (x_col, y_col): (usize, usize),
    (tvd_col, tvdss_col): (Option<usize>, Option<usize>),
    kb: f64,
    crs_per_md: f64,
) -> Result<Vec<Station>> {
    let (x, y) = (table.numbers(x_col)?, table.numbers(y_col)?);
    let tvd: Vec<f64> = match (tvd_col, tvdss_col) {
        (Some(a), Some(b)) => {
            return Err(table.error(
                table.header_line,
                format!(
                    "columns '{}' (below KB) and '{}' (below the datum) both give depth: keep one",
                    table.columns[a].header, table.columns[b].header
                ),
            ))
        }
        (Some(c), None) => table
            .numbers(c)?
            .iter()
            .map(|v| (v - kb) * crs_per_md)
            .collect(),
        (None, Some(c)) => table.numbers(c)?.iter().map(|v| v * crs_per_md).collect(),
        (None, None) => vec![f64::NAN; md.len()],
    };
    let mut stations: Vec<Station> = (0..md.len())
        .map(|k| Station {
            md: md[k] * crs_per_md,
            x: x[k],
            y: y[k],
            tvd: tvd[k],
            inc: f64::NAN,
            azi: f64::NAN,
        })
        .collect();
    let n = stations.len();
    for k in 0..n {
        let (a, b) = if k + 1 < n {
            (k, k + 1)
        } else {
            (k.saturating_sub(1), k)
        };
        let (inc, azi) = if a == b {
            (f64::NAN, f64::NAN)
        } else {
            segment_direction(&stations[a], &stations[b])
        };
        stations[k].inc = inc;
        stations[k].azi = azi;
    }
    Ok(stations)
}

/// A frac stage or port interval.
#[derive(Clone, Debug, PartialEq)]
pub struct Stage {
    /// Stage label.
    pub name: String,
    /// Shallower measured depth, CRS units.
    pub md_top: f64,
    /// Deeper measured depth, CRS units.
    pub md_base: f64,
    /// Line of the stage table it came from.
    pub line: usize,
}

/// Reads the stage table of `well` (`stage,md_top,md_base` or the variants of [`STAGE`],
/// [`MD_TOP`] and [`MD_BASE`]) with measured depths in its declared unit, the job's
/// `md_unit`, or else the well's unit (see [`md_unit_of`]), converted to CRS units of
/// `metres_per_unit` metres. Refuses empty names and md_top >= md_base naming the line.
/// Returns the stages and a note when the unit was assumed.
pub fn read_stages(
    table: &Table,
    md_unit: Option<MdUnit>,
    well: &Well,
    metres_per_unit: f64,
) -> Result<(Vec<Stage>, Option<String>)> {
    let name_col = table.require(&STAGE)?;
    let (top_col, base_col) = (table.require(&MD_TOP)?, table.require(&MD_BASE)?);
    let why = format!("the unit of well {}", well.name);
    let (unit, note) = md_unit_of(table, &[top_col, base_col], md_unit, (well.md_unit, &why))?;
    let scale = unit.metres() / metres_per_unit;
    let stages = (0..table.rows.len())
        .map(|r| {
            let (top, base) = (table.number(r, top_col)?, table.number(r, base_col)?);
            let (line, name) = (table.line(r), table.text(r, name_col));
            if name.is_empty() {
                return Err(table.error(line, "the stage has no name: give every stage a label"));
            }
            if top >= base {
                return Err(table.error(line, format!("md_top {top} is not above md_base {base}")));
            }
            Ok(Stage {
                name: name.to_string(),
                md_top: top * scale,
                md_base: base * scale,
                line,
            })
        })
        .collect::<Result<Vec<_>>>()?;
    Ok((stages, note))
}

/// Name of the whole-lateral summary row and files of a well.
pub const LATERAL: &str = "lateral";

/// File-name-safe form of a label: ASCII letters, digits, `-` and `_` kept, anything else `_`.
pub fn file_name_part(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// Refuses, naming the stage table and lines: a stage outside the well's measured-depth
/// range, two stages that overlap, and two stage names that give the same file name (case
/// ignored, as on some file systems) or the name of the lateral summary.
pub fn check_stages(stages: &[Stage], well: &Well, table: &Table) -> Result<()> {
    let (lo, hi) = well.md_range();
    let shown = |v: f64| format!("{}", (v / well.crs_per_md * 1e6).round() / 1e6);
    let unit = well.md_unit.name();
    if let Some(s) = stages.iter().find(|s| s.md_top < lo || s.md_base > hi) {
        return Err(table.error(
            s.line,
            format!(
                "stage {} ({} .. {} {unit}) is outside the md range of well {} ({} .. {} {unit})",
                s.name,
                shown(s.md_top),
                shown(s.md_base),
                well.name,
                shown(lo),
                shown(hi)
            ),
        ));
    }
    let mut order: Vec<&Stage> = stages.iter().collect();
    order.sort_by(|a, b| a.md_top.total_cmp(&b.md_top));
    for w in order.windows(2) {
        let tolerance = 1e-9 * w[0].md_base.abs().max(1.0);
        if w[1].md_top < w[0].md_base - tolerance {
            return Err(table.error(
                w[1].line,
                format!(
                    "stage {} ({} .. {} {unit}) overlaps stage {} on line {} ({} .. {} {unit}): fix the depths",
                    w[1].name,
                    shown(w[1].md_top),
                    shown(w[1].md_base),
                    w[0].name,
                    w[0].line,
                    shown(w[0].md_top),
                    shown(w[0].md_base)
                ),
            ));
        }
    }
    let mut seen: Vec<(String, &Stage)> = Vec::new();
    for s in stages {
        let key = file_name_part(&s.name).to_lowercase();
        if key == LATERAL {
            return Err(table.error(
                s.line,
                format!("stage '{}' would take the file name of the whole-lateral summary '{LATERAL}': rename the stage", s.name),
            ));
        }
        if let Some((_, other)) = seen.iter().find(|(k, _)| *k == key) {
            return Err(table.error(
                s.line,
                format!(
                    "stage '{}' and stage '{}' on line {} give the same file name '{key}': rename one",
                    s.name, other.name, other.line
                ),
            ));
        }
        seen.push((key, s));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::Path;

    fn table(text: &str) -> Table {
        Table::parse(text, Path::new("w.csv")).unwrap()
    }

    fn setting() -> WellSetting {
        WellSetting {
            wellhead: Some((0.0, 0.0)),
            kb: 0.0,
            tie_in: None,
            md_unit: None,
            azimuth_offset: 0.0,
            metres_per_unit: 1.0,
        }
    }

    fn well(text: &str, s: &WellSetting) -> Result<Well> {
        read_well("w", &table(text), s)
    }

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
    fn a_constant_build_is_a_circular_arc_between_and_at_stations() {
        // Hand-checkable circle geometry: a build from vertical to horizontal at a constant
        // rate along azimuth 90 over L = 1000 is a quarter circle of radius R = L / (pi/2);
        // after turning through theta the hole is at east R (1 - cos theta), TVD R sin theta
        // with inclination theta. Two stations only, so every point but the ends is
        // interpolated on the arc.
        let length = 1000.0;
        let text = format!("md,inc,azi\n0,0,90\n{length},90,90\n");
        let w = well(&text, &setting()).unwrap();
        let r = length / std::f64::consts::FRAC_PI_2;
        for s in [0.1, 0.25, 0.5, 0.77, 1.0] {
            let p = w.at(s * length).unwrap();
            let theta = s * std::f64::consts::FRAC_PI_2;
            assert!((p.x - r * (1.0 - theta.cos())).abs() < 1e-9, "{s}: {p:?}");
            assert!((p.tvd - r * theta.sin()).abs() < 1e-9, "{s}: {p:?}");
            assert!(p.y.abs() < 1e-9 && (p.inc - theta.to_degrees()).abs() < 1e-9);
            assert!((p.azi - 90.0).abs() < 1e-9);
        }
        // On stations the survey's own angles are kept (vertical: the surveyed azimuth).
        assert_eq!(w.at(0.0).unwrap().azi, 90.0);
        assert!(w.at(-1.0).is_none() && w.at(length + 1.0).is_none());
        // A straight inclined hole (60 deg, azimuth 30): 100 along it is 50 down (elementary).
        let straight = well("md,inc,azi\n0,60,30\n100,60,30\n", &setting()).unwrap();
        let h = 100.0 * 60f64.to_radians().sin();
        let end = straight.at(100.0).unwrap();
        assert!((end.x - h * 30f64.to_radians().sin()).abs() < 1e-9);
        assert!((end.tvd - 50.0).abs() < 1e-9);
        let mid = straight.at(50.0).unwrap();
        assert!((mid.tvd - 25.0).abs() < 1e-9 && (mid.inc - 60.0).abs() < 1e-9);
    }

    #[test]
    fn samples_are_dense_and_keep_the_stations() {
        let w = well("md,inc,azi\n0,0,0\n95,10,0\n200,20,0\n", &setting()).unwrap();
        let pts = w.sample(10.0, 180.0, 10.0).unwrap();
        assert!(pts.windows(2).all(|p| p[1].md - p[0].md <= 10.0 + 1e-9));
        assert!(pts.iter().any(|p| p.md == 95.0));
        assert_eq!((pts[0].md, pts.last().unwrap().md), (10.0, 180.0));
        assert!(w.sample(10.0, 300.0, 10.0).is_none());
        // The whole path, for ends where top + (base - top) k / n rounds past the base (a
        // survey ending at md 3236.36 with 10 m steps did): the ends are exact.
        for end in [3236.36, 1981.2, 3840.48, 4450.08, 1000.0 / 3.0] {
            let w = well(&format!("md,inc,azi\n0,0,0\n{end},30,0\n"), &setting()).unwrap();
            for step in [10.0, 3.048, 7.7] {
                for top in [0.0, 0.37 * end] {
                    let pts = w.sample(top, end, step).expect("the interval samples");
                    assert_eq!((pts[0].md, pts.last().unwrap().md), (top, end));
                }
            }
        }
    }

    #[test]
    fn feet_us_feet_and_true_north_surveys_are_converted() {
        // 1000 ft = 304.8 m and 1000 US survey ft = 1000 x 1200/3937 m (exact definitions); a
        // true azimuth of 92 with a grid convergence of 2 is grid azimuth 90 (true minus
        // convergence).
        let mut s = setting();
        s.azimuth_offset = 2.0;
        for (text, metres) in [
            ("MD (ft),Inc (deg),Azi\n0,90,92\n1000,90,92\n", 304.8),
            ("md,inc,azi\n0,90,92\n1000,90,92\n", 1000.0),
            (
                "Measured Depth [usft],Incl,Azimuth\n0,90,92\n1000,90,92\n",
                1_200_000.0 / 3937.0,
            ),
        ] {
            let w = well(text, &s).unwrap();
            let end = w.stations[1];
            assert!(
                (end.x - metres).abs() < 1e-9 && end.y.abs() < 1e-9,
                "{text}: {end:?}"
            );
            assert!((end.md - metres).abs() < 1e-9);
        }
        let mut flagged = setting();
        flagged.md_unit = Some(MdUnit::Foot);
        let w = well("md,inc,azi\n0,90,90\n1000,90,90\n", &flagged).unwrap();
        assert!((w.stations[1].x - 304.8).abs() < 1e-9 && w.notes.is_empty());
        assert!(well("md,inc,azi\n0,90,90\n1,90,90\n", &setting())
            .unwrap()
            .notes[0]
            .contains("measured depths read in m (the default)"));
        let e = well("MD (ft),inc,azi\n0,90,90\n1,90,90\n", &{
            let mut s = setting();
            s.md_unit = Some(MdUnit::Metre);
            s
        })
        .unwrap_err()
        .to_string();
        assert!(
            e.contains("'MD (ft)' declares ft but --md-unit is m"),
            "{e}"
        );
        let e = well("md,inc (rad),azi\n0,1,1\n1,1,1\n", &setting())
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("line 1: column 'inc (rad)' declares unit 'rad'"),
            "{e}"
        );
    }

    #[test]
    fn kb_and_tie_in_place_the_survey() {
        // Common practice: TVD below datum = TVD below KB - KB elevation; a survey starting
        // at md 0 starts at the wellhead at TVD 0 below KB.
        let text = "md,inc,azi\n0,0,0\n500,0,0\n";
        let mut s = setting();
        s.kb = 25.0;
        let w = well(text, &s).unwrap();
        assert_eq!((w.stations[0].tvd, w.stations[1].tvd), (-25.0, 475.0));
        // Starting below md 0: refused without a tie-in, placed at it with one.
        let deep = "md,inc,azi\n900,0,0\n1000,0,0\n";
        let e = well(deep, &setting()).unwrap_err().to_string();
        assert!(
            e.contains("w.csv: line 2: the survey starts at md 900, not 0: give a tie-in"),
            "{e}"
        );
        s.tie_in = Some(TieIn {
            md: Some(900.0),
            x: 10.0,
            y: 20.0,
            tvd: 880.0,
        });
        let w = well(deep, &s).unwrap();
        assert_eq!(
            (w.stations[0].x, w.stations[0].y, w.stations[0].tvd),
            (10.0, 20.0, 855.0)
        );
        assert_eq!(w.stations[1].tvd, 955.0);
        s.tie_in = Some(TieIn {
            md: Some(800.0),
            ..s.tie_in.unwrap()
        });
        let e = well(deep, &s).unwrap_err().to_string();
        assert!(
            e.contains("tie-in is at md 800 but the survey starts at md 900"),
            "{e}"
        );
        let e = well(
            text,
            &WellSetting {
                wellhead: None,
                ..setting()
            },
        )
        .unwrap_err()
        .to_string();
        assert!(
            e.contains("line 2: a survey starting at md 0 starts at the wellhead"),
            "{e}"
        );
        // Paths: tvd is below KB (KB applied), tvdss below the datum (no shift).
        let mut s = setting();
        s.kb = 30.0;
        let p = well("md,x,y,tvd\n0,0,0,1000\n100,100,0,1000\n", &s).unwrap();
        assert_eq!(p.stations[0].tvd, 970.0);
        assert!(
            (p.stations[0].inc - 90.0).abs() < 1e-12 && (p.stations[0].azi - 90.0).abs() < 1e-12
        );
        let p = well(
            "md,easting,northing,TVDSS\n0,0,0,1000\n100,100,0,1000\n",
            &s,
        )
        .unwrap();
        assert_eq!(p.stations[1].tvd, 1000.0);
        let e = well("md,x,y,tvd,tvdss\n0,0,0,1,1\n1,1,0,1,1\n", &s)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("'tvd' (below KB) and 'tvdss' (below the datum)"),
            "{e}"
        );
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
    fn bad_tables_are_refused_with_file_and_line() {
        let e = well("md,x,y\n0,1,2\n0,3,4\n", &setting())
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 3: md 0 does not increase"), "{e}");
        let e = well("md,inc,azi\n0,0,0\n10,200,0\n", &setting())
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 3: inclination"), "{e}");
        let e = well("md,inc,azi\n0,0,0\n10,5,400\n", &setting())
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 3: azimuth"), "{e}");
        // north/east are local offsets in survey listings, never map coordinates.
        let e = well("md,north,east\n0,1,2\n1,1,2\n", &setting())
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 1: give columns md,x,y"), "{e}");
        let w = well("md,inc,azi\n0,90,90\n1000,90,90\n", &setting()).unwrap();
        let st = |t: &str| read_stages(&table(t), None, &w, 1.0).map(|r| r.0);
        let e = st("stage,md_top,md_base\n1,100,200\n2,300,250\n")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("line 3: md_top 300 is not above md_base 250"),
            "{e}"
        );
        let e = st("stage,md_top\n1,100\n").unwrap_err().to_string();
        assert!(e.contains("no column 'md_base'"), "{e}");
        let ok = st("Stage No,Top Perf MD (m),Bottom Perf MD (m)\n1,100,200\n").unwrap();
        assert_eq!((ok[0].md_top, ok[0].md_base), (100.0, 200.0));
    }

    #[test]
    fn measured_depths_beyond_a_hundred_kilometres_are_refused() {
        // Found by the reader audit: md 1e12 read fine, and tracing the well every 10 m then
        // asked for 1e11 points (an allocation failure aborts the process). Our limit,
        // MAX_MD_M; hand-checkable: 100 km is 328083.99 ft.
        let setting = WellSetting {
            wellhead: Some((0.0, 0.0)),
            kb: 0.0,
            tie_in: None,
            md_unit: None,
            azimuth_offset: 0.0,
            metres_per_unit: 1.0,
        };
        let e = read_well("w", &table("md,inc,azi\n0,0,0\n1e12,0,0\n"), &setting)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("w.csv: line 3: md 1000000000000 m is beyond 100 km along the hole"),
            "{e}"
        );
        let e = read_well("w", &table("md (ft),x,y\n0,0,0\n328084,0,1\n"), &setting)
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 3: md 328084 ft is beyond 100 km"), "{e}");
        assert!(read_well("w", &table("md (ft),x,y\n0,0,0\n328083,0,1\n"), &setting).is_ok());
    }

    #[test]
    fn stage_overlaps_and_file_name_collisions_are_refused() {
        let w = well("md,inc,azi\n0,90,90\n1000,90,90\n", &setting()).unwrap();
        let check = |text: &str| {
            let t = table(text);
            let (stages, _) = read_stages(&t, None, &w, 1.0).unwrap();
            check_stages(&stages, &w, &t).map_err(|e| e.to_string())
        };
        assert!(check("stage,md_top,md_base\n1,100,200\n2,200,300\n").is_ok());
        let e = check("stage,md_top,md_base\n1,100,200\n2,150,300\n").unwrap_err();
        assert!(
            e.contains("line 3: stage 2 (150 .. 300 m) overlaps stage 1 on line 2"),
            "{e}"
        );
        let e = check("stage,md_top,md_base\na/1,100,200\nA_1,300,400\n").unwrap_err();
        assert!(
            e.contains("stage 'A_1' and stage 'a/1' on line 2 give the same file name"),
            "{e}"
        );
        let e = check("stage,md_top,md_base\nLateral,100,200\n").unwrap_err();
        assert!(e.contains("whole-lateral summary"), "{e}");
        let e = check("stage,md_top,md_base\n1,900,1100\n").unwrap_err();
        assert!(
            e.contains("line 2: stage 1 (900 .. 1100 m) is outside the md range"),
            "{e}"
        );
    }
}
