//! Exact fixed-point arithmetic on femtosecond counts.
//!
//! lapse carries every epoch as an integer count of femtoseconds (1 fs =
//! 1e-15 s) in an `i128`. Addition and subtraction are exact and
//! associative, so results do not depend on evaluation order, thread count
//! or chunking (a requirement for bit-reproducible output). The range of an
//! `i128` in femtoseconds is ±5.4e15 years.
//!
//! Input and output through `f64` (MJD fractions of a day, seconds) is
//! converted *exactly*: an `f64` is a dyadic rational m·2^e, so its product
//! with an integer day length can be formed in `i128` and rounded once. The
//! reverse conversion returns the `f64` nearest to the exact quotient, so an
//! f64 fraction of a day ≥ 2⁻¹⁴ (its ulp is then coarser than a femtosecond
//! of the day) survives a round trip through femtoseconds bit for bit;
//! smaller fractions come back within half a femtosecond.
//!
//! # Accuracy
//! Conversions from `f64` round to the nearest femtosecond (ties to even);
//! conversions to `f64` are correctly rounded (nearest `f64`).

/// Femtoseconds per SI second.
pub const FS_PER_S: i128 = 1_000_000_000_000_000;
/// Femtoseconds per day of 86 400 s.
pub const FS_PER_DAY: i128 = 86_400 * FS_PER_S;

/// Splits a finite `f64` into (mantissa, exponent) with `x = m · 2^e`,
/// `m` carrying the sign. Zero gives (0, 0).
fn decompose(x: f64) -> (i64, i32) {
    let bits = x.to_bits();
    let sign: i64 = if bits >> 63 == 0 { 1 } else { -1 };
    let exp_bits = ((bits >> 52) & 0x7ff) as i32;
    let frac_bits = (bits & 0x000f_ffff_ffff_ffff) as i64;
    if exp_bits == 0 {
        // Subnormal (or zero).
        (sign * frac_bits, -1074)
    } else {
        (sign * (frac_bits | (1 << 52)), exp_bits - 1075)
    }
}

/// Divides `n` by 2^k (k ≥ 0) rounding to nearest, ties to even.
fn shift_round(n: i128, k: u32) -> i128 {
    if k == 0 {
        return n;
    }
    if k >= 127 {
        return 0;
    }
    let neg = n < 0;
    let a = n.unsigned_abs();
    let q = a >> k;
    let rem = a & ((1u128 << k) - 1);
    let half = 1u128 << (k - 1);
    let q = if rem > half || (rem == half && (q & 1) == 1) { q + 1 } else { q };
    let q = q as i128;
    if neg { -q } else { q }
}

/// Exact product `x · scale_fs`, rounded to the nearest femtosecond.
///
/// `x` is a finite `f64` (for example a fraction of a day) and `scale_fs` an
/// integer number of femtoseconds (for example the day's length). Returns
/// `None` when `x` is not finite or the result overflows `i128`.
pub fn mul_f64_fs(x: f64, scale_fs: i128) -> Option<i128> {
    if !x.is_finite() {
        return None;
    }
    let (m, e) = decompose(x);
    if m == 0 {
        return Some(0);
    }
    let prod = (m as i128).checked_mul(scale_fs)?;
    if e >= 0 {
        if e >= 64 {
            return None;
        }
        prod.checked_mul(1i128 << e)
    } else {
        Some(shift_round(prod, (-e) as u32))
    }
}

/// Seconds as `f64` → femtoseconds, rounded to the nearest femtosecond.
///
/// Returns `None` for a non-finite input or an overflow.
pub fn seconds_to_fs(seconds_s: f64) -> Option<i128> {
    mul_f64_fs(seconds_s, FS_PER_S)
}

