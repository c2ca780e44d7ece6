//! `cairn store copy --site CODE`: one site of a SQLite file onto a PostgreSQL database
//! that may already serve other sites. The site's rows get fresh ids there (handed out
//! by the target's own sequences, in the file's order, so every sequence stays above
//! what it holds and a site's rows keep their order), every id that points at another
//! row is rewritten through the same maps (`remap.rs`), and nothing of the file's other
//! sites comes along.
//!
//! Rules: the target must not hold the site's code yet. The site's people come along:
//! those with a role there, and those its rows name (a device's owner, a count's
//! counter, a decision's maker, an audit event's actor), with their roles at this site
//! only. A person whose name the target already has is the same account only when the
//! display name, password and PIN are identical (then the target's account is kept and
//! gets the roles); any other difference refuses the copy, naming them, rather than
//! merge two people. Events of the audit trail that belong to no site (sign-ins) and
//! sessions stay behind.
//!
//! Checks, in the copy's transaction before it commits: every table's copied rows read
//! back equal to what was written; the site's balances equal the sums of its movements;
//! and, compared with the file in terms that hold no ids (codes, SKUs, uids), the site's
//! movements, balances, count lines, count results, decisions and people.

use super::remap::{self, IdMap, Maps};
use super::{
    Cell, CopyReport, NullOf, RowsDigest, SiteReport, TABLES, TablePlan, check_balanced, columns,
    copy_table, digest_pg, fill_later, has_identity, open_both, open_source, read_back,
};
use crate::master::SiteCode;
use anyhow::{Context, bail};
use indicatif::ProgressBar;
use rusqlite::OptionalExtension;
use std::path::Path;
use std::sync::Arc;

/// Ids handed out by one statement, at most.
const RESERVE_CHUNK: i64 = 100_000;

/// Which rows of `table` belong to the site with id `site`, as a `where` clause both
/// engines read; `people` lists the accounts copied (`user_account` is not a site's).
fn filter(table: &str, site: i64, people: &[i64]) -> String {
    let of_bins = format!("bin_id in (select id from bin where site_id = {site})");
    let of_items = format!("item_id in (select id from item where site_id = {site})");
    let of_lists = format!("list_id in (select id from count_list where site_id = {site})");
    let of_results = format!("result_id in (select id from count_result where site_id = {site})");
    match table {
        "site" => format!("id = {site}"),
        "user_account" if people.is_empty() => "1 = 0".into(),
        "user_account" => format!(
            "id in ({})",
            people
                .iter()
                .map(i64::to_string)
                .collect::<Vec<_>>()
                .join(", ")
        ),
        "lot" | "item_class" => of_items,
        "balance" | "balance_snapshot" | "demo_shelf" | "bin_count" => of_bins,
        "count_run" | "count_task" => of_lists,
        "device_clock" => format!("device_id in (select id from device where site_id = {site})"),
        "count_line" => format!("pass_id in (select id from count_pass where site_id = {site})"),
        "count_line_undo" => {
            format!("pass_uid in (select uid from count_pass where site_id = {site})")
        }
        "count_review" | "count_auto_adjustment" => of_results,
        "count_task_recheck" => format!(
            "task_id in (select t.id from count_task t join count_list l on l.id = t.list_id
                         where l.site_id = {site})"
        ),
        _ => format!("site_id = {site}"),
    }
}

/// One of the file's people the site brings.
#[derive(Debug)]
struct Person {
    id: i64,
    name: String,
    display_name: String,
    password_hash: String,
    pin_hash: Option<String>,
}

/// The site's people: a role there, or named by its rows.
fn people_of(src: &rusqlite::Connection, site: i64) -> anyhow::Result<Vec<Person>> {
    let mut q = src.prepare(
        "select id, name, display_name, password_hash, pin_hash from user_account
         where id in (select user_id from user_role where site_id = ?1
                      union select user_id from device where site_id = ?1
                      union select user_id from api_token where site_id = ?1
                      union select user_id from count_pass where site_id = ?1
                      union select user_id from sync_event where site_id = ?1
                      union select decided_by from count_review
                            where result_id in (select id from count_result where site_id = ?1)
                      union select actor_id from audit_event
                            where site_id = ?1 and actor_id is not null)
         order by id",
    )?;
    let people = q
        .query_map([site], |r| {
            Ok(Person {
                id: r.get(0)?,
                name: r.get(1)?,
                display_name: r.get(2)?,
                password_hash: r.get(3)?,
                pin_hash: r.get(4)?,
            })
        })?
        .collect::<rusqlite::Result<_>>()?;
    Ok(people)
}

