//! Fuzz target: the phone's sync request as the server reads it. No input makes the
//! request or event readers panic, and an event that reads back from its canonical text
//! is the same event (so a resend is always recognised as a resend).
//!
//!     RUSTC_BOOTSTRAP=1 cargo fuzz run sync_wire -- -max_total_time=60
#![no_main]

use cairn_scan::wire::{SyncRequest, WireEvent};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let events: Vec<serde_json::Value> = match serde_json::from_slice::<SyncRequest>(data) {
        Ok(r) => r.events,
        // Also read the bytes as one bare event, so the event reader sees the input directly.
        Err(_) => match serde_json::from_slice::<serde_json::Value>(data) {
            Ok(v) => vec![v],
            Err(_) => return,
        },
    };
    for raw in events {
        let Ok(event) = serde_json::from_value::<WireEvent>(raw) else {
            continue;
        };
        let _ = event.body();
        let text = event.canonical();
        let again: WireEvent =
            serde_json::from_str(&text).expect("a canonical event reads back");
        assert_eq!(again, event, "canonical text round-trips");
        assert_eq!(again.canonical(), text, "canonical text is stable");
    }
});
