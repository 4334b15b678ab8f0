//! Tables of observations: Parquet slices and row counts, the `obs_id`
//! uniqueness checks, and the assembly of output and rejects tables
//! (ids, computed columns, pass-through columns, `reason_code` and `reason`).

use std::collections::HashMap;
use std::path::Path;

use polars::prelude::*;

use super::PipelineError;
use crate::io::IoError;
use crate::reject::Reject;

/// Fails on a null or duplicate `obs_id`, naming the rows.
pub fn check_unique_ids<S: AsRef<str>>(ids: &[Option<S>], path: &Path) -> Result<(), PipelineError> {
    // foldhash: ≈ 4× faster than the default SipHash on short ids, and the
    // check only needs equality (no hash-flooding concern: a batch is trusted data).
    let mut seen: HashMap<&str, usize, foldhash::fast::FixedState> = HashMap::with_capacity_and_hasher(ids.len(), Default::default());
    for (row, id) in ids.iter().enumerate() {
        let Some(id) = id.as_ref().map(AsRef::as_ref) else {
            return Err(IoError::Value { path: path.into(), column: "obs_id".into(), row, message: "null obs_id".into() }.into());
        };
        if let Some(first) = seen.insert(id, row) {
            return Err(PipelineError::DuplicateId { path: path.into(), obs_id: clip(id), first, second: row });
        }
    }
    Ok(())
}

/// Fails on an input column whose name an output column of the kind (or
/// the rejects table's `reason_code` / `reason`) takes.
pub fn check_input_names(df: &DataFrame, computed: &[String], path: &Path) -> Result<(), PipelineError> {
    for c in df.get_column_names() {
        let c = c.as_str();
        if c != "obs_id" && (computed.iter().any(|o| o == c) || c == "reason_code" || c == "reason") {
            return Err(PipelineError::Input { path: path.into(), message: format!("input column '{c}' has the name of a column lapse writes: rename it (it would be overwritten)") });
        }
    }
    Ok(())
}

/// Truncates a text for messages (ids of any length may come from outside).
pub fn clip(s: &str) -> String {
    const MAX_CHARS: usize = 80;
    match s.char_indices().nth(MAX_CHARS) {
        Some((i, _)) => format!("{}… ({} bytes)", &s[..i], s.len()),
        None => s.to_string(),
    }
}

/// The `obs_id` column of a frame (borrowed), type-checked.
pub fn ids<'a>(df: &'a DataFrame, path: &Path) -> Result<Vec<Option<&'a str>>, PipelineError> {
    Ok(crate::io::Columns { df, path }.str_ref("obs_id")?)
}

/// Splits an input table into the output table (obs_id, computed columns,
/// then the input's other columns except `drop`) and the rejects table (the
/// input columns plus `reason_code` and `reason`). `ok[i]` says whether row
/// i was computed; `computed` holds the accepted rows only and `rejects` the
/// rejected ones' reasons, in input order.
pub fn assemble(df: &DataFrame, path: &Path, ok: &[bool], rejects: &[Reject], computed: Vec<Column>, drop: &[&str]) -> Result<(DataFrame, DataFrame), PipelineError> {
    let perr = |e: PolarsError| PipelineError::frame(path, e);
    let (kept, mut rej) = if ok.iter().all(|b| *b) {
        // Nothing rejected (the usual case): no copy of the input.
        (df.clone(), df.head(Some(0)))
    } else {
        let ok_mask: BooleanChunked = ok.iter().copied().collect();
        let bad_mask: BooleanChunked = ok.iter().map(|b| !b).collect();
        (df.filter(&ok_mask).map_err(perr)?, df.filter(&bad_mask).map_err(perr)?)
    };
    let mut all = vec![kept.column("obs_id").map_err(perr)?.clone()];
    all.extend(computed);
    all.extend(kept.columns().iter().filter(|c| c.name().as_str() != "obs_id" && !drop.contains(&c.name().as_str())).cloned());
    let mut out = DataFrame::new_infer_height(all).map_err(perr)?;
    rej.with_column(Column::new("reason_code".into(), rejects.iter().map(|r| r.code.as_str()).collect::<Vec<&str>>())).map_err(perr)?;
    rej.with_column(Column::new("reason".into(), rejects.iter().map(|r| r.message.as_str()).collect::<Vec<&str>>())).map_err(perr)?;
    // Input columns may arrive in several chunks (row groups of a slice);
    // writers need the columns of a frame chunked alike (no-op otherwise).
    out.rechunk_mut();
    rej.rechunk_mut();
    Ok((out, rej))
}

/// Duplicate-id detection over a table read in slices, in bounded memory:
/// (64-bit hash, row) pairs — 12 bytes a row — sorted once at the end; equal
/// hashes are confirmed on the strings, re-read from the file.
pub struct IdChecker {
    pairs: Vec<(u64, u32)>,
    hasher: foldhash::fast::FixedState,
}

