//! SQL for phones' sync: recording each accepted event once, the count passes and lines
//! they make, and each device's clock sample. One request is one transaction; each event
//! runs inside its own savepoint, so a refused event leaves nothing behind.

use crate::accounts::DeviceId;
use crate::master::SiteId;
use crate::planning::phone::{ItemBrief, PackBrief};
use crate::store::StoreError;
use crate::store::sqlite::planning::finish_task;
use crate::store::sqlite::recount_tasks::would_recount_own_count;
use crate::sync::SyncBatch;
use crate::sync::clock::ClockSample;
use crate::sync::event::{Body, Event, Line};
use crate::sync::plausible::{self, Sampled, TaskFloor};
use crate::sync::results::StoredLine;
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use cairn_scan::wire::{EventFlag, EventResult};
use chrono::NaiveDate;
use rusqlite::{Connection, OptionalExtension, Transaction, params};
use std::collections::BTreeMap;

/// Why an event was refused, or a store failure that aborts the whole request.
enum Refusal {
    Event(String),
    Store(StoreError),
}

impl From<rusqlite::Error> for Refusal {
    fn from(e: rusqlite::Error) -> Self {
        Refusal::Store(e.into())
    }
}

impl From<StoreError> for Refusal {
    fn from(e: StoreError) -> Self {
        Refusal::Store(e)
    }
}

fn refuse<T>(why: impl Into<String>) -> Result<T, Refusal> {
    Err(Refusal::Event(why.into()))
}

fn flag_text(flags: &[EventFlag]) -> String {
    flags
        .iter()
        .map(|f| match f {
            EventFlag::Reassigned => "reassigned",
            EventFlag::FoundStock => "found_stock",
            EventFlag::Held => "held",
        })
        .collect::<Vec<_>>()
        .join(",")
}

fn flags_of(text: &str) -> Vec<EventFlag> {
    text.split(',')
        .filter_map(|f| match f {
            "reassigned" => Some(EventFlag::Reassigned),
            "found_stock" => Some(EventFlag::FoundStock),
            "held" => Some(EventFlag::Held),
            _ => None,
        })
        .collect()
}

/// Applies a sync request: every event gets a result, in the order sent. Passes whose
/// times cannot be trusted ([`plausible`]) are marked held before netting sees them.
pub fn apply_sync(tx: &Transaction, batch: &SyncBatch) -> Result<Vec<EventResult>, StoreError> {
    let sample = Sampled::of(&batch.clock, batch.received_at);
    let mut device_step = None;
    if let Some(device) = batch.sender.device {
        device_step =
            previous_sample(tx, device)?.and_then(|prev| plausible::clock_step(prev, sample));
        save_clock(tx, device, &batch.clock, batch.received_at)?;
    }
    // The passes this request added events to, with the places of those events' results.
    let mut touched: BTreeMap<i64, Vec<usize>> = BTreeMap::new();
    let mut results = Vec::with_capacity(batch.events.len());
    for event in &batch.events {
        let event = match event {
            Ok(e) => e,
            Err(refused) => {
                results.push(refused.clone());
                continue;
            }
        };
        let id = event.id.to_string();
        if let Some((body, flags)) = tx
            .prepare_cached("select body, flags from sync_event where uid = ?1")?
            .query_row([&id], |r| {
                Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?))
            })
            .optional()?
        {
            results.push(if body == event.canonical {
                EventResult::accepted(&id, true, flags_of(&flags))
            } else {
                EventResult::conflict(&id)
            });
            continue;
        }
        tx.execute_batch("savepoint sync_event")?;
        match apply_event(tx, batch, event) {
            Ok((flags, pass)) => {
                tx.execute_batch("release sync_event")?;
                touched.entry(pass).or_default().push(results.len());
                results.push(EventResult::accepted(&id, false, flags));
            }
            Err(Refusal::Event(why)) => {
                tx.execute_batch("rollback to sync_event; release sync_event")?;
                results.push(EventResult::rejected(&id, why));
            }
            Err(Refusal::Store(e)) => return Err(e),
        }
    }
    for (pass, places) in touched {
        if hold_if_untrusted(tx, pass, sample, device_step)? {
            for i in places {
                results[i].flags.push(EventFlag::Held);
            }
        }
    }
    Ok(results)
}

