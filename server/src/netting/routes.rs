//! HTTP routes of netting, relative to `/api/v1/sites/{site}`: the results of counts
//! netted against the ledger with their evidence (book readers: they carry book
//! quantities, so counters never get them), and the policy behind them — tolerances,
//! movement sources' timing, reason codes (read by book readers, set by count policy).

use super::service::{self, NettingSettings, ReasonCode, SourceTimingRow};
use crate::AppState;
use crate::accounts::audit;
use crate::error::ApiError;
use crate::http::access::{
    Access, BOOK_READERS, COUNT_POLICY, ClientAddress, CurrentUser, RouteTable,
};
use crate::http::etag;
use crate::http::extract::{CurrentSite, Params};
use crate::netting::results::{
    MAX_RESULTS_PAGE, ResultDetail, ResultPage, ResultQuery, ResultState,
};
use crate::time::Timestamp;
use axum::Json;
use axum::extract::{Path, State};
use axum::http::HeaderMap;
use axum::response::Response;
use serde::{Deserialize, Serialize};

/// Results one page returns unless asked for fewer.
const DEFAULT_RESULTS_PAGE: usize = 200;

/// Who may read the netting policy: the JSON reads and the count-policy page.
pub(super) const READ_POLICY: Access = Access::Site(BOOK_READERS);
/// Who may change it: the JSON writes and the count-policy page's forms.
pub(super) const SET_POLICY: Access = Access::Site(COUNT_POLICY);

/// Adds the netting routes.
pub fn routes(t: &mut RouteTable) {
    macro_rules! path {
        ($tail:literal) => {
            concat!("/api/v1/sites/{site}", $tail)
        };
    }
    t.get(
        path!("/count-results"),
        Access::Site(BOOK_READERS),
        list_results,
    )
    .get(
        path!("/count-results/{id}"),
        Access::Site(BOOK_READERS),
        get_result,
    )
    .get(path!("/count-policy"), READ_POLICY, get_policy)
    .get(path!("/netting/settings"), READ_POLICY, get_settings)
    .put(path!("/netting/settings"), SET_POLICY, put_settings)
    .get(path!("/netting/sources"), READ_POLICY, get_sources)
    .put(path!("/netting/sources"), SET_POLICY, put_sources)
    .get(
        path!("/netting/reason-codes"),
        READ_POLICY,
        get_reason_codes,
    )
    .put(path!("/netting/reason-codes"), SET_POLICY, put_reason_codes);
}

