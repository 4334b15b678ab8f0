//! Coordinate time scales: TT ↔ TCG, TDB ↔ TCB, and TDB − TT.
//!
//! All routines work on femtosecond counts since MJD 0.0 of the scale named
//! in the argument (`tt_fs`, `tdb_fs`, …), so that results are exact apart
//! from one rounding to the femtosecond.

use super::femto::{FS_PER_DAY, FS_PER_S, div_floor, ratio_to_f64, seconds_to_fs};

/// L_G, the defining rate of TCG − TT (IAU 2000 Resolution B1.9).
pub const L_G: f64 = 6.969290134e-10;
/// L_B, the defining rate of TCB − TDB (IAU 2006 Resolution B3).
pub const L_B: f64 = 1.550519768e-8;
/// TDB0 in seconds (IAU 2006 Resolution B3).
pub const TDB0_S: f64 = -6.55e-5;
/// T0 = 1977 January 1.0 TAI, as MJD 43144.0003725 in TT, TCG, TCB and TDB
/// (IAU 2000 Res. B1.9, IAU 2006 Res. B3). 0.0003725 d = 32.184 s exactly.
pub const T0_FS: i128 = 43_144 * FS_PER_DAY + 32_184 * FS_PER_S / 1000;
/// J2000.0 = JD 2451545.0 = MJD 51544.5, in femtoseconds since MJD 0.
pub const J2000_FS: i128 = 51_544 * FS_PER_DAY + FS_PER_DAY / 2;

/// TCG − TT (femtoseconds) at a TT instant.
///
/// TCG − TT = L_G/(1 − L_G) · (TT − T0).
///
/// # Accuracy
/// Exact up to the f64 product: |error| ≤ 5 fs for |TT − T0| ≤ 200 years.
///
/// # References
/// IAU 2000 Resolution B1.9; IERS Conventions 2010, ch. 10, eq. 10.4.
pub fn tcg_minus_tt_fs(tt_fs: i128) -> i128 {
    let dt_s = ratio_to_f64(tt_fs - T0_FS, FS_PER_S);
    seconds_to_fs(L_G / (1.0 - L_G) * dt_s).unwrap_or(0)
}

/// TT − TCG (femtoseconds, negative after 1977) at a TCG instant.
///
/// TT = TCG − L_G · (TCG − T0): the exact inverse of [`tcg_minus_tt_fs`].
///
/// # References
/// IAU 2000 Resolution B1.9; IERS Conventions 2010, ch. 10, eq. 10.4.
pub fn tt_minus_tcg_fs(tcg_fs: i128) -> i128 {
    let dt_s = ratio_to_f64(tcg_fs - T0_FS, FS_PER_S);
    seconds_to_fs(-L_G * dt_s).unwrap_or(0)
}

/// TDB − TCB (femtoseconds) at a TCB instant.
///
/// TDB = TCB − L_B · (TCB − T0) + TDB0.
///
/// # Accuracy
/// Exact up to the f64 product: |error| ≤ 5 fs for |TCB − T0| ≤ 200 years.
///
/// # References
/// IAU 2006 Resolution B3; IERS Conventions 2010, ch. 10, eq. 10.3 / 10.6.
pub fn tdb_minus_tcb_fs(tcb_fs: i128) -> i128 {
    let dt_s = ratio_to_f64(tcb_fs - T0_FS, FS_PER_S);
    seconds_to_fs(-L_B * dt_s + TDB0_S).unwrap_or(0)
}

/// TCB − TDB (femtoseconds) at a TDB instant: the exact inverse of
/// [`tdb_minus_tcb_fs`], TCB = TDB − TDB0 + L_B/(1 − L_B)·(TDB − TDB0 − T0).
///
/// # References
/// IAU 2006 Resolution B3.
pub fn tcb_minus_tdb_fs(tdb_fs: i128) -> i128 {
    let tdb0_fs = seconds_to_fs(TDB0_S).unwrap_or(0);
    let dt_s = ratio_to_f64(tdb_fs - tdb0_fs - T0_FS, FS_PER_S);
    seconds_to_fs(-TDB0_S + L_B / (1.0 - L_B) * dt_s).unwrap_or(0)
}

