//! The embedded SQLite store: one file in WAL mode, one writer thread, pooled
//! readers. All SQL of Cairn lives below this module.

pub mod accounts;
pub mod accuracy;
pub mod auto_adjust;
pub mod backup;
pub mod ceiling;
pub mod ledger;
pub mod master;
pub mod migrate;
pub mod netting;
pub mod planning;
pub mod pool;
pub mod recount_tasks;
pub mod review;
pub mod sync;

use super::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, Progress, ShelfRow, Store, StoreError,
    StoreOptions as OpenOptions, Synchronous,
};
use crate::accounts::audit::AuditEvent;
use crate::ledger::NewMovement;
use crate::master::codes::{BinCode, MovementUid, Sku, ZoneCode};
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
use crate::time::Timestamp;
use async_trait::async_trait;
use chrono::NaiveDate;
use pool::{Readers, Writer, connect};
use rusqlite::Connection;
use std::path::{Path, PathBuf};

impl Synchronous {
    fn as_str(self) -> &'static str {
        match self {
            Synchronous::Full => "FULL",
            Synchronous::Normal => "NORMAL",
        }
    }
}

/// The SQLite implementation of [`Store`].
pub struct SqliteStore {
    path: PathBuf,
    opts: OpenOptions,
    writer: Writer,
    readers: Readers,
}

impl SqliteStore {
    /// Opens (creating if needed) and migrates the database at `path`.
    pub fn open(path: &Path, opts: OpenOptions) -> Result<Self, StoreError> {
        let mut conn = connect(path, &opts, false)
            .map_err(|e| anyhow::anyhow!("cannot open database {}: {e}", path.display()))?;
        let mode: String = conn.query_row("pragma journal_mode = wal", [], |r| r.get(0))?;
        if mode != "wal" {
            return Err(anyhow::anyhow!(
                "database {} cannot use WAL mode (got {mode})",
                path.display()
            )
            .into());
        }
        migrate::migrate(&mut conn)?;
        let readers = Readers::open(path, &opts, opts.readers)?;
        let writer = Writer::start(conn)
            .map_err(|e| anyhow::anyhow!("cannot start the writer thread: {e}"))?;
        Ok(Self {
            path: path.to_path_buf(),
            opts,
            writer,
            readers,
        })
    }

    /// Returns the database file's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Opens a separate read connection, for benchmarks and tools.
    pub fn reader_connection(&self) -> Result<Connection, StoreError> {
        Ok(connect(&self.path, &self.opts, true)?)
    }

    /// Runs `f` in one write transaction; it commits only if `f` succeeds.
    pub async fn write_tx<R, F>(&self, f: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&rusqlite::Transaction<'_>) -> Result<R, StoreError> + Send + 'static,
    {
        self.writer
            .run(move |conn| {
                let tx = conn.transaction()?;
                let out = f(&tx)?;
                tx.commit()?;
                Ok(out)
            })
            .await
    }

    /// Runs `f` in a write transaction it may share with other such writes queued at
    /// the same moment (one commit for the group); `f`'s own changes are undone if it
    /// fails. Answers only after the commit.
    pub async fn write_shared<R, F>(&self, f: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&rusqlite::Transaction<'_>) -> Result<R, StoreError> + Send + 'static,
    {
        self.writer.run_shared(f).await
    }
}

/// A SQLite failure is an internal error: logged once, shown as a fixed text.
impl From<rusqlite::Error> for StoreError {
    fn from(e: rusqlite::Error) -> Self {
        StoreError::Internal(e.into())
    }
}

/// One write transaction as the domain's transaction traits see it (`NettingTx`,
/// `LedgerTx`, `ReviewTx`, `SettleTx`, `AuditTx`): the SQLite transaction and the
/// settings its writes need. It derefs to the transaction for the SQL helpers.
pub struct Tx<'a> {
    sql: &'a rusqlite::Transaction<'a>,
    snapshot_every: i64,
}

impl<'a> Tx<'a> {
    /// Wraps a transaction; `snapshot_every` is the ledger's snapshot spacing.
    pub fn new(sql: &'a rusqlite::Transaction<'a>, snapshot_every: i64) -> Self {
        Self {
            sql,
            snapshot_every,
        }
    }
}

impl<'a> std::ops::Deref for Tx<'a> {
    type Target = rusqlite::Transaction<'a>;
    fn deref(&self) -> &Self::Target {
        self.sql
    }
}

impl crate::ledger::LedgerTx for Tx<'_> {
    fn bin_id(&self, site: SiteId, bin: &BinCode) -> Result<Option<i64>, StoreError> {
        Ok(ledger::find_bin(self, site, bin)?)
    }

