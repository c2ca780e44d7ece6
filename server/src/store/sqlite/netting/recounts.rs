//! SQL of recount tasks as netting sends, decides and withdraws them (DESIGN §5). The
//! out-of-tolerance keys of one count pass go to one recount task for the bin, which lists
//! every result it re-checks (`count_task_recheck`); a recount pass over the bin decides each
//! of them, and the keys it agrees on with neither side go to one supervisor count. A task
//! whose keys all stopped needing it (a re-net made them hits, or a recount decided them)
//! before anyone counted against it is withdrawn: kept with its reason, off every list.

use super::{ItemLot, PassFacts, RECOUNT_EST_S, json};
use crate::netting::pass::{OpenTask, Sent};
use crate::netting::service::{self, Placement};
use crate::planning::abc::Class;
use crate::store::StoreError;
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, Transaction, params};

/// Most keys a task's detail names before it says "and N more".
const MAX_DETAIL_KEYS: usize = 10;

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

/// Sends first results of one pass to a recount (or a supervisor count) of its bin: into
/// the open task of that kind no phone has begun yet, if the pass has one, else into a new
/// task. Returns the task added, if one was.
pub(super) fn send(
    tx: &Transaction,
    pass: &PassFacts,
    results: &[i64],
    supervisor: bool,
    sent: &Sent,
) -> Result<Vec<i64>, StoreError> {
    if results.is_empty() {
        return Ok(Vec::new());
    }
    let open: Option<(i64, i64)> = tx
        .prepare_cached(
            "select t.id, t.list_id from count_result r cross join count_task_recheck k
                 cross join count_task t
             where r.pass_id = ?1 and k.result_id = r.id and t.id = k.task_id
               and t.supervisor = ?2 and t.withdrawn_at is null and t.status = 'open'
               and not exists (select 1 from count_pass p indexed by count_pass_task
                               where p.task_id = t.id)
             order by t.id limit 1",
        )?
        .query_row(params![pass.id, supervisor], |r| Ok((r.get(0)?, r.get(1)?)))
        .optional()?;
    match open {
        Some((task, list)) => {
            link(tx, task, results)?;
            tx.prepare_cached("update count_task set detail = ?2 where id = ?1")?
                .execute(params![task, detail_of(tx, task, supervisor)?])?;
            bump_list(tx, list)?;
            Ok(Vec::new())
        }
        None => Ok(vec![add_task(tx, pass, results, supervisor, sent)?]),
    }
}

fn link(tx: &Transaction, task: i64, results: &[i64]) -> Result<(), StoreError> {
    let mut ins = tx.prepare_cached(
        "insert or ignore into count_task_recheck (task_id, result_id) values (?1, ?2)",
    )?;
    for r in results {
        ins.execute(params![task, r])?;
    }
    Ok(())
}

/// Writes what a task re-checks, for the supervisor's list: the keys and their results.
fn detail_of(conn: &Connection, task: i64, supervisor: bool) -> Result<String, StoreError> {
    let rows = conn
        .prepare_cached(
            "select r.id, i.sku, r.lot from count_task_recheck k cross join count_result r
                 cross join item i
             where k.task_id = ?1 and r.id = k.result_id and i.id = r.item_id
             order by r.id",
        )?
        .query_map([task], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, String>(2)?,
            ))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let keys: Vec<String> = rows
        .iter()
        .take(MAX_DETAIL_KEYS)
        .map(|(_, sku, lot)| {
            if lot.is_empty() {
                sku.clone()
            } else {
                format!("{sku} lot {lot}")
            }
        })
        .collect();
    let more = rows.len().saturating_sub(MAX_DETAIL_KEYS);
    let more = if more > 0 {
        format!(" and {more} more")
    } else {
        String::new()
    };
    let ids: Vec<String> = rows
        .iter()
        .take(MAX_DETAIL_KEYS)
        .map(|(id, _, _)| id.to_string())
        .collect();
    let what = if supervisor {
        "supervisor count"
    } else {
        "recount"
    };
    let s = if rows.len() == 1 { "" } else { "s" };
    Ok(format!(
        "{what} of {}{more} (result{s} {}{more})",
        keys.join(", "),
        ids.join(", ")
    ))
}

