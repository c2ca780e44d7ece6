//! One writer thread and a pool of readers over one SQLite file. Every write
//! goes through the single writer, so concurrent requests never meet
//! SQLITE_BUSY; reads run on blocking threads and never block the runtime.

use super::OpenOptions;
use crate::store::StoreError;
use rusqlite::Connection;
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::time::Instant;
use tokio::sync::{Semaphore, mpsc, oneshot};

/// Writes queued for the writer before senders wait.
const WRITE_QUEUE_DEPTH: usize = 256;

type WriteJob = Box<dyn FnOnce(&mut Connection) + Send>;

/// Prepared statements each connection keeps. Netting one pass runs about forty
/// distinct statements; with fewer slots than that, every key re-prepares them.
const STATEMENT_CACHE: usize = 128;

/// Opens a connection with the per-connection settings every Cairn connection has.
pub fn connect(path: &Path, opts: &OpenOptions, read_only: bool) -> rusqlite::Result<Connection> {
    let conn = Connection::open(path)?;
    conn.set_prepared_statement_cache_capacity(STATEMENT_CACHE);
    conn.busy_timeout(opts.busy_timeout)?;
    conn.pragma_update(None, "foreign_keys", true)?;
    conn.pragma_update(None, "synchronous", opts.synchronous.as_str())?;
    conn.pragma_update(None, "temp_store", "memory")?;
    conn.pragma_update(None, "cache_size", -(opts.cache_kib as i64))?;
    if read_only {
        conn.pragma_update(None, "query_only", true)?;
    }
    Ok(conn)
}

/// The single writer: a thread that owns the write connection.
pub struct Writer {
    jobs: mpsc::Sender<WriteJob>,
}

impl Writer {
    /// Starts the writer thread on an open connection.
    pub fn start(mut conn: Connection) -> std::io::Result<Self> {
        let (tx, mut rx) = mpsc::channel::<WriteJob>(WRITE_QUEUE_DEPTH);
        std::thread::Builder::new()
            .name("cairn-writer".into())
            .spawn(move || {
                while let Some(job) = rx.blocking_recv() {
                    job(&mut conn);
                }
            })?;
        Ok(Self { jobs: tx })
    }

    /// Runs `f` on the writer connection and returns its result.
    pub async fn run<R, F>(&self, f: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&mut Connection) -> Result<R, StoreError> + Send + 'static,
    {
        let (tx, rx) = oneshot::channel();
        let queued = Instant::now();
        let job: WriteJob = Box::new(move |conn| {
            let m = crate::telemetry::metrics();
            m.db_write_wait_seconds.observe_duration(queued.elapsed());
            let started = Instant::now();
            let out = f(conn);
            m.db_write_seconds.observe_duration(started.elapsed());
            let _ = tx.send(out);
        });
        self.jobs
            .send(job)
            .await
            .map_err(|_| anyhow::anyhow!("the writer thread has stopped"))?;
        rx.await
            .map_err(|_| anyhow::anyhow!("the writer thread dropped a job (panic?)"))?
    }
}

/// A fixed pool of read-only connections.
pub struct Readers {
    path: PathBuf,
    opts: OpenOptions,
    idle: Mutex<Vec<Connection>>,
    permits: Semaphore,
}

impl Readers {
    /// Opens `n` read connections.
    pub fn open(path: &Path, opts: &OpenOptions, n: usize) -> rusqlite::Result<Self> {
        let idle = (0..n)
            .map(|_| connect(path, opts, true))
            .collect::<rusqlite::Result<Vec<_>>>()?;
        Ok(Self {
            path: path.to_path_buf(),
            opts: opts.clone(),
            idle: Mutex::new(idle),
            permits: Semaphore::new(n),
        })
    }

    /// Runs `f` on a free read connection on a blocking thread.
    pub async fn run<R, F>(&self, f: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&Connection) -> Result<R, StoreError> + Send + 'static,
    {
        let _permit = self
            .permits
            .acquire()
            .await
            .map_err(|_| anyhow::anyhow!("reader pool closed"))?;
        let conn = self
            .idle
            .lock()
            .expect("reader pool lock is never poisoned: no code panics while holding it")
            .pop();
        let conn = match conn {
            Some(c) => c,
            None => connect(&self.path, &self.opts, true)?,
        };
        let (conn, out) = tokio::task::spawn_blocking(move || {
            let started = Instant::now();
            let out = f(&conn);
            crate::telemetry::metrics()
                .db_read_seconds
                .observe_duration(started.elapsed());
            (conn, out)
        })
        .await
        .map_err(|e| anyhow::anyhow!("a read task failed: {e}"))?;
        self.idle
            .lock()
            .expect("reader pool lock is never poisoned")
            .push(conn);
        out
    }
}
