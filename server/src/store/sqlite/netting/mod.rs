//! SQL of the netting service: gathering a pass's facts, writing `count_result` rows
//! (a re-net supersedes, the old row stays), recount tasks on the day's list, recount
//! outcomes and settling; the site's netting policy is in `policy`, the reads behind the
//! routes and `cairn net` in `reads`. Every write here runs inside the transaction that brought the news: the
//! sync request that marked a bin done (or sent a late line), or the movement batch
//! that changed a key's history. The decisions are `netting::service`'s.

use crate::master::SiteId;
use crate::netting::rule::{BookState, CountTiming, KeyCount, KeyResult, Status};
use crate::netting::service::{
    self, Evidence, KeyFacts, LedgerMove, Netted, NettingSettings, ReasonCode, SourceTimingRow,
    Sources, VERDICT_HIT, VERDICT_OUT,
};
use crate::netting::tolerance::{Tolerance, Verdict};
use crate::planning::abc::Class;
use crate::store::StoreError;
use crate::store::sqlite::ledger::{self, Key};
use crate::time::Timestamp;
use rusqlite::{Connection, OptionalExtension, Transaction, params};
use serde::Serialize;
use std::collections::{BTreeMap, BTreeSet, HashSet};

mod policy;
mod reads;
mod recounts;
pub use policy::*;
pub use reads::*;

/// The stored status of a key whose re-net found nothing left to net (not scanned and
/// zero throughout the window): the book now agrees with a count of 0.
pub const STATUS_NOTHING_TO_NET: &str = "nothing_to_net";
/// Most results one page returns.
pub const MAX_RESULTS_PAGE: usize = 1_000;
/// Most movement ids a re-net reason names before it says "and N more".
const REASON_IDS: usize = 5;
/// Estimated seconds of a recount task when the first task's estimate is unknown.
const RECOUNT_EST_S: i64 = 120;

fn json<T: Serialize>(v: &T) -> Result<String, StoreError> {
    Ok(serde_json::to_string(v).map_err(anyhow::Error::from)?)
}

// ---------------------------------------------------------------------------
// Netting a pass.

/// A pass as the netting needs it.
#[derive(Debug, Clone)]
struct PassFacts {
    id: i64,
    uid: String,
    site: SiteId,
    bin_id: i64,
    bin_code: String,
    task_est_s: Option<i64>,
    user_name: String,
    timing: CountTiming,
    /// The recount or supervisor-count task this pass was made against, if any.
    recount_task: Option<i64>,
    /// That task was withdrawn: the pass is netted as evidence and decides nothing.
    withdrawn: bool,
    /// Why the pass's times cannot be trusted, when they cannot (`count_pass.held`).
    held: Option<String>,
}

fn pass_facts(conn: &Connection, pass_id: i64) -> Result<Option<PassFacts>, StoreError> {
    Ok(conn
        .prepare_cached(
            "select p.id, p.uid, p.site_id, p.bin_id, b.code, p.task_id, t.est_s, u.name,
                    p.first_at, p.done_at, p.uncertainty_ms,
                    case when t.recount_of is not null then t.id end,
                    coalesce(t.withdrawn_at is not null, 0), p.held
             from count_pass p join bin b on b.id = p.bin_id
             join user_account u on u.id = p.user_id
             left join count_task t on t.id = p.task_id
             where p.id = ?1",
        )?
        .query_row([pass_id], |r| {
            Ok(PassFacts {
                id: r.get(0)?,
                uid: r.get(1)?,
                site: SiteId(r.get(2)?),
                bin_id: r.get(3)?,
                bin_code: r.get(4)?,
                task_est_s: r.get(6)?,
                user_name: r.get(7)?,
                timing: CountTiming {
                    first_scan: Timestamp(r.get(8)?),
                    done: r.get::<_, Option<i64>>(9)?.map(Timestamp),
                    clock_uncertainty_ms: r.get(10)?,
                },
                recount_task: r.get(11)?,
                withdrawn: r.get(12)?,
                held: r.get(13)?,
            })
        })
        .optional()?)
}

/// A key of a bin: item and lot.
type ItemLot = (i64, String);

