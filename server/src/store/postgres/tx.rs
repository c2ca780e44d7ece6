//! One write transaction as the domain's transaction traits see it: the PostgreSQL
//! transaction, the runtime its statements are awaited on, and the ledger's snapshot
//! spacing. Each trait method is one statement (or one row-building step).

use deadpool_postgres::{GenericClient, Transaction};
use std::cell::RefCell;
use std::collections::HashMap;
use std::time::{Duration, Instant};
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
    /// Statements run and the time spent awaiting them, by SQL text: kept only when
    /// `CAIRN_PG_TALLY` is set, and printed to stderr when the transaction ends.
    tally: Option<RefCell<HashMap<String, (u64, Duration)>>>,
}

/// A pooled connection outside any transaction, for reads written as synchronous code.
pub type PgRead<'a> = PgTx<'a, deadpool_postgres::Client>;

impl<'a, C: GenericClient> PgTx<'a, C> {
    pub fn new(tx: &'a C, rt: &'a Handle, snapshot_every: i64) -> Self {
        Self {
            tx,
            rt,
            snapshot_every,
            tally: tally_wanted().then(RefCell::default),
        }
    }

    /// Awaits one statement's future, counting it in the tally when one is kept.
    fn run<T>(&self, sql: &str, f: impl std::future::Future<Output = T>) -> T {
        let Some(tally) = &self.tally else {
            return self.rt.block_on(f);
        };
        let started = Instant::now();
        let out = self.rt.block_on(f);
        let mut t = tally.borrow_mut();
        let e = t.entry(sql.to_owned()).or_default();
        e.0 += 1;
        e.1 += started.elapsed();
        out
    }

    /// Runs a statement (prepared once per connection); returns the rows it changed.
    pub fn execute(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
    ) -> Result<u64, tokio_postgres::Error> {
        self.run(sql, async {
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
        self.run(sql, async {
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
        self.run(sql, async {
            let st = self.tx.prepare_cached(sql).await?;
            self.tx.query_opt(&st, params).await
        })
    }

    /// Awaits statements sent together (futures of [`PgTx::rows`] joined): each goes to
    /// the server as soon as it is polled, so the batch costs one round trip, not one a
    /// statement. `what` names the batch in the statement tally.
    pub fn together<T>(&self, what: &str, f: impl std::future::Future<Output = T>) -> T {
        self.run(what, f)
    }

    /// A query as a future, for [`PgTx::together`].
    pub async fn rows(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
    ) -> Result<Vec<Row>, tokio_postgres::Error> {
        let st = self.tx.prepare_cached(sql).await?;
        self.tx.query(&st, params).await
    }

    /// Runs statements without parameters (savepoints).
    pub fn batch(&self, sql: &str) -> Result<(), tokio_postgres::Error> {
        self.run(sql, self.tx.batch_execute(sql))
    }

    /// Runs a query that returns exactly one row.
    pub fn query_one(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
    ) -> Result<Row, tokio_postgres::Error> {
        self.run(sql, async {
            let st = self.tx.prepare_cached(sql).await?;
            self.tx.query_one(&st, params).await
        })
    }
}

impl<C: GenericClient> Drop for PgTx<'_, C> {
    fn drop(&mut self) {
        let Some(tally) = self.tally.take() else {
            return;
        };
        let mut rows: Vec<_> = tally.into_inner().into_iter().collect();
        rows.sort_by_key(|r| std::cmp::Reverse(r.1.1));
        let (n, d) = rows
            .iter()
            .fold((0, Duration::ZERO), |(n, d), (_, (c, t))| (n + c, d + *t));
        eprintln!(
            "statements: {n} in {:.3} s awaited ({} distinct)",
            d.as_secs_f64(),
            rows.len()
        );
        for (sql, (c, t)) in rows.iter().take(25) {
            let one_line: String = sql.split_whitespace().collect::<Vec<_>>().join(" ");
            eprintln!(
                "{c:>9} {:>9.3} s {:>7.1} µs  {}",
                t.as_secs_f64(),
                t.as_secs_f64() * 1e6 / *c as f64,
                one_line.chars().take(110).collect::<String>()
            );
        }
    }
}

/// Whether statements are tallied (`CAIRN_PG_TALLY` set): a diagnostic for finding where
/// a workflow's round trips go.
fn tally_wanted() -> bool {
    static WANTED: std::sync::OnceLock<bool> = std::sync::OnceLock::new();
    *WANTED.get_or_init(|| std::env::var_os("CAIRN_PG_TALLY").is_some())
}

/// What a method of the PostgreSQL store answers until it is written for this engine.
pub fn not_yet(what: &str) -> crate::store::StoreError {
    crate::store::StoreError::Internal(anyhow::anyhow!(
        "{what} does not run on PostgreSQL yet: use a SQLite file for this"
    ))
}

/// The ledger's last movement id (0 for an empty ledger).
pub(crate) const WATERMARK_SQL: &str = "select coalesce(max(id), 0) from movement";

/// Reads [`WATERMARK_SQL`]'s answer.
pub(crate) fn watermark_row(rows: &[Row]) -> Result<i64, crate::store::StoreError> {
    let r = rows
        .first()
        .ok_or_else(|| anyhow::anyhow!("the watermark query answered no row"))?;
    Ok(r.try_get(0)?)
}

impl crate::ledger::WatermarkTx for PgTx<'_> {
    fn watermark(&self) -> Result<i64, crate::store::StoreError> {
        watermark_row(&self.query(WATERMARK_SQL, &[])?)
    }
}
