//! The ledger over PostgreSQL: `LedgerTx` (one checked movement written with its lot, its
//! balance and snapshots, in the caller's transaction) and the balance and history reads,
//! with the same cursors as the SQLite store.

use super::tx::PgTx;
use super::{PgStore, row_one, row_opt, rows};
use crate::ledger::{
    BalanceRow, Inserted, ItemRef, LedgerKey, LedgerTx, Movement, MovementKind, MovementWrite,
    NewMovement, Reverses, StoredMovement,
};
use crate::master::SiteId;
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::store::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, HistorySubject, MAX_PAGE_ROWS, StoreError,
};
use crate::time::Timestamp;
use deadpool_postgres::Client;
use std::collections::HashMap;
use tokio_postgres::types::ToSql;

impl LedgerTx for PgTx<'_> {
    fn bin_id(&self, site: SiteId, bin: &BinCode) -> Result<Option<i64>, StoreError> {
        Ok(self
            .query_opt(
                "select id from bin where site_id = $1 and code = $2",
                &[&site.0, &bin.as_str()],
            )?
            .map(|r| r.get(0)))
    }

    fn item_ref(&self, site: SiteId, sku: &Sku) -> Result<Option<ItemRef>, StoreError> {
        Ok(self
            .query_opt(
                "select id, lot_tracked from item where site_id = $1 and sku = $2",
                &[&site.0, &sku.as_str()],
            )?
            .map(|r| ItemRef {
                id: r.get(0),
                lot_tracked: r.get(1),
            }))
    }

    fn bin_ids(
        &self,
        site: SiteId,
        codes: &[&BinCode],
    ) -> Result<HashMap<String, i64>, StoreError> {
        let codes: Vec<&str> = codes.iter().map(|c| c.as_str()).collect();
        self.query(
            "select code, id from bin where site_id = $1 and code = any($2)",
            &[&site.0, &codes],
        )?
        .iter()
        .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
        .collect()
    }

    fn item_refs(
        &self,
        site: SiteId,
        skus: &[&Sku],
    ) -> Result<HashMap<String, ItemRef>, StoreError> {
        let skus: Vec<&str> = skus.iter().map(|s| s.as_str()).collect();
        self.query(
            "select sku, id, lot_tracked from item where site_id = $1 and sku = any($2)",
            &[&site.0, &skus],
        )?
        .iter()
        .map(|r| {
            Ok((
                r.try_get(0)?,
                ItemRef {
                    id: r.try_get(1)?,
                    lot_tracked: r.try_get(2)?,
                },
            ))
        })
        .collect()
    }

    fn movement_by_uid(&self, uid: &MovementUid) -> Result<Option<StoredMovement>, StoreError> {
        self.query_opt(
            "select id, site_id, bin_id, item_id, lot, qty, kind, event_at from movement
              where uid = $1",
            &[&uid.as_str()],
        )?
        .map(|r| {
            let kind: String = r.get(6);
            Ok(StoredMovement {
                id: r.get(0),
                site: SiteId(r.get(1)),
                key: LedgerKey {
                    bin_id: r.get(2),
                    item_id: r.get(3),
                    lot: r.get(4),
                },
                qty: r.get(5),
                kind: MovementKind::parse(&kind)
                    .ok_or_else(|| anyhow::anyhow!("unknown movement kind '{kind}'"))?,
                event_at: Timestamp(r.get(7)),
            })
        })
        .transpose()
    }

    fn is_reversed(&self, movement: i64) -> Result<bool, StoreError> {
        Ok(self
            .query_opt(
                "select 1 from movement where reverses = $1 limit 1",
                &[&movement],
            )?
            .is_some())
    }

    fn insert_movement(
        &self,
        site: SiteId,
        m: &NewMovement,
        key: &LedgerKey,
        recorded_at: Timestamp,
        reverses: Option<i64>,
    ) -> Result<Inserted, StoreError> {
        let w = MovementWrite {
            m,
            key: key.clone(),
            recorded_at,
            reverses: reverses.map_or(Reverses::Nothing, Reverses::Stored),
        };
        let mut done = self.insert_movements(site, std::slice::from_ref(&w))?;
        done.pop()
            .ok_or_else(|| anyhow::anyhow!("the movement '{}' was not written", m.uid).into())
    }

    /// Each movement is one statement that needs nothing back to finish its work (see
    /// [`WRITE_MOVEMENT`]), so a batch's statements are sent together: one round trip.
    fn insert_movements(
        &self,
        site: SiteId,
        rows: &[MovementWrite<'_>],
    ) -> Result<Vec<Inserted>, StoreError> {
        let expiry: Vec<Option<String>> = rows
            .iter()
            .map(|w| w.m.expiry.map(|d| d.to_string()))
            .collect();
        let answers = self.together(
            "ledger: a batch's movements",
            futures_util::future::try_join_all(rows.iter().zip(&expiry).map(|(w, expiry)| {
                let (m, key) = (w.m, &w.key);
                let (reverses, reverses_uid) = match w.reverses {
                    Reverses::Nothing => (None, None),
                    Reverses::Stored(id) => (Some(id), None),
                    Reverses::Earlier(uid) => (None, Some(uid.as_str())),
                };
                async move {
                    self.rows(
                        WRITE_MOVEMENT,
                        &[
                            &m.uid.as_str(),
                            &site.0,
                            &key.bin_id,
                            &key.item_id,
                            &m.lot,
                            &m.qty,
                            &m.kind.as_str(),
                            &m.event_at.0,
                            &w.recorded_at.0,
                            &m.source,
                            &m.doc_ref,
                            &m.actor,
                            &reverses,
                            &reverses_uid,
                            expiry,
                            &self.snapshot_every,
                        ],
                    )
                    .await
                }
            })),
        )?;
        answers
            .iter()
            .map(|rows| match rows.first() {
                Some(r) => Ok(Inserted::New(r.try_get(0)?)),
                None => Ok(Inserted::Existing),
            })
            .collect()
    }
}

