//! `kind = "timescales"`: a table of epochs in one scale → the same epochs
//! in every other scale (geocentric), with TDB − TT and TT − UTC broken out.
//!
//! Input columns: `obs_id` (string, unique), `mjd_day` (int64), `mjd_frac`
//! (float64 in [0, 1)). Other columns pass through.
//! Output columns: `obs_id`, `<scale>_mjd_day`/`<scale>_mjd_frac` for each
//! requested scale, `tt_minus_utc_s`, `tdb_minus_tt_s` (geocentric), then the
//! pass-through columns. Rows that cannot be converted go to the rejects
//! table beside the output with a `reason`.

use std::path::{Path, PathBuf};

use polars::prelude::*;
use serde::Deserialize;

use super::{PipelineError, PipelineFile, RunSummary, assemble, check_unique_ids};
use crate::io::{Columns, read_parquet, write_parquet};
use crate::time::femto::{FS_PER_S, ratio_to_f64};
use crate::time::{ExpiryPolicy, LeapSecondTable, TimeScale, TimeScales};

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct InputCfg {
    path: PathBuf,
    #[serde(default = "default_scale")]
    scale: String,
}

fn default_scale() -> String {
    "utc".into()
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct TimeCfg {
    leap_seconds: Option<PathBuf>,
    #[serde(default)]
    extend_leap_table: bool,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct OutputCfg {
    path: PathBuf,
    scales: Option<Vec<String>>,
}

/// The configuration of a `timescales` pipeline.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TimescalesPipeline {
    #[allow(dead_code)]
    kind: String,
    input: InputCfg,
    #[serde(default)]
    time: TimeCfg,
    output: OutputCfg,
}

/// Per-row result: (per-scale day/frac, tt−utc s, tdb−tt s) or a reason.
type RowResult = Result<(Vec<(i64, f64)>, f64, f64), String>;


/// A loaded `timescales` pipeline: the time-scale tables and what to convert.
#[derive(Debug)]
pub struct LoadedTimescales {
    ts: TimeScales,
    in_scale: TimeScale,
    out_scales: Vec<TimeScale>,
    leap_path: Option<PathBuf>,
    pub input_path: PathBuf,
    pub output_path: PathBuf,
    pub chunk_rows: usize,
    pub progress: Option<std::sync::Arc<std::sync::atomic::AtomicUsize>>,
}

/// Reads a `timescales` pipeline and loads its leap-second table once.
pub fn load_timescales(file: &PipelineFile) -> Result<LoadedTimescales, PipelineError> {
    let cfg: TimescalesPipeline = file.parse()?;
    let invalid = |message: String| PipelineError::Invalid { path: file.path.clone(), message };
    let in_scale: TimeScale = cfg.input.scale.parse().map_err(|e: crate::time::TimeError| invalid(format!("[input] scale: {e}")))?;
    let out_scales: Vec<TimeScale> = match &cfg.output.scales {
        Some(list) => list
            .iter()
            .map(|s| s.parse().map_err(|e: crate::time::TimeError| invalid(format!("[output] scales: {e}"))))
            .collect::<Result<_, _>>()?,
        None => vec![TimeScale::Utc, TimeScale::Tai, TimeScale::Tt, TimeScale::Tcg, TimeScale::Tdb, TimeScale::Tcb],
    };
    if out_scales.contains(&TimeScale::Ut1) || in_scale == TimeScale::Ut1 {
        return Err(invalid("UT1 needs Earth-orientation data, which timescales pipelines do not load".into()));
    }
    let leap_path = cfg.time.leap_seconds.as_ref().map(|p| file.resolve(p));
    let mut leaps = match &leap_path {
        Some(p) => LeapSecondTable::from_file(p).map_err(|e| PipelineError::Time { context: "[time] leap_seconds".into(), source: e })?,
        None => LeapSecondTable::builtin(),
    };
    if cfg.time.extend_leap_table {
        leaps = leaps.with_policy(ExpiryPolicy::ExtendLastOffset);
    }
    Ok(LoadedTimescales {
        ts: TimeScales::new(leaps),
        in_scale,
        out_scales,
        leap_path,
        input_path: file.resolve(&cfg.input.path),
        output_path: file.resolve(&cfg.output.path),
        chunk_rows: super::DEFAULT_CHUNK_ROWS,
        progress: None,
    })
}

/// One batch in memory: output and rejects frames exactly as a run writes
/// them, the reject reasons, the day column and the TDB − TT range.
struct TimescalesFrames {
    out: DataFrame,
    rejects: DataFrame,
    reasons: Vec<String>,
    days: Vec<Option<i64>>,
    tdb_minus_tt_range_s: Option<(f64, f64)>,
}

fn timescales_frames(l: &LoadedTimescales, df: &DataFrame, source: &Path) -> Result<TimescalesFrames, PipelineError> {
    let cols = Columns { df, path: source };
    let ids = cols.str("obs_id")?;
    let days = cols.i64("mjd_day")?;
    let fracs = cols.f64("mjd_frac")?;
    check_unique_ids(&ids, source)?;
    let rows: Vec<usize> = (0..df.height()).collect();
    let results: Vec<RowResult> = super::par_map_chunks(&rows, l.chunk_rows, l.progress.as_deref(), |&i| convert_row(&l.ts, l.in_scale, &l.out_scales, days[i], fracs[i]));
    let ok: Vec<bool> = results.iter().map(|r| r.is_ok()).collect();
    let good: Vec<&(Vec<(i64, f64)>, f64, f64)> = results.iter().filter_map(|r| r.as_ref().ok()).collect();
    let mut computed: Vec<Column> = Vec::new();
    for (k, s) in l.out_scales.iter().enumerate() {
        computed.push(Column::new(format!("{}_mjd_day", s.name()).into(), good.iter().map(|g| g.0[k].0).collect::<Vec<i64>>()));
        computed.push(Column::new(format!("{}_mjd_frac", s.name()).into(), good.iter().map(|g| g.0[k].1).collect::<Vec<f64>>()));
    }
    computed.push(Column::new("tt_minus_utc_s".into(), good.iter().map(|g| g.1).collect::<Vec<f64>>()));
    computed.push(Column::new("tdb_minus_tt_s".into(), good.iter().map(|g| g.2).collect::<Vec<f64>>()));
    let reasons: Vec<String> = results.iter().filter_map(|r| r.as_ref().err().cloned()).collect();
    let (out, rejects) = assemble(df, source, &ok, &reasons, computed, &["mjd_day", "mjd_frac"])?;
    let tdb_minus_tt_range_s = (!good.is_empty()).then(|| good.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), g| (a.min(g.2), b.max(g.2))));
    Ok(TimescalesFrames { out, rejects, reasons, days, tdb_minus_tt_range_s })
}

