//! The supervisor's pages of the day's count list, over real HTTP with a real
//! browser sign-in: build with a preview, save, assign, move, watch progress,
//! export CSV, print labels; and who may do which.

mod common;

use cairn::accounts::Role;
use cairn::master::SiteCode;
use cairn::time::Timestamp;
use chrono::Datelike;
use common::{Answer, Auth, Body, PASSWORD, Session, TestApp, movement, spawn_app};
use reqwest::Method;
use serde_json::{Value, json};

const DAY: &str = "2026-03-03";

/// Site T with a negative balance on A-01-01-1 and a short pick reported on
/// A-01-02-1; supervisor sam, planner pia, counters cora and dan.
async fn site(app: &TestApp) {
    app.site_with_triggers().await;
    app.add_people(&[
        ("sam", &[Role::Supervisor], None),
        ("pia", &[Role::Planner], None),
        ("cora", &[Role::Counter], Some("4821")),
        ("dan", &[Role::Counter], Some("5932")),
    ])
    .await;
}

fn page(day: &str) -> String {
    format!("/sites/T/count-lists/{day}")
}

async fn get(app: &TestApp, s: &Session, path: &str) -> Answer {
    app.send(Method::GET, path, &Auth::Session(s.clone()), Body::Empty)
        .await
}

async fn post(app: &TestApp, s: &Session, path: &str, fields: &[(&str, &str)]) -> Answer {
    let fields = fields
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    app.send(
        Method::POST,
        path,
        &Auth::Session(s.clone()),
        Body::Form(fields),
    )
    .await
}

/// The stored list as the JSON API gives it (root's token).
async fn api_list(app: &TestApp) -> (u16, Value) {
    app.get(&format!("/api/v1/sites/T/count-lists/{DAY}")).await
}

/// The hidden fields of the page's form that posts to `action`.
fn hidden_fields(html: &str, action: &str) -> Vec<(String, String)> {
    let at = html
        .find(&format!("action=\"{action}\""))
        .unwrap_or_else(|| panic!("no form posts to {action}"));
    let form = &html[at..at + html[at..].find("</form>").expect("the form ends")];
    let mut out = Vec::new();
    for piece in form.split("<input type=\"hidden\" ").skip(1) {
        let attr = |name: &str| {
            let key = format!("{name}=\"");
            let from = piece.find(&key).expect("the input has the attribute") + key.len();
            piece[from..from + piece[from..].find('"').unwrap()].to_string()
        };
        out.push((attr("name"), attr("value")));
    }
    out
}

/// Bins in the order the page lists them in its task tables.
fn bins_in_page_order(html: &str) -> Vec<String> {
    let start = html.find("<section class=\"run\"").unwrap_or(html.len());
    html[start..]
        .split("<td><code>")
        .skip(1)
        .map(|p| p[..p.find("</code>").unwrap()].to_string())
        .collect()
}

/// The text of the progress cell of `run` ("1", "2", "all") and `part`.
fn progress_cell(html: &str, run: &str, part: &str) -> String {
    let key = format!("data-run=\"{run}\" data-part=\"{part}\">");
    let at = html.find(&key).unwrap_or_else(|| panic!("no cell {key}")) + key.len();
    html[at..at + html[at..].find("</td>").unwrap()].to_string()
}

/// The text of the warnings box, empty when there is none.
fn warnings_box(html: &str) -> String {
    match html.find("<section class=\"warnings\"") {
        Some(at) => html[at..at + html[at..].find("</section>").unwrap()].to_string(),
        None => String::new(),
    }
}

async fn preview_and_save(app: &TestApp, sam: &Session, counters: &str, minutes: &str) -> Answer {
    let preview = post(
        app,
        sam,
        &format!("{}/preview", page(DAY)),
        &[
            ("csrf", &sam.csrf),
            ("counters", counters),
            ("minutes", minutes),
        ],
    )
    .await;
    assert_eq!(preview.status, 200, "{}", preview.text);
    let fields = hidden_fields(&preview.text, &format!("{}/save", page(DAY)));
    let fields: Vec<(&str, &str)> = fields
        .iter()
        .map(|(k, v)| (k.as_str(), v.as_str()))
        .collect();
    let saved = post(app, sam, &format!("{}/save", page(DAY)), &fields).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    preview
}

