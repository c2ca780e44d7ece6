//! Joins the planning arithmetic to the store: classify a site, build a day's
//! list (preview or stored), and show it as text, CSV or JSON.

use super::abc;
use super::plan::{self, Capacity, Fill, Plan, PlanInput};
use super::policy::{self, DEMAND_DAYS, FrequencyPolicy, ItemHistory, ItemWorth, Mode, RiskPlan};
use super::{
    AbcSummary, ListView, MAX_COUNTERS, MAX_MINUTES, NewCountList, NewTask, Summary, TaskView,
};
use crate::accuracy::store::ResultQuery;
use crate::master::Site;
use crate::store::Store;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use chrono::NaiveDate;
use std::collections::HashMap;
use std::fmt::Write as _;
use std::sync::Arc;

/// Classifies a site's items from issues in the window ending with `day`.
pub async fn classify(
    store: &dyn Store,
    site: &Site,
    day: NaiveDate,
) -> Result<AbcSummary, StoreError> {
    let settings = store.planning_settings(site.id).await?;
    // The window: the site's local days up to and including `day`.
    let to = site.time_zone.range(day).1.0;
    let first = day - chrono::Duration::days(i64::from(settings.abc.window_days.max(1)) - 1);
    let from = site.time_zone.start_of(first).0;
    let usage = store
        .abc_usage(site.id, Timestamp(from), Timestamp(to))
        .await?;
    let classes = abc::hold_new_items(abc::classify(&usage, &settings.abc), &usage, to);
    store
        .record_classes(site.id, day, settings.abc, classes)
        .await
}

/// Checks the supervisor's capacity.
pub fn check_capacity(c: Capacity) -> Result<(), String> {
    if c.counters == 0 || c.counters > MAX_COUNTERS {
        return Err(format!("counters must be 1 to {MAX_COUNTERS}"));
    }
    if c.minutes == 0 || c.minutes > MAX_MINUTES {
        return Err(format!("minutes must be 1 to {MAX_MINUTES} per counter"));
    }
    Ok(())
}

/// Builds a day's list without storing it; classifies the site first if it never was.
pub async fn preview(
    store: &dyn Store,
    site: &Site,
    day: NaiveDate,
    capacity: Capacity,
    fill: Fill,
) -> Result<(PlanInput, Plan), StoreError> {
    if store.latest_abc(site.id).await?.is_none() {
        classify(store, site, day).await?;
    }
    let day_end = site.time_zone.range(day).1;
    let mut input = store
        .plan_input(site.id, day, day_end, capacity, fill)
        .await?;
    let policy = store.frequency_policy(site.id).await?;
    if policy.policy != Mode::Abc {
        input.risk = Some(risk_plan(store, site, &input, day_end, &policy).await?.0);
    }
    let plan = plan::build(&input);
    Ok((input, plan))
}

/// Returns each item's count interval in calendar days, by SKU, as the list of
/// `day` would set it under the site's `risk` or `blend` policy (the preview's
/// choice, with nothing stored); `None` under `abc` or before the site's first
/// classification, when the class intervals hold.
pub async fn risk_intervals(
    store: &dyn Store,
    site: &Site,
    day: NaiveDate,
) -> Result<Option<(Mode, HashMap<String, f64>)>, StoreError> {
    let policy = store.frequency_policy(site.id).await?;
    if policy.policy == Mode::Abc || store.latest_abc(site.id).await?.is_none() {
        return Ok(None);
    }
    let day_end = site.time_zone.range(day).1;
    // The choice's budget is the `abc` level, which the day's capacity does not change.
    let capacity = Capacity {
        counters: 1,
        minutes: 60,
    };
    let input = store
        .plan_input(site.id, day, day_end, capacity, Fill::Level)
        .await?;
    let (plan, worth) = risk_plan(store, site, &input, day_end, &policy).await?;
    let days = input
        .items
        .iter()
        .zip(&plan.items)
        .filter_map(|(it, r)| Some((worth.get(&it.id)?.sku.clone(), r.as_ref()?.days)))
        .collect();
    Ok(Some((policy.policy, days)))
}

