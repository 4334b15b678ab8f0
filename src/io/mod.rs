//! Parquet in and out, with errors that name the file, column and row.

pub mod digest;

use std::fs::File;
use std::path::{Path, PathBuf};

use polars::prelude::*;

/// Errors reading or writing tables.
#[derive(Debug, thiserror::Error)]
pub enum IoError {
    #[error("cannot open {path}: {source}")]
    Open { path: PathBuf, source: std::io::Error },
    #[error("{path} is not a readable Parquet file: {message}")]
    Parquet { path: PathBuf, message: String },
    #[error("{path}: missing column '{column}' (expected {expected})")]
    MissingColumn { path: PathBuf, column: String, expected: String },
    #[error("{path}: column '{column}' has type {found}, expected {expected}")]
    ColumnType { path: PathBuf, column: String, found: String, expected: String },
    #[error("{path}: column '{column}' row {row}: {message}")]
    Value { path: PathBuf, column: String, row: usize, message: String },
    #[error("cannot write {path}: {message}")]
    Write { path: PathBuf, message: String },
}

thread_local! {
    static IN_GUARDED_READER: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// True while this thread runs a reader whose panics are turned into errors
/// (a panic hook may stay quiet then).
pub fn in_guarded_reader() -> bool {
    IN_GUARDED_READER.with(|c| c.get())
}

/// Runs a reader of outside data, turning a panic inside it into `None`.
/// polars 0.55 panics on some corrupt Parquet files (found by
/// `tests/fuzz_readers.rs`); this keeps them errors.
pub fn guarded<T>(f: impl FnOnce() -> T) -> Option<T> {
    IN_GUARDED_READER.with(|c| c.set(true));
    let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(f)).ok();
    IN_GUARDED_READER.with(|c| c.set(false));
    r
}

/// Reads a whole Parquet file.
pub fn read_parquet(path: &Path) -> Result<DataFrame, IoError> {
    let f = File::open(path).map_err(|source| IoError::Open { path: path.into(), source })?;
    // polars panics on some corrupt inputs; contain that as an error.
    let res = guarded(|| ParquetReader::new(f).finish()).ok_or(());
    match res {
        Ok(Ok(df)) => Ok(df),
        Ok(Err(e)) => Err(IoError::Parquet { path: path.into(), message: e.to_string() }),
        Err(()) => Err(IoError::Parquet { path: path.into(), message: "the file is corrupt (reader failed)".into() }),
    }
}

/// Key-value metadata of a Parquet file, in file order.
pub fn read_parquet_metadata(path: &Path) -> Result<Vec<(String, String)>, IoError> {
    let f = File::open(path).map_err(|source| IoError::Open { path: path.into(), source })?;
    let res = guarded(|| {
        let mut reader = ParquetReader::new(f);
        reader
            .get_metadata()
            .map(|md| -> Vec<(String, String)> { md.key_value_metadata().as_ref().map(|kv| kv.iter().map(|k| (k.key.clone(), k.value.clone().unwrap_or_default())).collect()).unwrap_or_default() })
    });
    match res {
        Some(Ok(v)) => Ok(v),
        Some(Err(e)) => Err(IoError::Parquet { path: path.into(), message: e.to_string() }),
        None => Err(IoError::Parquet { path: path.into(), message: "the file is corrupt (metadata reader failed)".into() }),
    }
}

/// Compression of every Parquet file lapse writes: zstd level 1. Measured on
/// a 10⁶-row pulsar output (26 columns): 130.1 MB in 0.47 s, against
/// 129.4 MB in 0.66 s at zstd's default level and 171 MB in 0.34 s
/// uncompressed (mostly f64 mantissas, which hardly compress).
pub fn output_compression() -> ParquetCompression {
    ParquetCompression::Zstd(polars_parquet::write::ZstdLevel::try_new(1).ok())
}

/// The temporary name a Parquet file is written under until complete
/// (`x.parquet` → `x.parquet.partial`), then renamed to `path`.
pub fn partial_path(path: &Path) -> PathBuf {
    path.with_extension("parquet.partial")
}

/// Writes a table with key-value metadata to `path`, through a temporary
/// file synced and renamed into place only when complete (columns
/// compressed in parallel).
pub fn write_parquet(df: &mut DataFrame, path: &Path, metadata: &[(String, String)]) -> Result<(), IoError> {
    let werr = |message: String| IoError::Write { path: path.into(), message };
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir).map_err(|e| werr(e.to_string()))?;
    }
    let tmp = partial_path(path);
    write_parquet_file(df, &tmp, metadata)?;
    File::open(&tmp).and_then(|f| f.sync_all()).map_err(|e| werr(e.to_string()))?;
    std::fs::rename(&tmp, path).map_err(|e| werr(e.to_string()))?;
    Ok(())
}

