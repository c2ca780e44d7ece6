//! SQL of the netting: the queries and writes of [`NettingTx`] over a SQLite
//! transaction (the workflow is `netting::pass`'s), the site's netting policy (`policy`),
//! the reads behind the routes and `cairn net` (`reads`), recount task placement
//! (`recounts`) and settling. Every write here runs inside the transaction that brought
//! the news.

use crate::master::SiteId;
use crate::netting::pass::{CurrentResult, ItemFacts, ItemLot, NettingTx, NewResult, OpenTask};
use crate::netting::rule::CountTiming;
use crate::netting::service::{Evidence, LedgerMove, NettingSettings, ReasonCode, SourceTimingRow};
use crate::netting::tolerance::Tolerance;
use crate::planning::abc::Class;
use crate::store::StoreError;
use crate::store::sqlite::ledger::{self, Key};
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, Transaction, params};
use serde::Serialize;
use std::collections::{BTreeMap, BTreeSet};

use crate::store::sqlite::master::stored_zone;
mod policy;
mod reads;
mod recounts;
use crate::netting::results::*;
pub use policy::*;
pub use reads::*;

fn json<T: Serialize>(v: &T) -> Result<String, StoreError> {
    Ok(serde_json::to_string(v).map_err(anyhow::Error::from)?)
}

// ---------------------------------------------------------------------------
// Netting a pass.

fn pass_facts(conn: &Connection, pass_id: i64) -> Result<Option<PassFacts>, StoreError> {
    Ok(conn
        .prepare_cached(
            "select p.id, p.uid, p.site_id, p.bin_id, b.code, p.task_id, t.est_s, u.name,
                    p.first_at, p.done_at, p.uncertainty_ms,
                    case when t.recount_of is not null then t.id end,
                    coalesce(t.withdrawn_at is not null, 0), p.held, s.time_zone
             from count_pass p join bin b on b.id = p.bin_id
             join site s on s.id = p.site_id
             join user_account u on u.id = p.user_id
             left join count_task t on t.id = p.task_id
             where p.id = ?1",
        )?
        .query_row([pass_id], |r| {
            Ok(PassFacts {
                id: r.get(0)?,
                uid: r.get(1)?,
                site: SiteId(r.get(2)?),
                bin_id: r.get(3)?,
                bin_code: r.get(4)?,
                task_est_s: r.get(6)?,
                user_name: r.get(7)?,
                timing: CountTiming {
                    first_scan: Timestamp(r.get(8)?),
                    done: r.get::<_, Option<i64>>(9)?.map(Timestamp),
                    clock_uncertainty_ms: r.get(10)?,
                },
                recount_task: r.get(11)?,
                withdrawn: r.get(12)?,
                held: r.get(13)?,
                zone: stored_zone(&r.get::<_, String>(14)?),
            })
        })
        .optional()?)
}

fn current_result(
    conn: &Connection,
    pass_id: i64,
    key: &ItemLot,
) -> Result<Option<CurrentResult>, StoreError> {
    let row = conn
        .prepare_cached(
            "select id, status, verdict, recount_outcome, unit_cost_minor, evidence
             from count_result
             where pass_id = ?1 and item_id = ?2 and lot = ?3 and superseded_by is null",
        )?
        .query_row(params![pass_id, key.0, key.1], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, String>(2)?,
                r.get::<_, Option<String>>(3)?,
                r.get::<_, i64>(4)?,
                r.get::<_, String>(5)?,
            ))
        })
        .optional()?;
    row.map(
        |(id, status, verdict, recount_outcome, unit_cost_minor, ev)| {
            let evidence =
                Evidence::parse(&ev).map_err(|e| anyhow::anyhow!("count_result {id}: {e}"))?;
            Ok(CurrentResult {
                id,
                status,
                verdict,
                recount_outcome,
                unit_cost_minor,
                evidence,
            })
        },
    )
    .transpose()
}

fn item_facts(conn: &Connection, item: i64) -> Result<ItemFacts, StoreError> {
    let (sku, cost): (String, i64) = conn
        .prepare_cached("select sku, unit_cost_minor from item where id = ?1")?
        .query_row([item], |r| Ok((r.get(0)?, r.get(1)?)))?;
    let class: Option<String> = conn
        .prepare_cached(
            "select class from item_class where item_id = ?1 order by run_id desc limit 1",
        )?
        .query_row([item], |r| r.get(0))
        .optional()?;
    Ok(ItemFacts {
        sku,
        unit_cost_minor: cost,
        class: class.as_deref().and_then(Class::parse),
    })
}

