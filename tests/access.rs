//! Who may use which route, checked over the whole route table: every route
//! times every role (and anonymous, a phone and an integration token). The
//! cases come from the application's own table, so a new route is tested the
//! moment it exists; the expectations below restate the policy independently.

mod common;

use cairn::accounts::Role;
use cairn::http::access::{Access, Rule};
use common::{Answer, Auth, Body, TestApp, spawn_app};
use reqwest::Method;
use serde_json::json;

/// Test-only secrets of the people below.
const PASSWORD: &str = "test-only-password";
const PIN: &str = "4821";

/// The people of the test site, one per role.
const PEOPLE: &[(&str, Role)] = &[
    ("cora", Role::Counter),
    ("sam", Role::Supervisor),
    ("ines", Role::InventoryManager),
    ("pia", Role::Planner),
    ("adam", Role::Admin),
];

#[derive(Clone, Copy, PartialEq, Eq, Debug)]
enum Kind {
    Anonymous,
    Session,
    Device,
    Token,
}

/// One sender of the table: how it signs in and what it holds at site T.
struct Who {
    label: String,
    kind: Kind,
    user: &'static str,
    roles: Vec<Role>,
    auth: Auth,
}

/// Replaces `{name}` segments with values that exist (or, for ids, cannot).
fn sample_path(path: &str) -> String {
    path.split('/')
        .map(|seg| match seg {
            "{site}" => "T",
            "{bin}" => "A-01-01-1",
            "{sku}" => "S1",
            "{device}" | "{token}" | "{task}" | "{run}" | "{id}" => "999999",
            "{day}" => "2026-03-02",
            s if s.starts_with('{') => {
                panic!("add a sample value for {s} (route {path}) to the access test")
            }
            s => s,
        })
        .collect::<Vec<_>>()
        .join("/")
}

/// What a sender may expect of a route: the policy, restated for the test.
fn allowed(rule: &Rule, who: &Who) -> Result<(), u16> {
    let api = rule.path.starts_with("/api/");
    let bearer = matches!(who.kind, Kind::Device | Kind::Token);
    if bearer && !api && rule.access != Access::Public {
        // Pages take a browser sign-in; a public page ignores a token sent with it.
        return Err(401);
    }
    if who.kind == Kind::Session && api && rule.method != Method::GET {
        // Sessions read the API; writing takes a token.
        return match rule.access {
            Access::Public => Ok(()),
            _ => Err(401),
        };
    }
    match rule.access {
        Access::Public => Ok(()),
        _ if who.kind == Kind::Anonymous => Err(401),
        Access::SignedIn => Ok(()),
        Access::Device if who.kind == Kind::Device => Ok(()),
        Access::Device => Err(403),
        Access::Site(roles) if who.roles.iter().any(|r| roles.contains(r)) => Ok(()),
        Access::Site(_) => Err(403),
    }
}

/// A body that passes authorization but fails validation, so nothing is written.
fn harmless_body(rule: &Rule, who: &Who) -> Body {
    if rule.method == Method::GET || rule.method == Method::DELETE {
        return Body::Empty;
    }
    if rule.path.starts_with("/api/") {
        return Body::Json(json!([]));
    }
    match &who.auth {
        Auth::Session(s) => Body::Form(vec![("csrf".into(), s.csrf.clone())]),
        _ => Body::Form(vec![]),
    }
}

