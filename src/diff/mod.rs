//! Release validation: compare two residual tables row by row and column by
//! column, with tolerances, and explain differences by provenance.
//!
//! Memory stays bounded for large tables: the key columns are read once and
//! indexed without copying the key strings, then every common column is read
//! and compared one at a time (Parquet column projection).

use std::collections::{BTreeMap, HashMap};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use polars::prelude::*;

use crate::io::{IoError, read_parquet_metadata, write_parquet};

/// Errors of a diff (exit code 2).
#[derive(Debug, thiserror::Error)]
pub enum DiffError {
    #[error(transparent)]
    Io(#[from] IoError),
    #[error("{path}: no key column '{column}'")]
    NoKey { path: PathBuf, column: String },
    #[error("{path}: key column '{column}' has type {dtype}; keys must be strings or integers")]
    KeyType { path: PathBuf, column: String, dtype: String },
    #[error("{path}: duplicate key {key} at rows {first} and {second}")]
    DuplicateKey { path: PathBuf, key: String, first: usize, second: usize },
    #[error("{path}: null key at row {row}")]
    NullKey { path: PathBuf, row: usize },
    #[error("tolerances: {0}")]
    Tolerance(String),
}

fn is_pattern(k: &str) -> bool {
    k.contains('*') || k.contains('?')
}

/// The changed lines of two texts with their context (one line), marked
/// `-` (only in A), `+` (only in B) or ` ` (both), from a longest common
/// subsequence of lines; `@@ line N` opens each hunk. Pipeline texts are
/// short, so the quadratic table is small.
pub fn unified_diff(a: &str, b: &str) -> Vec<String> {
    let (x, y): (Vec<&str>, Vec<&str>) = (a.lines().collect(), b.lines().collect());
    let (n, m) = (x.len(), y.len());
    let mut lcs = vec![vec![0u32; m + 1]; n + 1];
    for i in (0..n).rev() {
        for j in (0..m).rev() {
            lcs[i][j] = if x[i] == y[j] { lcs[i + 1][j + 1] + 1 } else { lcs[i + 1][j].max(lcs[i][j + 1]) };
        }
    }
    // The edit script: (mark, line, line number in A).
    let mut ops: Vec<(char, &str, usize)> = Vec::new();
    let (mut i, mut j) = (0, 0);
    while i < n || j < m {
        if i < n && j < m && x[i] == y[j] {
            ops.push((' ', x[i], i + 1));
            (i, j) = (i + 1, j + 1);
        } else if j < m && (i == n || lcs[i][j + 1] > lcs[i + 1][j]) {
            ops.push(('+', y[j], i + 1));
            j += 1;
        } else {
            ops.push(('-', x[i], i + 1));
            i += 1;
        }
    }
    let near = |k: usize| ops[k.saturating_sub(1)..(k + 2).min(ops.len())].iter().any(|o| o.0 != ' ');
    let mut out = Vec::new();
    let mut last: Option<usize> = None;
    for (k, op) in ops.iter().enumerate() {
        if !near(k) {
            continue;
        }
        if last.is_none_or(|l| l + 1 != k) {
            out.push(format!("@@ line {}", op.2));
        }
        out.push(format!("{}{}", op.0, op.1));
        last = Some(k);
    }
    out
}

/// Per-column tolerances (absolute, in the column's unit); columns not named
/// use `default` (0: exact).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Tolerances {
    pub default: f64,
    pub per_column: BTreeMap<String, f64>,
}

impl Tolerances {
    /// Tolerance of a column: its own entry, else the first pattern
    /// (`*`, `?`) that matches it, else the default.
    pub fn of(&self, column: &str) -> f64 {
        self.per_column.get(column).or_else(|| self.per_column.iter().find(|(k, _)| is_pattern(k) && crate::io::glob_match(k, column)).map(|(_, v)| v)).copied().unwrap_or(self.default)
    }

    /// Fails on an entry that names no column of either file (a typo would
    /// otherwise leave the column compared exactly without notice).
    pub fn check_columns(&self, columns: &[&str]) -> Result<(), DiffError> {
        for k in self.per_column.keys() {
            let hit = if is_pattern(k) { columns.iter().any(|c| crate::io::glob_match(k, c)) } else { columns.contains(&k.as_str()) };
            if !hit {
                return Err(DiffError::Tolerance(format!("'{k}' matches no column of either file (columns: {})", columns.join(", "))));
            }
        }
        Ok(())
    }

