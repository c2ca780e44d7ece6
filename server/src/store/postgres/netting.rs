//! Netting over PostgreSQL: `NettingTx`, `RecountTx` (recount placement) and `SettleTx`.
#![allow(unused_imports, unused_variables)]

use super::PgStore;
use super::tx::{PgTx, not_yet};
use crate::accounts::audit::Actor;
use crate::accounts::audit::AuditEvent;
use crate::accounts::audit::AuditTx;
use crate::accounts::store::AccountStore;
use crate::accuracy::store::AccuracyStore;
use crate::ledger::BalanceRow;
use crate::ledger::LedgerTx;
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
use crate::netting::pass::AppliedEvent;
use crate::netting::pass::CurrentResult;
use crate::netting::pass::ItemFacts;
use crate::netting::pass::ItemLot;
use crate::netting::pass::NettingTx;
use crate::netting::pass::NewResult;
use crate::netting::pass::OpenTask;
use crate::netting::pass::WrittenMove;
use crate::netting::recount;
use crate::netting::recount::DayList;
use crate::netting::recount::NewRecountTask;
use crate::netting::recount::Rechecked;
use crate::netting::recount::RecountTx;
use crate::netting::recount::RunLoad;
use crate::netting::results::NetOutcome;
use crate::netting::results::PassFacts;
use crate::netting::results::STATUS_NOTHING_TO_NET;
use crate::netting::results::Sent;
use crate::netting::results::SettleOutcome;
use crate::netting::rule::BookState;
use crate::netting::rule::CountTiming;
use crate::netting::rule::KeyCount;
use crate::netting::rule::KeyResult;
use crate::netting::rule::Status;
use crate::netting::service;
use crate::netting::service::Evidence;
use crate::netting::service::KeyFacts;
use crate::netting::service::LedgerMove;
use crate::netting::service::Netted;
use crate::netting::service::NettingSettings;
use crate::netting::service::Placement;
use crate::netting::service::SourceTimingRow;
use crate::netting::service::Sources;
use crate::netting::service::VERDICT_HIT;
use crate::netting::service::VERDICT_OUT;
use crate::netting::settle::AutoCandidate;
use crate::netting::settle::SettleTx;
use crate::netting::tolerance::Verdict;
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
use crate::review::AUTO_REASON;
use crate::review::AUTO_REASON_CODE;
use crate::review::decide::Posting;
use crate::review::decide::post_count_adjustment;
use crate::review::store::AutoAdjustment;
use crate::review::store::ReviewStore;
use crate::store::error::StoreError;
use crate::store::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, Progress, ShelfRow, Store,
};
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use chrono::NaiveDate;
use serde_json::json;
use std::collections::BTreeMap;
use std::collections::BTreeSet;
use std::collections::HashSet;

