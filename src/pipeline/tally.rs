//! What a batch tells the summary: residual sets grouped by site or station,
//! reject counts by code, flagged-row counts and ranges; and the
//! kind-neutral statistics, summary lines, provenance entries and plots made
//! from them once a partition is complete.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::{PipelineError, Provenance};
use crate::reject::{Reject, RejectCode};
use crate::stats::{residual_summary, weighted_mean};

/// A unit residuals are shown in: its name and how many of it make one
/// natural unit (s or Hz) — e.g. ("ns", 1e9).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Unit {
    pub name: &'static str,
    pub per_natural: f64,
}

/// How a residual set is plotted.
#[derive(Clone, Debug, PartialEq)]
pub struct PlotSpec {
    /// File name part: `<output stem>.<name>.png`.
    pub name: String,
    pub title: String,
    pub x_label: String,
    /// Unit of the plotted residuals.
    pub unit: Unit,
}

/// The accepted rows' residuals of one observable, grouped (by site or
/// station), with the rejected rows counted per group. Values are in the
/// natural unit named by `natural_unit` ("s" or "hz").
#[derive(Clone, Debug)]
pub struct ResidualSet {
    /// Key of the set (merged by it); "" for a kind with one observable.
    pub key: String,
    /// Summary headline, e.g. "residuals" or "doppler_2way residuals".
    pub headline: String,
    /// What a group is: "site", "station".
    pub group_label: &'static str,
    /// Natural unit of the values: "s" or "hz" (provenance keys use it).
    pub natural_unit: &'static str,
    /// Unit of the summary lines.
    pub unit: Unit,
    pub plot: PlotSpec,
    /// Output column from which the set's weighted mean is removed after the
    /// partition is complete (a pipeline option), if any.
    pub subtract_mean_from: Option<&'static str>,
    /// False for a set that only makes a plot (the same rows as another
    /// set, against another abscissa): no summary lines, no provenance.
    pub summarised: bool,
    names: Vec<String>,
    group: Vec<u32>,
    /// Plot abscissa of each accepted row (MJD).
    pub x_mjd: Vec<f64>,
    pub residual: Vec<f64>,
    pub sigma: Vec<f64>,
    rejected: BTreeMap<String, usize>,
}

impl ResidualSet {
    /// An empty set.
    pub fn new(key: &str, headline: &str, group_label: &'static str, natural_unit: &'static str, unit: Unit, plot: PlotSpec) -> Self {
        Self {
            key: key.into(),
            headline: headline.into(),
            group_label,
            natural_unit,
            unit,
            plot,
            subtract_mean_from: None,
            summarised: true,
            names: Vec::new(),
            group: Vec::new(),
            x_mjd: Vec::new(),
            residual: Vec::new(),
            sigma: Vec::new(),
            rejected: BTreeMap::new(),
        }
    }

    fn group_index(&mut self, name: &str) -> u32 {
        match self.names.iter().position(|n| n == name) {
            Some(i) => i as u32,
            None => {
                self.names.push(name.to_string());
                (self.names.len() - 1) as u32
            }
        }
    }

    /// Adds one accepted row.
    pub fn push(&mut self, group: &str, x_mjd: f64, residual: f64, sigma: f64) {
        let g = match self.group.last() {
            Some(&g) if self.names[g as usize] == group => g,
            _ => self.group_index(group),
        };
        self.group.push(g);
        self.x_mjd.push(x_mjd);
        self.residual.push(residual);
        self.sigma.push(sigma);
    }

    /// Adds accepted rows given as group indices into `names` (no string per row).
    pub fn extend_indexed(&mut self, names: &[String], group: &[u32], x_mjd: Vec<f64>, residual: Vec<f64>, sigma: Vec<f64>) {
        let map: Vec<u32> = names.iter().map(|n| self.group_index(n)).collect();
        self.group.extend(group.iter().map(|g| map[*g as usize]));
        self.x_mjd.extend(x_mjd);
        self.residual.extend(residual);
        self.sigma.extend(sigma);
    }

