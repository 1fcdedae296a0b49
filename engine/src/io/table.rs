//! Text tables: the one tokenizer of every text input (point lists in [`crate::io::points`],
//! well and stage tables and well lists here) and the reader of small tables.
//!
//! Shared by every text reader:
//! - content lines: lines end at `\n`, `\r\n` or a lone `\r`; blank lines and `#` comment
//!   lines are skipped, a byte-order mark dropped, and every line keeps its 1-based number for
//!   messages ([`content_lines`]);
//! - the delimiter, detected from one line ([`Delimiter::detect`]): semicolon, else tab, else
//!   comma (outside double quotes), else runs of spaces;
//! - fields split by the csv crate's parser (`csv-core`: quoted fields, doubled quotes), one
//!   line at a time so a stray quote cannot swallow the lines after it ([`Splitter`]); blanks
//!   around delimiters are not part of fields (so `1, "a, b"` holds `a, b`), and fields are
//!   trimmed;
//! - a line with one field more than the header whose last field is empty ends with a
//!   delimiter, and that field is dropped; any other difference in field count is refused
//!   ([`Fields::fit`]);
//! - header names ([`header_names`], [`split_unit`], [`name_key`]): in a space-separated
//!   header a unit written as its own word (`MD (m)`) is joined to its name; a unit in
//!   parentheses or brackets (`Depth (ft)`, `TWT[ms]`) or after a last underscore for the known
//!   unit words (`TWT_ms`, `Depth_ft`) is the column's unit; names match case-insensitively,
//!   ignoring `_`, `-`, `.`, spaces and tabs.
//!
//! A [`Table`] is a header line and rows with exactly its number of fields; a column is looked
//! up by a [`ColumnSpec`]: its canonical name and the list of header variants accepted for it.

use crate::error::{FlexureError, Result};
use std::path::{Path, PathBuf};

// ---------------------------------------------------------------------------------------
// Lines, delimiters and fields (every text reader)

/// Whether `line` carries content: it is neither blank nor a `#` comment (after leading
/// spaces).
pub fn is_content(line: &str) -> bool {
    let t = line.trim();
    !t.is_empty() && !t.starts_with('#')
}

/// The content lines of `text` (see [`is_content`]) with their 1-based line numbers; a
/// leading byte-order mark is dropped. Lines end at `\n`, `\r\n` or a lone `\r` (universal
/// newlines, as text editors count them).
pub fn content_lines(text: &str) -> impl Iterator<Item = (usize, &str)> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let text = text.strip_suffix('\n').unwrap_or(text);
    text.split('\n')
        .flat_map(|l| l.strip_suffix('\r').unwrap_or(l).split('\r'))
        .enumerate()
        .map(|(i, l)| (i + 1, l))
        .filter(|(_, l)| is_content(l))
}

/// What separates the fields of a text table.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Delimiter {
    /// `;` (files written with decimal commas).
    Semicolon,
    /// A tab; every tab separates two fields, so two tabs in a row (in a line after the one
    /// the delimiter was detected from) enclose an empty field.
    Tab,
    /// `,`.
    Comma,
    /// Runs of spaces (and tabs) count as one separator; no field is empty.
    Whitespace,
}

impl Delimiter {
    /// The delimiter of `line`: semicolon when the line holds one outside double quotes, else
    /// tab, else comma, else runs of spaces. Semicolons and tabs come first because files that
    /// use them may write decimal commas. A line with two tabs in a row (outside quotes) is
    /// aligned with tabs rather than tab-separated: runs of spaces and tabs separate its fields.
    pub fn detect(line: &str) -> Self {
        let (mut quoted, mut semicolon, mut tab, mut comma) = (false, false, false, false);
        let (mut aligned, mut previous) = (false, 0u8);
        for b in line.bytes() {
            match b {
                b'"' => quoted = !quoted,
                b';' if !quoted => semicolon = true,
                b'\t' if !quoted => {
                    aligned |= previous == b'\t';
                    tab = true;
                }
                b',' if !quoted => comma = true,
                _ => {}
            }
            previous = b;
        }
        if semicolon {
            Delimiter::Semicolon
        } else if tab && !aligned {
            Delimiter::Tab
        } else if tab {
            Delimiter::Whitespace
        } else if comma {
            Delimiter::Comma
        } else {
            Delimiter::Whitespace
        }
    }

