//! Reading master data back over the API: zones, bins, items with their packs, lots,
//! planner inputs and the count policy, paged by key, filtered, behind the book readers'
//! rule, with ETags; and the count-results filters. Every read-back row is compared
//! with what was posted, and posted back unchanged.

mod common;

use cairn::accounts::Role;
use cairn::time::Timestamp;
use common::{
    Auth, Body, PASSWORD, PhoneSite, ROOT_USER, TestApp, phone_site, review_site, spawn_app,
};
use reqwest::Method;
use serde_json::{Value, json};

/// Builds a GTIN-14 from 13 leading digits with its check digit by the GS1 General
/// Specifications' mod-10 rule (§7.9: weights 3 and 1 from the right, check = what takes
/// the sum to a multiple of ten), worked here independently of the scanning crate.
fn gtin14(body: &str) -> String {
    assert_eq!(body.len(), 13);
    let sum: u32 = body
        .chars()
        .rev()
        .enumerate()
        .map(|(i, c)| c.to_digit(10).unwrap() * if i % 2 == 0 { 3 } else { 1 })
        .sum();
    format!("{body}{}", (10 - sum % 10) % 10)
}

/// Reads a page as root (admin) and returns its body; it must answer 200.
async fn read(app: &TestApp, path: &str) -> Value {
    let (s, b) = app.get(&format!("/api/v1/sites/T/{path}")).await;
    assert_eq!(s, 200, "GET {path}: {b}");
    b
}

/// Walks every page of a list, `limit` rows at a time, and returns the rows in order.
async fn walk(app: &TestApp, list: &str, query: &str, limit: usize) -> Vec<Value> {
    let mut out = Vec::new();
    let mut after: Option<String> = None;
    for _ in 0..100 {
        let cursor = after
            .as_deref()
            .map_or(String::new(), |a| format!("&after={a}"));
        let page = read(app, &format!("{list}?limit={limit}{query}{cursor}")).await;
        let rows = page[list.replace('-', "_")].as_array().unwrap().clone();
        assert!(rows.len() <= limit, "{page}");
        out.extend(rows);
        match page["next"].as_str() {
            Some(n) => after = Some(n.to_string()),
            None => return out,
        }
    }
    panic!("{list}: more than 100 pages");
}

/// Sends a GET as root with extra headers and returns the whole answer.
async fn get_with(app: &TestApp, path: &str, headers: &[(&str, &str)]) -> reqwest::Response {
    let mut r = app.with_token(
        app.client
            .get(format!("{}/api/v1/sites/T/{path}", app.base)),
    );
    for (k, v) in headers {
        r = r.header(*k, *v);
    }
    r.send().await.expect("the server answers")
}

fn etag_of(r: &reqwest::Response) -> String {
    r.headers()["etag"].to_str().unwrap().to_string()
}

#[tokio::test]
async fn bins_read_back_are_the_rows_posted_and_post_back_unchanged() {
    let app = spawn_app().await;
    app.small_site().await;
    app.post_ok(
        "/api/v1/sites/T/bins",
        &json!([
            {"code": "B-STAGE", "zone": "B", "aisle": 0, "bay": 0, "level": 0},
            {"zone": "B", "aisle": 2, "bay": 10, "level": 3, "side": "l", "walk_seq": 42}
        ]),
    )
    .await;
    let page = read(&app, "bins").await;
    // By code, byte by byte; the code of a row sent without one is built from its place,
    // and the side is written as stored (L, R or empty).
    assert_eq!(
        page,
        json!({"bins": [
            {"code": "A-01-01-1", "zone": "A", "aisle": 1, "bay": 1, "level": 1, "side": "L", "walk_seq": 0},
            {"code": "A-01-02-1", "zone": "A", "aisle": 1, "bay": 2, "level": 1, "side": "R", "walk_seq": 0},
            {"code": "B-02-10-3", "zone": "B", "aisle": 2, "bay": 10, "level": 3, "side": "L", "walk_seq": 42},
            {"code": "B-STAGE", "zone": "B", "aisle": 0, "bay": 0, "level": 0, "side": "", "walk_seq": 0}
        ], "next": null})
    );
    let before = etag_of(&get_with(&app, "bins", &[]).await);
    let written = app.post_ok("/api/v1/sites/T/bins", &page["bins"]).await;
    assert_eq!(written["written"], 4);
    assert_eq!(read(&app, "bins").await, page);
    assert_eq!(etag_of(&get_with(&app, "bins", &[]).await), before);
}

