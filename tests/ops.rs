//! Running Cairn for real: online backup and restore with the real binary while the
//! server takes writes, the health and readiness probes, the Prometheus figures,
//! request ids, and logs that never carry a password, PIN or token.

mod common;

use cairn::accounts::Role;
use common::{cairn_with_input, movement, spawn_app};
use serde_json::{Value, json};
use std::io::{BufRead, BufReader, Read};
use std::path::Path;
use std::process::{Command, Stdio};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

fn cairn(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .output()
        .expect("the cairn binary runs")
}

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).to_string()
}

fn batch(tag: &str, n: usize) -> (Vec<String>, Value) {
    let ids: Vec<String> = (0..n).map(|i| format!("{tag}-{i}")).collect();
    let rows: Vec<Value> = ids
        .iter()
        .enumerate()
        .map(|(i, id)| {
            let bin = if i % 2 == 0 { "A-01-01-1" } else { "A-01-02-1" };
            movement(
                id,
                bin,
                "S1",
                1 + (i % 7) as i64,
                "receipt",
                "2026-03-02T08:00:00Z",
            )
        })
        .collect();
    (ids, json!(rows))
}

fn count_of(db: &Path, sql: &str) -> i64 {
    let c = common::sqlite_file(db);
    c.query_row(sql, [], |r| r.get(0)).unwrap()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_backup_taken_while_movements_stream_in_restores_to_a_sound_balanced_copy() {
    if common::on_postgres() {
        eprintln!(
            "skipped on PostgreSQL: cairn backup/restore copy the SQLite file; PostgreSQL is \
             backed up with its own tools (deploy/postgres/README.md)"
        );
        return;
    }
    let app = Arc::new(spawn_app().await);
    app.small_site().await;
    let (ids_before, first) = batch("before", 400);
    let (s, b) = app.post("/api/v1/sites/T/movements", &first).await;
    assert_eq!(s, 200, "{b}");

    // Keep posting while the backup runs: the copy must be one consistent instant.
    let stop = Arc::new(AtomicBool::new(false));
    let writer = {
        let (app, stop) = (app.clone(), stop.clone());
        tokio::spawn(async move {
            let mut n = 0;
            while !stop.load(Ordering::SeqCst) {
                let (_, body) = batch(&format!("during-{n}"), 50);
                let (s, b) = app.post("/api/v1/sites/T/movements", &body).await;
                assert_eq!(s, 200, "{b}");
                n += 1;
            }
            n
        })
    };
    let dir = tempfile::tempdir().unwrap();
    let folder = dir.path().join("backups");
    std::fs::create_dir(&folder).unwrap();
    let db = app.db.display().to_string();
    let mut made = Vec::new();
    for _ in 0..3 {
        let out = tokio::task::spawn_blocking({
            let (db, folder) = (db.clone(), folder.display().to_string());
            move || cairn(&["backup", "--db", &db, "--to", &folder, "--keep", "2"])
        })
        .await
        .unwrap();
        assert!(out.status.success(), "{}", stderr(&out));
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains("integrity ok, balances ok"), "{text}");
        made.push(text);
    }
    stop.store(true, Ordering::SeqCst);
    let batches_during = writer.await.unwrap();
    assert!(
        batches_during > 0,
        "movements were posted during the backups"
    );

    // --keep 2 left the two newest.
    let mut kept: Vec<_> = std::fs::read_dir(&folder)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    kept.sort();
    assert_eq!(kept.len(), 2, "{kept:?}");
    assert!(made[2].contains("removed old backup"), "{}", made[2]);
    let newest = kept[1].clone();

    // Restore into a new file; the server's own open (migrations, WAL) accepts it.
    let restored = dir.path().join("restored.db");
    let out = cairn(&[
        "restore",
        "--from",
        &newest.display().to_string(),
        "--db",
        &restored.display().to_string(),
    ]);
    assert!(out.status.success(), "{}", stderr(&out));
    let said = String::from_utf8(out.stdout).unwrap();
    assert!(
        said.contains("backup: integrity ok, balances ok; copy: quick check ok"),
        "{said}"
    );
    let state = cairn::AppState::open(cairn::config::Config {
        db: restored.clone().into(),
        ..cairn::config::Config::default()
    })
    .expect("the restored copy opens as a Cairn database");
    state
        .store
        .ping()
        .await
        .expect("the restored copy is migrated");
    drop(state);
    let conn = common::sqlite_file(&restored);
    let ok: String = conn
        .query_row("pragma integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(ok, "ok");
    assert_eq!(
        cairn::backup::unbalanced_keys(&conn).unwrap(),
        0,
        "restored balances equal the sum of their movements"
    );
    let mut q = conn
        .prepare("select count(*) from movement where uid = ?1")
        .unwrap();
    for id in &ids_before {
        let n: i64 = q.query_row([id], |r| r.get(0)).unwrap();
        assert_eq!(
            n, 1,
            "movement {id}, acknowledged before the backup, is in the copy once"
        );
    }
    // Whole batches only: the copy holds a multiple of the batch sizes.
    let copied = count_of(&restored, "select count(*) from movement");
    assert_eq!(
        (copied - 400) % 50,
        0,
        "no batch is half in the copy ({copied})"
    );
    // The balance of a key equals its movements in the copy, independently summed.
    let sum: i64 = conn
        .query_row("select sum(qty) from movement", [], |r| r.get(0))
        .unwrap();
    let bal: i64 = conn
        .query_row("select sum(qty) from balance", [], |r| r.get(0))
        .unwrap();
    assert_eq!(sum, bal);

    // An existing database is replaced only with --force.
    let again = cairn(&[
        "restore",
        "--from",
        &newest.display().to_string(),
        "--db",
        &restored.display().to_string(),
    ]);
    assert!(!again.status.success());
    assert!(stderr(&again).contains("--force"), "{}", stderr(&again));
}

#[test]
fn a_damaged_backup_is_refused_and_nothing_is_created() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("live.db").display().to_string();
    assert!(
        cairn(&["site", "add", "--db", &db, "--code", "T", "--name", "T"])
            .status
            .success()
    );
    let copy = dir.path().join("copy.db");
    let out = cairn(&["backup", "--db", &db, "--to", &copy.display().to_string()]);
    assert!(out.status.success(), "{}", stderr(&out));
    // A backup never overwrites a file.
    let twice = cairn(&["backup", "--db", &db, "--to", &copy.display().to_string()]);
    assert!(!twice.status.success());
    // Scribble over the middle of the copy: its pages no longer make a database.
    let mut bytes = std::fs::read(&copy).unwrap();
    let len = bytes.len();
    for b in &mut bytes[len / 4..len * 3 / 4] {
        *b = 0xA5;
    }
    std::fs::write(&copy, bytes).unwrap();
    let target = dir.path().join("new.db");
    let out = cairn(&[
        "restore",
        "--from",
        &copy.display().to_string(),
        "--db",
        &target.display().to_string(),
    ]);
    assert!(!out.status.success(), "a damaged backup is refused");
    assert!(stderr(&out).contains("not sound"), "{}", stderr(&out));
    assert!(!target.exists(), "nothing was written");
}

