//! HTTP routes of record accuracy and the planner's buffer, relative to
//! `/api/v1/sites/{site}`: the accuracy report of a period (JSON, or any of
//! its tables as CSV), per-item record error, the site's accuracy settings,
//! the planner's inputs, and the buffer of every item or one. Book readers
//! read; planners (and inventory managers) set inputs and settings.

use super::inputs::{AccuracySettings, InputParams, PlannerInputRecord, input_page};
use super::lists::{BUFFER_COLUMNS, ITEM_COLUMNS};
use super::report::{self, ACCURACY_TABLES, Table};
use super::service::{
    self, AccuracyReport, BufferReport, DEFAULT_PERIOD_DAYS, DemandWindow, Filter, ItemReport,
    Period,
};
use super::table::{Column, RawView, View};
use super::whatif;
use crate::AppState;
use crate::accounts::audit;
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, CurrentUser, PLANNERS, RouteTable};
use crate::http::etag;
use crate::http::extract::{CurrentSite, JsonRows, Params};
use crate::master::Site;
use crate::master::codes::Sku;
use crate::planning::abc::Class;
use crate::time::day::SiteZone;
use axum::Json;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, header};
use axum::response::{IntoResponse, Response};
use chrono::NaiveDate;
use serde::Deserialize;

/// Adds the accuracy and buffer routes, API and pages.
pub fn routes(t: &mut RouteTable) {
    macro_rules! path {
        ($tail:literal) => {
            concat!("/api/v1/sites/{site}", $tail)
        };
    }
    let read = Access::Site(BOOK_READERS);
    t.get(path!("/accuracy"), read, get_accuracy)
        .get(path!("/accuracy/items"), read, get_items)
        .get(path!("/accuracy/items/{sku}"), read, get_item)
        .get(path!("/accuracy/settings"), read, get_settings)
        .put(
            path!("/accuracy/settings"),
            Access::Site(PLANNERS),
            put_settings,
        )
        .get(path!("/planner-inputs"), read, get_inputs)
        .post(
            path!("/planner-inputs"),
            Access::Site(PLANNERS),
            post_inputs,
        )
        .get(path!("/buffer"), read, get_buffers)
        .get(path!("/buffer/{sku}"), read, get_buffer);
}

/// Query parameters the accuracy and buffer routes and pages share; an empty
/// value is the same as none (as a page's "all" choice sends it).
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReportParams {
    pub since: Option<String>,
    pub until: Option<String>,
    pub class: Option<String>,
    pub zone: Option<String>,
    pub format: Option<String>,
    pub table: Option<String>,
    pub window_days: Option<String>,
    /// One item's buffer: a count interval to see it at, in days.
    pub interval: Option<String>,
}

impl ReportParams {
    /// Refuses the parameters named, which the route does not read, so a value sent to
    /// one is never silently dropped (the accuracy report has no `window_days`, one
    /// item's figures no class, zone or table, one item's buffer no `since`).
    pub fn refuse(&self, names: &[&str]) -> Result<(), ApiError> {
        for name in names {
            let v = match *name {
                "since" => &self.since,
                "class" => &self.class,
                "zone" => &self.zone,
                "table" => &self.table,
                "window_days" => &self.window_days,
                "interval" => &self.interval,
                other => unreachable!("refuse is called with a report parameter, not {other}"),
            };
            if v.is_some() {
                return Err(ApiError::BadRequest(format!(
                    "{name}: not a parameter of this report"
                )));
            }
        }
        Ok(())
    }
}

/// Query parameters of the long tables (the buffer, record error per item),
/// pages and API alike: the report's own (period or demand window, format)
/// and the table's view (filter, order, page). Empty is the same as none.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ListParams {
    pub since: Option<String>,
    pub until: Option<String>,
    pub window_days: Option<String>,
    pub format: Option<String>,
    pub class: Option<String>,
    pub group: Option<String>,
    pub q: Option<String>,
    pub sort: Option<String>,
    pub dir: Option<String>,
    pub page: Option<String>,
    pub per: Option<String>,
}

impl ListParams {
    /// Returns the report's parameters (the period or demand window, the format).
    pub fn report(&self) -> ReportParams {
        ReportParams {
            since: self.since.clone(),
            until: self.until.clone(),
            window_days: self.window_days.clone(),
            format: self.format.clone(),
            ..ReportParams::default()
        }
    }