    /// Parses `COLUMN=VALUE`.
    pub fn add_arg(&mut self, arg: &str) -> Result<(), DiffError> {
        let (c, v) = arg.split_once('=').ok_or_else(|| DiffError::Tolerance(format!("'{arg}' is not COLUMN=VALUE")))?;
        let v: f64 = v.trim().parse().map_err(|_| DiffError::Tolerance(format!("'{arg}': '{v}' is not a number")))?;
        if !(v.is_finite() && v >= 0.0) {
            return Err(DiffError::Tolerance(format!("'{arg}': tolerance must be finite and ≥ 0")));
        }
        self.per_column.insert(c.trim().to_string(), v);
        Ok(())
    }

    /// Reads a TOML file: `default = 0.0` and a `[tolerances]` table of
    /// `column = value`.
    pub fn from_toml_file(path: &Path) -> Result<Self, DiffError> {
        let text = std::fs::read_to_string(path).map_err(|e| DiffError::Tolerance(format!("{}: {e}", path.display())))?;
        let v: toml::Table = toml::from_str(&text).map_err(|e| DiffError::Tolerance(format!("{}: {e}", path.display())))?;
        let mut t = Tolerances::default();
        for (k, val) in &v {
            match (k.as_str(), val) {
                ("default", toml::Value::Float(f)) => t.default = *f,
                ("default", toml::Value::Integer(i)) => t.default = *i as f64,
                ("tolerances", toml::Value::Table(tab)) => {
                    for (c, x) in tab {
                        let f = match x {
                            toml::Value::Float(f) => *f,
                            toml::Value::Integer(i) => *i as f64,
                            _ => return Err(DiffError::Tolerance(format!("{}: tolerance of '{c}' is not a number", path.display()))),
                        };
                        t.per_column.insert(c.clone(), f);
                    }
                }
                _ => return Err(DiffError::Tolerance(format!("{}: unknown key '{k}' (use default and [tolerances])", path.display()))),
            }
        }
        Ok(t)
    }
}

/// Comparison of one common column.
#[derive(Clone, Debug, PartialEq)]
pub struct ColumnDiff {
    pub column: String,
    pub dtype_a: String,
    pub dtype_b: String,
    pub numeric: bool,
    pub tolerance: f64,
    /// Matched rows compared.
    pub compared: usize,
    /// Largest |B − A| (NaN-against-number counts as infinite).
    pub max_abs_delta: f64,
    pub rms_delta: f64,
    /// Key of the row with the largest difference.
    pub max_row_key: Option<String>,
    /// Rows whose difference exceeds the tolerance (or differ, non-numeric).
    pub exceeding: usize,
}

/// A provenance entry that differs between the two files.
#[derive(Clone, Debug, PartialEq)]
pub struct ProvenanceChange {
    pub key: String,
    pub a: Option<String>,
    pub b: Option<String>,
    /// True when this change can explain numeric differences (inputs,
    /// constants, pipeline); false for version, revision and run time.
    pub explains: bool,
    /// True for entries that record results (residual statistics, row
    /// counts): consequences, not causes.
    pub is_result: bool,
}

/// The whole comparison.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct DiffReport {
    pub path_a: PathBuf,
    pub path_b: PathBuf,
    pub keys: Vec<String>,
    pub rows_a: usize,
    pub rows_b: usize,
    pub matched: usize,
    pub only_a: Vec<String>,
    pub only_b: Vec<String>,
    pub columns_only_a: Vec<String>,
    pub columns_only_b: Vec<String>,
    pub type_changes: Vec<(String, String, String)>,
    pub columns: Vec<ColumnDiff>,
    pub provenance: Vec<ProvenanceChange>,
}

impl DiffReport {
    /// True when every compared column is within tolerance and every row matched
    /// (and no column or type changed).
    pub fn within_tolerance(&self) -> bool {
        self.only_a.is_empty()
            && self.only_b.is_empty()
            && self.columns_only_a.is_empty()
            && self.columns_only_b.is_empty()
            && self.type_changes.is_empty()
            && self.columns.iter().all(|c| c.exceeding == 0)
    }
}

