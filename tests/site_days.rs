//! A site's day is its own: two sites a day apart in one database, over real HTTP. The
//! counter's list, its default day and the "today" a phone is given follow each site's
//! zone, not UTC and not the server's own zone.

mod common;

use cairn::accounts::Role;
use chrono::{Duration, NaiveDate, SecondsFormat, Utc};
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

/// Posts a receipt of 30 of S1 into A-01-01-1 of site `code`, 30 hours ago.
async fn stock(app: &common::TestApp, code: &str, admin: &Auth) {
    let at = (Utc::now() - Duration::hours(30)).to_rfc3339_opts(SecondsFormat::Millis, true);
    let a = app
        .send(
            Method::POST,
            &format!("/api/v1/sites/{code}/movements"),
            admin,
            Body::Json(json!([common::movement(
                "r1",
                "A-01-01-1",
                "S1",
                30,
                "receipt",
                &at
            )])),
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.text);
}

/// The events of one pass of `user` over A-01-01-1: opened two minutes before `done_ms`,
/// `qty` of S1 keyed a minute before, marked done at `done_ms` (phone clock, ms).
fn pass_events(user: &str, done_ms: i64, qty: i64) -> Vec<Value> {
    let pass = uuid::Uuid::now_v7().to_string();
    let ev = |t: i64, kind: &str, extra: Value| {
        let mut e = json!({"id": uuid::Uuid::now_v7().to_string(), "at": t, "user": user,
                           "count": pass, "task": null, "bin": "A-01-01-1", "type": kind});
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    };
    let mut opened = ev(done_ms - 120_000, "bin_opened", json!({"label": ""}));
    opened["id"] = json!(pass);
    vec![
        opened,
        ev(
            done_ms - 60_000,
            "line",
            json!({"sku": "S1", "gtin": null, "packs": 1, "qty": qty, "lot": "", "entry": "keypad"}),
        ),
        ev(done_ms, "bin_done", json!({})),
    ]
}

