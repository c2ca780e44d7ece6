//! A sync request's reads asked for together and its writes sent together, so a store
//! that pays a round trip a statement (PostgreSQL) answers a request of a hundred events
//! in a handful of them rather than a thousand.
//!
//! Before the first event, [`Known::read`] gathers every key the request names — event
//! ids, bin codes, tasks, passes, SKUs, GTINs — and asks the store for them at once, then
//! for the balances its lines need. While the events are applied, [`Known`] answers from
//! that and from what the request itself has written: a pass it opened, an event it
//! recorded. Nothing else writes these rows meanwhile (a site's writes are serialized and
//! the request is one transaction), so the answers stay true. Lines, events and the
//! widening of passes wait in [`EventWrites`] until [`Known::flush`] sends them: before a
//! read that must see them (an undo looks its line up) and at the end.

use super::SyncBatch;
use super::apply::{EventBin, EventTask, NewEvent, NewLine, PassWidening, StoredPass, SyncTx};
use super::event::Body;
use crate::master::SiteId;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use cairn_scan::wire::EventFlag;
use std::collections::{BTreeSet, HashMap, HashSet};

/// The keys a request names, each once.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct SyncKeys {
    pub events: Vec<String>,
    pub bins: Vec<String>,
    pub tasks: Vec<i64>,
    pub passes: Vec<String>,
    pub skus: Vec<String>,
    pub gtins: Vec<String>,
}

impl SyncKeys {
    /// Collects the keys of a request's readable events.
    pub fn of(batch: &SyncBatch) -> Self {
        let (mut events, mut bins, mut tasks, mut passes, mut skus, mut gtins) = (
            BTreeSet::new(),
            BTreeSet::new(),
            BTreeSet::new(),
            BTreeSet::new(),
            BTreeSet::new(),
            BTreeSet::new(),
        );
        for e in batch.events.iter().flatten() {
            events.insert(e.id.to_string());
            bins.insert(e.bin.as_str().to_owned());
            tasks.extend(e.task);
            passes.insert(e.pass.to_string());
            if let Body::Line(line) = &e.body {
                skus.insert(line.sku.as_str().to_owned());
                gtins.extend(line.gtin.clone());
            }
        }
        Self {
            events: events.into_iter().collect(),
            bins: bins.into_iter().collect(),
            tasks: tasks.into_iter().collect(),
            passes: passes.into_iter().collect(),
            skus: skus.into_iter().collect(),
            gtins: gtins.into_iter().collect(),
        }
    }
}

/// What is stored under a request's keys; a key with nothing stored is absent.
#[derive(Debug, Clone, Default)]
pub struct SyncFacts {
    /// Event id → its canonical body and flags.
    pub events: HashMap<String, (String, Vec<EventFlag>)>,
    /// Bin code → the bin.
    pub bins: HashMap<String, EventBin>,
    pub tasks: HashMap<i64, EventTask>,
    /// Pass uid → the pass.
    pub passes: HashMap<String, StoredPass>,
    /// SKU → item id.
    pub items: HashMap<String, i64>,
    /// GTIN → (item id, units per pack).
    pub packs: HashMap<String, (i64, i64)>,
}

/// Asks for each key on its own: the default of [`SyncTx::facts`].
pub fn facts_one_by_one<T: SyncTx + ?Sized>(
    tx: &T,
    site: SiteId,
    keys: &SyncKeys,
) -> Result<SyncFacts, StoreError> {
    let mut f = SyncFacts::default();
    for uid in &keys.events {
        if let Some(e) = tx.stored_event(uid)? {
            f.events.insert(uid.clone(), e);
        }
    }
    for code in &keys.bins {
        if let Some(b) = tx.bin(site, code)? {
            f.bins.insert(code.clone(), b);
        }
    }
    for &task in &keys.tasks {
        if let Some(t) = tx.task(site, task)? {
            f.tasks.insert(task, t);
        }
    }
    for uid in &keys.passes {
        if let Some(p) = tx.pass_by_uid(uid)? {
            f.passes.insert(uid.clone(), p);
        }
    }
    for sku in &keys.skus {
        if let Some(id) = tx.item_id(site, sku)? {
            f.items.insert(sku.clone(), id);
        }
    }
    for gtin in &keys.gtins {
        if let Some(p) = tx.pack(site, gtin)? {
            f.packs.insert(gtin.clone(), p);
        }
    }
    Ok(f)
}

