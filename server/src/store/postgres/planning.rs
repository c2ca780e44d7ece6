//! Planning over PostgreSQL: settings and calendar, ABC runs and class history, short
//! picks and the facts a day's plan is built from (stored lists are in `count_lists`).
//! Every write holds its site's lock.

use super::recount_tasks;
use super::tx::PgTx;
use super::{PgStore, col, is_unique_violation, row_one, row_opt, rows};
use crate::accounts::audit::{AuditEvent, AuditTx};
use crate::batch::RowError;
use crate::ledger::WatermarkTx;
use crate::master::SiteId;
use crate::master::codes::Sku;
use crate::planning::abc::{self, AbcRule, Basis, Class, Usage};
use crate::planning::calendar::Calendar;
use crate::planning::due::Frequency;
use crate::planning::estimate::TaskTime;
use crate::planning::plan::{BinFacts, Capacity, Fill, ItemFacts, PlanInput, Trigger};
use crate::planning::policy::{FrequencyPolicy, ItemWorth, Mode};
use crate::planning::short_pick::{NewShortPick, ShortPickOutcome};
use crate::planning::walk::Place;
use crate::planning::{AbcSummary, ClassChange, Settings, TriggerKind};
use crate::store::{StoreError, WriteScope};
use crate::time::{DAY_MS, Timestamp};
use chrono::NaiveDate;
use deadpool_postgres::Client;
use std::collections::HashMap;
use tokio_postgres::Row;

fn day_text(d: NaiveDate) -> String {
    d.format("%Y-%m-%d").to_string()
}

fn parse_day(text: &str) -> Result<NaiveDate, StoreError> {
    NaiveDate::parse_from_str(text, "%Y-%m-%d")
        .map_err(|e| anyhow::anyhow!("a stored day '{text}' cannot be read: {e}").into())
}

fn settings_of(r: &Row) -> Result<Settings, StoreError> {
    let basis: String = r.get(0);
    Ok(Settings {
        abc: AbcRule {
            basis: Basis::parse(&basis).unwrap_or(Basis::Value),
            a_pct: col(r, 1)?,
            b_pct: col(r, 2)?,
            window_days: col(r, 3)?,
        },
        frequency: Frequency {
            per_year: [col(r, 4)?, col(r, 5)?, col(r, 6)?],
            dead_per_year: col(r, 7)?,
        },
        task_time: TaskTime {
            base_s: col(r, 8)?,
            per_line_s: col(r, 9)?,
        },
        zero_demand_days: col(r, 10)?,
        level_slack_pct: col(r, 11)?,
    })
}

/// Reads a site's planning settings, or the defaults when none were stored.
async fn settings(c: &Client, site: SiteId) -> Result<Settings, StoreError> {
    match row_opt(
        c,
        "select abc_basis, abc_a_pct, abc_b_pct, abc_window_days, per_year_a, per_year_b,
                per_year_c, per_year_dead, task_base_s, task_line_s, zero_demand_days,
                level_slack_pct
         from planning_settings where site_id = $1",
        &[&site.0],
    )
    .await?
    {
        Some(r) => settings_of(&r),
        None => Ok(Settings::default()),
    }
}

/// Reads a site's calendar, or Monday to Friday without holidays when none was stored.
async fn read_calendar(c: &Client, site: SiteId) -> Result<Calendar, StoreError> {
    let mut cal = Calendar::default();
    if let Some(r) = row_opt(
        c,
        "select weekday_mask from site_calendar where site_id = $1",
        &[&site.0],
    )
    .await?
    {
        let mask: i64 = r.get(0);
        for (i, w) in cal.working_weekdays.iter_mut().enumerate() {
            *w = mask & (1 << i) != 0;
        }
    }
    for r in rows(
        c,
        "select day from site_holiday where site_id = $1",
        &[&site.0],
    )
    .await?
    {
        cal.holidays.insert(parse_day(r.get(0))?);
    }
    Ok(cal)
}

/// Returns every item's current class.
async fn current_classes(c: &Client, site: SiteId) -> Result<HashMap<i64, Class>, StoreError> {
    Ok(rows(c, CURRENT_CLASSES, &[&site.0])
        .await?
        .iter()
        .map(class_row)
        .collect())
}