/// One movement with everything it changes, unless its id is stored already: the
/// movement; its lot; every balance snapshot at or after its event time (a late
/// movement); the key's balance; and, when the key has moved `$16` times since its last
/// snapshot, a new snapshot of the balance at the key's latest event time (every delta of
/// the key has an event time at or before it, so the balance is the snapshot). A
/// snapshot already at that time is at or after this movement's event time, so `late`
/// has brought it to the same balance: the new one is then left out (`do nothing`; the
/// statement may not change that row twice). The store's SQLite code makes the same
/// changes a statement each. A reversal names its
/// original by ledger id (`$13`) or, for one earlier in the same batch, by sender's id
/// (`$14`, written by an earlier statement).
const WRITE_MOVEMENT: &str = "with m as (
         insert into movement (uid, site_id, bin_id, item_id, lot, qty, kind, event_at,
                               recorded_at, source, doc_ref, actor, reverses)
         values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12,
                 coalesce($13::bigint,
                          (select id from movement where uid = $14::text)))
         on conflict (uid) do nothing
         returning id),
     l as (
         insert into lot (item_id, code, expiry)
         select $4, $5, $15::text from m where $5 <> ''
         on conflict do nothing),
     late as (
         update balance_snapshot set qty = qty + $6
         where bin_id = $3 and item_id = $4 and lot = $5 and at >= $8
           and exists (select 1 from m)),
     b as (
         insert into balance (bin_id, item_id, lot, qty, last_event_at, moves_since_snap,
                              snap_at)
         select $3, $4, $5, $6, $8,
                case when 1 >= $16::bigint then 0 else 1 end,
                case when 1 >= $16::bigint then $8 end
         from m
         on conflict (bin_id, item_id, lot) do update set
             qty = balance.qty + excluded.qty,
             last_event_at = greatest(balance.last_event_at, excluded.last_event_at),
             moves_since_snap = case when balance.moves_since_snap + 1 >= $16::bigint then 0
                                     else balance.moves_since_snap + 1 end,
             snap_at = case when balance.moves_since_snap + 1 >= $16::bigint
                            then greatest(balance.last_event_at, excluded.last_event_at)
                            else balance.snap_at end
         returning qty, last_event_at, moves_since_snap),
     s as (
         insert into balance_snapshot (bin_id, item_id, lot, at, qty)
         select $3, $4, $5, b.last_event_at, b.qty from b where b.moves_since_snap = 0
         on conflict (bin_id, item_id, lot, at) do nothing)
     select id from m";

