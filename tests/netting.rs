//! End-to-end tests of netting over real HTTP and a real SQLite file: phones send counts
//! through the sync endpoint with a device token, the host posts movements through the
//! movements API, and the results are read back from the count-results API.
//!
//! The phone's clock is the real clock (so the server's correction is a few ms) and
//! every instant is placed minutes apart from a base half an hour in the past, so the
//! few ms a request takes cannot move a movement across a window edge. Each case works
//! the netting rule (DESIGN §4, DEVELOPERS "Netting") by hand in its comment. Tolerances
//! are the defaults (A exact, B 2 %, C 5 %: common practice, no source); the test items
//! are not classified, so they are held to class A's: exact.

mod common;

use cairn::accounts::Role;
use cairn::time::Timestamp;
use common::{PhoneSite, TestApp, phone_site, spawn_app};
use rand::SeedableRng;
use rand::seq::SliceRandom;
use serde_json::{Value, json};
use uuid::Uuid;

const MIN: i64 = 60_000;
const BIN1: &str = "A-01-01-1";
const BIN2: &str = "A-01-02-1";

/// A test site: T with two bins and items S1 (plain) and L1 (lot-tracked), counters cora
/// and dan with phones, and `base` half an hour ago.
struct Site {
    app: TestApp,
    cora: String,
    dan: String,
    base: i64,
}

async fn site() -> Site {
    let PhoneSite { app, cora, dan } = phone_site(&[]).await;
    Site {
        app,
        cora,
        dan,
        base: Timestamp::now().0 - 30 * MIN,
    }
}

/// A movement to post: id, bin, SKU, lot, quantity, kind, event time (ms), source.
type Move<'a> = (
    &'a str,
    &'a str,
    &'a str,
    &'a str,
    i64,
    &'a str,
    i64,
    &'a str,
);

fn at(ms: i64) -> String {
    Timestamp(ms).to_string()
}

fn id() -> String {
    Uuid::now_v7().to_string()
}

impl Site {
    /// Posts movements `(id, bin, sku, lot, qty, kind, event_at, source)`; all must be accepted.
    async fn moves(&self, rows: &[Move<'_>]) {
        let body: Vec<Value> = rows
            .iter()
            .map(|(id, bin, sku, lot, qty, kind, t, source)| {
                json!({"id": id, "bin": bin, "sku": sku, "lot": lot, "qty": qty, "kind": kind,
                       "event_at": at(*t), "source": source})
            })
            .collect();
        let (s, b) = self
            .app
            .post("/api/v1/sites/T/movements", &Value::Array(body))
            .await;
        assert_eq!(s, 200, "{b}");
    }

    /// Sends a JSON PUT with the admin's token.
    async fn put(&self, path: &str, body: &Value) -> (u16, Value) {
        self.app.put(path, body).await
    }

    /// Sends events from a phone whose clock is the real clock, with a round trip of `rtt` ms.
    async fn sync(&self, token: &str, events: Vec<Value>, rtt: i64) -> Value {
        self.app.sync(token, events, rtt).await
    }

    /// Reads results (`state` open, current or all), oldest first.
    async fn results(&self, query: &str) -> Vec<Value> {
        let (s, page) = self
            .app
            .get(&format!("/api/v1/sites/T/count-results?{query}"))
            .await;
        assert_eq!(s, 200, "{page}");
        page["results"].as_array().unwrap().clone()
    }

    /// The one current result of a key of a pass.
    async fn current(&self, pass: &Pass, sku: &str) -> Value {
        let rows = self
            .results(&format!("state=current&pass={}&sku={sku}", pass.count))
            .await;
        assert_eq!(rows.len(), 1, "one current result of {sku}: {rows:?}");
        rows[0].clone()
    }

    async fn detail(&self, id: i64) -> Value {
        let (s, d) = self
            .app
            .get(&format!("/api/v1/sites/T/count-results/{id}"))
            .await;
        assert_eq!(s, 200, "{d}");
        d
    }
}

/// One pass over a bin, keyed lines (no GTIN).
#[derive(Clone)]
struct Pass {
    count: String,
    bin: &'static str,
    task: Option<i64>,
}

impl Pass {
    fn new(bin: &'static str) -> Self {
        Self {
            count: id(),
            bin,
            task: None,
        }
    }
    fn event(&self, t: i64, kind: &str, extra: Value) -> Value {
        let mut e = json!({"id": id(), "at": t, "count": self.count, "task": self.task,
                           "bin": self.bin, "type": kind});
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    }
    fn opened(&self, t: i64) -> Value {
        let mut e = self.event(t, "bin_opened", json!({"label": ""}));
        e["id"] = json!(self.count);
        e
    }
    fn line(&self, t: i64, sku: &str, lot: &str, qty: i64) -> Value {
        self.event(
            t,
            "line",
            json!({"sku": sku, "gtin": null, "packs": 1, "qty": qty, "lot": lot, "entry": "keypad"}),
        )
    }
    fn done(&self, t: i64) -> Value {
        self.event(t, "bin_done", json!({}))
    }
}

fn states(detail: &Value) -> Vec<i64> {
    detail["evidence"]["netting"]["states"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["qty"].as_i64().unwrap())
        .collect()
}

fn window_moves(detail: &Value) -> Vec<String> {
    detail["evidence"]["moves"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m["uid"].as_str().unwrap().to_string())
        .collect()
}

/// Forty of S1 received into bin 1 an hour before the base.
async fn forty_in_bin1(s: &Site) {
    s.moves(&[(
        "r0",
        BIN1,
        "S1",
        "",
        40,
        "receipt",
        s.base - 60 * MIN,
        "host",
    )])
    .await;
}

#[tokio::test]
async fn a_count_with_no_moves_in_its_window_is_compared_with_the_one_book_value() {
    // Book 40 since an hour before the window; the counter keys 40 and marks the bin done.
    // F = {40}, c = 40: variance 0, status no_moves_in_window, a hit.
    let s = site().await;
    forty_in_bin1(&s).await;
    let p = Pass::new(BIN1);
    let b = s.base;
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", 40),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(
        (
            r["counted"].as_i64(),
            r["f_star"].as_i64(),
            r["variance"].as_i64()
        ),
        (Some(40), Some(40), Some(0))
    );
    assert_eq!(r["status"], "no_moves_in_window");
    assert_eq!(r["verdict"], "hit");
    let d = s.detail(r["id"].as_i64().unwrap()).await;
    assert_eq!(states(&d), [40]);
    assert_eq!(d["evidence"]["netting"]["opening"], 40);
    assert!(
        r["watermark"].as_i64().unwrap() >= 1,
        "the ledger mark is kept"
    );
}

#[tokio::test]
async fn a_pick_during_the_count_is_netted_not_flagged() {
    // Book 40; a pick of 5 happens one minute into the count, before the counter keys the
    // key at minute 2. Window [s − u, last + u] holds the pick: F = {40, 35}. The counter
    // saw 35: c = 35 is a state, variance 0 (matches_state). No aisle was frozen.
    let s = site().await;
    forty_in_bin1(&s).await;
    let b = s.base;
    s.moves(&[("p1", BIN1, "S1", "", -5, "pick", b + MIN, "host")])
        .await;
    let p = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + 2 * MIN, "S1", "", 35),
            p.done(b + 3 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["f_star"].as_i64()),
        (Some(0), Some(35))
    );
    assert_eq!(r["status"], "matches_state");
    let d = s.detail(r["id"].as_i64().unwrap()).await;
    assert_eq!(states(&d), [40, 35]);
    assert_eq!(window_moves(&d), ["p1"]);

    // `cairn net` prints the same reasoning, by the pass's uid or id.
    let db = s.app.db_arg();
    for count in [p.count.clone(), r["pass_id"].to_string()] {
        let out = common::cairn_with_input(&["net", "--db", &db, "--count", &count], "");
        let text = String::from_utf8_lossy(&out.stdout);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        for want in [
            "A-01-01-1 S1",
            "counted 35",
            "opening 40",
            "-5 pick from host",
            "feasible states F: 40 (opening), 35* (after",
            "f* = 35",
            "variance c − f* = +0",
            "status matches_state",
            "verdict hit",
            "settled",
        ] {
            assert!(text.contains(want), "missing '{want}' in:\n{text}");
        }
    }
    let out = common::cairn_with_input(&["net", "--db", &db, "--count", "no-such"], "");
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("no count pass"));
}

