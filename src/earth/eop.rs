//! IERS Earth-orientation parameters: reading and interpolation.
//!
//! Two daily series at 0h UTC are read: IERS Rapid Service `finals2000A.all`
//! (the Bulletin B final values where the file has them, otherwise the
//! Bulletin A rapid values with their I/P flags for observed and predicted;
//! A and B differ by up to ≈ 0.1 ms in UT1 in past years) and
//! the IERS EOP 20 C04 series `eopc04.1962-now`. Values are interpolated with
//! 4-point Lagrange polynomials (the method of the IERS interpolation routine
//! recommended in IERS Conventions 2010, ch. 5.5.1 / 8); UT1 is interpolated
//! as UT1 − TAI, which has no leap-second steps, and UTC is recovered from
//! the leap-second table.
//!
//! # Accuracy
//! Interpolation between daily nodes adds < 1 µs in UT1 and < 10 µas in polar
//! motion against the tabulated smooth series. Sub-daily tidal and libration
//! variations (IERS Conventions 2010, sec. 5.5.1 and 5.5.3; up to ≈ 0.1 ms in
//! UT1 and ≈ 1 mas in polar motion, i.e. a few cm at the surface) are **not**
//! applied.

use std::path::{Path, PathBuf};

use crate::time::femto::{FS_PER_S, ratio_to_f64};
use crate::time::{Epoch, LeapSecondTable, TimeScale};

/// Arcseconds → radians.
pub const ARCSEC_TO_RAD: f64 = std::f64::consts::PI / (180.0 * 3600.0);

/// Errors of the EOP reader and interpolation.
#[derive(Debug, thiserror::Error)]
pub enum EopError {
    #[error("cannot read EOP file {path}: {source}")]
    Io { path: PathBuf, source: std::io::Error },
    #[error("EOP file {path}: line {line}: {reason}")]
    Format { path: PathBuf, line: usize, reason: String },
    #[error("EOP file {path}: UTC epoch MJD {mjd:.6} is outside the table (MJD {first} … {last})")]
    OutOfRange { path: PathBuf, mjd: f64, first: i64, last: i64 },
    #[error("EOP interpolation needs a UTC epoch, got {scale}")]
    WrongScale { scale: String },
    #[error("{path}: UT1 − UTC jumps by {eop_step} s on MJD {mjd}, but the leap-second table ({table}) has a step of {table_step} s there: the two disagree (a damaged or outdated leap-second file?)")]
    LeapMismatch { path: PathBuf, mjd: i64, eop_step: i64, table_step: i64, table: String },
    #[error("EOP at MJD {mjd}: {source}")]
    Time { mjd: i64, source: crate::time::TimeError },
}

/// One daily row at 0h UTC.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EopRow {
    pub mjd: i64,
    pub x_p_arcsec: f64,
    pub y_p_arcsec: f64,
    pub ut1_minus_utc_s: f64,
    /// Celestial pole offsets wrt IAU 2006/2000A, milliarcseconds (0 when absent).
    pub dx_mas: f64,
    pub dy_mas: f64,
    /// True when the row's values are predictions.
    pub predicted: bool,
    /// True when dX, dY were given (false: zero assumed).
    pub has_pole_offsets: bool,
    /// True when the values are IERS final ones (Bulletin B / C04).
    pub is_final: bool,
}

/// Interpolated Earth-orientation values at one UTC epoch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EopValues {
    pub ut1_minus_utc_s: f64,
    /// UT1 − TAI (s): continuous across leap seconds.
    pub ut1_minus_tai_s: f64,
    pub x_p_rad: f64,
    pub y_p_rad: f64,
    pub dx_rad: f64,
    pub dy_rad: f64,
    /// Any node used was a prediction.
    pub predicted: bool,
}

/// Which file layout a table came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum EopFormat {
    /// IERS Rapid Service `finals2000A.*` (Bulletin A columns).
    Finals2000A,
    /// IERS EOP C04 (`eopc04.1962-now`).
    C04,
}

/// A daily EOP table.
#[derive(Clone, Debug)]
pub struct EopTable {
    path: PathBuf,
    format: EopFormat,
    rows: Vec<EopRow>,
}

