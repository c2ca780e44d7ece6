use super::report::{self, Shown};
use super::*;

/// One A item in one bin, one minute to count; 365 counts a year on a 365-working-day
/// calendar at 1 minute a day is exactly the `abc` load, so its interval is one day.
fn one_item(per_year_a: u32) -> SimSite {
    SimSite {
        items: vec![SimItem {
            class: Class::A,
            unit_cost: 250.0,
            picks_per_day: 5.0,
            units_per_day: 5.0,
            bins: vec![0],
            zone: 0,
            last_count: Some(0),
            history: Vec::new(),
        }],
        bin_seconds: vec![60],
        per_year: [per_year_a, 4, 1],
        minutes: 1,
        working_days_per_year: 365.0,
        floors: Floors {
            per_year: [0, 0, 0],
        },
        model: ErrorModel::Jump,
        known: Vec::new(),
    }
}

fn keys(book: i64, truth: i64) -> Keys {
    Keys::from([((0, 0, String::new()), (book, truth))])
}

#[test]
fn a_count_finds_the_error_its_value_and_its_age_and_then_the_book_is_right() {
    let mut sim = Simulation::new(one_item(365), 1).unwrap();
    assert!((sim.abc_scale() - 1.0).abs() < 1e-12, "{}", sim.abc_scale());
    // Day 1: right. Day 2: 3 units short on the shelf, no counting that day. Day 3: counted.
    sim.day(1, true, &keys(10, 10));
    sim.day(2, false, &keys(10, 7));
    sim.day(3, true, &keys(10, 7));
    // The shared book still says 10; the policy's own correction keeps its book at 7.
    for d in 4..=7 {
        sim.day(d, true, &keys(10, 7));
    }
    let abc = &sim.rows()[0];
    assert_eq!(abc.policy, Policy::Abc);
    assert_eq!(abc.errors_found, 1, "{abc:?}");
    // 3 units × 250 minor units; entered on day 2, found on day 3.
    assert_eq!(abc.error_value_found, 750.0);
    assert_eq!(abc.mean_age_days, Some(1.0));
    assert_eq!(abc.ira, 1.0);
    assert_eq!(abc.standing_error_value, 0.0);
    // Six working days at one minute each.
    assert_eq!(abc.minutes_used, 6.0);
}

#[test]
fn an_error_standing_on_the_first_day_is_told_apart_from_one_that_arose_later() {
    let mut sim = Simulation::new(one_item(365), 1).unwrap();
    // Day 1 (the first): 2 units short already, not counted (no work that day). Day 2:
    // counted, 2 units found, dated to day 1. Day 3: 1 more unit short. Day 4: counted,
    // 1 unit found, dated to day 3.
    sim.day(1, false, &keys(10, 8));
    sim.day(2, true, &keys(10, 8));
    sim.day(3, false, &keys(10, 7));
    for d in 4..=7 {
        sim.day(d, true, &keys(10, 7));
    }
    for r in sim.rows() {
        assert_eq!(r.errors_found, 2, "{r:?}");
        assert_eq!(r.error_value_found, 3.0 * 250.0, "{r:?}");
        assert_eq!(r.first_day_value_found, 2.0 * 250.0, "{r:?}");
    }
    let abc = report::totals(sim.rows(), Policy::Abc);
    let risk = report::totals(sim.rows(), Policy::Risk);
    assert_eq!(
        report::arising_verdict(&abc, &risk),
        "of the errors that arose during the run (not standing on its first day): risk 2.50, abc 2.50 (+0.0 %)"
    );
}

