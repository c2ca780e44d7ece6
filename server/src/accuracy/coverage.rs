//! When an A item fell due in a period and whether it was counted by then,
//! as the coverage figure needs it. An item falls due `interval` working
//! days after its last count; one never counted before the period is taken
//! as counted the day before it starts, so its first due day lies one
//! interval into the period (the plan spreads such items over an interval).
//! After each count the next due day follows from it. No I/O.

use super::metrics::DueItem;
use crate::planning::calendar::Calendar;
use chrono::{Days, NaiveDate};

/// Most due days one item may have in one period (daily counts for ten years).
pub const MAX_DUE_PER_ITEM: usize = 3_660;

/// Returns the working day `n` working days after `day`, if the calendar has any.
pub fn add_working_days(calendar: &Calendar, day: NaiveDate, n: i64) -> Option<NaiveDate> {
    let mut d = day;
    for _ in 0..n.max(0) {
        d = calendar.next_working_day(d)?;
    }
    Some(d)
}

/// Lists each time `item` fell due in `since..=until` (or was already overdue
/// at its start) and the first count after the previous one, if made by `until`.
pub fn due_items(
    calendar: &Calendar,
    item: &str,
    interval: i64,
    last_before: Option<NaiveDate>,
    counts_in_period: &[NaiveDate],
    since: NaiveDate,
    until: NaiveDate,
) -> Vec<DueItem> {
    let mut counts: Vec<NaiveDate> = counts_in_period
        .iter()
        .copied()
        .filter(|d| (since..=until).contains(d))
        .collect();
    counts.sort();
    let mut last = match last_before {
        Some(d) => d,
        None => match since.checked_sub_days(Days::new(1)) {
            Some(d) => d,
            None => return Vec::new(),
        },
    };
    let mut out = Vec::new();
    for _ in 0..MAX_DUE_PER_ITEM {
        let Some(due_by) = add_working_days(calendar, last, interval) else {
            break;
        };
        if due_by > until {
            break;
        }
        let counted_on = counts.iter().copied().find(|&c| c > last);
        out.push(DueItem {
            item: item.to_string(),
            due_by,
            counted_on,
        });
        match counted_on {
            Some(c) => last = c,
            None => break,
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn day(t: &str) -> NaiveDate {
        t.parse().expect("test dates are valid")
    }

    #[test]
    fn an_item_falls_due_after_its_interval_and_again_after_each_count() {
        let cal = Calendar::default();
        // Last counted Friday 27 Feb 2026, interval 5 working days: due Friday
        // 6 March. Counted Thursday 5 March (on time): next due Thursday 12
        // March; counted Friday 13 March (late): next due Friday 20 March,
        // after the period's end (Sunday 15 March).
        let due = due_items(
            &cal,
            "I1",
            5,
            Some(day("2026-02-27")),
            &[day("2026-03-05"), day("2026-03-13")],
            day("2026-03-02"),
            day("2026-03-15"),
        );
        let got: Vec<_> = due.iter().map(|d| (d.due_by, d.counted_on)).collect();
        assert_eq!(
            got,
            [
                (day("2026-03-06"), Some(day("2026-03-05"))),
                (day("2026-03-12"), Some(day("2026-03-13"))),
            ]
        );
    }

    #[test]
    fn a_never_counted_item_is_due_one_interval_into_the_period() {
        let cal = Calendar::default();
        // Period from Monday 2 March; "counted" Sunday 1 March; 5 working days
        // on: Friday 6 March. Not counted: one due day, missed.
        let due = due_items(
            &cal,
            "I2",
            5,
            None,
            &[],
            day("2026-03-02"),
            day("2026-03-31"),
        );
        assert_eq!(due.len(), 1);
        assert_eq!(due[0].due_by, day("2026-03-06"));
        assert_eq!(due[0].counted_on, None);
        // An item overdue when the period starts is still due in it.
        let due = due_items(
            &cal,
            "I3",
            5,
            Some(day("2026-01-05")),
            &[day("2026-03-03")],
            day("2026-03-02"),
            day("2026-03-04"),
        );
        assert_eq!(due[0].due_by, day("2026-01-12"));
        assert_eq!(due[0].counted_on, Some(day("2026-03-03")));
    }
}
