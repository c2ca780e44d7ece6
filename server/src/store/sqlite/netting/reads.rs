//! SQL of the netting's reads: the results the routes and pages list, one result with
//! its evidence, and a pass's full reasoning for `cairn net`.

use super::*;

const ROW_SELECT: &str = "select r.id, r.pass_id, p.uid, u.name, b.code, i.sku, r.lot, r.class,
        r.counted, r.f_star, r.variance, r.status, r.verdict, r.unit_cost_minor, r.counted_at,
        r.window_start, r.window_end, r.watermark, r.settles_at, r.settled, r.superseded_by,
        r.renet_reason, r.recount_outcome, r.first_count_wrong,
        exists (select 1 from count_review v where v.result_id = r.id), r.computed_at, r.evidence,
        exists (select 1 from count_auto_adjustment a where a.result_id = r.id)
     from count_result r join count_pass p on p.id = r.pass_id
     join user_account u on u.id = p.user_id join bin b on b.id = r.bin_id
     join item i on i.id = r.item_id";

fn map_row(r: &rusqlite::Row<'_>, now: Timestamp) -> rusqlite::Result<(ResultRow, String)> {
    let variance: i64 = r.get(10)?;
    let cost: i64 = r.get(13)?;
    let settles_at = Timestamp(r.get(18)?);
    Ok((
        ResultRow {
            id: r.get(0)?,
            pass_id: r.get(1)?,
            pass: r.get(2)?,
            counter: r.get(3)?,
            bin: r.get(4)?,
            sku: r.get(5)?,
            lot: r.get(6)?,
            class: r.get(7)?,
            counted: r.get(8)?,
            f_star: r.get(9)?,
            variance,
            variance_value_minor: variance.saturating_mul(cost),
            status: r.get(11)?,
            verdict: r.get(12)?,
            unit_cost_minor: cost,
            counted_at: Timestamp(r.get(14)?),
            window_start: Timestamp(r.get(15)?),
            window_end: Timestamp(r.get(16)?),
            watermark: r.get(17)?,
            settles_at,
            settled: r.get::<_, bool>(19)? || now > settles_at,
            superseded_by: r.get(20)?,
            renet_reason: r.get(21)?,
            recount_outcome: r.get(22)?,
            first_count_wrong: r.get(23)?,
            reviewed: r.get(24)?,
            auto_adjusted: r.get(27)?,
            computed_at: Timestamp(r.get(25)?),
        },
        r.get(26)?,
    ))
}

/// Lists a site's results, by id.
pub fn count_results(
    conn: &Connection,
    site: SiteId,
    q: &ResultQuery,
    now: Timestamp,
) -> Result<ResultPage, StoreError> {
    let mut sql = format!("{ROW_SELECT} where r.site_id = ?1 and r.id > ?2");
    let mut args: Vec<rusqlite::types::Value> = vec![site.0.into(), q.after.into()];
    match q.state {
        ResultState::Open => sql.push_str(
            " and r.superseded_by is null and r.verdict = 'out_of_tolerance'
              and not exists (select 1 from count_review v where v.result_id = r.id)",
        ),
        ResultState::Current => sql.push_str(" and r.superseded_by is null"),
        ResultState::All => {}
    }
    if let Some(b) = &q.bin {
        args.push(b.clone().into());
        sql.push_str(&format!(" and b.code = ?{}", args.len()));
    }
    if let Some(s) = &q.sku {
        args.push(s.clone().into());
        sql.push_str(&format!(" and i.sku = ?{}", args.len()));
    }
    if let Some(l) = &q.lot {
        args.push(l.clone().into());
        sql.push_str(&format!(" and r.lot = ?{}", args.len()));
    }
    if let Some(f) = q.from {
        args.push(f.0.into());
        sql.push_str(&format!(" and r.counted_at >= ?{}", args.len()));
    }
    if let Some(t) = q.to {
        args.push(t.0.into());
        sql.push_str(&format!(" and r.counted_at <= ?{}", args.len()));
    }
    if let Some(p) = &q.pass {
        args.push(p.clone().into());
        let n = args.len();
        sql.push_str(&format!(" and (p.uid = ?{n} or cast(p.id as text) = ?{n})"));
    }
    let limit = q.limit.clamp(1, MAX_RESULTS_PAGE);
    sql.push_str(&format!(" order by r.id limit {limit}"));
    let results = conn
        .prepare(&sql)?
        .query_map(rusqlite::params_from_iter(args), |r| map_row(r, now))?
        .map(|row| row.map(|(r, _)| r))
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let next = (results.len() == limit)
        .then(|| results.last().map(|r| r.id))
        .flatten();
    Ok(ResultPage { results, next })
}

