//! SQL of the review: the differences waiting for a decision, a result's
//! evidence and history, decisions (an approval posts its one count-adjustment
//! movement through the ledger's own insert path, in the same transaction as
//! its review row) and the feed of posted adjustments.

use super::{SqliteStore, Tx};
use crate::accounts::UserId;
use crate::master::SiteId;
use crate::review::decide::{DecisionFacts, ReviewTx};
use crate::review::store::{
    AdjustmentRow, DifferenceDetail, DifferenceFilter, DifferenceRow, NewDecision, OtherRow,
    RecountRow, ReviewRow, ReviewStore, ScanLine, WindowMove,
};
use crate::review::{
    AUTO_REASON_CODE, Candidate, MAX_FEED_ROWS, MAX_LIST_ROWS, ReasonCode, ReviewPolicy,
    default_reasons, value_minor,
};
use crate::store::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use rusqlite::{Connection, OptionalExtension, Row, Transaction, params};
use std::collections::BTreeSet;

pub use crate::review::decide::COUNT_SOURCE;
/// Most movements the detail page lists around a window.
const MAX_WINDOW_MOVES: i64 = 200;
/// Least time shown on each side of a window on the detail page, ms.
const MIN_WINDOW_PAD_MS: i64 = 60_000;
/// How many links of recounts (a recount of a recount...) the counter rule follows.
const MAX_RECOUNT_DEPTH: usize = 8;

const ROW_COLUMNS: &str =
    "r.id, b.code, z.code, i.sku, i.description, r.lot, coalesce(r.class, ''),
     r.counted, r.f_star, r.variance, r.unit_cost_minor, r.status, r.counted_at, r.settled,
     r.settles_at, u.name, coalesce(r.recount_outcome, ''),
     exists (select 1 from count_result r0 cross join count_task_recheck k
                 cross join count_task t
             where r0.pass_id = r.pass_id and r0.item_id = r.item_id and r0.lot = r.lot
               and k.result_id = r0.id and t.id = k.task_id
               and t.status <> 'done' and t.withdrawn_at is null)";

const ROW_JOINS: &str = "from count_result r
     join bin b on b.id = r.bin_id
     join zone z on z.id = b.zone_id
     join item i on i.id = r.item_id
     join count_pass p on p.id = r.pass_id
     join user_account u on u.id = p.user_id";

fn difference_row(r: &Row) -> rusqlite::Result<DifferenceRow> {
    let variance: i64 = r.get(9)?;
    let cost: i64 = r.get(10)?;
    Ok(DifferenceRow {
        id: r.get(0)?,
        bin: r.get(1)?,
        zone: r.get(2)?,
        sku: r.get(3)?,
        description: r.get(4)?,
        lot: r.get(5)?,
        class: r.get(6)?,
        counted: r.get(7)?,
        f_star: r.get(8)?,
        variance,
        unit_cost_minor: cost,
        value_minor: value_minor(variance, cost),
        status: r.get(11)?,
        counted_at: Timestamp(r.get(12)?),
        settled: r.get::<_, i64>(13)? == 1,
        settles_at: Timestamp(r.get(14)?),
        counter: r.get(15)?,
        recount: if r.get::<_, bool>(17)? {
            "pending".into()
        } else {
            r.get(16)?
        },
    })
}

fn other_row(r: &Row) -> rusqlite::Result<OtherRow> {
    Ok(OtherRow {
        id: r.get(0)?,
        counted: r.get(1)?,
        f_star: r.get(2)?,
        variance: r.get(3)?,
        verdict: r.get(4)?,
        renet_reason: r.get(5)?,
        computed_at: Timestamp(r.get(6)?),
        watermark: r.get(7)?,
        superseded_by: r.get(8)?,
    })
}

const OTHER_COLUMNS: &str = "r.id, r.counted, r.f_star, r.variance, r.verdict, r.renet_reason,
     r.computed_at, r.watermark, r.superseded_by";

/// Reads the site's review policy, or the defaults.
pub fn review_policy(conn: &Connection, site: SiteId) -> Result<ReviewPolicy, StoreError> {
    Ok(conn
        .prepare_cached(
            "select manager_value_minor, bulk_value_minor from netting_settings where site_id = ?1",
        )?
        .query_row([site.0], |r| {
            Ok(ReviewPolicy {
                manager_value_minor: r.get(0)?,
                bulk_value_minor: r.get(1)?,
            })
        })
        .optional()?
        .unwrap_or_default())
}

