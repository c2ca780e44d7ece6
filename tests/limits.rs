//! The server's own limits and what it tells browsers, over real HTTP: the cap
//! on concurrent password and PIN hashing, the request-head and request-body
//! deadlines, the security headers, and the same-origin check of page forms.

mod common;

use cairn::accounts::Role;
use cairn::accounts::hashing::{BUSY_RETRY_AFTER_S, BUSY_TEXT};
use common::*;
use reqwest::Method;
use serde_json::json;
use std::time::{Duration, Instant};
use tokio::io::{AsyncReadExt as _, AsyncWriteExt as _};
use tokio::net::TcpStream;

/// The most a test waits for the server to close a connection it should
/// close; far above every limit the tests set, so only a server that never
/// closes it fails.
const CLOSE_BOUND: Duration = Duration::from_secs(20);

/// The sign-in form as a browser holds it: its pre-session cookie and token.
async fn sign_in_form(app: &TestApp) -> (String, String) {
    let page = app
        .send(Method::GET, "/sign-in", &Auth::Anonymous, Body::Empty)
        .await;
    assert_eq!(page.status, 200, "{}", page.text);
    (
        page.cookie("cairn_form").expect("the form cookie is set"),
        form_token(&page.text).expect("the form carries a token"),
    )
}

/// Posts the sign-in form with a valid cookie and token, plus `extra` headers.
async fn post_sign_in(
    app: &TestApp,
    extra: &[(&str, String)],
    user: &str,
    password: &str,
) -> reqwest::Response {
    let (cookie, csrf) = sign_in_form(app).await;
    let mut r = app
        .client
        .post(format!("{}/sign-in", app.base))
        .header("cookie", format!("cairn_form={cookie}"))
        .form(&[
            ("csrf", csrf.as_str()),
            ("user", user),
            ("password", password),
        ]);
    for (k, v) in extra {
        r = r.header(*k, v);
    }
    r.send().await.expect("the server answers")
}

fn own_origin(app: &TestApp) -> String {
    app.base.clone()
}

// ---- headers -------------------------------------------------------------

#[tokio::test]
async fn pages_api_answers_and_app_files_carry_the_security_headers() {
    let app = spawn_app().await;
    app.small_site().await;
    let page = app
        .send(Method::GET, "/sign-in", &Auth::Anonymous, Body::Empty)
        .await;
    let (api_status, _) = app.get("/api/v1/sites/T").await;
    assert_eq!(api_status, 200);
    let api = app
        .with_token(app.client.get(format!("{}/api/v1/sites/T", app.base)))
        .send()
        .await
        .unwrap();
    let refused = app
        .send(Method::GET, "/api/v1/device", &Auth::Anonymous, Body::Empty)
        .await;
    let missing = app
        .send(Method::GET, "/no/such/page", &Auth::Anonymous, Body::Empty)
        .await;
    let shell = app
        .client
        .get(format!("{}/app/index.html", app.base))
        .send()
        .await
        .unwrap();
    assert_eq!(shell.status(), 200, "the phone app's shell is served");
    let script = app
        .client
        .get(format!("{}/app/js/app.js", app.base))
        .send()
        .await
        .unwrap();
    assert_eq!(script.status(), 200);

    let everyone = [
        ("sign-in page", page.headers.clone()),
        ("API answer", api.headers().clone()),
        ("API refusal", refused.headers.clone()),
        ("not found", missing.headers.clone()),
        ("app shell", shell.headers().clone()),
        ("app script", script.headers().clone()),
    ];
    for (what, h) in &everyone {
        // The header names and values are those of the Fetch standard (nosniff),
        // CSP Level 3 (frame-ancestors) and the Referrer Policy spec.
        assert_eq!(h["x-content-type-options"], "nosniff", "{what}");
        assert_eq!(h["referrer-policy"], "same-origin", "{what}");
        assert_eq!(h["x-frame-options"], "DENY", "{what}");
        let csp = h["content-security-policy"].to_str().unwrap();
        assert!(csp.contains("frame-ancestors 'none'"), "{what}: {csp}");
        assert!(csp.contains("default-src 'none'"), "{what}: {csp}");
        assert!(!csp.contains("unsafe-inline"), "{what}: {csp}");
        assert!(!csp.contains("'unsafe-eval'"), "{what}: {csp}");
    }
    let page_csp = page.headers["content-security-policy"].to_str().unwrap();
    assert!(page_csp.contains("script-src 'self';"), "{page_csp}");
    assert!(!page_csp.contains("wasm-unsafe-eval"), "{page_csp}");
    let app_csp = shell.headers()["content-security-policy"].to_str().unwrap();
    assert!(
        app_csp.contains("script-src 'self' 'wasm-unsafe-eval'"),
        "the phone app compiles its scanner: {app_csp}"
    );
}