#[tokio::test]
async fn a_receipt_during_the_count_is_netted_not_flagged() {
    // Book 40; 12 received at minute 1; counted 52 at minute 2. F = {40, 52}, c = 52:
    // variance 0. Had the counter keyed 40 (before the receipt was shelved) it would
    // match too: both are states.
    let s = site().await;
    forty_in_bin1(&s).await;
    let b = s.base;
    s.moves(&[("g1", BIN1, "S1", "", 12, "receipt", b + MIN, "host")])
        .await;
    let p = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + 2 * MIN, "S1", "", 52),
            p.done(b + 3 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["status"].as_str()),
        (Some(0), Some("matches_state"))
    );
    let d = s.detail(r["id"].as_i64().unwrap()).await;
    assert_eq!(states(&d), [40, 52]);
}

#[tokio::test]
async fn a_count_matching_the_middle_of_several_moves_has_no_difference() {
    // Book 40; pick 5 at minute 1, pick 3 at minute 2, receipt 10 at minute 3; the
    // counter keys at minute 4. F = {40, 35, 32, 42}. c = 35 (counted after the first
    // pick, before the second reached the shelf): a state, variance 0, f* = 35.
    // c = 34 instead would be nearest 35 (distance 1): variance −1, matches_no_state.
    let s = site().await;
    forty_in_bin1(&s).await;
    let b = s.base;
    s.moves(&[
        ("p1", BIN1, "S1", "", -5, "pick", b + MIN, "host"),
        ("p2", BIN1, "S1", "", -3, "pick", b + 2 * MIN, "host"),
        ("g1", BIN1, "S1", "", 10, "receipt", b + 3 * MIN, "host"),
    ])
    .await;
    let p = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + 4 * MIN, "S1", "", 35),
            p.done(b + 5 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["f_star"].as_i64()),
        (Some(0), Some(35))
    );
    let d = s.detail(r["id"].as_i64().unwrap()).await;
    assert_eq!(states(&d), [40, 35, 32, 42]);
    assert_eq!(window_moves(&d), ["p1", "p2", "g1"]);

    let q = Pass::new(BIN1);
    s.sync(
        &s.dan,
        vec![
            q.opened(b),
            q.line(b + 4 * MIN, "S1", "", 34),
            q.done(b + 5 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&q, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["f_star"].as_i64()),
        (Some(-1), Some(35))
    );
    assert_eq!(r["status"], "matches_no_state");
    assert_eq!(
        r["verdict"], "out_of_tolerance",
        "class A (unclassified) is exact"
    );
}

#[tokio::test]
async fn clock_uncertainty_widens_the_window_over_a_move_just_before_the_first_scan() {
    // Both bins hold 40; each gets a pick of 4 stamped 4 s before the counter's first
    // scan, and each counter keys 40 (the pick had not happened yet by the shelf).
    // Bin 1's phone reports a 20 s round trip: u ≥ 10 s, so the window starts ≥ 10 s
    // before the first scan and holds the pick: F = {40, 36}, c = 40: variance 0.
    // Bin 2's phone reports 0 ms: u is only the drift allowance (≤ 0.4 s here), the pick
    // lies before the window, the opening is 36 and c = 40 is a difference of +4.
    let s = site().await;
    let b = s.base;
    s.moves(&[
        ("r1", BIN1, "S1", "", 40, "receipt", b - 60 * MIN, "host"),
        ("r2", BIN2, "S1", "", 40, "receipt", b - 60 * MIN, "host"),
        ("p1", BIN1, "S1", "", -4, "pick", b - 4_000, "host"),
        ("p2", BIN2, "S1", "", -4, "pick", b - 4_000, "host"),
    ])
    .await;
    let wide = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            wide.opened(b),
            wide.line(b + MIN, "S1", "", 40),
            wide.done(b + 2 * MIN),
        ],
        20_000,
    )
    .await;
    let narrow = Pass::new(BIN2);
    s.sync(
        &s.dan,
        vec![
            narrow.opened(b),
            narrow.line(b + MIN, "S1", "", 40),
            narrow.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&wide, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["status"].as_str()),
        (Some(0), Some("matches_state"))
    );
    let d = s.detail(r["id"].as_i64().unwrap()).await;
    assert!(
        d["evidence"]["timing"]["clock_uncertainty_ms"]
            .as_i64()
            .unwrap()
            >= 10_000
    );
    assert_eq!(states(&d), [40, 36]);
    let r = s.current(&narrow, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["f_star"].as_i64()),
        (Some(4), Some(36))
    );
    assert_eq!(r["status"], "no_moves_in_window");
}

#[tokio::test]
async fn a_source_uncertainty_pulls_a_move_into_the_window() {
    // The host's event times are off by up to 3 minutes. A pick stamped 2 minutes before
    // the first scan may have happened during the count: [t − 3 min, t + 3 min] overlaps
    // the window, so F = {40, 35} and a count of 40 is a state.
    let s = site().await;
    let (st, b) = s
        .put(
            "/api/v1/sites/T/netting/sources",
            &json!([{"source": "host", "uncertainty_ms": 3 * MIN, "posting_lag_ms": 0}]),
        )
        .await;
    assert_eq!(st, 200, "{b}");
    forty_in_bin1(&s).await;
    let base = s.base;
    s.moves(&[("p1", BIN1, "S1", "", -5, "pick", base - 2 * MIN, "host")])
        .await;
    let p = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            p.opened(base),
            p.line(base + MIN, "S1", "", 40),
            p.done(base + 2 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["status"].as_str()),
        (Some(0), Some("matches_state"))
    );
}

#[tokio::test]
async fn a_late_posted_pick_re_nets_the_result_and_keeps_the_old_row() {
    // The host posts picks up to an hour late. The counter keys 35 at minute 2; the book
    // shows 40 and nothing moved: variance −5, out of tolerance, provisional (done at
    // minute 3 + an hour of lag is still ahead). Then the host posts the pick of 5 it
    // made at minute 1: event_at − 0 ≤ e + u, so the key re-nets: F = {40, 35}, c = 35,
    // variance 0. The new row supersedes the first, which stays, and names the pick.
    // A pick stamped after the window (minute 10) changes nothing.
    let s = site().await;
    let (st, b) = s
        .put(
            "/api/v1/sites/T/netting/sources",
            &json!([{"source": "host", "uncertainty_ms": 0, "posting_lag_ms": 60 * MIN}]),
        )
        .await;
    assert_eq!(st, 200, "{b}");
    forty_in_bin1(&s).await;
    let base = s.base;
    let p = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            p.opened(base),
            p.line(base + 2 * MIN, "S1", "", 35),
            p.done(base + 3 * MIN),
        ],
        0,
    )
    .await;
    let first = s.current(&p, "S1").await;
    assert_eq!(
        (first["variance"].as_i64(), first["verdict"].as_str()),
        (Some(-5), Some("out_of_tolerance"))
    );
    assert_eq!(
        first["settled"], false,
        "an hour of posting lag has not passed"
    );
    s.moves(&[("late-pick", BIN1, "S1", "", -5, "pick", base + MIN, "host")])
        .await;
    let now = s.current(&p, "S1").await;
    assert_ne!(now["id"], first["id"]);
    assert_eq!(
        (now["variance"].as_i64(), now["verdict"].as_str()),
        (Some(0), Some("hit"))
    );
    let reason = now["renet_reason"].as_str().unwrap();
    assert!(reason.contains("late-pick"), "{reason}");
    let all = s.results(&format!("state=all&pass={}", p.count)).await;
    assert_eq!(all.len(), 2, "the old row stays: {all:?}");
    assert_eq!(all[0]["superseded_by"], now["id"]);
    assert!(now["watermark"].as_i64() > first["watermark"].as_i64());

    s.moves(&[("after", BIN1, "S1", "", -2, "pick", base + 10 * MIN, "host")])
        .await;
    let all = s.results(&format!("state=all&pass={}", p.count)).await;
    assert_eq!(all.len(), 2, "a move after the window re-nets nothing");
}

