//! Pipelines: TOML files under `pipelines/` that name the inputs, the
//! corrections and the output of one batch. `kind` selects the job.
//!
//! Paths in a pipeline are relative to the pipeline file's folder. Unknown
//! keys are an error that names them.

pub mod batch;
pub mod preflight;
pub mod pulsar;
mod timescales;
pub mod tracking;

use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};

use polars::prelude::*;

use crate::io::IoError;
use crate::time::TimeError;

pub use pulsar::{LoadedPulsar, load_pulsar, run_pulsar};
pub use timescales::{LoadedTimescales, TimescalesPipeline, load_timescales, run_timescales, timescales_batch};

/// Errors of a pipeline run.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    #[error("cannot read pipeline {path}: {source}")]
    Read { path: PathBuf, source: std::io::Error },
    #[error("pipeline {path}: {message}")]
    Invalid { path: PathBuf, message: String },
    #[error("pipeline {path}: unknown kind '{kind}' (known: {known})")]
    UnknownKind { path: PathBuf, kind: String, known: String },
    #[error(transparent)]
    Io(#[from] IoError),
    #[error("{context}: {source}")]
    Time { context: String, source: TimeError },
    #[error("{path}: duplicate obs_id '{obs_id}' at rows {first} and {second}")]
    DuplicateId { path: PathBuf, obs_id: String, first: usize, second: usize },
}

/// The kinds of pipeline lapse runs.
pub const KINDS: &[&str] = &["timescales", "pulsar", "tracking"];

/// A pipeline file, read and hashed, not yet interpreted.
#[derive(Clone, Debug)]
pub struct PipelineFile {
    pub path: PathBuf,
    pub text: String,
    pub sha256: String,
    pub kind: String,
}

impl PipelineFile {
    /// Reads a pipeline file and its `kind`.
    pub fn read(path: &Path) -> Result<Self, PipelineError> {
        let text = std::fs::read_to_string(path).map_err(|source| PipelineError::Read { path: path.into(), source })?;
        Self::from_text(text, path)
    }

    /// A pipeline from its text; `path` names it and anchors relative paths.
    pub fn from_text(text: String, path: &Path) -> Result<Self, PipelineError> {
        let value: toml::Table = toml::from_str(&text)
            .map_err(|e| PipelineError::Invalid { path: path.into(), message: e.to_string() })?;
        let kind = match value.get("kind") {
            Some(toml::Value::String(k)) => k.clone(),
            Some(_) => return Err(PipelineError::Invalid { path: path.into(), message: "'kind' must be a string".into() }),
            None => return Err(PipelineError::Invalid { path: path.into(), message: format!("no 'kind' (one of: {})", KINDS.join(", ")) }),
        };
        if !KINDS.contains(&kind.as_str()) {
            return Err(PipelineError::UnknownKind { path: path.into(), kind, known: KINDS.join(", ") });
        }
        Ok(Self { path: path.into(), sha256: sha256_hex(text.as_bytes()), text, kind })
    }

    /// Deserialises the pipeline into a kind's configuration, naming unknown keys.
    pub fn parse<T: serde::de::DeserializeOwned>(&self) -> Result<T, PipelineError> {
        toml::from_str(&self.text).map_err(|e| PipelineError::Invalid { path: self.path.clone(), message: e.to_string() })
    }

    /// The pipeline's `[input] path`, resolved against its folder (every
    /// kind has one); `None` when the file has none.
    pub fn input_path(&self) -> Option<PathBuf> {
        let table: toml::Table = toml::from_str(&self.text).ok()?;
        let p = table.get("input")?.get("path")?.as_str()?;
        Some(self.resolve(Path::new(p)))
    }

    /// A path from the pipeline, resolved against the pipeline's folder.
    pub fn resolve(&self, p: &Path) -> PathBuf {
        if p.is_absolute() {
            p.to_path_buf()
        } else {
            self.path.parent().unwrap_or(Path::new(".")).join(p)
        }
    }
}

pub use crate::io::digest::sha256_hex;

/// SHA-256 of a file's contents (remembered from its load when unchanged).
pub fn sha256_file(path: &Path) -> Result<String, IoError> {
    crate::io::digest::file_digest(path).map(|(_, d)| d).map_err(|source| IoError::Open { path: path.into(), source })
}

