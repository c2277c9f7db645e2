#![doc = include_str!("../README.md")]

pub mod data;
pub mod design;
pub mod error;
pub mod fmt;
pub mod reference;
pub mod report;
pub mod sim;
pub mod stage;
pub use error::{Error, Kind, Result};
