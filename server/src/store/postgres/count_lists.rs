//! Stored count lists over PostgreSQL: saving a day's list (keeping its recounts),
//! reading it with its runs and tasks, moving a task, holding a run and finishing a task.
//! Every write holds its site's lock.

use super::recount_tasks::{self, Placing};
use super::tx::PgTx;
use super::{PgStore, col, is_unique_violation, row_opt, rows};
use crate::accounts::UserName;
use crate::batch::RowError;
use crate::master::SiteId;
use crate::planning::abc::Class;
use crate::planning::{ListView, NewCountList, Summary, TaskView};
use crate::store::{StoreError, WriteScope};
use crate::time::Timestamp;
use chrono::NaiveDate;
use std::collections::HashSet;

fn day_text(d: NaiveDate) -> String {
    d.format("%Y-%m-%d").to_string()
}

/// See [`crate::store::Store::save_count_list`]: an existing list is replaced only when
/// asked and not yet started. Its open recounts are not deleted: the plan placed each
/// again, and recounts the plan carries from earlier lists move here, noted on the list
/// they left.
pub async fn save_count_list(
    store: &PgStore,
    site: SiteId,
    list: NewCountList,
) -> Result<i64, StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| save_list(tx, site, &list))
        .await
}

fn save_list(tx: &PgTx<'_>, site: SiteId, list: &NewCountList) -> Result<i64, StoreError> {
    let day = day_text(list.day);
    let existing: Option<i64> = tx
        .query_opt(
            "select id from count_list where site_id = $1 and day = $2",
            &[&site.0, &day],
        )?
        .map(|r| r.get(0));
    let warnings = serde_json::to_string(&list.warnings).map_err(anyhow::Error::from)?;
    let (counters, minutes) = (i64::from(list.counters), i64::from(list.minutes));
    let id = match existing {
        Some(id) => {
            if !list.replace {
                return Err(StoreError::Conflict(format!(
                    "a count list for {day} already exists: ask to replace it"
                )));
            }
            // A task is started once a count points at it, even while it still reads
            // open (a line can reach the server before its bin-opened event).
            let started = tx
                .query_opt(
                    "select 1 from count_task t
                     where t.list_id = $1 and t.withdrawn_at is null
                       and (t.status <> 'open'
                            or exists (select 1 from count_pass p where p.task_id = t.id))
                     limit 1",
                    &[&id],
                )?
                .is_some();
            if started {
                return Err(StoreError::Conflict(format!(
                    "the count list for {day} has started: move its tasks instead of rebuilding it"
                )));
            }
            // The list keeps its row (and so its recounts): its version goes up.
            tx.execute(
                "delete from count_task where list_id = $1 and recount_of is null",
                &[&id],
            )?;
            tx.execute("delete from count_run where list_id = $1", &[&id])?;
            tx.execute(
                "update count_list set counters = $2, minutes = $3, level_s = $4, warnings = $5,
                     built_at = $6, watermark = $7, version = version + 1
                 where id = $1",
                &[
                    &id,
                    &counters,
                    &minutes,
                    &list.level_s,
                    &warnings,
                    &Timestamp::now().0,
                    &list.watermark,
                ],
            )?;
            id
        }
        None => tx
            .query_one(
                "insert into count_list (site_id, day, counters, minutes, level_s, warnings,
                     built_at, watermark, version)
                 values ($1, $2, $3, $4, $5, $6, $7, $8, 1)
                 returning id",
                &[
                    &site.0,
                    &day,
                    &counters,
                    &minutes,
                    &list.level_s,
                    &warnings,
                    &Timestamp::now().0,
                    &list.watermark,
                ],
            )?
            .get(0),
    };
    for r in 1..=i64::from(list.counters) {
        tx.execute(
            "insert into count_run (list_id, run) values ($1, $2)",
            &[&id, &r],
        )?;
    }
    let mut kept = HashSet::new();
    let mut carried = Vec::new();
    for t in &list.tasks {
        if let Some(task) = t.recount_task {
            let placing = Placing {
                task,
                seq: t.seq,
                run: t.run,
                detail: &t.detail,
            };
            carried.extend(recount_tasks::keep_recount(
                tx, site, id, list.day, &placing,
            )?);
            kept.insert(task);
            continue;
        }
        tx.execute(
            "insert into count_task (list_id, bin_id, seq, run, reason, class, detail, lines, est_s, why)
             values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)",
            &[
                &id,
                &t.bin_id,
                &i64::from(t.seq),
                &i64::from(t.run),
                &t.reason.as_str(),
                &t.class.map(Class::as_str),
                &t.detail,
                &i64::from(t.lines),
                &t.est_s,
                &t.why,
            ],
        )?;
    }
    recount_tasks::refuse_unplaced(tx, id, &kept)?;
    recount_tasks::note_carried(tx, &carried, list.day)?;
    Ok(id)
}

