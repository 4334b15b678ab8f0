//! The DAF container of SPK files: memory-mapped bytes shared by the
//! segments, anise's DAF reader over the records up to the last summary,
//! and each segment's checks and parse.
//!
//! # References
//! NAIF DAF Required Reading (`daf.req`): file record, summary and name
//! records; NAIF SPK Required Reading (`spk.req`): segment summaries.

use std::path::Path;
use std::sync::Arc;

use anise::naif::daf::NAIFSummaryRecord;
use anise::naif::spk::summary::SPKSummaryRecord;

use super::EphemerisError;
use super::chebyshev::parse_chebyshev;
use super::discrete::parse_discrete;
use super::spk::{Segment, SegmentData, SegmentFormatError, SpkKernel, kernel_err};

impl SpkKernel {
    /// Loads an SPK file.
    ///
    /// # Errors
    /// [`EphemerisError::Kernel`] naming the file for anything unreadable,
    /// truncated or inconsistent.
    pub fn load(path: &Path) -> Result<Self, EphemerisError> {
        let (buf, stamp) = KernelBytes::map(path).map_err(|e| kernel_err(path, e.to_string()))?;
        let buf = Arc::new(buf);
        // The provenance digest is taken while the records are parsed.
        rayon::join(|| crate::io::digest::remember(path, stamp, buf.bytes()), || Self::parse_buffer(&buf, path)).1
    }

    /// Parses SPK bytes; `path` names the file in errors.
    pub fn parse(bytes: &[u8], path: &Path) -> Result<Self, EphemerisError> {
        Self::parse_buffer(&Arc::new(KernelBytes::copied(bytes)), path)
    }

    /// Parses a kernel's bytes, which its Chebyshev segments keep referring to.
    fn parse_buffer(buf: &Arc<KernelBytes>, path: &Path) -> Result<Self, EphemerisError> {
        let (bytes, doubles) = (buf.bytes(), buf.doubles());
        let len = bytes.len();
        // anise's DAF reader is careful, but a crafted file must never take the
        // process down: contain any panic as an error. It copies what it is
        // given, so it gets the records up to the last summary and name
        // record only, not the data arrays (≈ 16 MB for a DE kernel).
        let head = &bytes[..daf_summary_extent(bytes).unwrap_or(len)];
        let parsed = crate::io::guarded(|| anise::naif::SPK::parse(head));
        let daf = match parsed {
            Some(Ok(d)) => d,
            Some(Err(e)) => return Err(kernel_err(path, format!("not a readable SPK file: {e}"))),
            None => return Err(kernel_err(path, "not a readable SPK file (the DAF reader failed)")),
        };
        let mut summaries: Vec<SPKSummaryRecord> = Vec::new();
        for block in daf.iter_summary_blocks() {
            let block = block.map_err(|e| kernel_err(path, format!("corrupt summary record: {e}")))?;
            summaries.extend(block.iter().filter(|s| !s.is_empty()).copied());
        }
        if summaries.is_empty() {
            return Err(kernel_err(path, "no segments"));
        }
        // Segments are independent: they are checked in parallel.
        use rayon::prelude::*;
        let segments = summaries.par_iter().enumerate().map(|(k, s)| -> Result<Segment, EphemerisError> {
            let (a, b) = (s.start_idx as i64, s.end_idx as i64);
            if a < 1 || b < a || (b as usize) * 8 > len {
                return Err(kernel_err(path, format!("segment {k} (target {}) points outside the file (doubles {a}..{b}, file {len} bytes): truncated?", s.target_id)));
            }
            let (first, raw) = (a as usize - 1, &doubles[a as usize - 1..b as usize]);
            if !s.start_epoch_et_s.is_finite() || !s.end_epoch_et_s.is_finite() || s.end_epoch_et_s < s.start_epoch_et_s {
                return Err(kernel_err(path, format!("segment {k} (target {}) has a bad coverage", s.target_id)));
            }
            let seg_err = |m: SegmentFormatError| kernel_err(path, format!("segment {k} (target {}, type {}): {m}", s.target_id, s.data_type_i));
            let data = match s.data_type_i {
                2 | 3 => SegmentData::Chebyshev(parse_chebyshev(buf, first, raw.len(), s.data_type_i == 3).map_err(seg_err)?),
                9 | 13 => SegmentData::Discrete(parse_discrete(raw, s.data_type_i == 13).map_err(seg_err)?),
                _ => SegmentData::Unsupported,
            };
            Ok(Segment { target: s.target_id, center: s.center_id, frame: s.frame_id, spk_type: s.data_type_i, start_s: s.start_epoch_et_s, end_s: s.end_epoch_et_s, data })
        });
        // The first bad segment in file order names the error, as serially.
        let segments = segments.collect::<Vec<_>>().into_iter().collect::<Result<Vec<_>, _>>()?;
        Ok(Self { path: path.to_path_buf(), segments })
    }
}

