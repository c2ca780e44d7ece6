//! The supervisor's pages of the day's count list: build it with a preview,
//! hand runs to counters, move tasks, watch progress (refreshed live by a
//! small script, readable without it) and print the day's bin labels.
//!
//! Reading is for book readers (a counter never sees these pages); every form
//! is for list keepers, and the access table checks both and the form token.
//! The handlers only read forms and call `service` and the store's list
//! operations: the planning itself happens there.

use super::plan::{Capacity, Fill};
use super::progress::{self, RunProgress, Stage, Tally};
use super::routes::parse_day;
use super::{ListView, TaskView, TriggerKind, service};
use crate::AppState;
use crate::accounts::{Principal, Role};
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, CurrentUser, LIST_KEEPERS, RouteTable};
use crate::http::extract::{CurrentSite, Params};
use crate::http::pages::{Me, PageError, render};
use crate::master::Site;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use askama::Template;
use axum::Form;
use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use chrono::NaiveDate;
use serde::Deserialize;

/// Counters offered when a day has no list yet.
const DEFAULT_COUNTERS: u32 = 2;
/// Minutes per counter offered when a day has no list yet.
const DEFAULT_MINUTES: u32 = 120;
/// How often the page asks for fresh progress, in milliseconds.
pub const REFRESH_MS: u32 = 10_000;

/// Adds the supervisor's page routes.
pub fn routes(t: &mut RouteTable) {
    let read = Access::Site(BOOK_READERS);
    let keep = Access::Site(LIST_KEEPERS);
    t.get("/sites/{site}/count-lists", read, today)
        .get("/sites/{site}/count-lists/{day}", read, day_page)
        .post("/sites/{site}/count-lists/{day}/preview", keep, preview)
        .post("/sites/{site}/count-lists/{day}/save", keep, save)
        .post(
            "/sites/{site}/count-lists/{day}/runs/{run}/holder",
            keep,
            hold_run,
        )
        .post(
            "/sites/{site}/count-lists/{day}/tasks/{task}/move",
            keep,
            move_task,
        )
        .get("/sites/{site}/count-lists/{day}/labels", read, labels_page)
        .get("/static/count-list.js", Access::Public, script);
}

/// A submitted form as name-value pairs.
type Fields = Vec<(String, String)>;

fn field<'a>(fields: &'a Fields, name: &str) -> &'a str {
    fields
        .iter()
        .find(|(k, _)| k == name)
        .map_or("", |(_, v)| v.trim())
}

/// Writes seconds as minutes and seconds, e.g. `2:30`.
fn mmss(s: i64) -> String {
    format!("{}:{:02}", s / 60, s % 60)
}

/// Writes a tally as the progress table and its live refresh show it.
fn tally(t: Tally) -> String {
    format!("{} · {}", t.tasks, mmss(t.est_s))
}

fn reason_words(reason: &str) -> String {
    reason.replace('_', " ")
}

fn day_url(site: &Site, day: NaiveDate) -> String {
    format!("/sites/{}/count-lists/{day}", site.code)
}

/// The capacity form: counters, minutes each, and whether due counts fill it.
#[derive(Debug, Clone, Copy)]
struct CapacityForm {
    counters: u32,
    minutes: u32,
    fill: Fill,
}

impl CapacityForm {
    fn read(fields: &Fields) -> Result<Self, String> {
        let number = |name: &str, what: &str| {
            let text = field(fields, name);
            text.parse::<u32>()
                .map_err(|_| format!("{what}: '{text}' is not a whole number"))
        };
        let f = Self {
            counters: number("counters", "Counters")?,
            minutes: number("minutes", "Minutes per counter")?,
            fill: match field(fields, "fill") {
                "" | "level" => Fill::Level,
                "capacity" => Fill::Capacity,
                other => return Err(format!("Fill: '{other}' is not 'level' or 'capacity'")),
            },
        };
        service::check_capacity(f.capacity())?;
        Ok(f)
    }

    fn capacity(self) -> Capacity {
        Capacity {
            counters: self.counters,
            minutes: self.minutes,
        }
    }

    fn fill_capacity(&self) -> bool {
        self.fill == Fill::Capacity
    }

