//! SPK kernels: segments read through anise's DAF reader, Chebyshev data
//! (types 2 and 3) evaluated here on a two-part TDB epoch.
//!
//! anise parses and validates the DAF container (file record, endianness,
//! summary records); the file is memory-mapped, its Chebyshev segments
//! index into the mapping, and we evaluate them ourselves, because anise's query epoch is an `f64` of TDB seconds past
//! J2000, which resolves ≈ 0.1 µs in this century (≈ 3.6 mm of Earth
//! motion: 2^-52 · 8e8 s; IEEE 754-2008 binary64), above the 1 mm this tool needs.
//!
//! # References
//! NAIF SPK Required Reading (`spk.req`), "Segments — The Fundamental SPK
//! Building Blocks", types 2 and 3 (Chebyshev position; position and
//! velocity), and the SPICE routines SPKR02/SPKE02, SPKR03/SPKE03 for
//! record selection and evaluation. NAIF DAF Required Reading for the
//! container.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use anise::naif::daf::NAIFSummaryRecord;
use anise::naif::spk::summary::SPKSummaryRecord;

use super::EphemerisError;

/// A TDB epoch as whole seconds past J2000.0 TDB plus a fraction in [0, 1).
///
/// Two parts keep sub-nanosecond resolution (an `f64` of seconds past J2000
/// resolves ≈ 0.1 µs in this century).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TdbSeconds {
    /// Whole seconds past J2000.0 TDB.
    pub whole_s: i64,
    /// Fraction of a second, in [0, 1).
    pub frac_s: f64,
}

impl TdbSeconds {
    /// From whole seconds and any fraction (renormalised to [0, 1)).
    pub fn new(whole_s: i64, frac_s: f64) -> Self {
        // Already in [0, 1) (the usual case): no floor, which baseline x86-64
        // makes a library call; a −0.0 goes through floor to keep its sign.
        if frac_s > 0.0 && frac_s < 1.0 {
            return Self { whole_s, frac_s };
        }
        let fl = frac_s.floor();
        Self { whole_s: whole_s + fl as i64, frac_s: frac_s - fl }
    }

    /// From a lapse epoch, which must be in TDB.
    pub fn from_epoch(e: &crate::time::Epoch) -> Result<Self, EphemerisError> {
        if e.scale() != crate::time::TimeScale::Tdb {
            return Err(EphemerisError::WrongScale { scale: e.scale().to_string() });
        }
        let (w, f) = e.seconds_since_j2000();
        Ok(Self { whole_s: w, frac_s: f })
    }

    /// This epoch shifted by `delta_s` seconds.
    pub fn plus_s(&self, delta_s: f64) -> Self {
        let d = trunc_s(delta_s);
        Self::new(self.whole_s + d as i64, self.frac_s + (delta_s - d))
    }

    /// `self − x` in seconds, for a reference time `x_s` given as an `f64`
    /// (segment boundaries, record midpoints), without losing the fraction:
    /// the integer parts are subtracted exactly first.
    pub fn minus_f64_s(&self, x_s: f64) -> f64 {
        let xi = trunc_s(x_s);
        ((self.whole_s as f64) - xi) + (self.frac_s - (x_s - xi))
    }

    /// Approximate single `f64` (for messages and coarse searches only).
    pub fn approx_s(&self) -> f64 {
        self.whole_s as f64 + self.frac_s
    }
}

/// `x.trunc()` through a hardware conversion where it is exact (|x| < 2^62:
/// every epoch in seconds); the library call otherwise. Baseline x86-64 has
/// no rounding instruction, so `trunc` is a call, and segment look-ups make
/// several per evaluation. A negative fraction gives +0.0 instead of −0.0,
/// which no caller can see (it is only subtracted).
#[inline]
fn trunc_s(x: f64) -> f64 {
    if x.abs() < 4.611_686_018_427_388e18 { (x as i64) as f64 } else { x.trunc() }
}

/// Position (km) and velocity (km/s) of a target relative to a centre,
/// ICRF axes, TDB.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct StateKm {
    pub position_km: [f64; 3],
    pub velocity_km_s: [f64; 3],
}

impl std::ops::Add for StateKm {
    type Output = StateKm;
    fn add(self, o: StateKm) -> StateKm {
        StateKm {
            position_km: std::array::from_fn(|i| self.position_km[i] + o.position_km[i]),
            velocity_km_s: std::array::from_fn(|i| self.velocity_km_s[i] + o.velocity_km_s[i]),
        }
    }
}

/// Chebyshev data of a type 2 or 3 segment.
#[derive(Clone, Debug)]
pub struct ChebyshevData {
    /// Start of the first record, TDB seconds past J2000.
    pub init_s: f64,
    /// Length of each record's interval, s.
    pub interval_s: f64,
    /// Doubles per record.
    pub record_len: usize,
    /// Number of records.
    pub n_records: usize,
    /// Coefficients per component (degree + 1).
    pub n_coeffs: usize,
    /// Type 3 carries velocity coefficients too.
    pub with_velocity: bool,
    /// The kernel's doubles (shared by its segments, not copied per
    /// segment); the records start at `first`: [mid, radius, x…, y…, z…
    /// (, vx…, vy…, vz…)] each.
    records: Arc<KernelBytes>,
    /// Index in `records` of the first record's first double.
    first: usize,
}

