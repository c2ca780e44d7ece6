//! The day's count list. The arithmetic lives in files with no I/O: ABC
//! classes (`abc`), the calendar and due rule (`calendar`, `due`), task times
//! (`estimate`), the walk and its runs (`walk`), the day's selection
//! (`plan`) and intervals chosen by expected error value (`risk`). This file
//! holds the settings and the shapes the list is shown in; `service` joins
//! the arithmetic to the store; `routes` is the HTTP side (`pages` the
//! supervisor's pages, `progress` what they tally).

pub mod abc;
pub mod calendar;
pub mod due;
pub mod estimate;
pub mod jumps;
pub mod pages;
pub mod phone;
pub mod plan;
pub mod policy;
pub mod policy_page;
pub mod progress;
pub mod risk;
pub mod routes;
pub mod service;
pub mod short_pick;
pub mod simulate;
pub mod walk;

use abc::{AbcRule, Class};
use chrono::NaiveDate;
use due::Frequency;
use estimate::TaskTime;
use serde::{Deserialize, Serialize};

/// Most counters one day's list may be cut for.
pub const MAX_COUNTERS: u32 = 200;
/// Most minutes one counter may be given in a day.
pub const MAX_MINUTES: u32 = 24 * 60;

/// A site's planning settings.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
#[schema(as = PlanningSettings)]
pub struct Settings {
    pub abc: AbcRule,
    pub frequency: Frequency,
    pub task_time: TaskTime,
    /// A zero balance triggers a count when picks were posted to it in this many days.
    pub zero_demand_days: u32,
    /// Extra share (percent) of the level a day may take, so a backlog is worked off.
    pub level_slack_pct: u32,
}

impl Default for Settings {
    fn default() -> Self {
        Self {
            abc: AbcRule::default(),
            frequency: Frequency::default(),
            task_time: TaskTime::default(),
            zero_demand_days: 3,
            level_slack_pct: 10,
        }
    }
}

impl Settings {
    /// Checks every setting; returns what is wrong.
    pub fn check(&self) -> Result<(), String> {
        self.abc.check()?;
        self.frequency.check()?;
        let most = crate::input::bounds::MAX_TASK_SECONDS;
        for (name, s) in [
            ("task_time.base_s", self.task_time.base_s),
            ("task_time.per_line_s", self.task_time.per_line_s),
        ] {
            if s > most {
                return Err(format!("{name} must be 0 to {most} seconds, found {s}"));
            }
        }
        if self.level_slack_pct > 100 {
            return Err("level_slack_pct must be 0 to 100".into());
        }
        if self.zero_demand_days > abc::MAX_WINDOW_DAYS {
            return Err(format!(
                "zero_demand_days must be at most {}",
                abc::MAX_WINDOW_DAYS
            ));
        }
        Ok(())
    }
}

/// Why a bin must be counted today whatever its due date, strongest first.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TriggerKind {
    /// A count was out of tolerance and needs a second, blind count.
    Recount,
    /// The book says less than nothing.
    NegativeBalance,
    /// The host reported a pick that found less than the book.
    ShortPick,
    /// The book says empty while picks keep being posted to the bin.
    ZeroBalance,
}

impl TriggerKind {
    /// Every kind, strongest first.
    pub const ALL: [TriggerKind; 4] = [
        TriggerKind::Recount,
        TriggerKind::NegativeBalance,
        TriggerKind::ShortPick,
        TriggerKind::ZeroBalance,
    ];

    /// Returns the stored and wire form.
    pub fn as_str(self) -> &'static str {
        match self {
            TriggerKind::Recount => "recount",
            TriggerKind::NegativeBalance => "negative_balance",
            TriggerKind::ShortPick => "short_pick",
            TriggerKind::ZeroBalance => "zero_balance",
        }
    }

    /// Parses the stored form.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|k| k.as_str() == text)
    }
}

/// One task as the supervisor's list and exports show it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct TaskView {
    /// The stored task's id; `None` in a preview.
    pub id: Option<i64>,
    pub seq: u32,
    pub run: u32,
    pub bin: String,
    pub zone: String,
    pub aisle: u16,
    pub bay: u16,
    pub level: u8,
    pub reason: String,
    pub class: Option<Class>,
    pub detail: String,
    pub lines: u32,
    pub est_s: i64,
    pub status: String,
    /// The figures behind a due task (`planning::policy::Why`); `None` for triggered ones.
    pub why: Option<serde_json::Value>,
}

