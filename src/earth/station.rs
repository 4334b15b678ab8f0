//! Station catalogues (TOML): ITRF positions, optional plate motion.
//!
//! ```toml
//! [[station]]
//! code = "HARRIER-2"
//! geodetic = { lat_deg = 39.9, lon_deg = -3.2, height_m = 812.0 }   # GRS80
//! velocity_m_per_yr = [-0.012, 0.018, 0.011]
//! epoch_mjd = 55197.0
//! delay_s = 1.2e-6          # optional electronic delay on each leg
//!
//! [[station]]
//! code = "GEO"
//! itrf_m = [0.0, 0.0, 0.0]     # the geocentre
//! ```

use std::path::{Path, PathBuf};

use serde::Deserialize;

/// Errors of station catalogues.
#[derive(Debug, thiserror::Error)]
pub enum StationError {
    #[error("cannot read station catalogue {path}: {source}")]
    Io { path: PathBuf, source: std::io::Error },
    #[error("station catalogue {path}: {message}")]
    Format { path: PathBuf, message: String },
    #[error("station catalogue {path}: station '{code}': {message}")]
    Station { path: PathBuf, code: String, message: String },
    #[error("unknown station '{code}' (catalogue {path} has: {known})")]
    Unknown { code: String, path: PathBuf, known: String },
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Geodetic {
    lat_deg: f64,
    lon_deg: f64,
    height_m: f64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStation {
    code: String,
    itrf_m: Option<[f64; 3]>,
    geodetic: Option<Geodetic>,
    velocity_m_per_yr: Option<[f64; 3]>,
    epoch_mjd: Option<f64>,
    delay_s: Option<f64>,
    /// Free text, ignored by the computation.
    #[allow(dead_code)]
    description: Option<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCatalog {
    station: Vec<RawStation>,
}

/// A ground station (or the geocentre).
#[derive(Clone, Debug, PartialEq)]
pub struct Station {
    pub code: String,
    /// ITRF position at `epoch_mjd`, metres.
    pub itrf_m: [f64; 3],
    /// Plate motion, metres per Julian year.
    pub velocity_m_per_yr: [f64; 3],
    /// Reference epoch of the position (MJD; taken as TT, the difference is immaterial).
    pub epoch_mjd: f64,
    /// Electronic delay of the station on each leg it transmits or receives, s.
    pub delay_s: f64,
    /// Local vertical (GRS80 geodetic normal) in the ITRS; zero at the geocentre.
    pub up_itrs: [f64; 3],
}

/// GRS80 ellipsoid code for `sofars::coords::gd2gc` / `gc2gd` (SOFA `iauEform`).
const GRS80: i32 = 2;
/// Largest distance from the ellipsoid surface a station may have, m.
pub const MAX_HEIGHT_ABS_M: f64 = 100_000.0;

impl Station {
    /// True for the geocentre (all coordinates zero).
    pub fn is_geocentre(&self) -> bool {
        self.itrf_m == [0.0; 3] && self.velocity_m_per_yr == [0.0; 3]
    }

    /// ITRF position (m) at an epoch (MJD), with linear plate motion.
    pub fn itrf_at_m(&self, mjd: f64) -> [f64; 3] {
        let years = (mjd - self.epoch_mjd) / 365.25;
        std::array::from_fn(|i| self.itrf_m[i] + self.velocity_m_per_yr[i] * years)
    }
}

/// Geodetic (GRS80) → ITRF Cartesian, metres.
///
/// # Accuracy
/// Exact closed form (SOFA `iauGd2gce`); checked against ERFA `gd2gc`
/// (pyerfa 2.0.1.5) in `tests/earth.rs`.
///
/// # References
/// IUGG 1979 (GRS80: a = 6 378 137 m, 1/f = 298.257222101); SOFA `iauGd2gc`.
pub fn geodetic_to_itrf_m(lat_deg: f64, lon_deg: f64, height_m: f64) -> Option<[f64; 3]> {
    sofars::coords::gd2gc(GRS80, lon_deg.to_radians(), lat_deg.to_radians(), height_m).ok()
}

/// Height (m) of an ITRF point above the GRS80 ellipsoid.
pub fn height_above_grs80_m(itrf_m: [f64; 3]) -> Option<f64> {
    sofars::coords::gc2gd(GRS80, itrf_m).ok().map(|(_, _, h)| h)
}

/// A station catalogue.
#[derive(Clone, Debug)]
pub struct StationCatalog {
    path: PathBuf,
    stations: Vec<Station>,
}

impl StationCatalog {
    /// Reads a catalogue file.
    pub fn from_file(path: &Path) -> Result<Self, StationError> {
        let text = crate::io::digest::read_to_string_remembering(path).map_err(|source| StationError::Io { path: path.into(), source })?;
        Self::parse(&text, path)
    }

    /// Parses catalogue text; `path` names it in errors.
    pub fn parse(text: &str, path: &Path) -> Result<Self, StationError> {
        let raw: RawCatalog = toml::from_str(text).map_err(|e| StationError::Format { path: path.into(), message: e.to_string() })?;
        let mut stations: Vec<Station> = Vec::with_capacity(raw.station.len());
        for r in raw.station {
            let err = |message: String| StationError::Station { path: path.into(), code: r.code.clone(), message };
            if r.code.trim().is_empty() {
                return Err(StationError::Format { path: path.into(), message: "a station has an empty code".into() });
            }
            if stations.iter().any(|s| s.code == r.code) {
                return Err(err("code appears twice".into()));
            }
            let itrf_m = match (&r.itrf_m, &r.geodetic) {
                (Some(x), None) => *x,
                (None, Some(g)) => {
                    if !(g.lat_deg.is_finite() && g.lon_deg.is_finite() && g.height_m.is_finite()) || g.lat_deg.abs() > 90.0 {
                        return Err(err(format!("geodetic coordinates ({}, {}, {}) are not valid", g.lat_deg, g.lon_deg, g.height_m)));
                    }
                    geodetic_to_itrf_m(g.lat_deg, g.lon_deg, g.height_m).ok_or_else(|| err("geodetic → ITRF conversion failed".into()))?
                }
                (Some(_), Some(_)) => return Err(err("give either itrf_m or geodetic, not both".into())),
                (None, None) => return Err(err("no position: give itrf_m = [x, y, z] or geodetic = { … }".into())),
            };
            if itrf_m.iter().any(|v| !v.is_finite()) {
                return Err(err(format!("position {itrf_m:?} is not finite")));
            }
            let velocity_m_per_yr = r.velocity_m_per_yr.unwrap_or([0.0; 3]);
            if velocity_m_per_yr.iter().any(|v| !v.is_finite() || v.abs() > 1.0) {
                return Err(err(format!("velocity {velocity_m_per_yr:?} m/yr is not a plausible plate motion (|v| ≤ 1 m/yr)")));
            }
            let epoch_mjd = r.epoch_mjd.unwrap_or(51_544.5);
            if !epoch_mjd.is_finite() {
                return Err(err("epoch_mjd is not finite".into()));
            }
            if itrf_m != [0.0; 3] {
                let h = height_above_grs80_m(itrf_m).ok_or_else(|| err("cannot compute its height".into()))?;
                if h.abs() > MAX_HEIGHT_ABS_M {
                    return Err(err(format!(
                        "position is {:.1} km from the GRS80 ellipsoid surface; a station must be at the geocentre [0, 0, 0] or within {} km of the surface",
                        h / 1e3,
                        MAX_HEIGHT_ABS_M / 1e3
                    )));
                }
            }
            let delay_s = r.delay_s.unwrap_or(0.0);
            if !(delay_s.is_finite() && (0.0..1.0).contains(&delay_s)) {
                return Err(err(format!("delay_s = {delay_s} must be in [0, 1) s")));
            }
            let up_itrs = match sofars::coords::gc2gd(GRS80, itrf_m) {
                Ok((elong, phi, _)) if itrf_m != [0.0; 3] => [phi.cos() * elong.cos(), phi.cos() * elong.sin(), phi.sin()],
                _ => [0.0; 3],
            };
            stations.push(Station { code: r.code, itrf_m, velocity_m_per_yr, epoch_mjd, delay_s, up_itrs });
        }
        Ok(Self { path: path.into(), stations })
    }

    /// A station by code.
    pub fn get(&self, code: &str) -> Result<&Station, StationError> {
        self.stations.iter().find(|s| s.code == code).ok_or_else(|| StationError::Unknown {
            code: code.into(),
            path: self.path.clone(),
            known: self.stations.iter().map(|s| s.code.as_str()).collect::<Vec<_>>().join(", "),
        })
    }

    /// All stations.
    pub fn stations(&self) -> &[Station] {
        &self.stations
    }

    /// The catalogue's path.
    pub fn path(&self) -> &Path {
        &self.path
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn catalogue_checks() {
        let ok = "[[station]]\ncode = \"A\"\ngeodetic = { lat_deg = 10.0, lon_deg = 20.0, height_m = 100.0 }\n[[station]]\ncode = \"GEO\"\nitrf_m = [0.0, 0.0, 0.0]\n";
        let c = StationCatalog::parse(ok, Path::new("s.toml")).unwrap();
        assert!(c.get("GEO").unwrap().is_geocentre());
        let e = c.get("ZZ").unwrap_err().to_string();
        assert!(e.contains("ZZ") && e.contains("s.toml") && e.contains("GEO"), "{e}");
        let high = "[[station]]\ncode = \"SAT\"\nitrf_m = [7000000.0, 0.0, 0.0]\n";
        let e = StationCatalog::parse(high, Path::new("s.toml")).unwrap_err().to_string();
        assert!(e.contains("SAT") && e.contains("km from the GRS80"), "{e}");
        let nan = "[[station]]\ncode = \"N\"\nitrf_m = [nan, 0.0, 0.0]\n";
        assert!(StationCatalog::parse(nan, Path::new("s.toml")).unwrap_err().to_string().contains("not finite"));
        let unknown = "[[station]]\ncode = \"U\"\nitrf_m = [0.0, 0.0, 0.0]\ncolour = 1\n";
        assert!(StationCatalog::parse(unknown, Path::new("s.toml")).unwrap_err().to_string().contains("colour"));
    }
}