/// Discrete states of a type 9 (Lagrange) or type 13 (Hermite) segment.
#[derive(Clone, Debug)]
pub struct DiscreteStates {
    /// Epochs, TDB seconds past J2000, strictly increasing.
    pub epochs_s: Vec<f64>,
    /// States (x, y, z km; vx, vy, vz km/s), one per epoch.
    pub states: Vec<[f64; 6]>,
    /// Number of states in the interpolation window.
    pub window: usize,
    /// Type 13 (Hermite with velocities) or type 9 (Lagrange per component).
    pub hermite: bool,
    /// Type 13 with a window of at most [`CACHED_WINDOW`] states: the
    /// divided-difference table of each window, computed on first use (it
    /// depends on the window's states alone, so results do not depend on
    /// which row asked first).
    hermite_tables: std::sync::Arc<Vec<std::sync::OnceLock<Box<HermiteTable>>>>,
}

/// Windows up to this many states keep their Hermite tables.
pub const CACHED_WINDOW: usize = 8;

/// Newton coefficients of one window's Hermite interpolant, per axis lane,
/// on the doubled nodes z = (e₀, e₀, e₁, e₁, …) measured from e₀.
#[derive(Debug)]
struct HermiteTable {
    coef: [[f64; LANES]; 2 * CACHED_WINDOW],
}

/// The data of one segment.
#[derive(Clone, Debug)]
pub enum SegmentData {
    /// SPK types 2 and 3.
    Chebyshev(ChebyshevData),
    /// SPK types 9 and 13.
    Discrete(DiscreteStates),
    /// A type lapse does not evaluate (yet): queries name it in the error.
    Unsupported,
}

/// One SPK segment.
#[derive(Clone, Debug)]
pub struct Segment {
    pub target: i32,
    pub center: i32,
    pub frame: i32,
    pub spk_type: i32,
    /// Coverage, TDB seconds past J2000.
    pub start_s: f64,
    pub end_s: f64,
    pub data: SegmentData,
}

impl ChebyshevData {
    /// The record covering `t` (the first or last one outside the records'
    /// span) and the normalised time τ = (t − mid)/radius within it.
    fn record_at(&self, t: &TdbSeconds) -> (&[f64], f64) {
        let since_init = t.minus_f64_s(self.init_s);
        // floor then clamp at 0 equals clamp then truncate (NaN → 0 both ways).
        let idx = ((since_init / self.interval_s).max(0.0) as usize).min(self.n_records - 1);
        let at = self.first + idx * self.record_len;
        let rec = &self.records.doubles()[at..at + self.record_len];
        (rec, t.minus_f64_s(rec[0]) / rec[1])
    }
}

/// Maximum Chebyshev degree we accept (DE kernels use ≤ 13; guards corrupt files).
const MAX_COEFFS: usize = 64;

impl Segment {
    /// True when `t` lies inside the segment's coverage (inclusive).
    pub fn covers(&self, t: &TdbSeconds) -> bool {
        t.minus_f64_s(self.start_s) >= 0.0 && t.minus_f64_s(self.end_s) <= 0.0
    }

    /// State of `target` relative to `center` at `t` (which must be covered).
    ///
    /// # Accuracy
    /// Evaluates the stored Chebyshev expansion to the precision of f64
    /// arithmetic (≈ 1e-16 relative, < 0.1 mm for planets); time enters as
    /// `(t − mid)/radius` formed from two parts, so the time argument loses
    /// nothing. DE421 agrees with jplephem 2.24 to ≤ 1 mm over 1950–2050
    /// (`tests/geometry_reference.rs`).
    ///
    /// # References
    /// NAIF SPK Required Reading, types 2 and 3; SPICE SPKE02 (velocity as the
    /// derivative of the position expansion) and SPKE03.
    pub fn evaluate(&self, t: &TdbSeconds) -> Option<StateKm> {
        let c = match &self.data {
            SegmentData::Chebyshev(c) => c,
            SegmentData::Discrete(d) => return Some(d.evaluate(t)),
            SegmentData::Unsupported => return None,
        };
        let (rec, tau) = c.record_at(t);
        let radius = rec[1];
        let n = c.n_coeffs;
        // Chebyshev polynomials T_k(τ) and their derivatives dT_k/dτ.
        let mut tk = [0.0f64; MAX_COEFFS];
        let mut dk = [0.0f64; MAX_COEFFS];
        tk[0] = 1.0;
        if n > 1 {
            tk[1] = tau;
            dk[1] = 1.0;
        }
        for k in 2..n {
            tk[k] = 2.0 * tau * tk[k - 1] - tk[k - 2];
            dk[k] = 2.0 * tk[k - 1] + 2.0 * tau * dk[k - 1] - dk[k - 2];
        }
        // The three axes advance together (three independent sums, so the
        // loop runs at the adds' throughput, not their latency); each axis
        // keeps its own order of operations, from the highest degree down
        // (smallest terms first): bit-identical to one axis at a time.
        let (mut p, mut v) = ([0.0f64; 3], [0.0f64; 3]);
        for k in (0..n).rev() {
            for axis in 0..3 {
                let coef = rec[2 + axis * n + k];
                p[axis] += coef * tk[k];
                v[axis] += coef * dk[k];
            }
        }
        let mut s = StateKm { position_km: p, velocity_km_s: v.map(|x| x / radius) };
        if c.with_velocity {
            let mut vv = [0.0f64; 3];
            for k in (0..n).rev() {
                for (axis, acc) in vv.iter_mut().enumerate() {
                    *acc += rec[2 + (3 + axis) * n + k] * tk[k];
                }
            }
            s.velocity_km_s = vv;
        }
        Some(s)
    }

