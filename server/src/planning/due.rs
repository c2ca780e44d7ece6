//! The due rule: counts per year per class become an interval in working
//! days, and an item is due when the working days since its last count reach
//! that interval. Items never counted are due. No I/O.

use super::abc::Class;
use serde::{Deserialize, Serialize};
use std::cmp::Ordering;

/// Most counts per year a class may ask for (every working day, roughly).
pub const MAX_PER_YEAR: u32 = 366;

/// How often each class is counted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct Frequency {
    /// Counts per year for A, B and C.
    pub per_year: [u32; 3],
    /// Counts per year of dead stock: no stock and no movement for a year.
    pub dead_per_year: u32,
}

impl Default for Frequency {
    /// Returns 12 / 4 / 1 counts a year, dead stock once (common practice, no source).
    fn default() -> Self {
        Self {
            per_year: [12, 4, 1],
            dead_per_year: 1,
        }
    }
}

impl Frequency {
    /// Checks every frequency is between 1 and [`MAX_PER_YEAR`].
    pub fn check(&self) -> Result<(), String> {
        let all = self
            .per_year
            .iter()
            .chain(std::iter::once(&self.dead_per_year));
        if all.into_iter().any(|&f| f == 0 || f > MAX_PER_YEAR) {
            return Err(format!("counts per year must be 1 to {MAX_PER_YEAR}"));
        }
        Ok(())
    }

    /// Returns the interval, in working days, of a class (or of dead stock).
    pub fn interval(&self, class: Class, dead: bool, working_days_per_year: i64) -> i64 {
        let f = if dead {
            self.dead_per_year
        } else {
            self.per_year[class.index()]
        };
        interval_days(working_days_per_year, f)
    }
}

/// Returns `working_days_per_year / per_year` rounded to the nearest day, at least 1.
pub fn interval_days(working_days_per_year: i64, per_year: u32) -> i64 {
    let f = i64::from(per_year.max(1));
    ((2 * working_days_per_year + f) / (2 * f)).max(1)
}

/// How overdue a due item is: working days since its last count over its
/// interval. Ordered by that ratio, compared exactly in integers.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Overdue {
    pub days: i64,
    pub interval: i64,
    pub never_counted: bool,
}

impl Overdue {
    /// Applies the due rule: `None` when not due. A never-counted item is due,
    /// and as overdue as the working days since counting began on the site
    /// (at least its interval), so it ages like any other and is not
    /// starved by items that were counted once and are late again.
    pub fn of(
        since_last_count: Option<i64>,
        since_counting_began: i64,
        interval: i64,
    ) -> Option<Self> {
        match since_last_count {
            None => Some(Self {
                days: since_counting_began.max(interval),
                interval,
                never_counted: true,
            }),
            Some(d) if d >= interval => Some(Self {
                days: d,
                interval,
                never_counted: false,
            }),
            Some(_) => None,
        }
    }

    /// Compares how overdue two items are relative to their intervals.
    pub fn cmp_ratio(&self, other: &Self) -> Ordering {
        (i128::from(self.days) * i128::from(other.interval))
            .cmp(&(i128::from(other.days) * i128::from(self.interval)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn intervals_round_to_the_nearest_working_day() {
        // 240 working days: 12 a year is every 20 days, 4 every 60, 2 every 120.
        assert_eq!(interval_days(240, 12), 20);
        assert_eq!(interval_days(240, 4), 60);
        assert_eq!(interval_days(240, 2), 120);
        // 261 working days (a Monday-to-Friday year): 21.75 rounds to 22.
        assert_eq!(interval_days(261, 12), 22);
        assert_eq!(interval_days(5, 12), 1);
    }

    #[test]
    fn an_item_is_due_when_its_days_reach_its_interval() {
        assert_eq!(Overdue::of(Some(19), 0, 20), None);
        assert!(Overdue::of(Some(20), 0, 20).is_some());
        let never = Overdue::of(None, 0, 20).unwrap();
        assert!(never.never_counted && never.days == 20);
        assert_eq!(Overdue::of(None, 50, 20).unwrap().days, 50);
    }

    #[test]
    fn overdue_compares_relative_to_the_interval() {
        let a = Overdue::of(Some(30), 0, 20).unwrap(); // 1.5 intervals
        let c = Overdue::of(Some(250), 0, 250).unwrap(); // 1.0 interval
        assert_eq!(a.cmp_ratio(&c), Ordering::Greater);
        let same = Overdue::of(Some(40), 0, 40).unwrap();
        assert_eq!(c.cmp_ratio(&same), Ordering::Equal);
    }

    #[test]
    fn dead_stock_uses_its_own_frequency() {
        let f = Frequency {
            per_year: [12, 4, 2],
            dead_per_year: 1,
        };
        assert_eq!(f.interval(Class::C, false, 240), 120);
        assert_eq!(f.interval(Class::C, true, 240), 240);
    }
}