/// The current (not superseded) result of one key of a pass.
struct Current {
    id: i64,
    status: String,
    evidence: Evidence,
}

fn current_result(
    conn: &Connection,
    pass_id: i64,
    key: &ItemLot,
) -> Result<Option<Current>, StoreError> {
    let row = conn
        .prepare_cached(
            "select id, status, evidence from count_result
             where pass_id = ?1 and item_id = ?2 and lot = ?3 and superseded_by is null",
        )?
        .query_row(params![pass_id, key.0, key.1], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, String>(2)?,
            ))
        })
        .optional()?;
    row.map(|(id, status, ev)| {
        let evidence: Evidence = serde_json::from_str(&ev)
            .map_err(|e| anyhow::anyhow!("count_result {id} has unreadable evidence: {e}"))?;
        Ok(Current {
            id,
            status,
            evidence,
        })
    })
    .transpose()
}

fn item_facts(conn: &Connection, item: i64) -> Result<(String, i64, Option<Class>), StoreError> {
    let (sku, cost): (String, i64) = conn
        .prepare_cached("select sku, unit_cost_minor from item where id = ?1")?
        .query_row([item], |r| Ok((r.get(0)?, r.get(1)?)))?;
    let class: Option<String> = conn
        .prepare_cached(
            "select class from item_class where item_id = ?1 order by run_id desc limit 1",
        )?
        .query_row([item], |r| r.get(0))
        .optional()?;
    Ok((sku, cost, class.as_deref().and_then(Class::parse)))
}

