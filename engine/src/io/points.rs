//! Horizon and azimuth-sector point lists: ASCII exports of interpretation packages, one node a
//! line (`inline xline x y z`, `x,y,twt`, `inline,xline,x,y,az15,az45,...`), read *exactly* onto
//! their bin lattice. Nothing is regridded: every point must sit on one node of a regular
//! lattice (to `lattice_tolerance` of the smaller bin), nodes without a point are nulls, and
//! anything else is refused with a one-line message saying what to do.
//!
//! GDAL's XYZ driver reads only north-up grids sorted by row; survey grids are rotated from
//! north and exported in inline/crossline order, hence this reader.
//!
//! Text: lines, delimiters, fields, null words and header names come from the one tokenizer
//! of text inputs ([`crate::io::table`]). Free text before a header (a title, `Horizon: X`) is
//! skipped and reported; the header is the line of names just before the first data line.
//!
//! Method:
//! - With inline/crossline numbers, the lattice indices come from the numbering: the step of
//!   each is the greatest common divisor of the differences of its distinct numbers; columns
//!   follow crossline and rows follow inline, both increasing.
//! - With x, y alone, the lattice is found from the points: the most frequent nearest-neighbour
//!   vector and the most frequent shortest vector not parallel to it (searched in a bucket
//!   grid, on a fixed sample of at most 20 000 points), reduced to a shortest basis by
//!   Lagrange's (Gauss's) two-dimensional reduction (Nguyen 2010, "Hermite's constant and
//!   lattice algorithms", in *The LLL Algorithm*, Springer, section 2 [from memory]), anchored
//!   at a point whose nearest neighbour is one such step away. Points get integer indices by
//!   rounding, refined by least-squares refits, over growing neighbourhoods of the anchor, on
//!   the points near a node. Points off that lattice that sit in groups at 1/2, 1/3 or 1/4 of
//!   a step (an interpretation on every 2nd inline with patches on every inline) refine it to
//!   the lattice its steps and those offsets generate (Hermite normal form of the generators,
//!   in twelfths of a step; elementary number theory), so the lattice is the finest one the
//!   points lie on; lone points off the lattice never refine it. The column axis is whichever
//!   of the four basis directions points closest to east (ties go to the smaller azimuth); the
//!   row axis is the other, signed so rows run clockwise from columns as on a north-up grid.
//! - In both cases, before anything lattice-sized is made, every point is checked against a
//!   map from indices to coordinates that a few wrong points cannot pull (median steps between
//!   the first and last point of every row and column and median origin, then least squares
//!   on the points within a quarter bin of it), so a typo in a number or a coordinate is named
//!   by its line instead of stretching or tilting the lattice; a lattice too large for memory
//!   or too sparse for its points is refused naming the point farthest out. Then
//!   the map position of a node is an affine function of its (column, row), fitted by ordinary
//!   least squares to all points (coordinates taken relative to the first point, compensated
//!   sums), and becomes a GDAL geotransform: node (0, 0) is the centre of the top-left cell, so
//!   the corner is half a column step and half a row step before it (GDAL data model: a cell's
//!   centre is at `i + 0.5, j + 0.5`). Rotation terms below 1e-12 of their bin are snapped to
//!   zero, so north-up grids come back exactly north-up.
//!
//! The CRS is the caller's concern: a point list declares none.

use super::table::{
    content_lines, count_hint, header_names, is_null_word, name_key, number_hint, split_unit,
    Delimiter, Splitter,
};
use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::stats::median;
use ndarray::Array2;
use std::io::Read;
use std::path::Path;

/// What one column of a point list holds.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum ColumnRole {
    /// Inline number (a whole number); each grid row is one inline.
    Inline,
    /// Crossline (trace) number (a whole number); each grid column is one crossline.
    Crossline,
    /// Grid easting, CRS units.
    X,
    /// Grid northing, CRS units.
    Y,
    /// A value band, named as given (e.g. `z`, `TWT`, `az15`); the text may end with a unit
    /// (`Depth (ft)`, `TWT_ms`; see [`split_unit`]), which becomes [`ValueColumn::unit`].
    Value(String),
    /// A column to ignore.
    Skip,
}

impl ColumnRole {
    /// Parses a comma-separated column list such as `inline,xline,x,y,z` (the `--columns`
    /// option). Recognised names, case-insensitive, ignoring `-`, `_`, `.`, spaces and a unit
    /// suffix ([`split_unit`]): inline `inline`/`iline`/`il`/`in-line`/`inline_3d`/`inline no`;
    /// crossline `xline`/`crossline`/`xl`/`trace`/`cross-line`/`crossline_3d`/`xline no`; x
    /// `x`/`easting`/`cdp_x`/`cdpx`; y `y`/`northing`/`cdp_y`/`cdpy`; `skip`.
    /// Any other name is a value column named as given. The list must hold exactly one x and
    /// one y, inline and crossline both or neither, and at least one value column.
    pub fn parse_list(spec: &str) -> Result<Vec<ColumnRole>> {
        let mut roles = Vec::new();
        for (k, entry) in spec.split(',').map(str::trim).enumerate() {
            if entry.is_empty() {
                return Err(FlexureError::Parameter(format!(
                    "--columns '{spec}': entry {} is empty; give names separated by commas, e.g. --columns inline,xline,x,y,z",
                    k + 1
                )));
            }
            let (name, _) = split_unit(entry);
            roles.push(match recognise(name) {
                Some(Known::Skip) => ColumnRole::Skip,
                Some(Known::Inline) => ColumnRole::Inline,
                Some(Known::Crossline) => ColumnRole::Crossline,
                Some(Known::X) => ColumnRole::X,
                Some(Known::Y) => ColumnRole::Y,
                Some(Known::Value) | None => ColumnRole::Value(entry.to_string()),
            });
        }
        check_roles(&roles)
            .map_err(|m| FlexureError::Parameter(format!("--columns '{spec}' {m}")))?;
        Ok(roles)
    }

    fn kind(&self) -> Known {
        match self {
            ColumnRole::Inline => Known::Inline,
            ColumnRole::Crossline => Known::Crossline,
            ColumnRole::X => Known::X,
            ColumnRole::Y => Known::Y,
            ColumnRole::Value(_) => Known::Value,
            ColumnRole::Skip => Known::Skip,
        }
    }
}

/// How to read a point list.
#[derive(Clone, Debug, PartialEq)]
pub struct PointOptions {
    /// Column roles in file order (`--columns`); `None` takes them from the header, or for a
    /// file without one, `x y z` (3 columns) or `inline xline x y z` (5 columns).
    pub columns: Option<Vec<ColumnRole>>,
    /// Values that mean "no value" (e.g. -999.25, -99999); such a node exists but is null.
    /// `nan` text is always null.
    pub nodata: Vec<f64>,
    /// Largest allowed distance of a point from its lattice node, as a share of the smaller
    /// bin (0 < t < 0.5); default 0.05.
    pub lattice_tolerance: f64,
}

impl Default for PointOptions {
    fn default() -> Self {
        Self {
            columns: None,
            nodata: Vec::new(),
            lattice_tolerance: 0.05,
        }
    }
}

/// One value column of a point list, in file order.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ValueColumn {
    /// The column name as given in the header or `--columns`, without its unit suffix (e.g.
    /// `Depth`, `twt`, `az15`); tells the caller the domain.
    pub name: String,
    /// The unit from a suffix like `z (ft)` or `TWT [ms]`, lower-cased; `None` when not given.
    pub unit: Option<String>,
}

/// The inline/crossline numbering a lattice was read from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Numbering {
    /// Inline number of grid row 0.
    pub inline_first: i64,
    /// Inline number of the last grid row.
    pub inline_last: i64,
    /// Inline numbers per grid row.
    pub inline_step: i64,
    /// Crossline number of grid column 0.
    pub crossline_first: i64,
    /// Crossline number of the last grid column.
    pub crossline_last: i64,
    /// Crossline numbers per grid column.
    pub crossline_step: i64,
}

/// How a point list's lattice was found and how well the points fit it.
#[derive(Clone, Debug, PartialEq)]
pub struct LatticeReport {
    /// Data lines read (one point each, repeated nodes included).
    pub points: usize,
    /// The inline/crossline numbering the lattice came from; `None` when it was found from the
    /// coordinates alone.
    pub numbering: Option<Numbering>,
    /// Azimuth of the column axis (increasing column), degrees clockwise from grid north,
    /// 0..360.
    pub column_azimuth: f64,
    /// Azimuth of the row axis (increasing row), degrees clockwise from grid north, 0..360;
    /// 90 degrees clockwise from the column axis unless inline/crossline numbering says
    /// otherwise.
    pub row_azimuth: f64,
    /// Distance between neighbouring nodes along a row (from one column to the next), CRS
    /// units.
    pub column_bin: f64,
    /// Distance between neighbouring nodes along a column (from one row to the next), CRS
    /// units.
    pub row_bin: f64,
    /// Largest distance of a point from its fitted lattice node, CRS units.
    pub worst_misfit: f64,
    /// `worst_misfit` as a share of the smaller bin.
    pub worst_misfit_share: f64,
    /// File line (1-based) of that point.
    pub worst_misfit_line: usize,
    /// Nodes without a point in the file.
    pub empty_nodes: usize,
    /// Nodes null in every band: no point, or every value null.
    pub null_nodes: usize,
    /// Lines that repeated a node with identical values (read once).
    pub repeated: usize,
    /// First and last line of free text before the header, skipped (e.g. a title and a line
    /// `Horizon: X` above the column names); `None` when the header (or data) came first.
    pub preamble: Option<(usize, usize)>,
}

impl LatticeReport {
    /// One line for reports: points, where the lattice came from, axis azimuth, bins, worst
    /// misfit and its line, null nodes, skipped free text.
    pub fn describe(&self) -> String {
        let source = match &self.numbering {
            Some(n) => format!(
                "inlines {}..{} step {} (rows) x crosslines {}..{} step {} (columns)",
                n.inline_first,
                n.inline_last,
                n.inline_step,
                n.crossline_first,
                n.crossline_last,
                n.crossline_step
            ),
            None => "a lattice found from x, y alone".to_string(),
        };
        let preamble = match self.preamble {
            Some((a, b)) if a == b => format!("; line {a} before the header skipped as free text"),
            Some((a, b)) => format!("; lines {a}..{b} before the header skipped as free text"),
            None => String::new(),
        };
        format!(
            "{} points on {source}; column axis at {:.3} deg, row axis at {:.3} deg from grid north; bins {:.4} x {:.4} CRS units; worst misfit {:.4} ({:.3} of the smaller bin) at line {}; {} null nodes ({} without a point{}){preamble}",
            self.points,
            self.column_azimuth,
            self.row_azimuth,
            self.column_bin,
            self.row_bin,
            self.worst_misfit,
            self.worst_misfit_share,
            self.worst_misfit_line,
            self.null_nodes,
            self.empty_nodes,
            if self.repeated > 0 {
                format!(", {} repeated lines read once", self.repeated)
            } else {
                String::new()
            }
        )
    }
}

/// A point list read onto its lattice.
#[derive(Clone, Debug)]
pub struct PointGrid {
    /// Number of columns.
    pub cols: usize,
    /// Number of rows.
    pub rows: usize,
    /// GDAL geotransform `[x0, dx/dcol, dx/drow, y0, dy/dcol, dy/drow]`, CRS units; cell
    /// (col, row) has its centre at `x0 + (col + 0.5) dx/dcol + (row + 0.5) dx/drow`, and
    /// likewise for y.
    pub geo_transform: [f64; 6],
    /// One array per value column, `[row, col]`, NaN where null or without a point; values
    /// exactly as written in the file.
    pub bands: Vec<Array2<f64>>,
    /// Name and unit of each band.
    pub value_columns: Vec<ValueColumn>,
    /// How the lattice was found and how well the points fit it.
    pub lattice: LatticeReport,
}

impl PointGrid {
    /// The grid's placement with the CRS the caller attaches (`crs_wkt`, `metres_per_unit`
    /// as in [`GridGeometry`]).
    pub fn geometry(&self, crs_wkt: String, metres_per_unit: f64) -> GridGeometry {
        GridGeometry {
            cols: self.cols,
            rows: self.rows,
            geo_transform: self.geo_transform,
            crs_wkt,
            metres_per_unit,
        }
    }
}

/// Whether `path` looks like a point list, from its first 8 KB: text (no NUL or other control
/// bytes) that is not one of the text raster formats GDAL reads itself (ESRI ASCII grid
/// `ncols ...`, Surfer `DSAA`, GRASS ASCII `north: ...`, XML such as VRT, JSON), laid out as
/// [`parse_points`] reads it, with
/// - a header of at least 3 names, some of them recognised column names (whatever follows:
///   the reader then names any bad line), possibly below free text; or
/// - a first data line of at least 3 numbers or null words, below a header of at least 3
///   names or numbers when there is one.
pub fn is_point_list(path: &Path) -> bool {
    sniff_text(path).is_some_and(|text| sniff(&text))
}

/// Whether `path` is a text file that is not one of the text raster formats GDAL reads (see
/// [`is_point_list`]). When GDAL cannot open such a file, [`read_points`] says why in one line
/// naming the file line (or reads it, when only its first 8 KB hid that it is a point list),
/// where GDAL's own message would not: the raster reader can hand such files to it.
pub fn is_plain_text(path: &Path) -> bool {
    sniff_text(path).is_some()
}

const SNIFF_BYTES: usize = 8192;

/// First content lines of GDAL's text raster formats, lower-cased.
const RASTER_STARTS: [&str; 12] = [
    "ncols", "nrows", "xllc", "yllc", "dsaa", "dsrb", "north:", "south:", "rows:", "cols:", "<",
    "{",
];

/// The first 8 KB of `path` as text without a last line cut short; `None` for an unreadable or
/// binary file or one of GDAL's text raster formats.
fn sniff_text(path: &Path) -> Option<String> {
    let file = std::fs::File::open(path).ok()?;
    let mut bytes = Vec::with_capacity(SNIFF_BYTES);
    file.take(SNIFF_BYTES as u64).read_to_end(&mut bytes).ok()?;
    let binary = |b: &u8| *b < 0x20 && !matches!(*b, b'\t' | b'\n' | b'\r' | 0x0c);
    if bytes.iter().any(binary) {
        return None;
    }
    let mut text = String::from_utf8_lossy(&bytes).into_owned();
    if bytes.len() == SNIFF_BYTES {
        text.truncate(text.rfind(['\n', '\r']).unwrap_or(0));
    }
    let first = content_lines(&text)
        .next()
        .map(|(_, l)| l.trim().to_ascii_lowercase());
    if first.is_some_and(|l| RASTER_STARTS.iter().any(|s| l.starts_with(s))) {
        return None;
    }
    Some(text)
}

fn sniff(text: &str) -> bool {
    let layout = layout(content_lines(text));
    let numeric = |line: &str| {
        let mut splitter = Splitter::new(layout.delimiter);
        let fields = splitter.split(line);
        fields.len() >= 3
            && fields
                .iter()
                .all(|f| is_null_word(f) || f.parse::<f64>().is_ok())
    };
    let data_numeric = layout.data.is_some_and(|(_, line)| numeric(line));
    let Some((_, names)) = &layout.header else {
        return data_numeric;
    };
    let name_like = |f: &String| {
        f.chars()
            .next()
            .is_some_and(|c| c.is_alphabetic() || c == '_')
    };
    let name_or_number = |f: &String| name_like(f) || f.parse::<f64>().is_ok();
    names.len() >= 3
        && (names.iter().any(|n| role_name(n))
            || (layout.preamble.is_none() && names.iter().all(name_or_number) && data_numeric))
}

/// Reads the point list at `path` onto its lattice (see [`parse_points`]).
pub fn read_points(path: &Path, options: &PointOptions) -> Result<PointGrid> {
    let bytes = std::fs::read(path).map_err(|e| FlexureError::read(path, e))?;
    if bytes.iter().take(SNIFF_BYTES).any(|&b| b == 0) {
        return Err(FlexureError::input(
            path,
            "is a binary file, not a point list: give a text export (x y z per line) or a raster",
        ));
    }
    let text = String::from_utf8_lossy(&bytes);
    parse_points(&text, path, options)
}