/// DAF record length, bytes (NAIF DAF Required Reading, "DAF Structure").
const DAF_RECORD_BYTES: usize = 1024;

/// Bytes from the start of a DAF file to the end of its last summary
/// record's name record: all anise needs to list the segments. Follows the
/// forward chain from the file record (FWARD, a 1-based record number at
/// byte 76) through each summary record's NEXT (its first double), each
/// summary record followed by its name record. `None` (use the whole file)
/// when a pointer is not a plain record number inside the file or the
/// chain loops; anise then reports the damage.
///
/// # References
/// NAIF DAF Required Reading, "The File Record" and "Summary Records".
fn daf_summary_extent(bytes: &[u8]) -> Option<usize> {
    let n_records = bytes.len() / DAF_RECORD_BYTES;
    let fward = i32::from_ne_bytes(bytes.get(76..80)?.try_into().ok()?);
    let mut rec = usize::try_from(fward).ok()?;
    let mut last = 0;
    for _ in 0..=n_records {
        if rec == 0 {
            return (last > 0).then_some(last * DAF_RECORD_BYTES);
        }
        if rec >= n_records {
            return None; // the name record (rec + 1) must lie in the file too
        }
        last = last.max(rec + 1);
        let at = (rec - 1) * DAF_RECORD_BYTES;
        let next = f64::from_ne_bytes(bytes.get(at..at + 8)?.try_into().ok()?);
        if !(next >= 0.0 && next.fract() == 0.0 && next <= n_records as f64) {
            return None;
        }
        rec = next as usize;
    }
    None
}

/// The bytes of a kernel, shared by its Chebyshev segments.
///
/// A kernel file is memory-mapped, as anise's own loader does: the page
/// cache is used in place, with no copy and no fresh memory to fault in
/// (reading DE421 into a buffer cost ≈ 20–40 ms of page faults on the
/// benchmark machine). As with any mapping, a file truncated by another
/// process while lapse runs ends the process (SIGBUS); replace kernels by
/// renaming a new file into place, not by rewriting them.
pub(crate) enum KernelBytes {
    /// A mapped file (page-aligned, so its doubles are aligned).
    Mapped(memmap2::Mmap),
    /// Doubles copied from memory (the last one zero-padded) and the byte length.
    Owned(Vec<f64>, usize),
}

impl KernelBytes {
    /// Maps a file, with its stamp for [`crate::io::digest::remember`]
    /// (`None` when the file changed around the mapping).
    fn map(path: &Path) -> std::io::Result<(Self, Option<crate::io::digest::Stamp>)> {
        let open = || -> std::io::Result<Self> {
            let f = std::fs::File::open(path)?;
            // SAFETY: read-only mapping of a file we do not modify; see the
            // type's note on files truncated by others meanwhile.
            Ok(if f.metadata()?.len() >= 8 { Self::Mapped(unsafe { memmap2::Mmap::map(&f)? }) } else { Self::copied(&std::fs::read(path)?) })
        };
        crate::io::digest::stamped(path, open, |b| b.bytes().len())
    }

    pub(crate) fn copied(bytes: &[u8]) -> Self {
        let mut doubles = vec![0.0f64; bytes.len().div_ceil(8)];
        // SAFETY: u8 has alignment 1, the byte length is the doubles' own,
        // and any bytes written form valid f64 values.
        let dst = unsafe { std::slice::from_raw_parts_mut(doubles.as_mut_ptr().cast::<u8>(), doubles.len() * 8) };
        dst[..bytes.len()].copy_from_slice(bytes);
        Self::Owned(doubles, bytes.len())
    }

