//! Propagation delays: Roemer, parallax, Shapiro (finite end points and
//! source at infinity), dispersion; and the source direction with proper
//! motion.
//!
//! Vectors are BCRS (ICRF axes), metres; times in seconds; GM in m³/s².

pub mod binary;

use nalgebra::Vector3;

/// Speed of light, m/s (SI, exact).
pub const C_M_S: f64 = crate::time::clock_rate::C_M_S;
/// Astronomical unit, m (IAU 2012 Resolution B2, exact).
pub const AU_M: f64 = crate::constants::AU_M;
/// Dispersion constant K = 1/(2.41 × 10⁻⁴) = 4149.3776 s MHz² cm³ pc⁻¹: the
/// rounded convention of the pulsar-timing community (Manchester & Taylor
/// 1977, "Pulsars"; Lorimer & Kramer 2005, Handbook of Pulsar Astronomy,
/// sec. 4.1.1 — chapter and section from memory). The physical value
/// e²/(2π m_e c) = 4148.808 s MHz² cm³ pc⁻¹ differs by 1.4e-4 relative; the
/// constant used is recorded in every output file.
pub const DISPERSION_K_S_MHZ2_CM3_PC: f64 = 1.0 / 2.41e-4;
/// Milliarcseconds → radians.
pub const MAS_TO_RAD: f64 = std::f64::consts::PI / (180.0 * 3600.0 * 1000.0);
/// Julian year, s.
pub const JULIAN_YEAR_S: f64 = 365.25 * 86_400.0;

/// A source at infinity: ICRS direction at a reference epoch, proper
/// motion and parallax.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Source {
    pub ra_rad: f64,
    pub dec_rad: f64,
    /// Reference epoch of the position, TDB seconds past J2000.
    pub position_epoch_tdb_s: f64,
    /// μ_α* = μ_α cos δ, rad per Julian year.
    pub pm_ra_cosdec_rad_yr: f64,
    /// μ_δ, rad per Julian year.
    pub pm_dec_rad_yr: f64,
    /// Annual parallax, rad (0: at infinity).
    pub parallax_rad: f64,
}

impl Source {
    /// Unit vector towards the source at a TDB epoch (s past J2000), with
    /// proper motion applied linearly in the tangent plane and renormalised.
    ///
    /// # Accuracy
    /// The linear model differs from rigorous space motion by
    /// ≈ μ²Δt²/2 (1e-14 rad for 100 mas/yr over 30 yr) — negligible for timing.
    ///
    /// # References
    /// Lorimer & Kramer 2005, sec. 8.2.1; Backer & Hellings 1986, ARA&A 24,
    /// 537, eq. 7 (proper motion in the Roemer term).
    pub fn direction(&self, t_tdb_s: f64) -> Vector3<f64> {
        let (sa, ca) = self.ra_rad.sin_cos();
        let (sd, cd) = self.dec_rad.sin_cos();
        let n0 = Vector3::new(cd * ca, cd * sa, sd);
        let e_ra = Vector3::new(-sa, ca, 0.0);
        let e_dec = Vector3::new(-sd * ca, -sd * sa, cd);
        let years = (t_tdb_s - self.position_epoch_tdb_s) / JULIAN_YEAR_S;
        (n0 + (e_ra * self.pm_ra_cosdec_rad_yr + e_dec * self.pm_dec_rad_yr) * years).normalize()
    }
}

/// Einstein delay at an observer: TDB − TT there (s), the accumulated
/// gravitational redshift and time dilation of the observer's clock against
/// the barycentric coordinate time scale, including the observer's
/// topocentric term v_E·x/c².
///
/// `tdb` and `tt`: the same event in TDB and in TT (the two scales' exact
/// femtosecond labels, as [`crate::earth::EarthModel::station_state`] gives
/// them).
///
/// # Accuracy
/// Exact difference of the labels (≤ 1e-15 s from the f64 result); the
/// model's accuracy is that of the TDB − TT series: ≈ 10 ns 1600–2200 at the
/// geocentre (Fairhead & Bretagnon 1990), topocentric term to ≈ 1e-12 s.
///
/// # References
/// Backer & Hellings 1986, ARA&A 24, 537, eq. 3 (Einstein delay Δ_E⊙);
/// Fairhead & Bretagnon 1990, A&A 229, 240 (the TDB − TT series);
/// IERS Conventions 2010, ch. 10, eq. 10.6 and 10.10 (topocentric term).
pub fn einstein_s(tdb: &crate::time::Epoch, tt: &crate::time::Epoch) -> f64 {
    use crate::time::femto::{FS_PER_S, ratio_to_f64};
    ratio_to_f64(tdb.label_fs() - tt.label_fs(), FS_PER_S)
}

