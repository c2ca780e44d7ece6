//! Netting over PostgreSQL: the queries and writes of `NettingTx`, `RecountTx` (recount
//! placement) and `SettleTx` (the workflows are `netting::pass`, `netting::recount` and
//! `netting::settle`), and the netting reads and policy of the `Store` trait. The SQL
//! follows `store/sqlite/netting/` statement for statement.

use super::PgStore;
use super::tx::{PgTx, WATERMARK_SQL, watermark_row};
use crate::accounts::audit::{AuditEvent, AuditTx};
use crate::master::SiteId;
use crate::netting::pass::{
    CurrentResult, ItemFacts, ItemLot, KeyRead, KeysAsk, NettingTx, NewResult, OpenTask, PassRead,
};
use crate::netting::recount::{
    DayList, NewRecountTask, PlacementRead, Rechecked, RecountTx, RunLoad, SentResult,
};
use crate::netting::results::*;
use crate::netting::rule::CountTiming;
use crate::netting::service::{Evidence, LedgerMove, NettingSettings, ReasonCode, SourceTimingRow};
use crate::netting::settle::{AutoCandidate, SettleTx};
use crate::netting::tolerance::Tolerance;
use crate::planning::abc::Class;
use crate::store::{StoreError, WriteScope};
use crate::time::Timestamp;
use deadpool_postgres::GenericClient;
use std::collections::{BTreeMap, BTreeSet, HashMap};
use tokio_postgres::Row;
use tokio_postgres::types::ToSql;

fn json<T: serde::Serialize>(v: &T) -> Result<String, StoreError> {
    Ok(serde_json::to_string(v).map_err(anyhow::Error::from)?)
}

/// A u32 as the bigint PostgreSQL stores it.
fn big(n: u32) -> i64 {
    i64::from(n)
}

/// A stored bigint that must fit a u32.
fn small(r: &Row, i: usize) -> Result<u32, StoreError> {
    let v: i64 = r.try_get(i)?;
    u32::try_from(v).map_err(|_| anyhow::anyhow!("stored count {v} is out of range").into())
}

fn item_lots(rows: Vec<Row>) -> Result<Vec<ItemLot>, StoreError> {
    rows.iter()
        .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
        .collect()
}

/// Reads a site's tolerances and review limits (the defaults until some are stored).
pub(super) fn settings_row(r: Option<Row>) -> Result<NettingSettings, StoreError> {
    let Some(r) = r else {
        return Ok(NettingSettings::default());
    };
    let t = |i: usize| -> Result<Tolerance, StoreError> {
        Ok(Tolerance {
            units: r.try_get(i)?,
            percent_bp: r.try_get(i + 1)?,
            value_minor: r.try_get(i + 2)?,
        })
    };
    let mut s = NettingSettings::default();
    s.tolerances.a = t(0)?;
    s.tolerances.b = t(3)?;
    s.tolerances.c = t(6)?;
    s.auto_adjust = r.try_get(9)?;
    s.manager_value_minor = r.try_get(10)?;
    s.bulk_value_minor = r.try_get(11)?;
    Ok(s)
}

/// A site's settings row, the site named by `$site` (a parameter or a subquery).
macro_rules! settings_sql {
    ($site:literal) => {
        concat!(
            "select tol_a_units, tol_a_bp, tol_a_value_minor, tol_b_units, tol_b_bp,
                    tol_b_value_minor, tol_c_units, tol_c_bp, tol_c_value_minor,
                    auto_adjust, manager_value_minor, bulk_value_minor
             from netting_settings where site_id = ",
            $site
        )
    };
}

/// A site's source timings, the site named as in [`settings_sql`].
macro_rules! sources_sql {
    ($site:literal) => {
        concat!(
            "select source, uncertainty_ms, posting_lag_ms from source_timing
             where site_id = ",
            $site,
            " order by source collate \"C\""
        )
    };
}

pub(super) const SETTINGS_SQL: &str = settings_sql!("$1");
pub(super) const SOURCES_SQL: &str = sources_sql!("$1");

/// A pass with its bin, counter and task. The task's fields are read by its key in
/// subqueries (as in `rechecked_sql`): a join may keep a plan that scans every task, made
/// while the table was small.
macro_rules! pass_sql {
    ($which:literal) => {
        concat!(
            "select p.id, p.uid, p.site_id, p.bin_id, b.code, p.task_id,
            (select t.est_s from count_task t where t.id = p.task_id), u.name,
            p.first_at, p.done_at, p.uncertainty_ms,
            (select t.id from count_task t where t.id = p.task_id and t.recount_of is not null),
            coalesce((select t.withdrawn_at is not null from count_task t
                      where t.id = p.task_id), false),
            p.held, (select s.time_zone from site s where s.id = p.site_id)
     from count_pass p join bin b on b.id = p.bin_id
     join user_account u on u.id = p.user_id
     where p.id ",
            $which
        )
    };
}

const PASS_SQL: &str = pass_sql!("= $1");

const COUNTED_SQL: &str = "select l.item_id, l.lot, sum(l.qty)::bigint, max(l.at) from count_line l
     where l.pass_id = $1
       and not exists (select 1 from count_line_undo u where u.line_uid = l.uid)
     group by l.item_id, l.lot";

const NETTED_SQL: &str =
    "select item_id, lot from count_result where pass_id = $1 and superseded_by is null";

/// The recount tasks of first count `$1` not done, not withdrawn, not counted against.
macro_rules! open_tasks_sql {
    ($select:literal) => {
        concat!(
            "select ",
            $select,
            " from count_result r join count_task_recheck k on k.result_id = r.id
                 join count_task t on t.id = k.task_id
             where r.pass_id = $1
               and t.withdrawn_at is null and t.status <> 'done'
               and not exists (select 1 from count_pass p
                               where p.task_id = t.id and p.done_at is not null)"
        )
    };
}

