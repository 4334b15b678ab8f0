//! Light-time solution of one leg, in the BCRS with TDB as time argument.
//!
//! t_rx − t_tx = |x_rx(t_rx) − x_tx(t_tx)|/c + Σ Δ_S(body), solved for t_tx
//! by fixed-point iteration (each pass gains a factor v/c ≈ 1e-4) until two
//! successive light times agree to 0.1 ps.
//!
//! Shapiro delay of each body by the finite-end-point formula with its
//! second-order term ([`crate::delays::shapiro_finite_s`]). **Epoch of the
//! bodies:** each body is evaluated once per leg, at the time the signal
//! would have left it to reach the receiver, t_B = t_rx − |x_rx − x_B(t_rx)|/c
//! (its retarded position seen from the receiver); its motion during the
//! leg changes the delay by < 1e-15 s for solar-system geometry.
//!
//! # References
//! Moyer 2000, JPL DESCANSO Monograph 2, sec. 8.3 (light-time equation,
//! eq. 8-38 ff.) and 8.3.1 (relativistic delay, eq. 8-55); IERS Conventions
//! 2010, ch. 11 (eq. 11.17).

use nalgebra::Vector3;

use crate::delays::ShapiroBody;
use crate::delays::{C_M_S, shapiro_finite_s};
use crate::ephemeris::{Ephemeris, EphemerisError, TdbSeconds};
use crate::reject::{Coded, RejectCode};
use crate::time::femto::seconds_to_fs;
use crate::time::{Epoch, TimeError};