impl crate::netting::pass::NettingTx for PgTx<'_> {
    fn pass_facts(&self, pass: i64) -> Result<Option<PassFacts>, StoreError> {
        Err(not_yet("NettingTx::pass_facts"))
    }

    fn netting_settings(&self, site: SiteId) -> Result<NettingSettings, StoreError> {
        Err(not_yet("NettingTx::netting_settings"))
    }

    fn source_timings(&self, site: SiteId) -> Result<Vec<SourceTimingRow>, StoreError> {
        Err(not_yet("NettingTx::source_timings"))
    }

    fn counted_keys(&self, pass: i64) -> Result<BTreeMap<ItemLot, (i64, Timestamp)>, StoreError> {
        Err(not_yet("NettingTx::counted_keys"))
    }

    fn bin_keys(&self, bin: i64) -> Result<Vec<ItemLot>, StoreError> {
        Err(not_yet("NettingTx::bin_keys"))
    }

    fn netted_keys(&self, pass: i64) -> Result<Vec<ItemLot>, StoreError> {
        Err(not_yet("NettingTx::netted_keys"))
    }

    fn current_result(
        &self,
        pass: i64,
        key: &ItemLot,
    ) -> Result<Option<CurrentResult>, StoreError> {
        Err(not_yet("NettingTx::current_result"))
    }

    fn item_facts(&self, item: i64) -> Result<ItemFacts, StoreError> {
        Err(not_yet("NettingTx::item_facts"))
    }

    fn balance_as_of(&self, bin: i64, key: &ItemLot, at: Timestamp) -> Result<i64, StoreError> {
        Err(not_yet("NettingTx::balance_as_of"))
    }

    fn key_moves(
        &self,
        bin: i64,
        key: &ItemLot,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<LedgerMove>, StoreError> {
        Err(not_yet("NettingTx::key_moves"))
    }

    fn insert_result(&self, r: &NewResult<'_>) -> Result<i64, StoreError> {
        Err(not_yet("NettingTx::insert_result"))
    }

    fn supersede(&self, old: i64, new: i64) -> Result<(), StoreError> {
        Err(not_yet("NettingTx::supersede"))
    }

    fn done_pass_by_uid(&self, uid: &str) -> Result<Option<(i64, bool)>, StoreError> {
        Err(not_yet("NettingTx::done_pass_by_uid"))
    }

    fn widest_done_uncertainty(&self, site: SiteId) -> Result<Option<i64>, StoreError> {
        Err(not_yet("NettingTx::widest_done_uncertainty"))
    }

    fn done_passes_of_bin(
        &self,
        bin: i64,
        done_from: Timestamp,
    ) -> Result<Vec<(i64, CountTiming)>, StoreError> {
        Err(not_yet("NettingTx::done_passes_of_bin"))
    }

    fn done_passes(&self, site: SiteId, pass: Option<&str>) -> Result<Vec<i64>, StoreError> {
        Err(not_yet("NettingTx::done_passes"))
    }

    fn rechecked_keys(&self, task: i64) -> Result<Vec<(ItemLot, i64)>, StoreError> {
        Err(not_yet("NettingTx::rechecked_keys"))
    }

    fn live_tasks_of(&self, pass: i64, key: &ItemLot) -> Result<i64, StoreError> {
        Err(not_yet("NettingTx::live_tasks_of"))
    }

    fn latest_recount_pass(&self, pass: i64, key: &ItemLot) -> Result<Option<i64>, StoreError> {
        Err(not_yet("NettingTx::latest_recount_pass"))
    }

    fn set_recount_outcome(
        &self,
        result: i64,
        verdict: &str,
        outcome: Option<&str>,
        first_count_wrong: bool,
    ) -> Result<(), StoreError> {
        Err(not_yet("NettingTx::set_recount_outcome"))
    }

    fn open_tasks_of(&self, first_pass: i64) -> Result<Vec<OpenTask>, StoreError> {
        Err(not_yet("NettingTx::open_tasks_of"))
    }

    fn withdraw_task(&self, task: OpenTask, at: Timestamp, why: &str) -> Result<(), StoreError> {
        Err(not_yet("NettingTx::withdraw_task"))
    }
}

impl crate::netting::recount::RecountTx for PgTx<'_> {
    fn site_zone(&self, site: SiteId) -> Result<SiteZone, StoreError> {
        Err(not_yet("RecountTx::site_zone"))
    }

    fn open_task_of(&self, pass: i64, supervisor: bool) -> Result<Option<(i64, i64)>, StoreError> {
        Err(not_yet("RecountTx::open_task_of"))
    }

    fn link_rechecks(&self, task: i64, results: &[i64]) -> Result<(), StoreError> {
        Err(not_yet("RecountTx::link_rechecks"))
    }

    fn rechecked(&self, task: i64) -> Result<Vec<Rechecked>, StoreError> {
        Err(not_yet("RecountTx::rechecked"))
    }

    fn set_task_detail(&self, task: i64, detail: &str) -> Result<(), StoreError> {
        Err(not_yet("RecountTx::set_task_detail"))
    }

    fn bump_list(&self, list: i64) -> Result<(), StoreError> {
        Err(not_yet("RecountTx::bump_list"))
    }

    fn day_list(&self, site: SiteId, day: &str) -> Result<Option<DayList>, StoreError> {
        Err(not_yet("RecountTx::day_list"))
    }

    fn create_day_list(
        &self,
        site: SiteId,
        day: &str,
        minutes: i64,
        sent: &Sent,
    ) -> Result<DayList, StoreError> {
        Err(not_yet("RecountTx::create_day_list"))
    }

    fn runs(&self, list: i64) -> Result<Vec<RunLoad>, StoreError> {
        Err(not_yet("RecountTx::runs"))
    }

    fn add_run(&self, list: i64, run: u32) -> Result<(), StoreError> {
        Err(not_yet("RecountTx::add_run"))
    }

    fn result_class(&self, result: i64) -> Result<Option<Class>, StoreError> {
        Err(not_yet("RecountTx::result_class"))
    }

    fn bin_lines(&self, bin: i64) -> Result<i64, StoreError> {
        Err(not_yet("RecountTx::bin_lines"))
    }

    fn insert_recount_task(&self, t: &NewRecountTask) -> Result<i64, StoreError> {
        Err(not_yet("RecountTx::insert_recount_task"))
    }

    fn set_list_warnings(&self, list: i64, warnings: &[String]) -> Result<(), StoreError> {
        Err(not_yet("RecountTx::set_list_warnings"))
    }
}