#[tokio::test]
async fn items_read_back_with_their_packs_equal_what_was_posted_and_post_back_unchanged() {
    let app = spawn_app().await;
    app.small_site().await;
    let (each, case, inner) = (
        gtin14("0501234567001"),
        gtin14("1501234567001"),
        gtin14("2501234567001"),
    );
    let hb10 = json!({
        "sku": "HB-10", "description": "Hex bolt M10", "base_unit": "each",
        "unit_cost_minor": 31, "lot_tracked": false, "group": "fasteners",
        "packs": [
            {"gtin": case, "level": "case", "units": 50},
            {"gtin": each, "level": "each", "units": 1}
        ]
    });
    app.post_ok("/api/v1/sites/T/items", &json!([hb10])).await;
    // A pack posted on its own belongs to its item the same way.
    app.post_ok(
        "/api/v1/sites/T/packs",
        &json!([{"sku": "HB-10", "gtin": inner, "level": "inner", "units": 10}]),
    )
    .await;
    let page = read(&app, "items").await;
    assert_eq!(page["next"], Value::Null);
    let items = page["items"].as_array().unwrap();
    let skus: Vec<&str> = items.iter().map(|i| i["sku"].as_str().unwrap()).collect();
    assert_eq!(skus, ["HB-10", "L1", "S1"], "by SKU, byte by byte");
    // What was posted, packs fewest units first, and the read-only class (none yet).
    assert_eq!(
        items[0],
        json!({
            "sku": "HB-10", "description": "Hex bolt M10", "base_unit": "each",
            "unit_cost_minor": 31, "lot_tracked": false, "group": "fasteners",
            "packs": [
                {"gtin": each, "level": "each", "units": 1},
                {"gtin": inner, "level": "inner", "units": 10},
                {"gtin": case, "level": "case", "units": 50}
            ],
            "class": null
        })
    );
    assert_eq!(
        items[1],
        json!({"sku": "L1", "description": "Sealant", "base_unit": "each", "unit_cost_minor": 640,
               "lot_tracked": true, "group": "", "packs": [], "class": null})
    );
    // Edited and sent back: the change is stored, nothing else moves.
    let mut edited = page["items"].clone();
    edited[0]["description"] = json!("Hex bolt M10 zinc");
    edited[0]["packs"][2]["units"] = json!(40);
    let written = app.post_ok("/api/v1/sites/T/items", &edited).await;
    assert_eq!(written["written"], 3);
    let again = read(&app, "items").await;
    let mut expected = edited.clone();
    expected[0]["packs"] = json!([
        {"gtin": each, "level": "each", "units": 1},
        {"gtin": inner, "level": "inner", "units": 10},
        {"gtin": case, "level": "case", "units": 40}
    ]);
    assert_eq!(again["items"], expected);
}

#[tokio::test]
async fn an_item_row_whose_packs_break_a_rule_is_refused_whole_naming_the_pack() {
    let app = spawn_app().await;
    app.small_site().await;
    let owned = gtin14("0501234567002");
    app.post_ok(
        "/api/v1/sites/T/packs",
        &json!([{"sku": "S1", "gtin": owned, "level": "each", "units": 1}]),
    )
    .await;
    let before = read(&app, "items").await;
    let fresh = gtin14("0501234567003");
    let cases = [
        // A GTIN that belongs to another SKU.
        (
            json!([{"sku": "N1", "description": "Nut", "base_unit": "each", "unit_cost_minor": 2,
                    "packs": [{"gtin": fresh, "level": "each", "units": 1},
                              {"gtin": owned, "level": "case", "units": 6}]}]),
            0,
            "packs[1].gtin",
        ),
        // The same GTIN in two rows of one batch.
        (
            json!([
                {"sku": "N1", "description": "Nut", "base_unit": "each", "unit_cost_minor": 2,
                 "packs": [{"gtin": fresh, "level": "each", "units": 1}]},
                {"sku": "N2", "description": "Nut", "base_unit": "each", "unit_cost_minor": 2,
                 "packs": [{"gtin": fresh, "level": "each", "units": 1}]}
            ]),
            1,
            "packs[0].gtin",
        ),
        // A pack that breaks the pack rule: an each holds one unit.
        (
            json!([{"sku": "N1", "description": "Nut", "base_unit": "each", "unit_cost_minor": 2,
                    "packs": [{"gtin": fresh, "level": "each", "units": 6}]}]),
            0,
            "packs[0].units",
        ),
        // A check digit that is wrong.
        (
            json!([{"sku": "N1", "description": "Nut", "base_unit": "each", "unit_cost_minor": 2,
                    "packs": [{"gtin": "05012345670031", "level": "each", "units": 1}]}]),
            0,
            "packs[0].gtin",
        ),
    ];
    for (body, row, field) in cases {
        let (s, b) = app.post("/api/v1/sites/T/items", &body).await;
        assert_eq!(s, 422, "{b}");
        let errors = b["rows"].as_array().unwrap();
        assert!(
            errors
                .iter()
                .any(|e| e["index"] == row && e["field"] == field),
            "{field} of row {row}: {b}"
        );
    }
    assert_eq!(read(&app, "items").await, before, "nothing was written");
}