/// Why a leg has no solution.
#[derive(Debug, thiserror::Error)]
pub enum LightTimeError {
    #[error("light time is not finite")]
    NotFinite,
    #[error("light time does not converge to {LIGHT_TIME_TOL_S} s in {MAX_ITERATIONS} iterations")]
    NotConverged,
    #[error("transmission epoch out of range: {0}")]
    Time(#[from] TimeError),
    #[error("geometry unavailable: {0}")]
    Geometry(#[from] EphemerisError),
}

impl Coded for LightTimeError {
    fn reject_code(&self) -> RejectCode {
        match self {
            LightTimeError::NotFinite => RejectCode::NotFinite,
            LightTimeError::NotConverged => RejectCode::NotConverged,
            LightTimeError::Time(_) => RejectCode::TimeNotConvertible,
            LightTimeError::Geometry(_) => RejectCode::GeometryUnavailable,
        }
    }
}

/// Convergence of the light time, s.
pub const LIGHT_TIME_TOL_S: f64 = 1e-13;
/// Iteration limit; non-convergence is an error.
pub const MAX_ITERATIONS: usize = 20;

/// The solution of one leg.
#[derive(Clone, Copy, Debug)]
pub struct Leg {
    /// t_rx − t_tx, TDB seconds (geometric + Shapiro).
    pub light_time_s: f64,
    /// Total Shapiro delay of the leg, s.
    pub shapiro_s: f64,
    /// Transmission event, TDB.
    pub t_tx: Epoch,
    /// Transmitter position at t_tx (BCRS, m).
    pub x_tx_m: Vector3<f64>,
    /// Transmitter velocity at t_tx (BCRS, m/s).
    pub v_tx_m_s: Vector3<f64>,
    /// Iterations used.
    pub iterations: usize,
}

/// Bodies of a leg's Shapiro delay, positioned for one receiver event.
#[derive(Clone, Debug)]
pub struct ShapiroSet {
    /// (GM m³/s², position m) per body.
    bodies: Vec<(f64, Vector3<f64>)>,
    ppn_gamma: f64,
}

impl ShapiroSet {
    /// Positions each body at its retarded time seen from the receiver at
    /// (`t_rx`, `x_rx_m`).
    pub fn for_receiver(eph: &Ephemeris, bodies: &[ShapiroBody], ppn_gamma: f64, t_rx: &TdbSeconds, x_rx_m: &Vector3<f64>) -> Result<Self, LightTimeError> {
        let mut out = Vec::with_capacity(bodies.len());
        for b in bodies {
            let p = |t: &TdbSeconds| -> Result<Vector3<f64>, LightTimeError> { Ok(Vector3::from(eph.shapiro_position_ssb_km(b.naif_id, t)?) * 1e3) };
            let x = p(t_rx)?;
            let back_s = (x_rx_m - x).norm() / C_M_S;
            out.push((b.gm_m3_s2, p(&t_rx.plus_s(-back_s))?));
        }
        Ok(Self { bodies: out, ppn_gamma })
    }

    /// No bodies (Shapiro off).
    pub fn none() -> Self {
        Self { bodies: Vec::new(), ppn_gamma: 1.0 }
    }

    /// Total delay (s) between two end points.
    pub fn delay_s(&self, x_tx_m: &Vector3<f64>, x_rx_m: &Vector3<f64>) -> f64 {
        let r12 = (x_rx_m - x_tx_m).norm();
        self.bodies.iter().map(|(gm, xb)| shapiro_finite_s(*gm, self.ppn_gamma, (x_tx_m - xb).norm(), (x_rx_m - xb).norm(), r12)).sum()
    }
}

/// Solves one leg backwards from a known reception: receiver at `t_rx`
/// (TDB) and `x_rx_m` (BCRS), transmitter state given as a function of TDB.
///
/// # Accuracy
/// Converged to [`LIGHT_TIME_TOL_S`]; with a geocentric receiver and Shapiro
/// off it agrees with SPICE `spkezr` 'CN' (spiceypy 8.3.0) to ≤ 5 ps
/// (`tests/tracking.rs`, `light_time_matches_spice_cn_and_shapiro_matches_formula`).
///
/// # Errors
/// The transmitter's state function's error (of the caller's type `E`), or
/// a [`LightTimeError`] converted into it.
pub fn solve_backward<F, E>(t_rx: &Epoch, x_rx_m: &Vector3<f64>, shapiro: &ShapiroSet, tx_state: F) -> Result<Leg, E>
where
    F: FnMut(&Epoch) -> Result<(Vector3<f64>, Vector3<f64>), E>,
    E: From<LightTimeError>,
{
    solve_backward_from(t_rx, x_rx_m, shapiro, 0.0, tx_state)
}

/// [`solve_backward`] starting the fixed-point iteration from a light time
/// `tau0_s` (s) already close to the solution (fewer transmitter states).
///
/// # Accuracy
/// As [`solve_backward`]: the converged leg satisfies the same
/// [`LIGHT_TIME_TOL_S`] criterion whatever the start.
///
/// # References
/// Moyer (2000), JPL DESCANSO Monograph 2, sec. 8.3.
pub fn solve_backward_from<F, E>(t_rx: &Epoch, x_rx_m: &Vector3<f64>, shapiro: &ShapiroSet, tau0_s: f64, mut tx_state: F) -> Result<Leg, E>
where
    F: FnMut(&Epoch) -> Result<(Vector3<f64>, Vector3<f64>), E>,
    E: From<LightTimeError>,
{
    let back = |tau_s: f64| -> Result<Epoch, LightTimeError> { Ok(t_rx.plus_fs(-seconds_to_fs(tau_s).ok_or(LightTimeError::NotFinite)?)?) };
    let mut tau_s = tau0_s;
    for it in 1..=MAX_ITERATIONS {
        let t_tx = back(tau_s)?;
        let (x_tx, v_tx) = tx_state(&t_tx)?;
        let sh = shapiro.delay_s(&x_tx, x_rx_m);
        let next = (x_rx_m - x_tx).norm() / C_M_S + sh;
        if !next.is_finite() {
            return Err(LightTimeError::NotFinite.into());
        }
        if (next - tau_s).abs() <= LIGHT_TIME_TOL_S {
            let t_tx = back(next)?;
            return Ok(Leg { light_time_s: next, shapiro_s: sh, t_tx, x_tx_m: x_tx, v_tx_m_s: v_tx, iterations: it });
        }
        tau_s = next;
    }
    Err(LightTimeError::NotConverged.into())
}

/// A transmitter state known at one epoch: TDB epoch, BCRS position (m) and
/// velocity (m/s). See [`solve_backward_anchored`].
#[derive(Clone, Copy, Debug)]
pub struct Anchor {
    pub t: Epoch,
    pub x_m: Vector3<f64>,
    pub v_m_s: Vector3<f64>,
}

/// [`solve_backward_from`] in two phases, to spend fewer exact transmitter
/// states (each may cost a full Earth orientation and ephemeris evaluation):
/// first iterate on the transmitter moving uniformly from `anchor` (start
/// `tau0_s`), then iterate with exact states from that light time — usually
/// converging at the first. The result meets [`LIGHT_TIME_TOL_S`] with exact
/// states, like [`solve_backward`].
///
/// # Accuracy
/// As [`solve_backward`]. The first phase only needs to land within the
/// exact phase's contraction: an anchor within ≲ 0.1 s of the solution,
/// where the neglected acceleration (≤ 0.04 m/s² for a station, ≤ 0.02 m/s²
/// for a spacecraft near 1 au) moves the transmitter ≤ 1e-4 m.
///
/// # References
/// Moyer (2000), *Formulation for Observed and Computed Values of Deep Space
/// Network Data Types for Navigation*, JPL DESCANSO Monograph 2, sec. 8.3
/// (iterative light-time solution).
pub fn solve_backward_anchored<F, E>(t_rx: &Epoch, x_rx_m: &Vector3<f64>, shapiro: &ShapiroSet, tau0_s: f64, anchor: &Anchor, tx_state: F) -> Result<Leg, E>
where
    F: FnMut(&Epoch) -> Result<(Vector3<f64>, Vector3<f64>), E>,
    E: From<LightTimeError>,
{
    let uniform = solve_backward_from(t_rx, x_rx_m, shapiro, tau0_s, |t| -> Result<_, E> {
        let dt_s = crate::time::femto::i128_as_f64(t.label_fs() - anchor.t.label_fs()) * 1e-15;
        Ok((anchor.x_m + anchor.v_m_s * dt_s, anchor.v_m_s))
    })?;
    solve_backward_from(t_rx, x_rx_m, shapiro, uniform.light_time_s, tx_state)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::{TimeScale, TimeScales};

    #[test]
    fn static_transmitter_gives_distance_over_c() {
        let ts = TimeScales::builtin();
        let t = ts.epoch_from_mjd(TimeScale::Tdb, 60_000, 0.5).unwrap();
        let x_rx = Vector3::new(0.0, 0.0, 0.0);
        let leg = solve_backward(&t, &x_rx, &ShapiroSet::none(), |_| Ok::<_, LightTimeError>((Vector3::new(C_M_S * 1000.0, 0.0, 0.0), Vector3::zeros()))).unwrap();
        assert!((leg.light_time_s - 1000.0).abs() < 1e-12);
        assert_eq!(leg.t_tx.label_fs(), t.label_fs() - 1000 * crate::time::femto::FS_PER_S);
    }

    #[test]
    fn receding_transmitter_converges() {
        // Transmitter receding at 30 km/s along x from 1e11 m at t_rx.
        let ts = TimeScales::builtin();
        let t = ts.epoch_from_mjd(TimeScale::Tdb, 60_000, 0.5).unwrap();
        let v = 30_000.0;
        let leg = solve_backward(&t, &Vector3::zeros(), &ShapiroSet::none(), |e| {
            let dt = crate::time::femto::i128_as_f64(e.label_fs() - t.label_fs()) * 1e-15;
            Ok::<_, LightTimeError>((Vector3::new(1e11 + v * dt, 0.0, 0.0), Vector3::new(v, 0.0, 0.0)))
        })
        .unwrap();
        // Exact: τ = d/(c + v).
        let want = 1e11 / (C_M_S + v);
        assert!((leg.light_time_s - want).abs() < 1e-12, "{} vs {want}", leg.light_time_s);
        assert!(leg.iterations <= 6);
    }

    #[test]
    fn anchored_solution_meets_the_same_criterion() {
        // An accelerating transmitter; anchored at a state 0.05 s off the
        // solution, the two-phase solve lands where exact iteration does.
        let ts = TimeScales::builtin();
        let t = ts.epoch_from_mjd(TimeScale::Tdb, 60_000, 0.5).unwrap();
        let state = |e: &Epoch| {
            let dt = crate::time::femto::i128_as_f64(e.label_fs() - t.label_fs()) * 1e-15;
            Ok::<_, LightTimeError>((Vector3::new(1e11 + 3e4 * dt + 0.01 * dt * dt, 2e3 * dt, 0.0), Vector3::new(3e4 + 0.02 * dt, 2e3, 0.0)))
        };
        let exact = solve_backward(&t, &Vector3::zeros(), &ShapiroSet::none(), state).unwrap();
        let guess_s = exact.light_time_s + 0.05;
        let ta = t.plus_fs(-crate::time::femto::seconds_to_fs(guess_s).unwrap()).unwrap();
        let (x_m, v_m_s) = state(&ta).unwrap();
        let two = solve_backward_anchored(&t, &Vector3::zeros(), &ShapiroSet::none(), guess_s, &Anchor { t: ta, x_m, v_m_s }, state).unwrap();
        assert!((two.light_time_s - exact.light_time_s).abs() <= LIGHT_TIME_TOL_S, "{} vs {}", two.light_time_s, exact.light_time_s);
        assert!(two.iterations <= 2, "exact phase took {} iterations", two.iterations);
    }
}
