//! The terrestrial-to-celestial rotation: ITRS → GCRS, IAU 2006/2000A,
//! CIO based, from `sofars` (the IAU SOFA routines in Rust).
//!
//! x_GCRS = Q(t) · R(t) · W(t) · x_ITRS (IERS Conventions 2010, eq. 5.1), with
//! Q from the CIP coordinates X, Y (plus the observed offsets dX, dY) and the
//! CIO locator s (`xys06a`, `c2ixys`), R = R₃(−ERA) (`era00`, eq. 5.15), and W
//! from polar motion x_p, y_p and the TIO locator s′ (`sp00`, `pom00`,
//! eq. 5.3). SOFA writes the product as GCRS → ITRS, rc2t = RPOM·R₃(ERA)·RC2I
//! (`c2tcio`); we use its transpose.
//!
//! The IAU 2000A nutation inside `xys06a` costs tens of microseconds, so a
//! batch evaluates X, Y, s on a grid ([`CipGrid`]) and interpolates; the
//! direct path ([`CipXys::direct`]) stays available for tests.

use nalgebra::{Matrix3, Vector3};

use super::eop::EopValues;

/// Earth rotation rate, rad per UT1 second: 2π · 1.00273781191135448 / 86400
/// (IERS Conventions 2010, eq. 5.15, derivative of the ERA).
pub const ERA_RATE_RAD_S: f64 = std::f64::consts::TAU * 1.002_737_811_911_354_48 / 86_400.0;

/// CIP coordinates X, Y and CIO locator s (radians), IAU 2006/2000A, before
/// the observed offsets dX, dY are added.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CipXys {
    pub x_rad: f64,
    pub y_rad: f64,
    pub s_rad: f64,
}

impl CipXys {
    /// X, Y, s at a TT instant given as a two-part Julian Date.
    ///
    /// # Accuracy
    /// The IAU 2006/2000A series (SOFA `iauXys06a`): ≈ 0.1 mas against VLBI
    /// before dX, dY are applied.
    ///
    /// # References
    /// IERS Conventions 2010, sec. 5.5.4 (eq. 5.16) and 5.5.6; SOFA `iauXys06a`.
    pub fn direct(tt_jd1: f64, tt_jd2: f64) -> Self {
        let (x, y, s) = sofars::pnp::xys06a(tt_jd1, tt_jd2);
        Self { x_rad: x, y_rad: y, s_rad: s }
    }
}

/// X, Y, s tabulated on a uniform grid in TT, interpolated with
/// [`CIP_GRID_POINTS`]-point Lagrange polynomials.
///
/// # Accuracy
/// With the default step of 0.5 day and 8 points, X, Y and s differ from the
/// direct series by ≤ 7e-4 mm at the Earth's surface (× 6378 km) over
/// 1980–2050 (20 000 epochs; 4 points at 0.25 day gave 0.036 mm, 8 points
/// at 1 day 0.15 mm). The unit test `grid_matches_direct` holds it to 1e-3 mm
/// and the pulsar fast-vs-direct sweep (`tests/pulsar.rs`) to 1 mm.
#[derive(Clone, Debug)]
pub struct CipGrid {
    start_mjd_tt: f64,
    step_day: f64,
    nodes: Vec<CipXys>,
}

/// Default grid step, days.
pub const CIP_GRID_STEP_DAY: f64 = 0.5;
/// The series behind [`CipXys::direct`], naming its tables in the model
/// cache (change it with the series or its crate's version).
pub const CIP_MODEL: &str = "cip-xys06a-sofars-0.6.3";
/// Interpolation points of [`CipGrid`] (even).
pub const CIP_GRID_POINTS: usize = 8;
const CIP_PAD: usize = CIP_GRID_POINTS / 2;