fn schema(path: &Path) -> Result<Vec<(String, DataType)>, DiffError> {
    let f = std::fs::File::open(path).map_err(|source| IoError::Open { path: path.into(), source })?;
    let res = crate::io::guarded(|| ParquetReader::new(f).with_slice(Some((0, 0))).finish());
    let df = match res {
        Some(Ok(df)) => df,
        Some(Err(e)) => return Err(IoError::Parquet { path: path.into(), message: e.to_string() }.into()),
        None => return Err(IoError::Parquet { path: path.into(), message: "the file is corrupt (reader failed)".into() }.into()),
    };
    Ok(df.schema().iter().map(|(n, t)| (n.to_string(), t.clone())).collect())
}

fn read_columns(path: &Path, cols: &[String]) -> Result<DataFrame, DiffError> {
    let f = std::fs::File::open(path).map_err(|source| IoError::Open { path: path.into(), source })?;
    let res = crate::io::guarded(|| ParquetReader::new(f).with_columns(Some(cols.to_vec())).finish());
    match res {
        Some(Ok(df)) => Ok(df),
        Some(Err(e)) => Err(IoError::Parquet { path: path.into(), message: e.to_string() }.into()),
        None => Err(IoError::Parquet { path: path.into(), message: "the file is corrupt (reader failed)".into() }.into()),
    }
}

/// The keys of a table packed in one buffer (no per-row allocation).
struct KeyBuf {
    data: String,
    /// offs[i]..offs[i+1] is row i's key.
    offs: Vec<usize>,
}

impl KeyBuf {
    fn get(&self, i: usize) -> &str {
        &self.data[self.offs[i]..self.offs[i + 1]]
    }
    fn len(&self) -> usize {
        self.offs.len() - 1
    }
}

/// Key of every row as text (keys joined with '|'), packed.
fn key_buf(df: &DataFrame, keys: &[String], path: &Path) -> Result<KeyBuf, DiffError> {
    if keys.len() == 1 {
        let c = df.column(&keys[0]).map_err(|_| DiffError::NoKey { path: path.into(), column: keys[0].clone() })?;
        let s = key_as_string_column(c, &keys[0], path)?;
        let ca = s.str().map_err(|e| IoError::Parquet { path: path.into(), message: e.to_string() })?;
        let mut data = String::new();
        let mut offs = Vec::with_capacity(ca.len() + 1);
        offs.push(0);
        for (i, v) in ca.iter().enumerate() {
            data.push_str(v.ok_or(DiffError::NullKey { path: path.into(), row: i })?);
            offs.push(data.len());
        }
        return Ok(KeyBuf { data, offs });
    }
    let parts = key_strings(df, keys, path)?;
    let mut data = String::with_capacity(parts.iter().map(|p| p.len()).sum());
    let mut offs = Vec::with_capacity(parts.len() + 1);
    offs.push(0);
    for p in parts {
        data.push_str(&p);
        offs.push(data.len());
    }
    Ok(KeyBuf { data, offs })
}

/// Key of every row as text (keys joined with '|').
fn key_strings(df: &DataFrame, keys: &[String], path: &Path) -> Result<Vec<String>, DiffError> {
    let n = df.height();
    let mut out = vec![String::new(); n];
    for (j, k) in keys.iter().enumerate() {
        let c = df.column(k).map_err(|_| DiffError::NoKey { path: path.into(), column: k.clone() })?;
        let s = key_as_string_column(c, k, path)?;
        let ca = s.str().map_err(|e| IoError::Parquet { path: path.into(), message: e.to_string() })?;
        for (i, v) in ca.iter().enumerate() {
            let v = v.ok_or(DiffError::NullKey { path: path.into(), row: i })?;
            if j > 0 {
                out[i].push('|');
            }
            out[i].push_str(v);
        }
    }
    Ok(out)
}

fn key_as_string_column(c: &Column, k: &str, path: &Path) -> Result<Column, DiffError> {
    match c.dtype() {
        DataType::String => Ok(c.clone()),
        t if t.is_integer() => c.cast(&DataType::String).map_err(|e| IoError::Parquet { path: path.into(), message: e.to_string() }.into()),
        t => Err(DiffError::KeyType { path: path.into(), column: k.to_string(), dtype: t.to_string() }),
    }
}

fn is_numeric(t: &DataType) -> bool {
    t.is_primitive_numeric()
}

