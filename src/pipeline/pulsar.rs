//! `kind = "pulsar"`: site arrival times → barycentric arrival times, every
//! delay term and spin residuals. See the README for the table and column
//! contract.

use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};

use polars::prelude::*;
use serde::Deserialize;

use super::{PipelineError, PipelineFile, Provenance, RunSummary, assemble, check_unique_ids, rejects_path};
use crate::constants::Constants;
use crate::delays::{DISPERSION_K_S_MHZ2_CM3_PC, MAS_TO_RAD, Source};
use crate::earth::{EarthModel, EopTable, StationCatalog};
use crate::ephemeris::Ephemeris;
use crate::io::{Columns, read_parquet, write_parquet};
use crate::pulsar::clock::ClockTable;
use crate::pulsar::{Arrival, ArrivalResult, PulsarContext, SpinModel, residual_summary, shapiro_bodies, weighted_mean};
use crate::time::{LeapSecondTable, TimeScale, TimeScales};

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct InputCfg {
    path: PathBuf,
    /// "utc" (default) or "site": site-clock times corrected by [clocks].
    #[serde(default = "utc")]
    time_scale: String,
}

fn utc() -> String {
    "utc".into()
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EphemerisCfg {
    pub kernels: Vec<PathBuf>,
    /// Constants file (GM values); default: the built-in DE421 constants.
    pub constants: Option<PathBuf>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EarthCfg {
    pub eop: PathBuf,
    pub leap_seconds: Option<PathBuf>,
    /// Apply the celestial pole offsets dX, dY (default true).
    #[serde(default = "yes")]
    pub pole_offsets: bool,
}

fn yes() -> bool {
    true
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StationsCfg {
    pub catalog: PathBuf,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct ClocksCfg {
    #[serde(default)]
    allow_extrapolation: bool,
    /// Site code → chain of tables (site clock → … → UTC).
    #[serde(default)]
    sites: BTreeMap<String, Vec<PathBuf>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct SourceCfg {
    #[allow(dead_code)]
    name: Option<String>,
    ra_deg: f64,
    dec_deg: f64,
    position_epoch_mjd: f64,
    pm_ra_cosdec_mas_per_yr: Option<f64>,
    pm_dec_mas_per_yr: Option<f64>,
    parallax_mas: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct SpinCfg {
    frequency_hz: f64,
    #[serde(default)]
    derivatives: Vec<f64>,
    epoch_mjd: f64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct DispersionCfg {
    measure_pc_cm3: f64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct CorrectionsCfg {
    shapiro_bodies: Option<Vec<String>>,
    ppn_gamma: Option<f64>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct ResidualsCfg {
    #[serde(default)]
    subtract_weighted_mean: bool,
}

/// `[output]`: where the results table goes (rejects beside it).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OutputCfg {
    pub path: PathBuf,
}

/// The configuration of a `pulsar` pipeline.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PulsarPipeline {
    #[allow(dead_code)]
    kind: String,
    input: InputCfg,
    ephemeris: EphemerisCfg,
    earth: EarthCfg,
    stations: StationsCfg,
    #[serde(default)]
    clocks: ClocksCfg,
    source: SourceCfg,
    spin: SpinCfg,
    dispersion: Option<DispersionCfg>,
    corrections: Option<CorrectionsCfg>,
    #[serde(default)]
    residuals: ResidualsCfg,
    output: OutputCfg,
}

/// Default Shapiro bodies for pulsar timing (REFERENCE.md §5).
pub const DEFAULT_PULSAR_SHAPIRO: &[&str] = &["sun", "venus", "jupiter", "saturn", "uranus", "neptune"];

/// A loaded pulsar pipeline: its context, where its files are, and options.
#[derive(Debug)]
pub struct LoadedPulsar {
    pub ctx: PulsarContext,
    pub input_path: PathBuf,
    pub output_path: PathBuf,
    pub subtract_weighted_mean: bool,
    /// Input files: role, path, coverage text (for provenance).
    pub inputs: Vec<(String, PathBuf, String)>,
    pub constants: Constants,
}

/// Loads everything a pulsar pipeline shares (kernels, EOP, stations,
/// clocks, model) once.
pub fn load_pulsar(file: &PipelineFile) -> Result<LoadedPulsar, PipelineError> {
    let cfg: PulsarPipeline = file.parse()?;
    let invalid = |message: String| PipelineError::Invalid { path: file.path.clone(), message };
    let input_is_site_clock = match cfg.input.time_scale.as_str() {
        "utc" => false,
        "site" => true,
        other => return Err(invalid(format!("[input] time_scale = '{other}': use \"utc\" or \"site\""))),
    };
    let SharedInputs { ephemeris, constants, earth, stations, mut inputs } = load_shared(file, &cfg.ephemeris, &cfg.earth, &cfg.stations)?;
    let mut clocks = HashMap::new();
    for (site, chain) in &cfg.clocks.sites {
        stations.get(site).map_err(|e| invalid(format!("[clocks] sites: {e}")))?;
        let mut tables = Vec::with_capacity(chain.len());
        for p in chain {
            let p = file.resolve(p);
            let t = ClockTable::from_file(&p).map_err(|e| invalid(format!("[clocks] {e}")))?;
            let (a, b) = t.span_mjd();
            inputs.push((format!("clock:{site}"), p, format!("MJD {a} … {b}")));
            tables.push(t);
        }
        clocks.insert(site.clone(), tables);
    }
    let s = &cfg.source;
    for (name, v) in [("ra_deg", s.ra_deg), ("dec_deg", s.dec_deg), ("position_epoch_mjd", s.position_epoch_mjd)] {
        if !v.is_finite() {
            return Err(invalid(format!("[source] {name} is not finite")));
        }
    }
    if s.dec_deg.abs() > 90.0 {
        return Err(invalid(format!("[source] dec_deg = {} is outside ±90°", s.dec_deg)));
    }
    let tdb_epoch_s = |mjd: f64, what: &str| -> Result<f64, PipelineError> {
        let e = earth.time.epoch_from_mjd(TimeScale::Tdb, mjd.floor() as i64, mjd - mjd.floor()).map_err(|e| invalid(format!("{what}: {e}")))?;
        let (w, f) = e.seconds_since_j2000();
        Ok(w as f64 + f)
    };
    let source = Source {
        ra_rad: s.ra_deg.to_radians(),
        dec_rad: s.dec_deg.to_radians(),
        position_epoch_tdb_s: tdb_epoch_s(s.position_epoch_mjd, "[source] position_epoch_mjd")?,
        pm_ra_cosdec_rad_yr: s.pm_ra_cosdec_mas_per_yr.unwrap_or(0.0) * MAS_TO_RAD,
        pm_dec_rad_yr: s.pm_dec_mas_per_yr.unwrap_or(0.0) * MAS_TO_RAD,
        parallax_rad: s.parallax_mas.unwrap_or(0.0) * MAS_TO_RAD,
    };
    if !(source.pm_ra_cosdec_rad_yr.is_finite() && source.pm_dec_rad_yr.is_finite() && source.parallax_rad.is_finite() && source.parallax_rad >= 0.0) {
        return Err(invalid("[source] proper motion and parallax must be finite, parallax ≥ 0".into()));
    }
    let sp = &cfg.spin;
    if !(sp.frequency_hz.is_finite() && sp.frequency_hz > 0.0) || sp.derivatives.iter().any(|d| !d.is_finite()) || !sp.epoch_mjd.is_finite() {
        return Err(invalid("[spin] frequency_hz must be positive, derivatives and epoch_mjd finite".into()));
    }
    let spin_epoch = earth.time.epoch_from_mjd(TimeScale::Tdb, sp.epoch_mjd.floor() as i64, sp.epoch_mjd - sp.epoch_mjd.floor()).map_err(|e| invalid(format!("[spin] epoch_mjd: {e}")))?;
    let spin = SpinModel { epoch: spin_epoch, frequency_hz: sp.frequency_hz, derivatives: sp.derivatives.clone() };
    let dm_pc_cm3 = cfg.dispersion.as_ref().map(|d| d.measure_pc_cm3).unwrap_or(0.0);
    if !(dm_pc_cm3.is_finite() && dm_pc_cm3 >= 0.0) {
        return Err(invalid("[dispersion] measure_pc_cm3 must be finite and ≥ 0".into()));
    }
    let names: Vec<String> = match cfg.corrections.as_ref().and_then(|c| c.shapiro_bodies.clone()) {
        Some(v) => v,
        None => DEFAULT_PULSAR_SHAPIRO.iter().map(|s| s.to_string()).collect(),
    };
    let shapiro = shapiro_bodies(&names, &constants.ephemeris).map_err(|e| invalid(format!("[corrections] {e}")))?;
    let ppn_gamma = cfg.corrections.as_ref().and_then(|c| c.ppn_gamma).unwrap_or(1.0);
    if !ppn_gamma.is_finite() {
        return Err(invalid("[corrections] ppn_gamma must be finite".into()));
    }
    let ctx = PulsarContext {
        ephemeris,
        earth,
        stations,
        clocks,
        input_is_site_clock,
        allow_clock_extrapolation: cfg.clocks.allow_extrapolation,
        source,
        spin,
        dm_pc_cm3,
        shapiro,
        ppn_gamma,
        chunk_rows: super::DEFAULT_CHUNK_ROWS,
        progress: None,
    };
    Ok(LoadedPulsar {
        ctx,
        input_path: file.resolve(&cfg.input.path),
        output_path: file.resolve(&cfg.output.path),
        subtract_weighted_mean: cfg.residuals.subtract_weighted_mean,
        inputs,
        constants,
    })
}

/// The inputs every pipeline kind with geometry shares, loaded once.
pub struct SharedInputs {
    pub ephemeris: Ephemeris,
    pub constants: Constants,
    pub earth: EarthModel,
    pub stations: StationCatalog,
    /// Role, path and coverage of each file read, for provenance.
    pub inputs: Vec<(String, PathBuf, String)>,
}

/// Loads `[ephemeris]`, `[earth]` and `[stations]` of a pipeline.
pub fn load_shared(file: &PipelineFile, eph: &EphemerisCfg, earth_cfg: &EarthCfg, st: &StationsCfg) -> Result<SharedInputs, PipelineError> {
    let invalid = |message: String| PipelineError::Invalid { path: file.path.clone(), message };
    let mut inputs: Vec<(String, PathBuf, String)> = Vec::new();
    let (time, leap_path) = load_time(file, earth_cfg.leap_seconds.as_deref())?;
    if let Some(p) = leap_path {
        inputs.push(("leap_seconds".into(), p, super::leap_coverage(time.leap_seconds())));
    }
    let kernels: Vec<PathBuf> = eph.kernels.iter().map(|k| file.resolve(k)).collect();
    if kernels.is_empty() {
        return Err(invalid("[ephemeris] kernels is empty".into()));
    }
    // The kernels and the EOP file are independent: read them concurrently.
    let eop_path = file.resolve(&earth_cfg.eop);
    fn timed<R>(what: &str, load: impl FnOnce() -> R) -> R {
        let t0 = std::time::Instant::now();
        let r = load();
        tracing::debug!(load_s = t0.elapsed().as_secs_f64(), "{what} loaded");
        r
    }
    let (ephemeris, eop) = rayon::join(|| timed("kernels", || Ephemeris::load(&kernels)), || timed("EOP", || EopTable::from_file(&eop_path)));
    let ephemeris = ephemeris.map_err(|e| invalid(format!("[ephemeris] {e}")))?;
    let eop = eop.map_err(|e| invalid(format!("[earth] {e}")))?;
    for (k, loaded) in kernels.iter().zip(ephemeris.kernels()) {
        inputs.push(("kernel".into(), k.clone(), super::kernel_coverage(loaded)));
    }
    let constants = match &eph.constants {
        Some(p) => {
            let p = file.resolve(p);
            inputs.push(("constants".into(), p.clone(), String::new()));
            Constants::from_file(&p).map_err(|e| invalid(e.to_string()))?
        }
        None => Constants::builtin(),
    };
    inputs.push(("eop".into(), eop_path, super::eop_coverage(&eop)));
    let mut earth = EarthModel::new(time, eop);
    earth.pole_offsets = earth_cfg.pole_offsets;
    let stations_path = file.resolve(&st.catalog);
    let stations = StationCatalog::from_file(&stations_path).map_err(|e| invalid(format!("[stations] {e}")))?;
    inputs.push(("stations".into(), stations_path, format!("{} stations", stations.stations().len())));
    Ok(SharedInputs { ephemeris, constants, earth, stations, inputs })
}

/// Provenance shared by every partition of a run with geometry: the
/// pipeline, every shared input file, and the constants used.
pub fn shared_provenance(file: &PipelineFile, inputs: &[(String, PathBuf, String)], constants: &Constants, shapiro: &[crate::delays::ShapiroBody], ppn_gamma: f64) -> Result<Provenance, PipelineError> {
    let mut base = Provenance::start(file);
    for (role, p, cov) in inputs {
        base.add_input(role, p, cov)?;
    }
    base.set("constants.ephemeris", &constants.ephemeris.name);
    for b in shapiro {
        base.set(&format!("constants.gm_m3_s2.{}", b.name), &format!("{:e}", b.gm_m3_s2));
    }
    base.set("constants.ppn_gamma", &format!("{ppn_gamma}"));
    base.set("constants.c_m_s", "299792458");
    Ok(base)
}

/// Time scales from an optional leap-second file of a pipeline.
pub(crate) fn load_time(file: &PipelineFile, leap: Option<&Path>) -> Result<(TimeScales, Option<PathBuf>), PipelineError> {
    match leap {
        Some(p) => {
            let p = file.resolve(p);
            let t = LeapSecondTable::from_file(&p).map_err(|source| PipelineError::Time { context: "[earth] leap_seconds".into(), source })?;
            Ok((TimeScales::new(t), Some(p)))
        }
        None => Ok((TimeScales::builtin(), None)),
    }
}

/// The input columns of a pulsar batch.
pub struct PulsarInput<'a> {
    pub obs_id: Vec<Option<&'a str>>,
    pub site: Vec<Option<&'a str>>,
    pub day: Vec<Option<i64>>,
    pub frac: Vec<Option<f64>>,
    pub freq_mhz: Vec<Option<f64>>,
    pub sigma_us: Vec<Option<f64>>,
}

/// Reads and type-checks the input columns (errors name file and column).
pub fn read_pulsar_input<'a>(df: &'a DataFrame, path: &Path) -> Result<PulsarInput<'a>, PipelineError> {
    let c = Columns { df, path };
    Ok(PulsarInput {
        obs_id: c.str_ref("obs_id")?,
        site: c.str_ref("site")?,
        day: c.i64("arrival_mjd_day")?,
        frac: c.f64("arrival_mjd_frac")?,
        freq_mhz: c.f64("freq_mhz")?,
        sigma_us: c.f64("sigma_us")?,
    })
}

/// Computes every row of a batch: results in input order (Err = reject reason).
pub fn compute_pulsar(lp: &mut LoadedPulsar, input: &PulsarInput) -> Vec<Result<ArrivalResult, String>> {
    lp.ctx.cover_batch_days(&input.day);
    let n = input.obs_id.len();
    // Rows rejected before computing: (row, reason), usually none.
    let mut pre: Vec<(usize, String)> = Vec::new();
    let mut arrivals: Vec<Arrival> = Vec::with_capacity(n);
    let mut index: Vec<usize> = Vec::with_capacity(n);
    for i in 0..n {
        let reason = match (&input.site[i], input.day[i], input.frac[i], input.freq_mhz[i], input.sigma_us[i]) {
            (None, ..) => Some("missing value: site is null".to_string()),
            (_, None, ..) => Some("missing value: arrival_mjd_day is null".to_string()),
            (_, _, None, ..) => Some("missing value: arrival_mjd_frac is null".to_string()),
            (_, _, _, None, _) => Some("missing value: freq_mhz is null".to_string()),
            (_, _, _, _, None) => Some("missing value: sigma_us is null".to_string()),
            (_, _, _, _, Some(s)) if !(s.is_finite() && s > 0.0) => Some(format!("sigma_us invalid: {s:?} (must be positive)")),
            _ => None,
        };
        match reason {
            Some(r) => pre.push((i, r)),
            None => {
                arrivals.push(Arrival {
                    site: input.site[i].unwrap_or(""),
                    mjd_day: input.day[i].unwrap_or(0),
                    mjd_frac: input.frac[i].unwrap_or(f64::NAN),
                    freq_mhz: input.freq_mhz[i].unwrap_or(f64::NAN),
                });
                index.push(i);
            }
        }
    }
    let computed = lp.ctx.process_batch(&arrivals);
    if pre.is_empty() {
        // Every row computed: the results are already in input order.
        return computed;
    }
    let mut out: Vec<Result<ArrivalResult, String>> = Vec::with_capacity(n);
    out.resize_with(n, || Err(String::new()));
    for (k, r) in index.into_iter().zip(computed) {
        out[k] = r;
    }
    for (k, reason) in pre {
        out[k] = Err(reason);
    }
    out
}

/// Runs a pulsar pipeline (one input file, or every partition of a folder
/// or glob, skipping partitions whose outputs are up to date).
pub fn run_pulsar(file: &PipelineFile, opts: &super::RunOptions) -> Result<RunSummary, PipelineError> {
    run_pulsar_loaded(file, load_pulsar(file)?, opts)
}

/// [`run_pulsar`] with the shared inputs already loaded (by the preflight).
pub fn run_pulsar_loaded(file: &PipelineFile, mut lp: LoadedPulsar, opts: &super::RunOptions) -> Result<RunSummary, PipelineError> {
    opts.override_paths(&mut lp.input_path, &mut lp.output_path);
    lp.ctx.chunk_rows = opts.chunk_rows;
    lp.ctx.progress = opts.progress.clone();
    let mut base = shared_provenance(file, &lp.inputs, &lp.constants, &lp.ctx.shapiro, lp.ctx.ppn_gamma)?;
    base.set("constants.dispersion_k_s_mhz2_cm3_pc", &format!("{DISPERSION_K_S_MHZ2_CM3_PC:e} (1/2.41e-4)"));
    let (input, output) = (lp.input_path.clone(), lp.output_path.clone());
    super::for_each_partition(&input, &output, &base, |inp, out, prov| run_pulsar_partition(&mut lp, inp, out, prov, opts.plots))
}

/// Rows above which a partition is streamed in slices (bounded memory);
/// `LAPSE_STREAM_ROWS` overrides it (tests use a small value).
pub const STREAM_ABOVE_ROWS: usize = 2_000_000;
/// Rows per slice when streaming; `LAPSE_STREAM_SLICE` overrides it.
pub const STREAM_SLICE_ROWS: usize = 500_000;

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).filter(|v: &usize| *v > 0).unwrap_or(default)
}

/// Output and rejects frames of one batch, with `offset` subtracted from
/// the residuals, and the compact per-row values the summary needs
/// (site, BAT MJD, residual, σ of accepted rows).
struct BatchFrames {
    out: DataFrame,
    rejects: DataFrame,
    reasons: Vec<String>,
    /// Site of each accepted row: index into `site_names`.
    site_names: Vec<String>,
    site_idx: Vec<u32>,
    rejected_sites: Vec<String>,
    bat_mjd: Vec<f64>,
    residual_s: Vec<f64>,
    sigma_s: Vec<f64>,
    eop_predicted: usize,
    clock_extrapolated: usize,
}

/// σ (s) and raw residual (s) of the accepted rows, in input order, from one
/// read of the (large) results.
fn accepted_sigma_and_residual_s(results: &[Result<ArrivalResult, String>], input: &PulsarInput) -> (Vec<f64>, Vec<f64>) {
    let (mut sigma_s, mut raw) = (Vec::with_capacity(results.len()), Vec::with_capacity(results.len()));
    for (r, s) in results.iter().zip(&input.sigma_us) {
        if let Ok(g) = r {
            sigma_s.push(s.unwrap_or(1.0) * 1e-6);
            raw.push(g.residual_s);
        }
    }
    (sigma_s, raw)
}

/// The frames of one batch; `sigma_s` from [`accepted_sigma_and_residual_s`].
fn batch_frames(lp: &LoadedPulsar, df: &DataFrame, input: &PulsarInput, input_path: &Path, results: &[Result<ArrivalResult, String>], sigma_s: Vec<f64>, offset: f64) -> Result<BatchFrames, PipelineError> {
    let ok: Vec<bool> = results.iter().map(|r| r.is_ok()).collect();
    let good: Vec<&ArrivalResult> = results.iter().filter_map(|r| r.as_ref().ok()).collect();
    let ts = &lp.ctx.earth.time;
    let parts = |e: &crate::time::Epoch| ts.mjd_parts(e).unwrap_or((e.mjd_day(), f64::NAN));
    let col_f = |name: &str, v: Vec<f64>| Column::new(name.into(), v);
    // One parallel pass over row chunks fills every value column — the exact
    // day fractions (one u128 correction each), the delays, the residual —
    // each chunk writing its own slice of each column: the results are large
    // structs, read once (at 10⁶ rows separate passes and the intermediate
    // vectors they built cost ≈ 0.2 s of memory traffic and page faults).
    use rayon::prelude::*;
    let (ng, nb) = (good.len(), lp.ctx.shapiro.len());
    const CHUNK: usize = 8192;
    // i64: tdb day, bat day, pulse number. f64: tdb and bat fractions, bat
    // MJD, residual, the six delays in output order, then the bodies.
    // Uninitialised: every slot is written by the pass below (zeroing 10⁶
    // rows × 20 columns first cost ≈ 70 ms).
    let mut ints: [Vec<i64>; 3] = std::array::from_fn(|_| Vec::with_capacity(ng));
    let mut vals: Vec<Vec<f64>> = (0..10 + nb).map(|_| Vec::with_capacity(ng)).collect();
    let mut flags: [Vec<bool>; 2] = std::array::from_fn(|_| Vec::with_capacity(ng));
    {
        use std::mem::MaybeUninit;
        type Slices<'s> = (Vec<&'s mut [MaybeUninit<i64>]>, Vec<&'s mut [MaybeUninit<f64>]>, Vec<&'s mut [MaybeUninit<bool>]>);
        let mut chunks: Vec<Slices> = (0..ng.div_ceil(CHUNK)).map(|_| Default::default()).collect();
        for c in ints.iter_mut() {
            c.spare_capacity_mut()[..ng].chunks_mut(CHUNK).zip(chunks.iter_mut()).for_each(|(s, k)| k.0.push(s));
        }
        for c in vals.iter_mut() {
            c.spare_capacity_mut()[..ng].chunks_mut(CHUNK).zip(chunks.iter_mut()).for_each(|(s, k)| k.1.push(s));
        }
        for c in flags.iter_mut() {
            c.spare_capacity_mut()[..ng].chunks_mut(CHUNK).zip(chunks.iter_mut()).for_each(|(s, k)| k.2.push(s));
        }
        chunks.into_par_iter().zip(good.par_chunks(CHUNK)).for_each(|((mut i, mut v, mut b), rows)| {
            for (k, g) in rows.iter().enumerate() {
                let ((td, tf), (bd, bf)) = (parts(&g.tdb), parts(&g.bat));
                i[0][k].write(td);
                i[1][k].write(bd);
                i[2][k].write(g.pulse_number);
                let row = [tf, bf, bd as f64 + bf, g.residual_s - offset, g.clock_s, g.einstein_s, g.roemer_s, g.parallax_s, g.shapiro_s, g.dispersion_s];
                for (col, x) in v.iter_mut().zip(row.iter().chain(&g.shapiro_body_s[..nb])) {
                    col[k].write(*x);
                }
                b[0][k].write(g.clock_extrapolated);
                b[1][k].write(g.eop_predicted);
            }
        });
    }
    // SAFETY: the chunks above cover 0..ng of every column (same CHUNK over
    // the same length, zipped with the rows), each slot written once; a panic
    // would have propagated before this point.
    unsafe {
        ints.iter_mut().for_each(|c| c.set_len(ng));
        vals.iter_mut().for_each(|c| c.set_len(ng));
        flags.iter_mut().for_each(|c| c.set_len(ng));
    }
    let [tdb_day, bat_day, pulse] = ints;
    let [clock_x, eop_p] = flags;
    let (clock_count, eop_count) = (clock_x.iter().filter(|b| **b).count(), eop_p.iter().filter(|b| **b).count());
    // Accepted rows' sites as indices into a short name table (no string per
    // row); consecutive rows mostly share a site.
    let site = |i: usize| input.site[i].unwrap_or("(null)");
    let (mut site_names, mut site_idx): (Vec<String>, Vec<u32>) = (Vec::new(), Vec::with_capacity(ng));
    let mut last: Option<(&str, u32)> = None;
    for i in (0..results.len()).filter(|i| ok[*i]) {
        let name = site(i);
        let j = match last {
            Some((n, j)) if n == name => j,
            _ => match site_names.iter().position(|n| n == name) {
                Some(j) => j as u32,
                None => {
                    site_names.push(name.to_string());
                    (site_names.len() - 1) as u32
                }
            },
        };
        last = Some((name, j));
        site_idx.push(j);
    }
    let mut vals = vals.into_iter();
    let mut next_col = || vals.next().unwrap_or_default();
    let (tdb_frac, bat_frac, bat_mjd, residual) = (next_col(), next_col(), next_col(), next_col());
    let mut computed = vec![
        Column::new("tdb_mjd_day".into(), tdb_day),
        col_f("tdb_mjd_frac", tdb_frac),
        Column::new("bat_mjd_day".into(), bat_day),
        col_f("bat_mjd_frac", bat_frac),
        col_f("clock_s", next_col()),
        col_f("einstein_s", next_col()),
        col_f("roemer_s", next_col()),
        col_f("parallax_s", next_col()),
        col_f("shapiro_s", next_col()),
    ];
    let dispersion_s = next_col();
    for b in &lp.ctx.shapiro {
        computed.push(col_f(&format!("shapiro_{}_s", b.name), next_col()));
    }
    computed.push(col_f("dispersion_s", dispersion_s));
    computed.push(col_f("residual_s", residual.clone()));
    computed.push(Column::new("pulse_number".into(), pulse));
    computed.push(Column::new("clock_extrapolated".into(), clock_x));
    computed.push(Column::new("eop_predicted".into(), eop_p));
    let reasons: Vec<String> = results.iter().filter_map(|r| r.as_ref().err().cloned()).collect();
    let (out, rejects) = assemble(df, input_path, &ok, &reasons, computed, &[])?;
    Ok(BatchFrames {
        out,
        rejects,
        reasons,
        site_names,
        site_idx,
        rejected_sites: (0..results.len()).filter(|i| !ok[*i]).map(|i| site(i).to_string()).collect(),
        bat_mjd,
        residual_s: residual,
        sigma_s,
        eop_predicted: eop_count,
        clock_extrapolated: clock_count,
    })
}

/// Summary notes, provenance entries and plots from a partition's compact
/// per-row values.
#[allow(clippy::too_many_arguments)]
fn finish_partition<S: AsRef<str>>(lp: &LoadedPulsar, summary: &mut RunSummary, prov: &mut Provenance, sites: &[S], rejected_sites: &[String], residual: &[f64], sigma_s: &[f64], offset: f64, eop_predicted: usize, clock_extrapolated: usize) {
    let stats = residual_summary(residual, sigma_s, false);
    summary.notes.push(format!(
        "residuals: {} rows, weighted RMS {:.3} ns, χ² {:.2} (χ²/N {:.3}){}",
        stats.count,
        stats.weighted_rms_s * 1e9,
        stats.chi2,
        if stats.count > 0 { stats.chi2 / stats.count as f64 } else { 0.0 },
        if lp.subtract_weighted_mean { format!(", weighted mean {:.3} ns removed", offset * 1e9) } else { String::new() }
    ));
    let mut by_site: BTreeMap<&str, (Vec<f64>, Vec<f64>, usize)> = BTreeMap::new();
    for ((s, r), sg) in sites.iter().zip(residual).zip(sigma_s) {
        let e = by_site.entry(s.as_ref()).or_default();
        e.0.push(*r);
        e.1.push(*sg);
    }
    for s in rejected_sites {
        by_site.entry(s.as_str()).or_default().2 += 1;
    }
    summary.notes.push(format!("  {:<14} {:>8} {:>9} {:>18} {:>12}", "site", "rows", "rejected", "weighted RMS (ns)", "χ²"));
    for (s, (r, sg, rej)) in &by_site {
        let st = residual_summary(r, sg, false);
        summary.notes.push(format!("  {s:<14} {:>8} {:>9} {:>18.3} {:>12.2}", st.count, rej, st.weighted_rms_s * 1e9, st.chi2));
    }
    if eop_predicted > 0 {
        summary.notes.push(format!("{eop_predicted} rows used PREDICTED Earth-orientation values (column eop_predicted)"));
    }
    if clock_extrapolated > 0 {
        summary.notes.push(format!("{clock_extrapolated} rows used EXTRAPOLATED clock corrections (column clock_extrapolated)"));
    }
    prov.set("residuals.count", &stats.count.to_string());
    prov.set("residuals.weighted_rms_s", &format!("{:e}", stats.weighted_rms_s));
    prov.set("residuals.chi2", &format!("{:e}", stats.chi2));
    prov.set("residuals.weighted_mean_removed_s", &format!("{offset:e}"));
    prov.set_rows(summary.rows_in, summary.rows_out, summary.rows_rejected);
}

/// Plots of a partition (at most 50 000 points per plot: every k-th row).
fn partition_plots<S: AsRef<str>>(output_path: &Path, sites: &[S], bat_mjd: &[f64], residual: &[f64], sigma_s: &[f64]) -> Result<Vec<PathBuf>, PipelineError> {
    let step = sites.len().div_ceil(50_000).max(1);
    let idx: Vec<usize> = (0..sites.len()).step_by(step).collect();
    let pick = |v: &[f64], scale: f64| idx.iter().map(|i| v[*i] * scale).collect::<Vec<f64>>();
    let labels: Vec<String> = idx.iter().map(|i| sites[*i].as_ref().to_string()).collect();
    let groups = crate::plots::group(&labels, &pick(bat_mjd, 1.0), &pick(residual, 1e6), &pick(sigma_s, 1e6));
    crate::plots::residual_plots(output_path, "residuals", "pulsar timing residuals", "barycentric arrival time (MJD, TDB)", "residual (µs)", &groups).map_err(|message| PipelineError::Invalid { path: output_path.into(), message })
}

/// One batch, in memory: the output and rejects frames exactly as a run
/// writes them (the weighted mean removed over the batch when the pipeline
/// asks for it), the input columns and the offset removed. `source` names
/// the batch in errors.
fn pulsar_frames<'a>(lp: &mut LoadedPulsar, df: &'a DataFrame, source: &Path) -> Result<(PulsarInput<'a>, BatchFrames, f64), PipelineError> {
    let t0 = std::time::Instant::now();
    let input = read_pulsar_input(df, source)?;
    let t1 = std::time::Instant::now();
    // The id check (one thread) runs beside the computation: a duplicate
    // fails the batch all the same, only after the work.
    let (unique, results) = rayon::join(|| check_unique_ids(&input.obs_id, source), || compute_pulsar(lp, &input));
    unique?;
    let t2 = std::time::Instant::now();
    // Residuals: optional weighted-mean removal over the accepted rows.
    let (sigma_s, raw) = accepted_sigma_and_residual_s(&results, &input);
    let offset = if lp.subtract_weighted_mean { weighted_mean(raw.iter().copied().zip(sigma_s.iter().copied())) } else { 0.0 };
    drop(raw);
    let f = batch_frames(lp, df, &input, source, &results, sigma_s, offset)?;
    tracing::debug!(rows = df.height(), columns_s = (t1 - t0).as_secs_f64(), compute_s = (t2 - t1).as_secs_f64(), frames_s = t2.elapsed().as_secs_f64(), "pulsar batch");
    Ok((input, f, offset))
}