/// Reads the site's reason codes by label, or the defaults while it has none.
pub fn reason_codes(conn: &Connection, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
    let mut stored = super::netting::reason_codes(conn, site)?;
    if stored.is_empty() {
        return Ok(default_reasons());
    }
    stored.sort_by(|a, b| a.label.cmp(&b.label));
    Ok(stored)
}

/// Stores the default reason codes for a site that has none, so a decision
/// names a code the site's list holds.
fn seed_reason_codes(tx: &Transaction, site: SiteId) -> Result<(), StoreError> {
    let has: bool = tx
        .prepare_cached("select exists (select 1 from reason_code where site_id = ?1)")?
        .query_row([site.0], |r| r.get(0))?;
    if has {
        return Ok(());
    }
    let mut insert =
        tx.prepare_cached("insert into reason_code (site_id, code, label) values (?1, ?2, ?3)")?;
    for r in default_reasons() {
        insert.execute(params![site.0, r.code, r.label])?;
    }
    Ok(())
}

/// Lists current out-of-tolerance results without a decision, oldest first.
pub fn differences(
    conn: &Connection,
    site: SiteId,
    f: &DifferenceFilter,
    now: Timestamp,
) -> Result<Vec<DifferenceRow>, StoreError> {
    const HOUR_MS: i64 = 3_600_000;
    let sql = format!(
        "select {ROW_COLUMNS} {ROW_JOINS}
         where r.site_id = ?1 and r.verdict = 'out_of_tolerance' and r.superseded_by is null
           and not exists (select 1 from count_review v where v.result_id = r.id)
           and not exists (select 1 from count_task t where t.id = p.task_id
                                                   and t.recount_of is not null)
           and (?2 is null or r.class = ?2)
           and (?3 is null or z.code = ?3)
           and (?4 is null or abs(r.variance) * r.unit_cost_minor >= ?4)
           and (?5 is null or abs(r.variance) * r.unit_cost_minor <= ?5)
           and (?6 is null or r.counted_at <= ?6)
           and (?7 is null or r.counted_at >= ?7)
         order by r.counted_at, r.id limit ?8"
    );
    let age = |h: Option<i64>| h.map(|h| now.0.saturating_sub(h.saturating_mul(HOUR_MS)));
    let limit = f.limit.clamp(1, MAX_LIST_ROWS) as i64;
    let rows = conn
        .prepare_cached(&sql)?
        .query_map(
            params![
                site.0,
                f.class.map(|c| c.to_string()),
                f.zone,
                f.min_value_minor,
                f.max_value_minor,
                age(f.min_age_h),
                age(f.max_age_h),
                limit
            ],
            difference_row,
        )?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}

/// The stored facts of one result a decision and its page need.
struct ResultFacts {
    verdict: String,
    superseded_by: Option<i64>,
    renet_reason: String,
    window_start: i64,
    window_end: i64,
    evidence: String,
    watermark: i64,
    computed_at: i64,
    pass_id: i64,
    bin_id: i64,
    item_id: i64,
    lot: String,
}

fn result_facts(conn: &Connection, site: SiteId, id: i64) -> rusqlite::Result<Option<ResultFacts>> {
    conn.prepare_cached(
        "select verdict, superseded_by, renet_reason, window_start, window_end, evidence,
                watermark, computed_at, pass_id, bin_id, item_id, lot
         from count_result where id = ?1 and site_id = ?2",
    )?
    .query_row(params![id, site.0], |r| {
        Ok(ResultFacts {
            verdict: r.get(0)?,
            superseded_by: r.get(1)?,
            renet_reason: r.get(2)?,
            window_start: r.get(3)?,
            window_end: r.get(4)?,
            evidence: r.get(5)?,
            watermark: r.get(6)?,
            computed_at: r.get(7)?,
            pass_id: r.get(8)?,
            bin_id: r.get(9)?,
            item_id: r.get(10)?,
            lot: r.get(11)?,
        })
    })
    .optional()
}

