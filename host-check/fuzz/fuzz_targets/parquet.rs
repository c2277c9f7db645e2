//! The Parquet reader of `yield/aging --parquet`: any bytes as a readings
//! file of a dataset.
//!
//! Asserts: no panic (a bad file is one error naming it), and every record
//! read passes the record check and lies in its partition's day.
#![no_main]

use std::io::Write;

use host_check::data::archive::{read_part, PartFile, COLUMNS};
use host_check::data::validate;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let path = std::env::temp_dir().join(format!("rchold-fuzz-part-{}.parquet", std::process::id()));
    if std::fs::File::create(&path).and_then(|mut f| f.write_all(data)).is_err() {
        return;
    }
    // The seeds' partition: day 20,089 (2025-01-01).
    let part = PartFile { path, station: "bay-1".into(), day: 20_089 };
    let _ = read_part(&part, None, &COLUMNS.map(|c| c.0), |r| {
        assert!(validate::record(&r.record).is_ok(), "a row read passes the record check");
        assert_eq!(r.measured_ms.div_euclid(86_400_000), 20_089, "a row read lies in its day");
    });
});