/// What a run did, for the summary on stdout and in the output metadata.
#[derive(Clone, Debug, Default)]
pub struct RunSummary {
    pub rows_in: usize,
    pub rows_out: usize,
    pub rows_rejected: usize,
    pub rejects_by_reason: BTreeMap<String, usize>,
    pub output: PathBuf,
    pub rejects: PathBuf,
    /// Extra lines of summary, in order.
    pub notes: Vec<String>,
    /// Partitions processed and skipped (up to date).
    pub partitions_done: usize,
    pub partitions_skipped: usize,
    /// Plot files written.
    pub plots: Vec<PathBuf>,
}

/// Options of a run that do not change its results.
#[derive(Clone, Debug)]
pub struct RunOptions {
    /// Read this input (file, folder or glob) instead of the pipeline's
    /// `[input] path` (one partition per job on a cluster).
    pub input: Option<PathBuf>,
    /// Write here instead of the pipeline's `[output] path`.
    pub output: Option<PathBuf>,
    /// Rows per parallel work unit (results do not depend on it).
    pub chunk_rows: usize,
    /// Write residual plots beside the outputs (pulsar and tracking).
    pub plots: bool,
    /// Rows processed so far (for progress displays); added to per chunk.
    pub progress: Option<std::sync::Arc<std::sync::atomic::AtomicUsize>>,
}

impl RunOptions {
    /// Applies `--input` / `--output` to a loaded pipeline's paths.
    pub fn override_paths(&self, input: &mut PathBuf, output: &mut PathBuf) {
        if let Some(i) = &self.input {
            *input = i.clone();
        }
        if let Some(o) = &self.output {
            *output = o.clone();
        }
    }
}

impl Default for RunOptions {
    fn default() -> Self {
        Self { input: None, output: None, chunk_rows: DEFAULT_CHUNK_ROWS, plots: true, progress: None }
    }
}

/// Default rows per parallel work unit.
pub const DEFAULT_CHUNK_ROWS: usize = 4096;

/// Runs a pipeline file of any kind (loading its shared inputs).
pub fn run(path: &Path, opts: &RunOptions) -> Result<RunSummary, PipelineError> {
    run_prepared(preflight::Prepared { file: PipelineFile::read(path)?, loaded: None }, opts)
}

/// Runs a pipeline the preflight already read and loaded
/// ([`preflight::preflight_prepared`]): the shared inputs are not read again.
pub fn run_prepared(prepared: preflight::Prepared, opts: &RunOptions) -> Result<RunSummary, PipelineError> {
    let preflight::Prepared { file, loaded } = prepared;
    if opts.chunk_rows == 0 {
        return Err(PipelineError::Invalid { path: file.path.clone(), message: "chunk size must be at least 1 row".into() });
    }
    match loaded {
        Some(preflight::PreparedInputs::Pulsar(lp)) => pulsar::run_pulsar_loaded(&file, *lp, opts),
        Some(preflight::PreparedInputs::Tracking(lt)) => tracking::run_tracking_loaded(&file, *lt, opts),
        None => match file.kind.as_str() {
            "timescales" => run_timescales(&file, opts),
            "pulsar" => run_pulsar(&file, opts),
            "tracking" => tracking::run_tracking(&file, opts),
            other => Err(PipelineError::UnknownKind { path: file.path.clone(), kind: other.into(), known: KINDS.join(", ") }),
        },
    }
}

/// Path of the rejects table beside an output file: `x.parquet` → `x.rejects.parquet`.
pub fn rejects_path(output: &Path) -> PathBuf {
    let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "output".into());
    output.with_file_name(format!("{stem}.rejects.parquet"))
}

impl RunSummary {
    /// A summary with counts and reject reasons classified.
    pub fn new(rows_in: usize, rows_out: usize, rows_rejected: usize, output: &Path, reasons: &[String]) -> Self {
        let mut s = RunSummary { rows_in, rows_out, rows_rejected, output: output.into(), rejects: rejects_path(output), ..Default::default() };
        for r in reasons {
            *s.rejects_by_reason.entry(reason_class(r)).or_default() += 1;
        }
        s
    }
}

/// The class of a reject reason (its text up to the first ':').
pub fn reason_class(reason: &str) -> String {
    reason.split(':').next().unwrap_or(reason).trim().to_string()
}

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
            return Err(PipelineError::DuplicateId { path: path.into(), obs_id: id.into(), first, second: row });
        }
    }
    Ok(())
}

