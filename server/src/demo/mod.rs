//! The demo site: a year of plausible history for Kestrel Lane Supply's
//! Northgate warehouse, deterministic by seed. Demand is Pareto-skewed so ABC
//! classes mean something; a few items are seasonal and a few are dying; record
//! errors (unrecorded picks, mis-keyed quantities, mis-putaways) are injected
//! so counts find real differences. The true shelf is kept in `demo_shelf`.

pub mod accounts;
mod catalog;
pub mod count_day;
pub mod history;
pub mod replay;
mod sim;

use crate::master::codes::{BinCode, Sku, ZoneCode};
use crate::master::{
    BinRecord, ItemRecord, NewBin, NewItem, NewPack, NewSite, PackLevel, Side, SiteCode,
};
use crate::store::Store;
use crate::store::error::Progress;
use chrono::NaiveDate;
use indicatif::{ProgressBar, ProgressStyle};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::fmt;
use std::time::Instant;

pub use accounts::{create_demo_users, login_note};
pub use catalog::PEOPLE;

/// The demo site's code.
pub const DEMO_SITE: &str = "KLN";
/// The manager leaves the differences of the history's last days for review.
const REVIEW_LAG_DAYS: u32 = 7;
/// Movements written per store transaction while generating.
const FLUSH_ROWS: usize = 20_000;

/// The demo site's name.
const DEMO_SITE_NAME: &str = "Kestrel Lane Supply — Northgate";

/// Tells whether `site` is the generated demo site (its code and name), whose counting
/// history is simulated: pages say so.
pub fn is_demo_site(site: &crate::master::Site) -> bool {
    site.code.as_str() == DEMO_SITE && site.name == DEMO_SITE_NAME
}

/// The size and seed of a generated site.
#[derive(Debug, Clone)]
pub struct DemoSpec {
    pub site_code: SiteCode,
    pub site_name: String,
    pub items: u32,
    pub bins: u32,
    pub days: u32,
    pub seed: u64,
    /// The last day of history (the day before "today" in the demo).
    pub end: NaiveDate,
    /// Weeks of counting simulated at the end of the history (0: none), then today's
    /// list half counted.
    pub history_weeks: u32,
}

impl DemoSpec {
    /// Returns the standard demo: 600 items, 1,500 bins, a year up to yesterday.
    pub fn standard(seed: u64) -> Self {
        Self {
            site_code: SiteCode::parse(DEMO_SITE).expect("the demo site code is a valid constant"),
            site_name: DEMO_SITE_NAME.into(),
            items: 600,
            bins: 1_500,
            days: 365,
            seed,
            // The demo site keeps UTC days (it is created in UTC).
            end: crate::time::day::SiteZone::UTC
                .today()
                .pred_opt()
                .unwrap_or(NaiveDate::MIN),
            history_weeks: 0,
        }
    }

    /// Returns a small site made in seconds (`cairn demo --small`, browser tests):
    /// 60 items, 150 bins, 120 days up to yesterday, the last 4 weeks counted.
    pub fn small(seed: u64) -> Self {
        Self {
            items: 60,
            bins: 150,
            days: 120,
            history_weeks: 4,
            ..Self::standard(seed)
        }
    }

    /// Returns this site with [`history::HISTORY_WEEKS`] of counting at its end.
    pub fn with_history(mut self) -> Self {
        self.history_weeks = history::HISTORY_WEEKS;
        self
    }

    /// Returns how many of the last days of history have counting.
    pub fn counting_days(&self) -> u32 {
        (self.history_weeks * 7).min(self.days)
    }
}

/// What the generator made.
#[derive(Debug, Clone, Default)]
pub struct DemoSummary {
    pub items: usize,
    pub bins: usize,
    pub packs: usize,
    pub movements: usize,
    pub unrecorded_picks: usize,
    pub miskeyed_picks: usize,
    pub misputaways: usize,
    /// The counting history, when one was simulated.
    pub history: Option<history::HistorySummary>,
    pub seconds: f64,
}

impl fmt::Display for DemoSummary {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "demo site: {} items, {} bins, {} packs, {} movements ({} unrecorded picks, {} mis-keyed picks, {} mis-putaways injected) in {:.1} s",
            self.items,
            self.bins,
            self.packs,
            self.movements,
            self.unrecorded_picks,
            self.miskeyed_picks,
            self.misputaways,
            self.seconds
        )?;
        if let Some(h) = &self.history {
            write!(
                f,
                "\nsimulated counting: {} working days, {} counts and {} recounts through the phones' sync, {} adjustments approved, {} rejected, {} adjusted automatically",
                h.working_days, h.passes, h.recount_passes, h.approved, h.rejected, h.auto_adjusted
            )?;
        }
        Ok(())
    }
}