#[tokio::test]
async fn a_supervisor_builds_assigns_moves_and_watches_the_days_list() {
    let app = spawn_app().await;
    site(&app).await;
    let sam = app.sign_in("sam", PASSWORD).await;

    // The site page leads to the list; its address without a day is today's (UTC), or,
    // on a day the site does not work (it works Monday to Friday), the last day it worked.
    let site_page = get(&app, &sam, "/sites/T").await;
    assert!(site_page.text.contains("href=\"/sites/T/count-lists\""));
    let today = get(&app, &sam, "/sites/T/count-lists").await;
    assert_eq!(today.status, 303);
    let to = today.headers["location"].to_str().unwrap();
    let mut worked = chrono::Utc::now().date_naive();
    while matches!(
        worked.weekday(),
        chrono::Weekday::Sat | chrono::Weekday::Sun
    ) {
        worked = worked.pred_opt().unwrap();
    }
    assert_eq!(to, page(&worked.to_string()), "{to}");
    // A site that works every day but today: "today" is yesterday.
    let mut days = vec!["mon", "tue", "wed", "thu", "fri", "sat", "sun"];
    let off = chrono::Utc::now().date_naive();
    days.remove(off.weekday().num_days_from_monday() as usize);
    let (st, b) = app
        .put(
            "/api/v1/sites/T/planning/calendar",
            &json!({"working_weekdays": days}),
        )
        .await;
    assert_eq!(st, 200, "{b}");
    let moved = get(&app, &sam, "/sites/T/count-lists").await;
    assert_eq!(
        moved.headers["location"].to_str().unwrap(),
        page(&off.pred_opt().unwrap().to_string())
    );
    let (st, b) = app
        .put(
            "/api/v1/sites/T/planning/calendar",
            &json!({"working_weekdays": ["mon", "tue", "wed", "thu", "fri"]}),
        )
        .await;
    assert_eq!(st, 200, "{b}");
    let chosen = get(&app, &sam, &format!("/sites/T/count-lists?day={DAY}")).await;
    assert_eq!(chosen.headers["location"].to_str().unwrap(), page(DAY));

    let empty = get(&app, &sam, &page(DAY)).await;
    assert_eq!(empty.status, 200);
    assert!(empty.text.contains("No list is saved for 2026-03-03"));

    // The preview shows the list and stores nothing.
    let preview = post(
        &app,
        &sam,
        &format!("{}/preview", page(DAY)),
        &[("csrf", &sam.csrf), ("counters", "2"), ("minutes", "60")],
    )
    .await;
    assert_eq!(preview.status, 200, "{}", preview.text);
    assert!(preview.text.contains("Preview — not saved"));
    assert!(preview.text.contains("<dt>negative balance</dt><dd>1</dd>"));
    assert!(preview.text.contains("<dt>short pick</dt><dd>1</dd>"));
    assert!(preview.text.contains("<dt>Triggered</dt><dd>2</dd>"));
    assert_eq!(
        bins_in_page_order(&preview.text).len(),
        2,
        "{}",
        preview.text
    );
    assert_eq!(api_list(&app).await.0, 404, "a preview stores nothing");

    // Saving the preview stores that list.
    let fields = hidden_fields(&preview.text, &format!("{}/save", page(DAY)));
    let f: Vec<(&str, &str)> = fields
        .iter()
        .map(|(k, v)| (k.as_str(), v.as_str()))
        .collect();
    let saved = post(&app, &sam, &format!("{}/save", page(DAY)), &f).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    assert_eq!(saved.headers["location"].to_str().unwrap(), page(DAY));
    let (s, list) = api_list(&app).await;
    assert_eq!((s, list["stored"].as_bool()), (200, Some(true)), "{list}");
    let api_bins: Vec<String> = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["bin"].as_str().unwrap().to_string())
        .collect();
    let day = get(&app, &sam, &page(DAY)).await;
    assert_eq!(day.status, 200);
    assert_eq!(
        bins_in_page_order(&day.text),
        api_bins,
        "walking order, run by run"
    );
    assert!(day.text.contains("Saved list"));

    // Run 2 goes to cora; a planner is not a counter and cannot hold a run.
    let hold = format!("{}/runs/2/holder", page(DAY));
    let a = post(
        &app,
        &sam,
        &hold,
        &[("csrf", &sam.csrf), ("holder", "cora")],
    )
    .await;
    assert_eq!(a.status, 303, "{}", a.text);
    let a = post(&app, &sam, &hold, &[("csrf", &sam.csrf), ("holder", "pia")]).await;
    assert_eq!(a.status, 400);
    assert!(a.text.contains("pia is not a counter at T"), "{}", a.text);
    let (_, list) = api_list(&app).await;
    assert_eq!(list["runs"][1]["holder"], "cora");
    // A counter holds one run a day: the page says so.
    let a = post(
        &app,
        &sam,
        &format!("{}/runs/1/holder", page(DAY)),
        &[("csrf", &sam.csrf), ("holder", "cora")],
    )
    .await;
    assert_eq!(a.status, 409);
    assert!(a.text.contains("already holds another run"), "{}", a.text);

    // Move run 1's first task to run 2, cora's.
    let first = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["run"] == 1)
        .expect("run 1 has a task")
        .clone();
    let id = first["id"].as_i64().unwrap();
    let a = post(
        &app,
        &sam,
        &format!("{}/tasks/{id}/move", page(DAY)),
        &[("csrf", &sam.csrf), ("run", "2")],
    )
    .await;
    assert_eq!(a.status, 303, "{}", a.text);
    let (_, list) = api_list(&app).await;
    let moved = list["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["id"] == id)
        .unwrap();
    assert_eq!(moved["run"], 2);
    let a = post(
        &app,
        &sam,
        &format!("{}/tasks/{id}/move", page(DAY)),
        &[("csrf", &sam.csrf), ("run", "7")],
    )
    .await;
    assert_eq!(a.status, 422);
    assert!(a.text.contains("runs 1 to 2"), "{}", a.text);

    // Progress: nothing done; then the moved task is finished.
    let progress_url = format!("/api/v1/sites/T/count-lists/{DAY}/progress");
    let before = get(&app, &sam, &progress_url).await.json();
    assert_eq!(before["total"]["done"]["tasks"], 0, "{before}");
    let day = get(&app, &sam, &page(DAY)).await;
    assert!(
        day.text
            .contains(&format!("data-progress-url=\"{progress_url}\""))
    );
    assert_eq!(progress_cell(&day.text, "2", "done"), "0 · 0:00");
    let site = app
        .state
        .store
        .site(&SiteCode::parse("T").unwrap())
        .await
        .unwrap()
        .unwrap();
    app.state
        .store
        .finish_task(site.id, id, Timestamp::now())
        .await
        .unwrap();
    let after = get(&app, &sam, &progress_url).await.json();
    let est = moved["est_s"].as_i64().unwrap();
    assert_eq!(after["runs"][1]["done"]["tasks"], 1, "{after}");
    assert_eq!(after["runs"][1]["done"]["est_s"], est);
    assert_eq!(after["total"]["done"]["tasks"], 1);
    assert!(
        after["version"].as_i64() > before["version"].as_i64(),
        "the version moves so a page can tell"
    );
    let task = after["tasks"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["id"] == id)
        .unwrap();
    assert_eq!(task["stage"], "done");
    let day = get(&app, &sam, &page(DAY)).await;
    assert_eq!(
        progress_cell(&day.text, "2", "done"),
        format!("1 · {}:{:02}", est / 60, est % 60)
    );
    assert!(
        day.text.contains(&format!(
            "data-task=\"{id}\" data-task-run=\"2\" data-stage=\"done\">done"
        )),
        "the task's row says done"
    );
    // A done task cannot move, and the page no longer offers it.
    assert!(!day.text.contains(&format!("/tasks/{id}/move")));
    assert!(
        day.text.contains("Counting has started on this list"),
        "a started list is not offered for rebuilding"
    );

    // The CSV matches the JSON list row for row.
    let csv = get(
        &app,
        &sam,
        &format!("/api/v1/sites/T/count-lists/{DAY}?format=csv"),
    )
    .await;
    assert_eq!(csv.status, 200);
    assert!(
        csv.headers["content-type"]
            .to_str()
            .unwrap()
            .starts_with("text/csv")
    );
    assert!(
        csv.headers["content-disposition"]
            .to_str()
            .unwrap()
            .contains("count-list-T-2026-03-03.csv")
    );
    let (_, list) = api_list(&app).await;
    let mut reader = csv::Reader::from_reader(csv.text.as_bytes());
    let header: Vec<String> = reader
        .headers()
        .unwrap()
        .iter()
        .map(str::to_string)
        .collect();
    for column in [
        "run", "holder", "seq", "bin", "reason", "class", "status", "est_s", "est_min",
    ] {
        assert!(header.iter().any(|h| h == column), "{column} in {header:?}");
    }
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let rows: Vec<csv::StringRecord> = reader.records().map(Result::unwrap).collect();
    let tasks = list["tasks"].as_array().unwrap();
    assert_eq!(rows.len(), tasks.len());
    for (row, t) in rows.iter().zip(tasks) {
        let run = t["run"].as_u64().unwrap();
        let holder = list["runs"][(run - 1) as usize]["holder"].as_str().unwrap();
        assert_eq!(&row[col("run")], run.to_string());
        assert_eq!(&row[col("holder")], holder);
        assert_eq!(&row[col("seq")], t["seq"].to_string());
        assert_eq!(&row[col("bin")], t["bin"].as_str().unwrap());
        assert_eq!(&row[col("reason")], t["reason"].as_str().unwrap());
        assert_eq!(&row[col("class")], t["class"].as_str().unwrap_or(""));
        assert_eq!(&row[col("status")], t["status"].as_str().unwrap());
        let est_s = t["est_s"].as_i64().unwrap();
        assert_eq!(&row[col("est_s")], est_s.to_string());
        // Minutes with one decimal: 150 s is 2.5 min.
        let tenths = (est_s * 10 + 30) / 60;
        assert_eq!(
            &row[col("est_min")],
            format!("{}.{}", tenths / 10, tenths % 10)
        );
    }
    assert!(rows.iter().any(|r| &r[col("holder")] == "cora"));

    // The labels page carries every bin's label, one sheet per run, ready to print.
    let labels = get(&app, &sam, &format!("{}/labels", page(DAY))).await;
    assert_eq!(labels.status, 200, "{}", labels.text);
    let mut runs_with_tasks: Vec<u64> = tasks.iter().map(|t| t["run"].as_u64().unwrap()).collect();
    runs_with_tasks.dedup();
    assert_eq!(
        labels.text.matches("<svg").count(),
        runs_with_tasks.len(),
        "one sheet per run with tasks"
    );
    for t in tasks {
        let label = cairn_scan::BinLabel::encode(
            "T",
            t["zone"].as_str().unwrap(),
            &format!("{:02}", t["aisle"].as_u64().unwrap()),
            &format!("{:02}", t["bay"].as_u64().unwrap()),
            &t["level"].to_string(),
        )
        .unwrap();
        assert!(
            labels.text.contains(&format!(">{}</text>", label.text())),
            "the label {} of {} is on the sheet",
            label.text(),
            t["bin"]
        );
    }
    let one = get(&app, &sam, &format!("{}/labels?run=2", page(DAY))).await;
    assert_eq!(one.text.matches("<svg").count(), 1);
    let none = get(&app, &sam, &format!("{}/labels?run=1", page(DAY))).await;
    assert_eq!(
        none.text.matches("<svg").count(),
        0,
        "run 1 has no task left"
    );
    assert!(none.text.contains("no labels to print"));
    let css = app
        .send(
            Method::GET,
            "/static/cairn.css",
            &Auth::Anonymous,
            Body::Empty,
        )
        .await;
    assert!(css.text.contains("@media print") && css.text.contains("@page labels"));
}