#[test]
fn the_standing_verdict_weighs_every_week_not_the_last_day() {
    let row = |week, policy, standing| WeekRow {
        week,
        policy,
        ira: 1.0,
        value_accuracy: 1.0,
        errors_found: 0,
        error_value_found: 0.0,
        first_day_value_found: 0.0,
        mean_age_days: None,
        standing_error_value: standing,
        safety_stock_value: 0.0,
        minutes_used: 0.0,
        bins_counted: 0,
    };
    // abc leaves 10.00 then 2.00 standing, risk 4.00 then 4.00: risk is behind on the
    // last day but its weeks average 4.00 against abc's 6.00, a third less.
    let rows = [
        row(1, Policy::Abc, 1_000.0),
        row(1, Policy::Risk, 400.0),
        row(2, Policy::Abc, 200.0),
        row(2, Policy::Risk, 400.0),
    ];
    let abc = report::totals(&rows, Policy::Abc);
    let risk = report::totals(&rows, Policy::Risk);
    assert_eq!(
        (abc.mean_standing_value, risk.mean_standing_value),
        (600.0, 400.0)
    );
    assert_eq!(
        report::standing_verdict(&abc, &risk),
        "error value left standing at the weeks' ends, on average: risk 4.00, abc 6.00 (-33.3 %)"
    );
    assert!(report::table(&rows, Shown::Both).contains("risk 4.00, abc 6.00 (-33.3 %)"));
}

#[test]
fn the_seeds_table_sums_the_seeds_and_counts_where_risk_was_ahead() {
    let totals = |policy, found: f64, first: f64, standing: f64| report::Totals {
        policy,
        errors_found: 1,
        error_value_found: found,
        first_day_value_found: first,
        mean_age_days: None,
        minutes_used: 0.0,
        final_ira: 1.0,
        final_value_accuracy: 1.0,
        final_safety_stock_value: 0.0,
        mean_standing_value: standing,
    };
    // Seed 1: risk finds 3.00 against 1.00, all of it arising (none stood on day one),
    // and leaves 1.00 standing against 2.00. Seed 2: risk finds 1.00 against 3.00 (of
    // which 1.00 stood on day one under each) and leaves 3.00 against 2.00. Sums: found
    // 4.00 against 4.00 (+0.0 %, ahead in 1); arising 3.00 against 3.00 (+0.0 %, ahead
    // in 1: 3.00 > 1.00 in seed 1, 0.00 < 2.00 in seed 2); standing 4.00 against 4.00,
    // less in 1.
    let rows = [
        report::SeedRow {
            seed: 1,
            abc: totals(Policy::Abc, 100.0, 0.0, 200.0),
            risk: totals(Policy::Risk, 300.0, 0.0, 100.0),
        },
        report::SeedRow {
            seed: 2,
            abc: totals(Policy::Abc, 300.0, 100.0, 200.0),
            risk: totals(Policy::Risk, 100.0, 100.0, 300.0),
        },
    ];
    let text = report::seeds_table(&rows);
    let lines: Vec<&str> = text.lines().collect();
    assert!(lines[0].contains("found abc") && lines[0].contains("standing risk"));
    let first: Vec<&str> = lines[1].split_whitespace().collect();
    assert_eq!(
        first,
        [
            "1", "1.00", "3.00", "+200.0", "%", "1.00", "3.00", "+200.0", "%", "2.00", "1.00",
            "-50.0", "%"
        ]
    );
    assert!(
        text.contains(
            "over 2 seeds, risk against abc: error value found +0.0 % in sum (ahead in 1 of 2); \
             of the errors that arose during the runs +0.0 % (ahead in 1 of 2); error value left \
             standing, mean of the weeks, +0.0 % (less in 1 of 2)"
        ),
        "{text}"
    );
}

#[test]
fn the_known_model_takes_one_rate_and_size_an_item_and_counts_the_faster_more_often() {
    let mut site = one_item(12);
    site.model = ErrorModel::Known;
    assert_eq!(
        Simulation::new(site.clone(), 1).err(),
        Some(SimError::Known { given: 0, items: 1 })
    );
    // Two like items, one bin each; the second's errors arrive four times as fast, so
    // by the square-root rule (`risk` module notes) its interval is half the first's:
    // a minute a day over two one-minute items, 1/T₁ + 2/T₁ = 1, so 3 and 1.5 days.
    site.items.push(SimItem {
        bins: vec![1],
        ..site.items[0].clone()
    });
    site.bin_seconds.push(60);
    site.known = vec![
        Jumps {
            rate: 0.01,
            size: 2.0,
        },
        Jumps {
            rate: 0.04,
            size: 2.0,
        },
    ];
    let sim = Simulation::new(site, 1).unwrap();
    let iv = sim.intervals(Policy::Risk);
    assert!(
        (iv[0] - 3.0).abs() < 1e-6 && (iv[1] - 1.5).abs() < 1e-6,
        "{iv:?}"
    );
}