/// Reads point-list `text` onto its lattice; `path` is used only in messages. Pure.
///
/// Format: one point a line, fields separated by semicolons, tabs, commas or spaces (detected
/// from the header, else the first data line; see [`Delimiter::detect`]); blank lines and
/// lines starting with `#` are skipped; an optional header line of names, the line of names
/// just before the first data line (a line of at least 3 fields, mostly numbers); free text
/// lines above the header are skipped and reported ([`LatticeReport::preamble`]). Column roles
/// come from `options.columns`, else from the header (see [`ColumnRole::parse_list`] for the
/// names; `z`, `depth`, `time`, `twt`, `value`, `elevation` are known value names, and once x
/// and y are found every other column is a value column), else from the field count. In value
/// columns, values equal to an `options.nodata` sentinel, an empty field and the null words
/// `nan`, `null`, `n/a`, `na`, `#n/a`, `-` (any case) are nulls; coordinates and line numbers
/// must be numbers.
///
/// Errors (one line each, naming the file line where there is one): unreadable columns,
/// non-numeric fields, points off the lattice by more than the tolerance (with a fit that a
/// few wrong points cannot pull, so a typo is named by its line), scattered points that need
/// gridding, a lattice too large or too sparse for its points, nodes given twice with
/// different values, fewer than 3 x 3 points or nodes.
pub fn parse_points(text: &str, path: &Path, options: &PointOptions) -> Result<PointGrid> {
    let fail = |reason: String| FlexureError::input(path, reason);
    let tolerance = options.lattice_tolerance;
    if !(tolerance > 0.0 && tolerance < 0.5) {
        return Err(FlexureError::Parameter(format!(
            "--lattice-tolerance {tolerance} is outside 0..0.5: give the largest allowed distance from a lattice node as a share of the smaller bin (default 0.05)"
        )));
    }
    let layout = layout(content_lines(text));
    let Some((data_line, data_first)) = layout.data else {
        return Err(fail(match &layout.header {
            Some((line, names)) if names.iter().any(|n| role_name(n)) => format!(
                "line {line} is a header but no data lines follow (a data line has at least 3 fields, mostly numbers): give the points below it"
            ),
            Some((line, _)) => format!(
                "has no data line (one of at least 3 fields, mostly numbers; the first line with content is line {line}): give a point list with x, y and value columns, one point per line"
            ),
            None => "holds no data lines: give a point list with x, y and value columns"
                .to_string(),
        }));
    };
    let mut splitter = Splitter::new(layout.delimiter);
    let first = {
        let mut fields = splitter.split(data_first);
        let fits = layout
            .header
            .as_ref()
            .is_none_or(|(_, names)| fields.fit(names.len()));
        FirstData {
            line: data_line,
            text: data_first,
            fields: fields.len(),
            fits,
        }
    };
    let columns = resolve_columns(layout.header.as_ref(), &first, layout.delimiter, options)
        .map_err(&fail)?;
    let lines = content_lines(text).skip_while(|&(line, _)| line < data_line);
    let points = read_fields(lines, &mut splitter, &columns, options).map_err(&fail)?;
    if points.len() >= u32::MAX as usize {
        return Err(fail(format!(
            "holds {} points, more than flexure reads from one list; give a raster",
            points.len()
        )));
    }
    enough(points.len(), "points").map_err(&fail)?;
    let value_columns: Vec<ValueColumn> = columns
        .iter()
        .filter(|c| c.role == Role::Value)
        .map(|c| ValueColumn {
            name: c.name.clone(),
            unit: c.unit.clone(),
        })
        .collect();
    let (indices, numbering) = if points.has_numbering {
        let (cols, rows, numbering) = lattice_from_numbering(&points);
        ((cols, rows), Some(numbering))
    } else {
        let indices = lattice_from_coordinates(&points, tolerance).map_err(&fail)?;
        (indices, None)
    };
    let reading = Reading {
        numbering,
        value_columns,
        preamble: layout.preamble,
        tolerance,
    };
    place(points, indices, reading).map_err(fail)
}

/// Refuses fewer than 3 x 3 `what` (points, or distinct nodes).
fn enough(count: usize, what: &str) -> std::result::Result<(), String> {
    if count < 9 {
        return Err(format!(
            "holds only {count} {what}; a horizon needs at least 3 x 3 points"
        ));
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------
// Columns

/// Names the reader recognises.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Known {
    Inline,
    Crossline,
    X,
    Y,
    Value,
    Skip,
}

impl Known {
    fn label(self) -> &'static str {
        match self {
            Known::Inline => "inline",
            Known::Crossline => "crossline",
            Known::X => "x",
            Known::Y => "y",
            Known::Value => "value",
            Known::Skip => "skip",
        }
    }
}

/// The role a column name stands for (`name` without its unit suffix).
fn recognise(name: &str) -> Option<Known> {
    Some(match name_key(name).as_str() {
        "inline" | "iline" | "il" | "inline3d" | "inlineno" | "inlinenumber" => Known::Inline,
        "xline" | "crossline" | "xl" | "trace" | "crossline3d" | "xline3d" | "xlineno"
        | "crosslineno" | "xlinenumber" | "crosslinenumber" => Known::Crossline,
        "x" | "easting" | "cdpx" => Known::X,
        "y" | "northing" | "cdpy" => Known::Y,
        "z" | "depth" | "time" | "twt" | "value" | "elevation" => Known::Value,
        "skip" => Known::Skip,
        _ => return None,
    })
}

/// Whether a header name (with or without a unit suffix) is a column name the reader
/// recognises, `skip` aside.
fn role_name(name: &str) -> bool {
    recognise(split_unit(name).0).is_some_and(|k| k != Known::Skip)
}

/// Role of a column while reading.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Role {
    Inline,
    Crossline,
    X,
    Y,
    Value,
    Skip,
}

/// A column while reading: role, name for messages and bands, unit.
#[derive(Clone, Debug)]
struct Column {
    role: Role,
    name: String,
    unit: Option<String>,
}

/// Checks a role list: one x, one y, inline and crossline both or neither, a value column,
/// no role or value name twice. Returns the problem (without subject) when not.
fn check_roles(roles: &[ColumnRole]) -> std::result::Result<(), String> {
    let count = |k: Known| roles.iter().filter(|r| r.kind() == k).count();
    for k in [Known::Inline, Known::Crossline, Known::X, Known::Y] {
        if count(k) > 1 {
            return Err(format!(
                "names {} columns {} times: keep one and mark the others skip",
                k.label(),
                count(k)
            ));
        }
    }
    if count(Known::X) == 0 || count(Known::Y) == 0 {
        return Err("names no x and y columns: every point needs its map coordinates".to_string());
    }
    if count(Known::Inline) != count(Known::Crossline) {
        let (has, lacks) = if count(Known::Inline) == 1 {
            ("an inline", "crossline")
        } else {
            ("a crossline", "inline")
        };
        return Err(format!(
            "names {has} column but no {lacks} column: name both, or mark it skip to find the lattice from x, y alone"
        ));
    }
    let values: Vec<String> = roles
        .iter()
        .filter_map(|r| match r {
            ColumnRole::Value(v) => Some(split_unit(v).0.to_lowercase()),
            _ => None,
        })
        .collect();
    if values.is_empty() {
        return Err(
            "names no value column: add one (e.g. z, twt or a sector name such as az15)"
                .to_string(),
        );
    }
    if let Some(twice) = values
        .iter()
        .enumerate()
        .find(|(k, v)| values[..*k].contains(v))
    {
        return Err(format!(
            "names value column '{}' twice: give each value column its own name",
            twice.1
        ));
    }
    Ok(())
}

/// The first data line: its number, text, field count and whether that count fits the
/// header's ([`crate::io::table::Fields::fit`]; true without a header).
struct FirstData<'a> {
    line: usize,
    text: &'a str,
    fields: usize,
    fits: bool,
}

/// The columns of a point list from `--columns`, else its header, else the first data line's
/// field count; refuses a header whose name count is not the data's.
fn resolve_columns(
    header: Option<&(usize, Vec<String>)>,
    first: &FirstData,
    delimiter: Delimiter,
    options: &PointOptions,
) -> std::result::Result<Vec<Column>, String> {
    if let Some((line, names)) = header.filter(|_| !first.fits) {
        return Err(format!(
            "line {line} ({}) names {} columns but line {}, the first data line, has {} fields{}: if line {line} is not a header, mark it a comment with #; else give one name per column",
            names.join(", "),
            names.len(),
            first.line,
            first.fields,
            count_hint(first.text, delimiter, first.fields, names.len())
        ));
    }
    let column = |role: &ColumnRole, header_unit: Option<String>| -> Column {
        let (r, text) = match role {
            ColumnRole::Inline => (Role::Inline, "inline"),
            ColumnRole::Crossline => (Role::Crossline, "crossline"),
            ColumnRole::X => (Role::X, "x"),
            ColumnRole::Y => (Role::Y, "y"),
            ColumnRole::Value(v) => (Role::Value, v.as_str()),
            ColumnRole::Skip => (Role::Skip, "skip"),
        };
        let (name, unit) = split_unit(text);
        Column {
            role: r,
            name: name.to_string(),
            unit: unit.or(header_unit),
        }
    };
    if let Some(roles) = &options.columns {
        check_roles(roles).map_err(|m| format!("--columns {m}"))?;
        let Some((line, names)) = header else {
            return Ok(roles.iter().map(|r| column(r, None)).collect());
        };
        if names.len() != roles.len() {
            return Err(format!(
                "--columns names {} columns but the header on line {line} has {} ({}); give one name per column",
                roles.len(),
                names.len(),
                names.join(", ")
            ));
        }
        let mut out = Vec::new();
        for (k, (role, name)) in roles.iter().zip(names).enumerate() {
            let (bare, unit) = split_unit(name);
            let said = role.kind();
            match recognise(bare) {
                Some(heard) if heard != Known::Skip && said != Known::Skip && heard != said => {
                    let what = if bare.eq_ignore_ascii_case(heard.label()) {
                        String::new()
                    } else {
                        format!(" ({} column)", heard.label())
                    };
                    return Err(format!(
                        "--columns says column {} is {} but the header on line {line} names it '{name}'{what}; fix --columns or leave it out to use the header",
                        k + 1,
                        role_text(role),
                    ));
                }
                _ => out.push(column(role, unit)),
            }
        }
        return Ok(out);
    }
    if let Some((line, names)) = header {
        let known: Vec<Option<Known>> = names
            .iter()
            .map(|n| recognise(split_unit(n).0).filter(|k| *k != Known::Skip))
            .collect();
        if known.iter().all(Option::is_none) {
            return Err(format!(
                "the header on line {line} ({}) names no column flexure knows; say what each holds, e.g. --columns {} (inline, xline, x, y and skip are roles; any other name is a value column)",
                names.join(", "),
                example_columns(names.len())
            ));
        }
        let roles: Vec<ColumnRole> = names
            .iter()
            .zip(&known)
            .map(|(name, k)| match k {
                Some(Known::Inline) => ColumnRole::Inline,
                Some(Known::Crossline) => ColumnRole::Crossline,
                Some(Known::X) => ColumnRole::X,
                Some(Known::Y) => ColumnRole::Y,
                _ => ColumnRole::Value(name.clone()),
            })
            .collect();
        check_roles(&roles).map_err(|m| {
            format!(
                "the header on line {line} ({}) {m}; say what each column holds, e.g. --columns {}",
                names.join(", "),
                example_from_header(&known)
            )
        })?;
        return Ok(roles.iter().map(|r| column(r, None)).collect());
    }
    let names: &[&str] = match first.fields {
        3 => &["x", "y", "z"],
        5 => &["inline", "xline", "x", "y", "z"],
        n => {
            return Err(format!(
                "the first data line has {n} fields and there is no header: say what they are, e.g. --columns {}",
                example_columns(n)
            ))
        }
    };
    Ok(ColumnRole::parse_list(&names.join(","))
        .map_err(|e| e.to_string())?
        .iter()
        .map(|r| column(r, None))
        .collect())
}

fn role_text(role: &ColumnRole) -> String {
    match role {
        ColumnRole::Value(v) => format!("value '{v}'"),
        other => other.kind().label().to_string(),
    }
}

/// A `--columns` example keeping a header's recognised roles: a lone inline or crossline
/// becomes skip, other names become value columns; [`example_columns`] when x or y is missing.
fn example_from_header(known: &[Option<Known>]) -> String {
    let has = |k: Known| known.contains(&Some(k));
    if !(has(Known::X) && has(Known::Y)) {
        return example_columns(known.len());
    }
    let numbered = has(Known::Inline) && has(Known::Crossline);
    let mut value_named = false;
    known
        .iter()
        .map(|k| match k {
            Some(Known::Inline) if numbered => "inline",
            Some(Known::Crossline) if numbered => "xline",
            Some(Known::Inline | Known::Crossline | Known::Skip) => "skip",
            Some(Known::X) => "x",
            Some(Known::Y) => "y",
            Some(Known::Value) | None if !value_named => {
                value_named = true;
                "z"
            }
            Some(Known::Value) | None => "skip",
        })
        .collect::<Vec<_>>()
        .join(",")
}

/// A `--columns` example for `n` fields.
fn example_columns(n: usize) -> String {
    match n {
        0..=3 => "x,y,z".to_string(),
        4 => "x,y,z,skip".to_string(),
        5 => "inline,xline,x,y,z".to_string(),
        n => format!("inline,xline,x,y,z{}", ",skip".repeat(n - 5)),
    }
}

// ---------------------------------------------------------------------------------------
// Lines and fields

/// Whether a line's fields are data: at least 3 fields, none a recognised column name, and
/// most of them numbers or mistyped numbers (starting with a digit, sign or point; decimal
/// commas included) or null words, so that a line of numbers with typos is data (its error
/// then names the bad field) while free text with a number in it (`Exported 2024 by ...`)
/// and a header of names and sector azimuths (`inline,xline,x,y,15,45,75`) are not.
fn is_data(fields: &[String]) -> bool {
    let numeric = |f: &&String| {
        is_null_word(f)
            || f.starts_with(|c: char| c.is_ascii_digit() || matches!(c, '+' | '-' | '.'))
            || f.parse::<f64>().is_ok()
    };
    fields.len() >= 3
        && !fields.iter().any(|f| role_name(f))
        && 2 * fields.iter().filter(numeric).count() > fields.len()
}

/// Where a point list's parts begin.
struct Layout<'a> {
    /// First and last line of free text above the header.
    preamble: Option<(usize, usize)>,
    /// Line number and names of the header.
    header: Option<(usize, Vec<String>)>,
    /// Number and text of the first data line.
    data: Option<(usize, &'a str)>,
    /// The header's delimiter, else the first data line's.
    delimiter: Delimiter,
}

/// The layout of content `lines`: the first data line is the first that [`is_data`]; the
/// header, the line just before it; free text, the lines before the header. With no data
/// line, the first line is the header.
fn layout<'a>(lines: impl Iterator<Item = (usize, &'a str)>) -> Layout<'a> {
    let header_of = |(line, text): (usize, &str)| {
        let delimiter = Delimiter::detect(text);
        (Some((line, header_names(text, delimiter))), delimiter)
    };
    // The first text line, the line number of the text line before the last, the last.
    let mut first_text: Option<(usize, &str)> = None;
    let mut before_last: Option<usize> = None;
    let mut last_text: Option<(usize, &str)> = None;
    for (line, text) in lines {
        let delimiter = Delimiter::detect(text);
        let fields = header_names(text, delimiter);
        if !is_data(&fields) {
            first_text = first_text.or(Some((line, text)));
            before_last = last_text.map(|(l, _)| l);
            last_text = Some((line, text));
            continue;
        }
        let (header, header_delimiter) = last_text.map_or((None, delimiter), header_of);
        return Layout {
            preamble: first_text.map(|(l, _)| l).zip(before_last),
            header,
            data: Some((line, text)),
            delimiter: header_delimiter,
        };
    }
    let (header, delimiter) = first_text.map_or((None, Delimiter::Whitespace), header_of);
    Layout {
        preamble: None,
        header,
        data: None,
        delimiter,
    }
}

/// The points of a file, one entry per data line.
struct Points {
    /// File line of each point (1-based).
    lines: Vec<usize>,
    x: Vec<f64>,
    y: Vec<f64>,
    inline: Vec<i64>,
    crossline: Vec<i64>,
    has_numbering: bool,
    /// `values[k * bands + b]`, NaN = null.
    values: Vec<f64>,
    bands: usize,
}

impl Points {
    fn len(&self) -> usize {
        self.lines.len()
    }

    fn value(&self, k: usize, b: usize) -> f64 {
        self.values[k * self.bands + b]
    }
}

/// Reads the data `lines` (from the first data line on) into points, one per line.
fn read_fields<'a>(
    lines: impl Iterator<Item = (usize, &'a str)>,
    splitter: &mut Splitter,
    columns: &[Column],
    options: &PointOptions,
) -> std::result::Result<Points, String> {
    let bands = columns.iter().filter(|c| c.role == Role::Value).count();
    let has_numbering = columns.iter().any(|c| c.role == Role::Inline);
    let mut p = Points {
        lines: Vec::new(),
        x: Vec::new(),
        y: Vec::new(),
        inline: Vec::new(),
        crossline: Vec::new(),
        has_numbering,
        values: Vec::new(),
        bands,
    };
    let names = columns
        .iter()
        .map(|c| c.name.as_str())
        .collect::<Vec<_>>()
        .join(", ");
    let delimiter = splitter.delimiter();
    for (line, text) in lines {
        let mut fields = splitter.split(text);
        if !fields.fit(columns.len()) {
            return Err(format!(
                "line {line} has {} fields but {} columns are expected ({names}){}; fix the line, mark it a comment with #, or give --columns",
                fields.len(),
                columns.len(),
                count_hint(text, delimiter, fields.len(), columns.len())
            ));
        }
        for (k, (field, column)) in fields.iter().zip(columns).enumerate() {
            let v = field_value(field, column.role, &options.nodata).map_err(|what| {
                format!(
                    "line {line}, column {} ({}): '{field}' {what}",
                    k + 1,
                    columns[k].name
                )
            })?;
            match column.role {
                Role::Value => p.values.push(v),
                Role::X => p.x.push(v),
                Role::Y => p.y.push(v),
                Role::Inline => p.inline.push(v as i64),
                Role::Crossline => p.crossline.push(v as i64),
                Role::Skip => {}
            }
        }
        p.lines.push(line);
    }
    Ok(p)
}

/// The number a field of a column with `role` holds (NaN for a null value), or what is wrong
/// with it and what to do.
fn field_value(field: &str, role: Role, nodata: &[f64]) -> std::result::Result<f64, String> {
    let number = field.parse::<f64>();
    match role {
        Role::Skip => Ok(0.0),
        Role::Value if is_null_word(field) => Ok(f64::NAN),
        Role::Value => match number {
            Ok(v) if v.is_nan() || nodata.contains(&v) => Ok(f64::NAN),
            Ok(v) if v.is_finite() => Ok(v),
            Ok(_) => Err(
                "is not a finite number; write a null as nan or a --nodata value".to_string(),
            ),
            Err(_) => Err(format!(
                "is not a number{}; fix the line, or write a null as nan or a --nodata value",
                number_hint(field)
            )),
        },
        Role::X | Role::Y => match number {
            Ok(v) if v.is_finite() => Ok(v),
            Err(_) if !is_null_word(field) => Err(format!(
                "is not a number{}; fix the line",
                number_hint(field)
            )),
            _ => Err(
                "is not a map coordinate; leave out the line (a node without a point is null)"
                    .to_string(),
            ),
        },
        Role::Inline | Role::Crossline => match number {
            Ok(v) if v.is_finite() && v.fract() == 0.0 && v.abs() < 1e15 => Ok(v),
            _ => Err(
                "is not a whole line number; fix the numbering, or mark the inline and crossline columns skip (--columns) to find the lattice from x, y alone"
                    .to_string(),
            ),
        },
    }
}

