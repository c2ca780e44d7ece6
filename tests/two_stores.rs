//! The same work on both stores gives the same books. The demo site's counting weeks
//! (the ledger's movements, the counters' passes through the sync workflow, netting,
//! blind recounts, settling, automatic adjustments and the manager's decisions) are
//! generated once on a SQLite file and once on PostgreSQL from the same seed, and then
//! compared on natural keys (codes, SKUs, the passes' own ids), never on the stores' row
//! ids: balances, every movement, every netting row, every count task, every review and
//! every automatic adjustment. tests/sim.rs compares the phones' sync traffic over HTTP
//! the same way.
//!
//! Runs when `CAIRN_TEST_STORE` names a PostgreSQL server; says it skipped otherwise.

mod common;

use cairn::AppState;
use cairn::config::Config;
use cairn::demo::{self, DemoSpec};
use cairn::store::DbLocation;
use std::collections::BTreeMap;
use std::path::Path;

/// What a store holds after the work, as text rows keyed for comparison.
type Books = BTreeMap<&'static str, Vec<String>>;

/// Statements both engines answer (text casts, booleans through `case`), one per aspect.
const ASPECTS: &[(&str, &str)] = &[
    (
        "balances",
        "select b.code, i.sku, x.lot, cast(x.qty as text)
         from balance x join bin b on b.id = x.bin_id join item i on i.id = x.item_id
         where x.qty <> 0",
    ),
    // A manager's adjustment gets a new id when it is posted, so those are compared by
    // what they say, the rest by their own ids too.
    (
        "movements",
        "select case when m.kind = 'count_adjustment' then '' else m.uid end, b.code, i.sku,
                m.lot, cast(m.qty as text), m.kind, cast(m.event_at as text), m.source,
                m.doc_ref, m.actor,
                coalesce((select r.uid from movement r where r.id = m.reverses), '')
         from movement m join bin b on b.id = m.bin_id join item i on i.id = m.item_id",
    ),
    (
        "count passes",
        "select p.uid, b.code, u.name, case when p.empty then '1' else '0' end,
                case when p.reassigned then '1' else '0' end, coalesce(p.held, ''),
                cast(p.first_at as text), coalesce(cast(p.done_at as text), ''),
                cast(p.uncertainty_ms as text)
         from count_pass p join bin b on b.id = p.bin_id join user_account u on u.id = p.user_id",
    ),
    (
        "count lines",
        "select l.uid, p.uid, i.sku, l.lot, cast(l.qty as text)
         from count_line l join count_pass p on p.id = l.pass_id
         join item i on i.id = l.item_id",
    ),
    (
        "netting rows",
        "select p.uid, i.sku, r.lot, coalesce(r.class, ''), cast(r.counted as text),
                cast(r.f_star as text), cast(r.variance as text), r.status, r.verdict,
                cast(r.unit_cost_minor as text), cast(r.counted_at as text),
                cast(r.window_start as text), cast(r.window_end as text),
                cast(r.settles_at as text), case when r.settled then '1' else '0' end,
                case when r.superseded_by is null then 'current' else 'superseded' end,
                r.renet_reason, coalesce(r.recount_outcome, ''),
                case when r.first_count_wrong then '1' else '0' end
         from count_result r join count_pass p on p.id = r.pass_id
         join item i on i.id = r.item_id",
    ),
    (
        "count tasks",
        "select l.day, b.code, t.reason, coalesce(t.class, ''), t.detail, cast(t.lines as text),
                t.status, case when t.supervisor then '1' else '0' end, t.withdrawn_reason,
                coalesce((select p.uid || ' ' || i.sku from count_result r
                          join count_pass p on p.id = r.pass_id join item i on i.id = r.item_id
                          where r.id = t.recount_of), '')
         from count_task t join count_list l on l.id = t.list_id join bin b on b.id = t.bin_id",
    ),
    (
        "reviews",
        "select p.uid, i.sku, r.lot, v.decision, v.reason_code, v.note, u.name,
                cast(v.decided_at as text),
                coalesce((select cast(m.qty as text) from movement m where m.id = v.movement_id), '')
         from count_review v join count_result r on r.id = v.result_id
         join count_pass p on p.id = r.pass_id join item i on i.id = r.item_id
         join user_account u on u.id = v.decided_by",
    ),
    (
        "automatic adjustments",
        "select p.uid, i.sku, r.lot, cast(m.qty as text), m.kind, cast(m.event_at as text)
         from count_auto_adjustment a join count_result r on r.id = a.result_id
         join count_pass p on p.id = r.pass_id join item i on i.id = r.item_id
         join movement m on m.id = a.movement_id",
    ),
];

