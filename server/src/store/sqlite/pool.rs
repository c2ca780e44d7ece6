//! One writer thread and a pool of readers over one SQLite file. Every write
//! goes through the single writer, so concurrent requests never meet
//! SQLITE_BUSY; reads run on blocking threads and never block the runtime.
//! Shared writes (phone syncs) queued together commit together, one fsync for the
//! group, each in its own savepoint.

use super::OpenOptions;
use crate::store::StoreError;
use rusqlite::{Connection, Transaction};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::time::Instant;
use tokio::sync::{Semaphore, mpsc, oneshot};

/// Writes queued for the writer before senders wait.
const WRITE_QUEUE_DEPTH: usize = 256;

/// Most shared writes committed together: bounds how long the first of a group waits
/// for the others' work.
const MAX_GROUP: usize = 32;

type WriteJob = Box<dyn FnOnce(&mut Connection) + Send>;

/// What the writer thread is handed.
enum Job {
    /// A write with its own transaction.
    Alone(WriteJob),
    /// A write that may share one transaction, and one commit, with the shared writes
    /// queued behind it.
    Shared(Box<dyn SharedWrite>),
}

/// A write run inside a group's transaction, in a savepoint of its own.
trait SharedWrite: Send {
    /// Does the work; returns whether it succeeded (its savepoint is then kept).
    fn run(&mut self, tx: &Transaction<'_>) -> bool;
    /// Answers the sender once the group's fate is known: its own error, or its result
    /// if the group committed, or the reason the group did not.
    fn finish(self: Box<Self>, committed: Result<(), &str>);
}

struct Pending<R, F> {
    work: Option<F>,
    out: Option<Result<R, StoreError>>,
    reply: oneshot::Sender<Result<R, StoreError>>,
    queued: Instant,
}

impl<R, F> SharedWrite for Pending<R, F>
where
    R: Send + 'static,
    F: FnOnce(&Transaction<'_>) -> Result<R, StoreError> + Send + 'static,
{
    fn run(&mut self, tx: &Transaction<'_>) -> bool {
        let m = crate::telemetry::metrics();
        m.db_write_wait_seconds
            .observe_duration(self.queued.elapsed());
        let started = Instant::now();
        let work = self.work.take().expect("a shared write runs once");
        let out = work(tx);
        m.db_write_seconds.observe_duration(started.elapsed());
        let ok = out.is_ok();
        self.out = Some(out);
        ok
    }

    fn finish(self: Box<Self>, committed: Result<(), &str>) {
        let answer = match (self.out, committed) {
            (Some(Err(e)), _) => Err(e),
            (Some(Ok(r)), Ok(())) => Ok(r),
            (_, Err(why)) => Err(StoreError::Internal(anyhow::anyhow!(
                "the write was not committed: {why}"
            ))),
            (None, Ok(())) => Err(StoreError::Internal(anyhow::anyhow!(
                "a shared write was never run"
            ))),
        };
        let _ = self.reply.send(answer);
    }
}

/// Runs a group of shared writes in one transaction, each in its own savepoint, so one
/// that fails leaves nothing behind and the others still commit. Every sender is
/// answered after the commit, so nothing is acknowledged that a crash could undo.
fn run_group(conn: &mut Connection, mut group: Vec<Box<dyn SharedWrite>>) {
    crate::telemetry::metrics()
        .db_write_group_size
        .observe(group.len() as f64);
    let outcome = (|| -> rusqlite::Result<()> {
        let tx = conn.transaction()?;
        for job in &mut group {
            tx.execute_batch("savepoint shared_write")?;
            if job.run(&tx) {
                tx.execute_batch("release shared_write")?;
            } else {
                tx.execute_batch("rollback to shared_write; release shared_write")?;
            }
        }
        tx.commit()
    })();
    let why = outcome.err().map(|e| e.to_string());
    for job in group {
        job.finish(why.as_deref().map_or(Ok(()), Err));
    }
}

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
    jobs: mpsc::Sender<Job>,
}

impl Writer {
    /// Starts the writer thread on an open connection.
    pub fn start(mut conn: Connection) -> std::io::Result<Self> {
        let (tx, mut rx) = mpsc::channel::<Job>(WRITE_QUEUE_DEPTH);
        std::thread::Builder::new()
            .name("cairn-writer".into())
            .spawn(move || {
                let mut next = None;
                loop {
                    let Some(job) = next.take().or_else(|| rx.blocking_recv()) else {
                        break;
                    };
                    match job {
                        Job::Alone(f) => f(&mut conn),
                        Job::Shared(first) => {
                            // The shared writes already queued join this one's commit.
                            let mut group = vec![first];
                            while group.len() < MAX_GROUP {
                                match rx.try_recv() {
                                    Ok(Job::Shared(j)) => group.push(j),
                                    Ok(alone) => {
                                        next = Some(alone);
                                        break;
                                    }
                                    Err(_) => break,
                                }
                            }
                            run_group(&mut conn, group);
                        }
                    }
                }
            })?;
        Ok(Self { jobs: tx })
    }