impl CipGrid {
    /// A grid covering [start, end] (MJD TT) with `step_day`, padded by
    /// `CIP_GRID_POINTS / 2` nodes each side for the interpolation window.
    /// Nodes sit at whole multiples of the step, so a value does not depend
    /// on the span asked for.
    pub fn new(start_mjd_tt: f64, end_mjd_tt: f64, step_day: f64) -> Self {
        let j0 = (start_mjd_tt / step_day).floor() as i64 - CIP_PAD as i64;
        let s0 = j0 as f64 * step_day;
        let n = (((end_mjd_tt - s0) / step_day).ceil() as i64) + CIP_PAD as i64 + 1;
        // Node j sits at MJD j · step: computed in parallel, or read from the
        // model cache (the same bits; see `crate::model_cache`).
        let model = format!("{CIP_MODEL} step {step_day:?} d");
        let nodes = crate::model_cache::tabulate(&model, j0, j0 + n - 1, |j| {
            let c = CipXys::direct(2_400_000.5, j as f64 * step_day);
            [c.x_rad, c.y_rad, c.s_rad]
        })
        .into_iter()
        .map(|[x_rad, y_rad, s_rad]| CipXys { x_rad, y_rad, s_rad })
        .collect();
        Self { start_mjd_tt: s0, step_day, nodes }
    }

    /// Interpolated X, Y, s at an MJD (TT), or `None` outside the grid.
    pub fn at(&self, mjd_tt: f64) -> Option<CipXys> {
        let u = (mjd_tt - self.start_mjd_tt) / self.step_day;
        if !(u >= (CIP_PAD - 1) as f64) {
            return None;
        }
        let i = u as usize; // u ≥ 1 here: truncation is the floor
        if i + CIP_PAD >= self.nodes.len() {
            return None;
        }
        let w = crate::interp::uniform_lagrange_weights::<CIP_GRID_POINTS>(u - i as f64);
        let window = &self.nodes[i + 1 - CIP_PAD..=i + CIP_PAD];
        let (mut x_rad, mut y_rad, mut s_rad) = (0.0, 0.0, 0.0);
        for (wk, n) in w.iter().zip(window) {
            x_rad += wk * n.x_rad;
            y_rad += wk * n.y_rad;
            s_rad += wk * n.s_rad;
        }
        Some(CipXys { x_rad, y_rad, s_rad })
    }

    /// MJD (TT) span the grid answers.
    pub fn span_mjd_tt(&self) -> (f64, f64) {
        (self.start_mjd_tt + (CIP_PAD - 1) as f64 * self.step_day, self.start_mjd_tt + (self.nodes.len() - CIP_PAD - 1) as f64 * self.step_day)
    }
}

/// The ITRS → GCRS rotation at one instant and its time derivative.
#[derive(Clone, Copy, Debug)]
pub struct TerrestrialToCelestial {
    /// x_GCRS = m · x_ITRS.
    pub matrix: Matrix3<f64>,
    /// d(matrix)/dt per second (Earth rotation only).
    pub rate_per_s: Matrix3<f64>,
}

fn m3(a: &[[f64; 3]; 3]) -> Matrix3<f64> {
    Matrix3::new(a[0][0], a[0][1], a[0][2], a[1][0], a[1][1], a[1][2], a[2][0], a[2][1], a[2][2])
}

