//! lapse: relativistic corrections for time-tagged observations.
//!
//! The library does the work; the `lapse` binary parses arguments, calls it
//! and prints. See `DEVELOPERS.md` for the architecture and data flow.
//!
//! **Caution:** results feed spacecraft navigation and scientific claims and
//! must be validated independently before operational use; local mission
//! rules and licensed practice take precedence.

// Layers, lowest first; a module uses only modules above it in this list
// (checked by `tests/layers.rs`; rustfmt.toml keeps this order).
pub mod interp;
pub mod parallel;
pub mod reject;
pub mod stats;
pub mod model_cache;
pub mod io;
pub mod time;
pub mod constants;
pub mod ephemeris;
pub mod earth;
pub mod delays;
pub mod light_time;
pub mod pulsar;
pub mod tracking;
pub mod plots;
pub mod diff;
pub mod pipeline;
pub mod kinds;
pub mod commands;

/// Deterministic pseudo-random numbers for the unit tests: Marsaglia's
/// xorshift64 with the shift triple (13, 7, 17) (G. Marsaglia, "Xorshift
/// RNGs", J. Stat. Softw. 8(14), 2003; citation from memory). One step.
#[cfg(test)]
pub(crate) fn xorshift64(state: &mut u64) -> u64 {
    *state ^= *state << 13;
    *state ^= *state >> 7;
    *state ^= *state << 17;
    *state
}

/// Version of lapse (from Cargo.toml).
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
