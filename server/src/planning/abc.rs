//! ABC classification: rank a site's items by what they issued over a trailing
//! window (usage value or pick hits) and cut the cumulative share into classes.
//! Pure arithmetic in integers; no I/O.

use crate::time::DAY_MS;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::fmt;

/// An item's importance class for counting.
#[derive(
    Debug,
    Clone,
    Copy,
    PartialEq,
    Eq,
    PartialOrd,
    Ord,
    Hash,
    Serialize,
    Deserialize,
    utoipa::ToSchema,
)]
pub enum Class {
    A,
    B,
    C,
}

impl Class {
    /// Every class, most important first.
    pub const ALL: [Class; 3] = [Class::A, Class::B, Class::C];

    /// Returns the stored and wire form.
    pub fn as_str(self) -> &'static str {
        match self {
            Class::A => "A",
            Class::B => "B",
            Class::C => "C",
        }
    }

    /// Parses the stored form.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|c| c.as_str() == text)
    }

    /// Returns 0 for A, 1 for B, 2 for C: an index into per-class tables.
    pub fn index(self) -> usize {
        self as usize
    }
}

impl fmt::Display for Class {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// What items are ranked by.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum, utoipa::ToSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum Basis {
    /// Issued quantity times unit cost (annual usage value).
    Value,
    /// Number of pick movements.
    Hits,
}

impl Basis {
    /// Returns the stored and wire form.
    pub fn as_str(self) -> &'static str {
        match self {
            Basis::Value => "value",
            Basis::Hits => "hits",
        }
    }

    /// Parses the stored form.
    pub fn parse(text: &str) -> Option<Self> {
        [Basis::Value, Basis::Hits]
            .into_iter()
            .find(|b| b.as_str() == text)
    }
}

/// How a site is classified.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct AbcRule {
    pub basis: Basis,
    /// Cumulative share (percent) of the basis that class A covers.
    pub a_pct: u32,
    /// Cumulative share (percent) that A and B together cover.
    pub b_pct: u32,
    /// Trailing window of issues, in calendar days.
    pub window_days: u32,
}

impl Default for AbcRule {
    /// Returns A to 80 %, B to 95 % of usage value over 365 days (common practice, no source).
    fn default() -> Self {
        Self {
            basis: Basis::Value,
            a_pct: 80,
            b_pct: 95,
            window_days: 365,
        }
    }
}

/// Longest trailing window a rule may name, in days.
pub const MAX_WINDOW_DAYS: u32 = 3_660;

impl AbcRule {
    /// Checks the cut-offs and window; returns what is wrong.
    pub fn check(&self) -> Result<(), String> {
        if !(self.a_pct > 0 && self.a_pct <= self.b_pct && self.b_pct <= 100) {
            return Err(format!(
                "cut-offs must satisfy 0 < A ({}) <= B ({}) <= 100",
                self.a_pct, self.b_pct
            ));
        }
        if self.window_days == 0 || self.window_days > MAX_WINDOW_DAYS {
            return Err(format!(
                "the window must be 1 to {MAX_WINDOW_DAYS} days, not {}",
                self.window_days
            ));
        }
        Ok(())
    }
}

/// One item's issues over the window.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Usage {
    pub item: i64,
    /// Issued base units times unit cost, in minor units.
    pub value_minor: i64,
    /// Pick movements.
    pub hits: i64,
    /// The event time of the item's first movement at the site (ms), if it has one.
    pub first_seen_ms: Option<i64>,
    /// The item has a class from an earlier run.
    pub classified: bool,
}

/// Least ledger history, in days up to the end of the run's day, an item needs before a
/// run gives it its first class (common practice, no source: about a month of issues
/// before usage says anything). A younger item never classified stays unclassified, and
/// so is counted and held to tolerance as class A, instead of looking like a slow C
/// because it has had no time to issue anything.
pub const MIN_HISTORY_DAYS: i64 = 30;

/// Leaves out of `classes` (in `usage`'s order, as `classify` returns them) every item never
/// classified whose first movement is less than `MIN_HISTORY_DAYS` before `run_end_ms`
/// (the end of the run's day), or that has no movement at all: it stays unclassified. An
/// item with a class keeps being reclassified whatever its age.
pub fn hold_new_items(
    classes: Vec<(i64, Class)>,
    usage: &[Usage],
    run_end_ms: i64,
) -> Vec<(i64, Class)> {
    let least = run_end_ms.saturating_sub(MIN_HISTORY_DAYS * DAY_MS);
    classes
        .into_iter()
        .zip(usage)
        .filter(|(_, u)| u.classified || u.first_seen_ms.is_some_and(|f| f <= least))
        .map(|(c, _)| c)
        .collect()
}

