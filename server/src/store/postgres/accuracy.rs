//! Accuracy reports and the planner's buffer over PostgreSQL: settings, the count results
//! of a period that judge the record, planned tasks, A items and their last counts, items
//! with class and keys held, daily issues, and planner inputs.

use super::accounts::insert_audit;
use super::{PgStore, col, row_opt, rows};
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
use crate::store::{StoreError, WriteScope};
use crate::time::Timestamp;
use async_trait::async_trait;
use chrono::NaiveDate;

fn parse_day(text: &str) -> Result<NaiveDate, StoreError> {
    NaiveDate::parse_from_str(text, "%Y-%m-%d")
        .map_err(|e| anyhow::anyhow!("a stored day '{text}' cannot be read: {e}").into())
}

fn class_of(text: Option<String>) -> Option<Class> {
    text.as_deref().and_then(Class::parse)
}

#[async_trait]
impl AccuracyStore for PgStore {
    async fn accuracy_settings(&self, site: SiteId) -> Result<AccuracySettings, StoreError> {
        let c = self.client().await?;
        let Some(r) = row_opt(
            &c,
            "select ira_target_bp, demand_window_days, service_level_a, service_level_b,
                    service_level_c
             from accuracy_settings where site_id = $1",
            &[&site.0],
        )
        .await?
        else {
            return Ok(AccuracySettings::default());
        };
        Ok(AccuracySettings {
            ira_target: r.get::<_, i64>(0) as f64 / 10_000.0,
            demand_window_days: col(&r, 1)?,
            service_level: [r.get(2), r.get(3), r.get(4)],
        })
    }

