//! Compiles the phone app into the binary and records which build this is.
//!
//! - Every file of `client/web` (the shell, icons, manifest, the service worker and the
//!   wasm modules with their glue in `pkg/`) becomes an entry of a table of
//!   `include_bytes!` in `$OUT_DIR/web_assets.rs`, with its content type and ETag. The
//!   service worker is stamped with the hash of the whole set, which names its cache.
//! - A release build without the wasm modules stops and names the command that builds
//!   them; a debug build warns and embeds the rest (the scanner then answers 404).
//! - `CAIRN_GIT_COMMIT` (short hash, `-dirty` for a changed tree, `unknown` without git)
//!   and `CAIRN_BUILD_DATE` (UTC, or `SOURCE_DATE_EPOCH`'s day) for `cairn --version`.

use std::path::{Path, PathBuf};
use std::process::Command;

#[allow(dead_code)]
#[path = "src/web/files.rs"]
mod files;

/// The wasm module the app cannot start without (its glue sits beside it).
const REQUIRED_WASM: &str = "pkg/cairn_scan_bg.wasm";

/// The command that builds the wasm modules into `client/web/pkg/`.
const WASM_COMMAND: &str = "cargo xtask wasm";

fn main() {
    let manifest = PathBuf::from(std::env::var_os("CARGO_MANIFEST_DIR").expect("set by cargo"));
    let out = PathBuf::from(std::env::var_os("OUT_DIR").expect("set by cargo"));
    let web = manifest.join("../client/web");
    for watched in [
        "../client/web",
        "src",
        "templates",
        "static",
        "Cargo.toml",
        "../migrations",
    ] {
        println!("cargo:rerun-if-changed={watched}");
    }
    println!("cargo:rerun-if-env-changed=SOURCE_DATE_EPOCH");

    embed_app(&web, &out);
    println!("cargo:rustc-env=CAIRN_GIT_COMMIT={}", git_commit(&manifest));
    println!("cargo:rustc-env=CAIRN_BUILD_DATE={}", build_date());
}

fn embed_app(web: &Path, out: &Path) {
    let mut paths = Vec::new();
    walk(web, "", &mut paths);
    paths.sort();
    let release = std::env::var("PROFILE").as_deref() == Ok("release");
    let has_wasm = paths.iter().any(|p| p == REQUIRED_WASM);
    if !has_wasm {
        if release {
            eprintln!(
                "\nerror: the phone app's wasm is not built ({} is missing).\n\
                 Run `{WASM_COMMAND}` first, then build again (`cargo xtask dist` does both).\n",
                web.join(REQUIRED_WASM).display()
            );
            std::process::exit(1);
        }
        println!(
            "cargo:warning=client/web/{REQUIRED_WASM} is missing: this debug build's phone app has no scanner (run `{WASM_COMMAND}`)"
        );
    }
    let contents: Vec<Vec<u8>> = paths
        .iter()
        .map(|p| {
            std::fs::read(web.join(p)).unwrap_or_else(|e| panic!("reading client/web/{p}: {e}"))
        })
        .collect();
    let hash = files::shell_hash(
        paths
            .iter()
            .map(String::as_str)
            .zip(contents.iter().map(Vec::as_slice)),
    );

    let mut table = String::from("&[\n");
    for (path, bytes) in paths.iter().zip(&contents) {
        let (source, bytes) = if path == files::WORKER_PATH {
            let text = String::from_utf8(bytes.clone()).expect("client/web/sw.js is UTF-8");
            let stamped = files::stamp_worker(&text, &hash).unwrap_or_else(|| {
                panic!(
                    "client/web/sw.js must name its cache with {}",
                    files::SHELL_HASH_PLACEHOLDER
                )
            });
            let stamped_path = out.join("sw.js");
            std::fs::write(&stamped_path, &stamped).expect("writing the stamped sw.js");
            (stamped_path, stamped.into_bytes())
        } else {
            (web.join(path), bytes.clone())
        };
        table.push_str(&format!(
            "    Asset {{ path: {path:?}, bytes: include_bytes!({:?}), content_type: {:?}, etag: {:?} }},\n",
            source.canonicalize().expect("the file was just read").display().to_string(),
            files::content_type(path),
            files::etag(&bytes),
        ));
    }
    table.push(']');
    let code = format!(
        "/// The app's files, sorted by path.\npub(super) static ASSETS: &[Asset] = {table};\n\
         /// The hash of every file above, which names the service worker's cache.\n\
         pub(super) const SHELL_HASH: &str = {hash:?};\n"
    );
    std::fs::write(out.join("web_assets.rs"), code).expect("writing web_assets.rs");
}

