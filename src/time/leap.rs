//! The leap-second table: TAI − UTC in whole seconds since 1972.
//!
//! Read from the IERS file `Leap_Second.dat` (IERS Earth Orientation Centre,
//! Bulletin C), either the copy built into lapse (`data/Leap_Second.dat`) or
//! one named in a pipeline. The file's `File expires on` line bounds what the
//! table can answer: leap seconds are inserted only at the end of 30 June or
//! 31 December (ITU-R Recommendation TF.460-6, sec. 2.1), so the first such
//! day on or after the expiry date is the first day whose length the table
//! does not know. UTC epochs on or after that day are refused unless the
//! caller asks explicitly to extend the last offset.

use std::path::{Path, PathBuf};

use super::calendar::{mjd_from_ymd, ymd_from_mjd};
use super::error::TimeError;
use super::femto::FS_PER_S;

/// The IERS leap-second file built into lapse (see `data/SOURCES.md`).
pub const BUILTIN_LEAP_SECOND_FILE: &str = include_str!("../../data/Leap_Second.dat");

/// First day of the leap-second era (1972-01-01).
pub const FIRST_UTC_MJD: i64 = 41_317;

/// What to do with UTC epochs past the table's last known leap-second window.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ExpiryPolicy {
    /// Refuse them with [`TimeError::LeapTableExpired`] (the default).
    Refuse,
    /// Assume no further leap seconds: the last offset holds for ever. For
    /// planning and tests only; results past the window may be off by
    /// whole seconds.
    ExtendLastOffset,
}

/// One step of TAI − UTC, in force from 0h UTC of `mjd`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LeapStep {
    /// MJD (UTC) from which the offset applies.
    pub mjd: i64,
    /// TAI − UTC in whole seconds.
    pub tai_minus_utc_s: i64,
}

/// A validated leap-second table.
#[derive(Clone, Debug)]
pub struct LeapSecondTable {
    steps: Vec<LeapStep>,
    /// Expiry date stated in the file, as an MJD.
    expires_mjd: i64,
    /// First UTC day whose length is unknown (a 30 June or 31 December on or
    /// after the expiry date).
    window_mjd: i64,
    policy: ExpiryPolicy,
    source_name: String,
}

fn month_number(name: &str) -> Option<u32> {
    const NAMES: [&str; 12] = ["january", "february", "march", "april", "may", "june", "july", "august", "september", "october", "november", "december"];
    let lower = name.to_ascii_lowercase();
    NAMES.iter().position(|n| *n == lower || (lower.len() >= 3 && n.starts_with(&lower))).map(|i| i as u32 + 1)
}

/// The first 30 June or 31 December on or after `mjd`.
fn next_leap_window(mjd: i64) -> i64 {
    let (y, _, _) = ymd_from_mjd(mjd);
    [mjd_from_ymd(y, 6, 30), mjd_from_ymd(y, 12, 31), mjd_from_ymd(y + 1, 6, 30)].into_iter().find(|w| *w >= mjd).expect("one of three windows lies within a year of any date")
}

fn iso_date(mjd: i64) -> String {
    let (y, m, d) = ymd_from_mjd(mjd);
    format!("{y:04}-{m:02}-{d:02}")
}

impl LeapSecondTable {
    /// The table built into lapse.
    pub fn builtin() -> Self {
        Self::parse(BUILTIN_LEAP_SECOND_FILE, Path::new("<built-in Leap_Second.dat>")).expect("the built-in leap-second file is validated by the test suite")
    }

    /// Reads an IERS `Leap_Second.dat` file.
    pub fn from_file(path: &Path) -> Result<Self, TimeError> {
        let text = std::fs::read_to_string(path).map_err(|source| TimeError::Io { path: path.to_path_buf(), source })?;
        Self::parse(&text, path)
    }