#[test]
fn both_policies_meet_the_same_errors_and_keep_their_own_corrections() {
    let mut sim = Simulation::new(one_item(365), 1).unwrap();
    for d in 1..=7 {
        sim.day(d, true, &keys(10, 10 - i64::from(d)));
    }
    let rows = sim.rows();
    assert_eq!(rows.len(), 2);
    // One item, one bin, a minute a day: both count it every day and find 1 unit a day.
    for r in rows {
        assert_eq!(r.errors_found, 7, "{r:?}");
        assert_eq!(r.error_value_found, 7.0 * 250.0);
        assert_eq!(r.mean_age_days, Some(0.0));
    }
}

#[test]
fn bad_minutes_weeks_and_frequencies_are_refused_by_name() {
    let mut s = one_item(12);
    s.minutes = 0;
    assert_eq!(
        Simulation::new(s.clone(), 4).err(),
        Some(SimError::Minutes(0))
    );
    s.minutes = 10;
    assert_eq!(
        Simulation::new(s.clone(), 0).err(),
        Some(SimError::Weeks(0))
    );
    assert_eq!(
        Simulation::new(s.clone(), MAX_WEEKS + 1).err(),
        Some(SimError::Weeks(MAX_WEEKS + 1))
    );
    s.per_year = [0, 4, 1];
    assert!(matches!(
        Simulation::new(s.clone(), 4),
        Err(SimError::PerYear { class: "A", .. })
    ));
    s.per_year = [12, 4, 1];
    s.floors = Floors {
        per_year: [400, 0, 0],
    };
    assert!(matches!(
        Simulation::new(s.clone(), 4),
        Err(SimError::Floor { class: "A", .. })
    ));
    s.floors.per_year = [0, 0, 0];
    s.items[0].bins = vec![3];
    assert_eq!(
        Simulation::new(s.clone(), 4).err(),
        Some(SimError::NoBin { item: 0, bin: 3 })
    );
    s.items[0].bins.clear();
    assert_eq!(Simulation::new(s, 4).err(), Some(SimError::NothingToCount));
}

/// Forty items in forty bins, costs and pick rates spread over two orders of magnitude;
/// a key drifts by one unit on a day with a chance that grows with its pick rate.
fn forty(floors: [u32; 3], minutes: u32) -> (SimSite, Vec<Keys>) {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(40);
    let items: Vec<SimItem> = (0..40)
        .map(|i| SimItem {
            class: [Class::A, Class::B, Class::C][i % 3],
            unit_cost: 10.0 * f64::from(1 + (i as u32 * 7) % 100),
            picks_per_day: 0.1 * f64::from(1 + (i as u32 * 13) % 60),
            units_per_day: 0.2 * f64::from(1 + (i as u32 * 13) % 60),
            bins: vec![i],
            zone: 0,
            last_count: None,
            history: Vec::new(),
        })
        .collect();
    let mut book_truth: Vec<(i64, i64)> = vec![(50, 50); 40];
    let days: Vec<Keys> = (0..70)
        .map(|_| {
            for (i, k) in book_truth.iter_mut().enumerate() {
                if rng.random::<f64>() < items[i].picks_per_day * 0.02 {
                    k.1 -= 1;
                }
            }
            book_truth
                .iter()
                .enumerate()
                .map(|(i, &bt)| ((i, i, String::new()), bt))
                .collect()
        })
        .collect();
    let site = SimSite {
        items,
        bin_seconds: vec![120; 40],
        per_year: [12, 4, 1],
        minutes,
        working_days_per_year: 250.0,
        floors: Floors { per_year: floors },
        model: ErrorModel::Jump,
        known: Vec::new(),
    };
    (site, days)
}

fn play(site: SimSite, days: &[Keys]) -> Simulation {
    let mut sim = Simulation::new(site, 10).unwrap();
    for (d, k) in days.iter().enumerate() {
        let day = d as u32 + 1;
        sim.day(day, !matches!(day % 7, 6 | 0), k);
    }
    sim
}

