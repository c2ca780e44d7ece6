//! SQL of automatic count adjustments (DESIGN §5): where a site allows it, a current,
//! settled hit with a non-zero variance is posted without a review, once, by the same
//! posting path an approval takes, and recorded in `count_auto_adjustment` (one row per
//! result and per movement, so running twice posts nothing new). It runs inside the
//! settling transaction (`netting::settle_due`); which results qualify is decided by
//! `netting::service::adjusts_automatically` over the candidates the query below finds.

use super::review::{Posting, post_count_adjustment};
use crate::accounts::audit::Actor;
use crate::master::SiteId;
use crate::netting::service::{self, Evidence};
use crate::planning::abc::Class;
use crate::review::store::AutoAdjustment;
use crate::review::{AUTO_REASON, AUTO_REASON_CODE};
use crate::store::StoreError;
use crate::store::sqlite::netting::netting_settings;
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, Transaction, params};
use serde_json::json;

/// Most automatic adjustments one settling pass posts; the rest wait for the next pass
/// (a minute later under `cairn serve`), so one pass never holds the writer for long.
pub const MAX_AUTO_PER_PASS: usize = 1_000;
/// Most candidates one settling pass looks at, posted or passed over.
const MAX_CANDIDATES_PER_PASS: usize = 10_000;

/// A result that may be adjusted automatically, as the query finds it.
struct Candidate {
    id: i64,
    site: SiteId,
    bin: String,
    sku: String,
    lot: String,
    variance: i64,
    class: Option<String>,
    unit_cost_minor: i64,
    evidence: String,
}

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
) -> Result<Option<Candidate>, StoreError> {
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
            Ok(Candidate {
                id: r.get(0)?,
                site: SiteId(r.get(1)?),
                bin: r.get(2)?,
                sku: r.get(3)?,
                lot: r.get(4)?,
                variance: r.get(5)?,
                class: r.get(6)?,
                unit_cost_minor: r.get(7)?,
                evidence: r.get(8)?,
            })
        })
        .optional()?)
}

/// Posts the automatic adjustments due, inside the settling transaction: each one a
/// `count_adjustment` movement of `c − f*` at the result's posting instant (its
/// evidence's `post_at`, where an approval posts too), source `count`, actor `system`,
/// with its `adjustment` audit event and its `count_auto_adjustment` row. Returns what
/// was posted, oldest result first.
pub fn post_due(
    tx: &Transaction,
    now: Timestamp,
    snapshot_every: i64,
) -> Result<Vec<AutoAdjustment>, StoreError> {
    let mut posted = Vec::new();
    let mut after = 0;
    for _ in 0..MAX_CANDIDATES_PER_PASS {
        if posted.len() >= MAX_AUTO_PER_PASS {
            break;
        }
        let Some(c) = next_candidate(tx, after, now)? else {
            break;
        };
        after = c.id;
        let evidence: Evidence = match serde_json::from_str(&c.evidence) {
            Ok(e) => e,
            Err(e) => {
                tracing::warn!(
                    "result {} is not adjusted automatically: its evidence does not parse: {e}",
                    c.id
                );
                continue;
            }
        };
        let settings = netting_settings(tx, c.site)?;
        let class = c.class.as_deref().and_then(Class::parse);
        if !service::adjusts_automatically(&settings, class, c.unit_cost_minor, &evidence)
            || evidence.netting.variance != c.variance
        {
            continue;
        }
        let event_at = evidence.netting.post_at;
        let out = post_count_adjustment(
            tx,
            c.site,
            &Posting {
                result: c.id,
                bin: &c.bin,
                sku: &c.sku,
                lot: &c.lot,
                qty: c.variance,
                event_at,
                doc_ref: format!("auto-{}", c.id),
                actor: &Actor::System,
                address: "",
                at: now,
                detail: json!({"result": c.id, "automatic": true,
                               "reason_code": AUTO_REASON_CODE, "reason": AUTO_REASON}),
            },
            snapshot_every,
        )?;
        tx.prepare_cached(
            "insert into count_auto_adjustment (result_id, movement_id, posted_at)
             values (?1, ?2, ?3)",
        )?
        .execute(params![c.id, out.movement_id, now.0])?;
        posted.push(AutoAdjustment {
            id: tx.last_insert_rowid(),
            result: c.id,
            movement: out.uid,
            qty: c.variance,
            event_at,
            posted_at: now,
        });
    }
    Ok(posted)
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
