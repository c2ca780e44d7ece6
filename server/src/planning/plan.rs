//! Building one day's count list from plain facts: open recounts first (kept
//! whatever the capacity), then triggered bins, then due items by how overdue
//! they are, within the day's capacity and the level that keeps the year's
//! daily minutes even; then the walk and the runs.
//! No I/O: the store gathers a [`PlanInput`], this returns a [`Plan`].

use super::abc::Class;
use super::calendar::Calendar;
use super::due::Overdue;
use super::estimate::TaskTime;
use super::policy::{RiskPlan, Why};
use super::walk::{Place, split, walk_order};
use super::{Settings, TriggerKind};
use chrono::NaiveDate;
use serde::Serialize;
use std::collections::HashMap;

/// One bin as the planner sees it.
#[derive(Debug, Clone)]
pub struct BinFacts {
    pub id: i64,
    pub code: String,
    pub zone: String,
    pub place: Place,
    /// Book lines (keys with a non-zero balance) in the bin.
    pub lines: u32,
    /// The day the bin was last counted whole.
    pub last_count: Option<NaiveDate>,
}

/// One item as the planner sees it.
#[derive(Debug, Clone)]
pub struct ItemFacts {
    pub id: i64,
    pub class: Class,
    /// No stock and no movement for a year.
    pub dead: bool,
    /// Indices into [`PlanInput::bins`] of the bins that hold it (or last held it).
    pub bins: Vec<u32>,
}

/// A reason to count a bin today regardless of due dates.
#[derive(Debug, Clone)]
pub struct Trigger {
    /// Index into [`PlanInput::bins`].
    pub bin: u32,
    pub kind: TriggerKind,
    pub detail: String,
}

/// A recount or supervisor-count task already stored and not counted yet, on the
/// day's own list or on an earlier day's (then it is carried to this one). The plan
/// keeps the stored task, so what netting links to it (`recount_of`, and the pass
/// done against it) stays; it is never dropped for capacity.
#[derive(Debug, Clone)]
pub struct OpenRecount {
    /// The stored task's id.
    pub task: i64,
    /// Index into [`PlanInput::bins`].
    pub bin: u32,
    pub class: Option<Class>,
    /// The stored detail (what is re-checked, for the supervisor).
    pub detail: String,
    pub lines: u32,
    pub seconds: i64,
    /// The day of the list it is on, when that is earlier than the day planned.
    pub carried_from: Option<NaiveDate>,
    /// A supervisor count (the recount agreed with neither): it waits in a run of its
    /// own that no counter holds, outside the counters' capacity.
    pub supervisor: bool,
}

/// What a carried task's detail says about the day it was first on a list.
pub const CARRIED_NOTE: &str = "carried from";

impl OpenRecount {
    /// Returns the detail the list shows: the stored one, and where it was carried
    /// from the first time it was (so a task carried twice keeps its first day).
    pub fn shown_detail(&self) -> String {
        match self.carried_from {
            Some(d) if !self.detail.contains(CARRIED_NOTE) => {
                format!("{}; {CARRIED_NOTE} {d}", self.detail)
            }
            _ => self.detail.clone(),
        }
    }
}

/// Whether due counts stop at the level or fill the whole capacity.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Default, serde::Deserialize, Serialize, utoipa::ToSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum Fill {
    /// Stop due counts at the day's share of the year's load.
    #[default]
    Level,
    /// Use all the capacity (a catch-up day).
    Capacity,
}

/// The counters and minutes the supervisor gives the day.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Capacity {
    pub counters: u32,
    pub minutes: u32,
}

impl Capacity {
    /// Returns one counter's seconds.
    pub fn per_counter_s(self) -> i64 {
        i64::from(self.minutes) * 60
    }

    /// Returns all counters' seconds.
    pub fn total_s(self) -> i64 {
        self.per_counter_s() * i64::from(self.counters)
    }
}

