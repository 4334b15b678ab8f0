//! One partition, end to end, for any kind: read once, preflight checks on
//! what was read, compute (in memory, or in slices above a size), remove a
//! weighted mean if the pipeline asks, write the output and rejects tables
//! through temporary files and renames, summarise and plot.

use std::path::Path;

use polars::prelude::*;

use super::commit::Commit;
use super::kind::{Kind, Processed};
use super::partition::rejects_path;
use super::preflight::{Facts, Level, Preflight, check_partition, scan_file};
use super::table::{check_input_names, check_unique_ids, ids, parquet_rows, read_parquet_slice};
use super::tally::{Tally, plot, summarise};
use super::{PipelineError, Provenance, RunSummary};
use crate::io::{IoError, read_parquet, write_parquet_file};
use crate::parallel::Exec;

/// Rows above which a partition of a kind that streams is processed in
/// slices (bounded memory); `LAPSE_STREAM_ROWS` overrides it (tests use a
/// small value).
pub const STREAM_ABOVE_ROWS: usize = 2_000_000;
/// Rows per slice when streaming; `LAPSE_STREAM_SLICE` overrides it.
pub const STREAM_SLICE_ROWS: usize = 500_000;

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).filter(|v: &usize| *v > 0).unwrap_or(default)
}

/// What a run is doing, for progress displays.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[repr(u8)]
pub enum Phase {
    Reading = 0,
    Computing = 1,
    Plotting = 2,
    Writing = 3,
}

impl Phase {
    /// Every phase, by its number.
    pub const ALL: [Phase; 4] = [Phase::Reading, Phase::Computing, Phase::Plotting, Phase::Writing];

    /// A label for displays.
    pub fn label(self) -> &'static str {
        match self {
            Phase::Reading => "reading",
            Phase::Computing => "computing",
            Phase::Plotting => "plotting",
            Phase::Writing => "writing",
        }
    }
}

/// How partitions are run.
#[derive(Clone, Debug)]
pub struct PartitionOptions {
    pub exec: Exec,
    /// Residual plots beside the outputs, in these formats (none: no plots).
    pub plots: Vec<crate::plots::PlotFormat>,
    /// Where the current [`Phase`] is published (for progress displays).
    pub phase: Option<std::sync::Arc<std::sync::atomic::AtomicU8>>,
}

impl PartitionOptions {
    fn enter(&self, p: Phase) {
        if let Some(a) = &self.phase {
            a.store(p as u8, std::sync::atomic::Ordering::Relaxed);
        }
    }
}

/// Called with each partition's preflight report before it is computed;
/// an `Err` stops the run before anything of the partition is written.
pub type OnReport<'a> = dyn FnMut(&Path, &Preflight) -> Result<(), PipelineError> + 'a;

/// Computes a batch with its ids checked beside the computation (a
/// duplicate fails the batch all the same, only after the work).
pub fn process_checked(kind: &mut dyn Kind, df: &DataFrame, source: &Path, exec: &Exec) -> Result<Processed, PipelineError> {
    let ids = ids(df, source)?;
    check_input_names(df, &kind.output_columns(), source)?;
    let (unique, processed) = rayon::join(|| check_unique_ids(&ids, source), || kind.process(df, source, exec));
    unique?;
    processed
}

/// Subtracts `offset` from a float column of a frame (a weighted mean
/// removed over a partition or batch).
pub fn subtract(df: &mut DataFrame, column: &str, offset: f64, path: &Path) -> Result<(), PipelineError> {
    let v: Vec<f64> = crate::io::Columns { df, path }.f64(column)?.iter().map(|x| x.unwrap_or(f64::NAN) - offset).collect();
    df.with_column(Column::new(column.into(), v)).map_err(|e| PipelineError::frame(path, e))?;
    Ok(())
}

