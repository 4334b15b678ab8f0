//! Interpolation, in one place: Lagrange weights on uniform grids (Earth
//! orientation and time-scale grids), 4-point Lagrange at any spacing (EOP
//! tables), cubic Hermite between two states (body grids), and Lagrange and
//! Hermite interpolation at a point through windows of states, several axes
//! at once (SPK types 9 and 13).

/// Lagrange weights for `N` uniformly spaced nodes at offsets
/// `-(N/2 - 1) ..= N/2` (in steps) from the node at or below the point, at
/// fractional position `u` ∈ [0, 1) past that node. `N` must be even (the
/// point then sits in the central interval, where the error is smallest).
///
/// # Accuracy
/// Interpolating f sampled with step h, the error is bounded by
/// `max|f^(N)| h^N · max|Π(u − m)| / N!` (u and the node offsets m in
/// steps). On the central interval `max|Π(u − m)| / N!` is 0.0234 for N = 4
/// (0.5625 / 4!) and 1.07e-3 for N = 8 (43.07 / 8!), so a sinusoid of
/// amplitude A and period P is reproduced to `A (2π h / P)^N` times that.
/// The grids that use it measure their actual errors against the direct
/// series (`CipGrid`, `TdbGrid`).
///
/// # References
/// Abramowitz & Stegun (1964), *Handbook of Mathematical Functions*, eq.
/// 25.2.2 (Lagrange's interpolation formula) and 25.2.3 (its remainder);
/// equation numbers from memory.
#[inline]
pub fn uniform_lagrange_weights<const N: usize>(u: f64) -> [f64; N] {
    let lo = -((N / 2) as i64 - 1);
    // w_j = Π_{m≠j} (u − x_m) / Π_{m≠j} (x_j − x_m): the numerator from
    // prefix and suffix products (2N multiplications), the denominator an
    // integer (±(N−1−j)!·j!), exact in f64 — one division per weight
    // instead of N − 1.
    let d: [f64; N] = std::array::from_fn(|j| u - (lo + j as i64) as f64);
    let mut left = [1.0; N];
    for j in 1..N {
        left[j] = left[j - 1] * d[j - 1];
    }
    let mut right = 1.0;
    let mut w = [0.0; N];
    for j in (0..N).rev() {
        let denom: f64 = (0..N).filter(|&m| m != j).map(|m| j as f64 - m as f64).product();
        w[j] = left[j] * right / denom;
        right *= d[j];
    }
    w
}

/// Interpolates `values` (the `N` nodes around the point, first node at
/// offset `-(N/2 - 1)`) at fractional position `u`; see
/// [`uniform_lagrange_weights`].
#[inline]
pub fn uniform_lagrange<const N: usize>(values: &[f64], u: f64) -> f64 {
    let w = uniform_lagrange_weights::<N>(u);
    let mut s = 0.0;
    for k in 0..N {
        s += w[k] * values[k];
    }
    s
}

/// 4-point Lagrange interpolation at `t` through (x_k, y_k), any spacing.
///
/// # References
/// Abramowitz & Stegun (1964), eq. 25.2.2.
pub fn lagrange4(x: &[f64; 4], y: &[f64; 4], t: f64) -> f64 {
    let mut sum = 0.0;
    for k in 0..4 {
        let mut w = 1.0;
        for j in 0..4 {
            if j != k {
                w *= (t - x[j]) / (x[k] - x[j]);
            }
        }
        sum += w * y[k];
    }
    sum
}

