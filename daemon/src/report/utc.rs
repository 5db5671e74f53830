//! UTC instants for the AEM writer: parsing the `--utc-epoch` string and
//! formatting CCSDS time strings (`YYYY-MM-DDThh:mm:ss[.d…d]`, the calendar
//! form of CCSDS 502.0/504.0 §6.8.9).
//!
//! Instants are integer nanoseconds since 1970-01-01T00:00:00 UTC on the
//! POSIX scale (every day has 86 400 s; leap seconds are not counted). Bench
//! time is added to the epoch on that scale, so a run that spans a leap second
//! is off by that second after it: the bench clock has no notion of leap
//! seconds, and the AEM documents this in a comment.
//!
//! The day-number conversions are H. Hinnant's `days_from_civil` /
//! `civil_from_days` algorithms ("chrono-Compatible Low-Level Date
//! Algorithms"), valid on the proleptic Gregorian calendar.

use std::fmt::Write as _;

const NS_PER_S: i128 = 1_000_000_000;
const NS_PER_DAY: i128 = 86_400 * NS_PER_S;

/// Why a UTC string was refused (the text of the error).
pub(crate) type ParseFailure = &'static str;

/// Parses `YYYY-MM-DDTHH:MM:SS[.f…]` with an optional trailing `Z` (up to
/// nine fraction digits) into nanoseconds since the Unix epoch.
pub(crate) fn parse(text: &str) -> Result<i128, ParseFailure> {
    let body = text.strip_suffix('Z').unwrap_or(text);
    let bytes = body.as_bytes();
    if bytes.len() < 19 {
        return Err("too short");
    }
    let separators = [(4, b'-'), (7, b'-'), (10, b'T'), (13, b':'), (16, b':')];
    for (idx, want) in separators {
        if bytes[idx] != want {
            return Err("separators must be YYYY-MM-DDTHH:MM:SS");
        }
    }
    let year = digits(&bytes[0..4])?;
    let month = digits(&bytes[5..7])?;
    let day = digits(&bytes[8..10])?;
    let hour = digits(&bytes[11..13])?;
    let minute = digits(&bytes[14..16])?;
    let second = digits(&bytes[17..19])?;
    let frac_ns = match &bytes[19..] {
        [] => 0,
        [b'.', frac @ ..] if !frac.is_empty() && frac.len() <= 9 => {
            digits(frac)? * 10i64.pow(9 - frac.len() as u32)
        }
        [b'.', ..] => return Err("the fraction of a second takes 1 to 9 digits"),
        _ => return Err("unexpected text after the seconds"),
    };
    if !(1..=12).contains(&month) {
        return Err("month out of range");
    }
    if day < 1 || day > days_in_month(year, month) {
        return Err("day out of range for the month");
    }
    if hour > 23 || minute > 59 {
        return Err("hour or minute out of range");
    }
    if second > 59 {
        return Err("seconds out of range (a leap second cannot be an epoch)");
    }
    let days = days_from_civil(year, month, day) as i128;
    let seconds = (hour * 3600 + minute * 60 + second) as i128;
    Ok(days * NS_PER_DAY + seconds * NS_PER_S + frac_ns as i128)
}

/// Formats `unix_ns` as `YYYY-MM-DDThh:mm:ss` plus `frac_digits` (0–9)
/// fraction digits, truncated. `None` outside the years 0000–9999.
pub(crate) fn format(unix_ns: i128, frac_digits: u32) -> Option<String> {
    let days = unix_ns.div_euclid(NS_PER_DAY);
    let in_day = unix_ns.rem_euclid(NS_PER_DAY);
    let (year, month, day) = civil_from_days(i64::try_from(days).ok()?);
    if !(0..=9999).contains(&year) {
        return None;
    }
    let secs = in_day / NS_PER_S;
    let frac = in_day % NS_PER_S;
    let mut out = format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}",
        secs / 3600,
        secs / 60 % 60,
        secs % 60
    );
    let frac_digits = frac_digits.min(9);
    if frac_digits > 0 {
        let scaled = frac / 10i128.pow(9 - frac_digits);
        let _ = write!(out, ".{scaled:0width$}", width = frac_digits as usize);
    }
    Some(out)
}

