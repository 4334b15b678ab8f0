//! Pulsar arrival times: site clock → UTC → TT → TDB at the site, Roemer,
//! parallax, Shapiro, Einstein and dispersion delays → barycentric arrival
//! times, spin phase and residuals.
//!
//! The core is one call from a batch of rows to a batch of results
//! ([`PulsarContext::process_batch`]) with the shared inputs (kernels, EOP,
//! stations, clocks, model) loaded once in a [`PulsarContext`].
//!
//! Sign rule: BAT = TDB + roemer_s + parallax_s − shapiro_s − dispersion_s.

pub mod clock;

use std::collections::HashMap;

use nalgebra::Vector3;

use crate::delays::{self, Source};
use crate::earth::{EarthModel, StationCatalog};
use crate::ephemeris::{Ephemeris, TdbSeconds};
use crate::time::femto::{FS_PER_S, div_floor, ratio_to_f64, seconds_to_fs};
use crate::time::{Epoch, TimeScale};
use clock::{ClockTable, chain_at};

pub use crate::delays::{MAX_SHAPIRO_BODIES, SHAPIRO_BODY_NAMES, ShapiroBody, shapiro_bodies};

/// The spin model: frequency and derivatives at an epoch (TDB).
#[derive(Clone, Debug, PartialEq)]
pub struct SpinModel {
    /// Reference epoch, TDB.
    pub epoch: Epoch,
    pub frequency_hz: f64,
    /// ḟ (Hz/s), f̈ (Hz/s²), …
    pub derivatives: Vec<f64>,
}

impl SpinModel {
    /// Spin phase at a barycentric arrival time: (pulse number, fractional
    /// phase in cycles in [−0.5, 0.5]).
    ///
    /// φ = f·Δt + ḟ·Δt²/2 + f̈·Δt³/6 + …, Δt = t_b − t_epoch. The product
    /// f·Δt (10¹⁰–10¹¹ cycles) is formed with an exact two-product (FMA), so
    /// the fractional phase keeps ~1e-16 cycle resolution instead of the
    /// ~1e-5 cycles (tens of ns) of a plain f64 product.
    ///
    /// # Accuracy
    /// Rounding < 1e-12 cycles for |Δt| < 30 yr; the model parameters are f64.
    ///
    /// # References
    /// Lorimer & Kramer 2005, eq. 8.1 (Taylor expansion of the phase).
    pub fn phase(&self, bat: &Epoch) -> (i64, f64) {
        let dt_fs = bat.label_fs() - self.epoch.label_fs();
        let (whole, rem) = div_floor(dt_fs, FS_PER_S);
        let w = whole as f64; // exact below 2^53 s
        let frac_s = ratio_to_f64(rem, FS_PER_S);
        let f = self.frequency_hz;
        let p = f * w;
        let err = f.mul_add(w, -p); // exact: f·w = p + err
        let n = p.round();
        let dt_s = w + frac_s;
        // Spin-down terms, Horner: Σ f_k Δt^(k+2)/(k+2)!
        let mut spin = 0.0;
        for (k, fk) in self.derivatives.iter().enumerate().rev() {
            spin = (spin + fk / factorial(k + 2)) * dt_s;
        }
        spin *= dt_s;
        let frac = (p - n) + err + f * frac_s + spin;
        let m = frac.round();
        ((n + m) as i64, frac - m)
    }
}

fn factorial(n: usize) -> f64 {
    (1..=n).map(|k| k as f64).product()
}

/// Everything a pulsar batch shares: loaded once.
#[derive(Debug)]
pub struct PulsarContext {
    pub ephemeris: Ephemeris,
    pub earth: EarthModel,
    pub stations: StationCatalog,
    /// Clock chains per site (site clock → … → UTC).
    pub clocks: HashMap<String, Vec<ClockTable>>,
    /// Input times are site-clock times to be corrected (else UTC).
    pub input_is_site_clock: bool,
    pub allow_clock_extrapolation: bool,
    pub source: Source,
    pub spin: SpinModel,
    pub dm_pc_cm3: f64,
    pub shapiro: Vec<ShapiroBody>,
    pub ppn_gamma: f64,
    /// Rows per parallel work unit (results do not depend on it).
    pub chunk_rows: usize,
    /// Rows processed so far, for progress displays.
    pub progress: Option<std::sync::Arc<std::sync::atomic::AtomicUsize>>,
}

