//! The day's count list: the textbook example, a simulated year on the demo
//! site, and the HTTP routes end to end.

mod common;

use cairn::demo::{self, DemoSpec};
use cairn::planning::abc::Class;
use cairn::planning::calendar::Calendar;
use cairn::planning::estimate::TaskTime;
use cairn::planning::plan::{self, BinFacts, Capacity, Fill, ItemFacts, Plan, PlanInput};
use cairn::planning::walk::Place;
use cairn::planning::{Settings, service};
use chrono::NaiveDate;
use common::spawn_app;
use std::collections::HashMap;

/// What a simulation saw: each working day's plan, and the days each item's
/// count was completed (all its bins counted).
struct Simulated {
    days: Vec<(NaiveDate, Plan)>,
    completions: Vec<Vec<usize>>,
}

/// Plans `n` working days from `input.day`, counting every planned bin that day.
fn simulate(input: &mut PlanInput, n: usize) -> Simulated {
    let mut completions = vec![Vec::new(); input.items.len()];
    let mut days = Vec::with_capacity(n);
    let mut day = input.day;
    while !input.calendar.is_working(day) {
        day = input.calendar.next_working_day(day).unwrap();
    }
    let last_of = |input: &PlanInput, it: &ItemFacts| {
        it.bins
            .iter()
            .map(|&b| input.bins[b as usize].last_count)
            .min()
            .flatten()
    };
    for k in 0..n {
        input.day = day;
        let before: Vec<Option<NaiveDate>> =
            input.items.iter().map(|it| last_of(input, it)).collect();
        let p = plan::build(input);
        for t in &p.tasks {
            input.bins[t.bin as usize].last_count = Some(day);
        }
        // A counted bin's triggers are answered.
        input
            .triggers
            .retain(|t| input.bins[t.bin as usize].last_count != Some(day));
        for (i, it) in input.items.iter().enumerate() {
            if last_of(input, it) != before[i] {
                completions[i].push(k);
            }
        }
        days.push((day, p));
        day = input.calendar.next_working_day(day).unwrap();
    }
    Simulated { days, completions }
}

fn coefficient_of_variation(xs: &[f64]) -> f64 {
    let n = xs.len() as f64;
    let mean = xs.iter().sum::<f64>() / n;
    let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0);
    var.sqrt() / mean
}

/// A site of one item per bin with the given classes, 2026 with 240 working days.
fn textbook_site() -> PlanInput {
    // 2026 has 261 weekdays; every twelfth weekday is made a holiday until 21
    // are, leaving 240 working days, the year the example is written for.
    let mut calendar = Calendar::default();
    let mut d = NaiveDate::from_ymd_opt(2026, 1, 1).unwrap();
    let mut weekday = 0;
    while calendar.holidays.len() < 21 {
        if calendar.is_working(d) {
            weekday += 1;
            if weekday % 12 == 0 {
                calendar.holidays.insert(d);
            }
        }
        d = d.succ_opt().unwrap();
    }
    assert_eq!(calendar.working_days_in_year(d), 240);
    let classes = [(Class::A, 500), (Class::B, 1_750), (Class::C, 2_750)];
    let mut bins = Vec::new();
    let mut items = Vec::new();
    for (class, n) in classes {
        for _ in 0..n {
            let i = bins.len();
            bins.push(BinFacts {
                id: i as i64 + 1,
                code: format!("A-{:03}-{:02}-1", 1 + i / 50, 1 + i % 50),
                zone: "A".into(),
                place: Place {
                    zone_seq: 0,
                    zone: 1,
                    aisle: 1 + (i / 50) as u16,
                    bay: 1 + (i % 50) as u16,
                    level: 1,
                    side: 0,
                    walk_seq: 0,
                },
                lines: 1,
                last_count: None,
            });
            items.push(ItemFacts {
                id: i as i64 + 1,
                class,
                dead: false,
                bins: vec![i as u32],
            });
        }
    }
    let mut settings = Settings::default();
    settings.frequency.per_year = [12, 4, 2];
    // One minute per count, so minutes and counts are the same number.
    settings.task_time = TaskTime {
        base_s: 60,
        per_line_s: 0,
    };
    PlanInput {
        day: NaiveDate::from_ymd_opt(2026, 1, 1).unwrap(),
        calendar,
        settings,
        bins,
        items,
        triggers: Vec::new(),
        zone_time: HashMap::new(),
        capacity: Capacity {
            counters: 4,
            minutes: 480,
        },
        fill: Fill::Level,
        counting_since: Some(NaiveDate::from_ymd_opt(2026, 1, 1).unwrap()),
        watermark: 0,
    }
}