/// Everything one day's list is built from.
#[derive(Debug, Clone)]
pub struct PlanInput {
    pub day: NaiveDate,
    pub calendar: Calendar,
    pub settings: Settings,
    pub bins: Vec<BinFacts>,
    pub items: Vec<ItemFacts>,
    pub triggers: Vec<Trigger>,
    /// Open recount and supervisor-count tasks, oldest first.
    pub recounts: Vec<OpenRecount>,
    /// Task time per zone code, learned or from settings; zones not named use the settings.
    pub zone_time: HashMap<String, TaskTime>,
    pub capacity: Capacity,
    pub fill: Fill,
    /// The day counting began on the site (its first classification); never-counted items age from it.
    pub counting_since: Option<NaiveDate>,
    /// The ledger's high-water mark the facts were read at.
    pub watermark: i64,
    /// Intervals set by risk (`risk` and `blend` policies); `None` under `abc`.
    pub risk: Option<RiskPlan>,
}

/// Why a bin is on the list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Reason {
    Triggered(TriggerKind),
    Due,
    DeadStock,
}

impl Reason {
    /// Returns the stored and wire form.
    pub fn as_str(self) -> &'static str {
        match self {
            Reason::Triggered(k) => k.as_str(),
            Reason::Due => "due",
            Reason::DeadStock => "dead_stock",
        }
    }

    /// Parses the stored form.
    pub fn parse(text: &str) -> Option<Self> {
        match text {
            "due" => Some(Reason::Due),
            "dead_stock" => Some(Reason::DeadStock),
            t => TriggerKind::parse(t).map(Reason::Triggered),
        }
    }

    /// Says whether the bin is on the list for a trigger.
    pub fn is_triggered(self) -> bool {
        matches!(self, Reason::Triggered(_))
    }
}

/// One bin task of the day.
#[derive(Debug, Clone, PartialEq)]
pub struct Task {
    /// Index into [`PlanInput::bins`].
    pub bin: u32,
    pub reason: Reason,
    /// Class of the item that made the bin due (none for a triggered bin).
    pub class: Option<Class>,
    pub detail: String,
    pub lines: u32,
    pub seconds: i64,
    /// Position in the list, from 1.
    pub seq: u32,
    /// The run (counter slot), from 1.
    pub run: u32,
    /// The stored recount task this is, kept rather than created again.
    pub keep: Option<i64>,
    /// The figures behind a due task.
    pub why: Option<Why>,
}

/// The day's list.
#[derive(Debug, Clone)]
pub struct Plan {
    pub day: NaiveDate,
    /// In the order they are done: run by run, each run's open recounts (walked),
    /// then its other triggered bins (walked), then its due bins (walked).
    /// Supervisor counts come last, in run `capacity.counters + 1`.
    pub tasks: Vec<Task>,
    pub capacity: Capacity,
    /// The day's share of the year's load, in seconds.
    pub level_s: i64,
    /// Interval in working days of A, B, C and dead stock.
    pub intervals: [i64; 4],
    pub due_items: usize,
    pub due_items_planned: usize,
    /// Said on the page: triggered bins left off for capacity, a non-working day.
    pub warnings: Vec<String>,
}

impl Plan {
    /// Returns the number of runs: the counters', and one more when supervisor
    /// counts wait in a run of their own.
    pub fn runs(&self) -> u32 {
        self.tasks
            .iter()
            .map(|t| t.run)
            .max()
            .unwrap_or(0)
            .max(self.capacity.counters)
    }

    /// Returns the seconds of each run, run 1 first.
    pub fn run_seconds(&self) -> Vec<i64> {
        let mut out = vec![0; self.runs() as usize];
        for t in &self.tasks {
            out[(t.run - 1) as usize] += t.seconds;
        }
        out
    }
}

/// A candidate bin with what put it on the list, in priority order.
struct Chosen {
    bin: u32,
    reason: Reason,
    class: Option<Class>,
    detail: String,
    seconds: i64,
    lines: u32,
    /// The stored recount task it keeps.
    keep: Option<i64>,
    why: Option<Why>,
}

