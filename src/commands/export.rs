//! `lapse export`: a Parquet table written by lapse as CSV text, for people
//! who want a text table of residuals. Floats keep every digit (shortest
//! form that reads back to the same f64), nulls are empty fields, text is
//! quoted when it holds a comma, quote or line break.

use std::io::Write;
use std::path::Path;

use polars::prelude::{AnyValue, DataFrame};

use crate::io::{IoError, read_parquet};

fn field(v: AnyValue) -> String {
    match v {
        AnyValue::Null => String::new(),
        AnyValue::Float64(x) => format!("{x:?}"),
        AnyValue::Float32(x) => format!("{x:?}"),
        AnyValue::Boolean(b) => b.to_string(),
        AnyValue::String(s) => quote(s),
        AnyValue::StringOwned(s) => quote(s.as_str()),
        other => {
            let s = other.to_string();
            quote(s.trim_matches('"'))
        }
    }
}

fn quote(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) { format!("\"{}\"", s.replace('"', "\"\"")) } else { s.to_string() }
}

/// Writes `df` as CSV (header, then one line per row) to `out`.
pub fn write_csv(df: &DataFrame, out: &mut dyn Write) -> std::io::Result<()> {
    let names: Vec<String> = df.get_column_names().iter().map(|n| quote(n.as_str())).collect();
    writeln!(out, "{}", names.join(","))?;
    let cols = df.columns();
    let mut line = String::new();
    for i in 0..df.height() {
        line.clear();
        for (k, c) in cols.iter().enumerate() {
            if k > 0 {
                line.push(',');
            }
            line.push_str(&field(c.get(i).unwrap_or(AnyValue::Null)));
        }
        line.push('\n');
        out.write_all(line.as_bytes())?;
    }
    out.flush()
}

/// Errors of `lapse export`.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    #[error(transparent)]
    Read(#[from] IoError),
    #[error("cannot write {path}: {source}")]
    Write { path: String, source: std::io::Error },
}

/// Exports a Parquet file as CSV to `out` (a file path) or to `stdout`.
pub fn export_csv(input: &Path, out: Option<&Path>) -> Result<(), ExportError> {
    let df = read_parquet(input)?;
    let (name, result) = match out {
        Some(p) => (p.display().to_string(), std::fs::File::create(p).and_then(|f| write_csv(&df, &mut std::io::BufWriter::new(f)))),
        None => ("<stdout>".to_string(), write_csv(&df, &mut std::io::BufWriter::new(std::io::stdout().lock()))),
    };
    result.map_err(|source| ExportError::Write { path: name, source })
}

#[cfg(test)]
mod tests {
    use super::*;
    use polars::prelude::*;

    #[test]
    fn csv_keeps_every_digit_and_quotes_text() {
        let df = df!("obs_id" => ["a,1", "b"], "x" => [Some(0.1 + 0.2), None], "n" => [1i64, -2]).unwrap();
        let mut buf = Vec::new();
        write_csv(&df, &mut buf).unwrap();
        assert_eq!(String::from_utf8(buf).unwrap(), "obs_id,x,n\n\"a,1\",0.30000000000000004,1\nb,,-2\n");
    }
}
