//! The demo's counting history: weeks of counting simulated through the phones' sync,
//! the netting, recounts, automatic adjustments and the manager's decisions, on a small
//! Kestrel Lane site. Each test generates into its own SQLite file and reads back only
//! through the `Store` trait and the report services.

mod common;

use cairn::accounts::Role;
use cairn::accuracy::service::{self, DemandWindow, Filter, Period};
use cairn::demo::count_day::{self, Score};
use cairn::demo::history::HistorySummary;
use cairn::demo::{self, DemoSpec, DemoSummary};
use cairn::master::{Site, SiteCode};
use cairn::netting::results::{ResultQuery, ResultRow, ResultState};
use cairn::review::store::DifferenceFilter;
use cairn::store::{DbLocation, Store, StoreOptions};
use cairn::time::Timestamp;
use chrono::NaiveDate;
use common::{Auth, Body, spawn_app};
use reqwest::Method;
use std::collections::BTreeMap;
use std::sync::Arc;

/// The last day of the small site's history; its "today" is the day after.
fn end() -> NaiveDate {
    NaiveDate::from_ymd_opt(2026, 6, 30).unwrap()
}

/// A small site: 60 items, 150 bins, 120 days of movements, the last 4 weeks counted.
fn small(seed: u64) -> DemoSpec {
    DemoSpec {
        end: end(),
        ..DemoSpec::small(seed)
    }
}

struct Generated {
    _dir: tempfile::TempDir,
    store: Arc<dyn Store>,
    site: Site,
    summary: DemoSummary,
}

async fn generated(seed: u64) -> Generated {
    let dir = tempfile::tempdir().unwrap();
    let store = cairn::store::open(
        &DbLocation::File(dir.path().join("demo.db")),
        StoreOptions::default(),
    )
    .unwrap();
    let summary = demo::generate(store.as_ref(), &small(seed), false)
        .await
        .expect("the demo site with its history generates");
    let site = store
        .site(&SiteCode::parse(demo::DEMO_SITE).unwrap())
        .await
        .unwrap()
        .unwrap();
    Generated {
        _dir: dir,
        store,
        site,
        summary,
    }
}

fn history(g: &Generated) -> &HistorySummary {
    g.summary.history.as_ref().expect("a history was asked for")
}

/// Reads every result row of the site, superseded ones included, in id order.
async fn all_results(g: &Generated) -> Vec<ResultRow> {
    let mut out = Vec::new();
    let mut after = 0;
    loop {
        let page = g
            .store
            .count_results(
                g.site.id,
                ResultQuery {
                    state: ResultState::All,
                    bin: None,
                    sku: None,
                    lot: None,
                    pass: None,
                    from: None,
                    to: None,
                    limit: 1_000,
                    after,
                },
            )
            .await
            .unwrap();
        out.extend(page.results);
        match page.next {
            Some(n) => after = n,
            None => return out,
        }
    }
}

/// A result as the history decided it, without the instant it was computed at.
fn decided(r: &ResultRow) -> String {
    format!(
        "{} {} {} {} {} {} {} {} {} {} {} {:?} {:?} {} {} {}",
        r.pass,
        r.counter,
        r.bin,
        r.sku,
        r.lot,
        r.counted,
        r.f_star,
        r.variance,
        r.verdict,
        r.status,
        r.counted_at,
        r.superseded_by,
        r.recount_outcome,
        r.first_count_wrong,
        r.reviewed,
        r.auto_adjusted
    )
}

#[tokio::test]
async fn the_same_seed_gives_the_same_counting_history() {
    let one = generated(21).await;
    let two = generated(21).await;
    let first = all_results(&one).await;
    assert!(
        first.len() > 50,
        "four weeks of counting give results: {}",
        first.len()
    );
    let a: Vec<String> = first.iter().map(decided).collect();
    let b: Vec<String> = all_results(&two).await.iter().map(decided).collect();
    assert_eq!(a, b);
    let (h1, h2) = (history(&one), history(&two));
    assert_eq!(
        (
            h1.passes,
            h1.recount_passes,
            h1.approved,
            h1.rejected,
            h1.auto_adjusted
        ),
        (
            h2.passes,
            h2.recount_passes,
            h2.approved,
            h2.rejected,
            h2.auto_adjusted
        )
    );
}

