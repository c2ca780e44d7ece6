//! The planner's buffer: safety stock and order point with record error as one
//! more source of variance, every term kept so a page can show the working.
//!
//! ```text
//! z   = Φ⁻¹(service level)                    standard normal quantile
//! SS  = z · sqrt((L + R)·σd² + d²·σL² + σrec²)
//! OP  = d·(L + R) + SS
//! ```
//!
//! `d` and `σd` are the mean and standard deviation of demand per day, `L` and
//! `σL` the mean and standard deviation of the lead time in days, `R` the
//! review period in days (0 for continuous review) and `σrec` the standard
//! deviation of the record error in units: the book may be off by that much
//! when the order point is checked. The three variances add because the
//! three sources are taken as independent. Any time unit works if all four
//! time figures use it; the names say days because the planner's do.
//! Pure arithmetic; no I/O.

use serde::Serialize;
use statrs::distribution::{ContinuousCDF, Normal};
use std::fmt;

/// Longest lead time, review period or lead-time deviation accepted: ten years.
pub const MAX_DAYS: f64 = 3660.0;
/// Largest mean or standard deviation of demand per day accepted, in units.
pub const MAX_UNITS_PER_DAY: f64 = 1e9;
/// Largest record-error standard deviation accepted, in units.
pub const MAX_UNITS: f64 = 1e12;

/// One input of the buffer, named as a planner would.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Input {
    ServiceLevel,
    DemandPerDay,
    DemandSdPerDay,
    LeadTimeDays,
    LeadTimeSdDays,
    ReviewDays,
    RecordErrorSd,
}

impl fmt::Display for Input {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Input::ServiceLevel => "service level",
            Input::DemandPerDay => "mean demand per day",
            Input::DemandSdPerDay => "standard deviation of demand per day",
            Input::LeadTimeDays => "lead time (days)",
            Input::LeadTimeSdDays => "standard deviation of lead time (days)",
            Input::ReviewDays => "review period (days)",
            Input::RecordErrorSd => "standard deviation of record error (units)",
        })
    }
}

/// Why a buffer cannot be computed: which input, and what is wrong with it.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum BufferError {
    #[error("{input} is not a finite number")]
    NotFinite { input: Input },
    #[error("service level {value} must lie strictly between 0 and 1 (for example 0.95)")]
    ServiceLevel { value: f64 },
    #[error("{input} is {value}; it cannot be negative")]
    Negative { input: Input, value: f64 },
    #[error("{input} is {value}; at most {max} is accepted")]
    TooLarge { input: Input, value: f64, max: f64 },
}

/// What the planner supplies for one item.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, utoipa::ToSchema)]
pub struct BufferInputs {
    /// Chance of not running out in a replenishment cycle, in (0, 1).
    pub service_level: f64,
    /// Mean demand per day, `d`.
    pub demand_per_day: f64,
    /// Standard deviation of demand per day, `σd`.
    pub demand_sd_per_day: f64,
    /// Mean lead time in days, `L`.
    pub lead_time_days: f64,
    /// Standard deviation of the lead time in days, `σL`.
    pub lead_time_sd_days: f64,
    /// Review period in days, `R`; 0 for continuous review.
    pub review_days: f64,
    /// Standard deviation of the record error in units, `σrec`.
    pub record_error_sd: f64,
}

/// Every step from the inputs to the order point.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Buffer {
    /// The inputs the figures were computed from.
    pub inputs: BufferInputs,
    /// Standard normal quantile of the service level.
    pub z: f64,
    /// Days of demand the buffer must cover, `L + R`.
    pub exposure_days: f64,
    /// Variance from demand, `(L + R)·σd²`.
    pub demand_variance: f64,
    /// Variance from the lead time, `d²·σL²`.
    pub lead_time_variance: f64,
    /// Variance from the record error, `σrec²`.
    pub record_variance: f64,
    /// The sum of the three variances.
    pub total_variance: f64,
    /// Its square root: the standard deviation of demand over the exposure.
    pub combined_sd: f64,
    /// Safety stock, `z · combined_sd`.
    pub safety_stock: f64,
    /// Expected demand over the exposure, `d·(L + R)`.
    pub cycle_stock: f64,
    /// Order point, `cycle_stock + safety_stock`.
    pub order_point: f64,
    /// The order point in whole units, rounded up.
    pub order_point_units: i64,
}