    /// Checks the view against a table's columns.
    pub fn view<R>(&self, columns: &[Column<R>]) -> Result<View, ApiError> {
        View::parse(
            columns,
            RawView {
                sort: self.sort.as_deref(),
                dir: self.dir.as_deref(),
                class: self.class.as_deref(),
                group: self.group.as_deref(),
                q: self.q.as_deref(),
                page: self.page.as_deref(),
                per: self.per.as_deref(),
            },
        )
        .map_err(ApiError::BadRequest)
    }

    /// Refuses the parameters named, which the route does not read (the
    /// buffer has no `since`, per-item figures no `window_days`, pages no `format`).
    pub fn refuse(&self, names: &[&str]) -> Result<(), ApiError> {
        for name in names {
            let v = match *name {
                "since" => &self.since,
                "window_days" => &self.window_days,
                "format" => &self.format,
                other => unreachable!("refuse is called with a report parameter, not {other}"),
            };
            if v.is_some() {
                return Err(ApiError::BadRequest(format!(
                    "{name}: not a parameter of this table"
                )));
            }
        }
        Ok(())
    }

    /// Checks the view of an API answer, which has every row the filter
    /// keeps: paging is for the pages.
    fn unpaged_view<R>(&self, columns: &[Column<R>]) -> Result<View, ApiError> {
        for (name, v) in [("page", &self.page), ("per", &self.per)] {
            if given(v).is_some() {
                return Err(ApiError::BadRequest(format!(
                    "{name}: the API and its CSV answer every row the filter keeps; leave {name} out"
                )));
            }
        }
        self.view(columns)
    }
}

fn given(v: &Option<String>) -> Option<&str> {
    v.as_deref().map(str::trim).filter(|s| !s.is_empty())
}

/// Parses a `YYYY-MM-DD` day, naming the parameter when it is not one.
pub fn parse_day(name: &str, text: &str) -> Result<NaiveDate, ApiError> {
    crate::input::bounds::day(text).map_err(|e| ApiError::BadRequest(format!("{name}: {e}")))
}

impl ReportParams {
    /// Returns the count interval asked about, whole days from 1 to
    /// [`whatif::MAX_ASKED_DAYS`].
    pub fn asked_interval(&self) -> Result<Option<u32>, ApiError> {
        let Some(text) = given(&self.interval) else {
            return Ok(None);
        };
        match text.parse::<u32>() {
            Ok(d) if (1..=whatif::MAX_ASKED_DAYS).contains(&d) => Ok(Some(d)),
            _ => Err(ApiError::BadRequest(format!(
                "interval: '{text}' is not a whole number of days from 1 to {}",
                whatif::MAX_ASKED_DAYS
            ))),
        }
    }

    fn day(&self, name: &str, v: &Option<String>) -> Result<Option<NaiveDate>, ApiError> {
        given(v).map(|t| parse_day(name, t)).transpose()
    }

    /// Returns the period asked for, `default_days` up to today when not given.
    pub fn period(&self, default_days: u64, zone: SiteZone) -> Result<Period, ApiError> {
        Period::new(
            self.day("since", &self.since)?,
            self.day("until", &self.until)?,
            default_days,
            zone,
        )
        .map_err(ApiError::BadRequest)
    }

    /// Returns the class and zone filter.
    pub fn filter(&self) -> Result<Filter, ApiError> {
        let class = given(&self.class)
            .map(|c| {
                Class::parse(&c.to_ascii_uppercase())
                    .ok_or_else(|| ApiError::BadRequest(format!("class: '{c}' is not A, B or C")))
            })
            .transpose()?;
        Ok(Filter {
            class,
            zone: given(&self.zone).map(str::to_string),
        })
    }

    /// Returns the demand window asked for (the site's by default).
    pub fn window(
        &self,
        settings: &AccuracySettings,
        zone: SiteZone,
    ) -> Result<DemandWindow, ApiError> {
        let days = given(&self.window_days)
            .map(|d| {
                d.parse::<u32>().map_err(|_| {
                    ApiError::BadRequest(format!("window_days: '{d}' is not a whole number"))
                })
            })
            .transpose()?;
        DemandWindow::new(self.day("until", &self.until)?, days, settings, zone)
            .map_err(ApiError::BadRequest)
    }

