//! `cairn store copy`: moves a SQLite file onto PostgreSQL, for a company that outgrows
//! one box. Without a site, every site of the file goes onto an empty database, the ids
//! kept; with `--site`, one site goes onto a database that may serve other sites already,
//! its rows given fresh ids there (`site.rs`). Either way each table is copied in one
//! pass (PostgreSQL's binary COPY), in an order where every row finds what it refers to;
//! the few columns that point forward (a pass's task, a superseded result) are filled in
//! after. Then every table copied is read back and compared with what was written, and
//! the target's balances must equal the sums of its movements, all in the one
//! transaction: on any difference nothing is written. The source is only read.

mod remap;
mod site;

pub use site::copy_site;

use super::postgres::describe;
use anyhow::{Context, bail};
use indicatif::ProgressBar;
use rusqlite::types::Value;
use sha2::{Digest, Sha256};
use std::path::Path;
use std::sync::Arc;
use tokio_postgres::types::{ToSql, Type};

/// Tables in the order they are copied; every row's references are copied before it.
/// Sessions and sign-in throttling are left behind: people sign in again.
const TABLES: &[&str] = &[
    "site",
    "zone",
    "bin",
    "item",
    "pack",
    "lot",
    "movement",
    "balance",
    "balance_snapshot",
    "demo_shelf",
    "user_account",
    "user_role",
    "device",
    "api_token",
    "audit_event",
    "planning_settings",
    "frequency_policy",
    "site_calendar",
    "site_holiday",
    "abc_run",
    "item_class",
    "short_pick",
    "bin_count",
    "count_list",
    "count_run",
    "device_clock",
    "count_pass",
    "count_line",
    "count_line_undo",
    "sync_event",
    "netting_settings",
    "source_timing",
    "reason_code",
    "count_result",
    "count_review",
    "count_task",
    "count_task_recheck",
    "count_auto_adjustment",
    "accuracy_settings",
    "planner_input",
    "planner_group_default",
    "job_claim",
];

/// Columns that refer to rows copied later: written empty, then set once every table is in.
const LATER: &[(&str, &str)] = &[("count_pass", "task_id"), ("count_result", "superseded_by")];

/// Rows read from the file per COPY batch.
const CHUNK: usize = 20_000;
/// Rows read back from the target at a time.
const PORTAL_ROWS: i32 = 20_000;

/// What a copy moved.
#[derive(Debug, Clone, Default)]
pub struct CopyReport {
    /// Each table and its rows.
    pub tables: Vec<(String, u64)>,
    pub sites: i64,
    pub movements: u64,
    /// With `--site`: the site's people already in the target (the same account, kept),
    /// and what was checked against the file beyond the tables read back.
    pub site: Option<SiteReport>,
}

/// What a one-site copy adds to its report.
#[derive(Debug, Clone, Default)]
pub struct SiteReport {
    pub code: String,
    pub users_added: usize,
    pub users_kept: Vec<String>,
    /// The checks of the site's contents against the file, by what they compare.
    pub checked: Vec<&'static str>,
}

impl std::fmt::Display for CopyReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let rows: u64 = self.tables.iter().map(|t| t.1).sum();
        match &self.site {
            None => write!(
                f,
                "{} site(s), {} movements, {rows} rows in {} tables; every table read back \
                 equal, every balance equal to its movements",
                self.sites,
                self.movements,
                self.tables.len()
            ),
            Some(s) => {
                write!(
                    f,
                    "site {}, {} movements, {rows} rows in {} tables, {} user(s) added",
                    s.code,
                    self.movements,
                    self.tables.len(),
                    s.users_added
                )?;
                if !s.users_kept.is_empty() {
                    write!(
                        f,
                        ", {} already there and kept ({})",
                        s.users_kept.len(),
                        s.users_kept.join(", ")
                    )?;
                }
                write!(
                    f,
                    "; every table read back equal, every balance equal to its movements, and \
                     the site's {} equal to the file's",
                    s.checked.join(", ")
                )
            }
        }
    }
}

impl CopyReport {
    fn rows_of(&self, table: &str) -> u64 {
        self.tables.iter().find(|t| t.0 == table).map_or(0, |t| t.1)
    }
}

struct Column {
    name: String,
    ty: Type,
}

