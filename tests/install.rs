//! One file to install: the binary serves the whole phone app with no source tree beside
//! it, with content types, ETags and cache rules; it says which build it is
//! (`--version`, `/readyz`, the pages' footer, `/metrics`); it writes its own shell
//! completions and manual page.

mod common;

use common::spawn_app;
use serde_json::Value;
use std::io::{BufRead, BufReader, Write};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

/// The app's source folder.
fn web_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../client/web")
}

/// The binary under test: `CAIRN_TEST_BIN` (the release binary, from `cargo xtask dist`)
/// or the one cargo built for this test.
fn binary() -> PathBuf {
    std::env::var_os("CAIRN_TEST_BIN")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_BIN_EXE_cairn")))
}

/// Reads a built file of the app, saying what to run when it is not there.
fn built(path: &str) -> Vec<u8> {
    let file = web_dir().join(path);
    std::fs::read(&file).unwrap_or_else(|e| {
        panic!(
            "{}: {e}; build the wasm modules first with `cargo xtask wasm`",
            file.display()
        )
    })
}

/// Lists the app's files under `dir` (relative paths), by the rule the server uses.
fn app_files(dir: &Path, prefix: &str, out: &mut Vec<String>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let entry = entry.unwrap();
        let path = format!("{prefix}{}", entry.file_name().to_str().unwrap());
        if !cairn::web::files::is_app_file(&path) {
            continue;
        }
        if entry.file_type().unwrap().is_dir() {
            app_files(&entry.path(), &format!("{path}/"), out);
        } else {
            out.push(path);
        }
    }
}

/// Takes the cache name's hash out of a served `sw.js`.
fn worker_hash(sw: &str) -> String {
    let start = sw
        .find("const SHELL_HASH = \"")
        .expect("sw.js names its hash")
        + "const SHELL_HASH = \"".len();
    sw[start..].split('"').next().unwrap().to_owned()
}

/// Tells whether this process may make a private mount namespace (root, or the capability).
fn can_hide_folders() -> bool {
    let probe = tempfile::tempdir().unwrap();
    Command::new("unshare")
        .args([
            "--mount",
            "--propagation",
            "private",
            "mount",
            "-t",
            "tmpfs",
            "none",
        ])
        .arg(probe.path())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success())
}

/// The serving process, stopped when dropped.
struct Served(std::process::Child);

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

#[tokio::test]
async fn the_binary_serves_the_app_with_the_source_folder_hidden() {
    if !can_hide_folders() {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI runs as root and must run this test: `unshare --mount` was refused"
        );
        println!(
            "SKIPPED the_binary_serves_the_app_with_the_source_folder_hidden: this user may not \
             make a private mount namespace (`unshare --mount` needs root); run it as root"
        );
        return;
    }
    let index = built("index.html");
    let scan_wasm = built("pkg/cairn_scan_bg.wasm");
    let scan_glue = built("pkg/cairn_scan.js");
    let camera_wasm = built("pkg/cairn_camera_bg.wasm");
    let worker = String::from_utf8(built("sw.js")).unwrap();

    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("t.db");
    let made = Command::new(binary())
        .args([
            "site",
            "add",
            "--code",
            "T",
            "--name",
            "Install test",
            "--time-zone",
            "UTC",
            "--db",
        ])
        .arg(&db)
        .output()
        .unwrap();
    assert!(made.status.success(), "{made:?}");
    let web = web_dir().canonicalize().unwrap();
    // In a mount namespace of its own, an empty tmpfs covers client/web; the shell checks
    // the folder is empty, then becomes the server.
    let mut child = Command::new("unshare")
        .args(["--mount", "--propagation", "private", "sh", "-c"])
        .arg(r#"mount -t tmpfs none "$1" && [ -z "$(ls -A "$1")" ] && shift && exec "$@""#)
        .arg("sh")
        .arg(&web)
        .arg(binary())
        .args(["serve", "--listen", "127.0.0.1:0", "--db"])
        .arg(&db)
        .env("RUST_LOG", "warn")
        .stdout(Stdio::piped())
        .spawn()
        .expect("unshare runs");
    let stdout = child.stdout.take().unwrap();
    let served = Served(child);
    let mut banner = String::new();
    BufReader::new(stdout).read_line(&mut banner).unwrap();
    let base = banner
        .split(" at ")
        .nth(1)
        .unwrap_or_else(|| panic!("the server did not start: {banner:?}"))
        .trim()
        .trim_end_matches('/')
        .to_owned();

    let client = reqwest::Client::new();
    let get = |path: &str| {
        let url = format!("{base}{path}");
        let client = client.clone();
        async move {
            let r = client.get(&url).send().await.unwrap();
            assert_eq!(r.status(), 200, "{url}");
            r.bytes().await.unwrap().to_vec()
        }
    };
    assert_eq!(get("/app/").await, index);
    assert_eq!(get("/app/pkg/cairn_scan_bg.wasm").await, scan_wasm);
    assert_eq!(get("/app/pkg/cairn_scan.js").await, scan_glue);
    assert_eq!(get("/app/pkg/cairn_camera_bg.wasm").await, camera_wasm);
    let sw = String::from_utf8(get("/app/sw.js").await).unwrap();
    let hash = worker_hash(&sw);
    assert_eq!(hash.len(), 16);
    assert!(hash.bytes().all(|b| b.is_ascii_hexdigit()), "{hash}");
    assert_eq!(
        sw,
        worker.replace(cairn::web::files::SHELL_HASH_PLACEHOLDER, &hash),
        "sw.js is the built file with its cache name stamped"
    );
    drop(served);
}

