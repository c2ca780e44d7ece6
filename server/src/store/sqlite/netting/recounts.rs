//! SQL of recount tasks as netting sends, decides and withdraws them (DESIGN §5). The
//! out-of-tolerance keys of one count pass go to one recount task for the bin, which lists
//! every result it re-checks (`count_task_recheck`); a recount pass over the bin decides each
//! of them, and the keys it agrees on with neither side go to one supervisor count. A task
//! whose keys all stopped needing it (a re-net made them hits, or a recount decided them)
//! before anyone counted against it is withdrawn: kept with its reason, off every list.

use super::{ItemLot, json};
use crate::master::SiteId;
use crate::netting::pass::{OpenTask, Sent};
use crate::netting::recount::{DayList, NewRecountTask, Rechecked, RecountTx, RunLoad, SentResult};
use crate::planning::abc::Class;
use crate::store::StoreError;
use crate::store::sqlite::Tx;
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, Transaction, params};

/// Reads the keys a recount task re-checks, each with the pass of its first count.
pub(super) fn rechecked_keys(
    conn: &Connection,
    task: i64,
) -> Result<Vec<(ItemLot, i64)>, StoreError> {
    Ok(conn
        .prepare_cached(
            "select distinct r.item_id, r.lot, r.pass_id
             from count_task_recheck k cross join count_result r
             where k.task_id = ?1 and r.id = k.result_id
             order by r.pass_id, r.item_id, r.lot",
        )?
        .query_map([task], |r| Ok(((r.get(0)?, r.get(1)?), r.get(2)?)))?
        .collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Counts the tasks not withdrawn (recounts and supervisor counts) that re-check a key of
/// a pass.
pub(super) fn live_tasks_of(
    conn: &Connection,
    pass_id: i64,
    key: &ItemLot,
) -> Result<i64, StoreError> {
    // Cross joins fix the join order: the key's few results first, then their links, so
    // the planner never walks every task of the site.
    Ok(conn
        .prepare_cached(
            "select count(distinct t.id) from count_result r cross join count_task_recheck k
                 cross join count_task t
             where r.pass_id = ?1 and r.item_id = ?2 and r.lot = ?3 and k.result_id = r.id
               and t.id = k.task_id and t.withdrawn_at is null",
        )?
        .query_row(params![pass_id, key.0, key.1], |r| r.get(0))?)
}

/// Returns the last pass marked done, against a task not withdrawn, that re-checks a key
/// of a pass.
pub(super) fn latest_recount_pass(
    conn: &Connection,
    pass_id: i64,
    key: &ItemLot,
) -> Result<Option<i64>, StoreError> {
    Ok(conn
        .prepare_cached(
            "select p.id from count_result r cross join count_task_recheck k
                 cross join count_task t cross join count_pass p indexed by count_pass_task
             where r.pass_id = ?1 and r.item_id = ?2 and r.lot = ?3 and k.result_id = r.id
               and t.id = k.task_id and t.withdrawn_at is null
               and p.task_id = t.id and p.done_at is not null
             order by p.done_at desc, p.id desc limit 1",
        )?
        .query_row(params![pass_id, key.0, key.1], |r| r.get(0))
        .optional()?)
}

/// Reads the tasks of the first count `first_pass` that are not done, not withdrawn and
/// not counted against.
pub(super) fn open_tasks_of(
    conn: &Connection,
    first_pass: i64,
) -> Result<Vec<OpenTask>, StoreError> {
    Ok(conn
        .prepare_cached(
            "select distinct t.id, t.list_id, t.supervisor
             from count_result r cross join count_task_recheck k cross join count_task t
             where r.pass_id = ?1 and k.result_id = r.id and t.id = k.task_id
               and t.withdrawn_at is null and t.status <> 'done'
               and not exists (select 1 from count_pass p indexed by count_pass_task
                               where p.task_id = t.id and p.done_at is not null)",
        )?
        .query_map([first_pass], |r| {
            Ok(OpenTask {
                id: r.get(0)?,
                list: r.get(1)?,
                supervisor: r.get(2)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Withdraws a task: kept with its reason, it leaves its list, whose version goes up.
pub(super) fn withdraw(
    tx: &Transaction,
    task: OpenTask,
    at: Timestamp,
    why: &str,
) -> Result<(), StoreError> {
    tx.prepare_cached(
        "update count_task set withdrawn_at = ?2, withdrawn_reason = ?3 where id = ?1",
    )?
    .execute(params![task.id, at.0, why])?;
    bump_list(tx, task.list)
}

fn bump_list(tx: &Transaction, list: i64) -> Result<(), StoreError> {
    tx.prepare_cached("update count_list set version = version + 1 where id = ?1")?
        .execute([list])?;
    Ok(())
}

impl RecountTx for Tx<'_> {
    fn open_task_of(&self, pass: i64, supervisor: bool) -> Result<Option<(i64, i64)>, StoreError> {
        Ok(self
            .prepare_cached(
                "select t.id, t.list_id from count_result r cross join count_task_recheck k
                     cross join count_task t
                 where r.pass_id = ?1 and k.result_id = r.id and t.id = k.task_id
                   and t.supervisor = ?2 and t.withdrawn_at is null and t.status = 'open'
                   and not exists (select 1 from count_pass p indexed by count_pass_task
                                   where p.task_id = t.id)
                 order by t.id limit 1",
            )?
            .query_row(params![pass, supervisor], |r| Ok((r.get(0)?, r.get(1)?)))
            .optional()?)
    }

    fn link_rechecks(&self, task: i64, results: &[i64]) -> Result<(), StoreError> {
        let mut ins = self.prepare_cached(
            "insert or ignore into count_task_recheck (task_id, result_id) values (?1, ?2)",
        )?;
        for r in results {
            ins.execute(params![task, r])?;
        }
        Ok(())
    }

    fn rechecked(&self, task: i64) -> Result<Vec<Rechecked>, StoreError> {
        Ok(self
            .prepare_cached(
                "select r.id, i.sku, r.lot from count_task_recheck k cross join count_result r
                     cross join item i
                 where k.task_id = ?1 and r.id = k.result_id and i.id = r.item_id
                 order by r.id",
            )?
            .query_map([task], |r| {
                Ok(Rechecked {
                    result: r.get(0)?,
                    sku: r.get(1)?,
                    lot: r.get(2)?,
                })
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?)
    }

    fn set_task_detail(&self, task: i64, detail: &str) -> Result<(), StoreError> {
        self.prepare_cached("update count_task set detail = ?2 where id = ?1")?
            .execute(params![task, detail])?;
        Ok(())
    }

    fn bump_list(&self, list: i64) -> Result<(), StoreError> {
        bump_list(self, list)
    }

    fn day_list(&self, site: SiteId, day: &str) -> Result<Option<DayList>, StoreError> {
        let row = self
            .prepare_cached(
                "select id, counters, warnings from count_list where site_id = ?1 and day = ?2",
            )?
            .query_row(params![site.0, day], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    r.get::<_, u32>(1)?,
                    r.get::<_, String>(2)?,
                ))
            })
            .optional()?;
        Ok(row.map(|(id, counters, warnings)| DayList {
            id,
            counters,
            warnings: serde_json::from_str(&warnings).unwrap_or_default(),
        }))
    }

    fn create_day_list(
        &self,
        site: SiteId,
        day: &str,
        minutes: i64,
        sent: &Sent,
    ) -> Result<DayList, StoreError> {
        self.prepare_cached(
            "insert into count_list (site_id, day, counters, minutes, level_s, warnings,
                 built_at, watermark)
             values (?1, ?2, 1, ?3, 0, '[]', ?4, ?5)",
        )?
        .execute(params![site.0, day, minutes, sent.now.0, sent.watermark])?;
        let id = self.last_insert_rowid();
        self.prepare_cached("insert into count_run (list_id, run) values (?1, 1)")?
            .execute([id])?;
        Ok(DayList {
            id,
            counters: 1,
            warnings: Vec::new(),
        })
    }

    fn runs(&self, list: i64) -> Result<Vec<RunLoad>, StoreError> {
        Ok(self
            .prepare_cached(
                "select r.run, r.holder,
                        (select count(*) from count_task t
                         where t.list_id = r.list_id and t.run = r.run and t.status <> 'done'
                           and t.withdrawn_at is null)
                 from count_run r where r.list_id = ?1 order by r.run",
            )?
            .query_map([list], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))?
            .collect::<rusqlite::Result<Vec<RunLoad>>>()?)
    }

    fn add_run(&self, list: i64, run: u32) -> Result<(), StoreError> {
        self.prepare_cached("insert into count_run (list_id, run) values (?1, ?2)")?
            .execute(params![list, run])?;
        self.prepare_cached("update count_list set counters = ?2 where id = ?1")?
            .execute(params![list, run])?;
        Ok(())
    }

    fn sent_results(&self, results: &[i64]) -> Result<Vec<SentResult>, StoreError> {
        let mut read = self.prepare_cached(
            "select i.sku, r.lot, r.class from count_result r join item i on i.id = r.item_id
             where r.id = ?1",
        )?;
        let mut ids = results.to_vec();
        ids.sort_unstable();
        ids.dedup();
        ids.into_iter()
            .map(|id| {
                Ok(read.query_row([id], |r| {
                    Ok(SentResult {
                        key: Rechecked {
                            result: id,
                            sku: r.get(0)?,
                            lot: r.get(1)?,
                        },
                        class: r
                            .get::<_, Option<String>>(2)?
                            .as_deref()
                            .and_then(Class::parse),
                    })
                })?)
            })
            .collect()
    }

    fn bin_lines(&self, bin: i64) -> Result<i64, StoreError> {
        Ok(self
            .prepare_cached("select count(*) from balance where bin_id = ?1 and qty <> 0")?
            .query_row([bin], |r| r.get(0))?)
    }

    fn insert_recount_task(&self, t: &NewRecountTask) -> Result<i64, StoreError> {
        // Recounts lead the run, in the order they were sent: the new one goes after the
        // recounts already there and everything after it moves down one place, so every
        // sequence number stays a positive walk position.
        let seq: i64 = self
            .prepare_cached(
                "select coalesce(
                     (select max(seq) + 1 from count_task
                      where list_id = ?1 and run = ?2 and recount_of is not null),
                     (select min(seq) from count_task where list_id = ?1 and run = ?2),
                     1)",
            )?
            .query_row(params![t.list, t.run], |r| r.get(0))?;
        self.prepare_cached(
            "update count_task set seq = seq + 1
             where list_id = ?1 and run = ?2 and seq >= ?3 and recount_of is null",
        )?
        .execute(params![t.list, t.run, seq])?;
        self.prepare_cached(
            "insert into count_task (list_id, bin_id, seq, run, reason, class, detail, lines,
                 est_s, recount_of, supervisor)
             values (?1, ?2, ?3, ?4, 'recount', ?5, '', ?6, ?7, ?8, ?9)",
        )?
        .execute(params![
            t.list,
            t.bin,
            seq,
            t.run,
            t.class.map(Class::as_str),
            t.lines,
            t.est_s,
            t.recount_of,
            t.supervisor
        ])?;
        Ok(self.last_insert_rowid())
    }

    fn set_list_warnings(&self, list: i64, warnings: &[String]) -> Result<(), StoreError> {
        self.prepare_cached("update count_list set warnings = ?2 where id = ?1")?
            .execute(params![list, json(&warnings)?])?;
        Ok(())
    }
}
