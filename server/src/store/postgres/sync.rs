//! Phones' sync over PostgreSQL: `SyncTx`.
#![allow(unused_imports, unused_variables)]

use super::PgStore;
use super::tx::{PgTx, not_yet};
use crate::accounts::DeviceId;
use crate::accounts::audit::AuditEvent;
use crate::accounts::store::AccountStore;
use crate::accuracy::store::AccuracyStore;
use crate::ledger::BalanceRow;
use crate::ledger::Movement;
use crate::master::Bin;
use crate::master::NewBin;
use crate::master::NewItem;
use crate::master::NewPack;
use crate::master::NewSite;
use crate::master::Site;
use crate::master::SiteCode;
use crate::master::SiteCounts;
use crate::master::SiteId;
use crate::master::codes::BinCode;
use crate::master::codes::Sku;
use crate::master::codes::ZoneCode;
use crate::planning::AbcSummary;
use crate::planning::ClassChange;
use crate::planning::ListView;
use crate::planning::NewCountList;
use crate::planning::Settings;
use crate::planning::abc::AbcRule;
use crate::planning::abc::Class;
use crate::planning::abc::Usage;
use crate::planning::calendar::Calendar;
use crate::planning::plan::Capacity;
use crate::planning::plan::Fill;
use crate::planning::plan::PlanInput;
use crate::planning::short_pick::NewShortPick;
use crate::planning::short_pick::ShortPickOutcome;
use crate::review::store::ReviewStore;
use crate::store::error::StoreError;
use crate::store::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, Progress, ShelfRow, Store,
};
use crate::sync::SyncBatch;
use crate::sync::apply::EventBin;
use crate::sync::apply::EventTask;
use crate::sync::apply::NewEvent;
use crate::sync::apply::NewLine;
use crate::sync::apply::NewPass;
use crate::sync::apply::PassTrust;
use crate::sync::apply::StoredPass;
use crate::sync::apply::SyncTx;
use crate::sync::clock::ClockSample;
use crate::sync::event::Body;
use crate::sync::event::Event;
use crate::sync::event::Line;
use crate::sync::plausible;
use crate::sync::plausible::Sampled;
use crate::sync::plausible::TaskFloor;
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use cairn_scan::wire::EventFlag;
use cairn_scan::wire::EventResult;
use chrono::NaiveDate;
use std::collections::BTreeMap;

impl crate::sync::apply::SyncTx for PgTx<'_> {
    fn stored_event(&self, uid: &str) -> Result<Option<(String, Vec<EventFlag>)>, StoreError> {
        Err(not_yet("SyncTx::stored_event"))
    }

    fn begin_event(&self) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::begin_event"))
    }

    fn keep_event(&self) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::keep_event"))
    }

    fn drop_event(&self) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::drop_event"))
    }

    fn previous_clock(&self, device: DeviceId) -> Result<Option<Sampled>, StoreError> {
        Err(not_yet("SyncTx::previous_clock"))
    }

    fn save_clock(
        &self,
        device: DeviceId,
        clock: &ClockSample,
        at: Timestamp,
    ) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::save_clock"))
    }

    fn pass_trust(&self, pass: i64) -> Result<PassTrust, StoreError> {
        Err(not_yet("SyncTx::pass_trust"))
    }

    fn hold_pass(&self, pass: i64, reason: &str) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::hold_pass"))
    }

    fn bin(&self, site: SiteId, code: &str) -> Result<Option<EventBin>, StoreError> {
        Err(not_yet("SyncTx::bin"))
    }

    fn task(&self, site: SiteId, task: i64) -> Result<Option<EventTask>, StoreError> {
        Err(not_yet("SyncTx::task"))
    }

    fn would_recount_own_count(&self, task: i64, user: &str) -> Result<bool, StoreError> {
        Err(not_yet("SyncTx::would_recount_own_count"))
    }

    fn pass_by_uid(&self, uid: &str) -> Result<Option<StoredPass>, StoreError> {
        Err(not_yet("SyncTx::pass_by_uid"))
    }

    fn item_id(&self, site: SiteId, sku: &str) -> Result<Option<i64>, StoreError> {
        Err(not_yet("SyncTx::item_id"))
    }

    fn pack(&self, site: SiteId, gtin: &str) -> Result<Option<(i64, i64)>, StoreError> {
        Err(not_yet("SyncTx::pack"))
    }

    fn bin_holds(&self, bin: i64, item: i64) -> Result<bool, StoreError> {
        Err(not_yet("SyncTx::bin_holds"))
    }

    fn extend_pass(
        &self,
        pass: i64,
        at: Timestamp,
        uncertainty_ms: i64,
        reassigned: bool,
    ) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::extend_pass"))
    }

    fn insert_pass(&self, p: &NewPass<'_>) -> Result<i64, StoreError> {
        Err(not_yet("SyncTx::insert_pass"))
    }

    fn start_task(&self, task: i64) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::start_task"))
    }

    fn insert_line(&self, l: &NewLine<'_>) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::insert_line"))
    }

    fn line_pass(&self, line: &str) -> Result<Option<String>, StoreError> {
        Err(not_yet("SyncTx::line_pass"))
    }

    fn undo_line(
        &self,
        line: &str,
        undo: &str,
        pass: &str,
        at: Timestamp,
    ) -> Result<bool, StoreError> {
        Err(not_yet("SyncTx::undo_line"))
    }

    fn mark_empty(&self, pass: i64) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::mark_empty"))
    }

    fn mark_done(&self, pass: i64, at: Timestamp) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::mark_done"))
    }

    fn finish_task(&self, site: SiteId, task: i64, at: Timestamp) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::finish_task"))
    }

    fn insert_event(&self, e: &NewEvent<'_>) -> Result<(), StoreError> {
        Err(not_yet("SyncTx::insert_event"))
    }
}

/// See [`Store::catalog`].
pub async fn catalog(
    store: &PgStore,
    site: SiteId,
) -> Result<Vec<crate::planning::phone::ItemBrief>, StoreError> {
    Err(not_yet("Store::catalog"))
}

/// See [`Store::count_lines`].
pub async fn count_lines(
    store: &PgStore,
    site: SiteId,
    after: i64,
    limit: usize,
) -> Result<Vec<crate::sync::results::StoredLine>, StoreError> {
    Err(not_yet("Store::count_lines"))
}
