//! The wells of a stages job: one [`WellInput`] per well, from a well list file (TOML, or CSV
//! with the same columns) and from command-line values bound to wells by name
//! ([`WellBindings`]). Relative paths in a well list resolve against the list's folder.
//!
//! Well list keys (TOML `[[well]]` tables, or CSV columns): `name`, `well_file`, `stage_file`,
//! `wellhead_x`, `wellhead_y`, `kb`, `tie_in_md`, `tie_in_x`, `tie_in_y`, `tie_in_tvd`.
//! Unknown keys are refused naming the key and line.

use crate::error::{FlexureError, Result};
use crate::io::table::{ColumnSpec, Table};
use crate::wells::trajectory::TieIn;
use serde::Deserialize;
use std::path::{Path, PathBuf};

/// One well's inputs.
#[derive(Clone, Debug, PartialEq)]
pub struct WellInput {
    /// Well name (file names of its outputs are made from it).
    pub name: String,
    /// Path (`md,x,y[,tvd|tvdss]`) or deviation survey (`md,inc,azi`) table.
    pub well: PathBuf,
    /// Stage table (`stage,md_top,md_base`).
    pub stages: PathBuf,
    /// Wellhead (x, y), CRS units, where a survey starting at md 0 starts.
    pub wellhead: Option<(f64, f64)>,
    /// Elevation of the measured-depth reference (KB) above the depth datum, in the well's
    /// measured-depth unit: TVD below datum = TVD below KB - kb (`None`: 0).
    pub kb: Option<f64>,
    /// Tie-in of a survey starting below md 0.
    pub tie_in: Option<TieIn>,
}

impl WellInput {
    /// A well named after its file's stem, with no wellhead, KB 0 and no tie-in.
    pub fn new(well: impl Into<PathBuf>, stages: impl Into<PathBuf>) -> Self {
        let well = well.into();
        Self {
            name: file_stem(&well),
            well,
            stages: stages.into(),
            wellhead: None,
            kb: None,
            tie_in: None,
        }
    }
}

fn file_stem(path: &Path) -> String {
    path.file_stem()
        .unwrap_or_default()
        .to_string_lossy()
        .to_string()
}

/// One well of a well list, as written.
#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct WellEntry {
    name: Option<String>,
    well_file: Option<PathBuf>,
    stage_file: Option<PathBuf>,
    wellhead_x: Option<f64>,
    wellhead_y: Option<f64>,
    kb: Option<f64>,
    tie_in_md: Option<f64>,
    tie_in_x: Option<f64>,
    tie_in_y: Option<f64>,
    tie_in_tvd: Option<f64>,
}

/// A TOML well list: `[[well]]` tables.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct WellListFile {
    well: Vec<WellEntry>,
}

/// Columns of a CSV well list (the TOML keys).
const LIST_COLUMNS: [&str; 10] = [
    "name",
    "well_file",
    "stage_file",
    "wellhead_x",
    "wellhead_y",
    "kb",
    "tie_in_md",
    "tie_in_x",
    "tie_in_y",
    "tie_in_tvd",
];

/// Reads a well list: TOML when the file name ends in `.toml`, else CSV with the same
/// columns (empty fields are absent values). Relative paths resolve against the list's
/// folder; a well without a name takes its well file's stem.
pub fn read_well_list(path: &Path) -> Result<Vec<WellInput>> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        FlexureError::input(
            path,
            format!("cannot read the well list ({e}): check the name"),
        )
    })?;
    parse_well_list(&text, path)
}

