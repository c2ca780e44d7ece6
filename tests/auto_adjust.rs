//! End-to-end tests of automatic count adjustments over real HTTP and a real SQLite
//! file: a counter's phone syncs finished bins, the netting judges them, and the
//! settling pass (`Store::settle_results`, which `cairn serve` runs every minute) posts
//! one count adjustment for each settled hit with a variance at a site that allows it;
//! the host reads them from the adjustments feed, marked automatic.
//!
//! Tolerances are the defaults (class C 5 % of f*: common practice, no source); building
//! the day's list classifies S1 as class C (it has five weeks of history and no issues). With `review_site`'s book of S1 (40 in BIN_1,
//! 10 in BIN_2), one unit off is within 5 % of 40 (2 units) but not of 10 (0.5 units).

mod common;

use cairn::time::Timestamp;
use common::{
    Auth, BIN_1, BIN_2, Body, PASSWORD, REVIEW_DAY, TestApp, review_site, s1_each_gtin, spawn_app,
};
use reqwest::Method;
use serde_json::{Value, json};
use uuid::Uuid;

/// The phone's clock now: an hour behind the server's (the server corrects it). Read
/// afresh for each count, and a count's events are a few ms apart and sent at once, so a
/// later count (a recount) is later than the one before it in server time too.
fn phone_now() -> i64 {
    cairn::time::Timestamp::now().0 - 3_600_000
}
/// A host that may post up to 15 minutes late: counts stay provisional that long.
const LAG_MS: i64 = 900_000;
const DAY_MS: i64 = 86_400_000;

fn id() -> String {
    Uuid::now_v7().to_string()
}

fn ms(t: &Value) -> i64 {
    Timestamp::parse_rfc3339(t.as_str().expect("an instant"))
        .expect("RFC 3339")
        .0
}

async fn put(app: &TestApp, path: &str, body: &Value) {
    let r = app
        .with_token(app.client.put(format!("{}{path}", app.base)))
        .json(body)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200, "{}", r.text().await.unwrap_or_default());
}

/// Switches automatic adjustment on or off through the netting settings API.
async fn set_auto_adjust(app: &TestApp, on: bool) {
    let (s, mut settings) = app.get("/api/v1/sites/T/netting/settings").await;
    assert_eq!(s, 200, "{settings}");
    settings["auto_adjust"] = json!(on);
    put(app, "/api/v1/sites/T/netting/settings", &settings).await;
}

/// Gives `run` of `day`'s list to `who`, enrols their phone and counts each bin of
/// `counts` it holds an open task for in one sync request (open, one scan, done).
async fn count(app: &TestApp, day: &str, who: &str, pin: &str, counts: &[(&str, i64)]) {
    put(
        app,
        &format!("/api/v1/sites/T/count-lists/{day}/runs/1"),
        &json!({"holder": who}),
    )
    .await;
    let token = app.enrol(who, pin, "T").await.json()["token"]
        .as_str()
        .expect("the phone enrols")
        .to_string();
    let tasks: Value = app
        .client
        .get(format!("{}/api/v1/sites/T/my-tasks?day={day}", app.base))
        .bearer_auth(&token)
        .send()
        .await
        .unwrap()
        .json()
        .await
        .unwrap();
    let phone_at = phone_now() - 20 * counts.len() as i64;
    let mut events = Vec::new();
    for (i, (bin, qty)) in counts.iter().enumerate() {
        let task = tasks["tasks"]
            .as_array()
            .unwrap()
            .iter()
            .find(|t| t["bin"] == *bin && t["done"] != true)
            .unwrap_or_else(|| panic!("{who} holds {bin}: {tasks}"));
        let pass = id();
        let at = phone_at + i as i64 * 20;
        let base = json!({"count": pass, "task": task["id"], "bin": bin});
        let event = |eid: String, t: i64, kind: &str, extra: Value| {
            let mut e = base.clone();
            let o = e.as_object_mut().unwrap();
            o.insert("id".into(), json!(eid));
            o.insert("at".into(), json!(t));
            o.insert("type".into(), json!(kind));
            o.extend(extra.as_object().unwrap().clone());
            e
        };
        events.push(event(
            pass.clone(),
            at,
            "bin_opened",
            json!({"label": task["label"]}),
        ));
        events.push(event(
            id(),
            at + 5,
            "line",
            json!({"sku": "S1", "gtin": s1_each_gtin(), "packs": qty, "qty": qty, "lot": "", "entry": "scan"}),
        ));
        events.push(event(id(), at + 12, "bin_done", json!({})));
    }
    let r = app
        .client
        .post(format!("{}/api/v1/sites/T/sync", app.base))
        .bearer_auth(&token)
        .json(&app.stamped(
            &token,
            &json!({"device_clock": phone_at + 20 * counts.len() as i64, "rtt_ms": 80,
                    "events": events}),
        ))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let answer: Value = r.json().await.unwrap();
    assert!(
        answer["results"]
            .as_array()
            .unwrap()
            .iter()
            .all(|r| r["status"] == "accepted"),
        "{answer}"
    );
}

