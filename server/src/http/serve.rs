//! The connection loop: accepts TCP connections and serves HTTP/1.1 on each,
//! with a time limit on request heads that also closes idle connections.
//!
//! Without it a client could hold a connection (and its file descriptor)
//! forever by sending nothing, or by sending a request head a byte at a
//! time. The limit runs from the moment the server starts waiting for a
//! request head — when the connection opens, and again after each answer on
//! a kept-alive connection — to the end of that head; sending slowly does not
//! extend it. Bodies have their own deadline (`body_deadline`).

use axum::Router;
use axum::extract::ConnectInfo;
use hyper::body::Incoming;
use hyper_util::rt::{TokioIo, TokioTimer};
use std::future::Future;
use std::net::SocketAddr;
use std::pin::pin;
use std::time::Duration;
use tokio::net::TcpListener;
use tower::ServiceExt as _;

/// How long the loop pauses after an accept error that is not one
/// connection's problem (e.g. out of file descriptors), in milliseconds.
const ACCEPT_ERROR_PAUSE_MS: u64 = 100;

/// Serves `app` on `listener` until `shutdown` resolves, then stops accepting,
/// lets requests in flight finish, and returns once every connection is closed.
pub async fn serve(
    listener: TcpListener,
    app: Router,
    head_timeout: Duration,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    // Each connection holds a receiver of `stop`: the send wakes them all, and
    // `stop.closed()` resolves once the last one is gone.
    let (stop, stopped) = tokio::sync::watch::channel(false);
    let mut shutdown = pin!(shutdown);
    loop {
        let (stream, peer) = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok(c) => c,
                Err(e) if is_connection_error(&e) => continue,
                Err(e) => {
                    tracing::error!(error = %e, "accepting a connection failed");
                    tokio::time::sleep(Duration::from_millis(ACCEPT_ERROR_PAUSE_MS)).await;
                    continue;
                }
            },
            () = &mut shutdown => break,
        };
        if let Err(e) = stream.set_nodelay(true) {
            tracing::debug!(error = %e, "TCP_NODELAY could not be set");
        }
        tokio::spawn(serve_connection(
            stream,
            peer,
            app.clone(),
            head_timeout,
            stopped.clone(),
        ));
    }
    drop(listener);
    drop(stopped);
    // No receiver left means no connection left: nothing to wake.
    let _ = stop.send(true);
    stop.closed().await;
    Ok(())
}

async fn serve_connection(
    stream: tokio::net::TcpStream,
    peer: SocketAddr,
    app: Router,
    head_timeout: Duration,
    mut stop: tokio::sync::watch::Receiver<bool>,
) {
    let service = hyper::service::service_fn(move |mut req: hyper::Request<Incoming>| {
        req.extensions_mut().insert(ConnectInfo(peer));
        app.clone().oneshot(req.map(axum::body::Body::new))
    });
    let conn = hyper::server::conn::http1::Builder::new()
        .timer(TokioTimer::new())
        .header_read_timeout(head_timeout)
        .serve_connection(TokioIo::new(stream), service);
    let mut conn = pin!(conn);
    let mut stopping = false;
    loop {
        tokio::select! {
            done = conn.as_mut() => {
                if let Err(e) = done {
                    // Timeouts, resets and malformed requests end up here: the
                    // client's problem, not the server's.
                    tracing::debug!(%peer, error = %e, "connection ended with an error");
                }
                break;
            }
            _ = stop.changed(), if !stopping => {
                stopping = true;
                conn.as_mut().graceful_shutdown();
            }
        }
    }
}

fn is_connection_error(e: &std::io::Error) -> bool {
    matches!(
        e.kind(),
        std::io::ErrorKind::ConnectionRefused
            | std::io::ErrorKind::ConnectionAborted
            | std::io::ErrorKind::ConnectionReset
    )
}