/// Copies every site of the SQLite file `from` (migrated to this build's schema first, as
/// any command would) onto the empty PostgreSQL database at `to`, the ids kept.
pub async fn copy(from: &Path, to: &str, progress: &ProgressBar) -> anyhow::Result<CopyReport> {
    let (src, target) = open_both(from, to).await?;
    let pg = target.client().await?;
    let held: i64 = pg
        .query_one(
            "select (select count(*) from site) + (select count(*) from user_account)",
            &[],
        )
        .await?
        .get(0);
    if held > 0 {
        bail!(
            "the target database already holds sites or users: copy onto an empty database, \
             or copy one site with --site (nothing was written)"
        );
    }
    let mut total = 0u64;
    for t in TABLES {
        total += src.query_row(&format!("select count(*) from {t}"), [], |r| {
            r.get::<_, i64>(0)
        })? as u64;
    }
    progress.set_length(total);
    let mut report = CopyReport::default();
    let mut digests = Vec::new();
    let mut pg = pg;
    let tx = pg.transaction().await?;
    for &table in TABLES {
        progress.set_message(table.to_string());
        let plan = TablePlan {
            table,
            cols: columns(&tx, table).await?,
            filter: String::new(),
            transform: None,
        };
        let (rows, digest) = copy_table(from, &tx, &plan, progress).await?;
        report.tables.push((table.to_string(), rows));
        digests.push((plan, digest));
    }
    for (table, col) in LATER {
        progress.set_message(format!("{table}.{col}"));
        let pairs = {
            let mut q = src.prepare(&format!(
                "select id, {col} from {table} where {col} is not null"
            ))?;
            q.query_map([], |r| Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?)))?
                .collect::<rusqlite::Result<Vec<_>>>()?
        };
        fill_later(&tx, table, col, &pairs).await?;
    }
    for &table in TABLES {
        if has_identity(&tx, table).await? {
            tx.execute(
                &format!(
                    "select setval(pg_get_serial_sequence('{table}', 'id'),
                                   coalesce((select max(id) from {table}), 0) + 1, false)"
                ),
                &[],
            )
            .await?;
        }
    }
    progress.set_message("reading every table back");
    for (plan, digest) in &digests {
        if &read_back(&tx, plan, "").await? != digest {
            bail!(
                "table {} read back differs from the file: nothing was written",
                plan.table
            );
        }
    }
    check_balanced(&tx, "").await?;
    tx.commit()
        .await
        .map_err(|e| anyhow::anyhow!(describe(&e)))?;
    progress.set_message("vacuuming and gathering the planner's statistics");
    analyze_copied(&pg, &report.tables).await?;
    report.sites = report.rows_of("site") as i64;
    report.movements = report.rows_of("movement");
    Ok(report)
}

/// Vacuums and gathers PostgreSQL's planner statistics of every table the copy wrote rows
/// into, as autovacuum would some time later: the first queries after a copy are planned
/// on what the tables now hold, and the ledger's covering index answers without visiting
/// the table (a bulk load leaves no page marked all-visible until a vacuum). Tables left
/// empty keep no statistics, as in a new database.
async fn analyze_copied(
    pg: &tokio_postgres::Client,
    tables: &[(String, u64)],
) -> anyhow::Result<()> {
    for (table, rows) in tables {
        if *rows > 0 {
            pg.batch_execute(&format!("vacuum (analyze) {table}"))
                .await?;
        }
    }
    Ok(())
}

/// Migrates the file to this build's schema (as any command would) and opens it for
/// reading; opens (and migrates) the target.
async fn open_both(
    from: &Path,
    to: &str,
) -> anyhow::Result<(rusqlite::Connection, super::postgres::PgStore)> {
    if !from.exists() {
        bail!("database {} does not exist", from.display());
    }
    let source = from.to_path_buf();
    tokio::task::spawn_blocking(move || {
        super::sqlite::SqliteStore::open(&source, Default::default()).map(drop)
    })
    .await??;
    let target = super::postgres::PgStore::open(to, Default::default())?;
    Ok((open_source(from)?, target))
}

/// Sets the forward references `pairs` (row id, value) of `table.col` once every table
/// is in.
async fn fill_later(
    tx: &tokio_postgres::Transaction<'_>,
    table: &str,
    col: &str,
    pairs: &[(i64, i64)],
) -> anyhow::Result<()> {
    let st = tx
        .prepare(&format!("update {table} set {col} = $2 where id = $1"))
        .await?;
    for (id, v) in pairs {
        tx.execute(&st, &[id, v]).await?;
    }
    Ok(())
}