/// The keys recount task `$task` re-checks, with the pass of each key's first count.
/// Each result is read by its key in a subquery of its own: a join would let a plan made
/// while `count_result` was small (a prepared statement's generic plan lives as long as
/// the connection) scan the whole table once it has grown, as it does within one long
/// netting transaction.
macro_rules! rechecked_sql {
    ($task:literal) => {
        concat!(
            "select distinct r.item_id, r.lot collate \"C\" as lot, r.pass_id
             from (select (select item_id from count_result where id = k.result_id) as item_id,
                          (select lot from count_result where id = k.result_id) as lot,
                          (select pass_id from count_result where id = k.result_id) as pass_id
                   from count_task_recheck k
                   where k.task_id = ",
            $task,
            ") r order by r.pass_id, r.item_id, lot"
        )
    };
}

pub(super) fn source_rows(rows: Vec<Row>) -> Result<Vec<SourceTimingRow>, StoreError> {
    rows.iter()
        .map(|r| {
            Ok(SourceTimingRow {
                source: r.try_get(0)?,
                uncertainty_ms: r.try_get(1)?,
                posting_lag_ms: r.try_get(2)?,
            })
        })
        .collect()
}

fn pass_row(r: &Row) -> Result<PassFacts, StoreError> {
    Ok(PassFacts {
        id: r.try_get(0)?,
        uid: r.try_get(1)?,
        site: SiteId(r.try_get(2)?),
        bin_id: r.try_get(3)?,
        bin_code: r.try_get(4)?,
        task_est_s: r.try_get(6)?,
        user_name: r.try_get(7)?,
        timing: CountTiming {
            first_scan: Timestamp(r.try_get(8)?),
            done: r.try_get::<_, Option<i64>>(9)?.map(Timestamp),
            clock_uncertainty_ms: r.try_get(10)?,
        },
        recount_task: r.try_get(11)?,
        withdrawn: r.try_get(12)?,
        held: r.try_get(13)?,
        zone: super::master::stored_zone(r.try_get(14)?),
    })
}

fn counted_rows(rows: Vec<Row>) -> Result<BTreeMap<ItemLot, (i64, Timestamp)>, StoreError> {
    rows.iter()
        .map(|r| {
            Ok((
                (r.try_get(0)?, r.try_get(1)?),
                (r.try_get(2)?, Timestamp(r.try_get(3)?)),
            ))
        })
        .collect()
}

fn rechecked_rows(rows: Vec<Row>) -> Result<Vec<(ItemLot, i64)>, StoreError> {
    rows.iter()
        .map(|r| Ok(((r.try_get(0)?, r.try_get(1)?), r.try_get(2)?)))
        .collect()
}

impl NettingTx for PgTx<'_> {
    fn pass_facts(&self, pass: i64) -> Result<Option<PassFacts>, StoreError> {
        self.query_opt(PASS_SQL, &[&pass])?
            .map(|r| pass_row(&r))
            .transpose()
    }

    /// Nine statements sent together: one round trip a pass.
    fn pass_read(&self, pass: i64) -> Result<Option<PassRead>, StoreError> {
        let p: &[&(dyn ToSql + Sync)] = &[&pass];
        let (facts, settings, timings, watermark, counted, bin_keys, netted, rechecked, open) =
            self.together("netting: a pass's reads", async {
                tokio::try_join!(
                    self.rows(PASS_SQL, p),
                    self.rows(
                        settings_sql!("(select site_id from count_pass where id = $1)"),
                        p
                    ),
                    self.rows(
                        sources_sql!("(select site_id from count_pass where id = $1)"),
                        p
                    ),
                    self.rows(WATERMARK_SQL, &[]),
                    self.rows(COUNTED_SQL, p),
                    self.rows(
                        "select item_id, lot from balance
                         where bin_id = (select bin_id from count_pass where id = $1)",
                        p
                    ),
                    self.rows(NETTED_SQL, p),
                    self.rows(
                        rechecked_sql!(
                            "(select t.id from count_pass p join count_task t on t.id = p.task_id
                              where p.id = $1 and t.recount_of is not null)"
                        ),
                        p
                    ),
                    self.rows(concat!("select exists (", open_tasks_sql!("1"), ")"), p),
                )
            })?;
        let Some(facts) = facts.first().map(pass_row).transpose()? else {
            return Ok(None);
        };
        Ok(Some(PassRead {
            facts,
            settings: settings_row(settings.into_iter().next())?,
            timings: source_rows(timings)?,
            watermark: watermark_row(&watermark)?,
            counted: counted_rows(counted)?,
            bin_keys: item_lots(bin_keys)?,
            netted: item_lots(netted)?,
            rechecked: rechecked_rows(rechecked)?,
            has_open_tasks: open
                .first()
                .map(|r| r.try_get(0))
                .transpose()?
                .unwrap_or(false),
        }))
    }

    /// Seven statements for every pass at once, sent together, and one more a recount
    /// pass (the keys its task re-checks).
    fn pass_reads(&self, passes: &[i64]) -> Result<Vec<Option<PassRead>>, StoreError> {
        if passes.len() < 2 {
            return passes.iter().map(|&p| self.pass_read(p)).collect();
        }
        let p: &[&(dyn ToSql + Sync)] = &[&passes];
        let (facts, settings, timings, watermark, counted, bin_keys, netted, open) = self
            .together("netting: passes' reads", async {
                tokio::try_join!(
                    self.rows(pass_sql!("= any($1)"), p),
                    self.rows(
                        "select tol_a_units, tol_a_bp, tol_a_value_minor, tol_b_units, tol_b_bp,
                                tol_b_value_minor, tol_c_units, tol_c_bp, tol_c_value_minor,
                                auto_adjust, manager_value_minor, bulk_value_minor, site_id
                         from netting_settings
                         where site_id in (select site_id from count_pass where id = any($1))",
                        p
                    ),
                    self.rows(
                        "select source, uncertainty_ms, posting_lag_ms, site_id from source_timing
                         where site_id in (select site_id from count_pass where id = any($1))
                         order by source collate \"C\"",
                        p
                    ),
                    self.rows(WATERMARK_SQL, &[]),
                    self.rows(
                        "select l.item_id, l.lot, sum(l.qty)::bigint, max(l.at), l.pass_id
                         from count_line l
                         where l.pass_id = any($1)
                           and not exists (select 1 from count_line_undo u where u.line_uid = l.uid)
                         group by l.pass_id, l.item_id, l.lot",
                        p
                    ),
                    self.rows(
                        "select b.item_id, b.lot, p.id from count_pass p
                         join balance b on b.bin_id = p.bin_id where p.id = any($1)",
                        p
                    ),
                    self.rows(
                        "select item_id, lot, pass_id from count_result
                         where pass_id = any($1) and superseded_by is null",
                        p
                    ),
                    self.rows(
                        "select distinct r.pass_id
                         from count_result r join count_task_recheck k on k.result_id = r.id
                         join count_task t on t.id = k.task_id
                         where r.pass_id = any($1)
                           and t.withdrawn_at is null and t.status <> 'done'
                           and not exists (select 1 from count_pass p
                                           where p.task_id = t.id and p.done_at is not null)",
                        p
                    ),
                )
            })?;
        let watermark = watermark_row(&watermark)?;
        // Rows grouped by the id in their last column.
        let by = |rows: Vec<Row>, col: usize| -> Result<HashMap<i64, Vec<Row>>, StoreError> {
            let mut m: HashMap<i64, Vec<Row>> = HashMap::new();
            for r in rows {
                m.entry(r.try_get(col)?).or_default().push(r);
            }
            Ok(m)
        };
        let mut settings = by(settings, 12)?;
        let mut timings = by(timings, 3)?;
        let mut counted = by(counted, 4)?;
        let mut bin_keys = by(bin_keys, 2)?;
        let mut netted = by(netted, 2)?;
        let open: BTreeSet<i64> = open
            .iter()
            .map(|r| r.try_get(0))
            .collect::<Result<_, _>>()?;
        let mut facts: HashMap<i64, PassFacts> = facts
            .iter()
            .map(|r| pass_row(r).map(|f| (f.id, f)))
            .collect::<Result<_, _>>()?;
        let mut sites: HashMap<i64, (NettingSettings, Vec<SourceTimingRow>)> = HashMap::new();
        passes
            .iter()
            .map(|pass| {
                let Some(facts) = facts.remove(pass) else {
                    return Ok(None);
                };
                let site = facts.site.0;
                let (settings, timings) = match sites.entry(site) {
                    std::collections::hash_map::Entry::Occupied(e) => e.get().clone(),
                    std::collections::hash_map::Entry::Vacant(e) => {
                        let s = settings_row(
                            settings.remove(&site).and_then(|v| v.into_iter().next()),
                        )?;
                        let t = source_rows(timings.remove(&site).unwrap_or_default())?;
                        e.insert((s, t)).clone()
                    }
                };
                let rechecked = match facts.recount_task {
                    Some(task) => self.rechecked_keys(task)?,
                    None => Vec::new(),
                };
                Ok(Some(PassRead {
                    settings,
                    timings,
                    watermark,
                    counted: counted_rows(counted.remove(pass).unwrap_or_default())?,
                    bin_keys: item_lots(bin_keys.remove(pass).unwrap_or_default())?,
                    netted: item_lots(netted.remove(pass).unwrap_or_default())?,
                    rechecked,
                    has_open_tasks: open.contains(pass),
                    facts,
                }))
            })
            .collect()
    }

    fn netting_settings(&self, site: SiteId) -> Result<NettingSettings, StoreError> {
        settings_row(self.query_opt(SETTINGS_SQL, &[&site.0])?)
    }

    fn source_timings(&self, site: SiteId) -> Result<Vec<SourceTimingRow>, StoreError> {
        source_rows(self.query(SOURCES_SQL, &[&site.0])?)
    }

    fn counted_keys(&self, pass: i64) -> Result<BTreeMap<ItemLot, (i64, Timestamp)>, StoreError> {
        counted_rows(self.query(COUNTED_SQL, &[&pass])?)
    }

    fn bin_keys(&self, bin: i64) -> Result<Vec<ItemLot>, StoreError> {
        item_lots(self.query(
            "select item_id, lot from balance where bin_id = $1",
            &[&bin],
        )?)
    }

    fn netted_keys(&self, pass: i64) -> Result<Vec<ItemLot>, StoreError> {
        item_lots(self.query(NETTED_SQL, &[&pass])?)
    }

    fn current_result(
        &self,
        pass: i64,
        key: &ItemLot,
    ) -> Result<Option<CurrentResult>, StoreError> {
        let Some(r) = self.query_opt(
            "select id, status, verdict, recount_outcome, unit_cost_minor, evidence
             from count_result
             where pass_id = $1 and item_id = $2 and lot = $3 and superseded_by is null",
            &[&pass, &key.0, &key.1],
        )?
        else {
            return Ok(None);
        };
        let id: i64 = r.try_get(0)?;
        let ev: String = r.try_get(5)?;
        let evidence =
            Evidence::parse(&ev).map_err(|e| anyhow::anyhow!("count_result {id}: {e}"))?;
        Ok(Some(CurrentResult {
            id,
            status: r.try_get(1)?,
            verdict: r.try_get(2)?,
            recount_outcome: r.try_get(3)?,
            unit_cost_minor: r.try_get(4)?,
            evidence,
        }))
    }

    fn item_facts(&self, item: i64) -> Result<ItemFacts, StoreError> {
        let r = self.query_one(
            "select i.sku, i.unit_cost_minor,
                    (select c.class from item_class c where c.item_id = i.id
                     order by c.run_id desc limit 1)
             from item i where i.id = $1",
            &[&item],
        )?;
        let class: Option<String> = r.try_get(2)?;
        Ok(ItemFacts {
            sku: r.try_get(0)?,
            unit_cost_minor: r.try_get(1)?,
            class: class.as_deref().and_then(Class::parse),
        })
    }

    fn balance_as_of(&self, bin: i64, key: &ItemLot, at: Timestamp) -> Result<i64, StoreError> {
        // The newest snapshot at or before `at`, plus one index range of moves after it.
        Ok(self
            .query_one(
                "with s as (select at, qty from balance_snapshot
                            where bin_id = $1 and item_id = $2 and lot = $3 and at <= $4
                            order by at desc limit 1)
                 select (coalesce((select qty from s), 0)
                       + coalesce((select sum(qty) from movement
                                   where bin_id = $1 and item_id = $2 and lot = $3
                                     and event_at > coalesce((select at from s), -9223372036854775808)
                                     and event_at <= $4), 0))::bigint",
                &[&bin, &key.0, &key.1, &at.0],
            )?
            .try_get(0)?)
    }

    fn key_moves(
        &self,
        bin: i64,
        key: &ItemLot,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<LedgerMove>, StoreError> {
        self.query(
            "select id, uid, event_at, qty, kind, source from movement
             where bin_id = $1 and item_id = $2 and lot = $3 and event_at >= $4 and event_at <= $5
             order by event_at, id",
            &[&bin, &key.0, &key.1, &from.0, &to.0],
        )?
        .iter()
        .map(|r| {
            Ok(LedgerMove {
                id: r.try_get(0)?,
                uid: r.try_get(1)?,
                event_at: Timestamp(r.try_get(2)?),
                delta: r.try_get(3)?,
                kind: r.try_get(4)?,
                source: r.try_get(5)?,
            })
        })
        .collect()
    }

    /// Every key at once: three statements a pass instead of three a key (see
    /// [`NettingTx::keys_facts_many`]).
    fn keys_facts(
        &self,
        bin: i64,
        keys: &[ItemLot],
        before: Timestamp,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<KeyRead>, StoreError> {
        let ask = KeysAsk {
            bin,
            keys,
            before,
            from,
            to,
        };
        Ok(self
            .keys_facts_many(std::slice::from_ref(&ask))?
            .pop()
            .unwrap_or_default())
    }

    /// Every key of every bin at once: three statements sent together, since a round trip
    /// to the server, and the planning of a statement, cost more than the index look-ups
    /// it carries. Each key travels with its bin and its times.
    fn keys_facts_many(&self, asks: &[KeysAsk<'_>]) -> Result<Vec<Vec<KeyRead>>, StoreError> {
        let n: usize = asks.iter().map(|a| a.keys.len()).sum();
        if n == 0 {
            return Ok(asks.iter().map(|_| Vec::new()).collect());
        }
        let mut bins = Vec::with_capacity(n);
        let mut items = Vec::with_capacity(n);
        let mut lots: Vec<&str> = Vec::with_capacity(n);
        let (mut before, mut from, mut to) = (
            Vec::with_capacity(n),
            Vec::with_capacity(n),
            Vec::with_capacity(n),
        );
        for a in asks {
            for k in a.keys {
                bins.push(a.bin);
                items.push(k.0);
                lots.push(k.1.as_str());
                before.push(a.before.0);
                from.push(a.from.0);
                to.push(a.to.0);
            }
        }
        let mut distinct = items.clone();
        distinct.sort_unstable();
        distinct.dedup();
        let by_item: &[&(dyn ToSql + Sync)] = &[&distinct];
        let by_key_before: &[&(dyn ToSql + Sync)] = &[&bins, &items, &lots, &before];
        let by_key_within: &[&(dyn ToSql + Sync)] = &[&bins, &items, &lots, &from, &to];
        let (item_rows, balance_rows, move_rows) = self.together("netting: bins' keys", async {
            tokio::try_join!(
                self.rows(
                    "select i.id, i.sku, i.unit_cost_minor,
                            (select c.class from item_class c where c.item_id = i.id
                             order by c.run_id desc limit 1)
                     from item i where i.id = any($1)",
                    by_item,
                ),
                // As balance_as_of, for each key (`ord` numbers them from 1).
                self.rows(
                    "select k.ord,
                            (coalesce(s.qty, 0)
                             + coalesce((select sum(m.qty) from movement m
                                         where m.bin_id = k.bin and m.item_id = k.item
                                           and m.lot = k.lot
                                           and m.event_at > coalesce(s.at, -9223372036854775808)
                                           and m.event_at <= k.before_at), 0))::bigint
                     from unnest($1::bigint[], $2::bigint[], $3::text[], $4::bigint[])
                          with ordinality as k(bin, item, lot, before_at, ord)
                     left join lateral (select at, qty from balance_snapshot
                                        where bin_id = k.bin and item_id = k.item
                                          and lot = k.lot and at <= k.before_at
                                        order by at desc limit 1) s on true",
                    by_key_before,
                ),
                self.rows(
                    "select k.ord, m.id, m.uid, m.event_at, m.qty, m.kind, m.source
                     from unnest($1::bigint[], $2::bigint[], $3::text[], $4::bigint[],
                                 $5::bigint[])
                          with ordinality as k(bin, item, lot, from_at, to_at, ord)
                     join movement m on m.bin_id = k.bin and m.item_id = k.item
                                    and m.lot = k.lot
                                    and m.event_at >= k.from_at and m.event_at <= k.to_at
                     order by k.ord, m.event_at, m.id",
                    by_key_within,
                ),
            )
        })?;
        let mut facts: HashMap<i64, ItemFacts> = HashMap::with_capacity(item_rows.len());
        for r in item_rows {
            let class: Option<String> = r.try_get(3)?;
            facts.insert(
                r.try_get(0)?,
                ItemFacts {
                    sku: r.try_get(1)?,
                    unit_cost_minor: r.try_get(2)?,
                    class: class.as_deref().and_then(Class::parse),
                },
            );
        }
        // A key's place in the arrays, from the 1-based `ord` the server sent back.
        let place = |r: &Row| -> Result<usize, StoreError> {
            let ord: i64 = r.try_get(0)?;
            usize::try_from(ord - 1)
                .ok()
                .filter(|&i| i < n)
                .ok_or_else(|| anyhow::anyhow!("key number {ord} of {n} read back").into())
        };
        let mut balances = vec![0i64; n];
        for r in balance_rows {
            balances[place(&r)?] = r.try_get(1)?;
        }
        let mut moves: Vec<Vec<LedgerMove>> = vec![Vec::new(); n];
        for r in move_rows {
            moves[place(&r)?].push(LedgerMove {
                id: r.try_get(1)?,
                uid: r.try_get(2)?,
                event_at: Timestamp(r.try_get(3)?),
                delta: r.try_get(4)?,
                kind: r.try_get(5)?,
                source: r.try_get(6)?,
            });
        }
        let mut reads = items
            .iter()
            .zip(balances.into_iter().zip(moves))
            .map(|(item, (balance_before, moves))| {
                let item = facts
                    .get(item)
                    .cloned()
                    .ok_or_else(|| anyhow::anyhow!("no item {item}"))?;
                Ok(KeyRead {
                    item,
                    balance_before,
                    moves,
                })
            })
            .collect::<Result<Vec<_>, StoreError>>()?
            .into_iter();
        Ok(asks
            .iter()
            .map(|a| reads.by_ref().take(a.keys.len()).collect())
            .collect())
    }

    fn insert_result(&self, r: &NewResult<'_>) -> Result<i64, StoreError> {
        let ids = self.insert_results(std::slice::from_ref(r))?;
        Ok(ids[0])
    }

    /// Every row in one statement (the columns as arrays): one round trip and one
    /// executor run for the results of a pass, or of several. The rows of one call name
    /// each key of a pass at most once, so the ids are matched to the rows by pass and key.
    fn insert_results(&self, rows: &[NewResult<'_>]) -> Result<Vec<i64>, StoreError> {
        if rows.is_empty() {
            return Ok(Vec::new());
        }
        let col = |f: &dyn Fn(&NewResult<'_>) -> i64| rows.iter().map(f).collect::<Vec<i64>>();
        let passes = col(&|r| r.pass.id);
        let sites = col(&|r| r.pass.site.0);
        let bins = col(&|r| r.pass.bin_id);
        let items = col(&|r| r.netted.item_id);
        let lots: Vec<&str> = rows.iter().map(|r| r.netted.lot.as_str()).collect();
        let classes: Vec<Option<&str>> = rows
            .iter()
            .map(|r| r.netted.class.map(Class::as_str))
            .collect();
        let counted = col(&|r| r.netted.counted);
        let f_star = col(&|r| r.netted.f_star);
        let variance = col(&|r| r.netted.variance);
        let status: Vec<&str> = rows.iter().map(|r| r.status).collect();
        let verdict: Vec<&str> = rows.iter().map(|r| r.netted.verdict).collect();
        let cost = col(&|r| r.netted.unit_cost_minor);
        let counted_at = col(&|r| r.netted.counted_at.0);
        let window_start = col(&|r| r.netted.window.start.0);
        let window_end = col(&|r| r.netted.window.end.0);
        let evidence = rows
            .iter()
            .map(|r| json(&r.netted.evidence))
            .collect::<Result<Vec<_>, _>>()?;
        let watermark = col(&|r| r.watermark);
        let settles_at = col(&|r| r.netted.settles_at.0);
        let settled: Vec<bool> = rows.iter().map(|r| r.now > r.netted.settles_at).collect();
        let reason: Vec<&str> = rows.iter().map(|r| r.reason).collect();
        let now = col(&|r| r.now.0);
        let inserted = self.query(
            "insert into count_result (pass_id, site_id, bin_id, item_id, lot, class, counted,
                 f_star, variance, status, verdict, unit_cost_minor, counted_at, window_start,
                 window_end, evidence, watermark, settles_at, settled, renet_reason, computed_at)
             select v.* from unnest($1::bigint[], $2::bigint[], $3::bigint[], $4::bigint[],
                 $5::text[], $6::text[], $7::bigint[], $8::bigint[], $9::bigint[], $10::text[],
                 $11::text[], $12::bigint[], $13::bigint[], $14::bigint[], $15::bigint[],
                 $16::text[], $17::bigint[], $18::bigint[], $19::boolean[], $20::text[],
                 $21::bigint[]) v
             returning id, pass_id, item_id, lot",
            &[
                &passes,
                &sites,
                &bins,
                &items,
                &lots,
                &classes,
                &counted,
                &f_star,
                &variance,
                &status,
                &verdict,
                &cost,
                &counted_at,
                &window_start,
                &window_end,
                &evidence,
                &watermark,
                &settles_at,
                &settled,
                &reason,
                &now,
            ],
        )?;
        let mut ids: HashMap<(i64, i64, String), i64> = HashMap::with_capacity(inserted.len());
        for r in &inserted {
            ids.insert((r.try_get(1)?, r.try_get(2)?, r.try_get(3)?), r.try_get(0)?);
        }
        rows.iter()
            .map(|r| {
                let key = (r.pass.id, r.netted.item_id, r.netted.lot.clone());
                ids.remove(&key).ok_or_else(|| {
                    anyhow::anyhow!(
                        "the insert of results returned no id for pass {} item {} lot {:?}",
                        key.0,
                        key.1,
                        key.2
                    )
                    .into()
                })
            })
            .collect()
    }

    fn supersede(&self, old: i64, new: i64) -> Result<(), StoreError> {
        self.execute(
            "update count_result set superseded_by = $1 where id = $2",
            &[&new, &old],
        )?;
        Ok(())
    }

    fn done_pass_by_uid(&self, uid: &str) -> Result<Option<(i64, bool)>, StoreError> {
        self.query_opt(
            "select p.id, exists (select 1 from count_result r where r.pass_id = p.id)
             from count_pass p where p.uid = $1 and p.done_at is not null",
            &[&uid],
        )?
        .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
        .transpose()
    }

    fn done_passes_by_uid(&self, uids: &[&str]) -> Result<Vec<Option<(i64, bool)>>, StoreError> {
        if uids.len() < 2 {
            return uids.iter().map(|u| self.done_pass_by_uid(u)).collect();
        }
        let mut found: HashMap<String, (i64, bool)> = HashMap::with_capacity(uids.len());
        for r in self.query(
            "select p.uid, p.id, exists (select 1 from count_result r where r.pass_id = p.id)
             from count_pass p where p.uid = any($1) and p.done_at is not null",
            &[&uids],
        )? {
            found.insert(r.try_get(0)?, (r.try_get(1)?, r.try_get(2)?));
        }
        Ok(uids.iter().map(|u| found.get(*u).copied()).collect())
    }

    fn widest_done_uncertainty(&self, site: SiteId) -> Result<Option<i64>, StoreError> {
        Ok(self
            .query_one(
                "select max(uncertainty_ms) from count_pass
                 where site_id = $1 and done_at is not null",
                &[&site.0],
            )?
            .try_get(0)?)
    }

    fn done_passes_of_bin(
        &self,
        bin: i64,
        done_from: Timestamp,
    ) -> Result<Vec<(i64, CountTiming)>, StoreError> {
        self.query(
            "select id, first_at, done_at, uncertainty_ms from count_pass
             where bin_id = $1 and done_at is not null and done_at >= $2",
            &[&bin, &done_from.0],
        )?
        .iter()
        .map(|r| {
            Ok((
                r.try_get(0)?,
                CountTiming {
                    first_scan: Timestamp(r.try_get(1)?),
                    done: Some(Timestamp(r.try_get(2)?)),
                    clock_uncertainty_ms: r.try_get(3)?,
                },
            ))
        })
        .collect()
    }

    fn done_passes(&self, site: SiteId, pass: Option<&str>) -> Result<Vec<i64>, StoreError> {
        self.query(
            "select id from count_pass where site_id = $1 and done_at is not null
               and ($2::text is null or uid = $2 or id::text = $2)
             order by done_at, id",
            &[&site.0, &pass],
        )?
        .iter()
        .map(|r| Ok(r.try_get(0)?))
        .collect()
    }

    fn rechecked_keys(&self, task: i64) -> Result<Vec<(ItemLot, i64)>, StoreError> {
        rechecked_rows(self.query(rechecked_sql!("$1"), &[&task])?)
    }

    fn live_tasks_of(&self, pass: i64, key: &ItemLot) -> Result<i64, StoreError> {
        Ok(self
            .query_one(
                "select count(distinct t.id) from count_result r
                     join count_task_recheck k on k.result_id = r.id
                     join count_task t on t.id = k.task_id
                 where r.pass_id = $1 and r.item_id = $2 and r.lot = $3
                   and t.withdrawn_at is null",
                &[&pass, &key.0, &key.1],
            )?
            .try_get(0)?)
    }

    fn latest_recount_pass(&self, pass: i64, key: &ItemLot) -> Result<Option<i64>, StoreError> {
        self.query_opt(
            "select p.id from count_result r
                 join count_task_recheck k on k.result_id = r.id
                 join count_task t on t.id = k.task_id
                 join count_pass p on p.task_id = t.id
             where r.pass_id = $1 and r.item_id = $2 and r.lot = $3
               and t.withdrawn_at is null and p.done_at is not null
             order by p.done_at desc, p.id desc limit 1",
            &[&pass, &key.0, &key.1],
        )?
        .map(|r| Ok(r.try_get(0)?))
        .transpose()
    }

    fn set_recount_outcome(
        &self,
        result: i64,
        verdict: &str,
        outcome: Option<&str>,
        first_count_wrong: bool,
    ) -> Result<(), StoreError> {
        self.execute(
            "update count_result set verdict = $2, recount_outcome = $3, first_count_wrong = $4
             where id = $1",
            &[&result, &verdict, &outcome, &first_count_wrong],
        )?;
        Ok(())
    }

    fn open_tasks_of(&self, first_pass: i64) -> Result<Vec<OpenTask>, StoreError> {
        self.query(
            open_tasks_sql!("distinct t.id, t.list_id, t.supervisor"),
            &[&first_pass],
        )?
        .iter()
        .map(|r| {
            Ok(OpenTask {
                id: r.try_get(0)?,
                list: r.try_get(1)?,
                supervisor: r.try_get(2)?,
            })
        })
        .collect()
    }

    fn withdraw_task(&self, task: OpenTask, at: Timestamp, why: &str) -> Result<(), StoreError> {
        self.execute(
            "update count_task set withdrawn_at = $2, withdrawn_reason = $3 where id = $1",
            &[&task.id, &at.0, &why],
        )?;
        self.bump_list(task.list)
    }
}

impl RecountTx for PgTx<'_> {
    fn open_task_of(&self, pass: i64, supervisor: bool) -> Result<Option<(i64, i64)>, StoreError> {
        self.query_opt(OPEN_TASK_SQL, &[&pass, &supervisor])?
            .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
            .transpose()
    }

    fn link_rechecks(&self, task: i64, results: &[i64]) -> Result<(), StoreError> {
        for r in results {
            self.execute(
                "insert into count_task_recheck (task_id, result_id) values ($1, $2)
                 on conflict do nothing",
                &[&task, r],
            )?;
        }
        Ok(())
    }

    fn rechecked(&self, task: i64) -> Result<Vec<Rechecked>, StoreError> {
        self.query(
            // Each result by its key (see `rechecked_sql`).
            "select k.result_id,
                    (select i.sku from count_result r join item i on i.id = r.item_id
                     where r.id = k.result_id),
                    (select r.lot from count_result r where r.id = k.result_id)
             from count_task_recheck k
             where k.task_id = $1
             order by k.result_id",
            &[&task],
        )?
        .iter()
        .map(|r| {
            Ok(Rechecked {
                result: r.try_get(0)?,
                sku: r.try_get(1)?,
                lot: r.try_get(2)?,
            })
        })
        .collect()
    }

    fn set_task_detail(&self, task: i64, detail: &str) -> Result<(), StoreError> {
        self.execute(
            "update count_task set detail = $2 where id = $1",
            &[&task, &detail],
        )?;
        Ok(())
    }

    fn bump_list(&self, list: i64) -> Result<(), StoreError> {
        self.execute(
            "update count_list set version = version + 1 where id = $1",
            &[&list],
        )?;
        Ok(())
    }

    fn day_list(&self, site: SiteId, day: &str) -> Result<Option<DayList>, StoreError> {
        self.query_opt(DAY_LIST_SQL, &[&site.0, &day])?
            .map(|r| day_list_row(&r))
            .transpose()
    }

    fn create_day_list(
        &self,
        site: SiteId,
        day: &str,
        minutes: i64,
        sent: &Sent,
    ) -> Result<DayList, StoreError> {
        let id: i64 = self
            .query_one(
                "insert into count_list (site_id, day, counters, minutes, level_s, warnings,
                     built_at, watermark)
                 values ($1, $2, 1, $3, 0, '[]', $4, $5)
                 returning id",
                &[&site.0, &day, &minutes, &sent.now.0, &sent.watermark],
            )?
            .try_get(0)?;
        self.execute(
            "insert into count_run (list_id, run) values ($1, 1)",
            &[&id],
        )?;
        Ok(DayList {
            id,
            counters: 1,
            warnings: Vec::new(),
        })
    }

    fn runs(&self, list: i64) -> Result<Vec<RunLoad>, StoreError> {
        self.query(runs_sql!("$1"), &[&list])?
            .iter()
            .map(run_row)
            .collect()
    }

    fn add_run(&self, list: i64, run: u32) -> Result<(), StoreError> {
        self.execute(
            "insert into count_run (list_id, run) values ($1, $2)",
            &[&list, &big(run)],
        )?;
        self.execute(
            "update count_list set counters = $2 where id = $1",
            &[&list, &big(run)],
        )?;
        Ok(())
    }

    fn sent_results(&self, results: &[i64]) -> Result<Vec<SentResult>, StoreError> {
        sent_rows(&self.query(SENT_SQL, &[&results])?)
    }

    fn bin_lines(&self, bin: i64) -> Result<i64, StoreError> {
        Ok(self
            .query_one(
                "select count(*) from balance where bin_id = $1 and qty <> 0",
                &[&bin],
            )?
            .try_get(0)?)
    }

    fn insert_recount_task(&self, t: &NewRecountTask) -> Result<i64, StoreError> {
        // Recounts lead the run in the order they were sent (as in the SQLite store).
        let run = big(t.run);
        let seq: i64 = self
            .query_one(
                "select coalesce(
                     (select max(seq) + 1 from count_task
                      where list_id = $1 and run = $2 and recount_of is not null),
                     (select min(seq) from count_task where list_id = $1 and run = $2),
                     1)",
                &[&t.list, &run],
            )?
            .try_get(0)?;
        self.execute(
            "update count_task set seq = seq + 1
             where list_id = $1 and run = $2 and seq >= $3 and recount_of is null",
            &[&t.list, &run, &seq],
        )?;
        Ok(self
            .query_one(
                "insert into count_task (list_id, bin_id, seq, run, reason, class, detail, lines,
                     est_s, recount_of, supervisor)
                 values ($1, $2, $3, $4, 'recount', $5, '', $6, $7, $8, $9)
                 returning id",
                &[
                    &t.list,
                    &t.bin,
                    &seq,
                    &run,
                    &t.class.map(Class::as_str),
                    &t.lines,
                    &t.est_s,
                    &t.recount_of,
                    &t.supervisor,
                ],
            )?
            .try_get(0)?)
    }

    fn set_list_warnings(&self, list: i64, warnings: &[String]) -> Result<(), StoreError> {
        self.execute(
            "update count_list set warnings = $2 where id = $1",
            &[&list, &json(&warnings)?],
        )?;
        Ok(())
    }

    /// Five reads sent together.
    fn placement_read(
        &self,
        site: SiteId,
        pass: i64,
        bin: i64,
        results: &[i64],
        supervisor: bool,
        find_open: bool,
        day: &str,
    ) -> Result<PlacementRead, StoreError> {
        let results = results.to_vec();
        let by_pass: &[&(dyn ToSql + Sync)] = &[&pass, &supervisor];
        let by_result: &[&(dyn ToSql + Sync)] = &[&results];
        let by_bin: &[&(dyn ToSql + Sync)] = &[&bin];
        let by_day: &[&(dyn ToSql + Sync)] = &[&site.0, &day];
        let (open, sent, lines, list, runs) = self.together("recount: placement reads", async {
            tokio::try_join!(
                async {
                    if find_open {
                        self.rows(OPEN_TASK_SQL, by_pass).await
                    } else {
                        Ok(Vec::new())
                    }
                },
                self.rows(SENT_SQL, by_result),
                self.rows(
                    "select count(*) from balance where bin_id = $1 and qty <> 0",
                    by_bin
                ),
                self.rows(DAY_LIST_SQL, by_day),
                self.rows(
                    runs_sql!("(select id from count_list where site_id = $1 and day = $2)"),
                    by_day
                ),
            )
        })?;
        let lines = lines
            .first()
            .ok_or_else(|| anyhow::anyhow!("a count answered no row"))?;
        Ok(PlacementRead {
            open_task: open
                .first()
                .map(|r| Ok::<_, StoreError>((r.try_get(0)?, r.try_get(1)?)))
                .transpose()?,
            results: sent_rows(&sent)?,
            bin_lines: lines.try_get(0)?,
            plan: list
                .first()
                .map(|l| {
                    Ok::<_, StoreError>((
                        day_list_row(l)?,
                        runs.iter().map(run_row).collect::<Result<_, _>>()?,
                    ))
                })
                .transpose()?,
        })
    }

    /// One statement: the place after the run's recounts, the tasks after it moved down,
    /// the task with its detail, its links, and its list's version raised.
    fn write_recount_task(
        &self,
        t: &NewRecountTask,
        results: &[i64],
        detail: &str,
    ) -> Result<i64, StoreError> {
        Ok(self
            .query_one(
                "with place as (
                     select coalesce(
                         (select max(seq) + 1 from count_task
                          where list_id = $1 and run = $2 and recount_of is not null),
                         (select min(seq) from count_task where list_id = $1 and run = $2),
                         1) as seq
                 ), moved as (
                     update count_task set seq = seq + 1
                     where list_id = $1 and run = $2 and recount_of is null
                       and seq >= (select seq from place)
                 ), task as (
                     insert into count_task (list_id, bin_id, seq, run, reason, class, detail,
                         lines, est_s, recount_of, supervisor)
                     select $1, $3, place.seq, $2, 'recount', $4, $10, $5, $6, $7, $8 from place
                     returning id
                 ), linked as (
                     insert into count_task_recheck (task_id, result_id)
                     select task.id, r from task, unnest($9::bigint[]) as r
                     on conflict do nothing
                 ), bumped as (
                     update count_list set version = version + 1 where id = $1
                 )
                 select id from task",
                &[
                    &t.list,
                    &big(t.run),
                    &t.bin,
                    &t.class.map(Class::as_str),
                    &t.lines,
                    &t.est_s,
                    &t.recount_of,
                    &t.supervisor,
                    &results,
                    &detail,
                ],
            )?
            .try_get(0)?)
    }
}

