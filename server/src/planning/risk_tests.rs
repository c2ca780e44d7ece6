use super::*;
use crate::accuracy::item_error::Shortfall;
use proptest::prelude::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const NO_FLOORS: Floors = Floors {
    per_year: [0, 0, 0],
};

fn item(key: i64, growth: Growth, unit_cost: f64, minutes: f64) -> RiskItem {
    RiskItem {
        key,
        class: Class::B,
        drift: Drift::Walk(growth),
        source: Source::Default,
        unit_cost,
        minutes,
        safety_weight: 0.0,
    }
}

fn days(choice: &Choice) -> Vec<f64> {
    choice.intervals.iter().map(|i| i.days).collect()
}

#[test]
fn the_half_normal_mean_matches_a_numeric_integral() {
    // Source: the half-normal distribution, E|X| = σ·sqrt(2/π) for X ~ N(0, σ²)
    // (standard result, stated here from memory; checked by integrating
    // 2·x·φ(x) over [0, 12] with the midpoint rule, not by the same formula).
    let steps = 1_200_000;
    let dx = 12.0 / f64::from(steps);
    let integral: f64 = (0..steps)
        .map(|i| {
            let x = (f64::from(i) + 0.5) * dx;
            2.0 * x * (-x * x / 2.0).exp() / (2.0 * std::f64::consts::PI).sqrt() * dx
        })
        .sum();
    assert!((integral - HALF_NORMAL_MEAN).abs() < 1e-9, "{integral}");
}

#[test]
fn the_closed_form_mean_error_value_matches_a_numeric_average() {
    // f(T) = H(T)/T against the midpoint-rule average of h(t) over [0, T].
    for drift in [
        Drift::Walk(Growth { a: 0.0, b: 2.0 }),
        Drift::Walk(Growth { a: 9.0, b: 0.3 }),
        Drift::Walk(Growth { a: 4.0, b: 0.0 }),
        Drift::Jump(Jumps {
            rate: 0.04,
            size: 1.5,
        }),
    ] {
        let it = RiskItem {
            drift,
            ..item(1, Growth { a: 0.0, b: 1.0 }, 3.5, 1.0)
        };
        let t = 37.0;
        let steps = 200_000;
        let dt = t / f64::from(steps);
        let numeric: f64 = (0..steps)
            .map(|i| error_value_at(&it, (f64::from(i) + 0.5) * dt))
            .sum::<f64>()
            / f64::from(steps);
        let closed = daily_cost(&it, t);
        assert!(
            (numeric - closed).abs() < 1e-6 * closed.max(1.0),
            "{drift:?}: {numeric} vs {closed}"
        );
    }
}

#[test]
fn the_newton_slope_matches_a_finite_difference_of_the_marginal() {
    // The interval search steps by D′(T); a wrong D′ would only slow it, so check it directly.
    for (drift, safety) in [
        (Drift::Walk(Growth { a: 0.0, b: 2.0 }), 0.0),
        (Drift::Walk(Growth { a: 9.0, b: 0.3 }), 1.5),
        (Drift::Walk(Growth { a: 0.5, b: 4.0 }), 0.2),
        (
            Drift::Jump(Jumps {
                rate: 0.05,
                size: 2.0,
            }),
            0.0,
        ),
        (
            Drift::Jump(Jumps {
                rate: 0.3,
                size: 1.5,
            }),
            0.7,
        ),
    ] {
        let it = RiskItem {
            safety_weight: safety,
            drift,
            ..item(1, Growth { a: 0.0, b: 1.0 }, 3.5, 1.0)
        };
        for t in [1.5, 12.0, 300.0] {
            let h = 1e-4 * t;
            let numeric = (marginal(&it, t + h) - marginal(&it, t - h)) / (2.0 * h);
            let exact = marginal_slope(&it, t);
            assert!(
                (numeric - exact).abs() < 1e-6 * exact.abs().max(1.0),
                "{drift:?} q={safety} t={t}: {numeric} vs {exact}"
            );
        }
    }
}

