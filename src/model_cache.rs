//! A persistent cache of time-only model tables (the X, Y, s and TDB − TT
//! grid nodes), so that repeated runs over the same years do not evaluate
//! the long series again.
//!
//! The grids of the celestial pole (`earth::rotation::CipGrid`) and of
//! TDB − TT (`time::relativistic::TdbGrid`) sample functions of time alone at
//! absolute node indices k (node epoch = k · step). Their node values are
//! stored in blocks of [`BLOCK_NODES`] nodes, one file per block, as the
//! exact f64 bits the series gave: a table read from the cache is the table
//! the series would give, bit for bit, so results do not depend on whether
//! the cache was cold or warm (tested on the golden pipelines).
//!
//! Safeguards: each file names its model (with the lapse version and the
//! series' crate) and carries a SHA-256 of its contents; every block read is
//! spot-checked by evaluating one of its nodes again and comparing the bits.
//! A file that fails any check is ignored and rewritten. Only blocks whose
//! nodes were all needed are written, so a short batch computes no more
//! than it needs.
//!
//! Where: `$LAPSE_CACHE_DIR` if set (`off` disables the cache), else
//! `$XDG_CACHE_HOME/lapse/models`, else `$HOME/.cache/lapse/models`.
//! A cache that cannot be read or written only costs time (logged at debug
//! level), never a failed run.

use std::path::{Path, PathBuf};

use rayon::prelude::*;
use sha2::{Digest, Sha256};

/// Nodes per cached block (32 days at the 0.5-day grid step).
pub const BLOCK_NODES: i64 = 64;

const MAGIC: &[u8; 8] = b"LAPSETAB";
const FORMAT: u32 = 1;

/// The cache folder, or `None` when disabled or no home is known.
pub fn cache_dir() -> Option<PathBuf> {
    match std::env::var_os("LAPSE_CACHE_DIR") {
        Some(v) if v == "off" || v.is_empty() => None,
        Some(v) => Some(PathBuf::from(v)),
        None => std::env::var_os("XDG_CACHE_HOME")
            .filter(|v| !v.is_empty())
            .map(|v| PathBuf::from(v).join("lapse/models"))
            .or_else(|| std::env::var_os("HOME").filter(|v| !v.is_empty()).map(|h| PathBuf::from(h).join(".cache/lapse/models"))),
    }
}

/// Values of a time-only model at node indices `first ..= last`, from the
/// cache where present and valid, else from `f` (in parallel).
///
/// `model` names the function and its step uniquely (it is part of the file
/// name and checked inside the file); `f(k)` is the value at node k.
pub fn tabulate<const W: usize, F>(model: &str, first: i64, last: i64, f: F) -> Vec<[f64; W]>
where
    F: Fn(i64) -> [f64; W] + Sync,
{
    tabulate_in(cache_dir().as_deref(), model, first, last, f)
}

/// [`tabulate`] with the cache in `dir` (`None`: no cache).
pub fn tabulate_in<const W: usize, F>(dir: Option<&Path>, model: &str, first: i64, last: i64, f: F) -> Vec<[f64; W]>
where
    F: Fn(i64) -> [f64; W] + Sync,
{
    if last < first {
        return Vec::new();
    }
    let Some(dir) = dir else {
        return (first..=last).into_par_iter().map(&f).collect();
    };
    let id = format!("{model} lapse {}", crate::VERSION);
    let blocks: Vec<i64> = (first.div_euclid(BLOCK_NODES)..=last.div_euclid(BLOCK_NODES)).collect();
    let parts: Vec<Vec<[f64; W]>> = blocks
        .par_iter()
        .map(|&b| {
            let (b0, b1) = (b * BLOCK_NODES, b * BLOCK_NODES + BLOCK_NODES - 1);
            let (lo, hi) = (first.max(b0), last.min(b1));
            let path = dir.join(format!("{}-{b}.bin", file_stem(model)));
            if let Some(vals) = read_block::<W>(&path, &id, b) {
                // Spot check: one node evaluated again must match bit for bit.
                let k = b0 + (b.rem_euclid(BLOCK_NODES));
                if bits(&f(k)) == bits(&vals[(k - b0) as usize]) {
                    return vals[(lo - b0) as usize..=(hi - b0) as usize].to_vec();
                }
                tracing::warn!(path = %path.display(), "cached model table disagrees with the series; recomputing it");
            }
            let vals: Vec<[f64; W]> = (lo..=hi).into_par_iter().map(&f).collect();
            if lo == b0
                && hi == b1
                && let Err(e) = write_block(dir, &path, &id, b, &vals)
            {
                tracing::debug!(path = %path.display(), error = %e, "model table not cached");
            }
            vals
        })
        .collect();
    parts.concat()
}

fn bits<const W: usize>(v: &[f64; W]) -> [u64; W] {
    v.map(f64::to_bits)
}

/// A file name from the model id: letters, digits, '-', '.', '_' kept.
fn file_stem(model: &str) -> String {
    model.chars().map(|c| if c.is_ascii_alphanumeric() || matches!(c, '-' | '.' | '_') { c } else { '_' }).collect()
}

