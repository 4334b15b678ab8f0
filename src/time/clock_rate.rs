//! Rates of moving clocks: the Lorentz factor and the proper-time rate.

/// Speed of light in vacuum, m/s (SI definition of the metre, exact).
pub const C_M_S: f64 = 299_792_458.0;

/// Lorentz factor γ = 1/√(1 − v²/c²) for a speed in m/s.
///
/// Returns `None` for |v| ≥ c or a non-finite speed.
///
/// # Accuracy
/// Relative error < 1e-15 for |v| < 0.999 c.
///
/// # References
/// Einstein 1905, Ann. Phys. 17, 891, sec. 4. Check value γ(0.98 c) ≈ 5.025
/// (common practice).
pub fn lorentz_factor(speed_m_s: f64) -> Option<f64> {
    if !speed_m_s.is_finite() {
        return None;
    }
    let beta = speed_m_s / C_M_S;
    let one_minus = (1.0 - beta) * (1.0 + beta);
    if one_minus <= 0.0 { None } else { Some(1.0 / one_minus.sqrt()) }
}

/// Fractional rate offset of a clock's proper time against the coordinate
/// time of its reference system: dτ/dt − 1 = −(U + v²/2)/c², to O(c⁻⁴).
///
/// `potential_m2_s2` is the Newtonian potential U (positive, GM/r summed over
/// bodies) at the clock; `speed_m_s` its coordinate speed.
///
/// # Accuracy
/// Neglects terms of order c⁻⁴ (< 1e-16 in the solar system).
///
/// # References
/// IERS Conventions 2010, ch. 10, eq. 10.1 (the metric) and 10.2.
pub fn proper_time_rate_offset(potential_m2_s2: f64, speed_m_s: f64) -> f64 {
    -(potential_m2_s2 + 0.5 * speed_m_s * speed_m_s) / (C_M_S * C_M_S)
}

/// Periodic relativistic clock term of an eccentric orbit, −2 r·v/c² (s),
/// for a position (m) and velocity (m/s) relative to the central body.
///
/// # References
/// GPS Interface Specification IS-GPS-200, sec. 20.3.3.3.3.1 (relativistic
/// correction Δt_r = F e √A sin E, which equals −2 r·v/c² for a Kepler orbit).
pub fn eccentricity_clock_term_s(r_m: &[f64; 3], v_m_s: &[f64; 3]) -> f64 {
    -2.0 * (r_m[0] * v_m_s[0] + r_m[1] * v_m_s[1] + r_m[2] * v_m_s[2]) / (C_M_S * C_M_S)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lorentz_limits() {
        assert_eq!(lorentz_factor(0.0), Some(1.0));
        assert_eq!(lorentz_factor(C_M_S), None);
        assert_eq!(lorentz_factor(-2.0 * C_M_S), None);
        assert_eq!(lorentz_factor(f64::NAN), None);
        // Symmetric in the direction of motion.
        assert_eq!(lorentz_factor(1.0e8), lorentz_factor(-1.0e8));
        // Low-speed limit 1 + v²/2c².
        let v = 30_000.0;
        let g = lorentz_factor(v).unwrap();
        assert!((g - 1.0 - 0.5 * (v / C_M_S).powi(2)).abs() < 1e-15);
    }

    #[test]
    fn rate_is_negative_for_bound_moving_clocks() {
        assert!(proper_time_rate_offset(6.0e7, 500.0) < 0.0);
        assert_eq!(proper_time_rate_offset(0.0, 0.0), 0.0);
    }
}