const CURRENT_CLASSES: &str =
    "select ic.item_id, ic.class from item_class ic join item on item.id = ic.item_id
     where item.site_id = $1
       and ic.run_id = (select max(x.run_id) from item_class x where x.item_id = ic.item_id)";

fn class_row(r: &Row) -> (i64, Class) {
    let class: String = r.get(1);
    (r.get(0), Class::parse(&class).unwrap_or(Class::C))
}

/// See [`crate::store::Store::planning_settings`].
pub async fn planning_settings(store: &PgStore, site: SiteId) -> Result<Settings, StoreError> {
    settings(&*store.client().await?, site).await
}

/// See [`crate::store::Store::put_planning_settings`].
pub async fn put_planning_settings(
    store: &PgStore,
    site: SiteId,
    s: Settings,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.execute(
                "insert into planning_settings (site_id, abc_basis, abc_a_pct, abc_b_pct,
                     abc_window_days, per_year_a, per_year_b, per_year_c, per_year_dead,
                     task_base_s, task_line_s, zero_demand_days, level_slack_pct)
                 values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)
                 on conflict (site_id) do update set abc_basis = excluded.abc_basis,
                     abc_a_pct = excluded.abc_a_pct, abc_b_pct = excluded.abc_b_pct,
                     abc_window_days = excluded.abc_window_days,
                     per_year_a = excluded.per_year_a, per_year_b = excluded.per_year_b,
                     per_year_c = excluded.per_year_c, per_year_dead = excluded.per_year_dead,
                     task_base_s = excluded.task_base_s, task_line_s = excluded.task_line_s,
                     zero_demand_days = excluded.zero_demand_days,
                     level_slack_pct = excluded.level_slack_pct",
                &[
                    &site.0,
                    &s.abc.basis.as_str(),
                    &i64::from(s.abc.a_pct),
                    &i64::from(s.abc.b_pct),
                    &i64::from(s.abc.window_days),
                    &i64::from(s.frequency.per_year[0]),
                    &i64::from(s.frequency.per_year[1]),
                    &i64::from(s.frequency.per_year[2]),
                    &i64::from(s.frequency.dead_per_year),
                    &i64::from(s.task_time.base_s),
                    &i64::from(s.task_time.per_line_s),
                    &i64::from(s.zero_demand_days),
                    &i64::from(s.level_slack_pct),
                ],
            )?;
            Ok(())
        })
        .await
}

/// See [`crate::store::Store::frequency_policy`]: `abc` when none was stored.
pub async fn frequency_policy(
    store: &PgStore,
    site: SiteId,
) -> Result<FrequencyPolicy, StoreError> {
    let c = store.client().await?;
    let Some(r) = row_opt(
        &c,
        "select mode, floor_a, floor_b, floor_c from frequency_policy where site_id = $1",
        &[&site.0],
    )
    .await?
    else {
        return Ok(FrequencyPolicy::default());
    };
    let mode: String = r.get(0);
    Ok(FrequencyPolicy {
        policy: Mode::parse(&mode)
            .ok_or_else(|| anyhow::anyhow!("a stored frequency policy '{mode}' is unknown"))?,
        floor_a: col(&r, 1)?,
        floor_b: col(&r, 2)?,
        floor_c: col(&r, 3)?,
    })
}

/// See [`crate::store::Store::put_frequency_policy`].
pub async fn put_frequency_policy(
    store: &PgStore,
    site: SiteId,
    p: FrequencyPolicy,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.insert_audit(&audit)?;
            tx.execute(
                "insert into frequency_policy (site_id, mode, floor_a, floor_b, floor_c, changed_at)
                 values ($1, $2, $3, $4, $5, $6)
                 on conflict (site_id) do update set mode = excluded.mode,
                     floor_a = excluded.floor_a, floor_b = excluded.floor_b,
                     floor_c = excluded.floor_c, changed_at = excluded.changed_at",
                &[
                    &site.0,
                    &p.policy.as_str(),
                    &i64::from(p.floor_a),
                    &i64::from(p.floor_b),
                    &i64::from(p.floor_c),
                    &audit.at.0,
                ],
            )?;
            Ok(())
        })
        .await
}

