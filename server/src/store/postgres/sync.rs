//! Phones' sync over PostgreSQL: the queries and writes of `SyncTx` (the workflow is
//! `sync::apply`'s), the phone's catalogue and the count lines support reads. The SQL
//! follows `store/sqlite/sync.rs`; a request's reads go together in two round trips and
//! its lines, events and pass widenings in one (`facts`, `holdings`, `write_events`).

use super::PgStore;
use super::tx::PgTx;
use crate::accounts::DeviceId;
use crate::master::SiteId;
use crate::planning::phone::{ItemBrief, PackBrief};
use crate::store::StoreError;
use crate::sync::apply::{
    EventBin, EventTask, NewEvent, NewLine, NewPass, PassTrust, StoredPass, SyncTx,
};
use crate::sync::clock::ClockSample;
use crate::sync::gather::{EventWrites, SyncFacts, SyncKeys};
use crate::sync::plausible::Sampled;
use crate::sync::results::StoredLine;
use crate::time::Timestamp;
use cairn_scan::wire::EventFlag;
use std::collections::HashSet;
use tokio_postgres::Row;
use tokio_postgres::types::ToSql;

/// A stored bigint as a narrower integer.
fn narrow<T: TryFrom<i64>>(r: &Row, i: usize) -> Result<T, StoreError> {
    let v: i64 = r.try_get(i)?;
    T::try_from(v).map_err(|_| anyhow::anyhow!("stored value {v} is out of range").into())
}

/// The columns a bin is read with (`bin_row`), then `$more` columns; a caller adds the
/// condition.
macro_rules! bin_sql {
    ($more:literal) => {
        concat!(
            "select b.id, z.code, b.aisle, b.bay, b.level",
            $more,
            " from bin b join zone z on z.id = b.zone_id"
        )
    };
}

fn bin_row(r: &Row) -> Result<EventBin, StoreError> {
    Ok(EventBin {
        id: r.try_get(0)?,
        zone: r.try_get(1)?,
        aisle: narrow(r, 2)?,
        bay: narrow(r, 3)?,
        level: narrow(r, 4)?,
    })
}

/// The columns a task is read with (`task_row`), then `$more` columns; a caller adds the
/// condition.
macro_rules! task_sql {
    ($more:literal) => {
        concat!(
            "select t.bin_id, coalesce(r.holder, ''), b.code, l.day, l.built_at,
                (select p.done_at from count_result c join count_pass p on p.id = c.pass_id
                 where c.id = t.recount_of),
                t.recount_of is not null,
                case when t.withdrawn_at is not null then t.withdrawn_reason end",
            $more,
            " from count_task t
             join count_list l on l.id = t.list_id join bin b on b.id = t.bin_id
             left join count_run r on r.list_id = t.list_id and r.run = t.run"
        )
    };
}

fn task_row(r: &Row) -> Result<EventTask, StoreError> {
    Ok(EventTask {
        bin: r.try_get(0)?,
        holder: r.try_get(1)?,
        bin_code: r.try_get(2)?,
        day: r.try_get(3)?,
        built_at: Timestamp(r.try_get(4)?),
        recheck_done_at: r.try_get::<_, Option<i64>>(5)?.map(Timestamp),
        is_recount: r.try_get(6)?,
        withdrawn: r.try_get(7)?,
    })
}

/// The columns a pass is read with (`pass_row`), then `$more` columns; a caller adds the
/// condition.
macro_rules! pass_sql {
    ($more:literal) => {
        concat!(
            "select id, bin_id, task_id, user_id",
            $more,
            " from count_pass"
        )
    };
}

fn pass_row(r: &Row) -> Result<StoredPass, StoreError> {
    Ok(StoredPass {
        id: r.try_get(0)?,
        bin: r.try_get(1)?,
        task: r.try_get(2)?,
        user: r.try_get(3)?,
    })
}