#[tokio::test]
async fn a_key_in_the_book_not_scanned_in_a_bin_marked_done_is_netted_as_zero() {
    // Bin 1 holds 40 of S1 and 6 of L1 lot LOT-7; the counter keys only S1 and marks the
    // bin done. L1 is netted over the bin's window [s − u, e + u] with c = 0: F = {6},
    // f* = 6, variance −6, missing_from_bin. A key at 0 throughout the window (L1 lot
    // OLD, received and picked long before) gets no result at all.
    let s = site().await;
    let b = s.base;
    s.moves(&[
        ("r0", BIN1, "S1", "", 40, "receipt", b - 60 * MIN, "host"),
        (
            "r1",
            BIN1,
            "L1",
            "LOT-7",
            6,
            "receipt",
            b - 60 * MIN,
            "host",
        ),
        ("r2", BIN1, "L1", "OLD", 3, "receipt", b - 90 * MIN, "host"),
        ("p2", BIN1, "L1", "OLD", -3, "pick", b - 80 * MIN, "host"),
    ])
    .await;
    let p = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", 40),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let rows = s.results(&format!("state=current&pass={}", p.count)).await;
    assert_eq!(rows.len(), 2, "S1 and L1/LOT-7, not L1/OLD: {rows:?}");
    let l1 = rows.iter().find(|r| r["sku"] == "L1").unwrap();
    assert_eq!(l1["lot"], "LOT-7");
    assert_eq!(
        (
            l1["counted"].as_i64(),
            l1["f_star"].as_i64(),
            l1["variance"].as_i64()
        ),
        (Some(0), Some(6), Some(-6))
    );
    assert_eq!(l1["status"], "missing_from_bin");
    let d = s.detail(l1["id"].as_i64().unwrap()).await;
    assert_eq!(d["evidence"]["netting"]["scanned"], false);
    assert!(
        d["evidence"]["netting"]["window"]["end"].as_str().unwrap()
            >= d["evidence"]["timing"]["done"].as_str().unwrap()
    );
}

#[tokio::test]
async fn stock_counted_where_the_book_has_none_is_found_stock() {
    // Bin 2 has never held S1; the counter keys 3. F = {0}, f* = 0, variance +3,
    // found_stock; out of tolerance (a percent of 0 is 0, and class A is exact anyway).
    let s = site().await;
    let b = s.base;
    let p = Pass::new(BIN2);
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", 3),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(
        (r["f_star"].as_i64(), r["variance"].as_i64()),
        (Some(0), Some(3))
    );
    assert_eq!(r["status"], "found_stock");
    assert_eq!(r["verdict"], "out_of_tolerance");
    assert_eq!(r["variance_value_minor"], 3 * 450, "3 boxes at 4.50");
}

#[tokio::test]
async fn an_open_bin_is_not_netted_and_lines_after_done_re_net() {
    // Nothing is netted until the bin is done. A line that reaches the server after
    // bin_done (another request) re-nets the pass: 30 + 10 = 40 = the book.
    let s = site().await;
    forty_in_bin1(&s).await;
    let b = s.base;
    let p = Pass::new(BIN1);
    s.sync(&s.cora, vec![p.opened(b), p.line(b + MIN, "S1", "", 30)], 0)
        .await;
    assert!(
        s.results(&format!("state=all&pass={}", p.count))
            .await
            .is_empty()
    );
    s.sync(&s.cora, vec![p.done(b + 3 * MIN)], 0).await;
    assert_eq!(s.current(&p, "S1").await["variance"], -10);
    s.sync(&s.cora, vec![p.line(b + 2 * MIN, "S1", "", 10)], 0)
        .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(r["variance"], 0);
    assert!(
        r["renet_reason"]
            .as_str()
            .unwrap()
            .contains("after the bin was netted")
    );
}

/// The semantic content of a result, without ids and instants that depend on arrival.
fn essence(s: &Site, rows: &[Value]) -> Vec<String> {
    let _ = s;
    let mut v: Vec<String> = rows
        .iter()
        .map(|r| {
            format!(
                "{} {} {} c={} f*={} v={} {} {}",
                r["bin"],
                r["sku"],
                r["lot"],
                r["counted"],
                r["f_star"],
                r["variance"],
                r["status"],
                r["verdict"]
            )
        })
        .collect();
    v.sort();
    v
}

#[tokio::test]
async fn results_do_not_depend_on_the_order_movements_and_count_events_arrive() {
    // One scenario, delivered in many orders, each on a fresh server: bin 1 has 40 of S1
    // received long before; during the count a pick of 5 (minute 1) and a receipt of 8
    // (minute 3); a pick of 2 after the window (minute 20); L1 lot A 4 units received
    // long before and never scanned. The counter keys 35 at minute 2, keys a wrong 9 at
    // minute 2.5 and undoes it, and marks the bin done at minute 4.
    // By hand: S1 window [s − u, 2 min + u], F = {40, 35}, c = 35 → variance 0 (the
    // receipt at minute 3 is after the key's last scan). L1/A: not scanned, bin window,
    // F = {4}, c = 0 → −4 missing_from_bin.
    // Every arrival order must end with these two current results.
    let orders: Vec<Vec<usize>> = {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let mut v = vec![(0..9).collect::<Vec<_>>(), (0..9).rev().collect()];
        for _ in 0..6 {
            let mut o: Vec<usize> = (0..9).collect();
            o.shuffle(&mut rng);
            v.push(o);
        }
        v
    };
    let mut seen: Option<Vec<String>> = None;
    for order in orders {
        let s = site().await;
        let b = s.base;
        let p = Pass::new(BIN1);
        let wrong = p.line(b + 150_000, "S1", "", 9);
        let wrong_id = wrong["id"].as_str().unwrap().to_string();
        let undo = p.event(b + 160_000, "undo", json!({"line": wrong_id}));
        let items: Vec<Item> = vec![
            Item::Moves(vec![("r0", "S1", "", 40, "receipt", b - 60 * MIN)]),
            Item::Moves(vec![("rl", "L1", "A", 4, "receipt", b - 60 * MIN)]),
            Item::Moves(vec![("p1", "S1", "", -5, "pick", b + MIN)]),
            Item::Moves(vec![("g1", "S1", "", 8, "receipt", b + 3 * MIN)]),
            Item::Moves(vec![("p9", "S1", "", -2, "pick", b + 20 * MIN)]),
            Item::Events(vec![p.opened(b), p.line(b + 2 * MIN, "S1", "", 35)]),
            Item::Events(vec![wrong.clone()]),
            Item::Events(vec![undo.clone()]),
            Item::Events(vec![p.done(b + 4 * MIN)]),
        ];
        for i in &order {
            match &items[*i] {
                Item::Moves(m) => {
                    let rows: Vec<_> = m
                        .iter()
                        .map(|(id, sku, lot, q, k, t)| (*id, BIN1, *sku, *lot, *q, *k, *t, "host"))
                        .collect();
                    s.moves(&rows).await;
                }
                Item::Events(e) => {
                    s.sync(&s.cora, e.clone(), 0).await;
                }
            }
        }
        let rows = s.results(&format!("state=current&pass={}", p.count)).await;
        let got = essence(&s, &rows);
        assert_eq!(got.len(), 2, "order {order:?}: {rows:?}");
        assert!(
            got.iter()
                .any(|g| g.contains("\"S1\"") && g.contains("v=0 ")),
            "{got:?}"
        );
        assert!(
            got.iter()
                .any(|g| g.contains("\"L1\"") && g.contains("v=-4 ")),
            "{got:?}"
        );
        match &seen {
            None => seen = Some(got),
            Some(first) => assert_eq!(&got, first, "order {order:?}"),
        }
    }
}

