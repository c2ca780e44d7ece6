//! Which build this is: the version, the commit it was built from, the day it was built
//! and the newest database schema it knows. `cairn --version`, `/readyz`, `/metrics` and
//! the pages' footer all say the same, so a site can tell support exactly what it runs.

use std::sync::LazyLock;

/// The package version from `Cargo.toml`.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");

/// The commit built from: a short hash, `-dirty` when tracked files differed from it,
/// `unknown` when built outside git (set by `build.rs`).
pub const COMMIT: &str = env!("CAIRN_GIT_COMMIT");

/// The day of the build, `YYYY-MM-DD` in UTC (`SOURCE_DATE_EPOCH`'s day when set).
pub const BUILD_DATE: &str = env!("CAIRN_BUILD_DATE");

/// Returns the newest schema version this build migrates a database to.
pub fn schema_version() -> i64 {
    crate::store::schema_version()
}

/// Returns the build in one line: `0.1.0 (commit 1a2b3c4d5e, built 2026-12-04, schema 23)`.
pub fn describe() -> &'static str {
    static LINE: LazyLock<String> = LazyLock::new(|| {
        format!(
            "{VERSION} (commit {COMMIT}, built {BUILD_DATE}, schema {})",
            schema_version()
        )
    });
    &LINE
}

/// Returns the build as JSON fields, for `/readyz`.
pub fn json() -> serde_json::Value {
    serde_json::json!({
        "version": VERSION,
        "commit": COMMIT,
        "build_date": BUILD_DATE,
        "schema_version": schema_version(),
    })
}