    /// Counts one rejected row of a group.
    pub fn reject(&mut self, group: &str) {
        *self.rejected.entry(group.to_string()).or_default() += 1;
    }

    /// Rows accepted.
    pub fn len(&self) -> usize {
        self.residual.len()
    }

    /// True without accepted rows.
    pub fn is_empty(&self) -> bool {
        self.residual.is_empty()
    }

    fn append(&mut self, other: ResidualSet) {
        let ResidualSet { names, group, x_mjd, residual, sigma, rejected, .. } = other;
        self.extend_indexed(&names, &group, x_mjd, residual, sigma);
        for (g, n) in rejected {
            *self.rejected.entry(g).or_default() += n;
        }
    }

    /// The group name of accepted row `i`.
    pub fn group_of(&self, i: usize) -> &str {
        &self.names[self.group[i] as usize]
    }
}

/// Everything a batch reports beyond its tables; merged over the slices of
/// a streamed partition.
#[derive(Clone, Debug, Default)]
pub struct Tally {
    pub sets: Vec<ResidualSet>,
    /// Rejected rows by code.
    pub rejects_by_code: BTreeMap<RejectCode, usize>,
    /// Rows flagged, with the summary line's text after the count.
    pub flagged: Vec<(usize, String)>,
    /// Ranges of a value over the accepted rows: (label, unit, min, max).
    pub ranges: Vec<(String, &'static str, f64, f64)>,
    /// The input's day span for provenance: (label, first, last).
    pub coverage: Option<(String, i64, i64)>,
}

impl Tally {
    /// Counts rejects by code.
    pub fn count_rejects(&mut self, rejects: &[Reject]) {
        for r in rejects {
            *self.rejects_by_code.entry(r.code).or_default() += 1;
        }
    }

    /// The set with this key (created by `make` when new).
    pub fn set(&mut self, key: &str, make: impl FnOnce() -> ResidualSet) -> &mut ResidualSet {
        match self.sets.iter().position(|s| s.key == key) {
            Some(i) => &mut self.sets[i],
            None => {
                self.sets.push(make());
                let n = self.sets.len();
                &mut self.sets[n - 1]
            }
        }
    }

    /// Adds a flagged-row count (merged by text).
    pub fn flag(&mut self, n: usize, text: &str) {
        match self.flagged.iter_mut().find(|(_, t)| t == text) {
            Some(f) => f.0 += n,
            None => self.flagged.push((n, text.to_string())),
        }
    }

    /// Widens a range (merged by label).
    pub fn range(&mut self, label: &str, unit: &'static str, lo: f64, hi: f64) {
        match self.ranges.iter_mut().find(|r| r.0 == label) {
            Some(r) => {
                r.2 = r.2.min(lo);
                r.3 = r.3.max(hi);
            }
            None => self.ranges.push((label.to_string(), unit, lo, hi)),
        }
    }

    /// Records the day span of the input (merged).
    pub fn cover_days(&mut self, label: &str, days: &[Option<i64>]) {
        let (lo, hi) = days.iter().flatten().fold((i64::MAX, i64::MIN), |(a, b), d| (a.min(*d), b.max(*d)));
        if lo > hi {
            return;
        }
        self.coverage = Some(match self.coverage.take() {
            Some((l, a, b)) => (l, a.min(lo), b.max(hi)),
            None => (label.to_string(), lo, hi),
        });
    }

    /// Merges the tally of a later slice of the same partition.
    pub fn merge(&mut self, other: Tally) {
        for s in other.sets {
            match self.sets.iter().position(|x| x.key == s.key) {
                Some(i) => self.sets[i].append(s),
                None => self.sets.push(s),
            }
        }
        for (c, n) in other.rejects_by_code {
            *self.rejects_by_code.entry(c).or_default() += n;
        }
        for (n, t) in other.flagged {
            self.flag(n, &t);
        }
        for (l, u, a, b) in other.ranges {
            self.range(&l, u, a, b);
        }
        if let Some((l, a, b)) = other.coverage {
            self.coverage = Some(match self.coverage.take() {
                Some((l0, a0, b0)) => (l0, a0.min(a), b0.max(b)),
                None => (l, a, b),
            });
        }
    }

