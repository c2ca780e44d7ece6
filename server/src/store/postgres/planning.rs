//! The day's count list over PostgreSQL: settings and calendar, ABC runs and class history, short picks, the facts a plan is built from, stored lists with their tasks and runs.
#![allow(unused_imports, unused_variables)]

use super::PgStore;
use super::tx::{PgTx, not_yet};
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
use crate::store::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, Progress, ShelfRow, Store, StoreError,
};
use crate::time::Timestamp;
use chrono::NaiveDate;

/// See [`Store::planning_settings`].
pub async fn planning_settings(store: &PgStore, site: SiteId) -> Result<Settings, StoreError> {
    Err(not_yet("Store::planning_settings"))
}

/// See [`Store::put_planning_settings`].
pub async fn put_planning_settings(
    store: &PgStore,
    site: SiteId,
    settings: Settings,
) -> Result<(), StoreError> {
    Err(not_yet("Store::put_planning_settings"))
}

/// See [`Store::calendar`].
pub async fn calendar(store: &PgStore, site: SiteId) -> Result<Calendar, StoreError> {
    Err(not_yet("Store::calendar"))
}

/// See [`Store::put_calendar`].
pub async fn put_calendar(
    store: &PgStore,
    site: SiteId,
    calendar: Calendar,
) -> Result<(), StoreError> {
    Err(not_yet("Store::put_calendar"))
}

/// See [`Store::abc_usage`].
pub async fn abc_usage(
    store: &PgStore,
    site: SiteId,
    from: Timestamp,
    to: Timestamp,
) -> Result<Vec<Usage>, StoreError> {
    Err(not_yet("Store::abc_usage"))
}

/// See [`Store::record_classes`].
pub async fn record_classes(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    rule: AbcRule,
    classes: Vec<(i64, Class)>,
) -> Result<AbcSummary, StoreError> {
    Err(not_yet("Store::record_classes"))
}

/// See [`Store::latest_abc`].
pub async fn latest_abc(store: &PgStore, site: SiteId) -> Result<Option<AbcSummary>, StoreError> {
    Err(not_yet("Store::latest_abc"))
}

/// See [`Store::class_history`].
pub async fn class_history(
    store: &PgStore,
    site: SiteId,
    sku: Sku,
) -> Result<Vec<ClassChange>, StoreError> {
    Err(not_yet("Store::class_history"))
}

/// See [`Store::record_short_picks`].
pub async fn record_short_picks(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewShortPick>,
) -> Result<ShortPickOutcome, StoreError> {
    Err(not_yet("Store::record_short_picks"))
}

/// See [`Store::plan_input`].
pub async fn plan_input(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    day_end: Timestamp,
    capacity: Capacity,
    fill: Fill,
) -> Result<PlanInput, StoreError> {
    Err(not_yet("Store::plan_input"))
}

/// See [`Store::save_count_list`].
pub async fn save_count_list(
    store: &PgStore,
    site: SiteId,
    list: NewCountList,
) -> Result<i64, StoreError> {
    Err(not_yet("Store::save_count_list"))
}

/// See [`Store::count_list`].
pub async fn count_list(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
) -> Result<Option<ListView>, StoreError> {
    Err(not_yet("Store::count_list"))
}

/// See [`Store::move_task`].
pub async fn move_task(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    task: i64,
    run: u32,
) -> Result<(), StoreError> {
    Err(not_yet("Store::move_task"))
}

/// See [`Store::hold_run`].
pub async fn hold_run(
    store: &PgStore,
    site: SiteId,
    day: NaiveDate,
    run: u32,
    holder: Option<crate::accounts::UserName>,
) -> Result<(), StoreError> {
    Err(not_yet("Store::hold_run"))
}

/// See [`Store::bin_contents`].
pub async fn bin_contents(
    store: &PgStore,
    site: SiteId,
    bins: Vec<BinCode>,
) -> Result<std::collections::HashMap<String, Vec<crate::planning::phone::ItemBrief>>, StoreError> {
    Err(not_yet("Store::bin_contents"))
}

/// See [`Store::finish_task`].
pub async fn finish_task(
    store: &PgStore,
    site: SiteId,
    task: i64,
    at: Timestamp,
) -> Result<(), StoreError> {
    Err(not_yet("Store::finish_task"))
}
