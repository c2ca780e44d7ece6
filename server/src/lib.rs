//! Cairn: a cycle-counting server. It keeps a timestamped ledger of every
//! stock movement and serves the people who keep stock records true.
//!
//! `app` builds the router over an [`AppState`]; `run` serves it on a listener
//! the caller has already bound, so tests can bind port 0.

pub mod accounts;
pub mod accuracy;
pub use store::backup;
pub mod batch;
pub mod build_info;
pub mod cli;
pub mod config;
pub mod demo;
pub mod error;
pub mod http;
pub mod import;
pub mod input;
pub mod ledger;
pub mod loadtest;
pub mod master;
pub mod netting;
pub mod planning;
pub mod review;
pub mod store;
pub mod sync;
pub mod telemetry;
pub mod time;
pub mod web;
pub mod writes;

use config::Config;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use store::Store;

/// What every request handler can reach.
#[derive(Clone)]
pub struct AppState {
    pub store: Arc<dyn Store>,
    pub config: Arc<Config>,
    /// Set once the server starts to shut down: `/readyz` then answers 503.
    pub draining: Arc<AtomicBool>,
    /// The cap on password and PIN hashes running at once.
    pub hashing: accounts::hashing::HashGate,
}

impl AppState {
    /// Opens the store named by `config` and builds the state over it.
    pub fn open(config: Config) -> anyhow::Result<Self> {
        let store = store::open(&config.db, config.store_options())?;
        Ok(Self {
            store,
            hashing: config.hash_gate(),
            config: Arc::new(config),
            draining: Arc::new(AtomicBool::new(false)),
        })
    }
}

/// Builds the application router.
pub fn app(state: AppState) -> axum::Router {
    http::router(state)
}

/// Serves the application on an already-bound listener until `shutdown` resolves.
pub async fn run(
    state: AppState,
    listener: tokio::net::TcpListener,
    shutdown: impl std::future::Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    let draining = state.draining.clone();
    let head_timeout = std::time::Duration::from_millis(state.config.request_head_timeout_ms);
    http::serve::serve(listener, app(state), head_timeout, async move {
        shutdown.await;
        draining.store(true, Ordering::SeqCst);
    })
    .await
}