/// Reads one figure (a line starting with `series `) from a metrics page.
fn figure(page: &str, series: &str) -> f64 {
    page.lines()
        .find_map(|l| l.strip_prefix(series)?.strip_prefix(' ')?.parse().ok())
        .unwrap_or(0.0)
}

#[tokio::test]
async fn the_probes_answer_and_metrics_count_requests_sync_events_and_database_time() {
    let app = spawn_app().await;
    app.small_site().await;
    let r = app
        .client
        .get(format!("{}/readyz", app.base))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let id = r.headers()["x-request-id"].to_str().unwrap().to_string();
    assert_eq!(
        uuid::Uuid::parse_str(&id).unwrap().get_version_num(),
        7,
        "a made id is a UUIDv7"
    );
    // A proxy's id is kept; a malformed one is replaced.
    for (sent, kept) in [("proxy-abc.123", true), (&*"x".repeat(100), false)] {
        let r = app
            .client
            .get(format!("{}/healthz", app.base))
            .header("x-request-id", sent)
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 200);
        assert_eq!(r.headers()["x-request-id"] == sent, kept, "{sent}");
    }

    let before = metrics_page(&app).await;
    // One sync with a valid bin-done event and one refused event.
    app.add_user(
        "cora",
        "T",
        &[Role::Counter],
        "test-only-password",
        Some("4821"),
    )
    .await;
    let token = app.enrol("cora", "4821", "T").await.json()["token"]
        .as_str()
        .unwrap()
        .to_string();
    let pass = uuid::Uuid::now_v7().to_string();
    let now = cairn::time::Timestamp::now().0;
    let body = json!({"device_clock": now, "rtt_ms": 50, "events": [
        {"id": pass, "at": now - 1_000, "user": "cora", "count": pass, "task": null,
         "bin": "A-01-01-1", "type": "bin_opened", "label": ""},
        {"id": uuid::Uuid::now_v7().to_string(), "at": now - 500, "user": "cora", "count": pass,
         "task": null, "bin": "Z-09-09-9", "type": "bin_done"}
    ]});
    let r = app
        .client
        .post(format!("{}/api/v1/sites/T/sync", app.base))
        .bearer_auth(&token)
        .json(&body)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let after = metrics_page(&app).await;

    for line in after.lines().filter(|l| !l.starts_with('#')) {
        let (_, value) = line.rsplit_once(' ').expect("a series and its value");
        assert!(value.parse::<f64>().is_ok(), "not a number: {line}");
    }
    let d = |s: &str| figure(&after, s) - figure(&before, s);
    assert!(d("cairn_sync_events_total{result=\"accepted\"}") >= 1.0);
    assert!(d("cairn_sync_events_total{result=\"rejected\"}") >= 1.0);
    assert!(d("cairn_sync_batch_events_count") >= 1.0);
    assert!(d("cairn_db_write_seconds_count") >= 1.0);
    // The sync was committed as a group (of one, here).
    assert!(d("cairn_db_write_group_size_count") >= 1.0);
    assert!(d("cairn_db_read_seconds_count") >= 1.0);
    assert!(
        d(
            "cairn_http_requests_total{method=\"POST\",route=\"/api/v1/sites/{site}/sync\",status=\"200\"}"
        ) >= 1.0,
        "{after}"
    );
    assert!(after.contains("# TYPE cairn_netting_runs_total counter"));

    // While the server stops, it is alive but not ready.
    app.state.draining.store(true, Ordering::SeqCst);
    let get = |path: &str| app.client.get(format!("{}{path}", app.base)).send();
    let r = get("/readyz").await.unwrap();
    assert_eq!(r.status(), 503);
    assert_eq!(r.json::<Value>().await.unwrap()["reason"], "shutting down");
    assert_eq!(get("/healthz").await.unwrap().status(), 200);
}

