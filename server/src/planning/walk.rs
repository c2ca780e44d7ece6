//! Walking order and the split into runs. Bins are walked zone by zone (in the
//! zone's sequence), aisle by aisle in a serpentine (up the first aisle with
//! work, down the next), then by bay and level. The walk is cut into
//! contiguous runs, one per counter, with the longest run as short as
//! possible. No I/O.

use std::ops::Range;

/// Where a bin is, as far as walking is concerned.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Place {
    pub zone_seq: i64,
    pub zone: i64,
    pub aisle: u16,
    pub bay: u16,
    pub level: u8,
    /// 0 left, 1 right, 2 unknown: both sides of a bay are taken together.
    pub side: u8,
    pub walk_seq: i64,
}

/// Returns the indices of `places` in walking order. An aisle's direction
/// alternates among the aisles of a zone that have work, starting upwards
/// (rising bay numbers) in each zone.
pub fn walk_order(places: &[Place]) -> Vec<usize> {
    let mut order: Vec<usize> = (0..places.len()).collect();
    let base = |p: &Place| (p.zone_seq, p.zone, p.aisle);
    order.sort_by_key(|&i| base(&places[i]));
    // Number the aisles of each zone in visiting order.
    let mut down = vec![false; places.len()];
    let mut prev: Option<(i64, i64, u16)> = None;
    let mut ordinal = 0u32;
    for &i in &order {
        let p = &places[i];
        match prev {
            Some((s, z, a)) if (s, z) == (p.zone_seq, p.zone) => {
                if a != p.aisle {
                    ordinal += 1;
                }
            }
            _ => ordinal = 0,
        }
        prev = Some(base(p));
        down[i] = ordinal % 2 == 1;
    }
    order.sort_by_key(|&i| {
        let p = &places[i];
        let bay = if down[i] { u16::MAX - p.bay } else { p.bay };
        (
            p.zone_seq, p.zone, p.aisle, bay, p.level, p.side, p.walk_seq, i,
        )
    });
    order
}

/// Cuts a walk of task times into contiguous ranges, one per run, covering it
/// in order. Run `i` already carries `offsets[i]` seconds (its share of an
/// earlier pass); the cut makes the longest run, offset included, as short as
/// possible. Returns one range per offset (empty ones when work runs out).
pub fn split(seconds: &[i64], offsets: &[i64]) -> Vec<Range<usize>> {
    assert!(!offsets.is_empty(), "a plan has at least one counter");
    let most = offsets.iter().copied().max().unwrap_or(0);
    let (mut lo, mut hi) = (0, most + seconds.iter().sum::<i64>());
    while lo < hi {
        let mid = lo + (hi - lo) / 2;
        if pieces(seconds, offsets, mid).is_some() {
            hi = mid
        } else {
            lo = mid + 1
        }
    }
    pieces(seconds, offsets, lo).expect("the whole walk fits in the first run at the upper bound")
}

/// Greedy cut: each run takes tasks while it stays within `limit`; `None`
/// when tasks are left over after the last run.
fn pieces(seconds: &[i64], offsets: &[i64], limit: i64) -> Option<Vec<Range<usize>>> {
    let mut out = Vec::with_capacity(offsets.len());
    let mut start = 0;
    for &offset in offsets {
        let mut load = offset;
        let mut end = start;
        while end < seconds.len() && load + seconds[end] <= limit {
            load += seconds[end];
            end += 1;
        }
        out.push(start..end);
        start = end;
    }
    (start == seconds.len()).then_some(out)
}