fn books(pg: Option<&str>, file: &Path) -> Books {
    // A count's adjustment gets a new id when it is posted, and the id shows in the reason
    // a later row was netted again: named by its place among the adjustments instead.
    let adjustments: Vec<String> = common::sql_rows_on(
        pg,
        file,
        "select m.uid from movement m join bin b on b.id = m.bin_id
         join item i on i.id = m.item_id where m.kind = 'count_adjustment'
         order by m.event_at, b.code, i.sku, m.lot, m.qty",
    )
    .into_iter()
    .map(|r| r[0].clone())
    .collect();
    ASPECTS
        .iter()
        .map(|(name, sql)| {
            let mut rows: Vec<String> = common::sql_rows_on(pg, file, sql)
                .into_iter()
                .map(|r| {
                    let mut row = r.join(" | ");
                    for (n, uid) in adjustments.iter().enumerate() {
                        row = row.replace(uid, &format!("<adjustment {n}>"));
                    }
                    row
                })
                .collect();
            rows.sort();
            (*name, rows)
        })
        .collect()
}

/// Generates the small demo site with its counting weeks on `db`.
async fn demo_on(db: DbLocation) {
    let state = AppState::open(Config {
        db,
        ..Config::default()
    })
    .expect("the store opens");
    demo::generate(state.store.as_ref(), &DemoSpec::small(7), false)
        .await
        .expect("the demo site generates");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_demo_weeks_give_the_same_books_on_sqlite_and_postgresql() {
    let Some(pg) = common::PgTestDb::create() else {
        eprintln!(
            "skipped: set {}=postgres://… to compare the two stores",
            common::STORE_SWITCH
        );
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("demo.db");
    demo_on(file.clone().into()).await;
    demo_on(DbLocation::Postgres(pg.url.clone())).await;
    let (lite, post) = (books(None, &file), books(Some(&pg.url), &file));
    for (aspect, rows) in &lite {
        let other = &post[aspect];
        // Counts first, so a failure says how big the difference is before what it is.
        assert_eq!(
            rows.len(),
            other.len(),
            "{aspect}: {} rows on SQLite, {} on PostgreSQL",
            rows.len(),
            other.len()
        );
        let differ: Vec<_> = rows
            .iter()
            .zip(other)
            .filter(|(a, b)| a != b)
            .take(5)
            .collect();
        assert!(
            differ.is_empty(),
            "{aspect} differ (SQLite, then PostgreSQL): {differ:#?}"
        );
    }
    // The comparison means something only if the weeks did all of it.
    for aspect in [
        "balances",
        "movements",
        "count passes",
        "netting rows",
        "count tasks",
        "reviews",
        "automatic adjustments",
    ] {
        assert!(!lite[aspect].is_empty(), "the demo weeks made no {aspect}");
    }
    assert!(
        lite["count tasks"].iter().any(|t| t.contains(" recount ")),
        "the demo weeks sent a recount"
    );
    eprintln!(
        "the same on both stores: {}",
        lite.iter()
            .map(|(k, v)| format!("{} {k}", v.len()))
            .collect::<Vec<_>>()
            .join(", ")
    );
}