/// The ITRS → GCRS rotation and its rate.
///
/// `tt_jd`, `ut1_jd`: two-part Julian Dates in TT and UT1; `cip`: X, Y, s at
/// that TT; `eop`: polar motion and pole offsets at the same instant.
///
/// # Accuracy
/// Matches ERFA's CIO-based chain (`xys06a`+dX/dY, `c2ixys`, `era00`, `sp00`,
/// `pom00`, `c2tcio`; pyerfa 2.0.1.5) to < 1 mm at the Earth's surface
/// (`tests/geometry_reference.rs`). The rate keeps only the Earth rotation
/// term (dR/dt); the neglected precession–nutation and polar-motion rates are
/// < 1e-6 m/s at the surface, and UT1 seconds are taken as SI seconds
/// (relative error 1e-8 on the velocity).
///
/// # References
/// IERS Conventions 2010, eq. 5.1, 5.3, 5.10, 5.15; SOFA `iauC2tcio`.
pub fn itrs_to_gcrs(tt_jd: (f64, f64), ut1_jd: (f64, f64), cip: CipXys, eop: &EopValues) -> TerrestrialToCelestial {
    let rc2i = m3(&sofars::pnp::c2ixys(cip.x_rad + eop.dx_rad, cip.y_rad + eop.dy_rad, cip.s_rad));
    let era = era_rad(ut1_jd);
    let sp = sofars::pnp::sp00(tt_jd.0, tt_jd.1);
    let rpom = m3(&sofars::pnp::pom00(eop.x_p_rad, eop.y_p_rad, sp));
    let (s, c) = era.sin_cos();
    // R₃(ERA) as SOFA builds it (iauRz): rotates axes by +ERA about z.
    let r3 = Matrix3::new(c, s, 0.0, -s, c, 0.0, 0.0, 0.0, 1.0);
    let dr3 = Matrix3::new(-s, c, 0.0, -c, -s, 0.0, 0.0, 0.0, 0.0) * ERA_RATE_RAD_S;
    let gcrs_to_itrs = rpom * r3 * rc2i;
    let rate = (rpom * dr3 * rc2i).transpose();
    TerrestrialToCelestial { matrix: gcrs_to_itrs.transpose(), rate_per_s: rate }
}

/// Earth rotation angle (rad, in [0, 2π)) at a two-part UT1 Julian Date.
///
/// The operations of ERFA/SOFA `era00` (as in `sofars::erst::era00`) in the
/// same order, except that the fractional days are taken as `x − trunc(x)`
/// instead of `fmod(x, 1)`: both are exact, so the result is bit-identical
/// (unit test), and on baseline x86-64 `fmod` of a 2.4e6-day Julian Date is a
/// slow software loop called once per station state.
///
/// # Accuracy
/// That of the IAU 2000 definition; bit-identical to `era00`.
///
/// # References
/// IERS Conventions 2010, eq. 5.15 (ERA = 2π(0.7790572732640 +
/// 1.00273781191135448 T_u)); SOFA `iauEra00`.
pub fn era_rad(ut1_jd: (f64, f64)) -> f64 {
    const DJ00: f64 = 2_451_545.0;
    const D2PI: f64 = std::f64::consts::TAU;
    let (d1_days, d2_days) = if ut1_jd.0 < ut1_jd.1 { ut1_jd } else { (ut1_jd.1, ut1_jd.0) };
    let t_days = d1_days + (d2_days - DJ00);
    let frac_days = |x: f64| if x.abs() < 4.5e15 { x - (x as i64) as f64 } else { x % 1.0 };
    let f_days = frac_days(d1_days) + frac_days(d2_days);
    // iauAnp: into [0, 2π).
    let mut angle_rad = (D2PI * (f_days + 0.7790572732640 + 0.00273781191135448 * t_days)) % D2PI;
    if angle_rad < 0.0 {
        angle_rad += D2PI;
    }
    angle_rad
}

