#![doc = include_str!("../README.md")]
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used, clippy::indexing_slicing, clippy::panic))]

mod error;
pub mod fixed;
mod model;
pub mod presets;
mod stage;
mod units;
pub mod window;

#[cfg(feature = "f32")]
pub mod float;

pub use error::{Error, Quantity};
pub use model::{Evaluation, InverseC, InverseR, Model};
pub use stage::{check_clock, fraction_of, limits, ppm_of, Diode, Stage};
pub use units::{Span, Voltage};