impl TaskView {
    /// Builds the scannable label of this task's bin in `site`.
    pub fn label(
        &self,
        site: &crate::master::SiteCode,
    ) -> Result<cairn_scan::BinLabel, cairn_scan::ScanError> {
        crate::master::place_label(site.as_str(), &self.zone, self.aisle, self.bay, self.level)
    }
}

/// One counter's run.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct RunView {
    pub run: u32,
    pub holder: String,
    pub tasks: usize,
    pub est_s: i64,
    pub done: usize,
}

/// The day's list as shown and exported.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct ListView {
    pub day: NaiveDate,
    /// False for a preview that was not stored.
    pub stored: bool,
    pub version: i64,
    pub counters: u32,
    pub minutes: u32,
    pub level_s: i64,
    pub watermark: i64,
    pub warnings: Vec<String>,
    pub runs: Vec<RunView>,
    pub summary: Summary,
    pub tasks: Vec<TaskView>,
}

/// Tasks per reason and per class, for the preview.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, utoipa::ToSchema)]
#[schema(as = ListSummary)]
pub struct Summary {
    pub tasks: usize,
    pub triggered: usize,
    pub by_reason: std::collections::BTreeMap<String, usize>,
    pub by_class: std::collections::BTreeMap<String, usize>,
    pub due_items: usize,
    pub due_items_planned: usize,
}

impl ListView {
    /// Fills the runs and the summary from the tasks.
    pub fn tally(&mut self, holders: &[String]) {
        self.runs = (1..=self.counters)
            .map(|run| {
                let mine = self.tasks.iter().filter(|t| t.run == run);
                RunView {
                    run,
                    holder: holders.get(run as usize - 1).cloned().unwrap_or_default(),
                    tasks: mine.clone().count(),
                    est_s: mine.clone().map(|t| t.est_s).sum(),
                    done: mine.filter(|t| t.status == "done").count(),
                }
            })
            .collect();
        let s = &mut self.summary;
        s.tasks = self.tasks.len();
        s.by_reason.clear();
        s.by_class.clear();
        for t in &self.tasks {
            *s.by_reason.entry(t.reason.clone()).or_default() += 1;
            if let Some(c) = t.class {
                *s.by_class.entry(c.to_string()).or_default() += 1;
            }
        }
        s.triggered = self
            .tasks
            .iter()
            .filter(|t| TriggerKind::parse(&t.reason).is_some())
            .count();
    }
}

/// What one classification did.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct AbcSummary {
    pub run: i64,
    pub day: NaiveDate,
    pub rule: AbcRule,
    pub items: usize,
    /// Items whose class changed (or that had none before).
    pub changed: usize,
    pub a: usize,
    pub b: usize,
    pub c: usize,
    pub watermark: i64,
}

/// An item entering a class.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct ClassChange {
    pub class: Class,
    pub since: NaiveDate,
    pub run: i64,
    pub basis: String,
}

/// A built list to store.
#[derive(Debug, Clone)]
pub struct NewCountList {
    pub day: NaiveDate,
    pub counters: u32,
    pub minutes: u32,
    pub level_s: i64,
    pub warnings: Vec<String>,
    pub watermark: i64,
    /// Replace a list already stored for the day (refused once it has started); its
    /// open recounts are kept.
    pub replace: bool,
    pub tasks: Vec<NewTask>,
}

/// One task to store.
#[derive(Debug, Clone)]
pub struct NewTask {
    pub bin_id: i64,
    pub seq: u32,
    pub run: u32,
    pub reason: plan::Reason,
    pub class: Option<Class>,
    pub detail: String,
    pub lines: u32,
    pub est_s: i64,
    /// The stored recount task this is: kept (moved here from an earlier list if need
    /// be), never deleted or copied, so netting still finds the count done against it.
    pub recount_task: Option<i64>,
    /// The figures behind a due task, as JSON text.
    pub why: Option<String>,
}
