//! The frequency policy over real HTTP on the test store (SQLite file, or
//! PostgreSQL with CAIRN_TEST_STORE): a site starts on `abc` and its list is
//! the class-interval list; `risk` moves the day's minutes to where the value
//! of record error grows fastest, in a direction the inputs predict; `blend`
//! keeps every class to its floor; bad input is refused by field; counters
//! cannot change the policy; the page's form needs its token; every change is
//! in the audit log; each due task says why it is on the list.

mod common;

use cairn::accounts::Role;
use common::{Auth, Body, PASSWORD, Session, TestApp, form_fields, movement, spawn_app};
use reqwest::Method;
use serde_json::{Value, json};

const POLICY: &str = "/api/v1/sites/T/planning/frequency-policy";
const PAGE: &str = "/sites/T/frequency-policy";
const DAY: &str = "2026-03-03";

/// Site T with three stocked items, one bin each, never counted:
/// `CHEAP` (unit cost 1, picked hard: class A by usage value), `MID` (cost 100,
/// some picks) and `DEAR` (cost 50,000, never picked: class C). Classified on
/// 2025-07-01, so by the day planned counting has run for months.
/// People: ines (inventory manager), sam (supervisor), cora (counter).
async fn site(app: &TestApp) {
    app.small_site().await;
    app.add_people(&[
        ("ines", &[Role::InventoryManager], None),
        ("sam", &[Role::Supervisor], None),
        ("cora", &[Role::Counter], Some("4821")),
    ])
    .await;
    let (s, b) = app
        .post(
            "/api/v1/sites/T/bins",
            &json!([
                {"zone": "A", "aisle": 2, "bay": 1, "level": 1, "side": "L"},
                {"zone": "A", "aisle": 2, "bay": 2, "level": 1, "side": "L"},
                {"zone": "A", "aisle": 2, "bay": 3, "level": 1, "side": "L"}
            ]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let (s, b) = app
        .post(
            "/api/v1/sites/T/items",
            &json!([
                {"sku": "CHEAP", "description": "Cable tie", "base_unit": "each", "unit_cost_minor": 1},
                {"sku": "MID", "description": "Hinge", "base_unit": "each", "unit_cost_minor": 100},
                {"sku": "DEAR", "description": "Servo drive", "base_unit": "each", "unit_cost_minor": 50000}
            ]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let mut moves = vec![
        movement(
            "r1",
            "A-02-01-1",
            "CHEAP",
            20_000,
            "receipt",
            "2025-06-01T08:00:00Z",
        ),
        movement(
            "r2",
            "A-02-02-1",
            "MID",
            100,
            "receipt",
            "2025-06-01T08:00:00Z",
        ),
        movement(
            "r3",
            "A-02-03-1",
            "DEAR",
            3,
            "receipt",
            "2025-06-01T08:00:00Z",
        ),
    ];
    for k in 0..5 {
        let at = format!("2025-06-1{k}T10:00:00Z");
        moves.push(movement(
            &format!("p{k}"),
            "A-02-01-1",
            "CHEAP",
            -2_000,
            "pick",
            &at,
        ));
        moves.push(movement(
            &format!("q{k}"),
            "A-02-02-1",
            "MID",
            -4,
            "pick",
            &at,
        ));
    }
    let (s, b) = app.post("/api/v1/sites/T/movements", &json!(moves)).await;
    assert_eq!(s, 200, "{b}");
    let (s, b) = app
        .post("/api/v1/sites/T/planning/abc?day=2025-07-01", &json!({}))
        .await;
    assert_eq!(s, 200, "{b}");
    for (sku, class) in [("CHEAP", "A"), ("DEAR", "C")] {
        let (s, h) = app
            .get(&format!("/api/v1/sites/T/items/{sku}/classes"))
            .await;
        assert_eq!(s, 200, "{h}");
        assert_eq!(
            h[0]["class"], class,
            "the premise: {sku} is class {class}: {h}"
        );
    }
}

/// Previews the day's list for one counter of `minutes`, using all of it.
async fn preview(app: &TestApp, minutes: u32) -> Value {
    let (s, v) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &json!({"day": DAY, "counters": 1, "minutes": minutes, "fill": "capacity", "preview": true}),
        )
        .await;
    assert_eq!(s, 200, "{v}");
    v
}

/// The bins of a list in its order, with each task's detail.
fn bins(list: &Value) -> Vec<(String, String)> {
    list["tasks"]
        .as_array()
        .expect("tasks")
        .iter()
        .map(|t| {
            (
                t["bin"].as_str().unwrap().to_string(),
                t["detail"].as_str().unwrap().to_string(),
            )
        })
        .collect()
}

fn task<'a>(list: &'a Value, bin: &str) -> &'a Value {
    list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["bin"] == bin)
        .unwrap_or_else(|| panic!("{bin} is on the list: {list}"))
}

