//! Reading epochs from text, exactly.
//!
//! Accepted forms (the scale is given separately):
//! - calendar: `2016-12-31T23:59:60.5`, `2016-12-31 23:59:60.5`, `2016-12-31`
//!   (seconds may be 60 on a UTC day that ends with a leap second);
//! - `mjd:57753.5` or a bare number `57753.5`: Modified Julian Date;
//! - `jd:2457754.0`: Julian Date.
//!
//! Decimal digits are read exactly (not through `f64`), to the femtosecond.
//! A day fraction in MJD/JD form is a fraction of that day's length (see
//! [`TimeScales::epoch_from_mjd`] for UTC leap days).

use super::calendar::{is_valid_date, mjd_from_ymd};
use super::epoch::{Epoch, TimeScale, TimeScales};
use super::error::TimeError;
use super::femto::{FS_PER_DAY, FS_PER_S, decimal_fraction_to_fs};

fn perr(input: &str, reason: impl Into<String>) -> TimeError {
    TimeError::Parse { input: input.to_string(), reason: reason.into() }
}

/// Splits `"123.456"` into (123, "456"); accepts a leading sign on the integer part.
fn split_decimal<'a>(input: &str, s: &'a str) -> Result<(i64, bool, &'a str), TimeError> {
    let (int, frac) = match s.split_once('.') {
        Some((a, b)) => (a, b),
        None => (s, ""),
    };
    let negative = int.starts_with('-');
    let digits = int.trim_start_matches(['-', '+']);
    if digits.is_empty() || !digits.bytes().all(|b| b.is_ascii_digit()) || digits.len() > 12 {
        return Err(perr(input, format!("'{s}' is not a decimal number")));
    }
    if !frac.bytes().all(|b| b.is_ascii_digit()) {
        return Err(perr(input, format!("'{s}' is not a decimal number")));
    }
    let v: i64 = digits.parse().map_err(|_| perr(input, format!("'{s}' is out of range")))?;
    Ok((if negative { -v } else { v }, negative, frac))
}

/// Parses an epoch string in the given scale.
///
/// # Errors
/// [`TimeError::Parse`] naming the input and what is wrong with it; UTC
/// epochs outside the leap-second table.
pub fn parse_epoch(ts: &TimeScales, scale: TimeScale, input: &str) -> Result<Epoch, TimeError> {
    let s = input.trim();
    if s.is_empty() {
        return Err(perr(input, "empty epoch"));
    }
    let lower = s.to_ascii_lowercase();
    if let Some(rest) = lower.strip_prefix("mjd:") {
        return parse_day_number(ts, scale, input, rest.trim(), 0);
    }
    if let Some(rest) = lower.strip_prefix("jd:") {
        return parse_day_number(ts, scale, input, rest.trim(), 1);
    }
    if s.len() >= 8 && s.as_bytes()[4] == b'-' {
        return parse_calendar(ts, scale, input, s);
    }
    if s.bytes().next().is_some_and(|b| b.is_ascii_digit() || b == b'-' || b == b'+') {
        return parse_day_number(ts, scale, input, s, 0);
    }
    Err(perr(input, "expected YYYY-MM-DDThh:mm:ss[.f], mjd:DAYS or jd:DAYS"))
}

/// `kind` 0 = MJD, 1 = JD (JD = MJD + 2400000.5).
fn parse_day_number(ts: &TimeScales, scale: TimeScale, input: &str, s: &str, kind: u8) -> Result<Epoch, TimeError> {
    let (int, negative, frac) = split_decimal(input, s)?;
    if negative {
        return Err(perr(input, "negative day numbers are not supported"));
    }
    let (mjd_day, frac_fs_of_day, half_day) = if kind == 0 {
        (int, frac, false)
    } else {
        // JD starts at noon: JD N.f = MJD (N − 2400001) + (0.5 + f) days.
        (int - 2_400_001, frac, true)
    };
    // The fraction of a day (exact) of the day it names; for JD the day
    // starts at noon, so half a day is added in femtoseconds of 86 400 s.
    if half_day {
        let f_fs = decimal_fraction_to_fs(frac_fs_of_day, FS_PER_DAY).ok_or_else(|| perr(input, "bad fraction"))?;
        let total = f_fs + FS_PER_DAY / 2;
        let (d, f) = if total >= FS_PER_DAY { (mjd_day + 1, total - FS_PER_DAY) } else { (mjd_day, total) };
        if scale == TimeScale::Utc {
            // Rescale to the UTC day's actual length (the day-fraction convention).
            let len = ts.day_length_fs(scale, d)?;
            let fs = f * len / FS_PER_DAY;
            return ts.epoch_from_day_fs(scale, d, fs);
        }
        return ts.epoch_from_day_fs(scale, d, f);
    }
    let len = ts.day_length_fs(scale, mjd_day)?;
    let fs = decimal_fraction_to_fs(frac_fs_of_day, len).ok_or_else(|| perr(input, "bad fraction"))?;
    if fs >= len {
        return Err(perr(input, "the fraction rounds to a whole day"));
    }
    ts.epoch_from_day_fs(scale, mjd_day, fs)
}

