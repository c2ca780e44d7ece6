//! A simulated counting day on the demo site, for checking the netting end to end:
//! counters walk bins while picking goes on, the host posts its picks late, and the
//! record errors the history injected (book ≠ shelf) wait to be found. Pure: it turns
//! the book and the truth of each key into the events a phone would send, the movements
//! the host would post (with when each reaches the server), and what a perfect netting
//! should raise. The caller sends them in delivery order and scores what came back.

use rand::Rng;
use rand_chacha::ChaCha8Rng;
use std::collections::BTreeMap;

/// Seconds between two scans of one counter.
const SCAN_GAP_MS: i64 = 20_000;
/// Minutes between the starts of two bins' counts.
const BIN_GAP_MS: i64 = 3 * 60_000;
/// Chance that a key is picked while its bin is being counted (busy demo day).
const P_PICK_DURING: f64 = 0.35;
/// Longest delay between a pick and the host posting it, ms (10 minutes).
pub const MAX_POSTING_DELAY_MS: i64 = 10 * 60_000;

/// One key of a bin as the book and the shelf have it at the start of the day.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KeyStock {
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub book: i64,
    pub truth: i64,
}

/// One line a counter keys.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CountedLine {
    pub sku: String,
    pub lot: String,
    pub qty: i64,
    pub at: i64,
}

/// One counter's pass over one bin.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BinCount {
    pub bin: String,
    pub opened_at: i64,
    pub lines: Vec<CountedLine>,
    pub done_at: i64,
}

/// A pick made during a count, posted `posted_at` by the host.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LatePick {
    pub uid: String,
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub qty: i64,
    pub event_at: i64,
    pub posted_at: i64,
}

/// What a perfect netting says about a key.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Expectation {
    /// Shelf − book before the count: the record error the history injected.
    pub error: i64,
    /// A pick happened during the count of this key: a small error may coincide with a
    /// book state and be netted away, so such keys are not held to the recall goal.
    pub moved_in_window: bool,
}

/// The simulated day.
#[derive(Debug, Clone, Default)]
pub struct CountDay {
    pub counts: Vec<BinCount>,
    pub picks: Vec<LatePick>,
    /// By (bin, sku, lot).
    pub expected: BTreeMap<(String, String, String), Expectation>,
}

/// Simulates one counter walking `keys`' bins (in the order given) from `start`, ms.
/// The counter keys the true quantity of every key with stock on the shelf at the
/// moment of its scan (and nothing for an empty one); picks take 1 to 3 units during
/// the count and reach the server up to [`MAX_POSTING_DELAY_MS`] later.
pub fn simulate(keys: &[KeyStock], start: i64, rng: &mut ChaCha8Rng) -> CountDay {
    let mut by_bin: BTreeMap<&str, Vec<&KeyStock>> = BTreeMap::new();
    let mut order = Vec::new();
    for k in keys {
        if !by_bin.contains_key(k.bin.as_str()) {
            order.push(k.bin.as_str());
        }
        by_bin.entry(&k.bin).or_default().push(k);
    }
    let mut day = CountDay::default();
    for (b, bin) in order.iter().enumerate() {
        let opened = start + b as i64 * BIN_GAP_MS;
        let ks = &by_bin[bin];
        let done = opened + (ks.len() as i64 + 1) * SCAN_GAP_MS;
        let mut lines = Vec::new();
        for (j, k) in ks.iter().enumerate() {
            let scan = opened + (j as i64 + 1) * SCAN_GAP_MS;
            let mut truth = k.truth;
            let mut moved = false;
            // A picker takes from both the book and the shelf (only what is there).
            if k.truth > 0 && k.book > 0 && rng.random_bool(P_PICK_DURING) {
                let q = rng.random_range(1..=3).min(k.truth);
                let at = rng.random_range(opened..done);
                if at <= scan {
                    truth -= q;
                }
                moved = at <= scan + SCAN_GAP_MS / 2;
                day.picks.push(LatePick {
                    uid: format!("day-pick-{b}-{j}"),
                    bin: k.bin.clone(),
                    sku: k.sku.clone(),
                    lot: k.lot.clone(),
                    qty: -q,
                    event_at: at,
                    posted_at: at + rng.random_range(0..=MAX_POSTING_DELAY_MS),
                });
            }
            if truth > 0 {
                lines.push(CountedLine {
                    sku: k.sku.clone(),
                    lot: k.lot.clone(),
                    qty: truth,
                    at: scan,
                });
            }
            day.expected.insert(
                (k.bin.clone(), k.sku.clone(), k.lot.clone()),
                Expectation {
                    error: k.truth - k.book,
                    moved_in_window: moved,
                },
            );
        }
        day.counts.push(BinCount {
            bin: bin.to_string(),
            opened_at: opened,
            lines,
            done_at: done,
        });
    }
    day
}

/// Precision and recall of the differences a netting raised.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Score {
    /// Keys with a record error and no pick during their count.
    pub clear_errors: usize,
    /// Of those, how many were raised (variance ≠ 0).
    pub clear_errors_raised: usize,
    /// Keys raised in all.
    pub raised: usize,
    /// Raised keys that had a record error.
    pub raised_with_error: usize,
    /// Keys with no record error but a pick during the count that were raised anyway.
    pub raised_by_moves_alone: usize,
}

impl Score {
    /// Returns raised-with-error / raised (1 when nothing was raised).
    pub fn precision(&self) -> f64 {
        if self.raised == 0 {
            1.0
        } else {
            self.raised_with_error as f64 / self.raised as f64
        }
    }

    /// Returns the share of clear errors raised (1 when there were none).
    pub fn recall(&self) -> f64 {
        if self.clear_errors == 0 {
            1.0
        } else {
            self.clear_errors_raised as f64 / self.clear_errors as f64
        }
    }
}

/// Scores the variances a netting gave (by key; a key with no result counts as 0).
pub fn score(day: &CountDay, variances: &BTreeMap<(String, String, String), i64>) -> Score {
    let mut s = Score::default();
    for (key, e) in &day.expected {
        let raised = variances.get(key).is_some_and(|v| *v != 0);
        if e.error != 0 && !e.moved_in_window {
            s.clear_errors += 1;
            s.clear_errors_raised += usize::from(raised);
        }
        if raised {
            s.raised += 1;
            s.raised_with_error += usize::from(e.error != 0);
        }
        if raised && e.error == 0 && e.moved_in_window {
            s.raised_by_moves_alone += 1;
        }
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn the_counter_keys_the_shelf_at_the_moment_of_each_scan() {
        let keys = vec![
            KeyStock {
                bin: "A".into(),
                sku: "S1".into(),
                lot: String::new(),
                book: 10,
                truth: 9,
            },
            KeyStock {
                bin: "A".into(),
                sku: "S2".into(),
                lot: String::new(),
                book: 3,
                truth: 0,
            },
        ];
        let day = simulate(&keys, 1_000_000, &mut ChaCha8Rng::seed_from_u64(1));
        assert_eq!(day.counts.len(), 1);
        let c = &day.counts[0];
        assert!(
            c.lines.iter().all(|l| l.sku == "S1"),
            "an empty key is not keyed"
        );
        let picked: i64 = day
            .picks
            .iter()
            .filter(|p| p.event_at <= c.lines[0].at)
            .map(|p| p.qty)
            .sum();
        assert_eq!(c.lines[0].qty, 9 + picked);
        assert_eq!(
            day.expected[&("A".into(), "S2".into(), String::new())].error,
            -3
        );
    }
}
