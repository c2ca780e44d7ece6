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

/// What netting asks of a bin's keys: the balance from every movement stamped at or before
/// `before`, and the moves stamped in `[from, to]` (see [`NettingTx::keys_facts`]).
#[derive(Debug, Clone, Copy)]
pub struct KeysAsk<'a> {
    pub bin: i64,
    pub keys: &'a [ItemLot],
    pub before: Timestamp,
    pub from: Timestamp,
    pub to: Timestamp,
}

/// A pass to net, the keys to net (all when `None`) and why a changed key's new row
/// supersedes its old one (see [`net`]).
#[derive(Debug, Clone, Copy)]
pub struct NetJob<'a> {
    pub pass: i64,
    pub only: Option<&'a HashSet<ItemLot>>,
    pub reason: &'a str,
}

/// Most passes [`net_many`] reads in one go.
pub const PASSES_PER_ROUND: usize = 256;

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
    /// [`NettingTx::pass_read`] of several passes, in their order. By default one after
    /// another; a store whose round trips cost more than its queries reads them together.
    fn pass_reads(&self, passes: &[i64]) -> Result<Vec<Option<PassRead>>, StoreError> {
        passes.iter().map(|&p| self.pass_read(p)).collect()
    }
    /// [`NettingTx::keys_facts`] of several bins, in their order. By default one after
    /// another; a store whose round trips cost more than its queries reads them together.
    fn keys_facts_many(&self, asks: &[KeysAsk<'_>]) -> Result<Vec<Vec<KeyRead>>, StoreError> {
        asks.iter()
            .map(|a| self.keys_facts(a.bin, a.keys, a.before, a.from, a.to))
            .collect()
    }
    /// Writes a result; returns its id.
    fn insert_result(&self, r: &NewResult<'_>) -> Result<i64, StoreError>;
    /// Writes results (of one pass or several), in order; returns their ids in the same
    /// order. By default one [`NettingTx::insert_result`] each.
    fn insert_results(&self, rows: &[NewResult<'_>]) -> Result<Vec<i64>, StoreError> {
        rows.iter().map(|r| self.insert_result(r)).collect()
    }
    /// Marks result `old` superseded by `new`.
    fn supersede(&self, old: i64, new: i64) -> Result<(), StoreError>;

    /// A pass by uid if it is marked done, and whether it has any result yet.
    fn done_pass_by_uid(&self, uid: &str) -> Result<Option<(i64, bool)>, StoreError>;
    /// [`NettingTx::done_pass_by_uid`] of several uids, in their order. By default one
    /// after another.
    fn done_passes_by_uid(&self, uids: &[&str]) -> Result<Vec<Option<(i64, bool)>>, StoreError> {
        uids.iter().map(|u| self.done_pass_by_uid(u)).collect()
    }
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

/// Checks that the store answered for every one of the `asked` things it was given:
/// a short answer would net keys against the wrong facts.
fn answered(verb: &str, got: usize, asked: usize, what: &str) -> Result<(), StoreError> {
    if got == asked {
        return Ok(());
    }
    Err(anyhow::anyhow!("the store {verb} {got} of {asked} {what}").into())
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
    let Some(read) = tx.pass_read(pass_id)? else {
        return Err(StoreError::NotFound(format!("no count pass {pass_id}")));
    };
    net_read(tx, read, only, reason, now)
}

/// Nets several passes, in order, with the same outcome as [`net`] of each in turn, but
/// reading and writing first counts of different bins together: their reads in one go,
/// then their results in one write, then each pass's recount work in turn. A first count
/// reads nothing another bin's netting writes (its own results, lines and tasks, its bin's
/// ledger), so reading it before the other's writes changes nothing. A recount pass, or a
/// second pass of a bin already in the group, waits for the next group.
pub fn net_many<T: NettingTx + ?Sized>(
    tx: &T,
    jobs: &[NetJob<'_>],
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut out = NetOutcome::default();
    let mut rest = jobs;
    while !rest.is_empty() {
        // A pass named twice waits: its second netting must see the first one's writes.
        let mut named = HashSet::new();
        let round = rest
            .iter()
            .take(PASSES_PER_ROUND)
            .take_while(|j| named.insert(j.pass))
            .count();
        let ids: Vec<i64> = rest[..round].iter().map(|j| j.pass).collect();
        let reads = tx.pass_reads(&ids)?;
        answered("read", reads.len(), ids.len(), "passes")?;
        let mut bins = HashSet::new();
        let mut group = Vec::new();
        for (job, read) in rest.iter().zip(reads) {
            let Some(read) = read else {
                if group.is_empty() {
                    return Err(StoreError::NotFound(format!("no count pass {}", job.pass)));
                }
                break;
            };
            let alone = read.facts.recount_task.is_some() || !bins.insert(read.facts.bin_id);
            if alone && !group.is_empty() {
                break;
            }
            group.push((job, read));
            if alone {
                break;
            }
        }
        rest = &rest[group.len()..];
        if let [(job, _)] = group.as_slice() {
            let (job, read) = (*job, group.pop().expect("one pass").1);
            out.add(net_read(tx, read, job.only, job.reason, now)?);
            continue;
        }
        out.add(net_group(tx, group, now)?);
    }
    Ok(out)
}

/// Nets a pass already read (see [`net`]).
fn net_read<T: NettingTx + ?Sized>(
    tx: &T,
    read: PassRead,
    only: Option<&HashSet<ItemLot>>,
    reason: &str,
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let Some(plan) = Plan::of(read, only)? else {
        return Ok(NetOutcome::default());
    };
    let reads = tx.keys_facts(
        plan.pass.bin_id,
        &plan.keys,
        plan.history_from.plus_ms(-1),
        plan.history_from,
        plan.history_to,
    )?;
    let judged = plan.judge(tx, reads)?;
    let ids = tx.insert_results(&judged.new_rows(reason, now))?;
    judged.finish(tx, ids, reason, now)
}

/// Nets first counts of different bins together (see [`net_many`]).
fn net_group<T: NettingTx + ?Sized>(
    tx: &T,
    group: Vec<(&NetJob<'_>, PassRead)>,
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut plans = Vec::with_capacity(group.len());
    for (job, read) in group {
        if let Some(plan) = Plan::of(read, job.only)? {
            plans.push((job, plan));
        }
    }
    let asks: Vec<KeysAsk<'_>> = plans
        .iter()
        .map(|(_, p)| KeysAsk {
            bin: p.pass.bin_id,
            keys: &p.keys,
            before: p.history_from.plus_ms(-1),
            from: p.history_from,
            to: p.history_to,
        })
        .collect();
    let reads = tx.keys_facts_many(&asks)?;
    drop(asks);
    answered("read the keys of", reads.len(), plans.len(), "passes")?;
    let mut judged = Vec::with_capacity(plans.len());
    for ((job, plan), reads) in plans.into_iter().zip(reads) {
        judged.push((job, plan.judge(tx, reads)?));
    }
    let rows: Vec<NewResult<'_>> = judged
        .iter()
        .flat_map(|(job, j)| j.new_rows(job.reason, now))
        .collect();
    let mut ids = tx.insert_results(&rows)?.into_iter();
    answered("wrote", ids.len(), rows.len(), "results")?;
    drop(rows);
    let mut out = NetOutcome::default();
    for (job, j) in judged {
        let mine: Vec<i64> = ids.by_ref().take(j.fresh_rows.len()).collect();
        out.add(j.finish(tx, mine, job.reason, now)?);
    }
    Ok(out)
}

/// A pass marked done, read, with the keys to net and the history to read of them.
struct Plan {
    pass: PassFacts,
    settings: NettingSettings,
    sources: Sources,
    watermark: i64,
    counted: BTreeMap<ItemLot, (i64, Timestamp)>,
    netted: BTreeSet<ItemLot>,
    targets: Vec<(ItemLot, i64)>,
    has_open_tasks: bool,
    keys: Vec<ItemLot>,
    history_from: Timestamp,
    history_to: Timestamp,
}

/// A pass netted, its new rows not yet written.
struct Judged {
    pass: PassFacts,
    watermark: i64,
    targets: Vec<(ItemLot, i64)>,
    has_open_tasks: bool,
    /// The keys whose netting changed: the fresh result, its status, the result it replaces.
    fresh_rows: Vec<(ItemLot, Netted, &'static str, Option<CurrentResult>)>,
}

impl Plan {
    /// Chooses the keys of a pass to net; `None` for a pass not marked done.
    fn of(read: PassRead, only: Option<&HashSet<ItemLot>>) -> Result<Option<Self>, StoreError> {
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
            return Ok(None);
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
        Ok(Some(Self {
            pass,
            settings,
            sources,
            watermark,
            counted,
            netted,
            targets,
            has_open_tasks,
            keys,
            history_from,
            history_to,
        }))
    }

    /// Nets each key from what the store read of it (`reads`, in the order of the keys).
    fn judge<T: NettingTx + ?Sized>(
        self,
        tx: &T,
        reads: Vec<KeyRead>,
    ) -> Result<Judged, StoreError> {
        let Self {
            pass,
            settings,
            sources,
            watermark,
            counted,
            netted,
            targets,
            has_open_tasks,
            keys,
            ..
        } = self;
        answered(
            "read",
            reads.len(),
            keys.len(),
            &format!("keys of count {}", pass.uid),
        )?;
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
        Ok(Judged {
            pass,
            watermark,
            targets,
            has_open_tasks,
            fresh_rows,
        })
    }
}

impl Judged {
    /// The rows to write, in the order of `fresh_rows`.
    fn new_rows<'a>(&'a self, reason: &'a str, now: Timestamp) -> Vec<NewResult<'a>> {
        self.fresh_rows
            .iter()
            .map(|(_, fresh, status, current)| NewResult {
                pass: &self.pass,
                netted: fresh,
                status,
                watermark: self.watermark,
                now,
                reason: if current.is_some() { reason } else { "" },
            })
            .collect()
    }

    /// Supersedes the rows replaced by the written ones (`ids`, in the order of
    /// [`Judged::new_rows`]) and does the recount work they call for.
    fn finish<T: NettingTx + ?Sized>(
        self,
        tx: &T,
        ids: Vec<i64>,
        reason: &str,
        now: Timestamp,
    ) -> Result<NetOutcome, StoreError> {
        let Self {
            pass,
            watermark,
            targets,
            has_open_tasks,
            fresh_rows,
        } = self;
        answered(
            "wrote",
            ids.len(),
            fresh_rows.len(),
            &format!("results of count {}", pass.uid),
        )?;
        let mut out = NetOutcome::default();
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
            // The out-of-tolerance keys of a first count go to one recount of the bin. A
            // key netted for the first time has no earlier result a task could re-check
            // (a key with results always has a current one), so no live task.
            let mut out_keys = Vec::new();
            for (key, id, verdict, renetted) in &changed {
                if *verdict == VERDICT_OUT && (!*renetted || tx.live_tasks_of(pass.id, key)? == 0) {
                    out_keys.push(*id);
                }
            }
            // With no task open before this netting there is none to add these keys to.
            out.tasks.extend(recount::send(
                tx,
                &pass,
                &out_keys,
                false,
                &sent,
                has_open_tasks,
            )?);
            // Re-checked keys of this pass changed under their recounts: re-apply them.
            let mut decide = Vec::new();
            for (key, _, _, renetted) in &changed {
                // A key netted for the first time has had no result a recount could re-check.
                if *renetted && let Some(rc) = tx.latest_recount_pass(pass.id, key)? {
                    decide.push((key.clone(), rc));
                }
            }
            let decided = decide_recounts(tx, pass.id, &decide, &sent)?;
            // Only a task open before this netting or sent by it can have become unneeded,
            // and a recount sent just now re-checks keys that are out: it is needed.
            if has_open_tasks || !decided.is_empty() {
                withdraw_unneeded(tx, pass.id, reason, now)?;
            }
            out.tasks.extend(decided);
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
    recount::send(tx, &pass, &supervise, true, sent, true)
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
    let uids: Vec<&str> = touched.keys().copied().collect();
    let found = tx.done_passes_by_uid(&uids)?;
    answered("looked up", found.len(), uids.len(), "counts")?;
    let mut passes = Vec::new();
    for ((pass_uid, events), found) in touched.into_iter().zip(found) {
        let Some((pass_id, netted_before)) = found else {
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
        passes.push((pass_id, reason));
    }
    let jobs: Vec<NetJob<'_>> = passes
        .iter()
        .map(|(pass, reason)| NetJob {
            pass: *pass,
            only: None,
            reason,
        })
        .collect();
    net_many(tx, &jobs, now)
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
    if moves.is_empty() {
        return Ok(NetOutcome::default());
    }
    // Most batches meet no done pass at all: one look decides.
    let Some(widest_u) = tx.widest_done_uncertainty(site)? else {
        return Ok(NetOutcome::default());
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
    let due: Vec<(i64, HashSet<ItemLot>, String)> = due
        .into_iter()
        .map(|((pass, key), uids)| {
            let reason = format!(
                "{} recorded after the count, stamped within its reach (event time − source \
                 uncertainty ≤ bin done + clock uncertainty)",
                name_ids("movement", &uids)
            );
            (pass, [key].into_iter().collect(), reason)
        })
        .collect();
    let jobs: Vec<NetJob<'_>> = due
        .iter()
        .map(|(pass, only, reason)| NetJob {
            pass: *pass,
            only: Some(only),
            reason,
        })
        .collect();
    net_many(tx, &jobs, now)
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
