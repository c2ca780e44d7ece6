//! Record error of one item (or one bin-item key) over its counts: how often
//! it was right, its bias, the spread of its error, and how that spread grows
//! with the time since the previous count.
//!
//! **Growth model.** Between two counts the record drifts by many small
//! independent mistakes, a random walk, so the error found at a count has
//! mean zero (bias apart) and a variance that grows linearly with the days
//! `t` since the previous count:
//!
//! ```text
//! σ²(t) = a + b·t,   a ≥ 0 (error present straight after a count), b ≥ 0 (drift per day)
//! ```
//!
//! **Estimator.** Each count after the first gives a point `(tᵢ, eᵢ²)`, and
//! `E[eᵢ²] = a + b·tᵢ`, so `a` and `b` are fitted by ordinary least squares of
//! squared errors on days, constrained to `a, b ≥ 0`: the unconstrained fit
//! when both are non-negative, otherwise the better (smaller residual sum of
//! squares) of the two boundary fits `b = 0, a = mean(e²)` and
//! `a = 0, b = Σtᵢeᵢ² / Σtᵢ²`, which for two parameters is the exact
//! constrained optimum. The fit is unbiased; it is not weighted (squared
//! errors spread more where σ² is larger), which costs efficiency, not
//! correctness. It assumes each count reset the record (an approved
//! adjustment), so the error at a count is the drift since the previous one.
//!
//! **Growth from a count** ([`fit_growth_from_count`], what the risk policy
//! uses to choose count intervals). A count leaves the record right, so the
//! error found at the next count is drift alone: `σ²(t) = b·t`, through the
//! origin. With few points the free intercept above soaks up the spread and
//! leaves `b` near zero, which would tell the policy an item never needs
//! counting. If `eᵢ ~ N(0, b·tᵢ)`, the log-likelihood is
//! `−½ Σ [ln(2π·b·tᵢ) + eᵢ²/(b·tᵢ)]`; setting its derivative in `b`,
//! `−½ Σ [1/b − eᵢ²/(b²·tᵢ)]`, to zero gives `b̂ = (1/n) Σ eᵢ²/tᵢ`. Each
//! `eᵢ²/(b·tᵢ)` is χ² with one degree of freedom (variance 2), so
//! `Var(b̂) = 2b²/n`. A recount within [`MIN_GAP_DAYS`] of the count before
//! it re-finds that count's error rather than new drift and is left out.
//! Pure arithmetic; no I/O.

use super::stats::{self, StatsError};
use crate::time::Timestamp;
use serde::Serialize;

/// Fewest points (counts after the first) a growth fit is made from.
pub const MIN_FIT_POINTS: usize = 8;
/// Least standard deviation of the days between counts, in days, for the
/// slope to be told apart from the intercept.
pub const MIN_DAYS_SPREAD: f64 = 1.0;
/// Fewest days between two counts for the later one to say how fast error
/// grows (a same-day recount re-finds the first count's error).
pub const MIN_GAP_DAYS: f64 = 1.0;
/// Most counts or points one item's summary may take.
pub const MAX_POINTS: usize = 100_000;
/// Longest gap between counts accepted, in days (ten years).
pub const MAX_DAYS: f64 = 3660.0;
/// Largest record error accepted, in base units.
pub const MAX_ERROR: f64 = 1e12;

const MS_PER_DAY: f64 = crate::time::DAY_MS as f64;

/// One count of the item: when, the signed record error found
/// (`counted − f*`, base units) and whether it was a hit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct ItemCount {
    pub counted_at: Timestamp,
    pub error: i64,
    pub hit: bool,
}

/// One point of the growth fit: days since the previous count, and the error found.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ErrorPoint {
    pub days_since_previous: f64,
    pub error: f64,
}

/// Why the growth was not fitted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case", tag = "reason")]
pub enum Shortfall {
    /// Fewer than [`MIN_FIT_POINTS`] counts with a previous count.
    TooFewPoints { needed: usize },
    /// The days between counts were (nearly) all the same.
    NoSpreadInDays,
}

/// The fitted growth of record error, or why there is none.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "status")]
pub enum GrowthFit {
    Fitted {
        /// Error variance straight after a count, units².
        a: f64,
        /// Growth of error variance per day since the count, units² per day.
        b: f64,
    },
    NotEnoughData(Shortfall),
}