/// Returns the largest total of any run, its offset included.
pub fn longest(seconds: &[i64], offsets: &[i64], ranges: &[Range<usize>]) -> i64 {
    ranges
        .iter()
        .zip(offsets)
        .map(|(r, o)| o + seconds[r.clone()].iter().sum::<i64>())
        .max()
        .unwrap_or(0)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn place(zone: i64, aisle: u16, bay: u16, level: u8) -> Place {
        Place {
            zone_seq: zone,
            zone,
            aisle,
            bay,
            level,
            side: 0,
            walk_seq: 0,
        }
    }

    #[test]
    fn the_second_aisle_is_walked_downwards_and_zones_restart_upwards() {
        let p = [
            place(1, 2, 1, 1),
            place(1, 2, 3, 1),
            place(1, 1, 2, 2),
            place(1, 1, 2, 1),
            place(2, 9, 1, 1),
            place(2, 9, 5, 1),
        ];
        // Aisle 1 up (bay 2, levels 1 then 2), aisle 2 down (bay 3 then 1), zone 2 up again.
        assert_eq!(walk_order(&p), vec![3, 2, 1, 0, 4, 5]);
    }

    #[test]
    fn an_aisle_without_work_does_not_flip_the_direction() {
        // Aisles 1 and 3 have work, 2 has none: 3 is the second aisle walked, so it goes down.
        let p = [place(1, 3, 1, 1), place(1, 3, 4, 1), place(1, 1, 1, 1)];
        assert_eq!(walk_order(&p), vec![2, 1, 0]);
    }

    #[test]
    fn a_split_balances_the_longest_run() {
        let s = [5, 5, 5, 5, 10, 10];
        let r = split(&s, &[0, 0, 0]);
        assert_eq!(r, vec![0..3, 3..5, 5..6]);
        assert_eq!(longest(&s, &[0, 0, 0], &r), 15);
    }

    #[test]
    fn a_second_pass_evens_out_what_the_first_pass_gave() {
        // Run 1 already has 20 s of urgent work: it takes less of the main walk.
        let s = [10, 10, 10, 10];
        let r = split(&s, &[20, 0]);
        assert_eq!(r, vec![0..1, 1..4]);
        assert_eq!(longest(&s, &[20, 0], &r), 30);
    }

    #[test]
    fn more_counters_than_tasks_leave_empty_runs() {
        assert_eq!(split(&[7], &[0, 0, 0]), vec![0..1, 1..1, 1..1]);
        assert_eq!(split(&[], &[0, 0]), vec![0..0, 0..0]);
    }

    fn places() -> impl Strategy<Value = Vec<Place>> {
        prop::collection::vec((0i64..3, 1u16..6, 1u16..12, 1u8..4, 0u8..3), 0..80).prop_map(|v| {
            v.into_iter()
                .map(|(z, a, b, l, s)| Place {
                    zone_seq: z,
                    zone: z,
                    aisle: a,
                    bay: b,
                    level: l,
                    side: s,
                    walk_seq: 0,
                })
                .collect()
        })
    }

    proptest! {
        #[test]
        fn the_walk_is_a_serpentine_visiting_every_bin_once(p in places()) {
            let order = walk_order(&p);
            let mut seen = order.clone();
            seen.sort_unstable();
            prop_assert_eq!(seen, (0..p.len()).collect::<Vec<_>>());
            // Zones in sequence, aisles rising within a zone, bays up then down by visited aisle.
            let mut ordinal = 0usize;
            for w in order.windows(2) {
                let (a, b) = (&p[w[0]], &p[w[1]]);
                prop_assert!((a.zone_seq, a.zone) <= (b.zone_seq, b.zone));
                if (a.zone_seq, a.zone) != (b.zone_seq, b.zone) {
                    ordinal = 0;
                    continue;
                }
                prop_assert!(a.aisle <= b.aisle);
                if a.aisle != b.aisle {
                    ordinal += 1;
                    continue;
                }
                if ordinal.is_multiple_of(2) {
                    prop_assert!((a.bay, a.level) <= (b.bay, b.level));
                } else {
                    prop_assert!(a.bay > b.bay || (a.bay == b.bay && a.level <= b.level));
                }
            }
        }

        #[test]
        fn runs_are_contiguous_cover_every_task_once_and_are_no_longer_than_needed(
            s in prop::collection::vec(1i64..600, 0..120),
            runs in 1usize..8,
        ) {
            let offsets = vec![0; runs];
            let r = split(&s, &offsets);
            prop_assert_eq!(r.len(), runs);
            let mut next = 0;
            for range in &r {
                prop_assert_eq!(range.start, next);
                next = range.end;
            }
            prop_assert_eq!(next, s.len());
            // No cut can beat the longest run by more than the largest task's worth
            // of slack, and the longest run is never below the ideal share.
            let total: i64 = s.iter().sum();
            let max_task = s.iter().copied().max().unwrap_or(0);
            let long = longest(&s, &offsets, &r);
            prop_assert!(long * runs as i64 >= total);
            prop_assert!(long <= total / runs as i64 + max_task);
        }
    }
}
