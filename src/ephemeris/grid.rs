//! Barycentric states of bodies on a uniform TDB grid: cubic Hermite
//! interpolation between SPK states (position and velocity) at fixed nodes,
//! for batches that need many states of the same bodies: the Shapiro bodies'
//! positions (step [`BODY_GRID_STEP_S`]) and, for tracking batches, the
//! Earth's state (step [`EARTH_GRID_STEP_S`]).
//!
//! Nodes sit at whole multiples of the step in seconds past J2000 TDB, so a
//! value does not depend on the span a batch asked for (results are the same
//! whatever the partitioning).
//!
//! # Accuracy
//! Cubic Hermite on a step h errs by at most h⁴/384 · max|x⁗| (the
//! remainder of two-point Hermite interpolation), about h⁴ ω⁴ r / 384 for an
//! orbit of radius r and angular rate ω. Measured against DE421 with
//! h = 0.5 d over 1990–2030 (unit test `grid_positions_match_the_kernel`):
//! Sun 2.4e-4 m, Mercury 1.3 km, Venus 11 m, Moon 310 m, Mars 0.54 m,
//! Jupiter to Neptune ≤ 2 mm. A position error δx changes a Shapiro delay by
//! at most 2(1 + γ)·GM/c³ · δx / b for a ray passing at b from the body,
//! b ≥ the body's radius: Mercury ≤ 1.7e-15 s, the Moon and Venus ≤ 1.3e-16 s,
//! every other body ≤ 1e-17 s — far inside the 1 ps the fast path may differ
//! from the direct one (issue #7; `tests/pulsar.rs`, `tests/tracking.rs`).
//! The Earth at h = 30 min: measured ≤ 6.4e-5 m in position and ≤ 1e-7 m/s
//! in velocity (unit test `earth_grid_matches_the_kernel`). That is the f64
//! resolution of a barycentric position in km near 1 au (one ulp is 3e-5 m;
//! the kernel's own sum of two segments rounds as much) rather than the
//! interpolation (≈ 6e-6 m by the bound above with the Moon's 4.7e6 m, 27.3 d
//! wobble: a 15-min grid measured no better); velocities are limited by the
//! rounding of the node difference over h. 6.4e-5 m is 2e-13 s of light time.
//!
//! # References
//! Burden & Faires, *Numerical Analysis*, sec. 3.4 (Hermite interpolation
//! and its error term; section number from memory). NAIF SPK Required
//! Reading for the states at the nodes.

use super::{Ephemeris, StateKm, TdbSeconds};

/// Grid step of the Shapiro bodies, TDB seconds (half a day).
pub const BODY_GRID_STEP_S: i64 = 43_200;
/// Grid step of the Earth, TDB seconds (30 minutes).
pub const EARTH_GRID_STEP_S: i64 = 1_800;

/// Nodes per lazily computed block (and one more: the next block's first).
const BLOCK_NODES: usize = 64;

/// One block's nodes: [x, y, z, vx, vy, vz] (km, km/s) per node, or `None`
/// when a node lies outside the kernels (the epochs are then evaluated
/// directly).
type Block = Option<Box<[[f64; 6]; BLOCK_NODES + 1]>>;

/// One body's positions (km) and velocities (km/s) at the grid nodes,
/// computed block by block on first use: a batch spanning decades with
/// sparse rows computes only the blocks its rows touch, and a value never
/// depends on which row or thread asked first.
#[derive(Clone, Debug)]
pub struct BodyGrid {
    /// NAIF id of the body.
    pub id: i32,
    /// Node spacing, TDB seconds.
    step_s: i64,
    /// Index of the first block (block b holds nodes b·64 ..= b·64 + 64;
    /// node k at k · step seconds past J2000 TDB).
    first_block: i64,
    blocks: Vec<std::sync::OnceLock<Block>>,
}

impl BodyGrid {
    /// The grid of body `id` with step `step_s` (s) answering at TDB seconds
    /// `first_s ..= last_s` past J2000. Nothing is evaluated yet.
    pub fn new(id: i32, step_s: i64, first_s: i64, last_s: i64) -> Self {
        let block_s = step_s * BLOCK_NODES as i64;
        let first_block = first_s.div_euclid(block_s);
        let last_block = last_s.div_euclid(block_s).max(first_block);
        let blocks = (first_block..=last_block).map(|_| std::sync::OnceLock::new()).collect();
        Self { id, step_s, first_block, blocks }
    }

