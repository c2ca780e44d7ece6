//! Barcode and GS1 rules: what a scan means and whether it is valid.
//!
//! Pure Rust with no I/O, so the same rules run in the server and, compiled to
//! WebAssembly, in the phone app.