async fn set_policy(app: &TestApp, body: Value) -> Value {
    let (s, v) = app.put(POLICY, &body).await;
    assert_eq!(s, 200, "{v}");
    v
}

const CHEAP_BIN: &str = "A-02-01-1";
const MID_BIN: &str = "A-02-02-1";
const DEAR_BIN: &str = "A-02-03-1";

#[tokio::test]
async fn a_site_starts_on_abc_and_its_list_says_the_class_interval() {
    let app = spawn_app().await;
    site(&app).await;
    let (s, p) = app.get(POLICY).await;
    assert_eq!(s, 200, "{p}");
    assert_eq!(
        p,
        json!({"policy": "abc", "floor_a": 12, "floor_b": 4, "floor_c": 1})
    );
    // Three minutes hold one bin. Never counted, each item is as overdue as the
    // months counting has run over its interval: A (12 a year) leads.
    let list = preview(&app, 3).await;
    assert_eq!(bins(&list).len(), 1, "{list}");
    let t = task(&list, CHEAP_BIN);
    assert_eq!(t["class"], "A");
    assert_eq!(t["why"]["policy"], "abc");
    assert!(t["why"].get("risk").is_none(), "{t}");
    // 2026 has 261 Monday-to-Friday days: 12 a year is every 22 (261 / 12 = 21.75).
    assert_eq!(t["why"]["interval_working_days"], 22);
    assert_eq!(
        t["detail"], "class A every 22 working days; never counted",
        "{t}"
    );
    // With room for all, the order is by overdue ratio: A, then B or C by class interval.
    let all = preview(&app, 60).await;
    let order: Vec<String> = bins(&all).into_iter().map(|b| b.0).collect();
    assert_eq!(order.len(), 3, "{all}");

    // Switching to risk and back to abc gives the very same list.
    set_policy(&app, json!({"policy": "risk"})).await;
    set_policy(&app, json!({"policy": "abc"})).await;
    assert_eq!(bins(&preview(&app, 3).await), bins(&list));
    assert_eq!(bins(&preview(&app, 60).await), bins(&all));
}

#[tokio::test]
async fn under_risk_the_dear_slow_item_comes_before_the_cheap_busy_one() {
    let app = spawn_app().await;
    site(&app).await;
    assert_eq!(bins(&preview(&app, 3).await)[0].0, CHEAP_BIN);
    let now = set_policy(&app, json!({"policy": "risk"})).await;
    assert_eq!(now["policy"], "risk");
    // No item has repeat counts nor picks in the 28 days before, so each has the same
    // rate of errors (the site's rate per pick at the least pick rate) and its interval
    // follows (minutes / unit cost)^(1/2) (the `risk` module notes, jumps): DEAR, worth
    // 50,000 a unit, gets the shortest interval, CHEAP (1 a unit) the longest.
    let list = preview(&app, 3).await;
    assert_eq!(bins(&list).len(), 1, "{list}");
    let t = task(&list, DEAR_BIN);
    assert_eq!(t["class"], "C");
    let why = &t["why"];
    assert_eq!(why["policy"], "risk", "{t}");
    let risk = &why["risk"];
    assert_eq!(risk["growth"]["from"], "site", "{t}");
    assert_eq!(risk["unit_cost_minor"], 50000);
    assert!(risk["score"].as_f64().unwrap() > 0.0, "{t}");
    assert!(risk["error_value_due"].as_f64().unwrap() > 0.0, "{t}");
    assert!(t["detail"].as_str().unwrap().starts_with("risk "), "{t}");
    let all = preview(&app, 60).await;
    let interval = |bin: &str| {
        task(&all, bin)["why"]["interval_working_days"]
            .as_i64()
            .unwrap()
    };
    assert!(interval(DEAR_BIN) < interval(MID_BIN), "{all}");
    assert!(interval(MID_BIN) <= interval(CHEAP_BIN), "{all}");
    assert!(
        interval(CHEAP_BIN) > 22,
        "risk leaves the cheap A item longer than abc did: {all}"
    );

    // Stored, the list keeps why each bin is on it, in its JSON and on the page.
    let (s, stored) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &json!({"day": DAY, "counters": 1, "minutes": 3, "fill": "capacity"}),
        )
        .await;
    assert_eq!(s, 200, "{stored}");
    let (s, read) = app.get(&format!("/api/v1/sites/T/count-lists/{DAY}")).await;
    assert_eq!(s, 200, "{read}");
    assert_eq!(task(&read, DEAR_BIN)["why"], *why);
    let sam = app.sign_in("sam", PASSWORD).await;
    let page = get(&app, &sam, &format!("/sites/T/count-lists/{DAY}")).await;
    assert_eq!(page.status, 200, "{}", page.text);
    assert!(
        page.text.contains("risk ") && page.text.contains("unit cost 50000"),
        "{}",
        page.text
    );
}

