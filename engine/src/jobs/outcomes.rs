//! What the stages and wells did, against what the corridors show: completion tables (one row
//! per stage: well, stage, then any numeric columns such as breakdown or treating pressure,
//! slurry rate, proppant per metre, shut-in pressure) and production tables (one row per
//! well), read with the tolerant table reader ([`crate::io::table`]), joined to the stage rows
//! by well and stage, and every outcome column tested against every stage metric by rank
//! correlation ([`crate::stats::rank`]): along the wells for stage outcomes (the order-keeping
//! tests), across wells for production.
//!
//! Names and units of the outcome columns are the user's, kept as written. Few stages or wells
//! make a weak test, and the output says so: a correlation on a handful of wells is a local
//! empirical relation, not a forecast.

use crate::draw::figure::{Anchor, Figure, Mark};
use crate::draw::scatter::{draw_panel, group_colour, Panel};
use crate::error::{FlexureError, Result};
use crate::io::table::{is_null_word, ColumnSpec, Table};
use crate::stats::rank::{false_discovery_adjusted, rank_test, Dependence, RankTest};
use serde::Serialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Confidence level of the intervals.
pub const LEVEL: f64 = 0.95;
/// Bootstrap resamples per test.
pub const RESAMPLES: usize = 2000;
/// Permutation draws per test.
pub const PERMUTATIONS: usize = 4999;
/// Fewest stages (or wells) below which a result is called too thin to read.
pub const FEW: usize = 10;

/// What the outcome analysis says with every result.
pub const OUTCOME_CAUTION: &str = "Outcome relations are rank correlations on these wells \
only: a local empirical relation, not a forecast. With many outcome and metric pairs, about one \
test in twenty falls below p = 0.05 by chance (q adjusts p for the number of tests: \
Benjamini-Hochberg); neighbouring stages are not independent (the \
tests keep each well's order), a trend along the well shared by a metric and an outcome (a \
design change from heel to toe, a drift in the anisotropy) reads as a relation, and a \
correlation does not say why.";

const WELL: ColumnSpec = ColumnSpec {
    name: "well",
    variants: &["well", "well name", "wellname", "well id"],
};

const STAGE: ColumnSpec = ColumnSpec {
    name: "stage",
    variants: &["stage", "stage number", "stage no", "stage num", "stg"],
};

/// Whether a table holds one row per stage or per well.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Level {
    /// One row per stage (completion data).
    Stage,
    /// One row per well (production data).
    Well,
}

/// An outcome table as read: the numeric columns by their header (as written) and one row per
/// stage or well.
#[derive(Clone, Debug, PartialEq)]
pub struct OutcomeTable {
    /// The file.
    pub path: PathBuf,
    /// Stage or well rows.
    pub level: Level,
    /// Outcome column headers as written.
    pub names: Vec<String>,
    /// Rows: well, stage (stage level), file line and one value per outcome (NaN when empty).
    pub rows: Vec<OutcomeRow>,
    /// Columns left out (not numeric), and why.
    pub notes: Vec<String>,
}

/// One row of an outcome table.
#[derive(Clone, Debug, PartialEq)]
pub struct OutcomeRow {
    /// Well name as written.
    pub well: String,
    /// Stage label (stage level).
    pub stage: Option<String>,
    /// Line in the file.
    pub line: usize,
    /// One value per outcome column; NaN where the field is empty or a null word.
    pub values: Vec<f64>,
}

