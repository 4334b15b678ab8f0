//! Writes `data/demo/epochs.parquet`: invented observation epochs for the
//! `pipelines/timescales_demo.toml` demo.
//!
//! 2,000 epochs from two invented stations ("KESTREL-1", "HARRIER-2") over
//! 2015-06-01 .. 2017-06-01 (across the 2015-06-30 and 2016-12-31 leap
//! seconds), plus one epoch inside each leap second. Deterministic (fixed
//! seed), so the file is reproducible byte for byte:
//!
//! ```sh
//! cargo run --release --example make_timescale_demo
//! ```

use polars::prelude::*;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut x: u64 = 0x05EE_D0F1_A95E;
    let mut ids = Vec::new();
    let mut days = Vec::new();
    let mut fracs = Vec::new();
    let mut stations = Vec::new();
    let (start, end) = (57_174i64, 57_905i64);
    for i in 0..2_000 {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        let day = start + (x % (end - start) as u64) as i64;
        let frac = (x >> 11) as f64 / (1u64 << 53) as f64;
        ids.push(format!("obs-{i:05}"));
        days.push(day);
        fracs.push(frac);
        stations.push(if i % 3 == 0 { "HARRIER-2" } else { "KESTREL-1" });
    }
    // Inside the leap seconds: 23:59:60.25 on 2015-06-30 and 2016-12-31
    // (fraction = elapsed seconds / 86 401).
    for (k, day) in [57_203i64, 57_753].into_iter().enumerate() {
        ids.push(format!("leap-{k}"));
        days.push(day);
        fracs.push(86_400.25 / 86_401.0);
        stations.push("KESTREL-1");
    }
    let mut df = df!("obs_id" => ids, "mjd_day" => days, "mjd_frac" => fracs, "station" => stations)?;
    df.sort_in_place(["mjd_day", "mjd_frac"], SortMultipleOptions::default())?;
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo/epochs.parquet");
    let f = std::fs::File::create(&path)?;
    ParquetWriter::new(f).with_compression(ParquetCompression::Zstd(None)).finish(&mut df)?;
    println!("wrote {} rows to {}", df.height(), path.display());
    Ok(())
}
