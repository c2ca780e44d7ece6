//! What the phone app's files are and how each is described, with no I/O: which
//! files of `client/web` are served, their content types, their ETags, the hash of
//! the whole set and the service worker's cache name stamped from it.
//!
//! The build script includes this file too (`#[path]`), so the files compiled into
//! the binary and the files the development override reads from a folder are named,
//! typed and hashed by the same code.

use sha2::{Digest, Sha256};

/// The text in `sw.js` that is replaced by the hash of the app's files, naming its cache.
pub const SHELL_HASH_PLACEHOLDER: &str = "__CAIRN_SHELL_HASH__";

/// The service worker's file, the one file that is stamped before it is served.
pub const WORKER_PATH: &str = "sw.js";

/// Hex digits of the shell hash kept in the cache name (64 bits).
const SHELL_HASH_HEX: usize = 16;

/// Hex digits of a file's hash kept in its ETag (128 bits).
const ETAG_HEX: usize = 32;

/// Tells whether a path under the app's folder (relative, `/`-separated) is one of its
/// files: hidden files, npm's folders and its package files are tools, not the app.
pub fn is_app_file(path: &str) -> bool {
    !path.is_empty()
        && path.split('/').all(|segment| {
            !segment.is_empty()
                && !segment.starts_with('.')
                && segment != "node_modules"
                && !segment.contains('\\')
        })
        && !matches!(path, "package.json" | "package-lock.json")
}

/// Returns the `Content-Type` for a file name by its extension.
///
/// Sources: the IANA media types registry; `text/javascript` per RFC 9239;
/// `application/manifest+json` per the W3C Web App Manifest; `application/wasm` per the
/// WebAssembly Web API (streaming compilation refuses any other type).
pub fn content_type(path: &str) -> &'static str {
    let ext = path.rsplit_once('.').map_or("", |(_, e)| e);
    match ext {
        "html" => "text/html; charset=utf-8",
        "css" => "text/css; charset=utf-8",
        "js" | "mjs" => "text/javascript; charset=utf-8",
        "json" => "application/json",
        "webmanifest" => "application/manifest+json",
        "wasm" => "application/wasm",
        "svg" => "image/svg+xml",
        "png" => "image/png",
        "ico" => "image/x-icon",
        "txt" => "text/plain; charset=utf-8",
        _ => "application/octet-stream",
    }
}

/// Returns a file's ETag: a weak validator from the SHA-256 of its bytes (weak, because
/// the same bytes may go out gzip-compressed or not).
pub fn etag(bytes: &[u8]) -> String {
    let digest = hex(&Sha256::digest(bytes));
    format!("W/\"{}\"", &digest[..ETAG_HEX])
}

/// Returns the hash of the whole set of app files, `(path, bytes)` in any order: a
/// change to any byte or name of any file changes it. `sw.js` is hashed as written
/// (with its placeholder), so the hash does not depend on itself.
pub fn shell_hash<'a>(files: impl IntoIterator<Item = (&'a str, &'a [u8])>) -> String {
    let mut files: Vec<(&str, &[u8])> = files.into_iter().collect();
    files.sort_unstable_by(|a, b| a.0.cmp(b.0));
    let mut hasher = Sha256::new();
    for (path, bytes) in files {
        // Lengths first, so no two sets can run together into the same stream.
        hasher.update((path.len() as u64).to_le_bytes());
        hasher.update(path.as_bytes());
        hasher.update((bytes.len() as u64).to_le_bytes());
        hasher.update(bytes);
    }
    hex(&hasher.finalize())[..SHELL_HASH_HEX].to_owned()
}

/// Returns the service worker's text with its cache name stamped with `hash`, or `None`
/// when the text lacks the placeholder (a worker whose cache name would never change).
pub fn stamp_worker(text: &str, hash: &str) -> Option<String> {
    text.contains(SHELL_HASH_PLACEHOLDER)
        .then(|| text.replace(SHELL_HASH_PLACEHOLDER, hash))
}

fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write;
    bytes.iter().fold(String::new(), |mut s, b| {
        let _ = write!(s, "{b:02x}");
        s
    })
}