#[tokio::test]
async fn every_file_of_the_app_folder_is_compiled_in_byte_for_byte() {
    let app = spawn_app().await;
    let mut paths = Vec::new();
    app_files(&web_dir(), "", &mut paths);
    assert!(
        paths.iter().any(|p| p == "pkg/cairn_scan_bg.wasm"),
        "build the wasm modules first with `cargo xtask wasm`"
    );
    assert_eq!(paths.len(), cairn::web::embedded().len(), "{paths:?}");
    for path in paths.iter().filter(|p| *p != "sw.js") {
        let r = app
            .client
            .get(format!("{}/app/{path}", app.base))
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 200, "{path}");
        assert_eq!(r.bytes().await.unwrap().to_vec(), built(path), "{path}");
    }
}

#[tokio::test]
async fn app_files_carry_their_type_an_etag_and_a_cache_rule() {
    let app = spawn_app().await;
    let head = |path: &str| {
        let url = format!("{}/app/{path}", app.base);
        let client = app.client.clone();
        async move {
            let r = client.get(&url).send().await.unwrap();
            assert_eq!(r.status(), 200, "{url}");
            let h = |name: &str| r.headers()[name].to_str().unwrap().to_owned();
            (h("content-type"), h("etag"), h("cache-control"))
        }
    };
    // Types: the IANA media types registry; text/javascript per RFC 9239; the manifest's
    // per the W3C Web App Manifest; application/wasm per the WebAssembly Web API.
    for (path, wanted, cache) in [
        ("", "text/html; charset=utf-8", "no-cache"),
        ("index.html", "text/html; charset=utf-8", "no-cache"),
        ("sw.js", "text/javascript; charset=utf-8", "no-cache"),
        (
            "manifest.webmanifest",
            "application/manifest+json",
            "no-cache",
        ),
        ("app.css", "text/css; charset=utf-8", "public, max-age=3600"),
        (
            "js/app.js",
            "text/javascript; charset=utf-8",
            "public, max-age=3600",
        ),
        ("icons/icon.svg", "image/svg+xml", "public, max-age=3600"),
        ("icons/icon-192.png", "image/png", "public, max-age=3600"),
        (
            "pkg/cairn_scan_bg.wasm",
            "application/wasm",
            "public, max-age=3600",
        ),
    ] {
        let (kind, etag, cache_control) = head(path).await;
        assert_eq!(
            (kind.as_str(), cache_control.as_str()),
            (wanted, cache),
            "{path}"
        );
        assert!(
            etag.starts_with("W/\"") && etag.len() == 36,
            "{path}: {etag}"
        );
    }
    // The ETag is the content's: different files differ, and asking again with it is a 304.
    let (_, css, _) = head("app.css").await;
    let (_, js, _) = head("js/app.js").await;
    assert_ne!(css, js);
    let r = app
        .client
        .get(format!("{}/app/app.css", app.base))
        .header("if-none-match", &css)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 304);
    assert!(r.bytes().await.unwrap().is_empty());
    let r = app
        .client
        .get(format!("{}/app/app.css", app.base))
        .header("if-none-match", &js)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    // The pages' own files too: typed, tagged, checked on every use.
    for (path, wanted) in [
        ("/static/cairn.css", "text/css; charset=utf-8"),
        ("/static/count-list.js", "text/javascript; charset=utf-8"),
    ] {
        let r = app
            .client
            .get(format!("{}{path}", app.base))
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 200, "{path}");
        assert_eq!(r.headers()["content-type"], wanted, "{path}");
        assert_eq!(r.headers()["cache-control"], "no-cache", "{path}");
        let etag = r.headers()["etag"].to_str().unwrap().to_owned();
        let again = app
            .client
            .get(format!("{}{path}", app.base))
            .header("if-none-match", &etag)
            .send()
            .await
            .unwrap();
        assert_eq!(again.status(), 304, "{path}");
    }
    // The bare path leads to the app; no file outside the app's own is reachable.
    let r = app
        .client
        .get(format!("{}/app", app.base))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 308);
    assert_eq!(r.headers()["location"], "/app/");
    for missing in [
        "/app/nothing.js",
        "/app/js/",
        "/app/.gitignore",
        "/app/%2e%2e/Cargo.toml",
    ] {
        let r = app
            .client
            .get(format!("{}{missing}", app.base))
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 404, "{missing}");
    }
}

