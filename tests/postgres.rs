//! What only the PostgreSQL store has: its migrations recorded and a newer database
//! refused, writes of one site taking turns on the site's advisory lock while another
//! site writes on, a nightly job claimed once across servers, the pool on `/metrics`,
//! `store copy` (every site, or one onto a database serving others: `copy_site.rs`) and
//! TLS as the URL's `sslmode` says (`tls.rs`).
//! Runs when `CAIRN_TEST_STORE` names a PostgreSQL server (see tests/common); says it
//! skipped otherwise.

mod common;
#[path = "postgres/copy_site.rs"]
mod copy_site;
#[path = "postgres/tls.rs"]
mod tls;

use cairn::master::{BinRecord, NewBin};
use cairn::store::postgres::LOCK_SPACE;
use common::{TestApp, spawn_app};
use std::time::Duration;

fn skipped() -> bool {
    if common::on_postgres() {
        return false;
    }
    eprintln!(
        "skipped: set {}=postgres://… to run the PostgreSQL store's own tests",
        common::STORE_SWITCH
    );
    true
}

/// A connection of the test's own to the app's database.
async fn connect(app: &TestApp) -> tokio_postgres::Client {
    let url = &app.pg.as_ref().expect("the app runs on PostgreSQL").url;
    let (config, tls) =
        cairn::store::postgres::connect::read_url(url).expect("the test database URL reads");
    let (client, conn) = config
        .connect(tls)
        .await
        .expect("the test database answers");
    tokio::spawn(conn);
    client
}

fn bin(aisle: u16) -> NewBin {
    BinRecord {
        code: None,
        zone: "A".into(),
        aisle,
        bay: 1,
        level: 1,
        side: Some("L".into()),
        walk_seq: None,
    }
    .validate()
    .expect("a valid bin")
}

