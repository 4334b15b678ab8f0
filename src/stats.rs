//! Weighted statistics of residuals and deterministic Gaussian deviates:
//! kind-neutral numerics shared by every pipeline kind.

/// Weighted mean of (residual, σ) pairs (weights 1/σ²; 0 without weight),
/// and the sum of the weights.
fn weighted_mean_and_weight(pairs: impl Iterator<Item = (f64, f64)>) -> (f64, f64) {
    let (mut sw, mut swr) = (0.0, 0.0);
    for (r, s) in pairs {
        let w = 1.0 / (s * s);
        sw += w;
        swr += w * r;
    }
    (if sw > 0.0 { swr / sw } else { 0.0 }, sw)
}

/// Weighted mean of residuals given as (residual, σ) pairs in one unit: the
/// mean [`residual_summary`] reports (scaled weights when the plain sums
/// overflow).
pub fn weighted_mean(pairs: impl Iterator<Item = (f64, f64)> + Clone) -> f64 {
    let (mean, sw) = weighted_mean_and_weight(pairs.clone());
    if sw.is_finite() && mean.is_finite() {
        return mean;
    }
    let (r, s): (Vec<f64>, Vec<f64>) = pairs.unzip();
    if r.is_empty() { 0.0 } else { scaled_summary(&r, &s, false).weighted_mean }
}

/// Weighted statistics of residuals (in the residuals' own unit).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ResidualSummary {
    pub count: usize,
    pub weighted_mean: f64,
    pub weighted_rms: f64,
    pub chi2: f64,
}

/// Weighted mean, weighted RMS and χ² of residuals with σ (same unit); the
/// RMS and χ² are taken about the weighted mean when `about_mean`.
///
/// # References
/// Bevington & Robinson 2003, Data Reduction and Error Analysis, 3rd ed.,
/// eq. 4.17 (weighted mean) and eq. 11.1 (χ²).
pub fn residual_summary(residual: &[f64], sigma: &[f64], about_mean: bool) -> ResidualSummary {
    let (mean, sw) = weighted_mean_and_weight(residual.iter().copied().zip(sigma.iter().copied()));
    let overflowed = !(sw.is_finite() && mean.is_finite());
    if overflowed && !residual.is_empty() {
        return scaled_summary(residual, sigma, about_mean);
    }
    let c = if about_mean { mean } else { 0.0 };
    let (mut swr2, mut chi2) = (0.0, 0.0);
    for (r, s) in residual.iter().zip(sigma) {
        let w = 1.0 / (s * s);
        swr2 += w * (r - c) * (r - c);
        chi2 += (r - c) * (r - c) * w;
    }
    ResidualSummary { count: residual.len(), weighted_mean: mean, weighted_rms: if sw > 0.0 { (swr2 / sw).sqrt() } else { 0.0 }, chi2 }
}

/// [`residual_summary`] with weights scaled by the smallest σ (so no 1/σ²
/// overflows): the fallback for σ so small or so many rows that the plain
/// sums overflow. Same values to rounding.
fn scaled_summary(residual: &[f64], sigma: &[f64], about_mean: bool) -> ResidualSummary {
    let s_min = sigma.iter().copied().filter(|s| *s > 0.0).fold(f64::INFINITY, f64::min);
    let (mut sw, mut swr) = (0.0, 0.0);
    for (r, s) in residual.iter().zip(sigma) {
        let w = (s_min / s) * (s_min / s);
        sw += w;
        swr += w * r;
    }
    let mean = if sw > 0.0 { swr / sw } else { 0.0 };
    let c = if about_mean { mean } else { 0.0 };
    let (mut swr2, mut chi2) = (0.0, 0.0);
    for (r, s) in residual.iter().zip(sigma) {
        let w = (s_min / s) * (s_min / s);
        swr2 += w * (r - c) * (r - c);
        chi2 += ((r - c) / s) * ((r - c) / s);
    }
    ResidualSummary { count: residual.len(), weighted_mean: mean, weighted_rms: if sw > 0.0 { (swr2 / sw).sqrt() } else { 0.0 }, chi2 }
}

/// Standard normal deviate for row `i` of a run seeded with `seed`
/// (SplitMix64 + Box–Muller: deterministic, independent of threading).
///
/// # References
/// Steele, Lea & Flood 2014, "Fast splittable pseudorandom number
/// generators", OOPSLA (SplitMix64); Box & Muller 1958, Ann. Math. Stat. 29,
/// 610.
pub fn gaussian(seed: u64, i: u64) -> f64 {
    let mut z = seed ^ i.wrapping_mul(0x9E37_79B9_7F4A_7C15);
    let mut next = || {
        z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut x = z;
        x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        x ^ (x >> 31)
    };
    let u1 = ((next() >> 11) as f64 + 0.5) / (1u64 << 53) as f64;
    let u2 = (next() >> 11) as f64 / (1u64 << 53) as f64;
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn summary_statistics() {
        let s = residual_summary(&[1.0, -1.0, 3.0], &[1.0, 1.0, 1.0], true);
        assert!((s.weighted_mean - 1.0).abs() < 1e-15);
        assert!((s.chi2 - 8.0).abs() < 1e-12);
        assert!((s.weighted_rms - (8.0f64 / 3.0).sqrt()).abs() < 1e-15);
        assert_eq!(weighted_mean([(1.0, 1.0), (4.0, 2.0)].into_iter()), (1.0 + 4.0 / 4.0) / 1.25);
    }

    #[test]
    fn tiny_sigma_does_not_overflow_the_statistics() {
        // 1/σ² overflows for σ = 1e-170: the scaled weights give the same mean.
        let r = [1.0, 3.0];
        let m = weighted_mean(r.iter().copied().zip([1e-170, 1e-170]));
        assert_eq!(m, 2.0);
        let s = residual_summary(&r, &[1e-170, 2e-170], true);
        assert!(s.weighted_mean.is_finite() && s.weighted_rms.is_finite(), "{s:?}");
        assert!((s.weighted_mean - (1.0 + 3.0 / 4.0) / 1.25).abs() < 1e-15);
    }

    #[test]
    fn gaussian_deviates_have_unit_variance() {
        let n = 200_000;
        let (mut s, mut s2) = (0.0, 0.0);
        for i in 0..n {
            let g = gaussian(7, i);
            s += g;
            s2 += g * g;
        }
        let (m, v) = (s / n as f64, s2 / n as f64);
        // 5 σ bounds of the sample mean and variance (common practice).
        assert!(m.abs() < 5.0 / (n as f64).sqrt(), "{m}");
        assert!((v - 1.0).abs() < 5.0 * (2.0 / n as f64).sqrt(), "{v}");
    }
}
