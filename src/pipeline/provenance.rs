//! Key-value provenance written into every output file (keys `lapse.*`):
//! version, pipeline text and hash, every input file with its SHA-256 and
//! coverage, constants and row counts.

use std::collections::BTreeMap;
use std::path::Path;

use super::PipelineFile;
use crate::io::IoError;

/// Source revision (git commit) lapse was built from.
pub const SOURCE_REVISION: &str = env!("LAPSE_SOURCE_REVISION");

/// The provenance of one output file, in the order entries were set.
#[derive(Clone, Debug)]
pub struct Provenance {
    entries: Vec<(String, String)>,
    roles: BTreeMap<String, usize>,
}

/// The current wall-clock time as ISO 8601 UTC (seconds).
pub fn now_utc_iso() -> String {
    let secs = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_secs() as i64).unwrap_or(0);
    let (days, sod) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let (y, m, d) = crate::time::calendar::ymd_from_mjd(40_587 + days);
    format!("{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z", sod / 3600, (sod / 60) % 60, sod % 60)
}

impl Provenance {
    /// Starts the record of a run of `file`.
    pub fn start(file: &PipelineFile) -> Self {
        let mut p = Self { entries: Vec::new(), roles: BTreeMap::new() };
        p.set("version", crate::VERSION);
        p.set("source_revision", SOURCE_REVISION);
        p.set("run.started_utc", &now_utc_iso());
        p.set("pipeline.path", &file.path.display().to_string());
        p.set("pipeline.kind", &file.kind);
        p.set("pipeline.sha256", &file.sha256);
        p.set("pipeline.text", &file.text);
        // Every value of the pipeline as its own entry (`param.<table>.<key>`),
        // so that a changed model parameter shows by name in `lapse diff`.
        if let Ok(table) = toml::from_str::<toml::Table>(&file.text) {
            for (k, v) in &table {
                if k != "kind" {
                    p.set_params(k, v);
                }
            }
        }
        p
    }

    fn set_params(&mut self, key: &str, v: &toml::Value) {
        match v {
            toml::Value::Table(t) => t.iter().for_each(|(k, v)| self.set_params(&format!("{key}.{k}"), v)),
            toml::Value::Array(a) => a.iter().enumerate().for_each(|(i, v)| self.set_params(&format!("{key}.{i}"), v)),
            toml::Value::String(s) => self.set(&format!("param.{key}"), s),
            // Shortest round-trip form (`-6.31e-16`, not 18 decimals).
            toml::Value::Float(f) => self.set(&format!("param.{key}"), &format!("{f:?}")),
            other => self.set(&format!("param.{key}"), &other.to_string()),
        }
    }

    /// Sets `lapse.<key>`.
    pub fn set(&mut self, key: &str, value: &str) {
        self.entries.push((format!("lapse.{key}"), value.to_string()));
    }

    /// Records an input file: path, size, SHA-256 and what it covers,
    /// numbered per role.
    pub fn add_input(&mut self, role: &str, path: &Path, coverage: &str) -> Result<(), IoError> {
        let n = self.roles.entry(role.to_string()).or_default();
        let key = format!("input.{role}.{n}");
        *n += 1;
        let (len, digest) = crate::io::digest::file_digest(path).map_err(|source| IoError::Open { path: path.into(), source })?;
        self.set(&format!("{key}.path"), &path.display().to_string());
        self.set(&format!("{key}.canonical_path"), &canonical(path));
        self.set(&format!("{key}.bytes"), &len.to_string());
        self.set(&format!("{key}.sha256"), &digest);
        if !coverage.is_empty() {
            self.set(&format!("{key}.coverage"), coverage);
        }
        Ok(())
    }

    /// Records the row counts.
    pub fn set_rows(&mut self, rows_in: usize, rows_out: usize, rows_rejected: usize) {
        self.set("rows.in", &rows_in.to_string());
        self.set("rows.out", &rows_out.to_string());
        self.set("rows.rejected", &rows_rejected.to_string());
    }

    /// The entries whose values identify the inputs (pipeline and file
    /// hashes): what decides whether an output is up to date.
    pub fn identity(&self) -> impl Iterator<Item = &(String, String)> {
        self.entries.iter().filter(|(k, _)| k == "lapse.pipeline.sha256" || k.ends_with(".sha256"))
    }

    /// The key-value pairs, in the order they were set.
    pub fn finish(self) -> Vec<(String, String)> {
        self.entries
    }
}

/// The canonical absolute form of a path (as given when it cannot be resolved).
pub fn canonical(path: &Path) -> String {
    std::fs::canonicalize(path).unwrap_or_else(|_| path.to_path_buf()).display().to_string()
}

/// Coverage text of a leap-second table.
pub fn leap_coverage(t: &crate::time::LeapSecondTable) -> String {
    let d = |m: i64| {
        let (y, mo, da) = crate::time::calendar::ymd_from_mjd(m);
        format!("{y:04}-{mo:02}-{da:02}")
    };
    format!("{} steps, last {}; expires {}; UTC valid before {}", t.steps().len(), d(t.steps().last().map(|s| s.mjd).unwrap_or(0)), d(t.expires_mjd()), d(t.window_mjd()))
}

/// Coverage text of an SPK kernel (per target, TDB).
pub fn kernel_coverage(k: &crate::ephemeris::SpkKernel) -> String {
    let lo = k.segments.iter().map(|s| s.start_s).fold(f64::INFINITY, f64::min);
    let hi = k.segments.iter().map(|s| s.end_s).fold(f64::NEG_INFINITY, f64::max);
    let mjd = |s: f64| 51_544.5 + s / 86_400.0;
    let mut targets: Vec<i32> = k.segments.iter().map(|s| s.target).collect();
    targets.sort_unstable();
    targets.dedup();
    format!("{} segments, targets {:?}, TDB MJD {:.3} … {:.3}", k.segments.len(), targets, mjd(lo), mjd(hi))
}

/// Coverage text of an EOP table.
pub fn eop_coverage(t: &crate::earth::EopTable) -> String {
    let (a, b) = t.span_mjd();
    match t.first_predicted_mjd() {
        Some(p) => format!("UTC MJD {a} … {b}; predicted from MJD {p}"),
        None => format!("UTC MJD {a} … {b}; no predictions"),
    }
}
