//! Joins the accuracy arithmetic to the store: the accuracy report of a
//! period (IRA by class, zone, counter and week; value accuracy; adjustments;
//! compliance; coverage of A items), per-item record error, and the planner's
//! buffer with every term of its derivation.

use super::buffer::{self, Buffer, BufferInputs};
use super::coverage;
use super::demand::{self, Demand};
use super::inputs::{AccuracySettings, LeadTimes, PlannerInput};
use super::item_error::ItemCount;
use super::items::{self, GrowthView, ItemFigures, KeyCount};
use super::metrics::{self, CountResult, DueItem, Ratio, TaskTally, Week};
use super::store::{ItemRow, PlannedTask, ResultQuery, StoredResult};
use super::whatif::{self, IntervalRow};
use crate::error::ApiError;
use crate::master::Site;
use crate::master::codes::Sku;
use crate::planning::abc::Class;
use crate::planning::policy::Mode;
use crate::store::Store;
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use chrono::{Days, NaiveDate};
use serde::Serialize;
use std::collections::{BTreeMap, HashMap};

/// Longest period one accuracy report may cover, in days (ten years).
pub const MAX_PERIOD_DAYS: i64 = 3660;
/// Days an accuracy report covers when no start is given.
pub const DEFAULT_PERIOD_DAYS: u64 = 90;
/// Verdicts that judge a result; others (a recount pending) wait.
const JUDGED: [&str; 2] = ["hit", "out_of_tolerance"];

/// A span of the site's local days, both ends included.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct Period {
    pub since: NaiveDate,
    pub until: NaiveDate,
    /// The site's zone: its days are the period's days.
    #[serde(skip)]
    pub zone: SiteZone,
}

impl Period {
    /// Builds a period, defaulting to the `default_days` days up to today at the site.
    pub fn new(
        since: Option<NaiveDate>,
        until: Option<NaiveDate>,
        default_days: u64,
        zone: SiteZone,
    ) -> Result<Self, String> {
        let until = until.unwrap_or_else(|| zone.today());
        let since = match since {
            Some(s) => s,
            None => until
                .checked_sub_days(Days::new(default_days.saturating_sub(1)))
                .unwrap_or(NaiveDate::MIN),
        };
        if since > until {
            return Err(format!("since ({since}) is after until ({until})"));
        }
        Ok(Self { since, until, zone })
    }

    /// Checks the period is short enough for a week-by-week report.
    pub fn check_span(&self) -> Result<(), String> {
        if (self.until - self.since).num_days() >= MAX_PERIOD_DAYS {
            return Err(format!("a report covers at most {MAX_PERIOD_DAYS} days"));
        }
        Ok(())
    }

    fn from(&self) -> Timestamp {
        self.zone.start_of(self.since)
    }

    fn to(&self) -> Timestamp {
        self.zone.range(self.until).1
    }

    /// Lists the ISO weeks the period touches, in order.
    pub fn weeks(&self) -> Vec<Week> {
        let mut out: Vec<Week> = Vec::new();
        let mut d = self.since;
        while d <= self.until {
            let w = Week::of(d);
            if out.last() != Some(&w) {
                out.push(w);
            }
            match d.checked_add_days(Days::new(1)) {
                Some(n) => d = n,
                None => break,
            }
        }
        out
    }
}

/// Which results a report takes.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct Filter {
    pub class: Option<Class>,
    pub zone: Option<String>,
}

/// Parts of a whole, with the ratio.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Share {
    pub part: u64,
    pub whole: u64,
    pub value: Option<f64>,
}

impl From<Ratio> for Share {
    fn from(r: Ratio) -> Self {
        Self {
            part: r.part,
            whole: r.whole,
            value: r.value(),
        }
    }
}

/// One group of an IRA table: hits of counted keys.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct GroupRow {
    pub key: String,
    pub hits: u64,
    pub counted: u64,
    pub ira: Option<f64>,
}

fn rows<K: ToString>(m: &BTreeMap<K, Ratio>) -> Vec<GroupRow> {
    m.iter()
        .map(|(k, r)| GroupRow {
            key: k.to_string(),
            hits: r.part,
            counted: r.whole,
            ira: r.value(),
        })
        .collect()
}