/// Parses the well list `text` read from `path` (see [`read_well_list`]; `path` decides TOML
/// or CSV, names the list in messages and is the base of relative paths). Pure.
pub fn parse_well_list(text: &str, path: &Path) -> Result<Vec<WellInput>> {
    let is_toml = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("toml"));
    let entries: Vec<(String, WellEntry)> = if is_toml {
        let list: WellListFile = toml::from_str(text).map_err(|e| {
            let line = e.span().map_or(1, |s| {
                let before = &text.as_bytes()[..s.start.min(text.len())];
                before.iter().filter(|&&b| b == b'\n').count() + 1
            });
            let message: Vec<&str> = e.message().split_whitespace().collect();
            FlexureError::input(path, format!("line {line}: {}", message.join(" ")))
        })?;
        list.well
            .into_iter()
            .enumerate()
            .map(|(k, e)| (format!("[[well]] number {}", k + 1), e))
            .collect()
    } else {
        csv_entries(&Table::parse(text, path)?)?
    };
    if entries.is_empty() {
        return Err(FlexureError::input(
            path,
            "lists no well: add [[well]] tables",
        ));
    }
    let base = path.parent().unwrap_or(Path::new(""));
    entries
        .into_iter()
        .map(|(at, e)| {
            entry_input(e, base).map_err(|why| FlexureError::input(path, format!("{at}: {why}")))
        })
        .collect()
}

/// The rows of a CSV well list as entries, each with its line.
fn csv_entries(table: &Table) -> Result<Vec<(String, WellEntry)>> {
    if let Some(c) = table.columns.iter().find(|c| {
        c.unit.is_some()
            || !LIST_COLUMNS
                .iter()
                .any(|k| crate::io::table::header_key(k).0 == c.key)
    }) {
        return Err(table.error(
            table.header_line,
            format!(
                "unknown column '{}': the columns are {} (lengths in the well's md unit, names without a unit)",
                c.header,
                LIST_COLUMNS.join(", ")
            ),
        ));
    }
    let spec = |name: &'static str| ColumnSpec {
        name,
        variants: std::slice::from_ref(
            LIST_COLUMNS
                .iter()
                .find(|k| **k == name)
                .expect("a list column"),
        ),
    };
    let mut cols = Vec::new();
    for name in LIST_COLUMNS {
        cols.push(table.find(&spec(name))?);
    }
    let text = |r: usize, k: usize| cols[k].map(|c| table.text(r, c)).filter(|t| !t.is_empty());
    let number = |r: usize, k: usize| -> Result<Option<f64>> {
        match text(r, k) {
            Some(_) => table.number(r, cols[k].expect("present")).map(Some),
            None => Ok(None),
        }
    };
    (0..table.rows.len())
        .map(|r| {
            Ok((
                format!("line {}", table.line(r)),
                WellEntry {
                    name: text(r, 0).map(str::to_string),
                    well_file: text(r, 1).map(PathBuf::from),
                    stage_file: text(r, 2).map(PathBuf::from),
                    wellhead_x: number(r, 3)?,
                    wellhead_y: number(r, 4)?,
                    kb: number(r, 5)?,
                    tie_in_md: number(r, 6)?,
                    tie_in_x: number(r, 7)?,
                    tie_in_y: number(r, 8)?,
                    tie_in_tvd: number(r, 9)?,
                },
            ))
        })
        .collect()
}

