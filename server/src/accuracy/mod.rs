//! Record accuracy and the planner's buffer. The arithmetic lives in files
//! with no I/O: summary statistics (`stats`), safety stock and order point
//! (`buffer`), accuracy figures over count results (`metrics`), per-item
//! record error with its growth over time (`item_error`, pooled over an
//! item's bins in `items`), daily demand (`demand`), due days for coverage
//! (`coverage`), the buffer at other count intervals (`whatif`), planner inputs and settings (`inputs`) and the trend charts
//! (`chart`); the long tables' filter, order and pages (`table`, the columns in `lists`). `service` joins them to the store (`store`), `report` writes
//! tables as text and CSV, `routes` and `pages` are the HTTP side.

pub mod buffer;
pub mod chart;
pub mod coverage;
pub mod demand;
pub mod inputs;
pub mod item_error;
pub mod items;
pub mod lists;
pub mod metrics;
pub mod pages;
pub mod report;
pub mod routes;
pub mod service;
pub mod stats;
pub mod store;
pub mod table;
pub mod whatif;
