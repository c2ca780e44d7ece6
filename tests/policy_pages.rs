//! The count-policy page over real HTTP with real browser sign-ins: an
//! inventory manager saves tolerances and review limits, movement sources'
//! timing and reason codes, and the JSON policy routes read back what was
//! saved; people without the policy role read but cannot save; forms without
//! their token are refused; bad input is named field by field and changes
//! nothing; a save over a list changed meanwhile is refused.

mod common;

use cairn::accounts::Role;
use common::{
    Answer, Auth, Body, PASSWORD, Session, TestApp, attr, form_fields, spawn_app, unescape,
};
use reqwest::Method;
use serde_json::{Value, json};

const PAGE: &str = "/sites/T/count-policy";
const SETTINGS: &str = "/sites/T/count-policy/settings";
const SOURCES: &str = "/sites/T/count-policy/sources";
const REASONS: &str = "/sites/T/count-policy/reason-codes";

/// Site T with ines (inventory manager), sam (supervisor), pia (planner) and
/// cora (counter).
async fn site(app: &TestApp) {
    app.small_site().await;
    app.add_people(&[
        ("ines", &[Role::InventoryManager], None),
        ("sam", &[Role::Supervisor], None),
        ("pia", &[Role::Planner], None),
        ("cora", &[Role::Counter], Some("4821")),
    ])
    .await;
}

async fn get(app: &TestApp, s: &Session, path: &str) -> Answer {
    app.send(Method::GET, path, &Auth::Session(s.clone()), Body::Empty)
        .await
}

async fn post(app: &TestApp, s: &Session, path: &str, fields: &[(String, String)]) -> Answer {
    app.send(
        Method::POST,
        path,
        &Auth::Session(s.clone()),
        Body::Form(fields.to_vec()),
    )
    .await
}

/// The value a form sends for `name` ("" when it sends none).
fn value<'a>(fields: &'a [(String, String)], name: &str) -> &'a str {
    fields
        .iter()
        .find(|(k, _)| k == name)
        .map_or("", |(_, v)| v.as_str())
}

/// Sets (or adds) a field, as a person typing or ticking a box would.
fn set(fields: &mut Vec<(String, String)>, name: &str, v: &str) {
    match fields.iter_mut().find(|(k, _)| k == name) {
        Some(f) => f.1 = v.to_string(),
        None => fields.push((name.to_string(), v.to_string())),
    }
}

/// The row index under which a list form sends `key` in field `name.{i}`.
fn row_of(fields: &[(String, String)], name: &str, key: &str) -> usize {
    fields
        .iter()
        .find_map(|(k, v)| {
            (v == key)
                .then(|| k.strip_prefix(&format!("{name}.")))
                .flatten()
                .and_then(|i| i.parse().ok())
        })
        .unwrap_or_else(|| panic!("no {name} '{key}' in the form: {fields:?}"))
}

/// The input tag named `name` in the page.
fn input<'a>(html: &'a str, name: &str) -> &'a str {
    let at = html
        .find(&format!("name=\"{name}\""))
        .unwrap_or_else(|| panic!("no input {name}"));
    let start = html[..at].rfind("<input").expect("inside an input tag");
    &html[start..at + html[at..].find('>').unwrap()]
}

/// The whole policy as the JSON API reads it (root's token).
async fn policy(app: &TestApp) -> Value {
    let mut all = json!({});
    for part in ["settings", "sources", "reason-codes"] {
        let (s, v) = app.get(&format!("/api/v1/sites/T/netting/{part}")).await;
        assert_eq!(s, 200, "{v}");
        all[part] = v;
    }
    all
}

/// The audit trail's count-policy changes, oldest first: actor, subject, detail.
fn policy_audit(app: &TestApp) -> Vec<(String, String, Value)> {
    app.sql_rows(
        "select actor, subject, detail from audit_event
         where action = 'count_policy_changed' order by id",
    )
    .into_iter()
    .map(|r| {
        (
            r[0].clone(),
            r[1].clone(),
            serde_json::from_str(&r[2]).unwrap(),
        )
    })
    .collect()
}