// ---------------------------------------------------------------------------------------
// Lattice from inline/crossline numbers

fn gcd(mut a: u64, mut b: u64) -> u64 {
    while b != 0 {
        (a, b) = (b, a % b);
    }
    a
}

type Indices = (Vec<i64>, Vec<i64>);

/// Column and row indices from crossline and inline numbers (steps: gcd of the differences).
fn lattice_from_numbering(p: &Points) -> (Vec<i64>, Vec<i64>, Numbering) {
    let axis = |numbers: &[i64]| {
        let min = numbers.iter().copied().min().unwrap_or(0);
        let max = numbers.iter().copied().max().unwrap_or(0);
        let step = numbers
            .iter()
            .fold(0, |g, &v| gcd(g, v.abs_diff(min)))
            .max(1) as i64;
        let index = numbers
            .iter()
            .map(|&v| (v - min) / step)
            .collect::<Vec<_>>();
        (index, min, max, step)
    };
    let (cols, xl_first, xl_last, xl_step) = axis(&p.crossline);
    let (rows, il_first, il_last, il_step) = axis(&p.inline);
    (
        cols,
        rows,
        Numbering {
            inline_first: il_first,
            inline_last: il_last,
            inline_step: il_step,
            crossline_first: xl_first,
            crossline_last: xl_last,
            crossline_step: xl_step,
        },
    )
}

// ---------------------------------------------------------------------------------------
// Lattice from coordinates alone

/// What to do with points that are not on a lattice.
const GRID_FIRST: &str = "grid them first (e.g. gdal_grid) and give the raster: flexure reads point lists only when every point sits on one regular bin lattice, and does not grid silently";

/// Most points sampled to find the basis.
const BASIS_SAMPLES: usize = 20_000;
/// Farthest bucket ring searched for a neighbour.
const MAX_RING: i64 = 24;

/// Points in square buckets (compressed rows: `items[start[b]..start[b + 1]]` are the points of
/// bucket `b`, in file order).
struct Buckets {
    u0: f64,
    v0: f64,
    size: f64,
    nx: i64,
    ny: i64,
    start: Vec<u32>,
    items: Vec<u32>,
}

impl Buckets {
    /// About one point per bucket for points spread over their bounding box.
    fn new(u: &[f64], v: &[f64]) -> Option<Self> {
        let n = u.len();
        let range = |a: &[f64]| {
            a.iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &x| {
                    (lo.min(x), hi.max(x))
                })
        };
        let ((u0, u1), (v0, v1)) = (range(u), range(v));
        let (w, h) = (u1 - u0, v1 - v0);
        let mut size = (w * h / n as f64).sqrt();
        if size.is_nan() || size <= 0.0 {
            size = w.max(h) / n as f64;
        }
        if !size.is_finite() || size <= 0.0 {
            return None;
        }
        // Counted in f64 until they fit: extents of wildly different size (2e6 by 2e-300)
        // would ask for more buckets across than an i64 holds.
        let across = |extent: f64, size: f64| (extent / size).floor() + 1.0;
        while across(w, size) * across(h, size) > 4.0 * n as f64 + 64.0 {
            size *= 1.5;
        }
        let (nx, ny) = (across(w, size) as i64, across(h, size) as i64);
        let mut b = Buckets {
            u0,
            v0,
            size,
            nx,
            ny,
            start: vec![0; (nx * ny) as usize + 1],
            items: vec![0; n],
        };
        let ids: Vec<usize> = (0..n).map(|k| b.id(b.cell(u[k], v[k]))).collect();
        for &id in &ids {
            b.start[id + 1] += 1;
        }
        for i in 1..b.start.len() {
            b.start[i] += b.start[i - 1];
        }
        let mut fill = b.start.clone();
        for (k, &id) in ids.iter().enumerate() {
            b.items[fill[id] as usize] = k as u32;
            fill[id] += 1;
        }
        Some(b)
    }

    fn cell(&self, u: f64, v: f64) -> (i64, i64) {
        let bx = ((u - self.u0) / self.size).floor() as i64;
        let by = ((v - self.v0) / self.size).floor() as i64;
        (bx.clamp(0, self.nx - 1), by.clamp(0, self.ny - 1))
    }

    fn id(&self, (bx, by): (i64, i64)) -> usize {
        (by * self.nx + bx) as usize
    }

    /// The shortest non-zero vector from point `k` to another point that `accept`s, searching
    /// rings of buckets outward until no nearer point can remain (or `MAX_RING`).
    fn nearest(
        &self,
        u: &[f64],
        v: &[f64],
        k: usize,
        accept: impl Fn(f64, f64) -> bool,
    ) -> Option<(f64, f64)> {
        let (cx, cy) = self.cell(u[k], v[k]);
        let mut best: Option<(f64, f64, f64)> = None;
        for ring in 0..=MAX_RING {
            let mut visit = |bx: i64, by: i64| {
                if bx < 0 || by < 0 || bx >= self.nx || by >= self.ny {
                    return;
                }
                let id = self.id((bx, by));
                for &j in &self.items[self.start[id] as usize..self.start[id + 1] as usize] {
                    let j = j as usize;
                    let (du, dv) = (u[j] - u[k], v[j] - v[k]);
                    let d2 = du * du + dv * dv;
                    if d2 > 0.0 && best.is_none_or(|b| d2 < b.0) && accept(du, dv) {
                        best = Some((d2, du, dv));
                    }
                }
            };
            if ring == 0 {
                visit(cx, cy);
            } else {
                for dx in -ring..=ring {
                    visit(cx + dx, cy - ring);
                    visit(cx + dx, cy + ring);
                }
                for dy in -ring + 1..ring {
                    visit(cx - ring, cy + dy);
                    visit(cx + ring, cy + dy);
                }
            }
            let searched = ring as f64 * self.size;
            if best.is_some_and(|b| b.0 <= searched * searched)
                || (ring >= self.nx && ring >= self.ny)
            {
                break;
            }
        }
        best.map(|b| (b.1, b.2))
    }
}

/// The most frequent vector among `vectors` (taken with both signs), clustered at a tenth of
/// `scale`: the 3 x 3 block of cells holding most vectors, then the mean of the vectors within
/// a fifth of `scale` of it (twice).
fn mode_vector(vectors: &[(f64, f64)], scale: f64) -> Option<(f64, f64)> {
    let q = 0.1 * scale;
    let both = || vectors.iter().flat_map(|&(a, b)| [(a, b), (-a, -b)]);
    let mut keys: Vec<(i64, i64)> = both()
        .map(|(a, b)| ((a / q).round() as i64, (b / q).round() as i64))
        .collect();
    keys.sort_unstable();
    let mut cells: Vec<((i64, i64), usize)> = Vec::new();
    for key in keys {
        match cells.last_mut() {
            Some((k, c)) if *k == key => *c += 1,
            _ => cells.push((key, 1)),
        }
    }
    let count_at = |key: (i64, i64)| {
        cells
            .binary_search_by(|(k, _)| k.cmp(&key))
            .map_or(0, |i| cells[i].1)
    };
    let mut best = None;
    let mut best_score = 0;
    for &((kx, ky), _) in &cells {
        let score: usize = (-1..=1)
            .flat_map(|dx| (-1..=1).map(move |dy| (kx + dx, ky + dy)))
            .map(count_at)
            .sum();
        if score > best_score {
            best_score = score;
            best = Some((kx as f64 * q, ky as f64 * q));
        }
    }
    let mut centre = best?;
    let radius = 0.2 * scale;
    for _ in 0..2 {
        let (mut su, mut sv, mut m) = (0.0, 0.0, 0usize);
        for (a, b) in both() {
            if (a - centre.0).hypot(b - centre.1) <= radius {
                su += a;
                sv += b;
                m += 1;
            }
        }
        if m == 0 {
            return None;
        }
        centre = (su / m as f64, sv / m as f64);
    }
    Some(centre)
}

/// Lagrange's reduction of a two-dimensional basis: the shortest vector and the shortest one
/// independent of it.
fn reduce(mut b1: (f64, f64), mut b2: (f64, f64)) -> ((f64, f64), (f64, f64)) {
    let norm2 = |a: (f64, f64)| a.0 * a.0 + a.1 * a.1;
    for _ in 0..64 {
        if norm2(b2) < norm2(b1) {
            std::mem::swap(&mut b1, &mut b2);
        }
        let mu = ((b1.0 * b2.0 + b1.1 * b2.1) / norm2(b1)).round();
        if mu == 0.0 {
            break;
        }
        b2 = (b2.0 - mu * b1.0, b2.1 - mu * b1.1);
    }
    (b1, b2)
}

fn azimuth(a: (f64, f64)) -> f64 {
    a.0.atan2(a.1).to_degrees().rem_euclid(360.0)
}

/// The column axis is the basis direction closest to east (ties: smaller azimuth); the row
/// axis the other, signed so rows run clockwise from columns (negative determinant, as a
/// north-up grid with y decreasing down the rows).
fn orient(b1: (f64, f64), b2: (f64, f64)) -> ((f64, f64), (f64, f64)) {
    let neg = |a: (f64, f64)| (-a.0, -a.1);
    let off_east = |a: (f64, f64)| {
        let d = (azimuth(a) - 90.0).abs();
        d.min(360.0 - d)
    };
    let candidates = [(b1, b2), (neg(b1), b2), (b2, b1), (neg(b2), b1)];
    let mut best = candidates[0];
    for &c in &candidates[1..] {
        let (dc, db) = (off_east(c.0), off_east(best.0));
        if dc < db - 1e-9 || ((dc - db).abs() <= 1e-9 && azimuth(c.0) < azimuth(best.0)) {
            best = c;
        }
    }
    let (col, row) = best;
    let row = if col.0 * row.1 - col.1 * row.0 > 0.0 {
        neg(row)
    } else {
        row
    };
    (col, row)
}

/// Share of the smaller bin within which a point counts as on a node while the lattice is
/// refitted: half the smallest sub-lattice offset looked for (1/4 of a step).
const FIT_SHARE: f64 = 0.125;
/// Largest denominator of the sub-lattice offsets looked for (1/2, 1/3 and 1/4 of a step).
const MAX_DIVISOR: i64 = 4;
/// Points of one sub-lattice offset that must each have a point of the same offset one step
/// away along a row or column before the offset refines the lattice.
const MIN_GROUPED: usize = 4;

fn scattered(what: &str) -> String {
    format!("the points lie on no regular lattice ({what}); {GRID_FIRST}")
}

/// Column and row indices of the points from their coordinates alone: the first lattice
/// ([`first_lattice`]) settled on the points ([`settle`]) and refined to the finest lattice
/// the points lie on ([`finer_basis`], at most twice).
fn lattice_from_coordinates(p: &Points, tolerance: f64) -> std::result::Result<Indices, String> {
    // Coordinates relative to the first point (UTM eastings are ~1e6).
    let (x0, y0) = (p.x[0], p.y[0]);
    let u: Vec<f64> = p.x.iter().map(|x| x - x0).collect();
    let v: Vec<f64> = p.y.iter().map(|y| y - y0).collect();
    let mut lattice = settle(&u, &v, first_lattice(&u, &v)?);
    for _ in 0..2 {
        let Some((col, row)) = finer_basis(&u, &v, &lattice, tolerance) else {
            break;
        };
        lattice = settle(
            &u,
            &v,
            Affine {
                col,
                row,
                ..lattice
            },
        );
    }
    let indices: Option<Vec<(i64, i64)>> = (0..p.len())
        .map(|k| {
            let (c, r) = lattice.index(u[k], v[k])?;
            (c.abs() < 1e15 && r.abs() < 1e15).then(|| (c.round() as i64, r.round() as i64))
        })
        .collect();
    let indices = indices.ok_or_else(|| scattered("the steps between neighbours do not repeat"))?;
    Ok(indices.into_iter().unzip())
}

/// A first lattice from the points themselves: the most frequent step to the nearest
/// neighbour and the most frequent shortest step not parallel to it, reduced and oriented
/// ([`reduce`], [`orient`]), with its origin at the first sampled point whose nearest
/// neighbour is one most frequent step away (so a lone wrong point cannot anchor it).
fn first_lattice(u: &[f64], v: &[f64]) -> std::result::Result<Affine, String> {
    let n = u.len();
    let buckets = Buckets::new(u, v).ok_or_else(|| {
        "has all its points at one place; a horizon needs a two-dimensional grid of points"
            .to_string()
    })?;
    let stride = n.div_ceil(BASIS_SAMPLES);
    let sample = || (0..n).step_by(stride);
    let nearest: Vec<(usize, (f64, f64))> = sample()
        .filter_map(|k| Some((k, buckets.nearest(u, v, k, |_, _| true)?)))
        .collect();
    let steps: Vec<(f64, f64)> = nearest.iter().map(|n| n.1).collect();
    let scale = median(&mut steps.iter().map(|a| a.0.hypot(a.1)).collect::<Vec<_>>())
        .ok_or_else(|| scattered("no point has a neighbour"))?;
    let b1 =
        mode_vector(&steps, scale).ok_or_else(|| scattered("no common step between neighbours"))?;
    let b1_len = b1.0.hypot(b1.1);
    let independent =
        |du: f64, dv: f64| (du * b1.1 - dv * b1.0).abs() > 0.34 * b1_len * du.hypot(dv);
    let second: Vec<(f64, f64)> = sample()
        .filter_map(|k| buckets.nearest(u, v, k, independent))
        .collect();
    let scale2 = median(&mut second.iter().map(|a| a.0.hypot(a.1)).collect::<Vec<_>>())
        .ok_or_else(|| {
            "all points lie along one line; a horizon needs a two-dimensional grid of points"
                .to_string()
        })?;
    let b2 = mode_vector(&second, scale2)
        .ok_or_else(|| scattered("no common second step between neighbours"))?;
    let (r1, r2) = reduce(b1, b2);
    let cross = (r1.0 * r2.1 - r1.1 * r2.0).abs();
    if cross.is_nan() || cross <= 0.1 * r1.0.hypot(r1.1) * r2.0.hypot(r2.1) {
        return Err(scattered(
            "the steps between neighbours are nearly parallel",
        ));
    }
    let (col, row) = orient(r1, r2);
    let typical = |a: (f64, f64)| {
        (a.0 - b1.0)
            .hypot(a.1 - b1.1)
            .min((a.0 + b1.0).hypot(a.1 + b1.1))
            <= 0.05 * b1_len
    };
    let anchor = nearest.iter().find(|(_, a)| typical(*a)).map_or(0, |n| n.0);
    Ok(Affine {
        origin: (u[anchor], v[anchor]),
        col,
        row,
    })
}

/// `lattice` refitted by least squares to the points within [`FIT_SHARE`] of the smaller bin
/// of a node: over growing neighbourhoods of its origin, so that a slightly-off first basis
/// cannot drift across a large grid, then over all points until the fit no longer changes.
fn settle(u: &[f64], v: &[f64], mut lattice: Affine) -> Affine {
    // Point `k` as (column, row, u, v) when it lies within `limit` of its node of `a` and
    // `radius` nodes of its origin.
    let near_node = |a: &Affine, limit: f64, k: usize, radius: f64| {
        let (c, r) = a.index(u[k], v[k])?;
        let (c, r) = (c.round(), r.round());
        let near = squared_distance((u[k], v[k]), a.at(c, r)) <= limit * limit;
        (near && c.abs() <= radius && r.abs() <= radius).then_some((c, r, u[k], v[k]))
    };
    for radius in [4.0, 32.0, 256.0, 2048.0] {
        let (current, limit) = (lattice, FIT_SHARE * lattice.min_bin());
        if let Some(fit) = fit_affine(u.len(), |k| near_node(&current, limit, k, radius)) {
            lattice = fit;
        }
    }
    for _ in 0..8 {
        let (current, limit) = (lattice, FIT_SHARE * lattice.min_bin());
        match fit_affine(u.len(), |k| near_node(&current, limit, k, f64::INFINITY)) {
            Some(fit) if fit != current => lattice = fit,
            _ => break,
        }
    }
    lattice
}

/// A finer lattice through the nodes of `lattice` when points off it sit in groups at simple
/// fractions of its steps (1/2, 1/3 or 1/4; e.g. the inlines between the interpreted ones
/// where a patch was picked on every inline): the reduced, oriented basis of the lattice that
/// its steps and those offsets generate. An offset counts when at least [`MIN_GROUPED`] of
/// its points have a point of the same offset one step away along a row or column, so lone
/// wrong points never refine a lattice; `None` when none counts.
fn finer_basis(
    u: &[f64],
    v: &[f64],
    lattice: &Affine,
    tolerance: f64,
) -> Option<((f64, f64), (f64, f64))> {
    let bin = lattice.min_bin();
    let twelfths = |d: f64| (d * 12.0).round() as i64;
    // (offset in twelfths of a step, column, row of the node the offset is taken from)
    let mut members: Vec<((i64, i64), i64, i64)> = Vec::new();
    for k in 0..u.len() {
        let Some((c, r)) = lattice.index(u[k], v[k]) else {
            continue;
        };
        let on_node = lattice.at(c.round(), r.round());
        if squared_distance((u[k], v[k]), on_node) <= (tolerance * bin).powi(2) {
            continue;
        }
        for q in (2..=MAX_DIVISOR).map(|q| q as f64) {
            let snap = |f: f64| ((f - f.round()) * q).round() / q;
            let (dc, dr) = (snap(c).rem_euclid(1.0), snap(r).rem_euclid(1.0));
            let (base_c, base_r) = ((c - dc).round(), (r - dr).round());
            let at_offset = lattice.at(base_c + dc, base_r + dr);
            let near = squared_distance((u[k], v[k]), at_offset) <= (tolerance * bin / q).powi(2);
            // (Nodes beyond 1e15 steps cannot be resolved to a fraction of a step anyway;
            // kept out, their neighbours' indices below cannot overflow.)
            let resolvable = base_c.abs() < 1e15 && base_r.abs() < 1e15;
            if (dc, dr) != (0.0, 0.0) && near && resolvable {
                members.push(((twelfths(dc), twelfths(dr)), base_c as i64, base_r as i64));
                break;
            }
        }
    }
    members.sort_unstable();
    let mut generators = vec![(12, 0), (0, 12)];
    for group in members.chunk_by(|a, b| a.0 == b.0) {
        let has = |c: i64, r: i64| group.binary_search_by(|m| (m.1, m.2).cmp(&(c, r))).is_ok();
        let grouped = group
            .iter()
            .filter(|&&(_, c, r)| has(c - 1, r) || has(c + 1, r) || has(c, r - 1) || has(c, r + 1))
            .count();
        if grouped >= MIN_GROUPED {
            generators.push(group[0].0);
        }
    }
    if generators.len() == 2 {
        return None;
    }
    let ((a, _), (b, c)) = hermite(&generators);
    let step = |w: (f64, f64), f: i64| (w.0 * f as f64 / 12.0, w.1 * f as f64 / 12.0);
    let e1 = step(lattice.col, a);
    let (e2c, e2r) = (step(lattice.col, b), step(lattice.row, c));
    let (b1, b2) = reduce(e1, (e2c.0 + e2r.0, e2c.1 + e2r.1));
    Some(orient(b1, b2))
}

