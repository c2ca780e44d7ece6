//! The HTTP API end to end: a real server on a loopback port, a real SQLite file.

mod common;

use common::{movement, spawn_app};
use serde_json::json;

#[tokio::test]
async fn healthz_answers_when_the_database_is_migrated() {
    let app = spawn_app().await;
    let (s, b) = app.get("/healthz").await;
    assert_eq!((s, b["status"].as_str()), (200, Some("ok")));
}

#[tokio::test]
async fn movements_post_and_balances_read_now_and_as_of_an_instant() {
    let app = spawn_app().await;
    app.small_site().await;
    let batch = json!([
        movement(
            "m1",
            "A-01-01-1",
            "S1",
            10,
            "receipt",
            "2026-03-02T08:00:00Z"
        ),
        movement("m2", "A-01-01-1", "S1", -3, "pick", "2026-03-02T09:00:00Z"),
        movement("m3", "A-01-01-1", "S1", -2, "pick", "2026-03-02T10:00:00Z"),
    ]);
    let (s, b) = app.post("/api/v1/sites/T/movements", &batch).await;
    assert_eq!(s, 200, "{b}");
    assert_eq!(b["recorded"], 3);
    let (_, now) = app.get("/api/v1/sites/T/balances?bin=A-01-01-1").await;
    assert_eq!(now["balances"][0]["qty"], 5);
    let (_, then) = app
        .get("/api/v1/sites/T/balances?sku=S1&at=2026-03-02T09:30:00Z")
        .await;
    assert_eq!(then["balances"][0]["qty"], 7);
    let (_, before) = app
        .get("/api/v1/sites/T/balances?sku=S1&at=2026-03-01T00:00:00Z")
        .await;
    assert_eq!(before["balances"].as_array().unwrap().len(), 0);
}

#[tokio::test]
async fn a_resent_batch_is_acknowledged_and_applied_once() {
    let app = spawn_app().await;
    app.small_site().await;
    let batch = json!([movement(
        "r1",
        "A-01-01-1",
        "S1",
        4,
        "receipt",
        "2026-03-02T08:00:00Z"
    )]);
    let (_, first) = app.post("/api/v1/sites/T/movements", &batch).await;
    let (s, again) = app.post("/api/v1/sites/T/movements", &batch).await;
    assert_eq!(s, 200);
    assert_eq!(
        (
            again["recorded"].as_u64(),
            again["already_recorded"].as_u64()
        ),
        (Some(0), Some(1))
    );
    assert_eq!(again["watermark"], first["watermark"]);
    let (_, now) = app.get("/api/v1/sites/T/balances?sku=S1").await;
    assert_eq!(now["balances"][0]["qty"], 4);
}

