//! SQL for the day's count list: settings and calendar, ABC runs and class
//! history, short-pick reports, the facts a plan is built from, and stored
//! lists with their tasks and runs.

use crate::batch::RowError;
use crate::master::SiteId;
use crate::planning::abc::{self, AbcRule, Basis, Class, Usage};
use crate::planning::calendar::Calendar;
use crate::planning::due::Frequency;
use crate::planning::estimate::TaskTime;
use crate::planning::plan::{BinFacts, Capacity, Fill, ItemFacts, PlanInput, Trigger};
use crate::planning::policy::{FrequencyPolicy, ItemWorth, Mode};
use crate::planning::short_pick::{NewShortPick, ShortPickOutcome};
use crate::planning::walk::Place;
use crate::planning::{AbcSummary, ClassChange, NewCountList};
use crate::planning::{ListView, Settings, Summary, TaskView, TriggerKind};
use crate::store::StoreError;
use crate::store::sqlite::ledger::watermark;
use crate::store::sqlite::recount_tasks::{self, Placing};
use crate::time::DAY_MS;
use crate::time::Timestamp;
use chrono::NaiveDate;
use rusqlite::{Connection, OptionalExtension, Transaction, params};
use std::collections::{HashMap, HashSet};

fn day_text(d: NaiveDate) -> String {
    d.format("%Y-%m-%d").to_string()
}

fn parse_day(text: &str) -> rusqlite::Result<NaiveDate> {
    NaiveDate::parse_from_str(text, "%Y-%m-%d").map_err(|e| {
        rusqlite::Error::FromSqlConversionFailure(0, rusqlite::types::Type::Text, Box::new(e))
    })
}

/// Reads a site's planning settings, or the defaults when none were stored.
pub fn settings(conn: &Connection, site: SiteId) -> Result<Settings, StoreError> {
    let row = conn
        .prepare_cached(
            "select abc_basis, abc_a_pct, abc_b_pct, abc_window_days, per_year_a, per_year_b,
                    per_year_c, per_year_dead, task_base_s, task_line_s, zero_demand_days,
                    level_slack_pct
             from planning_settings where site_id = ?1",
        )?
        .query_row([site.0], |r| {
            let basis: String = r.get(0)?;
            Ok(Settings {
                abc: AbcRule {
                    basis: Basis::parse(&basis).unwrap_or(Basis::Value),
                    a_pct: r.get(1)?,
                    b_pct: r.get(2)?,
                    window_days: r.get(3)?,
                },
                frequency: Frequency {
                    per_year: [r.get(4)?, r.get(5)?, r.get(6)?],
                    dead_per_year: r.get(7)?,
                },
                task_time: TaskTime {
                    base_s: r.get(8)?,
                    per_line_s: r.get(9)?,
                },
                zero_demand_days: r.get(10)?,
                level_slack_pct: r.get(11)?,
            })
        })
        .optional()?;
    Ok(row.unwrap_or_default())
}

/// Stores a site's planning settings.
pub fn put_settings(tx: &Transaction, site: SiteId, s: &Settings) -> Result<(), StoreError> {
    tx.prepare_cached(
        "insert or replace into planning_settings values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
    )?
    .execute(params![
        site.0,
        s.abc.basis.as_str(),
        s.abc.a_pct,
        s.abc.b_pct,
        s.abc.window_days,
        s.frequency.per_year[0],
        s.frequency.per_year[1],
        s.frequency.per_year[2],
        s.frequency.dead_per_year,
        s.task_time.base_s,
        s.task_time.per_line_s,
        s.zero_demand_days,
        s.level_slack_pct
    ])?;
    Ok(())
}