/// The `f64` nearest to the exact quotient `num_fs / den_fs` (`den_fs > 0`).
///
/// Used to turn femtoseconds of a day back into a fraction of that day, and
/// femtoseconds into seconds, with a single correct rounding (an exact tie,
/// which these callers never meet, goes toward −∞). The f64 quotient is
/// within a few ulp of the exact value; its integer significand is corrected
/// by comparing `m · den` with `num · 2^k` exactly in 128-bit integers — one
/// multiplication per step, no division.
///
/// # Accuracy
/// Correctly rounded; identical to comparing the guess and its two
/// neighbours exactly (the previous method, kept as the reference of the
/// unit test `ratio_matches_three_candidate_reference` over 10⁶ cases).
pub fn ratio_to_f64(num_fs: i128, den_fs: i128) -> f64 {
    debug_assert!(den_fs > 0);
    // Both operands exact in f64: IEEE division is already correctly rounded.
    const EXACT: i128 = 1 << 53;
    if num_fs.abs() <= EXACT && den_fs <= EXACT {
        return i128_as_f64(num_fs) / i128_as_f64(den_fs);
    }
    ratio_corrected(num_fs, den_fs).unwrap_or_else(|| ratio_three_candidates(num_fs, den_fs))
}

/// u128 → f64 for first guesses: exact rounding below 2^64 (hardware
/// conversion), within one ulp above (two conversions and an add; the
/// callers' exact corrections absorb it).
#[inline]
fn u128_to_f64(x: u128) -> f64 {
    let hi = (x >> 64) as u64;
    if hi == 0 { x as u64 as f64 } else { hi as f64 * 18_446_744_073_709_551_616.0 + x as u64 as f64 }
}

/// The corrected-significand method of [`ratio_to_f64`]; `None` in the rare
/// cases it does not handle (binade edges, huge or tiny quotients, overflow).
#[inline]
fn ratio_corrected(num_fs: i128, den_fs: i128) -> Option<f64> {
    let neg = num_fs < 0;
    let n = num_fs.unsigned_abs();
    let d = den_fs as u128;
    if n == 0 {
        return Some(0.0);
    }
    let guess = u128_to_f64(n) / u128_to_f64(d);
    let bits = guess.to_bits();
    let exp_bits = ((bits >> 52) & 0x7ff) as i32;
    if exp_bits == 0 || exp_bits == 0x7ff {
        return None;
    }
    let e = exp_bits - 1075; // guess = m · 2^e, m ∈ [2^52, 2^53)
    if e >= 0 || -e >= 1000 {
        return None;
    }
    let k = (-e) as u32;
    if n.leading_zeros() <= k {
        return None;
    }
    let rhs = n << k; // num · 2^k: candidates m compare as m · d against it
    let mut m = ((bits & 0x000f_ffff_ffff_ffff) | (1 << 52)) as u128;
    for _ in 0..4 {
        let lhs = m.checked_mul(d)?;
        // 2·(m·d − rhs) against d: within half a step of m?
        let (above, diff) = if lhs >= rhs { (true, lhs - rhs) } else { (false, rhs - lhs) };
        let twice = diff.checked_mul(2)?;
        let settle = if twice < d {
            true
        } else if twice == d {
            // Exact tie between m and its neighbour: toward −∞, i.e. the
            // smaller magnitude for a positive quotient, the larger for a
            // negative one.
            match (neg, above) {
                (false, true) => {
                    m -= 1;
                }
                (true, false) => {
                    m += 1;
                }
                _ => {}
            }
            true
        } else {
            if above {
                m -= 1;
            } else {
                m += 1;
            }
            false
        };
        if !((1u128 << 52)..(1u128 << 53)).contains(&m) {
            return None;
        }
        if settle {
            let v = m as f64 * f64::from_bits(((1023 + e) as u64) << 52);
            return Some(if neg { -v } else { v });
        }
    }
    None
}

/// The guess and its two neighbours compared exactly (the fallback of
/// [`ratio_to_f64`] and the reference of its tests).
fn ratio_three_candidates(num_fs: i128, den_fs: i128) -> f64 {
    best_of_three(num_fs, den_fs, num_fs as f64 / den_fs as f64)
}