    fn item_ref(
        &self,
        site: SiteId,
        sku: &Sku,
    ) -> Result<Option<crate::ledger::ItemRef>, StoreError> {
        Ok(ledger::find_item(self, site, sku)?)
    }

    fn movement_by_uid(
        &self,
        uid: &MovementUid,
    ) -> Result<Option<crate::ledger::StoredMovement>, StoreError> {
        Ok(ledger::movement_by_uid(self, uid)?)
    }

    fn is_reversed(&self, movement: i64) -> Result<bool, StoreError> {
        Ok(ledger::is_reversed(self, movement)?)
    }

    fn insert_movement(
        &self,
        site: SiteId,
        m: &NewMovement,
        key: &crate::ledger::LedgerKey,
        recorded_at: Timestamp,
        reverses: Option<i64>,
    ) -> Result<crate::ledger::Inserted, StoreError> {
        Ok(ledger::insert_movement(
            self,
            site,
            m,
            key,
            recorded_at,
            reverses,
            self.snapshot_every,
        )?)
    }
}

impl crate::ledger::WatermarkTx for Tx<'_> {
    fn watermark(&self) -> Result<i64, StoreError> {
        Ok(ledger::watermark(self)?)
    }
}

impl crate::accounts::audit::AuditTx for Tx<'_> {
    fn insert_audit(&self, event: &AuditEvent) -> Result<(), StoreError> {
        accounts::insert_audit(self, event)
    }
}

/// Writes a batch's audit event in the batch's own transaction, with the counts
/// it wrote added to the event's detail, so the two commit or vanish together.
fn audit_in(
    tx: &rusqlite::Transaction<'_>,
    audit: Option<AuditEvent>,
    counts: serde_json::Value,
) -> Result<(), StoreError> {
    let Some(event) = audit else {
        return Ok(());
    };
    accounts::insert_audit(tx, &event.with_counts(counts))
}

#[async_trait]
impl Store for SqliteStore {
    async fn ping(&self) -> Result<(), StoreError> {
        self.readers
            .run(|c| {
                let v: i64 = c.query_row(
                    "select coalesce(max(version), 0) from schema_migration",
                    [],
                    |r| r.get(0),
                )?;
                if v == migrate::latest_version() {
                    Ok(())
                } else {
                    Err(StoreError::Incompatible(format!(
                        "schema version {v} is not the expected {}",
                        migrate::latest_version()
                    )))
                }
            })
            .await
    }

    async fn ping_writer(&self) -> Result<(), StoreError> {
        self.writer
            .run(|conn| {
                // BEGIN IMMEDIATE takes the write lock; rolling back writes nothing.
                conn.execute_batch("begin immediate; rollback")?;
                Ok(())
            })
            .await
    }

    async fn create_site(&self, site: NewSite) -> Result<Site, StoreError> {
        self.write_tx(move |tx| master::create_site(tx, &site))
            .await
    }

    async fn set_site_zone(
        &self,
        site: SiteId,
        zone: crate::time::day::SiteZone,
        audit: crate::accounts::audit::AuditEvent,
    ) -> Result<String, StoreError> {
        self.write_tx(move |tx| {
            let was = master::set_site_zone(tx, site, zone)?;
            let mut audit = audit;
            audit.detail = serde_json::json!({"was": was, "now": zone.name()});
            accounts::insert_audit(tx, &audit)?;
            Ok(was)
        })
        .await
    }

    async fn site(&self, code: &SiteCode) -> Result<Option<Site>, StoreError> {
        let code = code.clone();
        self.readers.run(move |c| master::site(c, &code)).await
    }

    async fn sites(&self) -> Result<Vec<Site>, StoreError> {
        self.readers.run(master::sites).await
    }

    async fn site_counts(&self, site: SiteId) -> Result<SiteCounts, StoreError> {
        self.readers
            .run(move |c| master::site_counts(c, site))
            .await
    }

