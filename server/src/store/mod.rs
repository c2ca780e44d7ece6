//! The narrow storage interface the domain code talks to. SQLite implements it
//! today (`sqlite`); another engine can be added behind the same trait without
//! touching the ledger, planning or netting code.

pub mod sqlite;

use crate::accounts::audit::AuditEvent;
use crate::accounts::store::AccountStore;
use crate::accuracy::store::AccuracyStore;
use crate::batch::RowError;
use crate::ledger::{BalanceRow, Movement, NewMovement, RecordOutcome};
use crate::master::codes::{BinCode, Sku, ZoneCode};
use crate::master::{Bin, NewBin, NewItem, NewPack, NewSite, Site, SiteCode, SiteCounts, SiteId};
use crate::planning::abc::{AbcRule, Class, Usage};
use crate::planning::calendar::Calendar;
use crate::planning::plan::{Capacity, Fill, PlanInput};
use crate::planning::short_pick::{NewShortPick, ShortPickOutcome};
use crate::planning::{AbcSummary, ClassChange, ListView, NewCountList, Settings};
use crate::review::store::ReviewStore;
use crate::time::Timestamp;
use async_trait::async_trait;
use chrono::NaiveDate;
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};

/// Most balance rows or movements one page returns.
pub const MAX_PAGE_ROWS: usize = 1_000;

/// Why a store operation did not happen.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// The batch broke rules that need the stored data to check; nothing was written.
    #[error("{} row(s) refused", .0.len())]
    Rejected(Vec<RowError>),
    /// A named thing does not exist.
    #[error("{0}")]
    NotFound(String),
    /// The write conflicts with what is stored (e.g. a site code already taken).
    #[error("{0}")]
    Conflict(String),
    /// The database file belongs to a newer Cairn, or is not a Cairn database.
    #[error("{0}")]
    Incompatible(String),
    /// Anything else: logged once, shown to users as a fixed text.
    #[error(transparent)]
    Internal(#[from] anyhow::Error),
}

impl From<rusqlite::Error> for StoreError {
    fn from(e: rusqlite::Error) -> Self {
        StoreError::Internal(e.into())
    }
}

/// A counter a long write advances, so a CLI can draw a progress bar.
#[derive(Debug, Clone, Default)]
pub struct Progress(Option<Arc<AtomicU64>>);

impl Progress {
    /// Creates a progress counter and the handle to read it.
    pub fn new() -> (Self, Arc<AtomicU64>) {
        let c = Arc::new(AtomicU64::new(0));
        (Self(Some(c.clone())), c)
    }

    /// Advances the counter by `n` rows.
    pub fn tick(&self, n: u64) {
        if let Some(c) = &self.0 {
            c.fetch_add(n, Ordering::Relaxed);
        }
    }
}

/// Which balances to read.
#[derive(Debug, Clone, Default)]
pub struct BalanceQuery {
    pub bin: Option<BinCode>,
    pub sku: Option<Sku>,
    pub lot: Option<String>,
    /// Balance as of this instant; `None` reads the current balance.
    pub at: Option<Timestamp>,
    /// Include keys whose balance is zero.
    pub include_zero: bool,
    pub limit: usize,
    /// Opaque cursor from the previous page.
    pub after: Option<String>,
}

/// A page of balances.
#[derive(Debug, Clone, serde::Serialize)]
pub struct BalancePage {
    pub balances: Vec<BalanceRow>,
    pub next: Option<String>,
    pub watermark: i64,
}

/// Whose movement history to read.
#[derive(Debug, Clone)]
pub enum HistorySubject {
    Bin(BinCode),
    Item(Sku),
}

/// A movement-history query over an event-time range, paged.
#[derive(Debug, Clone)]
pub struct HistoryQuery {
    pub subject: HistorySubject,
    pub from: Option<Timestamp>,
    pub to: Option<Timestamp>,
    pub limit: usize,
    pub after: Option<String>,
}

/// A page of movements in event order.
#[derive(Debug, Clone, serde::Serialize)]
pub struct HistoryPage {
    pub movements: Vec<Movement>,
    pub next: Option<String>,
}

/// True shelf quantity of a key, for demo sites only.
#[derive(Debug, Clone)]
pub struct ShelfRow {
    pub bin: BinCode,
    pub sku: Sku,
    pub lot: String,
    pub qty: i64,
}