/// See [`crate::store::Store::item_worth`].
pub async fn item_worth(
    store: &PgStore,
    site: SiteId,
    from: Timestamp,
    to: Timestamp,
) -> Result<Vec<ItemWorth>, StoreError> {
    let c = store.client().await?;
    rows(
        &c,
        "select i.id, i.sku, i.unit_cost_minor,
                (select count(*) from movement m
                 where m.item_id = i.id and m.event_at >= $2 and m.event_at < $3 and m.kind = 'pick')
         from item i where i.site_id = $1 order by i.id",
        &[&site.0, &from.0, &to.0],
    )
    .await?
    .iter()
    .map(|r| {
        Ok(ItemWorth {
            item: r.get(0),
            sku: r.get(1),
            unit_cost_minor: r.get(2),
            picks: r.get(3),
        })
    })
    .collect()
}

/// See [`crate::store::Store::calendar`].
pub async fn calendar(store: &PgStore, site: SiteId) -> Result<Calendar, StoreError> {
    read_calendar(&*store.client().await?, site).await
}

/// See [`crate::store::Store::put_calendar`].
pub async fn put_calendar(store: &PgStore, site: SiteId, cal: Calendar) -> Result<(), StoreError> {
    let mask: i64 = (0..7)
        .filter(|&i| cal.working_weekdays[i])
        .map(|i| 1 << i)
        .sum();
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            tx.execute(
                "insert into site_calendar (site_id, weekday_mask) values ($1, $2)
                 on conflict (site_id) do update set weekday_mask = excluded.weekday_mask",
                &[&site.0, &mask],
            )?;
            tx.execute("delete from site_holiday where site_id = $1", &[&site.0])?;
            for d in &cal.holidays {
                tx.execute(
                    "insert into site_holiday (site_id, day) values ($1, $2)",
                    &[&site.0, &day_text(*d)],
                )?;
            }
            Ok(())
        })
        .await
}

/// See [`crate::store::Store::abc_usage`]: every item's issues (picks, net of their
/// reversals) with event time in `[from, to)`, the event time of its first movement and
/// whether it has a class already.
pub async fn abc_usage(
    store: &PgStore,
    site: SiteId,
    from: Timestamp,
    to: Timestamp,
) -> Result<Vec<Usage>, StoreError> {
    let c = store.client().await?;
    Ok(rows(
        &c,
        "select i.id, i.unit_cost_minor, coalesce(u.issued, 0)::bigint, coalesce(u.hits, 0)::bigint,
                (select min(m.event_at) from movement m where m.item_id = i.id),
                exists (select 1 from item_class c where c.item_id = i.id)
         from item i left join (
             select item_id, sum(-qty) as issued,
                    sum(case when qty < 0 then 1 else -1 end) as hits
             from movement
             where site_id = $1 and kind = 'pick' and event_at >= $2 and event_at < $3
             group by item_id
         ) u on u.item_id = i.id
         where i.site_id = $1",
        &[&site.0, &from.0, &to.0],
    )
    .await?
    .iter()
    .map(|r| {
        let (item, cost, issued, hits): (i64, i64, i64, i64) =
            (r.get(0), r.get(1), r.get(2), r.get(3));
        let value = i128::from(issued.max(0)) * i128::from(cost);
        Usage {
            item,
            value_minor: i64::try_from(value).unwrap_or(i64::MAX),
            hits,
            first_seen_ms: r.get(4),
            classified: r.get(5),
        }
    })
    .collect())
}

/// See [`crate::store::Store::record_classes`]: the run, and a history row for each item
/// whose class changed.
pub async fn record_classes(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    rule: AbcRule,
    classes: Vec<(i64, Class)>,
) -> Result<AbcSummary, StoreError> {
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            let current: HashMap<i64, Class> = tx
                .query(CURRENT_CLASSES, &[&site.0])?
                .iter()
                .map(class_row)
                .collect();
            let changed = abc::changes(&current, &classes);
            let wm = tx.watermark()?;
            let run: i64 = tx
                .query_one(
                    "insert into abc_run (site_id, day, basis, a_pct, b_pct, window_days, items,
                                          changed, watermark, ran_at)
                     values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)
                     returning id",
                    &[
                        &site.0,
                        &day_text(day),
                        &rule.basis.as_str(),
                        &i64::from(rule.a_pct),
                        &i64::from(rule.b_pct),
                        &i64::from(rule.window_days),
                        &(classes.len() as i64),
                        &(changed.len() as i64),
                        &wm,
                        &Timestamp::now().0,
                    ],
                )?
                .get(0);
            for (item, class) in &changed {
                tx.execute(
                    "insert into item_class (item_id, run_id, class, since) values ($1, $2, $3, $4)",
                    &[item, &run, &class.as_str(), &day_text(day)],
                )?;
            }
            let mut per_class = [0usize; 3];
            for (_, c) in &classes {
                per_class[c.index()] += 1;
            }
            Ok(AbcSummary {
                run,
                day,
                rule,
                items: classes.len(),
                changed: changed.len(),
                a: per_class[0],
                b: per_class[1],
                c: per_class[2],
                watermark: wm,
            })
        })
        .await
}

