//! Daily demand of one item from its issues: one sample per working day of
//! the window (a day with no picks is a zero), plus any non-working day on
//! which picks were posted all the same (that day was worked). Mean and
//! sample standard deviation come from `stats`. No I/O.

use super::stats;
use crate::planning::calendar::Calendar;
use chrono::{Days, NaiveDate};
use serde::Serialize;
use std::collections::BTreeMap;

/// The demand measured over one window, with the counts behind it.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Demand {
    /// First and last day of the window (both included).
    pub from: NaiveDate,
    pub to: NaiveDate,
    pub calendar_days: u32,
    /// Working days of the site calendar in the window.
    pub working_days: u32,
    /// Non-working days with picks, taken as samples too.
    pub extra_days: u32,
    /// Samples: `working_days + extra_days`.
    pub samples: u32,
    /// Units issued over the window.
    pub issued: i64,
    /// Mean units per sampled day, `d`; `None` with no samples.
    pub mean: Option<f64>,
    /// Sample standard deviation per day, `σd`; `None` with fewer than two samples.
    pub sd: Option<f64>,
    /// Every sample in day order, so the figures can be checked.
    pub daily: Vec<(NaiveDate, i64)>,
}

/// Measures daily demand over `from..=to` from per-day issues (other days are ignored).
pub fn daily_demand(
    calendar: &Calendar,
    from: NaiveDate,
    to: NaiveDate,
    issues: &[(NaiveDate, i64)],
) -> Demand {
    let mut by_day: BTreeMap<NaiveDate, i64> = BTreeMap::new();
    for &(day, qty) in issues {
        if (from..=to).contains(&day) {
            *by_day.entry(day).or_default() += qty;
        }
    }
    let mut daily = Vec::new();
    let (mut calendar_days, mut working_days, mut extra_days) = (0u32, 0u32, 0u32);
    let mut d = from;
    while d <= to {
        calendar_days += 1;
        let issued = by_day.get(&d).copied().unwrap_or(0);
        if calendar.is_working(d) {
            working_days += 1;
            daily.push((d, issued));
        } else if issued != 0 {
            extra_days += 1;
            daily.push((d, issued));
        }
        match d.checked_add_days(Days::new(1)) {
            Some(next) => d = next,
            None => break,
        }
    }
    let values: Vec<f64> = daily.iter().map(|&(_, q)| q as f64).collect();
    let summary = stats::summarize(&values).ok();
    Demand {
        from,
        to,
        calendar_days,
        working_days,
        extra_days,
        samples: working_days + extra_days,
        issued: daily.iter().map(|&(_, q)| q).sum(),
        mean: summary.map(|s| s.mean),
        sd: summary.and_then(|s| s.std_dev()),
        daily,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn day(t: &str) -> NaiveDate {
        t.parse().expect("test dates are valid")
    }

    #[test]
    fn days_without_picks_are_zeros_and_weekends_are_left_out() {
        // Monday 2 March to Sunday 15 March 2026: ten working days (Mon–Fri).
        // Picks: 4 on Mon 2nd, 6 on Wed 4th, 10 on Tue 10th, and 2 on Saturday
        // 14th (a worked Saturday: an extra sample). Samples: 4, 0, 6, 0, 0,
        // 0, 10, 0, 0, 0, 2 → n = 11, Σ = 22, mean 2; Σ(x − 2)² = 4 + 4·7
        // + 16 + 64 + 0 = 112; variance 112 / 10 = 11.2; sd √11.2 = 3.3466…
        let issues = [
            (day("2026-03-02"), 4),
            (day("2026-03-04"), 6),
            (day("2026-03-10"), 10),
            (day("2026-03-14"), 2),
            (day("2026-03-20"), 99), // outside the window
        ];
        let d = daily_demand(
            &Calendar::default(),
            day("2026-03-02"),
            day("2026-03-15"),
            &issues,
        );
        assert_eq!(d.calendar_days, 14);
        assert_eq!(d.working_days, 10);
        assert_eq!(d.extra_days, 1);
        assert_eq!(d.samples, 11);
        assert_eq!(d.issued, 22);
        assert_eq!(d.mean, Some(2.0));
        assert!((d.sd.unwrap() - 11.2f64.sqrt()).abs() < 1e-12);
    }

    #[test]
    fn a_holiday_is_not_a_sample() {
        let mut cal = Calendar::default();
        cal.holidays.insert(day("2026-03-03"));
        let d = daily_demand(&cal, day("2026-03-02"), day("2026-03-04"), &[]);
        assert_eq!(d.working_days, 2);
        assert_eq!(d.mean, Some(0.0));
        assert_eq!(d.sd, Some(0.0));
    }
}