#[test]
fn no_page_template_or_app_page_has_inline_script_style_or_event_handlers() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let mut files = Vec::new();
    for dir in ["server/templates", "client/web"] {
        for entry in std::fs::read_dir(root.join(dir)).unwrap() {
            let path = entry.unwrap().path();
            if path.extension().is_some_and(|e| e == "html") {
                files.push(path);
            }
        }
    }
    assert!(files.len() > 10, "the templates were found: {files:?}");
    for path in files {
        let text = std::fs::read_to_string(&path).unwrap().to_ascii_lowercase();
        for (i, line) in text.lines().enumerate() {
            let at = format!("{}:{}", path.display(), i + 1);
            assert!(!line.contains("<style"), "{at}: inline style element");
            assert!(!line.contains(" style="), "{at}: style attribute");
            assert!(!line.contains("javascript:"), "{at}: javascript: URL");
            if line.contains("<script") {
                assert!(line.contains(" src="), "{at}: inline script");
            }
            for handler in [
                " onclick=",
                " onload=",
                " onsubmit=",
                " onchange=",
                " oninput=",
            ] {
                assert!(!line.contains(handler), "{at}: inline event handler");
            }
        }
    }
}

// ---- the origin of page forms -----------------------------------------------

#[tokio::test]
async fn a_sign_in_form_from_a_foreign_origin_is_refused_even_with_a_valid_token() {
    let app = spawn_app().await;
    app.small_site().await;
    let r = post_sign_in(
        &app,
        &[("origin", "https://elsewhere.example".into())],
        ROOT_USER,
        ROOT_PASSWORD,
    )
    .await;
    assert_eq!(r.status(), 403);
    assert!(
        r.headers().get("set-cookie").is_none(),
        "no session was started"
    );
    assert!(r.text().await.unwrap().contains("another site"));

    let r = post_sign_in(
        &app,
        &[("sec-fetch-site", "cross-site".into())],
        ROOT_USER,
        ROOT_PASSWORD,
    )
    .await;
    assert_eq!(r.status(), 403, "Sec-Fetch-Site alone says it is foreign");

    let r = post_sign_in(
        &app,
        &[
            ("origin", own_origin(&app)),
            ("sec-fetch-site", "same-origin".into()),
        ],
        ROOT_USER,
        ROOT_PASSWORD,
    )
    .await;
    assert_eq!(r.status(), 303, "the same origin signs in");
}

#[tokio::test]
async fn a_signed_in_form_from_a_foreign_origin_changes_nothing_and_the_same_origin_works() {
    let app = spawn_app().await;
    app.small_site().await;
    let s = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let sign_out = |origin: String| {
        app.client
            .post(format!("{}/sign-out", app.base))
            .header("cookie", format!("cairn_session={}", s.cookie))
            .header("origin", origin)
            .form(&[("csrf", s.csrf.as_str())])
            .send()
    };
    let r = sign_out("https://elsewhere.example".into()).await.unwrap();
    assert_eq!(r.status(), 403);
    let home = app
        .send(Method::GET, "/", &Auth::Session(s.clone()), Body::Empty)
        .await;
    assert_eq!(home.status, 200, "the session is still open");

    let r = sign_out("null".into()).await.unwrap();
    assert_eq!(r.status(), 403, "an opaque origin is foreign too");

    let r = sign_out(own_origin(&app)).await.unwrap();
    assert_eq!(r.status(), 303);
    let home = app
        .send(Method::GET, "/", &Auth::Session(s.clone()), Body::Empty)
        .await;
    assert_ne!(home.status, 200, "signed out");
}

#[tokio::test]
async fn api_calls_with_a_bearer_token_are_not_browser_forms_and_ignore_the_origin() {
    let app = spawn_app().await;
    app.small_site().await;
    let r = app
        .with_token(app.client.post(format!("{}/api/v1/sites/T/bins", app.base)))
        .header("origin", "https://elsewhere.example")
        .header("sec-fetch-site", "cross-site")
        .json(&json!([{"zone": "B", "aisle": 1, "bay": 1, "level": 1, "side": "L"}]))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200, "{}", r.text().await.unwrap());
}