/// Geocentric TDB − TT in seconds at a TT instant (femtoseconds since MJD 0).
///
/// The full 787-term series of Fairhead & Bretagnon, evaluated by
/// `sofars::ts::dtdb` with the observer on the geocentre (u = v = 0), which
/// switches off that routine's short analytic topocentric model; the
/// topocentric part is supplied separately from the ephemeris (see
/// [`crate::time::TimeScales::convert`]). The series' argument is TDB; TT is
/// used (as ERFA's `tttdb` does): the difference moves the result by at most
/// 0.5 ps, and taking TT makes TT → TDB → TT exact.
///
/// # Accuracy
/// Agrees with ERFA `eraDtdb(…, u=0, v=0)` (pyerfa 2.0.1.5) to < 1e-15 s over
/// 1900–2100 (`tests/time_reference.rs`). The series itself represents
/// numerically integrated time ephemerides to ±3 ns over 1950–2050 (SOFA
/// documentation of `iauDtdb`, note 7).
///
/// # References
/// Fairhead, L. & Bretagnon, P. 1990, A&A 229, 240; IERS Conventions 2010,
/// ch. 10, eq. 10.7–10.9; SOFA `iauDtdb`.
pub fn tdb_minus_tt_geocentric_s(tt_fs: i128) -> f64 {
    // Two-part Julian Date: J2000 + days, the form that best preserves
    // resolution (SOFA `iauDtdb`, note 1).
    let days = ratio_to_f64(tt_fs - J2000_FS, FS_PER_DAY);
    sofars::ts::dtdb(2_451_545.0, days, 0.0, 0.0, 0.0, 0.0)
}

/// Geocentric TDB − TT tabulated on a uniform grid in TT and interpolated
/// with [`TDB_GRID_POINTS`]-point Lagrange polynomials, for batches (the full
/// series costs ≈ 8 µs a call, the grid ≈ 30 ns).
///
/// Nodes sit at whole multiples of the step counted from MJD 0, so the
/// value at an epoch does not depend on the span a batch asked for (results
/// of partitioned and single runs stay identical).
///
/// # Accuracy
/// With [`TDB_GRID_STEP_DAY`] = 0.5 day and 8 points the interpolated value
/// differs from the series by ≈ 1e-15 s over 1900–2100 (measured at 200 000
/// epochs; `tests/time_reference.rs` holds it to 1 ps; 4 points at 0.125 day
/// gave 2.9e-14 s, 8 points at 1 day 2.9e-13 s).
#[derive(Clone, Debug)]
pub struct TdbGrid {
    first_node: i64,
    step_fs: i128,
    values_s: Vec<f64>,
}

/// The series behind [`tdb_minus_tt_geocentric_s`], naming its tables in
/// the model cache (change it with the series or its crate's version).
pub const TDB_MODEL: &str = "tdbtt-dtdb-uv0-sofars-0.6.3";
/// Grid step of [`TdbGrid`], days.
pub const TDB_GRID_STEP_DAY: f64 = 0.5;
/// Interpolation points of [`TdbGrid`] (even).
pub const TDB_GRID_POINTS: usize = 8;
const TDB_PAD: i64 = (TDB_GRID_POINTS / 2) as i64;

