//! One write transaction as the domain's transaction traits see it: the PostgreSQL
//! transaction, the runtime its statements are awaited on, and the ledger's snapshot
//! spacing. Each trait method is one statement (or one row-building step).

use deadpool_postgres::{GenericClient, Transaction};
use tokio::runtime::Handle;
use tokio_postgres::Row;
use tokio_postgres::types::ToSql;

/// A write transaction for the workflows (see the module's words); over a pooled client
/// instead of a transaction ([`PgRead`]) the same helpers serve the synchronous reads.
pub struct PgTx<'a, C: GenericClient = Transaction<'a>> {
    tx: &'a C,
    rt: &'a Handle,
    /// Movements of one key between balance snapshots (the ledger's writes read it).
    pub(crate) snapshot_every: i64,
}

/// A pooled connection outside any transaction, for reads written as synchronous code.
pub type PgRead<'a> = PgTx<'a, deadpool_postgres::Client>;

impl<'a, C: GenericClient> PgTx<'a, C> {
    pub fn new(tx: &'a C, rt: &'a Handle, snapshot_every: i64) -> Self {
        Self {
            tx,
            rt,
            snapshot_every,
        }
    }

    /// Runs a statement (prepared once per connection); returns the rows it changed.
    pub fn execute(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
    ) -> Result<u64, tokio_postgres::Error> {
        self.rt.block_on(async {
            let st = self.tx.prepare_cached(sql).await?;
            self.tx.execute(&st, params).await
        })
    }

    /// Runs a query (prepared once per connection); returns its rows.
    pub fn query(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
    ) -> Result<Vec<Row>, tokio_postgres::Error> {
        self.rt.block_on(async {
            let st = self.tx.prepare_cached(sql).await?;
            self.tx.query(&st, params).await
        })
    }

    /// Runs a query that returns at most one row.
    pub fn query_opt(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
    ) -> Result<Option<Row>, tokio_postgres::Error> {
        self.rt.block_on(async {
            let st = self.tx.prepare_cached(sql).await?;
            self.tx.query_opt(&st, params).await
        })
    }

    /// Runs statements without parameters (savepoints).
    pub fn batch(&self, sql: &str) -> Result<(), tokio_postgres::Error> {
        self.rt.block_on(self.tx.batch_execute(sql))
    }

    /// Runs a query that returns exactly one row.
    pub fn query_one(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
    ) -> Result<Row, tokio_postgres::Error> {
        self.rt.block_on(async {
            let st = self.tx.prepare_cached(sql).await?;
            self.tx.query_one(&st, params).await
        })
    }
}

/// What a method of the PostgreSQL store answers until it is written for this engine.
pub fn not_yet(what: &str) -> crate::store::StoreError {
    crate::store::StoreError::Internal(anyhow::anyhow!(
        "{what} does not run on PostgreSQL yet: use a SQLite file for this"
    ))
}

impl crate::ledger::WatermarkTx for PgTx<'_> {
    fn watermark(&self) -> Result<i64, crate::store::StoreError> {
        Ok(self
            .query_one("select coalesce(max(id), 0) from movement", &[])?
            .get(0))
    }
}