fn field(line: &str, a: usize, b: usize) -> &str {
    // 1-based inclusive byte columns, as in the IERS ReadMe.
    line.get(a - 1..b.min(line.len())).unwrap_or("").trim()
}

/// Whether a fixed-width line ends inside columns `a ..= b` with text in
/// them: a line cut mid-field, whose digits would read as a wrong value.
fn cut_inside(line: &str, a: usize, b: usize) -> bool {
    line.len() >= a && line.len() < b && !field(line, a, b).is_empty()
}

/// The finals2000A fields lapse reads (1-based inclusive columns).
const FINALS_FIELDS: [(usize, usize); 12] = [(8, 15), (17, 17), (19, 27), (38, 46), (58, 58), (59, 68), (98, 106), (117, 125), (135, 144), (145, 154), (155, 165), (166, 175)];

impl EopTable {
    /// Reads an EOP file, recognising its layout from its content.
    pub fn from_file(path: &Path) -> Result<Self, EopError> {
        let text = crate::io::digest::read_to_string_remembering(path).map_err(|source| EopError::Io { path: path.into(), source })?;
        Self::parse(&text, path)
    }

    /// Parses EOP text; `path` names it in errors.
    pub fn parse(text: &str, path: &Path) -> Result<Self, EopError> {
        let is_c04 = text.lines().take(20).any(|l| l.starts_with('#') && l.contains("C04"));
        let (rows, format) = if is_c04 { (parse_c04(text, path)?, EopFormat::C04) } else { (parse_finals(text, path)?, EopFormat::Finals2000A) };
        if rows.len() < 4 {
            return Err(EopError::Format { path: path.into(), line: 0, reason: format!("only {} daily rows; need at least 4", rows.len()) });
        }
        Ok(Self { path: path.into(), format, rows })
    }

    /// The rows, in MJD order.
    pub fn rows(&self) -> &[EopRow] {
        &self.rows
    }

    /// First and last MJD of the table.
    pub fn span_mjd(&self) -> (i64, i64) {
        (self.rows[0].mjd, self.rows[self.rows.len() - 1].mjd)
    }

    /// First MJD whose values are predictions, if any.
    pub fn first_predicted_mjd(&self) -> Option<i64> {
        self.rows.iter().find(|r| r.predicted).map(|r| r.mjd)
    }

    /// Checks the leap-second table against this table's UT1 − UTC: a jump
    /// of about one second between consecutive days must be a leap second of
    /// the table on the later day, and every leap second inside the span
    /// must show as such a jump (a table missing a line shifts every epoch
    /// after it by a second).
    pub fn check_leap_seconds(&self, leaps: &LeapSecondTable) -> Result<(), EopError> {
        let step_at = |mjd: i64| leaps.steps().windows(2).find(|w| w[1].mjd == mjd).map(|w| w[1].tai_minus_utc_s - w[0].tai_minus_utc_s);
        for w in self.rows.windows(2) {
            if w[1].mjd != w[0].mjd + 1 {
                continue;
            }
            let jump_s = w[1].ut1_minus_utc_s - w[0].ut1_minus_utc_s;
            let eop_step = if jump_s > 0.5 {
                1
            } else if jump_s < -0.5 {
                -1
            } else {
                0
            };
            let table_step = step_at(w[1].mjd).unwrap_or(0);
            if eop_step != table_step {
                return Err(EopError::LeapMismatch { path: self.path.clone(), mjd: w[1].mjd, eop_step, table_step, table: leaps.source_name().to_string() });
            }
        }
        Ok(())
    }

    /// The file's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The file's layout.
    pub fn format(&self) -> EopFormat {
        self.format
    }