    fn byte(self) -> u8 {
        match self {
            Delimiter::Semicolon => b';',
            Delimiter::Tab => b'\t',
            Delimiter::Comma => b',',
            Delimiter::Whitespace => b' ',
        }
    }
}

/// Splits lines into fields at one delimiter with the csv crate's parser, reusing its buffers
/// from line to line.
pub struct Splitter {
    delimiter: Delimiter,
    reader: csv_core::Reader,
    prepared: String,
    out: Vec<u8>,
    ends: Vec<usize>,
}

impl Splitter {
    /// A splitter for `delimiter`.
    pub fn new(delimiter: Delimiter) -> Self {
        Self {
            delimiter,
            // Only `\n` ends a record: a line never holds one, so a record is always the
            // whole line (by default a lone `\r` would end it and drop the fields after it).
            reader: csv_core::ReaderBuilder::new()
                .delimiter(delimiter.byte())
                .terminator(csv_core::Terminator::Any(b'\n'))
                .build(),
            prepared: String::new(),
            out: Vec::new(),
            ends: Vec::new(),
        }
    }

    /// The delimiter this splitter splits at.
    pub fn delimiter(&self) -> Delimiter {
        self.delimiter
    }

    /// The fields of one line (without its line terminator). Blanks around delimiters are
    /// not part of a field, so a field quoted after spaces (`1, "a, b"`) is read as quoted;
    /// for [`Delimiter::Whitespace`], runs of spaces and tabs outside double quotes count as
    /// one separator.
    pub fn split(&mut self, line: &str) -> Fields<'_> {
        prepare(line, self.delimiter, &mut self.prepared);
        let input = self.prepared.as_bytes();
        // A field never holds more bytes than its line, and a line never more fields than
        // bytes plus one, so neither buffer can fill up.
        self.out.resize(input.len(), 0);
        self.ends.resize(input.len() + 1, 0);
        self.reader.reset();
        let (mut nin, mut nout, mut nend) = (0, 0, 0);
        loop {
            let (result, i, o, e) = self.reader.read_record(
                &input[nin..],
                &mut self.out[nout..],
                &mut self.ends[nend..],
            );
            (nin, nout, nend) = (nin + i, nout + o, nend + e);
            match result {
                csv_core::ReadRecordResult::InputEmpty if nin < input.len() => {}
                csv_core::ReadRecordResult::InputEmpty => {
                    // Signal the end of the line: the parser then completes the record.
                    let (result, _, _, e) =
                        self.reader
                            .read_record(&[], &mut self.out[nout..], &mut self.ends[nend..]);
                    nend += e;
                    debug_assert!(matches!(
                        result,
                        csv_core::ReadRecordResult::Record | csv_core::ReadRecordResult::End
                    ));
                    break;
                }
                _ => break,
            }
        }
        Fields {
            text: std::str::from_utf8(&self.out[..nout]).unwrap_or_default(),
            ends: &self.ends[..nend],
        }
    }
}