/// Fails when a balance on the target differs from the sum of its movements; `bins`
/// narrows the check to the bins it selects (a `where` on `bin_id`, or empty for all).
async fn check_balanced(tx: &tokio_postgres::Transaction<'_>, bins: &str) -> anyhow::Result<()> {
    let (m_bins, b_bins) = if bins.is_empty() {
        (String::new(), String::new())
    } else {
        (format!("where {bins}"), format!("and b.{bins}"))
    };
    let unbalanced: i64 = tx
        .query_one(
            &format!(
                "select
                   (select count(*) from (select bin_id, item_id, lot, sum(qty) as s
                                          from movement {m_bins}
                                          group by bin_id, item_id, lot) m
                      left join balance b using (bin_id, item_id, lot)
                    where coalesce(b.qty, 0) <> m.s)
                 + (select count(*) from balance b where b.qty <> 0 {b_bins} and not exists
                      (select 1 from movement m where m.bin_id = b.bin_id
                         and m.item_id = b.item_id and m.lot = b.lot))"
            ),
            &[],
        )
        .await?
        .get(0);
    if unbalanced > 0 {
        bail!(
            "{unbalanced} balance(s) differ from their movements on the target: nothing was written"
        );
    }
    Ok(())
}

async fn columns(tx: &tokio_postgres::Transaction<'_>, table: &str) -> anyhow::Result<Vec<Column>> {
    let rows = tx
        .query(
            "select column_name::text, data_type::text from information_schema.columns
             where table_schema = current_schema() and table_name = $1
             order by ordinal_position",
            &[&table],
        )
        .await?;
    rows.iter()
        .map(|r| {
            let (name, ty): (String, String) = (r.get(0), r.get(1));
            let ty = match ty.as_str() {
                "bigint" => Type::INT8,
                "boolean" => Type::BOOL,
                "text" => Type::TEXT,
                "double precision" => Type::FLOAT8,
                other => bail!("column {table}.{name} has a type the copy does not know: {other}"),
            };
            Ok(Column { name, ty })
        })
        .collect()
}

async fn has_identity(tx: &tokio_postgres::Transaction<'_>, table: &str) -> anyhow::Result<bool> {
    Ok(tx
        .query_one(
            "select exists (select 1 from information_schema.columns
                            where table_schema = current_schema() and table_name = $1
                              and column_name = 'id' and is_identity = 'YES')",
            &[&table],
        )
        .await?
        .get(0))
}

/// One value as PostgreSQL takes it for a column of type `ty`.
#[derive(Debug, Clone, PartialEq)]
enum Cell {
    Null(NullOf),
    Int(i64),
    Bool(bool),
    Text(String),
    Float(f64),
}

/// The column type of an empty value (binary COPY types every value, empty ones too).
#[derive(Debug, Clone, Copy, PartialEq)]
enum NullOf {
    Int,
    Bool,
    Text,
    Float,
}

impl NullOf {
    fn of(ty: &Type) -> NullOf {
        match ty {
            t if *t == Type::BOOL => NullOf::Bool,
            t if *t == Type::TEXT => NullOf::Text,
            t if *t == Type::FLOAT8 => NullOf::Float,
            _ => NullOf::Int,
        }
    }
}

impl Cell {
    fn of(v: Value, ty: &Type, at: &str) -> anyhow::Result<Cell> {
        Ok(match (v, ty) {
            (Value::Null, t) => Cell::Null(NullOf::of(t)),
            (Value::Integer(i), t) if *t == Type::INT8 => Cell::Int(i),
            (Value::Integer(i), t) if *t == Type::BOOL => Cell::Bool(i != 0),
            (Value::Integer(i), t) if *t == Type::FLOAT8 => Cell::Float(i as f64),
            (Value::Real(x), t) if *t == Type::FLOAT8 => Cell::Float(x),
            (Value::Text(s), t) if *t == Type::TEXT => Cell::Text(s),
            (v, t) => bail!("{at}: a {v:?} cannot go into a {t} column"),
        })
    }