    fn fill_text(&self) -> &'static str {
        match self.fill {
            Fill::Level => "level",
            Fill::Capacity => "capacity",
        }
    }
}

/// One option of a select.
struct Choice {
    value: String,
    label: String,
    selected: bool,
}

struct TaskRow {
    id: i64,
    seq: u32,
    bin: String,
    zone: String,
    aisle: u16,
    bay: u16,
    level: u8,
    reason: String,
    triggered: bool,
    class: String,
    detail: String,
    lines: u32,
    minutes: String,
    stage: Stage,
    /// Runs it may move to (empty when it cannot move).
    moves: Vec<Choice>,
}

/// One row of the progress table: a run, or the whole day (`key` "all").
struct ProgressRow {
    key: String,
    name: String,
    not_started: String,
    in_progress: String,
    done: String,
    done_pct: u32,
}

impl ProgressRow {
    fn of(key: String, name: String, p: &RunProgress) -> Self {
        Self {
            key,
            name,
            not_started: tally(p.not_started),
            in_progress: tally(p.in_progress),
            done: tally(p.done),
            done_pct: p.done_pct,
        }
    }
}

struct RunBlock {
    run: u32,
    holder: String,
    minutes: String,
    /// Over the minutes one counter has (never, unless a task was moved in).
    over: bool,
    holders: Vec<Choice>,
    tasks: Vec<TaskRow>,
}

/// A list as the page shows it: the stored list, or a preview of a build.
struct Shown {
    stored: bool,
    version: i64,
    counters: u32,
    minutes: u32,
    level: String,
    warnings: Vec<String>,
    tasks: usize,
    triggered: usize,
    due_items: usize,
    due_items_planned: usize,
    by_reason: Vec<(String, usize)>,
    by_class: Vec<(String, usize)>,
    runs: Vec<RunBlock>,
    progress: Vec<ProgressRow>,
    digest: String,
}

/// A counter of the site who may hold a run.
struct Counter {
    name: String,
    display_name: String,
}

fn shown(v: &ListView, counters: &[Counter], keeper: bool) -> Shown {
    let run_name = |run: u32, holder: &str| {
        if holder.is_empty() {
            format!("run {run}")
        } else {
            format!("run {run} ({holder})")
        }
    };
    let runs = v
        .runs
        .iter()
        .map(|r| {
            let mut holders: Vec<Choice> = counters
                .iter()
                .map(|c| Choice {
                    value: c.name.clone(),
                    label: format!("{} ({})", c.display_name, c.name),
                    selected: c.name == r.holder,
                })
                .collect();
            if !r.holder.is_empty() && !counters.iter().any(|c| c.name == r.holder) {
                holders.push(Choice {
                    value: r.holder.clone(),
                    label: format!("{} (not a counter here)", r.holder),
                    selected: true,
                });
            }
            let tasks = v
                .tasks
                .iter()
                .filter(|t| t.run == r.run)
                .map(|t| task_row(v, t, keeper, &run_name))
                .collect();
            RunBlock {
                run: r.run,
                holder: r.holder.clone(),
                minutes: mmss(r.est_s),
                over: r.est_s > i64::from(v.minutes) * 60,
                holders,
                tasks,
            }
        })
        .collect();
    let p = progress::of(v);
    let mut rows: Vec<ProgressRow> = p
        .runs
        .iter()
        .map(|r| ProgressRow::of(r.run.to_string(), run_name(r.run, &r.holder), r))
        .collect();
    rows.push(ProgressRow::of("all".into(), "the day".into(), &p.total));
    Shown {
        stored: v.stored,
        version: v.version,
        counters: v.counters,
        minutes: v.minutes,
        level: mmss(v.level_s),
        warnings: v.warnings.clone(),
        tasks: v.summary.tasks,
        triggered: v.summary.triggered,
        due_items: v.summary.due_items,
        due_items_planned: v.summary.due_items_planned,
        by_reason: TriggerKind::ALL
            .iter()
            .map(|k| k.as_str())
            .chain(["due", "dead_stock"])
            .filter_map(|k| v.summary.by_reason.get(k).map(|&n| (reason_words(k), n)))
            .collect(),
        by_class: v
            .summary
            .by_class
            .iter()
            .map(|(k, &n)| (k.clone(), n))
            .collect(),
        runs,
        progress: rows,
        digest: service::digest(v),
    }
}

