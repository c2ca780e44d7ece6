//! The API's OpenAPI document against the route table: every `/api/v1` route is in it
//! with the access rule the table gives it, nothing else is, every reference resolves,
//! and `cairn openapi` writes what the server serves. Also the one time format on the
//! wire: instants written with milliseconds and `Z`, a finer fraction refused naming
//! its field, and a refused batch naming each element by `index`.

mod common;

use cairn::http::access::{Access, Rule};
use common::{movement, spawn_app};
use serde_json::{Value, json};
use std::collections::BTreeSet;

/// The API routes of the route table, as `METHOD path`.
fn api_routes() -> Vec<Rule> {
    cairn::http::route_rules()
        .into_iter()
        .filter(Rule::is_api)
        .collect()
}

async fn served_document(app: &common::TestApp) -> Value {
    // Public: no token.
    let r = app
        .client
        .get(format!("{}/api/v1/openapi.json", app.base))
        .send()
        .await
        .expect("the server answers");
    assert_eq!(r.status().as_u16(), 200);
    r.json().await.expect("the document is JSON")
}

/// Every operation of the document, as (`METHOD path`, operation).
fn operations(doc: &Value) -> Vec<(String, String, Value)> {
    let mut out = Vec::new();
    for (path, item) in doc["paths"].as_object().expect("paths is an object") {
        for (method, op) in item.as_object().expect("a path item is an object") {
            out.push((method.to_ascii_uppercase(), path.clone(), op.clone()));
        }
    }
    out
}

#[tokio::test]
async fn the_document_has_every_api_route_of_the_table_and_no_other() {
    let app = spawn_app().await;
    let doc = served_document(&app).await;
    assert_eq!(doc["openapi"], "3.1.0");
    assert!(
        cairn::http::openapi::document().undocumented.is_empty(),
        "routes without documentation: {:?}",
        cairn::http::openapi::document().undocumented
    );
    let in_table: BTreeSet<String> = api_routes()
        .iter()
        .map(|r| format!("{} {}", r.method, r.path))
        .collect();
    let in_doc: BTreeSet<String> = operations(&doc)
        .into_iter()
        .map(|(m, p, _)| format!("{m} {p}"))
        .collect();
    assert_eq!(
        in_table.difference(&in_doc).collect::<Vec<_>>(),
        Vec::<&String>::new(),
        "routes the document leaves out"
    );
    assert_eq!(
        in_doc.difference(&in_table).collect::<Vec<_>>(),
        Vec::<&String>::new(),
        "operations with no route"
    );
    // The table has pages too; none of them is in the document.
    assert!(in_table.len() > 40, "{}", in_table.len());
    assert!(in_doc.iter().all(|k| k.contains(" /api/v1/")));
}

