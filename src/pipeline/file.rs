//! A pipeline file: its text, SHA-256, `kind` and path resolution.

use std::path::{Path, PathBuf};

use super::PipelineError;
use crate::io::IoError;

pub use crate::io::digest::sha256_hex;

/// A pipeline file, read and hashed, not yet interpreted.
#[derive(Clone, Debug)]
pub struct PipelineFile {
    pub path: PathBuf,
    pub text: String,
    pub sha256: String,
    /// The `kind` key (which kind of pipeline; the registry in
    /// [`crate::kinds`] knows the names).
    pub kind: String,
}

impl PipelineFile {
    /// Reads a pipeline file and its `kind`.
    pub fn read(path: &Path) -> Result<Self, PipelineError> {
        let text = std::fs::read_to_string(path).map_err(|source| PipelineError::Read { path: path.into(), source })?;
        Self::from_text(text, path)
    }

    /// A pipeline from its text; `path` names it and anchors relative paths.
    pub fn from_text(text: String, path: &Path) -> Result<Self, PipelineError> {
        let value: toml::Table = toml::from_str(&text).map_err(|e| PipelineError::Invalid { path: path.into(), message: e.to_string() })?;
        let kind = match value.get("kind") {
            Some(toml::Value::String(k)) => k.clone(),
            Some(_) => return Err(PipelineError::Invalid { path: path.into(), message: "'kind' must be a string".into() }),
            None => return Err(PipelineError::Invalid { path: path.into(), message: "no 'kind' (the kind of pipeline, e.g. kind = \"pulsar\")".into() }),
        };
        Ok(Self { path: path.into(), sha256: sha256_hex(text.as_bytes()), text, kind })
    }

    /// Deserialises the pipeline into a kind's configuration, naming unknown keys.
    pub fn parse<T: serde::de::DeserializeOwned>(&self) -> Result<T, PipelineError> {
        toml::from_str(&self.text).map_err(|e| self.invalid(e.to_string()))
    }

    /// An error about this pipeline's content.
    pub fn invalid(&self, message: impl Into<String>) -> PipelineError {
        PipelineError::Invalid { path: self.path.clone(), message: message.into() }
    }

    /// Checks a pipeline number against its documented range `lo ..= hi`
    /// (non-finite values fail too); `key` names it as `[table] key`.
    pub fn check_range(&self, key: &str, value: f64, lo: f64, hi: f64) -> Result<f64, PipelineError> {
        if value.is_finite() && (lo..=hi).contains(&value) { Ok(value) } else { Err(self.invalid(format!("{key} = {value:?} is outside its valid range {lo} … {hi}"))) }
    }

    /// The pipeline's `[input] path`, resolved against its folder (every
    /// kind has one); `None` when the file has none.
    pub fn input_path(&self) -> Option<PathBuf> {
        let table: toml::Table = toml::from_str(&self.text).ok()?;
        let p = table.get("input")?.get("path")?.as_str()?;
        Some(self.resolve(Path::new(p)))
    }

    /// A path from the pipeline, resolved against the pipeline's folder.
    pub fn resolve(&self, p: &Path) -> PathBuf {
        if p.is_absolute() { p.to_path_buf() } else { self.path.parent().unwrap_or(Path::new(".")).join(p) }
    }
}

/// SHA-256 of a file's contents (remembered from its load when unchanged).
pub fn sha256_file(path: &Path) -> Result<String, IoError> {
    crate::io::digest::file_digest(path).map(|(_, d)| d).map_err(|source| IoError::Open { path: path.into(), source })
}
