//! The kinds of pipeline, each one module behind [`crate::pipeline::Kind`],
//! and the registry that maps a pipeline's `kind` key to its loader.
//!
//! Adding a kind: write its module (configuration, load, scan, check,
//! process, synthesise) and add one line to [`REGISTRY`]; nothing else in
//! the crate names kinds. See `DEVELOPERS.md`, "Adding a kind".

pub mod pulsar;
pub mod timescales;
pub mod tracking;

use crate::pipeline::{Kind, PipelineError, PipelineFile};

/// A kind's name and loader.
pub struct Registered {
    pub name: &'static str,
    pub load: fn(&PipelineFile) -> Result<Box<dyn Kind>, PipelineError>,
}

/// Every kind lapse runs.
pub const REGISTRY: &[Registered] = &[
    Registered { name: "timescales", load: |f| Ok(Box::new(timescales::Timescales::load(f)?)) },
    Registered { name: "pulsar", load: |f| Ok(Box::new(pulsar::Pulsar::load(f)?)) },
    Registered { name: "tracking", load: |f| Ok(Box::new(tracking::Tracking::load(f)?)) },
];

/// The names of the registered kinds, comma separated.
pub fn names() -> String {
    REGISTRY.iter().map(|r| r.name).collect::<Vec<_>>().join(", ")
}

/// Loads a pipeline's kind with its shared inputs.
pub fn load(file: &PipelineFile) -> Result<Box<dyn Kind>, PipelineError> {
    match REGISTRY.iter().find(|r| r.name == file.kind) {
        Some(r) => (r.load)(file),
        None => Err(PipelineError::UnknownKind { path: file.path.clone(), kind: file.kind.clone(), known: names() }),
    }
}
