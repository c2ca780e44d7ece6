//! Deciding differences, one workflow in one transaction (DESIGN §5): a decision is
//! checked against the stored result ([`check_decision`]), recorded with its audit event,
//! and an approval posts its one count-adjustment movement through the ledger's own
//! append path, which re-nets the key. Automatic adjustments post the same way
//! ([`post_count_adjustment`]). The store answers the queries of [`ReviewTx`].

use super::store::{Decided, NewDecision};
use super::{Candidate, Decision, ReasonCode, Refusal, ReviewPolicy, check_decision};
use crate::accounts::audit::{Action, Actor, AuditEvent, AuditTx};
use crate::ledger::{LedgerTx, MovementKind, NewMovement};
use crate::master::SiteId;
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::netting::pass::NettingTx;
use crate::store::error::{Progress, StoreError};
use crate::time::Timestamp;
use serde_json::json;

/// The source every count adjustment is recorded with.
pub const COUNT_SOURCE: &str = "count";

/// What a decision needs of the result it decides, read in the deciding transaction.
#[derive(Debug, Clone)]
pub struct DecisionFacts {
    pub candidate: Candidate,
    /// The result's stored evidence (JSON), where its posting instant is.
    pub evidence: String,
    pub variance: i64,
    pub bin: String,
    pub sku: String,
    pub lot: String,
}

/// The queries and writes of a decision; each method one query or one write.
pub trait ReviewTx {
    /// Stores the default reason codes of a site that has none yet.
    fn seed_reason_codes(&self, site: SiteId) -> Result<(), StoreError>;
    fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError>;
    fn reason_codes(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError>;
    /// Reads result `result` of `site` as a decision sees it; `None` when there is none.
    fn decision_facts(
        &self,
        site: SiteId,
        result: i64,
    ) -> Result<Option<DecisionFacts>, StoreError>;
    /// Writes a review row; returns its id.
    fn insert_review(&self, d: &NewDecision, decision: &str) -> Result<i64, StoreError>;
    /// Records the movement an approval posted.
    fn set_review_movement(&self, review: i64, movement: i64) -> Result<(), StoreError>;
}

/// One count adjustment to post: what, where, when, and who it is recorded for.
pub struct Posting<'a> {
    /// The result the adjustment settles.
    pub result: i64,
    pub bin: &'a str,
    pub sku: &'a str,
    pub lot: &'a str,
    /// `c − f*` of the result.
    pub qty: i64,
    /// The result's posting instant, from its evidence.
    pub event_at: Timestamp,
    pub doc_ref: String,
    pub actor: &'a Actor,
    pub address: &'a str,
    /// When it is recorded (the movement's `recorded_at`, the audit event's time).
    pub at: Timestamp,
    /// What the audit event says besides the movement: the review, or that it was automatic.
    pub detail: serde_json::Value,
}

/// The movement a posting wrote.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Posted {
    pub uid: String,
    pub movement_id: i64,
}

/// Posts one count adjustment, as approvals and automatic adjustments both do: one
/// `count_adjustment` movement through the ledger's append path (balances, snapshots and
/// the re-net of the key stay right) and its `adjustment` audit event. A refusal by the
/// ledger is a programming error here: the result's bin, item and lot were stored by the
/// netting itself.
pub fn post_count_adjustment<T: LedgerTx + NettingTx + AuditTx + ?Sized>(
    tx: &T,
    site: SiteId,
    p: &Posting,
) -> Result<Posted, StoreError> {
    let stored_code = |what: &str, e: String| {
        StoreError::Internal(anyhow::anyhow!(
            "stored {what} of result {} is invalid: {e}",
            p.result
        ))
    };
    let uid = uuid::Uuid::now_v7().to_string();
    let movement = NewMovement {
        uid: MovementUid::parse(&uid).map_err(|e| stored_code("uid", e.to_string()))?,
        bin: BinCode::parse(p.bin).map_err(|e| stored_code("bin", e.to_string()))?,
        sku: Sku::parse(p.sku).map_err(|e| stored_code("sku", e.to_string()))?,
        lot: p.lot.to_string(),
        expiry: None,
        qty: p.qty,
        kind: MovementKind::CountAdjustment,
        event_at: p.event_at,
        source: COUNT_SOURCE.into(),
        doc_ref: p.doc_ref.clone(),
        actor: p.actor.name().to_string(),
        reverses: None,
        recorded_at: None,
    };
    let (_, written) = crate::ledger::append(
        tx,
        site,
        std::slice::from_ref(&movement),
        p.at,
        &Progress::default(),
    )
    .map_err(|e| match e {
        StoreError::Rejected(rows) => StoreError::Internal(anyhow::anyhow!(
            "the count adjustment of result {} was refused by the ledger: {rows:?}",
            p.result
        )),
        other => other,
    })?;
    let movement_id = written
        .first()
        .map(|w| w.id)
        .ok_or_else(|| anyhow::anyhow!("the count adjustment {uid} was not written"))?;
    let mut detail = json!({"bin": p.bin, "sku": p.sku, "lot": p.lot, "qty": p.qty,
                            "event_at": p.event_at.to_string()});
    if let (Some(d), Some(extra)) = (detail.as_object_mut(), p.detail.as_object()) {
        d.extend(extra.clone());
    }
    let mut event = AuditEvent::now(p.actor.clone(), Action::Adjustment, uid.clone())
        .at_site(site)
        .from_address(p.address)
        .detail(detail);
    event.at = p.at;
    tx.insert_audit(&event)?;
    Ok(Posted { uid, movement_id })
}

