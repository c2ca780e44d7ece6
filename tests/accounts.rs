//! Accounts end to end: form tokens, sign-in throttling, sessions, phones,
//! integration tokens, the audit trail and the `cairn user` commands.

mod common;

use cairn::accounts::Role;
use cairn::accounts::UserName;
use cairn::accounts::throttle::{LOCKED_TEXT, MAX_ACCOUNT_FAILURES, MAX_ADDRESS_FAILURES};
use common::{
    Auth, Body, ROOT_PASSWORD, ROOT_USER, TestApp, cairn_with_input, movement, spawn_app,
};
use reqwest::Method;
use serde_json::json;

/// Test-only secrets.
const PASSWORD: &str = "test-only-password";
const PIN: &str = "4821";

fn form(fields: &[(&str, &str)]) -> Body {
    Body::Form(
        fields
            .iter()
            .map(|(k, v)| (k.to_string(), v.to_string()))
            .collect(),
    )
}

async fn user_exists(app: &TestApp, name: &str) -> bool {
    app.state
        .store
        .user(&UserName::parse(name).unwrap())
        .await
        .unwrap()
        .is_some()
}

fn count(app: &TestApp, sql: &str) -> i64 {
    app.sql_i64(sql)
}

#[tokio::test]
async fn a_form_post_without_its_token_is_refused_and_changes_nothing() {
    let app = spawn_app().await;
    app.small_site().await;
    let admin = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let auth = Auth::Session(admin.clone());
    let new_user = [
        ("name", "newbie"),
        ("password", "a long enough password"),
        ("role", "counter"),
    ];
    let audit_before = count(&app, "select count(*) from audit_event");
    let a = app
        .send(Method::POST, "/sites/T/admin/users", &auth, form(&new_user))
        .await;
    assert_eq!(a.status, 400, "{}", a.text);
    assert!(a.text.contains("security token"), "{}", a.text);
    let mut wrong = new_user.to_vec();
    wrong.push(("csrf", "not-the-token"));
    let a = app
        .send(Method::POST, "/sites/T/admin/users", &auth, form(&wrong))
        .await;
    assert_eq!(a.status, 400, "{}", a.text);
    assert!(!user_exists(&app, "newbie").await, "nothing was written");
    assert_eq!(
        count(&app, "select count(*) from audit_event"),
        audit_before
    );
    // The same form with the session's token goes through.
    let mut right = new_user.to_vec();
    right.push(("csrf", admin.csrf.as_str()));
    let a = app
        .send(Method::POST, "/sites/T/admin/users", &auth, form(&right))
        .await;
    assert_eq!(a.status, 303, "{}", a.text);
    assert!(user_exists(&app, "newbie").await);
}

#[tokio::test]
async fn sign_out_without_the_token_is_refused_and_with_it_ends_the_session_on_the_server() {
    let app = spawn_app().await;
    app.small_site().await;
    let s = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let auth = Auth::Session(s.clone());
    let a = app.send(Method::POST, "/sign-out", &auth, form(&[])).await;
    assert_eq!(a.status, 400);
    assert_eq!(
        app.send(Method::GET, "/", &auth, Body::Empty).await.status,
        200
    );
    let a = app
        .send(Method::POST, "/sign-out", &auth, form(&[("csrf", &s.csrf)]))
        .await;
    assert_eq!(a.status, 303);
    assert_eq!(count(&app, "select count(*) from web_session"), 0);
    let a = app.send(Method::GET, "/", &auth, Body::Empty).await;
    assert_eq!(a.status, 303, "the old cookie opens nothing");
    assert_eq!(a.headers["location"], "/sign-in");
    let a = app.send(Method::GET, "/sites/T", &auth, Body::Empty).await;
    assert_eq!(a.status, 401, "the old cookie opens nothing");
}

#[tokio::test]
async fn the_sign_in_after_the_limit_is_refused_even_with_the_right_password() {
    let app = spawn_app().await;
    app.small_site().await;
    for _ in 0..MAX_ACCOUNT_FAILURES {
        let a = app.try_sign_in(ROOT_USER, "wrong password here").await;
        assert_eq!(a.status, 401);
        assert!(a.text.contains("The user name or password is wrong."));
    }
    let a = app.try_sign_in(ROOT_USER, ROOT_PASSWORD).await;
    assert_eq!(a.status, 429, "{}", a.text);
    assert!(a.text.contains(&LOCKED_TEXT[..40]), "{}", a.text);
    assert!(a.cookie("cairn_session").is_none());
    // An admin lifts the lock; the account signs in again.
    app.add_user("other", "T", &[Role::Admin], PASSWORD, None)
        .await;
    let other = app.sign_in("other", PASSWORD).await;
    let a = app
        .send(
            Method::POST,
            "/sites/T/admin/unlock",
            &Auth::Session(other.clone()),
            form(&[("csrf", &other.csrf), ("user", ROOT_USER)]),
        )
        .await;
    assert_eq!(a.status, 303, "{}", a.text);
    assert_eq!(app.try_sign_in(ROOT_USER, ROOT_PASSWORD).await.status, 303);
}

