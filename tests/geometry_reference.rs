//! Geometry against outside sources: DE421 through lapse's SPK reader against
//! jplephem; station positions against ERFA.
//!
//! Fixtures: `tests/reference/ephemeris_sweep.py` (jplephem 2.24, DE421),
//! `tests/reference/station_sweep.py` (pyerfa 2.0.1.5). Versions are recorded
//! in each fixture's first line.

mod common;
use common::*;

use std::path::Path;

use lapse::ephemeris::{Ephemeris, TdbSeconds};

/// Barycentric positions against jplephem: issue requirement, 1 mm.
const EPHEMERIS_POSITION_TOL_KM: f64 = 1e-6;
/// Velocities against jplephem (jplephem differentiates the same series): 1 µm/s.
const EPHEMERIS_VELOCITY_TOL_KM_S: f64 = 1e-9;

#[test]
fn de421_states_match_jplephem_1950_2050() {
    let eph = Ephemeris::load(&[root().join("data/de421.bsp")]).unwrap();
    let rows = fixture_csv("ephemeris_sweep.csv");
    assert!(rows.len() >= 12_000);
    let (mut max_p, mut max_v) = (0.0f64, 0.0f64);
    for r in &rows {
        let t = TdbSeconds::new(r[0].parse().unwrap(), r[1].parse().unwrap());
        let body: i32 = r[2].parse().unwrap();
        let s = eph.state_ssb(body, &t).unwrap();
        // The position-only path (Shapiro bodies) gives the same bits.
        assert_eq!(eph.position_ssb_km(body, &t).unwrap().map(f64::to_bits), s.position_km.map(f64::to_bits), "body {body} at {t:?}");
        let want: Vec<f64> = r[3..9].iter().map(|x| x.parse().unwrap()).collect();
        for i in 0..3 {
            let dp = (s.position_km[i] - want[i]).abs();
            let dv = (s.velocity_km_s[i] - want[3 + i]).abs();
            max_p = max_p.max(dp);
            max_v = max_v.max(dv);
            assert!(dp <= EPHEMERIS_POSITION_TOL_KM, "body {body} at {t:?}: axis {i} off by {dp} km");
            assert!(dv <= EPHEMERIS_VELOCITY_TOL_KM_S, "body {body} at {t:?}: velocity axis {i} off by {dv} km/s");
        }
    }
    eprintln!("DE421 vs jplephem over {} states: max |Δr| {:.3e} m per axis, max |Δv| {:.3e} m/s", rows.len(), max_p * 1e3, max_v * 1e3);
}

#[test]
fn out_of_coverage_and_unknown_bodies_are_errors() {
    let eph = Ephemeris::load(&[root().join("data/de421.bsp")]).unwrap();
    // 2060 is past DE421's end (2053-10-09).
    let e = eph.state_ssb(399, &TdbSeconds::new(60 * 365 * 86_400, 0.0)).unwrap_err().to_string();
    assert!(e.contains("EARTH") && e.contains("UTC") && e.contains("TDB") && e.contains("2053-10-09"), "{e}");
    let e = eph.state_ssb(-999, &TdbSeconds::new(0, 0.0)).unwrap_err().to_string();
    assert!(e.contains("no loaded kernel holds") && e.contains("de421.bsp"), "{e}");
    assert!(eph.state_ssb_named("vulcan", &TdbSeconds::new(0, 0.0)).is_err());
    assert!(eph.state_ssb_named("Jupiter barycenter", &TdbSeconds::new(0, 0.0)).is_ok());
}

#[test]
fn truncated_and_corrupt_kernels_are_errors() {
    let bytes = std::fs::read(root().join("data/de421.bsp")).unwrap();
    for cut in [0usize, 100, 1024, 4096, 100_000, bytes.len() / 2] {
        let r = lapse::ephemeris::SpkKernel::parse(&bytes[..cut], Path::new("cut.bsp"));
        let e = r.expect_err("truncated kernel must not load").to_string();
        assert!(e.contains("cut.bsp"), "{e}");
    }
    let mut garbage = bytes[..8192].to_vec();
    for (i, b) in garbage.iter_mut().enumerate().skip(1024) {
        *b = (i * 31 % 251) as u8;
    }
    assert!(lapse::ephemeris::SpkKernel::parse(&garbage, Path::new("garbage.bsp")).is_err());
}

