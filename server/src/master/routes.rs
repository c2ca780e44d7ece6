//! HTTP routes of master data: sites, and batch upserts of bins, items, packs.

use super::{BinRecord, ItemRecord, PackRecord, Site, SiteCounts};
use crate::AppState;
use crate::error::ApiError;
use crate::http::extract::{CurrentSite, JsonRows};
use crate::store::Progress;
use axum::extract::State;
use axum::routing::{get, post};
use axum::{Json, Router};
use serde::Serialize;

/// Returns the routes under `/api/v1/sites/{site}`.
pub fn routes() -> Router<AppState> {
    Router::new()
        .route("/", get(get_site))
        .route("/bins", post(post_bins))
        .route("/items", post(post_items))
        .route("/packs", post(post_packs))
}

/// Returns the routes under `/api/v1`.
pub fn top_routes() -> Router<AppState> {
    Router::new().route("/sites", get(list_sites))
}

async fn list_sites(State(state): State<AppState>) -> Result<Json<Vec<Site>>, ApiError> {
    Ok(Json(state.store.sites().await?))
}

#[derive(Serialize)]
struct SiteView {
    #[serde(flatten)]
    site: Site,
    counts: SiteCounts,
}

async fn get_site(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<SiteView>, ApiError> {
    let counts = state.store.site_counts(site.id).await?;
    Ok(Json(SiteView { site, counts }))
}

/// How many rows a master-data batch wrote.
#[derive(Serialize)]
struct Written {
    written: usize,
}

async fn post_bins(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<Written>, ApiError> {
    let rows = rows.validated(BinRecord::validate)?;
    Ok(Json(Written {
        written: state
            .store
            .put_bins(site.id, rows, Progress::default())
            .await?,
    }))
}

async fn post_items(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<Written>, ApiError> {
    let rows = rows.validated(ItemRecord::validate)?;
    Ok(Json(Written {
        written: state
            .store
            .put_items(site.id, rows, Progress::default())
            .await?,
    }))
}

async fn post_packs(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<Written>, ApiError> {
    let rows = rows.validated(PackRecord::validate)?;
    Ok(Json(Written {
        written: state
            .store
            .put_packs(site.id, rows, Progress::default())
            .await?,
    }))
}