/// Reads a site's frequency policy, or `abc` when none was stored.
pub fn frequency_policy(conn: &Connection, site: SiteId) -> Result<FrequencyPolicy, StoreError> {
    let row = conn
        .prepare_cached(
            "select mode, floor_a, floor_b, floor_c from frequency_policy where site_id = ?1",
        )?
        .query_row([site.0], |r| {
            Ok((
                r.get::<_, String>(0)?,
                r.get::<_, u32>(1)?,
                r.get::<_, u32>(2)?,
                r.get::<_, u32>(3)?,
            ))
        })
        .optional()?;
    let Some((mode, floor_a, floor_b, floor_c)) = row else {
        return Ok(FrequencyPolicy::default());
    };
    Ok(FrequencyPolicy {
        policy: Mode::parse(&mode)
            .ok_or_else(|| anyhow::anyhow!("a stored frequency policy '{mode}' is unknown"))?,
        floor_a,
        floor_b,
        floor_c,
    })
}

/// Stores a site's frequency policy, changed at `at`.
pub fn put_frequency_policy(
    tx: &Transaction,
    site: SiteId,
    p: &FrequencyPolicy,
    at: Timestamp,
) -> Result<(), StoreError> {
    tx.prepare_cached(
        "insert or replace into frequency_policy (site_id, mode, floor_a, floor_b, floor_c, changed_at)
         values (?1, ?2, ?3, ?4, ?5, ?6)",
    )?
    .execute(params![
        site.0,
        p.policy.as_str(),
        p.floor_a,
        p.floor_b,
        p.floor_c,
        at.0
    ])?;
    Ok(())
}