impl TerrestrialToCelestial {
    /// GCRS position (m) and velocity (m/s) of a point fixed in the ITRS.
    pub fn apply(&self, itrs_m: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
        (self.matrix * itrs_m, self.rate_per_s * itrs_m)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn model_ids_name_the_locked_series_crate() {
        // The cached tables (crate::model_cache) are keyed by model id: the
        // ids must follow the version of the crate that evaluates the series.
        let lock = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/Cargo.lock")).unwrap();
        let v = lock.split("name = \"sofars\"\nversion = \"").nth(1).and_then(|r| r.split('"').next()).unwrap();
        for id in [CIP_MODEL, crate::time::relativistic::TDB_MODEL] {
            assert!(id.ends_with(&format!("sofars-{v}")), "{id} vs sofars {v}");
        }
    }

    /// Nodes sit at fixed multiples of the step, so the interpolated value at
    /// an epoch is bit-identical whichever span built the grid (batches may
    /// reuse a wider grid built earlier).
    #[test]
    fn grid_value_does_not_depend_on_span() {
        let narrow = CipGrid::new(60_000.0, 60_002.0, CIP_GRID_STEP_DAY);
        let wide = CipGrid::new(59_990.5, 60_013.0, CIP_GRID_STEP_DAY);
        for mjd in [60_000.3, 60_001.123_456_789, 60_001.75] {
            assert_eq!(narrow.at(mjd), wide.at(mjd));
            assert!(narrow.at(mjd).is_some());
        }
    }

    #[test]
    fn rotation_is_orthonormal_and_rate_is_perpendicular() {
        let eop = EopValues { ut1_minus_utc_s: 0.1, ut1_minus_tai_s: -36.9, x_p_rad: 1e-6, y_p_rad: 2e-6, dx_rad: 1e-9, dy_rad: -1e-9, predicted: false };
        let cip = CipXys::direct(2_451_545.0, 9000.3);
        let r = itrs_to_gcrs((2_451_545.0, 9000.3), (2_451_545.0, 9000.2995), cip, &eop);
        let i = r.matrix * r.matrix.transpose();
        assert!((i - Matrix3::identity()).abs().max() < 1e-15);
        // A surface point moves at ω·r⊥ ≈ 465 m/s at the equator, perpendicular to its position.
        let x = Vector3::new(6_378_137.0, 0.0, 0.0);
        let (p, v) = r.apply(&x);
        assert!(p.dot(&v).abs() / (p.norm() * v.norm()) < 1e-3);
        assert!((v.norm() - ERA_RATE_RAD_S * 6_378_137.0).abs() < 1.0, "{}", v.norm());
        // The geocentre stays put.
        let (p0, v0) = r.apply(&Vector3::zeros());
        assert_eq!((p0.norm(), v0.norm()), (0.0, 0.0));
    }

    #[test]
    fn era_is_bit_identical_to_era00() {
        // Both orders of the parts, negative and positive fractions, epochs
        // 1900–2100 (ERFA/SOFA iauEra00 through sofars 0.6.3).
        let mut x = 0x2545_f491_4f6c_dd1du64;
        for k in 0..200_000 {
            let mjd = 15_000.0 + (crate::xorshift64(&mut x) >> 11) as f64 / (1u64 << 53) as f64 * 73_000.0;
            let day = mjd.floor();
            let parts = match k % 4 {
                0 => (2_400_000.5 + day, mjd - day),
                1 => (mjd - day, 2_400_000.5 + day),
                2 => (2_400_000.5 + mjd, 0.0),
                _ => (2_451_545.0, mjd - 51_544.5),
            };
            assert_eq!(era_rad(parts).to_bits(), sofars::erst::era00(parts.0, parts.1).to_bits(), "{parts:?}");
        }
    }

    #[test]
    fn grid_matches_direct() {
        let g = CipGrid::new(58_000.0, 58_030.0, CIP_GRID_STEP_DAY);
        for k in 0..300 {
            let mjd = 58_000.0 + k as f64 * 0.0999;
            let a = g.at(mjd).unwrap();
            let b = CipXys::direct(2_400_000.5, mjd);
            // 1.6e-13 rad = 1e-3 mm at the Earth's surface.
            let tol_rad = 1.6e-13;
            assert!(
                (a.x_rad - b.x_rad).abs() < tol_rad && (a.y_rad - b.y_rad).abs() < tol_rad && (a.s_rad - b.s_rad).abs() < tol_rad,
                "{mjd}: {:e} {:e} {:e}",
                a.x_rad - b.x_rad,
                a.y_rad - b.y_rad,
                a.s_rad - b.s_rad
            );
        }
        assert!(g.at(57_990.0).is_none());
    }
}
