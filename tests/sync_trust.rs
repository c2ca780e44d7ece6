//! A count's trust over real HTTP and a real SQLite file: a phone's clock cannot stretch a
//! count's window into a hit, absurd instants are never stored, the first counter cannot
//! recount their own count, and events are credited only to the person who made them.

mod common;

use cairn::accounts::Role;
use cairn::time::Timestamp;
use common::{Auth, BIN_1, Body, PASSWORD, PhoneSite, phone_site};
use reqwest::Method;
use serde_json::{Value, json};
use uuid::Uuid;

const MIN: i64 = 60_000;
const HOUR: i64 = 60 * MIN;

/// Site T with 30 of S1 in BIN_1 since yesterday; cora and dan count, ines reviews.
async fn site() -> PhoneSite {
    let s = phone_site(&[("ines", &[Role::InventoryManager], None)]).await;
    let at = Timestamp(Timestamp::now().0 - 24 * HOUR).to_string();
    s.app
        .post_ok(
            "/api/v1/sites/T/movements",
            &json!([common::movement("r1", BIN_1, "S1", 30, "receipt", &at)]),
        )
        .await;
    s
}

/// Builds the events of one pass over BIN_1 (no task unless given).
struct Pass {
    count: String,
    task: Option<i64>,
    user: String,
}

impl Pass {
    fn new(user: &str, task: Option<i64>) -> Self {
        Self {
            count: Uuid::now_v7().to_string(),
            task,
            user: user.to_string(),
        }
    }
    fn event(&self, at: i64, kind: &str, extra: Value) -> Value {
        let mut e = json!({"id": Uuid::now_v7().to_string(), "at": at, "user": self.user,
                           "count": self.count, "task": self.task, "bin": BIN_1, "type": kind});
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    }
    fn opened(&self, at: i64) -> Value {
        let mut e = self.event(at, "bin_opened", json!({"label": ""}));
        e["id"] = json!(self.count);
        e
    }
    fn done(&self, at: i64) -> Value {
        self.event(at, "bin_done", json!({}))
    }
    fn line(&self, at: i64, qty: i64) -> Value {
        self.event(
            at,
            "line",
            json!({"sku": "S1", "gtin": null, "packs": 1, "qty": qty, "lot": "", "entry": "keypad"}),
        )
    }
}

/// Sends one sync request as `token`; returns the status and the answer.
async fn send(s: &PhoneSite, token: &str, device_clock: i64, events: Vec<Value>) -> (u16, Value) {
    let r = s
        .app
        .client
        .post(format!("{}/api/v1/sites/T/sync", s.app.base))
        .bearer_auth(token)
        .json(&json!({"device_clock": device_clock, "rtt_ms": 20, "events": events}))
        .send()
        .await
        .unwrap();
    (r.status().as_u16(), r.json().await.unwrap_or(Value::Null))
}

/// The current result of S1 of a pass.
async fn result(s: &PhoneSite, pass: &str) -> Value {
    let (st, page) = s
        .app
        .get(&format!(
            "/api/v1/sites/T/count-results?state=current&pass={pass}&sku=S1"
        ))
        .await;
    assert_eq!(st, 200, "{page}");
    let rows = page["results"].as_array().unwrap();
    assert_eq!(rows.len(), 1, "{page}");
    rows[0].clone()
}

/// Reads one number from the test's database (0 for none).
fn scalar(s: &PhoneSite, sql: &str) -> i64 {
    s.app.sql_i64(&format!("select coalesce(({sql}), 0)"))
}

/// Says whether every stored instant of counts lies within a day of now.
fn instants_are_sane(s: &PhoneSite) -> bool {
    let (lo, hi) = (Timestamp::now().0 - 24 * HOUR, Timestamp::now().0 + HOUR);
    [
        "select min(at) from sync_event",
        "select min(first_at) from count_pass",
        "select min(at) from count_line",
        "select min(window_start) from count_result",
    ]
    .iter()
    .all(|q| {
        let v = scalar(s, q);
        v == 0 || (lo..=hi).contains(&v)
    }) && [
        "select max(at) from sync_event",
        "select max(done_at) from count_pass",
        "select max(settles_at) from count_result",
        "select max(window_end) from count_result",
    ]
    .iter()
    .all(|q| {
        let v = scalar(s, q);
        v == 0 || (lo..=hi).contains(&v)
    })
}