fn parse_calendar(ts: &TimeScales, scale: TimeScale, input: &str, s: &str) -> Result<Epoch, TimeError> {
    let (date, time) = match s.find(['T', 't', ' ']) {
        Some(i) => (&s[..i], s[i + 1..].trim()),
        None => (s, ""),
    };
    let time = time.trim_end_matches(['Z', 'z']);
    let parts: Vec<&str> = date.split('-').collect();
    let num = |p: &str, what: &str| -> Result<i64, TimeError> {
        if !p.bytes().all(|b| b.is_ascii_digit()) {
            return Err(perr(input, format!("{what} '{p}' is not a number")));
        }
        p.parse::<i64>().map_err(|_| perr(input, format!("{what} '{p}' is not a number")))
    };
    let mjd_day = if parts.len() == 2 && parts[0].len() == 4 && parts[1].len() == 3 {
        // Day of year (ISO 8601 ordinal date): YYYY-DDD.
        let year = num(parts[0], "year")?;
        let doy = num(parts[1], "day of year")?;
        let days_in_year = if is_valid_date(year, 2, 29) { 366 } else { 365 };
        if !(1..=days_in_year).contains(&doy) {
            return Err(perr(input, format!("day of year {doy} is not in 1 … {days_in_year}")));
        }
        mjd_from_ymd(year, 1, 1) + doy - 1
    } else {
        if parts.len() != 3 || parts[0].len() != 4 || parts[1].len() != 2 || parts[2].len() != 2 {
            return Err(perr(input, format!("date '{date}' is not YYYY-MM-DD or YYYY-DDD")));
        }
        let year = num(parts[0], "year")?;
        let month = num(parts[1], "month")? as u32;
        let day = num(parts[2], "day")? as u32;
        if !is_valid_date(year, month, day) {
            return Err(perr(input, format!("{date} is not a calendar date")));
        }
        mjd_from_ymd(year, month, day)
    };
    let (h, m, sec_int, sec_frac) = if time.is_empty() {
        (0, 0, 0, "")
    } else {
        let tp: Vec<&str> = time.split(':').collect();
        if tp.len() != 3 || tp[0].len() != 2 || tp[1].len() != 2 {
            return Err(perr(input, format!("time '{time}' is not hh:mm:ss[.f]")));
        }
        let h = num(tp[0], "hour")?;
        let m = num(tp[1], "minute")?;
        let (si, sf) = match tp[2].split_once('.') {
            Some((a, b)) => (a, b),
            None => (tp[2], ""),
        };
        if si.len() != 2 {
            return Err(perr(input, format!("seconds '{}' are not ss[.f]", tp[2])));
        }
        let si = num(si, "second")?;
        if !sf.bytes().all(|b| b.is_ascii_digit()) {
            return Err(perr(input, format!("seconds '{}' are not a number", tp[2])));
        }
        (h, m, si, sf)
    };
    if h > 23 || m > 59 || sec_int > 60 {
        return Err(perr(input, "hour, minute or second out of range"));
    }
    let len = ts.day_length_fs(scale, mjd_day)?;
    let whole_s = h * 3600 + m * 60 + sec_int;
    if sec_int == 60 && !(h == 23 && m == 59 && len > FS_PER_DAY) {
        return Err(perr(input, format!("second 60 exists only at 23:59 of a UTC day ending with a leap second; {date} {scale} has none")));
    }
    let frac_fs = decimal_fraction_to_fs(sec_frac, FS_PER_S).ok_or_else(|| perr(input, "bad seconds fraction"))?;
    let fs = whole_s as i128 * FS_PER_S + frac_fs;
    if fs >= len {
        return Err(perr(input, format!("{time} is past the end of {date} {scale}")));
    }
    ts.epoch_from_day_fs(scale, mjd_day, fs)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn day_of_year_dates() {
        // ISO 8601 ordinal dates: 2024-080 is 2024-03-20 (2024 is a leap year).
        let ts = TimeScales::builtin();
        let a = parse_epoch(&ts, TimeScale::Utc, "2024-080T12:00:00").unwrap();
        let b = parse_epoch(&ts, TimeScale::Utc, "2024-03-20T12:00:00").unwrap();
        assert_eq!(a, b);
        assert!(parse_epoch(&ts, TimeScale::Utc, "2023-366").is_err());
        assert!(parse_epoch(&ts, TimeScale::Utc, "2024-366").is_ok());
    }

    #[test]
    fn forms_agree() {
        let ts = TimeScales::builtin();
        let a = parse_epoch(&ts, TimeScale::Tt, "2000-01-01T12:00:00").unwrap();
        let b = parse_epoch(&ts, TimeScale::Tt, "mjd:51544.5").unwrap();
        let c = parse_epoch(&ts, TimeScale::Tt, "jd:2451545.0").unwrap();
        let d = parse_epoch(&ts, TimeScale::Tt, "51544.5").unwrap();
        assert_eq!(a, b);
        assert_eq!(a, c);
        assert_eq!(a, d);
    }

    #[test]
    fn leap_second_only_on_leap_days() {
        let ts = TimeScales::builtin();
        assert!(parse_epoch(&ts, TimeScale::Utc, "2016-12-31T23:59:60.25").is_ok());
        assert!(parse_epoch(&ts, TimeScale::Utc, "2016-12-30T23:59:60.25").is_err());
        assert!(parse_epoch(&ts, TimeScale::Tai, "2016-12-31T23:59:60.25").is_err());
    }

    #[test]
    fn femtosecond_digits_are_exact() {
        let ts = TimeScales::builtin();
        let e = parse_epoch(&ts, TimeScale::Tt, "2020-02-29T01:02:03.123456789012345").unwrap();
        assert_eq!(e.to_string(), "2020-02-29T01:02:03.123456789012345 TT");
    }

    #[test]
    fn bad_inputs_say_why() {
        let ts = TimeScales::builtin();
        for bad in ["", "yesterday", "2020-13-01", "2020-02-30", "2020-01-01T25:00:00", "mjd:12x", "mjd:", "jd:-5", "2020-01-01T00:00:0a"] {
            let e = parse_epoch(&ts, TimeScale::Tt, bad).unwrap_err().to_string();
            assert!(e.contains("cannot read epoch"), "{bad}: {e}");
        }
    }
}