    /// Reads column `i` of a PostgreSQL row of a type the copy knows.
    fn from_pg(r: &tokio_postgres::Row, i: usize) -> anyhow::Result<Cell> {
        let ty = r.columns()[i].type_();
        Ok(match ty {
            t if *t == Type::INT8 => r
                .try_get::<_, Option<i64>>(i)?
                .map_or(Cell::Null(NullOf::Int), Cell::Int),
            t if *t == Type::INT4 => r
                .try_get::<_, Option<i32>>(i)?
                .map_or(Cell::Null(NullOf::Int), |v| Cell::Int(v.into())),
            t if *t == Type::BOOL => r
                .try_get::<_, Option<bool>>(i)?
                .map_or(Cell::Null(NullOf::Bool), Cell::Bool),
            t if *t == Type::FLOAT8 => r
                .try_get::<_, Option<f64>>(i)?
                .map_or(Cell::Null(NullOf::Float), Cell::Float),
            t if *t == Type::TEXT => r
                .try_get::<_, Option<String>>(i)?
                .map_or(Cell::Null(NullOf::Text), Cell::Text),
            other => bail!(
                "column {} is of a type the copy does not know: {other}",
                r.columns()[i].name()
            ),
        })
    }

    fn feed(&self, h: &mut Sha256) {
        match self {
            Cell::Null(_) => h.update(b"n"),
            Cell::Int(i) => h.update(format!("i{i}")),
            Cell::Bool(b) => h.update(format!("b{b}")),
            Cell::Text(s) => h.update(format!("t{}:{s}", s.len())),
            Cell::Float(x) => h.update(format!("f{}", x.to_bits())),
        }
        h.update(b"\x1f");
    }

    fn sql(&self) -> &(dyn ToSql + Sync) {
        match self {
            Cell::Null(NullOf::Int) => &None::<i64>,
            Cell::Null(NullOf::Bool) => &None::<bool>,
            Cell::Null(NullOf::Text) => &None::<String>,
            Cell::Null(NullOf::Float) => &None::<f64>,
            Cell::Int(i) => i,
            Cell::Bool(b) => b,
            Cell::Text(s) => s,
            Cell::Float(x) => x,
        }
    }
}

/// A digest of a set of rows that does not depend on their order (the sum of each
/// row's SHA-256, lane by lane), with their count: both sides of a copy are read in
/// whatever order each engine gives, and a one-site copy changes the ids rows sort by.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
struct RowsDigest {
    rows: u64,
    sum: [u64; 4],
}

impl RowsDigest {
    fn add(&mut self, row: &[Cell]) {
        let mut h = Sha256::new();
        for cell in row {
            cell.feed(&mut h);
        }
        let d = h.finalize();
        for (lane, bytes) in self.sum.iter_mut().zip(d.chunks_exact(8)) {
            let v = u64::from_le_bytes(bytes.try_into().expect("chunks of 8 bytes"));
            *lane = lane.wrapping_add(v);
        }
        self.rows += 1;
    }
}

/// A change made to each row between reading it from the file and writing it (a
/// one-site copy's new ids); it may refuse a row.
type Transform = Arc<dyn Fn(&mut [Cell]) -> anyhow::Result<()> + Send + Sync>;

/// How one table is copied: its columns, which rows (`filter`, a `where` clause both
/// engines read, or empty for all) and what changes on the way.
struct TablePlan {
    table: &'static str,
    cols: Vec<Column>,
    filter: String,
    transform: Option<Transform>,
}

impl TablePlan {
    fn select(&self, filter: &str) -> String {
        let names: Vec<&str> = self.cols.iter().map(|c| c.name.as_str()).collect();
        let filter = if filter.is_empty() {
            String::new()
        } else {
            format!(" where {filter}")
        };
        format!("select {} from {}{filter}", names.join(", "), self.table)
    }
}

