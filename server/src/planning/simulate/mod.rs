//! Two counting policies side by side on one warehouse: `abc` (class intervals)
//! and `risk` (intervals from `planning::risk`, with error growth learned from the
//! simulation's own counts). Pure; no I/O. The caller owns the warehouse (book and
//! shelf per key, evolving day by day with its injected errors) and hands this
//! module each day's keys; each policy keeps its own corrections on top of that one
//! book, so both meet exactly the same errors (common random numbers).
//!
//! A count of a bin sets the policy's book of every key in it to the shelf. An error
//! found is a key whose book differed: its value is `|book − shelf| × unit cost`, its
//! age the days since the key's book last left the shelf's quantity.

pub mod report;

use super::abc::Class;
use super::jumps::{self, ItemEvidence};
use super::risk::{self, Drift, Floors, Growth, Jumps, PoolKey, RateBand, RiskItem, Source};
use crate::accuracy::buffer::{BufferInputs, buffer};
use crate::accuracy::item_error::{ErrorGrowth, ErrorPoint, fit_growth_from_count};
use std::collections::{BTreeMap, BTreeSet};

/// Most weeks one run may simulate (ten years).
pub const MAX_WEEKS: u32 = 520;
/// Most counter-minutes a working day (a hundred counters on full shifts).
pub const MAX_MINUTES: u32 = 48_000;
/// Growth used before any count has been judged: `σ² = t` (the multiplier absorbs its size).
pub const UNIT_GROWTH: Growth = Growth { a: 0.0, b: 1.0 };
/// The planner's service level for the safety-stock figure (common practice, no source).
pub const SERVICE_LEVEL: f64 = 0.95;
/// Mean and standard deviation of the supplier lead time, calendar days: the demo's
/// lead time is uniform on 3..=7 days, mean 5, variance (5² − 1) / 12 = 2.
pub const LEAD_TIME_DAYS: f64 = 5.0;
pub const LEAD_TIME_SD_DAYS: f64 = std::f64::consts::SQRT_2;
/// Days a year, for turning counts a year into calendar intervals.
const DAYS_PER_YEAR: f64 = 365.0;
/// Days a week: a week closes (and `risk` is planned again) every seventh day.
const DAYS_PER_WEEK: u32 = 7;

/// A counting policy.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Policy {
    Abc,
    Risk,
}

impl Policy {
    /// Both policies, in the order they are shown.
    pub const BOTH: [Policy; 2] = [Policy::Abc, Policy::Risk];

    /// Returns the policy's name as the command and `frequency_policy` spell it.
    pub fn as_str(self) -> &'static str {
        match self {
            Policy::Abc => "abc",
            Policy::Risk => "risk",
        }
    }
}

/// How `risk` models record error growing after a count.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ErrorModel {
    /// Rare jumps, a rate per item shrunk toward its pool's per-pick rate ([`jumps`]).
    #[default]
    Jump,
    /// A random walk, `σ²(t) = b·t` fitted from a count (what the day's list planned with
    /// before jumps; kept for comparison).
    Walk,
    /// Jumps at the rates and sizes the world truly injects ([`SimSite::known`]): not
    /// learnable on a live site, it shows how far better figures could take `risk`.
    Known,
}

/// One item as the simulation sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct SimItem {
    pub class: Class,
    /// Minor currency units per base unit.
    pub unit_cost: f64,
    /// Picks a calendar day (for the risk pools' rate band).
    pub picks_per_day: f64,
    /// Units demanded a calendar day (for the safety stock).
    pub units_per_day: f64,
    /// Indices of the bins a count of the item visits.
    pub bins: Vec<usize>,
    /// The zone of its first bin (its risk pool's zone, as the day's list pools it).
    pub zone: i64,
    /// The day (≤ 0, relative to the first simulated day) the item was last counted, if known.
    pub last_count: Option<i64>,
    /// The growth points the site's own judged counts give (both policies start from them).
    pub history: Vec<ErrorPoint>,
}

