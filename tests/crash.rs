//! The server killed with SIGKILL during a stream of acknowledged movement batches
//! and phones' sync batches: after a restart every acknowledged movement and event is
//! present exactly once, each acknowledged line is one count line, balances equal the
//! sum of movements, and the file passes integrity_check.

mod common;

use common::cairn_with_input;
use serde_json::{Value, json};
use std::path::Path;
use std::process::Command;
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// Rounds of serve → load → kill.
const ROUNDS: u64 = 4;
/// Concurrent senders during each round.
const SENDERS: usize = 4;
/// Movements per batch.
const BATCH: usize = 100;
/// Phones syncing during each round, and events per sync request.
const PHONES: usize = 2;
const SYNC_BATCH: usize = 50;

fn cairn(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .output()
        .expect("the cairn binary runs")
}

/// Makes the host system's user and its integration token through the CLI.
fn host_token(db: &str) -> String {
    let out = cairn_with_input(
        &[
            "user",
            "add",
            "--db",
            db,
            "--site",
            "T",
            "--name",
            "host",
            "--roles",
            "inventory_manager",
            "--password-stdin",
        ],
        "test-only-host-password\n",
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let out = cairn(&[
        "user",
        "token",
        "--db",
        db,
        "--site",
        "T",
        "--name",
        "host",
        "--role",
        "inventory_manager",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap().trim().to_string()
}

fn setup(dir: &Path) -> String {
    let db = dir.join("crash.db").display().to_string();
    assert!(
        cairn(&["site", "add", "--db", &db, "--code", "T", "--name", "Crash"])
            .status
            .success()
    );
    let bins: String = (1..=20).map(|b| format!("A,1,{b},1,L\n")).collect();
    std::fs::write(
        dir.join("bins.csv"),
        format!("zone,aisle,bay,level,side\n{bins}"),
    )
    .unwrap();
    std::fs::write(
        dir.join("items.csv"),
        "sku,description,base_unit,unit_cost_minor\nS1,One,each,10\nS2,Two,each,20\n",
    )
    .unwrap();
    for kind in ["bins", "items"] {
        let out = cairn(&[
            "import",
            kind,
            "--db",
            &db,
            "--site",
            "T",
            &dir.join(format!("{kind}.csv")).display().to_string(),
        ]);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    db
}

/// Makes a counter with a phone PIN through the CLI.
fn counter(db: &str, name: &str) {
    let out = cairn_with_input(
        &[
            "user",
            "add",
            "--db",
            db,
            "--site",
            "T",
            "--name",
            name,
            "--roles",
            "counter",
            "--with-pin",
            "--password-stdin",
        ],
        "test-only-counter-password\n4821\n",
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// One sync request: a pass over a bin with its lines, all new ids.
fn sync_batch(user: &str) -> (Vec<String>, Vec<String>, Value) {
    let pass = uuid::Uuid::now_v7().to_string();
    let start = chrono_now_ms() - 60_000;
    let mut ids = vec![pass.clone()];
    let mut lines = Vec::new();
    let mut events = vec![json!({"id": pass, "at": start, "user": user, "count": pass,
        "task": null, "bin": "A-01-01-1", "type": "bin_opened", "label": ""})];
    for i in 1..SYNC_BATCH {
        let id = uuid::Uuid::now_v7().to_string();
        events.push(
            json!({"id": id, "at": start + i as i64, "user": user, "count": pass,
            "task": null, "bin": "A-01-01-1", "type": "line", "sku": "S1", "qty": 1 + i as i64 % 9,
            "lot": "", "entry": "keypad"}),
        );
        ids.push(id.clone());
        lines.push(id);
    }
    (
        ids,
        lines,
        json!({"device_clock": chrono_now_ms(), "rtt_ms": 5, "events": events}),
    )
}

fn chrono_now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap()
        .as_millis() as i64
}

fn batch(round: u64, sender: usize, n: usize) -> (Vec<String>, Value) {
    let ids: Vec<String> = (0..BATCH)
        .map(|i| format!("c{round}-{sender}-{n}-{i}"))
        .collect();
    let rows: Vec<Value> = ids
        .iter()
        .enumerate()
        .map(|(i, id)| {
            json!({"id": id, "bin": format!("A-01-{:02}-1", 1 + i % 20), "sku": if i % 3 == 0 { "S1" } else { "S2" },
                   "qty": 1 + (i % 5) as i64, "kind": "receipt", "event_at": "2026-03-02T08:00:00Z"})
        })
        .collect();
    (ids, json!(rows))
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_killed_server_loses_no_acknowledged_movement() {
    let dir = tempfile::tempdir().unwrap();
    let db = setup(dir.path());
    let token = host_token(&db);
    for p in 0..PHONES {
        counter(&db, &format!("phone{p}"));
    }
    let acked: Arc<Mutex<Vec<String>>> = Arc::default();
    let acked_events: Arc<Mutex<Vec<String>>> = Arc::default();
    let acked_lines: Arc<Mutex<Vec<String>>> = Arc::default();
    let mut phone_tokens = Vec::new();
    for round in 0..ROUNDS {
        let (mut child, url) = common::serve_child(&db);
        let client = reqwest::Client::new();
        if phone_tokens.is_empty() {
            for p in 0..PHONES {
                let r = client
                    .post(format!("{url}/api/v1/devices"))
                    .json(&json!({"user": format!("phone{p}"), "pin": "4821", "site": "T", "device_name": "p"}))
                    .send()
                    .await
                    .unwrap();
                assert_eq!(r.status(), 201);
                let v: Value = r.json().await.unwrap();
                phone_tokens.push(v["token"].as_str().unwrap().to_string());
            }
        }
        let mut tasks = Vec::new();
        for (p, phone) in phone_tokens.iter().enumerate() {
            let (client, url, phone) = (client.clone(), url.clone(), phone.clone());
            let user = format!("phone{p}");
            let (events, lines) = (acked_events.clone(), acked_lines.clone());
            tasks.push(tokio::spawn(async move {
                loop {
                    let (ids, line_ids, body) = sync_batch(&user);
                    let Ok(r) = client
                        .post(format!("{url}/api/v1/sites/T/sync"))
                        .bearer_auth(&phone)
                        .json(&body)
                        .send()
                        .await
                    else {
                        return;
                    };
                    let Ok(answer) = r.json::<Value>().await else {
                        return;
                    };
                    let results = answer["results"].as_array().expect("a sync answer");
                    assert!(
                        results.iter().all(|r| r["status"] == "accepted"),
                        "{answer}"
                    );
                    events.lock().unwrap().extend(ids);
                    lines.lock().unwrap().extend(line_ids);
                }
            }));
        }
        for sender in 0..SENDERS {
            let (client, url, acked, token) =
                (client.clone(), url.clone(), acked.clone(), token.clone());
            tasks.push(tokio::spawn(async move {
                for n in 0.. {
                    let (ids, body) = batch(round, sender, n);
                    let Ok(r) = client
                        .post(format!("{url}/api/v1/sites/T/movements"))
                        .bearer_auth(&token)
                        .json(&body)
                        .send()
                        .await
                    else {
                        return;
                    };
                    if r.status().is_success() && r.json::<Value>().await.is_ok() {
                        acked.lock().unwrap().extend(ids);
                    }
                }
            }));
        }
        // Kill at a different moment each round, while batches are in flight.
        tokio::time::sleep(Duration::from_millis(300 + 170 * round)).await;
        child.kill().expect("SIGKILL is delivered");
        child.wait().unwrap();
        for t in tasks {
            t.await.unwrap();
        }
    }
    let (mut child, _) = common::serve_child(&db);
    child.kill().unwrap();
    child.wait().unwrap();
    let conn = common::sqlite_file(&db);
    let ok: String = conn
        .query_row("pragma integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(ok, "ok");
    let acked = acked.lock().unwrap();
    assert!(
        acked.len() >= ROUNDS as usize * BATCH,
        "the load acknowledged only {} movements",
        acked.len()
    );
    let mut q = conn
        .prepare("select count(*) from movement where uid = ?1")
        .unwrap();
    for id in acked.iter() {
        let n: i64 = q.query_row([id], |r| r.get(0)).unwrap();
        assert_eq!(n, 1, "acknowledged movement {id} is stored {n} times");
    }
    let drift: i64 = conn
        .query_row(
            "select count(*) from balance b where b.qty <> (select coalesce(sum(qty), 0) from movement m
               where m.bin_id = b.bin_id and m.item_id = b.item_id and m.lot = b.lot)",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(drift, 0, "balances equal the sum of movements");
    let events = acked_events.lock().unwrap();
    assert!(
        events.len() >= ROUNDS as usize * SYNC_BATCH,
        "the phones got only {} events acknowledged",
        events.len()
    );
    let mut q = conn
        .prepare("select count(*) from sync_event where uid = ?1")
        .unwrap();
    for id in events.iter() {
        let n: i64 = q.query_row([id], |r| r.get(0)).unwrap();
        assert_eq!(n, 1, "acknowledged event {id} is stored {n} times");
    }
    let mut q = conn
        .prepare("select count(*) from count_line where uid = ?1")
        .unwrap();
    for id in acked_lines.lock().unwrap().iter() {
        let n: i64 = q.query_row([id], |r| r.get(0)).unwrap();
        assert_eq!(n, 1, "acknowledged line {id} is {n} count lines");
    }
}
