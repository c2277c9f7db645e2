#![doc = include_str!("../README.md")]

pub mod agree;
pub mod compare;
pub mod eseries;
pub mod eval;
pub mod fixture;
pub mod frames;
pub mod netlist;
pub mod pick;
pub mod reference;
pub mod spread;
pub mod stagefile;
pub mod stats;
pub mod twin;
pub mod values;
