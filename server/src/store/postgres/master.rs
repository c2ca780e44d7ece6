//! Sites and master data over PostgreSQL: sites, zones, bins, items, packs and the demo shelf.
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

/// See [`Store::ping_writer`].
pub async fn ping_writer(store: &PgStore) -> Result<(), StoreError> {
    Err(not_yet("Store::ping_writer"))
}

/// See [`Store::create_site`].
pub async fn create_site(store: &PgStore, site: NewSite) -> Result<Site, StoreError> {
    Err(not_yet("Store::create_site"))
}

/// See [`Store::set_site_zone`].
pub async fn set_site_zone(
    store: &PgStore,
    site: SiteId,
    zone: crate::time::day::SiteZone,
    audit: crate::accounts::audit::AuditEvent,
) -> Result<String, StoreError> {
    Err(not_yet("Store::set_site_zone"))
}

/// See [`Store::site`].
pub async fn site(store: &PgStore, code: &SiteCode) -> Result<Option<Site>, StoreError> {
    Err(not_yet("Store::site"))
}

/// See [`Store::sites`].
pub async fn sites(store: &PgStore) -> Result<Vec<Site>, StoreError> {
    Err(not_yet("Store::sites"))
}

/// See [`Store::site_counts`].
pub async fn site_counts(store: &PgStore, site: SiteId) -> Result<SiteCounts, StoreError> {
    Err(not_yet("Store::site_counts"))
}

/// See [`Store::bins`].
pub async fn bins(
    store: &PgStore,
    site: SiteId,
    zone: Option<ZoneCode>,
) -> Result<Vec<Bin>, StoreError> {
    Err(not_yet("Store::bins"))
}

/// See [`Store::put_bins`].
pub async fn put_bins(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewBin>,
    progress: Progress,
    audit: Option<AuditEvent>,
) -> Result<usize, StoreError> {
    Err(not_yet("Store::put_bins"))
}

/// See [`Store::put_items`].
pub async fn put_items(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewItem>,
    progress: Progress,
    audit: Option<AuditEvent>,
) -> Result<usize, StoreError> {
    Err(not_yet("Store::put_items"))
}

/// See [`Store::put_packs`].
pub async fn put_packs(
    store: &PgStore,
    site: SiteId,
    rows: Vec<NewPack>,
    progress: Progress,
    audit: Option<AuditEvent>,
) -> Result<usize, StoreError> {
    Err(not_yet("Store::put_packs"))
}

/// See [`Store::put_demo_shelf`].
pub async fn put_demo_shelf(
    store: &PgStore,
    site: SiteId,
    rows: Vec<ShelfRow>,
) -> Result<(), StoreError> {
    Err(not_yet("Store::put_demo_shelf"))
}