fn key_moves(
    conn: &Connection,
    key: &Key,
    from: i64,
    to: i64,
) -> Result<Vec<LedgerMove>, StoreError> {
    let rows = conn
        .prepare_cached(
            "select id, uid, event_at, qty, kind, source from movement indexed by movement_key_time
             where bin_id = ?1 and item_id = ?2 and lot = ?3 and event_at >= ?4 and event_at <= ?5
             order by event_at, id",
        )?
        .query_map(params![key.bin_id, key.item_id, key.lot, from, to], |r| {
            Ok(LedgerMove {
                id: r.get(0)?,
                uid: r.get(1)?,
                event_at: Timestamp(r.get(2)?),
                delta: r.get(3)?,
                kind: r.get(4)?,
                source: r.get(5)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}

#[allow(clippy::too_many_arguments)]
/// Builds the result of a key the re-net no longer finds anything to net for: the
/// count of 0 and a book of 0 throughout the bin's window agree.
fn vanished(
    pass: &PassFacts,
    item_id: i64,
    lot: &str,
    sku: String,
    class: Option<Class>,
    cost: i64,
    sources: &Sources,
    settings: &NettingSettings,
) -> Option<Netted> {
    let window = pass.timing.key_window(KeyCount::NotScanned)?;
    let settles_at = crate::netting::rule::settles_after(&pass.timing, &sources.timings())?;
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
        item_id,
        lot: lot.to_string(),
        class,
        unit_cost_minor: cost,
        counted: 0,
        f_star: 0,
        variance: 0,
        status: Status::NoMovesInWindow,
        verdict: VERDICT_HIT,
        counted_at: pass.timing.done.unwrap_or(pass.timing.first_scan),
        window,
        settles_at,
        evidence: Evidence {
            sku,
            timing: pass.timing,
            history_from: service::history_from(&pass.timing, sources),
            balance_before: 0,
            netting,
            moves: Vec::new(),
            tolerance: settings.tolerance_for(class),
            judged: Verdict::Exact,
            settles_at,
        },
    })
}

/// What netting a pass wrote.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct NetOutcome {
    /// Results written (first nettings and superseding rows).
    pub written: Vec<i64>,
    /// Recount and supervisor-count tasks added to a day's list.
    pub tasks: Vec<i64>,
}

/// Nets a pass marked done: every counted key and every key of the bin with a non-zero
/// balance in the window (or only the keys in `only`). A key whose netting equals its
/// current result keeps it; otherwise a new row is written and supersedes the old one,
/// with `reason` as its `renet_reason`. Out-of-tolerance first counts get a recount
/// task; a recount pass decides its first result's outcome. Does nothing for an open pass.
pub fn net_pass(
    tx: &Transaction,
    pass_id: i64,
    only: Option<&HashSet<ItemLot>>,
    reason: &str,
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut out = NetOutcome::default();
    let Some(pass) = pass_facts(tx, pass_id)? else {
        return Err(StoreError::NotFound(format!("no count pass {pass_id}")));
    };
    let Some(done) = pass.timing.done else {
        return Ok(out);
    };
    let settings = netting_settings(tx, pass.site)?;
    let sources = Sources::new(&source_timings(tx, pass.site)?);
    let watermark = ledger::watermark(tx)?;
    let history_from = service::history_from(&pass.timing, &sources);
    // No key's window ends after the bin's, and no movement stamped later than its
    // source's uncertainty after that can reach into it.
    let history_to = done
        .plus_ms(pass.timing.clock_uncertainty_ms.max(0))
        .plus_ms(sources.max_uncertainty_ms());

    // Counted keys: the sum of the lines not undone, and the last scan.
    let mut counted: BTreeMap<ItemLot, (i64, i64)> = BTreeMap::new();
    for row in tx
        .prepare_cached(
            "select l.item_id, l.lot, sum(l.qty), max(l.at) from count_line l
             where l.pass_id = ?1
               and not exists (select 1 from count_line_undo u where u.line_uid = l.uid)
             group by l.item_id, l.lot",
        )?
        .query_map([pass.id], |r| {
            Ok(((r.get(0)?, r.get(1)?), (r.get(2)?, r.get(3)?)))
        })?
    {
        let (k, v) = row?;
        counted.insert(k, v);
    }
    // Every key the bin has ever held, and every key this pass has a result for.
    let mut keys: BTreeSet<ItemLot> = counted.keys().cloned().collect();
    for row in tx
        .prepare_cached("select item_id, lot from balance where bin_id = ?1")?
        .query_map([pass.bin_id], |r| Ok((r.get(0)?, r.get(1)?)))?
    {
        keys.insert(row?);
    }
    // Keys with a current result: only these have a result to compare with.
    let mut netted: BTreeSet<ItemLot> = BTreeSet::new();
    for row in tx
        .prepare_cached(
            "select item_id, lot from count_result where pass_id = ?1 and superseded_by is null",
        )?
        .query_map([pass.id], |r| Ok((r.get(0)?, r.get(1)?)))?
    {
        let key = row?;
        keys.insert(key.clone());
        netted.insert(key);
    }
    // The keys a recount pass re-checks, each with its first count's pass.
    let targets = match pass.recount_task {
        Some(task) => recounts::rechecked_keys(tx, task)?,
        None => Vec::new(),
    };
    for (k, _) in &targets {
        keys.insert(k.clone());
    }
    if keys.len() > service::MAX_KEYS_PER_PASS {
        return Err(anyhow::anyhow!(
            "count {} touches {} keys, more than {}",
            pass.uid,
            keys.len(),
            service::MAX_KEYS_PER_PASS
        )
        .into());
    }

    let mut changed = Vec::new();
    for key in keys {
        if only.is_some_and(|o| !o.contains(&key)) {
            continue;
        }
        let ledger_key = Key {
            bin_id: pass.bin_id,
            item_id: key.0,
            lot: key.1.clone(),
        };
        let (sku, cost, class) = item_facts(tx, key.0)?;
        let count = match counted.get(&key) {
            Some(&(qty, last)) => KeyCount::Scanned {
                qty,
                last: Timestamp(last),
            },
            None => KeyCount::NotScanned,
        };
        let facts = KeyFacts {
            item_id: key.0,
            sku: sku.clone(),
            lot: key.1.clone(),
            class,
            unit_cost_minor: cost,
            count,
            balance_before: ledger::balance_as_of(tx, &ledger_key, history_from.0 - 1)?,
            moves: key_moves(tx, &ledger_key, history_from.0, history_to.0)?,
        };
        let current = if netted.contains(&key) {
            current_result(tx, pass.id, &key)?
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
                    (
                        vanished(&pass, key.0, &key.1, sku, class, cost, &sources, &settings),
                        true,
                    )
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
        let id = insert_result(
            tx,
            &pass,
            &fresh,
            status,
            watermark,
            now,
            if current.is_some() { reason } else { "" },
        )?;
        if let Some(c) = &current {
            tx.prepare_cached("update count_result set superseded_by = ?1 where id = ?2")?
                .execute(params![id, c.id])?;
        }
        out.written.push(id);
        changed.push((key, id, fresh.verdict, current.is_some()));
    }

    let recent = recounts::Sent { watermark, now };
    if pass.recount_task.is_none() {
        // The out-of-tolerance keys of a first count go to one recount of the bin.
        let mut out_keys = Vec::new();
        for (key, id, verdict, _) in &changed {
            if *verdict == VERDICT_OUT && recounts::live_tasks_of(tx, pass.id, key)? == 0 {
                out_keys.push(*id);
            }
        }
        out.tasks
            .extend(recounts::send(tx, &pass, &out_keys, false, &recent)?);
        // Re-checked keys of this pass changed under their recounts: re-apply them.
        let mut decide = Vec::new();
        for (key, _, _, renetted) in &changed {
            // A key netted for the first time has had no result a recount could re-check.
            if *renetted && let Some(rc) = recounts::latest_recount_pass(tx, pass.id, key)? {
                decide.push((key.clone(), rc));
            }
        }
        out.tasks
            .extend(recounts::decide(tx, pass.id, &decide, &recent)?);
        recounts::withdraw_unneeded(tx, pass.id, reason, now)?;
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
                .extend(recounts::decide(tx, first_pass, &decide, &recent)?);
            recounts::withdraw_unneeded(tx, first_pass, reason, now)?;
        }
    }
    Ok(out)
}

#[allow(clippy::too_many_arguments)]
fn insert_result(
    tx: &Transaction,
    pass: &PassFacts,
    n: &Netted,
    status: &str,
    watermark: i64,
    now: Timestamp,
    reason: &str,
) -> Result<i64, StoreError> {
    tx.prepare_cached(
        "insert into count_result (pass_id, site_id, bin_id, item_id, lot, class, counted,
             f_star, variance, status, verdict, unit_cost_minor, counted_at, window_start,
             window_end, evidence, watermark, settles_at, settled, renet_reason, computed_at)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17,
                 ?18, ?19, ?20, ?21)",
    )?
    .execute(params![
        pass.id,
        pass.site.0,
        pass.bin_id,
        n.item_id,
        n.lot,
        n.class.map(Class::as_str),
        n.counted,
        n.f_star,
        n.variance,
        status,
        n.verdict,
        n.unit_cost_minor,
        n.counted_at.0,
        n.window.start.0,
        n.window.end.0,
        json(&n.evidence)?,
        watermark,
        n.settles_at.0,
        now > n.settles_at,
        reason,
        now.0
    ])?;
    Ok(tx.last_insert_rowid())
}

