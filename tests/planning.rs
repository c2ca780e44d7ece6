//! The day's count list: the textbook example, a simulated year on the demo
//! site, and the HTTP routes end to end.

mod common;

use cairn::demo::{self, DemoSpec};
use cairn::planning::abc::Class;
use cairn::planning::calendar::Calendar;
use cairn::planning::estimate::TaskTime;
use cairn::planning::plan::{self, BinFacts, Capacity, Fill, ItemFacts, Plan, PlanInput};
use cairn::planning::walk::Place;
use cairn::planning::{Settings, service};
use chrono::NaiveDate;
use common::spawn_app;
use serde_json::json;
use std::collections::HashMap;

/// What a simulation saw: each working day's plan, and the days each item's
/// count was completed (all its bins counted).
struct Simulated {
    days: Vec<(NaiveDate, Plan)>,
    completions: Vec<Vec<usize>>,
}

/// Plans `n` working days from `input.day`, counting every planned bin that day.
fn simulate(input: &mut PlanInput, n: usize) -> Simulated {
    let mut completions = vec![Vec::new(); input.items.len()];
    let mut days = Vec::with_capacity(n);
    let mut day = input.day;
    while !input.calendar.is_working(day) {
        day = input.calendar.next_working_day(day).unwrap();
    }
    let last_of = |input: &PlanInput, it: &ItemFacts| {
        it.bins
            .iter()
            .map(|&b| input.bins[b as usize].last_count)
            .min()
            .flatten()
    };
    for k in 0..n {
        input.day = day;
        let before: Vec<Option<NaiveDate>> =
            input.items.iter().map(|it| last_of(input, it)).collect();
        let p = plan::build(input);
        for t in &p.tasks {
            input.bins[t.bin as usize].last_count = Some(day);
        }
        // A counted bin's triggers are answered.
        input
            .triggers
            .retain(|t| input.bins[t.bin as usize].last_count != Some(day));
        for (i, it) in input.items.iter().enumerate() {
            if last_of(input, it) != before[i] {
                completions[i].push(k);
            }
        }
        days.push((day, p));
        day = input.calendar.next_working_day(day).unwrap();
    }
    Simulated { days, completions }
}

fn coefficient_of_variation(xs: &[f64]) -> f64 {
    let n = xs.len() as f64;
    let mean = xs.iter().sum::<f64>() / n;
    let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0);
    var.sqrt() / mean
}

/// A site of one item per bin with the given classes, 2026 with 240 working days.
fn textbook_site() -> PlanInput {
    // 2026 has 261 weekdays; every twelfth weekday is made a holiday until 21
    // are, leaving 240 working days, the year the example is written for.
    let mut calendar = Calendar::default();
    let mut d = NaiveDate::from_ymd_opt(2026, 1, 1).unwrap();
    let mut weekday = 0;
    while calendar.holidays.len() < 21 {
        if calendar.is_working(d) {
            weekday += 1;
            if weekday % 12 == 0 {
                calendar.holidays.insert(d);
            }
        }
        d = d.succ_opt().unwrap();
    }
    assert_eq!(calendar.working_days_in_year(d), 240);
    let classes = [(Class::A, 500), (Class::B, 1_750), (Class::C, 2_750)];
    let mut bins = Vec::new();
    let mut items = Vec::new();
    for (class, n) in classes {
        for _ in 0..n {
            let i = bins.len();
            bins.push(BinFacts {
                id: i as i64 + 1,
                code: format!("A-{:03}-{:02}-1", 1 + i / 50, 1 + i % 50),
                zone: "A".into(),
                place: Place {
                    zone_seq: 0,
                    zone: 1,
                    aisle: 1 + (i / 50) as u16,
                    bay: 1 + (i % 50) as u16,
                    level: 1,
                    side: 0,
                    walk_seq: 0,
                },
                lines: 1,
                last_count: None,
            });
            items.push(ItemFacts {
                id: i as i64 + 1,
                class,
                dead: false,
                bins: vec![i as u32],
            });
        }
    }
    let mut settings = Settings::default();
    settings.frequency.per_year = [12, 4, 2];
    // One minute per count, so minutes and counts are the same number.
    settings.task_time = TaskTime {
        base_s: 60,
        per_line_s: 0,
    };
    PlanInput {
        day: NaiveDate::from_ymd_opt(2026, 1, 1).unwrap(),
        calendar,
        settings,
        bins,
        items,
        triggers: Vec::new(),
        recounts: Vec::new(),
        zone_time: HashMap::new(),
        capacity: Capacity {
            counters: 4,
            minutes: 480,
        },
        fill: Fill::Level,
        counting_since: Some(NaiveDate::from_ymd_opt(2026, 1, 1).unwrap()),
        watermark: 0,
        risk: None,
    }
}