impl IdChecker {
    pub fn new(capacity: usize) -> Self {
        Self { pairs: Vec::with_capacity(capacity), hasher: Default::default() }
    }

    /// Records the ids of rows `first_row ..` (null ids are refused at once;
    /// rows are kept as u32, so a file beyond 2³² − 1 rows is refused too).
    pub fn check<S: AsRef<str>>(&mut self, ids: &[Option<S>], first_row: usize, path: &Path) -> Result<(), PipelineError> {
        use std::hash::BuildHasher;
        if first_row + ids.len() > u32::MAX as usize {
            return Err(PipelineError::Input { path: path.into(), message: format!("more than {} rows in one file: split it into partitions", u32::MAX) });
        }
        for (k, id) in ids.iter().enumerate() {
            let row = first_row + k;
            let Some(id) = id.as_ref().map(AsRef::as_ref) else {
                return Err(IoError::Value { path: path.into(), column: "obs_id".into(), row, message: "null obs_id".into() }.into());
            };
            self.pairs.push((self.hasher.hash_one(id), row as u32));
        }
        Ok(())
    }

    /// Sorts the hashes and reports the first duplicate id, if any.
    pub fn finish(mut self, path: &Path) -> Result<(), PipelineError> {
        self.pairs.sort_unstable();
        for w in self.pairs.windows(2) {
            if w[0].0 == w[1].0 {
                let id = |row: u32| -> Result<String, PipelineError> {
                    let df = read_parquet_slice(path, row as usize, 1, Some(vec!["obs_id".into()]))?;
                    Ok(crate::io::Columns { df: &df, path }.str("obs_id")?.pop().flatten().unwrap_or_default())
                };
                let (a, b) = (id(w[0].1)?, id(w[1].1)?);
                if a == b {
                    return Err(PipelineError::DuplicateId { path: path.into(), obs_id: clip(&a), first: w[0].1 as usize, second: w[1].1 as usize });
                }
            }
        }
        Ok(())
    }
}

/// Rows `offset .. offset + len` of a Parquet file (only `cols`, if given).
pub fn read_parquet_slice(path: &Path, offset: usize, len: usize, cols: Option<Vec<String>>) -> Result<DataFrame, PipelineError> {
    let f = std::fs::File::open(path).map_err(|source| IoError::Open { path: path.into(), source })?;
    match crate::io::guarded(|| ParquetReader::new(f).with_slice(Some((offset, len))).with_columns(cols).finish()) {
        Some(Ok(df)) => Ok(df),
        Some(Err(e)) => Err(IoError::Parquet { path: path.into(), message: e.to_string() }.into()),
        None => Err(IoError::Parquet { path: path.into(), message: "the file is corrupt (reader failed)".into() }.into()),
    }
}

/// Number of rows of a Parquet file from its metadata.
pub fn parquet_rows(path: &Path) -> Result<usize, PipelineError> {
    let f = std::fs::File::open(path).map_err(|source| IoError::Open { path: path.into(), source })?;
    match crate::io::guarded(|| ParquetReader::new(f).num_rows()) {
        Some(Ok(n)) => Ok(n),
        Some(Err(e)) => Err(IoError::Parquet { path: path.into(), message: e.to_string() }.into()),
        None => Err(IoError::Parquet { path: path.into(), message: "the file is corrupt (reader failed)".into() }.into()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn id_checker_refuses_rows_beyond_u32_instead_of_wrapping() {
        // Row numbers are stored as u32: past 2³² − 1 they would wrap and the
        // duplicate confirmation would re-read the wrong rows.
        let p = Path::new("big.parquet");
        let mut ids = IdChecker::new(2);
        assert!(ids.check(&[Some("a")], u32::MAX as usize - 1, p).is_ok());
        let e = ids.check(&[Some("b")], u32::MAX as usize, p).unwrap_err().to_string();
        assert!(e.contains("split it into partitions"), "{e}");
    }

    #[test]
    fn rejects_carry_code_and_reason() {
        let df = df!("obs_id" => ["a", "b"], "x" => [1.0, 2.0]).unwrap();
        let r = [Reject::new(crate::reject::RejectCode::InvalidValue, "x invalid: 2")];
        let (out, rej) = assemble(&df, Path::new("t"), &[true, false], &r, vec![Column::new("y".into(), [10.0])], &[]).unwrap();
        assert_eq!(out.get_column_names(), ["obs_id", "y", "x"]);
        assert_eq!(rej.column("reason_code").unwrap().str().unwrap().get(0), Some("invalid_value"));
        assert_eq!(rej.column("reason").unwrap().str().unwrap().get(0), Some("x invalid: 2"));
    }
}
