//! Golden runs: every `pipelines/*.toml` runs through the binary and its
//! output data must equal the committed golden table in `tests/golden/`.
//!
//! Regenerate after an intended change: `LAPSE_BLESS=1 cargo test --release --test golden`
//! (and say why in the commit message).

mod common;
use common::*;

use std::process::Command;

#[test]
fn every_pipeline_matches_its_golden_output() {
    let root = root();
    let pipelines = pipelines();
    assert!(!pipelines.is_empty());
    let bless = std::env::var_os("LAPSE_BLESS").is_some();
    let tmp = std::env::temp_dir().join(format!("lapse-golden-{}", std::process::id()));
    std::fs::create_dir_all(&tmp).unwrap();
    for p in &pipelines {
        let stem = p.file_stem().unwrap().to_string_lossy().into_owned();
        let out = tmp.join(format!("{stem}.parquet"));
        let o = Command::new(env!("CARGO_BIN_EXE_lapse")).args(["run", p.to_str().unwrap(), "--output", out.to_str().unwrap()]).output().unwrap();
        assert_eq!(o.status.code(), Some(0), "{stem}: {}", String::from_utf8_lossy(&o.stderr));
        let golden = root.join("tests/golden").join(format!("{stem}.parquet"));
        if bless {
            std::fs::copy(&out, &golden).unwrap();
            continue;
        }
        let got = read(&out);
        let want = read(&golden);
        assert_eq!(got.get_column_names(), want.get_column_names(), "{stem}: columns");
        assert_eq!(got.height(), want.height(), "{stem}: rows");
        for c in want.columns() {
            let g = got.column(c.name()).unwrap();
            assert!(g.as_materialized_series().equals_missing(c.as_materialized_series()), "{stem}: column {} differs from golden", c.name());
        }
    }
}
