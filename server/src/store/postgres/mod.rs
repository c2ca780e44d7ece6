//! The PostgreSQL store, for a company with many sites and several app servers on one
//! database its IT already runs. Reads are plain async queries on a pooled connection;
//! a write runs the domain's workflow (a synchronous closure over the transaction traits)
//! on a blocking thread, each trait method one statement awaited on the server's own
//! runtime. Writes of one site are serialized across every server by a transaction-scoped
//! advisory lock on the site (`lock_scope`), so the single-writer reasoning of the
//! workflows holds, while different sites write in parallel.

pub mod accounts;
pub mod accuracy;
pub mod connect;
pub mod count_lists;
pub mod ledger;
pub mod master;
pub mod migrate;
pub mod netting;
pub mod planning;
pub mod recount_tasks;
pub mod review;
pub mod store_impl;
pub mod sync;
pub mod tasks;
pub mod tx;

#[cfg(test)]
mod tests;

use super::{StoreError, StoreOptions, WriteScope};
use deadpool_postgres::{Manager, ManagerConfig, Pool, RecyclingMethod};
use tokio_postgres::Row;
use tokio_postgres::types::ToSql;
pub use tx::{PgRead, PgTx};

/// The first key of every advisory lock Cairn takes (the second is the site's id), so a
/// database shared with other programs does not meet their locks by chance.
pub const LOCK_SPACE: i32 = 0x4361_6972; // "Cair"
/// The advisory lock key a migration holds (in `LOCK_SPACE`), so two servers starting
/// together migrate once.
pub const MIGRATION_LOCK: i32 = -1;

/// The PostgreSQL implementation of [`super::Store`].
pub struct PgStore {
    pool: Pool,
    options: StoreOptions,
}

/// A PostgreSQL failure is an internal error, unless it is one a rule of the schema raised
/// on purpose (an append-only table refusing a change), which keeps its words.
impl From<tokio_postgres::Error> for StoreError {
    fn from(e: tokio_postgres::Error) -> Self {
        StoreError::Internal(anyhow::anyhow!(describe(&e)))
    }
}

impl From<deadpool_postgres::PoolError> for StoreError {
    fn from(e: deadpool_postgres::PoolError) -> Self {
        let why = match &e {
            deadpool_postgres::PoolError::Backend(e) => describe(e),
            other => other.to_string(),
        };
        StoreError::Internal(anyhow::anyhow!("no database connection: {why}"))
    }
}

/// Says what went wrong with the server's own words where it gave some, and in plain
/// words when TLS refused the server's certificate.
pub fn describe(e: &tokio_postgres::Error) -> String {
    match e.as_db_error() {
        Some(db) => format!("{}: {}", db.code().code(), db.message()),
        None => connect::certificate_refused(e).unwrap_or_else(|| connect::with_causes(e)),
    }
}

impl PgStore {
    /// Connects to `url` (TLS as its `sslmode` says, see [`connect`]), migrates the database (once, whatever other servers start with
    /// it) and keeps a pool of connections. Runs the migration on a thread of its own, so
    /// it may be called from inside or outside the server's runtime.
    pub fn open(url: &str, options: StoreOptions) -> Result<Self, StoreError> {
        let (config, tls) = connect::read_url(url).map_err(anyhow::Error::msg)?;
        let (migrating, migrating_tls) = (config.clone(), tls.clone());
        std::thread::spawn(move || -> Result<i64, StoreError> {
            let rt = tokio::runtime::Builder::new_current_thread()
                .enable_all()
                .build()
                .map_err(|e| anyhow::anyhow!("cannot start the migration's runtime: {e}"))?;
            rt.block_on(async move {
                let (mut client, conn) = migrating.connect(migrating_tls).await.map_err(|e| {
                    anyhow::anyhow!("cannot connect to the database: {}", describe(&e))
                })?;
                let driver = tokio::spawn(conn);
                let v = migrate::migrate(&mut client).await;
                drop(client);
                let _ = driver.await;
                v
            })
        })
        .join()
        .map_err(|_| anyhow::anyhow!("the migration thread panicked"))??;
        let manager = Manager::from_config(
            config,
            tls,
            ManagerConfig {
                recycling_method: RecyclingMethod::Fast,
            },
        );
        let pool = Pool::builder(manager)
            .max_size(options.readers.max(1) + 4)
            .wait_timeout(Some(options.busy_timeout))
            .runtime(deadpool_postgres::Runtime::Tokio1)
            .build()
            .map_err(|e| anyhow::anyhow!("cannot build the connection pool: {e}"))?;
        Ok(Self { pool, options })
    }

