//! Watching the server: a request id and one log line per request, the figures of
//! [`crate::telemetry`], and the probes `/healthz` (alive: the database answers),
//! `/readyz` (ready: the writer takes work and the server is not stopping) and `/metrics`.
//!
//! Logs carry the method, the route template, status and time, never headers, bodies or
//! query strings: credentials (tokens, cookies, passwords, PINs) travel only in those.

use crate::AppState;
use crate::error::ApiError;
use axum::extract::{MatchedPath, Request, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use std::sync::atomic::Ordering;
use std::time::{Duration, Instant};
use tracing::Instrument;

/// The header that carries a request's id in and out.
pub const REQUEST_ID: &str = "x-request-id";
/// Longest request id taken from a client (a proxy's id); longer ones are replaced.
const MAX_REQUEST_ID_LEN: usize = 64;
/// How long `/readyz` waits for the writer before it says not ready.
const READY_TIMEOUT: Duration = Duration::from_secs(2);

/// Takes a proxy's request id when it is short and plain, or makes one.
fn request_id(req: &Request) -> String {
    req.headers()
        .get(REQUEST_ID)
        .and_then(|v| v.to_str().ok())
        .filter(|v| {
            !v.is_empty()
                && v.len() <= MAX_REQUEST_ID_LEN
                && v.bytes()
                    .all(|b| b.is_ascii_alphanumeric() || b"-_.:".contains(&b))
        })
        .map(str::to_string)
        .unwrap_or_else(|| uuid::Uuid::now_v7().to_string())
}

fn method_name(m: &axum::http::Method) -> &'static str {
    match *m {
        axum::http::Method::GET => "GET",
        axum::http::Method::POST => "POST",
        axum::http::Method::PUT => "PUT",
        axum::http::Method::DELETE => "DELETE",
        axum::http::Method::PATCH => "PATCH",
        axum::http::Method::HEAD => "HEAD",
        axum::http::Method::OPTIONS => "OPTIONS",
        _ => "OTHER",
    }
}

/// Gives every request an id (echoed in `x-request-id`), runs it inside a span that
/// carries the id, and records its figures and one log line.
pub async fn observe(mut req: Request, next: Next) -> Response {
    let started = Instant::now();
    let id = request_id(&req);
    let method = method_name(req.method());
    let route = req
        .extensions()
        .get::<MatchedPath>()
        .map(|p| p.as_str().to_string())
        .unwrap_or_else(|| {
            if req.uri().path().starts_with("/app/") {
                "/app/*".to_string()
            } else {
                "unmatched".to_string()
            }
        });
    let header_value =
        HeaderValue::from_str(&id).expect("request ids are plain ASCII, checked or generated");
    req.headers_mut().insert(REQUEST_ID, header_value.clone());
    let span = tracing::info_span!("request", id = %id, method, route = %route);
    let mut response = next.run(req).instrument(span.clone()).await;
    let took = started.elapsed();
    let status = response.status().as_u16();
    crate::telemetry::metrics().request(method, &route, status, took);
    response.headers_mut().insert(REQUEST_ID, header_value);
    let ms = took.as_secs_f64() * 1e3;
    let _enter = span.enter();
    if route.starts_with("/healthz") || route.starts_with("/readyz") || route == "/metrics" {
        tracing::debug!(status, ms, "answered");
    } else if status >= 500 {
        tracing::error!(status, ms, "answered");
    } else {
        tracing::info!(status, ms, "answered");
    }
    response
}

/// Alive: the database is open and migrated.
pub async fn healthz(State(state): State<AppState>) -> Result<impl IntoResponse, ApiError> {
    state.store.ping().await?;
    Ok((
        StatusCode::OK,
        axum::Json(serde_json::json!({ "status": "ok" })),
    ))
}

/// Ready for traffic: alive, the writer takes a job within two seconds, and the server
/// is not shutting down. A proxy or orchestrator stops sending work on 503.
pub async fn readyz(State(state): State<AppState>) -> Response {
    let not_ready = |why: String| {
        (
            StatusCode::SERVICE_UNAVAILABLE,
            axum::Json(serde_json::json!({
                "status": "not ready",
                "reason": why,
                "build": crate::build_info::json(),
            })),
        )
            .into_response()
    };
    if state.draining.load(Ordering::SeqCst) {
        return not_ready("shutting down".into());
    }
    if let Err(e) = state.store.ping().await {
        tracing::warn!("readyz: database check failed: {e}");
        return not_ready("the database does not answer".into());
    }
    match tokio::time::timeout(READY_TIMEOUT, state.store.ping_writer()).await {
        Ok(Ok(())) => (
            StatusCode::OK,
            axum::Json(
                serde_json::json!({ "status": "ready", "build": crate::build_info::json() }),
            ),
        )
            .into_response(),
        Ok(Err(e)) => {
            tracing::warn!("readyz: write check failed: {e}");
            not_ready("the database refuses writes".into())
        }
        Err(_) => not_ready(format!(
            "the writer did not answer within {} s",
            READY_TIMEOUT.as_secs()
        )),
    }
}

/// The figures in Prometheus' text format.
pub async fn metrics() -> impl IntoResponse {
    (
        [(
            header::CONTENT_TYPE,
            "text/plain; version=0.0.4; charset=utf-8",
        )],
        crate::telemetry::metrics().render(),
    )
}
