//! Design-time answers about one stage: its timing and warnings (`eval`),
//! part picking, the spread over tolerances, the firmware's pass window,
//! the comparison with a software timer, the node-voltage curve, and the
//! agreement of the fixed-point model with the `f64` reference.

pub mod agree;
pub mod curve;
pub mod eval;
pub mod pick;
pub mod spread;
pub mod timer_vs_rc;
pub mod window;
