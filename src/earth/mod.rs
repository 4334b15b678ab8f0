//! Where a station is: Earth orientation (IERS EOP), the ITRS → GCRS
//! rotation, station catalogues, and station states in the GCRS and BCRS
//! with the topocentric part of TDB − TT.

pub mod eop;
pub mod rotation;
pub mod station;

use nalgebra::Vector3;

pub use eop::{EopError, EopTable, EopValues};
pub use rotation::{CIP_GRID_STEP_DAY, CipGrid, CipXys, TerrestrialToCelestial, itrs_to_gcrs};
pub use station::{Station, StationCatalog, StationError};

use crate::ephemeris::{Ephemeris, EphemerisError, StateKm, TdbSeconds};
use crate::time::femto::{FS_PER_DAY, ratio_to_f64, seconds_to_fs};
use crate::time::{Epoch, TimeError, TimeScale, TimeScales, tdb_fs_from_parts};

/// Speed of light, m/s.
const C_M_S: f64 = crate::time::clock_rate::C_M_S;

/// GCRS position (m), velocity (m/s) and local vertical (unit) of a station,
/// the EOP values used and the epoch in TT.
type GcrsWithUp = (Vector3<f64>, Vector3<f64>, Vector3<f64>, EopValues, Epoch);

/// Errors of station-state computations.
#[derive(Debug, thiserror::Error)]
pub enum EarthError {
    #[error(transparent)]
    Eop(#[from] EopError),
    #[error(transparent)]
    Ephemeris(#[from] EphemerisError),
    #[error(transparent)]
    Station(#[from] StationError),
    #[error("{context}: {source}")]
    Time { context: String, source: TimeError },
    #[error("ephemeris epoch: {0}")]
    EpochScale(#[from] TimeError),
}

/// Where X, Y, s come from.
#[derive(Clone, Debug)]
pub enum CipSource {
    /// Evaluate the IAU 2006/2000A series at every call (slow, reference).
    Direct,
    /// Interpolate on a precomputed grid; falls back to direct outside it.
    Grid(CipGrid),
}

/// The state of a station at one UTC epoch.
#[derive(Clone, Copy, Debug)]
pub struct StationState {
    /// The event in TT.
    pub tt: Epoch,
    /// The event in TDB at the station (topocentric term included).
    pub tdb: Epoch,
    /// Topocentric part of TDB − TT, v_E · x_GCRS / c², seconds.
    pub observer_term_s: f64,
    /// Earth-orientation values used.
    pub eop: EopValues,
    /// GCRS position (m) and velocity (m/s).
    pub gcrs_position_m: Vector3<f64>,
    pub gcrs_velocity_m_s: Vector3<f64>,
    /// Barycentric state of the Earth at `tdb` (km, km/s).
    pub earth_ssb: StateKm,
    /// Local vertical of the station in the GCRS (unit; zero at the geocentre).
    pub up_gcrs: Vector3<f64>,
    /// BCRS position (m) and velocity (m/s) of the station, first order:
    /// x_E + x_GCRS.
    pub bcrs_position_m: Vector3<f64>,
    pub bcrs_velocity_m_s: Vector3<f64>,
}

/// Earth orientation and time scales for station computations.
#[derive(Clone, Debug)]
pub struct EarthModel {
    pub time: TimeScales,
    pub eop: EopTable,
    pub cip: CipSource,
    /// Apply the observed celestial pole offsets dX, dY (IERS Conventions
    /// 2010, eq. 5.25). On by default; off only to compare with software
    /// that omits them (they reach ≈ 1 mas, 3 cm at the surface).
    pub pole_offsets: bool,
}

/// Two-part Julian Date (2400000.5 + MJD day, fraction) of a uniform epoch.
fn jd_parts(e: &Epoch) -> (f64, f64) {
    (2_400_000.5 + e.mjd_day() as f64, ratio_to_f64(e.fs_of_day(), FS_PER_DAY))
}

impl EarthModel {
    /// With direct (series) evaluation of the celestial pole.
    pub fn new(time: TimeScales, eop: EopTable) -> Self {
        Self { time, eop, cip: CipSource::Direct, pole_offsets: true }
    }

    /// Switch to a grid of X, Y, s covering a UTC span (MJD), for batches.
    pub fn with_cip_grid(mut self, first_mjd_utc: f64, last_mjd_utc: f64) -> Self {
        self.set_cip_grid(first_mjd_utc, last_mjd_utc);
        self
    }

    /// True when the grids already cover a UTC span (MJD).
    pub fn grids_cover(&self, first_mjd_utc: f64, last_mjd_utc: f64) -> bool {
        match &self.cip {
            CipSource::Grid(g) => {
                let (a, b) = g.span_mjd_tt();
                a <= first_mjd_utc - 0.5 && b >= last_mjd_utc + 0.5
            }
            CipSource::Direct => false,
        }
    }

    /// Makes the grids cover the UTC days `days_mjd_utc` (each to its end),
    /// building them only when the present grids fall short. Days outside
    /// MJD 40 000 – 100 000 are skipped (their rows are rejected later), so
    /// one wild value cannot make a huge grid. Grid nodes sit at fixed
    /// multiples of a power-of-two step, so a result does not depend on
    /// which span built the grid.
    pub fn cover_utc_days(&mut self, days_mjd_utc: impl IntoIterator<Item = i64>) {
        if let Some((lo, hi)) = crate::time::batch_day_span(days_mjd_utc)
            && !self.grids_cover(lo as f64, hi as f64 + 1.0)
        {
            self.set_cip_grid(lo as f64, hi as f64 + 1.0);
        }
    }

    /// Use grids of X, Y, s and of TDB − TT covering a UTC span (MJD): the
    /// fast path for batches, each within its tested bound of the direct path.
    pub fn set_cip_grid(&mut self, first_mjd_utc: f64, last_mjd_utc: f64) {
        // TT − UTC < 80 s: pad by a day either side.
        self.cip = CipSource::Grid(CipGrid::new(first_mjd_utc - 1.0, last_mjd_utc + 1.0, CIP_GRID_STEP_DAY));
        let day_fs = FS_PER_DAY as f64;
        self.time.set_tdb_grid(((first_mjd_utc - 1.0) * day_fs) as i128, ((last_mjd_utc + 1.0) * day_fs) as i128);
    }

    /// X, Y, s at a TT epoch given with its two-part Julian Date.
    fn cip_at(&self, tt: &Epoch, (j1, j2): (f64, f64)) -> CipXys {
        match &self.cip {
            CipSource::Grid(g) => {
                let mjd = tt.mjd_day() as f64 + j2;
                g.at(mjd).unwrap_or_else(|| CipXys::direct(j1, j2))
            }
            CipSource::Direct => CipXys::direct(j1, j2),
        }
    }

    /// The ITRS → GCRS rotation at a UTC epoch, with the EOP values used.
    ///
    /// # Accuracy
    /// See [`itrs_to_gcrs`] and [`EopTable::at_utc`].
    pub fn rotation_at(&self, utc: &Epoch) -> Result<(TerrestrialToCelestial, EopValues, Epoch), EarthError> {
        let mut eop = self.eop.at_utc(self.time.leap_seconds(), utc)?;
        if !self.pole_offsets {
            eop.dx_rad = 0.0;
            eop.dy_rad = 0.0;
        }
        let tt = self.time.convert(*utc, TimeScale::Tt, 0.0).map_err(|source| EarthError::Time { context: "UTC → TT".into(), source })?;
        let tai_fs = tt.label_fs() - crate::time::TT_MINUS_TAI_FS;
        let ut1_fs = tai_fs + seconds_to_fs(eop.ut1_minus_tai_s).unwrap_or(0);
        let ut1 = Epoch::from_uniform_fs(TimeScale::Ut1, ut1_fs).map_err(|source| EarthError::Time { context: "UT1".into(), source })?;
        let tt_jd = jd_parts(&tt);
        let r = itrs_to_gcrs(tt_jd, jd_parts(&ut1), self.cip_at(&tt, tt_jd), &eop);
        Ok((r, eop, tt))
    }

    /// GCRS position (m) and velocity (m/s) of a station at a UTC epoch.
    pub fn station_gcrs(&self, station: &Station, utc: &Epoch) -> Result<(Vector3<f64>, Vector3<f64>, EopValues, Epoch), EarthError> {
        let (p, v, _, eop, tt) = self.station_gcrs_with_up(station, utc)?;
        Ok((p, v, eop, tt))
    }

    /// As [`Self::station_gcrs`], with the local vertical in the GCRS.
    fn station_gcrs_with_up(&self, station: &Station, utc: &Epoch) -> Result<GcrsWithUp, EarthError> {
        let (r, eop, tt) = self.rotation_at(utc)?;
        let mjd = utc.mjd_day() as f64 + ratio_to_f64(utc.fs_of_day(), FS_PER_DAY);
        let x = Vector3::from(station.itrf_at_m(mjd));
        let (p, v) = r.apply(&x);
        let up = r.matrix * Vector3::from(station.up_itrs);
        Ok((p, v, up, eop, tt))
    }

    /// The full station state at a UTC epoch: GCRS, topocentric TDB − TT,
    /// TDB at the station, and the BCRS position and velocity.
    ///
    /// The Earth is evaluated at the station's own TDB (topocentric term
    /// included; leaving it out moves the Earth by up to ≈ 6 cm).
    ///
    /// # Accuracy
    /// GCRS: see [`Self::rotation_at`]. BCRS = x_E + x_GCRS to first order: the
    /// neglected terms of order (v_E/c)²·|x_GCRS| and (U/c²)·|x_GCRS| amount to
    /// a few centimetres (IERS Conventions 2010, ch. 11, eq. 11.19). Against
    /// astropy 7 (`get_body_barycentric` + `get_gcrs_posvel`) ≤ 2 cm.
    ///
    /// # References
    /// IERS Conventions 2010, ch. 10, eq. 10.9 (topocentric TDB − TT term
    /// v_E · x / c²) and ch. 11 (BCRS position of a terrestrial station).
    pub fn station_state(&self, eph: &Ephemeris, station: &Station, utc: &Epoch) -> Result<StationState, EarthError> {
        let (x_gcrs, v_gcrs, up_gcrs, eop, tt) = self.station_gcrs_with_up(station, utc)?;
        // TDB − TT = Δ_geo(TT) + observer term (IERS Conventions 2010 eq. 10.9):
        // the 787-term series depends on TT only, so it is evaluated once for
        // both the geocentric and the topocentric TDB.
        let dtdb_geo_s = self.time.tdb_minus_tt_geocentric_s(tt.label_fs());
        let tdb_at = |obs_s: f64| -> Result<Epoch, EarthError> {
            tdb_fs_from_parts(tt.label_fs(), dtdb_geo_s, obs_s).and_then(|fs| Epoch::from_uniform_fs(TimeScale::Tdb, fs)).map_err(|source| EarthError::Time { context: "TT → TDB".into(), source })
        };
        let geo_tdb = tdb_at(0.0)?;
        let earth_geo = eph.earth_state_ssb(&TdbSeconds::from_epoch(&geo_tdb)?)?;
        let v_e = Vector3::from(earth_geo.velocity_km_s) * 1e3;
        let observer_term_s = v_e.dot(&x_gcrs) / (C_M_S * C_M_S);
        let tdb = tdb_at(observer_term_s)?;
        // The Earth at the topocentric TDB: the two epochs differ by the
        // observer term (≤ 2.1 µs), over which a linear step is exact to
        // a·δ²/2 ≈ 1e-14 m, so the ephemeris is not evaluated again.
        let dt_s = ratio_to_f64(tdb.label_fs() - geo_tdb.label_fs(), crate::time::femto::FS_PER_S);
        let earth = StateKm { position_km: std::array::from_fn(|i| earth_geo.position_km[i] + earth_geo.velocity_km_s[i] * dt_s), velocity_km_s: earth_geo.velocity_km_s };
        let bcrs_position_m = Vector3::from(earth.position_km) * 1e3 + x_gcrs;
        let bcrs_velocity_m_s = Vector3::from(earth.velocity_km_s) * 1e3 + v_gcrs;
        Ok(StationState { tt, tdb, observer_term_s, eop, gcrs_position_m: x_gcrs, gcrs_velocity_m_s: v_gcrs, earth_ssb: earth, up_gcrs, bcrs_position_m, bcrs_velocity_m_s })
    }

    /// The station state at an epoch given in any scale (at the station).
    ///
    /// For TDB and TCB epochs the UTC of the event needs the observer term,
    /// which needs the station's position, so the conversion is iterated:
    /// the term changes by < 2e-10 s per second of time and the first guess
    /// (geocentre) is off by ≤ 2.1 µs, so two passes agree to < 1e-15 s.
    /// Other scales convert to UTC without the term: one pass.
    ///
    /// # Accuracy
    /// See [`Self::station_state`]; the iteration adds < 1e-15 s.
    ///
    /// # References
    /// IERS Conventions 2010, ch. 10, eq. 10.9 (the observer term that
    /// couples the TDB epoch to the station position).
    pub fn station_state_at(&self, eph: &Ephemeris, station: &Station, e: &Epoch) -> Result<StationState, EarthError> {
        let first = self.station_state_at_hinted(eph, station, e, 0.0)?;
        if !matches!(e.scale(), TimeScale::Tdb | TimeScale::Tcb) {
            return Ok(first);
        }
        self.station_state_at_hinted(eph, station, e, first.observer_term_s)
    }

    /// The station state at an epoch in any scale in one pass, given the
    /// observer term (s) at a nearby epoch of the same station
    /// (`hint_observer_s`; it only enters for TDB and TCB epochs) — for
    /// light-time iterations, which already hold such a state, and the
    /// passes of [`Self::station_state_at`].
    ///
    /// The returned state is exact at its own `tdb`, which differs from `t`
    /// by the change of the observer term between the hint's epoch and `t`:
    /// the term changes by < 2e-10 s per second (IERS Conventions 2010 eq.
    /// 10.9: (a_E·x + v_E·v)/c²), so within 0.1 s of the hint by < 2e-11 s,
    /// i.e. < 1e-6 m of station motion at 30 km/s. Callers needing the state
    /// at `t` itself step the position by v·(t − tdb) (error a·δ²/2 < 1e-20 m).
    ///
    /// # Accuracy
    /// See [`Self::station_state`]; the epoch offset above, bounded by the
    /// distance of the hint.
    ///
    /// # References
    /// IERS Conventions 2010, ch. 10, eq. 10.9.
    pub fn station_state_at_hinted(&self, eph: &Ephemeris, station: &Station, t: &Epoch, hint_observer_s: f64) -> Result<StationState, EarthError> {
        let utc = self.time.convert(*t, TimeScale::Utc, hint_observer_s).map_err(|source| EarthError::Time { context: format!("{} → UTC", t.scale()), source })?;
        self.station_state(eph, station, &utc)
    }

    /// UT1 − UTC at a UTC epoch, seconds.
    pub fn ut1_minus_utc_s(&self, utc: &Epoch) -> Result<f64, EarthError> {
        Ok(self.eop.at_utc(self.time.leap_seconds(), utc)?.ut1_minus_utc_s)
    }
}