fn task_row(
    v: &ListView,
    t: &TaskView,
    keeper: bool,
    run_name: &dyn Fn(u32, &str) -> String,
) -> TaskRow {
    let stage = Stage::of(&t.status);
    let moves = if keeper && v.stored && stage != Stage::Done {
        v.runs
            .iter()
            .filter(|r| r.run != t.run)
            .map(|r| Choice {
                value: r.run.to_string(),
                label: run_name(r.run, &r.holder),
                selected: false,
            })
            .collect()
    } else {
        Vec::new()
    };
    TaskRow {
        id: t.id.unwrap_or_default(),
        seq: t.seq,
        bin: t.bin.clone(),
        zone: t.zone.clone(),
        aisle: t.aisle,
        bay: t.bay,
        level: t.level,
        reason: reason_words(&t.reason),
        triggered: TriggerKind::parse(&t.reason).is_some(),
        class: t.class.map(|c| c.to_string()).unwrap_or_default(),
        detail: t.detail.clone(),
        lines: t.lines,
        minutes: mmss(t.est_s),
        stage,
        moves,
    }
}

#[derive(Template)]
#[template(path = "count_list.html")]
struct DayPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    day: NaiveDate,
    prev_day: NaiveDate,
    next_day: NaiveDate,
    keeper: bool,
    message: String,
    form: CapacityForm,
    /// A list is stored for the day (the preview would replace it).
    has_list: bool,
    /// The stored list has work under way, so it can no longer be rebuilt.
    started: bool,
    shown: Option<Shown>,
    refresh_ms: u32,
    version: &'static str,
}

async fn site_counters(state: &AppState, site: &Site) -> Result<Vec<Counter>, StoreError> {
    Ok(state
        .store
        .site_users(site.id, Timestamp::now())
        .await?
        .into_iter()
        .filter(|u| u.roles.contains(&Role::Counter))
        .map(|u| Counter {
            name: u.user.name.to_string(),
            display_name: u.user.display_name,
        })
        .collect())
}

/// What a day page shows besides the stored list.
struct Showing {
    status: StatusCode,
    message: String,
    form: Option<CapacityForm>,
    preview: Option<ListView>,
}

impl Showing {
    fn list() -> Self {
        Self {
            status: StatusCode::OK,
            message: String::new(),
            form: None,
            preview: None,
        }
    }

    fn refused(status: StatusCode, message: String) -> Self {
        Self {
            status,
            message,
            ..Self::list()
        }
    }
}

async fn render_day(
    state: &AppState,
    p: &Principal,
    site: Site,
    day: NaiveDate,
    showing: Showing,
) -> Result<Response, PageError> {
    let stored = state.store.count_list(site.id, day).await?;
    let counters = site_counters(state, &site).await?;
    let keeper = p.holds_any(site.id, LIST_KEEPERS);
    let form = showing.form.unwrap_or(match &stored {
        Some(l) => CapacityForm {
            counters: l.counters,
            minutes: l.minutes,
            fill: Fill::Level,
        },
        None => CapacityForm {
            counters: DEFAULT_COUNTERS,
            minutes: DEFAULT_MINUTES,
            fill: Fill::Level,
        },
    });
    let started = stored
        .as_ref()
        .is_some_and(|l| l.tasks.iter().any(|t| t.status != "open"));
    let shown = match (&showing.preview, &stored) {
        (Some(v), _) | (None, Some(v)) => Some(shown(v, &counters, keeper)),
        (None, None) => None,
    };
    let me = Me::at(p, &site);
    let page = render(&DayPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        prev_day: day.pred_opt().unwrap_or(day),
        next_day: day.succ_opt().unwrap_or(day),
        site,
        day,
        keeper,
        message: showing.message,
        form,
        has_list: stored.is_some(),
        started,
        shown,
        refresh_ms: REFRESH_MS,
        version: crate::build_info::describe(),
    })?;
    Ok((showing.status, page).into_response())
}

