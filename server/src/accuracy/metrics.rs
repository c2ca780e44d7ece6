//! Record-accuracy figures over a period's count results: inventory record
//! accuracy (IRA, hits / counted keys) overall and by class, zone, counter and
//! ISO week; value accuracy; net and gross adjustment value; count compliance
//! (planned tasks done / planned); coverage (A items counted by their due day).
//!
//! Quantities are integer base units and money integer minor units; sums run
//! in i128 and a ratio becomes `f64` only when it is read. Every count result
//! is one (bin, item, lot) key netted against the ledger: `book_qty` is `f*`,
//! the feasible book value nearest the count, and `variance = counted − f*`.
//! Pure arithmetic; no I/O.

use crate::planning::abc::Class;
use crate::time::Timestamp;
use chrono::{Datelike, NaiveDate};
use serde::{Serialize, Serializer};
use std::collections::BTreeMap;
use std::fmt;

/// Most count results one call may summarise; a longer period is split by the caller.
pub const MAX_RESULTS: usize = 5_000_000;

/// One counted key, as the accuracy figures need it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct CountResult {
    pub item: String,
    pub class: Class,
    pub zone: String,
    /// The user name of who counted it.
    pub counter: String,
    /// When the count was taken.
    pub counted_at: Timestamp,
    /// The site's calendar day of the count (the site's time zone decides it).
    pub day: NaiveDate,
    /// Quantity counted, base units.
    pub counted_qty: i64,
    /// The feasible book value nearest the count, `f*`, base units.
    pub book_qty: i64,
    /// `counted_qty − book_qty`.
    pub variance: i64,
    /// Within tolerance (or the record was confirmed right by a recount).
    pub hit: bool,
    /// Unit cost, minor units.
    pub unit_cost_minor: i64,
}

/// Tasks planned for the period and how many of them were done.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct TaskTally {
    pub planned: u64,
    /// Planned tasks done; never more than `planned`.
    pub done: u64,
}

/// An A item that fell due in the period, and when (if) it was counted.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct DueItem {
    pub item: String,
    /// The last day the count was on time.
    pub due_by: NaiveDate,
    /// The first day it was counted after falling due, if it was.
    pub counted_on: Option<NaiveDate>,
}

/// A count of successes out of a count of cases.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct Ratio {
    pub part: u64,
    pub whole: u64,
}

impl Ratio {
    /// Returns `part / whole`, or `None` when there were no cases.
    pub fn value(self) -> Option<f64> {
        (self.whole > 0).then(|| self.part as f64 / self.whole as f64)
    }

    fn add(&mut self, success: bool) {
        self.whole += 1;
        self.part += u64::from(success);
    }
}

/// An ISO 8601 week, shown as `2026-W10`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Week {
    pub year: i32,
    pub week: u32,
}

impl Week {
    /// Returns the ISO week `day` falls in.
    pub fn of(day: NaiveDate) -> Self {
        let w = day.iso_week();
        Self {
            year: w.year(),
            week: w.week(),
        }
    }
}

impl fmt::Display for Week {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}-W{:02}", self.year, self.week)
    }
}

impl Serialize for Week {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

/// Record accuracy and adjustment value over a set of count results.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RecordAccuracy {
    /// Hits over counted keys, all results.
    pub ira: Ratio,
    pub by_class: BTreeMap<Class, Ratio>,
    pub by_zone: BTreeMap<String, Ratio>,
    pub by_counter: BTreeMap<String, Ratio>,
    pub by_week: BTreeMap<Week, Ratio>,
    /// Σ |f*| × unit cost over the counted keys, minor units.
    pub counted_book_value_minor: i64,
    /// Σ variance × unit cost, minor units: what the book gains (+) or loses (−).
    pub net_adjustment_minor: i64,
    /// Σ |variance × unit cost|, minor units.
    pub gross_adjustment_minor: i64,
}

impl RecordAccuracy {
    /// Returns `1 − gross adjustment / counted book value`; `None` when nothing
    /// of value was on the book. Falls below 0 when the differences exceed the
    /// book value counted.
    pub fn value_accuracy(&self) -> Option<f64> {
        (self.counted_book_value_minor > 0).then(|| {
            1.0 - self.gross_adjustment_minor as f64 / self.counted_book_value_minor as f64
        })
    }
}

