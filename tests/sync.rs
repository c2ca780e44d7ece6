//! End-to-end tests of phones' sync over real HTTP and a real SQLite file: events become
//! count passes and lines once, whatever is resent, reordered or refused.

mod common;

use cairn::accounts::Role;
use common::{movement, spawn_app};
use serde_json::{Value, json};
use uuid::Uuid;

const DAY: &str = "2026-03-03";
/// The phone's clock in these tests: an hour before the run, in whole minutes, the same
/// for every test of the run (the server corrects it to its own clock).
fn nine() -> i64 {
    static NINE: std::sync::OnceLock<i64> = std::sync::OnceLock::new();
    *NINE.get_or_init(|| (cairn::time::Timestamp::now().0 - 3_600_000) / 60_000 * 60_000)
}

/// A GTIN-13 from its first twelve digits, with the check digit of GS1 General
/// Specifications §7.9 (the mod-10 weights 3-1) worked out by the scanning crate.
fn gtin13(body: &str) -> String {
    let check = cairn_scan::gtin_check_digit(body).expect("digits");
    format!("{body}{check}")
}

struct Phone {
    token: String,
    task: i64,
    label: String,
}

/// Site T with S1 on the shelf of A-01-01-1 (each and case-of-12 GTINs), a day's list of
/// one run held by counter cora, and cora's phone enrolled.
async fn counting_site(app: &common::TestApp) -> Phone {
    app.small_site().await;
    let (s, b) = app
        .post(
            "/api/v1/sites/T/packs",
            &json!([
                {"sku": "S1", "gtin": gtin13("501234567890"), "level": "each", "units": 1},
                {"sku": "S1", "gtin": gtin13("501234567891"), "level": "case", "units": 12},
                {"sku": "L1", "gtin": gtin13("501234567892"), "level": "each", "units": 1}
            ]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let (s, b) = app
        .post(
            "/api/v1/sites/T/movements",
            &json!([movement(
                "m1",
                "A-01-01-1",
                "S1",
                40,
                "receipt",
                "2026-03-02T08:00:00Z"
            )]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let (s, b) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &json!({"day": DAY, "counters": 1, "minutes": 120}),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    for (user, pin) in [("cora", "4821"), ("dan", "5932")] {
        app.add_user(user, "T", &[Role::Counter], "test-only-password", Some(pin))
            .await;
    }
    hold(app, "cora").await;
    let token = app.enrol("cora", "4821", "T").await.json()["token"]
        .as_str()
        .unwrap()
        .to_string();
    let tasks = my_tasks(app, &token).await;
    let first = tasks["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["bin"] == "A-01-01-1")
        .unwrap_or_else(|| panic!("A-01-01-1 is on the list: {tasks}"))
        .clone();
    Phone {
        token,
        task: first["id"].as_i64().unwrap(),
        label: first["label"].as_str().unwrap().to_string(),
    }
}

async fn hold(app: &common::TestApp, who: &str) {
    let r = app
        .with_token(app.client.put(format!(
            "{}/api/v1/sites/T/count-lists/{DAY}/runs/1",
            app.base
        )))
        .json(&json!({"holder": who}))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
}

async fn my_tasks(app: &common::TestApp, token: &str) -> Value {
    let r = app
        .client
        .get(format!("{}/api/v1/sites/T/my-tasks?day={DAY}", app.base))
        .bearer_auth(token)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    r.json().await.unwrap()
}

async fn sync(app: &common::TestApp, token: &str, body: &Value) -> (u16, Value) {
    let r = app
        .client
        .post(format!("{}/api/v1/sites/T/sync", app.base))
        .bearer_auth(token)
        .json(&app.stamped(token, body))
        .send()
        .await
        .unwrap();
    (r.status().as_u16(), r.json().await.unwrap_or(Value::Null))
}

fn id() -> String {
    Uuid::now_v7().to_string()
}

/// Builds events of one pass over A-01-01-1.
struct Pass {
    count: String,
    task: i64,
}

impl Pass {
    fn new(task: i64) -> Self {
        Self { count: id(), task }
    }
    fn event(&self, at: i64, kind: &str, extra: Value) -> Value {
        let mut e = json!({"id": id(), "at": at, "count": self.count, "task": self.task,
                           "bin": "A-01-01-1", "type": kind});
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    }
    fn opened(&self, at: i64, label: &str) -> Value {
        let mut e = self.event(at, "bin_opened", json!({"label": label}));
        e["id"] = json!(self.count);
        e
    }
    fn line(&self, at: i64, gtin: &str, packs: i64, qty: i64) -> Value {
        self.event(
            at,
            "line",
            json!({"sku": "S1", "gtin": gtin, "packs": packs, "qty": qty, "lot": "", "entry": "scan"}),
        )
    }
}

fn statuses(answer: &Value) -> Vec<String> {
    answer["results"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["status"].as_str().unwrap().to_string())
        .collect()
}

async fn lines(app: &common::TestApp) -> Vec<Value> {
    let (s, page) = app.get("/api/v1/sites/T/count-lines").await;
    assert_eq!(s, 200, "{page}");
    page["lines"].as_array().unwrap().clone()
}

#[tokio::test]
async fn a_counted_bin_becomes_a_pass_with_lines_and_its_task_is_done() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let case = gtin13("501234567891");
    let each = gtin13("501234567890");
    let events = vec![
        pass.opened(nine(), &phone.label),
        pass.line(nine() + 5_000, &case, 3, 36),
        pass.line(nine() + 9_000, &each, 4, 4),
        pass.event(nine() + 12_000, "bin_done", json!({})),
    ];
    let (s, answer) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine() + 60_000, "rtt_ms": 80, "events": events}),
    )
    .await;
    assert_eq!(s, 200, "{answer}");
    assert_eq!(statuses(&answer), ["accepted"; 4], "{answer}");
    assert_eq!(answer["uncertainty_ms"], 40, "half the reported round trip");
    let stored = lines(&app).await;
    let qty: Vec<i64> = stored.iter().map(|l| l["qty"].as_i64().unwrap()).collect();
    assert_eq!(qty, [36, 4], "a case scan counts its units");
    let tasks = my_tasks(&app, &phone.token).await;
    let task = tasks["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["id"] == phone.task)
        .unwrap()
        .clone();
    assert_eq!(task["done"], true, "bin done finishes the task");
}

#[tokio::test]
async fn a_resent_batch_is_acknowledged_again_and_applied_once() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let body = json!({"device_clock": nine(), "events": [
        pass.opened(nine() - 1_000, &phone.label),
        pass.line(nine() - 500, &gtin13("501234567890"), 1, 1),
    ]});
    let (_, first) = sync(&app, &phone.token, &body).await;
    let (s, again) = sync(&app, &phone.token, &body).await;
    assert_eq!(s, 200);
    assert_eq!(statuses(&again), ["accepted", "accepted"]);
    assert!(
        again["results"]
            .as_array()
            .unwrap()
            .iter()
            .all(|r| r["repeat"] == true),
        "{again}"
    );
    assert_eq!(first["results"][1]["repeat"], false);
    assert_eq!(lines(&app).await.len(), 1, "the line is stored once");
}

#[tokio::test]
async fn a_known_id_with_other_content_is_a_conflict_and_nothing_is_merged() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let line = pass.line(nine(), &gtin13("501234567890"), 2, 2);
    let (_, _) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine(), "events": [line.clone()]}),
    )
    .await;
    let mut changed = line.clone();
    changed["qty"] = json!(5);
    changed["packs"] = json!(5);
    let (_, answer) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine(), "events": [changed]}),
    )
    .await;
    assert_eq!(statuses(&answer), ["conflict"]);
    let stored = lines(&app).await;
    assert_eq!(stored.len(), 1);
    assert_eq!(stored[0]["qty"], 2, "the first content stands");
}

