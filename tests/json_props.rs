//! Property test over the write routes: arbitrary JSON objects, built from each
//! route's real field names mixed with random ones and random values, are answered
//! 2xx or 4xx, never 5xx, and a refused request changes no row of any table.

mod common;

use common::spawn_app;
use proptest::prelude::*;
use proptest::test_runner::{Config, TestCaseError, TestRunner};
use serde_json::{Map, Value, json};
use std::collections::BTreeMap;

/// Generated requests per route; with seventeen routes the suite stays well under a minute in debug.
const CASES_PER_ROUTE: u32 = 48;

/// How a route takes its body: one object, or an array of row objects.
#[derive(Clone, Copy, Debug)]
enum Shape {
    Object,
    Rows,
}

struct Route {
    method: reqwest::Method,
    path: &'static str,
    shape: Shape,
    fields: &'static [&'static str],
    /// A body object the route accepts; cases start from it, so they reach the
    /// checks behind the first one.
    base: Value,
}

const P: &str = "/api/v1/sites/T";

/// The stored settings objects the PUT routes start from (read at start).
struct Stored {
    planning: Value,
    netting: Value,
    device_clock: i64,
}

fn routes(stored: &Stored) -> Vec<Route> {
    use reqwest::Method as M;
    let bases = base_bodies(stored);
    let r = |method: M, path: &'static str, shape: Shape, fields: &'static [&'static str]| Route {
        method,
        path,
        shape,
        fields,
        base: bases[path].clone(),
    };
    vec![
        r(
            M::POST,
            "/bins",
            Shape::Rows,
            &["code", "zone", "aisle", "bay", "level", "side", "walk_seq"],
        ),
        r(
            M::POST,
            "/items",
            Shape::Rows,
            &[
                "sku",
                "description",
                "base_unit",
                "unit_cost_minor",
                "lot_tracked",
                "group",
            ],
        ),
        r(
            M::POST,
            "/packs",
            Shape::Rows,
            &["sku", "gtin", "level", "units"],
        ),
        r(
            M::POST,
            "/movements",
            Shape::Rows,
            &[
                "id", "bin", "sku", "lot", "expiry", "qty", "kind", "event_at", "source",
                "doc_ref", "actor", "reverses",
            ],
        ),
        r(
            M::POST,
            "/short-picks",
            Shape::Rows,
            &[
                "id",
                "bin",
                "sku",
                "lot",
                "short_qty",
                "reported_at",
                "source",
                "doc_ref",
            ],
        ),
        r(
            M::POST,
            "/planner-inputs",
            Shape::Rows,
            &[
                "sku",
                "group",
                "lead_time_days",
                "lead_time_sd_days",
                "review_days",
                "service_level",
            ],
        ),
        r(
            M::PUT,
            "/planning/settings",
            Shape::Object,
            &[
                "abc",
                "frequency",
                "task_time",
                "zero_demand_days",
                "level_slack_pct",
            ],
        ),
        r(
            M::PUT,
            "/planning/calendar",
            Shape::Object,
            &["working_weekdays", "holidays"],
        ),
        r(
            M::POST,
            "/count-lists",
            Shape::Object,
            &["day", "counters", "minutes", "fill", "preview", "replace"],
        ),
        r(
            M::POST,
            "/count-lists/2026-03-03/tasks/1/move",
            Shape::Object,
            &["run"],
        ),
        r(
            M::PUT,
            "/count-lists/2026-03-03/runs/1",
            Shape::Object,
            &["holder"],
        ),
        r(
            M::PUT,
            "/accuracy/settings",
            Shape::Object,
            &["ira_target", "demand_window_days", "service_level"],
        ),
        r(
            M::PUT,
            "/netting/settings",
            Shape::Object,
            &[
                "tolerances",
                "auto_adjust",
                "manager_value_minor",
                "bulk_value_minor",
            ],
        ),
        r(
            M::PUT,
            "/netting/sources",
            Shape::Rows,
            &["source", "uncertainty_ms", "posting_lag_ms"],
        ),
        r(
            M::PUT,
            "/netting/reason-codes",
            Shape::Rows,
            &["code", "label"],
        ),
        r(
            M::POST,
            "/sync",
            Shape::Object,
            &["device_clock", "rtt_ms", "events"],
        ),
        r(
            M::POST,
            "/api/v1/devices",
            Shape::Object,
            &["user", "pin", "site", "device_name"],
        ),
    ]
}

