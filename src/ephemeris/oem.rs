//! CCSDS Orbit Ephemeris Messages (OEM) in KVN form: reading, and turning
//! each metadata block into an interpolable segment.
//!
//! Supported: header keywords, any number of `META_START … META_STOP` blocks
//! with `CENTER_NAME`, `REF_FRAME` (ICRF, EME2000 — taken as ICRF, as NAIF's
//! J2000 frame is —, GCRF with an Earth centre), `TIME_SYSTEM` (TDB, TT,
//! UTC), `START_TIME`/`STOP_TIME`, `USEABLE_START_TIME`/`USEABLE_STOP_TIME`,
//! `INTERPOLATION` (HERMITE or LAGRANGE) and `INTERPOLATION_DEGREE`; data
//! lines `epoch x y z vx vy vz [ax ay az]` (km, km/s); `COMMENT` lines;
//! covariance blocks are skipped. Epochs are `YYYY-MM-DDThh:mm:ss[.f]` or
//! `YYYY-DDDThh:mm:ss[.f]`.
//!
//! # References
//! CCSDS 502.0-B-2 (Orbit Data Messages, Blue Book, 2009), sec. 5 (OEM) and
//! 7 (KVN syntax).

use std::path::{Path, PathBuf};

use super::spk::{DiscreteStates, Segment, SegmentData, SpkKernel};
use crate::time::calendar::{is_valid_date, mjd_from_ymd};
use crate::time::femto::FS_PER_S;
use crate::time::relativistic::J2000_FS;
use crate::time::{TimeScale, TimeScales, parse_epoch};

/// Errors of OEM reading.
#[derive(Debug, thiserror::Error)]
pub enum OemError {
    #[error("cannot read OEM {path}: {source}")]
    Io { path: PathBuf, source: std::io::Error },
    #[error("OEM {path}: line {line}: {reason}")]
    Format { path: PathBuf, line: usize, reason: String },
}

#[derive(Default)]
struct Meta {
    center: Option<String>,
    frame: Option<String>,
    time_system: Option<String>,
    start: Option<String>,
    stop: Option<String>,
    useable_start: Option<String>,
    useable_stop: Option<String>,
    interpolation: Option<String>,
    degree: Option<usize>,
}

/// Reads an OEM file as a kernel whose segments all have `target`.
pub fn load_oem(path: &Path, target: i32, ts: &TimeScales) -> Result<SpkKernel, OemError> {
    let text = std::fs::read_to_string(path).map_err(|source| OemError::Io { path: path.into(), source })?;
    parse_oem(&text, path, target, ts)
}

/// Day-of-year epochs (YYYY-DDDThh:mm:ss) → calendar form for the parser.
fn normalise_epoch(s: &str) -> Option<String> {
    let (date, time) = s.split_once('T').unwrap_or((s, "00:00:00"));
    let parts: Vec<&str> = date.split('-').collect();
    if parts.len() == 2 && parts[0].len() == 4 && parts[1].len() == 3 {
        let y: i64 = parts[0].parse().ok()?;
        let doy: i64 = parts[1].parse().ok()?;
        let mjd = mjd_from_ymd(y, 1, 1) + doy - 1;
        let (yy, mm, dd) = crate::time::calendar::ymd_from_mjd(mjd);
        if yy != y || !is_valid_date(yy, mm, dd) {
            return None;
        }
        return Some(format!("{yy:04}-{mm:02}-{dd:02}T{time}"));
    }
    Some(s.to_string())
}