/// The results sent to a recount ($1), oldest first, with their keys and classes.
const SENT_SQL: &str = "select r.id, i.sku, r.lot, r.class
     from count_result r join item i on i.id = r.item_id
     where r.id = any($1)
     order by r.id";

fn sent_rows(rows: &[Row]) -> Result<Vec<SentResult>, StoreError> {
    rows.iter()
        .map(|r| {
            Ok(SentResult {
                key: Rechecked {
                    result: r.try_get(0)?,
                    sku: r.try_get(1)?,
                    lot: r.try_get(2)?,
                },
                class: r.try_get::<_, Option<&str>>(3)?.and_then(Class::parse),
            })
        })
        .collect()
}

/// The open task of a kind ($2: supervisor count or recount) of pass $1 no phone has begun.
const OPEN_TASK_SQL: &str = "select t.id, t.list_id from count_result r
         join count_task_recheck k on k.result_id = r.id
         join count_task t on t.id = k.task_id
     where r.pass_id = $1 and t.supervisor = $2 and t.withdrawn_at is null
       and t.status = 'open'
       and not exists (select 1 from count_pass p where p.task_id = t.id)
     order by t.id limit 1";

const DAY_LIST_SQL: &str =
    "select id, counters, warnings from count_list where site_id = $1 and day = $2";