/// Writes a decision's review row and its `approval` audit event.
fn record_decision<T: ReviewTx + AuditTx + ?Sized>(
    tx: &T,
    site: SiteId,
    d: &NewDecision,
    facts: &DecisionFacts,
    decision: &str,
    extra: serde_json::Value,
) -> Result<i64, StoreError> {
    let review = tx.insert_review(d, decision)?;
    let mut detail = json!({"review": review, "result": d.result, "decision": decision,
                            "reason_code": d.reason,
                            "value_minor": facts.candidate.value_minor});
    if let (Some(d), Some(extra)) = (detail.as_object_mut(), extra.as_object()) {
        d.extend(extra.clone());
    }
    tx.insert_audit(
        &AuditEvent::now(
            d.actor.clone(),
            Action::Approval,
            format!("difference {}", d.result),
        )
        .at_site(site)
        .from_address(&d.address)
        .detail(detail),
    )?;
    Ok(review)
}

/// Takes approvals (one each, in order); each is refused on its own or posts its count
/// adjustment. `bulk` marks approvals made from the list, held to the bulk limit.
pub fn approve<T: ReviewTx + LedgerTx + NettingTx + AuditTx + ?Sized>(
    tx: &T,
    site: SiteId,
    decisions: &[NewDecision],
    bulk: bool,
) -> Result<Vec<Result<Decided, Refusal>>, StoreError> {
    tx.seed_reason_codes(site)?;
    let policy = tx.review_policy(site)?;
    let reasons = tx.reason_codes(site)?;
    decisions
        .iter()
        .map(|d| approve_one(tx, site, d, &policy, &reasons, bulk))
        .collect()
}

fn approve_one<T: ReviewTx + LedgerTx + NettingTx + AuditTx + ?Sized>(
    tx: &T,
    site: SiteId,
    d: &NewDecision,
    policy: &ReviewPolicy,
    reasons: &[ReasonCode],
    bulk: bool,
) -> Result<Result<Decided, Refusal>, StoreError> {
    let Some(s) = tx.decision_facts(site, d.result)? else {
        return Ok(Err(Refusal::NotFound(d.result)));
    };
    if let Err(r) = check_decision(
        &s.candidate,
        &d.decider,
        policy,
        Decision::Approve { bulk },
        d.at,
    ) {
        return Ok(Err(r));
    }
    if !reasons.iter().any(|r| r.code == d.reason) {
        return Ok(Err(Refusal::UnknownReason(d.reason.clone())));
    }
    let Ok(post_at) =
        crate::netting::service::Evidence::parse(&s.evidence).map(|e| e.netting.post_at)
    else {
        return Ok(Err(Refusal::NoPostingInstant(d.result)));
    };
    if s.variance == 0 {
        return Ok(Err(Refusal::NotADifference {
            id: d.result,
            verdict: "no variance".into(),
        }));
    }
    let review = record_decision(tx, site, d, &s, "approved", json!({"bulk": bulk}))?;
    let posted = post_count_adjustment(
        tx,
        site,
        &Posting {
            result: d.result,
            bin: &s.bin,
            sku: &s.sku,
            lot: &s.lot,
            qty: s.variance,
            event_at: post_at,
            doc_ref: review.to_string(),
            actor: &d.actor,
            address: &d.address,
            at: d.at,
            detail: json!({"review": review}),
        },
    )?;
    tx.set_review_movement(review, posted.movement_id)?;
    Ok(Ok(Decided {
        result: d.result,
        review,
        movement: Some(posted.uid),
    }))
}

/// Takes one rejection: the book stands, nothing is posted.
pub fn reject<T: ReviewTx + AuditTx + ?Sized>(
    tx: &T,
    site: SiteId,
    d: &NewDecision,
) -> Result<Result<Decided, Refusal>, StoreError> {
    tx.seed_reason_codes(site)?;
    let policy = tx.review_policy(site)?;
    let reasons = tx.reason_codes(site)?;
    let Some(s) = tx.decision_facts(site, d.result)? else {
        return Ok(Err(Refusal::NotFound(d.result)));
    };
    if let Err(r) = check_decision(&s.candidate, &d.decider, &policy, Decision::Reject, d.at) {
        return Ok(Err(r));
    }
    if !d.reason.is_empty() && !reasons.iter().any(|r| r.code == d.reason) {
        return Ok(Err(Refusal::UnknownReason(d.reason.clone())));
    }
    let review = record_decision(tx, site, d, &s, "rejected", json!({}))?;
    Ok(Ok(Decided {
        result: d.result,
        review,
        movement: None,
    }))
}
