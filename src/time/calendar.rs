//! Proleptic Gregorian calendar ↔ Modified Julian Day number, in integers.
//!
//! # References
//! Days-from-civil algorithm: H. Hinnant, "chrono-Compatible Low-Level Date
//! Algorithms" (2013), `days_from_civil` / `civil_from_days`. MJD 0 is
//! 1858-11-17 (IAU, Explanatory Supplement to the Astronomical Almanac, 1992,
//! sec. 12.7), and 1970-01-01 is MJD 40587.

/// MJD of 1970-01-01.
const MJD_UNIX_EPOCH: i64 = 40_587;

/// MJD day number of a Gregorian calendar date (no range check on `day`
/// beyond what [`is_valid_date`] tests).
pub fn mjd_from_ymd(year: i64, month: u32, day: u32) -> i64 {
    let y = if month <= 2 { year - 1 } else { year };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let m = month as i64;
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + day as i64 - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468 + MJD_UNIX_EPOCH
}

/// Gregorian calendar date (year, month, day) of an MJD day number.
pub fn ymd_from_mjd(mjd: i64) -> (i64, u32, u32) {
    let z = mjd - MJD_UNIX_EPOCH + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

/// Days in a Gregorian month.
pub fn days_in_month(year: i64, month: u32) -> u32 {
    match month {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        2 if (year % 4 == 0 && year % 100 != 0) || year % 400 == 0 => 29,
        2 => 28,
        _ => 0,
    }
}

/// True when (year, month, day) is a Gregorian date.
pub fn is_valid_date(year: i64, month: u32, day: u32) -> bool {
    (1..=12).contains(&month) && day >= 1 && day <= days_in_month(year, month)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_days() {
        // MJD 0 = 1858-11-17; J2000.0 is 2000-01-01T12:00 = MJD 51544.5;
        // 1972-01-01 = MJD 41317 (IERS Leap_Second.dat first line).
        assert_eq!(mjd_from_ymd(1858, 11, 17), 0);
        assert_eq!(mjd_from_ymd(2000, 1, 1), 51_544);
        assert_eq!(mjd_from_ymd(1972, 1, 1), 41_317);
        assert_eq!(mjd_from_ymd(2017, 1, 1), 57_754);
    }

    #[test]
    fn round_trip_over_four_centuries() {
        for mjd in (-100_000..200_000).step_by(7) {
            let (y, m, d) = ymd_from_mjd(mjd);
            assert!(is_valid_date(y, m, d));
            assert_eq!(mjd_from_ymd(y, m, d), mjd);
        }
    }
}