/// Values of a numeric column as f64 (integers exactly up to 2^53), nulls as NaN.
fn as_f64(c: &Column) -> Vec<f64> {
    match c.cast(&DataType::Float64) {
        Ok(c) => c.f64().map(|ca| ca.iter().map(|v| v.unwrap_or(f64::NAN)).collect()).unwrap_or_default(),
        Err(_) => vec![f64::NAN; c.len()],
    }
}

/// Values of a non-numeric column as text (nulls as None).
fn as_text(c: &Column) -> Vec<Option<String>> {
    match c.cast(&DataType::String) {
        Ok(c) => c.str().map(|ca| ca.iter().map(|v| v.map(str::to_string)).collect()).unwrap_or_default(),
        Err(_) => vec![None; c.len()],
    }
}

/// Provenance keys that record results of the run.
fn is_result(key: &str) -> bool {
    key.starts_with("lapse.residuals.") || key.starts_with("lapse.rows.") || key.starts_with("lapse.plot.")
}

/// Provenance keys that can explain a numeric difference: inputs, constants,
/// pipeline text — not the version, revision, run time or file locations.
fn explains(key: &str) -> bool {
    !(is_result(key) || key == "lapse.version" || key == "lapse.source_revision" || key == "lapse.run.started_utc" || key == "lapse.pipeline.path" || key.ends_with("path"))
}

/// Index of keys → row, refusing duplicates (borrows the key buffer).
fn key_index<'a>(k: &'a KeyBuf, path: &Path) -> Result<HashMap<&'a str, usize>, DiffError> {
    let mut m = HashMap::with_capacity(k.len());
    for i in 0..k.len() {
        if let Some(first) = m.insert(k.get(i), i) {
            return Err(DiffError::DuplicateKey { path: path.into(), key: k.get(i).to_string(), first, second: i });
        }
    }
    Ok(m)
}

/// Refuses duplicate keys without keeping an index (sort of row numbers).
fn check_unique(k: &KeyBuf, path: &Path) -> Result<(), DiffError> {
    let mut idx: Vec<u32> = (0..k.len() as u32).collect();
    idx.sort_unstable_by(|a, b| k.get(*a as usize).cmp(k.get(*b as usize)).then(a.cmp(b)));
    for w in idx.windows(2) {
        if k.get(w[0] as usize) == k.get(w[1] as usize) {
            return Err(DiffError::DuplicateKey { path: path.into(), key: k.get(w[0] as usize).to_string(), first: w[0] as usize, second: w[1] as usize });
        }
    }
    Ok(())
}

/// Per-row differences, for `--rows`.
pub struct RowDiffs {
    pub keys: Vec<String>,
    pub status: Vec<&'static str>,
    pub columns: Vec<(String, Vec<f64>)>,
}

