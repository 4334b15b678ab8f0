//! The pipeline kernel: everything a run needs that knows no kind of
//! pipeline. A pipeline file (TOML, `kind` at the top) names the inputs,
//! the corrections and the output of a batch; the kinds themselves live in
//! [`crate::kinds`], each behind the [`Kind`] interface.
//!
//! | module | job |
//! |---|---|
//! | [`file`] | the pipeline file: text, hash, `kind`, path resolution |
//! | [`shared`] | shared inputs of kinds with geometry (kernels, EOP, stations) |
//! | [`provenance`] | key-value provenance of every output |
//! | [`partition`] | input files, partition outputs, up-to-date check |
//! | [`table`] | Parquet slices, id checks, output and rejects assembly |
//! | [`preflight`] | findings, facts of an input, shared checks |
//! | [`tally`] | residual sets, reject counts, summary lines, plots |
//! | [`stream`] | one partition end to end, in memory or in slices |
//! | [`commit`] | safe writes: staged files, lock, sync, renames, output last |
//! | [`kind`] | the interface every kind implements |
//!
//! Paths in a pipeline are relative to the pipeline file's folder. Unknown
//! keys are an error that names them.

pub mod commit;
mod error;
pub mod file;
pub mod kind;
pub mod partition;
pub mod preflight;
pub mod provenance;
pub mod shared;
pub mod stream;
pub mod table;
pub mod tally;

use std::path::{Path, PathBuf};

pub use error::PipelineError;
pub use file::{PipelineFile, sha256_file, sha256_hex};
pub use kind::{IoPaths, Kind, Processed, SynthOptions};
pub use partition::{for_each_partition, input_rows, partial_paths, rejects_path, resolve_inputs};
pub use preflight::{Level, Preflight};
pub use provenance::{Provenance, SOURCE_REVISION};
pub use stream::OnReport;
pub use tally::RunSummary;

pub use crate::parallel::DEFAULT_CHUNK_ROWS;

/// Options of a run that do not change its results.
#[derive(Clone, Debug)]
pub struct RunOptions {
    /// Read this input (file, folder or glob) instead of the pipeline's
    /// `[input] path` (one partition per job on a cluster).
    pub input: Option<PathBuf>,
    /// Write here instead of the pipeline's `[output] path`.
    pub output: Option<PathBuf>,
    /// Chunk size and progress counter of the computation.
    pub exec: crate::parallel::Exec,
    /// Residual plots beside the outputs, in these formats (none: no plots).
    pub plots: Vec<crate::plots::PlotFormat>,
    /// Redo partitions whose outputs are up to date.
    pub force: bool,
    /// Where the current phase is published (progress displays).
    pub phase: Option<std::sync::Arc<std::sync::atomic::AtomicU8>>,
}

impl Default for RunOptions {
    fn default() -> Self {
        Self { input: None, output: None, exec: crate::parallel::Exec::default(), plots: vec![crate::plots::PlotFormat::Png], force: false, phase: None }
    }
}

/// Runs a loaded kind over every partition of its input: each partition is
/// read once, checked (its report goes to `on_report`, which may stop the
/// run), computed and written; partitions whose outputs are up to date are
/// skipped.
pub fn run_kind(file: &PipelineFile, kind: &mut dyn Kind, opts: &RunOptions, on_report: &mut OnReport) -> Result<RunSummary, PipelineError> {
    if opts.exec.chunk_rows == 0 {
        return Err(file.invalid("chunk size must be at least 1 row"));
    }
    kind.override_paths(opts.input.clone(), opts.output.clone());
    let base = kind.provenance(file)?;
    let (input, output): (PathBuf, PathBuf) = (kind.input_path().into(), kind.output_path().into());
    let popts = stream::PartitionOptions { exec: opts.exec.clone(), plots: opts.plots.clone(), phase: opts.phase.clone() };
    for_each_partition(&input, &output, &base, opts.force, |inp: &Path, out: &Path, prov| stream::run_partition(kind, inp, out, prov, &popts, on_report))
}
