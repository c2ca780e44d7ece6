//! The [`Store`] trait over PostgreSQL: reads on pooled connections, writes through
//! [`PgStore::write_tx`].

use super::PgStore;
use crate::accounts::audit::AuditEvent;
use crate::master::codes::{BinCode, Sku, ZoneCode};
use crate::master::read::{
    BinQuery, BinRow, ItemQuery, ItemRow, LotQuery, LotRow, PackQuery, SkuPackRow, ZoneQuery,
    ZoneRow,
};
use crate::master::{Bin, NewBin, NewItem, NewPack, NewSite, Site, SiteCode, SiteCounts, SiteId};
use crate::planning::abc::{AbcRule, Class, Usage};
use crate::planning::calendar::Calendar;
use crate::planning::plan::{Capacity, Fill, PlanInput};
use crate::planning::short_pick::{NewShortPick, ShortPickOutcome};
use crate::planning::{AbcSummary, ClassChange, ListView, NewCountList, Settings};
use crate::store::{
    Answer, BalancePage, BalanceQuery, HistoryPage, HistoryQuery, Progress, ShelfRow, Store,
    StoreError, Work, WriteScope,
};
use crate::time::Timestamp;
use async_trait::async_trait;
use chrono::NaiveDate;

#[async_trait]
impl Store for PgStore {
    async fn ping(&self) -> Result<(), StoreError> {
        let v: i64 = self
            .client()
            .await?
            .query_one(
                "select coalesce(max(version), 0) from schema_migration",
                &[],
            )
            .await?
            .get(0);
        if v == super::migrate::latest_version() {
            Ok(())
        } else {
            Err(StoreError::Incompatible(format!(
                "schema version {v} is not the expected {}",
                super::migrate::latest_version()
            )))
        }
    }

    async fn claim_job(
        &self,
        site: SiteId,
        job: &str,
        day: NaiveDate,
        by: &str,
    ) -> Result<bool, StoreError> {
        let c = self.client().await?;
        let n = c
            .execute(
                "insert into job_claim (site_id, job, day, claimed_by, claimed_at)
                 values ($1, $2, $3, $4, $5) on conflict do nothing",
                &[&site.0, &job, &day.to_string(), &by, &Timestamp::now().0],
            )
            .await?;
        Ok(n == 1)
    }

    async fn write_work(&self, scope: WriteScope, work: Work) -> Result<Answer, StoreError> {
        self.write_tx(scope, move |tx| work(tx)).await
    }

    async fn write_shared_work(&self, scope: WriteScope, work: Work) -> Result<Answer, StoreError> {
        // PostgreSQL groups concurrent commits itself (one WAL flush serves the commits
        // waiting on it), so a sync is a write of its own: a group of one.
        crate::telemetry::metrics().db_write_group_size.observe(1.0);
        self.write_tx(scope, move |tx| work(tx)).await
    }

    async fn ping_writer(&self) -> Result<(), StoreError> {
        super::master::ping_writer(self).await
    }

    async fn create_site(&self, site: NewSite) -> Result<Site, StoreError> {
        super::master::create_site(self, site).await
    }

    async fn set_site_zone(
        &self,
        site: SiteId,
        zone: crate::time::day::SiteZone,
        audit: crate::accounts::audit::AuditEvent,
    ) -> Result<String, StoreError> {
        super::master::set_site_zone(self, site, zone, audit).await
    }

    async fn site(&self, code: &SiteCode) -> Result<Option<Site>, StoreError> {
        super::master::site(self, code).await
    }

    async fn sites(&self) -> Result<Vec<Site>, StoreError> {
        super::master::sites(self).await
    }

    async fn site_counts(&self, site: SiteId) -> Result<SiteCounts, StoreError> {
        super::master::site_counts(self, site).await
    }

    async fn bins(&self, site: SiteId, zone: Option<ZoneCode>) -> Result<Vec<Bin>, StoreError> {
        super::master::bins(self, site, zone).await
    }

    async fn zone_rows(&self, site: SiteId, query: ZoneQuery) -> Result<Vec<ZoneRow>, StoreError> {
        super::master::zone_rows(self, site, query).await
    }

    async fn bin_rows(&self, site: SiteId, query: BinQuery) -> Result<Vec<BinRow>, StoreError> {
        super::master::bin_rows(self, site, query).await
    }