/// Turns a refusal of the store into a status and a message for the page.
fn refusal(e: StoreError) -> Result<Showing, PageError> {
    let (status, message) = match e {
        StoreError::Conflict(m) => (StatusCode::CONFLICT, m),
        StoreError::NotFound(m) => (StatusCode::NOT_FOUND, m),
        StoreError::Rejected(rows) => (
            StatusCode::UNPROCESSABLE_ENTITY,
            rows.into_iter()
                .map(|r| r.message)
                .collect::<Vec<_>>()
                .join("; "),
        ),
        other => return Err(other.into()),
    };
    Ok(Showing::refused(status, message))
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct TodayParams {
    day: Option<String>,
}

/// Sends the browser to today's list (the site's local day), or to the day the date field
/// names. On a day the site does not work, "today" is the last day it worked: what was
/// counted and what was left.
async fn today(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(q): Params<TodayParams>,
) -> Result<Response, PageError> {
    let day = match q.day.as_deref().map(str::trim) {
        Some(d) if !d.is_empty() => parse_day(d)?,
        _ => {
            let today = site.time_zone.today();
            let calendar = state.store.calendar(site.id).await?;
            if calendar.is_working(today) {
                today
            } else {
                calendar.previous_working_day(today).unwrap_or(today)
            }
        }
    };
    Ok(Redirect::to(&day_url(&site, day)).into_response())
}

async fn day_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, day)): Path<(String, String)>,
) -> Result<Response, PageError> {
    let day = parse_day(&day)?;
    render_day(&state, &p, site, day, Showing::list()).await
}

/// Builds the day's list without saving it and shows it beside a save button.
async fn preview(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, day)): Path<(String, String)>,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let day = parse_day(&day)?;
    let form = match CapacityForm::read(&fields) {
        Ok(f) => f,
        Err(m) => {
            let showing = Showing::refused(StatusCode::BAD_REQUEST, m);
            return render_day(&state, &p, site, day, showing).await;
        }
    };
    let (input, plan) =
        service::preview(state.store.as_ref(), &site, day, form.capacity(), form.fill).await?;
    let showing = Showing {
        form: Some(form),
        preview: Some(service::view(&input, &plan)),
        ..Showing::list()
    };
    render_day(&state, &p, site, day, showing).await
}

/// Saves the list the supervisor previewed, if building it again gives the same list.
async fn save(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, day)): Path<(String, String)>,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let day = parse_day(&day)?;
    let form = match CapacityForm::read(&fields) {
        Ok(f) => f,
        Err(m) => {
            let showing = Showing::refused(StatusCode::BAD_REQUEST, m);
            return render_day(&state, &p, site, day, showing).await;
        }
    };
    let store = state.store.as_ref();
    let (input, plan) = service::preview(store, &site, day, form.capacity(), form.fill).await?;
    let view = service::view(&input, &plan);
    if service::digest(&view) != field(&fields, "digest") {
        let showing = Showing {
            status: StatusCode::CONFLICT,
            message: "The list would now differ from the preview you saw (new movements or \
                      reports arrived). Here is the new preview: check it and save again."
                .into(),
            form: Some(form),
            preview: Some(view),
        };
        return render_day(&state, &p, site, day, showing).await;
    }
    let replace = field(&fields, "replace") == "yes";
    match service::save_plan(store, &site, &input, &plan, replace).await {
        Ok(_) => Ok(Redirect::to(&day_url(&site, day)).into_response()),
        Err(e) => {
            let showing = Showing {
                form: Some(form),
                preview: Some(view),
                ..refusal(e)?
            };
            render_day(&state, &p, site, day, showing).await
        }
    }
}

/// Gives a run to one of the site's counters, or to nobody.
async fn hold_run(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, day, run)): Path<(String, String, u32)>,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let day = parse_day(&day)?;
    let holder =
        match service::check_holder(state.store.as_ref(), &site, field(&fields, "holder")).await? {
            Ok(h) => h,
            Err(m) => {
                let showing = Showing::refused(StatusCode::BAD_REQUEST, m);
                return render_day(&state, &p, site, day, showing).await;
            }
        };
    match state.store.hold_run(site.id, day, run, holder).await {
        Ok(()) => Ok(Redirect::to(&day_url(&site, day)).into_response()),
        Err(e) => render_day(&state, &p, site, day, refusal(e)?).await,
    }
}

