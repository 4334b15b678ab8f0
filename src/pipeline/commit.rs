//! Safe writes of one partition's result: the output table, its rejects
//! table and its plots are written under temporary names, synced, and
//! renamed into place together (the output last), under an advisory lock on
//! the output so that two runs never write the same files.
//!
//! Guarantees (README, "Nightly operations"):
//! - no reader ever sees a partly written file: every file is complete
//!   before its rename, and renames within a folder are atomic;
//! - after a crash or power loss, a completed partition has all its files
//!   on disk (each file and the folder are synced before and after the
//!   renames); an interrupted one is redone by the next run, because the
//!   up-to-date check requires the rejects table and every plot to belong
//!   to the output's run (same run id, plot SHA-256 recorded in the output);
//! - a second run writing the same output fails at once, naming the lock.

use std::fs::File;
use std::path::{Path, PathBuf};

use super::PipelineError;

/// Temporary name of a file being written as `final_path` by run `tag`:
/// hidden, in the same folder, keeping the extension (writers choose the
/// format by it): `.x.png.<tag>.partial.png`.
fn staged_name(final_path: &Path, tag: &str) -> PathBuf {
    let name = final_path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let ext = final_path.extension().map(|e| e.to_string_lossy().into_owned()).unwrap_or_default();
    final_path.with_file_name(format!(".{name}.{tag}.partial.{ext}"))
}

/// True for a temporary file of a run (never an input).
pub fn is_partial(path: &Path) -> bool {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    name.ends_with(".partial") || (name.starts_with('.') && name.contains(".partial."))
}

/// A run id: unique per process and call (pid, clock, counter, hashed).
pub fn new_run_id() -> String {
    use std::hash::BuildHasher;
    use std::sync::atomic::{AtomicU64, Ordering};
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let nanos = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_nanos()).unwrap_or(0);
    let h = foldhash::fast::RandomState::default().hash_one((std::process::id(), nanos, COUNTER.fetch_add(1, Ordering::Relaxed)));
    format!("{}-{h:016x}", std::process::id())
}

fn sync_dir(dir: &Path) {
    // Directories are synced on Unix; elsewhere opening one may fail, which
    // only loses the power-loss guarantee documented for Unix.
    if let Ok(d) = File::open(if dir.as_os_str().is_empty() { Path::new(".") } else { dir }) {
        let _ = d.sync_all();
    }
}

/// The files of one partition's result, staged and then committed together.
pub struct Commit {
    output: PathBuf,
    run_id: String,
    staged: Vec<(PathBuf, PathBuf)>,
    _lock: File,
}

impl Commit {
    /// Starts writing `output`: checks the path, takes the lock
    /// `.<output name>.lock` beside it (kept; an advisory lock held until
    /// this commit is dropped) and removes the temporary files a killed run
    /// left for this output (only this output's: other runs may be writing
    /// their own outputs in the same folder).
    pub fn begin(output: &Path) -> Result<Self, PipelineError> {
        if output.is_dir() {
            return Err(PipelineError::Input { path: output.into(), message: "the output path is a folder: give a .parquet file (or a partitioned input, whose output is a folder)".into() });
        }
        let dir = output.parent().map(Path::to_path_buf).unwrap_or_default();
        if !dir.as_os_str().is_empty() {
            std::fs::create_dir_all(&dir).map_err(|source| PipelineError::Folder { path: dir.clone(), source })?;
        }
        let name = output.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        let lock_path = output.with_file_name(format!(".{name}.lock"));
        let lock = File::options().create(true).truncate(false).write(true).open(&lock_path).map_err(|source| PipelineError::Folder { path: lock_path.clone(), source })?;
        match lock.try_lock() {
            Ok(()) => {}
            Err(std::fs::TryLockError::WouldBlock) => {
                return Err(PipelineError::Input {
                    path: output.into(),
                    message: format!("another lapse run is writing this output (lock {} is held); wait for it or write elsewhere", lock_path.display()),
                });
            }
            Err(std::fs::TryLockError::Error(source)) => return Err(PipelineError::Folder { path: lock_path, source }),
        }
        let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
        if let Ok(entries) = std::fs::read_dir(if dir.as_os_str().is_empty() { Path::new(".") } else { &dir }) {
            for e in entries.flatten() {
                let n = e.file_name().to_string_lossy().into_owned();
                let ours = n.starts_with(&format!(".{stem}.")) && n.contains(".partial.");
                let old_style = n.ends_with(".partial") && n.starts_with(&format!("{stem}."));
                if ours || old_style {
                    tracing::warn!(path = %e.path().display(), "removing a partial file left by an interrupted run");
                    let _ = std::fs::remove_file(e.path());
                }
            }
        }
        Ok(Self { output: output.into(), run_id: new_run_id(), staged: Vec::new(), _lock: lock })
    }

