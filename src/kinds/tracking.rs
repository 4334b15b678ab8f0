//! `kind = "tracking"`: station range and Doppler measurements of a
//! spacecraft → light-time solutions, computed observables and residuals.
//! See the README for the table and column contract.
//!
//! Units are in the column names: light-time rows fill `computed_s`,
//! `residual_s`, `value_s`, `sigma_s`; Doppler rows fill `computed_hz`,
//! `residual_hz`, `value_hz`, `sigma_hz`; the other unit's columns are null.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use polars::prelude::*;
use serde::Deserialize;

use crate::constants::Constants;
use crate::delays::shapiro_bodies;
use crate::ephemeris::body_id;
use crate::io::Columns;
use crate::parallel::Exec;
use crate::pipeline::preflight::{Facts, Level, Preflight, check_coverage, check_earth, unknown_codes};
use crate::pipeline::provenance::kernel_coverage;
use crate::pipeline::shared::{EarthCfg, EphemerisCfg, OutputCfg, SharedInputs, StationsCfg, TimeCfg, load_shared, shared_provenance};
use crate::pipeline::table::assemble;
use crate::pipeline::tally::{PlotSpec, ResidualSet, Tally, Unit};
use crate::pipeline::{IoPaths, Kind, PipelineError, PipelineFile, Processed, Provenance, SynthOptions};
use crate::reject::{Reject, RejectCode};
use crate::stats::gaussian;
use crate::tracking::observables::{Kind as Observable, Measurement, TrackingContext, TrackingResult};
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
    time: Option<TimeCfg>,
    stations: StationsCfg,
    target: TargetCfg,
    #[serde(default)]
    corrections: CorrectionsCfg,
    output: OutputCfg,
}

/// A loaded tracking pipeline.
#[derive(Debug)]
pub struct Tracking {
    pub ctx: TrackingContext,
    pub paths: IoPaths,
    pub inputs: Vec<(String, PathBuf, String)>,
    pub constants: Constants,
    /// The spacecraft and the pipeline, for plot titles.
    pub label: String,
}

/// An epoch as (MJD day, fraction of the day).
type DayFrac = (i64, f64);

/// The computed columns, in output order.
const OUTPUT_COLUMNS: [&str; 20] = [
    "computed_s",
    "computed_hz",
    "residual_s",
    "residual_hz",
    "value_s",
    "value_hz",
    "sigma_s",
    "sigma_hz",
    "light_time_down_s",
    "light_time_up_s",
    "shapiro_down_s",
    "shapiro_up_s",
    "clock_rx_s",
    "clock_tx_s",
    "bounce_tdb_mjd_day",
    "bounce_tdb_mjd_frac",
    "tx_mjd_day",
    "tx_mjd_frac",
    "elevation_rx_deg",
    "troposphere_s",
];

/// True for Doppler observables (values in Hz), by their input name.
fn is_doppler(kind: &str) -> bool {
    kind.starts_with("doppler")
}

impl Tracking {
    /// Loads the shared inputs of a tracking pipeline once.
    pub fn load(file: &PipelineFile) -> Result<Self, PipelineError> {
        let cfg: TrackingPipeline = file.parse()?;
        let invalid = |message: String| file.invalid(message);
        let SharedInputs { mut ephemeris, constants, earth, stations, mut inputs } = load_shared(file, &cfg.ephemeris, &cfg.earth, cfg.time.as_ref(), &cfg.stations)?;
        let target = match &cfg.target.body {
            toml::Value::Integer(i) => i32::try_from(*i).map_err(|_| invalid(format!("[target] body {i} is not a NAIF id")))?,
            toml::Value::String(s) => body_id(s, &[]).ok_or_else(|| invalid(format!("[target] body '{s}' is not a known name or NAIF id")))?,
            other => return Err(invalid(format!("[target] body = {other}: give a NAIF id or name"))),
        };
        for p in &cfg.target.oem {
            let p = file.resolve(p);
            let k = crate::ephemeris::oem::load_oem(&p, target, &earth.time).map_err(|e| invalid(format!("[target] oem: {e}")))?;
            inputs.push(("oem".into(), p, kernel_coverage(&k)));
            ephemeris.add_kernel(k);
        }
        if ephemeris.kernels().iter().all(|k| k.segments.iter().all(|s| s.target != target)) {
            return Err(invalid(format!("[target] body {target}: no loaded kernel holds it")));
        }
        let names = cfg.corrections.shapiro_bodies.clone().unwrap_or_else(|| vec!["sun".to_string()]);
        let shapiro = shapiro_bodies(&names, &constants.ephemeris).map_err(|e| invalid(format!("[corrections] {e}")))?;
        file.check_range("[corrections] ppn_gamma", cfg.corrections.ppn_gamma.unwrap_or(1.0), 0.0, 2.0)?;
        file.check_range("[target] transponder_delay_s", cfg.target.transponder_delay_s, 0.0, 1.0)?;
        let ppn_gamma = cfg.corrections.ppn_gamma.unwrap_or(1.0);
        if !ppn_gamma.is_finite() || !cfg.target.transponder_delay_s.is_finite() || cfg.target.transponder_delay_s < 0.0 {
            return Err(invalid("[corrections] ppn_gamma and [target] transponder_delay_s must be finite (delay ≥ 0)".into()));
        }
        let turnaround = match cfg.target.turnaround_ratio {
            Some([a, b]) if a.is_finite() && b.is_finite() && a > 0.0 && b > 0.0 => Some((a, b)),
            Some(r) => return Err(invalid(format!("[target] turnaround_ratio {r:?} must be two positive numbers"))),
            None => None,
        };
        let field = PointMassField::solar_system(&constants.ephemeris).map_err(|e| invalid(e.to_string()))?;
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
        let ctx = TrackingContext { ephemeris, earth, stations, target, shapiro, ppn_gamma, transponder_delay_s: cfg.target.transponder_delay_s, turnaround, field, troposphere };
        Ok(Tracking {
            ctx,
            paths: IoPaths::resolve(file, &cfg.input.path, &cfg.output.path),
            label: format!("{} ({})", crate::ephemeris::body_name(target), file.path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default()),
            inputs,
            constants,
        })
    }