    /// Position only (km), for callers that need no velocity (Shapiro
    /// bodies): the same sums as [`Self::evaluate`] in the same order, so
    /// the result is bit-identical to its `position_km`, without the
    /// derivative recurrence (about half the work).
    ///
    /// # Accuracy
    /// That of [`Self::evaluate`] (bit-identical positions; checked on the
    /// 12 000 DE421 states of `tests/geometry_reference.rs`).
    ///
    /// # References
    /// NAIF SPK Required Reading, types 2 and 3; SPICE SPKE02.
    pub fn position(&self, t: &TdbSeconds) -> Option<[f64; 3]> {
        let c = match &self.data {
            SegmentData::Chebyshev(c) => c,
            SegmentData::Discrete(d) => return Some(d.evaluate(t).position_km),
            SegmentData::Unsupported => return None,
        };
        let (rec, tau) = c.record_at(t);
        let n = c.n_coeffs;
        let mut tk = [0.0f64; MAX_COEFFS];
        tk[0] = 1.0;
        if n > 1 {
            tk[1] = tau;
        }
        for k in 2..n {
            tk[k] = 2.0 * tau * tk[k - 1] - tk[k - 2];
        }
        // Axes together, each in its own order (see `evaluate`).
        let mut out = [0.0; 3];
        for k in (0..n).rev() {
            for (axis, o) in out.iter_mut().enumerate() {
                *o += rec[2 + axis * n + k] * tk[k];
            }
        }
        Some(out)
    }
}

/// Largest interpolation window of a type 9/13 segment lapse reads (states).
pub const MAX_WINDOW: usize = 64;

/// A loaded SPK kernel.
#[derive(Clone, Debug)]
pub struct SpkKernel {
    pub path: PathBuf,
    pub segments: Vec<Segment>,
}

