//! Count intervals chosen by the value of record error they are expected to
//! leave standing, instead of by ABC class alone. Pure arithmetic; no I/O.
//!
//! **Model.** Record error of an item `t` days after its count is taken as
//! normal with mean zero and variance `σ²(t) = a + b·t` (the growth fit of
//! `accuracy::item_error`). The expected absolute error is then the mean of a
//! half-normal distribution, `E|e| = sqrt(2/π)·σ(t)`, and its value
//! `h(t) = c·sqrt(2/π)·sqrt(a + b·t)` with `c` the unit cost. Counting every
//! `T` days, the error value standing on an average day is
//!
//! ```text
//! f(T) = H(T) / T,   H(T) = ∫₀ᵀ h(t) dt = c·sqrt(2/π)·(2 / 3b)·((a + bT)^{3/2} − a^{3/2})
//! ```
//!
//! Optionally the safety stock the planner holds against record error is
//! charged too: `q·sqrt(a + b·T)` a day, with `q` the day's carrying cost of
//! one unit of safety stock times the service factor `z`.
//!
//! **Choice.** Minimise `Σ fᵢ(Tᵢ) (+ Σ qᵢ·σᵢ(Tᵢ))` subject to the day's
//! counter-minutes `Σ mᵢ / Tᵢ ≤ M` (`mᵢ` learned minutes per count) and
//! `T_min ≤ Tᵢ ≤ Tᵢ,max` (the class floor). In the count frequency `x = 1/T`
//! each term is convex (`x·H(1/x)` is the perspective of the convex `H`;
//! `sqrt(a + b/x)` has a positive second derivative), and the budget is
//! linear, so a Lagrange multiplier `λ ≥ 0` finds the optimum: each item's
//! stationarity condition `d/dx [fᵢ + λ·mᵢ·x] = 0` reads, back in `T`,
//!
//! ```text
//! Dᵢ(T) = T·h(T) − H(T) + qᵢ·b·T² / (2·sqrt(a + b·T)) = λ·mᵢ
//! ```
//!
//! `Dᵢ` grows with `T`, so each `Tᵢ(λ)` is found by bisection and clamped to
//! its bounds, and `λ` by bisection until the minutes fit. With `a = 0` and no
//! safety term, `D(T) = c·sqrt(2/π)·sqrt(b)·T^{3/2} / 3`, so
//! `Tᵢ ∝ (mᵢ / (cᵢ·sqrt(bᵢ)))^{2/3}` (the tests check this by hand).
//!
//! **Jumps.** Record error that arrives as rare jumps (a pick not booked, a case
//! in the wrong bin) is a compound Poisson process: `e(t) = J₁ + … + J_N(t)`, `N(t)`
//! Poisson with mean `r·t`, `E|J| = s`. By the triangle inequality and Wald's identity
//! `E|e(t)| ≤ E Σ|Jⱼ| = r·s·t`, with equality when the jumps share a sign (unbooked
//! picks all leave the book above the shelf); for jumps of either sign the gap is the
//! chance that two jumps meet, `O((r·t)²)`, so the linear charge holds while `r·T` is
//! small (within 5 % at `r·T` = 0.1 for symmetric jumps of one size; beyond `r·T` ≈ 1
//! symmetric jumps behave as the random walk above and the linear charge overstates).
//! So `h(t) = c·r·s·t`, `H(T) = c·r·s·T²/2`, the daily cost `f(T) = c·r·s·T/2` and
//! `D(T) = c·r·s·T²/2`: `Tᵢ ∝ sqrt(mᵢ / (cᵢ·rᵢ·sᵢ))`, the square-root rule. The
//! safety term uses `Var e(t) = r·E[J²]·t`, with `E[J²]` taken as `s²`. A [`Drift`]
//! says which model an item is planned with; `H`, `h` and `h′` are its only inputs
//! to the choice.
//!
//! **Pooling.** For the walk ([`pick_growth`]) an item's own fit is used when it
//! has one; otherwise the fit of its pool (class × zone × pick-rate band), else a
//! site default. Jumps are shrunk toward the pool's rate per pick instead
//! (`planning::jumps`). Each interval says which was used.

