//! The HTTP boundary's error: 4xx carry a message a user can act on; 5xx a
//! fixed text, while the cause is logged once, here.

use crate::batch::RowError;
use crate::store::error::StoreError;
use axum::Json;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use serde::Serialize;

/// Everything a handler can answer besides success.
#[derive(Debug, thiserror::Error)]
pub enum ApiError {
    #[error("{0}")]
    BadRequest(String),
    #[error("{0}")]
    Unauthorized(String),
    #[error("{0}")]
    Forbidden(String),
    #[error("{0}")]
    NotFound(String),
    #[error("{0}")]
    MethodNotAllowed(String),
    #[error("{0}")]
    Conflict(String),
    #[error("{0}")]
    TooLarge(String),
    #[error("{} row(s) refused; nothing was written", .0.len())]
    Rejected(Vec<RowError>),
    #[error("{0}")]
    TooManyRequests(String),
    /// The server is at a limit of its own (e.g. concurrent hashing): 429 with `Retry-After`.
    #[error("{text}")]
    Busy { text: String, retry_after_s: u64 },
    #[error("{0}")]
    Unavailable(String),
    #[error("internal error")]
    Internal(#[from] anyhow::Error),
}

impl From<crate::accounts::hashing::HashError> for ApiError {
    fn from(e: crate::accounts::hashing::HashError) -> Self {
        use crate::accounts::hashing::{BUSY_RETRY_AFTER_S, HashError};
        match e {
            HashError::Busy => ApiError::Busy {
                text: e.to_string(),
                retry_after_s: BUSY_RETRY_AFTER_S,
            },
            HashError::Internal(e) => ApiError::Internal(e),
        }
    }
}

impl From<crate::input::json::BodyError> for ApiError {
    fn from(e: crate::input::json::BodyError) -> Self {
        ApiError::BadRequest(e.to_string())
    }
}

impl From<StoreError> for ApiError {
    fn from(e: StoreError) -> Self {
        match e {
            StoreError::Rejected(rows) => ApiError::Rejected(rows),
            StoreError::NotFound(m) => ApiError::NotFound(m),
            StoreError::Conflict(m) => ApiError::Conflict(m),
            StoreError::Incompatible(m) => ApiError::Unavailable(m),
            StoreError::Internal(e) => ApiError::Internal(e),
        }
    }
}

/// Text shown for every 5xx; the details are in the server log.
const INTERNAL_TEXT: &str = "internal error: the server log has the details";

impl ApiError {
    /// Returns the HTTP status of this error.
    pub fn status(&self) -> StatusCode {
        match self {
            ApiError::BadRequest(_) => StatusCode::BAD_REQUEST,
            ApiError::Unauthorized(_) => StatusCode::UNAUTHORIZED,
            ApiError::Forbidden(_) => StatusCode::FORBIDDEN,
            ApiError::NotFound(_) => StatusCode::NOT_FOUND,
            ApiError::MethodNotAllowed(_) => StatusCode::METHOD_NOT_ALLOWED,
            ApiError::Conflict(_) => StatusCode::CONFLICT,
            ApiError::TooLarge(_) => StatusCode::PAYLOAD_TOO_LARGE,
            ApiError::Rejected(_) => StatusCode::UNPROCESSABLE_ENTITY,
            ApiError::TooManyRequests(_) | ApiError::Busy { .. } => StatusCode::TOO_MANY_REQUESTS,
            ApiError::Unavailable(_) => StatusCode::SERVICE_UNAVAILABLE,
            ApiError::Internal(_) => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }

    /// Returns the text a person may see: the message, or the fixed 5xx text
    /// (logging the cause, once).
    pub fn public_text(&self) -> String {
        match self {
            ApiError::Internal(e) => {
                tracing::error!(error = ?e, "request failed");
                INTERNAL_TEXT.to_string()
            }
            other => other.to_string(),
        }
    }
}

/// The body of every error answer of the API.
#[derive(Debug, Serialize, utoipa::ToSchema)]
pub struct ErrorBody {
    /// What went wrong, in words a person can act on (a fixed text for a 5xx).
    pub error: String,
    /// A refused batch (422): every rule each element broke. Nothing of the batch was
    /// written.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rows: Option<Vec<RowError>>,
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let status = self.status();
        let body = match &self {
            ApiError::Internal(e) => {
                tracing::error!(error = ?e, "request failed");
                ErrorBody {
                    error: INTERNAL_TEXT.into(),
                    rows: None,
                }
            }
            ApiError::Rejected(rows) => ErrorBody {
                error: self.to_string(),
                rows: Some(rows.clone()),
            },
            other => ErrorBody {
                error: other.to_string(),
                rows: None,
            },
        };
        let mut response = (status, Json(body)).into_response();
        if let ApiError::Busy { retry_after_s, .. } = self {
            response.headers_mut().insert(
                axum::http::header::RETRY_AFTER,
                axum::http::HeaderValue::from(retry_after_s),
            );
        }
        response
    }
}
