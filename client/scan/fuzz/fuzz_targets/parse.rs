//! Fuzz target: no input makes the scan parser (or the bin-label and Code 128 code) panic.
//!
//! Run from client/scan/fuzz (needs a nightly toolchain and `cargo install cargo-fuzz`):
//!
//!     cargo +nightly fuzz run parse -- -max_total_time=60    # short run
//!     cargo +nightly fuzz run parse -- -max_total_time=3600  # longer run before a release
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let year = data.first().map_or(2024, |&b| 1950 + u16::from(b));
    let _ = cairn_scan::parse(&text, year);
    let _ = cairn_scan::BinLabel::parse(&text);
    let _ = cairn_scan::code128::encode(&text);
});
