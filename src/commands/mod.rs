//! What the `lapse` commands do, as library calls the binary (and the
//! Python binding) make: run, check, synthesise, convert epochs, show
//! provenance, and the batch engine for cluster workers. The binary only
//! parses arguments, calls these, prints what they return and sets the
//! exit code.

pub mod check;
pub mod engine;
pub mod export;
pub mod progress;
pub mod provenance;
pub mod run;
pub mod synth;
pub mod time;