#[tokio::test]
async fn a_manager_saves_each_form_and_the_json_api_reads_the_new_values() {
    let app = spawn_app().await;
    site(&app).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    for from in ["/sites/T", "/sites/T/differences"] {
        let a = get(&app, &ines, from).await;
        assert_eq!(a.status, 200, "{}", a.text);
        assert!(
            a.text.contains(&format!("href=\"{PAGE}\"")),
            "{from} links to the count policy: {}",
            a.text
        );
    }
    let page = get(&app, &ines, PAGE).await;
    assert_eq!(page.status, 200, "{}", page.text);
    let text = unescape(&page.text);
    assert!(
        text.contains("which count differences reach a person")
            && text.contains("your company's own controls"),
        "the caution: {text}"
    );

    // Tolerances and limits: the form starts from the defaults (A exact, B 2 %,
    // C 5 %: common practice, no source; limits 500.00 and 50.00 are ours).
    let mut f = form_fields(&page.text, SETTINGS);
    assert_eq!(
        [
            value(&f, "a_units"),
            value(&f, "b_percent"),
            value(&f, "c_percent"),
            value(&f, "manager_value"),
            value(&f, "bulk_value"),
        ],
        ["0", "2", "5", "500.00", "50.00"],
        "{f:?}"
    );
    assert_eq!(value(&f, "csrf"), ines.csrf);
    for (k, v) in [
        ("a_units", "1"),
        ("a_value", "12.50"),
        ("b_percent", "2.5"),
        ("c_percent", ""),
        ("c_value", "20"),
        ("auto_adjust", "on"),
        ("manager_value", "400"),
        ("bulk_value", "25.5"),
    ] {
        set(&mut f, k, v);
    }
    let saved = post(&app, &ines, SETTINGS, &f).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    assert_eq!(
        saved.headers["location"],
        "/sites/T/count-policy?saved=settings"
    );
    let (_, settings) = app.get("/api/v1/sites/T/netting/settings").await;
    assert_eq!(
        settings,
        json!({
            "tolerances": {
                "a": {"units": 1, "percent_bp": null, "value_minor": 1250},
                "b": {"units": null, "percent_bp": 250, "value_minor": null},
                "c": {"units": null, "percent_bp": null, "value_minor": 2000}
            },
            "auto_adjust": true,
            "manager_value_minor": 40000,
            "bulk_value_minor": 2550
        })
    );
    let back = get(&app, &ines, "/sites/T/count-policy?saved=settings").await;
    assert!(back.text.contains("Saved: tolerances"), "{}", back.text);
    let f = form_fields(&back.text, SETTINGS);
    assert_eq!(value(&f, "b_percent"), "2.5");
    assert_eq!(value(&f, "auto_adjust"), "on", "the box stays ticked");

    // Sources: add one, change it and add another, then remove the first.
    let mut f = form_fields(&back.text, SOURCES);
    set(&mut f, "new_source", "host");
    set(&mut f, "new_uncertainty_s", "2.5");
    set(&mut f, "new_lag_s", "900");
    let saved = post(&app, &ines, SOURCES, &f).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    let (_, sources) = app.get("/api/v1/sites/T/netting/sources").await;
    assert_eq!(
        sources,
        json!([{"source": "host", "uncertainty_ms": 2500, "posting_lag_ms": 900000}])
    );
    let page = get(&app, &ines, PAGE).await;
    let mut f = form_fields(&page.text, SOURCES);
    let host = row_of(&f, "source", "host");
    assert_eq!(value(&f, &format!("uncertainty_s.{host}")), "2.5");
    assert_eq!(value(&f, &format!("lag_s.{host}")), "900");
    set(&mut f, &format!("lag_s.{host}"), "600");
    set(&mut f, "new_source", "scanner gun");
    set(&mut f, "new_uncertainty_s", "0.5");
    set(&mut f, "new_lag_s", "0");
    let saved = post(&app, &ines, SOURCES, &f).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    let (_, sources) = app.get("/api/v1/sites/T/netting/sources").await;
    assert_eq!(
        sources,
        json!([
            {"source": "host", "uncertainty_ms": 2500, "posting_lag_ms": 600000},
            {"source": "scanner gun", "uncertainty_ms": 500, "posting_lag_ms": 0}
        ])
    );
    let page = get(&app, &ines, PAGE).await;
    let mut f = form_fields(&page.text, SOURCES);
    let host = row_of(&f, "source", "host");
    set(&mut f, &format!("remove.{host}"), "on");
    let saved = post(&app, &ines, SOURCES, &f).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    let (_, sources) = app.get("/api/v1/sites/T/netting/sources").await;
    assert_eq!(
        sources,
        json!([{"source": "scanner gun", "uncertainty_ms": 500, "posting_lag_ms": 0}])
    );

    // Reason codes: none stored yet, so the page shows the ones reviewers are
    // offered; relabel one, remove one, add one.
    let (_, stored) = app.get("/api/v1/sites/T/netting/reason-codes").await;
    assert_eq!(stored, json!([]));
    let mut f = form_fields(&page.text, REASONS);
    let shown: Vec<(String, String)> = f
        .iter()
        .filter_map(|(k, code)| {
            let i = k.strip_prefix("code.")?;
            Some((code.clone(), value(&f, &format!("label.{i}")).to_string()))
        })
        .collect();
    assert!(shown.len() >= 3, "{shown:?}");
    let (relabel, remove) = (shown[0].0.clone(), shown[1].0.clone());
    let (relabel_row, remove_row) = (row_of(&f, "code", &relabel), row_of(&f, "code", &remove));
    set(
        &mut f,
        &format!("label.{relabel_row}"),
        "Damaged in the aisle",
    );
    set(&mut f, &format!("remove.{remove_row}"), "on");
    set(&mut f, "new_code", "shrink");
    set(&mut f, "new_label", "Shrinkage found at count");
    let saved = post(&app, &ines, REASONS, &f).await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    assert_eq!(
        saved.headers["location"],
        "/sites/T/count-policy?saved=reason-codes"
    );
    let mut want: Vec<Value> = shown
        .iter()
        .filter(|(c, _)| *c != remove)
        .map(|(c, l)| {
            let label = if *c == relabel {
                "Damaged in the aisle"
            } else {
                l.as_str()
            };
            json!({"code": c, "label": label})
        })
        .chain([json!({"code": "shrink", "label": "Shrinkage found at count"})])
        .collect();
    want.sort_by_key(|v| v["code"].as_str().unwrap().to_string());
    let (_, stored) = app.get("/api/v1/sites/T/netting/reason-codes").await;
    assert_eq!(stored, Value::Array(want));

    // Each save is in the audit trail: who, which part, and the value it set.
    let trail = policy_audit(&app);
    for part in ["settings", "sources", "reason-codes"] {
        assert!(
            trail
                .iter()
                .any(|(actor, subject, _)| actor.contains("ines") && subject == part),
            "{part} in {trail:?}"
        );
    }
    let mut last = trail.last().unwrap().2["now"].as_array().unwrap().clone();
    last.sort_by_key(|v| v["code"].as_str().unwrap().to_string());
    assert_eq!(
        Value::Array(last),
        stored,
        "the last change names the new list"
    );
}

