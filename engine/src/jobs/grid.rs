//! The grid job: an input as flexure reads it (a point list on its exact lattice, or any
//! raster) written as a float64 GeoTIFF, so a user can check the inferred lattice in a GIS and
//! reuse the grid. Values are written exactly as read (float64 keeps every parsed number);
//! value names and declared units become band descriptions and unit types, so domain and unit
//! declarations carry over; the lattice report and provenance go into the metadata.

use crate::error::Result;
use crate::io::{
    prepare_output_dir, read_raster, refuse_overwrite, stage_float_geotiff, BandOut, ReadOptions,
    TiffOptions,
};
use crate::provenance::Provenance;
use std::fmt;
use std::path::{Path, PathBuf};

/// Options of the grid job.
#[derive(Clone, Debug)]
pub struct GridJob {
    /// Point list or raster to read.
    pub input: PathBuf,
    /// How to read it (CRS, null sentinels, point-list columns and lattice tolerance).
    pub read: ReadOptions,
    /// GeoTIFF to write.
    pub out: PathBuf,
    /// How output GeoTIFFs are compressed and laid out.
    pub tiff: TiffOptions,
}

impl GridJob {
    /// A job reading `input` with the default options.
    pub fn new(input: impl Into<PathBuf>, out: impl Into<PathBuf>) -> Self {
        Self {
            input: input.into(),
            read: ReadOptions::default(),
            out: out.into(),
            tiff: TiffOptions::default(),
        }
    }

    /// Reads the input and writes the GeoTIFF.
    pub fn run(&self) -> Result<GridReport> {
        let raster = read_raster(&self.input, &self.read)?;
        prepare_output_dir(
            self.out
                .parent()
                .filter(|p| !p.as_os_str().is_empty())
                .unwrap_or(Path::new(".")),
        )?;
        refuse_overwrite(&self.out, &[&self.input])?;
        let names: Vec<String> = raster
            .info
            .names
            .iter()
            .enumerate()
            .map(|(k, n)| {
                if n.is_empty() {
                    format!("band {}", k + 1)
                } else {
                    n.clone()
                }
            })
            .collect();
        let bands: Vec<BandOut<f64>> = raster
            .bands
            .iter()
            .zip(&names)
            .zip(&raster.info.units)
            .map(|((values, name), unit)| BandOut {
                description: name,
                unit,
                values: values.clone(),
            })
            .collect();
        let mut provenance = Provenance::of_inputs(&[&self.input])?
            .with("nodata_sentinels", format!("{:?}", self.read.nodata))
            .with("lattice_tolerance", self.read.lattice_tolerance.to_string());
        for (k, note) in raster.notes.iter().enumerate() {
            provenance = provenance.with(&format!("read_note_{}", k + 1), note.clone());
        }
        stage_float_geotiff(
            &self.out,
            &raster.geometry,
            &bands,
            provenance.items(),
            self.tiff,
        )?
        .commit()?;
        let cells = raster.bands.first().map_or(0, |b| b.len()).max(1);
        let nulls = raster
            .bands
            .first()
            .map_or(0, |b| b.iter().filter(|v| v.is_nan()).count());
        Ok(GridReport {
            input: self.input.clone(),
            out: self.out.clone(),
            grid: raster.geometry.describe(),
            bands: names.into_iter().zip(raster.info.units).collect(),
            null_share: nulls as f64 / cells as f64,
            notes: raster.notes,
        })
    }
}

/// What the grid job wrote.
#[derive(Clone, Debug)]
pub struct GridReport {
    /// The input read.
    pub input: PathBuf,
    /// The GeoTIFF written.
    pub out: PathBuf,
    /// One-line description of the grid.
    pub grid: String,
    /// (description, unit) of each band.
    pub bands: Vec<(String, String)>,
    /// Share of null cells in the first band.
    pub null_share: f64,
    /// What the reader noticed (the lattice, outliers kept).
    pub notes: Vec<String>,
}

impl fmt::Display for GridReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "{}: {}, {:.1}% null",
            self.input.display(),
            self.grid,
            100.0 * self.null_share
        )?;
        for n in &self.notes {
            writeln!(f, "  note: {n}")?;
        }
        let bands: Vec<String> = self
            .bands
            .iter()
            .map(|(n, u)| {
                if u.is_empty() {
                    n.clone()
                } else {
                    format!("{n} ({u})")
                }
            })
            .collect();
        writeln!(
            f,
            "wrote {} (float64, bands: {})",
            self.out.display(),
            bands.join(", ")
        )
    }
}