/// See [`crate::store::Store::latest_abc`].
pub async fn latest_abc(store: &PgStore, site: SiteId) -> Result<Option<AbcSummary>, StoreError> {
    let c = store.client().await?;
    let Some(r) = row_opt(
        &c,
        "select id, day, basis, a_pct, b_pct, window_days, items, changed, watermark
         from abc_run where site_id = $1 order by id desc limit 1",
        &[&site.0],
    )
    .await?
    else {
        return Ok(None);
    };
    let basis: String = r.get(2);
    let mut run = AbcSummary {
        run: r.get(0),
        day: parse_day(r.get(1))?,
        rule: AbcRule {
            basis: Basis::parse(&basis).unwrap_or(Basis::Value),
            a_pct: col(&r, 3)?,
            b_pct: col(&r, 4)?,
            window_days: col(&r, 5)?,
        },
        items: col(&r, 6)?,
        changed: col(&r, 7)?,
        a: 0,
        b: 0,
        c: 0,
        watermark: r.get(8),
    };
    for class in current_classes(&c, site).await?.values() {
        match class {
            Class::A => run.a += 1,
            Class::B => run.b += 1,
            Class::C => run.c += 1,
        }
    }
    Ok(Some(run))
}

/// See [`crate::store::Store::class_history`]: oldest first.
pub async fn class_history(
    store: &PgStore,
    site: SiteId,
    sku: Sku,
) -> Result<Vec<ClassChange>, StoreError> {
    let c = store.client().await?;
    let item: i64 = row_opt(
        &c,
        "select id from item where site_id = $1 and sku = $2",
        &[&site.0, &sku.as_str()],
    )
    .await?
    .ok_or_else(|| StoreError::NotFound(format!("unknown SKU '{sku}' in this site")))?
    .get(0);
    rows(
        &c,
        "select ic.class, ic.since, ic.run_id, r.basis
           from item_class ic join abc_run r on r.id = ic.run_id
          where ic.item_id = $1 order by ic.run_id",
        &[&item],
    )
    .await?
    .iter()
    .map(|r| {
        let class: String = r.get(0);
        Ok(ClassChange {
            class: Class::parse(&class).unwrap_or(Class::C),
            since: parse_day(r.get(1))?,
            run: r.get(2),
            basis: r.get(3),
        })
    })
    .collect()
}

/// See [`crate::store::Store::record_short_picks`]: idempotent by id, all or nothing.
pub async fn record_short_picks(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewShortPick>,
) -> Result<ShortPickOutcome, StoreError> {
    let now = Timestamp::now();
    store
        .write_tx(WriteScope::Site(site), move |tx| {
            insert_short_picks(tx, site, &rows, now)
        })
        .await
}

