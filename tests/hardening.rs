//! Nothing silently wrong: one regression test per item of the hardening
//! issue (bad inputs, unsafe writes, exit codes, messages). Each test names
//! the item it covers.

mod common;
use common::*;

use std::path::{Path, PathBuf};

use polars::prelude::*;

/// The pulsar demo pipeline with absolute paths, written into `dir`, with
/// `edit` applied to its text; input and output as given.
fn pulsar_pipeline(dir: &Path, input: &str, output: &str, edit: impl Fn(String) -> String) -> PathBuf {
    let text = std::fs::read_to_string(root().join("pipelines/pulsar_demo.toml")).unwrap();
    let text = text.replace("../", &format!("{}/", root().display()));
    let text = text.replace(&format!("path = \"{}/data/demo/pulsar_toas.parquet\"", root().display()), &format!("path = \"{input}\""));
    let text = text.replace(&format!("path = \"{}/out/pulsar_demo.parquet\"", root().display()), &format!("path = \"{output}\""));
    let p = dir.join("p.toml");
    std::fs::write(&p, edit(text)).unwrap();
    p
}

/// A small pulsar input: the demo's first rows.
fn demo_rows(n: usize) -> DataFrame {
    read(&root().join("data/demo/pulsar_toas.parquet")).head(Some(n))
}

fn text(o: &std::process::Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr))
}

fn f64s(df: &DataFrame, c: &str) -> Vec<f64> {
    df.column(c).unwrap().f64().unwrap().iter().map(|v| v.unwrap()).collect()
}

fn strs(df: &DataFrame, c: &str) -> Vec<String> {
    df.column(c).unwrap().str().unwrap().iter().map(|v| v.unwrap_or("").to_string()).collect()
}

/// Item 1: a tiny σ (1e-170 µs, or subnormal) is rejected by its documented
/// range, and no statistic becomes NaN.
#[test]
fn item01_tiny_sigma_is_rejected_and_statistics_stay_finite() {
    let d = tmpdir("h01");
    let mut df = demo_rows(20);
    let mut s = f64s(&df, "sigma_us");
    s[3] = 1e-170;
    s[7] = f64::from_bits(1); // subnormal
    df.with_column(Column::new("sigma_us".into(), s)).unwrap();
    write(&d.join("in.parquet"), &mut df);
    let p = pulsar_pipeline(&d, &d.join("in.parquet").display().to_string(), &d.join("out.parquet").display().to_string(), |t| t);
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots", "--max-rejected-fraction", "1"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let out = read(&d.join("out.parquet"));
    assert_eq!(out.height(), 18);
    assert!(f64s(&out, "residual_s").iter().all(|r| r.is_finite()), "no NaN residual");
    let rej = read(&d.join("out.rejects.parquet"));
    assert_eq!(strs(&rej, "reason_code"), ["invalid_value", "invalid_value"]);
    assert!(strs(&rej, "reason")[0].contains("outside"), "{:?}", strs(&rej, "reason"));
    assert!(!text(&o).contains("NaN"), "{}", text(&o));
}

/// Item 2: absurd pipeline numbers are refused with the key named; a
/// non-finite computed value would be a reject (checked in the unit tests of
/// the kinds' `finite`), never data.
#[test]
fn item02_absurd_pipeline_numbers_are_refused() {
    let d = tmpdir("h02");
    let mut df = demo_rows(5);
    write(&d.join("in.parquet"), &mut df);
    let (i, o) = (d.join("in.parquet").display().to_string(), d.join("out.parquet").display().to_string());
    for (from, to, key) in [
        ("epoch_mjd = 59215.0", "epoch_mjd = 1e15", "[spin] epoch_mjd"),
        ("derivatives = [-6.31e-16]", "derivatives = [1e300, 1e300]", "[spin] derivatives[0]"),
        ("ra_deg = 253.4127", "ra_deg = 1e308", "[source] ra_deg"),
        ("position_epoch_mjd = 58849.0", "position_epoch_mjd = -1e9", "[source] position_epoch_mjd"),
        ("measure_pc_cm3 = 41.27", "measure_pc_cm3 = -3.0", "[dispersion] measure_pc_cm3"),
        ("ppn_gamma = 1.0", "ppn_gamma = 1e9", "[corrections] ppn_gamma"),
    ] {
        let p = pulsar_pipeline(&d, &i, &o, |t| t.replace(from, to));
        for cmd in ["run", "check"] {
            let r = lapse(&[cmd, p.to_str().unwrap()]);
            assert_eq!(r.status.code(), Some(2), "{cmd} {to}: {}", text(&r));
            assert!(text(&r).contains(key) && text(&r).contains("valid range"), "{cmd} {to}: {}", text(&r));
        }
    }
    assert!(!d.join("out.parquet").exists());
}

/// Item 3: a float32 day fraction is refused with the column named, not widened.
#[test]
fn item03_float32_time_columns_are_refused() {
    let d = tmpdir("h03");
    let mut df = demo_rows(5);
    let f: Vec<f32> = f64s(&df, "arrival_mjd_frac").iter().map(|x| *x as f32).collect();
    df.with_column(Column::new("arrival_mjd_frac".into(), f)).unwrap();
    write(&d.join("in.parquet"), &mut df);
    let p = pulsar_pipeline(&d, &d.join("in.parquet").display().to_string(), &d.join("out.parquet").display().to_string(), |t| t);
    for cmd in ["run", "check"] {
        let o = lapse(&[cmd, p.to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(2), "{}", text(&o));
        assert!(text(&o).contains("'arrival_mjd_frac'") && text(&o).contains("float32"), "{}", text(&o));
    }
}