fn day_list_row(r: &Row) -> Result<DayList, StoreError> {
    let warnings: String = r.try_get(2)?;
    Ok(DayList {
        id: r.try_get(0)?,
        counters: small(r, 1)?,
        warnings: serde_json::from_str(&warnings).unwrap_or_default(),
    })
}

/// A list's runs with their tasks not done; `$list` is the list's id or a subquery.
macro_rules! runs_sql {
    ($list:literal) => {
        concat!(
            "select r.run, r.holder,
                    (select count(*) from count_task t
                     where t.list_id = r.list_id and t.run = r.run and t.status <> 'done'
                       and t.withdrawn_at is null)
             from count_run r where r.list_id = ",
            $list,
            " order by r.run"
        )
    };
}
use runs_sql;

fn run_row(r: &Row) -> Result<RunLoad, StoreError> {
    Ok((small(r, 0)?, r.try_get(1)?, small(r, 2)?))
}

impl SettleTx for PgTx<'_> {
    fn mark_settled(&self, now: Timestamp) -> Result<usize, StoreError> {
        Ok(self.execute(
            "update count_result set settled = true
             where not settled and superseded_by is null and settles_at < $1",
            &[&now.0],
        )? as usize)
    }

    fn next_auto_candidate(
        &self,
        after: i64,
        now: Timestamp,
    ) -> Result<Option<AutoCandidate>, StoreError> {
        // The same candidate as the SQLite store's (see `store/sqlite/auto_adjust.rs`).
        self.query_opt(
            "select r.id, r.site_id, b.code, i.sku, r.lot, r.variance, r.class,
                    r.unit_cost_minor, r.evidence
             from netting_settings s
             join count_result r on r.site_id = s.site_id
             join count_pass p on p.id = r.pass_id
             join bin b on b.id = r.bin_id
             join item i on i.id = r.item_id
             where s.auto_adjust and s.auto_adjust_from is not null
               and r.superseded_by is null and r.verdict = 'hit' and r.variance <> 0
               and r.id > $1
               and (r.settled or r.settles_at < $2)
               and not r.first_count_wrong
               and coalesce(r.recount_outcome, '') <> 'book_right'
               and p.received_at >= s.auto_adjust_from
               and not exists (select 1 from count_review v where v.result_id = r.id)
               and not exists (select 1 from count_task t
                               where t.id = p.task_id and t.recount_of is not null)
               and not exists (select 1 from count_result r0
                                   join count_task_recheck k on k.result_id = r0.id
                                   join count_task t on t.id = k.task_id
                               where r0.pass_id = r.pass_id and r0.item_id = r.item_id
                                 and r0.lot = r.lot and t.status <> 'done'
                                 and t.withdrawn_at is null)
               and not exists (select 1 from count_result r0
                                   join count_auto_adjustment a on a.result_id = r0.id
                               where r0.pass_id = r.pass_id and r0.item_id = r.item_id
                                 and r0.lot = r.lot)
             order by r.id limit 1",
            &[&after, &now.0],
        )?
        .map(|r| {
            let class: Option<String> = r.try_get(6)?;
            Ok(AutoCandidate {
                id: r.try_get(0)?,
                site: SiteId(r.try_get(1)?),
                bin: r.try_get(2)?,
                sku: r.try_get(3)?,
                lot: r.try_get(4)?,
                variance: r.try_get(5)?,
                class: class.as_deref().and_then(Class::parse),
                unit_cost_minor: r.try_get(7)?,
                evidence: r.try_get(8)?,
            })
        })
        .transpose()
    }

    fn insert_auto_adjustment(
        &self,
        result: i64,
        movement: i64,
        at: Timestamp,
    ) -> Result<i64, StoreError> {
        Ok(self
            .query_one(
                "insert into count_auto_adjustment (result_id, movement_id, posted_at)
                 values ($1, $2, $3) returning id",
                &[&result, &movement, &at.0],
            )?
            .try_get(0)?)
    }
}