/// Counts `qty` of S1 in A-01-01-1 of site `code` as `user`'s phone, the bin done at
/// instant `done_ms` (opened two minutes before); every event must be accepted.
async fn count_at(
    app: &common::TestApp,
    code: &str,
    token: &str,
    user: &str,
    done_ms: i64,
    qty: i64,
) {
    let events = pass_events(user, done_ms, qty);
    let a = app
        .send(
            Method::POST,
            &format!("/api/v1/sites/{code}/sync"),
            &Auth::Bearer(token.to_string()),
            Body::Json(json!({"device_clock": Utc::now().timestamp_millis(), "rtt_ms": 20, "events": events})),
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.text);
    let v = a.json();
    assert!(
        v["results"]
            .as_array()
            .unwrap()
            .iter()
            .all(|r| r["status"] == "accepted"),
        "{v}"
    );
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

/// Chicago's offset from UTC in hours at `at`, by the US rule (Energy Policy Act of 2005):
/// daylight time (−5) from 02:00 local on the second Sunday of March to 02:00 local on the
/// first Sunday of November, standard time (−6) otherwise. Written out here so the test
/// does not lean on the tz library the server uses.
fn chicago_offset_h(at: chrono::DateTime<Utc>) -> i64 {
    use chrono::{Datelike, TimeZone, Weekday};
    let nth_sunday = |month: u32, n: u32| {
        let first = NaiveDate::from_ymd_opt(at.year(), month, 1).unwrap();
        let to_sunday = (7 - first.weekday().num_days_from_sunday()) % 7;
        let d = first + Duration::days(i64::from(to_sunday + 7 * (n - 1)));
        assert_eq!(d.weekday(), Weekday::Sun);
        d
    };
    let start = Utc.from_utc_datetime(&nth_sunday(3, 2).and_hms_opt(8, 0, 0).unwrap());
    let end = Utc.from_utc_datetime(&nth_sunday(11, 1).and_hms_opt(7, 0, 0).unwrap());
    if start <= at && at < end { -5 } else { -6 }
}

#[tokio::test]
async fn a_count_at_half_past_eleven_at_night_is_recounted_on_that_local_days_list() {
    let app = spawn_app().await;
    let token = site(&app, "CHI", "America/Chicago", "rosa", None).await;
    let admin = Auth::Bearer(app.issue_token("CHI", "chi-admin", Role::Admin).await);
    stock(&app, "CHI", &admin).await;

    // The last 23:30 in Chicago before now, as an instant.
    let now = Utc::now();
    let local_now = now + Duration::hours(chicago_offset_h(now));
    let mut local_day = local_now.date_naive();
    if local_now.time() < chrono::NaiveTime::from_hms_opt(23, 30, 0).unwrap() {
        local_day = local_day.pred_opt().unwrap();
    }
    let local = local_day.and_hms_opt(23, 30, 0).unwrap().and_utc();
    let x = local - Duration::hours(chicago_offset_h(local));
    let x_ms = x.timestamp_millis();
    assert_ne!(
        x.date_naive(),
        local_day,
        "23:30 in Chicago is already tomorrow in UTC"
    );

    // Rosa counts 25 of the 30 between 23:28 and 23:30 local: out of tolerance (S1 is
    // new, so held to class A), and a recount goes on a list.
    count_at(&app, "CHI", &token, "rosa", x_ms, 25).await;
    let list = app
        .send(
            Method::GET,
            &format!("/api/v1/sites/CHI/count-lists/{local_day}"),
            &admin,
            Body::Empty,
        )
        .await;
    assert_eq!(
        list.status, 200,
        "the recount is on {local_day}'s list: {}",
        list.text
    );
    let tasks = list.json()["tasks"].as_array().unwrap().clone();
    assert!(
        tasks.iter().any(|t| t["reason"] == "recount"),
        "{}",
        list.text
    );
    let next = local_day.succ_opt().unwrap();
    let other = app
        .send(
            Method::GET,
            &format!("/api/v1/sites/CHI/count-lists/{next}"),
            &admin,
            Body::Empty,
        )
        .await;
    assert_eq!(
        other.status, 404,
        "nothing on the UTC day's list: {}",
        other.text
    );

    // The difference's page reads in Chicago's clock with its zone: the bin was done at
    // 23:30 local (the phone's times corrected by its clock, so a second either way), and
    // no time on the page is in UTC.
    app.add_user(
        "chi-boss",
        "CHI",
        &[Role::InventoryManager],
        common::PASSWORD,
        None,
    )
    .await;
    let boss = Auth::Session(app.sign_in("chi-boss", common::PASSWORD).await);
    let r = app
        .send(
            Method::GET,
            "/api/v1/sites/CHI/count-results?state=current",
            &admin,
            Body::Empty,
        )
        .await;
    assert_eq!(r.status, 200, "{}", r.text);
    let v = r.json();
    let id = v["results"][0]["id"]
        .as_i64()
        .unwrap_or_else(|| panic!("{v}"));
    let page = app
        .send(
            Method::GET,
            &format!("/sites/CHI/differences/{id}"),
            &boss,
            Body::Empty,
        )
        .await;
    assert_eq!(page.status, 200, "{}", page.text);
    let abbreviation = if chicago_offset_h(x) == -5 {
        "CDT"
    } else {
        "CST"
    };
    let done = [
        format!("{local_day} 23:29:59 {abbreviation}"),
        format!("{local_day} 23:30:00 {abbreviation}"),
        format!("{local_day} 23:30:01 {abbreviation}"),
    ];
    assert!(
        done.iter().any(|t| page.text.contains(t)),
        "one of {done:?} in {}",
        page.text
    );
    assert!(!page.text.contains(" UTC"), "{}", page.text);
}

#[tokio::test]
async fn a_count_just_after_local_midnight_is_in_that_local_days_accuracy() {
    // Asia/Kathmandu keeps UTC+05:45 all year (tz database; no daylight saving since 1986,
    // from memory; checked with Python 3.11's zoneinfo): 00:03 there is 18:18 UTC the day
    // before. The pass runs 00:01–00:03 local, wholly inside the local day.
    let app = spawn_app().await;
    let token = site(&app, "KTM", "Asia/Kathmandu", "bina", None).await;
    let admin = Auth::Bearer(app.issue_token("KTM", "ktm-admin", Role::Admin).await);
    stock(&app, "KTM", &admin).await;

    let offset = Duration::minutes(5 * 60 + 45);
    let now = Utc::now();
    let mut day = (now + offset).date_naive();
    let mut x = day.and_hms_opt(0, 3, 0).unwrap().and_utc() - offset;
    if x + Duration::minutes(1) > now {
        day = day.pred_opt().unwrap();
        x = day.and_hms_opt(0, 3, 0).unwrap().and_utc() - offset;
    }
    assert_ne!(
        x.date_naive(),
        day,
        "00:03 in Kathmandu is still the day before in UTC"
    );
    let x_ms = x.timestamp_millis();
    count_at(&app, "KTM", &token, "bina", x_ms, 30).await;

    let counted = |d: NaiveDate| {
        let admin = admin.clone();
        let app = &app;
        async move {
            let r = app
                .send(
                    Method::GET,
                    &format!("/api/v1/sites/KTM/accuracy?since={d}&until={d}"),
                    &admin,
                    Body::Empty,
                )
                .await;
            assert_eq!(r.status, 200, "{}", r.text);
            r.json()["counted"].as_u64().unwrap()
        }
    };
    assert_eq!(
        counted(day).await,
        1,
        "the count is in {day}, its local day"
    );
    assert_eq!(
        counted(day.pred_opt().unwrap()).await,
        0,
        "not in the UTC day before"
    );
}

/// Applies one pass of `qty` of S1 in A-01-01-1 at site `code` as `user`, the bin done at
/// `done`, through the store's sync path as it would have run on a server whose clock
/// read `done` plus five seconds (a past week cannot be counted over HTTP today: the
/// server refuses counts more than 72 hours old).
async fn count_back_then(
    app: &common::TestApp,
    code: &str,
    user: &str,
    done: chrono::DateTime<Utc>,
    qty: i64,
) {
    use cairn::master::SiteCode;
    use cairn::sync::{Sender, SyncBatch, clock::ClockSample, event};
    use cairn::time::Timestamp;
    let site = app
        .state
        .store
        .site(&SiteCode::parse(code).unwrap())
        .await
        .unwrap()
        .unwrap();
    let who = app
        .state
        .store
        .user(&cairn::accounts::UserName::parse(user).unwrap())
        .await
        .unwrap()
        .unwrap();
    let done_ms = done.timestamp_millis();
    let raw = pass_events(user, done_ms, qty);
    let received_at = Timestamp(done_ms + 5_000);
    let results = cairn::writes::apply_sync(
        app.state.store.as_ref(),
        SyncBatch {
            site: site.id,
            site_code: code.to_string(),
            zone: site.time_zone,
            sender: Sender {
                user: who.id,
                user_name: user.to_string(),
                device: None,
            },
            clock: ClockSample::measure(received_at, received_at.0, Some(20)),
            received_at,
            events: raw
                .iter()
                .enumerate()
                .map(|(i, e)| event::read(e, i))
                .collect(),
        },
    )
    .await
    .unwrap();
    assert!(
        results
            .iter()
            .all(|r| format!("{:?}", r.status).to_lowercase() == "accepted"),
        "{results:?}"
    );
}

#[tokio::test]
async fn accuracy_weeks_start_on_the_local_monday_in_kathmandu() {
    // Asia/Kathmandu is UTC+05:45 (tz database; checked with Python 3.11's zoneinfo):
    // Monday 2026-11-30 00:03 there is Sunday 2026-11-29 18:18 UTC, and Sunday 23:50 there
    // is 18:05 UTC the same Sunday. ISO 8601 weeks start on Monday: 2026-11-23..29 is week
    // 48 and 2026-11-30..12-06 week 49 (1 January 2026 is a Thursday).
    let app = spawn_app().await;
    site(&app, "KTM", "Asia/Kathmandu", "bina", None).await;
    let admin = Auth::Bearer(app.issue_token("KTM", "ktm-admin", Role::Admin).await);
    let a = app
        .send(
            Method::POST,
            "/api/v1/sites/KTM/movements",
            &admin,
            Body::Json(json!([common::movement(
                "r1",
                "A-01-01-1",
                "S1",
                30,
                "receipt",
                "2026-11-20T04:00:00Z"
            )])),
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.text);
    let utc = |s: &str| s.parse::<chrono::DateTime<Utc>>().unwrap();
    count_back_then(&app, "KTM", "bina", utc("2026-11-29T18:05:00Z"), 30).await;
    count_back_then(&app, "KTM", "bina", utc("2026-11-29T18:18:00Z"), 30).await;

    let r = app
        .send(
            Method::GET,
            "/api/v1/sites/KTM/accuracy?since=2026-11-23&until=2026-12-06",
            &admin,
            Body::Empty,
        )
        .await;
    assert_eq!(r.status, 200, "{}", r.text);
    let v = r.json();
    assert_eq!(v["counted"], 2, "{v}");
    let weeks: Vec<(String, u64)> = v["weeks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| {
            (
                w["week"].as_str().unwrap().to_string(),
                w["counted"].as_u64().unwrap(),
            )
        })
        .collect();
    assert_eq!(
        weeks,
        vec![("2026-W48".to_string(), 1), ("2026-W49".to_string(), 1)],
        "the Monday count is in the week that starts that local Monday: {v}"
    );
}

