//! `kind = "tracking"`: station range and Doppler measurements of a
//! spacecraft → light-time solutions, computed observables and residuals.
//! See the README for the table and column contract.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use polars::prelude::*;
use serde::Deserialize;

use super::pulsar::{EarthCfg, EphemerisCfg, OutputCfg, SharedInputs, StationsCfg, load_shared};
use super::{PipelineError, PipelineFile, Provenance, RunOptions, RunSummary, assemble, check_unique_ids, rejects_path};
use crate::constants::Constants;
use crate::delays::shapiro_bodies;
use crate::ephemeris::body_id;
use crate::io::{Columns, read_parquet, write_parquet};
use crate::pulsar::residual_summary;
use crate::tracking::observables::{Kind, Measurement, TrackingContext, TrackingResult};
use crate::tracking::propagate::PointMassField;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct InputCfg {
    path: PathBuf,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct TargetCfg {
    /// NAIF id (integer) or name.
    body: toml::Value,
    #[serde(default)]
    transponder_delay_s: f64,
    /// [numerator, denominator]; default by uplink band.
    turnaround_ratio: Option<[f64; 2]>,
    /// CCSDS OEM files (KVN) giving the target's trajectory; they take
    /// precedence over the kernels.
    #[serde(default)]
    oem: Vec<PathBuf>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct CorrectionsCfg {
    shapiro_bodies: Option<Vec<String>>,
    ppn_gamma: Option<f64>,
    troposphere: Option<TroposphereCfg>,
}

/// `[corrections.troposphere]`: off unless `enabled = true`; surface
/// meteorology per station, the standard atmosphere for the others.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct TroposphereCfg {
    #[serde(default)]
    enabled: bool,
    #[serde(default)]
    stations: BTreeMap<String, crate::tracking::troposphere::SurfaceMet>,
}

/// The configuration of a `tracking` pipeline.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TrackingPipeline {
    #[allow(dead_code)]
    kind: String,
    input: InputCfg,
    ephemeris: EphemerisCfg,
    earth: EarthCfg,
    stations: StationsCfg,
    target: TargetCfg,
    #[serde(default)]
    corrections: CorrectionsCfg,
    output: OutputCfg,
}

/// A loaded tracking pipeline.
#[derive(Debug)]
pub struct LoadedTracking {
    pub ctx: TrackingContext,
    pub input_path: PathBuf,
    pub output_path: PathBuf,
    pub inputs: Vec<(String, PathBuf, String)>,
    pub constants: Constants,
}