/// The cubic Hermite position (km) at u ∈ [0, 1) between nodes `a` and `b`
/// ([x, y, z km, vx, vy, vz km/s]) `h_s` seconds apart. With h00 = 1 − h01
/// the sum is the node value plus a small increment, so it rounds once at
/// the scale of the position (≤ 0.5 ulp, 1.6e-5 m for 1 au in km) instead of
/// accumulating four large terms.
///
/// # References
/// Abramowitz & Stegun (1964), eq. 25.2.42 (Hermite's two-point formula),
/// equation number from memory.
#[inline]
pub fn hermite_position_km(a: &[f64; 6], b: &[f64; 6], u: f64, h_s: f64) -> [f64; 3] {
    let (u2, u3) = (u * u, u * u * u);
    let (h10, h01, h11) = (u3 - 2.0 * u2 + u, -2.0 * u3 + 3.0 * u2, u3 - u2);
    std::array::from_fn(|c| a[c] + (h01 * (b[c] - a[c]) + h_s * (h10 * a[3 + c] + h11 * b[3 + c])))
}

/// Lanes of the multi-axis interpolation (three axes and one idle lane, a
/// width the compiler maps onto vector registers).
pub const LANES: usize = 4;

/// [`lagrange_at_zero`] for several ordinates sharing the abscissae, one per
/// lane: each lane is computed with exactly the scalar routine's operations.
/// `CAP` ≥ `x.len()` sizes the scratch array.
pub fn lagrange_at_zero_lanes<const CAP: usize>(x: &[f64], y: &[[f64; LANES]]) -> [f64; LANES] {
    let n = x.len();
    let mut p = [[0.0f64; LANES]; CAP];
    p[..n].copy_from_slice(y);
    for m in 1..n {
        for i in 0..n - m {
            let (a, b, d) = (x[i + m], x[i], x[i + m] - x[i]);
            let next = p[i + 1];
            for (l, q) in p[i].iter_mut().enumerate() {
                *q = (a * *q - b * next[l]) / d;
            }
        }
    }
    p[0]
}

/// [`hermite_at_zero`] for several ordinates sharing the abscissae, one per
/// lane: value and derivative at 0, each lane computed with exactly the
/// scalar routine's operations.
/// `CAP2` ≥ `2 · x.len()` sizes the scratch arrays.
pub fn hermite_at_zero_lanes<const CAP2: usize>(x: &[f64], y: &[[f64; LANES]], dy: &[[f64; LANES]]) -> ([f64; LANES], [f64; LANES]) {
    let coef = hermite_coefficients_lanes::<CAP2>(x, y, dy);
    newton_value_and_derivative(&coef[..2 * x.len()], |k| 0.0 - x[k / 2])
}

/// Value and derivative of a Newton-form polynomial with coefficients
/// `coef` (one lane per ordinate) at the point whose distances to the
/// nodes are `t_minus_node(k)` (t − z_k), by nested multiplication.
#[inline]
pub fn newton_value_and_derivative(coef: &[[f64; LANES]], t_minus_node: impl Fn(usize) -> f64) -> ([f64; LANES], [f64; LANES]) {
    let n = coef.len();
    let (mut p, mut dp) = (coef[n - 1], [0.0f64; LANES]);
    for k in (0..n - 1).rev() {
        let mz = t_minus_node(k);
        for l in 0..LANES {
            dp[l] = dp[l] * mz + p[l];
            p[l] = p[l] * mz + coef[k][l];
        }
    }
    (p, dp)
}

/// Newton coefficients (divided differences on the doubled abscissae
/// x₀, x₀, x₁, x₁, …) of the Hermite interpolant through values `y` and
/// derivatives `dy`, one lane per ordinate.
pub fn hermite_coefficients_lanes<const CAP2: usize>(x: &[f64], y: &[[f64; LANES]], dy: &[[f64; LANES]]) -> [[f64; LANES]; CAP2] {
    let n = 2 * x.len();
    let mut z = [0.0f64; CAP2];
    for k in 0..n {
        z[k] = x[k / 2];
    }
    let mut coef = [[0.0f64; LANES]; CAP2];
    coef[0] = y[0];
    let mut col = [[0.0f64; LANES]; CAP2];
    for k in 0..n - 1 {
        if k % 2 == 0 {
            col[k] = dy[k / 2];
        } else {
            let (hi, lo, d) = (y[k.div_ceil(2)], y[k / 2], z[k + 1] - z[k]);
            for l in 0..LANES {
                col[k][l] = (hi[l] - lo[l]) / d;
            }
        }
    }
    coef[1] = col[0];
    for m in 2..n {
        for k in 0..n - m {
            let d = z[k + m] - z[k];
            let next = col[k + 1];
            for (l, c) in col[k].iter_mut().enumerate() {
                *c = (next[l] - *c) / d;
            }
        }
        coef[m] = col[0];
    }
    coef
}

