//! The configuration of a `pulsar` pipeline: its tables, their checks and
//! the conversions of what they give (source position forms, the binary
//! orbit's units and model-specific keys).

use std::collections::BTreeMap;
use std::path::PathBuf;

use serde::Deserialize;

use crate::delays::binary::{BinaryModel, BinaryOrbit};
use crate::pipeline::shared::{EarthCfg, EphemerisCfg, OutputCfg, StationsCfg, TimeCfg};
use crate::pipeline::{PipelineError, PipelineFile};

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct InputCfg {
    pub(crate) path: PathBuf,
    /// "utc" (default) or "site": site-clock times corrected by [clocks].
    #[serde(default = "utc")]
    pub(crate) time_scale: String,
}

fn utc() -> String {
    "utc".into()
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct ClocksCfg {
    #[serde(default)]
    pub(crate) allow_extrapolation: bool,
    /// Site code → chain of tables (site clock → … → UTC).
    #[serde(default)]
    pub(crate) sites: BTreeMap<String, Vec<PathBuf>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct SourceCfg {
    pub(crate) name: Option<String>,
    /// ICRS position, one of three forms: degrees, sexagesimal text
    /// (`ra_hms = "05:34:31.94"`, `dec_dms = "+22:00:52.1"`), or ecliptic
    /// longitude and latitude (mean ecliptic and equinox of J2000.0, IAU 2006).
    pub(crate) ra_deg: Option<f64>,
    pub(crate) dec_deg: Option<f64>,
    pub(crate) ra_hms: Option<String>,
    pub(crate) dec_dms: Option<String>,
    pub(crate) ecliptic_lon_deg: Option<f64>,
    pub(crate) ecliptic_lat_deg: Option<f64>,
    pub(crate) position_epoch_mjd: f64,
    pub(crate) pm_ra_cosdec_mas_per_yr: Option<f64>,
    pub(crate) pm_dec_mas_per_yr: Option<f64>,
    pub(crate) parallax_mas: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct SpinCfg {
    pub(crate) frequency_hz: f64,
    #[serde(default)]
    pub(crate) derivatives: Vec<f64>,
    pub(crate) epoch_mjd: f64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct DispersionCfg {
    pub(crate) measure_pc_cm3: f64,
}

/// `[binary]`: the orbit of a binary pulsar (README, "Binary pulsars").
/// Keys a model does not use are errors naming them.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct BinaryCfg {
    pub(crate) model: String,
    pub(crate) period_d: Option<f64>,
    pub(crate) period_derivative: Option<f64>,
    pub(crate) projected_axis_lt_s: Option<f64>,
    pub(crate) projected_axis_derivative: Option<f64>,
    pub(crate) eccentricity: Option<f64>,
    pub(crate) eccentricity_derivative_per_s: Option<f64>,
    pub(crate) periastron_epoch_mjd: Option<f64>,
    pub(crate) periastron_longitude_deg: Option<f64>,
    pub(crate) periastron_advance_deg_per_yr: Option<f64>,
    pub(crate) einstein_amplitude_s: Option<f64>,
    pub(crate) companion_mass_msun: Option<f64>,
    pub(crate) sin_inclination: Option<f64>,
    pub(crate) radial_deformation: Option<f64>,
    pub(crate) angular_deformation: Option<f64>,
    pub(crate) aberration_a_s: Option<f64>,
    pub(crate) aberration_b_s: Option<f64>,
    pub(crate) ascending_node_epoch_mjd: Option<f64>,
    pub(crate) e_sin_omega: Option<f64>,
    pub(crate) e_cos_omega: Option<f64>,
}

impl BinaryCfg {
    /// The keys given, by name.
    fn given(&self) -> Vec<(&'static str, Option<f64>)> {
        vec![
            ("period_d", self.period_d),
            ("period_derivative", self.period_derivative),
            ("projected_axis_lt_s", self.projected_axis_lt_s),
            ("projected_axis_derivative", self.projected_axis_derivative),
            ("eccentricity", self.eccentricity),
            ("eccentricity_derivative_per_s", self.eccentricity_derivative_per_s),
            ("periastron_epoch_mjd", self.periastron_epoch_mjd),
            ("periastron_longitude_deg", self.periastron_longitude_deg),
            ("periastron_advance_deg_per_yr", self.periastron_advance_deg_per_yr),
            ("einstein_amplitude_s", self.einstein_amplitude_s),
            ("companion_mass_msun", self.companion_mass_msun),
            ("sin_inclination", self.sin_inclination),
            ("radial_deformation", self.radial_deformation),
            ("angular_deformation", self.angular_deformation),
            ("aberration_a_s", self.aberration_a_s),
            ("aberration_b_s", self.aberration_b_s),
            ("ascending_node_epoch_mjd", self.ascending_node_epoch_mjd),
            ("e_sin_omega", self.e_sin_omega),
            ("e_cos_omega", self.e_cos_omega),
        ]
    }

    /// The orbit and its reference epoch (MJD, TDB), checked: required keys
    /// present, no key of another model, values in their physical ranges.
    pub(crate) fn orbit(&self, file: &PipelineFile, t_sun_s: f64) -> Result<(BinaryOrbit, f64), PipelineError> {
        let model = match self.model.as_str() {
            "keplerian" => BinaryModel::Keplerian,
            "relativistic" => BinaryModel::Relativistic,
            "near_circular" => BinaryModel::NearCircular,
            other => return Err(file.invalid(format!("[binary] model = \"{other}\": use \"keplerian\", \"relativistic\" or \"near_circular\""))),
        };
        let all = ["period_d", "period_derivative", "projected_axis_lt_s", "projected_axis_derivative", "companion_mass_msun", "sin_inclination"];
        let (required, allowed): (&[&str], Vec<&str>) = match model {
            BinaryModel::Keplerian => (
                &["period_d", "projected_axis_lt_s", "eccentricity", "periastron_epoch_mjd", "periastron_longitude_deg"],
                [&all[..], &["eccentricity", "eccentricity_derivative_per_s", "periastron_epoch_mjd", "periastron_longitude_deg", "periastron_advance_deg_per_yr", "einstein_amplitude_s"]].concat(),
            ),
            BinaryModel::Relativistic => (
                &["period_d", "projected_axis_lt_s", "eccentricity", "periastron_epoch_mjd", "periastron_longitude_deg"],
                [
                    &all[..],
                    &[
                        "eccentricity",
                        "eccentricity_derivative_per_s",
                        "periastron_epoch_mjd",
                        "periastron_longitude_deg",
                        "periastron_advance_deg_per_yr",
                        "einstein_amplitude_s",
                        "radial_deformation",
                        "angular_deformation",
                        "aberration_a_s",
                        "aberration_b_s",
                    ],
                ]
                .concat(),
            ),
            BinaryModel::NearCircular => {
                (&["period_d", "projected_axis_lt_s", "ascending_node_epoch_mjd", "e_sin_omega", "e_cos_omega"], [&all[..], &["ascending_node_epoch_mjd", "e_sin_omega", "e_cos_omega"]].concat())
            }
        };
        let given = self.given();
        for (k, v) in &given {
            if v.is_some() && !allowed.contains(k) {
                return Err(file.invalid(format!("[binary] {k} does not apply to model \"{}\"", self.model)));
            }
        }
        for k in required {
            if given.iter().any(|(g, v)| g == k && v.is_none()) {
                return Err(file.invalid(format!("[binary] model \"{}\" needs {k}", self.model)));
            }
        }
        let yr_s = 365.25 * 86_400.0;
        let period_s = file.check_range("[binary] period_d", self.period_d.unwrap_or(0.0), 1e-3, 1e6)? * 86_400.0;
        let x_s = file.check_range("[binary] projected_axis_lt_s", self.projected_axis_lt_s.unwrap_or(0.0), 0.0, 1e4)?;
        let e = match model {
            BinaryModel::NearCircular => {
                let (eta, kappa) =
                    (file.check_range("[binary] e_sin_omega", self.e_sin_omega.unwrap_or(0.0), -0.1, 0.1)?, file.check_range("[binary] e_cos_omega", self.e_cos_omega.unwrap_or(0.0), -0.1, 0.1)?);
                (eta * eta + kappa * kappa).sqrt()
            }
            _ => self.eccentricity.unwrap_or(0.0),
        };
        if !(e.is_finite() && (0.0..1.0).contains(&e)) {
            return Err(file.invalid(format!("[binary] eccentricity = {e} must satisfy 0 ≤ e < 1")));
        }
        let s = file.check_range("[binary] sin_inclination", self.sin_inclination.unwrap_or(0.0), -1.0, 1.0)?;
        let m2 = file.check_range("[binary] companion_mass_msun", self.companion_mass_msun.unwrap_or(0.0), 0.0, 1e3)?;
        let small = |k: &str, v: Option<f64>, bound: f64| file.check_range(&format!("[binary] {k}"), v.unwrap_or(0.0), -bound, bound);
        let epoch_key =
            if model == BinaryModel::NearCircular { ("[binary] ascending_node_epoch_mjd", self.ascending_node_epoch_mjd) } else { ("[binary] periastron_epoch_mjd", self.periastron_epoch_mjd) };
        let epoch_mjd = file.check_range(epoch_key.0, epoch_key.1.unwrap_or(f64::NAN), MJD_RANGE.0, MJD_RANGE.1)?;
        let orbit = BinaryOrbit {
            model,
            period_s,
            period_derivative: small("period_derivative", self.period_derivative, 1e-6)?,
            x_s,
            x_dot: small("projected_axis_derivative", self.projected_axis_derivative, 1e-6)?,
            eccentricity: e,
            eccentricity_dot_per_s: small("eccentricity_derivative_per_s", self.eccentricity_derivative_per_s, 1e-6)?,
            omega_rad: file.check_range("[binary] periastron_longitude_deg", self.periastron_longitude_deg.unwrap_or(0.0), -360.0, 360.0)?.to_radians(),
            omega_dot_rad_per_s: small("periastron_advance_deg_per_yr", self.periastron_advance_deg_per_yr, 1e3)?.to_radians() / yr_s,
            gamma_s: small("einstein_amplitude_s", self.einstein_amplitude_s, 1.0)?,
            shapiro_range_s: t_sun_s * m2,
            shapiro_shape: s,
            delta_r: small("radial_deformation", self.radial_deformation, 1.0)?,
            delta_theta: small("angular_deformation", self.angular_deformation, 1.0)?,
            aberration_a_s: small("aberration_a_s", self.aberration_a_s, 1.0)?,
            aberration_b_s: small("aberration_b_s", self.aberration_b_s, 1.0)?,
            eta: self.e_sin_omega.unwrap_or(0.0),
            kappa: self.e_cos_omega.unwrap_or(0.0),
        };
        Ok((orbit, epoch_mjd))
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct CorrectionsCfg {
    pub(crate) shapiro_bodies: Option<Vec<String>>,
    pub(crate) ppn_gamma: Option<f64>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct ResidualsCfg {
    #[serde(default)]
    pub(crate) subtract_weighted_mean: bool,
}

/// The configuration of a `pulsar` pipeline.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PulsarPipeline {
    #[allow(dead_code)]
    pub(crate) kind: String,
    pub(crate) input: InputCfg,
    pub(crate) ephemeris: EphemerisCfg,
    pub(crate) earth: EarthCfg,
    pub(crate) time: Option<TimeCfg>,
    pub(crate) stations: StationsCfg,
    #[serde(default)]
    pub(crate) clocks: ClocksCfg,
    pub(crate) source: SourceCfg,
    pub(crate) spin: SpinCfg,
    pub(crate) dispersion: Option<DispersionCfg>,
    pub(crate) binary: Option<BinaryCfg>,
    pub(crate) corrections: Option<CorrectionsCfg>,
    #[serde(default)]
    pub(crate) residuals: ResidualsCfg,
    pub(crate) output: OutputCfg,
}

/// The binary columns, in output order (present when `[binary]` is).
pub(crate) const BINARY_COLUMNS: [&str; 6] = ["binary_roemer_s", "binary_einstein_s", "binary_shapiro_s", "binary_aberration_s", "binary_s", "orbital_phase"];

/// Epochs a pulsar model may name (source position, spin), MJD: 1900-01-01
/// to 2100-01-01, the span the ephemerides and time-scale models here serve.
pub const MJD_RANGE: (f64, f64) = (15_020.0, 88_069.0);

/// Reads a sexagesimal angle `[±]a:b:c[.d]` (also with spaces) as
/// a + b/60 + c/3600 in the unit of `a` (hours or degrees); the sign
/// applies to the whole angle, also for "-00:…".
pub fn sexagesimal(text: &str) -> Option<f64> {
    let t = text.trim();
    let (negative, body) = match t.strip_prefix('-') {
        Some(b) => (true, b),
        None => (false, t.strip_prefix('+').unwrap_or(t)),
    };
    let parts: Vec<&str> = body.split([':', ' ']).filter(|p| !p.is_empty()).collect();
    if parts.len() != 3 || parts[..2].iter().any(|p| !p.bytes().all(|b| b.is_ascii_digit())) {
        return None;
    }
    let (a, b, c): (f64, f64, f64) = (parts[0].parse().ok()?, parts[1].parse().ok()?, parts[2].parse().ok()?);
    if !(b < 60.0 && (0.0..60.0).contains(&c)) {
        return None;
    }
    let v = a + b / 60.0 + c / 3600.0;
    Some(if negative { -v } else { v })
}

/// The ICRS position (deg) from whichever form `[source]` gives: degrees,
/// sexagesimal (`ra_hms`, `dec_dms`), or ecliptic coordinates of J2000.0
/// (IAU 2006 obliquity and frame bias: `sofars::coords::eceq06` at
/// J2000.0, the IAU SOFA routine ECEQ06). Exactly one form.
pub(crate) fn source_position_deg(file: &PipelineFile, s: &SourceCfg) -> Result<(f64, f64), PipelineError> {
    match (s.ra_deg, s.dec_deg, &s.ra_hms, &s.dec_dms, s.ecliptic_lon_deg, s.ecliptic_lat_deg) {
        (Some(ra), Some(dec), None, None, None, None) => Ok((ra, dec)),
        (None, None, Some(ra), Some(dec), None, None) => {
            let ra_h = sexagesimal(ra).filter(|h| (0.0..24.0).contains(h)).ok_or_else(|| file.invalid(format!("[source] ra_hms = \"{ra}\": give hours:minutes:seconds, 0 ≤ RA < 24 h")))?;
            let dec_d = sexagesimal(dec).filter(|d| d.abs() <= 90.0).ok_or_else(|| file.invalid(format!("[source] dec_dms = \"{dec}\": give ±degrees:minutes:seconds, |Dec| ≤ 90°")))?;
            Ok((ra_h * 15.0, dec_d))
        }
        (None, None, None, None, Some(lon), Some(lat)) => {
            let lon = file.check_range("[source] ecliptic_lon_deg", lon, -360.0, 360.0)?;
            let lat = file.check_range("[source] ecliptic_lat_deg", lat, -90.0, 90.0)?;
            Ok(crate::delays::ecliptic_j2000_to_icrs_deg(lon, lat))
        }
        _ => Err(file.invalid("[source]: give the position once, as ra_deg and dec_deg, as ra_hms and dec_dms, or as ecliptic_lon_deg and ecliptic_lat_deg")),
    }
}
