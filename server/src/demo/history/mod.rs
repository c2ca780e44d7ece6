//! The demo's counting history: the last weeks of the site's counting, simulated on
//! top of its movements with the simulation's own shelf truth. Each working day the
//! planner builds the list, the demo counters count their runs on their phones (the
//! sync path phones use, with the day's picks going on and the host posting late),
//! recounts go to the other counter, small variances are adjusted automatically and
//! the inventory manager approves or rejects the rest. Every step goes through the
//! `Store` operations the pages and the API use, so what the demo shows is what Cairn
//! computed. Adjustments also correct the simulation's book, so the record improves as
//! errors are found. Deterministic by seed.

pub mod office;
pub mod phone;

use super::count_day::Expectation;
use super::sim::{TruthMove, World};
use super::{DemoItem, DemoSpec};
use crate::accounts::User;
use crate::ledger::NewMovement;
use crate::master::{NewBin, Site};
use crate::planning::plan::{Capacity, Fill};
use crate::planning::{ListView, service};
use crate::store::Store;
use crate::store::error::Progress;
use crate::time::Timestamp;
use chrono::{Datelike, NaiveDate, Weekday};
use phone::{Counter, Found, Pass};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::{BTreeMap, BTreeSet, HashMap};

/// Weeks of counting the standard demo simulates.
pub const HISTORY_WEEKS: u32 = 13;
/// Minutes each counter has for counting a day.
const COUNTER_MINUTES: u32 = 120;
/// The demo's supervisor, who counts what a recount could not settle.
const SUPERVISOR: &str = "bruno";
/// The demo's inventory manager and planner.
const MANAGER: &str = "chiara";
const PLANNER: &str = "dmitri";
/// Chance that a counter keys a quantity one off (found by the recount).
const P_MISCOUNT: f64 = 0.005;
/// Rounds of recounts (then supervisor counts) worked through in one day.
const MAX_RECOUNT_ROUNDS: usize = 3;
/// A movement this close to a count (ms) may coincide with a book state, so its key is
/// not held to the recall goal.
const NEAR_MS: i64 = 60_000;
/// Local hour the counters start, the manager reviews, and the day settles.
const COUNT_HOUR: u32 = 8;
const REVIEW_HOUR: u32 = 17;

/// A key: (bin index, item index, lot).
type Key = (usize, usize, String);

/// The expected outcome of one first count, for checking the netting.
#[derive(Debug, Clone)]
pub struct FirstCount {
    pub pass: String,
    pub day: NaiveDate,
    /// By (bin, sku, lot).
    pub expected: BTreeMap<(String, String, String), Expectation>,
}

/// What the counting history did.
#[derive(Debug, Clone, Default)]
pub struct HistorySummary {
    pub working_days: usize,
    pub passes: usize,
    pub recount_passes: usize,
    /// Recounts withdrawn (a late posting settled their keys) before the phone sent them.
    pub recounts_withdrawn: usize,
    pub refused_events: usize,
    pub approved: usize,
    pub rejected: usize,
    pub auto_adjusted: usize,
    /// Keys the counters keyed a wrong quantity for.
    pub miscounts: usize,
    pub first_counts: Vec<FirstCount>,
}

/// One day's facts the counters' quantities come from.
struct DayStock {
    start: BTreeMap<Key, (i64, i64)>,
    truth: HashMap<Key, Vec<(i64, i64)>>,
    book: HashMap<Key, Vec<(i64, i64)>>,
    bin_keys: HashMap<usize, BTreeSet<Key>>,
}

impl DayStock {
    fn new(
        start: BTreeMap<Key, (i64, i64)>,
        log: Vec<TruthMove>,
        book: Vec<(Key, i64, i64)>,
    ) -> Self {
        let mut s = Self {
            start,
            truth: HashMap::new(),
            book: HashMap::new(),
            bin_keys: HashMap::new(),
        };
        for k in s.start.keys() {
            s.bin_keys.entry(k.0).or_default().insert(k.clone());
        }
        for m in log {
            let key = (m.bin, m.item, m.lot);
            s.bin_keys.entry(key.0).or_default().insert(key.clone());
            s.truth.entry(key).or_default().push((m.at, m.delta));
        }
        for (key, at, qty) in book {
            s.bin_keys.entry(key.0).or_default().insert(key.clone());
            s.book.entry(key).or_default().push((at, qty));
        }
        s
    }