    fn csv(&self) -> Result<bool, ApiError> {
        match given(&self.format) {
            None | Some("json") => Ok(false),
            Some("csv") => Ok(true),
            Some(other) => Err(ApiError::BadRequest(format!(
                "format: '{other}' is not json or csv"
            ))),
        }
    }
}

/// Answers a table as a CSV download.
pub fn csv_response(site: &Site, t: &Table) -> Result<Response, ApiError> {
    let body = report::to_csv(t).map_err(anyhow::Error::from)?;
    let file = format!("attachment; filename=\"{}-{}.csv\"", t.name, site.code);
    Ok((
        [
            (header::CONTENT_TYPE, "text/csv; charset=utf-8".to_string()),
            (header::CONTENT_DISPOSITION, file),
        ],
        body,
    )
        .into_response())
}

fn sku(text: &str) -> Result<Sku, ApiError> {
    Sku::parse(text).map_err(|e| ApiError::BadRequest(e.to_string()))
}

/// Builds the accuracy report a request asks for.
pub async fn report_for(
    state: &AppState,
    site: &Site,
    p: &ReportParams,
) -> Result<AccuracyReport, ApiError> {
    service::accuracy_report(
        state.store.as_ref(),
        site,
        p.period(DEFAULT_PERIOD_DAYS, site.time_zone)?,
        p.filter()?,
    )
    .await
}

async fn get_accuracy(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(p): Params<ReportParams>,
) -> Result<Response, ApiError> {
    p.refuse(&["window_days", "interval"])?;
    let csv = p.csv()?;
    let r = report_for(&state, &site, &p).await?;
    if !csv {
        return Ok(Json(r).into_response());
    }
    let name = given(&p.table).unwrap_or("summary");
    let t = report::accuracy_table(&r, name).ok_or_else(|| {
        ApiError::BadRequest(format!(
            "table: '{name}' is not one of {}",
            ACCURACY_TABLES.join(", ")
        ))
    })?;
    csv_response(&site, &t)
}

/// Per-item figures cover all history unless a start is given.
pub fn item_period(p: &ReportParams, zone: SiteZone) -> Result<Period, ApiError> {
    let since = p
        .day("since", &p.since)?
        .unwrap_or(NaiveDate::from_ymd_opt(1970, 1, 1).expect("1970-01-01 is a date"));
    Period::new(Some(since), p.day("until", &p.until)?, 1, zone).map_err(ApiError::BadRequest)
}

async fn get_items(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(l): Params<ListParams>,
) -> Result<Response, ApiError> {
    l.refuse(&["window_days"])?;
    let view = l.unpaged_view(&ITEM_COLUMNS)?;
    let p = l.report();
    let csv = p.csv()?;
    let items: Vec<ItemReport> = service::item_reports(
        state.store.as_ref(),
        &site,
        item_period(&p, site.time_zone)?,
        None,
    )
    .await?;
    let items = view.select(&ITEM_COLUMNS, items);
    if csv {
        csv_response(&site, &report::items_table(&items))
    } else {
        Ok(Json(items).into_response())
    }
}

async fn get_item(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, code)): Path<(String, String)>,
    Params(p): Params<ReportParams>,
) -> Result<Response, ApiError> {
    p.refuse(&["window_days", "class", "zone", "table", "interval"])?;
    let csv = p.csv()?;
    let items = service::item_reports(
        state.store.as_ref(),
        &site,
        item_period(&p, site.time_zone)?,
        Some(sku(&code)?),
    )
    .await?;
    if csv {
        return csv_response(&site, &report::items_table(&items));
    }
    let item = items
        .into_iter()
        .next()
        .ok_or_else(|| ApiError::NotFound(format!("no item '{code}' at this site")))?;
    Ok(Json(item).into_response())
}