/// Records the summary and provenance of a complete partition.
fn finish(tally: &mut Tally, summary: &mut RunSummary, prov: &mut Provenance, offsets: &[(&'static str, f64)]) {
    if let Some((label, lo, hi)) = &tally.coverage {
        prov.set("input.observations.0.coverage", &format!("{label} MJD {lo} … {hi}"));
    }
    summarise(tally, summary, prov, offsets);
}

/// Runs one partition: `input` → `output` and its rejects table. The
/// partition is read once: its preflight report (handed to `on_report`
/// before anything is computed) and the computation share the read.
/// Everything is written through one [`Commit`].
pub fn run_partition(kind: &mut dyn Kind, input: &Path, output: &Path, mut prov: Provenance, opts: &PartitionOptions, on_report: &mut OnReport) -> Result<RunSummary, PipelineError> {
    let mut commit = Commit::begin(output)?;
    opts.enter(Phase::Reading);
    let n_rows = parquet_rows(input)?;
    let streamed = kind.streams() && n_rows > env_usize("LAPSE_STREAM_ROWS", STREAM_ABOVE_ROWS);
    let t0 = std::time::Instant::now();
    let (frame, facts) = if streamed {
        // Slices: ids and facts in bounded memory (the facts also size the grids).
        (None, scan_file(kind, input)?)
    } else {
        let df = read_parquet(input)?;
        let mut facts = Facts::default();
        kind.scan(&df, input, &mut facts)?;
        (Some(df), facts)
    };
    tracing::debug!(read_scan_s = t0.elapsed().as_secs_f64(), "read and scanned {}", input.display());
    let mut report = Preflight::default();
    check_partition(kind, &mut report, input, &facts);
    on_report(input, &report)?;
    opts.enter(Phase::Computing);
    prov.set("run.id", commit.run_id());
    prov.set("input.observations.0.bytes", &std::fs::metadata(input).map(|m| m.len()).unwrap_or(0).to_string());
    let mut summary = RunSummary { output: output.into(), rejects: rejects_path(output), ..Default::default() };
    match frame {
        Some(df) => in_memory(kind, &df, input, output, prov, opts, &mut summary, &mut commit)?,
        None => {
            kind.prepare(&facts);
            in_slices(kind, input, output, prov, opts, &mut summary, n_rows, &mut commit)?
        }
    }
    // `<stem>.summary.json`: the partition's summary for monitoring,
    // committed with its tables.
    let json = summary_json(&summary, Some(commit.run_id()));
    let path = output.with_file_name(format!("{}.summary.json", output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default()));
    let staged = commit.stage(&path);
    std::fs::write(&staged, json).map_err(|e| IoError::Write { path: staged.clone(), message: e.to_string() })?;
    commit.commit()?;
    Ok(summary)
}

/// A run's (or one partition's) summary as JSON: rows, rejects by code,
/// residual statistics per set and group (natural units), flagged rows,
/// files; `run_id` when it is one partition's.
pub fn summary_json(s: &RunSummary, run_id: Option<&str>) -> String {
    let v = serde_json::json!({
        "lapse_version": crate::VERSION,
        "run_id": run_id,
        "rows": { "in": s.rows_in, "out": s.rows_out, "rejected": s.rows_rejected },
        "rejects_by_code": s.rejects_by_reason,
        "residuals": s.sets,
        "flagged": s.flagged.iter().map(|(n, t)| serde_json::json!({ "rows": n, "what": t })).collect::<Vec<_>>(),
        "partitions": { "processed": s.partitions_done, "up_to_date": s.partitions_skipped },
        "output": s.output,
        "rejects": s.rejects,
        "plots": s.plots,
    });
    serde_json::to_string_pretty(&v).unwrap_or_default() + "\n"
}

/// The summary, provenance and plots of a complete partition: the plots are
/// staged and their SHA-256 recorded, so the up-to-date check can tell they
/// belong to the output.
#[allow(clippy::too_many_arguments)]
fn finish_partition(
    tally: &mut Tally,
    summary: &mut RunSummary,
    prov: &mut Provenance,
    offsets: &[(&'static str, f64)],
    output: &Path,
    plots: &[crate::plots::PlotFormat],
    phase: Option<&std::sync::Arc<std::sync::atomic::AtomicU8>>,
    commit: &mut Commit,
) -> Result<(), PipelineError> {
    finish(tally, summary, prov, offsets);
    if !plots.is_empty() {
        if let Some(a) = &phase {
            a.store(Phase::Plotting as u8, std::sync::atomic::Ordering::Relaxed);
        }
        for (staged, fin) in plot(tally, output, plots, commit)? {
            let bytes = std::fs::read(&staged).map_err(|e| IoError::Write { path: staged.clone(), message: e.to_string() })?;
            // Keyed by the name after the output's stem (`residuals.png`),
            // so the metadata does not depend on the output's name.
            let name = fin.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
            let stem = output.file_stem().map(|s| format!("{}.", s.to_string_lossy())).unwrap_or_default();
            prov.set(&format!("plot.{}.sha256", name.strip_prefix(&stem).unwrap_or(&name)), &crate::io::digest::sha256_hex(&bytes));
            summary.plots.push(fin);
        }
    }
    Ok(())
}

#[allow(clippy::too_many_arguments)]
fn in_memory(
    kind: &mut dyn Kind,
    df: &DataFrame,
    input: &Path,
    output: &Path,
    mut prov: Provenance,
    opts: &PartitionOptions,
    summary: &mut RunSummary,
    commit: &mut Commit,
) -> Result<(), PipelineError> {
    let t0 = std::time::Instant::now();
    let Processed { output: mut out, rejects: mut rej, mut tally } = process_checked(kind, df, input, &opts.exec)?;
    let t1 = std::time::Instant::now();
    let offsets = tally.remove_means();
    for (col, offset) in &offsets {
        subtract(&mut out, col, *offset, input)?;
    }
    (summary.rows_in, summary.rows_out, summary.rows_rejected) = (df.height(), out.height(), rej.height());
    finish_partition(&mut tally, summary, &mut prov, &offsets, output, &opts.plots, opts.phase.as_ref(), commit)?;
    opts.enter(Phase::Writing);
    let metadata = prov.finish();
    write_parquet_file(&mut rej, &commit.stage(&rejects_path(output)), &metadata)?;
    write_parquet_file(&mut out, &commit.stage(output), &metadata)?;
    tracing::debug!(rows = df.height(), compute_s = (t1 - t0).as_secs_f64(), write_s = t1.elapsed().as_secs_f64(), "wrote {}", output.display());
    Ok(())
}

type Writer = polars::io::parquet::write::BatchedWriter<std::fs::File>;

fn writer(path: &Path, schema: &Schema, metadata: Option<&[(String, String)]>) -> Result<Writer, PipelineError> {
    let werr = |e: PolarsError| PipelineError::from(IoError::Write { path: path.into(), message: e.to_string() });
    let file = std::fs::File::create(path).map_err(|e| IoError::Write { path: path.into(), message: e.to_string() })?;
    let mut w = ParquetWriter::new(file).with_compression(crate::io::output_compression());
    if let Some(md) = metadata {
        let kv: Vec<polars_parquet::write::KeyValue> = md.iter().map(|(k, v)| polars_parquet::write::KeyValue { key: k.clone(), value: Some(v.clone()) }).collect();
        w = w.with_key_value_metadata(Some(KeyValueMetadata::Static(kv)));
    }
    w.batched(schema).map_err(werr)
}

fn write_slice(w: &mut Writer, df: &mut DataFrame, path: &Path) -> Result<(), PipelineError> {
    crate::io::write_row_groups_parallel(w, df).map_err(|e| IoError::Write { path: path.into(), message: e.to_string() }.into())
}

fn close(w: Writer, path: &Path) -> Result<(), PipelineError> {
    w.finish().map(|_| ()).map_err(|e| IoError::Write { path: path.into(), message: e.to_string() }.into())
}

/// The streamed form: slices are computed and written (raw values) to
/// scratch files while only the tally stays in memory; then the final
/// files are written from them with any weighted mean removed and the
/// metadata complete. Same tables as [`in_memory`].
#[allow(clippy::too_many_arguments)]
fn in_slices(
    kind: &mut dyn Kind,
    input: &Path,
    output: &Path,
    mut prov: Provenance,
    opts: &PartitionOptions,
    summary: &mut RunSummary,
    n_rows: usize,
    commit: &mut Commit,
) -> Result<(), PipelineError> {
    let slice = env_usize("LAPSE_STREAM_SLICE", STREAM_SLICE_ROWS);
    let (tmp_out, tmp_rej) = (commit.scratch(output), commit.scratch(&rejects_path(output)));
    let (mut w_out, mut w_rej): (Option<Writer>, Option<Writer>) = (None, None);
    let mut tally = Tally::default();
    let mut at = 0usize;
    while at < n_rows {
        let df = read_parquet_slice(input, at, slice, None)?;
        let Processed { output: mut out, rejects: mut rej, tally: t } = kind.process(&df, input, &opts.exec)?;
        if w_out.is_none() {
            w_out = Some(writer(&tmp_out, out.schema(), None)?);
            w_rej = Some(writer(&tmp_rej, rej.schema(), None)?);
        }
        if let (Some(wo), Some(wr)) = (w_out.as_mut(), w_rej.as_mut()) {
            write_slice(wo, &mut out, &tmp_out)?;
            write_slice(wr, &mut rej, &tmp_rej)?;
        }
        summary.rows_out += out.height();
        summary.rows_rejected += rej.height();
        tally.merge(t);
        at += slice;
    }
    summary.rows_in = n_rows;
    if let (Some(wo), Some(wr)) = (w_out.take(), w_rej.take()) {
        close(wo, &tmp_out)?;
        close(wr, &tmp_rej)?;
    }
    let offsets = tally.remove_means();
    finish_partition(&mut tally, summary, &mut prov, &offsets, output, &opts.plots, opts.phase.as_ref(), commit)?;
    opts.enter(Phase::Writing);
    let metadata = prov.finish();
    // Pass 2: final files, offsets removed, full metadata.
    for (tmp, fin, n, fix) in [(&tmp_rej, rejects_path(output), summary.rows_rejected, false), (&tmp_out, output.to_path_buf(), summary.rows_out, true)] {
        let part = commit.stage(&fin);
        let mut w: Option<Writer> = None;
        let mut k = 0usize;
        loop {
            let mut df = read_parquet_slice(tmp, k, slice, None)?;
            if w.is_none() {
                w = Some(writer(&part, df.schema(), Some(&metadata))?);
            }
            if fix {
                for (col, offset) in &offsets {
                    subtract(&mut df, col, *offset, tmp)?;
                }
            }
            if let Some(w) = w.as_mut() {
                write_slice(w, &mut df, &part)?;
            }
            k += slice;
            if k >= n {
                break;
            }
        }
        if let Some(w) = w {
            close(w, &part)?;
        }
        let _ = std::fs::remove_file(tmp);
    }
    Ok(())
}

/// Scans a partition for `lapse check`: ids, typed columns and facts (in
/// slices: bounded memory), then the kind's checks. Problems are findings.
pub fn check_file(kind: &dyn Kind, report: &mut Preflight, path: &Path) {
    match scan_file(kind, path) {
        Ok(facts) => check_partition(kind, report, path, &facts),
        Err(e) => report.add(Level::Unusable, e.to_string()),
    }
}