#[tokio::test]
async fn an_unknown_name_is_answered_exactly_like_a_wrong_password() {
    let app = spawn_app().await;
    app.small_site().await;
    let known = app.try_sign_in(ROOT_USER, "wrong password here").await;
    let unknown = app.try_sign_in("nobody", "wrong password here").await;
    assert_eq!((known.status, unknown.status), (401, 401));
    let strip = |t: &str| {
        t.replace("value=\"root\"", "")
            .replace("value=\"nobody\"", "")
    };
    let (k, u) = (strip(&known.text), strip(&unknown.text));
    let k = k.replace(&common::form_token(&k).unwrap(), "");
    let u = u.replace(&common::form_token(&u).unwrap(), "");
    assert_eq!(
        k, u,
        "the page is the same but for the typed name and form token"
    );
    for _ in 1..MAX_ACCOUNT_FAILURES {
        app.try_sign_in("nobody", "wrong password here").await;
    }
    let a = app.try_sign_in("nobody", "wrong password here").await;
    assert_eq!(a.status, 429, "unknown names lock like known ones");
}

#[tokio::test]
async fn too_many_failures_from_one_address_block_every_account_from_it() {
    let app = spawn_app().await;
    app.small_site().await;
    for i in 0..MAX_ADDRESS_FAILURES {
        let a = app
            .try_sign_in(&format!("guess{i}"), "wrong password here")
            .await;
        assert_eq!(a.status, 401);
    }
    let a = app.try_sign_in(ROOT_USER, ROOT_PASSWORD).await;
    assert_eq!(a.status, 429, "{}", a.text);
}

#[tokio::test]
async fn an_admin_lifts_an_address_lock_and_sign_ins_from_it_work_again() {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_user("other", "T", &[Role::Admin], PASSWORD, None)
        .await;
    let other = app.sign_in("other", PASSWORD).await;
    for i in 0..MAX_ADDRESS_FAILURES {
        app.try_sign_in(&format!("guess{i}"), "wrong password here")
            .await;
    }
    assert_eq!(app.try_sign_in(ROOT_USER, ROOT_PASSWORD).await.status, 429);
    let admin = Auth::Session(other.clone());
    let lift = |address: &'static str| {
        app.send(
            Method::POST,
            "/sites/T/admin/unlock-address",
            &admin,
            form(&[("csrf", &other.csrf), ("address", address)]),
        )
    };
    let a = lift("not an address").await;
    assert_eq!(a.status, 400, "{}", a.text);
    assert_eq!(app.try_sign_in(ROOT_USER, ROOT_PASSWORD).await.status, 429);
    let a = lift("127.0.0.1").await;
    assert_eq!(a.status, 303, "{}", a.text);
    assert_eq!(app.try_sign_in(ROOT_USER, ROOT_PASSWORD).await.status, 303);
}

#[tokio::test]
async fn a_phone_enrols_with_a_pin_and_a_revoked_token_is_refused_at_once() {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_user("cora", "T", &[Role::Counter], PASSWORD, Some(PIN))
        .await;
    app.add_user("ines", "T", &[Role::InventoryManager], PASSWORD, Some(PIN))
        .await;
    assert_eq!(app.enrol("cora", "0000", "T").await.status, 401);
    let a = app.enrol("ines", PIN, "T").await;
    assert_eq!(a.status, 403, "only counters enrol phones: {}", a.text);
    let a = app.enrol("cora", PIN, "T").await;
    assert_eq!(a.status, 201, "{}", a.text);
    let enrolled = a.json();
    let token = enrolled["token"].as_str().unwrap().to_string();
    assert!(token.starts_with("cairn_dev_"));
    assert_eq!(enrolled["site"], "T");
    assert!(enrolled["server_time"].is_string());
    let phone = Auth::Bearer(token.clone());
    let me = app
        .send(Method::GET, "/api/v1/device", &phone, Body::Empty)
        .await;
    assert_eq!(me.status, 200, "{}", me.text);
    assert_eq!(me.json()["roles"], json!(["counter"]));
    // Only the digest is stored.
    assert_eq!(
        count(
            &app,
            &format!("select count(*) from device where token_hash like '%{token}%'")
        ),
        0
    );
    let admin = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let id = enrolled["device_id"].as_i64().unwrap();
    let list = app
        .send(
            Method::GET,
            "/sites/T/admin/devices",
            &Auth::Session(admin.clone()),
            Body::Empty,
        )
        .await;
    assert!(list.text.contains("test phone"), "{}", list.text);
    let a = app
        .send(
            Method::POST,
            &format!("/sites/T/admin/devices/{id}/revoke"),
            &Auth::Session(admin.clone()),
            form(&[("csrf", &admin.csrf)]),
        )
        .await;
    assert_eq!(a.status, 303, "{}", a.text);
    let me = app
        .send(Method::GET, "/api/v1/device", &phone, Body::Empty)
        .await;
    assert_eq!(me.status, 401, "{}", me.text);
    assert!(me.json()["error"].as_str().unwrap().contains("revoked"));
}