    /// Removes the weighted mean of each set that asks for it from its
    /// residuals; returns (output column, offset removed) per such set.
    pub fn remove_means(&mut self) -> Vec<(&'static str, f64)> {
        let mut out = Vec::new();
        for s in &mut self.sets {
            if let Some(col) = s.subtract_mean_from {
                let offset = weighted_mean(s.residual.iter().copied().zip(s.sigma.iter().copied()));
                for r in s.residual.iter_mut() {
                    *r -= offset;
                }
                // Sets over the same rows share one column (and offset).
                if !out.iter().any(|(c, _)| *c == col) {
                    out.push((col, offset));
                }
            }
        }
        out
    }
}

/// Statistics of one group (site or station) of a residual set.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct GroupStats {
    pub name: String,
    pub rows: usize,
    pub rejected: usize,
    /// In the set's natural unit (s or Hz).
    pub weighted_rms: f64,
    pub chi2: f64,
}

/// Statistics of one residual set (for machine-readable summaries).
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct SetStats {
    pub key: String,
    /// "s" or "hz".
    pub unit: String,
    pub rows: usize,
    pub weighted_rms: f64,
    pub chi2: f64,
    pub weighted_mean_removed: Option<f64>,
    pub groups: Vec<GroupStats>,
}

/// What a run did, for the summary on stdout and in the output metadata.
#[derive(Clone, Debug, Default, serde::Serialize)]
pub struct RunSummary {
    pub rows_in: usize,
    pub rows_out: usize,
    pub rows_rejected: usize,
    /// Rejected rows by reason code.
    pub rejects_by_reason: BTreeMap<String, usize>,
    pub output: PathBuf,
    pub rejects: PathBuf,
    /// Extra lines of summary, in order.
    pub notes: Vec<String>,
    /// Partitions processed and skipped (up to date).
    pub partitions_done: usize,
    pub partitions_skipped: usize,
    /// Plot files written.
    pub plots: Vec<PathBuf>,
    /// Residual statistics per set (and group).
    pub sets: Vec<SetStats>,
    /// Flagged-row counts: (rows, what).
    pub flagged: Vec<(usize, String)>,
}