/// Orders a run's tasks: open recounts, other triggered bins, the rest.
fn rank(keep: Option<i64>, reason: Reason) -> u8 {
    match (keep, reason.is_triggered()) {
        (Some(_), _) => 0,
        (None, true) => 1,
        (None, false) => 2,
    }
}

impl Chosen {
    fn rank(&self) -> u8 {
        rank(self.keep, self.reason)
    }

    fn task(&self, run: u32) -> Task {
        Task {
            bin: self.bin,
            reason: self.reason,
            class: self.class,
            detail: self.detail.clone(),
            lines: self.lines,
            seconds: self.seconds,
            seq: 0,
            run,
            keep: self.keep,
            why: self.why.clone(),
        }
    }
}

impl Task {
    /// Orders a run's tasks: open recounts, other triggered bins, the rest.
    pub fn rank(&self) -> u8 {
        rank(self.keep, self.reason)
    }
}

/// Returns the `abc` interval in working days of A, B, C and dead stock on the input's day.
pub fn abc_intervals(input: &PlanInput) -> [i64; 4] {
    let f = &input.settings.frequency;
    let wdy = input.calendar.working_days_in_year(input.day);
    [
        f.interval(Class::A, false, wdy),
        f.interval(Class::B, false, wdy),
        f.interval(Class::C, false, wdy),
        f.interval(Class::C, true, wdy),
    ]
}

/// Returns an item's `abc` interval from [`abc_intervals`].
pub fn abc_interval(intervals: &[i64; 4], it: &ItemFacts) -> i64 {
    if it.dead {
        intervals[3]
    } else {
        intervals[it.class.index()]
    }
}

/// Returns each bin's task time in seconds (its zone's learned time, else the settings').
pub fn bin_seconds(input: &PlanInput) -> Vec<i64> {
    input
        .bins
        .iter()
        .map(|b| {
            input
                .zone_time
                .get(&b.zone)
                .copied()
                .unwrap_or(input.settings.task_time)
                .seconds(b.lines)
        })
        .collect()
}

fn group_of(it: &ItemFacts) -> usize {
    if it.dead { 3 } else { it.class.index() }
}

/// Returns the day's share of the year's load per group (A, B, C, dead stock), seconds
/// a working day: each bin is counted as often as its most frequent item needs
/// (`interval_of(item index, item)`, working days), and its load belongs to that
/// item's group.
pub fn level_by_group(
    input: &PlanInput,
    seconds: &[i64],
    interval_of: impl Fn(usize, &ItemFacts) -> i64,
) -> [f64; 4] {
    let mut rate = vec![(0f64, 3usize); input.bins.len()];
    for (i, it) in input.items.iter().enumerate() {
        let r = 1.0 / interval_of(i, it).max(1) as f64;
        for &b in &it.bins {
            let cur = &mut rate[b as usize];
            if r > cur.0 || (r == cur.0 && group_of(it) < cur.1) {
                *cur = (r, group_of(it));
            }
        }
    }
    let mut level = [0f64; 4];
    for ((r, g), &sec) in rate.iter().zip(seconds) {
        level[*g] += r * sec as f64;
    }
    level
}

/// Returns the day's whole level, seconds a working day (see [`level_by_group`]).
pub fn level_s(
    input: &PlanInput,
    seconds: &[i64],
    interval_of: impl Fn(usize, &ItemFacts) -> i64,
) -> f64 {
    level_by_group(input, seconds, interval_of).iter().sum()
}

