//! Measurements on their way into the store: the firmware's record frames,
//! the measurement log, the names of verdicts and hints, UTC times, the
//! SQLite store and the two ways in (`listen`, `ingest`).

pub mod archive;
pub mod codes;
pub mod collect;
pub mod frames;
pub mod log;
pub mod mapping;
pub mod store;
pub mod summary;
pub mod time;
pub mod validate;
