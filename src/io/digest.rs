//! SHA-256 digests of input files for provenance, taken from the bytes a
//! loader already read, so that a run reads each shared input (a 16 MB
//! kernel) once instead of twice.
//!
//! A digest is remembered with the file's size and modification time as
//! they were around the read; it is reused only while both are unchanged,
//! otherwise the file is read and hashed again.
//!
//! Large files (≥ [`PERSIST_MIN_BYTES`]: kernels, EOP) also have their digest
//! kept between runs, beside the model cache (`<cache>/digests`, see
//! [`crate::model_cache::cache_dir`]; `LAPSE_CACHE_DIR=off` disables both),
//! as version-control tools keep file hashes: keyed by the file's device,
//! inode, size, modification time and status-change time (ctime, which every
//! write or `touch` moves and no user can set back), and written only for
//! files last modified more than [`SETTLE_S`] s before (a file still being
//! written within the clock's resolution is hashed every time). Hashing the
//! 16 MB DE421 kernel took ≈ 17 ms of every run.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::{Mutex, OnceLock};
use std::time::SystemTime;

use sha2::{Digest, Sha256};

/// Lower-case hexadecimal SHA-256 of some bytes.
pub fn sha256_hex(bytes: &[u8]) -> String {
    let d = Sha256::digest(bytes);
    d.iter().map(|b| format!("{b:02x}")).collect()
}

/// A file's size (bytes) and modification time.
pub type Stamp = (u64, Option<SystemTime>);

fn memo() -> &'static Mutex<HashMap<PathBuf, (Stamp, String)>> {
    static MEMO: OnceLock<Mutex<HashMap<PathBuf, (Stamp, String)>>> = OnceLock::new();
    MEMO.get_or_init(Default::default)
}

fn stamp(path: &Path) -> Option<Stamp> {
    let m = std::fs::metadata(path).ok()?;
    Some((m.len(), m.modified().ok()))
}

/// Reads a file whole, with its size and modification time as they were
/// around the read (`None` when the file changed meanwhile); pass both to
/// [`remember`], possibly on another thread while the bytes are parsed.
pub fn read_stamped(path: &Path) -> std::io::Result<(Vec<u8>, Option<Stamp>)> {
    stamped(path, || std::fs::read(path), |b| b.len())
}

/// Runs `read` (which reads `path`) with the file's stamp taken around it:
/// `None` when the size or modification time moved, or the length read
/// (`len_of`) is not the file's size.
pub(crate) fn stamped<T>(path: &Path, read: impl FnOnce() -> std::io::Result<T>, len_of: impl Fn(&T) -> usize) -> std::io::Result<(T, Option<Stamp>)> {
    let before = stamp(path);
    let value = read()?;
    let st = before.filter(|st| st.0 == len_of(&value) as u64 && stamp(path).as_ref() == Some(st));
    Ok((value, st))
}

/// Hashes bytes read by [`read_stamped`] (or a loader reading the same
/// way) and remembers the digest; a digest kept from an earlier run for the
/// unchanged file is taken instead of hashing.
pub fn remember(path: &Path, st: Option<Stamp>, bytes: &[u8]) {
    if let Some(st) = st {
        let digest = match persisted(path) {
            Some(d) => d,
            None => {
                let d = sha256_hex(bytes);
                persist(path, &d);
                d
            }
        };
        if let Ok(mut m) = memo().lock() {
            m.insert(path.to_path_buf(), (st, digest));
        }
    }
}

/// Reads a file whole, remembering its digest when the file did not change
/// during the read.
pub fn read_remembering(path: &Path) -> std::io::Result<Vec<u8>> {
    let (bytes, st) = read_stamped(path)?;
    remember(path, st, &bytes);
    Ok(bytes)
}

/// [`read_remembering`] for a UTF-8 text file.
pub fn read_to_string_remembering(path: &Path) -> std::io::Result<String> {
    String::from_utf8(read_remembering(path)?).map_err(|e| std::io::Error::new(std::io::ErrorKind::InvalidData, e))
}

/// Size (bytes) and SHA-256 of a file: remembered from a load when the file
/// is unchanged since, else read and hashed now.
pub fn file_digest(path: &Path) -> std::io::Result<(u64, String)> {
    if let Some(st) = stamp(path)
        && let Ok(m) = memo().lock()
        && let Some((seen, digest)) = m.get(path)
        && *seen == st
    {
        return Ok((st.0, digest.clone()));
    }
    if let (Some(st), Some(d)) = (stamp(path), persisted(path)) {
        return Ok((st.0, d));
    }
    let bytes = std::fs::read(path)?;
    let digest = sha256_hex(&bytes);
    persist(path, &digest);
    Ok((bytes.len() as u64, digest))
}