#[tokio::test]
async fn zones_read_back_in_code_order_with_their_walk_place_and_bins() {
    let app = spawn_app().await;
    app.small_site().await;
    app.post_ok(
        "/api/v1/sites/T/bins",
        &json!([
            {"zone": "C", "aisle": 1, "bay": 1, "level": 1},
            {"zone": "B", "aisle": 1, "bay": 1, "level": 1},
            {"zone": "B", "aisle": 1, "bay": 2, "level": 1}
        ]),
    )
    .await;
    // Zones are made by the bins that name them, numbered in the order first named.
    assert_eq!(
        read(&app, "zones").await,
        json!({"zones": [
            {"code": "A", "walk_seq": 1, "bins": 2},
            {"code": "B", "walk_seq": 3, "bins": 2},
            {"code": "C", "walk_seq": 2, "bins": 1}
        ], "next": null})
    );
    let walked = walk(&app, "zones", "", 1).await;
    let codes: Vec<&str> = walked.iter().map(|z| z["code"].as_str().unwrap()).collect();
    assert_eq!(codes, ["A", "B", "C"]);
}

#[tokio::test]
async fn packs_read_back_equal_what_was_posted_paged_over_sku_and_gtin_and_post_back_unchanged() {
    let app = spawn_app().await;
    app.small_site().await;
    let (s, before) = app.get("/api/v1/sites/T/packs").await;
    assert_eq!(s, 200, "{before}");
    app.post_ok(
        "/api/v1/sites/T/items",
        &json!([{"sku": "HB-10", "description": "Hex bolt M10", "base_unit": "each",
                 "unit_cost_minor": 31, "lot_tracked": false}]),
    )
    .await;
    let (each, case, inner) = (
        gtin14("0501234567001"),
        gtin14("1501234567001"),
        gtin14("2501234567001"),
    );
    let posted = json!([
        {"sku": "HB-10", "gtin": inner, "level": "inner", "units": 10},
        {"sku": "HB-10", "gtin": case, "level": "case", "units": 50},
        {"sku": "HB-10", "gtin": each, "level": "each", "units": 1}
    ]);
    let written = app.post_ok("/api/v1/sites/T/packs", &posted).await;
    assert_eq!(written["written"], 3);
    // HB-10's packs in GTIN order, byte by byte, then those small_site gave S1.
    let mine = json!([posted[2], posted[1], posted[0]]);
    let all = walk(&app, "packs", "", 1000).await;
    assert_eq!(all.len(), before["packs"].as_array().unwrap().len() + 3);
    assert_eq!(Value::Array(all[..3].to_vec()), mine, "{all:?}");
    let keys: Vec<(String, String)> = all
        .iter()
        .map(|p| (p["sku"].to_string(), p["gtin"].to_string()))
        .collect();
    let mut sorted = keys.clone();
    sorted.sort();
    assert_eq!(keys, sorted, "by SKU, then GTIN");
    // Paging at 1, 2 (a page of exactly the rest is the last) and 3 gives the same rows.
    for limit in [1, 2, 3] {
        assert_eq!(
            walk(&app, "packs", "&sku=HB-10", limit).await,
            mine.as_array().unwrap().clone()
        );
    }
    let (s, page) = app.get("/api/v1/sites/T/packs?sku=HB-10&limit=3").await;
    assert_eq!(s, 200, "{page}");
    assert_eq!(
        page["next"],
        Value::Null,
        "a page of exactly limit rows is the last"
    );
    // The packs the items list shows are the same rows.
    let item = read(&app, "items?sku=HB-10").await;
    assert_eq!(item["items"][0]["packs"].as_array().unwrap().len(), 3);
    // Posted back as read, nothing changes.
    let written = app.post_ok("/api/v1/sites/T/packs", &page["packs"]).await;
    assert_eq!(written["written"], 3);
    assert_eq!(
        read(&app, "packs?sku=HB-10").await,
        json!({"packs": mine, "next": null})
    );
}

