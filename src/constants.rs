//! Physical constants: the defining ones (in code, with their resolutions)
//! and the ephemeris-dependent ones (GM values, read from `data/constants.toml`).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::Deserialize;

pub use crate::time::clock_rate::C_M_S;
pub use crate::time::relativistic::{L_B, L_G, TDB0_S};

/// Astronomical unit in metres (IAU 2012 Resolution B2, exact).
pub const AU_M: f64 = 149_597_870_700.0;

/// The constants file built into lapse (`data/constants.toml`).
pub const BUILTIN_CONSTANTS: &str = include_str!("../data/constants.toml");

/// Errors reading a constants file.
#[derive(Debug, thiserror::Error)]
pub enum ConstantsError {
    #[error("cannot read constants file {path}: {source}")]
    Io { path: PathBuf, source: std::io::Error },
    #[error("constants file {path}: {message}")]
    Format { path: PathBuf, message: String },
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Defining {
    c_m_s: f64,
    au_m: f64,
    l_g: f64,
    l_b: f64,
    tdb0_s: f64,
}

/// Constants that belong to one planetary ephemeris.
#[derive(Clone, Debug, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct EphemerisConstants {
    /// Ephemeris name, e.g. "DE421".
    pub name: String,
    /// The ephemeris' own astronomical unit, km (used to convert its GMs).
    pub au_km: f64,
    /// Earth/Moon mass ratio.
    pub emrat: f64,
    /// GM of each body, km³/s², keyed by our body name.
    pub gm_km3_s2: BTreeMap<String, f64>,
    /// NAIF integer id of each body name.
    pub naif_id: BTreeMap<String, i32>,
}

impl EphemerisConstants {
    /// GM (km³/s²) of a body given by name or NAIF id.
    pub fn gm_km3_s2(&self, body: &str) -> Option<f64> {
        if let Some(v) = self.gm_km3_s2.get(body) {
            return Some(*v);
        }
        let id: i32 = body.parse().ok()?;
        let name = self.naif_id.iter().find(|(_, v)| **v == id)?.0;
        self.gm_km3_s2.get(name).copied()
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct File {
    defining: Defining,
    ephemeris: EphemerisConstants,
}

/// The constants in use for a run.
#[derive(Clone, Debug, PartialEq)]
pub struct Constants {
    /// Ephemeris-dependent constants.
    pub ephemeris: EphemerisConstants,
}

impl Constants {
    /// The constants built into lapse (DE421).
    pub fn builtin() -> Self {
        Self::parse(BUILTIN_CONSTANTS, Path::new("<built-in constants.toml>")).expect("the built-in constants file is validated by the test suite")
    }

    /// Reads a constants file.
    pub fn from_file(path: &Path) -> Result<Self, ConstantsError> {
        let text = crate::io::digest::read_to_string_remembering(path).map_err(|source| ConstantsError::Io { path: path.into(), source })?;
        Self::parse(&text, path)
    }

    /// Parses the text of a constants file; the defining constants in it must
    /// equal the ones compiled into lapse.
    pub fn parse(text: &str, path: &Path) -> Result<Self, ConstantsError> {
        let fmt = |message: String| ConstantsError::Format { path: path.into(), message };
        let f: File = toml::from_str(text).map_err(|e| fmt(e.to_string()))?;
        let d = &f.defining;
        for (name, got, want) in [("c_m_s", d.c_m_s, C_M_S), ("au_m", d.au_m, AU_M), ("l_g", d.l_g, L_G), ("l_b", d.l_b, L_B), ("tdb0_s", d.tdb0_s, TDB0_S)] {
            if got != want {
                return Err(fmt(format!("defining constant {name} = {got:e} differs from the IAU/SI value {want:e}")));
            }
        }
        for (body, gm) in &f.ephemeris.gm_km3_s2 {
            if !gm.is_finite() || *gm <= 0.0 {
                return Err(fmt(format!("GM of {body} = {gm} is not a positive number")));
            }
            if !f.ephemeris.naif_id.contains_key(body) {
                return Err(fmt(format!("GM of {body} has no NAIF id")));
            }
        }
        Ok(Self { ephemeris: f.ephemeris })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builtin_constants_load() {
        let c = Constants::builtin();
        assert_eq!(c.ephemeris.name, "DE421");
        // GM_sun, DE421 header (au³/d² × au³/86400²): 1.32712440041e11 km³/s²
        // to 12 digits (from memory; confirmed by the DE421 file header, constant GMS).
        let gm = c.ephemeris.gm_km3_s2("sun").unwrap();
        assert!((gm - 1.32712440041e11).abs() < 1.0, "{gm}");
        assert_eq!(c.ephemeris.gm_km3_s2("10"), Some(gm));
        assert!(c.ephemeris.gm_km3_s2("no-such-body").is_none());
    }

    #[test]
    fn changed_defining_constant_is_refused() {
        let text = BUILTIN_CONSTANTS.replace("l_g = 6.969290134e-10", "l_g = 6.97e-10");
        let e = Constants::parse(&text, Path::new("c.toml")).unwrap_err().to_string();
        assert!(e.contains("l_g") && e.contains("c.toml"), "{e}");
    }
}