/// Writes a table with key-value metadata to exactly `path` (the caller
/// renames it into place; see `pipeline::commit`).
pub fn write_parquet_file(df: &mut DataFrame, path: &Path, metadata: &[(String, String)]) -> Result<(), IoError> {
    let werr = |message: String| IoError::Write { path: path.into(), message };
    let tmp = path;
    // Buffered: the writer emits the footer a few bytes at a time (≈ 2300
    // write calls per file unbuffered).
    let mut f = std::io::BufWriter::with_capacity(1 << 20, File::create(tmp).map_err(|e| werr(e.to_string()))?);
    let kv: Vec<polars_parquet::write::KeyValue> = metadata.iter().map(|(k, v)| polars_parquet::write::KeyValue { key: k.clone(), value: Some(v.clone()) }).collect();
    let mut w = ParquetWriter::new(&mut f).with_compression(output_compression()).with_key_value_metadata(Some(KeyValueMetadata::Static(kv))).batched(df.schema()).map_err(|e| werr(e.to_string()))?;
    write_row_groups_parallel(&mut w, df).map_err(|e| werr(e.to_string()))?;
    w.finish().map_err(|e| werr(e.to_string()))?;
    drop(w);
    std::io::Write::flush(&mut f).map_err(|e| werr(e.to_string()))?;
    Ok(())
}

/// Rows per Parquet row group (polars' default for its writer).
const ROW_GROUP_ROWS: usize = 512 * 512;

/// Encodes and compresses each column chunk of `df` on the worker threads,
/// then hands the finished pages to `w` in order.
///
/// polars' writer encodes columns in parallel but compresses their pages
/// lazily while writing, on one thread (≈ 35 ms for 10⁵ pulsar rows); the
/// pages are the same either way — same encodings, statistics, page size
/// and compression as the writer's own options — so the file is too.
pub fn write_row_groups_parallel<W: std::io::Write>(w: &mut polars::io::parquet::write::BatchedWriter<W>, df: &mut DataFrame) -> PolarsResult<()> {
    use polars_parquet::write::{CompressedPage, CompressionOptions, Compressor, StatisticsOptions, Version, WriteOptions, array_to_columns};
    use rayon::prelude::*;
    let options = WriteOptions { statistics: StatisticsOptions::default(), version: Version::V1, compression: CompressionOptions::from(output_compression()), data_page_size: None };
    let fields = w.parquet_schema().fields().to_vec();
    let arrow_schema = df.schema().to_arrow(CompatLevel::newest());
    let encodings = polars::io::parquet::write::get_encodings(&arrow_schema);
    let chunked = polars::frame::chunk_df_for_writing(df, ROW_GROUP_ROWS)?;
    for batch in chunked.iter_chunks(CompatLevel::newest(), false) {
        if batch.is_empty() {
            continue;
        }
        let per_field: Vec<Vec<Vec<CompressedPage>>> = batch
            .columns()
            .par_iter()
            .zip(fields.par_iter())
            .zip(encodings.par_iter())
            .map(|((array, type_), encoding)| -> PolarsResult<Vec<Vec<CompressedPage>>> {
                array_to_columns(array, type_.clone(), options, encoding)?
                    .into_iter()
                    .map(|pages| {
                        let pages = pages.map(|p| p.map_err(|e| polars_parquet::parquet::error::ParquetError::FeatureNotSupported(format!("encoding a page: {e}"))));
                        Compressor::new(pages, options.compression, vec![]).collect::<Result<Vec<_>, _>>().map_err(PolarsError::from)
                    })
                    .collect()
            })
            .collect::<PolarsResult<_>>()?;
        let leaves: Vec<Vec<CompressedPage>> = per_field.into_iter().flatten().collect();
        w.write_row_group(batch.len() as u64, &leaves)?;
    }
    Ok(())
}

/// A typed view of a table's columns that names the file in every error.
pub struct Columns<'a, 'p> {
    pub df: &'a DataFrame,
    pub path: &'p Path,
}

