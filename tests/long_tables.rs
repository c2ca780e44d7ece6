//! The long tables (the buffer of every item, record error per item) sort,
//! filter and page on the server with the view in the URL, refuse a bad
//! parameter by name, and their CSV keeps every row the filter keeps. The site
//! is a small demo with a few weeks of counting history, served over HTTP.

mod common;

use cairn::accounts::Role;
use cairn::demo::{self, DemoSpec};
use chrono::NaiveDate;
use common::{Answer, Auth, Body, TestApp, spawn_app, unescape};
use reqwest::Method;
use serde_json::Value;
use std::cmp::Ordering;

const PASSWORD: &str = "test-only-password";
/// The last day of the small site's history.
const END: &str = "2026-06-30";

/// Starts a server on a small demo site (60 items, 4 weeks counted) with a
/// planner and a counter signed in.
async fn site() -> (TestApp, Auth, Auth) {
    let app = spawn_app().await;
    let spec = DemoSpec {
        items: 60,
        bins: 150,
        days: 120,
        end: NaiveDate::parse_from_str(END, "%Y-%m-%d").unwrap(),
        history_weeks: 4,
        ..DemoSpec::standard(5)
    };
    demo::generate(app.state.store.as_ref(), &spec, false)
        .await
        .expect("the small demo with history generates");
    app.add_user("tplanner", "KLN", &[Role::Planner], PASSWORD, None)
        .await;
    app.add_user("tcounter", "KLN", &[Role::Counter], PASSWORD, None)
        .await;
    let planner = Auth::Session(app.sign_in("tplanner", PASSWORD).await);
    let counter = Auth::Session(app.sign_in("tcounter", PASSWORD).await);
    (app, planner, counter)
}

/// Sends a GET; a page's text comes with its HTML escapes undone.
async fn get(app: &TestApp, who: &Auth, path: &str) -> Answer {
    let mut a = app.send(Method::GET, path, who, Body::Empty).await;
    let html = a
        .headers
        .get("content-type")
        .is_some_and(|v| v.to_str().unwrap_or_default().starts_with("text/html"));
    if html {
        a.text = unescape(&a.text);
    }
    a
}

async fn ok(app: &TestApp, who: &Auth, path: &str) -> String {
    let a = get(app, who, path).await;
    assert_eq!(a.status, 200, "{path}: {}", a.text);
    a.text
}

/// Reads the SKUs a page lists, in order, from the links of its first column.
fn listed(html: &str, prefix: &str) -> Vec<String> {
    html.split(&format!("<td><a href=\"{prefix}"))
        .skip(1)
        .map(|rest| {
            rest.split(['?', '"'])
                .next()
                .expect("a link ends")
                .to_string()
        })
        .collect()
}

/// Orders JSON rows as the page promises: `key` with missing values last in
/// both directions, then the SKU ascending.
fn expected(rows: &[Value], key: impl Fn(&Value) -> Option<f64>, desc: bool) -> Vec<String> {
    let mut rows: Vec<(Option<f64>, String)> = rows
        .iter()
        .map(|r| (key(r), r["sku"].as_str().unwrap().to_string()))
        .collect();
    rows.sort_by(|(ka, sa), (kb, sb)| {
        let by_key = match (ka, kb) {
            (None, None) => Ordering::Equal,
            (None, _) => Ordering::Greater,
            (_, None) => Ordering::Less,
            (Some(a), Some(b)) if desc => b.total_cmp(a),
            (Some(a), Some(b)) => a.total_cmp(b),
        };
        by_key.then_with(|| sa.cmp(sb))
    });
    rows.into_iter().map(|(_, s)| s).collect()
}

fn safety_stock(r: &Value) -> Option<f64> {
    r["buffer"]["safety_stock"].as_f64()
}