#[tokio::test]
async fn each_operation_states_the_access_rule_of_its_route() {
    let app = spawn_app().await;
    let doc = served_document(&app).await;
    let ops = operations(&doc);
    for rule in api_routes() {
        let key = format!("{} {}", rule.method, rule.path);
        let (_, _, op) = ops
            .iter()
            .find(|(m, p, _)| *m == rule.method.as_str() && p == rule.path)
            .unwrap_or_else(|| panic!("{key} is not in the document"));
        let access = &op["x-cairn-access"];
        let description = op["description"].as_str().unwrap_or_default();
        assert!(description.contains("Access: "), "{key}: {description}");
        assert!(
            !op["summary"].as_str().unwrap_or_default().is_empty(),
            "{key} has no summary"
        );
        match rule.access {
            Access::Public => {
                assert_eq!(access["rule"], "public", "{key}");
                assert_eq!(op["security"], json!([]), "{key}");
            }
            Access::SignedIn => assert_eq!(access["rule"], "signed_in", "{key}"),
            Access::Device => assert_eq!(access["rule"], "device", "{key}"),
            Access::Site(roles) => {
                assert_eq!(access["rule"], "site", "{key}");
                let named: Vec<&str> = roles.iter().map(|r| r.as_str()).collect();
                assert_eq!(access["roles"], json!(named), "{key}");
                for role in named {
                    assert!(description.contains(role), "{key} does not name {role}");
                }
            }
        }
        if rule.access != Access::Public {
            for status in ["401", "403"] {
                assert!(
                    op["responses"][status].is_object(),
                    "{key} does not document {status}"
                );
            }
            assert_ne!(op["security"], json!([]), "{key} takes no credential?");
        }
        // Every operation answers something documented on success, with a schema
        // unless it answers no body.
        let success: Vec<(&String, &Value)> = op["responses"]
            .as_object()
            .unwrap()
            .iter()
            .filter(|(s, _)| s.starts_with('2'))
            .collect();
        assert_eq!(success.len(), 1, "{key}");
        let (status, answer) = success[0];
        if status != "204" {
            assert!(
                answer["content"]["application/json"]["schema"].is_object(),
                "{key}: no answer schema"
            );
        }
        // Every error answer has the one error shape.
        for (status, answer) in op["responses"].as_object().unwrap() {
            if status.starts_with('4') || status.starts_with('5') {
                assert_eq!(
                    answer["content"]["application/json"]["schema"]["$ref"],
                    "#/components/schemas/ErrorBody",
                    "{key} {status}"
                );
            }
        }
        // A body-taking operation has a body schema and an example (running ABC takes
        // only its `day` in the query).
        let no_body = ["/api/v1/sites/{site}/planning/abc"];
        if matches!(rule.method.as_str(), "POST" | "PUT") && !no_body.contains(&rule.path) {
            let body = &op["requestBody"]["content"]["application/json"];
            assert!(body["schema"].is_object(), "{key}: no body schema");
            assert!(!body["example"].is_null(), "{key}: no body example");
        }
    }
}

/// Collects every `$ref` in `v`.
fn refs(v: &Value, out: &mut Vec<String>) {
    match v {
        Value::Object(o) => {
            if let Some(Value::String(r)) = o.get("$ref") {
                out.push(r.clone());
            }
            o.values().for_each(|x| refs(x, out));
        }
        Value::Array(a) => a.iter().for_each(|x| refs(x, out)),
        _ => {}
    }
}

#[tokio::test]
async fn every_reference_resolves_and_path_parameters_are_described() {
    let app = spawn_app().await;
    let doc = served_document(&app).await;
    let mut all = Vec::new();
    refs(&doc, &mut all);
    assert!(all.len() > 50, "{}", all.len());
    for r in all {
        let name = r
            .strip_prefix("#/components/schemas/")
            .unwrap_or_else(|| panic!("a reference outside the schemas: {r}"));
        assert!(
            doc["components"]["schemas"][name].is_object(),
            "{r} does not resolve"
        );
    }
    for (m, p, op) in operations(&doc) {
        let declared: BTreeSet<String> = op["parameters"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|x| x["in"] == "path")
            .map(|x| {
                assert!(!x["description"].as_str().unwrap().is_empty(), "{m} {p}");
                x["name"].as_str().unwrap().to_string()
            })
            .collect();
        let in_path: BTreeSet<String> = p
            .split('/')
            .filter_map(|s| s.strip_prefix('{')?.strip_suffix('}'))
            .map(str::to_string)
            .collect();
        assert_eq!(declared, in_path, "{m} {p}");
    }
}

#[tokio::test]
async fn the_document_says_what_id_seq_and_watermark_are() {
    let app = spawn_app().await;
    let doc = served_document(&app).await;
    let schemas = &doc["components"]["schemas"];
    let movement = &schemas["Movement"]["properties"];
    let seq = movement["seq"]["description"].as_str().unwrap();
    let id = movement["id"]["description"].as_str().unwrap();
    assert!(seq.contains("ledger"), "{seq}");
    assert!(id.contains("sender"), "{id}");
    let watermark = schemas["ResultRow"]["properties"]["watermark"]["description"]
        .as_str()
        .unwrap();
    assert!(watermark.contains("`seq`"), "{watermark}");
    let outcome = schemas["RecordOutcome"]["properties"]["watermark"]["description"]
        .as_str()
        .unwrap();
    assert!(outcome.contains("`seq`"), "{outcome}");
    // The batch error names elements by `index`, and the instant rule is stated once.
    assert!(schemas["RowError"]["properties"]["index"].is_object());
    assert!(schemas["RowError"]["properties"]["row"].is_null());
    let instant = schemas["Timestamp"]["description"].as_str().unwrap();
    assert!(instant.contains("three fraction digits"), "{instant}");
    let overview = doc["info"]["description"].as_str().unwrap();
    assert!(
        overview.contains("epoch"),
        "the sync exception is not stated"
    );
}

