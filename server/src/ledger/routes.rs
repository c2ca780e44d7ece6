//! HTTP routes of the ledger: post movements, read balances and history.

use super::{MovementRecord, RecordOutcome};
use crate::AppState;
use crate::accounts::audit;
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, BOOK_WRITERS, CurrentUser, RouteTable};
use crate::http::extract::{CurrentSite, JsonRows, Params};
use crate::master::codes::{BinCode, Sku};
use crate::store::error::Progress;
use crate::store::{BalancePage, BalanceQuery, HistoryPage, HistoryQuery, HistorySubject};
use crate::time::Timestamp;
use axum::Json;
use axum::extract::{Path, State};
use serde::Deserialize;
use serde_json::json;

/// Adds the ledger's routes. Everything here but posting is book data.
pub fn routes(t: &mut RouteTable) {
    t.post(
        "/api/v1/sites/{site}/movements",
        Access::Site(BOOK_WRITERS),
        post_movements,
    )
    .get(
        "/api/v1/sites/{site}/balances",
        Access::Site(BOOK_READERS),
        get_balances,
    )
    .get(
        "/api/v1/sites/{site}/bins/{bin}/movements",
        Access::Site(BOOK_READERS),
        bin_history,
    )
    .get(
        "/api/v1/sites/{site}/items/{sku}/movements",
        Access::Site(BOOK_READERS),
        item_history,
    );
}

/// Source recorded for API movements that name none.
const API_SOURCE: &str = "api";

async fn post_movements(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<RecordOutcome>, ApiError> {
    let now = Timestamp::now();
    let rows = rows.validated(|r: MovementRecord| r.validate(now, API_SOURCE))?;
    let audit = audit::api_batch(&p, site.id, "movements", json!({}));
    let outcome = crate::writes::record_movements(
        state.store.as_ref(),
        site.id,
        rows,
        Progress::default(),
        Some(audit),
    )
    .await?;
    Ok(Json(outcome))
}

fn bad(field: &str) -> impl Fn(String) -> ApiError + '_ {
    move |e| ApiError::BadRequest(format!("{field}: {e}"))
}

fn instant(field: &str, v: Option<String>) -> Result<Option<Timestamp>, ApiError> {
    v.map(|t| crate::input::bounds::instant(&t).map_err(bad(field)))
        .transpose()
}

/// Rows per page when the caller names no limit.
const DEFAULT_PAGE_ROWS: usize = 200;
/// Most rows a balance or history page holds.
const MAX_PAGE_ROWS: usize = 1_000;

/// Reads `limit`: 1 to [`MAX_PAGE_ROWS`], [`DEFAULT_PAGE_ROWS`] when not given.
fn page_limit(limit: Option<usize>) -> Result<usize, ApiError> {
    match limit {
        None => Ok(DEFAULT_PAGE_ROWS),
        Some(n) if (1..=MAX_PAGE_ROWS).contains(&n) => Ok(n),
        Some(n) => Err(ApiError::BadRequest(format!(
            "limit: {n} is not a whole number from 1 to {MAX_PAGE_ROWS}"
        ))),
    }
}

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
        limit: page_limit(p.limit)?,
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
        limit: page_limit(p.limit)?,
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