    /// Computes every row (Err = reject reason), in input order.
    pub fn compute(&mut self, input: &TrackingInput, check_values: bool, exec: &Exec) -> Vec<Result<TrackingResult, Reject>> {
        self.ctx.cover_batch_days(&input.day);
        let n = input.obs_id.len();
        let mut out: Vec<Result<TrackingResult, Reject>> = Vec::with_capacity(n);
        let mut rows: Vec<Measurement> = Vec::with_capacity(n);
        let mut index = Vec::with_capacity(n);
        for i in 0..n {
            match input.measurement(i, check_values) {
                Ok(m) => {
                    rows.push(m);
                    index.push(i);
                    out.push(Err(Reject::missing("row")));
                }
                Err(e) => out.push(Err(e)),
            }
        }
        let computed = self.ctx.compute_batch(&rows, exec).into_iter().map(|r| r.map_err(|e| Reject::from_error(&e)).and_then(finite));
        if index.len() == n {
            // Every row computed: the results are already in input order.
            return computed.collect();
        }
        for (k, r) in index.into_iter().zip(computed) {
            out[k] = r;
        }
        out
    }
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

/// Valid range of `sigma`: light time 1e-15 … 1e3 s, Doppler 1e-9 … 1e6 Hz
/// (outside it the weights 1/σ² lose meaning or overflow).
pub const SIGMA_S_RANGE: (f64, f64) = (1e-15, 1e3);
/// See [`SIGMA_S_RANGE`].
pub const SIGMA_HZ_RANGE: (f64, f64) = (1e-9, 1e6);

impl<'a> TrackingInput<'a> {
    /// Row `i` as a measurement, or why it cannot be computed from its
    /// values alone (the same check in `lapse check` and `lapse run`);
    /// `check_values`: also the measured value and its σ.
    pub fn measurement(&self, i: usize, check_values: bool) -> Result<Measurement<'a>, Reject> {
        let kind: Observable = self.kind[i].ok_or_else(|| Reject::missing("kind"))?.parse().map_err(|e| Reject::from_error(&e))?;
        let rx = self.rx_station[i].ok_or_else(|| Reject::missing("rx_station"))?;
        let day = self.day[i].ok_or_else(|| Reject::missing("rx_mjd_day"))?;
        let frac = self.frac[i].ok_or_else(|| Reject::missing("rx_mjd_frac"))?;
        let count_s = self.count_s[i].unwrap_or(f64::NAN);
        let uplink_hz = self.uplink_hz[i].unwrap_or(f64::NAN);
        if check_values {
            let v = self.value[i].ok_or_else(|| Reject::missing("value"))?;
            let s = self.sigma[i].ok_or_else(|| Reject::missing("sigma"))?;
            let invalid = |m: String| Reject::new(RejectCode::InvalidValue, m);
            if !v.is_finite() {
                return Err(invalid(format!("value invalid: {v:?} is not finite")));
            }
            if !(s.is_finite() && s > 0.0) {
                return Err(invalid(format!("sigma invalid: {s:?} (must be positive)")));
            }
            let light_time = matches!(kind, Observable::LightTime2Way | Observable::LightTime1Way);
            let ((lo, hi), unit) = if light_time { (SIGMA_S_RANGE, "s") } else { (SIGMA_HZ_RANGE, "Hz") };
            if !(lo..=hi).contains(&s) {
                return Err(invalid(format!("sigma invalid: {s:?} outside {lo:e} … {hi:e} {unit}")));
            }
            if light_time && v <= 0.0 {
                return Err(invalid(format!("value invalid: light time {v} s must be positive")));
            }
        }
        Ok(Measurement { kind, rx_station: rx, tx_station: self.tx_station[i], rx_mjd_day: day, rx_mjd_frac: frac, count_s, uplink_hz })
    }
}