// ---- the hashing cap ---------------------------------------------------------

#[tokio::test]
async fn with_every_hashing_turn_taken_sign_in_and_enrolment_answer_429_with_retry_after() {
    let app = spawn_app_with(|c| {
        c.max_concurrent_hashes = 1;
        c.hash_wait_ms = 50;
    })
    .await;
    app.small_site().await;
    app.add_people(&[("cora", &[Role::Counter], Some("4821"))])
        .await;
    let held = app
        .state
        .hashing
        .turn()
        .await
        .expect("the one turn is free");

    let r = post_sign_in(&app, &[], ROOT_USER, ROOT_PASSWORD).await;
    assert_eq!(r.status(), 429);
    assert_eq!(
        r.headers()["retry-after"],
        BUSY_RETRY_AFTER_S.to_string().as_str()
    );
    assert!(r.text().await.unwrap().contains(BUSY_TEXT));

    let a = app.enrol("cora", "4821", "T").await;
    assert_eq!(a.status, 429, "{}", a.text);
    assert_eq!(
        a.headers["retry-after"],
        BUSY_RETRY_AFTER_S.to_string().as_str()
    );
    assert_eq!(a.json()["error"], BUSY_TEXT);

    drop(held);
    // Turned-away attempts were not counted as failures: both work now.
    app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let a = app.enrol("cora", "4821", "T").await;
    assert_eq!(a.status, 201, "{}", a.text);
}

#[tokio::test]
async fn an_admin_adding_a_user_while_hashing_is_full_is_asked_to_retry_and_nothing_is_stored() {
    let app = spawn_app_with(|c| {
        c.max_concurrent_hashes = 1;
        c.hash_wait_ms = 50;
    })
    .await;
    app.small_site().await;
    let s = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let held = app.state.hashing.turn().await.unwrap();
    let auth = Auth::Session(s.clone());
    let add = || {
        app.send(
            Method::POST,
            "/sites/T/admin/users",
            &auth,
            Body::Form(vec![
                ("csrf".into(), s.csrf.clone()),
                ("name".into(), "ezra".into()),
                ("password".into(), "a long test-only password".into()),
                ("role".into(), "supervisor".into()),
            ]),
        )
    };
    let busy = add().await;
    assert_eq!(busy.status, 429, "{}", busy.text);
    assert!(busy.text.contains("busy"), "{}", busy.text);
    let users = app
        .send(
            Method::GET,
            "/sites/T/admin/users",
            &Auth::Session(s.clone()),
            Body::Empty,
        )
        .await;
    assert!(!users.text.contains("ezra"), "nothing was stored");
    drop(held);
    let made = add().await;
    assert!(made.status < 400, "{} {}", made.status, made.text);
}

// ---- connection deadlines -------------------------------------------------------

/// Reads until the server closes the connection; returns what it sent.
async fn read_to_close(stream: &mut TcpStream) -> String {
    let mut got = Vec::new();
    tokio::time::timeout(CLOSE_BOUND, stream.read_to_end(&mut got))
        .await
        .expect("the server closed the connection")
        .ok();
    String::from_utf8_lossy(&got).into_owned()
}

async fn connect(app: &TestApp) -> TcpStream {
    TcpStream::connect(app.base.trim_start_matches("http://"))
        .await
        .expect("the server accepts")
}

#[tokio::test]
async fn an_idle_connection_is_closed_after_the_head_timeout() {
    let app = spawn_app_with(|c| c.request_head_timeout_ms = 300).await;
    let mut idle = connect(&app).await;
    let started = Instant::now();
    let sent = read_to_close(&mut idle).await;
    assert!(started.elapsed() >= Duration::from_millis(300));
    assert!(!sent.contains("200 OK"), "{sent}");
}

#[tokio::test]
async fn a_kept_alive_connection_is_closed_once_idle_after_an_answer() {
    let app = spawn_app_with(|c| c.request_head_timeout_ms = 300).await;
    let mut conn = connect(&app).await;
    conn.write_all(b"GET /healthz HTTP/1.1\r\nHost: t\r\n\r\n")
        .await
        .unwrap();
    let sent = read_to_close(&mut conn).await;
    assert!(sent.starts_with("HTTP/1.1 200"), "{sent}");
}