/// One arrival time to process.
#[derive(Clone, Copy, Debug)]
pub struct Arrival<'a> {
    pub site: &'a str,
    pub mjd_day: i64,
    pub mjd_frac: f64,
    pub freq_mhz: f64,
}

/// Everything computed for one arrival time. Fixed size: no allocation.
#[derive(Clone, Copy, Debug)]
pub struct ArrivalResult {
    /// Arrival at the site, TDB.
    pub tdb: Epoch,
    /// Barycentric arrival time, TDB.
    pub bat: Epoch,
    pub clock_s: f64,
    pub clock_extrapolated: bool,
    pub einstein_s: f64,
    pub roemer_s: f64,
    pub parallax_s: f64,
    pub shapiro_s: f64,
    pub shapiro_body_s: [f64; MAX_SHAPIRO_BODIES],
    pub dispersion_s: f64,
    pub eop_predicted: bool,
    pub pulse_number: i64,
    /// Before any weighted-mean removal.
    pub residual_s: f64,
}

impl PulsarContext {
    /// Clock correction (s) for a site at an input epoch.
    fn clock(&self, site: &str, mjd: f64) -> Result<(f64, bool), String> {
        if !self.input_is_site_clock {
            return Ok((0.0, false));
        }
        let chain = self.clocks.get(site).ok_or_else(|| format!("no clock chain for site '{site}': add it under [clocks] sites"))?;
        let v = chain_at(chain, mjd, self.allow_clock_extrapolation)?;
        Ok((v.offset_s, v.extrapolated))
    }

    /// Grids the celestial pole, TDB − TT and the Shapiro bodies' positions
    /// over a batch's arrival days (UTC MJD; see
    /// [`crate::earth::EarthModel::cover_utc_days`] and
    /// [`crate::ephemeris::Ephemeris::cover_body_grids_utc_days`]).
    pub fn cover_batch_days(&mut self, days_mjd_utc: &[Option<i64>]) {
        self.earth.cover_utc_days(days_mjd_utc.iter().flatten().copied());
        let ids: Vec<i32> = self.shapiro.iter().map(|b| b.naif_id).collect();
        self.ephemeris.cover_body_grids_utc_days(&ids, days_mjd_utc.iter().flatten().copied());
    }

    /// All delays, the BAT and the spin residual for one arrival time.
    ///
    /// # Errors
    /// A reason a person can act on (unknown site, bad value, coverage).
    pub fn process(&self, a: &Arrival) -> Result<ArrivalResult, String> {
        if !a.mjd_frac.is_finite() || !(0.0..1.0).contains(&a.mjd_frac) {
            return Err(format!("arrival_mjd_frac out of range: {:?} is not in [0, 1)", a.mjd_frac));
        }
        if a.freq_mhz.is_nan() || a.freq_mhz <= 0.0 {
            return Err(format!("freq_mhz invalid: {:?} (must be positive; infinite means no dispersion)", a.freq_mhz));
        }
        let site_time = self
            .earth
            .time
            .epoch_from_mjd(TimeScale::Utc, a.mjd_day, a.mjd_frac)
            .map_err(|e| format!("arrival time not convertible: {e}"))?;
        self.process_epoch(a.site, site_time, a.freq_mhz)
    }

