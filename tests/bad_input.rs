//! Bad input over the real HTTP API: malformed JSON, wrong types, huge bodies and
//! batches, unknown fields, Unicode edge cases and SQL-looking strings. Each request is
//! answered 4xx with a message that says what is wrong, and no table changes.

mod common;

use cairn::accounts::Role;
use common::spawn_app;
use serde_json::{Value, json};
use std::collections::BTreeMap;
use std::path::Path;

/// Row counts of every table (sign-in throttling and sessions included).
fn table_counts(db: &Path) -> BTreeMap<String, i64> {
    let c = rusqlite::Connection::open(db).unwrap();
    let names: Vec<String> = c
        .prepare("select name from sqlite_master where type = 'table' and name not like 'sqlite_%'")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    names
        .into_iter()
        .map(|n| {
            let k: i64 = c
                .query_row(&format!("select count(*) from \"{n}\""), [], |r| r.get(0))
                .unwrap();
            (n, k)
        })
        .collect()
}

/// One bad request: where it goes, its raw body, and a word its message must contain.
struct Case {
    what: &'static str,
    path: &'static str,
    body: Vec<u8>,
    says: &'static str,
}

fn case(
    what: &'static str,
    path: &'static str,
    body: impl Into<Vec<u8>>,
    says: &'static str,
) -> Case {
    Case {
        what,
        path,
        body: body.into(),
        says,
    }
}

fn json_bytes(v: Value) -> Vec<u8> {
    serde_json::to_vec(&v).unwrap()
}

const MOVES: &str = "/api/v1/sites/T/movements";
const ITEMS: &str = "/api/v1/sites/T/items";
const BINS: &str = "/api/v1/sites/T/bins";

fn mv(extra: Value) -> Value {
    let mut m = json!({"id": "m-1", "bin": "A-01-01-1", "sku": "S1", "qty": 5, "kind": "receipt",
                       "event_at": "2026-03-02T08:00:00Z"});
    m.as_object_mut()
        .unwrap()
        .extend(extra.as_object().unwrap().clone());
    m
}

fn item(extra: Value) -> Value {
    let mut m =
        json!({"sku": "N1", "description": "Washer", "base_unit": "each", "unit_cost_minor": 5});
    m.as_object_mut()
        .unwrap()
        .extend(extra.as_object().unwrap().clone());
    m
}

