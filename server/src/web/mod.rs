//! The phone app at `/app/`: its files are compiled into the binary (see `build.rs`),
//! so a binary copied alone onto a host serves all of it. `web_dir` in the config swaps
//! in a folder read at every request, for editing the app's JS without a rebuild.
//!
//! Every answer carries its content type and an ETag from its bytes (a matching
//! `If-None-Match` gets 304). `sw.js`, the pages and the manifest must be revalidated
//! on every use, so a phone always learns of a new version; the other files may be kept
//! for a while, and the service worker fetches them afresh when it installs.

pub mod files;

use axum::body::Body;
use axum::extract::{Path as UrlPath, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Redirect, Response};
use std::borrow::Cow;
use std::path::{Path, PathBuf};

/// One file of the app, compiled in.
#[derive(Debug)]
pub struct Asset {
    /// Path under `/app/`, `/`-separated.
    pub path: &'static str,
    pub bytes: &'static [u8],
    pub content_type: &'static str,
    pub etag: &'static str,
}

include!(concat!(env!("OUT_DIR"), "/web_assets.rs"));

/// How long a browser may keep an app file other than the pages, worker and manifest
/// without asking again, in seconds.
const ASSET_MAX_AGE_S: u32 = 3_600;

/// Most files a development folder may hold (a guard against pointing `web_dir` at `/`).
const MAX_DEV_FILES: usize = 2_000;

/// Returns the compiled-in files, sorted by path.
pub fn embedded() -> &'static [Asset] {
    ASSETS
}

/// Returns the hash of the compiled-in files, which names the service worker's cache.
pub fn embedded_shell_hash() -> &'static str {
    SHELL_HASH
}

/// Finds a compiled-in file by its path under `/app/`.
pub fn embedded_file(path: &str) -> Option<&'static Asset> {
    ASSETS
        .binary_search_by(|a| a.path.cmp(path))
        .ok()
        .map(|i| &ASSETS[i])
}

/// Where the app's files come from.
#[derive(Debug, Clone)]
pub enum AppFiles {
    /// The files compiled into the binary (the default).
    Embedded,
    /// A folder read at every request (`web_dir`, for development).
    Folder(PathBuf),
}

impl AppFiles {
    /// Chooses the source the config names.
    pub fn from_config(web_dir: Option<&Path>) -> Self {
        web_dir.map_or(Self::Embedded, |d| Self::Folder(d.to_path_buf()))
    }
}

/// A file ready to send.
struct Found {
    bytes: Cow<'static, [u8]>,
    content_type: &'static str,
    etag: Cow<'static, str>,
}

/// Answers `/app`: the app lives at `/app/`, where its relative links resolve.
pub async fn app_root_redirect() -> Redirect {
    Redirect::permanent("/app/")
}

/// Answers `/app/`: the app's start page.
pub async fn app_index(State(files): State<AppFiles>, headers: HeaderMap) -> Response {
    serve(&files, "index.html", &headers).await
}

/// Answers `/app/{*path}`: one file of the app.
pub async fn app_file(
    State(files): State<AppFiles>,
    UrlPath(path): UrlPath<String>,
    headers: HeaderMap,
) -> Response {
    serve(&files, &path, &headers).await
}

async fn serve(files: &AppFiles, path: &str, headers: &HeaderMap) -> Response {
    if !files::is_app_file(path) {
        return not_found();
    }
    let found = match files {
        AppFiles::Embedded => embedded_file(path).map(|a| Found {
            bytes: Cow::Borrowed(a.bytes),
            content_type: a.content_type,
            etag: Cow::Borrowed(a.etag),
        }),
        AppFiles::Folder(dir) => {
            let dir = dir.clone();
            let path = path.to_owned();
            match tokio::task::spawn_blocking(move || read_from_folder(&dir, &path)).await {
                Ok(Ok(found)) => found,
                Ok(Err(e)) => {
                    tracing::error!("web_dir: {e}");
                    return StatusCode::INTERNAL_SERVER_ERROR.into_response();
                }
                Err(e) => {
                    tracing::error!("web_dir read task failed: {e}");
                    return StatusCode::INTERNAL_SERVER_ERROR.into_response();
                }
            }
        }
    };
    let Some(found) = found else {
        return not_found();
    };
    respond(found, &cache_control(path), headers)
}

/// Answers one of the server pages' own files (`/static/…`, compiled in with
/// `include_str!`) with its type, an ETag from its bytes and `no-cache`: pages name these
/// files without a version, so a browser must check them on every use (a 304 is cheap).
pub fn page_file(text: &'static str, content_type: &'static str, headers: &HeaderMap) -> Response {
    let found = Found {
        bytes: Cow::Borrowed(text.as_bytes()),
        content_type,
        etag: Cow::Owned(files::etag(text.as_bytes())),
    };
    respond(found, "no-cache", headers)
}

fn respond(found: Found, cache_control: &str, headers: &HeaderMap) -> Response {
    let cache = HeaderValue::from_str(cache_control).expect("an ASCII header value");
    let etag = HeaderValue::from_str(&found.etag).expect("an ETag is ASCII");
    if headers
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| matches_etag(v, &found.etag))
    {
        return (
            StatusCode::NOT_MODIFIED,
            [(header::ETAG, etag), (header::CACHE_CONTROL, cache)],
        )
            .into_response();
    }
    (
        [
            (
                header::CONTENT_TYPE,
                HeaderValue::from_static(found.content_type),
            ),
            (header::ETAG, etag),
            (header::CACHE_CONTROL, cache),
        ],
        Body::from(found.bytes),
    )
        .into_response()
}