#[tokio::test]
async fn people_without_the_policy_role_read_the_page_but_cannot_save_it() {
    let app = spawn_app().await;
    site(&app).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let full = get(&app, &ines, PAGE).await;
    let before = policy(&app).await;
    for who in ["sam", "pia"] {
        let s = app.sign_in(who, PASSWORD).await;
        let page = get(&app, &s, PAGE).await;
        assert_eq!(page.status, 200, "{who} reads: {}", page.text);
        assert!(page.text.contains("id=\"read-only\""), "{}", page.text);
        assert_eq!(page.text.matches("<fieldset disabled>").count(), 3);
        assert!(!page.text.contains("<button type=\"submit\">Save"));
        for action in [SETTINGS, SOURCES, REASONS] {
            // The manager's own form, complete and valid, sent with this
            // person's session and form token.
            let mut f = form_fields(&full.text, action);
            set(&mut f, "csrf", &s.csrf);
            set(&mut f, "new_source", "host");
            set(&mut f, "new_uncertainty_s", "1");
            set(&mut f, "new_lag_s", "1");
            let a = post(&app, &s, action, &f).await;
            assert_eq!(a.status, 403, "{who} posts {action}: {}", a.text);
            assert!(a.text.contains("inventory manager"), "{}", a.text);
        }
    }
    let cora = app.sign_in("cora", PASSWORD).await;
    let page = get(&app, &cora, PAGE).await;
    assert_eq!(page.status, 403, "a counter is refused the page");
    for action in [SETTINGS, SOURCES, REASONS] {
        let mut f = form_fields(&full.text, action);
        set(&mut f, "csrf", &cora.csrf);
        let a = post(&app, &cora, action, &f).await;
        assert_eq!(a.status, 403, "cora posts {action}");
    }
    let anonymous = app
        .send(Method::GET, PAGE, &Auth::Anonymous, Body::Empty)
        .await;
    assert_eq!(anonymous.status, 401);
    assert_eq!(policy(&app).await, before, "nothing changed");
}