    fn at(start: i64, moves: Option<&Vec<(i64, i64)>>, t: i64) -> i64 {
        start
            + moves.map_or(0, |m| {
                m.iter().filter(|(at, _)| *at <= t).map(|(_, d)| d).sum()
            })
    }

    fn truth_at(&self, key: &Key, t: i64) -> i64 {
        let start = self.start.get(key).map_or(0, |s| s.1);
        Self::at(start, self.truth.get(key), t)
    }

    fn book_at(&self, key: &Key, t: i64) -> i64 {
        let start = self.start.get(key).map_or(0, |s| s.0);
        Self::at(start, self.book.get(key), t)
    }

    fn moved_near(&self, key: &Key, from: i64, to: i64) -> bool {
        [self.truth.get(key), self.book.get(key)]
            .into_iter()
            .flatten()
            .flatten()
            .any(|(at, _)| *at >= from - NEAR_MS && *at <= to + NEAR_MS)
    }

    fn keys_of(&self, bin: usize) -> Vec<Key> {
        self.bin_keys
            .get(&bin)
            .map(|k| k.iter().cloned().collect())
            .unwrap_or_default()
    }
}

/// The day's movements in the order the server learns them.
struct Feed {
    moves: Vec<NewMovement>,
    next: usize,
}

impl Feed {
    fn new(mut moves: Vec<NewMovement>) -> Self {
        moves.sort_by_key(|m| m.recorded_at.map_or(m.event_at.0, |t| t.0));
        Self { moves, next: 0 }
    }

    /// Records every movement the server has learnt by `t`.
    async fn until(&mut self, store: &dyn Store, site: &Site, t: i64) -> anyhow::Result<()> {
        let end = self.next
            + self.moves[self.next..]
                .iter()
                .take_while(|m| m.recorded_at.map_or(m.event_at.0, |r| r.0) <= t)
                .count();
        if end > self.next {
            crate::writes::record_movements(
                store,
                site.id,
                self.moves[self.next..end].to_vec(),
                Progress::default(),
                None,
            )
            .await?;
            self.next = end;
        }
        Ok(())
    }
}

/// The counting history under way.
pub(crate) struct Counting<'a> {
    store: &'a dyn Store,
    site: Site,
    bins: &'a [NewBin],
    items: &'a [DemoItem],
    bin_of: HashMap<String, usize>,
    item_of: HashMap<String, usize>,
    counters: Vec<Counter>,
    supervisor: Counter,
    manager: User,
    rng: ChaCha8Rng,
    pub summary: HistorySummary,
}

impl<'a> Counting<'a> {
    /// Prepares the history: the demo people and the site's policy, from `first`.
    pub async fn start(
        store: &'a dyn Store,
        site: &Site,
        spec: &DemoSpec,
        items: &'a [DemoItem],
        bins: &'a [NewBin],
        first: NaiveDate,
    ) -> anyhow::Result<Self> {
        super::accounts::create_demo_users(store, site).await?;
        let mut counters = Vec::new();
        for (name, skew_ms) in super::accounts::DEMO_COUNTERS.iter().zip([1_200, -800]) {
            let u = office::person(store, name).await?;
            counters.push(Counter {
                id: u.id,
                name: u.name.as_str().to_string(),
                skew_ms,
            });
        }
        let sup = office::person(store, SUPERVISOR).await?;
        let manager = office::person(store, MANAGER).await?;
        let planner = office::person(store, PLANNER).await?;
        office::set_policy(store, site, site.time_zone.start_of(first), &planner).await?;
        Ok(Self {
            store,
            site: site.clone(),
            bins,
            items,
            bin_of: bins
                .iter()
                .enumerate()
                .map(|(i, b)| (b.code.as_str().to_string(), i))
                .collect(),
            item_of: items
                .iter()
                .enumerate()
                .map(|(i, d)| (d.item.sku.as_str().to_string(), i))
                .collect(),
            counters,
            supervisor: Counter {
                id: sup.id,
                name: sup.name.as_str().to_string(),
                skew_ms: 300,
            },
            manager,
            rng: ChaCha8Rng::seed_from_u64(spec.seed ^ 0x636f_756e_7473),
            summary: HistorySummary::default(),
        })
    }