/// Reads the clock sample a device's previous sync left, if any.
fn previous_sample(tx: &Transaction, device: DeviceId) -> Result<Option<Sampled>, StoreError> {
    Ok(tx
        .prepare_cached(
            "select offset_ms, uncertainty_ms, sampled_at from device_clock where device_id = ?1",
        )?
        .query_row([device.0], |r| {
            Ok(Sampled {
                offset_ms: r.get(0)?,
                uncertainty_ms: r.get(1)?,
                at: Timestamp(r.get(2)?),
            })
        })
        .optional()?)
}

/// Marks pass `pass` held when its times cannot be trusted: the phone's clock stepped
/// since its previous sync (`device_step`) or since the sync that first carried the pass,
/// or the pass spans too long. Says whether the pass is held (now or before).
fn hold_if_untrusted(
    tx: &Transaction,
    pass: i64,
    sample: Sampled,
    device_step: Option<i64>,
) -> Result<bool, StoreError> {
    let (held, first, done, offset, uncertainty, sampled_at) = tx
        .prepare_cached(
            "select held, first_at, done_at, clock_offset_ms, clock_uncertainty_ms,
                    clock_sampled_at
             from count_pass where id = ?1",
        )?
        .query_row([pass], |r| {
            Ok((
                r.get::<_, Option<String>>(0)?,
                Timestamp(r.get(1)?),
                r.get::<_, Option<i64>>(2)?.map(Timestamp),
                r.get::<_, Option<i64>>(3)?,
                r.get::<_, Option<i64>>(4)?,
                r.get::<_, Option<i64>>(5)?,
            ))
        })?;
    if held.is_some() {
        return Ok(true);
    }
    let first_sample = match (offset, uncertainty, sampled_at) {
        (Some(offset_ms), Some(uncertainty_ms), Some(at)) => Some(Sampled {
            offset_ms,
            uncertainty_ms,
            at: Timestamp(at),
        }),
        _ => None,
    };
    let step = device_step.or_else(|| first_sample.and_then(|f| plausible::clock_step(f, sample)));
    let reason = match step {
        Some(step) => Some(plausible::step_reason(step)),
        None => done.and_then(|done| plausible::span_reason(first, done)),
    };
    let Some(reason) = reason else {
        return Ok(false);
    };
    tx.prepare_cached("update count_pass set held = ?2 where id = ?1 and held is null")?
        .execute(params![pass, reason])?;
    Ok(true)
}

fn save_clock(
    tx: &Transaction,
    device: DeviceId,
    clock: &ClockSample,
    at: Timestamp,
) -> Result<(), StoreError> {
    tx.prepare_cached(
        "insert into device_clock (device_id, offset_ms, uncertainty_ms, sampled_at)
         values (?1, ?2, ?3, ?4)
         on conflict (device_id) do update set offset_ms = excluded.offset_ms,
             uncertainty_ms = excluded.uncertainty_ms, sampled_at = excluded.sampled_at",
    )?
    .execute(params![
        device.0,
        clock.offset_ms,
        clock.uncertainty_ms,
        at.0
    ])?;
    Ok(())
}

/// The bin an event names, with its place for the label check.
struct BinRow {
    id: i64,
    zone: String,
    aisle: u16,
    bay: u16,
    level: u8,
}

/// A task an event names, as the checks need it.
struct TaskRow {
    bin: i64,
    bin_code: String,
    holder: String,
    day: String,
    built_at: i64,
    /// For a recount: when the pass it re-checks was marked done.
    recheck_done_at: Option<i64>,
    is_recount: bool,
    /// Why the task was withdrawn (its first count became a hit), when it was.
    withdrawn: Option<String>,
}

impl TaskRow {
    /// Returns the earliest moment the task could have been known to a phone.
    fn floor(&self, zone: SiteZone) -> Result<TaskFloor, StoreError> {
        if let Some(done) = self.recheck_done_at {
            return Ok(TaskFloor::Recount(Timestamp(done)));
        }
        let day = NaiveDate::parse_from_str(&self.day, "%Y-%m-%d")
            .map_err(|e| anyhow::anyhow!("a count list has the day '{}': {e}", self.day))?;
        Ok(TaskFloor::Listed(Timestamp(
            zone.start_of(day).0.min(self.built_at),
        )))
    }
}

/// A pass already stored.
struct PassRow {
    id: i64,
    bin: i64,
    task: Option<i64>,
    user: i64,
}