async fn metrics_page(app: &common::TestApp) -> String {
    let r = app
        .client
        .get(format!("{}/metrics", app.base))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    assert!(
        r.headers()["content-type"]
            .to_str()
            .unwrap()
            .starts_with("text/plain; version=0.0.4")
    );
    r.text().await.unwrap()
}

/// Splits text into runs of letters, digits and `_` (a token's alphabet).
fn words(text: &str) -> impl Iterator<Item = &str> {
    text.split(|c: char| !(c.is_ascii_alphanumeric() || c == '_'))
        .filter(|w| !w.is_empty())
}

#[tokio::test]
async fn structured_logs_carry_request_ids_and_never_a_password_pin_or_token() {
    const PASSWORD: &str = "test-only-Pw-9f3k2";
    const PIN: &str = "730519";
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("logs.db").display().to_string();
    assert!(
        cairn(&["site", "add", "--db", &db, "--code", "T", "--name", "T"])
            .status
            .success()
    );
    let out = cairn_with_input(
        &[
            "user",
            "add",
            "--db",
            &db,
            "--site",
            "T",
            "--name",
            "esme",
            "--roles",
            "counter,admin",
            "--with-pin",
            "--password-stdin",
        ],
        &format!("{PASSWORD}\n{PIN}\n"),
    );
    assert!(out.status.success(), "{}", stderr(&out));
    let mut child = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["serve", "--db", &db, "--listen", "127.0.0.1:0"])
        .args(["--secure-cookies", "false"])
        .env("CAIRN_LOG_FORMAT", "json")
        .env("RUST_LOG", "debug")
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let base = line
        .split(" at ")
        .nth(1)
        .unwrap()
        .trim()
        .trim_end_matches('/')
        .to_string();
    let client = reqwest::Client::builder()
        .redirect(reqwest::redirect::Policy::none())
        .build()
        .unwrap();
    // A wrong PIN, then the right one; the token used; a password sign-in.
    let enrol = |pin: &str| {
        client
            .post(format!("{base}/api/v1/devices"))
            .json(&json!({"user": "esme", "pin": pin, "site": "T", "device_name": "p"}))
            .send()
    };
    assert_eq!(enrol("000000").await.unwrap().status(), 401);
    let r = enrol(PIN).await.unwrap();
    assert_eq!(r.status(), 201);
    let token = r.json::<Value>().await.unwrap()["token"]
        .as_str()
        .unwrap()
        .to_string();
    let r = client
        .get(format!("{base}/api/v1/device"))
        .bearer_auth(&token)
        .header("x-request-id", "trace-me-42")
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let r = client
        .post(format!("{base}/api/v1/sites/T/sync"))
        .bearer_auth(&token)
        .body("{ not json")
        .header("content-type", "application/json")
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 400);
    let page = client.get(format!("{base}/sign-in")).send().await.unwrap();
    let form_cookie = page
        .headers()
        .get_all("set-cookie")
        .iter()
        .filter_map(|v| v.to_str().ok())
        .find_map(|v| v.strip_prefix("cairn_form="))
        .map(|v| v.split(';').next().unwrap().to_string())
        .unwrap();
    let html = page.text().await.unwrap();
    let csrf = common::form_token(&html).unwrap();
    let r = client
        .post(format!("{base}/sign-in"))
        .header("cookie", format!("cairn_form={form_cookie}"))
        .form(&[
            ("csrf", csrf.as_str()),
            ("user", "esme"),
            ("password", PASSWORD),
        ])
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 303);
    let session = r
        .headers()
        .get_all("set-cookie")
        .iter()
        .filter_map(|v| v.to_str().ok())
        .find_map(|v| v.strip_prefix("cairn_session="))
        .map(|v| v.split(';').next().unwrap().to_string())
        .unwrap();

    // SIGTERM: the server stops gracefully and says so.
    let pid = child.id().to_string();
    assert!(
        Command::new("kill")
            .args(["-TERM", &pid])
            .status()
            .unwrap()
            .success()
    );
    let status = child.wait().unwrap();
    assert!(status.success(), "a SIGTERM stop exits 0: {status}");
    let mut logs = String::new();
    child
        .stderr
        .take()
        .unwrap()
        .read_to_string(&mut logs)
        .unwrap();

    let lines: Vec<Value> = logs
        .lines()
        .map(|l| serde_json::from_str(l).unwrap_or_else(|_| panic!("not JSON: {l}")))
        .collect();
    let answered: Vec<&Value> = lines
        .iter()
        .filter(|l| l["message"] == "answered")
        .collect();
    assert!(answered.len() >= 6, "one line per request: {logs}");
    assert!(
        answered
            .iter()
            .any(|l| l["span"]["id"] == "trace-me-42" && l["span"]["route"] == "/api/v1/device"),
        "the proxy's request id is in the log line: {logs}"
    );
    assert!(
        lines
            .iter()
            .any(|l| l["message"].as_str().unwrap_or("").contains("stopping"))
    );
    let secrets = [
        PASSWORD,
        PIN,
        token.as_str(),
        session.as_str(),
        csrf.as_str(),
    ];
    for secret in secrets {
        // Tokens and PINs are whole words of their alphabet; look for them as words
        // and as substrings.
        assert!(!logs.contains(secret), "a secret is in the logs: {logs}");
        assert!(words(&logs).all(|w| w != secret));
    }
    let secret_tail = &token[token.len() - 12..];
    assert!(!logs.contains(secret_tail), "no part of the token either");
}

#[tokio::test]
async fn the_probes_ignore_a_token_sent_with_them() {
    // A monitor may send its usual Authorization header to every URL it watches; the
    // public probes answer it as they answer anyone, whether the token is good or stale.
    let app = spawn_app().await;
    app.small_site().await;
    let good = app.token.get().unwrap().clone();
    for token in [good.as_str(), "cairn-api-not-a-token", "garbage"] {
        for probe in ["/healthz", "/readyz"] {
            let r = app
                .client
                .get(format!("{}{probe}", app.base))
                .bearer_auth(token)
                .send()
                .await
                .unwrap();
            assert_eq!(r.status(), 200, "{probe} with token {token}");
        }
    }
    // A route that is not public still refuses a stale token.
    let r = app
        .client
        .get(format!("{}/api/v1/sites/T", app.base))
        .bearer_auth("garbage")
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 401);
    // A known path asked with a method it does not take says which it takes.
    let r = app
        .client
        .get(format!("{}/api/v1/sites/T/short-picks", app.base))
        .bearer_auth(&good)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 405);
    assert!(r.text().await.unwrap().contains("takes POST"));
}