/// Output and rejects of one in-memory batch (see [`crate::pipeline::batch`]).
pub fn pulsar_batch(lp: &mut LoadedPulsar, df: &DataFrame, source: &Path) -> Result<(DataFrame, DataFrame), PipelineError> {
    let (_, f, _) = pulsar_frames(lp, df, source)?;
    Ok((f.out, f.rejects))
}

/// One partition of a pulsar run: in memory, or streamed in slices above
/// [`STREAM_ABOVE_ROWS`] rows (same results, bounded memory).
fn run_pulsar_partition(lp: &mut LoadedPulsar, input_path: &Path, output_path: &Path, mut prov: Provenance, plots: bool) -> Result<RunSummary, PipelineError> {
    let n_rows = super::parquet_rows(input_path).unwrap_or(0);
    if n_rows > env_usize("LAPSE_STREAM_ROWS", STREAM_ABOVE_ROWS) {
        return run_pulsar_partition_streamed(lp, input_path, output_path, prov, plots, n_rows);
    }
    let t0 = std::time::Instant::now();
    let df = read_parquet(input_path)?;
    tracing::debug!(read_s = t0.elapsed().as_secs_f64(), "read {}", input_path.display());
    let (input, mut f, offset) = pulsar_frames(lp, &df, input_path)?;
    let mut summary = RunSummary::new(df.height(), f.out.height(), f.rejects.height(), output_path, &f.reasons);
    observations_provenance(&mut prov, input_path, &input.day);
    let sites: Vec<&str> = f.site_idx.iter().map(|i| f.site_names[*i as usize].as_str()).collect();
    finish_partition(lp, &mut summary, &mut prov, &sites, &f.rejected_sites, &f.residual_s, &f.sigma_s, offset, f.eop_predicted, f.clock_extrapolated);
    let metadata = prov.finish();
    // Rejects first, output last: an existing output marks a complete partition.
    let t0 = std::time::Instant::now();
    write_parquet(&mut f.rejects, &rejects_path(output_path), &metadata)?;
    write_parquet(&mut f.out, output_path, &metadata)?;
    tracing::debug!(write_s = t0.elapsed().as_secs_f64(), "wrote {}", output_path.display());
    if plots {
        summary.plots = partition_plots(output_path, &sites, &f.bat_mjd, &f.residual_s, &f.sigma_s)?;
    }
    Ok(summary)
}