/// Of `guess` and its two neighbours, the one nearest to `num_fs / den_fs`
/// (compared exactly; ties toward −∞). Correct when the quotient lies within
/// one ulp of `guess`, which holds whenever `den_fs` is exact in f64 (every
/// day length and unit lapse divides by).
fn best_of_three(num_fs: i128, den_fs: i128, guess: f64) -> f64 {
    let cands = [guess.next_down(), guess, guess.next_up()];
    let parts = cands.map(decompose);
    let e_min = parts.iter().map(|p| p.1).min().unwrap_or(0);
    if e_min > 0 {
        // Quotients ≥ 2^53 never occur here; the guess is then already exact
        // to within one ulp.
        return guess;
    }
    let Some(rhs) = 1i128.checked_shl((-e_min) as u32).and_then(|s| num_fs.checked_mul(s)) else {
        return guess;
    };
    let mut best = guess;
    let mut best_err = u128::MAX;
    for (cand, (m, e)) in cands.iter().zip(parts) {
        // cand·den − num, in units of 2^e_min: m·2^(e−e_min)·den − num·2^(−e_min).
        let lhs = (m as i128).checked_mul(1i128 << (e - e_min)).and_then(|v| v.checked_mul(den_fs));
        let Some(lhs) = lhs else { continue };
        let err = (lhs - rhs).unsigned_abs();
        if err < best_err {
            best_err = err;
            best = *cand;
        }
    }
    best
}

/// Femtoseconds → seconds, correctly rounded.
pub fn fs_to_seconds(fs: i128) -> f64 {
    ratio_to_f64(fs, FS_PER_S)
}

/// Floor division and non-negative remainder (`b > 0`), exact.
///
/// The quotient is estimated in f64 and corrected with exact integer
/// arithmetic until the remainder lies in [0, b) — the same result as
/// `i128::div_euclid`, without the software 128-bit division (the epochs of
/// this crate divide femtoseconds by a day, 8.64e19 fs, which does not fit
/// in 64 bits). Quotients beyond 2^50 fall back to `div_euclid`.
#[inline]
pub fn div_floor(a: i128, b: i128) -> (i128, i128) {
    debug_assert!(b > 0);
    let q_est = i128_to_f64(a) / i128_to_f64(b);
    if q_est.abs() < (1u64 << 50) as f64 {
        // Truncated, the estimate is within 2 of the floor here; the loops
        // settle it exactly (hardware conversion through i64).
        let mut q = q_est as i64 as i128;
        let mut r = a - q * b;
        while r < 0 {
            q -= 1;
            r += b;
        }
        while r >= b {
            q += 1;
            r -= b;
        }
        return (q, r);
    }
    let q = a.div_euclid(b);
    (q, a - q * b)
}

/// i128 → f64, rounded to nearest exactly as `x as f64`, by one hardware
/// conversion when `x` fits in an i64 (the i128 cast is a library call).
#[inline]
pub fn i128_as_f64(x: i128) -> f64 {
    match i64::try_from(x) {
        Ok(v) => v as f64,
        Err(_) => x as f64,
    }
}

/// i128 → f64 within one ulp ([`u128_to_f64`] of the magnitude), for estimates.
#[inline]
fn i128_to_f64(x: i128) -> f64 {
    let m = u128_to_f64(x.unsigned_abs());
    if x < 0 { -m } else { m }
}

/// Parses a decimal fraction given as its digits after the point (at most
/// 30 digits are used; further digits are rounded) into femtoseconds of a
/// unit of `unit_fs` femtoseconds, rounded to nearest.
///
/// Returns `None` when `digits` contains anything but ASCII digits.
pub fn decimal_fraction_to_fs(digits: &str, unit_fs: i128) -> Option<i128> {
    if !digits.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    // Keep at most 18 significant digits: unit_fs ≤ 8.64e19 so the product
    // numerator · unit_fs stays below 8.64e37 < i128::MAX.
    let keep = digits.len().min(18);
    let (head, tail) = digits.split_at(keep);
    let mut num: i128 = if head.is_empty() { 0 } else { head.parse().ok()? };
    let mut den: i128 = 10i128.pow(keep as u32);
    // Round on the first dropped digit (ties away from zero: the dropped
    // digits are beyond 1e-18 of the unit, far below one femtosecond).
    if let Some(first) = tail.bytes().next()
        && first >= b'5'
    {
        num += 1;
    }
    if den == 0 {
        den = 1;
    }
    let prod = num * unit_fs;
    let q = prod / den;
    let r = prod % den;
    Some(if 2 * r >= den { q + 1 } else { q })
}

