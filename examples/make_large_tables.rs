//! Writes two residual-like tables of N rows for the diff benchmark
//! (`benches/diff_large.sh`): 12 columns (string key, 2 int64, 9 float64);
//! B differs from A by a small shift in one column and a few missing rows.
//!
//! `cargo run --release --example make_large_tables -- N A.parquet B.parquet`

use polars::prelude::*;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().collect();
    let n: usize = args.get(1).map(|s| s.parse()).transpose()?.unwrap_or(10_000_000);
    let (pa, pb) = (args.get(2).cloned().unwrap_or("a.parquet".into()), args.get(3).cloned().unwrap_or("b.parquet".into()));
    for (path, shift) in [(pa, 0.0), (pb, 1e-10)] {
        let keep: Vec<usize> = (0..n).filter(|i| shift == 0.0 || i % 1_000_003 != 7).collect();
        let mut cols = vec![
            Column::new("obs_id".into(), keep.iter().map(|i| format!("obs-{i:09}")).collect::<Vec<_>>()),
            Column::new("tdb_mjd_day".into(), keep.iter().map(|i| 58_000 + (*i / 1000) as i64).collect::<Vec<_>>()),
            Column::new("pulse_number".into(), keep.iter().map(|i| *i as i64 * 287).collect::<Vec<_>>()),
        ];
        for (k, name) in ["tdb_mjd_frac", "bat_mjd_frac", "clock_s", "einstein_s", "roemer_s", "parallax_s", "shapiro_s", "dispersion_s", "residual_s"].iter().enumerate() {
            let s = if *name == "residual_s" { shift } else { 0.0 };
            cols.push(Column::new((*name).into(), keep.iter().map(|i| ((*i as f64) * 1e-3 + k as f64).sin() * 1e-3 + s).collect::<Vec<_>>()));
        }
        let mut df = DataFrame::new_infer_height(cols)?;
        ParquetWriter::new(std::fs::File::create(&path)?).with_compression(ParquetCompression::Zstd(None)).finish(&mut df)?;
        println!("wrote {} rows to {path}", df.height());
    }
    Ok(())
}