/// Splits an input table into the output table (obs_id, computed columns,
/// then the input's other columns except `drop`) and the rejects table (the
/// input columns plus `reason`). `ok[i]` says whether row i was computed;
/// `computed` holds the accepted rows only and `reasons` the rejected ones, in
/// input order.
pub fn assemble(df: &DataFrame, path: &Path, ok: &[bool], reasons: &[String], computed: Vec<Column>, drop: &[&str]) -> Result<(DataFrame, DataFrame), PipelineError> {
    let perr = |e: PolarsError| PipelineError::Invalid { path: path.into(), message: e.to_string() };
    let (kept, mut rejects) = if ok.iter().all(|b| *b) {
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
    rejects.with_column(Column::new("reason".into(), reasons.to_vec())).map_err(perr)?;
    // Input columns may arrive in several chunks (row groups of a slice);
    // writers need the columns of a frame chunked alike (no-op otherwise).
    out.rechunk_mut();
    rejects.rechunk_mut();
    Ok((out, rejects))
}

/// Key-value provenance written into every output file (keys `lapse.*`).
#[derive(Clone, Debug)]
pub struct Provenance {
    entries: Vec<(String, String)>,
    roles: BTreeMap<String, usize>,
}

/// Source revision (git commit) lapse was built from.
pub const SOURCE_REVISION: &str = env!("LAPSE_SOURCE_REVISION");

/// The current wall-clock time as ISO 8601 UTC (seconds).
pub fn now_utc_iso() -> String {
    let secs = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_secs() as i64).unwrap_or(0);
    let (days, sod) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let (y, m, d) = crate::time::calendar::ymd_from_mjd(40_587 + days);
    format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z", sod / 3600, (sod / 60) % 60, sod % 60)
}

impl Provenance {
    /// Starts the record of a run of `file`.
    pub fn start(file: &PipelineFile) -> Self {
        let mut p = Self { entries: Vec::new(), roles: BTreeMap::new() };
        p.set("version", crate::VERSION);
        p.set("source_revision", SOURCE_REVISION);
        p.set("run.started_utc", &now_utc_iso());
        p.set("pipeline.path", &file.path.display().to_string());
        p.set("pipeline.kind", &file.kind);
        p.set("pipeline.sha256", &file.sha256);
        p.set("pipeline.text", &file.text);
        p
    }

    /// Sets `lapse.<key>`.
    pub fn set(&mut self, key: &str, value: &str) {
        self.entries.push((format!("lapse.{key}"), value.to_string()));
    }

    /// Records an input file: path, size, SHA-256 and what it covers,
    /// numbered per role.
    pub fn add_input(&mut self, role: &str, path: &Path, coverage: &str) -> Result<(), IoError> {
        let n = self.roles.entry(role.to_string()).or_default();
        let key = format!("input.{role}.{n}");
        *n += 1;
        let (len, digest) = crate::io::digest::file_digest(path).map_err(|source| IoError::Open { path: path.into(), source })?;
        self.set(&format!("{key}.path"), &path.display().to_string());
        self.set(&format!("{key}.bytes"), &len.to_string());
        self.set(&format!("{key}.sha256"), &digest);
        if !coverage.is_empty() {
            self.set(&format!("{key}.coverage"), coverage);
        }
        Ok(())
    }

    /// Records the row counts.
    pub fn set_rows(&mut self, rows_in: usize, rows_out: usize, rows_rejected: usize) {
        self.set("rows.in", &rows_in.to_string());
        self.set("rows.out", &rows_out.to_string());
        self.set("rows.rejected", &rows_rejected.to_string());
    }

    /// The key-value pairs, in the order they were set.
    pub fn finish(self) -> Vec<(String, String)> {
        self.entries
    }
}

/// Coverage text of a leap-second table.
pub fn leap_coverage(t: &crate::time::LeapSecondTable) -> String {
    let d = |m: i64| {
        let (y, mo, da) = crate::time::calendar::ymd_from_mjd(m);
        format!("{y:04}-{mo:02}-{da:02}")
    };
    format!("{} steps, last {}; expires {}; UTC valid before {}", t.steps().len(), d(t.steps().last().map(|s| s.mjd).unwrap_or(0)), d(t.expires_mjd()), d(t.window_mjd()))
}