#[test]
fn three_items_get_the_intervals_the_lagrange_condition_gives_by_hand() {
    // Derivation (a = 0, no safety term): with k = sqrt(2/π),
    //   H(T) = k·c·(2/3)·sqrt(b)·T^{3/2}, so the daily cost is f(T) = (2/3)·k·c·sqrt(b)·sqrt(T) = α·sqrt(T).
    // Minimise Σ αᵢ·sqrt(Tᵢ) subject to Σ mᵢ/Tᵢ = M. Lagrangian
    //   L = Σ αᵢ·sqrt(Tᵢ) + λ·(Σ mᵢ/Tᵢ − M),  ∂L/∂Tᵢ = αᵢ/(2·sqrt(Tᵢ)) − λ·mᵢ/Tᵢ² = 0
    //   ⇒ Tᵢ^{3/2} = 2λ·mᵢ/αᵢ  ⇒  Tᵢ ∝ (mᵢ/αᵢ)^{2/3}.
    // Items: 1 (c = 1, b = 1, m = 1), 2 (c = 8: α eight times item 1's, m = 1),
    // 3 (c = 1, b = 1, m = 8). Then T₂ = T₁·(1/8)^{2/3} = T₁/4 and
    // T₃ = T₁·8^{2/3} = 4·T₁. Budget: 1/T₁ + 1/(T₁/4) + 8/(4T₁) = 7/T₁ = M;
    // with M = 0.7 minutes a day, T₁ = 10, T₂ = 2.5, T₃ = 40 days.
    let g = Growth { a: 0.0, b: 1.0 };
    let items = [
        item(1, g, 1.0, 1.0),
        item(2, g, 8.0, 1.0),
        item(3, g, 1.0, 8.0),
    ];
    let choice = choose(&items, 0.7, &NO_FLOORS).unwrap();
    let got = days(&choice);
    for (got, want) in got.iter().zip([10.0, 2.5, 40.0]) {
        assert!((got - want).abs() < 1e-6, "{got} vs {want}");
    }
    assert!((choice.minutes_per_day - 0.7).abs() < 1e-9);
    assert!(!choice.floors_exceed_minutes);
}

fn jump_item(key: i64, rate: f64, size: f64, unit_cost: f64, minutes: f64) -> RiskItem {
    RiskItem {
        drift: Drift::Jump(Jumps { rate, size }),
        ..item(key, Growth { a: 0.0, b: 1.0 }, unit_cost, minutes)
    }
}

#[test]
fn three_jump_items_get_the_square_root_intervals_worked_by_hand() {
    // Derivation (jumps, no safety term): h(t) = c·r·s·t, H(T) = c·r·s·T²/2, so the
    // daily cost is f(T) = H(T)/T = (c·r·s/2)·T = α·T. Minimise Σ αᵢ·Tᵢ subject to
    // Σ mᵢ/Tᵢ = M. Lagrangian L = Σ αᵢ·Tᵢ + λ·(Σ mᵢ/Tᵢ − M),
    //   ∂L/∂Tᵢ = αᵢ − λ·mᵢ/Tᵢ² = 0  ⇒  Tᵢ = sqrt(λ·mᵢ/αᵢ)  ⇒  Tᵢ ∝ sqrt(mᵢ/αᵢ)
    // (the square-root rule). Items: 1 (c = 1, r = 0.1, s = 1, m = 1); 2 as 1 but c = 4
    // (α four times item 1's, T₂ = T₁/2); 3 as 1 but m = 4 (T₃ = 2·T₁). Budget:
    // 1/T₁ + 2/T₁ + 4/(2·T₁) = 5/T₁ = M; with M = 0.5, T₁ = 10, T₂ = 5, T₃ = 20 days.
    let items = [
        jump_item(1, 0.1, 1.0, 1.0, 1.0),
        jump_item(2, 0.1, 1.0, 4.0, 1.0),
        jump_item(3, 0.1, 1.0, 1.0, 4.0),
    ];
    let choice = choose(&items, 0.5, &NO_FLOORS).unwrap();
    for (got, want) in days(&choice).iter().zip([10.0, 5.0, 20.0]) {
        assert!((got - want).abs() < 1e-6, "{got} vs {want}");
    }
    assert!((choice.minutes_per_day - 0.5).abs() < 1e-9);
    // The rate and the size enter only as their product r·s: halving one and doubling
    // the other leaves the interval.
    let swapped = [
        jump_item(1, 0.05, 2.0, 1.0, 1.0),
        jump_item(2, 0.2, 0.5, 4.0, 1.0),
        jump_item(3, 0.1, 1.0, 1.0, 4.0),
    ];
    let again = choose(&swapped, 0.5, &NO_FLOORS).unwrap();
    for (a, b) in days(&choice).iter().zip(days(&again)) {
        assert!((a - b).abs() < 1e-6, "{a} vs {b}");
    }
}

