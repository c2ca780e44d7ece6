use super::*;
use crate::planning::abc::Class;
use crate::planning::risk::RateBand;

fn pool(zone: i64) -> PoolKey {
    PoolKey {
        class: Class::B,
        zone,
        band: RateBand::Busy,
        replenished: false,
    }
}

fn pt(days: f64, error: f64) -> ErrorPoint {
    ErrorPoint {
        days_since_previous: days,
        error,
    }
}

fn close(got: f64, want: f64) {
    assert!((got - want).abs() < 1e-12, "{got} vs {want}");
}

#[test]
fn three_items_in_two_pools_get_the_rates_and_sizes_worked_by_hand() {
    // κ = 2. A (pool 1, 1 pick a day): errors +2, 0, −1 over 3 × 10 days: n 2, D 30, S 3.
    // B (pool 1, 0.5 a day): no counts. C (pool 2, 2 a day): 0 and +4 over 2 × 20 days:
    // n 1, D 40, S 4, pick-days 80.
    // Site: n 3 in 110 pick-days, β = 3/110; size 7/3.
    // Pool 1: β₁ = (2 + 2) / (30 + 2·110/3) = 6/155; s₁ = (3 + 2·7/3) / 4 = 23/12.
    // Pool 2: β₂ = (1 + 2) / (80 + 2·110/3) = 9/460; s₂ = (4 + 2·7/3) / 3 = 26/9.
    // A: λ₀ = 6/155, λ = 4 / (30 + 2·155/6) = 12/245; s = (3 + 2·23/12) / 4 = 41/24.
    // B: λ₀ = 3/155, λ = 2 / (0 + 2·155/3) = 3/155 (its prior); s = s₁ = 23/12.
    // C: λ₀ = 2·9/460 = 9/230, λ = 3 / (40 + 2·230/9) = 27/820; s = (4 + 2·26/9) / 3 = 88/27.
    let a = [pt(10.0, 2.0), pt(10.0, 0.0), pt(10.0, -1.0)];
    let c = [pt(20.0, 0.0), pt(20.0, 4.0)];
    let items = [
        ItemEvidence {
            pool: pool(1),
            picks_per_day: 1.0,
            points: &a,
        },
        ItemEvidence {
            pool: pool(1),
            picks_per_day: 0.5,
            points: &[],
        },
        ItemEvidence {
            pool: pool(2),
            picks_per_day: 2.0,
            points: &c,
        },
    ];
    let got = estimate(&items);
    close(got[0].0.rate, 12.0 / 245.0);
    close(got[0].0.size, 41.0 / 24.0);
    close(got[1].0.rate, 3.0 / 155.0);
    close(got[1].0.size, 23.0 / 12.0);
    close(got[2].0.rate, 27.0 / 820.0);
    close(got[2].0.size, 88.0 / 27.0);
    assert_eq!(got[0].1, Source::Own { points: 3 });
    assert_eq!(
        got[1].1,
        Source::Pooled {
            pool: pool(1),
            points: 3
        }
    );
    // C found less than its picks predicted (one error in 40 days against 9/230 a day
    // ≈ 1.6 expected): its rate falls below its prior.
    assert!(got[2].0.rate < 9.0 / 230.0);
}

#[test]
fn with_no_error_found_anywhere_rates_follow_picks() {
    // β = 1 / max(E, 1) = 1 with nothing counted; each item's rate is then its prior,
    // (0 + 2) / (0 + 2 / (β·p)) = β·p, and its size the default.
    let items: Vec<ItemEvidence> = [0.0, 0.5, 3.0]
        .iter()
        .map(|&p| ItemEvidence {
            pool: pool(1),
            picks_per_day: p,
            points: &[],
        })
        .collect();
    let got = estimate(&items);
    close(got[0].0.rate, MIN_PICKS_PER_DAY);
    close(got[1].0.rate, 0.5);
    close(got[2].0.rate, 3.0);
    for (j, source) in &got {
        assert_eq!(j.size, DEFAULT_JUMP_UNITS);
        assert_eq!(*source, Source::Default);
    }
}

#[test]
fn a_same_day_recount_is_no_evidence_of_a_new_jump() {
    // The recount re-finds the first count's error; it would double-count it.
    let with = [pt(30.0, 1.0), pt(0.2, 1.0)];
    let without = [pt(30.0, 1.0)];
    let one = |points: &[ErrorPoint]| {
        estimate(&[ItemEvidence {
            pool: pool(1),
            picks_per_day: 1.0,
            points,
        }])[0]
    };
    assert_eq!(one(&with), one(&without));
}

#[test]
fn an_item_with_a_long_record_is_estimated_by_its_own_rate() {
    // 200 counts 10 days apart, every fifth finding 3 units, beside a pool mate that
    // found nothing in 20 days: the item's own rate (40 in 2,000 days, 0.02) outweighs
    // the prior (κ/λ₀ is small beside 2,000 days).
    let mut points = Vec::new();
    for i in 0..200 {
        points.push(pt(10.0, if i % 5 == 0 { 3.0 } else { 0.0 }));
    }
    let other = [pt(20.0, 0.0)];
    let got = estimate(&[
        ItemEvidence {
            pool: pool(1),
            picks_per_day: 1.0,
            points: &points,
        },
        ItemEvidence {
            pool: pool(1),
            picks_per_day: 1.0,
            points: &other,
        },
    ]);
    assert!((got[0].0.rate - 0.02).abs() < 0.001, "{:?}", got[0]);
    assert!((got[0].0.size - 3.0).abs() < 0.01, "{:?}", got[0]);
}
