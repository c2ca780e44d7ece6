//! The HTTP surface: the route table that joins every module's routes with
//! their access rules, health checks, and the server pages.

pub mod access;
pub mod body_deadline;
pub mod etag;
pub mod extract;
pub mod headers;
pub mod nav;
pub mod observe;
pub mod openapi;
pub mod pages;
pub mod serve;

use crate::AppState;
use crate::error::ApiError;
use access::{Access, Guard, RouteTable, Rule};
use axum::Router;
use axum::extract::DefaultBodyLimit;

/// Declares every route of Cairn with its access rule.
pub fn route_table() -> RouteTable {
    let mut t = RouteTable::default();
    t.get("/healthz", Access::Public, observe::healthz)
        .get("/readyz", Access::Public, observe::readyz)
        .get("/metrics", Access::Public, observe::metrics)
        .get("/static/cairn.css", Access::Public, stylesheet)
        .get(openapi::DOCUMENT_PATH, Access::Public, openapi::serve);
    pages::routes(&mut t);
    crate::accounts::routes::routes(&mut t);
    crate::accounts::admin::routes(&mut t);
    crate::master::routes::routes(&mut t);
    crate::ledger::routes::routes(&mut t);
    crate::planning::routes::routes(&mut t);
    crate::planning::pages::routes(&mut t);
    crate::planning::policy_page::routes(&mut t);
    crate::accuracy::routes::routes(&mut t);
    crate::accuracy::pages::routes(&mut t);
    crate::sync::routes::routes(&mut t);
    crate::netting::routes::routes(&mut t);
    crate::netting::pages::routes(&mut t);
    crate::review::pages::routes(&mut t);
    crate::review::routes::routes(&mut t);
    t
}

/// Returns every route's rule (for the access tests and the docs).
pub fn route_rules() -> Vec<Rule> {
    route_table().into_parts().1
}

/// Builds the whole application router, every route behind [`access::authorize`].
pub fn router(state: AppState) -> Router {
    let (routes, rules) = route_table().into_parts();
    let guard = Guard::new(state.clone(), &rules);
    routes
        .layer(axum::middleware::from_fn_with_state(
            guard,
            access::authorize,
        ))
        // The phone app's static files are public (the app signs in itself); added after the
        // guard so they sit outside the route table.
        // Axum's own refusals (a path segment that is not a number) answer plain text;
        // on the API they take the one error shape.
        .layer(axum::middleware::from_fn(api_error_shape))
        .merge(app_files(&state))
        .fallback(not_found)
        .layer(DefaultBodyLimit::max(state.config.max_body_bytes))
        // Phones on weak Wi-Fi: the app shell, wasm and JSON answers go gzip-compressed.
        .layer(tower_http::compression::CompressionLayer::new())
        .layer(axum::middleware::from_fn_with_state(
            std::time::Duration::from_millis(state.config.request_body_timeout_ms),
            body_deadline::body_deadline,
        ))
        .layer(axum::middleware::from_fn(observe::observe))
        .layer(axum::middleware::from_fn(headers::security_headers))
        .with_state(state)
}

/// Routes `/app/` to the phone app's files: compiled in, or `web_dir` when set.
fn app_files(state: &AppState) -> Router<AppState> {
    use axum::routing::get;
    Router::new()
        .route("/app", get(crate::web::app_root_redirect))
        .route("/app/", get(crate::web::app_index))
        .route("/app/{*path}", get(crate::web::app_file))
        .with_state(crate::web::AppFiles::from_config(
            state.config.web_dir.as_deref(),
        ))
}

async fn stylesheet(headers: axum::http::HeaderMap) -> axum::response::Response {
    crate::web::page_file(
        include_str!("../../static/cairn.css"),
        "text/css; charset=utf-8",
        &headers,
    )
}

async fn not_found() -> ApiError {
    ApiError::NotFound("no such page or endpoint".into())
}

/// Most bytes of a plain-text refusal rewritten as the API's error shape.
const MAX_REFUSAL_BYTES: usize = 4 * 1024;

/// Rewrites a plain-text 4xx answer of an API route (axum's extractor refusals) as
/// `{"error": TEXT}`, the shape every API error has.
async fn api_error_shape(
    request: axum::extract::Request,
    next: axum::middleware::Next,
) -> axum::response::Response {
    use axum::http::header::CONTENT_TYPE;
    use axum::response::IntoResponse;
    let api = request.uri().path().starts_with("/api/");
    let response = next.run(request).await;
    let plain = response
        .headers()
        .get(CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.starts_with("text/plain"));
    if !(api && plain && response.status().is_client_error()) {
        return response;
    }
    let (parts, body) = response.into_parts();
    let text = match axum::body::to_bytes(body, MAX_REFUSAL_BYTES).await {
        Ok(bytes) => String::from_utf8_lossy(&bytes).into_owned(),
        Err(_) => "the request was refused".to_string(),
    };
    let body = crate::error::ErrorBody {
        error: text,
        rows: None,
    };
    (parts.status, axum::Json(body)).into_response()
}