    /// Interpolated values at a UTC epoch.
    ///
    /// # Accuracy
    /// See the module documentation; UT1 − UTC is continuous within a UTC day
    /// and steps by exactly one second at a leap second.
    ///
    /// # References
    /// IERS Conventions 2010, ch. 5.5.1 (interpolation of tabulated EOP);
    /// 4-point Lagrange interpolation (Abramowitz & Stegun 1964, eq. 25.2.13).
    pub fn at_utc(&self, leaps: &LeapSecondTable, utc: &Epoch) -> Result<EopValues, EopError> {
        if utc.scale() != TimeScale::Utc {
            return Err(EopError::WrongScale { scale: utc.scale().to_string() });
        }
        let day_len_fs = leaps.utc_day_length_s(utc.mjd_day()).map_err(|source| EopError::Time { mjd: utc.mjd_day(), source })? as i128 * FS_PER_S;
        // Position within the day in days of 86 400 s (the leap second, if
        // any, is squeezed into the last second: the offset below is exact).
        let day_frac = ratio_to_f64(utc.fs_of_day(), day_len_fs);
        let t = utc.mjd_day() as f64 + day_frac;
        let (first, last) = self.span_mjd();
        if t < first as f64 || t > last as f64 {
            return Err(EopError::OutOfRange { path: self.path.clone(), mjd: t, first, last });
        }
        let i = ((utc.mjd_day() - first) as usize).min(self.rows.len() - 2);
        // Window of 4 nodes around [i, i+1], kept inside the table.
        let start = i.saturating_sub(1).min(self.rows.len() - 4);
        let nodes: [EopRow; 4] = std::array::from_fn(|k| self.rows[start + k]);
        let x: [f64; 4] = std::array::from_fn(|k| nodes[k].mjd as f64);
        let tai_utc = |mjd: i64| -> Result<f64, EopError> { leaps.tai_minus_utc_s(mjd).map(|v| v as f64).map_err(|source| EopError::Time { mjd, source }) };
        let mut ut1_tai = [0.0; 4];
        for k in 0..4 {
            ut1_tai[k] = nodes[k].ut1_minus_utc_s - tai_utc(nodes[k].mjd)?;
        }
        let interp = |y: [f64; 4]| crate::interp::lagrange4(&x, &y, t);
        let ut1_minus_tai_s = interp(ut1_tai);
        // TAI − UTC of the epoch's own UTC day (through its leap second, if any).
        let tai_minus_utc_now = tai_utc(utc.mjd_day())?;
        let predicted = nodes.iter().any(|n| n.predicted);
        Ok(EopValues {
            ut1_minus_utc_s: ut1_minus_tai_s + tai_minus_utc_now,
            ut1_minus_tai_s,
            x_p_rad: interp(nodes.map(|n| n.x_p_arcsec)) * ARCSEC_TO_RAD,
            y_p_rad: interp(nodes.map(|n| n.y_p_arcsec)) * ARCSEC_TO_RAD,
            dx_rad: interp(nodes.map(|n| n.dx_mas)) * 1e-3 * ARCSEC_TO_RAD,
            dy_rad: interp(nodes.map(|n| n.dy_mas)) * 1e-3 * ARCSEC_TO_RAD,
            predicted,
        })
    }
}

impl crate::time::Ut1Source for EopTable {
    fn ut1_minus_tai_s(&self, leaps: &LeapSecondTable, utc: &Epoch) -> Result<f64, crate::time::TimeError> {
        self.at_utc(leaps, utc).map(|v| v.ut1_minus_tai_s).map_err(|e| crate::time::TimeError::Ut1 { reason: e.to_string() })
    }
}

fn num(path: &Path, line: usize, s: &str, what: &str) -> Result<f64, EopError> {
    let v: f64 = s.parse().map_err(|_| EopError::Format { path: path.into(), line, reason: format!("{what} '{s}' is not a number") })?;
    if !v.is_finite() {
        return Err(EopError::Format { path: path.into(), line, reason: format!("{what} '{s}' is not finite") });
    }
    Ok(v)
}

fn push_row(rows: &mut Vec<EopRow>, row: EopRow, path: &Path, line: usize) -> Result<(), EopError> {
    if let Some(prev) = rows.last()
        && row.mjd != prev.mjd + 1
    {
        return Err(EopError::Format { path: path.into(), line, reason: format!("MJD {} does not follow MJD {} (daily rows expected)", row.mjd, prev.mjd) });
    }
    rows.push(row);
    Ok(())
}