#[tokio::test]
async fn each_event_is_judged_on_its_own_and_a_refusal_says_why() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let mut unknown_sku = pass.line(nine() + 3, &gtin13("501234567890"), 1, 1);
    unknown_sku["sku"] = json!("NOPE");
    unknown_sku["gtin"] = Value::Null;
    let mut wrong_bin = pass.event(nine() + 6, "bin_done", json!({}));
    wrong_bin["bin"] = json!("A-01-02-1");
    let events = vec![
        pass.opened(nine(), &phone.label),
        pass.line(nine() + 1, &gtin13("501234567892"), 1, 1), // L1's GTIN under S1
        pass.line(nine() + 2, &gtin13("501234567891"), 2, 12), // 2 cases are 24, not 12
        unknown_sku,
        json!({"id": id(), "type": "line"}),
        pass.line(nine() + 4, &gtin13("501234567890"), 7, 7),
        wrong_bin,
    ];
    let (s, answer) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine() + 10, "events": events}),
    )
    .await;
    assert_eq!(s, 200, "{answer}");
    assert_eq!(
        statuses(&answer),
        [
            "accepted", "rejected", "rejected", "rejected", "rejected", "accepted", "rejected"
        ]
    );
    let reason = |i: usize| answer["results"][i]["reason"].as_str().unwrap().to_string();
    assert!(reason(1).contains("is not a pack of S1"), "{}", reason(1));
    assert!(reason(2).contains("2 × 12"), "{}", reason(2));
    assert!(reason(3).contains("no item NOPE"), "{}", reason(3));
    assert!(reason(4).contains("cannot be read"), "{}", reason(4));
    assert!(reason(6).contains("is for bin A-01-01-1"), "{}", reason(6));
    let stored = lines(&app).await;
    assert_eq!(stored.len(), 1, "only the good line is stored: {stored:?}");
    assert_eq!(stored[0]["qty"], 7);
}