/// A basis `((a, 0), (b, c))` (a, c > 0, 0 <= b < a) of the integer lattice that `vectors`
/// generate, which must include two independent ones: the Hermite normal form, by Euclid's
/// algorithm on the second components and the gcd of the first components left (elementary
/// number theory).
fn hermite(vectors: &[(i64, i64)]) -> ((i64, i64), (i64, i64)) {
    let mut pivot = (0i64, 0i64);
    let mut a = 0u64;
    for &w in vectors {
        let mut w = w;
        while w.1 != 0 {
            let q = pivot.1.div_euclid(w.1);
            pivot = (pivot.0 - q * w.0, pivot.1 - q * w.1);
            std::mem::swap(&mut pivot, &mut w);
        }
        a = gcd(a, w.0.unsigned_abs());
    }
    if pivot.1 < 0 {
        pivot = (-pivot.0, -pivot.1);
    }
    let a = a as i64;
    ((a, 0), (pivot.0.rem_euclid(a), pivot.1))
}

// ---------------------------------------------------------------------------------------
// Least squares and placement

/// Map position relative to the first point: `origin + c col + r row` for node (c, r).
#[derive(Clone, Copy, Debug, PartialEq)]
struct Affine {
    origin: (f64, f64),
    col: (f64, f64),
    row: (f64, f64),
}

impl Affine {
    fn at(&self, c: f64, r: f64) -> (f64, f64) {
        (
            self.origin.0 + c * self.col.0 + r * self.row.0,
            self.origin.1 + c * self.col.1 + r * self.row.1,
        )
    }

    /// Fractional (column, row) of map point (u, v); `None` when degenerate.
    fn index(&self, u: f64, v: f64) -> Option<(f64, f64)> {
        let det = self.col.0 * self.row.1 - self.row.0 * self.col.1;
        if !det.is_finite() || det == 0.0 {
            return None;
        }
        let (du, dv) = (u - self.origin.0, v - self.origin.1);
        Some((
            (self.row.1 * du - self.row.0 * dv) / det,
            (-self.col.1 * du + self.col.0 * dv) / det,
        ))
    }

    /// The smaller of the two bins (step lengths).
    fn min_bin(&self) -> f64 {
        let length2 = |a: (f64, f64)| a.0 * a.0 + a.1 * a.1;
        length2(self.col).min(length2(self.row)).sqrt()
    }
}

fn squared_distance(a: (f64, f64), b: (f64, f64)) -> f64 {
    (a.0 - b.0) * (a.0 - b.0) + (a.1 - b.1) * (a.1 - b.1)
}

/// Neumaier's compensated sum.
#[derive(Clone, Copy, Default)]
struct Sum {
    s: f64,
    c: f64,
}

impl Sum {
    fn add(&mut self, x: f64) {
        let t = self.s + x;
        if self.s.abs() >= x.abs() {
            self.c += (self.s - t) + x;
        } else {
            self.c += (x - t) + self.s;
        }
        self.s = t;
    }

    fn value(self) -> f64 {
        self.s + self.c
    }
}

/// Ordinary least-squares affine map from (c, r) to (u, v) over the points `sample` yields
/// (`None` skips a point), centred for accuracy; `None` when fewer than 3 points or all on one
/// line of the index plane.
fn fit_affine(n: usize, sample: impl Fn(usize) -> Option<(f64, f64, f64, f64)>) -> Option<Affine> {
    let mut s = [Sum::default(); 4];
    let mut m = 0usize;
    for k in 0..n {
        if let Some((c, r, u, v)) = sample(k) {
            for (acc, x) in s.iter_mut().zip([c, r, u, v]) {
                acc.add(x);
            }
            m += 1;
        }
    }
    if m < 3 {
        return None;
    }
    let mean = s.map(|a| a.value() / m as f64);
    let mut p = [Sum::default(); 7];
    for k in 0..n {
        if let Some((c, r, u, v)) = sample(k) {
            let (c, r, u, v) = (c - mean[0], r - mean[1], u - mean[2], v - mean[3]);
            for (acc, x) in p
                .iter_mut()
                .zip([c * c, c * r, r * r, c * u, r * u, c * v, r * v])
            {
                acc.add(x);
            }
        }
    }
    let [scc, scr, srr, scu, sru, scv, srv] = p.map(Sum::value);
    let det = scc * srr - scr * scr;
    if !det.is_finite() || det <= 1e-9 * scc * srr {
        return None;
    }
    let solve = |sc: f64, sr: f64| ((srr * sc - scr * sr) / det, (scc * sr - scr * sc) / det);
    let (uc, ur) = solve(scu, sru);
    let (vc, vr) = solve(scv, srv);
    Some(Affine {
        origin: (
            mean[2] - uc * mean[0] - ur * mean[1],
            mean[3] - vc * mean[0] - vr * mean[1],
        ),
        col: (uc, vc),
        row: (ur, vr),
    })
}

/// Names a node in messages (indices may lie outside the lattice).
fn node_name(numbering: &Option<Numbering>, c: i64, r: i64) -> String {
    match numbering {
        // In i128: numbers below 1e15 times indices below 1e15 stay far inside it.
        Some(n) => format!(
            "inline {}, crossline {}",
            n.inline_first as i128 + r as i128 * n.inline_step as i128,
            n.crossline_first as i128 + c as i128 * n.crossline_step as i128
        ),
        None => format!("column {c}, row {r}"),
    }
}

/// What a point list is read with besides its points and indices.
struct Reading {
    numbering: Option<Numbering>,
    value_columns: Vec<ValueColumn>,
    preamble: Option<(usize, usize)>,
    tolerance: f64,
}

/// Most values (nodes x bands) a point list is read onto: 250 million, 2 GB as doubles. Survey
/// grids exported as text stay far below; a lattice beyond it comes from a typo.
const MAX_VALUES: u128 = 250_000_000;
/// Most lattice nodes per point: on a lattice where fewer than 1 node in 16 holds a point the
/// points look scattered (a seed grid on every 4th inline and crossline fills 1 in 16).
const NODES_PER_POINT: u128 = 16;

/// Share of the smaller bin beyond which a point is set aside before the outlier fit: gross
/// errors only, so that coordinates rounded coarsely still get the plain least-squares fit.
const SCREEN_SHARE: f64 = 0.25;

/// The points (coordinates relative to the first point) and their lattice indices, for the
/// checks and fits.
struct Placed<'p> {
    p: &'p Points,
    index: Vec<(usize, usize)>,
    numbering: Option<Numbering>,
    naming: Naming,
}

impl Placed<'_> {
    fn len(&self) -> usize {
        self.index.len()
    }

    /// Point `k` as (column, row, u, v).
    fn at(&self, k: usize) -> (f64, f64, f64, f64) {
        let (c, r) = self.index[k];
        (
            c as f64,
            r as f64,
            self.p.x[k] - self.p.x[0],
            self.p.y[k] - self.p.y[0],
        )
    }

    /// Squared distance of point `k` from where `map` puts its node.
    fn miss2(&self, map: &Affine, k: usize) -> f64 {
        let (c, r, u, v) = self.at(k);
        squared_distance((u, v), map.at(c, r))
    }

    /// Points more than `limit` from where `map` puts their nodes, as (distance, point), worst
    /// first.
    fn off(&self, map: &Affine, limit: f64) -> Vec<(f64, usize)> {
        let mut off: Vec<(f64, usize)> = (0..self.len())
            .map(|k| (self.miss2(map, k), k))
            .filter(|&(d2, _)| d2 > limit * limit)
            .map(|(d2, k)| (d2.sqrt(), k))
            .collect();
        off.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
        off
    }

    fn node(&self, c: i64, r: i64) -> String {
        node_name(&self.numbering, c, r)
    }

    /// The refusal for the points `off` (distance, point; worst first) more than `tolerance`
    /// of the smaller bin off `map`.
    fn off_lattice(&self, map: &Affine, off: &[(f64, usize)], tolerance: f64) -> String {
        let (n, bin) = (self.len(), map.min_bin());
        let (worst, k) = off[0];
        let line = self.p.lines[k];
        let Naming {
            record,
            points,
            check,
            remedy,
            ..
        } = self.naming;
        if off.len() * 10 > n {
            return match &self.numbering {
                Some(_) => format!(
                    "the x, y coordinates do not follow the inline/crossline numbering on one regular lattice ({} of {n} {points} are more than {tolerance} of a bin off, worst {record} {line} by {worst:.3} CRS units); check {check}",
                    off.len()
                ),
                None => format!(
                    "the {points} lie on no regular lattice ({} of {n} are more than {tolerance} of a bin off the best one, worst {record} {line} by {worst:.3} CRS units); {remedy}",
                    off.len()
                ),
            };
        }
        let others = match off.len() {
            1 => String::new(),
            m => format!(
                " ({points} that far off: {m} of {n}, worst on {record}s {})",
                off.iter()
                    .take(3)
                    .map(|o| self.p.lines[o.1].to_string())
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        };
        let (c, r, u, v) = self.at(k);
        let (c, r) = (c as i64, r as i64);
        // The node the point's coordinates fall on, when they fall on one.
        let landing = map.index(u, v).and_then(|(fc, fr)| {
            let (pu, pv) = map.at(fc.round(), fr.round());
            ((u - pu).hypot(v - pv) <= tolerance * bin && fc.abs() < 1e15 && fr.abs() < 1e15)
                .then(|| (fc.round() as i64, fr.round() as i64))
        });
        match landing {
            Some(node) if self.numbering.is_some() && node != (c, r) => format!(
                "{record} {line}: {} is off the numbering/coordinates of the others: its x, y are those of {}, {worst:.3} CRS units from where the others put it; check it{others}",
                self.node(c, r),
                self.node(node.0, node.1)
            ),
            _ => {
                let share = worst / bin;
                let raise = if share < 0.5 {
                    format!(
                        ", or raise {} (to {:.2}) if the file rounds coordinates coarsely",
                        self.naming.tolerance_option,
                        (share * 100.0).ceil() / 100.0
                    )
                } else {
                    String::new()
                };
                format!(
                    "{record} {line} lies {worst:.3} CRS units ({share:.3} of the {bin:.3} bin) off its lattice node ({}), more than the lattice tolerance {tolerance}{others}; fix those {record}s{raise}",
                    self.node(c, r),
                )
            }
        }
    }

    /// Refuses points off the lattice before anything lattice-sized is made: the points more
    /// than [`SCREEN_SHARE`] of a bin (or `tolerance`, if larger) off a map that a few wrong
    /// points cannot pull ([`robust_affine`]) are set aside, the others fitted by least
    /// squares (as precise as the final fit, unpulled), and every point checked against that
    /// fit. A typo in a line
    /// number or a coordinate is so named by its line instead of stretching or tilting the
    /// lattice.
    fn check_outliers(&self, tolerance: f64) -> std::result::Result<(), String> {
        let Some(map) = robust_affine(self) else {
            return Ok(()); // no row or column with two points: the least-squares fit decides
        };
        let mut suspect = vec![false; self.len()];
        for (_, k) in self.off(&map, tolerance.max(SCREEN_SHARE) * map.min_bin()) {
            suspect[k] = true;
        }
        let map = fit_affine(self.len(), |k| (!suspect[k]).then(|| self.at(k))).unwrap_or(map);
        let off = self.off(&map, tolerance * map.min_bin());
        match off.is_empty() {
            true => Ok(()),
            false => Err(self.off_lattice(&map, &off, tolerance)),
        }
    }

    /// The point farthest (in nodes) from the median column and row of all points, for
    /// messages about lattices stretched by a typo.
    fn farthest(&self) -> String {
        let middle = |f: fn(&(usize, usize)) -> usize| {
            median(&mut self.index.iter().map(|i| f(i) as f64).collect::<Vec<_>>()).unwrap_or(0.0)
        };
        let (mc, mr) = (middle(|i| i.0), middle(|i| i.1));
        let reach = |k: usize| {
            let (c, r, _, _) = self.at(k);
            (c - mc).abs() + (r - mr).abs()
        };
        let k = (0..self.len())
            .max_by(|&a, &b| reach(a).total_cmp(&reach(b)).then(b.cmp(&a)))
            .unwrap_or(0);
        let (c, r) = self.index[k];
        format!(
            "the {} farthest from the others is on {} {} ({})",
            self.naming.point(),
            self.naming.record,
            self.p.lines[k],
            self.node(c as i64, r as i64)
        )
    }

    /// Refuses a lattice of `cols` x `rows` nodes too large for memory ([`MAX_VALUES`]) or too
    /// sparse for its points ([`NODES_PER_POINT`]).
    fn check_extent(&self, cols: u64, rows: u64) -> std::result::Result<(), String> {
        let (n, bands) = (self.len(), self.p.bands);
        let Naming { points, remedy, .. } = self.naming;
        let nodes = cols as u128 * rows as u128;
        let values = nodes * bands as u128;
        if values > MAX_VALUES {
            return Err(format!(
                "the lattice would be {cols} x {rows} nodes x {bands} band(s) ({:.0} million values, {:.1} GB), more than flexure reads from a point list ({} million): from {n} {points} that more likely comes from a typo in a line number or coordinate than from the survey; {}: check it, or give a raster",
                values as f64 / 1e6,
                values as f64 * 8.0 / 1e9,
                MAX_VALUES / 1_000_000,
                self.farthest()
            ));
        }
        if nodes > NODES_PER_POINT * n as u128 {
            let what = match &self.numbering {
                Some(_) => "their inline/crossline numbers span",
                None => "the lattice they seem to lie on spans",
            };
            return Err(format!(
                "{what} {cols} x {rows} nodes but only {n} {points}: fewer than 1 node in {NODES_PER_POINT} holds a {}, so they look scattered ({}: check it if a typo stretches the lattice); else {remedy}",
                self.naming.point(),
                self.farthest()
            ));
        }
        Ok(())
    }
}

/// A map from lattice indices to coordinates that a few wrong points cannot pull: the column
/// step is the median, component by component, of the steps between the first and last point
/// of every row, the row step likewise over columns, and the origin the median of the origins
/// the points imply. `None` when no row or no column holds points at two indices.
fn robust_affine(placed: &Placed) -> Option<Affine> {
    let col = median_step(placed, |(c, r)| (r, c))?;
    let row = median_step(placed, |(c, r)| (c, r))?;
    let (mut ou, mut ov): (Vec<f64>, Vec<f64>) = (0..placed.len())
        .map(|k| {
            let (c, r, u, v) = placed.at(k);
            (u - c * col.0 - r * row.0, v - c * col.1 - r * row.1)
        })
        .unzip();
    Some(Affine {
        origin: (median(&mut ou)?, median(&mut ov)?),
        col,
        row,
    })
}

/// The median step per index along the second of `key`'s pair, between the first and last
/// point of each group of points that share the first.
fn median_step(
    placed: &Placed,
    key: impl Fn((usize, usize)) -> (usize, usize),
) -> Option<(f64, f64)> {
    let key = |k: usize| key(placed.index[k]);
    let mut order: Vec<usize> = (0..placed.len()).collect();
    order.sort_unstable_by_key(|&k| key(k));
    let (mut su, mut sv) = (Vec::new(), Vec::new());
    for group in order.chunk_by(|&a, &b| key(a).0 == key(b).0) {
        let (a, b) = (group[0], group[group.len() - 1]);
        let steps = (key(b).1 - key(a).1) as f64;
        if steps > 0.0 {
            let ((_, _, ua, va), (_, _, ub, vb)) = (placed.at(a), placed.at(b));
            su.push((ub - ua) / steps);
            sv.push((vb - va) / steps);
        }
    }
    Some((median(&mut su)?, median(&mut sv)?))
}

/// The lattice of a set of points after the checks: its size, the points' nodes and the
/// least-squares map from nodes to coordinates.
struct Fitted {
    cols: usize,
    rows: usize,
    /// (column, row) of each point.
    index: Vec<(usize, usize)>,
    /// Node (c, r) lies at `fit.at(c, r)` relative to the first point.
    fit: Affine,
    column_bin: f64,
    row_bin: f64,
    worst_misfit: f64,
    /// The point farthest from its node.
    worst: usize,
}

