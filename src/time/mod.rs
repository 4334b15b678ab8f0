//! Time scales at femtosecond resolution.
//!
//! hifitime does calendars elsewhere in the ecosystem, but resolves only
//! 1 ns and uses a one-term TDB model (off by up to 38 µs against the
//! Fairhead & Bretagnon 1990 series, A&A 229, 240; figure from memory), so
//! lapse carries its own epochs: integer
//! femtoseconds per scale ([`femto`]), a leap-second table read from the IERS
//! file ([`leap`]), the IAU relations between coordinate times
//! ([`relativistic`]) and the conversion chain ([`TimeScales`]).

pub mod calendar;
pub mod clock_rate;
mod epoch;
mod error;
pub mod femto;
pub mod leap;
mod parse;
pub mod relativistic;
mod tdb_seconds;

pub use epoch::{Epoch, TAI_MINUS_GPS_FS, TT_MINUS_TAI_FS, TimeScale, TimeScales, Ut1Source, tdb_fs_from_parts};
pub use error::TimeError;
pub use leap::{ExpiryPolicy, LeapSecondTable};
pub use parse::parse_epoch;
pub use tdb_seconds::TdbSeconds;

/// First and last of a batch's UTC days (MJD) for sizing its grids, leaving
/// out days outside MJD 40 000 – 100 000 (1968–2132: their rows are
/// rejected later, and one wild value must not make a huge grid); `None`
/// when no day is left.
pub fn batch_day_span(days_mjd_utc: impl IntoIterator<Item = i64>) -> Option<(i64, i64)> {
    let (lo, hi) = days_mjd_utc.into_iter().filter(|d| (40_000..100_000).contains(d)).fold((i64::MAX, i64::MIN), |(lo, hi), d| (lo.min(d), hi.max(d)));
    (lo <= hi).then_some((lo, hi))
}