    fn at(&self, date: NaiveDate, hour: u32) -> i64 {
        self.site.time_zone.at_local(date, hour).0
    }

    /// Runs one day of the history: `moves` are the day's movements, `start` the book
    /// and shelf at its start and `log` the shelf's changes during it. On a `review`
    /// day the manager decides the settled differences after the counting.
    pub async fn day(
        &mut self,
        world: &mut World<'_>,
        date: NaiveDate,
        moves: Vec<NewMovement>,
        start: BTreeMap<Key, (i64, i64)>,
        log: Vec<TruthMove>,
        review: bool,
    ) -> anyhow::Result<()> {
        let store = self.store;
        let mut feed = Feed::new(moves);
        if !store.calendar(self.site.id).await?.is_working(date) {
            feed.until(store, &self.site, i64::MAX).await?;
            return Ok(());
        }
        self.summary.working_days += 1;
        let book = feed
            .moves
            .iter()
            .filter_map(|m| {
                let bin = *self.bin_of.get(m.bin.as_str())?;
                let item = *self.item_of.get(m.sku.as_str())?;
                Some(((bin, item, m.lot.clone()), m.event_at.0, m.qty))
            })
            .collect();
        let stock = DayStock::new(start, log, book);
        if date.weekday() == Weekday::Mon {
            service::classify(store, &self.site, date).await?;
        }
        let list = self.list(date).await?;
        let begin = self.at(date, COUNT_HOUR);
        let passes = self.first_passes(&list, &stock, begin, None);
        let last = self.send(&mut feed, &stock, passes, date, true).await?;
        self.recounts(&mut feed, &stock, date, last).await?;
        let settle_at = Timestamp(self.at(date, REVIEW_HOUR));
        feed.until(store, &self.site, settle_at.0).await?;
        self.settle(world, settle_at).await?;
        if review {
            let sitting = office::review(
                store,
                &self.site,
                &self.manager,
                settle_at.plus_ms(30 * 60_000),
                &mut self.rng,
            )
            .await?;
            for row in &sitting.approved {
                self.adjust(world, &row.bin, &row.sku, &row.lot, row.variance);
            }
            self.summary.approved += sitting.approved.len();
            self.summary.rejected += sitting.rejected;
        }
        feed.until(store, &self.site, i64::MAX).await?;
        let (_, day_end) = self.site.time_zone.range(date);
        self.settle(world, day_end.plus_ms(-1)).await?;
        Ok(())
    }

    /// Builds today's list and counts about half of it, no later than `now`.
    pub async fn today(
        &mut self,
        world: &World<'_>,
        date: NaiveDate,
        now: Timestamp,
    ) -> anyhow::Result<()> {
        let list = self.list(date).await?;
        let stock = DayStock::new(world.stock_by_key(), Vec::new(), Vec::new());
        let (day_start, _) = self.site.time_zone.range(date);
        // Counting began at the usual hour, or early enough to have done half by now.
        let begin = self
            .at(date, COUNT_HOUR)
            .min(now.0 - 2 * 3_600_000)
            .max(day_start.0 + 60_000);
        let passes = self.first_passes(&list, &stock, begin, Some(now.0 - 60_000));
        let mut feed = Feed::new(Vec::new());
        self.send(&mut feed, &stock, passes, date, true).await?;
        Ok(())
    }

    /// Builds and stores the day's list, and gives its runs to the demo counters.
    async fn list(&mut self, date: NaiveDate) -> anyhow::Result<ListView> {
        let capacity = Capacity {
            counters: self.counters.len() as u32,
            minutes: COUNTER_MINUTES,
        };
        let list =
            service::build(self.store, &self.site, date, capacity, Fill::Level, false).await?;
        for run in &list.runs {
            let who = &self.counters[(run.run as usize - 1) % self.counters.len()];
            if let Err(e) = self
                .store
                .hold_run(
                    self.site.id,
                    date,
                    run.run,
                    Some(crate::accounts::UserName::parse(&who.name).map_err(anyhow::Error::msg)?),
                )
                .await
            {
                tracing::warn!("demo history: run {} of {date} not held: {e}", run.run);
            }
        }
        Ok(self
            .store
            .count_list(self.site.id, date)
            .await?
            .unwrap_or(list))
    }