fn insert_short_picks(
    tx: &PgTx<'_>,
    site: SiteId,
    rows: &[NewShortPick],
    now: Timestamp,
) -> Result<ShortPickOutcome, StoreError> {
    let mut errors = Vec::new();
    let mut out = ShortPickOutcome::default();
    for (i, p) in rows.iter().enumerate() {
        let bin: Option<i64> = tx
            .query_opt(
                "select id from bin where site_id = $1 and code = $2",
                &[&site.0, &p.bin.as_str()],
            )?
            .map(|r| r.get(0));
        let item: Option<i64> = tx
            .query_opt(
                "select id from item where site_id = $1 and sku = $2",
                &[&site.0, &p.sku.as_str()],
            )?
            .map(|r| r.get(0));
        if bin.is_none() {
            errors.push(RowError::new(
                i,
                "bin",
                format!("unknown bin '{}' in this site", p.bin),
            ));
        }
        if item.is_none() {
            errors.push(RowError::new(
                i,
                "sku",
                format!("unknown SKU '{}' in this site", p.sku),
            ));
        }
        let (Some(bin), Some(item)) = (bin, item) else {
            continue;
        };
        let prev = tx
            .query_opt(
                "select site_id, bin_id, item_id, lot, short_qty, reported_at
                   from short_pick where uid = $1",
                &[&p.uid.as_str()],
            )?
            .map(|r| {
                let prev: (i64, i64, i64, String, i64, i64) =
                    (r.get(0), r.get(1), r.get(2), r.get(3), r.get(4), r.get(5));
                prev
            });
        match prev {
            Some(prev)
                if prev
                    == (
                        site.0,
                        bin,
                        item,
                        p.lot.clone(),
                        p.short_qty,
                        p.reported_at.0,
                    ) =>
            {
                out.already_recorded += 1;
            }
            Some(_) => errors.push(RowError::new(
                i,
                "id",
                format!("id '{}' is already recorded with different content", p.uid),
            )),
            None if errors.is_empty() => {
                tx.execute(
                    "insert into short_pick (uid, site_id, bin_id, item_id, lot, short_qty,
                                             reported_at, recorded_at, source, doc_ref)
                     values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)",
                    &[
                        &p.uid.as_str(),
                        &site.0,
                        &bin,
                        &item,
                        &p.lot,
                        &p.short_qty,
                        &p.reported_at.0,
                        &now.0,
                        &p.source,
                        &p.doc_ref,
                    ],
                )
                .map_err(|e| {
                    if is_unique_violation(&e) {
                        StoreError::Rejected(vec![RowError::new(
                            i,
                            "id",
                            format!("id '{}' appears twice in this batch", p.uid),
                        )])
                    } else {
                        e.into()
                    }
                })?;
                out.recorded += 1;
            }
            None => {}
        }
    }
    if errors.is_empty() {
        Ok(out)
    } else {
        Err(StoreError::Rejected(errors))
    }
}

