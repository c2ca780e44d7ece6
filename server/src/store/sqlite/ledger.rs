//! SQL for the movement ledger: writing a checked movement, keeping balances and
//! snapshots in the same transaction, and reading balances at an instant.

use crate::ledger::{
    BalanceRow, Inserted, ItemRef, LedgerKey, Movement, MovementKind, NewMovement, StoredMovement,
};
use crate::master::SiteId;
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::store::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, HistorySubject, StoreError,
};
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, Transaction, params};

/// One balance key: a bin, an item and a lot (empty when not lot-tracked).
pub type Key = LedgerKey;

fn kind_of(text: String) -> rusqlite::Result<MovementKind> {
    MovementKind::parse(&text).ok_or_else(|| {
        rusqlite::Error::FromSqlConversionFailure(
            0,
            rusqlite::types::Type::Text,
            format!("unknown movement kind '{text}'").into(),
        )
    })
}

/// Reads a stored movement by its sender's id.
pub fn movement_by_uid(
    tx: &Connection,
    uid: &MovementUid,
) -> rusqlite::Result<Option<StoredMovement>> {
    tx.prepare_cached(
        "select id, site_id, bin_id, item_id, lot, qty, kind, event_at from movement where uid = ?1",
    )?
    .query_row([uid.as_str()], |r| {
        Ok(StoredMovement {
            id: r.get(0)?,
            site: SiteId(r.get(1)?),
            key: Key { bin_id: r.get(2)?, item_id: r.get(3)?, lot: r.get(4)? },
            qty: r.get(5)?,
            kind: kind_of(r.get(6)?)?,
            event_at: Timestamp(r.get(7)?),
        })
    })
    .optional()
}

/// Finds a bin of `site` by code.
pub fn find_bin(tx: &Connection, site: SiteId, bin: &BinCode) -> rusqlite::Result<Option<i64>> {
    tx.prepare_cached("select id from bin where site_id = ?1 and code = ?2")?
        .query_row(params![site.0, bin.as_str()], |r| r.get(0))
        .optional()
}

/// Finds an item of `site` by SKU.
pub fn find_item(tx: &Connection, site: SiteId, sku: &Sku) -> rusqlite::Result<Option<ItemRef>> {
    tx.prepare_cached("select id, lot_tracked from item where site_id = ?1 and sku = ?2")?
        .query_row(params![site.0, sku.as_str()], |r| {
            Ok(ItemRef {
                id: r.get(0)?,
                lot_tracked: r.get(1)?,
            })
        })
        .optional()
}

/// Tells whether a stored movement has a reversal.
pub fn is_reversed(tx: &Connection, movement: i64) -> rusqlite::Result<bool> {
    tx.prepare_cached("select 1 from movement where reverses = ?1 limit 1")?
        .exists([movement])
}

/// Writes one checked movement, its lot and its balance, unless its id is stored.
pub fn insert_movement(
    tx: &Transaction,
    site: SiteId,
    m: &NewMovement,
    key: &Key,
    recorded_at: Timestamp,
    reverses: Option<i64>,
    snapshot_every: i64,
) -> rusqlite::Result<Inserted> {
    let written = tx
        .prepare_cached(
            "insert into movement (uid, site_id, bin_id, item_id, lot, qty, kind, event_at, recorded_at,
                                   source, doc_ref, actor, reverses)
             values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)
             on conflict (uid) do nothing",
        )?
        .execute(params![
            m.uid.as_str(),
            site.0,
            key.bin_id,
            key.item_id,
            m.lot,
            m.qty,
            m.kind.as_str(),
            m.event_at.0,
            recorded_at.0,
            m.source,
            m.doc_ref,
            m.actor,
            reverses
        ])?;
    if written == 0 {
        return Ok(Inserted::Existing);
    }
    let id = tx.last_insert_rowid();
    if !m.lot.is_empty() {
        tx.prepare_cached(
            "insert into lot (item_id, code, expiry) values (?1, ?2, ?3) on conflict do nothing",
        )?
        .execute(params![key.item_id, m.lot, m.expiry.map(|d| d.to_string())])?;
    }
    apply_to_balance(tx, key, m.qty, m.event_at.0, snapshot_every)?;
    Ok(Inserted::New(id))
}