/// Loads the shared inputs of a tracking pipeline once.
pub fn load_tracking(file: &PipelineFile) -> Result<LoadedTracking, PipelineError> {
    let cfg: TrackingPipeline = file.parse()?;
    let invalid = |message: String| PipelineError::Invalid { path: file.path.clone(), message };
    let SharedInputs { mut ephemeris, constants, earth, stations, mut inputs } = load_shared(file, &cfg.ephemeris, &cfg.earth, &cfg.stations)?;
    let target = match &cfg.target.body {
        toml::Value::Integer(i) => i32::try_from(*i).map_err(|_| invalid(format!("[target] body {i} is not a NAIF id")))?,
        toml::Value::String(s) => body_id(s, &[]).ok_or_else(|| invalid(format!("[target] body '{s}' is not a known name or NAIF id")))?,
        other => return Err(invalid(format!("[target] body = {other}: give a NAIF id or name"))),
    };
    for p in &cfg.target.oem {
        let p = file.resolve(p);
        let k = crate::ephemeris::oem::load_oem(&p, target, &earth.time).map_err(|e| invalid(format!("[target] oem: {e}")))?;
        inputs.push(("oem".into(), p, super::kernel_coverage(&k)));
        ephemeris.add_kernel(k);
    }
    if ephemeris.kernels().iter().all(|k| k.segments.iter().all(|s| s.target != target)) {
        return Err(invalid(format!("[target] body {target}: no loaded kernel holds it")));
    }
    let names = cfg.corrections.shapiro_bodies.clone().unwrap_or_else(|| vec!["sun".to_string()]);
    let shapiro = shapiro_bodies(&names, &constants.ephemeris).map_err(|e| invalid(format!("[corrections] {e}")))?;
    let ppn_gamma = cfg.corrections.ppn_gamma.unwrap_or(1.0);
    if !ppn_gamma.is_finite() || !cfg.target.transponder_delay_s.is_finite() || cfg.target.transponder_delay_s < 0.0 {
        return Err(invalid("[corrections] ppn_gamma and [target] transponder_delay_s must be finite (delay ≥ 0)".into()));
    }
    let turnaround = match cfg.target.turnaround_ratio {
        Some([a, b]) if a.is_finite() && b.is_finite() && a > 0.0 && b > 0.0 => Some((a, b)),
        Some(r) => return Err(invalid(format!("[target] turnaround_ratio {r:?} must be two positive numbers"))),
        None => None,
    };
    let field = PointMassField::solar_system(&constants.ephemeris).map_err(invalid)?;
    let troposphere = match &cfg.corrections.troposphere {
        Some(t) if t.enabled => {
            for (code, met) in &t.stations {
                stations.get(code).map_err(|e| invalid(format!("[corrections.troposphere] {e}")))?;
                met.validate().map_err(|e| invalid(format!("[corrections.troposphere.stations.{code}] {e}")))?;
            }
            Some(crate::tracking::observables::Troposphere { stations: t.stations.clone() })
        }
        _ => None,
    };
    let ctx = TrackingContext {
        ephemeris,
        earth,
        stations,
        target,
        shapiro,
        ppn_gamma,
        transponder_delay_s: cfg.target.transponder_delay_s,
        turnaround,
        field,
        troposphere,
        chunk_rows: super::DEFAULT_CHUNK_ROWS,
        progress: None,
    };
    Ok(LoadedTracking {
        ctx,
        input_path: file.resolve(&cfg.input.path),
        output_path: file.resolve(&cfg.output.path),
        inputs,
        constants,
    })
}

/// The input columns of a tracking batch.
pub struct TrackingInput<'a> {
    /// String columns are views into the input frame (no string copied).
    pub obs_id: Vec<Option<&'a str>>,
    pub kind: Vec<Option<&'a str>>,
    pub rx_station: Vec<Option<&'a str>>,
    pub tx_station: Vec<Option<&'a str>>,
    pub day: Vec<Option<i64>>,
    pub frac: Vec<Option<f64>>,
    pub count_s: Vec<Option<f64>>,
    pub uplink_hz: Vec<Option<f64>>,
    pub value: Vec<Option<f64>>,
    pub sigma: Vec<Option<f64>>,
}

/// Reads and type-checks the input columns.
pub fn read_tracking_input<'a>(df: &'a DataFrame, path: &Path) -> Result<TrackingInput<'a>, PipelineError> {
    let c = Columns { df, path };
    Ok(TrackingInput {
        obs_id: c.str_ref("obs_id")?,
        kind: c.str_ref("kind")?,
        rx_station: c.str_ref("rx_station")?,
        tx_station: c.str_ref("tx_station")?,
        day: c.i64("rx_mjd_day")?,
        frac: c.f64("rx_mjd_frac")?,
        count_s: c.f64("count_s")?,
        uplink_hz: c.f64("uplink_hz")?,
        value: c.f64("value")?,
        sigma: c.f64("sigma")?,
    })
}

