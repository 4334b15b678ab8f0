//! Planetary and spacecraft states from JPL SPK kernels.
//!
//! Load one or more kernels with [`Ephemeris::load`], then ask for the
//! barycentric state of any body at a TDB epoch ([`Ephemeris::state_ssb`]).
//! Segments are searched as SPICE does: the most recently loaded kernel
//! first, and within a kernel the last segment first (NAIF SPK Required
//! Reading, "Loading Files / Precedence"). States are chained through the
//! segments' centres down to the solar-system barycentre (NAIF 0).

pub mod chebyshev;
pub mod daf;
pub mod discrete;
pub mod grid;
pub mod naif;
pub mod oem;
mod spk;
pub mod spk_write;

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

pub use naif::{body_id, body_name};
pub use spk::{ChebyshevData, DiscreteStates, Segment, SegmentData, SpkKernel, StateKm, TdbSeconds};

use crate::time::{TimeScale, TimeScales};

/// Errors of ephemeris queries.
#[derive(Debug, thiserror::Error)]
pub enum EphemerisError {
    /// An unreadable, truncated or inconsistent kernel.
    #[error("SPK kernel {path}: {message}")]
    Kernel { path: PathBuf, message: String },
    /// A body name no table knows.
    #[error("unknown body '{name}': give a NAIF name (e.g. EARTH, JUPITER BARYCENTER) or integer code")]
    UnknownBody { name: String },
    /// No loaded kernel has a segment for the body.
    #[error("no loaded kernel holds {body} (NAIF {id}); loaded: {loaded}")]
    NoData { body: String, id: i32, loaded: String },
    /// Segments exist but none covers the epoch.
    #[error("{body} (NAIF {id}) relative to NAIF {center}: epoch {tdb} ({utc}) is outside the loaded coverage {coverage}")]
    OutOfCoverage { body: String, id: i32, center: i32, tdb: String, utc: String, coverage: String },
    /// The covering segment is of a type lapse does not evaluate.
    #[error("{body} (NAIF {id}): SPK segment type {spk_type} in {path} is not supported (types 2, 3, 9 and 13 are)")]
    UnsupportedType { body: String, id: i32, spk_type: i32, path: PathBuf },
    /// The chain of centres does not reach the barycentre.
    #[error("the centres of {body} (NAIF {id}) loop or go deeper than 16 levels before reaching the solar-system barycentre")]
    BrokenChain { body: String, id: i32 },
}

/// One or more SPK kernels, queried together.
#[derive(Clone, Debug, Default)]
pub struct Ephemeris {
    kernels: Vec<SpkKernel>,
    /// Position grids of Shapiro bodies for the batch being computed
    /// ([`Self::cover_body_grids`]; see [`grid`]).
    grids: Vec<grid::BodyGrid>,
    /// The Earth's state grid of a tracking batch ([`Self::cover_earth_grid_utc_days`]).
    earth_grid: Option<grid::BodyGrid>,
}

/// TDB seconds past J2000 a batch's grids cover for its UTC days (MJD, see
/// [`crate::time::batch_day_span`]): from two days before the first
/// (retarded epochs of the bodies, light time to a spacecraft) to two days
/// after the last. MJD 51 544.5 is J2000; TDB − UTC < 70 s, inside the
/// padding.
fn grid_span_s(days_mjd_utc: impl IntoIterator<Item = i64>) -> Option<(i64, i64)> {
    let (lo, hi) = crate::time::batch_day_span(days_mjd_utc)?;
    let j2000_s = |mjd: i64| (mjd - 51_544) * 86_400 - 43_200;
    Some((j2000_s(lo - 2), j2000_s(hi + 2)))
}

/// Calendar TDB text of an epoch (for messages).
fn tdb_text(t: &TdbSeconds) -> String {
    let fs = t.whole_s as i128 * crate::time::femto::FS_PER_S + crate::time::femto::seconds_to_fs(t.frac_s).unwrap_or(0) + crate::time::relativistic::J2000_FS;
    crate::time::Epoch::from_uniform_fs(TimeScale::Tdb, fs).map(|e| e.to_string()).unwrap_or_else(|_| format!("{} s TDB past J2000", t.approx_s()))
}

/// Calendar UTC text of a TDB epoch, geocentric (for messages).
fn utc_text(t: &TdbSeconds) -> String {
    let ts = TimeScales::new(crate::time::LeapSecondTable::builtin().with_policy(crate::time::ExpiryPolicy::ExtendLastOffset));
    let fs = t.whole_s as i128 * crate::time::femto::FS_PER_S + crate::time::femto::seconds_to_fs(t.frac_s).unwrap_or(0) + crate::time::relativistic::J2000_FS;
    crate::time::Epoch::from_uniform_fs(TimeScale::Tdb, fs).and_then(|e| ts.convert(e, TimeScale::Utc, 0.0)).map(|e| e.to_string()).unwrap_or_else(|_| "UTC not representable".to_string())
}

