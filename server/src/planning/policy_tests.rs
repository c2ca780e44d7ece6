use super::*;
use crate::planning::Settings;
use crate::planning::calendar::Calendar;
use crate::planning::plan::{BinFacts, Capacity, Fill, ItemFacts};
use crate::planning::walk::Place;
use serde_json::json;

/// A site of `classes.len()` items, one bin each, in one zone.
fn input(classes: &[Class]) -> PlanInput {
    let bins = (0..classes.len())
        .map(|i| BinFacts {
            id: i as i64 + 1,
            code: format!("A-01-{:02}-1", i + 1),
            zone: "A".into(),
            place: Place {
                zone_seq: 0,
                zone: 1,
                aisle: 1,
                bay: 1 + i as u16,
                level: 1,
                side: 0,
                walk_seq: 0,
            },
            lines: 1,
            last_count: None,
        })
        .collect();
    let items = classes
        .iter()
        .enumerate()
        .map(|(i, &class)| ItemFacts {
            id: i as i64 + 1,
            class,
            dead: false,
            bins: vec![i as u32],
        })
        .collect();
    PlanInput {
        day: NaiveDate::from_ymd_opt(2026, 3, 2).expect("a valid date"),
        calendar: Calendar::default(),
        settings: Settings::default(),
        bins,
        items,
        triggers: Vec::new(),
        recounts: Vec::new(),
        zone_time: HashMap::new(),
        capacity: Capacity {
            counters: 1,
            minutes: 60,
        },
        fill: Fill::Capacity,
        counting_since: None,
        watermark: 0,
        risk: None,
    }
}

#[test]
fn an_item_replenished_from_a_second_bin_is_pooled_apart_from_single_bin_items() {
    // Two B items picking twice a day in zone A: the first, in one bin, has 4 counts
    // finding errors; the second has none and is also held in a reserve bin, so its
    // pool (class B, zone A, busy, more than one bin) has no counts and it takes the
    // site's rate per pick, not the single-bin pool's.
    let mut input = input(&[Class::B, Class::B, Class::B]);
    input.items[1].bins.push(2);
    input.items.truncate(2);
    let own = ItemHistory {
        unit_cost_minor: 100,
        picks_per_day: 2.0,
        points: (0..4)
            .map(|_| ErrorPoint {
                days_since_previous: 10.0,
                error: 1.0,
            })
            .collect(),
    };
    let none = ItemHistory {
        points: Vec::new(),
        ..own.clone()
    };
    let plan = plan_under_risk(&input, &[own, none]);
    let apart = interval(&plan, 1);
    assert_eq!((apart.growth.from, apart.growth.points), ("site", 4));
    assert_eq!(apart.growth.pool, None);
    // By hand (`jumps` module notes, κ = 2): the counted item covers 40 days, 80
    // pick-days, with 4 errors: the site's β = 1/20 a pick. The reserve-held item's
    // pool is empty, so its β is the site's and its rate 2·(1/20) = 0.1 a day.
    assert!(
        (apart.growth.jumps_a_day - 0.1).abs() < 1e-12,
        "{:?}",
        apart.growth
    );
}

/// Plans `input` under `risk` (no floors) with one history per item.
fn plan_under_risk(input: &PlanInput, history: &[ItemHistory]) -> RiskPlan {
    risk_plan(
        input,
        history,
        &FrequencyPolicy {
            policy: Mode::Risk,
            ..FrequencyPolicy::default()
        },
    )
    .expect("valid figures")
}

/// An item's history: 10 counts 20 days apart, `errors` of them finding `units` units,
/// one pick a day, and its unit cost.
fn counted(errors: usize, units: f64, cost: i64) -> ItemHistory {
    ItemHistory {
        unit_cost_minor: cost,
        picks_per_day: 1.0,
        points: (0..10)
            .map(|k| ErrorPoint {
                days_since_previous: 20.0,
                error: if k < errors { units } else { 0.0 },
            })
            .collect(),
    }
}

/// The jumps the plan chose an item's interval with.
fn jumps_of(r: &ItemRisk) -> risk::Jumps {
    match r.fit {
        Drift::Jump(j) => j,
        Drift::Walk(_) => panic!("the wired policy plans with jumps"),
    }
}

fn interval(plan: &RiskPlan, i: usize) -> &ItemRisk {
    plan.items[i]
        .as_ref()
        .expect("a stocked item gets an interval")
}