/// Applies one event; returns its flags and the pass it went to.
fn apply_event(
    tx: &Transaction,
    batch: &SyncBatch,
    event: &Event,
) -> Result<(Vec<EventFlag>, i64), Refusal> {
    let (at, uncertainty) = batch.clock.correct(event.device_at);
    let site = batch.site;
    let bin = tx
        .prepare_cached(
            "select b.id, z.code, b.aisle, b.bay, b.level from bin b join zone z on z.id = b.zone_id
             where b.site_id = ?1 and b.code = ?2",
        )?
        .query_row(params![site.0, event.bin.as_str()], |r| {
            Ok(BinRow {
                id: r.get(0)?,
                zone: r.get(1)?,
                aisle: r.get(2)?,
                bay: r.get(3)?,
                level: r.get(4)?,
            })
        })
        .optional()?;
    let Some(bin) = bin else {
        return refuse(format!("no bin {} at this site", event.bin));
    };
    if let Some(maker) = &event.user
        && *maker != batch.sender.user_name
    {
        return refuse(format!(
            "made by {maker} on this phone, but {} is signed in now: sign in as {maker} to \
             send it",
            batch.sender.user_name
        ));
    }
    let mut flags = Vec::new();
    let mut floor = None;
    let mut withdrawn = None;
    if let Some(task) = event.task {
        let row = tx
            .prepare_cached(
                "select t.bin_id, coalesce(r.holder, ''), b.code, l.day, l.built_at,
                        (select p.done_at from count_result c join count_pass p on p.id = c.pass_id
                         where c.id = t.recount_of),
                        t.recount_of is not null,
                        case when t.withdrawn_at is not null then t.withdrawn_reason end
                 from count_task t
                 join count_list l on l.id = t.list_id join bin b on b.id = t.bin_id
                 left join count_run r on r.list_id = t.list_id and r.run = t.run
                 where t.id = ?1 and l.site_id = ?2",
            )?
            .query_row(params![task, site.0], |r| {
                Ok(TaskRow {
                    bin: r.get(0)?,
                    holder: r.get(1)?,
                    bin_code: r.get(2)?,
                    day: r.get(3)?,
                    built_at: r.get(4)?,
                    recheck_done_at: r.get(5)?,
                    is_recount: r.get(6)?,
                    withdrawn: r.get(7)?,
                })
            })
            .optional()?;
        let Some(row) = row else {
            return refuse(format!("no task {task} at this site"));
        };
        if row.bin != bin.id {
            return refuse(format!(
                "task {task} is for bin {}, not {}",
                row.bin_code, event.bin
            ));
        }
        // A recount is blind and by someone else (DESIGN §5): whoever counted the key
        // already may not decide it, whatever run they hold.
        if row.is_recount && would_recount_own_count(tx, task, &batch.sender.user_name)? {
            return refuse(format!(
                "task {task} is a recount of a count you made (bin {}): another counter must \
                 recount it, so this count was not kept",
                row.bin_code
            ));
        }
        if row.holder != batch.sender.user_name {
            flags.push(EventFlag::Reassigned);
        }
        floor = Some(row.floor(batch.zone)?);
        withdrawn = row.withdrawn;
    }
    if let Err(why) = plausible::check_event(
        at,
        uncertainty,
        &plausible::bounds(batch.received_at, floor),
    ) {
        return refuse(why);
    }
    let pass_uid = event.pass.to_string();
    let pass = tx
        .prepare_cached("select id, bin_id, task_id, user_id from count_pass where uid = ?1")?
        .query_row([&pass_uid], |r| {
            Ok(PassRow {
                id: r.get(0)?,
                bin: r.get(1)?,
                task: r.get(2)?,
                user: r.get(3)?,
            })
        })
        .optional()?;
    // A withdrawn recount needs no count: a new one against it is refused; a pass begun
    // before it was withdrawn is kept as evidence (netting lets it decide nothing).
    if let (Some(why), None) = (&withdrawn, &pass) {
        return refuse(format!(
            "task {} was withdrawn ({why}): this bin needs no recount now, so nothing was kept",
            event.task.unwrap_or_default()
        ));
    }
    if let Some(p) = &pass {
        if p.user != batch.sender.user.0 {
            return refuse(format!("count {pass_uid} belongs to another counter"));
        }
        if p.bin != bin.id || p.task != event.task {
            return refuse(format!(
                "count {pass_uid} is of another bin or task than {}",
                event.bin
            ));
        }
    }

    // Checks of the event's own content, before anything is written.
    let mut line_item = None;
    match &event.body {
        Body::BinOpened { label } if !label.trim().is_empty() => {
            let scanned = cairn_scan::BinLabel::parse(label.trim())
                .map_err(|e| Refusal::Event(format!("label: {e}")))?;
            let expected = crate::planning::phone::label_text(
                &batch.site_code,
                &bin.zone,
                bin.aisle,
                bin.bay,
                bin.level,
            );
            if expected.as_deref() != Some(scanned.text()) {
                return refuse(format!(
                    "label {} is not the label of bin {}",
                    scanned.text(),
                    event.bin
                ));
            }
        }
        Body::Line(line) => {
            let (item, found) = check_line(tx, site, bin.id, line)?;
            if found {
                flags.push(EventFlag::FoundStock);
            }
            line_item = Some(item);
        }
        _ => {}
    }

    let pass_id = match pass {
        Some(p) => {
            tx.prepare_cached(
                "update count_pass set first_at = min(first_at, ?2),
                     uncertainty_ms = max(uncertainty_ms, ?3),
                     reassigned = max(reassigned, ?4)
                 where id = ?1",
            )?
            .execute(params![
                p.id,
                at.0,
                uncertainty,
                flags.contains(&EventFlag::Reassigned)
            ])?;
            p.id
        }
        None => {
            tx.prepare_cached(
                "insert into count_pass (uid, site_id, bin_id, task_id, user_id, device_id,
                     first_at, uncertainty_ms, reassigned, received_at, clock_offset_ms,
                     clock_uncertainty_ms, clock_sampled_at)
                 values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
            )?
            .execute(params![
                pass_uid,
                site.0,
                bin.id,
                event.task,
                batch.sender.user.0,
                batch.sender.device.map(|d| d.0),
                at.0,
                uncertainty,
                flags.contains(&EventFlag::Reassigned),
                batch.received_at.0,
                batch.clock.offset_ms,
                batch.clock.uncertainty_ms,
                batch.received_at.0
            ])?;
            tx.last_insert_rowid()
        }
    };

    let id = event.id.to_string();
    match &event.body {
        Body::BinOpened { .. } => {
            if let Some(task) = event.task {
                tx.prepare_cached(
                    "update count_task set status = 'started' where id = ?1 and status = 'open'",
                )?
                .execute([task])?;
            }
        }
        Body::Line(line) => {
            tx.prepare_cached(
                "insert into count_line (uid, pass_id, item_id, lot, expiry, qty, packs, gtin,
                     entry, at, device_at, uncertainty_ms, found)
                 values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
            )?
            .execute(params![
                id,
                pass_id,
                line_item.expect("a line's item was resolved above"),
                line.lot,
                line.expiry.map(|d| d.format("%Y-%m-%d").to_string()),
                line.qty,
                line.packs,
                line.gtin,
                line.entry.as_str(),
                at.0,
                event.device_at,
                uncertainty,
                flags.contains(&EventFlag::FoundStock)
            ])?;
        }
        Body::Undo { line } => {
            let line_uid = line.to_string();
            let owner: Option<String> = tx
                .prepare_cached(
                    "select p.uid from count_line l join count_pass p on p.id = l.pass_id
                     where l.uid = ?1",
                )?
                .query_row([&line_uid], |r| r.get(0))
                .optional()?;
            if owner.is_some_and(|o| o != pass_uid) {
                return refuse(format!("line {line_uid} is not a line of count {pass_uid}"));
            }
            let undone = tx
                .prepare_cached(
                    "insert into count_line_undo (line_uid, undo_uid, pass_uid, at)
                     values (?1, ?2, ?3, ?4) on conflict (line_uid) do nothing",
                )?
                .execute(params![line_uid, id, pass_uid, at.0])?;
            if undone == 0 {
                return refuse(format!("line {line_uid} was undone already"));
            }
        }
        Body::BinEmpty => {
            tx.prepare_cached("update count_pass set empty = 1 where id = ?1")?
                .execute([pass_id])?;
        }
        Body::BinDone => {
            tx.prepare_cached(
                "update count_pass set done_at = max(coalesce(done_at, ?2), ?2) where id = ?1",
            )?
            .execute(params![pass_id, at.0])?;
            if let Some(task) = event.task {
                finish_task(tx, site, task, at)?;
            }
        }
    }

    tx.prepare_cached(
        "insert into sync_event (uid, site_id, user_id, device_id, pass_uid, kind, body,
             device_at, at, uncertainty_ms, flags, received_at, made_by)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
    )?
    .execute(params![
        id,
        site.0,
        batch.sender.user.0,
        batch.sender.device.map(|d| d.0),
        pass_uid,
        event.kind.as_str(),
        event.canonical,
        event.device_at,
        at.0,
        uncertainty,
        flag_text(&flags),
        batch.received_at.0,
        event.user.as_deref().unwrap_or(&batch.sender.user_name)
    ])?;
    Ok((flags, pass_id))
}

