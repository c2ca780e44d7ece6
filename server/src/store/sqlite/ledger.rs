//! SQL for the movement ledger: appending batches, keeping balances and
//! snapshots in the same transaction, and reading balances at an instant.

use crate::batch::RowError;
use crate::ledger::{BalanceRow, Movement, MovementKind, NewMovement, RecordOutcome};
use crate::master::SiteId;
use crate::netting::pass::WrittenMove;
use crate::store::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, HistorySubject, Progress, StoreError,
};
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, Transaction, params};
use std::collections::HashMap;

/// Rows between progress ticks during a long batch.
const PROGRESS_EVERY: usize = 1_000;

/// One balance key: a bin, an item and a lot (empty when not lot-tracked).
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct Key {
    pub bin_id: i64,
    pub item_id: i64,
    pub lot: String,
}

struct Stored {
    id: i64,
    site_id: i64,
    key: Key,
    qty: i64,
    kind: String,
    event_at: i64,
}

fn stored_by_uid(tx: &Transaction, uid: &str) -> rusqlite::Result<Option<Stored>> {
    tx.prepare_cached(
        "select id, site_id, bin_id, item_id, lot, qty, kind, event_at from movement where uid = ?1",
    )?
    .query_row([uid], |r| {
        Ok(Stored {
            id: r.get(0)?,
            site_id: r.get(1)?,
            key: Key { bin_id: r.get(2)?, item_id: r.get(3)?, lot: r.get(4)? },
            qty: r.get(5)?,
            kind: r.get(6)?,
            event_at: r.get(7)?,
        })
    })
    .optional()
}

fn same_content(prev: &Stored, site: SiteId, key: &Key, m: &NewMovement) -> bool {
    prev.site_id == site.0
        && prev.key == *key
        && prev.qty == m.qty
        && prev.kind == m.kind.as_str()
        && prev.event_at == m.event_at.0
}

/// Looks codes up once per batch.
struct Codes<'a> {
    bins: HashMap<&'a str, Option<i64>>,
    items: HashMap<&'a str, Option<(i64, bool)>>,
}

impl<'a> Codes<'a> {
    fn bin(
        &mut self,
        tx: &Transaction,
        site: SiteId,
        code: &'a str,
    ) -> rusqlite::Result<Option<i64>> {
        if let Some(v) = self.bins.get(code) {
            return Ok(*v);
        }
        let v = tx
            .prepare_cached("select id from bin where site_id = ?1 and code = ?2")?
            .query_row(params![site.0, code], |r| r.get(0))
            .optional()?;
        self.bins.insert(code, v);
        Ok(v)
    }

    fn item(
        &mut self,
        tx: &Transaction,
        site: SiteId,
        sku: &'a str,
    ) -> rusqlite::Result<Option<(i64, bool)>> {
        if let Some(v) = self.items.get(sku) {
            return Ok(*v);
        }
        let v = tx
            .prepare_cached("select id, lot_tracked from item where site_id = ?1 and sku = ?2")?
            .query_row(params![site.0, sku], |r| Ok((r.get(0)?, r.get(1)?)))
            .optional()?;
        self.items.insert(sku, v);
        Ok(v)
    }
}

