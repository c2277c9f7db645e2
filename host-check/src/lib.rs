#![doc = include_str!("../README.md")]

pub mod agree;
pub mod eval;
pub mod netlist;
pub mod reference;
pub mod stagefile;
pub mod values;
