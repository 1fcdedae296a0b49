//! The record of a whole run (`flexure run`): what was asked (each step's options as resolved,
//! defaults filled), what was read and written (paths, sizes, SHA-256 per FIPS 180-4), what the
//! readers noticed, and how long each step took. Written as `manifest.json` beside the outputs
//! and rendered as `report.html` ([`super::run_report`]).

use crate::error::{FlexureError, Result};
use crate::provenance::sha256_file;
use serde::Serialize;
use std::collections::BTreeMap;
use std::path::Path;

/// File name of the run manifest in the output folder.
pub const MANIFEST_FILE: &str = "manifest.json";

/// One file read or written by a run.
#[derive(Clone, Debug, Serialize)]
pub struct FileRecord {
    /// Path: relative to the output folder for outputs, absolute for inputs.
    pub path: String,
    /// What the file is, from its extension (e.g. "GeoTIFF raster").
    pub kind: String,
    /// Size in bytes.
    pub bytes: u64,
    /// Lower-case hexadecimal SHA-256 of the contents.
    pub sha256: String,
    /// The step that wrote it (outputs only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub step: Option<String>,
}

impl FileRecord {
    /// The record of the file at `path`, shown as `shown`.
    pub fn of(path: &Path, shown: String, step: Option<String>) -> Result<Self> {
        let bytes = std::fs::metadata(path)
            .map_err(|e| FlexureError::read(path, e))?
            .len();
        Ok(Self {
            path: shown,
            kind: file_kind(path).to_string(),
            bytes,
            sha256: sha256_file(path)?,
            step,
        })
    }
}

/// What a file is, from its extension.
pub fn file_kind(path: &Path) -> &'static str {
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    match ext.as_str() {
        "tif" | "tiff" => "GeoTIFF raster",
        "gpkg" => "GeoPackage vectors",
        "geojson" => "GeoJSON vectors (RFC 7946)",
        "csv" => "CSV table",
        "json" => "JSON",
        "png" => "PNG picture",
        "svg" => "SVG picture",
        "html" => "HTML report",
        "sgy" | "segy" => "SEG-Y volume",
        "toml" => "job file (TOML)",
        _ => "file",
    }
}

/// One step of a run.
#[derive(Clone, Debug, Serialize)]
pub struct StepRecord {
    /// Step kind (job-file spelling, e.g. `window_study`).
    pub step: String,
    /// Line of the step in the job file.
    pub line: usize,
    /// Every option of the step as resolved (paths absolute, defaults filled, null where the
    /// command chooses automatically).
    pub options: BTreeMap<String, serde_json::Value>,
    /// Wall time of the step, seconds.
    pub seconds: f64,
    /// The step's summary as the command prints it.
    pub summary: String,
    /// What the step's readers noticed or assumed (units, nulls, conventions).
    pub notes: Vec<String>,
    /// Files the step wrote, relative to the output folder, in commit order.
    pub outputs: Vec<String>,
}

impl StepRecord {
    /// `kind (line N)`.
    pub fn label(&self) -> String {
        format!("{} (line {})", self.step, self.line)
    }
}

/// The record of a run: `manifest.json`.
#[derive(Clone, Debug, Serialize)]
pub struct RunRecord {
    /// `flexure X.Y.Z`.
    pub flexure_version: String,
    /// The command line of the run.
    pub command: String,
    /// Title of the run.
    pub title: String,
    /// The job file.
    pub job_file: FileRecord,
    /// The output folder (absolute).
    pub output_folder: String,
    /// The steps in running order.
    pub steps: Vec<StepRecord>,
    /// Input files named by the steps (outputs of earlier steps are listed as outputs only).
    pub inputs: Vec<FileRecord>,
    /// Every file the run wrote except this manifest, `report.html` included.
    pub outputs: Vec<FileRecord>,
    /// Every step note, as `step (line N): note`.
    pub warnings: Vec<String>,
    /// Cautions shown with the results.
    pub cautions: Vec<String>,
    /// Wall time of the whole run, seconds.
    pub total_seconds: f64,
}

impl RunRecord {
    /// Pretty-printed JSON.
    pub fn to_json(&self) -> Result<String> {
        serde_json::to_string_pretty(self)
            .map_err(|e| FlexureError::Parameter(format!("manifest: {e}")))
    }
}

/// Writes `report.html` and then `manifest.json` (listing the report with its checksum) into
/// `output`, each committed as it is written; inside a [`crate::io::RunTransaction`] both stay
/// provisional with the rest of the run.
pub fn write_run_files(record: &mut RunRecord, output: &Path) -> Result<()> {
    let report = output.join(super::run_report::REPORT_FILE);
    super::stage_bytes(
        &report,
        super::run_report::report_html(record, output).as_bytes(),
    )?
    .commit()?;
    record.outputs.push(FileRecord::of(
        &report,
        super::run_report::REPORT_FILE.to_string(),
        None,
    )?);
    let manifest = output.join(MANIFEST_FILE);
    super::stage_bytes(&manifest, record.to_json()?.as_bytes())?.commit()
}