/// Returns the standard normal quantile for a service level in (0, 1).
pub fn z_for_service_level(service_level: f64) -> Result<f64, BufferError> {
    if !service_level.is_finite() {
        return Err(BufferError::NotFinite {
            input: Input::ServiceLevel,
        });
    }
    if service_level <= 0.0 || service_level >= 1.0 {
        return Err(BufferError::ServiceLevel {
            value: service_level,
        });
    }
    Ok(Normal::standard().inverse_cdf(service_level))
}

/// Computes safety stock and order point, keeping every intermediate term.
///
/// A service level below 0.5 gives a negative z and so a buffer below the
/// cycle stock; that is the arithmetic, and it is left to the planner.
pub fn buffer(inputs: BufferInputs) -> Result<Buffer, BufferError> {
    let z = z_for_service_level(inputs.service_level)?;
    check(
        inputs.demand_per_day,
        Input::DemandPerDay,
        MAX_UNITS_PER_DAY,
    )?;
    check(
        inputs.demand_sd_per_day,
        Input::DemandSdPerDay,
        MAX_UNITS_PER_DAY,
    )?;
    check(inputs.lead_time_days, Input::LeadTimeDays, MAX_DAYS)?;
    check(inputs.lead_time_sd_days, Input::LeadTimeSdDays, MAX_DAYS)?;
    check(inputs.review_days, Input::ReviewDays, MAX_DAYS)?;
    check(inputs.record_error_sd, Input::RecordErrorSd, MAX_UNITS)?;

    let d = inputs.demand_per_day;
    let exposure_days = inputs.lead_time_days + inputs.review_days;
    let demand_variance = exposure_days * inputs.demand_sd_per_day.powi(2);
    let lead_time_variance = d.powi(2) * inputs.lead_time_sd_days.powi(2);
    let record_variance = inputs.record_error_sd.powi(2);
    let total_variance = demand_variance + lead_time_variance + record_variance;
    let combined_sd = total_variance.sqrt();
    let safety_stock = z * combined_sd;
    let cycle_stock = d * exposure_days;
    let order_point = cycle_stock + safety_stock;
    // The limits keep |order_point| below about 1e13, far inside i64.
    let order_point_units = order_point.ceil() as i64;
    Ok(Buffer {
        inputs,
        z,
        exposure_days,
        demand_variance,
        lead_time_variance,
        record_variance,
        total_variance,
        combined_sd,
        safety_stock,
        cycle_stock,
        order_point,
        order_point_units,
    })
}