/// Resolves a line's item and checks its pack; says whether the bin was not expected
/// to hold the item (no non-zero balance of it there).
fn check_line(
    tx: &Transaction,
    site: SiteId,
    bin: i64,
    line: &Line,
) -> Result<(i64, bool), Refusal> {
    let item: Option<i64> = tx
        .prepare_cached("select id from item where site_id = ?1 and sku = ?2")?
        .query_row(params![site.0, line.sku.as_str()], |r| r.get(0))
        .optional()?;
    let Some(item) = item else {
        return refuse(format!("no item {} at this site", line.sku));
    };
    if let Some(gtin) = &line.gtin {
        let pack: Option<(i64, i64)> = tx
            .prepare_cached("select item_id, units from pack where site_id = ?1 and gtin = ?2")?
            .query_row(params![site.0, gtin], |r| Ok((r.get(0)?, r.get(1)?)))
            .optional()?;
        let Some((pack_item, units)) = pack else {
            return refuse(format!("GTIN {gtin} is not known at this site"));
        };
        if pack_item != item {
            return refuse(format!("GTIN {gtin} is not a pack of {}", line.sku));
        }
        if line.packs.checked_mul(units) != Some(line.qty) {
            return refuse(format!(
                "qty {} should be packs × units per pack = {} × {units}",
                line.qty, line.packs
            ));
        }
    }
    let expected: bool = tx
        .prepare_cached(
            "select exists (select 1 from balance where bin_id = ?1 and item_id = ?2 and qty <> 0)",
        )?
        .query_row(params![bin, item], |r| r.get(0))?;
    Ok((item, !expected))
}