fn base_bodies(stored: &Stored) -> BTreeMap<&'static str, Value> {
    BTreeMap::from([
        (
            "/bins",
            json!({"zone": "B", "aisle": 2, "bay": 1, "level": 1, "side": "L"}),
        ),
        (
            "/items",
            json!({"sku": "N1", "description": "Washer", "base_unit": "each", "unit_cost_minor": 5}),
        ),
        // 4006381333931: a valid EAN-13 (GS1 General Specifications mod-10 check digit).
        (
            "/packs",
            json!({"sku": "S1", "gtin": "4006381333931", "level": "case", "units": 6}),
        ),
        (
            "/movements",
            json!({"id": "m-p", "bin": "A-01-01-1", "sku": "S1", "qty": 5, "kind": "receipt", "event_at": "2026-03-02T08:00:00Z"}),
        ),
        (
            "/short-picks",
            json!({"id": "sp-p", "bin": "A-01-01-1", "sku": "S1", "short_qty": 1, "reported_at": "2026-03-02T10:00:00Z"}),
        ),
        ("/planner-inputs", json!({"sku": "S1", "lead_time_days": 5})),
        ("/planning/settings", stored.planning.clone()),
        (
            "/planning/calendar",
            json!({"working_weekdays": ["mon", "tue"], "holidays": ["2026-12-25"]}),
        ),
        (
            "/count-lists",
            json!({"day": "2026-03-04", "counters": 1, "minutes": 60, "preview": true}),
        ),
        ("/count-lists/2026-03-03/tasks/1/move", json!({"run": 2})),
        ("/count-lists/2026-03-03/runs/1", json!({"holder": "cora"})),
        (
            "/accuracy/settings",
            json!({"ira_target": 0.95, "demand_window_days": 90, "service_level": [0.98, 0.95, 0.9]}),
        ),
        ("/netting/settings", stored.netting.clone()),
        (
            "/netting/sources",
            json!({"source": "host", "uncertainty_ms": 1000, "posting_lag_ms": 0}),
        ),
        (
            "/netting/reason-codes",
            json!({"code": "lost", "label": "Lost in transit"}),
        ),
        (
            "/sync",
            json!({"device_clock": stored.device_clock, "rtt_ms": 20, "events": []}),
        ),
        (
            "/api/v1/devices",
            json!({"user": "cora", "pin": "4821", "site": "T", "device_name": "p"}),
        ),
    ])
}

/// Keys an event of the phone's sync may carry, for objects nested in `events`.
const EVENT_FIELDS: &[&str] = &[
    "id", "at", "user", "count", "task", "bin", "type", "sku", "qty", "entry", "lot", "expiry",
];

/// Text values: plausible ones (codes, days, instants of the test site) and hostile ones.
fn text() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("A-01-01-1".to_string()),
        Just("S1".to_string()),
        Just("L1".to_string()),
        Just("cora".to_string()),
        Just("0000".to_string()),
        Just("T".to_string()),
        Just("receipt".to_string()),
        Just("2026-03-03".to_string()),
        Just("2026-03-02T08:00:00Z".to_string()),
        Just("9999-12-31".to_string()),
        Just("0001-01-01T00:00:00Z".to_string()),
        Just("=HYPERLINK(\"x\")".to_string()),
        Just("%_%".to_string()),
        "[a-zA-Z0-9 _.-]{0,12}",
        "\\PC{0,8}",
        "[\\x00-\\x1f\\x7f\\u{202e}\\u{2066}a]{1,6}",
    ]
}

fn leaf() -> impl Strategy<Value = Value> {
    prop_oneof![
        Just(Value::Null),
        any::<bool>().prop_map(Value::Bool),
        (-3i64..200).prop_map(|n| json!(n)),
        prop_oneof![
            Just(i64::MAX),
            Just(i64::MIN),
            Just(u32::MAX as i64),
            Just(-1)
        ]
        .prop_map(|n| json!(n)),
        any::<u64>().prop_map(|n| json!(n)),
        (-1e6f64..1e6).prop_map(|f| json!(f)),
        text().prop_map(Value::String),
    ]
}

fn value() -> impl Strategy<Value = Value> {
    leaf().prop_recursive(2, 12, 4, |inner| {
        prop_oneof![
            prop::collection::vec(inner.clone(), 0..4).prop_map(Value::Array),
            prop::collection::btree_map("[a-z_]{1,8}", inner, 0..4)
                .prop_map(|m| Value::Object(m.into_iter().collect())),
        ]
    })
}

/// An object whose keys are mostly the given real names, sometimes random ones.
fn object(
    fields: &'static [&'static str],
    most: usize,
) -> impl Strategy<Value = Map<String, Value>> {
    let key = prop_oneof![
        4 => prop::sample::select(fields).prop_map(str::to_string),
        1 => "[a-z_]{1,10}",
    ];
    prop::collection::vec((key, value()), 0..most).prop_map(|pairs| pairs.into_iter().collect())
}

/// The route's base object with some fields dropped, then random entries laid over it.
fn mutated(base: &Value, fields: &'static [&'static str]) -> BoxedStrategy<Map<String, Value>> {
    let base = base.as_object().cloned().unwrap_or_default();
    let n = base.len();
    (prop::collection::vec(0u8..8, n), object(fields, 3))
        .prop_map(move |(keep, overlay)| {
            let mut o: Map<String, Value> = base
                .iter()
                .zip(keep)
                .filter(|(_, k)| *k > 0)
                .map(|((key, v), _)| (key.clone(), v.clone()))
                .collect();
            o.extend(overlay);
            o
        })
        .boxed()
}

