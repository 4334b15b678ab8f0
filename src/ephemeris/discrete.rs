//! SPK types 9 and 13: discrete states with Lagrange (type 9) or Hermite
//! (type 13) interpolation over a window, selected as SPICE selects it.
//!
//! # References
//! NAIF SPK Required Reading (`spk.req`), "Type 9: Lagrange Interpolation —
//! Unequal Time Steps" and "Type 13: Hermite Interpolation — Unequal Time
//! Steps"; SPICE SPKR09/SPKE09 (LGRINT) and SPKR13/SPKE13 (HRMINT).

use super::spk::{SegmentFormatError, StateKm};
use crate::interp::{LANES, hermite_at_zero_lanes, hermite_coefficients_lanes, lagrange_at_zero_lanes, newton_value_and_derivative};
use crate::time::TdbSeconds;

/// Discrete states of a type 9 (Lagrange) or type 13 (Hermite) segment.
#[derive(Clone, Debug)]
pub struct DiscreteStates {
    /// Epochs, TDB seconds past J2000, strictly increasing.
    pub epochs_s: Vec<f64>,
    /// States (x, y, z km; vx, vy, vz km/s), one per epoch.
    pub states: Vec<[f64; 6]>,
    /// Number of states in the interpolation window.
    pub window: usize,
    /// Type 13 (Hermite with velocities) or type 9 (Lagrange per component).
    pub hermite: bool,
    /// Type 13 with a window of at most [`CACHED_WINDOW`] states: the
    /// divided-difference table of each window, computed on first use (it
    /// depends on the window's states alone, so results do not depend on
    /// which row asked first).
    hermite_tables: std::sync::Arc<Vec<std::sync::OnceLock<Box<HermiteTable>>>>,
}

/// Windows up to this many states keep their Hermite tables.
pub const CACHED_WINDOW: usize = 8;

/// Newton coefficients of one window's Hermite interpolant, per axis lane,
/// on the doubled nodes z = (e₀, e₀, e₁, e₁, …) measured from e₀.
#[derive(Debug)]
struct HermiteTable {
    coef: [[f64; LANES]; 2 * CACHED_WINDOW],
}

/// Largest interpolation window of a type 9/13 segment lapse reads (states).
pub const MAX_WINDOW: usize = 64;

/// Parses a type 9 or 13 segment: N states (6 doubles each), N epochs, the
/// epoch directory ((N−1)/100 entries), then (type 9) the polynomial degree
/// or (type 13) the window size minus one, and N.
///
/// # References
/// NAIF SPK Required Reading, "Type 9: Lagrange Interpolation — Unequal Time
/// Steps" and "Type 13: Hermite Interpolation — Unequal Time Steps".
pub(crate) fn parse_discrete(d: &[f64], hermite: bool) -> Result<DiscreteStates, SegmentFormatError> {
    if d.len() < 2 + 7 {
        return Err(SegmentFormatError(format!("only {} doubles", d.len())));
    }
    let n_f = d[d.len() - 1];
    let w_f = d[d.len() - 2];
    if !(n_f.is_finite() && n_f >= 2.0 && n_f.fract() == 0.0 && w_f.is_finite() && w_f >= 1.0 && w_f.fract() == 0.0) {
        return Err(SegmentFormatError(format!("bad trailer: {w_f}, {n_f}")));
    }
    let n = n_f as usize;
    // Type 9 stores the degree (window = degree + 1); type 13 the window − 1.
    let window = w_f as usize + 1;
    let dir = (n - 1) / 100;
    if n.checked_mul(7).map(|x| x + dir + 2) != Some(d.len()) {
        return Err(SegmentFormatError(format!("{n} states do not fill the segment's {} doubles", d.len())));
    }
    if window > n || window > MAX_WINDOW {
        return Err(SegmentFormatError(format!("window of {window} states with {n} states")));
    }
    let states: Vec<[f64; 6]> = (0..n).map(|i| std::array::from_fn(|k| d[6 * i + k])).collect();
    let epochs_s = d[6 * n..7 * n].to_vec();
    if epochs_s.windows(2).any(|w| !(w[1] > w[0])) || states.iter().flatten().chain(&epochs_s).any(|x| !x.is_finite()) {
        return Err(SegmentFormatError("epochs not increasing or values not finite".into()));
    }
    Ok(DiscreteStates::new(epochs_s, states, window, hermite))
}