/// Count lines as one array a column, for a multi-row insert.
struct LineColumns {
    uid: Vec<String>,
    pass: Vec<i64>,
    item: Vec<i64>,
    lot: Vec<String>,
    expiry: Vec<Option<String>>,
    qty: Vec<i64>,
    packs: Vec<i64>,
    gtin: Vec<Option<String>>,
    entry: Vec<&'static str>,
    at: Vec<i64>,
    device_at: Vec<i64>,
    uncertainty_ms: Vec<i64>,
    found: Vec<bool>,
}

impl LineColumns {
    fn of(lines: &[NewLine<'_>]) -> Self {
        Self {
            uid: lines.iter().map(|l| l.uid.clone()).collect(),
            pass: lines.iter().map(|l| l.pass).collect(),
            item: lines.iter().map(|l| l.item).collect(),
            lot: lines.iter().map(|l| l.line.lot.clone()).collect(),
            expiry: lines
                .iter()
                .map(|l| l.line.expiry.map(|d| d.format("%Y-%m-%d").to_string()))
                .collect(),
            qty: lines.iter().map(|l| l.line.qty).collect(),
            packs: lines.iter().map(|l| l.line.packs).collect(),
            gtin: lines.iter().map(|l| l.line.gtin.clone()).collect(),
            entry: lines.iter().map(|l| l.line.entry.as_str()).collect(),
            at: lines.iter().map(|l| l.at.0).collect(),
            device_at: lines.iter().map(|l| l.device_at).collect(),
            uncertainty_ms: lines.iter().map(|l| l.uncertainty_ms).collect(),
            found: lines.iter().map(|l| l.found).collect(),
        }
    }

    fn params(&self) -> [&(dyn ToSql + Sync); 13] {
        [
            &self.uid,
            &self.pass,
            &self.item,
            &self.lot,
            &self.expiry,
            &self.qty,
            &self.packs,
            &self.gtin,
            &self.entry,
            &self.at,
            &self.device_at,
            &self.uncertainty_ms,
            &self.found,
        ]
    }
}

/// Accepted events as one array a column, for a multi-row insert.
struct EventColumns<'a> {
    uid: Vec<String>,
    site: Vec<i64>,
    user: Vec<i64>,
    device: Vec<Option<i64>>,
    pass: Vec<String>,
    kind: Vec<&'a str>,
    body: Vec<&'a str>,
    device_at: Vec<i64>,
    at: Vec<i64>,
    uncertainty_ms: Vec<i64>,
    flags: Vec<String>,
    received_at: Vec<i64>,
    made_by: Vec<&'a str>,
}

impl<'a> EventColumns<'a> {
    fn of(events: &'a [NewEvent<'a>]) -> Self {
        Self {
            uid: events.iter().map(|e| e.event.id.to_string()).collect(),
            site: events.iter().map(|e| e.batch.site.0).collect(),
            user: events.iter().map(|e| e.batch.sender.user.0).collect(),
            device: events
                .iter()
                .map(|e| e.batch.sender.device.map(|d| d.0))
                .collect(),
            pass: events.iter().map(|e| e.event.pass.to_string()).collect(),
            kind: events.iter().map(|e| e.event.kind.as_str()).collect(),
            body: events.iter().map(|e| e.event.canonical.as_str()).collect(),
            device_at: events.iter().map(|e| e.event.device_at).collect(),
            at: events.iter().map(|e| e.at.0).collect(),
            uncertainty_ms: events.iter().map(|e| e.uncertainty_ms).collect(),
            flags: events
                .iter()
                .map(|e| crate::sync::results::flag_text(&e.flags))
                .collect(),
            received_at: events.iter().map(|e| e.batch.received_at.0).collect(),
            made_by: events
                .iter()
                .map(|e| e.event.user.as_deref().unwrap_or(&e.batch.sender.user_name))
                .collect(),
        }
    }

    fn params(&self) -> [&(dyn ToSql + Sync); 13] {
        [
            &self.uid,
            &self.site,
            &self.user,
            &self.device,
            &self.pass,
            &self.kind,
            &self.body,
            &self.device_at,
            &self.at,
            &self.uncertainty_ms,
            &self.flags,
            &self.received_at,
            &self.made_by,
        ]
    }
}

