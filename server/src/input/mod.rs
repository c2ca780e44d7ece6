//! The rules every piece of outside input passes before it reaches the domain:
//! one strict JSON reader (which takes a struct only as an object, `objects`), one free-text rule, one range for dates, instants,
//! money and timings, and one escape for CSV cells going out. No I/O; each
//! route, page and import calls these rather than a rule of its own.

pub mod bounds;
pub mod csv_cell;
pub mod json;
pub mod objects;
pub mod text;