/// The growth fit and how many points it used.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ErrorGrowth {
    pub points: usize,
    pub fit: GrowthFit,
}

impl ErrorGrowth {
    /// Tells whether there were enough points to fit.
    pub fn enough(&self) -> bool {
        matches!(self.fit, GrowthFit::Fitted { .. })
    }

    /// Returns σrec, the standard deviation of record error `days` after a
    /// count: `sqrt(a + b·days)`. Pass the planner's review period (or the
    /// count interval, for the error just before the next count). `None` when
    /// not fitted or `days` is not a finite number of days ≥ 0.
    pub fn sigma_rec(&self, days: f64) -> Option<f64> {
        match self.fit {
            GrowthFit::Fitted { a, b } if days.is_finite() && days >= 0.0 => {
                Some((a + b * days).sqrt())
            }
            _ => None,
        }
    }
}

/// An item's record-error figures.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ItemError {
    /// Number of counts.
    pub counts: usize,
    pub hits: usize,
    /// Hits over counts; `None` with no counts.
    pub hit_rate: Option<f64>,
    /// Mean signed error (bias), base units; `None` with no counts.
    pub bias: Option<f64>,
    /// Sample standard deviation of the error; `None` with fewer than two counts.
    pub error_sd: Option<f64>,
    pub growth: ErrorGrowth,
}

/// Why record error cannot be summarised; `index` is the position of the input.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum ItemErrorError {
    #[error("{len} counts or points is more than the {MAX_POINTS} one item may take")]
    TooMany { len: usize },
    #[error("point {index}: days since the previous count must be 0 to {MAX_DAYS}")]
    BadDays { index: usize },
    #[error("point {index}: the error must be a number within ±{MAX_ERROR:e}")]
    BadError { index: usize },
    #[error("count {index}: the error {error} is beyond ±{MAX_ERROR:e} units")]
    ErrorTooLarge { index: usize, error: i64 },
    #[error("count {index} is more than {MAX_DAYS} days after the one before it")]
    GapTooLong { index: usize },
}

/// Summarises one item's counts: hit rate, bias, error spread and growth.
/// Counts may come in any order; they are taken in time order.
pub fn summarize_item(counts: &[ItemCount]) -> Result<ItemError, ItemErrorError> {
    if counts.len() > MAX_POINTS {
        return Err(ItemErrorError::TooMany { len: counts.len() });
    }
    if let Some(index) = counts
        .iter()
        .position(|c| (c.error as f64).abs() > MAX_ERROR)
    {
        return Err(ItemErrorError::ErrorTooLarge {
            index,
            error: counts[index].error,
        });
    }
    let mut ordered: Vec<(usize, ItemCount)> = counts.iter().copied().enumerate().collect();
    ordered.sort_by_key(|(_, c)| c.counted_at);
    let mut points = Vec::with_capacity(counts.len().saturating_sub(1));
    for pair in ordered.windows(2) {
        let (index, later) = pair[1];
        let days = (later.counted_at.0 - pair[0].1.counted_at.0) as f64 / MS_PER_DAY;
        if days > MAX_DAYS {
            return Err(ItemErrorError::GapTooLong { index });
        }
        points.push(ErrorPoint {
            days_since_previous: days,
            error: later.error as f64,
        });
    }
    let errors: Vec<f64> = counts.iter().map(|c| c.error as f64).collect();
    let summary = match stats::summarize(&errors) {
        Ok(s) => Some(s),
        Err(StatsError::Empty) => None,
        Err(e) => unreachable!("errors are bounded integers: {e}"),
    };
    let hits = counts.iter().filter(|c| c.hit).count();
    Ok(ItemError {
        counts: counts.len(),
        hits,
        hit_rate: (!counts.is_empty()).then(|| hits as f64 / counts.len() as f64),
        bias: summary.map(|s| s.mean),
        error_sd: summary.and_then(|s| s.std_dev()),
        growth: fit_error_growth(&points)?,
    })
}

