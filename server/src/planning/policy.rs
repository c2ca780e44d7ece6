//! A site's frequency policy — how each item's count interval is set — and
//! the figures that say why a due bin is on the day's list. Pure; no I/O.
//!
//! * `abc` (the default): each class is counted so many times a year
//!   ([`super::due::Frequency`]).
//! * `risk`: each item's interval is chosen by [`super::risk::choose`] from its
//!   record error arriving in jumps ([`super::jumps`]: a rate learned from its counts
//!   and its picks, and a size), unit cost and minutes per count, within the same
//!   counter-minutes a day that the `abc` frequencies take (the level; see
//!   [`risk_plan`]), so switching moves minutes between items without adding any.
//! * `blend`: as `risk`, but no class is counted less often than its floor
//!   (counts a year; 0 sets none).
//!
//! Dead stock keeps its own `abc` frequency under every policy.

use super::abc::Class;
use super::jumps::{self, ItemEvidence};
use super::plan::{self, PlanInput};
use super::risk::{self, Drift, Floors, PoolKey, RateBand, RiskError, RiskItem, Source};
use crate::accuracy::item_error::{self, ErrorPoint};
use crate::batch::FieldError;
use chrono::NaiveDate;
use serde::Serialize;
use serde_json::Value;
use std::collections::HashMap;

/// Most counts a year a floor may ask for (one a day).
pub const MAX_FLOOR_PER_YEAR: u32 = 365;
/// Days of picks an item's pick rate is taken over, for its pool (four weeks: recent
/// enough to band its traffic, short enough that reading it stays a small part of planning).
pub const DEMAND_DAYS: i64 = 28;

/// How a site sets its count intervals.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Mode {
    #[default]
    Abc,
    Risk,
    Blend,
}

impl Mode {
    /// Every mode, in the order forms list them.
    pub const ALL: [Mode; 3] = [Mode::Abc, Mode::Risk, Mode::Blend];

    /// Returns the stored and wire form.
    pub fn as_str(self) -> &'static str {
        match self {
            Mode::Abc => "abc",
            Mode::Risk => "risk",
            Mode::Blend => "blend",
        }
    }

    /// Parses the stored and wire form.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|m| m.as_str() == text)
    }
}

/// A site's frequency policy.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct FrequencyPolicy {
    pub policy: Mode,
    /// Least counts a year of A, B and C under `blend`; kept but unused otherwise.
    pub floor_a: u32,
    pub floor_b: u32,
    pub floor_c: u32,
}

/// A change of the frequency policy as sent: [`FrequencyPolicy::from_json`] reads it
/// field by field so each fault is named; this type describes it in the API document.
#[derive(Debug, Clone, Copy, PartialEq, Eq, utoipa::ToSchema)]
pub struct FrequencyPolicyChange {
    pub policy: Mode,
    /// Least counts a year of class A under `blend`, 0 (no floor) to 365; left out: kept.
    pub floor_a: Option<u32>,
    /// As `floor_a`, for class B.
    pub floor_b: Option<u32>,
    /// As `floor_a`, for class C.
    pub floor_c: Option<u32>,
}

impl Default for FrequencyPolicy {
    /// Returns `abc`, with floors of 12 / 4 / 1 ready for `blend` (the `abc` defaults).
    fn default() -> Self {
        Self {
            policy: Mode::Abc,
            floor_a: 12,
            floor_b: 4,
            floor_c: 1,
        }
    }
}

impl FrequencyPolicy {
    /// Returns the floors the risk choice keeps to: the stored ones under `blend`, none under `risk`.
    pub fn floors(&self) -> Floors {
        match self.policy {
            Mode::Blend => Floors {
                per_year: [self.floor_a, self.floor_b, self.floor_c],
            },
            _ => Floors { per_year: [0; 3] },
        }
    }

