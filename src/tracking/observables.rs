//! Computed observables of deep-space tracking: round-trip and one-way light
//! time, two-, three- and one-way Doppler.
//!
//! Conventions (tested):
//! - Round-trip light time in station time: ρ = (t₃ − t₁)_TDB −
//!   (TDB − TT)_rx(t₃) + (TDB − TT)_tx(t₁) + station delays (receiver and
//!   transmitter, one each) + transponder delay. One-way: ρ = (t₃ − t₂)_TDB −
//!   (TDB − TT)_rx(t₃) + receiver delay.
//! - Two-/three-way Doppler over a count interval T_c ending at the tagged
//!   reception: F = M₂ · f_up · (ρ(end) − ρ(start)) / T_c, positive when the
//!   round trip lengthens (spacecraft receding); the received frequency is
//!   M₂ f_up − F to first order. M₂ = 240/221 (S band uplink, 2.0–2.3 GHz),
//!   880/749 (X band, 7.0–7.3 GHz) — common practice — or set in the pipeline.
//! - One-way Doppler: F = f_osc − f_R, f_R = f_osc · Δτ_sc / T_c with Δτ_sc the
//!   spacecraft proper time elapsed over the transmission interval; positive
//!   when receding. The `uplink_hz` column carries f_osc for one-way rows.
//!
//! # References
//! Moyer 2000, JPL DESCANSO Monograph 2: ch. 11 (round-trip light time,
//! eq. 11-7), ch. 13 (two- and three-way Doppler, eq. 13-52 in the
//! difference-of-range form); IERS Conventions 2010, eq. 10.1–10.2
//! (proper time of the spacecraft clock).

use std::str::FromStr;

use nalgebra::Vector3;

use crate::delays::ShapiroBody;
use crate::earth::{EarthError, EarthModel, Station, StationCatalog, StationError};
use crate::ephemeris::{Ephemeris, EphemerisError, TdbSeconds};
use crate::light_time::{Anchor, Leg, LightTimeError, ShapiroSet, solve_backward_anchored};
use crate::parallel::Exec;
use crate::reject::{Coded, RejectCode};
use crate::time::femto::{FS_PER_S, ratio_to_f64, seconds_to_fs};
use crate::time::relativistic::L_B;
use crate::time::{Epoch, TimeError, TimeScale};
use crate::tracking::propagate::PointMassField;
use crate::tracking::troposphere::{SurfaceMet, slant_delay_s};