impl crate::netting::settle::SettleTx for PgTx<'_> {
    fn mark_settled(&self, now: Timestamp) -> Result<usize, StoreError> {
        Err(not_yet("SettleTx::mark_settled"))
    }

    fn next_auto_candidate(
        &self,
        after: i64,
        now: Timestamp,
    ) -> Result<Option<AutoCandidate>, StoreError> {
        Err(not_yet("SettleTx::next_auto_candidate"))
    }

    fn insert_auto_adjustment(
        &self,
        result: i64,
        movement: i64,
        at: Timestamp,
    ) -> Result<i64, StoreError> {
        Err(not_yet("SettleTx::insert_auto_adjustment"))
    }
}

/// See [`Store::netting_settings`].
pub async fn netting_settings(
    store: &PgStore,
    site: SiteId,
) -> Result<crate::netting::service::NettingSettings, StoreError> {
    Err(not_yet("Store::netting_settings"))
}

/// See [`Store::put_netting_settings`].
pub async fn put_netting_settings(
    store: &PgStore,
    site: SiteId,
    settings: crate::netting::service::NettingSettings,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    Err(not_yet("Store::put_netting_settings"))
}

/// See [`Store::source_timings`].
pub async fn source_timings(
    store: &PgStore,
    site: SiteId,
) -> Result<Vec<crate::netting::service::SourceTimingRow>, StoreError> {
    Err(not_yet("Store::source_timings"))
}

/// See [`Store::put_source_timings`].
pub async fn put_source_timings(
    store: &PgStore,
    site: SiteId,
    rows: Vec<crate::netting::service::SourceTimingRow>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    Err(not_yet("Store::put_source_timings"))
}

/// See [`Store::reason_codes`].
pub async fn reason_codes(
    store: &PgStore,
    site: SiteId,
) -> Result<Vec<crate::netting::service::ReasonCode>, StoreError> {
    Err(not_yet("Store::reason_codes"))
}

/// See [`Store::put_reason_codes`].
pub async fn put_reason_codes(
    store: &PgStore,
    site: SiteId,
    rows: Vec<crate::netting::service::ReasonCode>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    Err(not_yet("Store::put_reason_codes"))
}

/// See [`Store::edit_source_timings`].
pub async fn edit_source_timings(
    store: &PgStore,
    site: SiteId,
    shown: Vec<String>,
    rows: Vec<crate::netting::service::SourceTimingRow>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    Err(not_yet("Store::edit_source_timings"))
}

/// See [`Store::edit_reason_codes`].
pub async fn edit_reason_codes(
    store: &PgStore,
    site: SiteId,
    shown: Vec<String>,
    rows: Vec<crate::netting::service::ReasonCode>,
    audit: AuditEvent,
) -> Result<(), StoreError> {
    Err(not_yet("Store::edit_reason_codes"))
}

/// See [`Store::reason_code_uses`].
pub async fn reason_code_uses(
    store: &PgStore,
    site: SiteId,
) -> Result<std::collections::BTreeMap<String, i64>, StoreError> {
    Err(not_yet("Store::reason_code_uses"))
}

/// See [`Store::count_results`].
pub async fn count_results(
    store: &PgStore,
    site: SiteId,
    query: crate::netting::results::ResultQuery,
) -> Result<crate::netting::results::ResultPage, StoreError> {
    Err(not_yet("Store::count_results"))
}

/// See [`Store::count_result`].
pub async fn count_result(
    store: &PgStore,
    site: SiteId,
    id: i64,
) -> Result<Option<crate::netting::results::ResultDetail>, StoreError> {
    Err(not_yet("Store::count_result"))
}

/// See [`Store::count_pass_report`].
pub async fn count_pass_report(
    store: &PgStore,
    site: SiteId,
    pass: crate::netting::results::PassRef,
) -> Result<Option<crate::netting::results::PassReport>, StoreError> {
    Err(not_yet("Store::count_pass_report"))
}
