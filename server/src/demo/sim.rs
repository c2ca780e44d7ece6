//! The demo's day-by-day simulation: picks, replenishment, receipts, returns
//! and damage, with the book (what is recorded) and the truth (what is on the
//! shelf) kept apart so injected record errors show up in later counts.

use super::{DemoItem, DemoSpec, Profile, key_codes};
use crate::ledger::{MovementKind, NewMovement};
use crate::master::NewBin;
use crate::master::codes::MovementUid;
use crate::store::ShelfRow;
use crate::time::Timestamp;
use chrono::{Datelike, Days, NaiveDate, Weekday};
use rand::Rng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Poisson};
use std::collections::{HashMap, VecDeque};

/// Chance that a pick is never recorded (common practice, no source: a plausible rate).
pub(crate) const P_UNRECORDED_PICK: f64 = 0.001;
/// Chance that a recorded pick quantity is keyed one off.
pub(crate) const P_MISKEYED_PICK: f64 = 0.0015;
/// Chance that a replenishment lands in the neighbouring bin.
pub(crate) const P_MISPUTAWAY: f64 = 0.01;
/// Chance per item per working day of one damaged unit written off.
const P_DAMAGE: f64 = 0.001;
/// Days of demand a pick face is topped up to.
pub(crate) const FACE_DAYS: f64 = 6.0;
/// Days of demand at which the buyer reorders, and how much is ordered.
const REORDER_DAYS: f64 = 8.0;
const ORDER_DAYS: f64 = 20.0;

struct LotQty {
    lot: String,
    expiry: Option<NaiveDate>,
    book: i64,
    truth: i64,
}

/// The warehouse as the simulation sees it.
pub(crate) struct World<'a> {
    items: &'a [DemoItem],
    bins: &'a [NewBin],
    rng: ChaCha8Rng,
    start: NaiveDate,
    stock: HashMap<(usize, usize), VecDeque<LotQty>>,
    on_order: Vec<Option<(u32, i64)>>,
    doc_seq: u64,
    pub unrecorded_picks: usize,
    pub miskeyed_picks: usize,
    pub misputaways: usize,
    /// Every change of the shelf while set (the counting history reads it).
    truth_log: Option<Vec<TruthMove>>,
    /// Each item's multiplier on the chance of an injected error (1 for every item in
    /// the demo's own history; see [`Self::set_error_propensity`]).
    propensity: Vec<f64>,
}

/// One change of a key's true shelf quantity, at an instant (ms).
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct TruthMove {
    pub bin: usize,
    pub item: usize,
    pub lot: String,
    pub at: i64,
    pub delta: i64,
}

impl<'a> World<'a> {
    /// Sets up an empty warehouse whose history ends on `spec.end`.
    pub fn new(
        spec: &DemoSpec,
        items: &'a [DemoItem],
        bins: &'a [NewBin],
        rng: ChaCha8Rng,
    ) -> Self {
        let start = spec
            .end
            .checked_sub_days(Days::new(u64::from(spec.days.saturating_sub(1))))
            .unwrap_or(spec.end);
        Self::empty(items, bins, rng, start)
    }

    /// A warehouse holding nothing, nothing on order, its history day 0 on `start`.
    fn empty(items: &'a [DemoItem], bins: &'a [NewBin], rng: ChaCha8Rng, start: NaiveDate) -> Self {
        Self {
            items,
            bins,
            rng,
            start,
            stock: HashMap::new(),
            on_order: vec![None; items.len()],
            doc_seq: 0,
            unrecorded_picks: 0,
            miskeyed_picks: 0,
            misputaways: 0,
            truth_log: None,
            propensity: vec![1.0; items.len()],
        }
    }

    /// Sets up a warehouse that already holds `keys` (bin, item, lot, book, shelf) on
    /// `start`, history day 0, with nothing on order; its days run from 1.
    pub fn resume(
        items: &'a [DemoItem],
        bins: &'a [NewBin],
        rng: ChaCha8Rng,
        start: NaiveDate,
        keys: &[(usize, usize, String, i64, i64)],
    ) -> Self {
        let mut world = Self::empty(items, bins, rng, start);
        for (bin, item, lot, book, truth) in keys {
            world.put(*bin, *item, lot, None, *book, *truth);
        }
        world
    }

    /// Sets each item's multiplier on the chances of an unrecorded or mis-keyed pick and
    /// of a mis-putaway (one per item, in item order; each at least 0). With every
    /// multiplier 1 the world draws exactly as before.
    pub fn set_error_propensity(&mut self, propensity: Vec<f64>) {
        assert_eq!(
            propensity.len(),
            self.items.len(),
            "one multiplier per item"
        );
        assert!(
            propensity.iter().all(|m| m.is_finite() && *m >= 0.0),
            "multipliers are finite and not negative"
        );
        self.propensity = propensity;
    }

