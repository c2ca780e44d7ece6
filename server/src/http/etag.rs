//! JSON answers with a validator: a weak ETag from the SHA-256 of the body, and 304
//! Not Modified when the caller's `If-None-Match` names it, so a host that polls a
//! read-back page gets an empty answer while nothing on it changed.

use crate::error::ApiError;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Serialize;

/// Book data may be cached by the caller only, and checked again before each use.
const CACHE_CONTROL: &str = "private, no-cache";

/// Answers `value` as JSON with its ETag, or 304 with the ETag alone when `headers`
/// carry an `If-None-Match` that names it (weak comparison: the body may go out
/// compressed or not).
pub fn json(headers: &HeaderMap, value: &impl Serialize) -> Result<Response, ApiError> {
    let body = serde_json::to_vec(value).map_err(anyhow::Error::from)?;
    let etag = crate::web::files::etag(&body);
    let etag_value = HeaderValue::from_str(&etag).map_err(anyhow::Error::from)?;
    let fresh = headers
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .any(|v| crate::web::matches_etag(v, &etag));
    let cache = (
        header::CACHE_CONTROL,
        HeaderValue::from_static(CACHE_CONTROL),
    );
    if fresh {
        return Ok((
            StatusCode::NOT_MODIFIED,
            [(header::ETAG, etag_value), cache],
        )
            .into_response());
    }
    Ok((
        [
            (header::ETAG, etag_value),
            cache,
            (
                header::CONTENT_TYPE,
                HeaderValue::from_static("application/json"),
            ),
        ],
        body,
    )
        .into_response())
}
