//! The batch API (`pipeline::batch::BatchEngine`, what the Python binding
//! and the distributed engines call) gives exactly what `lapse run` writes,
//! and `lapse run --input` runs one partition the way a cluster job does.

mod common;
use common::*;

use std::path::{Path, PathBuf};

use lapse::commands::engine::BatchEngine;

fn input_of(pipeline: &Path) -> PathBuf {
    lapse::pipeline::PipelineFile::read(pipeline).unwrap().input_path().unwrap()
}

#[test]
fn engine_output_equals_cli_output_for_every_pipeline() {
    let d = tmpdir("engine-vs-cli");
    for p in pipelines() {
        let stem = p.file_stem().unwrap().to_string_lossy().into_owned();
        let out = d.join(format!("{stem}.parquet"));
        let o = lapse(&["run", p.to_str().unwrap(), "--output", out.to_str().unwrap(), "--no-plots", "--quiet"]);
        assert_eq!(o.status.code(), Some(0), "{stem}: {}", String::from_utf8_lossy(&o.stderr));
        let mut engine = BatchEngine::load(&p).unwrap();
        let input = input_of(&p);
        let df = read(&input);
        let got = engine.process(&df, &input).unwrap();
        assert_eq!(column_bits(&got.output), column_bits(&read(&out)), "{stem}: output");
        assert_eq!(column_bits(&got.rejects), column_bits(&read(&lapse::pipeline::rejects_path(&out))), "{stem}: rejects");
        // Shared inputs are loaded once: a second batch on the same engine is identical.
        let again = engine.process(&df, &input).unwrap();
        assert_eq!(column_bits(&again.output), column_bits(&got.output), "{stem}: second batch");
    }
}

#[test]
fn engine_errors_are_the_cli_errors() {
    let p = root().join("pipelines/pulsar_demo.toml");
    let input = input_of(&p);
    let df = read(&input).drop("freq_mhz").unwrap();
    let d = tmpdir("engine-errors");
    let bad = d.join("bad.parquet");
    write(&bad, &mut df.clone());
    let err = BatchEngine::load(&p).unwrap().process(&df, &bad).unwrap_err().to_string();
    let o = lapse(&["run", p.to_str().unwrap(), "--input", bad.to_str().unwrap(), "--output", d.join("o.parquet").to_str().unwrap(), "--no-plots", "--quiet"]);
    assert_eq!(o.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(stderr.contains(&err), "CLI said {stderr:?}, engine said {err:?}");
    assert!(err.contains("freq_mhz"), "{err}");
}

#[test]
fn run_with_input_override_equals_the_partitioned_run() {
    // Two partitions of the pulsar demo; the folder run and one `--input`
    // run per partition (the Slurm array task) give the same outputs.
    let d = tmpdir("input-override");
    let p = root().join("pipelines/pulsar_demo.toml");
    let df = read(&input_of(&p));
    let parts = d.join("parts");
    std::fs::create_dir_all(&parts).unwrap();
    let h = df.height();
    write(&parts.join("part-0.parquet"), &mut df.slice(0, h / 2));
    write(&parts.join("part-1.parquet"), &mut df.slice((h / 2) as i64, h - h / 2));
    let o = lapse(&["run", p.to_str().unwrap(), "--input", parts.to_str().unwrap(), "--output", d.join("all").to_str().unwrap(), "--no-plots", "--quiet"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    for k in 0..2 {
        let one = d.join(format!("one-{k}.parquet"));
        let inp = parts.join(format!("part-{k}.parquet"));
        let o = lapse(&["run", p.to_str().unwrap(), "--input", inp.to_str().unwrap(), "--output", one.to_str().unwrap(), "--no-plots", "--quiet"]);
        assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
        assert_eq!(column_bits(&read(&one)), column_bits(&read(&d.join(format!("all/part-{k}.parquet")))), "partition {k}");
    }
}