// The netting reads and policy of the `Store` trait (`store/sqlite/netting/policy.rs` and
// `reads.rs`).

/// Lists a site's reason codes, by code.
pub(super) fn reason_code_rows<C: GenericClient>(
    q: &PgTx<'_, C>,
    site: SiteId,
) -> Result<Vec<ReasonCode>, StoreError> {
    q.query(
        "select code, label from reason_code where site_id = $1 order by code collate \"C\"",
        &[&site.0],
    )?
    .iter()
    .map(|r| {
        Ok(ReasonCode {
            code: r.try_get(0)?,
            label: r.try_get(1)?,
        })
    })
    .collect()
}

fn uses<C: GenericClient>(
    q: &PgTx<'_, C>,
    site: SiteId,
) -> Result<BTreeMap<String, i64>, StoreError> {
    q.query(
        "select v.reason_code, count(*) from count_review v
         join count_result r on r.id = v.result_id
         where r.site_id = $1 and v.reason_code <> ''
         group by v.reason_code",
        &[&site.0],
    )?
    .iter()
    .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
    .collect()
}

fn write_settings(
    tx: &PgTx<'_>,
    site: SiteId,
    s: &NettingSettings,
    now: Timestamp,
) -> Result<(), StoreError> {
    let (a, b, c) = (s.tolerances.a, s.tolerances.b, s.tolerances.c);
    let was_from: Option<i64> = match tx.query_opt(
        "select auto_adjust_from from netting_settings where site_id = $1 and auto_adjust",
        &[&site.0],
    )? {
        Some(r) => r.try_get(0)?,
        None => None,
    };
    let auto_from = s.auto_adjust.then(|| was_from.unwrap_or(now.0));
    tx.execute(
        "insert into netting_settings (site_id, tol_a_units, tol_a_bp,
             tol_a_value_minor, tol_b_units, tol_b_bp, tol_b_value_minor, tol_c_units,
             tol_c_bp, tol_c_value_minor, auto_adjust, manager_value_minor, bulk_value_minor,
             auto_adjust_from)
         values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14)
         on conflict (site_id) do update set tol_a_units = excluded.tol_a_units,
             tol_a_bp = excluded.tol_a_bp, tol_a_value_minor = excluded.tol_a_value_minor,
             tol_b_units = excluded.tol_b_units, tol_b_bp = excluded.tol_b_bp,
             tol_b_value_minor = excluded.tol_b_value_minor, tol_c_units = excluded.tol_c_units,
             tol_c_bp = excluded.tol_c_bp, tol_c_value_minor = excluded.tol_c_value_minor,
             auto_adjust = excluded.auto_adjust,
             manager_value_minor = excluded.manager_value_minor,
             bulk_value_minor = excluded.bulk_value_minor,
             auto_adjust_from = excluded.auto_adjust_from",
        &[
            &site.0,
            &a.units,
            &a.percent_bp,
            &a.value_minor,
            &b.units,
            &b.percent_bp,
            &b.value_minor,
            &c.units,
            &c.percent_bp,
            &c.value_minor,
            &s.auto_adjust,
            &s.manager_value_minor,
            &s.bulk_value_minor,
            &auto_from,
        ],
    )?;
    Ok(())
}

