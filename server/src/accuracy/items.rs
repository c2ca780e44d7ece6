//! One item's record-error figures from its count results: counts, hit rate,
//! bias and spread over every count of the item, and the growth of error with
//! the days since the previous count. An item held in several bins (or lots)
//! has one history per bin-lot key: a growth point is the error found at a
//! count of a key and the days since that same key's previous count, and the
//! points of all its keys are fitted together. No I/O.

use super::item_error::{
    self, ErrorGrowth, ErrorPoint, GrowthFit, ItemCount, ItemErrorError, Shortfall,
};
use serde::Serialize;
use std::collections::BTreeMap;

const MS_PER_DAY: f64 = crate::time::DAY_MS as f64;

/// One count of one key of the item.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KeyCount {
    /// The bin and lot, e.g. `A-01-01-1` or `A-01-01-1 lot L7`.
    pub key: String,
    pub count: ItemCount,
}

/// The growth fit as the API and pages show it.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct GrowthView {
    pub points: usize,
    /// `fitted` or `not_enough_data`.
    pub status: &'static str,
    /// Error variance straight after a count, units².
    pub a: Option<f64>,
    /// Growth of error variance per day since the count, units² per day.
    pub b: Option<f64>,
    /// Why there is no fit, in words.
    pub note: Option<String>,
    #[serde(skip)]
    pub growth: ErrorGrowth,
}

impl GrowthView {
    fn of(growth: ErrorGrowth) -> Self {
        let (status, a, b, note) = match growth.fit {
            GrowthFit::Fitted { a, b } => ("fitted", Some(a), Some(b), None),
            GrowthFit::NotEnoughData(Shortfall::TooFewPoints { needed }) => (
                "not_enough_data",
                None,
                None,
                Some(format!(
                    "{} repeat counts of a bin; the fit needs at least {needed}",
                    growth.points
                )),
            ),
            GrowthFit::NotEnoughData(Shortfall::NoSpreadInDays) => (
                "not_enough_data",
                None,
                None,
                Some("the days between counts hardly differ, so growth cannot be told from the error just after a count".into()),
            ),
        };
        Self {
            points: growth.points,
            status,
            a,
            b,
            note,
            growth,
        }
    }

    /// Returns σrec of one key `days` after a count, if fitted.
    pub fn sigma_rec(&self, days: f64) -> Option<f64> {
        self.growth.sigma_rec(days)
    }
}

/// An item's record-error figures.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ItemFigures {
    pub counts: usize,
    pub hits: usize,
    pub hit_rate: Option<f64>,
    /// Mean signed error (counted − book), base units.
    pub bias: Option<f64>,
    /// Sample standard deviation of the error, base units.
    pub error_sd: Option<f64>,
    pub growth: GrowthView,
    /// The growth points, so the fit can be checked.
    pub points: Vec<ErrorPoint>,
}

/// Computes an item's figures from the counts of all its keys.
pub fn item_figures(counts: &[KeyCount]) -> Result<ItemFigures, ItemErrorError> {
    let all: Vec<ItemCount> = counts.iter().map(|k| k.count).collect();
    let summary = item_error::summarize_item(&all)?;
    let mut by_key: BTreeMap<&str, Vec<ItemCount>> = BTreeMap::new();
    for k in counts {
        by_key.entry(&k.key).or_default().push(k.count);
    }
    let mut points = Vec::new();
    for key_counts in by_key.values_mut() {
        key_counts.sort_by_key(|c| c.counted_at);
        for pair in key_counts.windows(2) {
            points.push(ErrorPoint {
                days_since_previous: (pair[1].counted_at.0 - pair[0].counted_at.0) as f64
                    / MS_PER_DAY,
                error: pair[1].error as f64,
            });
        }
    }
    let growth = item_error::fit_error_growth(&points)?;
    Ok(ItemFigures {
        counts: summary.counts,
        hits: summary.hits,
        hit_rate: summary.hit_rate,
        bias: summary.bias,
        error_sd: summary.error_sd,
        growth: GrowthView::of(growth),
        points,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::Timestamp;

    fn kc(key: &str, day: i64, error: i64) -> KeyCount {
        KeyCount {
            key: key.into(),
            count: ItemCount {
                counted_at: Timestamp(day * 86_400_000),
                error,
                hit: error == 0,
            },
        }
    }

    #[test]
    fn growth_points_pair_counts_of_the_same_key_only() {
        // Bin X counted on days 0, 10, 30; bin Y on days 5 and 6. Points: X
        // (10, e₂), (20, e₃); Y (1, e₅). Pairing across bins would give 5-day gaps.
        let counts = [
            kc("X", 0, 0),
            kc("Y", 5, 1),
            kc("X", 10, -2),
            kc("Y", 6, 0),
            kc("X", 30, 3),
        ];
        let f = item_figures(&counts).unwrap();
        let mut pts: Vec<(f64, f64)> = f
            .points
            .iter()
            .map(|p| (p.days_since_previous, p.error))
            .collect();
        pts.sort_by(|a, b| a.partial_cmp(b).unwrap());
        assert_eq!(pts, [(1.0, 0.0), (10.0, -2.0), (20.0, 3.0)]);
        // Errors 0, 1, −2, 0, 3: five counts, the two zeros hits, bias 2 / 5 = 0.4.
        assert_eq!(f.counts, 5);
        assert_eq!(f.hits, 2);
        assert_eq!(f.bias, Some(0.4));
        assert_eq!(f.growth.status, "not_enough_data");
        assert!(f.growth.note.as_deref().unwrap().contains("at least 8"));
    }
}