/// Returns every pass that belongs to the count of `pass`: the pass itself,
/// the counts it rechecks and the recounts of it, followed a few links deep.
fn linked_passes(conn: &Connection, pass: i64, bin_id: i64) -> rusqlite::Result<BTreeSet<i64>> {
    let mut passes = BTreeSet::from([pass]);
    let mut rechecked = conn.prepare_cached(
        "select r.pass_id from count_pass p
         join count_task_recheck k on k.task_id = p.task_id
         join count_result r on r.id = k.result_id
         where p.id = ?1",
    )?;
    let mut recounts = conn.prepare_cached(
        "select p.id from count_result r
         join count_task_recheck k on k.result_id = r.id
         join count_pass p on p.task_id = k.task_id
         where r.pass_id = ?1 and p.bin_id = ?2",
    )?;
    for _ in 0..MAX_RECOUNT_DEPTH {
        let mut found = BTreeSet::new();
        for &p in &passes {
            for q in rechecked.query_map([p], |r| r.get::<_, i64>(0))? {
                found.insert(q?);
            }
            for q in recounts.query_map(params![p, bin_id], |r| r.get::<_, i64>(0))? {
                found.insert(q?);
            }
        }
        let before = passes.len();
        passes.extend(found);
        if passes.len() == before {
            break;
        }
    }
    Ok(passes)
}

/// Returns who counted the bin for a result: every user of its linked passes.
fn counters(conn: &Connection, pass: i64, bin_id: i64) -> rusqlite::Result<Vec<UserId>> {
    let mut stmt = conn.prepare_cached("select user_id from count_pass where id = ?1")?;
    let mut users = BTreeSet::new();
    for p in linked_passes(conn, pass, bin_id)? {
        users.insert(stmt.query_row([p], |r| r.get::<_, i64>(0))?);
    }
    Ok(users.into_iter().map(UserId).collect())
}