#[tokio::test]
async fn a_request_head_that_stops_halfway_is_cut_off() {
    let app = spawn_app_with(|c| c.request_head_timeout_ms = 300).await;
    let mut conn = connect(&app).await;
    conn.write_all(b"GET /healthz HTTP/1.1\r\nHost: t\r\nX-Slow: ")
        .await
        .unwrap();
    let sent = read_to_close(&mut conn).await;
    assert!(!sent.contains("200"), "{sent}");
}

#[tokio::test]
async fn a_body_that_stops_coming_is_answered_408_and_its_connection_closed() {
    let app = spawn_app_with(|c| {
        c.request_body_timeout_ms = 300;
        // The head deadline is not what ends this request.
        c.request_head_timeout_ms = 60_000;
    })
    .await;
    let mut conn = connect(&app).await;
    let body = br#"{"user": "cora", "pin": "#;
    let head = "POST /api/v1/devices HTTP/1.1\r\nHost: t\r\nContent-Type: application/json\r\n\
                Content-Length: 200\r\n\r\n";
    conn.write_all(head.as_bytes()).await.unwrap();
    conn.write_all(body).await.unwrap();
    let sent = read_to_close(&mut conn).await;
    assert!(sent.starts_with("HTTP/1.1 408"), "{sent}");
    assert!(
        sent.to_ascii_lowercase().contains("connection: close"),
        "{sent}"
    );
    assert!(sent.contains("did not arrive in time"), "{sent}");
}

#[tokio::test]
async fn a_page_form_that_stops_coming_is_answered_408_too() {
    let app = spawn_app_with(|c| {
        c.request_body_timeout_ms = 300;
        c.request_head_timeout_ms = 60_000;
    })
    .await;
    let (cookie, _) = sign_in_form(&app).await;
    let mut conn = connect(&app).await;
    let head = format!(
        "POST /sign-in HTTP/1.1\r\nHost: t\r\nCookie: cairn_form={cookie}\r\n\
         Content-Type: application/x-www-form-urlencoded\r\nContent-Length: 500\r\n\r\nuser=ro"
    );
    conn.write_all(head.as_bytes()).await.unwrap();
    let sent = read_to_close(&mut conn).await;
    assert!(sent.starts_with("HTTP/1.1 408"), "{sent}");
}

// ---- a sign-in flood against the real binary ------------------------------------

/// Hashes the flooded server may run at once (set on its command line, so the
/// bound below does not depend on this machine's cores).
const FLOOD_HASHES: usize = 4;
/// Memory one argon2id hash holds, in MiB (`secret::HASH_MEMORY_KIB`).
const HASH_MIB: usize = 19;
/// What the server needs besides its hashes, in MiB: about 15 MiB measured at
/// rest, with room for allocator slack and a hundred requests in flight.
const FLOOD_OVERHEAD_MIB: usize = 64;

/// The real `cairn serve` on a fresh database and port 0; killed when dropped.
struct Served {
    child: std::process::Child,
    base: String,
    _dir: tempfile::TempDir,
}

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn serve_binary(env: &[(&str, String)]) -> Served {
    use std::io::BufRead as _;
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("flood.db").display().to_string();
    let made = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["site", "add", "--db", &db, "--code", "T", "--name", "T"])
        .output()
        .unwrap();
    assert!(made.status.success(), "{made:?}");
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["serve", "--db", &db, "--listen", "127.0.0.1:0"])
        .envs(env.iter().map(|(k, v)| (*k, v.as_str())))
        .env("CAIRN_SECURE_COOKIES", "false")
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let mut first = String::new();
    std::io::BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut first)
        .unwrap();
    let base = first
        .split(" at ")
        .nth(1)
        .expect("the server says where it listens")
        .trim()
        .trim_end_matches('/')
        .to_string();
    Served {
        child,
        base,
        _dir: dir,
    }
}