// ---------------------------------------------------------------------------
// Hooks: sync and the ledger.

/// Nets the passes a sync request touched: each accepted new event's pass, if the
/// pass is marked done. A pass netted before gets superseding rows only for keys that
/// changed, with a reason naming the late events.
pub fn after_sync(
    tx: &Transaction,
    batch: &crate::sync::SyncBatch,
    results: &[cairn_scan::wire::EventResult],
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut touched: BTreeMap<String, Vec<String>> = BTreeMap::new();
    for (event, result) in batch.events.iter().zip(results) {
        if let Ok(e) = event
            && result.status == cairn_scan::wire::EventStatus::Accepted
            && !result.repeat
        {
            touched
                .entry(e.pass.to_string())
                .or_default()
                .push(e.id.to_string());
        }
    }
    let mut out = NetOutcome::default();
    for (pass_uid, events) in touched {
        let Some((pass_id, netted_before)) = tx
            .prepare_cached(
                "select p.id, exists (select 1 from count_result r where r.pass_id = p.id)
                 from count_pass p where p.uid = ?1 and p.done_at is not null",
            )?
            .query_row([&pass_uid], |r| {
                Ok((r.get::<_, i64>(0)?, r.get::<_, bool>(1)?))
            })
            .optional()?
        else {
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
        let o = net_pass(tx, pass_id, None, &reason, now)?;
        out.written.extend(o.written);
        out.tasks.extend(o.tasks);
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

/// A movement just written, as the re-net hook needs it.
#[derive(Debug, Clone)]
pub struct NewMove {
    pub uid: String,
    pub key: Key,
    pub event_at: i64,
    pub source: String,
}

/// Re-nets every key of a pass marked done that a newly written movement may change:
/// same bin and key, and `event_at − source uncertainty ≤ e + u` (`rule::must_renet`).
/// Runs in the movement batch's transaction, so a result and the ledger never disagree.
pub fn renet_after_movements(
    tx: &Transaction,
    site: SiteId,
    moves: &[NewMove],
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let mut out = NetOutcome::default();
    if moves.is_empty() {
        return Ok(out);
    }
    // Most batches meet no done pass at all: one look decides.
    let widest: Option<i64> = tx
        .prepare_cached(
            "select max(uncertainty_ms) from count_pass where site_id = ?1 and done_at is not null",
        )?
        .query_row([site.0], |r| r.get(0))?;
    let Some(widest_u) = widest else {
        return Ok(out);
    };
    let sources = Sources::new(&source_timings(tx, site)?);
    // (pass, key) -> the movements that re-net it.
    let mut due: BTreeMap<(i64, ItemLot), Vec<String>> = BTreeMap::new();
    let mut passes = tx.prepare_cached(
        "select id, first_at, done_at, uncertainty_ms from count_pass
         where bin_id = ?1 and done_at is not null and done_at >= ?2",
    )?;
    for m in moves {
        let su = sources.uncertainty_ms(&m.source);
        let reach = m.event_at - su - widest_u;
        let rows = passes
            .query_map(params![m.key.bin_id, reach], |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    CountTiming {
                        first_scan: Timestamp(r.get(1)?),
                        done: Some(Timestamp(r.get(2)?)),
                        clock_uncertainty_ms: r.get(3)?,
                    },
                ))
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?;
        let key: ItemLot = (m.key.item_id, m.key.lot.clone());
        for (pass, timing) in rows {
            if crate::netting::rule::must_renet(&key, &timing, &key, Timestamp(m.event_at), su) {
                due.entry((pass, key.clone()))
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
        let o = net_pass(tx, pass, Some(&only), &reason, now)?;
        out.written.extend(o.written);
        out.tasks.extend(o.tasks);
    }
    Ok(out)
}

/// What a settling pass did.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct SettleOutcome {
    /// Results newly marked settled.
    pub settled: usize,
    /// Count adjustments posted automatically (sites that allow it), oldest result first.
    pub adjusted: Vec<crate::review::store::AutoAdjustment>,
}

/// Marks every current result whose settling instant has passed as settled, then posts
/// the automatic adjustments now due (`auto_adjust::post_due`) in the same transaction.
/// A result already settled when it was netted (its settling instant had passed) is
/// picked up by the next pass, like any other settled result.
pub fn settle_due(
    tx: &Transaction,
    now: Timestamp,
    snapshot_every: i64,
) -> Result<SettleOutcome, StoreError> {
    let settled = tx
        .prepare_cached(
            "update count_result set settled = 1
             where settled = 0 and superseded_by is null and settles_at < ?1",
        )?
        .execute([now.0])?;
    let adjusted = super::auto_adjust::post_due(tx, now, snapshot_every)?;
    Ok(SettleOutcome { settled, adjusted })
}

/// Re-nets every pass marked done of a site, or one pass; for support after a policy
/// change. Returns what was written.
pub fn renet_passes(
    tx: &Transaction,
    site: SiteId,
    pass: Option<&str>,
    reason: &str,
    now: Timestamp,
) -> Result<NetOutcome, StoreError> {
    let ids = tx
        .prepare_cached(
            "select id from count_pass where site_id = ?1 and done_at is not null
               and (?2 is null or uid = ?2 or cast(id as text) = ?2)
             order by done_at, id",
        )?
        .query_map(params![site.0, pass], |r| r.get(0))?
        .collect::<rusqlite::Result<Vec<i64>>>()?;
    let mut out = NetOutcome::default();
    for id in ids {
        let o = net_pass(tx, id, None, reason, now)?;
        out.written.extend(o.written);
        out.tasks.extend(o.tasks);
    }
    Ok(out)
}