#[tokio::test]
async fn a_form_without_its_token_or_with_another_sessions_is_refused() {
    let app = spawn_app().await;
    site(&app).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let other = app.sign_in("ines", PASSWORD).await;
    assert_ne!(ines.csrf, other.csrf, "each session has its own token");
    let page = get(&app, &ines, PAGE).await;
    let before = policy(&app).await;
    for action in [SETTINGS, SOURCES, REASONS] {
        let mut valid = form_fields(&page.text, action);
        set(&mut valid, "manager_value", "1");
        set(&mut valid, "new_source", "host");
        set(&mut valid, "new_uncertainty_s", "1");
        set(&mut valid, "new_lag_s", "1");
        set(&mut valid, "new_code", "shrink");
        set(&mut valid, "new_label", "Shrinkage");
        let missing: Vec<(String, String)> =
            valid.iter().filter(|(k, _)| k != "csrf").cloned().collect();
        let mut wrong = valid.clone();
        set(&mut wrong, "csrf", "not-the-token");
        let mut foreign = valid.clone();
        set(&mut foreign, "csrf", &other.csrf);
        for (what, fields) in [
            ("no token", missing),
            ("a wrong token", wrong),
            ("another session's token", foreign),
        ] {
            let a = post(&app, &ines, action, &fields).await;
            assert_eq!(a.status, 400, "{action} with {what}: {}", a.text);
            assert!(a.text.contains("security token"), "{}", a.text);
        }
    }
    assert_eq!(policy(&app).await, before, "nothing changed");
}

/// Which form, the fields typed, and what the refusal must say about which field.
struct Bad {
    action: &'static str,
    typed: &'static [(&'static str, &'static str)],
    field: &'static str,
    says: &'static str,
}

