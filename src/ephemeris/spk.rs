//! SPK kernels: segments, their data by type, and the kernel's query API
//! (one file per job: [`super::daf`] reads and maps the container,
//! [`super::chebyshev`] evaluates types 2 and 3, [`super::discrete`] types
//! 9 and 13; the two-part TDB time argument is [`crate::time::TdbSeconds`]).
//!
//! anise parses and validates the DAF container (file record, endianness,
//! summary records); lapse evaluates the data itself, because anise's query
//! epoch is an `f64` of TDB seconds past J2000, which resolves ≈ 0.1 µs in
//! this century (≈ 3.6 mm of Earth motion), above the 1 mm this tool needs.
//!
//! # References
//! NAIF SPK Required Reading (`spk.req`), "Segments — The Fundamental SPK
//! Building Blocks"; NAIF DAF Required Reading for the container.

use std::path::{Path, PathBuf};

use super::EphemerisError;
pub use super::chebyshev::ChebyshevData;
pub use super::discrete::DiscreteStates;
pub use crate::time::TdbSeconds;

/// Position (km) and velocity (km/s) of a target relative to a centre,
/// ICRF axes, TDB.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct StateKm {
    pub position_km: [f64; 3],
    pub velocity_km_s: [f64; 3],
}

impl std::ops::Add for StateKm {
    type Output = StateKm;
    fn add(self, o: StateKm) -> StateKm {
        StateKm { position_km: std::array::from_fn(|i| self.position_km[i] + o.position_km[i]), velocity_km_s: std::array::from_fn(|i| self.velocity_km_s[i] + o.velocity_km_s[i]) }
    }
}

/// The data of one segment.
#[derive(Clone, Debug)]
pub enum SegmentData {
    /// SPK types 2 and 3.
    Chebyshev(ChebyshevData),
    /// SPK types 9 and 13.
    Discrete(DiscreteStates),
    /// A type lapse does not evaluate (yet): queries name it in the error.
    Unsupported,
}

/// One SPK segment.
#[derive(Clone, Debug)]
pub struct Segment {
    pub target: i32,
    pub center: i32,
    pub frame: i32,
    pub spk_type: i32,
    /// Coverage, TDB seconds past J2000.
    pub start_s: f64,
    pub end_s: f64,
    pub data: SegmentData,
}

impl Segment {
    /// True when `t` lies inside the segment's coverage (inclusive).
    pub fn covers(&self, t: &TdbSeconds) -> bool {
        t.minus_f64_s(self.start_s) >= 0.0 && t.minus_f64_s(self.end_s) <= 0.0
    }

    /// State of `target` relative to `center` at `t` (which must be covered).
    ///
    /// # Accuracy
    /// That of the segment's type: [`ChebyshevData::state`] (types 2/3) or
    /// [`DiscreteStates::evaluate`] (types 9/13).
    ///
    /// # References
    /// NAIF SPK Required Reading, "Segments — The Fundamental SPK Building Blocks".
    pub fn evaluate(&self, t: &TdbSeconds) -> Option<StateKm> {
        match &self.data {
            SegmentData::Chebyshev(c) => Some(c.state(t)),
            SegmentData::Discrete(d) => Some(d.evaluate(t)),
            SegmentData::Unsupported => None,
        }
    }

    /// Position only (km): bit-identical to the `position_km` of
    /// [`Self::evaluate`], without the velocity (about half the work for
    /// Chebyshev segments).
    pub fn position(&self, t: &TdbSeconds) -> Option<[f64; 3]> {
        match &self.data {
            SegmentData::Chebyshev(c) => Some(c.position(t)),
            SegmentData::Discrete(d) => Some(d.evaluate(t).position_km),
            SegmentData::Unsupported => None,
        }
    }
}

/// A loaded SPK kernel.
#[derive(Clone, Debug)]
pub struct SpkKernel {
    pub path: PathBuf,
    pub segments: Vec<Segment>,
}

pub(crate) fn kernel_err(path: &Path, message: impl Into<String>) -> EphemerisError {
    EphemerisError::Kernel { path: path.to_path_buf(), message: message.into() }
}

/// A malformed segment's data (the message says what is wrong).
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
pub(crate) struct SegmentFormatError(pub(crate) String);