/// Returns the current result of S1 in `bin` (the first count's, not a recount's).
async fn current(app: &TestApp, bin: &str) -> Value {
    let (s, b) = app
        .get(&format!(
            "/api/v1/sites/T/count-results?state=current&bin={bin}"
        ))
        .await;
    assert_eq!(s, 200, "{b}");
    b["results"].as_array().unwrap()[0].clone()
}

async fn detail(app: &TestApp, result: i64) -> Value {
    let (s, b) = app
        .get(&format!("/api/v1/sites/T/count-results/{result}"))
        .await;
    assert_eq!(s, 200, "{b}");
    b
}

async fn adjustments_in(app: &TestApp, bin: &str) -> Vec<Value> {
    let (s, b) = app
        .get(&format!("/api/v1/sites/T/bins/{bin}/movements"))
        .await;
    assert_eq!(s, 200, "{b}");
    b["movements"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|m| m["kind"] == "count_adjustment")
        .cloned()
        .collect()
}

async fn balance(app: &TestApp, bin: &str) -> i64 {
    let (s, b) = app
        .get(&format!("/api/v1/sites/T/balances?bin={bin}&sku=S1"))
        .await;
    assert_eq!(s, 200, "{b}");
    b["balances"][0]["qty"].as_i64().unwrap_or(0)
}

async fn settle(app: &TestApp, at: i64) -> usize {
    cairn::writes::settle(app.state.store.as_ref(), Timestamp(at))
        .await
        .expect("settling runs")
        .adjusted
        .len()
}

#[tokio::test]
async fn nothing_is_posted_while_the_switch_is_off_nor_for_counts_received_before_it_was_on() {
    let app = spawn_app().await;
    review_site(&app, &[]).await;
    count(&app, REVIEW_DAY, "cora", "4821", &[(BIN_1, 39)]).await;
    let r = current(&app, BIN_1).await;
    assert_eq!(
        (r["verdict"].as_str(), r["variance"].as_i64()),
        (Some("hit"), Some(-1))
    );
    let late = Timestamp::now().0 + DAY_MS;
    assert_eq!(settle(&app, late).await, 0);
    assert!(adjustments_in(&app, BIN_1).await.is_empty());

    // Switching it on later leaves the counts already received alone: no backlog is posted.
    set_auto_adjust(&app, true).await;
    assert_eq!(settle(&app, late + 60_000).await, 0);
    assert!(adjustments_in(&app, BIN_1).await.is_empty());
    assert_eq!(balance(&app, BIN_1).await, 40);
    let (_, feed) = app.get("/api/v1/sites/T/adjustments").await;
    assert_eq!(feed["adjustments"], json!([]), "{feed}");
}

