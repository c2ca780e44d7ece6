//! Extractors that turn request parts into domain values, answering bad input
//! with an [`ApiError`] that says what and where.

use crate::AppState;
use crate::error::ApiError;
use crate::master::{Site, SiteCode};
use axum::extract::{FromRequest, FromRequestParts, Path, Query, Request};
use axum::http::request::Parts;
use serde::de::DeserializeOwned;
use std::collections::HashMap;

/// The site named by the `{site}` path segment; unknown sites are a 404.
pub struct CurrentSite(pub Site);

impl FromRequestParts<AppState> for CurrentSite {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
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

/// A JSON array body whose rows are decoded one by one, so an error names its row.
pub struct JsonRows(pub Vec<serde_json::Value>);

impl<S: Send + Sync> FromRequest<S> for JsonRows {
    type Rejection = ApiError;

    async fn from_request(req: Request, state: &S) -> Result<Self, ApiError> {
        let axum::Json(v) = axum::Json::<serde_json::Value>::from_request(req, state)
            .await
            .map_err(|e| match e {
                axum::extract::rejection::JsonRejection::BytesRejection(b) => {
                    ApiError::TooLarge(b.body_text())
                }
                other => ApiError::BadRequest(other.body_text()),
            })?;
        match v {
            serde_json::Value::Array(rows) => Ok(JsonRows(rows)),
            _ => Err(ApiError::BadRequest(
                "the body must be a JSON array of rows".into(),
            )),
        }
    }
}

impl JsonRows {
    /// Decodes and validates every row, or answers with every error of every row.
    pub fn validated<R: DeserializeOwned, T>(
        self,
        validate: impl Fn(R) -> Result<T, Vec<crate::batch::FieldError>>,
    ) -> Result<Vec<T>, ApiError> {
        let mut c = crate::batch::Collector::default();
        for (i, r) in self.decode::<R>(crate::batch::MAX_BATCH_ROWS)? {
            c.push(i, validate(r));
        }
        c.finish().map_err(ApiError::Rejected)
    }

    /// Decodes every row into `T`, collecting errors that name the row and field.
    pub fn decode<T: DeserializeOwned>(self, max_rows: usize) -> Result<Vec<(usize, T)>, ApiError> {
        if self.0.len() > max_rows {
            return Err(ApiError::TooLarge(format!(
                "a batch of {} rows is over the limit of {max_rows}",
                self.0.len()
            )));
        }
        if self.0.is_empty() {
            return Err(ApiError::BadRequest("the batch is empty".into()));
        }
        let mut ok = Vec::with_capacity(self.0.len());
        let mut errors = Vec::new();
        for (i, v) in self.0.into_iter().enumerate() {
            match serde_path_to_error::deserialize::<_, T>(v) {
                Ok(t) => ok.push((i, t)),
                Err(e) => {
                    let field = match e.path().to_string() {
                        p if p == "." => "row".to_string(),
                        p => p,
                    };
                    errors.push(crate::batch::RowError::new(
                        i,
                        field,
                        e.into_inner().to_string(),
                    ));
                }
            }
        }
        if errors.is_empty() {
            Ok(ok)
        } else {
            Err(ApiError::Rejected(errors))
        }
    }
}
