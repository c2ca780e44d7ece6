//! What counting an item at another interval would do to its buffer: the
//! record-error term is the one part of safety stock that counting buys down.
//! Pure arithmetic; no I/O.
//!
//! ```text
//! σrec(T) = sqrt(a + b·T) · sqrt(k)
//! ```
//!
//! `a + b·T` is the growth fit's error variance of one bin-lot key `T` days
//! after its count (`item_error`), `k` the keys holding the item. Safety stock
//! is held through the whole count cycle, so it has to cover the error at its
//! largest, just before the next count: `T` is the count interval, the same
//! age the interval chooser (`planning::risk`) charges safety stock at. Every
//! other input of the buffer stays as it is, so a row differs from today's
//! buffer by σrec alone, and the row at today's interval is today's buffer.

use super::buffer::{self, Buffer, BufferError, BufferInputs};
use super::item_error::ErrorGrowth;
use serde::Serialize;

/// Intervals every what-if table shows, in calendar days: a week to a year.
pub const SHOWN_DAYS: [u32; 7] = [7, 14, 30, 60, 91, 182, 365];
/// The shown interval the buffer list compares with: about a month.
pub const MONTHLY_DAYS: f64 = 30.0;
/// Longest interval a planner may ask about, in days (two years, as the
/// interval chooser's longest).
pub const MAX_ASKED_DAYS: u32 = 730;

/// Returns σ of one key and σrec of `keys` keys `days` after a count, or `None`
/// without a fit. The buffer and every what-if row take σrec from here.
pub fn record_error_sd(growth: &ErrorGrowth, keys: u32, days: f64) -> Option<(f64, f64)> {
    let per_key = growth.sigma_rec(days)?;
    Some((per_key, per_key * f64::from(keys.max(1)).sqrt()))
}

/// The buffer if the item were counted every `interval_days`, and its change
/// against today's.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, utoipa::ToSchema)]
pub struct IntervalRow {
    /// Calendar days between counts.
    pub interval_days: f64,
    /// This is the item's interval today: its figures are the buffer's.
    pub current: bool,
    /// The planner asked for this interval (`?interval=`).
    pub asked: bool,
    /// σrec at that interval, units.
    pub sigma_rec: f64,
    pub safety_stock: f64,
    pub order_point: f64,
    /// The order point in whole units, rounded up.
    pub order_point_units: i64,
    /// σrec less today's, units.
    pub sigma_rec_change: f64,
    /// Safety stock less today's, units (negative: stock freed).
    pub safety_stock_change: f64,
    /// Whole-unit order point less today's.
    pub order_point_units_change: i64,
    /// The safety stock change at unit cost, minor units.
    pub safety_stock_value_change_minor: f64,
}