/// Fits the lattice of points `p` at lattice indices (`cols_in`, `rows_in`): at least 3 x 3
/// nodes spanned, no point off the lattice ([`Placed::check_outliers`]), a lattice neither too
/// large nor too sparse, the least-squares fit within the tolerance and of non-zero bin area.
fn fit_lattice(
    p: &Points,
    (cols_in, rows_in): Indices,
    numbering: Option<Numbering>,
    tolerance: f64,
    naming: Naming,
) -> std::result::Result<Fitted, String> {
    let n = p.len();
    let span = |a: &[i64]| {
        let lo = a.iter().copied().min().unwrap_or(0);
        let hi = a.iter().copied().max().unwrap_or(0);
        (lo, hi.abs_diff(lo) + 1)
    };
    let ((c0, cols), (r0, rows)) = (span(&cols_in), span(&rows_in));
    if cols < 3 || rows < 3 {
        return Err(format!(
            "the {} span {cols} x {rows} nodes (columns x rows) of their lattice; {} needs at least 3 x 3",
            naming.points, naming.makes
        ));
    }
    let placed = Placed {
        p,
        index: cols_in
            .iter()
            .zip(&rows_in)
            .map(|(&c, &r)| (c.abs_diff(c0) as usize, r.abs_diff(r0) as usize))
            .collect(),
        numbering,
        naming,
    };
    drop((cols_in, rows_in));
    placed.check_outliers(tolerance)?;
    placed.check_extent(cols, rows)?;
    let fit = fit_affine(n, |k| Some(placed.at(k))).ok_or_else(|| {
        format!(
            "the {} lie along one line of their lattice; a horizon needs a two-dimensional grid",
            naming.points
        )
    })?;
    let (column_bin, row_bin) = (fit.col.0.hypot(fit.col.1), fit.row.0.hypot(fit.row.1));
    let cross = fit.col.0 * fit.row.1 - fit.col.1 * fit.row.0;
    if !cross.is_finite() || cross.abs() <= 1e-6 * column_bin * row_bin {
        return Err(format!(
            "the coordinates do not change across the lattice (bins of no area); check that the x and y {} hold map coordinates",
            naming.coordinates
        ));
    }
    let off = placed.off(&fit, tolerance * fit.min_bin());
    if !off.is_empty() {
        return Err(placed.off_lattice(&fit, &off, tolerance));
    }
    let (worst2, worst) = (0..n)
        .map(|k| (placed.miss2(&fit, k), k))
        .fold((0.0, 0), |a, b| if b.0 > a.0 { b } else { a });
    Ok(Fitted {
        cols: cols as usize,
        rows: rows as usize,
        index: placed.index,
        fit,
        column_bin,
        row_bin,
        worst_misfit: worst2.sqrt(),
        worst,
    })
}

impl Fitted {
    /// The GDAL geotransform of the lattice of points `p`: node (0, 0) is the centre of cell
    /// (0, 0); rotation terms below 1e-12 of their bin are snapped to zero.
    fn geo_transform(&self, p: &Points) -> [f64; 6] {
        let (fit, x0, y0) = (&self.fit, p.x[0], p.y[0]);
        let snap = |a: f64, len: f64| if a.abs() <= 1e-12 * len { 0.0 } else { a };
        let (g1, g4) = (
            snap(fit.col.0, self.column_bin),
            snap(fit.col.1, self.column_bin),
        );
        let (g2, g5) = (snap(fit.row.0, self.row_bin), snap(fit.row.1, self.row_bin));
        [
            x0 + fit.origin.0 - 0.5 * g1 - 0.5 * g2,
            g1,
            g2,
            y0 + fit.origin.1 - 0.5 * g4 - 0.5 * g5,
            g4,
            g5,
        ]
    }

    /// The report on the lattice of points `p` with geotransform `gt`, filled as `nodes` say.
    fn report(
        &self,
        p: &Points,
        gt: &[f64; 6],
        numbering: Option<Numbering>,
        nodes: &Nodes,
        preamble: Option<(usize, usize)>,
    ) -> LatticeReport {
        LatticeReport {
            points: p.len(),
            numbering,
            column_azimuth: azimuth((gt[1], gt[4])),
            row_azimuth: azimuth((gt[2], gt[5])),
            column_bin: self.column_bin,
            row_bin: self.row_bin,
            worst_misfit: self.worst_misfit,
            worst_misfit_share: self.worst_misfit / self.fit.min_bin(),
            worst_misfit_line: p.lines[self.worst],
            empty_nodes: nodes.empty,
            null_nodes: nodes.null,
            repeated: nodes.repeated,
            preamble,
        }
    }
}

/// Places the points on their lattice ([`fit_lattice`]) and fills it: no node given twice
/// with different values, at least 3 x 3 distinct nodes.
fn place(p: Points, indices: Indices, reading: Reading) -> std::result::Result<PointGrid, String> {
    let n = p.len();
    let numbering = reading.numbering;
    let fitted = fit_lattice(&p, indices, numbering, reading.tolerance, POINT_LIST)?;
    let (cols, rows) = (fitted.cols, fitted.rows);
    let nodes = fill(&p, &fitted.index, (cols, rows), &numbering, POINT_LIST)?;
    let occupied = cols * rows - nodes.empty;
    if occupied < n {
        enough(
            occupied,
            &format!("distinct nodes ({n} points, repeats read once)"),
        )?;
    }
    let geo_transform = fitted.geo_transform(&p);
    let lattice = fitted.report(&p, &geo_transform, numbering, &nodes, reading.preamble);
    Ok(PointGrid {
        cols,
        rows,
        geo_transform,
        bands: nodes.bands,
        value_columns: reading.value_columns,
        lattice,
    })
}

/// Nodes numbered by inline and crossline with their map coordinates (CRS units), one entry
/// per node in the caller's order (e.g. the traces of a SEG-Y file): the input of
/// [`place_numbered`].
#[derive(Clone, Debug, Default, PartialEq)]
pub struct NumberedNodes {
    /// Inline number of each node.
    pub inline: Vec<i64>,
    /// Crossline number of each node.
    pub crossline: Vec<i64>,
    /// Map x (grid east) of each node, CRS units.
    pub x: Vec<f64>,
    /// Map y (grid north) of each node, CRS units.
    pub y: Vec<f64>,
}

/// How messages about placed points name them and what they tell the user to check.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Naming {
    /// What a point's 1-based number counts, as in "trace 17" or "line 17".
    pub record: &'static str,
    /// The points, plural: "points", "traces".
    pub points: &'static str,
    /// Where x and y come from, as in "check that the x and y {coordinates} hold map
    /// coordinates": "columns (--columns)", "trace header fields".
    pub coordinates: &'static str,
    /// What to check when the numbering and the coordinates disagree.
    pub check: &'static str,
    /// What to do when the points lie on no lattice or look scattered.
    pub remedy: &'static str,
    /// The option setting the lattice tolerance, as in "raise --lattice-tolerance".
    pub tolerance_option: &'static str,
    /// What the points make, as in "a horizon needs at least 3 x 3".
    pub makes: &'static str,
}

impl Naming {
    /// One point, singular: the plural without its final `s`.
    fn point(&self) -> &'static str {
        self.points.strip_suffix('s').unwrap_or(self.points)
    }
}

/// The naming of point-list messages (a point is a file line).
const POINT_LIST: Naming = Naming {
    record: "line",
    points: "points",
    coordinates: "columns (--columns)",
    check: "the columns (--columns) and the export",
    remedy: GRID_FIRST,
    tolerance_option: "--lattice-tolerance",
    makes: "a horizon",
};

/// Numbered nodes on their lattice ([`place_numbered`]).
#[derive(Clone, Debug)]
pub struct NodePlacement {
    /// Number of columns (crosslines, increasing).
    pub cols: usize,
    /// Number of rows (inlines, increasing).
    pub rows: usize,
    /// GDAL geotransform `[x0, dx/dcol, dx/drow, y0, dy/dcol, dy/drow]`, CRS units, as in
    /// [`PointGrid::geo_transform`].
    pub geo_transform: [f64; 6],
    /// (column, row) of each node, in the order given.
    pub index: Vec<(usize, usize)>,
    /// How the lattice was found and how well the nodes fit it; `worst_misfit_line` is the
    /// 1-based number of the worst node in the order given, `null_nodes` equals
    /// `empty_nodes` (lattice nodes without a given node), `repeated` and `preamble` are
    /// unused (0, `None`).
    pub lattice: LatticeReport,
}

impl NodePlacement {
    /// The placement with the CRS the caller attaches, as [`PointGrid::geometry`].
    pub fn geometry(&self, crs_wkt: String, metres_per_unit: f64) -> GridGeometry {
        GridGeometry {
            cols: self.cols,
            rows: self.rows,
            geo_transform: self.geo_transform,
            crs_wkt,
            metres_per_unit,
        }
    }
}

/// Places nodes numbered by inline and crossline onto their exact bin lattice, as the point
/// reader places an inline/crossline export (see the module documentation: steps from the
/// greatest common divisor of the numbers, columns follow crosslines and rows inlines, an
/// outlier check that a few wrong nodes cannot pull, then the least-squares affine map and
/// its geotransform), without values. `tolerance` is the largest distance of a node from its
/// lattice position as a share of the smaller bin (0 < t < 0.5, as `--lattice-tolerance`).
/// Errors (one line, naming nodes by `naming.record` and their 1-based number): fewer than
/// 3 x 3 nodes, nodes off the lattice, a lattice too large or too sparse for its nodes, two
/// nodes with the same numbers, coordinates that do not span an area.
pub fn place_numbered(
    nodes: NumberedNodes,
    tolerance: f64,
    naming: Naming,
) -> std::result::Result<NodePlacement, String> {
    let n = nodes.inline.len();
    if [nodes.crossline.len(), nodes.x.len(), nodes.y.len()] != [n; 3] {
        return Err(format!(
            "inline, crossline, x and y lists differ in length ({n}, {}, {}, {})",
            nodes.crossline.len(),
            nodes.x.len(),
            nodes.y.len()
        ));
    }
    if !(tolerance > 0.0 && tolerance < 0.5) {
        return Err(format!(
            "{} {tolerance} is outside 0..0.5: give the largest allowed distance from a lattice node as a share of the smaller bin",
            naming.tolerance_option
        ));
    }
    enough(n, naming.points)?;
    if n >= u32::MAX as usize {
        return Err(format!(
            "{n} {} are more than flexure places at once",
            naming.points
        ));
    }
    let p = Points {
        lines: (1..=n).collect(),
        x: nodes.x,
        y: nodes.y,
        inline: nodes.inline,
        crossline: nodes.crossline,
        has_numbering: true,
        values: Vec::new(),
        bands: 0,
    };
    let (cols_in, rows_in, numbering) = lattice_from_numbering(&p);
    let numbering = Some(numbering);
    let fitted = fit_lattice(&p, (cols_in, rows_in), numbering, tolerance, naming)?;
    let filled = fill(
        &p,
        &fitted.index,
        (fitted.cols, fitted.rows),
        &numbering,
        naming,
    )?;
    let geo_transform = fitted.geo_transform(&p);
    let lattice = fitted.report(&p, &geo_transform, numbering, &filled, None);
    Ok(NodePlacement {
        cols: fitted.cols,
        rows: fitted.rows,
        geo_transform,
        index: fitted.index,
        lattice,
    })
}

/// The bands of a lattice and what filling it found.
struct Nodes {
    /// One array per band, `[row, col]`, NaN where null.
    bands: Vec<Array2<f64>>,
    /// Nodes without a point.
    empty: usize,
    /// Nodes null in every band.
    null: usize,
    /// Points that repeated a node with the same values.
    repeated: usize,
}