#[tokio::test]
async fn blend_keeps_every_class_to_its_floor() {
    let app = spawn_app().await;
    site(&app).await;
    // Weekly for A: 261 / 52 = 5.02, every 5 working days.
    set_policy(
        &app,
        json!({"policy": "blend", "floor_a": 52, "floor_b": 4, "floor_c": 1}),
    )
    .await;
    let all = preview(&app, 60).await;
    for t in all["tasks"].as_array().unwrap() {
        let floor = match t["class"].as_str().unwrap() {
            "A" => 5,
            "B" => 65,
            _ => 261,
        };
        let days = t["why"]["interval_working_days"].as_i64().unwrap();
        assert!(days <= floor, "{t}");
        assert_eq!(t["why"]["policy"], "blend");
    }
    let cheap = task(&all, CHEAP_BIN);
    assert_eq!(cheap["why"]["interval_working_days"], 5, "{cheap}");
    assert_eq!(cheap["why"]["risk"]["at_floor"], true, "{cheap}");
    // With one bin's room, the A item held weekly is the most overdue again.
    assert_eq!(bins(&preview(&app, 3).await)[0].0, CHEAP_BIN);
}

async fn get(app: &TestApp, s: &Session, path: &str) -> common::Answer {
    app.send(Method::GET, path, &Auth::Session(s.clone()), Body::Empty)
        .await
}

async fn post_form(app: &TestApp, s: &Session, fields: &[(String, String)]) -> common::Answer {
    app.send(
        Method::POST,
        PAGE,
        &Auth::Session(s.clone()),
        Body::Form(fields.to_vec()),
    )
    .await
}

fn set(fields: &mut Vec<(String, String)>, name: &str, v: &str) {
    match fields.iter_mut().find(|(k, _)| k == name) {
        Some(f) => f.1 = v.to_string(),
        None => fields.push((name.to_string(), v.to_string())),
    }
}

/// The audit trail's frequency-policy changes, oldest first: actor and detail.
fn audit(app: &TestApp) -> Vec<(String, Value)> {
    app.sql_rows(
        "select actor, detail from audit_event
         where action = 'interval_rule_changed' order by id",
    )
    .into_iter()
    .map(|r| (r[0].clone(), serde_json::from_str(&r[1]).unwrap()))
    .collect()
}