    async fn bin_contents(
        &self,
        site: SiteId,
        bins: Vec<crate::master::codes::BinCode>,
    ) -> Result<std::collections::HashMap<String, Vec<crate::planning::phone::ItemBrief>>, StoreError>
    {
        self.readers
            .run(move |c| master::bin_contents(c, site, &bins))
            .await
    }

    async fn bins(&self, site: SiteId, zone: Option<ZoneCode>) -> Result<Vec<Bin>, StoreError> {
        self.readers
            .run(move |c| master::bins(c, site, zone.as_ref()))
            .await
    }

    async fn zone_rows(&self, site: SiteId, query: ZoneQuery) -> Result<Vec<ZoneRow>, StoreError> {
        self.readers
            .run(move |c| master::zone_rows(c, site, &query))
            .await
    }

    async fn bin_rows(&self, site: SiteId, query: BinQuery) -> Result<Vec<BinRow>, StoreError> {
        self.readers
            .run(move |c| master::bin_rows(c, site, &query))
            .await
    }

    async fn item_rows(&self, site: SiteId, query: ItemQuery) -> Result<Vec<ItemRow>, StoreError> {
        self.readers
            .run(move |c| master::item_rows(c, site, &query))
            .await
    }

    async fn lot_rows(&self, site: SiteId, query: LotQuery) -> Result<Vec<LotRow>, StoreError> {
        self.readers
            .run(move |c| master::lot_rows(c, site, &query))
            .await
    }

    async fn pack_rows(
        &self,
        site: SiteId,
        query: PackQuery,
    ) -> Result<Vec<SkuPackRow>, StoreError> {
        self.readers
            .run(move |c| master::pack_rows(c, site, &query))
            .await
    }

    async fn put_bins(
        &self,
        site: SiteId,
        rows: Vec<NewBin>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        self.write_tx(move |tx| {
            let written = master::put_bins(tx, site, &rows, &progress)?;
            audit_in(tx, audit, serde_json::json!({"written": written}))?;
            Ok(written)
        })
        .await
    }

    async fn put_items(
        &self,
        site: SiteId,
        rows: Vec<NewItem>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        self.write_tx(move |tx| {
            let written = master::put_items(tx, site, &rows, &progress)?;
            audit_in(tx, audit, serde_json::json!({"written": written}))?;
            Ok(written)
        })
        .await
    }

    async fn put_packs(
        &self,
        site: SiteId,
        rows: Vec<NewPack>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError> {
        self.write_tx(move |tx| {
            let written = master::put_packs(tx, site, &rows, &progress)?;
            audit_in(tx, audit, serde_json::json!({"written": written}))?;
            Ok(written)
        })
        .await
    }

    async fn balances(&self, site: SiteId, query: BalanceQuery) -> Result<BalancePage, StoreError> {
        self.readers
            .run(move |c| ledger::balances(c, site, &query))
            .await
    }

    async fn movements(
        &self,
        site: SiteId,
        query: HistoryQuery,
    ) -> Result<HistoryPage, StoreError> {
        self.readers
            .run(move |c| ledger::history(c, site, &query))
            .await
    }

    async fn put_demo_shelf(&self, site: SiteId, rows: Vec<ShelfRow>) -> Result<(), StoreError> {
        self.write_tx(move |tx| master::put_demo_shelf(tx, site, &rows))
            .await
    }

    async fn shelf_keys(&self, site: SiteId) -> Result<Vec<crate::store::ShelfKey>, StoreError> {
        self.readers.run(move |c| master::shelf_keys(c, site)).await
    }

    async fn planning_settings(&self, site: SiteId) -> Result<Settings, StoreError> {
        self.readers.run(move |c| planning::settings(c, site)).await
    }

    async fn put_planning_settings(
        &self,
        site: SiteId,
        settings: Settings,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| planning::put_settings(tx, site, &settings))
            .await
    }

    async fn frequency_policy(
        &self,
        site: SiteId,
    ) -> Result<crate::planning::policy::FrequencyPolicy, StoreError> {
        self.readers
            .run(move |c| planning::frequency_policy(c, site))
            .await
    }

