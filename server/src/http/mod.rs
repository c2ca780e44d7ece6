//! The HTTP surface: the router that joins every module's routes, health
//! checks, and the server pages.

pub mod extract;
mod pages;

use crate::AppState;
use crate::error::ApiError;
use axum::Router;
use axum::extract::{DefaultBodyLimit, State};
use axum::http::{StatusCode, header};
use axum::response::IntoResponse;
use axum::routing::get;
use tower_http::trace::TraceLayer;

/// Builds the whole application router.
pub fn router(state: AppState) -> Router {
    let site = Router::new()
        .merge(crate::master::routes::routes())
        .merge(crate::ledger::routes::routes())
        .merge(crate::planning::routes::routes());
    let api = crate::master::routes::top_routes().nest("/sites/{site}", site);
    Router::new()
        .route("/healthz", get(healthz))
        .route("/static/cairn.css", get(stylesheet))
        .merge(pages::routes())
        .nest("/api/v1", api)
        .fallback(not_found)
        .layer(DefaultBodyLimit::max(state.config.max_body_bytes))
        .layer(TraceLayer::new_for_http())
        .with_state(state)
}

async fn healthz(State(state): State<AppState>) -> Result<impl IntoResponse, ApiError> {
    state.store.ping().await?;
    Ok((
        StatusCode::OK,
        axum::Json(serde_json::json!({ "status": "ok" })),
    ))
}

async fn stylesheet() -> impl IntoResponse {
    (
        [(header::CONTENT_TYPE, "text/css; charset=utf-8")],
        include_str!("../../static/cairn.css"),
    )
}

async fn not_found() -> ApiError {
    ApiError::NotFound("no such page or endpoint".into())
}
