#![doc = include_str!("../README.md")]

pub mod data;
pub mod design;
pub mod error;
pub mod fmt;
pub mod guard;
pub mod input;
pub mod par;
pub mod reference;
pub mod report;
pub mod sim;
pub mod stage;
pub use error::{Error, Kind, Result};

/// What the unit tests share.
#[cfg(test)]
pub(crate) mod testing {
    use crate::stage::file::{parse, StageFile};

    /// The example stage (the Lumen-3 keypad backlight of `examples/`).
    pub(crate) fn example() -> StageFile {
        parse(std::path::Path::new("lumen-keypad.toml"), crate::sim::demo::BOARD_TOML).unwrap_or_else(|e| panic!("{e}"))
    }
}