    async fn put_accuracy_settings(
        &self,
        site: SiteId,
        s: AccuracySettings,
    ) -> Result<(), StoreError> {
        self.write_tx(WriteScope::Site(site), move |tx| {
            tx.execute(
                "insert into accuracy_settings (site_id, ira_target_bp, demand_window_days,
                                                service_level_a, service_level_b, service_level_c)
                 values ($1, $2, $3, $4, $5, $6)
                 on conflict (site_id) do update set
                     ira_target_bp = excluded.ira_target_bp,
                     demand_window_days = excluded.demand_window_days,
                     service_level_a = excluded.service_level_a,
                     service_level_b = excluded.service_level_b,
                     service_level_c = excluded.service_level_c",
                &[
                    &site.0,
                    &s.target_bp(),
                    &i64::from(s.demand_window_days),
                    &s.service_level[0],
                    &s.service_level[1],
                    &s.service_level[2],
                ],
            )?;
            Ok(())
        })
        .await
    }

    /// Reads the count results counted in `[from, to)` that judge the record: per key of a
    /// first count, the row a decision was taken on, else the current one (recounts left out).
    async fn accuracy_results(
        &self,
        site: SiteId,
        q: ResultQuery,
    ) -> Result<Vec<StoredResult>, StoreError> {
        let c = self.client().await?;
        let sku = q.sku.as_ref().map(|s| s.as_str().to_string());
        Ok(rows(
            &c,
            "select i.sku, cr.class, z.code, b.code, cr.lot, u.name, cr.counted_at, cr.counted,
                    cr.f_star, cr.variance, cr.verdict, cr.unit_cost_minor
             from count_result cr
             join item i on i.id = cr.item_id
             join bin b on b.id = cr.bin_id
             join zone z on z.id = b.zone_id
             join count_pass p on p.id = cr.pass_id
             join user_account u on u.id = p.user_id
             where cr.site_id = $1
               and cr.counted_at >= $2 and cr.counted_at < $3
               and ($4::text is null or i.sku = $4)
               -- A recount checks a first count; it is not a second sample of the record.
               and not exists (select 1 from count_task t
                               where t.id = p.task_id and t.recount_of is not null)
               -- A key is judged by the row a decision was taken on, else by its current row.
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
            &[&site.0, &q.from.0, &q.to.0, &sku],
        )
        .await?
        .into_iter()
        .map(|r| StoredResult {
            sku: r.get(0),
            class: class_of(r.get(1)),
            zone: r.get(2),
            bin: r.get(3),
            lot: r.get(4),
            counter: r.get(5),
            counted_at: Timestamp(r.get(6)),
            counted: r.get(7),
            f_star: r.get(8),
            variance: r.get(9),
            verdict: r.get(10),
            unit_cost_minor: r.get(11),
        })
        .collect())
    }

    async fn planned_tasks(
        &self,
        site: SiteId,
        from: NaiveDate,
        to: NaiveDate,
    ) -> Result<Vec<PlannedTask>, StoreError> {
        let c = self.client().await?;
        rows(
            &c,
            "select l.day, t.class, z.code, t.status = 'done'
             from count_task t
             join count_list l on l.id = t.list_id
             join bin b on b.id = t.bin_id
             join zone z on z.id = b.zone_id
             where l.site_id = $1 and l.day >= $2 and l.day <= $3 and t.withdrawn_at is null
             order by l.day, t.id",
            &[&site.0, &from.to_string(), &to.to_string()],
        )
        .await?
        .into_iter()
        .map(|r| {
            Ok(PlannedTask {
                day: parse_day(r.get(0))?,
                class: class_of(r.get(1)),
                zone: r.get(2),
                done: r.get(3),
            })
        })
        .collect()
    }

    async fn a_items(&self, site: SiteId, before: Timestamp) -> Result<Vec<AItem>, StoreError> {
        let c = self.client().await?;
        Ok(rows(
            &c,
            "select i.sku,
                    (select max(cr.counted_at) from count_result cr
                     where cr.item_id = i.id and cr.superseded_by is null and cr.counted_at < $2)
             from item i
             join item_class ic on ic.item_id = i.id
             where i.site_id = $1 and ic.class = 'A'
               and ic.run_id = (select max(x.run_id) from item_class x where x.item_id = i.id)
             order by i.sku collate \"C\"",
            &[&site.0, &before.0],
        )
        .await?
        .into_iter()
        .map(|r| AItem {
            sku: r.get(0),
            last_counted_before: r.get::<_, Option<i64>>(1).map(Timestamp),
        })
        .collect())
    }

    async fn accuracy_items(
        &self,
        site: SiteId,
        sku: Option<Sku>,
    ) -> Result<Vec<ItemRow>, StoreError> {
        let c = self.client().await?;
        rows(
            &c,
            "select i.sku, i.description, i.item_group,
                    (select ic.class from item_class ic where ic.item_id = i.id
                     order by ic.run_id desc limit 1),
                    i.unit_cost_minor,
                    (select count(*) from balance b where b.item_id = i.id and b.qty <> 0)
             from item i
             where i.site_id = $1 and ($2::text is null or i.sku = $2)
             order by i.sku collate \"C\"",
            &[&site.0, &sku.as_ref().map(|s| s.as_str())],
        )
        .await?
        .into_iter()
        .map(|r| {
            Ok(ItemRow {
                sku: r.get(0),
                description: r.get(1),
                group: r.get(2),
                class: class_of(r.get(3)),
                unit_cost_minor: r.get(4),
                keys: col(&r, 5)?,
            })
        })
        .collect()
    }

    /// Sums each item's picks (as positive units) per day, the days given by their first
    /// instants in ascending order (the last runs until `to`).
    async fn daily_issues(
        &self,
        site: SiteId,
        days: Vec<(NaiveDate, Timestamp)>,
        to: Timestamp,
        sku: Option<Sku>,
    ) -> Result<Vec<DailyIssue>, StoreError> {
        let Some(&(_, from)) = days.first() else {
            return Ok(Vec::new());
        };
        let c = self.client().await?;
        let picks = rows(
            &c,
            "select i.sku, m.event_at, -m.qty
             from movement m join item i on i.id = m.item_id
             where m.site_id = $1 and m.kind = 'pick' and m.qty < 0
               and m.event_at >= $2 and m.event_at < $3
               and ($4::text is null or i.sku = $4)
             order by i.sku collate \"C\", m.event_at",
            &[&site.0, &from.0, &to.0, &sku.as_ref().map(|s| s.as_str())],
        )
        .await?;
        let mut out: Vec<DailyIssue> = Vec::new();
        for r in picks {
            let (sku, at, qty): (String, i64, i64) = (r.get(0), r.get(1), r.get(2));
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
    async fn planner_inputs(&self, site: SiteId) -> Result<Vec<PlannerInput>, StoreError> {
        self.planner_input_rows(site, InputQuery::every()).await
    }

    async fn planner_input_rows(
        &self,
        site: SiteId,
        q: InputQuery,
    ) -> Result<Vec<PlannerInput>, StoreError> {
        let (after_group, after_sku) = q.after.unzip();
        let c = self.client().await?;
        Ok(rows(
            &c,
            "select * from (
                 select i.sku, ''::text as item_group, p.lead_time_days, p.lead_time_sd_days,
                        p.review_days, p.service_level, p.updated_at, p.updated_by
                 from planner_input p join item i on i.id = p.item_id
                 where p.site_id = $1
                 union all
                 select ''::text, g.item_group, g.lead_time_days, g.lead_time_sd_days,
                        g.review_days, g.service_level, g.updated_at, g.updated_by
                 from planner_group_default g
                 where g.site_id = $1
             ) x
             where ($2::text is null or (x.item_group = '' and x.sku = $2))
               and ($3::text is null or x.item_group = $3)
               and ($4::text is null or x.item_group collate \"C\" > $4
                    or (x.item_group = $4 and x.sku collate \"C\" > $5::text))
             order by x.item_group collate \"C\", x.sku collate \"C\"
             limit $6",
            &[
                &site.0,
                &q.sku.as_ref().map(Sku::as_str),
                &q.group,
                &after_group,
                &after_sku,
                &(q.take as i64),
            ],
        )
        .await?
        .into_iter()
        .map(|r| PlannerInput {
            sku: r.get(0),
            group: r.get(1),
            times: LeadTimes {
                lead_time_days: r.get(2),
                lead_time_sd_days: r.get(3),
                review_days: r.get(4),
                service_level: r.get(5),
            },
            updated_at: Timestamp(r.get(6)),
            updated_by: r.get(7),
        })
        .collect())
    }

    /// Stores planner inputs; refuses the whole batch if a row names an unknown item.
    async fn put_planner_inputs(
        &self,
        site: SiteId,
        rows: Vec<NewPlannerInput>,
        by: String,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        let at = Timestamp::now();
        self.write_tx(WriteScope::Site(site), move |tx| {
            let mut errors = Vec::new();
            let mut ids = Vec::with_capacity(rows.len());
            for (i, row) in rows.iter().enumerate() {
                match &row.target {
                    InputTarget::Item(sku) => match tx.query_opt(
                        "select id from item where site_id = $1 and sku = $2",
                        &[&site.0, &sku.as_str()],
                    )? {
                        Some(r) => ids.push(Some(r.get::<_, i64>(0))),
                        None => errors.push(RowError::new(
                            i,
                            "sku",
                            format!("no item '{sku}' at this site"),
                        )),
                    },
                    InputTarget::Group(_) => ids.push(None),
                }
            }
            if !errors.is_empty() {
                return Err(StoreError::Rejected(errors));
            }
            for (row, id) in rows.iter().zip(ids) {
                let t = &row.times;
                match (&row.target, id) {
                    (InputTarget::Item(_), Some(id)) => tx.execute(
                        "insert into planner_input (item_id, site_id, lead_time_days,
                             lead_time_sd_days, review_days, service_level, updated_at, updated_by)
                         values ($1, $2, $3, $4, $5, $6, $7, $8)
                         on conflict (item_id) do update set
                             lead_time_days = excluded.lead_time_days,
                             lead_time_sd_days = excluded.lead_time_sd_days,
                             review_days = excluded.review_days,
                             service_level = excluded.service_level,
                             updated_at = excluded.updated_at,
                             updated_by = excluded.updated_by",
                        &[
                            &id,
                            &site.0,
                            &t.lead_time_days,
                            &t.lead_time_sd_days,
                            &t.review_days,
                            &t.service_level,
                            &at.0,
                            &by,
                        ],
                    )?,
                    (InputTarget::Group(g), _) => tx.execute(
                        "insert into planner_group_default (site_id, item_group, lead_time_days,
                             lead_time_sd_days, review_days, service_level, updated_at, updated_by)
                         values ($1, $2, $3, $4, $5, $6, $7, $8)
                         on conflict (site_id, item_group) do update set
                             lead_time_days = excluded.lead_time_days,
                             lead_time_sd_days = excluded.lead_time_sd_days,
                             review_days = excluded.review_days,
                             service_level = excluded.service_level,
                             updated_at = excluded.updated_at,
                             updated_by = excluded.updated_by",
                        &[
                            &site.0,
                            g,
                            &t.lead_time_days,
                            &t.lead_time_sd_days,
                            &t.review_days,
                            &t.service_level,
                            &at.0,
                            &by,
                        ],
                    )?,
                    (InputTarget::Item(_), None) => {
                        unreachable!("every item row was given its id above")
                    }
                };
            }
            let written = rows.len();
            if let Some(event) = audit {
                insert_audit(
                    tx,
                    &event.with_counts(serde_json::json!({"written": written})),
                )?;
            }
            Ok(written)
        })
        .await
    }
}