/// Output and rejects of one in-memory batch (see [`crate::pipeline::batch`]).
pub fn timescales_batch(l: &LoadedTimescales, df: &DataFrame, source: &Path) -> Result<(DataFrame, DataFrame), PipelineError> {
    let f = timescales_frames(l, df, source)?;
    Ok((f.out, f.rejects))
}

/// Runs a `timescales` pipeline.
pub fn run_timescales(file: &PipelineFile, opts: &super::RunOptions) -> Result<RunSummary, PipelineError> {
    let mut l = load_timescales(file)?;
    opts.override_paths(&mut l.input_path, &mut l.output_path);
    l.chunk_rows = opts.chunk_rows;
    l.progress = opts.progress.clone();
    let mut prov = super::Provenance::start(file);
    let (input_path, output_path) = (l.input_path.clone(), l.output_path.clone());
    let df = read_parquet(&input_path)?;
    let TimescalesFrames { mut out, mut rejects, reasons, days, tdb_minus_tt_range_s } = timescales_frames(&l, &df, &input_path)?;
    let mut summary = RunSummary::new(df.height(), out.height(), rejects.height(), &output_path, &reasons);
    let (lo, hi) = days.iter().flatten().fold((i64::MAX, i64::MIN), |(a, b), d| (a.min(*d), b.max(*d)));
    prov.add_input("observations", &input_path, &if lo <= hi { format!("MJD {lo} … {hi}") } else { String::new() })?;
    if let Some(p) = &l.leap_path {
        prov.add_input("leap_seconds", p, &super::leap_coverage(l.ts.leap_seconds()))?;
    }
    prov.set("input.leap_seconds.table", l.ts.leap_seconds().source_name());
    prov.set_rows(summary.rows_in, summary.rows_out, summary.rows_rejected);
    let metadata = prov.finish();
    write_parquet(&mut rejects, &summary.rejects, &metadata)?;
    write_parquet(&mut out, &output_path, &metadata)?;
    if let Some((min_tdb_tt, max_tdb_tt)) = tdb_minus_tt_range_s {
        summary.notes.push(format!("TDB − TT (geocentric) over the batch: {min_tdb_tt:+.9e} s … {max_tdb_tt:+.9e} s"));
    }
    Ok(summary)
}

fn convert_row(ts: &TimeScales, in_scale: TimeScale, out: &[TimeScale], day: Option<i64>, frac: Option<f64>) -> RowResult {
    let day = day.ok_or("null mjd_day: give the MJD day number")?;
    let frac = frac.ok_or("null mjd_frac: give the fraction of the day")?;
    if !frac.is_finite() || !(0.0..1.0).contains(&frac) {
        return Err(format!("mjd_frac out of range: {frac:?} is not in [0, 1)"));
    }
    let e = ts.epoch_from_mjd(in_scale, day, frac).map_err(|e| format!("epoch not convertible: {e}"))?;
    let mut parts = Vec::with_capacity(out.len());
    for s in out {
        let c = ts.convert(e, *s, 0.0).map_err(|e| format!("epoch not convertible: {e}"))?;
        parts.push(ts.mjd_parts(&c).map_err(|e| format!("epoch not convertible: {e}"))?);
    }
    let tt = ts.tt_fs(&e, 0.0).map_err(|e| format!("epoch not convertible: {e}"))?;
    let tt_minus_utc_s = match ts.convert(e, TimeScale::Utc, 0.0) {
        Ok(u) => ratio_to_f64(tt - u.label_fs(), FS_PER_S),
        Err(err) => return Err(format!("epoch not convertible: {err}")),
    };
    Ok((parts, tt_minus_utc_s, ts.tdb_minus_tt_s(tt, 0.0)))
}