#[tokio::test]
async fn lots_read_back_as_the_movements_named_them_paged_over_their_two_part_key() {
    let app = spawn_app().await;
    app.small_site().await;
    assert_eq!(
        read(&app, "lots").await,
        json!({"lots": [], "next": null}),
        "no movement yet, no lot"
    );
    app.post_ok(
        "/api/v1/sites/T/items",
        &json!([{"sku": "K2", "description": "Glue", "base_unit": "each",
                 "unit_cost_minor": 90, "lot_tracked": true}]),
    )
    .await;
    let mv = |id: &str, sku: &str, lot: &str, expiry: Option<&str>| {
        json!({"id": id, "bin": "A-01-01-1", "sku": sku, "lot": lot, "expiry": expiry,
               "qty": 5, "kind": "receipt", "event_at": "2026-03-02T08:00:00Z"})
    };
    app.post_ok(
        "/api/v1/sites/T/movements",
        &json!([
            mv("m1", "L1", "LOT-7", Some("2027-05-31")),
            mv("m2", "L1", "LOT-10", None),
            mv("m3", "K2", "G-1", Some("2026-12-01")),
            mv("m4", "S1", "", None)
        ]),
    )
    .await;
    let all = json!([
        {"sku": "K2", "lot": "G-1", "expiry": "2026-12-01"},
        {"sku": "L1", "lot": "LOT-10", "expiry": null},
        {"sku": "L1", "lot": "LOT-7", "expiry": "2027-05-31"}
    ]);
    assert_eq!(read(&app, "lots").await, json!({"lots": all, "next": null}));
    assert_eq!(Value::Array(walk(&app, "lots", "", 1).await), all);
    assert_eq!(
        Value::Array(walk(&app, "lots", "&sku=L1", 1).await),
        json!([all[1], all[2]])
    );
}

#[tokio::test]
async fn a_page_of_exactly_limit_rows_is_the_last_and_one_more_row_makes_a_next_page() {
    let app = spawn_app().await;
    app.small_site().await;
    let items: Vec<Value> = (1..=5)
        .map(|n| {
            json!({"sku": format!("P{n:02}"), "description": "Part",
                        "base_unit": "each", "unit_cost_minor": 1})
        })
        .collect();
    app.post_ok("/api/v1/sites/T/items", &Value::Array(items))
        .await;
    let skus = |page: &Value| -> Vec<String> {
        page["items"]
            .as_array()
            .unwrap()
            .iter()
            .map(|i| i["sku"].as_str().unwrap().to_string())
            .collect()
    };
    let exact = read(&app, "items?sku_prefix=P&limit=5").await;
    assert_eq!(skus(&exact), ["P01", "P02", "P03", "P04", "P05"]);
    assert_eq!(
        exact["next"],
        Value::Null,
        "exactly limit rows: no next page"
    );
    let wide = read(&app, "items?sku_prefix=P&limit=6").await;
    assert_eq!((skus(&wide).len(), &wide["next"]), (5, &Value::Null));
    let first = read(&app, "items?sku_prefix=P&limit=4").await;
    assert_eq!(skus(&first), ["P01", "P02", "P03", "P04"]);
    let next = first["next"]
        .as_str()
        .expect("a fifth row makes a next page");
    let second = read(&app, &format!("items?sku_prefix=P&limit=4&after={next}")).await;
    assert_eq!(skus(&second), ["P05"]);
    assert_eq!(second["next"], Value::Null);
    let none = read(&app, "items?sku_prefix=Q").await;
    assert_eq!(none, json!({"items": [], "next": null}));
}

#[tokio::test]
async fn a_walk_through_the_pages_stays_stable_while_rows_are_added() {
    let app = spawn_app().await;
    app.small_site().await;
    let item = |sku: &str| json!({"sku": sku, "description": "Part", "base_unit": "each", "unit_cost_minor": 1});
    let first: Vec<Value> = (1..=6).map(|n| item(&format!("C{n:02}"))).collect();
    app.post_ok("/api/v1/sites/T/items", &Value::Array(first))
        .await;
    let page1 = read(&app, "items?sku_prefix=C&limit=3").await;
    let next = page1["next"].as_str().unwrap().to_string();
    // Between pages: one row behind the cursor, two ahead of it, one already read edited.
    app.post_ok(
        "/api/v1/sites/T/items",
        &json!([item("C00"), item("C03A"), item("C07"),
                {"sku": "C02", "description": "Part, edited", "base_unit": "each", "unit_cost_minor": 1}]),
    )
    .await;
    let page2 = read(&app, &format!("items?sku_prefix=C&limit=3&after={next}")).await;
    let next = page2["next"].as_str().unwrap().to_string();
    let page3 = read(&app, &format!("items?sku_prefix=C&limit=3&after={next}")).await;
    assert_eq!(page3["next"], Value::Null);
    let seen: Vec<&str> = [&page1, &page2, &page3]
        .iter()
        .flat_map(|p| p["items"].as_array().unwrap())
        .map(|i| i["sku"].as_str().unwrap())
        .collect();
    assert_eq!(
        seen,
        ["C01", "C02", "C03", "C03A", "C04", "C05", "C06", "C07"],
        "nothing twice, nothing skipped; the row behind the cursor waits for the next walk"
    );
}