/// The summary lines and provenance entries of a complete partition;
/// `offsets` are the means [`Tally::remove_means`] removed.
pub fn summarise(tally: &mut Tally, summary: &mut RunSummary, prov: &mut Provenance, offsets: &[(&'static str, f64)]) {
    for (c, n) in &tally.rejects_by_code {
        *summary.rejects_by_reason.entry(c.as_str().to_string()).or_default() += n;
    }
    tally.sets.sort_by(|a, b| a.key.cmp(&b.key));
    for s in tally.sets.iter().filter(|s| s.summarised) {
        let st = residual_summary(&s.residual, &s.sigma, false);
        let u = s.unit;
        let removed = s.subtract_mean_from.and_then(|c| offsets.iter().find(|o| o.0 == c)).map(|o| o.1);
        if st.count > 0 {
            summary.notes.push(format!(
                "{}: {} rows, weighted RMS {:.3} {}, χ² {:.2} (χ²/N {:.3}){}",
                s.headline,
                st.count,
                st.weighted_rms * u.per_natural,
                u.name,
                st.chi2,
                st.chi2 / st.count as f64,
                removed.map(|o| format!(", weighted mean {:.3} {} removed", o * u.per_natural, u.name)).unwrap_or_default()
            ));
        } else {
            summary.notes.push(format!("{}: no rows accepted", s.headline));
        }
        let mut by_group: BTreeMap<&str, (Vec<f64>, Vec<f64>, usize)> = BTreeMap::new();
        for i in 0..s.len() {
            let e = by_group.entry(s.group_of(i)).or_default();
            e.0.push(s.residual[i]);
            e.1.push(s.sigma[i]);
        }
        for (g, n) in &s.rejected {
            by_group.entry(g.as_str()).or_default().2 += n;
        }
        summary.notes.push(format!("  {:<14} {:>8} {:>9} {:>18} {:>12}", s.group_label, "rows", "rejected", format!("weighted RMS ({})", u.name), "χ²"));
        let mut stats = SetStats { key: s.key.clone(), unit: s.natural_unit.into(), rows: st.count, weighted_rms: st.weighted_rms, chi2: st.chi2, weighted_mean_removed: removed, groups: Vec::new() };
        for (g, (r, sg, rej)) in &by_group {
            let gs = residual_summary(r, sg, false);
            summary.notes.push(format!("  {g:<14} {:>8} {:>9} {:>18.3} {:>12.2}", gs.count, rej, gs.weighted_rms * u.per_natural, gs.chi2));
            stats.groups.push(GroupStats { name: g.to_string(), rows: gs.count, rejected: *rej, weighted_rms: gs.weighted_rms, chi2: gs.chi2 });
        }
        summary.sets.push(stats);
        let key = if s.key.is_empty() { "residuals".to_string() } else { format!("residuals.{}", s.key) };
        prov.set(&format!("{key}.count"), &st.count.to_string());
        prov.set(&format!("{key}.weighted_rms_{}", s.natural_unit), &format!("{:e}", st.weighted_rms));
        prov.set(&format!("{key}.chi2"), &format!("{:e}", st.chi2));
        if let Some(o) = removed {
            prov.set(&format!("{key}.weighted_mean_removed_{}", s.natural_unit), &format!("{o:e}"));
        }
    }
    for (n, text) in &tally.flagged {
        if *n > 0 {
            summary.notes.push(format!("{n} {text}"));
            summary.flagged.push((*n, text.clone()));
        }
    }
    for (label, unit, lo, hi) in &tally.ranges {
        summary.notes.push(format!("{label}: {lo:+.9e} {unit} … {hi:+.9e} {unit}"));
    }
    prov.set_rows(summary.rows_in, summary.rows_out, summary.rows_rejected);
}

/// Most points a plot shows; more rows are thinned to every k-th.
pub const PLOT_MAX_POINTS: usize = 50_000;

/// Residual plots of every set with accepted rows, beside `output`, staged
/// in `commit`: (staged, final) path pairs.
pub fn plot(tally: &Tally, output: &Path, formats: &[crate::plots::PlotFormat], commit: &mut super::commit::Commit) -> Result<Vec<(PathBuf, PathBuf)>, PipelineError> {
    let mut written = Vec::new();
    for s in tally.sets.iter().filter(|s| !s.is_empty()) {
        let step = s.len().div_ceil(PLOT_MAX_POINTS).max(1);
        let idx: Vec<usize> = (0..s.len()).step_by(step).collect();
        let k = s.plot.unit.per_natural;
        let labels: Vec<String> = idx.iter().map(|i| s.group_of(*i).to_string()).collect();
        let pick = |v: &[f64], scale: f64| idx.iter().map(|i| v[*i] * scale).collect::<Vec<f64>>();
        let groups = crate::plots::group(&labels, &pick(&s.x_mjd, 1.0), &pick(&s.residual, k), &pick(&s.sigma, k));
        let y_label = format!("residual ({})", s.plot.unit.name);
        // A thinned plot says so: its legend counts the rows shown.
        let title = if step > 1 { format!("{} — every {step}th row shown ({} of {})", s.plot.title, idx.len(), s.len()) } else { s.plot.title.clone() };
        written.extend(
            crate::plots::residual_plots(output, &s.plot.name, &title, &s.plot.x_label, &y_label, &groups, formats, &mut |p| commit.stage(p))
                .map_err(|source| PipelineError::Plot { path: output.into(), source })?,
        );
    }
    Ok(written)
}