    /// This run's id (recorded in every file of the commit).
    pub fn run_id(&self) -> &str {
        &self.run_id
    }

    /// The temporary path to write `final_path` under; renamed at [`Self::commit`].
    pub fn stage(&mut self, final_path: &Path) -> PathBuf {
        let tmp = staged_name(final_path, &self.run_id);
        self.staged.push((tmp.clone(), final_path.into()));
        tmp
    }

    /// A scratch file of this run for `final_path` (not committed; the
    /// caller removes it; a killed run's scratch files are removed by the
    /// next [`Self::begin`] on the same output).
    pub fn scratch(&self, final_path: &Path) -> PathBuf {
        staged_name(final_path, &format!("{}-scratch", self.run_id))
    }

    /// Syncs every staged file, renames them into place — the output last —
    /// and syncs the folder.
    pub fn commit(mut self) -> Result<(), PipelineError> {
        let werr = |p: &Path, e: std::io::Error| PipelineError::from(crate::io::IoError::Write { path: p.into(), message: e.to_string() });
        for (tmp, _) in &self.staged {
            File::open(tmp).and_then(|f| f.sync_all()).map_err(|e| werr(tmp, e))?;
        }
        let dir = self.output.parent().map(Path::to_path_buf).unwrap_or_default();
        sync_dir(&dir);
        // The output last: an output file marks a complete partition.
        self.staged.sort_by_key(|(_, fin)| *fin == self.output);
        for (tmp, fin) in &self.staged {
            std::fs::rename(tmp, fin).map_err(|e| werr(fin, e))?;
        }
        // Committed: nothing staged is left for Drop to remove.
        self.staged.clear();
        sync_dir(&dir);
        Ok(())
    }
}

impl Drop for Commit {
    fn drop(&mut self) {
        // Not committed (an error): remove what was staged.
        for (tmp, _) in &self.staged {
            let _ = std::fs::remove_file(tmp);
        }
    }
}

/// True when `a` and `b` name the same existing file (same device and
/// inode, or the same canonical path).
pub fn same_file(a: &Path, b: &Path) -> bool {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        if let (Ok(x), Ok(y)) = (std::fs::metadata(a), std::fs::metadata(b)) {
            return x.dev() == y.dev() && x.ino() == y.ino();
        }
    }
    matches!((std::fs::canonicalize(a), std::fs::canonicalize(b)), (Ok(x), Ok(y)) if x == y)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn staged_names_keep_the_extension_and_are_recognised() {
        let s = staged_name(Path::new("/o/x.residuals.png"), "12-ab");
        assert_eq!(s, Path::new("/o/.x.residuals.png.12-ab.partial.png"));
        assert!(is_partial(&s) && is_partial(Path::new("x.parquet.partial")) && !is_partial(Path::new("x.parquet")));
    }

    #[test]
    fn a_second_commit_on_the_same_output_fails_at_once() {
        let d = std::env::temp_dir().join(format!("lapse-commit-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        let out = d.join("o.parquet");
        let mut a = Commit::begin(&out).unwrap();
        let e = Commit::begin(&out).err().unwrap().to_string();
        assert!(e.contains("another lapse run"), "{e}");
        let tmp = a.stage(&out);
        std::fs::write(&tmp, b"x").unwrap();
        a.commit().unwrap();
        assert_eq!(std::fs::read(&out).unwrap(), b"x");
        assert!(Commit::begin(&out).is_ok(), "the lock is released with the commit");
        let _ = std::fs::remove_dir_all(&d);
    }
}
