//! lapse: relativistic corrections for time-tagged observations.
//!
//! The library does the work; the `lapse` binary parses arguments, calls it
//! and prints. See `DEVELOPERS.md` for the architecture and data flow.
//!
//! **Caution:** results feed spacecraft navigation and scientific claims and
//! must be validated independently before operational use; local mission
//! rules and licensed practice take precedence.

pub mod constants;
pub mod delays;
pub mod diff;
pub mod earth;
pub mod ephemeris;
pub mod interp;
pub mod io;
pub mod light_time;
pub mod model_cache;
pub mod pipeline;
pub mod plots;
pub mod pulsar;
pub mod time;
pub mod tracking;

/// Version of lapse (from Cargo.toml).
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
