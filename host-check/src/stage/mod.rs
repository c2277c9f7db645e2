//! The stage as a user writes it down: the stage file, values with units and
//! tolerances, the IEC 60063 E-series, and the SPICE netlist of a stage.

pub mod eseries;
pub mod file;
pub mod keys;
pub mod netlist;
pub mod values;
