//! Host side of rchold: an independent `f64` reference of the hold stage, stage
//! files, the domain sweep that cross-checks the fixed-point model, and the
//! reports behind the `rchold` command.

pub mod agree;
pub mod eval;
pub mod reference;
pub mod stagefile;
pub mod values;
