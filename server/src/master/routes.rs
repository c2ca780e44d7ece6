//! HTTP routes of master data: sites, and batch upserts of bins, items, packs.

use super::{BinRecord, ItemRecord, PackRecord, Site, SiteCounts};
use crate::AppState;
use crate::accounts::audit;
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, BOOK_WRITERS, CurrentUser, RouteTable};
use crate::http::extract::{CurrentSite, JsonRows};
use crate::store::error::Progress;
use axum::Json;
use axum::extract::State;
use serde::Serialize;
use serde_json::json;

/// Adds the master-data routes.
pub fn routes(t: &mut RouteTable) {
    t.get("/api/v1/sites", Access::SignedIn, list_sites)
        .get("/api/v1/sites/{site}", Access::Site(BOOK_READERS), get_site)
        .post(
            "/api/v1/sites/{site}/bins",
            Access::Site(BOOK_WRITERS),
            post_bins,
        )
        .post(
            "/api/v1/sites/{site}/items",
            Access::Site(BOOK_WRITERS),
            post_items,
        )
        .post(
            "/api/v1/sites/{site}/packs",
            Access::Site(BOOK_WRITERS),
            post_packs,
        );
}

/// Lists the sites where the sender holds a role.
async fn list_sites(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
) -> Result<Json<Vec<Site>>, ApiError> {
    let sites = state.store.sites().await?;
    Ok(Json(
        sites
            .into_iter()
            .filter(|s| p.roles_at(s.id).next().is_some())
            .collect(),
    ))
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
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<Written>, ApiError> {
    let rows = rows.validated(BinRecord::validate)?;
    let audit = audit::api_batch(&p, site.id, "bins", json!({}));
    let written = state
        .store
        .put_bins(site.id, rows, Progress::default(), Some(audit))
        .await?;
    Ok(Json(Written { written }))
}

async fn post_items(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<Written>, ApiError> {
    let rows = rows.validated(ItemRecord::validate)?;
    let audit = audit::api_batch(&p, site.id, "items", json!({}));
    let written = state
        .store
        .put_items(site.id, rows, Progress::default(), Some(audit))
        .await?;
    Ok(Json(Written { written }))
}

async fn post_packs(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    rows: JsonRows,
) -> Result<Json<Written>, ApiError> {
    let rows = rows.validated(PackRecord::validate)?;
    let audit = audit::api_batch(&p, site.id, "packs", json!({}));
    let written = state
        .store
        .put_packs(site.id, rows, Progress::default(), Some(audit))
        .await?;
    Ok(Json(Written { written }))
}
