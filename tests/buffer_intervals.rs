//! The buffer at other count intervals over real HTTP on the test store (SQLite
//! file, or PostgreSQL with CAIRN_TEST_STORE): the item's page and its JSON show
//! σrec, safety stock and order point at each interval, the row at today's
//! interval is the buffer itself, an interval asked for is added, bad input is
//! refused naming `interval`, and an item without enough history shows no rows.
//! The count history is written with statements both stores run, so every error
//! and gap behind the growth fit is known.

mod common;

use cairn::accounts::Role;
use common::{Auth, Body, PASSWORD, ROOT_PASSWORD, ROOT_USER, TestApp, movement, spawn_app};
use reqwest::Method;
use serde_json::{Value, json};

const BUFFER: &str = "/api/v1/sites/T/buffer/S1?until=2026-03-13&window_days=12";
const DAY_MS: i64 = 86_400_000;
/// 2025-01-06 09:00 UTC, the first count of the history.
const FIRST_COUNT_MS: i64 = 1_736_154_000_000;

/// Writes one judged count of S1 in bin A-01-01-1 `day` days after the first,
/// `error` units off the book of 100.
fn count(app: &TestApp, n: usize, day: i64, error: i64) {
    let t = FIRST_COUNT_MS + day * DAY_MS;
    let uid = format!("hist-{n}");
    let of = |table: &str, col: &str, key: &str| {
        format!("(select id from {table} where {col} = '{key}')")
    };
    let (site, bin, item, user) = (
        of("site", "code", "T"),
        of("bin", "code", "A-01-01-1"),
        of("item", "sku", "S1"),
        of("user_account", "name", ROOT_USER),
    );
    app.sql_exec(&format!(
        "insert into count_pass (uid, site_id, bin_id, user_id, first_at, done_at, uncertainty_ms,
                                 received_at)
         values ('{uid}', {site}, {bin}, {user}, {}, {t}, 0, {t})",
        t - 60_000
    ))
    .expect("the pass is written");
    let verdict = if error == 0 {
        "hit"
    } else {
        "out_of_tolerance"
    };
    app.sql_exec(&format!(
        "insert into count_result (pass_id, site_id, bin_id, item_id, lot, class, counted, f_star,
             variance, status, verdict, unit_cost_minor, counted_at, window_start, window_end,
             evidence, watermark, settles_at, computed_at)
         values ({}, {site}, {bin}, {item}, '', 'C', {}, 100, {error}, 'no_moves_in_window',
                 '{verdict}', 450, {t}, {}, {t}, '{{}}', 0, {t}, {t})",
        of("count_pass", "uid", &uid),
        100 + error,
        t - 60_000
    ))
    .expect("the result is written");
}

/// Site T (small_site): S1 stocked in one bin, picked in March 2026, with a lead
/// time, and 13 counts whose gaps cycle 7, 14, 21 days with errors 1, 2, 3 units
/// of alternating sign. L1 has a lead time and no counts.
async fn site() -> TestApp {
    let app = spawn_app().await;
    app.small_site().await;
    let m =
        |id: &str, qty: i64, kind: &str, at: &str| movement(id, "A-01-01-1", "S1", qty, kind, at);
    app.post_ok(
        "/api/v1/sites/T/movements",
        &json!([
            m("r1", 1000, "receipt", "2026-02-27T08:00:00Z"),
            m("p1", -6, "pick", "2026-03-02T09:00:00Z"),
            m("p2", -4, "pick", "2026-03-04T10:00:00Z"),
            m("p3", -10, "pick", "2026-03-06T11:00:00Z"),
            m("p4", -2, "pick", "2026-03-10T11:00:00Z"),
            m("p5", -8, "pick", "2026-03-11T11:00:00Z"),
        ]),
    )
    .await;
    app.post_ok(
        "/api/v1/sites/T/planner-inputs",
        &json!([
            {"sku": "S1", "lead_time_days": 5, "lead_time_sd_days": 1, "review_days": 2, "service_level": 0.95},
            {"sku": "L1", "lead_time_days": 8}
        ]),
    )
    .await;
    count(&app, 0, 0, 0);
    let mut day = 0;
    for i in 0..12 {
        let k = i % 3 + 1;
        day += 7 * k;
        count(&app, i as usize + 1, day, if i % 2 == 0 { k } else { -k });
    }
    app
}

fn f(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("{v} is not a number"))
}

fn close(got: &Value, want: f64) {
    let got = f(got);
    assert!(
        (got - want).abs() < 1e-9 * want.abs().max(1.0),
        "{got} ≠ {want}"
    );
}