#[test]
fn no_policy_spends_more_than_the_minutes_of_its_working_days() {
    let (site, days) = forty([0, 0, 0], 12);
    let sim = play(site, &days);
    assert_eq!(sim.rows().len(), 20);
    for r in sim.rows() {
        assert!(r.minutes_used <= 5.0 * 12.0 + 1e-9, "{r:?}");
        assert!((0.0..=1.0).contains(&r.ira), "{r:?}");
        assert!(r.value_accuracy <= 1.0, "{r:?}");
    }
    // Over ten weeks both spend most of their minutes (a fair comparison).
    for p in Policy::BOTH {
        let t = report::totals(sim.rows(), p);
        assert!(t.minutes_used > 0.6 * 50.0 * 12.0, "{t:?}");
    }
}

#[test]
fn risk_keeps_to_the_class_floors_it_is_given() {
    // Floors tight enough to bind: with growth learned from a count, risk alone already
    // counts every item of this small site at least every 46 days.
    let floors = [52, 26, 26];
    let (site, days) = forty(floors, 30);
    let classes: Vec<Class> = site.items.iter().map(|i| i.class).collect();
    let sim = play(site, &days);
    for (i, &t) in sim.intervals(Policy::Risk).iter().enumerate() {
        let max = 365.0 / f64::from(floors[classes[i].index()]);
        assert!(t <= max + 1e-9, "item {i}: {t} days > floor {max}");
    }
    // Without floors some C item is left longer than its floor would allow.
    let (free, days) = forty([0, 0, 0], 30);
    let sim = play(free, &days);
    assert!(
        sim.intervals(Policy::Risk)
            .iter()
            .zip(&classes)
            .any(|(&t, c)| *c == Class::C && t > 365.0 / 26.0),
        "{:?}",
        sim.intervals(Policy::Risk)
    );
}

#[test]
fn the_same_days_give_the_same_rows() {
    let (site, days) = forty([0, 0, 0], 12);
    let one = play(site.clone(), &days);
    let two = play(site, &days);
    assert_eq!(one.rows(), two.rows());
}

#[test]
fn money_is_written_in_major_units_with_separators() {
    assert_eq!(report::money(0.0), "0.00");
    assert_eq!(report::money(123_456_789.0), "1,234,567.89");
    assert_eq!(report::money(-5.0), "-0.05");
    assert_eq!(report::money(100_000.0), "1,000.00");
}

#[test]
fn the_table_marks_the_proposal_and_the_chart_has_one_series_a_policy() {
    let (site, days) = forty([0, 0, 0], 12);
    let sim = play(site, &days);
    let table = report::table(sim.rows(), Shown::Proposal(Policy::Risk));
    assert!(table.contains("risk*"), "{table}");
    assert!(!table.contains("abc*"), "{table}");
    assert!(table.contains("at equal minutes"), "{table}");
    let svg = report::svg(sim.rows(), Shown::Both, "a <title> & more");
    assert_eq!(svg.matches("<g class=\"series\"").count(), 2);
    assert!(svg.contains("a &lt;title&gt; &amp; more"));
}

#[test]
fn the_end_labels_stand_apart_when_both_policies_found_the_same() {
    let row = |policy| WeekRow {
        week: 1,
        policy,
        ira: 1.0,
        value_accuracy: 1.0,
        errors_found: 2,
        error_value_found: 5_000.0,
        first_day_value_found: 0.0,
        mean_age_days: Some(1.0),
        standing_error_value: 0.0,
        safety_stock_value: 0.0,
        minutes_used: 10.0,
        bins_counted: 3,
    };
    let svg = report::svg(&[row(Policy::Abc), row(Policy::Risk)], Shown::Both, "t");
    let ys: Vec<f64> = svg
        .split("<text ")
        .filter(|t| t.contains(">abc 50.00<") || t.contains(">risk 50.00<"))
        .map(|t| {
            let y = t.split("y=\"").nth(1).unwrap();
            y[..y.find('"').unwrap()].parse().unwrap()
        })
        .collect();
    assert_eq!(ys.len(), 2, "{svg}");
    assert!((ys[0] - ys[1]).abs() >= 15.0 - 1e-9, "{ys:?}");
}