/// Parses OEM text; `path` names it in errors.
pub fn parse_oem(text: &str, path: &Path, target: i32, ts: &TimeScales) -> Result<SpkKernel, OemError> {
    let err = |line: usize, reason: String| OemError::Format { path: path.into(), line, reason };
    let mut segments = Vec::new();
    let mut lines = text.lines().enumerate().peekable();
    let mut version_seen = false;
    while let Some((i, raw)) = lines.next() {
        let l = raw.trim();
        if l.is_empty() || l.starts_with("COMMENT") {
            continue;
        }
        if let Some(v) = l.strip_prefix("CCSDS_OEM_VERS") {
            version_seen = v.trim_start().starts_with('=');
            continue;
        }
        if l.starts_with("CREATION_DATE") || l.starts_with("ORIGINATOR") || l.starts_with("MESSAGE_ID") {
            continue;
        }
        if l != "META_START" {
            return Err(err(i + 1, format!("expected META_START or a header keyword, found '{l}'")));
        }
        if !version_seen {
            return Err(err(i + 1, "no CCSDS_OEM_VERS line before the first META_START".into()));
        }
        // Metadata block.
        let mut m = Meta::default();
        let meta_line = i + 1;
        loop {
            let Some((j, raw)) = lines.next() else { return Err(err(meta_line, "META_START without META_STOP".into())) };
            let l = raw.trim();
            if l == "META_STOP" {
                break;
            }
            if l.is_empty() || l.starts_with("COMMENT") {
                continue;
            }
            let (k, v) = l.split_once('=').ok_or_else(|| err(j + 1, format!("expected KEY = VALUE, found '{l}'")))?;
            let (k, v) = (k.trim(), v.trim().to_string());
            match k {
                "OBJECT_NAME"
                | "OBJECT_ID"
                | "CENTER_NAME"
                | "REF_FRAME"
                | "REF_FRAME_EPOCH"
                | "TIME_SYSTEM"
                | "START_TIME"
                | "STOP_TIME"
                | "USEABLE_START_TIME"
                | "USEABLE_STOP_TIME"
                | "INTERPOLATION"
                | "INTERPOLATION_DEGREE" => {}
                other => return Err(err(j + 1, format!("unknown metadata keyword '{other}'"))),
            }
            match k {
                "CENTER_NAME" => m.center = Some(v),
                "REF_FRAME" => m.frame = Some(v),
                "TIME_SYSTEM" => m.time_system = Some(v),
                "START_TIME" => m.start = Some(v),
                "STOP_TIME" => m.stop = Some(v),
                "USEABLE_START_TIME" => m.useable_start = Some(v),
                "USEABLE_STOP_TIME" => m.useable_stop = Some(v),
                "INTERPOLATION" => m.interpolation = Some(v.to_ascii_uppercase()),
                "INTERPOLATION_DEGREE" => m.degree = Some(v.parse().map_err(|_| err(j + 1, format!("INTERPOLATION_DEGREE '{v}' is not a whole number")))?),
                _ => {}
            }
        }
        let need = |o: &Option<String>, k: &str| o.clone().ok_or_else(|| err(meta_line, format!("metadata block lacks {k}")));
        let center_name = need(&m.center, "CENTER_NAME")?;
        let center = super::naif::body_id(&center_name, &[]).ok_or_else(|| err(meta_line, format!("CENTER_NAME '{center_name}' is not a known body")))?;
        let frame = need(&m.frame, "REF_FRAME")?;
        match frame.as_str() {
            "ICRF" | "EME2000" => {}
            "GCRF" if center == 399 => {}
            other => return Err(err(meta_line, format!("REF_FRAME '{other}' is not supported (ICRF, EME2000, or GCRF with CENTER_NAME = EARTH)"))),
        }
        let scale = match need(&m.time_system, "TIME_SYSTEM")?.as_str() {
            "TDB" => TimeScale::Tdb,
            "TT" => TimeScale::Tt,
            "UTC" => TimeScale::Utc,
            other => return Err(err(meta_line, format!("TIME_SYSTEM '{other}' is not supported (TDB, TT, UTC)"))),
        };
        let to_tdb_s = |s: &str, line: usize| -> Result<f64, OemError> {
            let norm = normalise_epoch(s).ok_or_else(|| err(line, format!("epoch '{s}' is not a date")))?;
            let e = parse_epoch(ts, scale, &norm).map_err(|e| err(line, e.to_string()))?;
            let e = ts.convert(e, TimeScale::Tdb, 0.0).map_err(|e| err(line, e.to_string()))?;
            let fs = e.label_fs() - J2000_FS;
            Ok((fs / FS_PER_S) as f64 + ((fs % FS_PER_S) as f64) / FS_PER_S as f64)
        };
        let start = to_tdb_s(&need(&m.start, "START_TIME")?, meta_line)?;
        let stop = to_tdb_s(&need(&m.stop, "STOP_TIME")?, meta_line)?;
        let u_start = match &m.useable_start {
            Some(s) => to_tdb_s(s, meta_line)?,
            None => start,
        };
        let u_stop = match &m.useable_stop {
            Some(s) => to_tdb_s(s, meta_line)?,
            None => stop,
        };
        // Data lines until the next META_START (or covariance / end).
        let mut epochs_s = Vec::new();
        let mut states: Vec<[f64; 6]> = Vec::new();
        while let Some((j, raw)) = lines.peek().copied() {
            let l = raw.trim();
            if l == "META_START" {
                break;
            }
            lines.next();
            if l.is_empty() || l.starts_with("COMMENT") {
                continue;
            }
            if l == "COVARIANCE_START" {
                for (_, r) in lines.by_ref() {
                    if r.trim() == "COVARIANCE_STOP" {
                        break;
                    }
                }
                continue;
            }
            let f: Vec<&str> = l.split_whitespace().collect();
            if f.len() != 7 && f.len() != 10 {
                return Err(err(j + 1, format!("expected 'epoch x y z vx vy vz [ax ay az]', found {} fields", f.len())));
            }
            let t = to_tdb_s(f[0], j + 1)?;
            let mut st = [0.0f64; 6];
            for k in 0..6 {
                st[k] = f[k + 1].parse().map_err(|_| err(j + 1, format!("'{}' is not a number", f[k + 1])))?;
                if !st[k].is_finite() {
                    return Err(err(j + 1, format!("'{}' is not finite", f[k + 1])));
                }
            }
            if let Some(prev) = epochs_s.last()
                && t <= *prev
            {
                return Err(err(j + 1, "epochs must increase".into()));
            }
            epochs_s.push(t);
            states.push(st);
        }
        if epochs_s.len() < 2 {
            return Err(err(meta_line, "a segment needs at least two states".into()));
        }
        let degree = m.degree.unwrap_or(1);
        let (hermite, window) = match m.interpolation.as_deref().unwrap_or("LAGRANGE") {
            "HERMITE" => (true, degree.div_ceil(2).max(1)),
            "LAGRANGE" | "LINEAR" => (false, degree + 1),
            other => return Err(err(meta_line, format!("INTERPOLATION '{other}' is not supported (HERMITE, LAGRANGE)"))),
        };
        if window > epochs_s.len() || window > 32 {
            return Err(err(meta_line, format!("INTERPOLATION_DEGREE {degree} needs more states than the segment's {}", epochs_s.len())));
        }
        let (lo, hi) = (u_start.max(epochs_s[0]), u_stop.min(epochs_s[epochs_s.len() - 1]));
        if hi < lo {
            return Err(err(meta_line, "the useable window holds no data".into()));
        }
        segments.push(Segment {
            target,
            center,
            frame: 1,
            spk_type: if hermite { 13 } else { 9 },
            start_s: lo,
            end_s: hi,
            data: SegmentData::Discrete(DiscreteStates::new(epochs_s, states, window, hermite)),
        });
    }
    if segments.is_empty() {
        return Err(err(0, "no META_START block: not an OEM".into()));
    }
    Ok(SpkKernel { path: path.into(), segments })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ephemeris::TdbSeconds;

    const OEM: &str = "CCSDS_OEM_VERS = 2.0
CREATION_DATE = 2026-12-01T00:00:00
ORIGINATOR = LAPSE TEST
META_START
OBJECT_NAME = TEST CRAFT
OBJECT_ID = 2026-999A
CENTER_NAME = SUN
REF_FRAME = ICRF
TIME_SYSTEM = TDB
START_TIME = 2000-01-01T12:00:00
STOP_TIME = 2000-001T12:03:00
INTERPOLATION = LAGRANGE
INTERPOLATION_DEGREE = 2
META_STOP
COMMENT positions x = 100 + 2 t + 0.01 t^2 (t in s)
2000-01-01T12:00:00.000 100.0 0 0 2.0 0 0
2000-01-01T12:01:00.000 256.0 0 0 3.2 0 0
2000-01-01T12:02:00.000 484.0 0 0 4.4 0 0
2000-01-01T12:03:00.000 784.0 0 0 5.6 0 0
";

    #[test]
    fn lagrange_oem_is_exact_for_a_quadratic() {
        let ts = TimeScales::builtin();
        let k = parse_oem(OEM, Path::new("t.oem"), -5, &ts).unwrap();
        let s = &k.segments[0];
        assert_eq!((s.target, s.center, s.spk_type), (-5, 10, 9));
        let v = s.evaluate(&TdbSeconds::new(90, 0.0)).unwrap();
        assert!((v.position_km[0] - (100.0 + 180.0 + 81.0)).abs() < 1e-9, "{:?}", v.position_km);
        assert!((v.velocity_km_s[0] - 3.8).abs() < 1e-12);
    }

    #[test]
    fn malformed_messages_name_the_line() {
        let ts = TimeScales::builtin();
        let bad = OEM.replace("256.0 0 0", "25x.0 0 0");
        let e = parse_oem(&bad, Path::new("b.oem"), -5, &ts).unwrap_err().to_string();
        assert!(e.contains("b.oem") && e.contains("line 17"), "{e}");
        let e = parse_oem(&OEM.replace("META_STOP\n", ""), Path::new("b.oem"), -5, &ts).unwrap_err().to_string();
        assert!(e.contains("KEY = VALUE") || e.contains("META_STOP"), "{e}");
        let e = parse_oem(&OEM.replace("ICRF", "ITRF"), Path::new("b.oem"), -5, &ts).unwrap_err().to_string();
        assert!(e.contains("REF_FRAME 'ITRF'"), "{e}");
        assert!(parse_oem("hello", Path::new("b.oem"), -5, &ts).is_err());
        assert!(parse_oem(&OEM.replace("2000-01-01T12:02:00.000", "2000-01-01T11:02:00.000"), Path::new("b.oem"), -5, &ts).is_err());
    }
}
