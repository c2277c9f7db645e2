//! What the store says: fixture yield, fleet aging, the statistics they rest
//! on, their charts and the HTML page.

pub mod aging;
pub mod archive;
pub mod chart;
pub mod files;
pub mod html;
pub mod stats;
pub mod yields;