    /// As [`Self::process`], for a site arrival time given as an epoch (in
    /// the input's time scale, labelled like UTC days).
    pub fn process_epoch(&self, site: &str, site_time: Epoch, freq_mhz: f64) -> Result<ArrivalResult, String> {
        let station = self.stations.get(site).map_err(|e| format!("unknown site: {e}"))?;
        let mjd = site_time.mjd_day() as f64 + ratio_to_f64(site_time.fs_of_day(), crate::time::femto::FS_PER_DAY);
        let (clock_s, clock_extrapolated) = self.clock(site, mjd).map_err(|e| format!("clock correction unavailable: {e}"))?;
        let utc = if clock_s == 0.0 { site_time } else { self.earth.time.add_seconds(site_time, clock_s).map_err(|e| format!("arrival time not convertible: {e}"))? };
        let st = self.earth.station_state(&self.ephemeris, station, &utc).map_err(|e| format!("geometry unavailable: {e}"))?;
        let einstein_s = ratio_to_f64(st.tdb.label_fs() - st.tt.label_fs(), FS_PER_S);
        let t = TdbSeconds::from_epoch(&st.tdb).map_err(|e| e.to_string())?;
        let n = self.source.direction(t.approx_s());
        let r = st.bcrs_position_m;
        let roemer_s = delays::roemer_s(&r, &n);
        let parallax_s = delays::parallax_s(&r, &n, self.source.parallax_rad);
        let mut shapiro_body_s = [0.0; MAX_SHAPIRO_BODIES];
        let mut shapiro_s = 0.0;
        for (k, b) in self.shapiro.iter().enumerate() {
            let body = |tt: &TdbSeconds| -> Result<Vector3<f64>, String> {
                let p = self.ephemeris.shapiro_position_ssb_km(b.naif_id, tt).map_err(|e| format!("geometry unavailable: {e}"))?;
                Ok(Vector3::from(p) * 1e3)
            };
            // The Sun at the reception time; planets when the signal passes
            // them (one light-time iteration; REFERENCE.md §4).
            let mut x = body(&t)?;
            if b.naif_id != 10 {
                let back_s = (x - r).norm() / delays::C_M_S;
                x = body(&t.plus_s(-back_s))?;
            }
            let d = delays::shapiro_infinite_s(b.gm_m3_s2, self.ppn_gamma, &(x - r), &n);
            shapiro_body_s[k] = d;
            shapiro_s += d;
        }
        let f_bary = delays::barycentric_frequency_mhz(freq_mhz, &n, &st.bcrs_velocity_m_s);
        let dispersion_s = delays::dispersion_s(self.dm_pc_cm3, f_bary);
        let total = roemer_s + parallax_s - shapiro_s - dispersion_s;
        let bat = st.tdb.plus_fs(seconds_to_fs(total).ok_or("non-finite delay")?).map_err(|e| e.to_string())?;
        let (pulse_number, frac) = self.spin.phase(&bat);
        Ok(ArrivalResult {
            tdb: st.tdb,
            bat,
            clock_s,
            clock_extrapolated,
            einstein_s,
            roemer_s,
            parallax_s,
            shapiro_s,
            shapiro_body_s,
            dispersion_s,
            eop_predicted: st.eop.predicted,
            pulse_number,
            residual_s: frac / self.spin.frequency_hz,
        })
    }

    /// Processes a batch in parallel over fixed chunks; results are in input
    /// order and independent of the thread count.
    pub fn process_batch(&self, rows: &[Arrival]) -> Vec<Result<ArrivalResult, String>> {
        crate::pipeline::par_map_chunks(rows, self.chunk_rows, self.progress.as_deref(), |a| self.process(a))
    }

    /// The site arrival time (in the input's time scale) at which the model
    /// predicts an exact pulse, near a guess: solves residual = 0 by fixed
    /// point iteration on the femtosecond epoch to ≤ 1 ps (d BAT / d t_site =
    /// 1 ± 1e-4, so each pass gains four digits). Writing it as an f64 MJD
    /// fraction then rounds it by ≤ 5 ps.
    pub fn exact_arrival(&self, site: &str, guess_mjd: f64, freq_mhz: f64) -> Result<Epoch, String> {
        const SOLVE_TOL_S: f64 = 1e-12;
        if !guess_mjd.is_finite() {
            return Err(format!("plan epoch {guess_mjd} is not finite"));
        }
        let day = guess_mjd.floor() as i64;
        let mut e = self.earth.time.epoch_from_mjd(TimeScale::Utc, day, guess_mjd - day as f64).map_err(|e| e.to_string())?;
        for _ in 0..12 {
            let r = self.process_epoch(site, e, freq_mhz)?;
            if r.residual_s.abs() <= SOLVE_TOL_S {
                return Ok(e);
            }
            e = self.earth.time.add_seconds(e, -r.residual_s).map_err(|e| e.to_string())?;
        }
        Err(format!("no convergence to 1 ps near MJD {guess_mjd} at {site}"))
    }
}


