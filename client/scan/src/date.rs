//! GS1 six-digit dates (YYMMDD): the century rule and the "day 00" rule.

use std::fmt;

use serde::{Serialize, Serializer};

use crate::error::Problem;

/// A calendar date read from a GS1 YYMMDD field; serialises as ISO `YYYY-MM-DD`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Date {
    pub year: u16,
    pub month: u8,
    pub day: u8,
}

impl fmt::Display for Date {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{:04}-{:02}-{:02}", self.year, self.month, self.day)
    }
}

impl Serialize for Date {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

/// Returns the number of days in `month` of `year` (Gregorian).
pub fn days_in_month(year: u16, month: u8) -> u8 {
    match month {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        _ if (year.is_multiple_of(4) && !year.is_multiple_of(100)) || year.is_multiple_of(400) => {
            29
        }
        _ => 28,
    }
}

/// Picks the full year for a two-digit `yy`, given the current year (GS1 General
/// Specifications §7.12): a difference of 51..=99 years ahead means the previous century,
/// 50..=99 years behind means the next century, anything else the current century.
pub fn resolve_century(yy: u8, current_year: u16) -> u16 {
    let century = current_year / 100 * 100;
    let diff = i32::from(yy) - i32::from(current_year % 100);
    if (51..=99).contains(&diff) {
        century.saturating_sub(100) + u16::from(yy)
    } else if (-99..=-50).contains(&diff) {
        century + 100 + u16::from(yy)
    } else {
        century + u16::from(yy)
    }
}

/// Reads six ASCII digits `YYMMDD`; day `00` means the last day of that month.
///
/// The caller has already checked that `digits` is six ASCII digits.
pub fn parse_yymmdd(digits: &[u8], current_year: u16) -> Result<Date, Problem> {
    let two = |i: usize| (digits[i] - b'0') * 10 + (digits[i + 1] - b'0');
    let (yy, month, day) = (two(0), two(2), two(4));
    if !(1..=12).contains(&month) {
        return Err(Problem::Month { month });
    }
    let year = resolve_century(yy, current_year);
    let last = days_in_month(year, month);
    if day > last {
        return Err(Problem::Day { year, month, day });
    }
    let day = if day == 0 { last } else { day };
    Ok(Date { year, month, day })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn century_rule_follows_the_sliding_window() {
        // GS1 General Specifications §7.12 (from memory): the window runs from 49 years
        // behind to 50 years ahead of the current year.
        assert_eq!(resolve_century(74, 2024), 2074);
        assert_eq!(resolve_century(75, 2024), 1975);
        assert_eq!(resolve_century(24, 2024), 2024);
        assert_eq!(resolve_century(29, 2080), 2129);
        assert_eq!(resolve_century(30, 2080), 2130);
        assert_eq!(resolve_century(31, 2080), 2031);
        assert_eq!(resolve_century(99, 2000), 1999);
        assert_eq!(resolve_century(50, 2000), 2050);
    }

    #[test]
    fn day_zero_is_the_last_day_of_the_month() {
        // GS1 General Specifications §3.4 (AI 17): DD = 00 means the last day of the
        // month, including 29 February in a leap year (from memory).
        let d = parse_yymmdd(b"240200", 2024).unwrap();
        assert_eq!(d.to_string(), "2024-02-29");
        assert_eq!(
            parse_yymmdd(b"230200", 2024).unwrap().to_string(),
            "2023-02-28"
        );
        assert_eq!(
            parse_yymmdd(b"241200", 2024).unwrap().to_string(),
            "2024-12-31"
        );
    }

    #[test]
    fn impossible_dates_are_refused() {
        assert_eq!(
            parse_yymmdd(b"241301", 2024),
            Err(Problem::Month { month: 13 })
        );
        assert_eq!(
            parse_yymmdd(b"240001", 2024),
            Err(Problem::Month { month: 0 })
        );
        assert_eq!(
            parse_yymmdd(b"230229", 2024),
            Err(Problem::Day {
                year: 2023,
                month: 2,
                day: 29
            })
        );
        assert_eq!(
            parse_yymmdd(b"240431", 2024),
            Err(Problem::Day {
                year: 2024,
                month: 4,
                day: 31
            })
        );
    }
}
