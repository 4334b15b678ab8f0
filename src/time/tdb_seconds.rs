//! A TDB epoch in two parts — whole seconds past J2000.0 TDB and a fraction
//! — the time argument of the ephemeris: an `f64` of seconds past J2000
//! resolves only ≈ 0.1 µs in this century (2^-52 · 8e8 s; IEEE 754-2008
//! binary64), ≈ 3.6 mm of Earth motion.

use super::TimeError;

/// A TDB epoch as whole seconds past J2000.0 TDB plus a fraction in [0, 1).
///
/// Two parts keep sub-nanosecond resolution (an `f64` of seconds past J2000
/// resolves ≈ 0.1 µs in this century).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TdbSeconds {
    /// Whole seconds past J2000.0 TDB.
    pub whole_s: i64,
    /// Fraction of a second, in [0, 1).
    pub frac_s: f64,
}

impl TdbSeconds {
    /// From whole seconds and any fraction (renormalised to [0, 1)).
    pub fn new(whole_s: i64, frac_s: f64) -> Self {
        // Already in [0, 1) (the usual case): no floor, which baseline x86-64
        // makes a library call; a −0.0 goes through floor to keep its sign.
        if frac_s > 0.0 && frac_s < 1.0 {
            return Self { whole_s, frac_s };
        }
        let fl = frac_s.floor();
        Self { whole_s: whole_s + fl as i64, frac_s: frac_s - fl }
    }

    /// From a lapse epoch, which must be in TDB.
    pub fn from_epoch(e: &super::Epoch) -> Result<Self, TimeError> {
        if e.scale() != super::TimeScale::Tdb {
            return Err(TimeError::WrongScale { expected: super::TimeScale::Tdb, got: e.scale() });
        }
        let (w, f) = e.seconds_since_j2000();
        Ok(Self { whole_s: w, frac_s: f })
    }

    /// This epoch shifted by `delta_s` seconds.
    pub fn plus_s(&self, delta_s: f64) -> Self {
        let d = trunc_s(delta_s);
        Self::new(self.whole_s + d as i64, self.frac_s + (delta_s - d))
    }

    /// `self − x` in seconds, for a reference time `x_s` given as an `f64`
    /// (segment boundaries, record midpoints), without losing the fraction:
    /// the integer parts are subtracted exactly first.
    pub fn minus_f64_s(&self, x_s: f64) -> f64 {
        let xi = trunc_s(x_s);
        ((self.whole_s as f64) - xi) + (self.frac_s - (x_s - xi))
    }

    /// Approximate single `f64` (for messages and coarse searches only).
    pub fn approx_s(&self) -> f64 {
        self.whole_s as f64 + self.frac_s
    }
}

/// `x.trunc()` through a hardware conversion where it is exact (|x| < 2^62:
/// every epoch in seconds); the library call otherwise. Baseline x86-64 has
/// no rounding instruction, so `trunc` is a call, and segment look-ups make
/// several per evaluation. A negative fraction gives +0.0 instead of −0.0,
/// which no caller can see (it is only subtracted).
#[inline]
fn trunc_s(x: f64) -> f64 {
    if x.abs() < 4.611_686_018_427_388e18 { (x as i64) as f64 } else { x.trunc() }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn two_part_time_arithmetic() {
        let t = TdbSeconds::new(100, 1.25);
        assert_eq!((t.whole_s, t.frac_s), (101, 0.25));
        let u = t.plus_s(-0.5);
        assert_eq!((u.whole_s, u.frac_s), (100, 0.75));
        // minus keeps the fraction for large times.
        let big = TdbSeconds::new(800_000_000, 1e-10);
        assert_eq!(big.minus_f64_s(800_000_000.0), 1e-10);
    }
}