    /// Lays out each counter's open tasks of `list` from `begin`, in walk order; with
    /// `stop_by`, only the first half of each run, and none received after it.
    fn first_passes(
        &mut self,
        list: &ListView,
        stock: &DayStock,
        begin: i64,
        stop_by: Option<i64>,
    ) -> Vec<Pass> {
        let mut out = Vec::new();
        for run in &list.runs {
            let Some(c) = self.counters.iter().position(|c| c.name == run.holder) else {
                continue;
            };
            let tasks: Vec<_> = list
                .tasks
                .iter()
                .filter(|t| t.run == run.run && t.status == "open" && t.reason != "recount")
                .collect();
            let take = if stop_by.is_some() {
                tasks.len().div_ceil(2)
            } else {
                tasks.len()
            };
            let mut free = begin + self.rng.random_range(0..15 * 60_000);
            for t in tasks.into_iter().take(take) {
                let (Some(id), Some(&bin)) = (t.id, self.bin_of.get(&t.bin)) else {
                    continue;
                };
                let (pass, next) = self.lay_out(c, id, bin, stock, free);
                if stop_by.is_some_and(|s| pass.received_at > s) {
                    break;
                }
                free = next;
                out.push(pass);
            }
        }
        out
    }

    fn lay_out(
        &mut self,
        counter: usize,
        task: i64,
        bin: usize,
        stock: &DayStock,
        opened: i64,
    ) -> (Pass, i64) {
        let keys: Vec<Found> = stock
            .keys_of(bin)
            .into_iter()
            .map(|(_, item, lot)| Found {
                sku: self.items[item].item.sku.as_str().to_string(),
                lot,
            })
            .collect();
        let mut rng = ChaCha8Rng::seed_from_u64(self.rng.random());
        let mut miscounts = 0;
        let item_of = &self.item_of;
        let out = phone::lay_out(
            counter,
            task,
            self.bins[bin].code.as_str(),
            &keys,
            opened,
            &mut rng,
            |k, at| {
                let key = (bin, item_of[&k.sku], k.lot.clone());
                let truth = stock.truth_at(&key, at).max(0);
                if truth > 0 && self.rng.random_bool(P_MISCOUNT) {
                    miscounts += 1;
                    if truth > 1 && self.rng.random_bool(0.5) {
                        truth - 1
                    } else {
                        truth + 1
                    }
                } else {
                    truth
                }
            },
        );
        self.summary.miscounts += miscounts;
        out
    }

    /// Sends passes in the order their phones sync, the day's movements arriving in
    /// between; returns when the last one arrived.
    async fn send(
        &mut self,
        feed: &mut Feed,
        stock: &DayStock,
        mut passes: Vec<Pass>,
        date: NaiveDate,
        first: bool,
    ) -> anyhow::Result<i64> {
        passes.sort_by_key(|p| (p.received_at, p.opened_at));
        let mut last = 0;
        for p in passes {
            if !first {
                // The phone refreshes its tasks when the counter opens the bin: a recount
                // withdrawn by then (a late posting settled its keys) is not counted.
                feed.until(self.store, &self.site, p.opened_at).await?;
                if !self.task_live(date, p.task).await? {
                    self.summary.recounts_withdrawn += 1;
                    continue;
                }
            }
            feed.until(self.store, &self.site, p.received_at).await?;
            let who = if p.counter < self.counters.len() {
                &self.counters[p.counter]
            } else {
                &self.supervisor
            };
            let batch = phone::batch(
                self.site.id,
                self.site.code.as_str(),
                self.site.time_zone,
                &p,
                who,
                &mut self.rng,
            );
            let results = crate::writes::apply_sync(self.store, batch).await?;
            let refused = results
                .iter()
                .filter(|r| r.status != cairn_scan::wire::EventStatus::Accepted)
                .count();
            if refused > 0 && !first && !self.task_live(date, p.task).await? {
                // Withdrawn while the counter was at the bin: the phone says so.
                self.summary.recounts_withdrawn += 1;
                continue;
            }
            if let Some(r) = results
                .iter()
                .find(|r| r.status != cairn_scan::wire::EventStatus::Accepted)
            {
                self.summary.refused_events += refused;
                tracing::warn!(
                    "demo history: {refused} event(s) of bin {} on {date} were not kept: {:?}",
                    p.bin,
                    r.reason
                );
            }
            last = last.max(p.received_at);
            if first {
                self.summary.passes += 1;
                self.summary.first_counts.push(self.expect(&p, stock, date));
            } else {
                self.summary.recount_passes += 1;
            }
        }
        Ok(last)
    }