#[tokio::test]
async fn the_history_finds_the_errors_it_injected_and_its_accuracy_agrees_with_them() {
    let g = generated(5).await;
    let h = history(&g);
    assert_eq!(h.refused_events, 0, "every phone event is kept");
    assert!(h.working_days >= 19, "{} working days", h.working_days);
    assert!(
        h.recount_passes > 0,
        "out-of-tolerance counts are recounted"
    );
    assert!(h.approved > 0 && h.rejected > 0, "{h:?}");
    // The summary counts every simulated movement: the ledger holds those and the count
    // adjustments the approvals and automatic adjustments posted.
    let counts = g.store.site_counts(g.site.id).await.unwrap();
    assert_eq!(
        counts.movements as usize,
        g.summary.movements + h.approved + h.auto_adjusted,
        "{} approved, {} adjusted automatically",
        h.approved,
        h.auto_adjusted
    );

    // Score each first count against what the simulation knows: the shelf minus the
    // book at each key's scan. A first count a recount proved wrong raised nothing.
    let results = all_results(&g).await;
    let mut total = Score::default();
    let (mut keys, mut right) = (0usize, 0usize);
    let (mut judged_keys, mut hits) = (0usize, 0usize);
    for fc in &h.first_counts {
        // Each key's verdict as settled: the row a decision or an automatic adjustment
        // was taken on (its adjustment re-nets the key to 0), else the current row.
        let mut variances: BTreeMap<(String, String, String), i64> = BTreeMap::new();
        let rows = results.iter().filter(|r| r.pass == fc.pass);
        for r in rows.clone().filter(|r| r.superseded_by.is_none()) {
            let key = (r.bin.clone(), r.sku.clone(), r.lot.clone());
            let judged = rows
                .clone()
                .find(|d| {
                    (d.reviewed || d.auto_adjusted)
                        && (&d.bin, &d.sku, &d.lot) == (&key.0, &key.1, &key.2)
                })
                .unwrap_or(r);
            let v = if judged.first_count_wrong || r.first_count_wrong {
                0
            } else {
                judged.variance
            };
            variances.insert(key, v);
            judged_keys += 1;
            hits += usize::from(judged.verdict == "hit" || judged.first_count_wrong);
        }
        let s = count_day::score(
            &count_day::CountDay {
                expected: fc.expected.clone(),
                ..count_day::CountDay::default()
            },
            &variances,
        );
        total.clear_errors += s.clear_errors;
        total.clear_errors_raised += s.clear_errors_raised;
        total.raised += s.raised;
        total.raised_with_error += s.raised_with_error;
        total.raised_by_moves_alone += s.raised_by_moves_alone;
        keys += fc.expected.len();
        right += fc.expected.values().filter(|e| e.error == 0).count();
    }
    assert!(
        total.clear_errors > 10,
        "the history injected errors: {total:?}"
    );
    assert!(
        total.recall() >= 0.95,
        "recall {:.3}: {total:?}",
        total.recall()
    );
    assert!(
        total.precision() >= 0.95,
        "precision {:.3}: {total:?}",
        total.precision()
    );
    assert_eq!(total.raised_by_moves_alone, 0, "{total:?}");

    // The history's IRA (each first-counted key as it was judged) is the share of keys
    // the book had right, plus the few small errors the class tolerances (B 2 %, C 5 %)
    // let through as hits.
    let known = right as f64 / keys as f64;
    let ira = hits as f64 / judged_keys as f64;
    assert!(
        judged_keys >= keys * 9 / 10,
        "{judged_keys} of {keys} keys judged"
    );
    assert!(
        ira + 0.02 >= known && ira <= known + 0.1,
        "IRA {ira:.3} against {known:.3} of keys right"
    );

    // The accuracy report judges the same way: each first-counted key by the row a
    // decision was taken on, recounts left out; an approval does not make a hit.
    // Up to today: today's list is part counted too.
    let today = end().succ_opt().unwrap();
    let period = Period::new(None, Some(today), 120, g.site.time_zone).unwrap();
    let report = service::accuracy_report(g.store.as_ref(), &g.site, period, Filter::default())
        .await
        .unwrap();
    let reported = report.ira.value.unwrap();
    assert_eq!(
        report.counted as usize, judged_keys,
        "the report counts first counts only"
    );
    assert!(
        (reported - ira).abs() < 1e-9,
        "the report's IRA {reported:.3} is the history's {ira:.3}"
    );
}