fn observations_provenance(prov: &mut Provenance, input_path: &Path, days: &[Option<i64>]) {
    let (lo, hi) = days.iter().flatten().fold((i64::MAX, i64::MIN), |(a, b), d| (a.min(*d), b.max(*d)));
    prov.set("input.observations.0.bytes", &std::fs::metadata(input_path).map(|m| m.len()).unwrap_or(0).to_string());
    if lo <= hi {
        prov.set("input.observations.0.coverage", &format!("arrival MJD {lo} … {hi}"));
    }
}

use super::read_parquet_slice as read_slice;

/// The streamed form of [`run_pulsar_partition`]: slices of the input are
/// computed and written (raw residuals) to temporary files while only compact
/// per-row values stay in memory; then the final files are written from them
/// with the weighted mean removed and the metadata complete.
fn run_pulsar_partition_streamed(lp: &mut LoadedPulsar, input_path: &Path, output_path: &Path, mut prov: Provenance, plots: bool, n_rows: usize) -> Result<RunSummary, PipelineError> {
    let slice = env_usize("LAPSE_STREAM_SLICE", STREAM_SLICE_ROWS);
    let werr = |p: &Path, e: PolarsError| PipelineError::from(crate::io::IoError::Write { path: p.into(), message: e.to_string() });
    // Grids once for the whole file.
    let days_df = read_slice(input_path, 0, n_rows, Some(vec!["arrival_mjd_day".into()]))?;
    let all_days: Vec<Option<i64>> = crate::io::Columns { df: &days_df, path: input_path }.i64("arrival_mjd_day")?;
    drop(days_df);
    lp.ctx.cover_batch_days(&all_days);
    // Pass 1: compute slices, raw residuals to temporary files.
    let [_, _, tmp_out, tmp_rej] = super::partial_paths(output_path);
    let mut w_out: Option<polars::io::parquet::write::BatchedWriter<std::fs::File>> = None;
    let mut w_rej: Option<polars::io::parquet::write::BatchedWriter<std::fs::File>> = None;
    let mut ids = super::IdChecker::new(n_rows);
    // Compact per-row state: site index, raw residual, σ; plot data every k-th row.
    let mut site_names: Vec<String> = Vec::new();
    let mut site_idx: Vec<u16> = Vec::with_capacity(n_rows);
    let mut rejected_sites: Vec<String> = Vec::new();
    let (mut raw, mut sigma_s, mut reasons) = (Vec::with_capacity(n_rows), Vec::with_capacity(n_rows), Vec::new());
    let plot_every = n_rows.div_ceil(50_000).max(1);
    let (mut p_sites, mut p_bat, mut p_raw, mut p_sigma) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let (mut eop_predicted, mut clock_extrapolated, mut rows_out, mut rows_rej) = (0usize, 0usize, 0usize, 0usize);
    let mut offset_row = 0usize;
    while offset_row < n_rows {
        let df = read_slice(input_path, offset_row, slice, None)?;
        let input = read_pulsar_input(&df, input_path)?;
        ids.check(&input.obs_id, offset_row, input_path)?;
        let results = compute_pulsar(lp, &input);
        let mut f = batch_frames(lp, &df, &input, input_path, &results, accepted_sigma_and_residual_s(&results, &input).0, 0.0)?;
        if w_out.is_none() {
            let mk = |p: &Path, schema: &Schema| -> Result<polars::io::parquet::write::BatchedWriter<std::fs::File>, PipelineError> {
                let file = std::fs::File::create(p).map_err(|e| crate::io::IoError::Write { path: p.into(), message: e.to_string() })?;
                ParquetWriter::new(file).with_compression(crate::io::output_compression()).batched(schema).map_err(|e| werr(p, e))
            };
            w_out = Some(mk(&tmp_out, &f.out.schema())?);
            w_rej = Some(mk(&tmp_rej, &f.rejects.schema())?);
        }
        if let (Some(wo), Some(wr)) = (w_out.as_mut(), w_rej.as_mut()) {
            crate::io::write_row_groups_parallel(wo, &mut f.out).map_err(|e| werr(&tmp_out, e))?;
            crate::io::write_row_groups_parallel(wr, &mut f.rejects).map_err(|e| werr(&tmp_rej, e))?;
        }
        rows_out += f.out.height();
        rows_rej += f.rejects.height();
        for (k, li) in f.site_idx.iter().enumerate() {
            let s = &f.site_names[*li as usize];
            let i = match site_names.iter().position(|n| n == s) {
                Some(i) => i,
                None => {
                    site_names.push(s.clone());
                    site_names.len() - 1
                }
            };
            if i > u16::MAX as usize {
                return Err(PipelineError::Invalid { path: input_path.into(), message: "more than 65 535 distinct sites".into() });
            }
            site_idx.push(i as u16);
            if (raw.len() + k) % plot_every == 0 {
                p_sites.push(s.clone());
                p_bat.push(f.bat_mjd[k]);
                p_raw.push(f.residual_s[k]);
                p_sigma.push(f.sigma_s[k]);
            }
        }
        rejected_sites.append(&mut f.rejected_sites);
        raw.append(&mut f.residual_s);
        sigma_s.append(&mut f.sigma_s);
        reasons.append(&mut f.reasons);
        eop_predicted += f.eop_predicted;
        clock_extrapolated += f.clock_extrapolated;
        offset_row += slice;
    }
    ids.finish(input_path)?;
    if let (Some(wo), Some(wr)) = (w_out.take(), w_rej.take()) {
        wo.finish().map_err(|e| werr(&tmp_out, e))?;
        wr.finish().map_err(|e| werr(&tmp_rej, e))?;
    }
    // Statistics over all rows, in input order (as the in-memory path).
    let offset = if lp.subtract_weighted_mean { residual_summary(&raw, &sigma_s, false).weighted_mean_s } else { 0.0 };
    for r in raw.iter_mut() {
        *r -= offset;
    }
    let residual = raw;
    let sites: Vec<&str> = site_idx.iter().map(|i| site_names[*i as usize].as_str()).collect();
    let mut summary = RunSummary::new(n_rows, rows_out, rows_rej, output_path, &reasons);
    observations_provenance(&mut prov, input_path, &all_days);
    finish_partition(lp, &mut summary, &mut prov, &sites, &rejected_sites, &residual, &sigma_s, offset, eop_predicted, clock_extrapolated);
    drop(sites);
    let metadata = prov.finish();
    // Pass 2: final files, residuals with the offset removed, full metadata.
    let kv: Vec<polars_parquet::write::KeyValue> = metadata.iter().map(|(k, v)| polars_parquet::write::KeyValue { key: k.clone(), value: Some(v.clone()) }).collect();
    for (tmp, fin, n, fix) in [(&tmp_rej, rejects_path(output_path), rows_rej, false), (&tmp_out, output_path.to_path_buf(), rows_out, true)] {
        let part = crate::io::partial_path(&fin);
        let mut w: Option<polars::io::parquet::write::BatchedWriter<std::fs::File>> = None;
        let mut at = 0usize;
        loop {
            let mut df = read_slice(tmp, at, slice, None)?;
            if w.is_none() {
                let file = std::fs::File::create(&part).map_err(|e| crate::io::IoError::Write { path: part.clone(), message: e.to_string() })?;
                w = Some(ParquetWriter::new(file).with_compression(crate::io::output_compression()).with_key_value_metadata(Some(KeyValueMetadata::Static(kv.clone()))).batched(&df.schema()).map_err(|e| werr(&part, e))?);
            }
            if fix && offset != 0.0 {
                let r: Vec<f64> = crate::io::Columns { df: &df, path: tmp }.f64("residual_s")?.iter().map(|v| v.unwrap_or(f64::NAN) - offset).collect();
                df.with_column(Column::new("residual_s".into(), r)).map_err(|e| werr(&part, e))?;
            }
            if let Some(w) = w.as_mut() {
                crate::io::write_row_groups_parallel(w, &mut df).map_err(|e| werr(&part, e))?;
            }
            at += slice;
            if at >= n {
                break;
            }
        }
        if let Some(w) = w {
            w.finish().map_err(|e| werr(&part, e))?;
        }
        std::fs::rename(&part, &fin).map_err(|e| crate::io::IoError::Write { path: fin.clone(), message: e.to_string() })?;
        let _ = std::fs::remove_file(tmp);
    }
    if plots {
        let p_res: Vec<f64> = p_raw.iter().map(|r| r - offset).collect();
        summary.plots = partition_plots(output_path, &p_sites, &p_bat, &p_res, &p_sigma)?;
    }
    Ok(summary)
}