#[tokio::test]
async fn bins_and_items_are_filtered_by_what_integrators_ask_for() {
    let app = spawn_app().await;
    app.small_site().await;
    app.post_ok(
        "/api/v1/sites/T/bins",
        &json!([
            {"zone": "B", "aisle": 1, "bay": 1, "level": 1},
            {"zone": "B", "aisle": 2, "bay": 1, "level": 1}
        ]),
    )
    .await;
    app.post_ok(
        "/api/v1/sites/T/items",
        &json!([
            {"sku": "S10", "description": "Washer", "base_unit": "each", "unit_cost_minor": 1, "group": "fasteners"},
            {"sku": "T1", "description": "Tape", "base_unit": "roll", "unit_cost_minor": 80}
        ]),
    )
    .await;
    let codes = |page: Value, list: &str, key: &str| -> Vec<String> {
        page[list]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r[key].as_str().unwrap().to_string())
            .collect()
    };
    assert_eq!(
        codes(read(&app, "bins?zone=B").await, "bins", "code"),
        ["B-01-01-1", "B-02-01-1"]
    );
    assert_eq!(
        codes(read(&app, "bins?aisle=1").await, "bins", "code"),
        ["A-01-01-1", "A-01-02-1", "B-01-01-1"]
    );
    assert_eq!(
        codes(read(&app, "bins?zone=B&aisle=2").await, "bins", "code"),
        ["B-02-01-1"]
    );
    assert!(codes(read(&app, "bins?zone=Q").await, "bins", "code").is_empty());
    assert_eq!(
        codes(read(&app, "items?sku=S1").await, "items", "sku"),
        ["S1"]
    );
    assert!(codes(read(&app, "items?sku=S").await, "items", "sku").is_empty());
    assert_eq!(
        codes(read(&app, "items?sku_prefix=S").await, "items", "sku"),
        ["S1", "S10"]
    );
    assert_eq!(
        codes(read(&app, "items?group=fasteners").await, "items", "sku"),
        ["S10"]
    );
    assert_eq!(
        codes(
            read(&app, "items?class=none&sku_prefix=S1").await,
            "items",
            "sku"
        ),
        ["S1", "S10"]
    );
    // An empty value is no filter, as a form's "any" sends it.
    assert_eq!(
        codes(read(&app, "items?group=&class=").await, "items", "sku").len(),
        4
    );
}

#[tokio::test]
async fn items_carry_their_current_class_and_are_filtered_by_it() {
    // review_site builds a list, which gives S1 its first class, C; L1 never moved.
    let app = spawn_app().await;
    review_site(&app, &[]).await;
    let page = read(&app, "items").await;
    let class_of = |sku: &str| {
        page["items"]
            .as_array()
            .unwrap()
            .iter()
            .find(|i| i["sku"] == sku)
            .unwrap()["class"]
            .clone()
    };
    assert_eq!((class_of("S1"), class_of("L1")), (json!("C"), Value::Null));
    let skus = |page: Value| -> Vec<String> {
        page["items"]
            .as_array()
            .unwrap()
            .iter()
            .map(|i| i["sku"].as_str().unwrap().to_string())
            .collect()
    };
    assert_eq!(skus(read(&app, "items?class=C").await), ["S1"]);
    assert_eq!(skus(read(&app, "items?class=none").await), ["L1"]);
    assert!(skus(read(&app, "items?class=A").await).is_empty());
    // The class is the server's: sent back (even changed) it is ignored, not an error.
    let mut rows = page["items"].clone();
    rows[1]["class"] = json!("A");
    app.post_ok("/api/v1/sites/T/items", &rows).await;
    assert_eq!(read(&app, "items").await, page);
}