    async fn put_frequency_policy(
        &self,
        site: SiteId,
        policy: crate::planning::policy::FrequencyPolicy,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            accounts::insert_audit(tx, &audit)?;
            planning::put_frequency_policy(tx, site, &policy, audit.at)
        })
        .await
    }

    async fn item_worth(
        &self,
        site: SiteId,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<crate::planning::policy::ItemWorth>, StoreError> {
        self.readers
            .run(move |c| planning::item_worth(c, site, from, to))
            .await
    }

    async fn calendar(&self, site: SiteId) -> Result<Calendar, StoreError> {
        self.readers.run(move |c| planning::calendar(c, site)).await
    }

    async fn put_calendar(&self, site: SiteId, calendar: Calendar) -> Result<(), StoreError> {
        self.write_tx(move |tx| planning::put_calendar(tx, site, &calendar))
            .await
    }

    async fn abc_usage(
        &self,
        site: SiteId,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<Usage>, StoreError> {
        self.readers
            .run(move |c| planning::abc_usage(c, site, from.0, to.0))
            .await
    }

    async fn record_classes(
        &self,
        site: SiteId,
        day: NaiveDate,
        rule: AbcRule,
        classes: Vec<(i64, Class)>,
    ) -> Result<AbcSummary, StoreError> {
        self.write_tx(move |tx| planning::record_classes(tx, site, day, &rule, &classes))
            .await
    }

    async fn latest_abc(&self, site: SiteId) -> Result<Option<AbcSummary>, StoreError> {
        self.readers
            .run(move |c| planning::latest_abc(c, site))
            .await
    }

    async fn class_history(&self, site: SiteId, sku: Sku) -> Result<Vec<ClassChange>, StoreError> {
        self.readers
            .run(move |c| planning::class_history(c, site, sku.as_str()))
            .await
    }

    async fn record_short_picks(
        &self,
        site: SiteId,
        rows: Vec<NewShortPick>,
    ) -> Result<ShortPickOutcome, StoreError> {
        self.write_tx(move |tx| planning::insert_short_picks(tx, site, &rows, Timestamp::now()))
            .await
    }

    async fn plan_input(
        &self,
        site: SiteId,
        day: NaiveDate,
        day_end: Timestamp,
        capacity: Capacity,
        fill: Fill,
    ) -> Result<PlanInput, StoreError> {
        self.readers
            .run(move |c| planning::plan_input(c, site, day, day_end, capacity, fill))
            .await
    }

    async fn save_count_list(&self, site: SiteId, list: NewCountList) -> Result<i64, StoreError> {
        self.write_tx(move |tx| planning::save_count_list(tx, site, &list))
            .await
    }

    async fn count_list(
        &self,
        site: SiteId,
        day: NaiveDate,
    ) -> Result<Option<ListView>, StoreError> {
        self.readers
            .run(move |c| planning::count_list(c, site, day))
            .await
    }

    async fn move_task(
        &self,
        site: SiteId,
        day: NaiveDate,
        task: i64,
        run: u32,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| planning::move_task(tx, site, day, task, run))
            .await
    }

    async fn hold_run(
        &self,
        site: SiteId,
        day: NaiveDate,
        run: u32,
        holder: Option<crate::accounts::UserName>,
    ) -> Result<(), StoreError> {
        let holder = holder.map(|h| h.as_str().to_string()).unwrap_or_default();
        self.write_tx(move |tx| planning::hold_run(tx, site, day, run, &holder))
            .await
    }

    async fn finish_task(&self, site: SiteId, task: i64, at: Timestamp) -> Result<(), StoreError> {
        self.write_tx(move |tx| planning::finish_task(tx, site, task, at))
            .await
    }

    async fn catalog(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::planning::phone::ItemBrief>, StoreError> {
        self.readers.run(move |c| sync::catalog(c, site)).await
    }

    async fn count_lines(
        &self,
        site: SiteId,
        after: i64,
        limit: usize,
    ) -> Result<Vec<crate::sync::results::StoredLine>, StoreError> {
        self.readers
            .run(move |c| sync::count_lines(c, site, after, limit))
            .await
    }

    async fn netting_settings(
        &self,
        site: SiteId,
    ) -> Result<crate::netting::service::NettingSettings, StoreError> {
        self.readers
            .run(move |c| netting::netting_settings(c, site))
            .await
    }

    async fn put_netting_settings(
        &self,
        site: SiteId,
        settings: crate::netting::service::NettingSettings,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            accounts::insert_audit(tx, &audit)?;
            // The change happens when its audit event says (now, for pages and the API).
            netting::put_netting_settings(tx, site, &settings, audit.at)
        })
        .await
    }

    async fn source_timings(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::netting::service::SourceTimingRow>, StoreError> {
        self.readers
            .run(move |c| netting::source_timings(c, site))
            .await
    }

    async fn put_source_timings(
        &self,
        site: SiteId,
        rows: Vec<crate::netting::service::SourceTimingRow>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            accounts::insert_audit(tx, &audit)?;
            netting::put_source_timings(tx, site, &rows)
        })
        .await
    }

    async fn reason_codes(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::netting::service::ReasonCode>, StoreError> {
        self.readers
            .run(move |c| netting::reason_codes(c, site))
            .await
    }

    async fn put_reason_codes(
        &self,
        site: SiteId,
        rows: Vec<crate::netting::service::ReasonCode>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            accounts::insert_audit(tx, &audit)?;
            netting::put_reason_codes(tx, site, &rows)
        })
        .await
    }

    async fn edit_source_timings(
        &self,
        site: SiteId,
        shown: Vec<String>,
        rows: Vec<crate::netting::service::SourceTimingRow>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            accounts::insert_audit(tx, &audit)?;
            netting::edit_source_timings(tx, site, &shown, &rows)
        })
        .await
    }

    async fn edit_reason_codes(
        &self,
        site: SiteId,
        shown: Vec<String>,
        rows: Vec<crate::netting::service::ReasonCode>,
        audit: AuditEvent,
    ) -> Result<(), StoreError> {
        self.write_tx(move |tx| {
            accounts::insert_audit(tx, &audit)?;
            netting::edit_reason_codes(tx, site, &shown, &rows)
        })
        .await
    }

    async fn reason_code_uses(
        &self,
        site: SiteId,
    ) -> Result<std::collections::BTreeMap<String, i64>, StoreError> {
        self.readers
            .run(move |c| netting::reason_code_uses(c, site))
            .await
    }

    async fn count_results(
        &self,
        site: SiteId,
        query: crate::netting::results::ResultQuery,
    ) -> Result<crate::netting::results::ResultPage, StoreError> {
        self.readers
            .run(move |c| netting::count_results(c, site, &query, Timestamp::now()))
            .await
    }

    async fn count_result(
        &self,
        site: SiteId,
        id: i64,
    ) -> Result<Option<crate::netting::results::ResultDetail>, StoreError> {
        self.readers
            .run(move |c| netting::count_result(c, site, id, Timestamp::now()))
            .await
    }

    async fn count_pass_report(
        &self,
        site: SiteId,
        pass: crate::netting::results::PassRef,
    ) -> Result<Option<crate::netting::results::PassReport>, StoreError> {
        self.readers
            .run(move |c| netting::pass_report(c, site, pass, Timestamp::now()))
            .await
    }

    async fn claim_job(
        &self,
        site: SiteId,
        job: &str,
        day: NaiveDate,
        by: &str,
    ) -> Result<bool, StoreError> {
        let (job, by) = (job.to_string(), by.to_string());
        self.write_tx(move |tx| {
            Ok(tx.execute(
                "insert into job_claim (site_id, job, day, claimed_by, claimed_at)
                 values (?1, ?2, ?3, ?4, ?5) on conflict do nothing",
                rusqlite::params![site.0, job, day.to_string(), by, Timestamp::now().0],
            )? == 1)
        })
        .await
    }

    async fn write_work(
        &self,
        _: super::WriteScope,
        work: super::Work,
    ) -> Result<super::Answer, StoreError> {
        let every = self.opts.snapshot_every;
        self.write_tx(move |tx| work(&Tx::new(tx, every))).await
    }

    async fn write_shared_work(
        &self,
        _: super::WriteScope,
        work: super::Work,
    ) -> Result<super::Answer, StoreError> {
        let every = self.opts.snapshot_every;
        self.write_shared(move |tx| work(&Tx::new(tx, every))).await
    }
}

#[cfg(test)]
mod tests;