/// The input of one entry, paths resolved against `base`; the error says what is missing.
fn entry_input(e: WellEntry, base: &Path) -> std::result::Result<WellInput, String> {
    let numbers = [
        ("wellhead_x", e.wellhead_x),
        ("wellhead_y", e.wellhead_y),
        ("kb", e.kb),
        ("tie_in_md", e.tie_in_md),
        ("tie_in_x", e.tie_in_x),
        ("tie_in_y", e.tie_in_y),
        ("tie_in_tvd", e.tie_in_tvd),
    ];
    // TOML has nan and inf; a CSV list's numbers are checked finite as they are read.
    if let Some((key, Some(v))) = numbers
        .iter()
        .find(|(_, v)| v.is_some_and(|v| !v.is_finite()))
    {
        return Err(format!("{key} = {v} is not a finite number: give a number"));
    }
    if e.name.as_deref().is_some_and(|n| n.trim().is_empty()) {
        return Err(
            "the name is empty: give the well a name, or leave name out to use its file's".into(),
        );
    }
    let well = e
        .well_file
        .ok_or("no well_file: give the well's survey or path table")?;
    let stages = e
        .stage_file
        .ok_or("no stage_file: give the well's stage table")?;
    let wellhead = match (e.wellhead_x, e.wellhead_y) {
        (Some(x), Some(y)) => Some((x, y)),
        (None, None) => None,
        _ => return Err("give both wellhead_x and wellhead_y, or neither".into()),
    };
    let tie_in = match (e.tie_in_x, e.tie_in_y, e.tie_in_tvd) {
        (Some(x), Some(y), Some(tvd)) => Some(TieIn {
            md: e.tie_in_md,
            x,
            y,
            tvd,
        }),
        (None, None, None) if e.tie_in_md.is_none() => None,
        _ => {
            return Err(
                "give tie_in_x, tie_in_y and tie_in_tvd together (tie_in_md optional)".into(),
            )
        }
    };
    let well = base.join(well);
    Ok(WellInput {
        name: e.name.unwrap_or_else(|| file_stem(&well)),
        well,
        stages: base.join(stages),
        wellhead,
        kb: e.kb,
        tie_in,
    })
}

/// A command-line value for one well (`NAME=VALUE`) or bare (`VALUE`).
#[derive(Clone, Debug, PartialEq)]
pub struct Named<T> {
    /// The well it is for; `None` when given bare.
    pub name: Option<String>,
    /// The value.
    pub value: T,
}

impl<T> Named<T> {
    /// Splits `NAME=VALUE` (a name holds no `/` or `\`, so a path with `=` stays a path) and
    /// parses the value with `parse`.
    pub fn parse(
        text: &str,
        parse: impl Fn(&str) -> std::result::Result<T, String>,
    ) -> std::result::Result<Self, String> {
        match text.split_once('=') {
            Some((name, value)) if !name.trim().is_empty() && !name.contains(['/', '\\']) => {
                Ok(Self {
                    name: Some(name.trim().to_string()),
                    value: parse(value)?,
                })
            }
            Some(("", _)) => Err(format!("'{text}' has an empty well name before '='")),
            _ => Ok(Self {
                name: None,
                value: parse(text)?,
            }),
        }
    }
}

/// `n` comma-separated finite numbers (e.g. `X,Y`).
pub fn parse_numbers(text: &str, n: usize) -> std::result::Result<Vec<f64>, String> {
    let v: Option<Vec<f64>> = text
        .split(',')
        .map(|p| p.trim().parse::<f64>().ok().filter(|v| v.is_finite()))
        .collect();
    v.filter(|v| v.len() == n)
        .ok_or_else(|| format!("'{text}' is not {n} comma-separated numbers"))
}

/// Command-line well values before they are bound to wells by name.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct WellBindings {
    /// `--well NAME=FILE` or `--well FILE` (named after the file's stem).
    pub wells: Vec<Named<PathBuf>>,
    /// `--stages NAME=FILE`, or bare in `--well` order.
    pub stages: Vec<Named<PathBuf>>,
    /// `--wellhead NAME=X,Y`; bare only with one well.
    pub wellheads: Vec<Named<(f64, f64)>>,
    /// `--kb NAME=VALUE`; a bare value is for every well not named.
    pub kbs: Vec<Named<f64>>,
    /// `--tie-in NAME=X,Y,TVD` (TVD below KB at the first station); bare only with one well.
    pub tie_ins: Vec<Named<(f64, f64, f64)>>,
}

