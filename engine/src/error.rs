//! Errors of the engine: one variant per kind of failure, each rendering as a single line that
//! says what is wrong, with which file, and what to do about it.

use std::path::PathBuf;

/// Every failure the engine reports. `Display` gives one line fit for a terminal.
#[derive(Debug, thiserror::Error)]
pub enum FlexureError {
    /// A file could not be opened or read as a raster.
    #[error("cannot read raster {}: {}", shown(.path), visible(.reason))]
    Read { path: PathBuf, reason: String },
    /// An input is well formed but not usable for the requested job.
    #[error("{}: {}", shown(.path), visible(.reason))]
    Input { path: PathBuf, reason: String },
    /// A parameter given by the caller is out of range or inconsistent.
    #[error("{}", visible(.0))]
    Parameter(String),
    /// An output could not be written.
    #[error("cannot write {}: {}", shown(.path), visible(.reason))]
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

/// `text` with control characters other than tabs (line breaks, carriage returns, NUL) shown
/// as escapes (`\n`, `\r`, `\u{0}`), so that a message quoting a user's text stays on one line.
fn visible(text: &str) -> std::borrow::Cow<'_, str> {
    if !text.chars().any(|c| c.is_control() && c != '\t') {
        return text.into();
    }
    text.chars()
        .map(|c| match c {
            '\t' => c.to_string(),
            c if c.is_control() => c.escape_default().to_string(),
            c => c.to_string(),
        })
        .collect::<String>()
        .into()
}

/// A path as [`visible`] text.
fn shown(path: &std::path::Path) -> String {
    visible(&path.display().to_string()).into_owned()
}

/// Result type of the engine.
pub type Result<T> = std::result::Result<T, FlexureError>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_message_quoting_line_breaks_stays_on_one_line() {
        // Our rule: every error is one line; a value given with a line break (or a carriage
        // return, which would overwrite the line on a terminal) is shown escaped.
        let e = FlexureError::Parameter("--columns 'x\ny\r' is bad".into());
        assert_eq!(e.to_string(), "--columns 'x\\ny\\r' is bad");
        let e = FlexureError::input("a\nb.csv", "line 2: 'x\u{0}' \t is not a number");
        assert_eq!(
            e.to_string(),
            "a\\nb.csv: line 2: 'x\\u{0}' \t is not a number"
        );
        assert_eq!(e.to_string().lines().count(), 1);
    }
}