async fn setup() -> (TestApp, Vec<Who>) {
    let app = spawn_app().await;
    app.small_site().await;
    let mut people = Vec::new();
    for (user, role) in PEOPLE {
        let pin = (*role == Role::Counter).then_some(PIN);
        app.add_user(user, "T", &[*role], PASSWORD, pin).await;
        people.push(Who {
            label: format!("{user} ({role}) in a browser"),
            kind: Kind::Session,
            user,
            roles: vec![*role],
            auth: Auth::Session(app.sign_in(user, PASSWORD).await),
        });
    }
    let device = enrolled(&app, "cora").await;
    people.push(Who {
        label: "cora's phone".into(),
        kind: Kind::Device,
        user: "cora",
        roles: vec![Role::Counter],
        auth: Auth::Bearer(device),
    });
    let token = app.issue_token("T", "ines", Role::InventoryManager).await;
    people.push(Who {
        label: "an integration token of ines (inventory manager)".into(),
        kind: Kind::Token,
        user: "ines",
        roles: vec![Role::InventoryManager],
        auth: Auth::Bearer(token),
    });
    people.push(Who {
        label: "anonymous".into(),
        kind: Kind::Anonymous,
        user: "",
        roles: vec![],
        auth: Auth::Anonymous,
    });
    (app, people)
}

async fn enrolled(app: &TestApp, user: &str) -> String {
    let a = app.enrol(user, PIN, "T").await;
    assert_eq!(a.status, 201, "{}", a.text);
    a.json()["token"].as_str().unwrap().to_string()
}

/// Renews a credential that the last request used up (signing out, a phone
/// forgetting itself), so the table goes on with a live one.
async fn renew_if_spent(app: &TestApp, who: &mut Who) {
    let probe = match who.kind {
        Kind::Session => "/sites/T/phone",
        Kind::Device => "/api/v1/device",
        _ => return,
    };
    let a = app.send(Method::GET, probe, &who.auth, Body::Empty).await;
    if a.status != 401 {
        return;
    }
    who.auth = match who.kind {
        Kind::Session => Auth::Session(app.sign_in(who.user, PASSWORD).await),
        _ => Auth::Bearer(enrolled(app, who.user).await),
    };
}