/// One ISO week of the trend charts.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct WeekRow {
    pub week: String,
    pub counted: u64,
    pub hits: u64,
    pub ira: Option<f64>,
    pub ira_a: Option<f64>,
    pub ira_b: Option<f64>,
    pub ira_c: Option<f64>,
    pub counted_book_value_minor: i64,
    pub net_adjustment_minor: i64,
    pub gross_adjustment_minor: i64,
    pub value_accuracy: Option<f64>,
    pub planned: u64,
    pub done: u64,
    pub compliance: Option<f64>,
}

/// An A item's due day in the period and whether it was counted by then.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct CoverageRow {
    pub item: String,
    pub due_by: NaiveDate,
    pub counted_on: Option<NaiveDate>,
    pub on_time: bool,
}

/// The accuracy report of one period.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct AccuracyReport {
    pub site: String,
    pub period: Period,
    pub filter: Filter,
    pub ira_target: f64,
    /// Results judged (hit or out of tolerance) in the period, after the filter.
    pub counted: u64,
    /// Results still waiting for a recount, left out of every figure.
    pub pending: u64,
    pub ira: Share,
    pub by_class: Vec<GroupRow>,
    pub by_zone: Vec<GroupRow>,
    pub by_counter: Vec<GroupRow>,
    pub by_week: Vec<GroupRow>,
    pub value_accuracy: Option<f64>,
    pub counted_book_value_minor: i64,
    pub net_adjustment_minor: i64,
    pub gross_adjustment_minor: i64,
    pub compliance: Share,
    /// Coverage of A items; `None` when the class filter excludes A.
    pub coverage: Option<Share>,
    pub coverage_items: Vec<CoverageRow>,
    pub weeks: Vec<WeekRow>,
}

fn internal(e: impl std::fmt::Display) -> ApiError {
    ApiError::Internal(anyhow::anyhow!("stored count results do not add up: {e}"))
}

fn to_metric(r: &StoredResult, zone: SiteZone) -> CountResult {
    CountResult {
        item: r.sku.clone(),
        class: r.class.unwrap_or(Class::C),
        zone: r.zone.clone(),
        counter: r.counter.clone(),
        counted_at: r.counted_at,
        day: zone.day_of(r.counted_at),
        counted_qty: r.counted,
        book_qty: r.f_star,
        variance: r.variance,
        hit: r.verdict == "hit",
        unit_cost_minor: r.unit_cost_minor,
    }
}

fn keep_task(t: &PlannedTask, f: &Filter) -> bool {
    f.class.is_none_or(|c| t.class == Some(c)) && f.zone.as_ref().is_none_or(|z| &t.zone == z)
}