/// Returns the ledger's high-water mark on a read connection.
pub async fn watermark(c: &Client) -> Result<i64, StoreError> {
    Ok(row_one(c, super::tx::WATERMARK_SQL, &[]).await?.get(0))
}

/// The balance of a key (`$1` bin, `$2` item, `$3` lot) as of `$4`: the sum of its deltas
/// with `event_at <= $4`, read from the newest snapshot at or before it plus one index
/// range after it.
const BALANCE_AS_OF: &str = "with s as (select at, qty from balance_snapshot
                where bin_id = $1 and item_id = $2 and lot = $3 and at <= $4
                order by at desc limit 1)
     select coalesce((select qty from s), 0)
          + coalesce((select sum(qty) from movement
                      where bin_id = $1 and item_id = $2 and lot = $3
                        and event_at > coalesce((select at from s), '-9223372036854775808'::bigint)
                        and event_at <= $4), 0)::bigint";

/// Returns the balance of `key` as of `at` on a read connection.
pub async fn balance_as_of(c: &Client, key: &LedgerKey, at: i64) -> Result<i64, StoreError> {
    Ok(row_one(
        c,
        BALANCE_AS_OF,
        &[&key.bin_id, &key.item_id, &key.lot, &at],
    )
    .await?
    .get(0))
}

/// Returns the balance of `key` as of `at` inside a write (what netting reads).
pub fn tx_balance_as_of(tx: &PgTx<'_>, key: &LedgerKey, at: i64) -> Result<i64, StoreError> {
    Ok(tx
        .query_one(BALANCE_AS_OF, &[&key.bin_id, &key.item_id, &key.lot, &at])?
        .get(0))
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

async fn id_of(
    c: &Client,
    sql: &str,
    site: SiteId,
    code: &str,
    what: &str,
) -> Result<i64, StoreError> {
    Ok(row_opt(c, sql, &[&site.0, &code])
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("unknown {what} '{code}' in this site")))?
        .get(0))
}

async fn bin_id(c: &Client, site: SiteId, code: &str) -> Result<i64, StoreError> {
    let sql = "select id from bin where site_id = $1 and code = $2";
    id_of(c, sql, site, code, "bin").await
}

async fn item_id(c: &Client, site: SiteId, sku: &str) -> Result<i64, StoreError> {
    let sql = "select id from item where site_id = $1 and sku = $2";
    id_of(c, sql, site, sku, "SKU").await
}