    /// True when the grid answers at TDB seconds `first_s ..= last_s`.
    pub fn covers(&self, first_s: i64, last_s: i64) -> bool {
        let block_s = self.step_s * BLOCK_NODES as i64;
        first_s.div_euclid(block_s) >= self.first_block && last_s.div_euclid(block_s) < self.first_block + self.blocks.len() as i64
    }

    /// The nodes of block `b` (its 64 nodes and the next block's first).
    fn block(&self, eph: &Ephemeris, b: i64) -> Option<&[[f64; 6]; BLOCK_NODES + 1]> {
        let cell = self.blocks.get(usize::try_from(b - self.first_block).ok()?)?;
        cell.get_or_init(|| {
            let mut nodes = Box::new([[0.0; 6]; BLOCK_NODES + 1]);
            for (j, node) in nodes.iter_mut().enumerate() {
                let k = b * BLOCK_NODES as i64 + j as i64;
                let s = eph.state_ssb(self.id, &TdbSeconds::new(k * self.step_s, 0.0)).ok()?;
                let (p, v) = (s.position_km, s.velocity_km_s);
                *node = [p[0], p[1], p[2], v[0], v[1], v[2]];
            }
            Some(nodes)
        })
        .as_deref()
    }

    /// The two nodes around `t` and the position u ∈ [0, 1) between them.
    #[inline]
    fn interval(&self, eph: &Ephemeris, t: &TdbSeconds) -> Option<(&[f64; 6], &[f64; 6], f64)> {
        let k = t.whole_s.div_euclid(self.step_s);
        let nodes = self.block(eph, k.div_euclid(BLOCK_NODES as i64))?;
        let j = k.rem_euclid(BLOCK_NODES as i64) as usize;
        Some((&nodes[j], &nodes[j + 1], (t.whole_s.rem_euclid(self.step_s) as f64 + t.frac_s) / self.step_s as f64))
    }

    /// Interpolated barycentric position (km) at `t` (nodes from `eph`, the
    /// ephemeris the grid belongs to), or `None` outside the grid.
    #[inline]
    pub fn position_km(&self, eph: &Ephemeris, t: &TdbSeconds) -> Option<[f64; 3]> {
        let (a, b, u) = self.interval(eph, t)?;
        Some(crate::interp::hermite_position_km(a, b, u, self.step_s as f64))
    }