impl WellBindings {
    /// The wells of `listed` (from a well list) and of `--well`, with the values bound by
    /// name. Refused: a value naming no well, a value given twice for one well, bare values
    /// that are ambiguous (a bare wellhead or tie-in with several wells, bare and named stage
    /// tables mixed or in a different number than `--well`), a well without a stage table.
    pub fn bind(&self, listed: Vec<WellInput>) -> Result<Vec<WellInput>> {
        let mut wells = listed;
        let first_flag_well = wells.len();
        for w in &self.wells {
            let mut input = WellInput::new(&w.value, PathBuf::new());
            if let Some(name) = &w.name {
                input.name = name.clone();
            }
            wells.push(input);
        }
        self.bind_stages(&mut wells, first_flag_well)?;
        bind_each(
            &mut wells,
            &self.wellheads,
            "--wellhead",
            false,
            |w| w.wellhead.is_some(),
            |w, v| w.wellhead = Some(*v),
        )?;
        bind_each(
            &mut wells,
            &self.tie_ins,
            "--tie-in",
            false,
            |w| w.tie_in.is_some(),
            |w, &(x, y, tvd)| {
                w.tie_in = Some(TieIn {
                    md: None,
                    x,
                    y,
                    tvd,
                })
            },
        )?;
        bind_each(
            &mut wells,
            &self.kbs,
            "--kb",
            true,
            |w| w.kb.is_some(),
            |w, v| w.kb = Some(*v),
        )?;
        if let Some(w) = wells.iter().find(|w| w.stages.as_os_str().is_empty()) {
            return Err(FlexureError::Parameter(format!(
                "well {} has no stage table: give --stages {}=FILE",
                w.name, w.name
            )));
        }
        Ok(wells)
    }

    fn bind_stages(&self, wells: &mut [WellInput], first_flag_well: usize) -> Result<()> {
        let bare = self.stages.iter().filter(|s| s.name.is_none()).count();
        if bare > 0 && bare < self.stages.len() {
            return Err(FlexureError::Parameter(
                "give every --stages as NAME=FILE, or every one bare in --well order".into(),
            ));
        }
        if bare > 0 {
            let flagged = wells.len() - first_flag_well;
            if bare != flagged {
                return Err(FlexureError::Parameter(format!(
                    "{flagged} --well and {bare} --stages given: give one stage table per well (or --stages NAME=FILE)"
                )));
            }
            for (w, s) in wells[first_flag_well..].iter_mut().zip(&self.stages) {
                w.stages = s.value.clone();
            }
            return Ok(());
        }
        bind_each(
            wells,
            &self.stages,
            "--stages",
            false,
            |w| !w.stages.as_os_str().is_empty(),
            |w, v| w.stages = v.clone(),
        )
    }
}