/// Computes every row (Err = reject reason), in input order.
pub fn compute_tracking(lt: &mut LoadedTracking, input: &TrackingInput, check_values: bool) -> Vec<Result<TrackingResult, String>> {
    lt.ctx.cover_batch_days(&input.day);
    let n = input.obs_id.len();
    let mut out: Vec<Result<TrackingResult, String>> = Vec::with_capacity(n);
    let mut rows: Vec<Measurement> = Vec::with_capacity(n);
    let mut index = Vec::with_capacity(n);
    for i in 0..n {
        let pre = (|| -> Result<Measurement, String> {
            let kind: Kind = input.kind[i].as_deref().ok_or("missing value: kind is null")?.parse()?;
            let rx = input.rx_station[i].as_deref().ok_or("missing value: rx_station is null")?;
            let day = input.day[i].ok_or("missing value: rx_mjd_day is null")?;
            let frac = input.frac[i].ok_or("missing value: rx_mjd_frac is null")?;
            let count_s = input.count_s[i].unwrap_or(f64::NAN);
            let uplink_hz = input.uplink_hz[i].unwrap_or(f64::NAN);
            if check_values {
                let v = input.value[i].ok_or("missing value: value is null")?;
                let s = input.sigma[i].ok_or("missing value: sigma is null")?;
                if !v.is_finite() {
                    return Err(format!("value invalid: {v:?} is not finite"));
                }
                if !(s.is_finite() && s > 0.0) {
                    return Err(format!("sigma invalid: {s:?} (must be positive)"));
                }
                if matches!(kind, Kind::LightTime2Way | Kind::LightTime1Way) && v <= 0.0 {
                    return Err(format!("value invalid: light time {v} s must be positive"));
                }
            }
            Ok(Measurement { kind, rx_station: rx, tx_station: input.tx_station[i].as_deref(), rx_mjd_day: day, rx_mjd_frac: frac, count_s, uplink_hz })
        })();
        match pre {
            Ok(m) => {
                rows.push(m);
                index.push(i);
                out.push(Err(String::new()));
            }
            Err(e) => out.push(Err(e)),
        }
    }
    let computed = lt.ctx.compute_batch(&rows);
    if index.len() == n {
        // Every row computed: the results are already in input order.
        return computed;
    }
    for (k, r) in index.into_iter().zip(computed) {
        out[k] = r;
    }
    out
}

/// Runs a tracking pipeline (one input file, or every partition of a
/// folder or glob, skipping partitions whose outputs are up to date).
pub fn run_tracking(file: &PipelineFile, opts: &RunOptions) -> Result<RunSummary, PipelineError> {
    run_tracking_loaded(file, load_tracking(file)?, opts)
}

/// [`run_tracking`] with the shared inputs already loaded (by the preflight).
pub fn run_tracking_loaded(file: &PipelineFile, mut lt: LoadedTracking, opts: &RunOptions) -> Result<RunSummary, PipelineError> {
    opts.override_paths(&mut lt.input_path, &mut lt.output_path);
    lt.ctx.chunk_rows = opts.chunk_rows;
    lt.ctx.progress = opts.progress.clone();
    let mut base = super::pulsar::shared_provenance(file, &lt.inputs, &lt.constants, &lt.ctx.shapiro, lt.ctx.ppn_gamma)?;
    base.set("target.naif_id", &lt.ctx.target.to_string());
    base.set("target.transponder_delay_s", &format!("{:e}", lt.ctx.transponder_delay_s));
    base.set("corrections.troposphere", match &lt.ctx.troposphere {
        Some(_) => "Saastamoinen 1972 zenith + Black & Eisner 1984 mapping",
        None => "off",
    });
    let (input, output) = (lt.input_path.clone(), lt.output_path.clone());
    super::for_each_partition(&input, &output, &base, |inp, out, prov| run_tracking_partition(&mut lt, inp, out, prov, opts.plots))
}

/// One tracking batch in memory: output and rejects frames exactly as a run
/// writes them, plus what the summary and plots need. `source` names the
/// batch in errors.
struct TrackingFrames<'a> {
    input: TrackingInput<'a>,
    results: Vec<Result<TrackingResult, String>>,
    residual: Vec<f64>,
    reasons: Vec<String>,
    out: DataFrame,
    rejects: DataFrame,
}

