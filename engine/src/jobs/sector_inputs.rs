//! The grids of an anisotropy job opened for reading by runs of rows: sector times and weight
//! grids, each a stack of co-registered grids (the bands of one raster, or one band from each
//! of several rasters) on [`RowSource`]s, with the unit handling of sector times (seconds to
//! ms, lengths refused) applied to every run of rows read.

use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::{ReadOptions, RowSource};
use crate::surface::horizon::DeclaredUnit;
use ndarray::Array2;
use std::ops::Range;
use std::path::{Path, PathBuf};

/// What the values of a stack are: sector times (ms; declared seconds are converted, declared
/// lengths refused) or weights (any unit).
#[derive(Clone, Copy, PartialEq)]
pub(super) enum Units {
    Time,
    Weight,
}

impl Units {
    fn what(self) -> &'static str {
        match self {
            Units::Time => "sector",
            Units::Weight => "weight",
        }
    }
}

/// One grid of a stack: band `band` (0-based) of `sources[source]`, times `factor` (1000 for
/// times declared in seconds, else 1).
struct StackBand {
    source: usize,
    band: usize,
    factor: f64,
}

/// Co-registered grids read from one multi-band raster or from single-band rasters, opened
/// for reading by runs of rows.
pub(super) struct Stack {
    /// The grid they share.
    pub(super) geometry: GridGeometry,
    sources: Vec<RowSource>,
    bands: Vec<StackBand>,
    /// One label per grid: the file name, with the band number for a multi-band file.
    pub(super) labels: Vec<String>,
    /// The file of each grid.
    pub(super) paths: Vec<PathBuf>,
    /// What the readers noticed (point-list lattices, outliers kept, seconds converted).
    pub(super) notes: Vec<String>,
}

fn file_name(p: &Path) -> String {
    p.file_name()
        .unwrap_or_default()
        .to_string_lossy()
        .to_string()
}

impl Stack {
    /// Opens `paths` as a stack of `units` grids: the bands of one file, or one band per file,
    /// all on the same grid.
    pub(super) fn open(paths: &[PathBuf], read: &ReadOptions, units: Units) -> Result<Stack> {
        let what = units.what();
        if let [path] = paths {
            let source = RowSource::open(path, read)?;
            let labels = source
                .info()
                .names
                .iter()
                .enumerate()
                .map(|(b, n)| match n.is_empty() {
                    true => format!("{} band {}", file_name(path), b + 1),
                    false => format!("{} band {} ({n})", file_name(path), b + 1),
                })
                .collect();
            let mut stack = Stack {
                geometry: source.geometry().clone(),
                bands: Vec::new(),
                labels,
                paths: vec![path.clone(); source.band_count()],
                notes: source.notes().to_vec(),
                sources: Vec::new(),
            };
            stack.add_bands(source, units)?;
            return Ok(stack);
        }
        let mut stack: Option<Stack> = None;
        for path in paths {
            if paths.iter().filter(|p| *p == path).count() > 1 {
                return Err(FlexureError::input(
                    path,
                    format!("is given twice as a {what} grid: give each sector once"),
                ));
            }
            let source = RowSource::open(path, read)?;
            if source.band_count() != 1 {
                return Err(FlexureError::input(
                    path,
                    format!(
                        "has {} bands: give one single-band {what} grid per sector, or one raster with a band per sector",
                        source.band_count()
                    ),
                ));
            }
            let s = stack.get_or_insert_with(|| Stack {
                geometry: source.geometry().clone(),
                sources: Vec::new(),
                bands: Vec::new(),
                labels: Vec::new(),
                paths: Vec::new(),
                notes: Vec::new(),
            });
            if let Some(why) = s.geometry.mismatch(source.geometry()) {
                return Err(FlexureError::input(
                    path,
                    format!(
                        "is not on the grid of {} ({why}): give every {what} grid on the same bins",
                        s.labels[0]
                    ),
                ));
            }
            s.labels.push(file_name(path));
            s.paths.push(path.clone());
            s.notes.extend(source.notes().iter().cloned());
            s.add_bands(source, units)?;
        }
        stack.ok_or_else(|| FlexureError::Parameter(format!("no {what} grid given")))
    }

    /// Adds every band of `source`, converting sector times declared in seconds to ms and
    /// refusing sector grids declared in a length unit.
    fn add_bands(&mut self, source: RowSource, units: Units) -> Result<()> {
        for (band, unit) in source.info().units.iter().enumerate() {
            let factor = match (units, DeclaredUnit::parse(unit)) {
                (Units::Weight, _) => 1.0,
                (Units::Time, Some(DeclaredUnit::Seconds)) => {
                    self.notes.push(format!(
                        "{}: a band declared in seconds converted to ms",
                        source.path().display()
                    ));
                    1000.0
                }
                (Units::Time, Some(DeclaredUnit::Length(_))) => {
                    return Err(FlexureError::input(
                        source.path(),
                        format!("declares its values in '{unit}', a length: sector grids hold two-way times or time shifts in ms"),
                    ))
                }
                (Units::Time, _) => 1.0,
            };
            self.bands.push(StackBand {
                source: self.sources.len(),
                band,
                factor,
            });
        }
        self.sources.push(source);
        Ok(())
    }

    /// Number of grids.
    pub(super) fn len(&self) -> usize {
        self.bands.len()
    }

    /// Rows `rows` of grid `k`, every column, NaN nulls, times in ms.
    pub(super) fn read_rows(&self, k: usize, rows: Range<usize>) -> Result<Array2<f64>> {
        let b = &self.bands[k];
        let mut values = self.sources[b.source].read_rows(b.band, rows)?;
        if b.factor != 1.0 {
            values.mapv_inplace(|t| t * b.factor);
        }
        Ok(values)
    }
}
