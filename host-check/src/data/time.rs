//! UTC timestamps as milliseconds since 1970-01-01T00:00:00Z, read and
//! written in the RFC 3339 form `YYYY-MM-DDTHH:MM:SS[.fff]Z` by the `time`
//! crate (the calendar, leap years and field ranges are its).

use ::time::macros::format_description;
use ::time::{Date, OffsetDateTime, PrimitiveDateTime, Time};

/// Accepted form, for error messages.
pub const FORM: &str = "YYYY-MM-DDTHH:MM:SS[.fff] with Z or an offset ±HH:MM, years 1970 … 9999";

const MS_PER_DAY: i64 = 86_400_000;

/// Parses `YYYY-MM-DDTHH:MM:SS[.f…]Z` (a space may replace the `T`;
/// fractions beyond milliseconds are truncated). Years 1970 – 9999.
#[must_use]
pub fn parse_ms(s: &[u8]) -> Option<i64> {
    parse_ms_cached(s, &mut DayCache::default())
}

/// The date of the previous timestamp, so that a run of timestamps on one
/// day has its date read once (a log holds many measurements a day).
#[derive(Debug, Clone, Copy, Default)]
pub struct DayCache {
    key: [u8; 10],
    day_ms: i64,
    valid: bool,
}

/// As [`parse_ms`], reusing the date from `cache` when it is the same.
#[must_use]
pub fn parse_ms_cached(s: &[u8], cache: &mut DayCache) -> Option<i64> {
    if s.len() < 20 || !matches!(s.get(10), Some(b'T' | b' ')) {
        return None;
    }
    // The zone: "Z", or an offset "+01:00" / "-05:30" from UTC (stored as UTC).
    let (end, offset_ms) = if s.last() == Some(&b'Z') {
        (s.len() - 1, 0)
    } else {
        let z = s.get(s.len().checked_sub(6)?..)?;
        let sign = match z.first() {
            Some(b'+') => 1,
            Some(b'-') => -1,
            _ => return None,
        };
        let two = |a: usize| {
            z.get(a..a + 2).filter(|d| d.iter().all(u8::is_ascii_digit)).map(|d| {
                i64::from(d.first().copied().unwrap_or(b'0') - b'0') * 10
                    + i64::from(d.get(1).copied().unwrap_or(b'0') - b'0')
            })
        };
        let (h, m) = (two(1)?, two(4)?);
        if z.get(3) != Some(&b':') || h > 23 || m > 59 {
            return None;
        }
        (s.len() - 6, sign * (h * 60 + m) * 60_000)
    };
    let date = s.get(..10)?;
    let day_ms = if cache.valid && cache.key == date {
        cache.day_ms
    } else {
        let d = Date::parse(std::str::from_utf8(date).ok()?, format_description!("[year]-[month]-[day]")).ok()?;
        if !(1970..=9999).contains(&d.year()) {
            return None;
        }
        let day_ms = d.midnight().assume_utc().unix_timestamp() * 1000;
        cache.key.copy_from_slice(date);
        cache.day_ms = day_ms;
        cache.valid = true;
        day_ms
    };
    let clock = std::str::from_utf8(s.get(11..end)?).ok()?;
    let t = if clock.len() == 8 {
        Time::parse(clock, format_description!("[hour]:[minute]:[second]"))
    } else {
        Time::parse(clock, format_description!("[hour]:[minute]:[second].[subsecond]"))
    }
    .ok()?;
    let (h, m, sec, ns) = t.as_hms_nano();
    let local = day_ms + ((i64::from(h) * 60 + i64::from(m)) * 60 + i64::from(sec)) * 1000 + i64::from(ns / 1_000_000);
    Some(local - offset_ms)
}

fn at(ms: i64) -> Option<OffsetDateTime> {
    OffsetDateTime::from_unix_timestamp_nanos(i128::from(ms) * 1_000_000).ok()
}

/// Writes milliseconds since the epoch as `YYYY-MM-DDTHH:MM:SSZ`, with
/// `.fff` when the milliseconds are not zero.
#[must_use]
pub fn format_ms(ms: i64) -> String {
    let whole = format_description!("[year]-[month]-[day]T[hour]:[minute]:[second]Z");
    let fraction = format_description!("[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:3]Z");
    at(ms)
        .and_then(|t| t.format(if ms.rem_euclid(1000) == 0 { whole } else { fraction }).ok())
        .unwrap_or_else(|| format!("{ms} ms"))
}