/// Weighted mean of (residual, σ) pairs (weights 1/σ²; 0 without weight),
/// and the sum of the weights.
fn weighted_mean_and_weight(pairs: impl Iterator<Item = (f64, f64)>) -> (f64, f64) {
    let (mut sw, mut swr) = (0.0, 0.0);
    for (r, s) in pairs {
        let w = 1.0 / (s * s);
        sw += w;
        swr += w * r;
    }
    (if sw > 0.0 { swr / sw } else { 0.0 }, sw)
}

/// Weighted mean of residuals (s) given as (residual, σ) pairs: the mean
/// [`residual_summary`] reports, in one pass without collecting them.
pub fn weighted_mean(pairs: impl Iterator<Item = (f64, f64)>) -> f64 {
    weighted_mean_and_weight(pairs).0
}

/// Weighted statistics of residuals.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ResidualSummary {
    pub count: usize,
    pub weighted_mean_s: f64,
    pub weighted_rms_s: f64,
    pub chi2: f64,
}

/// Weighted mean, weighted RMS and χ² of residuals with σ (s); the RMS and χ²
/// are taken about the weighted mean when `about_mean`.
pub fn residual_summary(residual_s: &[f64], sigma_s: &[f64], about_mean: bool) -> ResidualSummary {
    let (mean, sw) = weighted_mean_and_weight(residual_s.iter().copied().zip(sigma_s.iter().copied()));
    let c = if about_mean { mean } else { 0.0 };
    let (mut swr2, mut chi2) = (0.0, 0.0);
    for (r, s) in residual_s.iter().zip(sigma_s) {
        let w = 1.0 / (s * s);
        swr2 += w * (r - c) * (r - c);
        chi2 += (r - c) * (r - c) * w;
    }
    ResidualSummary {
        count: residual_s.len(),
        weighted_mean_s: mean,
        weighted_rms_s: if sw > 0.0 { (swr2 / sw).sqrt() } else { 0.0 },
        chi2,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::TimeScales;

    #[test]
    fn phase_is_exact_at_whole_pulses() {
        let ts = TimeScales::builtin();
        let epoch = ts.epoch_from_mjd(TimeScale::Tdb, 58_000, 0.0).unwrap();
        let spin = SpinModel { epoch, frequency_hz: 312.5, derivatives: vec![] };
        // 10⁸ s later at 312.5 Hz: exactly 3.125e10 pulses, no fraction.
        let t = epoch.plus_fs(100_000_000 * FS_PER_S).unwrap();
        assert_eq!(spin.phase(&t), (31_250_000_000, 0.0));
        // A quarter pulse later (0.8 ms): fraction 0.25 to 1e-12 cycles.
        let (n, f) = spin.phase(&t.plus_fs(800_000_000_000).unwrap());
        assert_eq!(n, 31_250_000_000);
        assert!((f - 0.25).abs() < 1e-12, "{f}");
    }

    #[test]
    fn spin_down_term() {
        let ts = TimeScales::builtin();
        let epoch = ts.epoch_from_mjd(TimeScale::Tdb, 58_000, 0.0).unwrap();
        let spin = SpinModel { epoch, frequency_hz: 100.0, derivatives: vec![-2e-15] };
        // φ(Δt = 1e8 s) = 1e10 − 1e-15·1e16 = 1e10 − 10 cycles.
        let t = epoch.plus_fs(100_000_000 * FS_PER_S).unwrap();
        let (n, f) = spin.phase(&t);
        assert_eq!(n, 9_999_999_990);
        assert!(f.abs() < 1e-12);
    }

    #[test]
    fn summary_statistics() {
        let s = residual_summary(&[1.0, -1.0, 3.0], &[1.0, 1.0, 1.0], true);
        assert!((s.weighted_mean_s - 1.0).abs() < 1e-15);
        assert!((s.chi2 - 8.0).abs() < 1e-12);
        assert!((s.weighted_rms_s - (8.0f64 / 3.0).sqrt()).abs() < 1e-15);
    }
}
