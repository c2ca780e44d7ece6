//! Netting a count pass, as one workflow inside the transaction that brought the news
//! (DESIGN §4–§5): the sync request that marked a bin done or sent a late line, or the
//! movement batch that changed a key's history. The rules are here; the store answers the
//! queries and makes the writes of [`NettingTx`], one method each.
//!
//! - [`net`] nets a pass marked done: every counted key, every key the bin holds, every key
//!   the pass has a result for and every key its recount task re-checks. A key whose
//!   netting equals its current result keeps it; otherwise a new row supersedes the old.
//! - [`after_sync`] and [`after_movements`] say which passes and keys the news reaches.
//! - Out-of-tolerance first counts go to one recount of the bin; a recount pass decides the
//!   keys it re-checks ([`decide_recounts`]); a task no key needs any more is withdrawn.

use super::recount::{self, RecountTx};
use super::results::{NetOutcome, STATUS_NOTHING_TO_NET};
pub use super::results::{PassFacts, Sent};
use super::rule::{BookState, CountTiming, KeyCount, KeyResult, Status};
use super::service::{
    self, Evidence, KeyFacts, LedgerMove, Netted, NettingSettings, SourceTimingRow, Sources,
    VERDICT_HIT, VERDICT_OUT,
};
use super::tolerance::Verdict;
use crate::master::SiteId;
use crate::planning::abc::Class;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use std::collections::{BTreeMap, BTreeSet, HashSet};

/// Most ids a re-net reason names before it says "and N more".
const REASON_IDS: usize = 5;

/// A key of a bin: item id and lot (empty when not lot-tracked).
pub type ItemLot = (i64, String);

/// The current (not superseded) result of one key of a pass.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CurrentResult {
    pub id: i64,
    pub status: String,
    pub verdict: String,
    pub recount_outcome: Option<String>,
    pub unit_cost_minor: i64,
    pub evidence: Evidence,
}

/// What netting needs of an item.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ItemFacts {
    pub sku: String,
    pub unit_cost_minor: i64,
    pub class: Option<Class>,
}

/// What netting reads of one key of a bin (see [`NettingTx::keys_facts`]).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KeyRead {
    pub item: ItemFacts,
    /// The balance just before the history netting looks at.
    pub balance_before: i64,
    /// The moves in that history, in event order (ties by id).
    pub moves: Vec<LedgerMove>,
}

/// A result row to write.
#[derive(Debug, Clone, Copy)]
pub struct NewResult<'a> {
    pub pass: &'a PassFacts,
    pub netted: &'a Netted,
    pub status: &'a str,
    /// The ledger's last movement when the result was computed.
    pub watermark: i64,
    pub now: Timestamp,
    /// Why an earlier row of the key is superseded (empty for a first netting).
    pub reason: &'a str,
}

/// A task of a first count that no one has counted against yet.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct OpenTask {
    pub id: i64,
    pub list: i64,
    pub supervisor: bool,
}

/// What netting reads of a pass before it looks at the pass's keys (see
/// [`NettingTx::pass_read`]).
#[derive(Debug, Clone)]
pub struct PassRead {
    pub facts: PassFacts,
    pub settings: NettingSettings,
    pub timings: Vec<SourceTimingRow>,
    pub watermark: i64,
    /// The counted keys: the sum of the lines not undone, and the last scan.
    pub counted: BTreeMap<ItemLot, (i64, Timestamp)>,
    /// Every key the bin has ever held.
    pub bin_keys: Vec<ItemLot>,
    /// The keys with a current result.
    pub netted: Vec<ItemLot>,
    /// The keys the pass's recount task re-checks, each with its first count's pass
    /// (empty for a first count).
    pub rechecked: Vec<(ItemLot, i64)>,
    /// Whether recount tasks of this pass are open (not done, not withdrawn).
    pub has_open_tasks: bool,
}

