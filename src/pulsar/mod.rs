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

use crate::delays::binary::{BinaryDelays, BinaryError, BinaryOrbit};
use crate::delays::{self, Source};
use crate::earth::{EarthError, EarthModel, StationCatalog, StationError};
use crate::ephemeris::{Ephemeris, EphemerisError, TdbSeconds};
use crate::parallel::Exec;
use crate::reject::{Coded, RejectCode};
use crate::time::femto::{FS_PER_S, div_floor, ratio_to_f64, seconds_to_fs};
use crate::time::{Epoch, TimeError, TimeScale};
use clock::{ClockError, ClockTable, chain_at};

pub use crate::delays::{MAX_SHAPIRO_BODIES, SHAPIRO_BODY_NAMES, ShapiroBody, shapiro_bodies};

/// Why one arrival time could not be processed (each a reject class).
#[derive(Debug, thiserror::Error)]
pub enum ArrivalError {
    #[error("arrival_mjd_frac out of range: {0:?} is not in [0, 1)")]
    FractionOutOfRange(f64),
    #[error("freq_mhz invalid: {0:?} (must be positive; infinite means no dispersion)")]
    Frequency(f64),
    #[error("arrival time not convertible: {0}")]
    Time(#[from] TimeError),
    #[error("unknown site: {0}")]
    UnknownSite(#[from] StationError),
    #[error("clock correction unavailable: no clock chain for site '{0}': add it under [clocks] sites")]
    NoClockChain(String),
    #[error("clock correction unavailable: {0}")]
    Clock(#[from] ClockError),
    #[error("geometry unavailable: {0}")]
    Earth(#[from] EarthError),
    #[error("geometry unavailable: {0}")]
    Ephemeris(#[from] EphemerisError),
    #[error("non-finite delay {0:?} s")]
    NonFiniteDelay(f64),
    #[error("plan epoch {0} is not finite")]
    PlanEpoch(f64),
    #[error("no convergence to 1 ps near MJD {mjd} at {site}")]
    NoConvergence { site: String, mjd: f64 },
    #[error("binary orbit: {0}")]
    Binary(#[from] BinaryError),
}

impl Coded for ArrivalError {
    fn reject_code(&self) -> RejectCode {
        match self {
            ArrivalError::FractionOutOfRange(_) => RejectCode::FractionOutOfRange,
            ArrivalError::Frequency(_) | ArrivalError::PlanEpoch(_) => RejectCode::InvalidValue,
            ArrivalError::Time(_) => RejectCode::TimeNotConvertible,
            ArrivalError::UnknownSite(_) => RejectCode::UnknownStation,
            ArrivalError::NoClockChain(_) | ArrivalError::Clock(_) => RejectCode::ClockUnavailable,
            ArrivalError::Earth(_) | ArrivalError::Ephemeris(_) => RejectCode::GeometryUnavailable,
            ArrivalError::NonFiniteDelay(_) => RejectCode::NotFinite,
            ArrivalError::NoConvergence { .. } | ArrivalError::Binary(BinaryError::NotConverged(_)) => RejectCode::NotConverged,
            ArrivalError::Binary(BinaryError::Unphysical { .. }) => RejectCode::ModelNotApplicable,
        }
    }
}

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
    /// The binary orbit, if the pulsar has a companion.
    pub binary: Option<Binary>,
}

/// A binary orbit and its reference epoch (T₀, or T_asc for the
/// near-circular model), TDB.
#[derive(Clone, Debug)]
pub struct Binary {
    pub orbit: BinaryOrbit,
    pub epoch: Epoch,
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
    /// The binary delays (emission time T = BAT − binary total), if any.
    pub binary: Option<BinaryDelays>,
    pub pulse_number: i64,
    /// Before any weighted-mean removal.
    pub residual_s: f64,
}

impl PulsarContext {
    /// Clock correction (s) for a site at an input epoch.
    fn clock(&self, site: &str, mjd: f64) -> Result<(f64, bool), ArrivalError> {
        if !self.input_is_site_clock {
            return Ok((0.0, false));
        }
        let chain = self.clocks.get(site).ok_or_else(|| ArrivalError::NoClockChain(site.to_string()))?;
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
    pub fn process(&self, a: &Arrival) -> Result<ArrivalResult, ArrivalError> {
        if !a.mjd_frac.is_finite() || !(0.0..1.0).contains(&a.mjd_frac) {
            return Err(ArrivalError::FractionOutOfRange(a.mjd_frac));
        }
        if a.freq_mhz.is_nan() || a.freq_mhz <= 0.0 {
            return Err(ArrivalError::Frequency(a.freq_mhz));
        }
        let site_time = self.earth.time.epoch_from_mjd(TimeScale::Utc, a.mjd_day, a.mjd_frac)?;
        self.process_epoch(a.site, site_time, a.freq_mhz)
    }

    /// As [`Self::process`], for a site arrival time given as an epoch (in
    /// the input's time scale, labelled like UTC days).
    pub fn process_epoch(&self, site: &str, site_time: Epoch, freq_mhz: f64) -> Result<ArrivalResult, ArrivalError> {
        let station = self.stations.get(site)?;
        let mjd = site_time.mjd_day() as f64 + ratio_to_f64(site_time.fs_of_day(), crate::time::femto::FS_PER_DAY);
        let (clock_s, clock_extrapolated) = self.clock(site, mjd)?;
        let utc = if clock_s == 0.0 { site_time } else { self.earth.time.add_seconds(site_time, clock_s)? };
        let st = self.earth.station_state(&self.ephemeris, station, &utc)?;
        let einstein_s = delays::einstein_s(&st.tdb, &st.tt);
        let t = TdbSeconds::from_epoch(&st.tdb)?;
        let n = self.source.direction(t.approx_s());
        let r = st.bcrs_position_m;
        let roemer_s = delays::roemer_s(&r, &n);
        let parallax_s = delays::parallax_s(&r, &n, self.source.parallax_rad);
        let mut shapiro_body_s = [0.0; MAX_SHAPIRO_BODIES];
        let mut shapiro_s = 0.0;
        for (k, b) in self.shapiro.iter().enumerate() {
            let body = |tt: &TdbSeconds| -> Result<Vector3<f64>, ArrivalError> {
                let p = self.ephemeris.shapiro_position_ssb_km(b.naif_id, tt)?;
                Ok(Vector3::from(p) * 1e3)
            };
            // The Sun at the reception time; planets when the signal passes
            // them (one light-time iteration; the retarded position of
            // Backer & Hellings 1986, ARA&A 24, 537, sec. 3.2).
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
        let bat = st.tdb.plus_fs(seconds_to_fs(total).ok_or(ArrivalError::NonFiniteDelay(total))?)?;
        // In a binary: the pulse left the pulsar at its proper time T, with
        // BAT = T + binary_s(T); the spin phase is the pulsar's at T.
        let (emission, binary) = match &self.binary {
            Some(b) => {
                let bat_dt_s = ratio_to_f64(bat.label_fs() - b.epoch.label_fs(), FS_PER_S);
                let (_, d) = b.orbit.emission(bat_dt_s)?;
                (bat.plus_fs(-seconds_to_fs(d.total_s).ok_or(ArrivalError::NonFiniteDelay(d.total_s))?)?, Some(d))
            }
            None => (bat, None),
        };
        let (pulse_number, frac) = self.spin.phase(&emission);
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
            binary,
            pulse_number,
            residual_s: frac / self.spin.frequency_hz,
        })
    }

    /// Processes a batch in parallel over fixed chunks; results are in input
    /// order and independent of the thread count.
    pub fn process_batch(&self, rows: &[Arrival], exec: &Exec) -> Vec<Result<ArrivalResult, ArrivalError>> {
        exec.map(rows, |a| self.process(a))
    }

    /// The site arrival time (in the input's time scale) at which the model
    /// predicts an exact pulse, near a guess: solves residual = 0 by fixed
    /// point iteration on the femtosecond epoch to ≤ 1 ps (d BAT / d t_site =
    /// 1 ± 1e-4, so each pass gains four digits). Writing it as an f64 MJD
    /// fraction then rounds it by ≤ 5 ps.
    pub fn exact_arrival(&self, site: &str, guess_mjd: f64, freq_mhz: f64) -> Result<Epoch, ArrivalError> {
        const SOLVE_TOL_S: f64 = 1e-12;
        if !guess_mjd.is_finite() {
            return Err(ArrivalError::PlanEpoch(guess_mjd));
        }
        let day = guess_mjd.floor() as i64;
        let mut e = self.earth.time.epoch_from_mjd(TimeScale::Utc, day, guess_mjd - day as f64)?;
        for _ in 0..12 {
            let r = self.process_epoch(site, e, freq_mhz)?;
            if r.residual_s.abs() <= SOLVE_TOL_S {
                return Ok(e);
            }
            e = self.earth.time.add_seconds(e, -r.residual_s)?;
        }
        Err(ArrivalError::NoConvergence { site: site.to_string(), mjd: guess_mjd })
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
}