    /// Reads a policy from its JSON form, `{"policy", "floor_a", "floor_b", "floor_c"}`
    /// (floors may be left out: they keep `current`'s); returns every field at fault.
    pub fn from_json(body: &Value, current: &Self) -> Result<Self, Vec<FieldError>> {
        let mut errors = Vec::new();
        let Some(obj) = body.as_object() else {
            return Err(vec![FieldError::new("body", "must be a JSON object")]);
        };
        for key in obj.keys() {
            if !["policy", "floor_a", "floor_b", "floor_c"].contains(&key.as_str()) {
                errors.push(FieldError::new(
                    key.clone(),
                    "is not a field of the frequency policy (policy, floor_a, floor_b, floor_c)",
                ));
            }
        }
        let policy = match obj.get("policy") {
            None => {
                errors.push(FieldError::new("policy", "is required: abc, risk or blend"));
                None
            }
            Some(v) => {
                let found = v.as_str().and_then(Mode::parse);
                if found.is_none() {
                    errors.push(FieldError::new(
                        "policy",
                        format!("must be abc, risk or blend, found {v}"),
                    ));
                }
                found
            }
        };
        let mut floor = |name: &str, kept: u32| match obj.get(name) {
            None => kept,
            Some(v) => match v.as_u64().filter(|&n| n <= u64::from(MAX_FLOOR_PER_YEAR)) {
                Some(n) => n as u32,
                None => {
                    errors.push(FieldError::new(
                        name,
                        format!(
                            "must be a whole number of counts a year from 0 (no floor) to {MAX_FLOOR_PER_YEAR}, found {v}"
                        ),
                    ));
                    kept
                }
            },
        };
        let floor_a = floor("floor_a", current.floor_a);
        let floor_b = floor("floor_b", current.floor_b);
        let floor_c = floor("floor_c", current.floor_c);
        match policy {
            Some(policy) if errors.is_empty() => Ok(Self {
                policy,
                floor_a,
                floor_b,
                floor_c,
            }),
            _ => Err(errors),
        }
    }
}

/// One item's worth and traffic as the store reads them for the risk choice.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ItemWorth {
    pub item: i64,
    pub sku: String,
    pub unit_cost_minor: i64,
    /// Pick movements in the window asked for.
    pub picks: i64,
}

/// What the planner knows of one item's record error and worth, for the risk choice.
#[derive(Debug, Clone, PartialEq)]
pub struct ItemHistory {
    pub unit_cost_minor: i64,
    /// Picks a day over the last [`DEMAND_DAYS`].
    pub picks_per_day: f64,
    /// Its growth points (days since the count before, error found), its own only.
    pub points: Vec<ErrorPoint>,
}

/// Where an item's error figures came from, as the list shows it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GrowthWhy {
    /// `item` (its own counts, with its picks' prior), `pool` (no counts of its own: its
    /// class × zone × pick-rate band's rate per pick) or `site` (neither: the site's).
    pub from: &'static str,
    /// The pool, e.g. `class C, zone 2, busy` (for `pool`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pool: Option<String>,
    /// Repeat counts behind the figures (the item's, its pool's or the site's).
    pub points: usize,
    /// Record errors expected a day, and their mean size in units.
    pub jumps_a_day: f64,
    pub jump_units: f64,
}

/// The risk figures of one item.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ItemRisk {
    /// The interval in the site's working days (at least 1).
    pub working_days: i64,
    /// The interval chosen, in calendar days.
    pub days: f64,
    /// Expected absolute error value just before its next count, minor units.
    pub error_value_due: f64,
    pub unit_cost_minor: i64,
    pub growth: GrowthWhy,
    /// Its class floor, not its risk, set the interval.
    pub at_floor: bool,
    #[serde(skip)]
    pub fit: Drift,
}

impl ItemRisk {
    /// Returns the risk score `days` calendar days after a count: the expected
    /// absolute error value standing then, `c·r·s·days`, minor units.
    pub fn score_at(&self, days: f64) -> f64 {
        self.unit_cost_minor as f64 * self.fit.expected_abs(days.max(0.0))
    }
}

/// Intervals set by risk for a day's plan, one entry per item of the [`PlanInput`].
#[derive(Debug, Clone, PartialEq)]
pub struct RiskPlan {
    pub mode: Mode,
    /// `None` for dead stock and items in no bin (they keep their `abc` interval).
    pub items: Vec<Option<ItemRisk>>,
    /// Counter-minutes a calendar day the choice was given: the `abc` level.
    pub budget_minutes: f64,
    /// The floors alone take more than the budget: every item is at its floor.
    pub floors_exceed_minutes: bool,
}

