//! `lapse time`: epochs converted between time scales, printed to the
//! femtosecond; optionally at a station (topocentric TDB − TT) and with UT1.

use std::path::PathBuf;
use std::sync::Arc;

use crate::earth::{EarthError, EarthModel, EopError, EopTable, StationCatalog, StationError};
use crate::ephemeris::{Ephemeris, EphemerisError};
use crate::time::{ExpiryPolicy, LeapSecondTable, TimeError, TimeScale, TimeScales, parse_epoch};

/// What to convert and how.
#[derive(Clone, Debug, Default)]
pub struct TimeRequest {
    /// Epoch texts (ISO, `mjd:`, bare MJD, `jd:`).
    pub epochs: Vec<String>,
    /// Scale of the given epochs.
    pub from: String,
    /// Scales to print (empty: all, UT1 only with EOP).
    pub to: Vec<String>,
    /// A file of epochs, one per line (`#` starts a comment).
    pub file: Option<PathBuf>,
    /// An IERS leap-second file instead of the built-in table.
    pub leap_file: Option<PathBuf>,
    /// Accept UTC past the table's window (no further leap seconds).
    pub extend_leaps: bool,
    /// Topocentric part of TDB − TT, s (when no site is given).
    pub observer_term_s: f64,
    /// A station (code, catalogue, planetary kernel) for the topocentric term.
    pub site: Option<(String, PathBuf, PathBuf)>,
    /// IERS EOP file (enables UT1).
    pub eop: Option<PathBuf>,
}