#[tokio::test]
async fn a_label_of_another_bin_is_refused() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let other = cairn::master::place_label("T", "A", 1, 2, 1).unwrap();
    let (_, answer) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine(), "events": [pass.opened(nine(), other.text())]}),
    )
    .await;
    assert_eq!(statuses(&answer), ["rejected"]);
    assert!(
        answer["results"][0]["reason"]
            .as_str()
            .unwrap()
            .contains("is not the label of bin A-01-01-1"),
        "{answer}"
    );
}

#[tokio::test]
async fn events_arriving_out_of_order_make_the_same_pass_and_an_undo_may_come_first() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let each = gtin13("501234567890");
    let kept = pass.line(nine() + 2_000, &each, 2, 2);
    let undone = pass.line(nine() + 3_000, &each, 9, 9);
    let undo = pass.event(nine() + 4_000, "undo", json!({"line": undone["id"]}));
    let done = pass.event(nine() + 5_000, "bin_done", json!({}));
    // Sent in reverse, over two requests.
    for batch in [
        vec![done, undo],
        vec![undone, kept, pass.opened(nine(), &phone.label)],
    ] {
        let (_, answer) = sync(
            &app,
            &phone.token,
            &json!({"device_clock": nine() + 9_000, "events": batch}),
        )
        .await;
        assert!(
            statuses(&answer).iter().all(|s| s == "accepted"),
            "{answer}"
        );
    }
    let stored = lines(&app).await;
    assert_eq!(stored.len(), 2);
    let live: Vec<i64> = stored
        .iter()
        .filter(|l| l["undone"] == false)
        .map(|l| l["qty"].as_i64().unwrap())
        .collect();
    assert_eq!(
        live,
        [2],
        "the undo applies to its line whichever came first"
    );
    assert!(
        stored.iter().all(|l| l["pass"] == json!(pass.count)),
        "one pass"
    );
}

#[tokio::test]
async fn a_count_for_a_task_moved_to_another_counter_is_kept_and_flagged() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    hold(&app, "dan").await; // the supervisor gave the run to dan while cora was offline
    let pass = Pass::new(phone.task);
    let (_, answer) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine(), "events": [
            pass.opened(nine() - 10, &phone.label),
            pass.line(nine() - 5, &gtin13("501234567890"), 3, 3),
        ]}),
    )
    .await;
    assert_eq!(statuses(&answer), ["accepted", "accepted"]);
    assert_eq!(answer["results"][1]["flags"], json!(["reassigned"]));
    assert_eq!(lines(&app).await.len(), 1, "the count is kept");
}