/// Refuses more than [`MAX_POINTS`] points, days outside 0 to [`MAX_DAYS`] and
/// errors that are not finite or beyond ±[`MAX_ERROR`], naming the point.
fn check_points(points: &[ErrorPoint]) -> Result<(), ItemErrorError> {
    if points.len() > MAX_POINTS {
        return Err(ItemErrorError::TooMany { len: points.len() });
    }
    for (index, p) in points.iter().enumerate() {
        let t = p.days_since_previous;
        if !(t.is_finite() && (0.0..=MAX_DAYS).contains(&t)) {
            return Err(ItemErrorError::BadDays { index });
        }
        if !(p.error.is_finite() && p.error.abs() <= MAX_ERROR) {
            return Err(ItemErrorError::BadError { index });
        }
    }
    Ok(())
}

/// Fits `σ²(t) = b·t` (`a` = 0: the record is right just after a count) by maximum
/// likelihood, `b = mean(eᵢ²/tᵢ)` over the points at least [`MIN_GAP_DAYS`] after the
/// count before; needs [`MIN_FIT_POINTS`] such points. See the module notes.
pub fn fit_growth_from_count(points: &[ErrorPoint]) -> Result<ErrorGrowth, ItemErrorError> {
    check_points(points)?;
    let ratios: Vec<f64> = points
        .iter()
        .filter(|p| p.days_since_previous >= MIN_GAP_DAYS)
        .map(|p| p.error * p.error / p.days_since_previous)
        .collect();
    let n = ratios.len();
    if n < MIN_FIT_POINTS {
        return Ok(ErrorGrowth {
            points: n,
            fit: GrowthFit::NotEnoughData(Shortfall::TooFewPoints {
                needed: MIN_FIT_POINTS,
            }),
        });
    }
    Ok(ErrorGrowth {
        points: n,
        fit: GrowthFit::Fitted {
            a: 0.0,
            b: ratios.iter().sum::<f64>() / n as f64,
        },
    })
}