/// Adds a recount task for `results` (first results of one pass) to the day's list of the
/// pass's done day (creating the list if there is none), ahead of its run: for a recount in
/// a run held by someone other than the first counter, for a supervisor count (or when there
/// is no such run) in a run held by no one, with a warning on the list. Returns the task's id.
fn add_task(
    tx: &Transaction,
    pass: &PassFacts,
    results: &[i64],
    supervisor: bool,
    sent: &Sent,
) -> Result<i64, StoreError> {
    let done = pass.timing.done.unwrap_or(pass.timing.first_scan);
    // The site's local day of the count, not the UTC one (a count at 23:30 in Chicago is
    // recounted on that day's list).
    let zone = crate::store::sqlite::master::site_zone(tx, pass.site)?;
    let day = zone.day_of(done).format("%Y-%m-%d").to_string();
    let list = tx
        .prepare_cached(
            "select id, counters, warnings from count_list where site_id = ?1 and day = ?2",
        )?
        .query_row(params![pass.site.0, day], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, u32>(1)?,
                r.get::<_, String>(2)?,
            ))
        })
        .optional()?;
    let (list, counters, warnings) = match list {
        Some(l) => l,
        None => {
            tx.prepare_cached(
                "insert into count_list (site_id, day, counters, minutes, level_s, warnings,
                     built_at, watermark)
                 values (?1, ?2, 1, ?3, 0, '[]', ?4, ?5)",
            )?
            .execute(params![
                pass.site.0,
                day,
                RECOUNT_EST_S.div_euclid(60).max(1),
                sent.now.0,
                sent.watermark
            ])?;
            let id = tx.last_insert_rowid();
            tx.prepare_cached("insert into count_run (list_id, run) values (?1, 1)")?
                .execute([id])?;
            (id, 1, "[]".to_string())
        }
    };
    let runs = tx
        .prepare_cached(
            "select r.run, r.holder,
                    (select count(*) from count_task t
                     where t.list_id = r.list_id and t.run = r.run and t.status <> 'done'
                       and t.withdrawn_at is null)
             from count_run r where r.list_id = ?1 order by r.run",
        )?
        .query_map([list], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))?
        .collect::<rusqlite::Result<Vec<(u32, String, u32)>>>()?;
    let placement = if supervisor {
        let run = runs
            .iter()
            .filter(|(_, h, _)| h.is_empty())
            .map(|(r, _, _)| *r)
            .min()
            .unwrap_or(counters + 1);
        Placement::Unassigned {
            run,
            warning: String::new(),
        }
    } else {
        service::place_recount(&runs, &pass.user_name, counters + 1)
    };
    let (run, warning) = match placement {
        Placement::Run(r) => (r, None),
        Placement::Unassigned { run, warning } => (run, Some(warning)),
    };
    if run > counters {
        tx.prepare_cached("insert into count_run (list_id, run) values (?1, ?2)")?
            .execute(params![list, run])?;
        tx.prepare_cached("update count_list set counters = ?2 where id = ?1")?
            .execute(params![list, run])?;
    }
    // Recounts lead the run, in the order they were sent: the new one goes after the
    // recounts already there and everything after it moves down one place, so every
    // sequence number stays a positive walk position.
    let seq: i64 = tx
        .prepare_cached(
            "select coalesce(
                 (select max(seq) + 1 from count_task
                  where list_id = ?1 and run = ?2 and recount_of is not null),
                 (select min(seq) from count_task where list_id = ?1 and run = ?2),
                 1)",
        )?
        .query_row(params![list, run], |r| r.get(0))?;
    tx.prepare_cached(
        "update count_task set seq = seq + 1
         where list_id = ?1 and run = ?2 and seq >= ?3 and recount_of is null",
    )?
    .execute(params![list, run, seq])?;
    // The task is as important as the most important key it re-checks.
    let mut class: Option<Class> = None;
    for r in results {
        let c: Option<String> = tx
            .prepare_cached("select class from count_result where id = ?1")?
            .query_row([r], |row| row.get(0))?;
        if let Some(c) = c.as_deref().and_then(Class::parse) {
            class = Some(class.map_or(c, |k| k.min(c)));
        }
    }
    let lines: i64 = tx
        .prepare_cached("select count(*) from balance where bin_id = ?1 and qty <> 0")?
        .query_row([pass.bin_id], |r| r.get(0))?;
    tx.prepare_cached(
        "insert into count_task (list_id, bin_id, seq, run, reason, class, detail, lines, est_s,
             recount_of, supervisor)
         values (?1, ?2, ?3, ?4, 'recount', ?5, '', ?6, ?7, ?8, ?9)",
    )?
    .execute(params![
        list,
        pass.bin_id,
        seq,
        run,
        class.map(Class::as_str),
        lines.max(1),
        pass.task_est_s.unwrap_or(RECOUNT_EST_S),
        results[0],
        supervisor
    ])?;
    let task = tx.last_insert_rowid();
    link(tx, task, results)?;
    let detail = detail_of(tx, task, supervisor)?;
    tx.prepare_cached("update count_task set detail = ?2 where id = ?1")?
        .execute(params![task, detail])?;
    let warning = warning.map(|w| {
        if supervisor {
            format!(
                "supervisor count of {} for {}: the recount agreed with neither the first \
                 count nor the book; run {run} is held by no one",
                pass.bin_code,
                detail.trim_start_matches("supervisor count of ")
            )
        } else {
            w
        }
    });
    if let Some(w) = warning {
        // Said once per run and counter, however many recounts wait there.
        let mut all: Vec<String> = serde_json::from_str(&warnings).unwrap_or_default();
        if !all.contains(&w) {
            all.push(w);
            tx.prepare_cached("update count_list set warnings = ?2 where id = ?1")?
                .execute(params![list, json(&all)?])?;
        }
    }
    bump_list(tx, list)?;
    Ok(task)
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
