//! Errors of the engine: one variant per kind of failure, each rendering as a single line that
//! says what is wrong, with which file, and what to do about it.

use std::path::PathBuf;

/// Every failure the engine reports. `Display` gives one line fit for a terminal.
#[derive(Debug, thiserror::Error)]
pub enum FlexureError {
    /// A file could not be opened or read as a raster.
    #[error("cannot read raster {path}: {reason}")]
    Read { path: PathBuf, reason: String },
    /// An input is well formed but not usable for the requested job.
    #[error("{path}: {reason}")]
    Input { path: PathBuf, reason: String },
    /// A parameter given by the caller is out of range or inconsistent.
    #[error("{0}")]
    Parameter(String),
    /// An output could not be written.
    #[error("cannot write {path}: {reason}")]
    Write { path: PathBuf, reason: String },
}

impl FlexureError {
    /// An input error about `path`.
    pub fn input(path: impl Into<PathBuf>, reason: impl Into<String>) -> Self {
        Self::Input {
            path: path.into(),
            reason: reason.into(),
        }
    }

    /// A read error about `path`.
    pub fn read(path: impl Into<PathBuf>, reason: impl ToString) -> Self {
        Self::Read {
            path: path.into(),
            reason: one_line(&reason.to_string()),
        }
    }

    /// A write error about `path`.
    pub fn write(path: impl Into<PathBuf>, reason: impl ToString) -> Self {
        Self::Write {
            path: path.into(),
            reason: one_line(&reason.to_string()),
        }
    }
}

/// Folds a possibly multi-line library message onto one line.
fn one_line(text: &str) -> String {
    text.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// Result type of the engine.
pub type Result<T> = std::result::Result<T, FlexureError>;