/// Chooses each item's interval by risk: reads its unit cost, picks and count results,
/// gathers its error points (`accuracy`) and lets `policy::risk_plan` choose. Returns the
/// worth read too, by item id.
async fn risk_plan(
    store: &dyn Store,
    site: &Site,
    input: &PlanInput,
    day_end: Timestamp,
    policy: &FrequencyPolicy,
) -> Result<(RiskPlan, HashMap<i64, ItemWorth>), StoreError> {
    let from = Timestamp(day_end.0 - DEMAND_DAYS * crate::time::DAY_MS);
    let worth: HashMap<i64, ItemWorth> = store
        .item_worth(site.id, from, day_end)
        .await?
        .into_iter()
        .map(|w| (w.item, w))
        .collect();
    let results = store
        .accuracy_results(
            site.id,
            ResultQuery {
                from: Timestamp(i64::MIN),
                to: day_end,
                sku: None,
            },
        )
        .await?;
    let mut figures = crate::accuracy::service::figures_by_sku(&results)
        .map_err(|e| anyhow::anyhow!("record-error figures for the risk policy: {e}"))?;
    let history: Vec<ItemHistory> = input
        .items
        .iter()
        .map(|it| {
            let w = worth.get(&it.id);
            let points = w
                .and_then(|w| figures.remove(&w.sku))
                .map(|f| f.points)
                .unwrap_or_default();
            ItemHistory {
                unit_cost_minor: w.map_or(0, |w| w.unit_cost_minor),
                picks_per_day: w.map_or(0.0, |w| w.picks as f64 / DEMAND_DAYS as f64),
                points,
            }
        })
        .collect();
    let plan = policy::risk_plan(input, &history, policy)
        .map_err(|e| anyhow::anyhow!("the risk policy's choice: {e}"))?;
    Ok((plan, worth))
}

/// Builds and stores a day's list, and returns it as stored.
pub async fn build(
    store: &dyn Store,
    site: &Site,
    day: NaiveDate,
    capacity: Capacity,
    fill: Fill,
    replace: bool,
) -> Result<ListView, StoreError> {
    let (input, plan) = preview(store, site, day, capacity, fill).await?;
    save_plan(store, site, &input, &plan, replace).await
}

/// Stores a plan built by [`preview`] as its day's list, and returns it as stored.
pub async fn save_plan(
    store: &dyn Store,
    site: &Site,
    input: &PlanInput,
    plan: &Plan,
    replace: bool,
) -> Result<ListView, StoreError> {
    let day = plan.day;
    let list = NewCountList {
        day,
        counters: plan.runs(),
        minutes: plan.capacity.minutes,
        level_s: plan.level_s,
        warnings: plan.warnings.clone(),
        watermark: input.watermark,
        replace,
        tasks: plan
            .tasks
            .iter()
            .map(|t| NewTask {
                bin_id: input.bins[t.bin as usize].id,
                seq: t.seq,
                run: t.run,
                reason: t.reason,
                class: t.class,
                detail: t.detail.clone(),
                lines: t.lines,
                est_s: t.seconds,
                recount_task: t.keep,
                why: t.why.as_ref().map(|w| {
                    serde_json::to_string(w).expect("the figures are plain numbers and text")
                }),
            })
            .collect(),
    };
    store.save_count_list(site.id, list).await?;
    store
        .count_list(site.id, day)
        .await?
        .ok_or_else(|| anyhow::anyhow!("the list for {day} was stored but cannot be read").into())
}

/// Returns a short fingerprint of what a list holds (day, capacity, warnings,
/// and each task's bin, run, order, reason, time and detail), so a page can tell
/// whether the list it would save now is the one the supervisor previewed.
pub fn digest(v: &ListView) -> String {
    use sha2::{Digest, Sha256};
    let mut h = Sha256::new();
    h.update(format!("{}|{}|{}\n", v.day, v.counters, v.minutes));
    for w in &v.warnings {
        h.update(format!("w|{w}\n"));
    }
    for t in &v.tasks {
        h.update(format!(
            "t|{}|{}|{}|{}|{}|{}\n",
            t.bin, t.run, t.seq, t.reason, t.est_s, t.detail
        ));
    }
    h.finalize()[..12]
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Shows an unstored plan the way a stored list is shown.
pub fn view(input: &PlanInput, plan: &Plan) -> ListView {
    let tasks = plan
        .tasks
        .iter()
        .map(|t| {
            let b = &input.bins[t.bin as usize];
            TaskView {
                id: None,
                seq: t.seq,
                run: t.run,
                bin: b.code.clone(),
                zone: b.zone.clone(),
                aisle: b.place.aisle,
                bay: b.place.bay,
                level: b.place.level,
                reason: t.reason.as_str().to_string(),
                class: t.class,
                detail: t.detail.clone(),
                lines: t.lines,
                est_s: t.seconds,
                status: "open".into(),
                why: t.why.as_ref().map(|w| {
                    serde_json::to_value(w).expect("the figures are plain numbers and text")
                }),
            }
        })
        .collect();
    let mut v = ListView {
        day: plan.day,
        stored: false,
        version: 0,
        counters: plan.runs(),
        minutes: plan.capacity.minutes,
        level_s: plan.level_s,
        watermark: input.watermark,
        warnings: plan.warnings.clone(),
        runs: Vec::new(),
        summary: Summary {
            due_items: plan.due_items,
            due_items_planned: plan.due_items_planned,
            ..Summary::default()
        },
        tasks,
    };
    v.tally(&[]);
    v
}

fn minutes(s: i64) -> String {
    format!("{}:{:02}", s / 60, s % 60)
}

/// Writes the list as a plain table, run by run.
pub fn to_text(v: &ListView) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Count list {} — {} task(s), {} counter(s) x {} min, level {} (m:ss)",
        v.day,
        v.tasks.len(),
        v.counters,
        v.minutes,
        minutes(v.level_s)
    );
    let mut reasons: Vec<String> = v
        .summary
        .by_reason
        .iter()
        .map(|(k, n)| format!("{k} {n}"))
        .collect();
    reasons.extend(
        v.summary
            .by_class
            .iter()
            .map(|(k, n)| format!("class {k} {n}")),
    );
    let _ = writeln!(out, "{}", reasons.join(", "));
    for w in &v.warnings {
        let _ = writeln!(out, "warning: {w}");
    }
    for r in &v.runs {
        let holder = if r.holder.is_empty() {
            String::new()
        } else {
            format!(" ({})", r.holder)
        };
        let _ = writeln!(
            out,
            "\nRun {}{holder}: {} task(s), {}",
            r.run,
            r.tasks,
            minutes(r.est_s)
        );
        for t in v.tasks.iter().filter(|t| t.run == r.run) {
            let class = t.class.map_or("-".to_string(), |c| c.to_string());
            let _ = writeln!(
                out,
                "  {:>4}  {:<14} {:<16} {:<2} {:>3} line(s) {:>6}  {}",
                t.seq,
                t.bin,
                t.reason,
                class,
                t.lines,
                minutes(t.est_s),
                t.detail
            );
        }
    }
    out
}