/// Coverage text of an SPK kernel (per target, TDB).
pub fn kernel_coverage(k: &crate::ephemeris::SpkKernel) -> String {
    let lo = k.segments.iter().map(|s| s.start_s).fold(f64::INFINITY, f64::min);
    let hi = k.segments.iter().map(|s| s.end_s).fold(f64::NEG_INFINITY, f64::max);
    let mjd = |s: f64| 51_544.5 + s / 86_400.0;
    let mut targets: Vec<i32> = k.segments.iter().map(|s| s.target).collect();
    targets.sort_unstable();
    targets.dedup();
    format!("{} segments, targets {:?}, TDB MJD {:.3} … {:.3}", k.segments.len(), targets, mjd(lo), mjd(hi))
}

/// Coverage text of an EOP table.
pub fn eop_coverage(t: &crate::earth::EopTable) -> String {
    let (a, b) = t.span_mjd();
    match t.first_predicted_mjd() {
        Some(p) => format!("UTC MJD {a} … {b}; predicted from MJD {p}"),
        None => format!("UTC MJD {a} … {b}; no predictions"),
    }
}

/// The input files of a pipeline: one Parquet file, every `*.parquet` in a
/// folder, or a glob (`*` and `?` in the file name part). Returns the files
/// (sorted) and whether the input is partitioned (folder or glob).
pub fn resolve_inputs(p: &Path) -> Result<(Vec<PathBuf>, bool), PipelineError> {
    let name = p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let is_glob = name.contains('*') || name.contains('?');
    if !is_glob && !p.is_dir() {
        return Ok((vec![p.to_path_buf()], false));
    }
    let (dir, pattern) = if is_glob { (p.parent().unwrap_or(Path::new(".")).to_path_buf(), name) } else { (p.to_path_buf(), "*.parquet".to_string()) };
    let entries = std::fs::read_dir(&dir).map_err(|source| PipelineError::Read { path: dir.clone(), source })?;
    let mut files: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|f| f.is_file() && f.file_name().map(|n| glob_match(&pattern, &n.to_string_lossy())).unwrap_or(false))
        .filter(|f| !f.to_string_lossy().ends_with(".partial"))
        .collect();
    files.sort();
    if files.is_empty() {
        return Err(PipelineError::Invalid { path: p.into(), message: format!("no input files match {}", p.display()) });
    }
    Ok((files, true))
}

/// Shell-style match of `*` and `?` within one file name.
fn glob_match(pattern: &str, name: &str) -> bool {
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

/// Output file of a partition: `<output folder>/<input stem>.parquet`.
pub fn partition_output(out_dir: &Path, input: &Path) -> PathBuf {
    let stem = input.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "part".into());
    out_dir.join(format!("{stem}.parquet"))
}

/// True when `output` and its rejects table exist and the output records
/// the same pipeline and input hashes as `expected` (a run's provenance).
pub fn up_to_date(output: &Path, expected: &Provenance) -> bool {
    if !output.exists() || !rejects_path(output).exists() {
        return false;
    }
    let Ok(md) = crate::io::read_parquet_metadata(output) else { return false };
    let md: BTreeMap<String, String> = md.into_iter().collect();
    expected.entries.iter().filter(|(k, _)| k == "lapse.pipeline.sha256" || k.ends_with(".sha256")).all(|(k, v)| md.get(k) == Some(v))
}

/// The temporary files a run writes on its way to `output` (and its
/// rejects table): the data is written to these and renamed into place only
/// when complete.
pub fn partial_paths(output: &Path) -> [PathBuf; 4] {
    [
        crate::io::partial_path(output),
        crate::io::partial_path(&rejects_path(output)),
        output.with_extension("stream-out.partial"),
        output.with_extension("stream-rejects.partial"),
    ]
}

/// Removes the temporary files a killed run left on its way to `output`.
///
/// Only this output's own partial files: other processes may be writing
/// other outputs in the same folder at the same time (one cluster task per
/// partition writes beside the others), and their partial files are theirs.
pub fn remove_stale_partials(output: &Path) {
    for p in partial_paths(output) {
        if p.exists() {
            tracing::warn!(path = %p.display(), "removing a partial file left by an interrupted run");
            let _ = std::fs::remove_file(&p);
        }
    }
}