/// The date part, `YYYY-MM-DD`.
#[must_use]
pub fn date_of(ms: i64) -> String {
    at(ms)
        .and_then(|t| t.format(format_description!("[year]-[month]-[day]")).ok())
        .unwrap_or_else(|| format!("day {}", ms.div_euclid(MS_PER_DAY)))
}

/// Parses a date `YYYY-MM-DD` (midnight UTC) or a full timestamp.
#[must_use]
pub fn parse_date_or_time(s: &str) -> Option<i64> {
    if s.len() == 10 {
        let d = Date::parse(s, format_description!("[year]-[month]-[day]")).ok()?;
        (1970..=9999)
            .contains(&d.year())
            .then(|| PrimitiveDateTime::new(d, Time::MIDNIGHT).assume_utc().unix_timestamp() * 1000)
    } else {
        parse_ms(s.as_bytes())
    }
}

/// Milliseconds since the epoch, now.
#[must_use]
pub fn now_ms() -> i64 {
    i64::try_from(OffsetDateTime::now_utc().unix_timestamp_nanos() / 1_000_000).unwrap_or(i64::MAX)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ::time::format_description::well_known::Rfc3339;
    use ::time::UtcOffset;
    use proptest::prelude::*;

    /// The `time` crate's own RFC 3339 reader, as UTC milliseconds: the
    /// independent reading the tests hold ours against.
    fn parse_rfc3339_ms(s: &str) -> Option<i64> {
        let t = OffsetDateTime::parse(s, &Rfc3339).ok()?.to_offset(UtcOffset::UTC);
        i64::try_from(t.unix_timestamp_nanos() / 1_000_000).ok()
    }

    #[test]
    fn fixed_points() {
        // 2000-01-01T00:00:00Z is 946 684 800 s after the epoch (POSIX time, from memory;
        // the property below checks the round trip over the whole range).
        assert_eq!(parse_ms(b"2000-01-01T00:00:00Z"), Some(946_684_800_000));
        assert_eq!(parse_ms(b"1970-01-01 00:00:00.5Z"), Some(500));
        assert_eq!(format_ms(946_684_800_123), "2000-01-01T00:00:00.123Z");
        assert_eq!(format_ms(946_684_800_000), "2000-01-01T00:00:00Z");
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
        assert_eq!(parse_date_or_time("2028-02-29"), parse_ms(b"2028-02-29T00:00:00Z"));
        assert_eq!(parse_rfc3339_ms("2000-01-01T01:00:00+01:00"), Some(946_684_800_000));
        // Offsets are read and stored as UTC; a bad offset is refused.
        assert_eq!(parse_ms(b"2000-01-01T01:00:00+01:00"), Some(946_684_800_000));
        assert_eq!(parse_ms(b"1999-12-31T19:30:00.250-04:30"), Some(946_684_800_250));
        for bad in ["2000-01-01T01:00:00+1:00", "2000-01-01T01:00:00+24:00", "2000-01-01T01:00:00*01:00"] {
            assert_eq!(parse_ms(bad.as_bytes()), None, "{bad}");
        }
        // The cache gives the same answers, and never accepts a bad date it has not seen.
        let mut c = DayCache::default();
        assert_eq!(parse_ms_cached(b"2000-01-01T00:00:01Z", &mut c), Some(946_684_801_000));
        assert_eq!(parse_ms_cached(b"2000-01-01T00:00:02Z", &mut c), Some(946_684_802_000));
        assert_eq!(parse_ms_cached(b"2000-02-30T00:00:02Z", &mut c), None);
        assert_eq!(parse_ms_cached(b"2000-01-01T25:00:02Z", &mut c), None);
    }

    proptest! {
        /// Written times read back to the same millisecond, over 1970 … 9999.
        #[test]
        fn round_trip(ms in 0i64..253_402_300_799_999) {
            prop_assert_eq!(parse_ms(format_ms(ms).as_bytes()), Some(ms));
            prop_assert_eq!(parse_rfc3339_ms(&format_ms(ms)), Some(ms));
        }
    }
}