/// Builds the accuracy report of `period` for `site`.
pub async fn accuracy_report(
    store: &dyn Store,
    site: &Site,
    period: Period,
    filter: Filter,
) -> Result<AccuracyReport, ApiError> {
    period.check_span().map_err(ApiError::BadRequest)?;
    let settings = store.accuracy_settings(site.id).await?;
    let stored = store
        .accuracy_results(
            site.id,
            ResultQuery {
                from: period.from(),
                to: period.to(),
                sku: None,
            },
        )
        .await?;
    // Coverage looks at every count of an item, whatever the filter.
    let mut count_days: HashMap<String, Vec<NaiveDate>> = HashMap::new();
    for r in &stored {
        count_days
            .entry(r.sku.clone())
            .or_default()
            .push(period.zone.day_of(r.counted_at));
    }
    let mut pending = 0u64;
    let results: Vec<CountResult> = stored
        .iter()
        .filter(|r| {
            filter
                .class
                .is_none_or(|c| r.class.unwrap_or(Class::C) == c)
                && filter.zone.as_ref().is_none_or(|z| &r.zone == z)
        })
        .filter(|r| {
            let judged = JUDGED.contains(&r.verdict.as_str());
            pending += u64::from(!judged);
            judged
        })
        .map(|r| to_metric(r, period.zone))
        .collect();
    let acc = metrics::record_accuracy(&results).map_err(internal)?;

    let tasks: Vec<PlannedTask> = store
        .planned_tasks(site.id, period.since, period.until)
        .await?
        .into_iter()
        .filter(|t| keep_task(t, &filter))
        .collect();
    let tally = |ts: &mut dyn Iterator<Item = &PlannedTask>| {
        let mut t = TaskTally {
            planned: 0,
            done: 0,
        };
        for task in ts {
            t.planned += 1;
            t.done += u64::from(task.done);
        }
        t
    };
    let compliance = metrics::count_compliance(tally(&mut tasks.iter())).map_err(internal)?;

    let (coverage, coverage_items) = if filter.class.is_none_or(|c| c == Class::A) {
        let rows = coverage_rows(store, site, period, &count_days).await?;
        let due: Vec<DueItem> = rows
            .iter()
            .map(|r| DueItem {
                item: r.item.clone(),
                due_by: r.due_by,
                counted_on: r.counted_on,
            })
            .collect();
        (Some(Share::from(metrics::coverage(&due))), rows)
    } else {
        (None, Vec::new())
    };

    let mut weeks = Vec::new();
    for w in period.weeks() {
        let of_week: Vec<CountResult> = results
            .iter()
            .filter(|r| Week::of(r.day) == w)
            .cloned()
            .collect();
        let wa = metrics::record_accuracy(&of_week).map_err(internal)?;
        let class_ira = |c: Class| wa.by_class.get(&c).and_then(|r| r.value());
        let wt = tally(&mut tasks.iter().filter(|t| Week::of(t.day) == w));
        weeks.push(WeekRow {
            week: w.to_string(),
            counted: wa.ira.whole,
            hits: wa.ira.part,
            ira: wa.ira.value(),
            ira_a: class_ira(Class::A),
            ira_b: class_ira(Class::B),
            ira_c: class_ira(Class::C),
            counted_book_value_minor: wa.counted_book_value_minor,
            net_adjustment_minor: wa.net_adjustment_minor,
            gross_adjustment_minor: wa.gross_adjustment_minor,
            value_accuracy: wa.value_accuracy(),
            planned: wt.planned,
            done: wt.done,
            compliance: metrics::count_compliance(wt).map_err(internal)?.value(),
        });
    }

    Ok(AccuracyReport {
        site: site.code.to_string(),
        period,
        filter,
        ira_target: settings.ira_target,
        counted: acc.ira.whole,
        pending,
        ira: acc.ira.into(),
        by_class: rows(&acc.by_class),
        by_zone: rows(&acc.by_zone),
        by_counter: rows(&acc.by_counter),
        by_week: rows(&acc.by_week),
        value_accuracy: acc.value_accuracy(),
        counted_book_value_minor: acc.counted_book_value_minor,
        net_adjustment_minor: acc.net_adjustment_minor,
        gross_adjustment_minor: acc.gross_adjustment_minor,
        compliance: compliance.into(),
        coverage,
        coverage_items,
        weeks,
    })
}

async fn coverage_rows(
    store: &dyn Store,
    site: &Site,
    period: Period,
    count_days: &HashMap<String, Vec<NaiveDate>>,
) -> Result<Vec<CoverageRow>, ApiError> {
    let calendar = store.calendar(site.id).await?;
    let planning = store.planning_settings(site.id).await?;
    let interval =
        planning
            .frequency
            .interval(Class::A, false, calendar.working_days_in_year(period.until));
    let mut out = Vec::new();
    for item in store.a_items(site.id, period.from()).await? {
        let days = count_days.get(&item.sku).map_or(&[][..], Vec::as_slice);
        for d in coverage::due_items(
            &calendar,
            &item.sku,
            interval,
            item.last_counted_before.map(|t| period.zone.day_of(t)),
            days,
            period.since,
            period.until,
        ) {
            out.push(CoverageRow {
                on_time: d.counted_on.is_some_and(|c| c <= d.due_by),
                item: d.item,
                due_by: d.due_by,
                counted_on: d.counted_on,
            });
        }
    }
    Ok(out)
}

/// One item's record-error figures over a period.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ItemReport {
    #[serde(flatten)]
    pub item: ItemRow,
    pub period: Period,
    #[serde(flatten)]
    pub figures: ItemFigures,
}

fn key_of(r: &StoredResult) -> String {
    if r.lot.is_empty() {
        r.bin.clone()
    } else {
        format!("{} lot {}", r.bin, r.lot)
    }
}

fn key_counts(results: &[StoredResult]) -> Vec<KeyCount> {
    results
        .iter()
        .filter(|r| JUDGED.contains(&r.verdict.as_str()))
        .map(|r| KeyCount {
            key: key_of(r),
            count: ItemCount {
                counted_at: r.counted_at,
                error: r.variance,
                hit: r.verdict == "hit",
            },
        })
        .collect()
}

