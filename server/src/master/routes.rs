//! HTTP routes of master data: sites, batch upserts of bins, items, packs, and the
//! read-back of zones, bins, items (with their packs) and lots, paged by key
//! (`master::read`), for the roles that read book data.

use super::read::{self, BinParams, ItemParams, LotParams, PackParams, ParamError, ZoneParams};
use super::{BinRecord, ItemRecord, PackRecord, Site, SiteCounts};
use crate::AppState;
use crate::accounts::audit;
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, BOOK_WRITERS, CurrentUser, RouteTable};
use crate::http::etag;
use crate::http::extract::{CurrentSite, JsonRows, Params};
use crate::store::error::Progress;
use axum::Json;
use axum::extract::State;
use axum::http::HeaderMap;
use axum::response::Response;
use serde::Serialize;
use serde_json::json;

/// Adds the master-data routes.
pub fn routes(t: &mut RouteTable) {
    t.get("/api/v1/sites", Access::SignedIn, list_sites)
        .get("/api/v1/sites/{site}", Access::Site(BOOK_READERS), get_site)
        .get(
            "/api/v1/sites/{site}/zones",
            Access::Site(BOOK_READERS),
            get_zones,
        )
        .get(
            "/api/v1/sites/{site}/bins",
            Access::Site(BOOK_READERS),
            get_bins,
        )
        .post(
            "/api/v1/sites/{site}/bins",
            Access::Site(BOOK_WRITERS),
            post_bins,
        )
        .get(
            "/api/v1/sites/{site}/items",
            Access::Site(BOOK_READERS),
            get_items,
        )
        .post(
            "/api/v1/sites/{site}/items",
            Access::Site(BOOK_WRITERS),
            post_items,
        )
        .get(
            "/api/v1/sites/{site}/lots",
            Access::Site(BOOK_READERS),
            get_lots,
        )
        .get(
            "/api/v1/sites/{site}/packs",
            Access::Site(BOOK_READERS),
            get_packs,
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

#[derive(Serialize, utoipa::ToSchema)]
pub(crate) struct SiteView {
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

fn bad_param(e: ParamError) -> ApiError {
    ApiError::BadRequest(e.to_string())
}

/// Reads a page of the site's zones by code: `limit` (1 to 1,000, default 200), `after`
/// (the `next` of the previous page). Answers `{"zones": [...], "next": cursor|null}`
/// with an ETag (304 when `If-None-Match` names it).
async fn get_zones(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
    Params(p): Params<ZoneParams>,
) -> Result<Response, ApiError> {
    let (query, limit) = p.query().map_err(bad_param)?;
    let rows = state.store.zone_rows(site.id, query).await?;
    etag::json(&headers, &read::zone_page(rows, limit).named("zones"))
}

/// Reads a page of the site's bins by code, each as `POST bins` takes it: filters
/// `zone`, `aisle`; paging `limit`, `after`. Answers `{"bins": [...], "next": …}`, ETag.
async fn get_bins(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
    Params(p): Params<BinParams>,
) -> Result<Response, ApiError> {
    let (query, limit) = p.query().map_err(bad_param)?;
    let rows = state.store.bin_rows(site.id, query).await?;
    etag::json(&headers, &read::bin_page(rows, limit).named("bins"))
}

/// Reads a page of the site's items by SKU, each as `POST items` takes it with its
/// packs, plus its read-only `class`: filters `sku` (exact), `sku_prefix`, `group`,
/// `class` (`A`, `B`, `C` or `none`); paging `limit`, `after`. Answers
/// `{"items": [...], "next": …}`, ETag.
async fn get_items(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
    Params(p): Params<ItemParams>,
) -> Result<Response, ApiError> {
    let (query, limit) = p.query().map_err(bad_param)?;
    let rows = state.store.item_rows(site.id, query).await?;
    etag::json(&headers, &read::item_page(rows, limit).named("items"))
}

/// Reads a page of the site's packs by SKU, then GTIN, each as `POST packs` takes it:
/// filter `sku`; paging `limit`, `after`. Answers `{"packs": [...], "next": …}`, ETag.
async fn get_packs(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
    Params(p): Params<PackParams>,
) -> Result<Response, ApiError> {
    let (query, limit) = p.query().map_err(bad_param)?;
    let rows = state.store.pack_rows(site.id, query).await?;
    etag::json(&headers, &read::pack_page(rows, limit).named("packs"))
}

/// Reads a page of the site's lots (made by the movements that name them) by SKU, then
/// lot code: filter `sku`; paging `limit`, `after`. Answers `{"lots": [...], "next": …}`,
/// ETag.
async fn get_lots(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
    Params(p): Params<LotParams>,
) -> Result<Response, ApiError> {
    let (query, limit) = p.query().map_err(bad_param)?;
    let rows = state.store.lot_rows(site.id, query).await?;
    etag::json(&headers, &read::lot_page(rows, limit).named("lots"))
}
