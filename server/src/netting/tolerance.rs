//! Tolerance and recount (DESIGN §5): whether a netted variance is a hit, and
//! what a recount says about the first count. Integers only: percentages in
//! basis points, money in minor units; no I/O.

use super::rule::KeyResult;
use crate::planning::abc::Class;
use serde::{Deserialize, Serialize};

/// Basis points in 100 %.
pub const BASIS_POINTS_PER_WHOLE: i64 = 10_000;

/// The limits a variance must keep. A limit left `None` is not checked; a
/// variance is within tolerance when it keeps every limit that is set. With no
/// limit set at all the tolerance is exact (0 units), so a forgotten setting
/// sends counts to recount rather than letting any difference pass.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct Tolerance {
    /// Largest |variance| in base units.
    #[serde(default)]
    pub units: Option<i64>,
    /// Largest |variance| as a share of |f*|, in basis points (200 = 2 %).
    #[serde(default)]
    pub percent_bp: Option<i64>,
    /// Largest |variance| × unit cost, in minor units of money.
    #[serde(default)]
    pub value_minor: Option<i64>,
}

/// A limit of a [`Tolerance`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Limit {
    Units,
    Percent,
    Value,
}

/// The judgement of one variance.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(tag = "verdict", rename_all = "snake_case")]
pub enum Verdict {
    /// Variance 0.
    Exact,
    /// Non-zero but within every limit: a hit (may be adjusted automatically
    /// if the site allows it).
    WithinTolerance,
    /// Outside at least one limit; `breached` names them.
    OutOfTolerance { breached: Vec<Limit> },
    /// Out whatever the variance: the count's times cannot be trusted (the phone's clock
    /// stepped while the bin was counted, or the pass spans hours), so its window may be
    /// stretched. `reason` says why in plain words; `variance` is how the variance alone
    /// was judged.
    Held {
        reason: String,
        #[schema(no_recursion)]
        variance: Box<Verdict>,
    },
}

impl Verdict {
    /// Says whether this counts as a hit for record accuracy.
    pub fn is_hit(&self) -> bool {
        !matches!(self, Verdict::OutOfTolerance { .. } | Verdict::Held { .. })
    }
}

impl Tolerance {
    /// The exact tolerance: any non-zero variance is out.
    pub const EXACT: Tolerance = Tolerance {
        units: Some(0),
        percent_bp: None,
        value_minor: None,
    };

    /// Builds a tolerance of one percentage limit, in basis points.
    pub const fn percent(bp: i64) -> Tolerance {
        Tolerance {
            units: None,
            percent_bp: Some(bp),
            value_minor: None,
        }
    }

    /// Checks the settings: no limit may be negative, and a percentage is at
    /// most 100 % (beyond it, a count of nothing would pass against any book).
    pub fn check(&self) -> Result<(), String> {
        for (name, v) in [
            ("units", self.units),
            ("percent_bp", self.percent_bp),
            ("value_minor", self.value_minor),
        ] {
            if let Some(v) = v
                && v < 0
            {
                return Err(format!("tolerance {name} must not be negative, found {v}"));
            }
        }
        // Upper limits keep |variance| compared with and multiplied against them in i64.
        if let Some(u) = self.units {
            crate::input::bounds::check_at_most(
                "tolerance units",
                u,
                crate::ledger::MAX_ABS_QTY,
                "base units",
            )?;
        }
        if let Some(v) = self.value_minor {
            crate::input::bounds::check_at_most(
                "tolerance value_minor",
                v,
                crate::input::bounds::MAX_MONEY_MINOR,
                "minor units",
            )?;
        }
        if let Some(bp) = self.percent_bp
            && bp > BASIS_POINTS_PER_WHOLE
        {
            return Err(format!(
                "tolerance percent_bp must be at most {BASIS_POINTS_PER_WHOLE} (100 %), found {bp}"
            ));
        }
        Ok(())
    }
}

