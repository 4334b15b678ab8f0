//! Errors of the time module.

use std::path::PathBuf;

/// Everything that can go wrong converting or parsing an epoch.
#[derive(Debug, thiserror::Error)]
pub enum TimeError {
    /// A UTC epoch before 1972-01-01, the start of the leap-second table.
    #[error(
        "UTC epoch MJD {mjd_day} is before 1972-01-01 (MJD 41317): UTC before 1972 used non-SI \
         'rubber' seconds and is not supported; give the epoch in TAI or TT instead"
    )]
    UtcBefore1972 { mjd_day: i64 },

    /// A UTC epoch on or after a leap-second window that the table does not cover.
    #[error(
        "UTC epoch MJD {mjd_day} ({date}) is on or after the leap-second window of MJD {window_mjd} \
         ({window_date}) that the leap-second table '{source_name}' (expires {expires}) cannot \
         answer; load a newer IERS Leap_Second.dat, or extend the last offset explicitly"
    )]
    LeapTableExpired { mjd_day: i64, date: String, window_mjd: i64, window_date: String, source_name: String, expires: String },

    /// A fraction of a day outside [0, 1) or not finite.
    #[error("{what} = {value:?} is not a fraction of a day in [0, 1)")]
    BadFraction { what: String, value: f64 },

    /// A non-finite number where a time was expected.
    #[error("{what} = {value:?} is not a finite number")]
    NonFinite { what: String, value: f64 },

    /// An epoch string that could not be read.
    #[error("cannot read epoch '{input}': {reason}")]
    Parse { input: String, reason: String },

    /// A time-scale name we do not know.
    #[error("unknown time scale '{name}' (known: utc, tai, tt, gps, tcg, tcb, tdb, ut1)")]
    UnknownScale { name: String },

    /// A leap-second file that could not be read or is malformed.
    #[error("leap-second file {path}: line {line}: {reason}")]
    LeapFile { path: PathBuf, line: usize, reason: String },

    /// The file could not be opened.
    #[error("cannot read {path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },

    /// A conversion that needs information this converter does not have.
    #[error("conversion {from} → {to} needs {needs}")]
    Unsupported { from: String, to: String, needs: String },

    /// UT1 could not be had from the Earth-orientation data.
    #[error("UT1: {reason}")]
    Ut1 { reason: String },

    /// An epoch outside the representable range.
    #[error("epoch in {got}, {expected} expected")]
    WrongScale { expected: super::TimeScale, got: super::TimeScale },
    #[error("epoch out of range: {what}")]
    OutOfRange { what: String },
}