    /// Returns the date of history day `day`.
    pub fn date(&self, day: u32) -> NaiveDate {
        self.start
            .checked_add_days(Days::new(u64::from(day)))
            .unwrap_or(self.start)
    }

    /// Returns the book and the true quantity of every key with either, by (bin, item, lot).
    pub fn stock_by_key(&self) -> std::collections::BTreeMap<(usize, usize, String), (i64, i64)> {
        self.stock
            .iter()
            .flat_map(|(&(b, i), lots)| {
                lots.iter()
                    .filter(|l| l.truth != 0 || l.book != 0)
                    .map(move |l| ((b, i, l.lot.clone()), (l.book, l.truth)))
            })
            .collect()
    }

    /// Starts (or stops) keeping every change of the shelf; returns what was kept.
    pub fn log_truth(&mut self, on: bool) -> Vec<TruthMove> {
        let kept = self.truth_log.take().unwrap_or_default();
        self.truth_log = on.then(Vec::new);
        kept
    }

    /// Changes the book of a key by `delta` (a posted count adjustment).
    pub fn adjust_book(&mut self, bin: usize, item: usize, lot: &str, delta: i64) {
        self.book_delta(bin, item, lot, delta);
    }

    fn note_truth(&mut self, bin: usize, item: usize, lot: &str, at: i64, delta: i64) {
        if delta != 0
            && let Some(log) = &mut self.truth_log
        {
            log.push(TruthMove {
                bin,
                item,
                lot: lot.to_string(),
                at,
                delta,
            });
        }
    }

    fn daily_units(&self, i: usize, day: u32) -> f64 {
        let it = &self.items[i];
        let factor = match it.profile {
            Profile::Steady => 1.0,
            Profile::Seasonal { peak_day } => {
                1.0 + 0.9
                    * (2.0 * std::f64::consts::PI * (f64::from(day) - f64::from(peak_day)) / 365.0)
                        .cos()
            }
            Profile::Dying { gone_by } => {
                (1.0 - f64::from(day) / f64::from(gone_by.max(1))).max(0.0)
            }
        };
        it.picks_per_day * factor * (1.0 + f64::from(it.max_pick)) / 2.0
    }

    fn book(&self, bin: usize, item: usize) -> i64 {
        self.stock
            .get(&(bin, item))
            .map_or(0, |l| l.iter().map(|x| x.book).sum())
    }

    fn at(&mut self, date: NaiveDate, from_min: u32, to_min: u32) -> i64 {
        let minute = self.rng.random_range(from_min..to_min);
        let second = self.rng.random_range(0..60);
        // The demo site keeps UTC days.
        crate::time::day::SiteZone::UTC.start_of(date).0
            + i64::from(minute) * 60_000
            + i64::from(second) * 1_000
    }

    #[allow(clippy::too_many_arguments)]
    fn emit(
        &mut self,
        out: &mut Vec<NewMovement>,
        bin: usize,
        item: usize,
        lot: &LotView,
        qty: i64,
        kind: MovementKind,
        at: i64,
        doc: &str,
    ) {
        let mut bytes = [0u8; 10];
        self.rng.fill(&mut bytes);
        let uid = uuid::Builder::from_unix_timestamp_millis(at.max(0) as u64, &bytes).into_uuid();
        let (source, lag_ms) = match kind {
            MovementKind::Pick | MovementKind::Receipt | MovementKind::Return => {
                ("host", self.rng.random_range(2_000..900_000))
            }
            _ => ("rf", self.rng.random_range(200..3_000)),
        };
        let (bin_code, sku) = key_codes(self.bins, self.items, bin, item);
        out.push(NewMovement {
            uid: MovementUid::parse(&uid.to_string()).expect("a UUID is a valid movement id"),
            bin: bin_code,
            sku,
            lot: lot.lot.clone(),
            expiry: if kind == MovementKind::Receipt {
                lot.expiry
            } else {
                None
            },
            qty,
            kind,
            event_at: Timestamp(at),
            source: source.into(),
            doc_ref: doc.into(),
            actor: String::new(),
            reverses: None,
            recorded_at: Some(Timestamp(at + lag_ms)),
        });
    }

    fn next_doc(&mut self, prefix: &str) -> String {
        self.doc_seq += 1;
        format!("{prefix}-{:07}", self.doc_seq)
    }

    /// Simulates one calendar day, appending the movements it records.
    pub fn day(&mut self, day: u32, out: &mut Vec<NewMovement>) {
        let date = self.date(day);
        if matches!(date.weekday(), Weekday::Sat | Weekday::Sun) {
            return;
        }
        for i in 0..self.items.len() {
            self.item_day(i, day, date, out);
        }
    }