/// The tolerance of each ABC class.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ClassTolerances {
    pub a: Tolerance,
    pub b: Tolerance,
    pub c: Tolerance,
}

impl Default for ClassTolerances {
    /// Returns A exact, B 2 %, C 5 % (common practice, no source).
    fn default() -> Self {
        Self {
            a: Tolerance::EXACT,
            b: Tolerance::percent(200),
            c: Tolerance::percent(500),
        }
    }
}

impl ClassTolerances {
    /// Returns the tolerance of a class.
    pub fn for_class(&self, class: Class) -> Tolerance {
        match class {
            Class::A => self.a,
            Class::B => self.b,
            Class::C => self.c,
        }
    }
}

/// Judges a variance against a tolerance: `|v| ≤ units`, `|v| × 10 000 ≤
/// bp × |f*|` and `|v| × |unit cost| ≤ value`, for each limit that is set.
/// The percent limit of `f* = 0` is 0, so found stock never passes it.
pub fn judge(variance: i64, f_star: i64, unit_cost_minor: i64, tolerance: &Tolerance) -> Verdict {
    if variance == 0 {
        return Verdict::Exact;
    }
    let t = if tolerance.units.is_none()
        && tolerance.percent_bp.is_none()
        && tolerance.value_minor.is_none()
    {
        Tolerance::EXACT
    } else {
        *tolerance
    };
    // i128 holds every product of two i64 magnitudes.
    let v = i128::from(variance.unsigned_abs());
    let mut breached = Vec::new();
    if let Some(units) = t.units
        && v > i128::from(units)
    {
        breached.push(Limit::Units);
    }
    if let Some(bp) = t.percent_bp
        && v * i128::from(BASIS_POINTS_PER_WHOLE)
            > i128::from(bp) * i128::from(f_star.unsigned_abs())
    {
        breached.push(Limit::Percent);
    }
    if let Some(value) = t.value_minor
        && v * i128::from(unit_cost_minor.unsigned_abs()) > i128::from(value)
    {
        breached.push(Limit::Value);
    }
    if breached.is_empty() {
        Verdict::WithinTolerance
    } else {
        Verdict::OutOfTolerance { breached }
    }
}

/// What a recount says about a first count that was out of tolerance.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum RecountOutcome {
    /// The recount found the same difference: it goes to review.
    DifferenceConfirmed,
    /// The recount agrees with the book: the record was right (a hit) and the
    /// first count was wrong, which is logged against that count.
    BookRight,
    /// The recount agrees with neither, or cannot tell them apart: a supervisor counts.
    SupervisorCount,
}

/// Classifies a recount against the first count and the book.
///
/// Both counts are compared in book terms, through their own nettings: stock
/// may move between the two counts, so equal raw quantities can mean different
/// things. "Agrees" means equal first (the recount's variance equals the first
/// variance, or is 0); failing that, within the class tolerance of the recount's
/// `f*` (|v₂ − v₁| for the first count, |v₂| for the book). Within tolerance of
/// both, or of neither, needs a supervisor.
pub fn recount_outcome(
    first: &KeyResult,
    recount: &KeyResult,
    unit_cost_minor: i64,
    tolerance: &Tolerance,
) -> RecountOutcome {
    let (v1, v2) = (first.variance, recount.variance);
    if v2 == 0 {
        return RecountOutcome::BookRight;
    }
    if v2 == v1 {
        return RecountOutcome::DifferenceConfirmed;
    }
    let near_book = judge(v2, recount.f_star, unit_cost_minor, tolerance).is_hit();
    let near_first = judge(
        v2.saturating_sub(v1),
        recount.f_star,
        unit_cost_minor,
        tolerance,
    )
    .is_hit();
    match (near_first, near_book) {
        (true, false) => RecountOutcome::DifferenceConfirmed,
        (false, true) => RecountOutcome::BookRight,
        _ => RecountOutcome::SupervisorCount,
    }
}