    async fn item_rows(&self, site: SiteId, query: ItemQuery) -> Result<Vec<ItemRow>, StoreError> {
        super::master::item_rows(self, site, query).await
    }

    async fn lot_rows(&self, site: SiteId, query: LotQuery) -> Result<Vec<LotRow>, StoreError> {
        super::master::lot_rows(self, site, query).await
    }

    async fn pack_rows(
        &self,
        site: SiteId,
        query: PackQuery,
    ) -> Result<Vec<SkuPackRow>, StoreError> {
        super::master::pack_rows(self, site, query).await
    }

    async fn put_bins(
        &self,
        site: SiteId,
        rows: Vec<NewBin>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        super::master::put_bins(self, site, rows, progress, audit).await
    }

    async fn put_items(
        &self,
        site: SiteId,
        rows: Vec<NewItem>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        super::master::put_items(self, site, rows, progress, audit).await
    }

    async fn put_packs(
        &self,
        site: SiteId,
        rows: Vec<NewPack>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        super::master::put_packs(self, site, rows, progress, audit).await
    }

    async fn balances(&self, site: SiteId, query: BalanceQuery) -> Result<BalancePage, StoreError> {
        super::ledger::balances(self, site, query).await
    }

    async fn movements(
        &self,
        site: SiteId,
        query: HistoryQuery,
    ) -> Result<HistoryPage, StoreError> {
        super::ledger::movements(self, site, query).await
    }

    async fn put_demo_shelf(&self, site: SiteId, rows: Vec<ShelfRow>) -> Result<(), StoreError> {
        super::master::put_demo_shelf(self, site, rows).await
    }

    async fn shelf_keys(&self, site: SiteId) -> Result<Vec<crate::store::ShelfKey>, StoreError> {
        super::master::shelf_keys(self, site).await
    }

    async fn planning_settings(&self, site: SiteId) -> Result<Settings, StoreError> {
        super::planning::planning_settings(self, site).await
    }

    async fn put_planning_settings(
        &self,
        site: SiteId,
        settings: Settings,
    ) -> Result<(), StoreError> {
        super::planning::put_planning_settings(self, site, settings).await
    }

    async fn frequency_policy(
        &self,
        site: SiteId,
    ) -> Result<crate::planning::policy::FrequencyPolicy, StoreError> {
        super::planning::frequency_policy(self, site).await
    }

    async fn put_frequency_policy(
        &self,
        site: SiteId,
        policy: crate::planning::policy::FrequencyPolicy,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        super::planning::put_frequency_policy(self, site, policy, audit).await
    }