#[tokio::test]
async fn planner_inputs_read_back_page_by_page_and_post_back_unchanged() {
    let app = spawn_app().await;
    app.small_site().await;
    app.post_ok(
        "/api/v1/sites/T/planner-inputs",
        &json!([
            {"sku": "S1", "lead_time_days": 5, "lead_time_sd_days": 1.5, "review_days": 7, "service_level": 0.95},
            {"sku": "L1", "lead_time_days": 3},
            {"group": "fasteners", "lead_time_days": 10, "review_days": 5}
        ]),
    )
    .await;
    let page = read(&app, "planner-inputs").await;
    assert_eq!(page["next"], Value::Null);
    let rows = page["planner_inputs"].as_array().unwrap();
    let keys: Vec<(&str, &str)> = rows
        .iter()
        .map(|r| (r["group"].as_str().unwrap(), r["sku"].as_str().unwrap()))
        .collect();
    assert_eq!(
        keys,
        [("", "L1"), ("", "S1"), ("fasteners", "")],
        "items' own rows by SKU, then group defaults"
    );
    let strip = |r: &Value| {
        let mut r = r.clone();
        let o = r.as_object_mut().unwrap();
        assert_eq!(o.remove("updated_by"), Some(json!(ROOT_USER)));
        assert!(o.remove("updated_at").unwrap().is_string());
        r
    };
    assert_eq!(
        strip(&rows[1]),
        json!({"sku": "S1", "group": "", "lead_time_days": 5.0, "lead_time_sd_days": 1.5,
               "review_days": 7.0, "service_level": 0.95})
    );
    assert_eq!(
        strip(&rows[2]),
        json!({"sku": "", "group": "fasteners", "lead_time_days": 10.0, "lead_time_sd_days": 0.0,
               "review_days": 5.0, "service_level": null})
    );
    // Sent back as read (with its read-only fields): accepted, the figures unchanged.
    let written = app
        .post_ok("/api/v1/sites/T/planner-inputs", &page["planner_inputs"])
        .await;
    assert_eq!(written["written"], 3);
    let again = read(&app, "planner-inputs").await;
    let figures = |p: &Value| -> Vec<Value> {
        p["planner_inputs"]
            .as_array()
            .unwrap()
            .iter()
            .map(strip)
            .collect()
    };
    assert_eq!(figures(&again), figures(&page));
    let walked = walk(&app, "planner-inputs", "", 2).await;
    assert_eq!(
        walked.iter().map(strip).collect::<Vec<_>>(),
        figures(&again)
    );
    let one = read(&app, "planner-inputs?sku=S1").await;
    assert_eq!(figures(&one), [figures(&again)[1].clone()]);
    let group = read(&app, "planner-inputs?group=fasteners").await;
    assert_eq!(figures(&group), [figures(&again)[2].clone()]);
    // The CSV is every row; paging it is refused, naming the parameter.
    let (s, b) = app
        .get("/api/v1/sites/T/planner-inputs?format=csv&limit=2")
        .await;
    assert_eq!(s, 400, "{b}");
    assert!(b["error"].as_str().unwrap().starts_with("limit:"), "{b}");
    let csv = get_with(&app, "planner-inputs?format=csv", &[]).await;
    assert_eq!(csv.status(), 200);
    assert_eq!(
        csv.text().await.unwrap().lines().count(),
        4,
        "header and three rows"
    );
}