/// The writes of accepted events not yet sent, in the order they were made.
#[derive(Debug, Clone, Default)]
pub struct EventWrites<'a> {
    /// One entry a pass, its events' widening merged.
    pub widened: Vec<PassWidening>,
    pub lines: Vec<NewLine<'a>>,
    pub events: Vec<NewEvent<'a>>,
}

impl EventWrites<'_> {
    fn is_empty(&self) -> bool {
        self.widened.is_empty() && self.lines.is_empty() && self.events.is_empty()
    }
}

/// What a request knows of the store while its events are applied.
#[derive(Debug)]
pub struct Known<'a> {
    facts: SyncFacts,
    held: HashSet<(i64, i64)>,
    pending: EventWrites<'a>,
}

impl<'a> Known<'a> {
    /// Reads what the request's events name: the stored rows, then the balances of the
    /// (bin, item) pairs its lines count.
    pub fn read(tx: &dyn SyncTx, batch: &SyncBatch) -> Result<Self, StoreError> {
        let facts = tx.facts(batch.site, &SyncKeys::of(batch))?;
        let pairs: BTreeSet<(i64, i64)> = batch
            .events
            .iter()
            .flatten()
            .filter_map(|e| match &e.body {
                Body::Line(line) => Some((
                    facts.bins.get(e.bin.as_str())?.id,
                    *facts.items.get(line.sku.as_str())?,
                )),
                _ => None,
            })
            .collect();
        let pairs: Vec<_> = pairs.into_iter().collect();
        let held = if pairs.is_empty() {
            HashSet::new()
        } else {
            tx.holdings(&pairs)?
        };
        Ok(Self {
            facts,
            held,
            pending: EventWrites::default(),
        })
    }

    /// The event stored (or recorded by this request) under `uid`.
    pub fn stored_event(&self, uid: &str) -> Option<&(String, Vec<EventFlag>)> {
        self.facts.events.get(uid)
    }

    pub fn bin(&self, code: &str) -> Option<&EventBin> {
        self.facts.bins.get(code)
    }

    pub fn task(&self, task: i64) -> Option<&EventTask> {
        self.facts.tasks.get(&task)
    }

    pub fn pass(&self, uid: &str) -> Option<&StoredPass> {
        self.facts.passes.get(uid)
    }

    pub fn item(&self, sku: &str) -> Option<i64> {
        self.facts.items.get(sku).copied()
    }

    pub fn pack(&self, gtin: &str) -> Option<(i64, i64)> {
        self.facts.packs.get(gtin).copied()
    }

    /// Whether the bin holds a non-zero balance of the item (balances do not change
    /// during a sync).
    pub fn holds(&self, bin: i64, item: i64) -> bool {
        self.held.contains(&(bin, item))
    }

    /// Records a pass this request wrote.
    pub fn opened(&mut self, uid: &str, pass: StoredPass) {
        self.facts.passes.insert(uid.to_owned(), pass);
    }

    /// Widens a stored pass: earliest first scan, widest uncertainty, reassigned if any
    /// event was.
    pub fn widen(&mut self, pass: i64, at: Timestamp, uncertainty_ms: i64, reassigned: bool) {
        match self.pending.widened.iter_mut().find(|w| w.pass == pass) {
            Some(w) => {
                w.at = w.at.min(at);
                w.uncertainty_ms = w.uncertainty_ms.max(uncertainty_ms);
                w.reassigned |= reassigned;
            }
            None => self.pending.widened.push(PassWidening {
                pass,
                at,
                uncertainty_ms,
                reassigned,
            }),
        }
    }

    pub fn line(&mut self, line: NewLine<'a>) {
        self.pending.lines.push(line);
    }

    /// Records an accepted event: a resend later in the request finds it.
    pub fn record(&mut self, event: NewEvent<'a>) {
        self.facts.events.insert(
            event.event.id.to_string(),
            (event.event.canonical.clone(), event.flags.clone()),
        );
        self.pending.events.push(event);
    }

    /// Sends the writes waiting, if any.
    pub fn flush(&mut self, tx: &dyn SyncTx) -> Result<(), StoreError> {
        if self.pending.is_empty() {
            return Ok(());
        }
        tx.write_events(&std::mem::take(&mut self.pending))
    }
}
