//! What the review needs from storage. [`crate::store::Store`] includes this
//! trait; the SQL is in `store/sqlite/review.rs`. A decision is checked with
//! [`super::check_decision`] inside the writer's transaction, so the result it
//! judges is the one it writes against.

use super::{Decider, ReasonCode, ReviewPolicy};
use crate::accounts::audit::Actor;
use crate::master::SiteId;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use serde::Serialize;

/// Which differences the list shows.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct DifferenceFilter {
    pub class: Option<char>,
    pub zone: Option<String>,
    pub min_value_minor: Option<i64>,
    pub max_value_minor: Option<i64>,
    /// Counted at least this many hours ago.
    pub min_age_h: Option<i64>,
    /// Counted at most this many hours ago.
    pub max_age_h: Option<i64>,
    pub limit: usize,
}

/// One current difference waiting for review.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct DifferenceRow {
    pub id: i64,
    pub bin: String,
    pub zone: String,
    pub sku: String,
    pub description: String,
    pub lot: String,
    pub class: String,
    pub counted: i64,
    pub f_star: i64,
    pub variance: i64,
    pub unit_cost_minor: i64,
    pub value_minor: i64,
    pub status: String,
    pub counted_at: Timestamp,
    pub settled: bool,
    pub settles_at: Timestamp,
    /// The user name of who counted.
    pub counter: String,
    /// The recount of this count: empty (none), `pending` (a recount or
    /// supervisor count is not done yet), or its outcome (`confirmed`,
    /// `book_right`, `supervisor_count`).
    pub recount: String,
}

/// An earlier (superseded) or later row of the same key and count.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct OtherRow {
    pub id: i64,
    pub counted: i64,
    pub f_star: i64,
    pub variance: i64,
    pub verdict: String,
    pub renet_reason: String,
    pub computed_at: Timestamp,
    pub watermark: i64,
    pub superseded_by: Option<i64>,
}

/// A movement of the key around the count window.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct WindowMove {
    pub seq: i64,
    pub uid: String,
    pub qty: i64,
    pub kind: String,
    pub event_at: Timestamp,
    pub recorded_at: Timestamp,
    pub source: String,
    pub uncertainty_ms: i64,
}

/// A scan (or keyed line) of the key in the count.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct ScanLine {
    pub at: Timestamp,
    pub qty: i64,
    pub packs: i64,
    pub entry: String,
}

/// The decision taken on a result.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct ReviewRow {
    pub id: i64,
    pub decision: String,
    pub reason_code: String,
    pub note: String,
    pub decided_by: String,
    pub decided_at: Timestamp,
    /// The uid of the count-adjustment movement an approval posted.
    pub movement: Option<String>,
}

/// The count adjustment Cairn posted for a result by itself (the site allows it and the
/// result was a settled hit with a variance): no person reviewed it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct AutoAdjustment {
    /// The stable id of the automatic posting.
    pub id: i64,
    pub result: i64,
    /// The uid of the count-adjustment movement.
    pub movement: String,
    pub qty: i64,
    pub event_at: Timestamp,
    pub posted_at: Timestamp,
}

/// A recount of the key and what it found.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RecountRow {
    pub task: i64,
    pub status: String,
    pub counter: String,
    /// The recount's own result of the key, once netted.
    pub result: Option<OtherRow>,
}

/// Everything the detail page of a difference shows.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct DifferenceDetail {
    pub row: DifferenceRow,
    pub verdict: String,
    pub superseded_by: Option<i64>,
    pub renet_reason: String,
    pub window_start: Timestamp,
    pub window_end: Timestamp,
    pub evidence: String,
    pub watermark: i64,
    pub computed_at: Timestamp,
    pub counter_name: String,
    pub pass_first_at: Timestamp,
    pub pass_done_at: Option<Timestamp>,
    pub pass_uncertainty_ms: i64,
    /// Every other row of the same key and count, oldest first.
    pub history: Vec<OtherRow>,
    pub moves: Vec<WindowMove>,
    pub scans: Vec<ScanLine>,
    pub review: Option<ReviewRow>,
    /// The adjustment posted automatically instead of a review, if one was.
    pub automatic: Option<AutoAdjustment>,
    pub recounts: Vec<RecountRow>,
}

/// A decision to take.
#[derive(Debug, Clone)]
pub struct NewDecision {
    pub result: i64,
    pub decider: Decider,
    pub actor: Actor,
    pub reason: String,
    pub note: String,
    pub at: Timestamp,
    pub address: String,
}

/// What a decision did.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Decided {
    pub result: i64,
    pub review: i64,
    /// The posted movement's uid (approvals only).
    pub movement: Option<String>,
}

/// One posted count adjustment, as the host reads it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct AdjustmentRow {
    /// The movement uid: stable, the host's key for it.
    pub id: String,
    /// The ledger's sequence number: the feed's cursor.
    pub seq: i64,
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub qty: i64,
    pub event_at: Timestamp,
    /// The approval's review; `None` for an automatic adjustment.
    pub review: Option<i64>,
    pub result: i64,
    /// The reviewer's reason code, or [`crate::review::AUTO_REASON_CODE`] for an
    /// automatic adjustment.
    pub reason_code: String,
    /// Who approved it; empty for an automatic adjustment.
    pub approver: String,
    /// When it was approved, or posted automatically.
    pub approved_at: Timestamp,
    /// Posted by Cairn within tolerance, without a review.
    pub automatic: bool,
}

/// The review's storage operations.
#[async_trait]
pub trait ReviewStore: Send + Sync {
    /// Reads the site's review policy (the defaults until one is stored).
    async fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError>;
    /// Reads the site's reason codes (the defaults while it has none).
    async fn review_reasons(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError>;
    /// Lists current out-of-tolerance results without a decision.
    async fn differences(
        &self,
        site: SiteId,
        filter: DifferenceFilter,
        now: Timestamp,
    ) -> Result<Vec<DifferenceRow>, StoreError>;
    /// Reads one result of the site with its evidence and history.
    async fn difference(
        &self,
        site: SiteId,
        id: i64,
    ) -> Result<Option<DifferenceDetail>, StoreError>;
    /// Lists posted count adjustments (approved and automatic) after ledger sequence `after`.
    async fn adjustments(
        &self,
        site: SiteId,
        after: i64,
        limit: usize,
    ) -> Result<Vec<AdjustmentRow>, StoreError>;
}