#[test]
fn the_textbook_cycle_counting_example_gives_77_counts_a_day() {
    // Heizer & Render, Operations Management, the cycle-counting example (from
    // memory): 5,000 items, 500 A counted every 20 working days, 1,750 B every
    // 60, 2,750 C every 120, so 500/20 + 1,750/60 + 2,750/120 = 25 + 29 + 23 =
    // 77 counts a day.
    let mut site = textbook_site();
    let sim = simulate(&mut site, 240);
    let first = &sim.days[0].1;
    assert_eq!(first.intervals[..3], [20, 60, 120]);
    // The level is the example's daily load: 77.08 one-minute counts.
    assert_eq!(first.level_s, 4_625);
    // After the first C interval the plan has settled: average counts per class per day.
    let settled = &sim.days[120..];
    let mut per_class = [0usize; 3];
    for (_, p) in settled {
        for t in &p.tasks {
            per_class[t.class.unwrap().index()] += 1;
        }
    }
    let per_day: Vec<i64> = per_class
        .iter()
        .map(|&n| (n as f64 / settled.len() as f64).round() as i64)
        .collect();
    assert_eq!(per_day, [25, 29, 23]);
    assert_eq!(per_day.iter().sum::<i64>(), 77);
}

#[tokio::test]
async fn a_simulated_year_on_the_demo_site_keeps_frequencies_capacity_and_level() {
    let app = spawn_app().await;
    let store = app.state.store.as_ref();
    let spec = DemoSpec {
        end: NaiveDate::from_ymd_opt(2026, 1, 4).unwrap(),
        ..DemoSpec::standard(7)
    };
    demo::generate(store, &spec, false).await.unwrap();
    let site = store
        .site(&cairn::master::SiteCode::parse(demo::DEMO_SITE).unwrap())
        .await
        .unwrap()
        .unwrap();
    let start = NaiveDate::from_ymd_opt(2026, 1, 5).unwrap();
    service::classify(store, &site, start).await.unwrap();
    let capacity = Capacity {
        counters: 2,
        minutes: 150,
    };
    let mut input = store
        .plan_input(site.id, start, capacity, Fill::Level)
        .await
        .unwrap();
    // Three years: every class completes its first interval and then at least one more.
    let wdy = input.calendar.working_days_in_year(start) as usize;
    let sim = simulate(&mut input, 3 * wdy);

    for (day, p) in &sim.days {
        assert!(
            p.run_seconds()
                .iter()
                .all(|&s| s <= capacity.per_counter_s()),
            "{day}: a run is over one counter's minutes"
        );
        assert!(
            p.tasks.iter().map(|t| t.seconds).sum::<i64>() <= capacity.total_s(),
            "{day} is over capacity"
        );
        assert!(
            p.warnings.is_empty(),
            "{day}: nothing is left off: {:?}",
            p.warnings
        );
    }

    // Frequency from the mean gap between completed counts, after the first.
    let target = [12.0, 4.0, 1.0];
    let mut checked = [0usize; 3];
    for (i, it) in input.items.iter().enumerate() {
        let c = &sim.completions[i];
        if it.bins.is_empty() || it.dead {
            continue;
        }
        assert!(
            c.len() >= 2,
            "item {} was counted {} time(s)",
            it.id,
            c.len()
        );
        let mean_gap = (c[c.len() - 1] - c[0]) as f64 / (c.len() - 1) as f64;
        let per_year = wdy as f64 / mean_gap;
        let want = target[it.class.index()];
        assert!(
            (per_year - want).abs() <= 0.10 * want,
            "item {} ({}) counted {per_year:.2} times a year, target {want}",
            it.id,
            it.class
        );
        checked[it.class.index()] += 1;
    }
    assert!(checked.iter().all(|&n| n > 0), "{checked:?}");

    // Daily minutes are level once the longest (C) interval has passed.
    let minutes: Vec<f64> = sim.days[wdy..]
        .iter()
        .map(|(_, p)| p.tasks.iter().map(|t| t.seconds).sum::<i64>() as f64)
        .collect();
    let cv = coefficient_of_variation(&minutes);
    assert!(cv < 0.15, "coefficient of variation {cv:.3}");
    eprintln!(
        "demo year: checked {checked:?} items, daily minutes CV {cv:.3}, mean {:.1} min",
        minutes.iter().sum::<f64>() / minutes.len() as f64 / 60.0
    );
}
