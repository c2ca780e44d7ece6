//! Extractors that turn request parts into domain values, answering bad input
//! with an [`ApiError`] that says what and where.

use crate::AppState;
use crate::batch::{Collector, FieldError, MAX_BATCH_ROWS, RowError};
use crate::error::ApiError;
use crate::http::access::PathSite;
use crate::input::objects::Objects;
use crate::master::{Site, SiteCode};
use axum::body::Bytes;
use axum::extract::{FromRequest, FromRequestParts, Path, Query, Request};
use axum::http::request::Parts;
use serde::Deserialize;
use serde::de::DeserializeOwned;
use std::collections::HashMap;

/// The site named by the `{site}` path segment; unknown sites are a 404.
pub struct CurrentSite(pub Site);

impl FromRequestParts<AppState> for CurrentSite {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        if let Some(PathSite(site)) = parts.extensions.get::<PathSite>() {
            return Ok(CurrentSite(site.clone()));
        }
        let Path(params) = Path::<HashMap<String, String>>::from_request_parts(parts, state)
            .await
            .map_err(|e| ApiError::BadRequest(e.body_text()))?;
        let raw = params
            .get("site")
            .ok_or_else(|| ApiError::BadRequest("no site in the path".into()))?;
        let code = SiteCode::parse(raw).map_err(|e| ApiError::BadRequest(e.to_string()))?;
        let site = state
            .store
            .site(&code)
            .await?
            .ok_or_else(|| ApiError::NotFound(format!("unknown site '{code}'")))?;
        Ok(CurrentSite(site))
    }
}

/// Query-string parameters, with a plain message when they do not parse.
pub struct Params<T>(pub T);

impl<T: DeserializeOwned + Send, S: Send + Sync> FromRequestParts<S> for Params<T> {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &S) -> Result<Self, ApiError> {
        Query::<T>::from_request_parts(parts, state)
            .await
            .map(|Query(v)| Params(v))
            .map_err(|e| ApiError::BadRequest(e.body_text()))
    }
}

/// A JSON array body whose rows are decoded together when they are all well
/// formed, and one by one when one is not, so an error names its row and field.
/// The body is read as strictly as any other (`input::json`): one value, no key twice,
/// and each row (and any struct in it) a JSON object, never an array of its fields.
pub struct JsonRows(Bytes);

impl<S: Send + Sync> FromRequest<S> for JsonRows {
    type Rejection = ApiError;

    async fn from_request(req: Request, state: &S) -> Result<Self, ApiError> {
        let json = req
            .headers()
            .get(axum::http::header::CONTENT_TYPE)
            .and_then(|v| v.to_str().ok())
            .is_some_and(|v| v.starts_with("application/json"));
        if !json {
            return Err(ApiError::BadRequest(
                "send the body as Content-Type: application/json".into(),
            ));
        }
        let bytes = Bytes::from_request(req, state)
            .await
            .map_err(|e| ApiError::TooLarge(e.body_text()))?;
        Ok(JsonRows(bytes))
    }
}

impl JsonRows {
    /// Decodes and validates every row, or answers with every error of every row.
    /// Trailing data or a key given twice refuses the whole body first.
    pub fn validated<R: DeserializeOwned, T>(
        self,
        validate: impl Fn(R) -> Result<T, Vec<FieldError>>,
    ) -> Result<Vec<T>, ApiError> {
        crate::input::json::check_shape(&self.0)?;
        let mut c = Collector::default();
        let mut whole = serde_json::Deserializer::from_slice(&self.0);
        match Vec::<R>::deserialize(Objects(&mut whole)) {
            Ok(rows) => {
                check_count(rows.len())?;
                for (i, r) in rows.into_iter().enumerate() {
                    c.push(i, validate(r));
                }
            }
            Err(_) => {
                let v: serde_json::Value = serde_json::from_slice(&self.0).map_err(|e| {
                    ApiError::BadRequest(format!("the body is not valid JSON: {e}"))
                })?;
                let serde_json::Value::Array(rows) = v else {
                    return Err(ApiError::BadRequest(
                        "the body must be a JSON array of rows".into(),
                    ));
                };
                check_count(rows.len())?;
                for (i, v) in rows.into_iter().enumerate() {
                    match serde_path_to_error::deserialize::<_, R>(Objects(v)) {
                        Ok(r) => c.push(i, validate(r)),
                        Err(e) => {
                            let field = match e.path().to_string() {
                                p if p == "." => "row".to_string(),
                                p => p,
                            };
                            c.errors
                                .push(RowError::new(i, field, e.into_inner().to_string()));
                        }
                    }
                }
            }
        }
        c.finish().map_err(ApiError::Rejected)
    }
}

fn check_count(n: usize) -> Result<(), ApiError> {
    if n > MAX_BATCH_ROWS {
        return Err(ApiError::TooLarge(format!(
            "a batch of {n} rows is over the limit of {MAX_BATCH_ROWS}"
        )));
    }
    if n == 0 {
        return Err(ApiError::BadRequest("the batch is empty".into()));
    }
    Ok(())
}
