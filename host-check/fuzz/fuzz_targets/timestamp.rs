//! Log timestamps ("2027-03-01T06:00:00.250Z", "… +01:00", a space for the T).
//!
//! Asserts: the day-cached parser agrees with a fresh one; an accepted
//! timestamp is the instant the `time` crate's RFC 3339 parser reads (its
//! milliseconds, truncated), a general-purpose reference; writing it back
//! with `format_ms` reads back to the same milliseconds.
#![no_main]

use host_check::data::time::{format_ms, parse_ms, parse_ms_cached, DayCache};
use libfuzzer_sys::fuzz_target;
use time::format_description::well_known::Rfc3339;
use time::OffsetDateTime;

fuzz_target!(|data: &[u8]| {
    // Two timestamps through one cache: the second may reuse the first's day.
    let (a, b) = data.split_at(data.len() / 2);
    let mut cache = DayCache::default();
    for s in [a, b] {
        let cached = parse_ms_cached(s, &mut cache);
        assert_eq!(cached, parse_ms(s), "cache changes nothing");
        let Some(ms) = cached else { continue };
        let mut t = s.to_vec();
        t[10] = b'T';
        let text = std::str::from_utf8(&t).expect("accepted timestamps are text");
        let reference = OffsetDateTime::parse(text, &Rfc3339).expect("an accepted timestamp is RFC 3339");
        let reference_ms = i64::try_from(reference.unix_timestamp_nanos().div_euclid(1_000_000)).unwrap();
        assert_eq!(ms, reference_ms, "{text}");
        if ms >= 0 {
            assert_eq!(parse_ms(format_ms(ms).as_bytes()), Some(ms), "round trip of {ms}");
        }
    }
});