/// Errors of `lapse time`; each names the epoch or file concerned.
#[derive(Debug, thiserror::Error)]
pub enum TimeCommandError {
    #[error(transparent)]
    Time(#[from] TimeError),
    #[error(transparent)]
    Eop(#[from] EopError),
    #[error(transparent)]
    Station(#[from] StationError),
    #[error(transparent)]
    Ephemeris(#[from] EphemerisError),
    #[error(transparent)]
    Earth(#[from] EarthError),
    #[error("cannot read {path}: {source}")]
    Read { path: PathBuf, source: std::io::Error },
    #[error("--{option}: {source}")]
    Option { option: &'static str, source: TimeError },
    #[error("UT1 needs Earth-orientation data: give --eop FILE (IERS finals2000A or C04)")]
    Ut1NeedsEop,
    #[error("no epochs given (arguments or --file)")]
    NoEpochs,
    #[error("--format {0}: use text, csv or json")]
    UnknownFormat(String),
    #[error("{at}: {error}")]
    At { at: String, error: Box<TimeCommandError> },
}

fn at(where_: &str) -> impl Fn(TimeCommandError) -> TimeCommandError + '_ {
    move |e| TimeCommandError::At { at: where_.to_string(), error: Box::new(e) }
}

/// How `lapse time` prints.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum TimeFormat {
    /// One block per epoch, aligned, with `#` comment lines.
    #[default]
    Text,
    /// One row per epoch and scale: `input,scale,iso,mjd` (header first).
    Csv,
    /// A JSON array of `{input, from, scale, iso, mjd}` objects.
    Json,
}

impl std::str::FromStr for TimeFormat {
    type Err = TimeCommandError;
    fn from_str(s: &str) -> Result<Self, TimeCommandError> {
        match s {
            "text" => Ok(TimeFormat::Text),
            "csv" => Ok(TimeFormat::Csv),
            "json" => Ok(TimeFormat::Json),
            other => Err(TimeCommandError::UnknownFormat(other.to_string())),
        }
    }
}

/// One requested epoch, converted: its text, where it came from, comment
/// lines (site term, predicted EOP) and (scale, ISO text, MJD text) per
/// target scale.
struct Converted {
    input: String,
    notes: Vec<String>,
    values: Vec<(TimeScale, String, String)>,
}

/// The conversion table of every requested epoch, in `format`.
pub fn convert_as(req: &TimeRequest, format: TimeFormat) -> Result<String, TimeCommandError> {
    let (from, rows) = convert_rows(req)?;
    let mut out = String::new();
    match format {
        TimeFormat::Text => {
            for r in &rows {
                out.push_str(&format!("# {} ({from})\n", r.input));
                for n in &r.notes {
                    out.push_str(&format!("# {n}\n"));
                }
                for (scale, iso, mjd) in &r.values {
                    out.push_str(&format!("{:<4} {iso}  MJD {mjd}\n", scale.name()));
                }
            }
        }
        TimeFormat::Csv => {
            let q = |s: &str| if s.contains([',', '"']) { format!("\"{}\"", s.replace('"', "\"\"")) } else { s.to_string() };
            out.push_str("input,from,scale,iso,mjd\n");
            for r in &rows {
                for (scale, iso, mjd) in &r.values {
                    out.push_str(&format!("{},{from},{},{iso},{mjd}\n", q(&r.input), scale.name()));
                }
            }
        }
        TimeFormat::Json => {
            let v: Vec<serde_json::Value> = rows
                .iter()
                .flat_map(|r| r.values.iter().map(|(scale, iso, mjd)| serde_json::json!({ "input": r.input, "from": from.to_string(), "scale": scale.name(), "iso": iso, "mjd": mjd })))
                .collect();
            out = serde_json::to_string_pretty(&v).unwrap_or_default() + "\n";
        }
    }
    Ok(out)
}

/// The conversion table of every requested epoch, as text.
pub fn convert(req: &TimeRequest) -> Result<String, TimeCommandError> {
    convert_as(req, TimeFormat::Text)
}

fn convert_rows(req: &TimeRequest) -> Result<(TimeScale, Vec<Converted>), TimeCommandError> {
    let from: TimeScale = req.from.parse().map_err(|source| TimeCommandError::Option { option: "from", source })?;
    let targets: Vec<TimeScale> = if req.to.is_empty() {
        TimeScale::ALL.into_iter().filter(|s| *s != TimeScale::Ut1 || req.eop.is_some()).collect()
    } else {
        req.to.iter().map(|s| s.parse::<TimeScale>()).collect::<Result<_, _>>().map_err(|source| TimeCommandError::Option { option: "to", source })?
    };
    if (targets.contains(&TimeScale::Ut1) || from == TimeScale::Ut1) && req.eop.is_none() {
        return Err(TimeCommandError::Ut1NeedsEop);
    }
    let mut leaps = match &req.leap_file {
        Some(p) => {
            let t = LeapSecondTable::from_file(p)?;
            t.check_against_builtin()?;
            t
        }
        None => LeapSecondTable::builtin(),
    };
    if req.extend_leaps {
        leaps = leaps.with_policy(ExpiryPolicy::ExtendLastOffset);
    }
    let mut ts = TimeScales::new(leaps);
    let (mut earth, mut eop_table) = (None, None);
    if let Some(path) = &req.eop {
        let table = Arc::new(EopTable::from_file(path)?);
        table.check_leap_seconds(ts.leap_seconds())?;
        ts = ts.with_ut1(table.clone());
        eop_table = Some(table.clone());
        if let Some((code, stations, kernel)) = &req.site {
            let station = StationCatalog::from_file(stations)?.get(code)?.clone();
            let eph = Ephemeris::load(&[kernel])?;
            earth = Some((EarthModel::new(ts.clone(), (*table).clone()), eph, station));
        }
    }
    let mut epochs = req.epochs.clone();
    let mut sources: Vec<String> = (1..=epochs.len()).map(|i| format!("argument {i}")).collect();
    if let Some(path) = &req.file {
        let text = std::fs::read_to_string(path).map_err(|source| TimeCommandError::Read { path: path.clone(), source })?;
        for (i, line) in text.lines().enumerate() {
            let body = line.split('#').next().unwrap_or("").trim();
            if !body.is_empty() {
                epochs.push(body.to_string());
                sources.push(format!("{} line {}", path.display(), i + 1));
            }
        }
    }
    if epochs.is_empty() {
        return Err(TimeCommandError::NoEpochs);
    }
    let mut rows = Vec::with_capacity(epochs.len());
    for (text, source) in epochs.iter().zip(&sources) {
        let here = format!("{source}: {text}");
        let e = parse_epoch(&ts, from, text).map_err(|e| at(source)(e.into()))?;
        let mut notes = Vec::new();
        let mut observer_s = req.observer_term_s;
        if let Some((model, eph, station)) = &earth {
            let state = model.station_state_at(eph, station, &e).map_err(|e| at(&format!("{here} at site {}", station.code))(e.into()))?;
            observer_s = state.observer_term_s;
            notes.push(format!("site {}: topocentric TDB − TT = {observer_s:+.15e} s (v_E·x/c²){}", station.code, if state.eop.predicted { "; EOP values are PREDICTIONS" } else { "" }));
        }
        if let (Some(table), true) = (&eop_table, targets.contains(&TimeScale::Ut1)) {
            let utc = ts.convert(e, TimeScale::Utc, observer_s).map_err(|e| at(&here)(e.into()))?;
            if table.at_utc(ts.leap_seconds(), &utc).map_err(|e| at(&here)(e.into()))?.predicted {
                notes.push(format!("UT1 uses PREDICTED Earth-orientation values from {}", table.path().display()));
            }
        }
        let mut values = Vec::with_capacity(targets.len());
        for t in &targets {
            let c = ts.convert(e, *t, observer_s).map_err(|e| at(&here)(e.into()))?;
            let mjd = ts.mjd_fraction_digits(&c, 18)?;
            let iso = c.to_string();
            let iso = iso.rsplit_once(' ').map(|(a, _)| a).unwrap_or(&iso).to_string();
            values.push((*t, iso, mjd));
        }
        rows.push(Converted { input: text.clone(), notes, values });
    }
    Ok((from, rows))
}