fn write_sources(tx: &PgTx<'_>, site: SiteId, rows: &[SourceTimingRow]) -> Result<(), StoreError> {
    tx.execute("delete from source_timing where site_id = $1", &[&site.0])?;
    for r in rows {
        tx.execute(
            "insert into source_timing (site_id, source, uncertainty_ms, posting_lag_ms)
             values ($1, $2, $3, $4)",
            &[&site.0, &r.source, &r.uncertainty_ms, &r.posting_lag_ms],
        )?;
    }
    Ok(())
}

fn write_reasons(tx: &PgTx<'_>, site: SiteId, rows: &[ReasonCode]) -> Result<(), StoreError> {
    let dropped: Vec<String> = uses(tx, site)?
        .into_iter()
        .filter(|(code, _)| !rows.iter().any(|r| &r.code == code))
        .map(|(code, n)| {
            let taken = if n == 1 {
                "decision names"
            } else {
                "decisions name"
            };
            format!(
                "reason code '{code}' cannot be removed: {n} {taken} it; give it a new label \
                 instead"
            )
        })
        .collect();
    if !dropped.is_empty() {
        return Err(StoreError::Conflict(dropped.join("; ")));
    }
    tx.execute("delete from reason_code where site_id = $1", &[&site.0])?;
    for r in rows {
        tx.execute(
            "insert into reason_code (site_id, code, label) values ($1, $2, $3)",
            &[&site.0, &r.code, &r.label],
        )?;
    }
    Ok(())
}

