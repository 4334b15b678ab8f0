//! `lapse check`: read a pipeline and its inputs without computing and
//! report everything that would fail, before a long run.
//!
//! Levels: `ok` and `note` (information, e.g. predicted EOP in use),
//! `problem` (some rows would be rejected: unknown stations, epochs outside
//! a kernel, EOP, leap-second or clock-table coverage) and `unusable` (the
//! run would stop: unreadable pipeline or inputs, schema errors, duplicate
//! ids). Exit codes: 0 clean, 1 problems, 2 unusable.

use std::path::Path;

use crate::pipeline::partition::resolve_inputs;
use crate::pipeline::stream::check_file;
use crate::pipeline::{Level, PipelineFile, Preflight};

/// Preflight of a pipeline file, on `input` (file, folder or glob) instead
/// of its `[input] path` when given. Never fails: every failure is a finding.
pub fn check(path: &Path, input: Option<&Path>) -> Preflight {
    let mut p = Preflight::default();
    let file = match PipelineFile::read(path) {
        Ok(f) => f,
        Err(e) => {
            p.add(Level::Unusable, e.to_string());
            return p;
        }
    };
    let mut kind = match crate::kinds::load(&file) {
        Ok(k) => k,
        Err(e) => {
            p.add(Level::Unusable, e.to_string());
            return p;
        }
    };
    p.add(Level::Ok, format!("pipeline {} (kind {})", path.display(), file.kind));
    p.add(Level::Ok, kind.loaded());
    kind.override_paths(input.map(Path::to_path_buf), None);
    match resolve_inputs(kind.input_path()) {
        Ok((files, _)) => {
            for f in files {
                check_file(kind.as_ref(), &mut p, &f);
            }
        }
        Err(e) => p.add(Level::Unusable, e.to_string()),
    }
    p
}