fn pool_name(p: &PoolKey, zones: &HashMap<i64, &str>) -> String {
    let band = match p.band {
        RateBand::Slow => "slow",
        RateBand::Steady => "steady",
        RateBand::Busy => "busy",
        RateBand::Fast => "fast",
    };
    format!(
        "class {}, zone {}, {band} picking, {}",
        p.class,
        zones.get(&p.zone).copied().unwrap_or("?"),
        if p.replenished {
            "more than one bin"
        } else {
            "one bin"
        }
    )
}

/// Chooses the interval of every item by risk within the minutes the `abc`
/// frequencies take a day (their level, [`plan::level_s`]), keeping to
/// `policy`'s floors. `history` is one entry per item of `input`.
pub fn risk_plan(
    input: &PlanInput,
    history: &[ItemHistory],
    policy: &FrequencyPolicy,
) -> Result<RiskPlan, RiskError> {
    assert_eq!(
        history.len(),
        input.items.len(),
        "the service reads one history per item"
    );
    let wdy = input.calendar.working_days_in_year(input.day).max(1) as f64;
    let seconds = plan::bin_seconds(input);
    let intervals = plan::abc_intervals(input);
    let abc_level_s = plan::level_s(input, &seconds, |_, it| plan::abc_interval(&intervals, it));
    // The level is seconds per working day; the choice works in calendar days.
    let budget_minutes = abc_level_s / 60.0 * wdy / 365.0;
    let zones: HashMap<i64, &str> = input
        .bins
        .iter()
        .map(|b| (b.place.zone, b.zone.as_str()))
        .collect();

    let planned: Vec<usize> = (0..input.items.len())
        .filter(|&i| !input.items[i].dead && !input.items[i].bins.is_empty())
        .collect();
    let pool_of = |i: usize| {
        let it = &input.items[i];
        PoolKey {
            class: it.class,
            zone: input.bins[it.bins[0] as usize].place.zone,
            band: RateBand::of(history[i].picks_per_day),
            replenished: it.bins.len() > 1,
        }
    };
    let evidence: Vec<ItemEvidence> = planned
        .iter()
        .map(|&i| {
            let points = &history[i].points;
            ItemEvidence {
                pool: pool_of(i),
                picks_per_day: history[i].picks_per_day,
                points: &points[..points.len().min(item_error::MAX_POINTS)],
            }
        })
        .collect();
    let estimated = jumps::estimate(&evidence);
    let site_points: usize = estimated
        .iter()
        .map(|(_, source)| match source {
            Source::Own { points } => *points,
            _ => 0,
        })
        .sum();

    let mut items = Vec::with_capacity(planned.len());
    let mut whys = Vec::with_capacity(planned.len());
    for (&i, &(jumps, source)) in planned.iter().zip(&estimated) {
        let it = &input.items[i];
        let h = &history[i];
        let (from, pool, points) = match source {
            Source::Own { points } => ("item", None, points),
            Source::Pooled { pool, points } => ("pool", Some(pool_name(&pool, &zones)), points),
            Source::Default => ("site", None, site_points),
        };
        let why = GrowthWhy {
            from,
            pool,
            points,
            jumps_a_day: jumps.rate,
            jump_units: jumps.size,
        };
        let minutes: f64 = it
            .bins
            .iter()
            .map(|&b| seconds[b as usize] as f64)
            .sum::<f64>()
            / 60.0;
        items.push(RiskItem {
            key: i as i64,
            class: it.class,
            drift: Drift::Jump(jumps),
            source,
            unit_cost: h.unit_cost_minor.max(0) as f64,
            minutes: minutes.max(1.0 / 60.0),
            safety_weight: 0.0,
        });
        whys.push(why);
    }
    let mut out = RiskPlan {
        mode: policy.policy,
        items: vec![None; input.items.len()],
        budget_minutes,
        floors_exceed_minutes: false,
    };
    if items.is_empty() || budget_minutes <= 0.0 {
        return Ok(out);
    }
    let choice = risk::choose(&items, budget_minutes, &policy.floors())?;
    out.floors_exceed_minutes = choice.floors_exceed_minutes;
    for ((item, interval), why) in items.iter().zip(&choice.intervals).zip(whys) {
        // Floors are whole working days too: never round an interval past its floor.
        let floor_wd = match policy.floors().per_year[item.class.index()] {
            0 => i64::MAX,
            n => super::due::interval_days(wdy as i64, n),
        };
        let working_days = ((interval.days * wdy / 365.0).round() as i64)
            .max(1)
            .min(floor_wd);
        out.items[item.key as usize] = Some(ItemRisk {
            working_days,
            days: interval.days,
            error_value_due: interval.error_value_due,
            unit_cost_minor: item.unit_cost as i64,
            growth: why,
            at_floor: interval.at_floor || working_days == floor_wd,
            fit: item.drift,
        });
    }
    Ok(out)
}