/// Refuses a page's save over a list that changed after the page showed it.
fn still_as_shown(current: &[&str], shown: &[String], what: &str) -> Result<(), StoreError> {
    let now: BTreeSet<&str> = current.iter().copied().collect();
    let then: BTreeSet<&str> = shown.iter().map(String::as_str).collect();
    if now == then {
        return Ok(());
    }
    Err(StoreError::Conflict(format!(
        "the {what} changed since this page was opened (someone else saved them): \
         reload the page and make your change again"
    )))
}

/// See [`crate::store::Store::netting_settings`].
pub async fn netting_settings(
    store: &PgStore,
    site: SiteId,
) -> Result<NettingSettings, StoreError> {
    store
        .read(move |q| settings_row(q.query_opt(SETTINGS_SQL, &[&site.0])?))
        .await
}

/// See [`crate::store::Store::put_netting_settings`].
pub async fn put_netting_settings(
    store: &PgStore,
    site: SiteId,
    settings: NettingSettings,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.insert_audit(&audit)?;
            // The change happens when its audit event says (now, for pages and the API).
            write_settings(tx, site, &settings, audit.at)
        })
        .await
}

/// See [`crate::store::Store::source_timings`].
pub async fn source_timings(
    store: &PgStore,
    site: SiteId,
) -> Result<Vec<SourceTimingRow>, StoreError> {
    store
        .read(move |q| source_rows(q.query(SOURCES_SQL, &[&site.0])?))
        .await
}

/// See [`crate::store::Store::put_source_timings`].
pub async fn put_source_timings(
    store: &PgStore,
    site: SiteId,
    rows: Vec<SourceTimingRow>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.insert_audit(&audit)?;
            write_sources(tx, site, &rows)
        })
        .await
}

/// See [`crate::store::Store::reason_codes`].
pub async fn reason_codes(store: &PgStore, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
    store.read(move |q| reason_code_rows(q, site)).await
}

/// See [`crate::store::Store::put_reason_codes`].
pub async fn put_reason_codes(
    store: &PgStore,
    site: SiteId,
    rows: Vec<ReasonCode>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.insert_audit(&audit)?;
            write_reasons(tx, site, &rows)
        })
        .await
}

/// See [`crate::store::Store::edit_source_timings`].
pub async fn edit_source_timings(
    store: &PgStore,
    site: SiteId,
    shown: Vec<String>,
    rows: Vec<SourceTimingRow>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.insert_audit(&audit)?;
            let current = source_rows(tx.query(SOURCES_SQL, &[&site.0])?)?;
            let names: Vec<&str> = current.iter().map(|r| r.source.as_str()).collect();
            still_as_shown(&names, &shown, "movement sources")?;
            write_sources(tx, site, &rows)
        })
        .await
}

/// See [`crate::store::Store::edit_reason_codes`].
pub async fn edit_reason_codes(
    store: &PgStore,
    site: SiteId,
    shown: Vec<String>,
    rows: Vec<ReasonCode>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.insert_audit(&audit)?;
            let current = crate::review::decide::ReviewTx::reason_codes(tx, site)?;
            let codes: Vec<&str> = current.iter().map(|r| r.code.as_str()).collect();
            still_as_shown(&codes, &shown, "reason codes")?;
            write_reasons(tx, site, &rows)
        })
        .await
}

/// See [`crate::store::Store::reason_code_uses`].
pub async fn reason_code_uses(
    store: &PgStore,
    site: SiteId,
) -> Result<BTreeMap<String, i64>, StoreError> {
    store.read(move |q| uses(q, site)).await
}

