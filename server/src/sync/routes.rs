//! HTTP routes of phones' counts, relative to `/api/v1/sites/{site}`: the sync endpoint
//! and the catalogue (counters, docs/phone-sync.md), and the count lines as received
//! (book readers, for support and checks).

use super::clock::ClockSample;
use super::{Sender, SyncBatch, event};
use crate::AppState;
use crate::accounts::{Credential, Role};
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, CurrentUser, RouteTable};
use crate::http::extract::{CurrentSite, Params};
use crate::sync::results::StoredLine;
use crate::time::Timestamp;
use axum::Json;
use axum::extract::State;
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Response};
use cairn_scan::wire::{EventStatus, MAX_RTT_MS, MAX_SYNC_EVENTS, SyncRequest, SyncResponse};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

/// Who may send counts: counters, on a phone or signed in.
const COUNTERS: &[Role] = &[Role::Counter];
/// Most count lines one page of the support read returns.
const MAX_LINES_PAGE: usize = 5_000;

/// Adds the sync routes.
pub fn routes(t: &mut RouteTable) {
    t.post("/api/v1/sites/{site}/sync", Access::Site(COUNTERS), sync)
        .get(
            "/api/v1/sites/{site}/catalog",
            Access::Site(COUNTERS),
            catalog,
        )
        .get(
            "/api/v1/sites/{site}/count-lines",
            Access::Site(BOOK_READERS),
            count_lines,
        );
}

async fn sync(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    bytes: axum::body::Bytes,
) -> Result<Json<SyncResponse>, ApiError> {
    let received_at = Timestamp::now();
    let request: SyncRequest = crate::input::json::read(&bytes)?;
    if request.events.len() > MAX_SYNC_EVENTS {
        return Err(ApiError::BadRequest(format!(
            "{} events in one request; send at most {MAX_SYNC_EVENTS}",
            request.events.len()
        )));
    }
    if request.device_clock <= 0 {
        return Err(ApiError::BadRequest(format!(
            "device_clock {} is not a time in ms since 1970",
            request.device_clock
        )));
    }
    if let Some(rtt) = request.rtt_ms
        && !(0..=MAX_RTT_MS).contains(&rtt)
    {
        return Err(ApiError::BadRequest(format!(
            "rtt_ms {rtt} is out of range 0 to {MAX_RTT_MS}"
        )));
    }
    super::plausible::check_device_clock(received_at, request.device_clock)
        .map_err(ApiError::BadRequest)?;
    let clock = ClockSample::measure(received_at, request.device_clock, request.rtt_ms);
    let device = match p.credential {
        Credential::Device { id, .. } => Some(id),
        _ => None,
    };
    let events = request
        .events
        .iter()
        .enumerate()
        .map(|(i, raw)| event::read(raw, i))
        .collect();
    let results = crate::writes::apply_sync(
        state.store.as_ref(),
        SyncBatch {
            site: site.id,
            site_code: site.code.as_str().to_string(),
            zone: site.time_zone,
            sender: Sender {
                user: p.user.id,
                user_name: p.user.name.as_str().to_string(),
                device,
            },
            clock,
            received_at,
            events,
        },
    )
    .await?;
    let (mut accepted, mut repeats, mut rejected, mut conflicts) = (0, 0, 0, 0);
    for r in &results {
        match r.status {
            EventStatus::Accepted => {
                accepted += 1;
                repeats += u64::from(r.repeat);
            }
            EventStatus::Rejected => rejected += 1,
            EventStatus::Conflict => conflicts += 1,
        }
    }
    crate::telemetry::metrics().sync_batch(accepted, repeats, rejected, conflicts);
    Ok(Json(SyncResponse {
        server_clock: Timestamp::now().0,
        offset_ms: clock.offset_ms,
        uncertainty_ms: clock.uncertainty_ms,
        results,
    }))
}

#[derive(Serialize, utoipa::ToSchema)]
pub(crate) struct Catalog {
    version: String,
    items: Vec<crate::planning::phone::ItemBrief>,
}

async fn catalog(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
) -> Result<Response, ApiError> {
    let items = state.store.catalog(site.id).await?;
    let text = serde_json::to_string(&items).map_err(anyhow::Error::from)?;
    let digest = Sha256::digest(text.as_bytes());
    let version: String = digest[..12].iter().map(|b| format!("{b:02x}")).collect();
    let etag = format!("\"{version}\"");
    let cached = headers
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.split(',').any(|t| t.trim() == etag));
    if cached {
        return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response());
    }
    Ok(([(header::ETAG, etag)], Json(Catalog { version, items })).into_response())
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct LinesParams {
    #[serde(default)]
    after: i64,
    limit: Option<usize>,
}

#[derive(Serialize, utoipa::ToSchema)]
pub(crate) struct LinesPage {
    lines: Vec<StoredLine>,
    next: Option<i64>,
}

async fn count_lines(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(q): Params<LinesParams>,
) -> Result<Json<LinesPage>, ApiError> {
    let limit = q.limit.unwrap_or(MAX_LINES_PAGE);
    if !(1..=MAX_LINES_PAGE).contains(&limit) {
        return Err(ApiError::BadRequest(format!(
            "limit {limit} is out of range 1 to {MAX_LINES_PAGE}"
        )));
    }
    let lines = state.store.count_lines(site.id, q.after, limit).await?;
    let next = (lines.len() == limit)
        .then(|| lines.last().map(|l| l.seq))
        .flatten();
    Ok(Json(LinesPage { lines, next }))
}
