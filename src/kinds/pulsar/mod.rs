//! `kind = "pulsar"`: site arrival times → barycentric arrival times, every
//! delay term and spin residuals. See the README for the table and column
//! contract.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use polars::prelude::*;

mod config;

use crate::constants::Constants;
use crate::delays::{DISPERSION_K_S_MHZ2_CM3_PC, MAS_TO_RAD, Source};
use crate::io::Columns;
use crate::parallel::Exec;
use crate::pipeline::preflight::{Facts, Level, Preflight, check_coverage, check_earth, unknown_codes};
use crate::pipeline::shared::{SharedInputs, load_shared, shared_provenance};
use crate::pipeline::table::assemble;
use crate::pipeline::tally::{PlotSpec, ResidualSet, Tally, Unit};
use crate::pipeline::{IoPaths, Kind, PipelineError, PipelineFile, Processed, Provenance, SynthOptions};
use crate::pulsar::clock::ClockTable;
use crate::pulsar::{Arrival, ArrivalResult, Binary, PulsarContext, SpinModel, shapiro_bodies};
use crate::reject::{Reject, RejectCode};
use crate::stats::gaussian;
use crate::time::TimeScale;
use config::{BINARY_COLUMNS, source_position_deg};
pub use config::{MJD_RANGE, PulsarPipeline, sexagesimal};

/// Default Shapiro bodies for pulsar timing (the bodies whose delay exceeds
/// ≈ 1 ns for a ray within a few degrees: Backer & Hellings 1986, ARA&A 24,
/// 537, sec. 3.2; Lorimer & Kramer 2005, sec. 8.2.3).
pub const DEFAULT_PULSAR_SHAPIRO: &[&str] = &["sun", "venus", "jupiter", "saturn", "uranus", "neptune"];

/// A loaded pulsar pipeline: its context, where its files are, and options.
#[derive(Debug)]
pub struct Pulsar {
    pub ctx: PulsarContext,
    pub paths: IoPaths,
    pub subtract_weighted_mean: bool,
    /// Input files: role, path, coverage text (for provenance).
    pub inputs: Vec<(String, PathBuf, String)>,
    pub constants: Constants,
    /// The source's name and the pipeline's, for plot titles.
    pub label: String,
}