/// Compares two tables.
///
/// `keys`: join columns (default `obs_id`). Returns the report and, when
/// `want_rows`, the per-row differences (matched rows with any difference,
/// and unmatched rows).
pub fn diff(path_a: &Path, path_b: &Path, keys: &[String], tol: &Tolerances, want_rows: bool) -> Result<(DiffReport, Option<RowDiffs>), DiffError> {
    let sa = schema(path_a)?;
    let sb = schema(path_b)?;
    for k in keys {
        if !sa.iter().any(|(n, _)| n == k) {
            return Err(DiffError::NoKey { path: path_a.into(), column: k.clone() });
        }
        if !sb.iter().any(|(n, _)| n == k) {
            return Err(DiffError::NoKey { path: path_b.into(), column: k.clone() });
        }
    }
    let mut all_columns: Vec<&str> = sa.iter().chain(&sb).map(|(n, _)| n.as_str()).collect();
    all_columns.dedup();
    tol.check_columns(&all_columns)?;
    let ka = key_buf(&read_columns(path_a, keys)?, keys, path_a)?;
    let kb = key_buf(&read_columns(path_b, keys)?, keys, path_b)?;
    check_unique(&ka, path_a)?;
    let ib = key_index(&kb, path_b)?;
    // Matched pairs in A's order; B rows never matched are "only in B".
    let mut matched_b = vec![false; kb.len()];
    let mut pairs: Vec<(u32, u32)> = Vec::with_capacity(ka.len().min(kb.len()));
    let mut only_a: Vec<String> = Vec::new();
    for i in 0..ka.len() {
        match ib.get(ka.get(i)) {
            Some(&j) => {
                matched_b[j] = true;
                pairs.push((i as u32, j as u32));
            }
            None => only_a.push(ka.get(i).to_string()),
        }
    }
    drop(ib);
    let only_b: Vec<String> = (0..kb.len()).filter(|j| !matched_b[*j]).map(|j| kb.get(j).to_string()).collect();

    let mut report = DiffReport { path_a: path_a.into(), path_b: path_b.into(), keys: keys.to_vec(), rows_a: ka.len(), rows_b: kb.len(), matched: pairs.len(), only_a, only_b, ..Default::default() };
    let tb: HashMap<&str, &DataType> = sb.iter().map(|(n, t)| (n.as_str(), t)).collect();
    let ta: HashMap<&str, &DataType> = sa.iter().map(|(n, t)| (n.as_str(), t)).collect();
    report.columns_only_a = sa.iter().filter(|(n, _)| !tb.contains_key(n.as_str())).map(|(n, _)| n.clone()).collect();
    report.columns_only_b = sb.iter().filter(|(n, _)| !ta.contains_key(n.as_str())).map(|(n, _)| n.clone()).collect();

    let mut row_changed = vec![false; pairs.len()];
    let mut row_cols: Vec<(String, Vec<f64>)> = Vec::new();
    for (name, dta) in &sa {
        if keys.contains(name) {
            continue;
        }
        let Some(dtb) = tb.get(name.as_str()) else { continue };
        if dta != *dtb {
            report.type_changes.push((name.clone(), dta.to_string(), dtb.to_string()));
        }
        let tolerance = tol.of(name);
        let ca = read_columns(path_a, std::slice::from_ref(name))?;
        let cb = read_columns(path_b, std::slice::from_ref(name))?;
        let (ca, cb) = (
            ca.column(name).map_err(|e| IoError::Parquet { path: path_a.into(), message: e.to_string() })?,
            cb.column(name).map_err(|e| IoError::Parquet { path: path_b.into(), message: e.to_string() })?,
        );
        let numeric = is_numeric(dta) && is_numeric(dtb);
        let mut cd = ColumnDiff {
            column: name.clone(),
            dtype_a: dta.to_string(),
            dtype_b: dtb.to_string(),
            numeric,
            tolerance,
            compared: pairs.len(),
            max_abs_delta: 0.0,
            rms_delta: 0.0,
            max_row_key: None,
            exceeding: 0,
        };
        if numeric {
            let (va, vb) = (as_f64(ca), as_f64(cb));
            let mut deltas = if want_rows { Vec::with_capacity(pairs.len()) } else { Vec::new() };
            let (mut sum2, mut finite_n) = (0.0f64, 0usize);
            for (p, &(i, j)) in pairs.iter().enumerate() {
                let (i, j) = (i as usize, j as usize);
                let (x, y) = (va[i], vb[j]);
                // NaN against NaN is equal; NaN against a number is a difference.
                let d = if x.is_nan() && y.is_nan() { 0.0 } else { y - x };
                let ad = if d.is_nan() { f64::INFINITY } else { d.abs() };
                if d.is_finite() {
                    sum2 += d * d;
                    finite_n += 1;
                }
                if ad > cd.max_abs_delta || (cd.max_row_key.is_none() && ad > 0.0) {
                    cd.max_abs_delta = ad;
                    cd.max_row_key = Some(ka.get(i).to_string());
                }
                if ad > tolerance {
                    cd.exceeding += 1;
                }
                if ad > 0.0 {
                    row_changed[p] = true;
                }
                if want_rows {
                    deltas.push(d);
                }
            }
            cd.rms_delta = if finite_n > 0 { (sum2 / finite_n as f64).sqrt() } else { 0.0 };
            if want_rows {
                row_cols.push((format!("{name}_delta"), deltas));
            }
        } else {
            let (va, vb) = (as_text(ca), as_text(cb));
            for (p, &(i, j)) in pairs.iter().enumerate() {
                let (i, j) = (i as usize, j as usize);
                if va[i] != vb[j] {
                    cd.exceeding += 1;
                    row_changed[p] = true;
                    if cd.max_row_key.is_none() {
                        cd.max_row_key = Some(ka.get(i).to_string());
                    }
                }
            }
            cd.max_abs_delta = if cd.exceeding > 0 { f64::INFINITY } else { 0.0 };
        }
        report.columns.push(cd);
    }

    // Provenance.
    let ma: BTreeMap<String, String> = read_parquet_metadata(path_a)?.into_iter().collect();
    let mb: BTreeMap<String, String> = read_parquet_metadata(path_b)?.into_iter().collect();
    let all: std::collections::BTreeSet<&String> = ma.keys().chain(mb.keys()).filter(|k| k.starts_with("lapse.")).collect();
    for k in all {
        let (a, b) = (ma.get(k), mb.get(k));
        if a != b && k != "lapse.run.started_utc" && k != "lapse.run.id" {
            report.provenance.push(ProvenanceChange { key: k.clone(), a: a.cloned(), b: b.cloned(), explains: explains(k), is_result: is_result(k) });
        }
    }

    let rows = want_rows.then(|| {
        let mut keys_out = Vec::new();
        let mut status = Vec::new();
        let sel: Vec<usize> = (0..pairs.len()).filter(|p| row_changed[*p]).collect();
        for &p in &sel {
            keys_out.push(ka.get(pairs[p].0 as usize).to_string());
            status.push("changed");
        }
        let n_changed = sel.len();
        for k in &report.only_a {
            keys_out.push(k.clone());
            status.push("only_a");
        }
        for k in &report.only_b {
            keys_out.push(k.clone());
            status.push("only_b");
        }
        let extra = keys_out.len() - n_changed;
        let columns = row_cols
            .into_iter()
            .map(|(n, d)| {
                let mut v: Vec<f64> = sel.iter().map(|&p| d[p]).collect();
                v.extend(std::iter::repeat_n(f64::NAN, extra));
                (n, v)
            })
            .collect();
        RowDiffs { keys: keys_out, status, columns }
    });
    Ok((report, rows))
}