impl TdbGrid {
    /// A grid covering TT epochs `first_tt_fs ..= last_tt_fs` (femtoseconds
    /// since MJD 0 TT), padded by `TDB_GRID_POINTS / 2` nodes each side.
    pub fn new(first_tt_fs: i128, last_tt_fs: i128, step_day: f64) -> Self {
        let step_fs = (step_day * FS_PER_DAY as f64).round() as i128;
        let first_node = div_floor(first_tt_fs, step_fs).0 as i64 - TDB_PAD;
        let last_node = div_floor(last_tt_fs, step_fs).0 as i64 + TDB_PAD + 1;
        // Node k sits at k · step: computed in parallel, or read from the
        // model cache (the same bits; see `crate::model_cache`).
        let model = format!("{TDB_MODEL} step {step_fs} fs");
        let values_s = crate::model_cache::tabulate(&model, first_node, last_node, |k| [tdb_minus_tt_geocentric_s(k as i128 * step_fs)]).into_iter().map(|[v]| v).collect();
        Self { first_node, step_fs, values_s }
    }

    /// Interpolated geocentric TDB − TT (s) at a TT epoch, `None` outside.
    pub fn at(&self, tt_fs: i128) -> Option<f64> {
        let (node, rem_fs) = div_floor(tt_fs, self.step_fs);
        let k = node as i64 - self.first_node;
        if k < TDB_PAD - 1 || (k + TDB_PAD) as usize >= self.values_s.len() {
            return None;
        }
        let u = ratio_to_f64(rem_fs, self.step_fs); // in [0, 1)
        let v = &self.values_s[(k + 1 - TDB_PAD) as usize..=(k + TDB_PAD) as usize];
        Some(crate::interp::uniform_lagrange::<TDB_GRID_POINTS>(v, u))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// f64 products of offsets up to ~20 s: a few femtoseconds.
    const INVERSE_TOL_FS: i128 = 5;

    /// Nodes sit at absolute multiples of the step: a value does not depend
    /// on which span built the grid.
    #[test]
    fn tdb_grid_value_does_not_depend_on_span() {
        let day = FS_PER_DAY;
        let narrow = TdbGrid::new(60_000 * day, 60_002 * day, TDB_GRID_STEP_DAY);
        let wide = TdbGrid::new(59_990 * day + day / 3, 60_013 * day, TDB_GRID_STEP_DAY);
        for tt_fs in [60_000 * day + 12_345_678_901_234_567, 60_001 * day + day / 7] {
            assert_eq!(narrow.at(tt_fs), wide.at(tt_fs));
            assert!(narrow.at(tt_fs).is_some());
        }
    }

    #[test]
    fn tcg_tt_inverse_pair() {
        for k in -200..200i128 {
            let tt = T0_FS + k * 37 * FS_PER_DAY + 12_345;
            let tcg = tt + tcg_minus_tt_fs(tt);
            let back = tcg + tt_minus_tcg_fs(tcg);
            assert!((back - tt).abs() <= INVERSE_TOL_FS, "{k}: {}", back - tt);
        }
    }

    #[test]
    fn tcb_tdb_inverse_pair() {
        for k in -200..200i128 {
            let tdb = T0_FS + k * 91 * FS_PER_DAY + 777;
            let tcb = tdb + tcb_minus_tdb_fs(tdb);
            let back = tcb + tdb_minus_tcb_fs(tcb);
            assert!((back - tdb).abs() <= INVERSE_TOL_FS, "{k}: {}", back - tdb);
        }
    }

    #[test]
    fn rates_at_t0() {
        // At T0, TCG = TT and TDB = TCB + TDB0 (IAU 2006 B3).
        assert_eq!(tcg_minus_tt_fs(T0_FS), 0);
        assert_eq!(tdb_minus_tcb_fs(T0_FS), seconds_to_fs(TDB0_S).unwrap());
    }

    #[test]
    fn erfa_dtdb_test_value_through_sofars() {
        // ERFA t_erfa_c.c, t_dtdb: dtdb(2448939.5, 0.123, 0.76543, 5.0123,
        // 5525.242, 3190) = -0.1280368005936998991e-2 s, tolerance 1e-15.
        let v = sofars::ts::dtdb(2448939.5, 0.123, 0.76543, 5.0123, 5525.242, 3190.0);
        assert!((v - (-0.1280368005936998991e-2)).abs() < 1e-15, "{v}");
    }
}