#[tokio::test]
async fn a_settled_variance_within_tolerance_is_adjusted_once_at_its_posting_instant() {
    let app = spawn_app().await;
    review_site(&app, &[]).await;
    set_auto_adjust(&app, true).await;
    put(
        &app,
        "/api/v1/sites/T/netting/sources",
        &json!([{"source": "api", "uncertainty_ms": 0, "posting_lag_ms": LAG_MS}]),
    )
    .await;
    count(&app, REVIEW_DAY, "cora", "4821", &[(BIN_1, 39), (BIN_2, 9)]).await;
    let hit = current(&app, BIN_1).await;
    let out = current(&app, BIN_2).await;
    assert_eq!(
        (hit["verdict"].as_str(), hit["variance"].as_i64()),
        (Some("hit"), Some(-1))
    );
    assert_eq!(out["verdict"], "out_of_tolerance", "{out}");
    let settles_at = ms(&hit["settles_at"]);
    let post_at =
        ms(&detail(&app, hit["id"].as_i64().unwrap()).await["evidence"]["netting"]["post_at"]);

    // Provisional: a late movement could still change it, so it waits.
    assert!(settles_at > Timestamp::now().0, "{hit}");
    assert_eq!(settle(&app, settles_at - 1_000).await, 0);
    assert!(adjustments_in(&app, BIN_1).await.is_empty());

    // Settled: exactly one count adjustment of c − f* at the posting instant.
    let outcome = cairn::writes::settle(app.state.store.as_ref(), Timestamp(settles_at + 1))
        .await
        .unwrap();
    assert_eq!(outcome.adjusted.len(), 1, "{outcome:?}");
    assert_eq!(outcome.adjusted[0].result, hit["id"].as_i64().unwrap());
    let posted = adjustments_in(&app, BIN_1).await;
    assert_eq!(posted.len(), 1, "{posted:?}");
    assert_eq!(posted[0]["qty"], -1);
    assert_eq!(ms(&posted[0]["event_at"]), post_at);
    assert_eq!(posted[0]["source"], "count");
    assert_eq!(posted[0]["actor"], "system");
    assert_eq!(posted[0]["id"], outcome.adjusted[0].movement.as_str());
    assert_eq!(balance(&app, BIN_1).await, 39);

    // The posting re-netted the count: the new current result has variance 0 and
    // replaces the adjusted one, which says it was adjusted automatically.
    let renetted = current(&app, BIN_1).await;
    assert_ne!(renetted["id"], hit["id"]);
    assert_eq!(renetted["variance"], 0, "{renetted}");
    assert_eq!(renetted["auto_adjusted"], false);
    let old = detail(&app, hit["id"].as_i64().unwrap()).await;
    assert_eq!(old["superseded_by"], renetted["id"]);
    assert_eq!(old["auto_adjusted"], true, "{old}");
    assert_eq!(old["reviewed"], false);
    assert_eq!(old["automatic_adjustment"]["movement"], posted[0]["id"]);

    // A second pass, and a later one, post nothing more; the out-of-tolerance count waits
    // for its recount and review.
    assert_eq!(settle(&app, settles_at + 2).await, 0);
    assert_eq!(settle(&app, settles_at + DAY_MS).await, 0);
    assert_eq!(adjustments_in(&app, BIN_1).await.len(), 1);
    assert!(adjustments_in(&app, BIN_2).await.is_empty());
    assert_eq!(balance(&app, BIN_2).await, 10);

    // The audit trail names it as automatic, with no approval.
    let actions = app.sql_rows(
        "select action, actor, detail from audit_event where action in ('approval', 'adjustment')",
    );
    assert_eq!(actions.len(), 1, "{actions:?}");
    assert_eq!(
        (actions[0][0].as_str(), actions[0][1].as_str()),
        ("adjustment", "system")
    );
    let d: Value = serde_json::from_str(&actions[0][2]).unwrap();
    assert_eq!(
        (d["automatic"].as_bool(), d["qty"].as_i64()),
        (Some(true), Some(-1)),
        "{d}"
    );

    // The host's feed lists it, marked automatic, with no reviewer; the cursor ends there.
    let (s, feed) = app.get("/api/v1/sites/T/adjustments?limit=1").await;
    assert_eq!(s, 200, "{feed}");
    let a = &feed["adjustments"][0];
    assert_eq!(
        a["id"], posted[0]["id"],
        "the feed's id is the movement uid"
    );
    assert_eq!(a["automatic"], true);
    assert_eq!(a["review"], Value::Null);
    assert_eq!(a["approver"], "");
    assert_eq!(a["reason_code"], "auto_within_tolerance");
    assert_eq!(a["result"], hit["id"]);
    assert_eq!(
        (a["bin"].as_str(), a["qty"].as_i64()),
        (Some(BIN_1), Some(-1))
    );
    assert_eq!(ms(&a["approved_at"]), settles_at + 1);
    let next = feed["next"]
        .as_str()
        .expect("a full page has a next")
        .to_string();
    let (_, rest) = app
        .get(&format!("/api/v1/sites/T/adjustments?after={next}"))
        .await;
    assert_eq!(rest["adjustments"], json!([]), "{rest}");
    let r = app
        .with_token(app.client.get(format!(
            "{}/api/v1/sites/T/adjustments?format=csv",
            app.base
        )))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let text = r.text().await.unwrap();
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let header = reader.headers().unwrap().clone();
    let rows: Vec<csv::StringRecord> = reader.records().map(Result::unwrap).collect();
    assert_eq!(rows.len(), 1, "{text}");
    let cell = |name: &str| {
        rows[0]
            .get(header.iter().position(|h| h == name).unwrap())
            .unwrap()
    };
    assert_eq!(cell("automatic"), "true");
    assert_eq!(cell("review"), "");
    assert_eq!(cell("id"), a["id"].as_str().unwrap());

    // The difference page shows the automatic adjustment where a decision would be.
    let ines = app.sign_in("ines", PASSWORD).await;
    let page = app
        .send(
            Method::GET,
            &format!("/sites/T/differences/{}", hit["id"]),
            &Auth::Session(ines),
            Body::Empty,
        )
        .await;
    assert_eq!(page.status, 200, "{}", page.text);
    assert!(
        page.text.contains("Adjusted automatically"),
        "{}",
        page.text
    );
    assert!(
        page.text.contains(posted[0]["id"].as_str().unwrap()),
        "{}",
        page.text
    );
    assert!(!page.text.contains("/approve\""), "{}", page.text);
}

