//! Cairn's settings: one typed struct, from defaults, then an optional TOML
//! file, then `CAIRN_*` environment variables and command-line flags.

use crate::store::sqlite::{OpenOptions, Synchronous};
use serde::Deserialize;
use std::net::SocketAddr;
use std::path::{Path, PathBuf};

/// Everything the server needs to start.
#[derive(Debug, Clone, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Config {
    /// The SQLite database file.
    pub db: PathBuf,
    /// Address to listen on.
    pub listen: SocketAddr,
    /// Largest request body accepted, in bytes.
    pub max_body_bytes: usize,
    /// SQLite durability at commit.
    pub synchronous: Synchronous,
    /// Read connections in the pool.
    pub readers: usize,
    /// Movements of one key between balance snapshots.
    pub snapshot_every: i64,
    /// The phone app's files (HTML, JS, the wasm built by `cargo xtask wasm`), served at `/app/`.
    pub web_dir: PathBuf,
    /// Mark session cookies `Secure` (sent over HTTPS only). On by default;
    /// the plain-HTTP demo on loopback turns it off.
    pub secure_cookies: bool,
    /// Take the client address for sign-in throttling from the last
    /// `X-Forwarded-For` entry (only behind a reverse proxy that sets it).
    pub trust_forwarded_for: bool,
}

impl Default for Config {
    fn default() -> Self {
        let store = OpenOptions::default();
        Self {
            db: PathBuf::from("cairn.db"),
            listen: SocketAddr::from(([127, 0, 0, 1], 8080)),
            max_body_bytes: 4 * 1024 * 1024,
            synchronous: store.synchronous,
            readers: store.readers,
            snapshot_every: store.snapshot_every,
            web_dir: PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../client/web")),
            secure_cookies: true,
            trust_forwarded_for: false,
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

    /// Returns the store settings this config implies.
    pub fn store_options(&self) -> OpenOptions {
        OpenOptions {
            synchronous: self.synchronous,
            readers: self.readers.max(1),
            snapshot_every: self.snapshot_every.max(2),
            ..OpenOptions::default()
        }
    }
}