    fn item_day(&mut self, i: usize, day: u32, date: NaiveDate, out: &mut Vec<NewMovement>) {
        let it = &self.items[i];
        let (pick_bin, reserve, case) = (it.pick_bin, it.reserve_bin, i64::from(it.case_units));
        let daily = self.daily_units(i, day).max(0.05);
        if day == 0 || self.on_order[i].is_some_and(|(due, _)| due <= day) {
            let qty = match self.on_order[i].take() {
                Some((_, q)) => q,
                None => ((ORDER_DAYS * daily / case as f64).ceil() as i64).max(1) * case,
            };
            self.receive(i, reserve.unwrap_or(pick_bin), qty, date, out);
        }
        let rate =
            self.items[i].picks_per_day * (daily / self.daily_units(i, 0).max(0.05)).min(3.0);
        let picks = Poisson::new(rate.max(1e-6)).map_or(0, |p| p.sample(&mut self.rng) as u32);
        let mut times: Vec<i64> = (0..picks).map(|_| self.at(date, 6 * 60, 21 * 60)).collect();
        times.sort_unstable();
        let face_min = (FACE_DAYS / 2.0 * daily).ceil() as i64;
        for t in times {
            let q = i64::from(self.rng.random_range(1..=self.items[i].max_pick));
            self.pick(i, pick_bin, q, t, out);
            if let Some(r) = reserve
                && self.book(pick_bin, i) < face_min
                && self.book(r, i) > 0
            {
                let want = ((FACE_DAYS * daily / case as f64).ceil() as i64).max(1) * case;
                self.replenish(i, r, pick_bin, want, t + 60_000, out);
            }
        }
        if self.rng.random::<f64>() < P_DAMAGE && self.book(pick_bin, i) > 0 {
            let t = self.at(date, 6 * 60, 21 * 60);
            if let Some(view) = self.take_truth(pick_bin, i, 1) {
                self.note_truth(pick_bin, i, &view.lot, t, -1);
                self.emit(
                    out,
                    pick_bin,
                    i,
                    &view,
                    -1,
                    MovementKind::Adjustment,
                    t,
                    "DMG",
                );
                self.book_delta(pick_bin, i, &view.lot, -1);
            }
        }
        if self.rng.random::<f64>() < 0.02 * rate.min(1.0) {
            let t = self.at(date, 8 * 60, 17 * 60);
            let lot = self
                .stock
                .get(&(pick_bin, i))
                .and_then(|l| l.front())
                .map(|l| l.lot.clone());
            if let Some(lot) = lot.or_else(|| (!self.items[i].item.lot_tracked).then(String::new)) {
                let doc = self.next_doc("RET");
                self.put(pick_bin, i, &lot, None, 1, 1);
                self.note_truth(pick_bin, i, &lot, t, 1);
                self.emit(
                    out,
                    pick_bin,
                    i,
                    &LotView { lot, expiry: None },
                    1,
                    MovementKind::Return,
                    t,
                    &doc,
                );
            }
        }
        let position = self.book(pick_bin, i)
            + reserve.map_or(0, |r| self.book(r, i))
            + self.on_order[i].map_or(0, |(_, q)| q);
        if self.on_order[i].is_none() && (position as f64) < REORDER_DAYS * daily {
            let qty = ((ORDER_DAYS * daily / case as f64).ceil() as i64).max(1) * case;
            let lead = self.rng.random_range(3..=7);
            self.on_order[i] = Some((day + lead, qty));
        }
    }

    fn receive(
        &mut self,
        i: usize,
        bin: usize,
        qty: i64,
        date: NaiveDate,
        out: &mut Vec<NewMovement>,
    ) {
        let t = self.at(date, 6 * 60, 9 * 60);
        let doc = self.next_doc("RCV");
        let view = if self.items[i].item.lot_tracked {
            let days = self.rng.random_range(180..720);
            LotView {
                lot: format!(
                    "L{}-{:02}",
                    date.format("%y%m%d"),
                    self.rng.random_range(1..100)
                ),
                expiry: date.checked_add_days(Days::new(days)),
            }
        } else {
            LotView {
                lot: String::new(),
                expiry: None,
            }
        };
        self.put(bin, i, &view.lot, view.expiry, qty, qty);
        self.note_truth(bin, i, &view.lot, t, qty);
        self.emit(out, bin, i, &view, qty, MovementKind::Receipt, t, &doc);
    }

