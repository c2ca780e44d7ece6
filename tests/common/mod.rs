//! Shared helpers for the end-to-end suites: a real server on a loopback port
//! over a fresh SQLite file, with typed request helpers.
#![allow(dead_code)]

use cairn::AppState;
use cairn::config::Config;
use serde_json::{Value, json};
use std::path::PathBuf;

/// A running test server and a client for it.
pub struct TestApp {
    pub base: String,
    pub client: reqwest::Client,
    pub state: AppState,
    pub db: PathBuf,
    _dir: tempfile::TempDir,
    shutdown: Option<tokio::sync::oneshot::Sender<()>>,
}

/// Starts the real application on 127.0.0.1 with port 0 and a new database.
pub async fn spawn_app() -> TestApp {
    let dir = tempfile::tempdir().expect("a temporary directory can be made");
    let db = dir.path().join("cairn.db");
    let state = AppState::open(Config {
        db: db.clone(),
        max_body_bytes: 256 * 1024,
        ..Config::default()
    })
    .expect("a fresh database opens");
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
        .await
        .expect("loopback port 0 binds");
    let base = format!("http://{}", listener.local_addr().unwrap());
    let (tx, rx) = tokio::sync::oneshot::channel::<()>();
    let served = state.clone();
    tokio::spawn(async move {
        cairn::run(served, listener, async {
            let _ = rx.await;
        })
        .await
        .expect("the server runs");
    });
    TestApp {
        base,
        client: reqwest::Client::new(),
        state,
        db,
        _dir: dir,
        shutdown: Some(tx),
    }
}

impl Drop for TestApp {
    fn drop(&mut self) {
        if let Some(tx) = self.shutdown.take() {
            let _ = tx.send(());
        }
    }
}

impl TestApp {
    /// Sends a GET and returns the status and JSON body.
    pub async fn get(&self, path: &str) -> (u16, Value) {
        let r = self
            .client
            .get(format!("{}{path}", self.base))
            .send()
            .await
            .expect("the server answers");
        let status = r.status().as_u16();
        (status, r.json().await.unwrap_or(Value::Null))
    }

    /// Sends a JSON POST and returns the status and JSON body.
    pub async fn post(&self, path: &str, body: &Value) -> (u16, Value) {
        let r = self
            .client
            .post(format!("{}{path}", self.base))
            .json(body)
            .send()
            .await
            .expect("the server answers");
        let status = r.status().as_u16();
        (status, r.json().await.unwrap_or(Value::Null))
    }

    /// Sends raw bytes as a JSON POST.
    pub async fn post_raw(&self, path: &str, body: Vec<u8>) -> (u16, Value) {
        let r = self
            .client
            .post(format!("{}{path}", self.base))
            .header("content-type", "application/json")
            .body(body)
            .send()
            .await
            .expect("the server answers");
        let status = r.status().as_u16();
        (status, r.json().await.unwrap_or(Value::Null))
    }

    /// Creates site `T` with two bins, a plain item `S1` and a lot-tracked item `L1`.
    pub async fn small_site(&self) {
        self.state
            .store
            .create_site(cairn::master::NewSite {
                code: cairn::master::SiteCode::parse("T").unwrap(),
                name: "Test".into(),
                time_zone: "UTC".into(),
            })
            .await
            .unwrap();
        let (s, b) = self
            .post(
                "/api/v1/sites/T/bins",
                &json!([
                    {"zone": "A", "aisle": 1, "bay": 1, "level": 1, "side": "L"},
                    {"zone": "A", "aisle": 1, "bay": 2, "level": 1, "side": "R"}
                ]),
            )
            .await;
        assert_eq!(s, 200, "{b}");
        let (s, b) = self
            .post(
                "/api/v1/sites/T/items",
                &json!([
                    {"sku": "S1", "description": "Hex bolt M8", "base_unit": "box", "unit_cost_minor": 450},
                    {"sku": "L1", "description": "Sealant", "base_unit": "each", "unit_cost_minor": 640, "lot_tracked": true}
                ]),
            )
            .await;
        assert_eq!(s, 200, "{b}");
    }
}

/// Builds one movement as the API takes it.
pub fn movement(id: &str, bin: &str, sku: &str, qty: i64, kind: &str, at: &str) -> Value {
    json!({"id": id, "bin": bin, "sku": sku, "qty": qty, "kind": kind, "event_at": at})
}