#[tokio::test]
async fn demand_per_day_in_chicago_takes_each_local_day_once_across_both_dst_nights() {
    // One pick at 00:30 and one at 23:30 local every day, so each local day issues exactly
    // 2 whatever its length. The local times are turned into instants by the US rule
    // written out in `chicago_offset_h`, not by the server's tz library. 2026-03-08 (23
    // hours) and 2026-11-01 (25 hours) are the DST days.
    let app = spawn_app().await;
    site(&app, "CHI", "America/Chicago", "rosa", None).await;
    let admin = Auth::Bearer(app.issue_token("CHI", "chi-admin", Role::Admin).await);
    let instant = |day: NaiveDate, h: u32, m: u32| {
        // The offset is read at the local time taken as UTC and checked again at the
        // instant, so the hour after a change is placed right.
        let local = day.and_hms_opt(h, m, 0).unwrap().and_utc();
        let mut at = local - Duration::hours(chicago_offset_h(local));
        at = local - Duration::hours(chicago_offset_h(at));
        assert_eq!(at + Duration::hours(chicago_offset_h(at)), local);
        at
    };
    let d = |y, m, day| NaiveDate::from_ymd_opt(y, m, day).unwrap();
    let windows = [
        (d(2026, 3, 4), d(2026, 3, 11)),
        (d(2026, 10, 28), d(2026, 11, 4)),
    ];
    let mut moves = vec![common::movement(
        "r1",
        "A-01-01-1",
        "S1",
        1000,
        "receipt",
        "2026-02-01T12:00:00Z",
    )];
    for (from, to) in windows {
        let mut day = from;
        while day <= to {
            for (h, m) in [(0, 30), (23, 30)] {
                moves.push(common::movement(
                    &format!("p-{day}-{h}"),
                    "A-01-01-1",
                    "S1",
                    -1,
                    "pick",
                    &instant(day, h, m).to_rfc3339(),
                ));
            }
            day = day.succ_opt().unwrap();
        }
    }
    let a = app
        .send(
            Method::POST,
            "/api/v1/sites/CHI/movements",
            &admin,
            Body::Json(Value::Array(moves)),
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.text);

    for (from, to) in windows {
        let r = app
            .send(
                Method::GET,
                &format!("/api/v1/sites/CHI/buffer/S1?until={to}&window_days=8"),
                &admin,
                Body::Empty,
            )
            .await;
        assert_eq!(r.status, 200, "{}", r.text);
        let demand = &r.json()["demand"];
        assert_eq!(demand["from"], from.to_string(), "{demand}");
        assert_eq!(demand["calendar_days"], 8, "{demand}");
        // Wednesday to the next Wednesday: six weekdays (Monday to Friday calendar) and a
        // weekend whose picks are taken as two extra days.
        assert_eq!(demand["working_days"], 6, "{demand}");
        assert_eq!(demand["extra_days"], 2, "{demand}");
        assert_eq!(demand["issued"], 16, "{demand}");
        let daily: Vec<(String, i64)> = demand["daily"]
            .as_array()
            .unwrap()
            .iter()
            .map(|p| (p[0].as_str().unwrap().to_string(), p[1].as_i64().unwrap()))
            .collect();
        let mut want = Vec::new();
        let mut day = from;
        while day <= to {
            want.push((day.to_string(), 2));
            day = day.succ_opt().unwrap();
        }
        assert_eq!(daily, want, "every local day issues its two picks once");
        assert_eq!(demand["sd"], 0.0, "{demand}");
    }
}