use lapse::earth::{EarthModel, EopTable, StationCatalog};
use lapse::time::{TimeScale, TimeScales};

/// EOP interpolation against the independent numpy implementation of the
/// same published method (4-point Lagrange, UT1 as UT1 − TAI): round-off only.
const EOP_UT1_TOL_S: f64 = 1e-12;
const EOP_POLE_TOL_ARCSEC: f64 = 1e-12;
/// Station GCRS position against ERFA's chain with the same EOP values:
/// issue asks ≤ 1 cm, aim 1 mm; we hold 1 mm.
const GCRS_POSITION_TOL_M: f64 = 1e-3;
/// Station GCRS velocity against ERFA central differences: issue 0.1 mm/s.
const GCRS_VELOCITY_TOL_M_S: f64 = 1e-4;
/// Topocentric TDB − TT against jplephem v_E · ERFA x_GCRS / c²: issue 0.1 ns.
const OBSERVER_TERM_TOL_S: f64 = 1e-10;
/// Grid-interpolated against direct station position: issue 1 mm.
const GRID_VS_DIRECT_TOL_M: f64 = 1e-3;

fn earth_model() -> EarthModel {
    let ts = TimeScales::builtin();
    let eop = EopTable::from_file(&root().join("data/finals2000A.all")).unwrap();
    EarthModel::new(ts, eop)
}

#[test]
fn station_gcrs_matches_erfa_chain() {
    let model = earth_model();
    let grid_model = earth_model().with_cip_grid(47_800.0, 61_800.0);
    let cat = StationCatalog::from_file(&root().join("data/demo/stations.toml")).unwrap();
    let rows = fixture_csv("station_sweep.csv");
    assert!(rows.len() >= 1000);
    let f = |s: &str| s.parse::<f64>().unwrap();
    let (mut max_p, mut max_v, mut max_grid, mut max_itrf, mut max_obs) = (0.0f64, 0.0f64, 0.0f64, 0.0f64, 0.0f64);
    let eph = Ephemeris::load(&[root().join("data/de421.bsp")]).unwrap();
    for r in &rows {
        let day: i64 = r[0].parse().unwrap();
        let utc = model.time.epoch_from_mjd(TimeScale::Utc, day, f(&r[1])).unwrap();
        let st = cat.get(&r[2]).unwrap();
        // ITRF position (GRS80 geodetic via erfa.gd2gc, plus plate motion).
        let itrf = st.itrf_at_m(day as f64 + f(&r[1]));
        for i in 0..3 {
            max_itrf = max_itrf.max((itrf[i] - f(&r[3 + i])).abs());
            assert!((itrf[i] - f(&r[3 + i])).abs() < 1e-6, "{} ITRF axis {i}", r[2]);
        }
        let (p, v, eop, _) = model.station_gcrs(st, &utc).unwrap();
        assert!((eop.ut1_minus_utc_s - f(&r[6])).abs() <= EOP_UT1_TOL_S, "UT1-UTC at {day}");
        assert!((eop.x_p_rad / lapse::earth::eop::ARCSEC_TO_RAD - f(&r[7])).abs() <= EOP_POLE_TOL_ARCSEC);
        assert!((eop.y_p_rad / lapse::earth::eop::ARCSEC_TO_RAD - f(&r[8])).abs() <= EOP_POLE_TOL_ARCSEC);
        assert!((eop.dx_rad / lapse::earth::eop::ARCSEC_TO_RAD * 1e3 - f(&r[9])).abs() <= EOP_POLE_TOL_ARCSEC * 1e3);
        assert_eq!(eop.predicted, &r[11] == "1", "predicted flag at {day}");
        for i in 0..3 {
            let dp = (p[i] - f(&r[12 + i])).abs();
            let dv = (v[i] - f(&r[15 + i])).abs();
            max_p = max_p.max(dp);
            max_v = max_v.max(dv);
            assert!(dp <= GCRS_POSITION_TOL_M, "{} at UTC {day} {}: axis {i} off by {dp} m", r[2], r[1]);
            assert!(dv <= GCRS_VELOCITY_TOL_M_S, "{} at UTC {day} {}: velocity axis {i} off by {dv} m/s", r[2], r[1]);
        }
        let state = model.station_state(&eph, st, &utc).unwrap();
        let d_obs = (state.observer_term_s - f(&r[18])).abs();
        max_obs = max_obs.max(d_obs);
        assert!(d_obs <= OBSERVER_TERM_TOL_S, "{} at {day}: observer term off by {d_obs} s", r[2]);
        let (pg, _, _, _) = grid_model.station_gcrs(st, &utc).unwrap();
        let dg = (pg - p).norm();
        max_grid = max_grid.max(dg);
        assert!(dg <= GRID_VS_DIRECT_TOL_M, "grid vs direct {dg} m");
    }
    eprintln!(
        "stations vs ERFA over {} epochs: max |Δx| {:.3e} m per axis, max |Δv| {:.3e} m/s; grid vs direct max {:.3e} m; ITRF max {:.1e} m; observer term max {:.3e} s",
        rows.len(),
        max_p,
        max_v,
        max_grid,
        max_itrf,
        max_obs
    );
}

