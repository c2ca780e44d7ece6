//! End-to-end tests of the review of count differences over real HTTP, real
//! sessions and a real SQLite file: a counter's phone syncs a finished bin,
//! the netting makes a difference, and the inventory manager's pages list it,
//! show its evidence, approve it (one count-adjustment movement) or reject it;
//! the host reads what was posted from the adjustments feed.

mod common;

use cairn::accounts::Role;
use common::{
    Answer, Auth, BIN_1, BIN_2, Body, PASSWORD, Person, REVIEW_DAY, Session, TestApp, review_site,
    s1_each_gtin, spawn_app,
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

fn id() -> String {
    Uuid::now_v7().to_string()
}

/// Who the review needs besides `review_site`'s cora, dan and ines: sam is
/// supervisor and admin (no inventory manager role), mona both counts and
/// manages inventory, eve counts too.
const OTHERS: &[Person] = &[
    ("sam", &[Role::Supervisor, Role::Admin], None),
    (
        "mona",
        &[Role::Counter, Role::InventoryManager],
        Some("6043"),
    ),
    ("eve", &[Role::Counter], Some("7154")),
];

/// Changes the site's review limits through the netting settings API.
async fn set_limits(app: &TestApp, manager_minor: i64, bulk_minor: i64) {
    let (s, mut settings) = app.get("/api/v1/sites/T/netting/settings").await;
    assert_eq!(s, 200, "{settings}");
    settings["manager_value_minor"] = json!(manager_minor);
    settings["bulk_value_minor"] = json!(bulk_minor);
    let r = app
        .with_token(
            app.client
                .put(format!("{}/api/v1/sites/T/netting/settings", app.base)),
        )
        .json(&settings)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200, "{}", r.text().await.unwrap_or_default());
}

/// Gives run 1 to `who`, enrols their phone and counts each bin as `(bin, qty)`
/// with a scan of single units, marking it done: one sync request.
async fn count_bins(app: &TestApp, who: &str, pin: &str, counts: &[(&str, i64)]) {
    count_run(app, REVIEW_DAY, who, pin, counts).await;
}

/// Recounts bins as dan. The phone's clock is corrected to the server's, so the
/// count was done today (UTC), and its recount tasks are on today's list, in a
/// run no one holds until it is given to him.
async fn recount_bins(app: &TestApp, counts: &[(&str, i64)]) {
    let today = chrono::Utc::now().date_naive().to_string();
    count_run(app, &today, "dan", "5932", counts).await;
}

async fn count_run(app: &TestApp, day: &str, who: &str, pin: &str, counts: &[(&str, i64)]) {
    let tasks = phone_tasks(app, day, 1, who, pin).await;
    let found = count_tasks(app, &tasks, counts).await;
    assert_eq!(
        found,
        counts.len(),
        "{who} holds every bin to count: {}",
        tasks.1
    );
}

/// Gives `run` of `day`'s list to `who`, enrols their phone and returns its
/// token with the phone's view of the run.
async fn phone_tasks(app: &TestApp, day: &str, run: u32, who: &str, pin: &str) -> (String, Value) {
    let r = app
        .with_token(app.client.put(format!(
            "{}/api/v1/sites/T/count-lists/{day}/runs/{run}",
            app.base
        )))
        .json(&json!({"holder": who}))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200, "{}", r.text().await.unwrap_or_default());
    let enrolled = app.enrol(who, pin, "T").await;
    let token = enrolled.json()["token"]
        .as_str()
        .unwrap_or_else(|| panic!("{who}'s phone enrols: {}", enrolled.text))
        .to_string();
    let tasks = my_tasks(app, &token, day).await;
    (token, tasks)
}

async fn my_tasks(app: &TestApp, token: &str, day: &str) -> Value {
    app.client
        .get(format!("{}/api/v1/sites/T/my-tasks?day={day}", app.base))
        .bearer_auth(token)
        .send()
        .await
        .unwrap()
        .json()
        .await
        .unwrap()
}