/// The site the simulation runs on.
#[derive(Debug, Clone, PartialEq)]
pub struct SimSite {
    pub items: Vec<SimItem>,
    /// Seconds to count each bin once.
    pub bin_seconds: Vec<i64>,
    /// The `abc` counts a year of A, B, C.
    pub per_year: [u32; 3],
    /// Counter-minutes a working day, the same for both policies.
    pub minutes: u32,
    /// Working days a year (turns the day's minutes into minutes a calendar day).
    pub working_days_per_year: f64,
    /// Least counts a year per class under `risk` (0: no floor), as the `blend` policy sets.
    pub floors: Floors,
    /// How both policies model error growth (`risk` chooses with it; both value
    /// their safety stock with it).
    pub model: ErrorModel,
    /// Each item's true jumps, for [`ErrorModel::Known`] (empty under the others): the
    /// value a count of the item's bins finds a day, `rate·size·unit_cost`, includes
    /// other items' stock misplaced into those bins.
    pub known: Vec<Jumps>,
}

/// Why a simulation cannot start.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SimError {
    #[error("--minutes {0}: give 1 to {MAX_MINUTES} counter-minutes a working day")]
    Minutes(u32),
    #[error("--weeks {0}: give 1 to {MAX_WEEKS} weeks")]
    Weeks(u32),
    #[error("the site has no item in a bin to count")]
    NothingToCount,
    #[error("class {class}: {per_year} counts a year must be 1 to 365 to simulate abc")]
    PerYear { class: &'static str, per_year: u32 },
    #[error("floor of class {class}: {per_year} counts a year must be 0 (none) to 365")]
    Floor { class: &'static str, per_year: u32 },
    #[error("item {item} bin {bin}: no such bin")]
    NoBin { item: usize, bin: usize },
    #[error("the known error model needs one rate and size per item: {given} for {items} items")]
    Known { given: usize, items: usize },
}

/// A key: bin index, item index, lot.
pub type KeyId = (usize, usize, String);
/// Book and shelf quantity of each key, as the warehouse stands.
pub type Keys = BTreeMap<KeyId, (i64, i64)>;

/// One policy's figures for one week.
#[derive(Debug, Clone, PartialEq)]
pub struct WeekRow {
    pub week: u32,
    pub policy: Policy,
    /// Keys whose book equals the shelf, over keys with either, at the week's end.
    pub ira: f64,
    /// `1 − Σ|book − shelf|·c / Σ shelf·c` at the week's end.
    pub value_accuracy: f64,
    pub errors_found: u32,
    /// Minor units.
    pub error_value_found: f64,
    /// Of `error_value_found`, errors already standing on the run's first day (left by
    /// the history, or made that day), minor units; the rest arose during the run.
    pub first_day_value_found: f64,
    /// Mean age in days of the errors found this week, `None` when none were.
    pub mean_age_days: Option<f64>,
    /// Value of record error left standing at the week's end, minor units.
    pub standing_error_value: f64,
    /// The planner's safety stock over all items, valued, minor units.
    pub safety_stock_value: f64,
    pub minutes_used: f64,
    pub bins_counted: u32,
}

#[derive(Debug, Clone, Default)]
struct Mark {
    /// The policy's corrections on top of the shared book.
    adj: i64,
    /// The day the key's book last left the shelf's quantity.
    since: Option<u32>,
}

#[derive(Debug, Clone, Default)]
struct Tally {
    errors: u32,
    value: f64,
    first_day_value: f64,
    age_days: f64,
    seconds: f64,
    bins: u32,
}

struct Run {
    policy: Policy,
    interval: Vec<f64>,
    drift: Vec<Drift>,
    last: Vec<i64>,
    known_last: Vec<bool>,
    marks: BTreeMap<KeyId, Mark>,
    points: Vec<Vec<ErrorPoint>>,
    tally: Tally,
}

/// Both policies' runs over one warehouse.
pub struct Simulation {
    site: SimSite,
    minutes_per_day: f64,
    abc_scale: f64,
    keys: Keys,
    runs: [Run; 2],
    rows: Vec<WeekRow>,
    /// The day of the first [`Simulation::day`]: an error dated to it stood at the start.
    first_day: Option<u32>,
}

fn item_seconds(site: &SimSite, i: usize) -> i64 {
    site.items[i]
        .bins
        .iter()
        .map(|&b| site.bin_seconds[b])
        .sum()
}

/// A spread in [0, 1) by item index, so never-counted items do not all fall due at once.
fn spread(i: usize) -> f64 {
    (i as f64 * 0.618_033_988_749_894_9).fract()
}

impl Simulation {
    /// Checks the site and sets both policies' first intervals.
    pub fn new(site: SimSite, weeks: u32) -> Result<Self, SimError> {
        if !(1..=MAX_MINUTES).contains(&site.minutes) {
            return Err(SimError::Minutes(site.minutes));
        }
        if !(1..=MAX_WEEKS).contains(&weeks) {
            return Err(SimError::Weeks(weeks));
        }
        for (i, it) in site.items.iter().enumerate() {
            if let Some(&bin) = it.bins.iter().find(|&&b| b >= site.bin_seconds.len()) {
                return Err(SimError::NoBin { item: i, bin });
            }
        }
        for class in Class::ALL {
            let per_year = site.per_year[class.index()];
            if !(1..=365).contains(&per_year) {
                return Err(SimError::PerYear {
                    class: class.as_str(),
                    per_year,
                });
            }
        }
        for class in Class::ALL {
            let per_year = site.floors.per_year[class.index()];
            if per_year > 365 {
                return Err(SimError::Floor {
                    class: class.as_str(),
                    per_year,
                });
            }
        }
        if site.model == ErrorModel::Known && site.known.len() != site.items.len() {
            return Err(SimError::Known {
                given: site.known.len(),
                items: site.items.len(),
            });
        }
        let countable: f64 = (0..site.items.len())
            .map(|i| item_seconds(&site, i) as f64)
            .sum();
        if countable <= 0.0 {
            return Err(SimError::NothingToCount);
        }
        let minutes_per_day =
            f64::from(site.minutes) * site.working_days_per_year.clamp(1.0, 366.0) / DAYS_PER_YEAR;
        // abc keeps its classes' ratio of counts and is scaled to spend the same minutes.
        let abc_load: f64 = (0..site.items.len())
            .map(|i| {
                item_seconds(&site, i) as f64 / 60.0
                    * f64::from(site.per_year[site.items[i].class.index()])
                    / DAYS_PER_YEAR
            })
            .sum();
        let abc_scale = minutes_per_day / abc_load;
        let n = site.items.len();
        let run = |policy| Run {
            policy,
            interval: vec![f64::INFINITY; n],
            drift: vec![Drift::Walk(UNIT_GROWTH); n],
            last: vec![0; n],
            known_last: site.items.iter().map(|i| i.last_count.is_some()).collect(),
            marks: BTreeMap::new(),
            points: site.items.iter().map(|i| i.history.clone()).collect(),
            tally: Tally::default(),
        };
        let mut sim = Self {
            minutes_per_day,
            abc_scale,
            keys: Keys::new(),
            runs: [run(Policy::Abc), run(Policy::Risk)],
            rows: Vec::new(),
            first_day: None,
            site,
        };
        for r in 0..2 {
            sim.plan_intervals(r);
            let run = &mut sim.runs[r];
            for (i, it) in sim.site.items.iter().enumerate() {
                run.last[i] = match it.last_count {
                    Some(d) => d,
                    None if run.interval[i].is_finite() => {
                        -(run.interval[i] * spread(i)).floor() as i64
                    }
                    None => 0,
                };
            }
        }
        Ok(sim)
    }

    /// Returns the factor the site's `abc` counts a year were scaled by to spend the minutes.
    pub fn abc_scale(&self) -> f64 {
        self.abc_scale
    }

    /// Returns the counter-minutes a calendar day both policies plan with.
    pub fn minutes_per_day(&self) -> f64 {
        self.minutes_per_day
    }

    /// Returns a policy's current interval of each item, calendar days (infinite: never).
    pub fn intervals(&self, policy: Policy) -> &[f64] {
        &self.runs[policy as usize].interval
    }

    /// Returns a policy's current error growth of each item (what its intervals were chosen with).
    pub fn drift(&self, policy: Policy) -> &[Drift] {
        &self.runs[policy as usize].drift
    }

    /// Returns the value of record error standing on each item under a policy, minor units.
    pub fn standing_by_item(&self, policy: Policy) -> Vec<f64> {
        let run = &self.runs[policy as usize];
        let mut out = vec![0.0; self.site.items.len()];
        for (k, &(book, truth)) in &self.keys {
            let diff = policy_book(run, k, book) - truth;
            out[k.1] += diff.abs() as f64 * self.site.items[k.1].unit_cost;
        }
        out
    }

    /// Returns the weeks closed so far.
    pub fn rows(&self) -> &[WeekRow] {
        &self.rows
    }

    fn plan_intervals(&mut self, r: usize) {
        let site = &self.site;
        let run = &mut self.runs[r];
        if run.policy == Policy::Abc {
            for (i, it) in site.items.iter().enumerate() {
                run.interval[i] = if it.bins.is_empty() {
                    f64::INFINITY
                } else {
                    DAYS_PER_YEAR / (f64::from(site.per_year[it.class.index()]) * self.abc_scale)
                };
            }
        }
        let growth = match site.model {
            ErrorModel::Walk => learned_growth(site, &run.points),
            ErrorModel::Jump => learned_jumps(site, &run.points),
            ErrorModel::Known => site
                .known
                .iter()
                .map(|j| (Drift::Jump(*j), Source::Default))
                .collect(),
        };
        run.drift = growth.iter().map(|(g, _)| *g).collect();
        if run.policy == Policy::Abc {
            return;
        }
        let idx: Vec<usize> = (0..site.items.len())
            .filter(|&i| item_seconds(site, i) > 0)
            .collect();
        let items: Vec<RiskItem> = idx
            .iter()
            .map(|&i| RiskItem {
                key: i as i64,
                class: site.items[i].class,
                drift: growth[i].0,
                source: growth[i].1,
                unit_cost: site.items[i].unit_cost.max(0.0),
                minutes: item_seconds(site, i) as f64 / 60.0,
                safety_weight: 0.0,
            })
            .collect();
        let choice = risk::choose(&items, self.minutes_per_day, &site.floors)
            .expect("figures are checked finite, floors and the budget when the simulation starts");
        run.interval = vec![f64::INFINITY; site.items.len()];
        for (iv, &i) in choice.intervals.iter().zip(&idx) {
            run.interval[i] = iv.days;
        }
    }

    /// Plays one calendar day: `keys` is the warehouse after the day's movements; on a
    /// working day each policy counts what is due within the minutes. A new week is
    /// planned (risk intervals from the growth learned so far) every seventh day.
    pub fn day(&mut self, day: u32, working: bool, keys: &Keys) {
        let first_day = *self.first_day.get_or_insert(day);
        for v in self.keys.values_mut() {
            *v = (0, 0);
        }
        for (k, v) in keys {
            self.keys.insert(k.clone(), *v);
        }
        if day > 1 && (day - 1).is_multiple_of(DAYS_PER_WEEK) {
            for r in 0..2 {
                self.plan_intervals(r);
            }
        }
        for r in 0..2 {
            mark_errors(&self.keys, &mut self.runs[r], day);
            if working {
                self.count(r, day, first_day);
            }
        }
        if day.is_multiple_of(DAYS_PER_WEEK) {
            let week = day / DAYS_PER_WEEK;
            for r in 0..2 {
                let row = self.week_row(r, week);
                self.rows.push(row);
                self.runs[r].tally = Tally::default();
            }
        }
    }

    fn count(&mut self, r: usize, day: u32, first_day: u32) {
        let site = &self.site;
        let run = &mut self.runs[r];
        let today = i64::from(day);
        let mut due: Vec<(f64, usize)> = (0..site.items.len())
            .filter(|&i| run.interval[i].is_finite())
            .map(|i| ((today - run.last[i]) as f64 / run.interval[i], i))
            .filter(|(ratio, _)| *ratio >= 1.0)
            .collect();
        due.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
        let budget = f64::from(site.minutes) * 60.0;
        let mut used = 0.0;
        let mut counted: BTreeSet<usize> = BTreeSet::new();
        for (_, i) in due {
            let bins: Vec<usize> = site.items[i]
                .bins
                .iter()
                .copied()
                .filter(|b| !counted.contains(b))
                .collect();
            let cost: f64 = bins.iter().map(|&b| site.bin_seconds[b] as f64).sum();
            if used + cost > budget {
                continue;
            }
            used += cost;
            let error: i64 = site.items[i]
                .bins
                .iter()
                .flat_map(|&b| keys_of(&self.keys, b))
                .filter(|(k, _)| k.1 == i)
                .map(|(k, &(book, truth))| policy_book(run, k, book) - truth)
                .sum();
            if run.known_last[i] {
                run.points[i].push(ErrorPoint {
                    days_since_previous: (today - run.last[i]) as f64,
                    error: error as f64,
                });
            }
            run.known_last[i] = true;
            run.last[i] = today;
            for b in bins {
                counted.insert(b);
                count_bin(site, &self.keys, run, b, day, first_day);
            }
        }
        run.tally.seconds += used;
        run.tally.bins += counted.len() as u32;
    }

    fn week_row(&self, r: usize, week: u32) -> WeekRow {
        let run = &self.runs[r];
        let (mut keys, mut right, mut value, mut wrong_value) = (0u32, 0u32, 0.0, 0.0);
        for (k, &(book, truth)) in &self.keys {
            let book = policy_book(run, k, book);
            if book == 0 && truth == 0 {
                continue;
            }
            keys += 1;
            let cost = self.site.items[k.1].unit_cost;
            if book == truth {
                right += 1;
            }
            value += truth.max(0) as f64 * cost;
            wrong_value += (book - truth).abs() as f64 * cost;
        }
        let t = &run.tally;
        WeekRow {
            week,
            policy: run.policy,
            ira: if keys == 0 {
                1.0
            } else {
                f64::from(right) / f64::from(keys)
            },
            value_accuracy: if value > 0.0 {
                1.0 - wrong_value / value
            } else {
                1.0
            },
            errors_found: t.errors,
            error_value_found: t.value,
            first_day_value_found: t.first_day_value,
            mean_age_days: (t.errors > 0).then(|| t.age_days / f64::from(t.errors)),
            standing_error_value: wrong_value,
            safety_stock_value: safety_stock_value(&self.site, run),
            minutes_used: t.seconds / 60.0,
            bins_counted: t.bins,
        }
    }
}

fn keys_of(keys: &Keys, bin: usize) -> impl Iterator<Item = (&KeyId, &(i64, i64))> {
    keys.range((bin, 0, String::new())..(bin + 1, 0, String::new()))
}

fn policy_book(run: &Run, key: &KeyId, book: i64) -> i64 {
    book + run.marks.get(key).map_or(0, |m| m.adj)
}

/// Dates each key's error: the day its book (with the policy's corrections) left the shelf.
fn mark_errors(keys: &Keys, run: &mut Run, day: u32) {
    for (k, &(book, truth)) in keys {
        let wrong = policy_book(run, k, book) != truth;
        match run.marks.get_mut(k) {
            Some(m) if wrong => {
                m.since.get_or_insert(day);
            }
            Some(m) => m.since = None,
            None if wrong => {
                run.marks.insert(
                    k.clone(),
                    Mark {
                        adj: 0,
                        since: Some(day),
                    },
                );
            }
            None => {}
        }
    }
}

/// Counts one bin: every key in it gets the shelf's quantity as its book.
fn count_bin(site: &SimSite, keys: &Keys, run: &mut Run, bin: usize, day: u32, first_day: u32) {
    for (k, &(book, truth)) in keys_of(keys, bin) {
        let diff = policy_book(run, k, book) - truth;
        if diff == 0 {
            continue;
        }
        let m = run.marks.entry(k.clone()).or_default();
        let value = diff.abs() as f64 * site.items[k.1].unit_cost;
        run.tally.errors += 1;
        run.tally.value += value;
        if m.since == Some(first_day) {
            run.tally.first_day_value += value;
        }
        run.tally.age_days += f64::from(day - m.since.unwrap_or(day));
        m.adj -= diff;
        m.since = None;
    }
}

fn pool_of(site: &SimSite, i: usize) -> PoolKey {
    PoolKey {
        class: site.items[i].class,
        zone: site.items[i].zone,
        replenished: site.items[i].bins.len() > 1,
        band: RateBand::of(site.items[i].picks_per_day),
    }
}

/// Returns each item's jumps ([`jumps::estimate`], pools of class × pick-rate band).
fn learned_jumps(site: &SimSite, points: &[Vec<ErrorPoint>]) -> Vec<(Drift, Source)> {
    let evidence: Vec<ItemEvidence> = points
        .iter()
        .enumerate()
        .map(|(i, p)| ItemEvidence {
            pool: pool_of(site, i),
            picks_per_day: site.items[i].picks_per_day,
            points: p,
        })
        .collect();
    jumps::estimate(&evidence)
        .into_iter()
        .map(|(j, s)| (Drift::Jump(j), s))
        .collect()
}

/// Returns each item's growth: its own fit, else its pool's (class × pick-rate band),
/// else the site's (every point), else [`UNIT_GROWTH`].
fn learned_growth(site: &SimSite, points: &[Vec<ErrorPoint>]) -> Vec<(Drift, Source)> {
    let fit = |p: &[ErrorPoint]| fit_growth_from_count(p).ok().filter(ErrorGrowth::enough);
    let pool_of = |i: usize| pool_of(site, i);
    let mut pooled: BTreeMap<PoolKey, Vec<ErrorPoint>> = BTreeMap::new();
    for (i, p) in points.iter().enumerate() {
        pooled.entry(pool_of(i)).or_default().extend(p);
    }
    let pool_fits: BTreeMap<PoolKey, Option<ErrorGrowth>> =
        pooled.iter().map(|(k, p)| (*k, fit(p))).collect();
    let all: Vec<ErrorPoint> = points.iter().flatten().copied().collect();
    let default = match fit(&all) {
        Some(ErrorGrowth {
            fit: crate::accuracy::item_error::GrowthFit::Fitted { a, b },
            ..
        }) if b > 0.0 => Growth { a, b },
        _ => UNIT_GROWTH,
    };
    points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let own = fit_growth_from_count(p).unwrap_or(ErrorGrowth {
                points: 0,
                fit: crate::accuracy::item_error::GrowthFit::NotEnoughData(
                    crate::accuracy::item_error::Shortfall::TooFewPoints { needed: 0 },
                ),
            });
            let pool = pool_of(i);
            let (g, s) = risk::pick_growth(
                &own,
                pool,
                pool_fits.get(&pool).and_then(Option::as_ref),
                default,
            );
            // A fit of zero growth would never call for a count; keep the site's.
            if g.b <= 0.0 && g.a <= 0.0 {
                (Drift::Walk(default), Source::Default)
            } else {
                (Drift::Walk(g), s)
            }
        })
        .collect()
}

