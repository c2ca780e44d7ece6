//! The ranges every date, instant, amount of money and timing must fall in.
//! Days and instants lie in 2000-01-01 ..= 2100-12-31 (UTC): wide enough for
//! any stock record a site keeps, narrow enough that day arithmetic and
//! millisecond sums stay far from overflow. Money and timings have maxima
//! chosen so that every product the server forms (variance × unit cost,
//! value × 100 for percentages, lag + uncertainty + an instant) fits `i64`.

use crate::time::Timestamp;
use chrono::NaiveDate;

/// First day any date parameter or field may name.
pub const FIRST_DAY: NaiveDate = NaiveDate::from_ymd_opt(2000, 1, 1).expect("a real date");
/// Last day any date parameter or field may name.
pub const LAST_DAY: NaiveDate = NaiveDate::from_ymd_opt(2100, 12, 31).expect("a real date");
/// First instant accepted: 2000-01-01T00:00:00Z, in ms since 1970.
pub const FIRST_INSTANT_MS: i64 = 946_684_800_000;
/// Last instant accepted: 2100-12-31T23:59:59.999Z, in ms since 1970.
pub const LAST_INSTANT_MS: i64 = 4_133_980_799_999;

/// Largest unit cost, in minor units per base unit (10,000,000.00 in a currency of
/// cents): times the largest quantity the ledger takes (10⁹) it stays below 2⁶³.
pub const MAX_UNIT_COST_MINOR: i64 = 1_000_000_000;
/// Largest money limit (tolerance value, review thresholds), in minor units.
pub const MAX_MONEY_MINOR: i64 = 1_000_000_000_000_000;
/// Longest timing of a movement source (clock uncertainty, posting lag): 30 days in ms.
pub const MAX_SOURCE_TIMING_MS: i64 = 30 * 24 * 60 * 60 * 1000;
/// Longest time one bin or one line may be estimated to take: a day, in seconds.
pub const MAX_TASK_SECONDS: u32 = 24 * 60 * 60;

/// Checks that `day` lies in [`FIRST_DAY`] ..= [`LAST_DAY`].
pub fn check_day(day: NaiveDate) -> Result<NaiveDate, String> {
    if (FIRST_DAY..=LAST_DAY).contains(&day) {
        Ok(day)
    } else {
        Err(format!(
            "{day} is outside the days Cairn accepts ({FIRST_DAY} to {LAST_DAY})"
        ))
    }
}

/// Parses a `YYYY-MM-DD` day and checks its range.
pub fn day(text: &str) -> Result<NaiveDate, String> {
    let d = NaiveDate::parse_from_str(text.trim(), "%Y-%m-%d")
        .map_err(|_| format!("'{text}' is not a date: use YYYY-MM-DD, e.g. 2026-03-02"))?;
    check_day(d)
}

/// Checks that `t` lies in [`FIRST_INSTANT_MS`] ..= [`LAST_INSTANT_MS`].
pub fn check_instant(t: Timestamp) -> Result<Timestamp, String> {
    if (FIRST_INSTANT_MS..=LAST_INSTANT_MS).contains(&t.0) {
        Ok(t)
    } else {
        Err(format!(
            "{} is outside the instants Cairn accepts ({FIRST_DAY} to {LAST_DAY}, UTC)",
            t.0
        ))
    }
}

/// Parses an RFC 3339 instant and checks its range.
pub fn instant(text: &str) -> Result<Timestamp, String> {
    let t = Timestamp::parse_rfc3339(text)?;
    check_instant(t).map_err(|_| {
        format!(
            "'{}' is outside the instants Cairn accepts ({FIRST_DAY} to {LAST_DAY}, UTC)",
            text.trim()
        )
    })
}

/// Checks an integer against `0 ..= max`, naming `field` and the unit.
pub fn check_at_most(field: &str, value: i64, max: i64, unit: &str) -> Result<i64, String> {
    if (0..=max).contains(&value) {
        Ok(value)
    } else {
        Err(format!("{field} must be 0 to {max} {unit}, found {value}"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_instant_limits_are_the_day_limits() {
        assert_eq!(
            Timestamp::parse_rfc3339("2000-01-01T00:00:00Z").unwrap().0,
            FIRST_INSTANT_MS
        );
        assert_eq!(
            Timestamp::parse_rfc3339("2100-12-31T23:59:59.999Z")
                .unwrap()
                .0,
            LAST_INSTANT_MS
        );
    }

    #[test]
    fn days_at_the_edges_pass_and_beyond_them_are_refused() {
        assert!(day("2000-01-01").is_ok());
        assert!(day("2100-12-31").is_ok());
        for d in ["0001-01-01", "1999-12-31", "2101-01-01", "9999-12-31"] {
            let e = day(d).unwrap_err();
            assert!(e.contains("2000-01-01 to 2100-12-31"), "{d}: {e}");
        }
        assert!(day("2026-02-30").unwrap_err().contains("not a date"));
    }

    #[test]
    fn instants_beyond_the_range_are_refused() {
        assert!(instant("2026-03-01T08:15:00+01:00").is_ok());
        assert!(instant("9999-12-31T00:00:00Z").is_err());
        assert!(instant("1970-01-01T00:00:01Z").is_err());
        assert!(check_instant(Timestamp(i64::MAX)).is_err());
    }

    #[test]
    fn the_money_and_timing_maxima_leave_room_for_the_arithmetic() {
        // Value of a variance: |variance| ≤ 10⁹ (ledger::MAX_ABS_QTY) times the unit cost.
        assert!(
            crate::ledger::MAX_ABS_QTY
                .checked_mul(MAX_UNIT_COST_MINOR)
                .is_some()
        );
        // Thresholds are compared as percentages (× 100) and summed.
        assert!(
            MAX_MONEY_MINOR
                .checked_mul(100)
                .and_then(|v| v.checked_mul(2))
                .is_some()
        );
        // A settling instant: the last instant plus lag plus uncertainty.
        assert!(
            LAST_INSTANT_MS
                .checked_add(3 * MAX_SOURCE_TIMING_MS)
                .is_some()
        );
        assert!(check_at_most("lag_ms", i64::MAX, MAX_SOURCE_TIMING_MS, "ms").is_err());
        assert!(check_at_most("lag_ms", -1, MAX_SOURCE_TIMING_MS, "ms").is_err());
    }
}