fn cases() -> Vec<Case> {
    let huge = format!("[{}]", vec![mv(json!({})).to_string(); 3_000].join(","));
    let many_rows = format!("[{}]", vec!["{}"; 5_001].join(","));
    vec![
        // Malformed JSON.
        case("cut-off JSON", MOVES, r#"[{"id": "m-1", "bin": "#, "JSON"),
        case("empty body", MOVES, "", "JSON"),
        case("not an array", MOVES, r#"{"id": "m-1"}"#, "array"),
        case("an empty batch", MOVES, "[]", "empty"),
        case("trailing garbage", ITEMS, r#"[] x"#, "JSON"),
        case("invalid UTF-8", ITEMS, b"[{\"sku\": \"\xff\xfe\"}]".to_vec(), "JSON"),
        case("a lone surrogate escape", ITEMS, r#"[{"sku": "\ud800", "description": "x", "base_unit": "each"}]"#, "JSON"),
        case("deep nesting", ITEMS, "[".repeat(10_000) + &"]".repeat(10_000), "JSON"),
        // Wrong types.
        case("qty as text", MOVES, json_bytes(json!([mv(json!({"qty": "12"}))])), "qty"),
        case("qty as a fraction", MOVES, json_bytes(json!([mv(json!({"qty": 1.5}))])), "qty"),
        case("qty beyond i64", MOVES, br#"[{"id":"m-1","bin":"A-01-01-1","sku":"S1","qty":99999999999999999999,"kind":"receipt","event_at":"2026-03-02T08:00:00Z"}]"#.to_vec(), "qty"),
        case("a date that is not one", MOVES, json_bytes(json!([mv(json!({"event_at": "yesterday"}))])), "event_at"),
        case("a null id", MOVES, json_bytes(json!([mv(json!({"id": null}))])), "id"),
        case("an unknown kind", MOVES, json_bytes(json!([mv(json!({"kind": "teleport"}))])), "kind"),
        case("cost as an object", ITEMS, json_bytes(json!([item(json!({"unit_cost_minor": {"v": 1}}))])), "unit_cost_minor"),
        case("aisle negative", BINS, json_bytes(json!([{"zone": "A", "aisle": -1, "bay": 1, "level": 1, "side": "L"}])), "aisle"),
        // Huge bodies and batches.
        case("a body over max_body_bytes", MOVES, huge, "limit"),
        case("a batch over MAX_BATCH_ROWS", MOVES, many_rows, "5000"),
        // Unknown fields.
        case("an unknown movement field", MOVES, json_bytes(json!([mv(json!({"colour": "red"}))])), "colour"),
        case("an unknown item field", ITEMS, json_bytes(json!([item(json!({"price": 3}))])), "price"),
        // Unicode edge cases in codes.
        case("a NUL in a SKU", ITEMS, json_bytes(json!([item(json!({"sku": "N\u{0}1"}))])), "sku"),
        case("a right-to-left override in a SKU", ITEMS, json_bytes(json!([item(json!({"sku": "N\u{202e}1"}))])), "sku"),
        case("a zero-width joiner in a bin code", MOVES, json_bytes(json!([mv(json!({"bin": "A-01\u{200d}-01-1"}))])), "bin"),
        case("a combining accent in a lot", MOVES, json_bytes(json!([mv(json!({"lot": "LOT\u{301}1"}))])), "lot"),
        case("an emoji SKU", ITEMS, json_bytes(json!([item(json!({"sku": "🔩"}))])), "sku"),
        case("a fullwidth bin code", MOVES, json_bytes(json!([mv(json!({"bin": "Ａ-01-01-1"}))])), "bin"),
        case("a 10,000-character SKU", ITEMS, json_bytes(json!([item(json!({"sku": "S".repeat(10_000)}))])), "sku"),
        // SQL-looking strings in codes.
        case("SQL in a SKU", ITEMS, json_bytes(json!([item(json!({"sku": "N1'; drop table movement;--"}))])), "sku"),
        case("SQL in a bin code", MOVES, json_bytes(json!([mv(json!({"bin": "A-01-01-1' or '1'='1"}))])), "bin"),
        case("SQL in a movement's SKU", MOVES, json_bytes(json!([mv(json!({"sku": "S1\" union select * from user_account --"}))])), "sku"),
        // Sync: the whole request refused.
        case("sync: cut-off JSON", SYNC, r#"{"device_clock": 17725"#, "EOF"),
        case("sync: events not a list", SYNC, json_bytes(json!({"device_clock": 1, "events": {}})), "events"),
        case("sync: clock as text", SYNC, json_bytes(json!({"device_clock": "now", "events": []})), "device_clock"),
        case("sync: an unknown top-level field", SYNC, json_bytes(json!({"device_clock": 1, "events": [], "battery": 80})), "battery"),
        case("sync: a clock before 1970", SYNC, json_bytes(json!({"device_clock": -5, "events": []})), "device_clock"),
        case("sync: a round trip out of range", SYNC, json_bytes(json!({"device_clock": 1, "rtt_ms": -3, "events": []})), "rtt_ms"),
        case("sync: more than MAX_SYNC_EVENTS", SYNC, json_bytes(json!({"device_clock": 1, "events": vec![json!({}); 501]})), "at most 500"),
        // Enrolment.
        case("enrol: a PIN as a number", DEVICES, json_bytes(json!({"user": "cora", "pin": 4821, "site": "T", "device_name": "p"})), "pin"),
        case("enrol: an unknown field", DEVICES, json_bytes(json!({"user": "cora", "pin": "4821", "site": "T", "device_name": "p", "admin": true})), "admin"),
    ]
}

const SYNC: &str = "/api/v1/sites/T/sync";
const DEVICES: &str = "/api/v1/devices";

#[tokio::test]
async fn every_bad_request_is_refused_with_a_clear_message_and_writes_nothing() {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_user(
        "cora",
        "T",
        &[Role::Counter],
        "test-only-password",
        Some("4821"),
    )
    .await;
    let device = app.enrol("cora", "4821", "T").await.json()["token"]
        .as_str()
        .unwrap()
        .to_string();
    let admin = app.token.get().unwrap().clone();
    let before = table_counts(&app.db);
    let mut failures = Vec::new();
    for c in cases() {
        let token = if c.path == SYNC { &device } else { &admin };
        let mut r = app
            .client
            .post(format!("{}{}", app.base, c.path))
            .header("content-type", "application/json")
            .body(c.body);
        if c.path != DEVICES {
            r = r.bearer_auth(token);
        }
        let r = r.send().await.expect("the server answers");
        let status = r.status().as_u16();
        let text = r.text().await.unwrap_or_default();
        let message = serde_json::from_str::<Value>(&text)
            .ok()
            .map(|v| v.to_string())
            .unwrap_or_default();
        if !(400..500).contains(&status) {
            failures.push(format!("{}: status {status}: {text}", c.what));
        } else if message.is_empty() {
            failures.push(format!(
                "{}: {status} without a JSON message: {text:?}",
                c.what
            ));
        } else if !message.to_lowercase().contains(&c.says.to_lowercase()) {
            failures.push(format!(
                "{}: message does not mention '{}': {message}",
                c.what, c.says
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
    assert_eq!(
        table_counts(&app.db),
        before,
        "a refused request writes nothing"
    );
}

#[tokio::test]
async fn bad_events_in_a_sync_are_refused_one_by_one_and_leave_no_trace() {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_user(
        "cora",
        "T",
        &[Role::Counter],
        "test-only-password",
        Some("4821"),
    )
    .await;
    let device = app.enrol("cora", "4821", "T").await.json()["token"]
        .as_str()
        .unwrap()
        .to_string();
    let v7 = || uuid::Uuid::now_v7().to_string();
    let pass = v7();
    let now = cairn::time::Timestamp::now().0;
    let base = |kind: &str| json!({"id": v7(), "at": now - 1_000, "user": "cora", "count": pass, "task": null, "bin": "A-01-01-1", "type": kind});
    let with = |kind: &str, extra: Value| {
        let mut e = base(kind);
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    };
    let events = vec![
        (
            with("line", json!({"sku": "S1", "qty": "12", "entry": "keypad"})),
            "qty",
        ),
        (
            with("line", json!({"sku": "S1", "qty": 0, "entry": "keypad"})),
            "qty",
        ),
        (
            with(
                "line",
                json!({"sku": "S1", "qty": 5, "entry": "keypad", "colour": "red"}),
            ),
            "colour",
        ),
        (
            with(
                "line",
                json!({"sku": "S1'; drop table count_line;--", "qty": 5, "entry": "keypad"}),
            ),
            "sku",
        ),
        (
            with(
                "line",
                json!({"sku": "S\u{202e}1", "qty": 5, "entry": "keypad"}),
            ),
            "sku",
        ),
        (
            with(
                "line",
                json!({"sku": "S1", "qty": 5, "entry": "keypad", "lot": "L\u{0}1"}),
            ),
            "lot",
        ),
        (
            with("line", json!({"sku": "S1", "qty": 5, "entry": "telepathy"})),
            "entry",
        ),
        (
            with(
                "line",
                json!({"sku": "S1", "qty": 5, "entry": "keypad", "expiry": "2026-02-30"}),
            ),
            "expiry",
        ),
        (with("bin_done", json!({"bin": "A-01-01-1\u{200b}"})), "bin"),
        (
            with("bin_done", json!({"id": uuid::Uuid::new_v4().to_string()})),
            "version 4",
        ),
        (with("bin_done", json!({"at": "soon"})), "at"),
        (with("undo", json!({})), "line"),
        (json!("just a string"), "cannot be read"),
        (json!(null), "cannot be read"),
    ];
    let before = table_counts(&app.db);
    let body = json!({"device_clock": now, "rtt_ms": 20,
                      "events": events.iter().map(|(e, _)| e.clone()).collect::<Vec<_>>()});
    let r = app
        .client
        .post(format!("{}{SYNC}", app.base))
        .bearer_auth(&device)
        .json(&body)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let answer: Value = r.json().await.unwrap();
    let results = answer["results"].as_array().unwrap();
    assert_eq!(
        results.len(),
        events.len(),
        "one result per event, in order"
    );
    for ((_, says), result) in events.iter().zip(results) {
        assert_eq!(result["status"], "rejected", "{result}");
        let reason = result["reason"].as_str().unwrap_or("");
        assert!(reason.contains(says), "the reason names '{says}': {reason}");
    }
    let mut after = table_counts(&app.db);
    // The clock sample of the request is kept (one row per device, updated).
    assert_eq!(after.remove("device_clock"), Some(1));
    let mut before = before;
    before.remove("device_clock");
    assert_eq!(after, before, "refused events write nothing");
}

#[tokio::test]
async fn sql_looking_free_text_is_stored_literally_and_harms_nothing() {
    let app = spawn_app().await;
    app.small_site().await;
    let text = "Washer'); delete from item; -- \u{202e}ﾘ \u{0301}\"\\";
    let (s, b) = app
        .post(ITEMS, &json!([item(json!({"description": text}))]))
        .await;
    assert_eq!(s, 200, "{b}");
    let c = rusqlite::Connection::open(&app.db).unwrap();
    let stored: String = c
        .query_row("select description from item where sku = 'N1'", [], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(stored, text);
    let items: i64 = c
        .query_row("select count(*) from item", [], |r| r.get(0))
        .unwrap();
    assert_eq!(items, 3, "S1, L1 and N1 are all still there");
}