/// Writes `num/den` (0 ≤ num < den) as a decimal fraction with `places`
/// digits after the point, rounded half up, returning the digits and a carry
/// (true when rounding reached 1.0).
pub fn fraction_digits(num: i128, den: i128, places: usize) -> (String, bool) {
    let scale = 10i128.pow(places as u32);
    // num < den ≤ ~8.7e19 and scale ≤ 1e18 keep the product below i128::MAX.
    let prod = num * scale;
    let mut q = prod / den;
    if 2 * (prod % den) >= den {
        q += 1;
    }
    if q >= scale {
        return ("0".repeat(places), true);
    }
    (format!("{:0width$}", q, width = places), false)
}

#[cfg(test)]
mod tests {
    #[test]
    fn i128_as_f64_equals_the_cast() {
        use super::*;
        for x in [0i128, 1, -1, 1 << 53, (1 << 53) + 1, -(1 << 60) - 3, i64::MAX as i128, i64::MIN as i128, i64::MAX as i128 + 1, 1 << 100, -(1 << 90) - 12345] {
            assert_eq!(i128_as_f64(x).to_bits(), (x as f64).to_bits(), "{x}");
        }
    }

    #[test]
    fn div_floor_equals_div_euclid() {
        // Exact floor division on epochs of the crate's range and beyond,
        // including exact multiples and their neighbours.
        use super::*;
        let mut seed = 0x9e37_79b9_7f4a_7c15u64;
        let mut next = || crate::xorshift64(&mut seed);
        for b in [FS_PER_S, FS_PER_DAY, FS_PER_DAY / 2, 86_401 * FS_PER_S, 7, 1] {
            for _ in 0..20_000 {
                let a = ((next() as i128) << 32 | (next() >> 32) as i128) % (1i128 << 90) - (1i128 << 89);
                let q = a.div_euclid(b);
                for a in [a, q * b, q * b - 1, q * b + 1] {
                    assert_eq!(div_floor(a, b), (a.div_euclid(b), a.rem_euclid(b)), "{a} / {b}");
                }
            }
        }
        for a in [i128::MAX / 2, i128::MIN / 2, 0, -1, 1] {
            assert_eq!(div_floor(a, 3), (a.div_euclid(3), a.rem_euclid(3)));
        }
    }

    /// The corrected-significand method is correctly rounded (no neighbour
    /// is nearer, compared exactly) and, for denominators exact in f64 (all
    /// that lapse uses), equals the previous three-candidate method bit for
    /// bit, so outputs do not change.
    #[test]
    fn ratio_matches_three_candidate_reference() {
        let mut x: u64 = 0x9E37_79B9_7F4A_7C15;
        let mut next = || crate::xorshift64(&mut x);
        let dens: [i128; 7] = [FS_PER_S, FS_PER_DAY, 86_401 * FS_PER_S, 86_399 * FS_PER_S, FS_PER_DAY / 2, FS_PER_DAY / 8, 3];
        for i in 0..1_000_000u64 {
            let den = if i % 8 == 7 { (next() as i128 >> (next() % 40)) | 1 } else { dens[(i % 7) as usize] };
            let mag = next() % 100;
            let raw = ((next() as i128) << 64 | next() as i128) >> (30 + mag as u32);
            let num = if i % 3 == 0 { raw % den } else { raw };
            let a = ratio_to_f64(num, den);
            assert_eq!(best_of_three(num, den, a).to_bits(), a.to_bits(), "{num} / {den}: {a:e} is not the nearest double");
            if (den as f64) as i128 == den {
                let b = if num.abs() <= 1 << 53 && den <= 1 << 53 { num as f64 / den as f64 } else { ratio_three_candidates(num, den) };
                assert_eq!(a.to_bits(), b.to_bits(), "{num} / {den}: {a:e} vs {b:e}");
            }
        }
    }