#[tokio::test]
async fn the_development_folder_serves_edits_and_the_worker_names_a_new_cache() {
    let folder = tempfile::tempdir().unwrap();
    let mut paths = Vec::new();
    app_files(&web_dir(), "", &mut paths);
    for path in &paths {
        let to = folder.path().join(path);
        std::fs::create_dir_all(to.parent().unwrap()).unwrap();
        std::fs::copy(web_dir().join(path), &to).unwrap();
    }
    let dev = folder.path().to_path_buf();
    let app = common::spawn_app_with(|c| c.web_dir = Some(dev)).await;
    let text = |path: &'static str| {
        let url = format!("{}/app/{path}", app.base);
        let client = app.client.clone();
        async move { client.get(&url).send().await.unwrap().text().await.unwrap() }
    };
    let before = worker_hash(&text("sw.js").await);
    assert_eq!(
        before,
        cairn::web::embedded_shell_hash(),
        "the same files hash the same, read from a folder or compiled in"
    );
    let mut css = std::fs::OpenOptions::new()
        .append(true)
        .open(folder.path().join("app.css"))
        .unwrap();
    writeln!(css, "/* edited */").unwrap();
    drop(css);
    assert!(text("app.css").await.ends_with("/* edited */\n"));
    let after = worker_hash(&text("sw.js").await);
    assert_ne!(after, before, "an edited shell file is a new cache name");
}

/// Returns the newest migration's number from the file names in `migrations/`.
fn newest_migration_file() -> i64 {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../migrations");
    std::fs::read_dir(dir)
        .unwrap()
        .filter_map(|e| {
            let name = e.unwrap().file_name().into_string().unwrap();
            name.split('_').next()?.parse::<i64>().ok()
        })
        .max()
        .expect("migrations/ holds numbered files")
}

#[test]
fn the_version_names_the_commit_the_build_day_and_the_schema() {
    let out = Command::new(binary()).arg("--version").output().unwrap();
    assert!(out.status.success());
    let line = String::from_utf8(out.stdout).unwrap();
    let line = line.trim();
    let rest = line
        .strip_prefix(&format!("cairn {} (commit ", env!("CARGO_PKG_VERSION")))
        .unwrap_or_else(|| panic!("{line}"));
    let (commit, rest) = rest
        .split_once(", built ")
        .unwrap_or_else(|| panic!("{line}"));
    let (day, rest) = rest
        .split_once(", schema ")
        .unwrap_or_else(|| panic!("{line}"));
    let schema = rest.strip_suffix(')').unwrap_or_else(|| panic!("{line}"));

    let hash = commit.strip_suffix("-dirty").unwrap_or(commit);
    assert!(
        hash.len() >= 7 && hash.bytes().all(|b| b.is_ascii_hexdigit()),
        "{line}"
    );
    let head = Command::new("git")
        .args(["rev-parse", "HEAD"])
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .expect("git runs");
    let head = String::from_utf8(head.stdout).unwrap();
    assert!(head.starts_with(hash), "{line}: HEAD is {head}");
    assert!(
        day.len() == 10 && chrono::NaiveDate::parse_from_str(day, "%Y-%m-%d").is_ok(),
        "{line}"
    );
    assert_eq!(
        schema.parse::<i64>().unwrap(),
        newest_migration_file(),
        "{line}"
    );
}