/// One planned observation for the synthetic-data command.
#[derive(Clone, Debug, PartialEq)]
pub struct PlanRow {
    pub site: String,
    /// Approximate arrival, MJD in the pipeline's input time scale.
    pub mjd: f64,
    pub freq_mhz: f64,
    pub sigma_us: f64,
}

/// Reads a plan CSV with the header `site,mjd,freq_mhz,sigma_us`.
pub fn read_plan(path: &Path) -> Result<Vec<PlanRow>, PipelineError> {
    let text = std::fs::read_to_string(path).map_err(|source| PipelineError::Read { path: path.into(), source })?;
    let bad = |line: usize, m: String| PipelineError::Invalid { path: path.into(), message: format!("line {line}: {m}") };
    let mut rows = Vec::new();
    for row in crate::io::csv_lines(&text, &["site", "mjd", "freq_mhz", "sigma_us"]).map_err(|(line, m)| bad(line, m))? {
        let f = &row.fields;
        let num = |s: &str, w: &str| s.parse::<f64>().map_err(|_| bad(row.line, format!("{w} '{s}' is not a number")));
        rows.push(PlanRow { site: f[0].to_string(), mjd: num(f[1], "mjd")?, freq_mhz: num(f[2], "freq_mhz")?, sigma_us: num(f[3], "sigma_us")? });
    }
    Ok(rows)
}

