//! Tests of the PostgreSQL ledger and master data against a plain model (the sum of
//! deltas), on the real server the suites' switch names (`CAIRN_TEST_STORE`); each test
//! makes a database of its own and drops it. Without the switch they say so and pass.
//! The ledger is written through `ledger::write_batch` (no re-netting), so these hold the
//! ledger's SQL on its own.

use super::PgStore;
use crate::ledger::{MovementKind, NewMovement, RecordOutcome};
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::master::{BinRecord, ItemPackRecord, ItemRecord, NewSite, SiteCode, SiteId};
use crate::store::{
    BalanceQuery, HistoryQuery, HistorySubject, Progress, Store, StoreError, StoreOptions,
    WriteScope,
};
use crate::time::Timestamp;
use rand::{Rng, SeedableRng};

const BINS: [&str; 2] = ["A-01-01-1", "A-01-02-1"];
const SKUS: [&str; 2] = ["S1", "S2"];

/// A database of one test's own, dropped with it.
struct TestDb {
    admin: String,
    name: String,
}

impl TestDb {
    fn create() -> Option<(Self, String)> {
        Self::create_with("")
    }

    /// Creates the database with `options` added to `create database` (a collation).
    fn create_with(options: &str) -> Option<(Self, String)> {
        let admin = std::env::var("CAIRN_TEST_STORE")
            .ok()
            .filter(|v| !v.trim().is_empty());
        let Some(admin) = admin else {
            eprintln!("skipped: CAIRN_TEST_STORE names no PostgreSQL server");
            return None;
        };
        let name = format!(
            "cairn_unit_{}_{}",
            std::process::id(),
            &uuid::Uuid::now_v7().simple().to_string()[20..]
        );
        admin_sql(&admin, &format!("create database {name} {options}"));
        let base = admin.rsplit_once('/').map_or(admin.as_str(), |(b, _)| b);
        let url = format!("{base}/{name}");
        Some((Self { admin, name }, url))
    }
}

impl Drop for TestDb {
    fn drop(&mut self) {
        admin_sql(
            &self.admin,
            &format!("drop database if exists {} with (force)", self.name),
        );
    }
}

fn admin_sql(admin: &str, sql: &str) {
    let (admin, sql) = (admin.to_string(), sql.to_string());
    std::thread::spawn(move || {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .expect("a runtime for the admin statement");
        rt.block_on(async {
            let (config, tls) = super::connect::read_url(&admin).expect("the switch's URL reads");
            let (client, conn) = config
                .connect(tls)
                .await
                .expect("the switch's server answers");
            let driver = tokio::spawn(conn);
            client
                .batch_execute(&sql)
                .await
                .expect("the admin statement runs");
            drop(client);
            let _ = driver.await;
        });
    })
    .join()
    .expect("the admin statement's thread ends");
}

/// Opens a fresh store with a snapshot every `every` movements of a key, with one site
/// holding two bins and two items.
async fn fresh(url: &str, every: i64) -> (PgStore, SiteId) {
    let options = StoreOptions {
        snapshot_every: every,
        ..StoreOptions::default()
    };
    let url = url.to_string();
    let store = tokio::task::spawn_blocking(move || PgStore::open(&url, options))
        .await
        .unwrap()
        .unwrap();
    let site = store
        .create_site(NewSite {
            code: SiteCode::parse("T").unwrap(),
            name: "Test".into(),
            time_zone: crate::time::day::SiteZone::UTC,
        })
        .await
        .unwrap();
    let bins: Vec<_> = (1..=2)
        .map(|bay| {
            BinRecord {
                code: None,
                zone: "A".into(),
                aisle: 1,
                bay,
                level: 1,
                side: None,
                walk_seq: None,
            }
            .validate()
            .unwrap()
        })
        .collect();
    store
        .put_bins(site.id, bins, Progress::default(), None)
        .await
        .unwrap();
    let items: Vec<_> = SKUS
        .iter()
        .map(|s| {
            ItemRecord {
                sku: (*s).into(),
                description: "Test item".into(),
                base_unit: "each".into(),
                unit_cost_minor: 100,
                lot_tracked: false,
                group: None,
                packs: None,
                class: None,
            }
            .validate()
            .unwrap()
        })
        .collect();
    store
        .put_items(site.id, items, Progress::default(), None)
        .await
        .unwrap();
    (store, site.id)
}