fn tracking_frames<'a>(lt: &mut LoadedTracking, df: &'a DataFrame, source: &Path) -> Result<TrackingFrames<'a>, PipelineError> {
    let input = read_tracking_input(df, source)?;
    // The id check (one thread) runs beside the computation, as for pulsars.
    let (unique, results) = rayon::join(|| check_unique_ids(&input.obs_id, source), || compute_tracking(lt, &input, true));
    unique?;
    let ok: Vec<bool> = results.iter().map(|r| r.is_ok()).collect();
    let good: Vec<(usize, &TrackingResult)> = results.iter().enumerate().filter_map(|(i, r)| r.as_ref().ok().map(|g| (i, g))).collect();
    let residual: Vec<f64> = good.iter().map(|(i, g)| input.value[*i].unwrap_or(f64::NAN) - g.computed).collect();
    let ts = &lt.ctx.earth.time;
    let parts = |e: &crate::time::Epoch| ts.mjd_parts(e).unwrap_or((e.mjd_day(), f64::NAN));
    // Exact day fractions (a 128-bit correction each): in parallel, order kept.
    use rayon::prelude::*;
    let (bounce, tx): (Vec<(i64, f64)>, Vec<Option<(i64, f64)>>) = good.par_iter().map(|(_, g)| (parts(&g.bounce_tdb), g.tx_utc.as_ref().map(parts))).unzip();
    let fcol = |n: &str, v: Vec<f64>| Column::new(n.into(), v);
    let ocol = |n: &str, v: Vec<Option<f64>>| Column::new(n.into(), v);
    let computed = vec![
        fcol("computed", good.iter().map(|(_, g)| g.computed).collect()),
        fcol("residual", residual.clone()),
        fcol("light_time_down_s", good.iter().map(|(_, g)| g.light_time_down_s).collect()),
        ocol("light_time_up_s", good.iter().map(|(_, g)| g.light_time_up_s).collect()),
        fcol("shapiro_down_s", good.iter().map(|(_, g)| g.shapiro_down_s).collect()),
        ocol("shapiro_up_s", good.iter().map(|(_, g)| g.shapiro_up_s).collect()),
        fcol("clock_rx_s", good.iter().map(|(_, g)| g.clock_rx_s).collect()),
        ocol("clock_tx_s", good.iter().map(|(_, g)| g.clock_tx_s).collect()),
        Column::new("bounce_tdb_mjd_day".into(), bounce.iter().map(|b| b.0).collect::<Vec<i64>>()),
        fcol("bounce_tdb_mjd_frac", bounce.iter().map(|b| b.1).collect()),
        Column::new("tx_mjd_day".into(), tx.iter().map(|t| t.map(|x| x.0)).collect::<Vec<Option<i64>>>()),
        ocol("tx_mjd_frac", tx.iter().map(|t| t.map(|x| x.1)).collect()),
        fcol("elevation_rx_deg", good.iter().map(|(_, g)| g.elevation_rx_deg).collect()),
        fcol("troposphere_s", good.iter().map(|(_, g)| g.troposphere_s).collect()),
    ];
    let reasons: Vec<String> = results.iter().filter_map(|r| r.as_ref().err().cloned()).collect();
    let (out, rejects) = assemble(df, source, &ok, &reasons, computed, &[])?;
    Ok(TrackingFrames { input, results, residual, reasons, out, rejects })
}

/// Output and rejects of one in-memory batch (see [`crate::pipeline::batch`]).
pub fn tracking_batch(lt: &mut LoadedTracking, df: &DataFrame, source: &Path) -> Result<(DataFrame, DataFrame), PipelineError> {
    let f = tracking_frames(lt, df, source)?;
    Ok((f.out, f.rejects))
}

