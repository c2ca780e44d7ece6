//! SQL of settling and automatic count adjustments: the queries and writes of
//! [`SettleTx`] (the workflow is `netting::settle`'s) and the automatic adjustment of a
//! result, for its page.

use super::Tx;
use crate::master::SiteId;
use crate::netting::settle::{AutoCandidate, SettleTx};
use crate::planning::abc::Class;
use crate::review::store::AutoAdjustment;
use crate::store::StoreError;
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, params};

/// Finds the next candidate after result `after`: current, a hit with a variance,
/// settled, not decided by a person, not adjusted yet (nor any row of the same key of
/// the same count: one automatic adjustment per counted key, so a re-net that still
/// disagrees waits for a person instead of posting again), not found wrong by a recount
/// (`book_right`, `first_count_wrong`), not a recount's own result, not waiting for a
/// recount, at a site that allows it, from a count received since it was switched on.
/// One at a time: each posting re-nets its key (and later counts of the bin), which may
/// supersede other candidates.
fn next_candidate(
    conn: &Connection,
    after: i64,
    now: Timestamp,
) -> Result<Option<AutoCandidate>, StoreError> {
    Ok(conn
        .prepare_cached(
            "select r.id, r.site_id, b.code, i.sku, r.lot, r.variance, r.class,
                    r.unit_cost_minor, r.evidence
             from netting_settings s
             join count_result r indexed by count_result_auto on r.site_id = s.site_id
             join count_pass p on p.id = r.pass_id
             join bin b on b.id = r.bin_id
             join item i on i.id = r.item_id
             where s.auto_adjust = 1 and s.auto_adjust_from is not null
               and r.superseded_by is null and r.verdict = 'hit' and r.variance <> 0
               and r.id > ?1
               and (r.settled = 1 or r.settles_at < ?2)
               and r.first_count_wrong = 0
               and coalesce(r.recount_outcome, '') <> 'book_right'
               and p.received_at >= s.auto_adjust_from
               and not exists (select 1 from count_review v where v.result_id = r.id)
               and not exists (select 1 from count_task t
                               where t.id = p.task_id and t.recount_of is not null)
               and not exists (select 1 from count_result r0 cross join count_task_recheck k
                                   cross join count_task t
                               where r0.pass_id = r.pass_id and r0.item_id = r.item_id
                                 and r0.lot = r.lot and k.result_id = r0.id
                                 and t.id = k.task_id and t.status <> 'done'
                                 and t.withdrawn_at is null)
               and not exists (select 1 from count_result r0 cross join count_auto_adjustment a
                               where r0.pass_id = r.pass_id and r0.item_id = r.item_id
                                 and r0.lot = r.lot and a.result_id = r0.id)
             order by r.id limit 1",
        )?
        .query_row(params![after, now.0], |r| {
            Ok(AutoCandidate {
                id: r.get(0)?,
                site: SiteId(r.get(1)?),
                bin: r.get(2)?,
                sku: r.get(3)?,
                lot: r.get(4)?,
                variance: r.get(5)?,
                class: r
                    .get::<_, Option<String>>(6)?
                    .as_deref()
                    .and_then(Class::parse),
                unit_cost_minor: r.get(7)?,
                evidence: r.get(8)?,
            })
        })
        .optional()?)
}

/// Reads the automatic adjustment of a result, if it has one.
pub fn of_result(conn: &Connection, result: i64) -> Result<Option<AutoAdjustment>, StoreError> {
    Ok(conn
        .prepare_cached(
            "select a.id, a.result_id, m.uid, m.qty, m.event_at, a.posted_at
             from count_auto_adjustment a join movement m on m.id = a.movement_id
             where a.result_id = ?1",
        )?
        .query_row([result], |r| {
            Ok(AutoAdjustment {
                id: r.get(0)?,
                result: r.get(1)?,
                movement: r.get(2)?,
                qty: r.get(3)?,
                event_at: Timestamp(r.get(4)?),
                posted_at: Timestamp(r.get(5)?),
            })
        })
        .optional()?)
}

impl SettleTx for Tx<'_> {
    fn mark_settled(&self, now: Timestamp) -> Result<usize, StoreError> {
        Ok(self
            .prepare_cached(
                "update count_result set settled = 1
                 where settled = 0 and superseded_by is null and settles_at < ?1",
            )?
            .execute([now.0])?)
    }

    fn next_auto_candidate(
        &self,
        after: i64,
        now: Timestamp,
    ) -> Result<Option<AutoCandidate>, StoreError> {
        next_candidate(self, after, now)
    }

    fn insert_auto_adjustment(
        &self,
        result: i64,
        movement: i64,
        at: Timestamp,
    ) -> Result<i64, StoreError> {
        self.prepare_cached(
            "insert into count_auto_adjustment (result_id, movement_id, posted_at)
             values (?1, ?2, ?3)",
        )?
        .execute(params![result, movement, at.0])?;
        Ok(self.last_insert_rowid())
    }
}