#[test]
fn an_error_prone_c_item_is_counted_more_often_than_a_clean_a_item() {
    // Same cost, picks and minutes; in 10 counts the C item found 6 errors of 2 units,
    // the A item none. With jumps D(T) = c·r·s·T²/2 (module notes of `risk`), so
    // T_C / T_A = sqrt((r_A·s_A) / (r_C·s_C)) when neither is at a bound.
    let mut input = input(&[Class::A, Class::C, Class::B, Class::B]);
    let history = vec![
        counted(0, 0.0, 1_000),
        counted(6, 2.0, 1_000),
        counted(1, 1.0, 1_000),
        counted(1, 1.0, 1_000),
    ];
    let policy = FrequencyPolicy {
        policy: Mode::Risk,
        ..FrequencyPolicy::default()
    };
    let plan = risk_plan(&input, &history, &policy).expect("valid figures");
    let (a, c) = (interval(&plan, 0), interval(&plan, 1));
    assert!(
        c.days < a.days,
        "C every {} days, A every {}",
        c.days,
        a.days
    );
    let ratio = c.days / a.days;
    let (ja, jc) = (jumps_of(a), jumps_of(c));
    let want = (ja.rate * ja.size / (jc.rate * jc.size)).sqrt();
    assert!(
        want < 1.0,
        "the C item's errors arrive faster: {ja:?} {jc:?}"
    );
    assert!((ratio - want).abs() < 1e-6, "{ratio} vs {want}");
    assert_eq!(c.growth.from, "item");
    assert_eq!(c.growth.points, 10);
    assert_eq!(c.growth.jumps_a_day, jc.rate);
    // The budget is the abc level: 12 + 1 + 4 + 4 counts a year of 150 s bins.
    let wdy = input.calendar.working_days_in_year(input.day) as f64;
    let level_s: f64 = [12u32, 1, 4, 4]
        .iter()
        .map(|&f| 150.0 / crate::planning::due::interval_days(wdy as i64, f) as f64)
        .sum();
    assert!((plan.budget_minutes - level_s / 60.0 * wdy / 365.0).abs() < 1e-9);
    // Planned with it, the list's order follows: with every item never counted and
    // counting begun long ago, the C item is the most overdue relative to its interval.
    input.counting_since = NaiveDate::from_ymd_opt(2025, 3, 2);
    input.capacity.minutes = 3;
    input.risk = Some(plan);
    let built = crate::planning::plan::build(&input);
    assert_eq!(built.tasks.len(), 1, "{:?}", built.tasks);
    assert_eq!(built.tasks[0].bin, 1, "{:?}", built.tasks);
    let why = built.tasks[0].why.as_ref().expect("a due task says why");
    assert_eq!(why.policy, Mode::Risk);
    assert!(why.risk.is_some());
    assert!(
        built.tasks[0].detail.starts_with("risk "),
        "{}",
        built.tasks[0].detail
    );
    // Under abc the A item leads instead.
    input.risk = None;
    let built = crate::planning::plan::build(&input);
    assert_eq!(built.tasks[0].bin, 0, "{:?}", built.tasks);
    assert!(
        built.tasks[0].detail.starts_with("class A every "),
        "{}",
        built.tasks[0].detail
    );
}

#[test]
fn blend_floors_hold_every_class_to_its_least_counts_a_year() {
    // A stable, cheap A item would be left two years alone by risk; the floor of 12
    // a year holds it to the abc interval of 12 a year.
    let input = input(&[Class::A, Class::C, Class::C]);
    let history = vec![
        counted(0, 0.0, 1),
        counted(5, 3.0, 10_000),
        counted(5, 3.0, 10_000),
    ];
    let risk = plan_under_risk(&input, &history);
    let wdy = input.calendar.working_days_in_year(input.day);
    let floor_wd = crate::planning::due::interval_days(wdy, 12);
    assert!(interval(&risk, 0).working_days > floor_wd);
    let blend = risk_plan(
        &input,
        &history,
        &FrequencyPolicy {
            policy: Mode::Blend,
            floor_a: 12,
            floor_b: 4,
            floor_c: 1,
        },
    )
    .expect("valid figures");
    let a = interval(&blend, 0);
    assert!(a.working_days <= floor_wd, "{a:?}");
    assert!(a.at_floor);
    for i in 1..3 {
        assert!(interval(&blend, i).working_days <= crate::planning::due::interval_days(wdy, 1));
    }
}