/// A phone's event: its real keys with random values.
fn event() -> impl Strategy<Value = Value> {
    object(EVENT_FIELDS, 8).prop_map(Value::Object)
}

/// A whole body for a route: the object (or rows of objects), sometimes with data after it.
fn body(route: &Route) -> BoxedStrategy<Vec<u8>> {
    let is_sync = route.path == "/sync";
    let base = route.base.as_object().cloned().unwrap_or_default();
    let obj = prop_oneof![
        1 => Just(base),
        3 => mutated(&route.base, route.fields),
        1 => object(route.fields, 8),
    ];
    let obj: BoxedStrategy<Map<String, Value>> = if is_sync {
        (obj, prop::collection::vec(event(), 0..3))
            .prop_map(|(mut o, events)| {
                if o.contains_key("events") {
                    o.insert("events".into(), Value::Array(events));
                }
                o
            })
            .boxed()
    } else {
        obj.boxed()
    };
    let shaped: BoxedStrategy<Value> = match route.shape {
        Shape::Object => obj.prop_map(Value::Object).boxed(),
        Shape::Rows => prop_oneof![
            4 => prop::collection::vec(obj.clone().prop_map(Value::Object), 1..3).prop_map(Value::Array),
            1 => Just(Value::Array(Vec::new())),
            1 => obj.prop_map(Value::Object),
        ]
        .boxed(),
    };
    let tail = prop_oneof![6 => Just(""), 1 => Just(" {}"), 1 => Just("x")];
    (shaped, tail)
        .prop_map(|(v, tail)| format!("{v}{tail}").into_bytes())
        .boxed()
}

/// Tables a refused enrolment writes on purpose: a wrong PIN is counted for
/// throttling and audited (the rule of `accounts::signin`).
const SIGN_IN_RECORDS: [&str; 2] = ["sign_in_failure", "audit_event"];

#[test]
fn arbitrary_json_on_every_write_route_is_never_a_server_error_and_a_refusal_changes_nothing() {
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("a test runtime builds");
    let (app, phone, stored) = rt.block_on(async {
        let app = spawn_app().await;
        app.site_with_triggers().await;
        app.cora_and_a_list(2).await;
        let phone = app.phone("cora", "4821").await;
        let (_, planning) = app.get(&format!("{P}/planning/settings")).await;
        let (_, netting) = app.get(&format!("{P}/netting/settings")).await;
        let stored = Stored {
            planning,
            netting,
            device_clock: cairn::time::Timestamp::now().0,
        };
        (app, phone, stored)
    });
    let mut failures = Vec::new();
    let tally: std::cell::RefCell<BTreeMap<String, [u32; 2]>> = Default::default();
    for route in routes(&stored) {
        let mut runner = TestRunner::new(Config {
            cases: CASES_PER_ROUTE,
            failure_persistence: None,
            ..Config::default()
        });
        let outcome = runner.run(&body(&route), |bytes| {
            rt.block_on(async {
                let before = common::table_contents(&app.db);
                let url = if route.path.starts_with("/api/") {
                    format!("{}{}", app.base, route.path)
                } else {
                    format!("{}{P}{}", app.base, route.path)
                };
                let mut r = app
                    .client
                    .request(route.method.clone(), url)
                    .header("content-type", "application/json")
                    .body(bytes.clone());
                r = match route.path {
                    "/sync" => r.bearer_auth(&phone),
                    "/api/v1/devices" => r,
                    _ => app.with_token(r),
                };
                let answer = r.send().await.expect("the server answers");
                let status = answer.status().as_u16();
                let text = answer.text().await.unwrap_or_default();
                let shown = String::from_utf8_lossy(&bytes);
                prop_assert!(status < 500, "{status} for {shown}: {text}");
                tally
                    .borrow_mut()
                    .entry(format!("{} {}", route.method, route.path))
                    .or_default()[usize::from(status >= 400)] += 1;
                if status >= 400 {
                    let mut after = common::table_contents(&app.db);
                    let mut before = before;
                    if route.path == "/api/v1/devices" && matches!(status, 401 | 429) {
                        for t in SIGN_IN_RECORDS {
                            after.remove(t);
                            before.remove(t);
                        }
                    }
                    prop_assert_eq!(
                        after,
                        before,
                        "{} refused {} and changed a table",
                        status,
                        shown
                    );
                }
                Ok::<(), TestCaseError>(())
            })
        });
        if let Err(e) = outcome {
            failures.push(format!("{} {}: {e}", route.method, route.path));
        }
    }
    for (route, [ok, refused]) in tally.borrow().iter() {
        eprintln!("{route}: {ok} accepted, {refused} refused");
    }
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}
