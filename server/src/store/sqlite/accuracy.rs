//! SQL for the accuracy reports and the planner's buffer: settings, current
//! count results of a period, planned tasks, A items and their last counts,
//! items with class and keys held, daily issues, and planner inputs. One
//! function per query; `impl AccuracyStore` at the end routes each to a
//! reader or the writer.

use super::SqliteStore;
use crate::accounts::audit::AuditEvent;
use crate::accuracy::inputs::{
    AccuracySettings, InputQuery, InputTarget, LeadTimes, NewPlannerInput, PlannerInput,
};
use crate::accuracy::store::{
    AItem, AccuracyStore, DailyIssue, ItemRow, PlannedTask, ResultQuery, StoredResult,
};
use crate::batch::RowError;
use crate::master::SiteId;
use crate::master::codes::Sku;
use crate::planning::abc::Class;
use crate::store::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use chrono::NaiveDate;
use rusqlite::{Connection, OptionalExtension, Transaction, params};

fn parse_day(text: &str) -> rusqlite::Result<NaiveDate> {
    NaiveDate::parse_from_str(text, "%Y-%m-%d").map_err(|e| {
        rusqlite::Error::FromSqlConversionFailure(0, rusqlite::types::Type::Text, Box::new(e))
    })
}

fn class_of(text: Option<String>) -> Option<Class> {
    text.as_deref().and_then(Class::parse)
}

/// Reads a site's accuracy settings, or the defaults when none were stored.
pub fn settings(conn: &Connection, site: SiteId) -> Result<AccuracySettings, StoreError> {
    let row = conn
        .prepare_cached(
            "select ira_target_bp, demand_window_days, service_level_a, service_level_b,
                    service_level_c
             from accuracy_settings where site_id = ?1",
        )?
        .query_row([site.0], |r| {
            Ok(AccuracySettings {
                ira_target: r.get::<_, i64>(0)? as f64 / 10_000.0,
                demand_window_days: r.get(1)?,
                service_level: [r.get(2)?, r.get(3)?, r.get(4)?],
            })
        })
        .optional()?;
    Ok(row.unwrap_or_default())
}

/// Stores a site's accuracy settings.
pub fn put_settings(
    tx: &Transaction,
    site: SiteId,
    s: &AccuracySettings,
) -> Result<(), StoreError> {
    tx.prepare_cached(
        "insert into accuracy_settings (site_id, ira_target_bp, demand_window_days,
                                        service_level_a, service_level_b, service_level_c)
         values (?1, ?2, ?3, ?4, ?5, ?6)
         on conflict (site_id) do update set
             ira_target_bp = excluded.ira_target_bp,
             demand_window_days = excluded.demand_window_days,
             service_level_a = excluded.service_level_a,
             service_level_b = excluded.service_level_b,
             service_level_c = excluded.service_level_c",
    )?
    .execute(params![
        site.0,
        s.target_bp(),
        s.demand_window_days,
        s.service_level[0],
        s.service_level[1],
        s.service_level[2]
    ])?;
    Ok(())
}