/// Writes the per-row differences as Parquet.
pub fn write_rows(rows: RowDiffs, key_name: &str, path: &Path) -> Result<(), DiffError> {
    let mut cols = vec![Column::new(key_name.into(), rows.keys), Column::new("status".into(), rows.status.iter().map(|s| s.to_string()).collect::<Vec<_>>())];
    for (n, v) in rows.columns {
        cols.push(Column::new(n.into(), v));
    }
    let mut df = DataFrame::new_infer_height(cols).map_err(|e| IoError::Write { path: path.into(), message: e.to_string() })?;
    write_parquet(&mut df, path, &[("lapse.diff.rows".into(), "per-row differences B − A".into())])?;
    Ok(())
}

fn fmt_delta(x: f64) -> String {
    if x == 0.0 {
        "0".into()
    } else if x.is_infinite() {
        "NaN/≠".into()
    } else {
        format!("{x:.3e}")
    }
}

/// The report as a plain-text table (stdout) or Markdown.
pub fn render(r: &DiffReport, markdown: bool) -> String {
    let mut s = String::new();
    let (h, sep) = if markdown { ("## ", "|") } else { ("", " ") };
    let _ = writeln!(s, "{h}lapse diff: A = {}, B = {}", r.path_a.display(), r.path_b.display());
    if markdown {
        s.push('\n');
    }
    let _ = writeln!(s, "key {}: rows A {}, rows B {}, matched {}, only in A {}, only in B {}", r.keys.join("+"), r.rows_a, r.rows_b, r.matched, r.only_a.len(), r.only_b.len());
    for (label, v) in [("only in A", &r.only_a), ("only in B", &r.only_b)] {
        if !v.is_empty() {
            let shown: Vec<&str> = v.iter().take(10).map(String::as_str).collect();
            let _ = writeln!(s, "  rows {label}: {}{}", shown.join(", "), if v.len() > 10 { format!(" … (+{})", v.len() - 10) } else { String::new() });
        }
    }
    if !r.columns_only_a.is_empty() {
        let _ = writeln!(s, "columns only in A: {}", r.columns_only_a.join(", "));
    }
    if !r.columns_only_b.is_empty() {
        let _ = writeln!(s, "columns only in B: {}", r.columns_only_b.join(", "));
    }
    for (c, a, b) in &r.type_changes {
        let _ = writeln!(s, "type change: {c}: {a} → {b}");
    }
    s.push('\n');
    if markdown {
        let _ = writeln!(s, "| column | compared | max abs Δ | RMS Δ | row of max | tolerance | exceeding |\n|---|---:|---:|---:|---|---:|---:|");
    } else {
        let _ = writeln!(s, "{:<24} {:>9} {:>11} {:>11} {:<24} {:>10} {:>9}", "column", "compared", "max |Δ|", "RMS Δ", "row of max", "tolerance", "exceeding");
    }
    for c in &r.columns {
        let row = c.max_row_key.clone().unwrap_or_else(|| "-".into());
        let rms = if c.numeric { fmt_delta(c.rms_delta) } else { "-".into() };
        if markdown {
            let _ = writeln!(s, "{sep} {} {sep} {} {sep} {} {sep} {} {sep} {} {sep} {:e} {sep} {} {sep}", c.column, c.compared, fmt_delta(c.max_abs_delta), rms, row, c.tolerance, c.exceeding);
        } else {
            let flag = if c.exceeding > 0 { "  ✗" } else { "" };
            let _ = writeln!(s, "{:<24} {:>9} {:>11} {:>11} {:<24} {:>10.3e} {:>9}{flag}", c.column, c.compared, fmt_delta(c.max_abs_delta), rms, row, c.tolerance, c.exceeding);
        }
    }
    s.push('\n');
    if r.provenance.is_empty() {
        let _ = writeln!(s, "provenance: identical (apart from the run's start time and id)");
    } else {
        let _ = writeln!(s, "{h}provenance entries that differ:");
        for p in &r.provenance {
            if p.key == "lapse.pipeline.text" {
                let _ = writeln!(s, "  [explains] lapse.pipeline.text (unified diff, A → B):");
                for l in unified_diff(p.a.as_deref().unwrap_or(""), p.b.as_deref().unwrap_or("")) {
                    let _ = writeln!(s, "    {l}");
                }
                continue;
            }
            let short = |v: &Option<String>| {
                v.as_deref().map(|x| if x.len() > 60 { format!("{}…", &x[..x.char_indices().nth(60).map(|c| c.0).unwrap_or(x.len())]) } else { x.to_string() }).unwrap_or_else(|| "(absent)".into())
            };
            let label = if p.is_result {
                "[result]"
            } else if p.explains {
                "[explains]"
            } else {
                "[does not explain]"
            };
            let _ = writeln!(s, "  {label} {}: {} → {}", p.key, short(&p.a).replace('\n', " "), short(&p.b).replace('\n', " "));
        }
        let explaining = r.provenance.iter().filter(|p| p.explains).count();
        if explaining == 0 && r.columns.iter().any(|c| c.exceeding > 0) {
            let _ = writeln!(s, "No input, constant or pipeline change explains the differences: only version, revision or locations differ.");
        } else {
            let _ = writeln!(s, "{explaining} differing entries can explain numeric differences (inputs, constants, pipeline); version and revision alone cannot.");
        }
    }
    let _ = writeln!(s, "\nresult: {}", if r.within_tolerance() { "WITHIN TOLERANCE" } else { "DIFFERENCES BEYOND TOLERANCE" });
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unified_diff_shows_changed_lines_with_context() {
        let a = "kind = \"pulsar\"\n[dispersion]\nmeasure_pc_cm3 = 41.27\n[output]\npath = \"x\"\n";
        let b = a.replace("41.27", "41.30");
        let d = unified_diff(a, &b);
        assert_eq!(d, ["@@ line 2", " [dispersion]", "-measure_pc_cm3 = 41.27", "+measure_pc_cm3 = 41.30", " [output]"]);
        assert!(unified_diff(a, a).is_empty());
    }

    #[test]
    fn tolerance_patterns_and_unknown_columns() {
        let mut t = Tolerances::default();
        t.add_arg("shapiro_*=1e-12").unwrap();
        t.add_arg("residual_s=1e-9").unwrap();
        assert_eq!((t.of("shapiro_sun_s"), t.of("residual_s"), t.of("roemer_s")), (1e-12, 1e-9, 0.0));
        assert!(t.check_columns(&["shapiro_sun_s", "residual_s"]).is_ok());
        assert!(t.check_columns(&["residual_s"]).unwrap_err().to_string().contains("shapiro_*"));
    }
}