    /// Parses the text of an IERS `Leap_Second.dat` file; `path` names it in errors.
    pub fn parse(text: &str, path: &Path) -> Result<Self, TimeError> {
        let err = |line: usize, reason: String| TimeError::LeapFile { path: PathBuf::from(path), line, reason };
        let mut steps: Vec<LeapStep> = Vec::new();
        let mut expires: Option<i64> = None;
        for (i, raw) in text.lines().enumerate() {
            let lineno = i + 1;
            let line = raw.trim();
            if line.is_empty() {
                continue;
            }
            if let Some(comment) = line.strip_prefix('#') {
                let c = comment.trim();
                if let Some(rest) = c.strip_prefix("File expires on") {
                    let parts: Vec<&str> = rest.split_whitespace().collect();
                    if parts.len() != 3 {
                        return Err(err(lineno, format!("cannot read expiry date '{}'", rest.trim())));
                    }
                    let day: u32 = parts[0].parse().map_err(|_| err(lineno, format!("bad expiry day '{}'", parts[0])))?;
                    let month = month_number(parts[1]).ok_or_else(|| err(lineno, format!("bad expiry month '{}'", parts[1])))?;
                    let year: i64 = parts[2].parse().map_err(|_| err(lineno, format!("bad expiry year '{}'", parts[2])))?;
                    if !super::calendar::is_valid_date(year, month, day) {
                        return Err(err(lineno, format!("expiry date '{}' is not a date", rest.trim())));
                    }
                    expires = Some(mjd_from_ymd(year, month, day));
                }
                continue;
            }
            // Data line: MJD  day month year  TAI-UTC
            let f: Vec<&str> = line.split_whitespace().collect();
            if f.len() != 5 {
                return Err(err(lineno, format!("expected 5 fields (MJD day month year TAI-UTC), found {}", f.len())));
            }
            let mjd_f: f64 = f[0].parse().map_err(|_| err(lineno, format!("bad MJD '{}'", f[0])))?;
            if !mjd_f.is_finite() || mjd_f.fract() != 0.0 || mjd_f.abs() > 1e7 {
                return Err(err(lineno, format!("MJD '{}' is not a whole day", f[0])));
            }
            let mjd = mjd_f as i64;
            let day: u32 = f[1].parse().map_err(|_| err(lineno, format!("bad day '{}'", f[1])))?;
            let month: u32 = f[2].parse().map_err(|_| err(lineno, format!("bad month '{}'", f[2])))?;
            let year: i64 = f[3].parse().map_err(|_| err(lineno, format!("bad year '{}'", f[3])))?;
            if !super::calendar::is_valid_date(year, month, day) || mjd_from_ymd(year, month, day) != mjd {
                return Err(err(lineno, format!("MJD {mjd} does not match the date {year}-{month:02}-{day:02}")));
            }
            let offset: i64 = f[4].parse().map_err(|_| err(lineno, format!("bad TAI-UTC '{}'", f[4])))?;
            if let Some(prev) = steps.last() {
                if mjd <= prev.mjd {
                    return Err(err(lineno, format!("MJD {mjd} is not after the previous entry {}", prev.mjd)));
                }
                if (offset - prev.tai_minus_utc_s).abs() != 1 {
                    return Err(err(lineno, format!("TAI-UTC jumps from {} s to {offset} s; a leap step is one second", prev.tai_minus_utc_s)));
                }
            } else if mjd != FIRST_UTC_MJD {
                return Err(err(lineno, format!("the first entry must be 1972-01-01 (MJD {FIRST_UTC_MJD}), found MJD {mjd}")));
            }
            steps.push(LeapStep { mjd, tai_minus_utc_s: offset });
        }
        if steps.is_empty() {
            return Err(err(0, "no leap-second entries".into()));
        }
        let expires_mjd = expires.ok_or_else(|| err(0, "no 'File expires on' line: the table cannot say how far it is valid".into()))?;
        let last = steps.last().map(|s| s.mjd).unwrap_or(FIRST_UTC_MJD);
        if expires_mjd < last {
            return Err(err(0, format!("expiry {} precedes the last entry MJD {last}", iso_date(expires_mjd))));
        }
        Ok(Self { steps, expires_mjd, window_mjd: next_leap_window(expires_mjd), policy: ExpiryPolicy::Refuse, source_name: path.display().to_string() })
    }