impl DiscreteStates {
    /// Discrete states (already checked: epochs increasing, window ≤ states).
    pub fn new(epochs_s: Vec<f64>, states: Vec<[f64; 6]>, window: usize, hermite: bool) -> Self {
        let windows = if hermite && window <= CACHED_WINDOW { (epochs_s.len() + 1).saturating_sub(window) } else { 0 };
        let hermite_tables = std::sync::Arc::new((0..windows).map(|_| std::sync::OnceLock::new()).collect());
        Self { epochs_s, states, window, hermite, hermite_tables }
    }

    /// Newton coefficients of the Hermite interpolant of the window starting
    /// at state `f`: the divided differences of [`hermite_at_zero_lanes`] on
    /// the window's epochs measured from its first one (differences of
    /// nearby f64 epochs are exact).
    fn hermite_table(&self, f: usize) -> HermiteTable {
        let w = self.window;
        let e0 = self.epochs_s[f];
        let x: [f64; CACHED_WINDOW] = std::array::from_fn(|j| if j < w { self.epochs_s[f + j] - e0 } else { 0.0 });
        let (p, v) = self.window_lanes::<CACHED_WINDOW>(f);
        HermiteTable { coef: hermite_coefficients_lanes::<{ 2 * CACHED_WINDOW }>(&x[..w], &p[..w], &v[..w]) }
    }

    /// The positions and velocities of the window starting at state `f`, one
    /// lane per axis (`CAP` ≥ the window).
    fn window_lanes<const CAP: usize>(&self, f: usize) -> ([[f64; LANES]; CAP], [[f64; LANES]; CAP]) {
        let (mut p, mut v) = ([[0.0f64; LANES]; CAP], [[0.0f64; LANES]; CAP]);
        for (j, st) in self.states[f..f + self.window].iter().enumerate() {
            p[j] = [st[0], st[1], st[2], 0.0];
            v[j] = [st[3], st[4], st[5], 0.0];
        }
        (p, v)
    }

    /// First index of the interpolation window at `t`, as SPICE selects it
    /// (SPKR09/SPKR13): for an even window the states around the last epoch
    /// ≤ t, half on each side; for an odd window centred on the nearest
    /// epoch; shifted to stay inside the segment.
    fn window_start(&self, t: &TdbSeconds) -> usize {
        let n = self.epochs_s.len();
        let w = self.window;
        let low = self.epochs_s.partition_point(|e| t.minus_f64_s(*e) >= 0.0).saturating_sub(1);
        let first = if w.is_multiple_of(2) {
            (low + 1).saturating_sub(w / 2)
        } else {
            let near = if low + 1 < n && t.minus_f64_s(self.epochs_s[low]).abs() > t.minus_f64_s(self.epochs_s[low + 1]).abs() { low + 1 } else { low };
            near.saturating_sub((w - 1) / 2)
        };
        first.min(n - w)
    }

    /// Interpolated state at `t`.
    ///
    /// Type 13: each position component by the Hermite polynomial through the
    /// window's positions and velocities, velocity as its derivative (SPICE
    /// SPKE13/HRMINT). Type 9: each of the six components by the Lagrange
    /// polynomial through the window (SPICE SPKE09/LGRINT).
    ///
    /// # Accuracy
    /// Reproduces the states at the nodes exactly; between nodes it is the
    /// interpolating polynomial, checked against spiceypy on the same file
    /// (`tests/tracking.rs`, `type13_reader_matches_spice` and
    /// `spice_written_type9_and_type13_files_read_as_spice_reads_them`).
    pub fn evaluate(&self, t: &TdbSeconds) -> StateKm {
        if !self.hermite_tables.is_empty() {
            // Type 13 with a small window: the window's table once, then a
            // nested evaluation (value and derivative) per call.
            let f = self.window_start(t);
            let table = self.hermite_tables[f].get_or_init(|| Box::new(self.hermite_table(f)));
            let (p, dp) = newton_value_and_derivative(&table.coef[..2 * self.window], |k| t.minus_f64_s(self.epochs_s[f + k / 2]));
            return StateKm { position_km: [p[0], p[1], p[2]], velocity_km_s: [dp[0], dp[1], dp[2]] };
        }
        // Scratch arrays on the stack sized for the window: small windows
        // (the usual 8–16 states) do not clear buffers for 64.
        if self.window <= SMALL_WINDOW { self.evaluate_in::<SMALL_WINDOW, { 2 * SMALL_WINDOW }>(t) } else { self.evaluate_in::<MAX_WINDOW, { 2 * MAX_WINDOW }>(t) }
    }