#[test]
fn the_jump_charge_is_exact_for_one_signed_jumps_and_a_close_upper_bound_for_symmetric_ones() {
    use rand_distr::{Distribution, Poisson};
    // One-signed jumps (every unbooked pick leaves the book above the shelf): |e(T)| is
    // the sum of the jump sizes, E = r·T·E|J| (Wald's identity). Checked by drawing
    // 200,000 seeded paths with sizes 1 or 2 units (mean 1.5), not by the same formula.
    let (rate, t) = (0.3, 20.0);
    let drift = Drift::Jump(Jumps { rate, size: 1.5 });
    let mut rng = ChaCha8Rng::seed_from_u64(22);
    let poisson = Poisson::new(rate * t).unwrap();
    let paths = 200_000;
    let mut total = 0.0;
    for _ in 0..paths {
        let n = poisson.sample(&mut rng) as u32;
        total += (0..n)
            .map(|_| if rng.random_bool(0.5) { 1.0 } else { 2.0 })
            .sum::<f64>();
    }
    let drawn = total / f64::from(paths);
    let charged = drift.expected_abs(t);
    assert!(
        (drawn - charged).abs() < 0.01 * charged,
        "{drawn} vs {charged}"
    );
    // Symmetric jumps of ±s: E|e(T)| = s·Σₙ P(N = n)·E|Sₙ|, Sₙ a simple random walk,
    // E|Sₙ| summed over its binomial law here. While r·T ≤ 0.1 two jumps rarely meet, so
    // the linear charge r·T·s is an upper bound (triangle inequality) within 5 %.
    let exact_symmetric = |mean: f64| -> f64 {
        let mut p = (-mean).exp();
        let mut sum = 0.0;
        for n in 0..60u32 {
            if n > 0 {
                p *= mean / f64::from(n);
            }
            // E|Sₙ| = Σₖ C(n, k)·2⁻ⁿ·|2k − n|.
            let mut c = 1.0;
            let mut e = 0.0;
            for k in 0..=n {
                if k > 0 {
                    c *= f64::from(n - k + 1) / f64::from(k);
                }
                e += c * 0.5f64.powi(n as i32) * (2.0 * f64::from(k) - f64::from(n)).abs();
            }
            sum += p * e;
        }
        sum
    };
    for mean in [0.01, 0.05, 0.1] {
        let size = 2.0;
        let t = 10.0;
        let drift = Drift::Jump(Jumps {
            rate: mean / t,
            size,
        });
        let exact = size * exact_symmetric(mean);
        let charged = drift.expected_abs(t);
        assert!(charged >= exact, "{charged} < {exact}");
        assert!(charged <= 1.05 * exact, "λT {mean}: {charged} vs {exact}");
    }
}

#[test]
fn an_item_whose_error_does_not_grow_is_left_at_its_longest_interval() {
    // No growth means counting sooner cannot lower its error: all minutes go to the other.
    let items = [
        item(1, Growth { a: 25.0, b: 0.0 }, 100.0, 1.0),
        item(2, Growth { a: 0.0, b: 1.0 }, 1.0, 1.0),
    ];
    let choice = choose(&items, 0.2, &NO_FLOORS).unwrap();
    let got = days(&choice);
    assert_eq!(got[0], MAX_INTERVAL_DAYS);
    assert!(choice.intervals[0].at_floor);
    // The rest of the budget: 1/T₂ = 0.2 − 1/730.
    assert!((1.0 / got[1] - (0.2 - 1.0 / MAX_INTERVAL_DAYS)).abs() < 1e-9);
}