impl OutcomeTable {
    /// Reads a completion (`Level::Stage`) or production (`Level::Well`) table. Columns other
    /// than well and stage whose every non-empty field is a number are outcomes; others (dates,
    /// comments) are left out with a note. Refused: no well (or stage) column, no numeric
    /// column, a row repeating a well (and stage).
    pub fn read(path: &Path, level: Level) -> Result<Self> {
        let table = Table::read(path)?;
        let well = table.require(&WELL)?;
        let stage = match level {
            Level::Stage => Some(table.require(&STAGE)?),
            Level::Well => None,
        };
        let mut names = Vec::new();
        let mut columns = Vec::new();
        let mut notes = Vec::new();
        for (c, column) in table.columns.iter().enumerate() {
            if c == well || Some(c) == stage {
                continue;
            }
            let numeric = (0..table.rows.len()).all(|r| {
                let t = table.text(r, c);
                t.is_empty() || is_null_word(t) || t.parse::<f64>().is_ok_and(f64::is_finite)
            });
            if numeric {
                names.push(column.header.clone());
                columns.push(c);
            } else {
                notes.push(format!(
                    "{}: column '{}' is not numeric and was left out",
                    path.display(),
                    column.header
                ));
            }
        }
        if columns.is_empty() {
            return Err(table.error(
                table.header_line,
                format!(
                    "no numeric outcome column besides well{} (columns: {}); add one",
                    if stage.is_some() { " and stage" } else { "" },
                    table.headers()
                ),
            ));
        }
        let mut seen: BTreeMap<(String, Option<String>), usize> = BTreeMap::new();
        let mut rows = Vec::new();
        for r in 0..table.rows.len() {
            let key = (
                well_key(table.text(r, well)),
                stage.map(|s| stage_key(table.text(r, s))),
            );
            if let Some(first) = seen.insert(key, table.line(r)) {
                return Err(table.error(
                    table.line(r),
                    format!("repeats the well (and stage) of line {first}; keep one row"),
                ));
            }
            rows.push(OutcomeRow {
                well: table.text(r, well).to_string(),
                stage: stage.map(|s| table.text(r, s).to_string()),
                line: table.line(r),
                values: columns
                    .iter()
                    .map(|&c| table.text(r, c).parse().unwrap_or(f64::NAN))
                    .collect(),
            });
        }
        Ok(Self {
            path: path.to_path_buf(),
            level,
            names,
            rows,
            notes,
        })
    }
}

impl OutcomeTable {
    /// The outcome values of `well`'s stage `stage` (stage-level tables), matched as the join
    /// matches them.
    pub fn stage_values(&self, well: &str, stage: &str) -> Option<&[f64]> {
        self.rows
            .iter()
            .find(|r| {
                well_key(&r.well) == well_key(well)
                    && r.stage.as_deref().map(stage_key) == Some(stage_key(stage))
            })
            .map(|r| r.values.as_slice())
    }
}

/// Well names match ignoring case and surrounding blanks.
fn well_key(name: &str) -> String {
    name.trim().to_lowercase()
}

/// Stage labels match as written, except that whole numbers match in any spelling (`3`,
/// `03`, `3.0`).
fn stage_key(label: &str) -> String {
    match label.trim().parse::<f64>() {
        Ok(v) if v.fract() == 0.0 && v.abs() < 1e9 => format!("{}", v as i64),
        _ => label.trim().to_lowercase(),
    }
}

/// One stage's corridor metrics, as the stages job computed them.
#[derive(Clone, Debug, PartialEq)]
pub struct StageMetrics {
    /// Well name.
    pub well: String,
    /// Stage label.
    pub stage: String,
    /// Measured depth of the stage's middle (orders the stages along the well).
    pub md_mid: f64,
    /// Stage length along the hole, in the well's md unit.
    pub length: f64,
    /// One value per metric name (NaN when undefined).
    pub values: Vec<f64>,
}

/// One test: an outcome column against a metric.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct OutcomeTest {
    /// Outcome column as written.
    pub outcome: String,
    /// Stage metric.
    pub metric: String,
    /// Stage (along wells) or well (across wells).
    pub level: Level,
    /// Pairs tested.
    pub n: usize,
    /// Spearman's rho: at stage level each well's rho along the well, averaged weighted by
    /// its stage count; at well level the rho across wells.
    pub rho: f64,
    /// Lower end of the 95% bootstrap interval.
    pub ci_low: f64,
    /// Upper end.
    pub ci_high: f64,
    /// Two-sided permutation p-value.
    pub p_value: f64,
    /// The p-value adjusted for every test of the run, stage and well level together
    /// (Benjamini-Hochberg, [`false_discovery_adjusted`]): the false discovery rate at which
    /// this relation would count as a finding.
    pub q_value: f64,
}

/// A (metric, outcome, well index) point of a scatter plot.
pub type GroupedPoint = (f64, f64, usize);

