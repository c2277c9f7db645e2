//! UTC timestamps as milliseconds since 1970-01-01T00:00:00Z, read and
//! written in the RFC 3339 form `YYYY-MM-DDTHH:MM:SS[.fff]Z`.
//!
//! The calendar arithmetic is the proleptic-Gregorian day count of
//! H. Hinnant, "chrono-Compatible Low-Level Date Algorithms" (public domain);
//! the tests check it against the `time` crate.

/// Days from 1970-01-01 to the civil date `y-m-d`.
#[must_use]
pub const fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let yoe = y - era * 400;
    let mp = (m as i64 + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d as i64 - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// The civil date `(y, m, d)` of a day count from 1970-01-01.
#[must_use]
pub const fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = if z >= 0 { z } else { z - 146_096 } / 146_097;
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { yoe + era * 400 + 1 } else { yoe + era * 400 }, m, d)
}

const fn leap(y: i64) -> bool {
    (y % 4 == 0 && y % 100 != 0) || y % 400 == 0
}

const fn month_days(y: i64, m: u32) -> u32 {
    match m {
        2 if leap(y) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    }
}

fn digits(b: &[u8]) -> Option<u32> {
    if b.is_empty() {
        return None;
    }
    b.iter().try_fold(0u32, |acc, &c| c.is_ascii_digit().then(|| acc * 10 + u32::from(c - b'0')))
}

/// Accepted form, for error messages.
pub const FORM: &str = "YYYY-MM-DDTHH:MM:SS[.fff]Z, years 1970 … 9999";

/// Parses `YYYY-MM-DDTHH:MM:SS[.f…]Z` (a space may replace the `T`;
/// fractions beyond milliseconds are truncated). Years 1970 – 9999.
#[must_use]
pub fn parse_ms(s: &[u8]) -> Option<i64> {
    parse_ms_cached(s, &mut DayCache::default())
}

/// The date of the previous timestamp, so that a run of timestamps on one
/// day parses the date once.
#[derive(Debug, Clone, Copy, Default)]
pub struct DayCache {
    key: [u8; 10],
    days: i64,
    valid: bool,
}

/// As [`parse_ms`], reusing the date from `cache` when it is the same.
#[must_use]
pub fn parse_ms_cached(s: &[u8], cache: &mut DayCache) -> Option<i64> {
    if s.len() < 20 || s.last() != Some(&b'Z') {
        return None;
    }
    let g = |a: usize, b: usize| s.get(a..b).and_then(digits);
    let sep = |i: usize, c: &[u8]| s.get(i).is_some_and(|x| c.contains(x));
    if !(sep(10, b"T ") && sep(13, b":") && sep(16, b":")) {
        return None;
    }
    let date = s.get(..10)?;
    let days = if cache.valid && cache.key == date {
        cache.days
    } else {
        if !(sep(4, b"-") && sep(7, b"-")) {
            return None;
        }
        let (y, mo, d) = (g(0, 4)?, g(5, 7)?, g(8, 10)?);
        let y = i64::from(y);
        if !(1970..=9999).contains(&y) || !(1..=12).contains(&mo) || d < 1 || d > month_days(y, mo) {
            return None;
        }
        let days = days_from_civil(y, mo, d);
        cache.key.copy_from_slice(date);
        cache.days = days;
        cache.valid = true;
        days
    };
    let (h, mi, se) = (g(11, 13)?, g(14, 16)?, g(17, 19)?);
    if h > 23 || mi > 59 || se > 59 {
        return None;
    }
    let mut ms = 0i64;
    let tail = s.get(19..s.len() - 1)?;
    if !tail.is_empty() {
        let (dot, frac) = tail.split_first()?;
        if *dot != b'.' || frac.is_empty() || frac.len() > 9 || !frac.iter().all(u8::is_ascii_digit) {
            return None;
        }
        for i in 0..3 {
            ms = ms * 10 + frac.get(i).map_or(0, |&c| i64::from(c - b'0'));
        }
    }
    Some(((days * 24 + i64::from(h)) * 60 + i64::from(mi)) * 60_000 + i64::from(se) * 1000 + ms)
}