/// Brute force over a log grid of intervals for two items: the least cost within the budget.
fn brute_two(items: &[RiskItem; 2], budget: f64, maxes: [f64; 2]) -> f64 {
    const GRID: u32 = 800;
    let grid = |max: f64| -> Vec<f64> {
        (0..=GRID)
            .map(|i| {
                MIN_INTERVAL_DAYS * (max / MIN_INTERVAL_DAYS).powf(f64::from(i) / f64::from(GRID))
            })
            .collect()
    };
    let (g0, g1) = (grid(maxes[0]), grid(maxes[1]));
    let mut best = f64::INFINITY;
    for &t0 in &g0 {
        for &t1 in &g1 {
            if items[0].minutes / t0 + items[1].minutes / t1 <= budget {
                best = best.min(total_cost(items, &[t0, t1]));
            }
        }
    }
    best
}

#[test]
fn the_choice_is_no_worse_than_brute_force_on_small_random_instances() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x0c0_ffee);
    let floors = Floors {
        per_year: [12, 4, 0],
    };
    for case in 0..40 {
        let classes = [Class::A, Class::B, Class::C];
        let items: [RiskItem; 2] = std::array::from_fn(|i| RiskItem {
            key: i as i64,
            class: classes[rng.random_range(0..3)],
            drift: if rng.random_bool(0.3) {
                Drift::Jump(Jumps {
                    rate: rng.random_range(0.001..0.5),
                    size: rng.random_range(0.5..5.0),
                })
            } else {
                Drift::Walk(Growth {
                    a: if rng.random_bool(0.5) {
                        0.0
                    } else {
                        rng.random_range(0.0..20.0)
                    },
                    b: rng.random_range(0.01..5.0),
                })
            },
            source: Source::Default,
            unit_cost: rng.random_range(0.5..200.0),
            minutes: rng.random_range(0.5..10.0),
            safety_weight: if rng.random_bool(0.5) {
                0.0
            } else {
                rng.random_range(0.0..2.0)
            },
        });
        let maxes = [
            floors.max_days(items[0].class),
            floors.max_days(items[1].class),
        ];
        let least = items[0].minutes / maxes[0] + items[1].minutes / maxes[1];
        let budget = least * rng.random_range(1.05..20.0);
        let choice = choose(&items, budget, &floors).unwrap();
        let cost = total_cost(&items, &days(&choice));
        let brute = brute_two(&items, budget, maxes);
        assert!(
            choice.minutes_per_day <= budget * (1.0 + 1e-9),
            "case {case}"
        );
        assert!(
            cost <= brute * (1.0 + 1e-9),
            "case {case}: {cost} > brute {brute}"
        );
        // And the grid gets close, so both looked at the same problem.
        assert!(
            brute <= cost * 1.01,
            "case {case}: brute {brute} far above {cost}"
        );
    }
}

#[test]
fn floors_are_respected_and_a_short_day_is_reported() {
    let floors = Floors {
        per_year: [12, 4, 1],
    };
    let mut a = item(1, Growth { a: 0.0, b: 0.001 }, 0.01, 5.0);
    a.class = Class::A;
    let mut c = item(2, Growth { a: 0.0, b: 100.0 }, 500.0, 1.0);
    c.class = Class::C;
    // Enough minutes: the cheap A item would drift to a long interval but stops at 365/12 days.
    let choice = choose(&[a, c], 1.0, &floors).unwrap();
    assert!((choice.intervals[0].days - 365.0 / 12.0).abs() < 1e-9);
    assert!(choice.intervals[0].at_floor);
    assert!(choice.intervals[1].days < 365.0 / 12.0);
    // Fewer minutes than the floors need: everything at its floor, and said so.
    let need = 5.0 / (365.0 / 12.0) + 1.0 / 365.0;
    let short = choose(&[a, c], need * 0.5, &floors).unwrap();
    assert!(short.floors_exceed_minutes);
    assert_eq!(days(&short), vec![365.0 / 12.0, 365.0]);
}