fn row(r: &Value, days: f64) -> &Value {
    r["counting"]["rows"]
        .as_array()
        .unwrap()
        .iter()
        .find(|w| f(&w["interval_days"]) == days)
        .unwrap_or_else(|| panic!("no row at {days} days: {r}"))
}

#[tokio::test]
async fn the_row_at_todays_interval_is_the_buffer_and_shorter_intervals_free_stock() {
    let app = site().await;
    let (s, r) = app.get(BUFFER).await;
    assert_eq!(s, 200, "{r}");
    // The growth fit of the history (worked in accuracy/item_error.rs's unit test
    // of the same counts): squared errors 1, 4, 9 on 7, 14, 21 days lie on
    // (4/7)·t − 3, so the fit goes through the origin, a = 0,
    // b = Σty / Σt² = 252 / 686 = 18/49 units² a day, from 12 gaps.
    let e = &r["record_error"];
    assert_eq!(e["growth"]["points"], 12);
    close(&e["growth"]["a"], 0.0);
    close(&e["growth"]["b"], 18.0 / 49.0);
    // S1 is not classified: class C, 1 count a year (the default), so σrec is
    // taken 365 days after a count: σ² = 365 · 18/49 = 6570/49, one bin.
    assert_eq!(e["at_days"], 365.0);
    assert!(
        e["interval_source"]
            .as_str()
            .unwrap()
            .starts_with("class C: 1 count a year"),
        "{e}"
    );
    assert_eq!(e["keys"], 1);
    close(&e["sigma_rec"], (6570.0f64 / 49.0).sqrt());
    let b = &r["buffer"];
    close(&b["record_variance"], 6570.0 / 49.0);

    let c = &r["counting"];
    assert_eq!(c["fit"], "item");
    assert_eq!(c["points"], 12);
    assert_eq!(c["note"], Value::Null);
    let days: Vec<f64> = c["rows"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| f(&w["interval_days"]))
        .collect();
    assert_eq!(days, [7.0, 14.0, 30.0, 60.0, 91.0, 182.0, 365.0]);
    let current: Vec<&Value> = c["rows"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|w| w["current"] == true)
        .collect();
    assert_eq!(current.len(), 1, "{c}");
    let now = current[0];
    assert_eq!(now["interval_days"], 365.0);
    // Exactly the buffer's figures, not merely close.
    assert_eq!(now["sigma_rec"], b["inputs"]["record_error_sd"]);
    assert_eq!(now["safety_stock"], b["safety_stock"]);
    assert_eq!(now["order_point"], b["order_point"]);
    assert_eq!(now["order_point_units"], b["order_point_units"]);
    assert_eq!(now["safety_stock_change"], 0.0);
    assert_eq!(now["order_point_units_change"], 0);

    // Monthly: σrec² = 30 · 18/49 = 540/49; the other variances are the buffer's.
    let month = row(&r, 30.0);
    close(&month["sigma_rec"], (540.0f64 / 49.0).sqrt());
    let ss =
        f(&b["z"]) * (f(&b["demand_variance"]) + f(&b["lead_time_variance"]) + 540.0 / 49.0).sqrt();
    close(&month["safety_stock"], ss);
    close(&month["safety_stock_change"], ss - f(&b["safety_stock"]));
    assert!(
        f(&month["safety_stock_change"]) < 0.0,
        "counting monthly frees stock"
    );
    close(
        &month["safety_stock_value_change_minor"],
        450.0 * (ss - f(&b["safety_stock"])),
    );
    let units = (f(&b["cycle_stock"]) + ss).ceil() as i64;
    assert_eq!(month["order_point_units"], units);
    assert_eq!(
        month["order_point_units_change"],
        units - b["order_point_units"].as_i64().unwrap()
    );
    // Longer intervals never lower the figures.
    let rows = c["rows"].as_array().unwrap();
    for w in rows.windows(2) {
        assert!(f(&w[0]["sigma_rec"]) < f(&w[1]["sigma_rec"]));
        assert!(f(&w[0]["safety_stock"]) < f(&w[1]["safety_stock"]));
    }

    // An interval asked for is added and marked; today's row stays as it was.
    let (s, asked) = app.get(&format!("{BUFFER}&interval=45")).await;
    assert_eq!(s, 200, "{asked}");
    assert_eq!(asked["counting"]["rows"].as_array().unwrap().len(), 8);
    let at45 = row(&asked, 45.0);
    assert_eq!(
        (at45["asked"].clone(), at45["current"].clone()),
        (json!(true), json!(false))
    );
    close(&at45["sigma_rec"], (45.0 * 18.0f64 / 49.0).sqrt());
    assert_eq!(row(&asked, 365.0), now);
    assert_eq!(asked["buffer"], r["buffer"]);
}