#[tokio::test]
async fn a_changed_list_is_not_saved_over_the_preview_the_supervisor_saw() {
    let app = spawn_app().await;
    site(&app).await;
    let sam = app.sign_in("sam", PASSWORD).await;
    let preview = post(
        &app,
        &sam,
        &format!("{}/preview", page(DAY)),
        &[("csrf", &sam.csrf), ("counters", "1"), ("minutes", "60")],
    )
    .await;
    let fields = hidden_fields(&preview.text, &format!("{}/save", page(DAY)));
    // A new short pick arrives between the preview and the save.
    let (s, b) = app
        .post(
            "/api/v1/sites/T/short-picks",
            &json!([{"id": "sp2", "bin": "A-01-01-1", "sku": "S1", "short_qty": 1,
                     "reported_at": "2026-03-02T11:00:00Z"}]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let f: Vec<(&str, &str)> = fields
        .iter()
        .map(|(k, v)| (k.as_str(), v.as_str()))
        .collect();
    let a = post(&app, &sam, &format!("{}/save", page(DAY)), &f).await;
    assert_eq!(a.status, 409, "{}", a.text);
    assert!(a.text.contains("differ from the preview"), "{}", a.text);
    assert!(
        a.text.contains("Save this list"),
        "the new preview is offered"
    );
    assert_eq!(api_list(&app).await.0, 404, "nothing was stored");
    // Saving the new preview works.
    let fields = hidden_fields(&a.text, &format!("{}/save", page(DAY)));
    let f: Vec<(&str, &str)> = fields
        .iter()
        .map(|(k, v)| (k.as_str(), v.as_str()))
        .collect();
    let a = post(&app, &sam, &format!("{}/save", page(DAY)), &f).await;
    assert_eq!(a.status, 303, "{}", a.text);
    assert_eq!(api_list(&app).await.0, 200);
}

#[tokio::test]
async fn a_triggered_count_that_does_not_fit_is_a_warning_on_the_page() {
    let app = spawn_app().await;
    site(&app).await;
    let sam = app.sign_in("sam", PASSWORD).await;
    // Three minutes hold the first triggered bin (2:30) but not the second.
    let preview = preview_and_save(&app, &sam, "1", "3").await;
    let warned = warnings_box(&preview.text);
    assert!(warned.contains("Needs your attention"), "{}", preview.text);
    assert!(
        warned.contains("A-01-02-1") && warned.contains("short_pick"),
        "{warned}"
    );
    assert_eq!(bins_in_page_order(&preview.text), ["A-01-01-1"]);
    // The saved list keeps saying so.
    let day = get(&app, &sam, &page(DAY)).await;
    let warned = warnings_box(&day.text);
    assert!(warned.contains("A-01-02-1"), "{}", day.text);
    // With room for everything, triggered bins still lead their run, before due ones.
    let (s, b) = app
        .post(
            "/api/v1/sites/T/bins",
            &json!([{"zone": "A", "aisle": 1, "bay": 3, "level": 1, "side": "L"}]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let (s, b) = app
        .post(
            "/api/v1/sites/T/movements",
            &json!([
                movement(
                    "m3",
                    "A-01-03-1",
                    "S1",
                    5,
                    "receipt",
                    "2026-03-01T08:00:00Z"
                ),
                movement("m4", "A-01-03-1", "S1", -1, "pick", "2026-03-01T09:00:00Z"),
            ]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let full = post(
        &app,
        &sam,
        &format!("{}/preview", page("2026-03-05")),
        &[
            ("csrf", &sam.csrf),
            ("counters", "1"),
            ("minutes", "60"),
            ("fill", "capacity"),
        ],
    )
    .await;
    let reasons: Vec<&str> = full
        .text
        .split("<td class=\"n\">")
        .filter_map(|p| p.split("<td>").nth(3))
        .map(|r| r.split(['<', '\n']).next().unwrap())
        .collect();
    assert_eq!(reasons, ["negative balance", "short pick", "due"]);
    assert_eq!(warnings_box(&full.text), "");
    assert_eq!(full.text.matches("<tr class=\"triggered\">").count(), 2);
    // With room for both, there is nothing to warn about.
    let roomy = post(
        &app,
        &sam,
        &format!("{}/preview", page("2026-03-04")),
        &[("csrf", &sam.csrf), ("counters", "1"), ("minutes", "60")],
    )
    .await;
    assert_eq!(warnings_box(&roomy.text), "");
}

#[tokio::test]
async fn forms_need_the_token_and_a_list_keeper_and_counters_never_see_the_page() {
    let app = spawn_app().await;
    site(&app).await;
    let sam = app.sign_in("sam", PASSWORD).await;
    let preview_url = format!("{}/preview", page(DAY));

    // No token, or a wrong one: refused, nothing built.
    for token in [None, Some("not-the-token")] {
        let mut fields = vec![("counters", "2"), ("minutes", "60")];
        if let Some(t) = token {
            fields.push(("csrf", t));
        }
        let a = post(&app, &sam, &preview_url, &fields).await;
        assert_eq!(a.status, 400, "{}", a.text);
        assert!(a.text.contains("security token"), "{}", a.text);
    }
    preview_and_save(&app, &sam, "2", "60").await;
    let (_, list) = api_list(&app).await;
    let task = list["tasks"][0]["id"].as_i64().unwrap();
    let no_token = post(
        &app,
        &sam,
        &format!("{}/tasks/{task}/move", page(DAY)),
        &[("run", "2")],
    )
    .await;
    assert_eq!(no_token.status, 400);

    // A planner reads the page but is offered no form and may post none.
    let pia = app.sign_in("pia", PASSWORD).await;
    let read = get(&app, &pia, &page(DAY)).await;
    assert_eq!(read.status, 200);
    assert!(!read.text.contains("/preview\"") && !read.text.contains("/move\""));
    let posts = [
        (
            preview_url.clone(),
            vec![("counters", "2"), ("minutes", "60")],
        ),
        (
            format!("{}/save", page(DAY)),
            vec![("counters", "2"), ("minutes", "60")],
        ),
        (
            format!("{}/runs/1/holder", page(DAY)),
            vec![("holder", "dan")],
        ),
        (
            format!("{}/tasks/{task}/move", page(DAY)),
            vec![("run", "2")],
        ),
    ];
    for (url, fields) in &posts {
        let mut f = fields.clone();
        f.push(("csrf", &pia.csrf));
        let a = post(&app, &pia, url, &f).await;
        assert_eq!(a.status, 403, "planner posting {url}: {}", a.text);
    }

    // A counter can neither read these pages nor post their forms.
    let cora = app.sign_in("cora", PASSWORD).await;
    for url in [
        page(DAY),
        "/sites/T/count-lists".to_string(),
        format!("{}/labels", page(DAY)),
        format!("/api/v1/sites/T/count-lists/{DAY}/progress"),
    ] {
        let a = get(&app, &cora, &url).await;
        assert_eq!(a.status, 403, "counter reading {url}");
    }
    for (url, fields) in &posts {
        let mut f = fields.clone();
        f.push(("csrf", &cora.csrf));
        let a = post(&app, &cora, url, &f).await;
        assert_eq!(a.status, 403, "counter posting {url}");
    }
    let (_, after) = api_list(&app).await;
    assert_eq!(after["version"], list["version"], "nobody changed the list");
}
