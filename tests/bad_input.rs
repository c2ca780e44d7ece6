//! Bad input over the real HTTP API: malformed JSON, wrong types, huge bodies and
//! batches, unknown fields, Unicode edge cases and SQL-looking strings. Each request is
//! answered 4xx with a message that says what is wrong, and no table changes.

mod common;

use cairn::accounts::Role;
use common::spawn_app;
use serde_json::{Value, json};
use std::collections::BTreeMap;

/// Row counts of every table (sign-in throttling and sessions included), on either store.
fn table_counts(app: &common::TestApp) -> BTreeMap<String, i64> {
    let names = app.sql_rows(if common::on_postgres() {
        "select cast(table_name as text) from information_schema.tables
         where table_schema = current_schema() and table_type = 'BASE TABLE'"
    } else {
        "select name from sqlite_master where type = 'table' and name not like 'sqlite_%'"
    });
    names
        .into_iter()
        .map(|n| {
            let k = app.sql_i64(&format!("select count(*) from \"{}\"", n[0]));
            (n[0].clone(), k)
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
    let before = table_counts(&app);
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
        table_counts(&app),
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
    let before = table_counts(&app);
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
    let mut after = table_counts(&app);
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
    let text = "Washer'); delete from item; -- ﾘ \u{0301}\"\\";
    let (s, b) = app
        .post(ITEMS, &json!([item(json!({"description": text}))]))
        .await;
    assert_eq!(s, 200, "{b}");
    let stored = app.sql_rows("select description from item where sku = 'N1'");
    assert_eq!(stored, [[text.to_string()]]);
    let items = app.sql_i64("select count(*) from item");
    assert_eq!(items, 3, "S1, L1 and N1 are all still there");
}

/// One request of the input-hygiene table: method, path, raw body, and a word its
/// message must contain (the field, or what is wrong).
struct Breach {
    what: &'static str,
    method: reqwest::Method,
    path: String,
    body: Vec<u8>,
    says: &'static str,
}

fn breach(
    what: &'static str,
    method: reqwest::Method,
    path: &str,
    body: impl Into<Vec<u8>>,
    says: &'static str,
) -> Breach {
    Breach {
        what,
        method,
        path: path.to_string(),
        body: body.into(),
        says,
    }
}

/// Appends `tail` to a JSON text: trailing data after the value.
fn with_tail(v: Value, tail: &str) -> Vec<u8> {
    format!("{v}{tail}").into_bytes()
}

fn short_pick(extra: Value) -> Value {
    let mut m = json!({"id": "sp-9", "bin": "A-01-01-1", "sku": "S1", "short_qty": 1,
                       "reported_at": "2026-03-02T10:00:00Z"});
    m.as_object_mut()
        .unwrap()
        .extend(extra.as_object().unwrap().clone());
    m
}

const P: &str = "/api/v1/sites/T";

fn breaches(planning: &Value, netting: &Value) -> Vec<Breach> {
    use reqwest::Method as M;
    let path = |tail: &str| format!("{P}{tail}");
    let netting_with = |k: &str, v: Value| {
        let mut n = netting.clone();
        n[k] = v;
        json_bytes(n)
    };
    let mut task_time_max = planning.clone();
    task_time_max["task_time"]["base_s"] = json!(u32::MAX);
    let mut tolerance_max = netting.clone();
    tolerance_max["tolerances"]["a"]["units"] = json!(i64::MAX);
    let list = json!({"day": "2026-03-03", "counters": 1, "minutes": 60});
    let accuracy = json!({"ira_target": 0.95, "demand_window_days": 90,
                          "service_level": [0.98, 0.95, 0.9]});
    let enrol = json!({"user": "cora", "pin": "4821", "site": "T", "device_name": "p"});
    vec![
        // Trailing data after the JSON value: every single-object route.
        breach(
            "planning settings + tail",
            M::PUT,
            &path("/planning/settings"),
            with_tail(planning.clone(), " {}"),
            "after the JSON value",
        ),
        breach(
            "calendar + tail",
            M::PUT,
            &path("/planning/calendar"),
            with_tail(json!({"working_weekdays": ["mon"]}), "x"),
            "after the JSON value",
        ),
        breach(
            "count list + tail",
            M::POST,
            &path("/count-lists"),
            with_tail(list.clone(), "[]"),
            "after the JSON value",
        ),
        breach(
            "move task + tail",
            M::POST,
            &path("/count-lists/2026-03-03/tasks/1/move"),
            with_tail(json!({"run": 1}), "1"),
            "after the JSON value",
        ),
        breach(
            "hold run + tail",
            M::PUT,
            &path("/count-lists/2026-03-03/runs/1"),
            with_tail(json!({"holder": ""}), "\"\""),
            "after the JSON value",
        ),
        breach(
            "accuracy settings + tail",
            M::PUT,
            &path("/accuracy/settings"),
            with_tail(accuracy.clone(), "}"),
            "after the JSON value",
        ),
        breach(
            "netting settings + tail",
            M::PUT,
            &path("/netting/settings"),
            with_tail(netting.clone(), " null"),
            "after the JSON value",
        ),
        breach(
            "sources + tail",
            M::PUT,
            &path("/netting/sources"),
            with_tail(json!([]), "[]"),
            "after the JSON value",
        ),
        breach(
            "reason codes + tail",
            M::PUT,
            &path("/netting/reason-codes"),
            with_tail(json!([]), "0"),
            "after the JSON value",
        ),
        breach(
            "enrol + tail",
            M::POST,
            DEVICES,
            with_tail(enrol.clone(), "{}"),
            "after the JSON value",
        ),
        breach(
            "movements + tail",
            M::POST,
            MOVES,
            with_tail(json!([mv(json!({}))]), "[]"),
            "after the JSON value",
        ),
        // Duplicate keys: refused, naming the key, wherever the object is.
        breach(
            "a cost given twice",
            M::POST,
            ITEMS,
            r#"[{"sku": "N1", "description": "Washer", "base_unit": "each", "unit_cost_minor": 5, "unit_cost_minor": 500}]"#,
            "\"unit_cost_minor\" is given twice",
        ),
        breach(
            "a holder given twice",
            M::PUT,
            &path("/count-lists/2026-03-03/runs/1"),
            r#"{"holder": "", "holder": "cora"}"#,
            "\"holder\" is given twice",
        ),
        breach(
            "auto_adjust given twice",
            M::PUT,
            &path("/netting/settings"),
            format!(r#"{{"auto_adjust": true, {}"#, &netting.to_string()[1..]),
            "\"auto_adjust\" is given twice",
        ),
        breach(
            "a pin given twice",
            M::POST,
            DEVICES,
            r#"{"user": "cora", "pin": "0000", "pin": "4821", "site": "T", "device_name": "p"}"#,
            "\"pin\" is given twice",
        ),
        // Free text: control characters, bidi controls, length.
        breach(
            "a NUL in a description",
            M::POST,
            ITEMS,
            json_bytes(json!([item(json!({"description": "Wash\u{0}er"}))])),
            "description",
        ),
        breach(
            "a BEL in a description",
            M::POST,
            ITEMS,
            json_bytes(json!([item(json!({"description": "Washer\u{7}"}))])),
            "control character",
        ),
        breach(
            "a newline in a description",
            M::POST,
            ITEMS,
            json_bytes(json!([item(json!({"description": "Wash\ner"}))])),
            "line break",
        ),
        breach(
            "a right-to-left override in a description",
            M::POST,
            ITEMS,
            json_bytes(json!([item(
                json!({"description": "Washer \u{202e}gnp.exe"})
            )])),
            "bidirectional",
        ),
        breach(
            "a right-to-left isolate in a group",
            M::POST,
            ITEMS,
            json_bytes(json!([item(json!({"group": "bolts\u{2067}"}))])),
            "group",
        ),
        breach(
            "a 100,000-character group",
            M::POST,
            ITEMS,
            json_bytes(json!([item(json!({"group": "g".repeat(100_000)}))])),
            "at most 64 characters",
        ),
        breach(
            "a BEL in a reason-code label",
            M::PUT,
            &path("/netting/reason-codes"),
            json_bytes(json!([{"code": "lost", "label": "Lost\u{7}"}])),
            "label",
        ),
        breach(
            "an override in a source name",
            M::PUT,
            &path("/netting/sources"),
            json_bytes(
                json!([{"source": "host\u{202d}", "uncertainty_ms": 0, "posting_lag_ms": 0}]),
            ),
            "source",
        ),
        breach(
            "a BEL in a short-pick source",
            M::POST,
            &path("/short-picks"),
            json_bytes(json!([short_pick(json!({"source": "wms\u{7}"}))])),
            "source",
        ),
        breach(
            "a newline in a movement's doc_ref",
            M::POST,
            MOVES,
            json_bytes(json!([mv(json!({"doc_ref": "PO-1\r\nPO-2"}))])),
            "doc_ref",
        ),
        breach(
            "a C1 control in a planner group",
            M::POST,
            &path("/planner-inputs"),
            json_bytes(json!([{"group": "g\u{85}h", "lead_time_days": 5}])),
            "group",
        ),
        breach(
            "a NUL in a phone's name",
            M::POST,
            DEVICES,
            json_bytes(
                json!({"user": "cora", "pin": "4821", "site": "T", "device_name": "p\u{0}"}),
            ),
            "device_name",
        ),
        // Days and instants outside 2000-01-01 ..= 2100-12-31.
        breach(
            "an ABC run in year 1",
            M::POST,
            &path("/planning/abc?day=0001-01-01"),
            "",
            "2000-01-01 to 2100-12-31",
        ),
        breach(
            "an ABC run in 9999",
            M::POST,
            &path("/planning/abc?day=9999-12-31"),
            "",
            "2000-01-01 to 2100-12-31",
        ),
        breach(
            "a list for 9999",
            M::POST,
            &path("/count-lists"),
            json_bytes(json!({"day": "9999-12-31", "counters": 1, "minutes": 60})),
            "2000-01-01 to 2100-12-31",
        ),
        breach(
            "a holiday in 1900",
            M::PUT,
            &path("/planning/calendar"),
            json_bytes(json!({"working_weekdays": ["mon"], "holidays": ["1900-01-01"]})),
            "2000-01-01 to 2100-12-31",
        ),
        breach(
            "a short pick reported in 9999",
            M::POST,
            &path("/short-picks"),
            json_bytes(json!([short_pick(
                json!({"reported_at": "9999-12-31T00:00:00Z"})
            )])),
            "reported_at",
        ),
        breach(
            "a movement in 1970",
            M::POST,
            MOVES,
            json_bytes(json!([mv(json!({"event_at": "1970-01-01T00:00:01Z"}))])),
            "event_at",
        ),
        breach(
            "an expiry in 2999",
            M::POST,
            MOVES,
            json_bytes(json!([mv(
                json!({"sku": "L1", "lot": "B1", "expiry": "2999-01-01"})
            )])),
            "expiry",
        ),
        // Money and timings bounded so no arithmetic overflows.
        breach(
            "a unit cost of i64::MAX",
            M::POST,
            ITEMS,
            json_bytes(json!([item(json!({"unit_cost_minor": i64::MAX}))])),
            "unit_cost_minor",
        ),
        breach(
            "a posting lag of i64::MAX",
            M::PUT,
            &path("/netting/sources"),
            json_bytes(
                json!([{"source": "host", "uncertainty_ms": 0, "posting_lag_ms": i64::MAX}]),
            ),
            "posting_lag_ms",
        ),
        breach(
            "an uncertainty of i64::MAX",
            M::PUT,
            &path("/netting/sources"),
            json_bytes(
                json!([{"source": "host", "uncertainty_ms": i64::MAX, "posting_lag_ms": 0}]),
            ),
            "uncertainty_ms",
        ),
        breach(
            "a manager limit of i64::MAX",
            M::PUT,
            &path("/netting/settings"),
            netting_with("manager_value_minor", json!(i64::MAX)),
            "manager_value_minor",
        ),
        breach(
            "a tolerance of i64::MAX units",
            M::PUT,
            &path("/netting/settings"),
            json_bytes(tolerance_max),
            "units",
        ),
        breach(
            "a bin taking u32::MAX seconds",
            M::PUT,
            &path("/planning/settings"),
            json_bytes(task_time_max),
            "base_s",
        ),
        // Run holders: only users holding `counter` at the site.
        breach(
            "a holder that is a LIKE pattern",
            M::PUT,
            &path("/count-lists/2026-03-03/runs/1"),
            json_bytes(json!({"holder": "%_%"})),
            "not a counter",
        ),
        breach(
            "a holder who is no counter here",
            M::PUT,
            &path("/count-lists/2026-03-03/runs/1"),
            json_bytes(json!({"holder": "root"})),
            "not a counter",
        ),
        breach(
            "a holder nobody is called",
            M::PUT,
            &path("/count-lists/2026-03-03/runs/1"),
            json_bytes(json!({"holder": "zed"})),
            "not a counter",
        ),
    ]
}

#[tokio::test]
async fn every_input_hygiene_breach_is_refused_naming_the_field_and_writes_nothing() {
    let app = spawn_app().await;
    app.small_site().await;
    // A stored list, so the run routes reach their checks.
    app.cora_and_a_list(1).await;
    let (_, planning) = app.get(&format!("{P}/planning/settings")).await;
    let (_, netting) = app.get(&format!("{P}/netting/settings")).await;
    let before = common::table_contents(&app.db);
    let mut failures = Vec::new();
    for c in breaches(&planning, &netting) {
        let mut r = app
            .client
            .request(c.method.clone(), format!("{}{}", app.base, c.path))
            .header("content-type", "application/json")
            .body(c.body);
        if c.path != DEVICES {
            r = app.with_token(r);
        }
        let r = r.send().await.expect("the server answers");
        let status = r.status().as_u16();
        let raw = r.text().await.unwrap_or_default();
        let text = serde_json::from_str::<Value>(&raw)
            .map(|v| strings_of(&v).join(" | "))
            .unwrap_or(raw);
        if !(400..500).contains(&status) {
            failures.push(format!("{}: status {status}: {text}", c.what));
        } else if !text.to_lowercase().contains(&c.says.to_lowercase()) {
            failures.push(format!(
                "{}: message does not mention '{}': {text}",
                c.what, c.says
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
    assert_eq!(
        common::table_contents(&app.db),
        before,
        "a refused request changes no row of any table"
    );
}

/// Every string in a JSON answer (the error and each row's field and message), unescaped.
fn strings_of(v: &Value) -> Vec<String> {
    match v {
        Value::String(s) => vec![s.clone()],
        Value::Array(a) => a.iter().flat_map(strings_of).collect(),
        Value::Object(o) => o.values().flat_map(strings_of).collect(),
        _ => Vec::new(),
    }
}

#[tokio::test]
async fn a_run_goes_only_to_a_counter_of_the_site_and_keeps_their_tasks_visible() {
    let app = spawn_app().await;
    app.site_with_triggers().await;
    app.cora_and_a_list(1).await;
    let run = format!("{P}/count-lists/2026-03-03/runs/1");
    let (s, b) = app.put(&run, &json!({"holder": "CORA"})).await;
    assert_eq!(s, 200, "{b}");
    assert_eq!(
        b["runs"][0]["holder"], "cora",
        "kept by the stored user name"
    );
    let (s, b) = app.put(&run, &json!({"holder": "%_%"})).await;
    assert_eq!(s, 400, "{b}");
    let (_, list) = app.get(&format!("{P}/count-lists/2026-03-03")).await;
    assert_eq!(
        list["runs"][0]["holder"], "cora",
        "a refused holder changes nothing"
    );
    let phone = app.phone("cora", "4821").await;
    let tasks = app
        .client
        .get(format!("{}{P}/my-tasks?day=2026-03-03", app.base))
        .bearer_auth(&phone)
        .send()
        .await
        .unwrap();
    assert_eq!(tasks.status(), 200);
    let tasks: Value = tasks.json().await.unwrap();
    assert!(
        !tasks["tasks"].as_array().is_none_or(Vec::is_empty),
        "cora still sees her run: {tasks}"
    );
    let (s, _) = app.put(&run, &json!({"holder": ""})).await;
    assert_eq!(s, 200, "a run may go back to nobody");
}

#[tokio::test]
async fn a_count_list_export_escapes_text_that_a_spreadsheet_would_run() {
    let app = spawn_app().await;
    app.site_with_triggers().await;
    // A user name may begin with '-', which a spreadsheet takes for a formula.
    app.add_user("-dan", "T", &[Role::Counter], "test-only-password", None)
        .await;
    let (s, b) = app
        .post(
            &format!("{P}/count-lists"),
            &json!({"day": "2026-03-03", "counters": 1, "minutes": 60}),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let (s, b) = app
        .put(
            &format!("{P}/count-lists/2026-03-03/runs/1"),
            &json!({"holder": "-dan"}),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let csv = app
        .with_token(
            app.client
                .get(format!("{}{P}/count-lists/2026-03-03?format=csv", app.base)),
        )
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    let row = csv.lines().nth(1).expect("a task row");
    // OWASP "CSV Injection": a cell starting with '-' is prefixed with a single quote.
    assert!(row.starts_with("2026-03-03,1,'-dan,1,"), "{csv}");
}
