//! One library call from a batch of rows to a batch of results, for engines
//! that run lapse inside their own workers (the Python binding, Dask, Spark,
//! Ray).
//!
//! A [`BatchEngine`] loads a pipeline's shared inputs (kernels, Earth
//! orientation, stations, clocks, leap seconds) once; [`BatchEngine::process`]
//! then maps any number of input tables to output and rejects tables. The
//! tables are exactly what `lapse run` writes for an input file holding the
//! same rows: the CLI's in-memory partition path calls the same functions.
//!
//! A batch is a partition: where a pipeline removes the weighted mean of the
//! residuals (`[residuals] subtract_weighted_mean`), it is removed over the
//! batch, as `lapse run` removes it over each partition file. Map one batch
//! per input file to reproduce a partitioned CLI run bit for bit.
//!
//! ```no_run
//! use std::path::Path;
//! let mut engine = lapse::pipeline::batch::BatchEngine::load(Path::new("pipelines/pulsar_demo.toml"))?;
//! let df = lapse::io::read_parquet(Path::new("data/demo/pulsar_toas.parquet"))?;
//! let out = engine.process(&df, Path::new("pulsar_toas.parquet"))?;
//! println!("{} rows, {} rejected", out.output.height(), out.rejects.height());
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

use std::path::Path;

use polars::prelude::DataFrame;

use super::pulsar::{LoadedPulsar, load_pulsar, pulsar_batch};
use super::tracking::{LoadedTracking, load_tracking, tracking_batch};
use super::{KINDS, LoadedTimescales, PipelineError, PipelineFile, load_timescales, timescales_batch};

/// A pipeline with its shared inputs loaded, ready for batches.
#[derive(Debug)]
pub struct BatchEngine {
    file: PipelineFile,
    loaded: Loaded,
}

#[derive(Debug)]
enum Loaded {
    Timescales(Box<LoadedTimescales>),
    Pulsar(Box<LoadedPulsar>),
    Tracking(Box<LoadedTracking>),
}

/// The result tables of one batch.
#[derive(Debug, Clone)]
pub struct BatchOutput {
    /// The output table (accepted rows, input order), as `lapse run` writes it.
    pub output: DataFrame,
    /// The rejects table (input columns plus `reason`).
    pub rejects: DataFrame,
}

impl BatchEngine {
    /// Reads a pipeline file and loads its shared inputs once.
    pub fn load(path: &Path) -> Result<Self, PipelineError> {
        Self::from_file(PipelineFile::read(path)?)
    }

    /// Loads the shared inputs of an already-read pipeline.
    pub fn from_file(file: PipelineFile) -> Result<Self, PipelineError> {
        let loaded = match file.kind.as_str() {
            "timescales" => Loaded::Timescales(Box::new(load_timescales(&file)?)),
            "pulsar" => Loaded::Pulsar(Box::new(load_pulsar(&file)?)),
            "tracking" => Loaded::Tracking(Box::new(load_tracking(&file)?)),
            other => return Err(PipelineError::UnknownKind { path: file.path.clone(), kind: other.into(), known: KINDS.join(", ") }),
        };
        Ok(Self { file, loaded })
    }

    /// The pipeline this engine runs.
    pub fn pipeline(&self) -> &PipelineFile {
        &self.file
    }

    /// Maps one input table to its output and rejects tables. `source` names
    /// the batch in error messages (a file path, or any label). Errors are
    /// the ones `lapse run` gives for an input file with the same content
    /// (missing column, wrong type, duplicate `obs_id`); bad rows are
    /// rejected with a reason, never an error.
    pub fn process(&mut self, df: &DataFrame, source: &Path) -> Result<BatchOutput, PipelineError> {
        let (output, rejects) = match &mut self.loaded {
            Loaded::Timescales(l) => timescales_batch(l, df, source)?,
            Loaded::Pulsar(l) => pulsar_batch(l, df, source)?,
            Loaded::Tracking(l) => tracking_batch(l, df, source)?,
        };
        Ok(BatchOutput { output, rejects })
    }
}
