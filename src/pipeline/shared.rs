//! The shared inputs of kinds with geometry — `[ephemeris]`, `[earth]`,
//! `[stations]` — their configuration tables, loading (once per run) and
//! provenance; and the `[output]` table every kind has.

use std::path::{Path, PathBuf};

use serde::Deserialize;

use super::provenance::{eop_coverage, kernel_coverage, leap_coverage};
use super::{PipelineError, PipelineFile, Provenance};
use crate::constants::Constants;
use crate::earth::{EarthModel, EopTable, StationCatalog};
use crate::ephemeris::Ephemeris;
use crate::time::{LeapSecondTable, TimeScales};

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EphemerisCfg {
    pub kernels: Vec<PathBuf>,
    /// Constants file (GM values); default: the built-in DE421 constants.
    pub constants: Option<PathBuf>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EarthCfg {
    pub eop: PathBuf,
    pub leap_seconds: Option<PathBuf>,
    /// Apply the celestial pole offsets dX, dY (default true).
    #[serde(default = "yes")]
    pub pole_offsets: bool,
}

fn yes() -> bool {
    true
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StationsCfg {
    pub catalog: PathBuf,
}

/// `[time]`: the leap-second file (the same key in every kind).
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TimeCfg {
    pub leap_seconds: Option<PathBuf>,
    /// Accept UTC past the table's window (timescales only).
    #[serde(default)]
    pub extend_leap_table: bool,
}

/// The leap-second file of a pipeline: `[time] leap_seconds`, or the
/// deprecated `[earth] leap_seconds` (accepted for one release, with a
/// warning); both at once is an error.
pub fn leap_seconds_key<'a>(file: &PipelineFile, time: Option<&'a Path>, earth: Option<&'a Path>) -> Result<Option<&'a Path>, PipelineError> {
    match (time, earth) {
        (Some(_), Some(_)) => Err(file.invalid("leap_seconds given in [time] and in [earth]: keep [time] leap_seconds")),
        (None, Some(p)) => {
            tracing::warn!("{}: [earth] leap_seconds is deprecated: write it as [time] leap_seconds", file.path.display());
            Ok(Some(p))
        }
        (t, None) => Ok(t),
    }
}

/// `[output]`: where the results table goes (rejects beside it).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OutputCfg {
    pub path: PathBuf,
}

/// The inputs every pipeline kind with geometry shares, loaded once.
pub struct SharedInputs {
    pub ephemeris: Ephemeris,
    pub constants: Constants,
    pub earth: EarthModel,
    pub stations: StationCatalog,
    /// Role, path and coverage of each file read, for provenance.
    pub inputs: Vec<(String, PathBuf, String)>,
}

/// Loads `[ephemeris]`, `[earth]` and `[stations]` of a pipeline.
pub fn load_shared(file: &PipelineFile, eph: &EphemerisCfg, earth_cfg: &EarthCfg, time_cfg: Option<&TimeCfg>, st: &StationsCfg) -> Result<SharedInputs, PipelineError> {
    let invalid = |message: String| file.invalid(message);
    let mut inputs: Vec<(String, PathBuf, String)> = Vec::new();
    let leap = leap_seconds_key(file, time_cfg.and_then(|t| t.leap_seconds.as_deref()), earth_cfg.leap_seconds.as_deref())?;
    let (time, leap_path) = load_time(file, leap)?;
    if let Some(p) = leap_path {
        inputs.push(("leap_seconds".into(), p, leap_coverage(time.leap_seconds())));
    }
    let kernels: Vec<PathBuf> = eph.kernels.iter().map(|k| file.resolve(k)).collect();
    if kernels.is_empty() {
        return Err(invalid("[ephemeris] kernels is empty".into()));
    }
    // The kernels and the EOP file are independent: read them concurrently.
    let eop_path = file.resolve(&earth_cfg.eop);
    fn timed<R>(what: &str, load: impl FnOnce() -> R) -> R {
        let t0 = std::time::Instant::now();
        let r = load();
        tracing::debug!(load_s = t0.elapsed().as_secs_f64(), "{what} loaded");
        r
    }
    let (ephemeris, eop) = rayon::join(|| timed("kernels", || Ephemeris::load(&kernels)), || timed("EOP", || EopTable::from_file(&eop_path)));
    let ephemeris = ephemeris.map_err(|e| invalid(format!("[ephemeris] {e}")))?;
    let eop = eop.map_err(|e| invalid(format!("[earth] {e}")))?;
    eop.check_leap_seconds(time.leap_seconds()).map_err(|e| invalid(format!("[earth] {e}")))?;
    for (k, loaded) in kernels.iter().zip(ephemeris.kernels()) {
        inputs.push(("kernel".into(), k.clone(), kernel_coverage(loaded)));
    }
    let constants = match &eph.constants {
        Some(p) => {
            let p = file.resolve(p);
            inputs.push(("constants".into(), p.clone(), String::new()));
            Constants::from_file(&p).map_err(|e| invalid(e.to_string()))?
        }
        None => Constants::builtin(),
    };
    inputs.push(("eop".into(), eop_path, eop_coverage(&eop)));
    let mut earth = EarthModel::new(time, eop);
    earth.pole_offsets = earth_cfg.pole_offsets;
    let stations_path = file.resolve(&st.catalog);
    let stations = StationCatalog::from_file(&stations_path).map_err(|e| invalid(format!("[stations] {e}")))?;
    inputs.push(("stations".into(), stations_path, format!("{} stations", stations.stations().len())));
    Ok(SharedInputs { ephemeris, constants, earth, stations, inputs })
}

/// Provenance shared by every partition of a run with geometry: the
/// pipeline, every shared input file, and the constants used.
pub fn shared_provenance(
    file: &PipelineFile,
    inputs: &[(String, PathBuf, String)],
    constants: &Constants,
    shapiro: &[crate::delays::ShapiroBody],
    ppn_gamma: f64,
) -> Result<Provenance, PipelineError> {
    let mut base = Provenance::start(file);
    for (role, p, cov) in inputs {
        base.add_input(role, p, cov)?;
    }
    base.set("constants.ephemeris", &constants.ephemeris.name);
    for b in shapiro {
        base.set(&format!("constants.gm_m3_s2.{}", b.name), &format!("{:e}", b.gm_m3_s2));
    }
    base.set("constants.ppn_gamma", &format!("{ppn_gamma}"));
    base.set("constants.c_m_s", "299792458");
    Ok(base)
}

/// Time scales from an optional leap-second file of a pipeline.
pub fn load_time(file: &PipelineFile, leap: Option<&Path>) -> Result<(TimeScales, Option<PathBuf>), PipelineError> {
    match leap {
        Some(p) => {
            let p = file.resolve(p);
            let t = LeapSecondTable::from_file(&p).and_then(|t| t.check_against_builtin().map(|_| t)).map_err(|source| PipelineError::Time { context: "[earth] leap_seconds".into(), source })?;
            Ok((TimeScales::new(t), Some(p)))
        }
        None => Ok((TimeScales::builtin(), None)),
    }
}