#[tokio::test]
async fn a_phone_that_forgets_itself_is_refused_afterwards() {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_user("cora", "T", &[Role::Counter], PASSWORD, Some(PIN))
        .await;
    let token = app.enrol("cora", PIN, "T").await.json()["token"]
        .as_str()
        .unwrap()
        .to_string();
    let phone = Auth::Bearer(token);
    let a = app
        .send(Method::DELETE, "/api/v1/device", &phone, Body::Empty)
        .await;
    assert_eq!(a.status, 204);
    let a = app
        .send(Method::GET, "/api/v1/device", &phone, Body::Empty)
        .await;
    assert_eq!(a.status, 401);
}

#[tokio::test]
async fn bad_credentials_get_401_a_role_above_its_rights_403_and_nothing_is_written() {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_user("pia", "T", &[Role::Planner], PASSWORD, None)
        .await;
    app.add_user("cora", "T", &[Role::Counter], PASSWORD, Some(PIN))
        .await;
    let planner = Auth::Bearer(app.issue_token("T", "pia", Role::Planner).await);
    let phone = Auth::Bearer(
        app.enrol("cora", PIN, "T").await.json()["token"]
            .as_str()
            .unwrap()
            .to_string(),
    );
    let batch = json!([movement(
        "x1",
        "A-01-01-1",
        "S1",
        5,
        "receipt",
        "2026-03-02T08:00:00Z"
    )]);
    let post = |auth: Auth| {
        let batch = batch.clone();
        let app = &app;
        async move {
            app.send(
                Method::POST,
                "/api/v1/sites/T/movements",
                &auth,
                Body::Json(batch),
            )
            .await
        }
    };
    for (auth, status) in [
        (Auth::Anonymous, 401),
        (Auth::Bearer("cairn_api_madeup".into()), 401),
        (Auth::Bearer("not even a token".into()), 401),
        (planner.clone(), 403),
        (phone, 403),
    ] {
        let a = post(auth.clone()).await;
        assert_eq!(a.status, status, "{auth:?}: {}", a.text);
        assert!(a.json()["error"].is_string(), "a plain message: {}", a.text);
    }
    assert_eq!(count(&app, "select count(*) from movement"), 0);
    // A token whose user loses the role stops working at once.
    let root = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let reader = |a: Auth| {
        let app = &app;
        async move {
            app.send(Method::GET, "/api/v1/sites/T/balances", &a, Body::Empty)
                .await
                .status
        }
    };
    assert_eq!(reader(planner.clone()).await, 200);
    let a = app
        .send(
            Method::POST,
            "/sites/T/admin/roles",
            &Auth::Session(root.clone()),
            form(&[
                ("csrf", &root.csrf),
                ("user", "pia"),
                ("role", "supervisor"),
            ]),
        )
        .await;
    assert_eq!(a.status, 303, "{}", a.text);
    assert_eq!(reader(planner).await, 403);
}

#[tokio::test]
async fn the_audit_trail_records_who_did_what_and_refuses_update_and_delete() {
    let app = spawn_app().await;
    app.small_site().await;
    app.try_sign_in(ROOT_USER, "wrong password here").await;
    let root = app.sign_in(ROOT_USER, ROOT_PASSWORD).await;
    let (s, _) = app
        .post(
            "/api/v1/sites/T/movements",
            &json!([movement(
                "a1",
                "A-01-01-1",
                "S1",
                2,
                "receipt",
                "2026-03-02T08:00:00Z"
            )]),
        )
        .await;
    assert_eq!(s, 200);
    let csv = app
        .send(
            Method::GET,
            "/sites/T/admin/audit.csv",
            &Auth::Session(root.clone()),
            Body::Empty,
        )
        .await;
    assert_eq!(csv.status, 200);
    assert!(
        csv.text
            .starts_with("id,at,site,actor,action,subject,address,detail")
    );
    for action in ["sign_in_failed", "sign_in", "api_batch"] {
        assert!(
            csv.text.contains(&format!(",{action},")),
            "{action} in {}",
            csv.text
        );
    }
    assert!(!csv.text.contains(ROOT_PASSWORD));
    let page = app
        .send(
            Method::GET,
            "/sites/T/admin/audit",
            &Auth::Session(root),
            Body::Empty,
        )
        .await;
    assert!(page.text.contains("api_batch"));

    let update = app
        .sql_exec("update audit_event set actor = 'someone else'")
        .unwrap_err();
    assert!(update.contains("append-only"), "{update}");
    let delete = app.sql_exec("delete from audit_event").unwrap_err();
    assert!(delete.contains("append-only"), "{delete}");
    assert!(count(&app, "select count(*) from audit_event") >= 3);
}