/// Returns the `Cache-Control` for a file: pages, the worker and the manifest are
/// revalidated on every use (`no-cache`), so nothing stale starts the app.
pub fn cache_control(path: &str) -> String {
    let always_check =
        path == files::WORKER_PATH || path.ends_with(".html") || path.ends_with(".webmanifest");
    if always_check {
        "no-cache".to_owned()
    } else {
        format!("public, max-age={ASSET_MAX_AGE_S}")
    }
}

/// Tells whether an `If-None-Match` value names `etag` (weak comparison, RFC 9110 §13.1.2).
pub(crate) fn matches_etag(if_none_match: &str, etag: &str) -> bool {
    let bare = |t: &str| t.trim().trim_start_matches("W/").to_owned();
    let wanted = bare(etag);
    if_none_match
        .split(',')
        .any(|t| t.trim() == "*" || bare(t) == wanted)
}

fn not_found() -> Response {
    (
        StatusCode::NOT_FOUND,
        [(header::CONTENT_TYPE, "text/plain; charset=utf-8")],
        "no such file in the phone app",
    )
        .into_response()
}

/// Reads one file of a development folder; the worker is stamped with the hash of the
/// folder's files as they are now, by the same rule as the build.
fn read_from_folder(dir: &Path, path: &str) -> anyhow::Result<Option<Found>> {
    let file = dir.join(path);
    if !file.is_file() {
        return Ok(None);
    }
    let mut bytes = std::fs::read(&file)?;
    if path == files::WORKER_PATH {
        let mut all = Vec::new();
        collect_folder(dir, "", &mut all)?;
        let hash = files::shell_hash(all.iter().map(|(p, b)| (p.as_str(), b.as_slice())));
        let text = String::from_utf8(bytes)?;
        bytes = files::stamp_worker(&text, &hash)
            .ok_or_else(|| {
                anyhow::anyhow!("{} lacks {}", file.display(), files::SHELL_HASH_PLACEHOLDER)
            })?
            .into_bytes();
    }
    Ok(Some(Found {
        etag: Cow::Owned(files::etag(&bytes)),
        content_type: files::content_type(path),
        bytes: Cow::Owned(bytes),
    }))
}

fn collect_folder(
    dir: &Path,
    prefix: &str,
    all: &mut Vec<(String, Vec<u8>)>,
) -> anyhow::Result<()> {
    for entry in std::fs::read_dir(dir)? {
        let entry = entry?;
        let Ok(name) = entry.file_name().into_string() else {
            continue;
        };
        let path = format!("{prefix}{name}");
        if !files::is_app_file(&path) {
            continue;
        }
        let kind = entry.file_type()?;
        if kind.is_dir() {
            collect_folder(&entry.path(), &format!("{path}/"), all)?;
        } else if kind.is_file() {
            anyhow::ensure!(
                all.len() < MAX_DEV_FILES,
                "{} holds more than {MAX_DEV_FILES} files",
                dir.display()
            );
            all.push((path, std::fs::read(entry.path())?));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_binary_carries_the_app_shell_and_a_stamped_worker() {
        for path in [
            "index.html",
            "app.css",
            "manifest.webmanifest",
            "js/app.js",
            "icons/icon-192.png",
            "sw.js",
        ] {
            assert!(embedded_file(path).is_some(), "{path} is compiled in");
        }
        let sw = std::str::from_utf8(embedded_file("sw.js").unwrap().bytes).unwrap();
        assert!(!sw.contains(files::SHELL_HASH_PLACEHOLDER));
        assert!(sw.contains(embedded_shell_hash()));
    }

    #[test]
    fn the_shell_hash_changes_with_any_byte_or_name_and_not_with_order() {
        let a = files::shell_hash([("a.js", &b"x"[..]), ("b.css", &b"y"[..])]);
        assert_eq!(
            a,
            files::shell_hash([("b.css", &b"y"[..]), ("a.js", &b"x"[..])])
        );
        assert_ne!(
            a,
            files::shell_hash([("a.js", &b"x"[..]), ("b.css", &b"z"[..])])
        );
        assert_ne!(
            a,
            files::shell_hash([("a.js", &b"x"[..]), ("c.css", &b"y"[..])])
        );
        // Names and contents cannot slide into each other.
        assert_ne!(
            files::shell_hash([("ab", &b"c"[..])]),
            files::shell_hash([("a", &b"bc"[..])])
        );
    }

    #[test]
    fn only_the_apps_own_files_are_served() {
        for ok in ["index.html", "pkg/cairn_scan.js", "icons/icon.svg"] {
            assert!(files::is_app_file(ok), "{ok}");
        }
        for refused in [
            "",
            "../Cargo.toml",
            "js/../../x",
            ".git/config",
            "pkg/.gitignore",
            "node_modules/x.js",
            "a//b",
            "package.json",
            "a\\b",
        ] {
            assert!(!files::is_app_file(refused), "{refused:?}");
        }
    }

    #[test]
    fn an_if_none_match_list_is_compared_weakly() {
        let tag = "W/\"abc\"";
        assert!(matches_etag("\"abc\"", tag));
        assert!(matches_etag("W/\"x\", W/\"abc\"", tag));
        assert!(matches_etag("*", tag));
        assert!(!matches_etag("W/\"abd\"", tag));
    }
}
