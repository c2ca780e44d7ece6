//! What a store answers when a write or read does not happen, and the progress counter a
//! long write advances: the two things the domain's transaction traits share with every
//! store, kept apart from the `Store` trait so the domain can name them without it.

use crate::batch::RowError;
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};

/// Why a store operation did not happen.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// The batch broke rules that need the stored data to check; nothing was written.
    #[error("{} row(s) refused", .0.len())]
    Rejected(Vec<RowError>),
    /// A named thing does not exist.
    #[error("{0}")]
    NotFound(String),
    /// The write conflicts with what is stored (e.g. a site code already taken).
    #[error("{0}")]
    Conflict(String),
    /// The database file belongs to a newer Cairn, or is not a Cairn database.
    #[error("{0}")]
    Incompatible(String),
    /// Anything else: logged once, shown to users as a fixed text.
    #[error(transparent)]
    Internal(#[from] anyhow::Error),
}

/// A counter a long write advances, so a CLI can draw a progress bar.
#[derive(Debug, Clone, Default)]
pub struct Progress(Option<Arc<AtomicU64>>);

impl Progress {
    /// Creates a progress counter and the handle to read it.
    pub fn new() -> (Self, Arc<AtomicU64>) {
        let c = Arc::new(AtomicU64::new(0));
        (Self(Some(c.clone())), c)
    }

    /// Advances the counter by `n` rows.
    pub fn tick(&self, n: u64) {
        if let Some(c) = &self.0 {
            c.fetch_add(n, Ordering::Relaxed);
        }
    }
}