fn digits(bytes: &[u8]) -> Result<i64, ParseFailure> {
    bytes.iter().try_fold(0i64, |acc, &b| {
        if b.is_ascii_digit() {
            Ok(acc * 10 + i64::from(b - b'0'))
        } else {
            Err("expected a digit")
        }
    })
}

fn is_leap_year(year: i64) -> bool {
    (year % 4 == 0 && year % 100 != 0) || year % 400 == 0
}

fn days_in_month(year: i64, month: i64) -> i64 {
    match month {
        2 if is_leap_year(year) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    }
}

/// Days since 1970-01-01 of a proleptic Gregorian date.
fn days_from_civil(year: i64, month: i64, day: i64) -> i64 {
    let y = if month <= 2 { year - 1 } else { year };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let yoe = y - era * 400;
    let mp = if month > 2 { month - 3 } else { month + 9 };
    let doy = (153 * mp + 2) / 5 + day - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// The proleptic Gregorian date of a day number (days since 1970-01-01).
fn civil_from_days(days: i64) -> (i64, i64, i64) {
    let z = days + 719_468;
    let era = if z >= 0 { z } else { z - 146_096 } / 146_097;
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    (year, month, day)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Expected Unix seconds computed with Python's `calendar.timegm`
    // (an independent implementation of the same POSIX scale).
    const KNOWN: [(&str, i64); 5] = [
        ("2000-01-01T00:00:00Z", 946_684_800),
        ("2000-02-29T12:34:56Z", 951_827_696),
        ("2026-01-01T00:00:00Z", 1_767_225_600),
        ("1969-12-31T23:59:59Z", -1),
        ("1900-03-01T00:00:00Z", -2_203_891_200),
    ];

    #[test]
    fn parses_known_instants() {
        for (text, unix_s) in KNOWN {
            assert_eq!(parse(text), Ok(unix_s as i128 * NS_PER_S), "{text}");
        }
        assert_eq!(
            parse("2100-12-31T23:59:59.5"),
            Ok(4_133_980_799 * NS_PER_S + 500_000_000)
        );
        assert_eq!(
            parse("2026-01-01T00:00:00.000000001Z"),
            Ok(1_767_225_600 * NS_PER_S + 1)
        );
    }

    #[test]
    fn refuses_malformed_or_impossible_dates() {
        for bad in [
            "",
            "2026-01-01",
            "2026-01-01 00:00:00Z",
            "2026-13-01T00:00:00Z",
            "2026-02-29T00:00:00Z",
            "1900-02-29T00:00:00Z",
            "2026-04-31T00:00:00Z",
            "2026-01-01T24:00:00Z",
            "2026-01-01T00:60:00Z",
            "2026-12-31T23:59:60Z",
            "2026-01-01T00:00:00.Z",
            "2026-01-01T00:00:00.1234567890Z",
            "2026-01-01T00:00:00+01:00",
            "2026-0a-01T00:00:00Z",
        ] {
            assert!(parse(bad).is_err(), "{bad:?} accepted");
        }
        assert!(parse("2000-02-29T00:00:00Z").is_ok());
    }

    #[test]
    fn formats_back_what_it_parsed() {
        for (text, _) in KNOWN {
            let ns = parse(text).unwrap();
            assert_eq!(format(ns, 0).unwrap(), text.trim_end_matches('Z'));
        }
        let ns = parse("2026-03-04T05:06:07.123456789Z").unwrap();
        assert_eq!(format(ns, 3).unwrap(), "2026-03-04T05:06:07.123");
        assert_eq!(format(ns, 9).unwrap(), "2026-03-04T05:06:07.123456789");
        assert_eq!(format(-1, 3).unwrap(), "1969-12-31T23:59:59.999");
    }

    #[test]
    fn day_numbers_round_trip_across_centuries() {
        for days in (-800_000..800_000).step_by(997) {
            let (y, m, d) = civil_from_days(days);
            assert!((1..=12).contains(&m) && d >= 1 && d <= days_in_month(y, m));
            assert_eq!(days_from_civil(y, m, d), days);
        }
        assert!(format(NS_PER_DAY * 3_000_000, 0).is_none());
    }
}
