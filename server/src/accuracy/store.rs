//! What the accuracy reports and the buffer need from storage.
//! [`crate::store::Store`] includes this trait; the SQL is in
//! `store/sqlite/accuracy.rs`, one function per query.

use super::inputs::{AccuracySettings, InputQuery, NewPlannerInput, PlannerInput};
use crate::accounts::audit::AuditEvent;
use crate::master::SiteId;
use crate::master::codes::Sku;
use crate::planning::abc::Class;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use async_trait::async_trait;
use chrono::NaiveDate;
use serde::Serialize;

/// Which count results to read: the current row of each, counted in `[from, to)`.
#[derive(Debug, Clone)]
pub struct ResultQuery {
    pub from: Timestamp,
    pub to: Timestamp,
    /// Only this item's results.
    pub sku: Option<Sku>,
}

/// One current count result with what the figures group it by.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct StoredResult {
    pub sku: String,
    /// The class stored with the result (the item's class when it was counted).
    pub class: Option<Class>,
    pub zone: String,
    pub bin: String,
    pub lot: String,
    /// The user name of the counter.
    pub counter: String,
    pub counted_at: Timestamp,
    pub counted: i64,
    pub f_star: i64,
    pub variance: i64,
    /// `hit`, `out_of_tolerance`, or a state still waiting (e.g. `recount`).
    pub verdict: String,
    pub unit_cost_minor: i64,
}

/// One planned count task of a day's list.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlannedTask {
    pub day: NaiveDate,
    pub class: Option<Class>,
    pub zone: String,
    pub done: bool,
}

/// An item as the buffer and per-item pages see it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
#[schema(as = AccuracyItem)]
pub struct ItemRow {
    pub sku: String,
    pub description: String,
    pub group: String,
    /// The item's current class, if it has been classified.
    pub class: Option<Class>,
    pub unit_cost_minor: i64,
    /// Bin-lot keys that hold it now (non-zero balance).
    pub keys: u32,
}

/// An A item and its last count before some instant.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AItem {
    pub sku: String,
    pub last_counted_before: Option<Timestamp>,
}

/// What one item issued on one UTC day (picks, positive units).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DailyIssue {
    pub sku: String,
    pub day: NaiveDate,
    pub issued: i64,
}

/// The operations accuracy reports and the buffer need from storage.
#[async_trait]
pub trait AccuracyStore: Send + Sync {
    /// Reads a site's accuracy settings (the defaults until some are stored).
    async fn accuracy_settings(&self, site: SiteId) -> Result<AccuracySettings, StoreError>;
    /// Stores a site's accuracy settings.
    async fn put_accuracy_settings(
        &self,
        site: SiteId,
        settings: AccuracySettings,
    ) -> Result<(), StoreError>;
    /// Reads the current count results of a period, oldest first.
    async fn accuracy_results(
        &self,
        site: SiteId,
        query: ResultQuery,
    ) -> Result<Vec<StoredResult>, StoreError>;
    /// Reads the tasks of the count lists of days `from..=to`.
    async fn planned_tasks(
        &self,
        site: SiteId,
        from: NaiveDate,
        to: NaiveDate,
    ) -> Result<Vec<PlannedTask>, StoreError>;
    /// Lists the items now in class A with their last count before `before`.
    async fn a_items(&self, site: SiteId, before: Timestamp) -> Result<Vec<AItem>, StoreError>;
    /// Lists a site's items (or one) with class, group and keys held.
    async fn accuracy_items(
        &self,
        site: SiteId,
        sku: Option<Sku>,
    ) -> Result<Vec<ItemRow>, StoreError>;
    /// Sums picks per item and day, the days given by their first instants (ascending,
    /// each running until the next, the last until `to`), so the site's local days come
    /// from `time::day` and the store computes no dates.
    async fn daily_issues(
        &self,
        site: SiteId,
        days: Vec<(NaiveDate, Timestamp)>,
        to: Timestamp,
        sku: Option<Sku>,
    ) -> Result<Vec<DailyIssue>, StoreError>;
    /// Reads every stored planner input of a site, items first, then groups.
    async fn planner_inputs(&self, site: SiteId) -> Result<Vec<PlannerInput>, StoreError>;
    /// Reads a site's planner inputs that pass the filters, by `(group, sku)` after
    /// `query.after` (items' own rows, group empty, first), at most `query.take` of them.
    async fn planner_input_rows(
        &self,
        site: SiteId,
        query: InputQuery,
    ) -> Result<Vec<PlannerInput>, StoreError>;
    /// Stores planner inputs (replacing earlier ones of the same item or group).
    /// All or nothing: a row naming an unknown item refuses the batch.
    async fn put_planner_inputs(
        &self,
        site: SiteId,
        rows: Vec<NewPlannerInput>,
        by: String,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError>;
}