/// Copies the rows `plan` selects; returns how many and the digest of what was written
/// (forward references included, as they will read back once filled in).
async fn copy_table(
    from: &Path,
    tx: &tokio_postgres::Transaction<'_>,
    plan: &TablePlan,
    progress: &ProgressBar,
) -> anyhow::Result<(u64, RowsDigest)> {
    let table = plan.table;
    let names: Vec<String> = plan.cols.iter().map(|c| c.name.clone()).collect();
    let types: Vec<Type> = plan.cols.iter().map(|c| c.ty.clone()).collect();
    let later: Vec<bool> = names
        .iter()
        .map(|n| LATER.iter().any(|(t, c)| *t == table && c == n))
        .collect();
    // One statement walks the table on a blocking thread and hands over chunks.
    let (send, mut chunks) = tokio::sync::mpsc::channel::<Vec<Vec<Cell>>>(2);
    let (path, sql, read_types) = (from.to_path_buf(), plan.select(&plan.filter), types.clone());
    let transform = plan.transform.clone();
    let reader = tokio::task::spawn_blocking(move || -> anyhow::Result<RowsDigest> {
        let c = open_source(&path)?;
        let mut q = c
            .prepare(&sql)
            .with_context(|| format!("reading {table}"))?;
        let mut it = q.query([])?;
        let mut digest = RowsDigest::default();
        let mut chunk = Vec::with_capacity(CHUNK);
        while let Some(r) = it.next()? {
            let mut row = Vec::with_capacity(read_types.len());
            for (i, ty) in read_types.iter().enumerate() {
                row.push(Cell::of(
                    r.get(i)?,
                    ty,
                    &format!("{table} column {}", i + 1),
                )?);
            }
            if let Some(t) = &transform {
                t(&mut row).with_context(|| format!("copying {table}"))?;
            }
            digest.add(&row);
            for (i, ty) in read_types.iter().enumerate() {
                if later[i] {
                    row[i] = Cell::Null(NullOf::of(ty));
                }
            }
            chunk.push(row);
            if chunk.len() == CHUNK
                && send
                    .blocking_send(std::mem::replace(&mut chunk, Vec::with_capacity(CHUNK)))
                    .is_err()
            {
                bail!("the copy stopped reading {table}");
            }
        }
        if !chunk.is_empty() && send.blocking_send(chunk).is_err() {
            bail!("the copy stopped reading {table}");
        }
        Ok(digest)
    });
    let mut rows = 0u64;
    let written = async {
        while let Some(chunk) = chunks.recv().await {
            let sink = tx
                .copy_in(&format!(
                    "copy {table} ({}) from stdin binary",
                    names.join(", ")
                ))
                .await?;
            let writer = tokio_postgres::binary_copy::BinaryCopyInWriter::new(sink, &types);
            tokio::pin!(writer);
            for row in &chunk {
                let vals: Vec<&(dyn ToSql + Sync)> = row.iter().map(Cell::sql).collect();
                writer.as_mut().write(&vals).await?;
            }
            writer.finish().await?;
            rows += chunk.len() as u64;
            progress.inc(chunk.len() as u64);
        }
        Ok::<_, tokio_postgres::Error>(())
    }
    .await;
    // Whatever stopped first, the reader's own error says more than a closed channel.
    drop(chunks);
    let digest = reader.await?;
    written.map_err(|e| refused_row(table, &e))?;
    Ok((rows, digest?))
}

/// Says why PostgreSQL refused a copied row, naming the table; a unique value already
/// held by the target is said as such (a digest of a secret is not repeated).
fn refused_row(table: &str, e: &tokio_postgres::Error) -> anyhow::Error {
    if let Some(db) = e
        .as_db_error()
        .filter(|_| super::postgres::is_unique_violation(e))
    {
        let constraint = db.constraint().unwrap_or("");
        let which = match db.detail() {
            Some(d) if !constraint.contains("hash") => format!(" ({d})"),
            _ => String::new(),
        };
        return anyhow::anyhow!(
            "table {table}: the target already holds a row with the same unique value{which}: \
             nothing was written"
        );
    }
    anyhow::anyhow!("table {table}: {}", describe(e))
}

fn open_source(path: &Path) -> anyhow::Result<rusqlite::Connection> {
    rusqlite::Connection::open_with_flags(
        path,
        rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .with_context(|| format!("cannot read {}", path.display()))
}

/// Reads the rows `filter` selects of a copied table back and digests them as the copy
/// did (with the forward references filled in by then).
async fn read_back(
    tx: &tokio_postgres::Transaction<'_>,
    plan: &TablePlan,
    filter: &str,
) -> anyhow::Result<RowsDigest> {
    digest_pg(tx, &plan.select(filter), &[]).await
}

/// Digests what `sql` selects on the target, [`PORTAL_ROWS`] rows at a time (a table of
/// millions of movements is never held whole).
async fn digest_pg(
    tx: &tokio_postgres::Transaction<'_>,
    sql: &str,
    params: &[&(dyn ToSql + Sync)],
) -> anyhow::Result<RowsDigest> {
    let portal = tx.bind(sql, params).await?;
    let mut digest = RowsDigest::default();
    let mut row = Vec::new();
    loop {
        let rows = tx.query_portal(&portal, PORTAL_ROWS).await?;
        for r in &rows {
            row.clear();
            for i in 0..r.len() {
                row.push(Cell::from_pg(r, i)?);
            }
            digest.add(&row);
        }
        if rows.len() < PORTAL_ROWS as usize {
            return Ok(digest);
        }
    }
}
