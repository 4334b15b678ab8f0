//! Preflight: read a pipeline and its inputs without computing residuals and
//! report everything that would fail, before a long run.
//!
//! Levels: `ok` and `note` (information, e.g. predicted EOP in use),
//! `problem` (some rows would be rejected: unknown stations, epochs outside
//! a kernel, EOP, leap-second or clock-table coverage) and `unusable` (the
//! run would stop: unreadable pipeline or inputs, schema errors, duplicate
//! ids). Exit codes: 0 clean, 1 problems, 2 unusable.

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

use polars::prelude::DataFrame;

use super::PipelineError;
use super::kind::Kind;
use super::table::{IdChecker, check_input_names, ids, parquet_rows, read_parquet_slice};
use crate::earth::{EarthModel, StationCatalog};
use crate::ephemeris::{Ephemeris, TdbSeconds, body_name};
use crate::reject::{Reject, RejectCode};
use crate::time::{ExpiryPolicy, LeapSecondTable};

/// Severity of a finding.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Level {
    Ok,
    Note,
    Problem,
    Unusable,
}

/// One line of a preflight report.
#[derive(Clone, Debug, PartialEq)]
pub struct Finding {
    pub level: Level,
    pub text: String,
}

/// A preflight report.
#[derive(Clone, Debug, Default)]
pub struct Preflight {
    pub findings: Vec<Finding>,
}

impl Preflight {
    /// Adds a finding.
    pub fn add(&mut self, level: Level, text: impl Into<String>) {
        self.findings.push(Finding { level, text: text.into() });
    }

    /// The worst level found.
    pub fn worst(&self) -> Level {
        self.findings.iter().map(|f| f.level).max().unwrap_or(Level::Ok)
    }

    /// 0 clean, 1 problems, 2 unusable.
    pub fn exit_code(&self) -> u8 {
        match self.worst() {
            Level::Ok | Level::Note => 0,
            Level::Problem => 1,
            Level::Unusable => 2,
        }
    }

    /// The report, one finding a line.
    pub fn render(&self) -> String {
        let mut s = String::new();
        for f in &self.findings {
            let tag = match f.level {
                Level::Ok => "ok      ",
                Level::Note => "note    ",
                Level::Problem => "PROBLEM ",
                Level::Unusable => "UNUSABLE",
            };
            s.push_str(&format!("{tag} {}\n", f.text));
        }
        s
    }
}

/// Span of an input: whole days and exact first/last epochs (MJD, UTC).
pub struct Span {
    pub lo: i64,
    pub hi: i64,
    pub first_mjd: f64,
    pub last_mjd: f64,
    pub rows: usize,
}

/// What preflight needs to know of an input, accumulated over slices.
#[derive(Default)]
pub struct Facts {
    pub rows: usize,
    pub first_mjd: f64,
    pub last_mjd: f64,
    /// Rows per MJD day.
    pub days: BTreeMap<i64, usize>,
    /// Per code of the first code column (site / rx_station): rows, first and last day.
    pub codes: BTreeMap<String, (usize, i64, i64)>,
    /// Per code of the second code column (tx_station).
    pub codes2: BTreeMap<String, (usize, i64, i64)>,
    /// Distinct values of a category column (tracking observables).
    pub kinds: BTreeSet<String>,
    /// Rows whose own values would be rejected, by code.
    pub problems: BTreeMap<RejectCode, usize>,
}