#[test]
fn the_textbook_cycle_counting_example_gives_77_counts_a_day() {
    // Heizer & Render, Operations Management, the cycle-counting example (from
    // memory): 5,000 items, 500 A counted every 20 working days, 1,750 B every
    // 60, 2,750 C every 120, so 500/20 + 1,750/60 + 2,750/120 = 25 + 29 + 23 =
    // 77 counts a day.
    let mut site = textbook_site();
    let sim = simulate(&mut site, 240);
    let first = &sim.days[0].1;
    assert_eq!(first.intervals[..3], [20, 60, 120]);
    // The level is the example's daily load: 77.08 one-minute counts.
    assert_eq!(first.level_s, 4_625);
    // After the first C interval the plan has settled: average counts per class per day.
    let settled = &sim.days[120..];
    let mut per_class = [0usize; 3];
    for (_, p) in settled {
        for t in &p.tasks {
            per_class[t.class.unwrap().index()] += 1;
        }
    }
    let per_day: Vec<i64> = per_class
        .iter()
        .map(|&n| (n as f64 / settled.len() as f64).round() as i64)
        .collect();
    assert_eq!(per_day, [25, 29, 23]);
    assert_eq!(per_day.iter().sum::<i64>(), 77);
}

#[tokio::test]
async fn a_simulated_year_on_the_demo_site_keeps_frequencies_capacity_and_level() {
    let app = spawn_app().await;
    let store = app.state.store.as_ref();
    let spec = DemoSpec {
        end: NaiveDate::from_ymd_opt(2026, 1, 4).unwrap(),
        ..DemoSpec::standard(7)
    };
    demo::generate(store, &spec, false).await.unwrap();
    let site = store
        .site(&cairn::master::SiteCode::parse(demo::DEMO_SITE).unwrap())
        .await
        .unwrap()
        .unwrap();
    let start = NaiveDate::from_ymd_opt(2026, 1, 5).unwrap();
    service::classify(store, &site, start).await.unwrap();
    let capacity = Capacity {
        counters: 2,
        minutes: 150,
    };
    let mut input = store
        .plan_input(
            site.id,
            start,
            site.time_zone.range(start).1,
            capacity,
            Fill::Level,
        )
        .await
        .unwrap();
    // Three years: every class completes its first interval and then at least one more.
    let wdy = input.calendar.working_days_in_year(start) as usize;
    let sim = simulate(&mut input, 3 * wdy);

    for (day, p) in &sim.days {
        assert!(
            p.run_seconds()
                .iter()
                .all(|&s| s <= capacity.per_counter_s()),
            "{day}: a run is over one counter's minutes"
        );
        assert!(
            p.tasks.iter().map(|t| t.seconds).sum::<i64>() <= capacity.total_s(),
            "{day} is over capacity"
        );
        assert!(
            p.warnings.is_empty(),
            "{day}: nothing is left off: {:?}",
            p.warnings
        );
    }

    // Frequency from the mean gap between completed counts, after the first.
    let target = [12.0, 4.0, 1.0];
    let mut checked = [0usize; 3];
    for (i, it) in input.items.iter().enumerate() {
        let c = &sim.completions[i];
        if it.bins.is_empty() || it.dead {
            continue;
        }
        assert!(
            c.len() >= 2,
            "item {} was counted {} time(s)",
            it.id,
            c.len()
        );
        let mean_gap = (c[c.len() - 1] - c[0]) as f64 / (c.len() - 1) as f64;
        let per_year = wdy as f64 / mean_gap;
        let want = target[it.class.index()];
        assert!(
            (per_year - want).abs() <= 0.10 * want,
            "item {} ({}) counted {per_year:.2} times a year, target {want}",
            it.id,
            it.class
        );
        checked[it.class.index()] += 1;
    }
    assert!(checked.iter().all(|&n| n > 0), "{checked:?}");

    // Daily minutes are level once the longest (C) interval has passed.
    let minutes: Vec<f64> = sim.days[wdy..]
        .iter()
        .map(|(_, p)| p.tasks.iter().map(|t| t.seconds).sum::<i64>() as f64)
        .collect();
    let cv = coefficient_of_variation(&minutes);
    assert!(cv < 0.15, "coefficient of variation {cv:.3}");
    eprintln!(
        "demo year: checked {checked:?} items, daily minutes CV {cv:.3}, mean {:.1} min",
        minutes.iter().sum::<f64>() / minutes.len() as f64 / 60.0
    );
}