fn whole_mjd(path: &Path, line: usize, s: &str) -> Result<i64, EopError> {
    let v = num(path, line, s, "MJD")?;
    if v.fract() != 0.0 || !(0.0..1e6).contains(&v) {
        return Err(EopError::Format { path: path.into(), line, reason: format!("MJD '{s}' is not a whole day at 0h UTC") });
    }
    Ok(v as i64)
}

/// IERS Rapid Service `finals2000A` layout (ReadMe.finals2000A): MJD in
/// columns 8–15; Bulletin A: PM flag 17, x_p 19–27 (″), y_p 38–46 (″), UT1
/// flag 58, UT1 − UTC 59–68 (s), dX 98–106 (mas), dY 117–125 (mas);
/// Bulletin B: x_p 135–144, y_p 145–154, UT1 − UTC 155–165, dX 166–175, dY
/// 176–185. B values are used where present.
fn parse_finals(text: &str, path: &Path) -> Result<Vec<EopRow>, EopError> {
    let mut rows = Vec::new();
    let mut ended_at: Option<usize> = None;
    for (i, line) in text.lines().enumerate() {
        let lineno = i + 1;
        if line.trim().is_empty() {
            continue;
        }
        if !line.is_ascii() {
            return Err(EopError::Format { path: path.into(), line: lineno, reason: "non-ASCII characters".into() });
        }
        if line.len() < 15 {
            return Err(EopError::Format { path: path.into(), line: lineno, reason: format!("line of {} characters is too short for the finals2000A layout", line.len()) });
        }
        if let Some((a, b)) = FINALS_FIELDS.iter().chain(&[(176, 185)]).find(|(a, b)| cut_inside(line, *a, *b)) {
            return Err(EopError::Format {
                path: path.into(), line: lineno, reason: format!("line ends inside columns {a}–{b} ({} characters): a cut line would read as a wrong value", line.len())
            });
        }
        let mjd = whole_mjd(path, lineno, field(line, 8, 15))?;
        let (xs, ys, us) = (field(line, 19, 27), field(line, 38, 46), field(line, 59, 68));
        if xs.is_empty() || ys.is_empty() || us.is_empty() {
            // Rows past the end of the predictions carry only a date.
            ended_at.get_or_insert(lineno);
            continue;
        }
        if let Some(end) = ended_at {
            return Err(EopError::Format { path: path.into(), line: lineno, reason: format!("values resume after the empty row at line {end}") });
        }
        let flag_pm = field(line, 17, 17);
        let flag_ut = field(line, 58, 58);
        // Bulletin A values are read (and so validated) on every row.
        let (dxs, dys) = (field(line, 98, 106), field(line, 117, 125));
        let has_pole_offsets = !dxs.is_empty() && !dys.is_empty();
        let a = EopRow {
            mjd,
            x_p_arcsec: num(path, lineno, xs, "x_p")?,
            y_p_arcsec: num(path, lineno, ys, "y_p")?,
            ut1_minus_utc_s: num(path, lineno, us, "UT1-UTC")?,
            dx_mas: if has_pole_offsets { num(path, lineno, dxs, "dX")? } else { 0.0 },
            dy_mas: if has_pole_offsets { num(path, lineno, dys, "dY")? } else { 0.0 },
            predicted: flag_pm == "P" || flag_ut == "P",
            has_pole_offsets,
            is_final: false,
        };
        let (xb, yb, ub, dxb, dyb) = (field(line, 135, 144), field(line, 145, 154), field(line, 155, 165), field(line, 166, 175), field(line, 176, 185));
        let row = if !(xb.is_empty() || yb.is_empty() || ub.is_empty() || dxb.is_empty() || dyb.is_empty()) {
            EopRow {
                mjd,
                x_p_arcsec: num(path, lineno, xb, "x_p (Bulletin B)")?,
                y_p_arcsec: num(path, lineno, yb, "y_p (Bulletin B)")?,
                ut1_minus_utc_s: num(path, lineno, ub, "UT1-UTC (Bulletin B)")?,
                dx_mas: num(path, lineno, dxb, "dX (Bulletin B)")?,
                dy_mas: num(path, lineno, dyb, "dY (Bulletin B)")?,
                predicted: false,
                has_pole_offsets: true,
                is_final: true,
            }
        } else {
            a
        };
        if row.ut1_minus_utc_s.abs() > 1.0 || row.x_p_arcsec.abs() > 2.0 || row.y_p_arcsec.abs() > 2.0 {
            return Err(EopError::Format { path: path.into(), line: lineno, reason: "value out of the physical range (|UT1−UTC| ≤ 1 s, |x_p|, |y_p| ≤ 2″)".into() });
        }
        push_row(&mut rows, row, path, lineno)?;
    }
    Ok(rows)
}