/// The pairs behind the tests of one outcome column, for its scatter plot.
#[derive(Clone, Debug, PartialEq)]
pub struct OutcomePlot {
    /// Outcome column (as tested).
    pub outcome: String,
    /// Stage or well level.
    pub level: Level,
    /// Per metric: its name and the (metric, outcome, well index) points.
    pub panels: Vec<(String, Vec<GroupedPoint>)>,
}

/// The outcome analysis of a stages run.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct OutcomeAnalysis {
    /// Every test, stage level first, in outcome then metric order.
    pub tests: Vec<OutcomeTest>,
    /// The points of every outcome column, for the plots.
    #[serde(skip)]
    pub plots: Vec<OutcomePlot>,
    /// Well names in the order of the plots' well indices.
    pub wells: Vec<String>,
    /// Joins, skipped columns, thin results.
    pub notes: Vec<String>,
    /// Stage rows joined to a completion row.
    pub stages_joined: usize,
    /// Wells joined to a production row.
    pub wells_joined: usize,
}

/// Joins the tables to the stage rows and runs every outcome-metric test; `per_length`
/// divides production values by each well's completed length (sum of its stage lengths).
pub fn analyse(
    metric_names: &[String],
    stages: &[StageMetrics],
    completions: Option<&OutcomeTable>,
    production: Option<&OutcomeTable>,
    per_length: bool,
) -> OutcomeAnalysis {
    let mut analysis = OutcomeAnalysis::default();
    if let Some(table) = completions {
        analysis.notes.extend(table.notes.iter().cloned());
        stage_tests(metric_names, stages, table, &mut analysis);
    }
    if let Some(table) = production {
        analysis.notes.extend(table.notes.iter().cloned());
        well_tests(metric_names, stages, table, per_length, &mut analysis);
    }
    let p_values: Vec<f64> = analysis.tests.iter().map(|t| t.p_value).collect();
    for (test, q) in analysis
        .tests
        .iter_mut()
        .zip(false_discovery_adjusted(&p_values))
    {
        test.q_value = q;
    }
    analysis
}

fn stage_tests(
    metric_names: &[String],
    stages: &[StageMetrics],
    table: &OutcomeTable,
    analysis: &mut OutcomeAnalysis,
) {
    let index: BTreeMap<(String, String), &OutcomeRow> = table
        .rows
        .iter()
        .map(|r| {
            let stage = r.stage.as_deref().unwrap_or_default();
            ((well_key(&r.well), stage_key(stage)), r)
        })
        .collect();
    let key = |s: &StageMetrics| (well_key(&s.well), stage_key(&s.stage));
    let missing: Vec<String> = stages
        .iter()
        .filter(|s| !index.contains_key(&key(s)))
        .map(|s| format!("{} {}", s.well, s.stage))
        .collect();
    let known: std::collections::BTreeSet<(String, String)> = stages.iter().map(key).collect();
    let extra: Vec<String> = table
        .rows
        .iter()
        .filter(|r| {
            let stage = r.stage.as_deref().unwrap_or_default();
            !known.contains(&(well_key(&r.well), stage_key(stage)))
        })
        .map(|r| {
            format!(
                "line {} ({} {})",
                r.line,
                r.well,
                r.stage.as_deref().unwrap_or("")
            )
        })
        .collect();
    if !missing.is_empty() {
        analysis.notes.push(format!(
            "{}: no completion row for {} stage(s): {}",
            table.path.display(),
            missing.len(),
            abbreviated(&missing)
        ));
    }
    if !extra.is_empty() {
        analysis.notes.push(format!(
            "{}: {} row(s) match no stage of the run: {}",
            table.path.display(),
            extra.len(),
            abbreviated(&extra)
        ));
    }
    // Wells in order of first appearance, each one's stages ordered heel to toe by md.
    let mut wells: Vec<&str> = Vec::new();
    for s in stages {
        if !wells.contains(&s.well.as_str()) {
            wells.push(&s.well);
        }
    }
    let ordered: Vec<Vec<&StageMetrics>> = wells
        .iter()
        .map(|w| {
            let mut own: Vec<&StageMetrics> = stages
                .iter()
                .filter(|s| s.well == *w && index.contains_key(&key(s)))
                .collect();
            own.sort_by(|a, b| a.md_mid.total_cmp(&b.md_mid));
            own
        })
        .collect();
    analysis.stages_joined = ordered.iter().map(Vec::len).sum();
    analysis.wells = wells.iter().map(|w| w.to_string()).collect();
    let (index, key) = (&index, &key);
    for (o, outcome) in table.names.iter().enumerate() {
        analysis.plots.push(OutcomePlot {
            outcome: outcome.clone(),
            level: Level::Stage,
            panels: metric_names
                .iter()
                .enumerate()
                .map(|(m, metric)| {
                    let points = ordered
                        .iter()
                        .enumerate()
                        .flat_map(|(w, own)| {
                            own.iter()
                                .map(move |s| (s.values[m], index[&key(s)].values[o], w))
                        })
                        .collect();
                    (metric.clone(), points)
                })
                .collect(),
        });
        for (m, metric) in metric_names.iter().enumerate() {
            let groups: Vec<(Vec<f64>, Vec<f64>)> = ordered
                .iter()
                .map(|own| {
                    own.iter()
                        .map(|s| (s.values[m], index[&key(s)].values[o]))
                        .unzip()
                })
                .collect();
            let seed = seed_of(Level::Stage, o, m);
            let test = rank_test(
                &groups,
                Dependence::Ordered,
                LEVEL,
                RESAMPLES,
                PERMUTATIONS,
                seed,
            );
            push(analysis, outcome, metric, Level::Stage, test);
        }
    }
    note_thin(analysis, Level::Stage, analysis.stages_joined, wells.len());
}