/// Fits `σ²(t) = a + b·t` (a, b ≥ 0) to squared errors by least squares; see the module notes.
pub fn fit_error_growth(points: &[ErrorPoint]) -> Result<ErrorGrowth, ItemErrorError> {
    check_points(points)?;
    let n = points.len();
    let short = |reason| ErrorGrowth {
        points: n,
        fit: GrowthFit::NotEnoughData(reason),
    };
    if n < MIN_FIT_POINTS {
        return Ok(short(Shortfall::TooFewPoints {
            needed: MIN_FIT_POINTS,
        }));
    }
    let t: Vec<f64> = points.iter().map(|p| p.days_since_previous).collect();
    let y: Vec<f64> = points.iter().map(|p| p.error * p.error).collect();
    let (ts, ys) = match (stats::summarize(&t), stats::summarize(&y)) {
        (Ok(ts), Ok(ys)) => (ts, ys),
        _ => unreachable!("points are checked finite, bounded and non-empty"),
    };
    if ts.std_dev().is_none_or(|sd| sd < MIN_DAYS_SPREAD) {
        return Ok(short(Shortfall::NoSpreadInDays));
    }
    let sxx = ts.sum_sq_dev;
    let sxy: f64 = t
        .iter()
        .zip(&y)
        .map(|(ti, yi)| (ti - ts.mean) * (yi - ys.mean))
        .sum();
    let b = sxy / sxx;
    let a = ys.mean - b * ts.mean;
    let (a, b) = if a >= 0.0 && b >= 0.0 {
        (a, b)
    } else {
        let sse = |a: f64, b: f64| -> f64 {
            t.iter()
                .zip(&y)
                .map(|(ti, yi)| (yi - a - b * ti).powi(2))
                .sum()
        };
        let flat = (ys.mean, 0.0);
        let tt: f64 = t.iter().map(|ti| ti * ti).sum();
        let ty: f64 = t.iter().zip(&y).map(|(ti, yi)| ti * yi).sum();
        let through_origin = (0.0, ty / tt);
        if sse(flat.0, flat.1) <= sse(through_origin.0, through_origin.1) {
            flat
        } else {
            through_origin
        }
    };
    Ok(ErrorGrowth {
        points: n,
        fit: GrowthFit::Fitted { a, b },
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    fn point(t: f64, e: f64) -> ErrorPoint {
        ErrorPoint {
            days_since_previous: t,
            error: e,
        }
    }

    fn fitted(g: &ErrorGrowth) -> (f64, f64) {
        match g.fit {
            GrowthFit::Fitted { a, b } => (a, b),
            other => panic!("expected a fit, got {other:?}"),
        }
    }

    #[test]
    fn the_fit_recovers_a_and_b_from_data_made_by_the_model() {
        // 100,000 points (MAX_POINTS) from the model itself (fixed seed): t whole days in
        // 1..=60, e ~ Normal(0, σ²(t)) with a = 4, b = 0.5.
        let (a, b) = (4.0, 0.5);
        let mut rng = ChaCha8Rng::seed_from_u64(0x5eed_ca1e);
        let points: Vec<ErrorPoint> = (0..MAX_POINTS)
            .map(|_| {
                let t = f64::from(rng.random_range(1u32..=60));
                let e = Normal::new(0.0, (a + b * t).sqrt())
                    .expect("σ is positive")
                    .sample(&mut rng);
                point(t, e)
            })
            .collect();
        let g = fit_error_growth(&points).unwrap();
        assert_eq!(g.points, MAX_POINTS);
        let (a_hat, b_hat) = fitted(&g);
        // Tolerance: four standard errors of the estimators, computed from the
        // model. For normal e, Var(e²) = 2σ⁴(t); OLS coefficients are linear
        // in y with weights wᵢ, so Var = Σ wᵢ²·2σ⁴(tᵢ). Outside ±4 SE happens
        // with probability below 1e-4 for a random seed, so a failure means
        // the estimator is wrong, not that the seed was unlucky.
        let n = points.len() as f64;
        let t_mean = points.iter().map(|p| p.days_since_previous).sum::<f64>() / n;
        let sxx: f64 = points
            .iter()
            .map(|p| (p.days_since_previous - t_mean).powi(2))
            .sum();
        let (mut var_a, mut var_b, mut var_at10) = (0.0, 0.0, 0.0);
        for p in &points {
            let dt = p.days_since_previous - t_mean;
            let var_y = 2.0 * (a + b * p.days_since_previous).powi(2);
            let (w_a, w_b) = (1.0 / n - t_mean * dt / sxx, dt / sxx);
            var_a += w_a.powi(2) * var_y;
            var_b += w_b.powi(2) * var_y;
            var_at10 += (w_a + 10.0 * w_b).powi(2) * var_y;
        }
        let (se_a, se_b, se_at10) = (var_a.sqrt(), var_b.sqrt(), var_at10.sqrt());
        assert!(
            se_b < 0.01 && se_a < 0.3,
            "the check must be tight: {se_a} {se_b}"
        );
        assert!((b_hat - b).abs() <= 4.0 * se_b, "b̂ {b_hat}, SE {se_b}");
        assert!((a_hat - a).abs() <= 4.0 * se_a, "â {a_hat}, SE {se_a}");
        // σrec over a 10-day review: √(a + 10b) = √9 = 3 for the true model;
        // its square is checked to four standard errors of â + 10·b̂.
        let s = g.sigma_rec(10.0).unwrap();
        assert!(
            (s * s - 9.0).abs() <= 4.0 * se_at10,
            "σrec {s}, SE of σ² {se_at10}"
        );
    }

    #[test]
    fn a_falling_trend_is_fitted_flat_not_negative() {
        // y = 20 − t for t = 1..10: OLS slope −1 < 0, so the constrained fit is
        // b = 0, a = mean(y) = 14.5 (SSE 82.5, against ≈ 1,000 through the origin).
        let points: Vec<_> = (1..=10)
            .map(|t| point(f64::from(t), (20.0 - f64::from(t)).sqrt()))
            .collect();
        let (a, b) = fitted(&fit_error_growth(&points).unwrap());
        assert_eq!(b, 0.0);
        assert!((a - 14.5).abs() < 1e-9, "{a}");
    }

    #[test]
    fn a_negative_intercept_is_fitted_through_the_origin() {
        // y = 3t − 2 for t = 1..10: OLS a = −2 < 0. Through the origin
        // b = Σty / Σt² = (3·385 − 2·55) / 385 = 1045 / 385 ≈ 2.714286, whose
        // SSE (≈ 8.6) beats the flat fit's (742.5).
        let points: Vec<_> = (1..=10)
            .map(|t| point(f64::from(t), (3.0 * f64::from(t) - 2.0).sqrt()))
            .collect();
        let (a, b) = fitted(&fit_error_growth(&points).unwrap());
        assert_eq!(a, 0.0);
        assert!((b - 1045.0 / 385.0).abs() < 1e-9, "{b}");
    }

    #[test]
    fn degenerate_inputs_say_not_enough_data_and_never_nan() {
        let none = fit_error_growth(&[]).unwrap();
        assert_eq!(none.points, 0);
        assert!(!none.enough());
        assert_eq!(
            none.fit,
            GrowthFit::NotEnoughData(Shortfall::TooFewPoints {
                needed: MIN_FIT_POINTS
            })
        );
        assert_eq!(none.sigma_rec(7.0), None);

        let few: Vec<_> = (0..MIN_FIT_POINTS - 1)
            .map(|i| point(i as f64 * 5.0, 2.0))
            .collect();
        assert!(!fit_error_growth(&few).unwrap().enough());

        let same_t: Vec<_> = (0..50).map(|i| point(30.0, f64::from(i % 7))).collect();
        let g = fit_error_growth(&same_t).unwrap();
        assert_eq!(g.points, 50);
        assert_eq!(g.fit, GrowthFit::NotEnoughData(Shortfall::NoSpreadInDays));

        // A spread of hours, not days, is not enough either.
        let hours: Vec<_> = (0..50)
            .map(|i| point(30.0 + f64::from(i % 3) / 24.0, 1.0))
            .collect();
        assert!(!fit_error_growth(&hours).unwrap().enough());

        // All errors zero: a perfect record fits a = b = 0, σrec = 0.
        let perfect: Vec<_> = (1..=20).map(|t| point(f64::from(t), 0.0)).collect();
        let g = fit_error_growth(&perfect).unwrap();
        assert_eq!(fitted(&g), (0.0, 0.0));
        assert_eq!(g.sigma_rec(14.0), Some(0.0));
        assert_eq!(g.sigma_rec(f64::NAN), None);
        assert_eq!(g.sigma_rec(-1.0), None);
    }

    #[test]
    fn bad_points_are_refused_with_their_position() {
        let mut p: Vec<_> = (1..=10).map(|t| point(f64::from(t), 1.0)).collect();
        p[4].days_since_previous = -1.0;
        assert_eq!(
            fit_error_growth(&p),
            Err(ItemErrorError::BadDays { index: 4 })
        );
        p[4].days_since_previous = 3.0;
        p[7].error = f64::INFINITY;
        assert_eq!(
            fit_error_growth(&p),
            Err(ItemErrorError::BadError { index: 7 })
        );
    }

    #[test]
    fn an_item_summary_is_worked_by_hand() {
        // Five counts, 10 days apart, given out of order. Errors in time
        // order 0, −2, 1, 0, 3; hits where the error is 0 or 1: 3 of 5.
        // Bias = 2 / 5 = 0.4. Deviations −0.4, −2.4, 0.6, −0.4, 2.6; squares
        // sum to 13.2; sample variance 13.2 / 4 = 3.3; sd = √3.3 ≈ 1.816590.
        let day = 86_400_000;
        let c = |d: i64, error: i64| ItemCount {
            counted_at: Timestamp(1_772_409_600_000 + d * day),
            error,
            hit: error.abs() <= 1,
        };
        let counts = [c(20, 1), c(0, 0), c(40, 3), c(10, -2), c(30, 0)];
        let s = summarize_item(&counts).unwrap();
        assert_eq!((s.counts, s.hits), (5, 3));
        assert_eq!(s.hit_rate, Some(0.6));
        assert!((s.bias.unwrap() - 0.4).abs() < 1e-15);
        assert!((s.error_sd.unwrap() - 3.3f64.sqrt()).abs() < 1e-15);
        // Four gaps of 10 days: fewer than MIN_FIT_POINTS, so no fit.
        assert_eq!(s.growth.points, 4);
        assert!(!s.growth.enough());

        let empty = summarize_item(&[]).unwrap();
        assert_eq!(
            (empty.counts, empty.hit_rate, empty.bias, empty.error_sd),
            (0, None, None, None)
        );
        let one = summarize_item(&counts[..1]).unwrap();
        assert_eq!((one.bias, one.error_sd), (Some(1.0), None));
    }

    #[test]
    fn an_item_with_a_long_history_gets_a_growth_fit() {
        // Counts every 7, 14 or 21 days (cycling); the error grows with the
        // gap: 1, 2, 3 units alternating sign. Squared errors 1, 4, 9 on
        // t = 7, 14, 21 lie on y = (4/7)·t − 3, so the intercept is negative
        // and the fit goes through the origin: b = Σty / Σt², equal per cycle
        // to (7 + 56 + 189) / (49 + 196 + 441) = 252 / 686 ≈ 0.367347.
        let day = 86_400_000;
        let mut at = 0;
        let mut counts = vec![ItemCount {
            counted_at: Timestamp(0),
            error: 0,
            hit: true,
        }];
        for i in 0..12i64 {
            let k = i % 3 + 1;
            at += 7 * k * day;
            counts.push(ItemCount {
                counted_at: Timestamp(at),
                error: if i % 2 == 0 { k } else { -k },
                hit: false,
            });
        }
        let s = summarize_item(&counts).unwrap();
        assert_eq!(s.growth.points, 12);
        let (a, b) = fitted(&s.growth);
        assert_eq!(a, 0.0);
        assert!((b - 252.0 / 686.0).abs() < 1e-12, "{b}");
        let sigma = s.growth.sigma_rec(14.0).unwrap();
        assert!((sigma - (14.0 * 252.0 / 686.0f64).sqrt()).abs() < 1e-12);
    }

    #[test]
    fn growth_from_a_count_is_the_mean_of_squared_error_over_days_by_hand() {
        // Worked by hand: e²/t = 1/1, 4/4, 4/2, 16/8, 9/9, 0/2, 9/3, 25/5 = 1, 1, 2, 2, 1,
        // 0, 3, 5; their mean is 15/8 = 1.875. The recount 0.2 days after its count (an
        // error of 10) re-finds that count's error and is left out.
        let points = [
            point(1.0, 1.0),
            point(4.0, -2.0),
            point(2.0, 2.0),
            point(8.0, 4.0),
            point(9.0, -3.0),
            point(2.0, 0.0),
            point(0.2, 10.0),
            point(3.0, 3.0),
            point(5.0, -5.0),
        ];
        let g = fit_growth_from_count(&points).unwrap();
        assert_eq!(g.points, 8);
        assert_eq!(g.fit, GrowthFit::Fitted { a: 0.0, b: 1.875 });
        // One point fewer than the least: not fitted, and says how many it needs.
        let g = fit_growth_from_count(&points[..8]).unwrap();
        assert_eq!(g.points, 7);
        assert!(!g.enough());
    }

    #[test]
    fn growth_from_a_count_recovers_a_known_drift_within_its_standard_error() {
        // Errors drawn as N(0, b·t) with b = 0.5 (seeded); the estimate's standard error
        // is b·sqrt(2/n) (χ² with one degree of freedom has variance 2).
        let b: f64 = 0.5;
        let n = 4000;
        let mut rng = ChaCha8Rng::seed_from_u64(22);
        let points: Vec<ErrorPoint> = (0..n)
            .map(|_| {
                let t: f64 = rng.random_range(1.0..60.0);
                let e = Normal::new(0.0, (b * t).sqrt()).unwrap().sample(&mut rng);
                point(t, e)
            })
            .collect();
        let g = fit_growth_from_count(&points).unwrap();
        let GrowthFit::Fitted { a, b: fitted } = g.fit else {
            panic!("fitted from {n} points")
        };
        assert_eq!(a, 0.0);
        let se = b * (2.0 / n as f64).sqrt();
        assert!(
            (fitted - b).abs() < 4.0 * se,
            "b̂ {fitted} against {b} ± {se}"
        );
        // The free intercept's fit of the same points finds the same growth, less
        // sharply: the two agree.
        let GrowthFit::Fitted { b: ols_b, .. } = fit_error_growth(&points).unwrap().fit else {
            panic!("fitted")
        };
        assert!((ols_b - b).abs() < 0.1, "least squares b {ols_b}");
    }

    #[test]
    fn growth_from_a_count_refuses_a_bad_point_naming_it() {
        let mut points = vec![point(2.0, 1.0); 9];
        points[3] = point(f64::NAN, 1.0);
        assert_eq!(
            fit_growth_from_count(&points),
            Err(ItemErrorError::BadDays { index: 3 })
        );
    }
}
