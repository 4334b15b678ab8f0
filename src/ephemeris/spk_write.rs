//! Writing an SPK file with one type 13 (Hermite, unequal steps) segment.
//!
//! lapse writes the DAF container itself rather than through anise 0.10.6,
//! whose writer produces files that SPICE readers decode wrongly when the
//! state count is a multiple of 100 (found here: spiceypy decoded such files
//! wrongly; NAIF SPK Required Reading, type 13, for the directory of every
//! 100th epoch). Every file written
//! here is read back by spiceypy in the tests.
//!
//! # References
//! NAIF DAF Required Reading (`daf.req`): file record, summary and name
//! records, addresses; NAIF SPK Required Reading (`spk.req`): segment
//! summary (ND = 2, NI = 6) and type 13 layout.

use std::path::{Path, PathBuf};

/// Errors of writing a type 13 segment.
#[derive(Debug, thiserror::Error)]
pub enum SpkWriteError {
    #[error("type 13 segment: {0}")]
    Invalid(String),
    #[error("cannot write {path}: {source}")]
    Io { path: PathBuf, source: std::io::Error },
}

const RECORD: usize = 1024;
const DOUBLES_PER_RECORD: usize = 128;
/// FTP validation string of the DAF file record (DAF Required Reading).
const FTPSTR: &[u8] = b"FTPSTR:\r:\n:\r\n:\r\x00:\x81:\x10\xce:ENDFTP";

/// One type 13 segment to write.
#[derive(Clone, Debug)]
pub struct Type13Segment<'a> {
    pub target: i32,
    pub center: i32,
    /// NAIF frame code (1 = J2000, i.e. ICRF for DE kernels).
    pub frame: i32,
    /// Epochs, TDB seconds past J2000, strictly increasing.
    pub epochs_s: &'a [f64],
    /// States (km, km/s).
    pub states: &'a [[f64; 6]],
    /// Interpolation window (states); the Hermite degree is 2·window − 1 ≤ 15.
    pub window: usize,
    /// Segment name (≤ 40 characters).
    pub name: &'a str,
}