/// Computes the record-error figures of every item with judged results, by SKU.
pub fn figures_by_sku(
    results: &[StoredResult],
) -> Result<HashMap<String, ItemFigures>, crate::accuracy::item_error::ItemErrorError> {
    let mut by_item: HashMap<&str, Vec<StoredResult>> = HashMap::new();
    for r in results {
        by_item.entry(r.sku.as_str()).or_default().push(r.clone());
    }
    by_item
        .into_iter()
        .map(|(sku, rs)| Ok((sku.to_string(), items::item_figures(&key_counts(&rs))?)))
        .collect()
}

/// Computes record-error figures for every item counted in `period` (or one item).
pub async fn item_reports(
    store: &dyn Store,
    site: &Site,
    period: Period,
    sku: Option<Sku>,
) -> Result<Vec<ItemReport>, ApiError> {
    let items = store.accuracy_items(site.id, sku.clone()).await?;
    if sku.is_some() && items.is_empty() {
        return Err(ApiError::NotFound("no such item at this site".into()));
    }
    let results = store
        .accuracy_results(
            site.id,
            ResultQuery {
                from: period.from(),
                to: period.to(),
                sku: sku.clone(),
            },
        )
        .await?;
    let mut by_item: HashMap<&str, Vec<StoredResult>> = HashMap::new();
    for r in &results {
        by_item.entry(r.sku.as_str()).or_default().push(r.clone());
    }
    let mut out = Vec::new();
    for item in items {
        let rs = by_item
            .get(item.sku.as_str())
            .map_or(&[][..], Vec::as_slice);
        if rs.is_empty() && sku.is_none() {
            continue;
        }
        let figures = items::item_figures(&key_counts(rs)).map_err(internal)?;
        out.push(ItemReport {
            item,
            period,
            figures,
        });
    }
    Ok(out)
}

/// Where the lead time of an item came from.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct LeadSource {
    /// `item`, or `group NAME` for a group default.
    pub source: String,
    #[serde(flatten)]
    pub times: LeadTimes,
}

/// The record-error term of a buffer and how it was found.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct RecordErrorTerm {
    /// Days after a count the error is taken at: the item's count interval in
    /// calendar days, the error's largest in the cycle the buffer is held through.
    pub at_days: f64,
    /// Where that interval comes from, e.g. `class B: 4 counts a year`.
    pub interval_source: String,
    /// σ of one bin-lot key at that age, from the growth fit: `sqrt(a + b·days)`.
    pub per_key_sd: Option<f64>,
    /// Keys holding the item now (at least 1), whose errors add as independent.
    pub keys: u32,
    /// σrec = per-key σ · sqrt(keys); 0 when there is no fit.
    pub sigma_rec: f64,
    pub growth: GrowthView,
}

/// An item's buffer with every term of its derivation.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct BufferReport {
    #[serde(flatten)]
    pub item: ItemRow,
    pub demand: Demand,
    pub lead_time: Option<LeadSource>,
    pub service_level: f64,
    /// `item`, `group NAME` or `class X` (the site's level for the class).
    pub service_level_source: String,
    pub record_error: RecordErrorTerm,
    /// The arithmetic; `None` when an input is missing or refused (see `notes`).
    pub buffer: Option<Buffer>,
    pub counting: CountingWhatIf,
    pub notes: Vec<String>,
}

impl BufferReport {
    /// Returns the safety stock change if the item were counted every 30 days
    /// (negative: stock freed); `None` without what-if rows.
    pub fn monthly_ss_change(&self) -> Option<f64> {
        self.counting
            .rows
            .iter()
            .find(|w| w.interval_days == whatif::MONTHLY_DAYS)
            .map(|w| w.safety_stock_change)
    }
}

/// How σrec, safety stock and the order point would change if the item were
/// counted at another interval, every other input as today.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct CountingWhatIf {
    /// Whose error growth the rows come from: `item` (its own repeat counts);
    /// `null` when there are no rows.
    pub fit: Option<String>,
    /// Repeat counts of a bin behind the fit.
    pub points: usize,
    /// Shortest interval first; the item's interval today is marked `current`.
    pub rows: Vec<IntervalRow>,
    /// Why there are no rows, in words.
    pub note: Option<String>,
}

/// How often an item is counted today, in calendar days, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct CountInterval {
    pub days: f64,
    pub source: String,
}

/// Returns each class's count interval under the site's planning settings.
fn class_intervals(settings: &crate::planning::Settings) -> [CountInterval; 3] {
    let per_year = settings.frequency.per_year;
    Class::ALL.map(|c| {
        let n = per_year[c.index()].max(1);
        let counts = if n == 1 { "count" } else { "counts" };
        CountInterval {
            days: 365.0 / f64::from(n),
            source: format!("class {c}: {n} {counts} a year"),
        }
    })
}