/// See [`crate::store::Store::count_list`]: a stored list with its runs and tasks.
pub async fn count_list(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
) -> Result<Option<ListView>, StoreError> {
    let c = store.client().await?;
    let Some(head) = row_opt(
        &c,
        "select id, counters, minutes, level_s, warnings, watermark, version
         from count_list where site_id = $1 and day = $2",
        &[&site.0, &day_text(day)],
    )
    .await?
    else {
        return Ok(None);
    };
    let id: i64 = head.get(0);
    let tasks = rows(
        &c,
        "select t.id, t.seq, t.run, b.code, z.code, b.aisle, b.bay, b.level, t.reason, t.class,
                t.detail, t.lines, t.est_s, t.status, t.why
         from count_task t join bin b on b.id = t.bin_id join zone z on z.id = b.zone_id
         where t.list_id = $1 and t.withdrawn_at is null order by t.run, t.seq",
        &[&id],
    )
    .await?
    .iter()
    .map(|r| {
        let class: Option<String> = r.get(9);
        Ok(TaskView {
            id: Some(r.get(0)),
            seq: col(r, 1)?,
            run: col(r, 2)?,
            bin: r.get(3),
            zone: r.get(4),
            aisle: col(r, 5)?,
            bay: col(r, 6)?,
            level: col(r, 7)?,
            reason: r.get(8),
            class: class.as_deref().and_then(Class::parse),
            detail: r.get(10),
            lines: col(r, 11)?,
            est_s: r.get(12),
            status: r.get(13),
            why: r
                .get::<_, Option<String>>(14)
                .and_then(|t| serde_json::from_str(&t).ok()),
        })
    })
    .collect::<Result<Vec<_>, StoreError>>()?;
    let holders: Vec<String> = rows(
        &c,
        "select holder from count_run where list_id = $1 order by run",
        &[&id],
    )
    .await?
    .iter()
    .map(|r| r.get(0))
    .collect();
    let warnings: String = head.get(4);
    let mut view = ListView {
        day,
        stored: true,
        version: head.get(6),
        counters: col(&head, 1)?,
        minutes: col(&head, 2)?,
        level_s: head.get(3),
        watermark: head.get(5),
        warnings: serde_json::from_str(&warnings).unwrap_or_default(),
        runs: Vec::new(),
        summary: Summary::default(),
        tasks,
    };
    view.tally(&holders);
    Ok(Some(view))
}

fn list_id(tx: &PgTx<'_>, site: SiteId, day: NaiveDate) -> Result<(i64, u32), StoreError> {
    let r = tx
        .query_opt(
            "select id, counters from count_list where site_id = $1 and day = $2",
            &[&site.0, &day_text(day)],
        )?
        .ok_or_else(|| StoreError::NotFound(format!("no count list for {day}")))?;
    Ok((r.get(0), col(&r, 1)?))
}

fn bump(tx: &PgTx<'_>, list: i64) -> Result<(), StoreError> {
    tx.execute(
        "update count_list set version = version + 1 where id = $1",
        &[&list],
    )?;
    Ok(())
}

