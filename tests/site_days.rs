//! A site's day is its own: two sites a day apart in one database, over real HTTP. The
//! counter's list, its default day and the "today" a phone is given follow each site's
//! zone, not UTC and not the server's own zone.

mod common;

use cairn::accounts::Role;
use chrono::{Duration, NaiveDate, Utc};
use common::{Auth, Body, spawn_app};
use reqwest::Method;
use serde_json::{Value, json};

/// The local date at a fixed offset from UTC, `hours` east.
fn date_at(hours: i64) -> NaiveDate {
    (Utc::now() + Duration::hours(hours)).date_naive()
}

/// Sets up site `code` in `zone` with one bin, a counter `who` with a phone, and, when
/// `day` is given, that day's count list with the counter holding its run. Returns the
/// phone's token.
async fn site(
    app: &common::TestApp,
    code: &str,
    zone: &str,
    who: &str,
    day: Option<NaiveDate>,
) -> String {
    app.create_site_in(code, zone).await;
    app.add_user(
        &format!("{code}-admin").to_lowercase(),
        code,
        &[Role::Admin, Role::Supervisor],
        common::PASSWORD,
        None,
    )
    .await;
    let admin = app
        .issue_token(code, &format!("{code}-admin").to_lowercase(), Role::Admin)
        .await;
    let auth = Auth::Bearer(admin);
    let post = |path: String, body: Value| {
        let auth = auth.clone();
        async move {
            let a = app.send(Method::POST, &path, &auth, Body::Json(body)).await;
            assert!(a.status < 300, "{path}: {}", a.text);
            a.json()
        }
    };
    post(
        format!("/api/v1/sites/{code}/bins"),
        json!([{"zone": "A", "aisle": 1, "bay": 1, "level": 1, "side": "L"}]),
    )
    .await;
    post(
        format!("/api/v1/sites/{code}/items"),
        json!([{"sku": "S1", "description": "Hex bolt M8", "base_unit": "box", "unit_cost_minor": 450}]),
    )
    .await;
    app.add_user(who, code, &[Role::Counter], common::PASSWORD, Some("4821"))
        .await;
    if let Some(day) = day {
        post(
            format!("/api/v1/sites/{code}/count-lists"),
            json!({"day": day.to_string(), "counters": 1, "minutes": 60, "fill": "capacity"}),
        )
        .await;
        let a = app
            .send(
                Method::PUT,
                &format!("/api/v1/sites/{code}/count-lists/{day}/runs/1"),
                &auth,
                Body::Json(json!({"holder": who})),
            )
            .await;
        assert_eq!(a.status, 200, "{}", a.text);
    }
    let a = app.enrol(who, "4821", code).await;
    assert_eq!(a.status, 201, "{}", a.text);
    a.json()["token"].as_str().unwrap().to_string()
}

async fn my_tasks(app: &common::TestApp, code: &str, token: &str) -> (u16, Value) {
    let a = app
        .send(
            Method::GET,
            &format!("/api/v1/sites/{code}/my-tasks"),
            &Auth::Bearer(token.to_string()),
            Body::Empty,
        )
        .await;
    (a.status, a.json())
}

#[tokio::test]
async fn two_sites_a_day_apart_each_count_on_their_own_day() {
    // Pacific/Kiritimati keeps UTC+14 and Pacific/Pago_Pago UTC−11 all year, with no
    // daylight saving (tz database; checked with Python 3.11's zoneinfo on 2026-12-04).
    // At any instant Kiritimati's date is one or two days ahead of Pago Pago's, and UTC's
    // lies between them.
    let app = spawn_app().await;
    let kiri_day = date_at(14);
    let kiri = site(&app, "KIR", "Pacific/Kiritimati", "tabu", Some(kiri_day)).await;
    let pago = site(&app, "PPG", "Pacific/Pago_Pago", "sina", None).await;

    let before = (date_at(14), date_at(-11));
    let (st, list) = my_tasks(&app, "KIR", &kiri).await;
    let (pst, missing) = my_tasks(&app, "PPG", &pago).await;
    let after = (date_at(14), date_at(-11));

    assert_eq!(st, 200, "{list}");
    let day: NaiveDate = list["day"].as_str().unwrap().parse().unwrap();
    assert!(day == before.0 || day == after.0, "{list}");
    assert_eq!(list["time_zone"], "Pacific/Kiritimati");
    assert_eq!(
        list["today"], list["day"],
        "the site's today is the list's day"
    );
    assert_eq!(
        list["run"], 1,
        "the counter's run of that day's list: {list}"
    );

    // Pago Pago has no list for its own today, and says which day that is.
    assert_eq!(pst, 404, "{missing}");
    let said = missing["error"].as_str().unwrap();
    assert!(
        said.contains(&before.1.to_string()) || said.contains(&after.1.to_string()),
        "{said}"
    );
    let utc = Utc::now().date_naive();
    assert!(
        before.1 <= utc && utc <= after.0,
        "UTC's date lies between the two"
    );
    let gap = (day - before.1).num_days();
    assert!((1..=2).contains(&gap), "{day} vs {}", before.1);
}
