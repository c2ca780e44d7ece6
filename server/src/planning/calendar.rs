//! A site's calendar: which weekdays are worked and which dates are holidays,
//! and the working-day arithmetic the due rule is written in. No I/O.

use chrono::{Datelike, Days, NaiveDate, Weekday};
use serde::{Deserialize, Serialize};
use std::collections::BTreeSet;

/// Most holidays one site may list (a few decades of public holidays).
pub const MAX_HOLIDAYS: usize = 2_000;

/// The working week and the holidays of one site.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Calendar {
    /// Worked weekdays, Monday first.
    pub working_weekdays: [bool; 7],
    pub holidays: BTreeSet<NaiveDate>,
}

impl Default for Calendar {
    /// Returns Monday to Friday with no holidays.
    fn default() -> Self {
        Self {
            working_weekdays: [true, true, true, true, true, false, false],
            holidays: BTreeSet::new(),
        }
    }
}

impl Calendar {
    /// Says whether `day` is a working day.
    pub fn is_working(&self, day: NaiveDate) -> bool {
        self.working_weekdays[day.weekday().num_days_from_monday() as usize]
            && !self.holidays.contains(&day)
    }

    fn worked_per_week(&self) -> i64 {
        self.working_weekdays.iter().filter(|&&w| w).count() as i64
    }

    /// Counts working days `d` with `from < d <= to` (0 when `to <= from`).
    pub fn working_days_between(&self, from: NaiveDate, to: NaiveDate) -> i64 {
        if to <= from {
            return 0;
        }
        let span = (to - from).num_days();
        let weeks = span / 7;
        let mut n = weeks * self.worked_per_week();
        // The remainder is under a week: walk it.
        let mut d = from + chrono::Duration::days(weeks * 7);
        while d < to {
            d = d
                .succ_opt()
                .expect("dates inside chrono's range have a successor");
            if self.working_weekdays[d.weekday().num_days_from_monday() as usize] {
                n += 1;
            }
        }
        let holidays = self
            .holidays
            .range(from.succ_opt().unwrap_or(from)..=to)
            .filter(|h| self.working_weekdays[h.weekday().num_days_from_monday() as usize])
            .count() as i64;
        n - holidays
    }

    /// Counts the working days of `day`'s calendar year.
    pub fn working_days_in_year(&self, day: NaiveDate) -> i64 {
        let y = day.year();
        let first = NaiveDate::from_ymd_opt(y, 1, 1).expect("1 January exists");
        let last = NaiveDate::from_ymd_opt(y, 12, 31).expect("31 December exists");
        self.working_days_between(first, last) + i64::from(self.is_working(first))
    }

    /// Returns the first working day after `day`, or `None` if no weekday is worked.
    pub fn next_working_day(&self, day: NaiveDate) -> Option<NaiveDate> {
        if self.worked_per_week() == 0 {
            return None;
        }
        let mut d = day;
        // Holidays are finite, so a worked weekday is found within their count plus a week.
        for _ in 0..(self.holidays.len() + 8) {
            d = d.checked_add_days(Days::new(1))?;
            if self.is_working(d) {
                return Some(d);
            }
        }
        None
    }

    /// Returns the last working day before `day`, or `None` if no weekday is worked.
    pub fn previous_working_day(&self, day: NaiveDate) -> Option<NaiveDate> {
        if self.worked_per_week() == 0 {
            return None;
        }
        let mut d = day;
        for _ in 0..(self.holidays.len() + 8) {
            d = d.checked_sub_days(Days::new(1))?;
            if self.is_working(d) {
                return Some(d);
            }
        }
        None
    }

    /// Parses weekday names (`mon`, `tue`, ...) into a working week.
    pub fn weekdays_from_names(names: &[String]) -> Result<[bool; 7], String> {
        let mut out = [false; 7];
        for n in names {
            let day: Weekday = n
                .trim()
                .parse()
                .map_err(|_| format!("'{n}' is not a weekday name (mon, tue, ... sun)"))?;
            out[day.num_days_from_monday() as usize] = true;
        }
        Ok(out)
    }

    /// Returns the working week as lowercase three-letter names.
    pub fn weekday_names(&self) -> Vec<String> {
        const NAMES: [&str; 7] = ["mon", "tue", "wed", "thu", "fri", "sat", "sun"];
        (0..7)
            .filter(|&i| self.working_weekdays[i])
            .map(|i| NAMES[i].to_string())
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(y: i32, m: u32, day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, day).unwrap()
    }

    #[test]
    fn a_plain_working_week_has_five_days_and_weekends_do_not_count() {
        let c = Calendar::default();
        // 2026-03-02 is a Monday.
        assert_eq!(c.working_days_between(d(2026, 3, 2), d(2026, 3, 9)), 5);
        assert_eq!(c.working_days_between(d(2026, 3, 6), d(2026, 3, 9)), 1);
        assert_eq!(c.working_days_between(d(2026, 3, 9), d(2026, 3, 9)), 0);
        assert!(!c.is_working(d(2026, 3, 7)));
    }

    #[test]
    fn the_last_working_day_before_a_weekend_or_a_holiday_is_found() {
        let mut c = Calendar::default();
        // 2026-03-07 is a Saturday, 2026-03-09 a Monday (a date fact, no source needed).
        assert_eq!(c.previous_working_day(d(2026, 3, 7)), Some(d(2026, 3, 6)));
        assert_eq!(c.previous_working_day(d(2026, 3, 9)), Some(d(2026, 3, 6)));
        c.holidays.insert(d(2026, 3, 6));
        assert_eq!(c.previous_working_day(d(2026, 3, 8)), Some(d(2026, 3, 5)));
        c.working_weekdays = [false; 7];
        assert_eq!(c.previous_working_day(d(2026, 3, 8)), None);
    }

    #[test]
    fn holidays_are_not_working_days() {
        let mut c = Calendar::default();
        c.holidays.insert(d(2026, 3, 4));
        c.holidays.insert(d(2026, 3, 7)); // a Saturday: already off
        assert_eq!(c.working_days_between(d(2026, 3, 2), d(2026, 3, 9)), 4);
        assert_eq!(c.next_working_day(d(2026, 3, 3)), Some(d(2026, 3, 5)));
    }

    #[test]
    fn the_year_2026_has_261_weekdays() {
        // 2026 starts on a Thursday and is not a leap year: 52 weeks and one Thursday.
        assert_eq!(Calendar::default().working_days_in_year(d(2026, 6, 1)), 261);
    }

    #[test]
    fn counting_by_weeks_agrees_with_walking_day_by_day() {
        let mut c = Calendar {
            working_weekdays: [true, false, true, true, true, true, false],
            holidays: BTreeSet::new(),
        };
        c.holidays
            .extend([d(2026, 1, 1), d(2026, 4, 3), d(2026, 12, 25)]);
        let start = d(2025, 12, 20);
        for len in 0..400 {
            let end = start + chrono::Duration::days(len);
            let mut walked = 0;
            let mut x = start;
            while x < end {
                x = x.succ_opt().unwrap();
                walked += i64::from(c.is_working(x));
            }
            assert_eq!(c.working_days_between(start, end), walked, "len {len}");
        }
    }

    #[test]
    fn weekday_names_round_trip_and_bad_names_are_refused() {
        let w = Calendar::weekdays_from_names(&["mon".into(), "sat".into()]).unwrap();
        let c = Calendar {
            working_weekdays: w,
            holidays: BTreeSet::new(),
        };
        assert_eq!(c.weekday_names(), vec!["mon", "sat"]);
        assert!(Calendar::weekdays_from_names(&["funday".into()]).is_err());
    }
}
