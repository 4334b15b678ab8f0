//! SPK types 2 and 3: Chebyshev position (and velocity) records, evaluated
//! on a two-part TDB epoch.
//!
//! # References
//! NAIF SPK Required Reading (`spk.req`), types 2 and 3; the SPICE routines
//! SPKR02/SPKE02 and SPKR03/SPKE03 (record selection and evaluation).

use std::sync::Arc;

use super::daf::KernelBytes;
use super::spk::{SegmentFormatError, StateKm};
use crate::time::TdbSeconds;

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
    pub(crate) records: Arc<KernelBytes>,
    /// Index in `records` of the first record's first double.
    pub(crate) first: usize,
}

/// Maximum Chebyshev degree we accept (DE kernels use ≤ 13; guards corrupt files).
pub(crate) const MAX_COEFFS: usize = 64;

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

    /// State at `t` (inside the records' span).
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
    pub fn state(&self, t: &TdbSeconds) -> StateKm {
        let c = self;
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
        s
    }

    /// Position only (km), for callers that need no velocity (Shapiro
    /// bodies): the same sums as [`Self::state`] in the same order, so
    /// the result is bit-identical to its `position_km`, without the
    /// derivative recurrence (about half the work).
    ///
    /// # Accuracy
    /// That of [`Self::state`] (bit-identical positions; checked on the
    /// 12 000 DE421 states of `tests/geometry_reference.rs`).
    ///
    /// # References
    /// NAIF SPK Required Reading, types 2 and 3; SPICE SPKE02.
    pub fn position(&self, t: &TdbSeconds) -> [f64; 3] {
        let c = self;
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
        out
    }
}

/// Types 2/3 in place: the records stay in the kernel's buffer `buf`,
/// whose doubles `first .. first + n_doubles` are the segment.
///
/// # References
/// NAIF SPK Required Reading, types 2 and 3 (record layout and directory).
pub(crate) fn parse_chebyshev(buf: &Arc<KernelBytes>, first: usize, n_doubles: usize, with_velocity: bool) -> Result<ChebyshevData, SegmentFormatError> {
    if n_doubles < 4 + 5 {
        return Err(SegmentFormatError(format!("only {n_doubles} doubles")));
    }
    let seg = &buf.doubles()[first..first + n_doubles];
    let [init_s, interval_s, rsize, n] = [seg[n_doubles - 4], seg[n_doubles - 3], seg[n_doubles - 2], seg[n_doubles - 1]];
    if !(init_s.is_finite() && interval_s.is_finite() && interval_s > 0.0) {
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ephemeris::{Segment, SegmentData};

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

    /// A type 2 segment made of these doubles alone.
    fn cheb(d: &[f64]) -> Result<ChebyshevData, SegmentFormatError> {
        parse_chebyshev(&Arc::new(KernelBytes::Owned(d.to_vec(), d.len() * 8)), 0, d.len(), false)
    }
}