#[tokio::test]
async fn a_count_the_recount_found_wrong_is_never_adjusted() {
    let app = spawn_app().await;
    review_site(&app, &[]).await;
    set_auto_adjust(&app, true).await;
    // 36 against 40 is out of tolerance: a recount goes to dan, who finds the 40.
    count(&app, REVIEW_DAY, "cora", "4821", &[(BIN_1, 36)]).await;
    let first = current(&app, BIN_1).await;
    assert_eq!(first["verdict"], "out_of_tolerance", "{first}");
    // Waiting for its recount: nothing is posted.
    assert_eq!(settle(&app, Timestamp::now().0 + DAY_MS).await, 0);
    let today = chrono::Utc::now().date_naive().to_string();
    count(&app, &today, "dan", "5932", &[(BIN_1, 40)]).await;
    let first = detail(&app, first["id"].as_i64().unwrap()).await;
    assert_eq!(first["recount_outcome"], "book_right", "{first}");
    assert_eq!(
        (first["verdict"].as_str(), first["variance"].as_i64()),
        (Some("hit"), Some(-4))
    );
    assert_eq!(first["first_count_wrong"], true);

    assert_eq!(settle(&app, Timestamp::now().0 + 2 * DAY_MS).await, 0);
    assert!(adjustments_in(&app, BIN_1).await.is_empty());
    assert_eq!(balance(&app, BIN_1).await, 40);
    assert_eq!(
        detail(&app, first["id"].as_i64().unwrap()).await["auto_adjusted"],
        false
    );
}