#[tokio::test]
async fn a_batch_with_bad_rows_writes_nothing_and_names_each_row_and_field() {
    let app = spawn_app().await;
    app.small_site().await;
    let batch = json!([
        movement("ok1", "A-01-01-1", "S1", 10, "receipt", "2026-03-02T08:00:00Z"),
        {"id": "bad1", "bin": "A-01-01-1", "sku": "S1", "qty": 1.5, "kind": "receipt", "event_at": "2026-03-02T08:00:00Z"},
        movement("bad2", "Q-09-09-9", "S1", 1, "receipt", "2026-03-02T08:00:00Z"),
        movement("bad3", "A-01-01-1", "S1", 1, "receipt", "2099-01-01T00:00:00Z"),
        movement("bad4", "A-01-01-1", "L1", 1, "receipt", "2026-03-02T08:00:00Z"),
    ]);
    let (s, b) = app.post("/api/v1/sites/T/movements", &batch).await;
    assert_eq!(s, 422, "{b}");
    let rows: Vec<(u64, String)> = b["rows"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            (
                r["index"].as_u64().unwrap(),
                r["field"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    // Shape errors are found before stored-data errors; both kinds name row and field.
    assert!(rows.contains(&(1, "qty".into())), "{rows:?}");
    assert!(rows.contains(&(3, "event_at".into())), "{rows:?}");
    let (_, now) = app.get("/api/v1/sites/T/balances?sku=S1").await;
    assert_eq!(
        now["balances"].as_array().unwrap().len(),
        0,
        "nothing was written"
    );
    // With the shape errors gone, the stored-data rules name theirs.
    let batch = json!([
        movement(
            "ok1",
            "A-01-01-1",
            "S1",
            10,
            "receipt",
            "2026-03-02T08:00:00Z"
        ),
        movement(
            "bad2",
            "Q-09-09-9",
            "S1",
            1,
            "receipt",
            "2026-03-02T08:00:00Z"
        ),
        movement(
            "bad4",
            "A-01-01-1",
            "L1",
            1,
            "receipt",
            "2026-03-02T08:00:00Z"
        ),
    ]);
    let (s, b) = app.post("/api/v1/sites/T/movements", &batch).await;
    assert_eq!(s, 422, "{b}");
    assert_eq!(b["rows"][0]["field"], "bin");
    assert_eq!(b["rows"][1]["field"], "lot");
    let (_, site) = app.get("/api/v1/sites/T").await;
    assert_eq!(site["counts"]["movements"], 0);
}

#[tokio::test]
async fn an_oversized_body_or_batch_is_refused_with_413() {
    let app = spawn_app().await;
    app.small_site().await;
    let (s, _) = app
        .post_raw("/api/v1/sites/T/movements", vec![b' '; 300 * 1024])
        .await;
    assert_eq!(s, 413);
    let many: Vec<_> = (0..5001).map(|i| json!({"id": format!("x{i}")})).collect();
    let (s, b) = app.post("/api/v1/sites/T/movements", &json!(many)).await;
    assert_eq!(s, 413, "{b}");
    assert!(b["error"].as_str().unwrap().contains("limit of 5000"));
}

#[tokio::test]
async fn malformed_json_and_unknown_fields_get_a_400_or_422_with_a_message() {
    let app = spawn_app().await;
    app.small_site().await;
    let (s, b) = app
        .post_raw("/api/v1/sites/T/movements", b"[{\"id\": ".to_vec())
        .await;
    assert_eq!(s, 400, "{b}");
    assert!(b["error"].is_string());
    let mut m = movement(
        "u1",
        "A-01-01-1",
        "S1",
        1,
        "receipt",
        "2026-03-02T08:00:00Z",
    );
    m["colour"] = json!("red");
    let (s, b) = app.post("/api/v1/sites/T/movements", &json!([m])).await;
    assert_eq!(s, 422, "{b}");
    assert!(
        b["rows"][0]["message"].as_str().unwrap().contains("colour"),
        "{b}"
    );
}

#[tokio::test]
async fn history_is_paged_in_event_order_within_the_range() {
    let app = spawn_app().await;
    app.small_site().await;
    let batch: Vec<_> = (0..25)
        .map(|i| {
            movement(
                &format!("h{i:02}"),
                "A-01-02-1",
                "S1",
                1,
                "receipt",
                &format!("2026-03-02T08:{:02}:00Z", 59 - i),
            )
        })
        .collect();
    let (s, _) = app.post("/api/v1/sites/T/movements", &json!(batch)).await;
    assert_eq!(s, 200);
    let mut seen = Vec::new();
    let mut after: Option<String> = None;
    loop {
        let path = match &after {
            None => "/api/v1/sites/T/bins/A-01-02-1/movements?from=2026-03-02T08:40:00Z&limit=4"
                .to_string(),
            Some(a) => format!(
                "/api/v1/sites/T/bins/A-01-02-1/movements?from=2026-03-02T08:40:00Z&limit=4&after={a}"
            ),
        };
        let (s, page) = app.get(&path).await;
        assert_eq!(s, 200, "{page}");
        for m in page["movements"].as_array().unwrap() {
            seen.push(m["event_at"].as_str().unwrap().to_string());
        }
        match page["next"].as_str() {
            Some(n) => after = Some(n.to_string()),
            None => break,
        }
    }
    assert_eq!(seen.len(), 20, "08:40 to 08:59");
    assert!(seen.windows(2).all(|w| w[0] < w[1]), "{seen:?}");
    let (_, by_item) = app
        .get("/api/v1/sites/T/items/S1/movements?limit=1000")
        .await;
    assert_eq!(by_item["movements"].as_array().unwrap().len(), 25);
}

#[tokio::test]
async fn master_data_errors_name_the_row_and_rule() {
    let app = spawn_app().await;
    app.small_site().await;
    let (s, b) = app
        .post(
            "/api/v1/sites/T/packs",
            &json!([
                // 4006381333931: valid EAN-13, check digit 1 (GS1 General Specifications mod-10).
                {"sku": "S1", "gtin": "4006381333931", "level": "case", "units": 12},
                {"sku": "S1", "gtin": "4006381333932", "level": "case", "units": 12},
                {"sku": "S1", "gtin": "96385074", "level": "inner", "units": -6},
            ]),
        )
        .await;
    assert_eq!(s, 422, "{b}");
    assert_eq!(
        (
            b["rows"][0]["index"].as_u64(),
            b["rows"][0]["field"].as_str()
        ),
        (Some(1), Some("gtin"))
    );
    assert_eq!(
        (
            b["rows"][1]["index"].as_u64(),
            b["rows"][1]["field"].as_str()
        ),
        (Some(2), Some("units"))
    );
    let (s, b) = app
        .post(
            "/api/v1/sites/T/items",
            &json!([
                {"sku": "D1", "description": "A", "base_unit": "each", "unit_cost_minor": 1},
                {"sku": "D1", "description": "B", "base_unit": "each", "unit_cost_minor": 1},
            ]),
        )
        .await;
    assert_eq!(s, 422, "{b}");
    assert!(
        b["rows"][0]["message"]
            .as_str()
            .unwrap()
            .contains("appears twice")
    );
}

#[tokio::test]
async fn an_unknown_site_is_a_404() {
    let app = spawn_app().await;
    app.small_site().await;
    let (s, b) = app.get("/api/v1/sites/NOPE/balances").await;
    assert_eq!(s, 404, "{b}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn concurrent_batches_all_land_without_busy_errors() {
    let app = std::sync::Arc::new(spawn_app().await);
    app.small_site().await;
    let mut tasks = Vec::new();
    for c in 0..8 {
        let app = app.clone();
        tasks.push(tokio::spawn(async move {
            for n in 0..5 {
                let batch: Vec<_> = (0..50)
                    .map(|i| {
                        movement(
                            &format!("cc{c}-{n}-{i}"),
                            "A-01-01-1",
                            "S1",
                            1,
                            "receipt",
                            "2026-03-02T08:00:00Z",
                        )
                    })
                    .collect();
                let (s, b) = app.post("/api/v1/sites/T/movements", &json!(batch)).await;
                assert_eq!(s, 200, "{b}");
            }
        }));
    }
    for t in tasks {
        t.await.unwrap();
    }
    let (_, now) = app.get("/api/v1/sites/T/balances?sku=S1").await;
    assert_eq!(now["balances"][0]["qty"], 8 * 5 * 50);
}

#[tokio::test]
async fn a_batch_and_its_audit_row_commit_together() {
    let app = spawn_app().await;
    app.small_site().await;
    let site = app
        .state
        .store
        .site(&cairn::master::SiteCode::parse("T").unwrap())
        .await
        .unwrap()
        .unwrap();
    let batches = |rows: &[cairn::accounts::audit::AuditRow]| {
        rows.iter()
            .filter(|r| r.subject == "movements")
            .map(|r| r.detail.clone())
            .collect::<Vec<_>>()
    };
    let refused = json!([movement(
        "a1",
        "Q-09-09-9",
        "S1",
        1,
        "receipt",
        "2026-03-02T08:00:00Z"
    )]);
    let (s, _) = app.post("/api/v1/sites/T/movements", &refused).await;
    assert_eq!(s, 422);
    let rows = app.state.store.audit_events(site.id, 100).await.unwrap();
    assert!(
        batches(&rows).is_empty(),
        "a refused batch leaves no audit row"
    );
    let good = json!([movement(
        "a2",
        "A-01-01-1",
        "S1",
        3,
        "receipt",
        "2026-03-02T08:00:00Z"
    )]);
    let (s, _) = app.post("/api/v1/sites/T/movements", &good).await;
    assert_eq!(s, 200);
    let rows = app.state.store.audit_events(site.id, 100).await.unwrap();
    let details = batches(&rows);
    assert_eq!(details.len(), 1, "{details:?}");
    let d: serde_json::Value = serde_json::from_str(&details[0]).unwrap();
    assert_eq!(
        (d["recorded"].as_u64(), d["already_recorded"].as_u64()),
        (Some(1), Some(0))
    );
}

#[tokio::test]
async fn the_phone_app_shell_is_served_gzip_compressed_to_a_client_that_asks() {
    let app = spawn_app().await;
    let r = app
        .client
        .get(format!("{}/app/js/app.js", app.base))
        .header("accept-encoding", "gzip")
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    assert_eq!(
        r.headers()
            .get("content-encoding")
            .map(|v| v.to_str().unwrap()),
        Some("gzip")
    );
    let compressed = r.bytes().await.unwrap().len();
    let plain = std::fs::read(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../client/web/js/app.js"
    ))
    .unwrap()
    .len();
    assert!(compressed < plain, "{compressed} bytes sent for {plain}");
}
