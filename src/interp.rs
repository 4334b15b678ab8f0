//! Interpolation on uniform grids (one routine, shared by the Earth
//! orientation and time-scale grids).

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
}