#[tokio::test]
async fn a_bin_opened_in_1970_is_refused_and_the_empty_count_is_not_a_hit() {
    let s = site().await;
    let now = Timestamp::now().0;
    let p = Pass::new("cora", None);
    let (st, a) = send(
        &s,
        &s.cora,
        now,
        vec![
            p.opened(1_000),
            p.event(now - 2_000, "bin_empty", json!({})),
            p.done(now - 1_000),
        ],
    )
    .await;
    assert_eq!(st, 200, "{a}");
    let r = &a["results"];
    assert_eq!(r[0]["status"], "rejected", "{a}");
    let why = r[0]["reason"].as_str().unwrap();
    assert!(why.contains("1970-01-01"), "{why}");
    assert!(why.contains("cannot be right"), "{why}");
    assert_eq!(
        (r[1]["status"].as_str(), r[2]["status"].as_str()),
        (Some("accepted"), Some("accepted"))
    );
    // The window starts at the first kept event: 30 in the book, 0 counted, out.
    let res = result(&s, &p.count).await;
    assert_eq!(res["verdict"], "out_of_tolerance", "{res}");
    assert_eq!(res["variance"], -30, "{res}");
    assert!(instants_are_sane(&s), "nothing absurd was stored");
}

#[tokio::test]
async fn absurd_clocks_are_refused_whole_and_store_nothing() {
    let s = site().await;
    let now = Timestamp::now().0;
    let year_3000 = 32_503_680_000_000;
    for clock in [i64::MAX, year_3000, 1_000, now - 25 * HOUR] {
        let p = Pass::new("cora", None);
        let (st, a) = send(
            &s,
            &s.cora,
            clock,
            vec![p.opened(clock - 5_000), p.done(clock - 1_000)],
        )
        .await;
        assert_eq!(st, 400, "device_clock {clock}: {a}");
        let why = a["error"].as_str().unwrap();
        assert!(why.starts_with("device_clock"), "{why}");
        assert!(why.contains("Set the phone's date and time"), "{why}");
    }
    // A sane envelope around events from far ends of time: each refused on its own.
    let p = Pass::new("cora", None);
    let (st, a) = send(
        &s,
        &s.cora,
        now,
        vec![
            p.opened(i64::MAX),
            p.line(year_3000, 3),
            p.done(now + 10 * MIN),
        ],
    )
    .await;
    assert_eq!(st, 200, "{a}");
    for r in a["results"].as_array().unwrap() {
        assert_eq!(r["status"], "rejected", "{a}");
    }
    assert_eq!(scalar(&s, "select count(*) from count_pass"), 0);
    assert_eq!(scalar(&s, "select count(*) from sync_event"), 0);
    assert_eq!(scalar(&s, "select count(*) from count_result"), 0);
}

#[tokio::test]
async fn a_clock_stepped_between_two_syncs_holds_the_pass_instead_of_a_hit() {
    let s = site().await;
    let now = Timestamp::now().0;
    let p = Pass::new("cora", None);
    // 30 counted against a book of 30: a hit, were its times to be trusted.
    let (st, a) = send(
        &s,
        &s.cora,
        now,
        vec![p.opened(now - 2 * MIN), p.line(now - MIN, 30)],
    )
    .await;
    assert_eq!(st, 200, "{a}");
    assert!(
        a["results"]
            .as_array()
            .unwrap()
            .iter()
            .all(|r| r["status"] == "accepted")
    );
    // The phone's clock is put back two hours before it marks the bin done.
    let stepped = Timestamp::now().0 - 2 * HOUR;
    let (st, a) = send(&s, &s.cora, stepped, vec![p.done(stepped - 500)]).await;
    assert_eq!(st, 200, "{a}");
    assert_eq!(a["results"][0]["status"], "accepted", "{a}");
    assert_eq!(a["results"][0]["flags"], json!(["held"]), "{a}");
    let res = result(&s, &p.count).await;
    assert_eq!(
        res["verdict"], "out_of_tolerance",
        "held, never a hit: {res}"
    );
    assert_eq!(res["variance"], 0, "{res}");
    let (st, detail) = s
        .app
        .get(&format!("/api/v1/sites/T/count-results/{}", res["id"]))
        .await;
    assert_eq!(st, 200, "{detail}");
    let text = detail.to_string();
    assert!(text.contains("clock was changed by 2 h 00 min"), "{text}");
    // The manager's page of the difference says why it is held.
    let ines = s.app.sign_in("ines", PASSWORD).await;
    let page = s
        .app
        .send(
            Method::GET,
            &format!("/sites/T/differences/{}", res["id"]),
            &Auth::Session(ines),
            Body::Empty,
        )
        .await;
    assert_eq!(page.status, 200, "{}", page.text);
    assert!(page.text.contains("id=\"held\""), "{}", page.text);
    assert!(
        page.text.contains("clock was changed by 2 h 00 min"),
        "{}",
        page.text
    );
    assert!(instants_are_sane(&s));
}

