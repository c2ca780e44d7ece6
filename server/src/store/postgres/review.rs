//! The review of differences over PostgreSQL: its reads and `ReviewTx`.
#![allow(unused_imports, unused_variables)]

use super::PgStore;
use super::tx::{PgTx, not_yet};
use crate::accounts::audit::Action;
use crate::accounts::audit::Actor;
use crate::accounts::audit::AuditEvent;
use crate::accounts::audit::AuditTx;
use crate::ledger::LedgerTx;
use crate::ledger::MovementKind;
use crate::ledger::NewMovement;
use crate::master::SiteId;
use crate::master::codes::BinCode;
use crate::master::codes::MovementUid;
use crate::master::codes::Sku;
use crate::netting::pass::NettingTx;
use crate::review::Candidate;
use crate::review::Decider;
use crate::review::Decision;
use crate::review::ReasonCode;
use crate::review::Refusal;
use crate::review::ReviewPolicy;
use crate::review::check_decision;
use crate::review::decide::DecisionFacts;
use crate::review::decide::Posted;
use crate::review::decide::Posting;
use crate::review::decide::ReviewTx;
use crate::review::store::AdjustmentRow;
use crate::review::store::AutoAdjustment;
use crate::review::store::Decided;
use crate::review::store::DifferenceDetail;
use crate::review::store::DifferenceFilter;
use crate::review::store::DifferenceRow;
use crate::review::store::NewDecision;
use crate::review::store::OtherRow;
use crate::review::store::RecountRow;
use crate::review::store::ReviewRow;
use crate::review::store::ReviewStore;
use crate::review::store::ScanLine;
use crate::review::store::WindowMove;
use crate::store::error::Progress;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use serde::Serialize;
use serde_json::json;

#[async_trait::async_trait]
impl crate::review::store::ReviewStore for PgStore {
    async fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError> {
        Err(not_yet("ReviewStore::review_policy"))
    }

    async fn review_reasons(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
        Err(not_yet("ReviewStore::review_reasons"))
    }

    async fn differences(
        &self,
        site: SiteId,
        filter: DifferenceFilter,
        now: Timestamp,
    ) -> Result<Vec<DifferenceRow>, StoreError> {
        Err(not_yet("ReviewStore::differences"))
    }

    async fn difference(
        &self,
        site: SiteId,
        id: i64,
    ) -> Result<Option<DifferenceDetail>, StoreError> {
        Err(not_yet("ReviewStore::difference"))
    }

    async fn adjustments(
        &self,
        site: SiteId,
        after: i64,
        limit: usize,
    ) -> Result<Vec<AdjustmentRow>, StoreError> {
        Err(not_yet("ReviewStore::adjustments"))
    }
}

impl crate::review::decide::ReviewTx for PgTx<'_> {
    fn seed_reason_codes(&self, site: SiteId) -> Result<(), StoreError> {
        Err(not_yet("ReviewTx::seed_reason_codes"))
    }

    fn review_policy(&self, site: SiteId) -> Result<ReviewPolicy, StoreError> {
        Err(not_yet("ReviewTx::review_policy"))
    }

    fn reason_codes(&self, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
        Err(not_yet("ReviewTx::reason_codes"))
    }

    fn decision_facts(
        &self,
        site: SiteId,
        result: i64,
    ) -> Result<Option<DecisionFacts>, StoreError> {
        Err(not_yet("ReviewTx::decision_facts"))
    }

    fn insert_review(&self, d: &NewDecision, decision: &str) -> Result<i64, StoreError> {
        Err(not_yet("ReviewTx::insert_review"))
    }

    fn set_review_movement(&self, review: i64, movement: i64) -> Result<(), StoreError> {
        Err(not_yet("ReviewTx::set_review_movement"))
    }
}