/// `line` prepared for the parser, in `out`: outside double quotes, the blanks (spaces and
/// tabs other than the delimiter) at both ends and around delimiters are dropped; for
/// [`Delimiter::Whitespace`] every other run of blanks becomes one space, the delimiter.
fn prepare(line: &str, delimiter: Delimiter, out: &mut String) {
    out.clear();
    let whitespace = delimiter == Delimiter::Whitespace;
    let separator = delimiter.byte() as char;
    let blank = |ch: char| (ch == ' ' || ch == '\t') && (whitespace || ch != separator);
    let (mut quoted, mut field_start) = (false, true);
    let mut blanks: Option<usize> = None; // start of a run of blanks after field content
    for (i, ch) in line.char_indices() {
        if !quoted && blank(ch) {
            if !field_start {
                blanks = blanks.or(Some(i));
            }
            continue;
        }
        if !quoted && !whitespace && ch == separator {
            blanks = None;
            out.push(ch);
            field_start = true;
            continue;
        }
        if let Some(start) = blanks.take() {
            out.push_str(if whitespace { " " } else { &line[start..i] });
        }
        quoted ^= ch == '"';
        out.push(ch);
        field_start = false;
    }
}

/// The fields of one line, as [`Splitter::split`] found them.
#[derive(Clone, Copy, Debug)]
pub struct Fields<'s> {
    text: &'s str,
    ends: &'s [usize],
}

impl<'s> Fields<'s> {
    /// Number of fields.
    pub fn len(&self) -> usize {
        self.ends.len()
    }

    /// Whether the line had no field at all.
    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }

    /// Field `i` (0-based), unquoted and trimmed.
    pub fn get(&self, i: usize) -> &'s str {
        let start = if i == 0 { 0 } else { self.ends[i - 1] };
        self.text[start..self.ends[i]].trim()
    }

    /// Every field in order (see [`Fields::get`]).
    pub fn iter(&self) -> impl Iterator<Item = &'s str> + '_ {
        (0..self.len()).map(|i| self.get(i))
    }

    /// Whether the line has `expected` fields; a line with one more whose last field is empty
    /// ends with a delimiter, and that field is dropped.
    pub fn fit(&mut self, expected: usize) -> bool {
        if self.len() == expected + 1 && self.get(expected).is_empty() {
            self.ends = &self.ends[..expected];
        }
        self.len() == expected
    }
}

/// The likely cause when `line` (split at `delimiter`) has `got` fields where `expected` are
/// due, as a parenthesised hint for messages; empty when none is known.
pub fn count_hint(line: &str, delimiter: Delimiter, got: usize, expected: usize) -> &'static str {
    if line.matches('"').count() % 2 == 1 {
        return " (a double quote is not closed)";
    }
    match delimiter {
        Delimiter::Comma if got > expected => {
            " (in a comma-separated file a decimal comma splits a number in two: write decimal points)"
        }
        Delimiter::Tab if got > expected => {
            " (in a tab-separated file every tab separates two fields, so two tabs in a row enclose an empty field)"
        }
        Delimiter::Whitespace => {
            " (in a space-separated file a missing value shortens the line and a name of several words counts as several columns: write nan for a missing value, join the words of a name with _)"
        }
        _ => "",
    }
}

/// A hint for a field that is not a number, for messages: decimal commas are not read.
pub fn number_hint(field: &str) -> &'static str {
    if field.contains(',') {
        " (decimal commas are not read: write decimal points)"
    } else {
        ""
    }
}

/// Whether `field` means "no value" in a value column: empty, or `nan`, `null`, `n/a`, `na`,
/// `#n/a` or `-`, in any case.
pub fn is_null_word(field: &str) -> bool {
    const NULL_WORDS: [&str; 6] = ["nan", "null", "n/a", "na", "#n/a", "-"];
    field.is_empty() || NULL_WORDS.iter().any(|w| field.eq_ignore_ascii_case(w))
}

// ---------------------------------------------------------------------------------------
// Header names (every text reader)