fn kernel_err(path: &Path, message: impl Into<String>) -> EphemerisError {
    EphemerisError::Kernel { path: path.to_path_buf(), message: message.into() }
}

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
            Ok(Segment {
                target: s.target_id,
                center: s.center_id,
                frame: s.frame_id,
                spk_type: s.data_type_i,
                start_s: s.start_epoch_et_s,
                end_s: s.end_epoch_et_s,
                data,
            })
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

    fn copied(bytes: &[u8]) -> Self {
        let mut doubles = vec![0.0f64; bytes.len().div_ceil(8)];
        // SAFETY: u8 has alignment 1, the byte length is the doubles' own,
        // and any bytes written form valid f64 values.
        let dst = unsafe { std::slice::from_raw_parts_mut(doubles.as_mut_ptr().cast::<u8>(), doubles.len() * 8) };
        dst[..bytes.len()].copy_from_slice(bytes);
        Self::Owned(doubles, bytes.len())
    }

    fn bytes(&self) -> &[u8] {
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
    fn doubles(&self) -> &[f64] {
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

/// Types 2/3 in place: the records stay in the kernel's buffer `buf`,
/// whose doubles `first .. first + n_doubles` are the segment.
/// A malformed segment's data (the message says what is wrong).
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
struct SegmentFormatError(String);

fn parse_chebyshev(buf: &Arc<KernelBytes>, first: usize, n_doubles: usize, with_velocity: bool) -> Result<ChebyshevData, SegmentFormatError> {
    if n_doubles < 4 + 5 {
        return Err(SegmentFormatError(format!("only {n_doubles} doubles")));
    }
    let seg = &buf.doubles()[first..first + n_doubles];
    let [init_s, interval_s, rsize, n] = [seg[n_doubles - 4], seg[n_doubles - 3], seg[n_doubles - 2], seg[n_doubles - 1]];
    if !init_s.is_finite() || !(interval_s.is_finite() && interval_s > 0.0) {
        return Err(SegmentFormatError(format!("bad directory: init {init_s}, interval {interval_s}")));
    }
    if !(rsize.is_finite() && rsize >= 5.0 && rsize.fract() == 0.0 && n.is_finite() && n >= 1.0 && n.fract() == 0.0) {
        return Err(SegmentFormatError(format!("bad directory: record size {rsize}, records {n}")));
    }
    let (record_len, n_records) = (rsize as usize, n as usize);
    let comps = if with_velocity { 6 } else { 3 };
    if (record_len - 2) % comps != 0 {
        return Err(SegmentFormatError(format!("record size {record_len} is not 2 + {comps}·(degree + 1)")));
    }
    let n_coeffs = (record_len - 2) / comps;
    if n_coeffs > MAX_COEFFS {
        return Err(SegmentFormatError(format!("degree {} exceeds {}", n_coeffs - 1, MAX_COEFFS - 1)));
    }
    if record_len.checked_mul(n_records).map(|x| x + 4) != Some(n_doubles) {
        return Err(SegmentFormatError(format!("{} records of {record_len} doubles do not fill the segment's {} doubles", n_records, n_doubles)));
    }
    let records = &seg[..record_len * n_records];
    if records.iter().any(|x| !x.is_finite()) {
        return Err(SegmentFormatError("non-finite coefficient".into()));
    }
    for r in records.chunks_exact(record_len) {
        if !(r[1] > 0.0) {
            return Err(SegmentFormatError(format!("record radius {} is not positive", r[1])));
        }
    }
    Ok(ChebyshevData { init_s, interval_s, record_len, n_records, n_coeffs, with_velocity, records: Arc::clone(buf), first })
}

/// Parses a type 9 or 13 segment: N states (6 doubles each), N epochs, the
/// epoch directory ((N−1)/100 entries), then (type 9) the polynomial degree
/// or (type 13) the window size minus one, and N.
///
/// # References
/// NAIF SPK Required Reading, "Type 9: Lagrange Interpolation — Unequal Time
/// Steps" and "Type 13: Hermite Interpolation — Unequal Time Steps".
fn parse_discrete(d: &[f64], hermite: bool) -> Result<DiscreteStates, SegmentFormatError> {
    if d.len() < 2 + 7 {
        return Err(SegmentFormatError(format!("only {} doubles", d.len())));
    }
    let n_f = d[d.len() - 1];
    let w_f = d[d.len() - 2];
    if !(n_f.is_finite() && n_f >= 2.0 && n_f.fract() == 0.0 && w_f.is_finite() && w_f >= 1.0 && w_f.fract() == 0.0) {
        return Err(SegmentFormatError(format!("bad trailer: {w_f}, {n_f}")));
    }
    let n = n_f as usize;
    // Type 9 stores the degree (window = degree + 1); type 13 the window − 1.
    let window = w_f as usize + 1;
    let dir = (n - 1) / 100;
    if n.checked_mul(7).map(|x| x + dir + 2) != Some(d.len()) {
        return Err(SegmentFormatError(format!("{n} states do not fill the segment's {} doubles", d.len())));
    }
    if window > n || window > MAX_WINDOW {
        return Err(SegmentFormatError(format!("window of {window} states with {n} states")));
    }
    let states: Vec<[f64; 6]> = (0..n).map(|i| std::array::from_fn(|k| d[6 * i + k])).collect();
    let epochs_s = d[6 * n..7 * n].to_vec();
    if epochs_s.windows(2).any(|w| !(w[1] > w[0])) || states.iter().flatten().chain(&epochs_s).any(|x| !x.is_finite()) {
        return Err(SegmentFormatError("epochs not increasing or values not finite".into()));
    }
    Ok(DiscreteStates::new(epochs_s, states, window, hermite))
}

impl DiscreteStates {
    /// Discrete states (already checked: epochs increasing, window ≤ states).
    pub fn new(epochs_s: Vec<f64>, states: Vec<[f64; 6]>, window: usize, hermite: bool) -> Self {
        let windows = if hermite && window <= CACHED_WINDOW { (epochs_s.len() + 1).saturating_sub(window) } else { 0 };
        let hermite_tables = std::sync::Arc::new((0..windows).map(|_| std::sync::OnceLock::new()).collect());
        Self { epochs_s, states, window, hermite, hermite_tables }
    }

    /// Newton coefficients of the Hermite interpolant of the window starting
    /// at state `f`: the divided differences of [`hermite_at_zero_lanes`] on
    /// the window's epochs measured from its first one (differences of
    /// nearby f64 epochs are exact).
    fn hermite_table(&self, f: usize) -> HermiteTable {
        let w = self.window;
        let e0 = self.epochs_s[f];
        let x: [f64; CACHED_WINDOW] = std::array::from_fn(|j| if j < w { self.epochs_s[f + j] - e0 } else { 0.0 });
        let (p, v) = self.window_lanes::<CACHED_WINDOW>(f);
        HermiteTable { coef: hermite_coefficients_lanes::<{ 2 * CACHED_WINDOW }>(&x[..w], &p[..w], &v[..w]) }
    }

    /// The positions and velocities of the window starting at state `f`, one
    /// lane per axis (`CAP` ≥ the window).
    fn window_lanes<const CAP: usize>(&self, f: usize) -> ([[f64; LANES]; CAP], [[f64; LANES]; CAP]) {
        let (mut p, mut v) = ([[0.0f64; LANES]; CAP], [[0.0f64; LANES]; CAP]);
        for (j, st) in self.states[f..f + self.window].iter().enumerate() {
            p[j] = [st[0], st[1], st[2], 0.0];
            v[j] = [st[3], st[4], st[5], 0.0];
        }
        (p, v)
    }

    /// First index of the interpolation window at `t`, as SPICE selects it
    /// (SPKR09/SPKR13): for an even window the states around the last epoch
    /// ≤ t, half on each side; for an odd window centred on the nearest
    /// epoch; shifted to stay inside the segment.
    fn window_start(&self, t: &TdbSeconds) -> usize {
        let n = self.epochs_s.len();
        let w = self.window;
        let low = self.epochs_s.partition_point(|e| t.minus_f64_s(*e) >= 0.0).saturating_sub(1);
        let first = if w % 2 == 0 {
            (low + 1).saturating_sub(w / 2)
        } else {
            let near = if low + 1 < n && t.minus_f64_s(self.epochs_s[low]).abs() > t.minus_f64_s(self.epochs_s[low + 1]).abs() { low + 1 } else { low };
            near.saturating_sub((w - 1) / 2)
        };
        first.min(n - w)
    }

    /// Interpolated state at `t`.
    ///
    /// Type 13: each position component by the Hermite polynomial through the
    /// window's positions and velocities, velocity as its derivative (SPICE
    /// SPKE13/HRMINT). Type 9: each of the six components by the Lagrange
    /// polynomial through the window (SPICE SPKE09/LGRINT).
    ///
    /// # Accuracy
    /// Reproduces the states at the nodes exactly; between nodes it is the
    /// interpolating polynomial, checked against spiceypy on the same file
    /// (`tests/tracking.rs`, `type13_reader_matches_spice` and
    /// `spice_written_type9_and_type13_files_read_as_spice_reads_them`).
    pub fn evaluate(&self, t: &TdbSeconds) -> StateKm {
        if !self.hermite_tables.is_empty() {
            // Type 13 with a small window: the window's table once, then a
            // nested evaluation (value and derivative) per call.
            let f = self.window_start(t);
            let table = self.hermite_tables[f].get_or_init(|| Box::new(self.hermite_table(f)));
            let (p, dp) = newton_value_and_derivative(&table.coef[..2 * self.window], |k| t.minus_f64_s(self.epochs_s[f + k / 2]));
            return StateKm { position_km: [p[0], p[1], p[2]], velocity_km_s: [dp[0], dp[1], dp[2]] };
        }
        // Scratch arrays on the stack sized for the window: small windows
        // (the usual 8–16 states) do not clear buffers for 64.
        if self.window <= SMALL_WINDOW { self.evaluate_in::<SMALL_WINDOW, { 2 * SMALL_WINDOW }>(t) } else { self.evaluate_in::<MAX_WINDOW, { 2 * MAX_WINDOW }>(t) }
    }

    /// [`Self::evaluate`] with scratch room for `CAP` states (`CAP2` = 2·CAP).
    fn evaluate_in<const CAP: usize, const CAP2: usize>(&self, t: &TdbSeconds) -> StateKm {
        let f = self.window_start(t);
        let w = self.window;
        // Abscissae relative to t (two-part subtraction keeps precision).
        let mut x = [0.0f64; CAP];
        for (j, i) in (f..f + w).enumerate() {
            x[j] = -t.minus_f64_s(self.epochs_s[i]);
        }
        let x = &x[..w];
        // The three axes share the abscissae: interpolated together, one
        // lane per axis (the same operations per lane as one axis alone, so
        // the results are those of the per-axis routines bit for bit, and
        // the divisions by the shared node differences vectorise).
        let mut s = StateKm::default();
        let (p, v) = self.window_lanes::<CAP>(f);
        if self.hermite {
            let (val, der) = hermite_at_zero_lanes::<CAP2>(x, &p[..w], &v[..w]);
            s.position_km = [val[0], val[1], val[2]];
            s.velocity_km_s = [der[0], der[1], der[2]];
        } else {
            let (pos, vel) = (lagrange_at_zero_lanes::<CAP>(x, &p[..w]), lagrange_at_zero_lanes::<CAP>(x, &v[..w]));
            s.position_km = [pos[0], pos[1], pos[2]];
            s.velocity_km_s = [vel[0], vel[1], vel[2]];
        }
        s
    }
}

/// Windows up to this many states use small scratch arrays.
const SMALL_WINDOW: usize = 16;

/// Lanes of the multi-axis interpolation (three axes and one idle lane, a
/// width the compiler maps onto vector registers).
const LANES: usize = 4;

/// [`lagrange_at_zero`] for several ordinates sharing the abscissae, one per
/// lane: each lane is computed with exactly the scalar routine's operations.
/// `CAP` ≥ `x.len()` sizes the scratch array.
fn lagrange_at_zero_lanes<const CAP: usize>(x: &[f64], y: &[[f64; LANES]]) -> [f64; LANES] {
    let n = x.len();
    let mut p = [[0.0f64; LANES]; CAP];
    p[..n].copy_from_slice(y);
    for m in 1..n {
        for i in 0..n - m {
            let (a, b, d) = (x[i + m], x[i], x[i + m] - x[i]);
            let next = p[i + 1];
            for (l, q) in p[i].iter_mut().enumerate() {
                *q = (a * *q - b * next[l]) / d;
            }
        }
    }
    p[0]
}

/// [`hermite_at_zero`] for several ordinates sharing the abscissae, one per
/// lane: value and derivative at 0, each lane computed with exactly the
/// scalar routine's operations.
/// `CAP2` ≥ `2 · x.len()` sizes the scratch arrays.
fn hermite_at_zero_lanes<const CAP2: usize>(x: &[f64], y: &[[f64; LANES]], dy: &[[f64; LANES]]) -> ([f64; LANES], [f64; LANES]) {
    let coef = hermite_coefficients_lanes::<CAP2>(x, y, dy);
    newton_value_and_derivative(&coef[..2 * x.len()], |k| 0.0 - x[k / 2])
}

/// Value and derivative of a Newton-form polynomial with coefficients
/// `coef` (one lane per ordinate) at the point whose distances to the
/// nodes are `t_minus_node(k)` (t − z_k), by nested multiplication.
#[inline]
fn newton_value_and_derivative(coef: &[[f64; LANES]], t_minus_node: impl Fn(usize) -> f64) -> ([f64; LANES], [f64; LANES]) {
    let n = coef.len();
    let (mut p, mut dp) = (coef[n - 1], [0.0f64; LANES]);
    for k in (0..n - 1).rev() {
        let mz = t_minus_node(k);
        for l in 0..LANES {
            dp[l] = dp[l] * mz + p[l];
            p[l] = p[l] * mz + coef[k][l];
        }
    }
    (p, dp)
}

/// Newton coefficients (divided differences on the doubled abscissae
/// x₀, x₀, x₁, x₁, …) of the Hermite interpolant through values `y` and
/// derivatives `dy`, one lane per ordinate.
fn hermite_coefficients_lanes<const CAP2: usize>(x: &[f64], y: &[[f64; LANES]], dy: &[[f64; LANES]]) -> [[f64; LANES]; CAP2] {
    let n = 2 * x.len();
    let mut z = [0.0f64; CAP2];
    for k in 0..n {
        z[k] = x[k / 2];
    }
    let mut coef = [[0.0f64; LANES]; CAP2];
    coef[0] = y[0];
    let mut col = [[0.0f64; LANES]; CAP2];
    for k in 0..n - 1 {
        if k % 2 == 0 {
            col[k] = dy[k / 2];
        } else {
            let (hi, lo, d) = (y[(k + 1) / 2], y[k / 2], z[k + 1] - z[k]);
            for l in 0..LANES {
                col[k][l] = (hi[l] - lo[l]) / d;
            }
        }
    }
    coef[1] = col[0];
    for m in 2..n {
        for k in 0..n - m {
            let d = z[k + m] - z[k];
            let next = col[k + 1];
            for (l, c) in col[k].iter_mut().enumerate() {
                *c = (next[l] - *c) / d;
            }
        }
        coef[m] = col[0];
    }
    coef
}

/// Lagrange interpolation at 0 through (x_i, y_i) (Neville's scheme); the
/// one-axis reference of [`lagrange_at_zero_lanes`].
#[cfg(test)]
fn lagrange_at_zero(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len();
    let mut p = [0.0f64; MAX_WINDOW];
    p[..n].copy_from_slice(y);
    for m in 1..n {
        for i in 0..n - m {
            p[i] = (x[i + m] * p[i] - x[i] * p[i + 1]) / (x[i + m] - x[i]);
        }
    }
    p[0]
}

/// Hermite interpolation at 0 through values y_i and derivatives dy_i at
/// x_i: value and derivative (divided differences on doubled nodes); the
/// one-axis reference of [`hermite_at_zero_lanes`].
#[cfg(test)]
fn hermite_at_zero(x: &[f64], y: &[f64], dy: &[f64]) -> (f64, f64) {
    // Stack buffers: windows hold at most MAX_WINDOW states (checked when the
    // segment is read), so 2·MAX_WINDOW doubled nodes.
    let n = 2 * x.len();
    let mut z = [0.0f64; 2 * MAX_WINDOW];
    for k in 0..n {
        z[k] = x[k / 2];
    }
    // Newton divided-difference coefficients, column by column in place
    // (ascending k reads col[k + 1] before it is overwritten).
    let mut coef = [0.0f64; 2 * MAX_WINDOW];
    coef[0] = y[0];
    // First column: derivatives on repeated nodes.
    let mut col = [0.0f64; 2 * MAX_WINDOW];
    for k in 0..n - 1 {
        col[k] = if k % 2 == 0 { dy[k / 2] } else { (y[(k + 1) / 2] - y[k / 2]) / (z[k + 1] - z[k]) };
    }
    coef[1] = col[0];
    for m in 2..n {
        for k in 0..n - m {
            col[k] = (col[k + 1] - col[k]) / (z[k + m] - z[k]);
        }
        coef[m] = col[0];
    }
    // Evaluate the Newton form and its derivative at 0 (Horner).
    let (mut p, mut dp) = (coef[n - 1], 0.0);
    for k in (0..n - 1).rev() {
        dp = dp * (0.0 - z[k]) + p;
        p = p * (0.0 - z[k]) + coef[k];
    }
    (p, dp)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hermite_and_lagrange_reproduce_polynomials() {
        // Cubic f(t) = 1 − 2t + 0.5t² + 0.1t³, f' = −2 + t + 0.3t²; evaluate at t0 via shifted abscissae.
        let f = |t: f64| 1.0 - 2.0 * t + 0.5 * t * t + 0.1 * t * t * t;
        let df = |t: f64| -2.0 + t + 0.3 * t * t;
        let t0 = 0.7;
        let nodes = [0.0, 1.0, 2.5];
        let x: Vec<f64> = nodes.iter().map(|n| n - t0).collect();
        let (v, d) = hermite_at_zero(&x, &nodes.map(f), &nodes.map(df));
        assert!((v - f(t0)).abs() < 1e-13 && (d - df(t0)).abs() < 1e-13, "{v} {d}");
        let x4 = [0.0 - t0, 1.0 - t0, 2.5 - t0, 4.0 - t0];
        assert!((lagrange_at_zero(&x4, &[0.0, 1.0, 2.5, 4.0].map(f)) - f(t0)).abs() < 1e-13);
    }

    #[test]
    fn lane_interpolation_equals_the_one_axis_routines_bit_for_bit() {
        // Pseudo-random windows of 2..=16 nodes: each lane must be exactly
        // the scalar routine's result (same operations, same order).
        let mut seed = 0x2545_f491_4f6c_dd1du64;
        let mut rnd = || (crate::xorshift64(&mut seed) >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
        for w in 2..=16 {
            let x: Vec<f64> = (0..w).map(|k| (k as f64 - w as f64 / 2.0) * 60.0 + rnd()).collect();
            let y: Vec<[f64; LANES]> = (0..w).map(|_| [rnd() * 1e8, rnd() * 1e5, rnd(), 0.0]).collect();
            let dy: Vec<[f64; LANES]> = (0..w).map(|_| [rnd() * 30.0, rnd(), rnd() * 1e-3, 0.0]).collect();
            let (hv, hd) = hermite_at_zero_lanes::<{ 2 * MAX_WINDOW }>(&x, &y, &dy);
            let lv = lagrange_at_zero_lanes::<MAX_WINDOW>(&x, &y);
            // The small-window scratch sizes give the same bits.
            let (hs, hds) = hermite_at_zero_lanes::<{ 2 * SMALL_WINDOW }>(&x, &y, &dy);
            assert_eq!((hs.map(f64::to_bits), hds.map(f64::to_bits)), (hv.map(f64::to_bits), hd.map(f64::to_bits)));
            assert_eq!(lagrange_at_zero_lanes::<SMALL_WINDOW>(&x, &y).map(f64::to_bits), lv.map(f64::to_bits));
            for l in 0..3 {
                let (yl, dyl): (Vec<f64>, Vec<f64>) = (y.iter().map(|r| r[l]).collect(), dy.iter().map(|r| r[l]).collect());
                let (v, d) = hermite_at_zero(&x, &yl, &dyl);
                assert_eq!((hv[l].to_bits(), hd[l].to_bits()), (v.to_bits(), d.to_bits()), "hermite w={w} lane {l}");
                assert_eq!(lv[l].to_bits(), lagrange_at_zero(&x, &yl).to_bits(), "lagrange w={w} lane {l}");
            }
        }
    }

    #[test]
    fn two_part_time_arithmetic() {
        let t = TdbSeconds::new(100, 1.25);
        assert_eq!((t.whole_s, t.frac_s), (101, 0.25));
        let u = t.plus_s(-0.5);
        assert_eq!((u.whole_s, u.frac_s), (100, 0.75));
        // minus keeps the fraction for large times.
        let big = TdbSeconds::new(800_000_000, 1e-10);
        assert_eq!(big.minus_f64_s(800_000_000.0), 1e-10);
    }

    #[test]
    fn chebyshev_of_a_line_is_exact() {
        // One type-2 record: x = 3 + 2τ, y = −1, z = τ² expressed as
        // T2 = 2τ² − 1 → τ² = (T0 + T2)/2.
        let rec = vec![10.0, 5.0, 3.0, 2.0, 0.0, -1.0, 0.0, 0.0, 0.5, 0.0, 0.5];
        let mut d = rec.clone();
        d.extend([5.0, 10.0, rec.len() as f64, 1.0]);
        let c = cheb(&d).unwrap();
        let seg = Segment { target: 1, center: 0, frame: 1, spk_type: 2, start_s: 5.0, end_s: 15.0, data: SegmentData::Chebyshev(c) };
        let t = TdbSeconds::new(12, 0.5); // τ = 0.5
        let s = seg.evaluate(&t).unwrap();
        assert_eq!(s.position_km, [4.0, -1.0, 0.25]);
        // d/dt = d/dτ / radius: x' = 2/5, z' = 2τ/5.
        assert_eq!(s.velocity_km_s, [0.4, 0.0, 0.2]);
        assert!(seg.covers(&t));
        assert!(!seg.covers(&TdbSeconds::new(15, 1e-9)));
    }

    #[test]
    fn corrupt_directories_are_errors() {
        assert!(cheb(&[0.0; 8]).is_err());
        let mut d = vec![10.0, 5.0, 3.0, 2.0, 0.0, -1.0, 0.0, 0.0, 0.5, 0.0, 0.5];
        d.extend([5.0, 10.0, 11.0, 2.0]); // claims 2 records, holds 1
        assert!(cheb(&d).is_err());
    }

    #[test]
    fn a_segment_inside_the_kernel_buffer_reads_from_its_own_offset() {
        let rec = [10.0, 5.0, 3.0, 2.0, 0.0, -1.0, 0.0, 0.0, 0.5, 0.0, 0.5];
        let mut buf = vec![f64::NAN; 7]; // another segment's doubles before it
        buf.extend(rec);
        buf.extend([5.0, 10.0, rec.len() as f64, 1.0]);
        buf.extend([f64::NAN; 3]); // and after it
        let c = parse_chebyshev(&Arc::new(KernelBytes::Owned(buf.clone(), buf.len() * 8)), 7, rec.len() + 4, false).unwrap();
        let seg = Segment { target: 1, center: 0, frame: 1, spk_type: 2, start_s: 5.0, end_s: 15.0, data: SegmentData::Chebyshev(c) };
        assert_eq!(seg.position(&TdbSeconds::new(12, 0.5)), Some([4.0, -1.0, 0.25]));
    }

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

    #[test]
    fn cached_hermite_tables_agree_with_the_per_call_interpolation() {
        // The demo spacecraft (type 13, window 6): the table evaluated per
        // window (epochs from the window's first) against the divided
        // differences formed per call (epochs from t), 20 000 epochs:
        // 1 µm and 1 nm/s (the coefficients differ only in how the epoch
        // differences round).
        const CACHED_VS_PER_CALL_KM: f64 = 1e-9;
        const CACHED_VS_PER_CALL_KM_S: f64 = 1e-12;
        let k = SpkKernel::load(&Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo/lapse1.bsp")).unwrap();
        let SegmentData::Discrete(d) = &k.segments[0].data else { panic!("type 13 expected") };
        assert!(d.hermite && !d.hermite_tables.is_empty());
        let (lo, hi) = (d.epochs_s[0], d.epochs_s[d.epochs_s.len() - 1]);
        let mut x = 0x1234_5678_9abc_def1u64;
        let (mut wp, mut wv) = (0.0f64, 0.0f64);
        for i in 0..20_000 {
            let s = if i % 100 == 0 { d.epochs_s[(i / 100) % d.epochs_s.len()] } else { lo + (crate::xorshift64(&mut x) >> 11) as f64 / (1u64 << 53) as f64 * (hi - lo) };
            let t = TdbSeconds::new(s.floor() as i64, s - s.floor());
            let a = d.evaluate(&t);
            let b = d.evaluate_in::<SMALL_WINDOW, { 2 * SMALL_WINDOW }>(&t);
            for c in 0..3 {
                wp = wp.max((a.position_km[c] - b.position_km[c]).abs());
                wv = wv.max((a.velocity_km_s[c] - b.velocity_km_s[c]).abs());
            }
            if i % 100 == 0 {
                // At a node: the stored state.
                let j = (i / 100) % d.epochs_s.len();
                assert_eq!(a.position_km, [d.states[j][0], d.states[j][1], d.states[j][2]]);
            }
        }
        assert!(wp <= CACHED_VS_PER_CALL_KM && wv <= CACHED_VS_PER_CALL_KM_S, "{wp} km, {wv} km/s");
    }

    /// A type 2 segment made of these doubles alone.
    fn cheb(d: &[f64]) -> Result<ChebyshevData, SegmentFormatError> {
        parse_chebyshev(&Arc::new(KernelBytes::Owned(d.to_vec(), d.len() * 8)), 0, d.len(), false)
    }
}
