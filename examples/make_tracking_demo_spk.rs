//! Writes `data/demo/lapse1.bsp`: the trajectory of the invented spacecraft
//! LAPSE-1 (NAIF −901), integrated with RK4 (60 s steps) in the point-mass
//! field of the Sun, planets, Earth and Moon from DE421, kept every 600 s and
//! stored as one SPK type 13 segment (window 6, Hermite degree 11) relative
//! to the solar-system barycentre. Initial state (invented): 2025-04-14
//! 00:00 TDB, 0.25 au from the Earth, moving 4.2 km/s relative to it.
//!
//! ```sh
//! cargo run --release --example make_tracking_demo_spk
//! # the light-time reference kernel: same recipe, starting 2000-01-02 TDB
//! cargo run --release --example make_tracking_demo_spk -- 51545 tests/fixtures/lapse1_j2000.bsp
//! ```

use std::path::Path;

use lapse::constants::Constants;
use lapse::ephemeris::spk_write::{Type13Segment, write_type13};
use lapse::ephemeris::{Ephemeris, TdbSeconds};
use lapse::tracking::propagate::{PointMassField, rk4};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let eph = Ephemeris::load(&[root.join("data/de421.bsp")])?;
    let field = PointMassField::solar_system(&Constants::builtin().ephemeris)?;
    // Start (MJD TDB) and output: by default 2025-04-14T00:00 TDB = MJD 60779.
    let args: Vec<String> = std::env::args().collect();
    let mjd0: i64 = args.get(1).map(|s| s.parse()).transpose()?.unwrap_or(60_779);
    let out = args.get(2).map(|p| root.join(p)).unwrap_or_else(|| root.join("data/demo/lapse1.bsp"));
    let t0_s: i64 = (mjd0 - 51_544) * 86_400 - 43_200;
    let t0 = TdbSeconds::new(t0_s, 0.0);
    let earth = eph.state_ssb(399, &t0)?;
    let au_km = 149_597_870.7;
    // Offset: 0.25 au, mostly in the ecliptic-ish plane (low declination).
    let dir = [0.62, -0.76, -0.19];
    let norm: f64 = dir[0] * dir[0] + dir[1] * dir[1] + dir[2] * dir[2];
    let r = std::array::from_fn::<f64, 3, _>(|i| earth.position_km[i] + 0.25 * au_km * dir[i] / norm.sqrt());
    let dv = [2.9, -2.7, -1.3];
    let v = std::array::from_fn::<f64, 3, _>(|i| earth.velocity_km_s[i] + dv[i]);
    let states = rk4(&field, &eph, t0, [r[0], r[1], r[2], v[0], v[1], v[2]], 60.0, 3 * 1440, 10)?;
    let epochs: Vec<f64> = states.iter().map(|s| s.0).collect();
    let st: Vec<[f64; 6]> = states.iter().map(|s| s.1).collect();
    let seg = Type13Segment { target: -901, center: 0, frame: 1, epochs_s: &epochs, states: &st, window: 6, name: "LAPSE-1 invented cruise" };
    write_type13(&out, &seg)?;
    println!("wrote {} states {} … {} s TDB past J2000", epochs.len(), epochs[0], epochs[epochs.len() - 1]);
    Ok(())
}