/// Files at least this large keep their digest between runs.
pub const PERSIST_MIN_BYTES: u64 = 1 << 20;
/// Minimum age (s) of a file's last modification for its digest to be kept.
pub const SETTLE_S: u64 = 2;

/// The identity of a file's contents as the file system reports it:
/// device, inode, size, modification and status-change times (ns).
#[cfg(unix)]
fn identity(path: &Path) -> Option<(String, u64)> {
    use std::os::unix::fs::MetadataExt;
    let m = std::fs::metadata(path).ok()?;
    if !m.is_file() || m.len() < PERSIST_MIN_BYTES {
        return None;
    }
    let key = format!("{} {} {} {}.{:09} {}.{:09}", m.dev(), m.ino(), m.len(), m.mtime(), m.mtime_nsec(), m.ctime(), m.ctime_nsec());
    Some((key, m.mtime().max(m.ctime()).max(0) as u64))
}

#[cfg(not(unix))]
fn identity(_: &Path) -> Option<(String, u64)> {
    None
}

/// Where a file's kept digest lives (named by the SHA-256 of its absolute path).
fn persist_file(path: &Path) -> Option<PathBuf> {
    let dir = crate::model_cache::cache_dir()?.join("digests");
    let abs = std::fs::canonicalize(path).ok()?;
    Some(dir.join(sha256_hex(abs.to_string_lossy().as_bytes())))
}

/// The digest kept from an earlier run, if the file is unchanged since.
fn persisted(path: &Path) -> Option<String> {
    let (key, _) = identity(path)?;
    let text = std::fs::read_to_string(persist_file(path)?).ok()?;
    let (k, d) = text.trim_end().rsplit_once(' ')?;
    (k == key && d.len() == 64 && d.bytes().all(|b| b.is_ascii_hexdigit())).then(|| d.to_string())
}

/// Keeps a file's digest for later runs (best effort: a failure only costs
/// the next run a hash).
fn persist(path: &Path, digest: &str) {
    let (Some((key, changed_s)), Some(file)) = (identity(path), persist_file(path)) else { return };
    let now_s = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_secs()).unwrap_or(0);
    if now_s < changed_s + SETTLE_S {
        return;
    }
    let write = || -> std::io::Result<()> {
        std::fs::create_dir_all(file.parent().unwrap_or(Path::new(".")))?;
        let tmp = file.with_extension(format!("tmp{}", std::process::id()));
        std::fs::write(&tmp, format!("{key} {digest}\n"))?;
        std::fs::rename(&tmp, &file)
    };
    if let Err(e) = write() {
        tracing::debug!(path = %path.display(), error = %e, "digest not kept");
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn remembered_digest_equals_a_fresh_one_and_follows_changes() {
        let dir = std::env::temp_dir().join(format!("lapse-digest-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let p = dir.join("f.bin");
        std::fs::write(&p, b"first contents").unwrap();
        let bytes = read_remembering(&p).unwrap();
        assert_eq!(file_digest(&p).unwrap(), (bytes.len() as u64, sha256_hex(b"first contents")));
        // SHA-256("abc"), FIPS 180-2 appendix B.1.
        assert_eq!(sha256_hex(b"abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
        // A changed file (other size) is hashed again, not taken from memory.
        std::fs::write(&p, b"second, longer contents").unwrap();
        assert_eq!(file_digest(&p).unwrap().1, sha256_hex(b"second, longer contents"));
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[cfg(unix)]
    #[test]
    fn a_kept_digest_is_used_only_for_the_unchanged_file() {
        let dir = std::env::temp_dir().join(format!("lapse-digest-keep-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        let p = dir.join("big.bin");
        let a = vec![7u8; PERSIST_MIN_BYTES as usize];
        std::fs::write(&p, &a).unwrap();
        // Written just now: not settled, so nothing is kept.
        persist(&p, &sha256_hex(&a));
        assert_eq!(persisted(&p), None);
        // A settled file (its identity is what persist writes): kept and found.
        let (key, _) = identity(&p).unwrap();
        let file = persist_file(&p).unwrap();
        std::fs::create_dir_all(file.parent().unwrap()).unwrap();
        std::fs::write(&file, format!("{key} {}\n", sha256_hex(&a))).unwrap();
        assert_eq!(persisted(&p), Some(sha256_hex(&a)));
        // Same size, new contents: the ctime moves, the kept digest is ignored.
        std::thread::sleep(std::time::Duration::from_millis(20));
        std::fs::write(&p, vec![8u8; PERSIST_MIN_BYTES as usize]).unwrap();
        assert_eq!(persisted(&p), None);
        let _ = std::fs::remove_file(&file);
        let _ = std::fs::remove_dir_all(&dir);
    }
}