/// See [`crate::store::Store::plan_input`]: the facts one day's plan is built from. Rows
/// come in the order the SQLite store reads them (bins by code, balances by key, short
/// picks as reported), so both stores plan the same day alike.
pub async fn plan_input(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    day_end: Timestamp,
    capacity: Capacity,
    fill: Fill,
) -> Result<PlanInput, StoreError> {
    let c = store.client().await?;
    let settings = settings(&c, site).await?;
    let calendar = read_calendar(&c, site).await?;
    let day_end = day_end.0;

    // Bins, with the instant each was last counted (to tell old triggers from new).
    let mut bins = Vec::new();
    let mut counted_at = Vec::new();
    let mut index: HashMap<i64, u32> = HashMap::new();
    for r in rows(
        &c,
        "select b.id, b.code, z.code, z.walk_seq, z.id, b.aisle, b.bay, b.level, b.side, b.walk_seq,
                bc.counted_on, bc.counted_at
         from bin b join zone z on z.id = b.zone_id left join bin_count bc on bc.bin_id = b.id
         where b.site_id = $1
         order by b.code collate \"C\"",
        &[&site.0],
    )
    .await?
    {
        let side: String = r.get(8);
        let last: Option<String> = r.get(10);
        index.insert(r.get(0), bins.len() as u32);
        bins.push(BinFacts {
            id: r.get(0),
            code: r.get(1),
            zone: r.get(2),
            place: Place {
                zone_seq: r.get(3),
                zone: r.get(4),
                aisle: col(&r, 5)?,
                bay: col(&r, 6)?,
                level: col(&r, 7)?,
                side: match side.as_str() {
                    "L" => 0,
                    "R" => 1,
                    _ => 2,
                },
                walk_seq: r.get(9),
            },
            lines: 0,
            last_count: last.as_deref().map(parse_day).transpose()?,
        });
        counted_at.push(r.get::<_, Option<i64>>(11).unwrap_or(i64::MIN));
    }

    // Items and their classes (items classified after the last run are C).
    let classes = current_classes(&c, site).await?;
    let mut items: Vec<ItemFacts> = Vec::new();
    let mut skus: Vec<String> = Vec::new();
    let mut item_index: HashMap<i64, usize> = HashMap::new();
    for r in rows(
        &c,
        "select id, sku from item where site_id = $1 order by id",
        &[&site.0],
    )
    .await?
    {
        let id: i64 = r.get(0);
        item_index.insert(id, items.len());
        skus.push(r.get(1));
        items.push(ItemFacts {
            id,
            class: classes.get(&id).copied().unwrap_or(Class::C),
            dead: false,
            bins: Vec::new(),
        });
    }

    // Balances: lines per bin, where each item is, negative and zero keys.
    let mut triggers = Vec::new();
    let mut stocked = vec![false; items.len()];
    let mut last_move = vec![i64::MIN; items.len()];
    let mut empty_bins: Vec<Vec<u32>> = vec![Vec::new(); items.len()];
    let mut zero_keys = Vec::new();
    for r in rows(
        &c,
        "select k.bin_id, k.item_id, k.lot, k.qty, k.last_event_at
           from balance k join bin b on b.id = k.bin_id
          where b.site_id = $1
          order by k.bin_id, k.item_id, k.lot collate \"C\"",
        &[&site.0],
    )
    .await?
    {
        let (Some(&b), Some(&it)) = (
            index.get(&r.get::<_, i64>(0)),
            item_index.get(&r.get::<_, i64>(1)),
        ) else {
            continue;
        };
        let (qty, last): (i64, i64) = (r.get(3), r.get(4));
        last_move[it] = last_move[it].max(last);
        let bins_of = &mut items[it].bins;
        if qty != 0 {
            bins[b as usize].lines += 1;
            stocked[it] = true;
            if !bins_of.contains(&b) {
                bins_of.push(b);
            }
        } else if !empty_bins[it].contains(&b) {
            empty_bins[it].push(b);
        }
        if last <= counted_at[b as usize] {
            continue;
        }
        if qty < 0 {
            triggers.push(Trigger {
                bin: b,
                kind: TriggerKind::NegativeBalance,
                detail: format!("{} book {qty}", skus[it]),
            });
        } else if qty == 0 && last >= day_end - i64::from(settings.zero_demand_days) * DAY_MS {
            zero_keys.push((b, it, r.get::<_, String>(2)));
        }
    }
    let year_ago = day_end - 365 * DAY_MS;
    for (i, it) in items.iter_mut().enumerate() {
        if !stocked[i] {
            it.bins = std::mem::take(&mut empty_bins[i]);
            it.dead = last_move[i] < year_ago;
        }
    }
    let since = day_end - i64::from(settings.zero_demand_days) * DAY_MS;
    for (b, it, lot) in zero_keys {
        let n: i64 = row_one(
            &c,
            "select count(*) from movement
              where bin_id = $1 and item_id = $2 and lot = $3 and event_at >= $4
                and event_at < $5 and kind = 'pick'",
            &[&bins[b as usize].id, &items[it].id, &lot, &since, &day_end],
        )
        .await?
        .get(0);
        if n > 0 {
            triggers.push(Trigger {
                bin: b,
                kind: TriggerKind::ZeroBalance,
                detail: format!("{} book 0 after {n} pick(s)", skus[it]),
            });
        }
    }

    // Short picks reported since the bin was last counted.
    for r in rows(
        &c,
        "select sp.bin_id, i.sku, sp.short_qty, sp.reported_at
           from short_pick sp join item i on i.id = sp.item_id
          where sp.site_id = $1 and sp.reported_at < $2
            and sp.reported_at > coalesce((select counted_at from bin_count bc
                                            where bc.bin_id = sp.bin_id),
                                           '-9223372036854775808'::bigint)
          order by sp.id",
        &[&site.0, &day_end],
    )
    .await?
    {
        let Some(&b) = index.get(&r.get::<_, i64>(0)) else {
            continue;
        };
        let (sku, short): (String, i64) = (r.get(1), r.get(2));
        triggers.push(Trigger {
            bin: b,
            kind: TriggerKind::ShortPick,
            detail: format!("{sku} pick short by {short} at {}", Timestamp(r.get(3))),
        });
    }
    let counting_since: Option<String> = row_one(
        &c,
        "select min(day) from abc_run where site_id = $1",
        &[&site.0],
    )
    .await?
    .get(0);
    Ok(PlanInput {
        day,
        calendar,
        settings,
        bins,
        items,
        triggers,
        recounts: recount_tasks::open_recounts(&c, site, day, &index).await?,
        zone_time: HashMap::new(),
        capacity,
        fill,
        counting_since: counting_since.as_deref().map(parse_day).transpose()?,
        watermark: super::ledger::watermark(&c).await?,
        risk: None,
    })
}