fn span_text(a: f64, b: f64) -> String {
    format!("{} … {}", tdb_text(&TdbSeconds::new(a.floor() as i64, a - a.floor())), tdb_text(&TdbSeconds::new(b.floor() as i64, b - b.floor())))
}

impl Ephemeris {
    /// Loads kernels in order; later ones take precedence.
    pub fn load<P: AsRef<Path>>(paths: &[P]) -> Result<Self, EphemerisError> {
        let mut kernels = Vec::with_capacity(paths.len());
        for p in paths {
            let k = SpkKernel::load(p.as_ref())?;
            tracing::debug!(path = %p.as_ref().display(), segments = k.segments.len(), "loaded SPK kernel");
            kernels.push(k);
        }
        Ok(Self { kernels, grids: Vec::new(), earth_grid: None })
    }

    /// Adds a kernel (taking precedence over those loaded before).
    pub fn add_kernel(&mut self, k: SpkKernel) {
        self.kernels.push(k);
        // A later kernel may take precedence for a gridded body.
        self.grids.clear();
        self.earth_grid = None;
    }

    /// From already parsed kernels.
    pub fn from_kernels(kernels: Vec<SpkKernel>) -> Self {
        Self { kernels, grids: Vec::new(), earth_grid: None }
    }

    /// Makes position grids of `ids` cover TDB seconds `first_s ..= last_s`
    /// past J2000, replacing those that fall short (nodes at fixed epochs,
    /// computed in blocks on first use: values do not depend on the span).
    /// Epochs whose block has a node outside the kernels are evaluated directly.
    pub fn cover_body_grids(&mut self, ids: &[i32], first_s: i64, last_s: i64) {
        for &id in ids {
            if self.grids.iter().any(|g| g.id == id && g.covers(first_s, last_s)) {
                continue;
            }
            self.grids.retain(|g| g.id != id);
            self.grids.push(grid::BodyGrid::new(id, grid::BODY_GRID_STEP_S, first_s, last_s));
        }
    }

    /// [`Self::cover_body_grids`] for a batch over UTC days (MJD; see
    /// [`grid_span_s`]); epochs outside the grids are evaluated directly.
    pub fn cover_body_grids_utc_days(&mut self, ids: &[i32], days_mjd_utc: impl IntoIterator<Item = i64>) {
        if let Some((first_s, last_s)) = grid_span_s(days_mjd_utc)
            && !ids.is_empty()
        {
            self.cover_body_grids(ids, first_s, last_s);
        }
    }

    /// A grid of the Earth's state (NAIF 399, every 30 min) over UTC days
    /// (MJD; see [`grid_span_s`]): for tracking batches, whose rows each need
    /// about six Earth states within minutes to hours of each other. Kept
    /// when it already covers the days.
    pub fn cover_earth_grid_utc_days(&mut self, days_mjd_utc: impl IntoIterator<Item = i64>) {
        let Some((first_s, last_s)) = grid_span_s(days_mjd_utc) else { return };
        if self.earth_grid.as_ref().is_some_and(|g| g.covers(first_s, last_s)) {
            return;
        }
        self.earth_grid = Some(grid::BodyGrid::new(399, grid::EARTH_GRID_STEP_S, first_s, last_s));
    }

    /// Barycentric state of the Earth: from the grid of a tracking batch when
    /// it covers `t` (≤ 1e-4 m, ≤ 2e-7 m/s from the kernel: the f64 floor of
    /// km positions; see [`grid`]), else from the kernels.
    ///
    /// # Errors
    /// As [`Self::state_ssb`].
    #[inline]
    pub fn earth_state_ssb(&self, t: &TdbSeconds) -> Result<StateKm, EphemerisError> {
        match self.earth_grid.as_ref().and_then(|g| g.state_km(self, t)) {
            Some(s) => Ok(s),
            None => self.state_ssb(399, t),
        }
    }

    /// Barycentric position (km) of a Shapiro body: from its grid when one
    /// covers `t`, else from the kernels. For Shapiro delays only (see
    /// [`grid`] for the bound: ≤ 1e-19 s of delay).
    ///
    /// # Errors
    /// As [`Self::position_ssb_km`].
    #[inline]
    pub fn shapiro_position_ssb_km(&self, target: i32, t: &TdbSeconds) -> Result<[f64; 3], EphemerisError> {
        match self.grids.iter().find(|g| g.id == target).and_then(|g| g.position_km(self, t)) {
            Some(p) => Ok(p),
            None => self.position_ssb_km(target, t),
        }
    }

    /// The loaded kernels.
    pub fn kernels(&self) -> &[SpkKernel] {
        &self.kernels
    }