    /// Checks a table read from a file against the built-in one: over the
    /// span both know (up to the earlier expiry) they must have the same
    /// steps. A newer file may add steps past the built-in table's expiry.
    pub fn check_against_builtin(&self) -> Result<(), TimeError> {
        let builtin = Self::builtin();
        let until = self.expires_mjd.min(builtin.expires_mjd);
        let known = |t: &Self| t.steps.iter().filter(|s| s.mjd < until).copied().collect::<Vec<_>>();
        let (mine, theirs) = (known(self), known(&builtin));
        if let Some(k) = (0..mine.len().max(theirs.len())).find(|k| mine.get(*k) != theirs.get(*k)) {
            let show = |s: Option<&LeapStep>| s.map(|s| format!("MJD {} (TAI − UTC {} s)", s.mjd, s.tai_minus_utc_s)).unwrap_or_else(|| "no step".into());
            return Err(TimeError::LeapFile {
                path: self.source_name.clone().into(),
                line: 0,
                reason: format!(
                    "disagrees with the built-in table ({}) before MJD {until}: step {} is {} here, {} there (a damaged or edited file?)",
                    builtin.source_name,
                    k + 1,
                    show(mine.get(k)),
                    show(theirs.get(k))
                ),
            });
        }
        Ok(())
    }

    /// The same table with another expiry policy.
    pub fn with_policy(mut self, policy: ExpiryPolicy) -> Self {
        self.policy = policy;
        self
    }

    /// The steps of the table, oldest first.
    pub fn steps(&self) -> &[LeapStep] {
        &self.steps
    }

    /// Expiry date stated in the file (MJD).
    pub fn expires_mjd(&self) -> i64 {
        self.expires_mjd
    }

    /// First UTC day (MJD) the table cannot answer under [`ExpiryPolicy::Refuse`].
    pub fn window_mjd(&self) -> i64 {
        self.window_mjd
    }

    /// What happens past the table's window.
    pub fn policy(&self) -> ExpiryPolicy {
        self.policy
    }

    /// Where the table came from.
    pub fn source_name(&self) -> &str {
        &self.source_name
    }

    /// Checks that a UTC day can be answered.
    pub fn check_day(&self, mjd_day: i64) -> Result<(), TimeError> {
        if mjd_day < FIRST_UTC_MJD {
            return Err(TimeError::UtcBefore1972 { mjd_day });
        }
        if self.policy == ExpiryPolicy::Refuse && mjd_day >= self.window_mjd {
            return Err(TimeError::LeapTableExpired {
                mjd_day,
                date: iso_date(mjd_day),
                window_mjd: self.window_mjd,
                window_date: iso_date(self.window_mjd),
                source_name: self.source_name.clone(),
                expires: iso_date(self.expires_mjd),
            });
        }
        Ok(())
    }

    /// TAI − UTC (whole seconds) in force during UTC day `mjd_day`.
    ///
    /// # Errors
    /// [`TimeError::UtcBefore1972`] and [`TimeError::LeapTableExpired`].
    pub fn tai_minus_utc_s(&self, mjd_day: i64) -> Result<i64, TimeError> {
        self.check_day(mjd_day)?;
        let idx = self.steps.partition_point(|s| s.mjd <= mjd_day);
        Ok(self.steps[idx - 1].tai_minus_utc_s)
    }

    /// Length of UTC day `mjd_day` in SI seconds: 86 400, or 86 401 (86 399)
    /// on a day that ends with a positive (negative) leap second.
    pub fn utc_day_length_s(&self, mjd_day: i64) -> Result<i64, TimeError> {
        let today = self.tai_minus_utc_s(mjd_day)?;
        // The next day may be past the window; the step table still answers
        // it when the next day is a known step, otherwise no step follows.
        let idx = self.steps.partition_point(|s| s.mjd <= mjd_day + 1);
        let tomorrow = self.steps[idx - 1].tai_minus_utc_s;
        Ok(86_400 + tomorrow - today)
    }

    /// TAI at 0h UTC of `mjd_day`, in femtoseconds since MJD 0.0 TAI.
    pub fn tai_fs_at_utc_midnight(&self, mjd_day: i64) -> Result<i128, TimeError> {
        let off = self.tai_minus_utc_s(mjd_day)?;
        Ok((mjd_day as i128 * 86_400 + off as i128) * FS_PER_S)
    }