impl Facts {
    /// Adds one slice's rows: day and fraction columns, the code columns and a category column.
    pub fn add(&mut self, days: &[Option<i64>], fracs: &[Option<f64>], codes: Option<&[Option<&str>]>, codes2: Option<&[Option<&str>]>, kinds: Option<&[Option<&str>]>) {
        if self.rows == 0 {
            self.first_mjd = f64::INFINITY;
            self.last_mjd = f64::NEG_INFINITY;
        }
        self.rows += days.len();
        // Counted per slice in hash maps keyed by the borrowed codes (no
        // String and no ordered-map walk per row), merged into the ordered
        // maps once per slice.
        type Fast<K, V> = std::collections::HashMap<K, V, foldhash::fast::FixedState>;
        /// Rows, first and last day of one code.
        type CodeRows = (usize, i64, i64);
        let mut day_rows: Fast<i64, usize> = Fast::default();
        let mut c1: Fast<&str, CodeRows> = Fast::default();
        let mut c2: Fast<&str, CodeRows> = Fast::default();
        fn note<'s>(m: &mut Fast<&'s str, CodeRows>, c: Option<&'s str>, d: i64) {
            if let Some(c) = c.filter(|c| !c.is_empty()) {
                let e = m.entry(c).or_insert((0, d, d));
                e.0 += 1;
                e.1 = e.1.min(d);
                e.2 = e.2.max(d);
            }
        }
        for (i, d) in days.iter().enumerate() {
            let Some(d) = *d else { continue };
            let t = d as f64 + fracs[i].filter(|x| x.is_finite()).unwrap_or(0.0);
            self.first_mjd = self.first_mjd.min(t);
            self.last_mjd = self.last_mjd.max(t);
            *day_rows.entry(d).or_default() += 1;
            if let Some(codes) = codes {
                note(&mut c1, codes[i], d);
            }
            if let Some(codes2) = codes2 {
                note(&mut c2, codes2[i], d);
            }
        }
        for (d, n) in day_rows {
            *self.days.entry(d).or_default() += n;
        }
        for (m, part) in [(&mut self.codes, c1), (&mut self.codes2, c2)] {
            for (c, (n, lo, hi)) in part {
                let e = m.entry(c.to_string()).or_insert((0, lo, hi));
                e.0 += n;
                e.1 = e.1.min(lo);
                e.2 = e.2.max(hi);
            }
        }
        if let Some(k) = kinds {
            for &k in k.iter().flatten() {
                if !self.kinds.contains(k) {
                    self.kinds.insert(k.to_string());
                }
            }
        }
    }

    /// Counts rows that would be rejected for their own values.
    pub fn count_problems(&mut self, rejects: impl Iterator<Item = Reject>) {
        for r in rejects {
            *self.problems.entry(r.code).or_default() += 1;
        }
    }

    /// The span of the rows seen, if any.
    pub fn span(&self) -> Option<Span> {
        Some(Span { lo: *self.days.keys().next()?, hi: *self.days.keys().next_back()?, first_mjd: self.first_mjd, last_mjd: self.last_mjd, rows: self.rows })
    }
}

/// Rows per slice when a partition is read in slices.
pub const SCAN_SLICE_ROWS: usize = 500_000;

/// Checks one frame (a whole partition or one slice of it from row
/// `first_row`): its ids into `ids` and the kind's typed columns and facts.
pub fn scan_frame(kind: &dyn Kind, df: &DataFrame, path: &Path, first_row: usize, facts: &mut Facts, id_check: &mut IdChecker) -> Result<(), PipelineError> {
    id_check.check(&ids(df, path)?, first_row, path)?;
    check_input_names(df, &kind.output_columns(), path)?;
    kind.scan(df, path, facts)
}

/// Reads a partition file in slices and returns its facts, with every id
/// checked (bounded memory: the file is never held whole).
pub fn scan_file(kind: &dyn Kind, path: &Path) -> Result<Facts, PipelineError> {
    let n = parquet_rows(path)?;
    let mut facts = Facts::default();
    let mut id_check = IdChecker::new(n);
    let mut at = 0usize;
    while at < n.max(1) {
        let df = read_parquet_slice(path, at, SCAN_SLICE_ROWS, None)?;
        scan_frame(kind, &df, path, at, &mut facts, &mut id_check)?;
        at += SCAN_SLICE_ROWS;
    }
    id_check.finish(path)?;
    Ok(facts)
}