    /// The segment that answers `target` at `t`, by SPICE precedence.
    fn segment_for(&self, target: i32, t: &TdbSeconds) -> Result<(&Segment, &Path), EphemerisError> {
        let mut any = false;
        for k in self.kernels.iter().rev() {
            for s in k.segments.iter().rev().filter(|s| s.target == target) {
                any = true;
                if s.covers(t) {
                    return Ok((s, &k.path));
                }
            }
        }
        if !any {
            return Err(EphemerisError::NoData { body: body_name(target), id: target, loaded: self.loaded_text() });
        }
        let mut coverage = String::new();
        for k in &self.kernels {
            for s in k.segments.iter().filter(|s| s.target == target) {
                let _ = write!(coverage, "[{} wrt NAIF {} in {}] ", span_text(s.start_s, s.end_s), s.center, k.path.display());
            }
        }
        let center = self.kernels.iter().flat_map(|k| &k.segments).find(|s| s.target == target).map(|s| s.center).unwrap_or(0);
        Err(EphemerisError::OutOfCoverage { body: body_name(target), id: target, center, tdb: tdb_text(t), utc: utc_text(t), coverage: coverage.trim_end().to_string() })
    }

    fn loaded_text(&self) -> String {
        if self.kernels.is_empty() {
            return "no kernels".into();
        }
        self.kernels.iter().map(|k| k.path.display().to_string()).collect::<Vec<_>>().join(", ")
    }

    /// State of `target` relative to its segment's centre, and that centre.
    pub fn state_wrt_center(&self, target: i32, t: &TdbSeconds) -> Result<(StateKm, i32), EphemerisError> {
        let (seg, path) = self.segment_for(target, t)?;
        match seg.evaluate(t) {
            Some(s) => Ok((s, seg.center)),
            None => Err(EphemerisError::UnsupportedType { body: body_name(target), id: target, spk_type: seg.spk_type, path: path.to_path_buf() }),
        }
    }

    /// Barycentric (NAIF 0) state of a body at a TDB epoch, ICRF axes.
    ///
    /// # Accuracy
    /// That of the kernel; evaluation adds < 0.1 mm (see [`Segment::evaluate`]).
    ///
    /// # Errors
    /// Unknown body, no data, epoch outside coverage (naming the epoch in TDB
    /// and UTC and the loaded coverage), unsupported segment type.
    pub fn state_ssb(&self, target: i32, t: &TdbSeconds) -> Result<StateKm, EphemerisError> {
        self.along_chain(target, t, StateKm::default(), |seg| seg.evaluate(t), |a, b| a + b)
    }

    /// Barycentric position (km) of a body: bit-identical to
    /// `state_ssb(..).position_km`, at about half the cost (no velocities).
    ///
    /// # Accuracy
    /// As [`Self::state_ssb`].
    ///
    /// # Errors
    /// As [`Self::state_ssb`].
    pub fn position_ssb_km(&self, target: i32, t: &TdbSeconds) -> Result<[f64; 3], EphemerisError> {
        self.along_chain(target, t, [0.0f64; 3], |seg| seg.position(t), |a, b| std::array::from_fn(|k| a[k] + b[k]))
    }

    /// Sums `eval` over the chain of segments from `target` to the solar
    /// system barycentre (NAIF 0), in chain order.
    fn along_chain<T>(&self, target: i32, t: &TdbSeconds, zero: T, eval: impl Fn(&Segment) -> Option<T>, add: impl Fn(T, T) -> T) -> Result<T, EphemerisError> {
        let mut total = zero;
        let mut body = target;
        for _ in 0..16 {
            if body == 0 {
                return Ok(total);
            }
            let (seg, path) = self.segment_for(body, t)?;
            let v = eval(seg).ok_or_else(|| EphemerisError::UnsupportedType { body: body_name(body), id: body, spk_type: seg.spk_type, path: path.to_path_buf() })?;
            total = add(total, v);
            body = seg.center;
        }
        Err(EphemerisError::BrokenChain { body: body_name(target), id: target })
    }

    /// Barycentric state of a body given by name or code.
    pub fn state_ssb_named(&self, name: &str, t: &TdbSeconds) -> Result<StateKm, EphemerisError> {
        let id = body_id(name, &[]).ok_or_else(|| EphemerisError::UnknownBody { name: name.into() })?;
        self.state_ssb(id, t)
    }

    /// A human-readable listing of every loaded kernel's segments: target,
    /// centre, frame, SPK type and coverage (TDB).
    pub fn listing(&self) -> String {
        let mut out = String::new();
        for k in &self.kernels {
            let _ = writeln!(out, "{}  ({} segments)", k.path.display(), k.segments.len());
            let _ = writeln!(out, "  {:<28} {:<28} {:>12} {:>5}  coverage (TDB)", "body", "relative to", "frame", "type");
            for s in &k.segments {
                let _ = writeln!(
                    out,
                    "  {:<28} {:<28} {:>12} {:>5}  {}",
                    format!("{} ({})", body_name(s.target), s.target),
                    format!("{} ({})", body_name(s.center), s.center),
                    // NAIF frame 1 is J2000, aligned with the ICRF in DE kernels.
                    if s.frame == 1 { "J2000/ICRF".to_string() } else { format!("NAIF {}", s.frame) },
                    s.spk_type,
                    span_text(s.start_s, s.end_s)
                );
            }
        }
        out
    }
}