    /// Tells whether task `task` is still on the list of `date` (not withdrawn).
    async fn task_live(&self, date: NaiveDate, task: i64) -> anyhow::Result<bool> {
        Ok(self
            .store
            .count_list(self.site.id, date)
            .await?
            .is_some_and(|l| l.tasks.iter().any(|t| t.id == Some(task))))
    }

    /// Returns what a perfect netting of first count `p` says about each key of its bin.
    fn expect(&self, p: &Pass, stock: &DayStock, date: NaiveDate) -> FirstCount {
        let bin = self.bin_of[&p.bin];
        let mut expected = BTreeMap::new();
        for key in stock.keys_of(bin) {
            let sku = self.items[key.1].item.sku.as_str().to_string();
            let at = p
                .lines
                .iter()
                .find(|l| l.sku == sku && l.lot == key.2)
                .map_or(p.done_at, |l| l.at);
            let error = stock.truth_at(&key, at).max(0) - stock.book_at(&key, at);
            let moved = stock.moved_near(&key, p.opened_at, p.done_at);
            if error != 0 || stock.book_at(&key, at) != 0 || stock.truth_at(&key, at) != 0 {
                expected.insert(
                    (p.bin.clone(), sku, key.2.clone()),
                    Expectation {
                        error,
                        moved_in_window: moved,
                    },
                );
            }
        }
        FirstCount {
            pass: p.uid.to_string(),
            day: date,
            expected,
        }
    }

    /// Works the recounts (and supervisor counts) the day's counts sent to the list.
    async fn recounts(
        &mut self,
        feed: &mut Feed,
        stock: &DayStock,
        date: NaiveDate,
        mut last: i64,
    ) -> anyhow::Result<()> {
        let mut done = BTreeSet::new();
        for _ in 0..MAX_RECOUNT_ROUNDS {
            let Some(list) = self.store.count_list(self.site.id, date).await? else {
                return Ok(());
            };
            let mut free: HashMap<usize, i64> = HashMap::new();
            let mut passes = Vec::new();
            for t in &list.tasks {
                let (Some(id), Some(&bin)) = (t.id, self.bin_of.get(&t.bin)) else {
                    continue;
                };
                if t.reason != "recount" || t.status != "open" || !done.insert(id) {
                    continue;
                }
                let holder = list
                    .runs
                    .iter()
                    .find(|r| r.run == t.run)
                    .map(|r| r.holder.as_str())
                    .unwrap_or_default();
                let who = self
                    .counters
                    .iter()
                    .position(|c| c.name == holder)
                    .unwrap_or(self.counters.len());
                let opened = *free
                    .entry(who)
                    .or_insert(last + self.rng.random_range(60_000..10 * 60_000));
                let (pass, next) = self.lay_out(who, id, bin, stock, opened);
                free.insert(who, next);
                passes.push(pass);
            }
            if passes.is_empty() {
                break;
            }
            last = last.max(self.send(feed, stock, passes, date, false).await?);
        }
        Ok(())
    }

    /// Settles results due at `now` and mirrors the automatic adjustments in the book.
    async fn settle(&mut self, world: &mut World<'_>, now: Timestamp) -> anyhow::Result<()> {
        let outcome = crate::writes::settle(self.store, now).await?;
        for a in &outcome.adjusted {
            if let Some(r) = self.store.count_result(self.site.id, a.result).await? {
                let row = r.row;
                self.adjust(world, &row.bin, &row.sku, &row.lot, a.qty);
            }
        }
        self.summary.auto_adjusted += outcome.adjusted.len();
        Ok(())
    }

    fn adjust(&self, world: &mut World<'_>, bin: &str, sku: &str, lot: &str, qty: i64) {
        if let (Some(&b), Some(&i)) = (self.bin_of.get(bin), self.item_of.get(sku)) {
            world.adjust_book(b, i, lot, qty);
        }
    }
}