#[tokio::test]
async fn cairn_openapi_writes_the_document_the_server_serves() {
    let app = spawn_app().await;
    let served = served_document(&app).await;
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("openapi.json");
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["openapi", "--out"])
        .arg(&file)
        .output()
        .expect("the cairn binary runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let written: Value = serde_json::from_slice(&std::fs::read(&file).unwrap()).unwrap();
    assert_eq!(written, served);
    // Without --out it prints the same document.
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .arg("openapi")
        .output()
        .expect("the cairn binary runs");
    assert!(out.status.success());
    let printed: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(printed, served);
}

/// Tells whether `text` is an RFC 3339 instant in UTC with exactly three fraction
/// digits and `Z` (RFC 3339 §5.6 `date-time`, narrowed to the API's one form).
fn is_wire_instant(text: &str) -> bool {
    let b = text.as_bytes();
    let digits = |r: std::ops::Range<usize>| r.into_iter().all(|i| b[i].is_ascii_digit());
    b.len() == 24
        && digits(0..4)
        && b[4] == b'-'
        && digits(5..7)
        && b[7] == b'-'
        && digits(8..10)
        && b[10] == b'T'
        && digits(11..13)
        && b[13] == b':'
        && digits(14..16)
        && b[16] == b':'
        && digits(17..19)
        && b[19] == b'.'
        && digits(20..23)
        && b[23] == b'Z'
}