/// Classifies items: ranked by the basis (largest first, ties by item id), an
/// item belongs to the class its cumulative share *before* it falls in, so the
/// item that crosses a cut-off stays in the higher class. Items that issued
/// nothing are C. Returns classes in the input's order.
pub fn classify(usage: &[Usage], rule: &AbcRule) -> Vec<(i64, Class)> {
    let key = |u: &Usage| match rule.basis {
        Basis::Value => u.value_minor.max(0),
        Basis::Hits => u.hits.max(0),
    };
    let total: i128 = usage.iter().map(|u| i128::from(key(u))).sum();
    let mut order: Vec<usize> = (0..usage.len()).collect();
    order.sort_by(|&x, &y| {
        key(&usage[y])
            .cmp(&key(&usage[x]))
            .then(usage[x].item.cmp(&usage[y].item))
    });
    let mut class = vec![Class::C; usage.len()];
    let mut before: i128 = 0;
    for i in order {
        let k = i128::from(key(&usage[i]));
        if k == 0 {
            break;
        }
        class[i] = if before * 100 < i128::from(rule.a_pct) * total {
            Class::A
        } else if before * 100 < i128::from(rule.b_pct) * total {
            Class::B
        } else {
            Class::C
        };
        before += k;
    }
    usage.iter().zip(class).map(|(u, c)| (u.item, c)).collect()
}

/// Returns the items whose new class differs from their current one (or that
/// had none): the rows a class history keeps.
pub fn changes(current: &HashMap<i64, Class>, new: &[(i64, Class)]) -> Vec<(i64, Class)> {
    new.iter()
        .filter(|(item, class)| current.get(item) != Some(class))
        .copied()
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn u(item: i64, value_minor: i64, hits: i64) -> Usage {
        Usage {
            item,
            value_minor,
            hits,
            first_seen_ms: Some(0),
            classified: false,
        }
    }

    #[test]
    fn a_new_item_never_classified_stays_unclassified_until_it_has_a_month_of_history() {
        let end = 100 * DAY_MS;
        let mut usage = [u(1, 900, 9), u(2, 0, 0), u(3, 0, 0), u(4, 0, 0), u(5, 0, 0)];
        // Item 2 arrived yesterday, item 3 exactly 30 days before the end of the run's
        // day, item 4 never moved, item 5 is young but was classified before.
        usage[1].first_seen_ms = Some(end - DAY_MS);
        usage[2].first_seen_ms = Some(end - 30 * DAY_MS);
        usage[3].first_seen_ms = None;
        usage[4].first_seen_ms = Some(end - DAY_MS);
        usage[4].classified = true;
        let classes = classify(&usage, &AbcRule::default());
        let kept = hold_new_items(classes, &usage, end);
        assert_eq!(kept, vec![(1, Class::A), (3, Class::C), (5, Class::C)]);
    }

    #[test]
    fn ten_items_split_by_cumulative_value() {
        // Values sum to 1,000: 500 + 300 reach 80 %, + 100 + 50 reach 95 %.
        let usage = [
            u(1, 500, 1),
            u(2, 300, 1),
            u(3, 100, 1),
            u(4, 50, 1),
            u(5, 20, 9),
            u(6, 10, 9),
            u(7, 10, 9),
            u(8, 5, 9),
            u(9, 5, 9),
            u(10, 0, 0),
        ];
        let got: Vec<Class> = classify(&usage, &AbcRule::default())
            .into_iter()
            .map(|x| x.1)
            .collect();
        use Class::*;
        assert_eq!(got, [A, A, B, B, C, C, C, C, C, C]);
    }

    #[test]
    fn the_item_that_crosses_a_cut_off_stays_in_the_higher_class() {
        // One item with 90 % of the value is still A, not B.
        let got = classify(&[u(1, 900, 0), u(2, 100, 0)], &AbcRule::default());
        assert_eq!(got, vec![(1, Class::A), (2, Class::B)]);
    }

    #[test]
    fn pick_hits_rank_by_count_not_value() {
        let rule = AbcRule {
            basis: Basis::Hits,
            ..AbcRule::default()
        };
        let got = classify(&[u(1, 10_000, 10), u(2, 1, 90)], &rule);
        assert_eq!(got, vec![(1, Class::B), (2, Class::A)]);
    }

    #[test]
    fn items_that_issued_nothing_are_c_even_when_nothing_issued() {
        let got = classify(&[u(1, 0, 0), u(2, 0, 0)], &AbcRule::default());
        assert_eq!(got, vec![(1, Class::C), (2, Class::C)]);
    }

    #[test]
    fn only_changed_classes_go_into_the_history() {
        let current = HashMap::from([(1, Class::A), (2, Class::B)]);
        let new = [(1, Class::A), (2, Class::C), (3, Class::B)];
        assert_eq!(changes(&current, &new), vec![(2, Class::C), (3, Class::B)]);
    }

    #[test]
    fn cut_offs_out_of_order_are_refused() {
        let bad = AbcRule {
            a_pct: 96,
            ..AbcRule::default()
        };
        assert!(bad.check().unwrap_err().contains("cut-offs"));
        assert!(AbcRule::default().check().is_ok());
    }
}
