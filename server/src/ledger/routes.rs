//! HTTP routes of the ledger: post movements, read balances and history.

use super::{MovementRecord, RecordOutcome};
use crate::AppState;
use crate::error::ApiError;
use crate::http::extract::{CurrentSite, JsonRows, Params};
use crate::master::codes::{BinCode, Sku};
use crate::store::{
    BalancePage, BalanceQuery, HistoryPage, HistoryQuery, HistorySubject, Progress,
};
use crate::time::Timestamp;
use axum::extract::{Path, State};
use axum::routing::{get, post};
use axum::{Json, Router};
use serde::Deserialize;

/// Returns the ledger's routes, relative to `/api/v1/sites/{site}`.
pub fn routes() -> Router<AppState> {
    Router::new()
        .route("/movements", post(post_movements))
        .route("/balances", get(get_balances))
        .route("/bins/{bin}/movements", get(bin_history))
        .route("/items/{sku}/movements", get(item_history))
}

/// Source recorded for API movements that name none.
const API_SOURCE: &str = "api";

async fn post_movements(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<RecordOutcome>, ApiError> {
    let now = Timestamp::now();
    let rows = rows.validated(|r: MovementRecord| r.validate(now, API_SOURCE))?;
    Ok(Json(
        state
            .store
            .record_movements(site.id, rows, Progress::default())
            .await?,
    ))
}

fn bad(field: &str) -> impl Fn(String) -> ApiError + '_ {
    move |e| ApiError::BadRequest(format!("{field}: {e}"))
}

fn instant(field: &str, v: Option<String>) -> Result<Option<Timestamp>, ApiError> {
    v.map(|t| Timestamp::parse_rfc3339(&t).map_err(bad(field)))
        .transpose()
}

/// Rows per page when the caller names no limit.
const DEFAULT_PAGE_ROWS: usize = 200;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct BalanceParams {
    bin: Option<String>,
    sku: Option<String>,
    lot: Option<String>,
    at: Option<String>,
    #[serde(default)]
    include_zero: bool,
    limit: Option<usize>,
    after: Option<String>,
}

async fn get_balances(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(p): Params<BalanceParams>,
) -> Result<Json<BalancePage>, ApiError> {
    let q = BalanceQuery {
        bin: p
            .bin
            .map(|b| BinCode::parse(&b))
            .transpose()
            .map_err(|e| ApiError::BadRequest(e.to_string()))?,
        sku: p
            .sku
            .map(|s| Sku::parse(&s))
            .transpose()
            .map_err(|e| ApiError::BadRequest(e.to_string()))?,
        lot: p.lot,
        at: instant("at", p.at)?,
        include_zero: p.include_zero,
        limit: p.limit.unwrap_or(DEFAULT_PAGE_ROWS),
        after: p.after,
    };
    Ok(Json(state.store.balances(site.id, q).await?))
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct HistoryParams {
    from: Option<String>,
    to: Option<String>,
    limit: Option<usize>,
    after: Option<String>,
}

async fn history(
    state: &AppState,
    site: &crate::master::Site,
    subject: HistorySubject,
    p: HistoryParams,
) -> Result<Json<HistoryPage>, ApiError> {
    let q = HistoryQuery {
        subject,
        from: instant("from", p.from)?,
        to: instant("to", p.to)?,
        limit: p.limit.unwrap_or(DEFAULT_PAGE_ROWS),
        after: p.after,
    };
    Ok(Json(state.store.movements(site.id, q).await?))
}

async fn bin_history(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, bin)): Path<(String, String)>,
    Params(p): Params<HistoryParams>,
) -> Result<Json<HistoryPage>, ApiError> {
    let bin = BinCode::parse(&bin).map_err(|e| ApiError::BadRequest(e.to_string()))?;
    history(&state, &site, HistorySubject::Bin(bin), p).await
}

async fn item_history(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, sku)): Path<(String, String)>,
    Params(p): Params<HistoryParams>,
) -> Result<Json<HistoryPage>, ApiError> {
    let sku = Sku::parse(&sku).map_err(|e| ApiError::BadRequest(e.to_string()))?;
    history(&state, &site, HistorySubject::Item(sku), p).await
}
