//! A result's stored evidence (`count_result.evidence`): the netting's
//! [`KeyResult`](crate::netting::rule::KeyResult) as JSON — the opening
//! balance, the feasible book states `F` in event order, which of them is
//! `f*`, the movements inside the window and where an adjustment goes.
//! Read leniently: instants may be RFC 3339 text or integer milliseconds.

use crate::time::Timestamp;
use serde::{Deserialize, Deserializer};

/// An instant as RFC 3339 text or milliseconds since the epoch.
fn instant<'de, D: Deserializer<'de>>(d: D) -> Result<Option<Timestamp>, D::Error> {
    #[derive(Deserialize)]
    #[serde(untagged)]
    enum Raw {
        Ms(i64),
        Text(String),
    }
    match Option::<Raw>::deserialize(d)? {
        None => Ok(None),
        Some(Raw::Ms(ms)) => Ok(Some(Timestamp(ms))),
        Some(Raw::Text(t)) => Timestamp::parse_rfc3339(&t)
            .map(Some)
            .map_err(serde::de::Error::custom),
    }
}

/// One feasible book value.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize)]
pub struct State {
    pub qty: i64,
    /// The event instant of the movements that produced it; `None` for the opening.
    #[serde(default, deserialize_with = "instant")]
    pub at: Option<Timestamp>,
    /// The ledger ids of the movements applied at that instant.
    #[serde(default)]
    pub moves: Vec<i64>,
}

/// The parts of the evidence the review shows and posts from.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize)]
pub struct Evidence {
    #[serde(default)]
    pub opening: i64,
    #[serde(default)]
    pub states: Vec<State>,
    /// The index of `f*` in `states`.
    #[serde(default)]
    pub nearest: Option<usize>,
    /// The ledger ids of the movements inside the window.
    #[serde(default)]
    pub moves_in_window: Vec<i64>,
    /// Where the adjustment of the variance goes.
    #[serde(default, deserialize_with = "instant")]
    pub post_at: Option<Timestamp>,
    #[serde(default)]
    pub status: Option<String>,
}

impl Evidence {
    /// Parses stored evidence: the netting itself, or a record that holds it
    /// under `netting` beside the facts it was computed from.
    pub fn parse(json: &str) -> Result<Self, String> {
        let bad = |e: serde_json::Error| format!("the stored evidence does not parse: {e}");
        let mut v: serde_json::Value = serde_json::from_str(json).map_err(bad)?;
        let netting = match v.get_mut("netting") {
            Some(n) if n.is_object() => n.take(),
            _ => v,
        };
        serde_json::from_value(netting).map_err(bad)
    }

    /// Returns the index of `f*`: the stored one when it points at a state
    /// equal to `f_star`, else the last state equal to `f_star`.
    pub fn f_star_index(&self, f_star: i64) -> Option<usize> {
        match self.nearest {
            Some(i) if self.states.get(i).is_some_and(|s| s.qty == f_star) => Some(i),
            _ => self.states.iter().rposition(|s| s.qty == f_star),
        }
    }

    /// Returns where the adjustment of this result goes: the instant the
    /// netting recorded (`post_at`). Evidence without one cannot be posted
    /// from: the result must be netted again.
    pub fn posting_instant(&self) -> Result<Timestamp, String> {
        self.post_at.ok_or_else(|| {
            "the stored evidence names no posting instant: net the count again before approving"
                .to_string()
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::netting::rule::{CountTiming, KeyCount, MoveId, NetMove, net_key};

    #[test]
    fn the_netting_result_as_stored_reads_back_with_its_posting_instant() {
        // A count of 7 while a pick of 3 happened: F = {10, 7}, f* = 7, but
        // counted 6 gives variance −1 posted at the pick's instant.
        let timing = CountTiming {
            first_scan: Timestamp(10_000),
            done: Some(Timestamp(20_000)),
            clock_uncertainty_ms: 500,
        };
        let moves = [NetMove {
            id: MoveId(41),
            event_at: Timestamp(12_000),
            delta: -3,
            uncertainty_ms: 0,
        }];
        let r = net_key(
            &timing,
            KeyCount::Scanned {
                qty: 6,
                last: Timestamp(15_000),
            },
            10,
            &moves,
        )
        .unwrap();
        let stored = serde_json::to_string(&r).unwrap();
        let e = Evidence::parse(&stored).unwrap();
        assert_eq!(e.opening, 10);
        assert_eq!(e.states.iter().map(|s| s.qty).collect::<Vec<_>>(), [10, 7]);
        assert_eq!(e.states[1].at, Some(Timestamp(12_000)));
        assert_eq!(e.states[1].moves, [41]);
        assert_eq!(e.f_star_index(r.f_star), Some(r.nearest));
        assert_eq!(
            e.posting_instant(),
            Ok(r.adjustment().expect("a variance").event_at)
        );
        assert_eq!(e.moves_in_window, [41]);
    }

    #[test]
    fn instants_may_be_milliseconds_and_a_missing_posting_instant_is_named() {
        let e =
            Evidence::parse(r#"{"opening": 4, "states": [{"qty": 4, "at": null}], "post_at": 99}"#)
                .unwrap();
        assert_eq!(e.posting_instant(), Ok(Timestamp(99)));
        assert_eq!(e.f_star_index(4), Some(0));
        assert_eq!(e.f_star_index(5), None);
        let e = Evidence::parse(r#"{"states": []}"#).unwrap();
        assert!(
            e.posting_instant()
                .unwrap_err()
                .contains("net the count again")
        );
        assert!(Evidence::parse("[").is_err());
    }

    #[test]
    fn the_netting_may_be_held_under_its_own_name() {
        let e = Evidence::parse(
            r#"{"sku": "S1", "netting": {"opening": 3, "states": [{"qty": 3, "at": null}],
                "post_at": "2026-03-03T09:00:00Z"}, "moves": []}"#,
        )
        .unwrap();
        assert_eq!(e.opening, 3);
        assert_eq!(e.post_at, Some(Timestamp(1_772_528_400_000)));
    }
}