/// A device's clock sample: offset, uncertainty, when it was taken.
fn sampled_row(r: &tokio_postgres::Row) -> Result<Sampled, StoreError> {
    Ok(Sampled {
        offset_ms: r.try_get(0)?,
        uncertainty_ms: r.try_get(1)?,
        at: Timestamp(r.try_get(2)?),
    })
}

impl SyncTx for PgTx<'_> {
    fn stored_event(&self, uid: &str) -> Result<Option<(String, Vec<EventFlag>)>, StoreError> {
        self.query_opt("select body, flags from sync_event where uid = $1", &[&uid])?
            .map(|r| {
                let flags: String = r.try_get(1)?;
                Ok((r.try_get(0)?, crate::sync::results::flags_of(&flags)))
            })
            .transpose()
    }

    fn previous_clock(&self, device: DeviceId) -> Result<Option<Sampled>, StoreError> {
        self.query_opt(
            "select offset_ms, uncertainty_ms, sampled_at from device_clock where device_id = $1",
            &[&device.0],
        )?
        .map(|r| sampled_row(&r))
        .transpose()
    }

    fn save_clock(
        &self,
        device: DeviceId,
        clock: &ClockSample,
        at: Timestamp,
    ) -> Result<(), StoreError> {
        self.execute(
            "insert into device_clock (device_id, offset_ms, uncertainty_ms, sampled_at)
             values ($1, $2, $3, $4)
             on conflict (device_id) do update set offset_ms = excluded.offset_ms,
                 uncertainty_ms = excluded.uncertainty_ms, sampled_at = excluded.sampled_at",
            &[&device.0, &clock.offset_ms, &clock.uncertainty_ms, &at.0],
        )?;
        Ok(())
    }

    /// One statement: the sample read in the snapshot the upsert does not change.
    fn swap_clock(
        &self,
        device: DeviceId,
        clock: &ClockSample,
        at: Timestamp,
    ) -> Result<Option<Sampled>, StoreError> {
        self.query_opt(
            "with previous as (
                 select offset_ms, uncertainty_ms, sampled_at from device_clock
                 where device_id = $1
             ), saved as (
                 insert into device_clock (device_id, offset_ms, uncertainty_ms, sampled_at)
                 values ($1, $2, $3, $4)
                 on conflict (device_id) do update set offset_ms = excluded.offset_ms,
                     uncertainty_ms = excluded.uncertainty_ms, sampled_at = excluded.sampled_at
             )
             select offset_ms, uncertainty_ms, sampled_at from previous",
            &[&device.0, &clock.offset_ms, &clock.uncertainty_ms, &at.0],
        )?
        .map(|r| sampled_row(&r))
        .transpose()
    }

    fn pass_trust(&self, pass: i64) -> Result<PassTrust, StoreError> {
        let r = self.query_one(
            "select held, first_at, done_at, clock_offset_ms, clock_uncertainty_ms,
                    clock_sampled_at
             from count_pass where id = $1",
            &[&pass],
        )?;
        let (offset, uncertainty, sampled_at): (Option<i64>, Option<i64>, Option<i64>) =
            (r.try_get(3)?, r.try_get(4)?, r.try_get(5)?);
        let first_sample = match (offset, uncertainty, sampled_at) {
            (Some(offset_ms), Some(uncertainty_ms), Some(at)) => Some(Sampled {
                offset_ms,
                uncertainty_ms,
                at: Timestamp(at),
            }),
            _ => None,
        };
        Ok(PassTrust {
            held: r.try_get(0)?,
            first: Timestamp(r.try_get(1)?),
            done: r.try_get::<_, Option<i64>>(2)?.map(Timestamp),
            first_sample,
        })
    }

    fn hold_pass(&self, pass: i64, reason: &str) -> Result<(), StoreError> {
        self.execute(
            "update count_pass set held = $2 where id = $1 and held is null",
            &[&pass, &reason],
        )?;
        Ok(())
    }

    fn bin(&self, site: SiteId, code: &str) -> Result<Option<EventBin>, StoreError> {
        self.query_opt(
            concat!(bin_sql!(""), " where b.site_id = $1 and b.code = $2"),
            &[&site.0, &code],
        )?
        .map(|r| bin_row(&r))
        .transpose()
    }

    fn task(&self, site: SiteId, task: i64) -> Result<Option<EventTask>, StoreError> {
        self.query_opt(
            concat!(task_sql!(""), " where t.id = $1 and l.site_id = $2"),
            &[&task, &site.0],
        )?
        .map(|r| task_row(&r))
        .transpose()
    }

    fn would_recount_own_count(&self, task: i64, user: &str) -> Result<bool, StoreError> {
        super::tasks::would_recount_own_count(self, task, user)
    }

    fn pass_by_uid(&self, uid: &str) -> Result<Option<StoredPass>, StoreError> {
        self.query_opt(concat!(pass_sql!(""), " where uid = $1"), &[&uid])?
            .map(|r| pass_row(&r))
            .transpose()
    }

    fn item_id(&self, site: SiteId, sku: &str) -> Result<Option<i64>, StoreError> {
        self.query_opt(
            "select id from item where site_id = $1 and sku = $2",
            &[&site.0, &sku],
        )?
        .map(|r| Ok(r.try_get(0)?))
        .transpose()
    }

    fn pack(&self, site: SiteId, gtin: &str) -> Result<Option<(i64, i64)>, StoreError> {
        self.query_opt(
            "select item_id, units from pack where site_id = $1 and gtin = $2",
            &[&site.0, &gtin],
        )?
        .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
        .transpose()
    }

    fn bin_holds(&self, bin: i64, item: i64) -> Result<bool, StoreError> {
        Ok(self
            .query_one(
                "select exists (select 1 from balance
                                where bin_id = $1 and item_id = $2 and qty <> 0)",
                &[&bin, &item],
            )?
            .try_get(0)?)
    }

    fn extend_pass(
        &self,
        pass: i64,
        at: Timestamp,
        uncertainty_ms: i64,
        reassigned: bool,
    ) -> Result<(), StoreError> {
        self.execute(
            "update count_pass set first_at = least(first_at, $2),
                 uncertainty_ms = greatest(uncertainty_ms, $3),
                 reassigned = reassigned or $4
             where id = $1",
            &[&pass, &at.0, &uncertainty_ms, &reassigned],
        )?;
        Ok(())
    }

    fn insert_pass(&self, p: &NewPass<'_>) -> Result<i64, StoreError> {
        let b = p.batch;
        Ok(self
            .query_one(
                "insert into count_pass (uid, site_id, bin_id, task_id, user_id, device_id,
                     first_at, uncertainty_ms, reassigned, received_at, clock_offset_ms,
                     clock_uncertainty_ms, clock_sampled_at)
                 values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)
                 returning id",
                &[
                    &p.uid,
                    &p.site.0,
                    &p.bin,
                    &p.task,
                    &b.sender.user.0,
                    &b.sender.device.map(|d| d.0),
                    &p.at.0,
                    &p.uncertainty_ms,
                    &p.reassigned,
                    &b.received_at.0,
                    &b.clock.offset_ms,
                    &b.clock.uncertainty_ms,
                    &b.received_at.0,
                ],
            )?
            .try_get(0)?)
    }

    fn start_task(&self, task: i64) -> Result<(), StoreError> {
        self.execute(
            "update count_task set status = 'started' where id = $1 and status = 'open'",
            &[&task],
        )?;
        Ok(())
    }

    fn insert_line(&self, l: &NewLine<'_>) -> Result<(), StoreError> {
        self.execute(
            "insert into count_line (uid, pass_id, item_id, lot, expiry, qty, packs, gtin,
                 entry, at, device_at, uncertainty_ms, found)
             values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)",
            &[
                &l.uid,
                &l.pass,
                &l.item,
                &l.line.lot,
                &l.line.expiry.map(|d| d.format("%Y-%m-%d").to_string()),
                &l.line.qty,
                &l.line.packs,
                &l.line.gtin,
                &l.line.entry.as_str(),
                &l.at.0,
                &l.device_at,
                &l.uncertainty_ms,
                &l.found,
            ],
        )?;
        Ok(())
    }

    fn line_pass(&self, line: &str) -> Result<Option<String>, StoreError> {
        self.query_opt(
            "select p.uid from count_line l join count_pass p on p.id = l.pass_id
             where l.uid = $1",
            &[&line],
        )?
        .map(|r| Ok(r.try_get(0)?))
        .transpose()
    }

    fn undo_line(
        &self,
        line: &str,
        undo: &str,
        pass: &str,
        at: Timestamp,
    ) -> Result<bool, StoreError> {
        let undone = self.execute(
            "insert into count_line_undo (line_uid, undo_uid, pass_uid, at)
             values ($1, $2, $3, $4) on conflict (line_uid) do nothing",
            &[&line, &undo, &pass, &at.0],
        )?;
        Ok(undone > 0)
    }

    fn mark_empty(&self, pass: i64) -> Result<(), StoreError> {
        self.execute("update count_pass set empty = true where id = $1", &[&pass])?;
        Ok(())
    }

    fn mark_done(&self, pass: i64, at: Timestamp) -> Result<(), StoreError> {
        self.execute(
            "update count_pass set done_at = greatest(coalesce(done_at, $2), $2) where id = $1",
            &[&pass, &at.0],
        )?;
        Ok(())
    }

    fn finish_task(&self, site: SiteId, task: i64, at: Timestamp) -> Result<(), StoreError> {
        super::tasks::finish_task(self, site, task, at)
    }

    fn insert_event(&self, e: &NewEvent<'_>) -> Result<(), StoreError> {
        let b = e.batch;
        self.execute(
            "insert into sync_event (uid, site_id, user_id, device_id, pass_uid, kind, body,
                 device_at, at, uncertainty_ms, flags, received_at, made_by)
             values ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)",
            &[
                &e.event.id.to_string(),
                &b.site.0,
                &b.sender.user.0,
                &b.sender.device.map(|d| d.0),
                &e.event.pass.to_string(),
                &e.event.kind.as_str(),
                &e.event.canonical,
                &e.event.device_at,
                &e.at.0,
                &e.uncertainty_ms,
                &crate::sync::results::flag_text(&e.flags),
                &b.received_at.0,
                &e.event.user.as_deref().unwrap_or(&b.sender.user_name),
            ],
        )?;
        Ok(())
    }

    /// Six reads sent together: one round trip for a request's keys.
    fn facts(&self, site: SiteId, keys: &SyncKeys) -> Result<SyncFacts, StoreError> {
        let events: &[&(dyn ToSql + Sync)] = &[&keys.events];
        let bins: &[&(dyn ToSql + Sync)] = &[&site.0, &keys.bins];
        let tasks: &[&(dyn ToSql + Sync)] = &[&keys.tasks, &site.0];
        let passes: &[&(dyn ToSql + Sync)] = &[&keys.passes];
        let skus: &[&(dyn ToSql + Sync)] = &[&site.0, &keys.skus];
        let gtins: &[&(dyn ToSql + Sync)] = &[&site.0, &keys.gtins];
        let (events, bins, tasks, passes, items, packs) =
            self.together("sync: a request's reads", async {
                tokio::try_join!(
                    self.rows(
                        "select uid, body, flags from sync_event where uid = any($1)",
                        events
                    ),
                    self.rows(
                        concat!(bin_sql!(", b.code"), " where b.site_id = $1 and b.code = any($2)"),
                        bins
                    ),
                    self.rows(
                        concat!(task_sql!(", t.id"), " where t.id = any($1) and l.site_id = $2"),
                        tasks
                    ),
                    self.rows(
                        concat!(pass_sql!(", uid"), " where uid = any($1)"),
                        passes
                    ),
                    self.rows(
                        "select sku, id from item where site_id = $1 and sku = any($2)",
                        skus
                    ),
                    self.rows(
                        "select gtin, item_id, units from pack where site_id = $1 and gtin = any($2)",
                        gtins
                    ),
                )
            })?;
        let mut f = SyncFacts::default();
        for r in &events {
            let flags: String = r.try_get(2)?;
            f.events.insert(
                r.try_get(0)?,
                (r.try_get(1)?, crate::sync::results::flags_of(&flags)),
            );
        }
        for r in &bins {
            f.bins.insert(r.try_get(5)?, bin_row(r)?);
        }
        for r in &tasks {
            f.tasks.insert(r.try_get(8)?, task_row(r)?);
        }
        for r in &passes {
            f.passes.insert(r.try_get(4)?, pass_row(r)?);
        }
        for r in &items {
            f.items.insert(r.try_get(0)?, r.try_get(1)?);
        }
        for r in &packs {
            f.packs
                .insert(r.try_get(0)?, (r.try_get(1)?, r.try_get(2)?));
        }
        Ok(f)
    }

    fn holdings(&self, pairs: &[(i64, i64)]) -> Result<HashSet<(i64, i64)>, StoreError> {
        let (bins, items): (Vec<i64>, Vec<i64>) = pairs.iter().copied().unzip();
        self.query(
            "select distinct b.bin_id, b.item_id
             from unnest($1::bigint[], $2::bigint[]) as k(bin, item)
             join balance b on b.bin_id = k.bin and b.item_id = k.item
             where b.qty <> 0",
            &[&bins, &items],
        )?
        .iter()
        .map(|r| Ok((r.try_get(0)?, r.try_get(1)?)))
        .collect()
    }

    /// Three statements sent together, each taking every row of its kind: the widened
    /// passes, the lines and the events (rows numbered so ids follow the order given).
    fn write_events(&self, w: &EventWrites<'_>) -> Result<(), StoreError> {
        let widened = (
            w.widened.iter().map(|p| p.pass).collect::<Vec<_>>(),
            w.widened.iter().map(|p| p.at.0).collect::<Vec<_>>(),
            w.widened
                .iter()
                .map(|p| p.uncertainty_ms)
                .collect::<Vec<_>>(),
            w.widened.iter().map(|p| p.reassigned).collect::<Vec<_>>(),
        );
        let widened: &[&(dyn ToSql + Sync)] = &[&widened.0, &widened.1, &widened.2, &widened.3];
        let lines = LineColumns::of(&w.lines);
        let lines = lines.params();
        let events = EventColumns::of(&w.events);
        let events = events.params();
        self.together("sync: a request's writes", async {
            tokio::try_join!(
                self.rows(
                    "update count_pass p set first_at = least(p.first_at, v.at),
                         uncertainty_ms = greatest(p.uncertainty_ms, v.uncertainty_ms),
                         reassigned = p.reassigned or v.reassigned
                     from unnest($1::bigint[], $2::bigint[], $3::bigint[], $4::boolean[])
                         as v(id, at, uncertainty_ms, reassigned)
                     where p.id = v.id",
                    widened
                ),
                self.rows(
                    "insert into count_line (uid, pass_id, item_id, lot, expiry, qty, packs, gtin,
                         entry, at, device_at, uncertainty_ms, found)
                     select uid, pass_id, item_id, lot, expiry, qty, packs, gtin, entry, at,
                            device_at, uncertainty_ms, found
                     from unnest($1::text[], $2::bigint[], $3::bigint[], $4::text[], $5::text[],
                                 $6::bigint[], $7::bigint[], $8::text[], $9::text[],
                                 $10::bigint[], $11::bigint[], $12::bigint[], $13::boolean[])
                         with ordinality as v(uid, pass_id, item_id, lot, expiry, qty, packs,
                             gtin, entry, at, device_at, uncertainty_ms, found, ord)
                     order by ord",
                    &lines
                ),
                self.rows(
                    "insert into sync_event (uid, site_id, user_id, device_id, pass_uid, kind,
                         body, device_at, at, uncertainty_ms, flags, received_at, made_by)
                     select uid, site_id, user_id, device_id, pass_uid, kind, body, device_at,
                            at, uncertainty_ms, flags, received_at, made_by
                     from unnest($1::text[], $2::bigint[], $3::bigint[], $4::bigint[],
                                 $5::text[], $6::text[], $7::text[], $8::bigint[], $9::bigint[],
                                 $10::bigint[], $11::text[], $12::bigint[], $13::text[])
                         with ordinality as v(uid, site_id, user_id, device_id, pass_uid, kind,
                             body, device_at, at, uncertainty_ms, flags, received_at, made_by,
                             ord)
                     order by ord",
                    &events
                ),
            )
        })?;
        Ok(())
    }
}

