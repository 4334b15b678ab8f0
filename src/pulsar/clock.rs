//! Observatory clock corrections: per-site chains of tables.
//!
//! Each table is a small CSV file in lapse's own layout:
//!
//! ```text
//! # any comment lines
//! mjd,offset_s
//! 58000.0,1.234e-6
//! 58001.0,1.240e-6
//! ```
//!
//! `offset_s` is what must be **added** to the clock on the left of the
//! link to obtain the clock on its right (e.g. site clock → GPS, then
//! GPS → UTC). A site's chain is the sum of its tables, each linearly
//! interpolated at the epoch. Outside a table's span the epoch is refused
//! unless extrapolation is allowed; then the end value is held and the row
//! is flagged.

use std::path::{Path, PathBuf};

/// Errors of clock tables.
#[derive(Debug, thiserror::Error)]
pub enum ClockError {
    #[error("cannot read clock table {path}: {source}")]
    Io { path: PathBuf, source: std::io::Error },
    #[error("clock table {path}: line {line}: {reason}")]
    Format { path: PathBuf, line: usize, reason: String },
    #[error("clock table {} covers MJD {first_mjd} … {last_mjd}, not {mjd:.6} (allow extrapolation in [clocks] to hold its end value)", path.display())]
    OutsideSpan { path: PathBuf, first_mjd: f64, last_mjd: f64, mjd: f64 },
}

/// One clock-correction table.
#[derive(Clone, Debug)]
pub struct ClockTable {
    pub path: PathBuf,
    mjd: Vec<f64>,
    offset_s: Vec<f64>,
}

/// Result of evaluating a chain.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ClockValue {
    /// Total correction, s (add to the site time to get UTC).
    pub offset_s: f64,
    /// True when any table was evaluated outside its span.
    pub extrapolated: bool,
}

impl ClockTable {
    /// Reads a table.
    pub fn from_file(path: &Path) -> Result<Self, ClockError> {
        let text = crate::io::digest::read_to_string_remembering(path).map_err(|source| ClockError::Io { path: path.into(), source })?;
        Self::parse(&text, path)
    }

    /// Parses table text; `path` names it in errors.
    pub fn parse(text: &str, path: &Path) -> Result<Self, ClockError> {
        let err = |line: usize, reason: String| ClockError::Format { path: path.into(), line, reason };
        let mut mjd = Vec::new();
        let mut offset_s = Vec::new();
        for row in crate::io::csv_lines(text, &["mjd", "offset_s"]).map_err(|(line, reason)| err(line, reason))? {
            let (f, line) = (&row.fields, row.line);
            let m: f64 = f[0].parse().map_err(|_| err(line, format!("MJD '{}' is not a number", f[0])))?;
            let o: f64 = f[1].parse().map_err(|_| err(line, format!("offset '{}' is not a number", f[1])))?;
            if !m.is_finite() || !o.is_finite() {
                return Err(err(line, "non-finite value".into()));
            }
            if o.abs() > 1.0 {
                return Err(err(line, format!("offset {o} s exceeds 1 s: not a clock correction")));
            }
            if let Some(&prev) = mjd.last()
                && m <= prev
            {
                return Err(err(line, format!("MJD {m} is not after {prev}")));
            }
            mjd.push(m);
            offset_s.push(o);
        }
        if mjd.len() < 2 {
            return Err(err(0, "need at least two rows".into()));
        }
        Ok(Self { path: path.into(), mjd, offset_s })
    }

    /// (first, last) MJD of the table.
    pub fn span_mjd(&self) -> (f64, f64) {
        (self.mjd[0], self.mjd[self.mjd.len() - 1])
    }

    /// Linearly interpolated offset at an MJD; `None` outside the span.
    pub fn at(&self, mjd: f64) -> Option<f64> {
        let (a, b) = self.span_mjd();
        if !(mjd >= a && mjd <= b) {
            return None;
        }
        let i = self.mjd.partition_point(|m| *m <= mjd).clamp(1, self.mjd.len() - 1);
        let (x0, x1) = (self.mjd[i - 1], self.mjd[i]);
        let w = (mjd - x0) / (x1 - x0);
        Some(self.offset_s[i - 1] + w * (self.offset_s[i] - self.offset_s[i - 1]))
    }

    /// The end value nearest to `mjd` (for allowed extrapolation).
    fn held(&self, mjd: f64) -> f64 {
        if mjd < self.mjd[0] { self.offset_s[0] } else { self.offset_s[self.offset_s.len() - 1] }
    }
}

/// Evaluates a chain of tables at an MJD. Errors name the table and its span.
pub fn chain_at(tables: &[ClockTable], mjd: f64, allow_extrapolation: bool) -> Result<ClockValue, ClockError> {
    let mut v = ClockValue { offset_s: 0.0, extrapolated: false };
    for t in tables {
        match t.at(mjd) {
            Some(o) => v.offset_s += o,
            None if allow_extrapolation => {
                v.offset_s += t.held(mjd);
                v.extrapolated = true;
            }
            None => {
                let (first_mjd, last_mjd) = t.span_mjd();
                return Err(ClockError::OutsideSpan { path: t.path.clone(), first_mjd, last_mjd, mjd });
            }
        }
    }
    Ok(v)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table(text: &str) -> ClockTable {
        ClockTable::parse(text, Path::new("t.csv")).unwrap()
    }

    #[test]
    fn interpolates_linearly_and_sums_chains() {
        let a = table("# site → GPS\nmjd,offset_s\n58000,1e-6\n58002,3e-6\n");
        let b = table("mjd,offset_s\n57000,-2e-8\n59000,-2e-8\n");
        assert!((a.at(58001.0).unwrap() - 2e-6).abs() < 1e-20);
        let v = chain_at(&[a.clone(), b], 58001.5, false).unwrap();
        assert!((v.offset_s - (2.5e-6 - 2e-8)).abs() < 1e-18 && !v.extrapolated);
        assert!(chain_at(std::slice::from_ref(&a), 58003.0, false).unwrap_err().to_string().contains("t.csv"));
        let v = chain_at(&[a], 58003.0, true).unwrap();
        assert!(v.extrapolated && v.offset_s == 3e-6);
    }

    #[test]
    fn malformed_tables_name_the_line() {
        let e = ClockTable::parse("mjd,offset_s\n58000,1e-6\n58001,abc\n", Path::new("c.csv")).unwrap_err().to_string();
        assert!(e.contains("c.csv") && e.contains("line 3"), "{e}");
        assert!(ClockTable::parse("mjd,value\n1,2\n", Path::new("c.csv")).is_err());
        assert!(ClockTable::parse("mjd,offset_s\n58001,0\n58000,0\n", Path::new("c.csv")).is_err());
        assert!(ClockTable::parse("mjd,offset_s\n58001,5\n58002,0\n", Path::new("c.csv")).is_err());
    }
}