/// Writes seconds as minutes with one decimal, rounded half up (150 -> "2.5").
fn tenths_of_minutes(s: i64) -> String {
    let tenths = (s.max(0) + 3) / 6;
    format!("{}.{}", tenths / 10, tenths % 10)
}

/// Writes the list as CSV, one task a row, with the run's holder.
pub fn to_csv(v: &ListView) -> Result<String, csv::Error> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record([
        "day", "run", "holder", "seq", "bin", "zone", "aisle", "bay", "level", "reason", "class",
        "lines", "est_s", "est_min", "status", "detail",
    ])?;
    // Text columns go through the formula escape; the numeric ones are numbers.
    use crate::input::csv_cell::text;
    for t in &v.tasks {
        let holder = v
            .runs
            .iter()
            .find(|r| r.run == t.run)
            .map_or("", |r| r.holder.as_str());
        w.write_record([
            v.day.to_string(),
            t.run.to_string(),
            text(holder).into_owned(),
            t.seq.to_string(),
            text(&t.bin).into_owned(),
            text(&t.zone).into_owned(),
            t.aisle.to_string(),
            t.bay.to_string(),
            t.level.to_string(),
            text(&t.reason).into_owned(),
            t.class.map(|c| c.to_string()).unwrap_or_default(),
            t.lines.to_string(),
            t.est_s.to_string(),
            tenths_of_minutes(t.est_s),
            text(&t.status).into_owned(),
            text(&t.detail).into_owned(),
        ])?;
    }
    let bytes = w.into_inner().map_err(|e| e.into_error())?;
    Ok(String::from_utf8(bytes).expect("the CSV writer writes the UTF-8 it was given"))
}

/// Checks who may hold a run: nobody (empty), or a user holding `counter` at the
/// site, returned by their stored user name, which is what `my-tasks` matches.
/// Any other text would give the run to no one who can see it. The outer error
/// is the store's; the inner one says why the holder is refused.
pub async fn check_holder(
    store: &dyn Store,
    site: &Site,
    holder: &str,
) -> Result<Result<Option<crate::accounts::UserName>, String>, StoreError> {
    let holder = holder.trim();
    if holder.is_empty() {
        return Ok(Ok(None));
    }
    let not_a_counter = || {
        format!(
            "holder: {holder} is not a counter at {}: an admin gives the role on the users page",
            site.code
        )
    };
    let Ok(name) = crate::accounts::UserName::parse(holder) else {
        return Ok(Err(not_a_counter()));
    };
    let users = store.site_users(site.id, Timestamp::now()).await?;
    Ok(users
        .into_iter()
        .find(|u| u.user.name == name && u.roles.contains(&crate::accounts::Role::Counter))
        .map(|u| Some(u.user.name))
        .ok_or_else(not_a_counter))
}

/// Local hour at which each site's nightly classification runs.
pub const NIGHTLY_HOUR_LOCAL: u32 = 2;
/// Longest the nightly loop sleeps before it looks at the sites again (new sites, a zone
/// changed), in seconds.
const NIGHTLY_RECHECK_S: u64 = 3_600;