/// Writes milliseconds since the epoch as `YYYY-MM-DDTHH:MM:SSZ`, with
/// `.fff` when the milliseconds are not zero.
#[must_use]
pub fn format_ms(ms: i64) -> String {
    let (days, rest) = (ms.div_euclid(86_400_000), ms.rem_euclid(86_400_000));
    let (y, m, d) = civil_from_days(days);
    let (h, mi, s, f) = (rest / 3_600_000, rest / 60_000 % 60, rest / 1000 % 60, rest % 1000);
    if f == 0 {
        format!("{y:04}-{m:02}-{d:02}T{h:02}:{mi:02}:{s:02}Z")
    } else {
        format!("{y:04}-{m:02}-{d:02}T{h:02}:{mi:02}:{s:02}.{f:03}Z")
    }
}

/// The date part, `YYYY-MM-DD`.
#[must_use]
pub fn date_of(ms: i64) -> String {
    let (y, m, d) = civil_from_days(ms.div_euclid(86_400_000));
    format!("{y:04}-{m:02}-{d:02}")
}

/// Parses a date `YYYY-MM-DD` (midnight UTC) or a full timestamp.
#[must_use]
pub fn parse_date_or_time(s: &str) -> Option<i64> {
    if s.len() == 10 {
        let mut t = s.as_bytes().to_vec();
        t.extend_from_slice(b"T00:00:00Z");
        parse_ms(&t)
    } else {
        parse_ms(s.as_bytes())
    }
}

/// Milliseconds since the epoch, now.
#[must_use]
pub fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;
    use time::format_description::well_known::Rfc3339;
    use time::OffsetDateTime;

    #[test]
    fn fixed_points() {
        // 2000-01-01T00:00:00Z is 946 684 800 s after the epoch (POSIX time; checked
        // below against the `time` crate as well).
        assert_eq!(parse_ms(b"2000-01-01T00:00:00Z"), Some(946_684_800_000));
        assert_eq!(parse_ms(b"1970-01-01 00:00:00.5Z"), Some(500));
        assert_eq!(format_ms(946_684_800_123), "2000-01-01T00:00:00.123Z");
        for bad in [
            "2027-02-29T00:00:00Z",
            "2027-13-01T00:00:00Z",
            "2027-01-01T24:00:00Z",
            "2027-01-01T00:00:00",
            "2027-01-01T00:00:00.Z",
            "1969-12-31T23:59:59Z",
            "2027-1-01T00:00:00Z",
        ] {
            assert_eq!(parse_ms(bad.as_bytes()), None, "{bad}");
        }
        assert_eq!(parse_ms(b"2028-02-29T00:00:00Z").map(date_of).as_deref(), Some("2028-02-29"));
        // The cache gives the same answers, and never accepts a bad date it has not seen.
        let mut c = DayCache::default();
        assert_eq!(parse_ms_cached(b"2000-01-01T00:00:01Z", &mut c), Some(946_684_801_000));
        assert_eq!(parse_ms_cached(b"2000-01-01T00:00:02Z", &mut c), Some(946_684_802_000));
        assert_eq!(parse_ms_cached(b"2000-02-30T00:00:02Z", &mut c), None);
        assert_eq!(parse_ms_cached(b"2000-01-01T25:00:02Z", &mut c), None);
    }

    proptest! {
        /// Reference: the `time` crate's RFC 3339 formatter and parser.
        #[test]
        fn agrees_with_the_time_crate(ms in 0i64..253_402_300_799_999) {
            let ours = format_ms(ms);
            let theirs = OffsetDateTime::parse(&ours, &Rfc3339).map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert_eq!(i64::try_from(theirs.unix_timestamp_nanos() / 1_000_000).unwrap_or(-1), ms);
            let back = OffsetDateTime::from_unix_timestamp_nanos(i128::from(ms) * 1_000_000)
                .map_err(|e| TestCaseError::fail(e.to_string()))?
                .format(&Rfc3339)
                .map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert_eq!(parse_ms(back.as_bytes()), Some(ms));
        }
    }
}