fn well_tests(
    metric_names: &[String],
    stages: &[StageMetrics],
    table: &OutcomeTable,
    per_length: bool,
    analysis: &mut OutcomeAnalysis,
) {
    let mut joined = Vec::new();
    let mut joined_wells = Vec::new();
    for row in &table.rows {
        let own: Vec<&StageMetrics> = stages
            .iter()
            .filter(|s| well_key(&s.well) == well_key(&row.well))
            .collect();
        if own.is_empty() {
            analysis.notes.push(format!(
                "{}: line {}: well {} has no stages in this run",
                table.path.display(),
                row.line,
                row.well
            ));
            continue;
        }
        let means: Vec<f64> = (0..metric_names.len())
            .map(|m| {
                let v: Vec<f64> = own
                    .iter()
                    .map(|s| s.values[m])
                    .filter(|v| v.is_finite())
                    .collect();
                if v.is_empty() {
                    f64::NAN
                } else {
                    v.iter().sum::<f64>() / v.len() as f64
                }
            })
            .collect();
        let completed: f64 = own.iter().map(|s| s.length).sum();
        let outcomes: Vec<f64> = row
            .values
            .iter()
            .map(|v| if per_length { v / completed } else { *v })
            .collect();
        joined.push((means, outcomes));
        joined_wells.push(row.well.clone());
    }
    analysis.wells_joined = joined.len();
    if analysis.wells.is_empty() {
        analysis.wells = joined_wells.clone();
    }
    let well_index = |name: &str| {
        analysis
            .wells
            .iter()
            .position(|w| well_key(w) == well_key(name))
            .unwrap_or(0)
    };
    let indices: Vec<usize> = joined_wells.iter().map(|w| well_index(w)).collect();
    for (o, name) in table.names.iter().enumerate() {
        let outcome = if per_length {
            format!("{name} per completed length")
        } else {
            name.clone()
        };
        analysis.plots.push(OutcomePlot {
            outcome: outcome.clone(),
            level: Level::Well,
            panels: metric_names
                .iter()
                .enumerate()
                .map(|(m, metric)| {
                    let points = joined
                        .iter()
                        .zip(&indices)
                        .map(|((x, y), &w)| (x[m], y[o], w))
                        .collect();
                    (format!("{metric} (well mean)"), points)
                })
                .collect(),
        });
        for (m, metric) in metric_names.iter().enumerate() {
            let pairs: (Vec<f64>, Vec<f64>) = joined.iter().map(|(x, y)| (x[m], y[o])).unzip();
            let seed = seed_of(Level::Well, o, m);
            let test = rank_test(
                &[pairs],
                Dependence::Independent,
                LEVEL,
                RESAMPLES,
                PERMUTATIONS,
                seed,
            );
            push(
                analysis,
                &outcome,
                &format!("{metric} (well mean)"),
                Level::Well,
                test,
            );
        }
    }
    note_thin(analysis, Level::Well, joined.len(), joined.len());
}

