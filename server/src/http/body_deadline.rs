//! The deadline on request bodies: a request must have sent its whole body
//! within `request_body_timeout_ms` of its head arriving, however it paces
//! the bytes. A late one is answered 408 and its connection closed, so a
//! client sending a byte a second cannot hold a connection and a handler.

use axum::body::{Body, Bytes, HttpBody};
use axum::extract::{Request, State};
use axum::http::{StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use http_body::{Frame, SizeHint};
use serde_json::json;
use std::pin::Pin;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::task::{Context, Poll};
use std::time::Duration;

/// What a sender whose body came too slowly is told.
pub const SLOW_BODY_TEXT: &str =
    "the request body did not arrive in time; the connection is closed, send it again";

/// The error a body reports once its deadline has passed.
#[derive(Debug, thiserror::Error)]
#[error("{SLOW_BODY_TEXT}")]
pub struct BodyTimedOut;

/// Gives every request body the deadline `limit` from now and answers 408
/// (closing the connection) when a handler's read of it ran past.
pub async fn body_deadline(State(limit): State<Duration>, req: Request, next: Next) -> Response {
    if req.body().is_end_stream() {
        return next.run(req).await;
    }
    let expired = Arc::new(AtomicBool::new(false));
    let flag = expired.clone();
    let req = req.map(|inner| {
        Body::new(DeadlineBody {
            inner,
            deadline: Box::pin(tokio::time::sleep(limit)),
            expired: flag,
        })
    });
    let response = next.run(req).await;
    if expired.load(Ordering::SeqCst) {
        return (
            StatusCode::REQUEST_TIMEOUT,
            [(header::CONNECTION, "close")],
            axum::Json(json!({ "error": SLOW_BODY_TEXT })),
        )
            .into_response();
    }
    response
}

/// A request body that fails once its deadline has passed.
struct DeadlineBody {
    inner: Body,
    deadline: Pin<Box<tokio::time::Sleep>>,
    expired: Arc<AtomicBool>,
}

impl HttpBody for DeadlineBody {
    type Data = Bytes;
    type Error = axum::Error;

    fn poll_frame(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
    ) -> Poll<Option<Result<Frame<Bytes>, axum::Error>>> {
        let this = self.get_mut();
        // The deadline comes first: a body that keeps trickling is always
        // "ready" a little at a time and must still end.
        if this.deadline.as_mut().poll(cx).is_ready() {
            this.expired.store(true, Ordering::SeqCst);
            return Poll::Ready(Some(Err(axum::Error::new(BodyTimedOut))));
        }
        Pin::new(&mut this.inner).poll_frame(cx)
    }

    fn is_end_stream(&self) -> bool {
        self.inner.is_end_stream()
    }

    fn size_hint(&self) -> SizeHint {
        self.inner.size_hint()
    }
}