#[test]
fn items_without_counts_take_their_pool_then_the_site() {
    // One B item with 4 counts of its own, one B item without (same pool: class B,
    // zone A, busy picking, one bin), one C item without (its pool has no counts), and an A item
    // whose 4 counts found nothing. All pick twice a day.
    let input = input(&[Class::B, Class::B, Class::C, Class::A]);
    let own = ItemHistory {
        unit_cost_minor: 100,
        picks_per_day: 2.0,
        points: (0..4)
            .map(|k| ErrorPoint {
                days_since_previous: 10.0 + 5.0 * k as f64,
                error: 1.0 + k as f64,
            })
            .collect(),
    };
    let none = ItemHistory {
        points: Vec::new(),
        ..own.clone()
    };
    let clean = ItemHistory {
        points: own
            .points
            .iter()
            .map(|p| ErrorPoint { error: 0.0, ..*p })
            .collect(),
        ..own.clone()
    };
    let plan = plan_under_risk(&input, &[own, none.clone(), none, clean]);
    let b = interval(&plan, 0);
    assert_eq!((b.growth.from, b.growth.points), ("item", 4));
    let pooled = interval(&plan, 1);
    assert_eq!((pooled.growth.from, pooled.growth.points), ("pool", 4));
    assert_eq!(
        pooled.growth.pool.as_deref(),
        Some("class B, zone A, busy picking, one bin")
    );
    let c = interval(&plan, 2);
    assert_eq!((c.growth.from, c.growth.points), ("site", 8));
    // By hand (`jumps` module notes, κ = 2): each counted item covers 70 days, 140
    // pick-days. Site: 4 errors in 280 pick-days, β = 1/70. Pool B: β = (4 + 2) / (140 +
    // 2·70) = 3/140. The uncounted B item: (0 + 2) / (0 + 2 / (2·3/140)) = 3/70 a day;
    // the C item (empty pool, β the site's): 2·1/70 = 1/35 a day. Sizes: the site's mean
    // (1 + 2 + 3 + 4) / 4 = 2.5, and pool B's (10 + 2·2.5) / 6 = 2.5.
    assert!(
        (pooled.growth.jumps_a_day - 3.0 / 70.0).abs() < 1e-12,
        "{:?}",
        pooled.growth
    );
    assert!(
        (c.growth.jumps_a_day - 1.0 / 35.0).abs() < 1e-12,
        "{:?}",
        c.growth
    );
    assert!((c.growth.jump_units - 2.5).abs() < 1e-12);
}

#[test]
fn a_policy_body_at_fault_names_each_field() {
    let current = FrequencyPolicy::default();
    let cases = [
        (json!({"policy": "often"}), vec!["policy"]),
        (json!({"floor_a": 3}), vec!["policy"]),
        (json!({"policy": "blend", "floor_a": 400}), vec!["floor_a"]),
        (
            json!({"policy": "blend", "floor_b": -1, "floor_c": "x"}),
            vec!["floor_b", "floor_c"],
        ),
        (json!({"policy": "risk", "floors": 1}), vec!["floors"]),
        (json!(["risk"]), vec!["body"]),
    ];
    for (body, fields) in cases {
        let errors = FrequencyPolicy::from_json(&body, &current).expect_err("refused");
        let named: Vec<&str> = errors.iter().map(|e| e.field.as_str()).collect();
        assert_eq!(named, fields, "{body}");
    }
    let ok = FrequencyPolicy::from_json(&json!({"policy": "blend", "floor_a": 24}), &current)
        .expect("accepted");
    assert_eq!((ok.policy, ok.floor_a, ok.floor_b), (Mode::Blend, 24, 4));
}

#[test]
fn the_abc_reason_names_the_class_interval_and_last_count() {
    let day = NaiveDate::from_ymd_opt(2026, 9, 1).expect("a valid date");
    let last = NaiveDate::from_ymd_opt(2026, 6, 1).expect("a valid date");
    let why = Why::of(Mode::Abc, Class::B, false, 65, Some((last, 66)), day, None);
    assert_eq!(
        why.sentence(),
        "class B every 65 working days; last counted 2026-06-01, 66 working days ago"
    );
    let never = Why::of(Mode::Risk, Class::C, true, 261, None, day, None);
    assert_eq!(never.policy, Mode::Abc, "dead stock keeps abc");
    assert_eq!(
        never.sentence(),
        "dead stock, every 261 working days; never counted"
    );
}

#[test]
fn the_risk_reason_gives_the_score_and_the_error_it_expects() {
    // Score = c·r·s·t: unit cost 500, one error of 1.5 units in 200 days, last counted
    // 56 calendar days ago: 500 × 0.005 × 1.5 × 56 = 210; due at 22.4 days: 84.
    let jumps = risk::Jumps {
        rate: 0.005,
        size: 1.5,
    };
    let r = ItemRisk {
        working_days: 16,
        days: 22.4,
        error_value_due: 500.0 * 0.005 * 1.5 * 22.4,
        unit_cost_minor: 500,
        growth: GrowthWhy {
            from: "item",
            pool: None,
            points: 9,
            jumps_a_day: jumps.rate,
            jump_units: jumps.size,
        },
        at_floor: false,
        fit: Drift::Jump(jumps),
    };
    let day = NaiveDate::from_ymd_opt(2026, 3, 2).expect("a valid date");
    let last = NaiveDate::from_ymd_opt(2026, 1, 5).expect("a valid date");
    assert_eq!((day - last).num_days(), 56);
    let why = Why::of(
        Mode::Risk,
        Class::C,
        false,
        16,
        Some((last, 40)),
        day,
        Some(&r),
    );
    let risk = why.risk.as_ref().expect("risk figures");
    assert!((risk.score - 210.0).abs() < 1e-9, "{}", risk.score);
    assert!((risk.error_value_due - 84.0).abs() < 1e-9);
    assert_eq!(
        why.sentence(),
        "risk 210: expected error worth 210 now and 84 by the end of its interval (unit cost 500, \
         an error of 1.5 units every 200 days or so, from its own 9 repeat counts and its picks); \
         every 16 working days, class C; last counted 2026-01-05, 40 working days ago"
    );
}