/// BCRS station position against astropy (get_body_barycentric +
/// get_gcrs_posvel, offline): issue 2 cm. astropy 8 does not apply the
/// celestial pole offsets dX, dY (up to ~1 mas = 3 cm at the surface; found
/// here: 2.3 cm in 2000), so the comparison switches them off in lapse too;
/// lapse's dX, dY handling is checked against ERFA above. What remains is
/// astropy's linear EOP interpolation against lapse's 4-point Lagrange: where
/// the length of day changes fast the chord is off by f''·u(1−u)/2 ≈ 40 µs in
/// UT1 (measured here: 37 µs at MJD 60382.43, 1.5 cm in the BCRS position).
const BCRS_ASTROPY_TOL_M: f64 = 0.02;

#[test]
fn station_bcrs_matches_astropy() {
    let mut model = earth_model();
    model.pole_offsets = false;
    let eph = Ephemeris::load(&[root().join("data/de421.bsp")]).unwrap();
    let cat = StationCatalog::from_file(&root().join("data/demo/stations.toml")).unwrap();
    let rows = fixture_csv("bcrs_astropy.csv");
    assert!(rows.len() >= 300);
    let mut max_d: f64 = 0.0;
    let mut worst = String::new();
    for r in &rows {
        let day: i64 = r[0].parse().unwrap();
        let utc = model.time.epoch_from_mjd(TimeScale::Utc, day, r[1].parse().unwrap()).unwrap();
        let st = cat.get(&r[2]).unwrap();
        let s = model.station_state(&eph, st, &utc).unwrap();
        let want = nalgebra::Vector3::new(r[3].parse().unwrap(), r[4].parse().unwrap(), r[5].parse().unwrap());
        let d = (s.bcrs_position_m - want).norm();
        if d > max_d {
            worst = format!("{} at UTC {day} {}", r[2], r[1]);
        }
        max_d = max_d.max(d);
        assert!(d <= BCRS_ASTROPY_TOL_M, "{} at UTC {day} {}: {d} m from astropy", r[2], r[1]);
    }
    eprintln!("BCRS vs astropy over {} epochs: max |Δx| {:.3e} m ({worst})", rows.len(), max_d);
}