    /// [`Self::evaluate`] with scratch room for `CAP` states (`CAP2` = 2·CAP).
    fn evaluate_in<const CAP: usize, const CAP2: usize>(&self, t: &TdbSeconds) -> StateKm {
        let f = self.window_start(t);
        let w = self.window;
        // Abscissae relative to t (two-part subtraction keeps precision).
        let mut x = [0.0f64; CAP];
        for (j, i) in (f..f + w).enumerate() {
            x[j] = -t.minus_f64_s(self.epochs_s[i]);
        }
        let x = &x[..w];
        // The three axes share the abscissae: interpolated together, one
        // lane per axis (the same operations per lane as one axis alone, so
        // the results are those of the per-axis routines bit for bit, and
        // the divisions by the shared node differences vectorise).
        let mut s = StateKm::default();
        let (p, v) = self.window_lanes::<CAP>(f);
        if self.hermite {
            let (val, der) = hermite_at_zero_lanes::<CAP2>(x, &p[..w], &v[..w]);
            s.position_km = [val[0], val[1], val[2]];
            s.velocity_km_s = [der[0], der[1], der[2]];
        } else {
            let (pos, vel) = (lagrange_at_zero_lanes::<CAP>(x, &p[..w]), lagrange_at_zero_lanes::<CAP>(x, &v[..w]));
            s.position_km = [pos[0], pos[1], pos[2]];
            s.velocity_km_s = [vel[0], vel[1], vel[2]];
        }
        s
    }
}

/// Windows up to this many states use small scratch arrays.
const SMALL_WINDOW: usize = 16;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ephemeris::{SegmentData, SpkKernel};
    use std::path::Path;

    #[test]
    fn cached_hermite_tables_agree_with_the_per_call_interpolation() {
        // The demo spacecraft (type 13, window 6): the table evaluated per
        // window (epochs from the window's first) against the divided
        // differences formed per call (epochs from t), 20 000 epochs:
        // 1 µm and 1 nm/s (the coefficients differ only in how the epoch
        // differences round).
        const CACHED_VS_PER_CALL_KM: f64 = 1e-9;
        const CACHED_VS_PER_CALL_KM_S: f64 = 1e-12;
        let k = SpkKernel::load(&Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo/lapse1.bsp")).unwrap();
        let SegmentData::Discrete(d) = &k.segments[0].data else { panic!("type 13 expected") };
        assert!(d.hermite && !d.hermite_tables.is_empty());
        let (lo, hi) = (d.epochs_s[0], d.epochs_s[d.epochs_s.len() - 1]);
        let mut x = 0x1234_5678_9abc_def1u64;
        let (mut wp, mut wv) = (0.0f64, 0.0f64);
        for i in 0..20_000 {
            let s = if i % 100 == 0 { d.epochs_s[(i / 100) % d.epochs_s.len()] } else { lo + (crate::xorshift64(&mut x) >> 11) as f64 / (1u64 << 53) as f64 * (hi - lo) };
            let t = TdbSeconds::new(s.floor() as i64, s - s.floor());
            let a = d.evaluate(&t);
            let b = d.evaluate_in::<SMALL_WINDOW, { 2 * SMALL_WINDOW }>(&t);
            for c in 0..3 {
                wp = wp.max((a.position_km[c] - b.position_km[c]).abs());
                wv = wv.max((a.velocity_km_s[c] - b.velocity_km_s[c]).abs());
            }
            if i % 100 == 0 {
                // At a node: the stored state.
                let j = (i / 100) % d.epochs_s.len();
                assert_eq!(a.position_km, [d.states[j][0], d.states[j][1], d.states[j][2]]);
            }
        }
        assert!(wp <= CACHED_VS_PER_CALL_KM && wv <= CACHED_VS_PER_CALL_KM_S, "{wp} km, {wv} km/s");
    }
}