#[tokio::test]
async fn bad_input_names_the_field_says_why_and_changes_nothing() {
    let app = spawn_app().await;
    site(&app).await;
    let (s, b) = app
        .put(
            "/api/v1/sites/T/netting/sources",
            &json!([{"source": "host", "uncertainty_ms": 1000, "posting_lag_ms": 60000}]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let ines = app.sign_in("ines", PASSWORD).await;
    let before = policy(&app).await;
    let cases = [
        Bad {
            action: SETTINGS,
            typed: &[("b_units", "-1")],
            field: "b_units",
            says: "Class B units: '-1' must not be negative",
        },
        Bad {
            action: SETTINGS,
            typed: &[("c_percent", "150")],
            field: "c_percent",
            says: "Class C percent: '150' is more than 100 %",
        },
        Bad {
            action: SETTINGS,
            typed: &[("a_percent", "2.555")],
            field: "a_percent",
            says: "Class A percent: '2.555' has more than 2 decimal places",
        },
        Bad {
            action: SETTINGS,
            typed: &[("a_value", "-0.01")],
            field: "a_value",
            says: "Class A value: '-0.01' must not be negative",
        },
        Bad {
            action: SETTINGS,
            typed: &[("manager_value", "")],
            field: "manager_value",
            says: "Only an inventory manager approves above: a value is required",
        },
        Bad {
            action: SETTINGS,
            typed: &[("bulk_value", "ten")],
            field: "bulk_value",
            says: "Bulk approval offered below: 'ten' is not a number",
        },
        Bad {
            action: SOURCES,
            typed: &[("lag_s.0", "-5")],
            field: "lag_s.0",
            says: "Posting lag of 'host' (seconds): '-5' must not be negative",
        },
        Bad {
            action: SOURCES,
            typed: &[("uncertainty_s.0", "1,5")],
            field: "uncertainty_s.0",
            says: "Clock uncertainty of 'host' (seconds): '1,5' is not a number",
        },
        Bad {
            action: SOURCES,
            typed: &[
                ("new_source", "host"),
                ("new_uncertainty_s", "1"),
                ("new_lag_s", "1"),
            ],
            field: "new_source",
            says: "New source: 'host' is already listed",
        },
        Bad {
            action: REASONS,
            typed: &[("label.0", "  ")],
            field: "label.0",
            says: "must not be empty",
        },
        Bad {
            action: REASONS,
            typed: &[("new_code", "damaged"), ("new_label", "Again")],
            field: "new_code",
            says: "New reason code 'damaged' is already in the list",
        },
        Bad {
            action: REASONS,
            typed: &[("new_code", "two words"), ("new_label", "Two words")],
            field: "new_code",
            says: "use 1 to 32 letters, digits, '_' or '-' (no spaces)",
        },
        Bad {
            action: REASONS,
            typed: &[
                ("new_code", "auto_within_tolerance"),
                ("new_label", "Small one"),
            ],
            field: "new_code",
            says: "is kept for automatic adjustments",
        },
        Bad {
            action: REASONS,
            typed: &[("new_code", "shrink"), ("new_label", "")],
            field: "new_label",
            says: "Label of 'shrink' must not be empty",
        },
    ];
    let page = get(&app, &ines, PAGE).await;
    for c in &cases {
        let mut f = form_fields(&page.text, c.action);
        for (k, v) in c.typed {
            set(&mut f, k, v);
        }
        let a = post(&app, &ines, c.action, &f).await;
        let text = unescape(&a.text);
        assert_eq!(a.status, 422, "{:?}: {text}", c.typed);
        assert!(
            text.contains(c.says),
            "{:?} says '{}': {text}",
            c.typed,
            c.says
        );
        assert!(
            input(&a.text, c.field).contains("aria-invalid=\"true\""),
            "{} is marked: {}",
            c.field,
            input(&a.text, c.field)
        );
        for (k, v) in c.typed {
            if !v.trim().is_empty() {
                assert_eq!(
                    attr(input(&a.text, k), "value").as_deref(),
                    Some(*v),
                    "{k} keeps what was typed"
                );
            }
        }
    }
    // Removing every reason code would leave reviewers nothing to choose.
    let mut f = form_fields(&page.text, REASONS);
    let rows: Vec<String> = f
        .iter()
        .filter_map(|(k, _)| k.strip_prefix("code.").map(str::to_string))
        .collect();
    for i in rows {
        set(&mut f, &format!("remove.{i}"), "on");
    }
    let a = post(&app, &ines, REASONS, &f).await;
    assert_eq!(a.status, 422, "{}", a.text);
    assert!(
        a.text.contains("Keep at least one reason code"),
        "{}",
        a.text
    );
    assert_eq!(policy(&app).await, before, "nothing changed");

    // The JSON route keeps the same bound on a percentage.
    let mut settings = before["settings"].clone();
    settings["tolerances"]["c"] = json!({"percent_bp": 10_001});
    let (s, b) = app.put("/api/v1/sites/T/netting/settings", &settings).await;
    assert_eq!(s, 400, "{b}");
    assert!(b["error"].as_str().unwrap().contains("tolerances.c"), "{b}");
    assert_eq!(policy(&app).await, before, "nothing changed");
}

#[tokio::test]
async fn a_list_changed_since_the_page_was_opened_is_not_overwritten() {
    let app = spawn_app().await;
    site(&app).await;
    let ines = app.sign_in("ines", PASSWORD).await;
    let page = get(&app, &ines, PAGE).await;
    // Meanwhile a host system sets a source and the reason codes.
    let dock = json!([{"source": "dock", "uncertainty_ms": 0, "posting_lag_ms": 300000}]);
    let codes = json!([{"code": "found", "label": "Found elsewhere"}]);
    for (path, body) in [
        ("/api/v1/sites/T/netting/sources", &dock),
        ("/api/v1/sites/T/netting/reason-codes", &codes),
    ] {
        let (s, b) = app.put(path, body).await;
        assert_eq!(s, 200, "{b}");
    }
    let trail = policy_audit(&app);
    assert_eq!(
        trail
            .iter()
            .map(|(_, subject, d)| (subject.as_str(), &d["now"]))
            .collect::<Vec<_>>(),
        [("sources", &dock), ("reason-codes", &codes)],
        "the host's changes are in the audit trail"
    );
    let before = policy(&app).await;
    let mut sources = form_fields(&page.text, SOURCES);
    set(&mut sources, "new_source", "host");
    set(&mut sources, "new_uncertainty_s", "1");
    set(&mut sources, "new_lag_s", "60");
    let mut reasons = form_fields(&page.text, REASONS);
    set(&mut reasons, "new_code", "shrink");
    set(&mut reasons, "new_label", "Shrinkage");
    for (action, f) in [(SOURCES, sources), (REASONS, reasons)] {
        let a = post(&app, &ines, action, &f).await;
        assert_eq!(a.status, 409, "{action}: {}", a.text);
        assert!(
            a.text.contains("changed since this page was opened"),
            "{}",
            a.text
        );
    }
    assert_eq!(policy(&app).await, before, "what was saved meanwhile stays");
    assert_eq!(policy_audit(&app), trail, "a refused save is not audited");
    assert_eq!(before["sources"], dock);
    assert_eq!(before["reason-codes"], codes);
}