#[test]
fn era_matches_erfa() {
    // pyerfa era00 at 200 UT1 dates; same formula (IERS 2010 eq. 5.15).
    for r in fixture_csv("era_sweep.csv") {
        let (a, b, want) = (r[0].parse::<f64>().unwrap(), r[1].parse::<f64>().unwrap(), r[2].parse::<f64>().unwrap());
        assert!((sofars::erst::era00(a, b) - want).abs() < 1e-12);
    }
}

#[test]
fn eop_readers_reproduce_tabulated_values_and_series_agree() {
    let ts = TimeScales::builtin();
    let c04 = EopTable::from_file(&root().join("data/eopc04.1962-now")).unwrap();
    let fin = EopTable::from_file(&root().join("data/finals2000A.all")).unwrap();
    assert_eq!(c04.format(), lapse::earth::eop::EopFormat::C04);
    // 1. At 0h UTC the interpolation returns the file's own value (both layouts).
    for table in [&c04, &fin] {
        for row in table.rows().iter().filter(|r| r.mjd >= 41_320 && r.mjd < ts.leap_seconds().window_mjd()).step_by(97) {
            let utc = ts.epoch_from_mjd(TimeScale::Utc, row.mjd, 0.0).unwrap();
            let v = table.at_utc(ts.leap_seconds(), &utc).unwrap();
            assert!((v.ut1_minus_utc_s - row.ut1_minus_utc_s).abs() < 1e-12, "{} MJD {}", table.path().display(), row.mjd);
            assert!((v.x_p_rad / lapse::earth::eop::ARCSEC_TO_RAD - row.x_p_arcsec).abs() < 1e-12);
        }
    }
    // 2. Two IERS realizations of the final series: EOP 20 C04 (ITRF2020,
    // recomputed) and the Bulletin B values kept in finals2000A.all as
    // published. Their raw tabulated UT1 − UTC differ by up to 0.48 ms
    // (MJD 58815, measured here from the files); this bounds the agreement
    // of the two readers, it is not an accuracy claim.
    const SERIES_UT1_TOL_S: f64 = 1e-3;
    const SERIES_POLE_TOL_MAS: f64 = 1.0;
    let (mut max_ut1, mut max_pm): (f64, f64) = (0.0, 0.0);
    for k in 0..900 {
        let day = 51_544 + k * 10;
        let utc = ts.epoch_from_mjd(TimeScale::Utc, day, 0.37).unwrap();
        let a = c04.at_utc(ts.leap_seconds(), &utc).unwrap();
        let b = fin.at_utc(ts.leap_seconds(), &utc).unwrap();
        max_ut1 = max_ut1.max((a.ut1_minus_utc_s - b.ut1_minus_utc_s).abs());
        max_pm = max_pm.max((a.x_p_rad - b.x_p_rad).abs().max((a.y_p_rad - b.y_p_rad).abs()) / lapse::earth::eop::ARCSEC_TO_RAD * 1e3);
    }
    assert!(max_ut1 <= SERIES_UT1_TOL_S && max_pm <= SERIES_POLE_TOL_MAS, "{max_ut1} s, {max_pm} mas");
    eprintln!("C04 vs finals2000A (B) 2000–2025: max |ΔUT1| {max_ut1:.3e} s, max |Δpole| {max_pm:.3} mas");
}

#[test]
fn station_tdb_equals_time_conversion_with_observer_term() {
    // The station state's TDB must be exactly TimeScales::convert(TT → TDB,
    // observer term): one formula, one rounding.
    let model = earth_model();
    let eph = Ephemeris::load(&[root().join("data/de421.bsp")]).unwrap();
    let cat = StationCatalog::from_file(&root().join("data/demo/stations.toml")).unwrap();
    for (k, st) in cat.stations().iter().enumerate() {
        let utc = model.time.epoch_from_mjd(TimeScale::Utc, 59_000 + 17 * k as i64, 0.123 + 0.1 * k as f64).unwrap();
        let s = model.station_state(&eph, st, &utc).unwrap();
        assert_eq!(s.tdb, model.time.convert(s.tt, TimeScale::Tdb, s.observer_term_s).unwrap(), "{}", st.code);
    }
}