fn build(day: &str, counters: u32, minutes: u32, extra: serde_json::Value) -> serde_json::Value {
    let mut b = json!({"day": day, "counters": counters, "minutes": minutes});
    if let (Some(o), Some(x)) = (b.as_object_mut(), extra.as_object()) {
        o.extend(x.clone());
    }
    b
}

#[tokio::test]
async fn triggered_bins_lead_the_list_and_one_left_off_is_named_in_a_warning() {
    let app = spawn_app().await;
    app.site_with_triggers().await;
    let (s, list) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &build("2026-03-03", 1, 60, json!({"preview": true})),
        )
        .await;
    assert_eq!(s, 200, "{list}");
    let reasons: Vec<&str> = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["reason"].as_str().unwrap())
        .collect();
    assert_eq!(reasons, ["negative_balance", "short_pick"]);
    assert_eq!(list["stored"], false);
    assert!(list["warnings"].as_array().unwrap().is_empty());

    // Three minutes hold the first bin (2:30) but not the second (2:00 more).
    let (_, tight) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &build("2026-03-03", 1, 3, json!({"preview": true})),
        )
        .await;
    assert_eq!(tight["tasks"].as_array().unwrap().len(), 1);
    let warnings = tight["warnings"].to_string();
    assert!(
        warnings.contains("A-01-02-1") && warnings.contains("short_pick"),
        "{warnings}"
    );
}

