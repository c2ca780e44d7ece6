//! SQL for phones' sync: the queries and writes of [`SyncTx`] (the workflow is
//! `sync::apply`'s) — each accepted event recorded once, the count passes and lines they
//! make, each device's clock sample — and the phone's catalogue and the count lines
//! support reads.

use super::Tx;
use crate::accounts::DeviceId;
use crate::master::SiteId;
use crate::planning::phone::{ItemBrief, PackBrief};
use crate::store::StoreError;
use crate::store::sqlite::planning::finish_task;
use crate::store::sqlite::recount_tasks::would_recount_own_count;
use crate::sync::apply::{
    EventBin, EventTask, NewEvent, NewLine, NewPass, PassTrust, StoredPass, SyncTx,
};
use crate::sync::clock::ClockSample;
use crate::sync::plausible::Sampled;
use crate::sync::results::StoredLine;
use crate::time::Timestamp;
use cairn_scan::wire::EventFlag;
use rusqlite::{Connection, OptionalExtension, params};

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

impl SyncTx for Tx<'_> {
    fn stored_event(&self, uid: &str) -> Result<Option<(String, Vec<EventFlag>)>, StoreError> {
        Ok(self
            .prepare_cached("select body, flags from sync_event where uid = ?1")?
            .query_row([uid], |r| {
                Ok((
                    r.get::<_, String>(0)?,
                    crate::sync::results::flags_of(&r.get::<_, String>(1)?),
                ))
            })
            .optional()?)
    }

    fn previous_clock(&self, device: DeviceId) -> Result<Option<Sampled>, StoreError> {
        Ok(self
            .prepare_cached(
                "select offset_ms, uncertainty_ms, sampled_at from device_clock
                 where device_id = ?1",
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

    fn save_clock(
        &self,
        device: DeviceId,
        clock: &ClockSample,
        at: Timestamp,
    ) -> Result<(), StoreError> {
        self.prepare_cached(
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

    fn pass_trust(&self, pass: i64) -> Result<PassTrust, StoreError> {
        let (held, first, done, offset, uncertainty, sampled_at) = self
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
        let first_sample = match (offset, uncertainty, sampled_at) {
            (Some(offset_ms), Some(uncertainty_ms), Some(at)) => Some(Sampled {
                offset_ms,
                uncertainty_ms,
                at: Timestamp(at),
            }),
            _ => None,
        };
        Ok(PassTrust {
            held,
            first,
            done,
            first_sample,
        })
    }

    fn hold_pass(&self, pass: i64, reason: &str) -> Result<(), StoreError> {
        self.prepare_cached("update count_pass set held = ?2 where id = ?1 and held is null")?
            .execute(params![pass, reason])?;
        Ok(())
    }

    fn bin(&self, site: SiteId, code: &str) -> Result<Option<EventBin>, StoreError> {
        Ok(self
            .prepare_cached(
                "select b.id, z.code, b.aisle, b.bay, b.level
                 from bin b join zone z on z.id = b.zone_id
                 where b.site_id = ?1 and b.code = ?2",
            )?
            .query_row(params![site.0, code], |r| {
                Ok(EventBin {
                    id: r.get(0)?,
                    zone: r.get(1)?,
                    aisle: r.get(2)?,
                    bay: r.get(3)?,
                    level: r.get(4)?,
                })
            })
            .optional()?)
    }

    fn task(&self, site: SiteId, task: i64) -> Result<Option<EventTask>, StoreError> {
        Ok(self
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
                Ok(EventTask {
                    bin: r.get(0)?,
                    holder: r.get(1)?,
                    bin_code: r.get(2)?,
                    day: r.get(3)?,
                    built_at: Timestamp(r.get(4)?),
                    recheck_done_at: r.get::<_, Option<i64>>(5)?.map(Timestamp),
                    is_recount: r.get(6)?,
                    withdrawn: r.get(7)?,
                })
            })
            .optional()?)
    }

    fn would_recount_own_count(&self, task: i64, user: &str) -> Result<bool, StoreError> {
        would_recount_own_count(self, task, user)
    }

    fn pass_by_uid(&self, uid: &str) -> Result<Option<StoredPass>, StoreError> {
        Ok(self
            .prepare_cached("select id, bin_id, task_id, user_id from count_pass where uid = ?1")?
            .query_row([uid], |r| {
                Ok(StoredPass {
                    id: r.get(0)?,
                    bin: r.get(1)?,
                    task: r.get(2)?,
                    user: r.get(3)?,
                })
            })
            .optional()?)
    }

    fn item_id(&self, site: SiteId, sku: &str) -> Result<Option<i64>, StoreError> {
        Ok(self
            .prepare_cached("select id from item where site_id = ?1 and sku = ?2")?
            .query_row(params![site.0, sku], |r| r.get(0))
            .optional()?)
    }

    fn pack(&self, site: SiteId, gtin: &str) -> Result<Option<(i64, i64)>, StoreError> {
        Ok(self
            .prepare_cached("select item_id, units from pack where site_id = ?1 and gtin = ?2")?
            .query_row(params![site.0, gtin], |r| Ok((r.get(0)?, r.get(1)?)))
            .optional()?)
    }

    fn bin_holds(&self, bin: i64, item: i64) -> Result<bool, StoreError> {
        Ok(self
            .prepare_cached(
                "select exists (select 1 from balance
                                where bin_id = ?1 and item_id = ?2 and qty <> 0)",
            )?
            .query_row(params![bin, item], |r| r.get(0))?)
    }

    fn extend_pass(
        &self,
        pass: i64,
        at: Timestamp,
        uncertainty_ms: i64,
        reassigned: bool,
    ) -> Result<(), StoreError> {
        self.prepare_cached(
            "update count_pass set first_at = min(first_at, ?2),
                 uncertainty_ms = max(uncertainty_ms, ?3),
                 reassigned = max(reassigned, ?4)
             where id = ?1",
        )?
        .execute(params![pass, at.0, uncertainty_ms, reassigned])?;
        Ok(())
    }

    fn insert_pass(&self, p: &NewPass<'_>) -> Result<i64, StoreError> {
        let b = p.batch;
        self.prepare_cached(
            "insert into count_pass (uid, site_id, bin_id, task_id, user_id, device_id,
                 first_at, uncertainty_ms, reassigned, received_at, clock_offset_ms,
                 clock_uncertainty_ms, clock_sampled_at)
             values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
        )?
        .execute(params![
            p.uid,
            p.site.0,
            p.bin,
            p.task,
            b.sender.user.0,
            b.sender.device.map(|d| d.0),
            p.at.0,
            p.uncertainty_ms,
            p.reassigned,
            b.received_at.0,
            b.clock.offset_ms,
            b.clock.uncertainty_ms,
            b.received_at.0
        ])?;
        Ok(self.last_insert_rowid())
    }

    fn start_task(&self, task: i64) -> Result<(), StoreError> {
        self.prepare_cached(
            "update count_task set status = 'started' where id = ?1 and status = 'open'",
        )?
        .execute([task])?;
        Ok(())
    }

    fn insert_line(&self, l: &NewLine<'_>) -> Result<(), StoreError> {
        self.prepare_cached(
            "insert into count_line (uid, pass_id, item_id, lot, expiry, qty, packs, gtin,
                 entry, at, device_at, uncertainty_ms, found)
             values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
        )?
        .execute(params![
            l.uid,
            l.pass,
            l.item,
            l.line.lot,
            l.line.expiry.map(|d| d.format("%Y-%m-%d").to_string()),
            l.line.qty,
            l.line.packs,
            l.line.gtin,
            l.line.entry.as_str(),
            l.at.0,
            l.device_at,
            l.uncertainty_ms,
            l.found
        ])?;
        Ok(())
    }

    fn line_pass(&self, line: &str) -> Result<Option<String>, StoreError> {
        Ok(self
            .prepare_cached(
                "select p.uid from count_line l join count_pass p on p.id = l.pass_id
                 where l.uid = ?1",
            )?
            .query_row([line], |r| r.get(0))
            .optional()?)
    }

    fn undo_line(
        &self,
        line: &str,
        undo: &str,
        pass: &str,
        at: Timestamp,
    ) -> Result<bool, StoreError> {
        let undone = self
            .prepare_cached(
                "insert into count_line_undo (line_uid, undo_uid, pass_uid, at)
                 values (?1, ?2, ?3, ?4) on conflict (line_uid) do nothing",
            )?
            .execute(params![line, undo, pass, at.0])?;
        Ok(undone > 0)
    }

    fn mark_empty(&self, pass: i64) -> Result<(), StoreError> {
        self.prepare_cached("update count_pass set empty = 1 where id = ?1")?
            .execute([pass])?;
        Ok(())
    }

    fn mark_done(&self, pass: i64, at: Timestamp) -> Result<(), StoreError> {
        self.prepare_cached(
            "update count_pass set done_at = max(coalesce(done_at, ?2), ?2) where id = ?1",
        )?
        .execute(params![pass, at.0])?;
        Ok(())
    }

    fn finish_task(&self, site: SiteId, task: i64, at: Timestamp) -> Result<(), StoreError> {
        finish_task(self, site, task, at)
    }

    fn insert_event(&self, e: &NewEvent<'_>) -> Result<(), StoreError> {
        let b = e.batch;
        self.prepare_cached(
            "insert into sync_event (uid, site_id, user_id, device_id, pass_uid, kind, body,
                 device_at, at, uncertainty_ms, flags, received_at, made_by)
             values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
        )?
        .execute(params![
            e.event.id.to_string(),
            b.site.0,
            b.sender.user.0,
            b.sender.device.map(|d| d.0),
            e.event.pass.to_string(),
            e.event.kind.as_str(),
            e.event.canonical,
            e.event.device_at,
            e.at.0,
            e.uncertainty_ms,
            crate::sync::results::flag_text(&e.flags),
            b.received_at.0,
            e.event.user.as_deref().unwrap_or(&b.sender.user_name)
        ])?;
        Ok(())
    }
}
