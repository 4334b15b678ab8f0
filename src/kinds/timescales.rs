//! `kind = "timescales"`: a table of epochs in one scale → the same epochs
//! in every other scale (geocentric), with TDB − TT and TT − UTC broken out.
//!
//! Input columns: `obs_id` (string, unique), `mjd_day` (int64), `mjd_frac`
//! (float64 in [0, 1)). Other columns pass through.
//! Output columns: `obs_id`, `<scale>_mjd_day`/`<scale>_mjd_frac` for each
//! requested scale, `tt_minus_utc_s`, `tdb_minus_tt_s` (geocentric), then the
//! pass-through columns. Rows that cannot be converted go to the rejects
//! table beside the output with a `reason_code` and `reason`.

use std::path::{Path, PathBuf};

use polars::prelude::*;
use serde::Deserialize;

use crate::io::Columns;
use crate::parallel::Exec;
use crate::pipeline::preflight::{Facts, Preflight, check_leap_seconds};
use crate::pipeline::provenance::leap_coverage;
use crate::pipeline::shared::TimeCfg;
use crate::pipeline::table::assemble;
use crate::pipeline::tally::Tally;
use crate::pipeline::{IoPaths, Kind, PipelineError, PipelineFile, Processed, Provenance, SynthOptions};
use crate::reject::{Reject, RejectCode};
use crate::time::femto::{FS_PER_S, ratio_to_f64};
use crate::time::{ExpiryPolicy, LeapSecondTable, TimeError, TimeScale, TimeScales};

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct InputCfg {
    path: PathBuf,
    /// The input's time scale (default "utc"); the same key as in pulsar
    /// pipelines.
    time_scale: Option<String>,
    /// Deprecated spelling of `time_scale` (accepted for one release, with a warning).
    scale: Option<String>,
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

/// A row's day and fraction, or why they cannot be converted (the same
/// check in `lapse check` and `lapse run`).
fn row_problem(day: Option<i64>, frac: Option<f64>) -> Result<(i64, f64), Reject> {
    let day = day.ok_or_else(|| Reject::new(RejectCode::MissingValue, "null mjd_day: give the MJD day number"))?;
    let frac = frac.ok_or_else(|| Reject::new(RejectCode::MissingValue, "null mjd_frac: give the fraction of the day"))?;
    if !frac.is_finite() || !(0.0..1.0).contains(&frac) {
        return Err(Reject::new(RejectCode::FractionOutOfRange, format!("mjd_frac out of range: {frac:?} is not in [0, 1)")));
    }
    Ok((day, frac))
}

/// One converted row: (day, fraction) per output scale, TT − UTC (s), TDB − TT (s).
type Converted = (Vec<(i64, f64)>, f64, f64);

/// A loaded `timescales` pipeline: the time-scale tables and what to convert.
#[derive(Debug)]
pub struct Timescales {
    ts: TimeScales,
    in_scale: TimeScale,
    out_scales: Vec<TimeScale>,
    leap_path: Option<PathBuf>,
    paths: IoPaths,
}

impl Timescales {
    /// Reads a `timescales` pipeline and loads its leap-second table once.
    pub fn load(file: &PipelineFile) -> Result<Self, PipelineError> {
        let cfg: TimescalesPipeline = file.parse()?;
        let scale_text = match (&cfg.input.time_scale, &cfg.input.scale) {
            (Some(_), Some(_)) => return Err(file.invalid("[input] time_scale and scale both given: keep time_scale")),
            (None, Some(s)) => {
                tracing::warn!("{}: [input] scale is deprecated: write it as [input] time_scale", file.path.display());
                s.clone()
            }
            (t, None) => t.clone().unwrap_or_else(|| "utc".into()),
        };
        let in_scale: TimeScale = scale_text.parse().map_err(|e: TimeError| file.invalid(format!("[input] time_scale: {e}")))?;
        let out_scales: Vec<TimeScale> = match &cfg.output.scales {
            Some(list) => list.iter().map(|s| s.parse().map_err(|e: TimeError| file.invalid(format!("[output] scales: {e}")))).collect::<Result<_, _>>()?,
            None => vec![TimeScale::Utc, TimeScale::Tai, TimeScale::Tt, TimeScale::Tcg, TimeScale::Tdb, TimeScale::Tcb],
        };
        if out_scales.contains(&TimeScale::Ut1) || in_scale == TimeScale::Ut1 {
            return Err(file.invalid("UT1 needs Earth-orientation data, which timescales pipelines do not load"));
        }
        let leap_path = cfg.time.leap_seconds.as_ref().map(|p| file.resolve(p));
        let mut leaps = match &leap_path {
            Some(p) => LeapSecondTable::from_file(p).and_then(|t| t.check_against_builtin().map(|_| t)).map_err(|e| PipelineError::Time { context: "[time] leap_seconds".into(), source: e })?,
            None => LeapSecondTable::builtin(),
        };
        if cfg.time.extend_leap_table {
            leaps = leaps.with_policy(ExpiryPolicy::ExtendLastOffset);
        }
        Ok(Self { ts: TimeScales::new(leaps), in_scale, out_scales, leap_path, paths: IoPaths::resolve(file, &cfg.input.path, &cfg.output.path) })
    }

    fn convert_row(&self, day: Option<i64>, frac: Option<f64>) -> Result<Converted, Reject> {
        let (day, frac) = row_problem(day, frac)?;
        let bad = |e: TimeError| Reject::new(RejectCode::TimeNotConvertible, format!("epoch not convertible: {e}"));
        let ts = &self.ts;
        let e = ts.epoch_from_mjd(self.in_scale, day, frac).map_err(bad)?;
        let mut parts = Vec::with_capacity(self.out_scales.len());
        for s in &self.out_scales {
            let c = ts.convert(e, *s, 0.0).map_err(bad)?;
            parts.push(ts.mjd_parts(&c).map_err(bad)?);
        }
        let tt = ts.tt_fs(&e, 0.0).map_err(bad)?;
        let u = ts.convert(e, TimeScale::Utc, 0.0).map_err(bad)?;
        let tt_minus_utc_s = ratio_to_f64(tt - u.label_fs(), FS_PER_S);
        Ok((parts, tt_minus_utc_s, ts.tdb_minus_tt_s(tt, 0.0)))
    }
}

impl Kind for Timescales {
    fn name(&self) -> &'static str {
        "timescales"
    }

    fn paths(&self) -> &IoPaths {
        &self.paths
    }

    fn paths_mut(&mut self) -> &mut IoPaths {
        &mut self.paths
    }

    fn provenance(&self, file: &PipelineFile) -> Result<Provenance, PipelineError> {
        let mut prov = Provenance::start(file);
        if let Some(p) = &self.leap_path {
            prov.add_input("leap_seconds", p, &leap_coverage(self.ts.leap_seconds()))?;
        }
        prov.set("input.leap_seconds.table", self.ts.leap_seconds().source_name());
        prov.set("input.scale", self.in_scale.name());
        Ok(prov)
    }

    fn output_columns(&self) -> Vec<String> {
        let mut c: Vec<String> = self.out_scales.iter().flat_map(|s| [format!("{}_mjd_day", s.name()), format!("{}_mjd_frac", s.name())]).collect();
        c.extend(["tt_minus_utc_s", "tdb_minus_tt_s"].map(String::from));
        c
    }

    fn loaded(&self) -> String {
        format!("leap-second table {} loaded", self.ts.leap_seconds().source_name())
    }

    fn scan(&self, df: &DataFrame, path: &Path, facts: &mut Facts) -> Result<(), PipelineError> {
        let c = Columns { df, path };
        let (days, fracs) = (c.i64("mjd_day")?, c.f64("mjd_frac")?);
        facts.add(&days, &fracs, None, None, None);
        facts.count_problems(days.iter().zip(&fracs).filter_map(|(d, f)| row_problem(*d, *f).err()));
        Ok(())
    }

    fn check(&self, report: &mut Preflight, facts: &Facts) {
        if let Some(s) = facts.span() {
            check_leap_seconds(report, self.ts.leap_seconds(), &s);
        }
    }

    fn process(&mut self, df: &DataFrame, source: &Path, exec: &Exec) -> Result<Processed, PipelineError> {
        let cols = Columns { df, path: source };
        let days = cols.i64("mjd_day")?;
        let fracs = cols.f64("mjd_frac")?;
        let rows: Vec<usize> = (0..df.height()).collect();
        let results: Vec<Result<Converted, Reject>> = exec.map(&rows, |&i| self.convert_row(days[i], fracs[i]));
        let ok: Vec<bool> = results.iter().map(|r| r.is_ok()).collect();
        let good: Vec<&Converted> = results.iter().filter_map(|r| r.as_ref().ok()).collect();
        let mut computed: Vec<Column> = Vec::new();
        for (k, s) in self.out_scales.iter().enumerate() {
            computed.push(Column::new(format!("{}_mjd_day", s.name()).into(), good.iter().map(|g| g.0[k].0).collect::<Vec<i64>>()));
            computed.push(Column::new(format!("{}_mjd_frac", s.name()).into(), good.iter().map(|g| g.0[k].1).collect::<Vec<f64>>()));
        }
        computed.push(Column::new("tt_minus_utc_s".into(), good.iter().map(|g| g.1).collect::<Vec<f64>>()));
        computed.push(Column::new("tdb_minus_tt_s".into(), good.iter().map(|g| g.2).collect::<Vec<f64>>()));
        let rejects: Vec<Reject> = results.iter().filter_map(|r| r.as_ref().err().cloned()).collect();
        let (output, rejects_df) = assemble(df, source, &ok, &rejects, computed, &["mjd_day", "mjd_frac"])?;
        let mut tally = Tally::default();
        tally.count_rejects(&rejects);
        tally.cover_days("epoch", &days);
        if !good.is_empty() {
            let (lo, hi) = good.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), g| (a.min(g.2), b.max(g.2)));
            tally.range("TDB − TT (geocentric) over the batch", "s", lo, hi);
        }
        Ok(Processed { output, rejects: rejects_df, tally })
    }

    fn synthesise(&mut self, plan: &Path, _opts: &SynthOptions) -> Result<DataFrame, PipelineError> {
        Err(PipelineError::Input { path: plan.into(), message: "synth needs a pulsar or tracking pipeline: a timescales pipeline has no model to synthesise from".into() })
    }
}
