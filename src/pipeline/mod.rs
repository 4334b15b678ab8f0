//! Pipelines: TOML files under `pipelines/` that name the inputs, the
//! corrections and the output of one batch. `kind` selects the job.
//!
//! Paths in a pipeline are relative to the pipeline file's folder. Unknown
//! keys are an error that names them.

mod timescales;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};

use crate::io::IoError;
use crate::time::TimeError;

pub use timescales::{TimescalesPipeline, run_timescales};

/// Errors of a pipeline run.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    #[error("cannot read pipeline {path}: {source}")]
    Read { path: PathBuf, source: std::io::Error },
    #[error("pipeline {path}: {message}")]
    Invalid { path: PathBuf, message: String },
    #[error("pipeline {path}: unknown kind '{kind}' (known: {known})")]
    UnknownKind { path: PathBuf, kind: String, known: String },
    #[error(transparent)]
    Io(#[from] IoError),
    #[error("{context}: {source}")]
    Time { context: String, source: TimeError },
    #[error("{path}: duplicate obs_id '{obs_id}' at rows {first} and {second}")]
    DuplicateId { path: PathBuf, obs_id: String, first: usize, second: usize },
}

/// The kinds of pipeline lapse runs.
pub const KINDS: &[&str] = &["timescales"];

/// A pipeline file, read and hashed, not yet interpreted.
#[derive(Clone, Debug)]
pub struct PipelineFile {
    pub path: PathBuf,
    pub text: String,
    pub sha256: String,
    pub kind: String,
}

impl PipelineFile {
    /// Reads a pipeline file and its `kind`.
    pub fn read(path: &Path) -> Result<Self, PipelineError> {
        let text = std::fs::read_to_string(path).map_err(|source| PipelineError::Read { path: path.into(), source })?;
        let value: toml::Table = toml::from_str(&text)
            .map_err(|e| PipelineError::Invalid { path: path.into(), message: e.to_string() })?;
        let kind = match value.get("kind") {
            Some(toml::Value::String(k)) => k.clone(),
            Some(_) => return Err(PipelineError::Invalid { path: path.into(), message: "'kind' must be a string".into() }),
            None => return Err(PipelineError::Invalid { path: path.into(), message: format!("no 'kind' (one of: {})", KINDS.join(", ")) }),
        };
        if !KINDS.contains(&kind.as_str()) {
            return Err(PipelineError::UnknownKind { path: path.into(), kind, known: KINDS.join(", ") });
        }
        Ok(Self { path: path.into(), sha256: sha256_hex(text.as_bytes()), text, kind })
    }

    /// Deserialises the pipeline into a kind's configuration, naming unknown keys.
    pub fn parse<T: serde::de::DeserializeOwned>(&self) -> Result<T, PipelineError> {
        toml::from_str(&self.text).map_err(|e| PipelineError::Invalid { path: self.path.clone(), message: e.to_string() })
    }

    /// A path from the pipeline, resolved against the pipeline's folder.
    pub fn resolve(&self, p: &Path) -> PathBuf {
        if p.is_absolute() {
            p.to_path_buf()
        } else {
            self.path.parent().unwrap_or(Path::new(".")).join(p)
        }
    }
}

/// Lower-case hexadecimal SHA-256 of some bytes.
pub fn sha256_hex(bytes: &[u8]) -> String {
    let d = Sha256::digest(bytes);
    d.iter().map(|b| format!("{b:02x}")).collect()
}

/// SHA-256 of a file's contents.
pub fn sha256_file(path: &Path) -> Result<String, IoError> {
    let bytes = std::fs::read(path).map_err(|source| IoError::Open { path: path.into(), source })?;
    Ok(sha256_hex(&bytes))
}

/// What a run did, for the summary on stdout and in the output metadata.
#[derive(Clone, Debug, Default)]
pub struct RunSummary {
    pub rows_in: usize,
    pub rows_out: usize,
    pub rows_rejected: usize,
    pub rejects_by_reason: BTreeMap<String, usize>,
    pub output: PathBuf,
    pub rejects: PathBuf,
    /// Extra lines of summary, in order.
    pub notes: Vec<String>,
}

/// Runs a pipeline file of any kind; `output` overrides its `[output] path`.
pub fn run(path: &Path, output: Option<&Path>) -> Result<RunSummary, PipelineError> {
    let file = PipelineFile::read(path)?;
    match file.kind.as_str() {
        "timescales" => run_timescales(&file, output),
        other => Err(PipelineError::UnknownKind { path: path.into(), kind: other.into(), known: KINDS.join(", ") }),
    }
}

/// Path of the rejects table beside an output file: `x.parquet` → `x.rejects.parquet`.
pub fn rejects_path(output: &Path) -> PathBuf {
    let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "output".into());
    output.with_file_name(format!("{stem}.rejects.parquet"))
}