/// ICRS right ascension and declination (deg, RA in [0, 360)) of a
/// direction given in ecliptic longitude and latitude (deg) of the mean
/// ecliptic and equinox of J2000.0, with the IAU 2006 obliquity and the
/// ICRS frame bias.
///
/// # Accuracy
/// That of the IAU 2006 precession model at J2000.0 (a rotation: exact to
/// f64 rounding, ≈ 1e-16 rad).
///
/// # References
/// IAU SOFA routine ECEQ06 (ecliptic of date → ICRS) evaluated at
/// J2000.0 TT (`sofars::coords::eceq06`); Hilton et al. 2006, Celest. Mech.
/// Dyn. Astron. 94, 351 (IAU 2006 obliquity ε₀ = 84381.406″).
pub fn ecliptic_j2000_to_icrs_deg(lon_deg: f64, lat_deg: f64) -> (f64, f64) {
    let (ra, dec) = sofars::coords::eceq06(2_451_545.0, 0.0, lon_deg.to_radians(), lat_deg.to_radians());
    (ra.to_degrees(), dec.to_degrees())
}

/// Roemer delay r·n̂/c (s): the light travel time from the observer to the
/// barycentre projected on the source direction.
///
/// `observer_bcrs_m`: observer's BCRS position, m; `n`: unit vector to the source.
///
/// # Accuracy
/// Exact for the plane-wave model; |value| ≤ 1.02 au/c ≈ 510 s.
///
/// # References
/// Lorimer & Kramer 2005, eq. 8.5; Backer & Hellings 1986, eq. 5.
pub fn roemer_s(observer_bcrs_m: &Vector3<f64>, n: &Vector3<f64>) -> f64 {
    observer_bcrs_m.dot(n) / C_M_S
}

/// Parallax (wavefront curvature) term −(|r|² − (r·n̂)²)/(2 c d) in seconds,
/// with d = au / parallax. Zero for zero parallax.
///
/// # Accuracy
/// First order in |r|/d (next term ≈ |r|³/d² /c, < 1e-15 s for d > 1 pc).
///
/// # References
/// Lorimer & Kramer 2005, eq. 8.6; Backer & Hellings 1986, eq. 5.
pub fn parallax_s(observer_bcrs_m: &Vector3<f64>, n: &Vector3<f64>, parallax_rad: f64) -> f64 {
    if parallax_rad == 0.0 {
        return 0.0;
    }
    let d_m = AU_M / parallax_rad;
    let rn = observer_bcrs_m.dot(n);
    -(observer_bcrs_m.norm_squared() - rn * rn) / (2.0 * C_M_S * d_m)
}

/// Shapiro delay (s, positive = delay) of a body of mass parameter GM on a
/// signal from a source at infinity in direction `n` to an observer.
///
/// Δ_S = −(1+γ)·GM/c³ · ln[ r·(1 − cos θ) / au ], with r the body–observer
/// distance and θ the angle between the body and the source seen by the
/// observer. The constant that depends on the source distance is dropped and
/// the logarithm normalised by the au (our convention, stated in the README).
/// r(1 − cos θ) is formed as |b × n̂|²/(|b| + b·n̂) when cos θ > 0 to avoid
/// cancellation near the body.
///
/// `body_minus_observer_m`: body position minus observer position, m.
///
/// # Accuracy
/// Exact for the formula (first post-Newtonian order); the neglected
/// second-order term is < 10 ps beyond 1° from the Sun.
///
/// # References
/// Shapiro 1964, Phys. Rev. Lett. 13, 789; Backer & Hellings 1986, eq. 6;
/// IERS Conventions 2010, eq. 11.17 in the limit of a distant source.
pub fn shapiro_infinite_s(gm_m3_s2: f64, ppn_gamma: f64, body_minus_observer_m: &Vector3<f64>, n: &Vector3<f64>) -> f64 {
    let b = body_minus_observer_m;
    let r = b.norm();
    let bn = b.dot(n);
    let one_minus_cos_times_r = if bn > 0.0 { b.cross(n).norm_squared() / (r + bn) } else { r - bn };
    -(1.0 + ppn_gamma) * gm_m3_s2 / (C_M_S * C_M_S * C_M_S) * (one_minus_cos_times_r / AU_M).ln()
}