/// One generated item with its demand profile.
pub(crate) struct DemoItem {
    pub item: NewItem,
    pub case_units: u32,
    /// Mean picks per working day at the start of the history.
    pub picks_per_day: f64,
    /// Largest quantity of one pick.
    pub max_pick: u32,
    pub profile: Profile,
    pub pick_bin: usize,
    pub reserve_bin: Option<usize>,
}

/// How an item's demand changes over the year.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Profile {
    Steady,
    /// Peaks once a year; the phase is the day of the peak.
    Seasonal {
        peak_day: u32,
    },
    /// Fades to nothing by the given day.
    Dying {
        gone_by: u32,
    },
}

fn bins(spec: &DemoSpec) -> Vec<NewBin> {
    // Zone A: pick faces, low levels; B: shelving; C: bulk racking.
    let zones = [("A", 0.40, 3u8), ("B", 0.35, 5), ("C", 0.25, 4)];
    const BAYS_PER_AISLE: u16 = 20;
    let mut out = Vec::with_capacity(spec.bins as usize);
    let mut aisle: u16 = 0;
    for (i, (zone, share, levels)) in zones.iter().enumerate() {
        let quota = if i == zones.len() - 1 {
            spec.bins as usize - out.len()
        } else {
            (spec.bins as f64 * share) as usize
        };
        let zone = ZoneCode::parse(zone).expect("demo zone codes are valid constants");
        let mut made = 0;
        while made < quota {
            aisle += 1;
            for bay in 1..=BAYS_PER_AISLE {
                for level in 1..=*levels {
                    if made == quota {
                        break;
                    }
                    let side = if bay % 2 == 1 {
                        Side::Left
                    } else {
                        Side::Right
                    };
                    let rec = BinRecord {
                        code: None,
                        zone: zone.to_string(),
                        aisle,
                        bay,
                        level,
                        side: Some(side.as_str().into()),
                        walk_seq: None,
                    };
                    out.push(rec.validate().expect("demo bins are built valid"));
                    made += 1;
                }
            }
        }
    }
    out
}

/// Completes 12 digits into a GTIN-13 with its check digit.
fn gtin13(body: u64) -> String {
    let digits = format!("{body:012}");
    let check =
        cairn_scan::gtin_check_digit(&digits).expect("twelve digits always have a check digit");
    format!("{digits}{check}")
}

fn items(spec: &DemoSpec, rng: &mut ChaCha8Rng, bins: &[NewBin]) -> (Vec<DemoItem>, Vec<NewPack>) {
    let n = spec.items as usize;
    // Demand rank: a random permutation, so SKU order says nothing about ABC class.
    let mut ranks: Vec<usize> = (1..=n).collect();
    for i in (1..n).rev() {
        ranks.swap(i, rng.random_range(0..=i));
    }
    let zone_a: Vec<usize> = (0..bins.len())
        .filter(|&i| bins[i].zone.as_str() == "A")
        .collect();
    let zone_b: Vec<usize> = (0..bins.len())
        .filter(|&i| bins[i].zone.as_str() == "B")
        .collect();
    let zone_c: Vec<usize> = (0..bins.len())
        .filter(|&i| bins[i].zone.as_str() == "C")
        .collect();
    let mut by_rank: Vec<usize> = (0..n).collect();
    by_rank.sort_by_key(|&i| ranks[i]);
    let mut pick_bin = vec![0usize; n];
    let mut reserve_bin = vec![None; n];
    let mut faces = zone_a.iter().chain(zone_b.iter()).chain(zone_c.iter());
    for &i in &by_rank {
        pick_bin[i] = *faces
            .next()
            .expect("the generator needs at least as many bins as items");
    }
    let mut used = vec![false; bins.len()];
    for &b in &pick_bin {
        used[b] = true;
    }
    let mut reserves = zone_c.iter().rev().filter(|&&b| !used[b]);
    for &i in by_rank.iter().take(n / 4) {
        reserve_bin[i] = reserves.next().copied();
    }
    let mut out = Vec::with_capacity(n);
    let mut packs = Vec::with_capacity(2 * n);
    for i in 0..n {
        let fam = &catalog::FAMILIES[i % catalog::FAMILIES.len()];
        let k = i / catalog::FAMILIES.len();
        let name = fam.names[k % fam.names.len()];
        let variant = fam.variants[(k / fam.names.len()) % fam.variants.len()];
        let series = k / (fam.names.len() * fam.variants.len());
        let description = if series == 0 {
            format!("{name}, {variant}")
        } else {
            format!("{name}, {variant} (series {})", series + 1)
        };
        let cost = (fam.median_cost * (rng.random::<f64>() * 2.4 - 1.2).exp())
            .round()
            .max(5.0) as i64;
        let rec = ItemRecord {
            sku: format!("{}-{:05}", fam.sku_prefix, 10_000 + i),
            description,
            base_unit: fam.base_unit.into(),
            unit_cost_minor: cost,
            lot_tracked: fam.lot_tracked,
            group: Some(fam.group.into()),
            packs: None,
            class: None,
        };
        let item = rec.validate().expect("demo items are built valid");
        let rank = ranks[i] as f64;
        let picks_per_day = (30.0 / rank.powf(0.85)).min(30.0) + 0.03;
        let roll: f64 = rng.random();
        let profile = if roll < 0.05 {
            Profile::Seasonal {
                peak_day: rng.random_range(0..spec.days.max(1)),
            }
        } else if roll < 0.08 {
            Profile::Dying {
                gone_by: spec.days / 2 + rng.random_range(0..=spec.days / 3),
            }
        } else {
            Profile::Steady
        };
        let case_units = fam.case_units[rng.random_range(0..fam.case_units.len())];
        // GS1 prefixes 020-029 are for restricted in-house numbering (GS1 General Specifications).
        let each = gtin13(200_000_000_000 + 10 * i as u64);
        let case = gtin13(200_000_000_000 + 10 * i as u64 + 1);
        packs.push(NewPack {
            sku: item.sku.clone(),
            gtin: format!("0{each}"),
            level: PackLevel::Each,
            units: 1,
        });
        packs.push(NewPack {
            sku: item.sku.clone(),
            gtin: format!("0{case}"),
            level: PackLevel::Case,
            units: case_units,
        });
        out.push(DemoItem {
            item,
            case_units,
            picks_per_day,
            max_pick: rng.random_range(1..=4),
            profile,
            pick_bin: pick_bin[i],
            reserve_bin: reserve_bin[i],
        });
    }
    (out, packs)
}