fn key_moves(
    conn: &Connection,
    key: &Key,
    from: i64,
    to: i64,
) -> Result<Vec<LedgerMove>, StoreError> {
    let rows = conn
        .prepare_cached(
            "select id, uid, event_at, qty, kind, source from movement indexed by movement_key_time
             where bin_id = ?1 and item_id = ?2 and lot = ?3 and event_at >= ?4 and event_at <= ?5
             order by event_at, id",
        )?
        .query_map(params![key.bin_id, key.item_id, key.lot, from, to], |r| {
            Ok(LedgerMove {
                id: r.get(0)?,
                uid: r.get(1)?,
                event_at: Timestamp(r.get(2)?),
                delta: r.get(3)?,
                kind: r.get(4)?,
                source: r.get(5)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}

fn insert_result(tx: &Transaction, r: &NewResult<'_>) -> Result<i64, StoreError> {
    let n = r.netted;
    tx.prepare_cached(
        "insert into count_result (pass_id, site_id, bin_id, item_id, lot, class, counted,
             f_star, variance, status, verdict, unit_cost_minor, counted_at, window_start,
             window_end, evidence, watermark, settles_at, settled, renet_reason, computed_at)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17,
                 ?18, ?19, ?20, ?21)",
    )?
    .execute(params![
        r.pass.id,
        r.pass.site.0,
        r.pass.bin_id,
        n.item_id,
        n.lot,
        n.class.map(Class::as_str),
        n.counted,
        n.f_star,
        n.variance,
        r.status,
        n.verdict,
        n.unit_cost_minor,
        n.counted_at.0,
        n.window.start.0,
        n.window.end.0,
        json(&n.evidence)?,
        r.watermark,
        n.settles_at.0,
        r.now > n.settles_at,
        r.reason,
        r.now.0
    ])?;
    Ok(tx.last_insert_rowid())
}

fn ledger_key(bin: i64, key: &ItemLot) -> Key {
    Key {
        bin_id: bin,
        item_id: key.0,
        lot: key.1.clone(),
    }
}

impl NettingTx for super::Tx<'_> {
    fn pass_facts(&self, pass: i64) -> Result<Option<PassFacts>, StoreError> {
        pass_facts(self, pass)
    }

    fn netting_settings(&self, site: SiteId) -> Result<NettingSettings, StoreError> {
        netting_settings(self, site)
    }

    fn source_timings(&self, site: SiteId) -> Result<Vec<SourceTimingRow>, StoreError> {
        source_timings(self, site)
    }

    fn counted_keys(&self, pass: i64) -> Result<BTreeMap<ItemLot, (i64, Timestamp)>, StoreError> {
        let mut counted = BTreeMap::new();
        for row in self
            .prepare_cached(
                "select l.item_id, l.lot, sum(l.qty), max(l.at) from count_line l
                 where l.pass_id = ?1
                   and not exists (select 1 from count_line_undo u where u.line_uid = l.uid)
                 group by l.item_id, l.lot",
            )?
            .query_map([pass], |r| {
                Ok(((r.get(0)?, r.get(1)?), (r.get(2)?, Timestamp(r.get(3)?))))
            })?
        {
            let (k, v) = row?;
            counted.insert(k, v);
        }
        Ok(counted)
    }

    fn bin_keys(&self, bin: i64) -> Result<Vec<ItemLot>, StoreError> {
        Ok(self
            .prepare_cached("select item_id, lot from balance where bin_id = ?1")?
            .query_map([bin], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<Vec<_>>>()?)
    }

    fn netted_keys(&self, pass: i64) -> Result<Vec<ItemLot>, StoreError> {
        Ok(self
            .prepare_cached(
                "select item_id, lot from count_result where pass_id = ?1 and superseded_by is null",
            )?
            .query_map([pass], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<Vec<_>>>()?)
    }

    fn current_result(
        &self,
        pass: i64,
        key: &ItemLot,
    ) -> Result<Option<CurrentResult>, StoreError> {
        current_result(self, pass, key)
    }

    fn item_facts(&self, item: i64) -> Result<ItemFacts, StoreError> {
        item_facts(self, item)
    }

    fn balance_as_of(&self, bin: i64, key: &ItemLot, at: Timestamp) -> Result<i64, StoreError> {
        Ok(ledger::balance_as_of(self, &ledger_key(bin, key), at.0)?)
    }

    fn key_moves(
        &self,
        bin: i64,
        key: &ItemLot,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<LedgerMove>, StoreError> {
        key_moves(self, &ledger_key(bin, key), from.0, to.0)
    }

    fn insert_result(&self, r: &NewResult<'_>) -> Result<i64, StoreError> {
        insert_result(self, r)
    }

    fn supersede(&self, old: i64, new: i64) -> Result<(), StoreError> {
        self.prepare_cached("update count_result set superseded_by = ?1 where id = ?2")?
            .execute(params![new, old])?;
        Ok(())
    }

    fn done_pass_by_uid(&self, uid: &str) -> Result<Option<(i64, bool)>, StoreError> {
        Ok(self
            .prepare_cached(
                "select p.id, exists (select 1 from count_result r where r.pass_id = p.id)
                 from count_pass p where p.uid = ?1 and p.done_at is not null",
            )?
            .query_row([uid], |r| Ok((r.get(0)?, r.get(1)?)))
            .optional()?)
    }

    fn widest_done_uncertainty(&self, site: SiteId) -> Result<Option<i64>, StoreError> {
        Ok(self
            .prepare_cached(
                "select max(uncertainty_ms) from count_pass
                 where site_id = ?1 and done_at is not null",
            )?
            .query_row([site.0], |r| r.get(0))?)
    }

    fn done_passes_of_bin(
        &self,
        bin: i64,
        done_from: Timestamp,
    ) -> Result<Vec<(i64, CountTiming)>, StoreError> {
        Ok(self
            .prepare_cached(
                "select id, first_at, done_at, uncertainty_ms from count_pass
                 where bin_id = ?1 and done_at is not null and done_at >= ?2",
            )?
            .query_map(params![bin, done_from.0], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    CountTiming {
                        first_scan: Timestamp(r.get(1)?),
                        done: Some(Timestamp(r.get(2)?)),
                        clock_uncertainty_ms: r.get(3)?,
                    },
                ))
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?)
    }

    fn done_passes(&self, site: SiteId, pass: Option<&str>) -> Result<Vec<i64>, StoreError> {
        Ok(self
            .prepare_cached(
                "select id from count_pass where site_id = ?1 and done_at is not null
                   and (?2 is null or uid = ?2 or cast(id as text) = ?2)
                 order by done_at, id",
            )?
            .query_map(params![site.0, pass], |r| r.get(0))?
            .collect::<rusqlite::Result<Vec<i64>>>()?)
    }

    fn rechecked_keys(&self, task: i64) -> Result<Vec<(ItemLot, i64)>, StoreError> {
        recounts::rechecked_keys(self, task)
    }

    fn live_tasks_of(&self, pass: i64, key: &ItemLot) -> Result<i64, StoreError> {
        recounts::live_tasks_of(self, pass, key)
    }

    fn latest_recount_pass(&self, pass: i64, key: &ItemLot) -> Result<Option<i64>, StoreError> {
        recounts::latest_recount_pass(self, pass, key)
    }

    fn set_recount_outcome(
        &self,
        result: i64,
        verdict: &str,
        outcome: Option<&str>,
        first_count_wrong: bool,
    ) -> Result<(), StoreError> {
        self.prepare_cached(
            "update count_result set verdict = ?2, recount_outcome = ?3, first_count_wrong = ?4
             where id = ?1",
        )?
        .execute(params![result, verdict, outcome, first_count_wrong])?;
        Ok(())
    }

    fn open_tasks_of(&self, first_pass: i64) -> Result<Vec<OpenTask>, StoreError> {
        recounts::open_tasks_of(self, first_pass)
    }

    fn withdraw_task(&self, task: OpenTask, at: Timestamp, why: &str) -> Result<(), StoreError> {
        recounts::withdraw(self, task, at, why)
    }
}