use super::abc::Class;
use crate::accuracy::item_error::{ErrorGrowth, GrowthFit};
use serde::Serialize;

/// Shortest interval chosen, in days: a bin is counted at most once a day.
pub const MIN_INTERVAL_DAYS: f64 = 1.0;
/// Longest interval chosen when a class has no floor, in days (two years).
pub const MAX_INTERVAL_DAYS: f64 = 730.0;
/// Most items one choice may take.
pub const MAX_ITEMS: usize = 1_000_000;
/// Most steps for one item's interval (bisection alone shrinks the bracket 2⁶⁰-fold).
const INTERVAL_STEPS: u32 = 60;
/// Relative precision at which one item's interval stops being refined.
const INTERVAL_TOLERANCE: f64 = 1e-12;
/// Bisection steps for the multiplier on a log scale (from a 1000-fold bracket
/// to a ratio within 1 + 2e-13).
const LAMBDA_STEPS: u32 = 45;

/// `sqrt(2/π)`: mean of the half-normal distribution with unit scale.
pub const HALF_NORMAL_MEAN: f64 = 0.797_884_560_802_865_4;

/// How often an item is picked, banded so items of like traffic pool their fits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum RateBand {
    /// Fewer than one pick a week.
    Slow,
    /// One a week to one a day.
    Steady,
    /// One a day to ten a day.
    Busy,
    /// Ten or more a day.
    Fast,
}

impl RateBand {
    /// Bands an item by its picks per day.
    pub fn of(picks_per_day: f64) -> Self {
        if picks_per_day.is_nan() || picks_per_day < 1.0 / 7.0 {
            RateBand::Slow
        } else if picks_per_day < 1.0 {
            RateBand::Steady
        } else if picks_per_day < 10.0 {
            RateBand::Busy
        } else {
            RateBand::Fast
        }
    }
}

/// The pool an item's fit falls back to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
pub struct PoolKey {
    pub class: Class,
    pub zone: i64,
    pub band: RateBand,
    /// Held in more than one bin: its pick face is replenished from another bin, and
    /// each replenishment can land a whole move in the wrong place, so its errors per
    /// pick are pooled apart from those of items picked from a single bin.
    pub replenished: bool,
}

/// Where an item's growth figures came from.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "from")]
pub enum Source {
    /// Its own counts.
    Own { points: usize },
    /// Its pool's counts, taken together.
    Pooled { pool: PoolKey, points: usize },
    /// Neither had enough counts: the site default.
    Default,
}

/// Error variance growth `σ²(t) = a + b·t`, units² and units² per day.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Growth {
    pub a: f64,
    pub b: f64,
}

/// Record error arriving in jumps: `rate` jumps a day, each of mean absolute size
/// `size` units (a pick not booked, a case in the wrong bin).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Jumps {
    pub rate: f64,
    pub size: f64,
}

/// How an item's record error grows after a count; see the module notes.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "model")]
pub enum Drift {
    /// A random walk of small mistakes: `σ²(t) = a + b·t`, normal.
    Walk(Growth),
    /// Rare jumps (compound Poisson), charged at `rate·size·t`.
    Jump(Jumps),
}

impl Drift {
    /// Returns the expected absolute error `t` days after a count, units.
    pub fn expected_abs(&self, t: f64) -> f64 {
        match *self {
            Drift::Walk(Growth { a, b }) => HALF_NORMAL_MEAN * (a + b * t).sqrt(),
            Drift::Jump(Jumps { rate, size }) => rate * size * t,
        }
    }

