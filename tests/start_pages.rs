//! Where signing in takes each person and the navigation bar of a site's pages, over
//! real HTTP: a start page per role, a bar with exactly the pages the person's roles
//! open, and a signed-out visitor sent to sign in. The bar hides links only; the
//! routes still refuse (checked here for a page each role is not shown).

mod common;

use cairn::accounts::Role;
use cairn::accounts::audit::{Action, Actor, AuditEvent};
use common::{Answer, Auth, Body, PASSWORD, Session, TestApp, spawn_app};
use reqwest::Method;

/// Every link a book reader's bar holds, in order.
const READER_LINKS: [&str; 6] = [
    "/sites/T/phone",
    "/sites/T/count-lists",
    "/sites/T/differences",
    "/sites/T/accuracy",
    "/sites/T/buffer",
    "/sites/T/count-policy",
];
const ADMIN_LINKS: [&str; 4] = [
    "/sites/T/admin/users",
    "/sites/T/admin/devices",
    "/sites/T/admin/tokens",
    "/sites/T/admin/audit",
];

fn location(a: &Answer) -> String {
    a.headers
        .get("location")
        .unwrap_or_else(|| panic!("a redirect, got {}: {}", a.status, a.text))
        .to_str()
        .unwrap()
        .to_string()
}

/// The hrefs of the site's navigation bar on a page, in order.
fn bar(html: &str) -> Vec<String> {
    let Some(from) = html.find(r#"<nav class="site-nav"#) else {
        return Vec::new();
    };
    let nav = &html[from..from + html[from..].find("</nav>").expect("the bar ends")];
    nav.split(r#"href=""#)
        .skip(1)
        .map(|s| s.split('"').next().unwrap().to_string())
        .collect()
}

async fn get(app: &TestApp, s: &Session, path: &str) -> Answer {
    app.send(Method::GET, path, &Auth::Session(s.clone()), Body::Empty)
        .await
}

/// Signs `user` in as a browser would; returns where the sign-in sent them and the session.
async fn sign_in(app: &TestApp, user: &str) -> (String, Session) {
    let a = app.try_sign_in(user, PASSWORD).await;
    assert_eq!(a.status, 303, "sign-in of {user}: {}", a.text);
    let to = location(&a);
    let s = Session {
        cookie: a.cookie("cairn_session").expect("a session cookie"),
        csrf: String::new(),
    };
    (to, s)
}

async fn site_with_one_person_per_role() -> TestApp {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_people(&[
        ("cora", &[Role::Counter], Some("4821")),
        ("sam", &[Role::Supervisor], None),
        ("ines", &[Role::InventoryManager], None),
        ("pia", &[Role::Planner], None),
        ("adam", &[Role::Admin], None),
        ("mo", &[Role::Supervisor, Role::InventoryManager], None),
    ])
    .await;
    app
}

#[tokio::test]
async fn a_signed_out_visitor_of_the_start_is_sent_to_sign_in() {
    let app = spawn_app().await;
    app.small_site().await;
    let a = app
        .send(Method::GET, "/", &Auth::Anonymous, Body::Empty)
        .await;
    assert_eq!(a.status, 303, "{}", a.text);
    assert_eq!(location(&a), "/sign-in");
    // A site's page still refuses a visitor who is not signed in.
    let a = app
        .send(
            Method::GET,
            "/sites/T/accuracy",
            &Auth::Anonymous,
            Body::Empty,
        )
        .await;
    assert_eq!(a.status, 401);
}

#[tokio::test]
async fn each_role_lands_on_its_work_and_sees_exactly_the_pages_it_may_open() {
    let app = site_with_one_person_per_role().await;
    let admin_bar: Vec<&str> = READER_LINKS.iter().chain(&ADMIN_LINKS).copied().collect();
    let cases: [(&str, &str, Vec<&str>, &str); 6] = [
        // who, where signing in takes them, their bar, a page they are not shown
        (
            "cora",
            "/sites/T/phone",
            vec!["/sites/T/phone"],
            "/sites/T/count-lists",
        ),
        (
            "sam",
            "/sites/T/count-lists",
            READER_LINKS.to_vec(),
            "/sites/T/admin/users",
        ),
        (
            "ines",
            "/sites/T/differences",
            READER_LINKS.to_vec(),
            "/sites/T/admin/users",
        ),
        (
            "pia",
            "/sites/T/buffer",
            READER_LINKS.to_vec(),
            "/sites/T/admin/audit",
        ),
        ("adam", "/sites/T/admin/users", admin_bar, ""),
        // Several roles: the inventory manager's work comes first.
        (
            "mo",
            "/sites/T/differences",
            READER_LINKS.to_vec(),
            "/sites/T/admin/tokens",
        ),
    ];
    for (user, start, links, hidden) in cases {
        let (to, s) = sign_in(&app, user).await;
        assert_eq!(to, start, "{user} lands on their work");
        let mut page = get(&app, &s, &to).await;
        if user == "sam" {
            // The count list opens on today's list of the site.
            assert_eq!(page.status, 303, "{}", page.text);
            let today = location(&page);
            assert!(today.starts_with("/sites/T/count-lists/20"), "{today}");
            page = get(&app, &s, &today).await;
        }
        assert_eq!(page.status, 200, "{user} at {to}: {}", page.text);
        assert_eq!(bar(&page.text), links, "{user}'s bar on their start page");
        // Every page on the bar opens, and shows the same bar.
        for link in &links {
            let mut a = get(&app, &s, link).await;
            if a.status == 303 {
                a = get(&app, &s, &location(&a)).await;
            }
            assert_eq!(a.status, 200, "{user} opens {link}: {}", a.text);
            assert_eq!(bar(&a.text), links, "{user}'s bar on {link}");
        }
        // A page left off the bar is still refused by its route.
        if !hidden.is_empty() {
            let a = get(&app, &s, hidden).await;
            assert_eq!(a.status, 403, "{user} opens {hidden}: {}", a.text);
        }
    }
}

#[tokio::test]
async fn the_counters_start_page_says_how_to_open_the_phone_app_and_what_to_mind() {
    let app = site_with_one_person_per_role().await;
    let (to, s) = sign_in(&app, "cora").await;
    let page = get(&app, &s, &to).await;
    assert_eq!(page.status, 200);
    let host = app.base.trim_start_matches("http://");
    for says in [
        &format!("<code>{host}/app/</code>") as &str,
        r#"href="/app/""#,
        "<strong>PIN</strong>",
        "lift trucks",
        "never the racking",
        "Your site's own rules",
    ] {
        assert!(page.text.contains(says), "{says}: {}", page.text);
    }
}

#[tokio::test]
async fn someone_at_two_sites_lands_on_the_list_of_their_sites_with_a_start_page_each() {
    let app = site_with_one_person_per_role().await;
    let u = app.create_site("U").await;
    app.state
        .store
        .set_roles(
            &cairn::accounts::UserName::parse("pia").unwrap(),
            u.id,
            vec![Role::Counter],
            AuditEvent::now(Actor::System, Action::RolesChanged, "pia"),
        )
        .await
        .unwrap();
    let (to, s) = sign_in(&app, "pia").await;
    assert_eq!(to, "/");
    let home = get(&app, &s, "/").await;
    assert_eq!(home.status, 200);
    assert!(
        home.text
            .contains(r#"<a href="/sites/T/buffer"><strong>Start page"#)
    );
    assert!(
        home.text
            .contains(r#"<a href="/sites/U/phone"><strong>Start page"#)
    );
    assert!(
        bar(&home.text).is_empty(),
        "the list of sites has no site's bar"
    );
}