/// The column names of a header `line` split at `delimiter`: in a space-separated header a
/// unit written as its own word in parentheses or brackets is joined to the name before it
/// (`MD (m)`), and a trailing empty name (the line ends with a delimiter) is dropped.
pub fn header_names(line: &str, delimiter: Delimiter) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    for field in Splitter::new(delimiter).split(line).iter() {
        match names.last_mut() {
            Some(last)
                if delimiter == Delimiter::Whitespace
                    && (field.starts_with('(') || field.starts_with('[')) =>
            {
                last.push(' ');
                last.push_str(field);
            }
            _ => names.push(field.to_string()),
        }
    }
    if names.len() > 1 && names.last().is_some_and(String::is_empty) {
        names.pop();
    }
    names
}

/// Unit words recognised after a last underscore (`TWT_ms`), longest first.
const UNDERSCORE_UNITS: [&str; 7] = ["us-ft", "us_ft", "usft", "ft", "ms", "m", "s"];

/// Splits a header name into the name and its unit, lower-cased: a unit in parentheses or
/// brackets at the end (`Depth (ft)`, `TWT[ms]`), or one of the unit words m, ft, usft, us-ft,
/// us_ft, ms, s after a last underscore (`TWT_ms`, `Depth_ft`, `z_m`, `time_s`; so `az_15` and
/// `CDP_X` keep their names). The name is trimmed and otherwise as written.
pub fn split_unit(name: &str) -> (&str, Option<String>) {
    let name = name.trim();
    for (open, close) in [('(', ')'), ('[', ']')] {
        if let Some(body) = name.strip_suffix(close) {
            if let Some(at) = body.rfind(open) {
                let bare = body[..at].trim();
                let unit = body[at + 1..].trim().to_lowercase();
                if !bare.is_empty() {
                    return (bare, (!unit.is_empty()).then_some(unit));
                }
            }
        }
    }
    let lower = name.to_ascii_lowercase();
    for unit in UNDERSCORE_UNITS {
        let at = lower.len().saturating_sub(unit.len() + 1);
        if at > 0 && lower.ends_with(unit) && lower.as_bytes()[at] == b'_' {
            return (&name[..at], Some(unit.to_string()));
        }
    }
    (name, None)
}

/// The matching key of a name (without its unit): lower case without `_`, `-`, `.`, spaces
/// and tabs.
pub fn name_key(name: &str) -> String {
    name.chars()
        .filter(|c| !matches!(c, '_' | '-' | '.' | ' ' | '\t'))
        .flat_map(char::to_lowercase)
        .collect()
}

/// Splits a header name into its matching key and unit ([`split_unit`], [`name_key`]):
/// `"Measured Depth (ft)"` gives `("measureddepth", Some("ft"))`.
pub fn header_key(name: &str) -> (String, Option<String>) {
    let (bare, unit) = split_unit(name);
    (name_key(bare), unit)
}

// ---------------------------------------------------------------------------------------
// Small tables

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
    /// Lower case, without `_`, `-`, `.`, spaces and the unit suffix ([`header_key`]).
    pub key: String,
    /// The unit suffix, lower-cased (`ft` from `MD (ft)` or `MD_ft`), if any.
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
    /// `(line number, fields)` of every data row, one field per column, fields trimmed.
    pub rows: Vec<(usize, Vec<String>)>,
}