/// The figures behind a due task, as the list's JSON shows them.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Why {
    pub policy: Mode,
    pub class: Class,
    /// Dead stock: no stock and no movement for a year (its own `abc` frequency).
    pub dead_stock: bool,
    /// The item's interval, in working days.
    pub interval_working_days: i64,
    pub last_counted: Option<NaiveDate>,
    /// Working days since that count; `None` when never counted.
    pub working_days_since: Option<i64>,
    /// Under `risk` and `blend`: the score and the figures behind it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub risk: Option<RiskWhy>,
}

/// The risk part of [`Why`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RiskWhy {
    /// Expected absolute error value standing today, minor units.
    pub score: f64,
    /// Expected absolute error value when its interval has run, minor units.
    pub error_value_due: f64,
    /// The interval chosen, calendar days.
    pub interval_days: f64,
    pub unit_cost_minor: i64,
    pub growth: GrowthWhy,
    pub at_floor: bool,
}

fn round2(x: f64) -> f64 {
    (x * 100.0).round() / 100.0
}

impl Why {
    /// Builds the figures of an item due on `day`, last counted on `last` (if ever).
    pub fn of(
        mode: Mode,
        class: Class,
        dead_stock: bool,
        interval: i64,
        last: Option<(NaiveDate, i64)>,
        day: NaiveDate,
        risk: Option<&ItemRisk>,
    ) -> Self {
        let risk = risk.map(|r| {
            let since = last.map_or(r.days, |(d, _)| (day - d).num_days() as f64);
            RiskWhy {
                score: round2(r.score_at(since)),
                error_value_due: round2(r.error_value_due),
                interval_days: round2(r.days),
                unit_cost_minor: r.unit_cost_minor,
                growth: r.growth.clone(),
                at_floor: r.at_floor,
            }
        });
        Self {
            policy: if risk.is_some() { mode } else { Mode::Abc },
            class,
            dead_stock,
            interval_working_days: interval,
            last_counted: last.map(|(d, _)| d),
            working_days_since: last.map(|(_, n)| n),
            risk,
        }
    }

    /// Says in words why the bin is on the list (the task's detail).
    pub fn sentence(&self) -> String {
        let last = match (self.last_counted, self.working_days_since) {
            (Some(d), Some(n)) => format!("last counted {d}, {n} working days ago"),
            _ => "never counted".to_string(),
        };
        match &self.risk {
            None if self.dead_stock => format!(
                "dead stock, every {} working days; {last}",
                self.interval_working_days
            ),
            None => format!(
                "class {} every {} working days; {last}",
                self.class, self.interval_working_days
            ),
            Some(r) => {
                let g = &r.growth;
                let from = match (g.from, &g.pool) {
                    ("item", _) => format!("its own {} repeat counts and its picks", g.points),
                    (_, Some(pool)) => {
                        format!("its picks and {} repeat counts of {pool}", g.points)
                    }
                    _ if g.points > 0 => {
                        format!("its picks and {} repeat counts site-wide", g.points)
                    }
                    _ => "its picks: no repeat counts yet".to_string(),
                };
                // A rate of errors a day reads as "0.000" for slow items; the days between
                // errors read at every size.
                let growth = if g.jumps_a_day > 0.0 {
                    format!(
                        "an error of {:.1} units every {:.0} days or so, from {from}",
                        g.jump_units,
                        1.0 / g.jumps_a_day
                    )
                } else {
                    format!("no error expected, from {from}")
                };
                let floor = if r.at_floor {
                    ", held by the class floor"
                } else {
                    ""
                };
                format!(
                    "risk {:.0}: expected error worth {:.0} now and {:.0} by the end of its interval \
                     (unit cost {}, {growth}); every {} working days{floor}, class {}; {last}",
                    r.score,
                    r.score,
                    r.error_value_due,
                    r.unit_cost_minor,
                    self.interval_working_days,
                    self.class
                )
            }
        }
    }
}

#[cfg(test)]
#[path = "policy_tests.rs"]
mod tests;
