//! Count tasks as more than one area writes them: a task marked done (by the phone's sync
//! and by the list's own route) and the rule that no one recounts a key they counted.
//! The SQL follows `store/sqlite/planning.rs` and `store/sqlite/recount_tasks.rs`.

use super::tx::PgTx;
use crate::master::SiteId;
use crate::store::StoreError;
use crate::time::Timestamp;

/// Marks a task done at `at`, records its bin as counted whole that day and raises its
/// list's version.
pub fn finish_task(
    tx: &PgTx<'_>,
    site: SiteId,
    task: i64,
    at: Timestamp,
) -> Result<(), StoreError> {
    let r = tx
        .query_opt(
            "select l.id, t.bin_id, l.day from count_task t join count_list l on l.id = t.list_id
             where t.id = $1 and l.site_id = $2",
            &[&task, &site.0],
        )?
        .ok_or_else(|| StoreError::NotFound(format!("no task {task} in this site")))?;
    let (list, bin, day): (i64, i64, String) = (r.try_get(0)?, r.try_get(1)?, r.try_get(2)?);
    tx.execute(
        "update count_task set status = 'done', done_at = $1 where id = $2",
        &[&at.0, &task],
    )?;
    tx.execute(
        "insert into bin_count (bin_id, counted_on, counted_at) values ($1, $2, $3)
         on conflict (bin_id) do update set counted_on = excluded.counted_on,
             counted_at = excluded.counted_at
         where excluded.counted_at > bin_count.counted_at",
        &[&bin, &day, &at.0],
    )?;
    tx.execute(
        "update count_list set version = version + 1 where id = $1",
        &[&list],
    )?;
    Ok(())
}

/// Says whether `holder` counted already a key recount task `task` re-checks: they made
/// the first count, or a recount of it. `None` when the task re-checks nothing.
pub fn counted_before(tx: &PgTx<'_>, task: i64, holder: &str) -> Result<Option<bool>, StoreError> {
    let rechecks: bool = match tx.query_opt(
        "select recount_of is not null from count_task where id = $1",
        &[&task],
    )? {
        Some(r) => r.try_get(0)?,
        None => false,
    };
    if !rechecks {
        return Ok(None);
    }
    Ok(Some(
        tx.query_one(
            "select exists (select 1 from count_task_recheck k
                                join count_result r on r.id = k.result_id
                                join count_pass p on p.id = r.pass_id
                                join user_account u on u.id = p.user_id
                            where k.task_id = $1 and u.name = $2)
                 or exists (select 1 from count_task_recheck k
                                join count_result r on r.id = k.result_id
                                join count_result r2 on r2.pass_id = r.pass_id
                                    and r2.item_id = r.item_id and r2.lot = r.lot
                                join count_task_recheck k2 on k2.result_id = r2.id
                                join count_pass p2 on p2.task_id = k2.task_id
                                join user_account u2 on u2.id = p2.user_id
                            where k.task_id = $1 and k2.task_id <> $1
                              and p2.done_at is not null and u2.name = $2)",
            &[&task, &holder],
        )?
        .try_get(0)?,
    ))
}

/// Says whether giving task `task` to `holder` would give a recount to someone who
/// counted its key already.
pub fn would_recount_own_count(tx: &PgTx<'_>, task: i64, holder: &str) -> Result<bool, StoreError> {
    if holder.is_empty() {
        return Ok(false);
    }
    Ok(counted_before(tx, task, holder)? == Some(true))
}