/// Reads the count results counted in `[from, to)` that judge the record: per key of a
/// first count, the row a decision was taken on, else the current one (recounts left out).
pub fn count_results(
    conn: &Connection,
    site: SiteId,
    q: &ResultQuery,
) -> Result<Vec<StoredResult>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select i.sku, cr.class, z.code, b.code, cr.lot, u.name, cr.counted_at, cr.counted,
                cr.f_star, cr.variance, cr.verdict, cr.unit_cost_minor
         from count_result cr
         join item i on i.id = cr.item_id
         join bin b on b.id = cr.bin_id
         join zone z on z.id = b.zone_id
         join count_pass p on p.id = cr.pass_id
         join user_account u on u.id = p.user_id
         where cr.site_id = ?1
           and cr.counted_at >= ?2 and cr.counted_at < ?3
           and (?4 is null or i.sku = ?4)
           -- A recount checks a first count; it is not a second sample of the record.
           and not exists (select 1 from count_task t
                           where t.id = p.task_id and t.recount_of is not null)
           -- A key is judged by the row a decision was taken on (the adjustment it posted
           -- re-nets the key to no variance, which says nothing of the record as counted),
           -- else by its current row.
           and cr.id = coalesce(
                 (select max(d.id) from count_result d
                  where d.pass_id = cr.pass_id and d.item_id = cr.item_id and d.lot = cr.lot
                    and (exists (select 1 from count_review v where v.result_id = d.id)
                         or exists (select 1 from count_auto_adjustment a
                                    where a.result_id = d.id))),
                 (select d.id from count_result d
                  where d.pass_id = cr.pass_id and d.item_id = cr.item_id and d.lot = cr.lot
                    and d.superseded_by is null))
         order by cr.counted_at, cr.id",
    )?;
    let sku = q.sku.as_ref().map(|s| s.as_str().to_string());
    let rows = stmt.query_map(params![site.0, q.from.0, q.to.0, sku], |r| {
        Ok(StoredResult {
            sku: r.get(0)?,
            class: class_of(r.get(1)?),
            zone: r.get(2)?,
            bin: r.get(3)?,
            lot: r.get(4)?,
            counter: r.get(5)?,
            counted_at: Timestamp(r.get(6)?),
            counted: r.get(7)?,
            f_star: r.get(8)?,
            variance: r.get(9)?,
            verdict: r.get(10)?,
            unit_cost_minor: r.get(11)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Reads every task of the count lists of days `from..=to`.
pub fn planned_tasks(
    conn: &Connection,
    site: SiteId,
    from: NaiveDate,
    to: NaiveDate,
) -> Result<Vec<PlannedTask>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select l.day, t.class, z.code, t.status = 'done'
         from count_task t
         join count_list l on l.id = t.list_id
         join bin b on b.id = t.bin_id
         join zone z on z.id = b.zone_id
         where l.site_id = ?1 and l.day >= ?2 and l.day <= ?3 and t.withdrawn_at is null
         order by l.day, t.id",
    )?;
    let rows = stmt.query_map(params![site.0, from.to_string(), to.to_string()], |r| {
        let day: String = r.get(0)?;
        Ok(PlannedTask {
            day: parse_day(&day)?,
            class: class_of(r.get(1)?),
            zone: r.get(2)?,
            done: r.get(3)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Lists the items whose newest class is A, with their last current count result before `before`.
pub fn a_items(conn: &Connection, site: SiteId, before: i64) -> Result<Vec<AItem>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select i.sku,
                (select max(cr.counted_at) from count_result cr
                 where cr.item_id = i.id and cr.superseded_by is null and cr.counted_at < ?2)
         from item i
         join item_class ic on ic.item_id = i.id
         where i.site_id = ?1 and ic.class = 'A'
           and ic.run_id = (select max(x.run_id) from item_class x where x.item_id = i.id)
         order by i.sku",
    )?;
    let rows = stmt.query_map(params![site.0, before], |r| {
        Ok(AItem {
            sku: r.get(0)?,
            last_counted_before: r.get::<_, Option<i64>>(1)?.map(Timestamp),
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Lists a site's items (or one) with their newest class and the keys holding them.
pub fn items(
    conn: &Connection,
    site: SiteId,
    sku: Option<&Sku>,
) -> Result<Vec<ItemRow>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select i.sku, i.description, i.item_group,
                (select ic.class from item_class ic where ic.item_id = i.id
                 order by ic.run_id desc limit 1),
                i.unit_cost_minor,
                (select count(*) from balance b where b.item_id = i.id and b.qty <> 0)
         from item i
         where i.site_id = ?1 and (?2 is null or i.sku = ?2)
         order by i.sku",
    )?;
    let rows = stmt.query_map(params![site.0, sku.map(|s| s.as_str())], |r| {
        Ok(ItemRow {
            sku: r.get(0)?,
            description: r.get(1)?,
            group: r.get(2)?,
            class: class_of(r.get(3)?),
            unit_cost_minor: r.get(4)?,
            keys: r.get(5)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Sums each item's picks (negative quantities, as positive units) per day, the days given
/// by their first instants in ascending order (the last runs until `to`). Walks the picks
/// in item and time order and adds each to the day whose range holds it.
pub fn daily_issues(
    conn: &Connection,
    site: SiteId,
    days: &[(NaiveDate, Timestamp)],
    to: i64,
    sku: Option<&Sku>,
) -> Result<Vec<DailyIssue>, StoreError> {
    let Some(&(_, from)) = days.first() else {
        return Ok(Vec::new());
    };
    let mut stmt = conn.prepare_cached(
        "select i.sku, m.event_at, -m.qty
         from movement m join item i on i.id = m.item_id
         where m.site_id = ?1 and m.kind = 'pick' and m.qty < 0
           and m.event_at >= ?2 and m.event_at < ?3
           and (?4 is null or i.sku = ?4)
         order by i.sku, m.event_at",
    )?;
    let mut rows = stmt.query(params![site.0, from.0, to, sku.map(|s| s.as_str())])?;
    let mut out: Vec<DailyIssue> = Vec::new();
    while let Some(r) = rows.next()? {
        let (sku, at, qty): (String, i64, i64) = (r.get(0)?, r.get(1)?, r.get(2)?);
        let i = days.partition_point(|(_, start)| start.0 <= at);
        let Some(&(day, _)) = i.checked_sub(1).and_then(|i| days.get(i)) else {
            continue;
        };
        match out.last_mut() {
            Some(last) if last.sku == sku && last.day == day => last.issued += qty,
            _ => out.push(DailyIssue {
                sku,
                day,
                issued: qty,
            }),
        }
    }
    Ok(out)
}

/// Reads a site's planner inputs: items' own rows (by SKU), then group defaults (by group).
pub fn planner_inputs(conn: &Connection, site: SiteId) -> Result<Vec<PlannerInput>, StoreError> {
    planner_input_rows(conn, site, &InputQuery::every())
}

/// Reads a page of a site's planner inputs by `(group, sku)`: see
/// [`crate::accuracy::store::AccuracyStore::planner_input_rows`].
pub fn planner_input_rows(
    conn: &Connection,
    site: SiteId,
    q: &InputQuery,
) -> Result<Vec<PlannerInput>, StoreError> {
    let (after_group, after_sku) = q.after.clone().unzip();
    let mut stmt = conn.prepare_cached(
        "select * from (
             select i.sku as sku, '' as grp, p.lead_time_days, p.lead_time_sd_days,
                    p.review_days, p.service_level, p.updated_at, p.updated_by
             from planner_input p join item i on i.id = p.item_id
             where p.site_id = ?1
             union all
             select '', g.item_group, g.lead_time_days, g.lead_time_sd_days, g.review_days,
                    g.service_level, g.updated_at, g.updated_by
             from planner_group_default g
             where g.site_id = ?1
         ) x
         where (?2 is null or (x.grp = '' and x.sku = ?2))
           and (?3 is null or x.grp = ?3)
           and (?4 is null or x.grp > ?4 or (x.grp = ?4 and x.sku > ?5))
         order by x.grp, x.sku
         limit ?6",
    )?;
    let rows = stmt.query_map(
        params![
            site.0,
            q.sku.as_ref().map(Sku::as_str),
            q.group,
            after_group,
            after_sku,
            q.take as i64
        ],
        |r| {
            Ok(PlannerInput {
                sku: r.get(0)?,
                group: r.get(1)?,
                times: LeadTimes {
                    lead_time_days: r.get(2)?,
                    lead_time_sd_days: r.get(3)?,
                    review_days: r.get(4)?,
                    service_level: r.get(5)?,
                },
                updated_at: Timestamp(r.get(6)?),
                updated_by: r.get(7)?,
            })
        },
    )?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Stores planner inputs; refuses the whole batch if a row names an unknown item.
pub fn put_planner_inputs(
    tx: &Transaction,
    site: SiteId,
    rows: &[NewPlannerInput],
    by: &str,
    at: Timestamp,
) -> Result<usize, StoreError> {
    let mut find = tx.prepare_cached("select id from item where site_id = ?1 and sku = ?2")?;
    let mut errors = Vec::new();
    let mut ids = Vec::with_capacity(rows.len());
    for (i, row) in rows.iter().enumerate() {
        match &row.target {
            InputTarget::Item(sku) => {
                let id: Option<i64> = find
                    .query_row(params![site.0, sku.as_str()], |r| r.get(0))
                    .optional()?;
                match id {
                    Some(id) => ids.push(Some(id)),
                    None => errors.push(RowError::new(
                        i,
                        "sku",
                        format!("no item '{sku}' at this site"),
                    )),
                }
            }
            InputTarget::Group(_) => ids.push(None),
        }
    }
    if !errors.is_empty() {
        return Err(StoreError::Rejected(errors));
    }
    let mut item = tx.prepare_cached(
        "insert into planner_input (item_id, site_id, lead_time_days, lead_time_sd_days,
                                    review_days, service_level, updated_at, updated_by)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)
         on conflict (item_id) do update set
             lead_time_days = excluded.lead_time_days,
             lead_time_sd_days = excluded.lead_time_sd_days,
             review_days = excluded.review_days,
             service_level = excluded.service_level,
             updated_at = excluded.updated_at,
             updated_by = excluded.updated_by",
    )?;
    let mut group = tx.prepare_cached(
        "insert into planner_group_default (site_id, item_group, lead_time_days,
                                            lead_time_sd_days, review_days, service_level,
                                            updated_at, updated_by)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)
         on conflict (site_id, item_group) do update set
             lead_time_days = excluded.lead_time_days,
             lead_time_sd_days = excluded.lead_time_sd_days,
             review_days = excluded.review_days,
             service_level = excluded.service_level,
             updated_at = excluded.updated_at,
             updated_by = excluded.updated_by",
    )?;
    for (row, id) in rows.iter().zip(ids) {
        let t = &row.times;
        match (&row.target, id) {
            (InputTarget::Item(_), Some(id)) => item.execute(params![
                id,
                site.0,
                t.lead_time_days,
                t.lead_time_sd_days,
                t.review_days,
                t.service_level,
                at.0,
                by
            ])?,
            (InputTarget::Group(g), _) => group.execute(params![
                site.0,
                g,
                t.lead_time_days,
                t.lead_time_sd_days,
                t.review_days,
                t.service_level,
                at.0,
                by
            ])?,
            (InputTarget::Item(_), None) => unreachable!("every item row was given its id above"),
        };
    }
    Ok(rows.len())
}

#[async_trait]
impl AccuracyStore for SqliteStore {
    async fn accuracy_settings(&self, site: SiteId) -> Result<AccuracySettings, StoreError> {
        self.readers.run(move |c| settings(c, site)).await
    }

    async fn put_accuracy_settings(
        &self,
        site: SiteId,
        s: AccuracySettings,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| put_settings(tx, site, &s)).await
    }

    async fn accuracy_results(
        &self,
        site: SiteId,
        query: ResultQuery,
    ) -> Result<Vec<StoredResult>, StoreError> {
        self.readers
            .run(move |c| count_results(c, site, &query))
            .await
    }

    async fn planned_tasks(
        &self,
        site: SiteId,
        from: NaiveDate,
        to: NaiveDate,
    ) -> Result<Vec<PlannedTask>, StoreError> {
        self.readers
            .run(move |c| planned_tasks(c, site, from, to))
            .await
    }

    async fn a_items(&self, site: SiteId, before: Timestamp) -> Result<Vec<AItem>, StoreError> {
        self.readers.run(move |c| a_items(c, site, before.0)).await
    }

    async fn accuracy_items(
        &self,
        site: SiteId,
        sku: Option<Sku>,
    ) -> Result<Vec<ItemRow>, StoreError> {
        self.readers
            .run(move |c| items(c, site, sku.as_ref()))
            .await
    }

    async fn daily_issues(
        &self,
        site: SiteId,
        days: Vec<(NaiveDate, Timestamp)>,
        to: Timestamp,
        sku: Option<Sku>,
    ) -> Result<Vec<DailyIssue>, StoreError> {
        self.readers
            .run(move |c| daily_issues(c, site, &days, to.0, sku.as_ref()))
            .await
    }

    async fn planner_inputs(&self, site: SiteId) -> Result<Vec<PlannerInput>, StoreError> {
        self.readers.run(move |c| planner_inputs(c, site)).await
    }

    async fn planner_input_rows(
        &self,
        site: SiteId,
        query: InputQuery,
    ) -> Result<Vec<PlannerInput>, StoreError> {
        self.readers
            .run(move |c| planner_input_rows(c, site, &query))
            .await
    }

    async fn put_planner_inputs(
        &self,
        site: SiteId,
        rows: Vec<NewPlannerInput>,
        by: String,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        self.write_tx(move |tx| {
            let written = put_planner_inputs(tx, site, &rows, &by, Timestamp::now())?;
            super::audit_in(tx, audit, serde_json::json!({"written": written}))?;
            Ok(written)
        })
        .await
    }
}