/// Runs `work` on every partition of a pipeline's input, skipping those
/// whose outputs are up to date, and merges the summaries.
///
/// `base` holds the provenance shared by all partitions (pipeline, shared
/// inputs); `work` receives the input, the output path and the partition's
/// provenance (base plus the observations file).
pub fn for_each_partition<F>(input: &Path, output: &Path, base: &Provenance, mut work: F) -> Result<RunSummary, PipelineError>
where
    F: FnMut(&Path, &Path, Provenance) -> Result<RunSummary, PipelineError>,
{
    let (inputs, partitioned) = resolve_inputs(input)?;
    if partitioned && output.extension().is_some_and(|e| e == "parquet") {
        return Err(PipelineError::Invalid { path: output.into(), message: "a partitioned input needs an output folder, not a .parquet file".into() });
    }
    let out_dir = if partitioned { output.to_path_buf() } else { output.parent().map(Path::to_path_buf).unwrap_or_default() };
    if !out_dir.as_os_str().is_empty() {
        std::fs::create_dir_all(&out_dir).map_err(|source| PipelineError::Read { path: out_dir.clone(), source })?;
    }
    let mut total = RunSummary { output: output.into(), rejects: rejects_path(output), ..Default::default() };
    for inp in &inputs {
        let out = if partitioned { partition_output(output, inp) } else { output.to_path_buf() };
        remove_stale_partials(&out);
        let mut prov = base.clone();
        let obs_sha = sha256_file(inp)?;
        prov.set("input.observations.0.path", &inp.display().to_string());
        prov.set("input.observations.0.sha256", &obs_sha);
        if partitioned && up_to_date(&out, &prov) {
            total.notes.push(format!("partition {}: up to date, skipped", inp.display()));
            total.partitions_skipped += 1;
            continue;
        }
        let s = work(inp, &out, prov)?;
        total.rows_in += s.rows_in;
        total.rows_out += s.rows_out;
        total.rows_rejected += s.rows_rejected;
        for (k, v) in s.rejects_by_reason {
            *total.rejects_by_reason.entry(k).or_default() += v;
        }
        if partitioned {
            total.notes.push(format!("partition {} → {}: {} rows, {} rejected", inp.display(), out.display(), s.rows_in, s.rows_rejected));
        }
        total.notes.extend(s.notes);
        total.partitions_done += 1;
        total.plots.extend(s.plots);
        if !partitioned {
            total.output = s.output;
            total.rejects = s.rejects;
        }
    }
    Ok(total)
}

/// Total rows of a pipeline's input (all partitions), from Parquet metadata;
/// `None` when the pipeline or its input cannot be read.
pub fn input_rows(pipeline: &Path, input: Option<&Path>) -> Option<usize> {
    let path = match input {
        Some(i) => i.to_path_buf(),
        None => PipelineFile::read(pipeline).ok()?.input_path()?,
    };
    let (files, _) = resolve_inputs(&path).ok()?;
    let mut n = 0;
    for f in files {
        n += parquet_rows(&f).ok()?;
    }
    Some(n)
}

/// Maps `f` over `rows` in parallel over fixed chunks of `chunk_rows`,
/// keeping input order (so results do not depend on the thread count), and
/// adds each finished chunk's size to `progress`.
pub fn par_map_chunks<T: Sync, R: Send>(rows: &[T], chunk_rows: usize, progress: Option<&std::sync::atomic::AtomicUsize>, f: impl Fn(&T) -> R + Sync) -> Vec<R> {
    use rayon::prelude::*;
    let k = chunk_rows.max(1);
    // Each chunk writes its results straight into its place in the output
    // (no per-chunk vectors gathered and copied afterwards).
    let mut out: Vec<R> = Vec::with_capacity(rows.len());
    rows.par_chunks(k).zip(out.spare_capacity_mut()[..rows.len()].par_chunks_mut(k)).for_each(|(c, slots)| {
        for (x, slot) in c.iter().zip(slots.iter_mut()) {
            slot.write(f(x));
        }
        if let Some(p) = progress {
            p.fetch_add(c.len(), std::sync::atomic::Ordering::Relaxed);
        }
    });
    // SAFETY: the zip above pairs every row with its own slot (equal chunk
    // sizes over equal lengths), and for_each returns only after every chunk
    // was written; a panic in `f` propagates before this point (the written
    // results then leak, which is safe).
    unsafe { out.set_len(rows.len()) };
    out
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
            return Err(PipelineError::Invalid { path: path.into(), message: format!("more than {} rows in one file: split it into partitions", u32::MAX) });
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
                    return Err(PipelineError::DuplicateId { path: path.into(), obs_id: a, first: w[0].1 as usize, second: w[1].1 as usize });
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
}