impl Pulsar {
    /// Loads everything a pulsar pipeline shares (kernels, EOP, stations,
    /// clocks, model) once.
    pub fn load(file: &PipelineFile) -> Result<Self, PipelineError> {
        let cfg: PulsarPipeline = file.parse()?;
        let invalid = |message: String| file.invalid(message);
        let input_is_site_clock = match cfg.input.time_scale.as_str() {
            "utc" => false,
            "site" => true,
            other => return Err(invalid(format!("[input] time_scale = '{other}': use \"utc\" or \"site\""))),
        };
        let SharedInputs { ephemeris, constants, earth, stations, mut inputs } = load_shared(file, &cfg.ephemeris, &cfg.earth, cfg.time.as_ref(), &cfg.stations)?;
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
        let (ra_deg, dec_deg) = source_position_deg(file, s)?;
        // Documented ranges (README, "Pulsar batches"): outside them a model is
        // not meant to be evaluated, and results would be absurd or non-finite.
        file.check_range("[source] ra_deg", ra_deg, 0.0, 360.0)?;
        file.check_range("[source] dec_deg", dec_deg, -90.0, 90.0)?;
        file.check_range("[source] position_epoch_mjd", s.position_epoch_mjd, MJD_RANGE.0, MJD_RANGE.1)?;
        file.check_range("[source] pm_ra_cosdec_mas_per_yr", s.pm_ra_cosdec_mas_per_yr.unwrap_or(0.0), -1e5, 1e5)?;
        file.check_range("[source] pm_dec_mas_per_yr", s.pm_dec_mas_per_yr.unwrap_or(0.0), -1e5, 1e5)?;
        file.check_range("[source] parallax_mas", s.parallax_mas.unwrap_or(0.0), 0.0, 1e3)?;
        let sp = &cfg.spin;
        file.check_range("[spin] frequency_hz", sp.frequency_hz, 1e-4, 5e3)?;
        file.check_range("[spin] epoch_mjd", sp.epoch_mjd, MJD_RANGE.0, MJD_RANGE.1)?;
        for (k, d) in sp.derivatives.iter().enumerate() {
            // Each term's phase over a century stays below 1e13 cycles:
            // |f_k| · T^(k+2)/(k+2)! ≤ 1e13 with T = 100 Julian years.
            let t_s: f64 = 100.0 * 365.25 * 86_400.0;
            let bound = 1e13 * (1..=k as i32 + 2).map(f64::from).product::<f64>() / t_s.powi(k as i32 + 2);
            file.check_range(&format!("[spin] derivatives[{k}]"), *d, -bound, bound)?;
        }
        file.check_range("[dispersion] measure_pc_cm3", cfg.dispersion.as_ref().map(|d| d.measure_pc_cm3).unwrap_or(0.0), 0.0, 1e5)?;
        file.check_range("[corrections] ppn_gamma", cfg.corrections.as_ref().and_then(|c| c.ppn_gamma).unwrap_or(1.0), 0.0, 2.0)?;
        for (name, v) in [("ra_deg", ra_deg), ("dec_deg", dec_deg), ("position_epoch_mjd", s.position_epoch_mjd)] {
            if !v.is_finite() {
                return Err(invalid(format!("[source] {name} is not finite")));
            }
        }
        if dec_deg.abs() > 90.0 {
            return Err(invalid(format!("[source] dec_deg = {dec_deg} is outside ±90°")));
        }
        let tdb_epoch_s = |mjd: f64, what: &str| -> Result<f64, PipelineError> {
            let e = earth.time.epoch_from_mjd(TimeScale::Tdb, mjd.floor() as i64, mjd - mjd.floor()).map_err(|e| invalid(format!("{what}: {e}")))?;
            let (w, f) = e.seconds_since_j2000();
            Ok(w as f64 + f)
        };
        let source = Source {
            ra_rad: ra_deg.to_radians(),
            dec_rad: dec_deg.to_radians(),
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
        let binary = match &cfg.binary {
            Some(b) => {
                // T☉ = GM☉/c³ with the pipeline's GM☉ (Shapiro range r = T☉ m₂).
                let gm_sun_m3_s2 = constants.ephemeris.gm_km3_s2("sun").ok_or_else(|| invalid("[binary] the ephemeris constants have no GM of the Sun".into()))? * 1e9;
                let t_sun_s = gm_sun_m3_s2 / crate::delays::C_M_S.powi(3);
                let (orbit, epoch_mjd) = b.orbit(file, t_sun_s)?;
                let epoch = earth.time.epoch_from_mjd(TimeScale::Tdb, epoch_mjd.floor() as i64, epoch_mjd - epoch_mjd.floor()).map_err(|e| invalid(format!("[binary] reference epoch: {e}")))?;
                Some(Binary { orbit, epoch })
            }
            None => None,
        };
        let ctx =
            PulsarContext { ephemeris, earth, stations, clocks, input_is_site_clock, allow_clock_extrapolation: cfg.clocks.allow_extrapolation, source, spin, dm_pc_cm3, shapiro, ppn_gamma, binary };
        Ok(Pulsar {
            ctx,
            paths: IoPaths::resolve(file, &cfg.input.path, &cfg.output.path),
            label: format!("{} ({})", cfg.source.name.as_deref().unwrap_or("pulsar"), file.path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default()),
            subtract_weighted_mean: cfg.residuals.subtract_weighted_mean,
            inputs,
            constants,
        })
    }

    /// Computes every row of a batch: results in input order (Err = reject reason).
    pub fn compute(&mut self, input: &PulsarInput, exec: &Exec) -> Vec<Result<ArrivalResult, Reject>> {
        self.ctx.cover_batch_days(&input.day);
        let n = input.obs_id.len();
        // Rows rejected before computing: (row, reason), usually none.
        let mut pre: Vec<(usize, Reject)> = Vec::new();
        let mut arrivals: Vec<Arrival> = Vec::with_capacity(n);
        let mut index: Vec<usize> = Vec::with_capacity(n);
        for i in 0..n {
            match input.row_problem(i) {
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
        let computed = self.ctx.process_batch(&arrivals, exec).into_iter().map(|r| r.map_err(|e| Reject::from_error(&e)).and_then(finite));
        if pre.is_empty() {
            // Every row computed: the results are already in input order.
            return computed.collect();
        }
        let mut out: Vec<Result<ArrivalResult, Reject>> = Vec::with_capacity(n);
        out.resize_with(n, || Err(Reject::missing("row")));
        for (k, r) in index.into_iter().zip(computed) {
            out[k] = r;
        }
        for (k, reason) in pre {
            out[k] = Err(reason);
        }
        out
    }

    /// The frames of one batch; `sigma_s` from [`accepted_sigma_s`].
    fn batch_frames(&self, df: &DataFrame, input: &PulsarInput, input_path: &Path, results: &[Result<ArrivalResult, Reject>], sigma_s: Vec<f64>) -> Result<BatchFrames, PipelineError> {
        let ok: Vec<bool> = results.iter().map(|r| r.is_ok()).collect();
        let good: Vec<&ArrivalResult> = results.iter().filter_map(|r| r.as_ref().ok()).collect();
        let ts = &self.ctx.earth.time;
        let parts = |e: &crate::time::Epoch| ts.mjd_parts(e).unwrap_or((e.mjd_day(), f64::NAN));
        let col_f = |name: &str, v: Vec<f64>| Column::new(name.into(), v);
        // One parallel pass over row chunks fills every value column — the exact
        // day fractions (one u128 correction each), the delays, the residual —
        // each chunk writing its own slice of each column: the results are large
        // structs, read once (at 10⁶ rows separate passes and the intermediate
        // vectors they built cost ≈ 0.2 s of memory traffic and page faults).
        use rayon::prelude::*;
        let (ng, nb) = (good.len(), self.ctx.shapiro.len());
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
                    let row = [tf, bf, bd as f64 + bf, g.residual_s, g.clock_s, g.einstein_s, g.roemer_s, g.parallax_s, g.shapiro_s, g.dispersion_s];
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
        for b in &self.ctx.shapiro {
            computed.push(col_f(&format!("shapiro_{}_s", b.name), next_col()));
        }
        computed.push(col_f("dispersion_s", dispersion_s));
        if self.ctx.binary.is_some() {
            let b = |f: &dyn Fn(&crate::delays::binary::BinaryDelays) -> f64| good.iter().map(|g| g.binary.as_ref().map_or(f64::NAN, f)).collect::<Vec<f64>>();
            computed.push(col_f("binary_roemer_s", b(&|d| d.roemer_s)));
            computed.push(col_f("binary_einstein_s", b(&|d| d.einstein_s)));
            computed.push(col_f("binary_shapiro_s", b(&|d| d.shapiro_s)));
            computed.push(col_f("binary_aberration_s", b(&|d| d.aberration_s)));
            computed.push(col_f("binary_s", b(&|d| d.total_s)));
            computed.push(col_f("orbital_phase", b(&|d| d.orbital_phase)));
        }
        computed.push(col_f("residual_s", residual.clone()));
        computed.push(Column::new("pulse_number".into(), pulse));
        computed.push(Column::new("clock_extrapolated".into(), clock_x));
        computed.push(Column::new("eop_predicted".into(), eop_p));
        let reasons: Vec<Reject> = results.iter().filter_map(|r| r.as_ref().err().cloned()).collect();
        let (out, rejects) = assemble(df, input_path, &ok, &reasons, computed, &[])?;
        Ok(BatchFrames {
            out,
            rejects,
            reasons,
            site_names,
            site_idx,
            rejected_sites: (0..results.len()).filter(|i| !ok[*i]).map(|i| site(i).to_string()).collect(),
            binary_range_s: good.iter().filter_map(|g| g.binary.map(|b| b.total_s)).fold(None, |acc: Option<(f64, f64)>, v| Some(acc.map_or((v, v), |(a, b)| (a.min(v), b.max(v))))),
            orbital_phase: good.iter().filter_map(|g| g.binary.map(|b| b.orbital_phase)).collect(),
            bat_mjd,
            residual_s: residual,
            sigma_s,
            eop_predicted: eop_count,
            clock_extrapolated: clock_count,
        })
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

/// Valid range of `sigma_us`, µs: 1 ps to 10 s (outside it the weights
/// 1/σ² of the statistics lose meaning or overflow).
pub const SIGMA_US_RANGE: (f64, f64) = (1e-6, 1e7);

impl PulsarInput<'_> {
    /// Why row `i` cannot be computed from its values alone (the same check
    /// in `lapse check` and `lapse run`), if it cannot.
    pub fn row_problem(&self, i: usize) -> Option<Reject> {
        let (lo, hi) = SIGMA_US_RANGE;
        match (&self.site[i], self.day[i], self.frac[i], self.freq_mhz[i], self.sigma_us[i]) {
            (None, ..) => Some(Reject::missing("site")),
            (_, None, ..) => Some(Reject::missing("arrival_mjd_day")),
            (_, _, None, ..) => Some(Reject::missing("arrival_mjd_frac")),
            (_, _, _, None, _) => Some(Reject::missing("freq_mhz")),
            (_, _, _, _, None) => Some(Reject::missing("sigma_us")),
            (_, _, Some(f), ..) if !(0.0..1.0).contains(&f) => Some(Reject::new(RejectCode::FractionOutOfRange, format!("arrival_mjd_frac out of range: {f:?} is not in [0, 1)"))),
            (_, _, _, Some(f), _) if f.is_nan() || f <= 0.0 => Some(Reject::new(RejectCode::InvalidValue, format!("freq_mhz invalid: {f:?} (must be positive; infinite means no dispersion)"))),
            (_, _, _, _, Some(s)) if !(s.is_finite() && s > 0.0) => Some(Reject::new(RejectCode::InvalidValue, format!("sigma_us invalid: {s:?} (must be positive)"))),
            (_, _, _, _, Some(s)) if !(lo..=hi).contains(&s) => Some(Reject::new(RejectCode::InvalidValue, format!("sigma_us invalid: {s:?} outside {lo:e} … {hi:e} µs"))),
            _ => None,
        }
    }
}

/// A computed row with any non-finite value becomes a reject (never a row
/// of data).
fn finite(r: ArrivalResult) -> Result<ArrivalResult, Reject> {
    let values = [r.clock_s, r.einstein_s, r.roemer_s, r.parallax_s, r.shapiro_s, r.dispersion_s, r.residual_s];
    let binary = r.binary.map(|b| [b.roemer_s, b.einstein_s, b.shapiro_s, b.aberration_s, b.total_s, b.orbital_phase]).unwrap_or_default();
    if values.iter().chain(&r.shapiro_body_s).chain(&binary).all(|v| v.is_finite()) {
        Ok(r)
    } else {
        Err(Reject::new(RejectCode::NotFinite, format!("non-finite result: residual {:?} s, delays {values:?} s (check the model parameters)", r.residual_s)))
    }
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

/// Output and rejects frames of one batch and the compact per-row values
/// the summary needs (site, BAT MJD, residual, σ of accepted rows).
struct BatchFrames {
    out: DataFrame,
    rejects: DataFrame,
    reasons: Vec<Reject>,
    /// Site of each accepted row: index into `site_names`.
    site_names: Vec<String>,
    site_idx: Vec<u32>,
    rejected_sites: Vec<String>,
    bat_mjd: Vec<f64>,
    /// Orbital phase of each accepted row (empty without a binary).
    orbital_phase: Vec<f64>,
    /// Least and greatest binary delay of the accepted rows, s.
    binary_range_s: Option<(f64, f64)>,
    residual_s: Vec<f64>,
    sigma_s: Vec<f64>,
    eop_predicted: usize,
    clock_extrapolated: usize,
}

/// σ (s) of the accepted rows, in input order.
fn accepted_sigma_s(results: &[Result<ArrivalResult, Reject>], input: &PulsarInput) -> Vec<f64> {
    results.iter().zip(&input.sigma_us).filter(|(r, _)| r.is_ok()).map(|(_, s)| s.unwrap_or(1.0) * 1e-6).collect()
}

impl Kind for Pulsar {
    fn name(&self) -> &'static str {
        "pulsar"
    }

    fn paths(&self) -> &IoPaths {
        &self.paths
    }

    fn paths_mut(&mut self) -> &mut IoPaths {
        &mut self.paths
    }

    fn provenance(&self, file: &PipelineFile) -> Result<Provenance, PipelineError> {
        let mut base = shared_provenance(file, &self.inputs, &self.constants, &self.ctx.shapiro, self.ctx.ppn_gamma)?;
        base.set("constants.dispersion_k_s_mhz2_cm3_pc", &format!("{DISPERSION_K_S_MHZ2_CM3_PC:e} (1/2.41e-4)"));
        // The position used (the pipeline's own form is in param.source.*).
        base.set("source.ra_deg_used", &format!("{:?}", self.ctx.source.ra_rad.to_degrees()));
        base.set("source.dec_deg_used", &format!("{:?}", self.ctx.source.dec_rad.to_degrees()));
        Ok(base)
    }

    fn output_columns(&self) -> Vec<String> {
        let mut c: Vec<String> = ["tdb_mjd_day", "tdb_mjd_frac", "bat_mjd_day", "bat_mjd_frac", "clock_s", "einstein_s", "roemer_s", "parallax_s", "shapiro_s"].map(String::from).into();
        c.extend(self.ctx.shapiro.iter().map(|b| format!("shapiro_{}_s", b.name)));
        c.push("dispersion_s".into());
        if self.ctx.binary.is_some() {
            c.extend(BINARY_COLUMNS.map(String::from));
        }
        c.extend(["residual_s", "pulse_number", "clock_extrapolated", "eop_predicted"].map(String::from));
        c
    }

    fn loaded(&self) -> String {
        format!("kernels, EOP, stations{} loaded", if self.ctx.clocks.is_empty() { "" } else { ", clock tables" })
    }

    fn scan(&self, df: &DataFrame, path: &Path, facts: &mut Facts) -> Result<(), PipelineError> {
        let i = read_pulsar_input(df, path)?;
        facts.add(&i.day, &i.frac, Some(&i.site), None, None);
        facts.count_problems((0..df.height()).filter_map(|k| i.row_problem(k)));
        Ok(())
    }

    fn check(&self, p: &mut Preflight, facts: &Facts) {
        let Some(s) = facts.span() else { return };
        let mut bodies = vec![399];
        bodies.extend(self.ctx.shapiro.iter().map(|b| b.naif_id));
        unknown_codes(p, &self.ctx.stations, "site", &facts.codes);
        check_coverage(p, &self.ctx.ephemeris, &bodies, &s);
        check_earth(p, &self.ctx.earth, &s, &facts.days);
        if self.ctx.input_is_site_clock {
            for (site, (_, lo, hi)) in &facts.codes {
                match self.ctx.clocks.get(site) {
                    None => p.add(Level::Problem, format!("site {site} has no clock chain ([clocks] sites) but the input is in site-clock time")),
                    Some(chain) => {
                        for t in chain {
                            let (a, b) = t.span_mjd();
                            if (*lo as f64) < a || (*hi as f64 + 1.0) > b {
                                let level = if self.ctx.allow_clock_extrapolation { Level::Note } else { Level::Problem };
                                p.add(
                                    level,
                                    format!(
                                        "clock table {} covers MJD {a} … {b}; site {site} observes MJD {lo} … {hi}{}",
                                        t.path.display(),
                                        if self.ctx.allow_clock_extrapolation { " (end values will be held and rows flagged)" } else { "" }
                                    ),
                                );
                            }
                        }
                    }
                }
            }
        }
    }

    fn prepare(&mut self, facts: &Facts) {
        let days: Vec<Option<i64>> = facts.days.keys().map(|d| Some(*d)).collect();
        self.ctx.cover_batch_days(&days);
    }

    fn streams(&self) -> bool {
        true
    }

    fn process(&mut self, df: &DataFrame, source: &Path, exec: &Exec) -> Result<Processed, PipelineError> {
        let t0 = std::time::Instant::now();
        let input = read_pulsar_input(df, source)?;
        let results = self.compute(&input, exec);
        let t1 = std::time::Instant::now();
        let sigma_s = accepted_sigma_s(&results, &input);
        let f = self.batch_frames(df, &input, source, &results, sigma_s)?;
        tracing::debug!(rows = df.height(), compute_s = (t1 - t0).as_secs_f64(), frames_s = t1.elapsed().as_secs_f64(), "pulsar batch");
        let mut tally = Tally::default();
        tally.count_rejects(&f.reasons);
        tally.cover_days("arrival", &input.day);
        tally.flag(f.eop_predicted, "rows used PREDICTED Earth-orientation values (column eop_predicted)");
        tally.flag(f.clock_extrapolated, "rows used EXTRAPOLATED clock corrections (column clock_extrapolated)");
        if let Some((lo, hi)) = f.binary_range_s {
            tally.range("binary delay binary_s over the accepted rows", "s", lo, hi);
        }
        // Residuals by site, in ns (plots in µs), the weighted mean removed
        // from `residual_s` when the pipeline asks.
        let subtract = self.subtract_weighted_mean;
        let site_set = |key: &str, headline: &str, plot: &str, title: String, x_label: &str| {
            let mut s = ResidualSet::new(
                key,
                headline,
                "site",
                "s",
                Unit { name: "ns", per_natural: 1e9 },
                PlotSpec { name: plot.into(), title, x_label: x_label.into(), unit: Unit { name: "µs", per_natural: 1e6 } },
            );
            s.subtract_mean_from = subtract.then_some("residual_s");
            s
        };
        let set = tally.set("", || site_set("", "residuals", "residuals", format!("{} timing residuals", self.label), "barycentric arrival time (MJD, TDB)"));
        let orbit_set = self.ctx.binary.is_some().then(|| (f.orbital_phase.clone(), f.residual_s.clone(), f.sigma_s.clone()));
        set.extend_indexed(&f.site_names, &f.site_idx, f.bat_mjd, f.residual_s, f.sigma_s);
        for site in &f.rejected_sites {
            set.reject(site);
        }
        // Residuals against orbital phase: a plot of their own, not a
        // second summary (same rows, same mean removed).
        if let Some((phase, residual, sigma)) = orbit_set {
            let orbit = tally.set("orbit", || {
                let mut s =
                    site_set("orbit", "residuals against orbital phase", "residuals_orbit", format!("{} timing residuals against orbital phase", self.label), "orbital phase (mean anomaly / 2π)");
                s.summarised = false;
                s
            });
            orbit.extend_indexed(&f.site_names, &f.site_idx, phase, residual, sigma);
        }
        Ok(Processed { output: f.out, rejects: f.rejects, tally })
    }

    /// Arrival times exact under the pipeline's model (to ≤ 1 ps before
    /// noise) for the planned sites, epochs and frequencies (plan CSV header
    /// `site,mjd,freq_mhz,sigma_us`).
    fn synthesise(&mut self, plan: &Path, opts: &SynthOptions) -> Result<DataFrame, PipelineError> {
        use rayon::prelude::*;
        let rows = read_plan(plan)?;
        if let (Some(lo), Some(hi)) = (rows.iter().map(|r| r.mjd).reduce(f64::min), rows.iter().map(|r| r.mjd).reduce(f64::max)) {
            self.ctx.cover_batch_days(&[Some(lo.floor() as i64), Some(hi.ceil() as i64)]);
        }
        let ctx = &self.ctx;
        let row_err = |i: usize, r: &PlanRow, e: &dyn std::fmt::Display| PipelineError::Input { path: plan.into(), message: format!("plan row {} ({} MJD {}): {e}", i + 1, r.site, r.mjd) };
        let solved: Vec<Result<(i64, f64), PipelineError>> = rows
            .par_iter()
            .enumerate()
            .map(|(i, r)| {
                let e = ctx.exact_arrival(&r.site, r.mjd, r.freq_mhz).map_err(|e| row_err(i, r, &e))?;
                let noise_s = match (opts.noise_s, opts.noise_from_sigma) {
                    (Some(s), _) => s * gaussian(opts.seed, i as u64),
                    (None, true) => r.sigma_us * 1e-6 * gaussian(opts.seed, i as u64),
                    (None, false) => 0.0,
                };
                let u = if noise_s == 0.0 { e } else { ctx.earth.time.add_seconds(e, noise_s).map_err(|e| row_err(i, r, &e))? };
                ctx.earth.time.mjd_parts(&u).map_err(|e| row_err(i, r, &e))
            })
            .collect();
        let mut days = Vec::with_capacity(rows.len());
        let mut fracs = Vec::with_capacity(rows.len());
        for s in solved {
            let (d, f) = s?;
            days.push(d);
            fracs.push(f);
        }
        let ids: Vec<String> = rows.iter().enumerate().map(|(i, r)| format!("{}-{:06}", r.site, i)).collect();
        DataFrame::new_infer_height(vec![
            Column::new("obs_id".into(), ids),
            Column::new("site".into(), rows.iter().map(|r| r.site.clone()).collect::<Vec<_>>()),
            Column::new("arrival_mjd_day".into(), days),
            Column::new("arrival_mjd_frac".into(), fracs),
            Column::new("freq_mhz".into(), rows.iter().map(|r| r.freq_mhz).collect::<Vec<_>>()),
            Column::new("sigma_us".into(), rows.iter().map(|r| r.sigma_us).collect::<Vec<_>>()),
        ])
        .map_err(|e| PipelineError::frame(plan, e))
    }
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
    let text = std::fs::read_to_string(path).map_err(|source| crate::io::IoError::Open { path: path.into(), source })?;
    let bad = |line: usize, m: String| PipelineError::Input { path: path.into(), message: format!("line {line}: {m}") };
    let mut rows = Vec::new();
    for row in crate::io::csv_lines(&text, &["site", "mjd", "freq_mhz", "sigma_us"]).map_err(|(line, m)| bad(line, m))? {
        let f = &row.fields;
        let num = |s: &str, w: &str| s.parse::<f64>().map_err(|_| bad(row.line, format!("{w} '{s}' is not a number")));
        rows.push(PlanRow { site: f[0].to_string(), mjd: num(f[1], "mjd")?, freq_mhz: num(f[2], "freq_mhz")?, sigma_us: num(f[3], "sigma_us")? });
    }
    Ok(rows)
}