/// Reads one result with everything its page shows.
pub fn difference(
    conn: &Connection,
    site: SiteId,
    id: i64,
) -> Result<Option<DifferenceDetail>, StoreError> {
    let Some(f) = result_facts(conn, site, id)? else {
        return Ok(None);
    };
    let row = conn
        .prepare_cached(&format!("select {ROW_COLUMNS} {ROW_JOINS} where r.id = ?1"))?
        .query_row([id], difference_row)?;
    let (counter_name, first_at, done_at, uncertainty): (String, i64, Option<i64>, i64) = conn
        .prepare_cached(
            "select u.display_name, p.first_at, p.done_at, p.uncertainty_ms
             from count_pass p join user_account u on u.id = p.user_id where p.id = ?1",
        )?
        .query_row([f.pass_id], |r| {
            Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
        })?;
    let history = conn
        .prepare_cached(&format!(
            "select {OTHER_COLUMNS} from count_result r
             where r.pass_id = ?1 and r.bin_id = ?2 and r.item_id = ?3 and r.lot = ?4 and r.id <> ?5
             order by r.id"
        ))?
        .query_map(
            params![f.pass_id, f.bin_id, f.item_id, f.lot, id],
            other_row,
        )?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let max_u: i64 = conn
        .prepare_cached(
            "select coalesce(max(uncertainty_ms), 0) from source_timing where site_id = ?1",
        )?
        .query_row([site.0], |r| r.get(0))?;
    let pad = max_u
        .max((f.window_end - f.window_start) / 2)
        .max(MIN_WINDOW_PAD_MS);
    let moves = conn
        .prepare_cached(
            "select m.id, m.uid, m.qty, m.kind, m.event_at, m.recorded_at, m.source,
                    coalesce(st.uncertainty_ms, 0)
             from movement m
             left join source_timing st on st.site_id = m.site_id and st.source = m.source
             where m.bin_id = ?1 and m.item_id = ?2 and m.lot = ?3
               and m.event_at >= ?4 and m.event_at <= ?5
             order by m.event_at, m.id limit ?6",
        )?
        .query_map(
            params![
                f.bin_id,
                f.item_id,
                f.lot,
                f.window_start.saturating_sub(pad),
                f.window_end.saturating_add(pad),
                MAX_WINDOW_MOVES
            ],
            |r| {
                Ok(WindowMove {
                    seq: r.get(0)?,
                    uid: r.get(1)?,
                    qty: r.get(2)?,
                    kind: r.get(3)?,
                    event_at: Timestamp(r.get(4)?),
                    recorded_at: Timestamp(r.get(5)?),
                    source: r.get(6)?,
                    uncertainty_ms: r.get(7)?,
                })
            },
        )?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let scans = conn
        .prepare_cached(
            "select l.at, l.qty, l.packs, l.entry from count_line l
             where l.pass_id = ?1 and l.item_id = ?2 and l.lot = ?3
               and not exists (select 1 from count_line_undo u where u.line_uid = l.uid)
             order by l.at, l.id",
        )?
        .query_map(params![f.pass_id, f.item_id, f.lot], |r| {
            Ok(ScanLine {
                at: Timestamp(r.get(0)?),
                qty: r.get(1)?,
                packs: r.get(2)?,
                entry: r.get(3)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let review = conn
        .prepare_cached(
            "select v.id, v.decision, v.reason_code, v.note, u.name, v.decided_at, m.uid
             from count_review v join user_account u on u.id = v.decided_by
             left join movement m on m.id = v.movement_id
             where v.result_id = ?1",
        )?
        .query_row([id], |r| {
            Ok(ReviewRow {
                id: r.get(0)?,
                decision: r.get(1)?,
                reason_code: r.get(2)?,
                note: r.get(3)?,
                decided_by: r.get(4)?,
                decided_at: Timestamp(r.get(5)?),
                movement: r.get(6)?,
            })
        })
        .optional()?;
    let recounts = recounts(conn, &f)?;
    let automatic = super::auto_adjust::of_result(conn, id)?;
    Ok(Some(DifferenceDetail {
        row,
        verdict: f.verdict,
        superseded_by: f.superseded_by,
        renet_reason: f.renet_reason,
        window_start: Timestamp(f.window_start),
        window_end: Timestamp(f.window_end),
        evidence: f.evidence,
        watermark: f.watermark,
        computed_at: Timestamp(f.computed_at),
        counter_name,
        pass_first_at: Timestamp(first_at),
        pass_done_at: done_at.map(Timestamp),
        pass_uncertainty_ms: uncertainty,
        history,
        moves,
        scans,
        review,
        automatic,
        recounts,
    }))
}

/// Lists the recount tasks of a result's count and what each found for the key.
fn recounts(conn: &Connection, f: &ResultFacts) -> Result<Vec<RecountRow>, StoreError> {
    let tasks = conn
        .prepare_cached(
            "select distinct t.id,
                    case when t.withdrawn_at is null then t.status else 'withdrawn' end
             from count_result r join count_task_recheck k on k.result_id = r.id
             join count_task t on t.id = k.task_id
             where r.pass_id = ?1 and r.bin_id = ?2 order by t.id",
        )?
        .query_map(params![f.pass_id, f.bin_id], |r| {
            Ok((r.get::<_, i64>(0)?, r.get::<_, String>(1)?))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    let mut out = Vec::with_capacity(tasks.len());
    for (task, status) in tasks {
        let pass: Option<(i64, String)> = conn
            .prepare_cached(
                "select p.id, u.name from count_pass p join user_account u on u.id = p.user_id
                 where p.task_id = ?1 order by p.id desc limit 1",
            )?
            .query_row([task], |r| Ok((r.get(0)?, r.get(1)?)))
            .optional()?;
        let result = match &pass {
            None => None,
            Some((pass, _)) => conn
                .prepare_cached(&format!(
                    "select {OTHER_COLUMNS} from count_result r
                     where r.pass_id = ?1 and r.item_id = ?2 and r.lot = ?3
                     order by r.superseded_by is not null, r.id desc limit 1"
                ))?
                .query_row(params![pass, f.item_id, f.lot], other_row)
                .optional()?,
        };
        out.push(RecountRow {
            task,
            status,
            counter: pass.map(|(_, name)| name).unwrap_or_default(),
            result,
        });
    }
    Ok(out)
}

fn decision_facts(
    tx: &Transaction,
    site: SiteId,
    id: i64,
) -> Result<Option<DecisionFacts>, StoreError> {
    let Some(facts) = result_facts(tx, site, id)? else {
        return Ok(None);
    };
    let row = tx
        .prepare_cached(&format!("select {ROW_COLUMNS} {ROW_JOINS} where r.id = ?1"))?
        .query_row([id], difference_row)?;
    let decided: Option<String> = tx
        .prepare_cached("select decision from count_review where result_id = ?1")?
        .query_row([id], |r| r.get(0))
        .optional()?;
    let counters = counters(tx, facts.pass_id, facts.bin_id)?;
    Ok(Some(DecisionFacts {
        candidate: Candidate {
            id,
            verdict: facts.verdict.clone(),
            superseded_by: facts.superseded_by,
            decided,
            settled: row.settled,
            settles_at: row.settles_at,
            value_minor: row.value_minor,
            recount_pending: row.recount == "pending",
            counters,
        },
        evidence: facts.evidence,
        variance: row.variance,
        bin: row.bin,
        sku: row.sku,
        lot: facts.lot,
    }))
}

fn insert_review(tx: &Transaction, d: &NewDecision, decision: &str) -> Result<i64, StoreError> {
    tx.prepare_cached(
        "insert into count_review (result_id, decision, reason_code, note, decided_by, decided_at)
         values (?1, ?2, ?3, ?4, ?5, ?6)",
    )?
    .execute(params![
        d.result,
        decision,
        d.reason,
        d.note,
        d.decider.user.0,
        d.at.0
    ])?;
    Ok(tx.last_insert_rowid())
}

/// Lists posted count adjustments after ledger sequence `after`: approved ones and those
/// posted automatically (no review, no approver, reason [`AUTO_REASON_CODE`], approved at
/// the instant they were posted), in one ledger order.
pub fn adjustments(
    conn: &Connection,
    site: SiteId,
    after: i64,
    limit: usize,
) -> Result<Vec<AdjustmentRow>, StoreError> {
    let limit = limit.clamp(1, MAX_FEED_ROWS) as i64;
    let rows = conn
        .prepare_cached(
            "select m.uid, m.id, b.code, i.sku, m.lot, m.qty, m.event_at, v.id,
                    coalesce(v.result_id, a.result_id), coalesce(v.reason_code, ?4),
                    coalesce(u.name, ''), coalesce(v.decided_at, a.posted_at), a.id is not null
             from movement m
             left join count_review v on v.movement_id = m.id
             left join count_auto_adjustment a on a.movement_id = m.id
             join bin b on b.id = m.bin_id
             join item i on i.id = m.item_id
             left join user_account u on u.id = v.decided_by
             where m.site_id = ?1 and m.id > ?2 and m.kind = 'count_adjustment'
               and (v.id is not null or a.id is not null)
             order by m.id limit ?3",
        )?
        .query_map(params![site.0, after, limit, AUTO_REASON_CODE], |r| {
            Ok(AdjustmentRow {
                id: r.get(0)?,
                seq: r.get(1)?,
                bin: r.get(2)?,
                sku: r.get(3)?,
                lot: r.get(4)?,
                qty: r.get(5)?,
                event_at: Timestamp(r.get(6)?),
                review: r.get(7)?,
                result: r.get(8)?,
                reason_code: r.get(9)?,
                approver: r.get(10)?,
                approved_at: Timestamp(r.get(11)?),
                automatic: r.get(12)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}

#[async_trait]
impl ReviewStore for SqliteStore {
    async fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError> {
        self.readers.run(move |c| review_policy(c, site)).await
    }

    async fn review_reasons(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
        self.readers.run(move |c| reason_codes(c, site)).await
    }

    async fn differences(
        &self,
        site: SiteId,
        filter: DifferenceFilter,
        now: Timestamp,
    ) -> Result<Vec<DifferenceRow>, StoreError> {
        self.readers
            .run(move |c| differences(c, site, &filter, now))
            .await
    }

    async fn difference(
        &self,
        site: SiteId,
        id: i64,
    ) -> Result<Option<DifferenceDetail>, StoreError> {
        self.readers.run(move |c| difference(c, site, id)).await
    }

    async fn adjustments(
        &self,
        site: SiteId,
        after: i64,
        limit: usize,
    ) -> Result<Vec<AdjustmentRow>, StoreError> {
        self.readers
            .run(move |c| adjustments(c, site, after, limit))
            .await
    }
}

impl ReviewTx for Tx<'_> {
    fn seed_reason_codes(&self, site: SiteId) -> Result<(), StoreError> {
        seed_reason_codes(self, site)
    }

    fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError> {
        review_policy(self, site)
    }

    fn reason_codes(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
        reason_codes(self, site)
    }

    fn decision_facts(
        &self,
        site: SiteId,
        result: i64,
    ) -> Result<Option<DecisionFacts>, StoreError> {
        decision_facts(self, site, result)
    }

    fn insert_review(&self, d: &NewDecision, decision: &str) -> Result<i64, StoreError> {
        insert_review(self, d, decision)
    }

    fn set_review_movement(&self, review: i64, movement: i64) -> Result<(), StoreError> {
        self.prepare_cached("update count_review set movement_id = ?1 where id = ?2")?
            .execute(params![movement, review])?;
        Ok(())
    }
}