enum Item {
    Moves(
        Vec<(
            &'static str,
            &'static str,
            &'static str,
            i64,
            &'static str,
            i64,
        )>,
    ),
    Events(Vec<Value>),
}

// ---------------------------------------------------------------------------
// Recounts (DESIGN §5).

/// Makes every weekday a working day and saves today's list with `counters` runs, run 1
/// held by cora and (with two runs) run 2 by dan. Returns the day.
async fn todays_list(s: &Site, counters: u32) -> String {
    let (st, b) = s
        .put(
            "/api/v1/sites/T/planning/calendar",
            &json!({"working_weekdays": ["mon", "tue", "wed", "thu", "fri", "sat", "sun"]}),
        )
        .await;
    assert_eq!(st, 200, "{b}");
    let day = Timestamp(s.base + 5 * MIN)
        .to_utc()
        .date_naive()
        .format("%Y-%m-%d")
        .to_string();
    let (st, b) = s
        .app
        .post(
            "/api/v1/sites/T/count-lists",
            &json!({"day": day, "counters": counters, "minutes": 120}),
        )
        .await;
    assert_eq!(st, 200, "{b}");
    for (run, who) in [(1, "cora"), (2, "dan")]
        .into_iter()
        .take(counters as usize)
    {
        let (st, b) = s
            .put(
                &format!("/api/v1/sites/T/count-lists/{day}/runs/{run}"),
                &json!({"holder": who}),
            )
            .await;
        assert_eq!(st, 200, "{b}");
    }
    day
}

async fn my_tasks(s: &Site, token: &str, day: &str) -> Value {
    let r = s
        .app
        .client
        .get(format!("{}/api/v1/sites/T/my-tasks?day={day}", s.app.base))
        .bearer_auth(token)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    r.json().await.unwrap()
}

/// Cora counts 35 of S1 in bin 1 against a book of 40 (variance −5: out of tolerance
/// for A, B (2 %) and C (5 %) alike). Returns her pass and result.
async fn short_count(s: &Site) -> (Pass, Value) {
    forty_in_bin1(s).await;
    let b = s.base;
    let p = Pass::new(BIN1);
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", 35),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let r = s.current(&p, "S1").await;
    assert_eq!(
        (r["variance"].as_i64(), r["verdict"].as_str()),
        (Some(-5), Some("out_of_tolerance"))
    );
    (p, r)
}

/// The recount task of the day's list for bin 1, as the list API shows it.
async fn recount_tasks(s: &Site, day: &str) -> (Vec<Value>, Value) {
    let (st, list) = s
        .app
        .get(&format!("/api/v1/sites/T/count-lists/{day}"))
        .await;
    assert_eq!(st, 200, "{list}");
    let tasks = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|t| t["reason"] == "recount")
        .cloned()
        .collect();
    (tasks, list)
}

#[tokio::test]
async fn out_of_tolerance_sends_a_blind_recount_to_another_counter_first() {
    let s = site().await;
    let day = todays_list(&s, 2).await;
    let (_, first) = short_count(&s).await;
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(tasks.len(), 1, "{list}");
    let run = tasks[0]["run"].as_u64().unwrap();
    assert_eq!(run, 2, "dan's run, not cora's: {list}");
    let min_seq = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|t| t["run"] == run)
        .map(|t| t["seq"].as_i64().unwrap())
        .min()
        .unwrap();
    assert_eq!(
        tasks[0]["seq"].as_i64().unwrap(),
        min_seq,
        "ahead of the plan"
    );
    let d = s.detail(first["id"].as_i64().unwrap()).await;
    assert_eq!(d["recount_tasks"].as_array().unwrap().len(), 1);

    // Dan's phone sees a recount with no reason and no quantity; cora's does not see it.
    let dans = my_tasks(&s, &s.dan, &day).await;
    let rc = dans["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["kind"] == "recount")
        .unwrap_or_else(|| panic!("dan has the recount: {dans}"))
        .clone();
    let text = rc.to_string();
    assert!(
        !text.contains("40") || !text.contains("35"),
        "no book or count: {text}"
    );
    assert!(
        rc.get("reason").is_none() && rc.get("detail").is_none(),
        "{rc}"
    );
    let coras = my_tasks(&s, &s.cora, &day).await;
    assert!(
        !coras["tasks"]
            .as_array()
            .unwrap()
            .iter()
            .any(|t| t["kind"] == "recount"),
        "{coras}"
    );
}

#[tokio::test]
async fn with_no_other_counter_the_recount_waits_unassigned_with_a_warning() {
    let s = site().await;
    let day = todays_list(&s, 1).await;
    short_count(&s).await;
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(tasks.len(), 1, "{list}");
    let run = tasks[0]["run"].as_u64().unwrap();
    assert_ne!(run, 1, "not cora's run");
    let warnings = list["warnings"].to_string();
    assert!(
        warnings.contains(&format!("recounts in run {run}")) && warnings.contains("cora"),
        "{warnings}"
    );
}

#[tokio::test]
async fn a_recount_without_a_list_creates_the_days_list() {
    let s = site().await;
    short_count(&s).await;
    let day = Timestamp(s.base + 2 * MIN)
        .to_utc()
        .date_naive()
        .format("%Y-%m-%d")
        .to_string();
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(tasks.len(), 1, "{list}");
    assert!(
        list["warnings"]
            .to_string()
            .contains("no counter other than cora")
    );
}