/// Appends a validated batch in one pass: every row is checked against stored
/// data and written; if any row breaks a rule, the caller's transaction is
/// dropped uncommitted, so the batch writes all rows or none. A resend (same id,
/// same content) is acknowledged and skipped.
pub fn insert_movements(
    tx: &Transaction,
    site: SiteId,
    rows: &[NewMovement],
    now: Timestamp,
    snapshot_every: i64,
    progress: &Progress,
) -> Result<(RecordOutcome, Vec<WrittenMove>), StoreError> {
    let mut codes = Codes {
        bins: HashMap::new(),
        items: HashMap::new(),
    };
    let mut seen: HashMap<&str, usize> = HashMap::with_capacity(rows.len());
    let mut ids: Vec<Option<i64>> = Vec::with_capacity(rows.len());
    let mut errors = Vec::new();
    let mut outcome = RecordOutcome::default();
    let mut insert = tx.prepare_cached(
        "insert into movement (uid, site_id, bin_id, item_id, lot, qty, kind, event_at, recorded_at,
                               source, doc_ref, actor, reverses)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)
         on conflict (uid) do nothing",
    )?;
    let mut lot_q = tx.prepare_cached(
        "insert into lot (item_id, code, expiry) values (?1, ?2, ?3) on conflict do nothing",
    )?;
    let mut reversed_q = tx.prepare_cached("select 1 from movement where reverses = ?1 limit 1")?;
    let mut written_moves = Vec::new();
    for (i, m) in rows.iter().enumerate() {
        ids.push(None);
        let mut err = |field: &str, msg: String| errors.push(RowError::new(i, field, msg));
        if let Some(first) = seen.insert(m.uid.as_str(), i) {
            err(
                "id",
                format!(
                    "id '{}' appears twice in this batch (first at row {first})",
                    m.uid
                ),
            );
            continue;
        }
        let bin_id = codes.bin(tx, site, m.bin.as_str())?;
        let item = codes.item(tx, site, m.sku.as_str())?;
        if bin_id.is_none() {
            err("bin", format!("unknown bin '{}' in this site", m.bin));
        }
        match item {
            None => err("sku", format!("unknown SKU '{}' in this site", m.sku)),
            Some((_, true)) if m.lot.is_empty() => err(
                "lot",
                format!("SKU '{}' is lot-tracked: a lot is required", m.sku),
            ),
            Some((_, false)) if !m.lot.is_empty() => err(
                "lot",
                format!("SKU '{}' is not lot-tracked: leave lot empty", m.sku),
            ),
            _ => {}
        }
        let (Some(bin_id), Some((item_id, _))) = (bin_id, item) else {
            continue;
        };
        let key = Key {
            bin_id,
            item_id,
            lot: m.lot.clone(),
        };
        let reverses = match &m.reverses {
            None => None,
            Some(r) => {
                let mirror = |o_qty: i64| {
                    format!(
                        "a reversal of '{r}' must name the same bin, SKU and lot with quantity {}",
                        -o_qty
                    )
                };
                if let Some(&j) = seen.get(r.as_str()).filter(|&&j| j < i) {
                    let o = &rows[j];
                    if o.bin != m.bin || o.sku != m.sku || o.lot != m.lot || o.qty != -m.qty {
                        err("reverses", mirror(o.qty));
                    }
                    match ids[j] {
                        Some(id) => Some(id),
                        None => stored_by_uid(tx, r.as_str())?.map(|o| o.id),
                    }
                } else if let Some(o) = stored_by_uid(tx, r.as_str())? {
                    if o.site_id != site.0 || o.key != key || o.qty != -m.qty {
                        err("reverses", mirror(o.qty));
                    }
                    if reversed_q.exists([o.id])? {
                        err(
                            "reverses",
                            format!("movement '{r}' has already been reversed"),
                        );
                    }
                    Some(o.id)
                } else {
                    err(
                        "reverses",
                        format!("movement '{r}' to reverse is not in the ledger"),
                    );
                    None
                }
            }
        };
        if !errors.is_empty() {
            // The batch will be refused: keep checking, stop writing.
            if let Some(prev) = stored_by_uid(tx, m.uid.as_str())?
                && !same_content(&prev, site, &key, m)
            {
                errors.push(RowError::new(
                    i,
                    "id",
                    format!("id '{}' is already recorded with different content", m.uid),
                ));
            }
            continue;
        }
        let recorded_at = m.recorded_at.unwrap_or(now);
        let written = insert.execute(params![
            m.uid.as_str(),
            site.0,
            bin_id,
            item_id,
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
            let prev = stored_by_uid(tx, m.uid.as_str())?.ok_or_else(|| {
                anyhow::anyhow!("movement '{}' conflicted but cannot be read", m.uid)
            })?;
            if !same_content(&prev, site, &key, m) {
                errors.push(RowError::new(
                    i,
                    "id",
                    format!("id '{}' is already recorded with different content", m.uid),
                ));
            }
            outcome.already_recorded += 1;
            continue;
        }
        ids[i] = Some(tx.last_insert_rowid());
        if !m.lot.is_empty() {
            lot_q.execute(params![item_id, m.lot, m.expiry.map(|d| d.to_string())])?;
        }
        apply_to_balance(tx, &key, m.qty, m.event_at.0, snapshot_every)?;
        written_moves.push(WrittenMove {
            id: ids[i].unwrap_or_default(),
            uid: m.uid.as_str().to_string(),
            bin_id: key.bin_id,
            key: (key.item_id, key.lot),
            event_at: m.event_at,
            source: m.source.clone(),
        });
        outcome.recorded += 1;
        if (i + 1) % PROGRESS_EVERY == 0 {
            progress.tick(PROGRESS_EVERY as u64);
        }
    }
    if !errors.is_empty() {
        return Err(StoreError::Rejected(errors));
    }
    progress.tick((rows.len() % PROGRESS_EVERY) as u64);
    drop((insert, lot_q, reversed_q));
    outcome.watermark = watermark(tx)?;
    Ok((outcome, written_moves))
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