fn mv(uid: &str, bin: usize, sku: usize, qty: i64, at: i64) -> NewMovement {
    NewMovement {
        uid: MovementUid::parse(uid).unwrap(),
        bin: BinCode::parse(BINS[bin]).unwrap(),
        sku: Sku::parse(SKUS[sku]).unwrap(),
        lot: String::new(),
        expiry: None,
        qty,
        kind: MovementKind::Adjustment,
        event_at: Timestamp(at),
        source: "test".into(),
        doc_ref: String::new(),
        actor: String::new(),
        reverses: None,
        recorded_at: None,
    }
}

async fn write(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewMovement>,
) -> Result<RecordOutcome, StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let (out, _) = crate::ledger::write_batch(
                tx,
                site,
                &rows,
                Timestamp(10_000_000),
                &Progress::default(),
            )?;
            Ok(out)
        })
        .await
}

/// Reads the balance of one key now (`at` None) or as of an instant, through the store.
async fn balance(store: &PgStore, site: SiteId, bin: usize, sku: usize, at: Option<i64>) -> i64 {
    let page = store
        .balances(
            site,
            BalanceQuery {
                bin: Some(BinCode::parse(BINS[bin]).unwrap()),
                sku: Some(Sku::parse(SKUS[sku]).unwrap()),
                at: at.map(Timestamp),
                include_zero: true,
                limit: 10,
                ..BalanceQuery::default()
            },
        )
        .await
        .unwrap();
    page.balances.iter().map(|b| b.qty).sum()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn balances_now_and_as_of_equal_the_sum_of_deltas_under_snapshots() {
    let Some((_db, url)) = TestDb::create() else {
        return;
    };
    // A snapshot every 3 movements of a key makes late arrivals fall under snapshots.
    let (store, site) = fresh(&url, 3).await;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(20);
    let mut model: Vec<(usize, usize, i64, i64)> = Vec::new();
    for batch in 0..6 {
        let rows: Vec<_> = (0..rng.random_range(1..25))
            .map(|i| {
                let q = if rng.random_bool(0.5) {
                    rng.random_range(1..50)
                } else {
                    -rng.random_range(1..50)
                };
                let m = (
                    rng.random_range(0..2),
                    rng.random_range(0..2),
                    q,
                    rng.random_range(0..200),
                );
                model.push(m);
                mv(&format!("m{batch}-{i}"), m.0, m.1, m.2, m.3)
            })
            .collect();
        write(&store, site, rows).await.unwrap();
    }
    for b in 0..2 {
        for s in 0..2 {
            let sum: i64 = model
                .iter()
                .filter(|m| m.0 == b && m.1 == s)
                .map(|m| m.2)
                .sum();
            assert_eq!(balance(&store, site, b, s, None).await, sum);
            for t in [-5, 0, 37, 99, 100, 150, 199, 210] {
                let want: i64 = model
                    .iter()
                    .filter(|m| m.0 == b && m.1 == s && m.3 <= t)
                    .map(|m| m.2)
                    .sum();
                assert_eq!(
                    balance(&store, site, b, s, Some(t)).await,
                    want,
                    "bin {b} sku {s} at {t}"
                );
            }
        }
    }
    // Inside a write the same balance is read as outside it.
    let t = 120;
    let want: i64 = model
        .iter()
        .filter(|m| m.0 == 1 && m.1 == 0 && m.3 <= t)
        .map(|m| m.2)
        .sum();
    let got = store
        .write_tx(WriteScope::Site(site), move |tx| {
            use crate::ledger::LedgerTx;
            let bin = tx.bin_id(site, &BinCode::parse(BINS[1]).unwrap())?.unwrap();
            let item = tx.item_ref(site, &Sku::parse(SKUS[0]).unwrap())?.unwrap();
            let key = crate::ledger::LedgerKey {
                bin_id: bin,
                item_id: item.id,
                lot: String::new(),
            };
            super::ledger::tx_balance_as_of(tx, &key, t)
        })
        .await
        .unwrap();
    assert_eq!(got, want);
    let c = store.client().await.unwrap();
    let snapshots: i64 = c
        .query_one("select count(*) from balance_snapshot", &[])
        .await
        .unwrap()
        .get(0);
    assert!(snapshots > 0, "the test reaches the snapshots");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_resent_batch_changes_nothing_and_a_reversal_happens_once() {
    let Some((_db, url)) = TestDb::create() else {
        return;
    };
    let (store, site) = fresh(&url, 256).await;
    let rows = vec![mv("r1", 0, 0, 7, 10), mv("r2", 1, 1, 4, 20)];
    let first = write(&store, site, rows.clone()).await.unwrap();
    let again = write(&store, site, rows).await.unwrap();
    assert_eq!((first.recorded, again.recorded), (2, 0));
    assert_eq!(again.already_recorded, 2);
    assert_eq!(again.watermark, first.watermark);
    assert_eq!(balance(&store, site, 0, 0, None).await, 7);

    let err = write(&store, site, vec![mv("r1", 0, 0, 8, 10)])
        .await
        .unwrap_err();
    assert!(
        matches!(err, StoreError::Rejected(ref r) if r[0].message.contains("different content")),
        "{err:?}"
    );
    let mut right = mv("rev", 0, 0, -7, 30);
    right.reverses = Some(MovementUid::parse("r1").unwrap());
    write(&store, site, vec![right]).await.unwrap();
    let mut twice = mv("rev2", 0, 0, -7, 40);
    twice.reverses = Some(MovementUid::parse("r1").unwrap());
    let err = write(&store, site, vec![twice]).await.unwrap_err();
    assert!(
        matches!(err, StoreError::Rejected(ref r) if r[0].message.contains("already been reversed")),
        "{err:?}"
    );
    assert_eq!(balance(&store, site, 0, 0, None).await, 0);

    // Within one batch: a row may reverse an earlier row; two rows may not reverse one
    // stored movement.
    let mut back = mv("in2", 1, 1, -5, 60);
    back.reverses = Some(MovementUid::parse("in1").unwrap());
    write(&store, site, vec![mv("in1", 1, 1, 5, 55), back])
        .await
        .unwrap();
    assert_eq!(balance(&store, site, 1, 1, None).await, 4 + 5 - 5);
    let c = store.client().await.unwrap();
    let reversed_by: i64 = c
        .query_one(
            "select count(*) from movement r join movement o on o.id = r.reverses
             where r.uid = 'in2' and o.uid = 'in1'",
            &[],
        )
        .await
        .unwrap()
        .get(0);
    assert_eq!(reversed_by, 1);
    let (mut a, mut b) = (mv("st2", 1, 1, -4, 70), mv("st3", 1, 1, -4, 71));
    a.reverses = Some(MovementUid::parse("r2").unwrap());
    b.reverses = Some(MovementUid::parse("r2").unwrap());
    let err = write(&store, site, vec![a, b]).await.unwrap_err();
    assert!(
        matches!(err, StoreError::Rejected(ref r) if r.len() == 1 && r[0].row == 1
            && r[0].message.contains("already been reversed")),
        "{err:?}"
    );
    assert_eq!(balance(&store, site, 1, 1, None).await, 4);

    // A batch with one bad row writes nothing.
    let mut bad = mv("b2", 0, 0, 3, 50);
    bad.bin = BinCode::parse("Z-99-99-9").unwrap();
    let before = store.site_counts(site).await.unwrap().movements;
    let err = write(&store, site, vec![mv("b1", 0, 0, 3, 50), bad])
        .await
        .unwrap_err();
    assert!(
        matches!(err, StoreError::Rejected(ref r) if r.len() == 1 && r[0].row == 1),
        "{err:?}"
    );
    assert_eq!(store.site_counts(site).await.unwrap().movements, before);

    // The ledger is append-only.
    let c = store.client().await.unwrap();
    let up = c
        .execute("update movement set qty = 6", &[])
        .await
        .unwrap_err();
    assert!(super::describe(&up).contains("append-only"), "{up}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn history_pages_in_event_order_and_site_codes_stay_unique() {
    let Some((_db, url)) = TestDb::create() else {
        return;
    };
    let (store, site) = fresh(&url, 256).await;
    let rows: Vec<_> = (0..7)
        .map(|i| mv(&format!("h{i}"), 0, 0, 1, 100 - 10 * (i % 3)))
        .collect();
    write(&store, site, rows).await.unwrap();
    let mut seen = Vec::new();
    let mut after = None;
    loop {
        let page = store
            .movements(
                site,
                HistoryQuery {
                    subject: HistorySubject::Bin(BinCode::parse(BINS[0]).unwrap()),
                    from: None,
                    to: None,
                    limit: 3,
                    after: after.clone(),
                },
            )
            .await
            .unwrap();
        seen.extend(page.movements.iter().map(|m| (m.event_at.0, m.seq)));
        match page.next {
            Some(n) => after = Some(n),
            None => break,
        }
    }
    let mut sorted = seen.clone();
    sorted.sort();
    assert_eq!(seen.len(), 7);
    assert_eq!(seen, sorted, "event order, then sequence");

    let again = store
        .create_site(NewSite {
            code: SiteCode::parse("T").unwrap(),
            name: "Again".into(),
            time_zone: crate::time::day::SiteZone::UTC,
        })
        .await
        .unwrap_err();
    assert!(matches!(again, StoreError::Conflict(_)), "{again:?}");
    let counts = store.site_counts(site).await.unwrap();
    assert_eq!((counts.zones, counts.bins, counts.items), (1, 2, 2));
    assert_eq!(store.bins(site, None).await.unwrap().len(), 2);
    store.ping_writer().await.unwrap();
    assert_eq!(store.site_counts(site).await.unwrap().movements, 7);
}

/// Opens a SQLite store in `dir` and a PostgreSQL one at `url`, each with the same site.
async fn both(
    dir: &std::path::Path,
    url: &str,
) -> Vec<(&'static str, std::sync::Arc<dyn Store>, crate::master::Site)> {
    let mut out = Vec::new();
    for (name, at) in [
        (
            "sqlite",
            crate::store::DbLocation::File(dir.join("cairn.db")),
        ),
        (
            "postgres",
            crate::store::DbLocation::Postgres(url.to_string()),
        ),
    ] {
        let store = tokio::task::spawn_blocking(move || {
            crate::store::open(&at, StoreOptions::default()).unwrap()
        })
        .await
        .unwrap();
        let site = store
            .create_site(NewSite {
                code: SiteCode::parse("D").unwrap(),
                name: "Differential".into(),
                time_zone: crate::time::day::SiteZone::parse("Europe/Berlin").unwrap(),
            })
            .await
            .unwrap();
        out.push((name, store, site));
    }
    out
}

/// Names item `i` of the differential history: cases and punctuation mixed, so a text
/// order other than the bytes' shows.
fn sku(i: usize) -> String {
    match i % 3 {
        0 => format!("SKU-{i:03}"),
        1 => format!("sku.{i:03}"),
        _ => format!("Sku_{i:03}"),
    }
}

/// Makes the same master data, movements, short picks and counter on `store`.
async fn same_history(store: &dyn Store, site: SiteId, day: chrono::NaiveDate) {
    let zones = ["A", "B", "C"];
    let bins: Vec<_> = zones
        .iter()
        .flat_map(|z| {
            (1..=8u16).map(move |bay| {
                BinRecord {
                    code: None,
                    zone: (*z).into(),
                    aisle: 1,
                    bay,
                    level: (bay % 3) as u8 + 1,
                    side: None,
                    walk_seq: None,
                }
                .validate()
                .unwrap()
            })
        })
        .collect();
    let codes: Vec<String> = bins.iter().map(|b| b.code.as_str().to_string()).collect();
    store
        .put_bins(site, bins, Progress::default(), None)
        .await
        .unwrap();
    let items: Vec<_> = (0..30)
        .map(|i| {
            ItemRecord {
                sku: sku(i),
                description: format!("Widget {i}"),
                base_unit: "each".into(),
                unit_cost_minor: 50 + 37 * i as i64,
                lot_tracked: false,
                group: None,
                packs: (i < 4).then(|| {
                    let gtin = |level: u32| {
                        let body = format!("{level}5012345{i:05}");
                        let check = cairn_scan::gtin_check_digit(&body).expect("digits");
                        format!("{body}{check}")
                    };
                    vec![
                        ItemPackRecord {
                            gtin: gtin(1),
                            level: "case".into(),
                            units: 12,
                        },
                        ItemPackRecord {
                            gtin: gtin(0),
                            level: "each".into(),
                            units: 1,
                        },
                    ]
                }),
                class: None,
            }
            .validate()
            .unwrap()
        })
        .collect();
    store
        .put_items(site, items, Progress::default(), None)
        .await
        .unwrap();
    let end = crate::time::day::SiteZone::UTC.start_of(day).0;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(9);
    let mut rows = Vec::new();
    for n in 0..600 {
        // Each of 25 items lives in two bins; the last five never move.
        let item = rng.random_range(0..25);
        let bin = (item * 7 + 11 * rng.random_range(0..2)) % codes.len();
        let receipt = n < 60 || rng.random_bool(0.4);
        let qty = if receipt {
            rng.random_range(20..120)
        } else {
            rng.random_range(1..25)
        };
        rows.push(NewMovement {
            uid: MovementUid::parse(&format!("d{n}")).unwrap(),
            bin: BinCode::parse(&codes[bin]).unwrap(),
            sku: Sku::parse(&sku(item)).unwrap(),
            lot: String::new(),
            expiry: None,
            qty: if receipt { qty } else { -qty },
            kind: if receipt {
                MovementKind::Receipt
            } else {
                MovementKind::Pick
            },
            event_at: Timestamp(end - rng.random_range(1..90 * crate::time::DAY_MS)),
            source: "test".into(),
            doc_ref: String::new(),
            actor: String::new(),
            reverses: None,
            recorded_at: None,
        });
    }
    for chunk in rows.chunks(150) {
        let chunk = chunk.to_vec();
        crate::store::write(store, WriteScope::Site(site), move |tx| {
            crate::ledger::write_batch(tx, site, &chunk, Timestamp(end), &Progress::default())
        })
        .await
        .unwrap();
    }
    let picks = (0..5)
        .map(|n| crate::planning::short_pick::NewShortPick {
            uid: MovementUid::parse(&format!("sp{n}")).unwrap(),
            bin: BinCode::parse(&codes[n * 4]).unwrap(),
            sku: Sku::parse(&sku(n * 5)).unwrap(),
            lot: String::new(),
            short_qty: n as i64,
            reported_at: Timestamp(end - 3_600_000 * (n as i64 + 1)),
            source: "test".into(),
            doc_ref: String::new(),
        })
        .collect::<Vec<_>>();
    let out = store.record_short_picks(site, picks.clone()).await.unwrap();
    assert_eq!(out.recorded, 5);
    let again = store.record_short_picks(site, picks).await.unwrap();
    assert_eq!(again.already_recorded, 5);
    let mut cal = crate::planning::calendar::Calendar::default();
    cal.holidays.insert(day + chrono::Duration::days(3));
    store.put_calendar(site, cal).await.unwrap();
    store
        .create_user(
            crate::accounts::store::NewUser {
                name: crate::accounts::UserName::parse("Cora").unwrap(),
                display_name: "Cora".into(),
                password: crate::accounts::secret::SecretHash("not-a-real-hash".into()),
                pin: None,
                roles: vec![(site, crate::accounts::Role::Counter)],
            },
            crate::accounts::audit::AuditEvent::now(
                crate::accounts::audit::Actor::Cli,
                crate::accounts::audit::Action::UserCreated,
                "Cora",
            ),
        )
        .await
        .unwrap();
}

/// Everything the planning area answers for a site, as JSON, to compare two stores.
async fn planning_answers(
    store: &dyn Store,
    site: &crate::master::Site,
    day: chrono::NaiveDate,
) -> Vec<serde_json::Value> {
    use crate::planning::plan::{Capacity, Fill};
    use crate::planning::service;
    let mut out = Vec::new();
    let summary = service::classify(store, site, day).await.unwrap();
    out.push(serde_json::to_value(&summary).unwrap());
    let capacity = Capacity {
        counters: 2,
        minutes: 60,
    };
    let list = service::build(store, site, day, capacity, Fill::Capacity, false)
        .await
        .unwrap();
    out.push(serde_json::to_value(&list).unwrap());
    let again = service::build(store, site, day, capacity, Fill::Level, false)
        .await
        .unwrap_err();
    out.push(serde_json::json!(format!("{again}")));
    let task = list.tasks[0].id.unwrap();
    store.move_task(site.id, day, task, 2).await.unwrap();
    let bad = store.move_task(site.id, day, task, 9).await.unwrap_err();
    out.push(serde_json::json!(format!("{bad:?}")));
    let cora = crate::accounts::UserName::parse("cora").unwrap();
    store
        .hold_run(site.id, day, 1, Some(cora.clone()))
        .await
        .unwrap();
    let twice = store
        .hold_run(site.id, day, 2, Some(cora))
        .await
        .unwrap_err();
    out.push(serde_json::json!(format!("{twice}")));
    store
        .finish_task(
            site.id,
            task,
            Timestamp(site.time_zone.start_of(day).0 + 3_600_000),
        )
        .await
        .unwrap();
    out.push(serde_json::to_value(store.count_list(site.id, day).await.unwrap()).unwrap());
    let next = day + chrono::Duration::days(1);
    let tomorrow = service::build(store, site, next, capacity, Fill::Level, false)
        .await
        .unwrap();
    out.push(serde_json::to_value(&tomorrow).unwrap());
    out.push(serde_json::to_value(store.latest_abc(site.id).await.unwrap()).unwrap());
    out.push(
        serde_json::to_value(
            store
                .class_history(site.id, Sku::parse(&sku(7)).unwrap())
                .await
                .unwrap(),
        )
        .unwrap(),
    );
    let mut usage: Vec<_> = store
        .abc_usage(site.id, Timestamp(0), Timestamp(i64::MAX))
        .await
        .unwrap()
        .into_iter()
        .map(|u| (u.item, u.value_minor, u.hits, u.first_seen_ms, u.classified))
        .collect();
    usage.sort();
    out.push(serde_json::to_value(usage).unwrap());
    let balances = store
        .balances(
            site.id,
            BalanceQuery {
                limit: 1000,
                at: Some(Timestamp(
                    site.time_zone.start_of(day).0 - 20 * crate::time::DAY_MS,
                )),
                ..BalanceQuery::default()
            },
        )
        .await
        .unwrap();
    out.push(serde_json::to_value(balances).unwrap());
    // The same balances page by page, zero keys included.
    let mut pages = Vec::new();
    let mut after = None;
    loop {
        let page = store
            .balances(
                site.id,
                BalanceQuery {
                    limit: 7,
                    include_zero: true,
                    after: after.clone(),
                    ..BalanceQuery::default()
                },
            )
            .await
            .unwrap();
        pages.extend(page.balances);
        match page.next {
            Some(n) => after = Some(n),
            None => break,
        }
    }
    assert!(pages.len() > 7, "more than one page");
    out.push(serde_json::to_value(pages).unwrap());
    out.push(serde_json::to_value(store.bins(site.id, None).await.unwrap()).unwrap());
    out.push(serde_json::to_value(store.site_counts(site.id).await.unwrap()).unwrap());
    out.extend(read_back_answers(store, site.id).await);
    out.extend(accuracy_answers(store, site, day).await);
    out
}

/// Walks every page of a read-back list; `read` reads the page after a cursor.
async fn pages<T, F, Fut>(mut read: F) -> Vec<T>
where
    F: FnMut(Option<String>) -> Fut,
    Fut: std::future::Future<Output = crate::master::read::Page<T>>,
{
    let mut out = Vec::new();
    let mut after = None;
    loop {
        let page = read(after.take()).await;
        out.extend(page.rows);
        match page.next {
            Some(n) => after = Some(n),
            None => return out,
        }
    }
}

/// The read-back lists of a site (zones, bins, items with packs and classes, some
/// filtered), each walked seven rows at a time, as JSON: the order of the mixed-case
/// SKUs shows whether both stores compare codes byte by byte.
async fn read_back_answers(store: &dyn Store, site: SiteId) -> Vec<serde_json::Value> {
    use crate::master::read::{self, BinParams, ItemParams, LotParams, ZoneParams};
    let seven = || Some("7".to_string());
    let mut out = Vec::new();
    let zones = pages(|after| async move {
        let p = ZoneParams {
            limit: seven(),
            after,
        };
        let (q, limit) = p.query().unwrap();
        read::zone_page(store.zone_rows(site, q).await.unwrap(), limit)
    })
    .await;
    out.push(serde_json::to_value(zones).unwrap());
    for zone in [None, Some("B")] {
        let bins = pages(|after| async move {
            let p = BinParams {
                zone: zone.map(str::to_string),
                limit: seven(),
                after,
                ..BinParams::default()
            };
            let (q, limit) = p.query().unwrap();
            read::bin_page(store.bin_rows(site, q).await.unwrap(), limit)
        })
        .await;
        out.push(serde_json::to_value(bins).unwrap());
    }
    for (prefix, class) in [
        (None, None),
        (Some("Sku"), None),
        (None, Some("C")),
        (None, Some("none")),
    ] {
        let items = pages(|after| async move {
            let p = ItemParams {
                sku_prefix: prefix.map(str::to_string),
                class: class.map(str::to_string),
                limit: seven(),
                after,
                ..ItemParams::default()
            };
            let (q, limit) = p.query().unwrap();
            read::item_page(store.item_rows(site, q).await.unwrap(), limit)
        })
        .await;
        out.push(serde_json::to_value(items).unwrap());
    }
    let every = out[3].as_array().unwrap();
    assert_eq!(every.len(), 30, "every item, page by page");
    assert_eq!(
        every
            .iter()
            .filter(|i| i["packs"] != serde_json::json!([]))
            .count(),
        4
    );
    let (c, none) = (out[5].as_array().unwrap(), out[6].as_array().unwrap());
    assert!(
        !c.is_empty() && !none.is_empty(),
        "class C and unclassified items"
    );
    let lots = pages(|after| async move {
        let p = LotParams {
            limit: seven(),
            after,
            ..LotParams::default()
        };
        let (q, limit) = p.query().unwrap();
        read::lot_page(store.lot_rows(site, q).await.unwrap(), limit)
    })
    .await;
    out.push(serde_json::to_value(lots).unwrap());
    out
}

/// Everything the accuracy area answers for a site, as JSON (or Debug text for the types
/// that are not sent anywhere), the planner inputs' write time left out.
async fn accuracy_answers(
    store: &dyn Store,
    site: &crate::master::Site,
    day: chrono::NaiveDate,
) -> Vec<serde_json::Value> {
    use crate::accuracy::inputs::{InputTarget, LeadTimes, NewPlannerInput};
    let mut out = Vec::new();
    let mut settings = store.accuracy_settings(site.id).await.unwrap();
    out.push(serde_json::to_value(settings).unwrap());
    settings.ira_target = 0.97;
    settings.service_level[1] = 0.9;
    store
        .put_accuracy_settings(site.id, settings)
        .await
        .unwrap();
    out.push(serde_json::to_value(store.accuracy_settings(site.id).await.unwrap()).unwrap());
    let times = LeadTimes {
        lead_time_days: 4.5,
        lead_time_sd_days: 1.25,
        review_days: 7.0,
        service_level: Some(0.95),
    };
    let inputs = vec![
        NewPlannerInput {
            target: InputTarget::Item(Sku::parse(&sku(3)).unwrap()),
            times,
        },
        NewPlannerInput {
            target: InputTarget::Item(Sku::parse(&sku(4)).unwrap()),
            times,
        },
        NewPlannerInput {
            target: InputTarget::Group("bolts".into()),
            times,
        },
        NewPlannerInput {
            target: InputTarget::Group("Fasteners".into()),
            times: LeadTimes {
                service_level: None,
                ..times
            },
        },
    ];
    let written = store
        .put_planner_inputs(site.id, inputs, "pat".into(), None)
        .await
        .unwrap();
    out.push(serde_json::json!(written));
    let unknown = vec![NewPlannerInput {
        target: InputTarget::Item(Sku::parse("NO-SUCH").unwrap()),
        times,
    }];
    let refused = store
        .put_planner_inputs(site.id, unknown, "pat".into(), None)
        .await
        .unwrap_err();
    out.push(serde_json::json!(format!("{refused:?}")));
    let mut inputs = serde_json::to_value(store.planner_inputs(site.id).await.unwrap()).unwrap();
    for input in inputs.as_array_mut().unwrap() {
        input["updated_at"] = serde_json::Value::Null;
    }
    out.push(inputs);
    let paged = pages(|after| async move {
        let p = crate::accuracy::inputs::InputParams {
            limit: Some("1".into()),
            after,
            ..Default::default()
        };
        let (q, limit) = p.query().unwrap();
        let rows = store.planner_input_rows(site.id, q).await.unwrap();
        crate::accuracy::inputs::input_page(rows, limit)
    })
    .await;
    let mut paged = serde_json::to_value(paged).unwrap();
    for input in paged.as_array_mut().unwrap() {
        input["updated_at"] = serde_json::Value::Null;
    }
    assert_eq!(
        paged,
        out[out.len() - 1],
        "paged one at a time, the same rows"
    );
    out.push(paged);
    let (start, end) = site.time_zone.range(day);
    let days: Vec<_> = (0..30)
        .map(|back| {
            let d = day - chrono::Duration::days(back);
            (d, site.time_zone.start_of(d))
        })
        .rev()
        .collect();
    let debug = |v: &dyn std::fmt::Debug| serde_json::json!(format!("{v:?}"));
    out.push(debug(
        &store
            .daily_issues(site.id, days.clone(), end, None)
            .await
            .unwrap(),
    ));
    out.push(debug(
        &store
            .daily_issues(site.id, days, end, Some(Sku::parse(&sku(4)).unwrap()))
            .await
            .unwrap(),
    ));
    out.push(debug(
        &store
            .planned_tasks(site.id, day, day + chrono::Duration::days(1))
            .await
            .unwrap(),
    ));
    out.push(debug(&store.a_items(site.id, start).await.unwrap()));
    out.push(serde_json::to_value(store.accuracy_items(site.id, None).await.unwrap()).unwrap());
    let results = store
        .accuracy_results(
            site.id,
            crate::accuracy::store::ResultQuery {
                from: Timestamp(0),
                to: end,
                sku: None,
            },
        )
        .await
        .unwrap();
    out.push(serde_json::to_value(results).unwrap());
    out
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_same_history_plans_the_same_lists_on_both_stores() {
    // A database whose default collation sorts text unlike SQLite's byte order, so every
    // ordered read must say which order it means.
    let icu = "template template0 locale_provider icu icu_locale 'en-US'";
    let Some((_db, url)) = TestDb::create_with(icu) else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let day = chrono::NaiveDate::from_ymd_opt(2026, 3, 10).unwrap();
    let mut answers = Vec::new();
    for (name, store, site) in both(dir.path(), &url).await {
        same_history(store.as_ref(), site.id, day).await;
        answers.push((name, planning_answers(store.as_ref(), &site, day).await));
    }
    let (sqlite, postgres) = (&answers[0].1, &answers[1].1);
    // The day's list has due counts and every trigger the history makes.
    let reasons = &sqlite[1]["summary"]["by_reason"];
    for reason in ["due", "short_pick", "negative_balance"] {
        assert!(reasons[reason].as_u64() > Some(0), "{reason} in {reasons}");
    }
    for (i, (a, b)) in sqlite.iter().zip(postgres).enumerate() {
        assert_eq!(a, b, "answer {i} differs between SQLite and PostgreSQL");
    }
}

#[test]
fn a_database_name_is_replaced_and_parameters_kept() {
    use crate::store::postgres::with_database;
    assert_eq!(
        with_database("postgres://u@h:5432/postgres?sslmode=require", "x"),
        "postgres://u@h:5432/x?sslmode=require"
    );
    assert_eq!(with_database("postgres://u@h", "x"), "postgres://u@h/x");
}
