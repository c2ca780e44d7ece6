//! Cairn's settings: one typed struct, from defaults, then an optional TOML
//! file, then `CAIRN_*` environment variables and command-line flags.

use crate::store::{DbLocation, StoreOptions, Synchronous};
use serde::Deserialize;
use std::net::SocketAddr;
use std::path::{Path, PathBuf};

/// Everything the server needs to start.
#[derive(Debug, Clone, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Config {
    /// The database: a SQLite file path (a `postgres://` URL is read, and refused
    /// by this build).
    pub db: DbLocation,
    /// Address to listen on.
    pub listen: SocketAddr,
    /// Largest request body accepted, in bytes.
    pub max_body_bytes: usize,
    /// Durability at commit.
    pub synchronous: Synchronous,
    /// Read connections in the pool.
    pub readers: usize,
    /// Movements of one key between balance snapshots.
    pub snapshot_every: i64,
    /// Development only: serve the phone app at `/app/` from this folder, read at every
    /// request (edit its JS without a rebuild), instead of the files compiled in. Off by default.
    pub web_dir: Option<PathBuf>,
    /// Mark session cookies `Secure` (sent over HTTPS only). On by default;
    /// the plain-HTTP demo on loopback turns it off.
    pub secure_cookies: bool,
    /// Take the client address for sign-in throttling from the last
    /// `X-Forwarded-For` entry (only behind a reverse proxy that sets it).
    pub trust_forwarded_for: bool,
    /// Password and PIN hashes allowed to run at once (each holds 19 MiB);
    /// by default twice the cores available.
    pub max_concurrent_hashes: usize,
    /// How long a sign-in waits for a turn to hash before it is told to come
    /// back later (429), in milliseconds.
    pub hash_wait_ms: u64,
    /// How long a connection may take to send a whole request head, counted
    /// from when the server starts waiting for one, in milliseconds. It also
    /// closes connections left idle between requests for that long.
    pub request_head_timeout_ms: u64,
    /// How long a request may take to send its whole body, counted from when
    /// its head arrived, in milliseconds; a slower one is answered 408 and closed.
    pub request_body_timeout_ms: u64,
}

/// Default of [`Config::request_head_timeout_ms`]: 15 s.
pub const DEFAULT_REQUEST_HEAD_TIMEOUT_MS: u64 = 15_000;
/// Default of [`Config::request_body_timeout_ms`]: 60 s, enough for a full
/// `max_body_bytes` body at about 70 KiB/s (a weak phone connection).
pub const DEFAULT_REQUEST_BODY_TIMEOUT_MS: u64 = 60_000;

impl Default for Config {
    fn default() -> Self {
        let store = StoreOptions::default();
        Self {
            db: DbLocation::File(PathBuf::from("cairn.db")),
            listen: SocketAddr::from(([127, 0, 0, 1], 8080)),
            max_body_bytes: 4 * 1024 * 1024,
            synchronous: store.synchronous,
            readers: store.readers,
            snapshot_every: store.snapshot_every,
            web_dir: None,
            secure_cookies: true,
            trust_forwarded_for: false,
            max_concurrent_hashes: crate::accounts::hashing::default_max_concurrent_hashes(),
            hash_wait_ms: crate::accounts::hashing::DEFAULT_HASH_WAIT_MS,
            request_head_timeout_ms: DEFAULT_REQUEST_HEAD_TIMEOUT_MS,
            request_body_timeout_ms: DEFAULT_REQUEST_BODY_TIMEOUT_MS,
        }
    }
}

impl Config {
    /// Reads a TOML file over the defaults; missing keys keep their defaults.
    pub fn from_file(path: &Path) -> anyhow::Result<Self> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| anyhow::anyhow!("cannot read config {}: {e}", path.display()))?;
        toml::from_str(&text).map_err(|e| anyhow::anyhow!("config {}: {e}", path.display()))
    }

    /// Refuses settings the server cannot run with, naming the setting.
    pub fn check(&self) -> anyhow::Result<()> {
        for (name, ms) in [
            ("request_head_timeout_ms", self.request_head_timeout_ms),
            ("request_body_timeout_ms", self.request_body_timeout_ms),
        ] {
            if ms == 0 {
                anyhow::bail!("{name} must be at least 1 (milliseconds)");
            }
        }
        if self.max_concurrent_hashes == 0 {
            anyhow::bail!("max_concurrent_hashes must be at least 1");
        }
        Ok(())
    }

    /// Returns the gate that caps concurrent password and PIN hashing.
    pub fn hash_gate(&self) -> crate::accounts::hashing::HashGate {
        crate::accounts::hashing::HashGate::new(
            self.max_concurrent_hashes,
            std::time::Duration::from_millis(self.hash_wait_ms),
        )
    }

    /// Returns the store settings this config implies.
    pub fn store_options(&self) -> StoreOptions {
        StoreOptions {
            synchronous: self.synchronous,
            readers: self.readers.max(1),
            snapshot_every: self.snapshot_every.max(2),
            ..StoreOptions::default()
        }
    }
}