#[test]
fn growth_comes_from_the_item_then_its_pool_then_the_default() {
    let pool = PoolKey {
        class: Class::A,
        zone: 3,
        band: RateBand::of(2.0),
        replenished: false,
    };
    assert_eq!(pool.band, RateBand::Busy);
    let own = ErrorGrowth {
        points: 9,
        fit: GrowthFit::Fitted { a: 1.0, b: 2.0 },
    };
    let none = ErrorGrowth {
        points: 2,
        fit: GrowthFit::NotEnoughData(Shortfall::TooFewPoints { needed: 8 }),
    };
    let pooled = ErrorGrowth {
        points: 40,
        fit: GrowthFit::Fitted { a: 0.5, b: 0.25 },
    };
    let default = Growth { a: 0.0, b: 0.1 };
    assert_eq!(
        pick_growth(&own, pool, Some(&pooled), default),
        (Growth { a: 1.0, b: 2.0 }, Source::Own { points: 9 })
    );
    assert_eq!(
        pick_growth(&none, pool, Some(&pooled), default),
        (
            Growth { a: 0.5, b: 0.25 },
            Source::Pooled { pool, points: 40 }
        )
    );
    assert_eq!(
        pick_growth(&none, pool, Some(&none), default),
        (default, Source::Default)
    );
    assert_eq!(
        pick_growth(&none, pool, None, default),
        (default, Source::Default)
    );
}

#[test]
fn pick_rates_fall_into_their_bands() {
    assert_eq!(RateBand::of(0.0), RateBand::Slow);
    assert_eq!(RateBand::of(f64::NAN), RateBand::Slow);
    assert_eq!(RateBand::of(1.0 / 7.0), RateBand::Steady);
    assert_eq!(RateBand::of(1.0), RateBand::Busy);
    assert_eq!(RateBand::of(10.0), RateBand::Fast);
}

#[test]
fn bad_figures_are_refused_by_name() {
    let good = item(7, Growth { a: 0.0, b: 1.0 }, 1.0, 1.0);
    let mut bad = good;
    bad.drift = Drift::Walk(Growth {
        a: 0.0,
        b: f64::NAN,
    });
    assert_eq!(
        choose(&[good, bad], 1.0, &NO_FLOORS),
        Err(RiskError::BadFigure { key: 7, what: "b" })
    );
    let mut bad = good;
    bad.minutes = 0.0;
    assert_eq!(
        choose(&[bad], 1.0, &NO_FLOORS),
        Err(RiskError::NoMinutes { key: 7 })
    );
    assert_eq!(choose(&[good], 0.0, &NO_FLOORS), Err(RiskError::BadBudget));
    let bad = jump_item(8, -0.1, 1.0, 1.0, 1.0);
    assert_eq!(
        choose(&[good, bad], 1.0, &NO_FLOORS),
        Err(RiskError::BadFigure {
            key: 8,
            what: "jump rate"
        })
    );
    assert_eq!(
        choose(
            &[good],
            1.0,
            &Floors {
                per_year: [400, 0, 0]
            }
        ),
        Err(RiskError::BadFloor {
            class: "A",
            per_year: 400
        })
    );
}

proptest! {
    #[test]
    fn intervals_stay_in_bounds_and_within_the_minutes(
        figures in prop::collection::vec((0.0..50.0f64, 0.0..10.0f64, 0.0..500.0f64, 0.1..20.0f64, 0usize..3), 1..30),
        budget in 0.01..50.0f64,
    ) {
        let floors = Floors { per_year: [24, 6, 0] };
        let items: Vec<RiskItem> = figures
            .iter()
            .enumerate()
            .map(|(i, &(a, b, c, m, class))| RiskItem {
                class: Class::ALL[class],
                ..item(i as i64, Growth { a, b }, c, m)
            })
            .collect();
        let choice = choose(&items, budget, &floors).unwrap();
        for (it, iv) in items.iter().zip(&choice.intervals) {
            prop_assert!(iv.days >= MIN_INTERVAL_DAYS && iv.days <= floors.max_days(it.class) + 1e-9);
        }
        if !choice.floors_exceed_minutes {
            prop_assert!(choice.minutes_per_day <= budget * (1.0 + 1e-9));
        }
    }
}
