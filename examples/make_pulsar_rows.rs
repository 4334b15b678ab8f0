//! Writes N synthetic pulsar arrival times for throughput benchmarks
//! (`benches/throughput.sh`): the demo's sites, frequencies and σ, epochs
//! spread uniformly over the demo's span (not exact pulses: residuals are
//! meaningless, the work per row is the same).
//!
//! `cargo run --release --example make_pulsar_rows -- N OUT.parquet [ROW_GROUP]`

use polars::prelude::*;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let a: Vec<String> = std::env::args().collect();
    let n: usize = a.get(1).map(|s| s.parse()).transpose()?.unwrap_or(100_000);
    let out = a.get(2).cloned().unwrap_or_else(|| "rows.parquet".into());
    let row_group: usize = a.get(3).map(|s| s.parse()).transpose()?.unwrap_or(100_000);
    let mut x: u64 = 0x0123_4567_89AB_CDEF;
    let mut rnd = move || {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        (x >> 11) as f64 / (1u64 << 53) as f64
    };
    let (lo, hi) = (58_640.0, 60_820.0);
    let mut day = Vec::with_capacity(n);
    let mut frac = Vec::with_capacity(n);
    let mut site = Vec::with_capacity(n);
    let mut freq = Vec::with_capacity(n);
    for _ in 0..n {
        let t = lo + (hi - lo) * rnd();
        day.push(t.floor() as i64);
        frac.push(t - t.floor());
        site.push(if rnd() < 0.7 { "FALCON-RT" } else { "KESTREL-1" });
        freq.push([820.0, 1400.0, 2300.0][(rnd() * 3.0) as usize % 3]);
    }
    let mut df = df!(
        "obs_id" => (0..n).map(|i| format!("r{i:09}")).collect::<Vec<_>>(),
        "site" => site, "arrival_mjd_day" => day, "arrival_mjd_frac" => frac, "freq_mhz" => freq, "sigma_us" => vec![0.5; n]
    )?;
    ParquetWriter::new(std::fs::File::create(&out)?).with_row_group_size(Some(row_group)).finish(&mut df)?;
    println!("wrote {n} rows to {out}");
    Ok(())
}