    /// Returns how fast [`Self::expected_abs`] grows at `t`, units a day.
    fn expected_abs_slope(&self, t: f64) -> f64 {
        match *self {
            Drift::Walk(Growth { a, b }) => {
                let s = (a + b * t).sqrt();
                if s > 0.0 {
                    HALF_NORMAL_MEAN * b / (2.0 * s)
                } else {
                    0.0
                }
            }
            Drift::Jump(Jumps { rate, size }) => rate * size,
        }
    }

    /// Returns `∫₀ᵗ E|e(u)| du`, unit-days.
    fn integral(&self, t: f64) -> f64 {
        match *self {
            Drift::Walk(Growth { a, b }) if b <= 0.0 => HALF_NORMAL_MEAN * a.sqrt() * t,
            Drift::Walk(Growth { a, b }) => {
                HALF_NORMAL_MEAN * 2.0 / (3.0 * b) * ((a + b * t).powf(1.5) - a.powf(1.5))
            }
            Drift::Jump(Jumps { rate, size }) => rate * size * t * t / 2.0,
        }
    }

    /// Returns the growth of the error's variance: the walk's own, or for jumps
    /// `Var e(t) = rate·E[J²]·t`, with `E[J²]` taken as `size²` (jumps of one size).
    pub fn variance_growth(&self) -> Growth {
        match *self {
            Drift::Walk(g) => g,
            Drift::Jump(Jumps { rate, size }) => Growth {
                a: 0.0,
                b: rate * size * size,
            },
        }
    }

    /// Tells whether waiting longer adds expected error (else counting sooner finds nothing more).
    pub fn grows(&self) -> bool {
        match *self {
            Drift::Walk(Growth { b, .. }) => b > 0.0,
            Drift::Jump(Jumps { rate, size }) => rate > 0.0 && size > 0.0,
        }
    }
}

/// Picks the growth to plan with: the item's own fit, else its pool's, else `default`.
pub fn pick_growth(
    own: &ErrorGrowth,
    pool: PoolKey,
    pooled: Option<&ErrorGrowth>,
    default: Growth,
) -> (Growth, Source) {
    if let GrowthFit::Fitted { a, b } = own.fit {
        return (Growth { a, b }, Source::Own { points: own.points });
    }
    if let Some(ErrorGrowth {
        points,
        fit: GrowthFit::Fitted { a, b },
    }) = pooled
    {
        return (
            Growth { a: *a, b: *b },
            Source::Pooled {
                pool,
                points: *points,
            },
        );
    }
    (default, Source::Default)
}

/// One item (or bin-item key) to choose an interval for.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct RiskItem {
    pub key: i64,
    pub class: Class,
    pub drift: Drift,
    pub source: Source,
    /// Cost of one unit, minor currency units.
    pub unit_cost: f64,
    /// Learned minutes to count it once.
    pub minutes: f64,
    /// Day's cost of one unit of safety stock times `z`; 0 leaves safety stock out
    /// (items with no demand carry none).
    pub safety_weight: f64,
}

/// The chosen interval of one item and the figures behind it.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Interval {
    pub key: i64,
    pub days: f64,
    /// Expected absolute error value just before its next count, minor units.
    pub error_value_due: f64,
    /// Expected error value standing on an average day at this interval.
    pub mean_error_value: f64,
    pub source: Source,
    /// Whether the class floor, not the risk, set the interval.
    pub at_floor: bool,
}

/// The choice for a site's items.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Choice {
    pub intervals: Vec<Interval>,
    /// Counter-minutes a day the intervals take.
    pub minutes_per_day: f64,
    /// The floors alone take more minutes than the day has; every item is at its floor.
    pub floors_exceed_minutes: bool,
}

/// Why no choice was made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RiskError {
    #[error("{len} items is more than the {MAX_ITEMS} one choice may take")]
    TooMany { len: usize },
    #[error("item {key}: {what} must be a finite number ≥ 0")]
    BadFigure { key: i64, what: &'static str },
    #[error("item {key}: minutes per count must be more than 0")]
    NoMinutes { key: i64 },
    #[error("the day's counter-minutes must be a finite number more than 0")]
    BadBudget,
    #[error("class {class}: at least {per_year} counts a year must be 1 to 365")]
    BadFloor { class: &'static str, per_year: u32 },
}

/// Least counts a year per class (A, B, C); 0 sets no floor.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Floors {
    pub per_year: [u32; 3],
}

