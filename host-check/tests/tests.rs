//! The `rchold` binary end to end, one module per area of the job:
//!
//! - `design`: the design commands (`eval`, `window`, `pick`, `spread`,
//!   `timer-vs-rc`, `curve`, `agree`) — reports, exit codes, refusals;
//! - `data`: the data commands (`listen`, `ingest`, `yield`, `aging`,
//!   `sources`, `synth-log`) — the store, killed and concurrent writers;
//! - `util`: the helpers they share (running the binary, writing files).
//!
//! Unit tests of the library sit beside each file in `src/`; the cross-crate
//! checks against published sources and the simulators are in the workspace's
//! `tests/` crate.

mod data;
mod design;
mod util;
