//! Applying a phone's sync request, one workflow in one transaction (DESIGN §3, §6):
//! every event gets a result, in the order sent; an event already stored is acknowledged
//! again (or named a conflict when its content differs); each new event is checked against
//! what is stored — its bin, its maker, its task (a recount is blind and by someone else; a
//! withdrawn one takes no new count), the plausibility of its corrected time, its pass, its
//! label or line — and then recorded. Every check of an event comes before its first
//! write, so a refused event leaves nothing behind. Passes whose times cannot be trusted
//! ([`plausible`]) are marked held before netting sees them. The store answers the queries
//! of [`SyncTx`]; the request's reads are asked for together before its first event and
//! its lines and events written together ([`super::gather`]).

use super::SyncBatch;
use super::clock::ClockSample;
use super::event::{Body, Event, Line};
use super::gather::{EventWrites, Known, SyncFacts, SyncKeys};
use super::plausible::{self, Sampled, TaskFloor};
use crate::accounts::DeviceId;
use crate::master::SiteId;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use cairn_scan::wire::{EventFlag, EventResult};
use chrono::NaiveDate;
use std::collections::{BTreeMap, HashSet};

/// The bin an event names, with its place for the label check.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct EventBin {
    pub id: i64,
    pub zone: String,
    pub aisle: u16,
    pub bay: u16,
    pub level: u8,
}

/// A task an event names, as the checks need it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct EventTask {
    pub bin: i64,
    pub bin_code: String,
    /// Who holds the task's run (empty when no one does).
    pub holder: String,
    /// The list's day, `YYYY-MM-DD`, a local day at the site.
    pub day: String,
    pub built_at: Timestamp,
    /// For a recount: when the pass it re-checks was marked done.
    pub recheck_done_at: Option<Timestamp>,
    pub is_recount: bool,
    /// Why the task was withdrawn, when it was.
    pub withdrawn: Option<String>,
}

impl EventTask {
    /// Returns the earliest moment the task could have been known to a phone.
    fn floor(&self, zone: SiteZone) -> Result<TaskFloor, StoreError> {
        if let Some(done) = self.recheck_done_at {
            return Ok(TaskFloor::Recount(done));
        }
        let day = NaiveDate::parse_from_str(&self.day, "%Y-%m-%d")
            .map_err(|e| anyhow::anyhow!("a count list has the day '{}': {e}", self.day))?;
        Ok(TaskFloor::Listed(zone.start_of(day).min(self.built_at)))
    }
}

/// A pass already stored.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoredPass {
    pub id: i64,
    pub bin: i64,
    pub task: Option<i64>,
    pub user: i64,
}

/// What the trust check needs of a stored pass.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PassTrust {
    /// Why it is held already, if it is.
    pub held: Option<String>,
    pub first: Timestamp,
    pub done: Option<Timestamp>,
    /// The clock sample of the sync that first carried the pass.
    pub first_sample: Option<Sampled>,
}

/// A new pass to write.
#[derive(Debug, Clone, Copy)]
pub struct NewPass<'a> {
    pub uid: &'a str,
    pub site: SiteId,
    pub bin: i64,
    pub task: Option<i64>,
    pub at: Timestamp,
    pub uncertainty_ms: i64,
    pub reassigned: bool,
    pub batch: &'a SyncBatch,
}

/// A count line to write.
#[derive(Debug, Clone)]
pub struct NewLine<'a> {
    pub uid: String,
    pub pass: i64,
    pub item: i64,
    pub line: &'a Line,
    pub at: Timestamp,
    pub device_at: i64,
    pub uncertainty_ms: i64,
    pub found: bool,
}

/// An accepted event to record.
#[derive(Debug, Clone)]
pub struct NewEvent<'a> {
    pub event: &'a Event,
    pub batch: &'a SyncBatch,
    pub at: Timestamp,
    pub uncertainty_ms: i64,
    pub flags: Vec<EventFlag>,
}

