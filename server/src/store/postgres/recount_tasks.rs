//! The recount tasks a day's list keeps, over PostgreSQL (see the SQLite store's
//! `recount_tasks` for the rules): rebuilding a list keeps its open recounts, a later
//! day's list moves the open recounts of earlier lists onto itself (the same rows), and a
//! recount's run is never held by someone who counted one of its keys already.

use super::tx::PgTx;
use super::{col, rows};
use crate::master::SiteId;
use crate::planning::abc::Class;
use crate::planning::plan::OpenRecount;
use crate::store::StoreError;
use chrono::NaiveDate;
use deadpool_postgres::Client;
use std::collections::{BTreeMap, HashMap, HashSet};

fn day_text(d: NaiveDate) -> String {
    d.format("%Y-%m-%d").to_string()
}

/// Reads the recount and supervisor-count tasks not counted yet (no pass marked done
/// against them) on the site's lists of `day` and every earlier day, oldest first.
/// `bins` maps a bin's id to its index in the plan's bins.
pub async fn open_recounts(
    c: &Client,
    site: SiteId,
    day: NaiveDate,
    bins: &HashMap<i64, u32>,
) -> Result<Vec<OpenRecount>, StoreError> {
    let found = rows(
        c,
        "select t.id, t.bin_id, t.class, t.detail, t.lines, t.est_s, l.day, t.supervisor
         from count_task t join count_list l on l.id = t.list_id
         where t.recount_of is not null and l.site_id = $1 and l.day <= $2
           and t.status <> 'done' and t.withdrawn_at is null
           and not exists (select 1 from count_pass p
                           where p.task_id = t.id and p.done_at is not null)
         order by t.id",
        &[&site.0, &day_text(day)],
    )
    .await?;
    let mut out = Vec::with_capacity(found.len());
    for r in found {
        let (task, bin_id): (i64, i64) = (r.get(0), r.get(1));
        let bin = *bins.get(&bin_id).ok_or_else(|| {
            anyhow::anyhow!("recount task {task} names bin {bin_id} of another site")
        })?;
        let class: Option<String> = r.get(2);
        let from: String = r.get(6);
        let from = NaiveDate::parse_from_str(&from, "%Y-%m-%d")
            .map_err(|e| anyhow::anyhow!("a count list has the day '{from}': {e}"))?;
        out.push(OpenRecount {
            task,
            bin,
            class: class.as_deref().and_then(Class::parse),
            detail: r.get(3),
            lines: col(&r, 4)?,
            seconds: r.get(5),
            carried_from: (from < day).then_some(from),
            supervisor: r.get(7),
        });
    }
    Ok(out)
}

/// A recount moved from an earlier day's list.
pub struct Carried {
    from_list: i64,
    bin: String,
    task: i64,
}

/// Where a kept recount goes in the list being saved.
pub struct Placing<'a> {
    pub task: i64,
    pub seq: u32,
    pub run: u32,
    pub detail: &'a str,
}

/// Puts a stored recount task in its place on list `list` (of `day`), from wherever it
/// is: the same row, so what netting links to it stays. Refused when it was counted
/// since the plan was read. Returns where it came from when that was another list.
pub fn keep_recount(
    tx: &PgTx<'_>,
    site: SiteId,
    list: i64,
    day: NaiveDate,
    p: &Placing,
) -> Result<Option<Carried>, StoreError> {
    let Some(r) = tx.query_opt(
        "select t.list_id, l.day, t.status, b.code,
                exists (select 1 from count_pass p
                        where p.task_id = t.id and p.done_at is not null),
                t.withdrawn_at is not null
         from count_task t join count_list l on l.id = t.list_id join bin b on b.id = t.bin_id
         where t.id = $1 and l.site_id = $2 and t.recount_of is not null",
        &[&p.task, &site.0],
    )?
    else {
        return Err(StoreError::Conflict(format!(
            "task {} is not a recount of this site: build the list again",
            p.task
        )));
    };
    let (from, from_day, status, bin, counted, withdrawn): (
        i64,
        String,
        String,
        String,
        bool,
        bool,
    ) = (r.get(0), r.get(1), r.get(2), r.get(3), r.get(4), r.get(5));
    if withdrawn {
        return Err(StoreError::Conflict(format!(
            "the recount of bin {bin} (task {}) was withdrawn while the list was built: \
             build the list again",
            p.task
        )));
    }
    if status == "done" || counted || from_day > day_text(day) {
        return Err(StoreError::Conflict(format!(
            "the recount of bin {bin} (task {}) was counted while the list was built: \
             build the list again",
            p.task
        )));
    }
    // A task a phone opened on an earlier day and never finished starts afresh here.
    tx.execute(
        "update count_task set list_id = $2, seq = $3, run = $4, status = 'open', detail = $5
         where id = $1",
        &[
            &p.task,
            &list,
            &i64::from(p.seq),
            &i64::from(p.run),
            &p.detail,
        ],
    )?;
    Ok((from != list).then_some(Carried {
        from_list: from,
        bin,
        task: p.task,
    }))
}

