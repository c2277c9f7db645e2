#![doc = include_str!("../README.md")]
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used, clippy::indexing_slicing, clippy::panic))]

mod error;
pub mod fixed;
#[cfg(feature = "solver")]
mod model;
pub mod prepared;
pub mod presets;
mod stage;
mod units;
#[cfg(feature = "solver")]
pub mod window;

#[cfg(feature = "f32")]
pub mod float;

pub use error::{Error, Quantity};
#[cfg(feature = "solver")]
pub use model::{Evaluation, InverseC, InverseR, Model};
pub use prepared::{Estimate, Norm, Prepared, OUTCOME_LEN, PREPARED_LEN};
pub use stage::{check_clock, fraction_of, limits, ppm_of, Diode, Stage};
pub use units::{Span, Voltage};