/// Writes the movements waiting in `buffer` (if any) and counts them in the summary.
async fn record(
    store: &dyn Store,
    site: &crate::master::Site,
    buffer: &mut Vec<crate::ledger::NewMovement>,
    summary: &mut DemoSummary,
) -> anyhow::Result<()> {
    if buffer.is_empty() {
        return Ok(());
    }
    summary.movements += buffer.len();
    crate::writes::record_movements(
        store,
        site.id,
        std::mem::take(buffer),
        Progress::default(),
        None,
    )
    .await?;
    Ok(())
}

/// Generates the demo site into `store`; `show` draws progress on the terminal.
pub async fn generate(
    store: &dyn Store,
    spec: &DemoSpec,
    show: bool,
) -> anyhow::Result<DemoSummary> {
    anyhow::ensure!(
        spec.bins >= spec.items,
        "the demo needs at least as many bins ({}) as items ({})",
        spec.bins,
        spec.items
    );
    anyhow::ensure!(
        spec.items > 0 && spec.days > 0,
        "the demo needs at least one item and one day"
    );
    let started = Instant::now();
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    let site = store
        .create_site(NewSite {
            code: spec.site_code.clone(),
            name: spec.site_name.clone(),
            time_zone: crate::time::day::SiteZone::UTC,
        })
        .await?;
    let bins = bins(spec);
    let (items, packs) = items(spec, &mut rng, &bins);
    store
        .put_bins(site.id, bins.clone(), Progress::default(), None)
        .await?;
    store
        .put_items(
            site.id,
            items.iter().map(|d| d.item.clone()).collect(),
            Progress::default(),
            None,
        )
        .await?;
    store
        .put_packs(site.id, packs.clone(), Progress::default(), None)
        .await?;

    let pb = if show {
        ProgressBar::new(u64::from(spec.days))
    } else {
        ProgressBar::hidden()
    };
    pb.set_style(
        ProgressStyle::with_template("  history [{bar:30}] day {pos}/{len} {msg}")
            .expect("the template is a fixed, valid string")
            .progress_chars("=> "),
    );
    let mut summary = DemoSummary {
        items: items.len(),
        bins: bins.len(),
        packs: packs.len(),
        ..DemoSummary::default()
    };
    let mut world = sim::World::new(spec, &items, &bins, rng);
    let counting_from = spec.days - spec.counting_days();
    let mut counting = if spec.counting_days() > 0 {
        Some(
            history::Counting::start(store, &site, spec, &items, &bins, world.date(counting_from))
                .await?,
        )
    } else {
        None
    };
    let mut buffer = Vec::new();
    for day in 0..spec.days {
        if let Some(c) = counting.as_mut().filter(|_| day >= counting_from) {
            // The last days before counting began, not yet written.
            record(store, &site, &mut buffer, &mut summary).await?;
            let start = world.stock_by_key();
            world.log_truth(true);
            world.day(day, &mut buffer);
            let log = world.log_truth(false);
            summary.movements += buffer.len();
            let date = world.date(day);
            c.day(
                &mut world,
                date,
                std::mem::take(&mut buffer),
                start,
                log,
                day + REVIEW_LAG_DAYS < spec.days,
            )
            .await?;
            pb.set_message(format!(
                "{} movements, {} counts",
                summary.movements, c.summary.passes
            ));
        } else {
            world.day(day, &mut buffer);
            if buffer.len() >= FLUSH_ROWS || day + 1 == spec.days {
                record(store, &site, &mut buffer, &mut summary).await?;
                pb.set_message(format!("{} movements", summary.movements));
            }
        }
        pb.set_position(u64::from(day + 1));
    }
    pb.finish_and_clear();
    summary.unrecorded_picks = world.unrecorded_picks;
    summary.miskeyed_picks = world.miskeyed_picks;
    summary.misputaways = world.misputaways;
    let shelf = world.shelf(&bins, &items);
    store.put_demo_shelf(site.id, shelf).await?;
    if let Some(mut c) = counting {
        let today = spec.end.succ_opt().unwrap_or(spec.end);
        c.today(&world, today, crate::time::Timestamp::now())
            .await?;
        summary.history = Some(c.summary);
    }
    summary.seconds = started.elapsed().as_secs_f64();
    Ok(summary)
}

