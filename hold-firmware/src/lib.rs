#![doc = include_str!("../README.md")]
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used, clippy::indexing_slicing, clippy::panic))]

#[cfg(feature = "async")]
mod asynch;
mod config;
mod crc32;
pub mod drift;
mod engine;
pub mod record;
mod time;
mod timer;
mod verdict;

#[cfg(feature = "async")]
pub use asynch::AsyncTester;
pub use config::{on_poll_ns, poll_ticks, widen, BlobError, Config, Setup, WindowKind, BLOB_LEN};
pub use engine::{Comparison, Error, Measurement, Retrigger, Step, Tester};
pub use time::{Stopwatch, TickSource};
pub use timer::SoftHold;
pub use verdict::{Hint, Verdict};