/// Builds the day's list.
pub fn build(input: &PlanInput) -> Plan {
    assert!(
        input.capacity.counters > 0,
        "capacity is checked before planning"
    );
    let s = &input.settings;
    let intervals = abc_intervals(input);
    let risk = input.risk.as_ref();
    let item_risk = |i: usize| risk.and_then(|r| r.items.get(i)).and_then(Option::as_ref);
    let interval_of = |i: usize, it: &ItemFacts| {
        item_risk(i).map_or_else(|| abc_interval(&intervals, it), |r| r.working_days)
    };
    let seconds = bin_seconds(input);
    let mut warnings = Vec::new();
    if !input.calendar.is_working(input.day) {
        warnings.push(format!(
            "{} is not a working day in the site calendar",
            input.day
        ));
    }

    let level = level_by_group(input, &seconds, interval_of);
    let level_s = level.iter().sum::<f64>().ceil() as i64;

    let capacity_s = input.capacity.total_s();
    let per_counter = input.capacity.per_counter_s();
    let mut on_list = vec![false; input.bins.len()];
    let mut chosen: Vec<Chosen> = Vec::new();
    let mut used = 0i64;

    // Open recounts were sent already: each stays, ahead of everything, and takes
    // its time from the day first. A recount is a task of its own (it re-checks one
    // result), so the bin may still get its other trigger or due count below.
    let mut recounts: Vec<&OpenRecount> = input.recounts.iter().collect();
    recounts.sort_by_key(|r| r.task);
    let mut supervisor: Vec<Chosen> = Vec::new();
    for r in recounts {
        let c = Chosen {
            bin: r.bin,
            reason: Reason::Triggered(TriggerKind::Recount),
            class: r.class,
            detail: r.shown_detail(),
            seconds: r.seconds,
            lines: r.lines,
            keep: Some(r.task),
            why: None,
        };
        if r.supervisor {
            supervisor.push(c);
        } else {
            used += r.seconds;
            chosen.push(c);
        }
    }

    // Triggered bins, strongest reason first; one task per bin.
    let mut triggers: Vec<&Trigger> = input.triggers.iter().collect();
    triggers.sort_by_key(|t| (t.kind, t.bin));
    for t in triggers {
        let b = t.bin as usize;
        if on_list[b] {
            if let Some(c) = chosen.iter_mut().find(|c| c.bin == t.bin) {
                c.detail = format!("{}; {}", c.detail, t.detail);
            }
            continue;
        }
        if used + seconds[b] > capacity_s || seconds[b] > per_counter {
            warnings.push(format!(
                "triggered count of bin {} ({}: {}) does not fit today's capacity and is not on the list",
                input.bins[b].code,
                t.kind.as_str(),
                t.detail
            ));
            continue;
        }
        on_list[b] = true;
        used += seconds[b];
        chosen.push(Chosen {
            bin: t.bin,
            reason: Reason::Triggered(t.kind),
            class: None,
            detail: t.detail.clone(),
            seconds: seconds[b],
            lines: input.bins[b].lines,
            keep: None,
            why: None,
        });
    }

    // Due items, most overdue relative to interval first, A before B before C.
    let began = input
        .counting_since
        .map_or(0, |d| input.calendar.working_days_between(d, input.day));
    let mut due: Vec<(Overdue, &ItemFacts, usize, Option<NaiveDate>)> = input
        .items
        .iter()
        .enumerate()
        .filter(|(_, it)| !it.bins.is_empty())
        .filter_map(|(i, it)| {
            let last = it
                .bins
                .iter()
                .map(|&b| input.bins[b as usize].last_count)
                .min()
                .flatten();
            let since = last.map(|d| input.calendar.working_days_between(d, input.day));
            Overdue::of(since, began, interval_of(i, it)).map(|o| (o, it, i, last))
        })
        .collect();
    due.sort_by(|(oa, a, ..), (ob, b, ..)| {
        ob.cmp_ratio(oa)
            .then(a.class.cmp(&b.class))
            .then(a.id.cmp(&b.id))
    });
    // Each group takes at most its share of the level a day. Items never
    // counted fill only the plain share, so a first pass spreads a group's
    // items evenly over its interval and later passes stay even by
    // themselves; items counted before and now late may also use the
    // catch-up allowance.
    let slack = f64::from(100 + s.level_slack_pct) / 100.0;
    let mut group_used = [0i64; 4];
    let mut used_due = 0i64;
    for (o, it, i, last) in &due {
        let g = group_of(it);
        let share = if o.never_counted {
            level[g]
        } else {
            level[g] * slack
        };
        let new: Vec<u32> = it
            .bins
            .iter()
            .copied()
            .filter(|&b| !on_list[b as usize])
            .collect();
        let cost: i64 = new.iter().map(|&b| seconds[b as usize]).sum();
        // A task is taken when it ends nearer the share than without it, so
        // a day's overshoot and shortfall cancel over a pass; the first task
        // of a group is always taken, so a share smaller than one task still
        // gets counted.
        let over_level = input.fill == Fill::Level
            && group_used[g] > 0
            && (group_used[g] + cost / 2) as f64 > share;
        if over_level
            || used + used_due + cost > capacity_s
            || new.iter().any(|&b| seconds[b as usize] > per_counter)
        {
            continue;
        }
        group_used[g] += cost;
        used_due += cost;
        let why = Why::of(
            risk.map_or(super::policy::Mode::Abc, |r| r.mode),
            it.class,
            it.dead,
            o.interval,
            last.filter(|_| !o.never_counted).map(|d| (d, o.days)),
            input.day,
            item_risk(*i),
        );
        let detail = why.sentence();
        for b in new {
            on_list[b as usize] = true;
            chosen.push(Chosen {
                bin: b,
                reason: if it.dead {
                    Reason::DeadStock
                } else {
                    Reason::Due
                },
                class: Some(it.class),
                detail: detail.clone(),
                seconds: seconds[b as usize],
                lines: input.bins[b as usize].lines,
                keep: None,
                why: Some(why.clone()),
            });
        }
    }

    // Three walks: the open recounts, the other triggered bins, then the rest,
    // each cut into contiguous runs so every counter does its urgent bins first.
    // While the longest run is over one counter's minutes, drop the least urgent
    // task (the last chosen) and cut again; open recounts are never dropped.
    let runs = input.capacity.counters as usize;
    let cut: Vec<(usize, u32)> = loop {
        let mut passes: [Vec<usize>; 3] = Default::default();
        for (i, c) in chosen.iter().enumerate() {
            passes[c.rank() as usize].push(i);
        }
        let mut offsets = vec![0i64; runs];
        let mut cut = Vec::with_capacity(chosen.len());
        for pass in passes {
            let places: Vec<Place> = pass
                .iter()
                .map(|&i| input.bins[chosen[i].bin as usize].place)
                .collect();
            let order: Vec<usize> = walk_order(&places).into_iter().map(|k| pass[k]).collect();
            let times: Vec<i64> = order.iter().map(|&i| chosen[i].seconds).collect();
            let ranges = split(&times, &offsets);
            for (run, range) in ranges.iter().enumerate() {
                offsets[run] += times[range.clone()].iter().sum::<i64>();
                cut.extend(range.clone().map(|pos| (order[pos], run as u32 + 1)));
            }
        }
        let fits = offsets.iter().all(|&o| o <= per_counter);
        if fits || chosen.last().is_none_or(|c| c.keep.is_some()) {
            if !fits {
                warnings.push(format!(
                    "the open recounts alone take more than one counter's {} minutes: a run is over its time",
                    input.capacity.minutes
                ));
            }
            break cut;
        }
        let dropped = chosen
            .pop()
            .expect("the list is not empty: its last task was looked at");
        if dropped.reason.is_triggered() {
            warnings.push(format!(
                "triggered count of bin {} ({}: {}) does not fit in one counter's minutes and is not on the list",
                input.bins[dropped.bin as usize].code,
                dropped.reason.as_str(),
                dropped.detail
            ));
        }
    };
    // Supervisor counts: a run of their own after the counters', walked, held by no one.
    let supervisor_run = input.capacity.counters + 1;
    let places: Vec<Place> = supervisor
        .iter()
        .map(|c| input.bins[c.bin as usize].place)
        .collect();
    let supervisor_order = walk_order(&places);
    for &k in &supervisor_order {
        let c = &supervisor[k];
        warnings.push(format!(
            "supervisor count of {} waits in run {supervisor_run}, which no counter holds: {}",
            input.bins[c.bin as usize].code, c.detail
        ));
    }
    let mut tasks: Vec<Task> = cut
        .into_iter()
        .map(|(i, run)| chosen[i].task(run))
        .chain(
            supervisor_order
                .into_iter()
                .map(|k| supervisor[k].task(supervisor_run)),
        )
        .collect();
    // Each counter's tasks in the order they are done: its recounts, its other
    // urgent stretch, then its walk (the sort is stable, so each walk keeps its order).
    tasks.sort_by_key(|t| (t.run, t.rank()));
    let mut final_on = vec![false; input.bins.len()];
    for (i, t) in tasks.iter_mut().enumerate() {
        t.seq = i as u32 + 1;
        if t.keep.is_none() {
            final_on[t.bin as usize] = true;
        }
    }
    let planned = due
        .iter()
        .filter(|(_, it, ..)| it.bins.iter().all(|&b| final_on[b as usize]))
        .count();
    Plan {
        day: input.day,
        tasks,
        capacity: input.capacity,
        level_s,
        intervals,
        due_items: due.len(),
        due_items_planned: planned,
        warnings,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn site(
        n_bins: usize,
        triggers: &[(u32, TriggerKind)],
        counters: u32,
        minutes: u32,
    ) -> PlanInput {
        let bins = (0..n_bins)
            .map(|i| BinFacts {
                id: i as i64 + 1,
                code: format!("A-{:02}-{:02}-1", 1 + i / 10, 1 + i % 10),
                zone: "A".into(),
                place: Place {
                    zone_seq: 0,
                    zone: 1,
                    aisle: 1 + (i / 10) as u16,
                    bay: 1 + (i % 10) as u16,
                    level: 1,
                    side: 0,
                    walk_seq: 0,
                },
                lines: 1 + (i % 3) as u32,
                last_count: None,
            })
            .collect();
        let items = (0..n_bins)
            .map(|i| ItemFacts {
                id: i as i64 + 1,
                class: Class::ALL[i % 3],
                dead: false,
                bins: vec![i as u32],
            })
            .collect();
        PlanInput {
            day: NaiveDate::from_ymd_opt(2026, 3, 2).unwrap(),
            calendar: Calendar::default(),
            settings: Settings::default(),
            bins,
            items,
            triggers: triggers
                .iter()
                .map(|&(bin, kind)| Trigger {
                    bin,
                    kind,
                    detail: "x".into(),
                })
                .collect(),
            recounts: Vec::new(),
            zone_time: HashMap::new(),
            capacity: Capacity { counters, minutes },
            fill: Fill::Capacity,
            counting_since: None,
            watermark: 0,
            risk: None,
        }
    }

    #[test]
    fn never_counted_items_are_due_and_a_comes_before_c_on_ties() {
        let mut input = site(30, &[], 1, 5);
        input.fill = Fill::Capacity;
        let plan = build(&input);
        // 5 minutes hold two bins of 150 s or fewer: the A items (every third bin) go first.
        assert!(!plan.tasks.is_empty());
        assert!(
            plan.tasks.iter().all(|t| t.class == Some(Class::A)),
            "{:?}",
            plan.tasks
        );
        assert_eq!(plan.due_items, 30);
    }

    #[test]
    fn a_triggered_bin_that_does_not_fit_is_named_in_a_warning() {
        let input = site(
            4,
            &[
                (0, TriggerKind::NegativeBalance),
                (3, TriggerKind::ShortPick),
            ],
            1,
            3,
        );
        let plan = build(&input);
        assert_eq!(plan.tasks.len(), 1);
        assert_eq!(
            plan.tasks[0].reason,
            Reason::Triggered(TriggerKind::NegativeBalance)
        );
        assert_eq!(plan.warnings.len(), 1);
        assert!(
            plan.warnings[0].contains("A-01-04-1"),
            "{:?}",
            plan.warnings
        );
    }

    /// An open recount task `task` of bin `bin` that takes `seconds`.
    fn recount(task: i64, bin: u32, seconds: i64, supervisor: bool) -> OpenRecount {
        OpenRecount {
            task,
            bin,
            class: Some(Class::B),
            detail: format!("recount of S{bin} (result {task})"),
            lines: 1,
            seconds,
            carried_from: None,
            supervisor,
        }
    }

    #[test]
    fn open_recounts_lead_their_runs_and_stay_whatever_the_capacity() {
        // Two counters of 3 minutes (360 s in all); two recounts of 150 s leave 60 s,
        // too little for the negative balance of bin 5 (2 lines: 120 + 2 × 30 s).
        let mut input = site(6, &[(4, TriggerKind::NegativeBalance)], 2, 3);
        input.recounts = vec![recount(21, 5, 150, false), recount(20, 1, 150, false)];
        let plan = build(&input);
        let kept: Vec<(Option<i64>, u32)> = plan
            .tasks
            .iter()
            .filter(|t| t.keep.is_some())
            .map(|t| (t.keep, t.seq))
            .collect();
        assert_eq!(kept.len(), 2, "{:?}", plan.tasks);
        for t in &plan.tasks {
            assert_eq!(
                t.keep.is_some(),
                t.reason == Reason::Triggered(TriggerKind::Recount)
            );
        }
        assert!(
            plan.tasks.iter().all(|t| t.keep.is_some()),
            "nothing else fits: {:?}",
            plan.tasks
        );
        assert!(
            plan.warnings.iter().any(|w| w.contains("A-01-05-1")),
            "the negative balance left off is named: {:?}",
            plan.warnings
        );
        // With one 2-minute counter the recounts are over its time: both stay, with a warning.
        let mut input = site(6, &[], 1, 2);
        input.recounts = vec![recount(20, 1, 150, false), recount(21, 5, 150, false)];
        let plan = build(&input);
        assert_eq!(plan.tasks.len(), 2, "{:?}", plan.tasks);
        assert!(
            plan.warnings
                .iter()
                .any(|w| w.contains("open recounts alone")),
            "{:?}",
            plan.warnings
        );
    }

    #[test]
    fn a_bin_with_a_recount_keeps_its_own_trigger_and_the_recount_goes_first() {
        let mut input = site(3, &[(1, TriggerKind::ShortPick)], 1, 60);
        input.recounts = vec![recount(7, 1, 150, false)];
        let plan = build(&input);
        let first = &plan.tasks[0];
        assert_eq!((first.keep, first.bin, first.seq), (Some(7), 1, 1));
        assert_eq!(first.detail, "recount of S1 (result 7)");
        let second = &plan.tasks[1];
        assert_eq!(
            (second.keep, second.bin, second.reason),
            (None, 1, Reason::Triggered(TriggerKind::ShortPick))
        );
    }

    #[test]
    fn a_carried_recount_says_where_from_once_and_supervisor_counts_wait_apart() {
        let mut r = recount(7, 0, 150, false);
        r.carried_from = NaiveDate::from_ymd_opt(2026, 2, 27);
        assert_eq!(
            r.shown_detail(),
            "recount of S0 (result 7); carried from 2026-02-27"
        );
        r.detail = r.shown_detail();
        r.carried_from = NaiveDate::from_ymd_opt(2026, 2, 28);
        assert_eq!(
            r.shown_detail(),
            "recount of S0 (result 7); carried from 2026-02-27",
            "carried twice, it keeps the first day"
        );

        let mut input = site(4, &[], 2, 60);
        input.recounts = vec![recount(8, 2, 150, true), recount(9, 3, 150, false)];
        let plan = build(&input);
        assert_eq!(plan.runs(), 3);
        let sup: Vec<&Task> = plan.tasks.iter().filter(|t| t.run == 3).collect();
        assert_eq!(sup.len(), 1, "{:?}", plan.tasks);
        assert_eq!((sup[0].keep, sup[0].bin), (Some(8), 2));
        assert_eq!(plan.tasks.last().map(|t| t.keep), Some(Some(8)));
        assert!(
            plan.warnings
                .iter()
                .any(|w| w.contains("supervisor count of A-01-03-1") && w.contains("run 3")),
            "{:?}",
            plan.warnings
        );
        assert_eq!(plan.run_seconds().len(), 3);
    }

    proptest! {
        #[test]
        fn triggered_tasks_lead_every_run_and_none_vanishes_without_a_warning(
            n in 1usize..60,
            raw in prop::collection::vec((0u32..60, 0usize..4), 0..30),
            recs in prop::collection::vec((0u32..60, 0i64..400, any::<bool>()), 0..6),
            counters in 1u32..5,
            minutes in 1u32..30,
            level in any::<bool>(),
        ) {
            let trig: Vec<(u32, TriggerKind)> = raw
                .iter()
                .map(|&(b, k)| (b % n as u32, TriggerKind::ALL[k]))
                .collect();
            let mut input = site(n, &trig, counters, minutes);
            if level { input.fill = Fill::Level; }
            input.recounts = recs
                .iter()
                .enumerate()
                .map(|(i, &(b, s, sup))| recount(100 + i as i64, b % n as u32, s, sup))
                .collect();
            let plan = build(&input);
            // Every open recount is on the list once, as itself: supervisor counts in the
            // run after the counters', the others in the counters' runs.
            for r in &input.recounts {
                let on: Vec<&Task> = plan.tasks.iter().filter(|t| t.keep == Some(r.task)).collect();
                prop_assert_eq!(on.len(), 1);
                prop_assert_eq!(on[0].bin, r.bin);
                prop_assert_eq!(on[0].run == counters + 1, r.supervisor);
            }
            prop_assert!(plan.tasks.iter().filter(|t| t.run > counters).all(|t| t.keep.is_some()));
            // Every other bin at most once, runs within one counter's minutes unless the
            // recounts alone are over (then they are all that is left, and it is said).
            let mut bins: Vec<u32> = plan.tasks.iter().filter(|t| t.keep.is_none()).map(|t| t.bin).collect();
            bins.sort_unstable();
            let len = bins.len();
            bins.dedup();
            prop_assert_eq!(bins.len(), len);
            let over = plan.run_seconds().iter().take(counters as usize).any(|&s| s > input.capacity.per_counter_s());
            if over {
                prop_assert!(plan.warnings.iter().any(|w| w.contains("open recounts alone")));
                prop_assert!(plan.tasks.iter().all(|t| t.keep.is_some()));
            }
            // In each run, recounts first, then other triggered tasks, then due ones.
            for run in 1..=plan.runs() {
                let ranks: Vec<u8> = plan.tasks.iter().filter(|t| t.run == run).map(Task::rank).collect();
                prop_assert!(ranks.windows(2).all(|w| w[0] <= w[1]), "run {run}: {ranks:?}");
            }
            // A triggered bin left off is named in a warning.
            let triggered_off: Vec<u32> = trig.iter().map(|t| t.0).filter(|b| !plan.tasks.iter().any(|t| t.bin == *b && t.keep.is_none())).collect();
            for b in &triggered_off {
                let code = &input.bins[*b as usize].code;
                prop_assert!(plan.warnings.iter().any(|w| w.contains(code.as_str())), "bin {code} dropped silently");
            }
            // Each pass is walked in order and cut into contiguous runs.
            for pass in 0..3u8 {
                let seq: Vec<&Task> = plan.tasks.iter().filter(|t| t.rank() == pass && t.run <= counters).collect();
                let places: Vec<Place> = seq.iter().map(|t| input.bins[t.bin as usize].place).collect();
                prop_assert_eq!(walk_order(&places), (0..places.len()).collect::<Vec<_>>());
                prop_assert!(seq.windows(2).all(|w| w[0].run <= w[1].run));
            }
        }
    }
}