    async fn item_worth(
        &self,
        site: SiteId,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<crate::planning::policy::ItemWorth>, StoreError> {
        super::planning::item_worth(self, site, from, to).await
    }

    async fn calendar(&self, site: SiteId) -> Result<Calendar, StoreError> {
        super::planning::calendar(self, site).await
    }

    async fn put_calendar(&self, site: SiteId, calendar: Calendar) -> Result<(), StoreError> {
        super::planning::put_calendar(self, site, calendar).await
    }

    async fn abc_usage(
        &self,
        site: SiteId,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<Usage>, StoreError> {
        super::planning::abc_usage(self, site, from, to).await
    }

    async fn record_classes(
        &self,
        site: SiteId,
        day: NaiveDate,
        rule: AbcRule,
        classes: Vec<(i64, Class)>,
    ) -> Result<AbcSummary, StoreError> {
        super::planning::record_classes(self, site, day, rule, classes).await
    }

    async fn latest_abc(&self, site: SiteId) -> Result<Option<AbcSummary>, StoreError> {
        super::planning::latest_abc(self, site).await
    }

    async fn class_history(&self, site: SiteId, sku: Sku) -> Result<Vec<ClassChange>, StoreError> {
        super::planning::class_history(self, site, sku).await
    }

    async fn record_short_picks(
        &self,
        site: SiteId,
        rows: Vec<NewShortPick>,
    ) -> Result<ShortPickOutcome, StoreError> {
        super::planning::record_short_picks(self, site, rows).await
    }

    async fn plan_input(
        &self,
        site: SiteId,
        day: NaiveDate,
        day_end: Timestamp,
        capacity: Capacity,
        fill: Fill,
    ) -> Result<PlanInput, StoreError> {
        super::planning::plan_input(self, site, day, day_end, capacity, fill).await
    }

    async fn save_count_list(&self, site: SiteId, list: NewCountList) -> Result<i64, StoreError> {
        super::count_lists::save_count_list(self, site, list).await
    }

    async fn count_list(
        &self,
        site: SiteId,
        day: NaiveDate,
    ) -> Result<Option<ListView>, StoreError> {
        super::count_lists::count_list(self, site, day).await
    }

    async fn move_task(
        &self,
        site: SiteId,
        day: NaiveDate,
        task: i64,
        run: u32,
    ) -> Result<(), StoreError> {
        super::count_lists::move_task(self, site, day, task, run).await
    }

    async fn hold_run(
        &self,
        site: SiteId,
        day: NaiveDate,
        run: u32,
        holder: Option<crate::accounts::UserName>,
    ) -> Result<(), StoreError> {
        super::count_lists::hold_run(self, site, day, run, holder).await
    }

    async fn bin_contents(
        &self,
        site: SiteId,
        bins: Vec<BinCode>,
    ) -> Result<std::collections::HashMap<String, Vec<crate::planning::phone::ItemBrief>>, StoreError>
    {
        super::master::bin_contents(self, site, bins).await
    }

    async fn finish_task(&self, site: SiteId, task: i64, at: Timestamp) -> Result<(), StoreError> {
        super::count_lists::finish_task(self, site, task, at).await
    }

    async fn catalog(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::planning::phone::ItemBrief>, StoreError> {
        super::sync::catalog(self, site).await
    }

    async fn count_lines(
        &self,
        site: SiteId,
        after: i64,
        limit: usize,
    ) -> Result<Vec<crate::sync::results::StoredLine>, StoreError> {
        super::sync::count_lines(self, site, after, limit).await
    }

    async fn netting_settings(
        &self,
        site: SiteId,
    ) -> Result<crate::netting::service::NettingSettings, StoreError> {
        super::netting::netting_settings(self, site).await
    }

    async fn put_netting_settings(
        &self,
        site: SiteId,
        settings: crate::netting::service::NettingSettings,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        super::netting::put_netting_settings(self, site, settings, audit).await
    }

    async fn source_timings(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::netting::service::SourceTimingRow>, StoreError> {
        super::netting::source_timings(self, site).await
    }

    async fn put_source_timings(
        &self,
        site: SiteId,
        rows: Vec<crate::netting::service::SourceTimingRow>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        super::netting::put_source_timings(self, site, rows, audit).await
    }

    async fn reason_codes(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::netting::service::ReasonCode>, StoreError> {
        super::netting::reason_codes(self, site).await
    }

    async fn put_reason_codes(
        &self,
        site: SiteId,
        rows: Vec<crate::netting::service::ReasonCode>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        super::netting::put_reason_codes(self, site, rows, audit).await
    }

    async fn edit_source_timings(
        &self,
        site: SiteId,
        shown: Vec<String>,
        rows: Vec<crate::netting::service::SourceTimingRow>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        super::netting::edit_source_timings(self, site, shown, rows, audit).await
    }

    async fn edit_reason_codes(
        &self,
        site: SiteId,
        shown: Vec<String>,
        rows: Vec<crate::netting::service::ReasonCode>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        super::netting::edit_reason_codes(self, site, shown, rows, audit).await
    }

    async fn reason_code_uses(
        &self,
        site: SiteId,
    ) -> Result<std::collections::BTreeMap<String, i64>, StoreError> {
        super::netting::reason_code_uses(self, site).await
    }

    async fn count_results(
        &self,
        site: SiteId,
        query: crate::netting::results::ResultQuery,
    ) -> Result<crate::netting::results::ResultPage, StoreError> {
        super::netting::count_results(self, site, query).await
    }

    async fn count_result(
        &self,
        site: SiteId,
        id: i64,
    ) -> Result<Option<crate::netting::results::ResultDetail>, StoreError> {
        super::netting::count_result(self, site, id).await
    }

    async fn count_pass_report(
        &self,
        site: SiteId,
        pass: crate::netting::results::PassRef,
    ) -> Result<Option<crate::netting::results::PassReport>, StoreError> {
        super::netting::count_pass_report(self, site, pass).await
    }
}
