//! Tests of the SQLite ledger against a plain model: the sum of deltas.

use super::{ledger, master, migrate};
use crate::ledger::{MovementKind, NewMovement};
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::master::{BinRecord, ItemRecord, NewSite, SiteCode, SiteId};
use crate::store::{Progress, StoreError};
use crate::time::Timestamp;
use proptest::prelude::*;
use rusqlite::Connection;

const BINS: [&str; 2] = ["A-01-01-1", "A-01-02-1"];
const SKUS: [&str; 2] = ["S1", "S2"];

fn fresh() -> (Connection, SiteId) {
    let mut conn = Connection::open_in_memory().unwrap();
    conn.pragma_update(None, "foreign_keys", true).unwrap();
    migrate::migrate(&mut conn).unwrap();
    let tx = conn.transaction().unwrap();
    let site = master::create_site(
        &tx,
        &NewSite {
            code: SiteCode::parse("T").unwrap(),
            name: "Test".into(),
            time_zone: crate::time::day::SiteZone::UTC,
        },
    )
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
    master::put_bins(&tx, site.id, &bins, &Progress::default()).unwrap();
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
    master::put_items(&tx, site.id, &items, &Progress::default()).unwrap();
    tx.commit().unwrap();
    (conn, site.id)
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

fn write(
    conn: &mut Connection,
    site: SiteId,
    rows: &[NewMovement],
    every: i64,
) -> Result<crate::ledger::RecordOutcome, StoreError> {
    let tx = conn.transaction().unwrap();
    let (out, _) = crate::ledger::append(
        &super::Tx::new(&tx, every),
        site,
        rows,
        Timestamp(10_000_000),
        &Progress::default(),
    )?;
    tx.commit().unwrap();
    Ok(out)
}

fn key(conn: &Connection, bin: usize, sku: usize) -> ledger::Key {
    let bin_id = conn
        .query_row("select id from bin where code = ?1", [BINS[bin]], |r| {
            r.get(0)
        })
        .unwrap();
    let item_id = conn
        .query_row("select id from item where sku = ?1", [SKUS[sku]], |r| {
            r.get(0)
        })
        .unwrap();
    ledger::Key {
        bin_id,
        item_id,
        lot: String::new(),
    }
}

fn current(conn: &Connection, k: &ledger::Key) -> i64 {
    conn.query_row(
        "select coalesce(sum(qty), 0) from balance where bin_id = ?1 and item_id = ?2",
        [k.bin_id, k.item_id],
        |r| r.get(0),
    )
    .unwrap()
}

/// (bin, sku, qty, event time) of one random movement; times repeat and arrive out of order.
fn movement() -> impl Strategy<Value = (usize, usize, i64, i64)> {
    (
        0..2usize,
        0..2usize,
        prop_oneof![-50i64..0, 1i64..50],
        0i64..200,
    )
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn balances_equal_the_sum_of_deltas(batches in prop::collection::vec(prop::collection::vec(movement(), 1..30), 1..6),
                                        probes in prop::collection::vec(-5i64..210, 1..20)) {
        let (mut conn, site) = fresh();
        let mut model: Vec<(usize, usize, i64, i64)> = Vec::new();
        let mut n = 0;
        for batch in &batches {
            let rows: Vec<_> = batch.iter().map(|&(b, s, q, t)| { n += 1; mv(&format!("m{n}"), b, s, q, t) }).collect();
            // A snapshot every 3 movements exercises late arrivals under snapshots.
            write(&mut conn, site, &rows, 3).unwrap();
            model.extend(batch);
        }
        for b in 0..2 {
            for s in 0..2 {
                let k = key(&conn, b, s);
                let sum: i64 = model.iter().filter(|m| m.0 == b && m.1 == s).map(|m| m.2).sum();
                prop_assert_eq!(current(&conn, &k), sum);
                for &t in &probes {
                    let want: i64 = model.iter().filter(|m| m.0 == b && m.1 == s && m.3 <= t).map(|m| m.2).sum();
                    prop_assert_eq!(ledger::balance_as_of(&conn, &k, t).unwrap(), want, "bin {} sku {} at {}", b, s, t);
                }
            }
        }
    }

    #[test]
    fn a_resent_batch_changes_nothing(batch in prop::collection::vec(movement(), 1..40)) {
        let (mut conn, site) = fresh();
        let rows: Vec<_> = batch.iter().enumerate().map(|(i, &(b, s, q, t))| mv(&format!("r{i}"), b, s, q, t)).collect();
        let first = write(&mut conn, site, &rows, 4).unwrap();
        let snapshot = |c: &Connection| -> Vec<(i64, i64, i64)> {
            c.prepare("select bin_id, item_id, qty from balance order by 1, 2").unwrap()
                .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?))).unwrap().map(Result::unwrap).collect()
        };
        let before = snapshot(&conn);
        let again = write(&mut conn, site, &rows, 4).unwrap();
        prop_assert_eq!(first.recorded, rows.len());
        prop_assert_eq!(again.recorded, 0);
        prop_assert_eq!(again.already_recorded, rows.len());
        prop_assert_eq!(again.watermark, first.watermark);
        prop_assert_eq!(snapshot(&conn), before);
    }
}