/// A stored pass widened by a request's events: earliest first scan, widest uncertainty.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PassWidening {
    pub pass: i64,
    pub at: Timestamp,
    pub uncertainty_ms: i64,
    pub reassigned: bool,
}

/// The queries and writes of a sync request; each method one query or one write, except
/// the four that take a request's worth at once ([`SyncTx::swap_clock`], [`SyncTx::facts`],
/// [`SyncTx::holdings`], [`SyncTx::write_events`]), whose defaults call the one-at-a-time
/// methods.
pub trait SyncTx {
    /// The stored event with this id: its canonical body and flags.
    fn stored_event(&self, uid: &str) -> Result<Option<(String, Vec<EventFlag>)>, StoreError>;
    /// The clock sample a device's previous sync left, if any.
    fn previous_clock(&self, device: DeviceId) -> Result<Option<Sampled>, StoreError>;
    fn save_clock(
        &self,
        device: DeviceId,
        clock: &ClockSample,
        at: Timestamp,
    ) -> Result<(), StoreError>;
    /// Saves a device's clock sample and returns the one its previous sync left, if any.
    /// By default [`SyncTx::previous_clock`] then [`SyncTx::save_clock`].
    fn swap_clock(
        &self,
        device: DeviceId,
        clock: &ClockSample,
        at: Timestamp,
    ) -> Result<Option<Sampled>, StoreError> {
        let previous = self.previous_clock(device)?;
        self.save_clock(device, clock, at)?;
        Ok(previous)
    }
    fn pass_trust(&self, pass: i64) -> Result<PassTrust, StoreError>;
    /// Marks a pass held with `reason` unless it is held already.
    fn hold_pass(&self, pass: i64, reason: &str) -> Result<(), StoreError>;
    fn bin(&self, site: SiteId, code: &str) -> Result<Option<EventBin>, StoreError>;
    fn task(&self, site: SiteId, task: i64) -> Result<Option<EventTask>, StoreError>;
    /// Whether `user` counted a key that recount task `task` re-checks.
    fn would_recount_own_count(&self, task: i64, user: &str) -> Result<bool, StoreError>;
    fn pass_by_uid(&self, uid: &str) -> Result<Option<StoredPass>, StoreError>;
    fn item_id(&self, site: SiteId, sku: &str) -> Result<Option<i64>, StoreError>;
    /// The item and units of a pack by its GTIN.
    fn pack(&self, site: SiteId, gtin: &str) -> Result<Option<(i64, i64)>, StoreError>;
    /// Whether the bin holds a non-zero balance of the item.
    fn bin_holds(&self, bin: i64, item: i64) -> Result<bool, StoreError>;
    /// Widens a stored pass by an event: earliest first scan, widest uncertainty.
    fn extend_pass(
        &self,
        pass: i64,
        at: Timestamp,
        uncertainty_ms: i64,
        reassigned: bool,
    ) -> Result<(), StoreError>;
    fn insert_pass(&self, p: &NewPass<'_>) -> Result<i64, StoreError>;
    /// Marks an open task started.
    fn start_task(&self, task: i64) -> Result<(), StoreError>;
    fn insert_line(&self, l: &NewLine<'_>) -> Result<(), StoreError>;
    /// The uid of the pass a line belongs to, if the line is stored.
    fn line_pass(&self, line: &str) -> Result<Option<String>, StoreError>;
    /// Undoes a line; false when it was undone already.
    fn undo_line(
        &self,
        line: &str,
        undo: &str,
        pass: &str,
        at: Timestamp,
    ) -> Result<bool, StoreError>;
    fn mark_empty(&self, pass: i64) -> Result<(), StoreError>;
    /// Marks a pass done at `at` (the latest done wins).
    fn mark_done(&self, pass: i64, at: Timestamp) -> Result<(), StoreError>;
    /// Marks a task done at `at` and its bin counted whole that day.
    fn finish_task(&self, site: SiteId, task: i64, at: Timestamp) -> Result<(), StoreError>;
    fn insert_event(&self, e: &NewEvent<'_>) -> Result<(), StoreError>;

    /// What is stored under each of `keys`: events, bins, tasks, passes, items and packs
    /// (a key with nothing stored is absent from the answer).
    fn facts(&self, site: SiteId, keys: &SyncKeys) -> Result<SyncFacts, StoreError> {
        super::gather::facts_one_by_one(self, site, keys)
    }
    /// Which of the (bin, item) pairs hold a non-zero balance.
    fn holdings(&self, pairs: &[(i64, i64)]) -> Result<HashSet<(i64, i64)>, StoreError> {
        let mut held = HashSet::new();
        for &(bin, item) in pairs {
            if self.bin_holds(bin, item)? {
                held.insert((bin, item));
            }
        }
        Ok(held)
    }
    /// Writes the widened passes, then the lines, then the events, each in the order given.
    fn write_events(&self, w: &EventWrites<'_>) -> Result<(), StoreError> {
        for p in &w.widened {
            self.extend_pass(p.pass, p.at, p.uncertainty_ms, p.reassigned)?;
        }
        for l in &w.lines {
            self.insert_line(l)?;
        }
        for e in &w.events {
            self.insert_event(e)?;
        }
        Ok(())
    }
}

/// Why an event was refused, or a store failure that aborts the whole request.
enum Refusal {
    Event(String),
    Store(StoreError),
}

impl From<StoreError> for Refusal {
    fn from(e: StoreError) -> Self {
        Refusal::Store(e)
    }
}

fn refuse<T>(why: impl Into<String>) -> Result<T, Refusal> {
    Err(Refusal::Event(why.into()))
}

/// Applies a sync request: every event gets a result, in the order sent.
pub fn apply_batch(tx: &dyn SyncTx, batch: &SyncBatch) -> Result<Vec<EventResult>, StoreError> {
    let sample = Sampled::of(&batch.clock, batch.received_at);
    let mut device_step = None;
    if let Some(device) = batch.sender.device {
        device_step = tx
            .swap_clock(device, &batch.clock, batch.received_at)?
            .and_then(|prev| plausible::clock_step(prev, sample));
    }
    let mut known = Known::read(tx, batch)?;
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
        if let Some((body, flags)) = known.stored_event(&id) {
            results.push(if *body == event.canonical {
                EventResult::accepted(&id, true, flags.clone())
            } else {
                EventResult::conflict(&id)
            });
            continue;
        }
        match apply_event(tx, &mut known, batch, event) {
            Ok((flags, pass)) => {
                touched.entry(pass).or_default().push(results.len());
                results.push(EventResult::accepted(&id, false, flags));
            }
            Err(Refusal::Event(why)) => results.push(EventResult::rejected(&id, why)),
            Err(Refusal::Store(e)) => return Err(e),
        }
    }
    known.flush(tx)?;
    for (pass, places) in touched {
        if hold_if_untrusted(tx, pass, sample, device_step)? {
            for i in places {
                results[i].flags.push(EventFlag::Held);
            }
        }
    }
    Ok(results)
}

/// Marks pass `pass` held when its times cannot be trusted: the phone's clock stepped
/// since its previous sync (`device_step`) or since the sync that first carried the pass,
/// or the pass spans too long. Says whether the pass is held (now or before).
fn hold_if_untrusted(
    tx: &dyn SyncTx,
    pass: i64,
    sample: Sampled,
    device_step: Option<i64>,
) -> Result<bool, StoreError> {
    let trust = tx.pass_trust(pass)?;
    if trust.held.is_some() {
        return Ok(true);
    }
    let step = device_step.or_else(|| {
        trust
            .first_sample
            .and_then(|f| plausible::clock_step(f, sample))
    });
    let reason = match step {
        Some(step) => Some(plausible::step_reason(step)),
        None => trust
            .done
            .and_then(|done| plausible::span_reason(trust.first, done)),
    };
    let Some(reason) = reason else {
        return Ok(false);
    };
    tx.hold_pass(pass, &reason)?;
    Ok(true)
}

/// Applies one event; returns its flags and the pass it went to. Every check comes
/// before the first write, so a refused event changes nothing.
fn apply_event<'a>(
    tx: &dyn SyncTx,
    known: &mut Known<'a>,
    batch: &'a SyncBatch,
    event: &'a Event,
) -> Result<(Vec<EventFlag>, i64), Refusal> {
    let (at, uncertainty) = batch.clock.correct(event.device_at);
    let site = batch.site;
    let Some(bin) = known.bin(event.bin.as_str()).cloned() else {
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
        let Some(row) = known.task(task).cloned() else {
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
        if row.is_recount && tx.would_recount_own_count(task, &batch.sender.user_name)? {
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
    let pass = known.pass(&pass_uid).cloned();
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
            let (item, found) = check_line(known, bin.id, line)?;
            if found {
                flags.push(EventFlag::FoundStock);
            }
            line_item = Some(item);
        }
        // An undo is checked by making it: it is the one write before the pass's.
        Body::Undo { line } => {
            let line_uid = line.to_string();
            known.flush(tx)?;
            if tx.line_pass(&line_uid)?.is_some_and(|o| o != pass_uid) {
                return refuse(format!("line {line_uid} is not a line of count {pass_uid}"));
            }
            if !tx.undo_line(&line_uid, &event.id.to_string(), &pass_uid, at)? {
                return refuse(format!("line {line_uid} was undone already"));
            }
        }
        _ => {}
    }

    let reassigned = flags.contains(&EventFlag::Reassigned);
    let pass_id = match pass {
        Some(p) => {
            known.widen(p.id, at, uncertainty, reassigned);
            p.id
        }
        None => {
            let id = tx.insert_pass(&NewPass {
                uid: &pass_uid,
                site,
                bin: bin.id,
                task: event.task,
                at,
                uncertainty_ms: uncertainty,
                reassigned,
                batch,
            })?;
            known.opened(
                &pass_uid,
                StoredPass {
                    id,
                    bin: bin.id,
                    task: event.task,
                    user: batch.sender.user.0,
                },
            );
            id
        }
    };

    match &event.body {
        Body::BinOpened { .. } => {
            if let Some(task) = event.task {
                tx.start_task(task)?;
            }
        }
        Body::Line(line) => known.line(NewLine {
            uid: event.id.to_string(),
            pass: pass_id,
            item: line_item.expect("a line's item was resolved above"),
            line,
            at,
            device_at: event.device_at,
            uncertainty_ms: uncertainty,
            found: flags.contains(&EventFlag::FoundStock),
        }),
        Body::Undo { .. } => {}
        Body::BinEmpty => tx.mark_empty(pass_id)?,
        Body::BinDone => {
            tx.mark_done(pass_id, at)?;
            if let Some(task) = event.task {
                tx.finish_task(site, task, at)?;
            }
        }
    }
    known.record(NewEvent {
        event,
        batch,
        at,
        uncertainty_ms: uncertainty,
        flags: flags.clone(),
    });
    Ok((flags, pass_id))
}

/// Resolves a line's item and checks its pack; says whether the bin was not expected
/// to hold the item (no non-zero balance of it there).
fn check_line(known: &Known<'_>, bin: i64, line: &Line) -> Result<(i64, bool), Refusal> {
    let Some(item) = known.item(line.sku.as_str()) else {
        return refuse(format!("no item {} at this site", line.sku));
    };
    if let Some(gtin) = &line.gtin {
        let Some((pack_item, units)) = known.pack(gtin) else {
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
    Ok((item, !known.holds(bin, item)))
}