fn push(
    analysis: &mut OutcomeAnalysis,
    outcome: &str,
    metric: &str,
    level: Level,
    test: Option<RankTest>,
) {
    if let Some(t) = test {
        analysis.tests.push(OutcomeTest {
            outcome: outcome.to_string(),
            metric: metric.to_string(),
            level,
            n: t.n,
            rho: t.rho,
            ci_low: t.ci.0,
            ci_high: t.ci.1,
            p_value: t.p_value,
            // Set once every test of the run is known.
            q_value: f64::NAN,
        });
    }
}

/// Says plainly how few units a level's results rest on.
fn note_thin(analysis: &mut OutcomeAnalysis, level: Level, units: usize, wells: usize) {
    let what = match level {
        Level::Stage => format!("{units} stages in {wells} well(s)"),
        Level::Well => format!("{units} well(s)"),
    };
    if units < FEW {
        analysis.notes.push(format!(
            "{:?}-level results rest on only {what}: too few to read as more than a hint",
            level
        ));
    } else {
        analysis
            .notes
            .push(format!("{:?}-level results rest on {what}", level));
    }
}

/// A fixed seed per test, so results do not depend on which tests run or in which order.
fn seed_of(level: Level, outcome: usize, metric: usize) -> u64 {
    let l = match level {
        Level::Stage => 1u64,
        Level::Well => 2,
    };
    (l << 40) ^ ((outcome as u64) << 20) ^ metric as u64
}

fn abbreviated(items: &[String]) -> String {
    const SHOWN: usize = 8;
    if items.len() <= SHOWN {
        items.join(", ")
    } else {
        format!(
            "{}, ... ({} more)",
            items[..SHOWN].join(", "),
            items.len() - SHOWN
        )
    }
}

impl OutcomeAnalysis {
    /// `outcomes.csv`: one row per test (`outcome, metric, level, n, rho, ci_low, ci_high,
    /// p_value, q_value`).
    pub fn csv(&self) -> Result<String> {
        let mut writer = csv::Writer::from_writer(Vec::new());
        for t in &self.tests {
            writer
                .serialize(t)
                .map_err(|e| FlexureError::Parameter(format!("outcomes.csv: {e}")))?;
        }
        let bytes = writer
            .into_inner()
            .map_err(|e| FlexureError::Parameter(format!("outcomes.csv: {e}")))?;
        Ok(String::from_utf8_lossy(&bytes).to_string())
    }
}

/// Plot size of one scatter panel and the room around it, pixels.
const PANEL: (f32, f32) = (300.0, 190.0);
const PANEL_ROOM: (f32, f32) = (100.0, 120.0);
const PANELS_ACROSS: usize = 3;

impl OutcomeAnalysis {
    /// One figure per plotted outcome column: a scatter panel per metric (points coloured by
    /// well, the least-squares line, rho with its interval and p-value), the wells' colour key
    /// and the caution; named `outcome_<level>_<k>` (k counts the outcome columns).
    pub fn figures(&self) -> Vec<(String, Figure)> {
        self.plots
            .iter()
            .enumerate()
            .map(|(k, plot)| {
                let level = match plot.level {
                    Level::Stage => "stage",
                    Level::Well => "well",
                };
                (format!("outcome_{level}_{}", k + 1), self.figure(plot))
            })
            .collect()
    }

