//! Writes the invented inputs of the pulsar demo: clock-correction tables
//! (`data/demo/clock/*.csv`) and the observing plan
//! (`data/demo/pulsar_plan.csv`) that `lapse synth` turns into arrival times.
//!
//! Two invented sites observe the invented pulsar LAPSE-PSR-A from
//! 2019-06 to 2025-06: FALCON-RT weekly at 820/1400/2300 MHz with a two-link
//! clock chain (site → GPS → UTC), KESTREL-1 every 11 days at 1400/3100 MHz
//! with one table (site → UTC). Deterministic:
//!
//! ```sh
//! cargo run --release --example make_pulsar_demo_inputs
//! ```

use std::fmt::Write as _;

fn main() -> std::io::Result<()> {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo");
    std::fs::create_dir_all(root.join("clock"))?;
    let table = |name: &str, what: &str, f: &dyn Fn(f64) -> f64| -> std::io::Result<()> {
        let mut s = format!("# invented clock corrections for the lapse demo: {what}\n# offset_s is added to the left clock to obtain the right one\nmjd,offset_s\n");
        let mut mjd = 58_600.0;
        while mjd <= 60_900.0 {
            let _ = writeln!(s, "{mjd:.1},{:.12e}", f(mjd));
            mjd += 5.0;
        }
        std::fs::write(root.join("clock").join(name), s)
    };
    let tau = std::f64::consts::TAU;
    table("FALCON-RT__GPS.csv", "FALCON-RT site clock -> GPS", &|m| 2.5e-6 + 0.3e-9 * (m - 58_600.0) + 20e-9 * (tau * m / 365.25).sin())?;
    table("GPS__UTC.csv", "GPS -> UTC (small steered difference)", &|m| 4e-9 * (tau * m / 200.0).sin())?;
    table("KESTREL-1__UTC.csv", "KESTREL-1 site clock -> UTC", &|m| -0.8e-6 - 0.12e-9 * (m - 58_600.0))?;

    let mut plan = String::from("# invented observing plan for LAPSE-PSR-A (approximate epochs; lapse synth makes them exact)\nsite,mjd,freq_mhz,sigma_us\n");
    let mut x: u64 = 0x00C0_FFEE;
    let mut rnd = || {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        (x >> 11) as f64 / (1u64 << 53) as f64
    };
    let (start, end) = (58_635.0, 60_827.0);
    let mut day = start;
    while day < end {
        let t = day + 0.25 + 0.5 * rnd();
        for f in [820.0, 1400.0, 2300.0] {
            let _ = writeln!(plan, "FALCON-RT,{:.9},{f},{}", t + rnd() * 0.01, if f < 1000.0 { 0.9 } else { 0.5 });
        }
        day += 7.0;
    }
    let mut day = start + 3.0;
    while day < end {
        let t = day + 0.1 + 0.6 * rnd();
        for f in [1400.0, 3100.0] {
            let _ = writeln!(plan, "KESTREL-1,{:.9},{f},0.8", t + rnd() * 0.01);
        }
        day += 11.0;
    }
    std::fs::write(root.join("pulsar_plan.csv"), plan)?;
    println!("wrote clock tables and plan under {}", root.display());
    Ok(())
}
