//! Design-time answers about one stage: its timing and warnings (`eval`),
//! part picking, the spread over tolerances and what drives it, the
//! firmware's pass window, the comparison with a software timer, two stages
//! side by side, partial presses and retriggers, the node-voltage curve, and
//! the agreement of the fixed-point model with the `f64` reference.

pub mod agree;
pub mod compare;
pub mod coverage;
pub mod curve;
pub mod diagnose;
pub mod eval;
pub mod pick;
pub mod press;
pub mod spread;
pub mod timer_vs_rc;
pub mod window;
