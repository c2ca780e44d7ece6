//! HTTP routes of the day's count list, relative to `/api/v1/sites/{site}`:
//! settings and calendar, ABC runs and class history, short-pick reports,
//! and building, reading and adjusting a day's list.

use super::calendar::{Calendar, MAX_HOLIDAYS};
use super::phone;
use super::plan::{Capacity, Fill};
use super::policy::FrequencyPolicy;
use super::progress::{self, Progress};
use super::short_pick::{ShortPickOutcome, ShortPickRecord};
use super::{AbcSummary, ClassChange, ListView, Settings, service};
use crate::AppState;
use crate::accounts::Role;
use crate::accounts::audit;
use crate::error::ApiError;
use crate::http::access::{
    Access, BOOK_READERS, BOOK_WRITERS, COUNT_POLICY, ClientAddress, CurrentUser, LIST_KEEPERS,
    RouteTable,
};
use crate::http::extract::{CurrentSite, JsonRows, Params};
use crate::master::codes::BinCode;
use crate::master::codes::Sku;
use axum::Json;
use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{IntoResponse, Response};
use chrono::NaiveDate;
use serde::{Deserialize, Serialize};

/// Adds the planning routes. Settings and the calendar are policy; lists are
/// kept by supervisors; anything that shows usage value or book lines is book data.
pub fn routes(t: &mut RouteTable) {
    macro_rules! path {
        ($tail:literal) => {
            concat!("/api/v1/sites/{site}", $tail)
        };
    }
    t.get(
        path!("/planning/settings"),
        Access::Site(BOOK_READERS),
        get_settings,
    )
    .put(
        path!("/planning/settings"),
        Access::Site(COUNT_POLICY),
        put_settings,
    )
    .get(
        path!("/planning/frequency-policy"),
        Access::Site(BOOK_READERS),
        get_frequency_policy,
    )
    .put(
        path!("/planning/frequency-policy"),
        Access::Site(COUNT_POLICY),
        put_frequency_policy,
    )
    .get(
        path!("/planning/calendar"),
        Access::Site(BOOK_READERS),
        get_calendar,
    )
    .put(
        path!("/planning/calendar"),
        Access::Site(LIST_KEEPERS),
        put_calendar,
    )
    .get(path!("/planning/abc"), Access::Site(BOOK_READERS), get_abc)
    .post(path!("/planning/abc"), Access::Site(COUNT_POLICY), run_abc)
    .get(
        path!("/items/{sku}/classes"),
        Access::Site(BOOK_READERS),
        class_history,
    )
    .post(
        path!("/short-picks"),
        Access::Site(BOOK_WRITERS),
        post_short_picks,
    )
    .post(
        path!("/count-lists"),
        Access::Site(LIST_KEEPERS),
        build_list,
    )
    .get(
        path!("/count-lists/{day}"),
        Access::Site(BOOK_READERS),
        get_list,
    )
    .post(
        path!("/count-lists/{day}/tasks/{task}/move"),
        Access::Site(LIST_KEEPERS),
        move_task,
    )
    .put(
        path!("/count-lists/{day}/runs/{run}"),
        Access::Site(LIST_KEEPERS),
        hold_run,
    )
    .get(
        path!("/count-lists/{day}/progress"),
        Access::Site(BOOK_READERS),
        get_progress,
    )
    .get(path!("/my-tasks"), Access::Site(&[Role::Counter]), my_tasks);
}

/// Source recorded for short-pick reports that name none.
const API_SOURCE: &str = "api";

pub(super) fn parse_day(text: &str) -> Result<NaiveDate, ApiError> {
    crate::input::bounds::day(text).map_err(ApiError::BadRequest)
}

fn body<T: serde::de::DeserializeOwned>(bytes: &[u8]) -> Result<T, ApiError> {
    Ok(crate::input::json::read(bytes)?)
}

