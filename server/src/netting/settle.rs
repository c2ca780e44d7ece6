//! Settling, one workflow in one transaction (DESIGN §5): results whose settling instant
//! has passed are marked settled, then, where a site allows it, each settled hit with a
//! non-zero variance is posted as a count adjustment without a review, once, by the same
//! posting path an approval takes. Which results qualify is
//! [`service::adjusts_automatically`]'s; the store finds the candidates ([`SettleTx`]).

use super::pass::NettingTx;
use super::results::SettleOutcome;
use super::service::{self, Evidence};
use crate::accounts::audit::{Actor, AuditTx};
use crate::ledger::LedgerTx;
use crate::master::SiteId;
use crate::planning::abc::Class;
use crate::review::decide::{Posting, post_count_adjustment};
use crate::review::store::AutoAdjustment;
use crate::review::{AUTO_REASON, AUTO_REASON_CODE};
use crate::store::error::StoreError;
use crate::time::Timestamp;
use serde_json::json;

/// Most automatic adjustments one settling pass posts; the rest wait for the next pass
/// (a minute later under `cairn serve`), so one pass never holds the writer for long.
pub const MAX_AUTO_PER_PASS: usize = 1_000;
/// Most candidates one settling pass looks at, posted or passed over.
pub const MAX_CANDIDATES_PER_PASS: usize = 10_000;

/// A result that may be adjusted automatically, as the store finds it.
#[derive(Debug, Clone)]
pub struct AutoCandidate {
    pub id: i64,
    pub site: SiteId,
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub variance: i64,
    pub class: Option<Class>,
    pub unit_cost_minor: i64,
    /// The stored evidence (JSON).
    pub evidence: String,
}

/// The queries and writes of settling; each method one query or one write.
pub trait SettleTx {
    /// Marks every current result whose settling instant is before `now` settled;
    /// returns how many.
    fn mark_settled(&self, now: Timestamp) -> Result<usize, StoreError>;
    /// Finds the next candidate after result `after`: current, a hit with a variance,
    /// settled, not decided by a person, not adjusted yet (nor any row of the same key of
    /// the same count), not found wrong by a recount, not a recount's own result, not
    /// waiting for a recount, at a site that allows it, from a count received since it
    /// was switched on.
    fn next_auto_candidate(
        &self,
        after: i64,
        now: Timestamp,
    ) -> Result<Option<AutoCandidate>, StoreError>;
    /// Records that `movement` adjusted `result` automatically; returns the record's id.
    fn insert_auto_adjustment(
        &self,
        result: i64,
        movement: i64,
        at: Timestamp,
    ) -> Result<i64, StoreError>;
}

/// Settles what is due at `now` and posts the automatic adjustments now due, oldest
/// result first. One at a time: each posting re-nets its key (and later counts of the
/// bin), which may supersede other candidates.
pub fn settle_due<T: SettleTx + LedgerTx + NettingTx + AuditTx + ?Sized>(
    tx: &T,
    now: Timestamp,
) -> Result<SettleOutcome, StoreError> {
    let settled = tx.mark_settled(now)?;
    let mut adjusted = Vec::new();
    let mut after = 0;
    for _ in 0..MAX_CANDIDATES_PER_PASS {
        if adjusted.len() >= MAX_AUTO_PER_PASS {
            break;
        }
        let Some(c) = tx.next_auto_candidate(after, now)? else {
            break;
        };
        after = c.id;
        let evidence = match Evidence::parse(&c.evidence) {
            Ok(e) => e,
            Err(e) => {
                tracing::warn!("result {} is not adjusted automatically: {e}", c.id);
                continue;
            }
        };
        let settings = tx.netting_settings(c.site)?;
        if !service::adjusts_automatically(&settings, c.class, c.unit_cost_minor, &evidence)
            || evidence.netting.variance != c.variance
        {
            continue;
        }
        let event_at = evidence.netting.post_at;
        let posted = post_count_adjustment(
            tx,
            c.site,
            &Posting {
                result: c.id,
                bin: &c.bin,
                sku: &c.sku,
                lot: &c.lot,
                qty: c.variance,
                event_at,
                doc_ref: format!("auto-{}", c.id),
                actor: &Actor::System,
                address: "",
                at: now,
                detail: json!({"result": c.id, "automatic": true,
                               "reason_code": AUTO_REASON_CODE, "reason": AUTO_REASON}),
            },
        )?;
        let id = tx.insert_auto_adjustment(c.id, posted.movement_id, now)?;
        adjusted.push(AutoAdjustment {
            id,
            result: c.id,
            movement: posted.uid,
            qty: c.variance,
            event_at,
            posted_at: now,
        });
    }
    Ok(SettleOutcome { settled, adjusted })
}