/// Copies the site `code` of the SQLite file `from` onto the PostgreSQL database at
/// `to`, which must not hold that site yet (see the module's rules).
pub async fn copy_site(
    from: &Path,
    to: &str,
    code: &SiteCode,
    progress: &ProgressBar,
) -> anyhow::Result<CopyReport> {
    let (src, target) = open_both(from, to).await?;
    let code = code.as_str();
    let Some(old_site) = src
        .query_row("select id from site where code = ?1", [code], |r| {
            r.get::<_, i64>(0)
        })
        .optional()?
    else {
        let mut q = src.prepare("select code from site order by code")?;
        let codes: Vec<String> = q
            .query_map([], |r| r.get(0))?
            .collect::<rusqlite::Result<_>>()?;
        bail!(
            "{} holds no site {code} (it holds: {})",
            from.display(),
            if codes.is_empty() {
                "none".into()
            } else {
                codes.join(", ")
            }
        );
    };
    let mut pg = target.client().await?;
    if pg
        .query_opt("select 1 from site where code = $1", &[&code])
        .await?
        .is_some()
    {
        bail!(
            "the target database already holds site {code}: a site is copied onto a database \
             that does not hold it yet (nothing was written)"
        );
    }
    let people = people_of(&src, old_site)?;
    let (mut kept, mut clashes, mut added) = (Vec::new(), Vec::new(), Vec::new());
    for p in &people {
        let there = pg
            .query_opt(
                "select id, name, display_name, password_hash, pin_hash from user_account
                 where lower(name) = lower($1)",
                &[&p.name],
            )
            .await?;
        match there {
            None => added.push(p.id),
            Some(r) => {
                let same = r.get::<_, String>(1) == p.name
                    && r.get::<_, String>(2) == p.display_name
                    && r.get::<_, String>(3) == p.password_hash
                    && r.get::<_, Option<String>>(4) == p.pin_hash;
                if same {
                    kept.push((p.id, r.get::<_, i64>(0), p.name.clone()));
                } else {
                    clashes.push(p.name.clone());
                }
            }
        }
    }
    if !clashes.is_empty() {
        bail!(
            "the target database already has user(s) {} of another name spelling, display \
             name, password or PIN than the file's, so they may be other people: rename one \
             side or make the accounts the same, then copy again (nothing was written)",
            clashes.join(", ")
        );
    }

    let mut total = 0u64;
    for &t in TABLES {
        total += src.query_row(
            &format!(
                "select count(*) from {t} where {}",
                filter(t, old_site, &added)
            ),
            [],
            |r| r.get::<_, i64>(0),
        )? as u64;
    }
    progress.set_length(total);
    let tx = pg.transaction().await?;

    progress.set_message("handing out ids");
    let mut maps = Maps::new();
    for &table in TABLES {
        if !has_identity(&tx, table).await? {
            continue;
        }
        let old: Vec<i64> = if table == "user_account" {
            added.clone()
        } else {
            let mut q = src.prepare(&format!(
                "select id from {table} where {} order by id",
                filter(table, old_site, &added)
            ))?;
            q.query_map([], |r| r.get(0))?
                .collect::<rusqlite::Result<_>>()?
        };
        let new = reserve(&tx, table, old.len()).await?;
        let map = if table == "user_account" {
            let mut pairs: Vec<(i64, i64)> = old.iter().copied().zip(new).collect();
            pairs.extend(kept.iter().map(|(old, new, _)| (*old, *new)));
            IdMap::of(pairs)
        } else {
            IdMap::rising(&old, &new)
        };
        maps.insert(table, map);
    }
    let new_site = maps
        .get("site")
        .and_then(|m| m.get(old_site))
        .context("the site got no id on the target")?;
    let new_people: Vec<i64> = {
        let m = maps.get("user_account").context("people got no ids")?;
        added.iter().filter_map(|id| m.get(*id)).collect()
    };
    let maps = Arc::new(maps);

    let mut report = CopyReport::default();
    let mut plans = Vec::new();
    for &table in TABLES {
        progress.set_message(table.to_string());
        let cols = columns(&tx, table).await?;
        let names: Vec<String> = cols.iter().map(|c| c.name.clone()).collect();
        let plan = TablePlan {
            table,
            cols,
            filter: filter(table, old_site, &added),
            transform: Some(remap::transform(table, &names, maps.clone())?),
        };
        let (rows, digest) = copy_table(from, &tx, &plan, progress).await?;
        report.tables.push((table.to_string(), rows));
        plans.push((plan, digest));
    }
    for (table, col) in super::LATER {
        progress.set_message(format!("{table}.{col}"));
        let (rows, values) = (
            maps.get(*table)
                .context("forward references of a table without ids")?,
            maps.get(if *col == "task_id" {
                "count_task"
            } else {
                "count_result"
            })
            .context("forward references to a table without ids")?,
        );
        let mut q = src.prepare(&format!(
            "select id, {col} from {table} where {col} is not null and {}",
            filter(table, old_site, &added)
        ))?;
        let pairs = q
            .query_map([], |r| Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?)))?
            .collect::<rusqlite::Result<Vec<_>>>()?
            .into_iter()
            .map(|(id, v)| {
                Ok((
                    rows.get(id).context("a row without its new id")?,
                    values
                        .get(v)
                        .with_context(|| format!("{table}.{col} {v} is not the site's"))?,
                ))
            })
            .collect::<anyhow::Result<Vec<_>>>()?;
        fill_later(&tx, table, col, &pairs).await?;
    }

    progress.set_message("reading every table back");
    for (plan, digest) in &plans {
        if &read_back(&tx, plan, &filter(plan.table, new_site, &new_people)).await? != digest {
            bail!(
                "table {} read back differs from what was written: nothing was written",
                plan.table
            );
        }
    }
    check_balanced(
        &tx,
        &format!("bin_id in (select id from bin where site_id = {new_site})"),
    )
    .await?;
    progress.set_message("comparing the site with the file");
    let checked = compare_with_file(from, &tx, code).await?;
    tx.commit()
        .await
        .map_err(|e| anyhow::anyhow!(super::describe(&e)))?;
    progress.set_message("vacuuming and gathering the planner's statistics");
    super::analyze_copied(&pg, &report.tables).await?;
    report.sites = 1;
    report.movements = report.rows_of("movement");
    report.site = Some(SiteReport {
        code: code.to_string(),
        users_added: added.len(),
        users_kept: kept.into_iter().map(|k| k.2).collect(),
        checked,
    });
    Ok(report)
}