    fn figure(&self, plot: &OutcomePlot) -> Figure {
        let rows = plot.panels.len().div_ceil(PANELS_ACROSS).max(1);
        let width = 40.0 + PANELS_ACROSS as f32 * (PANEL.0 + PANEL_ROOM.0);
        let top = 132.0;
        let height = top + rows as f32 * (PANEL.1 + PANEL_ROOM.1) + 90.0;
        let mut fig = Figure::new(width as u32, height as u32);
        let what = match plot.level {
            Level::Stage => "each point a stage",
            Level::Well => "each point a well",
        };
        fig.text(
            20.0,
            28.0,
            17.0,
            format!("{} against the corridor metrics ({what})", plot.outcome),
            Anchor::Start,
        );
        let mut x = 20.0;
        for (w, name) in self.wells.iter().enumerate() {
            fig.marks.push(Mark::Polygon {
                points: vec![(x, 44.0), (x + 10.0, 44.0), (x + 10.0, 54.0), (x, 54.0)],
                fill: group_colour(w),
                stroke: None,
            });
            fig.text(x + 14.0, 53.0, 12.0, name.clone(), Anchor::Start);
            x += 24.0 + 7.5 * name.len() as f32;
        }
        for (p, (metric, points)) in plot.panels.iter().enumerate() {
            let test = self.tests.iter().find(|t| {
                t.outcome == plot.outcome && &t.metric == metric && t.level == plot.level
            });
            let note = match test {
                Some(t) => format!(
                    "rho {:.2} [{:.2}, {:.2}], p {:.3}, n {}",
                    t.rho, t.ci_low, t.ci_high, t.p_value, t.n
                ),
                None => "too few pairs for a test".to_string(),
            };
            let (col, row) = (p % PANELS_ACROSS, p / PANELS_ACROSS);
            let origin = (
                60.0 + col as f32 * (PANEL.0 + PANEL_ROOM.0),
                top + row as f32 * (PANEL.1 + PANEL_ROOM.1),
            );
            draw_panel(
                &mut fig,
                &Panel {
                    title: metric,
                    note: &note,
                    x_title: metric,
                    y_title: &plot.outcome,
                    points,
                },
                origin,
                PANEL,
            );
        }
        let mut y = height - 60.0;
        for line in super::stages::wrap(OUTCOME_CAUTION, 150) {
            fig.text(20.0, y, 11.0, line, Anchor::Start);
            y += 16.0;
        }
        fig
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
        let p = dir.join(name);
        std::fs::write(&p, text).unwrap();
        p
    }

    #[test]
    fn completion_tables_keep_numeric_columns_and_match_stage_spellings() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(
            dir.path(),
            "c.csv",
            "Well Name;Stage No;Breakdown (MPa);Date;ISIP (MPa)\nA-1;01;55.2;2026-01-02;40\nA-1;2;;2026-01-03;41\n",
        );
        let t = OutcomeTable::read(&p, Level::Stage).unwrap();
        assert_eq!(t.names, vec!["Breakdown (MPa)", "ISIP (MPa)"]);
        assert!(t.notes[0].contains("'Date' is not numeric"));
        assert!(t.rows[1].values[0].is_nan());
        assert_eq!(stage_key(&t.rows[0].stage.clone().unwrap()), "1");
        let dup = write(dir.path(), "d.csv", "well,stage,p\nA,1,2\na ,1.0,3\n");
        let e = OutcomeTable::read(&dup, Level::Stage)
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 3") && e.contains("line 2"), "{e}");
        let none = write(dir.path(), "n.csv", "well,stage,comment\nA,1,ok\n");
        let e = OutcomeTable::read(&none, Level::Stage)
            .unwrap_err()
            .to_string();
        assert!(e.contains("no numeric outcome column"), "{e}");
    }

    #[test]
    fn joins_report_missing_and_extra_stages() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(
            dir.path(),
            "c.csv",
            "well,stage,rate\nA,1,10\nA,2,11\nA,9,12\n",
        );
        let t = OutcomeTable::read(&p, Level::Stage).unwrap();
        let stages: Vec<StageMetrics> = (1..=4)
            .map(|k| StageMetrics {
                well: "A".into(),
                stage: k.to_string(),
                md_mid: k as f64 * 100.0,
                length: 100.0,
                values: vec![k as f64],
            })
            .collect();
        let a = analyse(&["angle".into()], &stages, Some(&t), None, false);
        assert_eq!(a.stages_joined, 2);
        assert!(a
            .notes
            .iter()
            .any(|n| n.contains("no completion row for 2 stage(s): A 3, A 4")));
        assert!(a.notes.iter().any(|n| n.contains("line 4 (A 9)")));
        assert!(a.tests.is_empty(), "two pairs make no test");
        assert!(a.notes.iter().any(|n| n.contains("only 2 stages")));
    }
}