/// The operations the rest of Cairn needs from storage.
#[async_trait]
pub trait Store: AccountStore + AccuracyStore + ReviewStore + Send + Sync + 'static {
    /// Answers when the database is open and migrated.
    async fn ping(&self) -> Result<(), StoreError>;

    /// Answers when the writer takes jobs and the file accepts a write lock
    /// (a round trip through the writer; writes nothing).
    async fn ping_writer(&self) -> Result<(), StoreError>;
    /// Creates a site; its code must be new.
    async fn create_site(&self, site: NewSite) -> Result<Site, StoreError>;
    /// Sets a site's time zone and writes `audit` in the same transaction; returns the
    /// zone it had.
    async fn set_site_zone(
        &self,
        site: SiteId,
        zone: crate::time::day::SiteZone,
        audit: crate::accounts::audit::AuditEvent,
    ) -> Result<String, StoreError>;
    /// Finds a site by code.
    async fn site(&self, code: &SiteCode) -> Result<Option<Site>, StoreError>;
    /// Lists every site.
    async fn sites(&self) -> Result<Vec<Site>, StoreError>;
    /// Counts a site's master data and movements.
    async fn site_counts(&self, site: SiteId) -> Result<SiteCounts, StoreError>;
    /// Lists a site's bins (of one zone, if given) in zone, aisle, bay, level order.
    async fn bins(&self, site: SiteId, zone: Option<ZoneCode>) -> Result<Vec<Bin>, StoreError>;
    /// Creates or updates bins (by code), creating zones as needed. All or nothing.
    /// A batch's `audit` event (if any) is written in the same transaction, with its counts.
    async fn put_bins(
        &self,
        site: SiteId,
        rows: Vec<NewBin>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError>;
    /// Creates or updates items (by SKU). All or nothing.
    async fn put_items(
        &self,
        site: SiteId,
        rows: Vec<NewItem>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError>;
    /// Creates or updates packs (by GTIN). All or nothing.
    async fn put_packs(
        &self,
        site: SiteId,
        rows: Vec<NewPack>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<usize, StoreError>;
    /// Appends movements, idempotent by sender id. All or nothing.
    async fn record_movements(
        &self,
        site: SiteId,
        rows: Vec<NewMovement>,
        progress: Progress,
        audit: Option<AuditEvent>,
    ) -> Result<RecordOutcome, StoreError>;
    /// Reads balances now or as of an instant.
    async fn balances(&self, site: SiteId, query: BalanceQuery) -> Result<BalancePage, StoreError>;
    /// Reads a bin's or an item's movements in an event-time range.
    async fn movements(&self, site: SiteId, query: HistoryQuery)
    -> Result<HistoryPage, StoreError>;
    /// Replaces the demo site's true shelf quantities.
    async fn put_demo_shelf(&self, site: SiteId, rows: Vec<ShelfRow>) -> Result<(), StoreError>;

    // The day's count list.

    /// Reads a site's planning settings (the defaults until some are stored).
    async fn planning_settings(&self, site: SiteId) -> Result<Settings, StoreError>;
    /// Stores a site's planning settings.
    async fn put_planning_settings(
        &self,
        site: SiteId,
        settings: Settings,
    ) -> Result<(), StoreError>;
    /// Reads a site's calendar (Monday to Friday until one is stored).
    async fn calendar(&self, site: SiteId) -> Result<Calendar, StoreError>;
    /// Replaces a site's calendar.
    async fn put_calendar(&self, site: SiteId, calendar: Calendar) -> Result<(), StoreError>;
    /// Sums each item's issues with event time in `[from, to)`.
    async fn abc_usage(
        &self,
        site: SiteId,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<Usage>, StoreError>;
    /// Stores a classification and the class changes it brings.
    async fn record_classes(
        &self,
        site: SiteId,
        day: NaiveDate,
        rule: AbcRule,
        classes: Vec<(i64, Class)>,
    ) -> Result<AbcSummary, StoreError>;
    /// Reads the newest classification, if any.
    async fn latest_abc(&self, site: SiteId) -> Result<Option<AbcSummary>, StoreError>;
    /// Reads when an item entered each of its classes.
    async fn class_history(&self, site: SiteId, sku: Sku) -> Result<Vec<ClassChange>, StoreError>;
    /// Appends short-pick reports, idempotent by id. All or nothing.
    async fn record_short_picks(
        &self,
        site: SiteId,
        rows: Vec<NewShortPick>,
    ) -> Result<ShortPickOutcome, StoreError>;
    /// Gathers the facts a day's plan is built from; `day_end` is the first instant after
    /// the site's local day `day` (`time::day`).
    async fn plan_input(
        &self,
        site: SiteId,
        day: NaiveDate,
        day_end: Timestamp,
        capacity: Capacity,
        fill: Fill,
    ) -> Result<PlanInput, StoreError>;
    /// Stores a day's list; returns its id.
    async fn save_count_list(&self, site: SiteId, list: NewCountList) -> Result<i64, StoreError>;
    /// Reads a day's stored list.
    async fn count_list(
        &self,
        site: SiteId,
        day: NaiveDate,
    ) -> Result<Option<ListView>, StoreError>;
    /// Moves a task of a day's list to another run.
    async fn move_task(
        &self,
        site: SiteId,
        day: NaiveDate,
        task: i64,
        run: u32,
    ) -> Result<(), StoreError>;
    /// Gives a run of a day's list to a counter.
    async fn hold_run(
        &self,
        site: SiteId,
        day: NaiveDate,
        run: u32,
        holder: String,
    ) -> Result<(), StoreError>;
    /// Lists what each named bin should hold (items with a non-zero balance and
    /// their packs), without quantities: what a counter may be told.
    async fn bin_contents(
        &self,
        site: SiteId,
        bins: Vec<String>,
    ) -> Result<std::collections::HashMap<String, Vec<crate::planning::phone::ItemBrief>>, StoreError>;
    /// Marks a task done and its bin counted whole.
    async fn finish_task(&self, site: SiteId, task: i64, at: Timestamp) -> Result<(), StoreError>;

    // Phones' counts.

    /// Applies a sync request in one transaction; one result per event, in order.
    async fn apply_sync(
        &self,
        batch: crate::sync::SyncBatch,
    ) -> Result<Vec<cairn_scan::wire::EventResult>, StoreError>;
    /// Lists every item of a site with its packs (no quantities), for phones.
    async fn catalog(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::planning::phone::ItemBrief>, StoreError>;
    /// Lists a site's count lines in arrival order, `limit` after line `after`.
    async fn count_lines(
        &self,
        site: SiteId,
        after: i64,
        limit: usize,
    ) -> Result<Vec<crate::store::sqlite::sync::StoredLine>, StoreError>;

    // Netting (DESIGN §4-5): results are written by the sync and movement paths
    // themselves; these read them and keep the policy.

    /// Reads a site's tolerances and review limits (the defaults until some are stored).
    async fn netting_settings(
        &self,
        site: SiteId,
    ) -> Result<crate::netting::service::NettingSettings, StoreError>;
    /// Stores a site's tolerances and review limits.
    async fn put_netting_settings(
        &self,
        site: SiteId,
        settings: crate::netting::service::NettingSettings,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Lists a site's movement sources' timing.
    async fn source_timings(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::netting::service::SourceTimingRow>, StoreError>;
    /// Replaces a site's movement sources' timing.
    async fn put_source_timings(
        &self,
        site: SiteId,
        rows: Vec<crate::netting::service::SourceTimingRow>,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Lists a site's reason codes.
    async fn reason_codes(
        &self,
        site: SiteId,
    ) -> Result<Vec<crate::netting::service::ReasonCode>, StoreError>;
    /// Replaces a site's reason codes; a code a decision names is never dropped (Conflict).
    async fn put_reason_codes(
        &self,
        site: SiteId,
        rows: Vec<crate::netting::service::ReasonCode>,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Replaces a site's movement sources' timing from a page that showed the
    /// sources `shown`; refused (Conflict) if they changed since.
    async fn edit_source_timings(
        &self,
        site: SiteId,
        shown: Vec<String>,
        rows: Vec<crate::netting::service::SourceTimingRow>,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Replaces a site's reason codes from a page that showed the codes `shown`;
    /// refused (Conflict) if they changed since, or if a used code would go.
    async fn edit_reason_codes(
        &self,
        site: SiteId,
        shown: Vec<String>,
        rows: Vec<crate::netting::service::ReasonCode>,
        audit: AuditEvent,
    ) -> Result<(), StoreError>;
    /// Counts the decisions that name each reason code of a site.
    async fn reason_code_uses(
        &self,
        site: SiteId,
    ) -> Result<std::collections::BTreeMap<String, i64>, StoreError>;
    /// Lists a site's count results.
    async fn count_results(
        &self,
        site: SiteId,
        query: crate::store::sqlite::netting::ResultQuery,
    ) -> Result<crate::store::sqlite::netting::ResultPage, StoreError>;
    /// Reads one count result with its evidence.
    async fn count_result(
        &self,
        site: SiteId,
        id: i64,
    ) -> Result<Option<crate::store::sqlite::netting::ResultDetail>, StoreError>;
    /// Reads a count pass (by id or uid) with its current results.
    async fn count_pass_report(
        &self,
        pass: String,
    ) -> Result<Option<crate::store::sqlite::netting::PassReport>, StoreError>;
    /// Nets again every pass marked done at a site (or one pass), superseding what changed.
    async fn renet(
        &self,
        site: SiteId,
        pass: Option<String>,
        reason: String,
    ) -> Result<crate::store::sqlite::netting::NetOutcome, StoreError>;
    /// Marks results whose settling instant has passed as settled and posts the automatic
    /// count adjustments then due, in one transaction.
    async fn settle_results(
        &self,
        now: Timestamp,
    ) -> Result<crate::store::sqlite::netting::SettleOutcome, StoreError>;
}
