//! `lapse run`: load the pipeline's kind, run every partition (each read
//! once, checked, computed, written), and render the summary.

use std::path::Path;

use crate::pipeline::{Level, PipelineError, PipelineFile, Preflight, RunOptions, RunSummary};

/// Why a run stopped.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    #[error(transparent)]
    Pipeline(#[from] PipelineError),
    /// A partition's preflight found it unusable (nothing of it was written).
    #[error("preflight: {0}")]
    Unusable(String),
    /// A command-line option out of its range.
    #[error("{0}")]
    Option(String),
}

/// Runs a pipeline file. Each partition's preflight findings above `ok` go
/// to `warn` (problems: their rows will be rejected with reasons); an
/// unusable partition stops the run before anything of it is written.
pub fn run(pipeline: &Path, opts: &RunOptions, warn: &mut dyn FnMut(&Preflight)) -> Result<RunSummary, RunError> {
    let file = PipelineFile::read(pipeline)?;
    let mut kind = crate::kinds::load(&file)?;
    let mut unusable = None;
    let mut on_report = |_: &Path, report: &Preflight| -> Result<(), PipelineError> {
        if let Some(f) = report.findings.iter().find(|f| f.level == Level::Unusable) {
            unusable = Some(f.text.clone());
            return Err(PipelineError::Input { path: pipeline.into(), message: f.text.clone() });
        }
        if report.worst() >= Level::Note {
            warn(report);
        }
        Ok(())
    };
    match crate::pipeline::run_kind(&file, kind.as_mut(), opts, &mut on_report) {
        Ok(s) => Ok(s),
        Err(e) => Err(match unusable {
            Some(text) => RunError::Unusable(text),
            None => RunError::Pipeline(e),
        }),
    }
}

/// Default of `--max-rejected-fraction`: a run that rejects more than this
/// fraction of its rows exits with code 3.
pub const DEFAULT_MAX_REJECTED_FRACTION: f64 = 0.1;

/// A message when the run rejected more than `max_fraction` of its rows
/// (every row counts when all were rejected, whatever the limit below 1).
pub fn rejected_beyond(s: &RunSummary, max_fraction: f64) -> Result<Option<String>, RunError> {
    if !(0.0..=1.0).contains(&max_fraction) {
        return Err(RunError::Option(format!("--max-rejected-fraction {max_fraction} must lie in 0 … 1")));
    }
    let all_rejected = s.rows_in > 0 && s.rows_rejected == s.rows_in;
    let fraction = if s.rows_in == 0 { 0.0 } else { s.rows_rejected as f64 / s.rows_in as f64 };
    Ok((fraction > max_fraction || (all_rejected && max_fraction < 1.0)).then(|| {
        format!("{} of {} rows rejected ({:.1} %), more than --max-rejected-fraction {max_fraction}: exit code 3 (see {})", s.rows_rejected, s.rows_in, 100.0 * fraction, s.rejects.display())
    }))
}

/// The summary a run prints.
pub fn render_summary(pipeline: &Path, s: &RunSummary) -> String {
    let mut out = String::new();
    let mut line = |l: String| {
        out.push_str(&l);
        out.push('\n');
    };
    line(format!("pipeline   {}", pipeline.display()));
    let partitioned = s.partitions_done + s.partitions_skipped > 1 || s.partitions_skipped > 0;
    if partitioned {
        // Per partition: <folder>/<input stem>.parquet and .rejects.parquet.
        line(format!("rows in    {} (in the {} partitions processed)", s.rows_in, s.partitions_done));
        line(format!("rows out   {}  → {}/<partition>.parquet", s.rows_out, s.output.display()));
        line(format!("rejected   {}  → {}/<partition>.rejects.parquet", s.rows_rejected, s.output.display()));
        line(format!("partitions {} processed, {} up to date (skipped)", s.partitions_done, s.partitions_skipped));
    } else {
        line(format!("rows in    {}", s.rows_in));
        line(format!("rows out   {}  → {}", s.rows_out, s.output.display()));
        line(format!("rejected   {}  → {}", s.rows_rejected, s.rejects.display()));
    }
    if !s.plots.is_empty() {
        line(format!("plots      {}", s.plots.iter().filter(|p| p.extension().is_some_and(|e| e == "png")).map(|p| p.display().to_string()).collect::<Vec<_>>().join(", ")));
    }
    for (code, n) in &s.rejects_by_reason {
        line(format!("  {n:>8}  {code}"));
    }
    for note in &s.notes {
        line(note.clone());
    }
    out
}