/// A computed row with any non-finite value becomes a reject (never a row
/// of data).
fn finite(r: TrackingResult) -> Result<TrackingResult, Reject> {
    let values = [r.computed, r.light_time_down_s, r.shapiro_down_s, r.clock_rx_s, r.troposphere_s, r.light_time_up_s.unwrap_or(0.0), r.shapiro_up_s.unwrap_or(0.0), r.clock_tx_s.unwrap_or(0.0)];
    if values.iter().all(|v| v.is_finite()) { Ok(r) } else { Err(Reject::new(RejectCode::NotFinite, format!("non-finite result: {values:?}"))) }
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

impl Kind for Tracking {
    fn name(&self) -> &'static str {
        "tracking"
    }

    fn paths(&self) -> &IoPaths {
        &self.paths
    }

    fn paths_mut(&mut self) -> &mut IoPaths {
        &mut self.paths
    }

    fn provenance(&self, file: &PipelineFile) -> Result<Provenance, PipelineError> {
        let mut base = shared_provenance(file, &self.inputs, &self.constants, &self.ctx.shapiro, self.ctx.ppn_gamma)?;
        base.set("target.naif_id", &self.ctx.target.to_string());
        base.set("target.transponder_delay_s", &format!("{:e}", self.ctx.transponder_delay_s));
        base.set(
            "corrections.troposphere",
            match &self.ctx.troposphere {
                Some(_) => "Saastamoinen 1972 zenith + Black & Eisner 1984 mapping",
                None => "off",
            },
        );
        Ok(base)
    }

    fn output_columns(&self) -> Vec<String> {
        OUTPUT_COLUMNS.map(String::from).into()
    }

    fn loaded(&self) -> String {
        "kernels, EOP, stations loaded".into()
    }

    fn scan(&self, df: &DataFrame, path: &Path, facts: &mut Facts) -> Result<(), PipelineError> {
        let i = read_tracking_input(df, path)?;
        facts.add(&i.day, &i.frac, Some(&i.rx_station), Some(&i.tx_station), Some(&i.kind));
        facts.count_problems((0..df.height()).filter_map(|k| i.measurement(k, true).err()));
        Ok(())
    }

    fn check(&self, p: &mut Preflight, facts: &Facts) {
        let Some(s) = facts.span() else { return };
        let mut bodies = vec![399, self.ctx.target];
        bodies.extend(self.ctx.shapiro.iter().map(|b| b.naif_id));
        let bad_kinds: Vec<&str> = facts.kinds.iter().filter(|k| k.parse::<Observable>().is_err()).map(String::as_str).collect();
        if !bad_kinds.is_empty() {
            p.add(Level::Problem, format!("unknown kinds: {}", bad_kinds.join(", ")));
        }
        unknown_codes(p, &self.ctx.stations, "rx_station", &facts.codes);
        unknown_codes(p, &self.ctx.stations, "tx_station", &facts.codes2);
        check_coverage(p, &self.ctx.ephemeris, &bodies, &s);
        check_earth(p, &self.ctx.earth, &s, &facts.days);
    }

    fn process(&mut self, df: &DataFrame, source: &Path, exec: &Exec) -> Result<Processed, PipelineError> {
        let input = read_tracking_input(df, source)?;
        let results = self.compute(&input, true, exec);
        let ok: Vec<bool> = results.iter().map(|r| r.is_ok()).collect();
        let good: Vec<(usize, &TrackingResult)> = results.iter().enumerate().filter_map(|(i, r)| r.as_ref().ok().map(|g| (i, g))).collect();
        let residual: Vec<f64> = good.iter().map(|(i, g)| input.value[*i].unwrap_or(f64::NAN) - g.computed).collect();
        let doppler: Vec<bool> = good.iter().map(|(i, _)| input.kind[*i].is_some_and(is_doppler)).collect();
        let ts = &self.ctx.earth.time;
        let parts = |e: &crate::time::Epoch| ts.mjd_parts(e).unwrap_or((e.mjd_day(), f64::NAN));
        // Exact day fractions (a 128-bit correction each): in parallel, order kept.
        use rayon::prelude::*;
        let (bounce, tx): (Vec<DayFrac>, Vec<Option<DayFrac>>) = good.par_iter().map(|(_, g)| (parts(&g.bounce_tdb), g.tx_utc.as_ref().map(parts))).unzip();
        let fcol = |n: &str, v: Vec<f64>| Column::new(n.into(), v);
        let ocol = |n: &str, v: Vec<Option<f64>>| Column::new(n.into(), v);
        // A value in the column of its unit: light time (s) or Doppler (Hz).
        let by_unit = |n: &str, hz: bool, v: &dyn Fn(usize) -> f64| ocol(n, (0..good.len()).map(|k| (doppler[k] == hz).then(|| v(k))).collect());
        let value = |k: usize| input.value[good[k].0].unwrap_or(f64::NAN);
        let sigma = |k: usize| input.sigma[good[k].0].unwrap_or(f64::NAN);
        let computed_v = |k: usize| good[k].1.computed;
        let residual_v = |k: usize| residual[k];
        let computed = vec![
            by_unit("computed_s", false, &computed_v),
            by_unit("computed_hz", true, &computed_v),
            by_unit("residual_s", false, &residual_v),
            by_unit("residual_hz", true, &residual_v),
            by_unit("value_s", false, &value),
            by_unit("value_hz", true, &value),
            by_unit("sigma_s", false, &sigma),
            by_unit("sigma_hz", true, &sigma),
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
        let reasons: Vec<Reject> = results.iter().filter_map(|r| r.as_ref().err().cloned()).collect();
        let (output, rejects) = assemble(df, source, &ok, &reasons, computed, &["value", "sigma"])?;
        // Residual sets per observable, grouped by receiving station.
        let mut tally = Tally::default();
        tally.count_rejects(&reasons);
        tally.cover_days("reception", &input.day);
        let mut k = 0;
        for (i, r) in results.iter().enumerate() {
            let kind = input.kind[i].unwrap_or("(null)");
            let station = input.rx_station[i].unwrap_or("(null)");
            let set = tally.set(kind, || residual_set(kind, &self.label));
            if r.is_ok() {
                let mjd = input.day[i].unwrap_or(0) as f64 + input.frac[i].unwrap_or(0.0);
                set.push(station, mjd, residual[k], input.sigma[i].unwrap_or(1.0));
                k += 1;
            } else {
                set.reject(station);
            }
        }
        Ok(Processed { output, rejects, tally })
    }

    /// Measurements computed for a plan (CSV header
    /// `kind,rx_station,tx_station,rx_mjd,count_s,uplink_hz,sigma`) plus
    /// optional Gaussian noise of each row's `sigma`.
    fn synthesise(&mut self, plan: &Path, opts: &SynthOptions) -> Result<DataFrame, PipelineError> {
        if opts.noise_s.is_some() {
            return Err(PipelineError::Input { path: plan.into(), message: "a fixed noise σ is for pulsar pipelines; tracking noise comes from each row's sigma".into() });
        }
        let text = std::fs::read_to_string(plan).map_err(|source| crate::io::IoError::Open { path: plan.into(), source })?;
        let bad = |line: usize, m: String| PipelineError::Input { path: plan.into(), message: format!("line {line}: {m}") };
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
        let input =
            TrackingInput { obs_id: ids.iter().map(|s| s.as_deref()).collect(), kind, rx_station: rx, tx_station: tx, day, frac, count_s: count, uplink_hz: up, value: vec![None; n], sigma: sig };
        let res = self.compute(&input, false, &Exec::default());
        let mut values = Vec::with_capacity(n);
        for (i, r) in res.iter().enumerate() {
            let r = r.as_ref().map_err(|e| bad(0, format!("plan row {}: {e}", i + 1)))?;
            let s = input.sigma[i].unwrap_or(0.0);
            values.push(r.computed + if opts.noise_from_sigma { s * gaussian(opts.seed, i as u64) } else { 0.0 });
        }
        DataFrame::new_infer_height(vec![
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
        .map_err(|e| PipelineError::frame(plan, e))
    }
}

/// The residual set of one observable: light time in s (shown in ns),
/// Doppler in Hz (shown in mHz).
fn residual_set(kind: &str, label: &str) -> ResidualSet {
    let (natural, unit) = if is_doppler(kind) { ("hz", Unit { name: "mHz", per_natural: 1e3 }) } else { ("s", Unit { name: "ns", per_natural: 1e9 }) };
    ResidualSet::new(
        kind,
        &format!("{kind} residuals"),
        "station",
        natural,
        unit,
        PlotSpec { name: format!("residuals_{kind}"), title: format!("{label}: {kind} residuals"), x_label: "reception time (MJD, UTC)".into(), unit },
    )
}