/// The bin and SKU codes of a key, for the shelf table.
pub(crate) fn key_codes(
    bins: &[NewBin],
    items: &[DemoItem],
    bin: usize,
    item: usize,
) -> (BinCode, Sku) {
    (bins[bin].code.clone(), items[item].item.sku.clone())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::{DbLocation, StoreOptions};

    fn small(seed: u64) -> DemoSpec {
        DemoSpec {
            items: 40,
            bins: 120,
            days: 120,
            end: NaiveDate::from_ymd_opt(2026, 6, 30).unwrap(),
            ..DemoSpec::standard(seed)
        }
    }

    async fn generated(seed: u64) -> (tempfile::TempDir, rusqlite::Connection) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("demo.db");
        let store =
            crate::store::open(&DbLocation::File(path.clone()), StoreOptions::default()).unwrap();
        generate(store.as_ref(), &small(seed), false).await.unwrap();
        (dir, rusqlite::Connection::open(&path).unwrap())
    }

    fn ledger_text(conn: &rusqlite::Connection) -> Vec<String> {
        conn.prepare("select uid, bin_id, item_id, lot, qty, kind, event_at, recorded_at from movement order by id")
            .unwrap()
            .query_map([], |r| {
                Ok(format!(
                    "{} {} {} {} {} {} {} {}",
                    r.get::<_, String>(0)?,
                    r.get::<_, i64>(1)?,
                    r.get::<_, i64>(2)?,
                    r.get::<_, String>(3)?,
                    r.get::<_, i64>(4)?,
                    r.get::<_, String>(5)?,
                    r.get::<_, i64>(6)?,
                    r.get::<_, i64>(7)?
                ))
            })
            .unwrap()
            .map(Result::unwrap)
            .collect()
    }

    #[tokio::test]
    async fn the_same_seed_gives_the_same_site_and_another_seed_does_not() {
        let (_a, one) = generated(3).await;
        let (_b, two) = generated(3).await;
        let (_c, other) = generated(4).await;
        let first = ledger_text(&one);
        assert!(
            first.len() > 1_000,
            "a few months of history: {}",
            first.len()
        );
        assert_eq!(first, ledger_text(&two));
        assert_ne!(first, ledger_text(&other));
    }

    #[tokio::test]
    async fn demand_is_skewed_and_the_shelf_differs_from_the_book_somewhere() {
        let (_d, conn) = generated(5).await;
        let mut units: Vec<i64> = conn
            .prepare("select -sum(qty) from movement where kind = 'pick' group by item_id")
            .unwrap()
            .query_map([], |r| r.get(0))
            .unwrap()
            .map(Result::unwrap)
            .collect();
        units.sort_unstable_by(|a, b| b.cmp(a));
        let total: i64 = units.iter().sum();
        let top: i64 = units.iter().take(units.len() / 5).sum();
        assert!(
            top * 100 > total * 55,
            "the top fifth of items carries most picks: {top} of {total}"
        );
        let differing: i64 = conn
            .query_row(
                "select count(*) from balance b join demo_shelf s using (bin_id, item_id, lot) where b.qty <> s.qty",
                [],
                |r| r.get(0),
            )
            .unwrap();
        assert!(
            differing > 0,
            "injected record errors leave some keys wrong"
        );
    }
}