#[tokio::test]
async fn the_buffer_and_item_tables_sort_filter_and_page_on_the_server() {
    let (app, planner, counter) = site().await;
    let all: Value = serde_json::from_str(
        &ok(
            &app,
            &planner,
            &format!("/api/v1/sites/KLN/buffer?until={END}"),
        )
        .await,
    )
    .unwrap();
    let all = all.as_array().unwrap().clone();
    assert_eq!(all.len(), 60);
    let distinct: std::collections::BTreeSet<u64> = all
        .iter()
        .filter_map(|r| safety_stock(r).map(f64::to_bits))
        .collect();
    assert!(distinct.len() > 10, "the demo gives safety stocks to sort");

    // Sort: the first ten by safety stock, largest first, ties by SKU.
    let page = ok(
        &app,
        &planner,
        &format!("/sites/KLN/buffer?until={END}&sort=safety_stock&dir=desc&per=10"),
    )
    .await;
    let want = expected(&all, safety_stock, true);
    assert_eq!(listed(&page, "/sites/KLN/buffer/"), want[..10]);
    assert!(page.contains("rows 1–10 of 60"), "{page}");
    assert!(page.contains(r#"aria-sort="descending""#));
    assert!(
        page.contains(&format!(
            "href=\"/sites/KLN/buffer?until={END}&sort=safety_stock&dir=asc&per=10\""
        )),
        "the sorted column header turns the order round and keeps the other parameters: {}",
        &page[page.find("<thead>").unwrap()..page.find("</thead>").unwrap()]
    );
    // The same order ascending: missing values still last.
    let page = ok(
        &app,
        &planner,
        &format!("/sites/KLN/buffer?until={END}&sort=safety_stock&dir=asc&per=500"),
    )
    .await;
    assert_eq!(
        listed(&page, "/sites/KLN/buffer/"),
        expected(&all, safety_stock, false)
    );

    // Filter: class, group and text together.
    let first = &all[0];
    let group = first["group"].as_str().unwrap();
    let class = all
        .iter()
        .find(|r| r["group"] == first["group"] && r["class"].is_string())
        .map(|r| r["class"].as_str().unwrap().to_string())
        .expect("the group has a classified item");
    let by_filter = |q: &str| -> Vec<String> {
        let q = q.to_lowercase();
        let mut v: Vec<String> = all
            .iter()
            .filter(|r| r["group"] == group && r["class"] == class.as_str())
            .filter(|r| {
                r["sku"].as_str().unwrap().to_lowercase().contains(&q)
                    || r["description"]
                        .as_str()
                        .unwrap()
                        .to_lowercase()
                        .contains(&q)
            })
            .map(|r| r["sku"].as_str().unwrap().to_string())
            .collect();
        v.sort();
        v
    };
    let enc = |s: &str| serde_urlencoded::to_string([("g", s)]).unwrap()[2..].to_string();
    let word = first["description"]
        .as_str()
        .unwrap()
        .split([' ', ','])
        .next()
        .unwrap()
        .to_string();
    for q in ["", word.as_str()] {
        let want = by_filter(q);
        assert!(!want.is_empty(), "the filter keeps something for '{q}'");
        let page = ok(
            &app,
            &planner,
            &format!(
                "/sites/KLN/buffer?until={END}&class={}&group={}&q={}&per=500",
                class.to_lowercase(),
                enc(group),
                enc(&q.to_uppercase())
            ),
        )
        .await;
        assert_eq!(listed(&page, "/sites/KLN/buffer/"), want, "q '{q}'");
        assert!(page.contains(&format!("of {}", want.len())));
    }

    // Paging: 60 rows at 25 a page are pages of 25, 25 and 10.
    let at = |n: u32| format!("/sites/KLN/buffer?until={END}&per=25&page={n}");
    let one = ok(&app, &planner, &at(1)).await;
    assert!(one.contains("rows 1–25 of 60") && !one.contains(r#"rel="prev""#));
    assert!(one.contains(&format!(
        r#"rel="next" href="/sites/KLN/buffer?until={END}&sort=sku&dir=asc&per=25&page=2""#
    )));
    let three = ok(&app, &planner, &at(3)).await;
    let mut skus: Vec<String> = all
        .iter()
        .map(|r| r["sku"].as_str().unwrap().to_string())
        .collect();
    skus.sort();
    assert_eq!(listed(&three, "/sites/KLN/buffer/"), skus[50..]);
    assert!(three.contains("rows 51–60 of 60") && !three.contains(r#"rel="next""#));
    assert!(three.contains(r#"rel="prev""#));
    let past = get(&app, &planner, &at(4)).await;
    assert_eq!(past.status, 400);
    assert!(
        past.text
            .contains("page: 4 is past the last page (3) of 60 rows at 25 a page"),
        "{}",
        past.text
    );

    // A bad parameter is refused with its name, on the page and the API.
    for (path, message) in [
        (
            "/sites/KLN/buffer?sort=colour",
            "sort: 'colour' is not one of sku, description",
        ),
        ("/sites/KLN/buffer?dir=up", "dir: 'up' is not asc or desc"),
        (
            "/sites/KLN/buffer?per=0",
            "per: '0' is not a whole number from 1 to 500",
        ),
        ("/sites/KLN/buffer?class=Z", "class: 'Z' is not A, B or C"),
        (
            "/sites/KLN/buffer?since=2026-01-01",
            "since: not a parameter of this table",
        ),
        (
            "/sites/KLN/accuracy/items?sort=safety_stock",
            "sort: 'safety_stock' is not one of sku",
        ),
        (
            "/api/v1/sites/KLN/buffer?page=2",
            "page: the API and its CSV answer every row",
        ),
        ("/api/v1/sites/KLN/buffer?colour=red", "colour"),
    ] {
        let a = get(&app, &planner, path).await;
        assert_eq!(a.status, 400, "{path}");
        assert!(a.text.contains(message), "{path}: {}", a.text);
    }

    // The CSV keeps every row, whatever page the screen was on; a filter applies.
    let csv = ok(
        &app,
        &planner,
        &format!("/api/v1/sites/KLN/buffer?format=csv&until={END}"),
    )
    .await;
    assert_eq!(csv.lines().count(), 1 + 60);
    let csv = ok(
        &app,
        &planner,
        &format!("/api/v1/sites/KLN/buffer?format=csv&until={END}&class={class}&group={}&sort=safety_stock&dir=desc", enc(group)),
    )
    .await;
    assert_eq!(csv.lines().count(), 1 + by_filter("").len());

    // Record error per item: the same rules over the items counted.
    let items: Value =
        serde_json::from_str(&ok(&app, &planner, "/api/v1/sites/KLN/accuracy/items").await)
            .unwrap();
    let items = items.as_array().unwrap().clone();
    assert!(items.len() > 20, "{} items counted", items.len());
    let counts = |r: &Value| r["counts"].as_f64();
    let page = ok(
        &app,
        &planner,
        "/sites/KLN/accuracy/items?sort=counts&dir=desc&per=500",
    )
    .await;
    assert_eq!(
        listed(&page, "/sites/KLN/accuracy/items/"),
        expected(&items, counts, true)
    );
    assert!(page.contains(&format!("rows 1–{0} of {0}", items.len())));
    let csv = ok(
        &app,
        &planner,
        "/api/v1/sites/KLN/accuracy/items?format=csv",
    )
    .await;
    assert_eq!(csv.lines().count(), 1 + items.len());

    // Roles as before: a counter never sees these tables.
    for path in ["/sites/KLN/buffer?page=2", "/sites/KLN/accuracy/items"] {
        assert_eq!(get(&app, &counter, path).await.status, 403, "{path}");
    }
}