/// Why count results cannot be summarised; `index` is the result's position.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum MetricsError {
    #[error("{len} count results is more than the {MAX_RESULTS} one summary may take")]
    TooMany { len: usize },
    #[error("result {index} ({item}): variance {variance} is not counted {counted} − book {book}")]
    VarianceMismatch {
        index: usize,
        item: String,
        counted: i64,
        book: i64,
        variance: i64,
    },
    #[error("result {index} ({item}): counted quantity {counted} is negative")]
    NegativeCount {
        index: usize,
        item: String,
        counted: i64,
    },
    #[error("result {index} ({item}): unit cost {cost} is negative")]
    NegativeCost {
        index: usize,
        item: String,
        cost: i64,
    },
    #[error("{done} tasks done is more than the {planned} planned")]
    DoneExceedsPlanned { planned: u64, done: u64 },
    #[error("{what} exceeds the range of 64-bit minor units")]
    Overflow { what: &'static str },
}

/// Computes IRA by every grouping and the adjustment values of `results`.
pub fn record_accuracy(results: &[CountResult]) -> Result<RecordAccuracy, MetricsError> {
    if results.len() > MAX_RESULTS {
        return Err(MetricsError::TooMany { len: results.len() });
    }
    let mut acc = RecordAccuracy {
        ira: Ratio::default(),
        by_class: BTreeMap::new(),
        by_zone: BTreeMap::new(),
        by_counter: BTreeMap::new(),
        by_week: BTreeMap::new(),
        counted_book_value_minor: 0,
        net_adjustment_minor: 0,
        gross_adjustment_minor: 0,
    };
    // An i64 × i64 product always fits i128; millions of them added may not,
    // so each addition is checked.
    let (mut book, mut net, mut gross) = (0i128, 0i128, 0i128);
    for (index, r) in results.iter().enumerate() {
        check(index, r)?;
        acc.ira.add(r.hit);
        acc.by_class.entry(r.class).or_default().add(r.hit);
        acc.by_zone.entry(r.zone.clone()).or_default().add(r.hit);
        acc.by_counter
            .entry(r.counter.clone())
            .or_default()
            .add(r.hit);
        acc.by_week.entry(Week::of(r.day)).or_default().add(r.hit);

        let cost = i128::from(r.unit_cost_minor);
        let adjustment = i128::from(r.variance) * cost;
        book = add(
            book,
            i128::from(r.book_qty).abs() * cost,
            "counted book value",
        )?;
        net = add(net, adjustment, "net adjustment value")?;
        gross = add(gross, adjustment.abs(), "gross adjustment value")?;
    }
    acc.counted_book_value_minor = narrow(book, "counted book value")?;
    acc.net_adjustment_minor = narrow(net, "net adjustment value")?;
    acc.gross_adjustment_minor = narrow(gross, "gross adjustment value")?;
    Ok(acc)
}

/// Returns count compliance: planned tasks done over tasks planned.
pub fn count_compliance(tasks: TaskTally) -> Result<Ratio, MetricsError> {
    if tasks.done > tasks.planned {
        return Err(MetricsError::DoneExceedsPlanned {
            planned: tasks.planned,
            done: tasks.done,
        });
    }
    Ok(Ratio {
        part: tasks.done,
        whole: tasks.planned,
    })
}

/// Returns coverage: the A items that fell due, and how many were counted by their due day.
pub fn coverage(a_items: &[DueItem]) -> Ratio {
    let mut r = Ratio::default();
    for item in a_items {
        r.add(item.counted_on.is_some_and(|d| d <= item.due_by));
    }
    r
}

fn check(index: usize, r: &CountResult) -> Result<(), MetricsError> {
    if r.counted_qty < 0 {
        return Err(MetricsError::NegativeCount {
            index,
            item: r.item.clone(),
            counted: r.counted_qty,
        });
    }
    if r.unit_cost_minor < 0 {
        return Err(MetricsError::NegativeCost {
            index,
            item: r.item.clone(),
            cost: r.unit_cost_minor,
        });
    }
    if r.counted_qty.checked_sub(r.book_qty) != Some(r.variance) {
        return Err(MetricsError::VarianceMismatch {
            index,
            item: r.item.clone(),
            counted: r.counted_qty,
            book: r.book_qty,
            variance: r.variance,
        });
    }
    Ok(())
}

fn add(sum: i128, x: i128, what: &'static str) -> Result<i128, MetricsError> {
    sum.checked_add(x).ok_or(MetricsError::Overflow { what })
}

