//! Geometry against outside sources: DE421 through lapse's SPK reader against
//! jplephem; station positions against ERFA.
//!
//! Fixtures: `tests/reference/ephemeris_sweep.py` (jplephem 2.24, DE421),
//! `tests/reference/station_sweep.py` (pyerfa 2.0.1.5). Versions are recorded
//! in each fixture's first line.

use std::path::Path;

use lapse::ephemeris::{Ephemeris, TdbSeconds};

/// Barycentric positions against jplephem: issue requirement, 1 mm.
const EPHEMERIS_POSITION_TOL_KM: f64 = 1e-6;
/// Velocities against jplephem (jplephem differentiates the same series): 1 µm/s.
const EPHEMERIS_VELOCITY_TOL_KM_S: f64 = 1e-9;

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn csv(name: &str) -> Vec<Vec<String>> {
    let path = root().join("tests/fixtures").join(name);
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    text.lines().filter(|l| !l.starts_with('#')).skip(1).map(|l| l.split(',').map(str::to_string).collect()).collect()
}

#[test]
fn de421_states_match_jplephem_1950_2050() {
    let eph = Ephemeris::load(&[root().join("data/de421.bsp")]).unwrap();
    let rows = csv("ephemeris_sweep.csv");
    assert!(rows.len() >= 12_000);
    let (mut max_p, mut max_v) = (0.0f64, 0.0f64);
    for r in &rows {
        let t = TdbSeconds::new(r[0].parse().unwrap(), r[1].parse().unwrap());
        let body: i32 = r[2].parse().unwrap();
        let s = eph.state_ssb(body, &t).unwrap();
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