/// The queries and writes netting makes inside one transaction. Each method is one
/// query or one write; the store implements it with its own SQL. Placing a recount is
/// part of netting ([`RecountTx`]).
pub trait NettingTx: RecountTx + crate::ledger::WatermarkTx {
    /// Reads a pass; `None` when there is no such pass.
    fn pass_facts(&self, pass: i64) -> Result<Option<PassFacts>, StoreError>;
    fn netting_settings(&self, site: SiteId) -> Result<NettingSettings, StoreError>;
    fn source_timings(&self, site: SiteId) -> Result<Vec<SourceTimingRow>, StoreError>;
    /// The counted keys of a pass: the sum of its lines not undone, and the last scan.
    fn counted_keys(&self, pass: i64) -> Result<BTreeMap<ItemLot, (i64, Timestamp)>, StoreError>;
    /// Every key the bin has ever held.
    fn bin_keys(&self, bin: i64) -> Result<Vec<ItemLot>, StoreError>;
    /// The keys of a pass that have a current result.
    fn netted_keys(&self, pass: i64) -> Result<Vec<ItemLot>, StoreError>;
    fn current_result(&self, pass: i64, key: &ItemLot)
    -> Result<Option<CurrentResult>, StoreError>;
    fn item_facts(&self, item: i64) -> Result<ItemFacts, StoreError>;
    /// The key's balance from every movement stamped at or before `at`.
    fn balance_as_of(&self, bin: i64, key: &ItemLot, at: Timestamp) -> Result<i64, StoreError>;
    /// The key's movements stamped in `[from, to]`, in event order (ties by id).
    fn key_moves(
        &self,
        bin: i64,
        key: &ItemLot,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<LedgerMove>, StoreError>;
    /// What netting reads of each of a bin's `keys`, in their order: the item, the
    /// balance from every movement stamped at or before `before`, and the moves stamped in
    /// `[from, to]`. By default the three queries above a key; a store whose round trips
    /// cost more than its queries answers every key at once.
    fn keys_facts(
        &self,
        bin: i64,
        keys: &[ItemLot],
        before: Timestamp,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<KeyRead>, StoreError> {
        keys.iter()
            .map(|key| {
                Ok(KeyRead {
                    item: self.item_facts(key.0)?,
                    balance_before: self.balance_as_of(bin, key, before)?,
                    moves: self.key_moves(bin, key, from, to)?,
                })
            })
            .collect()
    }
    /// Everything netting reads of a pass before its keys; `None` when there is no such
    /// pass. By default the queries above one after another; a store whose round trips
    /// cost more than its queries sends them together.
    fn pass_read(&self, pass: i64) -> Result<Option<PassRead>, StoreError> {
        let Some(facts) = self.pass_facts(pass)? else {
            return Ok(None);
        };
        Ok(Some(PassRead {
            settings: self.netting_settings(facts.site)?,
            timings: self.source_timings(facts.site)?,
            watermark: self.watermark()?,
            counted: self.counted_keys(pass)?,
            bin_keys: self.bin_keys(facts.bin_id)?,
            netted: self.netted_keys(pass)?,
            rechecked: match facts.recount_task {
                Some(task) => self.rechecked_keys(task)?,
                None => Vec::new(),
            },
            has_open_tasks: !self.open_tasks_of(pass)?.is_empty(),
            facts,
        }))
    }
    /// Writes a result; returns its id.
    fn insert_result(&self, r: &NewResult<'_>) -> Result<i64, StoreError>;
    /// Writes results, in order; returns their ids in the same order. By default one
    /// [`NettingTx::insert_result`] each.
    fn insert_results(&self, rows: &[NewResult<'_>]) -> Result<Vec<i64>, StoreError> {
        rows.iter().map(|r| self.insert_result(r)).collect()
    }
    /// Marks result `old` superseded by `new`.
    fn supersede(&self, old: i64, new: i64) -> Result<(), StoreError>;

    /// A pass by uid if it is marked done, and whether it has any result yet.
    fn done_pass_by_uid(&self, uid: &str) -> Result<Option<(i64, bool)>, StoreError>;
    /// The widest clock uncertainty of a site's passes marked done; `None` when none is.
    fn widest_done_uncertainty(&self, site: SiteId) -> Result<Option<i64>, StoreError>;
    /// The passes of a bin marked done at or after `done_from`, with their timing.
    fn done_passes_of_bin(
        &self,
        bin: i64,
        done_from: Timestamp,
    ) -> Result<Vec<(i64, CountTiming)>, StoreError>;
    /// A site's passes marked done (or the one named by id or uid), in done order.
    fn done_passes(&self, site: SiteId, pass: Option<&str>) -> Result<Vec<i64>, StoreError>;

    /// The keys a recount task re-checks, each with the pass of its first count.
    fn rechecked_keys(&self, task: i64) -> Result<Vec<(ItemLot, i64)>, StoreError>;
    /// The tasks not withdrawn that re-check a key of a pass.
    fn live_tasks_of(&self, pass: i64, key: &ItemLot) -> Result<i64, StoreError>;
    /// The last pass marked done, against a task not withdrawn, that re-checks a key.
    fn latest_recount_pass(&self, pass: i64, key: &ItemLot) -> Result<Option<i64>, StoreError>;
    /// Sets a first result's verdict and recount outcome in place (its evidence stays).
    fn set_recount_outcome(
        &self,
        result: i64,
        verdict: &str,
        outcome: Option<&str>,
        first_count_wrong: bool,
    ) -> Result<(), StoreError>;
    /// The tasks of a first count not done, not withdrawn and not counted against.
    fn open_tasks_of(&self, first_pass: i64) -> Result<Vec<OpenTask>, StoreError>;
    /// Withdraws a task (kept, with its reason, off its list).
    fn withdraw_task(&self, task: OpenTask, at: Timestamp, why: &str) -> Result<(), StoreError>;
}

/// Builds the result of a key the re-net no longer finds anything to net for: the count
/// of 0 and a book of 0 throughout the bin's window agree.
fn vanished(
    pass: &PassFacts,
    key: &ItemLot,
    item: ItemFacts,
    sources: &Sources,
    settings: &NettingSettings,
) -> Option<Netted> {
    let window = pass.timing.key_window(KeyCount::NotScanned)?;
    let settles_at = super::rule::settles_after(&pass.timing, &sources.timings())?;
    let netting = KeyResult {
        window,
        counted: 0,
        scanned: false,
        opening: 0,
        states: vec![BookState {
            qty: 0,
            at: None,
            moves: Vec::new(),
        }],
        nearest: 0,
        f_star: 0,
        variance: 0,
        moves_in_window: Vec::new(),
        status: Status::NoMovesInWindow,
        post_at: window.start.plus_ms(-1),
    };
    Some(Netted {
        item_id: key.0,
        lot: key.1.clone(),
        class: item.class,
        unit_cost_minor: item.unit_cost_minor,
        counted: 0,
        f_star: 0,
        variance: 0,
        status: Status::NoMovesInWindow,
        verdict: VERDICT_HIT,
        counted_at: pass.timing.done.unwrap_or(pass.timing.first_scan),
        window,
        settles_at,
        evidence: Evidence {
            sku: item.sku,
            timing: pass.timing,
            history_from: service::history_from(&pass.timing, sources),
            balance_before: 0,
            netting,
            moves: Vec::new(),
            tolerance: settings.tolerance_for(item.class),
            judged: Verdict::Exact,
            settles_at,
        },
    })
}

/// Nets pass `pass_id` if it is marked done: every key (or only those in `only`). A new
/// row supersedes a key's current result with `reason`; out-of-tolerance first counts go
/// to a recount; a recount pass decides the keys it re-checks. Nothing for an open pass.
pub fn net<T: NettingTx + ?Sized>(
    tx: &T,
    pass_id: i64,
    only: Option<&HashSet<ItemLot>>,
    reason: &str,
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut out = NetOutcome::default();
    let Some(read) = tx.pass_read(pass_id)? else {
        return Err(StoreError::NotFound(format!("no count pass {pass_id}")));
    };
    let PassRead {
        facts: pass,
        settings,
        timings,
        watermark,
        counted,
        bin_keys,
        netted,
        rechecked: targets,
        has_open_tasks,
    } = read;
    let Some(done) = pass.timing.done else {
        return Ok(out);
    };
    let sources = Sources::new(&timings);
    let history_from = service::history_from(&pass.timing, &sources);
    // No key's window ends after the bin's, and no movement stamped later than its
    // source's uncertainty after that can reach into it.
    let history_to = done
        .plus_ms(pass.timing.clock_uncertainty_ms.max(0))
        .plus_ms(sources.max_uncertainty_ms());

    let mut keys: BTreeSet<ItemLot> = counted.keys().cloned().collect();
    keys.extend(bin_keys);
    // Keys with a current result: only these have a result to compare with.
    let netted: BTreeSet<ItemLot> = netted.into_iter().collect();
    keys.extend(netted.iter().cloned());
    // The keys a recount pass re-checks, each with its first count's pass.
    keys.extend(targets.iter().map(|(k, _)| k.clone()));
    if keys.len() > service::MAX_KEYS_PER_PASS {
        return Err(anyhow::anyhow!(
            "count {} touches {} keys, more than {}",
            pass.uid,
            keys.len(),
            service::MAX_KEYS_PER_PASS
        )
        .into());
    }

    let keys: Vec<ItemLot> = keys
        .into_iter()
        .filter(|k| only.is_none_or(|o| o.contains(k)))
        .collect();
    let reads = tx.keys_facts(
        pass.bin_id,
        &keys,
        history_from.plus_ms(-1),
        history_from,
        history_to,
    )?;
    if reads.len() != keys.len() {
        return Err(anyhow::anyhow!(
            "the store read {} of {} keys of count {}",
            reads.len(),
            keys.len(),
            pass.uid
        )
        .into());
    }
    // The keys whose netting changed: the fresh result, its status, the result it replaces.
    let mut fresh_rows = Vec::new();
    for (key, read) in keys.into_iter().zip(reads) {
        let KeyRead {
            item,
            balance_before,
            moves,
        } = read;
        let count = match counted.get(&key) {
            Some(&(qty, last)) => KeyCount::Scanned { qty, last },
            None => KeyCount::NotScanned,
        };
        let facts = KeyFacts {
            item_id: key.0,
            sku: item.sku.clone(),
            lot: key.1.clone(),
            class: item.class,
            unit_cost_minor: item.unit_cost_minor,
            count,
            balance_before,
            moves,
        };
        let current = if netted.contains(&key) {
            tx.current_result(pass.id, &key)?
        } else {
            None
        };
        let is_target = targets.iter().any(|(k, _)| *k == key);
        let (fresh, vanished_row) =
            match service::net_one(&pass.timing, &facts, &sources, &settings) {
                Some(n) => (Some(n), false),
                None if is_target
                    || current
                        .as_ref()
                        .is_some_and(|c| c.status != STATUS_NOTHING_TO_NET) =>
                {
                    (vanished(&pass, &key, item, &sources, &settings), true)
                }
                None => (None, false),
            };
        let Some(mut fresh) = fresh else { continue };
        if let Some(why) = &pass.held
            && !vanished_row
        {
            service::hold(&mut fresh, why);
        }
        if let Some(c) = &current
            && !service::differs(&c.evidence, &fresh.evidence)
        {
            continue;
        }
        let status = if vanished_row {
            STATUS_NOTHING_TO_NET
        } else {
            service::status_text(fresh.status)
        };
        fresh_rows.push((key, fresh, status, current));
    }
    let new_rows: Vec<NewResult<'_>> = fresh_rows
        .iter()
        .map(|(_, fresh, status, current)| NewResult {
            pass: &pass,
            netted: fresh,
            status,
            watermark,
            now,
            reason: if current.is_some() { reason } else { "" },
        })
        .collect();
    let ids = tx.insert_results(&new_rows)?;
    if ids.len() != new_rows.len() {
        return Err(anyhow::anyhow!(
            "the store wrote {} of {} results of count {}",
            ids.len(),
            new_rows.len(),
            pass.uid
        )
        .into());
    }
    drop(new_rows);
    let mut changed = Vec::new();
    for ((key, fresh, _, current), id) in fresh_rows.into_iter().zip(ids) {
        if let Some(c) = &current {
            tx.supersede(c.id, id)?;
        }
        out.written.push(id);
        changed.push((key, id, fresh.verdict, current.is_some()));
    }

    let sent = Sent { watermark, now };
    if pass.recount_task.is_none() {
        // The out-of-tolerance keys of a first count go to one recount of the bin.
        let mut out_keys = Vec::new();
        for (key, id, verdict, _) in &changed {
            if *verdict == VERDICT_OUT && tx.live_tasks_of(pass.id, key)? == 0 {
                out_keys.push(*id);
            }
        }
        out.tasks
            .extend(recount::send(tx, &pass, &out_keys, false, &sent)?);
        // Re-checked keys of this pass changed under their recounts: re-apply them.
        let mut decide = Vec::new();
        for (key, _, _, renetted) in &changed {
            // A key netted for the first time has had no result a recount could re-check.
            if *renetted && let Some(rc) = tx.latest_recount_pass(pass.id, key)? {
                decide.push((key.clone(), rc));
            }
        }
        out.tasks
            .extend(decide_recounts(tx, pass.id, &decide, &sent)?);
        // Only a task open before this netting or sent by it can have become unneeded.
        if has_open_tasks || !out.tasks.is_empty() {
            withdraw_unneeded(tx, pass.id, reason, now)?;
        }
    } else if !pass.withdrawn {
        // A recount pass decides every key its task re-checks.
        let mut by_first: BTreeMap<i64, Vec<(ItemLot, i64)>> = BTreeMap::new();
        for (key, first_pass) in &targets {
            by_first
                .entry(*first_pass)
                .or_default()
                .push((key.clone(), pass.id));
        }
        for (first_pass, decide) in by_first {
            out.tasks
                .extend(decide_recounts(tx, first_pass, &decide, &sent)?);
            withdraw_unneeded(tx, first_pass, reason, now)?;
        }
    }
    Ok(out)
}

/// Decides keys of the first count `first_pass` from recount passes (`(key, recount
/// pass)`), then sends the keys the recounts agreed on with neither side to one
/// supervisor count (a key gets at most one). Returns the tasks added.
pub fn decide_recounts<T: NettingTx + ?Sized>(
    tx: &T,
    first_pass: i64,
    decide: &[(ItemLot, i64)],
    sent: &Sent,
) -> Result<Vec<i64>, StoreError> {
    let mut supervise = Vec::new();
    for (key, recount_pass) in decide {
        if let Some(first) = apply_recount(tx, first_pass, key, *recount_pass)?
            && tx.live_tasks_of(first_pass, key)? < 2
        {
            supervise.push(first);
        }
    }
    if supervise.is_empty() {
        return Ok(Vec::new());
    }
    let pass = tx
        .pass_facts(first_pass)?
        .ok_or_else(|| anyhow::anyhow!("count pass {first_pass} vanished"))?;
    recount::send(tx, &pass, &supervise, true, sent)
}

/// Applies the recount rule to a first result from the recount pass's result of the same
/// key: the first result's verdict, outcome and first-count-wrong mark are set in place
/// (its evidence keeps the original judgement). Returns the first result's id when the
/// recount agreed with neither side (a supervisor count is due).
fn apply_recount<T: NettingTx + ?Sized>(
    tx: &T,
    first_pass: i64,
    key: &ItemLot,
    recount_pass: i64,
) -> Result<Option<i64>, StoreError> {
    let (Some(first), Some(recount)) = (
        tx.current_result(first_pass, key)?,
        tx.current_result(recount_pass, key)?,
    ) else {
        return Ok(None);
    };
    if first.evidence.judged.is_hit() {
        // The first result became a hit by itself (a late movement): nothing to decide.
        tx.set_recount_outcome(first.id, VERDICT_HIT, None, false)?;
        return Ok(None);
    }
    let effect = service::recount_effect(
        &first.evidence.netting,
        &recount.evidence.netting,
        first.unit_cost_minor,
        &first.evidence.tolerance,
    );
    tx.set_recount_outcome(
        first.id,
        effect.verdict,
        Some(effect.outcome_text),
        effect.first_count_wrong,
    )?;
    Ok(effect.supervisor_count.then_some(first.id))
}

/// Withdraws every task of the first count `first_pass` that nobody has counted against
/// yet and that no key needs any more: a recount whose keys are all hits now, a
/// supervisor count whose keys no recount leaves undecided. A task with one key still out
/// stays for it.
pub fn withdraw_unneeded<T: NettingTx + ?Sized>(
    tx: &T,
    first_pass: i64,
    reason: &str,
    now: Timestamp,
) -> Result<(), StoreError> {
    for task in tx.open_tasks_of(first_pass)? {
        let mut needed = false;
        for (key, pass) in tx.rechecked_keys(task.id)? {
            if pass != first_pass {
                continue;
            }
            needed |= tx.current_result(pass, &key)?.is_some_and(|r| {
                r.verdict == VERDICT_OUT
                    && (!task.supervisor
                        || r.recount_outcome.as_deref() == Some("supervisor_count"))
            });
        }
        if needed {
            continue;
        }
        let why = if task.supervisor {
            "no key it re-checks waits for a supervisor count any more"
        } else {
            "no key it re-checks is out of tolerance any more"
        };
        let why = if reason.is_empty() {
            why.to_string()
        } else {
            format!("{why}: {reason}")
        };
        tx.withdraw_task(task, now, &why)?;
    }
    Ok(())
}

/// An event a sync request applied, as the netting hook needs it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AppliedEvent {
    pub pass_uid: String,
    pub event_uid: String,
}

/// Nets the passes a sync request touched (each accepted new event's pass, if it is
/// marked done). A pass netted before gets superseding rows only for keys that changed,
/// with a reason naming the late events.
pub fn after_sync<T: NettingTx + ?Sized>(
    tx: &T,
    applied: &[AppliedEvent],
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut touched: BTreeMap<&str, Vec<String>> = BTreeMap::new();
    for e in applied {
        touched
            .entry(e.pass_uid.as_str())
            .or_default()
            .push(e.event_uid.clone());
    }
    let mut out = NetOutcome::default();
    for (pass_uid, events) in touched {
        let Some((pass_id, netted_before)) = tx.done_pass_by_uid(pass_uid)? else {
            continue;
        };
        let reason = if netted_before {
            format!(
                "count {pass_uid}: {} after the bin was netted",
                name_ids("event", &events)
            )
        } else {
            String::new()
        };
        out.add(net(tx, pass_id, None, &reason, now)?);
    }
    Ok(out)
}

/// A movement just written, as the re-net needs it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WrittenMove {
    /// The ledger's id (its sequence number).
    pub id: i64,
    pub uid: String,
    pub bin_id: i64,
    pub key: ItemLot,
    pub event_at: Timestamp,
    pub source: String,
}

/// Re-nets every key of a pass marked done that a newly written movement may change: same
/// bin and key, and `event_at − source uncertainty ≤ e + u` (`rule::must_renet`). Runs in
/// the movement batch's transaction, so a result and the ledger never disagree.
pub fn after_movements<T: NettingTx + ?Sized>(
    tx: &T,
    site: SiteId,
    moves: &[WrittenMove],
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut out = NetOutcome::default();
    if moves.is_empty() {
        return Ok(out);
    }
    // Most batches meet no done pass at all: one look decides.
    let Some(widest_u) = tx.widest_done_uncertainty(site)? else {
        return Ok(out);
    };
    let sources = Sources::new(&tx.source_timings(site)?);
    // (pass, key) -> the movements that re-net it.
    let mut due: BTreeMap<(i64, ItemLot), Vec<String>> = BTreeMap::new();
    for m in moves {
        let su = sources.uncertainty_ms(&m.source);
        let reach = m.event_at.plus_ms(-su - widest_u);
        for (pass, timing) in tx.done_passes_of_bin(m.bin_id, reach)? {
            if super::rule::must_renet(&m.key, &timing, &m.key, m.event_at, su) {
                due.entry((pass, m.key.clone()))
                    .or_default()
                    .push(m.uid.clone());
            }
        }
    }
    for ((pass, key), uids) in due {
        let only: HashSet<ItemLot> = [key].into_iter().collect();
        let reason = format!(
            "{} recorded after the count, stamped within its reach (event time − source \
             uncertainty ≤ bin done + clock uncertainty)",
            name_ids("movement", &uids)
        );
        out.add(net(tx, pass, Some(&only), &reason, now)?);
    }
    Ok(out)
}

fn name_ids(what: &str, ids: &[String]) -> String {
    let shown: Vec<&str> = ids.iter().take(REASON_IDS).map(String::as_str).collect();
    let more = ids.len().saturating_sub(REASON_IDS);
    let s = if ids.len() == 1 { "" } else { "s" };
    let tail = if more > 0 {
        format!(" and {more} more")
    } else {
        String::new()
    };
    format!("{what}{s} {}{tail}", shown.join(", "))
}