    /// The UTC day containing a TAI instant (femtoseconds since MJD 0.0 TAI),
    /// with the femtoseconds elapsed since 0h UTC of that day.
    pub fn utc_day_of_tai(&self, tai_fs: i128) -> Result<(i64, i128), TimeError> {
        let day_fs = 86_400 * FS_PER_S;
        // Offsets are tens of seconds, so the day is found within ±1 of the guess.
        let idx = self.steps.partition_point(|s| (s.mjd as i128 * 86_400 + s.tai_minus_utc_s as i128) * FS_PER_S <= tai_fs);
        let off = if idx == 0 { self.steps[0].tai_minus_utc_s } else { self.steps[idx - 1].tai_minus_utc_s };
        let guess = crate::time::femto::div_floor(tai_fs - off as i128 * FS_PER_S, day_fs).0;
        let guess = i64::try_from(guess).map_err(|_| TimeError::OutOfRange { what: format!("TAI {tai_fs} fs") })?;
        let mut day = guess;
        for _ in 0..3 {
            if self.tai_fs_at_utc_midnight(day)? > tai_fs {
                day -= 1;
            } else if self.tai_fs_at_utc_midnight(day + 1).map(|t| t <= tai_fs).unwrap_or(false) {
                day += 1;
            } else {
                break;
            }
        }
        let start = self.tai_fs_at_utc_midnight(day)?;
        Ok((day, tai_fs - start))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builtin_table_parses_and_matches_bulletin_c() {
        let t = LeapSecondTable::builtin();
        // IERS Bulletin C: TAI−UTC = 10 s from 1972-01-01, 37 s since 2017-01-01.
        assert_eq!(t.steps().first().unwrap().tai_minus_utc_s, 10);
        assert_eq!(t.steps().last().unwrap(), &LeapStep { mjd: 57_754, tai_minus_utc_s: 37 });
        assert_eq!(t.steps().len(), 28);
    }

    #[test]
    fn leap_day_lengths() {
        let t = LeapSecondTable::builtin();
        // 2016-12-31 (MJD 57753) ended with 23:59:60.
        assert_eq!(t.utc_day_length_s(57_753).unwrap(), 86_401);
        assert_eq!(t.utc_day_length_s(57_752).unwrap(), 86_400);
        assert_eq!(t.utc_day_length_s(57_754).unwrap(), 86_400);
    }

    #[test]
    fn refuses_before_1972_and_after_window() {
        let t = LeapSecondTable::builtin();
        assert!(matches!(t.tai_minus_utc_s(41_316), Err(TimeError::UtcBefore1972 { .. })));
        let w = t.window_mjd();
        assert!(t.tai_minus_utc_s(w - 1).is_ok());
        let e = t.tai_minus_utc_s(w).unwrap_err();
        assert!(e.to_string().contains("leap-second window"), "{e}");
        let ext = t.clone().with_policy(ExpiryPolicy::ExtendLastOffset);
        assert_eq!(ext.tai_minus_utc_s(w + 10_000).unwrap(), 37);
    }

    #[test]
    fn malformed_files_name_the_line() {
        let bad = "#  File expires on 28 June 2027\n    41317.0    1  1 1972       10\n    41499.0    1  7 1972   x\n";
        let e = LeapSecondTable::parse(bad, Path::new("bad.dat")).unwrap_err().to_string();
        assert!(e.contains("bad.dat") && e.contains("line 3"), "{e}");
        let no_expiry = "    41317.0    1  1 1972       10\n";
        let e = LeapSecondTable::parse(no_expiry, Path::new("x.dat")).unwrap_err().to_string();
        assert!(e.contains("expires"), "{e}");
        let wrong_date = "#  File expires on 28 June 2027\n    41318.0    1  1 1972       10\n";
        assert!(LeapSecondTable::parse(wrong_date, Path::new("y.dat")).is_err());
    }

    #[test]
    fn utc_day_of_tai_inverts_midnights() {
        let t = LeapSecondTable::builtin();
        for s in t.steps() {
            for d in [s.mjd - 1, s.mjd, s.mjd + 1].into_iter().filter(|d| *d > FIRST_UTC_MJD) {
                let m = t.tai_fs_at_utc_midnight(d).unwrap();
                assert_eq!(t.utc_day_of_tai(m).unwrap(), (d, 0));
                assert_eq!(t.utc_day_of_tai(m - 1).unwrap().0, d - 1);
            }
        }
    }
}