/// Adds one delta to the current balance and to every snapshot it falls under,
/// and takes a new snapshot when the key has moved `snapshot_every` times.
fn apply_to_balance(
    tx: &Transaction,
    key: &Key,
    qty: i64,
    event_at: i64,
    snapshot_every: i64,
) -> rusqlite::Result<()> {
    let (balance, last_event_at, moves, snap_at): (i64, i64, i64, Option<i64>) = tx
        .prepare_cached(
            "insert into balance (bin_id, item_id, lot, qty, last_event_at, moves_since_snap)
             values (?1, ?2, ?3, ?4, ?5, 1)
             on conflict (bin_id, item_id, lot) do update set
                 qty = qty + excluded.qty,
                 last_event_at = max(last_event_at, excluded.last_event_at),
                 moves_since_snap = moves_since_snap + 1
             returning qty, last_event_at, moves_since_snap, snap_at",
        )?
        .query_row(
            params![key.bin_id, key.item_id, key.lot, qty, event_at],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)),
        )?;
    if snap_at.is_some_and(|s| event_at <= s) {
        // A late movement: every snapshot at or after its event time includes it.
        tx.prepare_cached(
            "update balance_snapshot set qty = qty + ?4
             where bin_id = ?1 and item_id = ?2 and lot = ?3 and at >= ?5",
        )?
        .execute(params![key.bin_id, key.item_id, key.lot, qty, event_at])?;
    }
    if moves >= snapshot_every {
        // Every delta of this key has event_at <= last_event_at, so the balance is the snapshot.
        tx.prepare_cached(
            "insert into balance_snapshot (bin_id, item_id, lot, at, qty) values (?1, ?2, ?3, ?4, ?5)
             on conflict (bin_id, item_id, lot, at) do update set qty = excluded.qty",
        )?
        .execute(params![key.bin_id, key.item_id, key.lot, last_event_at, balance])?;
        tx.prepare_cached(
            "update balance set moves_since_snap = 0, snap_at = ?4 where bin_id = ?1 and item_id = ?2 and lot = ?3",
        )?
        .execute(params![key.bin_id, key.item_id, key.lot, last_event_at])?;
    }
    Ok(())
}

/// Returns the ledger's high-water mark: the newest movement's sequence number.
pub fn watermark(conn: &Connection) -> rusqlite::Result<i64> {
    conn.prepare_cached("select coalesce(max(id), 0) from movement")?
        .query_row([], |r| r.get(0))
}

/// Returns the balance of `key` as of `at`: the sum of its deltas with `event_at <= at`,
/// read from the newest snapshot at or before `at` plus one index range after it.
pub fn balance_as_of(conn: &Connection, key: &Key, at: i64) -> rusqlite::Result<i64> {
    conn.prepare_cached(
        "with s as (select at, qty from balance_snapshot
                    where bin_id = ?1 and item_id = ?2 and lot = ?3 and at <= ?4
                    order by at desc limit 1)
         select coalesce((select qty from s), 0)
              + coalesce((select sum(qty) from movement
                          where bin_id = ?1 and item_id = ?2 and lot = ?3
                            and event_at > coalesce((select at from s), -9223372036854775808)
                            and event_at <= ?4), 0)",
    )?
    .query_row(params![key.bin_id, key.item_id, key.lot, at], |r| r.get(0))
}

fn parse_cursor<const N: usize>(text: &str) -> Result<[String; N], StoreError> {
    let parts: Vec<String> = text.splitn(N, '.').map(str::to_string).collect();
    parts
        .try_into()
        .map_err(|_| StoreError::NotFound(format!("cursor '{text}' is not one this server gave")))
}

fn cursor_int(text: &str) -> Result<i64, StoreError> {
    text.parse().map_err(|_| {
        StoreError::NotFound(format!("cursor part '{text}' is not one this server gave"))
    })
}

fn id_of(
    conn: &Connection,
    sql: &str,
    site: SiteId,
    code: &str,
    what: &str,
) -> Result<i64, StoreError> {
    conn.prepare_cached(sql)?
        .query_row(params![site.0, code], |r| r.get(0))
        .optional()?
        .ok_or_else(|| StoreError::NotFound(format!("unknown {what} '{code}' in this site")))
}

fn bin_id(conn: &Connection, site: SiteId, code: &str) -> Result<i64, StoreError> {
    id_of(
        conn,
        "select id from bin where site_id = ?1 and code = ?2",
        site,
        code,
        "bin",
    )
}

fn item_id(conn: &Connection, site: SiteId, sku: &str) -> Result<i64, StoreError> {
    id_of(
        conn,
        "select id from item where site_id = ?1 and sku = ?2",
        site,
        sku,
        "SKU",
    )
}

