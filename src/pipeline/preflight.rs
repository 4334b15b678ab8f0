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

use super::{PipelineFile, resolve_inputs};
use crate::ephemeris::{Ephemeris, TdbSeconds, body_name};
use crate::earth::{EarthModel, StationCatalog};

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
    fn add(&mut self, level: Level, text: impl Into<String>) {
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
struct Span {
    lo: i64,
    hi: i64,
    first_mjd: f64,
    last_mjd: f64,
    rows: usize,
}

/// What preflight needs to know of an input, accumulated over slices.
#[derive(Default)]
struct Facts {
    rows: usize,
    first_mjd: f64,
    last_mjd: f64,
    /// Rows per MJD day.
    days: BTreeMap<i64, usize>,
    /// Per code of the first code column (site / rx_station): rows, first and last day.
    codes: BTreeMap<String, (usize, i64, i64)>,
    /// Per code of the second code column (tx_station).
    codes2: BTreeMap<String, (usize, i64, i64)>,
    kinds: BTreeSet<String>,
}

impl Facts {
    fn add(&mut self, days: &[Option<i64>], fracs: &[Option<f64>], codes: &[Option<&str>], codes2: Option<&[Option<&str>]>, kinds: Option<&[Option<&str>]>) {
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
            note(&mut c1, codes[i], d);
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

    fn span(&self) -> Option<Span> {
        Some(Span { lo: *self.days.keys().next()?, hi: *self.days.keys().next_back()?, first_mjd: self.first_mjd, last_mjd: self.last_mjd, rows: self.rows })
    }
}

/// Rows per slice when preflight reads an input.
const PREFLIGHT_SLICE_ROWS: usize = 500_000;

/// What the scan of one input file found.
enum Scanned {
    /// The file cannot be used: the message says why.
    Unusable(String),
    /// The file has no rows.
    Empty(std::path::PathBuf),
    /// The file's facts and span.
    Rows(std::path::PathBuf, Facts, Span),
}

/// Reads every file of an input (file, folder or glob) in slices: typed
/// columns, unique ids, and the facts the checks need. Needs nothing loaded,
/// so it runs while the shared inputs load. `Err`: the input names no files.
///
/// `slice(df, file, first_row, facts, ids)` reads one slice's typed columns,
/// records its ids (rows from `first_row`) and adds its facts.
fn scan_partitions(
    input: &Path,
    slice: impl Fn(&polars::prelude::DataFrame, &Path, usize, &mut Facts, &mut super::IdChecker) -> Result<(), super::PipelineError>,
) -> Result<Vec<Scanned>, String> {
    let (files, _) = resolve_inputs(input).map_err(|e| e.to_string())?;
    let mut out = Vec::with_capacity(files.len());
    'files: for f in files {
        let n = match super::parquet_rows(&f) {
            Ok(n) => n,
            Err(e) => {
                out.push(Scanned::Unusable(e.to_string()));
                continue;
            }
        };
        let mut facts = Facts::default();
        let mut ids = super::IdChecker::new(n);
        let mut at = 0usize;
        loop {
            if let Err(e) = super::read_parquet_slice(&f, at, PREFLIGHT_SLICE_ROWS, None).and_then(|df| slice(&df, &f, at, &mut facts, &mut ids)) {
                out.push(Scanned::Unusable(e.to_string()));
                continue 'files;
            }
            at += PREFLIGHT_SLICE_ROWS;
            if at >= n {
                break;
            }
        }
        if let Err(e) = ids.finish(&f) {
            out.push(Scanned::Unusable(e.to_string()));
            continue;
        }
        out.push(match facts.span() {
            Some(s) => Scanned::Rows(f, facts, s),
            None => Scanned::Empty(f),
        });
    }
    Ok(out)
}

/// Reports a scan file by file, running `each` (the checks against the
/// loaded inputs) on every file with rows.
fn each_partition(p: &mut Preflight, scanned: Result<Vec<Scanned>, String>, mut each: impl FnMut(&mut Preflight, &Path, &Facts, &Span)) {
    let files = match scanned {
        Ok(f) => f,
        Err(e) => return p.add(Level::Unusable, e),
    };
    for f in files {
        match f {
            Scanned::Unusable(e) => p.add(Level::Unusable, e),
            Scanned::Empty(f) => p.add(Level::Note, format!("{}: no rows", f.display())),
            Scanned::Rows(f, facts, s) => each(p, &f, &facts, &s),
        }
    }
}

fn check_coverage(p: &mut Preflight, eph: &Ephemeris, bodies: &[i32], s: &Span) {
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

fn check_earth(p: &mut Preflight, earth: &EarthModel, s: &Span, days: &BTreeMap<i64, usize>) {
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
    let leaps = earth.time.leap_seconds();
    if s.hi >= leaps.window_mjd() {
        p.add(Level::Problem, format!("leap-second table ({}) cannot answer UTC on or after MJD {} (expires MJD {}); observations reach MJD {}", leaps.source_name(), leaps.window_mjd(), leaps.expires_mjd(), s.hi));
    } else {
        p.add(Level::Ok, format!("leap-second table valid until MJD {} (expires MJD {})", leaps.window_mjd(), leaps.expires_mjd()));
    }
}

fn unknown_codes(p: &mut Preflight, cat: &StationCatalog, what: &str, codes: &BTreeMap<String, (usize, i64, i64)>) {
    let unknown: BTreeMap<&str, usize> = codes.iter().filter(|(c, _)| cat.get(c).is_err()).map(|(c, v)| (c.as_str(), v.0)).collect();
    if unknown.is_empty() {
        p.add(Level::Ok, format!("every {what} is in the station catalogue"));
    } else {
        let list: Vec<String> = unknown.iter().map(|(c, n)| format!("{c} ({n} rows)")).collect();
        p.add(Level::Problem, format!("unknown {what}: {}", list.join(", ")));
    }
}

/// Preflight of a pipeline file. Never fails: every failure is a finding.
pub fn preflight(path: &Path) -> Preflight {
    preflight_input(path, None)
}

/// Preflight of a pipeline file run on `input` (file, folder or glob)
/// instead of its `[input] path` when given.
pub fn preflight_input(path: &Path, input: Option<&Path>) -> Preflight {
    preflight_prepared(path, input).0
}

/// A pipeline read, and its shared inputs loaded, by the preflight: `lapse
/// run` hands it to [`super::run_prepared`] so that kernels, EOP and clocks
/// are read once.
pub struct Prepared {
    pub file: PipelineFile,
    pub loaded: Option<PreparedInputs>,
}

/// The shared inputs a preflight loaded (pulsar and tracking kinds).
pub enum PreparedInputs {
    Pulsar(Box<super::pulsar::LoadedPulsar>),
    Tracking(Box<super::tracking::LoadedTracking>),
}

/// [`preflight_input`], also returning what it loaded (`None` when the
/// pipeline file itself is unusable).
pub fn preflight_prepared(path: &Path, input: Option<&Path>) -> (Preflight, Option<Prepared>) {
    let mut p = Preflight::default();
    let file = match PipelineFile::read(path) {
        Ok(f) => f,
        Err(e) => {
            p.add(Level::Unusable, e.to_string());
            return (p, None);
        }
    };
    p.add(Level::Ok, format!("pipeline {} (kind {})", path.display(), file.kind));
    let loaded = match file.kind.as_str() {
        "pulsar" => preflight_pulsar(&file, input, &mut p).map(|l| PreparedInputs::Pulsar(Box::new(l))),
        "tracking" => preflight_tracking(&file, input, &mut p).map(|l| PreparedInputs::Tracking(Box::new(l))),
        _ => {
            if let Err(e) = file.parse::<super::TimescalesPipeline>() {
                p.add(Level::Unusable, e.to_string());
            }
            None
        }
    };
    (p, Some(Prepared { file, loaded }))
}

/// Loads a pipeline's shared inputs while scanning its input (`input`:
/// given on the command line or read from the pipeline; when neither is
/// known the scan follows the load, on the loaded pipeline's input path).
/// `None` after reporting the load's error as unusable.
fn load_and_scan<L: Send, E: std::fmt::Display + Send>(
    p: &mut Preflight,
    input: Option<std::path::PathBuf>,
    load: impl FnOnce() -> Result<L, E> + Send,
    input_of: impl Fn(&L) -> &Path,
    slice: impl Fn(&polars::prelude::DataFrame, &Path, usize, &mut Facts, &mut super::IdChecker) -> Result<(), super::PipelineError> + Sync,
) -> Option<(L, Result<Vec<Scanned>, String>)> {
    let (loaded, scanned) = rayon::join(load, || {
        let t0 = std::time::Instant::now();
        let s = input.as_deref().map(|i| scan_partitions(i, &slice));
        tracing::debug!(scan_s = t0.elapsed().as_secs_f64(), "input scanned");
        s
    });
    match loaded {
        Ok(l) => {
            let scanned = scanned.unwrap_or_else(|| scan_partitions(input_of(&l), &slice));
            Some((l, scanned))
        }
        Err(e) => {
            p.add(Level::Unusable, e.to_string());
            None
        }
    }
}

fn preflight_pulsar(file: &PipelineFile, input: Option<&Path>, p: &mut Preflight) -> Option<super::pulsar::LoadedPulsar> {
    let input_path = input.map(Path::to_path_buf).or_else(|| file.input_path());
    let (lp, scanned) = load_and_scan(p, input_path, || super::pulsar::load_pulsar(file), |lp| &lp.input_path, |df, f, at, facts, ids| {
        let i = super::pulsar::read_pulsar_input(df, f)?;
        ids.check(&i.obs_id, at, f)?;
        facts.add(&i.day, &i.frac, &i.site, None, None);
        Ok(())
    })?;
    p.add(Level::Ok, format!("kernels, EOP, stations{} loaded", if lp.ctx.clocks.is_empty() { "" } else { ", clock tables" }));
    let mut bodies = vec![399];
    bodies.extend(lp.ctx.shapiro.iter().map(|b| b.naif_id));
    each_partition(
        p,
        scanned,
        |p, f, facts, s| {
            p.add(Level::Ok, format!("{}: {} rows, arrival MJD {} … {}", f.display(), s.rows, s.lo, s.hi));
            unknown_codes(p, &lp.ctx.stations, "site", &facts.codes);
            check_coverage(p, &lp.ctx.ephemeris, &bodies, s);
            check_earth(p, &lp.ctx.earth, s, &facts.days);
            if lp.ctx.input_is_site_clock {
                for (site, (_, lo, hi)) in &facts.codes {
                    match lp.ctx.clocks.get(site) {
                        None => p.add(Level::Problem, format!("site {site} has no clock chain ([clocks] sites) but the input is in site-clock time")),
                        Some(chain) => {
                            for t in chain {
                                let (a, b) = t.span_mjd();
                                if (*lo as f64) < a || (*hi as f64 + 1.0) > b {
                                    let level = if lp.ctx.allow_clock_extrapolation { Level::Note } else { Level::Problem };
                                    p.add(level, format!("clock table {} covers MJD {a} … {b}; site {site} observes MJD {lo} … {hi}{}", t.path.display(), if lp.ctx.allow_clock_extrapolation { " (end values will be held and rows flagged)" } else { "" }));
                                }
                            }
                        }
                    }
                }
            }
        },
    );
    Some(lp)
}

fn preflight_tracking(file: &PipelineFile, input: Option<&Path>, p: &mut Preflight) -> Option<super::tracking::LoadedTracking> {
    let input_path = input.map(Path::to_path_buf).or_else(|| file.input_path());
    let (lt, scanned) = load_and_scan(p, input_path, || super::tracking::load_tracking(file), |lt| &lt.input_path, |df, f, at, facts, ids| {
        let i = super::tracking::read_tracking_input(df, f)?;
        ids.check(&i.obs_id, at, f)?;
        facts.add(&i.day, &i.frac, &i.rx_station, Some(&i.tx_station), Some(&i.kind));
        Ok(())
    })?;
    p.add(Level::Ok, "kernels, EOP, stations loaded");
    let mut bodies = vec![399, lt.ctx.target];
    bodies.extend(lt.ctx.shapiro.iter().map(|b| b.naif_id));
    each_partition(
        p,
        scanned,
        |p, f, facts, s| {
            p.add(Level::Ok, format!("{}: {} rows, reception MJD {} … {}", f.display(), s.rows, s.lo, s.hi));
            let bad_kinds: Vec<&str> = facts.kinds.iter().filter(|k| k.parse::<crate::tracking::observables::Kind>().is_err()).map(String::as_str).collect();
            if !bad_kinds.is_empty() {
                p.add(Level::Problem, format!("unknown kinds: {}", bad_kinds.join(", ")));
            }
            unknown_codes(p, &lt.ctx.stations, "rx_station", &facts.codes);
            unknown_codes(p, &lt.ctx.stations, "tx_station", &facts.codes2);
            check_coverage(p, &lt.ctx.ephemeris, &bodies, s);
            check_earth(p, &lt.ctx.earth, s, &facts.days);
        },
    );
    Some(lt)
}
