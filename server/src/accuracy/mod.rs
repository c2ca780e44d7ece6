//! Record accuracy and the planner's buffer. The arithmetic lives in files
//! with no I/O: summary statistics (`stats`), safety stock and order point
//! (`buffer`), accuracy figures over count results (`metrics`) and per-item
//! record error with its growth over time (`item_error`).

pub mod buffer;
pub mod item_error;
pub mod metrics;
pub mod stats;