/// Refuses a save that would leave a recount of list `list` without a place: one
/// netting added after the plan was read.
pub fn refuse_unplaced(tx: &PgTx<'_>, list: i64, kept: &HashSet<i64>) -> Result<(), StoreError> {
    let found = tx.query(
        "select t.id, b.code from count_task t join bin b on b.id = t.bin_id
         where t.list_id = $1 and t.recount_of is not null and t.withdrawn_at is null
         order by t.id",
        &[&list],
    )?;
    match found
        .iter()
        .map(|r| (r.get::<_, i64>(0), r.get::<_, String>(1)))
        .find(|(id, _)| !kept.contains(id))
    {
        Some((task, bin)) => Err(StoreError::Conflict(format!(
            "a recount of bin {bin} (task {task}) reached this list while it was built: \
             build the list again"
        ))),
        None => Ok(()),
    }
}

/// Says on each earlier list which of its recounts moved to the list of `to`, and
/// raises its version so a phone holding it fetches it again.
pub fn note_carried(tx: &PgTx<'_>, carried: &[Carried], to: NaiveDate) -> Result<(), StoreError> {
    let mut by_list: BTreeMap<i64, Vec<&Carried>> = BTreeMap::new();
    for c in carried {
        by_list.entry(c.from_list).or_default().push(c);
    }
    for (list, moved) in by_list {
        let text: String = tx
            .query_one("select warnings from count_list where id = $1", &[&list])?
            .get(0);
        let mut warnings: Vec<String> = serde_json::from_str(&text).unwrap_or_default();
        warnings.extend(moved.iter().map(|c| {
            format!(
                "the recount of bin {} (task {}) was not counted on this day: carried to the list of {to}",
                c.bin, c.task
            )
        }));
        let text = serde_json::to_string(&warnings).map_err(anyhow::Error::from)?;
        tx.execute(
            "update count_list set warnings = $2, version = version + 1 where id = $1",
            &[&list, &text],
        )?;
    }
    Ok(())
}

/// Says whether `holder` counted already a key a recount task re-checks: they made the
/// first count, or a recount of it (a supervisor count follows a recount). `None` when the
/// task re-checks nothing. User names compare without case, as everywhere.
fn counted_before(tx: &PgTx<'_>, task: i64, holder: &str) -> Result<Option<bool>, StoreError> {
    let rechecks = tx
        .query_opt(
            "select recount_of is not null from count_task where id = $1",
            &[&task],
        )?
        .is_some_and(|r| r.get::<_, bool>(0));
    if !rechecks {
        return Ok(None);
    }
    Ok(Some(
        tx.query_one(
            "select exists (select 1 from count_task_recheck k
                                join count_result r on r.id = k.result_id
                                join count_pass p on p.id = r.pass_id
                                join user_account u on u.id = p.user_id
                            where k.task_id = $1 and lower(u.name) = lower($2))
                 or exists (select 1 from count_task_recheck k
                                join count_result r on r.id = k.result_id
                                join count_result r2 on r2.pass_id = r.pass_id
                                     and r2.item_id = r.item_id and r2.lot = r.lot
                                join count_task_recheck k2 on k2.result_id = r2.id
                                     and k2.task_id <> $1
                                join count_pass p2 on p2.task_id = k2.task_id
                                     and p2.done_at is not null
                                join user_account u2 on u2.id = p2.user_id
                            where k.task_id = $1 and lower(u2.name) = lower($2))",
            &[&task, &holder],
        )?
        .get(0),
    ))
}

/// Returns the bin of the first open recount in run `run` of list `list` whose key
/// `holder` counted already, if any.
pub fn recount_counted_by(
    tx: &PgTx<'_>,
    list: i64,
    run: u32,
    holder: &str,
) -> Result<Option<String>, StoreError> {
    if holder.is_empty() {
        return Ok(None);
    }
    let tasks = tx.query(
        "select t.id, b.code from count_task t join bin b on b.id = t.bin_id
         where t.list_id = $1 and t.run = $2 and t.recount_of is not null
           and t.status <> 'done' and t.withdrawn_at is null
         order by t.seq",
        &[&list, &i64::from(run)],
    )?;
    for r in tasks {
        if counted_before(tx, r.get(0), holder)? == Some(true) {
            return Ok(Some(r.get(1)));
        }
    }
    Ok(None)
}

/// Says whether moving task `task` into a run held by `holder` would give a recount
/// to someone who counted its key already.
pub fn would_recount_own_count(tx: &PgTx<'_>, task: i64, holder: &str) -> Result<bool, StoreError> {
    if holder.is_empty() {
        return Ok(false);
    }
    Ok(counted_before(tx, task, holder)? == Some(true))
}
