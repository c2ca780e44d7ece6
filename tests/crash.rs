//! The server killed with SIGKILL during a stream of acknowledged movement
//! batches: after a restart every acknowledged id is present exactly once,
//! balances equal the sum of movements, and the file passes integrity_check.

mod common;

use common::cairn_with_input;
use serde_json::{Value, json};
use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// Rounds of serve → load → kill.
const ROUNDS: u64 = 4;
/// Concurrent senders during each round.
const SENDERS: usize = 4;
/// Movements per batch.
const BATCH: usize = 100;

fn cairn(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .output()
        .expect("the cairn binary runs")
}

/// Starts `cairn serve` on port 0 and returns the child and its base URL.
fn serve(db: &str) -> (Child, String) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["serve", "--db", db, "--listen", "127.0.0.1:0"])
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("cairn serve starts");
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let url = line
        .split(" at ")
        .nth(1)
        .expect("the first line names the address")
        .trim()
        .trim_end_matches('/')
        .to_string();
    (child, url)
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
    let acked: Arc<Mutex<Vec<String>>> = Arc::default();
    for round in 0..ROUNDS {
        let (mut child, url) = serve(&db);
        let client = reqwest::Client::new();
        let mut tasks = Vec::new();
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
    let (mut child, _) = serve(&db);
    child.kill().unwrap();
    child.wait().unwrap();
    let conn = rusqlite::Connection::open(&db).unwrap();
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
}