/// Most nodes of the one-axis reference routines (tests).
#[cfg(test)]
const REFERENCE_CAP: usize = 64;

/// Lagrange interpolation at 0 through (x_i, y_i) (Neville's scheme); the
/// one-axis reference of [`lagrange_at_zero_lanes`].
#[cfg(test)]
fn lagrange_at_zero(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len();
    let mut p = [0.0f64; REFERENCE_CAP];
    p[..n].copy_from_slice(y);
    for m in 1..n {
        for i in 0..n - m {
            p[i] = (x[i + m] * p[i] - x[i] * p[i + 1]) / (x[i + m] - x[i]);
        }
    }
    p[0]
}

/// Hermite interpolation at 0 through values y_i and derivatives dy_i at
/// x_i: value and derivative (divided differences on doubled nodes); the
/// one-axis reference of [`hermite_at_zero_lanes`].
#[cfg(test)]
fn hermite_at_zero(x: &[f64], y: &[f64], dy: &[f64]) -> (f64, f64) {
    // Stack buffers for up to REFERENCE_CAP nodes.
    let n = 2 * x.len();
    let mut z = [0.0f64; 2 * REFERENCE_CAP];
    for k in 0..n {
        z[k] = x[k / 2];
    }
    // Newton divided-difference coefficients, column by column in place
    // (ascending k reads col[k + 1] before it is overwritten).
    let mut coef = [0.0f64; 2 * REFERENCE_CAP];
    coef[0] = y[0];
    // First column: derivatives on repeated nodes.
    let mut col = [0.0f64; 2 * REFERENCE_CAP];
    for k in 0..n - 1 {
        col[k] = if k % 2 == 0 { dy[k / 2] } else { (y[k.div_ceil(2)] - y[k / 2]) / (z[k + 1] - z[k]) };
    }
    coef[1] = col[0];
    for m in 2..n {
        for k in 0..n - m {
            col[k] = (col[k + 1] - col[k]) / (z[k + m] - z[k]);
        }
        coef[m] = col[0];
    }
    // Evaluate the Newton form and its derivative at 0 (Horner).
    let (mut p, mut dp) = (coef[n - 1], 0.0);
    for k in (0..n - 1).rev() {
        dp = dp * (0.0 - z[k]) + p;
        p = p * (0.0 - z[k]) + coef[k];
    }
    (p, dp)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A polynomial of degree N − 1 is reproduced exactly (to rounding).
    #[test]
    fn reproduces_polynomials_of_degree_below_n() {
        let f = |x: f64| 0.5 - 1.25 * x + 0.75 * x * x - 0.125 * x.powi(3) + 0.01 * x.powi(5) - 0.001 * x.powi(7);
        let nodes: Vec<f64> = (-3..=4).map(|k| f(k as f64)).collect();
        for u in [0.0, 0.1, 0.5, 0.9, 0.999] {
            assert!((uniform_lagrange::<8>(&nodes, u) - f(u)).abs() < 1e-13, "{u}");
        }
        let f4 = |x: f64| 2.0 - x + 0.3 * x * x * x;
        let n4: Vec<f64> = (-1..=2).map(|k| f4(k as f64)).collect();
        assert!((uniform_lagrange::<4>(&n4, 0.37) - f4(0.37)).abs() < 1e-14);
    }

    /// Weights sum to one (partition of unity) and pick the node at u = 0.
    #[test]
    fn weights_sum_to_one_and_interpolate_nodes() {
        for u in [0.0, 0.25, 0.5, 0.75] {
            let w = uniform_lagrange_weights::<8>(u);
            assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-14);
        }
        let w = uniform_lagrange_weights::<6>(0.0);
        assert_eq!(w, [0.0, 0.0, 1.0, 0.0, 0.0, 0.0].map(|x: f64| x + 0.0 * w[0]));
    }

    const MAX_WINDOW: usize = 64;
    const SMALL_WINDOW: usize = 16;

    #[test]
    fn hermite_and_lagrange_reproduce_polynomials() {
        // Cubic f(t) = 1 − 2t + 0.5t² + 0.1t³, f' = −2 + t + 0.3t²; evaluate at t0 via shifted abscissae.
        let f = |t: f64| 1.0 - 2.0 * t + 0.5 * t * t + 0.1 * t * t * t;
        let df = |t: f64| -2.0 + t + 0.3 * t * t;
        let t0 = 0.7;
        let nodes = [0.0, 1.0, 2.5];
        let x: Vec<f64> = nodes.iter().map(|n| n - t0).collect();
        let (v, d) = hermite_at_zero(&x, &nodes.map(f), &nodes.map(df));
        assert!((v - f(t0)).abs() < 1e-13 && (d - df(t0)).abs() < 1e-13, "{v} {d}");
        let x4 = [0.0 - t0, 1.0 - t0, 2.5 - t0, 4.0 - t0];
        assert!((lagrange_at_zero(&x4, &[0.0, 1.0, 2.5, 4.0].map(f)) - f(t0)).abs() < 1e-13);
    }

    #[test]
    fn lane_interpolation_equals_the_one_axis_routines_bit_for_bit() {
        // Pseudo-random windows of 2..=16 nodes: each lane must be exactly
        // the scalar routine's result (same operations, same order).
        let mut seed = 0x2545_f491_4f6c_dd1du64;
        let mut rnd = || (crate::xorshift64(&mut seed) >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
        for w in 2..=16 {
            let x: Vec<f64> = (0..w).map(|k| (k as f64 - w as f64 / 2.0) * 60.0 + rnd()).collect();
            let y: Vec<[f64; LANES]> = (0..w).map(|_| [rnd() * 1e8, rnd() * 1e5, rnd(), 0.0]).collect();
            let dy: Vec<[f64; LANES]> = (0..w).map(|_| [rnd() * 30.0, rnd(), rnd() * 1e-3, 0.0]).collect();
            let (hv, hd) = hermite_at_zero_lanes::<{ 2 * MAX_WINDOW }>(&x, &y, &dy);
            let lv = lagrange_at_zero_lanes::<MAX_WINDOW>(&x, &y);
            // The small-window scratch sizes give the same bits.
            let (hs, hds) = hermite_at_zero_lanes::<{ 2 * SMALL_WINDOW }>(&x, &y, &dy);
            assert_eq!((hs.map(f64::to_bits), hds.map(f64::to_bits)), (hv.map(f64::to_bits), hd.map(f64::to_bits)));
            assert_eq!(lagrange_at_zero_lanes::<SMALL_WINDOW>(&x, &y).map(f64::to_bits), lv.map(f64::to_bits));
            for l in 0..3 {
                let (yl, dyl): (Vec<f64>, Vec<f64>) = (y.iter().map(|r| r[l]).collect(), dy.iter().map(|r| r[l]).collect());
                let (v, d) = hermite_at_zero(&x, &yl, &dyl);
                assert_eq!((hv[l].to_bits(), hd[l].to_bits()), (v.to_bits(), d.to_bits()), "hermite w={w} lane {l}");
                assert_eq!(lv[l].to_bits(), lagrange_at_zero(&x, &yl).to_bits(), "lagrange w={w} lane {l}");
            }
        }
    }
}