/// Reads one `Vm…` figure of a process from /proc, in KiB.
fn vm_kib(pid: u32, field: &str) -> usize {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).unwrap();
    status
        .lines()
        .find_map(|l| l.strip_prefix(field)?.strip_prefix(':'))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse().ok())
        .unwrap_or_else(|| panic!("{field} in /proc/{pid}/status"))
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_flood_of_wrong_sign_ins_from_five_addresses_stays_under_the_memory_bound() {
    let served = serve_binary(&[("CAIRN_MAX_CONCURRENT_HASHES", FLOOD_HASHES.to_string())]);
    let pid = served.child.id();
    let mut senders = Vec::new();
    for k in 1..=5u8 {
        // Five loopback addresses: the server sees five clients, and its
        // per-address throttle (20 failures) lets each send 20 to the hasher.
        let client = reqwest::Client::builder()
            .local_address(std::net::IpAddr::from([127, 0, 0, k]))
            .redirect(reqwest::redirect::Policy::none())
            .build()
            .unwrap();
        let page = client
            .get(format!("{}/sign-in", served.base))
            .send()
            .await
            .unwrap();
        let cookie = page
            .headers()
            .get_all("set-cookie")
            .iter()
            .filter_map(|v| v.to_str().ok())
            .find_map(|c| c.strip_prefix("cairn_form="))
            .and_then(|c| c.split(';').next())
            .unwrap()
            .to_string();
        let csrf = form_token(&page.text().await.unwrap()).unwrap();
        senders.push((client, cookie, csrf));
    }
    let rest_kib = vm_kib(pid, "VmRSS");
    let started = Instant::now();
    let mut flood = tokio::task::JoinSet::new();
    for (k, (client, cookie, csrf)) in senders.iter().enumerate() {
        for i in 0..20 {
            let r = client
                .post(format!("{}/sign-in", served.base))
                .header("cookie", format!("cairn_form={cookie}"))
                .form(&[
                    ("csrf", csrf.clone()),
                    // A new name each time, so no account lock stops the hashing.
                    ("user", format!("nobody-{k}-{i}")),
                    ("password", format!("wrong password {i}")),
                ]);
            flood.spawn(async move { r.send().await.map(|a| a.status().as_u16()) });
        }
    }
    let mut statuses = std::collections::BTreeMap::<u16, usize>::new();
    while let Some(done) = flood.join_next().await {
        let status = done.unwrap().expect("every sign-in is answered");
        *statuses.entry(status).or_default() += 1;
    }
    let took = started.elapsed();
    let peak_kib = vm_kib(pid, "VmHWM");
    let after_kib = vm_kib(pid, "VmRSS");
    let bound_mib = FLOOD_HASHES * HASH_MIB + FLOOD_OVERHEAD_MIB;
    eprintln!(
        "100 wrong sign-ins from 5 addresses in {took:?}: answers {statuses:?}; RSS at rest \
         {:.1} MiB, peak {:.1} MiB, after {:.1} MiB (bound {bound_mib} MiB)",
        rest_kib as f64 / 1024.0,
        peak_kib as f64 / 1024.0,
        after_kib as f64 / 1024.0,
    );
    assert_eq!(statuses.values().sum::<usize>(), 100);
    assert!(
        statuses.keys().all(|s| *s == 401 || *s == 429),
        "wrong (401) or busy (429), never anything else: {statuses:?}"
    );
    assert!(
        statuses.get(&401).is_some_and(|n| *n >= FLOOD_HASHES),
        "{statuses:?}"
    );
    assert!(
        peak_kib < bound_mib * 1024,
        "peak RSS {peak_kib} KiB is over the bound of {bound_mib} MiB"
    );
}

#[test]
fn a_limit_of_zero_in_the_environment_stops_cairn_serve_naming_the_setting() {
    for (var, setting) in [
        ("CAIRN_MAX_CONCURRENT_HASHES", "max_concurrent_hashes"),
        ("CAIRN_REQUEST_HEAD_TIMEOUT_MS", "request_head_timeout_ms"),
        ("CAIRN_REQUEST_BODY_TIMEOUT_MS", "request_body_timeout_ms"),
    ] {
        let dir = tempfile::tempdir().unwrap();
        let db = dir.path().join("zero.db").display().to_string();
        let made = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
            .args(["site", "add", "--db", &db, "--code", "T", "--name", "T"])
            .output()
            .unwrap();
        assert!(made.status.success());
        let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
            .args(["serve", "--db", &db, "--listen", "127.0.0.1:0"])
            .env(var, "0")
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .unwrap();
        let mut stderr = child.stderr.take().unwrap();
        let (tx, rx) = std::sync::mpsc::channel();
        std::thread::spawn(move || {
            let mut text = String::new();
            let _ = std::io::Read::read_to_string(&mut stderr, &mut text);
            let _ = tx.send(text);
        });
        // A server that accepted the setting would serve on and never close stderr.
        let text = rx.recv_timeout(CLOSE_BOUND);
        let _ = child.kill();
        let status = child.wait().unwrap();
        let text = text.unwrap_or_else(|_| panic!("cairn serve started with {var}=0"));
        assert!(!status.success(), "{var}: {text}");
        assert!(text.contains(setting), "{var}: {text}");
    }
}