#[tokio::test]
async fn a_pass_spanning_hours_is_held() {
    let s = site().await;
    let now = Timestamp::now().0;
    let p = Pass::new("cora", None);
    let (st, a) = send(
        &s,
        &s.cora,
        now,
        vec![
            p.opened(now - 6 * HOUR),
            p.line(now - 6 * HOUR + MIN, 30),
            p.done(now - 1_000),
        ],
    )
    .await;
    assert_eq!(st, 200, "{a}");
    assert_eq!(a["results"][2]["flags"], json!(["held"]), "{a}");
    let res = result(&s, &p.count).await;
    assert_eq!(res["verdict"], "out_of_tolerance", "{res}");
}

#[tokio::test]
async fn the_first_counter_cannot_recount_their_own_count() {
    let s = site().await;
    let now = Timestamp::now().0;
    let first = Pass::new("cora", None);
    // 25 against 30 of an unclassified item (held to class A: exact): out, recount sent.
    s.app
        .sync(
            &s.cora,
            vec![
                first.opened(now - 3 * MIN),
                first.line(now - 2 * MIN, 25),
                first.done(now - MIN),
            ],
            20,
        )
        .await;
    let today = chrono::Utc::now().date_naive();
    let (st, list) = s
        .app
        .get(&format!("/api/v1/sites/T/count-lists/{today}"))
        .await;
    assert_eq!(st, 200, "{list}");
    let recount = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["reason"] == "recount")
        .unwrap_or_else(|| panic!("a recount was sent: {list}"))["id"]
        .as_i64()
        .unwrap();
    // Cora's own phone names the recount task: every event refused, nothing kept.
    let own = Pass::new("cora", Some(recount));
    let now = Timestamp::now().0;
    let (st, a) = send(
        &s,
        &s.cora,
        now,
        vec![
            own.opened(now - 2_000),
            own.line(now - 1_500, 25),
            own.done(now - 1_000),
        ],
    )
    .await;
    assert_eq!(st, 200, "{a}");
    for r in a["results"].as_array().unwrap() {
        assert_eq!(r["status"], "rejected", "{a}");
        assert!(
            r["reason"]
                .as_str()
                .unwrap()
                .contains("another counter must recount it"),
            "{a}"
        );
    }
    let res = result(&s, &first.count).await;
    assert_eq!(
        res["recount_outcome"],
        Value::Null,
        "the first result is undecided: {res}"
    );
    assert_eq!(
        scalar(
            &s,
            &format!("select count(*) from count_pass where task_id = {recount}")
        ),
        0
    );
    // Dan may recount it: his count agrees with cora's, a confirmed difference.
    let dans = Pass::new("dan", Some(recount));
    let now = Timestamp::now().0;
    s.app
        .sync(
            &s.dan,
            vec![
                dans.opened(now - 2_000),
                dans.line(now - 1_500, 25),
                dans.done(now - 1_000),
            ],
            20,
        )
        .await;
    let res = result(&s, &first.count).await;
    assert_eq!(res["recount_outcome"], "confirmed", "{res}");
}

#[tokio::test]
async fn an_event_made_by_someone_else_is_refused() {
    let s = site().await;
    let now = Timestamp::now().0;
    let p = Pass::new("dan", None);
    let (st, a) = send(&s, &s.cora, now, vec![p.opened(now - 1_000)]).await;
    assert_eq!(st, 200, "{a}");
    assert_eq!(a["results"][0]["status"], "rejected", "{a}");
    let why = a["results"][0]["reason"].as_str().unwrap();
    assert!(
        why.contains("made by dan") && why.contains("cora is signed in"),
        "{why}"
    );
    assert_eq!(scalar(&s, "select count(*) from count_pass"), 0);
    // An event without a maker (made by an app from before events named them) is the
    // token's person's, as it always was; a resend of it is a repeat.
    let mut nameless = Pass::new("cora", None).opened(now - 1_000);
    nameless.as_object_mut().unwrap().remove("user");
    let (_, a) = send(&s, &s.cora, now, vec![nameless.clone()]).await;
    assert_eq!(a["results"][0]["status"], "accepted", "{a}");
    let (_, again) = send(&s, &s.cora, Timestamp::now().0, vec![nameless]).await;
    assert_eq!(again["results"][0]["repeat"], true, "{again}");
    assert_eq!(
        scalar(&s, "select count(*) from sync_event where made_by = 'cora'"),
        1
    );
}