async fn get_settings(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<AccuracySettings>, ApiError> {
    Ok(Json(state.store.accuracy_settings(site.id).await?))
}

async fn put_settings(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<AccuracySettings>, ApiError> {
    let s: AccuracySettings = crate::input::json::read(&bytes)?;
    s.check().map_err(ApiError::BadRequest)?;
    state.store.put_accuracy_settings(site.id, s).await?;
    Ok(Json(s))
}

/// Reads the planner inputs. JSON: a page in `(group, sku)` order — items' own rows
/// first, by SKU, then group defaults, by group — each as `POST planner-inputs` takes it
/// plus the read-only `updated_at` and `updated_by`; filters `sku` (that item's own row),
/// `group` (that group's default); paging `limit` (1 to 1,000, default 200) and `after`
/// (the previous page's `next`). Answers `{"planner_inputs": [...], "next": …}` with an
/// ETag. `format=csv`: every row, not paged (no filter or paging parameter with it).
async fn get_inputs(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
    Params(p): Params<InputParams>,
) -> Result<Response, ApiError> {
    let bad = |e: crate::master::read::ParamError| ApiError::BadRequest(e.to_string());
    let csv = ReportParams {
        format: p.format.clone(),
        ..ReportParams::default()
    }
    .csv()?;
    if csv {
        let named = [
            ("sku", &p.sku),
            ("group", &p.group),
            ("limit", &p.limit),
            ("after", &p.after),
        ];
        if let Some((name, _)) = named.iter().find(|(_, v)| v.is_some()) {
            return Err(ApiError::BadRequest(format!(
                "{name}: the CSV holds every row; filters and paging are for the JSON list"
            )));
        }
        let inputs = state.store.planner_inputs(site.id).await?;
        return csv_response(&site, &report::inputs_table(&inputs));
    }
    let (query, limit) = p.query().map_err(bad)?;
    let rows = state.store.planner_input_rows(site.id, query).await?;
    etag::json(&headers, &input_page(rows, limit).named("planner_inputs"))
}

async fn post_inputs(
    State(state): State<AppState>,
    CurrentUser(user): CurrentUser,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<serde_json::Value>, ApiError> {
    let rows = rows.validated(PlannerInputRecord::validate)?;
    let n = rows.len();
    let event = audit::api_batch(
        &user,
        site.id,
        "planner_inputs",
        serde_json::json!({ "rows": n }),
    );
    let written = state
        .store
        .put_planner_inputs(site.id, rows, user.user.name.to_string(), Some(event))
        .await?;
    Ok(Json(serde_json::json!({ "written": written })))
}

/// Builds the buffer reports a request asks for.
pub async fn buffers_for(
    state: &AppState,
    site: &Site,
    p: &ReportParams,
    sku: Option<Sku>,
) -> Result<Vec<BufferReport>, ApiError> {
    let settings = state.store.accuracy_settings(site.id).await?;
    let window = p.window(&settings, site.time_zone)?;
    let asked = p.asked_interval()?;
    if asked.is_some() && sku.is_none() {
        return Err(ApiError::BadRequest(
            "interval: only one item's buffer takes a count interval to compare".into(),
        ));
    }
    service::buffer_reports(state.store.as_ref(), site, window, sku, asked).await
}

async fn get_buffers(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(l): Params<ListParams>,
) -> Result<Response, ApiError> {
    l.refuse(&["since"])?;
    let view = l.unpaged_view(&BUFFER_COLUMNS)?;
    let p = l.report();
    let csv = p.csv()?;
    let reports = view.select(&BUFFER_COLUMNS, buffers_for(&state, &site, &p, None).await?);
    if csv {
        csv_response(&site, &report::buffer_table(&reports))
    } else {
        Ok(Json(reports).into_response())
    }
}

async fn get_buffer(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, code)): Path<(String, String)>,
    Params(p): Params<ReportParams>,
) -> Result<Response, ApiError> {
    p.refuse(&["since", "class", "zone", "table"])?;
    let csv = p.csv()?;
    if csv && p.interval.is_some() {
        return Err(ApiError::BadRequest(
            "interval: the CSV holds the buffer alone; the rows at other count intervals are in the JSON".into(),
        ));
    }
    let reports = buffers_for(&state, &site, &p, Some(sku(&code)?)).await?;
    if csv {
        return csv_response(&site, &report::buffer_table(&reports));
    }
    let r = reports
        .into_iter()
        .next()
        .ok_or_else(|| ApiError::NotFound(format!("no item '{code}' at this site")))?;
    Ok(Json(r).into_response())
}
