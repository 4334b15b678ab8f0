//! The one interface every kind of pipeline implements. The kernel
//! (partitions, preflight, streaming, summaries, provenance, writes) drives
//! a kind only through it; the registry in [`crate::kinds`] maps the
//! pipeline's `kind` key to a loader.

use std::path::{Path, PathBuf};

use polars::prelude::DataFrame;

use super::preflight::{Facts, Preflight};
use super::tally::Tally;
use super::{PipelineError, PipelineFile, Provenance};
use crate::parallel::Exec;

/// The result of one batch: the tables `lapse run` writes and what the
/// summary needs.
#[derive(Debug)]
pub struct Processed {
    /// Accepted rows: `obs_id`, the computed columns, then the input's others.
    pub output: DataFrame,
    /// Rejected rows: the input columns plus `reason_code` and `reason`.
    pub rejects: DataFrame,
    pub tally: Tally,
}

/// Options of a synthetic-data run.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SynthOptions {
    /// Gaussian noise of a fixed σ (s), if any.
    pub noise_s: Option<f64>,
    /// Gaussian noise of each row's own σ.
    pub noise_from_sigma: bool,
    /// Seed of the noise generator.
    pub seed: u64,
}

/// A pipeline's resolved `[input] path` and `[output] path`.
#[derive(Clone, Debug, PartialEq)]
pub struct IoPaths {
    pub input: PathBuf,
    pub output: PathBuf,
}

impl IoPaths {
    /// Both paths from a pipeline's `[input]` and `[output]` tables.
    pub fn resolve(file: &PipelineFile, input: &Path, output: &Path) -> Self {
        Self { input: file.resolve(input), output: file.resolve(output) }
    }
}

/// A kind of pipeline, loaded: its configuration and shared inputs.
///
/// Row-level problems are never errors: `process` turns them into rejects
/// with a reason code. Errors are for a batch that cannot be read at all
/// (missing column, wrong type).
pub trait Kind: Send + std::fmt::Debug {
    /// The `kind` key.
    fn name(&self) -> &'static str;

    /// Where the kind reads and writes.
    fn paths(&self) -> &IoPaths;

    /// Where the kind reads and writes, to change.
    fn paths_mut(&mut self) -> &mut IoPaths;

    /// The resolved `[input] path`.
    fn input_path(&self) -> &Path {
        &self.paths().input
    }

    /// The resolved `[output] path`.
    fn output_path(&self) -> &Path {
        &self.paths().output
    }

    /// Runs on `input` and/or writes to `output` instead (command-line overrides).
    fn override_paths(&mut self, input: Option<PathBuf>, output: Option<PathBuf>) {
        let p = self.paths_mut();
        if let Some(i) = input {
            p.input = i;
        }
        if let Some(o) = output {
            p.output = o;
        }
    }

    /// Provenance shared by every partition: [`Provenance::start`], the
    /// shared input files, constants and model parameters.
    fn provenance(&self, file: &PipelineFile) -> Result<Provenance, PipelineError>;

    /// The computed columns `process` adds to the output (the kernel refuses
    /// input columns with these names, or `reason_code` / `reason`, before
    /// computing: they would be overwritten or clash).
    fn output_columns(&self) -> Vec<String>;

    /// One line for the preflight report on what was loaded.
    fn loaded(&self) -> String;

    /// Reads a slice's typed columns (errors name file and column) and adds
    /// its facts (days, codes) for the preflight checks. The kernel checks
    /// `obs_id` itself.
    fn scan(&self, df: &DataFrame, path: &Path, facts: &mut Facts) -> Result<(), PipelineError>;

    /// Checks a partition's facts against the loaded inputs.
    fn check(&self, report: &mut Preflight, facts: &Facts);

    /// Prepares for a partition's slices (e.g. grids over its whole span)
    /// before they are processed one by one.
    fn prepare(&mut self, _facts: &Facts) {}

    /// Whether large partitions may be processed in slices (the kind's
    /// summary then merges their tallies; any mean removal is applied by the
    /// kernel over the whole partition).
    fn streams(&self) -> bool {
        false
    }

    /// Computes one batch (ids already checked or checked alongside).
    fn process(&mut self, df: &DataFrame, source: &Path, exec: &Exec) -> Result<Processed, PipelineError>;

    /// Synthetic observations exact under the pipeline's model, from a plan
    /// (`plan`'s format is the kind's).
    fn synthesise(&mut self, plan: &Path, opts: &SynthOptions) -> Result<DataFrame, PipelineError>;
}