#[tokio::test]
async fn every_route_answers_every_role_as_its_rule_says() {
    let rules = cairn::http::route_rules();
    assert!(rules.len() >= 25, "the table lists {} routes", rules.len());
    let (app, mut people) = setup().await;
    let mut failures = Vec::new();
    for rule in &rules {
        let path = sample_path(rule.path);
        for who in people.iter_mut() {
            let body = harmless_body(rule, who);
            let a = app.send(rule.method.clone(), &path, &who.auth, body).await;
            let expected = allowed(rule, who);
            let ok = match expected {
                Ok(()) => !matches!(a.status, 401 | 403 | 500..=599),
                Err(s) => a.status == s,
            };
            if !ok {
                failures.push(format!(
                    "{} {} as {}: got {}, expected {} ({})",
                    rule.method,
                    rule.path,
                    who.label,
                    a.status,
                    match expected {
                        Ok(()) => "allowed".to_string(),
                        Err(s) => s.to_string(),
                    },
                    a.text.chars().take(120).collect::<String>()
                ));
            }
            if matches!(a.status, 401 | 403) {
                assert!(!a.text.trim().is_empty(), "a refusal says why");
            }
            renew_if_spent(&app, who).await;
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// Text that only book data contains (JSON keys of balances, history and
/// counts, and the column headings of the site summary).
const BOOK_MARKERS: &[&str] = &[
    "\"balances\"",
    "\"movements\"",
    "\"qty\"",
    "\"counts\"",
    "\"watermark\"",
    "<th class=\"n\">Movements</th>",
];

fn book_marker(a: &Answer) -> Option<&'static str> {
    BOOK_MARKERS.iter().copied().find(|m| a.text.contains(m))
}

#[tokio::test]
async fn a_counter_obtains_no_book_quantity_from_any_route() {
    let (app, people) = setup().await;
    // Some stock to hide: 7 boxes of S1 in A-01-01-1.
    let batch = json!([common::movement(
        "b1",
        "A-01-01-1",
        "S1",
        7,
        "receipt",
        "2026-03-02T08:00:00Z"
    )]);
    let (s, b) = app.post("/api/v1/sites/T/movements", &batch).await;
    assert_eq!(s, 200, "{b}");
    // The markers do find book data where it is allowed.
    let ines = people.iter().find(|w| w.kind == Kind::Token).unwrap();
    let seen = app
        .send(
            Method::GET,
            "/api/v1/sites/T/balances",
            &ines.auth,
            Body::Empty,
        )
        .await;
    assert_eq!(seen.status, 200);
    assert_eq!(book_marker(&seen), Some("\"balances\""));

    let counters: Vec<&Who> = people
        .iter()
        .filter(|w| w.roles == [Role::Counter])
        .collect();
    assert_eq!(counters.len(), 2, "a counter's browser and phone");
    for rule in cairn::http::route_rules() {
        // Reads only: a write that answered with book data would be caught too,
        // but writing is refused to counters by the table test already.
        if rule.method != Method::GET {
            continue;
        }
        let path = sample_path(rule.path);
        // The API's document names the book's fields (`balances`, `qty`) but holds no
        // site's data: it is the same answer whoever asks, no credential at all included.
        if rule.path == cairn::http::openapi::DOCUMENT_PATH {
            let anyone = app
                .send(Method::GET, &path, &Auth::Anonymous, Body::Empty)
                .await;
            for who in &counters {
                let a = app.send(Method::GET, &path, &who.auth, Body::Empty).await;
                assert_eq!((a.status, &a.text), (anyone.status, &anyone.text));
            }
            continue;
        }
        for who in &counters {
            let a = app.send(Method::GET, &path, &who.auth, Body::Empty).await;
            if (200..300).contains(&a.status) {
                assert_eq!(
                    book_marker(&a),
                    None,
                    "GET {path} as {} shows book data: {}",
                    who.label,
                    a.text
                );
            }
        }
    }
    // And with every query a book reader might use.
    for path in [
        "/api/v1/sites/T/balances?bin=A-01-01-1",
        "/api/v1/sites/T/balances?sku=S1&at=2026-03-03T00:00:00Z",
        "/api/v1/sites/T/bins/A-01-01-1/movements",
        "/api/v1/sites/T/items/S1/movements",
        "/api/v1/sites/T",
        "/sites/T",
    ] {
        for who in &counters {
            let a = app.send(Method::GET, path, &who.auth, Body::Empty).await;
            assert!(
                matches!(a.status, 401 | 403),
                "GET {path} as {}: {}",
                who.label,
                a.status
            );
            assert!(!a.text.contains('7'), "{}", a.text);
        }
    }
}

#[test]
fn every_site_rule_names_a_site_and_book_routes_exclude_counters() {
    for rule in cairn::http::route_rules() {
        if let Access::Site(roles) = rule.access {
            assert!(rule.path.contains("{site}"), "{}", rule.path);
            let book = rule.path.contains("/balances")
                || rule.path.ends_with("/movements") && rule.method == Method::GET
                || rule.path == "/api/v1/sites/{site}"
                || rule.path == "/sites/{site}"
                || rule.path.contains("/differences")
                || rule.path.ends_with("/adjustments");
            if book {
                assert!(
                    !roles.contains(&Role::Counter),
                    "{} {} shows book data to counters",
                    rule.method,
                    rule.path
                );
            }
        }
    }
}

#[tokio::test]
async fn a_route_added_outside_the_table_is_refused_by_the_guard() {
    use axum::routing::get;
    let dir = tempfile::tempdir().unwrap();
    let state = cairn::AppState::open(cairn::config::Config {
        db: dir.path().join("stray.db").into(),
        ..cairn::config::Config::default()
    })
    .unwrap();
    let guard = cairn::http::access::Guard::new(state.clone(), &cairn::http::route_rules());
    let app = axum::Router::new()
        .route("/stray", get(|| async { "should not be served" }))
        .layer(axum::middleware::from_fn_with_state(
            guard,
            cairn::http::access::authorize,
        ))
        .with_state(state);
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let url = format!("http://{}/stray", listener.local_addr().unwrap());
    tokio::spawn(async move { axum::serve(listener, app).await });
    let r = reqwest::get(url).await.unwrap();
    assert_eq!(r.status().as_u16(), 403);
    assert!(r.text().await.unwrap().contains("no access rule"));
}