#[tokio::test]
async fn a_stored_list_is_read_exported_adjusted_and_not_rebuilt_by_accident() {
    let app = spawn_app().await;
    app.site_with_triggers().await;
    let path = "/api/v1/sites/T/count-lists";
    let (s, list) = app.post(path, &build("2026-03-03", 2, 60, json!({}))).await;
    assert_eq!((s, list["stored"].as_bool()), (200, Some(true)), "{list}");
    assert_eq!(list["version"], 1);
    let (s, again) = app.post(path, &build("2026-03-03", 2, 60, json!({}))).await;
    assert_eq!(s, 409, "{again}");
    let (s, replaced) = app
        .post(path, &build("2026-03-03", 2, 60, json!({"replace": true})))
        .await;
    assert_eq!((s, replaced["version"].as_i64()), (200, Some(2)));

    let (s, read) = app.get("/api/v1/sites/T/count-lists/2026-03-03").await;
    assert_eq!(s, 200);
    assert_eq!(read["tasks"], replaced["tasks"]);
    let csv = app
        .with_token(app.client.get(format!(
            "{}/api/v1/sites/T/count-lists/2026-03-03?format=csv",
            app.base
        )))
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    assert!(csv.starts_with("day,run,holder,seq,bin,"), "{csv}");
    assert_eq!(
        csv.lines().count(),
        1 + read["tasks"].as_array().unwrap().len()
    );

    let task = read["tasks"][0]["id"].as_i64().unwrap();
    let (s, moved) = app
        .post(
            &format!("/api/v1/sites/T/count-lists/2026-03-03/tasks/{task}/move"),
            &json!({"run": 2}),
        )
        .await;
    assert_eq!(s, 200, "{moved}");
    assert_eq!(moved["version"], 3);
    let t = moved["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["id"] == task)
        .unwrap();
    assert_eq!(t["run"], 2);
    let (s, _) = app
        .post(
            &format!("/api/v1/sites/T/count-lists/2026-03-03/tasks/{task}/move"),
            &json!({"run": 9}),
        )
        .await;
    assert_eq!(s, 422);

    let run = |n: u32| {
        format!(
            "{}/api/v1/sites/T/count-lists/2026-03-03/runs/{n}",
            app.base
        )
    };
    app.add_user(
        "ana",
        "T",
        &[cairn::accounts::Role::Counter],
        "test-only-password",
        None,
    )
    .await;
    let put = |url: String| {
        app.with_token(app.client.put(url))
            .json(&json!({"holder": "Ana"}))
            .send()
    };
    assert_eq!(put(run(1)).await.unwrap().status(), 200);
    assert_eq!(put(run(2)).await.unwrap().status(), 409);
    let (_, read) = app.get("/api/v1/sites/T/count-lists/2026-03-03").await;
    // The holder is kept by the user's stored name, the one `my-tasks` matches.
    assert_eq!(read["runs"][0]["holder"], "ana");
    let (s, _) = app.get("/api/v1/sites/T/count-lists/2026-03-04").await;
    assert_eq!(s, 404);
}

#[tokio::test]
async fn short_picks_are_idempotent_and_bad_rows_are_named() {
    let app = spawn_app().await;
    app.site_with_triggers().await;
    let path = "/api/v1/sites/T/short-picks";
    let same = json!([{"id": "sp1", "bin": "A-01-02-1", "sku": "L1", "short_qty": 3,
                       "reported_at": "2026-03-02T10:00:00Z"}]);
    let (s, b) = app.post(path, &same).await;
    assert_eq!((s, b["already_recorded"].as_u64()), (200, Some(1)), "{b}");
    let changed = json!([{"id": "sp1", "bin": "A-01-02-1", "sku": "L1", "short_qty": 4,
                          "reported_at": "2026-03-02T10:00:00Z"}]);
    let (s, b) = app.post(path, &changed).await;
    assert_eq!(
        (s, b["rows"][0]["field"].as_str()),
        (422, Some("id")),
        "{b}"
    );
    let bad = json!([{"id": "sp2", "bin": "Q-09-09-9", "sku": "S1", "reported_at": "2026-03-02"}]);
    let (s, b) = app.post(path, &bad).await;
    assert_eq!(s, 422, "{b}");
    assert_eq!(b["rows"][0]["field"], "reported_at");
}

#[tokio::test]
async fn settings_and_calendar_round_trip_and_bad_values_are_refused() {
    let app = spawn_app().await;
    app.small_site().await;
    let (s, defaults) = app.get("/api/v1/sites/T/planning/settings").await;
    assert_eq!(s, 200);
    assert_eq!(defaults["frequency"]["per_year"], json!([12, 4, 1]));
    let mut changed = defaults.clone();
    changed["abc"]["basis"] = json!("hits");
    changed["frequency"]["per_year"] = json!([24, 6, 2]);
    let put = |body: serde_json::Value, path: &'static str| {
        app.with_token(
            app.client
                .put(format!("{}/api/v1/sites/T/planning/{path}", app.base)),
        )
        .json(&body)
        .send()
    };
    assert_eq!(
        put(changed.clone(), "settings").await.unwrap().status(),
        200
    );
    let (_, read) = app.get("/api/v1/sites/T/planning/settings").await;
    assert_eq!(read, changed);
    let mut bad = changed.clone();
    bad["abc"]["a_pct"] = json!(99);
    assert_eq!(put(bad, "settings").await.unwrap().status(), 400);

    let cal = json!({"working_weekdays": ["mon", "tue", "wed", "thu", "fri", "sat"],
                     "holidays": ["2026-12-25"]});
    assert_eq!(put(cal.clone(), "calendar").await.unwrap().status(), 200);
    let (_, read) = app.get("/api/v1/sites/T/planning/calendar").await;
    assert_eq!(read, cal);
    let bad = json!({"working_weekdays": ["someday"]});
    assert_eq!(put(bad, "calendar").await.unwrap().status(), 400);
}