#[tokio::test]
async fn the_count_policy_reads_back_in_one_answer_whose_parts_are_what_each_put_takes() {
    let app = spawn_app().await;
    app.small_site().await;
    let policy = read(&app, "count-policy").await;
    assert_eq!(
        policy,
        json!({
            "settings": read(&app, "netting/settings").await,
            "sources": read(&app, "netting/sources").await,
            "reason_codes": read(&app, "netting/reason-codes").await,
        })
    );
    let before = etag_of(&get_with(&app, "count-policy", &[]).await);
    // Each part goes back through its own PUT as it was read.
    for (part, path) in [
        ("settings", "netting/settings"),
        ("sources", "netting/sources"),
        ("reason_codes", "netting/reason-codes"),
    ] {
        let (s, b) = app
            .put(&format!("/api/v1/sites/T/{path}"), &policy[part])
            .await;
        assert_eq!(s, 200, "{path}: {b}");
    }
    assert_eq!(read(&app, "count-policy").await, policy);
    let (s, b) = app
        .put(
            "/api/v1/sites/T/netting/sources",
            &json!([{"source": "host", "uncertainty_ms": 2000, "posting_lag_ms": 900000}]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let changed = get_with(&app, "count-policy", &[("if-none-match", &before)]).await;
    assert_eq!(changed.status(), 200, "the policy changed: a new ETag");
    assert_ne!(etag_of(&changed), before);
    let body: Value = changed.json().await.unwrap();
    assert_eq!(body["sources"], b);
}

#[tokio::test]
async fn a_read_back_answers_304_while_its_etag_still_names_the_page() {
    let app = spawn_app().await;
    app.small_site().await;
    let first = get_with(&app, "items", &[]).await;
    assert_eq!(first.status(), 200);
    let etag = etag_of(&first);
    assert!(etag.starts_with("W/\""), "a weak validator: {etag}");
    assert_eq!(first.headers()["cache-control"], "private, no-cache");
    let body = first.text().await.unwrap();
    let same = get_with(&app, "items", &[("if-none-match", &etag)]).await;
    assert_eq!(same.status(), 304);
    assert_eq!(etag_of(&same), etag);
    assert!(same.text().await.unwrap().is_empty());
    let listed = format!("W/\"0000\", {etag}");
    let among = get_with(&app, "items", &[("if-none-match", &listed)]).await;
    assert_eq!(among.status(), 304, "one of a list of validators");
    let other = get_with(&app, "items?limit=1", &[("if-none-match", &etag)]).await;
    assert_eq!(other.status(), 200, "another page has another ETag");
    app.post_ok(
        "/api/v1/sites/T/items",
        &json!([{"sku": "S1", "description": "Hex bolt M8, new", "base_unit": "box",
                 "unit_cost_minor": 450}]),
    )
    .await;
    let changed = get_with(&app, "items", &[("if-none-match", &etag)]).await;
    assert_eq!(changed.status(), 200);
    assert_ne!(etag_of(&changed), etag);
    assert_ne!(changed.text().await.unwrap(), body);
    for path in ["zones", "bins", "lots", "planner-inputs", "count-policy"] {
        let r = get_with(&app, path, &[]).await;
        let e = etag_of(&r);
        let again = get_with(&app, path, &[("if-none-match", &e)]).await;
        assert_eq!(again.status(), 304, "{path}");
    }
}

/// Every read-back route.
const READ_BACKS: &[&str] = &[
    "zones",
    "bins",
    "items",
    "lots",
    "packs",
    "planner-inputs",
    "count-policy",
];

#[tokio::test]
async fn read_backs_are_for_book_readers_never_counters_or_strangers() {
    let PhoneSite { app, cora, .. } = phone_site(&[
        ("sam", &[Role::Supervisor], None),
        ("pia", &[Role::Planner], None),
    ])
    .await;
    let cora_session = app.sign_in("cora", PASSWORD).await;
    let sam_session = app.sign_in("sam", PASSWORD).await;
    let pia_token = app.issue_token("T", "pia", Role::Planner).await;
    for path in READ_BACKS {
        let path = format!("/api/v1/sites/T/{path}");
        let answers = [
            ("anonymous", Auth::Anonymous, 401),
            ("a counter's phone", Auth::Bearer(cora.clone()), 403),
            (
                "a counter's session",
                Auth::Session(cora_session.clone()),
                403,
            ),
            (
                "a supervisor's session",
                Auth::Session(sam_session.clone()),
                200,
            ),
            ("a planner's token", Auth::Bearer(pia_token.clone()), 200),
        ];
        for (who, auth, status) in answers {
            let a = app.send(Method::GET, &path, &auth, Body::Empty).await;
            assert_eq!(a.status, status, "{who} on {path}: {}", a.text);
            if status == 403 {
                assert!(
                    a.json()["error"].as_str().unwrap().contains("roles"),
                    "{}",
                    a.text
                );
            }
        }
    }
}

#[tokio::test]
async fn a_bad_parameter_is_refused_naming_it() {
    let app = spawn_app().await;
    app.small_site().await;
    let cases = [
        ("items?limit=0", "limit"),
        ("items?limit=1001", "limit"),
        ("items?limit=ten", "limit"),
        ("items?limit=-1", "limit"),
        ("items?after=not-a-cursor", "after"),
        ("items?after=%22A%22", "after"),
        ("items?class=D", "class"),
        ("items?sku_prefix=a%20b", "sku_prefix"),
        ("items?sku=%07", "sku"),
        ("items?group=a%1Bb", "group"),
        ("bins?zone=a", "zone"),
        ("bins?aisle=x", "aisle"),
        ("bins?aisle=1000", "aisle"),
        ("lots?sku=a%20b", "sku"),
        ("packs?sku=a%20b", "sku"),
        ("packs?limit=0", "limit"),
        ("packs?after=not-a-cursor", "after"),
        ("zones?limit=1.5", "limit"),
        ("planner-inputs?sku=%20x%20y", "sku"),
        ("planner-inputs?limit=0", "limit"),
        ("count-results?from=yesterday", "from"),
        ("count-results?to=2026-03-02", "to"),
        (
            "count-results?from=2026-03-02T00:00:00Z&to=2026-03-01T00:00:00Z",
            "from",
        ),
    ];
    for (path, param) in cases {
        let (s, b) = app.get(&format!("/api/v1/sites/T/{path}")).await;
        assert_eq!(s, 400, "{path}: {b}");
        let text = b["error"].as_str().unwrap();
        assert!(text.starts_with(&format!("{param}:")), "{path}: {text}");
    }
    // A cursor of the items list (one-part keys) is not one of the lots list (two parts).
    let items = read(&app, "items?limit=1").await;
    let lots_cursor = items["next"].as_str().unwrap();
    let (s, b) = app
        .get(&format!("/api/v1/sites/T/lots?after={lots_cursor}"))
        .await;
    assert_eq!(s, 400, "{b}");
    assert!(b["error"].as_str().unwrap().starts_with("after:"), "{b}");
    // A parameter the route does not know is named too.
    for path in ["items?colour=red", "bins?active=true", "zones?zone=A"] {
        let (s, b) = app.get(&format!("/api/v1/sites/T/{path}")).await;
        assert_eq!(s, 400, "{path}: {b}");
        let name = path.split(['?', '=']).nth(1).unwrap();
        assert!(b["error"].as_str().unwrap().contains(name), "{path}: {b}");
    }
}

#[tokio::test]
async fn count_results_are_filtered_by_state_lot_and_counting_time() {
    // Bin 1 holds 40 of S1 and 6 of L1 lot LOT-7; the counter keys 40 of S1 only and
    // marks the bin done. S1 matches the book (a hit); L1/LOT-7 is netted as counted 0
    // against a book of 6: out of tolerance (unclassified items are held to class A's
    // tolerance, exact), so it waits for review. (The netting rule: DESIGN §4.)
    let PhoneSite { app, cora, .. } = phone_site(&[]).await;
    const MIN: i64 = 60_000;
    let base = Timestamp::now().0 - 30 * MIN;
    let at = |ms: i64| Timestamp(ms).to_string();
    app.post_ok(
        "/api/v1/sites/T/movements",
        &json!([
            {"id": "r0", "bin": "A-01-01-1", "sku": "S1", "qty": 40, "kind": "receipt",
             "event_at": at(base - 60 * MIN)},
            {"id": "r1", "bin": "A-01-01-1", "sku": "L1", "lot": "LOT-7", "qty": 6,
             "kind": "receipt", "event_at": at(base - 60 * MIN)}
        ]),
    )
    .await;
    let pass = uuid::Uuid::now_v7().to_string();
    let event = |t: i64, kind: &str, extra: Value| {
        let mut e = json!({"id": uuid::Uuid::now_v7().to_string(), "at": t, "count": pass,
                           "task": null, "bin": "A-01-01-1", "type": kind});
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    };
    let mut opened = event(base, "bin_opened", json!({"label": ""}));
    opened["id"] = json!(pass);
    app.sync(
        &cora,
        vec![
            opened,
            event(
                base + MIN,
                "line",
                json!({"sku": "S1", "gtin": null, "packs": 1, "qty": 40, "lot": "", "entry": "keypad"}),
            ),
            event(base + 2 * MIN, "bin_done", json!({})),
        ],
        0,
    )
    .await;
    let results = |query: &str| {
        let app = &app;
        let query = query.to_string();
        async move {
            let (s, b) = app
                .get(&format!("/api/v1/sites/T/count-results?{query}"))
                .await;
            assert_eq!(s, 200, "{query}: {b}");
            b["results"]
                .as_array()
                .unwrap()
                .iter()
                .map(|r| {
                    (
                        r["sku"].as_str().unwrap().to_string(),
                        r["lot"].as_str().unwrap().to_string(),
                    )
                })
                .collect::<Vec<_>>()
        }
    };
    let key = |sku: &str, lot: &str| (sku.to_string(), lot.to_string());
    // The default is `open`: current, out of tolerance, not reviewed.
    assert_eq!(results("").await, [key("L1", "LOT-7")]);
    assert_eq!(results("state=open").await, [key("L1", "LOT-7")]);
    let mut current = results("state=current").await;
    current.sort();
    assert_eq!(current, [key("L1", "LOT-7"), key("S1", "")]);
    assert_eq!(
        results("state=current&lot=LOT-7").await,
        [key("L1", "LOT-7")]
    );
    assert_eq!(results("state=current&lot=").await, [key("S1", "")]);
    assert!(results("state=current&lot=LOT-8").await.is_empty());
    // counted_at bounds, both inclusive.
    let (_, page) = app
        .get("/api/v1/sites/T/count-results?state=current&sku=S1")
        .await;
    let counted = page["results"][0]["counted_at"]
        .as_str()
        .unwrap()
        .to_string();
    let ms = chrono::DateTime::parse_from_rfc3339(&counted)
        .unwrap()
        .timestamp_millis();
    let q = |from: i64, to: i64| {
        format!(
            "state=current&sku=S1&from={}&to={}",
            Timestamp(from),
            Timestamp(to)
        )
    };
    assert_eq!(results(&q(ms, ms)).await, [key("S1", "")]);
    assert!(results(&q(ms + 1, ms + MIN)).await.is_empty());
    assert!(results(&q(ms - MIN, ms - 1)).await.is_empty());
    // A late pick inside the window re-nets S1: the old row is superseded, kept under `all`.
    app.post_ok(
        "/api/v1/sites/T/movements",
        &json!([{"id": "p1", "bin": "A-01-01-1", "sku": "S1", "qty": -1, "kind": "pick",
                 "event_at": at(base + MIN / 2)}]),
    )
    .await;
    let (_, all) = app
        .get("/api/v1/sites/T/count-results?state=all&sku=S1")
        .await;
    let rows = all["results"].as_array().unwrap();
    assert_eq!(rows.len(), 2, "{all}");
    assert!(rows[0]["superseded_by"].is_i64(), "{all}");
    assert_eq!(results("state=current&sku=S1").await.len(), 1);
}