/// Collects the app's files under `dir` as paths relative to the app's folder.
fn walk(dir: &Path, prefix: &str, paths: &mut Vec<String>) {
    let entries =
        std::fs::read_dir(dir).unwrap_or_else(|e| panic!("reading {}: {e}", dir.display()));
    for entry in entries {
        let entry = entry.expect("a readable folder entry");
        let name = entry
            .file_name()
            .into_string()
            .expect("file names under client/web are UTF-8");
        let path = format!("{prefix}{name}");
        if !files::is_app_file(&path) {
            continue;
        }
        let kind = entry.file_type().expect("a file type");
        if kind.is_dir() {
            walk(&entry.path(), &format!("{path}/"), paths);
        } else if kind.is_file() {
            paths.push(path);
        }
    }
}

/// Returns the short commit hash, with `-dirty` when tracked files differ from it.
fn git_commit(manifest: &Path) -> String {
    let git = |args: &[&str]| -> Option<String> {
        let out = Command::new("git")
            .current_dir(manifest)
            .env("GIT_OPTIONAL_LOCKS", "0")
            .args(args)
            .output()
            .ok()?;
        out.status
            .success()
            .then(|| String::from_utf8_lossy(&out.stdout).trim().to_owned())
    };
    let Some(commit) = git(&["rev-parse", "--short=10", "HEAD"]) else {
        return "unknown".to_owned();
    };
    // Rebuild when HEAD moves (a commit, a checkout). Not on git's index, which `git status`
    // refreshes: that would recompile the server after every look at the tree. Edits are
    // noticed through the source folders main() watches.
    if let Some(p) = git(&["rev-parse", "--git-path", "HEAD"]) {
        watch_if_present(manifest, &p);
    }
    if let Some(reference) = git(&["symbolic-ref", "-q", "HEAD"]) {
        if let Some(p) = git(&["rev-parse", "--git-path", &reference]) {
            watch_if_present(manifest, &p);
        }
        if let Some(p) = git(&["rev-parse", "--git-path", "packed-refs"]) {
            watch_if_present(manifest, &p);
        }
    }
    let dirty =
        git(&["status", "--porcelain", "--untracked-files=no"]).is_some_and(|s| !s.is_empty());
    if dirty {
        format!("{commit}-dirty")
    } else {
        commit
    }
}

fn watch_if_present(manifest: &Path, path: &str) {
    let path = manifest.join(path);
    if path.exists() {
        println!("cargo:rerun-if-changed={}", path.display());
    }
}

/// Returns the build's day (UTC) as `YYYY-MM-DD`: `SOURCE_DATE_EPOCH`'s when set, so a
/// rebuild of the same tree can be byte-for-byte the same.
fn build_date() -> String {
    let secs = std::env::var("SOURCE_DATE_EPOCH")
        .ok()
        .and_then(|s| s.trim().parse::<i64>().ok())
        .unwrap_or_else(|| {
            std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(0, |d| d.as_secs() as i64)
        });
    let (y, m, d) = civil_date(secs.div_euclid(86_400));
    format!("{y:04}-{m:02}-{d:02}")
}

/// Converts days since 1970-01-01 to a proleptic Gregorian (year, month, day).
fn civil_date(days: i64) -> (i64, u32, u32) {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1_460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let month = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let year = yoe + era * 400 + i64::from(month <= 2);
    (year, month, day)
}