/// Returns the item's interval: the one the risk policy chose for it, else its class's.
fn interval_of(
    item: &ItemRow,
    classes: &[CountInterval; 3],
    risk: Option<&(Mode, HashMap<String, f64>)>,
) -> CountInterval {
    let class = &classes[item.class.unwrap_or(Class::C).index()];
    match risk {
        None => class.clone(),
        Some((mode, chosen)) => match chosen.get(&item.sku) {
            Some(&days) => CountInterval {
                days,
                source: format!("chosen by the site's {} policy", mode.as_str()),
            },
            None => CountInterval {
                days: class.days,
                source: format!(
                    "{} (the {} policy sets none for an item in no bin or dead stock)",
                    class.source,
                    mode.as_str()
                ),
            },
        },
    }
}

/// What a buffer period and window are: the last day of demand and its length.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct DemandWindow {
    pub until: NaiveDate,
    pub days: u32,
    /// The site's zone: demand is counted per local day.
    pub zone: SiteZone,
}

impl DemandWindow {
    /// Builds the window: by default the site's window up to yesterday at the site.
    pub fn new(
        until: Option<NaiveDate>,
        days: Option<u32>,
        settings: &AccuracySettings,
        zone: SiteZone,
    ) -> Result<Self, String> {
        let until = until.unwrap_or_else(|| {
            let today = zone.today();
            today.pred_opt().unwrap_or(today)
        });
        let days = days.unwrap_or(settings.demand_window_days);
        if days == 0 || days > super::inputs::MAX_WINDOW_DAYS {
            return Err(format!(
                "window_days must be 1 to {}",
                super::inputs::MAX_WINDOW_DAYS
            ));
        }
        Ok(Self { until, days, zone })
    }

    fn from(&self) -> NaiveDate {
        self.until
            .checked_sub_days(Days::new(u64::from(self.days) - 1))
            .unwrap_or(NaiveDate::MIN)
    }
}

/// Computes the buffer of every item (or one), with every term.
pub async fn buffer_reports(
    store: &dyn Store,
    site: &Site,
    window: DemandWindow,
    sku: Option<Sku>,
    asked_days: Option<u32>,
) -> Result<Vec<BufferReport>, ApiError> {
    let settings = store.accuracy_settings(site.id).await?;
    let classes = class_intervals(&store.planning_settings(site.id).await?);
    let risk = crate::planning::service::risk_intervals(store, site, window.zone.today()).await?;
    let calendar = store.calendar(site.id).await?;
    let items = store.accuracy_items(site.id, sku.clone()).await?;
    if sku.is_some() && items.is_empty() {
        return Err(ApiError::NotFound("no such item at this site".into()));
    }
    let from = window.from();
    let end = window.zone.range(window.until).1;
    // Each local day of the window, by its first instant: the store sums picks per day
    // between these bounds and computes no dates itself.
    let days = from
        .iter_days()
        .take_while(|d| *d <= window.until)
        .map(|d| (d, window.zone.start_of(d)))
        .collect();
    let mut issues: HashMap<String, Vec<(NaiveDate, i64)>> = HashMap::new();
    for i in store.daily_issues(site.id, days, end, sku.clone()).await? {
        issues.entry(i.sku).or_default().push((i.day, i.issued));
    }
    // The error history runs up to the end of the window, from the start.
    let history = store
        .accuracy_results(
            site.id,
            ResultQuery {
                from: Timestamp(i64::MIN),
                to: end,
                sku: sku.clone(),
            },
        )
        .await?;
    let mut by_item: HashMap<String, Vec<StoredResult>> = HashMap::new();
    for r in history {
        by_item.entry(r.sku.clone()).or_default().push(r);
    }
    let inputs = store.planner_inputs(site.id).await?;
    let own: HashMap<&str, &PlannerInput> = inputs
        .iter()
        .filter(|p| !p.sku.is_empty())
        .map(|p| (p.sku.as_str(), p))
        .collect();
    let groups: HashMap<&str, &PlannerInput> = inputs
        .iter()
        .filter(|p| p.sku.is_empty())
        .map(|p| (p.group.as_str(), p))
        .collect();

    let mut out = Vec::with_capacity(items.len());
    for item in items {
        let d = demand::daily_demand(
            &calendar,
            from,
            window.until,
            issues.get(&item.sku).map_or(&[][..], Vec::as_slice),
        );
        let lead = own
            .get(item.sku.as_str())
            .map(|p| LeadSource {
                source: "item".into(),
                times: p.times,
            })
            .or_else(|| {
                groups.get(item.group.as_str()).map(|p| LeadSource {
                    source: format!("group {}", item.group),
                    times: p.times,
                })
            });
        let rs = by_item.get(&item.sku).map_or(&[][..], Vec::as_slice);
        let figures = items::item_figures(&key_counts(rs)).map_err(internal)?;
        let interval = interval_of(&item, &classes, risk.as_ref());
        out.push(derive(
            &settings,
            item,
            d,
            lead,
            figures.growth,
            interval,
            asked_days,
        ));
    }
    Ok(out)
}