    pub(crate) fn bytes(&self) -> &[u8] {
        match self {
            Self::Mapped(m) => m,
            // SAFETY: as in `copied`.
            Self::Owned(d, len) => {
                let all = unsafe { std::slice::from_raw_parts(d.as_ptr().cast::<u8>(), d.len() * 8) };
                &all[..*len]
            }
        }
    }

    /// The whole doubles of the file, native-endian (a trailing partial
    /// double left out).
    #[inline]
    pub(crate) fn doubles(&self) -> &[f64] {
        match self {
            // SAFETY: a mapping starts on a page boundary (aligned for f64),
            // is valid for its length, and every bit pattern is an f64.
            Self::Mapped(m) => unsafe { std::slice::from_raw_parts(m.as_ptr().cast::<f64>(), m.len() / 8) },
            Self::Owned(d, len) => &d[..len / 8],
        }
    }
}

impl std::fmt::Debug for KernelBytes {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let kind = if matches!(self, Self::Mapped(_)) { "mapped" } else { "owned" };
        write!(f, "KernelBytes({kind}, {} bytes)", self.bytes().len())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::TdbSeconds;

    #[test]
    fn the_summary_extent_follows_the_forward_chain() {
        // File record → summary at record 3 (name 4) → summary at 6 (name 7) → end.
        let mut f = vec![0u8; 9 * DAF_RECORD_BYTES];
        f[76..80].copy_from_slice(&3i32.to_ne_bytes());
        f[2 * DAF_RECORD_BYTES..2 * DAF_RECORD_BYTES + 8].copy_from_slice(&6.0f64.to_ne_bytes());
        f[5 * DAF_RECORD_BYTES..5 * DAF_RECORD_BYTES + 8].copy_from_slice(&0.0f64.to_ne_bytes());
        assert_eq!(daf_summary_extent(&f), Some(7 * DAF_RECORD_BYTES));
        // A loop, a pointer past the end and a fractional pointer: the whole file.
        f[5 * DAF_RECORD_BYTES..5 * DAF_RECORD_BYTES + 8].copy_from_slice(&3.0f64.to_ne_bytes());
        assert_eq!(daf_summary_extent(&f), None);
        f[5 * DAF_RECORD_BYTES..5 * DAF_RECORD_BYTES + 8].copy_from_slice(&9.0f64.to_ne_bytes());
        assert_eq!(daf_summary_extent(&f), None);
        f[5 * DAF_RECORD_BYTES..5 * DAF_RECORD_BYTES + 8].copy_from_slice(&4.5f64.to_ne_bytes());
        assert_eq!(daf_summary_extent(&f), None);
        assert_eq!(daf_summary_extent(&f[..50]), None);
    }

    #[test]
    fn a_kernel_parses_the_same_from_its_head_and_whole() {
        // DE421: the segments listed from the summary records alone are the
        // ones the whole file gives, and evaluate identically.
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("data/de421.bsp");
        let bytes = std::fs::read(&path).unwrap();
        let extent = daf_summary_extent(&bytes).unwrap();
        assert!(extent < bytes.len() / 100, "summary records end at byte {extent}");
        let loaded = SpkKernel::load(&path).unwrap();
        let parsed = SpkKernel::parse(&bytes, &path).unwrap();
        // anise on the whole file lists the same segments.
        let whole = anise::naif::SPK::parse(&bytes[..]).unwrap();
        let listed: Vec<SPKSummaryRecord> = whole.iter_summary_blocks().flat_map(|b| b.unwrap().iter().filter(|s| !s.is_empty()).copied().collect::<Vec<_>>()).collect();
        assert_eq!(listed.len(), loaded.segments.len());
        let t = TdbSeconds::new(700_000_000, 0.25);
        for ((a, b), s) in loaded.segments.iter().zip(&parsed.segments).zip(&listed) {
            assert_eq!((a.target, a.center, a.start_s, a.end_s), (s.target_id, s.center_id, s.start_epoch_et_s, s.end_epoch_et_s));
            assert_eq!((a.target, a.center, a.start_s, a.end_s), (b.target, b.center, b.start_s, b.end_s));
            assert_eq!(a.evaluate(&t).map(|s| s.position_km), b.evaluate(&t).map(|s| s.position_km));
        }
    }
}
