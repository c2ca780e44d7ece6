//! What netting answers: the stored results a listing pages through, one result with its
//! evidence, a pass's reasoning for `cairn net`, and what netting, settling and a re-net
//! wrote. Engine-free: every store returns these.

use super::rule::CountTiming;
use super::service::Evidence;
use crate::master::SiteId;
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use serde::Serialize;

/// The stored status of a key whose re-net found nothing left to net (not scanned and
/// zero throughout the window): the book now agrees with a count of 0.
pub const STATUS_NOTHING_TO_NET: &str = "nothing_to_net";
/// Most results one page returns.
pub const MAX_RESULTS_PAGE: usize = 1_000;

/// Which results a listing shows.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ResultState {
    /// Current results out of tolerance with no review yet.
    Open,
    /// Every current (not superseded) result.
    Current,
    /// Every row, superseded ones included.
    All,
}

/// A query over a site's results, paged by id.
#[derive(Debug, Clone)]
pub struct ResultQuery {
    pub state: ResultState,
    pub bin: Option<String>,
    pub sku: Option<String>,
    /// Only this lot (empty: keys without a lot).
    pub lot: Option<String>,
    /// A count pass by id or uid.
    pub pass: Option<String>,
    /// Results counted at or after this instant.
    pub from: Option<Timestamp>,
    /// Results counted at or before this instant.
    pub to: Option<Timestamp>,
    pub limit: usize,
    /// Results with an id greater than this.
    pub after: i64,
}

/// One result as the API lists it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct ResultRow {
    pub id: i64,
    pub pass_id: i64,
    pub pass: String,
    pub counter: String,
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub class: Option<String>,
    pub counted: i64,
    pub f_star: i64,
    pub variance: i64,
    pub variance_value_minor: i64,
    pub status: String,
    pub verdict: String,
    pub unit_cost_minor: i64,
    pub counted_at: Timestamp,
    pub window_start: Timestamp,
    pub window_end: Timestamp,
    /// The highest ledger `seq` (a movement's number in the ledger, not the sender's `id`)
    /// this result was netted against: movements with a higher `seq` were not yet seen.
    pub watermark: i64,
    pub settles_at: Timestamp,
    pub settled: bool,
    pub superseded_by: Option<i64>,
    pub renet_reason: String,
    pub recount_outcome: Option<String>,
    pub first_count_wrong: bool,
    pub reviewed: bool,
    /// A count adjustment was posted for it automatically (within tolerance, no review).
    pub auto_adjusted: bool,
    pub computed_at: Timestamp,
}

/// A page of results.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct ResultPage {
    pub results: Vec<ResultRow>,
    pub next: Option<i64>,
}

/// One result with its evidence, the rows it replaced and its recount tasks.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct ResultDetail {
    #[serde(flatten)]
    pub row: ResultRow,
    pub evidence: Evidence,
    /// Earlier rows of the same key of the same pass, newest first.
    pub replaces: Vec<i64>,
    /// Recount and supervisor-count tasks of this key of this pass, not withdrawn.
    pub recount_tasks: Vec<i64>,
    /// Tasks of this key of this pass that were withdrawn, oldest first.
    pub withdrawn_recounts: Vec<WithdrawnRecount>,
    /// The count adjustment posted for it automatically, if one was.
    pub automatic_adjustment: Option<crate::review::store::AutoAdjustment>,
}

/// A recount task withdrawn before anyone counted against it.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct WithdrawnRecount {
    pub task: i64,
    pub at: Timestamp,
    pub reason: String,
}

/// A pass and every current result of it, for `cairn net`.
#[derive(Debug, Clone, Serialize)]
pub struct PassReport {
    pub pass_id: i64,
    pub pass: String,
    pub site: String,
    pub bin: String,
    pub counter: String,
    pub first_at: Timestamp,
    pub done_at: Option<Timestamp>,
    pub uncertainty_ms: i64,
    /// The first results this pass re-checks (its task's), if it is a recount.
    pub rechecks: Vec<i64>,
    pub results: Vec<ResultDetail>,
}

/// What netting a pass wrote.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct NetOutcome {
    /// Results written (first nettings and superseding rows).
    pub written: Vec<i64>,
    /// Recount and supervisor-count tasks added to a day's list.
    pub tasks: Vec<i64>,
}

impl NetOutcome {
    /// Adds what another netting wrote.
    pub fn add(&mut self, other: NetOutcome) {
        self.written.extend(other.written);
        self.tasks.extend(other.tasks);
    }
}

/// What a settling pass did.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct SettleOutcome {
    /// Results newly marked settled.
    pub settled: usize,
    /// Count adjustments posted automatically (sites that allow it), oldest result first.
    pub adjusted: Vec<crate::review::store::AutoAdjustment>,
}

/// A count pass named by its number or its uid (what `cairn net --count` takes).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PassRef {
    Id(i64),
    Uid(uuid::Uuid),
}

impl PassRef {
    /// Reads a pass's number (digits) or uid (a UUID).
    pub fn parse(text: &str) -> Result<Self, String> {
        let t = text.trim();
        if let Ok(id) = t.parse::<i64>() {
            return Ok(Self::Id(id));
        }
        uuid::Uuid::parse_str(t).map(Self::Uid).map_err(|_| {
            format!("no count pass '{t}': name a pass by its number or its uid (a UUID)")
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_pass_is_named_by_number_or_uid_and_anything_else_is_refused() {
        assert_eq!(PassRef::parse(" 42 "), Ok(PassRef::Id(42)));
        let uid = "0192d6c1-7a7e-7c3e-9b1a-2f6f0a1b2c3d";
        assert_eq!(
            PassRef::parse(uid),
            Ok(PassRef::Uid(uuid::Uuid::parse_str(uid).unwrap()))
        );
        let e = PassRef::parse("pass-7").unwrap_err();
        assert!(
            e.contains("no count pass 'pass-7'") && e.contains("UUID"),
            "{e}"
        );
    }
}

/// A pass as the netting needs it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PassFacts {
    pub id: i64,
    pub uid: String,
    pub site: SiteId,
    /// The site's time zone: its local days are the days of the pass.
    pub zone: SiteZone,
    pub bin_id: i64,
    pub bin_code: String,
    pub task_est_s: Option<i64>,
    pub user_name: String,
    pub timing: CountTiming,
    /// The recount or supervisor-count task this pass was made against, if any.
    pub recount_task: Option<i64>,
    /// That task was withdrawn: the pass is netted as evidence and decides nothing.
    pub withdrawn: bool,
    /// Why the pass's times cannot be trusted, when they cannot.
    pub held: Option<String>,
}

/// When and against which ledger state netting sends a recount task.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Sent {
    pub watermark: i64,
    pub now: Timestamp,
}
