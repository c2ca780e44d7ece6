//! `cairn simulate-counting`: reads a demo site's items, bins, book and shelf truth
//! through the store (reads only), carries that warehouse forward day by day with
//! the demo's own seeded error process (`sim::World`), and lets
//! `planning::simulate` count it under `abc` and `risk` side by side.

use super::sim::World;
use super::{DemoItem, Profile};
use crate::master::codes::Sku;
use crate::master::{NewBin, NewItem, Site};
use crate::planning::abc::{self, Class};
use crate::planning::plan::{self, Capacity, Fill};
use crate::planning::risk::{Floors, MAX_INTERVAL_DAYS};
use crate::planning::simulate::{
    ErrorModel, Keys, Policy, SimError, SimItem, SimSite, Simulation, WeekRow,
};
use crate::store::{Store, StoreError};
use chrono::{Datelike, Days, NaiveDate, Weekday};
use indicatif::{ProgressBar, ProgressStyle};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, LogNormal};
use std::collections::{BTreeMap, BTreeSet};

/// Calendar days of picks the demand is read over (four weeks).
pub const DEMAND_DAYS: u64 = 28;
/// Largest quantity of one pick the replayed world draws (the demo's range is 1 to 4;
/// the site's records do not say which an item had, so every item takes 2).
const MAX_PICK: u32 = 2;

/// Spread of the uneven world's per-item error multipliers: the σ of their logarithm
/// (our scenario's assumption, not measured: most items rarely go wrong and a few —
/// loose small parts, awkward bins — often; with σ = 1 the tenth of the items most
/// prone carry `1 − Φ(z₀.₉ − σ) = 1 − Φ(0.28)` ≈ 39 % of the chance of error).
pub const UNEVEN_LOG_SD: f64 = 1.0;
/// Largest multiplier drawn, so every chance stays well below 1.
pub const MAX_PROPENSITY: f64 = 20.0;

/// How the forward simulation injects errors among items.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum WorldKind {
    /// At the demo's rates for every item, as the demo's own history does.
    #[default]
    Uniform,
    /// At the demo's rates times a multiplier per item, log-normal with mean 1
    /// ([`UNEVEN_LOG_SD`]), drawn from the seed on a stream of its own.
    Uneven,
}

/// Returns one error multiplier per item for an uneven world: log-normal with mean 1,
/// capped at [`MAX_PROPENSITY`], drawn from stream 1 of `seed` (the world's own draws
/// use stream 0, so they are the same as in the uniform world).
pub fn uneven_propensity(items: usize, seed: u64) -> Vec<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(1);
    let sd = UNEVEN_LOG_SD;
    let dist = LogNormal::new(-sd * sd / 2.0, sd).expect("a finite, positive spread");
    (0..items)
        .map(|_| dist.sample(&mut rng).min(MAX_PROPENSITY))
        .collect()
}

/// What one run was asked to do.
#[derive(Debug, Clone)]
pub struct ReplaySpec {
    pub weeks: u32,
    /// Counter-minutes a working day, for each policy.
    pub minutes: u32,
    pub seed: u64,
    /// Least counts a year per class under `risk` (0: none).
    pub floors: [u32; 3],
    /// The first day of the run (its eve's book and shelf are the start); `None`: the
    /// site's today.
    pub start: Option<NaiveDate>,
    /// Draw a progress bar on the terminal.
    pub show: bool,
    /// How `risk` models error growth.
    pub model: ErrorModel,
    /// How errors are spread among items in the weeks simulated.
    pub world: WorldKind,
}