/// See [`crate::store::Store::move_task`]: the task is then held by that run's counter only.
pub async fn move_task(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    task: i64,
    run: u32,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let (list, counters) = list_id(tx, site, day)?;
            if run == 0 || run > counters {
                return Err(StoreError::Rejected(vec![RowError::new(
                    0,
                    "run",
                    format!("the list for {day} has runs 1 to {counters}"),
                )]));
            }
            let r = tx
                .query_opt(
                    "select status, withdrawn_at is not null from count_task
                      where id = $1 and list_id = $2",
                    &[&task, &list],
                )?
                .ok_or_else(|| {
                    StoreError::NotFound(format!("no task {task} in the list for {day}"))
                })?;
            let (status, withdrawn): (String, bool) = (r.get(0), r.get(1));
            if withdrawn {
                return Err(StoreError::Conflict(format!(
                    "task {task} is a withdrawn recount and cannot move"
                )));
            }
            if status == "done" {
                return Err(StoreError::Conflict(format!(
                    "task {task} is done and cannot move"
                )));
            }
            let run = i64::from(run);
            let holder: String = tx
                .query_opt(
                    "select holder from count_run where list_id = $1 and run = $2",
                    &[&list, &run],
                )?
                .map(|r| r.get(0))
                .unwrap_or_default();
            if recount_tasks::would_recount_own_count(tx, task, &holder)? {
                return Err(StoreError::Conflict(format!(
                    "task {task} is a recount of a bin {holder} counted, and run {run} is {holder}'s: \
                     a recount goes to someone else"
                )));
            }
            tx.execute(
                "update count_task set run = $1 where id = $2",
                &[&run, &task],
            )?;
            bump(tx, list)
        })
        .await
}

/// See [`crate::store::Store::hold_run`]: a counter holds one run a day; none releases it.
pub async fn hold_run(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    run: u32,
    holder: Option<UserName>,
) -> Result<(), StoreError> {
    let holder = holder.map(|h| h.as_str().to_string()).unwrap_or_default();
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let (list, counters) = list_id(tx, site, day)?;
            if run == 0 || run > counters {
                return Err(StoreError::NotFound(format!(
                    "the list for {day} has runs 1 to {counters}"
                )));
            }
            // The route checked this already; checked again here because a role can be
            // taken away between that read and this write.
            if !holder.is_empty() {
                let counter: bool = tx
                    .query_one(
                        "select exists(select 1 from user_account u
                                         join user_role r on r.user_id = u.id
                                        where lower(u.name) = lower($1) and r.site_id = $2
                                          and r.role = 'counter')",
                        &[&holder, &site.0],
                    )?
                    .get(0);
                if !counter {
                    return Err(StoreError::Conflict(format!(
                        "{holder} is not a counter at this site (any more): pick one of its counters"
                    )));
                }
            }
            if let Some(bin) = recount_tasks::recount_counted_by(tx, list, run, &holder)? {
                return Err(StoreError::Conflict(format!(
                    "run {run} holds the recount of bin {bin}, which {holder} counted: a recount goes \
                     to someone else, so give {holder} another run or move the recount first"
                )));
            }
            tx.execute(
                "update count_run set holder = $1 where list_id = $2 and run = $3",
                &[&holder, &list, &i64::from(run)],
            )
            .map_err(|e| {
                if is_unique_violation(&e) {
                    StoreError::Conflict(format!(
                        "{holder} already holds another run of the list for {day}"
                    ))
                } else {
                    e.into()
                }
            })?;
            bump(tx, list)
        })
        .await
}

/// See [`crate::store::Store::finish_task`]: the task is done at `at` and its bin counted
/// whole that day.
pub async fn finish_task(
    store: &PgStore,
    site: SiteId,
    task: i64,
    at: Timestamp,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let r = tx
                .query_opt(
                    "select l.id, t.bin_id, l.day from count_task t
                       join count_list l on l.id = t.list_id
                      where t.id = $1 and l.site_id = $2",
                    &[&task, &site.0],
                )?
                .ok_or_else(|| StoreError::NotFound(format!("no task {task} in this site")))?;
            let (list, bin, day): (i64, i64, String) = (r.get(0), r.get(1), r.get(2));
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
            bump(tx, list)
        })
        .await
}