fn body<T: serde::de::DeserializeOwned>(bytes: &[u8]) -> Result<T, ApiError> {
    Ok(crate::input::json::read(bytes)?)
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ResultParams {
    state: Option<ResultState>,
    bin: Option<String>,
    sku: Option<String>,
    lot: Option<String>,
    pass: Option<String>,
    from: Option<String>,
    to: Option<String>,
    limit: Option<usize>,
    #[serde(default)]
    after: i64,
}

/// Reads an instant parameter (RFC 3339, within the input bounds), naming it when bad.
fn instant(param: &str, raw: Option<String>) -> Result<Option<Timestamp>, ApiError> {
    raw.map(|t| {
        crate::input::bounds::instant(&t).map_err(|e| ApiError::BadRequest(format!("{param}: {e}")))
    })
    .transpose()
}

/// Lists a site's count results by id, `limit` (1 to 1,000, default 200) after result
/// `after` (the previous page's `next`). `state`: `open` (the default: current results
/// out of tolerance with no review yet — what waits for someone), `current` (every
/// result not superseded by a re-net) or `all` (superseded rows too). Filters, each
/// exact: `bin`, `sku`, `lot` (empty: keys without a lot), `pass` (id or uid); `from`
/// and `to` (RFC 3339 instants, both inclusive) bound `counted_at`.
async fn list_results(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(q): Params<ResultParams>,
) -> Result<Json<ResultPage>, ApiError> {
    let limit = q.limit.unwrap_or(DEFAULT_RESULTS_PAGE);
    if !(1..=MAX_RESULTS_PAGE).contains(&limit) {
        return Err(ApiError::BadRequest(format!(
            "limit {limit} is out of range 1 to {MAX_RESULTS_PAGE}"
        )));
    }
    let from = instant("from", q.from)?;
    let to = instant("to", q.to)?;
    if let (Some(f), Some(t)) = (from, to)
        && f > t
    {
        return Err(ApiError::BadRequest(format!(
            "from: {f} is after to ({t}); the range would hold nothing"
        )));
    }
    let page = state
        .store
        .count_results(
            site.id,
            ResultQuery {
                state: q.state.unwrap_or(ResultState::Open),
                bin: q.bin,
                sku: q.sku,
                lot: q.lot,
                pass: q.pass,
                from,
                to,
                limit,
                after: q.after,
            },
        )
        .await?;
    Ok(Json(page))
}

async fn get_result(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Path((_, id)): Path<(String, String)>,
) -> Result<Json<ResultDetail>, ApiError> {
    let n: i64 = id
        .parse()
        .map_err(|_| ApiError::BadRequest(format!("result id '{id}' is not a number")))?;
    state
        .store
        .count_result(site.id, n)
        .await?
        .map(Json)
        .ok_or_else(|| ApiError::NotFound(format!("no count result {n} at this site")))
}

/// A site's count policy in one read: each part is the body its own `PUT` takes
/// (`netting/settings`, `netting/sources`, `netting/reason-codes`), the three forms of
/// the count-policy page.
#[derive(Serialize, utoipa::ToSchema)]
pub struct CountPolicy {
    settings: NettingSettings,
    sources: Vec<SourceTimingRow>,
    reason_codes: Vec<ReasonCode>,
}

/// Reads the count policy, with an ETag (304 when `If-None-Match` names it).
async fn get_policy(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let policy = CountPolicy {
        settings: state.store.netting_settings(site.id).await?,
        sources: state.store.source_timings(site.id).await?,
        reason_codes: state.store.reason_codes(site.id).await?,
    };
    etag::json(&headers, &policy)
}

async fn get_settings(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<NettingSettings>, ApiError> {
    Ok(Json(state.store.netting_settings(site.id).await?))
}

async fn put_settings(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<NettingSettings>, ApiError> {
    let s: NettingSettings = body(&bytes)?;
    s.check().map_err(ApiError::BadRequest)?;
    let audit = audit::policy_change(&p, site.id, "settings", &s).from_address(&address);
    state.store.put_netting_settings(site.id, s, audit).await?;
    Ok(Json(s))
}

async fn get_sources(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<Vec<SourceTimingRow>>, ApiError> {
    Ok(Json(state.store.source_timings(site.id).await?))
}

async fn put_sources(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<Vec<SourceTimingRow>>, ApiError> {
    let rows: Vec<SourceTimingRow> = body(&bytes)?;
    service::check_sources(&rows).map_err(ApiError::BadRequest)?;
    let audit = audit::policy_change(&p, site.id, "sources", &rows).from_address(&address);
    state
        .store
        .put_source_timings(site.id, rows.clone(), audit)
        .await?;
    Ok(Json(rows))
}

async fn get_reason_codes(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Json<Vec<ReasonCode>>, ApiError> {
    Ok(Json(state.store.reason_codes(site.id).await?))
}

async fn put_reason_codes(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<Vec<ReasonCode>>, ApiError> {
    let rows: Vec<ReasonCode> = body(&bytes)?;
    service::check_reason_codes(&rows).map_err(ApiError::BadRequest)?;
    let audit = audit::policy_change(&p, site.id, "reason-codes", &rows).from_address(&address);
    state
        .store
        .put_reason_codes(site.id, rows.clone(), audit)
        .await?;
    Ok(Json(rows))
}