#[tokio::test]
async fn the_cli_makes_the_first_admin_of_a_new_site_who_can_then_sign_in() {
    let app = spawn_app().await;
    app.create_site("N").await;
    let db = app.db_arg();
    let out = cairn_with_input(
        &[
            "user",
            "add",
            "--db",
            &db,
            "--site",
            "N",
            "--name",
            "Nora",
            "--roles",
            "admin,counter",
            "--with-pin",
            "--password-stdin",
        ],
        "test-only-nora-password\n2580\n",
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let printed = String::from_utf8_lossy(&out.stdout);
    assert!(!printed.contains("test-only-nora-password"), "{printed}");
    let s = app.sign_in("nora", "test-only-nora-password").await;
    let a = app
        .send(
            Method::GET,
            "/sites/N/admin/users",
            &Auth::Session(s),
            Body::Empty,
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.text);
    assert_eq!(app.enrol("nora", "2580", "N").await.status, 201);

    let out = cairn_with_input(
        &[
            "user",
            "passwd",
            "--db",
            &db,
            "--name",
            "nora",
            "--password-stdin",
        ],
        "short\n",
    );
    assert!(!out.status.success(), "a short password is refused");
    let out = cairn_with_input(
        &[
            "user", "roles", "--db", &db, "--site", "N", "--name", "nora", "--set", "planner",
        ],
        "",
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let n = count(
        &app,
        "select count(*) from audit_event where action = 'roles_changed' and actor = 'cli'",
    );
    assert_eq!(n, 1);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn parallel_guesses_cannot_slip_under_the_limit() {
    let app = std::sync::Arc::new(spawn_app().await);
    app.small_site().await;
    let mut guesses = tokio::task::JoinSet::new();
    for _ in 0..3 * MAX_ACCOUNT_FAILURES {
        let app = app.clone();
        guesses.spawn(async move {
            app.try_sign_in(ROOT_USER, "wrong password here")
                .await
                .status
        });
    }
    let mut checked = 0;
    while let Some(status) = guesses.join_next().await {
        match status.unwrap() {
            401 => checked += 1,
            429 => {}
            other => panic!("unexpected status {other}"),
        }
    }
    assert_eq!(
        checked, MAX_ACCOUNT_FAILURES,
        "only the allowed guesses were checked"
    );
    assert_eq!(app.try_sign_in(ROOT_USER, ROOT_PASSWORD).await.status, 429);
}

#[tokio::test]
async fn an_admin_changes_the_sites_time_zone_on_the_users_page_and_it_is_audited() {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_user("ada", "T", &[Role::Admin], PASSWORD, None)
        .await;
    let ada = app.sign_in("ada", PASSWORD).await;
    let page = app
        .send(
            Method::GET,
            "/sites/T/admin/users",
            &Auth::Session(ada.clone()),
            Body::Empty,
        )
        .await;
    assert_eq!(page.status, 200);
    assert!(
        page.text.contains("action=\"/sites/T/admin/zone\""),
        "{}",
        page.text
    );
    let send = |zone: &'static str| {
        let ada = ada.clone();
        let app = &app;
        async move {
            app.send(
                Method::POST,
                "/sites/T/admin/zone",
                &Auth::Session(ada.clone()),
                form(&[("csrf", &ada.csrf), ("time_zone", zone)]),
            )
            .await
        }
    };
    let refused = send("+05:30").await;
    assert_eq!(refused.status, 400, "{}", refused.text);
    assert!(
        refused
            .text
            .contains("IANA zone name such as Europe/Berlin"),
        "{}",
        refused.text
    );
    assert_eq!(
        count(&app, "select count(*) from site where time_zone = 'UTC'"),
        1
    );
    let saved = send("Asia/Kathmandu").await;
    assert_eq!(saved.status, 303, "{}", saved.text);
    assert_eq!(
        count(
            &app,
            "select count(*) from site where time_zone = 'Asia/Kathmandu'"
        ),
        1
    );
    assert_eq!(
        count(
            &app,
            "select count(*) from audit_event where action = 'site_zone_changed'
             and detail = '{\"now\":\"Asia/Kathmandu\",\"was\":\"UTC\"}'"
        ),
        1
    );
}