impl Table {
    /// Reads and parses the table in `path`.
    pub fn read(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path).map_err(|e| {
            FlexureError::input(path, format!("cannot read ({e}): check the file name"))
        })?;
        Self::parse(&text, path)
    }

    /// Parses `text` (from `path`, named in messages): the first content line is the header
    /// (its delimiter is the table's), every later content line a row. A row whose field count
    /// differs from the header's is refused naming its line (one trailing delimiter is
    /// allowed, see [`Fields::fit`]).
    pub fn parse(text: &str, path: &Path) -> Result<Self> {
        let mut lines = content_lines(text);
        let Some((header_line, header)) = lines.next() else {
            return Err(FlexureError::input(
                path,
                "is empty: give a header line and rows",
            ));
        };
        let delimiter = Delimiter::detect(header);
        let names = header_names(header, delimiter);
        let mut splitter = Splitter::new(delimiter);
        let mut rows = Vec::new();
        for (line, text) in lines {
            let mut fields = splitter.split(text);
            if !fields.fit(names.len()) {
                return Err(FlexureError::input(
                    path,
                    format!(
                        "line {line}: has {} fields but the header on line {header_line} has {} ({}){}; fix the row so that every row has one field per column",
                        fields.len(),
                        names.len(),
                        names.join(", "),
                        count_hint(text, delimiter, fields.len(), names.len())
                    ),
                ));
            }
            rows.push((line, fields.iter().map(str::to_string).collect()));
        }
        if rows.is_empty() {
            return Err(FlexureError::input(
                path,
                format!("line {header_line}: has a header but no rows"),
            ));
        }
        let columns = names
            .into_iter()
            .map(|header| {
                let (key, unit) = header_key(&header);
                Column { header, key, unit }
            })
            .collect();
        Ok(Self {
            path: path.to_path_buf(),
            header_line,
            columns,
            rows,
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

    /// The field of column `col` in row `row`.
    pub fn text(&self, row: usize, col: usize) -> &str {
        &self.rows[row].1[col]
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
                        "{} '{text}' is not a number{}: give a finite number",
                        self.columns[col].header,
                        number_hint(text)
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
    fn lone_carriage_returns_end_lines_instead_of_dropping_fields() {
        // Found by the reader audit: csv-core ends a record at a lone \r, so the fields after
        // it were silently dropped ("200,2\r5" read as 200, 2). Common practice (universal
        // newlines, as text editors and Python's str.splitlines): \n, \r\n and a lone \r
        // each end a line, so files saved with old Mac line endings read too.
        for text in [
            "md,inc\n100,1\r200,2\r\n300,3\n",
            "md,inc\r100,1\r200,2\r300,3\r",
        ] {
            let t = parse(text);
            assert_eq!(t.numbers(0).unwrap(), vec![100.0, 200.0, 300.0], "{text:?}");
            assert_eq!((t.line(0), t.line(1), t.line(2)), (2, 3, 4), "{text:?}");
        }
        // Given a line that still holds one, the splitter keeps it inside the field.
        let mut s = Splitter::new(Delimiter::Comma);
        assert_eq!(s.split("1,2\r5").iter().collect::<Vec<_>>(), ["1", "2\r5"]);
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

    const AZI: ColumnSpec = ColumnSpec {
        name: "azi",
        variants: &["azi", "azimuth"],
    };

    #[test]
    fn units_written_as_words_stay_with_their_names() {
        // Common practice of survey listings: "MD (m)  Inc  Azi  DLS", the unit a word of its
        // own. Hand-checkable: inclination is read from the second field, azimuth the third.
        for text in [
            "MD (m)  Inc  Azi  DLS\n0.00 0.0 140.0 0.0\n30.00 1.5 141.0 0.1\n",
            "MD (m)   Inc (deg)   Azi (deg)\n0.00 0.0 140.0\n30.00 1.5 141.0\n",
            "MD_m\tInc\tAzi\n0.00\t0.0\t140.0\n30.00\t1.5\t141.0\n",
        ] {
            let t = parse(text);
            let (md, inc, azi) = (
                t.require(&MD).unwrap(),
                t.require(&INC).unwrap(),
                t.require(&AZI).unwrap(),
            );
            assert_eq!((md, inc, azi), (0, 1, 2), "{text:?}");
            assert_eq!(t.unit(md), Some("m"), "{text:?}");
            assert_eq!(t.numbers(inc).unwrap(), vec![0.0, 1.5], "{text:?}");
            assert_eq!(t.numbers(azi).unwrap(), vec![140.0, 141.0], "{text:?}");
        }
    }

    #[test]
    fn rows_need_one_field_per_column() {
        // Hand-checkable: a row with a field more or less than the header is refused by line
        // (a decimal comma in a comma file would otherwise shift inclination into azimuth);
        // one trailing delimiter is allowed.
        let refused = |text: &str, says: &[&str]| {
            let e = Table::parse(text, Path::new("s.csv"))
                .unwrap_err()
                .to_string();
            assert_eq!(e.lines().count(), 1, "{e}");
            for s in says {
                assert!(e.contains(s), "'{s}' in {e}");
            }
        };
        refused(
            "md,inc,azi\n0,0,140\n1740,5,0.0,140\n",
            &[
                "s.csv: line 3: has 4 fields but the header on line 1 has 3 (md, inc, azi)",
                "decimal comma",
            ],
        );
        refused("md,inc,azi\n0,0\n", &["line 2: has 2 fields", "has 3"]);
        refused(
            "MD (m)  Inc  Azi\n0 0\n",
            &["line 2: has 2 fields", "write nan for a missing value"],
        );
        refused(
            "md,inc,azi\n\"0,0,140\n",
            &["line 2: has 1 fields", "not closed"],
        );
        let t = parse("md,inc,azi,\n0,0,140,\n10,1,140\n");
        assert_eq!(t.columns.len(), 3);
        assert_eq!(t.numbers(2).unwrap(), vec![140.0, 140.0]);
        // A decimal comma in a semicolon file is named as such.
        let e = parse("md;inc;azi\n0;0;140\n10;1,5;140\n")
            .numbers(1)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("line 3: inc '1,5' is not a number (decimal commas"),
            "{e}"
        );
    }

    #[test]
    fn one_delimiter_rule_for_every_text_reader() {
        // The rule every text reader (tables, point lists) uses: semicolon, else tab, else
        // comma, outside quotes; two tabs in a row mean alignment, not an empty field. Quoted
        // fields and doubled quotes as in RFC 4180 (the csv crate's parser), blanks around
        // delimiters dropped (hand-checkable).
        for (line, want) in [
            ("a;b,c", Delimiter::Semicolon),
            ("a,5;b", Delimiter::Semicolon),
            ("a\tb,c", Delimiter::Tab),
            ("a,b c", Delimiter::Comma),
            ("\"a;b\",c", Delimiter::Comma),
            ("a b\tc\t\td", Delimiter::Whitespace),
            ("  a   b ", Delimiter::Whitespace),
        ] {
            assert_eq!(Delimiter::detect(line), want, "{line:?}");
        }
        let mut s = Splitter::new(Delimiter::Comma);
        let f = s.split(" 1, \"a, b\" ,\"c\"\"d\",");
        assert_eq!(f.iter().collect::<Vec<_>>(), ["1", "a, b", "c\"d", ""]);
        let mut s = Splitter::new(Delimiter::Whitespace);
        let f = s.split("  1 \t 2   \"x y\"  ");
        assert_eq!(f.iter().collect::<Vec<_>>(), ["1", "2", "x y"]);
        assert_eq!(
            header_names("MD (m)  Inc [deg] Azi", Delimiter::Whitespace),
            ["MD (m)", "Inc [deg]", "Azi"]
        );
    }

    #[test]
    fn unit_suffixes_after_underscores_are_known_unit_words_only() {
        // Common practice of exports (TWT_ms, Depth_ft); az_15 and CDP_X are names.
        for (name, key, unit) in [
            ("TWT_ms", "twt", Some("ms")),
            ("Depth_FT", "depth", Some("ft")),
            ("z_m", "z", Some("m")),
            ("time_s", "time", Some("s")),
            ("Depth_us_ft", "depth", Some("us_ft")),
            ("MD_usft", "md", Some("usft")),
            ("az_15", "az15", None),
            ("CDP_X", "cdpx", None),
            ("md_top", "mdtop", None),
            ("_m", "m", None),
        ] {
            assert_eq!(
                header_key(name),
                (key.to_string(), unit.map(str::to_string)),
                "{name}"
            );
        }
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
