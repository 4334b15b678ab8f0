//! Writes `data/demo/tracking_plan.csv`: one night (2025-04-15 UTC) of
//! planned measurements of the invented spacecraft LAPSE-1 from the invented
//! stations KESTREL-1, HARRIER-2 and OSPREY-3, only while the spacecraft is
//! above 15° elevation: two-way light time every 10 min (σ 1 ns), two-way
//! X-band Doppler every 5 min (60 s count, σ 3 mHz), and three-way Doppler
//! whenever a second station also sees it (σ 5 mHz).
//!
//! ```sh
//! cargo run --release --example make_tracking_demo_plan
//! ```

use std::fmt::Write as _;
use std::path::Path;

use lapse::earth::{EarthModel, EopTable, StationCatalog};
use lapse::ephemeris::{Ephemeris, TdbSeconds};
use lapse::time::{TimeScale, TimeScales};
use nalgebra::Vector3;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let eph = Ephemeris::load(&[root.join("data/de421.bsp"), root.join("data/demo/lapse1.bsp")])?;
    let earth = EarthModel::new(TimeScales::builtin(), EopTable::from_file(&root.join("data/finals2000A.all"))?).with_cip_grid(60_780.0, 60_781.0);
    let cat = StationCatalog::from_file(&root.join("data/demo/stations.toml"))?;
    let stations = ["KESTREL-1", "HARRIER-2", "OSPREY-3"];
    let elevation = |code: &str, mjd: f64| -> Result<f64, Box<dyn std::error::Error>> {
        let utc = earth.time.epoch_from_mjd(TimeScale::Utc, mjd.floor() as i64, mjd - mjd.floor())?;
        let st = earth.station_state(&eph, cat.get(code)?, &utc)?;
        let (w, f) = st.tdb.seconds_since_j2000();
        let sc = Vector3::from(eph.state_ssb(-901, &TdbSeconds::new(w, f))?.position_km) * 1e3;
        let d = sc - st.bcrs_position_m;
        Ok(st.up_gcrs.dot(&d).asin_or(d.norm()))
    };
    trait AsinOr {
        fn asin_or(self, n: f64) -> f64;
    }
    impl AsinOr for f64 {
        fn asin_or(self, n: f64) -> f64 {
            (self / n).clamp(-1.0, 1.0).asin().to_degrees()
        }
    }
    let mut plan = String::from("# invented tracking plan for LAPSE-1, night of 2025-04-15 (elevation > 15 deg)\nkind,rx_station,tx_station,rx_mjd,count_s,uplink_hz,sigma\n");
    let uplink = 7.164_395_2e9;
    for k in 0..288 {
        // every 5 minutes through the day
        let mjd = 60_780.0 + (k as f64) * 300.0 / 86_400.0 + 17.0 / 86_400.0;
        let up: Vec<&str> = stations.iter().copied().filter(|s| elevation(s, mjd).map(|e| e > 15.0).unwrap_or(false)).collect();
        for s in &up {
            if k % 2 == 0 {
                let _ = writeln!(plan, "light_time_2way,{s},{s},{mjd:.12},0,{uplink},1e-9");
            }
            let _ = writeln!(plan, "doppler_2way,{s},{s},{mjd:.12},60,{uplink},3e-3");
        }
        if up.len() >= 2 {
            let _ = writeln!(plan, "doppler_3way,{},{},{mjd:.12},60,{uplink},5e-3", up[1], up[0]);
        }
    }
    std::fs::write(root.join("data/demo/tracking_plan.csv"), &plan)?;
    println!("wrote {} planned rows", plan.lines().count() - 2);
    Ok(())
}