/// Computes the buffer at each shown interval, today's and the one asked for,
/// shortest first. `today` must be the buffer computed with σrec at
/// `current_days` (as `accuracy::service` does); `None` without a fit.
pub fn intervals(
    today: &Buffer,
    growth: &ErrorGrowth,
    keys: u32,
    current_days: f64,
    asked_days: Option<u32>,
    unit_cost_minor: i64,
) -> Result<Option<Vec<IntervalRow>>, BufferError> {
    let mut days: Vec<(f64, bool)> = SHOWN_DAYS
        .iter()
        .chain(asked_days.as_ref())
        .map(|&d| (f64::from(d), asked_days == Some(d)))
        .collect();
    days.push((current_days, false));
    days.sort_by(|x, y| x.0.total_cmp(&y.0));
    days.dedup_by(|later, first| {
        let same = later.0 == first.0;
        if same {
            first.1 |= later.1;
        }
        same
    });
    let mut rows = Vec::with_capacity(days.len());
    for (t, asked) in days {
        let Some((_, sigma_rec)) = record_error_sd(growth, keys, t) else {
            return Ok(None);
        };
        let b = buffer::buffer(BufferInputs {
            record_error_sd: sigma_rec,
            ..today.inputs
        })?;
        let safety_stock_change = b.safety_stock - today.safety_stock;
        rows.push(IntervalRow {
            interval_days: t,
            current: t == current_days,
            asked,
            sigma_rec,
            safety_stock: b.safety_stock,
            order_point: b.order_point,
            order_point_units: b.order_point_units,
            sigma_rec_change: sigma_rec - today.inputs.record_error_sd,
            safety_stock_change,
            order_point_units_change: b.order_point_units - today.order_point_units,
            safety_stock_value_change_minor: safety_stock_change * unit_cost_minor as f64,
        });
    }
    Ok(Some(rows))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::accuracy::item_error::{GrowthFit, Shortfall};
    use proptest::prelude::*;

    fn growth(a: f64, b: f64) -> ErrorGrowth {
        ErrorGrowth {
            points: 12,
            fit: GrowthFit::Fitted { a, b },
        }
    }

    fn inputs(rec: f64) -> BufferInputs {
        BufferInputs {
            service_level: 0.95,
            demand_per_day: 10.0,
            demand_sd_per_day: 3.0,
            lead_time_days: 5.0,
            lead_time_sd_days: 1.0,
            review_days: 2.0,
            record_error_sd: rec,
        }
    }

    /// Today's buffer as the service builds it: σrec at `current` days.
    fn today(g: &ErrorGrowth, keys: u32, current: f64) -> Buffer {
        let (_, rec) = record_error_sd(g, keys, current).unwrap();
        buffer::buffer(inputs(rec)).unwrap()
    }

    #[test]
    fn a_case_worked_by_hand() {
        // a = 1, b = 0.5, 4 keys. At T = 30: sqrt(1 + 15) · sqrt(4) = 4 · 2 = 8;
        // at T = 14: sqrt(8) · 2 = 5.656854. The other terms as in
        // accuracy/buffer.rs's hand case: 63 + 100 = 163; with σrec² = 64 the
        // total is 227, with 32 it is 195. z(0.95) = 1.644854 (normal table):
        // SS(30) = 1.644854 · sqrt(227) = 24.782219, SS(14) = 1.644854 ·
        // sqrt(195) = 22.969131, 1.813088 less; cycle stock 70, so OP 94.78 → 95
        // and 92.97 → 93.
        let g = growth(1.0, 0.5);
        let t = today(&g, 4, 30.0);
        assert_eq!(t.inputs.record_error_sd, 8.0);
        let rows = intervals(&t, &g, 4, 30.0, Some(45), 250).unwrap().unwrap();
        let days: Vec<f64> = rows.iter().map(|r| r.interval_days).collect();
        assert_eq!(days, [7.0, 14.0, 30.0, 45.0, 60.0, 91.0, 182.0, 365.0]);
        let at = |d: f64| rows.iter().find(|r| r.interval_days == d).unwrap();
        let now = at(30.0);
        assert!(now.current && !now.asked);
        assert_eq!(now.sigma_rec, 8.0);
        assert!((now.safety_stock - 1.644_853_626_951_471_5 * 227f64.sqrt()).abs() < 1e-12);
        assert_eq!(now.order_point_units, 95);
        let two_weeks = at(14.0);
        assert!((two_weeks.sigma_rec - 32f64.sqrt()).abs() < 1e-12);
        let freed = 1.644_853_626_951_471_5 * (195f64.sqrt() - 227f64.sqrt());
        assert!((two_weeks.safety_stock_change - freed).abs() < 1e-12);
        assert!((two_weeks.safety_stock_change + 1.813_088).abs() < 1e-6);
        assert_eq!(two_weeks.order_point_units, 93);
        assert_eq!(two_weeks.order_point_units_change, -2);
        assert!((two_weeks.safety_stock_value_change_minor - 250.0 * freed).abs() < 1e-9);
        assert!(at(45.0).asked && !at(45.0).current);
        assert_eq!(rows.iter().filter(|r| r.current).count(), 1);
    }

    #[test]
    fn at_todays_interval_the_row_is_todays_buffer_exactly() {
        // 365/12 days: a class counted monthly, not one of the shown intervals.
        let current = 365.0 / 12.0;
        let g = growth(2.5, 0.37);
        let t = today(&g, 3, current);
        let rows = intervals(&t, &g, 3, current, None, 1).unwrap().unwrap();
        assert_eq!(rows.len(), SHOWN_DAYS.len() + 1);
        let now = rows.iter().find(|r| r.current).unwrap();
        assert_eq!(now.interval_days, current);
        assert_eq!(now.sigma_rec, t.inputs.record_error_sd);
        assert_eq!(now.safety_stock, t.safety_stock);
        assert_eq!(now.order_point, t.order_point);
        assert_eq!(now.order_point_units, t.order_point_units);
        assert_eq!((now.sigma_rec_change, now.safety_stock_change), (0.0, 0.0));
        assert_eq!(now.order_point_units_change, 0);
    }

    #[test]
    fn an_interval_shown_anyway_is_marked_not_repeated() {
        let g = growth(1.0, 1.0);
        let t = today(&g, 1, 91.0);
        let rows = intervals(&t, &g, 1, 91.0, Some(91), 0).unwrap().unwrap();
        assert_eq!(rows.len(), SHOWN_DAYS.len());
        let r = rows.iter().find(|r| r.interval_days == 91.0).unwrap();
        assert!(r.current && r.asked);
    }

    #[test]
    fn without_a_fit_nothing_is_invented() {
        let none = ErrorGrowth {
            points: 3,
            fit: GrowthFit::NotEnoughData(Shortfall::TooFewPoints { needed: 8 }),
        };
        assert_eq!(record_error_sd(&none, 2, 30.0), None);
        let t = buffer::buffer(inputs(0.0)).unwrap();
        assert_eq!(intervals(&t, &none, 2, 30.0, Some(7), 100), Ok(None));
    }

    proptest! {
        #[test]
        fn a_longer_interval_never_lowers_sigma_rec_or_safety_stock(
            a in 0.0f64..1e4, b in 0.0f64..1e3, keys in 1u32..50,
            current in 1.0f64..730.0, asked in 1u32..=MAX_ASKED_DAYS,
            p in 0.5f64..0.9999,
        ) {
            let g = growth(a, b);
            let (_, rec) = record_error_sd(&g, keys, current).unwrap();
            let t = buffer::buffer(BufferInputs { service_level: p, ..inputs(rec) }).unwrap();
            let rows = intervals(&t, &g, keys, current, Some(asked), 100).unwrap().unwrap();
            for w in rows.windows(2) {
                prop_assert!(w[0].interval_days < w[1].interval_days);
                prop_assert!(w[0].sigma_rec <= w[1].sigma_rec);
                prop_assert!(w[0].safety_stock <= w[1].safety_stock);
                prop_assert!(w[0].order_point_units <= w[1].order_point_units);
            }
            let now: Vec<_> = rows.iter().filter(|r| r.current).collect();
            prop_assert_eq!(now.len(), 1);
            prop_assert_eq!(now[0].safety_stock, t.safety_stock);
            for r in &rows {
                // Shorter than today frees stock, longer holds more.
                prop_assert_eq!(r.safety_stock_change <= 0.0, r.interval_days <= current
                    || r.safety_stock_change == 0.0);
            }
        }
    }
}