#[tokio::test]
async fn migrations_are_recorded_and_a_newer_database_is_refused() {
    if skipped() {
        return;
    }
    let app = spawn_app().await;
    let db = connect(&app).await;
    let versions: Vec<i64> = db
        .query("select version from schema_migration order by version", &[])
        .await
        .unwrap()
        .iter()
        .map(|r| r.get(0))
        .collect();
    assert_eq!(versions, [9, 10, 11, 12]);
    // A result's pass, site and bin are one foreign key (0012), so a result cannot name a
    // site or bin other than its pass's.
    let keys: Vec<String> = db
        .query(
            "select pg_get_constraintdef(oid) from pg_constraint
             where conrelid = 'count_result'::regclass and contype = 'f' order by 1",
            &[],
        )
        .await
        .unwrap()
        .iter()
        .map(|r| r.get(0))
        .collect();
    assert_eq!(
        keys,
        [
            "FOREIGN KEY (item_id) REFERENCES item(id)",
            "FOREIGN KEY (pass_id, site_id, bin_id) REFERENCES count_pass(id, site_id, bin_id)",
            "FOREIGN KEY (superseded_by) REFERENCES count_result(id)",
        ]
    );
    db.execute(
        "insert into schema_migration (version, name, checksum, applied_at) values (99, 'future', 0, 0)",
        &[],
    )
    .await
    .unwrap();
    let url = app.pg.as_ref().unwrap().url.clone();
    let e = cairn::store::open(
        &cairn::store::DbLocation::parse(&url).unwrap(),
        Default::default(),
    )
    .err()
    .expect("a newer schema is refused");
    assert!(format!("{e:#}").contains("newer than this Cairn"), "{e:#}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_sites_writes_wait_for_its_lock_while_another_site_writes() {
    if skipped() {
        return;
    }
    let app = spawn_app().await;
    let t = app.create_site("T").await;
    let u = app.create_site("U").await;
    // Another server holds site T's lock (a session lock here, so it outlives statements).
    let other = connect(&app).await;
    let key = i32::try_from(t.id.0).unwrap();
    other
        .execute("select pg_advisory_lock($1, $2)", &[&LOCK_SPACE, &key])
        .await
        .unwrap();
    let contended = || {
        cairn::telemetry::metrics()
            .db_lock_contended
            .load(std::sync::atomic::Ordering::Relaxed)
    };
    let before = contended();
    let store = app.state.store.clone();
    let site = t.id;
    let waiting = tokio::spawn(async move {
        store
            .put_bins(site, vec![bin(1)], Default::default(), None)
            .await
    });
    tokio::time::sleep(Duration::from_millis(500)).await;
    assert!(!waiting.is_finished(), "T's write went ahead of T's lock");
    let written = tokio::time::timeout(
        Duration::from_secs(10),
        app.state
            .store
            .put_bins(u.id, vec![bin(2)], Default::default(), None),
    )
    .await
    .expect("U writes while T's lock is held")
    .unwrap();
    assert_eq!(written, 1);
    // T's write found its lock held; U's did not (the counter is the process's, and no
    // other test here holds a site's lock).
    assert_eq!(contended() - before, 1, "one write waited for a held lock");
    other
        .execute("select pg_advisory_unlock($1, $2)", &[&LOCK_SPACE, &key])
        .await
        .unwrap();
    let written = tokio::time::timeout(Duration::from_secs(10), waiting)
        .await
        .expect("T's write goes on once the lock is free")
        .unwrap()
        .unwrap();
    assert_eq!(written, 1);
}

#[tokio::test]
async fn a_nightly_job_is_claimed_once_across_servers() {
    if skipped() {
        return;
    }
    let app = spawn_app().await;
    let t = app.create_site("T").await;
    // A second server on the same database.
    let url = app.pg.as_ref().unwrap().url.clone();
    let second = cairn::store::open(
        &cairn::store::DbLocation::parse(&url).unwrap(),
        Default::default(),
    )
    .unwrap();
    let day = chrono::NaiveDate::from_ymd_opt(2026, 12, 4).unwrap();
    let (a, b) = tokio::join!(
        app.state.store.claim_job(t.id, "abc", day, "one:1"),
        second.claim_job(t.id, "abc", day, "two:2")
    );
    let (a, b) = (a.unwrap(), b.unwrap());
    assert!(a ^ b, "exactly one server claims the night: {a} {b}");
    assert!(
        second
            .claim_job(t.id, "abc", day.succ_opt().unwrap(), "two:2")
            .await
            .unwrap()
    );
}

#[tokio::test]
async fn metrics_show_the_pool_and_the_lock_wait() {
    if skipped() {
        return;
    }
    let app = spawn_app().await;
    app.create_site("T").await;
    let text = app
        .client
        .get(format!("{}/metrics", app.base))
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    for name in [
        "cairn_db_pool_connections ",
        "cairn_db_pool_idle ",
        "cairn_db_pool_waiting ",
        "cairn_db_lock_wait_seconds_count ",
        "cairn_db_lock_contended_total ",
    ] {
        assert!(text.contains(name), "{name} missing from /metrics:\n{text}");
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_sqlite_file_copies_onto_an_empty_database_and_reads_the_same() {
    if skipped() {
        return;
    }
    use cairn::demo::{self, DemoSpec};
    use cairn::master::SiteCode;
    use cairn::store::{BalanceQuery, DbLocation, StoreOptions};
    // The source: a small demo site with weeks of counting, on SQLite.
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("demo.db");
    let sqlite =
        cairn::store::open(&DbLocation::File(file.clone()), StoreOptions::default()).unwrap();
    let spec = DemoSpec {
        items: 40,
        bins: 80,
        days: 60,
        end: chrono::NaiveDate::from_ymd_opt(2026, 6, 30).unwrap(),
        history_weeks: 2,
        ..DemoSpec::standard(11)
    };
    demo::generate(sqlite.as_ref(), &spec, false).await.unwrap();
    // The target: the test's empty PostgreSQL database.
    let target = common::PgTestDb::create().expect("the switch is set");
    let report = cairn::store::copy::copy(&file, &target.url, &indicatif::ProgressBar::hidden())
        .await
        .expect("the copy succeeds and checks");
    assert!(report.movements > 1_000, "{report}");
    let pg = cairn::store::open(
        &DbLocation::parse(&target.url).unwrap(),
        StoreOptions::default(),
    )
    .unwrap();
    let code = SiteCode::parse(demo::DEMO_SITE).unwrap();
    let (a, b) = (
        sqlite.site(&code).await.unwrap().unwrap(),
        pg.site(&code).await.unwrap().unwrap(),
    );
    assert_eq!((a.id, a.time_zone), (b.id, b.time_zone));
    let all = BalanceQuery {
        include_zero: true,
        limit: cairn::store::MAX_PAGE_ROWS,
        ..Default::default()
    };
    assert_eq!(
        sqlite.balances(a.id, all.clone()).await.unwrap().balances,
        pg.balances(b.id, all).await.unwrap().balances,
        "the same balances, key by key"
    );
    // A second copy onto the now full database is refused and changes nothing.
    let again = cairn::store::copy::copy(&file, &target.url, &indicatif::ProgressBar::hidden())
        .await
        .expect_err("a non-empty target is refused");
    assert!(again.to_string().contains("already holds"), "{again}");
}

#[test]
fn loadtest_compares_one_and_two_servers_and_drops_its_scratch_database() {
    if skipped() {
        return;
    }
    let admin = std::env::var(common::STORE_SWITCH).unwrap();
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args([
            "loadtest",
            "--db",
            &admin,
            "--phones",
            "2",
            "--sites",
            "2",
            "--seconds",
            "1",
            "--rounds",
            "2",
        ])
        .output()
        .expect("cairn runs");
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{text}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for line in [
        "round 2 of 2\n",
        "1 server: ",
        "2 servers: ",
        "  server 2: ",
        "2 rounds. Two servers' events/s over one server's: median ",
        "Each server of two, CPU an event over the one server's: median ",
    ] {
        assert!(text.contains(line), "{line:?} missing:\n{text}");
    }
    assert!(
        text.contains("(4 figures)"),
        "two rounds, two servers each:\n{text}"
    );
    // Each server wrote its own sites, one phone a site. A site's lock is keyed by the
    // site, so only a write of the same site (a phone's resend after a timeout on a busy
    // machine, a background job) can find it held: rare. Sites sharing a lock would make
    // about every other take wait.
    let mut servers = 0;
    for line in text.lines().filter(|l| l.contains(" site-lock takes, ")) {
        let number_before = |marker: &str| -> u64 {
            let head = &line[..line.find(marker).expect("the figure is printed")];
            head.rsplit(|c: char| !c.is_ascii_digit())
                .next()
                .and_then(|n| n.parse().ok())
                .unwrap_or_else(|| panic!("no figure before {marker:?} in {line:?}"))
        };
        let (takes, held) = (
            number_before(" site-lock takes"),
            number_before(" found it held"),
        );
        assert!(takes > 0, "{line}");
        assert!(
            held * 50 <= takes,
            "too many writes waited: {line}
{text}"
        );
        servers += 1;
    }
    assert_eq!(servers, 6, "one server, then two, twice: {text}");
    let left = common::sql_i64_on(
        Some(&admin),
        std::path::Path::new(""),
        "select count(*) from pg_database where datname like 'cairn_loadtest_%'",
    );
    assert_eq!(left, 0, "the scratch database is dropped");
}