/// One partition of a tracking run.
fn run_tracking_partition(lt: &mut LoadedTracking, input_path: &Path, output_path: &Path, mut prov: Provenance, plots: bool) -> Result<RunSummary, PipelineError> {
    let t0 = std::time::Instant::now();
    let df = read_parquet(input_path)?;
    let t1 = std::time::Instant::now();
    let TrackingFrames { input, results, residual, reasons, mut out, mut rejects } = tracking_frames(lt, &df, input_path)?;
    let t2 = std::time::Instant::now();
    tracing::debug!(rows = df.height(), read_s = (t1 - t0).as_secs_f64(), columns_compute_frames_s = (t2 - t1).as_secs_f64(), "tracking batch");
    let good: Vec<usize> = (0..results.len()).filter(|i| results[*i].is_ok()).collect();
    let mut summary = RunSummary::new(df.height(), out.height(), rejects.height(), output_path, &reasons);

    // Per kind and station: rows, rejected, weighted RMS, χ²/N (names
    // borrowed from the input: no string per row).
    let mut groups: BTreeMap<(&str, &str), (Vec<f64>, Vec<f64>, usize)> = BTreeMap::new();
    let mut k = 0;
    for (i, r) in results.iter().enumerate() {
        let key = (input.kind[i].as_deref().unwrap_or("(null)"), input.rx_station[i].as_deref().unwrap_or("(null)"));
        let e = groups.entry(key).or_default();
        if r.is_ok() {
            e.0.push(residual[k]);
            e.1.push(input.sigma[i].unwrap_or(1.0));
            k += 1;
        } else {
            e.2 += 1;
        }
    }
    summary.notes.push(format!("  {:<16} {:<12} {:>7} {:>9} {:>16} {:>9}", "kind", "station", "rows", "rejected", "weighted RMS", "χ²/N"));
    for ((kind, st), (r, s, rej)) in &groups {
        let x = residual_summary(r, s, false);
        let unit = if kind.starts_with("doppler") { "Hz" } else { "s" };
        summary.notes.push(format!("  {kind:<16} {st:<12} {:>7} {:>9} {:>13.4e} {unit:<2} {:>9.3}", x.count, rej, x.weighted_rms_s, if x.count > 0 { x.chi2 / x.count as f64 } else { 0.0 }));
    }

    let (lo, hi) = input.day.iter().flatten().fold((i64::MAX, i64::MIN), |(a, b), d| (a.min(*d), b.max(*d)));
    prov.set("input.observations.0.bytes", &std::fs::metadata(input_path).map(|m| m.len()).unwrap_or(0).to_string());
    if lo <= hi {
        prov.set("input.observations.0.coverage", &format!("reception MJD {lo} … {hi}"));
    }
    prov.set_rows(summary.rows_in, summary.rows_out, summary.rows_rejected);
    let metadata = prov.finish();
    let t3 = std::time::Instant::now();
    write_parquet(&mut rejects, &rejects_path(output_path), &metadata)?;
    write_parquet(&mut out, output_path, &metadata)?;
    tracing::debug!(summary_s = (t3 - t2).as_secs_f64(), write_s = t3.elapsed().as_secs_f64(), "wrote {}", output_path.display());
    if plots {
        // One plot per observable kind, per station, in natural units.
        let mut kinds: Vec<String> = good.iter().map(|i| input.kind[*i].unwrap_or_default().to_string()).collect();
        kinds.sort();
        kinds.dedup();
        for kind in kinds {
            let sel: Vec<usize> = (0..good.len()).filter(|j| input.kind[good[*j]].as_deref() == Some(kind.as_str())).collect();
            let (scale, unit) = if kind.starts_with("doppler") { (1e3, "mHz") } else { (1e9, "ns") };
            let labels: Vec<String> = sel.iter().map(|j| input.rx_station[good[*j]].unwrap_or_default().to_string()).collect();
            let t: Vec<f64> = sel.iter().map(|j| input.day[good[*j]].unwrap_or(0) as f64 + input.frac[good[*j]].unwrap_or(0.0)).collect();
            let y: Vec<f64> = sel.iter().map(|j| residual[*j] * scale).collect();
            let sg: Vec<f64> = sel.iter().map(|j| input.sigma[good[*j]].unwrap_or(0.0) * scale).collect();
            let groups = crate::plots::group(&labels, &t, &y, &sg);
            let written = crate::plots::residual_plots(output_path, &format!("residuals_{kind}"), &format!("{kind} residuals"), "reception time (MJD, UTC)", &format!("residual ({unit})"), &groups)
                .map_err(|message| PipelineError::Invalid { path: output_path.into(), message })?;
            summary.plots.extend(written);
        }
    }
    Ok(summary)
}

