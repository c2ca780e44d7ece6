//! Accuracy and the planner's buffer over PostgreSQL.
#![allow(unused_imports, unused_variables)]

use super::PgStore;
use super::tx::{PgTx, not_yet};
use crate::accounts::audit::AuditEvent;
use crate::accuracy::inputs::AccuracySettings;
use crate::accuracy::inputs::NewPlannerInput;
use crate::accuracy::inputs::PlannerInput;
use crate::accuracy::store::AItem;
use crate::accuracy::store::AccuracyStore;
use crate::accuracy::store::DailyIssue;
use crate::accuracy::store::ItemRow;
use crate::accuracy::store::PlannedTask;
use crate::accuracy::store::ResultQuery;
use crate::accuracy::store::StoredResult;
use crate::master::SiteId;
use crate::master::codes::Sku;
use crate::planning::abc::Class;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use chrono::NaiveDate;
use serde::Serialize;

#[async_trait::async_trait]
impl crate::accuracy::store::AccuracyStore for PgStore {
    async fn accuracy_settings(&self, site: SiteId) -> Result<AccuracySettings, StoreError> {
        Err(not_yet("AccuracyStore::accuracy_settings"))
    }

    async fn put_accuracy_settings(
        &self,
        site: SiteId,
        settings: AccuracySettings,
    ) -> Result<(), StoreError> {
        Err(not_yet("AccuracyStore::put_accuracy_settings"))
    }

    async fn accuracy_results(
        &self,
        site: SiteId,
        query: ResultQuery,
    ) -> Result<Vec<StoredResult>, StoreError> {
        Err(not_yet("AccuracyStore::accuracy_results"))
    }

    async fn planned_tasks(
        &self,
        site: SiteId,
        from: NaiveDate,
        to: NaiveDate,
    ) -> Result<Vec<PlannedTask>, StoreError> {
        Err(not_yet("AccuracyStore::planned_tasks"))
    }

    async fn a_items(&self, site: SiteId, before: Timestamp) -> Result<Vec<AItem>, StoreError> {
        Err(not_yet("AccuracyStore::a_items"))
    }

    async fn accuracy_items(
        &self,
        site: SiteId,
        sku: Option<Sku>,
    ) -> Result<Vec<ItemRow>, StoreError> {
        Err(not_yet("AccuracyStore::accuracy_items"))
    }

    async fn daily_issues(
        &self,
        site: SiteId,
        days: Vec<(NaiveDate, Timestamp)>,
        to: Timestamp,
        sku: Option<Sku>,
    ) -> Result<Vec<DailyIssue>, StoreError> {
        Err(not_yet("AccuracyStore::daily_issues"))
    }

    async fn planner_inputs(&self, site: SiteId) -> Result<Vec<PlannerInput>, StoreError> {
        Err(not_yet("AccuracyStore::planner_inputs"))
    }

    async fn put_planner_inputs(
        &self,
        site: SiteId,
        rows: Vec<NewPlannerInput>,
        by: String,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        Err(not_yet("AccuracyStore::put_planner_inputs"))
    }
}