#[tokio::test]
async fn bad_input_is_refused_by_field_and_changes_nothing() {
    let app = spawn_app().await;
    site(&app).await;
    let cases = [
        (json!({"policy": "weekly"}), "policy"),
        (json!({"floor_a": 2}), "policy"),
        (json!({"policy": "blend", "floor_a": 366}), "floor_a"),
        (json!({"policy": "blend", "floor_c": -1}), "floor_c"),
        (json!({"policy": "blend", "floor_b": "four"}), "floor_b"),
        (json!({"policy": "risk", "minutes": 30}), "minutes"),
    ];
    for (body, field) in cases {
        let (s, v) = app.put(POLICY, &body).await;
        assert_eq!(s, 422, "{body}: {v}");
        let fields: Vec<&str> = v["rows"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r["field"].as_str().unwrap())
            .collect();
        assert_eq!(fields, [field], "{body}: {v}");
        assert!(!v["rows"][0]["message"].as_str().unwrap().is_empty());
    }
    let r = app
        .with_token(app.client.put(format!("{}{POLICY}", app.base)))
        .header("content-type", "application/json")
        .body("not json")
        .send()
        .await
        .expect("the server answers");
    assert_eq!(r.status().as_u16(), 400);
    let (_, p) = app.get(POLICY).await;
    assert_eq!(p["policy"], "abc");
    assert!(audit(&app).is_empty());

    // The page names the field too and keeps what was typed.
    let ines = app.sign_in("ines", PASSWORD).await;
    let page = get(&app, &ines, PAGE).await;
    let mut f = form_fields(&page.text, PAGE);
    set(&mut f, "policy", "blend");
    set(&mut f, "floor_b", "many");
    let a = post_form(&app, &ines, &f).await;
    assert_eq!(a.status, 422, "{}", a.text);
    assert!(
        a.text.contains("floor_b: must be a whole number"),
        "{}",
        a.text
    );
    assert!(a.text.contains("value=\"many\""), "{}", a.text);
    let (_, p) = app.get(POLICY).await;
    assert_eq!(p["policy"], "abc");
}

#[tokio::test]
async fn a_counter_cannot_change_the_policy_and_a_form_needs_its_token() {
    let app = spawn_app().await;
    site(&app).await;
    let cora = app.issue_token("T", "cora", Role::Counter).await;
    let a = app
        .send(
            Method::PUT,
            POLICY,
            &Auth::Bearer(cora),
            Body::Json(json!({"policy": "risk"})),
        )
        .await;
    assert_eq!(a.status, 403, "{}", a.text);
    // A supervisor reads the page but the form is not theirs to save.
    let sam = app.sign_in("sam", PASSWORD).await;
    let page = get(&app, &sam, PAGE).await;
    assert_eq!(page.status, 200, "{}", page.text);
    assert!(page.text.contains("id=\"read-only\""), "{}", page.text);
    let mut f = form_fields(&page.text, PAGE);
    set(&mut f, "policy", "risk");
    assert_eq!(post_form(&app, &sam, &f).await.status, 403);

    let ines = app.sign_in("ines", PASSWORD).await;
    let page = get(&app, &ines, PAGE).await;
    let mut f = form_fields(&page.text, PAGE);
    set(&mut f, "policy", "risk");
    let missing: Vec<(String, String)> = f.iter().filter(|(k, _)| k != "csrf").cloned().collect();
    let a = post_form(&app, &ines, &missing).await;
    assert_eq!(a.status, 400, "{}", a.text);
    assert!(a.text.contains("security token"), "{}", a.text);
    let (_, p) = app.get(POLICY).await;
    assert_eq!(p["policy"], "abc", "nothing changed");
    assert!(audit(&app).is_empty());
}

#[tokio::test]
async fn each_change_by_page_or_api_is_in_the_audit_log() {
    let app = spawn_app().await;
    site(&app).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let page = get(&app, &ines, PAGE).await;
    assert_eq!(page.status, 200, "{}", page.text);
    let text = common::unescape(&page.text);
    assert!(
        text.contains("your company's own controls"),
        "the caution: {text}"
    );
    let mut f = form_fields(&page.text, PAGE);
    set(&mut f, "policy", "blend");
    set(&mut f, "floor_a", "24");
    let a = post_form(&app, &ines, &f).await;
    assert_eq!(a.status, 303, "{}", a.text);
    let (_, p) = app.get(POLICY).await;
    assert_eq!(
        p,
        json!({"policy": "blend", "floor_a": 24, "floor_b": 4, "floor_c": 1})
    );
    set_policy(&app, json!({"policy": "risk"})).await;
    let rows = audit(&app);
    assert_eq!(rows.len(), 2, "{rows:?}");
    assert!(rows[0].0.contains("ines"), "{rows:?}");
    assert_eq!(rows[0].1["was"]["policy"], "abc");
    assert_eq!(rows[0].1["now"]["policy"], "blend");
    assert_eq!(rows[0].1["now"]["floor_a"], 24);
    assert_eq!(rows[1].1["was"]["policy"], "blend");
    assert_eq!(rows[1].1["now"]["policy"], "risk");
    let page = get(&app, &ines, &format!("{PAGE}?saved=policy")).await;
    assert!(
        page.text.contains("Saved: count intervals."),
        "{}",
        page.text
    );
}