fn narrow(x: i128, what: &'static str) -> Result<i64, MetricsError> {
    i64::try_from(x).map_err(|_| MetricsError::Overflow { what })
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn day(text: &str) -> NaiveDate {
        text.parse().expect("test dates are valid")
    }

    #[allow(clippy::too_many_arguments)]
    fn result(
        item: &str,
        class: Class,
        zone: &str,
        counter: &str,
        on: &str,
        counted: i64,
        book: i64,
        hit: bool,
        cost: i64,
    ) -> CountResult {
        CountResult {
            item: item.into(),
            class,
            zone: zone.into(),
            counter: counter.into(),
            counted_at: Timestamp(0),
            day: day(on),
            counted_qty: counted,
            book_qty: book,
            variance: counted - book,
            hit,
            unit_cost_minor: cost,
        }
    }

    /// Eight counts over two ISO weeks at the fictional Kestrel Lane site.
    /// 2026-03-02 is a Monday in ISO week 10 (1 January 2026 is a Thursday, so
    /// week 1 starts on 29 December 2025; 2 March is day 63 of that count).
    fn history() -> Vec<CountResult> {
        use Class::*;
        vec![
            //      item  class zone  counter   day           counted book hit  cost
            result("I1", A, "Z1", "ada", "2026-03-02", 10, 10, true, 500), // var 0
            result("I2", A, "Z1", "ada", "2026-03-02", 8, 10, false, 1200), // −2 × 1200 = −2400
            result("I3", B, "Z1", "bruno", "2026-03-03", 100, 98, true, 50), // +2 × 50 = +100
            result("I4", B, "Z2", "bruno", "2026-03-04", 0, 5, false, 300), // −5 × 300 = −1500
            result("I5", C, "Z2", "chiara", "2026-03-05", 40, 40, true, 20), // var 0
            result("I1", A, "Z1", "chiara", "2026-03-09", 12, 10, false, 500), // +2 × 500 = +1000
            result("I6", C, "Z2", "ada", "2026-03-10", 7, 7, true, 100),   // var 0
            result("I3", B, "Z1", "bruno", "2026-03-11", 97, 98, true, 50), // −1 × 50 = −50
        ]
    }

    fn r(part: u64, whole: u64) -> Ratio {
        Ratio { part, whole }
    }

    #[test]
    fn a_small_history_gives_the_figures_worked_by_hand() {
        let acc = record_accuracy(&history()).unwrap();
        // Hits are results 1, 3, 5, 7 and 8: IRA = 5 / 8 = 0.625.
        assert_eq!(acc.ira, r(5, 8));
        assert_eq!(acc.ira.value(), Some(0.625));
        // A: 1 hit of 3 (1); B: 2 of 3 (3, 8); C: 2 of 2 (5, 7).
        let class: Vec<_> = acc.by_class.iter().map(|(k, v)| (*k, *v)).collect();
        assert_eq!(
            class,
            [
                (Class::A, r(1, 3)),
                (Class::B, r(2, 3)),
                (Class::C, r(2, 2))
            ]
        );
        // Z1: results 1, 2, 3, 6, 8 with hits 1, 3, 8; Z2: 4, 5, 7 with hits 5, 7.
        assert_eq!(acc.by_zone["Z1"], r(3, 5));
        assert_eq!(acc.by_zone["Z2"], r(2, 3));
        // ada: 1, 2, 7 (hits 1, 7); bruno: 3, 4, 8 (hits 3, 8); chiara: 5, 6 (hit 5).
        assert_eq!(acc.by_counter["ada"], r(2, 3));
        assert_eq!(acc.by_counter["bruno"], r(2, 3));
        assert_eq!(acc.by_counter["chiara"], r(1, 2));
        // Week 10 (2–5 March): results 1–5, hits 1, 3, 5; week 11: 6–8, hits 7, 8.
        let weeks: Vec<_> = acc
            .by_week
            .iter()
            .map(|(w, v)| (w.to_string(), *v))
            .collect();
        assert_eq!(
            weeks,
            [
                ("2026-W10".to_string(), r(3, 5)),
                ("2026-W11".into(), r(2, 3))
            ]
        );
        // Adjustments −2400 + 100 − 1500 + 1000 − 50: net −2850, gross 5050.
        assert_eq!(acc.net_adjustment_minor, -2850);
        assert_eq!(acc.gross_adjustment_minor, 5050);
        // Book value 5000 + 12000 + 4900 + 1500 + 800 + 5000 + 700 + 4900 = 34800.
        assert_eq!(acc.counted_book_value_minor, 34_800);
        // Value accuracy 1 − 5050 / 34800 = 1 − 0.1451149… = 0.8548850…
        let va = acc.value_accuracy().unwrap();
        assert!((va - 0.854_885_057).abs() < 1e-9, "{va}");
    }

    #[test]
    fn compliance_and_coverage_are_worked_by_hand() {
        // 8 of 10 planned tasks done: 0.8.
        let c = count_compliance(TaskTally {
            planned: 10,
            done: 8,
        })
        .unwrap();
        assert_eq!(c.value(), Some(0.8));
        // I1 due by 6 March, counted 2 March: on time. I2 due by 1 March,
        // counted 2 March: late. I7 due by 13 March, never counted. 1 / 3.
        let due = [
            DueItem {
                item: "I1".into(),
                due_by: day("2026-03-06"),
                counted_on: Some(day("2026-03-02")),
            },
            DueItem {
                item: "I2".into(),
                due_by: day("2026-03-01"),
                counted_on: Some(day("2026-03-02")),
            },
            DueItem {
                item: "I7".into(),
                due_by: day("2026-03-13"),
                counted_on: None,
            },
        ];
        assert_eq!(coverage(&due), r(1, 3));
        // Counted on the due day itself is on time.
        assert_eq!(coverage(&due[..1]), r(1, 1));
        assert_eq!(coverage(&[]).value(), None);
    }

    #[test]
    fn bad_results_are_refused_with_their_position() {
        let mut h = history();
        h[3].variance = -4;
        assert_eq!(
            record_accuracy(&h).unwrap_err().to_string(),
            "result 3 (I4): variance -4 is not counted 0 − book 5"
        );
        let mut h = history();
        h[6].unit_cost_minor = -1;
        assert!(matches!(
            record_accuracy(&h),
            Err(MetricsError::NegativeCost { index: 6, .. })
        ));
        let mut h = history();
        h[0].counted_qty = -1;
        h[0].variance = -11;
        assert!(matches!(
            record_accuracy(&h),
            Err(MetricsError::NegativeCount { index: 0, .. })
        ));
        assert_eq!(
            count_compliance(TaskTally {
                planned: 3,
                done: 4
            }),
            Err(MetricsError::DoneExceedsPlanned {
                planned: 3,
                done: 4
            })
        );
    }

    #[test]
    fn totals_beyond_64_bits_are_refused_not_wrapped() {
        let big = result(
            "I9",
            Class::A,
            "Z1",
            "esme",
            "2026-03-02",
            i64::MAX / 2,
            0,
            false,
            4,
        );
        assert_eq!(
            record_accuracy(&[big]),
            Err(MetricsError::Overflow {
                what: "net adjustment value"
            })
        );
    }

    #[test]
    fn nothing_on_the_book_has_no_value_accuracy() {
        let acc = record_accuracy(&[]).unwrap();
        assert_eq!(acc.ira.value(), None);
        assert_eq!(acc.value_accuracy(), None);
    }

    proptest! {
        #[test]
        fn every_grouping_partitions_the_same_keys(
            rows in proptest::collection::vec(
                (0usize..3, 0u8..3, 0u8..4, 0i64..30, 0i64..30, any::<bool>(), 0i64..10_000, 0u32..60),
                0..60,
            )
        ) {
            let results: Vec<CountResult> = rows
                .iter()
                .map(|&(c, z, who, counted, book, hit, cost, offset)| {
                    let mut r = result(
                        "I", Class::ALL[c], ["Z1", "Z2", "Z3"][z as usize],
                        ["ada", "bruno", "chiara", "dmitri"][who as usize],
                        "2026-03-02", counted, book, hit, cost,
                    );
                    r.day = r.day.checked_add_days(chrono::Days::new(u64::from(offset))).expect("60 days from 2026 is a date");
                    r
                })
                .collect();
            let acc = record_accuracy(&results).unwrap();
            let total = |m: Vec<Ratio>| m.iter().fold((0, 0), |(p, w), r| (p + r.part, w + r.whole));
            let whole = (acc.ira.part, acc.ira.whole);
            prop_assert_eq!(whole.1, results.len() as u64);
            prop_assert_eq!(total(acc.by_class.values().copied().collect()), whole);
            prop_assert_eq!(total(acc.by_zone.values().copied().collect()), whole);
            prop_assert_eq!(total(acc.by_counter.values().copied().collect()), whole);
            prop_assert_eq!(total(acc.by_week.values().copied().collect()), whole);
            prop_assert!(acc.net_adjustment_minor.abs() <= acc.gross_adjustment_minor);
        }
    }
}