/// Reads one result with its evidence.
pub fn count_result(
    conn: &Connection,
    site: SiteId,
    id: i64,
    now: Timestamp,
) -> Result<Option<ResultDetail>, StoreError> {
    let Some((row, evidence)) = conn
        .prepare_cached(&format!("{ROW_SELECT} where r.site_id = ?1 and r.id = ?2"))?
        .query_row(params![site.0, id], |r| map_row(r, now))
        .optional()?
    else {
        return Ok(None);
    };
    let evidence =
        Evidence::parse(&evidence).map_err(|e| anyhow::anyhow!("count_result {id}: {e}"))?;
    let mut replaces = Vec::new();
    let mut at = row.id;
    while let Some(prev) = conn
        .prepare_cached("select id from count_result where superseded_by = ?1")?
        .query_row([at], |r| r.get::<_, i64>(0))
        .optional()?
    {
        replaces.push(prev);
        at = prev;
    }
    let tasks = conn
        .prepare_cached(
            "select distinct t.id, t.withdrawn_at, t.withdrawn_reason from count_result me
             join count_result r on r.pass_id = me.pass_id and r.item_id = me.item_id
                  and r.lot = me.lot
             join count_task_recheck k on k.result_id = r.id
             join count_task t on t.id = k.task_id
             where me.id = ?1 order by t.id",
        )?
        .query_map([row.id], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, Option<i64>>(1)?,
                r.get::<_, String>(2)?,
            ))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let mut recount_tasks = Vec::new();
    let mut withdrawn_recounts = Vec::new();
    for (task, withdrawn_at, reason) in tasks {
        match withdrawn_at {
            None => recount_tasks.push(task),
            Some(at) => withdrawn_recounts.push(WithdrawnRecount {
                task,
                at: Timestamp(at),
                reason,
            }),
        }
    }
    let automatic_adjustment = crate::store::sqlite::auto_adjust::of_result(conn, row.id)?;
    Ok(Some(ResultDetail {
        row,
        evidence,
        replaces,
        recount_tasks,
        withdrawn_recounts,
        automatic_adjustment,
    }))
}

/// Reads a pass (by id or uid) and its current results.
pub fn pass_report(
    conn: &Connection,
    site: SiteId,
    pass: PassRef,
    now: Timestamp,
) -> Result<Option<PassReport>, StoreError> {
    let (id, uid) = match pass {
        PassRef::Id(id) => (Some(id), None),
        PassRef::Uid(u) => (None, Some(u.to_string())),
    };
    let head = conn
        .prepare_cached(
            "select p.id, p.uid, s.code, b.code, u.name, p.first_at, p.done_at, p.uncertainty_ms,
                    p.task_id, p.site_id
             from count_pass p join site s on s.id = p.site_id join bin b on b.id = p.bin_id
             join user_account u on u.id = p.user_id left join count_task t on t.id = p.task_id
             where p.site_id = ?1 and (p.id = ?2 or p.uid = ?3)",
        )?
        .query_row(params![site.0, id, uid], |r| {
            Ok((
                PassReport {
                    pass_id: r.get(0)?,
                    pass: r.get(1)?,
                    site: r.get(2)?,
                    bin: r.get(3)?,
                    counter: r.get(4)?,
                    first_at: Timestamp(r.get(5)?),
                    done_at: r.get::<_, Option<i64>>(6)?.map(Timestamp),
                    uncertainty_ms: r.get(7)?,
                    rechecks: Vec::new(),
                    results: Vec::new(),
                },
                r.get::<_, Option<i64>>(8)?,
                SiteId(r.get(9)?),
            ))
        })
        .optional()?;
    let Some((mut report, task, site)) = head else {
        return Ok(None);
    };
    report.rechecks = conn
        .prepare_cached(
            "select result_id from count_task_recheck where task_id = ?1 order by result_id",
        )?
        .query_map([task], |r| r.get(0))?
        .collect::<rusqlite::Result<Vec<i64>>>()?;
    let ids = conn
        .prepare_cached(
            "select r.id from count_result r join item i on i.id = r.item_id
             where r.pass_id = ?1 and r.superseded_by is null order by i.sku, r.lot",
        )?
        .query_map([report.pass_id], |r| r.get(0))?
        .collect::<rusqlite::Result<Vec<i64>>>()?;
    for id in ids {
        if let Some(d) = count_result(conn, site, id, now)? {
            report.results.push(d);
        }
    }
    Ok(Some(report))
}