/// Puts the terms together: pure, so the page and the API show the same working.
fn derive(
    settings: &AccuracySettings,
    item: ItemRow,
    d: Demand,
    lead: Option<LeadSource>,
    growth: GrowthView,
    interval: CountInterval,
    asked_days: Option<u32>,
) -> BufferReport {
    let mut notes = Vec::new();
    let class = item.class.unwrap_or(Class::C);
    if item.class.is_none() {
        notes.push("not classified yet: the class C service level applies".to_string());
    }
    let (service_level, service_level_source) = match lead
        .as_ref()
        .and_then(|l| l.times.service_level.map(|p| (p, l.source.clone())))
    {
        Some(own) => own,
        None => (
            settings.service_level[class.index()],
            format!("class {class}"),
        ),
    };
    let keys = item.keys.max(1);
    let rec = whatif::record_error_sd(&growth.growth, keys, interval.days);
    let per_key_sd = rec.map(|s| s.0);
    let sigma_rec = rec.map_or(0.0, |s| s.1);
    if per_key_sd.is_none() {
        notes.push(format!(
            "σrec is taken as 0: no fit of record error growth ({})",
            growth.note.clone().unwrap_or_default()
        ));
    }
    let mean = d.mean.unwrap_or_else(|| {
        notes.push("no working day in the window: demand taken as 0".into());
        0.0
    });
    let sd = d.sd.unwrap_or_else(|| {
        notes.push("fewer than two days of demand: its standard deviation is taken as 0".into());
        0.0
    });
    let buffer = match &lead {
        None => {
            notes.push(format!(
                "no lead time: import one for the item or its group ('{}')",
                item.group
            ));
            None
        }
        Some(l) => match buffer::buffer(BufferInputs {
            service_level,
            demand_per_day: mean,
            demand_sd_per_day: sd,
            lead_time_days: l.times.lead_time_days,
            lead_time_sd_days: l.times.lead_time_sd_days,
            review_days: l.times.review_days,
            record_error_sd: sigma_rec,
        }) {
            Ok(b) => Some(b),
            Err(e) => {
                notes.push(e.to_string());
                None
            }
        },
    };
    let counting = counting(
        buffer.as_ref(),
        &growth,
        keys,
        interval.days,
        asked_days,
        item.unit_cost_minor,
    );
    BufferReport {
        item,
        demand: d,
        lead_time: lead,
        service_level,
        service_level_source,
        record_error: RecordErrorTerm {
            at_days: interval.days,
            interval_source: interval.source,
            per_key_sd,
            keys,
            sigma_rec,
            growth,
        },
        buffer,
        counting,
        notes,
    }
}

/// Builds the what-if rows, or says why there are none.
fn counting(
    today: Option<&Buffer>,
    growth: &GrowthView,
    keys: u32,
    current_days: f64,
    asked_days: Option<u32>,
    unit_cost_minor: i64,
) -> CountingWhatIf {
    let none = |why: String| CountingWhatIf {
        fit: None,
        points: growth.points,
        rows: Vec::new(),
        note: Some(why),
    };
    let Some(today) = today else {
        return none("there is no buffer to compare with (see the notes)".into());
    };
    match whatif::intervals(
        today,
        &growth.growth,
        keys,
        current_days,
        asked_days,
        unit_cost_minor,
    ) {
        Ok(Some(rows)) => CountingWhatIf {
            fit: Some("item".into()),
            points: growth.points,
            rows,
            note: None,
        },
        Ok(None) => none(format!(
            "not enough history to say: {}",
            growth.note.clone().unwrap_or_default()
        )),
        Err(e) => none(e.to_string()),
    }
}
