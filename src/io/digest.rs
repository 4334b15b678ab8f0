//! SHA-256 digests of input files for provenance, taken from the bytes a
//! loader already read, so that a run reads each shared input (a 16 MB
//! kernel) once instead of twice.
//!
//! A digest is remembered with the file's size and modification time as
//! they were around the read; it is reused only while both are unchanged,
//! otherwise the file is read and hashed again.

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

pub(crate) fn stamp(path: &Path) -> Option<Stamp> {
    let m = std::fs::metadata(path).ok()?;
    Some((m.len(), m.modified().ok()))
}

/// Reads a file whole, with its size and modification time as they were
/// around the read (`None` when the file changed meanwhile); pass both to
/// [`remember`], possibly on another thread while the bytes are parsed.
pub fn read_stamped(path: &Path) -> std::io::Result<(Vec<u8>, Option<Stamp>)> {
    let before = stamp(path);
    let bytes = std::fs::read(path)?;
    let st = before.filter(|st| st.0 == bytes.len() as u64 && stamp(path).as_ref() == Some(st));
    Ok((bytes, st))
}

/// Hashes bytes read by [`read_stamped`] (or a loader reading the same
/// way) and remembers the digest.
pub fn remember(path: &Path, st: Option<Stamp>, bytes: &[u8]) {
    if let Some(st) = st {
        let digest = sha256_hex(bytes);
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
    let bytes = std::fs::read(path)?;
    Ok((bytes.len() as u64, sha256_hex(&bytes)))
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
}
