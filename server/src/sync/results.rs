//! What the sync path answers besides an event's result: stored count lines, as support
//! and the tests read them back. Engine-free.

use crate::time::Timestamp;

/// A stored count line as support and the tests read it back.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, utoipa::ToSchema)]
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

/// The stored form of an accepted event's flags (comma-separated), for both stores.
pub fn flag_text(flags: &[cairn_scan::wire::EventFlag]) -> String {
    flags
        .iter()
        .map(|f| match f {
            cairn_scan::wire::EventFlag::Reassigned => "reassigned",
            cairn_scan::wire::EventFlag::FoundStock => "found_stock",
            cairn_scan::wire::EventFlag::Held => "held",
        })
        .collect::<Vec<_>>()
        .join(",")
}

/// Reads stored flags back; unknown words are skipped.
pub fn flags_of(text: &str) -> Vec<cairn_scan::wire::EventFlag> {
    text.split(',')
        .filter_map(|f| match f {
            "reassigned" => Some(cairn_scan::wire::EventFlag::Reassigned),
            "found_stock" => Some(cairn_scan::wire::EventFlag::FoundStock),
            "held" => Some(cairn_scan::wire::EventFlag::Held),
            _ => None,
        })
        .collect()
}
