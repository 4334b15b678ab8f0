//! Tropospheric delay of radio signals: Saastamoinen zenith delay and the
//! Black & Eisner mapping function. Opt-in (`[corrections.troposphere]`).
//!
//! **Coefficients below are from memory** (the sources are not reachable
//! from this workplace); confirm them against the cited papers before
//! operational use. Values they give are checked against the standard
//! magnitudes (≈ 2.3 m zenith hydrostatic delay at sea level, ≈ 0.1–0.3 m
//! wet) in the tests.
//!
//! # References
//! J. Saastamoinen 1972, "Atmospheric correction for the troposphere and
//! stratosphere in radio ranging of satellites", Geophys. Monogr. 15, AGU,
//! 247 (hydrostatic term in the form of Davis et al. 1985, Radio Sci. 20,
//! 1593, eq. A11); H. D. Black & A. Eisner 1984, "Correcting satellite
//! Doppler data for tropospheric effects", J. Geophys. Res. 89(D2), 2616
//! (mapping function m(E) = 1.001/√(0.002001 + sin²E)).

/// Surface meteorology at a station.
#[derive(Clone, Copy, Debug, PartialEq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SurfaceMet {
    /// Total pressure, hPa.
    pub pressure_hpa: f64,
    /// Temperature, K.
    pub temperature_k: f64,
    /// Relative humidity, 0 … 1.
    pub relative_humidity: f64,
}

/// A surface meteorology value outside its physical range.
#[derive(Debug, thiserror::Error)]
#[error("{name} {value} outside {lo}–{hi}")]
pub struct MetError {
    pub name: &'static str,
    pub value: f64,
    pub lo: f64,
    pub hi: f64,
}

impl SurfaceMet {
    /// The standard atmosphere at a height (m): P = 1013.25·(1 − 2.2557e-5 h)^5.2568
    /// hPa, T = 288.15 − 0.0065 h K, 50 % humidity (ICAO standard atmosphere,
    /// coefficients from memory).
    pub fn standard(height_m: f64) -> Self {
        let h = height_m.clamp(-500.0, 9_000.0);
        Self { pressure_hpa: 1013.25 * (1.0 - 2.2557e-5 * h).powf(5.2568), temperature_k: 288.15 - 0.0065 * h, relative_humidity: 0.5 }
    }

    /// Checks the values are physical.
    pub fn validate(&self) -> Result<(), MetError> {
        for (name, value, lo, hi) in [("pressure_hpa", self.pressure_hpa, 300.0, 1100.0), ("temperature_k", self.temperature_k, 200.0, 330.0), ("relative_humidity", self.relative_humidity, 0.0, 1.0)]
        {
            if !(value.is_finite() && (lo..=hi).contains(&value)) {
                return Err(MetError { name, value, lo, hi });
            }
        }
        Ok(())
    }
}

/// Partial pressure of water vapour (hPa) from temperature (K) and relative
/// humidity: e = RH · 6.108 · exp(17.15 (T − 273.15)/(234.7 + T − 273.15))
/// (Magnus-type saturation formula; coefficients from memory).
pub fn water_vapour_pressure_hpa(temperature_k: f64, relative_humidity: f64) -> f64 {
    let t_c = temperature_k - 273.15;
    relative_humidity * 6.108 * (17.15 * t_c / (234.7 + t_c)).exp()
}

/// Saastamoinen zenith total delay (m): hydrostatic
/// 0.0022768·P/(1 − 0.00266 cos 2φ − 0.00028 H) plus wet
/// 0.002277·(1255/T + 0.05)·e, with P, e in hPa, T in K, H in km.
///
/// # Accuracy
/// Hydrostatic part ≈ 1 mm with good surface pressure; the wet part from
/// surface humidity is good to a few cm only.
pub fn saastamoinen_zenith_delay_m(met: &SurfaceMet, latitude_rad: f64, height_m: f64) -> f64 {
    let h_km = height_m / 1000.0;
    let hydro = 0.002_276_8 * met.pressure_hpa / (1.0 - 0.002_66 * (2.0 * latitude_rad).cos() - 0.000_28 * h_km);
    let e = water_vapour_pressure_hpa(met.temperature_k, met.relative_humidity);
    let wet = 0.002_277 * (1255.0 / met.temperature_k + 0.05) * e;
    hydro + wet
}

/// Black & Eisner mapping function: slant/zenith delay ratio at elevation E.
pub fn black_eisner_mapping(elevation_rad: f64) -> f64 {
    let s = elevation_rad.sin();
    1.001 / (0.002_001 + s * s).sqrt()
}

/// Slant tropospheric delay (s) at a station for a given elevation.
pub fn slant_delay_s(met: &SurfaceMet, latitude_rad: f64, height_m: f64, elevation_rad: f64) -> f64 {
    saastamoinen_zenith_delay_m(met, latitude_rad, height_m) * black_eisner_mapping(elevation_rad) / crate::delays::C_M_S
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn magnitudes_are_standard() {
        // Sea level, 45°, dry standard atmosphere: ZHD ≈ 2.3 m (common practice).
        let dry = SurfaceMet { pressure_hpa: 1013.25, temperature_k: 288.15, relative_humidity: 0.0 };
        let z = saastamoinen_zenith_delay_m(&dry, 45f64.to_radians(), 0.0);
        assert!((z - 2.3).abs() < 0.02, "{z}");
        // Humid: wet part 0.1–0.3 m (common practice).
        let humid = SurfaceMet { relative_humidity: 0.7, ..dry };
        let wet = saastamoinen_zenith_delay_m(&humid, 45f64.to_radians(), 0.0) - z;
        assert!((0.05..0.3).contains(&wet), "{wet}");
        // Mapping: 1 at zenith, ≈ 1/sin E at moderate elevations, finite at 0.
        assert!((black_eisner_mapping(std::f64::consts::FRAC_PI_2) - 1.0).abs() < 1e-3);
        assert!((black_eisner_mapping(30f64.to_radians()) - 2.0).abs() < 0.01);
        assert!(black_eisner_mapping(0.0) < 25.0);
        // Higher stations see less atmosphere.
        assert!(SurfaceMet::standard(4_000.0).pressure_hpa < 650.0);
    }
}