/// Writes synthetic tracking measurements: the computed observable of every
/// planned row plus optional Gaussian noise of its `sigma` (plan CSV header
/// `kind,rx_station,tx_station,rx_mjd,count_s,uplink_hz,sigma`).
pub fn synthesize_tracking(file: &PipelineFile, plan: &Path, out: &Path, noise: bool, seed: u64) -> Result<usize, PipelineError> {
    let text = std::fs::read_to_string(plan).map_err(|source| PipelineError::Read { path: plan.into(), source })?;
    let bad = |line: usize, m: String| PipelineError::Invalid { path: plan.into(), message: format!("line {line}: {m}") };
    let (mut kind, mut rx, mut tx, mut day, mut frac, mut count, mut up, mut sig) = (vec![], vec![], vec![], vec![], vec![], vec![], vec![], vec![]);
    for row in crate::io::csv_lines(&text, &["kind", "rx_station", "tx_station", "rx_mjd", "count_s", "uplink_hz", "sigma"]).map_err(|(line, m)| bad(line, m))? {
        let f = &row.fields;
        let num = |s: &str, w: &str| s.parse::<f64>().map_err(|_| bad(row.line, format!("{w} '{s}' is not a number")));
        let mjd = num(f[3], "rx_mjd")?;
        kind.push(Some(f[0]));
        rx.push(Some(f[1]));
        tx.push(if f[2].is_empty() { None } else { Some(f[2]) });
        day.push(Some(mjd.floor() as i64));
        frac.push(Some(mjd - mjd.floor()));
        count.push(Some(num(f[4], "count_s")?));
        up.push(Some(num(f[5], "uplink_hz")?));
        sig.push(Some(num(f[6], "sigma")?));
    }
    let n = kind.len();
    let ids: Vec<Option<String>> = (0..n).map(|i| Some(format!("{}-{i:05}", kind[i].unwrap_or("")))).collect();
    let input = TrackingInput { obs_id: ids.iter().map(|s| s.as_deref()).collect(), kind, rx_station: rx, tx_station: tx, day, frac, count_s: count, uplink_hz: up, value: vec![None; n], sigma: sig };
    let mut lt = load_tracking(file)?;
    let res = compute_tracking(&mut lt, &input, false);
    let mut values = Vec::with_capacity(n);
    for (i, r) in res.iter().enumerate() {
        let r = r.as_ref().map_err(|e| bad(0, format!("plan row {}: {e}", i + 1)))?;
        let s = input.sigma[i].unwrap_or(0.0);
        values.push(r.computed + if noise { s * super::pulsar::gaussian(seed, i as u64) } else { 0.0 });
    }
    let mut df = DataFrame::new_infer_height(vec![
        Column::new("obs_id".into(), input.obs_id),
        Column::new("kind".into(), input.kind),
        Column::new("rx_station".into(), input.rx_station),
        Column::new("tx_station".into(), input.tx_station),
        Column::new("rx_mjd_day".into(), input.day),
        Column::new("rx_mjd_frac".into(), input.frac),
        Column::new("count_s".into(), input.count_s),
        Column::new("uplink_hz".into(), input.uplink_hz),
        Column::new("value".into(), values),
        Column::new("sigma".into(), input.sigma),
    ])
    .map_err(|e| PipelineError::Invalid { path: out.into(), message: e.to_string() })?;
    let mut prov = Provenance::start(file);
    prov.set("synth.plan", &plan.display().to_string());
    prov.set("synth.noise", if noise { "gaussian, each row's sigma" } else { "none" });
    prov.set("synth.seed", &seed.to_string());
    prov.set_rows(n, n, 0);
    write_parquet(&mut df, out, &prov.finish())?;
    Ok(n)
}