#[tokio::test]
async fn a_classification_run_is_summarised_and_kept_in_each_items_history() {
    let app = spawn_app().await;
    app.site_with_triggers().await;
    let (s, none) = app.get("/api/v1/sites/T/planning/abc").await;
    assert_eq!(s, 404, "{none}");
    // S1 first moved on 2026-03-02 and L1 never did: on 2026-03-03 neither has the 30
    // days of history a first class needs (DEVELOPERS "Planning"), so both stay
    // unclassified (held to class A) instead of looking like slow C items.
    let (s, run) = app
        .post("/api/v1/sites/T/planning/abc?day=2026-03-03", &json!({}))
        .await;
    assert_eq!(s, 200, "{run}");
    assert_eq!(
        (run["items"].as_u64(), run["changed"].as_u64()),
        (Some(0), Some(0)),
        "{run}"
    );
    // A month on, S1 (the one item with issues) is classified A; L1 still has no history.
    let (s, run) = app
        .post("/api/v1/sites/T/planning/abc?day=2026-04-02", &json!({}))
        .await;
    assert_eq!(s, 200, "{run}");
    assert_eq!(
        (run["items"].as_u64(), run["changed"].as_u64()),
        (Some(1), Some(1)),
        "{run}"
    );
    // A second run changes nobody's class, so the history gains nothing.
    let (_, again) = app
        .post("/api/v1/sites/T/planning/abc?day=2026-04-03", &json!({}))
        .await;
    assert_eq!(again["changed"], 0);
    let (s, history) = app.get("/api/v1/sites/T/items/S1/classes").await;
    assert_eq!(s, 200);
    assert_eq!(history.as_array().unwrap().len(), 1);
    assert_eq!(history[0]["class"], "A");
    assert_eq!(history[0]["since"], "2026-04-02");
    let (s, l1) = app.get("/api/v1/sites/T/items/L1/classes").await;
    assert_eq!((s, l1.as_array().map(Vec::len)), (200, Some(0)), "{l1}");
    let (_, summary) = app.get("/api/v1/sites/T/planning/abc").await;
    assert_eq!(
        (summary["a"].as_u64(), summary["c"].as_u64()),
        (Some(1), Some(0))
    );
}

#[tokio::test]
async fn a_counter_downloads_their_run_with_labels_and_items_but_no_book_quantities() {
    let app = spawn_app().await;
    app.site_with_triggers().await;
    let (s, list) = app
        .post(
            "/api/v1/sites/T/count-lists",
            &build("2026-03-03", 1, 60, json!({})),
        )
        .await;
    assert_eq!(s, 200, "{list}");
    for (user, pin) in [("cora", "4821"), ("dan", "5932")] {
        app.add_user(
            user,
            "T",
            &[cairn::accounts::Role::Counter],
            "test-only-password",
            Some(pin),
        )
        .await;
    }
    let held = app
        .with_token(app.client.put(format!(
            "{}/api/v1/sites/T/count-lists/2026-03-03/runs/1",
            app.base
        )))
        .json(&json!({"holder": "cora"}))
        .send()
        .await
        .unwrap();
    assert_eq!(held.status(), 200);
    let phone = |user: &'static str, pin: &'static str| {
        let app = &app;
        async move {
            let token = app.enrol(user, pin, "T").await.json()["token"]
                .as_str()
                .unwrap()
                .to_string();
            let r = app
                .client
                .get(format!(
                    "{}/api/v1/sites/T/my-tasks?day=2026-03-03",
                    app.base
                ))
                .bearer_auth(token)
                .send()
                .await
                .unwrap();
            assert_eq!(r.status(), 200);
            r.json::<serde_json::Value>().await.unwrap()
        }
    };
    let mine = phone("cora", "4821").await;
    assert_eq!(mine["run"], 1);
    let (_, stored) = app.get("/api/v1/sites/T/count-lists/2026-03-03").await;
    assert_eq!(
        mine["version"], stored["version"],
        "the phone can tell a stale copy"
    );
    let tasks = mine["tasks"].as_array().unwrap();
    assert_eq!(tasks.len(), 2, "{mine}");
    assert_eq!(tasks[0]["bin"], "A-01-01-1");
    let label = tasks[0]["label"].as_str().unwrap();
    assert!(
        cairn_scan::BinLabel::parse(label).is_ok(),
        "{label} is a valid bin label"
    );
    assert_eq!(tasks[0]["items"][0]["sku"], "S1");
    assert_eq!(tasks[0]["items"][0]["description"], "Hex bolt M8");
    assert!(
        tasks.iter().all(|t| t["kind"] == "count"),
        "no trigger reason reaches the phone"
    );
    let text = mine.to_string();
    for word in ["qty", "balance", "lines", "reason", "negative", "short"] {
        assert!(
            !text.contains(word),
            "'{word}' must not reach a counter: {text}"
        );
    }
    let other = phone("dan", "5932").await;
    assert!(
        other["run"].is_null() && other["tasks"].as_array().unwrap().is_empty(),
        "{other}"
    );
}