impl Floors {
    /// Returns the longest interval a class may have, in days.
    pub fn max_days(&self, class: Class) -> f64 {
        match self.per_year[class.index()] {
            0 => MAX_INTERVAL_DAYS,
            n => (365.0 / f64::from(n)).max(MIN_INTERVAL_DAYS),
        }
    }

    fn check(&self) -> Result<(), RiskError> {
        for class in Class::ALL {
            let per_year = self.per_year[class.index()];
            if per_year > 365 {
                return Err(RiskError::BadFloor {
                    class: class.as_str(),
                    per_year,
                });
            }
        }
        Ok(())
    }
}

/// Returns the expected absolute error value `t` days after a count.
pub fn error_value_at(item: &RiskItem, t: f64) -> f64 {
    item.unit_cost * item.drift.expected_abs(t)
}

/// `H(T)`: the integral of the expected error value over the first `t` days.
fn integral(item: &RiskItem, t: f64) -> f64 {
    item.unit_cost * item.drift.integral(t)
}

/// Returns the standard deviation of the record error `t` days after a count, units.
fn error_sd(item: &RiskItem, t: f64) -> f64 {
    let Growth { a, b } = item.drift.variance_growth();
    (a + b * t).sqrt()
}

/// Returns the daily cost at interval `t`: the mean standing error value plus the safety term.
pub fn daily_cost(item: &RiskItem, t: f64) -> f64 {
    integral(item, t) / t + item.safety_weight * error_sd(item, t)
}

/// `D(T)` of the module notes: what one more day of interval costs, in the budget's units.
fn marginal(item: &RiskItem, t: f64) -> f64 {
    let Growth { a, b } = item.drift.variance_growth();
    let s = (a + b * t).sqrt();
    let safety = if s > 0.0 {
        item.safety_weight * b * t * t / (2.0 * s)
    } else {
        0.0
    };
    t * error_value_at(item, t) - integral(item, t) + safety
}

/// `D′(T)`: how fast `D` grows with `T` (for Newton steps).
fn marginal_slope(item: &RiskItem, t: f64) -> f64 {
    let Growth { a, b } = item.drift.variance_growth();
    let s = (a + b * t).sqrt();
    // d/dT [T·h − H] = T·h′; d/dT [q·b·T²/(2s)] = q·b·T·(4a + 3bT)/(4s³).
    let safety = if s > 0.0 {
        item.safety_weight * b * t * (4.0 * a + 3.0 * b * t) / (4.0 * s * s * s)
    } else {
        0.0
    };
    t * item.unit_cost * item.drift.expected_abs_slope(t) + safety
}

/// Solves `D(T) = λ·m` for one item within `[MIN_INTERVAL_DAYS, max]`:
/// Newton steps kept inside a shrinking bisection bracket.
fn interval_for(item: &RiskItem, lambda: f64, max: f64) -> f64 {
    let target = lambda * item.minutes;
    if marginal(item, MIN_INTERVAL_DAYS) >= target {
        return MIN_INTERVAL_DAYS;
    }
    if marginal(item, max) <= target {
        return max;
    }
    let (mut lo, mut hi) = (MIN_INTERVAL_DAYS, max);
    let mut t = 0.5 * (lo + hi);
    for _ in 0..INTERVAL_STEPS {
        let gap = marginal(item, t) - target;
        if gap < 0.0 {
            lo = t;
        } else {
            hi = t;
        }
        if gap.abs() <= INTERVAL_TOLERANCE * target || hi - lo <= INTERVAL_TOLERANCE * hi {
            break;
        }
        let slope = marginal_slope(item, t);
        let newton = t - gap / slope;
        t = if slope > 0.0 && newton > lo && newton < hi {
            newton
        } else {
            0.5 * (lo + hi)
        };
    }
    t
}