/// Why one measurement could not be computed (each a reject class).
#[derive(Debug, thiserror::Error)]
pub enum TrackingError {
    #[error("unknown kind '{0}' (light_time_2way, light_time_1way, doppler_2way, doppler_3way, doppler_1way)")]
    UnknownKind(String),
    #[error("rx_mjd_frac out of range: {0:?} is not in [0, 1)")]
    FractionOutOfRange(f64),
    #[error("unknown station: {0}")]
    UnknownStation(#[from] StationError),
    #[error("reception time not convertible: {0}")]
    ReceptionTime(TimeError),
    #[error("{0}")]
    Time(#[from] TimeError),
    #[error("three-way Doppler needs a tx_station different from rx_station")]
    ThreeWaySameStation,
    #[error("two-way measurement with tx_station '{tx}' ≠ rx_station '{rx}': use doppler_3way")]
    TwoWayDifferentStations { tx: String, rx: String },
    #[error("count_s invalid: {0:?} (a Doppler count interval must be positive)")]
    CountInterval(f64),
    #[error("uplink_hz invalid: {0:?} (must be positive)")]
    Uplink(f64),
    #[error("no turnaround ratio for uplink {0} Hz (S or X band expected; set [target] turnaround_ratio)")]
    NoTurnaround(f64),
    #[error("spacecraft ephemeris: {0}")]
    Spacecraft(EphemerisError),
    #[error("geometry unavailable: {0}")]
    Earth(#[from] EarthError),
    #[error("{0}")]
    Ephemeris(#[from] EphemerisError),
    #[error("{0}")]
    LightTime(#[from] LightTimeError),
    #[error("{leg} leg: {source}")]
    Leg { leg: &'static str, source: Box<TrackingError> },
    #[error("spacecraft below the horizon at {station} (elevation {elevation_deg:.2}°): no tropospheric model")]
    BelowHorizon { station: String, elevation_deg: f64 },
    #[error("no geodetic position for {0}")]
    NoGeodetic(String),
    #[error("non-finite value {0}")]
    NonFinite(f64),
}

impl Coded for TrackingError {
    fn reject_code(&self) -> RejectCode {
        use TrackingError as T;
        match self {
            T::UnknownKind(_) => RejectCode::UnknownObservable,
            T::FractionOutOfRange(_) => RejectCode::FractionOutOfRange,
            T::UnknownStation(_) => RejectCode::UnknownStation,
            T::ReceptionTime(_) | T::Time(_) => RejectCode::TimeNotConvertible,
            T::ThreeWaySameStation | T::TwoWayDifferentStations { .. } => RejectCode::InconsistentRow,
            T::CountInterval(_) | T::Uplink(_) => RejectCode::InvalidValue,
            T::NoTurnaround(_) | T::BelowHorizon { .. } | T::NoGeodetic(_) => RejectCode::ModelNotApplicable,
            T::Spacecraft(_) | T::Earth(_) | T::Ephemeris(_) => RejectCode::GeometryUnavailable,
            T::LightTime(e) => e.reject_code(),
            T::Leg { source, .. } => source.reject_code(),
            T::NonFinite(_) => RejectCode::NotFinite,
        }
    }
}

impl TrackingError {
    fn leg(leg: &'static str) -> impl FnOnce(TrackingError) -> TrackingError {
        move |e| TrackingError::Leg { leg, source: Box::new(e) }
    }
}

/// Kinds of measurement.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Kind {
    LightTime2Way,
    LightTime1Way,
    Doppler2Way,
    Doppler3Way,
    Doppler1Way,
}

impl FromStr for Kind {
    type Err = TrackingError;
    fn from_str(s: &str) -> Result<Self, TrackingError> {
        Ok(match s {
            "light_time_2way" => Kind::LightTime2Way,
            "light_time_1way" => Kind::LightTime1Way,
            "doppler_2way" => Kind::Doppler2Way,
            "doppler_3way" => Kind::Doppler3Way,
            "doppler_1way" => Kind::Doppler1Way,
            other => return Err(TrackingError::UnknownKind(other.to_string())),
        })
    }
}

/// Everything a tracking batch shares: loaded once.
#[derive(Debug)]
pub struct TrackingContext {
    pub ephemeris: Ephemeris,
    pub earth: EarthModel,
    pub stations: StationCatalog,
    /// NAIF id of the spacecraft.
    pub target: i32,
    pub shapiro: Vec<ShapiroBody>,
    pub ppn_gamma: f64,
    /// Transponder delay, s (two- and three-way).
    pub transponder_delay_s: f64,
    /// Turnaround ratio override (numerator, denominator).
    pub turnaround: Option<(f64, f64)>,
    /// Gravity field for the spacecraft clock's proper-time rate.
    pub field: PointMassField,
    /// Tropospheric correction, when asked for.
    pub troposphere: Option<Troposphere>,
}

/// Opt-in tropospheric correction: surface meteorology per station, or the
/// standard atmosphere at the station's height for stations not listed.
#[derive(Clone, Debug, Default)]
pub struct Troposphere {
    pub stations: std::collections::BTreeMap<String, SurfaceMet>,
}

impl Troposphere {
    /// Slant delay (s) at a station for the spacecraft at `elevation_deg`.
    fn delay_s(&self, st: &Station, elevation_deg: f64) -> Result<f64, TrackingError> {
        if st.itrf_m == [0.0; 3] {
            return Ok(0.0);
        }
        if !(elevation_deg > 0.0) {
            return Err(TrackingError::BelowHorizon { station: st.code.clone(), elevation_deg });
        }
        let (_, lat, h) = sofars::coords::gc2gd(2, st.itrf_m).map_err(|_| TrackingError::NoGeodetic(st.code.clone()))?;
        let met = self.stations.get(&st.code).copied().unwrap_or_else(|| SurfaceMet::standard(h));
        Ok(slant_delay_s(&met, lat, h, elevation_deg.to_radians()))
    }
}

/// One measurement.
#[derive(Clone, Copy, Debug)]
pub struct Measurement<'a> {
    pub kind: Kind,
    pub rx_station: &'a str,
    pub tx_station: Option<&'a str>,
    /// Reception (end of the count interval for Doppler), UTC.
    pub rx_mjd_day: i64,
    pub rx_mjd_frac: f64,
    pub count_s: f64,
    pub uplink_hz: f64,
}

/// What is computed for one measurement (at the tagged reception).
#[derive(Clone, Copy, Debug)]
pub struct TrackingResult {
    pub computed: f64,
    pub light_time_down_s: f64,
    pub light_time_up_s: Option<f64>,
    pub shapiro_down_s: f64,
    pub shapiro_up_s: Option<f64>,
    /// TDB − TT at the receiving station at reception, s.
    pub clock_rx_s: f64,
    /// TDB − TT at the transmitting station at transmission, s.
    pub clock_tx_s: Option<f64>,
    /// Spacecraft event (bounce or one-way transmission), TDB.
    pub bounce_tdb: Epoch,
    /// Transmission at the station, UTC.
    pub tx_utc: Option<Epoch>,
    /// Elevation of the spacecraft at the receiver (geometric, deg; NaN at the geocentre).
    pub elevation_rx_deg: f64,
    /// Tropospheric delay included in the computed light time, s (0 when off).
    pub troposphere_s: f64,
}

/// One light-time solution of a (possibly two-leg) path.
struct Path {
    /// ρ in femtoseconds of station time (exact differences for Doppler).
    rho_fs: i128,
    down: Leg,
    up: Option<Leg>,
    clock_rx_s: f64,
    clock_tx_s: Option<f64>,
    tx_utc: Option<Epoch>,
    elevation_rx_deg: f64,
    troposphere_s: f64,
}

fn s_to_fs(x: f64) -> Result<i128, TrackingError> {
    seconds_to_fs(x).ok_or(TrackingError::NonFinite(x))
}

/// Turnaround ratio M₂ of a coherent transponder for an uplink frequency:
/// 240/221 in S band, 880/749 in X band (common practice).
pub fn turnaround_ratio(uplink_hz: f64) -> Option<(f64, f64)> {
    if (2.0e9..2.3e9).contains(&uplink_hz) {
        Some((240.0, 221.0))
    } else if (7.0e9..7.3e9).contains(&uplink_hz) {
        Some((880.0, 749.0))
    } else {
        None
    }
}

impl TrackingContext {
    fn station(&self, code: &str) -> Result<&Station, TrackingError> {
        Ok(self.stations.get(code)?)
    }

    fn spacecraft(&self, t: &Epoch) -> Result<(Vector3<f64>, Vector3<f64>), TrackingError> {
        let s = self.ephemeris.state_ssb(self.target, &TdbSeconds::from_epoch(t)?).map_err(TrackingError::Spacecraft)?;
        Ok((Vector3::from(s.position_km) * 1e3, Vector3::from(s.velocity_km_s) * 1e3))
    }

    /// The light path for a reception at `rx` at UTC `rx_utc`, transmitted by
    /// `tx` (two-/three-way) or by the spacecraft (one-way).
    fn path(&self, rx: &Station, tx: Option<&Station>, rx_utc: &Epoch) -> Result<Path, TrackingError> {
        let st_rx = self.earth.station_state(&self.ephemeris, rx, rx_utc)?;
        let t3 = st_rx.tdb;
        let x_rx = st_rx.bcrs_position_m;
        let t3s = TdbSeconds::from_epoch(&t3)?;
        let sh_down = ShapiroSet::for_receiver(&self.ephemeris, &self.shapiro, self.ppn_gamma, &t3s, &x_rx)?;
        // Down leg: the first light time from the spacecraft at t3, then the
        // spacecraft moving uniformly from its state there (the remaining
        // change of the light time, ≲ v/c · τ ≈ 0.1 s, moves it ≤ 1e-4 m
        // under ≤ 0.02 m/s² of acceleration), then exact states — usually one
        // — to the same 0.1 ps criterion.
        let (x0, _) = self.spacecraft(&t3)?;
        let tau1_s = (x_rx - x0).norm() / crate::delays::C_M_S;
        let t1 = t3.plus_fs(-s_to_fs(tau1_s)?)?;
        let (x_m, v_m_s) = self.spacecraft(&t1)?;
        let down = solve_backward_anchored(&t3, &x_rx, &sh_down, tau1_s, &Anchor { t: t1, x_m, v_m_s }, |t| self.spacecraft(t)).map_err(TrackingError::leg("down"))?;
        let clock_rx_s = ratio_to_f64(t3.label_fs() - st_rx.tt.label_fs(), FS_PER_S);
        let los = down.x_tx_m - x_rx;
        let up_vec = st_rx.up_gcrs;
        let elevation_rx_deg = if up_vec.norm() > 0.0 { (up_vec.dot(&los) / los.norm()).clamp(-1.0, 1.0).asin().to_degrees() } else { f64::NAN };
        // The tropospheric delay is added to the light time of each leg that
        // touches a station; its effect on the geometry (moving the
        // spacecraft epoch by ≤ 70 ns) changes ρ by ≤ (v/c)·70 ns ≈ 7 ps.
        let trop_rx = match &self.troposphere {
            Some(t) => t.delay_s(rx, elevation_rx_deg)?,
            None => 0.0,
        };
        let Some(tx) = tx else {
            let rho_fs = (t3.label_fs() - down.t_tx.label_fs()) - s_to_fs(clock_rx_s)? + s_to_fs(rx.delay_s + trop_rx)?;
            return Ok(Path { rho_fs, down, up: None, clock_rx_s, clock_tx_s: None, tx_utc: None, elevation_rx_deg, troposphere_s: trop_rx });
        };
        let t2 = down.t_tx;
        let x_sc = down.x_tx_m;
        let t2s = TdbSeconds::from_epoch(&t2)?;
        let sh_up = ShapiroSet::for_receiver(&self.ephemeris, &self.shapiro, self.ppn_gamma, &t2s, &x_sc)?;
        // Up leg in two phases (each station state costs a full Earth
        // orientation and ephemeris evaluation): (1) iterate on the station
        // moving uniformly from its state at t2 − (down-leg light time) — the
        // up-leg light time differs by ≲ 0.05 s, over which the neglected
        // acceleration (≤ 0.04 m/s²) moves it ≤ 5e-5 m; (2) iterate with
        // exact states from there, usually converging at the first one. The
        // result meets the same 0.1 ps criterion as exact iteration from zero.
        let t_guess = t2.plus_fs(-s_to_fs(down.light_time_s)?)?;
        // The anchor: one pass at the UTC of the geocentre's TDB at t_guess;
        // its state is exact at its own TDB (s0.tdb, within 2.1 µs of t_guess).
        let utc_guess = self.earth.time.convert(t_guess, TimeScale::Utc, 0.0)?;
        let s0 = self.earth.station_state(&self.ephemeris, tx, &utc_guess)?;
        let anchor = Anchor { t: s0.tdb, x_m: s0.bcrs_position_m, v_m_s: s0.bcrs_velocity_m_s };
        // Exact states in one pass each, the observer term taken from the
        // previous state of this station (≤ 0.1 s away: the state's own TDB
        // is within 2e-11 s of the asked epoch), stepped to that epoch along
        // its velocity (EarthModel::station_state_at_hinted).
        let mut last: Option<crate::earth::StationState> = None;
        let up = solve_backward_anchored(&t2, &x_sc, &sh_up, down.light_time_s, &anchor, |t| {
            let hint_s = last.as_ref().map_or(s0.observer_term_s, |s| s.observer_term_s);
            let s = self.earth.station_state_at_hinted(&self.ephemeris, tx, t, hint_s)?;
            let dt_s = ratio_to_f64(t.label_fs() - s.tdb.label_fs(), FS_PER_S);
            let out = (s.bcrs_position_m + s.bcrs_velocity_m_s * dt_s, s.bcrs_velocity_m_s);
            last = Some(s);
            Ok(out)
        })
        .map_err(TrackingError::leg("up"))?;
        // The state of the last iteration: within 0.1 ps of up.t_tx (3e-8 m
        // of station motion; TDB − TT there differs by < 1e-20 s).
        let st_tx = last.ok_or(TrackingError::Leg { leg: "up", source: Box::new(TrackingError::LightTime(LightTimeError::NotConverged)) })?;
        let clock_tx_s = ratio_to_f64(st_tx.tdb.label_fs() - st_tx.tt.label_fs(), FS_PER_S);
        let tx_utc = self.earth.time.convert(up.t_tx, TimeScale::Utc, st_tx.observer_term_s)?;
        let trop_tx = match &self.troposphere {
            Some(t) => {
                let los = x_sc - st_tx.bcrs_position_m;
                let el = if st_tx.up_gcrs.norm() > 0.0 { (st_tx.up_gcrs.dot(&los) / los.norm()).clamp(-1.0, 1.0).asin().to_degrees() } else { f64::NAN };
                t.delay_s(tx, el)?
            }
            None => 0.0,
        };
        let rho_fs = (t3.label_fs() - up.t_tx.label_fs()) - s_to_fs(clock_rx_s)? + s_to_fs(clock_tx_s)? + s_to_fs(rx.delay_s + tx.delay_s + self.transponder_delay_s + trop_rx + trop_tx)?;
        Ok(Path { rho_fs, down, up: Some(up), clock_rx_s, clock_tx_s: Some(clock_tx_s), tx_utc: Some(tx_utc), elevation_rx_deg, troposphere_s: trop_rx + trop_tx })
    }

    /// Proper-time rate of the spacecraft clock against TDB, minus one:
    /// −(U + v²/2)/c² + L_B (TDB runs slower than TCB by L_B).
    ///
    /// # References
    /// IERS Conventions 2010, eq. 10.1–10.2 (proper time in the BCRS) and
    /// eq. 10.6 (TDB = TCB − L_B·(…)).
    pub fn spacecraft_rate_offset(&self, t: &Epoch) -> Result<f64, TrackingError> {
        let (x, v) = self.spacecraft(t)?;
        let ts = TdbSeconds::from_epoch(t)?;
        let u_km2_s2 = self.field.potential_km2_s2(&self.ephemeris, &ts, &[x[0] / 1e3, x[1] / 1e3, x[2] / 1e3])?;
        Ok(crate::time::clock_rate::proper_time_rate_offset(u_km2_s2 * 1e6, v.norm()) + L_B)
    }

    /// Grids the celestial pole, TDB − TT, the Shapiro bodies' positions and
    /// the Earth's state over a batch's reception days (UTC MJD; see
    /// [`EarthModel::cover_utc_days`],
    /// [`Ephemeris::cover_body_grids_utc_days`] and
    /// [`Ephemeris::cover_earth_grid_utc_days`]).
    pub fn cover_batch_days(&mut self, days_mjd_utc: &[Option<i64>]) {
        self.earth.cover_utc_days(days_mjd_utc.iter().flatten().copied());
        let ids: Vec<i32> = self.shapiro.iter().map(|b| b.naif_id).collect();
        self.ephemeris.cover_body_grids_utc_days(&ids, days_mjd_utc.iter().flatten().copied());
        self.ephemeris.cover_earth_grid_utc_days(days_mjd_utc.iter().flatten().copied());
    }

    /// Computes one measurement.
    pub fn compute(&self, m: &Measurement) -> Result<TrackingResult, TrackingError> {
        if !m.rx_mjd_frac.is_finite() || !(0.0..1.0).contains(&m.rx_mjd_frac) {
            return Err(TrackingError::FractionOutOfRange(m.rx_mjd_frac));
        }
        let rx = self.station(m.rx_station)?;
        let rx_utc = self.earth.time.epoch_from_mjd(TimeScale::Utc, m.rx_mjd_day, m.rx_mjd_frac).map_err(TrackingError::ReceptionTime)?;
        let two_way = matches!(m.kind, Kind::LightTime2Way | Kind::Doppler2Way | Kind::Doppler3Way);
        let tx = if two_way {
            let code = m.tx_station.filter(|s| !s.is_empty()).unwrap_or(m.rx_station);
            if m.kind == Kind::Doppler3Way && code == m.rx_station {
                return Err(TrackingError::ThreeWaySameStation);
            }
            if matches!(m.kind, Kind::LightTime2Way | Kind::Doppler2Way) && code != m.rx_station {
                return Err(TrackingError::TwoWayDifferentStations { tx: code.to_string(), rx: m.rx_station.to_string() });
            }
            Some(self.station(code)?)
        } else {
            None
        };
        let is_doppler = matches!(m.kind, Kind::Doppler2Way | Kind::Doppler3Way | Kind::Doppler1Way);
        if is_doppler && !(m.count_s.is_finite() && m.count_s > 0.0) {
            return Err(TrackingError::CountInterval(m.count_s));
        }
        if is_doppler && !(m.uplink_hz.is_finite() && m.uplink_hz > 0.0) {
            return Err(TrackingError::Uplink(m.uplink_hz));
        }
        let end = self.path(rx, tx, &rx_utc)?;
        let computed = match m.kind {
            Kind::LightTime2Way | Kind::LightTime1Way => ratio_to_f64(end.rho_fs, FS_PER_S),
            Kind::Doppler2Way | Kind::Doppler3Way => {
                let (num, den) = match self.turnaround {
                    Some(r) => r,
                    None => turnaround_ratio(m.uplink_hz).ok_or(TrackingError::NoTurnaround(m.uplink_hz))?,
                };
                let start_utc = self.earth.time.add_seconds(rx_utc, -m.count_s)?;
                let start = self.path(rx, tx, &start_utc)?;
                let d_rho_s = ratio_to_f64(end.rho_fs - start.rho_fs, FS_PER_S);
                num / den * m.uplink_hz * d_rho_s / m.count_s
            }
            Kind::Doppler1Way => {
                let start_utc = self.earth.time.add_seconds(rx_utc, -m.count_s)?;
                let start = self.path(rx, None, &start_utc)?;
                let dt2_s = ratio_to_f64(end.down.t_tx.label_fs() - start.down.t_tx.label_fs(), FS_PER_S);
                let mid = start.down.t_tx.plus_fs((end.down.t_tx.label_fs() - start.down.t_tx.label_fs()) / 2)?;
                let rate = self.spacecraft_rate_offset(&mid)?;
                // f_R = f_osc · Δτ_sc / T_c, F = f_osc − f_R; written so that
                // the large common part cancels exactly.
                m.uplink_hz * ((m.count_s - dt2_s) - dt2_s * rate) / m.count_s
            }
        };
        Ok(TrackingResult {
            computed,
            light_time_down_s: end.down.light_time_s,
            light_time_up_s: end.up.map(|u| u.light_time_s),
            shapiro_down_s: end.down.shapiro_s,
            shapiro_up_s: end.up.map(|u| u.shapiro_s),
            clock_rx_s: end.clock_rx_s,
            clock_tx_s: end.clock_tx_s,
            bounce_tdb: end.down.t_tx,
            tx_utc: end.tx_utc,
            elevation_rx_deg: end.elevation_rx_deg,
            troposphere_s: end.troposphere_s,
        })
    }

    /// Computes a batch in parallel over fixed chunks, in input order.
    pub fn compute_batch(&self, rows: &[Measurement], exec: &Exec) -> Vec<Result<TrackingResult, TrackingError>> {
        exec.map(rows, |m| self.compute(m))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kinds_and_turnaround() {
        assert_eq!("doppler_3way".parse::<Kind>().unwrap(), Kind::Doppler3Way);
        assert!("range".parse::<Kind>().is_err());
        assert_eq!(turnaround_ratio(7.15e9), Some((880.0, 749.0)));
        assert_eq!(turnaround_ratio(2.1e9), Some((240.0, 221.0)));
        assert_eq!(turnaround_ratio(32e9), None);
    }
}
