//! Tolerant reading of small text tables (deviation surveys, well paths, stage tables, well
//! lists) with the `csv` crate: quoted fields; the delimiter (comma, tab, semicolon, or runs of
//! spaces and tabs) detected from the header line; `#` comment lines and blank lines skipped;
//! every row keeps its 1-based line number for messages.
//!
//! Header names are matched case-insensitively, ignoring `_`, `-`, `.`, spaces and a unit
//! suffix in parentheses or brackets (`MD (ft)`, `Inc [deg]`), which is kept as the column's
//! declared unit. A column is looked up by a [`ColumnSpec`]: its canonical name and the list
//! of header variants accepted for it.

use crate::error::{FlexureError, Result};
use std::path::{Path, PathBuf};

/// A column a reader looks for: the canonical name used in messages and the header variants
/// that name it (matched after [`header_key`] normalisation).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ColumnSpec {
    /// Canonical name, as messages and our own outputs spell it.
    pub name: &'static str,
    /// Accepted header names (any case, spacing, `_` or `-`).
    pub variants: &'static [&'static str],
}

/// One header cell: the text as written, its matching key and its declared unit.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Column {
    /// Header text as written (trimmed).
    pub header: String,
    /// Lower case, without `_`, `-`, `.`, spaces and the unit suffix.
    pub key: String,
    /// The unit suffix (`ft` from `MD (ft)`), if any.
    pub unit: Option<String>,
}

/// A table as read: its file (for messages), header line, columns and data rows.
#[derive(Clone, Debug, PartialEq)]
pub struct Table {
    /// The file the table came from.
    pub path: PathBuf,
    /// Line number of the header.
    pub header_line: usize,
    /// Header columns in order.
    pub columns: Vec<Column>,
    /// `(line number, fields)` of every data row, fields trimmed.
    pub rows: Vec<(usize, Vec<String>)>,
}

/// The delimiter of a header line: comma, tab or semicolon when the line holds one (in that
/// order of preference), else runs of whitespace (`None`).
fn delimiter(header: &str) -> Option<u8> {
    [b',', b'\t', b';']
        .into_iter()
        .find(|&d| header.as_bytes().contains(&d))
}

/// `line` with every run of spaces and tabs outside double quotes replaced by one space, and
/// trimmed (for whitespace-delimited tables).
fn collapse_whitespace(line: &str) -> String {
    let mut out = String::with_capacity(line.len());
    let mut quoted = false;
    let mut in_gap = false;
    for ch in line.trim().chars() {
        if ch == '"' {
            quoted = !quoted;
        }
        if !quoted && (ch == ' ' || ch == '\t') {
            if !in_gap {
                out.push(' ');
            }
            in_gap = true;
        } else {
            out.push(ch);
            in_gap = false;
        }
    }
    out
}

/// The trimmed fields of one line split at `delim` with the csv crate (quotes honoured);
/// `None` when the line is not a valid record (e.g. an unclosed quote).
fn split_line(line: &str, delim: u8) -> Option<Vec<String>> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .delimiter(delim)
        .from_reader(line.as_bytes());
    let record = reader.records().next()?.ok()?;
    Some(record.iter().map(str::to_string).collect())
}

/// Splits a header name into its matching key and unit suffix: `"Measured Depth (ft)"` gives
/// `("measureddepth", Some("ft"))`.
pub fn header_key(name: &str) -> (String, Option<String>) {
    let name = name.trim();
    let (base, unit) = match name
        .char_indices()
        .rev()
        .find(|&(_, c)| c == '(' || c == '[')
    {
        Some((at, open)) if name.ends_with(if open == '(' { ')' } else { ']' }) => (
            &name[..at],
            Some(name[at + 1..name.len() - 1].trim().to_string()),
        ),
        _ => (name, None),
    };
    let key = base
        .chars()
        .filter(|c| !matches!(c, '_' | '-' | '.' | ' ' | '\t'))
        .flat_map(char::to_lowercase)
        .collect();
    (key, unit.filter(|u| !u.is_empty()))
}

