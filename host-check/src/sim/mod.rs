//! Simulated hardware: the stage's twin behind embedded-hal pins and the
//! end-to-end demo scenario built on it.

pub mod demo;
pub mod synth;
pub mod twin;