fn header(id: &str, width: usize, block: i64) -> Vec<u8> {
    let mut h = Vec::with_capacity(32 + id.len());
    h.extend_from_slice(MAGIC);
    h.extend_from_slice(&FORMAT.to_le_bytes());
    h.extend_from_slice(&(id.len() as u32).to_le_bytes());
    h.extend_from_slice(id.as_bytes());
    h.extend_from_slice(&(width as u32).to_le_bytes());
    h.extend_from_slice(&block.to_le_bytes());
    h.extend_from_slice(&(BLOCK_NODES as u32).to_le_bytes());
    h
}

/// A block's values when the file exists, is complete, is for this model,
/// width and block, and its checksum holds.
fn read_block<const W: usize>(path: &Path, id: &str, block: i64) -> Option<Vec<[f64; W]>> {
    let bytes = std::fs::read(path).ok()?;
    let h = header(id, W, block);
    let n_vals = BLOCK_NODES as usize * W;
    if bytes.len() != h.len() + 8 * n_vals + 32 || bytes[..h.len()] != h[..] {
        return None;
    }
    let (body, sum) = bytes.split_at(bytes.len() - 32);
    if Sha256::digest(body)[..] != sum[..] {
        return None;
    }
    let mut vals = body[h.len()..].chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().unwrap_or([0; 8])));
    Some((0..BLOCK_NODES).map(|_| std::array::from_fn(|_| vals.next().unwrap_or(f64::NAN))).collect())
}

/// Writes a block through a temporary file renamed into place (concurrent
/// writers of the same block write the same bytes; the last rename wins).
fn write_block<const W: usize>(dir: &Path, path: &Path, id: &str, block: i64, vals: &[[f64; W]]) -> std::io::Result<()> {
    std::fs::create_dir_all(dir)?;
    let mut body = header(id, W, block);
    for v in vals {
        for x in v {
            body.extend_from_slice(&x.to_le_bytes());
        }
    }
    let sum = Sha256::digest(&body);
    body.extend_from_slice(&sum);
    static SEQ: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let tmp = path.with_extension(format!("tmp.{}.{}", std::process::id(), SEQ.fetch_add(1, std::sync::atomic::Ordering::Relaxed)));
    std::fs::write(&tmp, &body)?;
    std::fs::rename(&tmp, path).inspect_err(|_| {
        let _ = std::fs::remove_file(&tmp);
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn model(k: i64) -> [f64; 2] {
        let x = k as f64 * 0.37;
        [x.sin(), (x * 1e-3).exp()]
    }

    #[test]
    fn blocks_round_trip_bit_for_bit_and_bad_files_are_ignored() {
        let dir = std::env::temp_dir().join(format!("lapse-model-cache-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        let direct: Vec<[f64; 2]> = (-70..=200).map(model).collect();
        let run = |first: i64, last: i64, f: &(dyn Fn(i64) -> [f64; 2] + Sync)| -> Vec<[f64; 2]> { tabulate_in::<2, _>(Some(&dir), "test-model step 1", first, last, f) };
        // Cold: computed; only blocks wholly needed are written.
        let cold = run(-70, 200, &model);
        assert_eq!(cold.iter().map(bits).collect::<Vec<_>>(), direct.iter().map(bits).collect::<Vec<_>>());
        let files = |d: &Path| std::fs::read_dir(d).map(|r| r.count()).unwrap_or(0);
        // Blocks -64..-1, 0..63, 64..127 and 128..191 were wholly needed;
        // -128..-65 and 192..255 only in part.
        assert_eq!(files(&dir), 4, "{:?}", std::fs::read_dir(&dir).unwrap().flatten().map(|e| e.file_name()).collect::<Vec<_>>());
        // Warm, a sub-range: from the files, same bits.
        let warm = run(-64, 191, &|k| if k.rem_euclid(BLOCK_NODES) == k.div_euclid(BLOCK_NODES).rem_euclid(BLOCK_NODES) { model(k) } else { [f64::NAN; 2] });
        assert_eq!(warm.iter().map(bits).collect::<Vec<_>>(), direct[6..6 + 256].iter().map(bits).collect::<Vec<_>>());
        // A corrupted file is ignored (checksum) and rewritten.
        let victim = dir.join("test-model_step_1-0.bin");
        let mut b = std::fs::read(&victim).unwrap();
        let n = b.len();
        b[n - 40] ^= 1;
        std::fs::write(&victim, &b).unwrap();
        assert_eq!(read_block::<2>(&victim, &format!("test-model step 1 lapse {}", crate::VERSION), 0), None);
        let again = run(0, 63, &model);
        assert_eq!(again.iter().map(bits).collect::<Vec<_>>(), direct[70..134].iter().map(bits).collect::<Vec<_>>());
        assert!(read_block::<2>(&victim, &format!("test-model step 1 lapse {}", crate::VERSION), 0).is_some(), "rewritten");
        // A stale table (the model changed, same name) fails the spot check.
        let changed = |k: i64| [model(k)[0] + 1e-16, model(k)[1]];
        let fresh = run(0, 63, &changed);
        assert_eq!(fresh.iter().map(bits).collect::<Vec<_>>(), (0..64).map(changed).map(|v| bits(&v)).collect::<Vec<_>>());
        let _ = std::fs::remove_dir_all(&dir);
    }
}