impl Table {
    /// Reads and parses the table in `path`.
    pub fn read(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path).map_err(|e| {
            FlexureError::input(path, format!("cannot read ({e}): check the file name"))
        })?;
        Self::parse(&text, path)
    }

    /// Parses `text` (from `path`, named in messages).
    pub fn parse(text: &str, path: &Path) -> Result<Self> {
        let text = text.strip_prefix('\u{feff}').unwrap_or(text);
        let lines: Vec<&str> = text.lines().collect();
        let skip = |l: &str| {
            let t = l.trim();
            t.is_empty() || t.starts_with('#')
        };
        let Some(header) = lines.iter().copied().find(|l| !skip(l)) else {
            return Err(FlexureError::input(
                path,
                "is empty: give a header line and rows",
            ));
        };
        let delim = delimiter(header);
        let mut records = Vec::new();
        for (k, l) in lines.iter().enumerate().filter(|(_, l)| !skip(l)) {
            let line = match delim {
                Some(_) => l.to_string(),
                None => collapse_whitespace(l),
            };
            let fields = split_line(&line, delim.unwrap_or(b' ')).ok_or_else(|| {
                FlexureError::input(
                    path,
                    format!(
                        "line {}: cannot read the row: check quotes and delimiters",
                        k + 1
                    ),
                )
            })?;
            records.push((k + 1, fields));
        }
        let (header_line, names) = records.remove(0);
        let columns = names
            .iter()
            .map(|h| {
                let (key, unit) = header_key(h);
                Column {
                    header: h.clone(),
                    key,
                    unit,
                }
            })
            .collect();
        if records.is_empty() {
            return Err(FlexureError::input(
                path,
                format!("line {header_line}: has a header but no rows"),
            ));
        }
        Ok(Self {
            path: path.to_path_buf(),
            header_line,
            columns,
            rows: records,
        })
    }

    /// Index of the column named by `spec`; `None` when absent. Two columns naming the same
    /// thing are refused, naming both.
    pub fn find(&self, spec: &ColumnSpec) -> Result<Option<usize>> {
        let keys: Vec<String> = spec.variants.iter().map(|v| header_key(v).0).collect();
        let found: Vec<usize> = (0..self.columns.len())
            .filter(|&i| keys.contains(&self.columns[i].key))
            .collect();
        match found[..] {
            [] => Ok(None),
            [i] => Ok(Some(i)),
            [a, b, ..] => Err(self.error(
                self.header_line,
                format!(
                    "columns '{}' and '{}' both give {}: keep one",
                    self.columns[a].header, self.columns[b].header, spec.name
                ),
            )),
        }
    }

    /// Index of the column named by `spec`; refused naming the accepted names when absent.
    pub fn require(&self, spec: &ColumnSpec) -> Result<usize> {
        self.find(spec)?.ok_or_else(|| {
            self.error(
                self.header_line,
                format!(
                    "no column '{}' (accepted names: {}; columns: {})",
                    spec.name,
                    spec.variants.join(", "),
                    self.headers()
                ),
            )
        })
    }

    /// The header texts joined with commas, for messages.
    pub fn headers(&self) -> String {
        self.columns
            .iter()
            .map(|c| c.header.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// The declared unit of column `col`, if any.
    pub fn unit(&self, col: usize) -> Option<&str> {
        self.columns[col].unit.as_deref()
    }

    /// The field of column `col` in row `row` (empty when the row is short).
    pub fn text(&self, row: usize, col: usize) -> &str {
        self.rows[row].1.get(col).map_or("", String::as_str)
    }

    /// The finite number in column `col` of row `row`; refused naming the file, line and
    /// column otherwise.
    pub fn number(&self, row: usize, col: usize) -> Result<f64> {
        let text = self.text(row, col);
        text.parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| {
                self.error(
                    self.rows[row].0,
                    format!(
                        "{} '{text}' is not a number: give a finite number",
                        self.columns[col].header
                    ),
                )
            })
    }

    /// Column `col` as numbers, one per row (see [`Table::number`]).
    pub fn numbers(&self, col: usize) -> Result<Vec<f64>> {
        (0..self.rows.len()).map(|r| self.number(r, col)).collect()
    }

    /// Line number of data row `row`.
    pub fn line(&self, row: usize) -> usize {
        self.rows[row].0
    }

    /// An input error about line `line` of this table.
    pub fn error(&self, line: usize, reason: impl std::fmt::Display) -> FlexureError {
        FlexureError::input(&self.path, format!("line {line}: {reason}"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MD: ColumnSpec = ColumnSpec {
        name: "md",
        variants: &["md", "measured depth", "meas depth"],
    };
    const INC: ColumnSpec = ColumnSpec {
        name: "inc",
        variants: &["inc", "incl", "inclination"],
    };

    fn parse(text: &str) -> Table {
        Table::parse(text, Path::new("t.csv")).unwrap()
    }

    #[test]
    fn delimiters_comments_quotes_and_line_numbers() {
        // Hand-checkable: the same two rows written five ways give the same numbers, with the
        // line numbers of the file (comments and blank lines counted).
        for text in [
            "md,inc\n100,1.5\n200,2.5\n",
            "# survey\n\nMD;Inc\n100;1.5\n\n# note\n200;2.5\n",
            "\"Measured Depth\"\tIncl\n100\t1.5\n200\t2.5\n",
            "  meas_depth    Inclination  \n 100   1.5\n200\t \t2.5\n",
            "\u{feff}\"MD (ft)\",\"Inc [deg]\"\n\"100\",1.5\n200,\"2.5\"\n",
        ] {
            let t = parse(text);
            let (md, inc) = (t.require(&MD).unwrap(), t.require(&INC).unwrap());
            assert_eq!(t.numbers(md).unwrap(), vec![100.0, 200.0], "{text:?}");
            assert_eq!(t.numbers(inc).unwrap(), vec![1.5, 2.5], "{text:?}");
        }
        let t = parse("# survey\n\nMD;Inc\n100;1.5\n\n# note\n200;2.5\n");
        assert_eq!((t.header_line, t.line(0), t.line(1)), (3, 4, 7));
    }

    #[test]
    fn header_keys_and_units() {
        // Common practice of survey exports: units in parentheses or brackets.
        assert_eq!(
            header_key("Measured Depth (ft)"),
            ("measureddepth".into(), Some("ft".into()))
        );
        assert_eq!(
            header_key("Top_Perf-MD [m]"),
            ("topperfmd".into(), Some("m".into()))
        );
        assert_eq!(header_key(" Stage No. "), ("stageno".into(), None));
        let t = parse("MD (usft),Inc\n1,2\n");
        assert_eq!(t.unit(0), Some("usft"));
        assert_eq!(t.unit(1), None);
    }

    #[test]
    fn errors_name_the_file_line_and_column() {
        let t = parse("md,inc\n100,1\n200,x\n");
        let e = t.numbers(1).unwrap_err().to_string();
        assert!(
            e.starts_with("t.csv: line 3: inc 'x' is not a number"),
            "{e}"
        );
        let e = parse("md,azi\n1,2\n")
            .require(&INC)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("line 1: no column 'inc'") && e.contains("md, azi"),
            "{e}"
        );
        let e = parse("MD,Measured Depth\n1,2\n")
            .find(&MD)
            .unwrap_err()
            .to_string();
        assert!(e.contains("'MD' and 'Measured Depth' both give md"), "{e}");
        let e = Table::parse("# only a comment\n\n", Path::new("e.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("e.csv: is empty"), "{e}");
        let e = Table::parse("\n\nmd,inc\n", Path::new("h.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("h.csv: line 3: has a header but no rows"), "{e}");
    }
}
