//! Why a row was rejected: a stable machine-readable code and a message a
//! person can act on. Every kind writes both to its rejects table
//! (`reason_code`, `reason`); summaries count rejects by code.
//!
//! The codes are part of the output contract: existing codes never change
//! meaning or spelling; new ones may be added.

/// The class of a rejected row.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum RejectCode {
    /// A required input value is null.
    MissingValue,
    /// An input value is outside its valid domain (σ ≤ 0, negative frequency …).
    InvalidValue,
    /// A day fraction is outside [0, 1).
    FractionOutOfRange,
    /// A site or station is not in the station catalogue.
    UnknownStation,
    /// The observable named in the row is not one lapse computes.
    UnknownObservable,
    /// The row's fields contradict each other (e.g. a three-way measurement
    /// received by its own transmitter).
    InconsistentRow,
    /// No clock correction covers the row (no chain, or outside its tables).
    ClockUnavailable,
    /// The epoch cannot be converted between time scales (leap-second table
    /// coverage, range).
    TimeNotConvertible,
    /// Ephemeris or Earth-orientation data do not cover the row.
    GeometryUnavailable,
    /// An iterative solution did not converge.
    NotConverged,
    /// A computed value is not finite.
    NotFinite,
    /// A model cannot be applied (spacecraft below the horizon for the
    /// troposphere, no turnaround ratio for the uplink band).
    ModelNotApplicable,
}

impl RejectCode {
    /// Every code, in a fixed order.
    pub const ALL: [RejectCode; 12] = [
        RejectCode::MissingValue,
        RejectCode::InvalidValue,
        RejectCode::FractionOutOfRange,
        RejectCode::UnknownStation,
        RejectCode::UnknownObservable,
        RejectCode::InconsistentRow,
        RejectCode::ClockUnavailable,
        RejectCode::TimeNotConvertible,
        RejectCode::GeometryUnavailable,
        RejectCode::NotConverged,
        RejectCode::NotFinite,
        RejectCode::ModelNotApplicable,
    ];

    /// The stable machine-readable code written to `reason_code`.
    pub fn as_str(self) -> &'static str {
        match self {
            RejectCode::MissingValue => "missing_value",
            RejectCode::InvalidValue => "invalid_value",
            RejectCode::FractionOutOfRange => "fraction_out_of_range",
            RejectCode::UnknownStation => "unknown_station",
            RejectCode::UnknownObservable => "unknown_observable",
            RejectCode::InconsistentRow => "inconsistent_row",
            RejectCode::ClockUnavailable => "clock_unavailable",
            RejectCode::TimeNotConvertible => "time_not_convertible",
            RejectCode::GeometryUnavailable => "geometry_unavailable",
            RejectCode::NotConverged => "not_converged",
            RejectCode::NotFinite => "not_finite",
            RejectCode::ModelNotApplicable => "model_not_applicable",
        }
    }

    /// The code for its text, if it is one.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|c| c.as_str() == text)
    }
}

impl std::fmt::Display for RejectCode {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A rejected row's reason: its code and the message for a person.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("{message}")]
pub struct Reject {
    pub code: RejectCode,
    pub message: String,
}

impl Reject {
    /// A reason with its code.
    pub fn new(code: RejectCode, message: impl Into<String>) -> Self {
        Self { code, message: message.into() }
    }

    /// A null required column.
    pub fn missing(column: &str) -> Self {
        Self::new(RejectCode::MissingValue, format!("missing value: {column} is null"))
    }

    /// A reason from a typed error that knows its code.
    pub fn from_error<E: Coded + std::fmt::Display>(e: &E) -> Self {
        Self::new(e.reject_code(), e.to_string())
    }
}

/// Errors of row-level computations say which class of reject they are.
pub trait Coded {
    /// The reject class of this error.
    fn reject_code(&self) -> RejectCode;
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_round_trip_and_are_unique() {
        let mut seen = std::collections::BTreeSet::new();
        for c in RejectCode::ALL {
            assert_eq!(RejectCode::parse(c.as_str()), Some(c));
            assert!(seen.insert(c.as_str()), "{c} twice");
            assert!(c.as_str().chars().all(|ch| ch.is_ascii_lowercase() || ch == '_'));
        }
        assert_eq!(Reject::missing("site").to_string(), "missing value: site is null");
    }
}