/// Fills a `cols` x `rows` lattice with the points at `index`: the first point of a node
/// gives its values; a repeat must carry the same values (refused naming both records), and
/// points without values (no bands) may not repeat a node at all.
fn fill(
    p: &Points,
    index: &[(usize, usize)],
    (cols, rows): (usize, usize),
    numbering: &Option<Numbering>,
    naming: Naming,
) -> std::result::Result<Nodes, String> {
    let bands = p.bands;
    let same = |a: usize, b: usize| {
        bands > 0
            && (0..bands).all(|j| {
                let (x, y) = (p.value(a, j), p.value(b, j));
                x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan())
            })
    };
    let mut owner = vec![u32::MAX; cols * rows];
    let mut repeated = 0;
    for (k, &(c, r)) in index.iter().enumerate() {
        let slot = &mut owner[r * cols + c];
        if *slot == u32::MAX {
            *slot = k as u32;
        } else if same(*slot as usize, k) {
            repeated += 1;
        } else {
            let first = *slot as usize;
            let show = |k: usize| {
                (0..bands)
                    .map(|j| p.value(k, j).to_string())
                    .collect::<Vec<_>>()
                    .join(" ")
            };
            let values = match bands {
                0 => String::new(),
                _ => format!(
                    " but with different values ({} vs {})",
                    show(first),
                    show(k)
                ),
            };
            return Err(format!(
                "{}s {} and {} both give node ({}){values}; remove one of them",
                naming.record,
                p.lines[first],
                p.lines[k],
                node_name(numbering, c as i64, r as i64),
            ));
        }
    }
    let mut arrays = vec![Array2::from_elem((rows, cols), f64::NAN); bands];
    let (mut empty, mut null) = (0, 0);
    for (node, &k) in owner.iter().enumerate() {
        let (r, c) = (node / cols, node % cols);
        if k == u32::MAX {
            empty += 1;
            null += 1;
            continue;
        }
        let mut all_null = true;
        for (j, band) in arrays.iter_mut().enumerate() {
            let value = p.value(k as usize, j);
            all_null &= value.is_nan();
            band[[r, c]] = value;
        }
        null += (bands > 0 && all_null) as usize;
    }
    Ok(Nodes {
        bands: arrays,
        empty,
        null,
        repeated,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Deterministic pseudo-random numbers in [0, 1) (SplitMix64, common practice).
    fn unit(seed: u64) -> f64 {
        let mut z = seed.wrapping_add(0x9e37_79b9_7f4a_7c15);
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Centre of node (c, r) of `gt` (GDAL data model: cell centre at i + 0.5, j + 0.5).
    fn centre(gt: &[f64; 6], c: usize, r: usize) -> (f64, f64) {
        let (i, j) = (c as f64 + 0.5, r as f64 + 0.5);
        (gt[0] + i * gt[1] + j * gt[2], gt[3] + i * gt[4] + j * gt[5])
    }

    /// A value with many significant digits, printed with Rust's shortest round-trip format.
    fn value(c: usize, r: usize, band: usize) -> f64 {
        1000.0 + 0.731 * c as f64 + (r as f64 + 1.0).sqrt() * 3.3 + band as f64 * 0.0123
    }

    /// One generated export: the nodes of a `cols` x `rows` grid on `gt`, one line each, in a
    /// scrambled order (node k * 7919 mod n), fields joined by `sep`.
    struct Export {
        gt: [f64; 6],
        cols: usize,
        rows: usize,
        /// (first inline, inline step, first crossline, crossline step); rows follow inline.
        numbering: Option<(i64, i64, i64, i64)>,
        bands: usize,
        /// Decimals of the coordinates as written (`None`: shortest round-trip text).
        decimals: Option<usize>,
    }

    impl Export {
        fn new(gt: [f64; 6], cols: usize, rows: usize) -> Self {
            Self {
                gt,
                cols,
                rows,
                numbering: None,
                bands: 1,
                decimals: None,
            }
        }

        /// Lines for every node that `field` gives values for (`None` leaves the node out).
        fn text(
            &self,
            sep: &str,
            header: Option<&str>,
            field: impl Fn(usize, usize, usize) -> Option<String>,
        ) -> String {
            let n = self.cols * self.rows;
            assert_ne!(n % 7919, 0);
            let mut out = String::new();
            if let Some(h) = header {
                out.push_str("# exported for a test\n");
                out.push_str(h);
                out.push('\n');
            }
            for k in 0..n {
                let node = (k * 7919) % n;
                let (c, r) = (node % self.cols, node / self.cols);
                let values: Option<Vec<String>> = (0..self.bands).map(|b| field(c, r, b)).collect();
                let Some(values) = values else { continue };
                let (x, y) = centre(&self.gt, c, r);
                let mut fields = Vec::new();
                if let Some((il0, ils, xl0, xls)) = self.numbering {
                    fields.push((il0 + r as i64 * ils).to_string());
                    fields.push((xl0 + c as i64 * xls).to_string());
                }
                for coordinate in [x, y] {
                    fields.push(match self.decimals {
                        Some(d) => format!("{coordinate:.d$}"),
                        None => coordinate.to_string(),
                    });
                }
                fields.extend(values);
                out.push_str(&fields.join(sep));
                out.push('\n');
            }
            out
        }

        /// Every node, values from [`value`].
        fn full(&self, sep: &str, header: Option<&str>) -> String {
            self.text(sep, header, |c, r, b| Some(value(c, r, b).to_string()))
        }
    }

    fn parse(text: &str, options: &PointOptions) -> Result<PointGrid> {
        parse_points(text, Path::new("horizon.txt"), options)
    }

    fn assert_gt(got: &[f64; 6], want: &[f64; 6]) {
        for (g, w) in got.iter().zip(want) {
            assert!(
                (g - w).abs() <= 1e-6,
                "geotransform {got:?}, expected {want:?}"
            );
        }
    }

    /// Every cell of `grid` is a node of the generating grid `gt` (its centre within 1e-6 of a
    /// cell of `gt`, GDAL data model), the grids have the same size, and every value equals
    /// `expected` bit for bit (NaN where `expected` is `None`).
    fn assert_picture(
        grid: &PointGrid,
        gt: &[f64; 6],
        size: (usize, usize),
        expected: impl Fn(usize, usize, usize) -> Option<f64>,
    ) {
        assert_picture_within(grid, gt, size, expected, 1e-6);
    }

    /// [`assert_picture`] with cell centres within `cells` of a generating cell centre;
    /// returns the largest offset found, as a share of a bin along either axis.
    fn assert_picture_within(
        grid: &PointGrid,
        gt: &[f64; 6],
        (cols, rows): (usize, usize),
        expected: impl Fn(usize, usize, usize) -> Option<f64>,
        cells: f64,
    ) -> f64 {
        let mut worst = 0.0f64;
        assert_eq!(grid.cols * grid.rows, cols * rows, "grid size");
        let generating = GridGeometry {
            cols,
            rows,
            geo_transform: *gt,
            crs_wkt: String::new(),
            metres_per_unit: 1.0,
        };
        for r in 0..grid.rows {
            for c in 0..grid.cols {
                let (x, y) = centre(&grid.geo_transform, c, r);
                let (fc, fr) = generating.map_to_grid(x, y);
                let (gc, gr) = ((fc - 0.5).round(), (fr - 0.5).round());
                worst = worst.max((fc - 0.5 - gc).abs()).max((fr - 0.5 - gr).abs());
                assert!(
                    (fc - 0.5 - gc).abs() < cells && (fr - 0.5 - gr).abs() < cells,
                    "cell ({c}, {r}) is at ({fc}, {fr}) of the generating grid"
                );
                assert!(gc >= 0.0 && gr >= 0.0 && gc < cols as f64 && gr < rows as f64);
                for (b, band) in grid.bands.iter().enumerate() {
                    let got = band[[r, c]];
                    match expected(gc as usize, gr as usize, b) {
                        Some(want) => assert_eq!(
                            got.to_bits(),
                            want.to_bits(),
                            "band {b} cell ({c}, {r}): {got} vs {want}"
                        ),
                        None => assert!(got.is_nan(), "band {b} cell ({c}, {r}) should be null"),
                    }
                }
            }
        }
        worst
    }

    /// Largest distance between where two geotransforms put the centres of the corner cells of
    /// a `cols` x `rows` grid, as a share of the smaller bin of `b` (GDAL data model; the
    /// difference of two affine maps is affine, so over the grid it is largest at a corner:
    /// elementary geometry).
    fn gt_distance(a: &[f64; 6], b: &[f64; 6], (cols, rows): (usize, usize)) -> f64 {
        let bin = b[1].hypot(b[4]).min(b[2].hypot(b[5]));
        [(0, 0), (cols - 1, 0), (0, rows - 1), (cols - 1, rows - 1)]
            .into_iter()
            .map(|(c, r)| {
                let ((xa, ya), (xb, yb)) = (centre(a, c, r), centre(b, c, r));
                (xa - xb).hypot(ya - yb) / bin
            })
            .fold(0.0, f64::max)
    }

    #[test]
    fn numbered_nodes_are_placed_as_the_point_reader_places_them() {
        // Reference: the point reader's own placement of the same export (place_numbered
        // reuses it without values): same lattice bit for bit, each node at the cell holding
        // its line's value; a rotated survey with inline steps of 2, coordinates to 0.01 m.
        let g = GridGeometry::survey(
            (402_500.0, 6_450_000.0),
            104.0,
            (12.5, 25.0),
            (9, 7),
            String::new(),
        );
        let mut e = Export::new(g.geo_transform, 9, 7);
        e.numbering = Some((501, 2, 1001, 1));
        e.decimals = Some(2);
        let text = e.full(" ", None);
        let grid = parse(&text, &PointOptions::default()).unwrap();
        let mut nodes = NumberedNodes::default();
        let mut values = Vec::new();
        for line in text.lines() {
            let f: Vec<f64> = line.split(' ').map(|v| v.parse().unwrap()).collect();
            nodes.inline.push(f[0] as i64);
            nodes.crossline.push(f[1] as i64);
            nodes.x.push(f[2]);
            nodes.y.push(f[3]);
            values.push(f[4]);
        }
        let placed = place_numbered(nodes.clone(), 0.05, POINT_LIST).unwrap();
        assert_eq!((placed.cols, placed.rows), (grid.cols, grid.rows));
        assert_eq!(placed.geo_transform, grid.geo_transform);
        assert_eq!(placed.lattice.numbering, grid.lattice.numbering);
        for (&(c, r), v) in placed.index.iter().zip(&values) {
            assert_eq!(grid.bands[0][[r, c]], *v);
        }
        assert_eq!(placed.lattice.empty_nodes, 0);
        // A node given twice is refused (no values to tell the two apart).
        nodes.inline.push(nodes.inline[3]);
        nodes.crossline.push(nodes.crossline[3]);
        nodes.x.push(nodes.x[3]);
        nodes.y.push(nodes.y[3]);
        let err = place_numbered(nodes, 0.05, POINT_LIST).unwrap_err();
        assert!(err.contains("lines 4 and 64 both give node"), "{err}");
    }

    #[test]
    fn exports_rounded_to_centimetres_read_back_to_their_lattice() {
        // Common practice: interpretation packages write coordinates to 0.01 m. Rotated
        // lattices with unequal bins, read from x, y alone and from the numbering, come back
        // on their generating lattice: every cell centre within 2e-5 of a bin of its node
        // (measured: under 1e-5; the least-squares fit over all nodes averages the rounding,
        // elementary statistics), every value bit for bit.
        let cases = [
            (63.0, (25.0, 12.5), (60, 45)),
            (117.5, (12.5, 30.0), (41, 70)),
            (91.0, (20.0, 20.0), (35, 35)),
        ];
        for (azimuth, bins, (cols, rows)) in cases {
            let g = GridGeometry::survey(
                (483_117.0, 6_702_345.0),
                azimuth,
                bins,
                (cols, rows),
                String::new(),
            );
            let mut e = Export::new(g.geo_transform, cols, rows);
            e.decimals = Some(2);
            for numbering in [None, Some((1200, 1, 3000, 2))] {
                e.numbering = numbering;
                let grid = parse(&e.full(" ", None), &PointOptions::default()).unwrap();
                let all = |c, r, b| Some(value(c, r, b));
                let worst = assert_picture_within(&grid, &g.geo_transform, (cols, rows), all, 2e-5);
                assert!(worst < 2e-5, "{azimuth}: {worst}");
                assert!(grid.lattice.worst_misfit < 0.0075, "{:?}", grid.lattice);
            }
        }
    }

    #[test]
    fn decimated_interpretations_read_onto_the_finest_lattice() {
        // Brief (the lattice from "two shortest independent steps"): a survey interpreted on
        // every 2nd inline over most of its area and on every inline in two patches, read
        // from x, y alone, comes back on the full survey lattice with nulls between the
        // interpreted lines (elementary geometry); likewise every 3rd crossline with a patch,
        // and a checkerboard with a full patch. Coordinates rounded to 0.01 m; node centres
        // within 1e-4 of a bin (measured: 2e-5, 8e-6 and 8e-5; the checkerboard's rounding
        // errors are correlated, and with 0.001 m they fall to 6e-7).
        let g = GridGeometry::survey(
            (512_000.0, 7_010_000.0),
            63.0,
            (25.0, 12.5),
            (48, 37),
            String::new(),
        );
        type Keep = fn(usize, usize) -> bool;
        let patterns: [(&str, Keep); 3] = [
            ("every 2nd row", |c, r| {
                r % 2 == 0 || (c < 6 && r < 10) || (c > 30 && r > 20)
            }),
            ("every 3rd column", |c, r| c % 3 == 0 || (r > 25 && c > 20)),
            ("checkerboard", |c, r| {
                (c + r) % 2 == 0 || (c > 10 && c < 20 && r > 5 && r < 15)
            }),
        ];
        let mut e = Export::new(g.geo_transform, 48, 37);
        e.decimals = Some(2);
        for (what, keep) in patterns {
            let text = e.text(" ", Some("x y z"), |c, r, b| {
                keep(c, r).then(|| value(c, r, b).to_string())
            });
            let grid = parse(&text, &PointOptions::default())
                .unwrap_or_else(|err| panic!("{what}: {err}"));
            let worst = assert_picture_within(
                &grid,
                &g.geo_transform,
                (48, 37),
                |c, r, b| keep(c, r).then(|| value(c, r, b)),
                1e-4,
            );
            assert!(worst < 1e-4, "{what}: {worst}");
            let kept = (0..48 * 37).filter(|k| keep(k % 48, k / 48)).count();
            assert_eq!(grid.lattice.empty_nodes, 48 * 37 - kept, "{what}");
        }

        // Three lone lines half a row off are errors, not a finer lattice: refused by line.
        let shifted = [(7, 4), (30, 16), (12, 30)];
        let (hx, hy) = (0.5 * g.geo_transform[2], 0.5 * g.geo_transform[5]);
        let mut text = String::from("x y z\n");
        for r in 0..37 {
            for c in 0..48 {
                let (x, y) = centre(&g.geo_transform, c, r);
                let (x, y) = match shifted.contains(&(c, r)) {
                    true => (x + hx, y + hy),
                    false => (x, y),
                };
                text.push_str(&format!("{x:.2} {y:.2} {}\n", value(c, r, 0)));
            }
        }
        let line = |(c, r): (usize, usize)| (2 + r * 48 + c).to_string();
        refused(
            &text,
            &PointOptions::default(),
            &[
                "off its lattice node",
                "points that far off: 3 of 1776",
                &line(shifted[0]),
                &line(shifted[1]),
                &line(shifted[2]),
            ],
        );
    }

    #[test]
    fn two_exports_of_one_survey_with_different_gaps_agree() {
        // Common practice: one package leaves a fault gap out, another writes it as -999.25.
        // Both exports of one survey (coordinates to 0.01 m) read to the same lattice, node
        // centres within 1e-5 of a bin of each other (measured: under 2e-6), and to the same
        // values bit for bit; from x, y alone and from the numbering.
        let g = GridGeometry::survey(
            (402_500.0, 6_450_000.0),
            104.0,
            (12.5, 25.0),
            (70, 52),
            String::new(),
        );
        let fault = |c: usize, r: usize| {
            (c as f64 - 0.6 * r as f64 - 20.0).abs() < 1.5 && (6..45).contains(&r)
        };
        let mut e = Export::new(g.geo_transform, 70, 52);
        e.decimals = Some(2);
        let sentinel = PointOptions {
            nodata: vec![-999.25],
            ..PointOptions::default()
        };
        for numbering in [None, Some((501, 1, 1001, 1))] {
            e.numbering = numbering;
            let omitted = e.text(",", None, |c, r, b| {
                (!fault(c, r)).then(|| value(c, r, b).to_string())
            });
            let written = e.text(",", None, |c, r, b| {
                Some(match fault(c, r) {
                    true => "-999.25".to_string(),
                    false => value(c, r, b).to_string(),
                })
            });
            let a = parse(&omitted, &PointOptions::default()).unwrap();
            let b = parse(&written, &sentinel).unwrap();
            assert_eq!((a.cols, a.rows), (b.cols, b.rows));
            let d = gt_distance(&a.geo_transform, &b.geo_transform, (a.cols, a.rows));
            assert!(d < 1e-5, "{numbering:?}: {d}");
            for (x, y) in a.bands[0].iter().zip(b.bands[0].iter()) {
                assert!(x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan()));
            }
            assert_eq!(a.lattice.null_nodes, b.lattice.null_nodes);
            assert!(a.lattice.empty_nodes > 0 && b.lattice.empty_nodes == 0);
        }
    }

    #[test]
    fn typos_in_line_numbers_and_coordinates_are_named_by_line() {
        // Hand-checkable: a regular export in which one line is mistyped. The typo is named by
        // its line, with the node its coordinates belong to, however far it is (1012 -> 9012
        // or 1112); it neither stretches the lattice nor tilts its fit.
        let g = GridGeometry::survey(
            (480_000.0, 3_900_000.0),
            30.0,
            (25.0, 12.5),
            (40, 30),
            String::new(),
        );
        let mut e = Export::new(g.geo_transform, 40, 30);
        e.numbering = Some((1000, 1, 2000, 2));
        e.decimals = Some(2);
        let text = e.full(" ", Some("Inline Xline X Y Z"));
        let line = text
            .lines()
            .position(|l| l.starts_with("1012 2036 "))
            .unwrap()
            + 1;
        let d = PointOptions::default();
        for typo in ["9012", "1112", "1013"] {
            let bad = text.replacen("\n1012 2036 ", &format!("\n{typo} 2036 "), 1);
            refused(
                &bad,
                &d,
                &[
                    &format!("line {line}: inline {typo}, crossline 2036 is off the numbering/coordinates of the others"),
                    "its x, y are those of inline 1012, crossline 2036",
                    "check it",
                ],
            );
        }
        // A crossline typo on another line as well: both named, the worst first.
        let other = text
            .lines()
            .position(|l| l.starts_with("1020 2050 "))
            .unwrap()
            + 1;
        let two = text.replacen("\n1012 2036 ", "\n9012 2036 ", 1).replacen(
            "\n1020 2050 ",
            "\n1020 2052 ",
            1,
        );
        refused(
            &two,
            &d,
            &[
                &format!("line {line}: inline 9012"),
                &format!("points that far off: 2 of 1200, worst on lines {line}, {other}"),
            ],
        );
        // From x, y alone, a mistyped coordinate (3 m off) is named by its line.
        e.numbering = None;
        let xyz = e.full(" ", None);
        let first: Vec<&str> = xyz.lines().nth(400).unwrap().split(' ').collect();
        let x: f64 = first[0].parse().unwrap();
        let typo = xyz.replacen(first[0], &format!("{:.2}", x + 3.0), 1);
        refused(
            &typo,
            &d,
            &[
                "line 401 lies",
                "off its lattice node",
                "--lattice-tolerance",
            ],
        );
    }

    #[test]
    fn fewer_than_nine_points_are_refused() {
        // Brief: a file with fewer than 3 x 3 points is refused, even when its numbering
        // spans 3 x 3 nodes; repeats of a node count once.
        let five = "Inline Xline X Y Z\n1 1 0 0 10\n1 3 50 0 11\n3 1 0 -50 12\n3 3 50 -50 13\n2 2 25 -25 14\n";
        refused(
            five,
            &PointOptions::default(),
            &["holds only 5 points", "at least 3 x 3 points"],
        );
        let repeats = format!("{five}1 1 0 0 10\n1 3 50 0 11\n3 1 0 -50 12\n3 3 50 -50 13\n");
        refused(
            &repeats,
            &PointOptions::default(),
            &["holds only 5 distinct nodes (9 points", "at least 3 x 3"],
        );
    }

    #[test]
    fn lattices_too_large_or_too_sparse_are_refused_before_they_are_made() {
        // Hand-checkable arithmetic: 20 000 x 20 000 nodes x 1 band is 400 million values,
        // over the 250 million cap; 100 x 100 nodes for 10 points is under 1 in 16.
        let p = Points {
            lines: (1..=10).collect(),
            x: vec![0.0; 10],
            y: vec![0.0; 10],
            inline: Vec::new(),
            crossline: Vec::new(),
            has_numbering: false,
            values: vec![1.0; 10],
            bands: 1,
        };
        let placed = Placed {
            p: &p,
            index: (0..10).map(|k| (k, k)).collect(),
            numbering: None,
            naming: POINT_LIST,
        };
        let err = placed.check_extent(20_000, 20_000).unwrap_err();
        for s in [
            "20000 x 20000 nodes x 1 band(s)",
            "400 million values",
            "3.2 GB",
            "typo",
        ] {
            assert!(err.contains(s), "'{s}' in {err}");
        }
        let err = placed.check_extent(100, 100).unwrap_err();
        assert!(
            err.contains("1 node in 16") && err.contains("line 1 (column 0, row 0)"),
            "{err}"
        );
        assert!(placed.check_extent(12, 12).is_ok());

        // A line far outside the others with consistent numbering and coordinates (a typo in
        // both) is named as the point farthest out.
        let mut e = Export::new([0.0, 10.0, 0.0, 0.0, 0.0, -10.0], 10, 10);
        e.numbering = Some((1, 1, 1, 1));
        let text = format!("{}2001 5 45 -20005 1\n", e.full(" ", None));
        refused(
            &text,
            &PointOptions::default(),
            &[
                "span 10 x 2001 nodes but only 101 points",
                "on line 101 (inline 2001, crossline 5)",
            ],
        );
    }

    #[test]
    fn null_words_and_empty_fields_are_nulls_in_value_columns_only() {
        // Common practice of exports: NULL, N/A, null, NaN, - and an empty field mark a node
        // without a value; in a coordinate or line-number column they are refused by line.
        let gt = [0.0, 10.0, 0.0, 100.0, 0.0, -10.0];
        let e = Export::new(gt, 4, 4);
        let words = ["NULL", "N/A", "null", "NaN", "-", ""];
        let field = |c: usize, r: usize, b: usize| {
            Some(match r * 4 + c {
                k @ 1..=6 => words[k - 1].to_string(),
                _ => value(c, r, b).to_string(),
            })
        };
        let text = e.text(",", Some("x,y,z"), field);
        let grid = parse(&text, &PointOptions::default()).unwrap();
        assert_picture(&grid, &gt, (4, 4), |c, r, b| {
            (!(1..=6).contains(&(r * 4 + c))).then(|| value(c, r, b))
        });
        assert_eq!(grid.lattice.null_nodes, 6);
        // The empty value is the last field of its line, as exports write it ("x,y,").
        assert!(text.lines().any(|l| l.ends_with(',')));
        let lines: Vec<&str> = text.lines().collect();
        let k = lines.iter().position(|l| l.ends_with(",NULL")).unwrap();
        let mut bad = lines.clone();
        let moved = lines[k].replacen(',', ",NULL,", 1);
        let moved = moved.rsplit_once(',').unwrap().0.to_string();
        bad[k] = &moved;
        refused(
            &bad.join("\n"),
            &PointOptions::default(),
            &[
                &format!("line {}, column 2 (y): 'NULL'", k + 1),
                "not a map coordinate",
            ],
        );
        let numbered = "il xl x y z\n1 N/A 0 0 1\n";
        refused(
            numbered,
            &PointOptions::default(),
            &["line 2, column 2 (crossline): 'N/A'", "whole line number"],
        );
    }

    #[test]
    fn free_text_above_the_header_is_skipped_and_reported() {
        // Exports often open with a title and a line like "Horizon: X" above the column
        // names (here with a number in it): they are skipped and the report says so. Free text above data without a
        // header is refused naming its line.
        let gt = [0.0, 10.0, 0.0, 100.0, 0.0, -10.0];
        let mut e = Export::new(gt, 4, 4);
        e.numbering = Some((1, 1, 1, 1));
        let body = e.full(" ", Some("Inline Crossline X Y Z"));
        let text =
            format!("Horizon: Vessa Shale top\nExported 2024 by an interpretation package\n{body}");
        let grid = parse(&text, &PointOptions::default()).unwrap();
        assert_picture(&grid, &gt, (4, 4), |c, r, b| Some(value(c, r, b)));
        assert_eq!(grid.lattice.preamble, Some((1, 2)));
        assert!(grid
            .lattice
            .describe()
            .contains("lines 1..2 before the header skipped as free text"));
        let headless = format!("Horizon: Vessa Shale top\n{}", e.full(" ", None));
        refused(
            &headless,
            &PointOptions::default(),
            &[
                "line 1 (Horizon:, Vessa, Shale, top) names 4 columns",
                "line 2, the first data line, has 5 fields",
                "mark it a comment with #",
            ],
        );
    }

    #[test]
    fn header_names_of_common_exports_are_recognised() {
        // Common practice of interpretation exports: INLINE_3D/CROSSLINE_3D, "inline no",
        // units after an underscore (TWT_ms, Depth_ft) as in brackets; az_15 stays a name.
        let gt = [0.0, 10.0, 0.0, 100.0, 0.0, -10.0];
        let mut e = Export::new(gt, 4, 4);
        e.numbering = Some((1, 1, 1, 1));
        e.bands = 2;
        for (header, names, units) in [
            (
                "INLINE_3D,CROSSLINE_3D,CDP_X,CDP_Y,TWT_ms,az_15",
                ["TWT", "az_15"],
                [Some("ms"), None],
            ),
            (
                "inline no,xline no,x,y,Depth_ft,time_s",
                ["Depth", "time"],
                [Some("ft"), Some("s")],
            ),
            (
                "inline_3d,crossline_3d,x_m,y_m,z_m,Z2 (us-ft)",
                ["z", "Z2"],
                [Some("m"), Some("us-ft")],
            ),
        ] {
            let grid = parse(&e.full(",", Some(header)), &PointOptions::default())
                .unwrap_or_else(|err| panic!("{header}: {err}"));
            assert!(grid.lattice.numbering.is_some(), "{header}");
            assert_picture(&grid, &gt, (4, 4), |c, r, b| Some(value(c, r, b)));
            let got: Vec<(&str, Option<&str>)> = grid
                .value_columns
                .iter()
                .map(|v| (v.name.as_str(), v.unit.as_deref()))
                .collect();
            assert_eq!(
                got,
                vec![(names[0], units[0]), (names[1], units[1])],
                "{header}"
            );
        }
    }

    #[test]
    fn north_up_grid_reads_back_exactly() {
        // GDAL data model (cell centre at i + 0.5, j + 0.5): a north-up grid's nodes read
        // back to its own geotransform with g2 = g4 = 0, columns east, rows south.
        let gt = [500_000.0, 25.0, 0.0, 4_100_000.0, 0.0, -25.0];
        let e = Export::new(gt, 12, 9);
        let grid = parse(&e.full(" ", None), &PointOptions::default()).unwrap();
        assert_eq!((grid.cols, grid.rows), (12, 9));
        assert_gt(&grid.geo_transform, &gt);
        assert_eq!((grid.geo_transform[2], grid.geo_transform[4]), (0.0, 0.0));
        assert_picture(&grid, &gt, (12, 9), |c, r, b| Some(value(c, r, b)));
        let report = &grid.lattice;
        assert_eq!(report.points, 108);
        assert!((report.column_azimuth - 90.0).abs() < 1e-9);
        assert!((report.row_azimuth - 180.0).abs() < 1e-9);
        assert!((report.column_bin - 25.0).abs() < 1e-9 && (report.row_bin - 25.0).abs() < 1e-9);
        assert!(report.worst_misfit < 1e-6);
        assert_eq!((report.empty_nodes, report.null_nodes), (0, 0));
        assert_eq!(
            grid.value_columns,
            vec![ValueColumn {
                name: "z".into(),
                unit: None
            }]
        );
    }

    #[test]
    fn survey_grids_come_back_identical() {
        // Canonical orientation of this module: the column axis is the lattice direction
        // closest to east and rows run 90 deg clockwise from it, as GridGeometry::survey
        // builds survey grids; so any column azimuth strictly between 45 and 135 comes back
        // with the generating geotransform (elementary geometry). 115 and 65 are grids rotated
        // 25 deg from north-up, with 25 m x 12.5 m bins.
        for azimuth in [46.0, 65.0, 90.0, 115.0, 134.0] {
            let g = GridGeometry::survey(
                (483_000.5, 3_902_000.25),
                azimuth,
                (25.0, 12.5),
                (17, 11),
                String::new(),
            );
            let e = Export::new(g.geo_transform, 17, 11);
            let grid = parse(&e.full(",", Some("x,y,z")), &PointOptions::default()).unwrap();
            assert_eq!((grid.cols, grid.rows), (17, 11), "azimuth {azimuth}");
            assert_gt(&grid.geo_transform, &g.geo_transform);
            assert_picture(&grid, &g.geo_transform, (17, 11), |c, r, b| {
                Some(value(c, r, b))
            });
            assert!((grid.lattice.column_azimuth - azimuth).abs() < 1e-9);
            assert!((grid.lattice.column_bin - 25.0).abs() < 1e-9);
            assert!((grid.lattice.row_bin - 12.5).abs() < 1e-9);
            assert!(grid.lattice.numbering.is_none());
        }
    }

    #[test]
    fn inline_crossline_numbering_sets_rows_and_columns() {
        // Brief: columns follow crossline, rows follow inline, both increasing, steps from the
        // numbering. Here crosslines increase along azimuth 10 (25 m per step of 4) and inlines
        // along azimuth 280 (12.5 m per step of 2): a mirrored lattice, which the numbering
        // keeps (elementary geometry for the vectors).
        let (sc, cc) = 10f64.to_radians().sin_cos();
        let (sr, cr) = 280f64.to_radians().sin_cos();
        let (col, row) = ((25.0 * sc, 25.0 * cc), (12.5 * sr, 12.5 * cr));
        let origin = (612_345.25, 5_432_100.75);
        let gt = [
            origin.0 - 0.5 * col.0 - 0.5 * row.0,
            col.0,
            row.0,
            origin.1 - 0.5 * col.1 - 0.5 * row.1,
            col.1,
            row.1,
        ];
        let mut e = Export::new(gt, 14, 10);
        e.numbering = Some((1001, 2, 2001, 4));
        let text = e.full(" ", Some("Inline Crossline CDP_X CDP_Y TWT [ms]"));
        let grid = parse(&text, &PointOptions::default()).unwrap();
        assert_eq!((grid.cols, grid.rows), (14, 10));
        assert_gt(&grid.geo_transform, &gt);
        assert_picture(&grid, &gt, (14, 10), |c, r, b| Some(value(c, r, b)));
        assert_eq!(
            grid.lattice.numbering,
            Some(Numbering {
                inline_first: 1001,
                inline_last: 1019,
                inline_step: 2,
                crossline_first: 2001,
                crossline_last: 2053,
                crossline_step: 4,
            })
        );
        assert!((grid.lattice.column_azimuth - 10.0).abs() < 1e-9);
        assert!((grid.lattice.row_azimuth - 280.0).abs() < 1e-9);
        assert_eq!(
            grid.value_columns,
            vec![ValueColumn {
                name: "TWT".into(),
                unit: Some("ms".into())
            }]
        );

        // From x, y alone the same points take the canonical orientation: the column axis is
        // the direction closest to east (the reversed inline axis, azimuth 100, 12.5 m), rows
        // clockwise from it (the reversed crossline axis, azimuth 190).
        let options = PointOptions {
            columns: Some(ColumnRole::parse_list("skip,skip,x,y,twt").unwrap()),
            ..PointOptions::default()
        };
        let canonical = parse(&text, &options).unwrap();
        assert_eq!((canonical.cols, canonical.rows), (10, 14));
        assert!((canonical.lattice.column_azimuth - 100.0).abs() < 1e-9);
        assert!((canonical.lattice.row_azimuth - 190.0).abs() < 1e-9);
        assert!((canonical.lattice.column_bin - 12.5).abs() < 1e-9);
        assert_picture(&canonical, &gt, (14, 10), |c, r, b| Some(value(c, r, b)));
        assert_eq!(canonical.value_columns[0].name, "twt");
        assert_eq!(canonical.value_columns[0].unit.as_deref(), Some("ms"));
    }

    #[test]
    fn gaps_sentinels_and_nan_text_are_nulls() {
        // Brief: nodes without a point, values equal to a nodata sentinel and `nan` text are
        // nulls; the lattice keeps its full extent (corner nodes present).
        let g = GridGeometry::survey(
            (350_000.0, 6_200_000.0),
            72.0,
            (12.5, 25.0),
            (15, 12),
            String::new(),
        );
        let field = |c: usize, r: usize, b: usize| match (c * 7 + r * 3) % 11 {
            _ if (c, r) == (0, 0) || (c, r) == (14, 11) => Some(value(c, r, b).to_string()),
            0 => None,
            1 => Some("-999.25".to_string()),
            2 => Some(if r.is_multiple_of(2) { "nan" } else { "NaN" }.to_string()),
            _ => Some(value(c, r, b).to_string()),
        };
        let expected = |c: usize, r: usize, b: usize| match (c * 7 + r * 3) % 11 {
            _ if (c, r) == (0, 0) || (c, r) == (14, 11) => Some(value(c, r, b)),
            0..=2 => None,
            _ => Some(value(c, r, b)),
        };
        let options = PointOptions {
            nodata: vec![-999.25],
            ..PointOptions::default()
        };
        let mut e = Export::new(g.geo_transform, 15, 12);
        let xy = parse(&e.text("\t", None, field), &options).unwrap();
        assert_gt(&xy.geo_transform, &g.geo_transform);
        assert_picture(&xy, &g.geo_transform, (15, 12), expected);
        let missing = (0..15 * 12)
            .filter(|k| (k % 15 * 7 + k / 15 * 3) % 11 == 0 && ![0, 179].contains(k))
            .count();
        let nulls = (0..15 * 12)
            .filter(|k| (k % 15 * 7 + k / 15 * 3) % 11 <= 2 && ![0, 179].contains(k))
            .count();
        assert_eq!(xy.lattice.empty_nodes, missing);
        assert_eq!(xy.lattice.null_nodes, nulls);
        assert_eq!(xy.lattice.points, 15 * 12 - missing);

        e.numbering = Some((10, 1, 500, 1));
        let numbered = parse(&e.text(" ", None, field), &options).unwrap();
        assert_gt(&numbered.geo_transform, &g.geo_transform);
        assert_picture(&numbered, &g.geo_transform, (15, 12), expected);
        // Without the sentinel, -999.25 is a value like any other.
        let plain = parse(&e.text(" ", None, field), &PointOptions::default()).unwrap();
        assert_eq!(
            plain.bands[0][[0, 8]],
            -999.25,
            "node (8, 0) holds the sentinel"
        );
    }

    #[test]
    fn sector_files_give_one_band_per_value_column() {
        // Brief: with x, y (and inline, crossline) recognised, every other header column is a
        // value column, named as given.
        let g = GridGeometry::survey(
            (720_000.0, 3_100_000.0),
            100.0,
            (20.0, 20.0),
            (9, 8),
            String::new(),
        );
        let mut e = Export::new(g.geo_transform, 9, 8);
        e.numbering = Some((300, 1, 1200, 1));
        e.bands = 4;
        let text = e.full("\t", Some("iline\txline\tx\ty\taz15\taz60\taz105\taz150"));
        let grid = parse(&text, &PointOptions::default()).unwrap();
        let names: Vec<&str> = grid.value_columns.iter().map(|v| v.name.as_str()).collect();
        assert_eq!(names, ["az15", "az60", "az105", "az150"]);
        assert_eq!(grid.bands.len(), 4);
        assert_gt(&grid.geo_transform, &g.geo_transform);
        assert_picture(&grid, &g.geo_transform, (9, 8), |c, r, b| {
            Some(value(c, r, b))
        });
        // Sector names that are bare azimuths: the recognised names make the line a header.
        let numeric = text.replace("az", "");
        let grid = parse(&numeric, &PointOptions::default()).unwrap();
        let names: Vec<&str> = grid.value_columns.iter().map(|v| v.name.as_str()).collect();
        assert_eq!(names, ["15", "60", "105", "150"]);
        assert_picture(&grid, &g.geo_transform, (9, 8), |c, r, b| {
            Some(value(c, r, b))
        });
    }

    #[test]
    fn every_delimiter_and_unit_suffix_reads_the_same_grid() {
        // Brief: whitespace, comma, semicolon and tab separation; a unit suffix in () or []
        // is the value column's unit, lower-cased.
        let g = GridGeometry::survey(
            (500_100.0, 4_000_050.0),
            80.0,
            (25.0, 25.0),
            (8, 7),
            String::new(),
        );
        let e = Export::new(g.geo_transform, 8, 7);
        let cases = [
            (" ", Some("X Y Depth (ft)"), "Depth", Some("ft")),
            ("   ", None, "z", None),
            (",", Some("easting,northing,Depth(FT)"), "Depth", Some("ft")),
            (", ", Some("\"x\", \"y\", \"z [m]\""), "z", Some("m")),
            (";", Some("x;y;TWT [ms]"), "TWT", Some("ms")),
            ("\t", Some("x\ty\televation"), "elevation", None),
            ("\t\t", None, "z", None),
        ];
        for (sep, header, name, unit) in cases {
            let grid = parse(&e.full(sep, header), &PointOptions::default())
                .unwrap_or_else(|err| panic!("separator {sep:?}: {err}"));
            assert_gt(&grid.geo_transform, &g.geo_transform);
            assert_picture(&grid, &g.geo_transform, (8, 7), |c, r, b| {
                Some(value(c, r, b))
            });
            assert_eq!(grid.value_columns[0].name, name);
            assert_eq!(grid.value_columns[0].unit.as_deref(), unit);
        }
    }

    #[test]
    fn columns_option_overrides_and_skips() {
        // Brief: --columns overrides the header and the field-count defaults; skip ignores a
        // column.
        let gt = [200_000.0, 50.0, 0.0, 1_500_000.0, 0.0, -50.0];
        let e = Export::new(gt, 6, 5);
        let with_extra = e.text(" ", None, |c, r, b| {
            Some(format!("{} {}", value(c, r, b), c * 100 + r))
        });
        // Four fields and no header: --columns says what they are.
        let options = PointOptions {
            columns: Some(ColumnRole::parse_list("x, y, Depth (m), skip").unwrap()),
            ..PointOptions::default()
        };
        let err = parse(&with_extra, &PointOptions::default())
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("4 fields") && err.contains("--columns x,y,z,skip"),
            "{err}"
        );
        let four = with_extra.replace(' ', ",");
        let grid = parse(&four, &options).unwrap();
        assert_gt(&grid.geo_transform, &gt);
        assert_picture(&grid, &gt, (6, 5), |c, r, b| Some(value(c, r, b)));
        assert_eq!(
            grid.value_columns,
            vec![ValueColumn {
                name: "Depth".into(),
                unit: Some("m".into())
            }]
        );
        // A header whose names agree with --columns (value names may differ) is fine.
        let headed = format!("east,north,z (ft),quality\n{four}");
        let grid = parse(&headed, &options).unwrap();
        assert_eq!(grid.value_columns[0].unit.as_deref(), Some("m"));
        let options = PointOptions {
            columns: Some(ColumnRole::parse_list("x,y,z,skip").unwrap()),
            ..PointOptions::default()
        };
        let grid = parse(&format!("easting,northing,depth (ft),q\n{four}"), &options).unwrap();
        assert_eq!(grid.value_columns[0].unit.as_deref(), Some("ft"));
    }

    #[test]
    fn column_lists_parse_roles_and_refuse_incomplete_sets() {
        // Brief: recognised names and their variants, any other name a value column.
        use ColumnRole::*;
        assert_eq!(
            ColumnRole::parse_list("IL, Cross-Line, CDP_X, cdpy, TWT [ms], az15, skip").unwrap(),
            vec![
                Inline,
                Crossline,
                X,
                Y,
                Value("TWT [ms]".into()),
                Value("az15".into()),
                Skip
            ]
        );
        assert_eq!(
            ColumnRole::parse_list("easting,northing,trace,in-line,depth").unwrap(),
            vec![X, Y, Crossline, Inline, Value("depth".into())]
        );
        for (spec, says) in [
            ("x,z", "no x and y"),
            ("x,x,y,z", "x columns 2 times"),
            ("inline,x,y,z", "no crossline"),
            ("xline,x,y,z", "no inline"),
            ("x,y,skip", "no value column"),
            ("x,y,z,Z (ft)", "'z' twice"),
            ("x,,y,z", "entry 2 is empty"),
        ] {
            let err = ColumnRole::parse_list(spec).unwrap_err().to_string();
            assert!(err.contains(says) && err.contains(spec), "{spec}: {err}");
        }
    }

    /// Asserts `text` is refused with one line containing every piece of `says`.
    fn refused(text: &str, options: &PointOptions, says: &[&str]) -> String {
        let err = parse(text, options).unwrap_err().to_string();
        assert!(!err.contains('\n'), "not one line: {err}");
        for s in says {
            assert!(err.contains(s), "expected '{s}' in: {err}");
        }
        err
    }

    #[test]
    fn malformed_files_are_refused_naming_line_column_and_remedy() {
        // Brief: every refusal is one line naming the file line (and column) and saying what
        // to do.
        let d = PointOptions::default();
        let e = Export::new([0.0, 10.0, 0.0, 100.0, 0.0, -10.0], 4, 4);
        let good = e.full(" ", Some("x y z"));
        // Line numbers count the comment and header lines: line 3 is the first point.
        let edit = |line: usize, field: usize, text: &str| {
            let mut lines: Vec<String> = good.lines().map(str::to_string).collect();
            let mut fields: Vec<&str> = lines[line - 1].split(' ').collect();
            fields[field - 1] = text;
            lines[line - 1] = fields.join(" ");
            lines.join("\n")
        };
        refused(
            &edit(7, 3, "12..5"),
            &d,
            &["horizon.txt", "line 7, column 3 (z)", "'12..5'", "nan"],
        );
        refused(
            &edit(5, 2, "y?"),
            &d,
            &["line 5, column 2 (y)", "'y?' is not a number"],
        );
        refused(
            &edit(4, 1, "inf"),
            &d,
            &["line 4, column 1 (x)", "leave out the line"],
        );
        refused(
            &edit(6, 3, "-inf"),
            &d,
            &["line 6, column 3 (z)", "not a finite number"],
        );
        // A first line of numbers with a typo is data, not a header: its field is named.
        let headless = e.full(" ", None);
        let first = headless.lines().next().unwrap().to_string();
        let fields: Vec<&str> = first.split(' ').collect();
        let typo = headless.replacen(&first, &format!("{} 9o {}", fields[0], fields[2]), 1);
        refused(&typo, &d, &["line 1, column 2 (y)", "'9o' is not a number"]);
        // Typos in most fields of the first line, with --columns: still data, not a header.
        let twice = headless.replacen(
            &first,
            &format!("{}O {}O {}", fields[0], fields[1], fields[2]),
            1,
        );
        let options = PointOptions {
            columns: Some(ColumnRole::parse_list("x,y,z").unwrap()),
            ..PointOptions::default()
        };
        refused(
            &twice,
            &options,
            &["line 1, column 1 (x)", "is not a number"],
        );
        // Semicolon-separated with a decimal comma on line 3 (x and y here are whole numbers).
        let mut european: Vec<String> = e.full(";", None).lines().map(str::to_string).collect();
        european[2] = european[2].replacen('.', ",", 1);
        refused(
            &european.join("\n"),
            &d,
            &["line 3, column 3 (z)", "decimal commas"],
        );
        let mut lines: Vec<String> = good.lines().map(str::to_string).collect();
        lines[8].push_str(" 7");
        refused(
            &lines.join("\n"),
            &d,
            &["line 9 has 4 fields", "3 columns", "--columns"],
        );
        refused(
            &good.replace("x y z", "a b c"),
            &d,
            &["line 2 (a, b, c)", "names no column", "--columns x,y,z"],
        );
        let extra: String = good
            .replace("x y z", "x y z inline")
            .lines()
            .map(|l| match l.starts_with(|c: char| c.is_ascii_digit()) {
                true => format!("{l} 7\n"),
                false => format!("{l}\n"),
            })
            .collect();
        refused(
            &extra,
            &d,
            &[
                "line 2",
                "inline column but no crossline",
                "--columns x,y,z,skip",
            ],
        );
        // A header whose names are not as many as the data's fields.
        refused(
            &good.replace("x y z", "x y z inline"),
            &d,
            &[
                "line 2 (x, y, z, inline) names 4 columns",
                "line 3, the first data line, has 3 fields",
                "mark it a comment with #",
            ],
        );
        refused(
            &good.replace("x y z", "inline xline depth"),
            &d,
            &["line 2", "no x and y", "--columns"],
        );
        let four = good
            .lines()
            .skip(2)
            .map(|l| format!("{l} 1\n"))
            .collect::<String>();
        refused(
            &four,
            &d,
            &["4 fields", "no header", "--columns x,y,z,skip"],
        );
        let options = PointOptions {
            columns: Some(ColumnRole::parse_list("y,x,z").unwrap()),
            ..PointOptions::default()
        };
        refused(
            &good,
            &options,
            &["column 1 is y", "line 2 names it 'x'", "--columns"],
        );
        let options = PointOptions {
            columns: Some(ColumnRole::parse_list("x,y,z,skip").unwrap()),
            ..PointOptions::default()
        };
        refused(&good, &options, &["4 columns", "line 2 has 3"]);
        refused("# nothing\n\n", &d, &["no data lines"]);
        refused(
            "x y z\n",
            &d,
            &["line 1 is a header", "no data lines follow"],
        );
        let options = PointOptions {
            lattice_tolerance: 0.7,
            ..PointOptions::default()
        };
        refused(&good, &options, &["--lattice-tolerance 0.7", "0..0.5"]);
    }

    #[test]
    fn inline_numbers_must_be_whole() {
        // Brief: inline/crossline must be integer-valued; the message names line and column.
        let mut e = Export::new([0.0, 10.0, 0.0, 100.0, 0.0, -10.0], 4, 4);
        e.numbering = Some((1, 1, 1, 1));
        let text = e.full(",", None).replacen("\n3,", "\n3.5,", 1);
        let line = text.lines().position(|l| l.starts_with("3.5,")).unwrap() + 1;
        refused(
            &text,
            &PointOptions::default(),
            &[
                &format!("line {line}, column 1 (inline)"),
                "'3.5'",
                "whole line number",
                "skip",
            ],
        );
    }

    #[test]
    fn points_off_the_lattice_are_refused_by_line() {
        // Brief: a point more than lattice_tolerance of the smaller bin off its node is
        // refused naming its line; within the tolerance it is read onto its node. Jitter here
        // is at most 0.02 of the 12.5 m bin, one point 0.045 (read) or 0.08 (refused).
        let g = GridGeometry::survey(
            (431_000.0, 7_001_000.0),
            58.0,
            (25.0, 12.5),
            (20, 16),
            String::new(),
        );
        let e = Export::new(g.geo_transform, 20, 16);
        let text = |outlier: f64| {
            let mut lines = Vec::new();
            for (k, line) in e.full(" ", None).lines().enumerate() {
                let f: Vec<f64> = line.split(' ').map(|t| t.parse().unwrap()).collect();
                let a = std::f64::consts::TAU * unit(2 * k as u64);
                let d = if k == 77 {
                    outlier
                } else {
                    0.02 * unit(2 * k as u64 + 1)
                } * 12.5;
                lines.push(format!(
                    "{} {} {}",
                    f[0] + d * a.cos(),
                    f[1] + d * a.sin(),
                    f[2]
                ));
            }
            lines.join("\n")
        };
        let grid = parse(&text(0.045), &PointOptions::default()).unwrap();
        assert_eq!(grid.lattice.worst_misfit_line, 78);
        assert!(grid.lattice.worst_misfit_share < 0.05);
        let exact = |c, r, b| Some(value(c, r, b));
        assert_picture_within(&grid, &g.geo_transform, (20, 16), exact, 0.01);
        let err = refused(
            &text(0.08),
            &PointOptions::default(),
            &[
                "line 78 lies",
                "off its lattice node",
                "--lattice-tolerance",
            ],
        );
        assert!(err.contains("0.08") || err.contains("0.07"), "{err}");
        // The same point read with a looser tolerance.
        let loose = PointOptions {
            lattice_tolerance: 0.1,
            ..PointOptions::default()
        };
        assert_eq!(
            parse(&text(0.08), &loose)
                .unwrap()
                .lattice
                .worst_misfit_line,
            78
        );
    }

    #[test]
    fn numbered_points_off_their_lattice_are_refused_by_line() {
        // Brief: the same misfit check applies to the affine map fitted to the numbering.
        let mut e = Export::new([800_000.0, 30.0, 0.0, 900_000.0, 0.0, -30.0], 6, 6);
        e.numbering = Some((1, 1, 1, 1));
        let text = e.full(" ", Some("il xl x y z"));
        let bad = text.replacen("800105 ", "800108 ", 1);
        assert_ne!(bad, text, "the test edits one x");
        let line = bad.lines().position(|l| l.contains("800108 ")).unwrap() + 1;
        refused(
            &bad,
            &PointOptions::default(),
            &[
                &format!("line {line} lies"),
                "inline",
                "crossline",
                "--lattice-tolerance",
            ],
        );
    }

    #[test]
    fn a_far_node_of_widely_numbered_inlines_is_named_without_overflow() {
        // Found by the reader audit: inlines numbered 1e14 apart and a point whose x, y are those of a
        // node a million rows away; naming that node multiplies the two (1e20, beyond i64).
        // Hand-checkable: the node is inline 0 + 1e6 * 1e14 = 1e20, crossline 0.
        let mut text = String::from("il xl x y z\n");
        for r in 0..4i64 {
            for c in 0..4i64 {
                let y = if (r, c) == (0, 0) {
                    1000.0 - 10.0 * 1e6
                } else {
                    1000.0 - 10.0 * r as f64
                };
                text += &format!("{} {c} {} {y} 5\n", r * 100_000_000_000_000, 1000 + 10 * c);
            }
        }
        let err = refused(
            &text,
            &PointOptions::default(),
            &["line 2:", "inline 0, crossline 0"],
        );
        assert!(
            err.contains("inline 100000000000000000000, crossline 0"),
            "{err}"
        );
    }

    #[test]
    fn points_spread_over_wildly_different_extents_are_refused_without_overflow() {
        // Found by the reader audit: 2e6 units wide and 2e-300 high, the bucket grid of the
        // lattice search asked for 3e153 buckets across (beyond i64). Such points are not a
        // two-dimensional survey; the refusal says so.
        let mut text = String::from("x y z\n");
        for r in 0..3 {
            for c in 0..3 {
                text += &format!("{} {} 5\n", 1e6 * c as f64, 1e-300 * r as f64);
            }
        }
        let e = parse(&text, &PointOptions::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("the points lie on no regular lattice"), "{e}");
    }

    #[test]
    fn repeated_nodes_must_agree() {
        // Brief: duplicate nodes with different values are refused naming both lines;
        // identical duplicates are read once.
        let gt = [10_000.0, 5.0, 0.0, 20_000.0, 0.0, -5.0];
        let e = Export::new(gt, 5, 5);
        let text = e.full(",", None);
        let first = text.lines().next().unwrap().to_string();
        let same = format!("{text}{first}\n");
        let grid = parse(&same, &PointOptions::default()).unwrap();
        assert_eq!(grid.lattice.repeated, 1);
        assert_picture(&grid, &gt, (5, 5), |c, r, b| Some(value(c, r, b)));
        let (head, _) = first.rsplit_once(',').unwrap();
        let differ = format!("{text}{head},1234.5\n");
        refused(
            &differ,
            &PointOptions::default(),
            &["lines 1 and 26", "different values", "remove one"],
        );
    }

    #[test]
    fn lists_smaller_than_three_by_three_are_refused() {
        // Brief: fewer than 3 distinct columns or rows is refused.
        let gt = [0.0, 10.0, 0.0, 0.0, 0.0, -10.0];
        let text = Export::new(gt, 2, 6).full(" ", None);
        refused(
            &text,
            &PointOptions::default(),
            &["2 x 6 nodes", "at least 3 x 3"],
        );
        let text = Export::new(gt, 8, 2).full(" ", None);
        refused(
            &text,
            &PointOptions::default(),
            &["8 x 2 nodes", "at least 3 x 3"],
        );
        let mut e = Export::new(gt, 2, 6);
        e.numbering = Some((1, 1, 1, 1));
        refused(
            &e.full(" ", None),
            &PointOptions::default(),
            &["2 x 6 nodes", "at least 3 x 3"],
        );
    }

    #[test]
    fn scattered_points_need_gridding_first() {
        // Brief: points on no lattice are refused with one line saying they need gridding.
        let text: String = (0..400u64)
            .map(|k| {
                let (x, y) = (
                    500_000.0 + 2000.0 * unit(3 * k),
                    4_000_000.0 + 2000.0 * unit(3 * k + 1),
                );
                format!("{x} {y} {}\n", 100.0 + unit(3 * k + 2))
            })
            .collect();
        refused(
            &text,
            &PointOptions::default(),
            &["grid them first", "does not grid silently"],
        );
        // A lattice holding points at fewer than 1 node in 20: three corners and a few
        // points of a 100 x 100 lattice.
        let gt = [0.0, 10.0, 0.0, 0.0, 0.0, -10.0];
        let e = Export::new(gt, 100, 100);
        let sparse = e.text(" ", None, |c, r, _| {
            ((c < 3 && r < 3) || (c, r) == (99, 99) || (c, r) == (99, 0))
                .then(|| value(c, r, 0).to_string())
        });
        refused(
            &sparse,
            &PointOptions::default(),
            &[
                "100 x 100 nodes",
                "1 node in 16",
                "grid them first",
                "farthest from the others is on line",
            ],
        );
        // Numbered points whose coordinates are scattered.
        let numbered: String = (0..100u64)
            .map(|k| {
                format!(
                    "{} {} {} {} 5\n",
                    k / 10,
                    k % 10,
                    1000.0 * unit(2 * k),
                    1000.0 * unit(2 * k + 1)
                )
            })
            .collect();
        refused(
            &numbered,
            &PointOptions::default(),
            &["do not follow the inline/crossline numbering", "--columns"],
        );
        // Collinear points.
        let line: String = (0..30)
            .map(|k| format!("{} {} 1\n", 10 * k, 5 * k))
            .collect();
        refused(
            &line,
            &PointOptions::default(),
            &["along one line", "two-dimensional"],
        );
    }

    #[test]
    fn unusual_lattices_are_found_from_coordinates() {
        // Elementary geometry: very unequal bins (100 m x 6.25 m), a thin strip (3 columns),
        // and a large rotated grid with a third of its nodes missing come back on their
        // generating lattice (GridGeometry::survey orientation, column azimuth in 45..135).
        let cases = [
            (78.0, (100.0, 6.25), (9, 60), 0.0),
            (120.0, (6.25, 100.0), (60, 9), 0.0),
            (52.0, (25.0, 25.0), (400, 3), 0.0),
            (97.0, (30.0, 15.0), (3, 300), 0.0),
            (105.0, (25.0, 12.5), (150, 120), 0.33),
        ];
        for (k, (azimuth, bins, (cols, rows), holes)) in cases.into_iter().enumerate() {
            let g = GridGeometry::survey(
                (620_000.0, 5_100_000.0),
                azimuth,
                bins,
                (cols, rows),
                String::new(),
            );
            let e = Export::new(g.geo_transform, cols, rows);
            let keep = |c: usize, r: usize| {
                let corner = (c == 0 || c == cols - 1) && (r == 0 || r == rows - 1);
                corner || unit((k * 1_000_000 + r * cols + c) as u64) >= holes
            };
            let text = e.text(" ", None, |c, r, b| {
                keep(c, r).then(|| value(c, r, b).to_string())
            });
            let grid = parse(&text, &PointOptions::default()).unwrap();
            assert_gt(&grid.geo_transform, &g.geo_transform);
            assert_picture(&grid, &g.geo_transform, (cols, rows), |c, r, b| {
                keep(c, r).then(|| value(c, r, b))
            });
        }
    }

    #[test]
    fn report_describes_the_lattice_in_one_line() {
        // The report's own contract: points, source of the lattice, azimuths, bins, misfit.
        let mut e = Export::new([0.0, 10.0, 0.0, 0.0, 0.0, -20.0], 5, 4);
        e.numbering = Some((7, 3, 100, 2));
        let grid = parse(&e.full(" ", None), &PointOptions::default()).unwrap();
        let line = grid.lattice.describe();
        assert!(!line.contains('\n'));
        for s in [
            "20 points",
            "inlines 7..16 step 3",
            "crosslines 100..108 step 2",
            "90.000 deg",
            "180.000 deg",
            "10.0000 x 20.0000",
            "0 null nodes",
        ] {
            assert!(line.contains(s), "'{s}' in {line}");
        }
        let geometry = grid.geometry(String::new(), 1.0);
        assert_eq!(geometry.cell_centre(0, 0), (5.0, -10.0));
    }

    #[test]
    fn sniffing_tells_point_lists_from_rasters_and_binaries() {
        // Brief: text with a header of names or >= 3 numeric fields is a point list; binary
        // files and GDAL's text raster formats (ESRI ASCII grid, Surfer, GRASS, VRT XML) are
        // not (their first lines from the formats' documentation, from memory).
        let dir = tempfile::tempdir().unwrap();
        let cases: [(&str, &[u8], bool); 16] = [
            (
                "a.xyz",
                b"500000.0 4100000.0 1500.25\n500025.0 4100000.0 1501\n",
                true,
            ),
            ("b.csv", b"# horizon\ninline,xline,x,y,z\n1,1,5,6,7\n", true),
            ("c.txt", b"X Y Depth (ft)\n1 2 3\n", true),
            ("d.txt", b"x;y;twt\n", true),
            ("l.csv", b"inline,xline,x,y,15,45\n1,1,5,6,7,8\n", true),
            (
                "e.asc",
                b"ncols 4\nnrows 3\nxllcorner 0\nyllcorner 0\ncellsize 1\n1 2 3 4\n",
                false,
            ),
            ("f.grd", b"DSAA\n4 3\n0 3\n0 2\n1 5\n", false),
            ("g.txt", b"north: 4299000.00\nsouth: 4247000.00\n", false),
            (
                "h.vrt",
                b"<VRTDataset rasterXSize=\"512\" rasterYSize=\"512\">\n",
                false,
            ),
            ("i.tif", b"II*\x00\x08\x00\x00\x00\x10\x00", false),
            ("j.txt", b"1 2\n3 4\n", false),
            ("k.csv", b"well,md\nA,100\n", false),
            // Recognised column names are enough, whatever the data below them: a null
            // word, decimal commas (then refused by line), free text above the header.
            (
                "m.txt",
                b"Inline Xline X Y TWT\n1000 2000 480000.00 3900000.00 NULL\n",
                true,
            ),
            (
                "n.csv",
                b"Inline;Crossline;X;Y;Z\n1000;2000;478000,00;3897000,00;2399,957\n",
                true,
            ),
            (
                "o.txt",
                b"Horizon: Vessa Shale top\nExported 2024\nInline Crossline X Y Z\n1000 2000 478000.00 3897000.00 2399.957\n",
                true,
            ),
            ("p.txt", b"Horizon: Vessa Shale top\n1 2\n", false),
        ];
        for (name, bytes, expected) in cases {
            let path = dir.path().join(name);
            std::fs::write(&path, bytes).unwrap();
            assert_eq!(is_point_list(&path), expected, "{name}");
        }
        assert!(!is_point_list(&dir.path().join("missing.xyz")));
        // Plain text GDAL would read as no raster format of its own: the point-list reader
        // explains it by line (the binary file and GDAL's text formats are left to GDAL).
        for (name, plain) in [
            ("p.txt", true),
            ("a.xyz", true),
            ("e.asc", false),
            ("i.tif", false),
        ] {
            assert_eq!(is_plain_text(&dir.path().join(name)), plain, "{name}");
        }
        let err = read_points(&dir.path().join("p.txt"), &PointOptions::default())
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("p.txt: has no data line") && err.contains("line 1"),
            "{err}"
        );
        let path = dir.path().join("i.tif");
        let err = read_points(&path, &PointOptions::default())
            .unwrap_err()
            .to_string();
        assert!(err.contains("binary") && err.contains("i.tif"), "{err}");
    }
}
