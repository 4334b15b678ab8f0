//! Errors of a pipeline run (kind-neutral).

use std::path::PathBuf;

use crate::io::IoError;
use crate::time::TimeError;

/// Errors of a pipeline run; each names the file it concerns.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    #[error("cannot read pipeline {path}: {source}")]
    Read { path: PathBuf, source: std::io::Error },
    #[error("cannot use folder {path}: {source}")]
    Folder { path: PathBuf, source: std::io::Error },
    #[error("pipeline {path}: {message}")]
    Invalid { path: PathBuf, message: String },
    #[error("pipeline {path}: unknown kind '{kind}' (known: {known})")]
    UnknownKind { path: PathBuf, kind: String, known: String },
    #[error("{path}: {message}")]
    Input { path: PathBuf, message: String },
    #[error(transparent)]
    Io(#[from] IoError),
    #[error("{context}: {source}")]
    Time { context: String, source: TimeError },
    #[error("{path}: duplicate obs_id '{obs_id}' at rows {first} and {second}")]
    DuplicateId { path: PathBuf, obs_id: String, first: usize, second: usize },
    #[error("{path}: {source}")]
    Plot { path: PathBuf, source: crate::plots::PlotError },
    #[error("{path}: {message}")]
    Frame { path: PathBuf, message: String },
}

impl PipelineError {
    /// A table operation's error on the frame of `path`.
    pub fn frame(path: &std::path::Path, e: impl std::fmt::Display) -> Self {
        PipelineError::Frame { path: path.into(), message: e.to_string() }
    }
}