/// Takes `n` ids from the sequence of `table` (other servers may take some meanwhile:
/// ours need not be consecutive); returns them ascending.
async fn reserve(
    tx: &tokio_postgres::Transaction<'_>,
    table: &str,
    n: usize,
) -> anyhow::Result<Vec<i64>> {
    let mut ids = Vec::with_capacity(n);
    let mut left = i64::try_from(n)?;
    while left > 0 {
        let take = left.min(RESERVE_CHUNK);
        let got: Option<Vec<i64>> = tx
            .query_one(
                "select array_agg(v order by v) from
                   (select nextval(pg_get_serial_sequence($1, 'id')) as v
                    from generate_series(1, $2::bigint)) s",
                &[&table, &take],
            )
            .await?
            .get(0);
        ids.extend(got.unwrap_or_default());
        left -= take;
    }
    ids.sort_unstable();
    anyhow::ensure!(
        ids.len() == n,
        "{table}: {n} ids asked for, {} given",
        ids.len()
    );
    Ok(ids)
}

/// What is compared between the file and the target, in terms that hold no ids: each
/// check's name and its query (`$1` the site's code).
const CHECKS: &[(&str, &str)] = &[
    (
        "movements",
        "select m.uid, b.code, i.sku, m.lot, m.qty, m.kind, m.event_at, m.recorded_at,
                m.source, m.doc_ref, m.actor, r.uid
         from movement m join site s on s.id = m.site_id join bin b on b.id = m.bin_id
           join item i on i.id = m.item_id left join movement r on r.id = m.reverses
         where s.code = $1",
    ),
    (
        "balances",
        "select b.code, i.sku, x.lot, x.qty, x.last_event_at, x.moves_since_snap, x.snap_at
         from balance x join bin b on b.id = x.bin_id join item i on i.id = x.item_id
           join site s on s.id = b.site_id
         where s.code = $1",
    ),
    (
        "count lines",
        "select l.uid, p.uid, i.sku, l.lot, l.expiry, l.qty, l.packs, l.gtin, l.entry, l.at,
                l.device_at, l.uncertainty_ms, case when l.found then 1 else 0 end
         from count_line l join count_pass p on p.id = l.pass_id
           join site s on s.id = p.site_id join item i on i.id = l.item_id
         where s.code = $1",
    ),
    (
        "count results",
        "select p.uid, b.code, i.sku, r.lot, r.class, r.counted, r.f_star, r.variance,
                r.status, r.verdict, r.unit_cost_minor, r.counted_at, r.window_start,
                r.window_end, r.settles_at, case when r.settled then 1 else 0 end,
                np.uid, n.computed_at, r.renet_reason, r.computed_at, r.recount_outcome,
                case when r.first_count_wrong then 1 else 0 end
         from count_result r join site s on s.id = r.site_id
           join count_pass p on p.id = r.pass_id join bin b on b.id = r.bin_id
           join item i on i.id = r.item_id
           left join count_result n on n.id = r.superseded_by
           left join count_pass np on np.id = n.pass_id
         where s.code = $1",
    ),
    (
        "decisions",
        "select p.uid, i.sku, r.lot, r.computed_at, v.decision, v.reason_code, v.note, u.name,
                v.decided_at, m.uid
         from count_review v join count_result r on r.id = v.result_id
           join site s on s.id = r.site_id join count_pass p on p.id = r.pass_id
           join item i on i.id = r.item_id join user_account u on u.id = v.decided_by
           left join movement m on m.id = v.movement_id
         where s.code = $1",
    ),
    (
        "people",
        "select u.name, u.display_name, u.password_hash, u.pin_hash, x.role
         from user_role x join user_account u on u.id = x.user_id
           join site s on s.id = x.site_id
         where s.code = $1",
    ),
];

