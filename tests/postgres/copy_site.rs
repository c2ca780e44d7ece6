//! `cairn store copy --site`: one site of a two-site SQLite file onto a PostgreSQL
//! database that already serves another site, with fresh ids there; the same site twice,
//! or a person of the same name who is someone else, refused with the target untouched.

use crate::common::{self, Auth, Body, spawn_app};
use cairn::accounts::audit::{Action, Actor, AuditEvent};
use cairn::accounts::secret;
use cairn::accounts::store::NewUser;
use cairn::accounts::{Role, UserName};
use cairn::demo::{self, DemoSpec};
use cairn::master::SiteCode;
use cairn::store::{BalanceQuery, DbLocation, Store, StoreOptions};
use reqwest::Method;
use std::path::Path;
use std::sync::Arc;

/// A file with two sites: the demo site (weeks of counting: counts, recounts, decisions,
/// adjustments, phones) and a small second site WHS where the demo's admin also works.
async fn two_site_file(dir: &Path) -> (std::path::PathBuf, Arc<dyn Store>) {
    let file = dir.join("two-sites.db");
    let sqlite = cairn::store::open(&DbLocation::File(file.clone()), StoreOptions::default())
        .expect("a new SQLite file opens");
    let kln = DemoSpec {
        items: 40,
        bins: 80,
        days: 60,
        end: chrono::NaiveDate::from_ymd_opt(2026, 6, 30).unwrap(),
        history_weeks: 2,
        ..DemoSpec::standard(11)
    };
    demo::generate(sqlite.as_ref(), &kln, false).await.unwrap();
    let whs = DemoSpec {
        site_code: SiteCode::parse("WHS").unwrap(),
        site_name: "Wharf Street depot".into(),
        items: 10,
        bins: 20,
        days: 20,
        ..kln.clone()
    };
    demo::generate(sqlite.as_ref(), &whs, false).await.unwrap();
    let site = sqlite.site(&whs.site_code).await.unwrap().unwrap();
    sqlite
        .set_roles(
            &UserName::parse("ada").unwrap(),
            site.id,
            vec![Role::Admin],
            AuditEvent::now(Actor::System, Action::RolesChanged, "ada").at_site(site.id),
        )
        .await
        .unwrap();
    (file, sqlite)
}

/// Every table of a PostgreSQL database with its row count and a digest of its rows:
/// what a refused copy must leave as it was.
fn fingerprint(url: &str) -> Vec<Vec<String>> {
    let none = Path::new("");
    let tables = common::sql_rows_on(
        Some(url),
        none,
        "select table_name::text from information_schema.tables
         where table_schema = current_schema() and table_type = 'BASE TABLE'
         order by 1",
    );
    tables
        .into_iter()
        .flat_map(|t| {
            common::sql_rows_on(
                Some(url),
                none,
                &format!(
                    "select '{0}', count(*)::text, coalesce(md5(string_agg(t::text, '|'
                                                   order by t::text)), '')
                     from {0} t",
                    t[0]
                ),
            )
        })
        .collect()
}