/// Noise to add to synthetic arrival times.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum SynthNoise {
    None,
    /// Gaussian with this σ (s) for every row.
    FixedS(f64),
    /// Gaussian with each row's own sigma_us.
    FromSigma,
}

/// Standard normal deviate for row `i` of a run seeded with `seed`
/// (SplitMix64 + Box–Muller: deterministic, independent of threading).
pub fn gaussian(seed: u64, i: u64) -> f64 {
    let mut z = seed ^ i.wrapping_mul(0x9E37_79B9_7F4A_7C15);
    let mut next = || {
        z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut x = z;
        x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        x ^ (x >> 31)
    };
    let u1 = ((next() >> 11) as f64 + 0.5) / (1u64 << 53) as f64;
    let u2 = (next() >> 11) as f64 / (1u64 << 53) as f64;
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// Writes arrival times that are exact under a pulsar pipeline's model (to
/// ≤ 1 ps before noise), for the planned sites, epochs and frequencies.
/// Returns the number of rows written.
pub fn synthesize(file: &PipelineFile, plan: &Path, out: &Path, noise: SynthNoise, seed: u64) -> Result<usize, PipelineError> {
    use rayon::prelude::*;
    let mut lp = load_pulsar(file)?;
    let rows = read_plan(plan)?;
    if let (Some(lo), Some(hi)) = (rows.iter().map(|r| r.mjd).reduce(f64::min), rows.iter().map(|r| r.mjd).reduce(f64::max)) {
        lp.ctx.cover_batch_days(&[Some(lo.floor() as i64), Some(hi.ceil() as i64)]);
    }
    let ctx = &lp.ctx;
    let solved: Vec<Result<(i64, f64), String>> = rows
        .par_iter()
        .enumerate()
        .map(|(i, r)| {
            let e = ctx.exact_arrival(&r.site, r.mjd, r.freq_mhz).map_err(|e| format!("plan row {} ({} MJD {}): {e}", i + 1, r.site, r.mjd))?;
            let noise_s = match noise {
                SynthNoise::None => 0.0,
                SynthNoise::FixedS(s) => s * gaussian(seed, i as u64),
                SynthNoise::FromSigma => r.sigma_us * 1e-6 * gaussian(seed, i as u64),
            };
            if noise_s == 0.0 {
                return ctx.earth.time.mjd_parts(&e).map_err(|e| e.to_string());
            }
            let u = ctx.earth.time.add_seconds(e, noise_s).map_err(|e| e.to_string())?;
            ctx.earth.time.mjd_parts(&u).map_err(|e| e.to_string())
        })
        .collect();
    let mut days = Vec::with_capacity(rows.len());
    let mut fracs = Vec::with_capacity(rows.len());
    for s in solved {
        let (d, f) = s.map_err(|message| PipelineError::Invalid { path: plan.into(), message })?;
        days.push(d);
        fracs.push(f);
    }
    let ids: Vec<String> = rows.iter().enumerate().map(|(i, r)| format!("{}-{:06}", r.site, i)).collect();
    let mut df = DataFrame::new_infer_height(vec![
        Column::new("obs_id".into(), ids),
        Column::new("site".into(), rows.iter().map(|r| r.site.clone()).collect::<Vec<_>>()),
        Column::new("arrival_mjd_day".into(), days),
        Column::new("arrival_mjd_frac".into(), fracs),
        Column::new("freq_mhz".into(), rows.iter().map(|r| r.freq_mhz).collect::<Vec<_>>()),
        Column::new("sigma_us".into(), rows.iter().map(|r| r.sigma_us).collect::<Vec<_>>()),
    ])
    .map_err(|e| PipelineError::Invalid { path: out.into(), message: e.to_string() })?;
    let mut prov = Provenance::start(file);
    prov.set("synth.plan", &plan.display().to_string());
    prov.set("synth.noise", &format!("{noise:?}"));
    prov.set("synth.seed", &seed.to_string());
    prov.set_rows(rows.len(), rows.len(), 0);
    write_parquet(&mut df, out, &prov.finish())?;
    Ok(rows.len())
}
