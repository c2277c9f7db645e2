//! Mapping files (another tester's log described in TOML) and the logs read
//! through them: the input is a mapping file and a log, split at the first
//! 0xFF byte.
//!
//! Asserts: no panic, and every line handed on passes the record check
//! once rchold has judged what the mapping left empty (or is left to be
//! judged).
#![no_main]

use std::io::Write;

use host_check::data::mapping::Mapping;
use host_check::data::validate;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let (map, log) = match data.iter().position(|&b| b == 0xFF) {
        Some(i) => (&data[..i], &data[i + 1..]),
        None => (data, &[][..]),
    };
    let dir = std::env::temp_dir();
    let id = std::process::id();
    let (map_path, log_path) =
        (dir.join(format!("rchold-fuzz-map-{id}.toml")), dir.join(format!("rchold-fuzz-map-{id}.csv")));
    let write = |p: &std::path::Path, b: &[u8]| std::fs::File::create(p).and_then(|mut f| f.write_all(b)).is_ok();
    if !write(&map_path, map) || !write(&log_path, log) {
        return;
    }
    let Ok(m) = Mapping::load(&map_path) else { return };
    let Ok(file) = std::fs::File::open(&log_path) else { return };
    let _ = m.read(&log_path, file, |_, l| {
        assert!(l.unjudged() || validate::record(&l.record).is_ok(), "a mapped line passes the record check");
        Ok(())
    });
});