impl<'a> Columns<'a, '_> {
    fn column(&self, name: &str, expected: &str) -> Result<&'a Column, IoError> {
        self.df.column(name).map_err(|_| IoError::MissingColumn { path: self.path.into(), column: name.into(), expected: expected.into() })
    }

    fn type_err(&self, name: &str, c: &Column, expected: &str) -> IoError {
        IoError::ColumnType { path: self.path.into(), column: name.into(), found: c.dtype().to_string(), expected: expected.into() }
    }

    /// A required Int64 column (Int32 is widened).
    pub fn i64(&self, name: &str) -> Result<Vec<Option<i64>>, IoError> {
        let c = self.column(name, "int64")?;
        match c.dtype() {
            DataType::Int64 | DataType::Int32 | DataType::UInt32 => {
                let c = c.cast(&DataType::Int64).map_err(|_| self.type_err(name, c, "int64"))?;
                Ok(c.i64().map_err(|_| self.type_err(name, &c, "int64"))?.iter().collect())
            }
            _ => Err(self.type_err(name, c, "int64")),
        }
    }

    /// A required Float64 column. Float32 is refused, not widened: a day
    /// fraction in float32 resolves only ≈ 5 ms, and no input column of
    /// lapse may lose digits silently.
    pub fn f64(&self, name: &str) -> Result<Vec<Option<f64>>, IoError> {
        let c = self.column(name, "float64")?;
        match c.dtype() {
            DataType::Float64 => Ok(c.f64().map_err(|_| self.type_err(name, c, "float64"))?.iter().collect()),
            DataType::Float32 => Err(self.type_err(name, c, "float64 (float32 would lose digits: write the column as float64)")),
            _ => Err(self.type_err(name, c, "float64")),
        }
    }

    /// A required String column.
    pub fn str(&self, name: &str) -> Result<Vec<Option<String>>, IoError> {
        Ok(self.str_ref(name)?.into_iter().map(|v| v.map(str::to_string)).collect())
    }

    /// A string column as views into the frame (no string copied).
    pub fn str_ref(&self, name: &str) -> Result<Vec<Option<&'a str>>, IoError> {
        let c: &'a Column = self.column(name, "string")?;
        let ca = c.str().map_err(|_| self.type_err(name, c, "string"))?;
        Ok(ca.iter().collect())
    }
}

/// Shell-style match of `*` (any run of characters) and `?` (one
/// character) against a whole name: file names of partitions, column names
/// of tolerances.
pub fn glob_match(pattern: &str, name: &str) -> bool {
    let (p, n): (Vec<char>, Vec<char>) = (pattern.chars().collect(), name.chars().collect());
    let (mut pi, mut ni, mut star, mut mark) = (0usize, 0usize, None::<usize>, 0usize);
    while ni < n.len() {
        if pi < p.len() && (p[pi] == '?' || p[pi] == n[ni]) {
            pi += 1;
            ni += 1;
        } else if pi < p.len() && p[pi] == '*' {
            star = Some(pi);
            mark = ni;
            pi += 1;
        } else if let Some(s) = star {
            pi = s + 1;
            mark += 1;
            ni = mark;
        } else {
            return false;
        }
    }
    while pi < p.len() && p[pi] == '*' {
        pi += 1;
    }
    pi == p.len()
}

/// One data line of a small comma-separated table: its 1-based line number
/// and its trimmed fields (as many as the header has).
#[derive(Debug)]
pub struct CsvLine<'a> {
    pub line: usize,
    pub fields: Vec<&'a str>,
}

/// Splits a small comma-separated text table (plans, clock corrections):
/// blank lines and `#` comments are skipped, the first other line must be
/// exactly `header`, and every later line must have as many fields.
///
/// # Errors
/// `(line, reason)` for a wrong header or field count; callers wrap it in
/// their own error with the path.
pub fn csv_lines<'a>(text: &'a str, header: &[&str]) -> Result<Vec<CsvLine<'a>>, (usize, String)> {
    let mut out = Vec::new();
    let mut header_seen = false;
    for (i, raw) in text.lines().enumerate() {
        let l = raw.trim();
        if l.is_empty() || l.starts_with('#') {
            continue;
        }
        let fields: Vec<&str> = l.split(',').map(str::trim).collect();
        if !header_seen {
            if fields != header {
                return Err((i + 1, format!("expected the header '{}', found '{l}'", header.join(","))));
            }
            header_seen = true;
            continue;
        }
        if fields.len() != header.len() {
            return Err((i + 1, format!("expected {} fields ({}), found {}", header.len(), header.join(", "), fields.len())));
        }
        out.push(CsvLine { line: i + 1, fields });
    }
    Ok(out)
}

#[cfg(test)]
mod csv_tests {
    use super::*;

    #[test]
    fn csv_lines_skips_comments_and_checks_shape() {
        let t = "# note\n\n a , b \n1,2\n# mid\n 3 ,4\n";
        let rows = csv_lines(t, &["a", "b"]).unwrap();
        assert_eq!(rows.len(), 2);
        assert_eq!((rows[1].line, rows[1].fields.clone()), (6, vec!["3", "4"]));
        assert_eq!(csv_lines("x,y\n", &["a", "b"]).unwrap_err().0, 1);
        let e = csv_lines("a,b\n1,2,3\n", &["a", "b"]).unwrap_err();
        assert_eq!(e.0, 2);
        assert!(e.1.contains("expected 2 fields"), "{}", e.1);
        assert!(csv_lines("", &["a"]).unwrap().is_empty());
    }
}