fn check(value: f64, input: Input, max: f64) -> Result<(), BufferError> {
    if !value.is_finite() {
        Err(BufferError::NotFinite { input })
    } else if value < 0.0 {
        Err(BufferError::Negative { input, value })
    } else if value > max {
        Err(BufferError::TooLarge { input, value, max })
    } else {
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn inputs(p: f64, d: f64, sd: f64, l: f64, sl: f64, r: f64, rec: f64) -> BufferInputs {
        BufferInputs {
            service_level: p,
            demand_per_day: d,
            demand_sd_per_day: sd,
            lead_time_days: l,
            lead_time_sd_days: sl,
            review_days: r,
            record_error_sd: rec,
        }
    }

    /// The classic safety stock, written out independently of `buffer`:
    /// `z · sqrt(T·σd² + d²·σL²)` over an exposure of `T` days.
    fn classic(z: f64, d: f64, sd: f64, t: f64, sl: f64) -> f64 {
        z * (t * sd * sd + d * d * sl * sl).sqrt()
    }

    #[test]
    fn z_matches_the_standard_normal_table() {
        // Standard normal quantiles to six decimals as printed in standard
        // normal tables (values from memory, confirmed against Python's
        // statistics.NormalDist().inv_cdf as a reference library).
        let table = [
            (0.90, 1.281552),
            (0.95, 1.644854),
            (0.975, 1.959964),
            (0.99, 2.326348),
            (0.995, 2.575829),
            (0.999, 3.090232),
        ];
        for (p, z) in table {
            let got = z_for_service_level(p).unwrap();
            assert!((got - z).abs() < 1e-6, "z({p}) = {got}, table {z}");
            let mirror = z_for_service_level(1.0 - p).unwrap();
            assert!((mirror + z).abs() < 1e-6, "z({}) = {mirror}", 1.0 - p);
        }
        assert!(z_for_service_level(0.5).unwrap().abs() < 1e-15);
        // The same quantiles to 16 digits from Python's
        // statistics.NormalDist().inv_cdf (a reference library, run by hand).
        let reference = [
            (0.90, 1.2815515655446008),
            (0.95, 1.6448536269514715),
            (0.975, 1.9599639845400536),
            (0.99, 2.3263478740408408),
            (0.995, 2.5758293035489),
        ];
        for (p, z) in reference {
            let got = z_for_service_level(p).unwrap();
            assert!((got - z).abs() < 1e-12, "z({p}) = {got}, reference {z}");
        }
    }

    #[test]
    fn a_textbook_example_with_demand_uncertainty_only() {
        // Chopra & Meindl, "Supply Chain Management: Strategy, Planning, and
        // Operation", safety inventory chapter, continuous review example
        // (from memory): weekly demand 2,500 boxes, sd 500, lead time 2 weeks,
        // CSL 0.90. σ over the lead time = √2·500 = 707.1; ss = 1.2816·707.1
        // ≈ 906 boxes; ROP = 2·2,500 + 906 = 5,906. Weeks stand in for days.
        let b = buffer(inputs(0.90, 2500.0, 500.0, 2.0, 0.0, 0.0, 0.0)).unwrap();
        assert!((b.combined_sd - 707.1).abs() < 0.05, "{}", b.combined_sd);
        assert_eq!(b.safety_stock.round(), 906.0);
        assert_eq!(b.cycle_stock, 5000.0);
        assert_eq!(b.order_point.round(), 5906.0);
    }

    #[test]
    fn a_textbook_example_with_lead_time_uncertainty() {
        // Chopra & Meindl, same chapter, the example with uncertain lead time
        // (from memory): daily demand 2,500, sd 500, lead time 7 days with sd
        // 7 days, CSL 0.90. σ = √(7·500² + 2,500²·7²) = √308,000,000 ≈ 17,550;
        // ss = 1.2816 × 17,550 ≈ 22,491.
        let b = buffer(inputs(0.90, 2500.0, 500.0, 7.0, 7.0, 0.0, 0.0)).unwrap();
        assert_eq!(b.demand_variance, 1_750_000.0);
        assert_eq!(b.lead_time_variance, 306_250_000.0);
        assert_eq!(b.total_variance, 308_000_000.0);
        assert_eq!(b.combined_sd.round(), 17_550.0);
        assert_eq!(b.safety_stock.round(), 22_491.0);
    }

    #[test]
    fn every_term_is_shown_and_adds_up() {
        // Worked by hand: z(0.95) = 1.644854 (normal table); L + R = 5 + 2 = 7;
        // 7·3² = 63; 10²·1² = 100; 4² = 16; total 179; √179 = 13.379088;
        // SS = 22.006642; cycle stock 70; order point 92.006642 → 93 units.
        let b = buffer(inputs(0.95, 10.0, 3.0, 5.0, 1.0, 2.0, 4.0)).unwrap();
        assert_eq!(b.exposure_days, 7.0);
        assert_eq!(b.demand_variance, 63.0);
        assert_eq!(b.lead_time_variance, 100.0);
        assert_eq!(b.record_variance, 16.0);
        assert_eq!(b.total_variance, 179.0);
        assert!((b.combined_sd - 13.379088).abs() < 1e-6);
        assert!(
            (b.safety_stock - 22.006642).abs() < 1e-6,
            "{}",
            b.safety_stock
        );
        assert_eq!(b.cycle_stock, 70.0);
        assert!((b.order_point - 92.006642).abs() < 1e-6);
        assert_eq!(b.order_point_units, 93);
    }

    #[test]
    fn bad_inputs_say_which_and_why() {
        let good = inputs(0.95, 10.0, 3.0, 5.0, 1.0, 2.0, 4.0);
        for p in [0.0, 1.0, -0.2, 1.5] {
            let bad = BufferInputs {
                service_level: p,
                ..good
            };
            assert_eq!(buffer(bad), Err(BufferError::ServiceLevel { value: p }));
        }
        let nan = BufferInputs {
            service_level: f64::NAN,
            ..good
        };
        assert_eq!(
            buffer(nan),
            Err(BufferError::NotFinite {
                input: Input::ServiceLevel
            })
        );
        let negative = BufferInputs {
            lead_time_sd_days: -1.0,
            ..good
        };
        let err = buffer(negative).unwrap_err();
        assert_eq!(
            err,
            BufferError::Negative {
                input: Input::LeadTimeSdDays,
                value: -1.0
            }
        );
        assert_eq!(
            err.to_string(),
            "standard deviation of lead time (days) is -1; it cannot be negative"
        );
        let long = BufferInputs {
            review_days: 4000.0,
            ..good
        };
        assert!(matches!(
            buffer(long),
            Err(BufferError::TooLarge {
                input: Input::ReviewDays,
                ..
            })
        ));
        let inf = BufferInputs {
            record_error_sd: f64::INFINITY,
            ..good
        };
        assert_eq!(
            buffer(inf),
            Err(BufferError::NotFinite {
                input: Input::RecordErrorSd
            })
        );
    }

    proptest! {
        #[test]
        fn without_record_error_it_is_the_classic_formula(
            p in 0.5f64..0.9999, d in 0.0f64..1e6, sd in 0.0f64..1e5,
            l in 0.0f64..365.0, sl in 0.0f64..60.0, r in 0.0f64..90.0,
        ) {
            let b = buffer(inputs(p, d, sd, l, sl, r, 0.0)).unwrap();
            let want = classic(b.z, d, sd, l + r, sl);
            prop_assert!((b.safety_stock - want).abs() <= 1e-12 * want.abs().max(1.0));
            prop_assert!((b.order_point - (d * (l + r) + want)).abs()
                <= 1e-12 * b.order_point.abs().max(1.0));
        }

        #[test]
        fn a_fixed_lead_time_leaves_z_sigma_root_exposure(
            p in 0.01f64..0.9999, d in 0.0f64..1e6, sd in 0.0f64..1e5,
            l in 0.0f64..365.0, r in 0.0f64..90.0,
        ) {
            let b = buffer(inputs(p, d, sd, l, 0.0, r, 0.0)).unwrap();
            let want = b.z * sd * (l + r).sqrt();
            prop_assert_eq!(b.lead_time_variance, 0.0);
            prop_assert!((b.safety_stock - want).abs() <= 1e-12 * want.abs().max(1.0));
        }

        #[test]
        fn record_error_never_shrinks_the_buffer(
            p in 0.5f64..0.9999, d in 0.0f64..1e4, sd in 0.0f64..1e3,
            l in 0.0f64..60.0, sl in 0.0f64..10.0, rec in 0.0f64..1e4,
        ) {
            let with = buffer(inputs(p, d, sd, l, sl, 0.0, rec)).unwrap();
            let without = buffer(inputs(p, d, sd, l, sl, 0.0, 0.0)).unwrap();
            prop_assert!(with.safety_stock >= without.safety_stock);
            prop_assert!(with.safety_stock <= without.safety_stock + with.z * rec + 1e-9);
        }
    }
}
