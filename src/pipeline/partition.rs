//! Partitions: the input files of a run (one file, a folder, a glob), their
//! output paths, temporary files, and the up-to-date check that makes runs
//! resumable.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::{PipelineError, PipelineFile, Provenance, RunSummary};

/// Path of the rejects table beside an output file: `x.parquet` → `x.rejects.parquet`.
pub fn rejects_path(output: &Path) -> PathBuf {
    let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "output".into());
    output.with_file_name(format!("{stem}.rejects.parquet"))
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
    let entries = std::fs::read_dir(&dir).map_err(|source| PipelineError::Folder { path: dir.clone(), source })?;
    let mut files: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|f| f.is_file() && f.file_name().map(|n| crate::io::glob_match(&pattern, &n.to_string_lossy())).unwrap_or(false))
        .filter(|f| !super::commit::is_partial(f))
        .collect();
    files.sort();
    if files.is_empty() {
        return Err(PipelineError::Input { path: p.into(), message: format!("no input files match {}", p.display()) });
    }
    Ok((files, true))
}

/// Output file of a partition: `<output folder>/<input stem>.parquet`.
pub fn partition_output(out_dir: &Path, input: &Path) -> PathBuf {
    let stem = input.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "part".into());
    out_dir.join(format!("{stem}.parquet"))
}

/// True when `output`, its rejects table and its plots exist, all from one
/// run (same run id; each plot's SHA-256 as the output records it), and the
/// output records the same pipeline and input hashes as `expected` (a
/// run's provenance).
pub fn up_to_date(output: &Path, expected: &Provenance) -> bool {
    let rejects = rejects_path(output);
    if !output.exists() || !rejects.exists() {
        return false;
    }
    let (Ok(md), Ok(rmd)) = (crate::io::read_parquet_metadata(output), crate::io::read_parquet_metadata(&rejects)) else { return false };
    let md: BTreeMap<String, String> = md.into_iter().collect();
    let rmd: BTreeMap<String, String> = rmd.into_iter().collect();
    let run = md.get("lapse.run.id");
    if run.is_none() || rmd.get("lapse.run.id") != run {
        return false;
    }
    let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    let plots_intact = md
        .iter()
        .filter_map(|(k, v)| Some((k.strip_prefix("lapse.plot.")?.strip_suffix(".sha256")?, v)))
        .all(|(name, sha)| std::fs::read(output.with_file_name(format!("{stem}.{name}"))).is_ok_and(|b| crate::io::digest::sha256_hex(&b) == *sha));
    plots_intact && expected.identity().all(|(k, v)| md.get(k) == Some(v))
}

/// Example names of temporary files a killed run would leave for `output`
/// (its output and rejects tables), as [`super::commit::Commit`] names them.
pub fn partial_paths(output: &Path) -> [PathBuf; 2] {
    let name = |p: &Path| p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let rej = rejects_path(output);
    [output.with_file_name(format!(".{}.1-killed.partial.parquet", name(output))), rej.with_file_name(format!(".{}.1-killed.partial.parquet", name(&rej)))]
}

/// Runs `work` on every partition of a pipeline's input, skipping those
/// whose outputs are up to date, and merges the summaries.
///
/// `base` holds the provenance shared by all partitions (pipeline, shared
/// inputs); `work` receives the input, the output path and the partition's
/// provenance (base plus the observations file). `force` redoes partitions
/// that are up to date.
pub fn for_each_partition<F>(input: &Path, output: &Path, base: &Provenance, force: bool, mut work: F) -> Result<RunSummary, PipelineError>
where
    F: FnMut(&Path, &Path, Provenance) -> Result<RunSummary, PipelineError>,
{
    let (inputs, partitioned) = resolve_inputs(input)?;
    if partitioned && output.extension().is_some_and(|e| e == "parquet") {
        return Err(PipelineError::Input { path: output.into(), message: "a partitioned input needs an output folder, not a .parquet file".into() });
    }
    let out_dir = if partitioned { output.to_path_buf() } else { output.parent().map(Path::to_path_buf).unwrap_or_default() };
    if !out_dir.as_os_str().is_empty() {
        std::fs::create_dir_all(&out_dir).map_err(|source| PipelineError::Folder { path: out_dir.clone(), source })?;
    }
    // Refused before anything is read: an output that would overwrite an
    // input, an output folder that is the input folder, and two partitions
    // with one output name.
    let outs: Vec<PathBuf> = inputs.iter().map(|inp| if partitioned { partition_output(output, inp) } else { output.to_path_buf() }).collect();
    if partitioned && inputs.first().and_then(|f| f.parent()).is_some_and(|d| super::commit::same_file(d, output)) {
        return Err(PipelineError::Input { path: output.into(), message: "the output folder is the input folder: outputs would be read as inputs by the next run; write elsewhere".into() });
    }
    for (inp, out) in inputs.iter().zip(&outs) {
        for o in [out.clone(), rejects_path(out)] {
            if let Some(victim) = inputs.iter().find(|i| super::commit::same_file(i, &o)) {
                return Err(PipelineError::Input { path: o, message: format!("this output would overwrite the input {} (from {}): write elsewhere", victim.display(), inp.display()) });
            }
        }
    }
    let mut seen: BTreeMap<&Path, &Path> = BTreeMap::new();
    for (inp, out) in inputs.iter().zip(&outs) {
        if let Some(first) = seen.insert(out, inp) {
            return Err(PipelineError::Input { path: inp.clone(), message: format!("has the same stem as {}: both would write {}; rename one", first.display(), out.display()) });
        }
    }
    let mut total = RunSummary { output: output.into(), rejects: rejects_path(output), ..Default::default() };
    for (inp, out) in inputs.iter().zip(outs) {
        let mut prov = base.clone();
        let obs_sha = super::sha256_file(inp)?;
        prov.set("input.observations.0.path", &inp.display().to_string());
        prov.set("input.observations.0.canonical_path", &super::provenance::canonical(inp));
        prov.set("input.observations.0.sha256", &obs_sha);
        if partitioned && !force && up_to_date(&out, &prov) {
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
        total.sets.extend(s.sets);
        total.flagged.extend(s.flagged);
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
        n += super::table::parquet_rows(&f).ok()?;
    }
    Some(n)
}