fn all_balances() -> BalanceQuery {
    BalanceQuery {
        include_zero: true,
        limit: cairn::store::MAX_PAGE_ROWS,
        ..Default::default()
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn one_site_of_a_file_joins_a_database_serving_another_site_and_is_served() {
    if super::skipped() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let (file, sqlite) = two_site_file(dir.path()).await;
    // The target: a running server on PostgreSQL that holds a site with weeks of
    // counting of its own (its people other accounts than the file's, so other names),
    // so every table's ids are taken where the copied site's would start.
    let other = dir.path().join("nth.db");
    let nth = DemoSpec {
        site_code: SiteCode::parse("NTH").unwrap(),
        site_name: "North yard".into(),
        items: 20,
        bins: 40,
        days: 30,
        end: chrono::NaiveDate::from_ymd_opt(2026, 6, 30).unwrap(),
        history_weeks: 2,
        ..DemoSpec::standard(12)
    };
    let nth_store =
        cairn::store::open(&DbLocation::File(other.clone()), StoreOptions::default()).unwrap();
    demo::generate(nth_store.as_ref(), &nth, false)
        .await
        .unwrap();
    drop(nth_store);
    common::sqlite_file(&other)
        .execute("update user_account set name = name || '_nth'", [])
        .unwrap();
    let app = spawn_app().await;
    let url = app.pg.as_ref().expect("on PostgreSQL").url.clone();
    cairn::store::copy::copy(&other, &url, &indicatif::ProgressBar::hidden())
        .await
        .expect("the other site fills the target");
    let kln = SiteCode::parse(demo::DEMO_SITE).unwrap();

    // The file's second site first, through the command line, so the target's tables
    // hold rows (and ids) of two sites before the demo site comes.
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["store", "copy", "--from"])
        .arg(&file)
        .args(["--to", &url, "--site", "WHS"])
        .output()
        .unwrap();
    let said = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{said}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        said.contains("site WHS") && said.contains("1 user(s) added"),
        "{said}"
    );

    let report =
        cairn::store::copy::copy_site(&file, &url, &kln, &indicatif::ProgressBar::hidden())
            .await
            .expect("the site copies and checks");
    let text = report.to_string();
    assert!(report.movements > 1_000, "{text}");
    assert!(
        text.contains("movements, balances, count lines, count results, decisions, people"),
        "{text}"
    );
    // ada works at both sites: one account, kept, with her roles at each.
    assert_eq!(report.site.as_ref().unwrap().users_kept, ["ada"], "{text}");
    assert_eq!(
        app.sql_i64("select count(*) from user_account where name = 'ada'"),
        1
    );
    assert_eq!(
        app.sql_i64(
            "select count(*) from user_role r join user_account u on u.id = r.user_id
             join site s on s.id = r.site_id where u.name = 'ada' and s.code in ('KLN', 'WHS')"
        ),
        2
    );

    let src = sqlite.site(&kln).await.unwrap().unwrap();
    let dst = app.state.store.site(&kln).await.unwrap().unwrap();
    assert_ne!(src.id, dst.id, "the site got an id of the target's");
    assert_eq!(
        sqlite
            .balances(src.id, all_balances())
            .await
            .unwrap()
            .balances,
        app.state
            .store
            .balances(dst.id, all_balances())
            .await
            .unwrap()
            .balances,
        "the same balances, key by key"
    );
    for (what, sql) in [
        (
            "movements",
            "select count(*) from movement m join site s on s.id = m.site_id",
        ),
        (
            "results",
            "select count(*) from count_result m join site s on s.id = m.site_id",
        ),
        (
            "passes",
            "select count(*) from count_pass m join site s on s.id = m.site_id",
        ),
        (
            "audit events",
            "select count(*) from audit_event m join site s on s.id = m.site_id",
        ),
    ] {
        let sql = format!("{sql} where s.code = '{}'", demo::DEMO_SITE);
        assert_eq!(
            common::sql_i64_on(None, &file, &sql),
            app.sql_i64(&sql),
            "{what} of the site"
        );
    }
    // Every sequence hands out ids above what its table holds now.
    for table in [
        "site",
        "bin",
        "item",
        "movement",
        "count_pass",
        "count_result",
        "audit_event",
        "user_account",
    ] {
        assert_eq!(
            app.sql_i64(&format!(
                "select case when nextval(pg_get_serial_sequence('{table}', 'id'))
                                  > (select coalesce(max(id), 0) from {table})
                             then 1::int8 else 0::int8 end"
            )),
            1,
            "{table}'s sequence"
        );
    }

    // Ids inside texts name the same rows on the target: a decision's audit subject, a
    // recount task's detail.
    let results: std::collections::HashSet<String> = app
        .sql_rows(
            "select cast(r.id as text) from count_result r join site s on s.id = r.site_id
             where s.code = 'KLN'",
        )
        .into_iter()
        .map(|r| r[0].clone())
        .collect();
    let subjects = app.sql_rows(
        "select substr(a.subject, 12) from audit_event a join site s on s.id = a.site_id
         where s.code = 'KLN' and a.subject like 'difference %'",
    );
    assert!(!subjects.is_empty(), "the demo's decisions are audited");
    for s in &subjects {
        assert!(
            results.contains(&s[0]),
            "difference {} is not a result of KLN",
            s[0]
        );
    }
    let details = app.sql_rows(
        "select t.detail from count_task t join count_list l on l.id = t.list_id
         join site s on s.id = l.site_id where s.code = 'KLN' and t.detail like '%(result%'",
    );
    assert!(!details.is_empty(), "the demo has recounts");
    for d in &details {
        let named = d[0]
            .split_once("(result")
            .map(|(_, ids)| ids.trim_start_matches('s').trim_start())
            .unwrap_or("");
        for id in named
            .split(", ")
            .map(|i| i.split([' ', ')']).next().unwrap_or(""))
        {
            assert!(results.contains(id), "{}: result {id} is not KLN's", d[0]);
        }
    }

    // The running server serves the copied site to its people, with their passwords.
    let bruno = app.sign_in("bruno", "demo-only-bruno-supervisor").await;
    let page = app
        .send(
            Method::GET,
            "/api/v1/sites/KLN/balances?include_zero=true&limit=1000",
            &Auth::Session(bruno),
            Body::Empty,
        )
        .await;
    assert_eq!(page.status, 200, "{}", page.text);
    assert_eq!(
        page.json()["balances"],
        serde_json::to_value(
            sqlite
                .balances(src.id, all_balances())
                .await
                .unwrap()
                .balances
        )
        .unwrap()
    );

    // The same site again: refused, the target as it was.
    let before = fingerprint(&url);
    let again = cairn::store::copy::copy_site(&file, &url, &kln, &indicatif::ProgressBar::hidden())
        .await
        .expect_err("the site is there already");
    assert!(
        again.to_string().contains("already holds site KLN"),
        "{again}"
    );
    assert_eq!(
        fingerprint(&url),
        before,
        "a refused copy changed the target"
    );

    // The target's own site under another code: its movements' uids are taken already, so
    // it is refused (by the table it stopped at) and the target stays as it was.
    common::sqlite_file(&other)
        .execute("update site set code = 'NT2' where code = 'NTH'", [])
        .unwrap();
    let e = cairn::store::copy::copy_site(
        &other,
        &url,
        &SiteCode::parse("NT2").unwrap(),
        &indicatif::ProgressBar::hidden(),
    )
    .await
    .expect_err("the same movements twice");
    let e = format!("{e:#}");
    assert!(
        e.contains("table movement: the target already holds a row with the same unique value")
            && e.contains("nothing was written"),
        "{e}"
    );
    assert_eq!(
        fingerprint(&url),
        before,
        "a refused copy changed the target"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_person_of_the_same_name_who_is_someone_else_refuses_the_copy() {
    if super::skipped() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let (file, _) = two_site_file(dir.path()).await;
    let target = common::PgTestDb::create().expect("on PostgreSQL");
    let store = cairn::store::open(
        &DbLocation::parse(&target.url).unwrap(),
        StoreOptions::default(),
    )
    .unwrap();
    let t = store
        .create_site(cairn::master::NewSite {
            code: SiteCode::parse("T").unwrap(),
            name: "Test T".into(),
            time_zone: cairn::time::day::SiteZone::UTC,
        })
        .await
        .unwrap();
    // Another bruno, with a password of his own.
    store
        .create_user(
            NewUser {
                name: UserName::parse("bruno").unwrap(),
                display_name: "Bruno from T".into(),
                password: secret::hash(secret::Secret::new("another-bruno"))
                    .await
                    .unwrap(),
                pin: None,
                roles: vec![(t.id, Role::Counter)],
            },
            AuditEvent::now(Actor::System, Action::UserCreated, "bruno"),
        )
        .await
        .unwrap();
    let before = fingerprint(&target.url);
    let e = cairn::store::copy::copy_site(
        &file,
        &target.url,
        &SiteCode::parse(demo::DEMO_SITE).unwrap(),
        &indicatif::ProgressBar::hidden(),
    )
    .await
    .expect_err("two people named bruno are not merged");
    let e = e.to_string();
    assert!(
        e.contains("user(s) bruno ") && e.contains("nothing was written"),
        "{e}"
    );
    assert_eq!(
        fingerprint(&target.url),
        before,
        "a refused copy changed the target"
    );
    // A site the file does not hold is named with those it does.
    let e = cairn::store::copy::copy_site(
        &file,
        &target.url,
        &SiteCode::parse("NOPE").unwrap(),
        &indicatif::ProgressBar::hidden(),
    )
    .await
    .expect_err("no such site");
    assert!(
        e.to_string()
            .contains("holds no site NOPE (it holds: KLN, WHS)"),
        "{e}"
    );
}