#[tokio::test]
async fn a_bad_interval_is_refused_by_name_and_an_item_without_history_shows_no_rows() {
    let app = site().await;
    for bad in ["0", "731", "abc", "7.5", "-3"] {
        let (s, e) = app.get(&format!("{BUFFER}&interval={bad}")).await;
        assert_eq!(s, 400, "{bad}: {e}");
        assert!(e.to_string().contains("interval"), "{bad}: {e}");
    }
    // Only one item's JSON takes it: not the list, not the CSV.
    let (s, e) = app.get("/api/v1/sites/T/buffer?interval=30").await;
    assert_eq!(s, 400, "{e}");
    let csv = app
        .send(
            Method::GET,
            &format!("{BUFFER}&interval=30&format=csv"),
            &Auth::Bearer(root_token(&app).await),
            Body::Empty,
        )
        .await;
    assert_eq!(csv.status, 400, "{}", csv.text);
    assert!(csv.text.contains("interval"), "{}", csv.text);
    // The CSV names the interval σrec was taken at, beside its terms.
    let csv = app
        .send(
            Method::GET,
            &format!("{BUFFER}&format=csv"),
            &Auth::Bearer(root_token(&app).await),
            Body::Empty,
        )
        .await;
    assert_eq!(csv.status, 200, "{}", csv.text);
    let mut reader = csv::Reader::from_reader(csv.text.as_bytes());
    let headers = reader.headers().unwrap().clone();
    let record = reader.records().next().unwrap().unwrap();
    let cell = |name: &str| &record[headers.iter().position(|h| h == name).unwrap()];
    assert_eq!(cell("count_interval_days"), "365");
    assert_eq!(cell("count_interval_source"), "class C: 1 count a year");
    assert!(
        (cell("record_error_sd").parse::<f64>().unwrap() - (6570.0f64 / 49.0).sqrt()).abs() < 1e-9
    );

    // L1 has a buffer but no counts: nothing invented, and the page says why.
    let (s, l1) = app
        .get("/api/v1/sites/T/buffer/L1?until=2026-03-13&window_days=12")
        .await;
    assert_eq!(s, 200, "{l1}");
    assert!(l1["buffer"].is_object(), "{l1}");
    assert_eq!(l1["counting"]["rows"], json!([]));
    assert_eq!(l1["counting"]["fit"], Value::Null);
    let note = l1["counting"]["note"].as_str().unwrap();
    assert!(note.starts_with("not enough history to say"), "{note}");

    // A counter may not read it, with or without an interval.
    app.add_user("cora", "T", &[Role::Counter], PASSWORD, Some("4821"))
        .await;
    let counter = app.issue_token("T", "cora", Role::Counter).await;
    let a = app
        .send(
            Method::GET,
            &format!("{BUFFER}&interval=30"),
            &Auth::Bearer(counter),
            Body::Empty,
        )
        .await;
    assert_eq!(a.status, 403, "{}", a.text);
}

async fn root_token(app: &TestApp) -> String {
    app.issue_token("T", ROOT_USER, Role::Admin).await
}