/// Returns the safety stock of every item with demand, valued: `z·sqrt((L + R)σd² +
/// d²σL² + σrec²)` with `σrec = sqrt(a + b·T)` at the policy's interval `T` (the
/// error just before a count; for jumps `a = 0`, `b = rate·size²`), `R = 0`,
/// `σd = sqrt(d)` (Poisson demand).
fn safety_stock_value(site: &SimSite, run: &Run) -> f64 {
    site.items
        .iter()
        .enumerate()
        .filter(|(_, it)| it.units_per_day > 0.0)
        .map(|(i, it)| {
            let t = run.interval[i].min(risk::MAX_INTERVAL_DAYS);
            let g = run.drift[i].variance_growth();
            let sigma_rec = (g.a + g.b * t).max(0.0).sqrt();
            let b = buffer(BufferInputs {
                service_level: SERVICE_LEVEL,
                demand_per_day: it.units_per_day,
                demand_sd_per_day: it.units_per_day.sqrt(),
                lead_time_days: LEAD_TIME_DAYS,
                lead_time_sd_days: LEAD_TIME_SD_DAYS,
                review_days: 0.0,
                record_error_sd: sigma_rec.min(crate::accuracy::buffer::MAX_UNITS),
            });
            b.map_or(0.0, |b| b.safety_stock * it.unit_cost)
        })
        .sum()
}

#[cfg(test)]
#[path = "tests.rs"]
mod tests;