async fn get_settings(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<Settings>, ApiError> {
    Ok(Json(state.store.planning_settings(site.id).await?))
}

async fn put_settings(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<Settings>, ApiError> {
    let s: Settings = body(&bytes)?;
    s.check().map_err(ApiError::BadRequest)?;
    state.store.put_planning_settings(site.id, s).await?;
    Ok(Json(s))
}

async fn get_frequency_policy(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<FrequencyPolicy>, ApiError> {
    Ok(Json(state.store.frequency_policy(site.id).await?))
}

/// Sets the frequency policy; a body at fault is refused whole (422), each field named.
async fn put_frequency_policy(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<FrequencyPolicy>, ApiError> {
    let value: serde_json::Value = body(&bytes)?;
    let before = state.store.frequency_policy(site.id).await?;
    let policy = FrequencyPolicy::from_json(&value, &before)
        .map_err(|errors| ApiError::Rejected(errors.into_iter().map(|e| e.at(0)).collect()))?;
    let audit = audit::interval_rule_change(&p, site.id, &before, &policy).from_address(&address);
    state
        .store
        .put_frequency_policy(site.id, policy, audit)
        .await?;
    Ok(Json(policy))
}

#[derive(Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub(crate) struct CalendarBody {
    working_weekdays: Vec<String>,
    #[serde(default)]
    holidays: Vec<String>,
}

impl From<&Calendar> for CalendarBody {
    fn from(c: &Calendar) -> Self {
        Self {
            working_weekdays: c.weekday_names(),
            holidays: c.holidays.iter().map(|d| d.to_string()).collect(),
        }
    }
}

async fn get_calendar(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<CalendarBody>, ApiError> {
    Ok(Json(CalendarBody::from(
        &state.store.calendar(site.id).await?,
    )))
}

async fn put_calendar(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<CalendarBody>, ApiError> {
    let b: CalendarBody = body(&bytes)?;
    if b.holidays.len() > MAX_HOLIDAYS {
        return Err(ApiError::TooLarge(format!(
            "at most {MAX_HOLIDAYS} holidays"
        )));
    }
    let calendar = Calendar {
        working_weekdays: Calendar::weekdays_from_names(&b.working_weekdays)
            .map_err(|e| ApiError::BadRequest(format!("working_weekdays: {e}")))?,
        holidays: b
            .holidays
            .iter()
            .map(|d| parse_day(d))
            .collect::<Result<_, _>>()?,
    };
    state.store.put_calendar(site.id, calendar.clone()).await?;
    Ok(Json(CalendarBody::from(&calendar)))
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct AbcParams {
    day: Option<String>,
}

async fn run_abc(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(p): Params<AbcParams>,
) -> Result<Json<AbcSummary>, ApiError> {
    let day = match p.day {
        Some(d) => parse_day(&d)?,
        None => site.time_zone.today(),
    };
    Ok(Json(
        service::classify(state.store.as_ref(), &site, day).await?,
    ))
}

async fn get_abc(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<AbcSummary>, ApiError> {
    state
        .store
        .latest_abc(site.id)
        .await?
        .map(Json)
        .ok_or_else(|| {
            ApiError::NotFound("this site has not been classified yet: POST to run it".into())
        })
}

async fn class_history(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, sku)): Path<(String, String)>,
) -> Result<Json<Vec<ClassChange>>, ApiError> {
    let sku = Sku::parse(&sku).map_err(|e| ApiError::BadRequest(e.to_string()))?;
    Ok(Json(state.store.class_history(site.id, sku).await?))
}

async fn post_short_picks(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<ShortPickOutcome>, ApiError> {
    let now = crate::time::Timestamp::now();
    let rows = rows.validated(|r: ShortPickRecord| r.validate(now, API_SOURCE))?;
    Ok(Json(state.store.record_short_picks(site.id, rows).await?))
}

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub(crate) struct BuildBody {
    day: String,
    counters: u32,
    minutes: u32,
    #[serde(default)]
    fill: Fill,
    /// Build and show without storing.
    #[serde(default)]
    preview: bool,
    /// Replace a list already stored for the day (refused once it has started).
    #[serde(default)]
    replace: bool,
}

async fn build_list(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<ListView>, ApiError> {
    let b: BuildBody = body(&bytes)?;
    let day = parse_day(&b.day)?;
    let capacity = Capacity {
        counters: b.counters,
        minutes: b.minutes,
    };
    service::check_capacity(capacity).map_err(ApiError::BadRequest)?;
    let store = state.store.as_ref();
    if b.preview {
        let (input, plan) = service::preview(store, &site, day, capacity, b.fill).await?;
        return Ok(Json(service::view(&input, &plan)));
    }
    Ok(Json(
        service::build(store, &site, day, capacity, b.fill, b.replace).await?,
    ))
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ListParams {
    format: Option<String>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct MyTasksParams {
    day: Option<String>,
}

/// The signed-in counter's run of the day's list, without book quantities.
async fn my_tasks(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Params(q): Params<MyTasksParams>,
) -> Result<Json<phone::PhoneList>, ApiError> {
    let day = match q.day {
        Some(d) => parse_day(&d)?,
        None => site.time_zone.today(),
    };
    let list = state.store.count_list(site.id, day).await?.ok_or_else(|| {
        ApiError::NotFound(format!("no count list for {day} yet: ask your supervisor"))
    })?;
    let holder = p.user.name.as_str().to_string();
    let bins = list
        .runs
        .iter()
        .find(|r| r.holder == holder)
        .map(|r| {
            list.tasks
                .iter()
                .filter(|t| t.run == r.run)
                .map(|t| BinCode::parse(&t.bin))
                .collect::<Result<Vec<_>, _>>()
        })
        .transpose()
        .map_err(|e| ApiError::Internal(anyhow::anyhow!("a stored task names a bad bin: {e}")))?
        .unwrap_or_default();
    let contents = state.store.bin_contents(site.id, bins).await?;
    Ok(Json(phone::for_counter(
        &list,
        &holder,
        &site.code,
        site.time_zone,
        site.time_zone.today(),
        &contents,
    )))
}

async fn get_list(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, day)): Path<(String, String)>,
    Params(p): Params<ListParams>,
) -> Result<Response, ApiError> {
    let day = parse_day(&day)?;
    let list = state
        .store
        .count_list(site.id, day)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("no count list for {day}")))?;
    match p.format.as_deref() {
        None | Some("json") => Ok(Json(list).into_response()),
        Some("csv") => {
            let csv = service::to_csv(&list).map_err(anyhow::Error::from)?;
            let file = format!(
                "attachment; filename=\"count-list-{}-{day}.csv\"",
                site.code
            );
            Ok((
                [
                    (header::CONTENT_TYPE, "text/csv; charset=utf-8".to_string()),
                    (header::CONTENT_DISPOSITION, file),
                ],
                csv,
            )
                .into_response())
        }
        Some(other) => Err(ApiError::BadRequest(format!(
            "format '{other}' is not json or csv"
        ))),
    }
}

/// Tasks and minutes not started, in progress and done, per run: what the
/// supervisor's page polls to stay current.
async fn get_progress(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, day)): Path<(String, String)>,
) -> Result<Json<Progress>, ApiError> {
    let day = parse_day(&day)?;
    let list = state
        .store
        .count_list(site.id, day)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("no count list for {day}")))?;
    Ok(Json(progress::of(&list)))
}

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub(crate) struct MoveBody {
    run: u32,
}

async fn move_task(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, day, task)): Path<(String, String, i64)>,
    bytes: axum::body::Bytes,
) -> Result<Json<ListView>, ApiError> {
    let day = parse_day(&day)?;
    let b: MoveBody = body(&bytes)?;
    state.store.move_task(site.id, day, task, b.run).await?;
    stored(&state, &site, day).await
}

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub(crate) struct HoldBody {
    holder: String,
}

async fn hold_run(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, day, run)): Path<(String, String, u32)>,
    bytes: axum::body::Bytes,
) -> Result<Json<ListView>, ApiError> {
    let day = parse_day(&day)?;
    let b: HoldBody = body(&bytes)?;
    let holder = service::check_holder(state.store.as_ref(), &site, &b.holder)
        .await?
        .map_err(ApiError::BadRequest)?;
    state.store.hold_run(site.id, day, run, holder).await?;
    stored(&state, &site, day).await
}

async fn stored(
    state: &AppState,
    site: &crate::master::Site,
    day: NaiveDate,
) -> Result<Json<ListView>, ApiError> {
    state
        .store
        .count_list(site.id, day)
        .await?
        .map(Json)
        .ok_or_else(|| ApiError::NotFound(format!("no count list for {day}")))
}