/// See [`crate::store::Store::catalog`]: every item of a site with its packs, no quantities.
pub async fn catalog(store: &PgStore, site: SiteId) -> Result<Vec<ItemBrief>, StoreError> {
    let c = store.client().await?;
    let mut packs: std::collections::HashMap<i64, Vec<PackBrief>> = Default::default();
    for r in c
        .query(
            "select item_id, gtin, level, units from pack where site_id = $1
             order by item_id, units",
            &[&site.0],
        )
        .await?
    {
        packs.entry(r.try_get(0)?).or_default().push(PackBrief {
            gtin: r.try_get(1)?,
            level: r.try_get(2)?,
            units: narrow(&r, 3)?,
        });
    }
    c.query(
        "select id, sku, description, base_unit, lot_tracked from item where site_id = $1
         order by sku collate \"C\"",
        &[&site.0],
    )
    .await?
    .iter()
    .map(|r| {
        let id: i64 = r.try_get(0)?;
        Ok(ItemBrief {
            sku: r.try_get(1)?,
            description: r.try_get(2)?,
            base_unit: r.try_get(3)?,
            lot_tracked: r.try_get(4)?,
            packs: packs.remove(&id).unwrap_or_default(),
        })
    })
    .collect()
}

/// See [`crate::store::Store::count_lines`]: a site's count lines in arrival order.
pub async fn count_lines(
    store: &PgStore,
    site: SiteId,
    after: i64,
    limit: usize,
) -> Result<Vec<StoredLine>, StoreError> {
    store
        .client()
        .await?
        .query(
            "select l.id, l.uid, p.uid, b.code, i.sku, l.lot, l.qty, l.at, l.found,
                    exists (select 1 from count_line_undo u where u.line_uid = l.uid)
             from count_line l join count_pass p on p.id = l.pass_id
             join bin b on b.id = p.bin_id join item i on i.id = l.item_id
             where p.site_id = $1 and l.id > $2
             order by l.id limit $3",
            &[&site.0, &after, &(limit as i64)],
        )
        .await?
        .iter()
        .map(|r| {
            Ok(StoredLine {
                seq: r.try_get(0)?,
                uid: r.try_get(1)?,
                pass: r.try_get(2)?,
                bin: r.try_get(3)?,
                sku: r.try_get(4)?,
                lot: r.try_get(5)?,
                qty: r.try_get(6)?,
                at: Timestamp(r.try_get(7)?),
                found: r.try_get(8)?,
                undone: r.try_get(9)?,
            })
        })
        .collect()
}
