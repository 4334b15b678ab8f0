//! One library call from a batch of rows to a batch of results, for engines
//! that run lapse inside their own workers (the Python binding, Dask, Spark,
//! Ray).
//!
//! A [`BatchEngine`] loads a pipeline's shared inputs (kernels, Earth
//! orientation, stations, clocks, leap seconds) once; [`BatchEngine::process`]
//! then maps any number of input tables to output and rejects tables. The
//! tables are exactly what `lapse run` writes for an input file holding the
//! same rows: both call the kind's `process` through the same kernel.
//!
//! A batch is a partition: where a pipeline removes the weighted mean of the
//! residuals (`[residuals] subtract_weighted_mean`), it is removed over the
//! batch, as `lapse run` removes it over each partition file. Map one batch
//! per input file to reproduce a partitioned CLI run bit for bit.
//!
//! ```no_run
//! use std::path::Path;
//! let mut engine = lapse::commands::engine::BatchEngine::load(Path::new("pipelines/pulsar_demo.toml"))?;
//! let df = lapse::io::read_parquet(Path::new("data/demo/pulsar_toas.parquet"))?;
//! let out = engine.process(&df, Path::new("pulsar_toas.parquet"))?;
//! println!("{} rows, {} rejected", out.output.height(), out.rejects.height());
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

use std::path::Path;

use polars::prelude::DataFrame;

use crate::parallel::Exec;
use crate::pipeline::stream::{process_checked, subtract};
use crate::pipeline::{Kind, PipelineError, PipelineFile, Processed};

/// A pipeline with its shared inputs loaded, ready for batches.
#[derive(Debug)]
pub struct BatchEngine {
    file: PipelineFile,
    kind: Box<dyn Kind>,
}

/// The result tables of one batch.
#[derive(Debug, Clone)]
pub struct BatchOutput {
    /// The output table (accepted rows, input order), as `lapse run` writes it.
    pub output: DataFrame,
    /// The rejects table (input columns plus `reason_code` and `reason`).
    pub rejects: DataFrame,
}

impl BatchEngine {
    /// Reads a pipeline file and loads its shared inputs once.
    pub fn load(path: &Path) -> Result<Self, PipelineError> {
        Self::from_file(PipelineFile::read(path)?)
    }

    /// Loads the shared inputs of an already-read pipeline.
    pub fn from_file(file: PipelineFile) -> Result<Self, PipelineError> {
        let kind = crate::kinds::load(&file)?;
        Ok(Self { file, kind })
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
        let Processed { mut output, rejects, mut tally } = process_checked(self.kind.as_mut(), df, source, &Exec::default())?;
        for (col, offset) in tally.remove_means() {
            subtract(&mut output, col, offset, source)?;
        }
        Ok(BatchOutput { output, rejects })
    }
}