/// Applies each of `values` to the well it names, refusing a well that already has one
/// (`is_set`); a bare value applies to the only well, or, when `bare_for_all`, to every well
/// that has none.
fn bind_each<T>(
    wells: &mut [WellInput],
    values: &[Named<T>],
    option: &str,
    bare_for_all: bool,
    is_set: impl Fn(&WellInput) -> bool,
    set: impl Fn(&mut WellInput, &T),
) -> Result<()> {
    let listed = wells
        .iter()
        .map(|w| w.name.as_str())
        .collect::<Vec<_>>()
        .join(", ");
    let twice = |name: &str| {
        FlexureError::Parameter(format!(
            "well {name} is given {option} twice (or also in the well list): give it once"
        ))
    };
    for v in values {
        let Some(name) = &v.name else { continue };
        let w = wells.iter_mut().find(|w| &w.name == name).ok_or_else(|| {
            FlexureError::Parameter(format!(
                "{option} names well '{name}', but no well has that name (wells: {listed})"
            ))
        })?;
        if is_set(w) {
            return Err(twice(name));
        }
        set(w, &v.value);
    }
    let bare: Vec<&T> = values
        .iter()
        .filter(|v| v.name.is_none())
        .map(|v| &v.value)
        .collect();
    match (bare.as_slice(), wells) {
        ([], _) => Ok(()),
        ([v], wells) if bare_for_all => {
            wells.iter_mut().filter(|w| !is_set(w)).for_each(|w| set(w, v));
            Ok(())
        }
        ([v], [w]) => {
            if is_set(w) {
                return Err(twice(&w.name));
            }
            set(w, v);
            Ok(())
        }
        ([_], wells) => Err(FlexureError::Parameter(format!(
            "{option} without a well name is ambiguous with {} wells ({listed}): give {option} NAME=...",
            wells.len()
        ))),
        (_, _) => Err(FlexureError::Parameter(format!(
            "{option} is given {} times without a well name: give {option} NAME=... for each",
            bare.len()
        ))),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn named<T>(name: &str, value: T) -> Named<T> {
        Named {
            name: Some(name.into()),
            value,
        }
    }

    fn bare<T>(value: T) -> Named<T> {
        Named { name: None, value }
    }

    #[test]
    fn values_bind_by_name_not_by_position() {
        // The case: a path well listed first must not take the survey's wellhead.
        let b = WellBindings {
            wells: vec![
                bare("a/path_5h.csv".into()),
                named("s3", "b/survey.csv".into()),
            ],
            stages: vec![bare("p.csv".into()), bare("s.csv".into())],
            wellheads: vec![named("s3", (1.0, 2.0))],
            kbs: vec![bare(25.0), named("path_5h", 10.0)],
            tie_ins: vec![],
        };
        let w = b.bind(vec![]).unwrap();
        assert_eq!(
            (w[0].name.as_str(), w[0].wellhead, w[0].kb),
            ("path_5h", None, Some(10.0))
        );
        assert_eq!(
            (w[1].name.as_str(), w[1].wellhead, w[1].kb),
            ("s3", Some((1.0, 2.0)), Some(25.0))
        );
        assert_eq!(w[1].stages, PathBuf::from("s.csv"));
        let err = |b: WellBindings| b.bind(vec![]).unwrap_err().to_string();
        let mut ambiguous = b.clone();
        ambiguous.wellheads = vec![bare((1.0, 2.0))];
        assert!(err(ambiguous).contains("--wellhead without a well name is ambiguous with 2 wells"));
        let mut unknown = b.clone();
        unknown.wellheads = vec![named("s7", (1.0, 2.0))];
        assert!(err(unknown).contains(
            "--wellhead names well 's7', but no well has that name (wells: path_5h, s3)"
        ));
        let mut twice = b.clone();
        twice.kbs.push(named("path_5h", 3.0));
        assert!(err(twice).contains("well path_5h is given --kb twice"));
        let mut missing = b.clone();
        missing.stages = vec![named("s3", "s.csv".into())];
        assert!(err(missing).contains("well path_5h has no stage table"));
        let mut mixed = b;
        mixed.stages = vec![named("s3", "s.csv".into()), bare("p.csv".into())];
        assert!(err(mixed).contains("give every --stages as NAME=FILE"));
        // One well: bare values are unambiguous.
        let one = WellBindings {
            wells: vec![bare("w.csv".into())],
            stages: vec![bare("st.csv".into())],
            wellheads: vec![bare((5.0, 6.0))],
            kbs: vec![],
            tie_ins: vec![bare((1.0, 2.0, 900.0))],
        };
        let w = one.bind(vec![]).unwrap();
        assert_eq!(w[0].wellhead, Some((5.0, 6.0)));
        assert_eq!(w[0].tie_in.unwrap().tvd, 900.0);
    }

    #[test]
    fn named_values_parse() {
        let p = |t: &str| Named::parse(t, |v| parse_numbers(v, 2));
        assert_eq!(p("w1=1,2").unwrap(), named("w1", vec![1.0, 2.0]));
        assert_eq!(p("-1.5,2").unwrap(), bare(vec![-1.5, 2.0]));
        assert!(p("w1=1")
            .unwrap_err()
            .contains("not 2 comma-separated numbers"));
        let f = |t: &str| Named::parse(t, |v| Ok(PathBuf::from(v)));
        assert_eq!(
            f("dir/a=b.csv").unwrap(),
            bare(PathBuf::from("dir/a=b.csv"))
        );
        assert_eq!(
            f("w=dir/a.csv").unwrap(),
            named("w", PathBuf::from("dir/a.csv"))
        );
    }

    #[test]
    fn well_lists_in_toml_and_csv_give_the_same_wells() {
        let dir = tempfile::tempdir().unwrap();
        let toml_path = dir.path().join("wells.toml");
        std::fs::write(
            &toml_path,
            "# two wells\n[[well]]\nname = \"s3\"\nwell_file = \"s3.csv\"\nstage_file = \"st/s3_stages.csv\"\nwellhead_x = 480900\nwellhead_y = 3902600.5\nkb = 25\n\n[[well]]\nwell_file = \"p5.csv\"\nstage_file = \"/abs/p5_stages.csv\"\ntie_in_md = 900\ntie_in_x = 1\ntie_in_y = 2\ntie_in_tvd = 880\n",
        )
        .unwrap();
        let csv_path = dir.path().join("wells.csv");
        std::fs::write(
            &csv_path,
            "name,well_file,stage_file,wellhead_x,wellhead_y,kb,tie_in_md,tie_in_x,tie_in_y,tie_in_tvd\ns3,s3.csv,st/s3_stages.csv,480900,3902600.5,25,,,,\n,p5.csv,/abs/p5_stages.csv,,,,900,1,2,880\n",
        )
        .unwrap();
        let from_toml = read_well_list(&toml_path).unwrap();
        assert_eq!(from_toml, read_well_list(&csv_path).unwrap());
        assert_eq!(from_toml[0].stages, dir.path().join("st/s3_stages.csv"));
        assert_eq!(from_toml[0].wellhead, Some((480_900.0, 3_902_600.5)));
        assert_eq!(from_toml[1].name, "p5");
        assert_eq!(from_toml[1].stages, PathBuf::from("/abs/p5_stages.csv"));
        assert_eq!(from_toml[1].tie_in.unwrap().md, Some(900.0));
        std::fs::write(
            &toml_path,
            "[[well]]\nwell_file = \"a.csv\"\nstage_file = \"b.csv\"\nwelhead_x = 1\n",
        )
        .unwrap();
        let e = read_well_list(&toml_path).unwrap_err().to_string();
        assert!(
            e.contains("wells.toml: line 4: unknown field `welhead_x`"),
            "{e}"
        );
        assert_eq!(e.lines().count(), 1);
        std::fs::write(
            &csv_path,
            "name,well_file,stage_file,kb_m\na,a.csv,b.csv,3\n",
        )
        .unwrap();
        let e = read_well_list(&csv_path).unwrap_err().to_string();
        assert!(
            e.contains("wells.csv: line 1: unknown column 'kb_m'"),
            "{e}"
        );
        std::fs::write(
            &csv_path,
            "name,well_file,stage_file,wellhead_x\na,a.csv,b.csv,3\n",
        )
        .unwrap();
        let e = read_well_list(&csv_path).unwrap_err().to_string();
        assert!(
            e.contains("line 2: give both wellhead_x and wellhead_y"),
            "{e}"
        );
    }

    #[test]
    fn toml_lists_refuse_nan_infinity_and_empty_names() {
        // Found by the reader audit: TOML floats include nan and inf (TOML 1.0, "Float"),
        // which a CSV list refuses and which would put a well at no position.
        let list = |body: &str| {
            parse_well_list(
                &format!("[[well]]\nwell_file = \"a.csv\"\nstage_file = \"b.csv\"\n{body}"),
                Path::new("w.toml"),
            )
        };
        for (body, says) in [
            (
                "kb = nan\n",
                "w.toml: [[well]] number 1: kb = NaN is not a finite number",
            ),
            (
                "wellhead_x = inf\nwellhead_y = 1\n",
                "wellhead_x = inf is not a finite number",
            ),
            (
                "tie_in_tvd = -inf\n",
                "tie_in_tvd = -inf is not a finite number",
            ),
            ("name = \" \"\n", "the name is empty"),
        ] {
            let e = list(body).unwrap_err().to_string();
            assert!(e.contains(says), "{body:?}: {e}");
        }
        assert_eq!(list("kb = 12\n").unwrap()[0].kb, Some(12.0));
    }
}
