//! The review of differences over PostgreSQL: the differences waiting for a decision, a
//! result's evidence and history, decisions (`ReviewTx`; an approval posts through the
//! ledger's own write path) and the feed of posted adjustments. The SQL follows
//! `store/sqlite/review.rs`; reads that share SQL with a decision run as synchronous code
//! on a pooled connection (`PgStore::read`).

use super::PgStore;
use super::tx::PgTx;
use crate::accounts::UserId;
use crate::master::SiteId;
use crate::review::decide::{DecisionFacts, ReviewTx};
use crate::review::store::{
    AdjustmentRow, AutoAdjustment, DifferenceDetail, DifferenceFilter, DifferenceRow, NewDecision,
    OtherRow, RecountRow, ReviewRow, ReviewStore, ScanLine, WindowMove,
};
use crate::review::{
    AUTO_REASON_CODE, Candidate, MAX_FEED_ROWS, MAX_LIST_ROWS, ReasonCode, ReviewPolicy,
    default_reasons, value_minor,
};
use crate::store::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use deadpool_postgres::GenericClient;
use std::collections::BTreeSet;
use tokio_postgres::Row;

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
     exists (select 1 from count_result r0 join count_task_recheck k on k.result_id = r0.id
                 join count_task t on t.id = k.task_id
             where r0.pass_id = r.pass_id and r0.item_id = r.item_id and r0.lot = r.lot
               and t.status <> 'done' and t.withdrawn_at is null)";

const ROW_JOINS: &str = "from count_result r
     join bin b on b.id = r.bin_id
     join zone z on z.id = b.zone_id
     join item i on i.id = r.item_id
     join count_pass p on p.id = r.pass_id
     join user_account u on u.id = p.user_id";

fn difference_row(r: &Row) -> Result<DifferenceRow, StoreError> {
    let variance: i64 = r.try_get(9)?;
    let cost: i64 = r.try_get(10)?;
    Ok(DifferenceRow {
        id: r.try_get(0)?,
        bin: r.try_get(1)?,
        zone: r.try_get(2)?,
        sku: r.try_get(3)?,
        description: r.try_get(4)?,
        lot: r.try_get(5)?,
        class: r.try_get(6)?,
        counted: r.try_get(7)?,
        f_star: r.try_get(8)?,
        variance,
        unit_cost_minor: cost,
        value_minor: value_minor(variance, cost),
        status: r.try_get(11)?,
        counted_at: Timestamp(r.try_get(12)?),
        settled: r.try_get(13)?,
        settles_at: Timestamp(r.try_get(14)?),
        counter: r.try_get(15)?,
        recount: if r.try_get::<_, bool>(17)? {
            "pending".into()
        } else {
            r.try_get(16)?
        },
    })
}

const OTHER_COLUMNS: &str = "r.id, r.counted, r.f_star, r.variance, r.verdict, r.renet_reason,
     r.computed_at, r.watermark, r.superseded_by";

fn other_row(r: &Row) -> Result<OtherRow, StoreError> {
    Ok(OtherRow {
        id: r.try_get(0)?,
        counted: r.try_get(1)?,
        f_star: r.try_get(2)?,
        variance: r.try_get(3)?,
        verdict: r.try_get(4)?,
        renet_reason: r.try_get(5)?,
        computed_at: Timestamp(r.try_get(6)?),
        watermark: r.try_get(7)?,
        superseded_by: r.try_get(8)?,
    })
}

/// Reads the site's review policy, or the defaults.
fn review_policy<C: GenericClient>(
    q: &PgTx<'_, C>,
    site: SiteId,
) -> Result<ReviewPolicy, StoreError> {
    q.query_opt(
        "select manager_value_minor, bulk_value_minor from netting_settings where site_id = $1",
        &[&site.0],
    )?
    .map(|r| {
        Ok(ReviewPolicy {
            manager_value_minor: r.try_get(0)?,
            bulk_value_minor: r.try_get(1)?,
        })
    })
    .transpose()
    .map(Option::unwrap_or_default)
}