#[tokio::test]
async fn instants_are_written_with_milliseconds_and_z_and_a_finer_fraction_is_refused() {
    let app = spawn_app().await;
    app.small_site().await;
    let path = "/api/v1/sites/T/movements";
    // A fraction finer than a millisecond: the batch is refused whole, naming the
    // element by its index and the field; nothing is written.
    let (s, b) = app
        .post(
            path,
            &json!([
                movement(
                    "m-1",
                    "A-01-01-1",
                    "S1",
                    5,
                    "receipt",
                    "2026-03-02T08:00:00Z"
                ),
                movement(
                    "m-2",
                    "A-01-01-1",
                    "S1",
                    5,
                    "receipt",
                    "2026-03-02T08:00:00.0001Z"
                ),
            ]),
        )
        .await;
    assert_eq!(s, 422, "{b}");
    assert_eq!(b["rows"][0]["index"], 1, "{b}");
    assert_eq!(b["rows"][0]["field"], "event_at", "{b}");
    assert!(
        b["rows"][0]["message"]
            .as_str()
            .unwrap()
            .contains("finer than a millisecond"),
        "{b}"
    );
    let (s, b) = app.get("/api/v1/sites/T/balances").await;
    assert_eq!(s, 200, "{b}");
    assert_eq!(b["balances"], json!([]), "a refused batch wrote something");

    // With an offset and no fraction, or three digits, the instant is taken and written
    // back in UTC with three digits and `Z`.
    let (s, b) = app
        .post(
            path,
            &json!([
                movement(
                    "m-1",
                    "A-01-01-1",
                    "S1",
                    5,
                    "receipt",
                    "2026-03-02T09:00:00+01:00"
                ),
                movement(
                    "m-2",
                    "A-01-01-1",
                    "S1",
                    -2,
                    "pick",
                    "2026-03-02T08:30:00.250Z"
                ),
            ]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let (s, b) = app.get("/api/v1/sites/T/bins/A-01-01-1/movements").await;
    assert_eq!(s, 200, "{b}");
    let events: Vec<&str> = b["movements"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m["event_at"].as_str().unwrap())
        .collect();
    assert_eq!(
        events,
        ["2026-03-02T08:00:00.000Z", "2026-03-02T08:30:00.250Z"]
    );
    for m in b["movements"].as_array().unwrap() {
        let recorded = m["recorded_at"].as_str().unwrap();
        assert!(is_wire_instant(recorded), "{recorded}");
    }

    // In a query parameter the refusal is a 400 that starts with the parameter's name.
    for (route, param) in [
        ("bins/A-01-01-1/movements", "from"),
        ("count-results", "to"),
        ("balances", "at"),
    ] {
        let (s, b) = app
            .get(&format!(
                "/api/v1/sites/T/{route}?{param}=2026-03-02T08:00:00.123456Z"
            ))
            .await;
        assert_eq!(s, 400, "{route}: {b}");
        let text = b["error"].as_str().unwrap();
        assert!(text.starts_with(param), "{route}: {text}");
        assert!(text.contains("finer than a millisecond"), "{route}: {text}");
    }
}

#[test]
fn the_wire_instant_check_tells_the_one_form_from_others() {
    assert!(is_wire_instant("2026-03-02T08:00:00.000Z"));
    assert!(!is_wire_instant("2026-03-02T08:00:00Z"));
    assert!(!is_wire_instant("2026-03-02T08:00:00.000+00:00"));
    assert!(!is_wire_instant("2026-03-02T08:00:00.0000Z"));
}

#[tokio::test]
async fn refusals_the_contract_run_found_are_named_and_in_the_error_shape() {
    let app = spawn_app().await;
    app.small_site().await;
    // A path segment that is no number: axum's refusal, in the API's error shape.
    let (s, b) = app
        .post(
            "/api/v1/sites/T/count-lists/2026-03-02/tasks/9223372036854775808/move",
            &json!({ "run": 1 }),
        )
        .await;
    assert_eq!(s, 400, "{b}");
    assert!(
        b["error"].as_str().unwrap().contains("9223372036854775808"),
        "{b}"
    );
    // The most negative quantity is refused on qty, not overflowed.
    let (s, b) = app
        .post(
            "/api/v1/sites/T/movements",
            &json!([movement(
                "m-1",
                "A-01-01-1",
                "S1",
                i64::MIN,
                "adjustment",
                "2026-03-02T08:00:00Z"
            )]),
        )
        .await;
    assert_eq!(s, 422, "{b}");
    assert_eq!(
        (b["rows"][0]["index"].clone(), b["rows"][0]["field"].clone()),
        (json!(0), json!("qty"))
    );
    // Page sizes outside 1 to 1,000 and report parameters a route does not read.
    for (path, param) in [
        ("balances?limit=0", "limit"),
        ("balances?limit=1001", "limit"),
        ("bins/A-01-01-1/movements?limit=0", "limit"),
        ("accuracy?window_days=30", "window_days"),
        ("accuracy/items/S1?zone=A", "zone"),
        ("buffer/S1?since=2026-01-01", "since"),
    ] {
        let (s, b) = app.get(&format!("/api/v1/sites/T/{path}")).await;
        assert_eq!(s, 400, "{path}: {b}");
        assert!(
            b["error"].as_str().unwrap().starts_with(param),
            "{path}: {b}"
        );
    }
    let (s, b) = app.get("/api/v1/sites/T/balances?limit=1000").await;
    assert_eq!(s, 200, "{b}");
}

/// Tells whether a schema comes from a wire type: a reference, an array of references,
/// or an object whose fields are listed (a page of rows), never an object in words.
fn derived(schema: &Value) -> bool {
    if schema.get("$ref").is_some() {
        return true;
    }
    match schema["type"].as_str() {
        Some("array") => derived(&schema["items"]),
        Some("object") => schema["properties"]
            .as_object()
            .is_some_and(|p| !p.is_empty() && p.values().all(|v| v.is_object())),
        _ => false,
    }
}

#[tokio::test]
async fn every_body_and_answer_of_json_has_a_schema_derived_from_its_wire_type() {
    let app = spawn_app().await;
    let doc = served_document(&app).await;
    let mut words = Vec::new();
    for (method, path, op) in operations(&doc) {
        // The document itself is any OpenAPI document.
        if path == "/api/v1/openapi.json" {
            continue;
        }
        let key = format!("{method} {path}");
        if let Some(body) = op["requestBody"]["content"]["application/json"].get("schema")
            && !derived(body)
        {
            words.push(format!("{key}: body {body}"));
        }
        for (status, answer) in op["responses"].as_object().unwrap() {
            let Some(schema) = answer["content"]["application/json"].get("schema") else {
                continue;
            };
            if status.starts_with('2') && !derived(schema) {
                words.push(format!("{key}: {status} {schema}"));
            }
        }
    }
    assert!(words.is_empty(), "schemas in words: {words:#?}");
    // The answers once described in words name their fields now.
    let schemas = &doc["components"]["schemas"];
    for (name, field) in [
        ("ResultDetail", "evidence"),
        ("SyncResponse", "offset_ms"),
        ("SyncRequest", "device_clock"),
        ("AccuracyReport", "ira"),
        ("BufferReport", "record_error"),
        ("ListView", "tasks"),
        ("PhoneList", "time_zone"),
    ] {
        let text = schemas[name].to_string();
        assert!(text.contains(&format!("\"{field}\"")), "{name}: {text}");
    }
}

#[tokio::test]
async fn a_struct_sent_as_an_array_of_its_fields_is_refused_naming_where() {
    let app = spawn_app().await;
    app.small_site().await;
    let (s, before) = app.get("/api/v1/sites/T/netting/settings").await;
    assert_eq!(s, 200, "{before}");
    // serde alone reads `[null, null]` as the tolerance {units: null, percent_bp: null}.
    let mut sent = before.clone();
    sent["tolerances"]["c"] = json!([null, null]);
    let (s, b) = app.put("/api/v1/sites/T/netting/settings", &sent).await;
    assert_eq!(s, 400, "{b}");
    let text = b["error"].as_str().unwrap();
    assert!(
        text.starts_with("tolerances.c: an array where an object is expected"),
        "{b}"
    );
    let (_, after) = app.get("/api/v1/sites/T/netting/settings").await;
    assert_eq!(after, before, "a refused body changes nothing");
    // The same object as an object is taken.
    sent["tolerances"]["c"] = json!({ "units": 3, "percent_bp": null, "value_minor": null });
    let (s, b) = app.put("/api/v1/sites/T/netting/settings", &sent).await;
    assert_eq!(s, 200, "{b}");
    assert_eq!(b["tolerances"]["c"]["units"], 3);

    // A whole settings body as an array, and a batch row as an array, are refused too.
    let (s, b) = app
        .put("/api/v1/sites/T/planning/settings", &json!([1, 2, 3]))
        .await;
    assert_eq!(s, 400, "{b}");
    assert!(
        b["error"]
            .as_str()
            .unwrap()
            .starts_with("body: an array where an object"),
        "{b}"
    );
    let (s, b) = app
        .post(
            "/api/v1/sites/T/movements",
            &json!([
                movement(
                    "m-1",
                    "A-01-01-1",
                    "S1",
                    5,
                    "receipt",
                    "2026-03-02T08:00:00Z"
                ),
                [
                    "m-2",
                    "A-01-01-1",
                    "S1",
                    null,
                    null,
                    5,
                    "receipt",
                    "2026-03-02T08:00:00Z"
                ]
            ]),
        )
        .await;
    assert_eq!(s, 422, "{b}");
    assert_eq!(b["rows"][0]["index"], 1, "{b}");
    assert!(
        b["rows"][0]["message"]
            .as_str()
            .unwrap()
            .starts_with("an array where an object"),
        "{b}"
    );
    let (_, balances) = app.get("/api/v1/sites/T/balances").await;
    assert_eq!(
        balances["balances"],
        json!([]),
        "nothing of the refused batch was written"
    );
}
