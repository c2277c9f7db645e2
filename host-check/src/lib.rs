#![doc = include_str!("../README.md")]

pub mod agree;
pub mod chart;
pub mod codes;
pub mod collect;
pub mod compare;
pub mod demo;
pub mod eseries;
pub mod eval;
pub mod fixture;
pub mod fleet;
pub mod frames;
pub mod html;
mod lanes;
pub mod log;
pub mod netlist;
pub mod pick;
pub mod production;
pub mod reference;
pub mod spread;
pub mod stagefile;
pub mod stats;
pub mod store;
pub mod timestamp;
pub mod twin;
pub mod values;