/// Lists every item of a site with its packs, for the phone's catalogue: no quantities.
pub fn catalog(conn: &Connection, site: SiteId) -> Result<Vec<ItemBrief>, StoreError> {
    let mut packs: std::collections::HashMap<i64, Vec<PackBrief>> = Default::default();
    let mut stmt = conn.prepare_cached(
        "select item_id, gtin, level, units from pack where site_id = ?1 order by item_id, units",
    )?;
    for row in stmt.query_map([site.0], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            PackBrief {
                gtin: r.get(1)?,
                level: r.get(2)?,
                units: r.get(3)?,
            },
        ))
    })? {
        let (item, pack) = row?;
        packs.entry(item).or_default().push(pack);
    }
    let mut stmt = conn.prepare_cached(
        "select id, sku, description, base_unit, lot_tracked from item where site_id = ?1
         order by sku",
    )?;
    let items = stmt
        .query_map([site.0], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                ItemBrief {
                    sku: r.get(1)?,
                    description: r.get(2)?,
                    base_unit: r.get(3)?,
                    lot_tracked: r.get(4)?,
                    packs: Vec::new(),
                },
            ))
        })?
        .map(|row| {
            row.map(|(id, mut brief)| {
                brief.packs = packs.remove(&id).unwrap_or_default();
                brief
            })
        })
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(items)
}

/// Lists a site's count lines in arrival order, `limit` of them after line `after`.
pub fn count_lines(
    conn: &Connection,
    site: SiteId,
    after: i64,
    limit: usize,
) -> Result<Vec<StoredLine>, StoreError> {
    let mut stmt = conn.prepare_cached(
        "select l.id, l.uid, p.uid, b.code, i.sku, l.lot, l.qty, l.at, l.found,
                exists (select 1 from count_line_undo u where u.line_uid = l.uid)
         from count_line l join count_pass p on p.id = l.pass_id join bin b on b.id = p.bin_id
         join item i on i.id = l.item_id where p.site_id = ?1 and l.id > ?2
         order by l.id limit ?3",
    )?;
    let rows = stmt
        .query_map(params![site.0, after, limit as i64], |r| {
            Ok(StoredLine {
                seq: r.get(0)?,
                uid: r.get(1)?,
                pass: r.get(2)?,
                bin: r.get(3)?,
                sku: r.get(4)?,
                lot: r.get(5)?,
                qty: r.get(6)?,
                at: Timestamp(r.get(7)?),
                found: r.get(8)?,
                undone: r.get(9)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}