/// Reads a page of balances, now or as of `query.at`.
pub fn balances(
    conn: &Connection,
    site: SiteId,
    query: &BalanceQuery,
) -> Result<BalancePage, StoreError> {
    let mut sql = String::from(
        "select b.bin_id, b.item_id, b.lot, b.qty, bin.code, item.sku
         from balance b join bin on bin.id = b.bin_id join item on item.id = b.item_id
         where bin.site_id = ?1",
    );
    let mut args: Vec<rusqlite::types::Value> = vec![site.0.into()];
    let mut arg = |sql: &mut String, cond: &str, v: rusqlite::types::Value| {
        args.push(v);
        sql.push_str(&cond.replace('?', &format!("?{}", args.len())));
    };
    if let Some(b) = &query.bin {
        arg(
            &mut sql,
            " and b.bin_id = ?",
            bin_id(conn, site, b.as_str())?.into(),
        );
    }
    if let Some(s) = &query.sku {
        arg(
            &mut sql,
            " and b.item_id = ?",
            item_id(conn, site, s.as_str())?.into(),
        );
    }
    if let Some(l) = &query.lot {
        arg(&mut sql, " and b.lot = ?", l.clone().into());
    }
    if let Some(c) = &query.after {
        let [b, i, l] = parse_cursor::<3>(c)?;
        let (b, i) = (cursor_int(&b)?, cursor_int(&i)?);
        args.push(b.into());
        args.push(i.into());
        args.push(l.into());
        let n = args.len();
        sql.push_str(&format!(
            " and (b.bin_id, b.item_id, b.lot) > (?{}, ?{}, ?{})",
            n - 2,
            n - 1,
            n
        ));
    }
    if query.at.is_none() && !query.include_zero {
        sql.push_str(" and b.qty <> 0");
    }
    let limit = query.limit.clamp(1, crate::store::MAX_PAGE_ROWS);
    sql.push_str(&format!(
        " order by b.bin_id, b.item_id, b.lot limit {limit}"
    ));
    let mut stmt = conn.prepare_cached(&sql)?;
    let rows = stmt.query_map(rusqlite::params_from_iter(args), |r| {
        Ok((
            Key {
                bin_id: r.get(0)?,
                item_id: r.get(1)?,
                lot: r.get(2)?,
            },
            r.get::<_, i64>(3)?,
            r.get::<_, String>(4)?,
            r.get::<_, String>(5)?,
        ))
    })?;
    let mut balances = Vec::new();
    let mut last = None;
    let mut fetched = 0;
    for row in rows {
        let (key, qty, bin, sku) = row?;
        fetched += 1;
        let qty = match query.at {
            Some(at) => balance_as_of(conn, &key, at.0)?,
            None => qty,
        };
        if qty != 0 || query.include_zero {
            balances.push(BalanceRow {
                bin,
                sku,
                lot: key.lot.clone(),
                qty,
            });
        }
        last = Some(key);
    }
    let next = last
        .filter(|_| fetched == limit)
        .map(|k| format!("{}.{}.{}", k.bin_id, k.item_id, k.lot));
    Ok(BalancePage {
        balances,
        next,
        watermark: watermark(conn)?,
    })
}

/// Reads a page of a bin's or an item's movements in event order.
pub fn history(
    conn: &Connection,
    site: SiteId,
    query: &HistoryQuery,
) -> Result<HistoryPage, StoreError> {
    let (column, id) = match &query.subject {
        HistorySubject::Bin(b) => ("m.bin_id", bin_id(conn, site, b.as_str())?),
        HistorySubject::Item(s) => ("m.item_id", item_id(conn, site, s.as_str())?),
    };
    let (after_at, after_seq) = match &query.after {
        None => (i64::MIN, i64::MIN),
        Some(c) => {
            let [a, s] = parse_cursor::<2>(c)?;
            (cursor_int(&a)?, cursor_int(&s)?)
        }
    };
    let limit = query.limit.clamp(1, crate::store::MAX_PAGE_ROWS);
    let sql = format!(
        "select m.id, m.uid, bin.code, item.sku, m.lot, m.qty, m.kind, m.event_at, m.recorded_at,
                m.source, m.doc_ref, m.actor, r.uid
         from movement m join bin on bin.id = m.bin_id join item on item.id = m.item_id
              left join movement r on r.id = m.reverses
         where {column} = ?1 and m.event_at >= ?2 and m.event_at <= ?3 and (m.event_at, m.id) > (?4, ?5)
         order by m.event_at, m.id limit ?6"
    );
    let mut stmt = conn.prepare_cached(&sql)?;
    let from = query.from.map_or(i64::MIN, |t| t.0);
    let to = query.to.map_or(i64::MAX, |t| t.0);
    let movements = stmt
        .query_map(
            params![id, from, to, after_at, after_seq, limit as i64],
            |r| {
                let kind: String = r.get(6)?;
                Ok(Movement {
                    seq: r.get(0)?,
                    id: r.get(1)?,
                    bin: r.get(2)?,
                    sku: r.get(3)?,
                    lot: r.get(4)?,
                    qty: r.get(5)?,
                    kind: MovementKind::parse(&kind).unwrap_or(MovementKind::Adjustment),
                    event_at: Timestamp(r.get(7)?),
                    recorded_at: Timestamp(r.get(8)?),
                    source: r.get(9)?,
                    doc_ref: r.get(10)?,
                    actor: r.get(11)?,
                    reverses: r.get(12)?,
                })
            },
        )?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let next = movements
        .last()
        .filter(|_| movements.len() == limit)
        .map(|m| format!("{}.{}", m.event_at.0, m.seq));
    Ok(HistoryPage { movements, next })
}