#[tokio::test]
async fn an_item_the_bin_was_not_expected_to_hold_is_found_stock() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let mut found = pass.line(nine(), &gtin13("501234567892"), 1, 1);
    found["sku"] = json!("L1");
    found["lot"] = json!("B-77");
    let (_, answer) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine(), "events": [found]}),
    )
    .await;
    assert_eq!(
        answer["results"][0]["flags"],
        json!(["found_stock"]),
        "{answer}"
    );
    let stored = lines(&app).await;
    assert_eq!(
        (stored[0]["found"].clone(), stored[0]["lot"].clone()),
        (json!(true), json!("B-77"))
    );
}

#[tokio::test]
async fn a_slow_phone_clock_is_corrected_to_server_time() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let now = chrono::Utc::now().timestamp_millis();
    let slow = 3_600_000; // the phone is an hour behind
    let (_, answer) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": now - slow, "rtt_ms": 20, "events": [
            pass.line(now - slow - 60_000, &gtin13("501234567890"), 1, 1),
        ]}),
    )
    .await;
    let offset = answer["offset_ms"].as_i64().unwrap();
    assert!(
        (offset - slow).abs() < 5_000,
        "offset {offset} is about an hour"
    );
    let at = lines(&app).await[0]["at"].as_str().unwrap().to_string();
    let at = cairn::time::Timestamp::parse_rfc3339(&at).unwrap().0;
    assert!(
        (at - (now - 60_000)).abs() < 5_000,
        "the line was scanned a minute ago in server time, not an hour ago"
    );
}

#[tokio::test]
async fn a_whole_request_that_cannot_be_read_is_refused_and_changes_nothing() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let pass = Pass::new(phone.task);
    let line = pass.line(nine(), &gtin13("501234567890"), 1, 1);
    let too_many: Vec<Value> = (0..501).map(|_| line.clone()).collect();
    for (body, needle) in [
        (
            json!({"device_clock": nine(), "events": too_many}),
            "at most 500",
        ),
        (
            json!({"device_clock": nine(), "events": [line.clone()], "extra": 1}),
            "unknown field",
        ),
        (
            json!({"device_clock": "soon", "events": []}),
            "device_clock",
        ),
        (
            json!({"device_clock": nine(), "rtt_ms": -4, "events": []}),
            "rtt_ms",
        ),
    ] {
        let (s, answer) = sync(&app, &phone.token, &body).await;
        assert_eq!(s, 400, "{answer}");
        assert!(answer.to_string().contains(needle), "{needle}: {answer}");
    }
    assert!(lines(&app).await.is_empty());
}

#[tokio::test]
async fn the_catalogue_lists_items_and_packs_without_quantities_and_answers_304_when_unchanged() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let url = format!("{}/api/v1/sites/T/catalog", app.base);
    let r = app
        .client
        .get(&url)
        .bearer_auth(&phone.token)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let etag = r.headers()["etag"].to_str().unwrap().to_string();
    let body: Value = r.json().await.unwrap();
    let s1 = body["items"]
        .as_array()
        .unwrap()
        .iter()
        .find(|i| i["sku"] == "S1")
        .unwrap()
        .clone();
    assert_eq!(s1["packs"].as_array().unwrap().len(), 2);
    let text = body.to_string();
    for word in ["qty", "balance", "cost"] {
        assert!(!text.contains(word), "'{word}' must not reach a counter");
    }
    let again = app
        .client
        .get(&url)
        .bearer_auth(&phone.token)
        .header("if-none-match", &etag)
        .send()
        .await
        .unwrap();
    assert_eq!(again.status(), 304);
}

#[tokio::test]
async fn only_counters_sync_and_a_supervisor_cannot_send_counts() {
    let app = spawn_app().await;
    let phone = counting_site(&app).await;
    let (s, _) = app
        .post(
            "/api/v1/sites/T/sync",
            &json!({"device_clock": nine(), "events": []}),
        )
        .await;
    assert_eq!(s, 403, "the admin token is not a counter");
    let (s, _) = sync(
        &app,
        &phone.token,
        &json!({"device_clock": nine(), "events": []}),
    )
    .await;
    assert_eq!(s, 200);
}
