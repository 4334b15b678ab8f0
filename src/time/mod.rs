//! Time scales at femtosecond resolution.
//!
//! hifitime does calendars elsewhere in the ecosystem, but resolves only
//! 1 ns and uses a one-term TDB model (off by up to 38 µs; see
//! `REFERENCE.md` §10), so lapse carries its own epochs: integer
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

pub use epoch::{Epoch, TAI_MINUS_GPS_FS, TT_MINUS_TAI_FS, TimeScale, TimeScales, Ut1Source, tdb_fs_from_parts};
pub use error::TimeError;
pub use leap::{ExpiryPolicy, LeapSecondTable};
pub use parse::parse_epoch;