#[tokio::test]
async fn readyz_and_the_pages_footer_name_the_same_build_as_the_version() {
    let app = spawn_app().await;
    let (status, ready) = app.get("/readyz").await;
    assert_eq!(status, 200);
    let build = &ready["build"];
    assert_eq!(build["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(build["schema_version"], newest_migration_file());
    let line = cairn::build_info::describe();
    for field in ["commit", "build_date"] {
        let v = build[field].as_str().unwrap();
        assert!(!v.is_empty() && line.contains(v), "{field} {v} in {line}");
    }
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("--version")
        .output()
        .unwrap();
    assert_eq!(
        String::from_utf8(out.stdout).unwrap().trim(),
        format!("cairn {line}")
    );
    let page = app
        .client
        .get(format!("{}/sign-in", app.base))
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    assert!(
        page.contains(&format!("<footer>Cairn {line}</footer>")),
        "{page}"
    );
}

/// The exposition parser CI installs (.ci/run pins it).
const PARSER_PACKAGE: &str = "prometheus-client==0.26.0";

#[tokio::test]
async fn the_metrics_page_parses_with_an_outside_parser_and_names_the_build() {
    let app = spawn_app().await;
    app.get("/readyz").await;
    let page = app
        .client
        .get(format!("{}/metrics", app.base))
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    // The outside check: Python prometheus_client's text-format parser
    // (prometheus_client.parser.text_string_to_metric_families).
    let script = r#"
import json, sys
from prometheus_client.parser import text_string_to_metric_families
families = {}
for f in text_string_to_metric_families(sys.stdin.read()):
    families[f.name] = {"type": f.type, "samples": [[s.name, s.labels, s.value] for s in f.samples]}
print(json.dumps(families))
"#;
    let mut child = Command::new("python3")
        .args(["-c", script])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("python3 runs");
    child
        .stdin
        .take()
        .unwrap()
        .write_all(page.as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    assert!(
        out.status.success(),
        "the parser refused the page (needs `pip install {PARSER_PACKAGE}`): {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let families: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(families["cairn_http_requests"]["type"], "counter");
    assert_eq!(
        families["cairn_http_request_duration_seconds"]["type"],
        "histogram"
    );
    let info = &families["cairn_build_info"];
    assert_eq!(info["type"], "gauge");
    let sample = &info["samples"][0];
    assert_eq!(sample[1]["commit"], cairn::build_info::COMMIT);
    assert_eq!(sample[1]["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(
        sample[1]["schema_version"],
        newest_migration_file().to_string()
    );
    assert_eq!(sample[2], 1.0);
}

#[test]
fn the_binary_writes_shell_completions_and_a_manual_page() {
    let run = |args: &[&str]| {
        let out = Command::new(binary()).args(args).output().unwrap();
        assert!(out.status.success(), "{args:?}");
        String::from_utf8(out.stdout).unwrap()
    };
    let bash = run(&["completions", "bash"]);
    // bash itself is the outside check of the script's syntax.
    let mut check = Command::new("bash")
        .arg("-n")
        .stdin(Stdio::piped())
        .spawn()
        .expect("bash runs");
    check
        .stdin
        .take()
        .unwrap()
        .write_all(bash.as_bytes())
        .unwrap();
    assert!(
        check.wait().unwrap().success(),
        "bash -n accepts the script"
    );
    for shell in ["bash", "zsh", "fish"] {
        let script = run(&["completions", shell]);
        for word in ["serve", "backup", "completions"] {
            assert!(script.contains(word), "{shell} lacks {word}");
        }
    }
    let man = run(&["man"]);
    assert!(
        man.starts_with(".ie") || man.contains(".TH cairn 1"),
        "{man}"
    );
    assert!(man.contains("serve"));
    let refused = Command::new(binary())
        .args(["completions", "powershell"])
        .output()
        .unwrap();
    assert!(!refused.status.success());
}