/// Shapiro delay (s) of a body between two finite end points, including the
/// second-order (1+γ)GM/c² terms inside the logarithm.
///
/// Δ_S = (1+γ)·GM/c³ · ln[(r₁ + r₂ + r₁₂ + (1+γ)GM/c²) / (r₁ + r₂ − r₁₂ + (1+γ)GM/c²)]
///
/// r₁, r₂: distances of the end points from the body; r₁₂: their separation (m).
///
/// # Accuracy
/// Includes the leading second-order term (Moyer 2000, eq. 8-55); valid to
/// < 1 ps for solar-system geometry.
///
/// # References
/// Moyer 2000, JPL DESCANSO Monograph 2, sec. 8.3.1, eq. 8-55; IERS
/// Conventions 2010, eq. 11.17.
pub fn shapiro_finite_s(gm_m3_s2: f64, ppn_gamma: f64, r1_m: f64, r2_m: f64, r12_m: f64) -> f64 {
    let k = (1.0 + ppn_gamma) * gm_m3_s2;
    let g = k / (C_M_S * C_M_S);
    k / (C_M_S * C_M_S * C_M_S) * ((r1_m + r2_m + r12_m + g) / (r1_m + r2_m - r12_m + g)).ln()
}

/// Dispersion delay K·DM/f² (s) at a frequency in the barycentric frame.
///
/// `f_bary_mhz`: frequency, MHz (infinite → 0); `dm_pc_cm3`: dispersion measure.
///
/// # References
/// Lorimer & Kramer 2005, eq. 4.7; constant: [`DISPERSION_K_S_MHZ2_CM3_PC`].
pub fn dispersion_s(dm_pc_cm3: f64, f_bary_mhz: f64) -> f64 {
    if f_bary_mhz.is_infinite() {
        return 0.0;
    }
    DISPERSION_K_S_MHZ2_CM3_PC * dm_pc_cm3 / (f_bary_mhz * f_bary_mhz)
}

/// Observed frequency → barycentric frame, first order: f·(1 − n̂·v/c).
///
/// # References
/// Lorimer & Kramer 2005, sec. 8.2.3 (Doppler-corrected observing frequency).
pub fn barycentric_frequency_mhz(f_obs_mhz: f64, n: &Vector3<f64>, observer_velocity_m_s: &Vector3<f64>) -> f64 {
    f_obs_mhz * (1.0 - n.dot(observer_velocity_m_s) / C_M_S)
}

/// Most Shapiro bodies a pipeline may list.
pub const MAX_SHAPIRO_BODIES: usize = 10;

/// A body whose Shapiro delay is applied.
#[derive(Clone, Debug, PartialEq)]
pub struct ShapiroBody {
    /// Our name, used in the output column `shapiro_<name>_s`.
    pub name: String,
    /// NAIF id of the body (system barycentre for planets with moons).
    pub naif_id: i32,
    /// GM, m³/s², from the ephemeris constants.
    pub gm_m3_s2: f64,
}

/// Shapiro body names accepted in pipelines → (NAIF id, constants key).
pub const SHAPIRO_BODY_NAMES: &[(&str, i32, &str)] = &[
    ("sun", 10, "sun"),
    ("mercury", 1, "mercury_barycenter"),
    ("venus", 2, "venus_barycenter"),
    ("moon", 301, "moon"),
    ("mars", 4, "mars_barycenter"),
    ("jupiter", 5, "jupiter_barycenter"),
    ("saturn", 6, "saturn_barycenter"),
    ("uranus", 7, "uranus_barycenter"),
    ("neptune", 8, "neptune_barycenter"),
];

/// Errors of the Shapiro body list.
#[derive(Debug, thiserror::Error)]
pub enum DelaysError {
    #[error("at most {MAX_SHAPIRO_BODIES} Shapiro bodies")]
    TooManyBodies,
    #[error("unknown Shapiro body '{name}' (known: {known})")]
    UnknownBody { name: String, known: String },
    #[error("Shapiro body '{0}' listed twice")]
    Twice(String),
    #[error("no GM for '{key}' in the constants of {constants}")]
    NoGm { key: String, constants: String },
}