/// Reads the site's reason codes by label, or the defaults while it has none.
fn reason_codes<C: GenericClient>(
    q: &PgTx<'_, C>,
    site: SiteId,
) -> Result<Vec<ReasonCode>, StoreError> {
    let mut stored = super::netting::reason_code_rows(q, site)?;
    if stored.is_empty() {
        return Ok(default_reasons());
    }
    stored.sort_by(|a, b| a.label.cmp(&b.label));
    Ok(stored)
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

fn result_facts<C: GenericClient>(
    q: &PgTx<'_, C>,
    site: SiteId,
    id: i64,
) -> Result<Option<ResultFacts>, StoreError> {
    q.query_opt(
        "select verdict, superseded_by, renet_reason, window_start, window_end, evidence,
                watermark, computed_at, pass_id, bin_id, item_id, lot
         from count_result where id = $1 and site_id = $2",
        &[&id, &site.0],
    )?
    .map(|r| {
        Ok(ResultFacts {
            verdict: r.try_get(0)?,
            superseded_by: r.try_get(1)?,
            renet_reason: r.try_get(2)?,
            window_start: r.try_get(3)?,
            window_end: r.try_get(4)?,
            evidence: r.try_get(5)?,
            watermark: r.try_get(6)?,
            computed_at: r.try_get(7)?,
            pass_id: r.try_get(8)?,
            bin_id: r.try_get(9)?,
            item_id: r.try_get(10)?,
            lot: r.try_get(11)?,
        })
    })
    .transpose()
}

/// Returns every pass that belongs to the count of `pass`: the pass itself, the counts it
/// rechecks and the recounts of it, followed a few links deep.
fn linked_passes<C: GenericClient>(
    q: &PgTx<'_, C>,
    pass: i64,
    bin_id: i64,
) -> Result<BTreeSet<i64>, StoreError> {
    let mut passes = BTreeSet::from([pass]);
    for _ in 0..MAX_RECOUNT_DEPTH {
        let mut found = BTreeSet::new();
        for &p in &passes {
            for r in q.query(
                "select r.pass_id from count_pass p
                 join count_task_recheck k on k.task_id = p.task_id
                 join count_result r on r.id = k.result_id
                 where p.id = $1",
                &[&p],
            )? {
                found.insert(r.try_get::<_, i64>(0)?);
            }
            for r in q.query(
                "select p.id from count_result r
                 join count_task_recheck k on k.result_id = r.id
                 join count_pass p on p.task_id = k.task_id
                 where r.pass_id = $1 and p.bin_id = $2",
                &[&p, &bin_id],
            )? {
                found.insert(r.try_get::<_, i64>(0)?);
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
fn counters<C: GenericClient>(
    q: &PgTx<'_, C>,
    pass: i64,
    bin_id: i64,
) -> Result<Vec<UserId>, StoreError> {
    let mut users = BTreeSet::new();
    for p in linked_passes(q, pass, bin_id)? {
        users.insert(
            q.query_one("select user_id from count_pass where id = $1", &[&p])?
                .try_get::<_, i64>(0)?,
        );
    }
    Ok(users.into_iter().map(UserId).collect())
}

/// Reads the automatic adjustment of a result, if it has one.
pub(super) fn automatic<C: GenericClient>(
    q: &PgTx<'_, C>,
    result: i64,
) -> Result<Option<AutoAdjustment>, StoreError> {
    q.query_opt(
        "select a.id, a.result_id, m.uid, m.qty, m.event_at, a.posted_at
         from count_auto_adjustment a join movement m on m.id = a.movement_id
         where a.result_id = $1",
        &[&result],
    )?
    .map(|r| {
        Ok(AutoAdjustment {
            id: r.try_get(0)?,
            result: r.try_get(1)?,
            movement: r.try_get(2)?,
            qty: r.try_get(3)?,
            event_at: Timestamp(r.try_get(4)?),
            posted_at: Timestamp(r.try_get(5)?),
        })
    })
    .transpose()
}

/// Reads one result with everything its page shows.
fn difference<C: GenericClient>(
    q: &PgTx<'_, C>,
    site: SiteId,
    id: i64,
) -> Result<Option<DifferenceDetail>, StoreError> {
    let Some(f) = result_facts(q, site, id)? else {
        return Ok(None);
    };
    let row = difference_row(&q.query_one(
        &format!("select {ROW_COLUMNS} {ROW_JOINS} where r.id = $1"),
        &[&id],
    )?)?;
    let p = q.query_one(
        "select u.display_name, p.first_at, p.done_at, p.uncertainty_ms
         from count_pass p join user_account u on u.id = p.user_id where p.id = $1",
        &[&f.pass_id],
    )?;
    let (counter_name, first_at, done_at, uncertainty): (String, i64, Option<i64>, i64) =
        (p.try_get(0)?, p.try_get(1)?, p.try_get(2)?, p.try_get(3)?);
    let history = q
        .query(
            &format!(
                "select {OTHER_COLUMNS} from count_result r
                 where r.pass_id = $1 and r.bin_id = $2 and r.item_id = $3 and r.lot = $4
                   and r.id <> $5
                 order by r.id"
            ),
            &[&f.pass_id, &f.bin_id, &f.item_id, &f.lot, &id],
        )?
        .iter()
        .map(other_row)
        .collect::<Result<Vec<_>, _>>()?;
    let max_u: i64 = q
        .query_one(
            "select coalesce(max(uncertainty_ms), 0) from source_timing where site_id = $1",
            &[&site.0],
        )?
        .try_get(0)?;
    let pad = max_u
        .max((f.window_end - f.window_start) / 2)
        .max(MIN_WINDOW_PAD_MS);
    let moves = q
        .query(
            "select m.id, m.uid, m.qty, m.kind, m.event_at, m.recorded_at, m.source,
                    coalesce(st.uncertainty_ms, 0)
             from movement m
             left join source_timing st on st.site_id = m.site_id and st.source = m.source
             where m.bin_id = $1 and m.item_id = $2 and m.lot = $3
               and m.event_at >= $4 and m.event_at <= $5
             order by m.event_at, m.id limit $6",
            &[
                &f.bin_id,
                &f.item_id,
                &f.lot,
                &f.window_start.saturating_sub(pad),
                &f.window_end.saturating_add(pad),
                &MAX_WINDOW_MOVES,
            ],
        )?
        .iter()
        .map(|r| {
            Ok(WindowMove {
                seq: r.try_get(0)?,
                uid: r.try_get(1)?,
                qty: r.try_get(2)?,
                kind: r.try_get(3)?,
                event_at: Timestamp(r.try_get(4)?),
                recorded_at: Timestamp(r.try_get(5)?),
                source: r.try_get(6)?,
                uncertainty_ms: r.try_get(7)?,
            })
        })
        .collect::<Result<Vec<_>, StoreError>>()?;
    let scans = q
        .query(
            "select l.at, l.qty, l.packs, l.entry from count_line l
             where l.pass_id = $1 and l.item_id = $2 and l.lot = $3
               and not exists (select 1 from count_line_undo u where u.line_uid = l.uid)
             order by l.at, l.id",
            &[&f.pass_id, &f.item_id, &f.lot],
        )?
        .iter()
        .map(|r| {
            Ok(ScanLine {
                at: Timestamp(r.try_get(0)?),
                qty: r.try_get(1)?,
                packs: r.try_get(2)?,
                entry: r.try_get(3)?,
            })
        })
        .collect::<Result<Vec<_>, StoreError>>()?;
    let review = q
        .query_opt(
            "select v.id, v.decision, v.reason_code, v.note, u.name, v.decided_at, m.uid
             from count_review v join user_account u on u.id = v.decided_by
             left join movement m on m.id = v.movement_id
             where v.result_id = $1",
            &[&id],
        )?
        .map(|r| {
            Ok::<_, StoreError>(ReviewRow {
                id: r.try_get(0)?,
                decision: r.try_get(1)?,
                reason_code: r.try_get(2)?,
                note: r.try_get(3)?,
                decided_by: r.try_get(4)?,
                decided_at: Timestamp(r.try_get(5)?),
                movement: r.try_get(6)?,
            })
        })
        .transpose()?;
    let recounts = recounts(q, &f)?;
    let automatic = automatic(q, id)?;
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
fn recounts<C: GenericClient>(
    q: &PgTx<'_, C>,
    f: &ResultFacts,
) -> Result<Vec<RecountRow>, StoreError> {
    let tasks = q.query(
        "select distinct t.id,
                case when t.withdrawn_at is null then t.status else 'withdrawn' end
         from count_result r join count_task_recheck k on k.result_id = r.id
         join count_task t on t.id = k.task_id
         where r.pass_id = $1 and r.bin_id = $2 order by t.id",
        &[&f.pass_id, &f.bin_id],
    )?;
    let mut out = Vec::with_capacity(tasks.len());
    for t in tasks {
        let (task, status): (i64, String) = (t.try_get(0)?, t.try_get(1)?);
        let pass: Option<(i64, String)> = q
            .query_opt(
                "select p.id, u.name from count_pass p join user_account u on u.id = p.user_id
                 where p.task_id = $1 order by p.id desc limit 1",
                &[&task],
            )?
            .map(|r| Ok::<_, StoreError>((r.try_get(0)?, r.try_get(1)?)))
            .transpose()?;
        let result = match &pass {
            None => None,
            Some((pass, _)) => q
                .query_opt(
                    &format!(
                        "select {OTHER_COLUMNS} from count_result r
                         where r.pass_id = $1 and r.item_id = $2 and r.lot = $3
                         order by r.superseded_by is not null, r.id desc limit 1"
                    ),
                    &[pass, &f.item_id, &f.lot],
                )?
                .map(|r| other_row(&r))
                .transpose()?,
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

#[async_trait]
impl ReviewStore for PgStore {
    async fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError> {
        self.read(move |q| review_policy(q, site)).await
    }

    async fn review_reasons(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
        self.read(move |q| reason_codes(q, site)).await
    }

    async fn differences(
        &self,
        site: SiteId,
        f: DifferenceFilter,
        now: Timestamp,
    ) -> Result<Vec<DifferenceRow>, StoreError> {
        const HOUR_MS: i64 = 3_600_000;
        let sql = format!(
            "select {ROW_COLUMNS} {ROW_JOINS}
             where r.site_id = $1 and r.verdict = 'out_of_tolerance' and r.superseded_by is null
               and not exists (select 1 from count_review v where v.result_id = r.id)
               and not exists (select 1 from count_task t where t.id = p.task_id
                                                       and t.recount_of is not null)
               and ($2::text is null or r.class = $2)
               and ($3::text is null or z.code = $3)
               and ($4::bigint is null or abs(r.variance) * r.unit_cost_minor >= $4)
               and ($5::bigint is null or abs(r.variance) * r.unit_cost_minor <= $5)
               and ($6::bigint is null or r.counted_at <= $6)
               and ($7::bigint is null or r.counted_at >= $7)
             order by r.counted_at, r.id limit $8"
        );
        let age = |h: Option<i64>| h.map(|h| now.0.saturating_sub(h.saturating_mul(HOUR_MS)));
        let limit = f.limit.clamp(1, MAX_LIST_ROWS) as i64;
        let c = self.client().await?;
        let st = c.prepare_cached(&sql).await?;
        c.query(
            &st,
            &[
                &site.0,
                &f.class.map(|c| c.to_string()),
                &f.zone,
                &f.min_value_minor,
                &f.max_value_minor,
                &age(f.min_age_h),
                &age(f.max_age_h),
                &limit,
            ],
        )
        .await?
        .iter()
        .map(difference_row)
        .collect()
    }

    async fn difference(
        &self,
        site: SiteId,
        id: i64,
    ) -> Result<Option<DifferenceDetail>, StoreError> {
        self.read(move |q| difference(q, site, id)).await
    }

    async fn adjustments(
        &self,
        site: SiteId,
        after: i64,
        limit: usize,
    ) -> Result<Vec<AdjustmentRow>, StoreError> {
        let limit = limit.clamp(1, MAX_FEED_ROWS) as i64;
        let c = self.client().await?;
        let st = c
            .prepare_cached(
                "select m.uid, m.id, b.code, i.sku, m.lot, m.qty, m.event_at, v.id,
                        coalesce(v.result_id, a.result_id), coalesce(v.reason_code, $4),
                        coalesce(u.name, ''), coalesce(v.decided_at, a.posted_at),
                        a.id is not null
                 from movement m
                 left join count_review v on v.movement_id = m.id
                 left join count_auto_adjustment a on a.movement_id = m.id
                 join bin b on b.id = m.bin_id
                 join item i on i.id = m.item_id
                 left join user_account u on u.id = v.decided_by
                 where m.site_id = $1 and m.id > $2 and m.kind = 'count_adjustment'
                   and (v.id is not null or a.id is not null)
                 order by m.id limit $3",
            )
            .await?;
        c.query(&st, &[&site.0, &after, &limit, &AUTO_REASON_CODE])
            .await?
            .iter()
            .map(|r| {
                Ok(AdjustmentRow {
                    id: r.try_get(0)?,
                    seq: r.try_get(1)?,
                    bin: r.try_get(2)?,
                    sku: r.try_get(3)?,
                    lot: r.try_get(4)?,
                    qty: r.try_get(5)?,
                    event_at: Timestamp(r.try_get(6)?),
                    review: r.try_get(7)?,
                    result: r.try_get(8)?,
                    reason_code: r.try_get(9)?,
                    approver: r.try_get(10)?,
                    approved_at: Timestamp(r.try_get(11)?),
                    automatic: r.try_get(12)?,
                })
            })
            .collect()
    }
}

impl ReviewTx for PgTx<'_> {
    fn seed_reason_codes(&self, site: SiteId) -> Result<(), StoreError> {
        let has: bool = self
            .query_one(
                "select exists (select 1 from reason_code where site_id = $1)",
                &[&site.0],
            )?
            .try_get(0)?;
        if has {
            return Ok(());
        }
        for r in default_reasons() {
            self.execute(
                "insert into reason_code (site_id, code, label) values ($1, $2, $3)",
                &[&site.0, &r.code, &r.label],
            )?;
        }
        Ok(())
    }

    fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError> {
        review_policy(self, site)
    }

    fn reason_codes(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
        reason_codes(self, site)
    }

    fn decision_facts(&self, site: SiteId, id: i64) -> Result<Option<DecisionFacts>, StoreError> {
        let Some(facts) = result_facts(self, site, id)? else {
            return Ok(None);
        };
        let row = difference_row(&self.query_one(
            &format!("select {ROW_COLUMNS} {ROW_JOINS} where r.id = $1"),
            &[&id],
        )?)?;
        let decided: Option<String> = self
            .query_opt(
                "select decision from count_review where result_id = $1",
                &[&id],
            )?
            .map(|r| r.try_get(0))
            .transpose()?;
        let counters = counters(self, facts.pass_id, facts.bin_id)?;
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

    fn insert_review(&self, d: &NewDecision, decision: &str) -> Result<i64, StoreError> {
        Ok(self
            .query_one(
                "insert into count_review (result_id, decision, reason_code, note, decided_by,
                     decided_at)
                 values ($1, $2, $3, $4, $5, $6) returning id",
                &[
                    &d.result,
                    &decision,
                    &d.reason,
                    &d.note,
                    &d.decider.user.0,
                    &d.at.0,
                ],
            )?
            .try_get(0)?)
    }

    fn set_review_movement(&self, review: i64, movement: i64) -> Result<(), StoreError> {
        self.execute(
            "update count_review set movement_id = $1 where id = $2",
            &[&movement, &review],
        )?;
        Ok(())
    }
}