/// What a run found, and what it started from.
#[derive(Debug, Clone)]
pub struct Replay {
    pub start: NaiveDate,
    pub items: usize,
    pub bins: usize,
    pub keys: usize,
    /// Keys whose book differed from the shelf on the first day.
    pub wrong_at_start: usize,
    pub unrecorded_picks: usize,
    pub miskeyed_picks: usize,
    pub misputaways: usize,
    pub abc_scale: f64,
    pub per_year: [u32; 3],
    pub rows: Vec<WeekRow>,
    /// Items `risk` left at its longest interval because their growth is flat (`b = 0`:
    /// the fit says waiting adds no error), at the end of the run.
    pub flat_parked: usize,
    /// The error value standing on those items under `risk` at the end, minor units.
    pub flat_parked_error_value: f64,
    /// The longest finite interval `risk` chose, calendar days.
    pub risk_longest_days: f64,
}

/// Why a replay cannot run.
#[derive(Debug, thiserror::Error)]
pub enum ReplayError {
    #[error(
        "site {0} has no shelf truth: the simulation needs the true shelf quantity of every key \
         (the `demo_shelf` table), which only the demo generator records (`cairn demo` or \
         `cairn demo-data`); a live site's shelf is known only where it is counted"
    )]
    NoShelfTruth(String),
    #[error(transparent)]
    Sim(#[from] SimError),
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// Runs both policies on `site` for `spec.weeks` from its today.
pub async fn replay(
    store: &dyn Store,
    site: &Site,
    spec: &ReplaySpec,
) -> Result<Replay, ReplayError> {
    // Checked before anything is read, so bad flags say so first.
    if !(1..=crate::planning::simulate::MAX_MINUTES).contains(&spec.minutes) {
        return Err(SimError::Minutes(spec.minutes).into());
    }
    if !(1..=crate::planning::simulate::MAX_WEEKS).contains(&spec.weeks) {
        return Err(SimError::Weeks(spec.weeks).into());
    }
    let code = site.code.to_string();
    let shelf = store.shelf_keys(site.id).await?;
    if shelf.is_empty() {
        return Err(ReplayError::NoShelfTruth(code));
    }
    let today = spec.start.unwrap_or_else(|| site.time_zone.today());
    let (day_start, day_end) = site.time_zone.range(today);
    let mut input = store
        .plan_input(
            site.id,
            today,
            day_end,
            Capacity {
                counters: 1,
                minutes: spec.minutes,
            },
            Fill::Level,
        )
        .await?;
    let from = site.time_zone.range(
        today
            .checked_sub_days(Days::new(DEMAND_DAYS))
            .unwrap_or(today),
    );
    if store.latest_abc(site.id).await?.is_none() {
        // Never classified: classify as the first run would, in memory (nothing is written).
        let window = Days::new(u64::from(input.settings.abc.window_days.max(1)) - 1);
        let first = today.checked_sub_days(window).unwrap_or(today);
        let usage = store
            .abc_usage(site.id, site.time_zone.start_of(first), day_end)
            .await?;
        let classes: BTreeMap<i64, Class> = abc::classify(&usage, &input.settings.abc)
            .into_iter()
            .collect();
        for it in &mut input.items {
            if let Some(c) = classes.get(&it.id) {
                it.class = *c;
            }
        }
    }
    let worth = store.item_worth(site.id, from.0, day_start).await?;
    let stored_bins: BTreeMap<String, NewBin> = store
        .bins(site.id, None)
        .await?
        .into_iter()
        .map(|b| (b.code.to_string(), b))
        .collect();

    let bin_index: BTreeMap<i64, usize> = input
        .bins
        .iter()
        .enumerate()
        .map(|(i, b)| (b.id, i))
        .collect();
    let item_index: BTreeMap<i64, usize> = input
        .items
        .iter()
        .enumerate()
        .map(|(i, it)| (it.id, i))
        .collect();
    let bins: Vec<NewBin> = input
        .bins
        .iter()
        .map(|b| {
            stored_bins
                .get(&b.code)
                .cloned()
                .expect("the planner's bins are the site's bins")
        })
        .collect();
    let keys: Vec<(usize, usize, String, i64, i64)> = shelf
        .iter()
        .filter_map(|k| {
            Some((
                *bin_index.get(&k.bin)?,
                *item_index.get(&k.item)?,
                k.lot.clone(),
                k.book,
                k.truth,
            ))
        })
        .collect();
    let results = store
        .accuracy_results(
            site.id,
            crate::accuracy::store::ResultQuery {
                from: crate::time::Timestamp(i64::MIN),
                to: day_start,
                sku: None,
            },
        )
        .await?;
    let mut figures = crate::accuracy::service::figures_by_sku(&results)
        .map_err(|e| StoreError::from(anyhow::anyhow!("the site's record-error figures: {e}")))?;
    let worth_of: BTreeMap<i64, &crate::planning::policy::ItemWorth> =
        worth.iter().map(|w| (w.item, w)).collect();
    let window_working = (1..=DEMAND_DAYS)
        .filter_map(|d| today.checked_sub_days(Days::new(d)))
        .filter(|d| !matches!(d.weekday(), Weekday::Sat | Weekday::Sun))
        .count()
        .max(1) as f64;
    let mean_pick = (1.0 + f64::from(MAX_PICK)) / 2.0;

    // Each item's keys, read once: (bin, lot, book).
    let mut keys_of: Vec<Vec<(usize, &str, i64)>> = vec![Vec::new(); input.items.len()];
    for (bin, item, lot, book, _) in &keys {
        keys_of[*item].push((*bin, lot, *book));
    }
    let mut demo_items = Vec::with_capacity(input.items.len());
    let mut sim_items = Vec::with_capacity(input.items.len());
    for (i, it) in input.items.iter().enumerate() {
        let w = worth_of.get(&it.id);
        let booked: BTreeSet<usize> = keys_of[i]
            .iter()
            .filter(|k| k.2 != 0)
            .map(|k| k.0)
            .collect();
        let held: Vec<usize> = it.bins.iter().map(|&b| b as usize).collect();
        let pick_bin = booked
            .first()
            .copied()
            .or_else(|| held.first().copied())
            .unwrap_or(0);
        let reserve_bin = booked.last().copied().filter(|&b| b != pick_bin);
        let picks_per_working_day = w.map_or(0.0, |w| w.picks as f64) / window_working;
        let unit_cost = w.map_or(0, |w| w.unit_cost_minor);
        let sku = w
            .and_then(|w| Sku::parse(&w.sku).ok())
            .expect("every planned item has its worth read with a valid SKU");
        demo_items.push(DemoItem {
            item: NewItem {
                sku,
                description: String::new(),
                base_unit: String::new(),
                unit_cost_minor: unit_cost,
                lot_tracked: keys_of[i].iter().any(|k| !k.1.is_empty()),
                group: String::new(),
                packs: Vec::new(),
            },
            case_units: 1,
            picks_per_day: picks_per_working_day,
            max_pick: MAX_PICK,
            profile: Profile::Steady,
            pick_bin,
            reserve_bin,
        });
        let last = it
            .bins
            .iter()
            .map(|&b| input.bins[b as usize].last_count)
            .min()
            .flatten();
        let per_calendar_day = picks_per_working_day * 5.0 / 7.0;
        sim_items.push(SimItem {
            class: it.class,
            unit_cost: unit_cost as f64,
            picks_per_day: per_calendar_day,
            units_per_day: per_calendar_day * mean_pick,
            zone: held.first().map_or(0, |&b| input.bins[b].place.zone),
            bins: held,
            last_count: last.map(|d| (d - today).num_days()),
            history: w
                .and_then(|w| figures.remove(&w.sku))
                .map(|f| f.points)
                .unwrap_or_default(),
        });
    }
    let propensity = match spec.world {
        WorldKind::Uniform => vec![1.0; demo_items.len()],
        WorldKind::Uneven => uneven_propensity(demo_items.len(), spec.seed),
    };
    let known = if spec.model == ErrorModel::Known {
        known_jumps(&demo_items, &bins, &sim_items, &propensity)
    } else {
        Vec::new()
    };
    let per_year = input.settings.frequency.per_year;
    let site_sim = SimSite {
        items: sim_items,
        bin_seconds: plan::bin_seconds(&input),
        per_year,
        minutes: spec.minutes,
        working_days_per_year: input.calendar.working_days_in_year(today) as f64,
        floors: Floors {
            per_year: spec.floors,
        },
        model: spec.model,
        known,
    };
    let mut sim = Simulation::new(site_sim, spec.weeks)?;
    let wrong_at_start = keys.iter().filter(|k| k.3 != k.4).count();
    let mut world = World::resume(
        &demo_items,
        &bins,
        ChaCha8Rng::seed_from_u64(spec.seed),
        today,
        &keys,
    );
    if spec.world == WorldKind::Uneven {
        world.set_error_propensity(propensity);
    }
    let days = spec.weeks * 7;
    let pb = if spec.show {
        ProgressBar::new(u64::from(days))
    } else {
        ProgressBar::hidden()
    };
    pb.set_style(
        ProgressStyle::with_template("  simulating [{bar:30}] day {pos}/{len}")
            .expect("the template is a fixed, valid string")
            .progress_chars("=> "),
    );
    let mut movements = Vec::new();
    for day in 1..=days {
        world.day(day, &mut movements);
        movements.clear();
        let date = world.date(day);
        let working = !matches!(date.weekday(), Weekday::Sat | Weekday::Sun);
        let keys: Keys = world.stock_by_key();
        sim.day(day, working, &keys);
        pb.set_position(u64::from(day));
    }
    pb.finish_and_clear();
    let intervals = sim.intervals(Policy::Risk);
    let standing = sim.standing_by_item(Policy::Risk);
    let parked: Vec<usize> = (0..intervals.len())
        .filter(|&i| {
            intervals[i].is_finite()
                && intervals[i] >= MAX_INTERVAL_DAYS * (1.0 - 1e-9)
                && !sim.drift(Policy::Risk)[i].grows()
        })
        .collect();
    Ok(Replay {
        flat_parked: parked.len(),
        flat_parked_error_value: parked.iter().map(|&i| standing[i]).sum(),
        risk_longest_days: intervals
            .iter()
            .copied()
            .filter(|d| d.is_finite())
            .fold(0.0, f64::max),
        start: today,
        items: demo_items.len(),
        bins: bins.len(),
        keys: keys.len(),
        wrong_at_start,
        unrecorded_picks: world.unrecorded_picks,
        miskeyed_picks: world.miskeyed_picks,
        misputaways: world.misputaways,
        abc_scale: sim.abc_scale(),
        per_year,
        rows: sim.rows().to_vec(),
    })
}

/// Returns each item's true jumps in the replayed world (`sim::World`'s chances times the
/// item's propensity), as a count of the item's bins meets them: its own unrecorded picks
/// (a pick's mean quantity), mis-keyed picks (one unit) and, for an item replenished
/// from reserve, mis-putaways (the whole replenishment short on its face, `P·units a
/// day` on average, since every unit it sells passes through a replenishment), plus
/// the replenishments of other items misplaced into its bins (valued at their cost,
/// carried as units of this item's). Stalled faces (a face emptied by a mis-putaway
/// stops being picked) are left out: a small overstatement.
fn known_jumps(
    demo: &[DemoItem],
    bins: &[NewBin],
    sim: &[SimItem],
    propensity: &[f64],
) -> Vec<crate::planning::risk::Jumps> {
    use super::sim::{FACE_DAYS, P_MISKEYED_PICK, P_MISPUTAWAY, P_UNRECORDED_PICK};
    let mean_pick = (1.0 + f64::from(MAX_PICK)) / 2.0;
    // (jumps a day, value a day) each count of an item meets.
    let mut met = vec![(0.0_f64, 0.0_f64); demo.len()];
    let mut holder: BTreeMap<usize, usize> = BTreeMap::new();
    for (i, it) in sim.iter().enumerate() {
        for &b in &it.bins {
            holder.entry(b).or_insert(i);
        }
    }
    for (i, (d, s)) in demo.iter().zip(sim).enumerate() {
        let m = propensity[i];
        let picks = s.picks_per_day;
        met[i].0 += picks * m * (P_UNRECORDED_PICK + P_MISKEYED_PICK);
        met[i].1 += picks * m * (P_UNRECORDED_PICK * mean_pick + P_MISKEYED_PICK) * s.unit_cost;
        let to = d.pick_bin;
        if d.reserve_bin.is_none() || to + 1 >= bins.len() || bins[to + 1].zone != bins[to].zone {
            continue;
        }
        // One top-up of FACE_DAYS' demand every FACE_DAYS days or so.
        let per_day = P_MISPUTAWAY * m * s.units_per_day;
        let jumps = per_day / (FACE_DAYS * s.units_per_day).max(1.0);
        met[i].0 += jumps;
        met[i].1 += per_day * s.unit_cost;
        if let Some(&j) = holder.get(&(to + 1)) {
            met[j].0 += jumps;
            met[j].1 += per_day * s.unit_cost;
        }
    }
    met.iter()
        .zip(sim)
        .map(|(&(rate, value), s)| {
            let rate = rate.max(1e-9);
            crate::planning::risk::Jumps {
                rate,
                size: if s.unit_cost > 0.0 {
                    value / s.unit_cost / rate
                } else {
                    0.0
                },
            }
        })
        .collect()
}

impl Replay {
    /// Returns the note under the table about items `risk` never counts, if any.
    pub fn note(&self) -> String {
        if self.flat_parked == 0 {
            return String::new();
        }
        format!(
            "note: risk left {} items at its longest interval ({} days) because their fitted \
             error growth is flat (waiting adds no error by the fit), with {} of error \
             standing on them at the end\n",
            self.flat_parked,
            MAX_INTERVAL_DAYS,
            crate::planning::simulate::report::money(self.flat_parked_error_value)
        )
    }

    /// Returns the lines that say what the run started from and how it counted.
    pub fn preamble(&self, site: &str, spec: &ReplaySpec) -> String {
        let [a, b, c] = self.per_year;
        let [fa, fb, fc] = spec.floors;
        let model = match spec.model {
            ErrorModel::Jump => {
                "error arriving in jumps, each item's rate shrunk toward its pool's rate per pick \
                 (pools: class x zone x pick rate x one bin or more)"
            }
            ErrorModel::Known => {
                "error arriving in jumps at the world's true rates and sizes (not learnable on a \
                 live site: the ceiling of better figures)"
            }
            ErrorModel::Walk => {
                "error growth sigma^2 = b*t learned from its own counts (item, else its pool, else \
                 the site, else unit growth)"
            }
        };
        let uneven = match spec.world {
            WorldKind::Uniform => "",
            WorldKind::Uneven => " with uneven error chances per item (log-normal, mean 1)",
        };
        let floors = if spec.floors == [0, 0, 0] {
            "no class floor".to_string()
        } else {
            format!("class floors {fa}/{fb}/{fc} counts a year (0: none)")
        };
        format!(
            "Counting simulation at {site}: {weeks} weeks from {start}, {minutes} counter-minutes a working day for each policy, seed {seed}\n\
             World: the site's book and the demo's shelf truth on {start} ({keys} keys, {wrong} wrong), \
             carried forward by the demo's own error process{uneven}: {up} unrecorded picks, {mk} mis-keyed picks, {mp} mis-putaways injected\n\
             abc:  class counts a year {a}/{b}/{c} x {scale:.2} to spend the same minutes\n\
             risk: intervals from the risk optimiser, {model}; {floors}\n\n",
            weeks = spec.weeks,
            start = self.start,
            minutes = spec.minutes,
            seed = spec.seed,
            keys = self.keys,
            wrong = self.wrong_at_start,
            up = self.unrecorded_picks,
            mk = self.miskeyed_picks,
            mp = self.misputaways,
            scale = self.abc_scale,
        )
    }
}