    /// Takes a pooled connection for a read.
    pub async fn client(&self) -> Result<ReadConn, StoreError> {
        Ok(ReadConn {
            conn: self.connection().await?,
            taken: std::time::Instant::now(),
        })
    }

    /// Takes a pooled connection and shows the pool's figures.
    async fn connection(&self) -> Result<deadpool_postgres::Object, StoreError> {
        let c = self.pool.get().await?;
        self.report_pool();
        Ok(c)
    }

    /// Shows the pool's figures on `/metrics`.
    fn report_pool(&self) {
        use std::sync::atomic::Ordering::Relaxed;
        let s = self.pool.status();
        let m = &crate::telemetry::metrics().db_pool;
        m[0].store(s.size as i64, Relaxed);
        m[1].store(s.available as i64, Relaxed);
        m[2].store(s.waiting as i64, Relaxed);
    }

    /// Runs `read` on a pooled connection as synchronous code (on a blocking thread, each
    /// statement awaited on the server's runtime): for reads that share their SQL with a
    /// workflow's transaction or need many dependent statements.
    pub async fn read<R, F>(&self, read: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&PgRead<'_>) -> Result<R, StoreError> + Send + 'static,
    {
        let client = self.client().await?;
        let rt = tokio::runtime::Handle::current();
        let every = self.options.snapshot_every;
        tokio::task::spawn_blocking(move || read(&PgTx::new(&client, &rt, every)))
            .await
            .map_err(|e| anyhow::anyhow!("a read's thread failed: {e}"))?
    }

    /// Runs `work` in one transaction holding the advisory locks of `scope`: committed
    /// when it returns `Ok`, rolled back otherwise. The work is synchronous (the domain's
    /// workflows are), so it runs on a blocking thread and awaits each statement on the
    /// server's runtime.
    pub async fn write_tx<R, F>(&self, scope: WriteScope, work: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&PgTx<'_>) -> Result<R, StoreError> + Send + 'static,
    {
        self.run_tx(Some(scope), work).await
    }

    /// Runs `work` in one transaction as [`PgStore::write_tx`] does, but holding no site's
    /// lock: for writes that touch no site's counted data (a new site, users, sessions,
    /// sign-in throttling), so a sign-in never waits for a site's long write.
    pub async fn write_tx_unlocked<R, F>(&self, work: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&PgTx<'_>) -> Result<R, StoreError> + Send + 'static,
    {
        self.run_tx(None, work).await
    }

    async fn run_tx<R, F>(&self, scope: Option<WriteScope>, work: F) -> Result<R, StoreError>
    where
        R: Send + 'static,
        F: FnOnce(&PgTx<'_>) -> Result<R, StoreError> + Send + 'static,
    {
        let mut client = self.connection().await?;
        let rt = tokio::runtime::Handle::current();
        let every = self.options.snapshot_every;
        tokio::task::spawn_blocking(move || {
            let m = crate::telemetry::metrics();
            let tx = rt.block_on(client.transaction())?;
            if let Some(scope) = scope {
                let asked = std::time::Instant::now();
                rt.block_on(lock_scope(&tx, scope))?;
                m.db_lock_wait_seconds.observe_duration(asked.elapsed());
            }
            let started = std::time::Instant::now();
            let out = work(&PgTx::new(&tx, &rt, every))?;
            rt.block_on(tx.commit())?;
            m.db_write_seconds.observe_duration(started.elapsed());
            Ok(out)
        })
        .await
        .map_err(|e| anyhow::anyhow!("a write's thread failed: {e}"))?
    }
}

/// Runs `sql` on the database `url` names over a connection of its own: for making and
/// dropping scratch databases (the load test, benchmarks), not for a store's work.
pub async fn admin_execute(url: &str, sql: &str) -> anyhow::Result<()> {
    let (config, tls) = connect::read_url(url).map_err(anyhow::Error::msg)?;
    let (client, conn) = config.connect(tls).await.map_err(|e| {
        anyhow::anyhow!(
            "connecting to the PostgreSQL server: {}",
            connect::with_causes(&e)
        )
    })?;
    let driver = tokio::spawn(conn);
    client.batch_execute(sql).await?;
    drop(client);
    let _ = driver.await;
    Ok(())
}

/// `url` with its database name replaced by `name` (query parameters kept).
pub fn with_database(url: &str, name: &str) -> String {
    let (base, query) = match url.split_once('?') {
        Some((b, q)) => (b, format!("?{q}")),
        None => (url, String::new()),
    };
    let scheme_end = base.find("://").map_or(0, |i| i + 3);
    let host_end = base[scheme_end..]
        .find('/')
        .map_or(base.len(), |i| scheme_end + i);
    format!("{}/{name}{query}", &base[..host_end])
}

/// Tells whether `e` is a unique constraint refusing a row (SQLSTATE 23505).
pub fn is_unique_violation(e: &tokio_postgres::Error) -> bool {
    e.code() == Some(&tokio_postgres::error::SqlState::UNIQUE_VIOLATION)
}

/// Narrows a stored integer to the domain's type, or says which stored value is beyond it.
pub fn narrow<T: TryFrom<i64>>(v: i64, what: &str) -> Result<T, StoreError> {
    T::try_from(v).map_err(|_| anyhow::anyhow!("stored {what} {v} is out of range").into())
}

/// Reads integer column `i` of `r` narrowed to the domain's type, naming the column when
/// a stored value is beyond it.
pub fn col<T: TryFrom<i64>>(r: &Row, i: usize) -> Result<T, StoreError> {
    let v: i64 = r.try_get(i)?;
    narrow(v, r.columns()[i].name())
}

/// Runs a read (prepared once per connection) on a pooled connection; returns its rows.
pub async fn rows(
    c: &deadpool_postgres::Client,
    sql: &str,
    params: &[&(dyn ToSql + Sync)],
) -> Result<Vec<Row>, StoreError> {
    let st = c.prepare_cached(sql).await?;
    Ok(c.query(&st, params).await?)
}

/// Runs a read that returns at most one row.
pub async fn row_opt(
    c: &deadpool_postgres::Client,
    sql: &str,
    params: &[&(dyn ToSql + Sync)],
) -> Result<Option<Row>, StoreError> {
    let st = c.prepare_cached(sql).await?;
    Ok(c.query_opt(&st, params).await?)
}

/// Runs a read that returns exactly one row.
pub async fn row_one(
    c: &deadpool_postgres::Client,
    sql: &str,
    params: &[&(dyn ToSql + Sync)],
) -> Result<Row, StoreError> {
    let st = c.prepare_cached(sql).await?;
    Ok(c.query_one(&st, params).await?)
}

/// A pooled connection taken for a read; the time it was held counts as the read's time
/// on `/metrics`.
pub struct ReadConn {
    conn: deadpool_postgres::Object,
    taken: std::time::Instant,
}

impl std::ops::Deref for ReadConn {
    type Target = deadpool_postgres::Object;
    fn deref(&self) -> &Self::Target {
        &self.conn
    }
}

impl std::ops::DerefMut for ReadConn {
    fn deref_mut(&mut self) -> &mut Self::Target {
        &mut self.conn
    }
}

impl Drop for ReadConn {
    fn drop(&mut self) {
        crate::telemetry::metrics()
            .db_read_seconds
            .observe_duration(self.taken.elapsed());
    }
}

/// Takes the transaction-scoped advisory locks of `scope`: the one site's, or every
/// site's in id order (so two writers never wait on each other in a circle). A site's
/// lock is tried first, so a write that has to wait for another is counted
/// (`cairn_db_lock_contended_total`): writes of different sites never are.
async fn lock_scope(
    tx: &tokio_postgres::Transaction<'_>,
    scope: WriteScope,
) -> Result<(), StoreError> {
    match scope {
        WriteScope::Site(site) => {
            let key = site_key(site.0)?;
            let free: bool = tx
                .query_one(
                    "select pg_try_advisory_xact_lock($1, $2)",
                    &[&LOCK_SPACE, &key],
                )
                .await?
                .get(0);
            if !free {
                crate::telemetry::metrics()
                    .db_lock_contended
                    .fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                tx.execute("select pg_advisory_xact_lock($1, $2)", &[&LOCK_SPACE, &key])
                    .await?;
            }
        }
        WriteScope::AllSites => {
            tx.execute(
                "select pg_advisory_xact_lock($1, id::int4) from site order by id",
                &[&LOCK_SPACE],
            )
            .await?;
        }
    }
    Ok(())
}

/// A site's id as the advisory lock's second key.
fn site_key(id: i64) -> Result<i32, StoreError> {
    i32::try_from(id).map_err(|_| anyhow::anyhow!("site id {id} is beyond the lock keys").into())
}