/// Dan recounts bin 1 through his recount task and keys `qty` (the book is still 40).
async fn recount(s: &Site, day: &str, qty: i64) {
    let dans = my_tasks(s, &s.dan, day).await;
    let task = dans["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["kind"] == "recount")
        .unwrap()["id"]
        .as_i64()
        .unwrap();
    let mut p = Pass::new(BIN1);
    p.task = Some(task);
    let b = s.base + 10 * MIN;
    s.sync(
        &s.dan,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", qty),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
}

#[tokio::test]
async fn recount_outcomes_confirm_clear_or_call_a_supervisor() {
    // First count 35 against 40: v₁ = −5. S1 is too new for the day's first
    // classification, so it is held to class A (exact), and −5 is out.
    // - recount 35: v₂ = −5 = v₁ → confirmed; the result waits for review, still out.
    // - recount 40: v₂ = 0 → the book was right: the result becomes a hit and the first
    //   count is marked wrong.
    // - recount 30: v₂ = −10, within tolerance of neither (|−10| > 0 and |−10 − (−5)| > 0)
    //   → a supervisor count: a recount task held by no one, and a warning.
    for (qty, outcome, verdict, wrong) in [
        (35, "confirmed", "out_of_tolerance", false),
        (40, "book_right", "hit", true),
        (30, "supervisor_count", "out_of_tolerance", false),
    ] {
        let s = site().await;
        let day = todays_list(&s, 2).await;
        let (p, _) = short_count(&s).await;
        recount(&s, &day, qty).await;
        let r = s.current(&p, "S1").await;
        assert_eq!(r["recount_outcome"], outcome, "recount {qty}: {r}");
        assert_eq!(r["verdict"], verdict, "recount {qty}");
        assert_eq!(r["first_count_wrong"], wrong, "recount {qty}");
        let open = s.results("state=open").await;
        let still_open = open.iter().any(|o| o["id"] == r["id"]);
        assert_eq!(
            still_open,
            verdict == "out_of_tolerance",
            "recount {qty}: {open:?}"
        );
        let (tasks, list) = recount_tasks(&s, &day).await;
        if outcome == "supervisor_count" {
            assert_eq!(tasks.len(), 2, "{list}");
            let sup = &tasks[1];
            let holders = list["runs"].to_string();
            assert!(
                list["warnings"]
                    .to_string()
                    .contains("supervisor count of A-01-01-1"),
                "{list}"
            );
            assert!(
                sup["run"].as_u64().unwrap() > 2,
                "a run nobody holds: {holders}"
            );
        } else {
            assert_eq!(
                tasks.len(),
                1,
                "no supervisor count after {outcome}: {list}"
            );
        }
    }
}

#[tokio::test]
async fn settings_are_read_by_book_readers_and_changed_only_by_count_policy() {
    let s = site().await;
    let (st, d) = s.app.get("/api/v1/sites/T/netting/settings").await;
    assert_eq!(st, 200);
    assert_eq!(d["tolerances"]["a"]["units"], 0, "A exact by default");
    assert_eq!(d["tolerances"]["b"]["percent_bp"], 200, "B 2 %");
    assert_eq!(d["tolerances"]["c"]["percent_bp"], 500, "C 5 %");
    let mut changed = d.clone();
    changed["tolerances"]["a"] = json!({"units": 1});
    let (st, b) = s.put("/api/v1/sites/T/netting/settings", &changed).await;
    assert_eq!(st, 200, "{b}");
    // With A allowing one unit, a difference of −1 is a hit.
    forty_in_bin1(&s).await;
    let p = Pass::new(BIN1);
    let base = s.base;
    s.sync(
        &s.cora,
        vec![
            p.opened(base),
            p.line(base + MIN, "S1", "", 39),
            p.done(base + 2 * MIN),
        ],
        0,
    )
    .await;
    assert_eq!(s.current(&p, "S1").await["verdict"], "hit");

    changed["tolerances"]["b"] = json!({"percent_bp": -5});
    let (st, b) = s.put("/api/v1/sites/T/netting/settings", &changed).await;
    assert_eq!(st, 400);
    assert!(
        b["error"].to_string().contains("tolerances.b") || b.to_string().contains("tolerances.b"),
        "{b}"
    );
    let (st, _) = s
        .put(
            "/api/v1/sites/T/netting/reason-codes",
            &json!([{"code": "damage", "label": "Damaged in the aisle"}]),
        )
        .await;
    assert_eq!(st, 200);
    let (_, codes) = s.app.get("/api/v1/sites/T/netting/reason-codes").await;
    assert_eq!(codes[0]["code"], "damage");

    // A counter's phone gets none of it.
    for path in [
        "/api/v1/sites/T/count-results",
        "/api/v1/sites/T/netting/settings",
        "/api/v1/sites/T/netting/sources",
    ] {
        let r = s
            .app
            .client
            .get(format!("{}{path}", s.app.base))
            .bearer_auth(&s.cora)
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 403, "{path}");
    }
}

// ---------------------------------------------------------------------------
// A simulated day on the demo site.

#[tokio::test]
async fn a_simulated_day_flags_every_clear_record_error_and_nothing_moves_alone_raise() {
    use cairn::demo::count_day::{self, KeyStock};
    use std::collections::BTreeMap;

    // A small Kestrel Lane site with 60 days of history: the history's unrecorded and
    // mis-keyed picks and mis-putaways leave the book apart from the shelf. The history
    // ends the day before yesterday, so its moves (06:00-21:00) never fall inside the
    // counted hours below, whatever the hour the test runs at.
    let app = spawn_app().await;
    let mut spec = cairn::demo::DemoSpec::standard(42);
    spec.items = 60;
    spec.bins = 150;
    spec.days = 60;
    spec.end = spec.end.pred_opt().expect("a date before yesterday");
    cairn::demo::generate(app.state.store.as_ref(), &spec, false)
        .await
        .expect("the demo site generates");
    app.add_user("root", "KLN", &[Role::Admin], "test-only-password", None)
        .await;
    let admin = app.issue_token("KLN", "root", Role::Admin).await;
    app.add_user(
        "esme",
        "KLN",
        &[Role::Counter],
        "test-only-password",
        Some("2468"),
    )
    .await;
    let phone = app.enrol("esme", "2468", "KLN").await.json()["token"]
        .as_str()
        .unwrap()
        .to_string();

    // Book and shelf of every key, straight from the file (the shelf is demo-only).
    let mut keys: Vec<KeyStock> = app
        .sql_rows(
            "select b.code, i.sku, k.lot, cast(coalesce(bal.qty, 0) as text),
                    cast(coalesce(sh.qty, 0) as text)
             from (select bin_id, item_id, lot from balance
                   union select bin_id, item_id, lot from demo_shelf) k
             join bin b on b.id = k.bin_id join item i on i.id = k.item_id
             left join balance bal on bal.bin_id = k.bin_id and bal.item_id = k.item_id
                  and bal.lot = k.lot
             left join demo_shelf sh on sh.bin_id = k.bin_id and sh.item_id = k.item_id
                  and sh.lot = k.lot
             where coalesce(bal.qty, 0) <> 0 or coalesce(sh.qty, 0) <> 0
             order by b.walk_seq, b.code, i.sku, k.lot",
        )
        .into_iter()
        .map(|r| KeyStock {
            bin: r[0].clone(),
            sku: r[1].clone(),
            lot: r[2].clone(),
            book: r[3].parse().unwrap(),
            truth: r[4].parse().unwrap(),
        })
        .collect();
    // Every bin with a record error, and as many without, up to 60 bins (3 hours).
    let wrong: std::collections::BTreeSet<String> = keys
        .iter()
        .filter(|k| k.book != k.truth)
        .map(|k| k.bin.clone())
        .collect();
    let mut chosen: Vec<String> = Vec::new();
    for k in &keys {
        if !chosen.contains(&k.bin)
            && (wrong.contains(&k.bin) || chosen.len() < 2 * wrong.len().max(10))
            && chosen.len() < 60
        {
            chosen.push(k.bin.clone());
        }
    }
    keys.retain(|k| chosen.contains(&k.bin));
    let start = Timestamp::now().0 - 4 * 60 * MIN;
    let mut rng = <rand_chacha::ChaCha8Rng as SeedableRng>::seed_from_u64(9);
    let day = count_day::simulate(&keys, start, &mut rng);
    assert!(
        !day.picks.is_empty() && !wrong.is_empty(),
        "the day has work"
    );

    // Deliveries in the order they reach the server: each bin's events when it is done,
    // each pick when the host posts it (up to 10 minutes late, often after the bin).
    enum Delivery<'a> {
        Count(&'a count_day::BinCount),
        Pick(&'a count_day::LatePick),
    }
    let mut deliveries: Vec<(i64, Delivery)> = day
        .counts
        .iter()
        .map(|c| (c.done_at, Delivery::Count(c)))
        .chain(day.picks.iter().map(|p| (p.posted_at, Delivery::Pick(p))))
        .collect();
    deliveries.sort_by_key(|(t, _)| *t);
    let mut late = 0;
    for (_, d) in &deliveries {
        match d {
            Delivery::Count(c) => {
                let pass = id();
                let ev = |t: i64, kind: &str, extra: Value| {
                    let mut e = json!({"id": id(), "at": t, "count": pass, "task": null,
                                       "bin": c.bin, "type": kind});
                    e.as_object_mut()
                        .unwrap()
                        .extend(extra.as_object().unwrap().clone());
                    e
                };
                let mut events = vec![{
                    let mut e = ev(c.opened_at, "bin_opened", json!({"label": ""}));
                    e["id"] = json!(pass);
                    e
                }];
                for l in &c.lines {
                    events.push(ev(
                        l.at,
                        "line",
                        json!({"sku": l.sku, "gtin": null, "packs": 1, "qty": l.qty,
                               "lot": l.lot, "entry": "keypad"}),
                    ));
                }
                events.push(ev(c.done_at, "bin_done", json!({})));
                let r = app
                    .client
                    .post(format!("{}/api/v1/sites/KLN/sync", app.base))
                    .bearer_auth(&phone)
                    .json(&app.stamped(
                        &phone,
                        &json!({"device_clock": Timestamp::now().0, "rtt_ms": 0, "events": events}),
                    ))
                    .send()
                    .await
                    .unwrap();
                let v: Value = r.json().await.unwrap();
                for res in v["results"].as_array().unwrap() {
                    assert_eq!(res["status"], "accepted", "{v}");
                }
            }
            Delivery::Pick(p) => {
                let bin_done = day.counts.iter().find(|c| c.bin == p.bin).unwrap().done_at;
                late += usize::from(p.posted_at > bin_done);
                let r = app
                    .client
                    .post(format!("{}/api/v1/sites/KLN/movements", app.base))
                    .bearer_auth(&admin)
                    .json(
                        &json!([{"id": p.uid, "bin": p.bin, "sku": p.sku, "lot": p.lot,
                                   "qty": p.qty, "kind": "pick", "event_at": at(p.event_at),
                                   "source": "host"}]),
                    )
                    .send()
                    .await
                    .unwrap();
                assert_eq!(r.status(), 200, "{}", r.text().await.unwrap());
            }
        }
    }

    let mut variances = BTreeMap::new();
    let mut after = 0;
    loop {
        let r = app
            .client
            .get(format!(
                "{}/api/v1/sites/KLN/count-results?state=current&limit=1000&after={after}",
                app.base
            ))
            .bearer_auth(&admin)
            .send()
            .await
            .unwrap();
        let page: Value = r.json().await.unwrap();
        for row in page["results"].as_array().unwrap() {
            let key = (
                row["bin"].as_str().unwrap().to_string(),
                row["sku"].as_str().unwrap().to_string(),
                row["lot"].as_str().unwrap().to_string(),
            );
            variances.insert(key, row["variance"].as_i64().unwrap());
        }
        match page["next"].as_i64() {
            Some(n) => after = n,
            None => break,
        }
    }
    let s = count_day::score(&day, &variances);
    println!(
        "simulated day: {} bins, {} keys, {} picks during counts ({late} posted after the bin \
         was done); clear record errors {}, raised {}; raised {} (with an error {}); \
         precision {:.3}, recall {:.3}; raised by moves alone {}",
        day.counts.len(),
        day.expected.len(),
        day.picks.len(),
        s.clear_errors,
        s.clear_errors_raised,
        s.raised,
        s.raised_with_error,
        s.precision(),
        s.recall(),
        s.raised_by_moves_alone
    );
    assert!(
        s.clear_errors > 0,
        "the history injected errors into the counted bins"
    );
    assert!(
        late > 0,
        "some picks reached the server after their bin was done"
    );
    assert_eq!(
        s.recall(),
        1.0,
        "every clear error of a unit or more is raised: {s:?}"
    );
    assert_eq!(s.raised_by_moves_alone, 0, "{s:?}");
    assert_eq!(
        s.precision(),
        1.0,
        "the counter is exact, so every raised key is an error"
    );
}

#[tokio::test]
async fn two_recounts_in_one_run_keep_their_order_and_positive_walk_positions() {
    let s = site().await;
    let day = todays_list(&s, 2).await;
    short_count(&s).await;
    // A second short count, in bin 2: book 20, counted 17.
    s.moves(&[(
        "r2",
        BIN2,
        "S1",
        "",
        20,
        "receipt",
        s.base - 60 * MIN,
        "host",
    )])
    .await;
    let b = s.base + 10 * MIN;
    let p = Pass::new(BIN2);
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", 17),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(tasks.len(), 2, "{list}");
    let seqs: Vec<i64> = tasks.iter().map(|t| t["seq"].as_i64().unwrap()).collect();
    assert!(seqs.iter().all(|&q| q >= 1), "{seqs:?}");
    let run2: Vec<&Value> = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|t| t["run"] == 2)
        .collect();
    let order: Vec<&str> = run2
        .iter()
        .take(2)
        .map(|t| t["bin"].as_str().unwrap())
        .collect();
    assert_eq!(
        order,
        [BIN1, BIN2],
        "both recounts lead, first sent first: {list}"
    );
    let mut all: Vec<i64> = run2.iter().map(|t| t["seq"].as_i64().unwrap()).collect();
    let n = all.len();
    all.dedup();
    assert_eq!(all.len(), n, "every walk position once: {list}");
}

// One recount per bin, withdrawn recounts and unclassified items (DESIGN §5).

/// Receives into bin 1, an hour before the base: S1 40, L1 lot A1 10, L1 lot B2 10.
async fn three_keys_in_bin1(s: &Site) {
    let t = s.base - 60 * MIN;
    s.moves(&[
        ("r1", BIN1, "S1", "", 40, "receipt", t, "host"),
        ("r2", BIN1, "L1", "A1", 10, "receipt", t, "host"),
        ("r3", BIN1, "L1", "B2", 10, "receipt", t, "host"),
    ])
    .await;
}

/// The recount tasks of a counter's phone list.
async fn phone_recounts(s: &Site, token: &str, day: &str) -> Vec<Value> {
    my_tasks(s, token, day).await["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|t| t["kind"] == "recount")
        .cloned()
        .collect()
}

/// Dan counts bin 1 through his one recount task: `(sku, lot, qty)` lines, 10 minutes
/// after the base.
async fn recount_bin1(s: &Site, day: &str, lines: &[(&str, &str, i64)]) {
    let rcs = phone_recounts(s, &s.dan, day).await;
    assert_eq!(rcs.len(), 1, "dan has one recount: {rcs:?}");
    let mut p = Pass::new(BIN1);
    p.task = rcs[0]["id"].as_i64();
    let b = s.base + 10 * MIN;
    let mut events = vec![p.opened(b)];
    for (i, (sku, lot, qty)) in lines.iter().enumerate() {
        events.push(p.line(b + MIN + i as i64 * 1_000, sku, lot, *qty));
    }
    events.push(p.done(b + 2 * MIN));
    s.sync(&s.dan, events, 0).await;
}

/// The recount outcome and verdict of a key's current result in a pass.
async fn key_outcome(s: &Site, pass: &Pass, sku: &str, lot: &str) -> (String, String) {
    let rows = s
        .results(&format!("state=current&pass={}&sku={sku}", pass.count))
        .await;
    let r = rows
        .iter()
        .find(|r| r["lot"] == lot)
        .unwrap_or_else(|| panic!("a current result of {sku} {lot}: {rows:?}"));
    (
        r["recount_outcome"].as_str().unwrap_or("").to_string(),
        r["verdict"].as_str().unwrap().to_string(),
    )
}

#[tokio::test]
async fn three_keys_out_in_one_bin_get_one_recount_that_decides_all_three() {
    // The items have no class (the list's first classification ran before any stock
    // arrived): held to class A, exact. Cora counts S1 35 (v₁ = −5), L1 A1 8 (v₁ = −2)
    // and L1 B2 12 (v₁ = +2): three keys out, one bin, one recount.
    let s = site().await;
    let day = todays_list(&s, 2).await;
    three_keys_in_bin1(&s).await;
    let p = Pass::new(BIN1);
    let b = s.base;
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", 35),
            p.line(b + MIN + 1_000, "L1", "A1", 8),
            p.line(b + MIN + 2_000, "L1", "B2", 12),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let firsts: Vec<Value> = s.results(&format!("state=current&pass={}", p.count)).await;
    assert_eq!(firsts.len(), 3, "{firsts:?}");
    assert!(firsts.iter().all(|r| r["verdict"] == "out_of_tolerance"));
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(tasks.len(), 1, "one recount for the bin: {list}");
    let detail = tasks[0]["detail"].as_str().unwrap();
    for key in ["S1", "L1 lot A1", "L1 lot B2"] {
        assert!(detail.contains(key), "the task lists {key}: {detail}");
    }
    let task = tasks[0]["id"].as_i64().unwrap();
    for r in &firsts {
        let d = s.detail(r["id"].as_i64().unwrap()).await;
        assert_eq!(d["recount_tasks"], json!([task]), "{d}");
    }
    assert_eq!(phone_recounts(&s, &s.dan, &day).await.len(), 1);

    // Dan's one pass decides every key: S1 35 agrees with the first count (confirmed),
    // L1 A1 10 with the book (book right), L1 B2 9 (v₂ = −1) with neither: |−1| > 0 and
    // |−1 − 2| > 0 under exact tolerance → a supervisor count, for that key only.
    recount_bin1(
        &s,
        &day,
        &[("S1", "", 35), ("L1", "A1", 10), ("L1", "B2", 9)],
    )
    .await;
    assert_eq!(
        key_outcome(&s, &p, "S1", "").await,
        ("confirmed".into(), "out_of_tolerance".into())
    );
    assert_eq!(
        key_outcome(&s, &p, "L1", "A1").await,
        ("book_right".into(), "hit".into())
    );
    assert_eq!(
        key_outcome(&s, &p, "L1", "B2").await,
        ("supervisor_count".into(), "out_of_tolerance".into())
    );
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(
        tasks.len(),
        2,
        "the recount and one supervisor count: {list}"
    );
    let sup = tasks[1]["detail"].as_str().unwrap();
    assert!(
        sup.starts_with("supervisor count of L1 lot B2 (result "),
        "the supervisor count re-checks the undecided key only: {sup}"
    );
}

#[tokio::test]
async fn a_late_posting_that_makes_the_first_count_a_hit_withdraws_its_recount() {
    // Cora counts S1 35 of 40 and L1 A1 8 of 10 (lot B2 10 of 10, a hit): one recount for
    // S1 and L1 A1. A pick of 5 of S1 stamped before her count, posted late, makes S1 a
    // hit (f* = 35); the recount stays for L1 A1. A late pick of 2 of L1 A1 makes that a
    // hit too: no key is out any more, and the recount is withdrawn.
    let s = site().await;
    let day = todays_list(&s, 2).await;
    three_keys_in_bin1(&s).await;
    let p = Pass::new(BIN1);
    let b = s.base;
    s.sync(
        &s.cora,
        vec![
            p.opened(b),
            p.line(b + MIN, "S1", "", 35),
            p.line(b + MIN + 1_000, "L1", "A1", 8),
            p.line(b + MIN + 2_000, "L1", "B2", 10),
            p.done(b + 2 * MIN),
        ],
        0,
    )
    .await;
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(tasks.len(), 1, "{list}");
    let task = tasks[0]["id"].as_i64().unwrap();
    assert_eq!(phone_recounts(&s, &s.dan, &day).await.len(), 1);

    let late = b - 20 * MIN;
    s.moves(&[("late1", BIN1, "S1", "", -5, "pick", late, "host")])
        .await;
    assert_eq!(s.current(&p, "S1").await["verdict"], "hit");
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert_eq!(
        tasks.len(),
        1,
        "one key still out keeps the recount: {list}"
    );
    assert_eq!(phone_recounts(&s, &s.dan, &day).await.len(), 1);

    s.moves(&[("late2", BIN1, "L1", "A1", -2, "pick", late, "host")])
        .await;
    let first = s
        .results(&format!("state=current&pass={}&sku=L1", p.count))
        .await
        .into_iter()
        .find(|r| r["lot"] == "A1")
        .unwrap();
    assert_eq!(first["verdict"], "hit", "{first}");
    let (tasks, list) = recount_tasks(&s, &day).await;
    assert!(
        tasks.is_empty(),
        "the withdrawn recount leaves the list: {list}"
    );
    assert!(
        phone_recounts(&s, &s.dan, &day).await.is_empty(),
        "and dan's phone"
    );
    let d = s.detail(first["id"].as_i64().unwrap()).await;
    assert_eq!(d["recount_tasks"], json!([]), "{d}");
    let withdrawn = &d["withdrawn_recounts"];
    assert_eq!(withdrawn[0]["task"], task, "{d}");
    let reason = withdrawn[0]["reason"].as_str().unwrap();
    assert!(
        reason.contains("no key it re-checks is out of tolerance") && reason.contains("late2"),
        "{reason}"
    );
    // A phone that still shows the withdrawn recount cannot start a count against it.
    let mut stale = Pass::new(BIN1);
    stale.task = Some(task);
    let now = Timestamp::now().0;
    let answer = s
        .app
        .sync_answer(
            &s.dan,
            vec![stale.opened(now - 2_000), stale.done(now - 1_000)],
            0,
        )
        .await;
    for r in answer["results"].as_array().unwrap() {
        assert_eq!(r["status"], "rejected", "{answer}");
        assert!(
            r["reason"].as_str().unwrap().contains("was withdrawn"),
            "{answer}"
        );
    }
}

#[tokio::test]
async fn a_new_item_is_held_to_class_a_until_it_has_history_enough_to_be_classified() {
    // Tolerances are the defaults (A exact, C 5 %: common practice, no source). Twenty of
    // S1 arrived an hour ago; twenty of L1 lot A1 arrived 40 days ago and never issued.
    // Building the list runs the first classification: L1 has more than the 30 days of
    // history a first class needs and issued nothing (C); S1 is too new and stays
    // unclassified. Counting 19 of each: 1 of 20 is 5 %, a hit for C, out for A.
    let s = site().await;
    s.moves(&[
        (
            "n1",
            BIN1,
            "S1",
            "",
            20,
            "receipt",
            s.base - 60 * MIN,
            "host",
        ),
        (
            "o1",
            BIN2,
            "L1",
            "A1",
            20,
            "receipt",
            s.base - 40 * 24 * 60 * MIN,
            "host",
        ),
    ])
    .await;
    todays_list(&s, 2).await;
    let b = s.base;
    let new = Pass::new(BIN1);
    let old = Pass::new(BIN2);
    s.sync(
        &s.cora,
        vec![
            new.opened(b),
            new.line(b + MIN, "S1", "", 19),
            new.done(b + 2 * MIN),
            old.opened(b + 3 * MIN),
            old.line(b + 4 * MIN, "L1", "A1", 19),
            old.done(b + 5 * MIN),
        ],
        0,
    )
    .await;
    let s1 = s.current(&new, "S1").await;
    assert_eq!(
        (s1["class"].clone(), s1["verdict"].as_str()),
        (Value::Null, Some("out_of_tolerance")),
        "{s1}"
    );
    let l1 = s.current(&old, "L1").await;
    assert_eq!(
        (l1["class"].as_str(), l1["verdict"].as_str()),
        (Some("C"), Some("hit")),
        "{l1}"
    );
}

// ---------------------------------------------------------------------------
// Many bins in one request.

/// The six bins of `many_bins_site`: the two of the small site and four more in aisle 1.
const SIX_BINS: [&str; 6] = [
    BIN1,
    BIN2,
    "A-01-03-1",
    "A-01-04-1",
    "A-01-05-1",
    "A-01-06-1",
];

/// Site T with six bins, each holding 40 of S1 and bin 1 ten of L1 lot K1 (received an
/// hour before the base); a pick of 2 of S1 from bin 3 during its count; today's list
/// with runs for cora and dan.
async fn many_bins_site() -> (Site, String) {
    let s = site().await;
    let (st, b) = s
        .app
        .post(
            "/api/v1/sites/T/bins",
            &json!([
                {"zone": "A", "aisle": 1, "bay": 3, "level": 1, "side": "L"},
                {"zone": "A", "aisle": 1, "bay": 4, "level": 1, "side": "R"},
                {"zone": "A", "aisle": 1, "bay": 5, "level": 1, "side": "L"},
                {"zone": "A", "aisle": 1, "bay": 6, "level": 1, "side": "R"}
            ]),
        )
        .await;
    assert_eq!(st, 200, "{b}");
    let early = s.base - 60 * MIN;
    let uids: Vec<String> = (0..SIX_BINS.len()).map(|i| format!("r{i}")).collect();
    let mut moves: Vec<Move<'_>> = SIX_BINS
        .iter()
        .zip(&uids)
        .map(|(bin, uid)| (uid.as_str(), *bin, "S1", "", 40, "receipt", early, "host"))
        .collect();
    moves.push(("rl", BIN1, "L1", "K1", 10, "receipt", early, "host"));
    // Bin 3's pass (the fourth below) opens at base + 4.5 min and scans at base + 5 min.
    let pick_at = s.base + 4 * MIN + 3 * MIN / 4;
    moves.push(("p3", SIX_BINS[2], "S1", "", -2, "pick", pick_at, "host"));
    s.moves(&moves).await;
    let day = todays_list(&s, 2).await;
    (s, day)
}

/// A pass's keyed lines: SKU, lot, quantity.
type Lines = Vec<(&'static str, &'static str, i64)>;

/// A pass's events: opened at `t`, its lines 30 s later, done a minute after `t`.
fn pass_events(p: &Pass, t: i64, lines: &[(&str, &str, i64)]) -> Vec<Value> {
    let mut events = vec![p.opened(t)];
    events.extend(
        lines
            .iter()
            .map(|(sku, lot, qty)| p.line(t + MIN / 2, sku, lot, *qty)),
    );
    events.push(p.done(t + MIN));
    events
}

/// Every result of the site (superseded ones too) and the day's recount tasks, with the
/// passes named by their place in `passes` so two sites' can be compared.
async fn netting_state(s: &Site, day: &str, passes: &[&Pass]) -> Value {
    let name = |uid: &str| {
        passes
            .iter()
            .position(|p| p.count == uid)
            .map_or_else(|| uid.to_string(), |i| format!("pass {i}"))
    };
    let results: Vec<Value> = s
        .results("state=all&limit=1000")
        .await
        .iter()
        .map(|r| {
            json!([
                name(r["pass"].as_str().unwrap()),
                r["bin"],
                r["sku"],
                r["lot"],
                r["counted"],
                r["f_star"],
                r["variance"],
                r["status"],
                r["verdict"],
                r["recount_outcome"],
                r["first_count_wrong"],
                r["superseded_by"].is_null(),
                r["renet_reason"]
            ])
        })
        .collect();
    let (_, list) = recount_tasks(s, day).await;
    let tasks: Vec<Value> = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| json!([t["bin"], t["reason"], t["run"], t["seq"], t["status"]]))
        .collect();
    json!({"results": results, "tasks": tasks, "warnings": list["warnings"]})
}

/// The id of the day's recount task of `bin`.
async fn recount_task_of(s: &Site, day: &str, bin: &str) -> i64 {
    let (tasks, list) = recount_tasks(s, day).await;
    tasks
        .iter()
        .find(|t| t["bin"] == bin)
        .unwrap_or_else(|| panic!("a recount of {bin}: {list}"))["id"]
        .as_i64()
        .unwrap()
}

#[tokio::test]
async fn a_request_of_many_bins_nets_as_one_request_a_bin_would() {
    // The same counts reach two sites: on one as a single request per round (a phone
    // that was offline), on the other one request a pass. Netting reads and writes the
    // first counts of different bins together; the results, recounts and their places
    // in the list must be the same. Round 1: six first counts, bin 5 counted twice (the
    // second pass of a bin waits for the first's writes); bin 1 short (out), bin 4 over
    // (out), bin 6 with no line (S1 not scanned: out), bin 3 netted over the pick.
    let (a, day_a) = many_bins_site().await;
    let (b, day_b) = many_bins_site().await;
    let step = 3 * MIN / 2;
    let round1: Vec<(Pass, Lines)> = vec![
        (
            Pass::new(SIX_BINS[0]),
            vec![("S1", "", 35), ("L1", "K1", 10)],
        ),
        (Pass::new(SIX_BINS[1]), vec![("S1", "", 40)]),
        (Pass::new(SIX_BINS[4]), vec![("S1", "", 40)]),
        (Pass::new(SIX_BINS[2]), vec![("S1", "", 38)]),
        (Pass::new(SIX_BINS[3]), vec![("S1", "", 41)]),
        (Pass::new(SIX_BINS[4]), vec![("S1", "", 39)]),
        (Pass::new(SIX_BINS[5]), vec![]),
    ];
    let events = |round: &[(Pass, Lines)], from: i64| -> Vec<Vec<Value>> {
        round
            .iter()
            .enumerate()
            .map(|(i, (p, lines))| pass_events(p, from + i as i64 * step, lines))
            .collect()
    };
    let one = events(&round1, a.base);
    a.sync(&a.cora, one.concat(), 0).await;
    for e in &one {
        b.sync(&b.cora, e.clone(), 0).await;
    }
    let mut passes: Vec<&Pass> = round1.iter().map(|(p, _)| p).collect();
    let (sa, sb) = (
        netting_state(&a, &day_a, &passes).await,
        netting_state(&b, &day_b, &passes).await,
    );
    assert_eq!(sa, sb, "round 1: one request against one a pass");
    let out = sa["results"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|r| r[8] == "out_of_tolerance")
        .count();
    assert_eq!(out, 4, "bins 1, 4, 6 and bin 5's second pass are out: {sa}");
    assert_eq!(
        sa["tasks"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|t| t[1] == "recount")
            .count(),
        4,
        "{sa}"
    );

    // Round 2 mixes recount passes (each nets on its own) with first counts of other
    // bins: dan recounts bin 1 (35: the first count stands) and bin 4 (40: the book was
    // right); cora counts bin 2 and bin 3 again.
    let mut round2 = Vec::new();
    for (s, day) in [(&a, &day_a), (&b, &day_b)] {
        let mut r1 = Pass::new(SIX_BINS[0]);
        r1.task = Some(recount_task_of(s, day, SIX_BINS[0]).await);
        let mut r4 = Pass::new(SIX_BINS[3]);
        r4.task = Some(recount_task_of(s, day, SIX_BINS[3]).await);
        round2.push(vec![
            (r1, vec![("S1", "", 35), ("L1", "K1", 10)]),
            (Pass::new(SIX_BINS[1]), vec![("S1", "", 40)]),
            (r4, vec![("S1", "", 40)]),
            (Pass::new(SIX_BINS[2]), vec![("S1", "", 38)]),
        ]);
    }
    let (ra, rb) = (&round2[0], &round2[1]);
    let from = a.base + 15 * MIN;
    // On site a: dan's two recounts in one request, cora's two counts in another, sent
    // interleaved by time on site b one pass a request.
    let ea = events(ra, from);
    a.sync(&a.dan, [ea[0].clone(), ea[2].clone()].concat(), 0)
        .await;
    a.sync(&a.cora, [ea[1].clone(), ea[3].clone()].concat(), 0)
        .await;
    let eb = events(rb, from);
    b.sync(&b.dan, eb[0].clone(), 0).await;
    b.sync(&b.dan, eb[2].clone(), 0).await;
    b.sync(&b.cora, eb[1].clone(), 0).await;
    b.sync(&b.cora, eb[3].clone(), 0).await;
    passes.extend(ra.iter().map(|(p, _)| p));
    let sa = netting_state(&a, &day_a, &passes).await;
    let mut passes_b: Vec<&Pass> = round1.iter().map(|(p, _)| p).collect();
    passes_b.extend(rb.iter().map(|(p, _)| p));
    let sb = netting_state(&b, &day_b, &passes_b).await;
    assert_eq!(sa, sb, "round 2: recounts among first counts");
    let outcomes: Vec<&Value> = sa["results"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|r| !r[9].is_null())
        .map(|r| &r[9])
        .collect();
    assert_eq!(outcomes.len(), 2, "the recounts decided bins 1 and 4: {sa}");
}
