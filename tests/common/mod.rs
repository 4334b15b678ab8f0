//! Helpers shared by the integration tests (each test file is its own
//! crate, so not every helper is used by every file).
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use polars::prelude::*;

/// The repository root.
pub fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// A repository path as an absolute string (for command-line arguments).
pub fn data(p: &str) -> String {
    root().join(p).to_string_lossy().into_owned()
}

/// Every `pipelines/*.toml`, sorted.
pub fn pipelines() -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(root().join("pipelines")).unwrap().map(|e| e.unwrap().path()).filter(|p| p.extension().is_some_and(|x| x == "toml")).collect();
    v.sort();
    v
}

/// Runs the built binary.
pub fn lapse(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_lapse")).args(args).output().expect("run lapse")
}

/// A fresh, empty scratch folder for one test, named after the test file,
/// the process and `name`.
pub fn tmpdir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("lapse-{}-{}-{name}", env!("CARGO_CRATE_NAME"), std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Reads a Parquet file (panics naming the file).
pub fn read(p: &Path) -> DataFrame {
    ParquetReader::new(std::fs::File::open(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))).finish().unwrap()
}

/// Writes a Parquet file.
pub fn write(p: &Path, df: &mut DataFrame) {
    ParquetWriter::new(std::fs::File::create(p).unwrap()).finish(df).unwrap();
}

/// Every value of every column as bits (floats by bit pattern), for exact comparison.
pub fn column_bits(df: &DataFrame) -> Vec<(String, Vec<String>)> {
    df.columns()
        .iter()
        .map(|c| {
            let vals: Vec<String> = match c.dtype() {
                DataType::Float64 => c.f64().unwrap().iter().map(|v| format!("{:?}", v.map(f64::to_bits))).collect(),
                _ => c.cast(&DataType::String).unwrap().str().unwrap().iter().map(|v| format!("{v:?}")).collect(),
            };
            (c.name().to_string(), vals)
        })
        .collect()
}

/// The data rows of a reference fixture CSV under `tests/fixtures` (comment
/// lines and the header skipped), as text fields.
pub fn fixture_csv(name: &str) -> Vec<Vec<String>> {
    let path = root().join("tests/fixtures").join(name);
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    text.lines().filter(|l| !l.starts_with('#')).skip(1).map(|l| l.split(',').map(str::to_string).collect()).collect()
}

/// A tracking output's per-unit column pair (`<base>_s` for light-time rows,
/// `<base>_hz` for Doppler rows) as one column of values: each row's
/// non-null one.
#[allow(dead_code)]
pub fn by_unit(df: &polars::prelude::DataFrame, base: &str) -> Vec<f64> {
    let s = df.column(&format!("{base}_s")).unwrap().f64().unwrap().clone();
    let hz = df.column(&format!("{base}_hz")).unwrap().f64().unwrap().clone();
    s.iter()
        .zip(hz.iter())
        .map(|(a, b)| match (a, b) {
            (Some(a), None) => a,
            (None, Some(b)) => b,
            other => panic!("row with {other:?}: exactly one unit column must hold the value"),
        })
        .collect()
}