/// Runs every check on both sides; fails naming the first that differs.
async fn compare_with_file(
    from: &Path,
    tx: &tokio_postgres::Transaction<'_>,
    code: &str,
) -> anyhow::Result<Vec<&'static str>> {
    let path = from.to_path_buf();
    let site = code.to_string();
    let file = tokio::task::spawn_blocking(move || -> anyhow::Result<Vec<RowsDigest>> {
        let c = open_source(&path)?;
        CHECKS
            .iter()
            .map(|(_, sql)| digest_sqlite(&c, &sql.replace("$1", "?1"), &site))
            .collect()
    })
    .await??;
    let mut checked = Vec::new();
    for ((name, sql), want) in CHECKS.iter().zip(file) {
        let got = digest_pg(tx, sql, &[&code]).await?;
        if got != want {
            bail!(
                "the site's {name} on the target differ from the file's ({} rows there, {} in \
                 the file): nothing was written",
                got.rows,
                want.rows
            );
        }
        checked.push(*name);
    }
    Ok(checked)
}

fn digest_sqlite(c: &rusqlite::Connection, sql: &str, code: &str) -> anyhow::Result<RowsDigest> {
    let mut q = c.prepare(sql)?;
    let n = q.column_count();
    let mut rows = q.query([code])?;
    let mut digest = RowsDigest::default();
    let mut row = Vec::with_capacity(n);
    while let Some(r) = rows.next()? {
        row.clear();
        for i in 0..n {
            row.push(match r.get::<_, rusqlite::types::Value>(i)? {
                rusqlite::types::Value::Null => Cell::Null(NullOf::Int),
                rusqlite::types::Value::Integer(v) => Cell::Int(v),
                rusqlite::types::Value::Real(v) => Cell::Float(v),
                rusqlite::types::Value::Text(v) => Cell::Text(v),
                rusqlite::types::Value::Blob(_) => bail!("a check read a blob: {sql}"),
            });
        }
        digest.add(&row);
    }
    Ok(digest)
}
