//! What the sync path answers besides an event's result: stored count lines, as support
//! and the tests read them back. Engine-free.

use crate::time::Timestamp;

/// A stored count line as support and the tests read it back.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct StoredLine {
    /// The line's place in arrival order, the cursor of the next page.
    pub seq: i64,
    pub uid: String,
    pub pass: String,
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub qty: i64,
    pub at: Timestamp,
    pub found: bool,
    pub undone: bool,
}
