//! Each item's rate and size of record-error jumps, estimated from its counts and
//! shrunk toward what its pool's picks predict. Pure arithmetic; no I/O.
//!
//! **Evidence.** An item's growth points (`accuracy::item_error::ErrorPoint`: days since
//! the count before, signed error found) at least [`MIN_GAP_DAYS`] apart give `n` errors
//! found (points with a non-zero error), `D` days covered (their days summed) and `S`
//! units found (their absolute errors summed). A point may hold more than one jump; the
//! rate then counts them as one and the size makes up for it, so `rate·size = S / D`,
//! which is all the linear charge of `risk` uses, stays unbiased.
//!
//! **Shrinkage (Gamma–Poisson).** Errors arrive per transaction, so the prior rate of an
//! item is `β·p` jumps a day, with `p` its picks a day (at least [`MIN_PICKS_PER_DAY`])
//! and `β` its pool's jumps per pick. With a Gamma prior of mean `λ₀` worth
//! [`PRIOR_ERRORS`] errors (shape `κ`, rate `κ/λ₀`) and `n` errors in `D` days, the
//! posterior mean is
//!
//! ```text
//! λ = (n + κ) / (D + κ/λ₀)
//! ```
//!
//! so an item with no counts gets `λ₀`, and its own record takes over as `D` grows past
//! `κ/λ₀` days. The pool's `β` is shrunk the same way toward the site's, in pick-days
//! (`E = Σ D·p`): `β_pool = (n_pool + κ) / (E_pool + κ/β_site)`, `β_site = n_site / E_site`.
//! The size is shrunk likewise as a mean: `s = (S + κ·s_pool) / (n + κ)`, the pool's
//! toward the site's, the site's `S_site / n_site`.
//!
//! **With no error found anywhere** the site's `β` is `1 / max(E_site, 1)` (at most one
//! error in all that was counted) and its size [`DEFAULT_JUMP_UNITS`]: one rate per pick
//! for every item, whose size the budget's multiplier absorbs.

use super::risk::{Jumps, PoolKey, Source};
use crate::accuracy::item_error::{ErrorPoint, MIN_GAP_DAYS};
use std::collections::BTreeMap;

/// Weight of the prior, in errors found (our choice: two errors of an item's own
/// move its rate about as far as the prior's mean).
pub const PRIOR_ERRORS: f64 = 2.0;
/// Least picks a day an item's prior is scaled by: one pick in the 28 days the pick
/// rate is read over, so an item with no picks (returns, damage, putaways still reach
/// it) keeps a small rate rather than none (our choice).
pub const MIN_PICKS_PER_DAY: f64 = 1.0 / 28.0;
/// Jump size when no error has been found anywhere, units.
pub const DEFAULT_JUMP_UNITS: f64 = 1.0;

/// What one item brings to the estimate.
#[derive(Debug, Clone, Copy)]
pub struct ItemEvidence<'a> {
    pub pool: PoolKey,
    /// Picks a calendar day.
    pub picks_per_day: f64,
    pub points: &'a [ErrorPoint],
}

/// Errors found, days covered, units found and pick-days covered.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
struct Tally {
    errors: f64,
    days: f64,
    units: f64,
    pick_days: f64,
    points: usize,
}

impl Tally {
    fn of(item: &ItemEvidence) -> Self {
        let mut t = Tally::default();
        for p in item.points {
            if !(p.days_since_previous >= MIN_GAP_DAYS && p.error.is_finite()) {
                continue;
            }
            t.points += 1;
            t.days += p.days_since_previous;
            if p.error != 0.0 {
                t.errors += 1.0;
                t.units += p.error.abs();
            }
        }
        t.pick_days = t.days * exposure(item.picks_per_day);
        t
    }

    fn add(&mut self, o: &Tally) {
        self.errors += o.errors;
        self.days += o.days;
        self.units += o.units;
        self.pick_days += o.pick_days;
        self.points += o.points;
    }
}

fn exposure(picks_per_day: f64) -> f64 {
    if picks_per_day.is_finite() {
        picks_per_day.max(MIN_PICKS_PER_DAY)
    } else {
        MIN_PICKS_PER_DAY
    }
}

/// Returns the posterior mean rate `(n + κ) / (exposure + κ / prior)`.
fn shrink_rate(errors: f64, exposure: f64, prior: f64) -> f64 {
    (errors + PRIOR_ERRORS) / (exposure + PRIOR_ERRORS / prior)
}

/// Returns the shrunk mean size `(S + κ·prior) / (n + κ)`.
fn shrink_size(errors: f64, units: f64, prior: f64) -> f64 {
    (units + PRIOR_ERRORS * prior) / (errors + PRIOR_ERRORS)
}

/// Estimates every item's jumps, with where its evidence came from: `Own` when it has
/// points of its own, else `Pooled` when its pool has some, else `Default`.
pub fn estimate(items: &[ItemEvidence]) -> Vec<(Jumps, Source)> {
    let tallies: Vec<Tally> = items.iter().map(Tally::of).collect();
    let mut site = Tally::default();
    let mut pools: BTreeMap<PoolKey, Tally> = BTreeMap::new();
    for (item, t) in items.iter().zip(&tallies) {
        site.add(t);
        pools.entry(item.pool).or_default().add(t);
    }
    let (site_beta, site_size) = if site.errors > 0.0 {
        (site.errors / site.pick_days, site.units / site.errors)
    } else {
        (1.0 / site.pick_days.max(1.0), DEFAULT_JUMP_UNITS)
    };
    let pool_figures: BTreeMap<PoolKey, (f64, f64)> = pools
        .iter()
        .map(|(k, t)| {
            (
                *k,
                (
                    shrink_rate(t.errors, t.pick_days, site_beta),
                    shrink_size(t.errors, t.units, site_size),
                ),
            )
        })
        .collect();
    items
        .iter()
        .zip(&tallies)
        .map(|(item, t)| {
            let (beta, pool_size) = pool_figures[&item.pool];
            let prior = beta * exposure(item.picks_per_day);
            let jumps = Jumps {
                rate: shrink_rate(t.errors, t.days, prior),
                size: shrink_size(t.errors, t.units, pool_size),
            };
            let pool_points = pools[&item.pool].points;
            let source = if t.points > 0 {
                Source::Own { points: t.points }
            } else if pool_points > 0 {
                Source::Pooled {
                    pool: item.pool,
                    points: pool_points,
                }
            } else {
                Source::Default
            };
            (jumps, source)
        })
        .collect()
}

#[cfg(test)]
#[path = "jumps_tests.rs"]
mod tests;