#[tokio::test]
async fn the_page_shows_the_rows_with_todays_marked_as_the_buffer() {
    let app = site().await;
    let (_, r) = app.get(&format!("{BUFFER}&interval=45")).await;
    let session = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let page = app
        .send(
            Method::GET,
            "/sites/T/buffer/S1?until=2026-03-13&window_days=12&interval=45",
            &Auth::Session(session.clone()),
            Body::Empty,
        )
        .await;
    assert_eq!(page.status, 200, "{}", page.text);
    let html = &page.text;
    assert!(
        html.contains("If it were counted at another interval"),
        "{html}"
    );
    // The chart is drawn for both frames, one bar per row.
    for frame in ["narrow", "wide"] {
        let svg = html
            .split(&format!("id=\"chart-intervals-{frame}\""))
            .nth(1)
            .and_then(|t| t.split("</svg>").next())
            .unwrap_or_else(|| panic!("the {frame} chart is on the page"));
        assert_eq!(svg.matches("<title>safety stock ").count(), 8, "{svg}");
    }
    assert!(html.contains("From the item's own error growth (12 repeat counts of a bin)"));
    let table = html
        .split("<table class=\"grid intervals\">")
        .nth(1)
        .and_then(|t| t.split("</table>").next())
        .expect("the interval table is on the page");
    assert_eq!(
        table.matches("<tr").count(),
        1 + 8,
        "a header and eight rows"
    );
    let today = table
        .split("<tr class=\"current\">")
        .nth(1)
        .and_then(|t| t.split("</tr>").next())
        .expect("today's row is marked");
    let b = &r["buffer"];
    assert!(today.contains("<b>today</b>"), "{today}");
    assert!(
        today.contains(&format!(">{:.2}<", f(&b["safety_stock"]))),
        "{today}"
    );
    assert!(
        today.contains(&format!(">{}<", b["order_point_units"])),
        "{today}"
    );
    assert!(table.contains("<b>asked</b>"), "{table}");
    // The safety stock at the top of the page is the same figure.
    assert!(html.contains(&format!(
        "<dt>safety stock</dt><dd>{:.2}</dd>",
        f(&b["safety_stock"])
    )));

    // The list's last column: the safety stock change at 30 days, L1 without one.
    let list = app
        .send(
            Method::GET,
            "/sites/T/buffer?until=2026-03-13&window_days=12&sort=monthly_ss_change",
            &Auth::Session(session.clone()),
            Body::Empty,
        )
        .await;
    assert_eq!(list.status, 200, "{}", list.text);
    let change = f(&row(&r, 30.0)["safety_stock_change"]);
    assert!(change < 0.0);
    let s1 = list
        .text
        .split("<code>S1</code>")
        .nth(1)
        .and_then(|t| t.split("</tr>").next())
        .expect("S1 is listed");
    assert!(s1.contains(&format!(">−{:.2}<", -change)), "{s1}");
    let l1 = list
        .text
        .split("<code>L1</code>")
        .nth(1)
        .and_then(|t| t.split("</tr>").next())
        .expect("L1 is listed");
    assert!(l1.contains("<td class=\"n\">–</td><td>"), "{l1}");
    assert!(
        list.text.find("<code>S1</code>") < list.text.find("<code>L1</code>"),
        "a missing value sorts last"
    );

    let bad = app
        .send(
            Method::GET,
            "/sites/T/buffer/S1?interval=soon",
            &Auth::Session(session.clone()),
            Body::Empty,
        )
        .await;
    assert_eq!(bad.status, 400, "{}", bad.text);
    assert!(
        bad.text.contains("interval: ") && bad.text.contains("soon"),
        "{}",
        bad.text
    );

    let l1 = app
        .send(
            Method::GET,
            "/sites/T/buffer/L1?until=2026-03-13&window_days=12",
            &Auth::Session(session),
            Body::Empty,
        )
        .await;
    assert_eq!(l1.status, 200, "{}", l1.text);
    assert!(
        l1.text.contains("No rows: not enough history to say"),
        "{}",
        l1.text
    );
    assert!(!l1.text.contains("<table class=\"grid intervals\">"));
}

#[tokio::test]
async fn under_the_risk_policy_the_buffer_takes_the_interval_the_list_chooses() {
    let app = site().await;
    // The site's day (site T keeps UTC): the buffer reads the choice of today's list.
    let today = chrono::Utc::now().date_naive().to_string();
    app.post_ok(
        &format!("/api/v1/sites/T/planning/abc?day={today}"),
        &json!({}),
    )
    .await;
    let (s, v) = app
        .put(
            "/api/v1/sites/T/planning/frequency-policy",
            &json!({"policy": "risk"}),
        )
        .await;
    assert_eq!(s, 200, "{v}");
    let (s, list) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &json!({"day": today, "counters": 1, "minutes": 480, "fill": "capacity", "preview": true}),
        )
        .await;
    assert_eq!(s, 200, "{list}");
    let (s, r) = app.get(BUFFER).await;
    assert_eq!(s, 200, "{r}");
    let e = &r["record_error"];
    assert_eq!(
        e["interval_source"], "chosen by the site's risk policy",
        "{e}"
    );
    let days = f(&e["at_days"]);
    let task = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["bin"] == "A-01-01-1")
        .unwrap_or_else(|| panic!("S1's bin is on the list: {list}"));
    // The list shows the interval to two decimals.
    let chosen = f(&task["why"]["risk"]["interval_days"]);
    assert_eq!((days * 100.0).round() / 100.0, chosen, "{task}");
    assert_ne!(days, 365.0, "not the class interval");
    close(&e["sigma_rec"], (days * 18.0 / 49.0).sqrt());
    let now: Vec<&Value> = r["counting"]["rows"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|w| w["current"] == true)
        .collect();
    assert_eq!(now.len(), 1);
    assert_eq!(now[0]["interval_days"], e["at_days"]);
    assert_eq!(now[0]["safety_stock"], r["buffer"]["safety_stock"]);
}