/// The findings of one partition: its span, then the kind's checks.
pub fn check_partition(kind: &dyn Kind, report: &mut Preflight, path: &Path, facts: &Facts) {
    match facts.span() {
        None => report.add(Level::Note, format!("{}: no rows", path.display())),
        Some(s) => {
            report.add(Level::Ok, format!("{}: {} rows, MJD {} … {}", path.display(), s.rows, s.lo, s.hi));
            if !facts.problems.is_empty() {
                let n: usize = facts.problems.values().sum();
                let list: Vec<String> = facts.problems.iter().map(|(c, k)| format!("{c} ({k})")).collect();
                report.add(Level::Problem, format!("{}: {n} rows would be rejected for their values: {}", path.display(), list.join(", ")));
            }
            kind.check(report, facts);
        }
    }
}

/// Whether the kernels cover `bodies` at the first and last observation.
pub fn check_coverage(p: &mut Preflight, eph: &Ephemeris, bodies: &[i32], s: &Span) {
    // At the first and last observation (TDB ≈ UTC + 69.184 s; the light
    // time to a spacecraft reaches back further, checked row by row in the run).
    let mut all_ok = true;
    for &b in bodies {
        for (label, mjd) in [("first", s.first_mjd), ("last", s.last_mjd)] {
            let secs = (mjd - 51_544.5) * 86_400.0 + 69.184;
            let t = TdbSeconds::new(secs.floor() as i64, secs - secs.floor());
            if let Err(e) = eph.state_ssb(b, &t) {
                all_ok = false;
                p.add(Level::Problem, format!("{} ({b}) not covered at the {label} observation (MJD {mjd:.6}): {e}", body_name(b)));
            }
        }
    }
    if all_ok {
        p.add(Level::Ok, format!("kernels cover bodies {bodies:?} over the observations"));
    }
}

/// Whether the EOP and leap-second tables cover the observations.
pub fn check_earth(p: &mut Preflight, earth: &EarthModel, s: &Span, days: &BTreeMap<i64, usize>) {
    let (a, b) = earth.eop.span_mjd();
    if s.lo < a || s.hi + 1 > b {
        p.add(Level::Problem, format!("EOP table {} covers MJD {a} … {b}, observations span MJD {} … {}", earth.eop.path().display(), s.lo, s.hi));
    } else {
        p.add(Level::Ok, format!("EOP table {} covers MJD {a} … {b}", earth.eop.path().display()));
    }
    if let Some(pred) = earth.eop.first_predicted_mjd() {
        let n: usize = days.range(pred - 1..).map(|(_, c)| c).sum();
        if n > 0 {
            p.add(Level::Note, format!("{n} rows fall where the EOP values are PREDICTIONS (from MJD {pred}); rerun with newer EOP for final values"));
        }
    }
    check_leap_seconds(p, earth.time.leap_seconds(), s);
}

/// Whether the leap-second table answers UTC over the observations (a
/// table extended past its window on request counts as answering).
pub fn check_leap_seconds(p: &mut Preflight, leaps: &LeapSecondTable, s: &Span) {
    if s.hi >= leaps.window_mjd() && leaps.policy() != ExpiryPolicy::ExtendLastOffset {
        p.add(
            Level::Problem,
            format!("leap-second table ({}) cannot answer UTC on or after MJD {} (expires MJD {}); observations reach MJD {}", leaps.source_name(), leaps.window_mjd(), leaps.expires_mjd(), s.hi),
        );
    } else {
        p.add(Level::Ok, format!("leap-second table valid until MJD {} (expires MJD {})", leaps.window_mjd(), leaps.expires_mjd()));
    }
}

/// Codes of a column that the station catalogue lacks.
pub fn unknown_codes(p: &mut Preflight, cat: &StationCatalog, what: &str, codes: &BTreeMap<String, (usize, i64, i64)>) {
    let unknown: BTreeMap<&str, usize> = codes.iter().filter(|(c, _)| cat.get(c).is_err()).map(|(c, v)| (c.as_str(), v.0)).collect();
    if unknown.is_empty() {
        p.add(Level::Ok, format!("every {what} is in the station catalogue"));
    } else {
        let list: Vec<String> = unknown.iter().map(|(c, n)| format!("{c} ({n} rows)")).collect();
        p.add(Level::Problem, format!("unknown {what}: {}", list.join(", ")));
    }
}