/// Counts each bin of `counts` the phone holds an open task for, as one sync
/// request (open, one scan of single units, done); returns how many it held.
async fn count_tasks(
    app: &TestApp,
    (token, tasks): &(String, Value),
    counts: &[(&str, i64)],
) -> usize {
    let phone_at = phone_now() - 20 * counts.len() as i64;
    let mut events = Vec::new();
    let mut found = 0;
    for (i, (bin, qty)) in counts.iter().enumerate() {
        let Some(task) = tasks["tasks"]
            .as_array()
            .unwrap()
            .iter()
            .find(|t| t["bin"] == *bin && t["done"] != true)
        else {
            continue;
        };
        found += 1;
        let count = id();
        let at = phone_at + i as i64 * 20;
        let base = json!({"count": count, "task": task["id"], "bin": bin});
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
            count.clone(),
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
    if events.is_empty() {
        return 0;
    }
    let r = app
        .client
        .post(format!("{}/api/v1/sites/T/sync", app.base))
        .bearer_auth(token)
        .json(&app.stamped(
            token,
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
    found
}

async fn get(app: &TestApp, s: &Session, path: &str) -> Answer {
    app.send(Method::GET, path, &Auth::Session(s.clone()), Body::Empty)
        .await
}

async fn post(app: &TestApp, s: &Session, path: &str, fields: &[(&str, &str)]) -> Answer {
    let mut form = vec![("csrf".to_string(), s.csrf.clone())];
    form.extend(fields.iter().map(|(k, v)| (k.to_string(), v.to_string())));
    app.send(
        Method::POST,
        path,
        &Auth::Session(s.clone()),
        Body::Form(form),
    )
    .await
}

/// Returns the list page's difference ids by bin.
fn listed(html: &str) -> Vec<(i64, String)> {
    html.split("<tr data-difference=\"")
        .skip(1)
        .map(|chunk| {
            let id = chunk.split('"').next().unwrap().parse().unwrap();
            let bin = chunk
                .split("<code>")
                .nth(1)
                .and_then(|c| c.split("</code>").next())
                .unwrap_or_default()
                .to_string();
            (id, bin)
        })
        .collect()
}

async fn difference_of(app: &TestApp, s: &Session, bin: &str) -> i64 {
    let page = get(app, s, "/sites/T/differences").await;
    assert_eq!(page.status, 200, "{}", page.text);
    listed(&page.text)
        .into_iter()
        .find(|(_, b)| b == bin)
        .unwrap_or_else(|| panic!("a difference of {bin} is listed: {}", page.text))
        .0
}

async fn balance(app: &TestApp, bin: &str, at: Option<&str>) -> i64 {
    let q = at.map(|t| format!("&at={t}")).unwrap_or_default();
    let (s, b) = app
        .get(&format!("/api/v1/sites/T/balances?bin={bin}&sku=S1{q}"))
        .await;
    assert_eq!(s, 200, "{b}");
    b["balances"][0]["qty"].as_i64().unwrap_or(0)
}

async fn adjustments_of(app: &TestApp, bin: &str) -> Vec<Value> {
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

fn ms(t: &Value) -> i64 {
    cairn::time::Timestamp::parse_rfc3339(t.as_str().expect("an instant"))
        .expect("RFC 3339")
        .0
}

#[tokio::test]
async fn an_approved_difference_posts_one_adjustment_at_the_book_states_instant() {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    count_bins(&app, "cora", "4821", &[(BIN_1, 36)]).await;
    let ines = app.sign_in("ines", PASSWORD).await;

    // Out of tolerance, so a recount goes first (DESIGN §5): not decided before it.
    let id = difference_of(&app, &ines, BIN_1).await;
    let list = get(&app, &ines, "/sites/T/differences").await;
    assert!(list.text.contains("recount pending"), "{}", list.text);
    let early = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{id}/approve"),
        &[("reason", "damaged")],
    )
    .await;
    assert_eq!(early.status, 409, "{}", early.text);
    assert!(
        early.text.contains("waits for its recount"),
        "{}",
        early.text
    );
    recount_bins(&app, &[(BIN_1, 36)]).await;
    let list = get(&app, &ines, "/sites/T/differences").await;
    assert_eq!(
        listed(&list.text),
        [(id, BIN_1.to_string())],
        "the recount's own result is shown with the first, not as a second difference"
    );
    assert!(list.text.contains("confirmed by recount"), "{}", list.text);

    let detail = get(&app, &ines, &format!("/sites/T/differences/{id}")).await;
    assert!(detail.text.contains("counted by dan"), "{}", detail.text);
    assert_eq!(detail.status, 200, "{}", detail.text);
    assert!(
        detail.text.contains(r#"<dd id="counted">36</dd>"#),
        "{}",
        detail.text
    );
    assert!(detail.text.contains(r#"<dd id="f-star">40</dd>"#));
    assert!(detail.text.contains(r#"<dd id="variance">-4</dd>"#));
    assert!(
        detail
            .text
            .contains(r#"<tr class="f-star"><td class="n">40</td>"#),
        "the feasible values mark f*: {}",
        detail.text
    );
    assert!(detail.text.contains("<svg class=\"timeline\""));
    assert!(detail.text.contains("class=\"scan\" data-qty=\"36\""));
    assert!(
        detail.text.contains("own approval controls"),
        "the page carries the caution about financial records"
    );
    assert!(detail.text.contains("Counted by cora"), "{}", detail.text);

    let (s, result) = app
        .get(&format!("/api/v1/sites/T/count-results/{id}"))
        .await;
    assert_eq!(s, 200, "{result}");
    // Record accuracy judges the first count only (the recount checks it) and keeps its
    // miss after the approval: the adjustment re-nets the key to no variance, which says
    // nothing of the record as it was counted.
    let accuracy = || async {
        let (s, v) = app.get("/api/v1/sites/T/accuracy").await;
        assert_eq!(s, 200, "{v}");
        (
            v["counted"].clone(),
            v["ira"]["part"].clone(),
            v["ira"]["whole"].clone(),
        )
    };
    let judged = accuracy().await;
    assert_eq!(judged.0, judged.2, "{judged:?}");
    assert!(
        judged.1.as_u64() < judged.2.as_u64(),
        "the difference is a miss: {judged:?}"
    );

    let approved = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{id}/approve"),
        &[("reason", "damaged")],
    )
    .await;
    assert_eq!(approved.status, 303, "{}", approved.text);
    assert_eq!(balance(&app, BIN_1, None).await, 36);
    let adj = adjustments_of(&app, BIN_1).await;
    assert_eq!(adj.len(), 1, "{adj:?}");
    assert_eq!(adj[0]["qty"], -4);
    assert_eq!(adj[0]["source"], "count");
    assert_eq!(adj[0]["actor"], "ines");
    // Nothing moved in the window, so f* is the opening balance and the
    // adjustment joins it: 1 ms before the window starts (DEVELOPERS "Netting").
    let window_start =
        ms(&result["window_start"]).min(ms(&result["evidence"]["netting"]["window"]["start"]));
    assert_eq!(ms(&adj[0]["event_at"]), window_start - 1, "{result}");
    let before = cairn::time::Timestamp(window_start - 2).to_string();
    assert_eq!(balance(&app, BIN_1, Some(&before)).await, 40);

    let page = get(&app, &ines, &format!("/sites/T/differences/{id}")).await;
    assert!(page.text.contains("approved by ines"), "{}", page.text);
    assert!(page.text.contains(adj[0]["id"].as_str().unwrap()));
    // It left the list.
    let list = get(&app, &ines, "/sites/T/differences").await;
    assert!(listed(&list.text).iter().all(|(i, _)| *i != id));

    // Approving again is refused and changes nothing.
    let again = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{id}/approve"),
        &[("reason", "damaged")],
    )
    .await;
    assert_eq!(again.status, 409, "{}", again.text);
    assert!(again.text.contains("already approved"), "{}", again.text);
    assert_eq!(balance(&app, BIN_1, None).await, 36);
    assert_eq!(adjustments_of(&app, BIN_1).await.len(), 1);

    // The re-net the adjustment caused finds the count among the book states.
    let (_, current) = app
        .get(&format!(
            "/api/v1/sites/T/count-results?state=current&bin={BIN_1}"
        ))
        .await;
    let rows = current["results"].as_array().cloned().unwrap_or_default();
    let now_row = rows
        .iter()
        .find(|r| r["bin"] == BIN_1 && r["sku"] == "S1")
        .unwrap_or_else(|| panic!("a current result of {BIN_1}: {current}"));
    assert_eq!(now_row["variance"], 0, "{now_row}");
    assert_eq!(
        accuracy().await,
        judged,
        "the approval does not turn the miss into a hit"
    );
}

#[tokio::test]
async fn a_rejection_keeps_the_book_and_records_the_investigation_note() {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    count_bins(&app, "cora", "4821", &[(BIN_1, 36)]).await;
    recount_bins(&app, &[(BIN_1, 36)]).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let id = difference_of(&app, &ines, BIN_1).await;
    let path = format!("/sites/T/differences/{id}/reject");
    let empty = post(&app, &ines, &path, &[("note", "  ")]).await;
    assert_eq!(empty.status, 400, "{}", empty.text);
    assert!(empty.text.contains("needs a note"), "{}", empty.text);
    let rejected = post(
        &app,
        &ines,
        &path,
        &[("note", "Check the dock receipts of 2 March")],
    )
    .await;
    assert_eq!(rejected.status, 303, "{}", rejected.text);
    assert_eq!(balance(&app, BIN_1, None).await, 40);
    assert!(adjustments_of(&app, BIN_1).await.is_empty());
    let page = get(&app, &ines, &format!("/sites/T/differences/{id}")).await;
    assert!(page.text.contains("rejected by ines"), "{}", page.text);
    assert!(
        page.text.contains("Check the dock receipts of 2 March"),
        "{}",
        page.text
    );
    let approve = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{id}/approve"),
        &[("reason", "damaged")],
    )
    .await;
    assert_eq!(
        approve.status, 409,
        "a rejected difference is not approved later"
    );
    let (s, feed) = app.get("/api/v1/sites/T/adjustments").await;
    assert_eq!(s, 200);
    assert_eq!(feed["adjustments"], json!([]));
}

#[tokio::test]
async fn nobody_approves_a_difference_in_a_bin_they_counted() {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    count_bins(&app, "mona", "6043", &[(BIN_1, 36)]).await;
    recount_bins(&app, &[(BIN_1, 36)]).await;
    let mona = app.sign_in("mona", PASSWORD).await;
    let id = difference_of(&app, &mona, BIN_1).await;
    let page = get(&app, &mona, &format!("/sites/T/differences/{id}")).await;
    assert!(page.text.contains("You counted this bin"), "{}", page.text);
    for (path, fields) in [
        ("approve", vec![("reason", "damaged")]),
        ("reject", vec![("note", "my own count, looks wrong")]),
    ] {
        let a = post(
            &app,
            &mona,
            &format!("/sites/T/differences/{id}/{path}"),
            &fields,
        )
        .await;
        assert_eq!(a.status, 403, "{path}: {}", a.text);
        assert!(a.text.contains("you counted this bin"), "{}", a.text);
    }
    let bulk = post(
        &app,
        &mona,
        "/sites/T/differences/approve",
        &[("id", &id.to_string()), ("reason", "damaged")],
    )
    .await;
    assert!(bulk.text.contains("0 of 1 selected"), "{}", bulk.text);
    assert_eq!(balance(&app, BIN_1, None).await, 40);
    assert!(adjustments_of(&app, BIN_1).await.is_empty());
    // Someone else may.
    let ines = app.sign_in("ines", PASSWORD).await;
    let a = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{id}/approve"),
        &[("reason", "mis_pick")],
    )
    .await;
    assert_eq!(a.status, 303, "{}", a.text);
    assert_eq!(balance(&app, BIN_1, None).await, 36);
}

#[tokio::test]
async fn above_the_value_limit_only_an_inventory_manager_approves() {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    // 4 × 4.50 = 18.00 is above a limit of 10.00.
    set_limits(&app, 1_000, 500).await;
    count_bins(&app, "cora", "4821", &[(BIN_1, 36)]).await;
    recount_bins(&app, &[(BIN_1, 36)]).await;
    let sam = app.sign_in("sam", PASSWORD).await;
    let id = difference_of(&app, &sam, BIN_1).await;
    let path = format!("/sites/T/differences/{id}/approve");
    let refused = post(&app, &sam, &path, &[("reason", "damaged")]).await;
    assert_eq!(refused.status, 403, "{}", refused.text);
    assert!(
        refused.text.contains("only an inventory manager"),
        "{}",
        refused.text
    );
    assert_eq!(balance(&app, BIN_1, None).await, 40);
    let ines = app.sign_in("ines", PASSWORD).await;
    let unknown = post(&app, &ines, &path, &[("reason", "gremlins")]).await;
    assert_eq!(unknown.status, 400, "{}", unknown.text);
    let ok = post(&app, &ines, &path, &[("reason", "damaged")]).await;
    assert_eq!(ok.status, 303, "{}", ok.text);
    assert_eq!(balance(&app, BIN_1, None).await, 36);
}

#[tokio::test]
async fn bulk_approval_takes_only_the_differences_below_the_bulk_limit_and_the_feed_lists_each_once()
 {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    // BIN_1: −4 × 4.50 = 18.00; BIN_2: −5 × 4.50 = 22.50; bulk below 20.00.
    set_limits(&app, 100_000, 2_000).await;
    // Today's list has two runs, held by dan and eve, so the two recounts are
    // shared between them.
    let today = chrono::Utc::now().date_naive().to_string();
    let (s, b) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &json!({"day": today, "counters": 2, "minutes": 120}),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let dan = phone_tasks(&app, &today, 1, "dan", "5932").await;
    let eve = phone_tasks(&app, &today, 2, "eve", "7154").await;
    count_bins(&app, "cora", "4821", &[(BIN_1, 36), (BIN_2, 5)]).await;
    let recounts = [(BIN_1, 36), (BIN_2, 5)];
    let mut recounted = 0;
    for (token, _) in [dan, eve] {
        let fresh = (token.clone(), my_tasks(&app, &token, &today).await);
        recounted += count_tasks(&app, &fresh, &recounts).await;
    }
    assert_eq!(recounted, 2, "both recounts were done");
    let ines = app.sign_in("ines", PASSWORD).await;
    let list = get(&app, &ines, "/sites/T/differences").await;
    let ids = listed(&list.text);
    assert_eq!(ids.len(), 2, "{}", list.text);
    let (small, large) = (
        ids.iter().find(|(_, b)| b == BIN_1).unwrap().0,
        ids.iter().find(|(_, b)| b == BIN_2).unwrap().0,
    );
    assert!(
        list.text.contains(&format!(r#"name="id" value="{small}""#)),
        "the small one is offered for bulk approval"
    );
    assert!(!list.text.contains(&format!(r#"name="id" value="{large}""#)));
    // Filters: by value and by class (unclassified items have none).
    let filtered = get(&app, &ines, "/sites/T/differences?min_value=20").await;
    assert_eq!(listed(&filtered.text).len(), 1);
    assert_eq!(listed(&filtered.text)[0].0, large);
    let none = get(&app, &ines, "/sites/T/differences?class=A").await;
    assert!(listed(&none.text).is_empty());
    let bad = get(&app, &ines, "/sites/T/differences?min_value=lots").await;
    assert_eq!(bad.status, 400);

    // Posting both anyway approves only the small one.
    let bulk = post(
        &app,
        &ines,
        "/sites/T/differences/approve",
        &[
            ("id", &small.to_string()),
            ("id", &large.to_string()),
            ("reason", "mis_pick"),
        ],
    )
    .await;
    assert_eq!(bulk.status, 200, "{}", bulk.text);
    assert!(bulk.text.contains("1 of 2 selected"), "{}", bulk.text);
    assert!(
        bulk.text.contains("not below the bulk limit"),
        "{}",
        bulk.text
    );
    assert_eq!(balance(&app, BIN_1, None).await, 36);
    assert_eq!(balance(&app, BIN_2, None).await, 10);
    let one = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{large}/approve"),
        &[("reason", "theft_or_loss")],
    )
    .await;
    assert_eq!(one.status, 303, "{}", one.text);
    assert_eq!(balance(&app, BIN_2, None).await, 5);

    // The feed, one per page: each adjustment once, then the end.
    let mut seen = Vec::new();
    let mut after = String::new();
    for _ in 0..5 {
        let (s, page) = app
            .get(&format!(
                "/api/v1/sites/T/adjustments?limit=1&after={after}"
            ))
            .await;
        assert_eq!(s, 200, "{page}");
        seen.extend(page["adjustments"].as_array().unwrap().iter().cloned());
        match page["next"].as_str() {
            Some(n) => after = n.to_string(),
            None => break,
        }
    }
    assert_eq!(seen.len(), 2, "{seen:?}");
    assert_ne!(seen[0]["id"], seen[1]["id"]);
    let by_bin = |b: &str| seen.iter().find(|a| a["bin"] == b).unwrap().clone();
    assert_eq!(by_bin(BIN_1)["qty"], -4);
    assert_eq!(by_bin(BIN_1)["reason_code"], "mis_pick");
    assert_eq!(by_bin(BIN_2)["qty"], -5);
    assert_eq!(by_bin(BIN_2)["reason_code"], "theft_or_loss");
    assert_eq!(by_bin(BIN_2)["approver"], "ines");
    assert_eq!(by_bin(BIN_2)["result"], large);
    for a in &seen {
        let bin = a["bin"].as_str().unwrap();
        let posted = adjustments_of(&app, bin).await;
        assert_eq!(posted.len(), 1);
        assert_eq!(
            posted[0]["id"], a["id"],
            "the feed's id is the movement uid"
        );
        assert_eq!(posted[0]["event_at"], a["event_at"]);
        assert_eq!(posted[0]["doc_ref"], a["review"].to_string());
    }

    // The CSV holds the same rows.
    let r = app
        .with_token(app.client.get(format!(
            "{}/api/v1/sites/T/adjustments?format=csv",
            app.base
        )))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    let csv = r.text().await.unwrap();
    let mut reader = csv::Reader::from_reader(csv.as_bytes());
    let header = reader.headers().unwrap().clone();
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
    assert_eq!(rows.len(), seen.len());
    for (row, json) in rows.iter().zip(&seen) {
        for (name, cell) in header.iter().zip(row.iter()) {
            let v = &json[name];
            let text = v
                .as_str()
                .map(str::to_string)
                .unwrap_or_else(|| v.to_string());
            assert_eq!(cell, text, "column {name}");
        }
    }
    let bad = app.get("/api/v1/sites/T/adjustments?after=x").await;
    assert_eq!(bad.0, 400);
}

#[tokio::test]
async fn a_provisional_difference_waits_until_it_settles() {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    // A host that may post up to a day late keeps the count provisional.
    let r = app
        .with_token(
            app.client
                .put(format!("{}/api/v1/sites/T/netting/sources", app.base)),
        )
        .json(&json!([{"source": "api", "uncertainty_ms": 0, "posting_lag_ms": 86_400_000}]))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200, "{}", r.text().await.unwrap_or_default());
    count_bins(&app, "cora", "4821", &[(BIN_1, 36)]).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let list = get(&app, &ines, "/sites/T/differences").await;
    assert!(list.text.contains("provisional"), "{}", list.text);
    let id = difference_of(&app, &ines, BIN_1).await;
    assert!(!list.text.contains(&format!(r#"name="id" value="{id}""#)));
    let a = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{id}/approve"),
        &[("reason", "damaged")],
    )
    .await;
    assert_eq!(a.status, 409, "{}", a.text);
    assert!(a.text.contains("is provisional until"), "{}", a.text);
    assert_eq!(balance(&app, BIN_1, None).await, 40);
}

#[tokio::test]
async fn decisions_need_a_decider_and_the_form_token() {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    count_bins(&app, "cora", "4821", &[(BIN_1, 36)]).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let id = difference_of(&app, &ines, BIN_1).await;
    let path = format!("/sites/T/differences/{id}/approve");
    let stale = Session {
        csrf: "not-the-token".into(),
        ..ines.clone()
    };
    let a = post(&app, &stale, &path, &[("reason", "damaged")]).await;
    assert_eq!(a.status, 400, "{}", a.text);
    app.add_user("pia", "T", &[Role::Planner], PASSWORD, None)
        .await;
    let pia = app.sign_in("pia", PASSWORD).await;
    assert_eq!(get(&app, &pia, "/sites/T/differences").await.status, 200);
    let a = post(&app, &pia, &path, &[("reason", "damaged")]).await;
    assert_eq!(a.status, 403, "a planner reads but does not decide");
    let cora = app.sign_in("cora", PASSWORD).await;
    assert_eq!(get(&app, &cora, "/sites/T/differences").await.status, 403);
    assert_eq!(
        get(&app, &cora, &format!("/sites/T/differences/{id}"))
            .await
            .status,
        403
    );
    assert_eq!(balance(&app, BIN_1, None).await, 40);
}

#[tokio::test]
async fn a_reason_code_a_decision_names_is_relabelled_but_never_removed() {
    let app = spawn_app().await;
    review_site(&app, OTHERS).await;
    count_bins(&app, "cora", "4821", &[(BIN_1, 36)]).await;
    recount_bins(&app, &[(BIN_1, 36)]).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let id = difference_of(&app, &ines, BIN_1).await;
    let approved = post(
        &app,
        &ines,
        &format!("/sites/T/differences/{id}/approve"),
        &[("reason", "damaged")],
    )
    .await;
    assert_eq!(approved.status, 303, "{}", approved.text);

    let action = "/sites/T/count-policy/reason-codes";
    let page = get(&app, &ines, "/sites/T/count-policy").await;
    assert_eq!(page.status, 200, "{}", page.text);
    let row = page
        .text
        .split("<tr data-code=\"damaged\">")
        .nth(1)
        .and_then(|r| r.split("</tr>").next())
        .unwrap_or_else(|| panic!("a row for 'damaged': {}", page.text));
    assert!(
        row.contains("<td class=\"n\">1</td>"),
        "one decision: {row}"
    );
    assert!(!row.contains("name=\"remove."), "no remove box: {row}");

    let fields = common::form_fields(&page.text, action);
    let i = fields
        .iter()
        .find(|(k, v)| k.starts_with("code.") && v == "damaged")
        .map(|(k, _)| k["code.".len()..].to_string())
        .expect("the form lists 'damaged'");
    let before = app.get("/api/v1/sites/T/netting/reason-codes").await;

    // Removing it anyway (a form sent by hand) is refused and changes nothing.
    let mut remove = fields.clone();
    remove.push((format!("remove.{i}"), "on".into()));
    let pairs: Vec<(&str, &str)> = remove
        .iter()
        .filter(|(k, _)| k != "csrf")
        .map(|(k, v)| (k.as_str(), v.as_str()))
        .collect();
    let refused = post(&app, &ines, action, &pairs).await;
    assert_eq!(refused.status, 409, "{}", refused.text);
    assert!(
        common::unescape(&refused.text)
            .contains("reason code 'damaged' cannot be removed: 1 decision names it"),
        "{}",
        refused.text
    );
    assert_eq!(
        app.get("/api/v1/sites/T/netting/reason-codes").await,
        before
    );
    // The JSON route keeps the same rule.
    let without: Vec<Value> = before
        .1
        .as_array()
        .unwrap()
        .iter()
        .filter(|c| c["code"] != "damaged")
        .cloned()
        .collect();
    let (s, b) = app
        .put("/api/v1/sites/T/netting/reason-codes", &json!(without))
        .await;
    assert_eq!(s, 409, "{b}");
    assert!(b["error"].as_str().unwrap().contains("'damaged'"), "{b}");
    assert_eq!(
        app.get("/api/v1/sites/T/netting/reason-codes").await,
        before
    );

    // A new label is fine, and the decision keeps its code.
    let mut relabel = fields.clone();
    for (k, v) in relabel.iter_mut() {
        if *k == format!("label.{i}") {
            *v = "Damaged: written off".into();
        }
    }
    let pairs: Vec<(&str, &str)> = relabel
        .iter()
        .filter(|(k, _)| k != "csrf")
        .map(|(k, v)| (k.as_str(), v.as_str()))
        .collect();
    let saved = post(&app, &ines, action, &pairs).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    let (_, codes) = app.get("/api/v1/sites/T/netting/reason-codes").await;
    assert!(
        codes
            .as_array()
            .unwrap()
            .contains(&json!({"code": "damaged", "label": "Damaged: written off"})),
        "{codes}"
    );
    let (_, feed) = app.get("/api/v1/sites/T/adjustments").await;
    assert_eq!(feed["adjustments"][0]["reason_code"], "damaged", "{feed}");
}