/// Builds the bytes of an SPK file holding one type 13 segment
/// (little-endian IEEE, "LTL-IEEE").
pub fn type13_bytes(seg: &Type13Segment) -> Result<Vec<u8>, SpkWriteError> {
    let n = seg.epochs_s.len();
    if n < 2 || seg.states.len() != n {
        return Err(SpkWriteError::Invalid(format!("need ≥ 2 epochs and one state per epoch ({} epochs, {} states)", n, seg.states.len())));
    }
    if !(1..=8).contains(&seg.window) || seg.window > n {
        return Err(SpkWriteError::Invalid(format!("window {} must be 1..=8 and ≤ the number of states", seg.window)));
    }
    if seg.epochs_s.windows(2).any(|w| !(w[1] > w[0])) || seg.states.iter().flatten().chain(seg.epochs_s).any(|x| !x.is_finite()) {
        return Err(SpkWriteError::Invalid("epochs must increase strictly and all values be finite".into()));
    }
    // Segment data: states, epochs, directory (every 100th epoch), window − 1, N.
    let mut data: Vec<f64> = Vec::with_capacity(7 * n + n / 100 + 2);
    for s in seg.states {
        data.extend_from_slice(s);
    }
    data.extend_from_slice(seg.epochs_s);
    for k in 1..=((n - 1) / 100) {
        data.push(seg.epochs_s[100 * k - 1]);
    }
    data.push((seg.window - 1) as f64);
    data.push(n as f64);

    // Layout: record 1 file record, 2 summary, 3 name, data from record 4.
    let first_addr = 3 * DOUBLES_PER_RECORD + 1;
    let last_addr = first_addr + data.len() - 1;
    let mut out = vec![0u8; 3 * RECORD];
    // File record.
    out[0..8].copy_from_slice(b"DAF/SPK ");
    out[8..12].copy_from_slice(&2i32.to_le_bytes());
    out[12..16].copy_from_slice(&6i32.to_le_bytes());
    let ifname = format!("{:<60}", "lapse type 13 SPK");
    out[16..76].copy_from_slice(&ifname.as_bytes()[..60]);
    out[76..80].copy_from_slice(&2i32.to_le_bytes()); // FWARD
    out[80..84].copy_from_slice(&2i32.to_le_bytes()); // BWARD
    out[84..88].copy_from_slice(&((last_addr + 1) as i32).to_le_bytes()); // FREE
    out[88..96].copy_from_slice(b"LTL-IEEE");
    out[699..699 + FTPSTR.len()].copy_from_slice(FTPSTR);
    // Summary record: NEXT, PREV, NSUM, then the summary (2 doubles + 6 ints).
    let sr = RECORD;
    let put_f = |buf: &mut [u8], at: usize, v: f64| buf[at..at + 8].copy_from_slice(&v.to_le_bytes());
    put_f(&mut out, sr, 0.0);
    put_f(&mut out, sr + 8, 0.0);
    put_f(&mut out, sr + 16, 1.0);
    put_f(&mut out, sr + 24, seg.epochs_s[0]);
    put_f(&mut out, sr + 32, seg.epochs_s[n - 1]);
    let ints = [seg.target, seg.center, seg.frame, 13, first_addr as i32, last_addr as i32];
    for (k, v) in ints.iter().enumerate() {
        let at = sr + 40 + 4 * k;
        out[at..at + 4].copy_from_slice(&v.to_le_bytes());
    }
    // Name record.
    let name = format!("{:<40}", seg.name.chars().take(40).collect::<String>());
    out[2 * RECORD..2 * RECORD + 40].copy_from_slice(&name.as_bytes()[..40]);
    // Data records.
    for v in &data {
        out.extend_from_slice(&v.to_le_bytes());
    }
    let pad = (RECORD - out.len() % RECORD) % RECORD;
    out.extend(std::iter::repeat_n(0u8, pad));
    Ok(out)
}

/// Writes an SPK file with one type 13 segment.
pub fn write_type13(path: &Path, seg: &Type13Segment) -> Result<(), SpkWriteError> {
    let bytes = type13_bytes(seg)?;
    std::fs::write(path, bytes).map_err(|source| SpkWriteError::Io { path: path.into(), source })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ephemeris::{SpkKernel, TdbSeconds};

    #[test]
    fn written_segment_reads_back_through_anise_and_our_reader() {
        // A straight line x = 1000 + 2t km, v = 2 km/s: Hermite is exact.
        for n in [7usize, 100, 101, 250] {
            let epochs: Vec<f64> = (0..n).map(|i| 7.0e8 + 60.0 * i as f64).collect();
            let states: Vec<[f64; 6]> = epochs.iter().map(|t| [1000.0 + 2.0 * (t - 7.0e8), -5.0, 3.0, 2.0, 0.0, 0.0]).collect();
            let seg = Type13Segment { target: -901, center: 10, frame: 1, epochs_s: &epochs, states: &states, window: 6, name: "TEST" };
            let bytes = type13_bytes(&seg).unwrap();
            let k = SpkKernel::parse(&bytes, Path::new("mem.bsp")).unwrap();
            assert_eq!(k.segments.len(), 1);
            assert_eq!((k.segments[0].target, k.segments[0].center, k.segments[0].spk_type), (-901, 10, 13));
            let t = TdbSeconds::new(700_000_000 + 61, 0.5);
            let s = k.segments[0].evaluate(&t).unwrap();
            assert!((s.position_km[0] - (1000.0 + 2.0 * 61.5)).abs() < 1e-9, "n = {n}: {:?}", s.position_km);
            assert!((s.velocity_km_s[0] - 2.0).abs() < 1e-12);
        }
    }
}