    /// Interpolated barycentric state (km, km/s) at `t`: the Hermite cubic
    /// and its time derivative, or `None` outside the grid.
    #[inline]
    pub fn state_km(&self, eph: &Ephemeris, t: &TdbSeconds) -> Option<StateKm> {
        let (a, b, u) = self.interval(eph, t)?;
        let h_s = self.step_s as f64;
        let u2 = u * u;
        // d/du of the basis (d00 = −d01); d/dt = (d/du) / h.
        let (d10, d01, d11) = (3.0 * u2 - 4.0 * u + 1.0, -6.0 * u2 + 6.0 * u, 3.0 * u2 - 2.0 * u);
        Some(StateKm { position_km: crate::interp::hermite_position_km(a, b, u, h_s), velocity_km_s: std::array::from_fn(|c| d01 * (b[c] - a[c]) / h_s + d10 * a[3 + c] + d11 * b[3 + c]) })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Bounds (m) of the grid against the kernel per body: the measured
    /// maxima (module docs) with margin; the Accuracy section derives their
    /// effect on the Shapiro delays.
    const BOUNDS_M: &[(i32, f64)] = &[(10, 1e-3), (1, 2000.0), (2, 20.0), (301, 500.0), (4, 1.0), (5, 0.01), (6, 0.01), (7, 0.01), (8, 0.01)];

    /// A uniformly drawn TDB epoch (s past J2000) in [lo, hi).
    fn random_epoch(state: &mut u64, lo: i64, hi: i64) -> TdbSeconds {
        let s = lo as f64 + (crate::xorshift64(state) >> 11) as f64 / (1u64 << 53) as f64 * (hi - lo) as f64;
        TdbSeconds::new(s.floor() as i64, s - s.floor())
    }

    /// |p − q| of two km (or km/s) vectors, in m (or m/s).
    fn distance_m(p: [f64; 3], q: [f64; 3]) -> f64 {
        (0..3).map(|c| (p[c] - q[c]) * 1e3).map(|d| d * d).sum::<f64>().sqrt()
    }

    #[test]
    fn grid_positions_match_the_kernel() {
        let eph = Ephemeris::load(&[std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("data/de421.bsp")]).unwrap();
        // 1990–2030, 4000 epochs per body.
        let (lo, hi) = (-315_576_000i64, 946_728_000i64);
        let mut x = 0x9e37_79b9_7f4a_7c15u64;
        for &(id, bound_m) in BOUNDS_M {
            let g = BodyGrid::new(id, BODY_GRID_STEP_S, lo, hi);
            assert!(g.covers(lo, hi));
            let mut worst_m = 0.0f64;
            for _ in 0..4000 {
                let t = random_epoch(&mut x, lo, hi);
                worst_m = worst_m.max(distance_m(g.position_km(&eph, &t).unwrap(), eph.position_ssb_km(id, &t).unwrap()));
            }
            eprintln!("body {id}: grid vs kernel {worst_m:.3e} m");
            assert!(worst_m <= bound_m, "body {id}: {worst_m} m > {bound_m} m");
        }
    }

    #[test]
    fn earth_grid_matches_the_kernel() {
        // Bounds: position 1e-4 m (3.3e-13 s of light time), velocity
        // 2e-7 m/s (7e-18 s in the observer term v_E·x/c²); measured maxima
        // in the module docs.
        const EARTH_POSITION_TOL_M: f64 = 1e-4;
        const EARTH_VELOCITY_TOL_M_S: f64 = 2e-7;
        let eph = Ephemeris::load(&[std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("data/de421.bsp")]).unwrap();
        // Two years (2024–2025), 20 000 epochs.
        let (lo, hi) = (757_339_200i64, 820_411_200i64);
        let g = BodyGrid::new(399, EARTH_GRID_STEP_S, lo, hi);
        let (mut wp, mut wv) = (0.0f64, 0.0f64);
        let mut x = 0x2545_f491_4f6c_dd1du64;
        for _ in 0..20_000 {
            let t = random_epoch(&mut x, lo, hi);
            let (a, b) = (g.state_km(&eph, &t).unwrap(), eph.state_ssb(399, &t).unwrap());
            assert_eq!(Some(a.position_km), g.position_km(&eph, &t));
            wp = wp.max(distance_m(a.position_km, b.position_km));
            wv = wv.max(distance_m(a.velocity_km_s, b.velocity_km_s));
        }
        eprintln!("Earth grid vs kernel: {wp:.3e} m, {wv:.3e} m/s");
        assert!(wp <= EARTH_POSITION_TOL_M && wv <= EARTH_VELOCITY_TOL_M_S, "{wp} m, {wv} m/s");
    }

    #[test]
    fn nodes_are_exact_and_values_do_not_depend_on_the_span() {
        let eph = Ephemeris::load(&[std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("data/de421.bsp")]).unwrap();
        let narrow = BodyGrid::new(5, BODY_GRID_STEP_S, 700_000_000, 700_100_000);
        let wide = BodyGrid::new(5, BODY_GRID_STEP_S, 699_000_000, 701_000_000);
        let t = TdbSeconds::new(700_050_123, 0.625);
        assert_eq!(narrow.position_km(&eph, &t), wide.position_km(&eph, &t));
        let node = TdbSeconds::new(700_056_000 / BODY_GRID_STEP_S * BODY_GRID_STEP_S, 0.0);
        assert_eq!(narrow.position_km(&eph, &node), Some(eph.state_ssb(5, &node).unwrap().position_km));
        assert!(narrow.position_km(&eph, &TdbSeconds::new(800_000_000, 0.0)).is_none());
        // Outside the kernel's coverage: no block, no value (direct evaluation then errs).
        let far = BodyGrid::new(5, BODY_GRID_STEP_S, 9_000_000_000, 9_000_100_000);
        assert!(far.position_km(&eph, &TdbSeconds::new(9_000_050_000, 0.0)).is_none());
        assert!(!narrow.covers(600_000_000, 700_000_000));
    }
}
