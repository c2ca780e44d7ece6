//! The ledger over PostgreSQL: `LedgerTx` (one checked movement written with its balance and snapshots) and the balance and history reads.
#![allow(unused_imports, unused_variables)]

use super::PgStore;
use super::tx::{PgTx, not_yet};
use crate::accounts::audit::AuditEvent;
use crate::accounts::store::AccountStore;
use crate::accuracy::store::AccuracyStore;
use crate::batch::RowError;
use crate::ledger::BalanceRow;
use crate::ledger::Movement;
use crate::ledger::MovementKind;
use crate::ledger::NewMovement;
use crate::ledger::RecordOutcome;
use crate::ledger::append::Inserted;
use crate::ledger::append::ItemRef;
use crate::ledger::append::LedgerKey;
use crate::ledger::append::LedgerTx;
use crate::ledger::append::StoredMovement;
use crate::ledger::append::WatermarkTx;
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
use crate::master::codes::MovementUid;
use crate::master::codes::Sku;
use crate::master::codes::ZoneCode;
use crate::netting::pass::NettingTx;
use crate::netting::pass::WrittenMove;
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
use crate::store::error::Progress;
use crate::store::error::StoreError;
use crate::store::{BalancePage, BalanceQuery, HistoryPage, HistoryQuery, ShelfRow, Store};
use crate::time::Timestamp;
use chrono::NaiveDate;
use std::collections::HashMap;

impl crate::ledger::append::LedgerTx for PgTx<'_> {
    fn bin_id(&self, site: SiteId, bin: &BinCode) -> Result<Option<i64>, StoreError> {
        Err(not_yet("LedgerTx::bin_id"))
    }

    fn item_ref(&self, site: SiteId, sku: &Sku) -> Result<Option<ItemRef>, StoreError> {
        Err(not_yet("LedgerTx::item_ref"))
    }

    fn movement_by_uid(&self, uid: &MovementUid) -> Result<Option<StoredMovement>, StoreError> {
        Err(not_yet("LedgerTx::movement_by_uid"))
    }

    fn is_reversed(&self, movement: i64) -> Result<bool, StoreError> {
        Err(not_yet("LedgerTx::is_reversed"))
    }

    fn insert_movement(
        &self,
        site: SiteId,
        m: &NewMovement,
        key: &LedgerKey,
        recorded_at: Timestamp,
        reverses: Option<i64>,
    ) -> Result<Inserted, StoreError> {
        Err(not_yet("LedgerTx::insert_movement"))
    }
}

/// See [`Store::balances`].
pub async fn balances(
    store: &PgStore,
    site: SiteId,
    query: BalanceQuery,
) -> Result<BalancePage, StoreError> {
    Err(not_yet("Store::balances"))
}

/// See [`Store::movements`].
pub async fn movements(
    store: &PgStore,
    site: SiteId,
    query: HistoryQuery,
) -> Result<HistoryPage, StoreError> {
    Err(not_yet("Store::movements"))
}