/// Moves a task to another run of the day's list.
async fn move_task(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, day, task)): Path<(String, String, i64)>,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let day = parse_day(&day)?;
    let text = field(&fields, "run");
    let Ok(run) = text.parse::<u32>() else {
        let m = format!("Run: '{text}' is not a run number");
        let showing = Showing::refused(StatusCode::BAD_REQUEST, m);
        return render_day(&state, &p, site, day, showing).await;
    };
    match state.store.move_task(site.id, day, task, run).await {
        Ok(()) => Ok(Redirect::to(&day_url(&site, day)).into_response()),
        Err(e) => render_day(&state, &p, site, day, refusal(e)?).await,
    }
}

/// One run's printable sheet.
struct Sheet {
    title: String,
    svg: String,
    bins: Vec<String>,
}

#[derive(Template)]
#[template(path = "count_list_labels.html")]
struct LabelsPage {
    me: Option<Me>,
    site: Site,
    day: NaiveDate,
    sheets: Vec<Sheet>,
    version: &'static str,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct LabelParams {
    run: Option<u32>,
}

/// Shows the day's bin labels, one sheet per run in walking order, ready to print.
async fn labels_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, day)): Path<(String, String)>,
    Params(q): Params<LabelParams>,
) -> Result<Response, PageError> {
    let day = parse_day(&day)?;
    let list =
        state.store.count_list(site.id, day).await?.ok_or_else(|| {
            ApiError::NotFound(format!("no count list for {day}: build it first"))
        })?;
    let mut sheets = Vec::new();
    for r in list
        .runs
        .iter()
        .filter(|r| q.run.is_none_or(|n| n == r.run))
    {
        let tasks: Vec<&TaskView> = list.tasks.iter().filter(|t| t.run == r.run).collect();
        if tasks.is_empty() {
            continue;
        }
        let labels = tasks
            .iter()
            .map(|t| t.label(&site.code))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| anyhow::anyhow!("a bin of the list for {day} has no valid label: {e}"))?;
        let holder = if r.holder.is_empty() {
            String::new()
        } else {
            format!(" — {}", r.holder)
        };
        let title = format!("{} · {day} · run {}{holder}", site.name, r.run);
        sheets.push(Sheet {
            svg: cairn_scan::label_sheet_svg(&labels, &title),
            title,
            bins: tasks.iter().map(|t| t.bin.clone()).collect(),
        });
    }
    Ok(render(&LabelsPage {
        me: Some(Me::at(&p, &site)),
        site,
        day,
        sheets,
        version: crate::build_info::describe(),
    })?
    .into_response())
}

async fn script(headers: axum::http::HeaderMap) -> axum::response::Response {
    crate::web::page_file(
        include_str!("../../static/count-list.js"),
        "text/javascript; charset=utf-8",
        &headers,
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fields(pairs: &[(&str, &str)]) -> Fields {
        pairs
            .iter()
            .map(|(k, v)| (k.to_string(), v.to_string()))
            .collect()
    }

    #[test]
    fn the_capacity_form_names_the_field_that_is_wrong() {
        let ok = CapacityForm::read(&fields(&[
            ("counters", "3"),
            ("minutes", " 90 "),
            ("fill", "capacity"),
        ]))
        .unwrap();
        assert_eq!((ok.counters, ok.minutes, ok.fill), (3, 90, Fill::Capacity));
        let e = CapacityForm::read(&fields(&[("counters", "two"), ("minutes", "90")])).unwrap_err();
        assert!(e.starts_with("Counters: 'two'"), "{e}");
        let e = CapacityForm::read(&fields(&[("counters", "2"), ("minutes", "0")])).unwrap_err();
        assert!(e.contains("minutes must be 1 to"), "{e}");
        let e = CapacityForm::read(&fields(&[
            ("counters", "2"),
            ("minutes", "60"),
            ("fill", "more"),
        ]))
        .unwrap_err();
        assert!(e.starts_with("Fill:"), "{e}");
    }

    #[test]
    fn times_and_tallies_read_as_minutes_and_seconds() {
        assert_eq!(mmss(150), "2:30");
        assert_eq!(mmss(3_605), "60:05");
        assert_eq!(
            tally(Tally {
                tasks: 3,
                est_s: 390
            }),
            "3 · 6:30"
        );
    }
}