    async fn send(&self, job: Job) -> Result<(), StoreError> {
        self.jobs
            .send(job)
            .await
            .map_err(|_| anyhow::anyhow!("the writer thread has stopped").into())
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
        self.send(Job::Alone(job)).await?;
        rx.await
            .map_err(|_| anyhow::anyhow!("the writer thread dropped a job (panic?)"))?
    }

    /// Runs `f` in a write transaction it may share with other shared writes queued at
    /// the same moment (group commit: one fsync for all of them). `f` runs in its own
    /// savepoint: if it fails, its changes are undone and the others' are kept. The
    /// result arrives only after the commit.
    pub async fn run_shared<R, F>(&self, f: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&Transaction<'_>) -> Result<R, StoreError> + Send + 'static,
    {
        let (tx, rx) = oneshot::channel();
        let job = Pending {
            work: Some(f),
            out: None,
            reply: tx,
            queued: Instant::now(),
        };
        self.send(Job::Shared(Box::new(job))).await?;
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

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Arc;

    fn rows(path: &Path) -> Vec<i64> {
        let c = Connection::open(path).unwrap();
        let mut s = c.prepare("select n from t order by n").unwrap();
        s.query_map([], |r| r.get(0))
            .unwrap()
            .map(Result::unwrap)
            .collect()
    }

    #[tokio::test]
    async fn shared_writes_queued_together_commit_once_and_a_failing_one_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("group.db");
        let conn = connect(&path, &OpenOptions::default(), false).unwrap();
        conn.execute_batch("pragma journal_mode = wal; create table t (n integer primary key)")
            .unwrap();
        let writer = Arc::new(Writer::start(conn).unwrap());

        // Hold the writer busy until five shared writes wait in its queue.
        let (started_tx, started_rx) = oneshot::channel::<()>();
        let (release_tx, release_rx) = std::sync::mpsc::channel::<()>();
        let w = writer.clone();
        let hold = tokio::spawn(async move {
            w.run(move |_| {
                let _ = started_tx.send(());
                let _ = release_rx.recv();
                Ok(())
            })
            .await
        });
        started_rx.await.unwrap();
        let mut sent = Vec::new();
        for n in 1..=5_i64 {
            let w = writer.clone();
            let p = path.clone();
            sent.push(tokio::spawn(async move {
                w.run_shared(move |tx| {
                    tx.execute("insert into t (n) values (?1)", [n])?;
                    // Inside the group nothing is committed yet: another connection
                    // sees none of the group's rows.
                    let seen = rows(&p);
                    if n == 3 {
                        return Err(anyhow::anyhow!("write 3 fails after its insert").into());
                    }
                    Ok(seen)
                })
                .await
            }));
            while writer.jobs.capacity() > WRITE_QUEUE_DEPTH - n as usize {
                tokio::task::yield_now().await;
            }
        }
        release_tx.send(()).unwrap();
        hold.await.unwrap().unwrap();
        let mut answers = Vec::new();
        for s in sent {
            answers.push(s.await.unwrap());
        }
        for (i, a) in answers.iter().enumerate() {
            match (i + 1, a) {
                (3, Err(e)) => assert!(e.to_string().contains("write 3 fails"), "{e}"),
                (_, Ok(seen)) => assert!(seen.is_empty(), "write {} saw {seen:?}", i + 1),
                (n, other) => panic!("write {n}: {other:?}"),
            }
        }
        assert_eq!(
            rows(&path),
            vec![1, 2, 4, 5],
            "the failed write left nothing"
        );
    }
}