/// Resolves Shapiro body names against the ephemeris constants.
pub fn shapiro_bodies(names: &[String], constants: &crate::constants::EphemerisConstants) -> Result<Vec<ShapiroBody>, DelaysError> {
    if names.len() > MAX_SHAPIRO_BODIES {
        return Err(DelaysError::TooManyBodies);
    }
    let mut out = Vec::with_capacity(names.len());
    for n in names {
        let key = n.trim().to_ascii_lowercase();
        let (name, id, ckey) = SHAPIRO_BODY_NAMES
            .iter()
            .find(|(b, _, _)| *b == key)
            .ok_or_else(|| DelaysError::UnknownBody { name: n.clone(), known: SHAPIRO_BODY_NAMES.iter().map(|b| b.0).collect::<Vec<_>>().join(", ") })?;
        if out.iter().any(|b: &ShapiroBody| b.name == *name) {
            return Err(DelaysError::Twice(n.clone()));
        }
        let gm_km3_s2 = constants.gm_km3_s2(ckey).ok_or_else(|| DelaysError::NoGm { key: ckey.to_string(), constants: constants.name.clone() })?;
        out.push(ShapiroBody { name: name.to_string(), naif_id: *id, gm_m3_s2: gm_km3_s2 * 1e9 });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// GM_sun from the DE421 header (data/constants.toml), m³/s².
    const GM_SUN_M3_S2: f64 = 132_712_440_040.944_6e9;

    #[test]
    fn shapiro_check_values() {
        // 2GM_sun/c³ ≈ 9.850982 µs (computed from the DE421 GM; common practice:
        // Lorimer & Kramer 2005, sec. 8.2.3, quote T☉ = GM☉/c³ = 4.925490947 µs).
        let two_gm_c3 = 2.0 * GM_SUN_M3_S2 / C_M_S.powi(3);
        assert!((two_gm_c3 - 9.850982e-6).abs() < 1e-12, "{two_gm_c3}");
        // Source 1° from the Sun, Sun at 1 au: Δ ≈ 86.6 µs (Backer & Hellings
        // 1986, eq. 6, evaluated by hand: 2T☉·ln(2/θ²) with θ = 1°, from memory).
        let sun = Vector3::new(AU_M, 0.0, 0.0);
        let n = Vector3::new(1f64.to_radians().cos(), 1f64.to_radians().sin(), 0.0);
        let d = shapiro_infinite_s(GM_SUN_M3_S2, 1.0, &sun, &n);
        assert!((d - 86.6e-6).abs() < 0.05e-6, "{d}");
        // Opposite the Sun the delay is the smallest: ln(2) below zero point.
        let d_opp = shapiro_infinite_s(GM_SUN_M3_S2, 1.0, &sun, &-Vector3::x());
        assert!((d_opp + two_gm_c3 * 2f64.ln()).abs() < 1e-15);
        // γ = 0 halves it (the (1+γ) factor).
        assert!((shapiro_infinite_s(GM_SUN_M3_S2, 0.0, &sun, &n) - d / 2.0).abs() < 1e-18);
    }

    #[test]
    fn stable_and_direct_forms_agree() {
        let b = Vector3::new(1.2e11, 3.0e10, -2.0e10);
        let n = Vector3::new(0.9, 0.3, -0.1).normalize();
        let r_minus_bn_m: f64 = b.norm() - b.dot(&n);
        let direct = -2.0 * GM_SUN_M3_S2 / C_M_S.powi(3) * (r_minus_bn_m / AU_M).ln();
        assert!((shapiro_infinite_s(GM_SUN_M3_S2, 1.0, &b, &n) - direct).abs() < 1e-15);
    }

    #[test]
    fn finite_formula_limits() {
        // No mass, no delay; symmetric in the end points.
        assert_eq!(shapiro_finite_s(0.0, 1.0, 1e11, 2e11, 2.5e11), 0.0);
        let a = shapiro_finite_s(GM_SUN_M3_S2, 1.0, 1.5e11, 1.08e11, 2.5e11);
        let b = shapiro_finite_s(GM_SUN_M3_S2, 1.0, 1.08e11, 1.5e11, 2.5e11);
        assert_eq!(a, b);
        assert!(a > 0.0);
    }

    #[test]
    fn roemer_bound_and_parallax_sign() {
        let r = Vector3::new(AU_M, 0.0, 0.0);
        // au/c = 499.004784 s (IAU 2012 B2 with the SI c).
        assert!((roemer_s(&r, &Vector3::x()) - 499.004784).abs() < 1e-6);
        assert_eq!(parallax_s(&r, &Vector3::x(), 0.0), 0.0);
        // Perpendicular to the line of sight the curvature term is −au²/(2cd).
        let p = parallax_s(&r, &Vector3::y(), 1.0 * MAS_TO_RAD);
        assert!(p < 0.0 && (p + AU_M * AU_M * MAS_TO_RAD / (2.0 * C_M_S * AU_M)).abs() < 1e-15);
    }

    #[test]
    fn proper_motion_moves_the_direction() {
        let s = Source { ra_rad: 1.0, dec_rad: 0.5, position_epoch_tdb_s: 0.0, pm_ra_cosdec_rad_yr: 100.0 * MAS_TO_RAD, pm_dec_rad_yr: 0.0, parallax_rad: 0.0 };
        let a = s.direction(0.0);
        let b = s.direction(10.0 * JULIAN_YEAR_S);
        assert!(((a.cross(&b)).norm() - 1000.0 * MAS_TO_RAD).abs() < 1e-12);
        assert!((b.norm() - 1.0).abs() < 1e-15);
    }

    #[test]
    fn dispersion_values() {
        assert_eq!(dispersion_s(30.0, f64::INFINITY), 0.0);
        // K·DM/f² with K = 1/2.41e-4 = 4149.3776 s MHz² cm³/pc.
        assert!((dispersion_s(10.0, 1400.0) - 10.0 / 2.41e-4 / 1400.0f64.powi(2)).abs() < 1e-15);
    }
}