/// IERS EOP C04 layout (ReadMe.eopc04): year, month, day, hour, MJD, x_p (″),
/// y_p (″), UT1 − UTC (s), dX (″), dY (″), … separated by blanks.
fn parse_c04(text: &str, path: &Path) -> Result<Vec<EopRow>, EopError> {
    let mut rows = Vec::new();
    let mut first_fields: Option<usize> = None;
    for (i, line) in text.lines().enumerate() {
        let lineno = i + 1;
        let l = line.trim();
        if l.is_empty() || l.starts_with('#') {
            continue;
        }
        let f: Vec<&str> = l.split_whitespace().collect();
        // Every row of a C04 file has the same fields: fewer means a cut line.
        if let Some(n0) = first_fields
            && f.len() != n0
        {
            return Err(EopError::Format { path: path.into(), line: lineno, reason: format!("{} fields where the file's rows have {n0}: a cut or damaged line", f.len()) });
        }
        first_fields.get_or_insert(f.len());
        if f.len() < 10 {
            return Err(EopError::Format { path: path.into(), line: lineno, reason: format!("{} fields, expected at least 10 (C04 layout)", f.len()) });
        }
        let mjd = whole_mjd(path, lineno, f[4])?;
        let row = EopRow {
            mjd,
            x_p_arcsec: num(path, lineno, f[5], "x_p")?,
            y_p_arcsec: num(path, lineno, f[6], "y_p")?,
            ut1_minus_utc_s: num(path, lineno, f[7], "UT1-UTC")?,
            dx_mas: num(path, lineno, f[8], "dX")? * 1e3,
            dy_mas: num(path, lineno, f[9], "dY")? * 1e3,
            predicted: false,
            has_pole_offsets: true,
            is_final: true,
        };
        if row.ut1_minus_utc_s.abs() > 1.0 || row.x_p_arcsec.abs() > 2.0 || row.y_p_arcsec.abs() > 2.0 {
            return Err(EopError::Format { path: path.into(), line: lineno, reason: "value out of the physical range (|UT1−UTC| ≤ 1 s, |x_p|, |y_p| ≤ 2″)".into() });
        }
        push_row(&mut rows, row, path, lineno)?;
    }
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lagrange_reproduces_cubics() {
        let x = [0.0, 1.0, 2.0, 3.0];
        let f = |t: f64| 2.0 - t + 0.5 * t * t - 0.25 * t * t * t;
        let y = x.map(f);
        for t in [0.0, 0.3, 1.5, 2.9] {
            assert!((crate::interp::lagrange4(&x, &y, t) - f(t)).abs() < 1e-14);
        }
    }

    #[test]
    fn malformed_lines_name_the_line() {
        let good = "73 1 2 41684.00 I  0.120733 0.009786  0.136966 0.015902  I 0.8084178 0.0002710  0.0000 0.1916  P    -0.766    0.199    -0.720    0.300\n";
        let bad = good.replace("0.120733", "0.12x733");
        let text = format!("{good}{bad}");
        let e = EopTable::parse(&text, Path::new("finals.txt")).unwrap_err().to_string();
        assert!(e.contains("finals.txt") && e.contains("line 2") && e.contains("x_p"), "{e}");
        let gap = format!("{good}{}", good.replace("41684.00", "41686.00"));
        let e = EopTable::parse(&gap, Path::new("g.txt")).unwrap_err().to_string();
        assert!(e.contains("does not follow"), "{e}");
    }
}