#[test]
fn the_ledger_refuses_update_and_delete() {
    let (mut conn, site) = fresh();
    write(&mut conn, site, &[mv("u1", 0, 0, 5, 10)], 256).unwrap();
    let up = conn
        .execute("update movement set qty = 6", [])
        .unwrap_err()
        .to_string();
    assert!(up.contains("append-only"), "{up}");
    let del = conn
        .execute("delete from movement", [])
        .unwrap_err()
        .to_string();
    assert!(del.contains("append-only"), "{del}");
    let n: i64 = conn
        .query_row("select qty from movement", [], |r| r.get(0))
        .unwrap();
    assert_eq!(n, 5);
}

#[test]
fn a_batch_with_one_unknown_bin_writes_nothing_and_names_the_row() {
    let (mut conn, site) = fresh();
    let mut bad = mv("b2", 0, 0, 3, 10);
    bad.bin = BinCode::parse("Z-99-99-9").unwrap();
    let err = write(&mut conn, site, &[mv("b1", 0, 0, 3, 10), bad], 256).unwrap_err();
    let StoreError::Rejected(rows) = err else {
        panic!("expected a row rejection, got {err:?}")
    };
    assert_eq!(rows.len(), 1);
    assert_eq!((rows[0].row, rows[0].field.as_str()), (1, "bin"));
    let n: i64 = conn
        .query_row("select count(*) from movement", [], |r| r.get(0))
        .unwrap();
    assert_eq!(n, 0);
}

#[test]
fn a_reused_id_with_other_content_is_refused() {
    let (mut conn, site) = fresh();
    write(&mut conn, site, &[mv("same", 0, 0, 3, 10)], 256).unwrap();
    let err = write(&mut conn, site, &[mv("same", 0, 0, 4, 10)], 256).unwrap_err();
    assert!(
        matches!(err, StoreError::Rejected(ref r) if r[0].message.contains("different content")),
        "{err:?}"
    );
}

#[test]
fn a_reversal_must_mirror_the_original_and_happen_once() {
    let (mut conn, site) = fresh();
    write(&mut conn, site, &[mv("orig", 0, 0, 7, 10)], 256).unwrap();
    let mut wrong = mv("rev1", 0, 0, -6, 20);
    wrong.reverses = Some(MovementUid::parse("orig").unwrap());
    assert!(write(&mut conn, site, &[wrong], 256).is_err());
    let mut right = mv("rev2", 0, 0, -7, 20);
    right.reverses = Some(MovementUid::parse("orig").unwrap());
    write(&mut conn, site, &[right], 256).unwrap();
    let mut twice = mv("rev3", 0, 0, -7, 30);
    twice.reverses = Some(MovementUid::parse("orig").unwrap());
    let err = write(&mut conn, site, &[twice], 256).unwrap_err();
    assert!(
        matches!(err, StoreError::Rejected(ref r) if r[0].message.contains("already been reversed")),
        "{err:?}"
    );
    assert_eq!(current(&conn, &key(&conn, 0, 0)), 0);

    // Within one batch: a row may reverse an earlier row; two rows may not reverse one
    // stored movement.
    let mut back = mv("in2", 1, 1, -5, 50);
    back.reverses = Some(MovementUid::parse("in1").unwrap());
    write(&mut conn, site, &[mv("in1", 1, 1, 5, 40), back], 256).unwrap();
    assert_eq!(current(&conn, &key(&conn, 1, 1)), 0);
    let reversed_by: i64 = conn
        .query_row(
            "select count(*) from movement r join movement o on o.id = r.reverses
             where r.uid = 'in2' and o.uid = 'in1'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(reversed_by, 1);
    write(&mut conn, site, &[mv("st1", 0, 1, 4, 60)], 256).unwrap();
    let (mut a, mut b) = (mv("st2", 0, 1, -4, 70), mv("st3", 0, 1, -4, 71));
    a.reverses = Some(MovementUid::parse("st1").unwrap());
    b.reverses = Some(MovementUid::parse("st1").unwrap());
    let err = write(&mut conn, site, &[a, b], 256).unwrap_err();
    assert!(
        matches!(err, StoreError::Rejected(ref r) if r.len() == 1 && r[0].row == 1
            && r[0].message.contains("already been reversed")),
        "{err:?}"
    );
    assert_eq!(current(&conn, &key(&conn, 0, 1)), 4);
}

#[tokio::test]
async fn a_scheduled_job_is_claimed_once_per_site_and_day() {
    let dir = tempfile::tempdir().unwrap();
    use crate::store::Store;
    let store = super::SqliteStore::open(&dir.path().join("t.db"), Default::default()).unwrap();
    let site = store
        .create_site(NewSite {
            code: SiteCode::parse("J").unwrap(),
            name: "J".into(),
            time_zone: crate::time::day::SiteZone::parse("UTC").unwrap(),
        })
        .await
        .unwrap();
    let day = chrono::NaiveDate::from_ymd_opt(2026, 12, 4).unwrap();
    assert!(store.claim_job(site.id, "abc", day, "a:1").await.unwrap());
    assert!(!store.claim_job(site.id, "abc", day, "b:2").await.unwrap());
    assert!(
        store
            .claim_job(site.id, "abc", day.succ_opt().unwrap(), "b:2")
            .await
            .unwrap()
    );
    assert!(store.claim_job(site.id, "other", day, "b:2").await.unwrap());
}