fn minutes_at(items: &[RiskItem], maxes: &[f64], lambda: f64) -> f64 {
    items
        .iter()
        .zip(maxes)
        .map(|(item, &max)| item.minutes / interval_for(item, lambda, max))
        .sum()
}

fn check_items(items: &[RiskItem]) -> Result<(), RiskError> {
    if items.len() > MAX_ITEMS {
        return Err(RiskError::TooMany { len: items.len() });
    }
    for item in items {
        let (first, second) = match item.drift {
            Drift::Walk(Growth { a, b }) => (("a", a), ("b", b)),
            Drift::Jump(Jumps { rate, size }) => (("jump rate", rate), ("jump size", size)),
        };
        let figures = [
            first,
            second,
            ("unit cost", item.unit_cost),
            ("minutes per count", item.minutes),
            ("safety weight", item.safety_weight),
        ];
        for (what, value) in figures {
            if !(value.is_finite() && value >= 0.0) {
                return Err(RiskError::BadFigure {
                    key: item.key,
                    what,
                });
            }
        }
        if item.minutes <= 0.0 {
            return Err(RiskError::NoMinutes { key: item.key });
        }
    }
    Ok(())
}

/// Chooses each item's interval to minimise the expected error value (and safety
/// stock, where weighted) within `minutes_per_day` and the class floors.
pub fn choose(
    items: &[RiskItem],
    minutes_per_day: f64,
    floors: &Floors,
) -> Result<Choice, RiskError> {
    check_items(items)?;
    floors.check()?;
    if !(minutes_per_day.is_finite() && minutes_per_day > 0.0) {
        return Err(RiskError::BadBudget);
    }
    let maxes: Vec<f64> = items.iter().map(|i| floors.max_days(i.class)).collect();
    let floor_minutes: f64 = items.iter().zip(&maxes).map(|(i, m)| i.minutes / m).sum();
    let floors_exceed_minutes = floor_minutes > minutes_per_day;
    let lambda = if floors_exceed_minutes {
        f64::INFINITY
    } else if minutes_at(items, &maxes, 0.0) <= minutes_per_day {
        0.0
    } else {
        // Bisect λ on a log scale: minutes fall as λ grows. The upper end is
        // raised until it fits (it does, since the floors alone fit).
        let mut hi = 1.0_f64;
        while minutes_at(items, &maxes, hi) > minutes_per_day && hi < 1e300 {
            hi *= 1e3;
        }
        let mut lo = hi / 1e3;
        while minutes_at(items, &maxes, lo) <= minutes_per_day && lo > 1e-300 {
            lo /= 1e3;
        }
        for _ in 0..LAMBDA_STEPS {
            let mid = (lo * hi).sqrt();
            if minutes_at(items, &maxes, mid) > minutes_per_day {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        hi
    };
    let intervals: Vec<Interval> = items
        .iter()
        .zip(&maxes)
        .map(|(item, &max)| {
            let days = if lambda.is_infinite() {
                max
            } else {
                interval_for(item, lambda, max)
            };
            Interval {
                key: item.key,
                days,
                error_value_due: error_value_at(item, days),
                mean_error_value: integral(item, days) / days,
                source: item.source,
                at_floor: days >= max * (1.0 - 1e-9),
            }
        })
        .collect();
    let used = items
        .iter()
        .zip(&intervals)
        .map(|(item, interval)| item.minutes / interval.days)
        .sum();
    Ok(Choice {
        intervals,
        minutes_per_day: used,
        floors_exceed_minutes,
    })
}

/// Returns the total daily cost of a set of intervals (for comparing choices).
pub fn total_cost(items: &[RiskItem], days: &[f64]) -> f64 {
    items
        .iter()
        .zip(days)
        .map(|(item, &t)| daily_cost(item, t))
        .sum()
}

#[cfg(test)]
#[path = "risk_tests.rs"]
mod tests;