    /// Adds `book` to the record and `truth` to the shelf of one lot of a key.
    fn put(
        &mut self,
        bin: usize,
        item: usize,
        lot: &str,
        expiry: Option<NaiveDate>,
        book: i64,
        truth: i64,
    ) {
        let lots = self.stock.entry((bin, item)).or_default();
        match lots.iter_mut().find(|l| l.lot == lot) {
            Some(l) => {
                l.book += book;
                l.truth += truth;
            }
            None => lots.push_back(LotQty {
                lot: lot.to_string(),
                expiry,
                book,
                truth,
            }),
        }
    }

    fn book_delta(&mut self, bin: usize, item: usize, lot: &str, d: i64) {
        self.put(bin, item, lot, None, d, 0);
    }

    /// Takes up to `q` units physically from the oldest lot that has any.
    fn take_truth(&mut self, bin: usize, item: usize, q: i64) -> Option<LotView> {
        let lots = self.stock.get_mut(&(bin, item))?;
        let l = lots.iter_mut().find(|l| l.truth > 0)?;
        let take = q.min(l.truth);
        l.truth -= take;
        Some(LotView {
            lot: l.lot.clone(),
            expiry: l.expiry,
        })
        .filter(|_| take == q)
    }

    fn pick(&mut self, i: usize, bin: usize, q: i64, t: i64, out: &mut Vec<NewMovement>) {
        let mut remaining = q;
        let doc = self.next_doc("ORD");
        while remaining > 0 {
            let Some(lots) = self.stock.get_mut(&(bin, i)) else {
                return;
            };
            let Some(l) = lots.iter_mut().find(|l| l.truth > 0) else {
                return;
            };
            let take = remaining.min(l.truth);
            l.truth -= take;
            remaining -= take;
            let view = LotView {
                lot: l.lot.clone(),
                expiry: l.expiry,
            };
            self.note_truth(bin, i, &view.lot, t, -take);
            let roll: f64 = self.rng.random();
            let m = self.propensity[i];
            let recorded = if roll < P_UNRECORDED_PICK * m {
                self.unrecorded_picks += 1;
                0
            } else if roll < (P_UNRECORDED_PICK + P_MISKEYED_PICK) * m {
                self.miskeyed_picks += 1;
                if self.rng.random::<bool>() || take == 1 {
                    take + 1
                } else {
                    take - 1
                }
            } else {
                take
            };
            if recorded > 0 {
                self.book_delta(bin, i, &view.lot, -recorded);
                self.emit(out, bin, i, &view, -recorded, MovementKind::Pick, t, &doc);
            }
        }
    }

    fn replenish(
        &mut self,
        i: usize,
        from: usize,
        to: usize,
        want: i64,
        t: i64,
        out: &mut Vec<NewMovement>,
    ) {
        let doc = self.next_doc("RPL");
        let misplaced = self.rng.random::<f64>() < P_MISPUTAWAY * self.propensity[i];
        let land = if misplaced
            && to + 1 < self.bins.len()
            && self.bins[to + 1].zone == self.bins[to].zone
        {
            to + 1
        } else {
            to
        };
        if land != to {
            self.misputaways += 1;
        }
        let mut left = want;
        while left > 0 {
            let Some(lots) = self.stock.get_mut(&(from, i)) else {
                return;
            };
            let Some(l) = lots.iter_mut().find(|l| l.book > 0 && l.truth > 0) else {
                return;
            };
            let q = left.min(l.book).min(l.truth);
            l.book -= q;
            l.truth -= q;
            left -= q;
            let view = LotView {
                lot: l.lot.clone(),
                expiry: l.expiry,
            };
            self.put(to, i, &view.lot, view.expiry, q, 0);
            self.put(land, i, &view.lot, view.expiry, 0, q);
            self.note_truth(from, i, &view.lot, t, -q);
            self.note_truth(land, i, &view.lot, t, q);
            self.emit(out, from, i, &view, -q, MovementKind::Transfer, t, &doc);
            self.emit(out, to, i, &view, q, MovementKind::Transfer, t, &doc);
        }
    }

    /// Returns the true shelf quantity of every key the simulation touched.
    pub fn shelf(&self, bins: &[NewBin], items: &[DemoItem]) -> Vec<ShelfRow> {
        let mut rows: Vec<ShelfRow> = self
            .stock
            .iter()
            .flat_map(|(&(b, i), lots)| {
                lots.iter()
                    .filter(|l| l.book != 0 || l.truth != 0)
                    .map(move |l| {
                        let (bin, sku) = key_codes(bins, items, b, i);
                        ShelfRow {
                            bin,
                            sku,
                            lot: l.lot.clone(),
                            qty: l.truth,
                        }
                    })
            })
            .collect();
        rows.sort_by(|a, b| (&a.bin, &a.sku, &a.lot).cmp(&(&b.bin, &b.sku, &b.lot)));
        rows
    }
}

/// A lot as a movement names it.
pub(crate) struct LotView {
    lot: String,
    expiry: Option<NaiveDate>,
}