/// Names this server in job claims: its host name and process id.
fn server_name() -> String {
    let host = std::fs::read_to_string("/proc/sys/kernel/hostname")
        .map(|h| h.trim().to_string())
        .unwrap_or_default();
    format!(
        "{}:{}",
        if host.is_empty() { "cairn" } else { &host },
        std::process::id()
    )
}

/// Re-classifies every site once per local day at [`NIGHTLY_HOUR_LOCAL`] in its own zone
/// (`time::day::Daily`: once on a night whose clocks skip or repeat that hour too),
/// logging failures; runs until the process ends.
/// Of several servers on one database, the one that claims a site's day runs it.
pub async fn nightly_classification(store: Arc<dyn Store>) {
    use crate::time::day::Daily;
    let mut jobs: std::collections::HashMap<String, Daily> = Default::default();
    loop {
        let now = Timestamp::now();
        let sites = match store.sites().await {
            Ok(sites) => sites,
            Err(e) => {
                tracing::error!(error = ?e, "nightly ABC classification cannot list sites");
                Vec::new()
            }
        };
        let mut wake = now.plus_ms(NIGHTLY_RECHECK_S as i64 * 1_000);
        for site in &sites {
            let job = jobs
                .entry(site.code.as_str().to_string())
                .and_modify(|j| j.zone = site.time_zone)
                .or_insert_with(|| Daily::starting(site.time_zone, NIGHTLY_HOUR_LOCAL, now));
            if let Some(day) = job.due(now) {
                job.done = Some(day);
                // Several servers may share the database: the first to claim the day runs it.
                match store.claim_job(site.id, "abc", day, &server_name()).await {
                    Ok(true) => {}
                    Ok(false) => {
                        tracing::info!(site = %site.code, %day, "nightly ABC classification already run by another server");
                        wake = wake.min(job.next_at(Timestamp::now()));
                        continue;
                    }
                    Err(e) => {
                        tracing::error!(site = %site.code, %day, error = ?e, "nightly ABC classification cannot be claimed");
                        wake = wake.min(job.next_at(Timestamp::now()));
                        continue;
                    }
                }
                match classify(store.as_ref(), site, day).await {
                    Ok(s) => {
                        tracing::info!(site = %site.code, %day, changed = s.changed, "nightly ABC classification")
                    }
                    Err(e) => {
                        tracing::error!(site = %site.code, %day, error = ?e, "nightly ABC classification failed")
                    }
                }
            }
            wake = wake.min(job.next_at(Timestamp::now()));
        }
        let wait = (wake.0 - Timestamp::now().0).max(0) as u64;
        tokio::time::sleep(std::time::Duration::from_millis(wait)).await;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::planning::TaskView;

    fn list() -> ListView {
        let mut v = ListView {
            day: NaiveDate::from_ymd_opt(2026, 3, 3).expect("a valid date"),
            stored: false,
            version: 0,
            counters: 1,
            minutes: 60,
            level_s: 0,
            watermark: 0,
            warnings: Vec::new(),
            runs: Vec::new(),
            summary: Summary::default(),
            tasks: vec![TaskView {
                id: None,
                seq: 1,
                run: 1,
                bin: "A-01-01-1".into(),
                zone: "A".into(),
                aisle: 1,
                bay: 1,
                level: 1,
                reason: "short_pick".into(),
                class: None,
                detail: "S1 short 3".into(),
                lines: 1,
                est_s: 150,
                status: "open".into(),
                why: None,
            }],
        };
        v.tally(&[]);
        v
    }

    #[test]
    fn the_digest_changes_with_what_the_list_holds_and_only_with_that() {
        let a = list();
        assert_eq!(digest(&a), digest(&list()));
        assert_eq!(digest(&a).len(), 24);
        let mut b = list();
        b.tasks[0].detail.push_str("; S1 short 1");
        assert_ne!(digest(&a), digest(&b), "a second report on the same bin");
        let mut c = list();
        c.warnings.push("left off".into());
        assert_ne!(digest(&a), digest(&c));
        let mut d = list();
        d.version = 9;
        d.watermark = 77;
        assert_eq!(digest(&a), digest(&d), "bookkeeping fields do not count");
    }

    #[test]
    fn csv_minutes_have_one_decimal_rounded_half_up() {
        assert_eq!(tenths_of_minutes(150), "2.5");
        assert_eq!(tenths_of_minutes(153), "2.6");
        assert_eq!(tenths_of_minutes(152), "2.5");
        assert_eq!(tenths_of_minutes(0), "0.0");
        let csv = to_csv(&list()).expect("the list writes");
        assert!(csv.starts_with("day,run,holder,seq,bin,"), "{csv}");
        assert!(csv.contains(",150,2.5,open,"), "{csv}");
    }
}