#[tokio::test]
async fn after_the_history_differences_wait_and_the_buffer_has_every_term() {
    let g = generated(8).await;
    let now = Timestamp(g.site.time_zone.at_local(end().succ_opt().unwrap(), 23).0);
    let waiting = g
        .store
        .differences(
            g.site.id,
            DifferenceFilter {
                limit: 1_000,
                ..DifferenceFilter::default()
            },
            now,
        )
        .await
        .unwrap();
    assert!(!waiting.is_empty(), "fresh differences wait for review");
    assert!(
        waiting.len() < 60,
        "only the last days' differences wait: {}",
        waiting.len()
    );

    let today = g
        .store
        .count_list(g.site.id, end().succ_opt().unwrap())
        .await
        .unwrap()
        .expect("today's list is built");
    let done = today.tasks.iter().filter(|t| t.status == "done").count();
    assert!(
        done > 0 && done < today.tasks.len(),
        "today's list is part counted: {done} of {}",
        today.tasks.len()
    );

    let period = Period::new(None, Some(end()), 28, g.site.time_zone).unwrap();
    let report = service::accuracy_report(g.store.as_ref(), &g.site, period, Filter::default())
        .await
        .unwrap();
    assert!(report.counted > 0);

    let settings = g.store.accuracy_settings(g.site.id).await.unwrap();
    let window = DemandWindow::new(Some(end()), None, &settings, g.site.time_zone).unwrap();
    let rows = service::buffer_reports(g.store.as_ref(), &g.site, window, None, None)
        .await
        .unwrap();
    assert_eq!(rows.len(), 60);
    assert!(
        rows.iter().all(|r| r.lead_time.is_some()),
        "every item's group has a lead time"
    );
    let with_ss = rows
        .iter()
        .filter(|r| r.buffer.as_ref().is_some_and(|b| b.safety_stock > 0.0))
        .count();
    assert!(with_ss > 30, "{with_ss} of 60 items have a safety stock");
}

#[tokio::test]
async fn the_accuracy_page_says_the_demo_sites_history_is_simulated_and_no_other_site_does() {
    let app = spawn_app().await;
    let spec = DemoSpec {
        items: 20,
        bins: 40,
        days: 10,
        end: end(),
        ..DemoSpec::standard(3)
    };
    demo::generate(app.state.store.as_ref(), &spec, false)
        .await
        .unwrap();
    app.create_site("T").await;
    for site in ["KLN", "T"] {
        app.add_user(
            &format!("pl{}", site.to_lowercase()),
            site,
            &[Role::Planner],
            "test-only-password",
            None,
        )
        .await;
    }
    for (site, simulated) in [("KLN", true), ("T", false)] {
        let who = Auth::Session(
            app.sign_in(&format!("pl{}", site.to_lowercase()), "test-only-password")
                .await,
        );
        let page = app
            .send(
                Method::GET,
                &format!("/sites/{site}/accuracy"),
                &who,
                Body::Empty,
            )
            .await;
        assert_eq!(page.status, 200, "{}", page.text);
        assert_eq!(
            page.text.contains("a simulation on invented data"),
            simulated,
            "site {site}"
        );
    }
}