const ROW_SELECT: &str = "select r.id, r.pass_id, p.uid, u.name, b.code, i.sku, r.lot, r.class,
        r.counted, r.f_star, r.variance, r.status, r.verdict, r.unit_cost_minor, r.counted_at,
        r.window_start, r.window_end, r.watermark, r.settles_at, r.settled, r.superseded_by,
        r.renet_reason, r.recount_outcome, r.first_count_wrong,
        exists (select 1 from count_review v where v.result_id = r.id), r.computed_at, r.evidence,
        exists (select 1 from count_auto_adjustment a where a.result_id = r.id)
     from count_result r join count_pass p on p.id = r.pass_id
     join user_account u on u.id = p.user_id join bin b on b.id = r.bin_id
     join item i on i.id = r.item_id";

fn map_row(r: &Row, now: Timestamp) -> Result<(ResultRow, String), StoreError> {
    let variance: i64 = r.try_get(10)?;
    let cost: i64 = r.try_get(13)?;
    let settles_at = Timestamp(r.try_get(18)?);
    Ok((
        ResultRow {
            id: r.try_get(0)?,
            pass_id: r.try_get(1)?,
            pass: r.try_get(2)?,
            counter: r.try_get(3)?,
            bin: r.try_get(4)?,
            sku: r.try_get(5)?,
            lot: r.try_get(6)?,
            class: r.try_get(7)?,
            counted: r.try_get(8)?,
            f_star: r.try_get(9)?,
            variance,
            variance_value_minor: variance.saturating_mul(cost),
            status: r.try_get(11)?,
            verdict: r.try_get(12)?,
            unit_cost_minor: cost,
            counted_at: Timestamp(r.try_get(14)?),
            window_start: Timestamp(r.try_get(15)?),
            window_end: Timestamp(r.try_get(16)?),
            watermark: r.try_get(17)?,
            settles_at,
            settled: r.try_get::<_, bool>(19)? || now > settles_at,
            superseded_by: r.try_get(20)?,
            renet_reason: r.try_get(21)?,
            recount_outcome: r.try_get(22)?,
            first_count_wrong: r.try_get(23)?,
            reviewed: r.try_get(24)?,
            auto_adjusted: r.try_get(27)?,
            computed_at: Timestamp(r.try_get(25)?),
        },
        r.try_get(26)?,
    ))
}

/// See [`crate::store::Store::count_results`]: a site's results, by id.
pub async fn count_results(
    store: &PgStore,
    site: SiteId,
    q: ResultQuery,
) -> Result<ResultPage, StoreError> {
    let now = Timestamp::now();
    let state = match q.state {
        ResultState::Open => {
            " and r.superseded_by is null and r.verdict = 'out_of_tolerance'
              and not exists (select 1 from count_review v where v.result_id = r.id)"
        }
        ResultState::Current => " and r.superseded_by is null",
        ResultState::All => "",
    };
    let limit = q.limit.clamp(1, MAX_RESULTS_PAGE);
    let sql = format!(
        "{ROW_SELECT} where r.site_id = $1 and r.id > $2{state}
           and ($3::text is null or b.code = $3)
           and ($4::text is null or i.sku = $4)
           and ($5::text is null or p.uid = $5 or p.id::text = $5)
           and ($6::text is null or r.lot = $6)
           and ($7::bigint is null or r.counted_at >= $7)
           and ($8::bigint is null or r.counted_at <= $8)
         order by r.id limit {limit}"
    );
    let c = store.client().await?;
    let st = c.prepare_cached(&sql).await?;
    let (from, to) = (q.from.map(|t| t.0), q.to.map(|t| t.0));
    let results = c
        .query(
            &st,
            &[
                &site.0, &q.after, &q.bin, &q.sku, &q.pass, &q.lot, &from, &to,
            ],
        )
        .await?
        .iter()
        .map(|r| map_row(r, now).map(|(row, _)| row))
        .collect::<Result<Vec<_>, _>>()?;
    let next = (results.len() == limit)
        .then(|| results.last().map(|r| r.id))
        .flatten();
    Ok(ResultPage { results, next })
}

fn result_detail<C: GenericClient>(
    q: &PgTx<'_, C>,
    site: SiteId,
    id: i64,
    now: Timestamp,
) -> Result<Option<ResultDetail>, StoreError> {
    let Some(r) = q.query_opt(
        &format!("{ROW_SELECT} where r.site_id = $1 and r.id = $2"),
        &[&site.0, &id],
    )?
    else {
        return Ok(None);
    };
    let (row, evidence) = map_row(&r, now)?;
    let evidence =
        Evidence::parse(&evidence).map_err(|e| anyhow::anyhow!("count_result {id}: {e}"))?;
    let mut replaces = Vec::new();
    let mut at = row.id;
    while let Some(prev) = q.query_opt(
        "select id from count_result where superseded_by = $1",
        &[&at],
    )? {
        let prev: i64 = prev.try_get(0)?;
        replaces.push(prev);
        at = prev;
    }
    let mut recount_tasks = Vec::new();
    let mut withdrawn_recounts = Vec::new();
    for t in q.query(
        "select distinct t.id, t.withdrawn_at, t.withdrawn_reason from count_result me
         join count_result r on r.pass_id = me.pass_id and r.item_id = me.item_id
              and r.lot = me.lot
         join count_task_recheck k on k.result_id = r.id
         join count_task t on t.id = k.task_id
         where me.id = $1 order by t.id",
        &[&row.id],
    )? {
        let task: i64 = t.try_get(0)?;
        match t.try_get::<_, Option<i64>>(1)? {
            None => recount_tasks.push(task),
            Some(at) => withdrawn_recounts.push(WithdrawnRecount {
                task,
                at: Timestamp(at),
                reason: t.try_get(2)?,
            }),
        }
    }
    let automatic_adjustment = super::review::automatic(q, row.id)?;
    Ok(Some(ResultDetail {
        row,
        evidence,
        replaces,
        recount_tasks,
        withdrawn_recounts,
        automatic_adjustment,
    }))
}

/// See [`crate::store::Store::count_result`]: one result with its evidence.
pub async fn count_result(
    store: &PgStore,
    site: SiteId,
    id: i64,
) -> Result<Option<ResultDetail>, StoreError> {
    store
        .read(move |q| result_detail(q, site, id, Timestamp::now()))
        .await
}

/// See [`crate::store::Store::count_pass_report`]: a pass (by id or uid) and its current
/// results.
pub async fn count_pass_report(
    store: &PgStore,
    site: SiteId,
    pass: PassRef,
) -> Result<Option<PassReport>, StoreError> {
    let (id, uid) = match pass {
        PassRef::Id(id) => (Some(id), None),
        PassRef::Uid(u) => (None, Some(u.to_string())),
    };
    store
        .read(move |q| {
            let now = Timestamp::now();
            let Some(h) = q.query_opt(
                "select p.id, p.uid, s.code, b.code, u.name, p.first_at, p.done_at,
                        p.uncertainty_ms, p.task_id
                 from count_pass p join site s on s.id = p.site_id join bin b on b.id = p.bin_id
                 join user_account u on u.id = p.user_id
                 where p.site_id = $1 and (p.id = $2 or p.uid = $3)",
                &[&site.0, &id, &uid],
            )?
            else {
                return Ok(None);
            };
            let task: Option<i64> = h.try_get(8)?;
            let mut report = PassReport {
                pass_id: h.try_get(0)?,
                pass: h.try_get(1)?,
                site: h.try_get(2)?,
                bin: h.try_get(3)?,
                counter: h.try_get(4)?,
                first_at: Timestamp(h.try_get(5)?),
                done_at: h.try_get::<_, Option<i64>>(6)?.map(Timestamp),
                uncertainty_ms: h.try_get(7)?,
                rechecks: Vec::new(),
                results: Vec::new(),
            };
            report.rechecks = q
                .query(
                    "select result_id from count_task_recheck where task_id = $1
                     order by result_id",
                    &[&task],
                )?
                .iter()
                .map(|r| r.try_get(0))
                .collect::<Result<_, _>>()?;
            for r in q.query(
                "select r.id from count_result r join item i on i.id = r.item_id
                 where r.pass_id = $1 and r.superseded_by is null order by i.sku collate \"C\", r.lot collate \"C\"",
                &[&report.pass_id],
            )? {
                if let Some(d) = result_detail(q, site, r.try_get(0)?, now)? {
                    report.results.push(d);
                }
            }
            Ok(Some(report))
        })
        .await
}