/// Reads every item's unit cost and its picks with event time in `[from, to)`.
pub fn item_worth(
    conn: &Connection,
    site: SiteId,
    from: Timestamp,
    to: Timestamp,
) -> Result<Vec<ItemWorth>, StoreError> {
    let mut q = conn.prepare_cached(
        "select i.id, i.sku, i.unit_cost_minor,
                (select count(*) from movement m indexed by movement_item_time
                 where m.item_id = i.id and m.event_at >= ?2 and m.event_at < ?3 and m.kind = 'pick')
         from item i where i.site_id = ?1 order by i.id",
    )?;
    let rows = q.query_map(params![site.0, from.0, to.0], |r| {
        Ok(ItemWorth {
            item: r.get(0)?,
            sku: r.get(1)?,
            unit_cost_minor: r.get(2)?,
            picks: r.get(3)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Reads a site's calendar, or Monday to Friday without holidays when none was stored.
pub fn calendar(conn: &Connection, site: SiteId) -> Result<Calendar, StoreError> {
    let mut c = Calendar::default();
    if let Some(mask) = conn
        .prepare_cached("select weekday_mask from site_calendar where site_id = ?1")?
        .query_row([site.0], |r| r.get::<_, i64>(0))
        .optional()?
    {
        for (i, w) in c.working_weekdays.iter_mut().enumerate() {
            *w = mask & (1 << i) != 0;
        }
    }
    let mut q = conn.prepare_cached("select day from site_holiday where site_id = ?1")?;
    for d in q.query_map([site.0], |r| parse_day(&r.get::<_, String>(0)?))? {
        c.holidays.insert(d?);
    }
    Ok(c)
}

/// Replaces a site's calendar.
pub fn put_calendar(tx: &Transaction, site: SiteId, c: &Calendar) -> Result<(), StoreError> {
    let mask: i64 = (0..7)
        .filter(|&i| c.working_weekdays[i])
        .map(|i| 1 << i)
        .sum();
    tx.prepare_cached("insert or replace into site_calendar values (?1, ?2)")?
        .execute(params![site.0, mask])?;
    tx.prepare_cached("delete from site_holiday where site_id = ?1")?
        .execute([site.0])?;
    let mut ins = tx.prepare_cached("insert into site_holiday values (?1, ?2)")?;
    for d in &c.holidays {
        ins.execute(params![site.0, day_text(*d)])?;
    }
    Ok(())
}

/// Sums every item's issues (picks, net of their reversals) with event time in `[from, to)`,
/// with the event time of its first movement and whether it has a class already.
/// One pass over the table: a year is most of the ledger, and walking the
/// item index would visit every row out of order.
pub fn abc_usage(
    conn: &Connection,
    site: SiteId,
    from: i64,
    to: i64,
) -> Result<Vec<Usage>, StoreError> {
    let mut q = conn.prepare_cached(
        "select i.id, i.unit_cost_minor, coalesce(u.issued, 0), coalesce(u.hits, 0),
                (select min(m.event_at) from movement m indexed by movement_item_time
                 where m.item_id = i.id),
                exists (select 1 from item_class c where c.item_id = i.id)
         from item i left join (
             select item_id, sum(-qty) as issued, sum(case when qty < 0 then 1 else -1 end) as hits
             from movement not indexed
             where site_id = ?1 and kind = 'pick' and event_at >= ?2 and event_at < ?3
             group by item_id
         ) u on u.item_id = i.id
         where i.site_id = ?1",
    )?;
    let rows = q.query_map(params![site.0, from, to], |r| {
        let (item, cost, issued, hits): (i64, i64, i64, i64) =
            (r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?);
        let value = i128::from(issued.max(0)) * i128::from(cost);
        Ok(Usage {
            item,
            value_minor: i64::try_from(value).unwrap_or(i64::MAX),
            hits,
            first_seen_ms: r.get(4)?,
            classified: r.get(5)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Returns every item's current class.
pub fn current_classes(conn: &Connection, site: SiteId) -> Result<HashMap<i64, Class>, StoreError> {
    let mut q = conn.prepare_cached(
        "select ic.item_id, ic.class from item_class ic join item on item.id = ic.item_id
         where item.site_id = ?1
           and ic.run_id = (select max(x.run_id) from item_class x where x.item_id = ic.item_id)",
    )?;
    let rows = q.query_map([site.0], |r| {
        let class: String = r.get(1)?;
        Ok((r.get(0)?, Class::parse(&class).unwrap_or(Class::C)))
    })?;
    Ok(rows.collect::<rusqlite::Result<HashMap<_, _>>>()?)
}

/// Stores one classification: the run, and a history row for each item whose class changed.
pub fn record_classes(
    tx: &Transaction,
    site: SiteId,
    day: NaiveDate,
    rule: &AbcRule,
    classes: &[(i64, Class)],
) -> Result<AbcSummary, StoreError> {
    let current = current_classes(tx, site)?;
    let changed = abc::changes(&current, classes);
    let wm = watermark(tx)?;
    tx.prepare_cached(
        "insert into abc_run (site_id, day, basis, a_pct, b_pct, window_days, items, changed, watermark, ran_at)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
    )?
    .execute(params![
        site.0,
        day_text(day),
        rule.basis.as_str(),
        rule.a_pct,
        rule.b_pct,
        rule.window_days,
        classes.len() as i64,
        changed.len() as i64,
        wm,
        Timestamp::now().0
    ])?;
    let run = tx.last_insert_rowid();
    let mut ins = tx.prepare_cached(
        "insert into item_class (item_id, run_id, class, since) values (?1, ?2, ?3, ?4)",
    )?;
    for (item, class) in &changed {
        ins.execute(params![item, run, class.as_str(), day_text(day)])?;
    }
    let mut per_class = [0usize; 3];
    for (_, c) in classes {
        per_class[c.index()] += 1;
    }
    Ok(AbcSummary {
        run,
        day,
        rule: *rule,
        items: classes.len(),
        changed: changed.len(),
        a: per_class[0],
        b: per_class[1],
        c: per_class[2],
        watermark: wm,
    })
}

/// Reads the newest classification's summary.
pub fn latest_abc(conn: &Connection, site: SiteId) -> Result<Option<AbcSummary>, StoreError> {
    let run = conn
        .prepare_cached(
            "select id, day, basis, a_pct, b_pct, window_days, items, changed, watermark
             from abc_run where site_id = ?1 order by id desc limit 1",
        )?
        .query_row([site.0], |r| {
            let basis: String = r.get(2)?;
            Ok(AbcSummary {
                run: r.get(0)?,
                day: parse_day(&r.get::<_, String>(1)?)?,
                rule: AbcRule {
                    basis: Basis::parse(&basis).unwrap_or(Basis::Value),
                    a_pct: r.get(3)?,
                    b_pct: r.get(4)?,
                    window_days: r.get(5)?,
                },
                items: r.get::<_, i64>(6)? as usize,
                changed: r.get::<_, i64>(7)? as usize,
                a: 0,
                b: 0,
                c: 0,
                watermark: r.get(8)?,
            })
        })
        .optional()?;
    let Some(mut run) = run else { return Ok(None) };
    for c in current_classes(conn, site)?.values() {
        match c {
            Class::A => run.a += 1,
            Class::B => run.b += 1,
            Class::C => run.c += 1,
        }
    }
    Ok(Some(run))
}

/// Reads when an item entered each of its classes, oldest first.
pub fn class_history(
    conn: &Connection,
    site: SiteId,
    sku: &str,
) -> Result<Vec<ClassChange>, StoreError> {
    let item: i64 = conn
        .prepare_cached("select id from item where site_id = ?1 and sku = ?2")?
        .query_row(params![site.0, sku], |r| r.get(0))
        .optional()?
        .ok_or_else(|| StoreError::NotFound(format!("unknown SKU '{sku}' in this site")))?;
    let mut q = conn.prepare_cached(
        "select ic.class, ic.since, ic.run_id, r.basis from item_class ic join abc_run r on r.id = ic.run_id
         where ic.item_id = ?1 order by ic.run_id",
    )?;
    let rows = q.query_map([item], |r| {
        let class: String = r.get(0)?;
        Ok(ClassChange {
            class: Class::parse(&class).unwrap_or(Class::C),
            since: parse_day(&r.get::<_, String>(1)?)?,
            run: r.get(2)?,
            basis: r.get(3)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// Appends short-pick reports, idempotent by id, all or nothing.
pub fn insert_short_picks(
    tx: &Transaction,
    site: SiteId,
    rows: &[NewShortPick],
    now: Timestamp,
) -> Result<ShortPickOutcome, StoreError> {
    let mut errors = Vec::new();
    let mut out = ShortPickOutcome::default();
    let mut bin_q = tx.prepare_cached("select id from bin where site_id = ?1 and code = ?2")?;
    let mut item_q = tx.prepare_cached("select id from item where site_id = ?1 and sku = ?2")?;
    let mut prev_q = tx.prepare_cached(
        "select site_id, bin_id, item_id, lot, short_qty, reported_at from short_pick where uid = ?1",
    )?;
    let mut ins = tx.prepare_cached(
        "insert into short_pick (uid, site_id, bin_id, item_id, lot, short_qty, reported_at, recorded_at, source, doc_ref)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
    )?;
    for (i, p) in rows.iter().enumerate() {
        let bin: Option<i64> = bin_q
            .query_row(params![site.0, p.bin.as_str()], |r| r.get(0))
            .optional()?;
        let item: Option<i64> = item_q
            .query_row(params![site.0, p.sku.as_str()], |r| r.get(0))
            .optional()?;
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
        let prev: Option<(i64, i64, i64, String, i64, i64)> = prev_q
            .query_row([p.uid.as_str()], |r| {
                Ok((
                    r.get(0)?,
                    r.get(1)?,
                    r.get(2)?,
                    r.get(3)?,
                    r.get(4)?,
                    r.get(5)?,
                ))
            })
            .optional()?;
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
                ins.execute(params![
                    p.uid.as_str(),
                    site.0,
                    bin,
                    item,
                    p.lot,
                    p.short_qty,
                    p.reported_at.0,
                    now.0,
                    p.source,
                    p.doc_ref
                ])
                .map_err(|e| match e.sqlite_error_code() {
                    Some(rusqlite::ErrorCode::ConstraintViolation) => {
                        StoreError::Rejected(vec![RowError::new(
                            i,
                            "id",
                            format!("id '{}' appears twice in this batch", p.uid),
                        )])
                    }
                    _ => e.into(),
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

/// Gathers the facts one day's plan is built from.
pub fn plan_input(
    conn: &Connection,
    site: SiteId,
    day: NaiveDate,
    day_end: Timestamp,
    capacity: Capacity,
    fill: Fill,
) -> Result<PlanInput, StoreError> {
    let settings = settings(conn, site)?;
    let calendar = calendar(conn, site)?;
    let day_end = day_end.0;

    // Bins, with the instant each was last counted (to tell old triggers from new).
    let mut bins = Vec::new();
    let mut counted_at = Vec::new();
    let mut index: HashMap<i64, u32> = HashMap::new();
    let mut q = conn.prepare_cached(
        "select b.id, b.code, z.code, z.walk_seq, z.id, b.aisle, b.bay, b.level, b.side, b.walk_seq,
                c.counted_on, c.counted_at
         from bin b join zone z on z.id = b.zone_id left join bin_count c on c.bin_id = b.id
         where b.site_id = ?1",
    )?;
    let mut rows = q.query([site.0])?;
    while let Some(r) = rows.next()? {
        let side: String = r.get(8)?;
        let last: Option<String> = r.get(10)?;
        index.insert(r.get(0)?, bins.len() as u32);
        bins.push(BinFacts {
            id: r.get(0)?,
            code: r.get(1)?,
            zone: r.get(2)?,
            place: Place {
                zone_seq: r.get(3)?,
                zone: r.get(4)?,
                aisle: r.get(5)?,
                bay: r.get(6)?,
                level: r.get(7)?,
                side: match side.as_str() {
                    "L" => 0,
                    "R" => 1,
                    _ => 2,
                },
                walk_seq: r.get(9)?,
            },
            lines: 0,
            last_count: last.map(|d| parse_day(&d)).transpose()?,
        });
        counted_at.push(r.get::<_, Option<i64>>(11)?.unwrap_or(i64::MIN));
    }
    drop(rows);

    // Items and their classes (items classified after the last run are C).
    let classes = current_classes(conn, site)?;
    let mut items: Vec<ItemFacts> = Vec::new();
    let mut skus: Vec<String> = Vec::new();
    let mut item_index: HashMap<i64, usize> = HashMap::new();
    let mut q = conn.prepare_cached("select id, sku from item where site_id = ?1 order by id")?;
    let mut rows = q.query([site.0])?;
    while let Some(r) = rows.next()? {
        let id: i64 = r.get(0)?;
        item_index.insert(id, items.len());
        skus.push(r.get(1)?);
        items.push(ItemFacts {
            id,
            class: classes.get(&id).copied().unwrap_or(Class::C),
            dead: false,
            bins: Vec::new(),
        });
    }
    drop(rows);

    // Balances: lines per bin, where each item is, negative and zero keys.
    let mut triggers = Vec::new();
    let mut stocked = vec![false; items.len()];
    let mut last_move = vec![i64::MIN; items.len()];
    let mut empty_bins: Vec<Vec<u32>> = vec![Vec::new(); items.len()];
    let mut zero_keys = Vec::new();
    let mut q =
        conn.prepare_cached("select bin_id, item_id, lot, qty, last_event_at from balance")?;
    let mut rows = q.query([])?;
    while let Some(r) = rows.next()? {
        let (Some(&b), Some(&it)) = (
            index.get(&r.get::<_, i64>(0)?),
            item_index.get(&r.get::<_, i64>(1)?),
        ) else {
            continue;
        };
        let (qty, last): (i64, i64) = (r.get(3)?, r.get(4)?);
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
            zero_keys.push((b, it, r.get::<_, String>(2)?));
        }
    }
    drop(rows);
    let year_ago = day_end - 365 * DAY_MS;
    for (i, it) in items.iter_mut().enumerate() {
        if !stocked[i] {
            it.bins = std::mem::take(&mut empty_bins[i]);
            it.dead = last_move[i] < year_ago;
        }
    }
    let since = day_end - i64::from(settings.zero_demand_days) * DAY_MS;
    let mut picked = conn.prepare_cached(
        "select count(*) from movement
         where bin_id = ?1 and item_id = ?2 and lot = ?3 and event_at >= ?4 and event_at < ?5 and kind = 'pick'",
    )?;
    for (b, it, lot) in zero_keys {
        let n: i64 = picked.query_row(
            params![bins[b as usize].id, items[it].id, lot, since, day_end],
            |r| r.get(0),
        )?;
        if n > 0 {
            triggers.push(Trigger {
                bin: b,
                kind: TriggerKind::ZeroBalance,
                detail: format!("{} book 0 after {n} pick(s)", skus[it]),
            });
        }
    }

    // Short picks reported since the bin was last counted.
    let mut q = conn.prepare_cached(
        "select sp.bin_id, i.sku, sp.short_qty, sp.reported_at from short_pick sp join item i on i.id = sp.item_id
         where sp.site_id = ?1 and sp.reported_at < ?2
           and sp.reported_at > coalesce((select counted_at from bin_count c where c.bin_id = sp.bin_id), -9223372036854775808)",
    )?;
    let mut rows = q.query(params![site.0, day_end])?;
    while let Some(r) = rows.next()? {
        let Some(&b) = index.get(&r.get::<_, i64>(0)?) else {
            continue;
        };
        let (sku, short): (String, i64) = (r.get(1)?, r.get(2)?);
        triggers.push(Trigger {
            bin: b,
            kind: TriggerKind::ShortPick,
            detail: format!("{sku} pick short by {short} at {}", Timestamp(r.get(3)?)),
        });
    }
    Ok(PlanInput {
        day,
        calendar,
        settings,
        bins,
        items,
        triggers,
        recounts: recount_tasks::open_recounts(conn, site, day, &index)?,
        zone_time: HashMap::new(),
        capacity,
        fill,
        counting_since: conn
            .prepare_cached("select min(day) from abc_run where site_id = ?1")?
            .query_row([site.0], |r| r.get::<_, Option<String>>(0))?
            .map(|d| parse_day(&d))
            .transpose()?,
        watermark: watermark(conn)?,
        risk: None,
    })
}

/// Stores a day's list; an existing one is replaced only when asked and not yet started.
/// Its open recounts are not deleted: the plan placed each again (`recount_task`), and
/// recounts the plan carries from earlier lists move here, noted on the list they left.
pub fn save_count_list(
    tx: &Transaction,
    site: SiteId,
    list: &NewCountList,
) -> Result<i64, StoreError> {
    let day = day_text(list.day);
    let existing: Option<i64> = tx
        .prepare_cached("select id from count_list where site_id = ?1 and day = ?2")?
        .query_row(params![site.0, day], |r| r.get(0))
        .optional()?;
    let warnings = serde_json::to_string(&list.warnings).map_err(anyhow::Error::from)?;
    let id = match existing {
        Some(id) => {
            if !list.replace {
                return Err(StoreError::Conflict(format!(
                    "a count list for {day} already exists: ask to replace it"
                )));
            }
            // A task is started once a count points at it, even while it still reads
            // open (a line can reach the server before its bin-opened event).
            let started: bool = tx
                .prepare_cached(
                    "select 1 from count_task t
                     where t.list_id = ?1 and t.withdrawn_at is null
                       and (t.status <> 'open'
                            or exists (select 1 from count_pass p indexed by count_pass_task
                                       where p.task_id = t.id))
                     limit 1",
                )?
                .exists([id])?;
            if started {
                return Err(StoreError::Conflict(format!(
                    "the count list for {day} has started: move its tasks instead of rebuilding it"
                )));
            }
            // The list keeps its row (and so its recounts): its version goes up.
            tx.execute(
                "delete from count_task where list_id = ?1 and recount_of is null",
                [id],
            )?;
            tx.execute("delete from count_run where list_id = ?1", [id])?;
            tx.prepare_cached(
                "update count_list set counters = ?2, minutes = ?3, level_s = ?4, warnings = ?5,
                     built_at = ?6, watermark = ?7, version = version + 1
                 where id = ?1",
            )?
            .execute(params![
                id,
                list.counters,
                list.minutes,
                list.level_s,
                warnings,
                Timestamp::now().0,
                list.watermark
            ])?;
            id
        }
        None => {
            tx.prepare_cached(
                "insert into count_list (site_id, day, counters, minutes, level_s, warnings,
                     built_at, watermark, version)
                 values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, 1)",
            )?
            .execute(params![
                site.0,
                day,
                list.counters,
                list.minutes,
                list.level_s,
                warnings,
                Timestamp::now().0,
                list.watermark
            ])?;
            tx.last_insert_rowid()
        }
    };
    let mut run = tx.prepare_cached("insert into count_run (list_id, run) values (?1, ?2)")?;
    for r in 1..=list.counters {
        run.execute(params![id, r])?;
    }
    let mut ins = tx.prepare_cached(
        "insert into count_task (list_id, bin_id, seq, run, reason, class, detail, lines, est_s, why)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
    )?;
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
        ins.execute(params![
            id,
            t.bin_id,
            t.seq,
            t.run,
            t.reason.as_str(),
            t.class.map(Class::as_str),
            t.detail,
            t.lines,
            t.est_s,
            t.why
        ])?;
    }
    recount_tasks::refuse_unplaced(tx, id, &kept)?;
    recount_tasks::note_carried(tx, &carried, list.day)?;
    Ok(id)
}

/// Reads a task's stored figures; text that is not JSON (never written so) reads as none.
fn why_of(text: Option<String>) -> Option<serde_json::Value> {
    text.and_then(|t| serde_json::from_str(&t).ok())
}

/// Reads a stored list with its runs and tasks.
pub fn count_list(
    conn: &Connection,
    site: SiteId,
    day: NaiveDate,
) -> Result<Option<ListView>, StoreError> {
    let head = conn
        .prepare_cached(
            "select id, counters, minutes, level_s, warnings, watermark, version
             from count_list where site_id = ?1 and day = ?2",
        )?
        .query_row(params![site.0, day_text(day)], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, u32>(1)?,
                r.get::<_, u32>(2)?,
                r.get::<_, i64>(3)?,
                r.get::<_, String>(4)?,
                r.get::<_, i64>(5)?,
                r.get::<_, i64>(6)?,
            ))
        })
        .optional()?;
    let Some((id, counters, minutes, level_s, warnings, wm, version)) = head else {
        return Ok(None);
    };
    let mut q = conn.prepare_cached(
        "select t.id, t.seq, t.run, b.code, z.code, b.aisle, b.bay, b.level, t.reason, t.class, t.detail,
                t.lines, t.est_s, t.status, t.why
         from count_task t join bin b on b.id = t.bin_id join zone z on z.id = b.zone_id
         where t.list_id = ?1 and t.withdrawn_at is null order by t.run, t.seq",
    )?;
    let tasks = q
        .query_map([id], |r| {
            let class: Option<String> = r.get(9)?;
            Ok(TaskView {
                id: Some(r.get(0)?),
                seq: r.get(1)?,
                run: r.get(2)?,
                bin: r.get(3)?,
                zone: r.get(4)?,
                aisle: r.get(5)?,
                bay: r.get(6)?,
                level: r.get(7)?,
                reason: r.get(8)?,
                class: class.as_deref().and_then(Class::parse),
                detail: r.get(10)?,
                lines: r.get(11)?,
                est_s: r.get(12)?,
                status: r.get(13)?,
                why: why_of(r.get(14)?),
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let holders = conn
        .prepare_cached("select holder from count_run where list_id = ?1 order by run")?
        .query_map([id], |r| r.get(0))?
        .collect::<rusqlite::Result<Vec<String>>>()?;
    let mut view = ListView {
        day,
        stored: true,
        version,
        counters,
        minutes,
        level_s,
        watermark: wm,
        warnings: serde_json::from_str(&warnings).unwrap_or_default(),
        runs: Vec::new(),
        summary: Summary::default(),
        tasks,
    };
    view.tally(&holders);
    Ok(Some(view))
}

fn list_id(tx: &Transaction, site: SiteId, day: NaiveDate) -> Result<(i64, u32), StoreError> {
    tx.prepare_cached("select id, counters from count_list where site_id = ?1 and day = ?2")?
        .query_row(params![site.0, day_text(day)], |r| {
            Ok((r.get(0)?, r.get(1)?))
        })
        .optional()?
        .ok_or_else(|| StoreError::NotFound(format!("no count list for {day}")))
}

fn bump(tx: &Transaction, list: i64) -> rusqlite::Result<()> {
    tx.prepare_cached("update count_list set version = version + 1 where id = ?1")?
        .execute([list])?;
    Ok(())
}

/// Moves a task to another run: the task is then held by that run's counter only.
pub fn move_task(
    tx: &Transaction,
    site: SiteId,
    day: NaiveDate,
    task: i64,
    run: u32,
) -> Result<(), StoreError> {
    let (list, counters) = list_id(tx, site, day)?;
    if run == 0 || run > counters {
        return Err(StoreError::Rejected(vec![RowError::new(
            0,
            "run",
            format!("the list for {day} has runs 1 to {counters}"),
        )]));
    }
    let (status, withdrawn): (String, bool) = tx
        .prepare_cached(
            "select status, withdrawn_at is not null from count_task where id = ?1 and list_id = ?2",
        )?
        .query_row(params![task, list], |r| Ok((r.get(0)?, r.get(1)?)))
        .optional()?
        .ok_or_else(|| StoreError::NotFound(format!("no task {task} in the list for {day}")))?;
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
    let holder: String = tx
        .prepare_cached("select holder from count_run where list_id = ?1 and run = ?2")?
        .query_row(params![list, run], |r| r.get(0))
        .optional()?
        .unwrap_or_default();
    if recount_tasks::would_recount_own_count(tx, task, &holder)? {
        return Err(StoreError::Conflict(format!(
            "task {task} is a recount of a bin {holder} counted, and run {run} is {holder}'s: \
             a recount goes to someone else"
        )));
    }
    tx.prepare_cached("update count_task set run = ?1 where id = ?2")?
        .execute(params![run, task])?;
    bump(tx, list)?;
    Ok(())
}

/// Gives a run to a counter (empty to release it); a counter holds one run a day.
pub fn hold_run(
    tx: &Transaction,
    site: SiteId,
    day: NaiveDate,
    run: u32,
    holder: &str,
) -> Result<(), StoreError> {
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
            .prepare_cached(
                "select exists(select 1 from user_account u join user_role r on r.user_id = u.id
                 where u.name = ?1 and r.site_id = ?2 and r.role = 'counter')",
            )?
            .query_row(params![holder, site.0], |r| r.get(0))?;
        if !counter {
            return Err(StoreError::Conflict(format!(
                "{holder} is not a counter at this site (any more): pick one of its counters"
            )));
        }
    }
    if let Some(bin) = recount_tasks::recount_counted_by(tx, list, run, holder)? {
        return Err(StoreError::Conflict(format!(
            "run {run} holds the recount of bin {bin}, which {holder} counted: a recount goes \
             to someone else, so give {holder} another run or move the recount first"
        )));
    }
    tx.prepare_cached("update count_run set holder = ?1 where list_id = ?2 and run = ?3")?
        .execute(params![holder, list, run])
        .map_err(|e| match e.sqlite_error_code() {
            Some(rusqlite::ErrorCode::ConstraintViolation) => StoreError::Conflict(format!(
                "{holder} already holds another run of the list for {day}"
            )),
            _ => e.into(),
        })?;
    bump(tx, list)?;
    Ok(())
}

/// Marks a task done at `at` and records its bin as counted whole that day.
pub fn finish_task(
    tx: &Transaction,
    site: SiteId,
    task: i64,
    at: Timestamp,
) -> Result<(), StoreError> {
    let (list, bin, day): (i64, i64, String) = tx
        .prepare_cached(
            "select l.id, t.bin_id, l.day from count_task t join count_list l on l.id = t.list_id
             where t.id = ?1 and l.site_id = ?2",
        )?
        .query_row(params![task, site.0], |r| {
            Ok((r.get(0)?, r.get(1)?, r.get(2)?))
        })
        .optional()?
        .ok_or_else(|| StoreError::NotFound(format!("no task {task} in this site")))?;
    tx.prepare_cached("update count_task set status = 'done', done_at = ?1 where id = ?2")?
        .execute(params![at.0, task])?;
    tx.prepare_cached(
        "insert into bin_count (bin_id, counted_on, counted_at) values (?1, ?2, ?3)
         on conflict (bin_id) do update set counted_on = excluded.counted_on, counted_at = excluded.counted_at
         where excluded.counted_at > bin_count.counted_at",
    )?
    .execute(params![bin, day, at.0])?;
    bump(tx, list)?;
    Ok(())
}
