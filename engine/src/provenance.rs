//! Provenance of outputs: which program version and command made a file, from which inputs
//! (each with its SHA-256, FIPS 180-4), with which units and parameters. Jobs write these
//! items into every raster's metadata (where `gdalinfo` shows them) and into their JSON
//! outputs, so a map handed on can be traced back to its data.

use crate::error::{FlexureError, Result};
use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::Path;
use std::sync::OnceLock;

static COMMAND_LINE: OnceLock<String> = OnceLock::new();

/// Records the command line of this process (called once by the command-line program); later
/// calls are ignored.
pub fn set_command_line(line: String) {
    let _ = COMMAND_LINE.set(line);
}

/// The recorded command line, or a note that the engine was called as a library.
pub fn command_line() -> String {
    COMMAND_LINE
        .get()
        .cloned()
        .unwrap_or_else(|| "library call (no command line)".into())
}

/// Lower-case hexadecimal SHA-256 of the file at `path`.
pub fn sha256_file(path: &Path) -> Result<String> {
    let mut file = std::fs::File::open(path).map_err(|e| FlexureError::read(path, e))?;
    let mut hasher = Sha256::new();
    let mut buffer = vec![0u8; 1 << 20];
    loop {
        let n = file
            .read(&mut buffer)
            .map_err(|e| FlexureError::read(path, e))?;
        if n == 0 {
            break;
        }
        hasher.update(&buffer[..n]);
    }
    Ok(hasher
        .finalize()
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect())
}

/// Provenance items of one output: `FLEXURE_VERSION`, `FLEXURE_COMMAND`, `FLEXURE_INPUT_<k>`
/// (absolute path and SHA-256) and any parameters added with [`Provenance::with`].
#[derive(Clone, Debug, PartialEq)]
pub struct Provenance {
    items: Vec<(String, String)>,
}

impl Provenance {
    /// Provenance of an output made from `inputs` (hashed now).
    pub fn of_inputs(inputs: &[&Path]) -> Result<Self> {
        let mut items = vec![
            (
                "FLEXURE_VERSION".to_string(),
                format!("flexure {}", env!("CARGO_PKG_VERSION")),
            ),
            ("FLEXURE_COMMAND".to_string(), command_line()),
        ];
        for (k, path) in inputs.iter().enumerate() {
            let absolute = path
                .canonicalize()
                .unwrap_or_else(|_| path.to_path_buf())
                .display()
                .to_string();
            items.push((
                format!("FLEXURE_INPUT_{}", k + 1),
                format!("{absolute} sha256:{}", sha256_file(path)?),
            ));
        }
        Ok(Self { items })
    }

    /// Adds the parameter `FLEXURE_<KEY>` (upper-cased) with `value`.
    pub fn with(mut self, key: &str, value: impl Into<String>) -> Self {
        self.items
            .push((format!("FLEXURE_{}", key.to_uppercase()), value.into()));
        self
    }

    /// The `(key, value)` items, in order.
    pub fn items(&self) -> &[(String, String)] {
        &self.items
    }

    /// The items as a JSON object.
    pub fn to_json(&self) -> serde_json::Value {
        serde_json::Value::Object(
            self.items
                .iter()
                .map(|(k, v)| (k.to_lowercase(), serde_json::Value::String(v.clone())))
                .collect(),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_matches_the_fips_example() {
        // FIPS 180-4 / NIST example: SHA-256("abc") =
        // ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("abc.txt");
        std::fs::write(&path, b"abc").unwrap();
        assert_eq!(
            sha256_file(&path).unwrap(),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        let p = Provenance::of_inputs(&[&path])
            .unwrap()
            .with("window_cells", "9");
        let input = &p.items()[2];
        assert_eq!(input.0, "FLEXURE_INPUT_1");
        assert!(input
            .1
            .ends_with("sha256:ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"));
        assert_eq!(p.items()[3], ("FLEXURE_WINDOW_CELLS".into(), "9".into()));
    }
}