    use super::*;

    #[test]
    fn mul_is_exact_for_dyadic_fractions() {
        assert_eq!(mul_f64_fs(0.5, FS_PER_DAY), Some(FS_PER_DAY / 2));
        assert_eq!(mul_f64_fs(0.25, FS_PER_DAY), Some(FS_PER_DAY / 4));
        assert_eq!(mul_f64_fs(-0.5, FS_PER_S), Some(-FS_PER_S / 2));
        assert_eq!(mul_f64_fs(0.0, FS_PER_DAY), Some(0));
        assert_eq!(mul_f64_fs(f64::NAN, FS_PER_DAY), None);
        assert_eq!(mul_f64_fs(f64::INFINITY, FS_PER_DAY), None);
    }

    #[test]
    fn shift_round_ties_to_even() {
        assert_eq!(shift_round(5, 1), 2); // 2.5 → 2
        assert_eq!(shift_round(7, 1), 4); // 3.5 → 4
        assert_eq!(shift_round(-5, 1), -2);
        assert_eq!(shift_round(6, 2), 2); // 1.5 → 2
    }

    #[test]
    fn fraction_round_trip_is_bit_exact() {
        // Identity: any f64 fraction of a day survives fs and back unchanged,
        // for both 86 400 s and 86 401 s days.
        let mut x: u64 = 0x1234_5678_9abc_def1;
        for _ in 0..20_000 {
            crate::xorshift64(&mut x);
            let frac = (x >> 11) as f64 / (1u64 << 53) as f64;
            if frac < 1.0 / 16384.0 {
                continue;
            }
            for day_s in [86_400i128, 86_401] {
                let fs = mul_f64_fs(frac, day_s * FS_PER_S).unwrap();
                let back = ratio_to_f64(fs, day_s * FS_PER_S);
                assert_eq!(back.to_bits(), frac.to_bits(), "frac {frac:e} day {day_s}");
            }
        }
    }

    #[test]
    fn ratio_is_correctly_rounded() {
        assert_eq!(ratio_to_f64(1, 3), 1.0 / 3.0);
        assert_eq!(ratio_to_f64(2, 3), 2.0 / 3.0);
        assert_eq!(ratio_to_f64(FS_PER_S, FS_PER_S), 1.0);
        assert_eq!(ratio_to_f64(-FS_PER_S / 4, FS_PER_S), -0.25);
        assert_eq!(ratio_to_f64(0, FS_PER_S), 0.0);
    }

    #[test]
    fn decimal_fraction_parsing() {
        assert_eq!(decimal_fraction_to_fs("5", FS_PER_S), Some(FS_PER_S / 2));
        assert_eq!(decimal_fraction_to_fs("000000000000001", FS_PER_S), Some(1));
        assert_eq!(decimal_fraction_to_fs("0000000000000004", FS_PER_S), Some(0));
        assert_eq!(decimal_fraction_to_fs("", FS_PER_S), Some(0));
        assert_eq!(decimal_fraction_to_fs("12a", FS_PER_S), None);
        assert_eq!(decimal_fraction_to_fs("5", FS_PER_DAY), Some(FS_PER_DAY / 2));
    }

    #[test]
    fn fraction_digit_output() {
        assert_eq!(fraction_digits(1, 3, 5), ("33333".to_string(), false));
        assert_eq!(fraction_digits(2, 3, 5), ("66667".to_string(), false));
        assert_eq!(fraction_digits(999_999, 1_000_000, 3), ("000".to_string(), true));
    }
}