/// See [`crate::store::Store::balances`]: a page of balances, now or as of `query.at`.
pub async fn balances(
    store: &PgStore,
    site: SiteId,
    query: BalanceQuery,
) -> Result<BalancePage, StoreError> {
    let c = store.client().await?;
    let mut sql = String::from(
        "select b.bin_id, b.item_id, b.lot, b.qty, bin.code, item.sku
         from balance b join bin on bin.id = b.bin_id join item on item.id = b.item_id
         where bin.site_id = $1",
    );
    let mut args: Vec<Box<dyn ToSql + Sync + Send>> = vec![Box::new(site.0)];
    let mut arg = |sql: &mut String, cond: &str, v: Box<dyn ToSql + Sync + Send>| {
        args.push(v);
        sql.push_str(&cond.replace('?', &format!("${}", args.len())));
    };
    if let Some(b) = &query.bin {
        let id = bin_id(&c, site, b.as_str()).await?;
        arg(&mut sql, " and b.bin_id = ?", Box::new(id));
    }
    if let Some(s) = &query.sku {
        let id = item_id(&c, site, s.as_str()).await?;
        arg(&mut sql, " and b.item_id = ?", Box::new(id));
    }
    if let Some(l) = &query.lot {
        arg(&mut sql, " and b.lot = ?", Box::new(l.clone()));
    }
    if let Some(cursor) = &query.after {
        let [b, i, l] = parse_cursor::<3>(cursor)?;
        let (b, i) = (cursor_int(&b)?, cursor_int(&i)?);
        args.push(Box::new(b));
        args.push(Box::new(i));
        args.push(Box::new(l));
        let n = args.len();
        sql.push_str(&format!(
            " and (b.bin_id, b.item_id, b.lot collate \"C\") > (${}, ${}, ${})",
            n - 2,
            n - 1,
            n
        ));
    }
    if query.at.is_none() && !query.include_zero {
        sql.push_str(" and b.qty <> 0");
    }
    let limit = query.limit.clamp(1, MAX_PAGE_ROWS);
    sql.push_str(&format!(
        " order by b.bin_id, b.item_id, b.lot collate \"C\" limit {limit}"
    ));
    let params: Vec<&(dyn ToSql + Sync)> = args
        .iter()
        .map(|a| a.as_ref() as &(dyn ToSql + Sync))
        .collect();
    let found = rows(&c, &sql, &params).await?;
    let fetched = found.len();
    let mut balances = Vec::new();
    let mut last = None;
    for r in found {
        let key = LedgerKey {
            bin_id: r.get(0),
            item_id: r.get(1),
            lot: r.get(2),
        };
        let qty = match query.at {
            Some(at) => balance_as_of(&c, &key, at.0).await?,
            None => r.get(3),
        };
        if qty != 0 || query.include_zero {
            balances.push(BalanceRow {
                bin: r.get(4),
                sku: r.get(5),
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
        watermark: watermark(&c).await?,
    })
}

/// See [`crate::store::Store::movements`]: a page of a bin's or an item's movements in
/// event order.
pub async fn movements(
    store: &PgStore,
    site: SiteId,
    query: HistoryQuery,
) -> Result<HistoryPage, StoreError> {
    let c = store.client().await?;
    let (column, id) = match &query.subject {
        HistorySubject::Bin(b) => ("m.bin_id", bin_id(&c, site, b.as_str()).await?),
        HistorySubject::Item(s) => ("m.item_id", item_id(&c, site, s.as_str()).await?),
    };
    let (after_at, after_seq) = match &query.after {
        None => (i64::MIN, i64::MIN),
        Some(cursor) => {
            let [a, s] = parse_cursor::<2>(cursor)?;
            (cursor_int(&a)?, cursor_int(&s)?)
        }
    };
    let limit = query.limit.clamp(1, MAX_PAGE_ROWS);
    let sql = format!(
        "select m.id, m.uid, bin.code, item.sku, m.lot, m.qty, m.kind, m.event_at, m.recorded_at,
                m.source, m.doc_ref, m.actor, r.uid
         from movement m join bin on bin.id = m.bin_id join item on item.id = m.item_id
              left join movement r on r.id = m.reverses
         where {column} = $1 and m.event_at >= $2 and m.event_at <= $3
           and (m.event_at, m.id) > ($4, $5)
         order by m.event_at, m.id limit $6"
    );
    let from = query.from.map_or(i64::MIN, |t| t.0);
    let to = query.to.map_or(i64::MAX, |t| t.0);
    let movements: Vec<Movement> = rows(
        &c,
        &sql,
        &[&id, &from, &to, &after_at, &after_seq, &(limit as i64)],
    )
    .await?
    .iter()
    .map(|r| {
        let kind: String = r.get(6);
        Movement {
            seq: r.get(0),
            id: r.get(1),
            bin: r.get(2),
            sku: r.get(3),
            lot: r.get(4),
            qty: r.get(5),
            kind: MovementKind::parse(&kind).unwrap_or(MovementKind::Adjustment),
            event_at: Timestamp(r.get(7)),
            recorded_at: Timestamp(r.get(8)),
            source: r.get(9),
            doc_ref: r.get(10),
            actor: r.get(11),
            reverses: r.get(12),
        }
    })
    .collect();
    let next = movements
        .last()
        .filter(|_| movements.len() == limit)
        .map(|m| format!("{}.{}", m.event_at.0, m.seq));
    Ok(HistoryPage { movements, next })
}
